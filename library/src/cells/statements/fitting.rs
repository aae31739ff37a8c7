//! Statements about models: `model`, `fit`, `show`, `export`, `plot`.

use std::sync::atomic::Ordering;

use serde_json::json;

use super::data::is_name;
use super::grammar::{
    EXPORT, FIT, LAPLACE_OPTIONS, METHODS, MODEL, NUTS_OPTIONS, PLOT, RETIRED_NUTS_OPTIONS, RETIRED_PLOT_KINDS, SHOW,
};
use super::{form_error, header, interval_option, option_text, unquote};
use crate::cells::figures;
use crate::cells::files::write_atomically;
use crate::cells::fit_summary;
use crate::cells::output::{html_block, html_list, CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::model::prior::PriorGroup;
use crate::cells::session::{suggest, RunControl, Session};
use crate::draws::SummarySpec;
use crate::infer::fit::{fit_model, Fit, Method, LAPLACE_DRAWS, LAPLACE_SEED};
use crate::infer::nuts::{MassMatrix, NutsSettings, MASS_WORDS};
use crate::limits::{whole_number, MAX_CHAINS, MAX_DOUBLINGS, MAX_SETTLE};
use crate::model::{Model, ModelSpec};


/// `model NAME:` — build the model against its table and describe it.
pub(crate) fn model(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let ([name], _) = header(st, &MODEL)?;
    if !is_name(name) || !st.expects_body() {
        return Err(form_error(st, MODEL.usage));
    }
    let lines = st.body.iter().map(|l| (l.number, l.text.as_str()));
    let spec = ModelSpec::from_lines(name, lines).map_err(|e| model_error(st, e))?;
    let line = spec.formula_line.unwrap_or(st.header.number);
    #[cfg(feature = "on_disk")]
    if let Some(table) = session.disk_tables.get(&spec.table) {
        let model = Model::build_on_disk(&spec, table, control.cancel).map_err(|e| CellError::at(line, e.to_string()))?;
        let display = describe_model(&model, model.on_disk().map_or(0, |d| d.rows()));
        session.fits.remove(name);
        session.specs.insert(name.to_string(), spec);
        session.models.insert(name.to_string(), model);
        return Ok(vec![display]);
    }
    let _ = control;
    let table = session.require_table(&spec.table, line)?;
    let model = Model::build(&spec, table).map_err(|e| CellError::at(line, e.to_string()))?;
    let mut display = describe_model(&model, table.nrows());
    add_notes(&mut display, &sparse_level_warnings(&spec, table));
    session.fits.remove(name);
    session.specs.insert(name.to_string(), spec);
    session.models.insert(name.to_string(), model);
    Ok(vec![display])
}

/// Levels with fewer rows than this are named in a warning: their
/// parameters lean mostly on the priors.
use crate::cells::fit_summary::FEW_ROWS;

/// A warning for every level of a category the model stratifies by that has
/// no rows or very few (a `keep where` may have emptied it): its parameters
/// rest on the priors alone, or nearly, and contrasts on it are not estimates
/// from data.
fn sparse_level_warnings(spec: &crate::model::ModelSpec, table: &crate::table::Table) -> Vec<String> {
    let mut categories: Vec<&str> = Vec::new();
    for term in &spec.terms {
        let named = match term {
            crate::model::TermSpec::Column(c) => Some(c.as_str()),
            crate::model::TermSpec::Per { by, .. } => Some(by.as_str()),
            _ => None,
        };
        if let Some(c) = named.filter(|c| !categories.contains(c)) {
            categories.push(c);
        }
    }
    let mut out = Vec::new();
    for name in categories {
        let Some(crate::table::ColumnData::Category { codes, levels }) = table.column(name).map(|c| &c.data) else { continue };
        let mut counts = vec![0usize; levels.len()];
        for &code in codes {
            if let Some(n) = counts.get_mut(code as usize) {
                *n += 1;
            }
        }
        for (level, &n) in levels.iter().zip(&counts) {
            if n == 0 {
                out.push(format!(
                    "warning: level {level} of {name} has no rows in table {} (a `keep where` or `drop missing` may have removed them); its parameters rest on the priors alone, so a contrast with {level} is not an estimate from data",
                    spec.table
                ));
            } else if n < FEW_ROWS {
                out.push(format!(
                    "warning: level {level} of {name} has only {n} row{} in table {}; its parameters lean mostly on the priors",
                    if n == 1 { "" } else { "s" },
                    spec.table
                ));
            }
        }
    }
    out
}

/// Append notes to a display's written forms and to its JSON `notes`.
fn add_notes(display: &mut Display, notes: &[String]) {
    if notes.is_empty() {
        return;
    }
    for n in notes {
        display.plain.push_str(&format!("\n• {n}"));
    }
    if let Some(html) = display.html.as_mut() {
        html.push_str(&html_list(notes));
    }
    if let Some(serde_json::Value::Array(list)) = display.json.as_mut().and_then(|j| j.get_mut("notes")) {
        list.extend(notes.iter().map(|n| serde_json::Value::String(n.clone())));
    }
}

fn model_error(st: &Statement, e: crate::model::error::ModelError) -> CellError {
    // ModelError messages already start with "model line N:" when they have a place.
    CellError { line: None, message: format!("{} (model starting at cell line {})", e, st.header.number) }
}

fn describe_model(model: &Model, rows: usize) -> Display {
    let names = model.parameter_names();
    let heading = format!(
        "model {}: {} ({} family, {} link) from table {}, {rows} rows, {} parameters",
        model.name(),
        model.outcome_name(),
        model.family().name(),
        model.family().link_name(),
        model.table_name(),
        names.len()
    );
    let grid = priors_grid(model);
    let notes: Vec<String> = model.notes().to_vec();
    let mut plain = format!("{heading}\n{}", grid.to_text());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    let json = json!({
        "model": model.name(), "outcome": model.outcome_name(), "family": model.family().name(),
        "table": model.table_name(), "rows": rows, "parameters": names, "notes": notes,
    });
    Display { plain, html: Some(html_block(&heading, &[grid.to_html(), html_list(&notes)])), svg: None, json: Some(json) }
}

fn priors_grid(model: &Model) -> Grid {
    let mut grid = Grid::new(&["prior group", "parameters", "prior", "set by"]);
    let mut rows: Vec<(String, Vec<String>, String, &'static str)> = Vec::new();
    for p in model.priors_used() {
        let prior = p.prior.to_string();
        // the family's own parameter (spread, overdispersion, precision,
        // shape, gaps) takes its default from the outcome, not from a share
        // of the coefficients' budget (`model::defaults`)
        let own = matches!(
            p.group,
            PriorGroup::Spread | PriorGroup::Overdispersion | PriorGroup::Precision | PriorGroup::Shape | PriorGroup::Gaps
        );
        let source = match (p.declared, p.at_average_row, own) {
            (true, _, _) if p.for_parameter => "declared in the cell for this parameter",
            (true, _, _) => "declared in the cell",
            (false, true, _) => "Waypath default (shared budget), on the average row",
            (false, false, true) => "Waypath default (family parameter)",
            (false, false, false) => "Waypath default (shared budget)",
        };
        match rows.last_mut() {
            Some(last) if last.0 == p.group.name() && last.2 == prior && last.3 == source => {
                last.1.extend(p.parameters.iter().cloned())
            }
            _ => rows.push((p.group.name().to_string(), p.parameters.clone(), prior, source)),
        }
    }
    for (group, parameters, prior, source) in rows {
        grid.push(vec![group, parameters.join(", "), prior, source.to_string()]);
    }
    grid
}

/// `fit NAME [with …]` — sample or approximate the posterior.
pub(crate) fn fit(session: &mut Session, st: &Statement, control: &RunControl, warnings: &mut Vec<String>) -> Result<Vec<Display>, CellError> {
    let ([name], options) = header(st, &FIT)?;
    let (mass, options) = interval_option(options, st.header.number)?;
    let mass = session.interval_mass(mass);
    let method = parse_method(&options).map_err(|m| CellError::at(st.header.number, format!("{m}; the form is: {}", FIT.usage)))?;
    let model = session.models.get(name).ok_or_else(|| {
        CellError::at(st.header.number, format!("there is no model named {name}{}", suggest(name, session.models.keys())))
    })?;
    let label = format!("fit {name}");
    let progress = super::questions::sampler_progress(control, &label);
    let fit = fit_model(model, &method, control.cancel, &progress).map_err(|e| {
        let stopped = control.cancel.load(Ordering::Relaxed);
        let message = if stopped { format!("fit {name} was interrupted; the session is unchanged") } else { format!("fit {name}: {e}") };
        CellError::at(st.header.number, message)
    })?;
    warnings.extend(fit.warnings.iter().map(|w| format!("fit {name}: {w}")));
    let display = describe_fit(model, &fit, session.tables.get(model.table_name()), mass)?;
    session.fits.insert(name.to_string(), fit);
    Ok(vec![display])
}

/// Read `with laplace …` / `with nuts …` options (the words of
/// [`METHODS`], [`LAPLACE_OPTIONS`] and [`NUTS_OPTIONS`]); an empty text is
/// NUTS with Waypath's defaults.
///
/// ```
/// use waypath::cells::statements::parse_method;
/// use waypath::infer::fit::Method;
/// let Ok(Method::Nuts(s)) = parse_method("with nuts chains 2 settle 300 seed 7") else { panic!() };
/// assert_eq!((s.chains, s.settle, s.seed), (2, 300, 7));
/// assert!(parse_method("with nuts warmup 300").unwrap_err().contains("now called `settle`"));
/// use waypath::infer::nuts::MassMatrix;
/// let Ok(Method::Nuts(s)) = parse_method("with nuts mass low-rank") else { panic!() };
/// assert_eq!(s.mass, MassMatrix::LowRank);
/// assert!(parse_method("with nuts mass dense").unwrap_err().contains("diagonal or low-rank"));
/// ```
pub fn parse_method(text: &str) -> Result<Method, String> {
    let words: Vec<&str> = text.split_whitespace().collect();
    let (kind, rest) = match words.as_slice() {
        [] => ("nuts", &[][..]),
        ["with", kind, rest @ ..] => (*kind, rest),
        _ => return Err(format!("cannot read the options \"{}\"", words.join(" "))),
    };
    if rest.len() % 2 != 0 {
        return Err(format!("options come in pairs like `draws 2000`; got \"{}\"", rest.join(" ")));
    }
    let pairs: Vec<(&str, &str)> = rest.chunks(2).map(|c| (c[0], c[1])).collect();
    let count = |k: &str, v: &str| {
        let (low, high) = option_range(k);
        let n = whole_number(k, v, low, high)?;
        usize::try_from(n).map_err(|_| format!("{k} {n} is more than this machine can address; ask for less"))
    };
    let unknown = |keys: &[&str], other: &str| match (kind, RETIRED_NUTS_OPTIONS.iter().find(|(old, _)| *old == other)) {
        ("laplace", _) => format!("laplace takes `{}`, not `{other}`", keys.join("` and `")),
        (_, Some((old, new))) => format!("the nuts option `{old}` is now called `{new}`; write `{new}` with the same value"),
        _ => format!("nuts takes {} — not `{other}`", keys.join(", ")),
    };
    match kind {
        _ if !METHODS.contains(&kind) => Err(format!("unknown method `{kind}`; use `with nuts` or `with laplace`")),
        "laplace" => {
            let (mut draws, mut seed) = (LAPLACE_DRAWS, LAPLACE_SEED);
            for (k, v) in pairs {
                match k {
                    _ if !LAPLACE_OPTIONS.contains(&k) => return Err(unknown(LAPLACE_OPTIONS, k)),
                    "draws" => draws = count(k, v)?,
                    "seed" => seed = whole_number(k, v, 0, u64::MAX)?,
                    other => return Err(unknown(LAPLACE_OPTIONS, other)),
                }
            }
            Ok(Method::Laplace { draws, seed })
        }
        "nuts" => {
            let mut s = NutsSettings::default();
            for (k, v) in pairs {
                match k {
                    _ if !NUTS_OPTIONS.contains(&k) => return Err(unknown(NUTS_OPTIONS, k)),
                    "chains" => s.chains = count(k, v)?,
                    "settle" => s.settle = count(k, v)?,
                    "draws" => s.draws = count(k, v)?,
                    "seed" => s.seed = whole_number(k, v, 0, u64::MAX)?,
                    "doublings" => s.doublings = whole_number(k, v, 1, MAX_DOUBLINGS)? as u32,
                    "mass" => {
                        s.mass = MassMatrix::from_word(v).ok_or_else(|| {
                            format!("mass takes {}, not \"{v}\" (leave it out to let Waypath choose for the model)", MASS_WORDS.join(" or "))
                        })?
                    }
                    "acceptance" => {
                        s.acceptance = v
                            .parse::<f64>()
                            .ok()
                            .filter(|a| *a > 0.0 && *a < 1.0)
                            .ok_or_else(|| format!("acceptance takes a number between 0 and 1 (exclusive), not \"{v}\""))?
                    }
                    other => return Err(unknown(NUTS_OPTIONS, other)),
                }
            }
            Ok(Method::Nuts(s))
        }
        other => Err(format!("unknown method `{other}`; use `with nuts` or `with laplace`")),
    }
}

/// The range of a whole-number fitting option; sizes whose memory depends
/// on the model (draws) are checked again against the memory when fitting.
fn option_range(key: &str) -> (u64, u64) {
    match key {
        "chains" => (1, MAX_CHAINS),
        "settle" => (0, MAX_SETTLE),
        _ => (1, u64::MAX),
    }
}

/// The fit summary: the estimates table (units from the columns of
/// `table`, the model's table), its priors, the sampler's health in one
/// sentence, and the warnings ([`crate::cells::fit_summary`]).
pub(crate) fn describe_fit(model: &Model, fit: &Fit, table: Option<&crate::table::Table>, mass: f64) -> Result<Display, CellError> {
    let spec = SummarySpec { mass, hdi: false };
    let mut summaries = fit.draws.summarise(&spec).map_err(|e| CellError { line: None, message: e.to_string() })?;
    let pct = format!("{}%", crate::model::prior::short_number(mass * 100.0));
    let heading = format!("fit {}, {:.2} s: {}", model.name(), fit.seconds, fit.method.describe());
    let mut units = parameter_units(model, table, &fit.draws.names);
    let mut behind = rows_behind(model, &fit.draws.names);
    let derived = step_rows(model, fit, table, &spec)?;
    let derived_labels: Vec<String> = derived.iter().map(|(s, _)| s.name.clone()).collect();
    for (summary, unit) in derived {
        summaries.push(summary);
        units.push(unit);
        behind.push(None);
    }
    let rows: Vec<fit_summary::EstimateRow> = summaries
        .iter()
        .zip(units.iter().zip(&behind))
        .map(|(s, (u, b))| fit_summary::EstimateRow { lead: vec![s.name.clone()], unit: u.clone(), rows_behind: *b, summary: s })
        .collect();
    let grid = fit_summary::estimates_grid(&["parameter"], &rows, mass);
    let estimates: Vec<_> = summaries
        .iter()
        .zip(units.iter().zip(&behind))
        .map(|(s, (u, b))| fit_summary::estimate_json(&s.name, u.as_deref(), *b, s))
        .collect();
    let health = fit_summary::health(&[(fit, fit.draws.names.clone())]);
    let priors = priors_grid(model);
    let mut notes = vec![format!("intervals are central {pct} quantile intervals of the posterior draws")];
    if !derived_labels.is_empty() {
        notes.push(format!(
            "{} are worked out from the steps' draws, draw by draw: the whole effect from the lowest level to the highest is the \
             steps' sum, and each share a step's part of it",
            derived_labels.join(", ")
        ));
    }
    if let Some(route) = &fit.route {
        notes.insert(0, route.clone());
    }
    let sparse: Vec<&str> = fit
        .draws
        .names
        .iter()
        .zip(&behind)
        .filter(|(_, b)| b.is_some_and(fit_summary::is_sparse))
        .map(|(n, _)| n.as_str())
        .collect();
    if !sparse.is_empty() {
        notes.push(format!(
            "⚠ {} rest on fewer than {FEW_ROWS} rows of the data (column `{}`): those estimates lean mostly or wholly on the priors",
            sparse.join(", "),
            fit_summary::SPARSE_HEAD
        ));
    }
    match &health {
        Some(h) => notes.push(h.sentence.clone()),
        None => notes.push(
            "laplace method: independent draws (exact for a normal outcome with normal coefficient priors, \
             otherwise a normal fit at the posterior mode); R-hat and ESS do not apply"
                .into(),
        ),
    }
    notes.extend(fit.warnings.iter().map(|w| format!("warning: {w}")));
    let mut plain = format!("{heading}\n{}\npriors:\n{}", grid.to_text(), priors.to_text());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    let svg = figures::posterior(model, fit).ok();
    let json = json!({
        "model": model.name(), "method": fit.method.name(), "seed": fit.method.seed(),
        "settings": method_settings(&fit.method), "interval_mass": mass, "estimates": estimates,
        "health": health.map(|h| h.json), "warnings": fit.warnings, "seconds": fit.seconds,
        "path": fit_path(model, fit), "route": fit.route,
    });
    let html = html_block(&heading, &[grid.to_html(), "<p class=\"wp-head\">priors</p>".to_string(), priors.to_html(), html_list(&notes)]);
    Ok(Display { plain, html: Some(html), svg, json: Some(json) })
}

/// The summaries of a model's steps terms beyond the steps (the whole
/// effect, in the steps' unit, and each share, without one), each with
/// its unit, for the estimates table ([`crate::query::steps`]).
fn step_rows(
    model: &Model,
    fit: &Fit,
    table: Option<&crate::table::Table>,
    spec: &SummarySpec,
) -> Result<Vec<(crate::draws::Summary, Option<String>)>, CellError> {
    let derived = crate::query::steps::derived_step_draws(model, &fit.draws).map_err(|e| CellError { line: None, message: e.to_string() })?;
    let step_unit = |column: &str| {
        let term = model.step_terms().iter().find(|t| t.column == column)?;
        let first = crate::model::steps::step_label(column, &term.levels[0], &term.levels[1]);
        let at = fit.draws.names.iter().position(|n| *n == first)?;
        parameter_units(model, table, &fit.draws.names).swap_remove(at)
    };
    derived
        .into_iter()
        .map(|(label, values)| {
            let mut summary = crate::draws::summary::summarise_values(&values, spec).map_err(|e| CellError { line: None, message: e.to_string() })?;
            let whole = model.step_terms().iter().find(|t| crate::model::steps::whole_effect_label(&t.column) == label);
            let unit = whole.and_then(|t| step_unit(&t.column));
            summary.name = label;
            Ok((summary, unit))
        })
        .collect()
}

/// Where the fit's rows were: `in memory`, `on disk`, or `across machines`
/// (a table on disk whose passes ran on a scheduler's executors).
fn fit_path(model: &Model, fit: &Fit) -> &'static str {
    #[cfg(feature = "on_disk")]
    if model.on_disk().is_some_and(|d| d.scheduler().is_some()) {
        return "across machines";
    }
    let _ = model;
    if fit.route.is_some() {
        "on disk"
    } else {
        "in memory"
    }
}

/// The unit of each parameter named in `names` (the draws' order), from
/// the model's table; none when the table is not at hand.
pub(crate) fn parameter_units(model: &Model, table: Option<&crate::table::Table>, names: &[String]) -> Vec<Option<String>> {
    let Some(table) = table else { return vec![None; names.len()] };
    let by_label: Vec<(String, Option<String>)> = model.parameter_names().into_iter().zip(model.parameter_units(table)).collect();
    names.iter().map(|n| by_label.iter().find(|(l, _)| l == n).and_then(|(_, u)| u.clone())).collect()
}

/// The fitted rows behind each parameter named in `names` ([`Model::rows_behind`]).
pub(crate) fn rows_behind(model: &Model, names: &[String]) -> Vec<Option<usize>> {
    let by_label: Vec<(String, usize)> = model.parameter_names().into_iter().zip(model.rows_behind()).collect();
    names.iter().map(|n| by_label.iter().find(|(l, _)| l == n).map(|(_, r)| *r)).collect()
}

/// A method's settings as the fit JSON carries them, under the option words.
pub(crate) fn method_settings(method: &Method) -> serde_json::Value {
    match method {
        Method::Laplace { draws, seed } => json!({"draws": draws, "seed": seed}),
        Method::Nuts(s) => json!({
            "chains": s.chains, "settle": s.settle, "draws": s.draws, "acceptance": s.acceptance,
            "doublings": s.doublings, "mass": s.mass.word(), "seed": s.seed,
        }),
    }
}

/// `show NAME` — the latest result for a model, or a description of a table or graph.
pub(crate) fn show(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let ([name], options) = header(st, &SHOW)?;
    let (mass, rest) = interval_option(options, st.header.number)?;
    if !rest.is_empty() {
        return Err(form_error(st, SHOW.usage));
    }
    let mass = session.interval_mass(mass);
    if let Some(model) = session.models.get(name) {
        return match session.fits.get(name) {
            Some(fit) => Ok(vec![describe_fit(model, fit, session.tables.get(model.table_name()), mass)?]),
            None => {
                let rows = session.tables.get(model.table_name()).map_or(0, |t| t.nrows());
                let mut d = describe_model(model, rows);
                d.plain.push_str(&format!("\n• not fitted yet: run `fit {name}`"));
                Ok(vec![d])
            }
        };
    }
    if let Some(graph) = session.graphs.get(name) {
        return Ok(vec![super::causal::describe_graph(graph)]);
    }
    if let Some(table) = session.tables.get(name) {
        return Ok(vec![super::data::describe_loaded(table)]);
    }
    let known = session.models.keys().chain(session.graphs.keys()).chain(session.tables.keys());
    Err(CellError::at(st.header.number, format!("nothing is named {name}{}", suggest(name, known))))
}

/// `export NAME draws to "FILE.csv"`.
pub(crate) fn export(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let ([name, path], _) = header(st, &EXPORT)?;
    let path = unquote(path).ok_or_else(|| form_error(st, EXPORT.usage))?;
    let fit = require_any_fit(session, name, st.header.number)?;
    let file = session.output_path(path, st.header.number)?;
    let mut csv = Vec::new();
    fit.draws.write_csv(&mut csv).map_err(|e| CellError::at(st.header.number, format!("writing {path}: {e}")))?;
    write_atomically(&file, &csv)
        .map_err(|e| CellError::at(st.header.number, format!("cannot write {path} ({e}); check that its folder exists and is writable")))?;
    let text = format!(
        "exported {} draws of {} parameters of {name} to {path} (columns: chain, draw, {})",
        fit.draws.len(),
        fit.draws.names.len(),
        fit.draws.names.join(", ")
    );
    let json = json!({"model": name, "file": path, "draws": fit.draws.len(), "columns": fit.draws.names});
    Ok(vec![Display { plain: text.clone(), html: Some(html_block(&text, &[])), svg: None, json: Some(json) }])
}

/// `plot NAME shrinkage [of GROUP]`: each level's own rows against its
/// pooled estimate, the figure with a short table and the numbers as JSON.
fn shrinkage_plot(session: &Session, st: &Statement, name: &str, chosen: &[String]) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let fit = require_fit(session, name, line)?;
    let model = &session.models[name];
    let pooled: Vec<&str> = model.pooled_groups().iter().filter(|g| g.block() == 0).map(|g| g.column.as_str()).collect();
    let group = match (chosen, pooled.as_slice()) {
        ([], []) => {
            return Err(CellError::at(
                line,
                format!("model {name} has no pooled group to show; add `pooled COLUMN` to its outcome line (such as `pooled block`) and fit it again"),
            ))
        }
        ([], [only]) => only.to_string(),
        ([], _) => {
            return Err(CellError::at(line, format!("model {name} pools {}; name one: `plot {name} shrinkage of {}`", pooled.join(" and "), pooled[0])))
        }
        ([one], _) => one.trim().to_string(),
        _ => return Err(CellError::at(line, format!("the shrinkage figure shows one pooled group at a time; write `plot {name} shrinkage of GROUP`"))),
    };
    let mass = session.interval_mass(None);
    // A category outcome's group: one figure per outcome level after the reference.
    let results = crate::query::level_shrinkages(model, &fit.draws, &group, mass).map_err(|e| CellError::at(line, e.to_string()))?;
    let table = session.require_table(model.table_name(), line)?;
    let mut shown = Vec::with_capacity(results.len());
    for result in &results {
        shown.extend(shrinkage_display(result, model, table, name, line)?);
    }
    Ok(shown)
}

