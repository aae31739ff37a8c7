//! Engine benchmark: the whole path from data to posterior summary, timed on
//! invented data generated here with fixed seeds.
//!
//! ```text
//! cargo run --release -p waypath --example engine_bench            # every case
//! cargo run --release -p waypath --example engine_bench -- a c     # chosen cases
//! cargo run --release -p waypath --example engine_bench -- a c d --settle 300 --draws 600 --seed 2
//! ```
//!
//! NUTS runs with Waypath's default settings unless the sampler options of
//! `fit … with nuts` are given as flags (`--chains`, `--settle`, `--draws`,
//! `--acceptance`, `--doublings`, `--seed`): that is how the defaults were
//! chosen (README, Performance). Cases:
//! * `a` — stream reaches: `density from reach, depth per reach`, a
//!   two-level category with its own intercept and slope, n = 400, NUTS;
//! * `b` — the same model at n = 1,000,000, written to a CSV file in the
//!   temporary directory first, then timed from reading the CSV through the
//!   table, the model and a Laplace fit to the printed summary (also a NUTS
//!   fit on the built model, timed on its own);
//! * `c` — nesting success of birds on 10,000 plots against 20 habitat
//!   measures, bernoulli family (logit link), NUTS;
//! * `d` — sapling height along age, cubic B-spline with 15 basis
//!   functions, n = 1,000, NUTS;
//! * `e` — mayfly nymph counts in 20,000 stream samples against 10 water
//!   measures (pairs of them correlated), poisson family (log link), NUTS;
//! * `f` — seeds that germinated out of the 1 to 40 sown in each of 5,000
//!   trays against 5 soil measures, binomial family (logit link), NUTS.
//! * `g` — clinics: whether a patient recovered against 3 measures, with
//!   the clinic pooled (`pooled clinic`, varying intercepts), 60 clinics,
//!   6,000 rows, bernoulli family, NUTS;
//! * `h` — streams: water temperature against canopy shade in 40 streams
//!   of 100 readings, each stream with its own intercept and shade slope,
//!   correlated (`pooled stream with shade`), normal family, NUTS;
//! * `i` — the nymph counts of `e` with each sample's rate multiplied by a
//!   gamma variable of mean 1 and sd 0.5, gamma-poisson family (learned
//!   overdispersion), 10 predictors, n = 20,000, NUTS;
//! * `j` — the share of each tray's seedlings that were healthy (strictly
//!   between 0 and 1) against the 5 soil measures of `f`, beta family
//!   (learned precision), n = 5,000, NUTS;
//! * `k` — days to germination of 5,000 seeds against the 5 soil measures,
//!   Weibull family (mean e^η, learned shape 1.6), the trial ending before
//!   about a third of them sprouted (`cut short by`), NUTS;
//! * `l` — the blight grade (none, mild, marked, severe) of 5,000 orchard
//!   trees against 5 standardised site measures, graded family (cumulative
//!   logit, learned cuts), NUTS;
//! * `m` — the yield of 5,000 orchard trees against their canopy class
//!   (open, sparse, partial, dense, closed: `steps(canopy)`, a whole effect
//!   shared out over four monotone steps) and 3 standardised site
//!   measures, normal family, NUTS;
//! * `n` — days from planting to first flower of 600 seedlings against
//!   the shade over them, at 3 nursery sites pooled (`pooled site`, few
//!   levels, so the intercept is barely told from the site means), Weibull
//!   family, NUTS.
//!
//! Each row shows wall seconds, the smallest bulk ESS over the parameters,
//! that ESS per wall second and per CPU second, the smallest tail ESS, the
//! largest R-hat, divergent trajectories, the deepest trajectory (doublings)
//! and the draws that reached the doubling limit, the leapfrog steps per
//! kept draw and the adapted step size (so that a gain in ESS per second can
//! be told from a sampler that stopped exploring), the mass matrix the fit
//! ran with and the design's condition number that chose it
//! (`infer::fit::mass_matrix_for`), and the peak resident memory of the case
//! (`VmHWM` of `/proc/self/status`, reset before each case through
//! `/proc/self/clear_refs` where the kernel allows it). Wall seconds cover
//! everything the case does after its data exist, diagnostics included;
//! CPU seconds are the processor time of all threads over the same span,
//! which tells how a busy machine stretched the wall time (on an idle
//! machine with as many cores as chains run at once, wall ≈ CPU / cores).

use std::fmt::Write as _;
use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::time::Instant;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Beta, Distribution, Gamma, Normal};
use waypath::draws::SummarySpec;
use waypath::infer::fit::{design_condition, fit_model, Fit, Method};
use waypath::infer::nuts::NutsSettings;
use waypath::model::{Model, ModelSpec};
use waypath::table::{load_table, parse_table_line, Column, ColumnData, Table, TableSpec};

