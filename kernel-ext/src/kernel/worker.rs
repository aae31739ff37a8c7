//! The execution thread: it owns the [`Session`], the Rust cells and the
//! history, and answers every shell request that reads or changes them.
//!
//! Cells run here, off the async runtime, so the control channel and the
//! heartbeat stay responsive during a long fit. The thread has the large
//! stack of [`crate::cell_thread`], and every request it answers (execute,
//! complete, inspect, is_complete, history) runs under a panic guard, so no
//! request can end the thread. Outputs are broadcast on IOPub as they come
//! through a channel that the IOPub task drains in order.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc, Mutex};
use std::time::{Duration, Instant};

use serde_json::{json, Value};
use tokio::sync::{mpsc::UnboundedSender, oneshot};
use waypath::cells::{CellError, CellOutcome, RunControl, Session};

use super::language::{self, HistoryEntry};
use crate::cell_thread::{self, internal_error_message};
use crate::notebook::outputs_of;
use crate::protocol::{Identity, Message};
use crate::rust_cells::{rust_source, RustCells, RustInterrupt, StreamName};

/// Shortest time between two progress updates of a running cell.
const PROGRESS_EVERY: Duration = Duration::from_millis(250);

/// A shell request and where its reply goes.
pub struct Job {
    pub request: Message,
    pub reply: oneshot::Sender<Message>,
}

/// Broadcasts IOPub messages caused by one parent request.
#[derive(Clone)]
pub struct Publisher {
    pub identity: Arc<Identity>,
    pub iopub: UnboundedSender<Message>,
}

impl Publisher {
    pub fn publish(&self, parent: &Value, msg_type: &str, content: Value) {
        let _ = self.iopub.send(self.identity.broadcast(parent, msg_type, content));
    }

    pub fn status(&self, parent: &Value, state: &str) {
        self.publish(parent, "status", json!({"execution_state": state}));
    }

    fn stream(&self, parent: &Value, name: StreamName, text: &str) {
        self.publish(parent, "stream", json!({"name": name.as_str(), "text": text}));
    }
}

/// What the async side needs to stop a running cell.
#[derive(Clone, Default)]
pub struct Interrupter {
    pub cancel: Arc<AtomicBool>,
    pub rust: Arc<Mutex<Option<RustInterrupt>>>,
}

impl Interrupter {
    /// Ask the running cell to stop: a declarative cell sees the cancel
    /// flag; a Rust cell's process is ended.
    pub fn interrupt(&self) {
        self.cancel.store(true, Ordering::SeqCst);
        if let Some(rust) = self.rust.lock().unwrap_or_else(|p| p.into_inner()).as_ref() {
            rust.interrupt();
        }
    }
}

/// The state the execution thread owns.
struct Worker {
    session: Session,
    rust: RustCells,
    execution_count: u64,
    history: Vec<HistoryEntry>,
    publisher: Publisher,
    interrupter: Interrupter,
}

/// Start the execution thread; it ends when the job sender is dropped.
/// Fails only when the system cannot give the thread its stack.
pub fn spawn(session: Session, publisher: Publisher, interrupter: Interrupter) -> std::io::Result<mpsc::Sender<Job>> {
    let (jobs, inbox) = mpsc::channel::<Job>();
    cell_thread::spawn("waypath-cells", move || {
        let rust = RustCells::new();
        *interrupter.rust.lock().unwrap_or_else(|p| p.into_inner()) = Some(rust.interrupter());
        let mut worker = Worker { session, rust, execution_count: 0, history: Vec::new(), publisher, interrupter };
        for job in inbox {
            let reply = worker.answer(&job.request);
            let _ = job.reply.send(reply);
        }
    })?;
    Ok(jobs)
}

impl Worker {
    /// Answer one request; a panic while answering becomes an error reply,
    /// so no request can end this thread. (Execute also guards its cell on
    /// its own, so a failing cell still gets its count and history entry.)
    fn answer(&mut self, request: &Message) -> Message {
        match cell_thread::guarded(|| self.answer_unguarded(request)) {
            Ok(reply) => reply,
            Err(what) => {
                let kind = request.msg_type().replace("_request", "_reply");
                let message = format!("the {} stopped on an internal error ({what}); the session is kept", request.msg_type());
                self.publisher.identity.reply(
                    request,
                    &kind,
                    json!({"status": "error", "execution_count": self.execution_count, "ename": "WaypathError",
                           "evalue": message, "traceback": [message]}),
                )
            }
        }
    }

    fn answer_unguarded(&mut self, request: &Message) -> Message {
        let identity = self.publisher.identity.clone();
        let content = &request.content;
        let cursor = content["cursor_pos"].as_u64().unwrap_or(0) as usize;
        let code = content["code"].as_str().unwrap_or("");
        match request.msg_type() {
            "execute_request" => self.execute(request),
            "complete_request" => {
                identity.reply(request, "complete_reply", language::complete(&self.session, code, cursor))
            }
            "inspect_request" => {
                // In a Rust cell, a variable of the Rust context comes first.
                let rust = rust_source(code).and_then(|_| self.rust.describe(&language::word_at(code, cursor)));
                let content = match rust {
                    Some(text) => language::inspect_reply(Some(text)),
                    None => language::inspect(&self.session, code, cursor),
                };
                identity.reply(request, "inspect_reply", content)
            }
            "is_complete_request" => identity.reply(request, "is_complete_reply", language::is_complete(code)),
            "history_request" => identity.reply(request, "history_reply", language::history(&self.history, content)),
            other => identity.reply(
                request,
                &other.replace("_request", "_reply"),
                json!({"status": "error", "ename": "UnknownRequest", "evalue": format!("{other} is not handled"), "traceback": []}),
            ),
        }
    }

