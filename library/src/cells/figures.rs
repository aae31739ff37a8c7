//! Adapters from session objects to the plain inputs of [`crate::plot`].

use crate::draws::summary::quantile;
use crate::graph::Graph;
use crate::infer::fit::Fit;
use crate::model::{Family, Input, Model};
use crate::plot::{
    calibration_figure, contrast_figure, contrast_grid_figure, graph_figure, implications_figure, lines_figure,
    mixing_figure, posterior_figure, predictive_figure_with_cut, recovery_figure, spline_figure, BasisPicture,
    DensityArrangement, EdgeMark, GraphPicture, GridContrast, ImplicationRow, LineGroup, NodeMark, ParameterDraws,
    PlotError, PredictiveKind, Quantity, RecoveryRow, Role, shrinkage_figure, ShrinkageRow,
};
use crate::plot::{survival_figure, CurveBand, SurvivalMark, SurvivalPicture, SurvivalSetting};
use crate::query::{Band, Calibration, Contrast, ImplicationsReport, On, PredictiveSets, Recovery, WatchedContrast};
use crate::table::{Column, ColumnData, Table};

/// How to mark a graph drawing: exposure, outcome, an adjustment set, and
/// edges to highlight (by cause and effect names).
#[derive(Debug, Default)]
pub struct GraphMarks<'a> {
    pub exposure: Option<&'a str>,
    pub outcome: Option<&'a str>,
    pub adjusted: &'a [String],
    pub highlight: Vec<(String, String)>,
    /// Nodes an identifying formula uses.
    pub formula: &'a [String],
    /// Nodes of a hedge and the hidden causes joining it.
    pub hedge: &'a [String],
}

/// The largest graph drawn as a figure (the layered layout grows faster
/// than linearly, and a bigger picture cannot be read anyway).
pub const FIGURE_NODES: usize = 400;
/// The most edges drawn in a graph figure.
pub const FIGURE_EDGES: usize = 2000;

/// The causal graph with the question's marks.
pub fn graph(graph: &Graph, title: &str, marks: &GraphMarks) -> Result<String, PlotError> {
    if graph.nodes().len() > FIGURE_NODES || graph.edges().len() > FIGURE_EDGES {
        return Err(PlotError::OutOfRange {
            figure: "graph",
            what: format!("{} nodes and {} edges are more than a figure can show legibly", graph.nodes().len(), graph.edges().len()),
            fix: format!("graphs of up to {FIGURE_NODES} nodes and {FIGURE_EDGES} edges are drawn"),
        });
    }
    let nodes: Vec<NodeMark> = graph
        .nodes()
        .iter()
        .map(|n| {
            let role = if Some(n.name.as_str()) == marks.exposure {
                Role::Exposure
            } else if Some(n.name.as_str()) == marks.outcome {
                Role::Outcome
            } else if marks.adjusted.contains(&n.name) {
                Role::Adjusted
            } else if marks.hedge.contains(&n.name) {
                Role::Hedge
            } else if marks.formula.contains(&n.name) {
                Role::InFormula
            } else {
                Role::Plain
            };
            NodeMark { name: n.name.clone(), hidden: n.hidden, role }
        })
        .collect();
    let positions: std::collections::HashMap<&str, usize> =
        graph.nodes().iter().enumerate().map(|(i, n)| (n.name.as_str(), i)).collect();
    let index = |name: &str| positions.get(name).copied().unwrap_or(0);
    let edges = graph
        .edges()
        .iter()
        .map(|(a, b)| EdgeMark {
            from: index(a),
            to: index(b),
            highlight: marks.highlight.iter().any(|(x, y)| x == a && y == b),
        })
        .collect();
    graph_figure(&GraphPicture { title: title.to_string(), nodes, edges })
}

