//! The Jupyter kernel: five sockets bound as the connection file says, one
//! task per channel on a tokio runtime, and one execution thread.
//!
//! * shell (ROUTER): requests answered in order; each is wrapped in
//!   busy/idle on IOPub. Requests that touch the session go to the
//!   execution thread ([`worker`]); kernel_info and comm_info are answered
//!   here. After an error with `stop_on_error`, execute requests that
//!   arrived while the failing cell ran are answered `aborted` unrun.
//! * control (ROUTER): interrupt, shutdown and kernel_info, answered even
//!   while a cell runs. SIGINT interrupts the same way.
//! * IOPub (PUB): one task sends everything, in the order it was produced.
//! * stdin (ROUTER): bound; cells never ask for input.
//! * heartbeat (REP): echoes.
//!
//! A message whose signature is missing, wrong or replayed is logged to
//! stderr and dropped: it is never run and never answered. Every socket is
//! bound to the connection file's address only, and refuses (before reserving
//! memory for it) a message larger than [`KernelSettings::max_message_bytes`];
//! the transport then drops that peer's connection. With an empty key
//! (authentication off) the log says so once, at start.

pub mod language;
pub mod worker;

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use serde_json::{json, Value};
use tokio::sync::mpsc::{unbounded_channel, UnboundedReceiver};
use tokio::sync::oneshot;
use waypath::cells::Session;
use zeromq::{PubSocket, RepSocket, RouterSocket, Socket, SocketOptions, SocketRecv, SocketSend, ZmqMessage};

use crate::protocol::{ConnectionInfo, Identity, Message, ProtocolError, Signer, PROTOCOL_VERSION};
use worker::{Interrupter, Job, Publisher};

/// The largest message a client may send unless `--max-message-mib` says
/// otherwise: far above any cell or reply, far below what a machine holds.
pub const DEFAULT_MAX_MESSAGE_BYTES: usize = 256 << 20;

/// How the kernel is run, beyond the connection file.
#[derive(Debug, Clone, Copy)]
pub struct KernelSettings {
    /// Largest incoming message (all frames) any socket accepts.
    pub max_message_bytes: usize,
}

impl Default for KernelSettings {
    fn default() -> Self {
        KernelSettings { max_message_bytes: DEFAULT_MAX_MESSAGE_BYTES }
    }
}

