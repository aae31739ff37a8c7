//! The fully Bayesian answer to "what if a hidden common cause of X and
//! the outcome exists?": refit the model beside a simulated hidden node
//! whose strengths have priors the user states, and set the slope's
//! widened interval beside the fitted one. The outcome is normal, or
//! yes/no with the slope and the outcome's strength on the log-odds scale.
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
//!
//! The exposure model's priors are Waypath's, set on the exposure's
//! observed spread, or stated in the exposure's own unit
//! ([`ExposurePriors`]); the result lists them in that unit either way.
//! With stated priors nothing of the refit's prior reads the data, so a
//! calibration over the prior can be run on [`refit_beside_hidden`], which
//! gives every parameter's draws.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::draws::Draws;
use crate::infer::diagnostics::{diagnose, parameter_warnings};
use crate::infer::fit::stratified_scores;
use crate::infer::nuts::{sample_nuts, Init, NutsSettings, Progress};
use crate::limits::{bytes_for, check_memory};
use crate::model::{ExposurePriors, HiddenCause, LogDensity, Model, Prior};
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

/// The priors of the refit beyond the model's own: each strength's (as
/// written, and read) and the exposure model's.
#[derive(Debug, Clone, PartialEq)]
pub struct RefitPriors {
    pub to_exposure: (String, Prior),
    pub to_outcome: (String, Prior),
    pub exposure: ExposurePriors,
}

/// The exposure model's priors as used, in the exposure's unit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExposurePriorsUsed {
    /// `stated in the cell` or Waypath's default, with the observed mean
    /// and sd it was set on.
    pub set_by: String,
    pub parameters: Vec<ExposurePrior>,
}

/// One parameter of the exposure model and its prior.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExposurePrior {
    pub parameter: String,
    pub prior: String,
}

/// The scale of a normal outcome's slope.
pub const DIFFERENCE: &str = "difference";
/// The scale of a yes/no outcome's slope.
pub const LOG_ODDS: &str = "log odds";

/// Who set the exposure model's priors when they were stated.
pub const STATED_IN_THE_CELL: &str = "stated in the cell";

/// The refit's draws and the sampler's account of them.
#[derive(Debug, Clone, PartialEq)]
pub struct HiddenRun {
    /// Every parameter, constrained: the model's (coefficients, `spread`),
    /// the exposure model's ([`HiddenCause::exposure_labels`]) and the two
    /// strengths, `hidden → X` and `hidden → Y`.
    pub draws: Draws,
    /// The slope's and the strengths' product's draws, chain by chain.
    pub slope_chains: Vec<Vec<f64>>,
    pub product_chains: Vec<Vec<f64>>,
    pub exposure_priors: ExposurePriorsUsed,
    pub warnings: Vec<String>,
    pub diagnostics: Vec<RefitDiagnostics>,
    pub rows: usize,
    pub method: String,
}

/// The slope fitted without and with the simulated hidden node.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HiddenRefit {
    pub model: String,
    pub exposure: String,
    pub outcome: String,
    /// The slope's unit (outcome unit per exposure unit), when both have one.
    pub unit: Option<String>,
    /// The slope's scale: [`DIFFERENCE`] for a normal outcome, [`LOG_ODDS`]
    /// for a yes/no one.
    pub scale: &'static str,
    /// The fitted one-unit contrast (the slope) as the model was fitted.
    pub fitted: ContrastSummary,
    /// The same after the refit beside the hidden node.
    pub refitted: ContrastSummary,
    /// The posterior of both strengths next to their priors.
    pub strengths: Vec<StrengthSummary>,
    /// The posterior of `a·b`, the bias the hidden node carries.
    pub product: ContrastSummary,
    /// The exposure model's priors, in the exposure's unit.
    pub exposure_priors: ExposurePriorsUsed,
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