/// One line of the result table.
struct Row {
    case: String,
    seconds: f64,
    /// Processor time of the whole process over the case (all threads).
    cpu_seconds: f64,
    min_ess: Option<f64>,
    /// Smallest tail ESS and largest R-hat over the parameters (NUTS only).
    min_tail: Option<f64>,
    max_rhat: Option<f64>,
    divergences: usize,
    deepest: u32,
    depth_hits: usize,
    steps_per_draw: Option<f64>,
    step_size: Option<f64>,
    /// The mass matrix the fit ran with, and the design's condition number.
    mass: Option<(String, f64)>,
    peak_mib: f64,
}

fn main() {
    let mut chosen: Vec<String> = std::env::args().skip(1).collect();
    let chart = take_chart_path(&mut chosen);
    let nuts = match take_settings(&mut chosen) {
        Ok(settings) => settings,
        Err(message) => {
            eprintln!("{message}");
            std::process::exit(2);
        }
    };
    eprintln!("{}", Method::Nuts(nuts.clone()).describe());
    let nuts = &nuts;
    let wants = |case: &str| chosen.is_empty() || chosen.iter().any(|c| c == case);
    let mut rows = Vec::new();
    if wants("a") {
        rows.push(case_stratified(nuts));
    }
    if wants("b") {
        rows.extend(case_million(nuts));
    }
    if wants("c") {
        rows.push(case_logistic(nuts));
    }
    if wants("d") {
        rows.push(case_spline(nuts));
    }
    if wants("e") {
        rows.push(case_poisson(nuts));
    }
    if wants("f") {
        rows.push(case_binomial(nuts));
    }
    if wants("g") {
        rows.push(case_clinics(nuts));
    }
    if wants("h") {
        rows.push(case_streams(nuts));
    }
    if wants("i") {
        rows.push(case_overdispersed(nuts));
    }
    if wants("j") {
        rows.push(case_shares(nuts));
    }
    if wants("k") {
        rows.push(case_times(nuts));
    }
    if wants("l") {
        rows.push(case_grades(nuts));
    }
    if wants("m") {
        rows.push(case_canopy_steps(nuts));
    }
    if wants("n") {
        rows.push(case_few_sites(nuts));
    }
    println!("{}", render(&rows));
    if let Some(path) = chart {
        match draw_chart(&rows, &path) {
            Ok(()) => eprintln!("wrote the ESS-per-second chart to {}", path.display()),
            Err(e) => eprintln!("could not write the chart {}: {e}", path.display()),
        }
    }
}

/// `--chart FILE.svg` anywhere among the arguments: where to draw the chart.
fn take_chart_path(args: &mut Vec<String>) -> Option<PathBuf> {
    let at = args.iter().position(|a| a == "--chart")?;
    args.remove(at);
    (at < args.len()).then(|| PathBuf::from(args.remove(at)))
}

/// The sampler flags (`--settle 300` …) among the arguments: Waypath's
/// defaults with those given replaced, read as `fit … with nuts` reads them.
fn take_settings(args: &mut Vec<String>) -> Result<NutsSettings, String> {
    let mut options = Vec::new();
    while let Some(at) = args.iter().position(|a| a.starts_with("--") && a != "--chart") {
        let flag = args.remove(at);
        let value = (at < args.len()).then(|| args.remove(at)).ok_or_else(|| format!("{flag} needs a value"))?;
        options.push(format!("{} {value}", &flag[2..]));
    }
    match waypath::cells::statements::parse_method(&format!("with nuts {}", options.join(" ")))? {
        Method::Nuts(settings) => Ok(settings),
        Method::Laplace { .. } => Err("the flags set NUTS options only".into()),
    }
}

/// A developer's chart of the table (drawn with plotters; the figures users
/// see are drawn by `waypath::plot`): one bar per sampled case, ESS per
/// second on a log axis, so a regression in any case stands out.
fn draw_chart(rows: &[Row], path: &Path) -> Result<(), Box<dyn std::error::Error>> {
    use plotters::prelude::*;
    let bars: Vec<(String, f64)> = rows
        .iter()
        .filter_map(|r| r.min_ess.map(|e| (r.case.chars().take(48).collect(), e / r.seconds)))
        .collect();
    if bars.is_empty() {
        return Err("no sampled case to chart".into());
    }
    let height = 110 + 52 * bars.len() as u32;
    let root = SVGBackend::new(path, (760, height)).into_drawing_area();
    root.fill(&WHITE)?;
    let top = bars.iter().map(|b| b.1).fold(10.0, f64::max) * 3.0;
    let mut chart = ChartBuilder::on(&root)
        .caption("minimum bulk ESS per second of wall time", ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(330)
        .build_cartesian_2d((1.0..top).log_scale(), (0..bars.len() - 1).into_segmented())?;
    chart
        .configure_mesh()
        .disable_y_mesh()
        .y_labels(bars.len())
        .y_label_formatter(&|v| match v {
            SegmentValue::CenterOf(i) => bars.get(*i).map(|b| b.0.clone()).unwrap_or_default(),
            _ => String::new(),
        })
        .x_label_formatter(&|x| format!("{x:.0}"))
        .x_desc("ESS / s (log scale)")
        .draw()?;
    let fill = RGBColor(0x2b, 0x6f, 0x8e);
    chart.draw_series(bars.iter().enumerate().map(|(i, (_, rate))| {
        let mut bar =
            Rectangle::new([(1.0, SegmentValue::Exact(i)), (*rate, SegmentValue::Exact(i + 1))], fill.filled());
        bar.set_margin(8, 8, 0, 0);
        bar
    }))?;
    root.present()?;
    Ok(())
}

/// (a) A two-level category with its own intercept and slope, n = 400.
fn case_stratified(nuts: &NutsSettings) -> Row {
    let table = reaches(400, 11);
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_reach", STRATIFIED_MODEL, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(a) stratified normal, n = 400, NUTS", started, &fit, &model)
}

