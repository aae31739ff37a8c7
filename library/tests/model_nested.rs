//! Nested pooled groups (`pooled plot within site`): plots labelled per
//! site (`p1` again in every site) are pooled as pairs of labels. Checked
//! here: the levels and rows against the test's own counts of pairs, the
//! closed-form posterior of normal–normal hierarchical models (one nested
//! group; a site group with plots nested in it), contrasts for an existing
//! plot of a site, and the errors a cell can meet.

mod model_fixtures;

use std::collections::BTreeMap;
use std::sync::atomic::AtomicBool;

use model_fixtures::{build, build_error, category, column, orchard};
use nalgebra::{DMatrix, DVector};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::infer::fit::{fit_model, Method};
use waypath::table::{ColumnData, Table};

const SITES: [&str; 4] = ["A", "B", "C", "D"];
const PLOTS: [&str; 3] = ["p1", "p2", "p3"];

/// The orchard with a `site` (A–D) and a `plot` (p1–p3, labels repeated in
/// every site); site D has no plot p3.
fn orchard_with_sites(n: usize, seed: u64) -> Table {
    let mut table = orchard(n, seed);
    let mut rng = StdRng::seed_from_u64(seed + 7);
    let mut sites = Vec::with_capacity(n);
    let mut plots = Vec::with_capacity(n);
    for _ in 0..n {
        let s = rng.random_range(0..4u32);
        let p = rng.random_range(0..if s == 3 { 2u32 } else { 3 });
        sites.push(s);
        plots.push(p);
    }
    table.columns.push(column("site", category(sites, &SITES)));
    table.columns.push(column("plot", category(plots, &PLOTS)));
    table
}

fn category_codes(table: &Table, name: &str) -> Vec<u32> {
    match &table.column(name).expect("column").data {
        ColumnData::Category { codes, .. } => codes.clone(),
        _ => panic!("{name} is not a category"),
    }
}

#[test]
fn nested_levels_are_the_pairs_of_labels_the_rows_hold() {
    let table = orchard_with_sites(200, 3);
    let model = build("yield from girth, pooled plot within site using trees", &table);
    let (sites, plots) = (category_codes(&table, "site"), category_codes(&table, "plot"));
    // The test's own count of rows per (site, plot) pair, in site then plot order.
    let mut counted: BTreeMap<(u32, u32), usize> = BTreeMap::new();
    for (s, p) in sites.iter().zip(&plots) {
        *counted.entry((*s, *p)).or_insert(0) += 1;
    }
    assert_eq!(counted.len(), 11, "four sites of three plots, site D without p3");
    let group = &model.pooled_groups()[0];
    let want: Vec<String> = counted.keys().map(|&(s, p)| format!("{} in {}", PLOTS[p as usize], SITES[s as usize])).collect();
    assert_eq!(group.levels, want);
    assert_eq!(group.rows_per_level, counted.values().copied().collect::<Vec<_>>());
    let names = model.parameter_names();
    let first = model.first_group_index();
    assert_eq!(names[first], "plot spread");
    assert_eq!(names[first + 1], "plot departure[p1 in A]");
    assert!(!names.iter().any(|n| n.contains("p3 in D")), "a pair the rows lack has no departure");
    let note = model.notes().iter().find(|n| n.starts_with("pooled plot within site")).expect("a note on the group");
    assert!(note.contains("11 levels") && note.contains("pair"), "{note}");
    // Every fitted row falls in its own pair.
    let rows = model.fitted_rows();
    for (i, level) in rows.groups[0].iter().enumerate() {
        let (s, p) = (sites[i] as usize, plots[i] as usize);
        assert_eq!(group.levels[level.expect("a fitted pair")], format!("{} in {}", PLOTS[p], SITES[s]));
    }
}

#[test]
fn bad_nested_cells_are_refused_with_the_place_named() {
    let table = orchard_with_sites(120, 1);
    let itself = build_error("yield from girth, pooled plot within plot using trees", &table);
    assert!(itself.contains("plot") && itself.contains("itself"), "{itself}");
    let real = build_error("yield from rootstock, pooled plot within girth using trees", &table);
    assert!(real.contains("girth") && real.contains("category"), "{real}");
    let outcome = build_error("yield from girth, pooled plot within yield using trees", &table);
    assert!(outcome.contains("yield") && outcome.contains("outcome"), "{outcome}");
    let missing = build_error("yield from girth, pooled plot within farm using trees", &table);
    assert!(missing.contains("farm"), "{missing}");
    let twice = build_error("yield from girth, pooled plot, pooled plot within site using trees", &table);
    assert!(twice.contains("plot"), "{twice}");
    let stray = build_error("yield from girth, pooled plot within site using trees\nparameterise site centred", &table);
    assert!(stray.contains("site") && stray.contains("not a pooled group"), "{stray}");
}

