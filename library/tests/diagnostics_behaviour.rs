//! Diagnostics on draws whose mixing is known in closed form, the wording
//! of the run warnings, and the power of dispersed chain starts. (The
//! agreement with the published definitions, written out a second time,
//! and with analytic values is checked in
//! tests/python/test_diagnostics_reference.py.)

use expect_test::expect;
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use std::sync::atomic::AtomicBool;

use waypath::infer::diagnostics::{diagnose, diagnose_run, run_warnings};
use waypath::infer::fit::stratified_scores;
use waypath::infer::nuts::{sample_nuts, Init, NutsRun, NutsSettings};
use waypath::model::LogDensity;

/// Stationary AR(1) chains x_t = phi x_{t-1} + e_t.
fn ar1_chains(chains: usize, n: usize, phi: f64, seed: u64) -> Vec<Vec<f64>> {
    let mut rng = StdRng::seed_from_u64(seed);
    (0..chains)
        .map(|_| {
            let mut x: f64 = StandardNormal.sample(&mut rng);
            x /= (1.0 - phi * phi).sqrt();
            (0..n)
                .map(|_| {
                    let e: f64 = StandardNormal.sample(&mut rng);
                    x = phi * x + e;
                    x
                })
                .collect()
        })
        .collect()
}

fn slices(chains: &[Vec<f64>]) -> Vec<&[f64]> {
    chains.iter().map(Vec::as_slice).collect()
}

#[test]
fn bulk_ess_of_ar1_chains_matches_the_integrated_autocorrelation_time() {
    // For AR(1), tau = (1 + phi) / (1 - phi), so ESS = S (1 - phi) / (1 + phi)
    // (recalled; e.g. Geyer 1992, "Practical Markov chain Monte Carlo").
    // Rank normalisation is monotone and keeps a Gaussian AR(1) nearly Gaussian.
    for phi in [0.5, 0.8] {
        let chains = ar1_chains(4, 5000, phi, 3);
        let expected = 20_000.0 * (1.0 - phi) / (1.0 + phi);
        let d = diagnose(&slices(&chains));
        assert!((d.ess_bulk / expected - 1.0).abs() < 0.12, "phi {phi}: ESS {} vs {expected}", d.ess_bulk);
        assert!(d.rhat < 1.01, "phi {phi}: R-hat {}", d.rhat);
    }
}

#[test]
fn chains_at_different_locations_or_scales_raise_rhat() {
    // Vehtari et al. (2021), sections 3-4: a shifted chain is caught by the
    // bulk R-hat, a chain with a different scale only by the folded (tail) one.
    let mut shifted = ar1_chains(4, 1000, 0.3, 5);
    shifted[3].iter_mut().for_each(|x| *x += 1.0);
    assert!(diagnose(&slices(&shifted)).rhat > 1.05);

    let mut wider = ar1_chains(4, 1000, 0.3, 6);
    wider[0].iter_mut().for_each(|x| *x *= 3.0);
    assert!(diagnose(&slices(&wider)).rhat > 1.05);
}

#[test]
fn constant_draws_have_no_diagnostics() {
    let flat = vec![vec![2.0; 100]; 4];
    let d = diagnose(&slices(&flat));
    assert!(d.rhat.is_nan() && d.ess_bulk.is_nan() && d.ess_tail.is_nan());
}

