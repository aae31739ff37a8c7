//! `simulate` with a follow-up rule for times (`followed until END cut
//! short by COLUMN`) and `recover` on the rows it cut short (issue 18).
//! Outside references: the Weibull survival function `exp(−(t/λ)^k)` with
//! `λ = mean/Γ(1 + 1/k)` (Johnson, Kotz & Balakrishnan 1994, ch. 21;
//! recalled) for the expected number of rows cut short; the rest are
//! properties of the rule read off the generated rows.

mod common;

use common::cells::run;

use serde_json::Value;
use statrs::function::gamma::ln_gamma;
use waypath::cells::{CellOutcome, Session};

fn json(out: &CellOutcome) -> Value {
    assert!(out.error.is_none(), "{:?}", out.error);
    out.displays.last().and_then(|d| d.json.clone()).expect("json")
}

/// Warmth in 12–28 degrees and days to germination, Weibull with shape
/// 1.6, mean e^(2.6 − 0.06·(warmth − 20)); `rule` follows the days line.
fn seeds_session(rule: &str, rows: usize) -> Session {
    seeds_session_with(rule, rows, 11)
}

fn seeds_session_with(rule: &str, rows: usize, seed: u64) -> Session {
    let mut session = Session::new(".");
    let cell = format!(
        "graph g:\n    warmth -> days\nsimulate trays from g rows {rows} seed {seed}:\n    warmth = normal(20, 4)\n    \
         days = weibull(log = 2.6 - 0.06 * (warmth - 20), 1.6){rule}\n"
    );
    json(&run(&mut session, &cell));
    session
}

fn column(session: &Session, name: &str) -> Vec<f64> {
    session.table("trays").and_then(|t| t.column(name)).and_then(|c| c.data.as_reals()).unwrap_or_else(|| panic!("{name}"))
}

#[test]
fn a_fixed_end_cuts_the_rows_whose_time_comes_later_as_often_as_the_survival_function_says() {
    let session = seeds_session(" followed until 15 cut short by unsprouted", 2000);
    let (warmth, days, cut) = (column(&session, "warmth"), column(&session, "days"), column(&session, "unsprouted"));
    for (d, c) in days.iter().zip(&cut) {
        if *c > 0.0 { assert_eq!(*d, 15.0) } else { assert!(*d <= 15.0 && *d > 0.0, "{d}") }
    }
    // Expected count Σ S_i(15), S(t) = exp(−(t/λ)^k); variance Σ S(1 − S).
    let k: f64 = 1.6;
    let survive: Vec<f64> = warmth
        .iter()
        .map(|w| {
            let lambda = (2.6 - 0.06 * (w - 20.0) - ln_gamma(1.0 + 1.0 / k)).exp();
            (-(15.0 / lambda).powf(k)).exp()
        })
        .collect();
    let expected: f64 = survive.iter().sum();
    let sd = survive.iter().map(|s| s * (1.0 - s)).sum::<f64>().sqrt();
    let seen: f64 = cut.iter().sum();
    assert!((seen - expected).abs() < 4.0 * sd, "{seen} rows cut short against {expected} ± {sd}");
}

#[test]
fn ends_drawn_per_row_leave_the_times_that_came_first_as_they_were() {
    let whole = seeds_session("", 500);
    let cut_session = seeds_session(" followed until uniform(8, 30) cut short by unsprouted", 500);
    let (times, seen, cut) = (column(&whole, "days"), column(&cut_session, "days"), column(&cut_session, "unsprouted"));
    assert_eq!(column(&whole, "warmth"), column(&cut_session, "warmth"));
    let mut cut_rows = 0;
    for ((t, s), c) in times.iter().zip(&seen).zip(&cut) {
        if *c > 0.0 {
            cut_rows += 1;
            assert!((8.0..=30.0).contains(s) && t > s, "a cut row ends within the range before its time: {s} < {t}");
        } else {
            assert_eq!(t, s, "a row followed to its event keeps its time");
        }
    }
    assert!(cut_rows > 20 && cut_rows < 480, "{cut_rows} rows cut short");
}

#[test]
fn the_simulate_cell_says_how_many_rows_were_cut_short() {
    let mut session = Session::new(".");
    let out = run(
        &mut session,
        "graph g:\n    warmth -> days\nsimulate trays from g rows 300 seed 2:\n    warmth = normal(20, 4)\n    \
         days = exponential(log = 2.5) followed until 10 cut short by unsprouted\n",
    );
    let plain = &out.displays.last().expect("display").plain;
    let cut = column(&session, "unsprouted").iter().sum::<f64>() as usize;
    assert!(plain.contains(&format!("days: {cut} of 300 rows cut short by the follow-up rule")), "{plain}");
    let listed = &out.displays.last().and_then(|d| d.json.clone()).expect("json")["cut_short"];
    assert_eq!(*listed, serde_json::json!([{"node": "days", "column": "unsprouted", "rows": cut}]));
}

