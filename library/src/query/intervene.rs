//! Simulated interventions through a joint model:
//! `intervene NAME: set X v1 vs v0, watch Y [rows N]`, and the side-by-side
//! comparison of the adjustment route with the joint-model route.
//!
//! For each posterior draw, do(X = v) is simulated over the table's rows (or
//! N rows resampled with a seed): nodes that are not descendants of X keep
//! their observed values, X is set to v in every row, and every descendant
//! of X that a watched node depends on is drawn from its node model, in
//! topological order, with its own noise (the g-formula by simulation). The
//! two settings share the draw index and the noise stream of each node, so
//! their difference is a paired contrast; the watched value of a draw is
//! the mean over rows. A category node is drawn as one level per row from
//! its levels-family model (the softmax probabilities of its levels); a
//! watched category gives one contrast per level, of the share of rows at
//! that level. When a watched node depends on X through a hidden node (a
//! hidden mediator), the joint model has nothing to simulate that route
//! with, and the intervention is refused rather than reported without it.
//!
//! **Pooled node models.** A node model may pool a column (`y from m,
//! pooled site`), and the simulation then answers one of three questions,
//! named in the result ([`GroupQuestion`]): each row keeps its own
//! group's departure (the observed groups, in the rows' proportions — the
//! default), every row sits in one existing group (`in site north`), or
//! every row sits in one new group whose departures each draw takes from
//! the population (`in new site`: per draw and node model, the departures
//! a new group gets from its spreads and correlations, the same under both
//! settings so the contrast stays paired). A pooled column that is not a
//! node of the graph is taken as a marker of clusters fixed before any
//! intervention.

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use serde::Serialize;

use crate::limits::{bytes_for, check_memory};
use crate::table::{Column, ColumnData, Table};

use super::contrast::Contrast;
use super::error::QueryError;
use super::intervene_formula::{hidden_obstacle, FormulaRoute, FormulaUsed};
use super::joint::{JointFit, JointModel, NodeModel};
use super::support::{drawn_column, interval_words, parameter_rows, require_column, stream_seed, with_column, ContrastSummary, Setting};

/// `set X to vs from, watch …`.
#[derive(Debug, Clone, PartialEq)]
pub struct InterventionRequest {
    pub variable: String,
    pub to: String,
    pub from: String,
    pub watch: Vec<String>,
    /// Resample this many rows (with replacement) instead of using the table's rows.
    pub rows: Option<usize>,
    pub seed: u64,
    pub mass: f64,
    /// Which groups the rows sit in, for node models with pooled groups.
    pub groups: GroupQuestion,
}

/// Which of three questions a simulation through pooled node models answers.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum GroupQuestion {
    /// Each row keeps its own group's departure (the observed groups).
    Observed,
    /// Every row in the existing level `level` of pooled column `column`.
    Existing { column: String, level: String },
    /// Every row in one new group of pooled column `column`, its
    /// departures drawn from the population per posterior draw.
    New { column: String },
    /// Every row in a new group of pooled column `column` of its own: one
    /// new group per row and posterior draw (`in new C per row`).
    NewPerRow { column: String },
}


/// The contrast of one watched node (or one level of a watched category
/// node) under the two interventions.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WatchedContrast {
    pub node: String,
    /// For a category node: the level whose share of rows is watched.
    pub level: Option<String>,
    /// Posterior mean of the watched value (row mean, or level share)
    /// under the first setting, and under the second.
    pub mean_under_to: f64,
    pub mean_under_from: f64,
    /// The unit of the watched value and its change: the node column's
    /// declared unit; none for a level's share of rows.
    pub unit: Option<String>,
    /// Posterior mean of the change.
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    pub share_above_zero: f64,
    pub share_below_zero: f64,
    /// Per-draw differences of the row mean (not serialised).
    #[serde(skip)]
    pub draws: Vec<f64>,
}

