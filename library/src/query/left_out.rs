//! Fitted models of one outcome scored by how well they predict rows they
//! did not see: each row's leave-one-out predictive density estimated by
//! Pareto-smoothed importance sampling ([`crate::draws::importance`]), the
//! rows whose tail shape makes the estimate unreliable refitted exactly
//! without the row when there are few of them.
//!
//! A model's score is `Σᵢ log p(yᵢ | y₋ᵢ)`, its standard error
//! `√(n · var(log p(yᵢ | y₋ᵢ)))` over the rows; the shortfall of a model
//! from the best is the sum of the rows' paired differences, with the
//! standard error of those (Vehtari, Gelman & Gabry 2017, §§2–3). Scores
//! compare prediction only: which model answers a causal question is
//! decided by the graph (the adjustment set), never by the score.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::draws::importance::{left_out_estimate, log_mean_exp, MIN_DRAWS, SHAPE_LIMIT};
use crate::infer::fit::{fit_model, Fit};
use crate::infer::nuts::Progress;
use crate::limits::{bytes_for, check_memory};
use crate::model::Model;

use super::error::QueryError;

/// Rows refitted exactly per model when no number is asked for.
pub const DEFAULT_REFITS: usize = 5;
/// The most rows refitted per model.
pub const MAX_REFITS: u64 = 100;

/// A row whose tail shape is above [`SHAPE_LIMIT`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HardRow {
    /// The row of the model's table (1-based, as the table holds its rows
    /// after its own `drop missing` and `keep where` rules).
    pub row: usize,
    pub shape: f64,
    /// Whether the row's value comes from an exact refit without it.
    pub refitted: bool,
    /// The importance-sampling estimate of the row's left-out log density.
    pub smoothed: f64,
    /// The exact value from the refit, when refitted.
    pub exact: Option<f64>,
}

/// One model's score.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelScore {
    pub model: String,
    /// `laplace` or `nuts`: the method of the fit scored (and of refits).
    pub method: String,
    pub draws: usize,
    /// Σ over rows of the left-out log predictive density.
    pub left_out_score: f64,
    pub standard_error: f64,
    /// Σ over rows of the log of the mean density over the draws (the
    /// rows seen in the fit).
    pub seen_rows_score: f64,
    /// The best model's score less this one's (0 for the best).
    pub shortfall: f64,
    /// Standard error of the shortfall from the rows' paired differences
    /// (0 for the best).
    pub shortfall_standard_error: f64,
    /// Per fitted row, its left-out log density as used in the score.
    pub rows_left_out: Vec<f64>,
    /// Per fitted row, the fitted tail shape (`None`: not estimated, the
    /// row's importance ratios nearly all equal).
    pub tail_shapes: Vec<Option<f64>>,
    pub hard_rows: Vec<HardRow>,
    /// Warnings of the refits (sampler trouble), naming the row.
    pub refit_warnings: Vec<String>,
}

/// Models of one outcome on the same rows, best first.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PredictiveScores {
    pub outcome: String,
    pub table: String,
    pub rows: usize,
    pub shape_limit: f64,
    pub refit_limit: usize,
    pub models: Vec<ModelScore>,
}

/// Score `entries` (each a model with its latest fit) on their rows; rows
/// with a tail shape above [`SHAPE_LIMIT`] are refitted exactly (with the
/// fit's own method and seed) when a model has at most `refit_limit` of
/// them. `cancel` stops the work between draws, rows and refits;
/// `progress` hears each refit's sampler with a label naming model and row.
pub fn score_predictions(
    entries: &[(&Model, &Fit)],
    refit_limit: usize,
    cancel: &AtomicBool,
    progress: &(dyn Fn(&str, Progress) + Sync),
) -> Result<PredictiveScores, QueryError> {
    let (first, _) = entries.first().ok_or_else(|| QueryError::request("name at least one fitted model to score"))?;
    for (model, _) in &entries[1..] {
        same_rows(first, model)?;
    }
    let mut models = Vec::with_capacity(entries.len());
    for (model, fit) in entries {
        models.push(score_one(model, fit, refit_limit, cancel, progress)?);
    }
    models.sort_by(|a, b| b.left_out_score.total_cmp(&a.left_out_score));
    let best = models[0].rows_left_out.clone();
    for score in &mut models {
        let gaps: Vec<f64> = best.iter().zip(&score.rows_left_out).map(|(b, s)| b - s).collect();
        score.shortfall = gaps.iter().sum();
        score.shortfall_standard_error = total_standard_error(&gaps);
    }
    Ok(PredictiveScores {
        outcome: first.outcome_name().to_string(),
        table: first.table_name().to_string(),
        rows: first.outcome_values().len(),
        shape_limit: SHAPE_LIMIT,
        refit_limit,
        models,
    })
}

