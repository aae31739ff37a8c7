//! Varying slopes (`pooled plot with girth`): the density's gradient in
//! every family, the LKJ density on the Cholesky factor against the
//! published density of the correlation matrix, the constrained ↔
//! unconstrained round trip, labels, and the errors a cell can meet.

mod model_fixtures;

use model_fixtures::{assert_gradient_matches, build, build_error, category, column, orchard_with_plots, value_and_gradient};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::model::{LogDensity, Model};
use waypath::table::Table;

fn check_gradient(body: &str, seed: u64) {
    let table = orchard_with_plots(150, 7);
    let model = build(body, &table);
    assert!(model.dim() > model.coefficient_names().len() + 24, "{body}: the slope adds coordinates");
    assert_gradient_matches(&model, body, seed, 4, 0.4);
}

#[test]
fn gradient_of_every_family_matches_finite_differences() {
    for (k, layout) in ["centred", "noncentred"].iter().enumerate() {
        let row = format!("parameterise row {layout}\nparameterise plot {layout}");
        let seed = 10 * k as u64;
        check_gradient(&format!("yield from rootstock, girth, pooled plot with girth, pooled row using trees\n{row}"), seed + 1);
        check_gradient(
            &format!("healthy from girth, pooled plot with girth, pooled row using trees\nfamily bernoulli\n{row}"),
            seed + 2,
        );
        check_gradient(
            &format!("set from rootstock, girth, pooled plot with girth, pooled row using trees\nfamily binomial out of visits\n{row}"),
            seed + 3,
        );
        check_gradient(
            &format!("fruit from girth, pooled plot with girth, pooled row using trees\nfamily poisson\n{row}"),
            seed + 4,
        );
    }
    check_gradient(
        "yield from girth, pooled plot with girth using trees\nprior pooled spreads: exponential(0.5)\nprior pooled correlations: lkj(3.5)",
        30,
    );
    check_gradient("healthy from girth, pooled plot with girth using trees\nfamily bernoulli\ncentre off", 31);
    // The first centred group sampled around the intercept and the population slope.
    for family in ["normal", "poisson"] {
        let outcome = if family == "normal" { "yield" } else { "fruit" };
        check_gradient(
            &format!("{outcome} from girth, pooled plot with girth, pooled row using trees\nfamily {family}\nparameterise plot centred\nparameterise row noncentred"),
            32,
        );
        check_gradient(
            &format!("{outcome} from girth, pooled row, pooled plot with girth using trees\nfamily {family}\nparameterise plot centred\nparameterise row centred\nprior pooled correlations: lkj(1.5)"),
            33,
        );
    }
}

/// The LKJ density (Lewandowski, Kurowicka & Joe 2009, J. Multivariate
/// Analysis 100, 1989–2001, eq. 16): `p(Ω) ∝ det(Ω)^(η−1)`. With every
/// standard score at 0 the departures are 0 whatever the correlation, so
/// the log density changes with the correlation's coordinate `v` only
/// through the LKJ prior and the Jacobian of `v ↦ ρ`. Here that change is
/// computed apart from the model's formula: `det Ω` of the 2×2 correlation
/// matrix by nalgebra's LU determinant, and `|dρ/dv|` by a central
/// difference of the model's own `constrain` — so the check covers the
/// Cholesky parameterisation and its Jacobian together, for several η.
#[test]
fn lkj_density_on_the_cholesky_factor_matches_the_correlation_matrix() {
    let table = orchard_with_plots(150, 7);
    for eta in [1.0, 2.0, 4.5] {
        let model = build(
            &format!("yield from girth, pooled plot with girth using trees\nparameterise plot noncentred\nprior pooled correlations: lkj({eta})"),
            &table,
        );
        let names = model.unconstrained_names();
        let v_at = names.iter().position(|n| n.starts_with("atanh(plot correlation")).expect("correlation coordinate");
        let mut theta = model.initial_point();
        for (j, name) in names.iter().enumerate() {
            if name.contains("departure") {
                theta[j] = 0.0;
            }
        }
        let rho_of = |v: f64| {
            let mut t = theta.clone();
            t[v_at] = v;
            *model.constrain(&t).last().expect("correlation last")
        };
        let independent = |v: f64| {
            let rho = rho_of(v);
            let omega = nalgebra::Matrix2::new(1.0, rho, rho, 1.0);
            let h = 1e-5;
            let jacobian = ((rho_of(v + h) - rho_of(v - h)) / (2.0 * h)).abs();
            (eta - 1.0) * omega.determinant().ln() + jacobian.ln()
        };
        let model_at = |v: f64| {
            let mut t = theta.clone();
            t[v_at] = v;
            value_and_gradient(&model, &t).0
        };
        for (a, b) in [(0.0, 0.7), (-1.3, 0.2), (0.4, 2.1)] {
            let want = independent(b) - independent(a);
            let got = model_at(b) - model_at(a);
            assert!((got - want).abs() < 1e-7, "lkj({eta}) from v = {a} to {b}: {got} vs {want}");
        }
    }
}