/// `plot NAME steps [of COLUMN]`: the effect of each level of an ordered
/// category's `steps(…)` term against its lowest level, as a figure, a
/// table and JSON.
fn steps_plot(session: &Session, st: &Statement, name: &str, chosen: &[String], mass: Option<f64>) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let fit = require_fit(session, name, line)?;
    let model = &session.models[name];
    let terms: Vec<&str> = model.step_terms().iter().map(|t| t.column.as_str()).collect();
    let column = match (chosen, terms.as_slice()) {
        ([], [only]) => only.to_string(),
        ([], []) => {
            return Err(CellError::at(
                line,
                format!("model {name} has no steps(…) term to show; write one on its outcome line, such as `steps(grade)`, and fit it again"),
            ))
        }
        ([], _) => return Err(CellError::at(line, format!("model {name} has steps of {}; name one: `plot {name} steps of {}`", terms.join(" and "), terms[0]))),
        ([one], _) => one.trim().to_string(),
        _ => return Err(CellError::at(line, format!("the steps figure shows one ordered category at a time; write `plot {name} steps of COLUMN`"))),
    };
    let mass = session.interval_mass(mass);
    let levels = crate::query::steps::level_effects(model, &fit.draws, &column, mass).map_err(|e| CellError::at(line, e.to_string()))?;
    let table = session.require_table(model.table_name(), line)?;
    let svg = figures::steps(&levels, &column, model, table, mass).map_err(|e| CellError::at(line, e.to_string()))?;
    let mut grid = Grid::new(&["level", &format!("against {} {}", levels[0].level, fit_summary::estimate_head(mass))]).numeric_columns(&[1]);
    let number = crate::cells::format::num;
    for l in &levels {
        grid.push(vec![l.level.clone(), format!("{} ({} to {})", number(l.mean), number(l.lower), number(l.upper))]);
    }
    let heading = format!("steps of {column} in {name}");
    let note = format!(
        "each level's effect is the sum of the steps below it, draw by draw; every draw's steps share one sign, so the effect never turns back between {} and {}",
        levels[0].level,
        levels[levels.len() - 1].level
    );
    let plain = format!("{heading}\n{}\n• {note}", grid.to_text());
    let html = html_block(&heading, &[grid.to_html(), html_list(&[note])]);
    let json = json!({"model": name, "column": column, "interval_mass": mass, "levels": levels});
    Ok(vec![Display { plain, html: Some(html), svg: Some(svg), json: Some(json) }])
}