const STRATIFIED_MODEL: &str = "density from reach, depth per reach using reaches";

/// (b) The same model on a million rows read from CSV.
fn case_million(nuts: &NutsSettings) -> Vec<Row> {
    let path = std::env::temp_dir().join(format!("waypath_bench_reaches_{}.csv", std::process::id()));
    write_csv(&reaches(1_000_000, 12), &path);
    reset_peak_memory();
    let started = Clock::start();
    let (model, steps) = million_to_model(&path);
    let fit = run_fit(&model, &Method::Laplace { draws: 4000, seed: 7 });
    let shown = summary_text(&fit);
    let laplace_row = row("(b) same, n = 1,000,000, CSV → Laplace summary", started, &fit, &model);
    eprintln!("{steps}laplace + summary {:.2} s\n{shown}", started.wall.elapsed().as_secs_f64());
    let _ = std::fs::remove_file(&path);

    reset_peak_memory();
    let started = Clock::start();
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    vec![laplace_row, row("(b) same, n = 1,000,000, NUTS on the built model", started, &fit, &model)]
}

/// Read the CSV into a table and build the model, reporting the time of each step.
fn million_to_model(path: &Path) -> (Model, String) {
    let mut steps = String::new();
    let started = Instant::now();
    let mut spec = TableSpec::new("reaches", path);
    for line in ["reach: category(upper, lower)", "depth: real", "density: real"] {
        spec.add_rule(parse_table_line(line).expect("fixed table line")).expect("fixed table rule");
    }
    let (table, _) = load_table(&spec).expect("the benchmark CSV loads");
    let _ = writeln!(steps, "CSV → table {:.2} s", started.elapsed().as_secs_f64());
    let at = Instant::now();
    let model = build("m_reach", STRATIFIED_MODEL, &table);
    let _ = writeln!(steps, "table → model {:.2} s", at.elapsed().as_secs_f64());
    (model, steps)
}

/// (c) Logistic regression on 20 predictors, n = 10,000.
fn case_logistic(nuts: &NutsSettings) -> Row {
    let table = plots(10_000, 13);
    let terms: Vec<String> = (1..=20).map(|j| format!("h{j}")).collect();
    let body = format!("nested from {} using plots\nfamily bernoulli", terms.join(", "));
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_nest", &body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(c) logistic, 20 predictors, n = 10,000, NUTS", started, &fit, &model)
}

/// (d) A cubic B-spline with 15 basis functions, n = 1,000.
fn case_spline(nuts: &NutsSettings) -> Row {
    let table = saplings(1000, 14);
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_growth", "height from spline(age, 15) using saplings", &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(d) B-spline, 15 functions, n = 1,000, NUTS", started, &fit, &model)
}

/// (e) Poisson regression on 10 predictors, n = 20,000.
fn case_poisson(nuts: &NutsSettings) -> Row {
    let table = samples(20_000, 15);
    let terms: Vec<String> = (1..=10).map(|j| format!("w{j}")).collect();
    let body = format!("nymphs from {} using samples\nfamily poisson", terms.join(", "));
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_nymphs", &body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(e) poisson, 10 predictors, n = 20,000, NUTS", started, &fit, &model)
}

/// (i) Gamma-poisson regression on 10 predictors, n = 20,000, overdispersion 0.5.
fn case_overdispersed(nuts: &NutsSettings) -> Row {
    let table = samples_with(20_000, 15, 0.5);
    let terms: Vec<String> = (1..=10).map(|j| format!("w{j}")).collect();
    let body = format!("nymphs from {} using samples\nfamily gamma_poisson", terms.join(", "));
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_nymphs_overdispersed", &body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(i) gamma-poisson, 10 predictors, n = 20,000, NUTS", started, &fit, &model)
}