/// Constrained → unconstrained → constrained gives the parameters back,
/// and the labels follow the group's order.
#[test]
fn parameters_round_trip_and_are_labelled() {
    let table = orchard_with_plots(150, 7);
    for layout in ["centred", "noncentred"] {
        round_trip(&build(&format!("yield from girth, pooled plot with girth using trees\nparameterise plot {layout}"), &table));
    }
}

fn round_trip(model: &Model) {
    let names = model.parameter_names();
    let first = model.first_group_index();
    assert_eq!(names[first], "plot spread");
    assert_eq!(names[first + 1], "plot departure[P1]");
    assert_eq!(names[first + 13], "plot girth spread");
    assert_eq!(names[first + 14], "plot girth departure[P1]");
    assert_eq!(names[first + 26], "plot correlation[intercept, girth]");
    assert_eq!(names.len(), first + 27);
    let mut rng = StdRng::seed_from_u64(5);
    let jitter = Normal::new(0.0, 0.7).expect("valid normal");
    let theta: Vec<f64> = model.initial_point().iter().map(|v| v + jitter.sample(&mut rng)).collect();
    let params = model.constrain(&theta);
    assert!(params[first + 26].abs() < 1.0);
    let back = model.unconstrain(&params).expect("valid parameters");
    for (a, b) in theta.iter().zip(&back) {
        assert!((a - b).abs() < 1e-9 * a.abs().max(1.0), "{a} vs {b}");
    }
    let mut bad = params.clone();
    bad[first + 26] = 1.0;
    let message = model.unconstrain(&bad).expect_err("a correlation of 1").to_string();
    assert!(message.contains("between −1 and 1"), "{message}");
}

#[test]
fn bad_varying_slopes_are_refused_with_the_reason() {
    let table = orchard_with_plots(150, 7);
    let cases = [
        ("yield from rootstock, pooled plot with girth using trees", "add `girth`"),
        ("yield from girth, pooled plot with girth, rootstock using trees", ""),
        ("yield from girth, pooled plot with girth age using trees", "several"),
        ("yield from girth, age, pooled plot with (girth, girth) using trees", "listed twice"),
        ("yield from girth, pooled plot with (girth, age) using trees", "add `age`"),
        ("yield from girth, age, pooled plot with (girth, age using trees", "unbalanced"),
        ("yield from girth, pooled plot using trees\nprior pooled correlations: lkj(2)", "no pooled group with a varying slope"),
        ("yield from girth, pooled plot with girth using trees\nprior pooled correlations: lkj(0)", "η > 0"),
        ("yield from girth, pooled plot with girth using trees\nprior pooled correlations: normal(0, 1)", "lkj(η)"),
    ];
    for (body, needle) in cases {
        if needle.is_empty() {
            build(body, &table);
            continue;
        }
        let message = build_error(body, &table);
        assert!(message.contains(needle), "{body}: {message}");
    }
}