/// Posterior densities of the coefficients (the spread or overdispersion
/// is left out: it is on another scale and rarely the question; the figure's heading says so).
pub fn posterior(model: &Model, fit: &Fit) -> Result<String, PlotError> {
    posterior_of(model, fit, &[])
}

/// The parameters a figure without an `of` list leaves out, in words, with
/// how to draw them (`None` when a list was given or nothing is left out).
pub fn left_out(model: &Model, chosen: &[String]) -> Option<String> {
    if !chosen.is_empty() {
        return None;
    }
    let coefficients = model.coefficient_names();
    let mut out = Vec::new();
    if coefficients.len() > FIGURE_COEFFICIENTS {
        out.push(format!("{} coefficients after the first {FIGURE_COEFFICIENTS}", coefficients.len() - FIGURE_COEFFICIENTS));
    }
    if let Some(name) = model.family_parameter() {
        out.push(format!("{name} (on its own scale)"));
    }
    (!out.is_empty()).then(|| format!("not drawn: {}; name them with `of`", out.join(", ")))
}

/// Posterior densities of the chosen parameters (all coefficients if none chosen).
pub fn posterior_of(model: &Model, fit: &Fit, chosen: &[String]) -> Result<String, PlotError> {
    let names = chosen_or_coefficients(model, chosen);
    let params: Vec<ParameterDraws> = names
        .iter()
        .filter_map(|n| fit.draws.get(n).map(|d| ParameterDraws { name: n.as_str(), draws: d }))
        .collect();
    let subject = match left_out(model, chosen) {
        Some(note) => format!("{} parameters ({note})", model.name()),
        None => format!("{} parameters", model.name()),
    };
    posterior_figure(&subject, &Quantity::new("parameter value"), &params, DensityArrangement::Stacked)
}

/// Traces and rank-share tiles per chain: did the chains mix?
pub fn mixing(model: &Model, fit: &Fit, chosen: &[String]) -> Result<String, PlotError> {
    let names = chosen_or_coefficients(model, chosen);
    let params: Vec<ParameterDraws> = names
        .iter()
        .filter_map(|n| fit.draws.get(n).map(|d| ParameterDraws { name: n.as_str(), draws: d }))
        .collect();
    let subject = match left_out(model, chosen) {
        Some(note) => format!("{} ({note})", model.name()),
        None => model.name().to_string(),
    };
    mixing_figure(&subject, fit.draws.chains, &params)
}

/// The coefficients a figure draws when no `of` list names them.
const FIGURE_COEFFICIENTS: usize = 8;

fn chosen_or_coefficients(model: &Model, chosen: &[String]) -> Vec<String> {
    if chosen.is_empty() {
        model.coefficient_names().iter().take(FIGURE_COEFFICIENTS).cloned().collect()
    } else {
        chosen.to_vec()
    }
}

