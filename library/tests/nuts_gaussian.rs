//! NUTS on Gaussian targets with known moments, plus the run's promises:
//! the same seed gives the same draws on any number of threads, a cancel
//! flag stops a run quickly, and progress is reported for every iteration.

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use nalgebra::{DMatrix, DVector};
use waypath::infer::diagnostics::{diagnose_run, run_warnings};
use waypath::infer::nuts::{sample_nuts, Init, MassMatrix, NutsError, NutsRun, NutsSettings, Progress};
use waypath::model::LogDensity;

/// Multivariate normal with mean `mu` and covariance `sigma` (given through
/// its inverse): log p = -½ (θ-μ)ᵀ Σ⁻¹ (θ-μ).
struct Gaussian {
    mu: DVector<f64>,
    precision: DMatrix<f64>,
}

impl Gaussian {
    fn new(mu: Vec<f64>, sigma: &DMatrix<f64>) -> Gaussian {
        let precision = sigma.clone().try_inverse().expect("covariance is invertible");
        Gaussian { mu: DVector::from_vec(mu), precision }
    }
}

impl LogDensity for Gaussian {
    fn dim(&self) -> usize {
        self.mu.len()
    }

    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let d = DVector::from_column_slice(theta) - &self.mu;
        let pd = &self.precision * &d;
        for (g, v) in grad.iter_mut().zip(pd.iter()) {
            *g = -v;
        }
        -0.5 * d.dot(&pd)
    }
}

/// Covariance with standard deviations `sd` and correlation `rho^|i-j|`.
fn ar_covariance(sd: &[f64], rho: f64) -> DMatrix<f64> {
    let n = sd.len();
    DMatrix::from_fn(n, n, |i, j| sd[i] * sd[j] * rho.powi((i as i32 - j as i32).abs()))
}

fn column(run: &NutsRun, p: usize) -> Vec<f64> {
    run.draws.iter().flatten().map(|d| d[p]).collect()
}

fn mean(x: &[f64]) -> f64 {
    x.iter().sum::<f64>() / x.len() as f64
}

fn sd(x: &[f64]) -> f64 {
    let m = mean(x);
    (x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (x.len() - 1) as f64).sqrt()
}

fn quiet(_: Progress) {}

/// Check every mean and sd against the target's, within 5 Monte Carlo
/// standard errors computed from the run's own bulk ESS:
/// se(mean) = σ/√ESS, and for a normal se(sd) ≈ σ/√(2 ESS) (recalled,
/// large-sample variance of the sample standard deviation).
fn assert_moments(run: &NutsRun, mu: &[f64], sigma: &DMatrix<f64>) {
    for (p, d) in diagnose_run(run).iter().enumerate() {
        let x = column(run, p);
        let true_sd = sigma[(p, p)].sqrt();
        let se_mean = true_sd / d.ess_bulk.sqrt();
        let se_sd = true_sd / (2.0 * d.ess_bulk).sqrt();
        assert!((mean(&x) - mu[p]).abs() < 5.0 * se_mean, "parameter {p}: mean {} vs {}", mean(&x), mu[p]);
        assert!((sd(&x) - true_sd).abs() < 5.0 * se_sd, "parameter {p}: sd {} vs {true_sd}", sd(&x));
        assert!(d.rhat < 1.01, "parameter {p}: R-hat {}", d.rhat);
    }
}

#[test]
fn correlated_2d_gaussian_moments_and_correlation_are_recovered() {
    let mu = vec![1.0, -2.0];
    let sigma = ar_covariance(&[1.0, 3.0], 0.9);
    let target = Gaussian::new(mu.clone(), &sigma);
    let run = sample_nuts(&target, &Init::default(), &NutsSettings::default(), &AtomicBool::new(false), &quiet)
        .expect("run completes");

    // The defaults are applied: their number of chains, each with their kept draws.
    assert_eq!(run.draws.len(), waypath::infer::nuts::CHAINS);
    assert!(run.draws.iter().all(|c| c.len() == waypath::infer::nuts::DRAWS));
    assert_moments(&run, &mu, &sigma);

    // Sample correlation: se ≈ (1 - ρ²)/√n for a bivariate normal (recalled,
    // Fisher's large-sample variance of r), with n the smaller bulk ESS.
    let (a, b) = (column(&run, 0), column(&run, 1));
    let (ma, mb) = (mean(&a), mean(&b));
    let cov = a.iter().zip(&b).map(|(x, y)| (x - ma) * (y - mb)).sum::<f64>() / (a.len() - 1) as f64;
    let r = cov / (sd(&a) * sd(&b));
    let ess = diagnose_run(&run).iter().map(|d| d.ess_bulk).fold(f64::INFINITY, f64::min);
    assert!((r - 0.9).abs() < 5.0 * (1.0 - 0.81) / ess.sqrt(), "correlation {r}");

    // A well-conditioned Gaussian should raise no warning (the thresholds of
    // Vehtari et al. 2021: R-hat ≤ 1.01, bulk ESS ≥ 400).
    let names = vec!["a".to_string(), "b".to_string()];
    assert_eq!(run_warnings(&run, &names, &diagnose_run(&run), 10), Vec::<String>::new());
}

