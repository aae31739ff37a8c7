//! One evcxr context: starting it against the prebuilt library, running a
//! cell while its printed lines are forwarded, and turning evcxr's errors
//! into messages that name the cell line.

use std::path::Path;
use std::process::{Child, Command};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use evcxr::{CommandContext, EvalContext, EvalContextOutputs};

use crate::protocol::{Done, Events, Failure, Interrupter};
use crate::type_view;

/// The bridge functions (`wp_table`, `wp_draws`, `wp_publish`), compiled
/// into the context from source.
const BRIDGE_SOURCE: &str = include_str!("../../src/rust_cells/bridge_prelude.rs");

/// A started Rust context.
pub struct Runner {
    commands: CommandContext,
    outputs: EvalContextOutputs,
    child: Arc<Mutex<Child>>,
    interrupted: Arc<AtomicBool>,
}

impl Runner {
    /// Start evcxr, point the compiler at the prebuilt library and compile
    /// the bridge's `use` line once.
    pub fn start(cells_lib: &Path, deps: &Path, events: &Events) -> Result<Runner, Failure> {
        if !cells_lib.is_file() {
            return Err(Failure {
                headline: format!("the prebuilt waypath library for Rust cells is missing: {}", cells_lib.display()),
                log: String::new(),
            });
        }
        let exe = std::env::current_exe().map_err(|e| Failure {
            headline: format!("cannot find the waypath-rust program itself: {e}"),
            log: String::new(),
        })?;
        let (mut eval, outputs) = EvalContext::with_subprocess_command(Command::new(exe)).map_err(|e| Failure {
            headline: "the Rust context did not start".into(),
            log: e.to_string(),
        })?;
        let mut state = eval.state();
        state.set_offline_mode(true);
        state.set_build_env("CARGO_ENCODED_RUSTFLAGS", &build_flags(cells_lib, deps));
        let (placeholder, config) = type_view::dependency_lines(&slot_dir()?).map_err(|e| Failure {
            headline: "cannot prepare the Rust context's view of the library".into(),
            log: e,
        })?;
        state.add_dep(placeholder, &config).map_err(|e| Failure {
            headline: "evcxr refused the view of the library".into(),
            log: e.to_string(),
        })?;
        events.stream("stderr", "compiling the bridge into the Rust context (once per kernel, seconds)…\n");
        eval.eval_with_state(&prelude_source(), state).map_err(|e| {
            let log = e.to_string();
            Failure { headline: format!("cannot compile a cell against {}: {}", cells_lib.display(), first_error_line(&log)), log }
        })?;
        let commands = CommandContext::with_eval_context(eval);
        let child = commands.process_handle();
        Ok(Runner { commands, outputs, child, interrupted: Arc::new(AtomicBool::new(false)) })
    }

    /// What the request reader calls to end a running cell: the child
    /// process that runs it is killed (evcxr starts a new one).
    pub fn interrupter(&self) -> Interrupter {
        let child = self.child.clone();
        let interrupted = self.interrupted.clone();
        Arc::new(move || {
            interrupted.store(true, Ordering::SeqCst);
            let _ = child.lock().unwrap_or_else(|p| p.into_inner()).kill();
        })
    }

    /// The context's variables and their types, sorted by name.
    pub fn variables(&self) -> Vec<(String, String)> {
        let mut list: Vec<(String, String)> =
            self.commands.variables_and_types().map(|(n, t)| (n.to_string(), t.to_string())).collect();
        list.sort();
        list
    }

    /// `NAME: TYPE = VALUE` for a variable of the context (the value's debug
    /// form, shortened), `NAME: TYPE` when the type has no debug form, or
    /// `None` when there is no such variable.
    pub fn describe(&mut self, name: &str) -> Option<String> {
        let ty = self.variables().into_iter().find(|(n, _)| n == name)?.1;
        let printed = std::sync::Mutex::new(Vec::new());
        let collect = |stream: &str, text: &str| {
            if stream == "stdout" {
                printed.lock().unwrap_or_else(|p| p.into_inner()).push(text.trim_end().to_string());
            }
        };
        let probe = format!("println!(\"{{:?}}\", &{name});");
        let (result, panic) = self.eval_streaming(&probe, &collect);
        let value = match (result, panic) {
            (Ok(_), None) => Some(shorten(&printed.into_inner().unwrap_or_default().join(" "), 160)),
            _ => None,
        };
        Some(match value {
            Some(value) => format!("{name}: {ty} = {value}"),
            None => format!("{name}: {ty}"),
        })
    }

