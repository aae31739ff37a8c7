//! The question and simulation statements of the cell language, run against
//! a session on invented data made by `simulate` with fixed seeds: each
//! statement gives its documented JSON keys (README, "Output structures"),
//! and the numbers agree with sources outside the code under test.

mod common;

use common::cells::run;

use serde_json::Value;
use waypath::cells::Session;

/// Run a cell that must succeed; the JSON of its last display.
fn last_json(session: &mut Session, cell: &str) -> Value {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    // the written result: a joint fit's node figures follow it
    out.displays.iter().rev().find_map(|d| d.json.clone()).expect("a JSON structure")
}

fn has_keys(json: &Value, keys: &[&str]) {
    for k in keys {
        assert!(json.get(k).is_some(), "missing key {k} in {json}");
    }
}

/// A field of plots: shade z confounds cover x and insect count y.
/// Mechanism coefficients: x = 0.8 z + e, y = 1 + 0.5 x + 0.7 z + e.
const FIELD: &str = "graph g:
    z -> x -> y
    z -> y
simulate field from g rows 400 seed 11:
    z = normal(0, 1)
    x = normal(0.8 * z, 1)
    y = normal(1 + 0.5 * x + 0.7 * z, 1)
";
/// Wright (1934) path tracing: the total effect of x on y is the product of
/// path coefficients along the one directed path x -> y.
const TRUE_EFFECT: f64 = 0.5;

fn field_session() -> Session {
    let mut session = Session::new(".");
    let json = last_json(&mut session, FIELD);
    // the table statement's structure, plus the mechanisms listed
    has_keys(&json, &["name", "rows", "columns", "graph", "seed", "mechanisms"]);
    assert_eq!(json["rows"], 400);
    assert_eq!(json["mechanisms"].as_array().map(Vec::len), Some(3));
    session
}

fn logistic(t: f64) -> f64 {
    1.0 / (1.0 + (-t).exp())
}

#[test]
fn contrast_mean_is_the_mean_of_paired_per_draw_differences() {
    let mut session = Session::new(".");
    let cell = "graph g:
    z -> x -> sick
    z -> sick
simulate plots from g rows 300 seed 5:
    z = normal(0, 1)
    x = bernoulli(0.5)
    sick = bernoulli(logit = -0.5 + 1.2 * x + 0.8 * z)
model m:
    sick from x, z using plots
    family bernoulli
    centre off
fit m with laplace draws 2000 seed 3
";
    let out = run(&mut session, cell);
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = last_json(&mut session, "contrast m: x 1 vs 0 along z from -1 to 1 by 0.5");
    has_keys(&json, &["contrast", "on", "mean", "lower", "upper", "share_above_zero", "grid", "held_how"]);
    let fit = session.fit("m").expect("fitted");
    let (a, b, c) = (fit.draws.get("intercept").unwrap(), fit.draws.get("x slope").unwrap(), fit.draws.get("z slope").unwrap());
    let z = session.table("plots").unwrap().column("z").unwrap().data.as_reals().unwrap();
    let z_mean = z.iter().sum::<f64>() / z.len() as f64;
    // Algebra of the logit link with `centre off`: P(sick) = logistic(a + b·x + c·z).
    // The contrast pairs each draw's two predictions, then averages.
    let paired = |zv: f64| {
        (0..a.len()).map(|d| logistic(a[d] + b[d] + c[d] * zv) - logistic(a[d] + c[d] * zv)).sum::<f64>() / a.len() as f64
    };
    assert!((json["mean"].as_f64().unwrap() - paired(z_mean)).abs() < 1e-9, "{} vs {}", json["mean"], paired(z_mean));
    let grid = json["grid"].as_array().unwrap();
    assert_eq!(grid.len(), 5, "from -1 to 1 by 0.5 is five values");
    // the grid point at z = 0
    assert!((grid[2]["x"].as_f64().unwrap()).abs() < 1e-12);
    assert!((grid[2]["mean"].as_f64().unwrap() - paired(0.0)).abs() < 1e-9);
    // Summaries last: the "means first" number differs for a nonlinear link (Jensen's inequality).
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let means_first = logistic(mean(a) + mean(b) + mean(c) * z_mean) - logistic(mean(a) + mean(c) * z_mean);
    assert!((means_first - paired(z_mean)).abs() > 1e-6);
    let out = run(&mut session, "contrast m: x 1 vs 0 along z from -1 to 1 by 0.5");
    assert!(out.displays[0].svg.as_deref().unwrap_or("").contains("<title>contrast along a grid"));
    assert!(out.displays[0].plain.contains("90%"), "the interval width is printed");
    assert!(out.displays[0].plain.trim_end().ends_with("rest on the graph's assumptions."));
}

