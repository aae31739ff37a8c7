//! The one error type of the `table` module.
//!
//! Every variant renders as one sentence that names the place (file, row as a
//! spreadsheet shows it, column, value or table-cell line) and says what to
//! do. Variants carry the facts as fields so the cells module can also point
//! at them; the wording lives only here.

use super::suggest::{join_words, perhaps, row_list};

/// Why a table could not be declared, read, typed or filtered.
///
/// Text fields are `Box<str>` to keep the error small, as every `?` in
/// the library carries it.
///
/// It also serialises (`{"error": "bad_value", "file": …, "row": …}`) so the
/// cells module can point at the place as well as print the sentence.
#[derive(Debug, Clone, PartialEq, thiserror::Error, serde::Serialize)]
#[serde(tag = "error", rename_all = "snake_case")]
pub enum TableError {
    /// The file could not be opened or read.
    #[error("could not read {file}: {reason} (check the file name, and that the path is relative to the notebook)")]
    Io { file: Box<str>, reason: Box<str> },

    /// A row holds bytes that are not UTF-8 text.
    #[error("{file} row {row} is not valid UTF-8 text (save the file with UTF-8 encoding and load it again)")]
    NotUtf8 { file: Box<str>, row: usize },

    /// Nothing at all in the file.
    #[error("{file} is empty (it needs a header row naming the columns, then one row per record)")]
    EmptyFile { file: Box<str> },

    /// A header but no data rows.
    #[error("{file} has a header row but no data rows (add rows under the header, or check that the cell names the right file)")]
    HeaderOnly { file: Box<str> },

    /// A header cell without a name.
    #[error("{file} row 1, column {position}: the header cell is empty (give every column a name, or delete the empty column)")]
    UnnamedColumn { file: Box<str>, position: usize },

    /// Two header cells with the same name.
    #[error("{file} row 1: the column name \"{column}\" appears twice, as columns {first} and {second} (rename one so each column can be told apart)")]
    DuplicateColumn { file: Box<str>, column: Box<str>, first: usize, second: usize },

    /// A data row with more or fewer fields than the header.
    #[error("{file} row {row} has {} but the header names {expected} columns ({})", plural(*.found, "field", "fields"), ragged_advice(*.found, *.expected))]
    RaggedRow { file: Box<str>, row: usize, found: usize, expected: usize },

    /// A value that does not fit its column's kind.
    #[error("{file} row {row}, column {column}: \"{value}\" {problem} ({advice})")]
    BadValue {
        file: Box<str>,
        row: usize,
        column: Box<str>,
        value: Box<str>,
        problem: Box<str>,
        advice: Box<str>,
    },

    /// A category value outside the declared levels.
    #[error("{file} row {row}, column {column}: \"{value}\" is not one of the declared levels {} (fix the row{}, or add the level to the declaration)", join_words(levels, "and"), near_level(near))]
    UnknownLevel {
        file: Box<str>,
        row: usize,
        column: Box<str>,
        value: Box<str>,
        levels: Vec<String>,
        near: Vec<String>,
    },

    /// Missing values (empty or `NA`) without `drop missing`.
    #[error("{file}, column {column}: {} missing ({}){}; add \"drop missing\" to the table cell to leave those rows out, or fill the values in", plural(*.count, "value is", "values are"), row_list(rows, *.count), other_missing(others))]
    Missing {
        file: Box<str>,
        column: Box<str>,
        count: usize,
        /// The first few rows (spreadsheet numbering) with a missing value.
        rows: Vec<usize>,
        /// Other columns with missing values and their counts.
        others: Vec<(Box<str>, usize)>,
    },

    /// The table cell declares a column the file does not have.
    #[error("{file} has no column \"{column}\", which the table cell declares ({}the file's columns are {})", perhaps(near), join_words(columns, "and"))]
    DeclaredColumnAbsent {
        file: Box<str>,
        column: Box<str>,
        near: Vec<String>,
        columns: Vec<String>,
    },

    /// The same column declared on two lines.
    #[error("column \"{column}\" is declared twice in the table cell (keep one declaration)")]
    DuplicateDeclaration { column: Box<str> },

    /// A table-cell line that could not be read.
    #[error("table cell line \"{line}\": {problem}")]
    RuleSyntax { line: Box<str>, problem: Box<str> },

