//! The time families end to end: refusals that name row and column, the
//! fit note counting rows cut short, `simulate` mechanisms with the
//! Weibull's moments, recovery of the shape, simulated sets cut like the
//! data, and contrasts on the mean time.

mod model_fixtures;

use std::sync::atomic::AtomicBool;

use model_fixtures::{build, build_error, column, orchard_with_times};
use statrs::function::gamma::ln_gamma;
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::{fit_model, Method};
use waypath::model::ModelSpec;
use waypath::query::{contrast, posterior_predictive, recover, ContrastRequest, Simulation, SimulationSettings};
use waypath::table::{ColumnData, Table};

fn trays_graph() -> Graph {
    let mut b = GraphBuilder::new("trays");
    for line in ["warmth -> days", "cover -> days"] {
        b.add_line(line).expect("graph line");
    }
    b.finish().expect("graph")
}

fn simulated(body: &[&str], rows: usize, seed: u64) -> Simulation {
    Simulation::parse("trays", &trays_graph(), SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanisms")
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

#[test]
fn a_time_that_is_not_positive_is_refused_with_its_row() {
    let mut table = orchard_with_times(30, 3);
    let days = table.columns.iter_mut().find(|c| c.name == "ripening").expect("column");
    if let ColumnData::Real(v) = &mut days.data {
        v[6] = 0.0;
    }
    let message = build_error("ripening from girth using trees\nfamily weibull", &table);
    assert!(message.contains("row 7") && message.contains("ripening") && message.contains("positive"), "{message}");
}

#[test]
fn a_cut_short_column_of_another_kind_is_refused() {
    let mut table = orchard_with_times(30, 3);
    let message = build_error("ripening from girth using trees\nfamily weibull cut short by soil", &table);
    assert!(message.contains("soil") && message.contains("category") && message.contains("yes/no"), "{message}");
    // A count column with a value other than 0 or 1: the row and the column.
    let message = build_error("ripening from girth using trees\nfamily exponential cut short by visits", &table);
    assert!(message.contains("visits") && message.contains("row ") && message.contains("not 0 or 1"), "{message}");
    // Every row cut short: no event seen.
    table.columns.push(column("all_over", ColumnData::Binary(vec![true; 30])));
    let message = build_error("ripening from girth using trees\nfamily weibull cut short by all_over", &table);
    assert!(message.contains("all_over") && message.contains("no event"), "{message}");
    let message = build_error("ripening from girth using trees\nfamily weibull cut by season_over", &table);
    assert!(message.contains("cut short by <column>"), "{message}");
}

#[test]
fn the_fit_notes_count_the_rows_cut_short() {
    let table = orchard_with_times(40, 3);
    let model = build("ripening from girth using trees\nfamily weibull cut short by season_over", &table);
    assert!(model.notes().iter().any(|n| n.contains("10 of 40 rows were cut short")), "{:?}", model.notes());
    assert_eq!(model.parameter_names(), ["intercept", "girth slope", "shape"]);
    let exponential = build("ripening from girth using trees\nfamily exponential", &table);
    assert_eq!(exponential.parameter_names(), ["intercept", "girth slope"]);
}

/// Source: a Weibull time with scale λ and shape k has mean λΓ(1 + 1/k)
/// and variance λ²Γ(1 + 2/k) − mean² (Johnson, Kotz & Balakrishnan 1994,
/// ch. 21; recalled); an exponential time has variance mean². 50,000
/// rows: the mean within 4.5 standard errors, the variance within 6%.
#[test]
fn simulated_times_have_the_weibull_moments() {
    for (mechanism, k) in [("days = weibull(12, 1.8)", 1.8f64), ("days = weibull(log = log(12), 0.8)", 0.8), ("days = exponential(12)", 1.0)] {
        let body = ["warmth = normal(20, 3)", "cover = normal(0, 1)", mechanism];
        let sim = simulated(&body, 50_000, 4);
        let y = reals(&sim.table().expect("table"), "days");
        let scale = 12.0 / ln_gamma(1.0 + 1.0 / k).exp();
        let want_variance = scale * scale * ln_gamma(1.0 + 2.0 / k).exp() - 144.0;
        assert!(y.iter().all(|&v| v > 0.0));
        assert!((mean(&y) - 12.0).abs() < 4.5 * (want_variance / y.len() as f64).sqrt(), "{mechanism}: mean {}", mean(&y));
        assert!((variance(&y) / want_variance - 1.0).abs() < 0.06, "{mechanism}: variance {} vs {want_variance}", variance(&y));
    }
}

#[test]
fn a_mechanism_with_a_bad_shape_names_it() {
    let body = ["warmth = normal(20, 3)", "cover = normal(0, 1)", "days = weibull(12, cover)"];
    let message = simulated(&body, 50, 1).table().expect_err("negative shapes").to_string();
    assert!(message.contains("shape") && message.contains("positive"), "{message}");
}

/// Source: the mechanism's own values — intercept log 10 at warmth 20 (the
/// centred mean), slope −0.05 per degree, shape 2 — should lie inside the
/// recovery intervals of a Weibull model fitted to its 600 rows.
#[test]
fn recovery_finds_the_shape_and_the_slope() {
    let body = ["warmth = normal(20, 3)", "cover = normal(0, 1)", "days = weibull(log = log(10) - 0.05 * (warmth - 20), 2)"];
    let sim = simulated(&body, 600, 8);
    let spec = ModelSpec::from_lines("m", [(2, "days from warmth using trays"), (3, "family weibull")]).expect("spec");
    let method = Method::Laplace { draws: 2000, seed: 2 };
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.95).expect("recovery");
    let find = |name: &str| r.parameters.iter().find(|p| p.name == name).expect("parameter");
    assert_eq!(find("shape").truth, Some(2.0), "{:?}", r.parameters);
    assert!((find("warmth slope").truth.expect("truth") + 0.05).abs() < 1e-9);
    for name in ["intercept", "warmth slope", "shape"] {
        assert_eq!(find(name).covered, Some(true), "{name}: {:?}", find(name));
    }
}

/// The simulated sets are cut at the data's follow-up ends: a row cut short
/// in the data never shows a longer time, and a replicated row is cut only
/// where the data's row was.
#[test]
fn predictive_sets_are_cut_like_the_data() {
    let table = orchard_with_times(80, 5);
    let model = build("ripening from girth using trees\nfamily weibull cut short by season_over", &table);
    let fit = fit_model(&model, &Method::Laplace { draws: 400, seed: 1 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    let sets = posterior_predictive(&model, &fit.draws, &table, 50, 3).expect("sets");
    let cut = sets.cut_short.clone().expect("cut rows known");
    let observed = reals(&table, "ripening");
    for set in &sets.replicated {
        for ((&v, &c), &o) in set.iter().zip(&cut).zip(&observed) {
            assert!(v > 0.0);
            if c {
                assert!(v <= o, "a replicated time past its row's follow-up end: {v} > {o}");
            }
        }
    }
    // Some replicated rows do reach the end of their follow-up.
    assert!(sets.replicated.iter().flatten().zip(cut.iter().cycle()).zip(observed.iter().cycle()).any(|((v, c), o)| *c && v == o));
}

/// Source: the mean of a time under the log link is e^η whatever the
/// shape, so a contrast of the mean time between two warmths, per draw and
/// held at the other predictors' means, is e^(a + b·(x₁ − x̄)) − e^(a + b·(x₀ − x̄))
/// from the draws of the intercept a and the slope b.
#[test]
fn contrast_is_on_the_mean_time() {
    let body = ["warmth = normal(20, 3)", "cover = normal(0, 1)", "days = weibull(log = log(10) - 0.05 * (warmth - 20), 1.5)"];
    let sim = simulated(&body, 300, 9);
    let table = sim.table().expect("table");
    let spec = ModelSpec::from_lines("m", [(2, "days from warmth using trays"), (3, "family weibull")]).expect("spec");
    let model = waypath::model::Model::build(&spec, &table).expect("model");
    let fit = fit_model(&model, &Method::Laplace { draws: 1000, seed: 4 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("warmth").between("24", "16")).expect("contrast");
    assert!(c.scale.contains("mean days"), "{}", c.scale);
    let centre = mean(&reals(&table, "warmth"));
    let by_hand = fit
        .draws
        .derive(&["intercept", "warmth slope"], |v| (v[0] + v[1] * (24.0 - centre)).exp() - (v[0] + v[1] * (16.0 - centre)).exp())
        .expect("derive");
    for (a, b) in c.draws.iter().zip(&by_hand) {
        assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()), "{a} vs {b}");
    }
    assert!(c.mean < 0.0, "warmer trays sprout sooner: {}", c.mean);
}

/// The check figure marks each row cut short with an open vermillion ring
/// on the observed line and says so in its legend; without such rows it has
/// neither.
#[test]
fn the_check_figure_rings_the_rows_cut_short() {
    use waypath::plot::{predictive_figure_with_cut, PredictiveKind, Quantity};
    let table = orchard_with_times(80, 5);
    let model = build("ripening from girth using trees\nfamily weibull cut short by season_over", &table);
    let fit = fit_model(&model, &Method::Laplace { draws: 400, seed: 1 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    let sets = posterior_predictive(&model, &fit.draws, &table, 40, 3).expect("sets");
    let flags = sets.cut_short.clone().expect("cut rows known");
    let cut: Vec<f64> = sets.observed.iter().zip(&flags).filter(|(_, &c)| c).map(|(&v, _)| v).collect();
    assert_eq!(cut.len(), 20);
    let q = Quantity::new("ripening");
    let svg = predictive_figure_with_cut(PredictiveKind::Posterior, "m", &q, &sets.observed, &cut, &sets.replicated).expect("figure");
    let rings = svg.matches("stroke=\"#D55E00\"").count();
    assert!(rings > cut.len(), "one ring per row cut short plus the legend key: {rings}");
    assert!(svg.contains("20 rows cut short"), "legend");
    let plain = predictive_figure_with_cut(PredictiveKind::Posterior, "m", &q, &sets.observed, &[], &sets.replicated).expect("figure");
    assert!(!plain.contains("cut short") && !plain.contains("stroke=\"#D55E00\""));
}

/// Leaving a row out (exact refits of `score predictions`) keeps every other
/// row's censoring: the reduced model's log-likelihood is the full one less
/// the row's own log density (or log survival, for a row cut short).
#[test]
fn leaving_a_row_out_keeps_the_others_cut_short() {
    let table = orchard_with_times(40, 6);
    let model = build("ripening from girth using trees\nfamily weibull cut short by season_over", &table);
    let params = [3.4, 0.01, 1.7];
    let rows = model.pointwise_log_likelihood(&params, &model.fitted_rows()).expect("rows");
    let full = model.log_likelihood(&params).expect("full");
    assert!((rows.iter().sum::<f64>() - full).abs() < 1e-9 * full.abs());
    for row in [0, 1, 4, 39] {
        let reduced = model.leaving_out(row).expect("reduced").log_likelihood(&params).expect("reduced");
        assert!((full - rows[row] - reduced).abs() < 1e-9 * full.abs(), "row {row}: {} vs {reduced}", full - rows[row]);
    }
}