#[test]
fn contrast_on_outcomes_and_default_one_unit_contrast() {
    let mut session = field_session();
    last_json(&mut session, "model m:\n    y from x, z using field\nfit m with laplace seed 4");
    let json = last_json(&mut session, "contrast m: x");
    // Algebra: with an identity link the one-unit contrast of x is the slope, draw by draw.
    let slope = session.fit("m").unwrap().draws.get("x slope").unwrap().to_vec();
    let slope_mean = slope.iter().sum::<f64>() / slope.len() as f64;
    assert!((json["mean"].as_f64().unwrap() - slope_mean).abs() < 1e-9);
    let json = last_json(&mut session, "contrast m: x 1 vs 0 on outcomes seed 9");
    assert_eq!(json["on"], "outcomes");
    assert_eq!(json["seed"], 9);
    // Outcomes of two units differ by the slope plus two independent normal errors of sd 1,
    // so their spread is about sqrt(2) (mechanism algebra): the 90% interval is far wider than the slope's.
    let width = json["upper"].as_f64().unwrap() - json["lower"].as_f64().unwrap();
    assert!(width > 2.0 * 1.645 * 1.2 && width < 2.0 * 1.645 * 1.7, "width {width}");
}

#[test]
fn simulate_and_recover_cover_the_true_slope_and_effect() {
    let mut session = field_session();
    let json = last_json(&mut session, "model m:\n    y from x, z using field\nrecover m on field with laplace seed 2");
    has_keys(&json, &["model", "simulation", "parameters", "effects", "interval", "notes"]);
    let param = |name: &str| json["parameters"].as_array().unwrap().iter().find(|p| p["name"] == name).cloned().unwrap();
    let x_slope = param("x slope");
    // The mechanism's coefficient of x (algebra of a linear mechanism).
    assert!((x_slope["truth"].as_f64().unwrap() - 0.5).abs() < 1e-9);
    let (lo, hi) = (x_slope["lower"].as_f64().unwrap(), x_slope["upper"].as_f64().unwrap());
    assert!(lo <= 0.5 && 0.5 <= hi, "[{lo}, {hi}]");
    assert_eq!(x_slope["covered"], true);
    assert!((param("spread")["truth"].as_f64().unwrap() - 1.0).abs() < 1e-12, "the mechanism's sd");
    let effect = json["effects"].as_array().unwrap().iter().find(|e| e["variable"] == "x").cloned().unwrap();
    // Wright (1934) path tracing: do(x + 1) moves the mean of y by 0.5.
    assert!((effect["truth"].as_f64().unwrap() - TRUE_EFFECT).abs() < 1e-9);
    assert_eq!(effect["covered"], true);
    // Wright (1934): z acts on y directly (0.7) and through x (0.8 × 0.5), total 1.1; the model
    // holds x fixed, so its contrast of z is not compared with that truth.
    let z = json["effects"].as_array().unwrap().iter().find(|e| e["variable"] == "z").cloned().unwrap();
    assert!((z["truth"].as_f64().unwrap() - (0.7 + 0.8 * 0.5)).abs() < 1e-9);
    assert_eq!(z["covered"], Value::Null);
    assert_eq!(z["held_mediators"], serde_json::json!(["x"]));
    let out = run(&mut session, "recover m on field with laplace seed 2");
    assert!(out.displays[0].svg.as_deref().unwrap_or("").contains("<title>recovery"));
}

