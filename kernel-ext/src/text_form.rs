//! The plain-text form of an analysis (`.waypath` files): cells one after
//! another, each opened by a marker line, so that an analysis can be written
//! in any editor and diffs line by line in version control.
//!
//! ```text
//! === notes
//! # Rootstock and fruit yield
//!
//! === code
//! table trees from "data/orchard.csv":
//!     girth: real in cm
//! ```
//!
//! A marker line is `=== code` (Waypath statements, or Rust when the cell's
//! first line is `%%rust`, as in a notebook), `=== notes` (Markdown) or
//! `=== raw` (kept as written, not run). Any other line starting with `===`
//! and then something other than `=` is refused, so a mistyped marker never
//! runs as part of the cell above it; a line of `=` signs alone (a Markdown
//! heading underline) is text. A cell line that would read as a marker is written with a
//! backslash in front (`\=== code`), and reading removes one backslash.
//! Blank lines at the end of a cell separate it from the next marker and
//! are not part of it; nothing but blank lines may come before the first
//! marker.
//!
//! Text → notebook → text gives back the same text for every file in the
//! form this module writes (one blank line between cells, LF line ends).
//! Notebook → text → notebook keeps every cell's kind and source (without
//! trailing blank lines); outputs, execution counts, attachments and
//! metadata have no place in the text, and a conversion says what it left
//! out. Limits are checked before anything is read or allocated beyond them.

use std::io::Read;
use std::path::{Path, PathBuf};

use serde_json::{json, Value};
use waypath::cells::files::{write_atomically, DataFiles};

use crate::notebook::{cell_source, read_notebook, waypath_notebook_metadata, NotebookError};

/// The extension of a plain-text analysis.
pub const EXTENSION: &str = "waypath";
/// The largest text analysis read (bytes).
pub const MAX_TEXT_BYTES: u64 = 16 << 20;
/// The most lines a text analysis may have.
pub const MAX_LINES: usize = 200_000;
/// The longest line (in bytes) a text analysis may have.
pub const MAX_LINE_BYTES: usize = 100_000;
/// The most cells a text analysis may have.
pub const MAX_CELLS: usize = 10_000;

/// The kinds of cell, as marker words and as nbformat cell types.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CellKind {
    Code,
    Notes,
    Raw,
}

impl CellKind {
    const ALL: [CellKind; 3] = [CellKind::Code, CellKind::Notes, CellKind::Raw];

    /// The word of the marker line.
    pub fn word(self) -> &'static str {
        match self {
            CellKind::Code => "code",
            CellKind::Notes => "notes",
            CellKind::Raw => "raw",
        }
    }

    /// The nbformat `cell_type`.
    pub fn nbformat_type(self) -> &'static str {
        match self {
            CellKind::Code => "code",
            CellKind::Notes => "markdown",
            CellKind::Raw => "raw",
        }
    }

    fn from_word(word: &str) -> Option<CellKind> {
        CellKind::ALL.into_iter().find(|k| k.word() == word)
    }

    fn from_nbformat(cell_type: &str) -> Option<CellKind> {
        CellKind::ALL.into_iter().find(|k| k.nbformat_type() == cell_type)
    }
}

/// One cell read from text: its kind, its source and the file line its
/// source starts on (1-based; the line after its marker).
#[derive(Debug, Clone, PartialEq)]
pub struct TextCell {
    pub kind: CellKind,
    pub source: String,
    pub first_line: usize,
}

/// Why a text analysis could not be read.
#[derive(Debug, thiserror::Error)]
pub enum TextError {
    #[error("{path}: cannot read the analysis ({source})")]
    Read { path: String, source: std::io::Error },
    #[error("{path}: {message}")]
    File { path: String, message: String },
    #[error("{path} line {line}: {message}")]
    Line { path: String, line: usize, message: String },
}

/// What a marker line opens, if `line` is one; `Err` for a line that looks
/// like a marker but is not a valid one. Lines of `=` alone are not markers.
fn marker_of(line: &str) -> Option<Result<CellKind, String>> {
    if !looks_like_marker(line) {
        return None;
    }
    let rest = &line[3..];
    let word = rest.trim();
    Some(match CellKind::from_word(word) {
        Some(kind) if rest.starts_with([' ', '\t']) => Ok(kind),
        _ => Err(format!(
            "{:?} is not a cell marker; a marker line is `=== code`, `=== notes` or `=== raw` \
             (to start a line of a cell with `===` and a word, write `\\===`)",
            line.trim_end()
        )),
    })
}

