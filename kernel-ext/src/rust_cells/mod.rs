//! `%%rust` cells: Rust code run in an embedded evcxr context that has the
//! `waypath` library and the bridge functions of [`bridge_prelude`] in scope.
//!
//! The context starts on the first Rust cell (so notebooks without one never
//! pay for it). Its build folder persists under `~/.cache/waypath/evcxr`
//! (or `$WAYPATH_EVCXR_DIR`), so the library is compiled for Rust cells once
//! per machine, not once per kernel; a lock file gives a second kernel its
//! own slot. Cells compile offline. Before each cell the session's tables
//! are written to an exchange folder; after it, tables the cell published
//! are read back into the session. A compile error, a panic or a killed
//! child process becomes the cell's error; the session is untouched by it.
//!
//! The same component serves the kernel and `waypath run`.

pub mod bridge_prelude;

use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Child, Command};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use evcxr::{CommandContext, EvalContext, EvalContextOutputs};
use waypath::cells::{CellError, CellOutcome, Display, Session};

/// The marker line that makes a cell a Rust cell.
pub const RUST_MAGIC: &str = "%%rust";

/// Which output stream a line of a Rust cell went to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StreamName {
    Stdout,
    Stderr,
}

impl StreamName {
    /// The stream's name in Jupyter messages and nbformat.
    pub fn as_str(self) -> &'static str {
        match self {
            StreamName::Stdout => "stdout",
            StreamName::Stderr => "stderr",
        }
    }
}

/// The Rust code of a `%%rust` cell (after the marker line), or `None` for
/// a declarative cell.
pub fn rust_source(cell: &str) -> Option<&str> {
    let trimmed = cell.trim_start_matches(['\n', '\r', ' ']);
    let rest = trimmed.strip_prefix(RUST_MAGIC)?;
    match rest.find('\n') {
        Some(i) if rest[..i].trim().is_empty() => Some(&rest[i + 1..]),
        None if rest.trim().is_empty() => Some(""),
        _ => None,
    }
}

/// Stops a running Rust cell from another thread (by ending the child
/// process that runs it; the next cell starts a fresh one).
#[derive(Clone, Default)]
pub struct RustInterrupt {
    running: Arc<AtomicBool>,
    child: Arc<Mutex<Option<Arc<Mutex<Child>>>>>,
}

impl RustInterrupt {
    /// End the running Rust cell, if one is running. Returns whether one was.
    pub fn interrupt(&self) -> bool {
        if !self.running.load(Ordering::SeqCst) {
            return false;
        }
        let guard = self.child.lock().unwrap_or_else(|p| p.into_inner());
        if let Some(child) = guard.as_ref() {
            let _ = child.lock().unwrap_or_else(|p| p.into_inner()).kill();
        }
        true
    }
}

/// A started evcxr context and where it trades tables.
struct Context {
    commands: CommandContext,
    outputs: EvalContextOutputs,
    exchange: PathBuf,
    /// Held for the life of the context: the build slot is ours.
    _slot_lock: File,
}

/// Runs `%%rust` cells; one per session.
#[derive(Default)]
pub struct RustCells {
    context: Option<Context>,
    interrupt: RustInterrupt,
}

impl RustCells {
    /// A component that starts its Rust context on first use.
    pub fn new() -> RustCells {
        RustCells::default()
    }

    /// A handle that stops the running cell from another thread.
    pub fn interrupter(&self) -> RustInterrupt {
        self.interrupt.clone()
    }

    /// Run the Rust code of one cell against `session`. Printed lines go to
    /// `sink` as they come; the final expression's value becomes a display.
    pub fn run(
        &mut self,
        code: &str,
        session: &mut Session,
        sink: &(dyn Fn(StreamName, &str) + Sync),
    ) -> CellOutcome {
        let mut outcome = CellOutcome::default();
        if self.context.is_none() {
            sink(StreamName::Stderr, "starting the Rust context (the first time on this machine compiles the waypath library for it)…\n");
            match start_context() {
                Ok(context) => {
                    *self.interrupt.child.lock().unwrap_or_else(|p| p.into_inner()) =
                        Some(context.commands.process_handle());
                    self.context = Some(context);
                }
                Err(message) => {
                    outcome.error = Some(CellError { line: None, message });
                    return outcome;
                }
            }
        }
        let Some(context) = self.context.as_mut() else { return outcome };
        if let Err(message) = export_tables(session, &context.exchange) {
            outcome.error = Some(CellError { line: None, message });
            return outcome;
        }
        self.interrupt.running.store(true, Ordering::SeqCst);
        let (result, panic) = eval_streaming(context, code, sink);
        self.interrupt.running.store(false, Ordering::SeqCst);
        match (result, panic) {
            (_, Some(message)) => {
                outcome.error = Some(CellError {
                    line: None,
                    message: format!(
                        "the Rust cell panicked: {message}; the session's tables, graphs and fits are kept"
                    ),
                })
            }
            (Err(error), None) => outcome.error = Some(describe_error(error, code)),
            (Ok(outputs), None) => outcome.displays.extend(display_of(&outputs)),
        }
        import_published(session, &context.exchange, &mut outcome);
        outcome
    }
}

