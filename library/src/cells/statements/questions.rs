//! Statements that ask an effect of fitted models and of data:
//! `contrast`, `ask … using`, `compare routes for …` and
//! `implications of G checked against T`.
//!
//! Each statement reads its header, calls one function of [`crate::query`]
//! (which computes every uncertain number draw by draw and summarises last)
//! and renders the result the same way: a heading sentence, aligned tables
//! (text and HTML), notes that say what was held fixed or averaged, the
//! query's own JSON structure, and a figure. Helpers shared with the
//! simulation statements live here too.

use std::sync::atomic::Ordering;

use serde_json::{json, Value};

use super::fitting::{parse_method, require_fit};
use super::further_routes::{other_set_rows, DirectRoutes};
use super::grammar::{ASK_USING, COMPARE_ROUTES, CONTRAST, CONTRAST_BETWEEN, FIT, IMPLICATIONS_CHECKED};
use super::{header, interval_option, option_text};
use crate::cells::figures::{self, GraphMarks};
use crate::cells::fit_summary::{share_above_zero, ABOVE_ZERO_HEAD, FEW_ROWS, UNIT_HEAD};
use crate::cells::format::{num, with_unit};
use crate::cells::output::{html_block, html_list, CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::{RunControl, Session};
use crate::graph::EffectKind;
use crate::infer::fit::Method;
use crate::infer::nuts::Progress;
use crate::model::ModelSpec;
use crate::query::contrast::{EVENTS_BY, LOG_TIMES, MEDIANS, QUANTILE, SCORES};
use crate::plot::DensityArrangement;
use crate::query::{
    answer_effect_with_progress, build_joint, AskOptions, check_implications, fit_joint_with_progress, intervene, Contrast,
    ContrastRequest, ContrastSummary, GridRequest, InterventionRequest, On, QueryError,
};
use crate::table::Table;

/// The closing sentence of every causal answer.
pub(super) const CAUSAL_NOTE: &str = "Causal readings of these numbers rest on the graph's assumptions.";

/// The seed of simulated outcomes and interventions when none is written.
pub(super) const DEFAULT_SEED: u64 = 31_415;

/// A query error as a cell error: a simulate-body error keeps its own
/// line, anything else is placed at `line`.
pub(super) fn query_error(e: QueryError, line: usize) -> CellError {
    match e {
        QueryError::Mechanism { line: at, message } => CellError::at(at, message),
        other => CellError::at(line, other.to_string()),
    }
}

/// The error of a long step, saying so when the user interrupted it.
pub(super) fn stopped_or(control: &RunControl, what: &str, line: usize, e: QueryError) -> CellError {
    if control.cancel.load(Ordering::Relaxed) {
        CellError::at(line, format!("{what} was interrupted; the session is unchanged"))
    } else {
        query_error(e, line)
    }
}

/// An error when the cancel flag was set during a step that does not fail on it.
pub(super) fn check_cancel(control: &RunControl, what: &str, line: usize) -> Result<(), CellError> {
    if control.cancel.load(Ordering::Relaxed) {
        return Err(CellError::at(line, format!("{what} was interrupted; the session is unchanged")));
    }
    Ok(())
}

/// A progress sink that reports every 100th sampler iteration as `label: chain c — iteration i/n`.
pub(super) fn sampler_progress<'a>(control: &'a RunControl, label: &'a str) -> impl Fn(Progress) + Sync + 'a {
    move |p: Progress| {
        if p.iteration.is_multiple_of(100) || p.iteration == p.total {
            (control.progress)(&format!("{label}: chain {} — iteration {}/{}", p.chain + 1, p.iteration, p.total));
        }
    }
}

/// A progress sink for fitting a joint model: every 100th sampler
/// iteration as `label: node N, chain c — iteration i/n` (`what` names the
/// model, e.g. "joint model, " or "").
pub(super) fn joint_progress<'a>(control: &'a RunControl, label: &'a str, what: &'a str) -> impl Fn(&str, Progress) + Sync + 'a {
    move |node: &str, p: Progress| {
        if p.iteration.is_multiple_of(100) || p.iteration == p.total {
            (control.progress)(&format!("{label}: {what}node {node}, chain {} — iteration {}/{}", p.chain + 1, p.iteration, p.total));
        }
    }
}

/// The method of the `with …` options, or `default` when there are none.
pub(super) fn method_or(options: &str, default: Method, line: usize) -> Result<Method, CellError> {
    if options.is_empty() {
        return Ok(default);
    }
    parse_method(options).map_err(|m| CellError::at(line, format!("{m}; the options are those of: {}", FIT.usage)))
}

/// The method of the options (NUTS when there are none), the graph and
/// the table a statement that fits from a graph and a table names.
fn method_graph_table<'s>(
    session: &'s Session,
    options: &str,
    g: &str,
    t: &str,
    line: usize,
) -> Result<(Method, &'s crate::graph::Graph, &'s Table), CellError> {
    let method = method_or(options, Method::Nuts(Default::default()), line)?;
    Ok((method, session.require_graph(g, line)?, session.require_table(t, line)?))
}

/// Plain text and HTML of a heading, tables and notes (notes as bullets).
pub(super) fn render(heading: &str, lead: &[String], grids: &[(&str, &Grid)], notes: &[String]) -> (String, String) {
    let mut plain = heading.to_string();
    let mut parts = Vec::new();
    for l in lead {
        plain.push_str(&format!("\n{l}"));
    }
    if !lead.is_empty() {
        parts.push(format!("<p class=\"wp-alert\">{}</p>", lead.iter().map(|l| crate::cells::output::escape_html(l)).collect::<Vec<_>>().join("<br>")));
    }
    for (title, grid) in grids {
        if !title.is_empty() {
            plain.push_str(&format!("\n{title}"));
            parts.push(format!("<p class=\"wp-head\">{}</p>", crate::cells::output::escape_html(title)));
        }
        plain.push_str(&format!("\n{}", grid.to_text()));
        parts.push(grid.to_html());
    }
    for n in notes {
        plain.push_str(&format!("\n• {n}"));
    }
    parts.push(html_list(notes));
    (plain, html_block(heading, &parts))
}

/// "90% lower", "90% upper".
pub(super) fn bounds(mass: f64) -> (String, String) {
    let pct = crate::model::prior::short_number(mass * 100.0);
    (format!("{pct}% lower"), format!("{pct}% upper"))
}