/// Refit `model` (fitted as `draws` on `table`) beside a hidden node with
/// `priors`, sampled with `settings`, and set the refitted slope of `x`
/// beside the fitted one.
#[allow(clippy::too_many_arguments)]
pub fn hidden_refit(
    model: &Model,
    draws: &Draws,
    table: &Table,
    x: &str,
    priors: &RefitPriors,
    settings: &NutsSettings,
    mass: f64,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<HiddenRefit, QueryError> {
    let run = refit_beside_hidden(model, x, priors, settings, cancel, progress)?;
    let slope = model.linear_slope_position(x).expect("the refit checked the slope");
    let names = model.parameter_names();
    let fitted_draws = draws.require(&names[slope])?.to_vec();
    let fitted = ContrastSummary::of(&fitted_draws, mass)?;
    let refitted_draws: Vec<f64> = run.slope_chains.concat();
    let summary = |label: String, prior: &str| -> Result<StrengthSummary, QueryError> {
        let s = ContrastSummary::of(run.draws.require(&label)?, mass)?;
        Ok(StrengthSummary { strength: label, prior: prior.to_string(), mean: s.mean, lower: s.lower, upper: s.upper })
    };
    let strengths = vec![
        summary(strength_label(x), &priors.to_exposure.0)?,
        summary(strength_label(model.outcome_name()), &priors.to_outcome.0)?,
    ];
    Ok(HiddenRefit {
        model: model.name().to_string(),
        exposure: x.to_string(),
        outcome: model.outcome_name().to_string(),
        unit: model.parameter_units(table).get(slope).cloned().flatten(),
        scale: if model.has_spread() { DIFFERENCE } else { LOG_ODDS },
        refitted: ContrastSummary::of(&refitted_draws, mass)?,
        fitted,
        strengths,
        product: ContrastSummary::of(&run.product_chains.concat(), mass)?,
        exposure_priors: run.exposure_priors,
        interval: interval_words(mass),
        mass,
        rows: run.rows,
        method: run.method,
        warnings: run.warnings,
        diagnostics: run.diagnostics,
        fitted_draws,
        refitted_draws,
    })
}

/// The label of the strength of the hidden node on `node`.
pub fn strength_label(node: &str) -> String {
    format!("hidden → {node}")
}

/// Sample `model` beside a hidden node with `priors` (the exposure `x`
/// one linear slope of a normal model without pooled groups) with NUTS,
/// without looking at any earlier fit.
pub fn refit_beside_hidden(
    model: &Model,
    x: &str,
    priors: &RefitPriors,
    settings: &NutsSettings,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<HiddenRun, QueryError> {
    let place = format!("robustness of {}: {x} refit", model.name());
    let (slope, centre) = model.linear_slope_position(x).zip(model.linear_slope_centre(x)).ok_or_else(|| {
        QueryError::request(format!(
            "{place}: {x} does not enter model {} as one linear slope (a numeric predictor written as a plain term); \
             the refit moves that slope, so write {x} as a plain term",
            model.name()
        ))
    })?;
    let density = HiddenCause::new(model, slope, centre, &priors.exposure, priors.to_exposure.1.clone(), priors.to_outcome.1.clone()).ok_or_else(|| {
        QueryError::request(format!(
            "{place}: the refit takes a normal or yes/no (bernoulli) outcome without pooled groups or steps(…) terms and an exposure that varies; model {} is not one",
            model.name()
        ))
    })?;
    let layout = density.layout();
    let rows = model.outcome_values().len();
    let kept = settings.chains.saturating_mul(settings.draws);
    check_memory(&format!("{place}: {kept} draws of {} parameters", layout.dim), bytes_for(&[kept.max(1), layout.dim])).map_err(QueryError::request)?;
    let scores = stratified_scores(layout.dim, settings.chains, settings.seed);
    let starts: Vec<Vec<f64>> = scores
        .iter()
        .map(|z| {
            let mut outcome = model.dispersed_point(&z[..layout.outcome_end]);
            outcome.truncate(layout.outcome_end);
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
    let mut names = model.parameter_names();
    names.extend(density.exposure_labels());
    names.push(strength_label(x));
    names.push(strength_label(model.outcome_name()));
    let positive = [layout.outcome_spread, Some(layout.exposure_spread)];
    let constrained: Vec<Vec<Vec<f64>>> = run
        .draws
        .iter()
        .map(|c| c.iter().map(|t| t.iter().enumerate().map(|(k, v)| if positive.contains(&Some(k)) { v.exp() } else { *v }).collect()).collect())
        .collect();
    let draws = Draws::from_chains(names, constrained).map_err(|e| QueryError::request(format!("{place}: {e}")))?;
    Ok(HiddenRun {
        draws,
        slope_chains,
        product_chains,
        exposure_priors: exposure_priors_used(&density, &priors.exposure, x),
        warnings,
        diagnostics,
        rows,
        method: format!(
            "NUTS on the model with each row's hidden value integrated out ({rows} rows, {} parameters): {} chains, {} settling and {} kept draws each, seed {}",
            density.dim(),
            settings.chains,
            settings.settle,
            settings.draws,
            settings.seed
        ),
    })
}

/// The exposure model's priors in the exposure's unit, and who set them.
fn exposure_priors_used(density: &HiddenCause<'_>, exposure: &ExposurePriors, x: &str) -> ExposurePriorsUsed {
    let parameters = density
        .exposure_labels()
        .into_iter()
        .zip(density.exposure_priors_in_unit())
        .map(|(parameter, prior)| ExposurePrior { parameter, prior: prior.to_string() })
        .collect();
    let set_by = match exposure {
        ExposurePriors::Stated { .. } => STATED_IN_THE_CELL.to_string(),
        ExposurePriors::ObservedSpread => {
            let (mean, sd) = density.exposure_observed();
            format!(
                "Waypath default, set on {x}'s observed mean {} and sd {} (they move with the data)",
                crate::model::prior::short_number(mean),
                crate::model::prior::short_number(sd)
            )
        }
    };
    ExposurePriorsUsed { set_by, parameters }
}
