//! Statements about whole-graph models and synthetic data: `joint`, `fit`
//! of a joint model, `intervene`, `simulate`, `recover`, `calibrate`,
//! `prior check` and `check`.
//!
//! Like the question statements ([`super::questions`]), each one reads its
//! header, calls [`crate::query`] and renders tables, notes, the query's
//! JSON and a figure. Checks that refit a model (`recover`, `calibrate`)
//! use the options written after `with`, else the method of the model's
//! latest fit, else a Laplace approximation, and say which.

use serde_json::{json, Value};

use super::data::{describe_loaded, is_name};
use super::fitting::{method_settings, parameter_units, rows_behind};
use super::interval_option;
use super::grammar::{CALIBRATE, CHECK, FIT, INTERVENE, JOINT, PRIOR_CHECK, RECOVER, SIMULATE};
use super::questions::{
    bounds, check_cancel, joint_progress, method_or, query_error, render, sampler_progress, stopped_or, summary_cells, summary_grid,
    CAUSAL_NOTE, DEFAULT_SEED,
};
use super::{form_error, header, option_text};
use crate::cells::figures::{self, GraphMarks};
use crate::cells::fit_summary;
use crate::cells::format::num;
use crate::cells::output::{CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::{suggest, RunControl, Session, SimulationRecord};
use crate::draws::SummarySpec;
use crate::infer::fit::{Method, LAPLACE_DRAWS, LAPLACE_SEED};
use crate::model::prior::short_number;
use crate::model::{Input, Model};
use crate::plot::{DensityArrangement, ParameterDraws, Quantity};
use crate::query::{
    build_joint, calibrate_with_progress, fit_joint_with_progress, parse_mechanism_line, posterior_predictive,
    prior_predictive, recover_fitted, ContrastRequest, ContrastSummary, InterventionRequest, Mechanism, NodeModel,
    QueryError, Simulation, SimulationSettings,
};
use crate::table::ColumnData;

/// Units simulated under each setting for a true intervention effect.
const TRUTH_ROWS: usize = 20_000;
/// Outcome sets simulated by `prior check` and `check` by default.
const DEFAULT_SETS: usize = 200;
/// The most outcome sets a predictive check draws (each is a full set of rows).
const MAX_SETS: u64 = 100_000;
/// Most coefficients drawn in one node's figure of a joint fit (the
/// estimates table lists them all).
const NODE_FIGURE_COEFFICIENTS: usize = 40;

fn laplace_default() -> Method {
    Method::Laplace { draws: LAPLACE_DRAWS, seed: LAPLACE_SEED }
}

fn to_json<T: serde::Serialize>(value: &T) -> Value {
    serde_json::to_value(value).unwrap_or(Value::Null)
}

/// Whether `fit NAME` names a joint model (and no model of that name).
pub(crate) fn names_joint(session: &Session, head: &str) -> bool {
    head.split_whitespace().nth(1).is_some_and(|n| session.joints.contains_key(n) && !session.models.contains_key(n))
}

/// `joint NAME = GRAPH using TABLE[:]` with optional per-node model lines.
pub(crate) fn joint(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([name, g, t], _) = header(st, &JOINT)?;
    if !is_name(name) {
        return Err(form_error(st, JOINT.usage));
    }
    if session.models.contains_key(name) {
        return Err(CellError::at(line, format!("a model is already named {name}; give the joint model another name")));
    }
    let graph = session.require_graph(g, line)?;
    let table = session.require_table(t, line)?;
    let mut overrides: Vec<(String, Vec<String>)> = Vec::new();
    for body in &st.body {
        let first = body.text.split_whitespace().next().unwrap_or("");
        if crate::model::spec::LINE_WORDS.contains(&first) {
            let Some((_, lines)) = overrides.last_mut() else {
                return Err(CellError::at(body.number, format!("`{first}` must follow a node's model line such as `girth from rootstock`")));
            };
            lines.push(body.text.clone());
        } else if graph.nodes().iter().any(|n| n.name == first) {
            if overrides.iter().any(|(n, _)| n == first) {
                return Err(CellError::at(body.number, format!("{first} already has a model line above; keep one per node")));
            }
            overrides.push((first.to_string(), vec![body.text.clone()]));
        } else {
            let nodes: Vec<&str> = graph.nodes().iter().map(|n| n.name.as_str()).collect();
            return Err(CellError::at(
                body.number,
                format!("`{first}` is not a node of graph {g} (its nodes: {}); start a model line with the node it models", nodes.join(", ")),
            ));
        }
    }
    let model = build_joint(name, graph, table, &overrides).map_err(|e| query_error(e, line))?;
    let heading = format!("joint {name}: one model per observed node of graph {g}, from table {t} ({} nodes)", model.nodes.len());
    let mut grid = Grid::new(&["node", "parents", "model"]);
    let summary = model.summary();
    for s in &summary {
        let parents = if s.parents.is_empty() { "none".to_string() } else { s.parents.join(", ") };
        grid.push(vec![s.node.clone(), parents, s.model.clone()]);
    }
    let mut notes: Vec<String> = model.warnings.iter().map(|w| format!("warning: {w}")).collect();
    if !overrides.is_empty() {
        let listed: Vec<&str> = overrides.iter().map(|(n, _)| n.as_str()).collect();
        notes.push(format!("models written in the cell for: {}", listed.join(", ")));
    }
    notes.push(format!("each node's model shares no parameter with the others; run `fit {name}` to fit them all"));
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let svg = figures::graph(graph, &format!("joint {name}"), &GraphMarks::default()).ok();
    let json = json!({"joint": name, "graph": g, "table": t, "nodes": to_json(&summary), "warnings": model.warnings});
    session.joint_fits.remove(name);
    session.joints.insert(name.to_string(), model);
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(json) }])
}