/// Head of the column with the share of draws below zero.
pub(super) const BELOW_ZERO_HEAD: &str = "draws below 0";

/// The heads of a summary table after its `lead` columns: unit, mean,
/// the interval's ends, draws above and below 0 (the cells of [`summary_cells`]).
pub(super) fn summary_grid(lead: &[&str], mass: f64) -> Grid {
    let (lower, upper) = bounds(mass);
    let mut heads = lead.to_vec();
    heads.extend([UNIT_HEAD, "mean", &lower, &upper, ABOVE_ZERO_HEAD, BELOW_ZERO_HEAD]);
    let n = lead.len();
    Grid::new(&heads).numeric_columns(&[n + 1, n + 2, n + 3, n + 4, n + 5])
}

/// A summary row: unit, mean, lower, upper, draws above 0, draws below 0.
pub(super) fn summary_cells(s: &ContrastSummary, unit: Option<&str>) -> Vec<String> {
    vec![
        unit.unwrap_or_default().to_string(),
        num(s.mean),
        num(s.lower),
        num(s.upper),
        share_above_zero(s.share_above_zero),
        share_above_zero(s.share_below_zero),
    ]
}

fn to_json<T: serde::Serialize>(value: &T) -> Value {
    serde_json::to_value(value).unwrap_or(Value::Null)
}

/// `contrast M: C b vs a [on outcomes] [seed S] [at Z v, …] [along X from LO to HI [by STEP]] [over rows]`.
pub(crate) fn contrast(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let (name, mut request, rest) = match (CONTRAST_BETWEEN.read_n(st.head()), CONTRAST.read_n(st.head())) {
        (Ok(([name, x, b, a], rest)), _) => (name, ContrastRequest::new(x).between(b, a), rest),
        (_, Ok(([name, x], rest))) => (name, ContrastRequest::new(x), rest),
        (_, Err(at)) if at.slot == 3 => {
            return Err(CellError::at(line, format!("name the predictor to contrast; the form is: {}", CONTRAST.usage)))
        }
        _ => return Err(super::form_error(st, CONTRAST.usage)),
    };
    let (mass, rest) = interval_option(rest, line)?;
    request.mass = session.interval_mass(mass);
    read_contrast_options(&mut request, &rest)
        .map_err(|m| CellError::at(line, format!("{m}; the form is: {}", CONTRAST.usage)))?;
    let fit = require_fit(session, name, line)?;
    let model = &session.models[name];
    let table = session.require_table(model.table_name(), line)?;
    let contrasts = crate::query::level_contrasts(model, &fit.draws, table, &request).map_err(|e| query_error(e, line))?;
    let mut displays = vec![match contrasts.as_slice() {
        [c] => describe_contrast(c, table, model.outcome_name(), &[]),
        levels => describe_level_contrasts(levels, table, model.outcome_name()),
    }];
    if let Some(curves) = figures::survival_curves(&contrasts[0], request.on, table, model.outcome_name()) {
        displays.push(survival_display(&contrasts[0], curves));
    }
    Ok(displays)
}

/// The figure of a time contrast's survival and hazard curves, under a line
/// saying what they are.
fn survival_display(c: &Contrast, figure: Result<String, crate::plot::PlotError>) -> Display {
    let held = if c.over_rows { "averaged over the table's rows" } else { "at the contrast's held values" };
    match figure {
        Ok(svg) => Display {
            plain: format!(
                "survival and hazard of {} at {} {} and at {} (posterior means with {} bands), {held}",
                c.model,
                c.variable,
                c.to,
                c.from,
                crate::model::prior::short_number(c.mass * 100.0) + "%"
            ),
            svg: Some(svg),
            ..Display::default()
        },
        Err(e) => Display::text(format!("the survival curves could not be drawn: {e}")),
    }
}

/// The display of the per-level contrasts of a category outcome: one row
/// per level (and, along a grid, one line per level), each the change in
/// that level's probability.
fn describe_level_contrasts(cs: &[Contrast], table: &Table, outcome: &str) -> Display {
    let first = &cs[0];
    let compared = format!("{} {} vs {}", first.variable, first.to, first.from);
    let heading = format!(
        "contrast {}: {compared} on the share of each level of {outcome} ({} levels, {} interval)",
        first.model,
        cs.len(),
        crate::model::prior::short_number(first.mass * 100.0) + "%"
    );
    let level_head = format!("level of {outcome}");
    let mut grid = summary_grid(&[level_head.as_str(), "scale"], first.mass);
    for c in cs {
        let mut row = vec![c.level.clone().unwrap_or_default(), c.scale.clone()];
        row.extend(summary_cells(&c.summary(), None));
        grid.push(row);
    }
    let mut grids = vec![(String::new(), grid)];
    if let Some(x) = &first.along {
        let (lower, upper) = bounds(first.mass);
        let mut g = Grid::new(&[x.as_str(), "level", "mean", &lower, &upper, ABOVE_ZERO_HEAD]).numeric_columns(&[0, 2, 3, 4, 5]);
        for c in cs {
            for p in &c.grid {
                let level = c.level.clone().unwrap_or_default();
                g.push(vec![num(p.x), level, num(p.mean), num(p.lower), num(p.upper), share_above_zero(p.share_above_zero)]);
            }
        }
        grids.push((format!("along the grid (the rows above are at {}):", held_value_phrase(first, table, x)), g));
    }
    let mut notes = vec![first.held_how.clone()];
    notes.extend(first.notes.iter().cloned());
    notes.push(format!(
        "{} draws; in each draw the level probabilities at both settings are subtracted level by level, so the changes sum to zero across the levels; summarised last ({})",
        first.draws.len(),
        first.interval
    ));
    if let Some(seed) = first.seed {
        notes.push(format!("simulated outcomes use seed {seed}"));
    }
    notes.push(CAUSAL_NOTE.to_string());
    let sparse: Vec<String> = sparse_levels(first, table);
    let lead: Vec<String> = if sparse.is_empty() { Vec::new() } else { vec![sparse_alert(&sparse)] };
    let grid_refs: Vec<(&str, &Grid)> = grids.iter().map(|(t, g)| (t.as_str(), g)).collect();
    let (plain, html) = render(&heading, &lead, &grid_refs, &notes);
    let svg = figures::level_contrasts(cs, table, outcome).ok();
    let json = json!({
        "model": first.model, "outcome": outcome, "contrast": compared, "interval_mass": first.mass,
        "levels": cs.iter().map(to_json).collect::<Vec<_>>(), "sparse": !sparse.is_empty(), "sparse_levels": sparse,
    });
    Display { plain, html: Some(html), svg, json: Some(json) }
}

