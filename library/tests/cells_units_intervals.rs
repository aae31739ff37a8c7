//! Units and interval masses in what statements print (issue 15, section 2).
//!
//! Units follow dimensional analysis (BIPM, *The International System of
//! Units*, 9th ed., §2.3.4: a quotient of quantities has the quotient of
//! their units): on an identity link an intercept, a level offset and the
//! residual spread are in the outcome's unit and a slope is outcome unit
//! per predictor unit; a coefficient on a logit scale has none.
//!
//! Interval masses are checked against the normal quantile function
//! (Abramowitz & Stegun 1964, table 26.1; values recalled): for a posterior
//! that is close to normal the central interval of mass m spans
//! mean ± z·sd with z = Φ⁻¹((1 + m)/2): 0.6745 for 50%, 1.2816 for 80%,
//! 1.6449 for 90%.

mod common;

use common::cells::run;

use serde_json::Value;
use waypath::cells::Session;

const Z50: f64 = 0.6745;
const Z80: f64 = 1.2816;
const Z90: f64 = 1.6449;

fn last(session: &mut Session, cell: &str) -> (String, Value) {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    let d = out.displays.last().expect("a display");
    (d.plain.clone(), d.json.clone().expect("a JSON structure"))
}

fn error_of(session: &mut Session, cell: &str) -> String {
    let out = run(session, cell);
    out.error.map(|e| e.describe()).unwrap_or_else(|| panic!("`{cell}` should fail"))
}

/// An orchard of 600 invented trees: three rootstocks, girth in cm, yield
/// in kg (yield = 5 + 2 [semi] + 4 [standard] + 0.3 girth + noise), and a
/// yes/no `pruned` that depends on girth. Noise from a fixed LCG.
fn orchard() -> Session {
    static NEXT: std::sync::atomic::AtomicUsize = std::sync::atomic::AtomicUsize::new(0);
    let n = NEXT.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    let dir = std::env::temp_dir().join(format!("waypath-units-{}-{n}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut state: u64 = 12345;
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    let mut csv = String::from("rootstock,girth,yield,pruned\n");
    for i in 0..600 {
        let stock = ["dwarf", "semi", "standard"][i % 3];
        let girth = 20.0 + 15.0 * uniform();
        let noise: f64 = (0..12).map(|_| uniform()).sum::<f64>() - 6.0;
        let y = 5.0 + [0.0, 2.0, 4.0][i % 3] + 0.3 * girth + noise;
        let pruned = u8::from(uniform() < 1.0 / (1.0 + (-(girth - 27.5) / 4.0f64).exp()));
        csv.push_str(&format!("{stock},{girth:.3},{y:.3},{pruned}\n"));
    }
    std::fs::write(dir.join("orchard.csv"), csv).unwrap();
    let mut session = Session::new(&dir);
    last(
        &mut session,
        "table trees from \"orchard.csv\":
    rootstock: category(dwarf, semi, standard)
    girth: real in cm
    yield: real in kg
    pruned: binary",
    );
    last(&mut session, "model m:\n    yield from rootstock, girth using trees");
    session
}

fn estimate<'j>(json: &'j Value, parameter: &str) -> &'j Value {
    json["estimates"].as_array().unwrap().iter().find(|e| e["parameter"] == parameter).unwrap_or_else(|| panic!("{parameter} in {json}"))
}

#[test]
fn fit_and_contrast_numbers_carry_the_units_their_columns_declare() {
    let mut session = orchard();
    let (plain, json) = last(&mut session, "fit m with laplace draws 4000");
    assert_eq!(estimate(&json, "rootstock[semi]")["unit"], "kg");
    assert_eq!(estimate(&json, "girth slope")["unit"], "kg per cm");
    assert_eq!(estimate(&json, "spread")["unit"], "kg");
    let slope_row = plain.lines().find(|l| l.contains("girth slope")).unwrap();
    assert!(slope_row.contains("kg per cm"), "{slope_row}");

    let (plain, json) = last(&mut session, "contrast m: rootstock standard vs dwarf");
    assert_eq!(json["unit"], "kg");
    // the true difference is 4 kg; the heading says so in kg, the mean
    // and the interval's upper end carrying the unit
    assert!((json["mean"].as_f64().unwrap() - 4.0).abs() < 0.5, "{json}");
    let heading = plain.lines().next().unwrap();
    assert!(heading.matches(" kg").count() >= 2, "{heading}");

    // a logit-link coefficient and a difference in a probability have no unit
    last(&mut session, "model p:\n    pruned from girth using trees\n    family bernoulli");
    let (_, json) = last(&mut session, "fit p with laplace");
    assert_eq!(estimate(&json, "girth slope")["unit"], Value::Null);
    let (_, json) = last(&mut session, "contrast p: girth 30 vs 25");
    assert_eq!(json["unit"], Value::Null);
}

