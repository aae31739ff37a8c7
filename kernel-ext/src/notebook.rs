//! Headless execution of a notebook file (nbformat 4) and the executed copy.
//!
//! Cells run in order in one [`Session`] whose folder is the notebook's, so
//! relative paths in cells mean the same as in Jupyter. The executed notebook
//! is written as nbformat 4.5 (every cell has an `id`).

use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::sync::Mutex;

use serde_json::{json, Map, Value};
use waypath::cells::{CellError, CellOutcome, RunControl, Session};

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
    pub failed_cells: Vec<usize>,
    pub written: Vec<PathBuf>,
}

impl RunSummary {
    pub fn describe(&self) -> String {
        let written: Vec<String> = self.written.iter().map(|p| p.display().to_string()).collect();
        let failed = if self.failed_cells.is_empty() {
            "no cell failed".to_string()
        } else {
            let cells: Vec<String> = self.failed_cells.iter().map(|c| c.to_string()).collect();
            format!("failed cell(s): {}", cells.join(", "))
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
    #[error("{path}: cannot write ({source})")]
    Write { path: String, source: std::io::Error },
}

/// Run every code cell of `options.input`; write the executed notebook and,
/// if asked, the HTML report.
pub fn run_notebook(options: &RunOptions) -> Result<RunSummary, NotebookError> {
    let mut notebook = read_notebook(&options.input)?;
    let base = options.input.parent().map(Path::to_path_buf).unwrap_or_default();
    let mut session = Session::new(if base.as_os_str().is_empty() { PathBuf::from(".") } else { base });
    let summary = execute_all(&mut notebook, &mut session, options.keep_going);
    let mut summary = summary;
    write_file(&options.out, &serde_json::to_string_pretty(&notebook).unwrap_or_default())?;
    summary.written.push(options.out.clone());
    if let Some(html) = &options.html {
        let title = options.input.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default();
        write_file(html, &crate::report::render_report(&notebook, &title))?;
        summary.written.push(html.clone());
    }
    Ok(summary)
}

fn write_file(path: &Path, text: &str) -> Result<(), NotebookError> {
    std::fs::write(path, text).map_err(|source| NotebookError::Write { path: path.display().to_string(), source })
}

/// Read and check an nbformat 4 notebook.
pub fn read_notebook(path: &Path) -> Result<Value, NotebookError> {
    let shown = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|source| NotebookError::Read { path: shown.clone(), source })?;
    let notebook: Value = serde_json::from_str(&text)
        .map_err(|e| NotebookError::Format { path: shown.clone(), message: format!("invalid JSON: {e}") })?;
    match notebook.get("nbformat").and_then(Value::as_u64) {
        Some(4) => {}
        other => {
            return Err(NotebookError::Format {
                path: shown,
                message: format!("nbformat {other:?} found; Waypath reads nbformat 4"),
            })
        }
    }
    if !notebook.get("cells").is_some_and(Value::is_array) {
        return Err(NotebookError::Format { path: shown, message: "it has no list of cells".into() });
    }
    Ok(notebook)
}

/// The source of a cell, which nbformat stores as a string or a list of lines.
pub fn cell_source(cell: &Value) -> String {
    match cell.get("source") {
        Some(Value::String(s)) => s.clone(),
        Some(Value::Array(lines)) => lines.iter().filter_map(Value::as_str).collect(),
        _ => String::new(),
    }
}

fn execute_all(notebook: &mut Value, session: &mut Session, keep_going: bool) -> RunSummary {
    let mut summary = RunSummary::default();
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    let control = RunControl { cancel: &cancel, progress: &progress };
    let mut stopped = false;
    let mut count = 0u64;
    let mut rust: Option<RustCells> = None;
    upgrade_to_4_5(notebook);
    let cells = notebook["cells"].as_array_mut().expect("checked by read_notebook");
    for (index, cell) in cells.iter_mut().enumerate() {
        if cell.get("cell_type").and_then(Value::as_str) != Some("code") {
            continue;
        }
        let cell = cell.as_object_mut().expect("a cell is an object");
        if stopped {
            cell.insert("outputs".into(), json!([]));
            cell.insert("execution_count".into(), Value::Null);
            continue;
        }
        count += 1;
        let source = cell_source(&Value::Object(cell.clone()));
        let (streams, outcome) = match rust_source(&source) {
            Some(code) => run_rust_cell(rust.get_or_insert_with(RustCells::new), code, session),
            None => (Vec::new(), session.run_cell(&source, &control)),
        };
        summary.executed += 1;
        let failed = outcome.error.is_some();
        let mut outputs = streams;
        outputs.extend(outputs_of(&outcome, index + 1, count));
        cell.insert("outputs".into(), Value::Array(outputs));
        cell.insert("execution_count".into(), json!(count));
        if failed {
            summary.failed_cells.push(index + 1);
            stopped = !keep_going;
        }
    }
    summary
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

/// nbformat outputs for one cell's outcome. Errors name the cell (its
/// 1-based position in the notebook) and the line within it.
pub fn outputs_of(outcome: &CellOutcome, cell_number: usize, execution_count: u64) -> Vec<Value> {
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
        let evalue = format!("cell {cell_number}, {}", error.describe());
        outputs.push(json!({"output_type": "error", "ename": "WaypathError", "evalue": evalue,
                            "traceback": [evalue]}));
    }
    outputs
}

/// Give every cell an `id` and set nbformat_minor to at least 5, with the
/// Waypath kernelspec in the metadata.
fn upgrade_to_4_5(notebook: &mut Value) {
    let minor = notebook.get("nbformat_minor").and_then(Value::as_u64).unwrap_or(0);
    notebook["nbformat_minor"] = json!(minor.max(5));
    if let Some(cells) = notebook["cells"].as_array_mut() {
        for (i, cell) in cells.iter_mut().enumerate() {
            if cell.get("id").and_then(Value::as_str).is_none() {
                cell["id"] = json!(format!("wp-cell-{:03}", i + 1));
            }
            if cell.get("cell_type").and_then(Value::as_str) == Some("code") && cell.get("metadata").is_none() {
                cell["metadata"] = json!({});
            }
        }
    }
    if !notebook.get("metadata").is_some_and(Value::is_object) {
        notebook["metadata"] = Value::Object(Map::new());
    }
    notebook["metadata"]["kernelspec"] =
        json!({"name": "waypath", "display_name": "Waypath", "language": "waypath"});
    notebook["metadata"]["language_info"] =
        json!({"name": "waypath", "file_extension": ".wp", "mimetype": "text/x-waypath"});
}
