//! Contrasts from posterior draws: `contrast M: C b vs a [on outcomes]
//! [along X from LO to HI [by STEP]] [over rows]`.
//!
//! For every posterior draw the model predicts at two settings of one
//! predictor and the two predictions are subtracted, so the contrast keeps
//! the pairing of the draws; summaries come last. Two scales:
//!
//! * on the mean (default): the difference of expected outcomes;
//! * on outcomes: for each draw, one outcome simulated at each setting
//!   (drawn independently from a seeded stream), so the contrast shows how
//!   far apart two units' outcomes may lie, not only their means;
//! * on scores (graded outcomes): the difference of the latent scores, the
//!   linear predictor the cuts slice into levels, on its log-odds scale;
//! * on log-times and on medians (exponential and Weibull times): the
//!   difference of the log mean times — a log ratio, the same for median
//!   times since the shape is shared — and the difference of median times,
//!   `λ·(ln 2)^(1/k)`;
//! * on events by T and on quantile q (times): the difference in the chance
//!   that the event has come by time T, `1 − S(T)`, and in the time by
//!   which a share q of the events has come, `λ·(−log(1 − q))^(1/k)`.
//!
//! Other predictors are either held at stated values (by default a real
//! predictor at its table mean and a category at its first level), or the
//! prediction is averaged over the table's rows with only the contrasted
//! predictor changed (standardisation, `over rows`; stated values then set
//! their predictor in every row); the result says which.
//! With `on outcomes` and `over rows`, each draw uses one row picked at
//! random, so the values describe a unit drawn from the table.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use serde::Serialize;

use crate::draws::Draws;
use crate::model::{Family, Model, NewRows};
use crate::table::{ColumnData, Table};

use super::error::QueryError;
use super::time_curves::{band_of, curve_draws, curve_times, curves_of_draw, SettingCurves, TimeCurves};
use super::support::{
    column_mean, interval_words, parameter_rows, predictor_columns, require_column, short, stream_seed, with_column,
    ContrastSummary, Setting,
};

/// Grid points when `along` gives no step.
const DEFAULT_GRID_POINTS: usize = 21;
/// Most grid points allowed.
const MAX_GRID_POINTS: usize = 1001;

/// The scale of a contrast.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum On {
    /// The difference of posterior expected outcomes.
    Means,
    /// The difference of simulated outcomes, seeded.
    Outcomes { seed: u64 },
    /// A graded outcome's latent score (its linear predictor).
    Scores,
    /// A time's log mean time (its linear predictor).
    LogTimes,
    /// A time's median.
    Medians,
    /// A time's chance of an event by the stated time (`on events by T`).
    EventsBy(f64),
    /// The time by which the stated share of events has come
    /// (`on quantile q`, q strictly between 0 and 1).
    Quantile(f64),
}

impl On {
    /// The option word after `on`.
    pub fn word(self) -> &'static str {
        match self {
            On::Means => "means",
            On::Outcomes { .. } => "outcomes",
            On::Scores => SCORES,
            On::LogTimes => LOG_TIMES,
            On::Medians => MEDIANS,
            On::EventsBy(_) => EVENTS_BY,
            On::Quantile(_) => QUANTILE,
        }
    }

    /// Whether the contrast is of a summary computed per draw (every
    /// scale but simulated outcomes).
    fn of_draws(self) -> bool {
        !matches!(self, On::Outcomes { .. })
    }
}

/// `on scores`: a graded outcome's latent score.
pub const SCORES: &str = "scores";
/// `on log-times`: a time's log mean time.
pub const LOG_TIMES: &str = "log-times";
/// `on medians`: a time's median.
pub const MEDIANS: &str = "medians";
/// `on events by T`: a time's chance of an event by time T (the word
/// `by` and the time follow).
pub const EVENTS_BY: &str = "events";
/// `on quantile q`: the time by which a share q of the events has come.
pub const QUANTILE: &str = "quantile";
/// The words after `on` in a contrast that need nothing more
/// ([`EVENTS_BY`] and [`QUANTILE`] take a value after them).
pub const PLAIN_SCALES: &[&str] = &["outcomes", "means", SCORES, LOG_TIMES, MEDIANS];

/// `along X from LO to HI [by STEP]`.
#[derive(Debug, Clone, PartialEq)]
pub struct GridRequest {
    pub variable: String,
    pub from: f64,
    pub to: f64,
    /// Step between grid values; `None` gives 21 evenly spaced values.
    pub step: Option<f64>,
}

