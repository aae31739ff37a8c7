//! Columnar-table benchmark (cargo feature `columnar`): rows per second of
//! loading a table from Parquet against loading the same values from CSV.
//!
//! ```text
//! cargo run --release -p waypath --features columnar --example columnar_bench
//! cargo run --release -p waypath --features columnar --example columnar_bench -- --rows 10000000
//! ```
//!
//! The data (invented stream samples: reach, depth, shade, temperature,
//! nymph count) is generated here with a fixed seed, written to the
//! temporary directory as one Parquet file (Snappy, row groups of 2^20 rows)
//! and as CSV, and deleted afterwards; nothing is committed. Each line gives
//! the rows, the file size, wall seconds, rows per second (the reader uses
//! one core, so this is also per core) and the peak resident memory
//! (`VmHWM`, reset before each load). The table is held in memory, so rows
//! beyond what memory holds are refused by the loader's size check, not
//! timed.

use std::fs::File;
use std::io::{BufWriter, Write as _};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Instant;

use arrow_array::{ArrayRef, BooleanArray, Float64Array, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal, Poisson};
use waypath::table::{load_table, parse_table_line, TableSpec};

const REACHES: [&str; 3] = ["upper", "middle", "lower"];
const CHUNK: usize = 1 << 20;
const SEED: u64 = 20261204;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let sizes: Vec<usize> = match args.iter().position(|a| a == "--rows") {
        Some(i) => vec![args.get(i + 1).and_then(|n| n.parse().ok()).expect("--rows takes a number")],
        None => vec![100_000, 1_000_000],
    };
    let dir = std::env::temp_dir().join(format!("waypath-columnar-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temporary folder");
    println!("{:>10} {:>8} {:>10} {:>9} {:>14} {:>9}", "rows", "format", "file MiB", "seconds", "rows/second", "peak MiB");
    for rows in sizes {
        let parquet = dir.join("samples.parquet");
        let csv = dir.join("samples.csv");
        write_files(rows, &parquet, &csv);
        for (format, path) in [("parquet", &parquet), ("csv", &csv)] {
            time_load(rows, format, path);
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
}

fn time_load(rows: usize, format: &str, path: &Path) {
    let size = std::fs::metadata(path).map_or(0, |m| m.len()) as f64 / (1 << 20) as f64;
    let rules = ["reach: category(upper, middle, lower)", "drop missing", "keep where depth > 0.2"]
        .into_iter()
        .map(|line| parse_table_line(line).expect("valid line"));
    let spec = TableSpec::with_rules("samples", PathBuf::from(path), rules).expect("valid rules");
    reset_peak_memory();
    let start = Instant::now();
    let (table, _) = load_table(&spec).unwrap_or_else(|e| panic!("{e}"));
    let seconds = start.elapsed().as_secs_f64();
    assert!(table.nrows() > 0);
    println!(
        "{rows:>10} {format:>8} {size:>10.1} {seconds:>9.2} {:>14.0} {:>9.0}",
        rows as f64 / seconds,
        peak_memory_mib()
    );
}

/// The seeded samples, written chunk by chunk to both files.
fn write_files(rows: usize, parquet: &Path, csv: &Path) {
    let mut rng = StdRng::seed_from_u64(SEED);
    let properties = WriterProperties::builder().set_compression(Compression::SNAPPY).build();
    let schema = chunk(&mut rng, 1).schema();
    let mut writer = ArrowWriter::try_new(File::create(parquet).expect("parquet file"), schema, Some(properties))
        .expect("parquet writer");
    let mut text = BufWriter::new(File::create(csv).expect("csv file"));
    writeln!(text, "reach,depth,shade,temperature,nymphs").expect("csv header");
    let mut rng = StdRng::seed_from_u64(SEED);
    for start in (0..rows).step_by(CHUNK) {
        let batch = chunk(&mut rng, CHUNK.min(rows - start));
        write_csv(&mut text, &batch);
        writer.write(&batch).expect("parquet rows");
    }
    writer.close().expect("parquet footer");
}

fn chunk(rng: &mut StdRng, n: usize) -> RecordBatch {
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut reach, mut depth, mut shade, mut temperature, mut nymphs) = (vec![], vec![], vec![], vec![], vec![]);
    for _ in 0..n {
        let r = rng.random_range(0..3usize);
        let d: f64 = rng.random_range(0.05..1.5);
        let s = rng.random_bool(0.4);
        let t = 9.0 + r as f64 - 1.5 * f64::from(u8::from(s)) + noise.sample(rng);
        let rate = (0.8 + 0.6 * d - 0.05 * t).exp();
        reach.push(REACHES[r]);
        depth.push(d);
        shade.push(s);
        temperature.push(t);
        nymphs.push(Poisson::new(rate).expect("positive rate").sample(rng) as i64);
    }
    RecordBatch::try_from_iter([
        ("reach", Arc::new(StringArray::from(reach)) as ArrayRef),
        ("depth", Arc::new(Float64Array::from(depth)) as ArrayRef),
        ("shade", Arc::new(BooleanArray::from(shade)) as ArrayRef),
        ("temperature", Arc::new(Float64Array::from(temperature)) as ArrayRef),
        ("nymphs", Arc::new(Int64Array::from(nymphs)) as ArrayRef),
    ])
    .expect("equal columns")
}

fn write_csv(text: &mut BufWriter<File>, batch: &RecordBatch) {
    use arrow_array::cast::AsArray;
    use arrow_array::types::{Float64Type, Int64Type};
    let reach = batch.column(0).as_string::<i32>();
    let depth = batch.column(1).as_primitive::<Float64Type>();
    let shade = batch.column(2).as_boolean();
    let temperature = batch.column(3).as_primitive::<Float64Type>();
    let nymphs = batch.column(4).as_primitive::<Int64Type>();
    for i in 0..batch.num_rows() {
        writeln!(text, "{},{},{},{},{}", reach.value(i), depth.value(i), shade.value(i), temperature.value(i), nymphs.value(i))
            .expect("csv row");
    }
}

fn peak_memory_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.split_whitespace().next()?.parse::<f64>().ok())
        .map_or(f64::NAN, |kib| kib / 1024.0)
}

/// Reset the peak resident memory to the current one (Linux, `5` to `clear_refs`).
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}
