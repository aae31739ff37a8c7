//! A time contrast through cells: the scales `on events by T` and
//! `on quantile q`, their refusals naming the cell line, and the survival
//! and hazard figure shown under the contrast. The numbers are checked
//! against scipy in tests/python/test_time_curves_reference.py.

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

fn times_session() -> Session {
    fitted("ripening from girth using trees\nfamily weibull cut short by season_over", orchard_with_times(120, 3))
}

#[test]
fn events_by_a_time_is_a_probability_and_the_figure_marks_the_time() {
    let mut session = times_session();
    let out = run(&mut session, "contrast m: girth 30 vs 20 on events by 20\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().expect("json");
    assert_eq!((json["on"].as_str(), json["in_outcome_unit"].as_bool(), json["unit"].is_null()), (Some("events"), Some(false), true));
    let (lower, upper) = (json["lower"].as_f64().expect("lower"), json["upper"].as_f64().expect("upper"));
    assert!((-1.0..=1.0).contains(&lower) && (-1.0..=1.0).contains(&upper), "{json}");
    let curves = &json["curves"];
    assert_eq!(curves["settings"].as_array().map(Vec::len), Some(2), "{json}");
    // the figure: a second output under the contrast, two panels, the time marked
    assert_eq!(out.displays.len(), 2);
    let svg = out.displays[1].svg.as_deref().expect("a figure");
    assert!(svg.contains("<title>survival curves: girth 30 vs 20 (m)</title>"), "{svg}");
    assert!(svg.contains("share without the event") && svg.contains("hazard (per"), "{svg}");
    assert!(svg.contains("ripening = 20") && svg.contains("band: 90% interval"), "{svg}");
    assert!(out.displays[1].plain.contains("survival and hazard of m at girth 30 and at 20"), "{}", out.displays[1].plain);
}

#[test]
fn a_quantile_is_in_the_outcome_unit_and_its_band_follows_intervals() {
    let mut session = times_session();
    let out = run(&mut session, "contrast m: girth 30 vs 20 on quantile 0.9 over rows intervals 80%\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().expect("json");
    assert_eq!((json["on"].as_str(), json["in_outcome_unit"].as_bool()), (Some("quantile"), Some(true)));
    assert!(out.displays[0].plain.contains("a share 0.9 of the events"), "{}", out.displays[0].plain);
    let svg = out.displays[1].svg.as_deref().expect("a figure");
    assert!(svg.contains("band: 80% interval") && svg.contains("a share 0.9 of events"), "{svg}");
}

#[test]
fn bad_times_and_shares_are_refused_on_their_line() {
    let mut session = times_session();
    for (cell, words) in [
        ("contrast m: girth on quantile 1.5\n", "strictly between 0 and 1"),
        ("contrast m: girth on events by -4\n", "needs a positive time"),
        ("contrast m: girth on events by soon\n", "takes a number, not `soon`"),
        ("contrast m: girth on quantile\n", "cannot read `on`"),
    ] {
        let error = run(&mut session, cell).error.unwrap_or_else(|| panic!("{cell} refused"));
        assert_eq!(error.line, Some(1), "{error:?}");
        assert!(error.message.contains(words), "{cell}: {}", error.message);
    }
    let mut session = fitted("yield from girth using trees", orchard(60, 1));
    let error = run(&mut session, "contrast m: girth on events by 3\n").error.expect("refused");
    assert!(error.message.contains("needs a time outcome"), "{}", error.message);
}

#[test]
fn a_contrast_of_another_family_has_no_curves() {
    let mut session = fitted("yield from girth using trees", orchard(60, 1));
    let out = run(&mut session, "contrast m: girth\n");
    assert_eq!(out.displays.len(), 1);
    assert!(out.displays[0].json.as_ref().expect("json").get("curves").is_none());
}

/// A model of times between looks through cells: the fit notes count the
/// rows between bounds and those from 0, a contrast draws its curves, and
/// what cannot take bounds yet says so on its line.
#[test]
fn a_model_between_looks_fits_contrasts_and_refuses_checks() {
    let mut table = orchard_with_times(120, 3);
    let ripening = table.column("ripening").and_then(|c| c.data.as_reals()).expect("ripening").to_vec();
    let lower: Vec<f64> = ripening.iter().enumerate().map(|(i, &t)| if i % 5 == 2 && i % 4 != 0 { 0.0 } else { t }).collect();
    let upper: Vec<f64> = ripening.iter().enumerate().map(|(i, &t)| if i % 5 == 1 { t } else { t + 3.0 }).collect();
    table.columns.retain(|c| c.name != "ripening");
    table.columns.push(model_fixtures::column("ripening", waypath::table::ColumnData::Real(lower)));
    table.columns.push(model_fixtures::column("ripe_by", waypath::table::ColumnData::Real(upper)));
    let mut session = Session::new(".");
    session.put_table("trees", table);
    let body = "ripening from girth using trees\n    family weibull came by ripe_by cut short by season_over";
    let out = run(&mut session, &format!("model m:\n    {body}\nfit m with laplace draws 300 seed 2\n"));
    assert!(out.error.is_none(), "{:?}", out.error);
    let shown: String = out.displays.iter().map(|d| d.plain.as_str()).collect();
    // rows i % 5 = 2 start at 0; i % 5 = 1 are seen; i % 4 = 0 are cut short
    let from_zero = (0..120).filter(|i| i % 5 == 2 && i % 4 != 0).count();
    let between = (0..120).filter(|i| i % 5 != 1 && i % 4 != 0).count();
    assert!(shown.contains(&format!("{between} of 120 rows had their event between their time and `ripe_by` ({from_zero} of them from 0")), "{shown}");
    let out = run(&mut session, "contrast m: girth 30 vs 20 on events by 40\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    assert!(out.displays[1].svg.as_deref().is_some_and(|s| s.contains("survival curves")));
    // Leaving one row out keeps the others' bounds: the model without row
    // 3 (a row between bounds) has the log-likelihood of the whole model
    // less that row's own term, at the same parameters.
    let model = session.model("m").expect("model m");
    let theta = vec![3.5, 0.02, 2.0];
    let rows = model.pointwise_log_likelihood(&theta, &model.fitted_rows()).expect("rows");
    let without = model.leaving_out(3).expect("refit model");
    let whole = model.log_likelihood(&theta).expect("whole");
    assert!((without.log_likelihood(&theta).expect("without") - (whole - rows[3])).abs() < 1e-9 * whole.abs());
    assert!((rows.iter().sum::<f64>() - whole).abs() < 1e-9 * whole.abs());
    let out = run(&mut session, "score predictions of m\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    for cell in ["check m\n", "prior check m\n"] {
        let error = run(&mut session, cell).error.expect("refused");
        assert!(error.message.contains("`came by ripe_by`") && error.message.contains("not available"), "{cell}: {}", error.message);
    }
}
