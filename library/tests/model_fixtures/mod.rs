//! Invented orchard data for the model tests, generated with fixed seeds.
//!
//! Rows are trees: a rootstock (dwarf, standard), a soil (loam, sandy, clay),
//! girth and age, and several outcomes — yield (normal), fruit count
//! (poisson), blossoms set out of those visited by bees (binomial) and
//! whether the tree is healthy (bernoulli).
#![allow(dead_code)]

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Binomial, Distribution, Normal, Poisson};
use waypath::model::{LogDensity, Model, ModelSpec};
use waypath::table::{Column, ColumnData, Table};

pub fn column(name: &str, data: ColumnData) -> Column {
    Column::new(name, data)
}

pub fn category(codes: Vec<u32>, levels: &[&str]) -> ColumnData {
    ColumnData::Category { codes, levels: levels.iter().map(|s| s.to_string()).collect() }
}

/// An orchard of `n` trees drawn with `seed`.
pub fn orchard(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let mut rootstock = Vec::new();
    let mut soil = Vec::new();
    let mut girth = Vec::new();
    let mut age = Vec::new();
    let mut yield_kg = Vec::new();
    let mut fruit = Vec::new();
    let mut visits = Vec::new();
    let mut set = Vec::new();
    let mut healthy = Vec::new();
    for _ in 0..n {
        let standard = rng.random_range(0..2u32);
        let s = rng.random_range(0..3u32);
        let g = 22.0 + 6.0 * standard as f64 + 4.0 * noise.sample(&mut rng);
        let a: f64 = rng.random_range(1.0..15.0);
        let mu = 2.0 + 0.5 * g + 1.5 * standard as f64 + (a / 3.0).sin() * 2.0;
        let lambda = (0.5 + 0.04 * g + 0.1 * s as f64).exp();
        let m = rng.random_range(5..30u64);
        let p = 1.0 / (1.0 + (-(-0.5 + 0.05 * (g - 25.0) + 0.4 * standard as f64)).exp());
        rootstock.push(standard);
        soil.push(s);
        girth.push(g);
        age.push(a);
        yield_kg.push(mu + 3.0 * noise.sample(&mut rng));
        fruit.push(Poisson::new(lambda).expect("valid rate").sample(&mut rng) as u64);
        visits.push(m);
        set.push(Binomial::new(m, p).expect("valid binomial").sample(&mut rng));
        healthy.push(rng.random::<f64>() < p);
    }
    Table {
        name: "trees".into(),
        columns: vec![
            column("rootstock", category(rootstock, &["dwarf", "standard"])),
            column("soil", category(soil, &["loam", "sandy", "clay"])),
            column("girth", ColumnData::Real(girth)),
            column("age", ColumnData::Real(age)),
            column("yield", ColumnData::Real(yield_kg)),
            column("fruit", ColumnData::Count(fruit)),
            column("visits", ColumnData::Count(visits)),
            column("set", ColumnData::Count(set)),
            column("healthy", ColumnData::Binary(healthy)),
        ],
    }
}

/// The orchard with one more outcome, `cover`: the share of each tree's
/// crown in leaf, (set + ½)/(visits + 1), strictly between 0 and 1 (for the
/// beta family).
pub fn orchard_with_cover(n: usize, seed: u64) -> Table {
    let mut table = orchard(n, seed);
    let as_reals = |name: &str| table.column(name).and_then(|c| c.data.as_reals()).expect("count column");
    let cover = as_reals("set").iter().zip(as_reals("visits")).map(|(s, m)| (s + 0.5) / (m + 1.0)).collect();
    table.columns.push(column("cover", ColumnData::Real(cover)));
    table
}

/// The orchard with a time, `ripening` (days from flowering to the first
/// ripe fruit, positive, longer on girthier trees), and whether the season
/// ended before it (`season_over`, yes on every fourth tree, the time then
/// being the days followed).
pub fn orchard_with_times(n: usize, seed: u64) -> Table {
    let mut table = orchard(n, seed);
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let visits = table.column("visits").and_then(|c| c.data.as_reals()).expect("visits");
    let ripening = girth.iter().zip(&visits).map(|(g, v)| 20.0 + 0.5 * g.abs() + 3.0 * v).collect();
    table.columns.push(column("ripening", ColumnData::Real(ripening)));
    table.columns.push(column("season_over", ColumnData::Binary((0..n).map(|i| i % 4 == 0).collect())));
    table
}