/// What to contrast and how.
#[derive(Debug, Clone, PartialEq)]
pub struct ContrastRequest {
    /// The predictor whose settings are compared.
    pub variable: String,
    /// `(b, a)` for "b vs a", as written (a level label or a number).
    /// `None`: the second level vs the first for a category, centre + 1 vs
    /// centre for a numeric predictor.
    pub values: Option<(String, String)>,
    pub on: On,
    pub along: Option<GridRequest>,
    /// Average over the table's rows (standardisation) instead of holding
    /// the other predictors at fixed values.
    pub over_rows: bool,
    /// Stated values for other predictors `(name, value)`.
    pub held: Vec<(String, String)>,
    /// Interval mass, 0.9 by default.
    pub mass: f64,
}

impl ContrastRequest {
    /// A contrast of `variable` with every option at its default.
    pub fn new(variable: impl Into<String>) -> ContrastRequest {
        ContrastRequest {
            variable: variable.into(),
            values: None,
            on: On::Means,
            along: None,
            over_rows: false,
            held: Vec::new(),
            mass: crate::draws::summary::DEFAULT_MASS,
        }
    }

    /// The same request comparing `b` with `a`.
    pub fn between(mut self, b: impl Into<String>, a: impl Into<String>) -> ContrastRequest {
        self.values = Some((b.into(), a.into()));
        self
    }
}

/// A value another predictor was held at, and why that value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HeldValue {
    pub name: String,
    pub value: String,
    /// "stated", "table mean" or "first level".
    pub source: String,
}

/// The contrast at one grid value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GridPoint {
    pub x: f64,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    pub share_above_zero: f64,
}

/// A contrast: per-draw differences and their summary.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Contrast {
    /// The contrast in words, e.g. "rootstock standard vs dwarf" (for a
    /// category outcome followed by the level whose share it compares).
    pub contrast: String,
    /// For a category outcome, the level whose share (probability) is
    /// compared; `None` for a numeric or yes/no outcome.
    pub level: Option<String>,
    pub model: String,
    pub variable: String,
    /// The two settings, as text: `to` minus `from`.
    pub to: String,
    pub from: String,
    /// "means" or "outcomes".
    pub on: String,
    /// The scale the difference is on, in words (a per-trial probability,
    /// a count out of each row's trials, a mean in the outcome's unit…).
    pub scale: String,
    /// Whether the difference is in the outcome column's own unit (false
    /// for a probability).
    pub in_outcome_unit: bool,
    /// The unit of the difference: the outcome column's declared unit when
    /// the difference is in it, else none.
    pub unit: Option<String>,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    pub share_above_zero: f64,
    pub share_below_zero: f64,
    /// Interval mass and its words.
    pub mass: f64,
    pub interval: String,
    /// Values of the other predictors (over rows: only those stated).
    pub held: Vec<HeldValue>,
    /// How the other predictors were treated, in words.
    pub held_how: String,
    pub over_rows: bool,
    /// The grid variable, when the contrast runs along one.
    pub along: Option<String>,
    pub grid: Vec<GridPoint>,
    /// Seed of simulated outcomes.
    pub seed: Option<u64>,
    /// Choices made that the reader should know of.
    pub notes: Vec<String>,
    /// Per-draw differences (at the held values; not serialised).
    #[serde(skip)]
    pub draws: Vec<f64>,
    /// Per-draw expected outcomes `(at to, at from)` behind `draws` (on
    /// means only; empty on outcomes; not serialised), for scales other
    /// than the difference, such as a ratio of risks.
    #[serde(skip)]
    pub means: Vec<(f64, f64)>,
    /// A time model's survival and hazard curves at both settings (not
    /// along a grid), for the figure beside the contrast's own.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub curves: Option<TimeCurves>,
}

impl Contrast {
    /// The summary part, for comparisons.
    pub fn summary(&self) -> ContrastSummary {
        ContrastSummary {
            mean: self.mean,
            lower: self.lower,
            upper: self.upper,
            share_above_zero: self.share_above_zero,
            share_below_zero: self.share_below_zero,
            mass: self.mass,
        }
    }
}

/// Compute the contrast `request` of `model` fitted as `draws` on `table`
/// (the table the model was built on). A model of a category outcome has
/// one contrast per level: ask [`level_contrasts`] for them.
pub fn contrast(model: &Model, draws: &Draws, table: &Table, request: &ContrastRequest) -> Result<Contrast, QueryError> {
    check_scale(model, request.on)?;
    if let (Some(levels), false) = (model.outcome_levels(), request.on == On::Scores) {
        return Err(QueryError::request(format!(
            "contrast {}: the outcome {} is a category ({}), whose contrasts compare each level's share one by one",
            model.name(),
            model.outcome_name(),
            levels.join(", ")
        )));
    }
    contrast_of(model, draws, table, request, None)
}

