//! Clustered data end to end: `departure(c, spread)` in a simulation's
//! mechanisms, `recover` of a pooled model against the drawn truth, and the
//! shrinkage figure (`plot M shrinkage`) against numbers computed here from
//! the table and from the exported draws.

mod common;

use common::cells::run;

use std::collections::BTreeMap;
use std::io::Write;
use std::sync::atomic::AtomicBool;

use statrs::distribution::{ChiSquared, ContinuousCDF};

use waypath::cells::Session;
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::infer::nuts::NutsSettings;
use waypath::model::ModelSpec;
use waypath::query::{recover, QueryError, Simulation, SimulationSettings};
use waypath::table::{ColumnData, Table};

fn graph(lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new("sites");
    for l in lines {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

fn simulate(g: &Graph, body: &[String], rows: usize, seed: u64) -> Result<Simulation, QueryError> {
    Simulation::parse("fake", g, SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, l.as_str())))
}

/// `site = category(s1 share, …)` with `k` equally likely sites.
fn sites_line(k: usize) -> String {
    let share = 1.0 / k as f64;
    let items: Vec<String> = (1..=k).map(|i| format!("s{i} {share}")).collect();
    format!("site = category({})", items.join(", "))
}

fn reals(table: &Table, name: &str) -> Vec<f64> {
    table.column(name).and_then(|c| c.data.as_reals()).expect("numeric column")
}

fn codes(table: &Table, name: &str) -> (Vec<u32>, Vec<String>) {
    match table.column(name).map(|c| &c.data) {
        Some(ColumnData::Category { codes, levels }) => (codes.clone(), levels.clone()),
        _ => panic!("{name} is not a category"),
    }
}

/// Each level's departure read off a table whose outcome is `departure(site,
/// spread)` plus noise of sd 1e-9: the rows of a level agree to that noise.
fn departures_from_rows(table: &Table, outcome: &str, minus: impl Fn(usize) -> f64) -> BTreeMap<String, f64> {
    let y = reals(table, outcome);
    let (site, levels) = codes(table, "site");
    let mut found: BTreeMap<String, f64> = BTreeMap::new();
    for (i, c) in site.iter().enumerate() {
        let d = y[i] - minus(i);
        let level = levels[*c as usize].clone();
        if let Some(seen) = found.get(&level) {
            assert!((seen - d).abs() < 1e-6, "rows of {level} share one departure: {seen} vs {d}");
        }
        found.insert(level, d);
    }
    found
}

/// Source: for n independent normal(0, σ²) draws, (n − 1)·s²/σ² follows a
/// chi-square distribution with n − 1 degrees of freedom (Cochran's theorem;
/// quantiles from statrs' ChiSquared), and their mean is normal(0, σ²/n).
/// 400 sites, spread 0.8: the sample sd must lie within the 0.05% and
/// 99.95% chi-square bounds, the mean within 4 standard errors.
#[test]
fn drawn_departures_follow_the_stated_spread() {
    let g = graph(&["site -> y"]);
    let body = vec![sites_line(400), "y = normal(departure(site, 0.8), 0.000000001)".to_string()];
    let sim = simulate(&g, &body, 20_000, 5).expect("mechanisms");
    let table = sim.table().expect("table");
    let found = departures_from_rows(&table, "y", |_| 0.0);
    let d: Vec<f64> = found.values().copied().collect();
    let n = d.len() as f64;
    assert!(d.len() >= 395, "almost every one of 400 sites holds a row among 20 000: {}", d.len());
    let mean = d.iter().sum::<f64>() / n;
    let s2 = d.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
    let chi = ChiSquared::new(n - 1.0).unwrap();
    let statistic = (n - 1.0) * s2 / (0.8 * 0.8);
    assert!(
        chi.cdf(statistic) > 0.0005 && chi.cdf(statistic) < 0.9995,
        "sample sd {} against the stated 0.8: chi-square {statistic} on {} df",
        s2.sqrt(),
        n - 1.0
    );
    assert!(mean.abs() < 4.0 * 0.8 / n.sqrt(), "mean departure {mean}");

    // Seeded: the same seed gives the same departures, another seed others.
    let again = departures_from_rows(&simulate(&g, &body, 20_000, 5).unwrap().table().unwrap(), "y", |_| 0.0);
    assert_eq!(found, again);
    let other = departures_from_rows(&simulate(&g, &body, 20_000, 6).unwrap().table().unwrap(), "y", |_| 0.0);
    assert!(found.iter().filter(|(k, v)| other.get(*k).is_some_and(|o| (o - *v).abs() < 1e-9)).count() < 5);
}

