//! Probe binaries for the Python reference checks: each `src/bin/probe_<area>.rs`
//! reads one JSON request on stdin and writes one JSON answer on stdout.

use std::io::Read;

/// Read the whole of stdin as JSON.
pub fn read_request() -> serde_json::Value {
    let mut text = String::new();
    std::io::stdin().read_to_string(&mut text).expect("stdin is readable");
    serde_json::from_str(&text).expect("request is JSON")
}

/// Write an answer as JSON on stdout.
pub fn write_answer(answer: &serde_json::Value) {
    println!("{answer}");
}
