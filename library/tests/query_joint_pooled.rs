//! Joint models whose node models pool a cluster column, and the three
//! questions a simulated intervention through them answers: the rows'
//! own clusters, one existing cluster, a new cluster.
//!
//! A linear-Gaussian chain cover → litter → insects with cover → insects,
//! litter and insects each departing by site. Its interventional mean
//! follows from path tracing (Wright 1934): under do(cover = x), in site
//! j, `E[insects] = αᵢ + γ·(αₗ + βₗ·x + dₗⱼ) + βᵢ·x + dᵢⱼ`, and for a new
//! site the departures average to 0 (law of total expectation). The test
//! computes that expectation per posterior draw from the fitted
//! parameters and compares it with the simulated intervention; the change
//! `βᵢ + γ·βₗ` must also cover the true 0.3 + 0.7 × 0.5.

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::infer::nuts::NutsSettings;
use waypath::query::{build_joint, fit_joint, intervene, GroupQuestion, InterventionRequest, JointFit, JointModel};
use waypath::table::{Column, ColumnData, Table};

const SITES: usize = 8;
const PER_SITE: usize = 40;

fn stream_graph() -> Graph {
    let mut b = GraphBuilder::new("stream");
    for l in ["cover -> litter -> insects", "cover -> insects"] {
        b.add_line(l).expect("graph line");
    }
    b.finish().expect("graph")
}

/// The sites' rows: cover normal(0, 1); litter = 1 + 0.5·cover + dₗ[site]
/// + normal(0, 0.5); insects = 2 + 0.7·litter + 0.3·cover + dᵢ[site] +
/// normal(0, 0.5); dₗ ~ normal(0, 0.8), dᵢ ~ normal(0, 0.6).
fn stream_table(seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let d_litter: Vec<f64> = (0..SITES).map(|_| 0.8 * unit.sample(&mut rng)).collect();
    let d_insects: Vec<f64> = (0..SITES).map(|_| 0.6 * unit.sample(&mut rng)).collect();
    let (mut site, mut cover, mut litter, mut insects) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for j in 0..SITES {
        for _ in 0..PER_SITE {
            let c = unit.sample(&mut rng);
            let l = 1.0 + 0.5 * c + d_litter[j] + 0.5 * unit.sample(&mut rng);
            let y = 2.0 + 0.7 * l + 0.3 * c + d_insects[j] + 0.5 * unit.sample(&mut rng);
            site.push(j as u32);
            cover.push(c);
            litter.push(l);
            insects.push(y);
        }
    }
    let levels = (1..=SITES).map(|k| format!("S{k}")).collect();
    Table {
        name: "field".into(),
        columns: vec![
            Column::new("site", ColumnData::Category { codes: site, levels }),
            Column::new("cover", ColumnData::Real(cover)),
            Column::new("litter", ColumnData::Real(litter)),
            Column::new("insects", ColumnData::Real(insects)),
        ],
    }
}

fn overrides() -> Vec<(String, Vec<String>)> {
    vec![
        ("litter".into(), vec!["litter from cover, pooled site".into(), "centre off".into()]),
        ("insects".into(), vec!["insects from litter, cover, pooled site".into(), "centre off".into()]),
    ]
}

fn request(groups: GroupQuestion) -> InterventionRequest {
    InterventionRequest {
        variable: "cover".into(),
        to: "1".into(),
        from: "0".into(),
        watch: vec!["insects".into()],
        rows: None,
        seed: 5,
        mass: 0.9,
        groups,
    }
}

/// Column `name` of node `node`'s draws.
fn draws_of<'a>(joint: &JointModel, fit: &'a JointFit, node: &str, name: &str) -> &'a [f64] {
    let i = joint.nodes.iter().position(|n| n.name == node).expect("node");
    fit.fits[i].as_ref().expect("fitted").draws.require(name).expect("parameter")
}

/// Per draw, the path-traced mean of insects under do(cover = x) with
/// site weights `weights` over the fitted sites (empty: a new site).
fn traced_mean(joint: &JointModel, fit: &JointFit, x: f64, weights: &[f64]) -> f64 {
    let d = |node: &str, name: &str| draws_of(joint, fit, node, name);
    let (al, bl) = (d("litter", "intercept"), d("litter", "cover slope"));
    let (ai, g, bi) = (d("insects", "intercept"), d("insects", "litter slope"), d("insects", "cover slope"));
    let n = al.len();
    let mut total = 0.0;
    for s in 0..n {
        let mut departures = 0.0;
        for (j, w) in weights.iter().enumerate() {
            let label = format!("site departure[S{}]", j + 1);
            departures += w * (g[s] * d("litter", &label)[s] + d("insects", &label)[s]);
        }
        total += ai[s] + g[s] * (al[s] + bl[s] * x) + bi[s] * x + departures;
    }
    total / n as f64
}

