//! The Laplace approximation against targets whose posterior is known in
//! closed form.

mod model_fixtures;

use model_fixtures::{build, orchard};
use nalgebra::{DMatrix, DVector};
use waypath::infer::laplace::{laplace, InferError};
use waypath::model::LogDensity;
use waypath::table::ColumnData;

/// A normal linear model with the spread fixed (a lognormal prior of sd 1e-6
/// on it) has a normal posterior for the coefficients, so the Laplace
/// approximation is exact. Source: with known σ and prior β ~ N(m0, V0),
/// the posterior is N(mn, Vn) with Vn = (V0⁻¹ + XᵀX/σ²)⁻¹ and
/// mn = Vn(V0⁻¹m0 + Xᵀy/σ²) (Gelman et al., Bayesian Data Analysis, 3rd ed.,
/// ch. 14; recalled).
#[test]
fn normal_model_with_known_spread_matches_conjugate_posterior() {
    let table = orchard(80, 21);
    let sigma: f64 = 3.0;
    let body = format!(
        "yield from rootstock, girth using trees\nprior intercepts: normal(20, 10)\nprior slopes: normal(0.3, 0.2)\n\
         prior spread: lognormal({}, 0.000001)",
        sigma.ln()
    );
    let model = build(&body, &table);

    // The design written out by hand: two level indicators and centred girth.
    let Some(ColumnData::Category { codes, .. }) = table.column("rootstock").map(|c| &c.data) else { panic!() };
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let mean_girth = girth.iter().sum::<f64>() / girth.len() as f64;
    let n = girth.len();
    let x = DMatrix::from_fn(n, 3, |i, j| match j {
        0 => f64::from(codes[i] == 0),
        1 => f64::from(codes[i] == 1),
        _ => girth[i] - mean_girth,
    });
    let y = DVector::from_vec(table.column("yield").and_then(|c| c.data.as_reals()).expect("yield"));
    let prior_precision = DMatrix::from_diagonal(&DVector::from_vec(vec![0.01, 0.01, 25.0]));
    let prior_mean = DVector::from_vec(vec![20.0, 20.0, 0.3]);
    let posterior_precision = &prior_precision + x.transpose() * &x / sigma.powi(2);
    let posterior_cov = posterior_precision.clone().try_inverse().expect("invertible");
    let posterior_mean = &posterior_cov * (&prior_precision * &prior_mean + x.transpose() * &y / sigma.powi(2));

    let fit = laplace(&model, &model.unconstrained_names(), &model.initial_point(), 4000, 5).expect("fit");
    for j in 0..3 {
        let relative = (fit.mode[j] - posterior_mean[j]).abs() / posterior_mean[j].abs();
        assert!(relative < 1e-8, "mean {j}: {} vs {}", fit.mode[j], posterior_mean[j]);
        for k in 0..3 {
            let scale = (posterior_cov[(j, j)] * posterior_cov[(k, k)]).sqrt();
            let error = (fit.covariance[(j, k)] - posterior_cov[(j, k)]).abs() / scale;
            assert!(error < 1e-5, "covariance ({j}, {k}): {} vs {}", fit.covariance[(j, k)], posterior_cov[(j, k)]);
        }
    }
    // Draws: the sample mean lies within 4 standard errors of the exact mean.
    for j in 0..3 {
        let draws: Vec<f64> = fit.draws.iter().map(|d| d[j]).collect();
        let mean = draws.iter().sum::<f64>() / draws.len() as f64;
        let standard_error = (posterior_cov[(j, j)] / draws.len() as f64).sqrt();
        assert!((mean - posterior_mean[j]).abs() < 4.0 * standard_error, "draw mean {j}: {mean}");
        let var = draws.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (draws.len() - 1) as f64;
        // Sample variance of 4000 normal draws has relative sd √(2/3999) ≈ 0.022.
        assert!((var / posterior_cov[(j, j)] - 1.0).abs() < 0.1, "draw variance {j}: {var}");
    }
}

/// A correlated normal target: log p = −½(x − μ)ᵀΣ⁻¹(x − μ).
struct CorrelatedNormal {
    mean: DVector<f64>,
    precision: DMatrix<f64>,
}

impl LogDensity for CorrelatedNormal {
    fn dim(&self) -> usize {
        self.mean.len()
    }
    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let d = DVector::from_column_slice(theta) - &self.mean;
        let pd = &self.precision * &d;
        grad.copy_from_slice((-&pd).as_slice());
        -0.5 * d.dot(&pd)
    }
}