/// The result of a simulated intervention.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InterventionResult {
    pub joint: String,
    /// The intervention in words, e.g. "set rootstock standard vs dwarf".
    pub intervention: String,
    /// Rows simulated per draw, and where they came from.
    pub rows: usize,
    pub rows_source: String,
    pub seed: u64,
    pub mass: f64,
    pub interval: String,
    /// The nodes drawn from their models (descendants of the intervened node).
    pub simulated: Vec<String>,
    pub watched: Vec<WatchedContrast>,
    /// Which question each simulated node model with pooled groups
    /// answers, in words (empty when none pools a column).
    pub pooled: Vec<String>,
    /// How the watched changes were simulated: [`JOINT_ROUTE`], or
    /// [`FORMULA_ROUTE`] when hidden nodes touch what the joint model would
    /// simulate and the identifying formula is evaluated instead.
    pub route: String,
    /// For the formula route: each watched node's formula and the
    /// conditionals fitted for it.
    pub formulas: Vec<FormulaUsed>,
    pub warnings: Vec<String>,
}

/// The route of an intervention through the joint model's own node models.
pub const JOINT_ROUTE: &str = "joint model";
/// The route of an intervention through its identifying formula.
pub const FORMULA_ROUTE: &str = "identifying formula";

/// Simulate `request` through `joint` fitted as `fit`, over rows of `table`.
pub fn intervene(
    joint: &JointModel,
    fit: &JointFit,
    table: &Table,
    request: &InterventionRequest,
) -> Result<InterventionResult, QueryError> {
    intervene_with_cancel(joint, fit, table, request, &AtomicBool::new(false))
}

