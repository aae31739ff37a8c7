//! Parquet and Arrow IPC files in, typed table out (cargo feature `columnar`).
//!
//! A `table` cell whose file ends in `.parquet`, or names a folder of
//! `.parquet` files, or ends in `.arrow` (the Arrow IPC file format) is read
//! here; every other name goes to the CSV reader in [`super::load`].
//!
//! Why through text: a table must type its columns exactly as a CSV of the
//! same data would (the same inference, declarations, missing values,
//! `keep where` and row accounting), so each stored value is written as the
//! text a CSV would hold (the shortest text that reads back to the same
//! number) and the CSV reader's typing steps take over from there. The
//! file's storage types decide only what can be read at all: numbers,
//! yes/no values and text (plain or dictionary-encoded); dates, bytes and
//! nested values are refused with the column named.
//!
//! Rows are numbered from 1 over the whole source, files of a folder taken
//! in name order; an error about one value names its file, its row group
//! (Parquet) or record batch (Arrow) and its row within that file.
//!
//! Before any value is read, the row counts and sizes the file declares are
//! checked against the memory the machine has, so a file that declares
//! 10^12 rows is refused rather than attempted.
//!
//! Built without the feature, a columnar file is refused with the feature
//! to build, and nothing else changes.

use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;

use super::error::TableError;
use super::report::LoadReport;
use super::rules::TableSpec;
use super::Table;

/// The cargo feature that reads columnar files.
pub const FEATURE: &str = "columnar";

/// How a columnar source is stored.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColumnarFormat {
    /// One `.parquet` file.
    Parquet,
    /// A folder: every `.parquet` file in it, in name order.
    ParquetFolder,
    /// One Arrow IPC file (`.arrow`).
    ArrowIpc,
}

/// The columnar format `path` names, or `None` for a CSV file.
pub fn columnar_format(path: &Path) -> Option<ColumnarFormat> {
    if path.is_dir() {
        return Some(ColumnarFormat::ParquetFolder);
    }
    let extension = path.extension()?.to_str()?.to_ascii_lowercase();
    match extension.as_str() {
        "parquet" => Some(ColumnarFormat::Parquet),
        "arrow" => Some(ColumnarFormat::ArrowIpc),
        _ => None,
    }
}

/// The `.parquet` files of a folder, in name order (other entries are
/// passed over). Also used by the session to guard every file it read.
pub fn folder_parts(folder: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut files = Vec::new();
    for entry in std::fs::read_dir(folder)? {
        let path = entry?.path();
        let is_parquet = path.extension().and_then(|e| e.to_str()).is_some_and(|e| e.eq_ignore_ascii_case("parquet"));
        if is_parquet && path.is_file() {
            files.push(path);
        }
    }
    files.sort();
    Ok(files)
}

/// Loads a columnar source as [`super::load_table`] loads a CSV.
#[cfg(feature = "columnar")]
pub fn load_columnar(
    spec: &TableSpec,
    label: &str,
    format: ColumnarFormat,
    cancel: &AtomicBool,
) -> Result<(Table, LoadReport), TableError> {
    read::load(spec, label, format, cancel)
}

/// Without the feature: a refusal that says what to build.
#[cfg(not(feature = "columnar"))]
pub fn load_columnar(
    _spec: &TableSpec,
    label: &str,
    _format: ColumnarFormat,
    _cancel: &AtomicBool,
) -> Result<(Table, LoadReport), TableError> {
    Err(TableError::FeatureMissing { file: label.into(), feature: FEATURE.into() })
}

#[cfg(feature = "columnar")]
mod read;
