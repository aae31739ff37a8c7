//! Probe that runs notebook cells in one session (built with the feature
//! `on_disk`, for the checks of tables that stay on disk).
//!
//! Request (JSON on stdin): `dir` (the folder relative paths are read from)
//! and `cells` (cell texts, run in order). Answers `cells`: per cell, the
//! JSON of each display, the warnings, and `error` (the sentence a cell
//! would show, or null). Every cell is run, whatever the one before did.

use std::sync::atomic::AtomicBool;

use serde_json::{json, Value};

use waypath::cells::{RunControl, Session};

fn main() {
    let request = waypath_probe::read_request();
    let dir = request["dir"].as_str().unwrap_or(".");
    let mut session = Session::new(dir);
    let cancel = AtomicBool::new(false);
    let control = RunControl { cancel: &cancel, progress: &|_| {} };
    let cells: Vec<Value> = request["cells"]
        .as_array()
        .map_or(&[][..], Vec::as_slice)
        .iter()
        .filter_map(Value::as_str)
        .map(|cell| {
            let outcome = session.run_cell(cell, &control);
            json!({
                "displays": outcome.displays.iter().map(|d| d.json.clone().unwrap_or(Value::Null)).collect::<Vec<_>>(),
                "plain": outcome.displays.iter().map(|d| d.plain.clone()).collect::<Vec<_>>(),
                "warnings": outcome.warnings,
                "error": outcome.error.map(|e| e.to_string()),
            })
        })
        .collect();
    waypath_probe::write_answer(&json!({"cells": cells}));
}