/// Change of variables (e.g. Casella & Berger, Statistical Inference, 2nd
/// ed., Thm 4.3.2 for the bivariate case; recalled): each level's
/// departures are `(a₀, a₁) = diag(τ₀, τ₁)·L·(z₀, z₁)` with `L` the
/// Cholesky factor of the correlation matrix, whose determinant is
/// `τ₀τ₁√(1 − ρ²)`. So the non-centred density at `z` equals the centred
/// density (bivariate normal departures, sampled around the intercept and
/// population slope — a shift with unit Jacobian) at the same constrained
/// point plus `J·(log τ₀ + log τ₁ + ½·log(1 − ρ²))`.
#[test]
fn centred_and_noncentred_slope_groups_are_one_density() {
    let table = orchard_with_plots(150, 3);
    let body = |layout: &str| format!("yield from girth, pooled plot with girth using trees\nparameterise plot {layout}");
    let (centred, noncentred) = (build(&body("centred"), &table), build(&body("noncentred"), &table));
    let first = centred.first_group_index();
    assert_eq!(centred.unconstrained_names()[first + 1], "intercept + plot departure[P1]");
    assert_eq!(centred.unconstrained_names()[first + 14], "girth slope + plot girth departure[P1]");
    let levels = 12.0;
    let mut rng = StdRng::seed_from_u64(4);
    for _ in 0..5 {
        let z: Vec<f64> = noncentred.initial_point().iter().map(|v| v + rng.random_range(-0.8..0.8)).collect();
        let params = noncentred.constrain(&z);
        let a = centred.unconstrain(&params).expect("valid parameters");
        let (t0, t1, rho) = (params[first], params[first + 13], params[first + 26]);
        let log_jacobian = levels * (t0.ln() + t1.ln() + 0.5 * (1.0 - rho * rho).ln());
        let (value_z, _) = value_and_gradient(&noncentred, &z);
        let (value_a, _) = value_and_gradient(&centred, &a);
        assert!(
            (value_z - (value_a + log_jacobian)).abs() < 1e-9 * value_z.abs(),
            "non-centred {value_z} vs centred {value_a} + log Jacobian {log_jacobian}"
        );
        for (x, y) in params.iter().zip(&centred.constrain(&a)) {
            assert!((x - y).abs() < 1e-10 * x.abs().max(1.0), "constrained {x} vs {y}");
        }
    }
}

/// A contrast for a new plot of a poisson model with a varying girth slope,
/// at one fixed parameter point repeated as every draw. The new plot's
/// departures `(a₀, a₁)` are bivariate normal, so at girth `x` the log mean
/// `β₀ + a₀ + (β₁ + a₁)x` is normal with variance
/// `V(x) = τ₀² + 2ρτ₀τ₁x + τ₁²x²`, and by the mean of a lognormal (any
/// probability text; recalled) the expected mean is
/// `exp(β₀ + β₁x + V(x)/2)`. The contrast of girth 2 vs 1 must average to
/// the difference of these; 200,000 draws leave a Monte Carlo error of
/// about 0.3% here. The correlation matters: with ρ of the other sign the
/// answer moves by more than ten times that.
#[test]
fn a_new_plot_draws_its_intercept_and_slope_departures_jointly() {
    use waypath::draws::Draws;
    use waypath::query::{contrast, ContrastRequest};
    let table = orchard_with_plots(150, 7);
    let model = build("fruit from girth, pooled plot with girth using trees\nfamily poisson\ncentre off", &table);
    let names = model.parameter_names();
    let first = model.first_group_index();
    let (b0, b1, t0, t1, rho) = (0.3, 0.4, 0.5, 0.3, 0.6);
    let mut point = vec![0.0; names.len()];
    point[0] = b0;
    point[1] = b1;
    point[first] = t0;
    point[first + 13] = t1;
    point[first + 26] = rho;
    let draws = Draws::from_chains(names, vec![vec![point; 200_000]]).expect("draws");
    let request = ContrastRequest { values: Some(("2".into(), "1".into())), ..ContrastRequest::new("girth") };
    let c = contrast(&model, &draws, &table, &request).expect("contrast");
    let expected = |x: f64, rho: f64| {
        let v = t0 * t0 + 2.0 * rho * t0 * t1 * x + t1 * t1 * x * x;
        (b0 + b1 * x + 0.5 * v).exp()
    };
    let want = expected(2.0, rho) - expected(1.0, rho);
    let other = expected(2.0, -rho) - expected(1.0, -rho);
    assert!((c.mean - want).abs() < 0.01 * want, "new plot: {} vs {want}", c.mean);
    assert!((want - other).abs() > 0.04 * want, "the case must tell the correlation's sign");
    assert!(c.notes.iter().any(|n| n.contains("girth slope, drawn jointly")), "{:?}", c.notes);
}

