//! Ordered-category predictors with learned monotone steps (`steps(c)`):
//! the density's gradient, the level order and its refusals, the mode
//! against least squares where the data's own level means already climb,
//! and one short NUTS run.

mod common;
mod model_fixtures;

use std::sync::atomic::AtomicBool;

use model_fixtures::{assert_gradient_matches, build, build_error, category, column};
use nalgebra::{DMatrix, DVector};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::infer::fit::{fit_model, Method};
use waypath::infer::laplace::laplace;
use waypath::infer::nuts::NutsSettings;
use waypath::model::LogDensity;
use waypath::table::{ColumnData, Table};

const CANOPY: [&str; 5] = ["open", "sparse", "partial", "dense", "closed"];
/// The invented truth: each step's effect on the yield (kg), all upwards.
const TRUE_STEPS: [f64; 4] = [1.0, 0.3, 2.0, 0.7];

/// Invented orchard rows: a canopy class (stated order, lowest first), a
/// girth, a yield that climbs with the canopy by [`TRUE_STEPS`], whether
/// the tree is healthy (more often under a closed canopy) and a fruit count.
fn canopy_orchard(n: usize, seed: u64, stated: bool) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut canopy, mut girth, mut yield_kg, mut healthy, mut fruit) = (vec![], vec![], vec![], vec![], vec![]);
    let block: Vec<u32> = (0..n).map(|i| (i % 6) as u32).collect();
    for _ in 0..n {
        let level = rng.random_range(0..CANOPY.len() as u32);
        let g = 20.0 + 4.0 * noise.sample(&mut rng);
        let effect: f64 = TRUE_STEPS[..level as usize].iter().sum();
        canopy.push(level);
        girth.push(g);
        yield_kg.push(10.0 + effect + 0.5 * (g - 20.0) + noise.sample(&mut rng));
        healthy.push(rng.random::<f64>() < 1.0 / (1.0 + (-(effect - 2.0) * 0.6).exp()));
        fruit.push((3.0 + effect + rng.random_range(0.0..3.0)).floor() as u64);
    }
    // An ordered outcome for the graded family: the yield cut at 11 and 13 kg.
    let grade = category(yield_kg.iter().map(|y| u32::from(*y > 11.0) + u32::from(*y > 13.0)).collect(), &["low", "fair", "high"]);
    let canopy = column("canopy", category(canopy, &CANOPY));
    Table {
        name: "trees".into(),
        columns: vec![
            if stated { canopy.with_stated_order() } else { canopy },
            column("girth", ColumnData::Real(girth)),
            column("yield", ColumnData::Real(yield_kg)),
            column("healthy", ColumnData::Binary(healthy)),
            column("fruit", ColumnData::Count(fruit)),
            column("block", category(block, &["b1", "b2", "b3", "b4", "b5", "b6"])),
            column("grade", grade).with_stated_order(),
        ],
    }
}

#[test]
fn gradient_matches_finite_differences() {
    let table = canopy_orchard(200, 1, true);
    for (k, body) in [
        "yield from steps(canopy), girth using trees",
        "healthy from steps(canopy), girth using trees\nfamily bernoulli",
        "fruit from girth, steps(canopy) using trees\nfamily poisson\nprior for canopy steps: normal(1, 2)",
        "yield from steps(canopy) using trees\nprior for canopy shares: dirichlet(0.7)",
        "yield from steps(canopy), girth, pooled block using trees",
        "grade from steps(canopy), girth using trees\nfamily graded",
        "healthy from steps(canopy), pooled block using trees\nfamily bernoulli\nparameterise block noncentred",
    ]
    .iter()
    .enumerate()
    {
        let model = build(body, &table);
        assert_gradient_matches(&model, body, 40 + k as u64, 4, 0.6);
    }
}

