//! Default priors follow the documented shared-budget principle
//! (`model::defaults`), mean the same under any centring, and every prior
//! in use is listed. The expectations are computed here another way: by
//! drawing from the listed priors and looking at what the drawn
//! coefficients do to the fitted rows (prior predictive behaviour), and,
//! for a slope, by least squares from the normal equations.

mod model_fixtures;

use model_fixtures::{build, column, orchard};
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use statrs::statistics::Statistics;
use std::sync::atomic::AtomicBool;

use waypath::infer::fit::{fit_model, Method};
use waypath::infer::laplace::laplace;
use waypath::infer::nuts::NutsSettings;
use waypath::model::{Model, Prior, PriorGroup};
use waypath::table::{ColumnData, Table};

/// Prior draws of the coefficients, as the model turns the listed priors
/// into parameters (intercepts priced at the average row made raw).
fn prior_draws(model: &Model, n: usize, seed: u64) -> Vec<Vec<f64>> {
    let mut rng = StdRng::seed_from_u64(seed);
    let names = model.parameter_names();
    (0..n)
        .map(|_| {
            let values = names
                .iter()
                .map(|name| {
                    let used = model.priors_used().iter().find(|u| u.parameters.contains(name)).expect("listed");
                    used.prior.sample(&mut rng)
                })
                .collect();
            model.from_prior_values(values)
        })
        .collect()
}

/// Per draw: the mean over rows of the linear predictor and its variance
/// over rows (design times coefficients, computed here row by row).
fn row_moments(model: &Model, draws: &[Vec<f64>]) -> Vec<(f64, f64)> {
    let x = model.design_matrix();
    draws
        .iter()
        .map(|beta| {
            let eta: Vec<f64> = (0..x.nrows()).map(|i| (0..x.ncols()).map(|j| x[(i, j)] * beta[j]).sum()).collect();
            let mean = eta.iter().sum::<f64>() / eta.len() as f64;
            let var = eta.iter().map(|e| (e - mean).powi(2)).sum::<f64>() / eta.len() as f64;
            (mean, var)
        })
        .collect()
}

fn y_sd(table: &Table) -> f64 {
    table.column("yield").and_then(|c| c.data.as_reals()).expect("yield").as_slice().std_dev()
}

#[test]
fn predictors_share_one_budget_whatever_their_number() {
    // The principle: the varying part of the linear predictor has prior
    // variance over the rows of T² (T = s_y for a normal outcome), split
    // among the columns. E[var over rows of Σ βⱼxⱼ] = Σ E[βⱼ²]·var(xⱼ) for
    // independent zero-mean βⱼ (variance of a sum, any probability text),
    // so the Monte Carlo mean must be near s_y² for one predictor and for
    // three. The former defaults, normal(0, 2·s_y/s_x) for each slope, give
    // 4·s_y² for one predictor and 8·s_y² for two (the budget grows with K).
    let table = orchard(120, 12);
    let target = y_sd(&table).powi(2);
    // (A category term gives one intercept per level, each with its own
    // prior, so the budget is checked on real predictors.)
    for body in ["yield from girth using trees", "yield from girth, age using trees"] {
        let model = build(body, &table);
        let draws = prior_draws(&model, 4000, 5);
        let mean_var = row_moments(&model, &draws).iter().map(|m| m.1).sum::<f64>() / draws.len() as f64;
        // Monte Carlo error of the mean of 4000 draws of a scaled chi-square
        // with 1 or 2 degrees of freedom is under 3% of the target.
        assert!((mean_var / target - 1.0).abs() < 0.1, "{body}: {mean_var} against {target}");
    }
}

#[test]
fn intercept_prior_is_on_the_average_row_under_any_centring() {
    // The prediction at the average row (the mean over rows of the linear
    // predictor) has prior normal(ȳ, s_y) whether or not girth is centred.
    // Under the former rule with `centre off`, the intercept's own prior
    // was normal(ȳ, 2·s_y) and the slope's spread times girth's mean (≈ 25)
    // was added on top, so the average-row sd was about 25 times larger.
    let table = orchard(120, 12);
    let y = table.column("yield").and_then(|c| c.data.as_reals()).expect("yield").as_slice().mean();
    let s = y_sd(&table);
    for body in ["yield from girth using trees", "yield from girth using trees\ncentre off"] {
        let model = build(body, &table);
        let means: Vec<f64> = row_moments(&model, &prior_draws(&model, 4000, 9)).iter().map(|m| m.0).collect();
        let (m, sd) = (means.as_slice().mean(), means.as_slice().std_dev());
        // The sd of 4000 normal draws is within 5% of the truth with
        // overwhelming probability (its relative error is about 1.1%).
        assert!((m - y).abs() < 0.1 * s, "{body}: mean {m} against {y}");
        assert!((sd / s - 1.0).abs() < 0.05, "{body}: sd {sd} against {s}");
    }
}