/// Read the part of a contrast header after the predictor: its options
/// start with the option words of [`CONTRAST`].
fn read_contrast_options(request: &mut ContrastRequest, text: &str) -> Result<(), String> {
    let words: Vec<&str> = text.split_whitespace().map(|w| w.trim_end_matches(',')).filter(|w| !w.is_empty()).collect();
    let mut rest = words.as_slice();
    let mut seed = None;
    let mut outcomes = false;
    let number = |w: &str, what: &str| w.parse::<f64>().map_err(|_| format!("{what} takes a number, not `{w}`"));
    let keywords = CONTRAST.option_words();
    while let Some((word, tail)) = rest.split_first() {
        rest = match (*word, tail) {
            ("on", ["outcomes", t @ ..]) => {
                outcomes = true;
                t
            }
            ("on", ["means", t @ ..]) => t,
            ("on", [EVENTS_BY, "by", time, t @ ..]) => {
                request.on = On::EventsBy(number(time, "`on events by`")?);
                t
            }
            ("on", [QUANTILE, share, t @ ..]) => {
                request.on = On::Quantile(number(share, "`on quantile`")?);
                t
            }
            ("on", [scale, t @ ..]) if [SCORES, LOG_TIMES, MEDIANS].contains(scale) => {
                request.on = match *scale {
                    SCORES => On::Scores,
                    LOG_TIMES => On::LogTimes,
                    _ => On::Medians,
                };
                t
            }
            ("over", ["rows", t @ ..]) => {
                request.over_rows = true;
                t
            }
            ("seed", [s, t @ ..]) => {
                seed = Some(s.parse::<u64>().map_err(|_| format!("seed takes a whole number, not `{s}`"))?);
                t
            }
            ("along", [x, "from", lo, "to", hi, t @ ..]) => {
                let (step, t) = match t {
                    ["by", s, t2 @ ..] => (Some(number(s, "by")?), t2),
                    _ => (None, t),
                };
                request.along =
                    Some(GridRequest { variable: x.to_string(), from: number(lo, "from")?, to: number(hi, "to")?, step });
                t
            }
            ("at", t) => {
                let mut t = t;
                while let [n, v, t2 @ ..] = t {
                    if keywords.contains(n) {
                        break;
                    }
                    request.held.push((n.to_string(), v.to_string()));
                    t = t2;
                }
                t
            }
            (other, _) => return Err(format!("cannot read `{other}` here")),
        };
    }
    if seed.is_some() && !outcomes {
        return Err("a seed is only used with `on outcomes`".to_string());
    }
    if outcomes {
        request.on = On::Outcomes { seed: seed.unwrap_or(DEFAULT_SEED) };
    }
    Ok(())
}

/// Where the contrast's own row holds the grid variable: `girth held at its
/// table mean, 27.59 cm` (with the column's unit when it has one).
fn held_value_phrase(c: &Contrast, table: &Table, x: &str) -> String {
    let unit = table.column(x).and_then(|col| col.unit.clone()).map(|u| format!(" {u}")).unwrap_or_default();
    match c.held.iter().find(|h| h.name == x) {
        Some(h) if h.source == "stated" => format!("{x} held at {}{unit}, as stated", h.value),
        Some(h) => format!("{x} held at its {}, {}{unit}", h.source, h.value),
        None if c.over_rows => format!("{x} as observed in each row"),
        None => format!("{x} at its held value"),
    }
}

/// The category levels a contrast compares or holds that have fewer than
/// [`FEW_ROWS`] rows in `table`, in words (`semi of rootstock: 2 rows`).
fn sparse_levels(c: &Contrast, table: &Table) -> Vec<String> {
    let mut used: Vec<(&str, &str)> = vec![(c.variable.as_str(), c.to.as_str()), (c.variable.as_str(), c.from.as_str())];
    used.extend(c.held.iter().map(|h| (h.name.as_str(), h.value.as_str())));
    let mut out = Vec::new();
    for (name, level) in used {
        let Some(crate::table::ColumnData::Category { codes, levels }) = table.column(name).map(|col| &col.data) else { continue };
        let Some(k) = levels.iter().position(|l| l == level) else { continue };
        let n = codes.iter().filter(|&&code| code as usize == k).count();
        let words = format!("{level} of {name}: {}", if n == 0 { "no rows".to_string() } else if n == 1 { "1 row".to_string() } else { format!("{n} rows") });
        if n < FEW_ROWS && !out.contains(&words) {
            out.push(words);
        }
    }
    out
}

/// The warning line of a contrast on sparse levels.
fn sparse_alert(sparse: &[String]) -> String {
    format!(
        "⚠ this contrast rests on levels with fewer than {FEW_ROWS} rows ({}): it leans mostly or wholly on the priors, not on data",
        sparse.join("; ")
    )
}

/// The display of one contrast; `extra` notes go before the closing causal note.
fn describe_contrast(c: &Contrast, table: &Table, outcome: &str, extra: &[String]) -> Display {
    let unit = c.unit.as_deref();
    let heading = format!(
        "contrast {}: {} on the scale of {} = {} ({} {} to {})",
        c.model,
        c.contrast,
        c.scale,
        with_unit(c.mean, unit),
        crate::model::prior::short_number(c.mass * 100.0) + "% interval",
        num(c.lower),
        with_unit(c.upper, unit)
    );
    let (lower, upper) = bounds(c.mass);
    let mut grid = summary_grid(&["contrast", "scale"], c.mass);
    let summary = c.summary();
    let mut row = vec![c.contrast.clone(), c.scale.clone()];
    row.extend(summary_cells(&summary, unit));
    grid.push(row);
    let mut grids = vec![("", &grid)];
    let along_grid;
    let along_caption;
    if let Some(x) = &c.along {
        let x_unit = table.column(x).and_then(|col| col.unit.clone());
        let x_head = match &x_unit {
            Some(u) => format!("{x} in {u}"),
            None => x.clone(),
        };
        let mut g = Grid::new(&[x_head.as_str(), "mean", &lower, &upper, ABOVE_ZERO_HEAD]).numeric_columns(&[0, 1, 2, 3, 4]);
        for p in &c.grid {
            g.push(vec![num(p.x), num(p.mean), num(p.lower), num(p.upper), share_above_zero(p.share_above_zero)]);
        }
        along_grid = g;
        let in_unit = unit.map(|u| format!("differences in {u}; ")).unwrap_or_default();
        along_caption = format!("along the grid ({in_unit}the row above is at {}):", held_value_phrase(c, table, x));
        grids.push((along_caption.as_str(), &along_grid));
    }
    let mut notes = vec![format!("scale: {}", c.scale), c.held_how.clone()];
    notes.extend(c.notes.iter().cloned());
    notes.push(format!("{} draws; each draw's two predictions are subtracted first and the differences summarised last ({})", c.draws.len(), c.interval));
    if let Some(seed) = c.seed {
        notes.push(format!("simulated outcomes use seed {seed}"));
    }
    notes.extend(extra.iter().cloned());
    notes.push(CAUSAL_NOTE.to_string());
    let sparse = sparse_levels(c, table);
    let lead: Vec<String> = if sparse.is_empty() { Vec::new() } else { vec![sparse_alert(&sparse)] };
    let (plain, html) = render(&heading, &lead, &grids, &notes);
    let svg = figures::contrast(c, table, outcome).ok();
    let mut json = to_json(c);
    json["sparse"] = json!(!sparse.is_empty());
    json["sparse_levels"] = json!(sparse);
    Display { plain, html: Some(html), svg, json: Some(json) }
}