/// (j) Beta regression on 5 predictors, n = 5,000, precision 20.
fn case_shares(nuts: &NutsSettings) -> Row {
    let table = healthy_shares(5_000, 17);
    let body = "healthy from s1, s2, s3, s4, s5 using trays\nfamily beta";
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_healthy", body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(j) beta, 5 predictors, n = 5,000, NUTS", started, &fit, &model)
}

/// (k) Weibull times on 5 predictors, n = 5,000, shape 1.6, about a third
/// of the rows cut short.
fn case_times(nuts: &NutsSettings) -> Row {
    let table = germination(5_000, 19);
    let body = "days from s1, s2, s3, s4, s5 using seeds\nfamily weibull cut short by unsprouted";
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_days", body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(k) weibull, rows cut short, 5 predictors, n = 5,000, NUTS", started, &fit, &model)
}

/// (n) Weibull with a pooled site of only 3 levels, n = 600.
fn case_few_sites(nuts: &NutsSettings) -> Row {
    let table = nursery_sites(600, 3, 23);
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_flower", "days from shade, pooled site using seedlings\nfamily weibull", &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(n) weibull, pooled site (3), 1 predictor, n = 600, NUTS", started, &fit, &model)
}

/// (l) Cumulative logit on 5 predictors, 4 ordered grades, n = 5,000.
fn case_grades(nuts: &NutsSettings) -> Row {
    let table = blight_grades(5_000, 18);
    let body = "blight from s1, s2, s3, s4, s5 using orchard\nfamily graded";
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_blight", body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(l) graded, 4 grades, 5 predictors, n = 5,000, NUTS", started, &fit, &model)
}

/// (m) A normal outcome on an ordered category's monotone steps (5
/// levels) and 3 predictors, n = 5,000.
fn case_canopy_steps(nuts: &NutsSettings) -> Row {
    let table = canopy_classes(5_000, 19);
    let body = "yield from steps(canopy), s1, s2, s3 using orchard";
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_canopy", body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(m) normal, steps of 5 canopy classes, 3 predictors, n = 5,000, NUTS", started, &fit, &model)
}

/// Orchard trees: a canopy class drawn uniformly from five ordered classes,
/// 3 standardised site measures and a yield that climbs with the canopy by
/// unequal steps (1, 0.3, 2, 0.7 kg) plus the measures' effects and a
/// standard normal error.
fn canopy_classes(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let (effects, steps) = ([0.5, -0.3, 0.2], [1.0, 0.3, 2.0, 0.7]);
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 3];
    let (mut canopy, mut yield_kg) = (Vec::with_capacity(n), Vec::with_capacity(n));
    for _ in 0..n {
        let class = rng.random_range(0..5u32);
        let mut mean = 10.0 + steps[..class as usize].iter().sum::<f64>();
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let s = noise.sample(&mut rng);
            column.push(s);
            mean += effect * s;
        }
        canopy.push(class);
        yield_kg.push(mean + noise.sample(&mut rng));
    }
    let mut table: Vec<Column> =
        columns.into_iter().enumerate().map(|(j, c)| Column::new(format!("s{}", j + 1), ColumnData::Real(c))).collect();
    let levels = ["open", "sparse", "partial", "dense", "closed"].map(String::from).to_vec();
    table.push(Column::new("canopy", ColumnData::Category { codes: canopy, levels }).with_stated_order());
    table.push(Column::new("yield", ColumnData::Real(yield_kg)));
    Table { name: "orchard".into(), columns: table }
}

/// (f) Binomial regression on 5 predictors, n = 5,000, trials 1 to 40.
fn case_binomial(nuts: &NutsSettings) -> Row {
    let table = trays(5_000, 16);
    let body = "sprouted from s1, s2, s3, s4, s5 using trays\nfamily binomial out of sown";
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_trays", body, &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(f) binomial, 5 predictors, n = 5,000, NUTS", started, &fit, &model)
}

/// (g) Bernoulli with a pooled clinic: 60 clinics, 6,000 rows, 3 predictors.
fn case_clinics(nuts: &NutsSettings) -> Row {
    let table = clinics(6000, 60, 16);
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_clinic", "recovered from dose, age, weight, pooled clinic using patients\nfamily bernoulli", &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(g) bernoulli, pooled clinic (60), 3 predictors, n = 6,000, NUTS", started, &fit, &model)
}

/// (h) Normal with a varying intercept and slope, correlated: 40 streams
/// of 100 readings.
fn case_streams(nuts: &NutsSettings) -> Row {
    let table = streams(40, 100, 17);
    reset_peak_memory();
    let started = Clock::start();
    let model = build("m_streams", "temperature from shade, pooled stream with shade using readings", &table);
    let fit = run_fit(&model, &Method::Nuts(nuts.clone()));
    row("(h) normal, pooled stream with shade (40 × 100), correlated, NUTS", started, &fit, &model)
}

fn build(name: &str, body: &str, table: &Table) -> Model {
    let spec = ModelSpec::from_lines(name, body.lines().enumerate()).expect("fixed model text parses");
    Model::build(&spec, table).expect("benchmark model builds")
}