/// Rows of a normal outcome in pairs of (site, plot), with plot labels
/// repeated across sites, and the codes of both.
struct NestedRows {
    y: Vec<f64>,
    site: Vec<u32>,
    plot: Vec<u32>,
}

/// `sizes[s][p]` rows in plot `p` of site `s` (0 for a pair not present),
/// `y = mu + site departure + plot departure + noise`.
fn nested_rows(sizes: &[[usize; 3]], mu: f64, tau: f64, sigma: f64, seed: u64) -> NestedRows {
    let mut rng = StdRng::seed_from_u64(seed);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let mut rows = NestedRows { y: Vec::new(), site: Vec::new(), plot: Vec::new() };
    for (s, plots) in sizes.iter().enumerate() {
        let a = tau * unit.sample(&mut rng);
        for (p, &n) in plots.iter().enumerate() {
            let b = tau * unit.sample(&mut rng);
            for _ in 0..n {
                rows.y.push(mu + a + b + sigma * unit.sample(&mut rng));
                rows.site.push(s as u32);
                rows.plot.push(p as u32);
            }
        }
    }
    rows
}

fn nested_table(rows: &NestedRows) -> Table {
    Table {
        name: "t".into(),
        columns: vec![
            column("y", ColumnData::Real(rows.y.clone())),
            column("site", category(rows.site.clone(), &SITES)),
            column("plot", category(rows.plot.clone(), &PLOTS)),
        ],
    }
}

const SIZES: [[usize; 3]; 4] = [[2, 9, 4], [15, 3, 6], [1, 5, 25], [7, 12, 0]];

fn laplace_draws(body: &str, table: &Table) -> waypath::draws::Draws {
    let model = build(body, table);
    fit_model(&model, &Method::Laplace { draws: 40_000, seed: 9 }, &AtomicBool::new(false), &|_| {})
        .expect("Laplace fit")
        .draws
}

fn mean_and_sd(values: &[f64]) -> (f64, f64) {
    let m = values.iter().sum::<f64>() / values.len() as f64;
    let s = (values.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (values.len() - 1) as f64).sqrt();
    (m, s)
}

/// Pinned spreads: lognormal priors of log-sd 0.0005 at `sigma` and `tau`,
/// and an intercept prior flat against the data.
fn pinned(sigma: f64, tau: f64) -> String {
    format!(
        "prior intercepts: normal(0, 1000)\nprior spread: lognormal({}, 0.0005)\nprior pooled spreads: lognormal({}, 0.0005)",
        sigma.ln(),
        tau.ln()
    )
}