/// The options of `ask … using T` before `with …`: `checking zero`,
/// `at NODE VALUE [NODE VALUE …]`, `pooling C [C …]` and `varying by C`;
/// the rest (the method) is returned.
fn ask_options(text: &str) -> Result<(AskOptions, &str), String> {
    let mut options = AskOptions::default();
    let mut rest = text.trim();
    loop {
        if let Some(tail) = option_text(rest, "checking") {
            rest = tail.strip_prefix("zero").ok_or("`checking` is followed by `zero`")?.trim();
            options.check_zero = true;
        } else if let Some(tail) = option_text(rest, "pooling") {
            let mut words = tail.split(|c: char| c.is_whitespace() || c == ',').filter(|w| !w.is_empty()).peekable();
            while let Some(name) = words.next_if(|w| !["with", "checking", "at", "varying"].contains(w)) {
                options.pooled.push(name.to_string());
            }
            if options.pooled.is_empty() {
                return Err("`pooling` is followed by the column that marks the clusters".into());
            }
            rest = match [" with ", " checking ", " at ", " varying "].iter().filter_map(|w| tail.find(w)).min() {
                Some(i) => tail[i..].trim(),
                None => "",
            };
        } else if let Some(tail) = option_text(rest, "at") {
            let mut words = tail.split(|c: char| c.is_whitespace() || c == ',').filter(|w| !w.is_empty()).peekable();
            let mut used = 0;
            while let Some(name) = words.next_if(|w| !["with", "checking", "pooling", "varying"].contains(w)) {
                let value = words.next().ok_or(format!("`at {name}` needs a value"))?;
                options.held.push((name.to_string(), value.to_string()));
                used += 1;
            }
            if used == 0 {
                return Err("`at` is followed by a node and its value".into());
            }
            rest = match [" with ", " checking ", " pooling ", " varying "].iter().filter_map(|w| tail.find(w)).min() {
                Some(i) => tail[i..].trim(),
                None => "",
            };
        } else if let Some(tail) = option_text(rest, "varying") {
            let tail = tail.strip_prefix("by").ok_or("`varying` is followed by `by` and a category of the set, `varying by C`")?.trim();
            let (name, after) = tail.split_once(char::is_whitespace).unwrap_or((tail, ""));
            if name.is_empty() || ["with", "checking", "pooling", "at"].contains(&name) {
                return Err("`varying by` is followed by a category of the set conditioned on".into());
            }
            if options.varying_by.replace(name.to_string()).is_some() {
                return Err("`varying by` is given twice; slopes vary by one category".into());
            }
            rest = after.trim();
        } else {
            return Ok((options, rest));
        }
    }
}

