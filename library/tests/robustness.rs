//! `robustness of M: X` — the contrast under an assumed hidden common cause.
//!
//! The yardstick of an observed predictor W must reproduce the
//! omitted-variable identity of least squares (Wooldridge, *Introductory
//! Econometrics*, §3.3, recalled): the slope of X without W equals the
//! slope with W plus (W's slope) × (the slope of X in W's regression on X).
//! The check fits both models independently; Waypath computes the yardstick
//! from the long model and the data only.

mod common;

use common::cells::run;

use serde_json::Value;
use waypath::cells::Session;

fn last_json(session: &mut Session, cell: &str) -> Value {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    out.displays.last().and_then(|d| d.json.clone()).expect("a JSON structure")
}

const MEADOW: &str = "graph meadow:
    moisture -> grazing -> clover
    moisture -> clover
simulate plots from meadow rows 3000 seed 21:
    moisture = normal(0, 1.5)
    grazing = normal(0.6 * moisture, 1)
    clover = normal(2 + 0.5 * grazing + 0.8 * moisture, 1)
model long:
    clover from grazing, moisture using plots
fit long with laplace seed 3
model short:
    clover from grazing using plots
fit short with laplace seed 3
";

#[test]
fn yardstick_reproduces_the_omitted_variable_identity() {
    let mut session = Session::new(".");
    last_json(&mut session, MEADOW);
    let short = last_json(&mut session, "contrast short: grazing")["mean"].as_f64().unwrap();
    let r = last_json(&mut session, "robustness of long: grazing");
    let long = r["mean"].as_f64().unwrap();
    let ys = &r["yardsticks"][0];
    assert_eq!(ys["node"], "moisture");
    let product = ys["to_exposure"].as_f64().unwrap() * ys["to_outcome"].as_f64().unwrap();
    // Wooldridge §3.3: short − long = γ·δ (here both positive by construction).
    assert!((short - long - product).abs() < 0.01, "short {short}, long {long}, γ·δ {product}");
    // The true effect 0.5 lies where the yardstick says; the shift by γ·δ of
    // the short model's slope lands near it too.
    assert!((long - 0.5).abs() < 0.06, "{long}");
    // Where the mean reaches zero: the product equals the fitted mean.
    assert!((r["explain_away"].as_f64().unwrap() - long).abs() < 1e-12);
    // The grid holds zero shift at its origin and the fitted mean there.
    assert!((r["adjusted_mean"][0][0].as_f64().unwrap() - long).abs() < 1e-12);
    let far = r["adjusted_mean"].as_array().unwrap().last().unwrap().as_array().unwrap().last().unwrap().as_f64().unwrap();
    assert!(far < 0.0, "the far corner of the grid is past the explain-away curve: {far}");
}

#[test]
fn robustness_draws_a_figure_and_refuses_what_the_formula_cannot_take() {
    let mut session = Session::new(".");
    last_json(&mut session, MEADOW);
    let out = run(&mut session, "robustness of long: grazing");
    let d = out.displays.last().unwrap();
    assert!(d.plain.contains("γ·δ reaches"), "{}", d.plain);
    let svg = d.svg.as_deref().expect("a figure");
    assert!(svg.contains("mean reaches 0") && svg.contains("moisture"));
    // With DejaVu Sans laid out by usvg, every text stays on the canvas.
    let outside = common::text_boxes::texts_outside_canvas(svg, &common::text_boxes::dejavu());
    assert!(outside.is_empty(), "{outside:#?}");
    let out = run(&mut session, "robustness of long: clover");
    assert!(out.error.unwrap().describe().contains("not a predictor"));
    let out = run(&mut session, "robustness of nothing_here: grazing");
    assert!(out.error.unwrap().describe().contains("no model named"));
}

// ---- yes/no outcomes: the risk ratio and its E-value ----

