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
use crate::infer::nuts::{sample_nuts, Init, MassMatrix, NutsError, NutsSettings, Progress};
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
                 acceptance {}, up to {} doublings per trajectory, mass matrix {}, seed {}",
                s.chains,
                s.draws,
                s.settle,
                s.chains.saturating_mul(s.draws),
                s.acceptance,
                s.doublings,
                s.mass.word(),
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
    /// Leapfrog steps (gradient evaluations) per kept draw, over all
    /// chains (NUTS only).
    pub steps_per_draw: Option<f64>,
    /// The adapted step size, averaged over the chains (NUTS only).
    pub step_size: Option<f64>,
    pub warnings: Vec<String>,
    pub seconds: f64,
    /// Which path the fit took when its table stayed on disk (the engine's
    /// passes and what they gathered); `None` in memory.
    pub route: Option<String>,
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
    /// A fit a table on disk cannot take, or an engine pass that failed.
    #[error("{0}")]
    OnDisk(String),
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
    let method = &with_mass_matrix_chosen(model, method);
    let passes_before = disk_passes(model);
    let (run, max_depth) = match method {
        #[cfg(feature = "on_disk")]
        Method::Laplace { draws, seed } if model.on_disk().is_some() && model.likelihood_in_file() => {
            let fit = crate::infer::on_disk::disk_laplace(model, *draws, *seed, cancel).map_err(|e| match e {
                crate::infer::on_disk::DiskFitError::Laplace(e) => FitError::Laplace(e),
                crate::infer::on_disk::DiskFitError::Engine(e) => FitError::OnDisk(e),
            })?;
            (Err(fit.draws), 0)
        }
        #[cfg(feature = "on_disk")]
        Method::Nuts(_) if model.on_disk().is_some() && model.likelihood_in_file() => {
            return Err(FitError::OnDisk(nuts_on_disk_refusal(model)));
        }
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
    let (steps_per_draw, step_size) = match &run {
        Err(_) => (None, None),
        Ok(run) => {
            let kept: usize = run.draws.iter().map(Vec::len).sum();
            let steps: u64 = run.leapfrog_steps.iter().sum();
            let mean_step = run.step_sizes.iter().sum::<f64>() / run.step_sizes.len().max(1) as f64;
            (Some(steps as f64 / kept.max(1) as f64), Some(mean_step))
        }
    };
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
        steps_per_draw,
        step_size,
        warnings,
        seconds: started.elapsed().as_secs_f64(),
        route: route(model, passes_before),
    })
}

/// Passes the engine has made for a model on disk so far (0 in memory).
fn disk_passes(model: &Model) -> usize {
    #[cfg(feature = "on_disk")]
    if let Some(disk) = model.on_disk() {
        return disk.passes().len();
    }
    let _ = model;
    0
}

/// Which path the fit took, for the summary: `None` for a table in memory.
fn route(model: &Model, passes_before: usize) -> Option<String> {
    #[cfg(feature = "on_disk")]
    if let Some(disk) = model.on_disk() {
        let passes = disk.passes();
        let built: f64 = passes[..passes_before.min(passes.len())].iter().map(|p| p.seconds).sum();
        let fitted = &passes[passes_before.min(passes.len())..];
        let fit_seconds: f64 = fitted.iter().map(|p| p.seconds).sum();
        let how = if model.likelihood_in_file() {
            format!(
                "{} Newton {} over the file ({:.2} s), each gathering the log-likelihood, its gradient and XᵀWX",
                fitted.len(),
                if fitted.len() == 1 { "pass" } else { "passes" },
                fit_seconds
            )
        } else {
            "on the normal family's sufficient statistics (XᵀX, Xᵀy, yᵀy), no further pass".to_string()
        };
        let engine = match disk.scheduler() {
            Some(scheduler) => format!("the scheduler at {scheduler} and its executors (Apache Ballista)"),
            None => "the embedded engine (DataFusion)".to_string(),
        };
        return Some(format!(
            "table on disk: {} rows of {} stayed there; {engine} made {} {} while the model was built ({:.2} s); \
             fitted {how}",
            disk.rows(),
            disk.source(),
            passes_before,
            if passes_before == 1 { "pass" } else { "passes" },
            built
        ));
    }
    let _ = (model, passes_before);
    None
}

/// Why NUTS is not run on a bernoulli or poisson table on disk.
#[cfg(feature = "on_disk")]
fn nuts_on_disk_refusal(model: &Model) -> String {
    let rows = model.on_disk().map_or(0, |d| d.rows());
    format!(
        "NUTS is not run on this table on disk: a {} likelihood has no sufficient statistics, so every gradient \
         (hundreds per draw) would be a pass over its {rows} rows, and the rows are not loaded into memory; fit it \
         `with laplace` (Newton steps, one pass each), or load the table into memory (without \"stay on disk\") \
         if it fits there. Nothing was sampled.",
        model.family().name()
    )
}

/// The method with a NUTS mass matrix left to the model replaced by
/// [`mass_matrix_for`]'s choice, so that the fit records (and its settings
/// line shows) the mass matrix it ran with.
fn with_mass_matrix_chosen(model: &Model, method: &Method) -> Method {
    match method {
        Method::Nuts(s) if s.mass == MassMatrix::ByModel => {
            Method::Nuts(NutsSettings { mass: mass_matrix_for(model), ..s.clone() })
        }
        other => other.clone(),
    }
}

/// Above this condition number of the scaled design cross-product
/// ([`design_condition`]) a model is fitted with the low-rank mass matrix.
/// Two columns correlated ρ give (1 + ρ)/(1 − ρ), so 2 is one pair at
/// ρ = 1/3. Measured (README, Performance): the benchmark's poisson case
/// (pairs at ρ = 0.6, condition 4.2) gained half again in ESS with the
/// low-rank matrix and the B-spline case (510) twentyfold; the cases at
/// 1.1–1.2 gained nothing worth an eigen-decomposition.
pub const LOW_RANK_CONDITION: f64 = 2.0;