/// `ask total|direct effect of X on Y in G using T [checking zero] [at M V …] [pooling C …] [with …]`.
pub(crate) fn ask_using(
    session: &mut Session,
    st: &Statement,
    control: &RunControl,
    warnings: &mut Vec<String>,
) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([kind, x, y, g, t], options) = header(st, &ASK_USING)?;
    let (mass, options) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let (ask, options) = ask_options(&options).map_err(|m| CellError::at(line, format!("{m}; the form is: {}", ASK_USING.usage)))?;
    let (method, graph, table) = method_graph_table(session, options, g, t, line)?;
    let effect = if kind == "total" { EffectKind::Total } else { EffectKind::Direct };
    let label = format!("ask {kind} effect of {x} on {y}");
    (control.progress)(&format!("{label}: fitting with {}", method.describe()));
    let progress = sampler_progress(control, &label);
    let answer =
        answer_effect_with_progress(graph, table, x, y, effect, &ask, &method, control.cancel, mass, &progress)
            .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let mut first = super::causal::describe_identification(&answer.identification);
    let adjusted = answer.adjustment_set.clone().unwrap_or_default();
    let (formula_nodes, hedge_nodes) = super::causal::beyond_marks(&answer.identification);
    let marks = GraphMarks { exposure: Some(x), outcome: Some(y), adjusted: &adjusted, highlight: Vec::new(), formula: &formula_nodes, hedge: &hedge_nodes };
    first.svg = figures::graph(graph, &format!("{kind} effect of {x} on {y} in {g}"), &marks).ok();
    warnings.extend(answer.warnings.iter().map(|w| format!("{label}: {w}")));

    let id = &answer.identification;
    let mut json = json!({
        "query": format!("{kind} effect"), "exposure": x, "outcome": y, "identifiable": id.identifiable, "zero_by_graph": id.zero_by_graph,
        "adjustment_sets": id.adjustment_sets, "reason": id.reason, "adjustment_set": answer.adjustment_set,
        "table": t, "model": answer.model_text, "route": answer.route, "beyond_adjustment": id.beyond, "why": answer.why, "method": answer.method, "estimand": answer.estimand,
        "contrasts": answer.contrasts.iter().map(to_json).collect::<Vec<_>>(), "warnings": answer.warnings,
    });
    let (Some(model), Some(fit), Some(model_text)) = (answer.model, answer.fit, answer.model_text) else {
        let heading = match &id.beyond {
            _ if id.zero_by_graph => format!("{kind} effect of {x} on {y} in {g}: zero by the graph's assumptions, so nothing was fitted"),
            Some(b) if b.identified => format!("{kind} effect of {x} on {y} in {g}: identifiable by a formula Waypath does not yet estimate, so nothing was fitted"),
            Some(_) => format!("{kind} effect of {x} on {y} in {g}: not identifiable, so nothing was fitted"),
            None => format!("{kind} effect of {x} on {y} in {g}: not identifiable by adjustment, so nothing was fitted"),
        };
        let (plain, html) = render(&heading, &[], &[], &answer.why);
        json["model_name"] = Value::Null;
        return Ok(vec![first, Display { plain, html: Some(html), svg: None, json: Some(json) }]);
    };
    let set_words = if adjusted.is_empty() { "nothing".to_string() } else { adjusted.join(", ") };
    let route_words = match (answer.route.as_deref(), id.beyond.as_ref()) {
        (Some("front door"), Some(b)) => format!("through the front door via {}", b.front_door_set.join(", ")),
        (Some("complete algorithm"), _) => "by the identifying formula of the complete algorithm".to_string(),
        _ => format!("stratifying by {set_words}"),
    };
    let heading = format!("{kind} effect of {x} on {y} in {g}, from table {t}, {route_words}");
    let mut grid = summary_grid(&["contrast", "scale"], mass);
    let mut sparse = Vec::new();
    for c in &answer.contrasts {
        let mut row = vec![c.contrast.clone(), c.scale.clone()];
        row.extend(summary_cells(&c.summary(), c.unit.as_deref()));
        grid.push(row);
        sparse.extend(sparse_levels(c, table).into_iter().filter(|s| !sparse.contains(s)).collect::<Vec<_>>());
    }
    json["sparse_levels"] = json!(sparse);
    let mut model_grid = Grid::new(&["model built"]);
    for (_, _, text) in &answer.other_models {
        text.lines().for_each(|l| model_grid.push(vec![l.to_string()]));
    }
    model_text.lines().for_each(|l| model_grid.push(vec![l.to_string()]));
    let mut notes: Vec<String> = answer.estimand.iter().map(|e| format!("estimand: {e}")).collect();
    notes.extend(answer.why.iter().cloned());
    if let Some(c) = answer.contrasts.first() {
        notes.push(c.held_how.clone());
        notes.push(c.interval.clone() + "s of per-draw differences");
    }
    notes.push(format!("fitted with {}", answer.method.clone().unwrap_or_default()));
    notes.extend(answer.warnings.iter().map(|w| format!("warning: {w}")));
    let name = model.name().to_string();
    notes.push(format!("the model is kept as {name}: `show {name}`, `contrast {name}: …` and `check {name}` work on it"));
    if !answer.other_models.is_empty() {
        let names: Vec<&str> = answer.other_models.iter().map(|(m, _, _)| m.name()).collect();
        notes.push(format!("the formula's other models are kept as {}", names.join(", ")));
    }
    notes.push(CAUSAL_NOTE.to_string());
    let lead: Vec<String> = if sparse.is_empty() { Vec::new() } else { vec![sparse_alert(&sparse)] };
    let (plain, html) = render(&heading, &lead, &[("", &model_grid), ("contrasts:", &grid)], &notes);
    let named: Vec<(String, &[f64])> = answer.contrasts.iter().map(|c| (c.contrast.clone(), c.draws.as_slice())).collect();
    let svg = figures::differences(&format!("{kind} effect of {x} on {y}"), table, y, &named, DensityArrangement::Stacked).ok();
    json["model_name"] = json!(name);
    let spec = ModelSpec::from_lines(&name, model_text.lines().enumerate().map(|(i, l)| (i + 1, l))).ok();
    if let Some(spec) = spec {
        session.specs.insert(name.clone(), spec);
    }
    session.models.insert(name.clone(), model);
    session.fits.insert(name, fit);
    for (m_model, m_fit, m_text) in answer.other_models {
        let m_name = m_model.name().to_string();
        if let Ok(spec) = ModelSpec::from_lines(&m_name, m_text.lines().enumerate().map(|(i, l)| (i + 1, l))) {
            session.specs.insert(m_name.clone(), spec);
        }
        session.models.insert(m_name.clone(), m_model);
        session.fits.insert(m_name, m_fit);
    }
    Ok(vec![first, Display { plain, html: Some(html), svg, json: Some(json) }])
}

