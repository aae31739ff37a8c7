//! How strong a hidden common cause of exposure and outcome would have to
//! be to change a fitted answer.
//!
//! For a normal outcome with a linear slope of the exposure X, leaving out
//! a common cause U shifts the slope by γ·δ (the omitted-variable bias
//! formula; Wooldridge, *Introductory Econometrics*, §3.3; Cinelli &
//! Hazlett 2020, JRSS-B, eq. 2 — recalled), where
//! * γ is U's effect on the outcome, per standard deviation of U, given X
//!   and the other predictors;
//! * δ is the difference in U's mean, in its standard deviations, per unit
//!   of X, given the other predictors.
//!
//! Every posterior draw of the one-unit contrast of X is moved by γ·δ
//! towards zero (the direction that would weaken the conclusion), over a
//! grid of both strengths, and summarised last. Two curves on the grid
//! follow from the product alone: where the posterior mean reaches zero
//! (γ·δ = |mean|) and where the interval's bound nearer zero reaches it.
//! The other numeric predictors of the model serve as yardsticks: each one's
//! own γ (its slope times its standard deviation) and δ (its standardised
//! values regressed on X and the remaining numeric predictors by least
//! squares) say where a hidden cause "as strong as" it would sit.

use nalgebra::{DMatrix, DVector};
use serde::Serialize;

use crate::draws::Draws;
use crate::model::{Family, Model};
use crate::table::Table;

use super::contrast::{contrast, ContrastRequest};
use super::error::QueryError;
use super::support::{interval_words, predictor_columns, require_column, ContrastSummary};

/// Points along each strength axis.
pub const ROBUSTNESS_STEPS: usize = 25;

/// An observed predictor placed on the two strength axes.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Yardstick {
    pub node: String,
    /// δ: its mean difference, in its standard deviations, per unit of the exposure.
    pub to_exposure: f64,
    /// γ: the outcome's change per standard deviation of it.
    pub to_outcome: f64,
    /// The contrast's mean once a hidden cause this strong is allowed for.
    pub adjusted_mean: f64,
}

/// The contrast under assumed hidden common causes of growing strength.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Robustness {
    pub model: String,
    pub exposure: String,
    pub outcome: String,
    /// The fitted one-unit contrast: mean and interval.
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    pub mass: f64,
    pub interval: String,
    /// The δ axis (hidden cause → exposure).
    pub to_exposure: Vec<f64>,
    /// The γ axis (hidden cause → outcome).
    pub to_outcome: Vec<f64>,
    /// The adjusted mean at `[γ index][δ index]`.
    pub adjusted_mean: Vec<Vec<f64>>,
    /// Whether the adjusted interval still excludes zero at `[γ][δ]`.
    pub still_excludes_zero: Vec<Vec<bool>>,
    /// γ·δ at which the mean reaches zero.
    pub explain_away: f64,
    /// γ·δ at which the interval's bound nearer zero reaches it (0 when
    /// the fitted interval already holds zero).
    pub interval_reaches_zero: f64,
    pub yardsticks: Vec<Yardstick>,
    pub notes: Vec<String>,
}

