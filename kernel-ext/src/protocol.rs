//! The Jupyter wire protocol (messaging 5.3): connection files, signed
//! multipart messages, and the headers the kernel writes.
//!
//! A message on a ROUTER socket is a list of frames:
//! `identities…, "<IDS|MSG>", signature, header, parent_header, metadata,
//! content, buffers…`. The signature is the hex HMAC-SHA256, under the
//! connection file's key, of the four JSON frames after it. Decoding refuses
//! a message whose signature is missing or wrong, and one whose signature was
//! already seen (a replay, refused as jupyter_client's `Session` does), so
//! nothing unsigned or repeated reaches the kernel; the caller logs and drops
//! it. Everything here is synchronous and socket-free so it can be tested on
//! bytes alone.

use std::collections::{HashSet, VecDeque};
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{SystemTime, UNIX_EPOCH};

use hmac::{Hmac, KeyInit, Mac};
use serde::Deserialize;
use serde_json::{json, Value};
use sha2::Sha256;

use crate::report::civil_from_days;

/// The messaging protocol version this kernel speaks.
pub const PROTOCOL_VERSION: &str = "5.3";

/// The frame that separates routing identities from the signed message.
pub const DELIMITER: &[u8] = b"<IDS|MSG>";

/// Why a connection file or an incoming message was refused.
#[derive(Debug, thiserror::Error)]
pub enum ProtocolError {
    #[error("{path}: cannot read the connection file ({reason})")]
    ConnectionFile { path: String, reason: String },
    #[error("signature scheme {0:?} is not supported; use hmac-sha256")]
    Scheme(String),
    #[error("the message has no <IDS|MSG> delimiter frame")]
    NoDelimiter,
    #[error("the message has {0} frames after the delimiter; at least 5 are needed")]
    TooFewFrames(usize),
    #[error("the message signature is missing or does not match the connection key")]
    BadSignature,
    #[error("the message repeats the signature of an earlier message (a replay)")]
    Replayed,
    #[error("the message's {part} frame is not valid JSON ({reason})")]
    BadJson { part: &'static str, reason: String },
}

/// Where the kernel listens and the key it signs with, as written by the
/// Jupyter client in the connection file.
#[derive(Debug, Clone, Deserialize)]
pub struct ConnectionInfo {
    pub transport: String,
    pub ip: String,
    pub key: String,
    #[serde(default = "default_scheme")]
    pub signature_scheme: String,
    pub shell_port: u16,
    pub iopub_port: u16,
    pub stdin_port: u16,
    pub control_port: u16,
    pub hb_port: u16,
}

fn default_scheme() -> String {
    "hmac-sha256".to_string()
}

impl ConnectionInfo {
    /// Read and check a connection file.
    pub fn read(path: &Path) -> Result<ConnectionInfo, ProtocolError> {
        let shown = path.display().to_string();
        let fail = |reason: String| ProtocolError::ConnectionFile { path: shown.clone(), reason };
        let text = std::fs::read_to_string(path).map_err(|e| fail(e.to_string()))?;
        let info: ConnectionInfo = serde_json::from_str(&text).map_err(|e| fail(e.to_string()))?;
        if info.signature_scheme != "hmac-sha256" {
            return Err(ProtocolError::Scheme(info.signature_scheme));
        }
        Ok(info)
    }

