//! One call from a built model to labelled posterior draws.
//!
//! [`fit_model`] runs the chosen method on the model's unconstrained
//! density, maps every draw back to the constrained scale, labels it with
//! the model's parameter names, and gathers diagnostics and warnings. The
//! cells and query layers see only the resulting [`Fit`].

use std::sync::atomic::AtomicBool;

use crate::draws::Draws;
use crate::infer::diagnostics::{diagnose, run_warnings, ParamDiagnostics};
use crate::infer::laplace::{laplace_with_cancel, InferError};
use crate::infer::normal_exact::normal_exact_draws;
use crate::infer::nuts::{sample_nuts, Init, NutsError, NutsSettings, Progress};
use crate::limits::{bytes_for, check_memory};
use crate::model::Model;

/// Default seed of a Laplace fit (NUTS has its own in [`NutsSettings`]).
pub const LAPLACE_SEED: u64 = 20_261_201;
/// Default number of Laplace draws.
pub const LAPLACE_DRAWS: usize = 4000;

/// How to fit.
#[derive(Debug, Clone, PartialEq)]
pub enum Method {
    /// Normal approximation at the posterior mode; exact draws instead
    /// for a normal model with normal coefficient priors
    /// ([`crate::infer::normal_exact`]).
    Laplace { draws: usize, seed: u64 },
    /// The No-U-Turn sampler.
    Nuts(NutsSettings),
}

impl Method {
    /// The method's name and its settings, as printed with a fit.
    pub fn describe(&self) -> String {
        match self {
            Method::Laplace { draws, seed } => format!(
                "Laplace approximation (exact for a normal outcome with normal coefficient priors: the spread's \
                 marginal on a grid, the coefficients drawn given it), {draws} draws, seed {seed}"
            ),
            Method::Nuts(s) => format!(
                "NUTS on {} chains, each keeping {} draws after settling for {} ({} draws in all); \
                 acceptance {}, up to {} doublings per trajectory, seed {}",
                s.chains,
                s.draws,
                s.settle,
                s.chains.saturating_mul(s.draws),
                s.acceptance,
                s.doublings,
                s.seed
            ),
        }
    }

    /// `"laplace"` or `"nuts"`.
    pub fn name(&self) -> &'static str {
        match self {
            Method::Laplace { .. } => "laplace",
            Method::Nuts(_) => "nuts",
        }
    }

    /// The seed the method uses.
    pub fn seed(&self) -> u64 {
        match self {
            Method::Laplace { seed, .. } => *seed,
            Method::Nuts(s) => s.seed,
        }
    }
}

/// A fitted model: labelled draws on the constrained scale plus how they were made.
#[derive(Debug, Clone)]
pub struct Fit {
    pub method: Method,
    pub draws: Draws,
    /// Per parameter, in `draws.names` order; `None` for Laplace fits.
    pub diagnostics: Option<Vec<ParamDiagnostics>>,
    pub divergences: usize,
    /// Kept draws whose trajectory reached the doubling limit (NUTS only).
    pub depth_hits: usize,
    /// The most doublings any kept trajectory made (NUTS only; 0 otherwise).
    pub deepest: u32,
    pub warnings: Vec<String>,
    pub seconds: f64,
}

/// Why a fit failed.
#[derive(Debug, thiserror::Error)]
pub enum FitError {
    #[error(transparent)]
    Laplace(#[from] InferError),
    #[error(transparent)]
    Nuts(#[from] NutsError),
    #[error("the draws could not be stored: {0}")]
    Draws(String),
    #[error("{0}")]
    TooLarge(String),
    /// A Laplace fit of a model with pooled groups failed, as it usually does.
    #[error(
        "{0}; a Laplace approximation suits pooled groups poorly (the joint mode of a spread and its departures \
         sits at a spread of 0): fit with nuts"
    )]
    LaplacePooled(InferError),
}

