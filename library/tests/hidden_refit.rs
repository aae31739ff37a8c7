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
//! The same holds with the exposure model's priors stated in the
//! exposure's unit (`exposure priors …`), and the result names the priors
//! it used: stated ones as written, Waypath's in the exposure's unit,
//! centred on its sample mean with widths ten sample sds, checked against
//! the mean and sd worked out here from the rows.

mod common;

use common::cells::run;

use std::path::Path;

use serde_json::Value;
use waypath::cells::Session;

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
    std::fs::write(dir.join(format!("hidden{seed}.csv")), rows_text(seed, n)).unwrap();
}

fn rows_text(seed: u64, n: usize) -> String {
    let mut s = Stream(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1);
    let mut text = String::from("w,x,y\n");
    for _ in 0..n {
        let (u, w) = (s.normal(), s.normal());
        let x = 0.5 * w + TO_X * u + s.normal();
        let y = 1.0 + SLOPE * x + 0.7 * w + TO_Y * u + s.normal();
        text.push_str(&format!("{w:.6},{x:.6},{y:.6}\n"));
    }
    text
}

/// The sample mean and sd (n − 1) of column x of the rows.
fn exposure_mean_sd(seed: u64, n: usize) -> (f64, f64) {
    let x: Vec<f64> = rows_text(seed, n).lines().skip(1).map(|l| l.split(',').nth(1).unwrap().parse().unwrap()).collect();
    let mean = x.iter().sum::<f64>() / n as f64;
    (mean, (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt())
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
    // Waypath's exposure priors, told in x's unit: the intercept's centred
    // on x's sample mean, ten sample sds wide; the spread's half_normal(2 sds).
    let (mean, sd) = exposure_mean_sd(11, 300);
    let used = &json["exposure_priors"];
    assert!(used["set_by"].as_str().unwrap().starts_with("Waypath default"), "{used}");
    let prior = |k: usize| waypath::model::Prior::parse(used["parameters"][k]["prior"].as_str().unwrap()).unwrap();
    assert_eq!(used["parameters"][0]["parameter"], "exposure intercept");
    match prior(0) {
        waypath::model::Prior::Normal { mean: m, sd: s } => {
            assert!((m - mean).abs() < 1e-3 * mean.abs().max(1.0) && (s / (10.0 * sd) - 1.0).abs() < 1e-3, "{m}, {s} against {mean}, {sd}")
        }
        other => panic!("{other}"),
    }
    assert_eq!(used["parameters"][2]["parameter"], "exposure spread");
    match prior(2) {
        waypath::model::Prior::HalfNormal { sd: s } => assert!((s / (2.0 * sd) - 1.0).abs() < 1e-3, "{s} against {sd}"),
        other => panic!("{other}"),
    }
}

/// Stated exposure priors, in x's unit and wide, with strength priors on
/// the truth: the 98% interval covers the true slope, and the result lists
/// the stated priors as the ones used.
#[test]
fn stated_exposure_priors_recover_the_slope_and_are_named() {
    let dir = std::env::temp_dir().join(format!("wp-hidden-stated-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = session_with(&dir, 41);
    let json = last_json(
        &mut session,
        "robustness of m: x refit with hidden to x normal(0.8, 0.05) and to y normal(0.9, 0.05) \
         exposure priors spread half_normal(3), intercepts normal(0, 5), slopes normal(0, 5) intervals 98% with nuts seed 7",
    );
    std::fs::remove_dir_all(&dir).ok();
    let (rm, rl, ru) = summary(&json["refitted"]);
    assert!(rl <= SLOPE && SLOPE <= ru, "true slope {SLOPE} outside the refit's 98% interval [{rl}, {ru}] (mean {rm})");
    let used = &json["exposure_priors"];
    assert_eq!(used["set_by"], "stated in the cell");
    let listed: Vec<(String, String)> = used["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| (p["parameter"].as_str().unwrap().to_string(), p["prior"].as_str().unwrap().to_string()))
        .collect();
    let expected = [("exposure intercept", "normal(0, 5)"), ("exposure w slope", "normal(0, 5)"), ("exposure spread", "half_normal(3)")];
    assert_eq!(listed, expected.map(|(a, b)| (a.to_string(), b.to_string())));
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
        (
            "robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) exposure priors intercepts normal(0, 5), slopes normal(0, 5)",
            "the exposure priors miss spread",
        ),
        (
            "robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) exposure priors intercepts normal(0, 5), slopes normal(0, 5), spread normal(0, 1)",
            "allows negative values",
        ),
        (
            "robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) exposure priors intercepts normal(0, 5), slope normal(0, 5), spread half_normal(1)",
            "`slope normal(0, 5)` is not one of the exposure priors",
        ),
        (
            "robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) exposure priors intercepts normal(0, 5), slopes normal(0, 5), slopes normal(0, 1), spread half_normal(1)",
            "written twice",
        ),
        (
            "robustness of m: x refit with hidden to x normal(0, 1) and to y normal(0, 1) exposure priors intercepts uniform(0, 5), slopes normal(0, 5), spread half_normal(1)",
            "hard ends",
        ),
    ] {
        let out = run(&mut session, cell);
        let error = out.error.expect(cell).describe();
        assert!(error.contains(expected), "{cell}: {error}");
    }
}

/// The hidden-causes demo's refit, cell for cell from
/// `demo-notebooks/make_notebooks.py` on its own `reaches.csv`, with the
/// default sampler settings: with each reach's hidden value integrated out
/// the chains settle (R-hat at most 1.01, the limit of Vehtari et al. 2021)
/// and the slope's draws count for many independent ones.
#[test]
fn the_demo_refit_mixes() {
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo-notebooks");
    let mut session = Session::new(&demo);
    last_json(
        &mut session,
        "table reaches from \"data/reaches.csv\":\n    buffer: category(none, planted)\n    temp: real in °C\n    gradient: real in %\n    mayflies: real in nymphs per m²\n    stoneflies: binary\n\
         model nymphs:\n    mayflies from temp, gradient, buffer using reaches\nfit nymphs",
    );
    let json = last_json(&mut session, "robustness of nymphs: temp refit with hidden to temp normal(-0.5, 0.25) and to mayflies normal(3, 1.5)");
    let diagnostics = json["diagnostics"].as_array().unwrap();
    assert_eq!(diagnostics.len(), 2, "{diagnostics:?}");
    for d in diagnostics {
        let (rhat, bulk, tail) = (d["r_hat"].as_f64().unwrap(), d["effective_draws"]["bulk"].as_f64().unwrap(), d["effective_draws"]["tail"].as_f64().unwrap());
        eprintln!("{}: R-hat {rhat:.4}, bulk ESS {bulk:.0}, tail ESS {tail:.0}", d["quantity"]);
        assert!(rhat <= 1.01, "{d}");
        assert!(bulk >= 800.0 && tail >= 800.0, "{d}");
    }
    assert!(json["warnings"].as_array().unwrap().is_empty(), "{}", json["warnings"]);
    // Omitted-variable bias of a linear slope (Wooldridge, Introductory
    // Econometrics §3.3, recalled): leaving out a cause u of both gives a
    // slope of temp larger by b·a / var(temp | gradient, buffer), so the
    // refit moves it by about minus the product's mean over temp's
    // residual variance, here worked out by least squares from the CSV.
    let (fitted, refitted) = (json["fitted"]["mean"].as_f64().unwrap(), json["refitted"]["mean"].as_f64().unwrap());
    let product = json["product"]["mean"].as_f64().unwrap();
    let residual_variance = temp_residual_variance(&demo.join("data/reaches.csv"));
    let expected = -product / residual_variance;
    eprintln!("fitted {fitted:.3}, refitted {refitted:.3}, product {product:.3}, residual variance {residual_variance:.3}, expected shift {expected:.3}");
    assert!(((refitted - fitted) / expected - 1.0).abs() < 0.1, "shift {} against {expected}", refitted - fitted);
}

/// The residual variance of temp regressed on an intercept, gradient and
/// a planted buffer (normal equations solved by Cramer's rule).
fn temp_residual_variance(csv: &Path) -> f64 {
    let text = std::fs::read_to_string(csv).unwrap();
    let rows: Vec<[f64; 4]> = text
        .lines()
        .skip(1)
        .map(|line| {
            let f: Vec<&str> = line.split(',').collect();
            [1.0, f[3].parse().unwrap(), if f[1] == "planted" { 1.0 } else { 0.0 }, f[2].parse().unwrap()]
        })
        .collect();
    let mut xtx = [[0.0; 3]; 3];
    let mut xty = [0.0; 3];
    for r in &rows {
        for j in 0..3 {
            xty[j] += r[j] * r[3];
            for k in 0..3 {
                xtx[j][k] += r[j] * r[k];
            }
        }
    }
    let det3 = |m: &[[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0]) + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let whole = det3(&xtx);
    let coefficients: Vec<f64> = (0..3)
        .map(|j| {
            let mut m = xtx;
            for (k, row) in m.iter_mut().enumerate() {
                row[j] = xty[k];
            }
            det3(&m) / whole
        })
        .collect();
    let sum: f64 = rows.iter().map(|r| (r[3] - (0..3).map(|j| coefficients[j] * r[j]).sum::<f64>()).powi(2)).sum();
    sum / (rows.len() - 3) as f64
}

/// A yes/no outcome with a hidden cause of both, simulated here: yes with
/// chance `logistic(−0.5 + SLOPE·x + 0.7·w + 1.5·u)`, x as above. The
/// refit's model is the one the rows come from with u integrated out, so
/// with strength priors on the truth its 98% interval covers the true
/// log-odds slope, while the plain fit leans on x for u's part.
#[test]
fn a_yes_no_refit_with_priors_on_the_truth_covers_the_true_log_odds_slope() {
    let dir = std::env::temp_dir().join(format!("wp-hidden-yes-no-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut s = Stream(51u64.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1);
    let mut text = String::from("w,x,y\n");
    for _ in 0..300 {
        let (u, w) = (s.normal(), s.normal());
        let x = 0.5 * w + TO_X * u + s.normal();
        let eta = -0.5 + SLOPE * x + 0.7 * w + 1.5 * u;
        let yes = s.uniform() < 1.0 / (1.0 + (-eta).exp());
        text.push_str(&format!("{w:.6},{x:.6},{}\n", if yes { "yes" } else { "no" }));
    }
    std::fs::write(dir.join("yesno.csv"), text).unwrap();
    let mut session = Session::new(&dir);
    last_json(
        &mut session,
        "table t from \"yesno.csv\":\n    w: real\n    x: real\n    y: binary\nmodel m:\n    y from x, w using t\n    family bernoulli\nfit m with nuts seed 3",
    );
    let json = last_json(
        &mut session,
        "robustness of m: x refit with hidden to x normal(0.8, 0.05) and to y normal(1.5, 0.1) \
         exposure priors intercepts normal(0, 5), slopes normal(0, 5), spread half_normal(3) intervals 98% \
         with nuts chains 2 settle 500 draws 500 seed 8",
    );
    std::fs::remove_dir_all(&dir).ok();
    assert_eq!(json["scale"], "log odds");
    let (fm, fl, fu) = summary(&json["fitted"]);
    let (rm, rl, ru) = summary(&json["refitted"]);
    eprintln!("fitted {fm:.3} [{fl:.3}, {fu:.3}], refitted {rm:.3} [{rl:.3}, {ru:.3}]");
    assert!(rl <= SLOPE && SLOPE <= ru, "true slope {SLOPE} outside the refit's 98% interval [{rl}, {ru}] (mean {rm})");
    assert!(rm < fm, "the refit should take u's part off the plain slope: fitted {fm}, refitted {rm}");
    let warnings = json["warnings"].to_string();
    assert!(!warnings.contains("divergent"), "{warnings}");
}
