//! Shrinkage of a pooled group: how far the model pulls each level towards
//! the population, the question a scientist asks of partial pooling.
//!
//! For every level of the group, two numbers on the link scale, both about
//! the same rows: the *raw* estimate — the level's own rows' mean outcome
//! taken to the link scale (the mean, the log-odds of the share of
//! successes, the log of the mean count), what a model fitting each level
//! alone would put at its rows' average — and the *pooled* estimate, the
//! posterior of the fitted linear predictor averaged over the level's rows
//! (fixed part plus the level's departure), summarised last. The
//! population's line is the fitted linear predictor averaged over every
//! fitted row with no departure (a new level's centre). A level with few
//! rows moves far from its raw value towards the population; one with many
//! stays close.
//!
//! A category outcome (`family levels`) pools a column once per outcome
//! level after the reference, each on its own log odds against the
//! reference: [`level_shrinkages`] gives one shrinkage per such level, the
//! raw estimate being the log of the level's rows' share of that outcome
//! level over their share of the reference (each share at least 0.001),
//! and the pooled one the fitted log odds `log(p_k / p_ref)` averaged over
//! the rows.

use serde::Serialize;

use crate::draws::Draws;
use crate::model::{Family, Model, NewRows};

use super::error::QueryError;
use super::support::{interval_words, ContrastSummary};

/// One level of a pooled group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LevelShrinkage {
    pub level: String,
    /// Fitted rows of the level.
    pub rows: usize,
    /// The rows' own mean outcome on the link scale (`None` without rows).
    pub raw: Option<f64>,
    /// Posterior mean and interval of the fitted linear predictor averaged over its rows.
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// The shrinkage of one pooled group of a fitted model.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Shrinkage {
    pub model: String,
    pub group: String,
    /// For a category outcome, the outcome level whose log odds against
    /// the reference these are (`null` otherwise).
    pub outcome_level: Option<String>,
    /// What the numbers are, in words (`yield`, `log-odds of recovered`).
    pub scale: String,
    /// The interval's mass and its words.
    pub mass: f64,
    pub interval: String,
    /// The population's line: mean and interval of the fitted linear
    /// predictor over every fitted row without departures.
    pub population: [f64; 3],
    pub levels: Vec<LevelShrinkage>,
}

/// The shrinkage of pooled group `group` (its column) of `model` from its `draws`.
pub fn shrinkage(model: &Model, draws: &Draws, group: &str, mass: f64) -> Result<Shrinkage, QueryError> {
    if let Some(levels) = model.outcome_levels() {
        return Err(QueryError::request(format!(
            "model {} has a category outcome ({} levels): its pooled {group} departs on the log odds of each level \
             after the first, so there is one shrinkage per outcome level ({})",
            model.name(),
            levels.len(),
            levels[1..].join(", ")
        )));
    }
    let g = group_position(model, group, 0)?;
    let raw = raw_level_means(model, &model.fitted_rows().groups[g], model.pooled_groups()[g].levels.len(), model.fitted_rows().trials.as_deref());
    let scale = scale_words(model);
    summarise(model, draws, g, raw, scale, None, mass, &|params, rows| Ok(model.predict_mean(params, rows)?.linear))
}

/// A category outcome's shrinkage of pooled group `group`, one per outcome
/// level after the reference (module docs).
pub fn level_shrinkages(model: &Model, draws: &Draws, group: &str, mass: f64) -> Result<Vec<Shrinkage>, QueryError> {
    let Some(levels) = model.outcome_levels() else {
        return Ok(vec![shrinkage(model, draws, group, mass)?]);
    };
    let mut out = Vec::with_capacity(levels.len() - 1);
    for (block, level) in levels.iter().enumerate().skip(1).map(|(k, l)| (k - 1, l)) {
        let g = group_position(model, group, block)?;
        let raw = raw_log_odds(model, &model.fitted_rows().groups[g], model.pooled_groups()[g].levels.len(), block + 1);
        let scale = format!("log odds of {} {level} against {}", model.outcome_name(), levels[0]);
        let log_odds = |params: &[f64], rows: &NewRows| -> Result<Vec<f64>, QueryError> {
            let p = model.level_probabilities(params, rows)?;
            Ok(p.iter().map(|row| (row[block + 1] / row[0]).ln()).collect())
        };
        out.push(summarise(model, draws, g, raw, scale, Some(level.clone()), mass, &log_odds)?);
    }
    Ok(out)
}

/// The position of pooled group `group` (its column) for outcome block
/// `block` among the model's groups, or an error naming the pooled ones.
fn group_position(model: &Model, group: &str, block: usize) -> Result<usize, QueryError> {
    let groups = model.pooled_groups();
    groups.iter().position(|t| t.column == group && t.block() == block).ok_or_else(|| {
        let pooled: Vec<&str> = groups.iter().filter(|t| t.block() == 0).map(|t| t.column.as_str()).collect();
        QueryError::request(if pooled.is_empty() {
            format!("model {} has no pooled group; add `pooled {group}` to its outcome line and fit it again", model.name())
        } else {
            format!("model {} does not pool {group}; its pooled groups: {}", model.name(), pooled.join(", "))
        })
    })
}