/// [`intervene`], reading `cancel` before each posterior draw is simulated
/// and stopping with [`QueryError::Interrupted`] once it is set.
pub fn intervene_with_cancel(
    joint: &JointModel,
    fit: &JointFit,
    table: &Table,
    request: &InterventionRequest,
    cancel: &AtomicBool,
) -> Result<InterventionResult, QueryError> {
    let place = format!("intervene {}", joint.name);
    let x = &request.variable;
    if joint.node(x).is_none() {
        return Err(QueryError::request(format!(
            "{place}: {x} is not an observed node of graph {}; set an observed node",
            joint.graph.name()
        )));
    }
    let column = require_column(table, x, &place)?;
    let to = Setting::read(column, &request.to, &place)?;
    let from = Setting::read(column, &request.from, &place)?;
    let mut targets = Vec::new();
    for w in &request.watch {
        if joint.node(w).is_none() {
            return Err(QueryError::request(format!("{place}: {w} is not an observed node of the joint model; watch one")));
        }
        targets.extend(Target::of(w, require_column(table, w, &place)?));
    }
    if request.watch.is_empty() {
        return Err(QueryError::request(format!("{place}: name at least one node to watch")));
    }
    let simulated = nodes_to_simulate(joint, x, &request.watch)?;
    check_rows_memory(table, request, simulated.len(), &place)?;
    if let Some(obstacle) = hidden_obstacle(&joint.graph, x, &request.watch, &simulated)? {
        if !matches!(request.groups, GroupQuestion::Observed) {
            return Err(QueryError::request(format!(
                "{place}: {obstacle}, so the change is taken from the identifying formula, whose regressions pool no \
                 column; leave out `in …`"
            )));
        }
        let (base, rows_source) = base_rows(table, request)?;
        let route = FormulaRoute { joint, fit, table, base: &base, request, to: &to, from: &from, simulated: &simulated, place: &place };
        return route.estimate(obstacle, rows_source, cancel);
    }
    let (base, rows_source) = base_rows(table, request)?;
    let steps = simulation_steps(joint, fit, &simulated, &place)?;
    let pooled = group_question_notes(&steps, &request.groups, &place)?;
    refuse_groups_downstream(joint, x, &request.groups, &place)?;
    let base = match &request.groups {
        GroupQuestion::Existing { column, level } => {
            let setting = Setting::read(require_column(table, column, &place)?, level, &place)?;
            with_column(&base, setting.column(column, base.nrows()))
        }
        _ => base,
    };
    let new_column = match &request.groups {
        GroupQuestion::New { column } => Some(NewGroups { column, per_row: false }),
        GroupQuestion::NewPerRow { column } => Some(NewGroups { column, per_row: true }),
        _ => None,
    };
    let draws = fit.fits.iter().flatten().map(|f| f.draws.len()).min().ok_or_else(|| {
        QueryError::request(format!("{place}: the joint model has no fitted regression; fit it first"))
    })?;
    let mut per_target = vec![(Vec::with_capacity(draws), Vec::with_capacity(draws)); targets.len()];
    for d in 0..draws {
        QueryError::stop_if(cancel, &place)?;
        let under_to = simulate_draw(&base, x, &to, &steps, d, request.seed, new_column)?;
        let under_from = simulate_draw(&base, x, &from, &steps, d, request.seed, new_column)?;
        for (target, (values_to, values_from)) in targets.iter().zip(per_target.iter_mut()) {
            values_to.push(target.value(&under_to));
            values_from.push(target.value(&under_from));
        }
    }
    let watched = targets
        .into_iter()
        .zip(per_target)
        .map(|(target, (values_to, values_from))| {
            let changes: Vec<f64> = values_to.iter().zip(&values_from).map(|(a, b)| a - b).collect();
            let s = ContrastSummary::of(&changes, request.mass)?;
            let unit = if target.level.is_none() { table.column(&target.node).and_then(|c| c.unit.clone()) } else { None };
            Ok(WatchedContrast {
                unit,
                node: target.node,
                level: target.level,
                mean_under_to: mean(&values_to),
                mean_under_from: mean(&values_from),
                mean: s.mean,
                lower: s.lower,
                upper: s.upper,
                share_above_zero: s.share_above_zero,
                share_below_zero: s.share_below_zero,
                draws: changes,
            })
        })
        .collect::<Result<Vec<_>, QueryError>>()?;
    let mut warnings = joint.warnings.clone();
    for w in &request.watch {
        if !simulated.contains(w) {
            warnings.push(format!("{w} is not a descendant of {x}, so the intervention leaves it unchanged"));
        }
    }
    Ok(InterventionResult {
        joint: joint.name.clone(),
        intervention: format!("set {x} {} vs {}", to.text(), from.text()),
        rows: base.nrows(),
        rows_source,
        seed: request.seed,
        mass: request.mass,
        interval: interval_words(request.mass),
        simulated,
        watched,
        pooled,
        route: JOINT_ROUTE.to_string(),
        formulas: Vec::new(),
        warnings,
    })
}

/// An error when `in …` names a pooled column that the intervened node
/// causes: putting every row in one of its levels would cut the effect
/// that runs through it.
fn refuse_groups_downstream(joint: &JointModel, x: &str, question: &GroupQuestion, place: &str) -> Result<(), QueryError> {
    let (GroupQuestion::Existing { column, .. } | GroupQuestion::New { column } | GroupQuestion::NewPerRow { column }) = question else {
        return Ok(());
    };
    if joint.graph.nodes().iter().any(|n| n.name == *column) && joint.graph.descendants(x)?.contains(&column.as_str()) {
        return Err(QueryError::request(format!(
            "{place}: {column} is caused by {x} in graph {}, so placing every row in one {column} would cut part of the \
             effect; leave out `in …` to let {column} follow the intervention",
            joint.graph.name()
        )));
    }
    Ok(())
}