/// The robustness of the one-unit contrast of `x` in `model` (fitted as
/// `draws` on `table`) to a hidden common cause of `x` and the outcome.
pub fn robustness(model: &Model, draws: &Draws, table: &Table, x: &str, mass: f64) -> Result<Robustness, QueryError> {
    let place = format!("robustness of {}: {x}", model.name());
    if *model.family() != Family::Normal {
        return Err(QueryError::request(format!(
            "{place}: model {} has a {} outcome; robustness covers a normal outcome's linear slope, a yes/no (bernoulli) or binomial outcome's risk ratio and a poisson outcome's rate ratio",
            model.name(),
            model.family().name()
        )));
    }
    let column = require_column(table, x, &place)?;
    let xs = column.data.as_reals().ok_or_else(|| {
        QueryError::request(format!("{place}: {x} is a category; name a numeric predictor (a 0/1 column works)"))
    })?;
    let predictors = predictor_columns(model);
    if !predictors.iter().any(|p| p == x) {
        return Err(QueryError::request(format!("{place}: {x} is not a predictor of model {} ({})", model.name(), predictors.join(", "))));
    }
    let request = ContrastRequest { over_rows: true, mass, ..ContrastRequest::new(x) };
    let c = contrast(model, draws, table, &request)?;
    let s = ContrastSummary::of(&c.draws, mass)?;
    let sign = if s.mean >= 0.0 { 1.0 } else { -1.0 };
    let explain_away = s.mean.abs();
    let near = if sign > 0.0 { s.lower } else { -s.upper };
    let interval_reaches_zero = near.max(0.0);
    let outcome = model.outcome_name().to_string();
    let outcome_sd = require_column(table, &outcome, &place)?.data.as_reals().map(|v| sd(&v)).unwrap_or(1.0);
    let mut notes = vec![
        "the hidden cause is taken to push the contrast towards zero (the adverse direction); each draw moves by γ·δ".to_string(),
        "omitted-variable bias formula for a linear slope (Wooldridge, Introductory Econometrics §3.3; Cinelli & Hazlett 2020)".to_string(),
    ];
    let numeric: Vec<(String, Vec<f64>)> = predictors
        .iter()
        .filter(|p| *p != x)
        .filter_map(|p| table.column(p).and_then(|c| c.data.as_reals()).map(|v| (p.clone(), v)))
        .collect();
    if numeric.len() + 1 < predictors.len() {
        notes.push("category predictors are not placed as yardsticks and are left out of their regressions".to_string());
    }
    let mut yardsticks = Vec::new();
    for (k, (name, w)) in numeric.iter().enumerate() {
        let sd_w = sd(w);
        if sd_w <= 0.0 || !sd_w.is_finite() {
            continue;
        }
        let others: Vec<&Vec<f64>> = numeric.iter().enumerate().filter(|(j, _)| *j != k).map(|(_, (_, v))| v).collect();
        let Some(delta) = slope_on_first(w.iter().map(|v| v / sd_w).collect(), &xs, &others) else {
            continue;
        };
        let gamma = contrast(model, draws, table, &ContrastRequest { over_rows: true, mass, ..ContrastRequest::new(name.as_str()) })?.mean * sd_w;
        let (to_exposure, to_outcome) = (delta.abs(), gamma.abs());
        yardsticks.push(Yardstick { node: name.clone(), to_exposure, to_outcome, adjusted_mean: s.mean - sign * to_exposure * to_outcome });
    }
    let gamma_max = yardsticks.iter().map(|y| y.to_outcome).fold(outcome_sd, f64::max) * 1.2;
    let delta_needed = 2.0 * explain_away.max(interval_reaches_zero) / gamma_max.max(f64::MIN_POSITIVE);
    let delta_max = yardsticks.iter().map(|y| y.to_exposure * 1.2).fold(delta_needed.max(1e-9), f64::max);
    let axis = |hi: f64| (0..ROBUSTNESS_STEPS).map(|i| hi * i as f64 / (ROBUSTNESS_STEPS - 1) as f64).collect::<Vec<f64>>();
    let (to_exposure, to_outcome) = (axis(delta_max), axis(gamma_max));
    let mut adjusted_mean = Vec::with_capacity(ROBUSTNESS_STEPS);
    let mut still = Vec::with_capacity(ROBUSTNESS_STEPS);
    for &g in &to_outcome {
        let shifts: Vec<f64> = to_exposure.iter().map(|&d| sign * g * d).collect();
        adjusted_mean.push(shifts.iter().map(|b| s.mean - b).collect());
        still.push(shifts.iter().map(|b| (s.lower - b > 0.0) || (s.upper - b < 0.0)).collect());
    }
    Ok(Robustness {
        model: model.name().to_string(),
        exposure: x.to_string(),
        outcome,
        mean: s.mean,
        lower: s.lower,
        upper: s.upper,
        mass,
        interval: interval_words(mass),
        to_exposure,
        to_outcome,
        adjusted_mean,
        still_excludes_zero: still,
        explain_away,
        interval_reaches_zero,
        yardsticks,
        notes,
    })
}

/// The standard deviation (n − 1).
fn sd(v: &[f64]) -> f64 {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n.max(1.0);
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0).max(1.0)).sqrt()
}

/// The least-squares coefficient of `first` in the regression of `y` on an
/// intercept, `first` and `others`; `None` when the design is singular.
fn slope_on_first(y: Vec<f64>, first: &[f64], others: &[&Vec<f64>]) -> Option<f64> {
    let n = y.len();
    let p = 2 + others.len();
    let design = DMatrix::from_fn(n, p, |i, j| match j {
        0 => 1.0,
        1 => first[i],
        _ => others[j - 2][i],
    });
    let gram = design.transpose() * &design;
    let rhs = design.transpose() * DVector::from_vec(y);
    gram.cholesky().map(|c| c.solve(&rhs)[1])
}