/// The rows of `table` in the sites at `indices`.
fn rows_of_sites(table: &Table, indices: &[u32]) -> Table {
    let ColumnData::Category { codes, .. } = &table.column("site").expect("site").data else { unreachable!() };
    let keep: Vec<usize> = (0..codes.len()).filter(|&i| indices.contains(&codes[i])).collect();
    let columns = table
        .columns
        .iter()
        .map(|c| {
            let data = match &c.data {
                ColumnData::Real(v) => ColumnData::Real(keep.iter().map(|&i| v[i]).collect()),
                ColumnData::Category { codes, levels } => {
                    ColumnData::Category { codes: keep.iter().map(|&i| codes[i]).collect(), levels: levels.clone() }
                }
                _ => unreachable!(),
            };
            Column { data, ..c.clone() }
        })
        .collect();
    Table { name: table.name.clone(), columns }
}

#[test]
fn an_intervention_through_pooled_nodes_answers_the_question_it_names() {
    let g = stream_graph();
    let table = stream_table(3);
    let joint = build_joint("whole", &g, &table, &overrides()).expect("joint");
    assert!(joint.warnings.iter().any(|w| w.contains("site") && w.contains("marker of clusters")), "{:?}", joint.warnings);
    let method = Method::Nuts(NutsSettings { chains: 1, settle: 400, draws: 1000, seed: 11, threads: 1, ..Default::default() });
    let fit = fit_joint(&joint, &method, &AtomicBool::new(false)).expect("fit");

    // The rows' own sites, each weighted by its share of the rows: over
    // the rows of sites S3 and S4 only (the fitted departures of all eight
    // average to about 0, which would not tell this question from a new site).
    let rows_of_two = rows_of_sites(&table, &[2, 3]);
    let observed = intervene(&joint, &fit, &rows_of_two, &request(GroupQuestion::Observed)).expect("intervene");
    let w = &observed.watched[0];
    let mut halves = vec![0.0; SITES];
    halves[2] = 0.5;
    halves[3] = 0.5;
    let want = traced_mean(&joint, &fit, 1.0, &halves);
    assert!((w.mean_under_to - want).abs() < 0.01, "observed sites: {} vs {want}", w.mean_under_to);
    let change = traced_mean(&joint, &fit, 1.0, &[]) - traced_mean(&joint, &fit, 0.0, &[]);
    assert!((w.mean - change).abs() < 0.01, "change: {} vs {change}", w.mean);
    let truth = 0.3 + 0.7 * 0.5;
    assert!(w.lower < truth && truth < w.upper, "interval {}–{} misses the path-traced {truth}", w.lower, w.upper);
    assert!(observed.pooled.iter().any(|n| n.contains("own site")), "{:?}", observed.pooled);

    // One existing site: every row in S3.
    let existing = GroupQuestion::Existing { column: "site".into(), level: "S3".into() };
    let at = intervene(&joint, &fit, &table, &request(existing)).expect("intervene");
    let mut only = vec![0.0; SITES];
    only[2] = 1.0;
    let want_s3 = traced_mean(&joint, &fit, 1.0, &only);
    assert!((at.watched[0].mean_under_to - want_s3).abs() < 0.01, "site S3: {} vs {want_s3}", at.watched[0].mean_under_to);
    assert!(at.pooled.iter().any(|n| n.contains("existing site S3")), "{:?}", at.pooled);

    // A new site: its departures drawn per draw, averaging to 0. With 1000
    // draws the Monte Carlo sd of the mean is about 0.03 here.
    let new = intervene(&joint, &fit, &table, &request(GroupQuestion::New { column: "site".into() })).expect("intervene");
    let want_new = traced_mean(&joint, &fit, 1.0, &[]);
    assert!((new.watched[0].mean_under_to - want_new).abs() < 0.12, "new site: {} vs {want_new}", new.watched[0].mean_under_to);
    assert!((want_new - want_s3).abs() > 0.3, "the case must tell site S3 from a new site");
    assert!((want_new - want).abs() > 0.25, "the case must tell the observed sites from a new site ({want_new} vs {want})");
    assert!((new.watched[0].mean - change).abs() < 0.01, "the new site's departures cancel in the paired change");
    assert!(new.pooled.iter().any(|n| n.contains("new site drawn from the population")), "{:?}", new.pooled);

    let unknown = GroupQuestion::Existing { column: "site".into(), level: "S99".into() };
    let e = intervene(&joint, &fit, &table, &request(unknown)).expect_err("no site S99");
    assert!(e.to_string().contains("S99"), "{e}");
}

#[test]
fn pooled_node_models_are_refused_where_the_graph_says_no() {
    let mut b = GraphBuilder::new("plots");
    for l in ["cover -> litter -> insects", "cover -> insects", "plot -> insects"] {
        b.add_line(l).expect("graph line");
    }
    let g = b.finish().expect("graph");
    let mut table = stream_table(4);
    let mut rng = StdRng::seed_from_u64(1);
    let n = table.nrows();
    table.columns.push(Column::new(
        "plot",
        ColumnData::Category {
            codes: (0..n).map(|_| rng.random_range(0..4u32)).collect(),
            levels: ["p1", "p2", "p3", "p4"].map(String::from).to_vec(),
        },
    ));
    let not_parent = vec![("litter".into(), vec!["litter from cover, pooled plot".into()])];
    let e = build_joint("whole", &g, &table, &not_parent).expect_err("pooling a node that is no parent").to_string();
    assert!(e.contains("plot") && e.contains("not a parent of litter"), "{e}");

    let joint = build_joint("whole", &g, &table, &[]).expect("joint");
    let fit = fit_joint(&joint, &Method::Laplace { draws: 200, seed: 2 }, &AtomicBool::new(false)).expect("fit");
    let e = intervene(&joint, &fit, &table, &request(GroupQuestion::New { column: "site".into() })).expect_err("nothing pools site");
    assert!(e.to_string().contains("pools site"), "{e}");
}

