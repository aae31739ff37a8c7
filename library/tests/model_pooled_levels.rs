//! Pooled groups on a category outcome (`family levels`): every outcome
//! level after the reference has its own departures per group level and
//! its own spread. Checked here: the gradient against finite differences
//! (centred, non-centred, with a varying slope), the likelihood against
//! the softmax definition computed from the table's own columns, the
//! labels, and the contrasts for an existing and a new group against the
//! model's definition and the law of total expectation.

mod model_fixtures;

use model_fixtures::{assert_gradient_matches, build, category, column, orchard};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use waypath::draws::Draws;
use waypath::query::{level_contrasts, ContrastRequest};
use waypath::table::{ColumnData, Table};

/// The orchard of the model tests with a `plot` column of 8 levels of
/// unequal size.
fn orchard_with_plots(n: usize, seed: u64) -> Table {
    let mut table = orchard(n, seed);
    let mut rng = StdRng::seed_from_u64(seed + 100);
    let plots: Vec<u32> = (0..n).map(|_| (rng.random::<f64>().powi(2) * 8.0) as u32).collect();
    let names: Vec<String> = (1..=8).map(|k| format!("P{k}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    table.columns.push(column("plot", category(plots, &names)));
    table
}

fn check_gradient(body: &str, seed: u64) {
    let table = orchard_with_plots(150, 7);
    let model = build(body, &table);
    assert_gradient_matches(&model, body, seed, 3, 0.4);
}

#[test]
fn gradient_matches_finite_differences_in_both_forms_and_with_a_slope() {
    for layout in ["centred", "noncentred"] {
        check_gradient(&format!("soil from girth, pooled plot using trees\nparameterise plot {layout}"), 1);
        check_gradient(&format!("soil from rootstock, girth, pooled plot with girth using trees\nparameterise plot {layout}"), 2);
    }
    // No parameterise line: the automatic choice, whatever it takes.
    check_gradient("soil from girth, pooled plot using trees", 3);
}

#[test]
fn each_outcome_level_has_its_own_spread_and_departures() {
    let table = orchard_with_plots(120, 4);
    let model = build("soil from girth, pooled plot using trees", &table);
    let names = model.parameter_names();
    let first = model.first_group_index();
    assert_eq!(first, 4, "two coefficients per level after the reference: {names:?}");
    assert_eq!(names[first], "soil[sandy vs loam]: plot spread");
    assert_eq!(names[first + 1], "soil[sandy vs loam]: plot departure[P1]");
    assert_eq!(names[first + 9], "soil[clay vs loam]: plot spread");
    assert_eq!(names[first + 17], "soil[clay vs loam]: plot departure[P8]");
    assert_eq!(names.len(), first + 2 * 9);
    let priors: Vec<&str> = model.priors_used().iter().flat_map(|u| u.parameters.iter().map(String::as_str)).collect();
    assert!(priors.contains(&"soil[clay vs loam]: plot spread"), "{priors:?}");
    assert!(model.notes().iter().any(|n| n.starts_with("pooled plot on the log odds of soil[clay vs loam]")), "{:?}", model.notes());
}

/// The log-likelihood at a parameter point against the softmax definition
/// `Σᵢ log(e^{η_{yᵢ}} / Σₖ e^{ηₖ})` with `ηₖ = β₀ₖ + β₁ₖ·(girth − mean
/// girth) + aₖ[plot of row i]` and η of the reference 0 (Bishop, Pattern
/// Recognition and Machine Learning, 2006, eq. 4.104; recalled), written
/// out here from the table's columns: the departures must reach the right
/// outcome level's predictor and the right rows.
#[test]
fn likelihood_adds_each_levels_departures_to_its_own_predictor() {
    let table = orchard_with_plots(90, 5);
    let model = build("soil from girth, pooled plot using trees\nparameterise plot noncentred", &table);
    let mut rng = StdRng::seed_from_u64(6);
    let params: Vec<f64> = model
        .parameter_names()
        .iter()
        .map(|n| if n.ends_with("spread") { 0.5 + rng.random::<f64>() } else { rng.random::<f64>() * 2.0 - 1.0 })
        .collect();
    let girth = match &table.column("girth").expect("girth").data {
        ColumnData::Real(v) => v.clone(),
        _ => unreachable!(),
    };
    let mean = girth.iter().sum::<f64>() / girth.len() as f64;
    let (soil, plot) = match (&table.column("soil").expect("soil").data, &table.column("plot").expect("plot").data) {
        (ColumnData::Category { codes: s, .. }, ColumnData::Category { codes: p, .. }) => (s.clone(), p.clone()),
        _ => unreachable!(),
    };
    let mut want = 0.0;
    for i in 0..girth.len() {
        let eta: Vec<f64> = (0..3)
            .map(|k| match k {
                0 => 0.0,
                k => {
                    let at = 2 * (k - 1);
                    let departure = params[4 + 9 * (k - 1) + 1 + plot[i] as usize];
                    params[at] + params[at + 1] * (girth[i] - mean) + departure
                }
            })
            .collect();
        let denominator: f64 = eta.iter().map(|e| e.exp()).sum();
        want += (eta[soil[i] as usize].exp() / denominator).ln();
    }
    let got = model.log_likelihood(&params).expect("log-likelihood");
    assert!((got - want).abs() < 1e-10 * want.abs(), "{got} vs {want}");
}

/// Contrasts of rootstock on the level probabilities at one fixed point
/// repeated as every draw:
/// * an existing plot `j`: `p_k(β_standard + a_j) − p_k(β_dwarf + a_j)`,
///   the softmax at that plot's departures — the model's definition;
/// * a new plot: by the law of total expectation the same difference
///   integrated over independent `a₁ ~ normal(0, τ₁)`, `a₂ ~ normal(0, τ₂)`
///   (the two outcome levels' departures), by the trapezoid rule on
///   [−8, 8]² (Trefethen & Weideman 2014, SIAM Review 56, 385–458;
///   recalled). Waypath draws one pair of departures per draw, so 40,000
///   draws leave a Monte Carlo error of a few 1e-4.
#[test]
fn contrasts_for_an_existing_and_a_new_plot() {
    let table = orchard_with_plots(120, 8);
    let model = build("soil from rootstock, pooled plot using trees\nparameterise plot noncentred", &table);
    let names = model.parameter_names();
    assert_eq!(names.len(), 4 + 2 * 9, "{names:?}");
    // rootstock[dwarf], rootstock[standard] per level after the reference
    let beta = [[0.3, -0.6], [-0.2, 0.9]];
    let tau = [1.5, 1.0];
    let mut rng = StdRng::seed_from_u64(9);
    let departures: Vec<Vec<f64>> = (0..2).map(|_| (0..8).map(|_| rng.random::<f64>() * 2.0 - 1.0).collect()).collect();
    let mut point = vec![beta[0][0], beta[0][1], beta[1][0], beta[1][1]];
    for k in 0..2 {
        point.push(tau[k]);
        point.extend(&departures[k]);
    }
    let draws = Draws::from_chains(names, vec![vec![point; 40_000]]).expect("draws");
    let softmax = |eta: [f64; 2]| {
        let d = 1.0 + eta[0].exp() + eta[1].exp();
        [1.0 / d, eta[0].exp() / d, eta[1].exp() / d]
    };
    let difference = |a: [f64; 2], level: usize| {
        softmax([beta[0][1] + a[0], beta[1][1] + a[1]])[level] - softmax([beta[0][0] + a[0], beta[1][0] + a[1]])[level]
    };

    let existing = ContrastRequest { held: vec![("plot".into(), "P3".into())], ..ContrastRequest::new("rootstock") };
    let got = level_contrasts(&model, &draws, &table, &existing).expect("contrasts");
    for (level, c) in got.iter().enumerate() {
        let want = difference([departures[0][2], departures[1][2]], level);
        assert!((c.mean - want).abs() < 1e-12, "existing plot, level {level}: {} vs {want}", c.mean);
        assert!(c.notes.iter().any(|n| n.contains("existing plot P3")), "{:?}", c.notes);
    }

    let got = level_contrasts(&model, &draws, &table, &ContrastRequest::new("rootstock")).expect("contrasts");
    let steps = 400;
    let h = 16.0 / steps as f64;
    let weight = |k: usize| if k == 0 || k == steps { 0.5 * h } else { h };
    let density = |z: f64| (-0.5 * z * z).exp() / (2.0 * std::f64::consts::PI).sqrt();
    let mut apart: f64 = 0.0;
    for (level, c) in got.iter().enumerate() {
        let mut want = 0.0;
        for i in 0..=steps {
            let z1 = -8.0 + i as f64 * h;
            for j in 0..=steps {
                let z2 = -8.0 + j as f64 * h;
                want += weight(i) * weight(j) * density(z1) * density(z2) * difference([tau[0] * z1, tau[1] * z2], level);
            }
        }
        let at_zero = difference([0.0, 0.0], level);
        assert!((c.mean - want).abs() < 2e-3, "new plot, level {level}: {} vs {want}", c.mean);
        apart = apart.max((want - at_zero).abs());
        assert!(c.notes.iter().any(|n| n.contains("new plot drawn from the population")), "{:?}", c.notes);
    }
    assert!(apart > 1e-2, "the case must tell a new plot from departures of 0 ({apart})");
}

/// Constrained ↔ unconstrained: a point maps back to itself in every form
/// (the centred one sampled around the first predictor's intercept, whose
/// level means must be taken apart against that predictor's own
/// intercept), and the centred and non-centred forms give the same
/// constrained parameters for the same departures.
#[test]
fn parameters_round_trip_in_every_form() {
    let table = orchard_with_plots(120, 10);
    let mut rng = StdRng::seed_from_u64(12);
    for layout in ["centred", "noncentred", "centred 2"] {
        let model = build(&format!("soil from girth, pooled plot with girth using trees\nparameterise plot {layout}"), &table);
        for _ in 0..3 {
            let theta: Vec<f64> = model.initial_point().iter().map(|v| v + rng.random_range(-0.5..0.5)).collect();
            let params = model.constrain(&theta);
            let back = model.unconstrain(&params).expect("valid parameters");
            for (j, (a, b)) in theta.iter().zip(&back).enumerate() {
                assert!((a - b).abs() < 1e-9, "{layout}: {} {a} vs {b}", model.unconstrained_names()[j]);
            }
        }
    }
    let centred = build("soil from girth, pooled plot using trees\nparameterise plot centred", &table);
    let noncentred = build("soil from girth, pooled plot using trees\nparameterise plot noncentred", &table);
    assert!(centred.notes().iter().any(|n| n.contains("sampled around the intercept")), "{:?}", centred.notes());
    let params = noncentred.constrain(&noncentred.initial_point().iter().map(|v| v + 0.3).collect::<Vec<_>>());
    let theta = centred.unconstrain(&params).expect("valid");
    let again = centred.constrain(&theta);
    for (a, b) in params.iter().zip(&again) {
        assert!((a - b).abs() < 1e-9, "{a} vs {b}");
    }
}
