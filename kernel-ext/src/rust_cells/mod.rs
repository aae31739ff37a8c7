//! `%%rust` cells: Rust code compiled and run by the `waypath-rust` program
//! (an evcxr context in its own process, see `kernel-ext/rust-host`) with
//! the `waypath` library and the bridge functions of [`bridge_prelude`] in
//! scope.
//!
//! Why it is shaped so:
//! * The runner is a program of its own, so `waypath` does not carry evcxr
//!   and a notebook without Rust cells never waits for it. When it is not
//!   built, the first Rust cell says which command builds it.
//! * Cells link to a prebuilt Rust dynamic library of the library (crate
//!   `waypath_cells` of package `waypath-rust-host`, see [`cells_library`]) made from the same build and
//!   the workspace's `Cargo.lock`: the one-time work for Rust cells is one
//!   link, not a compile of the library and its dependencies, and nothing is
//!   resolved or downloaded when a cell runs.
//! * The runner's evcxr build folder is a slot under `~/.cache/waypath/evcxr`
//!   (or `$WAYPATH_EVCXR_DIR`); a lock file gives a second kernel its own
//!   slot, which costs it only the compile of its first cell.
//! * Before each cell the session's tables and draws are written to a
//!   private exchange folder (mode 0700, unpredictable name, removed when
//!   the kernel ends); after it, tables the cell published are read back.
//!   A compile error, a panic or an interrupt becomes the cell's error; the
//!   session is untouched by it, and an interrupt names the Rust variables
//!   it cost.
//!
//! The same component serves the kernel and `waypath run`.

pub mod bridge_prelude;

pub mod cells_library;
mod exchange;

use std::fs::File;
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdin, ChildStdout, Command, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc, Mutex};

use serde_json::{json, Value};
use waypath::cells::{CellError, CellOutcome, Display, Session};

use exchange::Exchange;
pub use exchange::remove_exchange_folders;

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

/// Stops a running Rust cell from another thread: the runner ends the
/// process that runs it and reports the variables that went with it.
#[derive(Clone, Default)]
pub struct RustInterrupt {
    running: Arc<AtomicBool>,
    runner_input: Arc<Mutex<Option<ChildStdin>>>,
}

impl RustInterrupt {
    /// End the running Rust cell, if one is running. Returns whether one was.
    pub fn interrupt(&self) -> bool {
        if !self.running.load(Ordering::SeqCst) {
            return false;
        }
        let mut guard = self.runner_input.lock().unwrap_or_else(|p| p.into_inner());
        if let Some(input) = guard.as_mut() {
            let _ = writeln!(input, "{}", json!({"interrupt": true}));
            let _ = input.flush();
        }
        true
    }
}

/// The started runner and where it trades tables.
struct Context {
    runner: Runner,
    exchange: Exchange,
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

    /// Start the Rust context now if it is not running, telling `progress`
    /// what the one-time work is doing. A second call does nothing.
    pub fn start(&mut self, progress: &dyn Fn(&str)) -> Result<(), String> {
        if self.context.is_some() {
            return Ok(());
        }
        let exchange = Exchange::create()?;
        let runner = Runner::start(&exchange, progress, self.interrupt.runner_input.clone())?;
        self.context = Some(Context { runner, exchange });
        Ok(())
    }

