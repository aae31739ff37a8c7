//! Headless execution of an analysis — a notebook (nbformat 4) or its plain
//! text form ([`crate::text_form`]) — and the executed notebook.
//!
//! Cells run in order in one [`Session`] whose folder is the analysis file's,
//! so relative paths in cells mean the same as in Jupyter. The executed
//! notebook is written as nbformat 4.5 (every cell has an `id`). A cell is
//! named as the user sees it, by its execution count (`cell [3]`), and for
//! a text analysis also by the file line, since that is what its author
//! edits.
//!
//! No run loses its work: cells run on the large-stack cell thread
//! ([`crate::cell_thread`]), each under a panic guard; the executed notebook
//! and the report are written when the run starts (stale outputs cleared) and
//! again after every cell, each time to a temporary file renamed over the
//! old one, so a reader never sees half a file and an older output never
//! looks current. The notebook's `metadata.waypath.run` says whether the
//! run is `in progress`, `complete` or `stopped`; a failing cell carries
//! `metadata.waypath.failed = true` and the report marks it.

use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::sync::Mutex;

use serde_json::{json, Map, Value};
use waypath::cells::files::write_atomically;
use waypath::cells::{CellError, CellOutcome, RunControl, Session};

use crate::cell_thread::{self, internal_error_message};
use crate::rust_cells::{rust_source, RustCells, StreamName};

/// What `waypath run` was asked to do.
#[derive(Debug, Clone)]
pub struct RunOptions {
    pub input: PathBuf,
    pub out: PathBuf,
    pub html: Option<PathBuf>,
    pub keep_going: bool,
}

/// What happened in a run.
#[derive(Debug, Clone, Default)]
pub struct RunSummary {
    pub executed: usize,
    /// The failing cells by execution count.
    pub failed_cells: Vec<u64>,
    /// How each failing cell is named to the user (`[3]`, or `[3] (from a.waypath line 12)`).
    pub failed_labels: Vec<String>,
    pub written: Vec<PathBuf>,
}

impl RunSummary {
    pub fn describe(&self) -> String {
        let written: Vec<String> = self.written.iter().map(|p| p.display().to_string()).collect();
        let failed = if self.failed_labels.is_empty() {
            "no cell failed".to_string()
        } else {
            format!("failed cell(s): {}", self.failed_labels.join(", "))
        };
        format!("ran {} code cell(s), {failed}; wrote {}", self.executed, written.join(" and "))
    }
}

/// Errors that stop a run before or after its cells (not a failing cell).
#[derive(Debug, thiserror::Error)]
pub enum NotebookError {
    #[error("{path}: cannot read the notebook ({source})")]
    Read { path: String, source: std::io::Error },
    #[error("{path}: not a notebook file ({message})")]
    Format { path: String, message: String },
    #[error("{path}: cannot write ({source}); check that its folder exists and is writable")]
    Write { path: String, source: std::io::Error },
    #[error(transparent)]
    Text(#[from] crate::text_form::TextError),
    #[error("{0}")]
    Refused(String),
    #[error("{0}")]
    Thread(String),
}

/// Where the run's results go, written whole each time.
struct Destinations<'a> {
    options: &'a RunOptions,
    title: String,
}

impl Destinations<'_> {
    /// Write the executed notebook (and the report, if asked) as they stand.
    fn save(&self, notebook: &Value) -> Result<(), NotebookError> {
        let text = serde_json::to_string_pretty(notebook).unwrap_or_default();
        write_file(&self.options.out, &text)?;
        if let Some(html) = &self.options.html {
            write_file(html, &crate::report::render_report(notebook, &self.title))?;
        }
        Ok(())
    }

    fn written(&self) -> Vec<PathBuf> {
        std::iter::once(self.options.out.clone()).chain(self.options.html.clone()).collect()
    }
}

/// Where a text analysis's cells start, to name file lines in errors.
#[derive(Debug, Clone)]
pub struct TextLines {
    /// The file's name as shown.
    pub file: String,
    /// For each cell (by position), the file line its source starts on.
    pub first_lines: Vec<usize>,
}

/// Where one cell of a text analysis starts.
#[derive(Debug, Clone, Copy)]
pub struct CellPlace<'a> {
    pub file: &'a str,
    pub first_line: usize,
}

