//! `robustness of M: X` — the contrast under an assumed hidden common cause.
//!
//! The yardstick of an observed predictor W must reproduce the
//! omitted-variable identity of least squares (Wooldridge, *Introductory
//! Econometrics*, §3.3, recalled): the slope of X without W equals the
//! slope with W plus (W's slope) × (the slope of X in W's regression on X).
//! The check fits both models independently; Waypath computes the yardstick
//! from the long model and the data only.

mod common;

use std::sync::atomic::AtomicBool;

use serde_json::Value;
use waypath::cells::{CellOutcome, RunControl, Session};

fn run(session: &mut Session, cell: &str) -> CellOutcome {
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress })
}

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
        "model counts:\n    tilled from slope using plots\n    family poisson\nfit counts with laplace seed 1\nrobustness of counts: slope",
    );
    let e = out.error.expect("a poisson model is refused").describe();
    assert!(e.contains("bernoulli") && e.contains("normal"), "{e}");
}
