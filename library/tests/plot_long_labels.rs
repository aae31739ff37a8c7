//! Every figure kind drawn with long labels (over 40 characters, with
//! letters outside ASCII), measured with DejaVu Sans laid out by usvg
//! (`common::text_boxes`): no text leaves the canvas and no two texts
//! overlap. Labels of this length arise from level names and statements of
//! checked implications written in a scientist's own language.

mod common;

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

use waypath::plot::*;

fn normals(seed: u64, n: usize, mean: f64, sd: f64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    let d = Normal::new(mean, sd).unwrap();
    (0..n).map(|_| d.sample(&mut rng)).collect()
}

const A: &str = "Höhe des Stammes über dem Boden (gemessen)[Zwergunterlage]";
const B: &str = "Ertrag je Baum nach der Ernte, Spätsorte «Boskoop» ñ";
const C: &str = "Wurzelstock: Sämling gegenüber Zwergunterlage M9 ∂";

fn long_figures() -> Vec<(&'static str, String)> {
    assert!([A, B, C].iter().all(|l| l.chars().count() >= 40 && !l.is_ascii()));
    let mut out = Vec::new();
    let mut add = |kind, svg: Result<String, PlotError>| out.push((kind, svg.expect("figure draws")));
    let node = |name: &str, role| NodeMark { name: name.into(), hidden: false, role };
    add(
        "graph",
        graph_figure(&GraphPicture {
            title: format!("{A} and {B}"),
            nodes: vec![node(A, Role::Exposure), node(B, Role::Outcome), node(C, Role::Adjusted)],
            edges: vec![
                EdgeMark { from: 0, to: 1, highlight: false },
                EdgeMark { from: 2, to: 0, highlight: true },
                EdgeMark { from: 2, to: 1, highlight: true },
            ],
        }),
    );
    let (a, b, c) = (normals(1, 2000, 18.0, 1.2), normals(2, 2000, 23.5, 1.0), normals(3, 2000, 0.5, 0.05));
    let params = [
        ParameterDraws { name: A, draws: &a },
        ParameterDraws { name: B, draws: &b },
        ParameterDraws { name: C, draws: &c },
    ];
    let value = Quantity::with_unit(B, "kg je Baum");
    add("estimates stacked", posterior_figure(A, &value, &params, DensityArrangement::Stacked));
    add("estimates shared", posterior_figure(A, &value, &params[..2], DensityArrangement::Shared));
    let diff = Quantity::with_unit(&format!("Unterschied: {B}"), "kg");
    add("contrast", contrast_figure(C, &diff, &normals(4, 2000, 0.5, 1.0)));
    let grid: Vec<f64> = (0..21).map(|i| 15.0 + i as f64).collect();
    let x = Quantity::with_unit(A, "cm");
    let groups: Vec<LineGroup> = [A, C]
        .iter()
        .enumerate()
        .map(|(k, label)| LineGroup {
            label: label.to_string(),
            points: grid.iter().map(|g| (*g, g * 0.5 + k as f64)).collect(),
            grid: grid.clone(),
            mean: grid.iter().map(|g| g * 0.5 + k as f64).collect(),
            lower: grid.iter().map(|g| g * 0.5 + k as f64 - 1.0).collect(),
            upper: grid.iter().map(|g| g * 0.5 + k as f64 + 1.0).collect(),
        })
        .collect();
    add("lines", lines_figure(B, &x, &value, "90% interval", &groups));
    let along = GridContrast {
        grid: grid.clone(),
        mean: grid.iter().map(|g| 0.1 * g).collect(),
        lower: grid.iter().map(|g| 0.1 * g - 0.5).collect(),
        upper: grid.iter().map(|g| 0.1 * g + 0.5).collect(),
    };
    add("contrast along a grid", contrast_grid_figure(C, &x, &diff, "90% interval", &along));
    // a spline over hat functions (any non-negative basis draws the same way)
    let centres = [15.0, 19.0, 23.0, 27.0, 31.0, 35.0];
    let basis: Vec<Vec<f64>> =
        centres.iter().map(|c: &f64| grid.iter().map(|g| (1.0 - (g - c).abs() / 4.0).max(0.0)).collect()).collect();
    let picture = BasisPicture {
        grid: grid.clone(),
        basis,
        weights: (0..500).map(|d| normals(300 + d, 6, 1.0, 0.3)).collect(),
        intercept: normals(9, 500, 10.0, 0.2),
        points: grid.iter().map(|g| (*g, 10.0 + 0.1 * g)).collect(),
    };
    add("spline", spline_figure(C, &x, &value, &picture, 0.9));
    let observed = normals(10, 200, 20.0, 4.0);
    let replicated: Vec<Vec<f64>> = (0..200).map(|r| normals(200 + r, 200, 20.0, 4.0)).collect();
    add("check", predictive_figure(PredictiveKind::Posterior, A, &value, &observed, &replicated));
    add("prior check", predictive_figure(PredictiveKind::Prior, A, &value, &[], &replicated));
    let counts = [A, B, C]
        .iter()
        .enumerate()
        .map(|(k, l)| LevelCount { level: l.to_string(), observed: 60.0 + 10.0 * k as f64, replicated: normals(50 + k as u64, 200, 65.0, 6.0) })
        .collect::<Vec<_>>();
    add("level check", level_count_figure(PredictiveKind::Posterior, A, B, &counts));
    let chains: Vec<Vec<f64>> = (0..3).map(|p| (0..4).flat_map(|c| normals(20 + 4 * p + c, 500, 1.0, 0.2)).collect()).collect();
    let traced = [
        ParameterDraws { name: A, draws: &chains[0] },
        ParameterDraws { name: B, draws: &chains[1] },
        ParameterDraws { name: C, draws: &chains[2] },
    ];
    add("mixing", mixing_figure(A, 4, &traced));
    let rows = vec![
        ImplicationRow { statement: format!("{A} ⊥ {B}"), estimate: 0.02, lower: -0.08, upper: 0.12 },
        ImplicationRow { statement: format!("{B} ⊥ {C} | {A}"), estimate: 0.21, lower: 0.11, upper: 0.31 },
    ];
    add("implications", implications_figure(C, &Quantity::new("partielle Korrelation"), "90% interval", &rows));
    let recovery = vec![
        RecoveryRow { name: A.into(), truth: 30.0, estimate: 30.4, lower: 29.1, upper: 31.6 },
        RecoveryRow { name: B.into(), truth: 0.55, estimate: 0.53, lower: 0.5, upper: 0.57 },
        RecoveryRow { name: C.into(), truth: 3.0, estimate: 3.4, lower: 3.1, upper: 3.7 },
    ];
    add("recovery", recovery_figure(B, &Quantity::new("Wert des Parameters"), "90% interval", &recovery));
    let shrinkage = vec![
        ShrinkageRow { label: A.into(), rows: 40, raw: Some(31.0), mean: 30.6, lower: 29.4, upper: 31.8 },
        ShrinkageRow { label: B.into(), rows: 3, raw: Some(36.0), mean: 32.5, lower: 29.0, upper: 36.1 },
        ShrinkageRow { label: C.into(), rows: 12, raw: None, mean: 30.1, lower: 27.0, upper: 33.2 },
    ];
    add("shrinkage", shrinkage_figure(C, &Quantity::with_unit(B, "kg"), "90% interval", [30.5, 28.9, 32.0], &shrinkage));
    let ranks: Vec<usize> = (0..300).map(|i| (i * 37) % 100).collect();
    add("calibration", calibration_figure(A, &ranks, 99, 20));
    out
}

