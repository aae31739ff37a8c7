//! Tables that stay on disk (cargo feature `on_disk`): how fast the
//! embedded engine gathers a fit's sums from Parquet, and how much memory
//! the process holds meanwhile.
//!
//! ```text
//! cargo run --release -p waypath --features on_disk --example on_disk_bench
//! cargo run --release -p waypath --features on_disk --example on_disk_bench -- --normal-rows 100000000 --logistic-rows 10000000
//! ```
//!
//! Two cases, each generated here with a fixed seed into the temporary
//! directory (Snappy Parquet, row groups of 2^20 rows) and deleted after:
//!
//! * stratified normal: invented plot harvests, `harvest from region,
//!   ground, trees` with region a declared category of eight levels
//!   (10^7 rows unless told; the issue's case is 10^8);
//! * logistic with 20 predictors: invented blight records, `blight from
//!   x1, …, x20` with `family bernoulli`, fitted `with laplace` (10^6 rows
//!   unless told; the issue's case is 10^7).
//!
//! Each line names a pass (the table's counting, the means and sds, the
//! cross-products, each Newton step), its seconds, and rows per second per
//! core (rows over seconds over the engine's threads, one); the summary
//! line gives the whole fit's seconds and the peak resident memory
//! (`VmHWM`, reset after the file is written).

use std::path::Path;
use std::sync::atomic::AtomicBool;
use std::sync::Arc;
use std::time::Instant;

use arrow_array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::infer::fit::{fit_model, Method};
use waypath::model::{Model, ModelSpec};
use waypath::table::on_disk::DiskTable;
use waypath::table::{parse_table_line, TableSpec};

const CHUNK: usize = 1 << 20;
const SEED: u64 = 20261204;
const REGIONS: [&str; 8] = ["ash", "birch", "cedar", "elm", "fir", "larch", "oak", "pine"];
const PREDICTORS: usize = 20;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let rows = |flag: &str, default: usize| {
        args.iter().position(|a| a == flag).map_or(default, |i| args.get(i + 1).and_then(|n| n.parse().ok()).expect("a row count"))
    };
    let dir = std::env::temp_dir().join(format!("waypath-on-disk-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temporary folder");
    let cores = waypath::table::on_disk::ENGINE_THREADS;
    println!("engine threads: {cores}");
    let normal = rows("--normal-rows", 10_000_000);
    if normal > 0 {
        let path = dir.join("harvests.parquet");
        write(&path, normal, harvest_chunk);
        run(&path, normal, cores, "normal", &["region: category(ash, birch, cedar, elm, fir, larch, oak, pine)"], &["harvest from region, ground, trees using t"], "with laplace draws 1000 seed 1");
        let _ = std::fs::remove_file(&path);
    }
    let logistic = rows("--logistic-rows", 1_000_000);
    if logistic > 0 {
        let path = dir.join("blight.parquet");
        write(&path, logistic, blight_chunk);
        let terms: Vec<String> = (1..=PREDICTORS).map(|k| format!("x{k}")).collect();
        let outcome = format!("blight from {} using t", terms.join(", "));
        run(&path, logistic, cores, "logistic", &[], &[&outcome, "family bernoulli"], "with laplace draws 1000 seed 1");
        let _ = std::fs::remove_file(&path);
    }
    let _ = std::fs::remove_dir_all(&dir);
}

fn run(path: &Path, rows: usize, cores: usize, case: &str, declarations: &[&str], model: &[&str], method: &str) {
    reset_peak_memory();
    let cancel = AtomicBool::new(false);
    let lines = declarations.iter().copied().chain(["stay on disk"]);
    let spec = TableSpec::with_rules("t", path, lines.map(|l| parse_table_line(l).expect("bench lines"))).expect("bench rules");
    let started = Instant::now();
    let table = DiskTable::open(&spec, &cancel).expect("the table opens");
    report(case, "counting rows and missing values", rows, started.elapsed().as_secs_f64(), cores);
    let spec = ModelSpec::from_lines("m", model.iter().enumerate().map(|(i, l)| (i + 1, *l))).expect("bench model");
    let built = Model::build_on_disk(&spec, &table, &cancel).expect("the model builds");
    let method = waypath::cells::statements::parse_method(method).expect("bench method");
    let fit = fit_model(&built, &method, &cancel, &|_| {}).expect("the fit runs");
    for pass in built.on_disk().expect("on disk").passes() {
        report(case, &pass.what, rows, pass.seconds, cores);
    }
    println!(
        "{case}: {rows} rows, whole summary (table, model, fit) {:.1} s, fit {:.1} s, peak memory {:.0} MiB",
        started.elapsed().as_secs_f64(),
        fit.seconds,
        peak_memory_mib()
    );
    if let Method::Laplace { .. } = method {
        let names = &fit.draws.names;
        let first = fit.draws.get(&names[0]).map_or(f64::NAN, |d| d.iter().sum::<f64>() / d.len() as f64);
        println!("{case}: posterior mean of {} = {first:.4}", names[0]);
    }
}