#[test]
fn labels_follow_the_stated_or_listed_order() {
    let table = canopy_orchard(60, 2, true);
    let model = build("yield from steps(canopy), girth using trees", &table);
    let steps: Vec<&str> = model.coefficient_names().iter().map(String::as_str).filter(|l| l.contains("step[")).collect();
    assert_eq!(
        steps,
        ["canopy step[open to sparse]", "canopy step[sparse to partial]", "canopy step[partial to dense]", "canopy step[dense to closed]"]
    );
    // An explicit order on a column whose levels came in order of appearance.
    let unordered = canopy_orchard(60, 2, false);
    let listed = build("yield from steps(canopy: closed, dense, partial, sparse, open) using trees", &unordered);
    assert!(listed.coefficient_names().contains(&"canopy step[closed to dense]".to_string()), "{:?}", listed.coefficient_names());
    // Not linear in the sampled coordinates: no exact normal draws.
    assert!(model.normal_linear().is_none());
    assert!(build("yield from canopy, girth using trees", &table).normal_linear().is_some());
    // The prior of the whole effect is listed under its own label.
    assert!(model.priors_used().iter().any(|u| u.parameters == ["canopy steps"]));
    // The shares' concentration as declared, said in the notes.
    let declared = build("yield from steps(canopy) using trees\nprior for canopy shares: dirichlet(3.5)", &table);
    assert!(declared.notes().iter().any(|n| n.contains("dirichlet(3.5)")), "{:?}", declared.notes());
    assert!(model.notes().iter().any(|n| n.contains("dirichlet(2)")), "{:?}", model.notes());
}

#[test]
fn unordered_or_mislisted_columns_are_refused_with_the_way_out() {
    let unordered = canopy_orchard(60, 3, false);
    let error = build_error("yield from steps(canopy) using trees", &unordered);
    for part in ["canopy", "order of first appearance", "category(open, sparse", "steps(canopy: open"] {
        assert!(error.contains(part), "missing `{part}` in: {error}");
    }
    let error = build_error("yield from steps(canopy: open, sparse, dense, closed) using trees", &unordered);
    assert!(error.contains("not listed: partial"), "{error}");
    let error = build_error("yield from steps(girth) using trees", &unordered);
    assert!(error.contains("girth") && error.contains("category"), "{error}");
    let error = build_error("yield from steps(canopy), girth using trees\nprior for canopy step[open to sparse]: normal(0, 1)", &canopy_orchard(60, 3, true));
    assert!(error.contains("canopy steps"), "the labels listed name the whole effect: {error}");
    let ordered = canopy_orchard(60, 3, true);
    let error = build_error("yield from steps(canopy), girth using trees\nprior for girth shares: dirichlet(2)", &ordered);
    assert!(error.contains("girth shares") && error.contains("`canopy shares`") && error.contains("line 3"), "{error}");
    let error = model_fixtures::try_spec("yield from steps(canopy) using trees\nprior for canopy shares: dirichlet(0)").unwrap_err().to_string();
    assert!(error.contains("α > 0"), "{error}");
}

/// Least squares on indicator columns (the textbook normal equations,
/// solved here by QR, e.g. Golub & Van Loan, Matrix Computations, §5.3
/// (recalled)): where the level means already climb, the monotone
/// constraint does not bind, and with wide priors and many rows the
/// posterior mode's steps are the differences of neighbouring levels'
/// offsets, within a part of their standard errors: the mode on the
/// sampler's scale keeps the shares' dirichlet(2) prior and the
/// stick-breaking Jacobian, which pull it towards equal steps by a
/// distance that shrinks like 1/√n in standard errors (about a fifth of
/// one at these 4000 rows).
#[test]
fn mode_matches_least_squares_where_the_levels_already_climb() {
    let n = 4000;
    let table = canopy_orchard(n, 4, true);
    let body = "yield from steps(canopy), girth using trees\nprior intercepts: normal(0, 1000)\nprior slopes: normal(0, 1000)";
    let model = build(body, &table);
    let fit = laplace(&model, &model.unconstrained_names(), &model.initial_point(), 10, 1).expect("mode found");
    let params = model.constrain(&fit.mode);
    let names = model.parameter_names();
    // Least squares: intercept, offsets of levels 1..4 from the lowest, girth.
    let canopy = match &table.column("canopy").unwrap().data {
        ColumnData::Category { codes, .. } => codes.clone(),
        _ => unreachable!(),
    };
    let girth = table.column("girth").unwrap().data.as_reals().unwrap();
    let y = table.column("yield").unwrap().data.as_reals().unwrap();
    let x = DMatrix::from_fn(n, 6, |i, j| match j {
        0 => 1.0,
        5 => girth[i],
        k => f64::from(canopy[i] == k as u32),
    });
    let qr = x.clone().qr();
    let beta = qr.r().solve_upper_triangular(&(qr.q().transpose() * DVector::from_vec(y.clone()))).expect("full rank");
    let residual = DVector::from_vec(y) - &x * &beta;
    let sigma2 = residual.norm_squared() / (n - 6) as f64;
    let covariance = (x.transpose() * &x).try_inverse().expect("invertible") * sigma2;
    let offsets = [0.0, beta[1], beta[2], beta[3], beta[4]];
    let offset_var = |k: usize| if k == 0 { 0.0 } else { covariance[(k, k)] };
    assert!(offsets.windows(2).all(|w| w[1] > w[0]), "the data's own offsets climb: {offsets:?}");
    for k in 1..5 {
        let label = format!("canopy step[{} to {}]", CANOPY[k - 1], CANOPY[k]);
        let at = names.iter().position(|l| *l == label).expect("step label");
        let ols = offsets[k] - offsets[k - 1];
        let cross = if k >= 2 { covariance[(k - 1, k)] } else { 0.0 };
        let se = (offset_var(k) + offset_var(k - 1) - 2.0 * cross).sqrt();
        assert!((params[at] - ols).abs() < 0.35 * se, "{label}: mode {} vs least squares {ols} (se {se})", params[at]);
    }
}