#[test]
fn warnings_name_the_parameter_the_number_and_what_to_try() {
    let mut chains = ar1_chains(4, 200, 0.95, 8);
    chains[1].iter_mut().for_each(|x| *x += 4.0);
    let run = NutsRun {
        draws: (0..4).map(|c| chains[c].iter().map(|&x| vec![x]).collect()).collect(),
        divergences: vec![0, 3, 0, 2],
        depth_hits: vec![7, 0, 0, 0],
        deepest: vec![10, 4, 4, 4],
        step_sizes: vec![0.1; 4],
        leapfrog_steps: vec![0; 4],
        seconds: 1.0,
    };
    let text = run_warnings(&run, &["girth slope".to_string()], &diagnose_run(&run), 10).join("\n");
    expect![[r#"
        5 of 800 draws, in chains 2, 4, ended a trajectory whose energy blew up: the posterior bends there more sharply than the sampler's steps can follow, so that region may be under-visited and the summaries pulled away from it. Treat the table as provisional: raise `acceptance` in `fit … with nuts` (nearer 1 means smaller steps), give the slopes firmer priors, or drop a term that nearly repeats another, and fit again until none is left.
        R-hat of girth slope is 1.423, above 1.01: its chains have not settled on one posterior; at least one still sits apart from the others. `plot NAME mixing` shows which; then fit again with a longer `settle` and more `draws` in `fit … with nuts`.
        Bulk ESS of girth slope is 9, below 400: its draws follow one another so closely that they count for few independent ones, and its mean and interval carry more Monte Carlo error than their digits suggest. Fit again with more draws; if the chains still crawl, look for a term that repeats another.
        Tail ESS of girth slope is 38, below 400: few independent draws fall near the ends of its interval, so those ends may shift on a refit. Fit again with more draws before quoting them.
        7 of 800 draws, in chain 1, stopped at the longest trajectory allowed (10 doublings). Such draws are still sound, but each moves the chain less far than it might, so mixing is slow and ESS drops. If ESS is low too, allow more `doublings` in `fit … with nuts`, or give predictors units that keep their values near 1 (metres rather than millimetres)."#]]
    .assert_eq(&text);
}

#[test]
fn a_stuck_run_is_warned_about() {
    // Every draw equal: R-hat and ESS are undefined (0/0 in the paper's
    // variance ratio), which must not pass silently as "no warning".
    let run = NutsRun {
        draws: vec![vec![vec![1.5]; 100]; 4],
        divergences: vec![0; 4],
        depth_hits: vec![0; 4],
        deepest: vec![4; 4],
        step_sizes: vec![0.1; 4],
        leapfrog_steps: vec![0; 4],
        seconds: 1.0,
    };
    let warnings = run_warnings(&run, &["spread".to_string()], &diagnose_run(&run), 10);
    assert_eq!(warnings.len(), 1, "{warnings:?}");
    assert!(warnings[0].starts_with("Every draw of spread is the same value"), "{warnings:?}");
}

#[test]
fn low_tail_ess_is_warned_about_even_when_bulk_ess_is_fine() {
    // Vehtari et al. (2021), section 4.3: the ends of an interval are tail
    // quantiles, whose ESS can be low while the bulk is fine. Chains of
    // 600 independent normal draws whose tails are replaced by one slowly
    // moving value: the indicator of the 5% quantile then barely changes
    // from draw to draw, while the ranks of the bulk stay nearly independent.
    let mut chains = ar1_chains(4, 600, 0.0, 21);
    for chain in chains.iter_mut() {
        let mut tail = -3.0;
        for x in chain.iter_mut() {
            if *x < -1.2 {
                tail += 0.0001;
                *x = tail;
            }
        }
    }
    let d = diagnose(&slices(&chains));
    let run = NutsRun {
        draws: (0..4).map(|c| chains[c].iter().map(|&x| vec![x]).collect()).collect(),
        divergences: vec![0; 4],
        depth_hits: vec![0; 4],
        deepest: vec![4; 4],
        step_sizes: vec![0.1; 4],
        leapfrog_steps: vec![0; 4],
        seconds: 1.0,
    };
    let warnings = run_warnings(&run, &["shade slope".to_string()], &[d], 10);
    assert!(d.ess_bulk >= 400.0, "bulk {d:?}");
    assert!(warnings.iter().any(|w| w.starts_with("Tail ESS of shade slope")), "{d:?}: {warnings:?}");
}

/// Two equal normal modes at ±3 (sd 0.5): a target on which one chain
/// cannot reach the other mode, since the density between them is e^-18 of
/// the peaks'.
struct TwoModes;

impl LogDensity for TwoModes {
    fn dim(&self) -> usize {
        1
    }

    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let x = theta[0];
        let (a, b) = ((x + 3.0) / 0.5, (x - 3.0) / 0.5);
        let (la, lb) = (-0.5 * a * a, -0.5 * b * b);
        let top = la.max(lb);
        let (wa, wb) = ((la - top).exp(), (lb - top).exp());
        grad[0] = (wa * (-a / 0.5) + wb * (-b / 0.5)) / (wa + wb);
        top + (wa + wb).ln()
    }
}

#[test]
fn dispersed_starts_let_rhat_see_a_second_mode() {
    // Vehtari et al. (2021), section 2: R-hat can only see what the chains
    // found, so starts must be dispersed relative to the target. Starts one
    // prior sd (4) apart around a data-based point inside one mode (3)
    // reach both modes and R-hat flags the run; the former scheme, jitter of
    // sd 0.1 around that one point, keeps every chain in one mode and R-hat
    // stays near 1 — no warning, a wrong answer trusted.
    let settings = NutsSettings { chains: 4, settle: 200, draws: 200, seed: 3, threads: 1, ..NutsSettings::default() };
    let cancel = AtomicBool::new(false);
    let run_from = |starts: Vec<Vec<f64>>| sample_nuts(&TwoModes, &Init::Given(starts), &settings, &cancel, &|_| {}).expect("run");
    let dispersed: Vec<Vec<f64>> = stratified_scores(1, 4, 3).iter().map(|z| vec![3.0 + 4.0 * z[0]]).collect();
    let run = run_from(dispersed);
    let rhat = diagnose_run(&run)[0].rhat;
    assert!(rhat > 1.5, "dispersed starts: R-hat {rhat}");
    assert!(run_warnings(&run, &["x".into()], &diagnose_run(&run), 10).iter().any(|w| w.starts_with("R-hat of x")));
    let clustered: Vec<Vec<f64>> = (0..4).map(|c| vec![3.0 + 0.1 * (c as f64 - 1.5)]).collect();
    let rhat = diagnose_run(&run_from(clustered))[0].rhat;
    assert!(rhat < 1.05, "clustered starts cannot see the second mode: R-hat {rhat}");
}
