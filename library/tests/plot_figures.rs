//! Every figure kind of `waypath::plot`, checked as SVG text (parsed by
//! roxmltree) and as pixels (rendered by resvg).
//!
//! The data are invented orchard and stream scenarios drawn with fixed seeds.

mod common;

use std::sync::Arc;

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use resvg::{tiny_skia, usvg};
use statrs::distribution::{Continuous, ContinuousCDF, Normal as NormalDist};

use waypath::plot::density::{kde, quantile, silverman_bandwidth};
use waypath::plot::*;

// ---------------------------------------------------------------- fixtures

fn normals(seed: u64, n: usize, mean: f64, sd: f64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    let d = Normal::new(mean, sd).expect("valid normal");
    (0..n).map(|_| d.sample(&mut rng)).collect()
}

fn orchard_graph() -> GraphPicture {
    let node = |name: &str, hidden, role| NodeMark {
        name: name.into(),
        hidden,
        role,
    };
    let edge = |from, to, highlight| EdgeMark {
        from,
        to,
        highlight,
    };
    GraphPicture {
        title: "orchard".into(),
        nodes: vec![
            node("rootstock", false, Role::Exposure),
            node("girth", false, Role::Adjusted),
            node("yield", false, Role::Outcome),
            node("soil", true, Role::Plain),
            node("irrigation", false, Role::Plain),
        ],
        edges: vec![
            edge(0, 1, false),
            edge(1, 2, false),
            edge(0, 2, false),
            edge(3, 1, true),
            edge(3, 2, true),
            edge(4, 1, false),
            edge(4, 2, false),
        ],
    }
}

/// Cox–de Boor recursion for B-spline basis functions of the given degree
/// (de Boor 1978, *A Practical Guide to Splines*), on clamped knots.
fn bspline_basis(grid: &[f64], inner: &[f64], degree: usize) -> Vec<Vec<f64>> {
    let (lo, hi) = (inner[0], inner[inner.len() - 1]);
    let mut knots = vec![lo; degree];
    knots.extend_from_slice(inner);
    knots.extend(std::iter::repeat_n(hi, degree));
    let count = knots.len() - degree - 1;
    (0..count)
        .map(|k| {
            grid.iter()
                .map(|&x| cox_de_boor(&knots, k, degree, x.min(hi - 1e-9)))
                .collect()
        })
        .collect()
}

fn cox_de_boor(t: &[f64], k: usize, p: usize, x: f64) -> f64 {
    if p == 0 {
        return if t[k] <= x && x < t[k + 1] { 1.0 } else { 0.0 };
    }
    let left = if t[k + p] > t[k] {
        (x - t[k]) / (t[k + p] - t[k]) * cox_de_boor(t, k, p - 1, x)
    } else {
        0.0
    };
    let right = if t[k + p + 1] > t[k + 1] {
        (t[k + p + 1] - x) / (t[k + p + 1] - t[k + 1]) * cox_de_boor(t, k + 1, p - 1, x)
    } else {
        0.0
    };
    left + right
}

struct Figure {
    kind: &'static str,
    subject: &'static str,
    svg: String,
}

