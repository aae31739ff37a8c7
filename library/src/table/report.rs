//! What loading did to the data, for the cell to show beside the table.
//!
//! [`LoadReport`] is plain data (serialisable); [`summary_json`] gives the
//! one JSON shape the cells module renders. Wording and layout belong to the
//! cells module, not here.

use std::collections::HashMap;

use serde::Serialize;
use serde_json::{json, Value};

use super::{ColumnKind, Table};

/// How one column was read.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ColumnReport {
    pub name: String,
    pub kind: ColumnKind,
    /// True when the kind was inferred from the values, not declared.
    pub inferred: bool,
    /// Missing values (empty or `NA`) seen before any row was dropped.
    pub missing: usize,
}

/// Rows kept and dropped by one `keep where` line, in the order applied.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FilterReport {
    /// The condition in canonical form.
    pub condition: String,
    /// Rows before this filter.
    pub rows_before: usize,
    pub kept: usize,
    pub dropped: usize,
}

/// What happened between the file and the table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoadReport {
    /// The file as named in the cell.
    pub source: String,
    /// Data rows in the file (the header not counted).
    pub rows_read: usize,
    /// One entry per column, in file order.
    pub columns: Vec<ColumnReport>,
    /// Rows left out by `drop missing`.
    pub dropped_missing: usize,
    pub filters: Vec<FilterReport>,
}

impl LoadReport {
    /// Each column's report by name, for lookups that stay linear in wide tables.
    pub fn by_name(&self) -> HashMap<&str, &ColumnReport> {
        self.columns.iter().map(|c| (c.name.as_str(), c)).collect()
    }

    /// Columns whose kind was inferred, so the cell can show the schema it guessed.
    pub fn inferred(&self) -> impl Iterator<Item = &ColumnReport> {
        self.columns.iter().filter(|c| c.inferred)
    }

    /// All rows left out: by `drop missing` and by every filter.
    pub fn dropped(&self) -> usize {
        self.dropped_missing + self.filters.iter().map(|f| f.dropped).sum::<usize>()
    }

    /// Rows in the loaded table.
    pub fn rows_kept(&self) -> usize {
        self.rows_read - self.dropped()
    }
}

/// The table summary the cells module renders:
///
/// ```json
/// {"name": "trees", "rows": 38,
///  "columns": [{"name": "rootstock", "kind": "category", "levels": ["dwarf", "standard"], "missing": 0}],
///  "dropped": 2,
///  "filters": [{"condition": "girth > 0", "kept": 38, "dropped": 1}]}
/// ```
///
/// `levels` is null except for categories; `missing` counts the values
/// missing before any row was dropped (0 for a column the report does not
/// know); `dropped` is the rows left out by `drop missing` and filters.
pub fn summary_json(table: &Table, report: &LoadReport) -> Value {
    let reports = report.by_name();
    let columns: Vec<Value> = table
        .columns
        .iter()
        .map(|column| {
            let missing = reports.get(column.name.as_str()).map_or(0, |c| c.missing);
            json!({
                "name": column.name,
                "kind": column.data.kind().name(),
                "levels": column.data.levels(),
                "missing": missing,
            })
        })
        .collect();
    let filters: Vec<Value> = report
        .filters
        .iter()
        .map(|f| json!({"condition": f.condition, "kept": f.kept, "dropped": f.dropped}))
        .collect();
    json!({
        "name": table.name,
        "rows": table.nrows(),
        "columns": columns,
        "dropped": report.dropped(),
        "filters": filters,
    })
}
