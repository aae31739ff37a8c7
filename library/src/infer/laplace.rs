//! The Laplace approximation: a multivariate normal centred at the
//! posterior mode, with covariance the inverse of the negative Hessian of
//! the log density there.
//!
//! The mode is found by Newton's method with a backtracking line search. The
//! Hessian is built from the analytic gradient by central differences,
//! symmetrised, which costs `2·dim` gradient calls and is accurate to about
//! 1e-8 relative — ample for a covariance. Away from the mode, where the
//! negative Hessian may not be positive definite, the Newton system is
//! damped (a multiple of the identity is added) until it is. Everything is
//! on the unconstrained scale; constrain draws with the model afterwards.

use std::sync::atomic::{AtomicBool, Ordering};

use nalgebra::{Cholesky, DMatrix, DVector, Dyn, SymmetricEigen};
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use thiserror::Error;

use crate::model::LogDensity;

/// Most Newton steps before giving up.
const MAX_STEPS: usize = 500;
/// Converged when half the Newton decrement `gᵀ(−H + λI)⁻¹g` is below this
/// (λ = 0 unless damping was needed; a flat or saddle-shaped stationary point
/// also stops here and is then reported by the curvature check).
const DECREMENT_TOLERANCE: f64 = 1e-12;
/// Relative step of the central differences of the gradient.
const DIFFERENCE_STEP: f64 = 1e-5;

/// Why a Laplace approximation could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum InferError {
    /// The start has the wrong length.
    #[error("the starting point has {given} values but the model has {dim} parameters")]
    Dimension { given: usize, dim: usize },

    /// The log density is not finite at the start.
    #[error("the log density is not finite at the starting point; start inside the support of every prior")]
    BadStart,

    /// Newton's method did not settle.
    #[error(
        "the search for the posterior mode did not settle after {steps} steps (largest gradient {gradient:.3e}, \
         for {parameter}); the data may not pin this parameter down — give it a tighter prior or sample with NUTS"
    )]
    NoConvergence { steps: usize, gradient: f64, parameter: String },

    /// The curvature at the mode is not positive definite.
    #[error(
        "the posterior is flat or saddle-shaped at its mode along {}; the data and priors do not pin these \
         down together — tighten their priors, drop a redundant term, or sample with NUTS",
        parameters.join(", ")
    )]
    NotPositiveDefinite { parameters: Vec<String> },

    /// The cancel flag was set (an interrupt).
    #[error("the fit was interrupted before it finished")]
    Cancelled,
}

/// A Laplace approximation on the unconstrained scale.
#[derive(Debug, Clone, PartialEq)]
pub struct LaplaceFit {
    /// The posterior mode.
    pub mode: Vec<f64>,
    /// The log density at the mode.
    pub log_density_at_mode: f64,
    /// Inverse of the negative Hessian at the mode.
    pub covariance: DMatrix<f64>,
    /// Draws from the approximating normal; `draws[i]` is one full point.
    pub draws: Vec<Vec<f64>>,
    /// Newton steps taken.
    pub steps: usize,
}

/// Fit a Laplace approximation of `target` starting from `init`, with
/// `n_draws` draws seeded by `seed`. `names` label the unconstrained
/// parameters in error messages (empty: "parameter 1", …).
pub fn laplace<D: LogDensity>(
    target: &D,
    names: &[String],
    init: &[f64],
    n_draws: usize,
    seed: u64,
) -> Result<LaplaceFit, InferError> {
    laplace_with_cancel(target, names, init, n_draws, seed, &AtomicBool::new(false))
}

/// [`laplace`] that reads `cancel` between Newton steps, between the
/// gradient calls of each Hessian and between draws, and returns
/// [`InferError::Cancelled`] once it is set.
pub fn laplace_with_cancel<D: LogDensity>(
    target: &D,
    names: &[String],
    init: &[f64],
    n_draws: usize,
    seed: u64,
    cancel: &AtomicBool,
) -> Result<LaplaceFit, InferError> {
    if init.len() != target.dim() {
        return Err(InferError::Dimension { given: init.len(), dim: target.dim() });
    }
    let label = |i: usize| names.get(i).cloned().unwrap_or_else(|| format!("parameter {}", i + 1));
    let (mode, log_density_at_mode, steps) = find_mode(target, init, &label, cancel)?;
    let negative_hessian = -hessian(target, &mode, cancel)?;
    let cholesky = Cholesky::new(negative_hessian.clone())
        .ok_or_else(|| InferError::NotPositiveDefinite { parameters: flat_directions(&negative_hessian, &label) })?;
    let draws = normal_draws(&mode, &cholesky, n_draws, seed, cancel)?;
    Ok(LaplaceFit { mode: mode.as_slice().to_vec(), log_density_at_mode, covariance: cholesky.inverse(), draws, steps })
}

/// Value and gradient of the log density at `theta`.
fn evaluate<D: LogDensity>(target: &D, theta: &DVector<f64>) -> (f64, DVector<f64>) {
    let mut grad = vec![0.0; theta.len()];
    let value = target.log_density_and_gradient(theta.as_slice(), &mut grad);
    (value, DVector::from_vec(grad))
}

