//! The graph's testable implications checked against simulated data: those
//! of the true graph hold, those of a graph with an edge missing are flagged.

use std::sync::atomic::AtomicBool;

use statrs::distribution::{Binomial, DiscreteCDF};

use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::query::{check_implications, Simulation, SimulationSettings};
use waypath::table::Table;

fn graph(name: &str, lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new(name);
    for l in lines {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

/// A clinic: district (category) shapes waiting time and whether a nurse
/// visits; both shape recovery days, which shape follow-up calls.
const TRUE_EDGES: [&str; 5] = ["district -> waiting", "district -> visited", "waiting -> recovery", "visited -> recovery", "recovery -> calls"];
/// The same graph with the edge visited -> recovery removed.
const WRONG_EDGES: [&str; 4] = ["district -> waiting", "district -> visited", "waiting -> recovery", "recovery -> calls"];
const MECHANISMS: [&str; 5] = [
    "district = category(north 0.4, centre 0.3, south 0.3)",
    "waiting = normal(10 + 4 * [district = centre] - 3 * [district = south], 3)",
    "visited = bernoulli(logit = -0.5 + 1.2 * [district = south])",
    "recovery = normal(5 + 0.4 * waiting - 2 * visited, 2)",
    "calls = poisson(log = 0.2 + 0.08 * recovery)",
];

fn clinic(seed: u64) -> Table {
    let g = graph("clinic", &TRUE_EDGES);
    Simulation::parse("visits", &g, SimulationSettings { rows: 300, seed }, MECHANISMS.iter().enumerate().map(|(i, l)| (i + 2, *l)))
        .expect("mechanisms")
        .table()
        .expect("table")
}

/// Source: the global Markov property — every d-separation of the graph
/// that generated the data is a conditional independence of the data
/// (Pearl 2009, Theorem 1.2.4, d-separation in Definition 1.2.3) — so each
/// 90% interval of an implied-zero association excludes zero only by
/// chance (about 10% per interval). Removing the edge visited -> recovery
/// makes the wrong graph claim visited ⊥ recovery given its parents, which
/// the data contradict (the effect −2 is 6 or more standard errors from 0
/// at 300 rows).
#[test]
fn implications_of_the_true_graph_hold_and_a_missing_edge_is_flagged() {
    let right = graph("clinic", &TRUE_EDGES);
    let wrong = graph("clinic_b", &WRONG_EDGES);
    let method = Method::Laplace { draws: 1000, seed: 4 };
    let cancel = AtomicBool::new(false);
    let (mut intervals, mut flagged_intervals) = (0, 0);
    let mut wrong_flagged = 0;
    let seeds: usize = 10;
    for seed in 0..seeds {
        let table = clinic(100 + seed as u64);
        let report = check_implications(&right, &table, &method, &cancel, 0.9).expect("checks");
        assert_eq!(report.checked, report.checks.len(), "every implication can be checked: {:?}", report.checks);
        for check in &report.checks {
            intervals += check.associations.len();
            flagged_intervals += check.associations.iter().filter(|a| a.lower > 0.0 || a.upper < 0.0).count();
        }
        let report_b = check_implications(&wrong, &table, &method, &cancel, 0.9).expect("checks");
        let missing: Vec<_> = report_b
            .checks
            .iter()
            .filter(|c| [c.a.as_str(), c.b.as_str()].contains(&"visited") && [c.a.as_str(), c.b.as_str()].contains(&"recovery"))
            .collect();
        assert_eq!(missing.len(), 1, "{:?}", report_b.checks.iter().map(|c| &c.statement).collect::<Vec<_>>());
        wrong_flagged += usize::from(missing[0].contradicted);
    }
    // Two-sided: the number flagged is about Binomial(n, 0.1); the bounds
    // leave 0.25% in each tail, computed with statrs. Too many flags means
    // intervals too narrow; too few means intervals too wide — e.g. intervals
    // twice as wide as they should be flag about 0.1% each, so 0 of about 70,
    // below the lower bound (and a check that never flags fails too).
    let flags = Binomial::new(0.1, intervals as u64).expect("valid binomial");
    let lower = (0..=intervals as u64).find(|&k| flags.cdf(k) > 0.0025).expect("a lower bound");
    let upper = (0..=intervals as u64).find(|&k| flags.cdf(k) >= 0.9975).expect("an upper bound");
    assert!(lower >= 1, "the test must be able to see too few flags: {lower}");
    assert!(
        (lower..=upper).contains(&(flagged_intervals as u64)),
        "{flagged_intervals} of {intervals} intervals flagged, outside {lower}..={upper}"
    );
    assert_eq!(wrong_flagged, seeds, "the missing edge must be flagged in every replication");
}

/// Source: the implications listed by the graph (d-separation, Pearl 2009
/// Definition 1.2.3) — the pair visited, waiting is separated by district —
/// and a two-level category outcome coded 0/1 for a bernoulli regression.
#[test]
fn report_names_each_regression_and_its_coding() {
    let table = clinic(7);
    let right = graph("clinic", &TRUE_EDGES);
    let report = check_implications(&right, &table, &Method::Laplace { draws: 1000, seed: 1 }, &AtomicBool::new(false), 0.9)
        .expect("checks");
    let lines: Vec<String> = report
        .checks
        .iter()
        .map(|c| format!("{} :: {}", c.statement, c.regression.clone().unwrap_or_default()))
        .collect();
    expect_test::expect![[r#"
        district ⊥ recovery | waiting, visited :: recovery from district, waiting, visited
        district ⊥ calls | recovery :: calls from district, recovery
        waiting ⊥ visited | district :: visited from waiting, district
        waiting ⊥ calls | recovery :: calls from waiting, recovery
        visited ⊥ calls | recovery :: calls from visited, recovery"#]]
    .assert_eq(&lines.join("\n"));
    let district = &report.checks[0];
    let labels: Vec<&str> = district.associations.iter().map(|a| a.label.as_str()).collect();
    assert_eq!(labels, vec!["district[centre vs north]", "district[south vs north]"]);
    assert_eq!(report.interval, "90% central quantile interval");
}
