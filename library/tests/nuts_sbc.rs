//! Simulation-based calibration of the NUTS sampler (Talts, Betancourt,
//! Simpson, Vehtari & Gelman 2018, "Validating Bayesian inference algorithms
//! with simulation-based calibration", arXiv:1804.06788, algorithm 1).
//!
//! For each replication: draw parameters from the prior, simulate data from
//! them, sample the posterior, and record the rank of the prior draw among
//! the thinned posterior draws. If the sampler is correct the ranks are
//! uniform; Pearson's chi-square test ([`common::sbc`]) must give p > 0.01.

mod common;

use std::sync::atomic::AtomicBool;

use common::sbc::{assert_uniform, logistic, rank_of, uniformity_p_value, KEPT, THIN};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::infer::nuts::{sample_nuts, Init, NutsSettings};
use waypath::model::LogDensity;

const REPLICATIONS: u64 = 500;

/// y_i ~ Normal(mu, k exp(tau)), mu ~ Normal(0, 2), tau ~ Normal(0, 0.5);
/// `k = 1` is the model the data come from, any other `k` a misspecified one.
struct NormalMeanLogScale {
    y: Vec<f64>,
    k: f64,
}

impl LogDensity for NormalMeanLogScale {
    fn dim(&self) -> usize {
        2
    }

    fn log_density_and_gradient(&self, t: &[f64], g: &mut [f64]) -> f64 {
        let (mu, tau) = (t[0], t[1]);
        let precision = (-2.0 * tau).exp() / (self.k * self.k);
        let mut lp = -mu * mu / 8.0 - tau * tau / 0.5;
        g[0] = -mu / 4.0;
        g[1] = -tau / 0.25;
        for &y in &self.y {
            let r = y - mu;
            lp += -tau - 0.5 * r * r * precision;
            g[0] += r * precision;
            g[1] += -1.0 + r * r * precision;
        }
        lp
    }
}

/// y_i ~ Bernoulli(logistic(a + b x_i)), a, b ~ Normal(0, 1).
struct Logistic {
    x: Vec<f64>,
    y: Vec<f64>,
}

/// log(1 + e^eta) without overflow.
fn log1p_exp(eta: f64) -> f64 {
    if eta > 0.0 { eta + (-eta).exp().ln_1p() } else { eta.exp().ln_1p() }
}

impl LogDensity for Logistic {
    fn dim(&self) -> usize {
        2
    }

    fn log_density_and_gradient(&self, t: &[f64], g: &mut [f64]) -> f64 {
        let (a, b) = (t[0], t[1]);
        let mut lp = -0.5 * (a * a + b * b);
        g[0] = -a;
        g[1] = -b;
        for (&x, &y) in self.x.iter().zip(&self.y) {
            let eta = a + b * x;
            lp += y * eta - log1p_exp(eta);
            let resid = y - logistic(eta);
            g[0] += resid;
            g[1] += resid * x;
        }
        lp
    }
}

/// Rank of each prior draw among the thinned posterior draws, per parameter.
fn sbc_ranks<D: LogDensity>(simulate: impl Fn(&mut StdRng) -> (Vec<f64>, D)) -> Vec<Vec<usize>> {
    let mut ranks = vec![Vec::new(); 2];
    for rep in 0..REPLICATIONS {
        let mut rng = StdRng::seed_from_u64(1000 + rep);
        let (truth, target) = simulate(&mut rng);
        let settings = NutsSettings {
            chains: 1,
            settle: 200,
            draws: KEPT * THIN,
            seed: rep,
            threads: 1,
            ..Default::default()
        };
        let run = sample_nuts(&target, &Init::default(), &settings, &AtomicBool::new(false), &|_| {})
            .expect("run completes");
        for (p, rank) in ranks.iter_mut().enumerate() {
            rank.push(rank_of(truth[p], run.draws[0].iter().map(|d| d[p])));
        }
    }
    ranks
}

fn normal_model_ranks(k: f64) -> Vec<Vec<usize>> {
    sbc_ranks(|rng| {
        let mu: f64 = Normal::new(0.0, 2.0).expect("valid").sample(rng);
        let tau: f64 = Normal::new(0.0, 0.5).expect("valid").sample(rng);
        let noise = Normal::new(mu, tau.exp()).expect("valid");
        let y = (0..8).map(|_| noise.sample(rng)).collect();
        (vec![mu, tau], NormalMeanLogScale { y, k })
    })
}

#[test]
fn normal_mean_and_log_scale_ranks_are_uniform() {
    assert_uniform(&["mu", "tau"], &normal_model_ranks(1.0));
}

/// Negative control: a likelihood that assumes half the true noise scale
/// shifts the posterior of tau by log 2, and the check must catch it.
#[test]
fn misspecified_likelihood_fails_the_uniformity_check() {
    let ranks = normal_model_ranks(0.5);
    let p = uniformity_p_value(&ranks[1]);
    assert!(p < 1e-6, "tau: a shifted posterior should fail, chi-square p = {p}");
}

#[test]
fn logistic_regression_ranks_are_uniform() {
    let ranks = sbc_ranks(|rng| {
        let std_normal = Normal::<f64>::new(0.0, 1.0).expect("valid");
        let (a, b) = (std_normal.sample(rng), std_normal.sample(rng));
        let x: Vec<f64> = (0..30).map(|_| std_normal.sample(rng)).collect();
        let y = x
            .iter()
            .map(|xi| {
                if rng.random::<f64>() < logistic(a + b * xi) { 1.0 } else { 0.0 }
            })
            .collect();
        (vec![a, b], Logistic { x, y })
    });
    assert_uniform(&["a", "b"], &ranks);
}
