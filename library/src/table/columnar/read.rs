//! The reading itself: files listed, sizes checked, batches turned into the
//! raw text columns the CSV typing steps take.

use std::fmt::Write;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Int8Type, UInt16Type, UInt32Type, UInt64Type, UInt8Type,
};
use arrow_array::{Array, RecordBatch};
use arrow_schema::{DataType, SchemaRef};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::file::metadata::ParquetMetaData;

use crate::limits::{check_memory, describe_bytes};

use super::super::error::TableError;
use super::super::load::{apply_filters, apply_missing_policy, check_declarations, io_error, type_columns, RawColumn};
use super::super::report::LoadReport;
use super::super::rules::TableSpec;
use super::super::Table;
use super::ColumnarFormat;

/// The number of the first row of a columnar source (there is no header row).
const FIRST_ROW: usize = 1;
/// Rows per batch asked of the Parquet reader.
const BATCH_ROWS: usize = 65_536;
/// Bytes a loaded value takes at most while typed: its text (a real number's
/// shortest form is up to 24 characters), the text's end, the typed value.
const BYTES_PER_VALUE: u128 = 40;
/// Bytes of memory per byte of text or uncompressed data a file declares.
const BYTES_PER_DATA_BYTE: u128 = 3;

/// One file of the source and where its rows start.
struct Part {
    label: String,
    /// Rows of each row group (Parquet) or record batch (Arrow), in order.
    blocks: Vec<usize>,
    /// 0-based row of the whole source where this file starts.
    start: usize,
}

impl Part {
    fn rows(&self) -> usize {
        self.blocks.iter().sum()
    }
}

/// The columns being gathered, in schema order.
struct Gathered {
    headers: Vec<String>,
    columns: Vec<RawColumn>,
    rows: usize,
}

pub(super) fn load(
    spec: &TableSpec,
    label: &str,
    format: ColumnarFormat,
    cancel: &AtomicBool,
) -> Result<(Table, LoadReport), TableError> {
    let files = match format {
        ColumnarFormat::ParquetFolder => folder_files(&spec.path, label)?,
        ColumnarFormat::Parquet | ColumnarFormat::ArrowIpc => vec![spec.path.clone()],
    };
    let (gathered, parts) = match format {
        ColumnarFormat::ArrowIpc => read_arrow(&files[0], label, spec, cancel)?,
        ColumnarFormat::Parquet | ColumnarFormat::ParquetFolder => read_parquet(&files, label, spec, cancel)?,
    };
    let typed = type_columns(spec, label, &gathered.headers, &gathered.columns, FIRST_ROW)
        .map_err(|e| place_in_part(e, &parts, format))?;
    let rows_read = gathered.rows;
    drop(gathered);
    let (table, report) = apply_missing_policy(spec, label, typed, rows_read, FIRST_ROW)?;
    apply_filters(spec, label, table, report)
}

fn columnar_error(file: &str, problem: impl Into<Box<str>>) -> TableError {
    TableError::Columnar { file: file.into(), problem: problem.into() }
}

/// The `.parquet` files of a folder, in name order; none is an error.
fn folder_files(folder: &Path, label: &str) -> Result<Vec<PathBuf>, TableError> {
    let files = super::folder_parts(folder).map_err(|e| io_error(label, &e))?;
    if files.is_empty() {
        return Err(columnar_error(label, "the folder holds no .parquet files (a folder is read as the Parquet files in it)"));
    }
    Ok(files)
}

/// Refuses a source whose declared size would not fit in memory, before
/// anything is allocated for it.
fn check_size(label: &str, rows: u128, columns: usize, data_bytes: u128) -> Result<(), TableError> {
    let bytes = rows
        .saturating_mul(columns as u128)
        .saturating_mul(BYTES_PER_VALUE)
        .saturating_add(data_bytes.saturating_mul(BYTES_PER_DATA_BYTE));
    let what = format!("a table of {rows} rows and {columns} columns ({} of data as stored)", describe_bytes(data_bytes as f64));
    check_memory(&what, bytes).map_err(|message| TableError::TooLarge { file: label.into(), message: message.into() })
}

