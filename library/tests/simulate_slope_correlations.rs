//! Correlations between two slopes' departures in a `simulate` mechanism:
//! `departure(site, 0.3, w, correlation 0.5 with x)` beside
//! `departure(site, 0.5, x, …)`. Checked here: the drawn departures'
//! sample correlations against the stated matrix, `recover`'s true
//! correlation of the two slopes, and the mechanisms refused.

use std::sync::atomic::AtomicBool;

use nalgebra::{Matrix3, Vector3};
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::infer::nuts::NutsSettings;
use waypath::model::ModelSpec;
use waypath::query::{recover, QueryError, Simulation, SimulationSettings};
use waypath::table::{ColumnData, Table};

fn graph() -> Graph {
    let mut b = GraphBuilder::new("sites");
    for l in ["site -> y", "x -> y", "w -> y"] {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

fn simulate(body: &[String], rows: usize, seed: u64) -> Result<Simulation, QueryError> {
    Simulation::parse("fake", &graph(), SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, l.as_str())))
}

fn body(sites: usize, y: &str) -> Vec<String> {
    let share = 1.0 / sites as f64;
    let items: Vec<String> = (1..=sites).map(|i| format!("s{i} {share}")).collect();
    vec![format!("site = category({})", items.join(", ")), "x = normal(2, 1)".into(), "w = normal(-1, 1)".into(), y.to_string()]
}

fn reals(table: &Table, name: &str) -> Vec<f64> {
    table.column(name).and_then(|c| c.data.as_reals()).expect("numeric column")
}

/// Three departures per site (intercept sd 1, x slope sd 0.5, w slope sd
/// 0.3) with correlations 0.4 (intercept, x), −0.3 (intercept, w) and 0.5
/// stated between the slopes, where the rule without a stated value would
/// give the product −0.12. Each site's three departures are solved exactly
/// from three of its rows of a noiseless outcome. Each sample correlation's
/// Fisher transform `atanh(r)` is about normal(atanh(ρ), 1/(n − 3))
/// (Fisher 1915; recalled): it must lie within 4 of those sds.
#[test]
fn two_slopes_take_their_stated_correlation() {
    let y = "y = normal(departure(site, 1) + departure(site, 0.5, x, correlation 0.4) + \
             departure(site, 0.3, w, correlation -0.3, correlation 0.5 with x), 0.000000001)";
    let table = simulate(&body(400, y), 16_000, 12).expect("mechanisms").table().expect("table");
    let (x, w, y) = (reals(&table, "x"), reals(&table, "w"), reals(&table, "y"));
    let ColumnData::Category { codes, levels } = &table.column("site").expect("site").data else { panic!("site is a category") };
    let mut rows_of: Vec<Vec<usize>> = vec![Vec::new(); levels.len()];
    for (i, &c) in codes.iter().enumerate() {
        rows_of[c as usize].push(i);
    }
    let effects: Vec<Vector3<f64>> = rows_of
        .iter()
        .filter(|r| r.len() >= 3)
        .map(|r| {
            let m = Matrix3::from_fn(|a, b| [1.0, x[r[a]], w[r[a]]][b]);
            m.lu().solve(&Vector3::new(y[r[0]], y[r[1]], y[r[2]])).expect("three rows in general position")
        })
        .collect();
    let n = effects.len() as f64;
    assert!(n > 380.0, "{n} sites with three rows");
    let mean: Vector3<f64> = effects.iter().sum::<Vector3<f64>>() / n;
    let cov = |a: usize, b: usize| effects.iter().map(|e| (e[a] - mean[a]) * (e[b] - mean[b])).sum::<f64>() / (n - 1.0);
    for (a, b, rho) in [(0, 1, 0.4), (0, 2, -0.3), (1, 2, 0.5)] {
        let r: f64 = cov(a, b) / (cov(a, a) * cov(b, b)).sqrt();
        assert!((r.atanh() - f64::atanh(rho)).abs() < 4.0 / (n - 3.0).sqrt(), "effects {a}, {b}: sample {r} vs stated {rho}");
    }
    for (a, sd) in [(0, 1.0), (1, 0.5), (2, 0.3)] {
        let s = cov(a, a).sqrt();
        assert!((s / sd - 1.0).abs() < 4.0 / (2.0 * (n - 1.0)).sqrt(), "effect {a}: sd {s} vs {sd}");
    }
}

/// `recover` of `pooled site with (x, w)` on such a simulation, centring
/// off: the true correlation of the two slopes' departures is the stated
/// 0.5 (the model's slope departures are the mechanism's), not the
/// product −0.12.
#[test]
fn recover_takes_the_stated_correlation_of_two_slopes() {
    let y = "y = normal(5 + x - w + departure(site, 1) + departure(site, 0.5, x, correlation 0.4) + \
             departure(site, 0.3, w, correlation -0.3, correlation 0.5 with x), 1)";
    let sim = simulate(&body(30, y), 3_000, 21).expect("mechanisms");
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 300, draws: 400, seed: 5, ..NutsSettings::default() });
    let spec = ModelSpec::from_lines("m", vec![(2, "y from x, w, pooled site with (x, w) using fake"), (3, "centre off")]).expect("spec");
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}: {:?}", r.parameters));
    for (name, truth) in [
        ("site correlation[x, w]", 0.5),
        ("site correlation[intercept, x]", 0.4),
        ("site correlation[intercept, w]", -0.3),
        ("site w spread", 0.3),
    ] {
        let p = by_name(name);
        assert!((p.truth.expect("a truth") - truth).abs() < 1e-12, "{name}: {:?} vs {truth}", p.truth);
    }
    assert!(r.notes.iter().any(|n| n.contains("correlation q with x")), "{:?}", r.notes);
}

#[test]
fn bad_slope_correlations_are_refused_with_the_line_named() {
    let cases = [
        ("y = normal(departure(site, 1, x) + departure(site, 1, w, correlation 0.5 with z), 1)", "draws no departure(site, spread, z)"),
        ("y = normal(departure(site, 1, x, correlation 0.2 with w) + departure(site, 1, w, correlation 0.2 with x), 1)", "twice"),
        ("y = normal(departure(site, 1, x, correlation 0.2 with x), 1)", "same slope"),
        ("y = normal(departure(site, 1, x) + departure(site, 1, w, correlation 0.2 with x, correlation 0.3 with x), 1)", "twice"),
        ("y = normal(departure(site, 1, x) + departure(site, 1, w, correlation 2 with x), 1)", "strictly between −1 and 1"),
        ("y = normal(departure(site, 1, x) + departure(site, 1, w, correlation 0.2 x), 1)", "correlation q with <slope>"),
        (
            "y = normal(departure(site, 1) + departure(site, 1, x, correlation 0.9) + departure(site, 1, w, correlation 0.9, correlation -0.9 with x), 1)",
            "not positive definite",
        ),
    ];
    for (line, words) in cases {
        match simulate(&body(3, line), 10, 1) {
            Err(QueryError::Mechanism { line: at, message }) => {
                assert_eq!(at, 5, "{line}");
                assert!(message.contains(words), "{line}: {message}");
            }
            other => panic!("{line} should be refused, got {other:?}"),
        }
    }
}