#[test]
fn correlated_10d_gaussian_with_mixed_scales_moments_are_recovered() {
    let sd: Vec<f64> = (0..10).map(|i| 10f64.powf(-1.0 + 2.0 * i as f64 / 9.0)).collect();
    let mu: Vec<f64> = (0..10).map(|i| i as f64 - 4.5).collect();
    let sigma = ar_covariance(&sd, 0.6);
    let target = Gaussian::new(mu.clone(), &sigma);
    let settings = NutsSettings { seed: 17, ..Default::default() };
    let run = sample_nuts(&target, &Init::default(), &settings, &AtomicBool::new(false), &quiet)
        .expect("run completes");
    assert_moments(&run, &mu, &sigma);
    assert_eq!(run.divergences.iter().sum::<usize>(), 0);
}

/// The low-rank mass matrix must leave the target as it is (the analytic
/// mean and covariance of the Gaussian are recovered) and, on strongly
/// correlated parameters (AR(1) correlation 0.9: condition number of the
/// correlation matrix about (1 + ρ)/(1 − ρ) = 19), need clearly fewer
/// leapfrog steps per draw than the diagonal one, which can only rescale.
#[test]
fn low_rank_mass_matrix_keeps_the_target_and_shortens_correlated_trajectories() {
    let sd: Vec<f64> = (0..10).map(|i| 10f64.powf(-1.0 + 2.0 * i as f64 / 9.0)).collect();
    let mu: Vec<f64> = (0..10).map(|i| i as f64 - 4.5).collect();
    let sigma = ar_covariance(&sd, 0.9);
    let target = Gaussian::new(mu.clone(), &sigma);
    let steps_per_draw = |mass: MassMatrix| {
        let settings = NutsSettings { seed: 23, mass, ..Default::default() };
        let run = sample_nuts(&target, &Init::default(), &settings, &AtomicBool::new(false), &quiet)
            .expect("run completes");
        assert_moments(&run, &mu, &sigma);
        assert_eq!(run.divergences.iter().sum::<usize>(), 0);
        let kept: usize = run.draws.iter().map(Vec::len).sum();
        run.leapfrog_steps.iter().sum::<u64>() as f64 / kept as f64
    };
    let (low_rank, diagonal) = (steps_per_draw(MassMatrix::LowRank), steps_per_draw(MassMatrix::Diagonal));
    assert!(low_rank < 0.7 * diagonal, "low-rank {low_rank:.2} steps per draw against diagonal {diagonal:.2}");
}

#[test]
fn same_seed_gives_identical_draws_on_one_thread_and_on_four_with_either_mass_matrix() {
    let target = Gaussian::new(vec![0.5, 0.0, -1.0], &ar_covariance(&[1.0, 2.0, 0.5], 0.7));
    let cancel = AtomicBool::new(false);
    for mass in [MassMatrix::Diagonal, MassMatrix::LowRank] {
        let short = NutsSettings { settle: 300, draws: 200, seed: 99, mass, ..Default::default() };
        let one = sample_nuts(&target, &Init::default(), &NutsSettings { threads: 1, ..short.clone() }, &cancel, &quiet)
            .expect("run completes");
        let four = sample_nuts(&target, &Init::default(), &NutsSettings { threads: 4, ..short }, &cancel, &quiet)
            .expect("run completes");
        assert_eq!(one.draws, four.draws, "{mass:?}");
        assert_eq!((one.step_sizes, one.leapfrog_steps), (four.step_sizes, four.leapfrog_steps), "{mass:?}");
    }
}

#[test]
fn same_seed_gives_identical_draws_on_one_thread_and_on_four() {
    let target = Gaussian::new(vec![0.5, 0.0, -1.0], &ar_covariance(&[1.0, 2.0, 0.5], 0.7));
    let cancel = AtomicBool::new(false);
    let short = NutsSettings { settle: 300, draws: 200, seed: 99, ..Default::default() };
    let one = sample_nuts(&target, &Init::default(), &NutsSettings { threads: 1, ..short.clone() }, &cancel, &quiet)
        .expect("run completes");
    let four = sample_nuts(&target, &Init::default(), &NutsSettings { threads: 4, ..short.clone() }, &cancel, &quiet)
        .expect("run completes");
    assert_eq!(one.draws, four.draws);
    assert_eq!(one.step_sizes, four.step_sizes);

    let other = sample_nuts(&target, &Init::default(), &NutsSettings { seed: 100, ..short }, &cancel, &quiet)
        .expect("run completes");
    assert_ne!(one.draws, other.draws, "a different seed must give different draws");
    assert_ne!(one.draws[0], one.draws[1], "chains must not share a random stream");
}

