//! Running cells in a session from a test: one cell with no interrupt and
//! no progress, and the last JSON structure a cell that must succeed shows.

#![allow(dead_code)] // each test file uses part of the helpers

use std::sync::atomic::AtomicBool;

use serde_json::Value;
use waypath::cells::{CellOutcome, RunControl, Session};

pub fn run(session: &mut Session, cell: &str) -> CellOutcome {
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress })
}

pub fn last_json(session: &mut Session, cell: &str) -> Value {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{cell}\n{}", out.error.map(|e| e.describe()).unwrap_or_default());
    out.displays.iter().rev().find_map(|d| d.json.clone()).expect("a JSON structure")
}