#[test]
fn bad_departures_are_refused_with_the_line_named() {
    let g = graph(&["site -> y", "x -> y"]);
    let base = |y: &str| vec![sites_line(3), "x = normal(0, 1)".to_string(), y.to_string()];
    let cases = [
        ("y = normal(departure(site, -1), 1)", "must be a positive number"),
        ("y = normal(departure(site), 1)", "needs the form"),
        ("y = normal(departure(x, 1), 1)", "needs a category"),
        ("y = normal(departure(site, 1) + departure(site, 2), 1)", "twice"),
        ("y = normal(departure(elsewhere, 1), 1)", "not a node of graph"),
        ("y = normal(departure(site, 1, x) + departure(site, 2, x), 1)", "twice"),
        ("y = normal(departure(site, 1, x, x), 1)", "must read `correlation r`"),
        ("y = normal(departure(site, 1, x, x, x), 1)", "needs the form"),
        ("y = normal(departure(site, 1) + departure(site, 1, x, correlation 1.5), 1)", "strictly between −1 and 1"),
        ("y = normal(departure(site, 1, x, correlation 0.5), 1)", "draws no departure(site, spread)"),
        ("y = normal(departure(site, 1, 2x), 1)", "not a node name"),
        ("y = normal(departure(site, 1, site), 1)", "cannot use it as a number"),
        ("y = normal(departure(site, 1, elsewhere), 1)", "not a node of graph"),
    ];
    for (line, words) in cases {
        match simulate(&g, &base(line), 10, 1) {
            Err(QueryError::Mechanism { line: at, message }) => {
                assert_eq!(at, 4, "{line}");
                assert!(message.contains(words), "{line}: {message}");
            }
            other => panic!("{line} should be refused, got {other:?}"),
        }
    }
}

