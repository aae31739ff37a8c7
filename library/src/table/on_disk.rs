//! Tables that stay on disk (cargo feature `on_disk`, body line
//! `stay on disk`): an embedded engine (Apache DataFusion) plans the scan
//! of a Parquet file or folder, the `drop missing` and `keep where` rules
//! and every sum a fit needs, so memory stays bounded whatever the rows.
//!
//! Why a table of its own and not a [`super::Table`]: a `Table` holds every
//! value, which is exactly what a file larger than memory cannot give. A
//! [`DiskTable`] holds the plan of the kept rows (an engine data frame)
//! and what the rules did to them, counted by the engine: the same
//! [`LoadReport`] a CSV of the same values gives (rows read, missing
//! values per column, rows left out by `drop missing` and by each filter).
//!
//! Kinds come from the stored types rather than from the values (reading
//! every value to type a column is what this path avoids): floats are
//! real, integers are counts (real when one is negative), yes/no values
//! are binary and text is a category, whose levels must be declared
//! (`c: category(a, b)`) before a model may use it; the error lists the
//! values the file holds. A float column declared `count` is checked to
//! hold whole numbers of at least 0. Missing means null, and for text
//! also an empty value or `NA`, as in a CSV.

use std::ops::Not;
use std::path::Path;
use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::datatypes::{DataType, Float64Type, Int64Type};
use datafusion::arrow::record_batch::RecordBatch;
use datafusion::common::ScalarValue;
use datafusion::dataframe::DataFrame;
use datafusion::execution::context::SessionContext;
use datafusion::functions_aggregate::expr_fn::{count, min, sum};
use datafusion::logical_expr::{cast, ident, lit, Expr};
use datafusion::prelude::{ParquetReadOptions, SessionConfig};

use super::condition::{Comparison, Condition, Literal};
use super::error::TableError;
use super::report::{ColumnReport, FilterReport, LoadReport};
use super::rules::TableSpec;
use super::values::{is_missing, parse_binary};
use super::ColumnKind;

/// The cargo feature of tables kept on disk.
pub const FEATURE: &str = "on_disk";

/// Most distinct values of an undeclared text column listed in an error.
const LISTED_VALUES: usize = 12;

/// One column of a table on disk.
#[derive(Debug, Clone, PartialEq)]
pub struct DiskColumn {
    pub name: String,
    pub kind: ColumnKind,
    /// Declared levels of a category, in order; `None` when undeclared.
    pub levels: Option<Vec<String>>,
    pub unit: Option<String>,
    /// Stored as text (a category), else as numbers or yes/no values.
    pub text: bool,
}

/// Threads the engine runs its plans on. Tokio's current-thread runtime
/// keeps the build to the scheduler DataFusion itself needs (the
/// multi-thread one would be one more part of tokio to compile), so a
/// table's passes run on one core.
pub const ENGINE_THREADS: usize = 1;

/// The error text an engine pass returns when the cancel flag is set.
pub const INTERRUPTED: &str = "waypath: interrupted";

/// The engine that runs a table's plans: a runtime and a session context,
/// embedded or sending its plans to a scheduler (`across_machines`).
pub struct Engine {
    runtime: tokio::runtime::Runtime,
    context: SessionContext,
    /// The scheduler's `HOST:PORT` when the plans run across machines.
    scheduler: Option<String>,
}

impl std::fmt::Debug for Engine {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Engine")
    }
}

impl Engine {
    fn new(label: &str) -> Result<Engine, TableError> {
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .map_err(|e| columnar(label, format!("the engine could not start: {e}")))?;
        let config = SessionConfig::new().with_target_partitions(ENGINE_THREADS).with_batch_size(8192);
        Ok(Engine { runtime, context: SessionContext::new_with_config(config), scheduler: None })
    }

    /// The scheduler the plans run on (`HOST:PORT`), `None` when embedded.
    pub fn scheduler(&self) -> Option<&str> {
        self.scheduler.as_deref()
    }

    /// Runs `frame` to completion (its batches are small: aggregates).
    pub fn collect(&self, frame: DataFrame) -> datafusion::error::Result<Vec<RecordBatch>> {
        self.runtime.block_on(frame.collect())
    }