/// The notes of `recover` for model `body` on the trays of `session`, and
/// whether each of `names` is covered by its interval (truths checked).
fn recovered(session: &mut Session, body: &str, names: &[(&str, f64)]) -> (Vec<String>, Vec<bool>) {
    let out = run(session, &format!("model m:\n    {body}\nrecover m on trays with laplace seed 5\n"));
    let answer = json(&out);
    let param = |name: &str| answer["parameters"].as_array().expect("parameters").iter().find(|p| p["name"] == name).cloned().expect(name);
    let covered = names
        .iter()
        .map(|(name, truth)| {
            let p = param(name);
            assert!((p["truth"].as_f64().expect("truth") - truth).abs() < 1e-12, "{p}");
            p["covered"] == true
        })
        .collect();
    let notes = answer["notes"].as_array().expect("notes").iter().filter_map(Value::as_str).map(str::to_string).collect();
    (notes, covered)
}

#[test]
fn recover_reads_the_rows_cut_short_and_covers_the_truth() {
    // The mechanism's truths: slope −0.06 on the log mean, shape 1.6. A 90%
    // interval misses one data set in ten, so six seeded data sets are
    // refitted and each truth must be covered in at least four of them
    // (under Binomial(6, 0.9) fewer happens with probability 0.016).
    let truths = [("warmth slope", -0.06), ("shape", 1.6)];
    let mut covered = [0; 2];
    for seed in 1..=6 {
        let mut session = seeds_session_with(" followed until uniform(6, 25) cut short by unsprouted", 600, seed);
        let (notes, hits) = recovered(&mut session, "days from warmth using trays\n    family weibull cut short by unsprouted", &truths);
        for (c, hit) in covered.iter_mut().zip(hits) {
            *c += usize::from(hit);
        }
        assert!(notes.iter().any(|n| n.contains("of 600 rows of days were cut short") && n.contains("unsprouted")), "{notes:?}");
        assert!(!notes.iter().any(|n| n.contains("does not read")), "{notes:?}");
    }
    assert!(covered.iter().all(|&c| c >= 4), "covered in {covered:?} of 6 data sets");
}

/// Source: algebra. The mechanism's log mean `2.6 − 0.06·(warmth − 20)`
/// on the model's design (warmth centred at its sample mean x̄) is the
/// intercept `2.6 − 0.06·(x̄ − 20)` plus −0.06 per degree, whatever rows
/// are drawn, so `recover` must state those truths to rounding. 400 rows
/// of seed 3 once lost them ("not a linear combination…"): the SVD's
/// least squares missed the intercept by 0.003.
#[test]
fn recover_states_the_exact_coefficients_whatever_the_rows() {
    for (rows, seed) in [(400, 3), (400, 4), (250, 7)] {
        let mut session = seeds_session_with("", rows, seed);
        let warmth = column(&session, "warmth");
        let centre = warmth.iter().sum::<f64>() / warmth.len() as f64;
        let (notes, _) = recovered(
            &mut session,
            "days from warmth using trays\n    family weibull",
            &[("intercept", 2.6 - 0.06 * (centre - 20.0)), ("warmth slope", -0.06)],
        );
        assert!(!notes.iter().any(|n| n.contains("not a linear combination")), "{rows} rows, seed {seed}: {notes:?}");
    }
}

#[test]
fn recover_warns_a_model_that_takes_follow_up_ends_for_events() {
    let mut session = seeds_session(" followed until uniform(6, 25) cut short by unsprouted", 300);
    let (notes, _) = recovered(&mut session, "days from warmth using trays\n    family weibull", &[]);
    assert!(notes.iter().any(|n| n.contains("does not read unsprouted") && n.contains("cut short by unsprouted")), "{notes:?}");
}

#[test]
fn follow_up_rules_are_refused_where_they_cannot_hold() {
    let mut session = Session::new(".");
    run(&mut session, "graph g:\n    warmth -> days\n");
    let error = |session: &mut Session, days: &str| {
        let out = run(session, &format!("simulate s from g rows 50 seed 1:\n    warmth = normal(20, 4)\n    days = {days}\n"));
        out.error.map(|e| e.message).unwrap_or_else(|| panic!("`{days}` should be refused"))
    };
    let e = error(&mut session, "normal(10, 2) followed until 12 cut short by ended");
    assert!(e.contains("only a time") && e.contains("days is normal"), "{e}");
    let e = error(&mut session, "weibull(10, 2) followed until 12 cut short by warmth");
    assert!(e.contains("warmth is a node of graph g"), "{e}");
    let e = error(&mut session, "weibull(10, 2) followed until 12");
    assert!(e.contains("followed until END cut short by COLUMN"), "{e}");
    let e = error(&mut session, "weibull(10, 2) followed until warmth - 30 cut short by ended");
    assert!(e.contains("in simulated row 1") && e.contains("must be a positive time"), "{e}");
    let e = error(&mut session, "weibull(10, 2) followed until uniform(20, 10) cut short by ended");
    assert!(e.contains("must not exceed"), "{e}");
}