/// The schema and row groups of every file, checked to agree, then every
/// row read.
fn read_parquet(
    files: &[PathBuf],
    label: &str,
    spec: &TableSpec,
    cancel: &AtomicBool,
) -> Result<(Gathered, Vec<Part>), TableError> {
    let mut builders = Vec::with_capacity(files.len());
    let mut parts = Vec::with_capacity(files.len());
    let (mut rows, mut data_bytes) = (0u128, 0u128);
    for path in files {
        let part_label = path.display().to_string();
        let file = File::open(path).map_err(|e| io_error(&part_label, &e))?;
        let builder = ParquetRecordBatchReaderBuilder::try_new(file)
            .map_err(|e| columnar_error(&part_label, format!("this is not a readable Parquet file ({e})")))?;
        let blocks = row_groups(builder.metadata(), &part_label)?;
        rows += blocks.iter().map(|&b| b as u128).sum::<u128>();
        data_bytes += declared_bytes(builder.metadata());
        let start = parts.last().map_or(0, |p: &Part| p.start + p.rows());
        parts.push(Part { label: part_label, blocks, start });
        builders.push(builder);
    }
    let schema = builders[0].schema().clone();
    check_size(label, rows, schema.fields().len(), data_bytes)?;
    for (builder, part) in builders.iter().zip(&parts).skip(1) {
        same_layout(&schema, builder.schema(), &parts[0].label, &part.label)?;
    }
    let mut gathered = start_gathering(&schema, label, spec)?;
    for (builder, part) in builders.into_iter().zip(&parts) {
        let reader = builder
            .with_batch_size(BATCH_ROWS)
            .build()
            .map_err(|e| damaged(part, gathered.rows, &e.to_string()))?;
        for batch in reader {
            if cancel.load(Ordering::Relaxed) {
                return Err(TableError::Interrupted { file: label.into(), row: gathered.rows + FIRST_ROW });
            }
            let batch = batch.map_err(|e| damaged(part, gathered.rows, &e.to_string()))?;
            append_batch(&mut gathered, &batch, &part.label)?;
        }
        if gathered.rows != part.start + part.rows() {
            return Err(damaged(part, gathered.rows, "it holds fewer rows than its row groups declare"));
        }
    }
    Ok((gathered, parts))
}

/// Rows of each row group, refusing negative counts.
fn row_groups(metadata: &ParquetMetaData, label: &str) -> Result<Vec<usize>, TableError> {
    metadata
        .row_groups()
        .iter()
        .enumerate()
        .map(|(i, group)| {
            usize::try_from(group.num_rows()).map_err(|_| {
                columnar_error(label, format!("row group {} declares {} rows, which cannot be; the file is damaged", i + 1, group.num_rows()))
            })
        })
        .collect()
}

/// The uncompressed bytes the row groups declare (negative sizes count as 0;
/// the rows are checked separately).
fn declared_bytes(metadata: &ParquetMetaData) -> u128 {
    metadata.row_groups().iter().map(|g| u128::try_from(g.total_byte_size()).unwrap_or(0)).sum()
}

/// A read failure, placed at the row group where reading stopped: a
/// compression this build leaves out, or damage.
fn damaged(part: &Part, rows_so_far: usize, reason: &str) -> TableError {
    let (block, _) = block_of(part, rows_so_far.saturating_sub(part.start));
    const LEFT_OUT: &str = "Disabled feature at compile time: ";
    match reason.find(LEFT_OUT) {
        Some(at) => {
            let codec = reason[at + LEFT_OUT.len()..].split_whitespace().next().unwrap_or("its codec");
            columnar_error(
                &part.label,
                format!("row group {block} is compressed with {codec}, which Waypath does not read (write the file with Snappy compression or none; Snappy is pyarrow's default)"),
            )
        }
        None => columnar_error(&part.label, format!("row group {block} could not be read: {reason}; the file is damaged or cut short")),
    }
}