    /// [`Engine::collect`], giving up once `cancel` is set when the plan
    /// runs across machines (embedded, the aggregates read the flag).
    pub fn collect_until(&self, frame: DataFrame, cancel: &AtomicBool) -> datafusion::error::Result<Vec<RecordBatch>> {
        #[cfg(feature = "across_machines")]
        if self.scheduler.is_some() {
            return self.runtime.block_on(super::across_machines::until_cancelled(frame.collect(), cancel));
        }
        let _ = cancel;
        self.collect(frame)
    }
}

/// A table whose rows stay in a Parquet file or folder.
#[derive(Debug, Clone)]
pub struct DiskTable {
    pub name: String,
    /// The file or folder as named in the cell.
    pub source: String,
    pub columns: Vec<DiskColumn>,
    /// The kept rows: the file after `drop missing` and the filters.
    pub frame: DataFrame,
    pub engine: Arc<Engine>,
    pub report: LoadReport,
}

impl DiskTable {
    /// Plans the table of `spec` over its Parquet file or folder and
    /// counts what the rules do. Reads no more than the engine's batches.
    /// A table that runs across machines is opened by
    /// [`DiskTable::open_across`], which needs the plan codecs.
    pub fn open(spec: &TableSpec, cancel: &AtomicBool) -> Result<DiskTable, TableError> {
        let label = spec.path.display().to_string();
        if let Some(scheduler) = &spec.scheduler {
            return Err(columnar(&label, across_refusal(scheduler)));
        }
        check_source(&spec.path, &label)?;
        let engine = Arc::new(Engine::new(&label)?);
        Self::open_on(spec, engine, &label, cancel)
    }

    /// [`DiskTable::open`] for a table whose plans run on the scheduler
    /// its spec names (`stay on disk across machines at HOST:PORT`), the
    /// aggregates carried by `codecs`.
    #[cfg(feature = "across_machines")]
    pub fn open_across(
        spec: &TableSpec,
        codecs: &super::across_machines::PlanCodecs,
        cancel: &AtomicBool,
    ) -> Result<DiskTable, TableError> {
        let label = spec.path.display().to_string();
        let Some(scheduler) = &spec.scheduler else { return Self::open(spec, cancel) };
        check_source(&spec.path, &label)?;
        let (runtime, context) = super::across_machines::remote_engine(scheduler, codecs, &label)?;
        let engine = Arc::new(Engine { runtime, context, scheduler: Some(scheduler.clone()) });
        Self::open_on(spec, engine, &label, cancel)
    }

    fn open_on(spec: &TableSpec, engine: Arc<Engine>, label: &str, cancel: &AtomicBool) -> Result<DiskTable, TableError> {
        let label = label.to_string();
        // Executors read the path as given: across machines it must not
        // depend on this process's working folder.
        let absolute = std::path::absolute(&spec.path).map_err(|e| columnar(&label, format!("the path could not be made absolute: {e}")))?;
        let source = if engine.scheduler.is_some() { absolute.as_path() } else { spec.path.as_path() };
        let path = source.to_str().ok_or_else(|| columnar(&label, "the path is not valid UTF-8 text".into()))?;
        let path = if spec.path.is_dir() && !path.ends_with('/') { format!("{path}/") } else { path.to_string() };
        let frame = engine
            .runtime
            .block_on(engine.context.read_parquet(path, ParquetReadOptions::default()))
            .map_err(|e| engine_error(&label, e))?;
        let mut columns = settle_columns(spec, &frame, &label)?;
        let counted = count_columns(&engine, &frame, &columns, &label)?;
        for (column, least) in columns.iter_mut().zip(&counted.least) {
            let declared = spec.declared.iter().any(|d| d.name == column.name);
            if column.kind == ColumnKind::Count && !declared && least.is_some_and(|v| v < 0.0) {
                column.kind = ColumnKind::Real;
            }
        }
        check_declared_values(&engine, &frame, &columns, &label)?;
        let mut report = LoadReport {
            source: label.clone(),
            rows_read: counted.rows,
            columns: columns
                .iter()
                .zip(&counted.missing)
                .map(|(c, &missing)| ColumnReport {
                    name: c.name.clone(),
                    kind: c.kind.clone(),
                    inferred: !spec.declared.iter().any(|d| d.name == c.name),
                    missing,
                })
                .collect(),
            dropped_missing: 0,
            filters: Vec::new(),
        };
        let frame = drop_missing(spec, &engine, frame, &columns, &counted, &mut report, &label)?;
        let frame = apply_filters(spec, &engine, frame, &columns, &mut report, &label, cancel)?;
        Ok(DiskTable { name: spec.name.clone(), source: label, columns, frame, engine, report })
    }

