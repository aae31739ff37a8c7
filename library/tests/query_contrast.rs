//! Contrasts from posterior draws: paired per-draw differences, summaries
//! last, standardisation, contrasts on outcomes and along a grid.

use std::sync::atomic::AtomicBool;

use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::{fit_model, Fit, Method};
use waypath::model::{Model, ModelSpec};
use waypath::query::{contrast, ContrastRequest, GridRequest, On, Simulation, SimulationSettings};
use waypath::table::Table;

fn graph(name: &str, lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new(name);
    for l in lines {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

/// An invented orchard: rootstock → girth → yield, rootstock → yield, and a
/// yes/no "healthy" outcome.
fn orchard(rows: usize, seed: u64) -> Table {
    let g = graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield", "rootstock -> healthy", "girth -> healthy"]);
    let body = [
        "rootstock = category(dwarf 0.5, standard 0.5)",
        "girth = normal(28 + 6 * [rootstock = standard], 4)",
        "yield = normal(2 + 0.55 * girth + 1.5 * [rootstock = standard], 3)",
        "healthy = bernoulli(logit = -0.5 + 0.1 * (girth - 28) + 0.8 * [rootstock = standard])",
    ];
    let sim = Simulation::parse("trees", &g, SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanisms");
    sim.table().expect("table")
}

fn fitted(body: &str, table: &Table) -> (Model, Fit) {
    let spec = ModelSpec::from_lines("m", body.lines().enumerate().map(|(i, l)| (i + 2, l))).expect("spec");
    let model = Model::build(&spec, table).expect("model");
    let fit = fit_model(&model, &Method::Laplace { draws: 4000, seed: 11 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    (model, fit)
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn variance(v: &[f64]) -> f64 {
    let m = mean(v);
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64
}

/// Source: the linear predictor written out by hand — with girth held at
/// the same value in both rows its term cancels, so each draw's contrast is
/// rootstock[standard] − rootstock[dwarf] of that draw; the reported mean is
/// the mean of those per-draw differences.
#[test]
fn contrast_pairs_draws_and_summarises_last() {
    let table = orchard(300, 1);
    let (model, fit) = fitted("yield from rootstock, girth using trees", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("rootstock").between("standard", "dwarf")).expect("contrast");
    let by_hand = fit.draws.derive(&["rootstock[standard]", "rootstock[dwarf]"], |v| v[0] - v[1]).expect("derive");
    assert_eq!(c.draws.len(), by_hand.len());
    for (a, b) in c.draws.iter().zip(&by_hand) {
        assert!((a - b).abs() < 1e-9, "{a} vs {b}");
    }
    assert!((c.mean - mean(&c.draws)).abs() < 1e-12);
    assert_eq!(c.contrast, "rootstock standard vs dwarf");
    assert_eq!(c.held.len(), 1);
    assert_eq!((c.held[0].name.as_str(), c.held[0].source.as_str()), ("girth", "table mean"));
}

#[test]
fn the_grid_variable_is_reported_where_the_contrast_row_holds_it() {
    let table = orchard(300, 1);
    let (model, fit) = fitted("yield from rootstock, girth using trees", &table);
    let girth = table.column("girth").unwrap().data.as_reals().unwrap();
    let table_mean = girth.iter().sum::<f64>() / girth.len() as f64;
    let request = ContrastRequest {
        along: Some(GridRequest { variable: "girth".into(), from: 20.0, to: 30.0, step: Some(5.0) }),
        ..ContrastRequest::new("rootstock").between("standard", "dwarf")
    };
    let c = contrast(&model, &fit.draws, &table, &request).expect("contrast");
    let held: Vec<_> = c.held.iter().filter(|h| h.name == "girth").collect();
    assert_eq!(held.len(), 1, "{:?}", c.held);
    assert_eq!(held[0].source, "table mean");
    assert!((held[0].value.parse::<f64>().unwrap() - table_mean).abs() < 1e-3 * table_mean.abs(), "{} vs {table_mean}", held[0].value);
}

/// Source: a posterior expectation of a nonlinear function is the mean of
/// the function over draws, not the function of the mean draw (Jensen's
/// inequality makes the two differ); the logistic function 1/(1 + e^−η)
/// is the bernoulli mean under the logit link.
#[test]
fn nonlinear_contrast_is_the_mean_of_per_draw_probabilities() {
    let table = orchard(120, 2);
    let (model, fit) = fitted("healthy from rootstock using trees\nfamily bernoulli", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("rootstock").between("standard", "dwarf")).expect("contrast");
    let logistic = |x: f64| 1.0 / (1.0 + (-x).exp());
    let per_draw = fit.draws.derive(&["rootstock[standard]", "rootstock[dwarf]"], |v| logistic(v[0]) - logistic(v[1])).expect("derive");
    assert!((c.mean - mean(&per_draw)).abs() < 1e-12, "{} vs {}", c.mean, mean(&per_draw));
    let s = fit.draws.get("rootstock[standard]").expect("draws");
    let d = fit.draws.get("rootstock[dwarf]").expect("draws");
    let means_first = logistic(mean(s)) - logistic(mean(d));
    assert!((c.mean - means_first).abs() > 1e-5, "summaries must come last");
}

/// Source: algebra — in a linear model without interactions the average
/// over rows of (x·β with the exposure at b) − (x·β with it at a) is the
/// same for every row, so the standardised contrast equals the contrast at
/// the held values, draw by draw; for a slope, `girth 30 vs 20` is 10 × `girth slope`.
#[test]
fn standardised_contrast_equals_held_contrast_without_interactions() {
    let table = orchard(200, 3);
    let (model, fit) = fitted("yield from rootstock, girth using trees", &table);
    for request in [
        ContrastRequest::new("rootstock").between("standard", "dwarf"),
        ContrastRequest::new("girth").between("30", "20"),
    ] {
        let held = contrast(&model, &fit.draws, &table, &request).expect("held");
        let over = contrast(&model, &fit.draws, &table, &ContrastRequest { over_rows: true, ..request.clone() }).expect("over rows");
        assert!(over.over_rows && over.held.is_empty() && over.held_how.contains("standardisation"));
        for (a, b) in held.draws.iter().zip(&over.draws) {
            assert!((a - b).abs() < 1e-9, "{a} vs {b}");
        }
    }
    let slope = contrast(&model, &fit.draws, &table, &ContrastRequest::new("girth").between("30", "20")).expect("slope");
    let b = fit.draws.get("girth slope").expect("girth slope");
    assert!((slope.mean - 10.0 * mean(b)).abs() < 1e-9);
}

/// Source: the law of total variance with independent outcome draws —
/// for normal outcomes y_b − y_a at one draw has mean μ_b − μ_a and
/// variance 2σ², so over draws Var = Var(μ_b − μ_a) + 2·E[σ²] and the mean
/// matches the contrast of means.
#[test]
fn outcome_contrast_spreads_by_twice_the_residual_variance() {
    let table = orchard(300, 4);
    let (model, fit) = fitted("yield from rootstock, girth using trees", &table);
    let request = ContrastRequest::new("rootstock").between("standard", "dwarf");
    let means = contrast(&model, &fit.draws, &table, &request).expect("means");
    let outcomes = contrast(&model, &fit.draws, &table, &ContrastRequest { on: On::Outcomes { seed: 5 }, ..request.clone() }).expect("outcomes");
    let spread = fit.draws.get("spread").expect("spread");
    let expected = variance(&means.draws) + 2.0 * mean(&spread.iter().map(|s| s * s).collect::<Vec<_>>());
    let got = variance(&outcomes.draws);
    // 4000 draws: the sample variance has relative sd √(2/3999) ≈ 2.2%; allow 4.5 of those.
    assert!((got / expected - 1.0).abs() < 0.1, "{got} vs {expected}");
    let se = (got / outcomes.draws.len() as f64).sqrt();
    assert!((outcomes.mean - means.mean).abs() < 4.0 * se, "{} vs {}", outcomes.mean, means.mean);
    assert_eq!(outcomes.on, "outcomes");
    assert_eq!(outcomes.seed, Some(5));
    let again = contrast(&model, &fit.draws, &table, &ContrastRequest { on: On::Outcomes { seed: 5 }, ..request }).expect("again");
    assert_eq!(again.draws, outcomes.draws, "the same seed gives the same outcomes");
}

/// Source: ordinary least squares is the flat-prior limit of the normal
/// linear model; with 400 rows and wide default priors the posterior mean
/// of the contrast lies within a tenth of a posterior sd of the OLS
/// coefficient (normal equations solved directly here).
#[test]
fn contrast_matches_least_squares_in_the_flat_prior_limit() {
    let table = orchard(400, 6);
    let (model, fit) = fitted("yield from rootstock, girth using trees", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("rootstock").between("standard", "dwarf")).expect("contrast");
    let x = model.design_matrix().clone();
    let y = nalgebra::DVector::from_column_slice(model.outcome_values());
    let ols = (x.transpose() * &x).lu().solve(&(x.transpose() * y)).expect("solvable");
    let want = ols[1] - ols[0];
    assert!((c.mean - want).abs() < 0.1 * variance(&c.draws).sqrt(), "{} vs {want}", c.mean);
}

/// Source: the regression equation with one slope per level written out by
/// hand — the contrast at girth x is (α_s − α_d) + (β_s − β_d)(x − centre),
/// linear in x, so its posterior mean is that line at the posterior means.
#[test]
fn contrast_along_a_grid_follows_the_per_level_slopes() {
    let table = orchard(300, 7);
    let (model, fit) = fitted("yield from rootstock, girth per rootstock using trees", &table);
    let request = ContrastRequest {
        along: Some(GridRequest { variable: "girth".into(), from: 15.0, to: 45.0, step: Some(5.0) }),
        ..ContrastRequest::new("rootstock").between("standard", "dwarf")
    };
    let c = contrast(&model, &fit.draws, &table, &request).expect("grid");
    let xs: Vec<f64> = c.grid.iter().map(|g| g.x).collect();
    assert_eq!(xs, vec![15.0, 20.0, 25.0, 30.0, 35.0, 40.0, 45.0]);
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let centre = mean(&girth);
    let m = |n: &str| mean(fit.draws.get(n).expect("param"));
    for g in &c.grid {
        let want = m("rootstock[standard]") - m("rootstock[dwarf]") + (m("girth slope[standard]") - m("girth slope[dwarf]")) * (g.x - centre);
        assert!((g.mean - want).abs() < 1e-9, "{} vs {want}", g.mean);
        assert!(g.lower < g.mean && g.mean < g.upper);
    }
    let json = serde_json::to_value(&c).expect("json");
    for key in ["contrast", "on", "mean", "lower", "upper", "share_above_zero", "grid", "held", "interval"] {
        assert!(json.get(key).is_some(), "missing {key}");
    }
    assert!(json["grid"][0].get("x").is_some());
}

/// Source: the stated default — one unit above the table mean against the
/// mean, which for a linear slope is the slope itself.
#[test]
fn real_exposure_without_values_is_one_unit_above_the_centre() {
    let table = orchard(150, 8);
    let (model, fit) = fitted("yield from girth using trees", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("girth")).expect("contrast");
    let b = fit.draws.get("girth slope").expect("girth slope");
    assert!((c.mean - mean(b)).abs() < 1e-9);
    assert!(c.notes.iter().any(|n| n.contains("plus 1")), "{:?}", c.notes);
    assert_eq!(c.interval, "90% central quantile interval");
}

#[test]
fn contrast_errors_name_the_model_and_what_to_do() {
    let table = orchard(60, 9);
    let (model, fit) = fitted("yield from rootstock using trees", &table);
    let not_predictor = contrast(&model, &fit.draws, &table, &ContrastRequest::new("girth")).expect_err("not a predictor");
    expect_test::expect![[r#"contrast m: `girth` is not a predictor of model m (its predictors: rootstock); contrast one of those"#]]
        .assert_eq(&not_predictor.to_string());
    let bad_level =
        contrast(&model, &fit.draws, &table, &ContrastRequest::new("rootstock").between("semi", "dwarf")).expect_err("level");
    expect_test::expect![[r#"contrast m: `semi` is not a level of rootstock (levels: dwarf, standard); use one of those labels"#]]
        .assert_eq(&bad_level.to_string());
}
