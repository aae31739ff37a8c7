//! Recovery checks: refit a model on synthetic data and lay its posterior
//! intervals beside the true values implied by the mechanisms.
//!
//! A parameter has a true value when the outcome's mechanism, on its link
//! scale, is exactly a linear combination of the model's design columns on
//! the generated rows (checked by least squares: the residual must vanish).
//! Then the coefficients of that combination are the truth — slopes,
//! intercepts at the centres, per-level intercepts and offsets alike — and
//! a constant sd of a normal mechanism is the true spread. A hidden cause,
//! a missing parent or a non-linear term leaves a residual, and the check
//! says the coefficients have no single true value instead of guessing.

use std::sync::atomic::AtomicBool;

use nalgebra::DVector;
use serde::Serialize;

use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::{Family, Model, ModelSpec};

use super::error::QueryError;
use super::mechanism::Mechanism;
use super::simulate::Simulation;
use super::support::{interval_words, ContrastSummary};

/// Largest residual, relative to the spread of the truth, that still counts
/// as an exact linear combination.
const EXACT: f64 = 1e-7;

/// One parameter of a recovery check.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RecoveryParameter {
    pub name: String,
    /// The value implied by the mechanisms, when one exists.
    pub truth: Option<f64>,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    /// Whether the interval holds the truth.
    pub covered: Option<bool>,
}

/// A recovery check of one model on one simulation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recovery {
    pub model: String,
    pub simulation: String,
    pub method: String,
    pub mass: f64,
    pub interval: String,
    pub parameters: Vec<RecoveryParameter>,
    pub notes: Vec<String>,
}

/// Build `spec` on the data of `simulation`, fit it with `method`, and
/// compare each parameter with its true value.
pub fn recover(
    spec: &ModelSpec,
    simulation: &Simulation,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<Recovery, QueryError> {
    recover_fitted(spec, simulation, method, cancel, mass, &|_| {}).map(|(recovery, _, _)| recovery)
}

/// [`recover`], reporting the sampler's progress, and returning the model
/// built on the synthetic table and its fit beside the check (for contrasts
/// against true intervention effects).
pub fn recover_fitted(
    spec: &ModelSpec,
    simulation: &Simulation,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<(Recovery, Model, Fit), QueryError> {
    let generated = simulation.generate_default()?;
    let table = simulation.observed_table(&generated)?;
    let model = Model::build(spec, &table)?;
    let fit = fit_model(&model, method, cancel, progress)
        .map_err(|e| QueryError::Fit { what: format!("model {} on {}", spec.name, simulation.name), message: e.to_string() })?;
    let mut notes = fit.warnings.clone();
    let truths = true_parameters(&model, simulation, &generated, &mut notes);
    let parameters = model
        .parameter_names()
        .iter()
        .enumerate()
        .map(|(j, name)| {
            let s = ContrastSummary::of(fit.draws.require(name)?, mass)?;
            let truth = truths.as_ref().and_then(|t| t.get(j).copied().flatten());
            Ok(RecoveryParameter {
                name: name.clone(),
                truth,
                mean: s.mean,
                lower: s.lower,
                upper: s.upper,
                covered: truth.map(|t| s.lower <= t && t <= s.upper),
            })
        })
        .collect::<Result<Vec<_>, QueryError>>()?;
    let recovery = Recovery {
        model: spec.name.clone(),
        simulation: simulation.name.clone(),
        method: method.describe(),
        mass,
        interval: interval_words(mass),
        parameters,
        notes,
    };
    Ok((recovery, model, fit))
}

/// The true value of each parameter (in parameter order), or `None` with a
/// note when the mechanism is not in the model's span.
fn true_parameters(
    model: &Model,
    simulation: &Simulation,
    generated: &super::simulate::Generated,
    notes: &mut Vec<String>,
) -> Option<Vec<Option<f64>>> {
    let outcome = model.outcome_name();
    if !model.pooled_groups().is_empty() {
        notes.push(format!(
            "model {} has pooled groups, whose departures a simulation does not record, so no parameter has a \
             true value to compare; the effects below still have one",
            model.name()
        ));
        return None;
    }
    let matches = matches!(
        (simulation.mechanism(outcome), model.family()),
        (Some(Mechanism::Normal { .. }), Family::Normal)
            | (Some(Mechanism::Bernoulli { .. }), Family::Bernoulli)
            | (Some(Mechanism::Poisson { .. }), Family::Poisson)
    );
    if !matches {
        notes.push(format!("the mechanism of {outcome} is not of the model's family, so no parameter has a true value"));
        return None;
    }
    let (eta, spread) = simulation.link_scale_truth(outcome, generated)?;
    let x = model.design_matrix();
    let y = DVector::from_vec(eta);
    let beta = x.clone().svd(true, true).solve(&y, 1e-12).ok()?;
    let residual = (x * &beta - &y).norm() / (y.len() as f64).sqrt();
    let mean = y.mean();
    let scale = (y.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / y.len() as f64).sqrt().max(1.0);
    if residual.is_nan() || residual > EXACT * scale {
        notes.push(format!(
            "the mechanism of {outcome} is not a linear combination of the model's terms (a hidden cause, a missing \
             parent or a non-linear term), so its coefficients have no single true value"
        ));
        return None;
    }
    let mut truth: Vec<Option<f64>> = beta.iter().map(|&b| Some(b)).collect();
    if model.has_spread() {
        if spread.is_none() {
            notes.push(format!("the sd of {outcome} varies between rows, so the spread has no single true value"));
        }
        truth.push(spread);
    }
    Some(truth)
}
