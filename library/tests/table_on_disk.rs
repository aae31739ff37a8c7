//! Tables that stay on disk (cargo feature `on_disk`): the engine's row
//! accounting, sufficient statistics and Laplace modes against the
//! in-memory path and against sums computed here from the generated
//! values, NUTS on the normal family's statistics against NUTS in memory,
//! and the refusals (NUTS for a family without sufficient statistics, an
//! undeclared category, an interrupt).
//!
//! References outside the engine path: the cross-products are also summed
//! in this file, row by row, from the values written (the definition
//! `XᵀX = Σ xᵢxᵢᵀ`, with the design coded as the README's model table
//! describes: one intercept per level of the first category, centred
//! slopes); the CSV reader gives the row accounting of the same values.
//! tests/python/test_on_disk_reference.py checks the fits against
//! statsmodels OLS and GLM Logit.
//!
//! Data: invented orchard plots, generated with a fixed seed in a temporary
//! folder (≤ 10^6 rows).
#![cfg(feature = "on_disk")]

mod common;

use common::scratch::fresh_folder;
use common::seeded::Seeded;
use std::path::Path;
use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use arrow_array::{ArrayRef, BooleanArray, Float64Array, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::file::properties::WriterProperties;

use waypath::infer::fit::{fit_model, FitError, Method};
use waypath::infer::nuts::{MassMatrix, NutsSettings};
use waypath::model::{Model, ModelSpec};
use waypath::table::on_disk::DiskTable;
use waypath::table::{load_table_with_cancel, parse_table_line, TableSpec};

const REGIONS: [&str; 3] = ["north", "middle", "south"];

/// Invented orchard plots: region (text), slope of the ground (real, some
/// missing), trees (count), irrigated (yes/no), yield (real) and a yes/no
/// outcome `blight` from a logistic model.
struct Plots {
    region: Vec<&'static str>,
    ground: Vec<Option<f64>>,
    trees: Vec<i64>,
    irrigated: Vec<bool>,
    harvest: Vec<f64>,
    blight: Vec<i64>,
}

fn plots(rows: usize, seed: u64) -> Plots {
    let mut rng = Seeded(seed);
    let mut p = Plots { region: vec![], ground: vec![], trees: vec![], irrigated: vec![], harvest: vec![], blight: vec![] };
    for _ in 0..rows {
        let r = (rng.uniform() * 3.0) as usize;
        let ground = 4.0 + 2.0 * rng.normal();
        let trees = (20.0 + 6.0 * rng.uniform()).floor() as i64;
        let irrigated = rng.uniform() < 0.4;
        let base = [30.0, 27.0, 33.0][r];
        let harvest = base - 0.8 * ground + 0.3 * trees as f64 + if irrigated { 2.0 } else { 0.0 } + 3.0 * rng.normal();
        let eta = -1.0 + [0.0, 0.4, -0.5][r] + 0.3 * (ground - 4.0) - 0.05 * (trees as f64 - 22.5);
        let blight = i64::from(rng.uniform() < 1.0 / (1.0 + (-eta).exp()));
        p.region.push(REGIONS[r]);
        p.ground.push(if rng.uniform() < 0.01 { None } else { Some(ground) });
        p.trees.push(trees);
        p.irrigated.push(irrigated);
        p.harvest.push(harvest);
        p.blight.push(blight);
    }
    p
}

/// The plots as Parquet, in row groups of 100,000 rows.
fn write_parquet(path: &Path, p: &Plots) {
    let batch = RecordBatch::try_from_iter([
        ("region", Arc::new(StringArray::from(p.region.clone())) as ArrayRef),
        ("ground", Arc::new(Float64Array::from(p.ground.clone())) as ArrayRef),
        ("trees", Arc::new(Int64Array::from(p.trees.clone())) as ArrayRef),
        ("irrigated", Arc::new(BooleanArray::from(p.irrigated.clone())) as ArrayRef),
        ("harvest", Arc::new(Float64Array::from(p.harvest.clone())) as ArrayRef),
        ("blight", Arc::new(Int64Array::from(p.blight.clone())) as ArrayRef),
    ])
    .unwrap();
    let properties = WriterProperties::builder().set_max_row_group_row_count(Some(100_000)).build();
    let mut writer = ArrowWriter::try_new(std::fs::File::create(path).unwrap(), batch.schema(), Some(properties)).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
}

/// The same values as CSV (`{}` prints the shortest text that reads back
/// to the same float; a missing value is an empty field).
fn write_csv(path: &Path, p: &Plots) {
    let mut text = String::from("region,ground,trees,irrigated,harvest,blight\n");
    for i in 0..p.region.len() {
        let ground = p.ground[i].map_or(String::new(), |g| format!("{g}"));
        text.push_str(&format!("{},{ground},{},{},{},{}\n", p.region[i], p.trees[i], p.irrigated[i], p.harvest[i], p.blight[i]));
    }
    std::fs::write(path, text).unwrap();
}

fn spec(path: &Path, lines: &[&str]) -> TableSpec {
    let rules = lines.iter().map(|line| parse_table_line(line).expect("test lines are valid"));
    TableSpec::with_rules("plots", path, rules).expect("rules fit together")
}

fn model_spec(lines: &[&str]) -> ModelSpec {
    ModelSpec::from_lines("m", lines.iter().enumerate().map(|(i, l)| (i + 1, *l))).unwrap()
}

const BODY: [&str; 4] = ["region: category(north, middle, south)", "drop missing", "keep where trees >= 21", "keep where not (region = south and ground > 7)"];

fn on_disk<'a>(lines: &[&'a str]) -> Vec<&'a str> {
    lines.iter().copied().chain(["stay on disk"]).collect()
}

