//! The kernel's sockets against hostile peers, spoken to byte by byte.
//!
//! The client here is written from the ZeroMQ Message Transport Protocol
//! 3.0 (rfc.zeromq.org/spec/23, "ZMTP"): a 64-byte greeting (0xFF, 8 bytes
//! of padding, 0x7F, version 3.0, mechanism "NULL" padded to 20 bytes,
//! as-server, 31 bytes of filler), then frames of one flags byte (bit 0
//! MORE, bit 1 LONG, bit 2 COMMAND) and a 1-byte or 8-byte big-endian size.
//! It is independent of the transport crate the kernel uses, so it can send
//! what that crate never would.

use std::io::{Read, Write};
use std::net::{Ipv4Addr, SocketAddr, TcpListener, TcpStream};
use std::path::PathBuf;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::{json, Value};
use waypath_kernel::protocol::{Identity, Message, Signer};

const KEY: &str = "orchard-test-key";

/// A kernel process started on free loopback ports.
struct Kernel {
    child: Child,
    ports: Ports,
    _dir: PathBuf,
}

#[derive(Clone, Copy)]
struct Ports {
    shell: u16,
    control: u16,
    stdin: u16,
    iopub: u16,
    hb: u16,
}

fn free_port() -> u16 {
    TcpListener::bind((Ipv4Addr::LOCALHOST, 0)).unwrap().local_addr().unwrap().port()
}

