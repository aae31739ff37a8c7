//! Probe for the columnar-table reference checks (built with the feature
//! `columnar`).
//!
//! Request (JSON on stdin): `path` (a CSV, Parquet or Arrow file, or a folder
//! of Parquet files) and `body` (the lines of a `table` cell body). Answers
//! `summary` (the cell's table summary), `rows_read`, `dropped_missing` and
//! `columns` (name → `{"kind", "values"}`, values as numbers, booleans or
//! level labels), or `error` (the sentence a cell would show); and always
//! `on_disk`, whether the probe was built with that feature (its engine's
//! Parquet reader brings the codecs `columnar` alone leaves out).

use serde_json::{json, Map, Value};

use waypath::table::{load_table, parse_table_line, summary_json, ColumnData, TableError, TableSpec};

fn main() {
    let request = waypath_probe::read_request();
    let mut answer = load(&request);
    answer["on_disk"] = json!(cfg!(feature = "on_disk"));
    waypath_probe::write_answer(&answer);
}

fn load(request: &Value) -> Value {
    let path = request["path"].as_str().expect("path is text");
    let body: Vec<&str> = request["body"].as_array().map_or(Vec::new(), |lines| lines.iter().filter_map(Value::as_str).collect());
    let rules: Result<Vec<_>, TableError> = body.into_iter().map(parse_table_line).collect();
    let spec = match rules.and_then(|rules| TableSpec::with_rules("data", path, rules)) {
        Ok(spec) => spec,
        Err(e) => return json!({"error": e.to_string()}),
    };
    let (table, report) = match load_table(&spec) {
        Ok(loaded) => loaded,
        Err(e) => return json!({"error": e.to_string()}),
    };
    let mut columns = Map::new();
    for column in &table.columns {
        let values = match &column.data {
            ColumnData::Real(v) => json!(v),
            ColumnData::Count(v) => json!(v),
            ColumnData::Binary(v) => json!(v),
            ColumnData::Category { codes, levels } => json!(codes.iter().map(|&c| &levels[c as usize]).collect::<Vec<_>>()),
        };
        columns.insert(column.name.clone(), json!({"kind": column.data.kind().name(), "values": values}));
    }
    json!({
        "summary": summary_json(&table, &report),
        "rows_read": report.rows_read,
        "dropped_missing": report.dropped_missing,
        "columns": columns,
    })
}