/// ‖a − b‖ / ‖b‖ over all entries (‖a − b‖ itself when b is all zeros).
fn relative(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    let difference: f64 = a.iter().zip(b).map(|(x, y)| (x - y).powi(2)).sum::<f64>().sqrt();
    let size: f64 = b.iter().map(|y| y * y).sum::<f64>().sqrt();
    if size == 0.0 {
        difference
    } else {
        difference / size
    }
}

#[test]
fn rows_kept_and_dropped_are_counted_as_the_csv_reader_counts_them() {
    let dir = fresh_folder("on-disk", "accounting");
    let data = plots(20_000, 7);
    write_parquet(&dir.join("plots.parquet"), &data);
    write_csv(&dir.join("plots.csv"), &data);
    let cancel = AtomicBool::new(false);
    let disk = DiskTable::open(&spec(&dir.join("plots.parquet"), &on_disk(&BODY)), &cancel).unwrap();
    let (_, csv) = load_table_with_cancel(&spec(&dir.join("plots.csv"), &BODY), &cancel).unwrap();
    assert_eq!(disk.report.rows_read, csv.rows_read);
    assert_eq!(disk.report.dropped_missing, csv.dropped_missing);
    assert!(disk.report.dropped_missing > 100, "the data have missing slopes to drop");
    assert_eq!(disk.report.filters, csv.filters);
    let missing: Vec<(String, usize)> = disk.report.columns.iter().map(|c| (c.name.clone(), c.missing)).collect();
    let expected: Vec<(String, usize)> = csv.columns.iter().map(|c| (c.name.clone(), c.missing)).collect();
    assert_eq!(missing, expected);
}

#[test]
fn missing_values_without_drop_missing_are_refused_with_the_column_named() {
    let dir = fresh_folder("on-disk", "missing");
    write_parquet(&dir.join("plots.parquet"), &plots(2_000, 3));
    let error = DiskTable::open(&spec(&dir.join("plots.parquet"), &on_disk(&BODY[..1])), &AtomicBool::new(false)).unwrap_err();
    let text = error.to_string();
    assert!(text.contains("column ground") && text.contains("drop missing"), "{text}");
}

