//! Predictions for new rows reuse the fitted data's centring, coding and
//! knots, and simulated outcomes follow the family's distribution.

mod model_fixtures;

use model_fixtures::{build, category, column, orchard};
use rand::rngs::StdRng;
use rand::SeedableRng;
use waypath::model::{Family, ModelError};
use waypath::table::{ColumnData, Table};

fn new_trees(rootstock: Vec<u32>, girth: Vec<f64>) -> Table {
    Table {
        name: "new".into(),
        columns: vec![
            column("girth", ColumnData::Real(girth)),
            // Levels listed in another order than in the fitted data: matched by label.
            column("rootstock", category(rootstock, &["standard", "dwarf"])),
        ],
    }
}

/// Source: the model's mean is Σⱼ xⱼβⱼ with x centred at the fitted data's
/// mean (the regression equation written out by hand).
#[test]
fn mean_uses_the_fitted_centre_and_level_labels() {
    let table = orchard(60, 8);
    let model = build("yield from rootstock, girth per rootstock using trees", &table);
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let centre = girth.iter().sum::<f64>() / girth.len() as f64;
    let params = [10.0, 12.0, 0.5, 0.8, 3.0]; // dwarf, standard, girth slope[dwarf], girth slope[standard], spread
    let rows = model.new_rows(&new_trees(vec![0, 1], vec![30.0, 20.0])).expect("rows");
    let prediction = model.predict_mean(&params, &rows).expect("prediction");
    let expected = [12.0 + 0.8 * (30.0 - centre), 10.0 + 0.5 * (20.0 - centre)];
    for (got, want) in prediction.mean.iter().zip(expected) {
        assert!((got - want).abs() < 1e-12, "{got} vs {want}");
    }
}

/// Source: the logistic function 1/(1 + e^−η) is the bernoulli mean under
/// the logit link; at η = 0 it is 1/2, at η = ln 3 it is 3/4.
#[test]
fn logit_mean_is_the_logistic_of_the_linear_predictor() {
    let model = build("healthy from rootstock using trees\nfamily bernoulli", &orchard(60, 8));
    let rows = model.new_rows(&new_trees(vec![1, 0], vec![0.0, 0.0])).expect("rows");
    let prediction = model.predict_mean(&[0.0, 3f64.ln()], &rows).expect("prediction");
    assert!((prediction.mean[0] - 0.5).abs() < 1e-15 && (prediction.mean[1] - 0.75).abs() < 1e-15);
    assert_eq!(Family::Bernoulli.link_name(), "logit");
}

/// Source: a poisson(λ) draw has mean λ and variance λ; the mean of 20 000
/// draws lies within 4 standard errors √(λ/n) of λ.
#[test]
fn poisson_draws_have_the_predicted_mean() {
    let model = build("fruit from rootstock using trees\nfamily poisson", &orchard(60, 8));
    let n = 20_000;
    let rows = model.new_rows(&new_trees(vec![1; n], vec![0.0; n])).expect("rows");
    let lambda: f64 = 4.0;
    let draws = model.outcome_draw(&[lambda.ln(), 0.0], &rows, &mut StdRng::seed_from_u64(3)).expect("draws");
    let mean = draws.iter().sum::<f64>() / n as f64;
    assert!((mean - lambda).abs() < 4.0 * (lambda / n as f64).sqrt(), "{mean}");
    assert!(draws.iter().all(|d| d.fract() == 0.0 && *d >= 0.0));
}

#[test]
fn unknown_level_in_new_rows_names_the_row() {
    let model = build("yield from rootstock using trees", &orchard(20, 8));
    let table = Table {
        name: "new".into(),
        columns: vec![column("rootstock", category(vec![0, 2], &["dwarf", "standard", "semi"]))],
    };
    let error = model.new_rows(&table).expect_err("unknown level");
    assert!(matches!(error, ModelError::Value { row: 2, .. }), "{error}");
    expect_test::expect![[r#"table `new` row 2, column `rootstock`: level `semi` was not in the data the model was built on (levels: dwarf, standard); predict for known levels only"#]]
        .assert_eq(&error.to_string());
}

/// Soil (loam, sandy, clay) as a levels-family outcome of rootstock: six
/// coefficients, level by level after the reference loam.
fn soil_model() -> waypath::model::Model {
    build("soil from rootstock using trees", &orchard(60, 8))
}

/// Source: the softmax pₖ = e^ηₖ / Σⱼ e^ηⱼ with η_loam = 0 (Bishop 2006,
/// eq. 4.104; recalled), written out by hand: for a standard tree with
/// η_sandy = ln 2 and η_clay = ln 3 the probabilities are 1/6, 2/6, 3/6.
#[test]
fn level_probabilities_are_the_softmax_of_the_level_predictors() {
    let model = soil_model();
    assert_eq!(model.family(), &Family::Levels);
    assert_eq!(model.outcome_levels(), Some(&["loam".to_string(), "sandy".into(), "clay".into()][..]));
    assert_eq!(
        model.parameter_names(),
        [
            "soil[sandy vs loam]: rootstock[dwarf]",
            "soil[sandy vs loam]: rootstock[standard]",
            "soil[clay vs loam]: rootstock[dwarf]",
            "soil[clay vs loam]: rootstock[standard]",
        ]
    );
    let params = [0.0, 2f64.ln(), -1.0, 3f64.ln()];
    let rows = model.new_rows(&new_trees(vec![0, 1], vec![0.0, 0.0])).expect("rows");
    let p = model.level_probabilities(&params, &rows).expect("probabilities");
    // new_trees lists standard first: row 1 is standard, row 2 dwarf (η = 0, −1).
    let dwarf_total = 1.0 + 1.0 + (-1f64).exp();
    let want = [[1.0 / 6.0, 2.0 / 6.0, 3.0 / 6.0], [1.0 / dwarf_total, 1.0 / dwarf_total, (-1f64).exp() / dwarf_total]];
    for (got, want) in p.iter().zip(want) {
        for (g, w) in got.iter().zip(want) {
            assert!((g - w).abs() < 1e-15, "{got:?} vs {want:?}");
        }
    }
    let error = model.predict_mean(&params, &rows).expect_err("a category has no mean");
    assert!(error.to_string().contains("probability of each level"), "{error}");
}

/// Source: each drawn level is a categorical draw with the row's
/// probabilities, so over 30 000 rows each level's share lies within 4
/// binomial standard errors √(p(1 − p)/n) of its probability.
#[test]
fn drawn_levels_follow_the_level_probabilities() {
    let model = soil_model();
    let n = 30_000;
    let rows = model.new_rows(&new_trees(vec![0; n], vec![0.0; n])).expect("rows");
    let params = [0.0, 0.5, 0.0, -0.7];
    let p = model.level_probabilities(&params, &rows).expect("probabilities")[0].clone();
    let draws = model.outcome_draw(&params, &rows, &mut StdRng::seed_from_u64(9)).expect("draws");
    for (k, pk) in p.iter().enumerate() {
        let share = draws.iter().filter(|&&d| d == k as f64).count() as f64 / n as f64;
        assert!((share - pk).abs() < 4.0 * (pk * (1.0 - pk) / n as f64).sqrt(), "level {k}: {share} vs {pk}");
    }
}