#[test]
fn ask_using_reports_the_set_it_adjusted_for_and_finds_the_effect() {
    let mut session = field_session();
    let json = last_json(&mut session, "ask total effect of x on y in g using field with laplace seed 8");
    has_keys(&json, &["query", "exposure", "outcome", "identifiable", "adjustment_sets", "reason", "adjustment_set", "model", "contrasts"]);
    // Backdoor criterion (Pearl 2009, §3.3): z is a common cause of x and y, so {z} is needed.
    assert_eq!(json["adjustment_set"], serde_json::json!(["z"]));
    let c = &json["contrasts"][0];
    has_keys(c, &["contrast", "on", "mean", "lower", "upper", "share_above_zero", "grid"]);
    let (lo, hi) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
    assert!(lo <= TRUE_EFFECT && TRUE_EFFECT <= hi, "Wright (1934) truth 0.5 outside [{lo}, {hi}]");
    // the built model stays in the session
    let name = json["model_name"].as_str().unwrap().to_string();
    assert!(session.fit(&name).is_some());

    // A hidden common cause with no observed proxy: not identifiable (Pearl 2009, §3.3), nothing fitted.
    let out = run(&mut session, "graph h:\n    x -> y\n    hidden u -> x, y\nask total effect of x on y in h using field with laplace");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays.last().unwrap().json.clone().unwrap();
    assert_eq!(json["identifiable"], false);
    assert_eq!(json["contrasts"], serde_json::json!([]));
    assert!(out.displays.last().unwrap().plain.contains("nothing was fitted"));
    // the plain `ask` without `using` still answers from the graph alone
    let out = run(&mut session, "ask total effect of x on y in g");
    assert_eq!(out.displays[0].json.as_ref().unwrap()["adjustment_sets"], serde_json::json!([["z"]]));
}

#[test]
fn joint_intervene_and_routes_agree_with_path_tracing() {
    let mut session = field_session();
    let json = last_json(&mut session, "joint whole = g using field\nfit whole with laplace seed 6");
    has_keys(&json, &["joint", "method", "seed", "nodes"]);
    let json = last_json(&mut session, "intervene whole: set x 1 vs 0, watch y rows 300 seed 2");
    has_keys(&json, &["joint", "intervention", "rows", "seed", "watched"]);
    let w = &json["watched"][0];
    has_keys(w, &["node", "mean", "lower", "upper", "share_above_zero"]);
    let (lo, hi) = (w["lower"].as_f64().unwrap(), w["upper"].as_f64().unwrap());
    // Wright (1934): the effect of setting x one unit higher on y is 0.5.
    assert!(lo <= TRUE_EFFECT && TRUE_EFFECT <= hi, "[{lo}, {hi}]");
    let json = last_json(&mut session, "compare routes for total effect of x on y in g using field with laplace seed 6");
    has_keys(&json, &["question", "adjustment", "joint", "difference", "notes"]);
    for route in ["adjustment", "joint"] {
        let (lo, hi) = (json[route]["lower"].as_f64().unwrap(), json[route]["upper"].as_f64().unwrap());
        assert!(lo <= TRUE_EFFECT && TRUE_EFFECT <= hi, "{route}: [{lo}, {hi}]");
    }
    // Both routes estimate one quantity, so their difference holds zero.
    assert!(json["difference"]["lower"].as_f64().unwrap() < 0.0 && json["difference"]["upper"].as_f64().unwrap() > 0.0);
}

#[test]
fn joint_override_lines_and_errors_name_their_cell_line() {
    let mut session = field_session();
    let json = last_json(&mut session, "joint whole = g using field:\n    y from x\n");
    let y = json["nodes"].as_array().unwrap().iter().find(|n| n["node"] == "y").cloned().unwrap();
    assert!(y["model"].as_str().unwrap().starts_with("y from x"), "{y}");
    let out = run(&mut session, "joint whole = g using field:\n    y from x\n    w from x\n");
    assert_eq!(out.error.unwrap().line, Some(3));
}

#[test]
fn a_bad_mechanism_line_is_named_by_its_cell_line() {
    let mut session = Session::new(".");
    let unclosed = "graph g:\n    a -> b\nsimulate s from g rows 10 seed 1:\n    a = normal(0, 1)\n    b = normal(2 * a, 1\n";
    let err = run(&mut session, unclosed).error.expect("an unclosed bracket is an error");
    assert_eq!(err.line, Some(5));
    let stranger = "graph g:\n    a -> b\n    c -> a\nsimulate s from g rows 10 seed 1:\n    a = normal(0, 1)\n    c = normal(0, 1)\n    b = normal(c, 1)\n";
    let err = run(&mut session, stranger).error.expect("a mechanism may read only its parents");
    assert_eq!(err.line, Some(7));
    assert!(err.describe().starts_with("cell line 7:"), "{}", err.describe());
    assert!(err.message.contains("not its parent"), "{}", err.message);
}