/// The design of `harvest from region, ground, trees, irrigated` coded
/// here: region's three level intercepts, then ground, trees and
/// irrigated centred at their means over the kept rows.
fn cross_products_by_hand(data: &Plots) -> (Vec<f64>, Vec<f64>, f64, f64) {
    let kept: Vec<usize> = (0..data.region.len())
        .filter(|&i| data.ground[i].is_some() && data.trees[i] >= 21 && !(data.region[i] == "south" && data.ground[i].unwrap() > 7.0))
        .collect();
    let n = kept.len() as f64;
    let mean = |f: &dyn Fn(usize) -> f64| kept.iter().map(|&i| f(i)).sum::<f64>() / n;
    let ground = |i: usize| data.ground[i].unwrap();
    let trees = |i: usize| data.trees[i] as f64;
    let irrigated = |i: usize| f64::from(u8::from(data.irrigated[i]));
    let (mg, mt, mi, my) = (mean(&ground), mean(&trees), mean(&irrigated), mean(&|i| data.harvest[i]));
    let mut xtx = vec![0.0; 36];
    let mut xty = vec![0.0; 6];
    let mut yty = 0.0;
    for &i in &kept {
        let mut x = [0.0; 6];
        x[REGIONS.iter().position(|r| *r == data.region[i]).unwrap()] = 1.0;
        x[3] = ground(i) - mg;
        x[4] = trees(i) - mt;
        x[5] = irrigated(i) - mi;
        let yc = data.harvest[i] - my;
        for j in 0..6 {
            xty[j] += x[j] * yc;
            for k in 0..6 {
                xtx[j * 6 + k] += x[j] * x[k];
            }
        }
        yty += yc * yc;
    }
    (xtx, xty, yty, n)
}

#[test]
fn a_million_rows_give_the_same_sufficient_statistics_and_draws_on_disk_as_in_memory() {
    let dir = fresh_folder("on-disk", "gaussian");
    let data = plots(1_000_000, 11);
    let path = dir.join("plots.parquet");
    write_parquet(&path, &data);
    let cancel = AtomicBool::new(false);
    let disk_table = DiskTable::open(&spec(&path, &on_disk(&BODY)), &cancel).unwrap();
    let (memory_table, _) = load_table_with_cancel(&spec(&path, &BODY), &cancel).unwrap();
    let model = model_spec(&["harvest from region, ground, trees, irrigated using plots"]);
    let on_disk = Model::build_on_disk(&model, &disk_table, &cancel).unwrap();
    let in_memory = Model::build(&model, &memory_table).unwrap();
    assert_eq!(on_disk.parameter_names(), in_memory.parameter_names());

    let (disk, memory) = (on_disk.normal_linear().unwrap(), in_memory.normal_linear().unwrap());
    let (xtx, xty, yty, n) = cross_products_by_hand(&data);
    assert_eq!(disk.n, n);
    assert!(relative(disk.xtx.transpose().as_slice(), &xtx) < 1e-9, "XᵀX against the sums by hand");
    assert!(relative(disk.xty.as_slice(), &xty) < 1e-9, "Xᵀy against the sums by hand");
    assert!((disk.yty - yty).abs() < 1e-9 * yty);
    assert!(relative(disk.xtx.as_slice(), memory.xtx.as_slice()) < 1e-9);
    assert!(relative(disk.xty.as_slice(), memory.xty.as_slice()) < 1e-9);
    assert!((disk.yty - memory.yty).abs() < 1e-9 * memory.yty);
    // The default priors read the same moments, so they agree too.
    assert!(relative(disk.prior_precision.as_slice(), memory.prior_precision.as_slice()) < 1e-9);
    assert!(relative(disk.prior_shift.as_slice(), memory.prior_shift.as_slice()) < 1e-9, "{:?} vs {:?}", disk.prior_shift.as_slice(), memory.prior_shift.as_slice());

    let laplace = Method::Laplace { draws: 1000, seed: 5 };
    let (a, b) = (fit_model(&on_disk, &laplace, &cancel, &|_| {}).unwrap(), fit_model(&in_memory, &laplace, &cancel, &|_| {}).unwrap());
    for name in on_disk.parameter_names() {
        assert!(relative(a.draws.get(&name).unwrap(), b.draws.get(&name).unwrap()) < 1e-9, "{name}");
    }
    assert!(a.route.as_deref().is_some_and(|r| r.contains("table on disk") && r.contains("sufficient statistics")));
    assert!(b.route.is_none());

    // NUTS on the statistics: the same sampler on the same density, seeded alike.
    let settings = NutsSettings { chains: 2, settle: 200, draws: 200, seed: 9, mass: MassMatrix::Diagonal, ..NutsSettings::default() };
    let nuts = Method::Nuts(settings);
    let (a, b) = (fit_model(&on_disk, &nuts, &cancel, &|_| {}).unwrap(), fit_model(&in_memory, &nuts, &cancel, &|_| {}).unwrap());
    for name in on_disk.parameter_names() {
        assert!(relative(a.draws.get(&name).unwrap(), b.draws.get(&name).unwrap()) < 1e-6, "{name}");
    }
}