/// `fit NAME [with …]` for a joint model: every node's regression.
pub(crate) fn fit_joint(
    session: &mut Session,
    st: &Statement,
    control: &RunControl,
    warnings: &mut Vec<String>,
) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([name], options) = header(st, &FIT)?;
    let (mass, options) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let method = method_or(&options, Method::Nuts(Default::default()), line)?;
    let joint = &session.joints[name];
    let joint_table = session.tables.get(&joint.table);
    let label = format!("fit {name}");
    let progress = joint_progress(control, &label, "");
    let started = std::time::Instant::now();
    let fit = fit_joint_with_progress(joint, &method, control.cancel, &progress).map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let spec = SummarySpec { mass, hdi: false };
    let mut nodes_json = Vec::new();
    let mut notes = Vec::new();
    let mut node_summaries = Vec::new();
    let mut fitted = Vec::new();
    for (node, node_fit) in joint.nodes.iter().zip(&fit.fits) {
        let Some(f) = node_fit else {
            let how = match &node.model {
                NodeModel::LevelShares { .. } => "simulated from its level shares in the data; nothing to fit".to_string(),
                NodeModel::Regression { .. } => "not fitted".to_string(),
            };
            notes.push(format!("{}: {how}", node.name));
            nodes_json.push(json!({"node": node.name, "estimates": [], "note": how}));
            continue;
        };
        let summaries = f.draws.summarise(&spec).map_err(|e| CellError::at(line, format!("{label}: {e}")))?;
        let (units, behind) = match &node.model {
            NodeModel::Regression { model, .. } => {
                (parameter_units(model, joint_table, &f.draws.names), rows_behind(model, &f.draws.names))
            }
            NodeModel::LevelShares { .. } => (vec![None; f.draws.names.len()], vec![None; f.draws.names.len()]),
        };
        let estimates: Vec<Value> = summaries
            .iter()
            .zip(units.iter().zip(&behind))
            .map(|(s, (u, b))| fit_summary::estimate_json(&s.name, u.as_deref(), *b, s))
            .collect();
        let node_health = fit_summary::health(&[(f, f.draws.names.clone())]).map(|h| h.json);
        warnings.extend(f.warnings.iter().map(|w| format!("{label}, node {}: {w}", node.name)));
        nodes_json.push(json!({"node": node.name, "estimates": estimates, "health": node_health, "warnings": f.warnings}));
        fitted.push((f, f.draws.names.iter().map(|p| figure_label(&node.name, p)).collect::<Vec<_>>()));
        node_summaries.push((node.name.clone(), summaries, units, behind));
    }
    let rows: Vec<fit_summary::EstimateRow> = node_summaries
        .iter()
        .flat_map(|(node, summaries, units, behind)| {
            summaries.iter().zip(units.iter().zip(behind)).map(move |(s, (u, b))| fit_summary::EstimateRow {
                lead: vec![node.clone(), s.name.clone()],
                unit: u.clone(),
                rows_behind: *b,
                summary: s,
            })
        })
        .collect();
    let grid = fit_summary::estimates_grid(&["node", "parameter"], &rows, mass);
    let health = fit_summary::health(&fitted);
    notes.push("each fitted node's parameters are drawn in a figure of their own below (spreads left out: they are on another scale)".to_string());
    notes.push(format!("each node's regression gets its own seed stream derived from seed {}", method_seed(&method)));
    notes.push(format!("intervals are central {}% quantile intervals of the draws", short_number(mass * 100.0)));
    if let Some(h) = &health {
        notes.push(h.sentence.clone());
    }
    for (node, f) in joint.nodes.iter().zip(&fit.fits) {
        if let Some(f) = f {
            notes.extend(f.warnings.iter().map(|w| format!("warning ({}): {w}", node.name)));
        }
    }
    let seconds = started.elapsed().as_secs_f64();
    let heading = format!("fit {name}: {} node regressions in {seconds:.2} s — {}", fit.fits.iter().flatten().count(), method.describe());
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let figures = node_figures(name, joint, &fit);
    let json = json!({
        "joint": name, "method": method_name(&method), "seed": method_seed(&method),
        "settings": method_settings(&method), "interval_mass": mass, "nodes": nodes_json,
        "health": health.map(|h| h.json), "seconds": seconds,
    });
    session.joint_fits.insert(name.to_string(), fit);
    let mut displays = vec![Display { plain, html: Some(html), svg: None, json: Some(json) }];
    displays.extend(figures);
    Ok(displays)
}

/// One figure per fitted node of a joint model: the posterior densities of
/// its coefficients (at most [`NODE_FIGURE_COEFFICIENTS`], the sentence
/// beside it saying how many are left out), named as the fit's table
/// names them.
fn node_figures(name: &str, joint: &crate::query::JointModel, fit: &crate::query::JointFit) -> Vec<Display> {
    let mut out = Vec::new();
    for (node, node_fit) in joint.nodes.iter().zip(&fit.fits) {
        let (NodeModel::Regression { model, .. }, Some(f)) = (&node.model, node_fit) else { continue };
        let coefficients = model.coefficient_names();
        let labels: Vec<String> =
            coefficients.iter().take(NODE_FIGURE_COEFFICIENTS).map(|p| figure_label(&node.name, p)).collect();
        let params: Vec<ParameterDraws> = coefficients
            .iter()
            .zip(&labels)
            .filter_map(|(p, label)| f.draws.get(p).map(|d| ParameterDraws { name: label, draws: d }))
            .collect();
        let left = coefficients.len() - labels.len();
        let subject = format!("{name}, node {}", node.name);
        let Ok(svg) = crate::plot::posterior_figure(&subject, &Quantity::new("parameter value"), &params, DensityArrangement::Stacked) else {
            continue;
        };
        let mut text = format!("{subject}: posterior densities of its {} coefficients", labels.len());
        if left > 0 {
            text.push_str(&format!(" (the first {} of {}; the table lists them all)", labels.len(), coefficients.len()));
        }
        out.push(Display { plain: text, html: None, svg: Some(svg), json: None });
    }
    out
}

