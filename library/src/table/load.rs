//! CSV in, typed table out; also the typing, missing-value and filter steps
//! that [`super::columnar`] shares for Parquet and Arrow files.
//!
//! Loading runs in fixed steps, each with its own errors:
//! 1. read the raw text of every field (the `csv` crate: RFC 4180 quoting,
//!    CRLF or LF line ends, a UTF-8 byte-order mark skipped), checking the
//!    header and that every row has as many fields as the header;
//! 2. type each column as declared, or infer its kind from its non-missing
//!    fields: all binary words or 0/1 → binary; all whole numbers ≥ 0 →
//!    count; more than half numbers → real (the rest are reported as
//!    errors); otherwise category with levels in order of first appearance;
//! 3. apply the missing-value policy (error, or `drop missing`);
//! 4. apply the `keep where` filters in the order written.
//!
//! Raw fields are kept per column in one string buffer, so a million-row file
//! costs a few allocations per column rather than one per field.
//!
//! Rows are numbered as a spreadsheet shows them: the header is row 1, the
//! first data row is row 2 (blank lines, which CSV readers skip, are not
//! counted).

use std::collections::{HashMap, HashSet};
use std::fs::File;
use std::io::{self, Read};
use std::sync::atomic::{AtomicBool, Ordering};

use crate::limits::{check_memory, describe_bytes};

use super::error::TableError;
use super::report::{ColumnReport, FilterReport, LoadReport};
use super::rules::{ColumnDecl, TableSpec};
use super::suggest::near_matches;
use super::values::{self, ValueProblem};
use super::{Column, ColumnData, ColumnKind, Table};

/// How many missing rows an error lists before saying "and N more".
const ROWS_SHOWN: usize = 5;
/// Bytes of memory a loaded table takes per byte of its CSV file (an
/// estimate: the raw fields, their ends and the typed values).
const MEMORY_PER_BYTE: u128 = 4;
/// Rows read between two reads of the cancel flag.
const CANCEL_EVERY: usize = 4096;
/// The number a CSV file's first data row has (the header is row 1).
const CSV_FIRST_ROW: usize = 2;

/// Opens the file the spec names and loads it. The file is named in errors
/// as the spec's path is written.
pub fn load_table(spec: &TableSpec) -> Result<(Table, LoadReport), TableError> {
    load_table_with_cancel(spec, &AtomicBool::new(false))
}

/// [`load_table`], stopping with [`TableError::Interrupted`] soon after
/// `cancel` is set.
pub fn load_table_with_cancel(spec: &TableSpec, cancel: &AtomicBool) -> Result<(Table, LoadReport), TableError> {
    let label = spec.path.display().to_string();
    if let Some(format) = super::columnar::columnar_format(&spec.path) {
        return super::columnar::load_columnar(spec, &label, format, cancel);
    }
    let file = File::open(&spec.path).map_err(|e| io_error(&label, &e))?;
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    // Raw field text, field ends and typed values: about four times the file.
    let bytes = u128::from(size).saturating_mul(MEMORY_PER_BYTE);
    check_memory(&format!("a table from a file of {}", describe_bytes(size as f64)), bytes)
        .map_err(|message| TableError::TooLarge { file: label.as_str().into(), message: message.into() })?;
    Table::from_csv_reader_with_cancel(spec, &label, file, cancel)
}

impl Table {
    /// Loads CSV text from any reader (a file, bytes in memory) under the
    /// spec's name, declarations, missing-value policy and filters;
    /// `source_label` names the data in errors and in the report (the
    /// spec's path is not opened).
    ///
    /// ```
    /// use waypath::table::{Table, TableSpec};
    /// let spec = TableSpec::new("trees", "orchard.csv");
    /// let csv = "rootstock,girth\ndwarf,21.5\nstandard,30.1\n";
    /// let (table, report) = Table::from_csv_reader(&spec, "orchard.csv", csv.as_bytes()).unwrap();
    /// assert_eq!(table.nrows(), 2);
    /// assert_eq!(report.inferred().count(), 2);
    /// ```
    pub fn from_csv_reader<R: Read>(
        spec: &TableSpec,
        source_label: &str,
        reader: R,
    ) -> Result<(Table, LoadReport), TableError> {
        Table::from_csv_reader_with_cancel(spec, source_label, reader, &AtomicBool::new(false))
    }