/// Several varying slopes (`pooled plot with (girth, age)`): the gradient
/// of every form against finite differences, with three and four effects.
#[test]
fn gradient_with_several_slopes_matches_finite_differences() {
    for (k, layout) in ["centred", "noncentred"].iter().enumerate() {
        let seed = 40 + 10 * k as u64;
        let row = format!("parameterise plot {layout}\nparameterise row noncentred");
        check_gradient(&format!("yield from girth, age, pooled plot with (girth, age), pooled row using trees\n{row}"), seed);
        check_gradient(
            &format!("healthy from girth, age, pooled plot with (girth, age), pooled row using trees\nfamily bernoulli\n{row}\nprior pooled correlations: lkj(1.5)"),
            seed + 1,
        );
        check_gradient(
            &format!("set from girth, age, pooled row, pooled plot with (girth, age) using trees\nfamily binomial out of visits\nparameterise plot {layout}\nparameterise row centred"),
            seed + 2,
        );
        check_gradient(
            &format!("yield from girth, age, visits, pooled row, pooled plot with (girth, age, visits) using trees\nparameterise plot {layout}\nparameterise row centred"),
            seed + 2,
        );
    }
}

/// `det` of a row-major `k × k` matrix by nalgebra's LU.
fn determinant(values: &[f64], k: usize) -> f64 {
    nalgebra::DMatrix::from_row_slice(k, k, values).determinant()
}

/// The correlation matrix of `k` effects from its lower entries (row by
/// row, as the model reports them).
fn correlation_matrix(lower: &[f64], k: usize) -> Vec<f64> {
    let mut m = vec![0.0; k * k];
    let mut at = 0;
    for i in 0..k {
        m[i * k + i] = 1.0;
        for j in 0..i {
            m[i * k + j] = lower[at];
            m[j * k + i] = lower[at];
            at += 1;
        }
    }
    m
}

/// The LKJ density with three and four effects (Lewandowski, Kurowicka &
/// Joe 2009, J. Multivariate Analysis 100, 1989–2001, eq. 16: `p(Ω) =
/// det(Ω)^(η−1) / c`). With every standard score at 0 the log density
/// moves with the correlation coordinates `y` only through the LKJ prior
/// and the Jacobian of `y ↦ Ω`, so `log p(y) − log|det ∂Ω/∂y| −
/// (η − 1)·log det Ω` must be the same at every `y`. The Jacobian comes
/// from central differences of the model's own `constrain` and the
/// determinants from nalgebra — nothing of the model's formula.
///
/// The constant is then checked against the paper's normaliser: the
/// density in `y` integrates, one coordinate at a time (the model's
/// density at 0 elsewhere is a product over coordinates, checked on a
/// grid), to `c_K(η)` times `e^constant`, where eq. 16 gives
/// `c_K(η) = 2^(Σₖ (2η − 2 + K − k)(K − k)) · Πₖ B(η + (K − k − 1)/2,
/// η + (K − k − 1)/2)^(K − k)`, `k = 1 … K − 1`.
#[test]
fn lkj_density_with_several_slopes_matches_the_correlation_matrix() {
    let table = orchard_with_plots(150, 7);
    for (slopes, k) in [("(girth, age)", 3usize), ("(girth, age, visits)", 4)] {
        for eta in [1.0, 2.0, 3.5] {
            let terms = if k == 3 { "girth, age" } else { "girth, age, visits" };
            let model = build(
                &format!("yield from {terms}, pooled plot with {slopes} using trees\nparameterise plot noncentred\nprior pooled correlations: lkj({eta})"),
                &table,
            );
            let names = model.unconstrained_names();
            let first_y = names.iter().position(|n| n.starts_with("atanh(plot correlation")).expect("correlation coordinates");
            let pairs = k * (k - 1) / 2;
            assert_eq!(names.len(), first_y + pairs);
            assert_eq!(names[first_y + 2], "atanh(plot correlation[girth, age] given intercept)");
            let mut theta = model.initial_point();
            for (j, name) in names.iter().enumerate() {
                if name.contains("departure") {
                    theta[j] = 0.0;
                }
            }
            let at = |y: &[f64]| {
                let mut t = theta.clone();
                t[first_y..].copy_from_slice(y);
                t
            };
            let omega = |y: &[f64]| {
                let c = model.constrain(&at(y));
                c[c.len() - pairs..].to_vec()
            };
            let log_p = |y: &[f64]| value_and_gradient(&model, &at(y)).0;
            let constant = |y: &[f64]| {
                let h = 1e-5;
                let mut jacobian = vec![0.0; pairs * pairs];
                for c in 0..pairs {
                    let (mut up, mut down) = (y.to_vec(), y.to_vec());
                    up[c] += h;
                    down[c] -= h;
                    let (a, b) = (omega(&up), omega(&down));
                    for r in 0..pairs {
                        jacobian[r * pairs + c] = (a[r] - b[r]) / (2.0 * h);
                    }
                }
                let det_omega = determinant(&correlation_matrix(&omega(y), k), k);
                log_p(y) - determinant(&jacobian, pairs).abs().ln() - (eta - 1.0) * det_omega.ln()
            };
            let mut rng = StdRng::seed_from_u64(k as u64 * 10);
            let origin = vec![0.0; pairs];
            let reference = constant(&origin);
            for _ in 0..6 {
                let y: Vec<f64> = (0..pairs).map(|_| rng.random_range(-1.5..1.5)).collect();
                let got = constant(&y);
                assert!((got - reference).abs() < 1e-6, "K = {k}, lkj({eta}) at {y:?}: {got} vs {reference}");
            }
            // The density in y, relative to y = 0, is a product over the coordinates.
            for _ in 0..4 {
                let y: Vec<f64> = (0..pairs).map(|_| rng.random_range(-2.0..2.0)).collect();
                let joint = log_p(&y) - log_p(&origin);
                let apart: f64 = (0..pairs)
                    .map(|c| {
                        let mut one = origin.clone();
                        one[c] = y[c];
                        log_p(&one) - log_p(&origin)
                    })
                    .sum();
                assert!((joint - apart).abs() < 1e-8, "K = {k}: {joint} vs {apart}");
            }
            // ∫ exp(log p(y) − log p(0)) dy, one coordinate at a time (trapezoid on ±30).
            let integral: f64 = (0..pairs)
                .map(|c| {
                    let steps = 6000;
                    let width = 60.0 / steps as f64;
                    (0..=steps)
                        .map(|s| {
                            let mut one = origin.clone();
                            one[c] = -30.0 + s as f64 * width;
                            let w = if s == 0 || s == steps { 0.5 } else { 1.0 };
                            w * width * (log_p(&one) - log_p(&origin)).exp()
                        })
                        .sum::<f64>()
                })
                .product();
            // ∫ det(Ω)^(η−1) dΩ = ∫ exp(log p(y) − constant) dy = integral · exp(log p(0) − constant).
            let ours = integral.ln() + log_p(&origin) - reference;
            let paper = lkj_log_normaliser(eta, k);
            assert!((ours - paper).abs() < 1e-6, "K = {k}, lkj({eta}): log normaliser {ours} vs the paper's {paper}");
        }
    }
}