/// Why the kernel could not start or keep running.
#[derive(Debug, thiserror::Error)]
pub enum KernelError {
    #[error(transparent)]
    Protocol(#[from] ProtocolError),
    #[error("cannot listen on {endpoint}: {reason}; is another kernel using that port?")]
    Bind { endpoint: String, reason: String },
    #[error("the connection file asks to listen on {endpoint}, which names no single address; give an IP address such as 127.0.0.1")]
    Wildcard { endpoint: String },
    #[error("cannot start the kernel's runtime: {0}")]
    Runtime(#[from] std::io::Error),
}

/// Run the kernel for a connection file until a shutdown request.
pub fn run_kernel(connection_file: &Path, settings: KernelSettings) -> Result<(), KernelError> {
    let info = ConnectionInfo::read(connection_file)?;
    let runtime = tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build()?;
    runtime.block_on(serve(info, settings))
}

/// The options every socket of the kernel is made with.
fn socket_options(settings: KernelSettings) -> SocketOptions {
    let mut options = SocketOptions::default();
    options.max_message_size(settings.max_message_bytes);
    options
}

/// Bind `socket` to the connection file's address and `port`, and nothing
/// wider. `*` (every interface) names no address and is refused; an address
/// the file spells out (even `0.0.0.0`) is the user's choice and is kept.
async fn bind<S: Socket>(mut socket: S, info: &ConnectionInfo, port: u16) -> Result<S, KernelError> {
    let endpoint = info.endpoint(port);
    if info.ip.trim() == "*" || info.ip.trim().is_empty() {
        return Err(KernelError::Wildcard { endpoint });
    }
    socket.bind(&endpoint).await.map_err(|e| KernelError::Bind { endpoint, reason: e.to_string() })?;
    Ok(socket)
}

/// Everything the channel tasks share.
#[derive(Clone)]
struct Kernel {
    signer: Signer,
    publisher: Publisher,
    interrupter: Interrupter,
}

async fn serve(info: ConnectionInfo, settings: KernelSettings) -> Result<(), KernelError> {
    let options = || socket_options(settings);
    let shell = bind(RouterSocket::with_options(options()), &info, info.shell_port).await?;
    let control = bind(RouterSocket::with_options(options()), &info, info.control_port).await?;
    let stdin = bind(RouterSocket::with_options(options()), &info, info.stdin_port).await?;
    let iopub = bind(PubSocket::with_options(options()), &info, info.iopub_port).await?;
    let heartbeat = bind(RepSocket::with_options(options()), &info, info.hb_port).await?;
    let signer = Signer::new(&info.key);
    if !signer.authenticates() {
        eprintln!(
            "waypath kernel: warning: the connection file's key is empty, so messages are not \
             authenticated; anyone who can reach {} can run cells. Start the kernel from Jupyter \
             (which writes a key) to turn authentication on.",
            info.ip
        );
    }
    let (iopub_tx, iopub_rx) = unbounded_channel();
    let publisher = Publisher { identity: Arc::new(Identity::new()), iopub: iopub_tx };
    let kernel = Kernel { signer: signer.clone(), publisher, interrupter: Interrupter::default() };
    let jobs = worker::spawn(Session::new(working_dir()), kernel.publisher.clone(), kernel.interrupter.clone())?;
    tokio::spawn(send_iopub(iopub, iopub_rx, signer));
    tokio::spawn(echo_heartbeat(heartbeat));
    tokio::spawn(interrupt_on_sigint(kernel.interrupter.clone()));
    tokio::spawn(serve_control(control, kernel.clone()));
    let _stdin = stdin;
    serve_shell(shell, kernel, jobs).await;
    Ok(())
}

/// The folder relative paths in cells are read from: where the kernel was
/// started (Jupyter starts it in the notebook's folder).
fn working_dir() -> PathBuf {
    std::env::current_dir().unwrap_or_else(|_| PathBuf::from("."))
}

fn frames_of(message: ZmqMessage) -> Vec<Vec<u8>> {
    message.into_vec().into_iter().map(|b| b.to_vec()).collect()
}

fn zmq_message(frames: Vec<Vec<u8>>) -> ZmqMessage {
    let mut frames = frames.into_iter();
    let mut message = ZmqMessage::from(frames.next().unwrap_or_default());
    for frame in frames {
        message.push_back(frame.into());
    }
    message
}

/// Decode a received message, logging and dropping what does not verify.
fn accept(channel: &str, received: zeromq::ZmqResult<ZmqMessage>, signer: &Signer) -> Option<Message> {
    let frames = match received {
        Ok(message) => frames_of(message),
        Err(e) => {
            eprintln!("waypath kernel: {channel}: receive failed: {e}");
            return None;
        }
    };
    match Message::decode(&frames, signer) {
        Ok(message) => Some(message),
        Err(e) => {
            eprintln!("waypath kernel: {channel}: dropped a message: {e}");
            None
        }
    }
}

async fn send_iopub(mut socket: PubSocket, mut outbox: UnboundedReceiver<Message>, signer: Signer) {
    while let Some(message) = outbox.recv().await {
        if let Err(e) = socket.send(zmq_message(message.encode(&signer))).await {
            eprintln!("waypath kernel: iopub: send failed: {e}");
        }
    }
}

async fn echo_heartbeat(mut socket: RepSocket) {
    loop {
        match socket.recv().await {
            Ok(ping) => {
                if socket.send(ping).await.is_err() {
                    eprintln!("waypath kernel: heartbeat: echo failed");
                }
            }
            Err(e) => eprintln!("waypath kernel: heartbeat: {e}"),
        }
    }
}

async fn interrupt_on_sigint(interrupter: Interrupter) {
    while tokio::signal::ctrl_c().await.is_ok() {
        interrupter.interrupt();
    }
}

async fn send(socket: &mut RouterSocket, kernel: &Kernel, message: &Message, channel: &str) {
    if let Err(e) = socket.send(zmq_message(message.encode(&kernel.signer))).await {
        eprintln!("waypath kernel: {channel}: send failed: {e}");
    }
}

async fn serve_shell(mut socket: RouterSocket, kernel: Kernel, jobs: std::sync::mpsc::Sender<Job>) {
    loop {
        let received = socket.recv().await;
        let Some(request) = accept("shell", received, &kernel.signer) else { continue };
        kernel.publisher.status(&request.header, "busy");
        let reply = answer_shell(&request, &kernel, &jobs).await;
        // Requests that arrived while the failing cell ran were sent before
        // its error could be seen: take them now, before the error reply.
        let queued = if stops_the_queue(&request, reply.as_ref()) {
            take_arrived(&mut socket, &kernel.signer).await
        } else {
            Vec::new()
        };
        finish_shell(&mut socket, &kernel, &request, reply).await;
        for request in queued {
            kernel.publisher.status(&request.header, "busy");
            let reply = if request.msg_type() == "execute_request" {
                Some(kernel.publisher.identity.reply(&request, "execute_reply", json!({"status": "aborted"})))
            } else {
                answer_shell(&request, &kernel, &jobs).await
            };
            finish_shell(&mut socket, &kernel, &request, reply).await;
        }
    }
}

/// Whether `request` failed and asked for the queued cells to be skipped.
fn stops_the_queue(request: &Message, reply: Option<&Message>) -> bool {
    request.msg_type() == "execute_request"
        && reply.is_some_and(|r| r.content["status"] == "error")
        && request.content["stop_on_error"].as_bool().unwrap_or(true)
}

/// Every message already received on `socket`, without waiting for more.
async fn take_arrived(socket: &mut RouterSocket, signer: &Signer) -> Vec<Message> {
    let mut arrived = Vec::new();
    while let Ok(received) = tokio::time::timeout(Duration::ZERO, socket.recv()).await {
        arrived.extend(accept("shell", received, signer));
    }
    arrived
}

/// Send the reply (if any), go idle, and end the process after a shutdown.
async fn finish_shell(socket: &mut RouterSocket, kernel: &Kernel, request: &Message, reply: Option<Message>) {
    if let Some(reply) = &reply {
        send(socket, kernel, reply, "shell").await;
    }
    kernel.publisher.status(&request.header, "idle");
    if request.msg_type() == "shutdown_request" {
        shut_down().await;
    }
}

async fn answer_shell(request: &Message, kernel: &Kernel, jobs: &std::sync::mpsc::Sender<Job>) -> Option<Message> {
    let identity = &kernel.publisher.identity;
    match request.msg_type() {
        "kernel_info_request" => Some(identity.reply(request, "kernel_info_reply", kernel_info())),
        "comm_info_request" => Some(identity.reply(request, "comm_info_reply", json!({"status": "ok", "comms": {}}))),
        "shutdown_request" => Some(identity.reply(request, "shutdown_reply", shutdown_content(request))),
        "execute_request" | "complete_request" | "inspect_request" | "is_complete_request" | "history_request" => {
            let (reply, answer) = oneshot::channel();
            if jobs.send(Job { request: request.clone(), reply }).is_err() {
                eprintln!("waypath kernel: the execution thread has stopped");
                return None;
            }
            answer.await.ok()
        }
        "comm_open" | "comm_msg" | "comm_close" => None,
        other => {
            eprintln!("waypath kernel: shell: {other} is not handled; ignored");
            None
        }
    }
}

async fn serve_control(mut socket: RouterSocket, kernel: Kernel) {
    loop {
        let received = socket.recv().await;
        let Some(request) = accept("control", received, &kernel.signer) else { continue };
        let publisher = &kernel.publisher;
        publisher.status(&request.header, "busy");
        let reply = match request.msg_type() {
            "interrupt_request" => {
                kernel.interrupter.interrupt();
                Some(publisher.identity.reply(&request, "interrupt_reply", json!({"status": "ok"})))
            }
            "shutdown_request" => {
                Some(publisher.identity.reply(&request, "shutdown_reply", shutdown_content(&request)))
            }
            "kernel_info_request" => Some(publisher.identity.reply(&request, "kernel_info_reply", kernel_info())),
            other => {
                eprintln!("waypath kernel: control: {other} is not handled; ignored");
                None
            }
        };
        if let Some(reply) = &reply {
            send(&mut socket, &kernel, reply, "control").await;
        }
        publisher.status(&request.header, "idle");
        if request.msg_type() == "shutdown_request" {
            shut_down().await;
        }
    }
}

fn shutdown_content(request: &Message) -> Value {
    json!({"status": "ok", "restart": request.content["restart"].as_bool().unwrap_or(false)})
}

/// Give IOPub a moment to flush, then end the process (the client starts a
/// new one for a restart). Rust cell processes end when their input closes.
async fn shut_down() {
    tokio::time::sleep(Duration::from_millis(100)).await;
    crate::rust_cells::remove_exchange_folders();
    std::process::exit(0);
}

/// The `kernel_info_reply` content.
fn kernel_info() -> Value {
    let version = env!("CARGO_PKG_VERSION");
    json!({
        "status": "ok",
        "protocol_version": PROTOCOL_VERSION,
        "implementation": "waypath",
        "implementation_version": version,
        "language_info": {
            "name": "waypath",
            "version": version,
            "mimetype": "text/x-waypath",
            "file_extension": ".wp",
        },
        "banner": format!("Waypath {version}: causal graphs, Bayesian fits and contrasts, cell by cell"),
        "help_links": [],
        "debugger": false,
    })
}