/// One nested group alone is a normal–normal hierarchical model whose
/// groups are the (site, plot) pairs: Gelman et al., Bayesian Data
/// Analysis, 3rd ed., §5.4 (recalled), the formulas as in
/// `model_pooled.rs`: `E θⱼ = Vⱼ(ȳⱼ/σⱼ² + μ̂/τ²)`, `var θⱼ = Vⱼ + (Vⱼ/τ²)²·V_μ`.
/// The pairs and their means are taken here from the codes; a model that
/// pooled the plot labels alone (three groups) would miss by far.
#[test]
fn a_nested_group_matches_the_normal_normal_closed_form_over_pairs() {
    let (sigma, tau) = (2.0_f64, 1.5_f64);
    let rows = nested_rows(&SIZES, 10.0, tau, sigma, 41);
    let table = nested_table(&rows);
    let mut pairs: BTreeMap<(u32, u32), Vec<f64>> = BTreeMap::new();
    for i in 0..rows.y.len() {
        pairs.entry((rows.site[i], rows.plot[i])).or_default().push(rows.y[i]);
    }
    let means: Vec<f64> = pairs.values().map(|v| v.iter().sum::<f64>() / v.len() as f64).collect();
    let noise: Vec<f64> = pairs.values().map(|v| sigma * sigma / v.len() as f64).collect();
    let weights: Vec<f64> = noise.iter().map(|s| 1.0 / (s + tau * tau)).collect();
    let v_mu = 1.0 / weights.iter().sum::<f64>();
    let mu_hat = v_mu * means.iter().zip(&weights).map(|(m, w)| m * w).sum::<f64>();
    for layout in ["centred", "noncentred"] {
        let body = format!("y from pooled plot within site using t\n{}\nparameterise plot {layout}", pinned(sigma, tau));
        let draws = laplace_draws(&body, &table);
        let intercept = draws.get("intercept").expect("intercept draws");
        for (j, &(s, p)) in pairs.keys().enumerate() {
            let v = 1.0 / (1.0 / noise[j] + 1.0 / (tau * tau));
            let want = v * (means[j] / noise[j] + mu_hat / (tau * tau));
            let want_sd = (v + (v / (tau * tau)).powi(2) * v_mu).sqrt();
            let label = format!("plot departure[{} in {}]", PLOTS[p as usize], SITES[s as usize]);
            let departure = draws.get(&label).unwrap_or_else(|| panic!("{label}"));
            let theta: Vec<f64> = intercept.iter().zip(departure).map(|(a, b)| a + b).collect();
            let (m, sd) = mean_and_sd(&theta);
            assert!((m - want).abs() < 0.03 * want_sd, "{layout} {label}: mean {m} vs closed form {want} (sd {want_sd})");
            assert!((sd / want_sd - 1.0).abs() < 0.03, "{layout} {label}: sd {sd} vs closed form {want_sd}");
        }
    }
}

/// Sites with plots nested in them, `y = μ + aₛ + b₍ₛ,ₚ₎ + e`, all
/// variances known, `μ` with a `normal(0, 1000)` prior: a linear model with
/// normal priors, whose posterior is normal with precision
/// `H = XᵀX/σ² + diag(prior precisions)` and mean `H⁻¹Xᵀy/σ²`, X the
/// columns of the intercept, the site indicators and the pair indicators
/// (Lindley & Smith 1972, JRSS B 34, 1–41, the known-variance case;
/// recalled — Henderson's mixed-model equations are the same system).
/// Solved here with nalgebra from the test's own indicator columns.
#[test]
fn sites_with_nested_plots_match_the_known_variance_posterior() {
    let (sigma, tau) = (1.5_f64, 1.2_f64);
    let rows = nested_rows(&SIZES, 4.0, tau, sigma, 42);
    let table = nested_table(&rows);
    let pairs: Vec<(u32, u32)> = {
        let mut seen: Vec<(u32, u32)> = rows.site.iter().copied().zip(rows.plot.iter().copied()).collect();
        seen.sort_unstable();
        seen.dedup();
        seen
    };
    let width = 1 + SITES.len() + pairs.len();
    let n = rows.y.len();
    let mut x = DMatrix::<f64>::zeros(n, width);
    for i in 0..n {
        x[(i, 0)] = 1.0;
        x[(i, 1 + rows.site[i] as usize)] = 1.0;
        let k = pairs.iter().position(|&q| q == (rows.site[i], rows.plot[i])).expect("pair");
        x[(i, 1 + SITES.len() + k)] = 1.0;
    }
    let mut precision = x.transpose() * &x / (sigma * sigma);
    precision[(0, 0)] += 1.0 / (1000.0 * 1000.0);
    for j in 1..width {
        precision[(j, j)] += 1.0 / (tau * tau);
    }
    let covariance = precision.clone().try_inverse().expect("invertible");
    let mean = &covariance * (x.transpose() * DVector::from_vec(rows.y.clone())) / (sigma * sigma);
    let mut labels = vec!["intercept".to_string()];
    labels.extend(SITES.iter().map(|s| format!("site departure[{s}]")));
    labels.extend(pairs.iter().map(|&(s, p)| format!("plot departure[{} in {}]", PLOTS[p as usize], SITES[s as usize])));
    for layout in ["centred", "noncentred"] {
        let body = format!(
            "y from pooled site, pooled plot within site using t\n{}\nparameterise site {layout}\nparameterise plot {layout}",
            pinned(sigma, tau)
        );
        let draws = laplace_draws(&body, &table);
        for (j, label) in labels.iter().enumerate() {
            let (m, sd) = mean_and_sd(draws.get(label).unwrap_or_else(|| panic!("{label}")));
            let (want, want_sd) = (mean[j], covariance[(j, j)].sqrt());
            assert!((m - want).abs() < 0.03 * want_sd, "{layout} {label}: mean {m} vs {want} (sd {want_sd})");
            assert!((sd / want_sd - 1.0).abs() < 0.03, "{layout} {label}: sd {sd} vs {want_sd}");
        }
    }
}

