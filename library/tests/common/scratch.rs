//! Fresh folders for tests that write files (Parquet tables, executors'
//! work folders), one per test and process so parallel tests never meet.
#![allow(dead_code)] // each test file uses part of it

use std::path::PathBuf;

/// An empty folder `waypath-{kind}-{process}-{name}` in the temporary
/// directory, emptied first if an earlier run left it.
pub fn fresh_folder(kind: &str, name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("waypath-{kind}-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}