/// One figure of every kind, each from 4000 draws where draws are involved.
fn all_figures() -> Vec<Figure> {
    let mut out = Vec::new();
    let mut add = |kind, subject, svg: Result<String, PlotError>| {
        out.push(Figure {
            kind,
            subject,
            svg: svg.expect("figure draws"),
        })
    };
    add("causal graph", "orchard", graph_figure(&orchard_graph()));

    let (a, b, s) = (
        normals(1, 4000, 18.0, 1.2),
        normals(2, 4000, 23.5, 1.0),
        normals(3, 4000, 3.1, 0.2),
    );
    let params = [
        ParameterDraws {
            name: "intercept[dwarf]",
            draws: &a,
        },
        ParameterDraws {
            name: "intercept[standard]",
            draws: &b,
        },
        ParameterDraws {
            name: "spread",
            draws: &s,
        },
    ];
    let value = Quantity::with_unit("yield", "kg");
    add(
        "posterior",
        "m_total",
        posterior_figure("m_total", &value, &params, DensityArrangement::Stacked),
    );
    add(
        "posterior",
        "m_total intercepts",
        posterior_figure(
            "m_total intercepts",
            &value,
            &params[..2],
            DensityArrangement::Shared,
        ),
    );

    let contrast = normals(4, 4000, 0.5, 1.0);
    let diff = Quantity::with_unit("yield difference", "kg");
    add(
        "contrast",
        "rootstock standard vs dwarf",
        contrast_figure("rootstock standard vs dwarf", &diff, &contrast),
    );

    let girth: Vec<f64> = (0..31).map(|i| 15.0 + i as f64).collect();
    let groups: Vec<LineGroup> = [("dwarf", 2.0, 0.5, 5u64), ("standard", 4.0, 0.55, 6)]
        .iter()
        .map(|(label, a, b, seed)| {
            let noise = normals(*seed, 120, 0.0, 2.5);
            let xs = normals(seed + 10, 120, 30.0, 6.0);
            LineGroup {
                label: label.to_string(),
                points: xs
                    .iter()
                    .zip(&noise)
                    .map(|(x, e)| (*x, a + b * x + e))
                    .collect(),
                grid: girth.clone(),
                mean: girth.iter().map(|x| a + b * x).collect(),
                lower: girth
                    .iter()
                    .map(|x| a + b * x - 1.0 - 0.03 * (x - 30.0).abs())
                    .collect(),
                upper: girth
                    .iter()
                    .map(|x| a + b * x + 1.0 + 0.03 * (x - 30.0).abs())
                    .collect(),
            }
        })
        .collect();
    let gx = Quantity::with_unit("trunk girth", "cm");
    add(
        "fitted lines",
        "m_direct",
        lines_figure("m_direct", &gx, &value, "90% interval", &groups),
    );

    let along = GridContrast {
        grid: girth.clone(),
        mean: girth.iter().map(|x| 1.5 + 0.05 * (x - 30.0)).collect(),
        lower: girth
            .iter()
            .map(|x| 0.4 + 0.05 * (x - 30.0) - 0.02 * (x - 30.0).abs())
            .collect(),
        upper: girth
            .iter()
            .map(|x| 2.6 + 0.05 * (x - 30.0) + 0.02 * (x - 30.0).abs())
            .collect(),
    };
    add(
        "contrast along a grid",
        "standard vs dwarf",
        contrast_grid_figure("standard vs dwarf", &gx, &diff, "90% interval", &along),
    );

    let age: Vec<f64> = (0..=100).map(|i| i as f64 * 0.1).collect();
    let basis = bspline_basis(&age, &[0.0, 2.0, 4.0, 6.0, 8.0, 10.0], 3);
    let centre = [0.5, 1.0, 3.0, 2.5, 4.0, 6.5, 7.0, 7.5];
    let weights: Vec<Vec<f64>> = (0..4000)
        .map(|d| {
            let jitter = normals(100 + d as u64, centre.len(), 0.0, 0.4);
            centre.iter().zip(jitter).map(|(c, j)| c + j).collect()
        })
        .collect();
    let obs_age = normals(7, 150, 5.0, 2.5)
        .into_iter()
        .map(|x| x.clamp(0.0, 10.0))
        .collect::<Vec<_>>();
    let obs_noise = normals(8, 150, 0.0, 0.8);
    let picture = BasisPicture {
        grid: age.clone(),
        basis: basis.clone(),
        weights,
        intercept: normals(9, 4000, 10.0, 0.2),
        points: obs_age
            .iter()
            .zip(&obs_noise)
            .map(|(x, e)| (*x, 10.0 + 0.7 * x + e))
            .collect(),
    };
    let height = Quantity::with_unit("sapling height", "cm");
    add(
        "spline fit",
        "growth",
        spline_figure(
            "growth",
            &Quantity::with_unit("age", "years"),
            &height,
            &picture,
            0.9,
        ),
    );

    let observed = normals(10, 300, 20.0, 4.0);
    let replicated: Vec<Vec<f64>> = (0..4000)
        .map(|r| normals(200 + r as u64, 300, 20.0, 4.0))
        .collect();
    add(
        "posterior predictive check",
        "m_total",
        predictive_figure(
            PredictiveKind::Posterior,
            "m_total",
            &value,
            &observed,
            &replicated,
        ),
    );
    let wide: Vec<Vec<f64>> = (0..200)
        .map(|r| normals(9000 + r as u64, 300, 20.0, 15.0))
        .collect();
    add(
        "prior predictive check",
        "m_total",
        predictive_figure(PredictiveKind::Prior, "m_total", &value, &[], &wide),
    );

    let chains: Vec<f64> = (0..4)
        .flat_map(|c| normals(20 + c, 1000, 18.0, 1.2))
        .collect();
    let chains_b: Vec<f64> = (0..4)
        .flat_map(|c| normals(30 + c, 1000, 0.55, 0.05))
        .collect();
    let chains_s: Vec<f64> = (0..4)
        .flat_map(|c| normals(40 + c, 1000, 3.1 + 0.05 * c as f64, 0.2))
        .collect();
    let traced = [
        ParameterDraws {
            name: "intercept[dwarf]",
            draws: &chains,
        },
        ParameterDraws {
            name: "slope[girth]",
            draws: &chains_b,
        },
        ParameterDraws {
            name: "spread",
            draws: &chains_s,
        },
    ];
    add("mixing", "m_direct", mixing_figure("m_direct", 4, &traced));

    let rows = implication_rows();
    add(
        "testable implications",
        "orchard",
        implications_figure(
            "orchard",
            &Quantity::new("partial correlation"),
            "90% interval",
            &rows,
        ),
    );

    let recovery = vec![
        RecoveryRow {
            name: "intercept".into(),
            truth: 2.0,
            estimate: 2.3,
            lower: 1.2,
            upper: 3.4,
        },
        RecoveryRow {
            name: "slope[girth]".into(),
            truth: 0.55,
            estimate: 0.53,
            lower: 0.5,
            upper: 0.57,
        },
        RecoveryRow {
            name: "shift[standard]".into(),
            truth: 1.5,
            estimate: 1.1,
            lower: 0.6,
            upper: 1.45,
        },
        RecoveryRow {
            name: "spread".into(),
            truth: 3.0,
            estimate: 3.05,
            lower: 2.85,
            upper: 3.25,
        },
    ];
    add(
        "recovery",
        "m_direct on fake",
        recovery_figure(
            "m_direct on fake",
            &Quantity::new("parameter value"),
            "90% interval",
            &recovery,
        ),
    );

    let mut rng = StdRng::seed_from_u64(11);
    let ranks: Vec<usize> = (0..500)
        .map(|_| rand::RngExt::random_range(&mut rng, 0..=99))
        .collect();
    add(
        "calibration",
        "slope[girth]",
        calibration_figure("slope[girth]", &ranks, 99, 20),
    );
    out
}