/// Fitted lines of the mean over a real predictor, one band per level of the
/// first category input, over the observed data. `over` picks the predictor
/// (default: the first real input). Other inputs are held at their centre or
/// first level; the returned sentence says so. Bands are central intervals
/// of `mass`. A category outcome gets one line per outcome level instead:
/// that level's probability ([`level_lines`]).
pub fn lines(model: &Model, fit: &Fit, table: &Table, over: Option<&str>, mass: f64) -> Result<(String, String), String> {
    let inputs = model.inputs();
    let x_name = match over {
        Some(x) => inputs
            .iter()
            .find(|i| matches!(i, Input::Real { column, .. } if column == x))
            .map(|i| i.column().to_string())
            .ok_or_else(|| format!("model {} has no real predictor {x}", model.name()))?,
        None => inputs
            .iter()
            .find(|i| matches!(i, Input::Real { .. }))
            .map(|i| i.column().to_string())
            .ok_or_else(|| format!("model {} has no real predictor to draw lines over", model.name()))?,
    };
    let group = inputs.iter().find_map(|i| match i {
        Input::Category { column, levels } => Some((column.clone(), levels.clone())),
        _ => None,
    });
    let x_data = table.column(&x_name).and_then(|c| c.data.as_reals()).ok_or("the predictor is not in the table")?;
    let (lo, hi) = x_data.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let grid: Vec<f64> = (0..GRID_POINTS).map(|i| lo + (hi - lo) * i as f64 / (GRID_POINTS - 1) as f64).collect();
    if let Some(outcome_levels) = model.outcome_levels() {
        return level_lines(model, fit, table, &x_name, &grid, outcome_levels, mass);
    }
    let y_data = outcome_per_trial(model, table);
    let levels: Vec<Option<(String, String, u32)>> = match &group {
        Some((col, levels)) => levels.iter().enumerate().map(|(k, l)| Some((col.clone(), l.clone(), k as u32))).collect(),
        None => vec![None],
    };
    let mut groups = Vec::new();
    for level in &levels {
        let rows = grid_table(&inputs, &x_name, &grid, level.as_ref().map(|(c, _, k)| (c.as_str(), *k)))?;
        let band = summarise_band(&mean_draws(model, fit, &rows)?, mass);
        let points = observed_points(table, &x_data, &y_data, level.as_ref().map(|(c, l, _)| (c.as_str(), l.as_str())));
        groups.push(LineGroup {
            label: level.as_ref().map_or_else(|| "all rows".to_string(), |(_, l, _)| l.clone()),
            points,
            grid: grid.clone(),
            mean: band.0,
            lower: band.1,
            upper: band.2,
        });
    }
    let held = held_note(&inputs, &x_name, group.as_ref().map(|(c, _)| c.as_str()), mass);
    let x_q = quantity(table, &x_name);
    let y_q = quantity(table, model.outcome_name());
    let svg = lines_figure(&format!("{} mean over {x_name}", model.name()), &x_q, &y_q, &interval_label(mass), &groups)
        .map_err(|e| e.to_string())?;
    Ok((svg, held))
}

/// The lines of a category outcome over `x_name`: one line and band per
/// outcome level, its probability at each grid value, every other input
/// held at its centre or first level. The observed rows are not drawn (a
/// row is at one level, not at a probability).
fn level_lines(
    model: &Model,
    fit: &Fit,
    table: &Table,
    x_name: &str,
    grid: &[f64],
    levels: &[String],
    mass: f64,
) -> Result<(String, String), String> {
    let inputs = model.inputs();
    let rows = grid_table(&inputs, x_name, grid, None)?;
    let new_rows = model.new_rows(&rows).map_err(|e| e.to_string())?;
    let thin = thin_indices(fit.draws.len(), 1000);
    // per_level[k][i]: draws of level k's probability at grid value i
    let mut per_level: Vec<Vec<Vec<f64>>> = vec![vec![Vec::with_capacity(thin.len()); grid.len()]; levels.len()];
    for &d in &thin {
        let params: Vec<f64> = fit.draws.values.iter().map(|v| v[d]).collect();
        let probabilities = model.level_probabilities(&params, &new_rows).map_err(|e| e.to_string())?;
        for (i, p) in probabilities.iter().enumerate() {
            for (k, share) in p.iter().enumerate() {
                per_level[k][i].push(*share);
            }
        }
    }
    let groups: Vec<LineGroup> = levels
        .iter()
        .zip(&per_level)
        .map(|(level, draws)| {
            let (mean, lower, upper) = summarise_band(draws, mass);
            LineGroup { label: level.clone(), points: Vec::new(), grid: grid.to_vec(), mean, lower, upper }
        })
        .collect();
    let y = model.outcome_name();
    let y_q = Quantity::new(format!("probability of each level of {y}"));
    let svg = lines_figure(&format!("{} levels of {y} over {x_name}", model.name()), &quantity(table, x_name), &y_q, &interval_label(mass), &groups)
        .map_err(|e| e.to_string())?;
    let held: Vec<String> = inputs
        .iter()
        .filter(|i| i.column() != x_name)
        .map(|i| match i {
            Input::Real { column, centre } => format!("{column} at {}", crate::cells::format::num(*centre)),
            Input::Category { column, levels } => format!("{column} at {}", levels[0]),
        })
        .collect();
    let fixed = if held.is_empty() { String::new() } else { format!(", with {} held fixed", held.join(", ")) };
    Ok((svg, format!("one line per level of {y}: its probability (posterior mean and {}){fixed}", interval_label(mass))))
}