/// `compare routes for total|direct effect of X on Y in G using T [with …]`:
/// the adjustment-set contrast beside the simulated intervention through a
/// joint model of the whole graph (for a direct effect, its controlled
/// direct effect), and the graph's other adjustment sets as routes of
/// their own.
pub(crate) fn compare_routes(
    session: &mut Session,
    st: &Statement,
    control: &RunControl,
    warnings: &mut Vec<String>,
) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([kind, x, y, g, t], options) = header(st, &COMPARE_ROUTES)?;
    let effect = if kind == "total" { EffectKind::Total } else { EffectKind::Direct };
    let (mass, options) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let (settings, options) = route_settings(&options).map_err(|m| CellError::at(line, format!("{m}; the form is: {}", COMPARE_ROUTES.usage)))?;
    let (method, graph, table) = method_graph_table(session, &options, g, t, line)?;
    let chosen = check_settings(table, x, settings.as_ref()).map_err(|m| CellError::at(line, m))?;
    let ask = AskOptions { settings: settings.clone(), ..AskOptions::default() };
    let label = format!("compare routes for {x} on {y}");
    let progress = sampler_progress(control, &label);
    (control.progress)(&format!("{label}: fitting the adjustment model"));
    let answer = answer_effect_with_progress(graph, table, x, y, effect, &ask, &method, control.cancel, mass, &progress)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let Some(adjustment) = answer.contrasts.first() else {
        let zero = answer.identification.zero_by_graph;
        let heading = match (zero, effect) {
            (true, EffectKind::Total) => format!("total effect of {x} on {y} in {g}: zero by the graph ({x} is not an ancestor of {y}), so there are no routes to compare"),
            (true, EffectKind::Direct) => format!("direct effect of {x} on {y} in {g}: zero by the graph (no edge {x} -> {y}), so there are no routes to compare"),
            (false, _) => format!("{kind} effect of {x} on {y} in {g}: no adjustment set exists, so there is no adjustment route to compare"),
        };
        let (plain, html) = render(&heading, &[], &[], &answer.why);
        let json = json!({"question": answer.question, "identifiable": answer.identification.identifiable, "zero_by_graph": zero,
                          "adjustment": null, "joint": null, "difference": null, "notes": answer.why});
        return Ok(vec![Display { plain, html: Some(html), svg: None, json: Some(json) }]);
    };
    if answer.route.as_deref() != Some("adjustment") && effect == EffectKind::Total {
        let second = joint_formula_route(&answer, graph, table, x, y, &method, mass, control, &label, line)?;
        return Ok(vec![formula_routes(&answer, x, y, g, mass, second)]);
    }
    if adjustment.level.is_some() {
        return Err(CellError::at(
            line,
            format!(
                "{y} is a category: compare routes compares one number per route; `ask {kind} effect of {x} on {y} in {g} using {t}` \
                 gives each level's share by adjustment, and `intervene` on a joint model watches the same shares"
            ),
        ));
    }
    (control.progress)(&format!("{label}: fitting the graph's other adjustment sets"));
    let (other_routes, others_note) =
        crate::query::other_set_routes(&answer, table, x, y, effect, (&adjustment.to, &adjustment.from), &method, control.cancel, mass, &progress)
            .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let others = other_set_rows(adjustment, &other_routes, mass).map_err(|e| query_error(e, line))?;
    if effect == EffectKind::Direct {
        (control.progress)(&format!("{label}: fitting {y}'s regression of the joint model"));
        let joint = crate::query::controlled_direct_route(graph, table, x, y, (&adjustment.to, &adjustment.from), &method, control.cancel, mass, &progress)
            .map_err(|e| stopped_or(control, &label, line, e))?;
        check_cancel(control, &label, line)?;
        let routes = DirectRoutes { answer: &answer, first: adjustment, others, others_note, joint, graph_name: g, method: method.describe(), mass };
        return Ok(vec![routes.display(table, x, y).map_err(|e| query_error(e, line))?]);
    }
    let joint = build_joint(&format!("routes_{x}_{y}"), graph, table, &[]).map_err(|e| query_error(e, line))?;
    let node_progress = joint_progress(control, &label, "joint model, ");
    (control.progress)(&format!("{label}: fitting one regression per node of {g}"));
    let joint_fit = fit_joint_with_progress(&joint, &method, control.cancel, &node_progress)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let request = InterventionRequest {
        variable: x.to_string(),
        to: adjustment.to.clone(),
        from: adjustment.from.clone(),
        watch: vec![y.to_string()],
        rows: None,
        seed: DEFAULT_SEED,
        mass,
        groups: crate::query::GroupQuestion::Observed,
    };
    let simulated = intervene(&joint, &joint_fit, table, &request).map_err(|e| query_error(e, line))?;
    let watched = &simulated.watched[0];
    let routes = crate::query::compare_routes(adjustment, watched, mass).map_err(|e| query_error(e, line))?;
    (control.progress)(&format!("{label}: looking for a front-door route"));
    let front = crate::query::front_door_route(graph, table, x, y, &adjustment.to, &adjustment.from, &method, control.cancel, mass)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let front_difference = front
        .as_ref()
        .map(|f| {
            let n = adjustment.draws.len().min(f.contrast.draws.len());
            let d: Vec<f64> = (0..n).map(|i| adjustment.draws[i] - f.contrast.draws[i]).collect();
            ContrastSummary::of(&d, mass)
        })
        .transpose()
        .map_err(|e| query_error(e, line))?;
    let set = answer.adjustment_set.clone().unwrap_or_default();
    let set_words = if set.is_empty() { "nothing".to_string() } else { set.join(", ") };
    let unit = adjustment.unit.as_deref();
    let count = 2 + usize::from(front.is_some()) + others.json.len();
    let heading = format!(
        "total effect of {x} on {y} in {g}, {}: {count} routes, adjustment {} vs joint model {}",
        adjustment.contrast,
        with_unit(routes.adjustment.mean, unit),
        with_unit(routes.joint.mean, unit)
    );
    let by_formula = simulated.route == crate::query::FORMULA_ROUTE;
    let joint_name = if by_formula { "joint model (its identifying formula)" } else { "joint model (simulated intervention)" };
    let front_summary = front.as_ref().map(|f| f.contrast.summary());
    let mut rows: Vec<(String, &ContrastSummary)> = vec![
        (format!("adjustment (stratify by {set_words})"), &routes.adjustment),
        (joint_name.to_string(), &routes.joint),
        ("difference (adjustment − joint)".to_string(), &routes.difference),
    ];
    if let (Some(f), Some(fs), Some(fd)) = (&front, &front_summary, &front_difference) {
        rows.push((format!("front door (through {})", f.mediators.join(", ")), fs));
        rows.push(("difference (adjustment − front door)".to_string(), fd));
    }
    rows.extend(others.rows.iter().map(|(name, s)| (name.clone(), s)));
    let mut grid = summary_grid(&["route"], mass);
    for (name, s) in rows {
        let mut row = vec![name];
        row.extend(summary_cells(s, unit));
        grid.push(row);
    }
    let mut notes = routes.notes.clone();
    notes.extend(chosen);
    if by_formula {
        notes.push(format!(
            "hidden nodes touch what the joint model would simulate, so its route evaluates the identifying formula: {}",
            simulated.formulas.iter().map(|f| format!("{}; fitted: {}", f.formula, f.fitted.join(" | "))).collect::<Vec<_>>().join("; ")
        ));
    } else {
        notes.push(format!(
            "the joint model fits one regression per observed node of {g} and simulates do({x}) over {} (seed {})",
            simulated.rows_source, simulated.seed
        ));
    }
    if let Some(f) = &front {
        notes.push(format!(
            "the front door through {} is a third route (Pearl 2009, §3.3.2): {}; fitted: {}; it uses the mediators' response to {x} and {y}'s to them, \
             not the adjustment set, so agreement between the routes is a check on the graph",
            f.mediators.join(", "),
            f.formula,
            f.fitted.join(" | ")
        ));
        notes.extend(f.warnings.iter().map(|w| format!("front-door route: {w}")));
    }
    notes.extend(others_note);
    notes.extend(others.notes.iter().cloned());
    notes.push("the routes are fitted separately, so each difference pairs draws at random; it is wide by design".to_string());
    notes.extend(simulated.warnings.iter().map(|w| format!("joint route: {w}")));
    notes.extend(answer.warnings.iter().map(|w| format!("adjustment route: {w}")));
    notes.push(format!("fitted with {}; intervals are {}s", method.describe(), adjustment.interval));
    notes.push(CAUSAL_NOTE.to_string());
    warnings.extend(simulated.warnings.iter().map(|w| format!("{label}: {w}")));
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let mut named: Vec<(String, &[f64])> =
        vec![("adjustment route".to_string(), adjustment.draws.as_slice()), ("joint route".to_string(), watched.draws.as_slice())];
    if let Some(f) = &front {
        named.push(("front-door route".to_string(), f.contrast.draws.as_slice()));
    }
    for route in &other_routes {
        named.push((format!("set {{{}}}", route.set.join(", ")), route.contrast.draws.as_slice()));
    }
    let svg = figures::differences(&format!("total effect of {x} on {y}, {}: {count} routes", adjustment.contrast), table, y, &named, DensityArrangement::Shared).ok();
    let summary = |s: &ContrastSummary| to_json(s);
    let mut adjustment_json = summary(&routes.adjustment);
    adjustment_json["adjustment_set"] = json!(set);
    adjustment_json["model"] = json!(answer.model_text);
    let mut joint_json = summary(&routes.joint);
    joint_json["simulated"] = json!(simulated.simulated);
    joint_json["route"] = json!(simulated.route);
    joint_json["formulas"] = json!(simulated.formulas);
    let front_json = match (&front, &front_summary) {
        (Some(f), Some(fs)) => {
            let mut j = summary(fs);
            j["mediators"] = json!(f.mediators);
            j["formula"] = json!(f.formula);
            j["fitted"] = json!(f.fitted);
            j
        }
        _ => Value::Null,
    };
    let json = json!({
        "question": answer.question, "contrast": adjustment.contrast, "to": adjustment.to, "from": adjustment.from,
        "unit": adjustment.unit, "interval_mass": mass, "identifiable": true,
        "adjustment": adjustment_json, "joint": joint_json, "difference": summary(&routes.difference),
        "front_door": front_json, "difference_front_door": front_difference.as_ref().map(summary),
        "other_sets": others.json, "seed": simulated.seed, "notes": notes,
    });
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(json) }])
}

