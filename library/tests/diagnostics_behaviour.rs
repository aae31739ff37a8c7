//! Diagnostics on draws whose mixing is known in closed form, and the
//! wording of the run warnings. (The exact agreement with the published
//! definitions is checked in tests/python/test_diagnostics_reference.py.)

use expect_test::expect;
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use waypath::infer::diagnostics::{diagnose, run_warnings};
use waypath::infer::nuts::NutsRun;

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
        step_sizes: vec![0.1; 4],
        seconds: 1.0,
    };
    let text = run_warnings(&run, &["slope[girth]".to_string()], 10).join("\n");
    expect![[r#"
        5 of 800 draws came from a divergent trajectory (chains 2, 4): the sampler could not follow the posterior's curvature there, so some regions may be missed and the estimates biased. Try a higher target acceptance such as 0.95, tighter priors, or a non-centred form for group-level effects.
        R-hat of slope[girth] is 1.423, above 1.01: the chains disagree about it, so they have not settled on one posterior. Look at its trace for a chain stuck apart, and run longer warm-up and more draws.
        Bulk ESS of slope[girth] is 9, below 400: its mean and central interval rest on few effectively independent draws and carry extra Monte Carlo error. Run more draws, or simplify the model if the chains move slowly.
        7 of 800 draws reached the maximum tree depth of 10 (chain 1): their trajectories were cut short, which costs efficiency rather than correctness. Raise the maximum tree depth, or put the predictors on a scale near 1."#]]
    .assert_eq(&text);
}