/// What each simulated node model with pooled groups answers under
/// `question`; an error when the question names a column no simulated
/// node model pools.
fn group_question_notes(steps: &[Step], question: &GroupQuestion, place: &str) -> Result<Vec<String>, QueryError> {
    let pools = |step: &Step, column: &str| step.model.pooled_groups().iter().any(|g| g.column == column);
    let asked = match question {
        GroupQuestion::Observed => None,
        GroupQuestion::Existing { column, .. } | GroupQuestion::New { column } | GroupQuestion::NewPerRow { column } => Some(column.as_str()),
    };
    if let Some(column) = asked.filter(|c| !steps.iter().any(|s| pools(s, c))) {
        let pooling: Vec<&str> = steps.iter().filter(|s| !s.model.pooled_groups().is_empty()).map(|s| s.node).collect();
        return Err(QueryError::request(format!(
            "{place}: no node model this intervention simulates pools {column} ({}); name a column one of them pools, or \
             leave out `in …` to keep each row's own group",
            if pooling.is_empty() { "none pools a column".to_string() } else { format!("pooled: {}", pooling.join(", ")) }
        )));
    }
    if let GroupQuestion::Existing { column, level } = question {
        let nested = steps.iter().flat_map(|s| s.model.pooled_groups()).find_map(|g| g.outer().filter(|_| g.column == *column));
        if let Some(outer) = nested {
            return Err(QueryError::request(format!(
                "{place}: pooled {column} is nested within {outer}, so `in {column} {level}` names no single {column} \
                 (each {outer} has its own {column} {level}); ask `in new {column}`, or leave out `in …` to keep each \
                 row's own {column}"
            )));
        }
    }
    let mut notes = Vec::new();
    for step in steps {
        let mut seen: Vec<&str> = Vec::new();
        for group in step.model.pooled_groups() {
            let c = group.column.as_str();
            if seen.contains(&c) {
                continue;
            }
            seen.push(c);
            notes.push(match question {
                GroupQuestion::Existing { column, level } if column == c => {
                    format!("{}: pooled {c}, every row in the existing {c} {level}, with its own departure", step.node)
                }
                GroupQuestion::New { column } if column == c => format!(
                    "{}: pooled {c}, every row in one new {c} drawn from the population: each draw takes that {c}'s \
                     departures from the learned spread{}, the same under both settings",
                    step.node,
                    if group.slopes.is_empty() { "" } else { "s and correlations" }
                ),
                GroupQuestion::NewPerRow { column } if column == c => format!(
                    "{}: pooled {c}, each row in a new {c} of its own drawn from the population: each draw takes every \
                     row's {c} departure{} apart from the learned spread{}, the same under both settings",
                    step.node,
                    if group.slopes.is_empty() { "" } else { "s" },
                    if group.slopes.is_empty() { "" } else { "s and correlations" }
                ),
                _ => format!(
                    "{}: pooled {c}, each row keeping its own {c}'s departure (averaged over the observed {c} levels in \
                     the rows); `in {c} LEVEL` asks for an existing one, `in new {c}` for one new one, `in new {c} per \
                     row` for a new one per row",
                    step.node
                ),
            });
        }
    }
    Ok(notes)
}
/// Observed descendants of `x` that are watched or lead to a watched node,
/// in topological order.
fn nodes_to_simulate(joint: &JointModel, x: &str, watch: &[String]) -> Result<Vec<String>, QueryError> {
    let descendants = joint.graph.descendants(x)?;
    let mut out = Vec::new();
    for node in &joint.nodes {
        if !descendants.contains(&node.name.as_str()) {
            continue;
        }
        let mut leads = watch.contains(&node.name);
        for w in watch {
            leads |= joint.graph.ancestors(w)?.contains(&node.name.as_str());
        }
        if leads {
            out.push(node.name.clone());
        }
    }
    Ok(out)
}

/// Refuse rows whose simulated tables would not fit in memory. Each draw
/// holds, under both settings, one copy of the rows per simulated node plus
/// the base rows and the set column.
fn check_rows_memory(table: &Table, request: &InterventionRequest, simulated: usize, place: &str) -> Result<(), QueryError> {
    let rows = request.rows.unwrap_or(table.nrows());
    let columns = table.columns.len() + simulated;
    let bytes = bytes_for(&[rows, columns.max(1), simulated + 2, 2]);
    check_memory(&format!("{place}: {rows} rows of {columns} columns"), bytes).map_err(QueryError::request)
}