/// The contrasts of `request`: one for a numeric or yes/no outcome (as
/// [`contrast`]), and for a category outcome one per level, each the
/// difference in that level's probability (its expected share of rows),
/// computed from the same paired draws (on outcomes, the same simulated
/// levels, so each draw's differences sum to zero across the levels).
pub fn level_contrasts(model: &Model, draws: &Draws, table: &Table, request: &ContrastRequest) -> Result<Vec<Contrast>, QueryError> {
    check_scale(model, request.on)?;
    match model.outcome_levels().filter(|_| request.on != On::Scores) {
        Some(levels) => (0..levels.len()).map(|k| contrast_of(model, draws, table, request, Some(k))).collect(),
        None => Ok(vec![contrast_of(model, draws, table, request, None)?]),
    }
}

/// The scales `on` asks for exist for the model's family: scores for a
/// graded outcome, log-times and medians for times.
fn check_scale(model: &Model, on: On) -> Result<(), QueryError> {
    match on {
        On::EventsBy(t) if !(t.is_finite() && t > 0.0) => {
            return Err(QueryError::request(format!(
                "contrast {}: `on {EVENTS_BY} by {}` needs a positive time, in the unit of {}",
                model.name(),
                short(t),
                model.outcome_name()
            )))
        }
        On::Quantile(q) if !(q > 0.0 && q < 1.0) => {
            return Err(QueryError::request(format!(
                "contrast {}: `on {QUANTILE} {}` needs a share strictly between 0 and 1 (0.5 is the median)",
                model.name(),
                short(q)
            )))
        }
        _ => {}
    }
    let fits = match on {
        On::Means | On::Outcomes { .. } => true,
        On::Scores => *model.family() == Family::Graded,
        On::LogTimes | On::Medians | On::EventsBy(_) | On::Quantile(_) => matches!(model.family(), Family::Times { .. }),
    };
    if fits {
        return Ok(());
    }
    let theirs = match model.family() {
        Family::Graded => format!("`on means` (each level's probability), `on outcomes` or `on {SCORES}`"),
        Family::Times { .. } => format!(
            "`on means`, `on outcomes`, `on {LOG_TIMES}`, `on {MEDIANS}`, `on {EVENTS_BY} by <time>` or `on {QUANTILE} <share>`"
        ),
        _ => "`on means` or `on outcomes`".to_string(),
    };
    let needs = match on {
        On::Scores => "a graded outcome (`family graded`)",
        _ => "a time outcome (`family exponential` or `weibull`)",
    };
    Err(QueryError::request(format!(
        "contrast {}: `on {}` needs {needs}; model {} ({} family) takes {theirs}",
        model.name(),
        on.word(),
        model.name(),
        model.family().name()
    )))
}