/// The same three questions asked in cells: `in new site`, `in site s2`
/// and neither, each named in the result's `pooled` notes; a lone `in` is
/// refused with the form to write. (The numbers are checked above.)
#[test]
fn intervene_cells_name_the_question_they_answer() {
    use waypath::cells::{RunControl, Session};
    let mut session = Session::new(".");
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    let mut run = |cell: &str| session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress });
    let setup = "graph g:
    cover -> litter -> insects
    cover -> insects
    site -> litter
    site -> insects
simulate field from g rows 400 seed 11:
    site = category(s1 0.25, s2 0.25, s3 0.25, s4 0.25)
    cover = normal(0, 1)
    litter = normal(1 + 0.5 * cover + departure(site, 0.8), 0.5)
    insects = normal(2 + 0.7 * litter + 0.3 * cover + departure(site, 0.6), 0.5)
joint whole = g using field:
    litter from cover, pooled site
    insects from litter, cover, pooled site
fit whole with nuts chains 1 settle 200 draws 200 seed 3
";
    let out = run(setup);
    assert!(out.error.is_none(), "{}", out.error.map(|e| e.describe()).unwrap_or_default());
    for (words, said) in [
        (" in new site", "every row in one new site"),
        (" in new site per row", "each row in a new site of its own"),
        (" in site s2", "existing site s2"),
        ("", "own site"),
    ] {
        let out = run(&format!("intervene whole: set cover 1 vs 0, watch insects{words} seed 4"));
        assert!(out.error.is_none(), "{words}: {}", out.error.map(|e| e.describe()).unwrap_or_default());
        let json = out.displays.iter().rev().find_map(|d| d.json.clone()).expect("a JSON structure");
        let pooled: Vec<String> = json["pooled"].as_array().expect("pooled notes").iter().map(|v| v.as_str().unwrap().to_string()).collect();
        assert_eq!(pooled.len(), 2, "{pooled:?}");
        assert!(pooled.iter().all(|n| n.contains(said)), "{words}: {pooled:?}");
        assert!(out.displays.iter().any(|d| d.plain.contains(said)), "{words}: the notes say it");
    }
    // A pooled column the intervened node causes cannot be held at one level.
    let downstream = "graph h:
    cover -> site -> insects
    cover -> insects
simulate plots from h rows 300 seed 12:
    cover = normal(0, 1)
    site = category(s1 0.5, s2 0.5)
    insects = normal(cover + departure(site, 0.5), 1)
joint down = h using plots:
    insects from cover, pooled site
fit down with nuts chains 1 settle 100 draws 100 seed 3
intervene down: set cover 1 vs 0, watch insects in site s1";
    let e = run(downstream).error.expect("a pooled column downstream of the exposure").describe();
    assert!(e.contains("site is caused by cover"), "{e}");
    let out = run("intervene whole: set cover 1 vs 0, watch insects in site");
    let e = out.error.expect("a lone `in` is refused").describe();
    assert!(e.contains("`in` takes a pooled column"), "{e}");
}

/// `in new site per row`: every row in a new site of its own, each with
/// departures drawn apart. By the law of total expectation each row's
/// departures average to 0, and over the 320 rows of a draw they nearly
/// cancel (their row mean has sd about 0.04 here, and over 1000 draws
/// 0.0013), so the mean under the intervention follows the path-traced
/// mean with no departures much more closely than one new site for every
/// row does (the Monte Carlo sd of its mean over 1000 draws is about 0.02).
#[test]
fn a_new_site_per_row_averages_its_departures_within_each_draw() {
    let (g, table) = (stream_graph(), stream_table(8));
    let joint = build_joint("whole", &g, &table, &overrides()).expect("joint");
    let method = Method::Nuts(NutsSettings { chains: 1, settle: 400, draws: 1000, seed: 12, threads: 1, ..Default::default() });
    let fit = fit_joint(&joint, &method, &AtomicBool::new(false)).expect("fit");
    let per_row = intervene(&joint, &fit, &table, &request(GroupQuestion::NewPerRow { column: "site".into() })).expect("intervene");
    let want = traced_mean(&joint, &fit, 1.0, &[]);
    let w = &per_row.watched[0];
    assert!((w.mean_under_to - want).abs() < 0.008, "a new site per row: {} vs {want}", w.mean_under_to);
    let change = want - traced_mean(&joint, &fit, 0.0, &[]);
    assert!((w.mean - change).abs() < 0.01, "each row's departures cancel in the paired change");
    assert!(per_row.pooled.iter().any(|n| n.contains("each row in a new site of its own")), "{:?}", per_row.pooled);
}