/// `log c_K(η)` of Lewandowski, Kurowicka & Joe (2009), eq. 16.
fn lkj_log_normaliser(eta: f64, k: usize) -> f64 {
    let mut total = 0.0;
    for j in 1..k {
        let kk = (k - j) as f64;
        let b = eta + (kk - 1.0) / 2.0;
        total += (2.0 * eta - 2.0 + kk) * kk * std::f64::consts::LN_2 + kk * statrs::function::beta::ln_beta(b, b);
    }
    total
}

/// Two varying slopes: names in order, the round trip, and a refusal of
/// correlations that do not form a correlation matrix.
#[test]
fn several_slopes_round_trip_and_are_labelled() {
    let table = orchard_with_plots(150, 7);
    for layout in ["centred", "noncentred"] {
        let model = build(&format!("yield from girth, age, pooled plot with (girth, age) using trees\nparameterise plot {layout}"), &table);
        let names = model.parameter_names();
        let first = model.first_group_index();
        assert_eq!(names[first + 13], "plot girth spread");
        assert_eq!(names[first + 26], "plot age spread");
        assert_eq!(names[first + 27], "plot age departure[P1]");
        assert_eq!(
            names[first + 39..],
            ["plot correlation[intercept, girth]", "plot correlation[intercept, age]", "plot correlation[girth, age]"]
        );
        let mut rng = StdRng::seed_from_u64(8);
        let jitter = Normal::new(0.0, 0.7).expect("valid normal");
        let theta: Vec<f64> = model.initial_point().iter().map(|v| v + jitter.sample(&mut rng)).collect();
        let params = model.constrain(&theta);
        let back = model.unconstrain(&params).expect("valid parameters");
        for (a, b) in theta.iter().zip(&back) {
            assert!((a - b).abs() < 1e-8 * a.abs().max(1.0), "{layout}: {a} vs {b}");
        }
        let mut bad = params.clone();
        // 0.9, 0.9 and −0.9: each in (−1, 1), together not positive definite.
        bad[first + 39..].copy_from_slice(&[0.9, 0.9, -0.9]);
        let message = model.unconstrain(&bad).expect_err("not a correlation matrix").to_string();
        assert!(message.contains("positive definite"), "{message}");
    }
    let spec_text = build("yield from girth, age, pooled plot with (girth, age) using trees", &table).notes().join("\n");
    assert!(spec_text.contains("slopes of girth, age"), "{spec_text}");
}