    /// [`Table::from_csv_reader`], reading `cancel` every few thousand rows
    /// and stopping with [`TableError::Interrupted`] once it is set.
    pub fn from_csv_reader_with_cancel<R: Read>(
        spec: &TableSpec,
        source_label: &str,
        reader: R,
        cancel: &AtomicBool,
    ) -> Result<(Table, LoadReport), TableError> {
        let raw = RawTable::read(source_label, reader, cancel)?;
        check_declarations(spec, source_label, &raw.headers)?;
        let typed = type_columns(spec, source_label, &raw.headers, &raw.columns, CSV_FIRST_ROW)?;
        let rows_read = raw.rows;
        drop(raw);
        let (table, report) = apply_missing_policy(spec, source_label, typed, rows_read, CSV_FIRST_ROW)?;
        apply_filters(spec, source_label, table, report)
    }
}

pub(super) fn io_error(file: &str, error: &io::Error) -> TableError {
    let reason = match error.kind() {
        io::ErrorKind::NotFound => "there is no such file".to_string(),
        io::ErrorKind::PermissionDenied => "permission was denied".to_string(),
        _ => error.to_string(),
    };
    TableError::Io { file: file.into(), reason: reason.into() }
}

/// Maps a `csv` reader error; `row` is the row being read, used when the
/// error carries no position.
fn csv_error(file: &str, error: csv::Error, row: usize) -> TableError {
    match error.kind() {
        csv::ErrorKind::Io(e) => io_error(file, e),
        csv::ErrorKind::Utf8 { pos, .. } => TableError::NotUtf8 {
            file: file.into(),
            row: pos.as_ref().map_or(row, |p| p.record() as usize + 1),
        },
        _ => TableError::Io { file: file.into(), reason: error.to_string().into() },
    }
}

/// The raw text of one column's fields, back to back.
#[derive(Default)]
pub(super) struct RawColumn {
    text: String,
    ends: Vec<usize>,
}

impl RawColumn {
    pub(super) fn push(&mut self, field: &str) {
        self.text.push_str(field);
        self.ends.push(self.text.len());
    }

    fn fields(&self) -> impl Iterator<Item = &str> {
        let starts = std::iter::once(0).chain(self.ends.iter().copied());
        starts.zip(self.ends.iter()).map(|(start, &end)| &self.text[start..end])
    }
}

/// Step 1: the header and the raw fields.
struct RawTable {
    headers: Vec<String>,
    columns: Vec<RawColumn>,
    rows: usize,
}

impl RawTable {
    fn read<R: Read>(file: &str, reader: R, cancel: &AtomicBool) -> Result<RawTable, TableError> {
        let mut csv = csv::ReaderBuilder::new()
            .flexible(true)
            .trim(csv::Trim::All)
            .from_reader(reader);
        let headers: Vec<String> = csv
            .headers()
            .map_err(|e| csv_error(file, e, 1))?
            .iter()
            // csv-core skips a byte-order mark; this also covers one split by buffering.
            .map(|h| h.trim_start_matches('\u{feff}').trim().to_string())
            .collect();
        let mut record = csv::StringRecord::new();
        let mut has_row = csv.read_record(&mut record).map_err(|e| csv_error(file, e, 2))?;
        check_header(file, &headers, has_row)?;
        let mut columns: Vec<RawColumn> = headers
            .iter()
            .map(|_| RawColumn { text: String::new(), ends: Vec::new() })
            .collect();
        let mut rows = 0;
        while has_row {
            let row = rows + 2;
            if rows % CANCEL_EVERY == 0 && cancel.load(Ordering::Relaxed) {
                return Err(TableError::Interrupted { file: file.into(), row });
            }
            if record.len() != headers.len() {
                return Err(TableError::RaggedRow {
                    file: file.into(),
                    row,
                    found: record.len(),
                    expected: headers.len(),
                });
            }
            for (column, field) in columns.iter_mut().zip(record.iter()) {
                column.push(field);
            }
            rows += 1;
            has_row = csv.read_record(&mut record).map_err(|e| csv_error(file, e, row + 1))?;
        }
        Ok(RawTable { headers, columns, rows })
    }
}

/// An empty file, a header without rows, unnamed or repeated column names.
fn check_header(file: &str, headers: &[String], has_row: bool) -> Result<(), TableError> {
    if headers.iter().all(String::is_empty) && !has_row {
        return Err(TableError::EmptyFile { file: file.into() });
    }
    if let Some(position) = headers.iter().position(String::is_empty) {
        return Err(TableError::UnnamedColumn { file: file.into(), position: position + 1 });
    }
    let mut first_seen: HashMap<&str, usize> = HashMap::with_capacity(headers.len());
    for (second, name) in headers.iter().enumerate() {
        if let Some(&first) = first_seen.get(name.as_str()) {
            return Err(TableError::DuplicateColumn {
                file: file.into(),
                column: name.as_str().into(),
                first: first + 1,
                second: second + 1,
            });
        }
        first_seen.insert(name, second);
    }
    if !has_row {
        return Err(TableError::HeaderOnly { file: file.into() });
    }
    Ok(())
}