#[test]
fn checked_implications_flag_the_contradicted_one_first() {
    let mut session = field_session();
    // This graph leaves out z -> y, so it claims z ⫫ y | x; the mechanism of y reads z
    // with coefficient 0.7 (algebra), so the data contradict the claim.
    let out = run(&mut session, "graph wrong:\n    z -> x -> y\nimplications of wrong checked against field");
    assert!(out.error.is_none(), "{:?}", out.error);
    let d = out.displays.last().unwrap();
    let json = d.json.as_ref().unwrap();
    has_keys(json, &["graph", "table", "checks", "untestable", "checked", "contradicted"]);
    assert_eq!(json["contradicted"], 1);
    let second = d.plain.lines().nth(1).unwrap();
    assert!(second.starts_with("⚠ contradicted: z ⊥ y | x"), "{}", d.plain);
    assert!(d.svg.as_deref().unwrap_or("").contains("<title>testable implications"));
    // A pair separated only by a hidden node cannot be checked, and the output says so.
    let out = run(&mut session, "graph veiled:\n    z -> x\n    hidden u -> z, y\n    x -> y\nimplications of veiled checked against field");
    let d = out.displays.last().unwrap();
    assert!(d.plain.contains("not checkable") || d.plain.contains("not checked"), "{}", d.plain);
}

#[test]
fn calibration_and_predictive_checks_give_their_figures() {
    let mut session = field_session();
    last_json(&mut session, "model small:\n    y from x using field\nfit small with laplace seed 1");
    let json = last_json(&mut session, "calibrate small reps 30 seed 4 with laplace draws 400");
    has_keys(&json, &["model", "reps", "draws_per_fit", "bins", "parameters"]);
    for p in json["parameters"].as_array().unwrap() {
        assert_eq!(p["ranks"].as_array().unwrap().len(), 30);
        // 30 ranks in 10 bins expect 3 per bin, below the 5 Pearson's test needs
        // (Cochran 1954, recalled): the p-value is withheld, the ranks reported.
        assert!(p["p_value"].is_null(), "{p}");
    }
    let out = run(&mut session, "prior check small sets 50 seed 2\ncheck small");
    assert!(out.error.is_none(), "{:?}", out.error);
    let (prior, post) = (&out.displays[0], &out.displays[1]);
    assert!(prior.svg.as_deref().unwrap().contains("<title>prior predictive check"));
    assert!(post.svg.as_deref().unwrap().contains("<title>posterior predictive check"));
    let json = post.json.as_ref().unwrap();
    has_keys(json, &["model", "kind", "seed", "sets", "statistics"]);
    // A posterior predictive check of the mean under a normal model with an intercept sits
    // near one half, since the fit reproduces the sample mean (Gelman, Meng & Stern 1996, recalled).
    let share = json["statistics"][0]["share_at_or_above"].as_f64().unwrap();
    assert!(share > 0.1 && share < 0.9, "{share}");
}

/// Thirty invented rows of flower visits (trials) and fruit set (successes)
/// against warmth, made by arithmetic so the test needs no file.
fn flowers() -> waypath::table::Table {
    use waypath::table::{Column, ColumnData, Table};
    let warmth: Vec<f64> = (0..30).map(|i| ((i * 13 % 30) as f64 - 14.5) / 6.0).collect();
    let visits: Vec<u64> = (0..30).map(|i| 3 + (i * 5 % 8) as u64).collect();
    let set: Vec<u64> = visits.iter().enumerate().map(|(i, v)| (i as u64 * 3) % (v + 1)).collect();
    Table {
        name: "flowers".into(),
        columns: vec![
            Column::new("warmth", ColumnData::Real(warmth)),
            Column::new("visits", ColumnData::Count(visits)),
            Column::new("set", ColumnData::Count(set)),
        ],
    }
}