    /// Run the Rust code of one cell against `session`. Printed lines go to
    /// `sink` as they come (the one-time start-up's progress to its stderr);
    /// the final expression's value becomes a display.
    pub fn run(
        &mut self,
        code: &str,
        session: &mut Session,
        sink: &(dyn Fn(StreamName, &str) + Sync),
    ) -> CellOutcome {
        let mut outcome = CellOutcome::default();
        if let Err(message) = self.start(&|line| sink(StreamName::Stderr, &format!("{line}\n"))) {
            outcome.error = Some(CellError { line: None, message });
            return outcome;
        }
        let Some(context) = self.context.as_mut() else { return outcome };
        if let Err(message) = export_tables(session, context.exchange.path()) {
            outcome.error = Some(CellError { line: None, message });
            return outcome;
        }
        self.interrupt.running.store(true, Ordering::SeqCst);
        let done = context.runner.run(code, sink);
        self.interrupt.running.store(false, Ordering::SeqCst);
        match done {
            Ok(done) => {
                if let Some(message) = done.error {
                    outcome.error = Some(CellError { line: None, message });
                } else if let Some(plain) = done.plain {
                    outcome.displays.push(Display { plain, html: done.html, ..Display::default() });
                }
            }
            Err(message) => {
                self.context = None;
                outcome.error = Some(CellError { line: None, message });
                return outcome;
            }
        }
        import_published(session, context.exchange.path(), &mut outcome);
        outcome
    }

    /// `NAME: TYPE = VALUE` of a variable of the running Rust context, or
    /// `None` when there is no context or no such variable.
    pub fn describe(&mut self, name: &str) -> Option<String> {
        let context = self.context.as_mut()?;
        context.runner.describe(name)
    }
}

/// The `waypath-rust` process and the lines it sends.
struct Runner {
    process: Child,
    input: Arc<Mutex<Option<ChildStdin>>>,
    events: mpsc::Receiver<Value>,
    /// Held for the life of the runner: the evcxr build slot is ours.
    _slot_lock: File,
}

impl Runner {
    /// Make sure the prebuilt library is current, start the runner in a free
    /// build slot, and wait until it has compiled its first cell.
    /// `input` receives the runner's standard input, shared with [`RustInterrupt`].
    fn start(
        exchange: &Exchange,
        progress: &dyn Fn(&str),
        input: Arc<Mutex<Option<ChildStdin>>>,
    ) -> Result<Runner, String> {
        let program = cells_library::runner_program()?;
        let library = cells_library::prepare(progress)?;
        let (slot, lock) = claim_build_slot()?;
        let mut command = Command::new(&program);
        command
            .arg("--cells-lib")
            .arg(&library.dylib)
            .arg("--deps")
            .arg(&library.deps)
            .env("EVCXR_TMPDIR", &slot)
            .env("WAYPATH_EXCHANGE", exchange.path())
            .env("LD_LIBRARY_PATH", library.search_path())
            .stdin(Stdio::piped())
            .stdout(Stdio::piped());
        let mut process =
            command.spawn().map_err(|e| format!("cannot start the Rust cell runner {}: {e}", program.display()))?;
        *input.lock().unwrap_or_else(|p| p.into_inner()) = process.stdin.take();
        let events = read_events(process.stdout.take());
        let mut runner = Runner { process, input, events, _slot_lock: lock };
        runner.wait_ready(progress)?;
        Ok(runner)
    }

    /// Forward progress until the runner says it is ready or why it is not.
    fn wait_ready(&mut self, progress: &dyn Fn(&str)) -> Result<(), String> {
        loop {
            let event = self.next_event()?;
            match event["event"].as_str() {
                Some("ready") => return Ok(()),
                Some("failed") => {
                    let headline = event["headline"].as_str().unwrap_or("the Rust context did not start");
                    return Err(with_folded_log(headline, event["log"].as_str().unwrap_or("")));
                }
                Some("stdout" | "stderr") => progress(event["text"].as_str().unwrap_or("").trim_end()),
                _ => {}
            }
        }
    }

    /// The next event, or an error when the runner has ended.
    fn next_event(&mut self) -> Result<Value, String> {
        self.events.recv().map_err(|_| {
            let status = self.process.wait().map(|s| s.to_string()).unwrap_or_else(|e| e.to_string());
            format!(
                "the Rust cell runner ended unexpectedly ({status}); the session's tables, graphs and fits are kept, \
                 Rust variables are gone; the next Rust cell starts a new runner"
            )
        })
    }