fn method_seed(method: &Method) -> u64 {
    match method {
        Method::Laplace { seed, .. } => *seed,
        Method::Nuts(s) => s.seed,
    }
}

fn method_name(method: &Method) -> &'static str {
    match method {
        Method::Laplace { .. } => "laplace",
        Method::Nuts(_) => "nuts",
    }
}

/// A node parameter's name in a joint fit's health sentence and node
/// figures: prefixed by its node,
/// unless it already starts with it (a levels-family coefficient such as
/// `form[shrub vs herb]: soil[sand]`; no other parameter is named after its
/// own node, whose parents are other nodes).
fn figure_label(node: &str, parameter: &str) -> String {
    if parameter.starts_with(&format!("{node}[")) {
        parameter.to_string()
    } else {
        format!("{node}: {parameter}")
    }
}

/// `intervene NAME: set X v1 vs v0, watch Y[, Z] [rows N] [seed S]`.
pub(crate) fn intervene(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let (name, mut request, mass) =
        read_intervention(st.head(), line).map_err(|m| CellError::at(line, format!("{m}; the form is: {}", INTERVENE.usage)))?;
    request.mass = session.interval_mass(mass);
    let joint = session.joints.get(name).ok_or_else(|| {
        CellError::at(line, format!("there is no joint model named {name}{}", suggest(name, session.joints.keys())))
    })?;
    let fit = session
        .joint_fits
        .get(name)
        .ok_or_else(|| CellError::at(line, format!("joint model {name} is not fitted yet; run `fit {name}` first")))?;
    let table = session.require_table(&joint.table, line)?;
    let result = crate::query::intervene_with_cancel(joint, fit, table, &request, control.cancel)
        .map_err(|e| stopped_or(control, &format!("intervene {name}"), line, e))?;
    let heading = format!("intervene {name}: {}, over {}", result.intervention, result.rows_source);
    let mut grid = summary_grid(&["watched"], result.mass);
    for w in &result.watched {
        let s = ContrastSummary { mean: w.mean, lower: w.lower, upper: w.upper, share_above_zero: w.share_above_zero, share_below_zero: w.share_below_zero, mass: result.mass };
        let mut row = vec![w.label()];
        row.extend(summary_cells(&s, w.unit.as_deref()));
        grid.push(row);
    }
    let mut notes = intervention_route_notes(&result, &request.variable);
    notes.push(format!("the two settings share each draw and its noise (seed {}); {}s of the per-draw changes", result.seed, result.interval));
    if result.watched.iter().any(|w| w.level.is_some()) {
        notes.push("a watched category gives one row per level: the change in the share of rows at that level, each row's level drawn from the softmax probabilities of its node model".to_string());
    }
    notes.extend(result.pooled.iter().cloned());
    notes.extend(result.warnings.iter().map(|w| format!("warning: {w}")));
    notes.push(CAUSAL_NOTE.to_string());
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let svg = figures::intervention(&format!("{name}: {}", result.intervention), table, &result.watched).ok();
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(to_json(&result)) }])
}

/// How the intervention was simulated: through the joint model's node
/// models, or through each watched node's identifying formula (with the
/// formula and the regressions fitted for it).
fn intervention_route_notes(result: &crate::query::InterventionResult, x: &str) -> Vec<String> {
    if result.route != crate::query::FORMULA_ROUTE {
        let simulated = if result.simulated.is_empty() { "none".to_string() } else { result.simulated.join(", ") };
        return vec![format!(
            "each draw sets {x} in every row, keeps the nodes it does not cause as observed, and simulates {simulated} from their node models; the row means under the two settings are subtracted"
        )];
    }
    let mut notes = vec![format!(
        "hidden nodes touch what the joint model would simulate, so each watched node's change comes from its identifying formula \
         (Shpitser & Pearl 2006), evaluated as `ask total effect … using` does: its conditionals fitted as regressions with the joint fit's method, \
         then per draw {x} set in every row and the formula's other nodes drawn in its order"
    )];
    for f in &result.formulas {
        notes.push(format!("{}; fitted: {}", f.formula, f.fitted.join(" | ")));
        if !f.from_rows.is_empty() {
            notes.push(format!("{}'s formula takes {} from each row", f.node, f.from_rows.join(", ")));
        }
    }
    notes
}