/// `departure(site, 0.6, x)`: each site's slope departure, read off a
/// noiseless table (its rows on one line in x), with a sample sd
/// inside the chi-square bounds for 300 draws from normal(0, 0.6)
/// (Cochran's theorem, quantiles from statrs), and the intercept's and the
/// slope's departures of one site drawn apart (no correlation beyond what
/// 300 independent pairs show: |r| < 4/√300, the normal approximation to
/// the sample correlation of independent normals; recalled).
#[test]
fn slope_departures_multiply_their_parent_and_follow_the_stated_spread() {
    let g = graph(&["site -> y", "x -> y"]);
    let body = vec![
        sites_line(300),
        "x = normal(2, 1)".to_string(),
        "y = normal(departure(site, 1.2) + departure(site, 0.6, x), 0.000000001)".to_string(),
    ];
    let both = simulate(&g, &body, 12_000, 8).expect("mechanisms").table().expect("table");
    let (x, y) = (reals(&both, "x"), reals(&both, "y"));
    let (site, levels) = codes(&both, "site");
    let mut rows_of: BTreeMap<String, Vec<usize>> = BTreeMap::new();
    for (i, c) in site.iter().enumerate() {
        rows_of.entry(levels[*c as usize].clone()).or_default().push(i);
    }
    // Two rows of a site give its intercept and slope departures; every
    // other row of the site lies on that line.
    let mut intercepts: BTreeMap<String, f64> = BTreeMap::new();
    let mut slopes: BTreeMap<String, f64> = BTreeMap::new();
    for (level, rows) in rows_of.iter().filter(|(_, r)| r.len() >= 3) {
        let (i, j) = (rows[0], rows[1]);
        let b = (y[i] - y[j]) / (x[i] - x[j]);
        let a = y[i] - b * x[i];
        for &r in &rows[2..] {
            assert!((a + b * x[r] - y[r]).abs() < 1e-5, "{level}: row {r} off the line");
        }
        intercepts.insert(level.clone(), a);
        slopes.insert(level.clone(), b);
    }
    let d: Vec<f64> = slopes.values().copied().collect();
    let n = d.len() as f64;
    let mean = d.iter().sum::<f64>() / n;
    let s2 = d.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
    let chi = ChiSquared::new(n - 1.0).unwrap();
    let statistic = (n - 1.0) * s2 / 0.36;
    assert!(chi.cdf(statistic) > 0.0005 && chi.cdf(statistic) < 0.9995, "slope departures' sd {}", s2.sqrt());
    let pairs: Vec<(f64, f64)> = intercepts.iter().filter_map(|(l, a)| slopes.get(l).map(|b| (*a, *b))).collect();
    let k = pairs.len() as f64;
    let (ma, mb) = (pairs.iter().map(|p| p.0).sum::<f64>() / k, pairs.iter().map(|p| p.1).sum::<f64>() / k);
    let cov = pairs.iter().map(|(a, b)| (a - ma) * (b - mb)).sum::<f64>();
    let r = cov / (pairs.iter().map(|p| (p.0 - ma).powi(2)).sum::<f64>() * pairs.iter().map(|p| (p.1 - mb).powi(2)).sum::<f64>()).sqrt();
    assert!(r.abs() < 4.0 / k.sqrt(), "intercept and slope departures drawn apart: r = {r}");
}

/// `departure(site, 0.6, x, correlation 0.7)` beside `departure(site,
/// 1.2)`: the intercept and slope departures of 300 sites, read off a
/// noiseless table, have a sample correlation whose Fisher transform
/// `atanh(r)` is about normal(atanh(0.7), 1/(n − 3)) (Fisher 1915;
/// recalled), so it must lie within 4 of those sds; the slope departures'
/// sd stays inside the chi-square bounds of normal(0, 0.6) (Cochran's
/// theorem, quantiles from statrs).
#[test]
fn slope_departures_take_their_stated_correlation_with_the_intercepts() {
    let g = graph(&["site -> y", "x -> y"]);
    let body = vec![
        sites_line(300),
        "x = normal(2, 1)".to_string(),
        "y = normal(departure(site, 1.2) + departure(site, 0.6, x, correlation 0.7), 0.000000001)".to_string(),
    ];
    let table = simulate(&g, &body, 12_000, 9).expect("mechanisms").table().expect("table");
    let (x, y) = (reals(&table, "x"), reals(&table, "y"));
    let (site, levels) = codes(&table, "site");
    let mut rows_of: BTreeMap<String, Vec<usize>> = BTreeMap::new();
    for (i, c) in site.iter().enumerate() {
        rows_of.entry(levels[*c as usize].clone()).or_default().push(i);
    }
    let pairs: Vec<(f64, f64)> = rows_of
        .values()
        .filter(|r| r.len() >= 2)
        .map(|rows| {
            let (i, j) = (rows[0], rows[1]);
            let b = (y[i] - y[j]) / (x[i] - x[j]);
            (y[i] - b * x[i], b)
        })
        .collect();
    let k = pairs.len() as f64;
    let (ma, mb) = (pairs.iter().map(|p| p.0).sum::<f64>() / k, pairs.iter().map(|p| p.1).sum::<f64>() / k);
    let (saa, sbb) = (pairs.iter().map(|p| (p.0 - ma).powi(2)).sum::<f64>(), pairs.iter().map(|p| (p.1 - mb).powi(2)).sum::<f64>());
    let r = pairs.iter().map(|(a, b)| (a - ma) * (b - mb)).sum::<f64>() / (saa * sbb).sqrt();
    assert!((r.atanh() - 0.7f64.atanh()).abs() < 4.0 / (k - 3.0).sqrt(), "sample correlation {r} against the stated 0.7");
    let chi = ChiSquared::new(k - 1.0).unwrap();
    let statistic = sbb / 0.36;
    assert!(chi.cdf(statistic) > 0.0005 && chi.cdf(statistic) < 0.9995, "slope departures' sd {}", (sbb / (k - 1.0)).sqrt());
}