/// A line that the reader takes for a marker: `===`, then something other
/// than `=` that is not only white space.
fn looks_like_marker(line: &str) -> bool {
    match line.strip_prefix("===") {
        Some(rest) => !rest.starts_with('=') && !rest.trim().is_empty(),
        None => false,
    }
}

fn is_blank(line: &str) -> bool {
    line.trim().is_empty()
}

/// Read a text analysis from `text` (`path` names it in errors).
pub fn parse_text(text: &str, path: &str) -> Result<Vec<TextCell>, TextError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let error = |line: usize, message: String| TextError::Line { path: path.to_string(), line, message };
    let mut cells: Vec<TextCell> = Vec::new();
    let mut open: Option<(CellKind, usize, Vec<&str>)> = None;
    for (index, raw) in text.split('\n').enumerate() {
        let number = index + 1;
        if number > MAX_LINES {
            return Err(error(number, format!("the analysis has more than {MAX_LINES} lines; split it into several files")));
        }
        if raw.len() > MAX_LINE_BYTES {
            return Err(error(number, format!("this line is {} bytes long; a line may have at most {MAX_LINE_BYTES}", raw.len())));
        }
        let line = raw.strip_suffix('\r').unwrap_or(raw);
        match marker_of(line) {
            Some(Ok(kind)) => {
                if let Some(cell) = open.take() {
                    cells.push(close_cell(cell));
                }
                if cells.len() >= MAX_CELLS {
                    return Err(error(number, format!("the analysis has more than {MAX_CELLS} cells")));
                }
                open = Some((kind, number + 1, Vec::new()));
            }
            Some(Err(message)) => return Err(error(number, message)),
            None => match open.as_mut() {
                Some((_, _, lines)) => lines.push(unescape(line)),
                None if is_blank(line) => {}
                None => {
                    return Err(error(
                        number,
                        "text before the first cell marker; start each cell with a line `=== code` \
                         (statements) or `=== notes` (Markdown)"
                            .into(),
                    ))
                }
            },
        }
    }
    if let Some(cell) = open.take() {
        cells.push(close_cell(cell));
    }
    Ok(cells)
}

fn close_cell((kind, first_line, mut lines): (CellKind, usize, Vec<&str>)) -> TextCell {
    while lines.last().is_some_and(|l| is_blank(l)) {
        lines.pop();
    }
    TextCell { kind, source: lines.join("\n"), first_line }
}

/// A cell line as stored: one leading backslash removed from an escaped
/// marker-like line.
fn unescape(line: &str) -> &str {
    match line.strip_prefix('\\') {
        Some(rest) if looks_like_marker(line.trim_start_matches('\\')) => rest,
        _ => line,
    }
}

/// Write cells in the text form: a marker line, the source, and one blank
/// line before the next marker. Carriage returns before line ends and blank
/// lines at the end of a source are left out.
pub fn write_text<'a>(cells: impl IntoIterator<Item = (CellKind, &'a str)>) -> String {
    let mut out = String::new();
    for (i, (kind, source)) in cells.into_iter().enumerate() {
        if i > 0 {
            out.push('\n');
        }
        out.push_str("=== ");
        out.push_str(kind.word());
        out.push('\n');
        let mut lines: Vec<&str> = source.split('\n').map(|l| l.strip_suffix('\r').unwrap_or(l)).collect();
        while lines.last().is_some_and(|l| is_blank(l)) {
            lines.pop();
        }
        for line in lines {
            if looks_like_marker(line.trim_start_matches('\\')) {
                out.push('\\');
            }
            out.push_str(line);
            out.push('\n');
        }
    }
    out
}

/// A notebook (nbformat 4.5, no outputs) holding the cells read from text.
/// Cell ids are `wp-cell-001`, `wp-cell-002`, … in order.
pub fn text_to_notebook(cells: &[TextCell]) -> Value {
    let cells: Vec<Value> = cells
        .iter()
        .enumerate()
        .map(|(i, cell)| {
            let lines: Vec<&str> = cell.source.split_inclusive('\n').collect();
            let mut json = json!({"cell_type": cell.kind.nbformat_type(), "id": format!("wp-cell-{:03}", i + 1),
                                  "metadata": {}, "source": lines});
            if cell.kind == CellKind::Code {
                json["execution_count"] = Value::Null;
                json["outputs"] = json!([]);
            }
            json
        })
        .collect();
    json!({"cells": cells, "metadata": waypath_notebook_metadata(), "nbformat": 4, "nbformat_minor": 5})
}