    /// Run one cell, forwarding printed lines as they come.
    pub fn run(&mut self, code: &str, events: &Events) {
        let before = self.variables();
        self.interrupted.store(false, Ordering::SeqCst);
        let (result, panic) = self.eval_streaming(code, &|stream: &str, text: &str| events.stream(stream, text));
        let mut done = Done::default();
        match (result, panic) {
            (_, Some(message)) => done.error = Some(format!("the Rust cell panicked: {message}")),
            (Err(error), None) => done.error = Some(self.describe_error(error, code, &before)),
            (Ok(outputs), None) => {
                let plain = outputs.get("text/plain").map(str::to_string);
                let html = outputs.get("text/html").map(str::to_string);
                // A block that ends in a statement has the value `()`, which shows nothing.
                if !(plain.as_deref().is_some_and(|p| p.trim() == "()") && html.is_none()) {
                    done.plain = plain;
                    done.html = html;
                }
            }
        }
        events.done(&done);
    }

    /// Evaluate while a scoped thread passes printed lines to `sink` (evcxr's
    /// output channels must be read while a cell runs, or the cell waits).
    fn eval_streaming(
        &mut self,
        code: &str,
        sink: &(dyn Fn(&str, &str) + Sync),
    ) -> (Result<evcxr::EvalOutputs, evcxr::Error>, Option<String>) {
        let finished = AtomicBool::new(false);
        let stdout = self.outputs.stdout.clone();
        let stderr = self.outputs.stderr.clone();
        std::thread::scope(|scope| {
            let forwarder = scope.spawn(|| forward_lines(&stdout, &stderr, &finished, sink));
            let result = self.commands.execute(code);
            finished.store(true, Ordering::SeqCst);
            let panic = forwarder.join().unwrap_or(None);
            (result, panic)
        })
    }

    fn describe_error(&self, error: evcxr::Error, code: &str, before: &[(String, String)]) -> String {
        match error {
            evcxr::Error::CompilationErrors(errors) => {
                errors.iter().map(|e| compile_error_text(e, code)).collect::<Vec<_>>().join("\n")
            }
            evcxr::Error::SubprocessTerminated(why) => {
                let cause = if self.interrupted.load(Ordering::SeqCst) {
                    "the Rust cell was interrupted".to_string()
                } else {
                    format!("the Rust cell's process ended ({})", why.trim())
                };
                format!("{cause}; {}; the session's tables, graphs and fits are kept", lost_variables(before))
            }
            other => {
                let text = other.to_string();
                let hint = if text.contains("Couldn't automatically determine type of variable") {
                    " (Rust cells keep a variable for later cells only when its type can be named: write it, as in \
                     `let heights: Vec<f64> = …`, or put the code that uses the value in a block `{ … }`; values of the \
                     library's dependencies, such as a random generator, always need it written)"
                } else {
                    ""
                };
                format!("the Rust cell failed: {}{hint}", text.trim().replace("\nPlease give it an explicit type.", ""))
            }
        }
    }
}

/// Name the Rust variables a restarted context no longer has.
fn lost_variables(before: &[(String, String)]) -> String {
    if before.is_empty() {
        return "no Rust variables were lost (functions and types defined in earlier Rust cells are kept)".into();
    }
    let names: Vec<String> = before.iter().map(|(n, t)| format!("{n}: {t}")).collect();
    format!(
        "these Rust variables are gone and must be made again: {} (functions and types defined in earlier Rust cells are kept)",
        names.join(", ")
    )
}

/// The compiler flags that hand every cell the prebuilt library as
/// `waypath`, in cargo's encoded form (fields separated by 0x1f, so paths
/// with spaces stay whole).
fn build_flags(cells_lib: &Path, deps: &Path) -> String {
    let flags = [
        "-Cprefer-dynamic".to_string(),
        "--extern".to_string(),
        format!("waypath={}", cells_lib.display()),
        "-L".to_string(),
        format!("dependency={}", deps.display()),
    ];
    flags.join("\u{1f}")
}