#[test]
fn calibrate_runs_on_a_binomial_fit_and_reports_pearsons_statistic() {
    let mut session = Session::new(".");
    session.put_table("flowers", flowers());
    last_json(&mut session, "model fs:\n    set from warmth using flowers\n    family binomial out of visits\nfit fs with laplace seed 1");
    let out = run(&mut session, "calibrate fs reps 40 seed 3");
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    let display = out.displays.last().unwrap();
    assert!(display.svg.as_deref().unwrap_or("").contains("<title>calibration: "), "a rank histogram is drawn");
    let json = display.json.clone().unwrap();
    has_keys(&json, &["model", "method", "seed", "reps", "failures", "draws_per_fit", "bins", "parameters", "notes"]);
    assert_eq!((json["reps"].as_u64(), json["failures"].as_u64()), (Some(40), Some(0)));
    let draws = json["draws_per_fit"].as_u64().unwrap() as usize;
    let bins = json["bins"].as_u64().unwrap() as usize;
    let names: Vec<&str> = json["parameters"].as_array().unwrap().iter().map(|p| p["name"].as_str().unwrap()).collect();
    assert_eq!(names, ["intercept", "warmth slope"]);
    for p in json["parameters"].as_array().unwrap() {
        let ranks: Vec<usize> = p["ranks"].as_array().unwrap().iter().map(|r| r.as_u64().unwrap() as usize).collect();
        assert_eq!(ranks.len(), 40);
        // Pearson (1900): Σ (O − E)² / E, each bin expecting its share of the draws + 1 rank values.
        let mut observed = vec![0.0; bins];
        let mut width = vec![0.0; bins];
        for r in &ranks {
            assert!(*r <= draws);
            observed[r * bins / (draws + 1)] += 1.0;
        }
        (0..=draws).for_each(|v| width[v * bins / (draws + 1)] += 1.0);
        let pearson: f64 = observed
            .iter()
            .zip(&width)
            .map(|(o, w)| {
                let e = 40.0 * w / (draws + 1) as f64;
                (o - e) * (o - e) / e
            })
            .sum();
        assert!((p["chi_square"].as_f64().unwrap() - pearson).abs() < 1e-9, "{p}");
    }
}

/// Saplings for the levels-family cells: soil (loam, sand, peat) and shade
/// set the growth form (herb, shrub, tree) through a softmax with herb as
/// the reference; the form sets the height.
const SHRUB: [f64; 4] = [-0.2, 1.2, -0.4, 1.5];
const TREE: [f64; 4] = [0.3, -1.2, 0.8, -2.0];

fn sapling_probabilities(soil: usize, shade: f64) -> [f64; 3] {
    let eta = |b: &[f64; 4]| b[0] + b[1] * f64::from(u8::from(soil == 1)) + b[2] * f64::from(u8::from(soil == 2)) + b[3] * shade;
    let e = [1.0, eta(&SHRUB).exp(), eta(&TREE).exp()];
    let total: f64 = e.iter().sum();
    [e[0] / total, e[1] / total, e[2] / total]
}

/// Write `saplings.csv` (seeded) into `dir`; returns each row's shade.
fn saplings_csv(dir: &std::path::Path, rows: usize) -> Vec<f64> {
    use rand::{RngExt, SeedableRng};
    use std::io::Write;
    let mut rng = rand::rngs::StdRng::seed_from_u64(17);
    let mut f = std::fs::File::create(dir.join("saplings.csv")).unwrap();
    writeln!(f, "soil,shade,form,height").unwrap();
    let mut shades = Vec::new();
    for _ in 0..rows {
        let soil = rng.random_range(0..3usize);
        let shade: f64 = rng.random_range(0.0..1.0);
        let p = sapling_probabilities(soil, shade);
        let u: f64 = rng.random();
        let form = if u < p[0] { 0 } else if u < p[0] + p[1] { 1 } else { 2 };
        let height = [10.0, 30.0, 90.0][form] + 4.0 * shade + 3.0 * (rng.random::<f64>() - 0.5);
        writeln!(f, "{},{shade:.4},{},{height:.2}", ["loam", "sand", "peat"][soil], ["herb", "shrub", "tree"][form]).unwrap();
        shades.push((shade * 1e4).round() / 1e4);
    }
    shades
}

const SAPLINGS: &str = "table saplings from \"saplings.csv\":
    soil: category(loam, sand, peat)
    form: category(herb, shrub, tree)
    height: real in cm
graph nursery:
    soil -> form
    shade -> form -> height
    shade -> height
";