fn report(case: &str, pass: &str, rows: usize, seconds: f64, cores: usize) {
    println!("{case}: {pass:<34} {seconds:>8.2} s {:>14.0} rows/s/core", rows as f64 / seconds / cores as f64);
}

/// Writes `rows` rows made by `chunk` in pieces of [`CHUNK`].
fn write(path: &Path, rows: usize, chunk: fn(&mut StdRng, usize) -> RecordBatch) {
    let started = Instant::now();
    let mut rng = StdRng::seed_from_u64(SEED);
    let first = chunk(&mut rng, rows.min(CHUNK));
    let properties = WriterProperties::builder().set_compression(Compression::SNAPPY).set_max_row_group_row_count(Some(CHUNK)).build();
    let mut writer = ArrowWriter::try_new(std::fs::File::create(path).expect("file"), first.schema(), Some(properties)).expect("writer");
    writer.write(&first).expect("write");
    let mut written = first.num_rows();
    while written < rows {
        let batch = chunk(&mut rng, (rows - written).min(CHUNK));
        writer.write(&batch).expect("write");
        written += batch.num_rows();
    }
    writer.close().expect("close");
    let size = std::fs::metadata(path).map_or(0, |m| m.len()) as f64 / (1 << 20) as f64;
    println!("wrote {rows} rows to {} ({size:.0} MiB) in {:.1} s", path.display(), started.elapsed().as_secs_f64());
}

/// Plot harvests: eight regions, ground slope, trees per plot.
fn harvest_chunk(rng: &mut StdRng, n: usize) -> RecordBatch {
    let noise = Normal::new(0.0, 3.0).expect("sd");
    let mut region = Vec::with_capacity(n);
    let mut ground = Vec::with_capacity(n);
    let mut trees = Vec::with_capacity(n);
    let mut harvest = Vec::with_capacity(n);
    for _ in 0..n {
        let r = rng.random_range(0..REGIONS.len());
        let g: f64 = 4.0 + 2.0 * (rng.random::<f64>() - 0.5);
        let t: i64 = rng.random_range(18..27);
        region.push(REGIONS[r]);
        ground.push(g);
        trees.push(t);
        harvest.push(25.0 + r as f64 - 0.8 * g + 0.3 * t as f64 + noise.sample(rng));
    }
    RecordBatch::try_from_iter([
        ("region", Arc::new(StringArray::from(region)) as ArrayRef),
        ("ground", Arc::new(Float64Array::from(ground)) as ArrayRef),
        ("trees", Arc::new(Int64Array::from(trees)) as ArrayRef),
        ("harvest", Arc::new(Float64Array::from(harvest)) as ArrayRef),
    ])
    .expect("batch")
}

/// Blight records: twenty standard normal predictors and a logistic outcome.
fn blight_chunk(rng: &mut StdRng, n: usize) -> RecordBatch {
    let unit = Normal::new(0.0, 1.0).expect("sd");
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); PREDICTORS];
    let mut blight = Vec::with_capacity(n);
    for _ in 0..n {
        let mut eta = -0.5;
        for (k, column) in columns.iter_mut().enumerate() {
            let x = unit.sample(rng);
            eta += 0.1 * ((k % 5) as f64 - 2.0) * x;
            column.push(x);
        }
        blight.push(i64::from(rng.random::<f64>() < 1.0 / (1.0 + (-eta).exp())));
    }
    let mut fields: Vec<(String, ArrayRef)> = columns.into_iter().enumerate().map(|(k, c)| (format!("x{}", k + 1), Arc::new(Float64Array::from(c)) as ArrayRef)).collect();
    fields.push(("blight".into(), Arc::new(Int64Array::from(blight)) as ArrayRef));
    RecordBatch::try_from_iter(fields).expect("batch")
}

/// Peak resident memory of this process in MiB (`VmHWM`, Linux).
fn peak_memory_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| s.lines().find_map(|l| l.strip_prefix("VmHWM:")).and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<f64>().ok()))
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Reset the peak resident memory to the current one (Linux, `5` to `clear_refs`).
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}