/// The `setting b vs a` option of `compare routes` (`(b, a)`), and the
/// options text without it.
fn route_settings(text: &str) -> Result<(Option<(String, String)>, String), String> {
    let words: Vec<&str> = text.split_whitespace().collect();
    match words.as_slice() {
        ["setting", b, "vs", a, rest @ ..] => Ok((Some((b.to_string(), a.to_string())), rest.join(" "))),
        ["setting", ..] => Err("`setting` is followed by the two settings to compare, `setting b vs a`".into()),
        _ => Ok((None, text.to_string())),
    }
}

/// Refuse settings that are not levels (or numbers) of the exposure
/// before anything is fitted; without settings, a note on the two the
/// comparison takes (the second level against the first).
fn check_settings(table: &Table, x: &str, settings: Option<&(String, String)>) -> Result<Option<String>, String> {
    let Some(column) = table.column(x) else { return Ok(None) };
    let levels = column.data.levels();
    if let Some((b, a)) = settings {
        for v in [b, a] {
            match levels {
                Some(levels) if !levels.contains(v) => {
                    return Err(format!("`{v}` is not a level of {x} (its levels: {})", levels.join(", ")))
                }
                None if v.parse::<f64>().is_err() => return Err(format!("{x} is numeric; `{v}` is not a number")),
                _ => {}
            }
        }
        if b == a {
            return Err(format!("the two settings of {x} are the same (`{b}`); name two different ones"));
        }
        return Ok(None);
    }
    Ok(match levels {
        Some(levels) if levels.len() > 2 => Some(format!(
            "no settings named: {x} {} vs {}, the second level against the first; name others with `setting b vs a`",
            levels[1], levels[0]
        )),
        _ => None,
    })
}

/// The joint model's route beside a formula answer: its watched contrast
/// and formulas, or a note why it is not taken.
type SecondRoute = Result<(crate::query::WatchedContrast, Vec<String>), String>;

/// The joint model's route to an effect an identifying formula answers:
/// `intervene` on a joint model of the graph, which evaluates the complete
/// algorithm's formula where hidden nodes touch its simulation. `Err` of a
/// note when it adds nothing (the same formula as the answer's) or cannot
/// be taken; otherwise the watched contrast and its formulas.
#[allow(clippy::too_many_arguments)]
fn joint_formula_route(
    answer: &crate::query::EffectAnswer,
    graph: &crate::graph::Graph,
    table: &Table,
    x: &str,
    y: &str,
    method: &Method,
    mass: f64,
    control: &RunControl,
    label: &str,
    line: usize,
) -> Result<SecondRoute, CellError> {
    let Some(first) = answer.contrasts.first() else { return Ok(Err("nothing was estimated, so there is no second route".into())) };
    let beyond_formula = answer.identification.beyond.as_ref().and_then(|b| b.formula.clone());
    if let Ok(crate::graph::Complete::Identified { formula, .. }) = graph.identify_intervention_with_cancel(&[x], &[y], control.cancel) {
        if Some(formula) == beyond_formula {
            return Ok(Err("the joint model's route would evaluate the same formula with the same fits, so it is not repeated".into()));
        }
    }
    let joint = build_joint(&format!("routes_{x}_{y}"), graph, table, &[]).map_err(|e| query_error(e, line))?;
    let node_progress = joint_progress(control, label, "joint model, ");
    (control.progress)(&format!("{label}: fitting one regression per node of {}", graph.name()));
    let joint_fit = fit_joint_with_progress(&joint, method, control.cancel, &node_progress).map_err(|e| stopped_or(control, label, line, e))?;
    check_cancel(control, label, line)?;
    let request = InterventionRequest { variable: x.to_string(), to: first.to.clone(), from: first.from.clone(), watch: vec![y.to_string()], rows: None, seed: DEFAULT_SEED, mass, groups: crate::query::GroupQuestion::Observed };
    match intervene(&joint, &joint_fit, table, &request) {
        Ok(mut result) => {
            let formulas = result.formulas.iter().map(|f| format!("{}; fitted: {}", f.formula, f.fitted.join(" | "))).collect();
            Ok(Ok((result.watched.remove(0), formulas)))
        }
        Err(e) => Ok(Err(format!("the joint model's route was not taken: {e}"))),
    }
}

