//! `robustness of M: X refit with hidden to X PRIOR and to Y PRIOR`: the
//! model refitted beside a simulated hidden node (one standard normal value
//! per row) whose strengths take the stated priors.
//!
//! Two checks. With both strengths held at zero by tight priors, the
//! hidden node changes nothing, so the refit's slope must match the
//! ordinary fit of the same model (the outcome's regression keeps the
//! model's priors). On data simulated here — outside the library, by a
//! seeded xorshift generator and Box–Muller normals — with a known hidden
//! cause of the exposure and the outcome, priors centred on the true
//! strengths give an interval that covers the true slope, where the
//! ordinary fit is biased by the omitted-variable bias `b·a / (a² + 1)`
//! (the hidden cause's covariance with x given w, over x's residual
//! variance; Wooldridge, Introductory Econometrics §3.3, recalled).

use std::path::Path;
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
    assert!(out.error.is_none(), "{cell}\n{}", out.error.map(|e| e.describe()).unwrap_or_default());
    out.displays.last().and_then(|d| d.json.clone()).expect("a JSON structure")
}

struct Stream(u64);

impl Stream {
    fn uniform(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        ((self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (a, b) = (self.uniform(), self.uniform());
        (-2.0 * a.ln()).sqrt() * (2.0 * std::f64::consts::PI * b).cos()
    }
}

/// Strengths of the hidden cause and the true slope.
const TO_X: f64 = 0.8;
const TO_Y: f64 = 0.9;
const SLOPE: f64 = 0.4;

/// Rows of w, x, y with a hidden standard normal u behind x and y.
fn write_rows(dir: &Path, seed: u64, n: usize) {
    let mut s = Stream(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1);
    let mut text = String::from("w,x,y\n");
    for _ in 0..n {
        let (u, w) = (s.normal(), s.normal());
        let x = 0.5 * w + TO_X * u + s.normal();
        let y = 1.0 + SLOPE * x + 0.7 * w + TO_Y * u + s.normal();
        text.push_str(&format!("{w:.6},{x:.6},{y:.6}\n"));
    }
    std::fs::write(dir.join(format!("hidden{seed}.csv")), text).unwrap();
}

fn session_with(dir: &Path, seed: u64) -> Session {
    write_rows(dir, seed, 300);
    let mut session = Session::new(dir);
    last_json(
        &mut session,
        &format!("table t from \"hidden{seed}.csv\":\n    w: real\n    x: real\n    y: real\nmodel m:\n    y from x, w using t\nfit m with nuts seed 3"),
    );
    session
}

fn summary(v: &Value) -> (f64, f64, f64) {
    (v["mean"].as_f64().unwrap(), v["lower"].as_f64().unwrap(), v["upper"].as_f64().unwrap())
}

#[test]
fn strengths_held_at_zero_reproduce_the_ordinary_fit() {
    let dir = std::env::temp_dir().join(format!("wp-hidden-zero-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = session_with(&dir, 11);
    let json = last_json(&mut session, "robustness of m: x refit with hidden to x normal(0, 0.0001) and to y normal(0, 0.0001) with nuts seed 5");
    std::fs::remove_dir_all(&dir).ok();
    let (fm, fl, fu) = summary(&json["fitted"]);
    let (rm, rl, ru) = summary(&json["refitted"]);
    let width = fu - fl;
    // Two samplers of one posterior: means within a tenth of the interval's
    // width, widths within 15% (Monte Carlo error of a few thousand draws).
    assert!((rm - fm).abs() < 0.1 * width, "fitted {fm} [{fl}, {fu}], refitted {rm} [{rl}, {ru}]");
    assert!(((ru - rl) / width - 1.0).abs() < 0.15, "fitted [{fl}, {fu}], refitted [{rl}, {ru}]");
    let warnings = json["warnings"].as_array().unwrap();
    assert!(warnings.is_empty(), "{warnings:?}");
}

#[test]
fn priors_on_the_true_strengths_recover_the_slope_the_plain_fit_misses() {
    let dir = std::env::temp_dir().join(format!("wp-hidden-true-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = session_with(&dir, 21);
    let json = last_json(
        &mut session,
        "robustness of m: x refit with hidden to y normal(0.9, 0.05) and to x normal(0.8, 0.05) intervals 98% with nuts seed 6",
    );
    std::fs::remove_dir_all(&dir).ok();
    let (_, fl, _) = summary(&json["fitted"]);
    let (rm, rl, ru) = summary(&json["refitted"]);
    // The plain slope is near 0.4 + 0.9·0.8 / (0.8² + 1) ≈ 0.84.
    assert!(fl > SLOPE + 0.2, "the plain fit should be biased upward; its lower end is {fl}");
    assert!(rl <= SLOPE && SLOPE <= ru, "true slope {SLOPE} outside the refit's 98% interval [{rl}, {ru}] (mean {rm})");
    let strengths = json["strengths"].as_array().unwrap();
    assert_eq!(strengths[0]["prior"], "normal(0.8, 0.05)", "the exposure's strength first, whatever the order written");
}

#[test]
fn refit_refuses_what_it_cannot_do() {
    let dir = std::env::temp_dir().join(format!("wp-hidden-refuse-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = session_with(&dir, 31);
    std::fs::remove_dir_all(&dir).ok();
    for (cell, expected) in [
        ("robustness of m: x refit with hidden to x normal(0, 1)", "name both strengths"),
        ("robustness of m: x refit with hidden to x normal(0, 1) and to w normal(0, 1)", "the exposure x and the outcome y"),
        ("robustness of m: x refit with hidden to x normal(0, 1) and to y wide", "not a distribution"),
        ("robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) with laplace", "use `with nuts"),
        ("robustness of m: x wobble", "not an option of robustness"),
    ] {
        let out = run(&mut session, cell);
        let error = out.error.expect(cell).describe();
        assert!(error.contains(expected), "{cell}: {error}");
    }
}