/// What going from a notebook to text left out.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LeftOut {
    /// Code cells that had outputs.
    pub cells_with_outputs: usize,
    /// Attachments of markdown cells (pasted images).
    pub attachments: usize,
    /// Cells with metadata other than an empty object.
    pub cells_with_metadata: usize,
}

impl LeftOut {
    fn describe(&self) -> Option<String> {
        let mut parts = Vec::new();
        if self.cells_with_outputs > 0 {
            parts.push(format!("the outputs of {} code cell(s)", self.cells_with_outputs));
        }
        if self.attachments > 0 {
            parts.push(format!("{} attachment(s) of notes cells (pasted images)", self.attachments));
        }
        if self.cells_with_metadata > 0 {
            parts.push(format!("the metadata of {} cell(s)", self.cells_with_metadata));
        }
        (!parts.is_empty()).then(|| format!("left out {}", parts.join(", ")))
    }
}

/// The text form of a notebook, and what it left out. `path` names the
/// notebook in errors.
pub fn notebook_to_text(notebook: &Value, path: &str) -> Result<(String, LeftOut), NotebookError> {
    let mut left_out = LeftOut::default();
    let mut cells: Vec<(CellKind, String)> = Vec::new();
    for (i, cell) in notebook["cells"].as_array().into_iter().flatten().enumerate() {
        let cell_type = cell.get("cell_type").and_then(Value::as_str).unwrap_or("");
        let kind = CellKind::from_nbformat(cell_type).ok_or_else(|| NotebookError::Format {
            path: path.to_string(),
            message: format!("cell {} has cell_type {cell_type:?}; nbformat 4 knows code, markdown and raw", i + 1),
        })?;
        if cell.get("outputs").and_then(Value::as_array).is_some_and(|o| !o.is_empty()) {
            left_out.cells_with_outputs += 1;
        }
        left_out.attachments += cell.get("attachments").and_then(Value::as_object).map_or(0, |a| a.len());
        if cell.get("metadata").and_then(Value::as_object).is_some_and(|m| !m.is_empty()) {
            left_out.cells_with_metadata += 1;
        }
        cells.push((kind, cell_source(cell)));
    }
    Ok((write_text(cells.iter().map(|(k, s)| (*k, s.as_str()))), left_out))
}

/// Read a text analysis file: at most [`MAX_TEXT_BYTES`], UTF-8 (a byte
/// that is not names its line).
pub fn read_text_file(path: &Path) -> Result<Vec<TextCell>, TextError> {
    let shown = path.display().to_string();
    let read_error = |source| TextError::Read { path: shown.clone(), source };
    let file = std::fs::File::open(path).map_err(read_error)?;
    let size = file.metadata().map_err(read_error)?.len();
    let too_large = || TextError::File {
        path: shown.clone(),
        message: format!("a text analysis may be at most {} MiB; this file is larger", MAX_TEXT_BYTES >> 20),
    };
    if size > MAX_TEXT_BYTES {
        return Err(too_large());
    }
    let mut bytes = Vec::new();
    file.take(MAX_TEXT_BYTES + 1).read_to_end(&mut bytes).map_err(read_error)?;
    if bytes.len() as u64 > MAX_TEXT_BYTES {
        return Err(too_large());
    }
    let text = String::from_utf8(bytes).map_err(|e| {
        let valid = e.utf8_error().valid_up_to();
        let bytes = e.as_bytes();
        let line = bytes[..valid].iter().filter(|&&b| b == b'\n').count() + 1;
        let line_start = bytes[..valid].iter().rposition(|&b| b == b'\n').map_or(0, |p| p + 1);
        TextError::Line {
            path: shown.clone(),
            line,
            message: format!("byte {} of this line is not UTF-8 text; save the file as UTF-8", valid - line_start + 1),
        }
    })?;
    parse_text(&text, &shown)
}

/// The two forms of an analysis file, told apart by extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnalysisForm {
    Text,
    Notebook,
}

