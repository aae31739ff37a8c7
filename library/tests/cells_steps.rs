//! The `steps(c)` term through the cell language, on invented orchard
//! rows made by `simulate` with a fixed seed: the estimates table's
//! derived rows, `plot … steps`, `recover` against the simulation's
//! truth, and the predictive checks.

mod common;

use common::cells::{last_json, run};
use waypath::cells::Session;

/// The yield climbs with the canopy by unequal steps, 1, 0.3, 2 and
/// 0.7 kg: a whole effect of 4 kg shared 0.25, 0.075, 0.5 and 0.175 by
/// the mechanism's `steps(…)`; the effect at a level is the sum of the
/// steps below it.
const ORCHARD: &str = "graph g:
    canopy -> yield
    girth -> yield
simulate orchard from g rows 400 seed 23:
    canopy = category(open 0.2, sparse 0.2, partial 0.2, dense 0.2, closed 0.2)
    girth = normal(20, 4)
    yield = normal(10 + steps(canopy, 4: sparse 0.25, partial 0.075, dense 0.5, closed 0.175) + 0.5 * girth, 1)
";
const STEPS: [(&str, f64); 4] =
    [("open to sparse", 1.0), ("sparse to partial", 0.3), ("partial to dense", 2.0), ("dense to closed", 0.7)];

fn fitted() -> Session {
    let mut session = Session::new(".");
    last_json(&mut session, ORCHARD);
    last_json(&mut session, "model m:\n    yield from steps(canopy), girth using orchard");
    last_json(&mut session, "fit m with nuts chains 2 settle 300 draws 300 seed 5");
    session
}

#[test]
fn the_estimates_table_adds_the_whole_effect_and_the_shares() {
    let mut session = fitted();
    let json = last_json(&mut session, "show m");
    let estimates = json["estimates"].as_array().expect("estimates");
    let find = |label: &str| estimates.iter().find(|e| e["parameter"] == label).unwrap_or_else(|| panic!("no row {label} in {estimates:?}"));
    let whole = find("canopy steps");
    let total: f64 = STEPS.iter().map(|(_, v)| v).sum();
    let bounds = |row: &serde_json::Value| (row["interval"]["lower"].as_f64().unwrap(), row["interval"]["upper"].as_f64().unwrap());
    let (lower, upper) = bounds(whole);
    assert!(lower < total && total < upper, "{whole}");
    let mut share_means = 0.0;
    for (between, truth) in STEPS {
        let share = find(&format!("canopy share[{between}]"));
        share_means += share["mean"].as_f64().unwrap();
        let (lower, upper) = bounds(share);
        assert!(lower < truth / total && truth / total < upper, "{between}: {share}");
    }
    // Shares sum to 1 in every draw, so their means do too.
    assert!((share_means - 1.0).abs() < 1e-9, "{share_means}");
}

#[test]
fn the_steps_figure_draws_every_level_and_its_table_climbs() {
    let mut session = fitted();
    let out = run(&mut session, "plot m steps intervals 99%");
    assert!(out.error.is_none(), "{:?}", out.error.map(|e| e.describe()));
    let display = &out.displays[0];
    let svg = display.svg.as_deref().expect("a figure");
    assert!(svg.contains("<title>steps: canopy in m</title>"), "{svg}");
    for level in ["open", "sparse", "partial", "dense", "closed"] {
        assert!(svg.contains(&format!(">{level}<")), "level {level} labelled");
    }
    let json = display.json.as_ref().expect("JSON");
    let levels = json["levels"].as_array().unwrap();
    let means: Vec<f64> = levels.iter().map(|l| l["mean"].as_f64().unwrap()).collect();
    assert_eq!(means[0], 0.0);
    assert!(means.windows(2).all(|w| w[1] > w[0]), "{means:?}");
    let mut truth = 0.0;
    for (level, (_, step)) in levels[1..].iter().zip(STEPS) {
        truth += step;
        assert!(level["lower"].as_f64().unwrap() < truth && truth < level["upper"].as_f64().unwrap(), "{level}");
    }
    let error = run(&mut session, "plot m steps of girth").error.expect("refused").describe();
    assert!(error.contains("girth") && error.contains("canopy"), "{error}");
}

/// `recover` finds the truth by least squares of the mechanism's mean on
/// the model's design (`query::recover`): the indicator mechanism is the
/// steps' design exactly, so every step has a true value.
#[test]
fn recover_compares_the_steps_with_the_mechanism() {
    let mut session = fitted();
    let json = last_json(&mut session, "recover m on orchard with nuts chains 2 settle 300 draws 300 seed 6");
    let parameters = json["parameters"].as_array().unwrap();
    for (between, truth) in STEPS {
        let label = format!("canopy step[{between}]");
        let row = parameters.iter().find(|p| p["name"] == label.as_str()).unwrap_or_else(|| panic!("{label}"));
        assert!((row["truth"].as_f64().unwrap() - truth).abs() < 1e-6, "{row}");
    }
}

#[test]
fn predictive_checks_run_on_a_steps_model() {
    let mut session = fitted();
    let prior = last_json(&mut session, "prior check m sets 50 seed 3");
    let posterior = last_json(&mut session, "check m sets 50 seed 3");
    for json in [prior, posterior] {
        assert_eq!(json["sets"], 50);
        assert!(json["statistics"].as_array().is_some_and(|s| !s.is_empty()), "{json}");
    }
}

#[test]
fn a_steps_mechanism_names_real_levels_and_shares_adding_to_one() {
    let mut session = Session::new(".");
    let cell = |steps: &str| ORCHARD.replace("steps(canopy, 4: sparse 0.25, partial 0.075, dense 0.5, closed 0.175)", steps);
    let error = run(&mut session, &cell("steps(canopy, 4: sparse 0.25, partial 0.075, thick 0.5, closed 0.175)")).error.expect("refused");
    assert!(error.describe().contains("thick"), "{}", error.describe());
    let error = run(&mut session, &cell("steps(canopy, 4: sparse 0.5, partial 0.075, dense 0.5, closed 0.175)")).error.expect("refused");
    assert!(error.describe().contains("add to"), "{}", error.describe());
}

/// A Laplace fit takes the normal approximation at the mode (the exact
/// normal draws do not apply to steps), and the left-out scores, which
/// read each row's density under the steps' effects, put the steps model
/// ahead of one without the canopy, whose 4 kg climb the simulation put
/// in every row.
#[test]
fn laplace_fits_and_left_out_scores_take_a_steps_model() {
    let mut session = fitted();
    let json = last_json(&mut session, "fit m with laplace draws 2000 seed 4");
    assert_eq!(json["method"], "laplace");
    let estimates = json["estimates"].as_array().unwrap();
    assert!(estimates.iter().any(|e| e["parameter"] == "canopy step[partial to dense]"), "{json}");
    last_json(&mut session, "model plain:\n    yield from girth using orchard");
    last_json(&mut session, "fit plain with laplace draws 2000 seed 4");
    let scores = last_json(&mut session, "score predictions of m, plain");
    let models = scores["models"].as_array().unwrap();
    assert_eq!(models[0]["model"], "m", "{scores}");
}
