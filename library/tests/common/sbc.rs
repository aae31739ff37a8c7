//! The harness of the simulation-based calibration tests (Talts,
//! Betancourt, Simpson, Vehtari & Gelman 2018, "Validating Bayesian
//! inference algorithms with simulation-based calibration",
//! arXiv:1804.06788, algorithm 1): the rank of a true value among thinned
//! posterior draws, and Pearson's chi-square test of uniform ranks.
//!
//! Every replication keeps `KEPT` draws (every `THIN`-th of `KEPT · THIN`),
//! so ranks run over `0..=KEPT`; they are grouped into `BINS` equal bins and
//! the statistic's p-value comes from the chi-square CDF of statrs.

#![allow(dead_code)] // each test file uses part of the harness

use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Posterior draws kept per replication after thinning; ranks are 0..=99.
pub const KEPT: usize = 99;
/// Every `THIN`-th draw is kept (thinning lowers autocorrelation, which would bend the histogram).
pub const THIN: usize = 3;
/// Bins of the rank histogram (ten rank values each).
pub const BINS: usize = 10;

/// The rank of `truth` among every `THIN`-th of `draws`: how many lie below it.
pub fn rank_of(truth: f64, draws: impl Iterator<Item = f64>) -> usize {
    draws.step_by(THIN).filter(|&d| d < truth).count()
}

/// Pearson chi-square p-value of ranks 0..=KEPT against the uniform
/// distribution, in BINS equal bins.
pub fn uniformity_p_value(ranks: &[usize]) -> f64 {
    let mut counts = [0usize; BINS];
    for &r in ranks {
        counts[r * BINS / (KEPT + 1)] += 1;
    }
    let expected = ranks.len() as f64 / BINS as f64;
    let stat: f64 = counts.iter().map(|&o| (o as f64 - expected).powi(2) / expected).sum();
    let chi2 = ChiSquared::new((BINS - 1) as f64).expect("positive degrees of freedom");
    1.0 - chi2.cdf(stat)
}

/// Every parameter's ranks pass the uniformity test at the 1% level.
pub fn assert_uniform(names: &[&str], ranks: &[Vec<usize>]) {
    let p_values: Vec<f64> = ranks.iter().map(|r| uniformity_p_value(r)).collect();
    for (name, p) in names.iter().zip(&p_values) {
        assert!(*p > 0.01, "{name}: SBC ranks not uniform, chi-square p = {p} (all: {p_values:?})");
    }
}

/// The inverse logit, 1 / (1 + e^−η).
pub fn logistic(eta: f64) -> f64 {
    1.0 / (1.0 + (-eta).exp())
}