/// [`contrast`] of the mean, or of the probability of outcome level
/// `level` (a category outcome).
fn contrast_of(
    model: &Model,
    draws: &Draws,
    table: &Table,
    request: &ContrastRequest,
    level: Option<usize>,
) -> Result<Contrast, QueryError> {
    let place = format!("contrast {}", model.name());
    let level_name = match (level, model.outcome_levels()) {
        (Some(k), Some(levels)) => Some(levels[k].clone()),
        _ => None,
    };
    let predictors = predictor_columns(model);
    let is_predictor = |name: &str| predictors.iter().any(|p| p == name);
    if !is_predictor(&request.variable) {
        return Err(QueryError::request(format!(
            "{place}: `{}` is not a predictor of model {} (its predictors: {}); contrast one of those",
            request.variable,
            model.name(),
            predictors.join(", ")
        )));
    }
    let pooled: Vec<String> = model
        .pooled_groups()
        .iter()
        .flat_map(|g| std::iter::once(g.column.clone()).chain(g.outer().map(str::to_string)))
        .collect();
    check_nested_groups_held(model, request, &place)?;
    for (name, _) in &request.held {
        if !(is_predictor(name) || pooled.contains(name)) || *name == request.variable {
            return Err(QueryError::request(format!(
                "{place}: `{name}` cannot be held: it is not another predictor of model {}",
                model.name()
            )));
        }
    }
    let mut notes = Vec::new();
    let column = require_column(table, &request.variable, &place)?;
    let (to, from) = settings(column, request.values.as_ref(), &place, &mut notes)?;
    let params = parameter_rows(model, draws)?;
    let (base, held) = if request.over_rows {
        held_in_every_row(table, request, &place)?
    } else {
        held_row(table, &predictors, trials_column(model), request, &place)?
    };
    let held_how = if request.over_rows {
        let set: Vec<String> = held.iter().map(|h| format!("{} = {}", h.name, h.value)).collect();
        let and_set = if set.is_empty() { String::new() } else { format!(" and {} set in every row", set.join(", ")) };
        format!(
            "averaged over the {} rows of table {}, with only {} changed{and_set} (standardisation)",
            table.nrows(),
            table.name,
            request.variable
        )
    } else if held.is_empty() {
        "no other predictors".to_string()
    } else {
        let listed: Vec<String> = held.iter().map(|h| format!("{} = {} ({})", h.name, h.value, h.source)).collect();
        format!("other predictors held at {}", listed.join(", "))
    };
    let new_group_seed = match request.on {
        On::Outcomes { seed } => seed,
        _ => NEW_GROUP_SEED,
    };
    let new_groups = notes_on_groups(model, request, table, new_group_seed, &mut notes);
    let pairing = Pairing {
        model,
        params: &params,
        variable: &request.variable,
        to: &to,
        from: &from,
        on: request.on,
        new_groups: new_groups.then_some(new_group_seed),
        level,
    };
    let means = if request.on.of_draws() { pairing.means(&base)? } else { Vec::new() };
    let values = if request.on.of_draws() { means.iter().map(|(a, b)| a - b).collect() } else { pairing.draws(&base)? };
    let summary = ContrastSummary::of(&values, request.mass)?;
    let curves = match (model.family(), &request.along) {
        (Family::Times { .. }, None) => Some(pairing.curves(&base, curve_end(model, table, request.on), request.mass)?),
        _ => None,
    };
    let grid = match &request.along {
        Some(g) => grid_points(&pairing, &base, g, &predictors, &place, request.mass)?,
        None => Vec::new(),
    };
    notes.extend(scale_notes(model, request.on, request.over_rows));
    if let On::Outcomes { .. } = request.on {
        notes.push(if request.over_rows {
            "each draw compares two outcomes simulated for one row picked at random from the table".into()
        } else {
            "each draw compares two outcomes simulated independently at the two settings".into()
        });
    }
    let scale = match &level_name {
        Some(l) => level_scale_words(model.outcome_name(), l, request.on),
        None => scale_words(model, request.on, request.over_rows),
    };
    let unitless = level.is_some() || without_outcome_unit(model, request.on);
    let compared = format!("{} {} vs {}", request.variable, to.text(), from.text());
    Ok(Contrast {
        contrast: match &level_name {
            Some(l) => format!("{compared}, {} {l}", model.outcome_name()),
            None => compared,
        },
        level: level_name,
        model: model.name().to_string(),
        variable: request.variable.clone(),
        to: to.text(),
        from: from.text(),
        on: request.on.word().into(),
        scale,
        in_outcome_unit: !unitless,
        unit: if unitless {
            None
        } else {
            table.column(model.outcome_name()).and_then(|c| c.unit.clone())
        },
        mean: summary.mean,
        lower: summary.lower,
        upper: summary.upper,
        share_above_zero: summary.share_above_zero,
        share_below_zero: summary.share_below_zero,
        mass: request.mass,
        interval: interval_words(request.mass),
        held,
        held_how,
        over_rows: request.over_rows,
        along: request.along.as_ref().map(|g| g.variable.clone()),
        grid,
        seed: match request.on {
            On::Outcomes { seed } => Some(seed),
            _ => None,
        },
        notes,
        draws: values,
        means,
        curves,
    })
}

/// Where a time model's curves end: the longest time in the table's
/// outcome column, or the contrast's stated time when later.
fn curve_end(model: &Model, table: &Table, on: On) -> f64 {
    let longest = table
        .column(model.outcome_name())
        .and_then(|c| c.data.as_reals())
        .and_then(|v| v.into_iter().filter(|t| t.is_finite()).reduce(f64::max))
        .unwrap_or(1.0);
    match on {
        On::EventsBy(t) => longest.max(t),
        _ => longest,
    }
}

/// The two settings `(to, from)`, defaulted when none are given.
fn settings(
    column: &crate::table::Column,
    values: Option<&(String, String)>,
    place: &str,
    notes: &mut Vec<String>,
) -> Result<(Setting, Setting), QueryError> {
    if let Some((b, a)) = values {
        return Ok((Setting::read(column, b, place)?, Setting::read(column, a, place)?));
    }
    match &column.data {
        ColumnData::Category { levels, .. } if levels.len() >= 2 => {
            notes.push(format!("no levels given: {} vs {}, the second level against the first", levels[1], levels[0]));
            Ok((Setting::Level { code: 1, levels: levels.clone() }, Setting::Level { code: 0, levels: levels.clone() }))
        }
        ColumnData::Category { .. } => Err(QueryError::request(format!(
            "{place}: {} has a single level, so there is nothing to contrast",
            column.name
        ))),
        _ => {
            let centre = column_mean(column).unwrap_or(0.0);
            notes.push(format!(
                "no values given: {} at its mean {} plus 1 vs at its mean (the effect of one unit)",
                column.name,
                short(centre)
            ));
            Ok((Setting::Number(centre + 1.0), Setting::Number(centre)))
        }
    }
}

/// The table with each stated predictor set to its value in every row
/// (the rest keep their observed values), for averages over rows.
/// Seed of the departures drawn for a new group in a contrast on means.
pub const NEW_GROUP_SEED: u64 = 31_415;

