//! `compare routes` beyond one set: the graph's other minimal adjustment
//! sets as routes of their own (total and direct effects, capped at three
//! further sets), and, for a direct effect, the joint model's controlled
//! direct effect (x set, the mediator next to y held).
//!
//! The rows are simulated here, outside the library, from a linear-Gaussian
//! model (seeded xorshift and Box–Muller normals, `common::linear_sem`'s
//! stream). The truths come from path tracing (Wright 1934): the total
//! effect is the sum over directed paths from x to y of the products of
//! their coefficients, and the controlled direct effect of a linear model is
//! the coefficient of the edge x → y itself (every other directed path runs
//! through a mediator that the intervention holds).

mod common;

use common::cells::{last_json, run};

use std::path::Path;

use common::linear_sem::Stream;
use serde_json::Value;
use waypath::cells::Session;

/// A linear-Gaussian model: nodes in causal order, edges with coefficients.
struct Linear {
    nodes: Vec<&'static str>,
    edges: Vec<(&'static str, &'static str, f64)>,
}

impl Linear {
    /// Path tracing: the sum over directed paths from `a` to `b` of the
    /// products of their coefficients.
    fn total(&self, a: &str, b: &str) -> f64 {
        if a == b {
            return 1.0;
        }
        self.edges.iter().filter(|(from, _, _)| *from == a).map(|(_, to, c)| c * self.total(to, b)).sum()
    }

    fn edge(&self, a: &str, b: &str) -> f64 {
        self.edges.iter().find(|(from, to, _)| *from == a && *to == b).map_or(0.0, |e| e.2)
    }

    /// `n` rows, each node its parents' weighted sum plus a standard normal,
    /// written as a CSV in `dir`.
    fn write(&self, dir: &Path, file: &str, n: usize, seed: u64) {
        let mut s = Stream::new(seed);
        let mut text = self.nodes.join(",") + "\n";
        for _ in 0..n {
            let mut values: Vec<f64> = Vec::with_capacity(self.nodes.len());
            for node in &self.nodes {
                let parents: f64 = self.edges.iter().filter(|e| e.1 == *node).map(|e| e.2 * values[self.nodes.iter().position(|p| *p == e.0).unwrap()]).sum();
                values.push(parents + s.normal());
            }
            text += &values.iter().map(|v| format!("{v:.6}")).collect::<Vec<_>>().join(",");
            text.push('\n');
        }
        std::fs::write(dir.join(file), text).unwrap();
    }
}

/// c confounds x and y through w; m carries part of x's effect.
fn plant() -> Linear {
    Linear {
        nodes: vec!["c", "x", "w", "m", "y"],
        edges: vec![("c", "x", 0.8), ("c", "w", 0.9), ("w", "y", 0.7), ("x", "m", 0.6), ("m", "y", 0.5), ("x", "y", 0.4)],
    }
}