    /// Rows kept after the rules.
    pub fn rows(&self) -> usize {
        self.report.filters.last().map_or(self.report.rows_read - self.report.dropped_missing, |f| f.kept)
    }

    /// The column called `name`.
    pub fn column(&self, name: &str) -> Option<&DiskColumn> {
        self.columns.iter().find(|c| c.name == name)
    }

    /// The column's values as the engine's expression of its kind: numbers
    /// (counts and yes/no values too) as 64-bit floats, text as text.
    pub fn value_expr(&self, column: &DiskColumn) -> Expr {
        if column.text {
            cast(ident(&column.name), DataType::Utf8)
        } else {
            cast(ident(&column.name), DataType::Float64)
        }
    }

    /// The distinct values of a text column (at most [`LISTED_VALUES`]),
    /// for an error that asks for its levels to be declared.
    pub fn some_values(&self, column: &str) -> Vec<String> {
        let frame = self.frame.clone().aggregate(vec![cast(ident(column), DataType::Utf8)], vec![]).and_then(|f| f.limit(0, Some(LISTED_VALUES)));
        let Ok(batches) = frame.and_then(|f| self.engine.collect(f)) else { return Vec::new() };
        let mut values: Vec<String> = batches
            .iter()
            .flat_map(|b| {
                let array = b.column(0).as_string::<i32>();
                (0..array.len()).filter(|&i| array.is_valid(i)).map(|i| array.value(i).to_string()).collect::<Vec<_>>()
            })
            .collect();
        values.sort();
        values
    }
}

/// Why [`DiskTable::open`] does not run a table across machines.
fn across_refusal(scheduler: &str) -> String {
    if cfg!(feature = "across_machines") {
        format!("the table runs on the scheduler at {scheduler}: open it with DiskTable::open_across and the plan codecs")
    } else {
        format!(
            "\"across machines at {scheduler}\" needs a Waypath built with the cargo feature \"across_machines\" \
             (cargo build --release -p waypath-kernel --features across_machines); write \"stay on disk\" alone to \
             run the engine on this machine"
        )
    }
}

fn columnar(label: &str, problem: String) -> TableError {
    TableError::Columnar { file: label.into(), problem: problem.into() }
}

fn engine_error(label: &str, error: datafusion::error::DataFusionError) -> TableError {
    columnar(label, format!("the engine could not read it: {error}"))
}

/// Only Parquet stays on disk; an Arrow IPC file is loaded into memory.
fn check_source(path: &Path, label: &str) -> Result<(), TableError> {
    match super::columnar::columnar_format(path) {
        Some(super::columnar::ColumnarFormat::Parquet) if path.is_file() => Ok(()),
        Some(super::columnar::ColumnarFormat::ParquetFolder) => {
            let parts = super::columnar::folder_parts(path).map_err(|e| columnar(label, e.to_string()))?;
            if parts.is_empty() {
                Err(columnar(label, "the folder holds no .parquet file".into()))
            } else {
                Ok(())
            }
        }
        Some(super::columnar::ColumnarFormat::Parquet) => {
            Err(TableError::Io { file: label.into(), reason: "no such file".into() })
        }
        _ => Err(columnar(
            label,
            "only a Parquet file or a folder of them can stay on disk; remove \"stay on disk\" to load this file \
             into memory"
                .into(),
        )),
    }
}