/// A nested group (`pooled plot within site`) held at an existing level
/// needs both labels, `at site A, plot p1`, and the pair must be one the
/// model was fitted on.
fn check_nested_groups_held(model: &Model, request: &ContrastRequest, place: &str) -> Result<(), QueryError> {
    let stated = |name: &str| request.held.iter().find(|(n, _)| n == name).map(|(_, v)| v.as_str());
    for group in model.pooled_groups().iter().filter(|g| g.block() == 0) {
        let Some(nesting) = &group.nesting else { continue };
        let (c, outer) = (&group.column, &nesting.outer);
        let Some(inner) = stated(c) else { continue };
        let sites: Vec<&str> = nesting.pairs.iter().filter(|(_, i)| i == inner).map(|(o, _)| o.as_str()).collect();
        let Some(at) = stated(outer) else {
            return Err(QueryError::request(format!(
                "{place}: pooled {c} is nested within {outer}, so {c} {inner} is known only with its {outer}{}; \
                 write `at {outer} <level>, {c} {inner}`",
                if sites.is_empty() { String::new() } else { format!(" ({c} {inner} was fitted in {outer} {})", sites.join(", ")) }
            )));
        };
        if !sites.contains(&at) {
            return Err(QueryError::request(format!(
                "{place}: the model was not fitted on {c} {inner} in {outer} {at}{}; an existing {c} needs a pair the \
                 rows held, or leave `{c}` out of `at` to ask for a new {c}",
                if sites.is_empty() { format!(" (no {outer} has a {c} {inner})") } else { format!(" ({c} {inner} is in {outer} {})", sites.join(", ")) }
            )));
        }
    }
    Ok(())
}

/// Which of the three questions a contrast of a model with pooled groups
/// answers, per group, said in `notes`; `true` when some group is a new
/// one (its departure drawn per draw from the population).
fn notes_on_groups(model: &Model, request: &ContrastRequest, table: &Table, seed: u64, notes: &mut Vec<String>) -> bool {
    let mut any_new = false;
    // A category outcome pools each column once per outcome level: one note per column.
    for group in model.pooled_groups().iter().filter(|g| g.block() == 0) {
        let name = &group.column;
        let stated = request.held.iter().find(|(n, _)| n == name);
        notes.push(match stated {
            Some((_, level)) => match group.outer() {
                Some(outer) => {
                    let at = request.held.iter().find(|(n, _)| n == outer).map_or("", |(_, v)| v.as_str());
                    format!("pooled {name} within {outer}: for the existing {name} {level} of {outer} {at}, with its own departure")
                }
                None => format!("pooled {name}: for the existing {name} {level}, with its own departure"),
            },
            None if request.over_rows && table.column(name).is_some() => format!(
                "pooled {name}: averaged over the observed {name} levels, each row keeping its own {name}'s departure"
            ),
            None => {
                any_new = true;
                let drawn = match group.slopes.as_slice() {
                    _ if group.outcome_level.is_some() => format!(
                        "one departure per outcome level after the reference, each drawn from normal(0, that \
                         level's {name} spread){},",
                        if group.slopes.is_empty() { "" } else { " jointly with its slope departures" }
                    ),
                    [] => format!("one departure drawn from normal(0, {name} spread)"),
                    [slope] => format!(
                        "one departure of the intercept and one of the {x} slope, drawn jointly with spreads {name} \
                         spread and {name} {x} spread and correlation {name} correlation[intercept, {x}],",
                        x = slope.column
                    ),
                    slopes => {
                        let names: Vec<&str> = slopes.iter().map(|s| s.column.as_str()).collect();
                        format!(
                            "one departure of the intercept and one of each slope ({}), drawn jointly with the \
                             learned spreads ({name} spread, {name} <slope> spread) and {name} correlations,",
                            names.join(", ")
                        )
                    }
                };
                let existing = match group.outer() {
                    Some(outer) => format!("`at {outer} <level>, {name} <level>`"),
                    None => format!("`at {name} <level>`"),
                };
                format!(
                    "pooled {}: for a new {name} drawn from the population: each draw adds {drawn} to both \
                     settings (seed {seed}); {existing} asks for an existing one, `over rows` averages over \
                     the observed ones",
                    group.written()
                )
            }
        });
    }
    any_new
}

fn held_in_every_row(table: &Table, request: &ContrastRequest, place: &str) -> Result<(Table, Vec<HeldValue>), QueryError> {
    let mut base = table.clone();
    let mut held = Vec::new();
    for (name, text) in &request.held {
        let setting = Setting::read(require_column(table, name, place)?, text, place)?;
        held.push(HeldValue { name: name.clone(), value: setting.text(), source: "stated".into() });
        base = with_column(&base, setting.column(name, table.nrows()));
    }
    Ok((base, held))
}

