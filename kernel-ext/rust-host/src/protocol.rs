//! The JSON-lines conversation with the kernel.
//!
//! Requests, one JSON object per line on standard input:
//! `{"run": CODE}`, `{"variables": true}`, `{"describe": NAME}`,
//! `{"interrupt": true}`. An interrupt is acted on as soon as it is read,
//! even while a cell runs; the others are answered in order.
//!
//! Events, one JSON object per line on standard output, each with an
//! `"event"` field: `ready`, `failed` (`headline`, `log`), `stdout` and
//! `stderr` (`text`), `done` (`plain`, `html`, `error`), `variables`
//! (`list` of `[name, type]`), `described` (`name`, `text`).

use std::io::{BufRead, Write};
use std::sync::mpsc;
use std::sync::{Arc, Mutex};

use serde_json::{json, Value};

/// A request the runner answers in order.
pub enum Request {
    Run(String),
    Variables,
    Describe(String),
}

/// Ends the running cell from the reading thread.
pub type Interrupter = Arc<dyn Fn() + Send + Sync>;

/// Read requests on a thread of their own; interrupts are carried out there
/// at once, the rest are passed on in order. The iterator ends with input.
pub fn read_requests<R>(input: R, interrupt: Interrupter) -> mpsc::IntoIter<Request>
where
    R: BufRead + Send + 'static,
{
    let (send, receive) = mpsc::channel();
    std::thread::spawn(move || {
        for line in input.lines().map_while(Result::ok) {
            let Ok(request) = serde_json::from_str::<Value>(&line) else { continue };
            if request.get("interrupt").is_some() {
                interrupt();
            } else if let Some(code) = request["run"].as_str() {
                let _ = send.send(Request::Run(code.to_string()));
            } else if request.get("variables").is_some() {
                let _ = send.send(Request::Variables);
            } else if let Some(name) = request["describe"].as_str() {
                let _ = send.send(Request::Describe(name.to_string()));
            }
        }
    });
    receive.into_iter()
}

/// Why the Rust context could not start: one line first, details after.
pub struct Failure {
    pub headline: String,
    pub log: String,
}

/// How a cell ended.
#[derive(Default)]
pub struct Done {
    pub plain: Option<String>,
    pub html: Option<String>,
    pub error: Option<String>,
}

/// Writes events to standard output, one line each (shared between the
/// thread that runs cells and the one that forwards their printed lines).
#[derive(Clone)]
pub struct Events {
    out: Arc<Mutex<std::io::Stdout>>,
}

impl Events {
    pub fn stdout() -> Events {
        Events { out: Arc::new(Mutex::new(std::io::stdout())) }
    }

    fn send(&self, event: Value) {
        let mut out = self.out.lock().unwrap_or_else(|p| p.into_inner());
        let _ = writeln!(out, "{event}");
        let _ = out.flush();
    }

    pub fn ready(&self) {
        self.send(json!({"event": "ready"}));
    }

    pub fn failed(&self, failure: &Failure) {
        self.send(json!({"event": "failed", "headline": failure.headline, "log": failure.log}));
    }

    /// A printed line (with its newline) of the stream `name` ("stdout" or "stderr").
    pub fn stream(&self, name: &str, text: &str) {
        self.send(json!({"event": name, "text": text}));
    }

    pub fn done(&self, done: &Done) {
        self.send(json!({"event": "done", "plain": done.plain, "html": done.html, "error": done.error}));
    }

    pub fn variables(&self, list: &[(String, String)]) {
        self.send(json!({"event": "variables", "list": list}));
    }

    pub fn described(&self, name: &str, text: Option<&str>) {
        self.send(json!({"event": "described", "name": name, "text": text}));
    }
}
