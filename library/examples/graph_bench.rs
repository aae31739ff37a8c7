//! Graph questions on a large seeded random graph: 80 observed nodes and
//! 400 edges (each edge from an earlier to a later node, so it is acyclic),
//! with `ask total effect` and `ask direct effect` for 40 pairs that have a
//! directed path, and one path listing on a dense 14-node graph. Prints the
//! slowest and the median answer time.
//!
//! `cargo run --release -p waypath --example graph_bench`
//!
//! The target (issue 12) is every answer in under a second.

use std::time::Instant;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};

use waypath::graph::{Graph, GraphBuilder};

fn random_graph(rng: &mut StdRng, nodes: usize, edges: usize) -> Graph {
    let mut builder = GraphBuilder::new("bench");
    for i in 0..nodes {
        builder.add_node(&format!("v{i}"), false);
    }
    while builder.edge_count() < edges {
        let a = rng.random_range(0..nodes);
        let b = rng.random_range(0..nodes);
        if a < b {
            builder.add_edge(&format!("v{a}"), &format!("v{b}"));
        }
    }
    builder.finish().expect("acyclic by construction")
}

fn main() {
    let mut rng = StdRng::seed_from_u64(80_400);
    let graph = random_graph(&mut rng, 80, 400);
    let mut times = Vec::new();
    let mut asked = 0;
    while asked < 40 {
        let x = format!("v{}", rng.random_range(0..40));
        let y = format!("v{}", rng.random_range(40..80));
        if !graph.descendants(&x).expect("node").contains(&y.as_str()) {
            continue;
        }
        asked += 1;
        for direct in [false, true] {
            let started = Instant::now();
            let answer = if direct { graph.direct_effect(&x, &y) } else { graph.total_effect(&x, &y) }.expect("answer");
            times.push(started.elapsed().as_secs_f64());
            let kind = if direct { "direct" } else { "total" };
            println!(
                "{kind:6} {x:>3} -> {y:>3}: {} set(s){}, {:.2} ms",
                answer.adjustment_sets.len(),
                if answer.search_complete { "" } else { " (cut)" },
                times[times.len() - 1] * 1e3
            );
        }
    }
    times.sort_by(f64::total_cmp);
    println!("effect questions: median {:.2} ms, slowest {:.2} ms", times[times.len() / 2] * 1e3, times[times.len() - 1] * 1e3);

    let mut dense = GraphBuilder::new("dense");
    for i in 0..14 {
        for j in i + 1..14 {
            dense.add_edge(&format!("n{i}"), &format!("n{j}"));
        }
    }
    let dense = dense.finish().expect("acyclic");
    let started = Instant::now();
    let never = std::sync::atomic::AtomicBool::new(false);
    let listing = dense.path_listing("n0", "n13", &[] as &[&str], &never).expect("paths");
    println!(
        "paths n0 -> n13 in a complete 14-node DAG: {} listed (complete: {}), {} directed, {:.2} ms",
        listing.paths.len(),
        listing.complete,
        listing.directed_paths,
        started.elapsed().as_secs_f64() * 1e3
    );
}
