//! Scores of predictions for left-out rows (`score predictions of …`):
//! the Pareto-smoothed estimate against closed forms and against exact
//! refits without each row made here through the table and model API, and
//! the statement's refusals.

mod common;

use common::cells::run;

use std::sync::atomic::AtomicBool;

use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use serde_json::Value;
use waypath::cells::Session;
use waypath::draws::importance::left_out_estimate;
use waypath::infer::fit::{fit_model, Fit, Method};
use waypath::infer::nuts::NutsSettings;
use waypath::model::{Model, ModelSpec};
use waypath::query::left_out::{exact_left_out, score_predictions};
use waypath::table::Table;

fn last_json(session: &mut Session, cell: &str) -> (String, Value) {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    let d = out.displays.last().expect("a display");
    (d.plain.clone(), d.json.clone().expect("a JSON structure"))
}

fn error_of(session: &mut Session, cell: &str) -> String {
    run(session, cell).error.map(|e| e.describe()).expect("an error")
}

fn log_normal_density(y: f64, mean: f64, sd: f64) -> f64 {
    -0.5 * (2.0 * std::f64::consts::PI).ln() - sd.ln() - 0.5 * ((y - mean) / sd).powi(2)
}

/// The error allowed a row's estimate: `small` while the tail shape is
/// below ½, where Pareto-smoothed estimates are accurate, and 0.15 between
/// ½ and 0.7, where they still converge but more slowly and with a bias
/// (Vehtari, Simpson, Gelman, Yao & Gabry 2024, §3).
fn tolerance(shape: f64, small: f64) -> f64 {
    assert!(shape < 0.7, "a row beyond the shape limit was not refitted");
    if shape < 0.5 { small } else { 0.15 }
}

/// Conjugate normal model with known variance σ² and prior θ ~ N(m₀, τ₀²):
/// the posterior given rows R is N(μ_R, τ_R²) with 1/τ_R² = 1/τ₀² + |R|/σ²
/// and μ_R = τ_R² (m₀/τ₀² + Σ_R y/σ²), and a new row's predictive density is
/// N(μ_R, σ² + τ_R²) (Gelman et al., Bayesian Data Analysis, 3rd ed., §2.5).
/// The left-out predictive density of row i is that with R = all rows but i.
fn conjugate_posterior(y: &[f64], sigma: f64, m0: f64, tau0: f64) -> (f64, f64) {
    let precision = 1.0 / tau0.powi(2) + y.len() as f64 / sigma.powi(2);
    let mean = (m0 / tau0.powi(2) + y.iter().sum::<f64>() / sigma.powi(2)) / precision;
    (mean, (1.0 / precision).sqrt())
}

#[test]
fn smoothed_estimate_matches_the_closed_form_left_out_density_of_a_conjugate_normal_model() {
    let (sigma, m0, tau0) = (1.5, 0.0, 3.0);
    let mut rng = rand::rngs::StdRng::seed_from_u64(8);
    let noise = Normal::new(2.0, sigma).unwrap();
    let mut y: Vec<f64> = (0..40).map(|_| noise.sample(&mut rng)).collect();
    y[7] = 2.0 + 4.5 * sigma; // a far row: its ratios have the heaviest tail
    let (mean, sd) = conjugate_posterior(&y, sigma, m0, tau0);
    let posterior = Normal::new(mean, sd).unwrap();
    let theta: Vec<f64> = (0..20_000).map(|_| posterior.sample(&mut rng)).collect();
    let mut total_smoothed = 0.0;
    let mut total_exact = 0.0;
    let mut total_seen = 0.0;
    for (i, &yi) in y.iter().enumerate() {
        let densities: Vec<f64> = theta.iter().map(|&t| log_normal_density(yi, t, sigma)).collect();
        let estimate = left_out_estimate(&densities);
        let rest: Vec<f64> = y.iter().enumerate().filter(|(j, _)| *j != i).map(|(_, v)| *v).collect();
        let (m, s) = conjugate_posterior(&rest, sigma, m0, tau0);
        let exact = log_normal_density(yi, m, (sigma.powi(2) + s.powi(2)).sqrt());
        let k = estimate.shape.unwrap();
        assert!((estimate.left_out - exact).abs() < tolerance(k, 0.025), "row {i}: smoothed {} against closed form {exact} (shape {k})", estimate.left_out);
        // in-sample: the full posterior's predictive density, N(μ, σ² + τ²)
        let seen = log_normal_density(yi, mean, (sigma.powi(2) + sd.powi(2)).sqrt());
        assert!((estimate.in_sample - seen).abs() < 0.025, "row {i}: in-sample {} against {seen}", estimate.in_sample);
        assert!(estimate.shape.is_some_and(|k| k < 0.7), "row {i}: shape {:?}", estimate.shape);
        total_seen += seen;
        total_smoothed += estimate.left_out;
        total_exact += exact;
    }
    // the rows' Monte Carlo errors (about 0.006 each for 20,000 draws) partly
    // cancel; the in-sample sum lies about one effective parameter above
    assert!((total_smoothed - total_exact).abs() < 0.05, "{total_smoothed} against {total_exact}");
    assert!(total_seen - total_exact > 0.5, "the check could not tell rows seen from rows left out");
}

