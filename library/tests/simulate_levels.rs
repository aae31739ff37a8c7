//! A category outcome in `simulate`: `levels(first, level = log odds, …)`
//! draws each row's level by softmax from its levels' log odds against the
//! first, which may hold departures of a category (one group per outcome
//! level, as a `levels` model's pooled groups); `recover` sets the stated
//! coefficients, spreads and drawn departures beside such a model.

use std::sync::atomic::AtomicBool;

use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::infer::nuts::NutsSettings;
use waypath::model::ModelSpec;
use waypath::query::{recover, QueryError, Simulation, SimulationSettings};
use waypath::table::{ColumnData, Table};

fn graph() -> Graph {
    let mut b = GraphBuilder::new("g");
    for l in ["site -> form", "x -> form"] {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

fn simulate(form: &str, rows: usize, seed: u64) -> Result<Simulation, QueryError> {
    let sites: Vec<String> = (1..=12).map(|k| format!("s{k} {}", 1.0 / 12.0)).collect();
    let body = [format!("site = category({})", sites.join(", ")), "x = normal(0, 1)".to_string(), form.to_string()];
    Simulation::parse("fake", &graph(), SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, l.as_str())))
}

fn codes(table: &Table, name: &str) -> Vec<u32> {
    match &table.column(name).expect("column").data {
        ColumnData::Category { codes, .. } => codes.clone(),
        _ => panic!("{name} is not a category"),
    }
}

/// With constant log odds (0, 0.5, −0.3) the level shares are the softmax
/// `exp(ηₖ) / Σ exp(η)` (the multinomial logit's definition); each of the
/// 20,000 rows' shares must lie within 4 binomial standard errors.
#[test]
fn levels_are_drawn_with_their_softmax_shares() {
    let table = simulate("form = levels(herb, shrub = 0.5, tree = -0.3)", 20_000, 3).expect("mechanisms").table().expect("table");
    let form = codes(&table, "form");
    let weights = [1.0, 0.5f64.exp(), (-0.3f64).exp()];
    let total: f64 = weights.iter().sum();
    for (k, w) in weights.iter().enumerate() {
        let p = w / total;
        let share = form.iter().filter(|&&c| c as usize == k).count() as f64 / form.len() as f64;
        let se = (p * (1.0 - p) / form.len() as f64).sqrt();
        assert!((share - p).abs() < 4.0 * se, "level {k}: share {share} vs {p}");
    }
}

/// `recover` of `form from x, pooled site` (family levels) on a
/// simulation whose shrub and tree log odds each draw site departures:
/// the stated spreads, the x slopes (centring leaves a slope as it is) and,
/// for the shrub level, the departures read off a twin whose `form` is
/// normal with the same departure stream (node and term order kept, sd
/// 1e-9); the tree level's departures are drawn apart from the shrub's.
#[test]
fn recover_sets_a_category_outcomes_pooled_departures() {
    let twin = simulate("form = normal(departure(site, 0.8), 0.000000001)", 3_000, 31).expect("mechanisms").table().expect("table");
    let (site, y) = (codes(&twin, "site"), twin.column("form").and_then(|c| c.data.as_reals()).expect("form"));
    let mut shrub = [f64::NAN; 12];
    for (c, v) in site.iter().zip(&y) {
        shrub[*c as usize] = *v;
    }
    let sim = simulate(
        "form = levels(herb, shrub = 0.4 + departure(site, 0.8), tree = -0.2 + 0.7 * x + departure(site, 0.5))",
        3_000,
        31,
    )
    .expect("mechanisms");
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 300, draws: 300, seed: 8, ..NutsSettings::default() });
    let spec = ModelSpec::from_lines("m", vec![(2, "form from x, pooled site using fake")]).expect("spec");
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}: {:?}", r.parameters));
    assert_eq!(by_name("form[shrub vs herb]: site spread").truth, Some(0.8));
    assert_eq!(by_name("form[tree vs herb]: site spread").truth, Some(0.5));
    for (name, slope) in [("form[shrub vs herb]: x slope", 0.0), ("form[tree vs herb]: x slope", 0.7)] {
        let truth = by_name(name).truth.expect("a truth");
        assert!((truth - slope).abs() < 1e-9, "{name}: {truth} vs {slope}");
    }
    let mut apart = 0;
    for (j, value) in shrub.iter().enumerate() {
        let truth = by_name(&format!("form[shrub vs herb]: site departure[s{}]", j + 1)).truth.expect("a truth");
        assert!((truth - value).abs() < 1e-6, "s{}: {truth} vs the twin's {value}", j + 1);
        let tree = by_name(&format!("form[tree vs herb]: site departure[s{}]", j + 1)).truth.expect("a truth");
        apart += usize::from((tree / 0.5 - truth / 0.8).abs() > 1e-6);
    }
    assert_eq!(apart, 12, "the tree level's departures are drawn apart from the shrub level's");
}

#[test]
fn bad_levels_mechanisms_are_refused_with_the_line_named() {
    for (line, words) in [
        ("form = levels(herb)", "levels takes the first level"),
        ("form = levels(herb, shrub 0.4)", "needs a level and its log odds"),
        ("form = levels(herb, herb = 0.4)", "listed twice"),
        ("form = levels(herb, shrub = 0.4 + departure(site, 1) + departure(site, 2))", "twice"),
    ] {
        match simulate(line, 10, 1) {
            Err(QueryError::Mechanism { line: at, message }) => {
                assert_eq!(at, 4, "{line}");
                assert!(message.contains(words), "{line}: {message}");
            }
            other => panic!("{line} should be refused, got {:?}", other.map(|_| ())),
        }
    }
}