/// One row with every predictor at its held value.
fn held_row(
    table: &Table,
    predictors: &[String],
    trials: Option<&str>,
    request: &ContrastRequest,
    place: &str,
) -> Result<(Table, Vec<HeldValue>), QueryError> {
    let mut columns = Vec::new();
    let mut held = Vec::new();
    for name in predictors {
        let column = require_column(table, name, place)?;
        let stated = request.held.iter().find(|(n, _)| n == name);
        let (setting, source) = match (stated, &column.data) {
            (Some((_, text)), _) => (Setting::read(column, text, place)?, "stated"),
            (None, ColumnData::Category { levels, .. }) => {
                (Setting::Level { code: 0, levels: levels.clone() }, "first level")
            }
            (None, _) if trials == Some(name.as_str()) => {
                (Setting::Number(column_mean(column).unwrap_or(1.0).round()), "table mean, rounded")
            }
            (None, _) => (Setting::Number(column_mean(column).unwrap_or(0.0)), "table mean"),
        };
        // The grid variable is listed too: the contrast's own row holds it there.
        if *name != request.variable {
            held.push(HeldValue { name: name.clone(), value: setting.text(), source: source.into() });
        }
        columns.push(setting.column(name, 1));
    }
    // A pooled group's column named by `at`: an existing group.
    for (name, text) in request.held.iter().filter(|(n, _)| !predictors.contains(n)) {
        let setting = Setting::read(require_column(table, name, place)?, text, place)?;
        held.push(HeldValue { name: name.clone(), value: setting.text(), source: "stated".into() });
        columns.push(setting.column(name, 1));
    }
    Ok((Table::from_columns(table.name.clone(), columns)?, held))
}

/// The scale of a contrast of `model` on `on`, in words. A binomial model
/// is the case where the two scales differ in kind: its mean is a per-trial
/// probability, its outcome a count out of a number of trials.
pub fn scale_words(model: &Model, on: On, over_rows: bool) -> String {
    let y = model.outcome_name();
    match on {
        On::Scores => return format!("latent score of {y} (log-odds scale of the cumulative logit)"),
        On::LogTimes => return format!("log of the mean {y} (the change is the log of the ratio of mean times)"),
        On::Medians => return format!("median {y}"),
        On::EventsBy(t) => return format!("chance of the event by {y} = {}", short(t)),
        On::Quantile(q) => return format!("{y} by which a share {} of the events has come", short(q)),
        On::Means | On::Outcomes { .. } => {}
    }
    let means = matches!(on, On::Means);
    match (model.family(), means) {
        (Family::Binomial { trials }, true) => format!("per-trial probability of {y} (a share of {trials})"),
        (Family::Binomial { trials }, false) if over_rows => format!("count {y} out of each row's {trials} trials"),
        (Family::Binomial { trials }, false) => format!("count {y} out of the held number of {trials} trials"),
        (Family::Bernoulli, true) => format!("probability that {y} is yes"),
        (Family::Bernoulli, false) => format!("simulated {y} as 1 (yes) or 0 (no)"),
        (Family::Poisson | Family::GammaPoisson, true) => format!("expected count of {y}"),
        (Family::Poisson | Family::GammaPoisson, false) => format!("simulated count of {y}"),
        (Family::Beta, true) => format!("mean share of {y}"),
        (Family::Beta, false) => format!("simulated share of {y}"),
        (_, true) => format!("mean {y}"),
        (_, false) => format!("simulated {y}"),
    }
}

/// The scale of a contrast of one level's share of a category outcome.
pub(super) fn level_scale_words(y: &str, level: &str, on: On) -> String {
    match on {
        On::Outcomes { .. } => format!("simulated {y} being {level}, as 1 (yes) or 0 (no)"),
        _ => format!("probability that {y} is {level}"),
    }
}

/// What a reader must know of the scales of scores, log-times and medians.
fn scale_notes(model: &Model, on: On, over_rows: bool) -> Vec<String> {
    let y = model.outcome_name();
    let averaged = if over_rows { ", averaged over the rows" } else { "" };
    match on {
        On::Scores => vec![format!(
            "on the latent score of {y}: each draw's change in the linear predictor{averaged}, on the log-odds \
             scale of the cumulative logit, where a change of d moves the odds of {y} above any cut by a factor e^d; \
             it has no unit and is the same at every level, unlike the change in each level's probability (`on means`)"
        )],
        On::LogTimes => vec![format!(
            "on the log scale of {y}: each draw's change in the log of the mean time{averaged}; e raised to it is the \
             ratio of the mean times at the two settings, and of the median times too, since both settings share \
             one shape"
        )],
        On::Medians => vec![format!(
            "on the median {y}: each draw's change in the median time{averaged} (a Weibull time's median is \
             scale·(ln 2)^(1/shape), an exponential time's mean·ln 2); over rows it is the average of each row's \
             median, not the median of all rows together"
        )],
        On::EventsBy(t) => vec![format!(
            "on the chance of the event by {y} = {}: each draw's change in 1 − S({}){averaged}, S the survival \
             function exp(−(t/scale)^shape) (an exponential time's exp(−t/mean)); a probability, no unit",
            short(t),
            short(t)
        )],
        On::Quantile(q) => vec![format!(
            "on the {y} by which a share {} of the events has come: each draw's change in \
             scale·(−log(1 − {}))^(1/shape){averaged} (an exponential time's −mean·log(1 − {})); over rows it is the \
             average of each row's quantile, not the quantile of all rows together",
            short(q),
            short(q),
            short(q)
        )],
        On::Means | On::Outcomes { .. } => Vec::new(),
    }
}

