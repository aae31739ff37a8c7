//! Tables on disk whose passes run across machines (cargo feature
//! `across_machines`): one scheduler and two executors of the
//! `waypath-machines` binary, started here as child processes on
//! 127.0.0.1, run the same passes as the embedded engine over a Parquet
//! folder of four files, and the sums must agree.
//!
//! References outside the distributed path: the embedded engine and the
//! table loaded into memory (both checked against statsmodels in
//! tests/python/test_on_disk_reference.py), and the cross-products summed
//! in this file row by row from the values written (the definition
//! `XᵀX = Σ xᵢxᵢᵀ`, the design coded as the README's model table describes:
//! one intercept per level of the first category, centred slopes). The
//! bernoulli mode in memory comes from `infer::laplace`, which finds it by
//! its own optimiser on the rows, not by Newton passes.
//!
//! Also: both executors must have run tasks (each keeps its shuffle files
//! in a work folder of its own), an interrupt ends a wait for results, and
//! an address where no scheduler answers is refused within seconds with
//! the address named.
//!
//! Data: invented orchard plots, generated with a fixed seed in a
//! temporary folder (10^6 rows).
#![cfg(feature = "across_machines")]

mod common;

use common::scratch::fresh_folder;
use common::seeded::Seeded;
use std::net::{TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use arrow_array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::file::properties::WriterProperties;

use waypath::infer::fit::{fit_model, Method};
use waypath::model::plan_codec::plan_codecs;
use waypath::model::{Model, ModelSpec};
use waypath::table::on_disk::DiskTable;
use waypath::table::{load_table_with_cancel, parse_table_line, TableSpec};

const REGIONS: [&str; 3] = ["north", "middle", "south"];
const ROWS: usize = 1_000_000;
const FILES: usize = 4;

/// Invented orchard plots: region (text), ground slope (real, some
/// missing), trees (count), yield (real) and a yes/no outcome `blight`
/// from a logistic model.
struct Plots {
    region: Vec<&'static str>,
    ground: Vec<Option<f64>>,
    trees: Vec<i64>,
    harvest: Vec<f64>,
    blight: Vec<i64>,
}

fn plots(rows: usize, seed: u64) -> Plots {
    let mut rng = Seeded(seed);
    let mut p = Plots { region: vec![], ground: vec![], trees: vec![], harvest: vec![], blight: vec![] };
    for _ in 0..rows {
        let r = (rng.uniform() * 3.0) as usize;
        let ground = 4.0 + 2.0 * rng.normal();
        let trees = (20.0 + 6.0 * rng.uniform()).floor() as i64;
        let harvest = [30.0, 27.0, 33.0][r] - 0.8 * ground + 0.3 * trees as f64 + 3.0 * rng.normal();
        let eta = -1.0 + [0.0, 0.4, -0.5][r] + 0.3 * (ground - 4.0) - 0.05 * (trees as f64 - 22.5);
        p.region.push(REGIONS[r]);
        p.ground.push(if rng.uniform() < 0.01 { None } else { Some(ground) });
        p.trees.push(trees);
        p.harvest.push(harvest);
        p.blight.push(i64::from(rng.uniform() < 1.0 / (1.0 + (-eta).exp())));
    }
    p
}

/// The plots as a folder of `FILES` Parquet files, row groups of 50,000.
fn write_parts(dir: &Path, p: &Plots) {
    let per = p.region.len().div_ceil(FILES);
    for part in 0..FILES {
        let rows = part * per..((part + 1) * per).min(p.region.len());
        let batch = RecordBatch::try_from_iter([
            ("region", Arc::new(StringArray::from(p.region[rows.clone()].to_vec())) as ArrayRef),
            ("ground", Arc::new(Float64Array::from(p.ground[rows.clone()].to_vec())) as ArrayRef),
            ("trees", Arc::new(Int64Array::from(p.trees[rows.clone()].to_vec())) as ArrayRef),
            ("harvest", Arc::new(Float64Array::from(p.harvest[rows.clone()].to_vec())) as ArrayRef),
            ("blight", Arc::new(Int64Array::from(p.blight[rows].to_vec())) as ArrayRef),
        ])
        .unwrap();
        let properties = WriterProperties::builder().set_max_row_group_row_count(Some(50_000)).build();
        let file = std::fs::File::create(dir.join(format!("part-{part}.parquet"))).unwrap();
        let mut writer = ArrowWriter::try_new(file, batch.schema(), Some(properties)).unwrap();
        writer.write(&batch).unwrap();
        writer.close().unwrap();
    }
}

fn spec(path: &Path, lines: &[String]) -> TableSpec {
    let rules = lines.iter().map(|line| parse_table_line(line).expect("test lines are valid"));
    TableSpec::with_rules("plots", path, rules).expect("rules fit together")
}

fn body(last: Option<String>) -> Vec<String> {
    let mut lines: Vec<String> =
        ["region: category(north, middle, south)", "drop missing", "keep where trees >= 21"].iter().map(|l| l.to_string()).collect();
    lines.extend(last);
    lines
}

fn model_spec(lines: &[&str]) -> ModelSpec {
    ModelSpec::from_lines("m", lines.iter().enumerate().map(|(i, l)| (i + 1, *l))).unwrap()
}

/// ‖a − b‖ / ‖b‖ over all entries.
fn relative(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    let difference: f64 = a.iter().zip(b).map(|(x, y)| (x - y).powi(2)).sum::<f64>().sqrt();
    let size: f64 = b.iter().map(|y| y * y).sum::<f64>().sqrt();
    difference / size.max(f64::MIN_POSITIVE)
}

/// `harvest from region, ground, trees` coded here: region's three level
/// intercepts, then ground and trees centred at their means over the kept
/// rows; the outcome centred at its mean.
fn cross_products_by_hand(data: &Plots) -> (Vec<f64>, Vec<f64>, f64, f64) {
    let kept: Vec<usize> = (0..data.region.len()).filter(|&i| data.ground[i].is_some() && data.trees[i] >= 21).collect();
    let n = kept.len() as f64;
    let mean = |f: &dyn Fn(usize) -> f64| kept.iter().map(|&i| f(i)).sum::<f64>() / n;
    let (mg, mt, my) = (mean(&|i| data.ground[i].unwrap()), mean(&|i| data.trees[i] as f64), mean(&|i| data.harvest[i]));
    let (mut xtx, mut xty, mut yty) = (vec![0.0; 25], vec![0.0; 5], 0.0);
    for &i in &kept {
        let mut x = [0.0; 5];
        x[REGIONS.iter().position(|r| *r == data.region[i]).unwrap()] = 1.0;
        x[3] = data.ground[i].unwrap() - mg;
        x[4] = data.trees[i] as f64 - mt;
        let yc = data.harvest[i] - my;
        for j in 0..5 {
            xty[j] += x[j] * yc;
            for k in 0..5 {
                xtx[j * 5 + k] += x[j] * x[k];
            }
        }
        yty += yc * yc;
    }
    (xtx, xty, yty, n)
}

/// A port nothing listens on now (the listener is closed at once).
fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

fn answers(port: u16) -> bool {
    TcpStream::connect_timeout(&format!("127.0.0.1:{port}").parse().unwrap(), Duration::from_millis(200)).is_ok()
}

/// Waits until something accepts connections on every port.
fn wait_for(ports: &[u16], what: &str) {
    let started = Instant::now();
    while !ports.iter().all(|&p| answers(p)) {
        assert!(started.elapsed() < Duration::from_secs(60), "{what} did not start within a minute");
        std::thread::sleep(Duration::from_millis(100));
    }
}

/// A scheduler and two executors; the processes are stopped when dropped.
struct Cluster {
    scheduler: String,
    work: Vec<PathBuf>,
    children: Vec<Child>,
}

impl Cluster {
    fn start(dir: &Path) -> Cluster {
        let binary = env!("CARGO_BIN_EXE_waypath-machines");
        let port = free_port();
        let start = |arguments: &[String]| {
            Command::new(binary).args(arguments).stdout(Stdio::null()).stderr(Stdio::inherit()).spawn().expect("waypath-machines starts")
        };
        let mut cluster = Cluster { scheduler: format!("127.0.0.1:{port}"), work: Vec::new(), children: Vec::new() };
        cluster.children.push(start(&["scheduler".into(), "--port".into(), port.to_string()]));
        wait_for(&[port], "the scheduler");
        for k in 0..2 {
            let (flight, grpc) = (free_port(), free_port());
            let work = dir.join(format!("executor-{k}"));
            let arguments = [
                "executor", "--scheduler", &cluster.scheduler, "--port", &flight.to_string(), "--grpc-port", &grpc.to_string(),
                "--work-folder", &work.display().to_string(),
            ];
            cluster.children.push(start(&arguments.map(String::from)));
            wait_for(&[flight, grpc], "an executor");
            cluster.work.push(work);
        }
        // Both executors register with the scheduler once their services are up.
        std::thread::sleep(Duration::from_secs(2));
        cluster
    }

    /// Whether each executor's work folder holds shuffle files of a job.
    fn executors_with_work(&self) -> usize {
        self.work.iter().filter(|w| std::fs::read_dir(w).is_ok_and(|mut entries| entries.next().is_some())).count()
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        for child in &mut self.children {
            let _ = child.kill();
            let _ = child.wait();
        }
    }
}

#[test]
fn a_million_rows_give_the_same_sums_and_modes_across_machines_as_embedded_and_in_memory() {
    let dir = fresh_folder("machines", "agree");
    let data = plots(ROWS, 41);
    let parts = dir.join("plots");
    std::fs::create_dir_all(&parts).unwrap();
    write_parts(&parts, &data);
    let cluster = Cluster::start(&dir);
    let cancel = AtomicBool::new(false);
    let across = format!("stay on disk across machines at {}", cluster.scheduler);
    let spread = DiskTable::open_across(&spec(&parts, &body(Some(across))), &plan_codecs(), &cancel).unwrap();
    let embedded = DiskTable::open(&spec(&parts, &body(Some("stay on disk".into()))), &cancel).unwrap();
    let (memory, _) = load_table_with_cancel(&spec(&parts, &body(None)), &cancel).unwrap();
    assert_eq!(spread.engine.scheduler(), Some(cluster.scheduler.as_str()));
    assert_eq!(spread.report.rows_read, ROWS);
    assert_eq!((spread.report.dropped_missing, &spread.report.filters), (embedded.report.dropped_missing, &embedded.report.filters));
    assert_eq!(cluster.executors_with_work(), 2, "both executors ran tasks of the counting passes");

    // The normal family's sufficient statistics.
    let normal = model_spec(&["harvest from region, ground, trees using plots"]);
    let (a, b) = (Model::build_on_disk(&normal, &spread, &cancel).unwrap(), Model::build_on_disk(&normal, &embedded, &cancel).unwrap());
    let c = Model::build(&normal, &memory).unwrap();
    let (a, b, c_stats) = (a.normal_linear().unwrap(), b.normal_linear().unwrap(), c.normal_linear().unwrap());
    let (xtx, xty, yty, n) = cross_products_by_hand(&data);
    assert_eq!(a.n, n);
    assert!(relative(a.xtx.transpose().as_slice(), &xtx) < 1e-9, "XᵀX against the sums by hand");
    assert!(relative(a.xty.as_slice(), &xty) < 1e-9, "Xᵀy against the sums by hand");
    assert!((a.yty - yty).abs() < 1e-9 * yty, "yᵀy against the sum by hand");
    for (other, what) in [(&b, "embedded"), (&c_stats, "in memory")] {
        assert!(relative(a.xtx.as_slice(), other.xtx.as_slice()) < 1e-9, "XᵀX against {what}");
        assert!(relative(a.xty.as_slice(), other.xty.as_slice()) < 1e-9, "Xᵀy against {what}");
        assert!((a.yty - other.yty).abs() < 1e-9 * other.yty, "yᵀy against {what}");
    }

    // The bernoulli Laplace mode: one Newton pass per step on each path.
    let logistic = model_spec(&["blight from region, ground, trees using plots", "family bernoulli"]);
    let spread_model = Model::build_on_disk(&logistic, &spread, &cancel).unwrap();
    let embedded_model = Model::build_on_disk(&logistic, &embedded, &cancel).unwrap();
    let memory_model = Model::build(&logistic, &memory).unwrap();
    let a = waypath::infer::on_disk::disk_laplace(&spread_model, 200, 3, &cancel).unwrap();
    let b = waypath::infer::on_disk::disk_laplace(&embedded_model, 200, 3, &cancel).unwrap();
    let names = memory_model.unconstrained_names();
    let c = waypath::infer::laplace::laplace(&memory_model, &names, &memory_model.initial_point(), 200, 3).unwrap();
    assert!(relative(&a.mode, &b.mode) < 1e-9, "{:?} against the embedded {:?}", a.mode, b.mode);
    assert!(relative(&a.mode, &c.mode) < 1e-9, "{:?} against in memory {:?}", a.mode, c.mode);

    let fit = fit_model(&spread_model, &Method::Laplace { draws: 200, seed: 3 }, &cancel, &|_| {}).unwrap();
    let route = fit.route.unwrap_or_default();
    assert!(route.contains(&format!("the scheduler at {}", cluster.scheduler)) && route.contains("Newton"), "{route}");

    // An interrupt ends the wait for a pass's results.
    let stop = Arc::new(AtomicBool::new(false));
    let setter = {
        let stop = Arc::clone(&stop);
        std::thread::spawn(move || {
            std::thread::sleep(Duration::from_millis(300));
            stop.store(true, Ordering::Relaxed);
        })
    };
    let started = Instant::now();
    let error = fit_model(&spread_model, &Method::Laplace { draws: 200, seed: 4 }, &stop, &|_| {}).unwrap_err().to_string();
    setter.join().unwrap();
    assert!(error.contains("interrupted"), "{error}");
    assert!(started.elapsed() < Duration::from_secs(5), "the wait ended soon after the interrupt ({:?})", started.elapsed());
}

#[test]
fn an_address_where_no_scheduler_answers_is_refused_naming_it() {
    let dir = fresh_folder("machines", "refused");
    write_parts(&dir, &plots(1_000, 5));
    let address = format!("127.0.0.1:{}", free_port());
    let started = Instant::now();
    let lines = body(Some(format!("stay on disk across machines at {address}")));
    let error = DiskTable::open_across(&spec(&dir, &lines), &plan_codecs(), &AtomicBool::new(false)).unwrap_err().to_string();
    assert!(error.contains(&address) && error.contains("no scheduler answered"), "{error}");
    assert!(started.elapsed() < Duration::from_secs(10), "refused within the time limit, took {:?}", started.elapsed());
    // Opened without the codecs, the table says how it must be opened.
    let error = DiskTable::open(&spec(&dir, &lines), &AtomicBool::new(false)).unwrap_err().to_string();
    assert!(error.contains("open_across"), "{error}");
    // A line with no usable address is refused with the form to write.
    for line in ["stay on disk across machines at somewhere", "stay on disk across machines at host:0", "stay on disk across machines"] {
        let error = parse_table_line(line).unwrap_err().to_string();
        assert!(error.contains("HOST:PORT") || error.contains("port"), "{line}: {error}");
    }
}
