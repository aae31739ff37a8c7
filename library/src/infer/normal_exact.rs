//! Exact posterior draws for a normal linear model with normal coefficient
//! priors ([`NormalLinear`]), used where a Laplace fit is asked for.
//!
//! A normal approximation at the joint mode understates a normal model's
//! spread (the mode of `log σ` sits at RSS/n, below the marginal posterior's
//! centre; simulation-based calibration sees it). Here nothing is
//! approximated but a one-dimensional integral:
//!
//! * given `σ`, the coefficients are normal with precision
//!   `P = P₀ + XᵀX/σ²` and mean `P⁻¹(b₀ + Xᵀy/σ²)` (conjugate normal
//!   algebra, e.g. Gelman et al., *Bayesian Data Analysis*, §14.8, recalled);
//! * integrating them out leaves the marginal of `u = log σ` up to a constant,
//!   `−n·u − ½ log|P| − ½ (yᵀy/σ² − hᵀP⁻¹h) + log p(σ) + u`, with
//!   `h = b₀ + Xᵀy/σ²`, which is evaluated on a fine grid;
//! * each draw takes `u` from the grid (cell by cumulative mass, uniform
//!   within the cell) and then the coefficients given `σ = e^u`.
//!
//! Draws are returned on the model's unconstrained scale (`log σ` last).

use nalgebra::{Cholesky, DVector};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

use crate::model::NormalLinear;

/// Points of the coarse search grid for `log σ`, spaced [`COARSE_STEP`].
const COARSE_POINTS: usize = 801;
const COARSE_STEP: f64 = 0.05;
/// Points of the fine grid laid over the region that holds the mass.
const FINE_POINTS: usize = 4001;
/// The fine grid spans where the log marginal is within this of its top.
const SPAN_DROP: f64 = 40.0;

/// `draws` exact posterior draws of the model laid out as `parts`, seeded;
/// `None` when a precision matrix is not positive definite.
pub fn normal_exact_draws(parts: &NormalLinear, draws: usize, seed: u64) -> Option<Vec<Vec<f64>>> {
    let centre = 0.5 * (parts.yty / parts.n.max(1.0)).max(1e-300).ln();
    let coarse: Vec<f64> = (0..COARSE_POINTS).map(|i| centre + (i as f64 - (COARSE_POINTS / 2) as f64) * COARSE_STEP).collect();
    let coarse_values: Vec<f64> = coarse.iter().map(|&u| log_marginal(parts, u)).collect();
    let top = coarse_values.iter().copied().filter(|v| v.is_finite()).fold(f64::NEG_INFINITY, f64::max);
    if !top.is_finite() {
        return None;
    }
    let inside: Vec<usize> = (0..COARSE_POINTS).filter(|&i| coarse_values[i] > top - SPAN_DROP).collect();
    let lo = coarse[inside.first()?.saturating_sub(1)];
    let hi = coarse[(inside.last()? + 1).min(COARSE_POINTS - 1)];
    let step = (hi - lo) / (FINE_POINTS - 1) as f64;
    let grid: Vec<f64> = (0..FINE_POINTS).map(|i| lo + i as f64 * step).collect();
    let values: Vec<f64> = grid.iter().map(|&u| log_marginal(parts, u)).collect();
    let top = values.iter().copied().filter(|v| v.is_finite()).fold(f64::NEG_INFINITY, f64::max);
    let mut cumulative = Vec::with_capacity(FINE_POINTS);
    let mut total = 0.0;
    for v in &values {
        total += if v.is_finite() { (v - top).exp() } else { 0.0 };
        cumulative.push(total);
    }
    let mut rng = StdRng::seed_from_u64(seed);
    (0..draws)
        .map(|_| {
            let target = rng.random::<f64>() * total;
            let cell = cumulative.partition_point(|&c| c < target).min(FINE_POINTS - 1);
            let u = grid[cell] + (rng.random::<f64>() - 0.5) * step;
            coefficients_given(parts, u, &mut rng).map(|mut beta| {
                beta.push(u);
                beta
            })
        })
        .collect()
}

/// Posterior precision and `h` of the coefficients given `σ = e^u`.
fn given_spread(parts: &NormalLinear, u: f64) -> (nalgebra::DMatrix<f64>, DVector<f64>) {
    let precision = (-2.0 * u).exp();
    (&parts.prior_precision + &parts.xtx * precision, &parts.prior_shift + &parts.xty * precision)
}

/// The log marginal posterior density of `u = log σ`, up to a constant.
fn log_marginal(parts: &NormalLinear, u: f64) -> f64 {
    let (p, h) = given_spread(parts, u);
    let Some(cholesky) = Cholesky::new(p) else {
        return f64::NEG_INFINITY;
    };
    let log_det: f64 = 2.0 * cholesky.l().diagonal().iter().map(|d| d.ln()).sum::<f64>();
    let quadratic = h.dot(&cholesky.solve(&h));
    let (log_prior, _) = parts.spread_prior.log_density_and_derivative(u.exp());
    -parts.n * u - 0.5 * log_det - 0.5 * (parts.yty * (-2.0 * u).exp() - quadratic) + log_prior + u
}

/// One draw of `β` given `σ = e^u`.
fn coefficients_given(parts: &NormalLinear, u: f64, rng: &mut StdRng) -> Option<Vec<f64>> {
    let (p, h) = given_spread(parts, u);
    let cholesky = Cholesky::new(p)?;
    let mean = cholesky.solve(&h);
    let z = DVector::from_fn(mean.len(), |_, _| StandardNormal.sample(rng));
    // P = L Lᵀ, so γ = mean + L⁻ᵀ z has covariance P⁻¹.
    let offset = cholesky.l().transpose().solve_upper_triangular(&z)?;
    Some((mean + offset + &parts.shift).iter().copied().collect())
}