#[test]
fn short_nuts_run_recovers_the_steps_and_keeps_them_in_one_direction() {
    let table = canopy_orchard(300, 5, true);
    let model = build("yield from steps(canopy), girth using trees", &table);
    let settings = NutsSettings { chains: 2, settle: 300, draws: 300, seed: 9, threads: 1, ..NutsSettings::default() };
    let fit = fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {}).expect("fit runs");
    let diagnostics = fit.diagnostics.as_ref().expect("NUTS diagnostics");
    let names = model.parameter_names();
    for (k, truth) in TRUE_STEPS.iter().enumerate() {
        let label = format!("canopy step[{} to {}]", CANOPY[k], CANOPY[k + 1]);
        let draws = fit.draws.require(&label).expect("draws of the step");
        assert!(draws.iter().all(|d| *d > 0.0), "{label}: every draw climbs with the whole effect");
        let mean = draws.iter().sum::<f64>() / draws.len() as f64;
        let sd = (draws.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / draws.len() as f64).sqrt();
        assert!((mean - truth).abs() < 4.0 * sd, "{label}: mean {mean} (sd {sd}) vs truth {truth}");
        let at = names.iter().position(|l| *l == label).unwrap();
        assert!(diagnostics[at].rhat < 1.05, "{label}: R-hat {}", diagnostics[at].rhat);
    }
    assert_eq!(fit.divergences, 0);
    // Round trip of the constrained steps through the unconstrained scale.
    let point = model.constrain(&model.initial_point().iter().map(|v| v + 0.3).collect::<Vec<_>>());
    let back = model.constrain(&model.unconstrain(&point).expect("unconstrains"));
    point.iter().zip(&back).for_each(|(a, b)| assert!((a - b).abs() < 1e-9, "{point:?} vs {back:?}"));
    assert_eq!(model.dim(), names.len());
}

/// A contrast between two levels reads the steps between them: under
/// the invented truth the dense canopy out-yields the sparse one by
/// 0.3 + 2.0 kg, and since every draw's steps share one sign, every draw
/// of the contrast has it too.
#[test]
fn contrasts_between_levels_respect_the_monotone_steps() {
    use waypath::query::contrast::{contrast, ContrastRequest};
    let table = canopy_orchard(300, 6, true);
    let model = build("yield from steps(canopy), girth using trees", &table);
    let settings = NutsSettings { chains: 2, settle: 300, draws: 300, seed: 11, threads: 1, ..NutsSettings::default() };
    let fit = fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {}).expect("fit runs");
    for (to, from) in [("dense", "sparse"), ("partial", "open"), ("closed", "dense")] {
        let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("canopy").between(to, from)).expect("contrast");
        let (a, b) = (CANOPY.iter().position(|l| *l == from).unwrap(), CANOPY.iter().position(|l| *l == to).unwrap());
        let truth: f64 = TRUE_STEPS[a..b].iter().sum();
        assert_eq!(c.share_above_zero, 1.0, "{to} vs {from}: every draw climbs");
        assert!(c.lower < truth && truth < c.upper, "{to} vs {from}: [{}, {}] misses {truth}", c.lower, c.upper);
    }
    // The reverse direction: every draw falls.
    let c = contrast(&model, &fit.draws, &table, &ContrastRequest::new("canopy").between("open", "closed")).expect("contrast");
    assert_eq!(c.share_below_zero, 1.0);
}