/// The table's rows, or `rows` of them resampled with replacement.
fn base_rows(table: &Table, request: &InterventionRequest) -> Result<(Table, String), QueryError> {
    match request.rows {
        None => Ok((table.clone(), format!("the {} rows of table {}", table.nrows(), table.name))),
        Some(0) => Err(QueryError::request("intervene: `rows` must be at least 1")),
        Some(n) => {
            if table.nrows() == 0 {
                return Err(QueryError::request(format!("intervene: table {} has no rows to resample", table.name)));
            }
            let mut rng = StdRng::seed_from_u64(stream_seed(request.seed, u64::MAX, 0));
            let picks: Vec<usize> = (0..n).map(|_| rng.random_range(0..table.nrows())).collect();
            let columns = table.columns.iter().map(|c| Column { data: pick_rows(&c.data, &picks), ..c.clone() }).collect();
            let source = format!("{n} rows resampled from table {} (seed {})", table.name, request.seed);
            Ok((Table { name: table.name.clone(), columns }, source))
        }
    }
}

/// The values of `data` at rows `picks`.
fn pick_rows(data: &ColumnData, picks: &[usize]) -> ColumnData {
    match data {
        ColumnData::Real(v) => ColumnData::Real(picks.iter().map(|&i| v[i]).collect()),
        ColumnData::Count(v) => ColumnData::Count(picks.iter().map(|&i| v[i]).collect()),
        ColumnData::Binary(v) => ColumnData::Binary(picks.iter().map(|&i| v[i]).collect()),
        ColumnData::Category { codes, levels } => {
            ColumnData::Category { codes: picks.iter().map(|&i| codes[i]).collect(), levels: levels.clone() }
        }
    }
}

/// Mixed into the seed of a new group's departures, so that they do not
/// share a stream with the outcomes' noise.
const NEW_GROUP_STREAM: u64 = 0x6e65_775f_6772_6f75;

/// One simulated node: its model, its index (for the noise stream) and
/// its parameter rows.
struct Step<'a> {
    node: &'a str,
    index: u64,
    model: &'a crate::model::Model,
    params: Vec<Vec<f64>>,
}

fn simulation_steps<'a>(
    joint: &'a JointModel,
    fit: &JointFit,
    simulated: &[String],
    place: &str,
) -> Result<Vec<Step<'a>>, QueryError> {
    let mut steps = Vec::new();
    for (i, node) in joint.nodes.iter().enumerate() {
        if !simulated.contains(&node.name) {
            continue;
        }
        let model = match &node.model {
            NodeModel::Regression { model, .. } => model,
            NodeModel::LevelShares { .. } => continue,
        };
        let node_fit = fit.fits.get(i).and_then(Option::as_ref).ok_or_else(|| {
            QueryError::request(format!("{place}: the model of {} is not fitted; fit the joint model first", node.name))
        })?;
        steps.push(Step { node: &node.name, index: i as u64, model, params: parameter_rows(model, &node_fit.draws)? });
    }
    Ok(steps)
}

/// The pooled column whose rows sit in new groups, and whether each row
/// has a new group of its own.
#[derive(Clone, Copy)]
struct NewGroups<'a> {
    column: &'a str,
    per_row: bool,
}

