//! The normal family's sufficient-statistics path against a direct loop
//! over rows, with priors from statrs as the reference densities.

mod model_fixtures;

use model_fixtures::{build, orchard, value_and_gradient};
use statrs::distribution::{Continuous, Exp, Normal};
use waypath::model::Model;
use waypath::table::ColumnData;

/// Σᵢ log N(yᵢ | xᵢβ, σ) row by row, from statrs's normal density.
fn row_loop_log_likelihood(model: &Model, beta: &[f64], sigma: f64) -> f64 {
    let x = model.design_matrix();
    (0..x.nrows())
        .map(|i| {
            let mean: f64 = (0..x.ncols()).map(|j| x[(i, j)] * beta[j]).sum();
            Normal::new(mean, sigma).expect("valid").ln_pdf(model.outcome_values()[i])
        })
        .sum()
}

fn check_against_row_loop(model: &Model, theta: &[f64]) {
    let p = model.coefficient_names().len();
    let params = model.constrain(theta);
    let direct = row_loop_log_likelihood(model, &params[..p], params[p]);
    let fast = model.log_likelihood(&params).expect("valid parameters");
    assert!((fast - direct).abs() < 1e-9 * direct.abs(), "{fast} vs {direct}");
}

#[test]
fn sufficient_statistics_match_row_loop() {
    let model = build("yield from rootstock, soil, girth per rootstock, spline(age, 7) using trees", &orchard(300, 3));
    let mut theta = model.initial_point();
    for (j, t) in theta.iter_mut().enumerate() {
        *t += 0.1 * (j as f64).sin();
    }
    check_against_row_loop(&model, &theta);
}

/// An outcome near 1e6 with spread 3: a naive yᵀy − 2βᵀXᵀy + βᵀXᵀXβ loses
/// about 10 digits; the centred statistics must still match the row loop.
#[test]
fn sufficient_statistics_stay_accurate_for_a_large_outcome_mean() {
    let mut table = orchard(300, 4);
    for column in &mut table.columns {
        if let (true, ColumnData::Real(v)) = (column.name == "yield", &mut column.data) {
            v.iter_mut().for_each(|y| *y += 1e6);
        }
    }
    let model = build("yield from rootstock, girth using trees", &table);
    let mut theta = model.initial_point();
    theta[2] = 0.45;
    check_against_row_loop(&model, &theta);
}

/// The whole log density = log-likelihood + log priors + log σ (Jacobian),
/// each prior evaluated by statrs.
#[test]
fn log_density_is_likelihood_plus_priors_plus_jacobian() {
    let model = build(
        "yield from girth using trees\nprior intercepts: normal(20, 10)\nprior slopes: normal(0, 2)\nprior spread: exponential(0.5)",
        &orchard(50, 5),
    );
    let theta = [21.0, 0.4, 1.2];
    let (value, _) = value_and_gradient(&model, &theta);
    let sigma = theta[2].exp();
    let expected = row_loop_log_likelihood(&model, &theta[..2], sigma)
        + Normal::new(20.0, 10.0).expect("valid").ln_pdf(theta[0])
        + Normal::new(0.0, 2.0).expect("valid").ln_pdf(theta[1])
        + Exp::new(0.5).expect("valid").ln_pdf(sigma)
        + theta[2];
    assert!((value - expected).abs() < 1e-9 * expected.abs(), "{value} vs {expected}");
}