/// `(mean − lower) / sd` and `(upper − mean) / sd` of one estimate.
fn half_widths_in_sd(e: &Value) -> (f64, f64) {
    let (mean, sd) = (e["mean"].as_f64().unwrap(), e["sd"].as_f64().unwrap());
    ((mean - e["interval"]["lower"].as_f64().unwrap()) / sd, (e["interval"]["upper"].as_f64().unwrap() - mean) / sd)
}

#[test]
fn an_interval_option_and_the_session_setting_set_the_mass_the_normal_quantile_confirms() {
    let mut session = orchard();
    // 600 rows: the slope's posterior is a t with ~596 degrees of freedom, normal to 3 decimals
    let (plain, json) = last(&mut session, "fit m intervals 80% with laplace draws 40000 seed 3");
    assert_eq!(json["interval_mass"], 0.8);
    assert!(plain.contains("mean (80% interval)"), "{plain}");
    let (lo, hi) = half_widths_in_sd(estimate(&json, "girth slope"));
    assert!((lo - Z80).abs() < 0.05 && (hi - Z80).abs() < 0.05, "80%: {lo} {hi}, wanted {Z80}");

    // the default stays 90%
    let (_, json) = last(&mut session, "show m");
    assert_eq!(json["interval_mass"], 0.9);
    let (lo, _) = half_widths_in_sd(estimate(&json, "girth slope"));
    assert!((lo - Z90).abs() < 0.05, "90%: {lo}, wanted {Z90}");

    // the session setting, written as a share, applies to later statements
    let (text, _) = {
        let out = run(&mut session, "intervals 0.5");
        assert!(out.error.is_none());
        (out.displays[0].plain.clone(), ())
    };
    assert!(text.contains("50%"), "{text}");
    let (plain, json) = last(&mut session, "show m");
    assert_eq!(json["interval_mass"], 0.5);
    assert!(plain.contains("mean (50% interval)"), "{plain}");
    let (lo, hi) = half_widths_in_sd(estimate(&json, "girth slope"));
    assert!((lo - Z50).abs() < 0.05 && (hi - Z50).abs() < 0.05, "50%: {lo} {hi}, wanted {Z50}");

    // a contrast follows the setting; its own option overrides it. The
    // difference of two normal coefficients is normal, so the half-widths
    // of its 50% and 90% intervals are in the ratio z50 / z90.
    let (plain, c50) = last(&mut session, "contrast m: rootstock standard vs dwarf");
    assert_eq!(c50["mass"], 0.5);
    assert!(plain.contains("50% lower") && plain.contains("draws above 0"), "{plain}");
    let (_, c90) = last(&mut session, "contrast m: rootstock standard vs dwarf intervals 90%");
    assert_eq!(c90["mass"], 0.9);
    let half = |c: &Value| (c["upper"].as_f64().unwrap() - c["lower"].as_f64().unwrap()) / 2.0;
    let ratio = half(&c50) / half(&c90);
    assert!((ratio - Z50 / Z90).abs() < 0.03, "ratio {ratio}, wanted {}", Z50 / Z90);
}

#[test]
fn a_wrong_interval_mass_is_refused_naming_the_cell_line() {
    let mut session = orchard();
    for (cell, line) in [
        ("intervals 100%", 1),
        ("intervals 0", 1),
        ("\nintervals ninety", 2),
        ("fit m intervals 80 with laplace", 1),
        ("fit m intervals", 1),
        ("show m intervals 1.5", 1),
    ] {
        let e = error_of(&mut session, cell);
        assert!(e.starts_with(&format!("cell line {line}:")), "{cell}: {e}");
        assert!(e.contains("interval"), "{cell}: {e}");
    }
}

