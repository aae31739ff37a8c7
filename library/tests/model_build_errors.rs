//! Specifications that cannot be built on the data fail with one sentence
//! naming the line, column or row and what to do. The texts are pinned as
//! snapshots; the reference for each rule is the family's support or the
//! term's definition (named beside each case).

mod model_fixtures;

use expect_test::expect;
use model_fixtures::{build_error, orchard};

#[test]
fn unknown_column_suggests_a_near_match() {
    let t = orchard(20, 1);
    expect![[r#"model line 2: column `grith` is not in table `trees`; did you mean `girth`?"#]]
        .assert_eq(&build_error("yield from grith using trees", &t));
    expect![[r#"model line 2: column `height` is not in table `trees`; its columns are rootstock, soil, girth, age, yield, fruit, visits, set, healthy"#]]
        .assert_eq(&build_error("height from girth using trees", &t));
}

#[test]
fn category_cannot_take_a_slope() {
    // A category has no numeric values, so `x per c` with x a category has no slope to estimate.
    expect![[r#"model line 2: column `soil`: a category has no slope, so `soil per rootstock` cannot be built; list `soil` as a term on its own for one intercept per level"#]]
        .assert_eq(&build_error("yield from soil per rootstock using trees", &orchard(20, 1)));
    expect![[r#"model line 2: column `age`: the column after `per` must be a category, but this column is real; declare it as a category in the table"#]]
        .assert_eq(&build_error("yield from girth per age using trees", &orchard(20, 1)));
}

#[test]
fn spline_needs_a_numeric_column_and_enough_functions() {
    let t = orchard(40, 1);
    expect![[r#"model line 2: column `soil`: a spline needs a numeric column, but this is a category"#]]
        .assert_eq(&build_error("yield from spline(soil, 5) using trees", &t));
    // A cubic B-spline basis has at least degree + 1 = 4 functions (de Boor, A Practical Guide to Splines; recalled).
    expect![[r#"model line 2: term `spline(age, 3)`: a cubic spline needs at least 4 basis functions, not 3"#]]
        .assert_eq(&build_error("yield from spline(age, 3) using trees", &t));
    expect![[r#"model line 2: term `spline(age, 7, knots 4 8)`: 7 cubic basis functions need 3 interior knots, but 2 are listed"#]]
        .assert_eq(&build_error("yield from spline(age, 7, knots 4 8) using trees", &t));
    expect!["model line 2: term `spline(age, 6, knots 8 4)`: knots must increase and lie strictly inside the range of age, 2.482 to 13.96"]
        .assert_eq(&build_error("yield from spline(age, 6, knots 8 4) using trees", &t));
}

#[test]
fn outcome_must_fit_the_family() {
    let t = orchard(30, 2);
    // Bernoulli support is {0, 1}.
    expect!["model line 2: table `trees` row 1, column `fruit`: 3 is not 0 or 1, which a bernoulli outcome must be"]
        .assert_eq(&build_error("fruit from girth using trees\nfamily bernoulli", &t));
    // Poisson support is the non-negative integers.
    expect!["model line 2: table `trees` row 1, column `yield`: 8.067481021968991 is not a whole number ≥ 0, which a poisson outcome must be"]
        .assert_eq(&build_error("yield from girth using trees\nfamily poisson", &t));
    // The gamma-poisson (negative binomial) support is the non-negative integers too.
    expect!["model line 2: table `trees` row 1, column `yield`: 8.067481021968991 is not a whole number ≥ 0, which a gamma_poisson outcome must be"]
        .assert_eq(&build_error("yield from girth using trees\nfamily gamma_poisson", &t));
    expect!["model line 2: column `soil`: the outcome is a category (loam, sandy, clay), which goes with `family levels` (or leave the family line out), or `family graded` when its levels are ordered; `family gamma_poisson` needs a numeric column"]
        .assert_eq(&build_error("soil from girth using trees\nfamily gamma_poisson", &t));
    // The beta density lives on the open interval (0, 1): a 0 or a 1 has none.
    expect!["model line 2: table `trees` row 1, column `healthy`: 0 is not strictly between 0 and 1, which a beta outcome (a share) must be; a share of exactly 0 or 1 has no beta density: model the counts behind it with `family binomial out of <column>`"]
        .assert_eq(&build_error("healthy from girth using trees\nfamily beta", &t));
    expect!["model line 2: table `trees` row 1, column `yield`: 8.067481021968991 is not strictly between 0 and 1, which a beta outcome (a share) must be; write the outcome as a share of its whole, or choose another family"]
        .assert_eq(&build_error("yield from girth using trees\nfamily beta", &t));
    // Binomial successes lie in 0..=trials.
    expect!["model line 2: table `trees` row 3, column `fruit`: 10 successes is not a whole number between 0 and the 9 trials in `set`"]
        .assert_eq(&build_error("fruit from girth using trees\nfamily binomial out of set", &t));
    // A category outcome goes with the levels family only, and the levels family with a category only.
    expect!["model line 2: column `rootstock`: the outcome is a category (dwarf, standard), which goes with `family levels` (or leave the family line out), or `family graded` when its levels are ordered; `family bernoulli` needs a numeric column"]
        .assert_eq(&build_error("rootstock from girth using trees\nfamily bernoulli", &t));
    expect!["model line 2: column `yield`: `family levels` needs a category outcome, but this column is real; declare it as a category in the table or choose another family"]
        .assert_eq(&build_error("yield from girth using trees\nfamily levels", &t));
    // The graded family (McCullagh 1980) cuts a latent score into ordered levels: it needs a category outcome,
    // and its cuts have no pooled departures or prior outside the family.
    expect!["model line 2: column `yield`: `family graded` needs a category outcome, but this column is real; declare it as a category in the table (its levels lowest first) or choose another family"]
        .assert_eq(&build_error("yield from girth using trees\nfamily graded", &t));
    expect!["model line 2: term `pooled rootstock`: pooled groups are not available for an ordered outcome (family graded) yet; model soil with `rootstock` as an ordinary term (one intercept or offset per level) instead"]
        .assert_eq(&build_error("soil from girth, pooled rootstock using trees\nfamily graded", &t));
    expect!["prior for gaps: this model has no gaps; remove the prior line"]
        .assert_eq(&build_error("yield from girth using trees\nprior gaps: lognormal(0, 1)", &t));
    expect!["prior for gaps: normal(0, 1) allows negative values but the gaps between cut points are positive; use exponential, half_normal, lognormal or inverse_gamma"]
        .assert_eq(&build_error("soil from girth using trees\nfamily graded\nprior gaps: normal(0, 1)", &t));
}

#[test]
fn priors_must_suit_their_group() {
    let t = orchard(30, 2);
    expect!["prior for spread: normal(0, 1) allows negative values but the spread is positive; use exponential, half_normal, lognormal or inverse_gamma"]
        .assert_eq(&build_error("yield from girth using trees\nprior spread: normal(0, 1)", &t));
    expect!["prior for slopes: exponential(1) allows only positive values but slopes can be negative; use normal or student"]
        .assert_eq(&build_error("yield from girth using trees\nprior slopes: exponential(1)", &t));
    expect![[r#"prior for spread: this model has no spread; remove the prior line"#]]
        .assert_eq(&build_error("fruit from girth using trees\nfamily poisson\nprior spread: exponential(1)", &t));
    // The overdispersion is the gamma-poisson family's own parameter, and positive (sd of the rate multiplier).
    expect![[r#"prior for overdispersion: this model has no overdispersion; remove the prior line"#]]
        .assert_eq(&build_error("fruit from girth using trees\nfamily poisson\nprior overdispersion: exponential(1)", &t));
    expect![[r#"prior for spread: this model has no spread; remove the prior line"#]]
        .assert_eq(&build_error("fruit from girth using trees\nfamily gamma_poisson\nprior spread: exponential(1)", &t));
    expect!["prior for overdispersion: normal(0, 1) allows negative values but the overdispersion is positive; use exponential, half_normal, lognormal or inverse_gamma"]
        .assert_eq(&build_error("fruit from girth using trees\nfamily gamma_poisson\nprior overdispersion: normal(0, 1)", &t));
    expect![[r#"prior for weights: this model has no weights; remove the prior line"#]]
        .assert_eq(&build_error("yield from girth using trees\nprior weights: normal(0, 1)", &t));
}

#[test]
fn a_column_enters_one_term_only() {
    // `girth` and `girth per rootstock` together are collinear: the per-level slopes sum to the plain slope's column.
    expect![[r#"model line 2: term `girth per rootstock`: `girth` already enters the model through another term; keep one term per column"#]]
        .assert_eq(&build_error("yield from girth, girth per rootstock using trees", &orchard(20, 1)));
    expect![[r#"model line 2: term `yield`: `yield` is the outcome; it cannot also be a predictor"#]]
        .assert_eq(&build_error("yield from yield using trees", &orchard(20, 1)));
}