/// Simulation-based calibration (Talts, Betancourt, Simpson, Vehtari &
/// Gelman 2018, arXiv:1804.06788, algorithm 1), small: 100 replications
/// whose truths are drawn from the declared priors — the shares from
/// rand_distr's Dirichlet, independent of the model's own stick-breaking
/// code — each fitted by one short NUTS chain; the ranks of every
/// parameter must pass Pearson's chi-square test of uniformity. Twelve
/// rows keep the shares' prior in play: truths drawn from dirichlet(0.5)
/// instead of the model's dirichlet(2) fail it.
#[test]
fn calibration_of_the_steps_is_uniform() {
    use common::sbc::{assert_uniform, rank_of, KEPT, THIN};
    use std::sync::atomic::{AtomicUsize, Ordering};
    use std::sync::Mutex;
    const REPLICATIONS: usize = 100;
    let body = "yield from steps(canopy) using trees\nprior intercepts: normal(10, 2)\nprior for canopy steps: normal(0, 2)\nprior spread: exponential(1)";
    let spec = model_fixtures::spec(body);
    let levels = ["low", "mid", "high", "top"];
    let one = |rep: usize| -> Vec<usize> {
        let mut rng = StdRng::seed_from_u64(500 + rep as u64);
        let intercept = Normal::new(10.0, 2.0).unwrap().sample(&mut rng);
        let whole = Normal::new(0.0, 2.0).unwrap().sample(&mut rng);
        let shares: Vec<f64> = rand_distr::multi::Dirichlet::new(&[2.0, 2.0, 2.0]).unwrap().sample(&mut rng);
        let spread = rand_distr::Exp::new(1.0).unwrap().sample(&mut rng);
        let n = 12;
        let codes: Vec<u32> = (0..n).map(|i| (i % 4) as u32).collect();
        let noise = Normal::new(0.0, 1.0).unwrap();
        let y: Vec<f64> = codes
            .iter()
            .map(|&k| intercept + whole * shares[..k as usize].iter().sum::<f64>() + spread * noise.sample(&mut rng))
            .collect();
        let table = Table {
            name: "trees".into(),
            columns: vec![column("canopy", category(codes, &levels)).with_stated_order(), column("yield", ColumnData::Real(y))],
        };
        let model = waypath::model::Model::build(&spec, &table).expect("builds");
        let settings = NutsSettings { chains: 1, settle: 250, draws: KEPT * THIN, seed: rep as u64, threads: 1, ..NutsSettings::default() };
        let fit = fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {}).expect("fit runs");
        let mut truth = vec![intercept];
        truth.extend(shares.iter().map(|s| whole * s));
        truth.push(spread);
        fit.draws.values.iter().zip(&truth).map(|(draws, &t)| rank_of(t, draws.iter().copied())).collect()
    };
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<(usize, Vec<usize>)>> = Mutex::new(Vec::new());
    std::thread::scope(|scope| {
        for _ in 0..2 {
            scope.spawn(|| loop {
                let rep = next.fetch_add(1, Ordering::SeqCst);
                if rep >= REPLICATIONS {
                    break;
                }
                let ranks = one(rep);
                results.lock().unwrap().push((rep, ranks));
            });
        }
    });
    let mut per_rep = results.into_inner().unwrap();
    per_rep.sort_by_key(|(rep, _)| *rep);
    let ranks: Vec<Vec<usize>> = (0..per_rep[0].1.len()).map(|p| per_rep.iter().map(|(_, r)| r[p]).collect()).collect();
    assert_uniform(&["intercept", "step 1", "step 2", "step 3", "spread"], &ranks);
}
