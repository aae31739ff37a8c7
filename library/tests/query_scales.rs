//! Contrast scales beyond means and outcomes, end to end through cells:
//! `on log-times` and `on medians` for times, `on scores` for a graded
//! outcome (issue 18). The numbers are checked against scipy in
//! tests/python/test_priors_and_scales_reference.py; here the statement's
//! reading, its notes naming the scale, and its refusals.

mod model_fixtures;

mod common;

use common::cells::run;

use model_fixtures::{orchard, orchard_with_times};
use waypath::cells::Session;

fn fitted(body: &str, table: waypath::table::Table) -> Session {
    let mut session = Session::new(".");
    session.put_table("trees", table);
    let out = run(&mut session, &format!("model m:\n    {}\nfit m with laplace draws 300 seed 2\n", body.replace('\n', "\n    ")));
    assert!(out.error.is_none(), "{:?}", out.error);
    session
}

#[test]
fn a_time_contrast_reads_on_medians_and_on_log_times_with_notes_naming_the_scale() {
    let mut session = fitted("ripening from girth using trees\nfamily weibull cut short by season_over", orchard_with_times(120, 3));
    let out = run(&mut session, "contrast m: girth 30 vs 20 on medians\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().expect("json");
    assert_eq!((json["on"].as_str(), json["scale"].as_str()), (Some("medians"), Some("median ripening")));
    assert_eq!(json["in_outcome_unit"], true);
    // the fixture's ripening grows with girth, so the median does too
    assert!(json["mean"].as_f64().expect("mean") > 0.0, "{json}");
    assert!(out.displays[0].plain.contains("scale·(ln 2)^(1/shape)"), "{}", out.displays[0].plain);
    let out = run(&mut session, "contrast m: girth 30 vs 20 on log-times over rows\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().expect("json");
    assert_eq!((json["on"].as_str(), json["in_outcome_unit"].as_bool(), json["unit"].is_null()), (Some("log-times"), Some(false), true));
    assert!(out.displays[0].plain.contains("ratio of the mean times"), "{}", out.displays[0].plain);
}

#[test]
fn a_graded_contrast_on_scores_is_one_contrast_of_the_latent_score() {
    let mut table = orchard(150, 4);
    // an ordered grade: girth cut into three classes, lowest first
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth").to_vec();
    let codes = girth.iter().map(|g| if *g < 22.0 { 0 } else if *g < 28.0 { 1 } else { 2 }).collect();
    table.columns.push(model_fixtures::column("vigour", model_fixtures::category(codes, &["weak", "fair", "strong"])));
    let mut session = fitted("vigour from age, rootstock using trees\nfamily graded", table);
    let out = run(&mut session, "contrast m: rootstock on scores\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().expect("json");
    assert!(json.get("levels").is_none(), "one contrast, not one per level: {json}");
    assert_eq!(json["on"], "scores");
    assert!(out.displays[0].plain.contains("log-odds"), "{}", out.displays[0].plain);
    // without the option: one contrast per level of the outcome
    let out = run(&mut session, "contrast m: rootstock\n");
    assert!(out.displays[0].json.as_ref().expect("json").get("levels").is_some());
}

#[test]
fn a_scale_the_family_has_not_is_refused_naming_the_ones_it_has() {
    let mut session = fitted("yield from girth using trees", orchard(60, 1));
    let out = run(&mut session, "contrast m: girth on medians\n");
    let error = out.error.expect("refused");
    assert_eq!(error.line, Some(1), "{error:?}");
    assert!(error.message.contains("`on medians` needs a time outcome") && error.message.contains("`on means` or `on outcomes`"), "{}", error.message);
    let mut session = fitted("ripening from girth using trees\nfamily exponential", orchard_with_times(60, 1));
    let error = run(&mut session, "contrast m: girth on scores\n").error.expect("refused");
    assert!(error.message.contains("needs a graded outcome") && error.message.contains("`on medians`"), "{}", error.message);
}
