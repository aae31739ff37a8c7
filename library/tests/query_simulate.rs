//! Synthetic data from mechanisms, recovery of known truths, calibration
//! over the prior, and predictive outcome sets.

use std::sync::atomic::AtomicBool;

use statrs::distribution::Discrete;

use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::{fit_model, Method};
use waypath::infer::nuts::NutsSettings;
use waypath::model::{Model, ModelSpec};
use waypath::query::{
    calibrate, posterior_predictive, prior_predictive, recover, QueryError, Simulation, SimulationSettings,
};
use waypath::table::{Column, ColumnData, Table};

fn graph(name: &str, lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new(name);
    for l in lines {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

fn orchard_graph() -> Graph {
    graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield", "girth -> fruit", "girth -> healthy", "hidden frost -> fruit"])
}

const ORCHARD: [&str; 6] = [
    "rootstock = category(dwarf 0.3, standard 0.7)",
    "girth = normal(28 + 6 * [rootstock = standard], 4)   # cm",
    "yield = normal(2 + 0.55 * girth + 1.5 * [rootstock = standard], 3)",
    "frost = bernoulli(0.2)",
    "fruit = poisson(log = 1 + 0.02 * girth - 0.5 * frost)",
    "healthy = bernoulli(logit = -1 + 0.1 * (girth - 30))",
];

fn parse(g: &Graph, body: &[&str], rows: usize, seed: u64) -> Result<Simulation, QueryError> {
    Simulation::parse("fake", g, SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, *l)))
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// Source: the definitions of the distributions — level shares, the normal
/// mean and sd, the bernoulli mean logistic(η) and the poisson mean e^η —
/// checked on 40 000 rows to within 4.5 standard errors.
#[test]
fn simulated_columns_follow_their_mechanisms() {
    let sim = parse(&orchard_graph(), &ORCHARD, 40_000, 7).expect("mechanisms");
    let table = sim.table().expect("table");
    assert_eq!(table.column_names(), vec!["rootstock", "girth", "yield", "fruit", "healthy"], "hidden frost is not written");
    let Some(ColumnData::Category { codes, levels }) = table.column("rootstock").map(|c| &c.data) else { panic!("category") };
    assert_eq!(levels, &["dwarf", "standard"]);
    let n = codes.len() as f64;
    let standard: Vec<bool> = codes.iter().map(|&c| c == 1).collect();
    let share = standard.iter().filter(|&&s| s).count() as f64 / n;
    assert!((share - 0.7).abs() < 4.5 * (0.21 / n).sqrt(), "{share}");
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let of = |want: bool| -> Vec<f64> { girth.iter().zip(&standard).filter(|(_, &s)| s == want).map(|(g, _)| *g).collect() };
    for (values, centre) in [(of(true), 34.0), (of(false), 28.0)] {
        let m = mean(&values);
        let sd = (values.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (values.len() - 1) as f64).sqrt();
        assert!((m - centre).abs() < 4.5 * 4.0 / (values.len() as f64).sqrt(), "{m} vs {centre}");
        // The sample sd of m normal values has sd ≈ σ/√(2m).
        assert!((sd - 4.0).abs() < 4.5 * 4.0 / (2.0 * values.len() as f64).sqrt(), "{sd}");
    }
    let healthy = table.column("healthy").and_then(|c| c.data.as_reals()).expect("healthy");
    let p: Vec<f64> = girth.iter().map(|g| 1.0 / (1.0 + (-(-1.0 + 0.1 * (g - 30.0))).exp())).collect();
    let se = (p.iter().map(|q| q * (1.0 - q)).sum::<f64>()).sqrt() / n;
    assert!((mean(&healthy) - mean(&p)).abs() < 4.5 * se);
    let fruit = table.column("fruit").and_then(|c| c.data.as_reals()).expect("fruit");
    // E[fruit | girth] = e^(1 + 0.02 girth) × (0.8 + 0.2 e^−0.5), frost being hidden and independent.
    let rate: Vec<f64> = girth.iter().map(|g| (1.0 + 0.02 * g).exp() * (0.8 + 0.2 * (-0.5f64).exp())).collect();
    let se = (rate.iter().sum::<f64>() * 1.3).sqrt() / n;
    assert!((mean(&fruit) - mean(&rate)).abs() < 4.5 * se, "{} vs {}", mean(&fruit), mean(&rate));
    let again = parse(&orchard_graph(), &ORCHARD, 40_000, 7).expect("mechanisms").table().expect("table");
    assert_eq!(again, table, "the same seed gives the same table");
}

/// Source: Wright (1934) path tracing — the total effect of rootstock on
/// yield is 1.5 + 6 × 0.55 = 4.8 — and for a linear mechanism common
/// random numbers make the simulated effect exact up to rounding.
#[test]
fn true_effect_by_simulation_matches_path_tracing() {
    let sim = parse(&orchard_graph(), &ORCHARD, 100, 1).expect("mechanisms");
    let effect = sim.true_effect("rootstock", "standard", "dwarf", "yield", 5_000, 3).expect("effect");
    assert!((effect - 4.8).abs() < 1e-9, "{effect}");
    let girth = sim.true_effect("girth", "31", "30", "yield", 1_000, 3).expect("effect");
    assert!((girth - 0.55).abs() < 1e-9, "{girth}");
}

/// Source: the mechanism's own coefficients (the truth by construction):
/// a model whose terms are exactly the outcome's parents recovers them
/// within its 90% intervals here; a model that leaves out a parent has no
/// single true coefficient and says so.
#[test]
fn recovery_lays_intervals_beside_the_mechanism_values() {
    let sim = parse(&orchard_graph(), &ORCHARD, 400, 12).expect("mechanisms");
    let cancel = AtomicBool::new(false);
    let spec = |text: &str| ModelSpec::from_lines("m_direct", [(2, text)]).expect("spec");
    let method = Method::Laplace { draws: 4000, seed: 2 };
    let r = recover(&spec("yield from rootstock, girth using fake"), &sim, &method, &cancel, 0.9).expect("recover");
    let truth = |name: &str| r.parameters.iter().find(|p| p.name == name).and_then(|p| p.truth);
    assert!((truth("girth slope").expect("slope") - 0.55).abs() < 1e-9);
    assert!((truth("spread").expect("spread") - 3.0).abs() < 1e-12);
    // The level offset is the indicator's coefficient 1.5 (standard minus dwarf at equal girth).
    let offset = truth("rootstock[standard]").expect("level") - truth("rootstock[dwarf]").expect("level");
    assert!((offset - 1.5).abs() < 1e-9);
    for p in &r.parameters {
        let t = p.truth.expect("every parameter has a truth here");
        assert_eq!(p.covered, Some(p.lower <= t && t <= p.upper));
        let sd = (p.upper - p.lower) / (2.0 * 1.645);
        assert!((p.mean - t).abs() < 4.0 * sd, "{}: {} vs {t}", p.name, p.mean);
    }
    let spec_bern = ModelSpec::from_lines("m", [(2, "healthy from girth using fake"), (3, "family bernoulli")]).expect("spec");
    let r = recover(&spec_bern, &sim, &method, &cancel, 0.9).expect("recover");
    assert!((r.parameters[1].truth.expect("slope") - 0.1).abs() < 1e-9);
    let short = recover(&spec("yield from girth using fake"), &sim, &method, &cancel, 0.9).expect("recover");
    assert!(short.parameters.iter().all(|p| p.truth.is_none()));
    assert!(short.notes.iter().any(|n| n.contains("not a linear combination")), "{:?}", short.notes);
}

fn calibration_model() -> Model {
    let g = graph("plot", &["moisture -> growth"]);
    let sim = parse(&g, &["moisture = normal(20, 5)", "growth = normal(3 + 0.4 * moisture, 2)"], 60, 5).expect("mechanisms");
    let table = sim.table().expect("table");
    let text = "growth from moisture using fake\nprior intercepts: normal(10, 5)\nprior slopes: normal(0, 1)\nprior spread: exponential(0.5)";
    let spec = ModelSpec::from_lines("m", text.lines().enumerate().map(|(i, l)| (i + 2, l))).expect("spec");
    Model::build(&spec, &table).expect("model")
}

/// Source: Talts, Betancourt, Simpson, Vehtari & Gelman (2018) — when the
/// data are simulated from the prior and the posterior is computed
/// correctly, the rank of the true value among posterior draws is uniform;
/// a chi-square test on 10 bins (statrs ChiSquared) must not reject at the
/// 0.1% level for any parameter of a small normal regression fitted by NUTS.
#[test]
fn calibration_ranks_are_uniform_under_nuts() {
    let model = calibration_model();
    let nuts = Method::Nuts(NutsSettings { chains: 1, settle: 300, draws: 297, threads: 1, seed: 0, ..NutsSettings::default() });
    let c = calibrate(&model, 200, &nuts, 17, &AtomicBool::new(false)).expect("calibrate");
    assert_eq!((c.reps, c.failures, c.draws_per_fit, c.bins), (200, 0, 99, 10));
    for p in &c.parameters {
        assert_eq!(p.ranks.len(), 200);
        assert!(p.ranks.iter().all(|&r| r <= 99));
        assert!(p.p_value.expect("200 reps give a p-value") > 0.001, "{}: chi-square {} p {:?}", p.name, p.chi_square, p.p_value);
    }
}

/// A binomial model of fruit set: `set` flowers of `visits` visited set fruit,
/// against warmth. 30 invented rows (seeded); the outcome column is only a
/// valid starting table, since calibration replaces it by simulated outcomes.
fn binomial_calibration_model() -> Model {
    let warmth: Vec<f64> = (0..30).map(|i| ((i * 17 % 30) as f64 - 14.5) / 8.0).collect();
    let visits: Vec<u64> = (0..30).map(|i| 2 + (i * 7 % 9) as u64).collect();
    let set: Vec<u64> = visits.iter().enumerate().map(|(i, v)| (i as u64 * 5) % (v + 1)).collect();
    let table = Table {
        name: "flowers".into(),
        columns: vec![
            Column::new("warmth", ColumnData::Real(warmth)),
            Column::new("visits", ColumnData::Count(visits)),
            Column::new("set", ColumnData::Count(set)),
        ],
    };
    let text = "set from warmth using flowers\nfamily binomial out of visits\nprior intercepts: normal(0, 1)\nprior slopes: normal(0, 1)";
    let spec = ModelSpec::from_lines("fruit_set", text.lines().enumerate().map(|(i, l)| (i + 2, l))).expect("spec");
    Model::build(&spec, &table).expect("model")
}

/// Upper 1% point of the chi-square distribution with 9 degrees of freedom,
/// from the NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4
/// (recalled): 21.666.
const CHI_SQUARE_9_DF_UPPER_1_PERCENT: f64 = 21.666;

/// Source: Talts et al. (2018) — ranks of prior draws among posterior draws
/// are uniform when the posterior is right; Pearson's (1900) statistic
/// Σ (O − E)² / E over 10 bins of 10 rank values each, recomputed here from
/// the ranks, must stay below the handbook's 1% critical value for a
/// binomial (logistic) model sampled by NUTS, whose simulated outcomes are
/// successes out of each row's own number of trials.
#[test]
fn binomial_calibration_ranks_are_uniform_under_nuts() {
    let model = binomial_calibration_model();
    let nuts = Method::Nuts(NutsSettings { chains: 1, settle: 300, draws: 297, threads: 1, seed: 0, ..NutsSettings::default() });
    let reps = 200;
    let c = calibrate(&model, reps, &nuts, 23, &AtomicBool::new(false)).expect("calibrate a binomial model");
    assert_eq!((c.reps, c.failures, c.draws_per_fit, c.bins), (reps, 0, 99, 10));
    assert_eq!(c.parameters.iter().map(|p| p.name.as_str()).collect::<Vec<_>>(), ["intercept", "warmth slope"]);
    for p in &c.parameters {
        assert_eq!(p.ranks.len(), reps);
        let mut observed = [0.0f64; 10];
        for &r in &p.ranks {
            assert!(r <= 99, "{}: rank {r} above the number of draws", p.name);
            observed[r / 10] += 1.0;
        }
        let expected = reps as f64 / 10.0;
        let pearson: f64 = observed.iter().map(|o| (o - expected) * (o - expected) / expected).sum();
        assert!((pearson - p.chi_square).abs() < 1e-9, "{}: reported {} vs Pearson {pearson}", p.name, p.chi_square);
        assert!(pearson < CHI_SQUARE_9_DF_UPPER_1_PERCENT, "{}: ranks far from uniform, chi-square {pearson}", p.name);
    }
}

/// Source: the binomial distribution's support — a simulated count of
/// successes lies between 0 and its row's number of trials, so calibration
/// must keep each row's trials when it swaps in simulated outcomes; with
/// trials of 2 to 10 per row some simulated counts exceed 1 (not yes/no).
#[test]
fn simulated_binomial_outcomes_stay_within_each_rows_trials() {
    use rand::SeedableRng;
    let model = binomial_calibration_model();
    let rows = model.fitted_rows();
    let trials = rows.trials.clone().expect("the trials of the fitted rows");
    let mut rng = rand::rngs::StdRng::seed_from_u64(5);
    let y = model.outcome_draw(&[0.8, 0.5], &rows, &mut rng).expect("draw");
    assert!(y.iter().zip(&trials).all(|(&s, &m)| s.fract() == 0.0 && s >= 0.0 && s <= m as f64), "{y:?}");
    assert!(y.iter().any(|&s| s > 1.0));
    let refit = model.with_outcome(y.clone()).expect("a binomial model takes new outcomes");
    assert_eq!(refit.outcome_values(), y.as_slice());
    // statrs' binomial log pmf, row by row, at each row's own trials: the refitted
    // likelihood keeps the trials rather than reading the counts as yes/no.
    let means = model.predict_mean(&[0.8, 0.5], &rows).expect("means").mean;
    let reference: f64 = y
        .iter()
        .zip(&trials)
        .zip(&means)
        .map(|((&s, &m), &p)| statrs::distribution::Binomial::new(p, m).expect("valid").ln_pmf(s as u64))
        .sum();
    let ours = refit.log_likelihood(&[0.8, 0.5]).expect("log-likelihood");
    assert!((ours - reference).abs() < 1e-9 * reference.abs(), "{ours} vs statrs {reference}");
}

/// Source: Talts et al. (2018) — with a correct posterior the ranks are
/// uniform. A normal approximation at the joint mode puts σ̂² at RSS/(n − 1)
/// on the log-σ scale, below the marginal posterior's RSS/(n − p − 1)
/// (conjugate normal–inverse-gamma algebra, recalled), which 400
/// replications detect (the former Laplace step gave p < 0.01 for the
/// spread, with over 55% of its ranks in the upper half). For a normal model
/// with normal coefficient priors the `laplace` method now draws exactly
/// (the spread's marginal on a grid, the coefficients given it), so every
/// parameter, the spread included, must pass.
#[test]
fn calibration_of_a_normal_model_under_laplace_is_exact() {
    let model = calibration_model();
    let c = calibrate(&model, 400, &Method::Laplace { draws: 99, seed: 0 }, 17, &AtomicBool::new(false)).expect("calibrate");
    for p in &c.parameters {
        assert!(p.p_value.expect("p-value") > 0.001, "{}: chi-square {} p {:?}", p.name, p.chi_square, p.p_value);
    }
    let spread = c.parameters.iter().find(|p| p.name == "spread").expect("spread");
    let high = spread.ranks.iter().filter(|&&r| r > 49).count() as f64 / spread.ranks.len() as f64;
    // Binomial(400, 0.5): sd 0.025, so 0.55 is 2 sd above one half.
    assert!((high - 0.5).abs() < 0.075, "share of high ranks {high}");
}

/// Source: the definition of a posterior predictive replicate — outcomes
/// drawn at posterior parameters. For a normal model with an intercept the
/// mean over rows of a replicate is the average-row prediction (posterior sd
/// about σ/√n) plus the mean of n fresh noises (sd σ/√n), so across sets its
/// sd is about σ·√(2/n) and it centres on the observed mean (normal linear
/// model algebra, weak priors). Both are checked with 400 sets: a version
/// that left out the noise, or the parameter uncertainty, would give an sd
/// near σ/√n, 29% too small, outside the ±15% allowed (the sample sd of 400
/// values has relative sd 3.5%); a shifted prediction would miss the centre
/// by far more than 4 Monte Carlo standard errors (0.2 of that sd).
#[test]
fn predictive_sets_have_one_value_per_row() {
    let sim = parse(&orchard_graph(), &ORCHARD, 150, 3).expect("mechanisms");
    let table = sim.table().expect("table");
    let spec = ModelSpec::from_lines("m", [(2, "yield from girth using fake")]).expect("spec");
    let model = Model::build(&spec, &table).expect("model");
    let fit = fit_model(&model, &Method::Laplace { draws: 1000, seed: 1 }, &AtomicBool::new(false), &|_| {}).expect("fit");
    let sets = 400;
    let post = posterior_predictive(&model, &fit.draws, &table, sets, 9).expect("posterior sets");
    assert_eq!((post.replicated.len(), post.replicated[0].len(), post.observed.len()), (sets, 150, 150));
    let means: Vec<f64> = post.replicated.iter().map(|r| mean(r)).collect();
    let m = mean(&means);
    let sd = (means.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (sets - 1) as f64).sqrt();
    let sigma = mean(fit.draws.get("spread").expect("spread"));
    let expected_sd = sigma * (2.0 / 150.0f64).sqrt();
    assert!((sd / expected_sd - 1.0).abs() < 0.15, "sd of replicate means {sd} against {expected_sd}");
    assert!((mean(&post.observed) - m).abs() < 4.0 * sd / (sets as f64).sqrt(), "{m} vs {}", mean(&post.observed));
    let prior = prior_predictive(&model, &table, 30, 9).expect("prior sets");
    assert_eq!((prior.replicated.len(), prior.kind.as_str()), (30, "prior"));
    assert_ne!(prior.replicated[0], prior.replicated[1]);
}

/// The sentences a scientist reads when a mechanism cannot be used.
#[test]
fn mechanism_errors_name_the_line_and_the_fix() {
    let g = orchard_graph();
    let error = |body: &[&str]| parse(&g, body, 10, 1).expect_err("error").to_string();
    let mut base: Vec<&str> = ORCHARD.to_vec();
    expect_test::expect![[r#"simulate fake: node fruit of graph orchard has no mechanism; add a line such as `fruit = normal(0, 1)`"#]]
        .assert_eq(&error(&[ORCHARD[0], ORCHARD[1], ORCHARD[2], ORCHARD[3], ORCHARD[5]]));
    base.push("soil = normal(0, 1)");
    expect_test::expect![[r#"simulate line 8: soil is not a node of graph orchard (its nodes: rootstock, girth, yield, fruit, healthy, frost); give mechanisms for its nodes only"#]]
        .assert_eq(&error(&base));
    let mut non_parent = ORCHARD.to_vec();
    non_parent[5] = "healthy = bernoulli(logit = -1 + 0.1 * yield)";
    expect_test::expect![[r#"simulate line 7: the mechanism of healthy uses yield, which is not its parent in graph orchard (its parents: girth); add the edge yield -> healthy or leave yield out"#]]
        .assert_eq(&error(&non_parent));
    let mut unknown = ORCHARD.to_vec();
    unknown[2] = "yield = normal(2 + 0.55 * grith, 3)";
    expect_test::expect![[r#"simulate line 4: the mechanism of yield uses grith, which is not a node of graph orchard; use its parents (rootstock, girth)"#]]
        .assert_eq(&error(&unknown));
    let mut bare_category = ORCHARD.to_vec();
    bare_category[1] = "girth = normal(28 + 6 * rootstock, 4)";
    expect_test::expect!["simulate line 3: rootstock is a category, so the mechanism of girth cannot use it as a number; write an indicator such as [rootstock = level] or departure(rootstock, spread)"]
        .assert_eq(&error(&bare_category));
    let mut level = ORCHARD.to_vec();
    level[1] = "girth = normal(28 + 6 * [rootstock = semi], 4)";
    expect_test::expect![[r#"simulate line 3: rootstock has no level `semi` (its levels: dwarf, standard); use one of them"#]]
        .assert_eq(&error(&level));
    let mut shares = ORCHARD.to_vec();
    shares[0] = "rootstock = category(dwarf 0.3, standard 0.6)";
    expect_test::expect![[r#"simulate line 2: the shares of rootstock add up to 0.9, not 1; adjust them"#]]
        .assert_eq(&error(&shares));
    let mut dist = ORCHARD.to_vec();
    dist[2] = "yield = gamma(2, 3)";
    expect_test::expect![[r#"simulate line 4: unknown distribution `gamma`; use category, normal, bernoulli, poisson, gamma_poisson, beta, graded, levels, exponential or weibull"#]]
        .assert_eq(&error(&dist));
    let mut syntax = ORCHARD.to_vec();
    syntax[2] = "yield = normal(2 + * girth, 3)";
    expect_test::expect![[r#"simulate line 4: unexpected `*` in `2 + * girth`"#]].assert_eq(&error(&syntax));
    let mut twice = ORCHARD.to_vec();
    twice.push("girth = normal(30, 4)");
    expect_test::expect![[r#"simulate line 8: girth already has a mechanism on line 3; keep one"#]].assert_eq(&error(&twice));
    let mut negative = ORCHARD.to_vec();
    negative[2] = "yield = normal(2 + 0 * girth, -1)";
    let sim = parse(&g, &negative, 50, 1).expect("parses");
    expect_test::expect![[r#"simulate line 4: in simulated row 1, the mean is 2 and the sd -1, but the sd must be positive and both finite; change the mechanism of yield"#]]
        .assert_eq(&sim.table().expect_err("negative sd").to_string());
}

/// Source: Pearson's chi-square test needs about 5 expected counts per bin
/// (Cochran 1954, recalled); with 30 replications over 10 bins each bin
/// expects 3, so the p-value must be withheld and the ranks still reported.
#[test]
fn too_few_replications_give_ranks_without_a_p_value() {
    let model = calibration_model();
    let c = calibrate(&model, 30, &Method::Laplace { draws: 99, seed: 0 }, 5, &AtomicBool::new(false)).expect("calibrate");
    for p in &c.parameters {
        assert_eq!(p.ranks.len(), 30);
        assert_eq!(p.p_value, None, "{}", p.name);
    }
    assert!(c.notes.iter().any(|n| n.contains("no chi-square p-value is computed")), "{:?}", c.notes);
}

/// Source: the cumulative logit's definition (McCullagh 1980, eq. 2.1):
/// a row with score s falls at or below level k with probability
/// F(c_k − s), F the logistic function, so with a constant score the level
/// shares on 40 000 rows are the differences of F at the cuts (to within
/// 4.5 binomial standard errors). Recovery: on 6,000 rows a `graded` model
/// of the same mechanism has the mechanism's slope and its cuts less the
/// first as true values, each within 4 posterior sds of the fitted mean.
#[test]
fn graded_mechanism_cuts_a_logistic_score() {
    let g = graph("grades", &["shade -> blight"]);
    let body = ["shade = normal(5, 2)", "blight = graded(0.4, none, mild -0.5, marked 1, severe 2.5)"];
    let table = parse(&g, &body, 40_000, 3).expect("mechanisms").table().expect("table");
    let Some(ColumnData::Category { codes, levels }) = table.column("blight").map(|c| &c.data) else { panic!("category") };
    assert_eq!(levels, &["none", "mild", "marked", "severe"]);
    let f = |x: f64| 1.0 / (1.0 + (-x).exp());
    let below = [0.0, f(-0.5 - 0.4), f(1.0 - 0.4), f(2.5 - 0.4), 1.0];
    let n = codes.len() as f64;
    for k in 0..4 {
        let want = below[k + 1] - below[k];
        let share = codes.iter().filter(|&&c| c as usize == k).count() as f64 / n;
        assert!((share - want).abs() < 4.5 * (want * (1.0 - want) / n).sqrt(), "level {k}: {share} vs {want}");
    }
    let body = ["shade = normal(5, 2)", "blight = graded(0.3 * (shade - 5), none, mild -0.5, marked 1, severe 2.5)"];
    let sim = parse(&g, &body, 6_000, 9).expect("mechanisms");
    let spec = ModelSpec::from_lines("m", [(2, "blight from shade using fake"), (3, "family graded")]).expect("spec");
    let method = Method::Laplace { draws: 4000, seed: 2 };
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let truth = |name: &str| r.parameters.iter().find(|p| p.name == name).and_then(|p| p.truth);
    assert!((truth("shade slope").expect("slope") - 0.3).abs() < 1e-9);
    assert!((truth("blight cut[marked]").expect("cut") - 1.5).abs() < 1e-12);
    assert!((truth("blight cut[severe]").expect("cut") - 3.0).abs() < 1e-12);
    for p in &r.parameters {
        let t = p.truth.expect("every parameter has a truth here");
        let sd = (p.upper - p.lower) / (2.0 * 1.645);
        assert!((p.mean - t).abs() < 4.0 * sd, "{}: {} vs {t}", p.name, p.mean);
    }
    let out_of_order = ["shade = normal(5, 2)", "blight = graded(shade, none, mild 1, marked 0.5)"];
    let error = parse(&g, &out_of_order, 10, 1).expect_err("cuts must increase").to_string();
    expect_test::expect![[r#"simulate line 3: the cut below level marked of blight is 0.5, not above the cut before it (1); cuts must increase"#]]
        .assert_eq(&error);
}
