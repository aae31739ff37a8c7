//! `simulate` with looks (`followed until END cut short by C looked at
//! every GAP came by U`): each event is seen only between two looks, and
//! `recover` of a `came by` model on such rows (issue 18). Outside
//! references: the Weibull distribution function `1 − exp(−(t/λ)^k)` with
//! `λ = mean/Γ(1 + 1/k)` (Johnson, Kotz & Balakrishnan 1994, ch. 21;
//! recalled) for the expected number of events before the first look; the
//! rest are properties of the rule read off the whole times of the same
//! seed.

mod common;

use common::cells::run;

use serde_json::Value;
use statrs::function::gamma::ln_gamma;
use waypath::cells::{CellOutcome, Session};

fn json(out: &CellOutcome) -> Value {
    assert!(out.error.is_none(), "{:?}", out.error);
    out.displays.last().and_then(|d| d.json.clone()).expect("json")
}

/// Days to germination, Weibull with shape 1.6, mean e^(2.6 − 0.06·(warmth − 20)).
fn seeds(rule: &str, rows: usize, seed: u64) -> Session {
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

const LOOKS: &str = " followed until 30 cut short by unsprouted looked at every 4 came by sprouted_by";

#[test]
fn each_event_lies_between_the_looks_around_it() {
    let whole = seeds("", 1500, 3);
    let looked = seeds(LOOKS, 1500, 3);
    let times = column(&whole, "days");
    let (lower, upper, cut) = (column(&looked, "days"), column(&looked, "sprouted_by"), column(&looked, "unsprouted"));
    let mut before_first = 0.0;
    for i in 0..times.len() {
        let (t, l, u) = (times[i], lower[i], upper[i]);
        if cut[i] > 0.0 {
            assert!(t > 30.0 && l == 30.0 && u == 30.0, "row {i}: cut at the end, {t} {l} {u}");
            continue;
        }
        assert!(l < t && t <= u && t <= 30.0, "row {i}: {l} < {t} ≤ {u}");
        assert!(l % 4.0 == 0.0 && (u % 4.0 == 0.0 || u == 30.0) && u - l <= 4.0, "row {i}: looks at multiples of 4 or the end: {l}, {u}");
        before_first += f64::from(u8::from(l == 0.0));
    }
    // Expected events before the first look Σ F_i(4), variance Σ F(1 − F).
    let warmth = column(&looked, "warmth");
    let f: Vec<f64> = warmth
        .iter()
        .map(|w| 1.0 - (-(4.0 / (2.6 - 0.06 * (w - 20.0) - ln_gamma(1.0 + 1.0 / 1.6)).exp()).powf(1.6)).exp())
        .collect();
    let expected: f64 = f.iter().sum();
    let sd = f.iter().map(|p| p * (1.0 - p)).sum::<f64>().sqrt();
    assert!((before_first - expected).abs() < 4.0 * sd, "{before_first} rows before the first look against {expected} ± {sd}");
}

#[test]
fn bad_looks_are_refused_on_their_line() {
    for (rule, words) in [
        (" followed until 30 cut short by unsprouted looked at every -4 came by sprouted_by", "GAP a positive number"),
        (" followed until 30 cut short by unsprouted looked at every 4 came by unsprouted", "name a new column"),
        (" followed until 30 cut short by unsprouted looked at every 4 by sprouted_by", "`looked at every GAP came by COLUMN`"),
    ] {
        let mut session = Session::new(".");
        let cell = format!(
            "graph g:\n    warmth -> days\nsimulate trays from g rows 20 seed 1:\n    warmth = normal(20, 4)\n    \
             days = weibull(log = 2.6, 1.6){rule}\n"
        );
        let error = run(&mut session, &cell).error.expect("refused");
        assert!(error.message.contains(words), "{rule}: {}", error.message);
        assert_eq!(error.line, Some(5), "{error:?}");
    }
}

#[test]
fn recover_of_a_model_between_looks_covers_the_truth() {
    // Truths: slope −0.06 on the log mean, shape 1.6. Six seeded data sets;
    // a 90% interval must cover each truth in at least four (fewer under
    // Binomial(6, 0.9) with probability 0.016).
    let mut covered = [0; 2];
    for seed in 1..=6 {
        let mut session = seeds(LOOKS, 600, seed);
        let body = "days from warmth using trays\n    family weibull came by sprouted_by cut short by unsprouted";
        let answer = json(&run(&mut session, &format!("model m:\n    {body}\nrecover m on trays with laplace seed 5\n")));
        let notes: Vec<&str> = answer["notes"].as_array().expect("notes").iter().filter_map(Value::as_str).collect();
        assert!(notes.iter().any(|n| n.contains("between looks 4 apart")) && !notes.iter().any(|n| n.contains("warning")), "{notes:?}");
        let params = answer["parameters"].as_array().expect("parameters");
        for (c, (name, truth)) in covered.iter_mut().zip([("warmth slope", -0.06), ("shape", 1.6)]) {
            let p = params.iter().find(|p| p["name"] == name).expect(name);
            assert!((p["truth"].as_f64().unwrap_or_else(|| panic!("{p} {notes:?}")) - truth).abs() < 1e-12, "{p}");
            *c += usize::from(p["covered"] == true);
        }
    }
    assert!(covered.iter().all(|&c| c >= 4), "covered {covered:?} of 6");
}

#[test]
fn recover_warns_a_model_that_takes_looks_for_events() {
    // Times late enough (mean e^4 ≈ 55, shape 3) that no event comes before
    // the first look, so the model that ignores the looks can be fitted.
    let mut session = Session::new(".");
    let cell = "graph g:\n    warmth -> days\nsimulate trays from g rows 200 seed 2:\n    warmth = normal(20, 4)\n    \
                days = weibull(log = 4 - 0.02 * (warmth - 20), 3) followed until 80 cut short by unsprouted looked at every 4 came by sprouted_by\n";
    json(&run(&mut session, cell));
    assert!(column(&session, "days").iter().all(|&d| d > 0.0));
    let body = "days from warmth using trays\n    family weibull cut short by unsprouted";
    let answer = json(&run(&mut session, &format!("model m:\n    {body}\nrecover m on trays with laplace seed 5\n")));
    let notes: Vec<&str> = answer["notes"].as_array().expect("notes").iter().filter_map(Value::as_str).collect();
    assert!(notes.iter().any(|n| n.contains("warning") && n.contains("`came by sprouted_by`")), "{notes:?}");
}

#[test]
fn a_model_that_ignores_looks_from_zero_is_refused_naming_the_row() {
    let mut session = seeds(LOOKS, 300, 2);
    let error = run(&mut session, "model m:\n    days from warmth using trays\n    family weibull cut short by unsprouted\nfit m\n")
        .error
        .expect("refused");
    assert!(error.message.contains("column `days`") && error.message.contains("0 is not a positive time"), "{}", error.message);
}

/// Completion walks the looks word by word after the cut-short column, and
/// a time family's line offers `came by` beside `cut short by`.
#[test]
fn completion_offers_the_looks_and_came_by() {
    use waypath::cells::statements::body_grammar::{body_next_words, Block};
    let rule = "days = weibull(2, 1.6) followed until 30 cut short by unsprouted";
    for (typed, want) in [("", "looked"), (" looked", "at"), (" looked at", "every"), (" looked at every 4", "came"), (" looked at every 4 came", "by")] {
        let offered = body_next_words(Block::Simulate, &format!("{rule}{typed} "));
        assert!(offered.words.contains(&want), "after {typed:?}: {:?}", offered.words);
    }
    assert!(body_next_words(Block::Simulate, &format!("{rule} looked at every 4 came by ")).values);
    let family = |typed: &str| body_next_words(Block::Model, typed).words;
    assert_eq!(family("family weibull "), ["cut", "came"]);
    assert_eq!(family("family weibull came "), ["by"]);
    assert_eq!(family("family weibull cut short by unsprouted "), ["came"]);
    assert_eq!(family("family exponential came by seen_by "), ["cut"]);
    assert!(body_next_words(Block::Model, "family weibull came by ").values);
}