#[test]
fn the_laplace_mode_of_a_logistic_model_on_disk_is_the_in_memory_mode() {
    let dir = fresh_folder("on-disk", "logistic");
    let path = dir.join("plots.parquet");
    write_parquet(&path, &plots(200_000, 23));
    let cancel = AtomicBool::new(false);
    let disk_table = DiskTable::open(&spec(&path, &on_disk(&BODY)), &cancel).unwrap();
    let (memory_table, _) = load_table_with_cancel(&spec(&path, &BODY), &cancel).unwrap();
    let model = model_spec(&["blight from region, ground, trees, irrigated using plots", "family bernoulli"]);
    let on_disk = Model::build_on_disk(&model, &disk_table, &cancel).unwrap();
    let in_memory = Model::build(&model, &memory_table).unwrap();
    assert!(relative(&on_disk.initial_point(), &in_memory.initial_point()) < 1e-12, "the same default priors give the same start");
    let disk = waypath::infer::on_disk::disk_laplace(&on_disk, 500, 3, &cancel).unwrap();
    let names = in_memory.unconstrained_names();
    let memory = waypath::infer::laplace::laplace(&in_memory, &names, &in_memory.initial_point(), 500, 3).unwrap();
    assert!(relative(&disk.mode, &memory.mode) < 1e-9, "{:?} against {:?}", disk.mode, memory.mode);
    // The curvature: exact information on disk, central differences in memory (~1e-8).
    assert!(relative(disk.covariance.as_slice(), memory.covariance.as_slice()) < 1e-6);
    assert!(disk.steps < 15, "Newton needs few passes, took {}", disk.steps);

    let fit = fit_model(&on_disk, &Method::Laplace { draws: 500, seed: 3 }, &cancel, &|_| {}).unwrap();
    assert!(fit.route.as_deref().is_some_and(|r| r.contains("Newton")), "{:?}", fit.route);
}

#[test]
fn nuts_on_a_logistic_table_on_disk_is_refused_with_the_reason() {
    let dir = fresh_folder("on-disk", "nuts");
    let path = dir.join("plots.parquet");
    write_parquet(&path, &plots(5_000, 29));
    let cancel = AtomicBool::new(false);
    let disk_table = DiskTable::open(&spec(&path, &on_disk(&BODY)), &cancel).unwrap();
    let model = Model::build_on_disk(&model_spec(&["blight from ground using plots", "family bernoulli"]), &disk_table, &cancel).unwrap();
    let error = fit_model(&model, &Method::Nuts(NutsSettings::default()), &cancel, &|_| {}).unwrap_err();
    assert!(matches!(error, FitError::OnDisk(_)));
    let text = error.to_string();
    assert!(text.contains("sufficient statistics") && text.contains("with laplace") && text.contains("Nothing was sampled"), "{text}");
}

#[test]
fn an_undeclared_category_and_an_interrupt_are_refused() {
    let dir = fresh_folder("on-disk", "refusals");
    let path = dir.join("plots.parquet");
    write_parquet(&path, &plots(3_000, 31));
    let cancel = AtomicBool::new(false);
    let table = DiskTable::open(&spec(&path, &on_disk(&["drop missing"])), &cancel).unwrap();
    let error = Model::build_on_disk(&model_spec(&["harvest from region using plots"]), &table, &cancel).unwrap_err().to_string();
    assert!(error.contains("region: category(") && error.contains("middle, north, south"), "{error}");
    let stop = AtomicBool::new(true);
    let error = Model::build_on_disk(&model_spec(&["harvest from ground using plots"]), &table, &stop).unwrap_err().to_string();
    assert!(error.contains("interrupted"), "{error}");
}