fn implication_rows() -> Vec<ImplicationRow> {
    vec![
        ImplicationRow {
            statement: "irrigation ⊥ rootstock".into(),
            estimate: 0.02,
            lower: -0.08,
            upper: 0.12,
        },
        ImplicationRow {
            statement: "irrigation ⊥ rootstock | girth".into(),
            estimate: 0.21,
            lower: 0.11,
            upper: 0.31,
        },
        ImplicationRow {
            statement: "slope ⊥ canopy | girth, irrigation".into(),
            estimate: -0.05,
            lower: -0.17,
            upper: 0.06,
        },
        ImplicationRow {
            statement: "shade ⊥ yield | canopy".into(),
            estimate: -0.19,
            lower: -0.3,
            upper: -0.07,
        },
    ]
}

// ---------------------------------------------------------------- helpers

const DEJAVU: &str = "/usr/share/fonts/truetype/dejavu";

fn render(svg: &str, fonts: bool) -> tiny_skia::Pixmap {
    let mut opt = usvg::Options::default();
    if fonts {
        let db = Arc::make_mut(&mut opt.fontdb);
        db.load_fonts_dir(DEJAVU);
        db.set_sans_serif_family("DejaVu Sans");
    }
    let tree = usvg::Tree::from_str(svg, &opt).expect("resvg parses the figure");
    let size = tree.size().to_int_size();
    let mut pixmap = tiny_skia::Pixmap::new(size.width(), size.height()).expect("non-empty size");
    resvg::render(
        &tree,
        tiny_skia::Transform::identity(),
        &mut pixmap.as_mut(),
    );
    pixmap
}