/// The fitted curve of the model's (first) spline term with its band over
/// the data, and its weights at the peaks of their basis functions.
pub fn spline(model: &Model, fit: &Fit, table: &Table, mass: f64) -> Result<String, String> {
    if model.outcome_levels().is_some() {
        return Err(format!("model {} has a category outcome; its spline figure is not available", model.name()));
    }
    let terms = model.spline_terms();
    let term = terms.first().ok_or_else(|| format!("model {} has no spline term", model.name()))?;
    let (lo, hi) = term.basis.range();
    let grid: Vec<f64> = (0..GRID_POINTS).map(|i| lo + (hi - lo) * i as f64 / (GRID_POINTS - 1) as f64).collect();
    let rows: Vec<Vec<f64>> = grid.iter().map(|&x| term.basis.row(x)).collect();
    let basis: Vec<Vec<f64>> = (1..term.basis.len()).map(|k| rows.iter().map(|r| r[k]).collect()).collect();
    let thin = thin_indices(fit.draws.len(), 400);
    let weights: Vec<Vec<f64>> = thin
        .iter()
        .map(|&d| term.coefficients.iter().map(|&c| fit.draws.values[c][d]).collect())
        .collect();
    let intercept: Vec<f64> = match model.intercept_position() {
        Some(i) => thin.iter().map(|&d| fit.draws.values[i][d]).collect(),
        None => Vec::new(),
    };
    let x = table.column(term.column).and_then(|c| c.data.as_reals()).unwrap_or_default();
    let y = outcome_per_trial(model, table);
    let points = x.iter().copied().zip(y.iter().copied()).collect();
    let picture = BasisPicture { grid, basis, weights, intercept, points };
    spline_figure(model.name(), &quantity(table, term.column), &quantity(table, model.outcome_name()), &picture, mass)
        .map_err(|e| e.to_string())
}

const GRID_POINTS: usize = 60;

fn quantity(table: &Table, column: &str) -> Quantity {
    match table.column(column).and_then(|c| c.unit.clone()) {
        Some(unit) => Quantity::with_unit(column, unit),
        None => Quantity::new(column),
    }
}

/// The outcome as plotted: per trial for a binomial model.
fn outcome_per_trial(model: &Model, table: &Table) -> Vec<f64> {
    let y = table.column(model.outcome_name()).and_then(|c| c.data.as_reals()).unwrap_or_default();
    match model.family() {
        Family::Binomial { trials } => {
            let n = table.column(trials).and_then(|c| c.data.as_reals()).unwrap_or_default();
            y.iter().zip(&n).map(|(a, b)| if *b > 0.0 { a / b } else { f64::NAN }).collect()
        }
        _ => y,
    }
}

/// A table of new rows: `x` over the grid, the chosen level for the group
/// column, every other input at its centre or first level.
fn grid_table(inputs: &[Input], x: &str, grid: &[f64], level: Option<(&str, u32)>) -> Result<Table, String> {
    let n = grid.len();
    let columns = inputs
        .iter()
        .map(|input| match input {
            Input::Real { column, .. } if column == x => Column::new(column.clone(), ColumnData::Real(grid.to_vec())),
            Input::Real { column, centre } => Column::new(column.clone(), ColumnData::Real(vec![*centre; n])),
            Input::Category { column, levels } => {
                let code = match level {
                    Some((c, k)) if c == column => k,
                    _ => 0,
                };
                Column::new(column.clone(), ColumnData::Category { codes: vec![code; n], levels: levels.clone() })
            }
        })
        .collect();
    Table::from_columns("grid", columns).map_err(|e| e.to_string())
}