/// Run one evaluation while a scoped thread forwards printed lines; also
/// returns the message of a panic in the cell (evcxr reports a panic only
/// on the child's stderr).
fn eval_streaming(
    context: &mut Context,
    code: &str,
    sink: &(dyn Fn(StreamName, &str) + Sync),
) -> (Result<evcxr::EvalOutputs, evcxr::Error>, Option<String>) {
    let done = AtomicBool::new(false);
    let stdout = context.outputs.stdout.clone();
    let stderr = context.outputs.stderr.clone();
    std::thread::scope(|scope| {
        let forwarder = scope.spawn(|| forward_lines(&stdout, &stderr, &done, sink));
        let result = context.commands.execute(code);
        done.store(true, Ordering::SeqCst);
        let panic = forwarder.join().unwrap_or(None);
        (result, panic)
    })
}

/// Pass lines to `sink` until `done`, then drain what is left. A panic
/// report is taken out of stderr and returned as its message.
fn forward_lines(
    stdout: &crossbeam_channel::Receiver<String>,
    stderr: &crossbeam_channel::Receiver<String>,
    done: &AtomicBool,
    sink: &(dyn Fn(StreamName, &str) + Sync),
) -> Option<String> {
    let tick = Duration::from_millis(20);
    let mut panic = PanicReport::default();
    let mut idle_after_done = false;
    while !idle_after_done {
        let finished = done.load(Ordering::SeqCst);
        crossbeam_channel::select! {
            recv(stdout) -> line => if let Ok(line) = line { sink(StreamName::Stdout, &format!("{line}\n")) },
            recv(stderr) -> line => if let Ok(line) = line {
                if !panic.absorb(&line) {
                    sink(StreamName::Stderr, &format!("{line}\n"))
                }
            },
            default(tick) => idle_after_done = finished,
        }
    }
    panic.message
}

/// Recognises the standard panic report on stderr: `thread '…' panicked
/// at …`, the message lines, an optional `stack backtrace:` block, and a
/// closing `note:` line.
#[derive(Default)]
struct PanicReport {
    message: Option<String>,
    in_message: bool,
    in_backtrace: bool,
}

impl PanicReport {
    /// Whether `line` belongs to a panic report (and so is not shown).
    fn absorb(&mut self, line: &str) -> bool {
        if line.starts_with("thread '") && line.contains(" panicked at ") {
            self.message = Some(String::new());
            self.in_message = true;
            return true;
        }
        if self.in_message {
            if line == "stack backtrace:" {
                self.in_message = false;
                self.in_backtrace = true;
            } else if line.starts_with("note: ") {
                self.in_message = false;
            } else if let Some(message) = self.message.as_mut() {
                if !message.is_empty() {
                    message.push(' ');
                }
                message.push_str(line.trim());
            }
            return true;
        }
        if self.in_backtrace {
            self.in_backtrace = !line.starts_with("note: ");
            return true;
        }
        false
    }
}

/// The cell's value as a display (plain text, plus HTML if it gave one).
/// A block that ends in a statement has the value `()`, which shows nothing.
fn display_of(outputs: &evcxr::EvalOutputs) -> Option<Display> {
    let plain = outputs.get("text/plain")?.to_string();
    let html = outputs.get("text/html").map(str::to_string);
    if plain.trim() == "()" && html.is_none() {
        return None;
    }
    Some(Display { plain, html, ..Display::default() })
}

/// One error naming the cell line and column (counted from the line after
/// `%%rust`), with the compiler's advice.
fn describe_error(error: evcxr::Error, code: &str) -> CellError {
    match error {
        evcxr::Error::CompilationErrors(errors) => {
            let text: Vec<String> = errors.iter().map(|e| compile_error_text(e, code)).collect();
            // Each message names its own cell line and column.
            CellError { line: None, message: text.join("\n") }
        }
        evcxr::Error::SubprocessTerminated(why) if why.contains("signal: 9") || why.contains("SIGKILL") => {
            CellError {
                line: None,
                message: "the Rust cell was interrupted; variables defined in earlier Rust cells are gone, \
                          the session's tables, graphs and fits are kept"
                    .into(),
            }
        }
        other => CellError { line: None, message: format!("the Rust cell failed: {}", other.to_string().trim()) },
    }
}

