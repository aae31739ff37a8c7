//! Pooled groups (`pooled <category>`): the density's gradient, the change
//! of variables between the centred and non-centred forms, the closed-form
//! posterior of a normal–normal hierarchical model, and the errors a cell
//! can meet.

mod model_fixtures;

use std::sync::atomic::AtomicBool;

use model_fixtures::{assert_gradient_matches, build, build_error, category, column, orchard_with_plots, value_and_gradient};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::infer::fit::{fit_model, Method};
use waypath::model::LogDensity;
use waypath::table::{ColumnData, Table};

fn check_gradient(body: &str, seed: u64) {
    let table = orchard_with_plots(150, 7);
    let model = build(body, &table);
    assert!(model.dim() > model.coefficient_names().len() + 12, "{body}: the groups add coordinates");
    assert_gradient_matches(&model, body, seed, 4, 0.4);
}

const LAYOUTS: [&str; 2] = ["centred", "noncentred"];

#[test]
fn gradient_of_every_family_and_layout_matches_finite_differences() {
    for (k, layout) in LAYOUTS.iter().enumerate() {
        let both = format!("parameterise plot {layout}\nparameterise row {layout}");
        let seed = 10 * k as u64;
        check_gradient(&format!("yield from rootstock, girth, pooled plot, pooled row using trees\n{both}"), seed + 1);
        check_gradient(
            &format!("healthy from girth, pooled plot, pooled row using trees\nfamily bernoulli\n{both}"),
            seed + 2,
        );
        check_gradient(
            &format!("set from rootstock, pooled plot, pooled row using trees\nfamily binomial out of visits\n{both}"),
            seed + 3,
        );
        check_gradient(
            &format!("fruit from girth, pooled plot, pooled row using trees\nfamily poisson\n{both}"),
            seed + 4,
        );
    }
    check_gradient(
        "yield from girth, pooled plot using trees\nprior pooled spreads: exponential(0.5)\nprior spread: lognormal(1, 1)",
        30,
    );
    // A single intercept: the first centred group is sampled around it.
    for family in ["normal", "bernoulli"] {
        let outcome = if family == "normal" { "yield" } else { "healthy" };
        check_gradient(
            &format!("{outcome} from girth, pooled plot, pooled row using trees\nfamily {family}\nparameterise plot centred\nparameterise row centred"),
            31,
        );
    }
}

/// Change of variables (any probability text, e.g. Casella & Berger,
/// Statistical Inference, 2nd ed., Thm 2.1.5 and its many-variable form
/// §4.6; recalled): two coordinate systems of one posterior differ in log
/// density by the log |det| of the Jacobian of the map between them. The
/// centred layout (the intercept as its standard score about the level
/// means, then the level means) and the non-centred one (the intercept,
/// then the departures' standard scores) are mapped into each other through
/// the constrained parameters, `T = unconstrain_nc ∘ constrain_c`; `T`'s
/// Jacobian is taken here by central differences (error O(h²), Nocedal &
/// Wright, Numerical Optimization, 2nd ed., §8.1; recalled), not from the
/// formula the model uses. Checked on many levels (plots, normal family)
/// and on three (soils, Weibull), the case the score layout is for.
#[test]
fn centred_and_noncentred_layouts_are_one_density() {
    let plots = orchard_with_plots(150, 3);
    let times = model_fixtures::orchard_with_times(120, 3);
    let cases = [
        ("yield from girth, pooled plot using trees\nparameterise plot ", &plots, "plot", "P1"),
        ("ripening from girth, pooled soil using trees\nfamily weibull\nparameterise soil ", &times, "soil", "loam"),
    ];
    for (body, table, group, level) in cases {
        let centred = build(&format!("{body}centred"), table);
        let noncentred = build(&format!("{body}noncentred"), table);
        let first = centred.first_group_index();
        assert_eq!(centred.unconstrained_names()[0], format!("intercept: score about the {group} level means"));
        assert_eq!(centred.unconstrained_names()[first + 1], format!("intercept + {group} departure[{level}]"));
        assert_eq!(noncentred.unconstrained_names()[0], "intercept");
        assert_eq!(noncentred.unconstrained_names()[first + 1], format!("{group} departure[{level}] / {group} spread"));
        let across = |theta: &[f64]| noncentred.unconstrain(&centred.constrain(theta)).expect("valid parameters");
        let mut rng = StdRng::seed_from_u64(4);
        for _ in 0..4 {
            let theta: Vec<f64> = centred.initial_point().iter().map(|v| v + rng.random_range(-0.8..0.8)).collect();
            let dim = theta.len();
            let h = 1e-5;
            let mut jacobian = nalgebra::DMatrix::<f64>::zeros(dim, dim);
            for k in 0..dim {
                let (mut up, mut down) = (theta.clone(), theta.clone());
                up[k] += h;
                down[k] -= h;
                let (a, b) = (across(&up), across(&down));
                for i in 0..dim {
                    jacobian[(i, k)] = (a[i] - b[i]) / (2.0 * h);
                }
            }
            let log_det = jacobian.determinant().abs().ln();
            let (value_c, _) = value_and_gradient(&centred, &theta);
            let (value_n, _) = value_and_gradient(&noncentred, &across(&theta));
            assert!(
                (value_c - (value_n + log_det)).abs() < 1e-6 * value_c.abs().max(1.0),
                "{body}: centred {value_c} vs non-centred {value_n} + log|det J| {log_det}"
            );
            let back = centred.unconstrain(&centred.constrain(&theta)).expect("valid parameters");
            for (x, y) in back.iter().zip(&theta) {
                assert!((x - y).abs() < 1e-9 * x.abs().max(1.0), "{body}: round trip {x} vs {y}");
            }
        }
    }
}