/// The worked example of VanderWeele & Ding 2017 (Annals of Internal
/// Medicine, recalled): an observed risk ratio of 3.9 with a 95% interval
/// from 1.8 to 8.7 has E-value 7.2 for the estimate and 3.0 for the lower
/// limit; below 1 the formula is applied to the inverse.
#[test]
fn e_value_matches_the_papers_worked_numbers() {
    use waypath::query::{bounding_factor, e_value};
    let point = e_value(3.9).unwrap();
    assert!((point - 7.26).abs() < 0.005, "{point}"); // 3.9 + √(3.9·2.9) = 7.26
    assert!((e_value(1.8).unwrap() - 3.0).abs() < 1e-12);
    assert!((e_value(1.0 / 3.9).unwrap() - point).abs() < 1e-12);
    assert_eq!(e_value(1.0), Some(1.0));
    assert_eq!(e_value(0.0), None);
    // Ding & VanderWeele 2016: the E-value is where the bounding factor of
    // two equal risk ratios reaches the observed one.
    for rr in [1.05, 1.8, 3.9, 12.0] {
        let e = e_value(rr).unwrap();
        assert!((bounding_factor(e, e) - rr).abs() < 1e-9, "{rr}");
    }
}

const FIELDS: &str = "graph fields:
    slope -> tilled -> eroded
    slope -> eroded
    hedge -> eroded
simulate plots from fields rows 3000 seed 8:
    slope = normal(0, 1)
    hedge = category(none 0.5, planted 0.5)
    tilled = bernoulli(logit = 0.9 * slope)
    eroded = bernoulli(logit = -1.2 + 0.8 * tilled + 0.6 * slope - 0.7 * [hedge = planted])
model m:
    eroded from tilled, slope, hedge using plots
    family bernoulli
fit m with laplace seed 4
";

#[test]
fn risk_ratio_robustness_reads_the_grid_and_yardsticks_as_defined() {
    let mut session = Session::new(".");
    last_json(&mut session, FIELDS);
    let r = last_json(&mut session, "robustness of m: tilled");
    assert_eq!(r["scale"], "risk ratio");
    assert_eq!((r["to"].as_str(), r["from"].as_str()), (Some("1"), Some("0")));
    let (mean, lower) = (r["mean"].as_f64().unwrap(), r["lower"].as_f64().unwrap());
    assert!(lower > 1.0, "tilling raises the risk by construction: {lower}");
    // VanderWeele & Ding 2017: RR + √(RR·(RR − 1)), written out here.
    let e = |rr: f64| rr + (rr * (rr - 1.0)).sqrt();
    assert!((r["e_value_of_mean"].as_f64().unwrap() - e(mean)).abs() < 1e-9);
    assert!((r["e_value_of_interval"].as_f64().unwrap() - e(lower)).abs() < 1e-9);
    // No hidden cause (both risk ratios 1) leaves the estimate as fitted;
    // the far corner lies beyond the E-value on both axes, so the mean has
    // crossed 1 there.
    let grid = r["adjusted_mean"].as_array().unwrap();
    assert!((grid[0][0].as_f64().unwrap() - mean).abs() < 1e-12);
    let corner = grid.last().unwrap().as_array().unwrap().last().unwrap().as_f64().unwrap();
    assert!(corner < 1.0, "{corner}");
    // The hedge (independent of tilling by construction) is nearly
    // balanced between the two groups: its share ratio is close to 1, and
    // its outcome risk ratio is that of a planted hedge against none
    // (about e^0.7 on the odds scale, less on the risk scale).
    let ys = r["yardsticks"].as_array().unwrap();
    let hedge = ys.iter().find(|y| y["node"] == "hedge").expect("hedge as a yardstick");
    assert!((hedge["to_exposure"].as_f64().unwrap() - 1.0).abs() < 0.1, "{hedge}");
    let to_outcome = hedge["to_outcome"].as_f64().unwrap();
    assert!(to_outcome > 1.2 && to_outcome < 2.0_f64.min(0.7_f64.exp()), "{hedge}");
    // Slope drives tilling, so it is placed away from 1 on the exposure axis.
    let slope = ys.iter().find(|y| y["node"] == "slope").expect("slope as a yardstick");
    assert!(slope["to_exposure"].as_f64().unwrap() > 1.3, "{slope}");
}