/// A contrast for an existing plot of a site, at one parameter point
/// repeated as every draw (bernoulli, logit link; one intercept per
/// rootstock): `logistic(β₁ + aₛ + b₍ₛ,ₚ₎) − logistic(β₀ + aₛ + b₍ₛ,ₚ₎)`, the model's own definition of the
/// mean; the plot must be named with its site, and a pair the rows lack is
/// refused.
#[test]
fn contrasts_for_an_existing_plot_of_a_site() {
    use waypath::draws::Draws;
    use waypath::query::{contrast, ContrastRequest};
    let table = orchard_with_sites(200, 2);
    let model = build("healthy from rootstock, pooled site, pooled plot within site using trees\nfamily bernoulli", &table);
    let names = model.parameter_names();
    let value = |name: &str| -> f64 {
        match name {
            "rootstock[dwarf]" => -0.4,
            "rootstock[standard]" => 1.1,
            "site spread" | "plot spread" => 1.0,
            "site departure[B]" => 0.8,
            "plot departure[p2 in B]" => -1.3,
            "plot departure[p2 in C]" => 0.9,
            _ => 0.05,
        }
    };
    assert!(names.contains(&"rootstock[standard]".to_string()), "{names:?}");
    let point: Vec<f64> = names.iter().map(|n| value(n)).collect();
    let draws = Draws::from_chains(names.clone(), vec![vec![point; 200]]).expect("draws");
    let logistic = |x: f64| 1.0 / (1.0 + (-x).exp());
    let at = |held: &[(&str, &str)]| ContrastRequest {
        held: held.iter().map(|(a, b)| (a.to_string(), b.to_string())).collect(),
        ..ContrastRequest::new("rootstock")
    };
    let c = contrast(&model, &draws, &table, &at(&[("site", "B"), ("plot", "p2")])).expect("contrast");
    let shift = 0.8 - 1.3;
    let want = logistic(1.1 + shift) - logistic(-0.4 + shift);
    assert!((c.mean - want).abs() < 1e-12, "existing plot: {} vs {want}", c.mean);
    assert!(c.notes.iter().any(|n| n.contains("existing plot p2 of site B")), "{:?}", c.notes);
    let alone = contrast(&model, &draws, &table, &at(&[("plot", "p2")])).expect_err("a plot without its site");
    assert!(alone.to_string().contains("at site <level>, plot p2"), "{alone}");
    let absent = contrast(&model, &draws, &table, &at(&[("site", "D"), ("plot", "p3")])).expect_err("no such pair");
    assert!(absent.to_string().contains("p3 in site D"), "{absent}");
    // A new plot in an existing site: the site's departure, the plot's drawn.
    let c = contrast(&model, &draws, &table, &at(&[("site", "B")])).expect("contrast");
    assert!(c.notes.iter().any(|n| n.contains("pooled plot within site: for a new plot")), "{:?}", c.notes);
}