    /// The endpoint string (`tcp://127.0.0.1:5555`, `tcp://[::1]:5555`) of
    /// one port.
    pub fn endpoint(&self, port: u16) -> String {
        let ip = self.ip.trim();
        let host = match ip.parse::<std::net::Ipv6Addr>() {
            Ok(v6) => format!("[{v6}]"),
            Err(_) => ip.to_string(),
        };
        format!("{}://{}:{}", self.transport, host, port)
    }
}

/// How many signatures are remembered to refuse replays (jupyter_client's
/// `Session.digest_history_size` is 2^16 too).
pub const REMEMBERED_SIGNATURES: usize = 1 << 16;

/// Signs and checks messages with the connection key. An empty key means
/// the client asked for no authentication (allowed by the protocol); then
/// nothing is signed and nothing can be checked for replay.
#[derive(Clone)]
pub struct Signer {
    key: Vec<u8>,
    seen: Arc<Mutex<SeenSignatures>>,
}

/// The signatures of accepted messages, oldest forgotten first.
#[derive(Default)]
struct SeenSignatures {
    set: HashSet<Vec<u8>>,
    order: VecDeque<Vec<u8>>,
}

impl SeenSignatures {
    /// Remember `signature`; false if it was already there.
    fn insert(&mut self, signature: &[u8]) -> bool {
        if !self.set.insert(signature.to_vec()) {
            return false;
        }
        self.order.push_back(signature.to_vec());
        if self.order.len() > REMEMBERED_SIGNATURES {
            if let Some(oldest) = self.order.pop_front() {
                self.set.remove(&oldest);
            }
        }
        true
    }
}

impl Signer {
    pub fn new(key: &str) -> Signer {
        Signer { key: key.as_bytes().to_vec(), seen: Arc::default() }
    }

    /// Whether messages are authenticated (the key is not empty).
    pub fn authenticates(&self) -> bool {
        !self.key.is_empty()
    }

    fn mac(&self, parts: &[&[u8]]) -> Option<Hmac<Sha256>> {
        if self.key.is_empty() {
            return None;
        }
        let mut mac = Hmac::<Sha256>::new_from_slice(&self.key).ok()?;
        for part in parts {
            mac.update(part);
        }
        Some(mac)
    }

    /// The hex signature of the four JSON frames (empty without a key).
    pub fn sign(&self, parts: &[&[u8]]) -> String {
        match self.mac(parts) {
            Some(mac) => hex::encode(mac.finalize().into_bytes()),
            None => String::new(),
        }
    }

    /// Whether `signature` (hex) is the signature of `parts`, compared in
    /// constant time.
    pub fn verify(&self, signature: &[u8], parts: &[&[u8]]) -> bool {
        match self.mac(parts) {
            None => true,
            Some(mac) => match hex::decode(signature) {
                Ok(bytes) => mac.verify_slice(&bytes).is_ok(),
                Err(_) => false,
            },
        }
    }

    /// Accept an incoming message's signature: it must verify and must not
    /// have been accepted before (by any channel sharing this signer). The
    /// decoded bytes are remembered, so a signature spelled in other letter
    /// cases is the same signature.
    pub fn accept(&self, signature: &[u8], parts: &[&[u8]]) -> Result<(), ProtocolError> {
        if !self.verify(signature, parts) {
            return Err(ProtocolError::BadSignature);
        }
        if !self.authenticates() {
            return Ok(());
        }
        let digest = hex::decode(signature).map_err(|_| ProtocolError::BadSignature)?;
        let fresh = self.seen.lock().unwrap_or_else(|p| p.into_inner()).insert(&digest);
        if fresh { Ok(()) } else { Err(ProtocolError::Replayed) }
    }
}

/// One decoded message.
#[derive(Debug, Clone)]
pub struct Message {
    /// Routing identities (ROUTER sockets) or the topic (IOPub).
    pub identities: Vec<Vec<u8>>,
    pub header: Value,
    pub parent_header: Value,
    pub metadata: Value,
    pub content: Value,
    pub buffers: Vec<Vec<u8>>,
}

impl Message {
    /// The `msg_type` of the header ("" when absent).
    pub fn msg_type(&self) -> &str {
        self.header.get("msg_type").and_then(Value::as_str).unwrap_or("")
    }

    /// Decode frames, refusing a message whose signature does not verify or
    /// repeats an accepted one.
    pub fn decode(frames: &[Vec<u8>], signer: &Signer) -> Result<Message, ProtocolError> {
        let split = frames.iter().position(|f| f == DELIMITER).ok_or(ProtocolError::NoDelimiter)?;
        let rest = &frames[split + 1..];
        if rest.len() < 5 {
            return Err(ProtocolError::TooFewFrames(rest.len()));
        }
        let parts: Vec<&[u8]> = rest[1..5].iter().map(Vec::as_slice).collect();
        let json = |part: &'static str, bytes: &[u8]| {
            serde_json::from_slice::<Value>(bytes)
                .map_err(|e| ProtocolError::BadJson { part, reason: e.to_string() })
        };
        signer.accept(&rest[0], &parts)?;
        Ok(Message {
            identities: frames[..split].to_vec(),
            header: json("header", parts[0])?,
            parent_header: json("parent_header", parts[1])?,
            metadata: json("metadata", parts[2])?,
            content: json("content", parts[3])?,
            buffers: rest[5..].to_vec(),
        })
    }