#[test]
fn risk_ratio_robustness_draws_its_figure_and_refuses_other_families() {
    let mut session = Session::new(".");
    last_json(&mut session, FIELDS);
    let out = run(&mut session, "robustness of m: tilled");
    let d = out.displays.last().unwrap();
    assert!(d.plain.contains("E-value"), "{}", d.plain);
    let svg = d.svg.as_deref().expect("a figure");
    assert!(svg.contains("mean reaches 1") && svg.contains("E-value") && svg.contains("hedge"));
    let outside = common::text_boxes::texts_outside_canvas(svg, &common::text_boxes::dejavu());
    assert!(outside.is_empty(), "{outside:#?}");
    let out = run(
        &mut session,
        "model counts:\n    tilled from slope using plots\n    family gamma_poisson\nfit counts with laplace seed 1\nrobustness of counts: slope",
    );
    let e = out.error.expect("a gamma_poisson model is refused").describe();
    assert!(e.contains("bernoulli") && e.contains("normal") && e.contains("poisson outcome's rate ratio"), "{e}");
}

// ---- binomial and count outcomes: the same bound on their ratios ----

const HIVES: &str = "graph hives:
    smoke -> stings
    smoke -> mites -> losses
simulate apiary from hives rows 2000 seed 12:
    smoke = bernoulli(logit = 0)
    mites = poisson(log = -3.2 + 0.9 * smoke)
    stings = poisson(log = 1.1 + 0.4 * smoke)
    losses = bernoulli(logit = -1 + 0.5 * mites)
";

/// The posterior mean of `f` over the fit's draws of the named parameters.
fn mean_over_draws(session: &Session, model: &str, names: &[&str], f: impl Fn(&[f64]) -> f64) -> f64 {
    let draws = &session.fit(model).expect("fitted").draws;
    let columns: Vec<&[f64]> = names.iter().map(|n| draws.require(n).expect("a parameter")).collect();
    let n = columns[0].len();
    (0..n).map(|d| f(&columns.iter().map(|c| c[d]).collect::<Vec<_>>())).sum::<f64>() / n as f64
}