/// The shrinkage of a category outcome's nested group, one per outcome
/// level after the reference, at one parameter point repeated as every
/// draw. Expected from the README's definitions, computed here from the
/// table: a pair's pooled value is the level's intercept, plus its girth
/// slope times the pair's mean girth less the table's (the model centres
/// girth), plus the pair's departure; the population's drops the
/// departure; the raw value is the log of the pair's share of the outcome
/// level over its share of the reference level (loam).
#[test]
fn a_category_outcome_has_one_shrinkage_per_outcome_level() {
    use waypath::draws::Draws;
    use waypath::query::{level_shrinkages, shrinkage};
    let table = orchard_with_sites(300, 4);
    let model = build("soil from girth, pooled plot within site using trees\nfamily levels", &table);
    let names = model.parameter_names();
    let (sites, plots, soil) = (category_codes(&table, "site"), category_codes(&table, "plot"), category_codes(&table, "soil"));
    let girth = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth");
    let girth_mean = girth.iter().sum::<f64>() / girth.len() as f64;
    // Values by outcome level (sandy, clay): intercept, girth slope, and a departure per pair.
    let departure = |k: usize, s: u32, p: u32| 0.3 * (k as f64 + 1.0) * ((s * 3 + p) as f64 - 5.0) / 5.0;
    let value = |name: &str| -> f64 {
        let k = if name.starts_with("soil[sandy vs loam]") { 0 } else { 1 };
        let tail = name.split(": ").nth(1).expect("a prefixed label");
        match tail {
            "intercept" => [0.4, -0.7][k],
            "girth slope" => [0.05, -0.08][k],
            "plot spread" => 1.0,
            other => {
                let pair = other.strip_prefix("plot departure[").and_then(|r| r.strip_suffix(']')).expect(other);
                let (p, s) = pair.split_once(" in ").expect("plot in site");
                let s = SITES.iter().position(|x| *x == s).expect("site") as u32;
                let p = PLOTS.iter().position(|x| *x == p).expect("plot") as u32;
                departure(k, s, p)
            }
        }
    };
    let point: Vec<f64> = names.iter().map(|n| value(n)).collect();
    let draws = Draws::from_chains(names.clone(), vec![vec![point; 50]]).expect("draws");
    let refused = shrinkage(&model, &draws, "plot", 0.9).expect_err("one scale is refused");
    assert!(refused.to_string().contains("sandy, clay"), "{refused}");
    let results = level_shrinkages(&model, &draws, "plot", 0.9).expect("shrinkages");
    assert_eq!(results.len(), 2);
    for (k, result) in results.iter().enumerate() {
        assert_eq!(result.outcome_level.as_deref(), Some(["sandy", "clay"][k]));
        let (intercept, slope) = ([0.4, -0.7][k], [0.05, -0.08][k]);
        assert!((result.population[0] - intercept).abs() < 1e-9, "{}: population {:?}", k, result.population);
        for level in &result.levels {
            let (p, s) = level.level.split_once(" in ").expect("plot in site");
            let (s, p) = (SITES.iter().position(|x| *x == s).unwrap() as u32, PLOTS.iter().position(|x| *x == p).unwrap() as u32);
            let rows: Vec<usize> = (0..sites.len()).filter(|&i| sites[i] == s && plots[i] == p).collect();
            let mean_girth = rows.iter().map(|&i| girth[i]).sum::<f64>() / rows.len() as f64;
            let want = intercept + slope * (mean_girth - girth_mean) + departure(k, s, p);
            assert_eq!(level.rows, rows.len(), "{}", level.level);
            assert!((level.mean - want).abs() < 1e-9, "{} {}: {} vs {want}", k, level.level, level.mean);
            let share = |code: u32| (rows.iter().filter(|&&i| soil[i] == code).count() as f64 / rows.len() as f64).max(0.001);
            let raw = (share(k as u32 + 1) / share(0)).ln();
            assert!((level.raw.expect("rows") - raw).abs() < 1e-9, "{} {}: raw {:?} vs {raw}", k, level.level, level.raw);
        }
    }
}

/// A joint model's node model with a nested group: its outer column is
/// checked against the graph like the inner one, and `intervene … in plot
/// p1` is refused (the label names one plot per site) while `in new plot`
/// answers.
#[test]
fn joint_models_check_and_refuse_what_a_nested_group_cannot_mean() {
    use waypath::graph::GraphBuilder;
    use waypath::infer::nuts::NutsSettings;
    use waypath::query::{build_joint, fit_joint, intervene, GroupQuestion, InterventionRequest};
    let table = orchard_with_sites(160, 5);
    let graph = |lines: &[&str]| {
        let mut b = GraphBuilder::new("g");
        for l in lines {
            b.add_line(l).expect("graph line");
        }
        b.finish().expect("graph")
    };
    let nested = vec![("yield".to_string(), vec!["yield from girth, pooled plot within site".to_string()])];
    let site_elsewhere = graph(&["girth -> yield", "site -> girth"]);
    let e = build_joint("j", &site_elsewhere, &table, &nested).expect_err("site is a node but no parent of yield").to_string();
    assert!(e.contains("site") && e.contains("not a parent of yield"), "{e}");
    let g = graph(&["girth -> yield"]);
    let joint = build_joint("j", &g, &table, &nested).expect("joint");
    let method = Method::Nuts(NutsSettings { chains: 1, settle: 150, draws: 100, seed: 3, threads: 1, ..Default::default() });
    let fit = fit_joint(&joint, &method, &AtomicBool::new(false)).expect("fit");
    let request = |groups: GroupQuestion| InterventionRequest {
        variable: "girth".into(),
        to: "30".into(),
        from: "20".into(),
        watch: vec!["yield".into()],
        rows: None,
        seed: 5,
        mass: 0.9,
        groups,
    };
    let e = intervene(&joint, &fit, &table, &request(GroupQuestion::Existing { column: "plot".into(), level: "p1".into() }))
        .expect_err("a plot label without its site");
    assert!(e.to_string().contains("nested within site") && e.to_string().contains("in new plot"), "{e}");
    let new = intervene(&joint, &fit, &table, &request(GroupQuestion::New { column: "plot".into() })).expect("a new plot");
    assert!(new.pooled.iter().any(|n| n.contains("one new plot")), "{:?}", new.pooled);
}

