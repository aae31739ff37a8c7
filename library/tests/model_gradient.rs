//! Analytic gradients of the log posterior against central finite
//! differences, for every family and every kind of term.
//!
//! Source: the central difference (f(x+h) − f(x−h)) / 2h has error O(h²)
//! (Nocedal & Wright, Numerical Optimization, 2nd ed., §8.1; recalled); a
//! Richardson combination of steps h and h/2 cancels the h² term, leaving
//! agreement well inside 1e-6 relative for a correct gradient.

mod model_fixtures;

use model_fixtures::{assert_gradient_matches, build, orchard, orchard_with_cover, orchard_with_times};

/// Check the gradient at five random points around the initial point.
fn check_gradient(body: &str, seed: u64) {
    check_gradient_on(body, &orchard(120, 7), seed);
}

/// [`check_gradient`] on `table`.
fn check_gradient_on(body: &str, table: &waypath::table::Table, seed: u64) {
    assert_gradient_matches(&build(body, table), body, seed, 5, 0.3);
}

const TERMS: &str = "rootstock, soil, girth per rootstock, powers(age, 3)";
const SPLINE_TERMS: &str = "rootstock, spline(age, 6), girth";

#[test]
fn normal_gradient_matches_finite_differences() {
    check_gradient(&format!("yield from {TERMS} using trees"), 1);
    check_gradient(&format!("yield from {SPLINE_TERMS} using trees"), 2);
    check_gradient("yield from girth using trees\ncentre off", 3);
}

#[test]
fn normal_gradient_with_every_spread_prior() {
    for prior in ["exponential(0.5)", "half_normal(4)", "lognormal(1, 0.5)"] {
        check_gradient(&format!("yield from girth, rootstock using trees\nprior spread: {prior}"), 4);
    }
}

#[test]
fn normal_gradient_with_every_coefficient_prior() {
    for prior in ["normal(0, 2)", "student(0, 2, 3)"] {
        check_gradient(
            &format!("yield from {SPLINE_TERMS} using trees\nprior slopes: {prior}\nprior weights: {prior}"),
            5,
        );
    }
    check_gradient("yield from rootstock using trees\nprior intercepts: student(20, 10, 4)", 6);
}

#[test]
fn bernoulli_gradient_matches_finite_differences() {
    check_gradient(&format!("healthy from {TERMS} using trees\nfamily bernoulli"), 7);
    check_gradient(&format!("healthy from {SPLINE_TERMS} using trees\nfamily bernoulli"), 8);
}

#[test]
fn binomial_gradient_matches_finite_differences() {
    check_gradient(&format!("set from {TERMS} using trees\nfamily binomial out of visits"), 9);
    check_gradient(&format!("set from {SPLINE_TERMS} using trees\nfamily binomial out of visits"), 10);
}

#[test]
fn poisson_gradient_matches_finite_differences() {
    check_gradient(&format!("fruit from {TERMS} using trees\nfamily poisson"), 11);
    check_gradient(&format!("fruit from {SPLINE_TERMS} using trees\nfamily poisson"), 12);
}

/// The gamma-poisson family: the coefficients and log(overdispersion),
/// with the default prior and declared ones (`family::shaped` has the row's
/// formula against its plain definition).
#[test]
fn gamma_poisson_gradient_matches_finite_differences() {
    check_gradient(&format!("fruit from {TERMS} using trees\nfamily gamma_poisson"), 17);
    check_gradient(&format!("fruit from {SPLINE_TERMS} using trees\nfamily gamma_poisson"), 18);
    for prior in ["exponential(2)", "lognormal(-1, 0.5)"] {
        check_gradient(&format!("fruit from girth, soil using trees\nfamily gamma_poisson\nprior overdispersion: {prior}"), 19);
    }
    // Pooled departures sit after the overdispersion in the parameter vector.
    for layout in ["centred", "noncentred"] {
        check_gradient(&format!("fruit from girth, pooled soil using trees\nfamily gamma_poisson\nparameterise soil {layout}"), 20);
        check_gradient("fruit from girth, pooled soil with girth using trees\nfamily gamma_poisson", 21);
    }
}

