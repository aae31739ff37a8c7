//! Probe for the diagnostics and interval reference checks.
//!
//! Request: `{"chains": [[draw, ...], ...]}` (one list per chain), or
//! `{"cases": [chains, ...]}` for several parameters at once.
//! Answer: `{"rhat": r, "ess_bulk": b, "ess_tail": t}` (or a list of them
//! under `"cases"`); a value that cannot be computed is `null`.
//!
//! Request `{"interval": {"draws": [...], "mass": m}}` answers
//! `{"quantile": [lower, upper], "hdi": [lower, upper]}` from
//! `waypath::draws`.

use serde_json::{json, Value};
use waypath::draws::{hdi, quantile_interval};
use waypath::infer::diagnostics::diagnose;

fn answer_for(chains: &Value) -> Value {
    let chains: Vec<Vec<f64>> =
        serde_json::from_value(chains.clone()).expect("chains is a list of lists of numbers");
    let slices: Vec<&[f64]> = chains.iter().map(Vec::as_slice).collect();
    let d = diagnose(&slices);
    let num = |x: f64| if x.is_finite() { json!(x) } else { Value::Null };
    json!({"rhat": num(d.rhat), "ess_bulk": num(d.ess_bulk), "ess_tail": num(d.ess_tail)})
}

fn intervals(request: &Value) -> Value {
    let draws: Vec<f64> =
        serde_json::from_value(request["draws"].clone()).expect("draws is a list of numbers");
    let mass = request["mass"].as_f64().expect("mass is a number");
    let q = quantile_interval(&draws, mass).expect("mass in (0, 1) and draws given");
    let h = hdi(&draws, mass).expect("mass in (0, 1) and draws given");
    json!({"quantile": [q.lower, q.upper], "hdi": [h.lower, h.upper]})
}

fn main() {
    let request = waypath_probe::read_request();
    let answer = match request.get("cases") {
        _ if request.get("interval").is_some() => intervals(&request["interval"]),
        Some(Value::Array(cases)) => json!({"cases": cases.iter().map(answer_for).collect::<Vec<_>>()}),
        _ => answer_for(&request["chains"]),
    };
    waypath_probe::write_answer(&answer);
}