#[test]
fn long_non_ascii_labels_stay_on_the_canvas_and_apart() {
    let opt = common::text_boxes::dejavu();
    let mut problems = Vec::new();
    for (kind, svg) in long_figures() {
        for p in common::text_boxes::texts_outside_canvas(&svg, &opt) {
            problems.push(format!("{kind}: outside: {p}"));
        }
        for p in common::text_boxes::overlapping_texts(&svg, &opt, 0.5) {
            problems.push(format!("{kind}: {p}"));
        }
    }
    assert!(problems.is_empty(), "{problems:#?}");
}

/// Issue 15, section 4: with long row labels the implications figure's
/// panel is narrow, and a narrow range of associations once left a single
/// tick on its x-axis, which gives no scale. Counted from the laid-out texts
/// that read as numbers.
#[test]
fn a_narrow_implications_panel_still_gets_a_scale() {
    let opt = common::text_boxes::dejavu();
    let rows = vec![
        ImplicationRow { statement: format!("{A} ⊥ {B} | {C}"), estimate: 0.004, lower: -0.011, upper: 0.019 },
        ImplicationRow { statement: format!("{C} ⊥ {B}"), estimate: 0.006, lower: -0.003, upper: 0.016 },
    ];
    let svg = implications_figure(C, &Quantity::new("partielle Korrelation"), "90% interval", &rows).unwrap();
    let (_, boxes) = common::text_boxes::text_boxes(&svg, &opt);
    let ticks: Vec<f64> = boxes.iter().filter_map(|(t, _)| t.replace('\u{2212}', "-").parse::<f64>().ok()).collect();
    assert!(ticks.len() >= 3, "x ticks: {ticks:?}");
    assert!(ticks.windows(2).all(|w| w[1] > w[0]), "ticks increase: {ticks:?}");
}