/// Whether the contrast is on a probability scale (or on another scale
/// without the outcome's unit) rather than in the outcome's unit.
fn without_outcome_unit(model: &Model, on: On) -> bool {
    match on {
        On::Scores | On::LogTimes | On::EventsBy(_) => true,
        On::Medians | On::Quantile(_) | On::Outcomes { .. } => false,
        On::Means => matches!(model.family(), Family::Binomial { .. } | Family::Bernoulli | Family::Beta),
    }
}

/// The trials column of a binomial model.
fn trials_column(model: &Model) -> Option<&str> {
    match model.family() {
        Family::Binomial { trials } => Some(trials),
        _ => None,
    }
}

/// The contrast at each value of the grid variable.
fn grid_points(
    pairing: &Pairing,
    base: &Table,
    grid: &GridRequest,
    predictors: &[String],
    place: &str,
    mass: f64,
) -> Result<Vec<GridPoint>, QueryError> {
    if !predictors.contains(&grid.variable) || grid.variable == pairing.variable {
        return Err(QueryError::request(format!(
            "{place}: `along {}` needs another predictor of the model (its predictors: {})",
            grid.variable,
            predictors.join(", ")
        )));
    }
    if base.column(&grid.variable).is_some_and(|c| c.data.levels().is_some()) {
        return Err(QueryError::request(format!(
            "{place}: {} is a category; `along` needs a numeric predictor",
            grid.variable
        )));
    }
    let values = grid_values(grid, place)?;
    let n = base.nrows();
    values
        .into_iter()
        .map(|x| {
            let at = with_column(base, Setting::Number(x).column(&grid.variable, n));
            let s = ContrastSummary::of(&pairing.draws(&at)?, mass)?;
            Ok(GridPoint { x, mean: s.mean, lower: s.lower, upper: s.upper, share_above_zero: s.share_above_zero })
        })
        .collect()
}

/// The grid values from `from` to `to`, inclusive.
fn grid_values(grid: &GridRequest, place: &str) -> Result<Vec<f64>, QueryError> {
    let span = grid.to - grid.from;
    if !span.is_finite() || span <= 0.0 {
        return Err(QueryError::request(format!(
            "{place}: the grid of {} must run from a lower to a higher value, not {} to {}",
            grid.variable,
            short(grid.from),
            short(grid.to)
        )));
    }
    let step = grid.step.unwrap_or(span / (DEFAULT_GRID_POINTS - 1) as f64);
    let count = (span / step + 1e-9).floor() as usize + 1;
    if !step.is_finite() || step <= 0.0 || count > MAX_GRID_POINTS {
        return Err(QueryError::request(format!(
            "{place}: the step {} gives more than {MAX_GRID_POINTS} grid values; use a step above {}",
            short(step),
            short(span / (MAX_GRID_POINTS - 1) as f64)
        )));
    }
    Ok((0..count).map(|k| grid.from + k as f64 * step).collect())
}

/// Everything needed to compute per-draw differences at a base table.
struct Pairing<'a> {
    model: &'a Model,
    params: &'a [Vec<f64>],
    variable: &'a str,
    to: &'a Setting,
    from: &'a Setting,
    on: On,
    /// The seed of new-group departures, when a pooled group is a new one.
    new_groups: Option<u64>,
    /// The outcome level whose probability is compared (a category outcome).
    level: Option<usize>,
}

impl Pairing<'_> {
    /// Per-draw differences with `variable` set to `to` and `from` in every
    /// row of `base` (on outcomes, one row picked at random per draw).
    fn draws(&self, base: &Table) -> Result<Vec<f64>, QueryError> {
        let On::Outcomes { seed } = self.on else {
            return Ok(self.means(base)?.iter().map(|(a, b)| a - b).collect());
        };
        let n = base.nrows();
        let rows_to = self.model.new_rows(&with_column(base, self.to.column(self.variable, n)))?;
        let rows_from = self.model.new_rows(&with_column(base, self.from.column(self.variable, n)))?;
        self.params
            .iter()
            .enumerate()
            .map(|(d, theta)| {
                let new = self.new_group(theta, d);
                let mut rng = StdRng::seed_from_u64(stream_seed(seed, d as u64, 0));
                let r = if n == 1 { 0 } else { rng.random_range(0..n) };
                let a = self.model.outcome_draw_in_new_groups(theta, &one_row(&rows_to, r), &new, &mut rng)?;
                let b = self.model.outcome_draw_in_new_groups(theta, &one_row(&rows_from, r), &new, &mut rng)?;
                Ok(match self.level {
                    // a drawn level index against the compared level: 1 or 0
                    Some(k) => f64::from(u8::from(a[0] as usize == k)) - f64::from(u8::from(b[0] as usize == k)),
                    None => a[0] - b[0],
                })
            })
            .collect()
    }
}