fn nested_simulation(y: &str, rows: usize, seed: u64) -> waypath::query::Simulation {
    use waypath::graph::GraphBuilder;
    use waypath::query::{Simulation, SimulationSettings};
    let mut b = GraphBuilder::new("g");
    for l in ["site -> y", "plot -> y", "x -> y"] {
        b.add_line(l).expect("graph line");
    }
    let g = b.finish().expect("graph");
    let body = [
        "site = category(s1 0.125, s2 0.125, s3 0.125, s4 0.125, s5 0.125, s6 0.125, s7 0.125, s8 0.125)".to_string(),
        "plot = category(p1 0.3, p2 0.3, p3 0.4)".to_string(),
        "x = normal(1, 1)".to_string(),
        y.to_string(),
    ];
    Simulation::parse("fake", &g, SimulationSettings { rows, seed }, body.iter().enumerate().map(|(i, l)| (i + 2, l.as_str())))
        .expect("mechanisms")
}

/// `departure(plot within site, 0.6)` in a simulation draws one departure
/// per (site, plot) pair: on a noiseless outcome the rows of a pair agree
/// and plot p1 differs between sites. `recover` of `pooled site, pooled
/// plot within site` sets beside the model's pairs the drawn departures,
/// read here off the noiseless twin (same seed, the nested departure first
/// in both, so drawn from the same stream), and the stated spread.
#[test]
fn simulated_nested_departures_are_drawn_per_pair_and_recovered() {
    use waypath::infer::nuts::NutsSettings;
    use waypath::model::ModelSpec;
    use waypath::query::recover;
    let twin = nested_simulation("y = normal(3 + departure(plot within site, 0.6), 0.000000001)", 2_000, 17);
    let table = twin.table().expect("table");
    let (sites, plots) = (category_codes(&table, "site"), category_codes(&table, "plot"));
    let y = table.column("y").and_then(|c| c.data.as_reals()).expect("y");
    let mut pairs: BTreeMap<(u32, u32), f64> = BTreeMap::new();
    for i in 0..y.len() {
        let seen = *pairs.entry((sites[i], plots[i])).or_insert(y[i] - 3.0);
        assert!((seen - (y[i] - 3.0)).abs() < 1e-6, "rows of one pair share its departure");
    }
    assert_eq!(pairs.len(), 24);
    assert!((pairs[&(0, 0)] - pairs[&(1, 0)]).abs() > 1e-6, "p1 of s1 is not p1 of s2");

    let sim = nested_simulation("y = normal(3 + departure(plot within site, 0.6) + departure(site, 1), 0.5)", 2_000, 17);
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 300, draws: 300, seed: 4, ..NutsSettings::default() });
    let spec = ModelSpec::from_lines("m", vec![(2, "y from pooled site, pooled plot within site using fake")]).expect("spec");
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}"));
    assert_eq!(by_name("plot spread").truth, Some(0.6));
    assert_eq!(by_name("site spread").truth, Some(1.0));
    let levels = ["s1", "s2", "s3", "s4", "s5", "s6", "s7", "s8"];
    let labels = ["p1", "p2", "p3"];
    for (&(s, p), &value) in &pairs {
        let name = format!("plot departure[{} in {}]", labels[p as usize], levels[s as usize]);
        let truth = by_name(&name).truth.expect("a truth");
        assert!((truth - value).abs() < 1e-6, "{name}: {truth} vs the twin's {value}");
    }
}