/// One shrinkage as a figure, a table, notes and JSON.
fn shrinkage_display(result: &crate::query::Shrinkage, model: &crate::model::Model, table: &crate::table::Table, name: &str, line: usize) -> Result<Vec<Display>, CellError> {
    let (group, mass) = (&result.group, result.mass);
    let svg = figures::shrinkage(result, model, table).map_err(|e| CellError::at(line, e.to_string()))?;
    let pooled_head = format!("pooled {}", fit_summary::estimate_head(mass));
    let own_head = match model.family() {
        crate::model::Family::Times { .. } => "own time per event",
        _ => "own rows' mean",
    };
    let mut grid = Grid::new(&["level", "rows", own_head, &pooled_head]).numeric_columns(&[1, 2]);
    let number = crate::cells::format::num;
    for l in &result.levels {
        grid.push(vec![
            l.level.clone(),
            l.rows.to_string(),
            l.raw.map_or_else(|| "—".to_string(), number),
            format!("{} ({} to {})", number(l.mean), number(l.lower), number(l.upper)),
        ]);
    }
    let [centre, low, high] = result.population;
    let notes = vec![
        format!(
            "on the scale of {}: each level's own rows' mean beside the model's fitted value averaged over the same rows; pooling pulls a level with few rows towards the population",
            result.scale
        ),
        format!("population (a new level, no departure): {} ({} to {})", number(centre), number(low), number(high)),
    ];
    let mut notes = notes;
    notes.extend(own_value_note(model.family(), result.outcome_level.as_deref()));
    let heading = match &result.outcome_level {
        Some(level) => format!("shrinkage of {group} in {name}, on the log odds of {level}"),
        None => format!("shrinkage of {group} in {name}"),
    };
    let plain = format!("{heading}\n{}\n{}", grid.to_text(), notes.iter().map(|n| format!("• {n}")).collect::<Vec<_>>().join("\n"));
    let html = html_block(&heading, &[grid.to_html(), html_list(&notes)]);
    let json = serde_json::to_value(&result).unwrap_or(serde_json::Value::Null);
    Ok(vec![Display { plain, html: Some(html), svg: Some(svg), json: Some(json) }])
}