/// Draws of the model's mean at each new row (`[row][draw]`).
fn mean_draws(model: &Model, fit: &Fit, rows: &Table) -> Result<Vec<Vec<f64>>, String> {
    let new_rows = model.new_rows(rows).map_err(|e| e.to_string())?;
    let thin = thin_indices(fit.draws.len(), 1000);
    let mut per_row: Vec<Vec<f64>> = vec![Vec::with_capacity(thin.len()); rows.nrows()];
    for &d in &thin {
        let params: Vec<f64> = fit.draws.values.iter().map(|v| v[d]).collect();
        let p = model.predict_mean(&params, &new_rows).map_err(|e| e.to_string())?;
        for (i, m) in p.mean.iter().enumerate() {
            per_row[i].push(*m);
        }
    }
    Ok(per_row)
}

/// Posterior mean and central band of `mass` at each row of draws.
fn summarise_band(per_row: &[Vec<f64>], mass: f64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let tail = (1.0 - mass) / 2.0;
    let mut out = (Vec::new(), Vec::new(), Vec::new());
    for values in per_row {
        let mean = values.iter().sum::<f64>() / values.len() as f64;
        out.0.push(mean);
        out.1.push(quantile(values, tail));
        out.2.push(quantile(values, 1.0 - tail));
    }
    out
}

fn observed_points(table: &Table, x: &[f64], y: &[f64], level: Option<(&str, &str)>) -> Vec<(f64, f64)> {
    let keep: Vec<bool> = match level.and_then(|(c, l)| table.column(c).map(|col| (col, l))) {
        Some((col, l)) => match &col.data {
            ColumnData::Category { codes, levels } => {
                let k = levels.iter().position(|v| v == l).map(|k| k as u32);
                codes.iter().map(|c| Some(*c) == k).collect()
            }
            _ => vec![true; x.len()],
        },
        None => vec![true; x.len()],
    };
    x.iter().zip(y).zip(keep).filter(|(_, k)| *k).map(|((a, b), _)| (*a, *b)).collect()
}

fn held_note(inputs: &[Input], x: &str, group: Option<&str>, mass: f64) -> String {
    let held: Vec<String> = inputs
        .iter()
        .filter(|i| i.column() != x && Some(i.column()) != group)
        .map(|i| match i {
            Input::Real { column, centre } => format!("{column} at {}", crate::cells::format::num(*centre)),
            Input::Category { column, levels } => format!("{column} at {}", levels[0]),
        })
        .collect();
    if held.is_empty() {
        format!("lines show the posterior mean and {} of the expected outcome", interval_label(mass))
    } else {
        format!("lines show the expected outcome (posterior mean and {}) with {} held fixed", interval_label(mass), held.join(", "))
    }
}

/// Evenly spaced draw indices, at most `max` of them.
fn thin_indices(total: usize, max: usize) -> Vec<usize> {
    if total <= max {
        (0..total).collect()
    } else {
        (0..max).map(|i| i * total / max).collect()
    }
}

/// The axis of a difference in `outcome` (with its unit when the table has one).
fn difference_quantity(table: &Table, outcome: &str, on: &str) -> Quantity {
    let base = quantity(table, outcome);
    let binary = table.column(outcome).is_some_and(|c| matches!(c.data, crate::table::ColumnData::Binary(_)));
    if table.column(outcome).is_some_and(|c| c.data.levels().is_some()) {
        // a category outcome's contrasts are level by level, in probability
        return Quantity::new(format!("difference in the probability of a level of {outcome}"));
    }
    let name = match (binary, on == "outcomes") {
        // The mean of a yes/no outcome is a probability: say so, not "mean".
        (true, false) => format!("difference in the probability that {outcome} is yes"),
        (true, true) => format!("difference in the share of simulated {outcome} that is yes"),
        (false, true) => format!("difference in simulated {outcome}"),
        (false, false) => format!("difference in mean {outcome}"),
    };
    Quantity { name, unit: if binary { None } else { base.unit } }
}