/// Change of variables with three effects: each level's departures are
/// `diag(τ)·L·z`, whose Jacobian is `Πₑ τₑ · Πₑ Lₑₑ = Πₑ τₑ · √det Ω`
/// (det Ω = (Π Lₑₑ)², by nalgebra here), so the non-centred density equals
/// the centred one at the same constrained point plus
/// `J·(Σ log τₑ + ½·log det Ω)`.
#[test]
fn centred_and_noncentred_several_slopes_are_one_density() {
    let table = orchard_with_plots(150, 3);
    let body = |layout: &str| format!("yield from girth, age, pooled plot with (girth, age) using trees\nparameterise plot {layout}");
    let (centred, noncentred) = (build(&body("centred"), &table), build(&body("noncentred"), &table));
    let first = centred.first_group_index();
    assert_eq!(centred.unconstrained_names()[first + 27], "age slope + plot age departure[P1]");
    let mut rng = StdRng::seed_from_u64(6);
    for _ in 0..5 {
        let z: Vec<f64> = noncentred.initial_point().iter().map(|v| v + rng.random_range(-0.8..0.8)).collect();
        let params = noncentred.constrain(&z);
        let a = centred.unconstrain(&params).expect("valid parameters");
        let spreads = [params[first], params[first + 13], params[first + 26]];
        let det = determinant(&correlation_matrix(&params[first + 39..], 3), 3);
        let log_jacobian = 12.0 * (spreads.iter().map(|t| t.ln()).sum::<f64>() + 0.5 * det.ln());
        let (value_z, _) = value_and_gradient(&noncentred, &z);
        let (value_a, _) = value_and_gradient(&centred, &a);
        assert!((value_z - (value_a + log_jacobian)).abs() < 1e-9 * value_z.abs(), "{value_z} vs {value_a} + {log_jacobian}");
    }
}

/// A funnel in the slope (Neal 2003, Annals of Statistics 31, 705–767,
/// §8; recalled): 30 plots of 20 rows whose intercepts differ a lot
/// (spread 2 against noise 1) but whose girth slopes hardly differ
/// (spread 0.02 against what 20 rows with girth on (−1, 1) say about a
/// slope, about 0.4). The intercepts are pinned and suit the centred form;
/// the slope's departures sit in the funnel's neck and need the
/// non-centred one. The automatic choice must see both — the intercept
/// centred, the slope not — and sample without a divergent trajectory.
#[test]
fn a_slope_funnel_is_sampled_without_divergences_by_the_automatic_choice() {
    use std::sync::atomic::AtomicBool;
    use waypath::infer::fit::{fit_model, Method};
    let (plots, per) = (30usize, 20usize);
    let mut rng = StdRng::seed_from_u64(17);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut y, mut girth, mut codes) = (Vec::new(), Vec::new(), Vec::new());
    for j in 0..plots {
        let (a0, a1) = (2.0 * unit.sample(&mut rng), 0.02 * unit.sample(&mut rng));
        for _ in 0..per {
            let x: f64 = rng.random_range(-1.0..1.0);
            y.push(5.0 + a0 + (0.5 + a1) * x + unit.sample(&mut rng));
            girth.push(x);
            codes.push(j as u32);
        }
    }
    let names: Vec<String> = (1..=plots).map(|k| format!("P{k}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    let table = Table {
        name: "t".into(),
        columns: vec![
            column("y", waypath::table::ColumnData::Real(y)),
            column("girth", waypath::table::ColumnData::Real(girth)),
            column("plot", category(codes, &names)),
        ],
    };
    let settings = waypath::infer::nuts::NutsSettings { chains: 2, settle: 300, draws: 500, seed: 8, ..Default::default() };
    let model = build("y from girth, pooled plot with girth using t", &table);
    let note = model.notes().iter().find(|n| n.starts_with("pooled plot")).expect("a note on the group");
    assert!(note.contains("sampled partly centred"), "{note}");
    assert!(note.contains("centred: intercept)"), "{note}");
    let fit = fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {}).expect("NUTS fit");
    assert_eq!(fit.divergences, 0, "the automatic choice diverged");
}