/// Invented orchard plots: yield (kg) from girth (cm), 24 rows, seed 5.
const PLOTS: &str = "graph g:
    girth -> yield
    shade -> yield
simulate plots from g rows 24 seed 5:
    girth = normal(30, 4)
    shade = normal(0, 1)
    yield = normal(2 + 0.4 * girth - 0.8 * shade, 1.2)
";

/// Every prior declared and no centring, so that the model built on a
/// table without a row is the model with that row's likelihood taken out.
const DECLARED: &str = "    centre off
    prior intercepts: normal(0, 20)
    prior slopes: normal(0, 2)
    prior spread: half_normal(4)
";

fn without_row(table: &Table, row: usize) -> Table {
    let mask: Vec<bool> = (0..table.nrows()).map(|i| i != row).collect();
    let mut reduced = table.clone();
    for column in &mut reduced.columns {
        column.data = column.data.filter(&mask);
    }
    reduced
}

fn declared_model(table: &Table, outcome_line: &str, family: &str) -> (ModelSpec, Model) {
    let text = format!("{outcome_line}\n{family}{DECLARED}");
    let spec = ModelSpec::from_lines("m", text.lines().enumerate().map(|(i, l)| (i + 2, l))).unwrap();
    let model = Model::build(&spec, table).unwrap();
    (spec, model)
}

/// Exact leave-one-out: for every row, the model built on the table without
/// that row and fitted by the same method; the row's density averaged over
/// that fit's draws (Vehtari, Gelman & Gabry 2017, eq. 2 and 4).
fn exact_by_rebuilding(spec: &ModelSpec, table: &Table, method: &Method) -> Vec<f64> {
    let full = Model::build(spec, table).unwrap();
    let layout = full.fitted_rows();
    let y = full.outcome_values().to_vec();
    (0..table.nrows())
        .map(|i| {
            let reduced = Model::build(spec, &without_row(table, i)).unwrap();
            let fit = fit_model(&reduced, method, &AtomicBool::new(false), &|_| {}).unwrap();
            let names = reduced.parameter_names();
            let densities: Vec<f64> = (0..fit.draws.len())
                .map(|d| {
                    let params: Vec<f64> = names.iter().map(|n| fit.draws.get(n).unwrap()[d]).collect();
                    full.log_density_of_rows(&params, &layout.select(&[i]), &[y[i]]).unwrap()[0]
                })
                .collect();
            waypath::draws::importance::log_mean_exp(&densities)
        })
        .collect()
}

/// Check the smoothed left-out score of every row against refitting without
/// it (each row within `tolerance(k, base)`, the sum within 0.25); returns
/// the refitted scores.
fn smoothed_scores_match_refits(model: &Model, fit: &Fit, spec: &ModelSpec, table: &Table, method: &Method, base: f64) -> Vec<f64> {
    let scores = score_predictions(&[(model, fit)], 0, &AtomicBool::new(false), &|_, _| {}).unwrap();
    let exact = exact_by_rebuilding(spec, table, method);
    let ours = &scores.models[0].rows_left_out;
    for (i, (a, b)) in ours.iter().zip(&exact).enumerate() {
        let k = scores.models[0].tail_shapes[i].unwrap();
        assert!((a - b).abs() < tolerance(k, base), "row {}: smoothed {a} against refitted {b} (shape {k})", i + 1);
    }
    let (sum_ours, sum_exact) = (ours.iter().sum::<f64>(), exact.iter().sum::<f64>());
    assert!((sum_ours - sum_exact).abs() < 0.25, "{sum_ours} against {sum_exact}");
    exact
}