/// What a level's own value is when the link scale cannot hold it, in the
/// words of the outcome's family (`None` for a normal outcome).
fn own_value_note(family: &crate::model::Family, outcome_level: Option<&str>) -> Option<String> {
    use crate::model::Family;
    let note = match (family, outcome_level) {
        (Family::Normal, _) => return None,
        (_, Some(level)) => format!(
            "a level whose rows hold no {level} or no reference outcome has no finite own log odds; each share is taken as at least 0.001"
        ),
        (Family::Bernoulli | Family::Binomial { .. }, _) => "a level whose rows are all failures or all successes (a share of 0 or 1) has no finite own log odds; it is shown as if its share were 0.001 or 0.999".into(),
        (Family::Beta, _) => "a level's own value is the mean of its rows' shares, on the log odds".into(),
        (Family::Poisson | Family::GammaPoisson, _) => "a level whose counts are all 0 has no finite own log mean; it is shown as if its mean count were 0.001".into(),
        (Family::Times { .. }, _) => "a level's own value is the time its rows were followed over the events they saw (rows cut short add their time but no event), the mean time of an exponential fitted to those rows alone; a level with no events has none (—)".into(),
        (Family::Levels | Family::Graded, None) => return None,
    };
    Some(note)
}

/// The latest fit of model `name`, for a statement that needs the model's
/// rows: refused for a model whose table stays on disk.
pub(crate) fn require_fit<'s>(session: &'s Session, name: &str, line: usize) -> Result<&'s Fit, CellError> {
    if let Some(model) = session.models.get(name) {
        session.refuse_on_disk(model, line)?;
    }
    require_any_fit(session, name, line)
}