/// The 1-based block holding the 0-based row `row` of a part, and the row's
/// 1-based number in the part.
fn block_of(part: &Part, row: usize) -> (usize, usize) {
    let mut end = 0;
    for (i, rows) in part.blocks.iter().enumerate() {
        end += rows;
        if row < end {
            return (i + 1, row + 1);
        }
    }
    (part.blocks.len().max(1), row + 1)
}

/// Every file of a folder must have the first file's columns and storage types.
fn same_layout(first: &SchemaRef, other: &SchemaRef, first_label: &str, label: &str) -> Result<(), TableError> {
    let names = |s: &SchemaRef| s.fields().iter().map(|f| f.name().clone()).collect::<Vec<_>>();
    if names(first) != names(other) {
        return Err(columnar_error(
            label,
            format!("its columns are {} but {first_label} has {}; every file of a folder must have the same columns in the same order", names(other).join(", "), names(first).join(", ")),
        ));
    }
    for (a, b) in first.fields().iter().zip(other.fields()) {
        if a.data_type() != b.data_type() {
            return Err(columnar_error(
                label,
                format!("column {} is stored as {} but as {} in {first_label}; store it the same way in every file of the folder", b.name(), b.data_type(), a.data_type()),
            ));
        }
    }
    Ok(())
}

/// Empty raw columns for a schema, refusing unnamed or repeated names,
/// storage types a table cannot take and declared columns the file lacks.
fn start_gathering(schema: &SchemaRef, label: &str, spec: &TableSpec) -> Result<Gathered, TableError> {
    let mut headers: Vec<String> = Vec::with_capacity(schema.fields().len());
    for (i, field) in schema.fields().iter().enumerate() {
        let name = field.name().trim().to_string();
        if name.is_empty() {
            return Err(columnar_error(label, format!("column {} has no name; name every column", i + 1)));
        }
        if headers.contains(&name) {
            return Err(columnar_error(label, format!("the column name \"{name}\" appears twice; rename one")));
        }
        if !readable(field.data_type()) {
            return Err(columnar_error(
                label,
                format!("column {name} is stored as {}, which a table column cannot hold (store numbers, true/false values or text)", field.data_type()),
            ));
        }
        headers.push(name);
    }
    if headers.is_empty() {
        return Err(TableError::EmptyFile { file: label.into() });
    }
    check_declarations(spec, label, &headers)?;
    let columns = headers.iter().map(|_| RawColumn::default()).collect();
    Ok(Gathered { headers, columns, rows: 0 })
}

/// Storage types read as values: numbers, booleans, text, dictionary-coded
/// text, and all-missing columns.
fn readable(data_type: &DataType) -> bool {
    match data_type {
        DataType::Null
        | DataType::Boolean
        | DataType::Int8
        | DataType::Int16
        | DataType::Int32
        | DataType::Int64
        | DataType::UInt8
        | DataType::UInt16
        | DataType::UInt32
        | DataType::UInt64
        | DataType::Float32
        | DataType::Float64
        | DataType::Utf8
        | DataType::LargeUtf8
        | DataType::Utf8View => true,
        DataType::Dictionary(key, value) => key.is_integer() && matches!(**value, DataType::Utf8 | DataType::LargeUtf8),
        _ => false,
    }
}

fn append_batch(gathered: &mut Gathered, batch: &RecordBatch, part_label: &str) -> Result<(), TableError> {
    if batch.num_columns() != gathered.columns.len() {
        return Err(columnar_error(part_label, "a batch holds another number of columns than the file declares; the file is damaged"));
    }
    for ((column, name), array) in gathered.columns.iter_mut().zip(&gathered.headers).zip(batch.columns()) {
        append_text(array.as_ref(), column).map_err(|problem| columnar_error(part_label, format!("column {name}: {problem}")))?;
    }
    gathered.rows += batch.num_rows();
    Ok(())
}

