//! Row-by-row log-likelihoods of the GLM families (bernoulli, binomial,
//! poisson) and their gradients with respect to the coefficients.
//!
//! Each row contributes `y·η − m·softplus(η)` (logit link, `m` trials) or
//! `y·η − e^η` (log link), plus a constant that does not depend on the
//! coefficients; its derivative in η is `y − m·logistic(η)` or `y − e^η`.
//! The design is kept row-major so each row is one contiguous slice.

use statrs::function::gamma::ln_gamma;

use super::{logistic, softplus};

/// The outcome of a GLM family, as reals.
#[derive(Debug, Clone, PartialEq)]
pub enum GlmOutcome {
    Bernoulli { y: Vec<f64> },
    Binomial { y: Vec<f64>, trials: Vec<f64> },
    Poisson { y: Vec<f64> },
}

/// Design and outcome of a GLM, ready for repeated likelihood evaluations.
#[derive(Debug, Clone, PartialEq)]
pub struct GlmData {
    rows: Vec<f64>,
    width: usize,
    outcome: GlmOutcome,
    constant: f64,
}

impl GlmData {
    /// From a row-major design (`rows.len() == n · width`) and the outcome.
    pub fn new(rows: Vec<f64>, width: usize, outcome: GlmOutcome) -> Self {
        let constant = log_likelihood_constant(&outcome);
        GlmData { rows, width, outcome, constant }
    }

    /// The full log-likelihood at coefficients `beta`, adding its gradient
    /// into `grad`. Returns `-inf` where the likelihood underflows to zero.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        let mut total = self.constant;
        for (i, row) in self.rows.chunks_exact(self.width).enumerate() {
            let eta: f64 = row.iter().zip(beta).map(|(x, b)| x * b).sum();
            let (value, slope) = self.row_term(i, eta);
            total += value;
            for (g, x) in grad.iter_mut().zip(row) {
                *g += slope * x;
            }
        }
        if total.is_nan() {
            f64::NEG_INFINITY
        } else {
            total
        }
    }

    /// One row's log-likelihood (without constant) and its derivative in η.
    fn row_term(&self, i: usize, eta: f64) -> (f64, f64) {
        match &self.outcome {
            GlmOutcome::Bernoulli { y } => (y[i] * eta - softplus(eta), y[i] - logistic(eta)),
            GlmOutcome::Binomial { y, trials } => {
                (y[i] * eta - trials[i] * softplus(eta), y[i] - trials[i] * logistic(eta))
            }
            GlmOutcome::Poisson { y } => {
                let mu = eta.exp();
                (y[i] * eta - mu, y[i] - mu)
            }
        }
    }
}

/// The part of the log-likelihood free of coefficients: Σ log C(m, y) for
/// binomial, −Σ log y! for poisson, 0 for bernoulli.
fn log_likelihood_constant(outcome: &GlmOutcome) -> f64 {
    let log_factorial = |v: f64| ln_gamma(v + 1.0);
    match outcome {
        GlmOutcome::Bernoulli { .. } => 0.0,
        GlmOutcome::Binomial { y, trials } => y
            .iter()
            .zip(trials)
            .map(|(&s, &m)| log_factorial(m) - log_factorial(s) - log_factorial(m - s))
            .sum(),
        GlmOutcome::Poisson { y } => -y.iter().map(|&v| log_factorial(v)).sum::<f64>(),
    }
}