    fn send(&self, request: Value) -> Result<(), String> {
        let mut guard = self.input.lock().unwrap_or_else(|p| p.into_inner());
        let input = guard.as_mut().ok_or("the Rust cell runner has no input")?;
        writeln!(input, "{request}").and_then(|_| input.flush()).map_err(|e| format!("the Rust cell runner cannot be reached: {e}"))
    }

    /// Run a cell; `Err` only when the runner itself is gone.
    fn run(&mut self, code: &str, sink: &(dyn Fn(StreamName, &str) + Sync)) -> Result<Done, String> {
        self.send(json!({"run": code}))?;
        loop {
            let event = self.next_event()?;
            match event["event"].as_str() {
                Some("stdout") => sink(StreamName::Stdout, event["text"].as_str().unwrap_or("")),
                Some("stderr") => sink(StreamName::Stderr, event["text"].as_str().unwrap_or("")),
                Some("done") => {
                    let text = |key: &str| event[key].as_str().map(str::to_string);
                    return Ok(Done { plain: text("plain"), html: text("html"), error: text("error") });
                }
                _ => {}
            }
        }
    }

    fn describe(&mut self, name: &str) -> Option<String> {
        self.send(json!({"describe": name})).ok()?;
        loop {
            let event = self.next_event().ok()?;
            if event["event"] == "described" {
                return event["text"].as_str().map(str::to_string);
            }
        }
    }
}

impl Drop for Runner {
    fn drop(&mut self) {
        let _ = self.process.kill();
        let _ = self.process.wait();
    }
}

/// How a cell ended, as the runner reported it.
struct Done {
    plain: Option<String>,
    html: Option<String>,
    error: Option<String>,
}

/// Read the runner's JSON lines on a thread of their own.
fn read_events(stdout: Option<ChildStdout>) -> mpsc::Receiver<Value> {
    let (send, receive) = mpsc::channel();
    if let Some(stdout) = stdout {
        std::thread::spawn(move || {
            for line in BufReader::new(stdout).lines().map_while(Result::ok) {
                if let Ok(event) = serde_json::from_str::<Value>(&line) {
                    if send.send(event).is_err() {
                        break;
                    }
                }
            }
        });
    }
    receive
}

/// One line that says what went wrong, then the build log folded below it.
fn with_folded_log(headline: &str, log: &str) -> String {
    let log = log.trim();
    if log.is_empty() {
        return headline.to_string();
    }
    let folded: String = log.lines().map(|l| format!("    | {l}\n")).collect();
    format!("{headline}\n  details:\n{folded}")
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
    fn names_in_any_script_cross_the_exchange_and_bad_names_are_refused() {
        let dir = std::env::temp_dir().join(format!("waypath-bridge-names-{}", std::process::id()));
        let height = Column::new("höhe", ColumnData::Real(vec![1.5, 2.25]));
        let table = Table::from_columns("sämlinge", vec![height]).expect("valid columns");
        bridge_prelude::wp_write_table(&dir, "sämlinge", &table).expect("a name with letters beyond ASCII is accepted");
        let back = bridge_prelude::wp_read_table(&dir, "sämlinge");
        let refused = bridge_prelude::wp_write_table(&dir, "1st/../x", &table);
        let _ = std::fs::remove_dir_all(&dir);
        assert_eq!(back.expect("reads"), table);
        assert!(refused.expect_err("a path is not a name").contains("cannot name a table"));
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
        // A category in a stated order keeps it; `rootstock`'s order is only that of first appearance.
        let canopy = Column::new(
            "canopy",
            ColumnData::Category { codes: vec![2, 0, 1], levels: vec!["open".into(), "sparse".into(), "dense".into()] },
        )
        .with_stated_order();
        let table = Table::from_columns("trees", vec![girth, stock, watered, visits, canopy]).expect("valid columns");
        bridge_prelude::wp_write_table(&dir, "trees", &table).expect("writes");
        let back = bridge_prelude::wp_read_table(&dir, "trees").expect("reads");
        let _ = std::fs::remove_dir_all(&dir);
        assert_eq!(back, table);
    }
}