/// The beta family: the coefficients and log(precision), with the
/// default prior, a declared one and a pooled group.
#[test]
fn beta_gradient_matches_finite_differences() {
    let table = orchard_with_cover(120, 7);
    check_gradient_on(&format!("cover from {TERMS} using trees\nfamily beta"), &table, 22);
    check_gradient_on(&format!("cover from {SPLINE_TERMS} using trees\nfamily beta\nprior precision: exponential(0.1)"), &table, 23);
    check_gradient_on("cover from girth, pooled soil using trees\nfamily beta", &table, 24);
}

/// The time families: exponential (coefficients only) and Weibull (and
/// log(shape)), with rows cut short, the default shape prior and a declared
/// one, and a pooled group after the shape.
#[test]
fn time_gradients_match_finite_differences() {
    let table = orchard_with_times(120, 7);
    check_gradient_on(&format!("ripening from {TERMS} using trees\nfamily exponential cut short by season_over"), &table, 25);
    check_gradient_on(&format!("ripening from {TERMS} using trees\nfamily weibull cut short by season_over"), &table, 26);
    check_gradient_on(&format!("ripening from {SPLINE_TERMS} using trees\nfamily weibull\nprior shape: exponential(0.5)"), &table, 27);
    check_gradient_on("ripening from girth, pooled soil using trees\nfamily weibull cut short by season_over", &table, 28);
    // Three soils sampled centred: the intercept's coordinate is its score about the soils' means.
    let body = "ripening from girth, pooled soil using trees\nfamily weibull\nparameterise soil centred";
    assert!(build(body, &table).unconstrained_names()[0].contains("score about the soil level means"));
    check_gradient_on(body, &table, 32);
}

/// Times between bounds (`came by`): rows from 0 (the event came before
/// the upper bound), rows between two times, events seen at one time
/// (equal bounds) and rows cut short, in the exponential and the Weibull
/// (whose interval rows also move log(shape)).
#[test]
fn bounded_time_gradients_match_finite_differences() {
    let mut table = orchard_with_times(120, 7);
    let ripening = table.column("ripening").and_then(|c| c.data.as_reals()).expect("ripening").to_vec();
    let lower: Vec<f64> = ripening.iter().enumerate().map(|(i, &t)| if i % 5 == 0 && i % 4 != 0 { 0.0 } else { t }).collect();
    let upper: Vec<f64> = ripening.iter().enumerate().map(|(i, &t)| if i % 5 == 1 { t } else { 1.3 * t + 1.0 }).collect();
    table.columns.retain(|c| c.name != "ripening");
    table.columns.push(model_fixtures::column("ripening", waypath::table::ColumnData::Real(lower)));
    table.columns.push(model_fixtures::column("ripe_by", waypath::table::ColumnData::Real(upper)));
    check_gradient_on(&format!("ripening from {TERMS} using trees\nfamily exponential came by ripe_by"), &table, 29);
    check_gradient_on(&format!("ripening from {TERMS} using trees\nfamily weibull came by ripe_by cut short by season_over"), &table, 30);
    check_gradient_on("ripening from girth, pooled soil using trees\nfamily weibull came by ripe_by", &table, 31);
}

/// The levels family (softmax over soil's three levels; rootstock's two),
/// with the family line written and left out (a category outcome takes the
/// levels family by default).
#[test]
fn levels_gradient_matches_finite_differences() {
    check_gradient("soil from rootstock, girth per rootstock, powers(age, 3) using trees", 13);
    check_gradient("soil from rootstock, spline(age, 6), girth using trees\nfamily levels", 14);
    check_gradient("soil from girth, fruit using trees\nfamily levels\nprior slopes: student(0, 2, 3)", 15);
    check_gradient("rootstock from soil, girth using trees", 16);
}