/// "line 2, column 5: cannot find value `x` in this scope" (lines of the
/// whole cell, so the `%%rust` line is line 1).
fn compile_error_text(error: &evcxr::CompilationError, code: &str) -> String {
    let place = error.primary_spanned_message().and_then(|m| m.span).map(|s| {
        let source_line = code.lines().nth(s.start_line.saturating_sub(1)).unwrap_or("");
        format!("cell line {}, column {}: `{}`: ", s.start_line + 1, s.start_column, source_line.trim())
    });
    let mut text = format!("{}{}", place.unwrap_or_default(), error.message());
    for help in error.help() {
        text.push_str(&format!(" (help: {help})"));
    }
    text
}

/// Start evcxr in a persistent build slot, offline, with `waypath` and the
/// bridge functions.
fn start_context() -> Result<Context, String> {
    let (slot, lock) = claim_build_slot()?;
    // evcxr reads its build folder from this variable when the context starts.
    std::env::set_var("EVCXR_TMPDIR", &slot);
    let exchange = std::env::temp_dir().join(format!("waypath-exchange-{}", std::process::id()));
    std::fs::create_dir_all(&exchange)
        .map_err(|e| format!("cannot make the exchange folder {}: {e}", exchange.display()))?;
    let exe = std::env::current_exe().map_err(|e| format!("cannot find the waypath program: {e}"))?;
    let mut child = Command::new(exe);
    child.env("WAYPATH_EXCHANGE", &exchange);
    if let Some(dir) = rust_std_dir() {
        child.env("LD_LIBRARY_PATH", with_search_dir(&dir));
    }
    let (eval, outputs) = EvalContext::with_subprocess_command(child)
        .map_err(|e| format!("the Rust context did not start: {e}"))?;
    let mut commands = CommandContext::with_eval_context(eval);
    let library = library_dir();
    // One build for the settings, the library and the bridge.
    let setup = format!(
        ":offline 1\n:dep waypath = {{ path = {:?} }}\n{}",
        library.display().to_string(),
        prelude_source()
    );
    commands.execute(&setup).map_err(|e| {
        format!("the Rust context cannot build the waypath library at {} with the cell bridge: {e}", library.display())
    })?;
    Ok(Context { commands, outputs, exchange, _slot_lock: lock })
}

/// The folder of the toolchain's shared `libstd`, which compiled cells link
/// to. The run path cargo writes into a cell's library is relative to the
/// build folder's depth and misses it under a deep persistent folder, so
/// the child process gets it on its library search path instead.
fn rust_std_dir() -> Option<String> {
    let out = Command::new("rustc").args(["--print", "target-libdir"]).output().ok()?;
    let dir = String::from_utf8(out.stdout).ok()?.trim().to_string();
    (out.status.success() && !dir.is_empty()).then_some(dir)
}

/// `dir` in front of any existing `LD_LIBRARY_PATH`.
fn with_search_dir(dir: &str) -> String {
    match std::env::var("LD_LIBRARY_PATH") {
        Ok(old) if !old.is_empty() => format!("{dir}:{old}"),
        _ => dir.to_string(),
    }
}

/// The library's source folder: `$WAYPATH_LIBRARY_DIR`, else the one this
/// program was built from.
fn library_dir() -> PathBuf {
    match std::env::var_os("WAYPATH_LIBRARY_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("..").join("library"),
    }
    .canonicalize()
    .unwrap_or_else(|_| Path::new(env!("CARGO_MANIFEST_DIR")).join("../library"))
}

/// The bridge source without its module doc lines.
fn prelude_source() -> String {
    include_str!("bridge_prelude.rs").lines().filter(|l| !l.starts_with("//!")).collect::<Vec<_>>().join("\n")
}

/// The first build slot whose lock file we can hold.
fn claim_build_slot() -> Result<(PathBuf, File), String> {
    let root = match std::env::var_os("WAYPATH_EVCXR_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => std::env::var_os("HOME")
            .map(|h| PathBuf::from(h).join(".cache/waypath/evcxr"))
            .unwrap_or_else(|| std::env::temp_dir().join("waypath-evcxr")),
    };
    for n in 0..8 {
        let slot = root.join(format!("slot{n}"));
        std::fs::create_dir_all(&slot).map_err(|e| format!("cannot make {}: {e}", slot.display()))?;
        let lock = File::create(slot.join("in-use.lock")).map_err(|e| format!("cannot lock {}: {e}", slot.display()))?;
        if lock.try_lock().is_ok() {
            return Ok((slot, lock));
        }
    }
    Err(format!("all 8 Rust build slots under {} are in use; close a kernel and retry", root.display()))
}