#[test]
fn cancel_flag_stops_a_long_run_within_a_second() {
    let target = Gaussian::new(vec![0.0; 50], &ar_covariance(&[1.0; 50], 0.95));
    let long = NutsSettings { settle: 1000, draws: 10_000_000, ..Default::default() };
    let cancel = AtomicBool::new(false);
    let started = Instant::now();
    let outcome = std::thread::scope(|s| {
        s.spawn(|| {
            std::thread::sleep(Duration::from_millis(100));
            cancel.store(true, Ordering::SeqCst);
        });
        sample_nuts(&target, &Init::default(), &long, &cancel, &quiet)
    });
    let elapsed = started.elapsed();
    assert_eq!(outcome, Err(NutsError::Cancelled));
    assert!(elapsed < Duration::from_millis(1100), "stopped after {elapsed:?}");
}

#[test]
fn progress_is_reported_for_every_iteration_of_every_chain() {
    let target = Gaussian::new(vec![0.0], &ar_covariance(&[1.0], 0.0));
    let settings = NutsSettings { chains: 3, settle: 50, draws: 70, ..Default::default() };
    let calls = AtomicUsize::new(0);
    let finished = AtomicUsize::new(0);
    let report = |p: Progress| {
        calls.fetch_add(1, Ordering::SeqCst);
        assert_eq!(p.total, 120);
        assert!(p.chain < 3 && p.iteration >= 1 && p.iteration <= 120);
        if p.iteration == p.total {
            finished.fetch_add(1, Ordering::SeqCst);
        }
    };
    let run = sample_nuts(&target, &Init::default(), &settings, &AtomicBool::new(false), &report)
        .expect("run completes");
    assert_eq!(calls.load(Ordering::SeqCst), 3 * 120);
    assert_eq!(finished.load(Ordering::SeqCst), 3);
    assert_eq!(run.draws.iter().map(Vec::len).collect::<Vec<_>>(), vec![70, 70, 70]);
}

#[test]
fn given_starting_point_of_wrong_length_names_the_chain() {
    let target = Gaussian::new(vec![0.0, 0.0], &ar_covariance(&[1.0, 1.0], 0.0));
    let settings = NutsSettings { chains: 2, ..Default::default() };
    let init = Init::Given(vec![vec![0.0, 0.0], vec![0.0]]);
    let err = sample_nuts(&target, &init, &settings, &AtomicBool::new(false), &quiet).unwrap_err();
    assert_eq!(err, NutsError::InitLength { chain: 2, expected: 2, got: 1 });
}

#[test]
fn higher_target_acceptance_gives_smaller_steps() {
    // Dual averaging tunes the step size so the mean acceptance statistic
    // meets the target (Hoffman & Gelman 2014, section 3.2): a stricter
    // target needs shorter steps.
    let target = Gaussian::new(vec![0.0; 5], &ar_covariance(&[1.0; 5], 0.5));
    let cancel = AtomicBool::new(false);
    let step = |target_accept: f64| {
        let settings = NutsSettings { acceptance: target_accept, settle: 500, draws: 100, ..Default::default() };
        let run = sample_nuts(&target, &Init::default(), &settings, &cancel, &quiet).expect("run completes");
        mean(&run.step_sizes)
    };
    assert!(step(0.95) < 0.8 * step(0.6));
}

#[test]
fn shallow_tree_limit_is_counted_as_depth_hits() {
    // With maximum depth 2 a trajectory has at most 3 leapfrog steps, far
    // too few to cross a strongly correlated 20-D Gaussian before a U-turn.
    let target = Gaussian::new(vec![0.0; 20], &ar_covariance(&[1.0; 20], 0.95));
    let settings = NutsSettings { doublings: 2, settle: 300, draws: 200, ..Default::default() };
    let run = sample_nuts(&target, &Init::default(), &settings, &AtomicBool::new(false), &quiet)
        .expect("run completes");
    assert!(run.depth_hits.iter().sum::<usize>() > 400, "depth hits {:?}", run.depth_hits);
    let names: Vec<String> = (1..=20).map(|i| format!("x{i}")).collect();
    assert!(run_warnings(&run, &names, &diagnose_run(&run), 2).iter().any(|w| w.contains("longest trajectory allowed (2 doublings)")));
}

/// A normal with sd 10 cut to |x| < 1: the wall where the density stops
/// makes trajectories that cross it divergent.
struct Walled;

impl LogDensity for Walled {
    fn dim(&self) -> usize {
        1
    }

    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        grad[0] = -theta[0] / 100.0;
        if theta[0].abs() < 1.0 { -theta[0] * theta[0] / 200.0 } else { f64::NEG_INFINITY }
    }
}

#[test]
fn trajectories_hitting_a_wall_are_counted_as_divergent() {
    let settings = NutsSettings { settle: 300, draws: 300, ..Default::default() };
    let init = Init::Random { radius: 0.5 };
    let run = sample_nuts(&Walled, &init, &settings, &AtomicBool::new(false), &quiet).expect("run completes");
    assert!(run.divergences.iter().sum::<usize>() > 0);
    assert!(run.draws.iter().flatten().all(|d| d[0].abs() < 1.0));
}