impl Pairing<'_> {
    /// Per-draw expected outcomes `(at to, at from)`, each averaged over
    /// the rows of `base`.
    fn means(&self, base: &Table) -> Result<Vec<(f64, f64)>, QueryError> {
        let n = base.nrows();
        let rows_to = self.model.new_rows(&with_column(base, self.to.column(self.variable, n)))?;
        let rows_from = self.model.new_rows(&with_column(base, self.from.column(self.variable, n)))?;
        self.params
            .iter()
            .enumerate()
            .map(|(d, theta)| {
                let new = self.new_group(theta, d);
                let (a, b) = match (self.level, self.on) {
                    (Some(k), _) => (self.level_share(theta, &rows_to, k, &new)?, self.level_share(theta, &rows_from, k, &new)?),
                    (None, On::Scores | On::LogTimes) => (
                        self.model.linear_predictor_in_new_groups(theta, &rows_to, &new)?,
                        self.model.linear_predictor_in_new_groups(theta, &rows_from, &new)?,
                    ),
                    (None, On::Medians) => (
                        self.model.median_time_in_new_groups(theta, &rows_to, &new)?,
                        self.model.median_time_in_new_groups(theta, &rows_from, &new)?,
                    ),
                    (None, On::EventsBy(t)) => (
                        self.model.event_chance_in_new_groups(theta, &rows_to, &new, t)?,
                        self.model.event_chance_in_new_groups(theta, &rows_from, &new, t)?,
                    ),
                    (None, On::Quantile(q)) => (
                        self.model.quantile_time_in_new_groups(theta, &rows_to, &new, q)?,
                        self.model.quantile_time_in_new_groups(theta, &rows_from, &new, q)?,
                    ),
                    (None, _) => {
                        let a = self.model.predict_mean_in_new_groups(theta, &rows_to, &new)?.mean;
                        let b = self.model.predict_mean_in_new_groups(theta, &rows_from, &new)?.mean;
                        (a, b)
                    }
                };
                Ok((a.iter().sum::<f64>() / n as f64, b.iter().sum::<f64>() / n as f64))
            })
            .collect()
    }

    /// The survival and hazard curves at both settings, averaged over the
    /// rows of `base`, from the time grid ending at `end`
    /// ([`time_curves`](super::time_curves)).
    fn curves(&self, base: &Table, end: f64, mass: f64) -> Result<TimeCurves, QueryError> {
        let times = curve_times(end);
        let n = base.nrows();
        let mut settings = Vec::new();
        for setting in [self.to, self.from] {
            let rows = self.model.new_rows(&with_column(base, setting.column(self.variable, n)))?;
            let (mut survival, mut hazard) = (Vec::new(), Vec::new());
            for d in curve_draws(self.params.len()) {
                let theta = &self.params[d];
                let new = self.new_group(theta, d);
                let (etas, shape) = self.model.time_predictors_in_new_groups(theta, &rows, &new)?;
                let (s, h) = curves_of_draw(&etas, shape, &times);
                survival.push(s);
                hazard.push(h);
            }
            settings.push(SettingCurves {
                setting: setting.text(),
                survival: band_of(&survival, times.len(), mass)?,
                hazard: band_of(&hazard, times.len(), mass)?,
            });
        }
        Ok(TimeCurves { times, settings, mass })
    }

    /// Each row's probability of outcome level `k` at parameters `theta`
    /// (a new group's departures `new`).
    fn level_share(&self, theta: &[f64], rows: &NewRows, k: usize, new: &[f64]) -> Result<Vec<f64>, QueryError> {
        Ok(self.model.level_probabilities_in_new_groups(theta, rows, new)?.iter().map(|p| p[k]).collect())
    }

    /// Draw `d`'s departures of a new group in every pooled group (none
    /// when no group is a new one), from their own seeded stream.
    fn new_group(&self, theta: &[f64], d: usize) -> Vec<f64> {
        match self.new_groups {
            Some(seed) => {
                let mut rng = StdRng::seed_from_u64(stream_seed(seed, d as u64, 1));
                self.model.new_group_departures(theta, &mut rng)
            }
            None => Vec::new(),
        }
    }
}

/// Row `r` of new rows.
fn one_row(rows: &NewRows, r: usize) -> NewRows {
    rows.select(&[r])
}