fn count_pixels(p: &tiny_skia::Pixmap, keep: impl Fn([u8; 4]) -> bool) -> usize {
    p.data()
        .chunks_exact(4)
        .filter(|c| keep([c[0], c[1], c[2], c[3]]))
        .count()
}

fn near(rgb: (u8, u8, u8), tolerance: i32) -> impl Fn([u8; 4]) -> bool {
    move |c| {
        (c[0] as i32 - rgb.0 as i32).abs() <= tolerance
            && (c[1] as i32 - rgb.1 as i32).abs() <= tolerance
            && (c[2] as i32 - rgb.2 as i32).abs() <= tolerance
    }
}

// ---------------------------------------------------------------- text checks

/// SVG 1.1 §5.4: `<title>` and `<desc>` describe their parent element; we
/// require them as the first two children of the root so that screen
/// readers and notebook viewers find them.
#[test]
fn every_figure_opens_with_title_and_desc() {
    for f in all_figures() {
        let doc = roxmltree::Document::parse(&f.svg)
            .unwrap_or_else(|e| panic!("{} is not well-formed XML: {e}", f.kind));
        let root = doc.root_element();
        assert_eq!(root.tag_name().name(), "svg");
        assert_eq!(
            root.tag_name().namespace(),
            Some("http://www.w3.org/2000/svg")
        );
        let children: Vec<_> = root.children().filter(|n| n.is_element()).collect();
        assert_eq!(children[0].tag_name().name(), "title", "{}", f.kind);
        assert_eq!(
            children[0].text(),
            Some(format!("{}: {}", f.kind, f.subject).as_str())
        );
        assert_eq!(children[1].tag_name().name(), "desc", "{}", f.kind);
        let desc = children[1].text().unwrap_or_default();
        assert!(
            desc.len() > 20 && desc.ends_with('.'),
            "{}: desc should be a sentence: {desc:?}",
            f.kind
        );
    }
}

/// All text at 12 px or more: the smallest size WCAG-minded guidance treats
/// as readable body text at 100% zoom (recalled).
#[test]
fn every_text_is_at_least_twelve_pixels() {
    for f in all_figures() {
        let doc = roxmltree::Document::parse(&f.svg).expect("well-formed");
        for t in doc.descendants().filter(|n| n.has_tag_name("text")) {
            let size: f64 = t
                .attribute("font-size")
                .and_then(|s| s.parse().ok())
                .unwrap_or(0.0);
            assert!(size >= 12.0, "{}: text {:?} at {size}px", f.kind, t.text());
        }
    }
}

/// Every colour used is one of the eight Okabe & Ito (2008) colours
/// (recalled), white, or the two greys derived from black.
#[test]
fn every_colour_comes_from_the_palette() {
    let allowed = [
        "#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
        "#FFFFFF", "#333333", "#8C8C8C", "none",
    ];
    for f in all_figures() {
        let doc = roxmltree::Document::parse(&f.svg).expect("well-formed");
        for n in doc.descendants().filter(|n| n.is_element()) {
            for attr in ["fill", "stroke"] {
                if let Some(c) = n.attribute(attr) {
                    assert!(
                        allowed.contains(&c),
                        "{}: colour {c} outside the palette",
                        f.kind
                    );
                }
            }
        }
    }
}

