//! A normal model with normal coefficient priors, laid out for exact
//! inference: given the spread, the coefficients' posterior is normal in
//! closed form, so only the spread's one-dimensional marginal needs
//! numerical work (`infer::normal_exact`).
//!
//! Everything is in the coordinates the sufficient statistics use: the
//! coefficients `γ = β − ȳ·e` with `e` the indicator of the intercept
//! columns (see `family::gaussian`), and the outcome centred at `ȳ`.

use nalgebra::{DMatrix, DVector};

use super::posterior::{Likelihood, Model};
use super::prior::Prior;

/// The pieces of an exact normal linear posterior.
#[derive(Debug, Clone, PartialEq)]
pub struct NormalLinear {
    /// `XᵀX`, `Xᵀyc`, `ycᵀyc` and the number of rows.
    pub xtx: DMatrix<f64>,
    pub xty: DVector<f64>,
    pub yty: f64,
    pub n: f64,
    /// Prior precision of `γ` and its precision-weighted mean: every
    /// coefficient prior is `aₖ·β ~ normal(μₖ, sₖ)`, so these are
    /// `Σ aₖaₖᵀ/sₖ²` and `Σ aₖ μ'ₖ/sₖ²` with `μ'ₖ = μₖ − ȳ·(aₖ·e)`.
    pub prior_precision: DMatrix<f64>,
    pub prior_shift: DVector<f64>,
    /// The spread's prior.
    pub spread_prior: Prior,
    /// `β = γ + shift`: `ȳ` at the intercept columns, 0 elsewhere.
    pub shift: DVector<f64>,
}

impl Model {
    /// The exact layout of this model when it is a normal model whose
    /// coefficient priors are all normal; `None` otherwise.
    pub fn normal_linear(&self) -> Option<NormalLinear> {
        let Likelihood::Gaussian { stats, spread_prior } = &self.likelihood else {
            return None;
        };
        if !self.steps.is_empty() {
            // A step's effect is the whole effect times its share: not linear in what is sampled.
            return None;
        }
        if !self.pooling.is_empty() {
            // The departures' prior depends on their spread: not this layout.
            return None;
        }
        let (xtx, xty, yty, n, y_mean, intercepts) = stats.parts();
        let p = self.labels.len();
        let mut shift = DVector::zeros(p);
        intercepts.iter().for_each(|&j| shift[j] = y_mean);
        let mut precision = DMatrix::zeros(p, p);
        let mut weighted = DVector::zeros(p);
        for (k, prior) in self.coefficient_priors.iter().enumerate() {
            let Prior::Normal { mean, sd } = *prior else {
                return None;
            };
            let mut a = DVector::zeros(p);
            a[k] = 1.0;
            if self.at_average_row[k] {
                for (j, m) in self.average_row.iter().enumerate() {
                    a[j] += m;
                }
            }
            let centred_mean = mean - a.dot(&shift);
            precision += &a * a.transpose() / (sd * sd);
            weighted += &a * (centred_mean / (sd * sd));
        }
        Some(NormalLinear {
            xtx: xtx.clone(),
            xty: xty.clone(),
            yty,
            n,
            prior_precision: precision,
            prior_shift: weighted,
            spread_prior: spread_prior.clone(),
            shift,
        })
    }
}