/// Read `intervene NAME: set X v1 vs v0, watch Y, Z [rows N] [seed S] [intervals P%]`
/// (the interval's mass is returned apart, `None` when not written).
fn read_intervention(head: &str, line: usize) -> Result<(&str, InterventionRequest, Option<f64>), String> {
    let no_watch = "name the nodes to watch after `, watch`";
    let ([name, variable, to, from], watch) = INTERVENE.read_n(head).map_err(|at| match at.slot {
        0..=2 => format!("cannot read \"{head}\""),
        3 => "start with `set X v1 vs v0`".to_string(),
        _ if !head.contains(" watch ") => no_watch.to_string(),
        _ => {
            let set = head.split_once(':').map_or("", |(_, r)| r).trim();
            let set = set.strip_prefix("set").unwrap_or(set).split(" watch ").next().unwrap_or("");
            format!("cannot read `set {}`; write `set X v1 vs v0`", set.trim_end().trim_end_matches(',').split_whitespace().collect::<Vec<_>>().join(" "))
        }
    })?;
    let (mass, watch) = interval_option(watch, line).map_err(|e| e.message)?;
    if watch.is_empty() {
        return Err(no_watch.to_string());
    }
    let mut request = InterventionRequest {
        variable: variable.to_string(),
        to: to.to_string(),
        from: from.to_string(),
        watch: Vec::new(),
        rows: None,
        seed: DEFAULT_SEED,
        mass: crate::draws::summary::DEFAULT_MASS,
        groups: crate::query::GroupQuestion::Observed,
    };
    let words: Vec<&str> = watch.split(|c: char| c == ',' || c.is_whitespace()).filter(|w| !w.is_empty()).collect();
    let options = INTERVENE.option_words();
    let mut i = 0;
    while i < words.len() {
        if words[i] == GROUPS_WORD {
            request.groups = read_group_question(words.get(i + 1).copied(), words.get(i + 2).copied())?;
            i += 3;
            let per_row = words.get(i..i + 2).is_some_and(|w| w == PER_ROW);
            if let (crate::query::GroupQuestion::New { column }, true) = (&request.groups, per_row) {
                request.groups = crate::query::GroupQuestion::NewPerRow { column: column.clone() };
                i += 2;
            }
            continue;
        }
        match (words[i], words.get(i + 1)) {
            (key, Some(value)) if options.contains(&key) && key != super::grammar::INTERVALS_WORD => {
                let n: u64 = value.parse().map_err(|_| format!("{key} takes a whole number, not `{value}`"))?;
                if key == "rows" {
                    request.rows = Some(n as usize);
                } else {
                    request.seed = n;
                }
                i += 2;
            }
            (node, _) => {
                request.watch.push(node.to_string());
                i += 1;
            }
        }
    }
    Ok((name, request, mass))
}

/// The word that opens `in new C` / `in C LEVEL` of `intervene`.
const GROUPS_WORD: &str = "in";
/// The words after `in new C` that give every row a new group of its own.
const PER_ROW: [&str; 2] = ["per", "row"];

/// `in new C` (a new group of pooled column C) or `in C LEVEL` (its
/// existing level LEVEL), the two words after `in`.
fn read_group_question(first: Option<&str>, second: Option<&str>) -> Result<crate::query::GroupQuestion, String> {
    use crate::query::GroupQuestion;
    match (first, second) {
        (Some("new"), Some(column)) => Ok(GroupQuestion::New { column: column.to_string() }),
        (Some(column), Some(level)) => Ok(GroupQuestion::Existing { column: column.to_string(), level: level.to_string() }),
        _ => Err("`in` takes a pooled column and one of its levels (`in site north`) or `new` and the column (`in new site`, or `in new site per row` for a new site per row)".to_string()),
    }
}

/// `simulate NAME from GRAPH rows N seed S:` with one mechanism per node.
pub(crate) fn simulate(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([name, g, rows, seed], _) = header(st, &SIMULATE)?;
    if !is_name(name) || !st.expects_body() {
        return Err(form_error(st, SIMULATE.usage));
    }
    let rows: usize = rows.parse().ok().filter(|n| *n > 0).ok_or_else(|| CellError::at(line, format!("rows takes a whole number above 0, not `{rows}`")))?;
    let seed: u64 = seed.parse().map_err(|_| CellError::at(line, format!("seed takes a whole number, not `{seed}`")))?;
    let graph = session.require_graph(g, line)?;
    let lines = st.body.iter().map(|l| (l.number, l.text.as_str()));
    let simulation = Simulation::parse(name, graph, SimulationSettings { rows, seed }, lines).map_err(|e| query_error(e, line))?;
    let table = simulation.table_with_cancel(control.cancel).map_err(|e| stopped_or(control, &format!("simulate {name}"), line, e))?;
    let mut mechanisms = Vec::new();
    for body in &st.body {
        if let Ok(Some((node, _))) = parse_mechanism_line(&body.text) {
            mechanisms.push((node, body.text.split_once('=').map_or("", |(_, m)| m).trim().to_string()));
        }
    }
    let mut display = describe_loaded(&table);
    let mut grid = Grid::new(&["node", "mechanism", "in the table"]);
    for (node, text) in &mechanisms {
        let hidden = graph.is_hidden(node).unwrap_or(false);
        grid.push(vec![node.clone(), text.clone(), if hidden { "no (hidden)" } else { "yes" }.to_string()]);
    }
    let warnings = unused_parent_warnings(&simulation, g).map_err(|e| query_error(e, line))?;
    let mut notes: Vec<String> = warnings.iter().map(|w| format!("warning: {w}")).collect();
    notes.push(format!("simulated from graph {g} with seed {seed}: each node from its own random stream, in causal order; hidden nodes are generated but left out of the table"));
    let mut cut_short = Vec::new();
    for (node, column) in simulation.follow_up_columns() {
        let cut = table.column(&column).and_then(|c| c.data.as_reals()).map_or(0, |v| v.iter().filter(|&&x| x > 0.0).count());
        cut_short.push(json!({"node": node, "column": column, "rows": cut}));
        notes.push(format!(
            "{node}: {cut} of {} rows cut short by the follow-up rule (time written as the follow-up end, {column} yes); \
             a model of {node} reads them with `family … cut short by {column}`; the other nodes read the whole times",
            table.nrows()
        ));
    }
    display.plain = format!("{}\nmechanisms:\n{}", display.plain, grid.to_text());
    for n in &notes {
        display.plain.push_str(&format!("\n• {n}"));
    }
    display.html = Some(format!(
        "{}{}",
        display.html.unwrap_or_default(),
        crate::cells::output::html_block("mechanisms", &[grid.to_html(), crate::cells::output::html_list(&notes)])
    ));
    if let Some(Value::Object(map)) = display.json.as_mut() {
        map.insert("graph".into(), json!(g));
        map.insert("seed".into(), json!(seed));
        let listed: Vec<Value> = mechanisms
            .iter()
            .map(|(n, m)| json!({"node": n, "mechanism": m, "hidden": graph.is_hidden(n).unwrap_or(false)}))
            .collect();
        map.insert("mechanisms".into(), Value::Array(listed));
        map.insert("warnings".into(), json!(warnings));
        map.insert("cut_short".into(), Value::Array(cut_short));
    }
    session.put_table(name, table);
    session.simulations.insert(name.to_string(), SimulationRecord { simulation, mechanisms });
    Ok(vec![display])
}

