//! `table NAME from "FILE":` — read a CSV (or, with the feature `columnar`,
//! Parquet or Arrow data) into the session.

use super::grammar::TABLE;
use super::{form_error, unquote};
use crate::cells::output::{html_block, html_list, CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::{RunControl, Session};
use crate::table::columnar::folder_parts;
use crate::table::{load_table_with_cancel, parse_table_line, summary_json, LoadReport, Table, TableSpec};

/// Read the table, store it, and show its schema and what loading did.
pub(crate) fn table(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let (name, path) = parse_header(st.head()).ok_or_else(|| form_error(st, TABLE.usage))?;
    let mut spec = TableSpec::new(name, session.resolve(path));
    session.data_files.remember(&spec.path);
    if spec.path.is_dir() {
        // A folder of Parquet files: each of them is data not to be written over.
        for part in folder_parts(&spec.path).unwrap_or_default() {
            session.data_files.remember(&part);
        }
    }
    for line in &st.body {
        let rule = parse_table_line(&line.text).map_err(|e| CellError::at(line.number, e.to_string()))?;
        spec.add_rule(rule).map_err(|e| CellError::at(line.number, e.to_string()))?;
    }
    if spec.on_disk {
        return on_disk(session, &spec, name, path, st, control);
    }
    let (mut table, mut report) = load_table_with_cancel(&spec, control.cancel).map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    table.name = name.to_string();
    report.source = path.to_string();
    let display = describe(&table, &report);
    session.put_table(name, table);
    Ok(vec![display])
}

/// A table whose rows stay in their Parquet file or folder (`stay on disk`).
#[cfg(feature = "on_disk")]
fn on_disk(session: &mut Session, spec: &TableSpec, name: &str, path: &str, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    #[cfg(feature = "across_machines")]
    let opened = crate::table::on_disk::DiskTable::open_across(spec, &crate::model::plan_codec::plan_codecs(), control.cancel);
    #[cfg(not(feature = "across_machines"))]
    let opened = crate::table::on_disk::DiskTable::open(spec, control.cancel);
    let mut table = opened.map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    table.report.source = path.to_string();
    table.source = path.to_string();
    let display = describe_on_disk(name, &table);
    session.put_disk_table(name, table);
    Ok(vec![display])
}

/// Without the feature: the command that builds it.
#[cfg(not(feature = "on_disk"))]
fn on_disk(_: &mut Session, spec: &TableSpec, _: &str, path: &str, st: &Statement, _: &RunControl) -> Result<Vec<Display>, CellError> {
    let (line, feature) = if spec.scheduler.is_some() { ("stay on disk across machines", "across_machines") } else { ("stay on disk", "on_disk") };
    Err(CellError::at(
        st.header.number,
        format!(
            "{path}: \"{line}\" needs a Waypath built with the cargo feature \"{feature}\" (cargo build --release \
             -p waypath-kernel --features {feature}); without the line the table is loaded into memory"
        ),
    ))
}

/// The columns of a table on disk and what its rules did to the rows.
#[cfg(feature = "on_disk")]
fn describe_on_disk(name: &str, table: &crate::table::on_disk::DiskTable) -> Display {
    let heading = format!("table {name}: {} rows × {} columns, staying on disk in {}", table.rows(), table.columns.len(), table.source);
    let mut grid = Grid::new(&["column", "kind", "unit", "levels (in order)", "missing", "kind was"]).numeric_columns(&[4]);
    let reports = table.report.by_name();
    for column in table.columns.iter().take(COLUMNS_SHOWN) {
        let col_report = reports.get(column.name.as_str());
        grid.push(vec![
            column.name.clone(),
            column.kind.name().to_string(),
            column.unit.clone().unwrap_or_default(),
            column.levels.as_deref().map(level_list).unwrap_or_else(|| if column.text { "(not declared)".into() } else { String::new() }),
            col_report.map_or(0, |c| c.missing).to_string(),
            if col_report.is_some_and(|c| c.inferred) { "from the stored type" } else { "declared" }.to_string(),
        ]);
    }
    let mut notes = load_notes(&table.report);
    let engine = match table.engine.scheduler() {
        Some(scheduler) => format!("the executors of the scheduler at {scheduler} (Apache Ballista) counted them and run"),
        None => "the embedded engine counted them and plans".to_string(),
    };
    notes.push(format!(
        "the rows stay on disk: {engine} every model's sums over the file; statements that need rows in memory \
         (contrast, check, score, robustness …) are refused"
    ));
    let mut plain = format!("{heading}\n{}", grid.to_text());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    let columns: Vec<serde_json::Value> = table
        .columns
        .iter()
        .map(|c| serde_json::json!({"name": c.name, "kind": c.kind.name(), "levels": c.levels, "missing": reports.get(c.name.as_str()).map_or(0, |r| r.missing)}))
        .collect();
    let json = serde_json::json!({"name": name, "rows": table.rows(), "columns": columns, "on_disk": true, "scheduler": table.engine.scheduler(), "load": table.report});
    Display { plain, html: Some(html_block(&heading, &[grid.to_html(), html_list(&notes)])), svg: None, json: Some(json) }
}

/// `table NAME from "FILE"` → (NAME, FILE).
fn parse_header(head: &str) -> Option<(&str, &str)> {
    let ([name, path], _) = TABLE.read_n(head).ok()?;
    let path = unquote(path)?;
    if path.is_empty() || !is_name(name) {
        return None;
    }
    Some((name, path))
}

/// A name of letters, digits and `_`, not starting with a digit.
pub(crate) fn is_name(s: &str) -> bool {
    let mut chars = s.chars();
    chars.next().is_some_and(|c| c.is_alphabetic() || c == '_') && chars.all(|c| c.is_alphanumeric() || c == '_')
}

/// A table already in the session (made by a statement or a Rust cell).
pub(crate) fn describe_loaded(table: &Table) -> Display {
    let heading = format!("table {}: {} rows × {} columns", table.name, table.nrows(), table.columns.len());
    let mut grid = Grid::new(&["column", "kind", "unit", "levels (in order)"]);
    for column in table.columns.iter().take(COLUMNS_SHOWN) {
        grid.push(vec![
            column.name.clone(),
            column.data.kind().name().to_string(),
            column.unit.clone().unwrap_or_default(),
            column.data.levels().map(level_list).unwrap_or_default(),
        ]);
    }
    let columns: Vec<serde_json::Value> = table
        .columns
        .iter()
        .map(|c| serde_json::json!({"name": c.name, "kind": c.data.kind().name(), "levels": c.data.levels(), "missing": 0}))
        .collect();
    let json = serde_json::json!({"name": table.name, "rows": table.nrows(), "columns": columns, "dropped": 0});
    let notes: Vec<String> = columns_not_shown(table).into_iter().collect();
    let mut plain = format!("{heading}\n{}", grid.to_text());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    Display {
        plain,
        html: Some(html_block(&heading, &[grid.to_html(), if notes.is_empty() { String::new() } else { html_list(&notes) }])),
        svg: None,
        json: Some(json),
    }
}

fn describe(table: &Table, report: &LoadReport) -> Display {
    let heading = format!(
        "table {}: {} rows × {} columns from {}",
        table.name,
        table.nrows(),
        table.columns.len(),
        report.source
    );
    let mut grid = Grid::new(&["column", "kind", "unit", "levels (in order)", "missing", "kind was"]).numeric_columns(&[4]);
    let reports = report.by_name();
    for column in table.columns.iter().take(COLUMNS_SHOWN) {
        let col_report = reports.get(column.name.as_str());
        grid.push(vec![
            column.name.clone(),
            column.data.kind().name().to_string(),
            column.unit.clone().unwrap_or_default(),
            column.data.levels().map(level_list).unwrap_or_default(),
            col_report.map_or(0, |c| c.missing).to_string(),
            if col_report.is_some_and(|c| c.inferred) { "inferred" } else { "declared" }.to_string(),
        ]);
    }
    let mut notes = load_notes(report);
    notes.extend(columns_not_shown(table));
    let mut plain = format!("{heading}\n{}", grid.to_text());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    Display {
        plain,
        html: Some(html_block(&heading, &[grid.to_html(), html_list(&notes)])),
        svg: None,
        json: Some(summary_json(table, report)),
    }
}

/// Columns listed in a table's written summary; the JSON lists them all.
const COLUMNS_SHOWN: usize = 200;

/// The sentence that says how many columns the written summary leaves out.
fn columns_not_shown(table: &Table) -> Option<String> {
    let hidden = table.columns.len().saturating_sub(COLUMNS_SHOWN);
    (hidden > 0).then(|| {
        format!("the list above shows the first {COLUMNS_SHOWN} columns; {hidden} more are in the table (every column is in the result's JSON)")
    })
}

/// Level labels in order; long lists show the first few and the count.
fn level_list(levels: &[String]) -> String {
    const SHOWN: usize = 6;
    if levels.len() <= SHOWN {
        levels.join(", ")
    } else {
        format!("{}, … ({} levels)", levels[..SHOWN].join(", "), levels.len())
    }
}

/// Sentences saying which rows were left out and why (nothing is dropped silently).
fn load_notes(report: &LoadReport) -> Vec<String> {
    let mut notes = vec![format!("{} data rows read", report.rows_read)];
    if report.dropped_missing > 0 {
        const NAMED: usize = 20;
        let with_missing: Vec<_> = report.columns.iter().filter(|c| c.missing > 0).collect();
        let mut by_column: Vec<String> =
            with_missing.iter().take(NAMED).map(|c| format!("{} in {}", c.missing, c.name)).collect();
        if with_missing.len() > NAMED {
            by_column.push(format!("and {} more columns", with_missing.len() - NAMED));
        }
        notes.push(format!(
            "drop missing: {} rows left out (missing values: {})",
            report.dropped_missing,
            by_column.join(", ")
        ));
    }
    for f in &report.filters {
        notes.push(format!("keep where {}: kept {} of {} rows, left out {}", f.condition, f.kept, f.rows_before, f.dropped));
    }
    if report.dropped() == 0 {
        notes.push("no rows were left out".to_string());
    }
    notes
}