fn run_fit(model: &Model, method: &Method) -> Fit {
    let cancel = AtomicBool::new(false);
    let fit = fit_model(model, method, &cancel, &|_| {}).expect("benchmark fit runs");
    for warning in &fit.warnings {
        eprintln!("warning ({}): {warning}", model.name());
    }
    fit
}

fn row(case: &str, started: Clock, fit: &Fit, model: &Model) -> Row {
    let seconds = started.wall.elapsed().as_secs_f64();
    let cpu_seconds = cpu_seconds() - started.cpu;
    let over = |value: fn(&waypath::infer::diagnostics::ParamDiagnostics) -> f64, largest: bool| {
        fit.diagnostics.as_ref().map(|d| {
            let values = d.iter().map(value);
            if largest { values.fold(f64::NEG_INFINITY, f64::max) } else { values.fold(f64::INFINITY, f64::min) }
        })
    };
    Row {
        case: case.to_string(),
        seconds,
        cpu_seconds,
        min_ess: over(|p| p.ess_bulk, false),
        min_tail: over(|p| p.ess_tail, false),
        max_rhat: over(|p| p.rhat, true),
        divergences: fit.divergences,
        deepest: fit.deepest,
        depth_hits: fit.depth_hits,
        steps_per_draw: fit.steps_per_draw,
        step_size: fit.step_size,
        mass: match &fit.method {
            Method::Nuts(s) => Some((s.mass.word().to_string(), design_condition(model.design_matrix()))),
            Method::Laplace { .. } => None,
        },
        peak_mib: peak_memory_mib(),
    }
}

fn summary_text(fit: &Fit) -> String {
    let summaries = fit.draws.summarise(&SummarySpec::default()).expect("draws summarise");
    summaries
        .iter()
        .map(|s| format!("  {:<18} mean {:>10.4}  sd {:.4}", s.name, s.mean, s.sd))
        .collect::<Vec<_>>()
        .join("\n")
}

fn render(rows: &[Row]) -> String {
    let mut out = String::from(
        "| case | wall s | CPU s | min bulk ESS | ESS/s | ESS/CPU s | min tail ESS | max R-hat | divergent | deepest (at limit) | steps/draw | step size | mass matrix (design condition) | peak memory (MiB) |\n\
         |---|---|---|---|---|---|---|---|---|---|---|---|---|---|\n",
    );
    let or_dash = |value: Option<String>| value.unwrap_or_else(|| "—".into());
    for r in rows {
        let ess = or_dash(r.min_ess.map(|e| format!("{e:.0}")));
        let rate = or_dash(r.min_ess.map(|e| format!("{:.0}", e / r.seconds)));
        let cpu_rate = or_dash(r.min_ess.map(|e| format!("{:.0}", e / r.cpu_seconds)));
        let tail = or_dash(r.min_tail.map(|t| format!("{t:.0}")));
        let rhat = or_dash(r.max_rhat.map(|x| format!("{x:.3}")));
        let depth = or_dash(r.min_ess.map(|_| format!("{} ({})", r.deepest, r.depth_hits)));
        let steps = or_dash(r.steps_per_draw.map(|x| format!("{x:.2}")));
        let step_size = or_dash(r.step_size.map(|x| format!("{x:.3}")));
        let mass = or_dash(r.mass.as_ref().map(|(word, condition)| format!("{word} ({condition:.1})")));
        let _ = writeln!(
            out,
            "| {} | {:.2} | {:.2} | {ess} | {rate} | {cpu_rate} | {tail} | {rhat} | {} | {depth} | {steps} | {step_size} | {mass} | {:.0} |",
            r.case, r.seconds, r.cpu_seconds, r.divergences, r.peak_mib
        );
    }
    out
}

/// When a case started, by the wall clock and by processor time.
#[derive(Clone, Copy)]
struct Clock {
    wall: Instant,
    cpu: f64,
}

impl Clock {
    fn start() -> Clock {
        Clock { wall: Instant::now(), cpu: cpu_seconds() }
    }
}

/// Processor time used by this process so far (user + system, all
/// threads), from `/proc/self/stat` in clock ticks of 1/100 s.
fn cpu_seconds() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    // Fields after the command name (which is in brackets): utime is the 12th, stime the 13th.
    let after = stat.rsplit_once(')').map_or("", |(_, rest)| rest);
    let fields: Vec<f64> = after.split_whitespace().map(|f| f.parse().unwrap_or(f64::NAN)).collect();
    match (fields.get(11), fields.get(12)) {
        (Some(user), Some(system)) => (user + system) / 100.0,
        _ => f64::NAN,
    }
}

/// Peak resident memory of this process in MiB (`VmHWM`).
fn peak_memory_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.split_whitespace().next()?.parse::<f64>().ok())
        .map_or(f64::NAN, |kib| kib / 1024.0)
}