/// `parameterise plot centred 2` on `pooled plot with (girth, age)`: the
/// intercept and girth centred, age non-centred. Its density against the
/// fully centred one at the same constrained point: only age's departures
/// change coordinates, `a_age = τ_age·(L·z)_age` with the other scores
/// fixed by the centred departures, so the log Jacobian per level is
/// `log τ_age + log L₂₂`, and `L₂₂² = det Ω / det Ω₀₁` (the Schur
/// complement of the leading 2 × 2 block; Horn & Johnson, Matrix
/// Analysis, §0.8.5; recalled), `det Ω₀₁ = 1 − ρ²(intercept, girth)`.
/// The gradient goes against finite differences, the model's notes say
/// which effects are centred, and too many centred effects are refused.
#[test]
fn a_declared_partly_centred_group_is_one_density_with_the_centred_one() {
    let table = orchard_with_plots(150, 3);
    let body = |layout: &str| format!("yield from girth, age, pooled plot with (girth, age) using trees\nparameterise plot {layout}");
    check_gradient(&body("centred 2"), 71);
    check_gradient(&format!("{}\nfamily bernoulli", body("centred 1").replace("yield", "healthy")), 72);
    let (centred, partly) = (build(&body("centred"), &table), build(&body("centred 2"), &table));
    let first = centred.first_group_index();
    let names = partly.unconstrained_names();
    assert_eq!(names[first + 14], "girth slope + plot girth departure[P1]", "{names:?}");
    assert_eq!(names[first + 27], "plot age departure[P1]: age score", "{names:?}");
    let note = partly.notes().iter().find(|n| n.starts_with("pooled plot")).expect("a note on the group");
    assert!(note.contains("sampled partly centred (as the parameterise line says; centred: intercept, girth, the rest non-centred)"), "{note}");
    let mut rng = StdRng::seed_from_u64(8);
    for _ in 0..5 {
        let z: Vec<f64> = partly.initial_point().iter().map(|v| v + rng.random_range(-0.8..0.8)).collect();
        let params = partly.constrain(&z);
        let a = centred.unconstrain(&params).expect("valid parameters");
        let correlations = &params[first + 39..];
        let det = determinant(&correlation_matrix(correlations, 3), 3);
        let leading = 1.0 - correlations[0] * correlations[0];
        let log_jacobian = 12.0 * (params[first + 26].ln() + 0.5 * (det / leading).ln());
        let (value_z, _) = value_and_gradient(&partly, &z);
        let (value_a, _) = value_and_gradient(&centred, &a);
        assert!((value_z - (value_a + log_jacobian)).abs() < 1e-9 * value_z.abs(), "{value_z} vs {value_a} + {log_jacobian}");
    }
    let too_many = build_error(&body("centred 4"), &table);
    assert!(too_many.contains("at most 3") && too_many.contains("intercept, girth, age"), "{too_many}");
    let none = build_error(&body("centred 0"), &table);
    assert!(none.contains("noncentred"), "{none}");
}

/// The model cell's table says which effects a `centred N` line centres.
#[test]
fn the_model_cell_names_the_centred_effects() {
    use std::sync::atomic::AtomicBool;
    use waypath::cells::{RunControl, Session};
    let mut session = Session::new(".");
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    let cell = "graph g:
    x -> y
    w -> y
    site -> y
simulate t from g rows 120 seed 4:
    site = category(s1 0.25, s2 0.25, s3 0.25, s4 0.25)
    x = normal(0, 1)
    w = normal(0, 1)
    y = normal(1 + x + w + departure(site, 0.5), 1)
model m:
    y from x, w, pooled site with (x, w) using t
    parameterise site centred 2
";
    let out = session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress });
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    let shown = out.displays.last().expect("the model's table");
    let said = "sampled partly centred (as the parameterise line says; centred: intercept, x, the rest non-centred)";
    assert!(shown.plain.contains(said), "{}", shown.plain);
    assert!(shown.html.as_deref().is_some_and(|h| h.contains("centred: intercept, x")), "the HTML too");
}