/// Normal–normal hierarchical model with known data variances and a
/// learned population spread: Gelman et al., Bayesian Data Analysis, 3rd
/// ed., §5.4 (recalled). With `μ` flat, `p(τ | y) ∝ p(τ)·V_μ^½·Π normal(ȳⱼ |
/// μ̂, σⱼ² + τ²)`, and given `τ` the posterior means of `μ` and `θⱼ` are
/// `μ̂(τ)` and `θ̂ⱼ(τ)` (formulas in the next test's notes). One-dimensional
/// quadrature over `τ` gives the posterior means of `τ`, `μ` and each `θⱼ`;
/// NUTS on Waypath's model with three levels (the centred layout, whose
/// intercept is sampled as its score about the level means) must agree
/// within Monte Carlo error. The `normal(0, 1000)` intercept prior is flat
/// against the data; the spread is pinned by a lognormal prior of log-sd
/// 0.0005.
#[test]
fn three_level_posterior_with_learned_spread_matches_quadrature() {
    let (sigma, sizes) = (2.0_f64, [4usize, 6, 10]);
    let centres = [9.0, 10.5, 11.5];
    let mut rng = StdRng::seed_from_u64(71);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut y, mut codes) = (Vec::new(), Vec::new());
    for (j, (&n, c)) in sizes.iter().zip(centres).enumerate() {
        for _ in 0..n {
            y.push(c + sigma * unit.sample(&mut rng));
            codes.push(j as u32);
        }
    }
    let table = Table {
        name: "t".into(),
        columns: vec![column("y", ColumnData::Real(y.clone())), column("g", category(codes.clone(), &["G1", "G2", "G3"]))],
    };
    let means: Vec<f64> = (0..sizes.len())
        .map(|j| {
            let rows: Vec<f64> = y.iter().zip(&codes).filter(|(_, &c)| c as usize == j).map(|(v, _)| *v).collect();
            rows.iter().sum::<f64>() / rows.len() as f64
        })
        .collect();
    let noise: Vec<f64> = sizes.iter().map(|&n| sigma * sigma / n as f64).collect();
    // Quadrature over τ on (0, 12] (the half-normal(1.5) prior leaves < 1e-12 beyond), Simpson's rule.
    let prior_sd = 1.5;
    let given_tau = |tau: f64| {
        let weights: Vec<f64> = noise.iter().map(|s| 1.0 / (s + tau * tau)).collect();
        let v_mu = 1.0 / weights.iter().sum::<f64>();
        let mu_hat = v_mu * means.iter().zip(&weights).map(|(m, w)| m * w).sum::<f64>();
        let log_like: f64 = means
            .iter()
            .zip(&noise)
            .map(|(m, s)| -0.5 * (m - mu_hat).powi(2) / (s + tau * tau) - 0.5 * (s + tau * tau).ln())
            .sum();
        let density = (-0.5 * (tau / prior_sd).powi(2) + 0.5 * v_mu.ln() + log_like).exp();
        let thetas: Vec<f64> = means
            .iter()
            .zip(&noise)
            .map(|(m, s)| (m / s + mu_hat / (tau * tau)) / (1.0 / s + 1.0 / (tau * tau)))
            .collect();
        (density, mu_hat, thetas)
    };
    let steps = 4000;
    let h = 12.0 / steps as f64;
    let (mut mass, mut tau_sum, mut tau2_sum, mut mu_sum, mut theta_sums) = (0.0, 0.0, 0.0, 0.0, [0.0; 3]);
    for k in 1..=steps {
        let tau = k as f64 * h;
        let w = if k == steps { 1.0 } else if k % 2 == 1 { 4.0 } else { 2.0 };
        let (d, mu, thetas) = given_tau(tau);
        mass += w * d;
        tau_sum += w * d * tau;
        tau2_sum += w * d * tau * tau;
        mu_sum += w * d * mu;
        for (t, v) in theta_sums.iter_mut().zip(&thetas) {
            *t += w * d * v;
        }
    }
    let (tau_mean, mu_mean) = (tau_sum / mass, mu_sum / mass);
    let tau_sd = (tau2_sum / mass - tau_mean * tau_mean).sqrt();
    let body = format!(
        "y from pooled g using t\nprior intercepts: normal(0, 1000)\nprior spread: lognormal({}, 0.0005)\n\
         prior pooled spreads: half_normal({prior_sd})\nparameterise g centred",
        sigma.ln()
    );
    let model = build(&body, &table);
    assert!(model.unconstrained_names()[0].contains("score about"), "{:?}", model.unconstrained_names());
    let settings = waypath::infer::nuts::NutsSettings { seed: 5, acceptance: 0.95, ..Default::default() };
    let fit = fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {}).expect("NUTS fit");
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let sd = |v: &[f64]| (v.iter().map(|x| (x - mean(v)).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt();
    // Four Monte Carlo errors of a mean over 1,000 effective draws (the
    // kept draws number 8,000).
    let close = |draws: &[f64], want: f64, what: &str| {
        let tolerance = 4.0 * sd(draws) / 1000f64.sqrt();
        assert!((mean(draws) - want).abs() < tolerance, "{what}: NUTS {} vs quadrature {want} (± {tolerance})", mean(draws));
    };
    let tau = fit.draws.get("g spread").expect("spread draws");
    close(tau, tau_mean, "spread");
    assert!((sd(tau) / tau_sd - 1.0).abs() < 0.1, "spread sd: NUTS {} vs quadrature {tau_sd}", sd(tau));
    let intercept = fit.draws.get("intercept").expect("intercept draws");
    close(intercept, mu_mean, "intercept");
    for (j, sum) in theta_sums.iter().enumerate() {
        let departure = fit.draws.get(&format!("g departure[G{}]", j + 1)).expect("departure draws");
        let theta: Vec<f64> = intercept.iter().zip(departure).map(|(a, b)| a + b).collect();
        close(&theta, sum / mass, &format!("level mean G{}", j + 1));
    }
}

/// Normal–normal hierarchical model with known variances: Gelman et al.,
/// Bayesian Data Analysis, 3rd ed., §5.4 (recalled). Group `j` has `nⱼ`
/// rows with mean `ȳⱼ`, so `ȳⱼ | θⱼ ~ normal(θⱼ, σⱼ²)` with `σⱼ² = σ²/nⱼ`;
/// `θⱼ ~ normal(μ, τ²)`, `μ` flat. Then
/// `μ | τ, y ~ normal(μ̂, V_μ)`, `μ̂ = Σ ȳⱼ/(σⱼ²+τ²) / Σ 1/(σⱼ²+τ²)`,
/// `V_μ = 1/Σ 1/(σⱼ²+τ²)`; `θⱼ | μ, τ, y ~ normal(θ̂ⱼ, Vⱼ)` with
/// `θ̂ⱼ = (ȳⱼ/σⱼ² + μ/τ²)/(1/σⱼ² + 1/τ²)`, `Vⱼ = 1/(1/σⱼ² + 1/τ²)`;
/// integrating `μ` out, `E θⱼ = Vⱼ(ȳⱼ/σⱼ² + μ̂/τ²)` and
/// `var θⱼ = Vⱼ + (Vⱼ/τ²)²·V_μ`.
///
/// Waypath's model `y from pooled g` with the spread and the pooled spread
/// pinned by lognormal priors of log-sd 0.0005 and a `normal(0, 1000)`
/// intercept (flat against the data) has `θⱼ = intercept + departureⱼ`.
/// Its posterior is then normal, so the Laplace draws are exact up to
/// Monte Carlo error; 40,000 draws leave an error of sd/200 in a mean and
/// about 0.4% in an sd.
#[test]
fn group_means_match_the_normal_normal_closed_form() {
    let (sigma, tau, mu) = (2.0_f64, 1.5_f64, 10.0);
    let sizes = [2usize, 3, 5, 8, 12, 20, 30, 45];
    let mut rng = StdRng::seed_from_u64(55);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut y, mut codes) = (Vec::new(), Vec::new());
    for (j, &n) in sizes.iter().enumerate() {
        let theta = mu + tau * unit.sample(&mut rng);
        for _ in 0..n {
            y.push(theta + sigma * unit.sample(&mut rng));
            codes.push(j as u32);
        }
    }
    let names: Vec<String> = (1..=sizes.len()).map(|k| format!("G{k}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    let table = Table {
        name: "t".into(),
        columns: vec![column("y", ColumnData::Real(y.clone())), column("g", category(codes.clone(), &names))],
    };
    // The closed form.
    let means: Vec<f64> = (0..sizes.len())
        .map(|j| {
            let rows: Vec<f64> = y.iter().zip(&codes).filter(|(_, &c)| c as usize == j).map(|(v, _)| *v).collect();
            rows.iter().sum::<f64>() / rows.len() as f64
        })
        .collect();
    let noise: Vec<f64> = sizes.iter().map(|&n| sigma * sigma / n as f64).collect();
    let weights: Vec<f64> = noise.iter().map(|s| 1.0 / (s + tau * tau)).collect();
    let v_mu = 1.0 / weights.iter().sum::<f64>();
    let mu_hat = v_mu * means.iter().zip(&weights).map(|(m, w)| m * w).sum::<f64>();
    let expected: Vec<(f64, f64)> = means
        .iter()
        .zip(&noise)
        .map(|(m, s)| {
            let v = 1.0 / (1.0 / s + 1.0 / (tau * tau));
            let mean = v * (m / s + mu_hat / (tau * tau));
            let var = v + (v / (tau * tau)).powi(2) * v_mu;
            (mean, var.sqrt())
        })
        .collect();
    for layout in LAYOUTS {
        let body = format!(
            "y from pooled g using t\nprior intercepts: normal(0, 1000)\nprior spread: lognormal({}, 0.0005)\n\
             prior pooled spreads: lognormal({}, 0.0005)\nparameterise g {layout}",
            sigma.ln(),
            tau.ln()
        );
        let model = build(&body, &table);
        let fit = fit_model(&model, &Method::Laplace { draws: 40_000, seed: 9 }, &AtomicBool::new(false), &|_| {})
            .expect("Laplace fit");
        let intercept = fit.draws.get("intercept").expect("intercept draws");
        let mu_draws_mean = intercept.iter().sum::<f64>() / intercept.len() as f64;
        assert!(
            (mu_draws_mean - mu_hat).abs() < 0.03 * v_mu.sqrt(),
            "{layout}: population mean {mu_draws_mean} vs closed form {mu_hat} (sd {})",
            v_mu.sqrt()
        );
        for (j, (mean, sd)) in expected.iter().enumerate() {
            let departure = fit.draws.get(&format!("g departure[G{}]", j + 1)).expect("departure draws");
            let theta: Vec<f64> = intercept.iter().zip(departure).map(|(a, b)| a + b).collect();
            let m = theta.iter().sum::<f64>() / theta.len() as f64;
            let s = (theta.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (theta.len() - 1) as f64).sqrt();
            assert!((m - mean).abs() < 0.03 * sd, "{layout}: group {} mean {m} vs closed form {mean} (sd {sd})", j + 1);
            assert!((s / sd - 1.0).abs() < 0.03, "{layout}: group {} sd {s} vs closed form {sd}", j + 1);
            // Partial pooling: each posterior mean lies between the raw mean and the population mean.
            let (lo, hi) = if means[j] < mu_hat { (means[j], mu_hat) } else { (mu_hat, means[j]) };
            assert!(m > lo - 0.03 * sd && m < hi + 0.03 * sd, "{layout}: group {} not shrunk", j + 1);
        }
    }
}

#[test]
fn pooled_groups_are_labelled_by_level_and_named_spreads() {
    let table = orchard_with_plots(80, 1);
    let model = build("yield from girth, pooled soil using trees", &table);
    let names = model.parameter_names();
    let first = model.first_group_index();
    assert_eq!(
        names[first..].to_vec(),
        ["soil spread", "soil departure[loam]", "soil departure[sandy]", "soil departure[clay]"]
    );
    assert_eq!(names[first - 1], "spread");
    // README, output structures: a spread's share above zero is left out (it cannot be negative).
    use waypath::model::terms::design::is_spread_label;
    assert!(is_spread_label(&names[first]) && is_spread_label("spread"));
    assert!(names[first + 1..].iter().all(|n| !is_spread_label(n)), "{names:?}");
    let used: Vec<&str> = model.priors_used().iter().map(|u| u.group.name()).collect();
    assert!(used.contains(&"pooled spreads"), "{used:?}");
}

#[test]
fn bad_pooled_cells_are_refused_with_the_place_named() {
    let table = orchard_with_plots(80, 1);
    let real = build_error("yield from pooled girth using trees", &table);
    assert!(real.contains("girth") && real.contains("category"), "{real}");
    let twice = build_error("yield from soil, pooled soil using trees", &table);
    assert!(twice.contains("soil") && twice.contains("already"), "{twice}");
    let stray = build_error("yield from girth, pooled plot using trees\nparameterise soil centred", &table);
    assert!(stray.contains("soil") && stray.contains("not a pooled group"), "{stray}");
    let word = build_error("yield from girth, pooled plot using trees\nparameterise plot sideways", &table);
    assert!(word.contains("noncentred"), "{word}");
    let prior = build_error("yield from girth using trees\nprior pooled spreads: half_normal(1)", &table);
    assert!(prior.contains("pooled spreads") && prior.contains("no"), "{prior}");
    let negative = build_error("yield from girth, pooled plot using trees\nprior pooled spreads: normal(0, 1)", &table);
    assert!(negative.contains("positive"), "{negative}");
}

/// The funnel (Neal 2003, Annals of Statistics 31, 705–767, §8; recalled;
/// Betancourt & Girolami 2015 for hierarchical models): 60 groups of 2
/// rows whose true spread is small against the noise. Centred, the
/// posterior of (log spread, departures) is a funnel whose neck is hard for
/// NUTS to enter; the automatic choice must take the non-centred form here
/// and sample without a divergent trajectory.
#[test]
fn a_funnel_is_sampled_without_divergences_by_the_automatic_choice() {
    let (groups, per) = (60usize, 2usize);
    let mut rng = StdRng::seed_from_u64(21);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut y, mut codes) = (Vec::new(), Vec::new());
    for j in 0..groups {
        let departure = 0.02 * unit.sample(&mut rng);
        for _ in 0..per {
            y.push(5.0 + departure + unit.sample(&mut rng));
            codes.push(j as u32);
        }
    }
    let names: Vec<String> = (1..=groups).map(|k| format!("C{k}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    let table = Table {
        name: "t".into(),
        columns: vec![column("y", ColumnData::Real(y)), column("clinic", category(codes, &names))],
    };
    let settings = waypath::infer::nuts::NutsSettings {
        chains: 2,
        settle: 300,
        draws: 500,
        seed: 8,
        ..waypath::infer::nuts::NutsSettings::default()
    };
    let run = |body: &str| {
        let model = build(body, &table);
        let fit = fit_model(&model, &Method::Nuts(settings.clone()), &AtomicBool::new(false), &|_| {}).expect("NUTS fit");
        (model, fit.divergences)
    };
    let (automatic, divergences) = run("y from pooled clinic using t");
    let note = automatic.notes().iter().find(|n| n.starts_with("pooled clinic")).expect("a note on the group");
    assert!(note.contains("sampled noncentred (chosen from the data"), "{note}");
    assert_eq!(divergences, 0, "the automatic choice diverged");
}

/// The three contrasts of a model with a pooled group, at one fixed
/// parameter point repeated as every draw (bernoulli, logit link):
/// * an existing level `j`: `logistic(β₁ + aⱼ) − logistic(β₀ + aⱼ)`, the
///   model's own definition of the mean;
/// * a new level: by the law of total expectation
///   `∫ [logistic(β₁ + τz) − logistic(β₀ + τz)] φ(z) dz`, computed by the
///   trapezoid rule on [−9, 9] (geometric convergence for a smooth
///   integrand with Gaussian weight: Trefethen & Weideman 2014, SIAM
///   Review 56, 385–458; recalled). Waypath draws one departure per draw,
///   so 40,000 draws leave a Monte Carlo error of about 1e-4 here.
#[test]
fn contrasts_for_an_existing_and_a_new_group() {
    use waypath::draws::Draws;
    use waypath::query::{contrast, ContrastRequest};
    let table = orchard_with_plots(120, 2);
    let model = build("healthy from rootstock, pooled soil using trees\nfamily bernoulli", &table);
    let names = model.parameter_names();
    assert_eq!(names.len(), 6, "{names:?}");
    let (b0, b1, tau, departures) = (-0.4, 0.7, 1.3, [0.9, -1.1, 0.2]);
    let point = vec![b0, b1, tau, departures[0], departures[1], departures[2]];
    let draws = Draws::from_chains(names, vec![vec![point; 40_000]]).expect("draws");
    let logistic = |x: f64| 1.0 / (1.0 + (-x).exp());

    let existing = ContrastRequest { held: vec![("soil".into(), "sandy".into())], ..ContrastRequest::new("rootstock") };
    let c = contrast(&model, &draws, &table, &existing).expect("contrast");
    let want = logistic(b1 + departures[1]) - logistic(b0 + departures[1]);
    assert!((c.mean - want).abs() < 1e-12, "existing level: {} vs {want}", c.mean);
    assert!(c.notes.iter().any(|n| n.contains("existing soil sandy")), "{:?}", c.notes);

    let c = contrast(&model, &draws, &table, &ContrastRequest::new("rootstock")).expect("contrast");
    let steps = 3600;
    let h = 18.0 / steps as f64;
    let want: f64 = (0..=steps)
        .map(|k| {
            let z = -9.0 + k as f64 * h;
            let weight = if k == 0 || k == steps { 0.5 } else { 1.0 };
            weight * h * (-0.5 * z * z).exp() / (2.0 * std::f64::consts::PI).sqrt()
                * (logistic(b1 + tau * z) - logistic(b0 + tau * z))
        })
        .sum();
    let at_zero = logistic(b1) - logistic(b0);
    assert!((c.mean - want).abs() < 1e-3, "new level: {} vs {want}", c.mean);
    assert!((want - at_zero).abs() > 5e-3, "the case must tell a new level from a departure of 0");
    assert!(c.notes.iter().any(|n| n.contains("new soil drawn from the population")), "{:?}", c.notes);
}