/// Each value of `array` as the text a CSV would hold; a null as an empty
/// field (missing).
fn append_text(array: &dyn Array, out: &mut RawColumn) -> Result<(), String> {
    let mut text = String::new();
    let mut push = |out: &mut RawColumn, i: usize, write: &dyn Fn(&mut String)| {
        if array.is_null(i) {
            out.push("");
        } else {
            text.clear();
            write(&mut text);
            out.push(text.trim());
        }
    };
    macro_rules! numbers {
        ($t:ty) => {{
            let values = array.as_primitive::<$t>();
            for i in 0..values.len() {
                push(out, i, &|s: &mut String| {
                    let _ = write!(s, "{}", values.value(i));
                });
            }
        }};
    }
    match array.data_type() {
        DataType::Null => (0..array.len()).for_each(|_| out.push("")),
        DataType::Boolean => {
            let values = array.as_boolean();
            for i in 0..values.len() {
                push(out, i, &|s: &mut String| s.push_str(if values.value(i) { "true" } else { "false" }));
            }
        }
        DataType::Int8 => numbers!(Int8Type),
        DataType::Int16 => numbers!(Int16Type),
        DataType::Int32 => numbers!(Int32Type),
        DataType::Int64 => numbers!(Int64Type),
        DataType::UInt8 => numbers!(UInt8Type),
        DataType::UInt16 => numbers!(UInt16Type),
        DataType::UInt32 => numbers!(UInt32Type),
        DataType::UInt64 => numbers!(UInt64Type),
        DataType::Float32 => numbers!(Float32Type),
        DataType::Float64 => numbers!(Float64Type),
        DataType::Utf8 => {
            let values = array.as_string::<i32>();
            for i in 0..values.len() {
                push(out, i, &|s: &mut String| s.push_str(values.value(i)));
            }
        }
        DataType::LargeUtf8 => {
            let values = array.as_string::<i64>();
            for i in 0..values.len() {
                push(out, i, &|s: &mut String| s.push_str(values.value(i)));
            }
        }
        DataType::Utf8View => {
            let values = array.as_string_view();
            for i in 0..values.len() {
                push(out, i, &|s: &mut String| s.push_str(values.value(i)));
            }
        }
        DataType::Dictionary(_, _) => append_dictionary(array, out)?,
        other => return Err(format!("values stored as {other} cannot be read")),
    }
    Ok(())
}

/// Dictionary-coded text: each row's label (a null key or label is missing).
fn append_dictionary(array: &dyn Array, out: &mut RawColumn) -> Result<(), String> {
    let dictionary = array.as_any_dictionary_opt().ok_or("the dictionary column could not be read")?;
    let labels = dictionary.values().as_ref();
    for (i, key) in dictionary.normalized_keys().into_iter().enumerate() {
        let label = if array.is_null(i) { None } else { label_at(labels, key) };
        out.push(label.map_or("", str::trim));
    }
    Ok(())
}

/// The text label at `key` of a dictionary's labels, `None` when missing.
fn label_at(labels: &dyn Array, key: usize) -> Option<&str> {
    if key >= labels.len() || labels.is_null(key) {
        return None;
    }
    match labels.data_type() {
        DataType::Utf8 => Some(labels.as_string::<i32>().value(key)),
        DataType::LargeUtf8 => Some(labels.as_string::<i64>().value(key)),
        _ => None,
    }
}

/// Reads an Arrow IPC file: its footer checked, then every record batch.
fn read_arrow(path: &Path, label: &str, spec: &TableSpec, cancel: &AtomicBool) -> Result<(Gathered, Vec<Part>), TableError> {
    let mut file = File::open(path).map_err(|e| io_error(label, &e))?;
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    let body_bytes = check_arrow_footer(&mut file, size, label)?;
    let reader = arrow_ipc::reader::FileReader::try_new_buffered(file, None)
        .map_err(|e| columnar_error(label, format!("this is not a readable Arrow IPC file ({e})")))?;
    let schema = reader.schema();
    // Values are stored uncompressed here, 8 bytes for most, so the bodies bound the rows.
    let columns = schema.fields().len().max(1);
    check_size(label, u128::from(body_bytes) / (8 * columns as u128) + 1, columns, u128::from(body_bytes))?;
    let mut gathered = start_gathering(&schema, label, spec)?;
    let mut part = Part { label: label.to_string(), blocks: Vec::new(), start: 0 };
    for (i, batch) in reader.enumerate() {
        if cancel.load(Ordering::Relaxed) {
            return Err(TableError::Interrupted { file: label.into(), row: gathered.rows + FIRST_ROW });
        }
        let batch = batch.map_err(|e| {
            columnar_error(label, format!("record batch {} could not be read ({e}); the file is damaged or cut short", i + 1))
        })?;
        append_batch(&mut gathered, &batch, label)?;
        part.blocks.push(batch.num_rows());
    }
    if gathered.rows == 0 {
        return Err(TableError::HeaderOnly { file: label.into() });
    }
    Ok((gathered, vec![part]))
}