    fn execute(&mut self, request: &Message) -> Message {
        let content = &request.content;
        let code = content["code"].as_str().unwrap_or("").to_string();
        let silent = content["silent"].as_bool().unwrap_or(false);
        let store_history = !silent && content["store_history"].as_bool().unwrap_or(true);
        if store_history {
            self.execution_count += 1;
        }
        let count = self.execution_count;
        let parent = request.header.clone();
        if !silent {
            self.publisher.publish(&parent, "execute_input", json!({"code": code, "execution_count": count}));
        }
        self.interrupter.cancel.store(false, Ordering::SeqCst);
        let outcome = self.run_guarded(&code, &parent, silent);
        let outputs = outputs_of(&outcome, count, None);
        let mut result_text = None;
        if !silent {
            for output in &outputs {
                if output["output_type"] == "execute_result" {
                    result_text = output["data"]["text/plain"].as_str().map(str::to_string);
                }
                self.broadcast_output(&parent, output);
            }
        }
        if store_history {
            self.history.push(HistoryEntry { line: count, input: code, output: result_text });
        }
        let identity = &self.publisher.identity;
        match outputs.iter().find(|o| o["output_type"] == "error") {
            Some(error) => identity.reply(
                request,
                "execute_reply",
                json!({"status": "error", "execution_count": count, "ename": error["ename"],
                       "evalue": error["evalue"], "traceback": error["traceback"]}),
            ),
            None => identity.reply(
                request,
                "execute_reply",
                json!({"status": "ok", "execution_count": count, "payload": [], "user_expressions": {}}),
            ),
        }
    }

    /// Run a cell; a panic anywhere inside becomes the cell's error.
    fn run_guarded(&mut self, code: &str, parent: &Value, silent: bool) -> CellOutcome {
        let publisher = self.publisher.clone();
        let sink = move |name: StreamName, text: &str| {
            if !silent {
                publisher.stream(parent, name, text);
            }
        };
        let progress = Progress::new(&self.publisher, parent, silent);
        let cancel = self.interrupter.cancel.clone();
        let outcome = cell_thread::guarded(|| match rust_source(code) {
            Some(rust) => self.rust.run(rust, &mut self.session, &sink),
            None => {
                let report = |line: &str| progress.report(line);
                let control = RunControl { cancel: &cancel, progress: &report };
                self.session.run_cell(code, &control)
            }
        });
        progress.finish();
        outcome.unwrap_or_else(|what| CellOutcome {
            error: Some(CellError { line: None, message: internal_error_message(&what) }),
            ..CellOutcome::default()
        })
    }

    /// One nbformat output as the matching IOPub message.
    fn broadcast_output(&self, parent: &Value, output: &Value) {
        let kind = output["output_type"].as_str().unwrap_or("");
        let mut content = output.clone();
        if let Some(fields) = content.as_object_mut() {
            fields.remove("output_type");
            if kind == "display_data" {
                fields.insert("transient".into(), json!({}));
            }
        }
        self.publisher.publish(parent, kind, content);
    }
}

/// Progress of a long statement as one display that updates in place
/// (Jupyter's `update_display_data`), throttled. When the statement ends the
/// display is emptied: the progress was for watching, the result says what
/// was done. A stream would leave the last progress line behind, styled as
/// an error output by notebook front ends.
struct Progress<'a> {
    publisher: &'a Publisher,
    parent: &'a Value,
    silent: bool,
    /// When the display was last sent (None: not shown yet).
    last_sent: Mutex<Option<Instant>>,
}

impl<'a> Progress<'a> {
    fn new(publisher: &'a Publisher, parent: &'a Value, silent: bool) -> Progress<'a> {
        Progress { publisher, parent, silent, last_sent: Mutex::new(None) }
    }

    /// One display per request: its id is derived from the request's id.
    fn display_id(&self) -> String {
        format!("waypath-progress-{}", self.parent["msg_id"].as_str().unwrap_or("cell"))
    }

    fn show(&self, first: bool, text: &str) {
        let kind = if first { "display_data" } else { "update_display_data" };
        let content = json!({
            "data": {"text/plain": text},
            "metadata": {},
            "transient": {"display_id": self.display_id()},
        });
        self.publisher.publish(self.parent, kind, content);
    }

    fn report(&self, line: &str) {
        if self.silent {
            return;
        }
        let mut last_sent = self.last_sent.lock().unwrap_or_else(|p| p.into_inner());
        if last_sent.is_none_or(|last| last.elapsed() >= PROGRESS_EVERY) {
            self.show(last_sent.is_none(), line);
            *last_sent = Some(Instant::now());
        }
    }

    fn finish(&self) {
        if self.last_sent.lock().unwrap_or_else(|p| p.into_inner()).is_some() {
            self.show(false, "");
        }
    }
}