/// `recover` with a stated correlation: `departure(site, 1.5) +
/// departure(site, 0.4, x, correlation −0.6)`. With centring (c = x's mean
/// over the rows) the model's intercept departures are `a₀ + c·a₁`, so by
/// the variance and covariance of a sum of correlated normals the true
/// spread is `√(1.5² + 2c·(−0.6)·1.5·0.4 + c²·0.4²)` and the correlation
/// `(−0.6·1.5·0.4 + c·0.4²) / (that · 0.4)`; without centring the stated
/// −0.6 itself. The posterior interval of the correlation must hold it.
#[test]
fn recover_checks_a_stated_correlation() {
    let g = graph(&["site -> y", "x -> y"]);
    let body = vec![
        sites_line(20),
        "x = normal(3, 1)".to_string(),
        "y = normal(10 + 2 * x + departure(site, 1.5) + departure(site, 0.4, x, correlation -0.6), 1)".to_string(),
    ];
    let sim = simulate(&g, &body, 2_000, 41).expect("mechanisms");
    let x = reals(&sim.table().expect("table"), "x");
    let c = x.iter().sum::<f64>() / x.len() as f64;
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 400, draws: 600, seed: 5, ..NutsSettings::default() });
    for centred in [false, true] {
        let mut lines = vec![(2, "y from x, pooled site with x using fake")];
        if !centred {
            lines.push((3, "centre off"));
        }
        let spec = ModelSpec::from_lines("m", lines).expect("spec");
        let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
        let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}: {:?}", r.parameters));
        let shift = if centred { c } else { 0.0 };
        let spread0 = (1.5f64.powi(2) + 2.0 * shift * -0.6 * 1.5 * 0.4 + shift * shift * 0.16).sqrt();
        let rho = (-0.6 * 1.5 * 0.4 + shift * 0.16) / (spread0 * 0.4);
        assert!((by_name("site spread").truth.unwrap() - spread0).abs() < 1e-9, "centred {centred}");
        let p = by_name("site correlation[intercept, x]");
        assert!((p.truth.unwrap() - rho).abs() < 1e-9, "centred {centred}: {:?} vs {rho}", p.truth);
        assert_eq!(p.covered, Some(true), "centred {centred}: the correlation's interval misses {rho}: {p:?}");
        assert!(r.notes.iter().any(|n| n.contains("as stated")), "{:?}", r.notes);
    }
}