/// Read an analysis: a `.waypath` file as text (with its cells' lines),
/// anything else as an nbformat 4 notebook.
pub fn read_analysis(path: &Path) -> Result<(Value, Option<TextLines>), NotebookError> {
    if crate::text_form::AnalysisForm::of(path) == Some(crate::text_form::AnalysisForm::Text) {
        let cells = crate::text_form::read_text_file(path)?;
        let file = path.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default();
        let lines = TextLines { file, first_lines: cells.iter().map(|c| c.first_line).collect() };
        return Ok((crate::text_form::text_to_notebook(&cells), Some(lines)));
    }
    Ok((read_notebook(path)?, None))
}

/// Refuse outputs that would write over the input, or over each other.
fn check_destinations(options: &RunOptions) -> Result<(), NotebookError> {
    let same = crate::text_form::is_same_file;
    let refuse = |what: &str, path: &Path| {
        Err(NotebookError::Refused(format!("{}: {what} names the analysis being run; name another file", path.display())))
    };
    if options.out == options.input || same(&options.input, &options.out) {
        return refuse("--out", &options.out);
    }
    if let Some(html) = &options.html {
        if html == &options.input || same(&options.input, html) {
            return refuse("--html", html);
        }
        if html == &options.out || same(&options.out, html) {
            return Err(NotebookError::Refused(format!(
                "{}: --out and --html name the same file; name two files",
                html.display()
            )));
        }
    }
    Ok(())
}

/// Run every code cell of `options.input`; write the executed notebook and,
/// if asked, the HTML report.
pub fn run_notebook(options: &RunOptions) -> Result<RunSummary, NotebookError> {
    check_destinations(options)?;
    let (mut notebook, text_lines) = read_analysis(&options.input)?;
    let base = options.input.parent().map(Path::to_path_buf).unwrap_or_default();
    let base = if base.as_os_str().is_empty() { PathBuf::from(".") } else { base };
    let title = options.input.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default();
    let destinations = Destinations { options, title };
    let mut summary = cell_thread::run(|| {
        let mut session = Session::new(base);
        execute_all(&mut notebook, text_lines.as_ref(), &mut session, options.keep_going, &destinations)
    })
    .map_err(|what| NotebookError::Thread(internal_error_message(&what)))??;
    summary.written = destinations.written();
    Ok(summary)
}

fn write_file(path: &Path, text: &str) -> Result<(), NotebookError> {
    write_atomically(path, text.as_bytes())
        .map_err(|source| NotebookError::Write { path: path.display().to_string(), source })
}

/// The largest notebook file read (bytes): outputs make notebooks large,
/// but a JSON tree takes several times its text in memory.
pub const MAX_NOTEBOOK_BYTES: u64 = 256 << 20;

/// Read and check an nbformat 4 notebook: at most [`MAX_NOTEBOOK_BYTES`],
/// valid JSON, nbformat 4, a list of cells each of which is an object.
pub fn read_notebook(path: &Path) -> Result<Value, NotebookError> {
    let shown = path.display().to_string();
    let read_error = |source| NotebookError::Read { path: shown.clone(), source };
    if std::fs::metadata(path).map_err(read_error)?.len() > MAX_NOTEBOOK_BYTES {
        return Err(NotebookError::Format {
            path: shown.clone(),
            message: format!("larger than {} MiB; clear its outputs in Jupyter first", MAX_NOTEBOOK_BYTES >> 20),
        });
    }
    let text = std::fs::read_to_string(path).map_err(read_error)?;
    let notebook: Value = serde_json::from_str(&text).map_err(|e| {
        let hint = if text.trim_start().starts_with("===") {
            format!("; a plain-text analysis needs the .{} extension", crate::text_form::EXTENSION)
        } else {
            String::new()
        };
        NotebookError::Format { path: shown.clone(), message: format!("invalid JSON: {e}{hint}") }
    })?;
    let format = |message: String| NotebookError::Format { path: shown.clone(), message };
    match notebook.get("nbformat").and_then(Value::as_u64) {
        Some(4) => {}
        other => return Err(format(format!("nbformat {other:?} found; Waypath reads nbformat 4"))),
    }
    let Some(cells) = notebook.get("cells").and_then(Value::as_array) else {
        return Err(format("it has no list of cells".into()));
    };
    if let Some((i, cell)) = cells.iter().enumerate().find(|(_, c)| !c.is_object()) {
        return Err(format(format!(
            "cell {} is {} where nbformat expects an object with \"cell_type\" and \"source\"; \
             fix that cell in the file or re-save the notebook from Jupyter",
            i + 1,
            json_kind(cell)
        )));
    }
    Ok(notebook)
}