/// A category node with parents is now modelled (levels family) instead of
/// being reported unsupported, NUTS fits it, and `intervene` gives one row
/// per level whose share changes agree with the g-formula truth written
/// out by hand from the softmax mechanism above (Robins 1986; recalled).
#[test]
fn joint_model_fits_a_category_node_with_parents_and_watches_its_levels() {
    let dir = std::env::temp_dir().join(format!("wp-cells-levels-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let shades = saplings_csv(&dir, 600);
    let mut session = Session::new(&dir);
    let json = last_json(&mut session, &format!("{SAPLINGS}joint whole = nursery using saplings"));
    let form = json["nodes"].as_array().unwrap().iter().find(|n| n["node"] == "form").cloned().unwrap();
    let text = form["model"].as_str().unwrap();
    assert!(text.contains("family levels") && !text.contains("not supported"), "{form}");

    let out = run(&mut session, "fit whole with nuts chains 2 settle 300 draws 300 seed 4");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.clone().unwrap();
    let form_figure = out.displays.iter().find(|d| d.plain.contains("node form:")).expect("a figure of node form");
    let fit_svg = form_figure.svg.clone().expect("a figure of node form");
    let form = json["nodes"].as_array().unwrap().iter().find(|n| n["node"] == "form").cloned().unwrap();
    let names: Vec<&str> = form["estimates"].as_array().unwrap().iter().map(|p| p["parameter"].as_str().unwrap()).collect();
    assert!(names.contains(&"form[shrub vs herb]: soil[sand]") && names.contains(&"form[tree vs herb]: shade slope[peat]"), "{names:?}");
    assert_eq!(names.len(), 12, "two levels after herb × (3 soil intercepts + 3 shade slopes)");
    // The figure names a levels coefficient as the fit's JSON does, once, not
    // prefixed by its node a second time.
    assert!(fit_svg.contains(">form[shrub vs herb]: soil[loam]<") && !fit_svg.contains("form: form["), "figure labels");
    // One figure per fitted node, each drawing every coefficient of its node.
    let figures: Vec<&str> = out.displays[1..].iter().map(|d| d.plain.as_str()).collect();
    assert!(figures.contains(&"whole, node form: posterior densities of its 12 coefficients"), "{figures:?}");
    let fitted = json["nodes"].as_array().unwrap().iter().filter(|n| !n["estimates"].as_array().unwrap().is_empty()).count();
    assert_eq!(figures.len(), fitted, "one figure per fitted node: {figures:?}");

    let out = run(&mut session, "intervene whole: set soil sand vs loam, watch form seed 2");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.clone().unwrap();
    let watched = json["watched"].as_array().unwrap();
    assert_eq!(watched.len(), 3);
    for (k, w) in watched.iter().enumerate() {
        assert_eq!(w["level"], ["herb", "shrub", "tree"][k]);
        let truth: f64 = shades.iter().map(|&z| sapling_probabilities(1, z)[k] - sapling_probabilities(0, z)[k]).sum::<f64>() / shades.len() as f64;
        let (mean, lo, hi) = (w["mean"].as_f64().unwrap(), w["lower"].as_f64().unwrap(), w["upper"].as_f64().unwrap());
        let sd = (hi - lo) / (2.0 * 1.645);
        assert!((mean - truth).abs() < 3.0 * sd, "level {k}: {mean} vs truth {truth} (sd {sd})");
    }
    assert!(out.displays[0].plain.contains("share of form = shrub"), "{}", out.displays[0].plain);

    // Watching a category and a number together: the figure stacks one panel per
    // watched value, each named with its own unit as declared in the table cell
    // above (`height: real in cm`), and the shared axis claims no single node.
    let out = run(&mut session, "intervene whole: set soil sand vs loam, watch form, height seed 2");
    let svg = out.displays[0].svg.clone().expect("an intervention figure");
    for panel in ["share of form = herb", "share of form = tree", "height (cm)"] {
        assert!(svg.contains(&format!(">{panel}<")), "panel {panel} missing");
    }
    assert!(!svg.contains("difference in mean share"), "the axis names the first panel only");

    // A model cell with a category outcome takes the levels family; its
    // contrasts compare each level's share, against the same g-formula truth.
    let json = last_json(&mut session, "model m:\n    form from soil, shade using saplings");
    assert_eq!(json["family"], "levels");
    let json = last_json(&mut session, "fit m with laplace seed 2\ncontrast m: soil sand vs loam over rows");
    let levels = json["levels"].as_array().expect("one contrast per level");
    assert_eq!(levels.len(), 3);
    let mut sum_of_means = 0.0;
    for (k, c) in levels.iter().enumerate() {
        assert_eq!(c["level"], ["herb", "shrub", "tree"][k]);
        assert!(c["unit"].is_null() && c["scale"].as_str().unwrap().starts_with("probability that form is"), "{c}");
        let truth: f64 = shades.iter().map(|&z| sapling_probabilities(1, z)[k] - sapling_probabilities(0, z)[k]).sum::<f64>() / shades.len() as f64;
        let (mean, lo, hi) = (c["mean"].as_f64().unwrap(), c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
        let sd = (hi - lo) / (2.0 * 1.645);
        assert!((mean - truth).abs() < 3.0 * sd, "level {k}: {mean} vs truth {truth} (sd {sd})");
        sum_of_means += mean;
    }
    assert!(sum_of_means.abs() < 1e-9, "the shares' changes sum to zero: {sum_of_means}");

    // `ask … using` answers a category outcome level by level too.
    let json = last_json(&mut session, "ask total effect of soil on form in nursery using saplings with laplace seed 2");
    let contrasts = json["contrasts"].as_array().unwrap();
    assert_eq!(contrasts.len(), 6, "two soils against loam × three forms");
    assert_eq!(contrasts[0]["level"], "herb");
    assert!(json["estimand"].as_str().unwrap().contains("each outcome level's probability"), "{json}");

    // Lines: one per level of the outcome, the band as the option says.
    let out = run(&mut session, "plot m lines over shade intervals 50%");
    assert!(out.error.is_none(), "{:?}", out.error.map(|e| e.describe()));
    let svg = out.displays[0].svg.clone().unwrap();
    for level in ["herb", "shrub", "tree", "band: 50% interval"] {
        assert!(svg.contains(&format!(">{level}<")), "{level} missing from the lines figure");
    }

    // Check: each level's observed row count (counted here from the CSV) against the simulated counts.
    let csv = std::fs::read_to_string(dir.join("saplings.csv")).unwrap();
    let json = last_json(&mut session, "check m sets 100 seed 3");
    for (k, form) in ["herb", "shrub", "tree"].iter().enumerate() {
        let counted = csv.lines().skip(1).filter(|l| l.split(',').nth(2) == Some(form)).count() as f64;
        let level = &json["levels"][k];
        assert_eq!((level["level"].as_str(), level["observed"].as_f64()), (Some(*form), Some(counted)), "{json}");
        let (lo, hi) = (level["lower"].as_f64().unwrap(), level["upper"].as_f64().unwrap());
        assert!(lo <= counted && counted <= hi, "{form}: {counted} outside [{lo}, {hi}]");
    }
}

#[test]
fn a_total_effect_the_graph_calls_zero_is_not_estimated_from_an_association() {
    // Graph r claims x has no effect on y (no directed path x -> … -> y);
    // z causes both. Pearl (2009, §3.3): the association of x and y given
    // nothing is confounded by z, so it is no estimate of the (zero) total
    // effect. By default nothing is fitted; `checking zero` fits `y from x, z`
    // (the backdoor set of the graph with x's edges removed). The field data
    // were simulated with x -> y of 0.5 (Wright 1934), which the check finds,
    // while the old unadjusted `y from x` gave 0.5 + 0.7·0.8/(0.64 + 1) ≈ 0.84.
    let mut session = field_session();
    let out = run(&mut session, "graph r:\n    z -> x\n    z -> y\nask total effect of x on y in r using field with laplace seed 3");
    assert!(out.error.is_none(), "{:?}", out.error);
    let d = out.displays.last().unwrap();
    let json = d.json.clone().unwrap();
    assert_eq!((json["zero_by_graph"].as_bool(), json["contrasts"].as_array().map(Vec::len)), (Some(true), Some(0)), "{json}");
    assert!(d.plain.contains("zero by the graph's assumptions, so nothing was fitted"), "{}", d.plain);
    let json = last_json(&mut session, "ask total effect of x on y in r using field checking zero with laplace seed 3");
    assert_eq!(json["model"], "y from x, z using field");
    let c = &json["contrasts"][0];
    let (lo, hi) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
    assert!((lo..=hi).contains(&TRUE_EFFECT) && hi < 0.75, "[{lo}, {hi}]");
    // Route comparison says the same zero rather than "no adjustment set".
    let json = last_json(&mut session, "compare routes for total effect of x on y in r using field with laplace seed 3");
    assert_eq!(json["zero_by_graph"].as_bool(), Some(true), "{json}");
    assert!(json["adjustment"].is_null(), "{json}");
}

/// A bernoulli outcome through a mediator: x -> m -> y and x -> y, with
/// y = bernoulli(logit = -0.5 + 1.0 x + 1.5 m).
const SHOOTS: &str = "graph s:
    x -> m -> y
    x -> y
simulate shoots from s rows 1500 seed 5:
    x = normal(0, 1)
    m = normal(0.6 * x, 1)
    y = bernoulli(logit = -0.5 + 1.0 * x + 1.5 * m)
";

#[test]
fn a_direct_effect_under_a_logit_link_names_its_estimand_and_holds_stated_mediators() {
    // With m set to 1 in every row and x set to x̄ + 1 vs x̄ in every row, the
    // controlled direct effect on the probability is
    // logistic(-0.5 + 1.0 (x̄ + 1) + 1.5) − logistic(-0.5 + 1.0 x̄ + 1.5)
    // (Pearl 2001's controlled direct effect, computed from the mechanism).
    let mut session = Session::new(".");
    last_json(&mut session, SHOOTS);
    let json = last_json(&mut session, "ask direct effect of x on y in s using shoots at m 1 with laplace seed 4");
    let estimand = json["estimand"].as_str().unwrap();
    assert!(estimand.starts_with("controlled direct effect with m = 1 set in every row"), "{estimand}");
    let x_mean = session.table("shoots").and_then(|t| t.column("x")).and_then(|c| c.data.as_reals()).map(|v| v.iter().sum::<f64>() / v.len() as f64).unwrap();
    let truth = logistic(-0.5 + (x_mean + 1.0) + 1.5) - logistic(-0.5 + x_mean + 1.5);
    let c = &json["contrasts"][0];
    let (lo, hi) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
    assert!(lo <= truth && truth <= hi, "truth {truth} outside [{lo}, {hi}]");
    assert!(c["scale"].as_str().unwrap().starts_with("probability that y is yes"), "{c}");
    // Without `at`, the over-rows contrast holds m at each row's own value:
    // the output must not call that the controlled direct effect.
    let json = last_json(&mut session, "ask direct effect of x on y in s using shoots with laplace seed 4");
    let estimand = json["estimand"].as_str().unwrap();
    assert!(estimand.starts_with("average of controlled direct effects") && estimand.contains("logit"), "{estimand}");
}

#[test]
fn a_yes_no_outcome_is_drawn_as_a_difference_in_probability() {
    // The mean of a 0/1 outcome is the probability of yes, so a figure of its
    // differences must not call it a "mean".
    let mut session = Session::new(".");
    last_json(&mut session, SHOOTS);
    let out = run(&mut session, "compare routes for total effect of x on y in s using shoots with laplace seed 4");
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    let svgs: Vec<&String> = out.displays.iter().filter_map(|d| d.svg.as_ref()).collect();
    assert!(!svgs.is_empty(), "compare routes draws a figure");
    assert!(svgs.iter().any(|s| s.contains("difference in the probability that y is yes")), "no probability axis");
    assert!(svgs.iter().all(|s| !s.contains("difference in mean y")));
}

/// `ask … using T pooling C`: the model pools the clusters of C, and the
/// contrast (over the rows) says it averages over the observed clusters.
/// The sites shift y by up to 1.5 but do not touch x, so the total effect
/// of x on y is still 0.5 by path tracing (Wright 1934).
#[test]
fn ask_using_pools_the_named_cluster_column() {
    let mut session = Session::new(".");
    last_json(
        &mut session,
        "graph g:
    z -> x -> y
    z -> y
    site -> y
simulate field from g rows 400 seed 5:
    z = normal(0, 1)
    site = category(s1 0.2, s2 0.2, s3 0.2, s4 0.2, s5 0.2)
    x = normal(0.8 * z, 1)
    y = normal(1 + 0.5 * x + 0.7 * z + 1.5 * [site = s2] - 1 * [site = s4], 1)
",
    );
    let json = last_json(
        &mut session,
        "ask total effect of x on y in g using field pooling site with nuts chains 2 settle 300 draws 400 seed 3",
    );
    let text = json["model"].as_str().expect("model text");
    assert!(text.starts_with("y from x, z, pooled site using field"), "{text}");
    let c = &json["contrasts"][0];
    let (lower, upper) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
    assert!(lower < TRUE_EFFECT && TRUE_EFFECT < upper, "{c}");
    let notes = c["notes"].as_array().expect("notes");
    assert!(notes.iter().any(|n| n.as_str().unwrap().contains("averaged over the observed site levels")), "{notes:?}");
    let refused = run(&mut session, "ask total effect of x on y in g using field pooling x");
    let message = refused.error.map(|e| e.describe()).unwrap_or_default();
    assert!(message.contains("cannot also be pooled"), "{message}");
}