    /// Encode as signed frames.
    pub fn encode(&self, signer: &Signer) -> Vec<Vec<u8>> {
        let parts: Vec<Vec<u8>> = [&self.header, &self.parent_header, &self.metadata, &self.content]
            .iter()
            .map(|v| v.to_string().into_bytes())
            .collect();
        let refs: Vec<&[u8]> = parts.iter().map(Vec::as_slice).collect();
        let mut frames = self.identities.clone();
        frames.push(DELIMITER.to_vec());
        frames.push(signer.sign(&refs).into_bytes());
        frames.extend(parts);
        frames.extend(self.buffers.iter().cloned());
        frames
    }
}

/// The kernel's side of messaging: its session id and a counter that makes
/// every message id unique.
pub struct Identity {
    session: String,
    counter: AtomicU64,
}

impl Identity {
    /// A fresh identity; the session id mixes the process id and the clock.
    pub fn new() -> Identity {
        let nanos = SystemTime::now().duration_since(UNIX_EPOCH).map(|d| d.as_nanos()).unwrap_or(0);
        let signer = Signer::new("waypath-session");
        let seed = format!("{}-{nanos}", std::process::id());
        let session = signer.sign(&[seed.as_bytes()])[..32].to_string();
        Identity { session, counter: AtomicU64::new(0) }
    }

    /// A new header of type `msg_type`.
    pub fn header(&self, msg_type: &str) -> Value {
        let n = self.counter.fetch_add(1, Ordering::Relaxed);
        json!({
            "msg_id": format!("{}-{n}", self.session),
            "session": self.session,
            "username": "waypath",
            "date": utc_timestamp(SystemTime::now()),
            "msg_type": msg_type,
            "version": PROTOCOL_VERSION,
        })
    }

    /// A message answering `parent`: same routing identities, `parent`'s
    /// header as parent header.
    pub fn reply(&self, parent: &Message, msg_type: &str, content: Value) -> Message {
        Message {
            identities: parent.identities.clone(),
            header: self.header(msg_type),
            parent_header: parent.header.clone(),
            metadata: json!({}),
            content,
            buffers: Vec::new(),
        }
    }

    /// An IOPub message caused by `parent` (topic = its type).
    pub fn broadcast(&self, parent: &Value, msg_type: &str, content: Value) -> Message {
        Message {
            identities: vec![format!("kernel.{}.{msg_type}", self.session).into_bytes()],
            header: self.header(msg_type),
            parent_header: parent.clone(),
            metadata: json!({}),
            content,
            buffers: Vec::new(),
        }
    }
}

impl Default for Identity {
    fn default() -> Self {
        Identity::new()
    }
}