#[test]
fn bad_nested_departures_are_refused_with_the_line_named() {
    use waypath::graph::GraphBuilder;
    use waypath::query::{QueryError, Simulation, SimulationSettings};
    let mut b = GraphBuilder::new("g");
    for l in ["site -> y", "plot -> y", "x -> y"] {
        b.add_line(l).expect("graph line");
    }
    let g = b.finish().expect("graph");
    for (line, words) in [
        ("y = normal(departure(plot within plot, 1), 1)", "nested within itself"),
        ("y = normal(departure(plot within ghost, 1), 1)", "ghost"),
        ("y = normal(departure(plot within x, 1), 1)", "x"),
        ("y = normal(departure(plot within site, 1) + departure(plot within site, 2), 1)", "twice"),
    ] {
        let body = ["site = category(a 0.5, b 0.5)", "plot = category(p1 0.5, p2 0.5)", "x = normal(0, 1)", line];
        match Simulation::parse("fake", &g, SimulationSettings { rows: 10, seed: 1 }, body.iter().enumerate().map(|(i, l)| (i + 2, *l))) {
            Err(QueryError::Mechanism { line: at, message }) => {
                assert_eq!(at, 5, "{line}");
                assert!(message.contains(words), "{line}: {message}");
            }
            other => panic!("{line} should be refused, got {:?}", other.map(|_| ())),
        }
    }
}

/// A nested group's slope: `departure(plot within site, 0.3, x)` beside
/// the pairs' intercept departures. Each pair's two departures are solved
/// here from two rows of the noiseless twin (`y = 3 + 0.5·x + a + b·x`),
/// and `recover` of `pooled plot within site with x` (centring off, so the
/// model's departures are the mechanism's) must set them as the truths.
#[test]
fn recover_sets_a_nested_groups_slope_departures() {
    use waypath::infer::nuts::NutsSettings;
    use waypath::model::ModelSpec;
    use waypath::query::recover;
    let mechanism = |sd: &str| format!("y = normal(3 + 0.5 * x + departure(plot within site, 0.6) + departure(plot within site, 0.3, x), {sd})");
    let twin = nested_simulation(&mechanism("0.000000001"), 2_000, 23).table().expect("table");
    let (sites, plots) = (category_codes(&twin, "site"), category_codes(&twin, "plot"));
    let (x, y) = (twin.column("x").and_then(|c| c.data.as_reals()).expect("x"), twin.column("y").and_then(|c| c.data.as_reals()).expect("y"));
    let mut rows: BTreeMap<(u32, u32), Vec<usize>> = BTreeMap::new();
    for i in 0..y.len() {
        rows.entry((sites[i], plots[i])).or_default().push(i);
    }
    let sim = nested_simulation(&mechanism("0.5"), 2_000, 23);
    let method = Method::Nuts(NutsSettings { chains: 2, settle: 300, draws: 300, seed: 6, ..NutsSettings::default() });
    let spec = ModelSpec::from_lines("m", vec![(2, "y from x, pooled plot within site with x using fake"), (3, "centre off")]).expect("spec");
    let r = recover(&spec, &sim, &method, &AtomicBool::new(false), 0.9).expect("recover");
    let by_name = |name: &str| r.parameters.iter().find(|p| p.name == name).unwrap_or_else(|| panic!("no {name}"));
    assert_eq!(by_name("plot x spread").truth, Some(0.3));
    let levels = ["s1", "s2", "s3", "s4", "s5", "s6", "s7", "s8"];
    let labels = ["p1", "p2", "p3"];
    for (&(s, p), at) in &rows {
        let (i, j) = (at[0], at[1]);
        let b = (y[i] - y[j]) / (x[i] - x[j]) - 0.5;
        let a = y[i] - 3.0 - (0.5 + b) * x[i];
        let pair = format!("{} in {}", labels[p as usize], levels[s as usize]);
        let truth_a = by_name(&format!("plot departure[{pair}]")).truth.expect("a truth");
        let truth_b = by_name(&format!("plot x departure[{pair}]")).truth.expect("a truth");
        assert!((truth_a - a).abs() < 1e-6 && (truth_b - b).abs() < 1e-6, "{pair}: ({truth_a}, {truth_b}) vs ({a}, {b})");
    }
}
