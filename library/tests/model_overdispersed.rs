//! The gamma-poisson family end to end: a `simulate` mechanism whose counts
//! have the negative binomial's mean and variance, predictive checks that
//! tell an overdispersed fit from a poisson one, contrasts on the mean
//! count, recovery of the overdispersion, and each row's log density.

use std::sync::atomic::AtomicBool;

use statrs::distribution::{Discrete, NegativeBinomial};
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::{fit_model, Fit, Method};
use waypath::model::{Model, ModelSpec};
use waypath::query::{contrast, posterior_predictive, ContrastRequest, Simulation, SimulationSettings};
use waypath::table::{ColumnData, Table};

fn plots_graph() -> Graph {
    let mut b = GraphBuilder::new("forest");
    for line in ["gap -> seedlings", "soil -> seedlings"] {
        b.add_line(line).expect("graph line");
    }
    b.finish().expect("graph")
}

/// Seedlings per plot, log-linear in canopy gap and soil, overdispersion 0.7.
const PLOTS: [&str; 3] = [
    "soil = category(loam 0.5, peat 0.5)",
    "gap = normal(20, 8)",
    "seedlings = gamma_poisson(log = 0.5 + 0.04 * gap - 0.5 * [soil = peat], 0.7)",
];

fn plots(rows: usize, seed: u64) -> Table {
    let sim = Simulation::parse("plots", &plots_graph(), SimulationSettings { rows, seed }, PLOTS.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanisms");
    sim.table().expect("table")
}

fn fitted(body: &str, table: &Table) -> (Model, Fit) {
    let spec = ModelSpec::from_lines("m", body.lines().enumerate().map(|(i, l)| (i + 2, l))).expect("spec");
    let model = Model::build(&spec, table).expect("model");
    let fit = fit_model(&model, &Method::Laplace { draws: 2000, seed: 3 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    (model, fit)
}

fn counts(table: &Table, name: &str) -> Vec<f64> {
    match table.column(name).map(|c| &c.data) {
        Some(ColumnData::Count(v)) => v.iter().map(|&c| c as f64).collect(),
        _ => panic!("{name} is a count column"),
    }
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn variance(v: &[f64]) -> f64 {
    let m = mean(v);
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64
}

/// Source: a poisson count whose rate is μ times a gamma variable of mean 1
/// and variance κ² has mean μ and variance μ + κ²μ² (the negative binomial
/// "NB2" moments; Hilbe, Negative Binomial Regression, 2011, recalled). A
/// mechanism that reads no parent has one rate: 60,000 rows, checked to
/// within 4.5 standard errors (the variance's from the NB's fourth moment,
/// bounded here by twice the squared variance over n, generous for κ ≤ 1).
#[test]
fn simulated_counts_have_the_negative_binomial_moments() {
    let body = [PLOTS[0], PLOTS[1], "seedlings = gamma_poisson(6, 0.8)"];
    let sim = Simulation::parse("s", &plots_graph(), SimulationSettings { rows: 60_000, seed: 4 }, body.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanism");
    let y = counts(&sim.table().expect("table"), "seedlings");
    let (mu, kappa) = (6.0, 0.8);
    let want_variance = mu + kappa * kappa * mu * mu;
    let n = y.len() as f64;
    assert!((mean(&y) - mu).abs() < 4.5 * (want_variance / n).sqrt(), "mean {}", mean(&y));
    let v = variance(&y);
    assert!((v - want_variance).abs() < 4.5 * (2.0 * want_variance * want_variance / n).sqrt() * 2.0, "variance {v} vs {want_variance}");
}

/// Source: the same moments — a poisson model's replicated counts have
/// variance about their mean, far below the observed μ + κ²μ², so nearly no
/// replicated set reaches the observed sd; the gamma-poisson model's sets
/// bracket it.
#[test]
fn predictive_sd_tells_overdispersion_from_poisson() {
    let table = plots(400, 11);
    let observed_sd = variance(&counts(&table, "seedlings")).sqrt();
    let share_above = |family: &str| {
        let (model, fit) = fitted(&format!("seedlings from soil, gap using plots\nfamily {family}"), &table);
        let sets = posterior_predictive(&model, &fit.draws, &table, 200, 5).expect("sets");
        sets.replicated.iter().filter(|r| variance(r).sqrt() >= observed_sd).count() as f64 / 200.0
    };
    let poisson = share_above("poisson");
    let overdispersed = share_above("gamma_poisson");
    assert!(poisson < 0.01, "poisson sets reach the observed sd {observed_sd} in {poisson} of sets");
    assert!((0.05..=0.95).contains(&overdispersed), "gamma-poisson share {overdispersed}");
}

/// Source: the mean count under the log link is e^η (Hilbe 2011; recalled),
/// so a contrast of soils on the mean scale is, per draw,
/// e^(soil[peat]) − e^(soil[loam]) times the common factor e^(gap slope·(held gap − centre)),
/// which is 1 at the held table mean of gap (the centre).
#[test]
fn contrast_is_on_the_mean_count() {
    let table = plots(300, 12);
    let (model, fit) = fitted("seedlings from soil, gap using plots\nfamily gamma_poisson", &table);
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("soil").between("peat", "loam")).expect("contrast");
    assert!(c.scale.starts_with("expected count of seedlings"), "{}", c.scale);
    let by_hand = fit.draws.derive(&["soil[peat]", "soil[loam]"], |v| v[0].exp() - v[1].exp()).expect("derive");
    for (a, b) in c.draws.iter().zip(&by_hand) {
        assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()), "{a} vs {b}");
    }
    // The mechanism's truth: peat halves the rate by e^−0.5; the fit should find a negative contrast.
    assert!(c.mean < 0.0, "{}", c.mean);
}

/// Source: statrs' NegativeBinomial pmf (r = 1/κ², p = r/(r + μ): success
/// probability of the failures-before-r-successes form) at each row.
#[test]
fn each_rows_log_density_is_the_negative_binomial_pmf() {
    let table = plots(60, 13);
    let (model, _) = fitted("seedlings from gap using plots\nfamily gamma_poisson", &table);
    let params = [1.1, 0.03, 0.9];
    let rows = model.fitted_rows();
    let ours = model.pointwise_log_likelihood(&params, &rows).expect("rows");
    let mu = model.predict_mean(&params, &rows).expect("means").mean;
    let r = 1.0 / (0.9f64 * 0.9);
    for ((&y, &m), &got) in model.outcome_values().iter().zip(&mu).zip(&ours) {
        let want = NegativeBinomial::new(r, r / (r + m)).expect("valid").ln_pmf(y as u64);
        assert!((got - want).abs() < 1e-10 * (1.0 + want.abs()), "y {y}: {got} vs {want}");
    }
    assert_eq!(model.parameter_names(), ["intercept", "gap slope", "overdispersion"]);
}