/// Newton's method with backtracking; returns the mode, the log density
/// there and the number of steps.
fn find_mode<D: LogDensity>(
    target: &D,
    init: &[f64],
    label: &dyn Fn(usize) -> String,
    cancel: &AtomicBool,
) -> Result<(DVector<f64>, f64, usize), InferError> {
    let mut theta = DVector::from_column_slice(init);
    let (mut value, mut grad) = evaluate(target, &theta);
    if !value.is_finite() || grad.iter().any(|g| !g.is_finite()) {
        return Err(InferError::BadStart);
    }
    let mut steps = 0;
    while steps < MAX_STEPS {
        let (direction, undamped) = newton_direction(&hessian(target, &theta, cancel)?, &grad);
        let slope = grad.dot(&direction);
        if 0.5 * slope < DECREMENT_TOLERANCE {
            return Ok((theta, value, steps));
        }
        steps += 1;
        match backtrack(target, &theta, value, slope, &direction) {
            Some((next, next_value, next_grad)) => {
                (theta, value, grad) = (next, next_value, next_grad);
            }
            None if undamped && 0.5 * slope < 1e-6 => return Ok((theta, value, steps)),
            None => break,
        }
    }
    let worst = grad.iamax();
    Err(InferError::NoConvergence { steps, gradient: grad[worst].abs(), parameter: label(worst) })
}

/// The Newton direction `(−H)⁻¹g`, damped until the system is positive
/// definite; the flag says whether no damping was needed.
fn newton_direction(hessian: &DMatrix<f64>, grad: &DVector<f64>) -> (DVector<f64>, bool) {
    let negative = -hessian;
    let scale = negative.diagonal().iter().fold(1e-8_f64, |m, d| m.max(d.abs()));
    let mut damping = 0.0;
    loop {
        let damped = &negative + DMatrix::identity(grad.len(), grad.len()) * damping;
        if let Some(cholesky) = Cholesky::new(damped) {
            return (cholesky.solve(grad), damping == 0.0);
        }
        damping = if damping == 0.0 { 1e-8 * scale } else { damping * 10.0 };
    }
}

/// Halve the step until the log density rises enough (Armijo condition).
fn backtrack<D: LogDensity>(
    target: &D,
    theta: &DVector<f64>,
    value: f64,
    slope: f64,
    direction: &DVector<f64>,
) -> Option<(DVector<f64>, f64, DVector<f64>)> {
    let mut t = 1.0;
    for _ in 0..60 {
        let candidate = theta + direction * t;
        let (candidate_value, candidate_grad) = evaluate(target, &candidate);
        let finite = candidate_value.is_finite() && candidate_grad.iter().all(|g| g.is_finite());
        if finite && candidate_value >= value + 1e-4 * t * slope {
            return Some((candidate, candidate_value, candidate_grad));
        }
        t *= 0.5;
    }
    None
}

/// The Hessian by symmetrised central differences of the gradient, reading
/// `cancel` before each pair of gradient calls.
pub fn hessian<D: LogDensity>(target: &D, theta: &DVector<f64>, cancel: &AtomicBool) -> Result<DMatrix<f64>, InferError> {
    let dim = theta.len();
    let mut h = DMatrix::zeros(dim, dim);
    for j in 0..dim {
        stop_if_cancelled(cancel)?;
        let step = DIFFERENCE_STEP * theta[j].abs().max(1.0);
        let mut ahead = theta.clone();
        let mut behind = theta.clone();
        ahead[j] += step;
        behind[j] -= step;
        let column = (evaluate(target, &ahead).1 - evaluate(target, &behind).1) / (2.0 * step);
        h.set_column(j, &column);
    }
    Ok((&h + h.transpose()) * 0.5)
}

/// [`InferError::Cancelled`] once `cancel` is set.
fn stop_if_cancelled(cancel: &AtomicBool) -> Result<(), InferError> {
    if cancel.load(Ordering::Relaxed) {
        return Err(InferError::Cancelled);
    }
    Ok(())
}

/// Parameters that load on the directions of non-positive (or, failing
/// that, the smallest) curvature.
pub(crate) fn flat_directions(negative_hessian: &DMatrix<f64>, label: &dyn Fn(usize) -> String) -> Vec<String> {
    let eigen = SymmetricEigen::new(negative_hessian.clone());
    let largest = eigen.eigenvalues.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let mut flat: Vec<usize> = (0..eigen.eigenvalues.len())
        .filter(|&k| eigen.eigenvalues[k] <= 1e-10 * largest)
        .collect();
    if flat.is_empty() {
        flat.push(eigen.eigenvalues.imin());
    }
    (0..negative_hessian.nrows())
        .filter(|&i| flat.iter().any(|&k| eigen.eigenvectors[(i, k)].abs() > 0.1))
        .map(label)
        .collect()
}

/// `n` draws of `mode + L⁻ᵀz` with `LLᵀ = −H`, so their covariance is `(−H)⁻¹`.
pub(crate) fn normal_draws(
    mode: &DVector<f64>,
    cholesky: &Cholesky<f64, Dyn>,
    n: usize,
    seed: u64,
    cancel: &AtomicBool,
) -> Result<Vec<Vec<f64>>, InferError> {
    let mut rng = StdRng::seed_from_u64(seed);
    let upper = cholesky.l().transpose();
    (0..n)
        .map(|i| {
            if i % 1024 == 0 {
                stop_if_cancelled(cancel)?;
            }
            let z = DVector::from_fn(mode.len(), |_, _| StandardNormal.sample(&mut rng));
            let offset = upper.solve_upper_triangular_unchecked(&z);
            Ok((mode + offset).as_slice().to_vec())
        })
        .collect()
}