#[test]
fn normal_model_scores_agree_with_exact_refits_without_each_row() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let table = session.table("plots").unwrap().clone();
    let (spec, model) = declared_model(&table, "yield from girth, shade using plots", "");
    let method = Method::Laplace { draws: 4000, seed: 3 };
    let fit = fit_model(&model, &method, &AtomicBool::new(false), &|_| {}).unwrap();
    let exact = smoothed_scores_match_refits(&model, &fit, &spec, &table, &method, 0.03);
    // the library's own refit (the likelihood without the row, priors kept)
    // is the model rebuilt without the row: same draws from the same seed
    for i in [0, 11] {
        let own = exact_left_out(&model, &fit, i, &AtomicBool::new(false), &|_, _| {}, &mut Vec::new()).unwrap();
        assert!((own - exact[i]).abs() < 1e-6, "row {}: {own} against {}", i + 1, exact[i]);
    }
}

#[test]
fn bernoulli_model_scores_agree_with_exact_refits_without_each_row() {
    let mut session = Session::new(".");
    last_json(
        &mut session,
        "graph g:
    girth -> healthy
simulate trees from g rows 30 seed 12:
    girth = normal(0, 1)
    healthy = bernoulli(logit = 0.3 + 1.2 * girth)
",
    );
    let table = session.table("trees").unwrap().clone();
    let text = "healthy from girth using trees\nfamily bernoulli\ncentre off\nprior intercepts: normal(0, 2)\nprior slopes: normal(0, 2)\n";
    let spec = ModelSpec::from_lines("m", text.lines().enumerate().map(|(i, l)| (i + 2, l))).unwrap();
    let model = Model::build(&spec, &table).unwrap();
    let settings = NutsSettings { chains: 2, settle: 500, draws: 2000, seed: 4, ..NutsSettings::default() };
    let method = Method::Nuts(settings);
    let fit = fit_model(&model, &method, &AtomicBool::new(false), &|_| {}).unwrap();
    smoothed_scores_match_refits(&model, &fit, &spec, &table, &method, 0.05);
}