/// "a string", "a number" …: what a JSON value is, for format errors.
fn json_kind(value: &Value) -> &'static str {
    match value {
        Value::Null => "null",
        Value::Bool(_) => "a true/false value",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Array(_) => "a list",
        Value::Object(_) => "an object",
    }
}

/// The source of a cell, which nbformat stores as a string or a list of lines.
pub fn cell_source(cell: &Value) -> String {
    match cell.get("source") {
        Some(Value::String(s)) => s.clone(),
        Some(Value::Array(lines)) => lines.iter().filter_map(Value::as_str).collect(),
        _ => String::new(),
    }
}

/// Run the code cells in order, saving the notebook before the first and
/// after each one.
fn execute_all(
    notebook: &mut Value,
    text_lines: Option<&TextLines>,
    session: &mut Session,
    keep_going: bool,
    destinations: &Destinations,
) -> Result<RunSummary, NotebookError> {
    let mut summary = RunSummary::default();
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    let control = RunControl { cancel: &cancel, progress: &progress };
    let mut count = 0u64;
    let mut rust: Option<RustCells> = None;
    upgrade_to_4_5(notebook);
    clear_outputs(notebook);
    set_run_state(notebook, "in progress", &summary);
    destinations.save(notebook)?;
    let code_cells: Vec<usize> = code_cell_indices(notebook);
    for index in code_cells {
        count += 1;
        let source = cell_source(&notebook["cells"][index]);
        let (streams, outcome) = run_guarded(|| match rust_source(&source) {
            Some(code) => run_rust_cell(rust.get_or_insert_with(RustCells::new), code, session),
            None => (Vec::new(), session.run_cell(&source, &control)),
        });
        summary.executed += 1;
        let failed = outcome.error.is_some();
        let place = text_lines.and_then(|t| {
            t.first_lines.get(index).map(|&first_line| CellPlace { file: &t.file, first_line })
        });
        let mut outputs = streams;
        outputs.extend(outputs_of(&outcome, count, place));
        let cell = &mut notebook["cells"][index];
        cell["outputs"] = Value::Array(outputs);
        cell["execution_count"] = json!(count);
        if failed {
            cell["metadata"]["waypath"] = json!({"failed": true});
            summary.failed_cells.push(count);
            summary.failed_labels.push(match place {
                Some(p) => format!("[{count}] (from {} line {})", p.file, p.first_line),
                None => format!("[{count}]"),
            });
        }
        let stop = failed && !keep_going;
        set_run_state(notebook, if stop { "stopped" } else { "in progress" }, &summary);
        destinations.save(notebook)?;
        if stop {
            return Ok(summary);
        }
    }
    set_run_state(notebook, "complete", &summary);
    destinations.save(notebook)?;
    Ok(summary)
}

/// Run one cell under the panic guard; a panic becomes the cell's error.
fn run_guarded(work: impl FnOnce() -> (Vec<Value>, CellOutcome)) -> (Vec<Value>, CellOutcome) {
    cell_thread::guarded(work).unwrap_or_else(|what| {
        let error = CellError { line: None, message: internal_error_message(&what) };
        (Vec::new(), CellOutcome { error: Some(error), ..CellOutcome::default() })
    })
}

/// Positions of the code cells.
fn code_cell_indices(notebook: &Value) -> Vec<usize> {
    let cells = notebook["cells"].as_array().map(Vec::as_slice).unwrap_or_default();
    (0..cells.len()).filter(|&i| cells[i].get("cell_type").and_then(Value::as_str) == Some("code")).collect()
}

/// Empty every code cell's outputs and count: what the file held came from
/// an earlier run and must not pass for this one's.
fn clear_outputs(notebook: &mut Value) {
    for index in code_cell_indices(notebook) {
        let cell = &mut notebook["cells"][index];
        cell["outputs"] = json!([]);
        cell["execution_count"] = Value::Null;
        if let Some(meta) = cell["metadata"].as_object_mut() {
            meta.remove("waypath");
        }
    }
}

/// Record in the notebook's metadata how far the run got.
fn set_run_state(notebook: &mut Value, state: &str, summary: &RunSummary) {
    notebook["metadata"]["waypath"] =
        json!({"run": state, "cells_run": summary.executed, "failed_cells": summary.failed_cells});
}