/// Reset the peak resident memory to the current one (Linux, `5` to
/// `clear_refs`); without it the peak is that of the whole run so far.
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// Invertebrate density in stream reaches: upper reaches are denser and
/// fall off faster with depth than lower ones.
fn reaches(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let mut reach = Vec::with_capacity(n);
    let mut depth = Vec::with_capacity(n);
    let mut density = Vec::with_capacity(n);
    for _ in 0..n {
        let lower = rng.random_range(0..2u32);
        let d: f64 = rng.random_range(0.1..1.5);
        let (a, b) = if lower == 1 { (30.0, -6.0) } else { (45.0, -14.0) };
        reach.push(lower);
        depth.push(d);
        density.push(a + b * d + 4.0 * noise.sample(&mut rng));
    }
    table(
        "reaches",
        vec![
            ("reach", ColumnData::Category { codes: reach, levels: vec!["upper".into(), "lower".into()] }),
            ("depth", ColumnData::Real(depth)),
            ("density", ColumnData::Real(density)),
        ],
    )
}

/// Whether a nest on a plot fledged young, against 20 standardised habitat
/// measures `h1` … `h20` of which a handful matter.
fn plots(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let effects: Vec<f64> = (0..20).map(|j| [0.8, -0.5, 0.3, 0.0, 0.0][j % 5] * if j < 10 { 1.0 } else { 0.5 }).collect();
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 20];
    let mut nested = Vec::with_capacity(n);
    for _ in 0..n {
        let mut eta = -0.4;
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let h = noise.sample(&mut rng);
            column.push(h);
            eta += effect * h;
        }
        nested.push(rng.random::<f64>() < 1.0 / (1.0 + (-eta as f64).exp()));
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("h{}", j + 1), ColumnData::Real(c))).collect();
    named.push(("nested".into(), ColumnData::Binary(nested)));
    Table { name: "plots".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// Mayfly nymphs counted in stream samples against 10 standardised water
/// measures `w1` … `w10`; each even-numbered measure is correlated 0.6
/// with the one before it (warmth and oxygen, flow and gravel, …).
fn samples(n: usize, seed: u64) -> Table {
    samples_with(n, seed, 0.0)
}

/// [`samples`] with each rate multiplied by a gamma variable of mean 1
/// and sd `overdispersion` (none when it is 0), drawn after the measures.
fn samples_with(n: usize, seed: u64, overdispersion: f64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let shape = 1.0 / (overdispersion * overdispersion);
    let multiplier = (overdispersion > 0.0).then(|| Gamma::new(shape, 1.0 / shape).expect("valid gamma"));
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let effects = [0.3, -0.2, 0.15, 0.0, -0.25, 0.1, 0.0, 0.05, 0.2, -0.1];
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 10];
    let mut nymphs = Vec::with_capacity(n);
    for _ in 0..n {
        let mut eta = 1.2;
        let mut previous = 0.0;
        for (j, (column, effect)) in columns.iter_mut().zip(&effects).enumerate() {
            let fresh = noise.sample(&mut rng);
            let w = if j % 2 == 1 { 0.6 * previous + 0.8 * fresh } else { fresh };
            previous = w;
            column.push(w);
            eta += effect * w;
        }
        let rate = eta.exp() * multiplier.as_ref().map_or(1.0, |g| g.sample(&mut rng));
        nymphs.push(poisson_draw(rate, &mut rng));
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("w{}", j + 1), ColumnData::Real(c))).collect();
    named.push(("nymphs".into(), ColumnData::Count(nymphs)));
    Table { name: "samples".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// A Poisson draw by counting unit-rate arrivals (Knuth's multiplication
/// method; fine for the small means here).
fn poisson_draw(mean: f64, rng: &mut StdRng) -> u64 {
    let limit = (-mean).exp();
    let (mut count, mut product) = (0, rng.random::<f64>());
    while product > limit {
        count += 1;
        product *= rng.random::<f64>();
    }
    count
}

/// Seed trays: the share of each tray's seedlings that were healthy, beta
/// with mean logistic(η) and precision 20, against 5 standardised soil
/// measures `s1` … `s5`.
fn healthy_shares(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let effects = [0.4, -0.2, 0.3, 0.0, -0.1];
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 5];
    let mut healthy = Vec::with_capacity(n);
    for _ in 0..n {
        let mut eta = 0.8;
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let s = noise.sample(&mut rng);
            column.push(s);
            eta += effect * s;
        }
        let mu = 1.0 / (1.0 + (-eta).exp());
        let share: f64 = Beta::new(20.0 * mu, 20.0 * (1.0 - mu)).expect("valid beta").sample(&mut rng);
        healthy.push(share.clamp(1e-9, 1.0 - 1e-9));
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("s{}", j + 1), ColumnData::Real(c))).collect();
    named.push(("healthy".into(), ColumnData::Real(healthy)));
    Table { name: "trays".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// Seeds: days to germination against 5 standardised soil measures, Weibull
/// with mean e^η and shape 1.6 (inverse of its survival function), each
/// seed followed for a uniform 10 to 40 days: a later sprouting is cut
/// short there (`unsprouted` yes, the days followed kept).
fn germination(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let (effects, shape) = ([0.3, -0.2, 0.1, 0.0, 0.15], 1.6f64);
    // Γ(1 + 1/1.6) = Γ(1.625) ≈ 0.8966 (scipy.special.gamma): the scale whose mean is e^η.
    let mean_over_scale = 0.8966;
    let mut columns: Vec<Vec<f64>> = (0..5).map(|_| Vec::with_capacity(n)).collect();
    let (mut days, mut unsprouted) = (Vec::with_capacity(n), Vec::with_capacity(n));
    for _ in 0..n {
        let mut eta = 3.0;
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let s = noise.sample(&mut rng);
            column.push(s);
            eta += effect * s;
        }
        let u: f64 = 1.0 - rng.random::<f64>();
        let time = eta.exp() / mean_over_scale * (-u.ln()).powf(1.0 / shape);
        let end = 10.0 + 30.0 * rng.random::<f64>();
        days.push(time.min(end));
        unsprouted.push(time > end);
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("s{}", j + 1), ColumnData::Real(c))).collect();
    named.push(("days".into(), ColumnData::Real(days)));
    named.push(("unsprouted".into(), ColumnData::Binary(unsprouted)));
    Table { name: "seeds".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// Seedlings at `sites` nursery sites (rows shared out in turn): days to
/// first flower, Weibull with shape 1.6 and mean `e^η`,
/// `η = 3 + 0.5·shade + site departure` (departures of sd 0.3).
fn nursery_sites(n: usize, sites: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let departures: Vec<f64> = (0..sites).map(|_| 0.3 * noise.sample(&mut rng)).collect();
    let shape = 1.6f64;
    // Γ(1 + 1/1.6) = Γ(1.625) ≈ 0.8966 (scipy.special.gamma): the scale whose mean is e^η.
    let mean_over_scale = 0.8966;
    let (mut site, mut shade, mut days) = (Vec::with_capacity(n), Vec::with_capacity(n), Vec::with_capacity(n));
    for i in 0..n {
        let s = i % sites;
        let x: f64 = rng.random_range(0.0..1.0);
        let u: f64 = 1.0 - rng.random::<f64>();
        let eta = 3.0 + 0.5 * x + departures[s];
        site.push(s as u32);
        shade.push(x);
        days.push(eta.exp() / mean_over_scale * (-u.ln()).powf(1.0 / shape));
    }
    let levels = (1..=sites).map(|k| format!("N{k}")).collect();
    table(
        "seedlings",
        vec![
            ("site", ColumnData::Category { codes: site, levels }),
            ("shade", ColumnData::Real(shade)),
            ("days", ColumnData::Real(days)),
        ],
    )
}

/// Orchard trees: a blight grade from a latent score (5 standardised site
/// measures `s1` … `s5` plus a standard logistic error) cut at −1, 0.5
/// and 2.
fn blight_grades(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let effects = [0.6, -0.4, 0.3, 0.0, 0.2];
    let cuts = [-1.0, 0.5, 2.0];
    let mut columns: Vec<Vec<f64>> = (0..5).map(|_| Vec::with_capacity(n)).collect();
    let mut grade = Vec::with_capacity(n);
    for _ in 0..n {
        let mut score = 0.0;
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let s = noise.sample(&mut rng);
            column.push(s);
            score += effect * s;
        }
        let u: f64 = rng.random::<f64>().max(f64::MIN_POSITIVE);
        score += (u / (1.0 - u)).ln();
        grade.push(cuts.iter().filter(|&&c| score >= c).count() as u32);
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("s{}", j + 1), ColumnData::Real(c))).collect();
    let levels = ["none", "mild", "marked", "severe"].map(String::from).to_vec();
    named.push(("blight".into(), ColumnData::Category { codes: grade, levels }));
    Table { name: "orchard".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// Seed trays: how many of the seeds sown (1 to 40) sprouted, against 5
/// standardised soil measures `s1` … `s5`.
fn trays(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let effects = [0.5, -0.3, 0.2, 0.0, 0.1];
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 5];
    let (mut sown, mut sprouted) = (Vec::with_capacity(n), Vec::with_capacity(n));
    for _ in 0..n {
        let mut eta = 0.3;
        for (column, effect) in columns.iter_mut().zip(&effects) {
            let s = noise.sample(&mut rng);
            column.push(s);
            eta += effect * s;
        }
        let m: u64 = rng.random_range(1..=40);
        let p = 1.0 / (1.0 + (-eta as f64).exp());
        sprouted.push((0..m).filter(|_| rng.random::<f64>() < p).count() as u64);
        sown.push(m);
    }
    let mut named: Vec<(String, ColumnData)> =
        columns.into_iter().enumerate().map(|(j, c)| (format!("s{}", j + 1), ColumnData::Real(c))).collect();
    named.push(("sown".into(), ColumnData::Count(sown)));
    named.push(("sprouted".into(), ColumnData::Count(sprouted)));
    Table { name: "trays".into(), columns: named.into_iter().map(|(n, d)| Column::new(n, d)).collect() }

}