/// Every declared column must exist in the file, and be declared once.
pub(super) fn check_declarations(spec: &TableSpec, file: &str, headers: &[String]) -> Result<(), TableError> {
    let present: HashSet<&str> = headers.iter().map(String::as_str).collect();
    let mut declared: HashSet<&str> = HashSet::with_capacity(spec.declared.len());
    for decl in &spec.declared {
        if !declared.insert(decl.name.as_str()) {
            return Err(TableError::DuplicateDeclaration { column: decl.name.as_str().into() });
        }
        if !present.contains(decl.name.as_str()) {
            return Err(TableError::DeclaredColumnAbsent {
                file: file.into(),
                column: decl.name.as_str().into(),
                near: near_matches(&decl.name, headers.iter().map(String::as_str)),
                columns: headers.to_vec(),
            });
        }
    }
    Ok(())
}

/// A typed column before the missing-value policy.
pub(super) struct TypedColumn {
    column: Column,
    inferred: bool,
    /// 0-based data-row indices of missing values.
    missing: Vec<usize>,
}

/// Step 2: every column typed; of several bad values, the one in the
/// earliest row (then leftmost column) is reported. Rows are numbered from
/// `first_row`.
pub(super) fn type_columns(
    spec: &TableSpec,
    file: &str,
    headers: &[String],
    columns: &[RawColumn],
    first_row: usize,
) -> Result<Vec<TypedColumn>, TableError> {
    let mut typed = Vec::with_capacity(columns.len());
    let mut first_error: Option<TableError> = None;
    for (name, column) in headers.iter().zip(columns) {
        let place = Place { file, column: name, first_row };
        match type_column(&place, spec.declaration(name), column) {
            Ok(t) => typed.push(t),
            Err(e) => {
                let earlier = first_error.as_ref().is_none_or(|f| e.row() < f.row());
                if earlier {
                    first_error = Some(e);
                }
            }
        }
    }
    match first_error {
        Some(error) => Err(error),
        None => Ok(typed),
    }
}

/// Where a field sits, for its error.
struct Place<'a> {
    file: &'a str,
    column: &'a str,
    /// The number of the first data row.
    first_row: usize,
}

impl Place<'_> {
    fn bad_value(&self, index: usize, field: &str, problem: ValueProblem) -> TableError {
        TableError::BadValue {
            file: self.file.into(),
            row: index + self.first_row,
            column: self.column.into(),
            value: field.into(),
            problem: problem.problem.into(),
            advice: problem.advice.into(),
        }
    }
}

fn type_column(place: &Place, decl: Option<&ColumnDecl>, raw: &RawColumn) -> Result<TypedColumn, TableError> {
    let name = place.column;
    let inferred = decl.is_none();
    let kind = decl.map_or_else(|| values::infer_kind(raw.fields()), |d| d.kind.clone());
    let (data, missing) = match kind {
        ColumnKind::Real => {
            let (v, m) = read_fields(raw, place, |field| values::parse_real(field).map_err(|p| real_advice(p, name, inferred)))?;
            (ColumnData::Real(v), m)
        }
        ColumnKind::Count => {
            let (v, m) = read_fields(raw, place, values::parse_count)?;
            (ColumnData::Count(v), m)
        }
        ColumnKind::Binary => {
            let (v, m) = read_fields(raw, place, values::parse_binary_field)?;
            (ColumnData::Binary(v), m)
        }
        ColumnKind::Category => match decl.and_then(|d| d.levels.as_ref()) {
            Some(levels) => read_declared_levels(raw, place, levels)?,
            None => read_levels_by_appearance(raw),
        },
    };
    let unit = decl.and_then(|d| d.unit.clone());
    let ordered = decl.is_some_and(|d| d.levels.is_some());
    Ok(TypedColumn { column: Column { name: name.to_string(), unit, data, ordered }, inferred, missing })
}

/// A column read as real because most values are numbers gets advice to
/// declare it a category if the odd value is a label.
fn real_advice(problem: ValueProblem, name: &str, inferred: bool) -> ValueProblem {
    if !inferred || problem.problem != "is not a number" {
        return problem;
    }
    ValueProblem {
        advice: format!(
            "most values of {name} are numbers, so it was read as real; fix the row, write a missing value as NA and add \"drop missing\", or declare {name}: category"
        ),
        ..problem
    }
}

/// Reads every field with `read`; missing fields hold `T::default()` and are
/// listed by index.
fn read_fields<T: Default>(
    raw: &RawColumn,
    place: &Place,
    mut read: impl FnMut(&str) -> Result<T, ValueProblem>,
) -> Result<(Vec<T>, Vec<usize>), TableError> {
    let mut values = Vec::with_capacity(raw.ends.len());
    let mut missing = Vec::new();
    for (i, field) in raw.fields().enumerate() {
        if values::is_missing(field) {
            missing.push(i);
            values.push(T::default());
        } else {
            values.push(read(field).map_err(|p| place.bad_value(i, field, p))?);
        }
    }
    Ok((values, missing))
}