/// ISO 8601 UTC time with microseconds, as the protocol's `date` field.
pub fn utc_timestamp(time: SystemTime) -> String {
    let since = time.duration_since(UNIX_EPOCH).unwrap_or_default();
    let secs = since.as_secs();
    let (year, month, day) = civil_from_days((secs / 86_400) as i64);
    let rem = secs % 86_400;
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}.{:06}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60,
        since.subsec_micros()
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn signature_matches_rfc_4231_case_2() {
        // RFC 4231, test case 2: key "Jefe", data "what do ya want for nothing?".
        let signer = Signer::new("Jefe");
        let sig = signer.sign(&[b"what do ya want ", b"for nothing?"]);
        assert_eq!(sig, "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843");
    }

    #[test]
    fn a_message_signed_with_another_key_is_refused() {
        let ours = Signer::new("orchard-key");
        let theirs = Signer::new("stream-key");
        let identity = Identity::new();
        let msg = Message {
            identities: vec![b"client".to_vec()],
            header: identity.header("kernel_info_request"),
            parent_header: json!({}),
            metadata: json!({}),
            content: json!({}),
            buffers: vec![],
        };
        let frames = msg.encode(&theirs);
        assert!(matches!(Message::decode(&frames, &ours), Err(ProtocolError::BadSignature)));
        let back = Message::decode(&msg.encode(&ours), &ours).expect("own signature verifies");
        assert_eq!(back.msg_type(), "kernel_info_request");
        assert_eq!(back.identities, vec![b"client".to_vec()]);
    }

    fn orchard_request(identity: &Identity) -> Message {
        Message {
            identities: vec![b"client".to_vec()],
            header: identity.header("execute_request"),
            parent_header: json!({}),
            metadata: json!({}),
            content: json!({"code": "graph g:\n    a -> b"}),
            buffers: vec![],
        }
    }

    #[test]
    fn a_replayed_message_is_refused() {
        // jupyter_client's Session.deserialize raises "Duplicate Signature"
        // for a signature already in its digest history.
        let signer = Signer::new("orchard-key");
        let frames = orchard_request(&Identity::new()).encode(&signer);
        assert!(Message::decode(&frames, &signer).is_ok());
        assert!(matches!(Message::decode(&frames, &signer), Err(ProtocolError::Replayed)));
        // The same signature in capitals is the same digest (hex is case-blind).
        let mut shouted = frames.clone();
        let at = shouted.iter().position(|f| f == DELIMITER).unwrap() + 1;
        shouted[at] = shouted[at].to_ascii_uppercase();
        assert!(matches!(Message::decode(&shouted, &signer), Err(ProtocolError::Replayed)));
        // A clone (another channel of the same kernel) shares the history.
        assert!(matches!(Message::decode(&frames, &signer.clone()), Err(ProtocolError::Replayed)));
        // A new message (new msg_id) is accepted.
        assert!(Message::decode(&orchard_request(&Identity::new()).encode(&signer), &signer).is_ok());
    }

    #[test]
    fn the_oldest_signatures_are_forgotten_past_the_limit() {
        let mut seen = SeenSignatures::default();
        for i in 0..=REMEMBERED_SIGNATURES {
            assert!(seen.insert(&(i as u64).to_be_bytes()));
        }
        assert_eq!(seen.set.len(), REMEMBERED_SIGNATURES);
        assert!(seen.insert(&0u64.to_be_bytes()), "the oldest was forgotten");
        assert!(!seen.insert(&(REMEMBERED_SIGNATURES as u64).to_be_bytes()), "the newest is kept");
    }

    #[test]
    fn without_a_key_nothing_is_checked_for_replay() {
        // jupyter_client checks signatures and digests only when `auth` is set.
        let signer = Signer::new("");
        let frames = orchard_request(&Identity::new()).encode(&signer);
        assert!(Message::decode(&frames, &signer).is_ok());
        assert!(Message::decode(&frames, &signer).is_ok());
    }

    #[test]
    fn endpoints_bracket_ipv6_addresses() {
        // RFC 3986 §3.2.2: an IPv6 literal in a URI authority is bracketed.
        let info = |ip: &str| ConnectionInfo {
            transport: "tcp".into(),
            ip: ip.into(),
            key: String::new(),
            signature_scheme: default_scheme(),
            shell_port: 1,
            iopub_port: 2,
            stdin_port: 3,
            control_port: 4,
            hb_port: 5,
        };
        assert_eq!(info("127.0.0.1").endpoint(5555), "tcp://127.0.0.1:5555");
        assert_eq!(info("::1").endpoint(5555), "tcp://[::1]:5555");
        assert_eq!(info("localhost").endpoint(80), "tcp://localhost:80");
    }

    #[test]
    fn timestamps_follow_the_civil_calendar() {
        // 951_782_400 s after the epoch is 2000-02-29T00:00:00Z (a leap day;
        // `date -u -d @951782400`).
        let t = UNIX_EPOCH + std::time::Duration::from_secs(951_782_400);
        assert_eq!(utc_timestamp(t), "2000-02-29T00:00:00.000000Z");
    }
}