/// A spec from body lines numbered from 2 (line 1 is the header).
pub fn spec(body: &str) -> ModelSpec {
    try_spec(body).expect("spec parses")
}

pub fn try_spec(body: &str) -> Result<ModelSpec, waypath::model::ModelError> {
    ModelSpec::from_lines("m", body.lines().enumerate().map(|(i, l)| (i + 2, l)))
}

pub fn build(body: &str, table: &Table) -> Model {
    Model::build(&spec(body), table).expect("model builds")
}

/// The error text of building `body` on `table`.
pub fn build_error(body: &str, table: &Table) -> String {
    match try_spec(body) {
        Err(e) => e.to_string(),
        Ok(s) => match Model::build(&s, table) {
            Err(e) => e.to_string(),
            Ok(_) => panic!("expected `{body}` to fail"),
        },
    }
}

/// Log density and gradient as a pair.
pub fn value_and_gradient<D: LogDensity>(target: &D, theta: &[f64]) -> (f64, Vec<f64>) {
    let mut grad = vec![0.0; theta.len()];
    let value = target.log_density_and_gradient(theta, &mut grad);
    (value, grad)
}

/// Richardson-extrapolated central difference of the log density in `j`:
/// (f(x+h) − f(x−h)) / 2h has error O(h²) (Nocedal & Wright, Numerical
/// Optimization, 2nd ed., §8.1; recalled), and combining steps h and h/2
/// cancels the h² term.
pub fn numeric_partial(model: &Model, theta: &[f64], j: usize) -> f64 {
    let central = |h: f64| {
        let (mut ahead, mut behind) = (theta.to_vec(), theta.to_vec());
        ahead[j] += h;
        behind[j] -= h;
        (value_and_gradient(model, &ahead).0 - value_and_gradient(model, &behind).0) / (2.0 * h)
    };
    let h = 1e-4 * theta[j].abs().max(1.0);
    (4.0 * central(h / 2.0) - central(h)) / 3.0
}

/// The analytic gradient of `model` agrees with [`numeric_partial`] within
/// 1e-6 relative at `points` points: the initial point moved by
/// `normal(0, jitter)` per coordinate, drawn from `seed`.
pub fn assert_gradient_matches(model: &Model, body: &str, seed: u64, points: usize, jitter: f64) {
    let mut rng = StdRng::seed_from_u64(seed);
    let jitter = Normal::new(0.0, jitter).expect("valid normal");
    for _ in 0..points {
        let theta: Vec<f64> = model.initial_point().iter().map(|v| v + jitter.sample(&mut rng)).collect();
        let (value, grad) = value_and_gradient(model, &theta);
        assert!(value.is_finite(), "{body}: log density not finite at {theta:?}");
        for j in 0..model.dim() {
            let numeric = numeric_partial(model, &theta, j);
            let error = (grad[j] - numeric).abs() / grad[j].abs().max(1.0);
            assert!(
                error < 1e-6,
                "{body}: {} analytic {} vs numeric {numeric} (relative error {error:e})",
                model.unconstrained_names()[j],
                grad[j]
            );
        }
    }
}

/// The orchard of the model tests with a `plot` column of 12 levels
/// (plots of unequal size) and a `row` column of 4 levels.
pub fn orchard_with_plots(n: usize, seed: u64) -> Table {
    let mut table = orchard(n, seed);
    let mut rng = StdRng::seed_from_u64(seed + 100);
    let plots: Vec<u32> = (0..n).map(|_| (rng.random::<f64>().powi(2) * 12.0) as u32).collect();
    let rows: Vec<u32> = (0..n).map(|i| (i % 4) as u32).collect();
    let names: Vec<String> = (1..=12).map(|k| format!("P{k}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    table.columns.push(column("plot", category(plots, &names)));
    table.columns.push(column("row", category(rows, &["r1", "r2", "r3", "r4"])));
    table
}