fn read_declared_levels(
    raw: &RawColumn,
    place: &Place,
    levels: &[String],
) -> Result<(ColumnData, Vec<usize>), TableError> {
    let lookup: std::collections::HashMap<&str, u32> =
        levels.iter().enumerate().map(|(i, l)| (l.as_str(), i as u32)).collect();
    let mut codes = Vec::with_capacity(raw.ends.len());
    let mut missing = Vec::new();
    for (i, field) in raw.fields().enumerate() {
        if values::is_missing(field) {
            missing.push(i);
            codes.push(0);
        } else if let Some(&code) = lookup.get(field) {
            codes.push(code);
        } else {
            return Err(TableError::UnknownLevel {
                file: place.file.into(),
                row: i + place.first_row,
                column: place.column.into(),
                value: field.into(),
                near: near_matches(field, levels.iter().map(String::as_str)),
                levels: levels.to_vec(),
            });
        }
    }
    Ok((ColumnData::Category { codes, levels: levels.to_vec() }, missing))
}

fn read_levels_by_appearance(raw: &RawColumn) -> (ColumnData, Vec<usize>) {
    let mut lookup: std::collections::HashMap<&str, u32> = std::collections::HashMap::new();
    let mut levels = Vec::new();
    let mut codes = Vec::with_capacity(raw.ends.len());
    let mut missing = Vec::new();
    for (i, field) in raw.fields().enumerate() {
        if values::is_missing(field) {
            missing.push(i);
            codes.push(0);
            continue;
        }
        let code = *lookup.entry(field).or_insert_with(|| {
            levels.push(field.to_string());
            levels.len() as u32 - 1
        });
        codes.push(code);
    }
    (ColumnData::Category { codes, levels }, missing)
}

/// Step 3: fail on missing values, or leave out their rows under `drop
/// missing`. Rows are numbered from `first_row` in the error.
pub(super) fn apply_missing_policy(
    spec: &TableSpec,
    file: &str,
    typed: Vec<TypedColumn>,
    rows_read: usize,
    first_row: usize,
) -> Result<(Table, LoadReport), TableError> {
    let mut with_missing = typed.iter().filter(|t| !t.missing.is_empty());
    if let (false, Some(first)) = (spec.drop_missing, with_missing.next()) {
        return Err(TableError::Missing {
            file: file.into(),
            column: first.column.name.as_str().into(),
            count: first.missing.len(),
            rows: first.missing.iter().take(ROWS_SHOWN).map(|i| i + first_row).collect(),
            others: with_missing.map(|t| (t.column.name.as_str().into(), t.missing.len())).collect(),
        });
    }
    let mut complete = vec![true; rows_read];
    for index in typed.iter().flat_map(|t| &t.missing) {
        complete[*index] = false;
    }
    let dropped_missing = complete.iter().filter(|keep| !**keep).count();
    if dropped_missing == rows_read {
        return Err(TableError::NoRowsLeft { file: file.into(), step: "drop missing".into() });
    }
    let report = LoadReport {
        source: file.to_string(),
        rows_read,
        columns: typed
            .iter()
            .map(|t| ColumnReport {
                name: t.column.name.clone(),
                kind: t.column.data.kind(),
                inferred: t.inferred,
                missing: t.missing.len(),
            })
            .collect(),
        dropped_missing,
        filters: Vec::new(),
    };
    let table = Table { name: spec.name.clone(), columns: typed.into_iter().map(|t| t.column).collect() };
    let table = if dropped_missing > 0 { table.filter(&complete) } else { table };
    Ok((table, report))
}

/// Step 4: the `keep where` filters, in the order written.
pub(super) fn apply_filters(
    spec: &TableSpec,
    file: &str,
    mut table: Table,
    mut report: LoadReport,
) -> Result<(Table, LoadReport), TableError> {
    for condition in &spec.filters {
        let mask = condition.mask(&table, file)?;
        let rows_before = table.nrows();
        let kept = mask.iter().filter(|keep| **keep).count();
        if kept == 0 {
            return Err(TableError::NoRowsLeft {
                file: file.into(),
                step: format!("keep where {condition}").into(),
            });
        }
        if kept < rows_before {
            table = table.filter(&mask);
        }
        report.filters.push(FilterReport {
            condition: condition.to_string(),
            rows_before,
            kept,
            dropped: rows_before - kept,
        });
    }
    Ok((table, report))
}
