//! The causal-graph layout on 100 seeded random DAGs of up to 20 nodes:
//! boxes never overlap, labels fit their boxes, arrows point down the
//! layers, start and end on box edges, and never run through a box.

mod common;

use common::text_boxes::{dejavu, text_boxes};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use resvg::usvg;

use waypath::plot::{
    graph_figure, layout, EdgeMark, GraphPicture, NodeBox, NodeMark, PlotError, Role,
};

/// A random DAG: `n` nodes named by random words, arrows from earlier to
/// later positions of a shuffled order with probability `p` each.
fn random_dag(seed: u64) -> GraphPicture {
    let mut rng = StdRng::seed_from_u64(seed);
    let n = rng.random_range(2..=20usize);
    let p = rng.random_range(0.08..0.35);
    let mut order: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        order.swap(i, rng.random_range(0..=i));
    }
    let letters: Vec<char> = "abcdefghijklmnopqrstuvwxyz_MW".chars().collect();
    let nodes = (0..n)
        .map(|i| {
            let len = rng.random_range(1..=16usize);
            let word: String = (0..len)
                .map(|_| letters[rng.random_range(0..letters.len())])
                .collect();
            let role = match rng.random_range(0..6) {
                0 => Role::Exposure,
                1 => Role::Outcome,
                2 => Role::Adjusted,
                _ => Role::Plain,
            };
            NodeMark {
                name: format!("{word}{i}"),
                hidden: rng.random_bool(0.15),
                role,
            }
        })
        .collect();
    let mut edges = Vec::new();
    for a in 0..n {
        for b in a + 1..n {
            if rng.random_bool(p) {
                edges.push(EdgeMark {
                    from: order[a],
                    to: order[b],
                    highlight: rng.random_bool(0.2),
                });
            }
        }
    }
    GraphPicture {
        title: format!("random graph {seed}"),
        nodes,
        edges,
    }
}

fn inside(b: &NodeBox, x: f64, y: f64) -> bool {
    x > b.x + 1e-6 && x < b.x + b.width - 1e-6 && y > b.y + 1e-6 && y < b.y + b.height - 1e-6
}

/// Two rectangles overlap when their projections on both axes overlap
/// (separating axis theorem for axis-aligned boxes).
#[test]
fn boxes_never_overlap_on_100_random_graphs() {
    for seed in 0..100 {
        let g = random_dag(seed);
        let l = layout(&g).expect("a DAG lays out");
        for i in 0..l.boxes.len() {
            for j in i + 1..l.boxes.len() {
                assert!(
                    !l.boxes[i].overlaps(&l.boxes[j], 8.0),
                    "seed {seed}: boxes {i} and {j} overlap or touch"
                );
            }
            let b = &l.boxes[i];
            assert!(
                b.x >= 0.0 && b.y >= 0.0 && b.x + b.width <= l.width && b.y + b.height <= l.height,
                "seed {seed}: box {i} off the sheet"
            );
        }
    }
}

/// Longest-path layering (Sugiyama, Tagawa & Toda 1981): every arrow goes
/// to a lower layer, sources sit in layer 0, and every other node sits one
/// layer below its lowest parent.
#[test]
fn layers_follow_the_longest_path_from_a_source() {
    for seed in 0..100 {
        let g = random_dag(seed);
        let l = layout(&g).expect("a DAG lays out");
        for (v, layer) in l.layers.iter().enumerate() {
            let parents: Vec<usize> = g
                .edges
                .iter()
                .filter(|e| e.to == v)
                .map(|e| l.layers[e.from])
                .collect();
            let expected = parents.iter().map(|p| p + 1).max().unwrap_or(0);
            assert_eq!(*layer, expected, "seed {seed}: node {v}");
        }
        for e in &g.edges {
            let (from, to) = (&l.boxes[e.from], &l.boxes[e.to]);
            assert!(
                from.y + from.height < to.y,
                "seed {seed}: arrow {}→{} does not point down",
                e.from,
                e.to
            );
        }
    }
}

/// Each arrow starts on the bottom edge of its cause's box and its tip lies
/// on the top edge of its effect's box; the waypoints in between lie outside
/// every box, and so do the vertical runs through skipped layers.
#[test]
fn arrows_touch_their_boxes_and_avoid_all_others() {
    for seed in 0..100 {
        let g = random_dag(seed);
        let l = layout(&g).expect("a DAG lays out");
        for r in &l.routes {
            let (from, to) = (&l.boxes[r.from], &l.boxes[r.to]);
            let (sx, sy) = r.points[0];
            let (tx, ty) = r.points[r.points.len() - 1];
            assert!(
                (sy - (from.y + from.height)).abs() < 1e-9
                    && sx > from.x
                    && sx < from.x + from.width,
                "seed {seed}: arrow {}→{} start",
                r.from,
                r.to
            );
            assert!(
                (ty - to.y).abs() < 1e-9 && tx > to.x && tx < to.x + to.width,
                "seed {seed}: arrow {}→{} tip",
                r.from,
                r.to
            );
            let middle = &r.points[1..r.points.len() - 1];
            assert_eq!(middle.len() % 2, 0);
            for pair in middle.chunks(2) {
                let ((x, y0), (x1, y1)) = (pair[0], pair[1]);
                assert_eq!(x, x1, "seed {seed}: waypoint runs are vertical");
                for b in &l.boxes {
                    let steps = 8;
                    for k in 0..=steps {
                        let y = y0 + (y1 - y0) * k as f64 / steps as f64;
                        assert!(
                            !inside(b, x, y),
                            "seed {seed}: arrow {}→{} runs through a box",
                            r.from,
                            r.to
                        );
                    }
                }
            }
        }
    }
}