/// `recover` of a varying slope against a simulation with
/// `departure(site, 1.5) + departure(site, 0.4, x)`: with centring off the
/// truths are the stated spreads, the departures of a noiseless twin and a
/// correlation of 0 (drawn apart). With centring on, the model's slope
/// column is `x − c` (c = x's mean over the rows), so its intercept
/// departures are `a₀ + c·a₁` — computed here from the twin — with spread
/// `√(1.5² + c²·0.4²)` and correlation `c·0.4 / that` with the slope (the
/// variance and covariance of a sum of independent normals). Coverage: at
/// least 11 of 16 slope departures' 90% intervals hold their truth (see
/// the intercept-only check above for the bound).
#[test]
fn recover_sets_drawn_slope_departures_beside_a_varying_slope() {
    let g = graph(&["site -> y", "x -> y"]);
    let body = |sd: &str| {
        vec![sites_line(16), "x = normal(3, 1)".to_string(), format!("y = normal(10 + 2 * x + departure(site, 1.5) + departure(site, 0.4, x), {sd})")]
    };
    let sim = simulate(&g, &body("1"), 1_600, 31).expect("mechanisms");
    let mut slope_only = body("0.000000001");
    slope_only[2] = "y = normal(departure(site, 1.5) + departure(site, 0.4, x), 0.000000001)".to_string();
    let twin = simulate(&g, &slope_only, 1_600, 31).unwrap().table().unwrap();
    let (x, y) = (reals(&twin, "x"), reals(&twin, "y"));
    let (site, levels) = codes(&twin, "site");
    // Two rows of a site give its intercept and slope departures exactly.
    let mut rows_of: BTreeMap<String, Vec<usize>> = BTreeMap::new();
    for (i, c) in site.iter().enumerate() {
        rows_of.entry(levels[*c as usize].clone()).or_default().push(i);
    }
    let truth: BTreeMap<String, (f64, f64)> = rows_of
        .iter()
        .map(|(l, rows)| {
            let (i, j) = (rows[0], rows[1]);
            let b = (y[i] - y[j]) / (x[i] - x[j]);
            (l.clone(), (y[i] - b * x[i], b))
        })
        .collect();
    let c = x.iter().sum::<f64>() / x.len() as f64;
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 400, draws: 600, seed: 3, ..NutsSettings::default() });
    for centred in [false, true] {
        let lines = if centred { vec![(2, "y from x, pooled site with x using fake")] } else { vec![(2, "y from x, pooled site with x using fake"), (3, "centre off")] };
        let spec = ModelSpec::from_lines("m", lines).expect("spec");
        let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
        let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}: {:?}", r.parameters));
        let shift = if centred { c } else { 0.0 };
        let spread0 = (1.5f64.powi(2) + shift * shift * 0.16).sqrt();
        assert!((by_name("site spread").truth.unwrap() - spread0).abs() < 1e-9);
        assert_eq!(by_name("site x spread").truth, Some(0.4));
        let rho = by_name("site correlation[intercept, x]").truth.unwrap();
        assert!((rho - shift * 0.4 / spread0).abs() < 1e-9, "centred {centred}: {rho}");
        let mut covered = 0;
        for (level, (a0, a1)) in &truth {
            let p0 = by_name(&format!("site departure[{level}]"));
            let p1 = by_name(&format!("site x departure[{level}]"));
            assert!((p0.truth.unwrap() - (a0 + shift * a1)).abs() < 1e-6, "{level}: {:?} vs {}", p0.truth, a0 + shift * a1);
            assert!((p1.truth.unwrap() - a1).abs() < 1e-6, "{level}: {:?} vs {a1}", p1.truth);
            covered += usize::from(p1.covered == Some(true));
        }
        assert_eq!(truth.len(), 16);
        assert!(covered >= 11, "centred {centred}: {covered} of 16 slope departure intervals hold the truth");
        assert!((by_name("x slope").truth.unwrap() - 2.0).abs() < 1e-9);
        assert!(r.notes.iter().any(|n| n.contains("site x spread: the true value is the stated 0.4")), "{:?}", r.notes);
    }
}

