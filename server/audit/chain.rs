//! Each event is the JSON object `{"seq","at","actor","action","subject","payload"}`. Its hash
//! is the lowercase hex of `SHA-256(prev_hash || JCS(event))`, where `prev_hash` is the previous
//! event's hash as 64 ASCII hex characters (64 zeros before the first event) and JCS is the
//! RFC 8785 canonical encoding.

use std::fmt;

use serde::Serialize;
use serde_json::Value;
use sha2::{Digest, Sha256};

use crate::domain::Timestamp;

/// The hash that precedes the first event.
pub const GENESIS_HASH: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// One event as it is hashed and exported (docs/events.md).
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
#[schema(as = AuditEvent)]
pub struct Event {
    pub seq: i64,
    pub at: Timestamp,
    /// Who did it: a username, or `system` / `cli` for the instance itself.
    pub actor: String,
    pub action: String,
    /// What it is about, e.g. `metric:KEY`.
    pub subject: String,
    /// What the action recorded; its fields depend on the action (docs/events.md).
    #[schema(value_type = Object)]
    pub payload: Value,
}

/// An event with its links, as stored and exported: `{"event":{...},"prev_hash":"...","hash":"..."}`.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
#[schema(as = AuditEntry)]
pub struct Entry {
    pub event: Event,
    pub prev_hash: String,
    pub hash: String,
}

/// An event's fields as stored: the payload already in its canonical (RFC 8785) text. The
/// chain is checked from these without parsing any JSON.
#[derive(Clone, Copy, Debug)]
pub struct EventParts<'a> {
    pub seq: i64,
    pub at: &'a str,
    pub actor: &'a str,
    pub action: &'a str,
    pub subject: &'a str,
    pub payload_jcs: &'a str,
}

/// Writes a JSON string as RFC 8785 §3.2.2.2 requires: only `"`, `\` and control characters
/// are escaped (the short forms where JSON has them, else `\u00xx` in lower case).
fn write_jcs_string(s: &str, out: &mut Vec<u8>) {
    out.push(b'"');
    let bytes = s.as_bytes();
    let mut start = 0;
    for (i, &b) in bytes.iter().enumerate() {
        let escape: &[u8] = match b {
            b'"' => b"\\\"",
            b'\\' => b"\\\\",
            b'\n' => b"\\n",
            b'\r' => b"\\r",
            b'\t' => b"\\t",
            0x08 => b"\\b",
            0x0c => b"\\f",
            0..=0x1f => {
                out.extend_from_slice(&bytes[start..i]);
                out.extend_from_slice(format!("\\u{b:04x}").as_bytes());
                start = i + 1;
                continue;
            }
            _ => continue,
        };
        out.extend_from_slice(&bytes[start..i]);
        out.extend_from_slice(escape);
        start = i + 1;
    }
    out.extend_from_slice(&bytes[start..]);
    out.push(b'"');
}

/// The RFC 8785 canonical bytes of an event from its stored parts. The members are written in
/// JCS order (their names are ASCII, so UTF-16 order is byte order): action, actor, at,
/// payload, seq, subject.
pub fn canonical_parts(p: &EventParts<'_>, out: &mut Vec<u8>) {
    out.extend_from_slice(b"{\"action\":");
    write_jcs_string(p.action, out);
    out.extend_from_slice(b",\"actor\":");
    write_jcs_string(p.actor, out);
    out.extend_from_slice(b",\"at\":");
    write_jcs_string(p.at, out);
    out.extend_from_slice(b",\"payload\":");
    out.extend_from_slice(p.payload_jcs.as_bytes());
    out.extend_from_slice(b",\"seq\":");
    out.extend_from_slice(p.seq.to_string().as_bytes());
    out.extend_from_slice(b",\"subject\":");
    write_jcs_string(p.subject, out);
    out.push(b'}');
}

/// `hex(SHA-256(prev_hash || JCS(event)))` from stored parts; `buffer` is reused between calls.
pub fn chain_hash_parts(prev_hash: &str, p: &EventParts<'_>, buffer: &mut Vec<u8>) -> String {
    buffer.clear();
    canonical_parts(p, buffer);
    let mut hasher = Sha256::new();
    hasher.update(prev_hash.as_bytes());
    hasher.update(&buffer[..]);
    hex::encode(hasher.finalize())
}

/// The RFC 8785 canonical text of a payload.
pub fn canonical_payload(payload: &Value) -> String {
    serde_json_canonicalizer::to_string(payload).expect("payloads are plain JSON")
}

/// The RFC 8785 canonical bytes of an event.
pub fn canonical_event(event: &Event) -> Vec<u8> {
    let payload = canonical_payload(&event.payload);
    let at = event.at.to_string();
    let mut out = Vec::with_capacity(128 + payload.len());
    canonical_parts(&event_parts(event, &at, &payload), &mut out);
    out
}

fn event_parts<'a>(event: &'a Event, at: &'a str, payload_jcs: &'a str) -> EventParts<'a> {
    EventParts {
        seq: event.seq,
        at,
        actor: &event.actor,
        action: &event.action,
        subject: &event.subject,
        payload_jcs,
    }
}

/// `hex(SHA-256(prev_hash || JCS(event)))`.
pub fn chain_hash(prev_hash: &str, event: &Event) -> String {
    let mut hasher = Sha256::new();
    hasher.update(prev_hash.as_bytes());
    hasher.update(canonical_event(event));
    hex::encode(hasher.finalize())
}