/// Each stored column's kind: declared, else from its stored type.
fn settle_columns(spec: &TableSpec, frame: &DataFrame, label: &str) -> Result<Vec<DiskColumn>, TableError> {
    let schema = frame.schema();
    let names: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    for declared in &spec.declared {
        if !names.contains(&declared.name) {
            return Err(TableError::DeclaredColumnAbsent {
                file: label.into(),
                column: declared.name.as_str().into(),
                near: Vec::new(),
                columns: names.clone(),
            });
        }
    }
    schema
        .fields()
        .iter()
        .map(|field| {
            let stored = stored_kind(field.data_type()).ok_or_else(|| {
                columnar(label, format!("column {} is stored as {}, which a table cannot hold", field.name(), field.data_type()))
            })?;
            let declared = spec.declared.iter().find(|d| d.name == *field.name());
            let text = stored == ColumnKind::Category;
            let kind = declared.map_or(stored.clone(), |d| d.kind.clone());
            if text != (kind == ColumnKind::Category) {
                return Err(columnar(
                    label,
                    format!(
                        "column {} is stored as {} but declared {}; on disk a category must be stored as text and \
                         text can only be a category",
                        field.name(),
                        field.data_type(),
                        kind.name()
                    ),
                ));
            }
            Ok(DiskColumn {
                name: field.name().clone(),
                kind,
                levels: declared.and_then(|d| d.levels.clone()),
                unit: declared.and_then(|d| d.unit.clone()),
                text,
            })
        })
        .collect()
}

/// The kind a stored type reads as (integers as counts; a negative one
/// turns the column real, see [`count_columns`]).
fn stored_kind(stored: &DataType) -> Option<ColumnKind> {
    match stored {
        DataType::Float16 | DataType::Float32 | DataType::Float64 => Some(ColumnKind::Real),
        t if t.is_integer() => Some(ColumnKind::Count),
        DataType::Boolean => Some(ColumnKind::Binary),
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => Some(ColumnKind::Category),
        DataType::Dictionary(_, value) => stored_kind(value).filter(|k| *k == ColumnKind::Category),
        _ => None,
    }
}

/// Whether a row's value of `column` is missing: null, and for text an
/// empty value or `NA` ([`is_missing`], the CSV reader's own test).
fn missing_expr(column: &DiskColumn) -> Expr {
    let null = ident(&column.name).is_null();
    if column.text {
        debug_assert!(is_missing("") && is_missing("NA"));
        let text = cast(ident(&column.name), DataType::Utf8);
        null.or(text.clone().eq(lit(""))).or(text.eq(lit("NA")))
    } else {
        null
    }
}

struct Counted {
    rows: usize,
    missing: Vec<usize>,
    /// Each column's least value (`None` for text or no values).
    least: Vec<Option<f64>>,
}

/// One pass: the rows, each column's missing values and, for integer
/// columns, whether one is negative (then the column is real, as a CSV
/// reads it).
fn count_columns(engine: &Engine, frame: &DataFrame, columns: &[DiskColumn], label: &str) -> Result<Counted, TableError> {
    let mut aggregates = vec![count(lit(1_i64)).alias("rows")];
    for (k, column) in columns.iter().enumerate() {
        aggregates.push(sum(cast(missing_expr(column), DataType::Int64)).alias(format!("missing_{k}")));
        let least = if column.text { min(lit(ScalarValue::Float64(None))) } else { min(cast(ident(&column.name), DataType::Float64)) };
        aggregates.push(least.alias(format!("least_{k}")));
    }
    let batch = one_row(engine, frame.clone().aggregate(vec![], aggregates), label)?;
    let rows = whole(&batch, 0) as usize;
    let missing = (0..columns.len()).map(|k| whole(&batch, 1 + 2 * k) as usize).collect();
    let least = (0..columns.len()).map(|k| real(&batch, 2 + 2 * k)).collect();
    Ok(Counted { rows, missing, least })
}

/// The single row of an aggregate.
fn one_row(engine: &Engine, frame: datafusion::error::Result<DataFrame>, label: &str) -> Result<RecordBatch, TableError> {
    let batches = frame.and_then(|f| engine.collect(f)).map_err(|e| engine_error(label, e))?;
    batches.into_iter().find(|b| b.num_rows() > 0).ok_or_else(|| columnar(label, "the engine returned no row".into()))
}