/// The Arrow reader allocates each block at the size the footer declares,
/// so the footer and every block it lists are checked to lie within the
/// file first. Answers the bytes of all blocks.
fn check_arrow_footer(file: &mut File, size: u64, label: &str) -> Result<u64, TableError> {
    let not_arrow = |why: String| columnar_error(label, format!("this is not a readable Arrow IPC file ({why})"));
    let mut tail = [0u8; 10];
    if size < 10 {
        return Err(not_arrow("it is too short".into()));
    }
    file.seek(SeekFrom::End(-10)).and_then(|_| file.read_exact(&mut tail)).map_err(|e| io_error(label, &e))?;
    let footer_len = arrow_ipc::reader::read_footer_length(tail).map_err(|e| not_arrow(e.to_string()))?;
    if footer_len as u64 + 10 > size {
        return Err(not_arrow(format!("its footer declares {footer_len} bytes, more than the file holds")));
    }
    let mut footer = vec![0u8; footer_len];
    file.seek(SeekFrom::End(-10 - footer_len as i64))
        .and_then(|_| file.read_exact(&mut footer))
        .map_err(|e| io_error(label, &e))?;
    let footer = arrow_ipc::root_as_footer(&footer).map_err(|e| not_arrow(e.to_string()))?;
    let mut total = 0u64;
    let blocks = footer.recordBatches().into_iter().flatten().chain(footer.dictionaries().into_iter().flatten());
    for (i, block) in blocks.enumerate() {
        let parts = [block.offset(), i64::from(block.metaDataLength()), block.bodyLength()];
        let end = parts.iter().try_fold(0u64, |sum, &n| u64::try_from(n).ok().and_then(|n| sum.checked_add(n)));
        match end {
            Some(end) if end <= size => total += end - block.offset() as u64,
            _ => {
                return Err(not_arrow(format!(
                    "block {} declares {} bytes at offset {}, beyond the file's {size} bytes; the file is damaged",
                    i + 1,
                    block.bodyLength(),
                    block.offset()
                )))
            }
        }
    }
    file.seek(SeekFrom::Start(0)).map_err(|e| io_error(label, &e))?;
    Ok(total)
}

/// A value error numbered over the whole source, re-placed in its file and
/// row group (or record batch), with its row counted within that file.
fn place_in_part(error: TableError, parts: &[Part], format: ColumnarFormat) -> TableError {
    let block_word = if format == ColumnarFormat::ArrowIpc { "record batch" } else { "row group" };
    let locate = |row: usize| -> Option<(String, usize)> {
        let index = row.checked_sub(FIRST_ROW)?;
        let part = parts.iter().rev().find(|p| p.start <= index)?;
        let (block, in_file) = block_of(part, index - part.start);
        Some((format!("{}, {block_word} {block},", part.label), in_file))
    };
    match error {
        TableError::BadValue { row, column, value, problem, advice, file } => match locate(row) {
            Some((place, in_file)) => TableError::BadValue { file: place.into(), row: in_file, column, value, problem, advice },
            None => TableError::BadValue { file, row, column, value, problem, advice },
        },
        TableError::UnknownLevel { row, column, value, levels, near, file } => match locate(row) {
            Some((place, in_file)) => TableError::UnknownLevel { file: place.into(), row: in_file, column, value, levels, near },
            None => TableError::UnknownLevel { file, row, column, value, levels, near },
        },
        other => other,
    }
}
