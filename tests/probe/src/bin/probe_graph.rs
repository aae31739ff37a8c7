//! Probe for the graph reference checks.
//!
//! Request: `{"graphs": [{"name", "nodes": [{"name", "hidden"}], "edges": [[from, to]],
//! "lines": [..] (optional, cell body lines), "dot": ".." (optional), "queries": [..]}]}`.
//! A query is one of `{"kind": "dsep", "xs", "ys", "zs"}`, `{"kind": "total" | "direct",
//! "exposure", "outcome"}`, `{"kind": "paths" | "listing", "from", "to", "given"}`,
//! `{"kind": "implications"}`, `{"kind": "identify", "set": [..], "watch": [..]}` (the complete
//! algorithm: `{"verdict": "identified", "formula"}` or `{"verdict": "not_identified", "hedge"}`),
//! `{"kind": "front_door", "exposure", "outcome"}` (`[set, formula]` or null),
//! `{"kind": "instruments", "exposure", "outcome"}` (`[{"node", "given"}…]`),
//! `{"kind": "levels", "set": [x], "watch": [y], "nodes": [{"name", "size"}], "joint": [..],
//! "moment": [..] | null, "x_level", "held": {name: level}}` (the complete algorithm's formula
//! evaluated by `query::formula_levels` on the joint table given over `nodes`, first varying
//! slowest; a real node among `nodes` is given as its drawn values' levels, their weights
//! already in `joint`; with `moment`, `y` is real and not among `nodes`: `{"mean", "mass", "shares", "also_set"}`
//! (`shares`: each level's probability of a discrete `y`, else null), or
//! `{"verdict": "not_identified"}`). `listing` answers with the bounded path listing
//! (`paths`, `complete`, `separated`, `directed_paths`).
//!
//! Answer: `{"graphs": [{"name", "error"?, "order", "answers": [..]}]}`, one answer per
//! query, or `{"error": message}` in its place.

use serde_json::{json, Value};
use std::collections::BTreeMap;
use std::sync::atomic::AtomicBool;

use waypath::graph::{from_dot, Complete, Graph, GraphBuilder, GraphError};
use waypath::query::formula_levels::{effect_on_levels, shares_on_levels, LevelJoint, Support};

fn main() {
    let request = waypath_probe::read_request();
    let graphs: Vec<Value> = request["graphs"].as_array().cloned().unwrap_or_default().iter().map(answer_graph).collect();
    waypath_probe::write_answer(&json!({ "graphs": graphs }));
}

/// Build one graph and answer its queries.
fn answer_graph(spec: &Value) -> Value {
    let name = spec["name"].as_str().unwrap_or("probe");
    let graph = match build(name, spec) {
        Ok(g) => g,
        Err(e) => return json!({ "name": name, "error": e.to_string() }),
    };
    let answers: Vec<Value> = spec["queries"]
        .as_array()
        .cloned()
        .unwrap_or_default()
        .iter()
        .map(|q| answer_query(&graph, q).unwrap_or_else(|e| json!({ "error": e.to_string() })))
        .collect();
    json!({ "name": name, "order": graph.topological_order(), "answers": answers })
}

/// A graph from DOT text, from cell lines, or from node and edge lists.
fn build(name: &str, spec: &Value) -> Result<Graph, GraphError> {
    if let Some(text) = spec["dot"].as_str() {
        return from_dot(name, text);
    }
    let mut builder = GraphBuilder::new(name);
    for line in strings(&spec["lines"]) {
        builder.add_line(&line)?;
    }
    for node in spec["nodes"].as_array().cloned().unwrap_or_default() {
        builder.add_node(node["name"].as_str().unwrap_or(""), node["hidden"].as_bool().unwrap_or(false));
    }
    for edge in spec["edges"].as_array().cloned().unwrap_or_default() {
        builder.add_edge(edge[0].as_str().unwrap_or(""), edge[1].as_str().unwrap_or(""));
    }
    builder.finish()
}

/// Answer one query.
fn answer_query(graph: &Graph, q: &Value) -> Result<Value, GraphError> {
    let text = |key: &str| q[key].as_str().unwrap_or("").to_owned();
    Ok(match q["kind"].as_str().unwrap_or("") {
        "dsep" => json!({ "separated": graph.d_separated(&strings(&q["xs"]), &strings(&q["ys"]), &strings(&q["zs"]))? }),
        "total" => json!(graph.total_effect(&text("exposure"), &text("outcome"))?),
        "direct" => json!(graph.direct_effect(&text("exposure"), &text("outcome"))?),
        "paths" => json!(graph.paths(&text("from"), &text("to"), &strings(&q["given"]))?),
        "listing" => {
            let never = std::sync::atomic::AtomicBool::new(false);
            json!(graph.path_listing(&text("from"), &text("to"), &strings(&q["given"]), &never)?)
        }
        "implications" => json!(graph.implications()),
        "identify" => json!(graph.identify_intervention(&strings(&q["set"]), &strings(&q["watch"]))?),
        "front_door" => json!(graph.front_door(&text("exposure"), &text("outcome"))?),
        "instruments" => json!(graph.instruments_for(&text("exposure"), &text("outcome"))?),
        "levels" => levels(graph, q)?,
        other => json!({ "error": format!("unknown query kind `{other}`") }),
    })
}

/// The complete algorithm's formula evaluated on a given joint table.
fn levels(graph: &Graph, q: &Value) -> Result<Value, GraphError> {
    let (set, watch) = (strings(&q["set"]), strings(&q["watch"]));
    let (formula, also_set) = match graph.identify_intervention(&set, &watch)? {
        Complete::Identified { formula, also_set } => (formula, also_set),
        Complete::NotIdentified { .. } => return Ok(json!({ "verdict": "not_identified" })),
    };
    let nodes: Vec<Support> = q["nodes"]
        .as_array()
        .cloned()
        .unwrap_or_default()
        .iter()
        .map(|n| Support {
            name: n["name"].as_str().unwrap_or("").to_owned(),
            values: (0..n["size"].as_u64().unwrap_or(0)).map(|k| k as f64).collect(),
            labels: None,
            count: false,
            weights: None,
        })
        .collect();
    let numbers = |v: &Value| v.as_array().map(|a| a.iter().filter_map(Value::as_f64).collect::<Vec<f64>>());
    let joint = LevelJoint { sizes: nodes.iter().map(|s| s.values.len()).collect(), p: numbers(&q["joint"]).unwrap_or_default(), moment: numbers(&q["moment"]) };
    let held: BTreeMap<String, usize> = also_set.iter().map(|a| (a.clone(), q["held"][a].as_u64().unwrap_or(0) as usize)).collect();
    let never = AtomicBool::new(false);
    let x_level = q["x_level"].as_u64().unwrap_or(0) as usize;
    let shares = if joint.moment.is_none() { shares_on_levels(&formula, &set[0], &watch[0], x_level, &held, &nodes, &joint, &never).ok() } else { None };
    Ok(match effect_on_levels(&formula, &set[0], &watch[0], x_level, &held, &nodes, &joint, &never) {
        Ok((mean, mass)) => json!({ "mean": mean, "mass": mass, "shares": shares, "also_set": also_set }),
        Err(e) => json!({ "error": e }),
    })
}

/// A JSON list of strings (missing or malformed entries dropped).
fn strings(v: &Value) -> Vec<String> {
    v.as_array().map(|a| a.iter().filter_map(|s| s.as_str().map(str::to_owned)).collect()).unwrap_or_default()
}