/// `√(n · var)` of per-row values (sample variance, n − 1): the standard
/// error of their sum.
fn total_standard_error(values: &[f64]) -> f64 {
    let n = values.len() as f64;
    if values.len() < 2 {
        return 0.0;
    }
    let mean = values.iter().sum::<f64>() / n;
    let variance = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
    (n * variance).sqrt()
}

/// Models compared must predict the same outcome in the same rows.
fn same_rows(a: &Model, b: &Model) -> Result<(), QueryError> {
    let refuse = |why: String| {
        Err(QueryError::request(format!(
            "models {} and {} cannot be scored against each other: {why}; scores compare models of the same \
             outcome fitted to the same rows",
            a.name(),
            b.name()
        )))
    };
    if a.name() == b.name() {
        return Err(QueryError::request(format!("model {} is named twice; name each model once", a.name())));
    }
    if a.outcome_name() != b.outcome_name() {
        return refuse(format!("{} predicts {} and {} predicts {}", a.name(), a.outcome_name(), b.name(), b.outcome_name()));
    }
    if a.table_name() != b.table_name() {
        return refuse(format!(
            "{} was fitted to table {} and {} to table {} (tables with other `keep where` or `drop missing` rules \
             hold other rows)",
            a.name(),
            a.table_name(),
            b.name(),
            b.table_name()
        ));
    }
    let (ya, yb) = (a.outcome_values(), b.outcome_values());
    if ya.len() != yb.len() {
        return refuse(format!(
            "{} was fitted to {} rows and {} to {} (table {} was read again in between); fit both again",
            a.name(),
            ya.len(),
            b.name(),
            yb.len(),
            a.table_name()
        ));
    }
    let different_trials = a.fitted_rows().trials != b.fitted_rows().trials;
    if ya != yb || a.outcome_levels() != b.outcome_levels() || different_trials {
        let row = ya.iter().zip(yb).position(|(x, y)| x != y).map_or(String::new(), |i| format!(" (first at row {})", i + 1));
        let what = if different_trials { "their numbers of trials differ" } else { "their outcome values differ" };
        return refuse(format!("{what}{row}; table {} was read again in between — fit both again", a.table_name()));
    }
    Ok(())
}

/// The constrained parameters of every draw, draw by draw.
fn draw_parameters(model: &Model, fit: &Fit) -> Result<Vec<Vec<f64>>, QueryError> {
    let names = model.parameter_names();
    let columns: Vec<&[f64]> = names.iter().map(|n| fit.draws.require(n)).collect::<Result<_, _>>()?;
    Ok((0..fit.draws.len()).map(|d| columns.iter().map(|c| c[d]).collect()).collect())
}

/// The log density of every fitted row under every draw, row by row
/// (`[row][draw]`), after checking the memory it takes.
fn log_density_matrix(model: &Model, fit: &Fit, cancel: &AtomicBool) -> Result<Vec<Vec<f64>>, QueryError> {
    let draws = fit.draws.len();
    let rows = model.outcome_values().len();
    check_memory(&format!("scoring model {}: {draws} draws × {rows} rows of log densities", model.name()), bytes_for(&[draws, rows, 2]))
        .map_err(QueryError::request)?;
    let layout = model.fitted_rows();
    let mut matrix = vec![Vec::with_capacity(draws); rows];
    for (d, params) in draw_parameters(model, fit)?.iter().enumerate() {
        QueryError::stop_if(cancel, &format!("scoring model {}", model.name()))?;
        let densities = model.pointwise_log_likelihood(params, &layout)?;
        for (i, (column, value)) in matrix.iter_mut().zip(densities).enumerate() {
            if !value.is_finite() {
                return Err(QueryError::request(format!(
                    "model {}: row {} has log density {value} under draw {} of the fit; the draw predicts the row as \
                     impossible, so no left-out score can be formed",
                    model.name(),
                    i + 1,
                    d + 1
                )));
            }
            column.push(value);
        }
    }
    Ok(matrix)
}