/// A warning for each mechanism that leaves out a parent the graph gives it.
fn unused_parent_warnings(simulation: &Simulation, graph: &str) -> Result<Vec<String>, QueryError> {
    Ok(simulation
        .unused_parents()?
        .into_iter()
        .map(|(node, line, unused)| {
            let (them, it) = if unused.len() == 1 { ("its parent", "it") } else { ("its parents", "them") };
            let why = match simulation.mechanism(&node) {
                Some(Mechanism::Category { score: None, .. }) => format!("a category mechanism draws fixed shares, so {node} cannot depend on {it} here"),
                _ => format!("use {it} in the mechanism, or remove the edge if {node} should not depend on {it}"),
            };
            format!(
                "cell line {line}: the mechanism of {node} does not use {them} {} in graph {graph}, so the simulated data carry no effect along that edge; {why}",
                unused.join(", ")
            )
        })
        .collect())
}

/// The method of explicit options, else of the model's latest fit, else Laplace.
fn check_method(session: &Session, model: &str, options: &str, line: usize) -> Result<Method, CellError> {
    let fallback = session.fits.get(model).map_or_else(laplace_default, |f| f.method.clone());
    method_or(options, fallback, line)
}

/// `recover MODEL on SIMULATION [with …]`.
pub(crate) fn recover(
    session: &mut Session,
    st: &Statement,
    control: &RunControl,
    warnings: &mut Vec<String>,
) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([m, t], options) = header(st, &RECOVER)?;
    let (mass, options) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let options = options.as_str();
    let mut spec = session.specs.get(m).cloned().ok_or_else(|| {
        CellError::at(line, format!("there is no model named {m}{}", suggest(m, session.models.keys())))
    })?;
    let record = session.simulations.get(t).ok_or_else(|| {
        CellError::at(line, format!("there is no simulation named {t}{}; make one with `{}`", suggest(t, session.simulations.keys()), SIMULATE.usage))
    })?;
    let method = check_method(session, m, options, line)?;
    spec.table = t.to_string();
    let label = format!("recover {m} on {t}");
    (control.progress)(&format!("{label}: fitting with {}", method.describe()));
    let progress = sampler_progress(control, &label);
    let sim = &record.simulation;
    let (recovery, model, fit) = recover_fitted(&spec, sim, &method, control.cancel, mass, &progress)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    warnings.extend(fit.warnings.iter().map(|w| format!("{label}: {w}")));
    let table = sim.table_with_cancel(control.cancel).map_err(|e| stopped_or(control, &label, line, e))?;
    let effects = true_effects(&model, &fit.draws, &table, sim, mass);
    // The simulation stands in for the model's own table: its columns carry that table's units.
    let unit_table = session.models.get(m).and_then(|own| session.tables.get(own.table_name()));
    let names: Vec<String> = recovery.parameters.iter().map(|p| p.name.clone()).collect();
    let units = parameter_units(&model, unit_table, &names);
    let outcome_unit = unit_table.and_then(|t| t.column(model.outcome_name())).and_then(|c| c.unit.clone());
    let (lower, upper) = bounds(mass);
    let mut grid = Grid::new(&["parameter", "unit", "true value", "mean", &lower, &upper, "interval holds the truth"])
        .numeric_columns(&[2, 3, 4, 5]);
    for (p, unit) in recovery.parameters.iter().zip(&units) {
        grid.push(vec![
            p.name.clone(),
            unit.clone().unwrap_or_default(),
            p.truth.map_or("—".into(), num),
            num(p.mean),
            num(p.lower),
            num(p.upper),
            p.covered.map_or("no single truth", |c| if c { "yes" } else { "NO" }).to_string(),
        ]);
    }
    let mut effect_grid =
        Grid::new(&["intervention", "unit", "true effect", "model's contrast", &lower, &upper, "interval holds the truth"])
            .numeric_columns(&[2, 3, 4, 5]);
    for e in &effects {
        effect_grid.push(vec![
            e.effect.clone(),
            outcome_unit.clone().unwrap_or_default(),
            num(e.truth),
            num(e.estimate.mean),
            num(e.estimate.lower),
            num(e.estimate.upper),
            match e.covered() {
                Some(true) => "yes".to_string(),
                Some(false) => "NO".to_string(),
                None => format!("not comparable: the model holds {} fixed", e.mediators.join(", ")),
            },
        ]);
    }
    let heading = recovery_heading(&format!("recover {m} on {t}"), &recovery, &effects);
    let mut notes = recovery.notes.clone();
    if let Some((node, text)) = record.mechanisms.iter().find(|(n, _)| n == model.outcome_name()) {
        notes.insert(0, format!("the mechanism that made {node}: {node} = {text}"));
    }
    if !effects.is_empty() {
        notes.push(format!(
            "true effects: the mechanisms simulated under both settings for {TRUTH_ROWS} units with shared noise (seed {}); the model's contrast is averaged over the rows of {t}; where the model holds a mediator fixed, its contrast is not the total effect and is not compared",
            sim.settings.seed
        ));
    }
    notes.push(format!("fitted with {}", recovery.method));
    let mut grids = vec![("", &grid)];
    if !effects.is_empty() {
        grids.push(("true intervention effects on the mean of the outcome:", &effect_grid));
    }
    let (plain, html) = render(&heading, &[], &grids, &notes);
    let svg = figures::recovery(&recovery).ok();
    let mut json = to_json(&recovery);
    if let Some(Value::Array(parameters)) = json.get_mut("parameters") {
        for (p, unit) in parameters.iter_mut().zip(&units) {
            p["unit"] = json!(unit);
        }
    }
    json["effects"] = Value::Array(
        effects
            .iter()
            .map(|e| json!({"effect": e.effect, "variable": e.variable, "unit": outcome_unit, "truth": e.truth, "mean": e.estimate.mean,
                "lower": e.estimate.lower, "upper": e.estimate.upper, "covered": e.covered(),
                "held_mediators": e.mediators}))
            .collect(),
    );
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(json) }])
}