#[test]
fn defaults_are_listed_with_who_set_them() {
    let table = orchard(90, 12);
    let model = build("yield from girth using trees\nprior slopes: normal(0, 1.5)", &table);
    let used = model.priors_used();
    assert_eq!(used.len(), 3);
    assert!(!used[0].declared && used[0].at_average_row, "{:?}", used[0]);
    assert_eq!((used[1].group, used[1].declared), (PriorGroup::Slopes, true));
    assert_eq!(used[1].prior.to_string(), "normal(0, 1.5)");
    // Spread: half_normal(s_y), so the prior median is 0.674·s_y (the
    // half-normal median is Φ⁻¹(0.75)·sd, recalled).
    let Prior::HalfNormal { sd } = used[2].prior else { panic!("{:?}", used[2]) };
    assert!((sd - y_sd(&table)).abs() < 1e-12);
    assert_eq!(used[2].parameters, vec!["spread".to_string()]);
}

/// Trees with girth ~ N(100, 5) and yield = 3·girth + N(0, 4): far from 0,
/// so the raw intercept under `centre off` is far from ȳ.
fn far_from_zero(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let girth_draw = Normal::new(100.0, 5.0).expect("valid");
    let noise = Normal::new(0.0, 4.0).expect("valid");
    let girth: Vec<f64> = (0..n).map(|_| girth_draw.sample(&mut rng)).collect();
    let yield_kg: Vec<f64> = girth.iter().map(|g| 3.0 * g + noise.sample(&mut rng)).collect();
    Table {
        name: "trees".into(),
        columns: vec![column("girth", ColumnData::Real(girth)), column("yield", ColumnData::Real(yield_kg))],
    }
}

#[test]
fn centre_off_leaves_the_slope_where_least_squares_puts_it() {
    // The slope's least-squares value from the normal equations,
    // Σ(x − x̄)(y − ȳ) / Σ(x − x̄)² (any regression text), computed here.
    // With 100 rows and weak defaults the posterior mode sits within a small
    // fraction of a posterior sd of it, centred or not; the former defaults
    // (intercept prior normal(ȳ, 2·s_y) on the raw intercept) pulled the
    // `centre off` slope about 3 posterior sds towards 0. (NUTS: the mode
    // search of the Laplace method is ill-conditioned at girth ≈ 100 uncentred.)
    let table = far_from_zero(100, 3);
    let x = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth").to_vec();
    let y = table.column("yield").and_then(|c| c.data.as_reals()).expect("yield").to_vec();
    let (xm, ym) = (x.as_slice().mean(), y.as_slice().mean());
    let sxy: f64 = x.iter().zip(&y).map(|(a, b)| (a - xm) * (b - ym)).sum();
    let sxx: f64 = x.iter().map(|a| (a - xm).powi(2)).sum();
    let ols = sxy / sxx;
    let nuts = Method::Nuts(NutsSettings { chains: 2, settle: 500, draws: 500, seed: 1, threads: 1, ..NutsSettings::default() });
    for body in ["yield from girth using trees", "yield from girth using trees\ncentre off"] {
        let model = build(body, &table);
        let fit = fit_model(&model, &nuts, &AtomicBool::new(false), &|_| {}).expect("fit");
        let slope = fit.draws.get("girth slope").expect("slope draws");
        let (mean, sd) = (slope.mean(), slope.std_dev());
        // The Monte Carlo error of the mean of 1000 draws is under 0.05 sd.
        assert!((mean - ols).abs() < 0.25 * sd, "{body}: slope {mean} against least squares {ols} (sd {sd})");
    }
}

#[test]
fn centring_does_not_move_the_slope_under_a_logit_link() {
    // The same reparametrisation argument under a logit link: with the
    // default intercept prior on the average row, `centre off` changes the
    // intercept's meaning only, so the slope's mode is the same. Under the
    // former rule (intercept normal(logit p̄, 2) on the raw intercept,
    // girth's mean ≈ 25 away from 0) the two modes differed.
    let table = orchard(150, 4);
    let mut slopes = Vec::new();
    for body in ["healthy from girth using trees\nfamily bernoulli", "healthy from girth using trees\nfamily bernoulli\ncentre off"] {
        let model = build(body, &table);
        let fit = laplace(&model, &model.unconstrained_names(), &model.initial_point(), 10, 1).expect("mode");
        slopes.push(fit.mode[1]);
    }
    assert!((slopes[0] - slopes[1]).abs() < 1e-6, "{slopes:?}");
}

#[test]
fn uniform_priors_with_hard_ends_are_refused() {
    // A uniform prior's density drops to zero at its ends, so the log
    // posterior has −∞ walls there (the definition of the uniform density):
    // refused with what to use instead, for a coefficient and for the spread.
    let table = orchard(60, 2);
    for (line, group) in [("prior slopes: uniform(-50, 50)", "slopes"), ("prior spread: uniform(0, 40)", "spread")] {
        let text = model_fixtures::build_error(&format!("yield from girth using trees\n{line}"), &table);
        assert!(text.contains(&format!("uniform(-50, 50) stops the {group}")) || text.contains(&format!("uniform(0, 40) stops the {group}")), "{text}");
        assert!(text.contains("use a prior without ends"), "{text}");
    }
}