/// The latest fit of model `name` (`show`, `export`, `plot` read only its draws).
fn require_any_fit<'s>(session: &'s Session, name: &str, line: usize) -> Result<&'s Fit, CellError> {
    if !session.models.contains_key(name) {
        return Err(CellError::at(line, format!("there is no model named {name}{}", suggest(name, session.models.keys()))));
    }
    session.fits.get(name).ok_or_else(|| CellError::at(line, format!("model {name} is not fitted yet; run `fit {name}` first")))
}

/// The parameter label that `typed` names: the same words (`girth slope[dwarf]`),
/// however many spaces were typed between them.
fn parameter_named(typed: &str, names: &[String]) -> Option<String> {
    let words = |s: &str| s.split_whitespace().collect::<Vec<_>>().join(" ");
    let typed = words(typed);
    names.iter().find(|n| words(n) == typed).cloned()
}

/// `plot NAME estimates|mixing [of A, B]`, `plot NAME lines [over X]`,
/// `plot NAME spline|prior|check`, `plot NAME shrinkage [of GROUP]`.
pub(crate) fn plot(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let ([name, kind], rest) = match PLOT.read_n(st.head()) {
        Ok(read) => read,
        Err(at) if at.slot == 2 && st.head().split_whitespace().nth(2).is_some() => {
            let other = st.head().split_whitespace().nth(2).unwrap_or("");
            let name = st.head().split_whitespace().nth(1).unwrap_or("NAME");
            let message = match RETIRED_PLOT_KINDS.iter().find(|(old, _)| *old == other) {
                Some((old, new)) => format!(
                    "the figure `{old}` is now called `{new}`: write `plot {name} {new}`; the form is: {}",
                    PLOT.usage
                ),
                None => format!("unknown figure `{other}`; the form is: {}", PLOT.usage),
            };
            return Err(CellError::at(st.header.number, message));
        }
        Err(_) => return Err(form_error(st, PLOT.usage)),
    };
    let (mass, rest) = interval_option(rest, st.header.number)?;
    if mass.is_some() && !matches!(kind, "lines" | "spline" | "steps") {
        return Err(CellError::at(
            st.header.number,
            format!("`intervals` sets the bands of the lines and spline figures; the form is: {}", PLOT.usage),
        ));
    }
    let rest = rest.as_str();
    let (chosen, over) = match (kind, option_text(rest, "over"), option_text(rest, "of")) {
        _ if rest.is_empty() => (Vec::new(), None),
        ("lines", Some(x), _) if !x.is_empty() && !x.contains(char::is_whitespace) => (Vec::new(), Some(x)),
        (_, _, Some(list)) if !list.is_empty() => (crate::cells::parse::split_commas(list), None),
        _ => return Err(form_error(st, PLOT.usage)),
    };
    if matches!(kind, "prior" | "check") {
        // The same figures as `prior check NAME` and `check NAME`.
        let text = if kind == "prior" { format!("prior check {name}") } else { format!("check {name}") };
        let alias = Statement { header: crate::cells::parse::SourceLine { number: st.header.number, text }, body: Vec::new() };
        return super::simulation::predictive_check(session, &alias);
    }
    let fit = require_any_fit(session, name, st.header.number)?;
    let model = &session.models[name];
    if matches!(kind, "lines" | "spline") {
        let table = session.require_table(model.table_name(), st.header.number)?;
        let mass = session.interval_mass(mass);
        let pct = crate::model::prior::short_number(mass * 100.0);
        let (svg, note) = if kind == "lines" {
            figures::lines(model, fit, table, over, mass)
        } else {
            figures::spline(model, fit, table, mass).map(|svg| {
                (svg, format!("the fitted curve (posterior mean) with its {pct}% band over the data; below, each weight's {pct}% interval at the peak of its basis function"))
            })
        }
        .map_err(|e| CellError::at(st.header.number, e))?;
        let text = format!("{kind} figure of {name}: {note}");
        return Ok(vec![Display { plain: text, html: None, svg: Some(svg), json: None }]);
    }
    if kind == "shrinkage" {
        return shrinkage_plot(session, st, name, &chosen);
    }
    if kind == "steps" {
        return steps_plot(session, st, name, &chosen, mass);
    }
    let chosen = chosen
        .iter()
        .map(|c| {
            parameter_named(c, &fit.draws.names).ok_or_else(|| {
                CellError::at(
                    st.header.number,
                    format!("model {name} has no parameter {c}; its parameters are {}", fit.draws.names.join(", ")),
                )
            })
        })
        .collect::<Result<Vec<_>, _>>()?;
    if kind == "mixing" && fit.diagnostics.is_none() {
        return Err(CellError::at(
            st.header.number,
            format!(
                "the mixing figure compares the chains of a NUTS fit, and {name} was last fitted with {}, whose draws come from no chains; run `fit {name}` (NUTS) first, or draw `plot {name} estimates`",
                fit.method.name()
            ),
        ));
    }
    let svg = if kind == "estimates" {
        figures::posterior_of(model, fit, &chosen)
    } else {
        figures::mixing(model, fit, &chosen)
    }
    .map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    let text = match figures::left_out(model, &chosen) {
        Some(note) => format!("{kind} figure of {name} ({note})"),
        None => format!("{kind} figure of {name}"),
    };
    Ok(vec![Display { plain: text, html: None, svg: Some(svg), json: None }])
}