/// Source: the mode of a multivariate normal is its mean and the inverse
/// negative Hessian of its log density is its covariance (definition).
#[test]
fn correlated_normal_target_recovers_mean_and_covariance() {
    let covariance = DMatrix::from_row_slice(3, 3, &[4.0, 1.8, -0.3, 1.8, 1.0, 0.0, -0.3, 0.0, 0.25]);
    let target = CorrelatedNormal {
        mean: DVector::from_vec(vec![1.0, -2.0, 30.0]),
        precision: covariance.clone().try_inverse().expect("invertible"),
    };
    let fit = laplace(&target, &[], &[50.0, 50.0, -50.0], 10, 1).expect("fit");
    for j in 0..3 {
        assert!((fit.mode[j] - target.mean[j]).abs() < 1e-8);
        for k in 0..3 {
            assert!((fit.covariance[(j, k)] - covariance[(j, k)]).abs() < 1e-6);
        }
    }
}

/// The Rosenbrock valley, log p = −[(1 − x)² + 100(y − x²)²]: its maximum is
/// at (1, 1) (Rosenbrock 1960; recalled) and the negative Hessian there is
/// [[802, −400], [−400, 200]] (differentiated by hand), whose inverse is
/// [[0.5, 1], [1, 2.005]]. A start far up the valley needs the line search.
struct Valley;

impl LogDensity for Valley {
    fn dim(&self) -> usize {
        2
    }
    fn log_density_and_gradient(&self, t: &[f64], grad: &mut [f64]) -> f64 {
        let (x, y) = (t[0], t[1]);
        grad[0] = 2.0 * (1.0 - x) + 400.0 * x * (y - x * x);
        grad[1] = -200.0 * (y - x * x);
        -((1.0 - x).powi(2) + 100.0 * (y - x * x).powi(2))
    }
}

#[test]
fn newton_search_with_line_search_finds_the_valley_floor() {
    let fit = laplace(&Valley, &[], &[-1.2, 1.0], 0, 1).expect("fit");
    assert!((fit.mode[0] - 1.0).abs() < 1e-6 && (fit.mode[1] - 1.0).abs() < 1e-6, "{:?}", fit.mode);
    let expected = [[0.5, 1.0], [1.0, 2.005]];
    for j in 0..2 {
        for k in 0..2 {
            assert!((fit.covariance[(j, k)] - expected[j][k]).abs() < 1e-5, "{}", fit.covariance);
        }
    }
}

/// A density constant in one parameter has zero curvature there, so its
/// negative Hessian is singular (definition of positive definiteness); the
/// error must name that parameter and only it.
struct FlatInSecond;

impl LogDensity for FlatInSecond {
    fn dim(&self) -> usize {
        3
    }
    fn log_density_and_gradient(&self, t: &[f64], grad: &mut [f64]) -> f64 {
        grad[0] = -t[0];
        grad[1] = 0.0;
        grad[2] = -4.0 * t[2];
        -0.5 * t[0] * t[0] - 2.0 * t[2] * t[2]
    }
}

#[test]
fn flat_direction_is_reported_by_parameter_name() {
    let names: Vec<String> = ["girth slope", "age slope", "intercept"].iter().map(|s| s.to_string()).collect();
    let error = laplace(&FlatInSecond, &names, &[1.0, 0.0, 1.0], 10, 1).expect_err("flat target");
    assert_eq!(error, InferError::NotPositiveDefinite { parameters: vec!["age slope".into()] });
    expect_test::expect!["the posterior is flat or saddle-shaped at its mode along age slope; the data and priors do not pin these down together — tighten their priors, drop a redundant term, or sample with NUTS"]
        .assert_eq(&error.to_string());
}

#[test]
fn draws_are_reproducible_from_the_seed() {
    let target = CorrelatedNormal { mean: DVector::from_vec(vec![0.0, 1.0]), precision: DMatrix::identity(2, 2) };
    let a = laplace(&target, &[], &[0.0, 0.0], 50, 9).expect("fit");
    let b = laplace(&target, &[], &[0.0, 0.0], 50, 9).expect("fit");
    let c = laplace(&target, &[], &[0.0, 0.0], 50, 10).expect("fit");
    assert_eq!(a.draws, b.draws);
    assert_ne!(a.draws, c.draws);
}