/// An integer aggregate's value (0 when null: a sum over no rows).
fn whole(batch: &RecordBatch, column: usize) -> i64 {
    let array = batch.column(column);
    match ScalarValue::try_from_array(array, 0) {
        Ok(ScalarValue::Int64(Some(v))) => v,
        Ok(ScalarValue::UInt64(Some(v))) => v as i64,
        _ => array.as_primitive_opt::<Int64Type>().filter(|a| a.is_valid(0)).map_or(0, |a| a.value(0)),
    }
}

/// A float aggregate's value, `None` when null.
pub(crate) fn real(batch: &RecordBatch, column: usize) -> Option<f64> {
    batch.column(column).as_primitive_opt::<Float64Type>().filter(|a| a.is_valid(0)).map(|a| a.value(0))
}

/// Declared categories hold only their levels, declared counts only whole
/// numbers of at least 0, declared binaries only 0 and 1 (or yes/no).
fn check_declared_values(engine: &Engine, frame: &DataFrame, columns: &[DiskColumn], label: &str) -> Result<(), TableError> {
    for column in columns {
        let value = ident(&column.name);
        let number = cast(value.clone(), DataType::Float64);
        let outside = match (&column.kind, &column.levels, column.text) {
            (ColumnKind::Category, Some(levels), _) => {
                let listed: Vec<Expr> = levels.iter().map(|l| lit(l.as_str())).collect();
                Some(cast(value, DataType::Utf8).in_list(listed, true).and(missing_expr(column).not()))
            }
            (ColumnKind::Count, _, false) => Some(
                number.clone().lt(lit(0.0)).or(cast(cast(number.clone(), DataType::Int64), DataType::Float64).not_eq(number)),
            ),
            (ColumnKind::Binary, _, false) => Some(number.clone().not_eq(lit(0.0)).and(number.not_eq(lit(1.0)))),
            _ => None,
        };
        let Some(outside) = outside else { continue };
        let found = frame.clone().filter(outside).and_then(|f| f.limit(0, Some(1)));
        let batches = found.and_then(|f| engine.collect(f)).map_err(|e| engine_error(label, e))?;
        if let Some(batch) = batches.iter().find(|b| b.num_rows() > 0) {
            let index = batch.schema().index_of(&column.name).unwrap_or(0);
            let shown = ScalarValue::try_from_array(batch.column(index), 0).map_or_else(|_| "?".into(), |v| v.to_string());
            return Err(match &column.levels {
                Some(levels) => columnar(
                    label,
                    format!(
                        "column {}: \"{shown}\" is not one of the declared levels {} (fix the file or add the level to \
                         the declaration)",
                        column.name,
                        levels.join(", ")
                    ),
                ),
                None => columnar(label, format!("column {}: {shown} is not a {} value", column.name, column.kind.name())),
            });
        }
    }
    Ok(())
}

/// `drop missing` as a filter, or the error a CSV with missing values gives.
fn drop_missing(
    spec: &TableSpec,
    engine: &Engine,
    frame: DataFrame,
    columns: &[DiskColumn],
    counted: &Counted,
    report: &mut LoadReport,
    label: &str,
) -> Result<DataFrame, TableError> {
    let with_missing: Vec<(&DiskColumn, usize)> = columns.iter().zip(&counted.missing).filter(|(_, m)| **m > 0).map(|(c, m)| (c, *m)).collect();
    let Some(&(first, first_count)) = with_missing.first() else { return Ok(frame) };
    if !spec.drop_missing {
        return Err(TableError::Columnar {
            file: label.into(),
            problem: format!(
                "column {}: {first_count} missing values{}; add \"drop missing\" to the table cell to leave those rows \
                 out, or fill the values in",
                first.name,
                if with_missing.len() > 1 {
                    let others: Vec<String> = with_missing[1..].iter().map(|(c, m)| format!("{} {m}", c.name)).collect();
                    format!(" (also missing: {})", others.join(", "))
                } else {
                    String::new()
                }
            )
            .into(),
        });
    }
    let any_missing = with_missing.iter().map(|(c, _)| missing_expr(c)).reduce(Expr::or).expect("one column at least");
    let kept = frame.filter(any_missing.not()).map_err(|e| engine_error(label, e))?;
    let rows = count_rows(engine, &kept, label)?;
    report.dropped_missing = counted.rows - rows;
    if rows == 0 {
        return Err(TableError::NoRowsLeft { file: label.into(), step: "drop missing".into() });
    }
    Ok(kept)
}

