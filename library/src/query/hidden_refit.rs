//! The fully Bayesian answer to "what if a hidden common cause of X and
//! the outcome exists?": refit the model beside a simulated hidden node
//! whose strengths have priors the user states, and set the slope's
//! widened interval beside the fitted one.
//!
//! The density is [`crate::model::HiddenCause`]: one standard normal
//! hidden value per row, entering the exposure with strength `a` (exposure
//! units per standard deviation of the hidden node) and the outcome with
//! strength `b` (outcome units per standard deviation), integrated out so
//! that each row's exposure and outcome are bivariate normal; the outcome's
//! regression keeps the model's own priors. The data cannot separate
//! `a·b` from the slope, so the strengths' priors decide how far the slope
//! may move, and the posterior carries that uncertainty draw by draw
//! rather than moving one number over a grid (compare
//! [`super::robustness`]). It is sampled with NUTS; the one-unit contrast
//! of a linear slope over rows is the slope itself, so both intervals are
//! summaries of slope draws.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::draws::Draws;
use crate::infer::diagnostics::{diagnose, parameter_warnings};
use crate::infer::fit::stratified_scores;
use crate::infer::nuts::{sample_nuts, Init, NutsSettings, Progress};
use crate::limits::{bytes_for, check_memory};
use crate::model::{HiddenCause, LogDensity, Model, Prior};
use crate::table::Table;

use super::error::QueryError;
use super::support::{interval_words, ContrastSummary};

/// One posterior summary beside the prior it came from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StrengthSummary {
    /// `to exposure` or `to outcome`.
    pub strength: String,
    /// The prior as written.
    pub prior: String,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// R-hat and ESS of one quantity of the refit, in the words of a fit's
/// `health` (`r_hat`, `effective_draws.bulk`, `effective_draws.tail`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RefitDiagnostics {
    pub quantity: String,
    pub r_hat: f64,
    pub effective_draws: EffectiveDraws,
}

/// Bulk and tail effective draws.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EffectiveDraws {
    pub bulk: f64,
    pub tail: f64,
}

/// The slope fitted without and with the simulated hidden node.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HiddenRefit {
    pub model: String,
    pub exposure: String,
    pub outcome: String,
    /// The slope's unit (outcome unit per exposure unit), when both have one.
    pub unit: Option<String>,
    /// The fitted one-unit contrast (the slope) as the model was fitted.
    pub fitted: ContrastSummary,
    /// The same after the refit beside the hidden node.
    pub refitted: ContrastSummary,
    /// The posterior of both strengths next to their priors.
    pub strengths: Vec<StrengthSummary>,
    /// The posterior of `a·b`, the bias the hidden node carries.
    pub product: ContrastSummary,
    pub interval: String,
    pub mass: f64,
    /// Rows, each with its hidden value integrated out.
    pub rows: usize,
    /// The refit's sampler, in words.
    pub method: String,
    pub warnings: Vec<String>,
    /// The sampler's diagnostics of the refitted slope and of the product.
    pub diagnostics: Vec<RefitDiagnostics>,
    /// Per-draw slopes of the fit and the refit (not serialised).
    #[serde(skip)]
    pub fitted_draws: Vec<f64>,
    #[serde(skip)]
    pub refitted_draws: Vec<f64>,
}