/// The rows after do(x = setting) at draw `d`; with `new_groups`, every
/// row of a node model that pools its column sits in one new group (or,
/// per row, in one of its own), whose departures come from their own
/// stream (the same under both settings).
fn simulate_draw(
    base: &Table,
    x: &str,
    setting: &Setting,
    steps: &[Step],
    d: usize,
    seed: u64,
    new_groups: Option<NewGroups>,
) -> Result<Table, QueryError> {
    let mut current = with_column(base, setting.column(x, base.nrows()));
    for step in steps {
        let mut rows = step.model.new_rows(&current)?;
        let mut group_rng = StdRng::seed_from_u64(stream_seed(seed ^ NEW_GROUP_STREAM, d as u64, step.index + 1));
        let mut rng = StdRng::seed_from_u64(stream_seed(seed, d as u64, step.index + 1));
        let params = &step.params[d];
        let Some(NewGroups { column, per_row }) = new_groups else {
            let values = step.model.outcome_draw_in_new_groups(params, &rows, &[], &mut rng)?;
            current = with_column(&current, drawn_column(step.model, step.node, values));
            continue;
        };
        for (group, levels) in step.model.pooled_groups().iter().zip(rows.groups.iter_mut()) {
            if group.column == column {
                levels.iter_mut().for_each(|l| *l = None);
            }
        }
        let values = if per_row {
            // Row by row, each with departures of its own; the outcome stream is read in row order as for all rows at once.
            let mut values = Vec::with_capacity(rows.design.nrows());
            for r in 0..rows.design.nrows() {
                let new = step.model.new_group_departures(params, &mut group_rng);
                values.extend(step.model.outcome_draw_in_new_groups(params, &rows.select(&[r]), &new, &mut rng)?);
            }
            values
        } else {
            let new = step.model.new_group_departures(params, &mut group_rng);
            step.model.outcome_draw_in_new_groups(params, &rows, &new, &mut rng)?
        };
        current = with_column(&current, drawn_column(step.model, step.node, values));
    }
    Ok(current)
}

/// One watched value: the row mean of a numeric node, or the share of rows
/// at one level of a category node.
pub(super) struct Target {
    pub(super) node: String,
    pub(super) level: Option<String>,
}

impl Target {
    /// The watched values of node `name`: itself, or one per level.
    pub(super) fn of(name: &str, column: &Column) -> Vec<Target> {
        match column.data.levels() {
            Some(levels) => {
                levels.iter().map(|l| Target { node: name.to_string(), level: Some(l.clone()) }).collect()
            }
            None => vec![Target { node: name.to_string(), level: None }],
        }
    }

    /// The watched value over the rows of `table`.
    pub(super) fn value(&self, table: &Table) -> f64 {
        let Some(column) = table.column(&self.node) else { return f64::NAN };
        match (&self.level, &column.data) {
            (Some(level), ColumnData::Category { codes, levels }) => {
                let at = codes.iter().filter(|&&c| levels[c as usize] == *level).count();
                at as f64 / codes.len().max(1) as f64
            }
            _ => mean(&column.data.as_reals().unwrap_or_default()),
        }
    }
}

pub(super) fn mean(values: &[f64]) -> f64 {
    values.iter().sum::<f64>() / values.len().max(1) as f64
}

impl WatchedContrast {
    /// The watched value in words: `height`, or `share of form = shrub`.
    pub fn label(&self) -> String {
        match &self.level {
            Some(level) => format!("share of {} = {level}", self.node),
            None => self.node.clone(),
        }
    }
}

/// The adjustment route and the joint-model route side by side.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RouteComparison {
    pub adjustment: ContrastSummary,
    pub joint: ContrastSummary,
    /// Adjustment minus joint, draw by draw (the two fits are independent,
    /// so pairing by index is pairing at random).
    pub difference: ContrastSummary,
    pub notes: Vec<String>,
}

/// Compare an adjustment-set contrast with a watched node of an intervention.
pub fn compare_routes(adjustment: &Contrast, joint: &WatchedContrast, mass: f64) -> Result<RouteComparison, QueryError> {
    let n = adjustment.draws.len().min(joint.draws.len());
    let difference: Vec<f64> = (0..n).map(|i| adjustment.draws[i] - joint.draws[i]).collect();
    let mut notes = vec![format!(
        "adjustment route: {} ({}); joint route: the simulated intervention on {}",
        adjustment.contrast, adjustment.held_how, joint.node
    )];
    if !adjustment.over_rows {
        notes.push("the adjustment contrast holds the other predictors fixed; with a nonlinear link it may differ from the average over rows".into());
    }
    Ok(RouteComparison {
        adjustment: ContrastSummary::of(&adjustment.draws, mass)?,
        joint: ContrastSummary::of(&joint.draws, mass)?,
        difference: ContrastSummary::of(&difference, mass)?,
        notes,
    })
}