/// Run a `%%rust` cell; what it prints becomes nbformat stream outputs.
fn run_rust_cell(rust: &mut RustCells, code: &str, session: &mut Session) -> (Vec<Value>, CellOutcome) {
    let printed: Mutex<Vec<(StreamName, String)>> = Mutex::new(Vec::new());
    let sink = |name: StreamName, text: &str| {
        if let Ok(mut p) = printed.lock() {
            match p.last_mut() {
                Some((last, buffer)) if *last == name => buffer.push_str(text),
                _ => p.push((name, text.to_string())),
            }
        }
    };
    // The one-time start-up reports its progress on the terminal, not in
    // the notebook.
    if let Err(message) = rust.start(&|line| eprintln!("{line}")) {
        return (Vec::new(), CellOutcome { error: Some(CellError { line: None, message }), ..CellOutcome::default() });
    }
    let outcome = rust.run(code, session, &sink);
    let streams = printed
        .into_inner()
        .unwrap_or_default()
        .into_iter()
        .map(|(name, text)| json!({"output_type": "stream", "name": name.as_str(), "text": text}))
        .collect();
    (streams, outcome)
}

/// nbformat outputs for one cell's outcome. Errors name the cell by its
/// execution count, as the notebook and the report label it (`cell [3]`),
/// and the line within it; for a cell of a text analysis, `place` adds the
/// file line.
pub fn outputs_of(outcome: &CellOutcome, execution_count: u64, place: Option<CellPlace>) -> Vec<Value> {
    let mut outputs: Vec<Value> = Vec::new();
    if !outcome.warnings.is_empty() {
        let text: String = outcome.warnings.iter().map(|w| format!("warning: {w}\n")).collect();
        outputs.push(json!({"output_type": "stream", "name": "stderr", "text": text}));
    }
    // The cell's result is the written part of its last display (what
    // history keeps); figures and earlier displays are display data.
    let last = outcome.displays.len();
    for (i, display) in outcome.displays.iter().enumerate() {
        for (k, bundle) in display.notebook_bundles().into_iter().enumerate() {
            let data = Value::Object(bundle);
            if i + 1 == last && k == 0 && outcome.error.is_none() {
                outputs.push(json!({"output_type": "execute_result", "execution_count": execution_count,
                                    "data": data, "metadata": {}}));
            } else {
                outputs.push(json!({"output_type": "display_data", "data": data, "metadata": {}}));
            }
        }
    }
    if let Some(error) = &outcome.error {
        let evalue = error_text(error, execution_count, place);
        outputs.push(json!({"output_type": "error", "ename": "WaypathError", "evalue": evalue,
                            "traceback": [evalue]}));
    }
    outputs
}

/// An error as the user reads it: `cell [3], cell line 2: …`, and for a
/// text analysis `cell [3], cell line 2 (a.waypath line 14): …`.
pub fn error_text(error: &CellError, execution_count: u64, place: Option<CellPlace>) -> String {
    let label = format!("cell [{execution_count}]");
    let message = &error.message;
    match (error.line, place) {
        (Some(n), None) => format!("{label}, cell line {n}: {message}"),
        (None, None) => format!("{label}: {message}"),
        (Some(n), Some(p)) => format!("{label}, cell line {n} ({} line {}): {message}", p.file, (p.first_line + n).saturating_sub(1)),
        (None, Some(p)) => format!("{label} (from {} line {}): {message}", p.file, p.first_line),
    }
}

/// The notebook metadata of a Waypath notebook: kernelspec and language.
pub fn waypath_notebook_metadata() -> Value {
    json!({
        "kernelspec": {"name": "waypath", "display_name": "Waypath", "language": "waypath"},
        "language_info": {"name": "waypath", "file_extension": ".wp", "mimetype": "text/x-waypath"},
    })
}

/// Give every cell an `id` and a metadata object, and set nbformat_minor
/// to at least 5, with the Waypath kernelspec in the metadata.
fn upgrade_to_4_5(notebook: &mut Value) {
    let minor = notebook.get("nbformat_minor").and_then(Value::as_u64).unwrap_or(0);
    notebook["nbformat_minor"] = json!(minor.max(5));
    if let Some(cells) = notebook["cells"].as_array_mut() {
        for (i, cell) in cells.iter_mut().enumerate() {
            if cell.get("id").and_then(Value::as_str).is_none() {
                cell["id"] = json!(format!("wp-cell-{:03}", i + 1));
            }
            if !cell.get("metadata").is_some_and(Value::is_object) {
                cell["metadata"] = json!({});
            }
        }
    }
    if !notebook.get("metadata").is_some_and(Value::is_object) {
        notebook["metadata"] = Value::Object(Map::new());
    }
    let standard = waypath_notebook_metadata();
    notebook["metadata"]["kernelspec"] = standard["kernelspec"].clone();
    notebook["metadata"]["language_info"] = standard["language_info"].clone();
}