/// Waypath's rule for the mass matrix of a NUTS fit: low-rank when the
/// design's columns overlap — the condition number of `XᵀX` scaled to a
/// unit diagonal exceeds [`LOW_RANK_CONDITION`] — and diagonal otherwise.
///
/// Why the design: the curvature of a regression's log-likelihood is
/// `XᵀWX` (W the rows' weights), so overlapping columns make correlated
/// coefficients, whose posterior a diagonal mass matrix cannot round out
/// (it only rescales each parameter, which is what the unit diagonal
/// leaves aside). Columns that barely overlap leave a posterior the
/// diagonal adaptation already handles, with no eigen-decompositions while
/// settling. The benchmark measurements behind the threshold are in the
/// README (Performance).
pub fn mass_matrix_for(model: &Model) -> MassMatrix {
    #[cfg(feature = "on_disk")]
    if let Some(disk) = model.on_disk() {
        return if cross_condition(&disk.cross_products()) > LOW_RANK_CONDITION { MassMatrix::LowRank } else { MassMatrix::Diagonal };
    }
    if design_condition(model.design_matrix()) > LOW_RANK_CONDITION {
        MassMatrix::LowRank
    } else {
        MassMatrix::Diagonal
    }
}

/// Rows of the design the mass-matrix rule reads at most (evenly spaced),
/// so that the rule costs little next to the fit on any table.
const RULE_ROWS: usize = 20_000;

/// The condition number (largest over smallest eigenvalue) of the design's
/// cross-product `XᵀX` scaled to a unit diagonal, from at most
/// [`RULE_ROWS`] evenly spaced rows; columns that are zero on those rows
/// are left out. Infinite when the columns are linearly dependent; 1 for
/// orthogonal columns (and for a design of one column).
pub fn design_condition(design: &nalgebra::DMatrix<f64>) -> f64 {
    let (n, p) = design.shape();
    let stride = n.div_ceil(RULE_ROWS).max(1);
    let mut cross = nalgebra::DMatrix::<f64>::zeros(p, p);
    for i in (0..n).step_by(stride) {
        let row = design.row(i);
        for j in 0..p {
            for k in 0..=j {
                cross[(j, k)] += row[j] * row[k];
            }
        }
    }
    cross_condition(&cross)
}

/// The condition number of a cross-product `XᵀX` (lower triangle read)
/// scaled to a unit diagonal; columns that are all 0 are left out.
pub fn cross_condition(cross: &nalgebra::DMatrix<f64>) -> f64 {
    let p = cross.nrows();
    let kept: Vec<usize> = (0..p).filter(|&j| cross[(j, j)] > 0.0).collect();
    if kept.len() < 2 {
        return 1.0;
    }
    let scaled = nalgebra::DMatrix::from_fn(kept.len(), kept.len(), |a, b| {
        let (j, k) = (kept[a].max(kept[b]), kept[a].min(kept[b]));
        cross[(j, k)] / (cross[(j, j)] * cross[(k, k)]).sqrt()
    });
    let eigenvalues = scaled.symmetric_eigenvalues();
    let (low, high) = eigenvalues.iter().fold((f64::INFINITY, 0.0_f64), |(l, h), &v| (l.min(v), h.max(v)));
    if low <= high * f64::EPSILON * kept.len() as f64 {
        f64::INFINITY
    } else {
        high / low
    }
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

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::DMatrix;

    /// Two columns with cosine ρ scale to [[1, ρ], [ρ, 1]], whose
    /// eigenvalues are 1 ± ρ: condition (1 + ρ)/(1 − ρ) (the 2 × 2
    /// symmetric eigenproblem, any linear algebra text).
    #[test]
    fn condition_of_two_columns_is_one_plus_over_one_minus_their_cosine() {
        let n = 1000;
        let z: Vec<f64> = (0..n).map(|i| ((i * 7919 % 1000) as f64 / 1000.0 - 0.4995) * 2.0).collect();
        let design = DMatrix::from_fn(n, 2, |i, j| if j == 0 { 1.0 } else { 0.8 + z[i] });
        let column = design.column(1);
        let rho = column.sum() / (n as f64 * column.dot(&column)).sqrt();
        let want = (1.0 + rho) / (1.0 - rho);
        let got = design_condition(&design);
        assert!((got - want).abs() < 1e-9 * want, "{got} vs {want} (cosine {rho})");
        assert!(got > LOW_RANK_CONDITION);
    }

    /// Orthogonal columns (an intercept, a centred ±1 column, and category
    /// indicators of disjoint rows) give 1; a repeated column gives
    /// infinity; an all-zero column is left out.
    #[test]
    fn orthogonal_columns_give_one_and_dependent_columns_infinity() {
        let design = DMatrix::from_fn(8, 4, |i, j| match j {
            0 => 1.0,
            1 => if i % 2 == 0 { 1.0 } else { -1.0 },
            2 => f64::from(u8::from(i < 4)) - f64::from(u8::from(i >= 4)),
            _ => 0.0,
        });
        assert!((design_condition(&design) - 1.0).abs() < 1e-12);
        let indicators = DMatrix::from_fn(6, 3, |i, j| f64::from(u8::from(i % 3 == j)));
        assert!((design_condition(&indicators) - 1.0).abs() < 1e-12);
        let repeated = DMatrix::from_fn(5, 2, |i, _| i as f64 + 1.0);
        assert_eq!(design_condition(&repeated), f64::INFINITY);
    }
}
