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