/// The shrinkage of a pooled group: for a normal outcome the axis is the
/// outcome in its unit; on a logit or log link it has none.
pub fn shrinkage(s: &crate::query::Shrinkage, model: &Model, table: &Table) -> Result<String, PlotError> {
    let unit = match model.family() {
        Family::Normal => quantity(table, model.outcome_name()).unit,
        _ => None,
    };
    let value = Quantity { name: format!("{}, averaged over a level's rows", s.scale), unit };
    let rows: Vec<ShrinkageRow> = s
        .levels
        .iter()
        .map(|l| ShrinkageRow { label: l.level.clone(), rows: l.rows, raw: l.raw, mean: l.mean, lower: l.lower, upper: l.upper })
        .collect();
    let subject = match &s.outcome_level {
        Some(level) => format!("{} levels of {}, log odds of {level}", s.model, s.group),
        None => format!("{} levels of {}", s.model, s.group),
    };
    shrinkage_figure(&subject, &value, &interval_label(s.mass), s.population, &rows)
}

/// The steps of an ordered category: each level's effect against the
/// lowest, in the outcome's unit for a normal outcome, on the link scale
/// otherwise.
pub fn steps(levels: &[crate::query::steps::LevelEffect], column: &str, model: &Model, table: &Table, mass: f64) -> Result<String, PlotError> {
    let lowest = levels.first().map_or(column, |l| l.level.as_str());
    let (name, unit) = match model.family() {
        Family::Normal => (format!("mean {} against {lowest}", model.outcome_name()), quantity(table, model.outcome_name()).unit),
        family => (format!("{} against {lowest}", link_scale_words(family, model.outcome_name())), None),
    };
    let rows: Vec<crate::plot::StepLevel> = levels
        .iter()
        .map(|l| crate::plot::StepLevel { label: l.level.clone(), mean: l.mean, lower: l.lower, upper: l.upper })
        .collect();
    crate::plot::steps_figure(&format!("{column} in {}", model.name()), &Quantity { name, unit }, &interval_label(mass), &rows)
}

/// What a family's linear predictor measures, in words short enough for an
/// axis: `log odds of blight` rather than "linear predictor".
fn link_scale_words(family: &Family, outcome: &str) -> String {
    match family {
        Family::Bernoulli => format!("log odds of {outcome}"),
        Family::Binomial { .. } => format!("log odds of {outcome} per trial"),
        Family::Beta => format!("log odds of mean {outcome}"),
        Family::Poisson | Family::GammaPoisson => format!("log of mean {outcome}"),
        Family::Times { .. } => format!("log of mean time {outcome}"),
        Family::Graded => format!("latent score of {outcome}"),
        Family::Normal | Family::Levels => format!("linear predictor of {outcome}"),
    }
}

/// A contrast: the density of its per-draw differences with both sides of
/// zero shaded, or, along a grid, its band with a zero line.
pub fn contrast(c: &Contrast, table: &Table, outcome: &str) -> Result<String, PlotError> {
    let unit = if c.in_outcome_unit { quantity(table, outcome).unit } else { None };
    let value = Quantity { name: format!("difference in {}", c.scale), unit };
    let subject = format!("{} ({})", c.contrast, c.model);
    match &c.along {
        Some(x) => {
            let picture = GridContrast {
                grid: c.grid.iter().map(|p| p.x).collect(),
                mean: c.grid.iter().map(|p| p.mean).collect(),
                lower: c.grid.iter().map(|p| p.lower).collect(),
                upper: c.grid.iter().map(|p| p.upper).collect(),
            };
            contrast_grid_figure(&subject, &quantity(table, x), &value, &interval_label(c.mass), &picture)
        }
        None => contrast_figure(&subject, &value, &c.draws),
    }
}