/// The answer of `compare routes` when the effect is identified by a
/// formula: that estimate, and the joint model's route beside it when it
/// evaluates another formula (else a note why not).
fn formula_routes(
    answer: &crate::query::EffectAnswer,
    x: &str,
    y: &str,
    g: &str,
    mass: f64,
    second: SecondRoute,
) -> Display {
    let route = answer.route.clone().unwrap_or_default();
    let first = if route == "front door" { "the front door".to_string() } else { format!("the identifying formula of the {route}") };
    let heading = match &second {
        Ok(_) => format!("total effect of {x} on {y} in {g}: two routes — {first}, and the joint model's identifying formula; no adjustment set exists"),
        Err(_) => format!("total effect of {x} on {y} in {g}: one route only — {first}; no adjustment set exists"),
    };
    let mut grid = summary_grid(&["route", "contrast"], mass);
    for c in &answer.contrasts {
        let mut row = vec![route.clone(), c.contrast.clone()];
        row.extend(summary_cells(&c.summary(), c.unit.as_deref()));
        grid.push(row);
    }
    let mut notes = answer.why.clone();
    let mut joint_json = Value::Null;
    let mut difference_json = Value::Null;
    match &second {
        Ok((w, formulas)) => {
            let first = &answer.contrasts[0];
            let s = ContrastSummary { mean: w.mean, lower: w.lower, upper: w.upper, share_above_zero: w.share_above_zero, share_below_zero: w.share_below_zero, mass };
            let mut row = vec!["joint model (its identifying formula)".to_string(), first.contrast.clone()];
            row.extend(summary_cells(&s, first.unit.as_deref()));
            grid.push(row);
            let n = first.draws.len().min(w.draws.len());
            let d: Vec<f64> = (0..n).map(|i| first.draws[i] - w.draws[i]).collect();
            if let Ok(ds) = ContrastSummary::of(&d, mass) {
                let mut row = vec![format!("difference ({route} − joint)"), first.contrast.clone()];
                row.extend(summary_cells(&ds, first.unit.as_deref()));
                grid.push(row);
                difference_json = to_json(&ds);
            }
            notes.push(format!("the joint model's route: {}", formulas.join("; ")));
            notes.push("the two routes are fitted separately, so their difference pairs draws at random; it is wide by design".to_string());
            joint_json = to_json(&s);
            joint_json["formulas"] = json!(formulas);
        }
        Err(why) => notes.push(why.clone()),
    }
    notes.push(CAUSAL_NOTE.to_string());
    let (plain, html) = render(&heading, &[], &[("", &grid)], &notes);
    let json = json!({"question": answer.question, "identifiable": false, "route": route,
                      "formula_route": answer.contrasts.iter().map(to_json).collect::<Vec<_>>(), "adjustment": null, "joint": joint_json,
                      "difference": difference_json, "notes": notes});
    Display { plain, html: Some(html), svg: None, json: Some(json) }
}

/// `implications of G checked against T [with …]`.
pub(crate) fn implications_checked(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([g, t], options) = header(st, &IMPLICATIONS_CHECKED)?;
    let (mass, options) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let default = Method::Laplace { draws: crate::infer::fit::LAPLACE_DRAWS, seed: crate::infer::fit::LAPLACE_SEED };
    let method = method_or(&options, default, line)?;
    let graph = session.require_graph(g, line)?;
    let table = session.require_table(t, line)?;
    let label = format!("implications of {g} checked against {t}");
    (control.progress)(&format!("{label}: one regression per implication, {}", method.describe()));
    let report = check_implications(graph, table, &method, control.cancel, mass)
        .map_err(|e| stopped_or(control, &label, line, e))?;
    check_cancel(control, &label, line)?;
    let heading = if report.contradicted > 0 {
        format!("{} of the {} checked implications of {g} are CONTRADICTED by table {t}", report.contradicted, report.checked)
    } else {
        format!("implications of {g} checked against table {t}: none of the {} checked is contradicted", report.checked)
    };
    let lead: Vec<String> = report
        .checks
        .iter()
        .filter(|c| c.contradicted)
        .map(|c| {
            let parts: Vec<String> = c
                .associations
                .iter()
                .filter(|a| a.lower > 0.0 || a.upper < 0.0)
                .map(|a| format!("{} = {} ({} to {})", a.label, num(a.mean), num(a.lower), num(a.upper)))
                .collect();
            format!("⚠ contradicted: {} — {}; the graph may be missing an arrow or a common cause here", c.statement, parts.join("; "))
        })
        .collect();
    let (lower, upper) = bounds(mass);
    let mut grid = Grid::new(&["implication", "regression", "association", "mean", &lower, &upper, "verdict"])
        .numeric_columns(&[3, 4, 5]);
    for c in report.checks.iter().filter(|c| c.checked) {
        for a in &c.associations {
            let verdict = if a.lower > 0.0 || a.upper < 0.0 { "contradicted" } else { "consistent" };
            grid.push(vec![
                c.statement.clone(),
                c.regression.clone().unwrap_or_default(),
                a.label.clone(),
                num(a.mean),
                num(a.lower),
                num(a.upper),
                verdict.to_string(),
            ]);
        }
    }
    let mut notes: Vec<String> = report
        .checks
        .iter()
        .filter(|c| !c.checked)
        .map(|c| format!("not checked: {} — {}", c.statement, c.note.clone().unwrap_or_default()))
        .collect();
    notes.extend(report.untestable.iter().map(|u| format!("not checkable: {u} (only hidden nodes separate them)")));
    notes.extend(report.checks.iter().filter(|c| c.checked).filter_map(|c| c.note.as_ref().map(|n| format!("{}: {n}", c.statement))));
    notes.push(format!(
        "an implication is contradicted when the {} of the association excludes zero; with a correct graph about one check in ten is flagged by chance",
        report.interval
    ));
    notes.push(format!("regressions fitted with {}", report.method));
    let grids: Vec<(&str, &Grid)> = if grid.rows.is_empty() { Vec::new() } else { vec![("", &grid)] };
    if report.checks.is_empty() {
        notes.insert(0, format!("graph {g} implies no independence between observed nodes, so there is nothing to check"));
    }
    let (plain, html) = render(&heading, &lead, &grids, &notes);
    let svg = if grid.rows.is_empty() { None } else { figures::implications(&report).ok() };
    Ok(vec![Display { plain, html: Some(html), svg, json: Some(to_json(&report)) }])
}
