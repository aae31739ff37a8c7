//! The Laplace approximation of a bernoulli or poisson model whose table
//! stays on disk (cargo feature `on_disk`): Newton's method where each
//! step is one pass of the engine over the file.
//!
//! In memory, [`super::laplace`] builds the Hessian from `2·dim` gradient
//! calls; on disk each call would be a pass over the file, so here one pass
//! gives the log-likelihood, its gradient and the information `XᵀWX`
//! together (`model::disk_sums`), the exact Hessian of a canonical-link
//! GLM. The priors are cheap (no rows): their gradient is the model's own
//! and their Hessian its central differences. A step that lowers the log
//! posterior is halved (each try another pass); the search stops when half
//! the Newton decrement is below the in-memory tolerance, and the draws
//! come from the normal with the inverse negative Hessian at the mode.

use std::sync::atomic::{AtomicBool, Ordering};

use nalgebra::{Cholesky, DMatrix, DVector};

use crate::model::Model;

use super::laplace::{flat_directions, normal_draws, InferError};

/// Most Newton steps (passes that move the point) before giving up.
const MAX_STEPS: usize = 50;
/// Converged when half the Newton decrement is below this (as in memory).
const DECREMENT_TOLERANCE: f64 = 1e-12;
/// Relative step of the central differences of the prior's gradient.
const DIFFERENCE_STEP: f64 = 1e-5;

/// The mode, the covariance there and `draws` draws (unconstrained scale).
pub struct DiskLaplace {
    pub mode: Vec<f64>,
    pub covariance: DMatrix<f64>,
    pub draws: Vec<Vec<f64>>,
    pub steps: usize,
}

/// Why a fit on disk failed.
#[derive(Debug, thiserror::Error)]
pub enum DiskFitError {
    #[error(transparent)]
    Laplace(#[from] InferError),
    #[error("the engine's pass over the file failed: {0}")]
    Engine(String),
}

/// The log posterior at `beta`: value, gradient, negative Hessian.
fn evaluate(model: &Model, beta: &DVector<f64>, cancel: &AtomicBool) -> Result<(f64, DVector<f64>, DMatrix<f64>), DiskFitError> {
    let p = beta.len();
    let pass = model.disk_newton_pass(beta.as_slice(), cancel).expect("a model on disk");
    let (log_likelihood, gradient, information) = pass.map_err(|e| {
        if cancel.load(Ordering::Relaxed) { DiskFitError::Laplace(InferError::Cancelled) } else { DiskFitError::Engine(e) }
    })?;
    let mut prior_gradient = vec![0.0; p];
    let log_prior = model.log_prior_and_gradient(beta.as_slice(), &mut prior_gradient);
    let value = log_likelihood + log_prior;
    let gradient = DVector::from_vec(gradient) + DVector::from_vec(prior_gradient);
    let negative_hessian = DMatrix::from_row_slice(p, p, &information) - prior_hessian(model, beta);
    Ok((value, gradient, negative_hessian))
}

/// The Hessian of the log prior by symmetrised central differences.
fn prior_hessian(model: &Model, beta: &DVector<f64>) -> DMatrix<f64> {
    let p = beta.len();
    let gradient_at = |point: &DVector<f64>| {
        let mut g = vec![0.0; p];
        model.log_prior_and_gradient(point.as_slice(), &mut g);
        DVector::from_vec(g)
    };
    let mut h = DMatrix::zeros(p, p);
    for j in 0..p {
        let step = DIFFERENCE_STEP * beta[j].abs().max(1.0);
        let mut ahead = beta.clone();
        let mut behind = beta.clone();
        ahead[j] += step;
        behind[j] -= step;
        h.set_column(j, &((gradient_at(&ahead) - gradient_at(&behind)) / (2.0 * step)));
    }
    (&h + h.transpose()) * 0.5
}

/// Newton's method from the model's starting point, then the draws.
pub fn disk_laplace(model: &Model, draws: usize, seed: u64, cancel: &AtomicBool) -> Result<DiskLaplace, DiskFitError> {
    let names = model.unconstrained_names();
    let label = |i: usize| names.get(i).cloned().unwrap_or_else(|| format!("parameter {}", i + 1));
    let mut beta = DVector::from_vec(model.initial_point());
    let (mut value, mut gradient, mut negative) = evaluate(model, &beta, cancel)?;
    if !value.is_finite() {
        return Err(InferError::BadStart.into());
    }
    let mut steps = 0;
    loop {
        let cholesky = Cholesky::new(negative.clone())
            .ok_or_else(|| InferError::NotPositiveDefinite { parameters: flat_directions(&negative, &label) })?;
        let direction = cholesky.solve(&gradient);
        let slope = gradient.dot(&direction);
        if 0.5 * slope < DECREMENT_TOLERANCE {
            let draws = normal_draws(&beta, &cholesky, draws, seed, cancel)?;
            return Ok(DiskLaplace { mode: beta.as_slice().to_vec(), covariance: cholesky.inverse(), draws, steps });
        }
        if steps == MAX_STEPS {
            let worst = gradient.iamax();
            return Err(InferError::NoConvergence { steps, gradient: gradient[worst].abs(), parameter: label(worst) }.into());
        }
        steps += 1;
        let mut t = 1.0;
        loop {
            let candidate = &beta + &direction * t;
            let (next_value, next_gradient, next_negative) = evaluate(model, &candidate, cancel)?;
            if next_value.is_finite() && next_value >= value + 1e-4 * t * slope {
                (beta, value, gradient, negative) = (candidate, next_value, next_gradient, next_negative);
                break;
            }
            t *= 0.5;
            if t < 1e-10 {
                let worst = gradient.iamax();
                return Err(InferError::NoConvergence { steps, gradient: gradient[worst].abs(), parameter: label(worst) }.into());
            }
        }
    }
}