#[test]
fn the_statement_ranks_models_and_says_prediction_does_not_choose_a_causal_model() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let (plain, json) = last_json(
        &mut session,
        &format!(
            "model a:\n    yield from girth, shade using plots\n{DECLARED}fit a with laplace seed 2\n\
             model b:\n    yield from girth using plots\n{DECLARED}fit b with laplace seed 2\n\
             score predictions of b, a"
        ),
    );
    // README, Output structures: `score predictions`
    for key in ["outcome", "table", "rows", "shape_limit", "refit_limit", "models", "notes"] {
        assert!(json.get(key).is_some(), "no {key} in {json}");
    }
    for key in [
        "model", "method", "draws", "left_out_score", "standard_error", "seen_rows_score", "shortfall",
        "shortfall_standard_error", "rows_left_out", "tail_shapes", "hard_rows", "refit_warnings",
    ] {
        assert!(json["models"][0].get(key).is_some(), "no {key} in {}", json["models"][0]);
    }
    let models = json["models"].as_array().unwrap();
    // the data were made with shade in the mechanism (−0.8 kg per unit, sd 1,
    // noise sd 1.2), so the model with shade predicts left-out rows better
    assert_eq!(models[0]["model"], "a");
    assert_eq!(models[0]["shortfall"], 0.0);
    let gap = models[1]["shortfall"].as_f64().unwrap();
    let gap_se = models[1]["shortfall_standard_error"].as_f64().unwrap();
    let scores: Vec<f64> = models.iter().map(|m| m["left_out_score"].as_f64().unwrap()).collect();
    assert!((gap - (scores[0] - scores[1])).abs() < 1e-9 && gap > 0.0 && gap_se > 0.0, "{json}");
    // the paired differences, summed, are the gap; their sd gives its error
    let a: Vec<f64> = models[0]["rows_left_out"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let b: Vec<f64> = models[1]["rows_left_out"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let d: Vec<f64> = a.iter().zip(&b).map(|(x, y)| x - y).collect();
    let n = d.len() as f64;
    let mean = d.iter().sum::<f64>() / n;
    let se = (n * d.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    assert!((gap_se - se).abs() < 1e-9);
    assert_eq!(json["rows"], 24);
    assert_eq!(models[0]["tail_shapes"].as_array().unwrap().len(), 24);
    assert!(plain.contains("does not make a model the right one for a causal question"), "{plain}");
    assert!(plain.contains("ask total effect of X on Y in G"), "{plain}");
}

#[test]
fn models_of_other_outcomes_rows_or_without_draws_are_refused() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let fewer = without_row(session.table("plots").unwrap(), 0);
    session.put_table("fewer", fewer);
    last_json(
        &mut session,
        &format!(
            "model a:\n    yield from girth using plots\n{DECLARED}fit a with laplace\n\
             model g:\n    girth from shade using plots\n{DECLARED}fit g with laplace\n\
             model f:\n    yield from shade using fewer\n{DECLARED}fit f with laplace"
        ),
    );
    let e = error_of(&mut session, "score predictions of a, f");
    assert!(e.contains("a was fitted to table plots and f to table fewer"), "{e}");
    let e = error_of(&mut session, "score predictions of a, g");
    assert!(e.contains("a predicts yield and g predicts girth"), "{e}");
    let e = error_of(&mut session, "score predictions of a, a");
    assert!(e.contains("named twice"), "{e}");
    let e = error_of(&mut session, &format!("model u:\n    yield from shade using plots\n{DECLARED}score predictions of a, u"));
    assert!(e.contains("model u is not fitted yet"), "{e}");
    let e = error_of(&mut session, "fit u with laplace draws 50\nscore predictions of a, u");
    assert!(e.contains("has 50 draws") && e.contains("at least 100"), "{e}");
    let e = error_of(&mut session, "score predictions of a refits 101");
    assert!(e.contains("from 0 to 100"), "{e}");
    let e = error_of(&mut session, "score predictions of");
    assert!(e.contains("name the fitted models"), "{e}");
    // the table made again with other rows under the same name
    last_json(
        &mut session,
        &format!(
            "simulate plots from g rows 20 seed 6:\n    girth = normal(30, 4)\n    shade = normal(0, 1)\n    \
             yield = normal(2 + 0.4 * girth, 1)\nmodel b:\n    yield from shade using plots\n{DECLARED}fit b with laplace"
        ),
    );
    let e = error_of(&mut session, "score predictions of a, b");
    assert!(e.contains("a was fitted to 24 rows and b to 20"), "{e}");
}

/// A row moved 12 kg (ten noise sds) away: its importance ratios have a
/// heavy tail, so the statement refits the model without it and uses the
/// exact value — the same as the model rebuilt on the table without it —
/// or, with `refits 0`, lists it as not refitted.
#[test]
fn a_row_beyond_the_shape_limit_is_refitted_exactly_or_listed() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let mut spiked = session.table("plots").unwrap().clone();
    let column = spiked.columns.iter_mut().find(|c| c.name == "yield").unwrap();
    let waypath::table::ColumnData::Real(values) = &mut column.data else { panic!("yield is real") };
    values[4] += 12.0;
    session.put_table("spiked", spiked.clone());
    let cell = format!("model m:\n    yield from girth, shade using spiked\n{DECLARED}fit m with laplace seed 9\nscore predictions of m");
    let (_, json) = last_json(&mut session, &cell);
    let hard = json["models"][0]["hard_rows"].as_array().unwrap().clone();
    let row5 = hard.iter().find(|h| h["row"] == 5).unwrap_or_else(|| panic!("row 5 is not hard to leave out: {json}"));
    assert!(row5["shape"].as_f64().unwrap() > 0.7 && row5["refitted"] == true, "{row5}");
    let (spec, _) = declared_model(&spiked, "yield from girth, shade using spiked", "");
    let exact = exact_by_rebuilding(&spec, &spiked, &Method::Laplace { draws: 4000, seed: 9 });
    assert!((row5["exact"].as_f64().unwrap() - exact[4]).abs() < 1e-6, "{row5} against {}", exact[4]);
    assert_eq!(json["models"][0]["rows_left_out"][4].as_f64(), row5["exact"].as_f64());
    let (plain, json) = last_json(&mut session, "score predictions of m refits 0");
    assert!(json["models"][0]["hard_rows"].as_array().unwrap().iter().all(|h| h["refitted"] == false && h["exact"].is_null()));
    assert!(plain.contains("write `refits"), "{plain}");
}

#[test]
#[ignore = "prints the statement's text for reading"]
fn show_the_text() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let (plain, _) = last_json(
        &mut session,
        &format!(
            "model a:\n    yield from girth, shade using plots\n{DECLARED}fit a with laplace seed 2\n\
             model b:\n    yield from girth using plots\n{DECLARED}fit b with laplace seed 2\n\
             score predictions of b, a"
        ),
    );
    println!("{plain}");
}