    /// A `keep where` condition names a column the table lacks.
    #[error("{file}, keep where {condition}: there is no column \"{column}\" ({}the columns are {})", perhaps(near), join_words(columns, "and"))]
    UnknownConditionColumn {
        file: Box<str>,
        condition: Box<str>,
        column: Box<str>,
        near: Vec<String>,
        columns: Vec<String>,
    },

    /// A `keep where` condition names a level the category lacks.
    #[error("{file}, keep where {condition}: \"{level}\" is not a level of {column} ({}the levels are {})", perhaps(near), join_words(levels, "and"))]
    UnknownConditionLevel {
        file: Box<str>,
        condition: Box<str>,
        column: Box<str>,
        level: Box<str>,
        near: Vec<String>,
        levels: Vec<String>,
    },

    /// A `keep where` comparison that does not suit the column's kind.
    #[error("{file}, keep where {condition}: {problem}")]
    ConditionMismatch { file: Box<str>, condition: Box<str>, problem: Box<str> },

    /// `drop missing` or a filter left nothing.
    #[error("{file}: no rows are left after \"{step}\" (loosen the condition, or check the data)")]
    NoRowsLeft { file: Box<str>, step: Box<str> },

    /// Columns of unequal length given to [`super::Table::from_columns`].
    #[error("table {table}: column {column} has {found} values but column {first} has {expected} (give every column the same number of rows)")]
    UnequalLengths {
        table: Box<str>,
        column: Box<str>,
        found: usize,
        first: Box<str>,
        expected: usize,
    },

    /// A column given to [`super::Table::from_columns`] that cannot be used.
    #[error("table {table}, column {column}: {problem}")]
    InvalidColumn { table: Box<str>, column: Box<str>, problem: Box<str> },

    /// The file is larger than the memory its table would need.
    #[error("{file}: {message}")]
    TooLarge { file: Box<str>, message: Box<str> },

    /// A Parquet or Arrow file asked of a build without the `columnar` feature.
    #[error("{file} is a columnar file (Parquet or Arrow), and this build of Waypath cannot read those (build it with the cargo feature \"{feature}\", e.g. cargo build --release -p waypath-kernel --features {feature}, or save the data as CSV)")]
    FeatureMissing { file: Box<str>, feature: Box<str> },

    /// A Parquet or Arrow file that cannot be read as a table: damaged,
    /// of another layout than its folder, or holding a column of a kind a
    /// table cannot take.
    #[error("{file}: {problem}")]
    Columnar { file: Box<str>, problem: Box<str> },

    /// The cancel flag was set (an interrupt) while the file was read.
    #[error("{file}: reading was interrupted at row {row}; the table was not made")]
    Interrupted { file: Box<str>, row: usize },
}

impl TableError {
    /// The spreadsheet row (header = 1) the error points at, if it is about one row.
    pub fn row(&self) -> Option<usize> {
        match self {
            TableError::NotUtf8 { row, .. }
            | TableError::RaggedRow { row, .. }
            | TableError::BadValue { row, .. }
            | TableError::UnknownLevel { row, .. } => Some(*row),
            TableError::UnnamedColumn { .. } | TableError::DuplicateColumn { .. } => Some(1),
            _ => None,
        }
    }
}

fn ragged_advice(found: usize, expected: usize) -> &'static str {
    if found > expected {
        "look for an unquoted comma: a value that contains a comma must be written in double quotes"
    } else {
        "add the missing fields, leaving a field empty where the value is unknown"
    }
}

fn near_level(near: &[String]) -> String {
    match near.first() {
        Some(level) => format!(", perhaps to \"{level}\""),
        None => String::new(),
    }
}

fn other_missing(others: &[(Box<str>, usize)]) -> String {
    if others.is_empty() {
        return String::new();
    }
    let parts: Vec<String> = others.iter().map(|(c, n)| format!("{c} {n}")).collect();
    format!(", and other columns have missing values too ({})", join_words(&parts, "and"))
}

/// `1 value is` / `3 values are`.
pub(crate) fn plural(n: usize, one: &str, many: &str) -> String {
    if n == 1 {
        format!("1 {one}")
    } else {
        format!("{n} {many}")
    }
}