fn score_one(
    model: &Model,
    fit: &Fit,
    refit_limit: usize,
    cancel: &AtomicBool,
    progress: &(dyn Fn(&str, Progress) + Sync),
) -> Result<ModelScore, QueryError> {
    if fit.draws.len() < MIN_DRAWS {
        return Err(QueryError::request(format!(
            "the fit of model {} has {} draws; scoring needs at least {MIN_DRAWS} — fit {} again with more draws",
            model.name(),
            fit.draws.len(),
            model.name()
        )));
    }
    let matrix = log_density_matrix(model, fit, cancel)?;
    let mut rows_left_out = Vec::with_capacity(matrix.len());
    let mut in_sample = 0.0;
    let mut shapes = Vec::with_capacity(matrix.len());
    for row in &matrix {
        QueryError::stop_if(cancel, &format!("scoring model {}", model.name()))?;
        let estimate = left_out_estimate(row);
        rows_left_out.push(estimate.left_out);
        in_sample += estimate.in_sample;
        shapes.push(estimate.shape);
    }
    let mut hard_rows: Vec<HardRow> = shapes
        .iter()
        .enumerate()
        .filter_map(|(i, k)| k.filter(|k| *k > SHAPE_LIMIT).map(|k| HardRow { row: i + 1, shape: k, refitted: false, smoothed: rows_left_out[i], exact: None }))
        .collect();
    let mut refit_warnings = Vec::new();
    if !hard_rows.is_empty() && hard_rows.len() <= refit_limit {
        for hard in &mut hard_rows {
            let i = hard.row - 1;
            let exact = exact_left_out(model, fit, i, cancel, progress, &mut refit_warnings)?;
            rows_left_out[i] = exact;
            hard.exact = Some(exact);
            hard.refitted = true;
        }
    }
    Ok(ModelScore {
        model: model.name().to_string(),
        method: fit.method.name().to_string(),
        draws: fit.draws.len(),
        left_out_score: rows_left_out.iter().sum(),
        standard_error: total_standard_error(&rows_left_out),
        seen_rows_score: in_sample,
        shortfall: 0.0,
        shortfall_standard_error: 0.0,
        rows_left_out,
        tail_shapes: shapes,
        hard_rows,
        refit_warnings,
    })
}

/// Row `row`'s left-out log predictive density from a refit of `model`
/// without it, by the method of `fit`: the log of the mean of the row's
/// density over the refit's draws.
pub fn exact_left_out(
    model: &Model,
    fit: &Fit,
    row: usize,
    cancel: &AtomicBool,
    progress: &(dyn Fn(&str, Progress) + Sync),
    warnings: &mut Vec<String>,
) -> Result<f64, QueryError> {
    let label = format!("model {} without row {}", model.name(), row + 1);
    let reduced = model.leaving_out(row)?;
    let refit = fit_model(&reduced, &fit.method, cancel, &|p| progress(&label, p)).map_err(|e| {
        if QueryError::stop_if(cancel, "").is_err() {
            QueryError::Interrupted { what: format!("refitting {label}") }
        } else {
            QueryError::Fit { what: label.clone(), message: e.to_string() }
        }
    })?;
    warnings.extend(refit.warnings.iter().map(|w| format!("refit of {label}: {w}")));
    let layout = model.fitted_rows().select(&[row]);
    let y = [model.outcome_values()[row]];
    let mut densities = Vec::with_capacity(refit.draws.len());
    for params in draw_parameters(model, &refit)? {
        QueryError::stop_if(cancel, &format!("scoring {label}"))?;
        densities.push(model.log_density_of_rows(&params, &layout, &y)?[0]);
    }
    Ok(log_mean_exp(&densities))
}