/// Leave-one-out by rebuilding, for a model `text` on `table` fitted by
/// NUTS, against the statement's smoothed densities (rows with a shape
/// beyond the limit are refitted by the statement itself).
fn check_against_rebuilding(table: &Table, text: &str, tolerance_small: f64) {
    let spec = ModelSpec::from_lines("m", text.lines().enumerate().map(|(i, l)| (i + 2, l))).unwrap();
    let model = Model::build(&spec, table).unwrap();
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 500, draws: 2000, seed: 6, ..NutsSettings::default() });
    let fit = fit_model(&model, &method, &AtomicBool::new(false), &|_| {}).unwrap();
    let scores = score_predictions(&[(&model, &fit)], 5, &AtomicBool::new(false), &|_, _| {}).unwrap();
    let exact = exact_by_rebuilding(&spec, table, &method);
    let score = &scores.models[0];
    for (i, (a, b)) in score.rows_left_out.iter().zip(&exact).enumerate() {
        let refitted = score.hard_rows.iter().any(|h| h.row == i + 1 && h.refitted);
        let allowed = if refitted { 1e-9 } else { tolerance(score.tail_shapes[i].unwrap(), tolerance_small) };
        assert!((a - b).abs() < allowed, "row {}: {a} against refitted {b} (shape {:?})", i + 1, score.tail_shapes[i]);
    }
    // both sides carry the Monte Carlo error of NUTS draws row by row; the
    // sums must agree far more closely than the seen-row score does
    let (ours, theirs) = (score.left_out_score, exact.iter().sum::<f64>());
    assert!((ours - theirs).abs() < 0.4, "{ours} against {theirs}");
    assert!(score.seen_rows_score - theirs > 1.0, "the check could not tell rows seen from rows left out");
}

/// A category outcome (levels family) and a poisson count with a pooled
/// group: invented saplings in three forms and seedlings at four sites.
#[test]
fn levels_and_pooled_models_agree_with_exact_refits_without_each_row() {
    use waypath::table::{Column, ColumnData};
    let mut rng = rand::rngs::StdRng::seed_from_u64(31);
    let n = 24;
    let light: Vec<f64> = (0..n).map(|_| Normal::new(0.0, 1.0).unwrap().sample(&mut rng)).collect();
    let form: Vec<u32> = light.iter().map(|&l| if l < -0.4 { 0 } else if l < 0.5 { 1 } else { 2 }).collect();
    let mut form = form;
    form.swap(0, 5);
    form.swap(3, 11);
    let site: Vec<u32> = (0..n).map(|i| (i % 4) as u32).collect();
    let seedlings: Vec<u64> = light
        .iter()
        .zip(&site)
        .map(|(&l, &s)| {
            let mean = (0.8 + 0.4 * l + [0.3, -0.3, 0.1, -0.1][s as usize]).exp();
            rand_distr::Poisson::new(mean).unwrap().sample(&mut rng) as u64
        })
        .collect();
    let table = Table::from_columns(
        "saplings",
        vec![
            Column::new("light", ColumnData::Real(light)),
            Column::new("form", ColumnData::Category { codes: form, levels: vec!["herb".into(), "shrub".into(), "tree".into()] }),
            Column::new("site", ColumnData::Category { codes: site, levels: vec!["a".into(), "b".into(), "c".into(), "d".into()] }),
            Column::new("seedlings", ColumnData::Count(seedlings)),
        ],
    )
    .unwrap();
    check_against_rebuilding(&table, "form from light using saplings\ncentre off\nprior intercepts: normal(0, 2)\nprior slopes: normal(0, 2)\n", 0.1);
    check_against_rebuilding(
        &table,
        "seedlings from light, pooled site using saplings\nfamily poisson\ncentre off\nprior intercepts: normal(0, 2)\n\
         prior slopes: normal(0, 1)\nprior pooled spreads: half_normal(1)\n",
        0.1,
    );
}

/// An interrupt stops the scoring between draws (README, Interrupt).
#[test]
fn an_interrupt_stops_the_scoring() {
    let mut session = Session::new(".");
    last_json(&mut session, PLOTS);
    let table = session.table("plots").unwrap().clone();
    let (_, model) = declared_model(&table, "yield from girth using plots", "");
    let fit = fit_model(&model, &Method::Laplace { draws: 1000, seed: 1 }, &AtomicBool::new(false), &|_| {}).unwrap();
    let error = score_predictions(&[(&model, &fit)], 5, &AtomicBool::new(true), &|_, _| {}).unwrap_err();
    assert!(error.to_string().contains("interrupted"), "{error}");
}