/// With DejaVu Sans loaded, the rendered extent of every node label (the
/// font's own metrics, laid out by usvg) lies inside its box.
#[test]
fn labels_fit_inside_their_boxes_with_a_real_font() {
    let opt = dejavu();
    for seed in 0..30 {
        let g = random_dag(seed);
        let l = layout(&g).expect("a DAG lays out");
        let svg = graph_figure(&g).expect("draws");
        let (_, texts) = text_boxes(&svg, &opt);
        for (name, b) in g.nodes.iter().map(|n| &n.name).zip(&l.boxes) {
            let (_, rect) = texts
                .iter()
                .find(|(t, _)| t == name)
                .unwrap_or_else(|| panic!("label {name} drawn"));
            assert!(
                rect.left() >= b.x as f32 && rect.right() <= (b.x + b.width) as f32,
                "seed {seed}: label {name} ({:?}) spills out of its box {b:?}",
                rect
            );
            assert!(
                rect.top() >= b.y as f32 && rect.bottom() <= (b.y + b.height) as f32,
                "seed {seed}: label {name} vertical"
            );
        }
    }
}

#[test]
fn a_cycle_is_reported_with_a_node_on_it() {
    let node = |n: &str| NodeMark {
        name: n.into(),
        hidden: false,
        role: Role::Plain,
    };
    let g = GraphPicture {
        title: "stream".into(),
        nodes: vec![node("flow"), node("algae"), node("oxygen")],
        edges: vec![
            EdgeMark {
                from: 0,
                to: 1,
                highlight: false,
            },
            EdgeMark {
                from: 1,
                to: 2,
                highlight: false,
            },
            EdgeMark {
                from: 2,
                to: 1,
                highlight: false,
            },
        ],
    };
    let err = layout(&g).unwrap_err();
    assert!(
        matches!(&err, PlotError::Cycle { node, .. } if node == "algae" || node == "oxygen"),
        "{err}"
    );
    expect_test::expect![[r#"graph stream: arrow 2 refers to node number 7, but there are only 3 nodes; fix the arrow's ends"#]].assert_eq(
        &layout(&GraphPicture { edges: vec![g.edges[0], EdgeMark { from: 1, to: 7, highlight: false }], ..g.clone() })
            .unwrap_err()
            .to_string(),
    );
}

/// Writes a few random graphs to /tmp/waypath_graph_*.png for a person to
/// look at: `cargo test --release -p waypath --test plot_graph_layout -- --ignored`.
#[test]
#[ignore]
fn write_random_graphs_for_viewing() {
    let opt = dejavu();
    for seed in [3, 17, 42, 77] {
        let svg = graph_figure(&random_dag(seed)).expect("draws");
        let tree = usvg::Tree::from_str(&svg, &opt).expect("parses");
        let size = tree.size().to_int_size();
        let mut pixmap = resvg::tiny_skia::Pixmap::new(size.width(), size.height()).expect("size");
        resvg::render(
            &tree,
            resvg::tiny_skia::Transform::identity(),
            &mut pixmap.as_mut(),
        );
        pixmap
            .save_png(format!("/tmp/waypath_graph_{seed}.png"))
            .expect("png written");
    }
}

/// The marks the picture asks for appear: one dashed box per unobserved
/// node, a blue outline per exposure and a vermillion one per outcome
/// (Okabe & Ito 2008 colours, recalled), and the legend names each mark used.
#[test]
fn hidden_exposure_and_outcome_marks_are_drawn_and_explained() {
    for seed in 0..20 {
        let g = random_dag(seed);
        let svg = graph_figure(&g).expect("draws");
        let doc = roxmltree::Document::parse(&svg).expect("well-formed");
        let boxes: Vec<_> = doc
            .descendants()
            .filter(|n| {
                n.has_tag_name("rect")
                    && n.attribute("rx") == Some("6")
                    && n.attribute("stroke").is_some()
            })
            .collect();
        assert_eq!(
            boxes.len(),
            g.nodes.len(),
            "seed {seed}: one outlined box per node"
        );
        let dashed = boxes
            .iter()
            .filter(|n| n.attribute("stroke-dasharray").is_some())
            .count();
        assert_eq!(
            dashed,
            g.nodes.iter().filter(|n| n.hidden).count(),
            "seed {seed}: dashed boxes"
        );
        for (role, colour) in [(Role::Exposure, "#0072B2"), (Role::Outcome, "#D55E00")] {
            let drawn = boxes
                .iter()
                .filter(|n| n.attribute("stroke") == Some(colour))
                .count();
            assert_eq!(
                drawn,
                g.nodes.iter().filter(|n| n.role == role).count(),
                "seed {seed}: {role:?} outlines"
            );
        }
        let legend: String = doc
            .descendants()
            .filter(|n| n.attribute("class") == Some("legend"))
            .flat_map(|n| n.descendants().filter_map(|t| t.text()))
            .collect();
        for (present, word) in [
            (g.nodes.iter().any(|n| n.hidden), "unobserved"),
            (
                g.nodes.iter().any(|n| n.role == Role::Adjusted),
                "adjusted for",
            ),
            (g.edges.iter().any(|e| e.highlight), "open path"),
        ] {
            assert_eq!(
                legend.contains(word),
                present,
                "seed {seed}: legend entry {word}"
            );
        }
    }
}