/// The bridge source without its module doc lines.
fn prelude_source() -> String {
    BRIDGE_SOURCE.lines().filter(|l| !l.starts_with("//!")).collect::<Vec<_>>().join("\n")
}

/// The evcxr build folder the kernel gave this runner.
fn slot_dir() -> Result<std::path::PathBuf, Failure> {
    std::env::var_os("EVCXR_TMPDIR").map(std::path::PathBuf::from).ok_or_else(|| Failure {
        headline: "the Rust cell runner was started without its build folder (EVCXR_TMPDIR)".into(),
        log: String::new(),
    })
}

/// Pass lines to `sink` until `finished`, then drain what is left. A panic
/// report is taken out of stderr and returned as its message.
fn forward_lines(
    stdout: &crossbeam_channel::Receiver<String>,
    stderr: &crossbeam_channel::Receiver<String>,
    finished: &AtomicBool,
    sink: &(dyn Fn(&str, &str) + Sync),
) -> Option<String> {
    let tick = Duration::from_millis(20);
    let mut panic = PanicReport::default();
    let mut idle_after_finish = false;
    while !idle_after_finish {
        let was_finished = finished.load(Ordering::SeqCst);
        crossbeam_channel::select! {
            recv(stdout) -> line => if let Ok(line) = line { sink("stdout", &format!("{line}\n")) },
            recv(stderr) -> line => if let Ok(line) = line {
                if !panic.absorb(&line) {
                    sink("stderr", &format!("{line}\n"))
                }
            },
            default(tick) => idle_after_finish = was_finished,
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

/// "cell line 2, column 5: `x + 1`: cannot find value `x` in this scope"
/// (lines of the whole cell, so the `%%rust` line is line 1), followed by
/// the compiler's own notes (expected/found types, help).
fn compile_error_text(error: &evcxr::CompilationError, code: &str) -> String {
    let place = error.primary_spanned_message().and_then(|m| m.span).map(|s| {
        let source_line = code.lines().nth(s.start_line.saturating_sub(1)).unwrap_or("");
        format!("cell line {}, column {}: `{}`: ", s.start_line + 1, s.start_column, source_line.trim())
    });
    let mut text = format!("{}{}", place.unwrap_or_default(), error.message());
    for note in error.spanned_messages().iter().filter(|m| m.is_primary).map(|m| m.label.as_str()).filter(|l| !l.is_empty()) {
        if !text.contains(note) {
            text.push_str(&format!(" ({note})"));
        }
    }
    for help in error.help() {
        text.push_str(&format!(" (help: {help})"));
    }
    text
}

/// The first line of a build log that says what went wrong.
fn first_error_line(log: &str) -> String {
    let lines = || log.lines().map(str::trim).filter(|l| !l.is_empty());
    lines()
        .find(|l| l.starts_with("error"))
        .or_else(|| lines().next())
        .unwrap_or("no message")
        .to_string()
}

/// At most `limit` characters, with an ellipsis when cut.
fn shorten(text: &str, limit: usize) -> String {
    if text.chars().count() <= limit {
        text.to_string()
    } else {
        format!("{}…", text.chars().take(limit).collect::<String>())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
    fn a_build_log_is_headed_by_its_first_error() {
        let log = "   Compiling ctx v1.0.0\nwarning: unused\nerror[E0463]: can't find crate for `waypath`\n  --> src/lib.rs";
        assert_eq!(first_error_line(log), "error[E0463]: can't find crate for `waypath`");
        assert_eq!(first_error_line("\n  just this\n"), "just this");
    }

    #[test]
    fn lost_variables_are_named_with_their_types() {
        let before = vec![("plots".to_string(), "Vec<f64>".to_string()), ("seed".to_string(), "u64".to_string())];
        let text = lost_variables(&before);
        assert!(text.contains("plots: Vec<f64>, seed: u64"), "{text}");
        assert!(lost_variables(&[]).starts_with("no Rust variables were lost"));
    }
}