/// A poisson model with a yes/no exposure alone: its rate ratio per draw is
/// exp(slope) (the log link's definition: the ratio of two means whose logs
/// differ by the slope; McCullagh & Nelder 1989, recalled), recomputed here
/// from the draws, and the E-value the formula of VanderWeele & Ding 2017
/// gives for it. Mites are rare (a mean of e^−3.2 ≈ 0.04 per hive without
/// smoke, e^−2.3 ≈ 0.10 with it, so about 93% of hives have none), stings
/// common: the caveat says so.
#[test]
fn rate_ratio_of_a_count_takes_the_risk_ratio_bound_with_its_caveat() {
    let mut session = Session::new(".");
    last_json(&mut session, HIVES);
    last_json(&mut session, "model m:\n    mites from smoke using apiary\n    family poisson\nfit m with laplace seed 3");
    let r = last_json(&mut session, "robustness of m: smoke");
    assert_eq!((r["scale"].as_str(), r["ratio"].as_str()), (Some("rate ratio"), Some("rate ratio")));
    let expected = mean_over_draws(&session, "m", &["smoke slope"], |v| v[0].exp());
    let mean = r["mean"].as_f64().unwrap();
    assert!((mean - expected).abs() < 1e-9, "{mean} against exp(slope) {expected}");
    assert!((mean - 0.9_f64.exp()).abs() < 0.6, "the simulated rate ratio e^0.9: {mean}");
    let e = |rr: f64| rr + (rr * (rr - 1.0)).sqrt();
    assert!((r["e_value_of_mean"].as_f64().unwrap() - e(mean)).abs() < 1e-9);
    assert!((r["e_value_of_interval"].as_f64().unwrap() - e(r["lower"].as_f64().unwrap())).abs() < 1e-9);
    let notes = r["notes"].as_array().unwrap().iter().map(|n| n.as_str().unwrap().to_string()).collect::<Vec<_>>().join("\n");
    let table = session.table("apiary").unwrap();
    let zeros = table.column("mites").unwrap().data.as_reals().unwrap().iter().filter(|v| **v == 0.0).count();
    assert!(notes.contains(&format!("{zeros} of the 2000 rows")) && notes.contains("when the outcome is rare"), "{notes}");
    assert!(!notes.contains("not rare here"), "{notes}");
    // Stings are common (mean e^1.1 ≈ 3 per hive): the caveat warns.
    last_json(&mut session, "model s:\n    stings from smoke using apiary\n    family poisson\nfit s with laplace seed 3");
    let r = last_json(&mut session, "robustness of s: smoke");
    let notes = r["notes"].as_array().unwrap().iter().map(|n| n.as_str().unwrap().to_string()).collect::<Vec<_>>().join("\n");
    assert!(notes.contains("not rare here"), "{notes}");
    let out = run(&mut session, "robustness of s: smoke");
    let d = out.displays.last().unwrap();
    assert!(d.plain.contains("rate ratio of stings for smoke 1 vs 0"), "{}", d.plain);
    assert!(d.svg.as_deref().unwrap().contains("stings: rate ratio"), "the outcome axis names the rate ratio");
}

/// A binomial model (infested frames out of the frames inspected, a logit
/// link, `centre off` so the intercept is the log-odds at smoke 0) with a
/// yes/no exposure alone: its risk ratio per draw is the ratio of the
/// success probabilities per trial, expit(a + b) / expit(a), recomputed
/// here from the draws. The rows are drawn by the test's own generator.
#[test]
fn binomial_risk_ratio_is_the_ratio_of_success_probabilities_per_trial() {
    let dir = std::env::temp_dir().join(format!("wp-robustness-binomial-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut stream = common::linear_sem::Stream::new(41);
    let mut csv = String::from("smoke,frames,infested\n");
    for _ in 0..1500 {
        let smoke = usize::from(stream.uniform() < 0.5);
        let frames = 4 + stream.below(7);
        let p = if smoke == 1 { 0.30 } else { 0.18 };
        let infested = (0..frames).filter(|_| stream.uniform() < p).count();
        csv.push_str(&format!("{smoke},{frames},{infested}\n"));
    }
    std::fs::write(dir.join("frames.csv"), csv).unwrap();
    let mut session = Session::new(&dir);
    let cell = "table inspections from \"frames.csv\":
    smoke: binary
    frames: count
    infested: count
model b:
    infested from smoke using inspections
    family binomial out of frames
    centre off
fit b with laplace seed 5";
    last_json(&mut session, cell);
    let r = last_json(&mut session, "robustness of b: smoke");
    std::fs::remove_dir_all(&dir).ok();
    assert_eq!(r["ratio"], "risk ratio");
    let expit = |v: f64| 1.0 / (1.0 + (-v).exp());
    let expected = mean_over_draws(&session, "b", &["intercept", "smoke slope"], |v| expit(v[0] + v[1]) / expit(v[0]));
    let mean = r["mean"].as_f64().unwrap();
    assert!((mean - expected).abs() < 1e-9, "{mean} against {expected}");
    assert!((mean - 0.30 / 0.18).abs() < 0.25, "the simulated risk ratio 0.30 / 0.18: {mean}");
    assert!(r["measure"].as_str().unwrap().contains("per trial"), "{r}");
    let e = |rr: f64| rr + (rr * (rr - 1.0)).sqrt();
    assert!((r["e_value_of_mean"].as_f64().unwrap() - e(mean)).abs() < 1e-9);
}