/// The heading leads with what could be checked: parameters with a single
/// true value, else the true intervention effects, else says neither exists.
fn recovery_heading(label: &str, recovery: &crate::query::Recovery, effects: &[TrueEffect]) -> String {
    let params: Vec<bool> = recovery.parameters.iter().filter_map(|p| p.covered).collect();
    let compared: Vec<bool> = effects.iter().filter_map(TrueEffect::covered).collect();
    let inside = |v: &[bool]| v.iter().filter(|c| **c).count();
    let interval = &recovery.interval;
    match (params.is_empty(), compared.is_empty()) {
        (false, true) => format!("{label}: {} of {} parameters with a true value lie inside their {interval}", inside(&params), params.len()),
        (false, false) => format!(
            "{label}: {} of {} parameters with a true value and {} of {} true intervention effects lie inside their {interval}",
            inside(&params),
            params.len(),
            inside(&compared),
            compared.len()
        ),
        (true, false) => format!(
            "{label}: {} of {} true intervention effects lie inside the model's {interval} (no parameter of this model has a single true value in the simulation)",
            inside(&compared),
            compared.len()
        ),
        (true, true) => format!(
            "{label}: nothing to compare: no parameter of this model has a single true value in the simulation and no intervention effect could be compared; the rows show the fitted values"
        ),
    }
}

/// A true intervention effect beside the model's contrast.
struct TrueEffect {
    effect: String,
    variable: String,
    truth: f64,
    estimate: ContrastSummary,
    /// Predictors of the model that lie on a causal path from the variable
    /// to the outcome: holding them fixed, the contrast is not the total effect.
    mediators: Vec<String>,
}

impl TrueEffect {
    /// Whether the interval holds the truth; `None` when the model holds a mediator fixed.
    fn covered(&self) -> Option<bool> {
        self.mediators.is_empty().then_some(self.estimate.lower <= self.truth && self.truth <= self.estimate.upper)
    }
}

/// For each predictor of `model` that causes its outcome in the simulation's
/// graph: the true effect of a one-step change (second level vs first, one
/// unit above the mean vs the mean, 1 vs 0) beside the model's contrast of
/// the same change averaged over the rows. Predictors where either is not
/// defined are left out.
fn true_effects(model: &Model, draws: &crate::draws::Draws, table: &crate::table::Table, sim: &Simulation, mass: f64) -> Vec<TrueEffect> {
    let outcome = model.outcome_name();
    let mut out = Vec::new();
    for input in model.inputs() {
        let x = input.column();
        if out.iter().any(|e: &TrueEffect| e.variable == x) {
            continue;
        }
        let causes = sim.graph.descendants(x).is_ok_and(|d| d.contains(&outcome));
        let Some(column) = table.column(x).filter(|_| causes) else { continue };
        let (to, from) = match (&input, &column.data) {
            (Input::Category { levels, .. }, _) if levels.len() >= 2 => (levels[1].clone(), levels[0].clone()),
            (Input::Category { .. }, _) => continue,
            (_, ColumnData::Binary(_)) => ("1".to_string(), "0".to_string()),
            (_, ColumnData::Count(v)) => {
                let centre = (v.iter().sum::<u64>() as f64 / v.len().max(1) as f64).round();
                (format!("{}", centre + 1.0), format!("{centre}"))
            }
            (_, data) => {
                let values = data.as_reals().unwrap_or_default();
                let centre = values.iter().sum::<f64>() / values.len().max(1) as f64;
                (format!("{}", centre + 1.0), format!("{centre}"))
            }
        };
        let Ok(truth) = sim.true_effect(x, &to, &from, outcome, TRUTH_ROWS, sim.settings.seed) else { continue };
        let request = ContrastRequest { over_rows: true, mass, ..ContrastRequest::new(x) }.between(to, from);
        let Ok(c) = crate::query::contrast(model, draws, table, &request) else { continue };
        let descendants = sim.graph.descendants(x).unwrap_or_default();
        let mediators = model
            .inputs()
            .iter()
            .map(|i| i.column().to_string())
            .filter(|m| descendants.contains(&m.as_str()) && sim.graph.descendants(m).is_ok_and(|d| d.contains(&outcome)))
            .collect();
        out.push(TrueEffect { effect: c.contrast.clone(), variable: x.to_string(), truth, estimate: c.summary(), mediators });
    }
    out
}