/// The truth `recover` sets beside a pooled model: the stated spread, and
/// departures equal to those a noiseless twin of the simulation (same seed,
/// outcome sd 1e-9) shows in its rows; the coefficients are the mechanism's
/// own (intercept 10 at x = 0 with centring off, slope 2). Coverage: of 16
/// departures with 90% intervals, at least 11 hold their truth (binomial(16,
/// 0.9) gives fewer than 11 with probability 0.0033, scipy.stats.binom.cdf(10,
/// 16, 0.9), computed in the reference venv).
#[test]
fn recover_sets_the_drawn_departures_beside_a_pooled_model() {
    let g = graph(&["site -> y", "x -> y"]);
    let body = |sd: &str| vec![sites_line(16), "x = normal(0, 1)".to_string(), format!("y = normal(10 + 2 * x + departure(site, 1.5), {sd})")];
    let sim = simulate(&g, &body("1"), 800, 21).expect("mechanisms");
    let twin = simulate(&g, &body("0.000000001"), 800, 21).unwrap().table().unwrap();
    let x = reals(&twin, "x");
    let truth = departures_from_rows(&twin, "y", |i| 10.0 + 2.0 * x[i]);
    let spec = ModelSpec::from_lines("m", [(2, "y from x, pooled site using fake"), (3, "centre off")]).expect("spec");
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 400, draws: 600, seed: 3, ..NutsSettings::default() });
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}: {:?}", r.parameters));
    assert_eq!(by_name("site spread").truth, Some(1.5));
    assert!((by_name("intercept").truth.unwrap() - 10.0).abs() < 1e-9);
    assert!((by_name("x slope").truth.unwrap() - 2.0).abs() < 1e-9);
    let mut covered = 0;
    for (level, d) in &truth {
        let p = by_name(&format!("site departure[{level}]"));
        assert!((p.truth.unwrap() - d).abs() < 1e-6, "{level}: {:?} vs {d}", p.truth);
        covered += usize::from(p.covered == Some(true));
    }
    assert_eq!(truth.len(), 16);
    assert!(covered >= 11, "{covered} of 16 departure intervals hold the truth");
    assert!(r.notes.iter().any(|n| n.contains("site spread: the true value is the stated 1.5")), "{:?}", r.notes);
}

/// Invented clinics of unequal size, a normal outcome in mmHg and a yes/no
/// outcome; a small linear congruential generator makes the rows.
fn clinics_csv(dir: &std::path::Path) {
    let mut f = std::fs::File::create(dir.join("clinics.csv")).unwrap();
    writeln!(f, "clinic,drop,settled").unwrap();
    let mut state: u64 = 12345;
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let clinics = [("harbour", 40, 2.0), ("valley", 12, -1.5), ("mill", 4, 3.0), ("upland", 25, 0.0), ("ferry", 2, -2.5)];
    for (name, rows, shift) in clinics {
        for _ in 0..rows {
            let noise = (0..12).map(|_| uniform()).sum::<f64>() - 6.0;
            let settled = uniform() < 0.3 + 0.08 * shift;
            writeln!(f, "{name},{:.2},{}", 8.0 + shift + 3.0 * noise, if settled { "yes" } else { "no" }).unwrap();
        }
    }
}

fn read_csv(path: &std::path::Path) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let head = lines.next().unwrap().split(',').map(|s| s.trim_matches('"').to_string()).collect();
    (head, lines.map(|l| l.split(',').map(str::to_string).collect()).collect())
}

/// Per level, the mean of `column` over that level's rows of the CSV.
fn level_means(rows: &[Vec<String>], value: impl Fn(&[String]) -> f64) -> BTreeMap<String, (f64, usize)> {
    let mut sums: BTreeMap<String, (f64, usize)> = BTreeMap::new();
    for r in rows {
        let e = sums.entry(r[0].clone()).or_insert((0.0, 0));
        e.0 += value(r);
        e.1 += 1;
    }
    sums.into_iter().map(|(k, (s, n))| (k, (s / n as f64, n))).collect()
}

/// Per level, the mean over exported draws of `intercept + departure`.
fn pooled_from_draws(path: &std::path::Path, group: &str) -> (BTreeMap<String, f64>, f64) {
    let (head, rows) = read_csv(path);
    let at = |name: &str| head.iter().position(|h| h == name).unwrap_or_else(|| panic!("no column {name} in {head:?}"));
    let intercept = at("intercept");
    let value = |r: &Vec<String>, j: usize| r[j].parse::<f64>().unwrap();
    let n = rows.len() as f64;
    let population = rows.iter().map(|r| value(r, intercept)).sum::<f64>() / n;
    let prefix = format!("{group} departure[");
    let levels = head.iter().enumerate().filter_map(|(j, h)| h.strip_prefix(&prefix).map(|l| (l.trim_end_matches(']').to_string(), j)));
    let pooled = levels.map(|(l, j)| (l, rows.iter().map(|r| value(r, intercept) + value(r, j)).sum::<f64>() / n)).collect();
    (pooled, population)
}