#[test]
fn compare_routes_compares_the_settings_named_and_names_them() {
    let mut session = orchard();
    last(&mut session, "graph g:\n    rootstock -> girth -> yield\n    rootstock -> yield");
    let cell = "compare routes for total effect of rootstock on yield in g using trees setting standard vs semi with laplace";
    let (plain, json) = last(&mut session, cell);
    assert_eq!((json["to"].as_str(), json["from"].as_str()), (Some("standard"), Some("semi")));
    assert_eq!(json["unit"], "kg");
    assert!(plain.lines().next().unwrap().contains("standard vs semi"), "{plain}");
    // the invented orchard has standard − semi = 2 kg at any girth, and girth does not depend on rootstock
    assert!((json["adjustment"]["mean"].as_f64().unwrap() - 2.0).abs() < 0.5, "{json}");

    let e = error_of(&mut session, "compare routes for total effect of rootstock on yield in g using trees setting tall vs semi");
    assert!(e.contains("`tall` is not a level of rootstock"), "{e}");
    let (plain, _) =
        last(&mut session, "compare routes for total effect of rootstock on yield in g using trees with laplace");
    assert!(plain.contains("name others with `setting b vs a`"), "{plain}");
}

/// The rows of the orchard CSV that a filter keeps, counted from the file.
fn csv_rows(session: &Session, keep: impl Fn(&str, f64) -> bool) -> usize {
    let text = std::fs::read_to_string(session.base_dir().join("orchard.csv")).unwrap();
    text.lines().skip(1).filter(|l| {
        let f: Vec<&str> = l.split(',').collect();
        keep(f[0], f[1].parse().unwrap())
    }).count()
}

#[test]
fn parameters_and_contrasts_on_a_thinned_level_are_marked() {
    let mut session = orchard();
    last(
        &mut session,
        "table few from \"orchard.csv\":
    rootstock: category(dwarf, semi, standard)
    girth: real in cm
    yield: real in kg
    pruned: binary
    keep where rootstock != semi or girth < 20.12",
    );
    // counted from the file, not from the table the filter made
    let semi = csv_rows(&session, |stock, girth| stock == "semi" && girth < 20.12);
    let dwarf = csv_rows(&session, |stock, _| stock == "dwarf");
    assert!(semi < 5 && dwarf >= 5, "the invented data should leave a few semi rows: {semi}");
    last(&mut session, "model t:\n    yield from rootstock, girth per rootstock using few");
    let (plain, json) = last(&mut session, "fit t with laplace");
    for (parameter, rows) in [("rootstock[semi]", semi), ("girth slope[semi]", semi), ("rootstock[dwarf]", dwarf)] {
        let e = estimate(&json, parameter);
        assert_eq!(e["rows_behind"].as_u64(), Some(rows as u64), "{parameter}: {e}");
        assert_eq!(e["sparse"], rows < 5, "{parameter}: {e}");
    }
    let semi_row = plain.lines().find(|l| l.contains("rootstock[semi]")).unwrap();
    assert!(semi_row.contains('⚠'), "{semi_row}");
    assert!(!plain.lines().find(|l| l.contains("rootstock[dwarf]")).unwrap().contains('⚠'));

    let (plain, json) = last(&mut session, "contrast t: rootstock semi vs dwarf");
    assert_eq!(json["sparse"], true);
    assert!(json["sparse_levels"][0].as_str().unwrap().starts_with("semi of rootstock"), "{json}");
    assert!(plain.contains("⚠ this contrast rests on levels"), "{plain}");
    let (_, json) = last(&mut session, "contrast t: rootstock standard vs dwarf");
    assert_eq!(json["sparse"], false);
}

/// Issue 15, section 4: a figure that leaves the spread out says so in its
/// heading, and one that names it draws it.
#[test]
fn figures_say_when_they_leave_the_spread_out() {
    let mut session = orchard();
    let out = run(&mut session, "fit m with laplace");
    let svg = out.displays.last().and_then(|d| d.svg.clone()).expect("a figure");
    let title = svg.split("<title>").nth(1).and_then(|t| t.split("</title>").next()).unwrap();
    assert!(title.contains("not drawn: spread"), "{title}");
    let out = run(&mut session, "plot m estimates of spread, girth slope");
    assert!(out.error.is_none());
    let d = out.displays.last().unwrap();
    assert!(!d.plain.contains("not drawn"), "{}", d.plain);
    let title = d.svg.as_deref().unwrap().split("<title>").nth(1).unwrap().split("</title>").next().unwrap().to_string();
    assert!(!title.contains("not drawn"), "{title}");
    assert!(d.svg.as_deref().unwrap().contains("spread"));
}