/// `calibrate MODEL reps R [seed S] [with …]`.
pub(crate) fn calibrate(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([m, reps], mut rest) = header(st, &CALIBRATE)?;
    let reps: usize = reps.parse().ok().filter(|r| *r >= 2).ok_or_else(|| CellError::at(line, format!("reps takes a whole number of at least 2, not `{reps}`")))?;
    let mut seed = DEFAULT_SEED;
    if let Some(text) = option_text(rest, "seed") {
        let (s, tail) = text.split_once(char::is_whitespace).unwrap_or((text, ""));
        seed = s.parse().map_err(|_| CellError::at(line, format!("seed takes a whole number, not `{s}`")))?;
        rest = tail.trim();
    }
    let model = session.models.get(m).ok_or_else(|| {
        CellError::at(line, format!("there is no model named {m}{}", suggest(m, session.models.keys())))
    })?;
    session.refuse_on_disk(model, line)?;
    let method = check_method(session, m, rest, line)?;
    let label = format!("calibrate {m}");
    let progress = |r: usize| (control.progress)(&format!("{label}: replication {} of {reps}", r + 1));
    let calibration = calibrate_with_progress(model, reps, &method, seed, control.cancel, &progress)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let mut grid = Grid::new(&["parameter", "chi-square", "p-value", "reading"]).numeric_columns(&[1, 2]);
    for p in &calibration.parameters {
        let (p_text, reading) = match p.p_value {
            None => ("not computed".to_string(), "too few replications for a p-value: read the ranks"),
            Some(v) if v < 0.01 => (format!("{v:.3}"), "ranks far from uniform: check this parameter's posterior"),
            Some(v) => (format!("{v:.3}"), "ranks consistent with uniform"),
        };
        grid.push(vec![p.name.clone(), num(p.chi_square), p_text, reading.to_string()]);
    }
    // The parameter to draw: the smallest p-value, or without p-values the
    // largest chi-square statistic.
    let key = |p: &crate::query::CalibratedParameter| p.p_value.map_or(-p.chi_square, |v| v - 1e9);
    let worst = calibration
        .parameters
        .iter()
        .enumerate()
        .filter(|(_, p)| p.chi_square.is_finite())
        .min_by(|a, b| key(a.1).total_cmp(&key(b.1)))
        .map(|(i, _)| i);
    let heading = format!(
        "calibrate {m}: {} replications (seed {seed}), ranks among {} posterior draws in {} bins",
        calibration.reps, calibration.draws_per_fit, calibration.bins
    );
    let mut notes = calibration.notes.clone();
    notes.push("each replication draws parameters from the priors, simulates outcomes with the model's own rows, refits and ranks the true value among the draws (Talts et al. 2018)".to_string());
    if let Some(i) = worst {
        let why = if calibration.parameters[i].p_value.is_some() { "the smallest p-value" } else { "the largest chi-square statistic" };
        notes.push(format!("the figure shows the rank histogram of {}, the parameter with {why}", calibration.parameters[i].name));
    }
    if reps < 50 {
        notes.push(format!("{reps} replications make a coarse test; 100 or more show smaller departures"));
    }
    notes.push(format!("refitted with {}", calibration.method));
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let svg = worst.and_then(|i| figures::calibration(&calibration, i).ok());
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(to_json(&calibration)) }])
}