/// Refit `model` (fitted as `draws` on `table`) beside a hidden node with strength
/// priors `to_exposure` (on `x`) and `to_outcome`, sampled with `settings`.
#[allow(clippy::too_many_arguments)]
pub fn hidden_refit(
    model: &Model,
    draws: &Draws,
    table: &Table,
    x: &str,
    to_exposure: (&str, Prior),
    to_outcome: (&str, Prior),
    settings: &NutsSettings,
    mass: f64,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<HiddenRefit, QueryError> {
    let place = format!("robustness of {}: {x} refit", model.name());
    let slope = model.linear_slope_position(x).ok_or_else(|| {
        QueryError::request(format!(
            "{place}: {x} does not enter model {} as one linear slope (a numeric predictor written as a plain term); \
             the refit moves that slope, so write {x} as a plain term",
            model.name()
        ))
    })?;
    let density = HiddenCause::new(model, slope, to_exposure.1, to_outcome.1).ok_or_else(|| {
        QueryError::request(format!(
            "{place}: the refit takes a normal outcome without pooled groups or steps(…) terms and an exposure that varies; model {} is not one",
            model.name()
        ))
    })?;
    let layout = density.layout();
    let rows = model.outcome_values().len();
    let kept = settings.chains.saturating_mul(settings.draws);
    check_memory(&format!("{place}: {kept} draws of {} parameters", layout.dim), bytes_for(&[kept.max(1), layout.dim])).map_err(QueryError::request)?;
    let names = model.parameter_names();
    let fitted_draws = draws.require(&names[slope])?.to_vec();
    let fitted = ContrastSummary::of(&fitted_draws, mass)?;
    let scores = stratified_scores(layout.dim, settings.chains, settings.seed);
    let starts: Vec<Vec<f64>> = scores
        .iter()
        .map(|z| {
            let mut outcome = model.dispersed_point(&z[..=layout.outcome_spread]);
            outcome.truncate(layout.outcome_spread + 1);
            density.start(&outcome, z)
        })
        .collect();
    let run = sample_nuts(&density, &Init::Given(starts), settings, cancel, progress).map_err(|e| match e {
        crate::infer::nuts::NutsError::Cancelled => QueryError::Interrupted { what: place.clone() },
        other => QueryError::Fit { what: format!("the refit of {}", model.name()), message: other.to_string() },
    })?;
    let column = |k: usize| -> Vec<Vec<f64>> { run.draws.iter().map(|c| c.iter().map(|t| t[k]).collect()).collect() };
    let product_chains: Vec<Vec<f64>> = run
        .draws
        .iter()
        .map(|c| c.iter().map(|t| t[layout.to_exposure] * t[layout.to_outcome]).collect())
        .collect();
    let slope_chains = column(slope);
    let mut warnings = Vec::new();
    let mut diagnostics = Vec::new();
    let divergent: usize = run.divergences.iter().sum();
    if divergent > 0 {
        warnings.push(format!(
            "{divergent} draws of the refit ended in a divergent trajectory; treat its interval as provisional \
             (raise `acceptance` in `with nuts …`, or state firmer strength priors)"
        ));
    }
    for (label, chains) in [(format!("{x}'s slope in the refit"), &slope_chains), ("the product of the two strengths".to_string(), &product_chains)] {
        let slices: Vec<&[f64]> = chains.iter().map(Vec::as_slice).collect();
        let d = diagnose(&slices);
        warnings.extend(parameter_warnings(&label, &d));
        diagnostics.push(RefitDiagnostics {
            quantity: label,
            r_hat: d.rhat,
            effective_draws: EffectiveDraws { bulk: d.ess_bulk, tail: d.ess_tail },
        });
    }
    let refitted_draws: Vec<f64> = slope_chains.concat();
    let summary = |label: &str, prior: &str, k: usize| -> Result<StrengthSummary, QueryError> {
        let s = ContrastSummary::of(&column(k).concat(), mass)?;
        Ok(StrengthSummary { strength: label.to_string(), prior: prior.to_string(), mean: s.mean, lower: s.lower, upper: s.upper })
    };
    let strengths = vec![
        summary(&format!("hidden → {x}"), to_exposure.0, layout.to_exposure)?,
        summary(&format!("hidden → {}", model.outcome_name()), to_outcome.0, layout.to_outcome)?,
    ];
    Ok(HiddenRefit {
        model: model.name().to_string(),
        exposure: x.to_string(),
        outcome: model.outcome_name().to_string(),
        unit: model.parameter_units(table).get(slope).cloned().flatten(),
        refitted: ContrastSummary::of(&refitted_draws, mass)?,
        fitted,
        strengths,
        product: ContrastSummary::of(&product_chains.concat(), mass)?,
        interval: interval_words(mass),
        mass,
        rows,
        method: format!(
            "NUTS on the model with each row's hidden value integrated out ({rows} rows, {} parameters): {} chains, {} settling and {} kept draws each, seed {}",
            density.dim(),
            settings.chains,
            settings.settle,
            settings.draws,
            settings.seed
        ),
        warnings,
        diagnostics,
        fitted_draws,
        refitted_draws,
    })
}