fn count_rows(engine: &Engine, frame: &DataFrame, label: &str) -> Result<usize, TableError> {
    let batch = one_row(engine, frame.clone().aggregate(vec![], vec![count(lit(1_i64)).alias("rows")]), label)?;
    Ok(whole(&batch, 0) as usize)
}

/// The `keep where` lines in the order written, each counted.
fn apply_filters(
    spec: &TableSpec,
    engine: &Engine,
    mut frame: DataFrame,
    columns: &[DiskColumn],
    report: &mut LoadReport,
    label: &str,
    cancel: &AtomicBool,
) -> Result<DataFrame, TableError> {
    let mut before = report.rows_read - report.dropped_missing;
    for condition in &spec.filters {
        if cancel.load(std::sync::atomic::Ordering::Relaxed) {
            return Err(TableError::Interrupted { file: label.into(), row: 0 });
        }
        let text = condition.to_string();
        let predicate = condition_expr(condition, columns).map_err(|problem| TableError::ConditionMismatch {
            file: label.into(),
            condition: text.as_str().into(),
            problem: problem.into(),
        })?;
        frame = frame.filter(predicate).map_err(|e| engine_error(label, e))?;
        let kept = count_rows(engine, &frame, label)?;
        report.filters.push(FilterReport { condition: text.clone(), rows_before: before, kept, dropped: before - kept });
        if kept == 0 {
            return Err(TableError::NoRowsLeft { file: label.into(), step: format!("keep where {text}").into() });
        }
        before = kept;
    }
    Ok(frame)
}

/// A `keep where` condition as the engine's predicate, compared as the
/// in-memory filter compares: numbers as numbers, yes/no words as 1 and 0,
/// levels by equality only.
fn condition_expr(condition: &Condition, columns: &[DiskColumn]) -> Result<Expr, String> {
    Ok(match condition {
        Condition::Not(inner) => condition_expr(inner, columns)?.not(),
        Condition::And(a, b) => condition_expr(a, columns)?.and(condition_expr(b, columns)?),
        Condition::Or(a, b) => condition_expr(a, columns)?.or(condition_expr(b, columns)?),
        Condition::Compare { column, op, value } => {
            let Some(found) = columns.iter().find(|c| c.name == *column) else {
                let names: Vec<&str> = columns.iter().map(|c| c.name.as_str()).collect();
                return Err(format!("there is no column \"{column}\" (the columns are {})", names.join(", ")));
            };
            compare_expr(found, *op, value)?
        }
    })
}

fn compare_expr(column: &DiskColumn, op: Comparison, value: &Literal) -> Result<Expr, String> {
    if column.text {
        if !matches!(op, Comparison::Equal | Comparison::NotEqual) {
            return Err(format!("{} is a category, so it can only be compared with = or !=", column.name));
        }
        if let Some(levels) = &column.levels {
            if !levels.iter().any(|l| l == value.text()) {
                return Err(format!("\"{}\" is not a level of {} (the levels are {})", value.text(), column.name, levels.join(", ")));
            }
        }
        let left = cast(ident(&column.name), DataType::Utf8);
        return Ok(apply(op, left, lit(value.text())));
    }
    let target = match (&column.kind, value) {
        (_, Literal::Number { value, .. }) => *value,
        (ColumnKind::Binary, Literal::Word(word)) => match parse_binary(word) {
            Some(b) => f64::from(u8::from(b)),
            None => return Err(format!("{} is yes/no, and \"{word}\" is not a yes/no value", column.name)),
        },
        (_, Literal::Word(word)) => return Err(format!("{} holds numbers, and \"{word}\" is not a number", column.name)),
    };
    Ok(apply(op, cast(ident(&column.name), DataType::Float64), lit(target)))
}

fn apply(op: Comparison, left: Expr, right: Expr) -> Expr {
    match op {
        Comparison::Less => left.lt(right),
        Comparison::LessOrEqual => left.lt_eq(right),
        Comparison::Greater => left.gt(right),
        Comparison::GreaterOrEqual => left.gt_eq(right),
        Comparison::Equal => left.eq(right),
        Comparison::NotEqual => left.not_eq(right),
    }
}