/// `prior check MODEL [sets N] [seed S]` and `check MODEL [sets N] [seed S]`.
pub(crate) fn predictive_check(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let (prior, m, options) = match (PRIOR_CHECK.read_n(st.head()), CHECK.read_n(st.head())) {
        (Ok(([m], rest)), _) => (true, m, rest),
        (_, Ok(([m], rest))) => (false, m, rest),
        _ => return Err(form_error(st, CHECK.usage)),
    };
    let words: Vec<&str> = options.split_whitespace().collect();
    let mut rest = words.as_slice();
    let (mut sets, mut seed) = (DEFAULT_SETS, DEFAULT_SEED);
    while let [key, value, tail @ ..] = rest {
        let (low, high) = if *key == "sets" { (1, MAX_SETS) } else { (0, u64::MAX) };
        let parsed = crate::limits::whole_number(key, value, low, high).map_err(|m| CellError::at(line, m))?;
        match *key {
            _ if !CHECK.option_words().contains(key) => return Err(form_error(st, CHECK.usage)),
            "sets" => sets = parsed as usize,
            "seed" => seed = parsed,
            _ => return Err(form_error(st, CHECK.usage)),
        }
        rest = tail;
    }
    if !rest.is_empty() {
        return Err(form_error(st, CHECK.usage));
    }
    let model = session.models.get(m).ok_or_else(|| {
        CellError::at(line, format!("there is no model named {m}{}", suggest(m, session.models.keys())))
    })?;
    let table = session.require_table(model.table_name(), line)?;
    let bytes = crate::limits::bytes_for(&[sets, table.nrows().max(1), 2]);
    crate::limits::check_memory(&format!("{sets} predictive sets of {} rows", table.nrows()), bytes).map_err(|m| CellError::at(line, m))?;
    let result = if prior {
        prior_predictive(model, table, sets, seed)
    } else {
        let fit = super::fitting::require_fit(session, m, line)?;
        posterior_predictive(model, &fit.draws, table, sets, seed)
    }
    .map_err(|e| query_error(e, line))?;
    let kind = if prior { "prior" } else { "posterior" };
    let heading = format!(
        "{kind} predictive check of {m}: {} outcome sets of {} rows simulated from the {kind} (seed {seed})",
        result.replicated.len(),
        result.observed.len()
    );
    let mass = session.interval_mass(None);
    if model.outcome_levels().is_some() {
        return Ok(vec![level_count_check(model, kind, seed, &heading, &result, mass, line)?]);
    }
    // a yes/no or out-of-trials outcome is summarised as shares, which have no unit
    let shares = matches!(
        model.family(),
        crate::model::Family::Bernoulli | crate::model::Family::Binomial { .. } | crate::model::Family::Beta
    );
    let unit = if shares { None } else { table.column(model.outcome_name()).and_then(|c| c.unit.clone()) };
    let (lower, upper) = bounds(mass);
    let mut grid =
        Grid::new(&["statistic", "unit", "observed", &lower, &upper, "share of sets ≥ observed"]).numeric_columns(&[2, 3, 4, 5]);
    let mut stats_json = Vec::new();
    for (stat, f) in [("mean", mean as fn(&[f64]) -> f64), ("sd", sd), ("min", min), ("max", max)] {
        let observed = f(&result.observed);
        let replicated: Vec<f64> = result.replicated.iter().map(|r| f(r)).collect();
        let s = ContrastSummary::of(&replicated, mass).map_err(|e| query_error(e, line))?;
        let share = replicated.iter().filter(|v| **v >= observed).count() as f64 / replicated.len().max(1) as f64;
        grid.push(vec![stat.to_string(), unit.clone().unwrap_or_default(), num(observed), num(s.lower), num(s.upper), format!("{share:.2}")]);
        stats_json.push(json!({"statistic": stat, "unit": unit, "observed": observed, "lower": s.lower, "upper": s.upper, "share_at_or_above": share}));
    }
    let mut notes = vec![format!("the interval columns are the central {}% range of each statistic over the simulated sets", short_number(mass * 100.0))];
    notes.push(if prior {
        "a prior check asks whether the priors allow outcomes of a plausible size before the data are seen".to_string()
    } else {
        "a share near 0 or 1 says the fitted model rarely makes data like the observed on that statistic".to_string()
    });
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let svg = figures::predictive(&result, table, model.outcome_name()).ok();
    let json = json!({"model": m, "kind": kind, "seed": seed, "sets": result.replicated.len(), "rows": result.observed.len(), "interval_mass": mass, "statistics": stats_json});
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(json) }])
}

/// A predictive check of a category outcome: for each level, the observed
/// number of rows at it against the central interval of that count over
/// the simulated sets (whose values are level indices, named here by label).
fn level_count_check(
    model: &Model,
    kind: &str,
    seed: u64,
    heading: &str,
    result: &crate::query::PredictiveSets,
    mass: f64,
    line: usize,
) -> Result<Display, CellError> {
    let (m, levels) = (model.name(), model.outcome_levels().unwrap_or_default());
    let count = |values: &[f64], k: usize| values.iter().filter(|v| **v as usize == k).count() as f64;
    let (lower, upper) = bounds(mass);
    let mut grid = Grid::new(&["level", "observed rows", &lower, &upper, "share of sets ≥ observed"]).numeric_columns(&[1, 2, 3, 4]);
    let mut levels_json = Vec::new();
    let mut counts = Vec::new();
    for (k, level) in levels.iter().enumerate() {
        let observed = count(&result.observed, k);
        let replicated: Vec<f64> = result.replicated.iter().map(|r| count(r, k)).collect();
        let s = ContrastSummary::of(&replicated, mass).map_err(|e| query_error(e, line))?;
        let share = replicated.iter().filter(|v| **v >= observed).count() as f64 / replicated.len().max(1) as f64;
        grid.push(vec![level.clone(), num(observed), num(s.lower), num(s.upper), format!("{share:.2}")]);
        levels_json.push(json!({"level": level, "observed": observed, "lower": s.lower, "upper": s.upper, "share_at_or_above": share}));
        counts.push(crate::plot::LevelCount { level: level.clone(), observed, replicated });
    }
    let notes = vec![
        format!(
            "each row counts the rows at one level; the interval columns are the central {}% range of that count over the simulated sets",
            short_number(mass * 100.0)
        ),
        "a share near 0 or 1 says the model rarely makes as many (or as few) rows at that level as the data have".to_string(),
    ];
    let (plain, html) = render(heading, &[], &[("", &grid)], &notes);
    let figure_kind = if kind == "prior" { crate::plot::PredictiveKind::Prior } else { crate::plot::PredictiveKind::Posterior };
    let svg = crate::plot::level_count_figure(figure_kind, m, model.outcome_name(), &counts).ok();
    let json = json!({"model": m, "kind": kind, "seed": seed, "sets": result.replicated.len(), "rows": result.observed.len(),
                      "interval_mass": mass, "levels": levels_json});
    Ok(Display { plain, html: Some(html), svg, json: Some(json) })
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len().max(1) as f64
}

fn sd(v: &[f64]) -> f64 {
    let m = mean(v);
    (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len().max(2) - 1) as f64).sqrt()
}

fn min(v: &[f64]) -> f64 {
    v.iter().copied().fold(f64::INFINITY, f64::min)
}

fn max(v: &[f64]) -> f64 {
    v.iter().copied().fold(f64::NEG_INFINITY, f64::max)
}