/// The size budget for inline notebook output: under 200 KB with 4000 draws.
#[test]
fn figures_from_4000_draws_stay_under_200_kb() {
    for f in all_figures() {
        assert!(f.svg.len() < 200_000, "{} is {} bytes", f.kind, f.svg.len());
    }
}

/// With DejaVu Sans laid out by usvg, every text of every figure (titles,
/// legends, tick labels, notes) stays on the canvas.
#[test]
fn every_text_stays_on_the_canvas_with_a_real_font() {
    let opt = common::text_boxes::dejavu();
    for f in all_figures() {
        let outside = common::text_boxes::texts_outside_canvas(&f.svg, &opt);
        assert!(outside.is_empty(), "{}: {outside:#?}", f.kind);
    }
}

// ---------------------------------------------------------------- pixel checks

#[test]
fn every_figure_renders_to_a_non_blank_image() {
    for f in all_figures() {
        let p = render(&f.svg, false);
        let total = (p.width() * p.height()) as usize;
        let white = count_pixels(&p, near((255, 255, 255), 3));
        let inked = 1.0 - white as f64 / total as f64;
        assert!(inked > 0.005, "{} is blank ({:.4} inked)", f.kind, inked);
        assert!(inked < 0.8, "{} is flooded ({:.4} inked)", f.kind, inked);
    }
}

/// Shaded areas of a contrast from N(0.5, 1) draws: the share above zero is
/// Φ(0.5) ≈ 0.6915 (normal CDF from statrs), so the area shaded sky blue must
/// be that share of all shaded area, within 2 percentage points.
#[test]
fn contrast_shading_splits_area_by_the_normal_tail_probability() {
    let draws = normals(42, 4000, 0.5, 1.0);
    let svg = contrast_figure(
        "shade vs open",
        &Quantity::with_unit("growth difference", "cm"),
        &draws,
    )
    .expect("draws");
    let p = render(&svg, false);
    let above = count_pixels(&p, near((0x56, 0xB4, 0xE9), 6)) as f64;
    let below = count_pixels(&p, near((0xE6, 0x9F, 0x00), 6)) as f64;
    let expected = NormalDist::new(0.0, 1.0).expect("standard normal").cdf(0.5);
    let share = above / (above + below);
    assert!(
        (share - expected).abs() < 0.02,
        "sky-blue share {share:.4}, expected {expected:.4}"
    );
    assert!(
        above + below > 20_000.0,
        "shaded area too small to judge: {above} + {below} pixels"
    );
}

/// Heavy tails do not squash the contrast figure: Cauchy(1, 1) draws
/// (quantile 1 + tan(π(p − ½)), closed form) span thousands, but the axis
/// spans about the central 99.5% (the 99.75% quantile is 1 + tan(0.4975π)
/// ≈ 128.3), the note counts the draws left out (each side about 0.25% of
/// 4000 = 10; binomial sd 3.2), and the written share above zero still uses
/// every draw: P(X > 0) = ½ + atan(1)/π = 0.75.
#[test]
fn contrast_axis_is_cut_to_the_central_draws_when_tails_are_long() {
    let mut rng = StdRng::seed_from_u64(44);
    let draws: Vec<f64> = (0..4000)
        .map(|_| 1.0 + (std::f64::consts::PI * (rand::RngExt::random::<f64>(&mut rng) - 0.5)).tan())
        .collect();
    let widest = draws.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(widest > 1000.0, "the seeded draws should have a long tail (widest {widest})");
    let svg = contrast_figure("mulch vs bare", &Quantity::new("difference"), &draws).expect("draws");
    let doc = roxmltree::Document::parse(&svg).expect("well-formed");
    let texts: Vec<String> = doc
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .map(|n| n.text().unwrap_or_default().to_string())
        .collect();
    let ticks: Vec<f64> = texts
        .iter()
        .filter_map(|t| t.replace('\u{2212}', "-").parse::<f64>().ok())
        .collect();
    assert!(ticks.len() >= 3, "tick labels: {texts:?}");
    let reach = ticks.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(reach < 200.0, "axis reaches {reach}: the tail squashes the bulk");
    let note = texts.iter().find(|t| t.starts_with("not drawn:")).expect("a note on the draws left out");
    let counts: Vec<usize> = note
        .split(|c: char| !c.is_ascii_digit())
        .filter_map(|w| w.parse().ok())
        .collect();
    assert_eq!(counts.len(), 2, "{note}");
    for c in &counts {
        assert!((1..=30).contains(c), "{note}");
    }
    let above = texts.iter().find(|t| t.starts_with("above 0:")).expect("share above zero");
    let pct: f64 = above
        .trim_start_matches("above 0: ")
        .trim_end_matches("% of draws")
        .parse()
        .expect("a percentage");
    assert!((pct - 75.0).abs() <= 2.0, "{above}");
}