/// Write every session table to `exchange/tables/` and the draws of every
/// fitted model to `exchange/draws/`, clearing `published/`.
fn export_tables(session: &Session, exchange: &Path) -> Result<(), String> {
    let tables = exchange.join("tables");
    let draws = exchange.join("draws");
    for dir in [&tables, &draws, &exchange.join("published")] {
        let _ = std::fs::remove_dir_all(dir);
    }
    std::fs::create_dir_all(&draws).map_err(|e| format!("cannot write {}: {e}", draws.display()))?;
    for (name, kind) in session.names() {
        if let Some(table) = session.table(&name).filter(|_| kind == "table") {
            bridge_prelude::wp_write_table(&tables, &name, table)?;
        }
        if let Some(fit) = session.fit(&name).filter(|_| kind == "model") {
            let path = draws.join(format!("{name}.csv"));
            let file = File::create(&path).map_err(|e| format!("cannot write {}: {e}", path.display()))?;
            fit.draws.write_csv(std::io::BufWriter::new(file)).map_err(|e| format!("draws of {name}: {e}"))?;
        }
    }
    Ok(())
}

/// Read tables a cell published back into the session, one display each.
fn import_published(session: &mut Session, exchange: &Path, outcome: &mut CellOutcome) {
    let dir = exchange.join("published");
    let Ok(entries) = std::fs::read_dir(&dir) else { return };
    let mut names: Vec<String> = entries
        .filter_map(|e| e.ok())
        .filter_map(|e| e.file_name().to_str().and_then(|n| n.strip_suffix(".columns")).map(str::to_string))
        .collect();
    names.sort();
    for name in names {
        match bridge_prelude::wp_read_table(&dir, &name) {
            Ok(table) => {
                let text = format!("published table {name}: {} rows, columns {}", table.nrows(), table.column_names().join(", "));
                session.put_table(&name, table);
                outcome.displays.push(Display::text(text));
            }
            Err(message) => outcome.warnings.push(message),
        }
    }
}

impl Drop for RustCells {
    fn drop(&mut self) {
        if let Some(context) = &self.context {
            let _ = std::fs::remove_dir_all(&context.exchange);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use waypath::table::{Column, ColumnData, Table};

    #[test]
    fn only_a_leading_marker_line_makes_a_rust_cell() {
        assert_eq!(rust_source("%%rust\nlet x = 1;"), Some("let x = 1;"));
        assert_eq!(rust_source("\n%%rust  \nprintln!();"), Some("println!();"));
        assert_eq!(rust_source("%%rusty\nx"), None);
        assert_eq!(rust_source("graph g:\n    a -> b"), None);
    }

    #[test]
    fn a_panic_report_on_stderr_becomes_its_message() {
        // The default panic hook's layout (std::panic, Rust 1.95; recalled):
        // header line, message, optional backtrace block, closing note.
        let lines = [
            "thread '<unnamed>' (23140) panicked at src/lib.rs:109:1:",
            "sapling count went negative",
            "stack backtrace:",
            "   0: __rustc::rust_begin_unwind",
            "note: Some details are omitted, run with `RUST_BACKTRACE=full` for a verbose backtrace.",
            "an ordinary line",
        ];
        let mut report = PanicReport::default();
        let shown: Vec<&str> = lines.iter().copied().filter(|l| !report.absorb(l)).collect();
        assert_eq!(shown, ["an ordinary line"]);
        assert_eq!(report.message.as_deref(), Some("sapling count went negative"));
    }

    #[test]
    fn tables_cross_the_exchange_with_kinds_levels_and_units() {
        let dir = std::env::temp_dir().join(format!("waypath-bridge-test-{}", std::process::id()));
        let mut girth = Column::new("girth", ColumnData::Real(vec![21.5, 30.0, 0.1]));
        girth.unit = Some("cm".into());
        let stock = Column::new(
            "rootstock",
            ColumnData::Category { codes: vec![1, 0, 1], levels: vec!["semi, dwarf".into(), "standard".into()] },
        );
        let watered = Column::new("watered", ColumnData::Binary(vec![true, false, true]));
        let visits = Column::new("visits", ColumnData::Count(vec![0, 4, 2]));
        let table = Table::from_columns("trees", vec![girth, stock, watered, visits]).expect("valid columns");
        bridge_prelude::wp_write_table(&dir, "trees", &table).expect("writes");
        let back = bridge_prelude::wp_read_table(&dir, "trees").expect("reads");
        let _ = std::fs::remove_dir_all(&dir);
        assert_eq!(back, table);
    }
}
