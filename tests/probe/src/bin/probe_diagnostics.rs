//! Probe for the diagnostics reference check.
//!
//! Request: `{"chains": [[draw, ...], ...]}` (one list per chain), or
//! `{"cases": [chains, ...]}` for several parameters at once.
//! Answer: `{"rhat": r, "ess_bulk": b, "ess_tail": t}` (or a list of them
//! under `"cases"`); a value that cannot be computed is `null`.

use serde_json::{json, Value};
use waypath::infer::diagnostics::diagnose;

fn answer_for(chains: &Value) -> Value {
    let chains: Vec<Vec<f64>> =
        serde_json::from_value(chains.clone()).expect("chains is a list of lists of numbers");
    let slices: Vec<&[f64]> = chains.iter().map(Vec::as_slice).collect();
    let d = diagnose(&slices);
    let num = |x: f64| if x.is_finite() { json!(x) } else { Value::Null };
    json!({"rhat": num(d.rhat), "ess_bulk": num(d.ess_bulk), "ess_tail": num(d.ess_tail)})
}

fn main() {
    let request = waypath_probe::read_request();
    let answer = match request.get("cases") {
        Some(Value::Array(cases)) => json!({"cases": cases.iter().map(answer_for).collect::<Vec<_>>()}),
        _ => answer_for(&request["chains"]),
    };
    waypath_probe::write_answer(&answer);
}