/// A contrast entirely above zero shades nothing in the below-zero colour.
#[test]
fn contrast_all_above_zero_has_no_below_zero_shading() {
    let draws = normals(43, 2000, 5.0, 1.0);
    let svg = contrast_figure("wet vs dry", &Quantity::new("difference"), &draws).expect("draws");
    let p = render(&svg, false);
    // the legend swatch beside the written share is 12 × 12 pixels
    assert!(count_pixels(&p, near((0xE6, 0x9F, 0x00), 6)) <= 12 * 12);
    assert!(count_pixels(&p, near((0x56, 0xB4, 0xE9), 6)) > 10_000);
}

/// Implications whose interval excludes zero are drawn as filled vermillion
/// dots; by definition that is rows 2 and 4 of the fixture.
#[test]
fn implications_mark_exactly_the_rows_that_exclude_zero() {
    let rows = implication_rows();
    let svg = implications_figure(
        "orchard",
        &Quantity::new("partial correlation"),
        "90% interval",
        &rows,
    )
    .expect("rows");
    let doc = roxmltree::Document::parse(&svg).expect("well-formed");
    let filled = doc
        .descendants()
        .filter(|n| n.has_tag_name("circle") && n.attribute("fill") == Some("#D55E00"))
        .filter(|n| n.parent_element().and_then(|p| p.attribute("class")) != Some("legend"))
        .count();
    let excluding = rows
        .iter()
        .filter(|r| r.lower > 0.0 || r.upper < 0.0)
        .count();
    assert_eq!(excluding, 2);
    assert_eq!(filled, excluding);
}

// ---------------------------------------------------------------- density

/// Silverman (1986, *Density Estimation*, eq. 3.31): h = 0.9 min(s, IQR/1.34) n^(-1/5).
/// Worked by hand for the values 1..=100: s = sqrt(100·101/12) = 29.0115,
/// IQR (linear interpolation) = 75.25 − 25.75 = 49.5, so h = 0.9 · 29.0115 · 100^(-0.2) = 10.3947.
#[test]
fn silverman_bandwidth_matches_the_rule_of_thumb_worked_by_hand() {
    let values: Vec<f64> = (1..=100).map(f64::from).collect();
    assert!((silverman_bandwidth(&values) - 10.3947).abs() < 1e-3);
}

/// numpy.quantile's default "linear" method (Hyndman & Fan definition 7):
/// the 0.3-quantile of [1, 3, 4, 10] is 1 + 0.9 · (3 − 1) = 2.8 (recalled).
#[test]
fn quantile_interpolates_like_numpy_linear() {
    assert!((quantile(&[1.0, 3.0, 4.0, 10.0], 0.3) - 2.8).abs() < 1e-12);
    assert_eq!(quantile(&[1.0, 3.0, 4.0, 10.0], 1.0), 10.0);
}