/// Fit `model` with `method`. `cancel` stops a run early (an error);
/// `progress` hears about every NUTS iteration.
pub fn fit_model(
    model: &Model,
    method: &Method,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<Fit, FitError> {
    check_fit_memory(model, method).map_err(FitError::TooLarge)?;
    let started = std::time::Instant::now();
    let names = model.parameter_names();
    let (run, max_depth) = match method {
        Method::Laplace { draws, seed } => match model.normal_linear().and_then(|p| normal_exact_draws(&p, *draws, *seed)) {
            // The exact route is one short pass; the interrupt is read after it.
            Some(exact) if !cancelled(cancel) => (Err(exact), 0),
            Some(_) => return Err(InferError::Cancelled.into()),
            None => {
                let fit = laplace_with_cancel(model, &model.unconstrained_names(), &model.initial_point(), *draws, *seed, cancel)
                    .map_err(|e| match e {
                        InferError::Cancelled => FitError::Laplace(e),
                        _ if !model.pooled_groups().is_empty() => FitError::LaplacePooled(e),
                        _ => FitError::Laplace(e),
                    })?;
                (Err(fit.draws), 0)
            }
        },
        Method::Nuts(settings) => {
            let init = Init::Given(dispersed_starts(model, settings.chains, settings.seed));
            (Ok(sample_nuts(model, &init, settings, cancel, progress)?), settings.doublings)
        }
    };
    let chains = match &run {
        Ok(run) => &run.draws,
        Err(draws) => std::slice::from_ref(draws),
    };
    let constrained: Vec<Vec<Vec<f64>>> =
        chains.iter().map(|chain| chain.iter().map(|theta| model.constrain(theta)).collect()).collect();
    let draws = Draws::from_chains(names.clone(), constrained).map_err(|e| FitError::Draws(e.to_string()))?;
    let (diagnostics, divergences, depth_hits, deepest, warnings) = match &run {
        Err(_) => (None, 0, 0, 0, Vec::new()),
        Ok(run) => {
            // Diagnostics and warnings on one scale: the constrained draws the table shows.
            let diagnostics = per_parameter_diagnostics(&draws);
            let warnings = run_warnings(run, &names, &diagnostics, max_depth);
            let deepest = run.deepest.iter().copied().max().unwrap_or(0);
            (Some(diagnostics), run.divergences.iter().sum(), run.depth_hits.iter().sum(), deepest, warnings)
        }
    };
    Ok(Fit {
        method: method.clone(),
        draws,
        diagnostics,
        divergences,
        depth_hits,
        deepest,
        warnings,
        seconds: started.elapsed().as_secs_f64(),
    })
}

fn cancelled(cancel: &AtomicBool) -> bool {
    cancel.load(std::sync::atomic::Ordering::SeqCst)
}

/// Refuse a fit whose draws (or, for Laplace, curvature matrices) would not
/// fit in memory. The draws are held three times over while a fit is made:
/// on the unconstrained scale, constrained, and in the labelled store.
fn check_fit_memory(model: &Model, method: &Method) -> Result<(), String> {
    let dim = model.parameter_names().len().max(1);
    let (what, bytes) = match method {
        Method::Laplace { draws, .. } => {
            // The Hessian, its Cholesky factor and the covariance: three dim × dim matrices.
            let matrices = bytes_for(&[dim, dim, 3]);
            (format!("{draws} Laplace draws of {dim} parameters"), bytes_for(&[*draws, dim, 3]).saturating_add(matrices))
        }
        Method::Nuts(s) => (
            format!("{} chains of {} draws of {dim} parameters", s.chains, s.draws),
            bytes_for(&[s.chains, s.draws, dim, 3]),
        ),
    };
    check_memory(&what, bytes)
}

/// One start per chain, spread out so that R-hat can see chains that
/// settle apart (Vehtari et al. 2021, §2: starting points should be
/// dispersed relative to the target).
///
/// Waypath's scheme: with `C` chains, each unconstrained coordinate takes
/// the `C` stratified standard scores `Φ⁻¹((c + ½)/C)`, dealt to the chains
/// in a seeded random order (a different order per coordinate, so the
/// starts do not all lie on one diagonal); [`Model::dispersed_point`] turns
/// the scores into a point, one prior typical distance per unit. One chain
/// starts near the model's own starting point.
fn dispersed_starts(model: &Model, chains: usize, seed: u64) -> Vec<Vec<f64>> {
    let scores = stratified_scores(model.initial_point().len(), chains, seed);
    scores.iter().map(|z| model.dispersed_point(z)).collect()
}

/// Seeded jitter added to every score, so that no start (one chain's start
/// in particular) sits exactly on a symmetric point where a gradient
/// component is exactly zero, which the sampler refuses as a start.
const JITTER: f64 = 0.05;

/// `chains` rows of `dim` standard scores: each column holds the stratified
/// scores `Φ⁻¹((c + ½)/chains)` in a seeded random order, plus a small
/// seeded jitter ([`JITTER`]).
pub fn stratified_scores(dim: usize, chains: usize, seed: u64) -> Vec<Vec<f64>> {
    use rand::seq::SliceRandom;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};
    use statrs::distribution::ContinuousCDF;
    let normal = statrs::distribution::Normal::standard();
    let strata: Vec<f64> = (0..chains).map(|c| normal.inverse_cdf((c as f64 + 0.5) / chains as f64)).collect();
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed ^ 0x5EED_57A7);
    let jitter = Normal::new(0.0, JITTER).expect("fixed, valid sd");
    let mut rows = vec![vec![0.0; dim]; chains];
    for j in 0..dim {
        let mut column = strata.clone();
        column.shuffle(&mut rng);
        for (row, z) in rows.iter_mut().zip(column) {
            row[j] = z + jitter.sample(&mut rng);
        }
    }
    rows
}

fn per_parameter_diagnostics(draws: &Draws) -> Vec<ParamDiagnostics> {
    draws
        .names
        .iter()
        .map(|name| {
            let chains = draws.by_chain(name).unwrap_or_default();
            diagnose(&chains)
        })
        .collect()
}