fn session_in(name: &str, model: &Linear, n: usize, seed: u64) -> (Session, std::path::PathBuf) {
    let dir = std::env::temp_dir().join(format!("wp-routes-{name}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    model.write(&dir, "rows.csv", n, seed);
    let mut session = Session::new(&dir);
    let columns: String = model.nodes.iter().map(|c| format!("\n    {c}: real")).collect();
    last_json(&mut session, &format!("table runs from \"rows.csv\":{columns}"));
    (session, dir)
}

fn covers(route: &Value, truth: f64) {
    let (lo, hi) = (route["lower"].as_f64().unwrap(), route["upper"].as_f64().unwrap());
    assert!(lo <= truth && truth <= hi, "truth {truth} outside [{lo}, {hi}]: {route}");
}

fn set_of(route: &Value) -> Vec<String> {
    let mut set: Vec<String> = route["adjustment_set"].as_array().unwrap().iter().map(|v| v.as_str().unwrap().to_string()).collect();
    set.sort();
    set
}

const PLANT_GRAPH: &str = "graph plant:\n    c -> x, w\n    w -> y\n    x -> m -> y\n    x -> y";

#[test]
fn direct_effect_routes_cover_the_edge_coefficient() {
    let truth_model = plant();
    let truth = truth_model.edge("x", "y");
    let (mut session, dir) = session_in("direct", &truth_model, 3000, 42);
    last_json(&mut session, PLANT_GRAPH);
    let cell = "compare routes for direct effect of x on y in plant using runs intervals 98% with laplace seed 5";
    let out = run(&mut session, cell);
    let plain = out.displays.last().map(|d| d.plain.clone()).unwrap_or_default();
    eprintln!("{plain}");
    assert!(plain.starts_with("direct effect of x on y in plant, ") && plain.contains(": 3 routes"), "{plain}");
    assert!(plain.contains("joint model (controlled direct effect, m = "), "{plain}");
    // y's parents besides x are w and m, a set fitted above: the note says the routes coincide.
    assert!(plain.contains("y's parents other than x (w, m) are also a set fitted above"), "{plain}");
    let json = last_json(&mut session, cell);
    // The single-door sets: {c, m} and {m, w}, one the answer's, one a further route.
    let others = json["other_sets"].as_array().unwrap();
    assert_eq!(others.len(), 1, "{json}");
    let mut sets = vec![set_of(&json["adjustment"]), set_of(&others[0])];
    sets.sort();
    assert_eq!(sets, vec![vec!["c".to_string(), "m".to_string()], vec!["m".to_string(), "w".to_string()]]);
    let joint = &json["joint"];
    assert_eq!(joint["route"], "controlled direct effect", "{json}");
    assert_eq!(joint["held"][0][0], "m", "{joint}");
    for route in [&json["adjustment"], &others[0], joint] {
        covers(route, truth);
    }
    covers(&json["difference"], 0.0);
    covers(&others[0]["difference"], 0.0);
    // The total effect is far from the direct one here, so a route that
    // let the mediator move would miss.
    assert!((truth_model.total("x", "y") - truth).abs() > 0.25);
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn a_hidden_cause_of_the_outcome_and_its_parent_closes_the_joint_route() {
    let truth_model = plant();
    let (mut session, dir) = session_in("hidden", &truth_model, 600, 43);
    last_json(&mut session, &format!("{PLANT_GRAPH}\n    hidden h -> w, y"));
    let json = last_json(&mut session, "compare routes for direct effect of x on y in plant using runs with laplace seed 5");
    assert!(json["joint"].is_null(), "{json}");
    let notes: Vec<&str> = json["notes"].as_array().unwrap().iter().filter_map(Value::as_str).collect();
    assert!(notes.iter().any(|n| n.contains("hidden h drives y and w") && n.contains("no joint route")), "{notes:?}");
    // w now opens x ← c → w ← h → y when held, so only {c, m} qualifies.
    assert_eq!(set_of(&json["adjustment"]), vec!["c".to_string(), "m".to_string()]);
    assert!(json["other_sets"].as_array().unwrap().is_empty(), "{json}");
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn other_sets_of_a_total_effect_cover_the_path_traced_truth() {
    let truth_model = plant();
    let truth = truth_model.total("x", "y");
    let (mut session, dir) = session_in("total", &truth_model, 2000, 47);
    last_json(&mut session, PLANT_GRAPH);
    let json = last_json(&mut session, "compare routes for total effect of x on y in plant using runs intervals 98% with laplace seed 5");
    let others = json["other_sets"].as_array().unwrap();
    assert_eq!(others.len(), 1, "{json}");
    let mut sets = vec![set_of(&json["adjustment"]), set_of(&others[0])];
    sets.sort();
    assert_eq!(sets, vec![vec!["c".to_string()], vec!["w".to_string()]]);
    for route in [&json["adjustment"], &json["joint"], &others[0]] {
        covers(route, truth);
    }
    covers(&others[0]["difference"], 0.0);
    std::fs::remove_dir_all(&dir).ok();
}

/// Three confounders, each blockable at itself or at its child on the way
/// to y: 2³ = 8 minimal sets, the first the answer's, three more fitted,
/// four named and left out.
#[test]
fn further_sets_are_capped_and_the_rest_named() {
    let model = Linear {
        nodes: vec!["c1", "c2", "c3", "x", "w1", "w2", "w3", "y"],
        edges: vec![
            ("c1", "x", 0.5),
            ("c2", "x", 0.5),
            ("c3", "x", 0.5),
            ("c1", "w1", 0.8),
            ("c2", "w2", 0.8),
            ("c3", "w3", 0.8),
            ("w1", "y", 0.6),
            ("w2", "y", 0.6),
            ("w3", "y", 0.6),
            ("x", "y", 0.3),
        ],
    };
    let (mut session, dir) = session_in("cap", &model, 800, 53);
    last_json(&mut session, "graph many:\n    c1 -> x, w1\n    c2 -> x, w2\n    c3 -> x, w3\n    w1 -> y\n    w2 -> y\n    w3 -> y\n    x -> y");
    let json = last_json(&mut session, "compare routes for total effect of x on y in many using runs intervals 98% with laplace seed 5");
    let others = json["other_sets"].as_array().unwrap();
    assert_eq!(others.len(), 3, "{json}");
    let notes: Vec<&str> = json["notes"].as_array().unwrap().iter().filter_map(Value::as_str).collect();
    assert!(notes.iter().any(|n| n.starts_with("4 further sets also qualify and are not fitted (at most 3")), "{notes:?}");
    let truth = model.total("x", "y");
    for route in std::iter::once(&json["adjustment"]).chain(others.iter()) {
        covers(route, truth);
    }
    std::fs::remove_dir_all(&dir).ok();
}