impl Kernel {
    fn start(name: &str, extra: &[&str]) -> Kernel {
        let dir = std::env::temp_dir().join(format!("waypath-transport-{name}-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let ports = Ports { shell: free_port(), control: free_port(), stdin: free_port(), iopub: free_port(), hb: free_port() };
        let file = dir.join("connection.json");
        let info = json!({
            "transport": "tcp", "ip": "127.0.0.1", "key": KEY, "signature_scheme": "hmac-sha256",
            "shell_port": ports.shell, "control_port": ports.control, "stdin_port": ports.stdin,
            "iopub_port": ports.iopub, "hb_port": ports.hb,
        });
        std::fs::write(&file, info.to_string()).unwrap();
        let child = Command::new(env!("CARGO_BIN_EXE_waypath"))
            .arg("kernel")
            .arg("--connection-file")
            .arg(&file)
            .args(extra)
            .current_dir(&dir)
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("the waypath binary starts");
        let kernel = Kernel { child, ports, _dir: dir };
        kernel.wait_listening();
        kernel
    }

    fn wait_listening(&self) {
        let deadline = Instant::now() + Duration::from_secs(30);
        while TcpStream::connect((Ipv4Addr::LOCALHOST, self.ports.hb)).is_err() {
            assert!(Instant::now() < deadline, "the kernel did not start listening");
            std::thread::sleep(Duration::from_millis(50));
        }
    }

    fn alive(&mut self) -> bool {
        self.child.try_wait().unwrap().is_none()
    }
}

impl Drop for Kernel {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// The 64-byte ZMTP 3.0 greeting of a NULL-mechanism client.
fn greeting() -> Vec<u8> {
    let mut g = vec![0xFF, 0, 0, 0, 0, 0, 0, 0, 0, 0x7F, 3, 0];
    let mut mechanism = b"NULL".to_vec();
    mechanism.resize(20, 0);
    g.extend(mechanism);
    g.push(0); // as-server
    g.extend([0u8; 31]);
    assert_eq!(g.len(), 64);
    g
}

/// A frame: flags, size (short or long form), body.
fn frame(body: &[u8], more: bool, command: bool) -> Vec<u8> {
    let mut flags = u8::from(more) | (u8::from(command) << 2);
    let mut out = Vec::new();
    if body.len() > 255 {
        flags |= 0b10;
        out.push(flags);
        out.extend((body.len() as u64).to_be_bytes());
    } else {
        out.push(flags);
        out.push(body.len() as u8);
    }
    out.extend(body);
    out
}

/// The READY command of a DEALER peer.
fn ready() -> Vec<u8> {
    let mut body = vec![5];
    body.extend(b"READY");
    body.push(11);
    body.extend(b"Socket-Type");
    body.extend(6u32.to_be_bytes());
    body.extend(b"DEALER");
    frame(&body, false, true)
}

/// A hand-written ZMTP DEALER peer.
struct Peer {
    stream: TcpStream,
}

impl Peer {
    fn connect(port: u16) -> Peer {
        let stream = TcpStream::connect((Ipv4Addr::LOCALHOST, port)).unwrap();
        stream.set_read_timeout(Some(Duration::from_secs(20))).unwrap();
        Peer { stream }
    }

    /// Greeting and READY both ways.
    fn handshake(port: u16) -> Peer {
        let mut peer = Peer::connect(port);
        peer.stream.write_all(&greeting()).unwrap();
        peer.stream.write_all(&ready()).unwrap();
        let mut theirs = [0u8; 64];
        peer.stream.read_exact(&mut theirs).unwrap();
        assert_eq!((theirs[0], theirs[9], theirs[10]), (0xFF, 0x7F, 3), "a ZMTP 3 greeting");
        let (command, _) = peer.read_frame().expect("the kernel's READY");
        assert!(command);
        peer
    }

    /// One frame: (is a command, body); None when the connection ended.
    fn read_frame(&mut self) -> Option<(bool, Vec<u8>)> {
        let mut flags = [0u8; 1];
        self.stream.read_exact(&mut flags).ok()?;
        let len = if flags[0] & 0b10 != 0 {
            let mut n = [0u8; 8];
            self.stream.read_exact(&mut n).ok()?;
            u64::from_be_bytes(n) as usize
        } else {
            let mut n = [0u8; 1];
            self.stream.read_exact(&mut n).ok()?;
            n[0] as usize
        };
        let mut body = vec![0u8; len];
        self.stream.read_exact(&mut body).ok()?;
        Some((flags[0] & 0b100 != 0, body))
    }

    /// The frames of the next message; None when the connection ended or
    /// nothing came within `wait`.
    fn read_message(&mut self, wait: Duration) -> Option<Vec<Vec<u8>>> {
        self.stream.set_read_timeout(Some(wait)).unwrap();
        let mut frames = Vec::new();
        loop {
            let mut flags = [0u8; 1];
            self.stream.peek(&mut flags).ok().filter(|&n| n == 1)?;
            let more = flags[0] & 1 != 0;
            let (command, body) = self.read_frame()?;
            if command {
                continue;
            }
            frames.push(body);
            if !more {
                return Some(frames);
            }
        }
    }

    fn send_message(&mut self, frames: &[Vec<u8>]) {
        for (i, body) in frames.iter().enumerate() {
            self.stream.write_all(&frame(body, i + 1 < frames.len(), false)).unwrap();
        }
    }

    /// Whether the kernel closed this connection within `wait`.
    fn closed_within(&mut self, wait: Duration) -> bool {
        self.stream.set_read_timeout(Some(wait)).unwrap();
        let mut sink = [0u8; 4096];
        loop {
            match self.stream.read(&mut sink) {
                Ok(0) => return true,
                Ok(_) => continue,
                Err(e) if e.kind() == std::io::ErrorKind::ConnectionReset => return true,
                Err(_) => return false,
            }
        }
    }
}

fn request(msg_type: &str, content: Value) -> Message {
    Message {
        identities: vec![],
        header: Identity::new().header(msg_type),
        parent_header: json!({}),
        metadata: json!({}),
        content,
        buffers: vec![],
    }
}

/// Send `message` on a fresh connection and return the reply's msg_type.
fn round_trip(port: u16, message: &Message) -> Option<String> {
    let signer = Signer::new(KEY);
    let mut peer = Peer::handshake(port);
    peer.send_message(&message.encode(&signer));
    let frames = peer.read_message(Duration::from_secs(30))?;
    let reply = Message::decode(&frames, &Signer::new(KEY)).expect("a signed reply");
    Some(reply.msg_type().to_string())
}

#[test]
fn seventy_three_bytes_announcing_an_enormous_frame_do_not_end_the_kernel() {
    // Issue 12: a greeting and one long-frame header announcing 2^62 bytes,
    // sent before any signature can be checked, aborted the kernel.
    let mut kernel = Kernel::start("seventy-three", &[]);
    for port in [kernel.ports.shell, kernel.ports.control, kernel.ports.stdin, kernel.ports.iopub, kernel.ports.hb] {
        for command in [false, true] {
            let mut attack = greeting();
            attack.push(0b10 | (u8::from(command) << 2));
            attack.extend((1u64 << 62).to_be_bytes());
            assert_eq!(attack.len(), 73);
            let mut peer = Peer::connect(port);
            peer.stream.write_all(&attack).unwrap();
            assert!(peer.closed_within(Duration::from_secs(10)), "the peer on port {port} is dropped");
            assert!(kernel.alive(), "the kernel survives 73 bytes on port {port}");
        }
    }
    let reply = round_trip(kernel.ports.shell, &request("kernel_info_request", json!({})));
    assert_eq!(reply.as_deref(), Some("kernel_info_reply"));
}

#[test]
fn a_message_over_the_size_setting_drops_only_its_sender() {
    let mut kernel = Kernel::start("cap", &["--max-message-mib", "1"]);
    let mut peer = Peer::handshake(kernel.ports.shell);
    // Announce a 2 MiB frame (over the 1 MiB setting) and send part of it.
    let mut header = vec![0b10];
    header.extend((2u64 << 20).to_be_bytes());
    peer.stream.write_all(&header).unwrap();
    let _ = peer.stream.write_all(&vec![b'x'; 64 * 1024]);
    assert!(peer.closed_within(Duration::from_secs(10)));
    assert!(kernel.alive());
    // A cell of half a MiB is under the setting and runs.
    let code = format!("# {}\ngraph g:\n    a -> b\n", "x".repeat(512 * 1024));
    let reply = round_trip(kernel.ports.shell, &request("execute_request", json!({"code": code, "silent": false})));
    assert_eq!(reply.as_deref(), Some("execute_reply"));
}

#[test]
fn a_replayed_request_is_not_answered_again() {
    let kernel = Kernel::start("replay", &[]);
    let signer = Signer::new(KEY);
    let frames = request("kernel_info_request", json!({})).encode(&signer);
    let mut peer = Peer::handshake(kernel.ports.shell);
    peer.send_message(&frames);
    assert!(peer.read_message(Duration::from_secs(30)).is_some(), "the first copy is answered");
    peer.send_message(&frames);
    assert!(peer.read_message(Duration::from_secs(2)).is_none(), "the replayed copy is dropped unanswered");
    peer.send_message(&request("kernel_info_request", json!({})).encode(&signer));
    assert!(peer.read_message(Duration::from_secs(30)).is_some(), "a new request is answered");
}

#[test]
fn the_kernel_listens_only_on_the_connection_file_address() {
    // All of 127.0.0.0/8 reaches the loopback interface on Linux (ip(7)); a
    // socket bound to 127.0.0.1 alone refuses a connection to 127.0.0.2,
    // one bound to every address accepts it.
    let kernel = Kernel::start("bind", &[]);
    let ports = kernel.ports;
    for port in [ports.shell, ports.control, ports.stdin, ports.iopub, ports.hb] {
        assert!(TcpStream::connect((Ipv4Addr::LOCALHOST, port)).is_ok());
        let other = SocketAddr::from((Ipv4Addr::new(127, 0, 0, 2), port));
        assert!(TcpStream::connect_timeout(&other, Duration::from_secs(2)).is_err(), "port {port} is bound wider");
    }
}