/// Patients of `groups` clinics, each clinic shifting the log odds of
/// recovery by a normal(0, 0.6) departure; three standardised measures.
fn clinics(n: usize, groups: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let departures: Vec<f64> = (0..groups).map(|_| 0.6 * noise.sample(&mut rng)).collect();
    let (mut clinic, mut dose, mut age, mut weight, mut recovered) = (Vec::new(), Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for i in 0..n {
        let c = (i * groups / n) as u32;
        let (d, a, w): (f64, f64, f64) = (noise.sample(&mut rng), noise.sample(&mut rng), noise.sample(&mut rng));
        let eta = 0.2 + 0.7 * d - 0.4 * a + 0.1 * w + departures[c as usize];
        clinic.push(c);
        dose.push(d);
        age.push(a);
        weight.push(w);
        recovered.push(rng.random::<f64>() < 1.0 / (1.0 + (-eta).exp()));
    }
    let levels = (1..=groups).map(|k| format!("C{k:02}")).collect();
    table(
        "patients",
        vec![
            ("clinic", ColumnData::Category { codes: clinic, levels }),
            ("dose", ColumnData::Real(dose)),
            ("age", ColumnData::Real(age)),
            ("weight", ColumnData::Real(weight)),
            ("recovered", ColumnData::Binary(recovered)),
        ],
    )
}

/// Water temperature (°C) against canopy shade (share 0–1) in `streams`
/// streams of `per` readings: each stream's intercept departs by sd 1.5
/// and its shade slope by sd 2, correlated −0.5; noise sd 0.8.
fn streams(streams: usize, per: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let rho: f64 = -0.5;
    let effects: Vec<(f64, f64)> = (0..streams)
        .map(|_| {
            let (z0, z1) = (noise.sample(&mut rng), noise.sample(&mut rng));
            (1.5 * z0, 2.0 * (rho * z0 + (1.0 - rho * rho).sqrt() * z1))
        })
        .collect();
    let (mut stream, mut shade, mut temperature) = (Vec::new(), Vec::new(), Vec::new());
    for (s, (a, b)) in effects.iter().enumerate() {
        for _ in 0..per {
            let x: f64 = rng.random_range(0.0..1.0);
            stream.push(s as u32);
            shade.push(x);
            temperature.push(16.0 + a + (b - 4.0) * x + 0.8 * noise.sample(&mut rng));
        }
    }
    let levels = (1..=streams).map(|k| format!("S{k:02}")).collect();
    table(
        "readings",
        vec![
            ("stream", ColumnData::Category { codes: stream, levels }),
            ("shade", ColumnData::Real(shade)),
            ("temperature", ColumnData::Real(temperature)),
        ],
    )
}

/// Sapling height along age: a rise that levels off, with a dip.
fn saplings(n: usize, seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let mut age = Vec::with_capacity(n);
    let mut height = Vec::with_capacity(n);
    for _ in 0..n {
        let a: f64 = rng.random_range(0.0..12.0);
        age.push(a);
        height.push(120.0 * (1.0 - (-a / 4.0).exp()) + 10.0 * (a / 1.5).sin() + 6.0 * noise.sample(&mut rng));
    }
    table("saplings", vec![("age", ColumnData::Real(age)), ("height", ColumnData::Real(height))])
}

fn table(name: &str, columns: Vec<(&str, ColumnData)>) -> Table {
    Table { name: name.into(), columns: columns.into_iter().map(|(n, d)| Column::new(n, d)).collect() }
}

/// Write `table` as CSV (labels for categories) to `path`.
fn write_csv(table: &Table, path: &PathBuf) {
    let file = std::fs::File::create(path).expect("temporary file can be created");
    let mut out = std::io::BufWriter::new(file);
    let names: Vec<&str> = table.column_names();
    writeln!(out, "{}", names.join(",")).expect("write header");
    let mut line = String::new();
    for i in 0..table.nrows() {
        line.clear();
        for (k, column) in table.columns.iter().enumerate() {
            if k > 0 {
                line.push(',');
            }
            match &column.data {
                ColumnData::Category { codes, levels } => line.push_str(&levels[codes[i] as usize]),
                ColumnData::Real(v) => {
                    let _ = write!(line, "{:.6}", v[i]);
                }
                other => {
                    let _ = write!(line, "{}", other.real_at(i).unwrap_or(f64::NAN));
                }
            }
        }
        writeln!(out, "{line}").expect("write row");
    }
    out.flush().expect("flush CSV");
}
