//! The beta family end to end: a `simulate` mechanism whose shares have the
//! beta's mean and variance, contrasts on the mean share, predictive checks
//! and each row's log density.

use std::sync::atomic::AtomicBool;

use statrs::distribution::{Beta, Continuous};
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::{fit_model, Fit, Method};
use waypath::model::{Model, ModelSpec};
use waypath::query::{contrast, posterior_predictive, ContrastRequest, Simulation, SimulationSettings};
use waypath::table::Table;

fn plots_graph() -> Graph {
    let mut b = GraphBuilder::new("forest");
    for line in ["gap -> moss", "soil -> moss"] {
        b.add_line(line).expect("graph line");
    }
    b.finish().expect("graph")
}

/// Moss cover per plot: logit-linear in canopy gap and soil, precision 15.
const PLOTS: [&str; 3] = [
    "soil = category(loam 0.5, peat 0.5)",
    "gap = normal(20, 8)",
    "moss = beta(logit = -0.5 + 0.03 * (gap - 20) + 0.6 * [soil = peat], 15)",
];

fn simulated(body: &[&str], rows: usize, seed: u64) -> Table {
    let sim = Simulation::parse("plots", &plots_graph(), SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanisms");
    sim.table().expect("table")
}

fn fitted(body: &str, table: &Table) -> (Model, Fit) {
    let spec = ModelSpec::from_lines("m", body.lines().enumerate().map(|(i, l)| (i + 2, l))).expect("spec");
    let model = Model::build(&spec, table).expect("model");
    let fit = fit_model(&model, &Method::Laplace { draws: 2000, seed: 3 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    (model, fit)
}

fn reals(table: &Table, name: &str) -> Vec<f64> {
    table.column(name).and_then(|c| c.data.as_reals()).expect("numeric column")
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn variance(v: &[f64]) -> f64 {
    let m = mean(v);
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64
}

fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// Source: a beta variable with shapes μφ and (1 − μ)φ has mean μ and
/// variance μ(1 − μ)/(1 + φ) (the mean–precision form; Ferrari &
/// Cribari-Neto 2004, recalled). A mechanism that reads no parent has one
/// mean: 50,000 rows, the mean within 4.5 standard errors and the variance
/// within 5% (its own standard error is below 1% here).
#[test]
fn simulated_shares_have_the_beta_moments() {
    let body = [PLOTS[0], PLOTS[1], "moss = beta(0.3, 8)"];
    let y = reals(&simulated(&body, 50_000, 4), "moss");
    let want_variance = 0.3 * 0.7 / 9.0;
    assert!(y.iter().all(|&v| v > 0.0 && v < 1.0));
    assert!((mean(&y) - 0.3).abs() < 4.5 * (want_variance / y.len() as f64).sqrt(), "mean {}", mean(&y));
    assert!((variance(&y) / want_variance - 1.0).abs() < 0.05, "variance {} vs {want_variance}", variance(&y));
}

/// Source: the mean share under the logit link is logistic(η), so a
/// contrast of soils on the mean scale is, per draw,
/// logistic(soil[peat]) − logistic(soil[loam]) at the held (centred) gap;
/// the mechanism's peat offset of +0.6 on the log odds makes it positive.
#[test]
fn contrast_is_on_the_mean_share() {
    let table = simulated(&PLOTS, 300, 12);
    let (model, fit) = fitted("moss from soil, gap using plots\nfamily beta", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("soil").between("peat", "loam")).expect("contrast");
    assert!(c.scale.starts_with("mean share of moss"), "{}", c.scale);
    assert!(!c.in_outcome_unit, "a share has no unit");
    let by_hand = fit.draws.derive(&["soil[peat]", "soil[loam]"], |v| logistic(v[0]) - logistic(v[1])).expect("derive");
    for (a, b) in c.draws.iter().zip(&by_hand) {
        assert!((a - b).abs() < 1e-9, "{a} vs {b}");
    }
    assert!(c.mean > 0.0, "{}", c.mean);
}

/// Source: the same moments — with the precision learned, the replicated
/// shares' sd brackets the observed sd; replicated shares stay inside (0, 1).
#[test]
fn predictive_sets_bracket_the_observed_spread() {
    let table = simulated(&PLOTS, 300, 13);
    let observed_sd = variance(&reals(&table, "moss")).sqrt();
    let (model, fit) = fitted("moss from soil, gap using plots\nfamily beta", &table);
    let sets = posterior_predictive(&model, &fit.draws, &table, 200, 5).expect("sets");
    assert!(sets.replicated.iter().flatten().all(|&v| v > 0.0 && v < 1.0));
    let share = sets.replicated.iter().filter(|r| variance(r).sqrt() >= observed_sd).count() as f64 / 200.0;
    assert!((0.05..=0.95).contains(&share), "share of sets at or above the observed sd {share}");
}

/// Source: statrs' Beta density with shapes μφ and (1 − μ)φ at each row.
#[test]
fn each_rows_log_density_is_the_beta_density() {
    let table = simulated(&PLOTS, 60, 14);
    let (model, _) = fitted("moss from gap using plots\nfamily beta", &table);
    let params = [-0.3, 0.02, 11.0];
    let rows = model.fitted_rows();
    let ours = model.pointwise_log_likelihood(&params, &rows).expect("rows");
    let mu = model.predict_mean(&params, &rows).expect("means").mean;
    for ((&y, &m), &got) in model.outcome_values().iter().zip(&mu).zip(&ours) {
        let want = Beta::new(m * 11.0, (1.0 - m) * 11.0).expect("valid").ln_pdf(y);
        assert!((got - want).abs() < 1e-10 * (1.0 + want.abs()), "y {y}: {got} vs {want}");
    }
    assert_eq!(model.parameter_names(), ["intercept", "gap slope", "precision"]);
}