/// Source: the definitions in the README (Pooled groups). For a model
/// `y from pooled clinic`, a level's pooled estimate on the link scale is
/// intercept + departure in each draw and the population's is the
/// intercept; the raw estimate is the level's rows' mean (normal) or the
/// log-odds of its share of yes (bernoulli), computed here from the CSV.
#[test]
fn shrinkage_figure_numbers_match_the_table_and_the_draws() {
    let dir = std::env::temp_dir().join(format!("wp-shrinkage-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    clinics_csv(&dir);
    let (_, rows) = read_csv(&dir.join("clinics.csv"));
    let mut session = Session::new(&dir);
    let setup = "table visits from \"clinics.csv\":\n    drop: real in mmHg\n    settled: binary\n";
    assert!(run(&mut session, setup).error.is_none());
    for (outcome, family, raw_of, unit) in [
        ("drop", "", Box::new(|r: &[String]| r[1].parse::<f64>().unwrap()) as Box<dyn Fn(&[String]) -> f64>, Some("mmHg")),
        ("settled", "    family bernoulli\n", Box::new(|r: &[String]| f64::from(u8::from(r[2] == "yes"))), None),
    ] {
        let cell = format!(
            "model m_{outcome}:\n    {outcome} from pooled clinic using visits\n{family}\nfit m_{outcome} with nuts chains 2 settle 400 draws 800 seed 5\nexport m_{outcome} draws to \"d_{outcome}.csv\"\nplot m_{outcome} shrinkage\n"
        );
        let out = run(&mut session, &cell);
        assert!(out.error.is_none(), "{:?}", out.error);
        let shown = out.displays.last().unwrap();
        let json = shown.json.as_ref().expect("json");
        let svg = shown.svg.as_ref().expect("svg");
        let raw = level_means(&rows, &raw_of);
        let (pooled, population) = pooled_from_draws(&dir.join(format!("d_{outcome}.csv")), "clinic");
        let levels = json["levels"].as_array().unwrap();
        assert_eq!(levels.len(), 5);
        for l in levels {
            let name = l["level"].as_str().unwrap();
            let (mean, n) = raw[name];
            // A share of 0 or 1 has infinite log-odds; the README says it is shown at 0.001 or 0.999.
            let share = mean.clamp(0.001, 0.999);
            let expected_raw = if family.is_empty() { mean } else { (share / (1.0 - share)).ln() };
            assert_eq!(l["rows"].as_u64().unwrap() as usize, n, "{name}");
            assert!((l["raw"].as_f64().unwrap() - expected_raw).abs() < 1e-9, "{outcome} {name}: {l} vs {expected_raw}");
            assert!((l["mean"].as_f64().unwrap() - pooled[name]).abs() < 1e-6, "{outcome} {name}: {l} vs {}", pooled[name]);
            assert!(l["lower"].as_f64().unwrap() < pooled[name] && pooled[name] < l["upper"].as_f64().unwrap());
            assert!(svg.contains(&format!("{name} ({n} rows)")), "label of {name}");
        }
        assert!((json["population"][0].as_f64().unwrap() - population).abs() < 1e-6);
        // What the figure must show: its kind, a legend, the axis with its unit, the circles' meaning.
        assert!(svg.contains(&format!("<title>shrinkage: m_{outcome} levels of clinic</title>")));
        for words in ["level's own rows (area: rows)", "pooled, 90% interval", "population, a new level", "circle area grows with the level's rows: 2 to 40"] {
            assert!(svg.contains(words), "{outcome}: {words}");
        }
        match unit {
            Some(u) => assert!(svg.contains(&format!("{outcome}, averaged over a level's rows ({u})"))),
            None => assert!(svg.contains(&format!("log-odds of {outcome}, averaged over a level's rows<"))),
        }
        // One open circle per level (and one in the legend), their sizes as many as the five row counts.
        let radii: Vec<String> = svg
            .split("<circle")
            .skip(1)
            .map(|c| c.split('>').next().unwrap_or(""))
            .filter(|c| c.contains("fill=\"none\""))
            .filter_map(|c| c.split("r=\"").nth(1).and_then(|r| r.split('"').next()).map(str::to_string))
            .collect();
        assert_eq!(radii.len(), 5, "{radii:?}");
        let mut distinct = radii.clone();
        distinct.sort();
        distinct.dedup();
        assert_eq!(distinct.len(), 5, "circle sizes follow five different row counts: {radii:?}");
    }
    let refused = run(&mut session, "model plain:\n    drop from settled using visits\n\nfit plain with nuts draws 200 seed 1\nplot plain shrinkage\n");
    let message = refused.error.expect("a model without a pooled group is refused").describe();
    assert!(message.contains("has no pooled group"), "{message}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// A time outcome's own value per level is the time followed over the events
/// seen — the maximum-likelihood mean of an exponential with rows cut short
/// on the right (total time at risk over events; Cox & Oakes 1984, *Analysis
/// of Survival Data*, §3.2, recalled) — on the log scale, computed here from
/// the CSV; a level whose rows were all cut short has no own value.
#[test]
fn shrinkage_of_a_time_outcome_uses_time_per_event() {
    let dir = std::env::temp_dir().join(format!("wp-shrinkage-times-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut f = std::fs::File::create(dir.join("trays.csv")).unwrap();
    writeln!(f, "bench,days,unsprouted").unwrap();
    let mut state: u64 = 777;
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    for (bench, rows, mean, all_cut) in [("north", 20, 9.0, false), ("south", 12, 14.0, false), ("shed", 6, 6.0, false), ("porch", 3, 10.0, true)] {
        for _ in 0..rows {
            let time = -mean * uniform().ln();
            let cut = all_cut || time > 20.0;
            writeln!(f, "{bench},{:.3},{}", time.min(20.0), if cut { "yes" } else { "no" }).unwrap();
        }
    }
    drop(f);
    let (_, rows) = read_csv(&dir.join("trays.csv"));
    let mut followed: BTreeMap<String, (f64, f64)> = BTreeMap::new();
    for r in &rows {
        let e = followed.entry(r[0].clone()).or_default();
        e.0 += r[1].parse::<f64>().unwrap();
        e.1 += f64::from(u8::from(r[2] == "no"));
    }
    let mut session = Session::new(&dir);
    let cell = "table trays from \"trays.csv\":\n    days: real in days\n    unsprouted: binary\n\nmodel sprout:\n    days from pooled bench using trays\n    family exponential cut short by unsprouted\n\nfit sprout with nuts chains 2 settle 300 draws 300 seed 3\nplot sprout shrinkage\n";
    let out = run(&mut session, cell);
    assert!(out.error.is_none(), "{:?}", out.error);
    let shown = out.displays.last().unwrap();
    let json = shown.json.as_ref().expect("json");
    for l in json["levels"].as_array().unwrap() {
        let name = l["level"].as_str().unwrap();
        let (time, events) = followed[name];
        if events == 0.0 {
            assert!(l["raw"].is_null(), "{name}: every row cut short, no own value: {l}");
        } else {
            let expected = (time / events).ln();
            assert!((l["raw"].as_f64().unwrap() - expected).abs() < 1e-9, "{name}: {l} vs {expected}");
        }
    }
    assert!(shown.plain.contains("own time per event"), "{}", shown.plain);
    assert!(shown.plain.contains("rows cut short add their time but no event"), "{}", shown.plain);
    assert!(!shown.plain.contains("share of 0 or 1"), "{}", shown.plain);
    let _ = std::fs::remove_dir_all(&dir);
}