/// The first place where a chain does not hold, named by the `seq` of the event there.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Break {
    /// The event's seq is not the one after the previous event's (a row deleted, inserted or
    /// moved).
    Sequence { seq: i64, expected: i64 },
    /// The event's `prev_hash` is not the previous event's hash.
    Link { seq: i64 },
    /// The event's content does not hash to its stored hash (it was changed).
    Hash { seq: i64 },
    /// The recorded head of the chain disagrees with the last event.
    Head { head_seq: i64, last_seq: i64 },
    /// A head an auditor held earlier is not in the chain (the tail was cut and re-forged).
    KnownHead { seq: i64 },
    /// The event a check verified earlier (the checkpoint) is missing or has another hash now.
    Checkpoint { seq: i64 },
}

impl Break {
    /// The seq this break names.
    pub fn seq(&self) -> i64 {
        match self {
            Break::Sequence { seq, .. } | Break::Link { seq } | Break::Hash { seq } => *seq,
            Break::Head { head_seq, last_seq } => (*head_seq).max(*last_seq),
            Break::KnownHead { seq } | Break::Checkpoint { seq } => *seq,
        }
    }
}

impl fmt::Display for Break {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Break::Sequence { seq, expected } => write!(
                f,
                "event seq {seq}: sequence does not match (expected seq {expected}); events are missing, inserted or moved"
            ),
            Break::Link { seq } => write!(
                f,
                "event seq {seq}: link does not match (its prev_hash is not the hash of the event before)"
            ),
            Break::Hash { seq } => write!(
                f,
                "event seq {seq}: hash does not match its content (the event was changed)"
            ),
            Break::Head { head_seq, last_seq } => write!(
                f,
                "event seq {}: the recorded head is seq {head_seq} but the last event is seq {last_seq}",
                (*head_seq).max(*last_seq)
            ),
            Break::KnownHead { seq } => write!(
                f,
                "event seq {seq}: the head held earlier (seq {seq}) is not in the chain; the tail was cut or rewritten"
            ),
            Break::Checkpoint { seq } => write!(
                f,
                "event seq {seq}: it is not the event an earlier check verified (missing, or its hash changed); a full check names the first change"
            ),
        }
    }
}

/// Checks entries one at a time, in order of seq, so a long chain streams through in pages.
#[derive(Clone, Debug)]
pub struct Verifier {
    next_seq: i64,
    prev_hash: String,
    count: i64,
    /// A (seq, hash) an auditor held earlier, checked when its seq passes.
    known: Option<(i64, String)>,
    known_seen: bool,
    /// Reused for each event's canonical bytes.
    buffer: Vec<u8>,
}

impl Default for Verifier {
    fn default() -> Self {
        Verifier::new(None)
    }
}

impl Verifier {
    pub fn new(known_head: Option<(i64, String)>) -> Verifier {
        Verifier {
            next_seq: 1,
            prev_hash: GENESIS_HASH.to_string(),
            count: 0,
            known: known_head,
            known_seen: false,
            buffer: Vec::with_capacity(1024),
        }
    }

    /// Goes on from an event already verified (`seq` and its `hash`): the next event must be
    /// `seq + 1` and link to `hash`. The count then includes the `seq` events before.
    pub fn resume(seq: i64, hash: &str, known_head: Option<(i64, String)>) -> Verifier {
        Verifier {
            next_seq: seq + 1,
            prev_hash: hash.to_string(),
            count: seq,
            ..Verifier::new(known_head)
        }
    }

    /// Checks the next entry: its sequence, then its link, then its hash.
    pub fn push(&mut self, entry: &Entry) -> Result<(), Break> {
        let payload = canonical_payload(&entry.event.payload);
        let at = entry.event.at.to_string();
        let parts = event_parts(&entry.event, &at, &payload);
        self.push_parts(&parts, &entry.prev_hash, &entry.hash)
    }

    /// Checks the next event from its stored parts (the fast path: no JSON is parsed).
    pub fn push_parts(
        &mut self,
        parts: &EventParts<'_>,
        prev_hash: &str,
        hash: &str,
    ) -> Result<(), Break> {
        let seq = parts.seq;
        if seq != self.next_seq {
            return Err(Break::Sequence {
                seq,
                expected: self.next_seq,
            });
        }
        if prev_hash != self.prev_hash {
            return Err(Break::Link { seq });
        }
        if chain_hash_parts(&self.prev_hash, parts, &mut self.buffer) != hash {
            return Err(Break::Hash { seq });
        }
        if let Some((known_seq, known_hash)) = &self.known
            && *known_seq == seq
        {
            if known_hash != hash {
                return Err(Break::KnownHead { seq });
            }
            self.known_seen = true;
        }
        self.next_seq = seq + 1;
        self.prev_hash.clear();
        self.prev_hash.push_str(hash);
        self.count += 1;
        Ok(())
    }

    /// Ends the check: the number of events and the head hash, or the held head that was never
    /// reached.
    pub fn finish(self) -> Result<(i64, String), Break> {
        if let Some((seq, _)) = &self.known
            && !self.known_seen
        {
            return Err(Break::KnownHead { seq: *seq });
        }
        Ok((self.count, self.prev_hash))
    }
}

/// Reads a head held from earlier, written `SEQ:HASH` (as the verify output and published
/// sets give it).
pub fn parse_known_head(text: &str) -> Result<(i64, String), String> {
    let bad = || format!("{text:?}: expected SEQ:HASH with a 64-hex-character hash");
    let (seq, hash) = text.trim().split_once(':').ok_or_else(bad)?;
    let seq: i64 = seq.trim().parse().map_err(|_| bad())?;
    let hash = hash.trim().to_ascii_lowercase();
    if hash.len() != 64 || !hash.bytes().all(|b| b.is_ascii_hexdigit()) {
        return Err(bad());
    }
    Ok((seq, hash))
}