/// Summarise group `g`'s levels: per draw, `linear` (one value per fitted
/// row on the link scale) averaged over each level's rows, beside the raw
/// estimates `raw`, and over every row without departures (the population).
#[allow(clippy::too_many_arguments)]
fn summarise(
    model: &Model,
    draws: &Draws,
    g: usize,
    raw: Vec<Option<f64>>,
    scale: String,
    outcome_level: Option<String>,
    mass: f64,
    linear: &dyn Fn(&[f64], &NewRows) -> Result<Vec<f64>, QueryError>,
) -> Result<Shrinkage, QueryError> {
    let term = &model.pooled_groups()[g];
    let rows = model.fitted_rows();
    let level_of: &[Option<usize>] = &rows.groups[g];
    let mut no_departures = rows.clone();
    for levels in &mut no_departures.groups {
        levels.iter_mut().for_each(|l| *l = None);
    }
    let names = model.parameter_names();
    let columns = names.iter().map(|n| draws.require(n)).collect::<Result<Vec<_>, _>>()?;
    let k = term.levels.len();
    let mut per_level: Vec<Vec<f64>> = vec![Vec::with_capacity(draws.len()); k];
    let mut population = Vec::with_capacity(draws.len());
    let mut params = vec![0.0; names.len()];
    for s in 0..draws.len() {
        for (p, column) in params.iter_mut().zip(&columns) {
            *p = column[s];
        }
        let fitted = linear(&params, &rows)?;
        let centre = linear(&params, &no_departures)?;
        population.push(centre.iter().sum::<f64>() / centre.len().max(1) as f64);
        let mut sums = vec![0.0; k];
        for (eta, level) in fitted.iter().zip(level_of) {
            if let Some(l) = level {
                sums[*l] += eta;
            }
        }
        for (l, sum) in sums.iter().enumerate() {
            if term.rows_per_level[l] > 0 {
                per_level[l].push(sum / term.rows_per_level[l] as f64);
            }
        }
    }
    let mut levels = Vec::with_capacity(k);
    for (l, label) in term.levels.iter().enumerate() {
        if per_level[l].is_empty() {
            continue;
        }
        let s = ContrastSummary::of(&per_level[l], mass)?;
        levels.push(LevelShrinkage { level: label.clone(), rows: term.rows_per_level[l], raw: raw[l], mean: s.mean, lower: s.lower, upper: s.upper });
    }
    let p = ContrastSummary::of(&population, mass)?;
    Ok(Shrinkage {
        model: model.name().to_string(),
        group: term.column.clone(),
        outcome_level,
        scale,
        mass,
        interval: interval_words(mass),
        population: [p.mean, p.lower, p.upper],
        levels,
    })
}

/// Each level's own rows' log share of outcome level `k` over their share
/// of the reference (outcome level 0), each share at least 0.001.
fn raw_log_odds(model: &Model, level_of: &[Option<usize>], levels: usize, k: usize) -> Vec<Option<f64>> {
    let y = model.outcome_values();
    let (mut rows, mut of_k, mut of_ref) = (vec![0.0; levels], vec![0.0; levels], vec![0.0; levels]);
    for (i, level) in level_of.iter().enumerate() {
        if let Some(l) = level {
            rows[*l] += 1.0;
            of_k[*l] += f64::from(u8::from(y[i] as usize == k));
            of_ref[*l] += f64::from(u8::from(y[i] as usize == 0));
        }
    }
    (0..levels)
        .map(|l| (rows[l] > 0.0).then(|| ((of_k[l] / rows[l]).max(0.001) / (of_ref[l] / rows[l]).max(0.001)).ln()))
        .collect()
}

/// Each level's own rows' mean outcome, on the link scale (successes over
/// trials for binomial; for times cut short, time followed over events);
/// the link's clamp keeps a level with no successes finite.
fn raw_level_means(model: &Model, level_of: &[Option<usize>], k: usize, trials: Option<&[u64]>) -> Vec<Option<f64>> {
    let y = model.outcome_values();
    let cut = model.cut_short_rows();
    let (mut sum, mut count) = (vec![0.0; k], vec![0.0; k]);
    for (i, level) in level_of.iter().enumerate() {
        if let Some(l) = level {
            sum[*l] += y[i];
            let event = cut.as_ref().map_or(1.0, |c| if c[i] { 0.0 } else { 1.0 });
            count[*l] += trials.map_or(event, |t| t[i] as f64);
        }
    }
    (0..k).map(|l| (count[l] > 0.0).then(|| model.family().link(sum[l] / count[l]))).collect()
}

/// The words for the link scale of `model`'s outcome.
fn scale_words(model: &Model) -> String {
    let outcome = model.outcome_name();
    match model.family() {
        Family::Normal => outcome.to_string(),
        Family::Bernoulli | Family::Binomial { .. } | Family::Levels | Family::Graded => format!("log-odds of {outcome}"),
        Family::Beta => format!("log-odds of mean {outcome}"),
        Family::Poisson | Family::GammaPoisson | Family::Times { .. } => format!("log of mean {outcome}"),
    }
}