/// A time contrast's survival and hazard curves at its two settings, with
/// the stated time or share of events marked; `None` for other contrasts.
pub fn survival_curves(c: &Contrast, on: On, table: &Table, outcome: &str) -> Option<Result<String, PlotError>> {
    let curves = c.curves.as_ref()?;
    let band = |b: &Band| CurveBand { mean: b.mean.clone(), lower: b.lower.clone(), upper: b.upper.clone() };
    let settings = curves
        .settings
        .iter()
        .map(|s| SurvivalSetting {
            label: format!("{} {}", c.variable, s.setting),
            survival: band(&s.survival),
            hazard: band(&s.hazard),
        })
        .collect();
    let mark = match on {
        On::EventsBy(t) => Some(SurvivalMark::Time(t)),
        On::Quantile(q) => Some(SurvivalMark::Share(q)),
        On::Medians => Some(SurvivalMark::Share(0.5)),
        _ => None,
    };
    let picture = SurvivalPicture { times: curves.times.clone(), settings, mark };
    let subject = format!("{} ({})", c.contrast, c.model);
    Some(survival_figure(&subject, &quantity(table, outcome), &interval_label(curves.mass), &picture))
}

/// The per-level contrasts of a category outcome: each level's change in
/// probability as a stacked density, or, along a grid, as one band per level.
pub fn level_contrasts(cs: &[Contrast], table: &Table, outcome: &str) -> Result<String, PlotError> {
    let first = cs.first().ok_or_else(|| PlotError::Empty { figure: "contrast", what: "the list of levels".into() })?;
    let subject = format!("{} {} vs {} ({})", first.variable, first.to, first.from, first.model);
    let label = |c: &Contrast| c.level.clone().unwrap_or_default();
    match &first.along {
        Some(x) => {
            let groups: Vec<LineGroup> = cs
                .iter()
                .map(|c| LineGroup {
                    label: label(c),
                    points: Vec::new(),
                    grid: c.grid.iter().map(|p| p.x).collect(),
                    mean: c.grid.iter().map(|p| p.mean).collect(),
                    lower: c.grid.iter().map(|p| p.lower).collect(),
                    upper: c.grid.iter().map(|p| p.upper).collect(),
                })
                .collect();
            let value = Quantity::new(format!("difference in the probability of each level of {outcome}"));
            lines_figure(&subject, &quantity(table, x), &value, &interval_label(first.mass), &groups)
        }
        None => {
            let names: Vec<String> = cs.iter().map(label).collect();
            let params: Vec<ParameterDraws> =
                names.iter().zip(cs).map(|(name, c)| ParameterDraws { name, draws: &c.draws }).collect();
            let value = Quantity::new(format!("difference in the probability of each level of {outcome}"));
            posterior_figure(&subject, &value, &params, DensityArrangement::Stacked)
        }
    }
}

/// The changes of a simulated intervention. One watched value is drawn as a
/// contrast on its own axis; several are stacked, and since they differ in
/// scale and unit (a level's share of rows, cm, kg) each panel names its own
/// unit and the common axis names none.
pub fn intervention(subject: &str, table: &Table, watched: &[WatchedContrast]) -> Result<String, PlotError> {
    if let [w] = watched {
        let value = match &w.level {
            Some(_) => Quantity::new(format!("change in {}", w.label())),
            None => difference_quantity(table, &w.node, "means"),
        };
        return contrast_figure(&format!("{subject}: {}", w.label()), &value, &w.draws);
    }
    let names: Vec<String> = watched
        .iter()
        .map(|w| if w.level.is_some() { w.label() } else { quantity(table, &w.node).label() })
        .collect();
    let shares = watched.iter().filter(|w| w.level.is_some()).count();
    let value = Quantity::new(match shares {
        0 => "change in the mean, in each panel's unit",
        n if n == watched.len() => "change in share of rows",
        _ => "change in the mean, in each panel's unit (a share as a fraction of rows)",
    });
    let params: Vec<ParameterDraws> =
        names.iter().zip(watched).map(|(name, w)| ParameterDraws { name, draws: &w.draws }).collect();
    posterior_figure(subject, &value, &params, DensityArrangement::Stacked)
}