impl AnalysisForm {
    /// The form a path's extension names (`.waypath` or `.ipynb`).
    pub fn of(path: &Path) -> Option<AnalysisForm> {
        match path.extension().and_then(|e| e.to_str()) {
            Some(EXTENSION) => Some(AnalysisForm::Text),
            Some("ipynb") => Some(AnalysisForm::Notebook),
            _ => None,
        }
    }

    fn extension(self) -> &'static str {
        match self {
            AnalysisForm::Text => EXTENSION,
            AnalysisForm::Notebook => "ipynb",
        }
    }

    fn other(self) -> AnalysisForm {
        match self {
            AnalysisForm::Text => AnalysisForm::Notebook,
            AnalysisForm::Notebook => AnalysisForm::Text,
        }
    }
}

/// What `waypath transcribe` was asked to do.
#[derive(Debug, Clone)]
pub struct TranscribeOptions {
    pub input: PathBuf,
    /// Default: the input's name with the other extension, beside it.
    pub out: Option<PathBuf>,
    /// Write over an existing output file.
    pub replace: bool,
}

/// Why a conversion did not happen.
#[derive(Debug, thiserror::Error)]
pub enum TranscribeError {
    #[error("{0}")]
    Refused(String),
    #[error(transparent)]
    Text(#[from] TextError),
    #[error(transparent)]
    Notebook(#[from] NotebookError),
}

/// Convert a text analysis to a notebook or a notebook to text, by the
/// input's extension; returns a one-line account of what was written.
pub fn transcribe(options: &TranscribeOptions) -> Result<String, TranscribeError> {
    let input = &options.input;
    let refuse = |message: String| TranscribeError::Refused(message);
    let form = AnalysisForm::of(input).ok_or_else(|| {
        refuse(format!("{}: name a .{EXTENSION} (text) or .ipynb (notebook) file to convert", input.display()))
    })?;
    let target = form.other();
    let out = options.out.clone().unwrap_or_else(|| input.with_extension(target.extension()));
    if AnalysisForm::of(&out) != Some(target) {
        return Err(refuse(format!(
            "{}: the converted {} is written to a .{} file",
            out.display(),
            if target == AnalysisForm::Text { "text" } else { "notebook" },
            target.extension()
        )));
    }
    check_output(input, &out, options.replace).map_err(refuse)?;
    let shown = input.display().to_string();
    let (text, account) = match form {
        AnalysisForm::Text => {
            let cells = read_text_file(input)?;
            let notebook = text_to_notebook(&cells);
            let text = serde_json::to_string_pretty(&notebook).unwrap_or_default() + "\n";
            (text, format!("{} cell(s){}", cells.len(), kinds_note(cells.iter().map(|c| c.kind))))
        }
        AnalysisForm::Notebook => {
            let notebook = read_notebook(input)?;
            let (text, left_out) = notebook_to_text(&notebook, &shown)?;
            // Read back before writing: a notebook past the text limits (a
            // pasted image as one long line, say) is refused, not half kept.
            let cells = parse_text(&text, &out.display().to_string()).map_err(|e| match e {
                TextError::Line { line, message, .. } => refuse(format!(
                    "{shown}: cannot be written as text: {message} (line {line} of the text it would make); \
                     keep this analysis as a notebook"
                )),
                other => TranscribeError::Text(other),
            })?;
            let mut account = format!("{} cell(s){}", cells.len(), kinds_note(cells.iter().map(|c| c.kind)));
            if let Some(note) = left_out.describe() {
                account.push_str("; ");
                account.push_str(&note);
            }
            (text, account)
        }
    };
    write_atomically(&out, text.as_bytes()).map_err(|source| {
        TranscribeError::Notebook(NotebookError::Write { path: out.display().to_string(), source })
    })?;
    Ok(format!("wrote {}: {account}", out.display()))
}

/// " (2 code, 1 notes)": how many cells of each kind.
fn kinds_note(kinds: impl Iterator<Item = CellKind>) -> String {
    let kinds: Vec<CellKind> = kinds.collect();
    let parts: Vec<String> = CellKind::ALL
        .into_iter()
        .filter_map(|k| {
            let n = kinds.iter().filter(|&&c| c == k).count();
            (n > 0).then(|| format!("{n} {}", k.word()))
        })
        .collect();
    if parts.is_empty() {
        String::new()
    } else {
        format!(" ({})", parts.join(", "))
    }
}

/// Refuse an output that is the input (under any spelling or through a
/// hard link), a folder, or an existing file unless `replace` is set.
pub fn check_output(input: &Path, out: &Path, replace: bool) -> Result<(), String> {
    if is_same_file(input, out) {
        return Err(format!("{}: that is the input file; name another output", out.display()));
    }
    if out.is_dir() {
        return Err(format!("{}: is a folder; name a file", out.display()));
    }
    if out.exists() && !replace {
        return Err(format!("{}: exists; add --replace to write over it, or name another output with --out", out.display()));
    }
    Ok(())
}

/// Whether two paths name one existing file.
pub fn is_same_file(a: &Path, b: &Path) -> bool {
    let mut files = DataFiles::default();
    files.remember(a);
    files.overwritten_by(b).is_some()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn kinds_and_sources(cells: &[TextCell]) -> Vec<(CellKind, &str)> {
        cells.iter().map(|c| (c.kind, c.source.as_str())).collect()
    }

    #[test]
    fn cells_are_read_with_their_kinds_sources_and_first_lines() {
        let text = "\n=== notes\n# Saplings\n\nunder shade\n\n=== code\ngraph g:\n    a -> b\n\n\n=== code\n%%rust\nlet x = 1;\n=== raw\nas is\n";
        let cells = parse_text(text, "s.waypath").unwrap();
        assert_eq!(
            kinds_and_sources(&cells),
            vec![
                (CellKind::Notes, "# Saplings\n\nunder shade"),
                (CellKind::Code, "graph g:\n    a -> b"),
                (CellKind::Code, "%%rust\nlet x = 1;"),
                (CellKind::Raw, "as is"),
            ]
        );
        // the line after each marker, counted by hand in `text`
        assert_eq!(cells.iter().map(|c| c.first_line).collect::<Vec<_>>(), vec![3, 8, 13, 16]);
    }

    #[test]
    fn written_text_reads_back_and_canonical_text_is_a_fixed_point() {
        let sources = [
            (CellKind::Notes, "Heading\n===\n\n=== code inside notes\n\\=== already escaped"),
            (CellKind::Code, ""),
            (CellKind::Code, "\n\ntable t from \"a.csv\":\n    x: real\n"),
            (CellKind::Raw, "====== not a marker\n===code\n  === indented"),
        ];
        let text = write_text(sources);
        for escaped in ["\n\\=== code inside notes\n\\\\=== already escaped\n", "\n\\===code\n", "\n===\n", "\n====== not"] {
            assert!(text.contains(escaped), "{escaped:?} in {text}");
        }
        let cells = parse_text(&text, "t.waypath").unwrap();
        let expected: Vec<(CellKind, &str)> =
            sources.iter().map(|(k, s)| (*k, s.trim_end_matches('\n'))).collect();
        assert_eq!(kinds_and_sources(&cells), expected);
        let again = write_text(cells.iter().map(|c| (c.kind, c.source.as_str())));
        assert_eq!(again, text);
    }

    #[test]
    fn bad_text_is_refused_with_its_line() {
        let cases = [
            ("graph g:\n    a -> b\n", 1, "before the first cell marker"),
            ("=== code\ngraph g:\n=== cell\n", 3, "not a cell marker"),
            ("=== code\nx\n\n===notes\n", 4, "not a cell marker"),
        ];
        for (text, line, words) in cases {
            match parse_text(text, "bad.waypath") {
                Err(TextError::Line { line: got, message, path }) => {
                    assert_eq!((got, path.as_str()), (line, "bad.waypath"), "{text:?}");
                    assert!(message.contains(words), "{text:?}: {message}");
                }
                other => panic!("{text:?}: {other:?}"),
            }
        }
        let long = format!("=== code\n{}\n", "x".repeat(MAX_LINE_BYTES + 1));
        assert!(matches!(parse_text(&long, "l.waypath"), Err(TextError::Line { line: 2, .. })));
        let many = "=== code\n".repeat(MAX_CELLS + 1);
        assert!(matches!(parse_text(&many, "m.waypath"), Err(TextError::Line { line, .. }) if line == MAX_CELLS + 1));
    }

    #[test]
    fn crlf_line_ends_and_a_byte_order_mark_are_read_as_plain_lines() {
        let cells = parse_text("\u{feff}=== code\r\ngraph g:\r\n    a -> b\r\n", "w.waypath").unwrap();
        assert_eq!(kinds_and_sources(&cells), vec![(CellKind::Code, "graph g:\n    a -> b")]);
    }
}
