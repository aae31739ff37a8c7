//! Reading `model` cell lines. The reference is the cell language of the
//! design document (/work/shared/design.md, "The cell language"): its
//! example model cells must read as written there.

mod model_fixtures;

use expect_test::expect;
use model_fixtures::{build_error, orchard, try_spec};
use waypath::model::{parse_model_line, Family, Formula, ModelLine, Prior, PriorGroup, TermSpec};

#[test]
fn outcome_line_of_the_design_example_reads_as_terms() {
    let line = parse_model_line("    yield from rootstock, girth per rootstock using trees   # own slope").expect("parses");
    assert_eq!(
        line,
        ModelLine::Formula(Formula {
            outcome: "yield".into(),
            terms: vec![
                TermSpec::Column("rootstock".into()),
                TermSpec::Per { predictor: "girth".into(), by: "rootstock".into() },
            ],
            table: "trees".into(),
        })
    );
}

#[test]
fn spline_and_powers_terms_read_with_their_arguments() {
    let ModelLine::Formula(f) =
        parse_model_line("height from spline(age, 8, knots 2 5 9), powers(light, 2), spline(age2, 12) using saplings")
            .expect("parses")
    else {
        panic!("not an outcome line")
    };
    assert_eq!(
        f.terms,
        vec![
            TermSpec::Spline { predictor: "age".into(), functions: 8, knots: Some(vec![2.0, 5.0, 9.0]) },
            TermSpec::Powers { predictor: "light".into(), degree: 2 },
            TermSpec::Spline { predictor: "age2".into(), functions: 12, knots: None },
        ]
    );
}

#[test]
fn family_prior_and_centring_lines() {
    assert_eq!(parse_model_line("family normal"), Ok(ModelLine::Family(Family::Normal)));
    assert_eq!(
        parse_model_line("family binomial out of visits"),
        Ok(ModelLine::Family(Family::Binomial { trials: "visits".into() }))
    );
    assert_eq!(
        parse_model_line("prior intercepts: normal(20, 10)"),
        Ok(ModelLine::Prior { group: PriorGroup::Intercepts, prior: Prior::Normal { mean: 20.0, sd: 10.0 } })
    );
    assert_eq!(
        parse_model_line("prior spline weights: student(0, 2.5, 3)"),
        Ok(ModelLine::Prior {
            group: PriorGroup::Weights,
            prior: Prior::StudentT { df: 3.0, location: 0.0, scale: 2.5 }
        })
    );
    assert_eq!(parse_model_line("centre off"), Ok(ModelLine::Centring(false)));
    assert_eq!(parse_model_line("   # only a comment"), Ok(ModelLine::Blank));
}

#[test]
fn design_example_cell_assembles_with_defaults() {
    let spec = try_spec("yield from rootstock using trees\nprior intercepts: normal(20, 10)\nprior spread: exponential(0.5)")
        .expect("assembles");
    assert_eq!(spec.family, Family::Normal);
    assert!(spec.centre);
    assert_eq!(spec.table, "trees");
    assert_eq!(spec.declared_prior(PriorGroup::Spread), Some(&Prior::Exponential { rate: 0.5 }));
}

fn line_error(text: &str) -> String {
    parse_model_line(text).expect_err("should fail").to_string()
}

#[test]
fn syntax_errors_say_what_to_write() {
    expect!["a binomial outcome needs the column that holds each row's number of trials: write `family binomial out of <column>`"]
        .assert_eq(&line_error("family binomial"));
    expect!["`family gamma`: use normal, bernoulli, poisson, gamma_poisson, beta, levels, graded, binomial out of <column>, exponential or weibull (either with `cut short by <column>`)"]
        .assert_eq(&line_error("family gamma"));
    expect!["`cauchy(0, 1)`: unknown distribution `cauchy`; use normal, student, exponential, half_normal, lognormal, inverse_gamma or uniform"]
        .assert_eq(&line_error("prior slopes: cauchy(0, 1)"));
    expect![[r#"`normal(0)`: normal takes 2 numbers (mean, sd), not 1"#]].assert_eq(&line_error("prior slopes: normal(0)"));
    expect![[r#"`normal(0, -1)`: the sd must be positive"#]].assert_eq(&line_error("prior slopes: normal(0, -1)"));
    expect!["`noise` is not a prior group; use intercepts, slopes, weights, spread, pooled spreads, overdispersion, precision, shape, gaps, `pooled correlations`, or `prior for <parameter>:` for one parameter by its label"]
        .assert_eq(&line_error("prior noise: exponential(1)"));
    expect![[r#"`yield from girth` is not a model line; an outcome line ends with `using <table>`, other lines start with family, prior or centre"#]]
        .assert_eq(&line_error("yield from girth"));
    expect![[r#"`spline(age, 8, 2 5 9)`: write spline(<column>, <functions>) or spline(<column>, <functions>, knots <a> <b> …)"#]]
        .assert_eq(&line_error("h from spline(age, 8, 2 5 9) using t"));
    expect!["`powers(age, 0)`: the highest power `0` must be a whole number above 0"]
        .assert_eq(&line_error("h from powers(age, 0) using t"));
}

#[test]
fn assembly_errors_carry_the_cell_line() {
    expect![[r#"model line 3: a second outcome line; the model already has one on line 2"#]]
        .assert_eq(&try_spec("yield from girth using trees\nyield from age using trees").expect_err("two").to_string());
    expect![[r#"model `m` has no outcome line; add one like `yield from girth using trees`"#]]
        .assert_eq(&try_spec("family normal").expect_err("none").to_string());
    expect![[r#"model line 4: a prior for slopes is already declared; keep one"#]].assert_eq(
        &build_error("yield from girth using trees\nprior slopes: normal(0, 1)\nprior slopes: normal(0, 2)", &orchard(5, 1)),
    );
}