/// A kernel density estimate of 4000 standard normal draws integrates to 1
/// and stays within 0.03 of the standard normal pdf (statrs).
#[test]
fn kde_of_normal_draws_follows_the_normal_pdf() {
    let draws = normals(5, 4000, 0.0, 1.0);
    let c = kde(&draws, -5.0, 5.0, 201);
    let step = c.xs[1] - c.xs[0];
    let area: f64 = c.ys.windows(2).map(|w| (w[0] + w[1]) / 2.0 * step).sum();
    assert!((area - 1.0).abs() < 0.01, "area {area}");
    let n = NormalDist::new(0.0, 1.0).expect("standard normal");
    let worst =
        c.xs.iter()
            .zip(&c.ys)
            .map(|(x, y)| (y - n.pdf(*x)).abs())
            .fold(0.0, f64::max);
    assert!(worst < 0.03, "largest gap {worst}");
}

// ---------------------------------------------------------------- errors

#[test]
fn mismatched_band_names_the_group_and_what_to_give() {
    let g = LineGroup {
        label: "dwarf".into(),
        grid: vec![1.0, 2.0, 3.0],
        mean: vec![1.0, 2.0, 3.0],
        lower: vec![0.0, 1.0],
        upper: vec![2.0, 3.0, 4.0],
        points: vec![],
    };
    let err = lines_figure(
        "m",
        &Quantity::new("x"),
        &Quantity::new("y"),
        "90% interval",
        &[g],
    )
    .unwrap_err();
    expect_test::expect![[r#"fitted lines figure: the lower bound of group dwarf has 2 values but 3 were expected; give one value per grid value"#]]
        .assert_eq(&err.to_string());
}

#[test]
fn empty_contrast_draws_are_reported() {
    let err = contrast_figure("wet vs dry", &Quantity::new("difference"), &[f64::NAN]).unwrap_err();
    expect_test::expect![[r#"contrast figure: the draws of wet vs dry holds nothing to draw (empty or not finite); supply at least one finite entry"#]]
        .assert_eq(&err.to_string());
}

// ---------------------------------------------------------------- looking

/// Writes every figure to /tmp/waypath_plot_*.png with DejaVu Sans loaded,
/// for a person to look at: `cargo test --release -p waypath --test
/// plot_figures -- --ignored`.
#[test]
#[ignore]
fn write_figures_for_viewing() {
    for (i, f) in all_figures().iter().enumerate() {
        let p = render(&f.svg, true);
        let name = format!("/tmp/waypath_plot_{i:02}_{}.png", f.kind.replace(' ', "_"));
        p.save_png(&name).expect("png written");
        std::fs::write(name.replace(".png", ".svg"), &f.svg).expect("svg written");
    }
}

/// The spline figure's band and weight intervals hold the mass asked for
/// (`intervals P%`, issue 15): the legend and description name it, and a
/// mass outside (0, 1) is refused.
#[test]
fn spline_band_follows_the_interval_mass() {
    let grid: Vec<f64> = (0..=20).map(|i| i as f64 * 0.5).collect();
    let basis = bspline_basis(&grid, &[0.0, 5.0, 10.0], 3);
    let weights: Vec<Vec<f64>> = (0..200).map(|d| normals(40 + d, basis.len(), 1.0, 0.3)).collect();
    let picture = BasisPicture { grid, basis, weights, intercept: Vec::new(), points: Vec::new() };
    let (x, y) = (Quantity::new("age"), Quantity::new("height"));
    let half = spline_figure("growth", &x, &y, &picture, 0.5).expect("figure");
    assert!(half.contains(">band: 50% interval<") && half.contains("weight: mean and 50% interval"), "legend");
    assert!(!half.contains("90%"), "no fixed 90% left");
    let err = spline_figure("growth", &x, &y, &picture, 1.5).unwrap_err().to_string();
    assert!(err.contains("between 0 and 1"), "{err}");
}