/// Several per-draw quantities on the axis of a difference in `outcome`:
/// one contrast figure for one, stacked (or shared-axis) densities for more.
pub fn differences(
    subject: &str,
    table: &Table,
    outcome: &str,
    named: &[(String, &[f64])],
    arrangement: DensityArrangement,
) -> Result<String, PlotError> {
    let value = difference_quantity(table, outcome, "means");
    match named {
        [(name, draws)] => contrast_figure(&format!("{subject}: {name}"), &value, draws),
        _ => {
            let params: Vec<ParameterDraws> = named.iter().map(|(n, d)| ParameterDraws { name: n, draws: d }).collect();
            posterior_figure(subject, &value, &params, arrangement)
        }
    }
}

/// Each checked implication's association with its interval, against zero.
pub fn implications(report: &ImplicationsReport) -> Result<String, PlotError> {
    let rows: Vec<ImplicationRow> = report
        .checks
        .iter()
        .flat_map(|c| {
            let several = c.associations.len() > 1;
            c.associations.iter().map(move |a| ImplicationRow {
                statement: if several { format!("{} ({})", c.statement, a.label) } else { c.statement.clone() },
                estimate: a.mean,
                lower: a.lower,
                upper: a.upper,
            })
        })
        .collect();
    let subject = format!("{} against table {}", report.graph, report.table);
    implications_figure(&subject, &Quantity::new("association (regression coefficient)"), &interval_label(report.mass), &rows)
}

/// Posterior intervals beside the true values, for parameters that have one.
pub fn recovery(r: &Recovery) -> Result<String, PlotError> {
    let rows: Vec<RecoveryRow> = r
        .parameters
        .iter()
        .filter_map(|p| {
            p.truth.map(|t| RecoveryRow { name: p.name.clone(), truth: t, estimate: p.mean, lower: p.lower, upper: p.upper })
        })
        .collect();
    let subject = format!("{} on {}", r.model, r.simulation);
    recovery_figure(&subject, &Quantity::new("parameter value"), &interval_label(r.mass), &rows)
}

/// The rank histogram of one calibrated parameter.
pub fn calibration(c: &Calibration, parameter: usize) -> Result<String, PlotError> {
    let p = c.parameters.get(parameter).ok_or_else(|| PlotError::Empty {
        figure: "calibration",
        what: format!("parameter number {} of {}", parameter + 1, c.model),
    })?;
    calibration_figure(&format!("{} of {}", p.name, c.model), &p.ranks, c.draws_per_fit, c.bins)
}

/// Observed outcomes against outcome sets simulated from the prior or the posterior.
pub fn predictive(sets: &PredictiveSets, table: &Table, outcome: &str) -> Result<String, PlotError> {
    let kind = if sets.kind == "prior" { PredictiveKind::Prior } else { PredictiveKind::Posterior };
    let cut: Vec<f64> = match &sets.cut_short {
        Some(flags) => sets.observed.iter().zip(flags).filter(|(_, &c)| c).map(|(&v, _)| v).collect(),
        None => Vec::new(),
    };
    predictive_figure_with_cut(kind, &sets.model, &quantity(table, outcome), &sets.observed, &cut, &sets.replicated)
}

/// "90% interval" for an interval mass.
fn interval_label(mass: f64) -> String {
    format!("{}% interval", crate::model::prior::short_number(mass * 100.0))
}
