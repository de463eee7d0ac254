//! The wire format of Jupyter messages: frames, signature, header.
//!
//! A message travels as ZeroMQ frames (messaging protocol, "The Wire
//! Protocol"):
//!
//! ```text
//! [routing identities...] "<IDS|MSG>" signature header parent_header metadata content [buffers...]
//! ```
//!
//! The signature is the lowercase hex HMAC-SHA256 (RFC 2104 with FIPS 180-4
//! SHA-256) of the four JSON frames, keyed with the connection file's key. It
//! is checked over the bytes exactly as received, before any JSON is parsed,
//! and compared in constant time so the comparison leaks nothing about the
//! expected value. An empty key means signing is off, as the protocol allows.

use std::collections::{HashSet, VecDeque};
use std::fmt;
use std::sync::Mutex;
use std::time::{SystemTime, UNIX_EPOCH};

use hmac::{Hmac, Mac};
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};
use sha2::Sha256;

/// Separates routing identities from the message proper.
pub const DELIMITER: &[u8] = b"<IDS|MSG>";

/// Protocol version written into every header we send.
pub const PROTOCOL_VERSION: &str = "5.3";

/// Signatures remembered to refuse a replayed message. Past this many the
/// oldest are forgotten (a replay that old is harmless to a notebook kernel:
/// the attacker already had a copy of a message the user sent).
const SIGNATURES_REMEMBERED: usize = 65_536;

type HmacSha256 = Hmac<Sha256>;

/// Why an incoming message was refused.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum WireError {
    MissingDelimiter,
    TooFewFrames { found: usize },
    BadSignature,
    ReplayedSignature,
    InvalidJson { frame: &'static str, reason: String },
}

impl fmt::Display for WireError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WireError::MissingDelimiter => write!(f, "no <IDS|MSG> delimiter frame"),
            WireError::TooFewFrames { found } => write!(
                f,
                "{found} frames after the delimiter; a message needs signature, header, \
                 parent_header, metadata and content"
            ),
            WireError::BadSignature => write!(f, "signature does not match the connection key"),
            WireError::ReplayedSignature => write!(f, "signature already seen (replayed message)"),
            WireError::InvalidJson { frame, reason } => {
                write!(f, "{frame} frame is not a JSON object: {reason}")
            }
        }
    }
}

/// A message header. Unknown fields are kept so a request header echoes
/// unchanged as the parent header of its replies.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    #[serde(default)]
    pub msg_id: String,
    #[serde(default)]
    pub session: String,
    #[serde(default)]
    pub username: String,
    #[serde(default)]
    pub date: String,
    pub msg_type: String,
    #[serde(default)]
    pub version: String,
    #[serde(flatten)]
    pub extra: Map<String, Value>,
}

impl Header {
    /// A fresh header for a message the kernel sends.
    pub fn new(msg_type: &str, session: &str) -> Self {
        Self {
            msg_id: new_id(),
            session: session.to_string(),
            username: "kernel".to_string(),
            date: iso8601_now(),
            msg_type: msg_type.to_string(),
            version: PROTOCOL_VERSION.to_string(),
            extra: Map::new(),
        }
    }
}

/// A decoded, authenticated message.
#[derive(Debug, Clone, PartialEq)]
pub struct Message {
    pub identities: Vec<Vec<u8>>,
    pub header: Header,
    /// The header of the request this answers, or an empty object.
    pub parent_header: Value,
    pub metadata: Value,
    pub content: Value,
    pub buffers: Vec<Vec<u8>>,
}

impl Message {
    pub fn msg_type(&self) -> &str {
        &self.header.msg_type
    }

    /// Header of this message as JSON, for use as a reply's parent header.
    pub fn header_value(&self) -> Value {
        serde_json::to_value(&self.header).unwrap_or_else(|_| Value::Object(Map::new()))
    }
}

/// Signs outgoing and checks incoming messages with one connection's key.
pub struct Authenticator {
    key: Option<HmacSha256>,
    seen: Mutex<SeenSignatures>,
}

#[derive(Default)]
struct SeenSignatures {
    set: HashSet<Vec<u8>>,
    order: VecDeque<Vec<u8>>,
}

impl Authenticator {
    /// `key` as written in the connection file; empty turns signing off.
    pub fn new(key: &str) -> Self {
        let key = if key.is_empty() {
            None
        } else {
            // HMAC accepts keys of any length (RFC 2104 section 2), so this
            // cannot fail; fall back to unsigned only if the crate disagrees.
            HmacSha256::new_from_slice(key.as_bytes()).ok()
        };
        Self {
            key,
            seen: Mutex::new(SeenSignatures::default()),
        }
    }

    pub fn signs(&self) -> bool {
        self.key.is_some()
    }

    /// Lowercase hex signature of the four JSON frames ("" when unsigned).
    pub fn sign(&self, parts: [&[u8]; 4]) -> String {
        match &self.key {
            None => String::new(),
            Some(key) => {
                let mut mac = key.clone();
                for part in parts {
                    mac.update(part);
                }
                to_hex(&mac.finalize().into_bytes())
            }
        }
    }

    /// Check a signature in constant time (the MAC crate's `verify_slice`
    /// compares with a constant-time equality).
    fn verify(&self, signature: &[u8], parts: [&[u8]; 4]) -> bool {
        match &self.key {
            None => true,
            Some(key) => {
                let Some(received) = from_hex(signature) else {
                    return false;
                };
                let mut mac = key.clone();
                for part in parts {
                    mac.update(part);
                }
                mac.verify_slice(&received).is_ok()
            }
        }
    }

    /// Split, authenticate and parse the frames of one incoming message.
    pub fn decode(&self, frames: Vec<Vec<u8>>) -> Result<Message, WireError> {
        let delimiter = frames
            .iter()
            .position(|frame| frame.as_slice() == DELIMITER)
            .ok_or(WireError::MissingDelimiter)?;
        let mut frames = frames;
        let rest = frames.split_off(delimiter + 1);
        frames.pop(); // the delimiter itself
        let identities = frames;
        if rest.len() < 5 {
            return Err(WireError::TooFewFrames { found: rest.len() });
        }
        let mut rest = rest.into_iter();
        let signature = rest.next().unwrap_or_default();
        let header = rest.next().unwrap_or_default();
        let parent = rest.next().unwrap_or_default();
        let metadata = rest.next().unwrap_or_default();
        let content = rest.next().unwrap_or_default();
        let buffers: Vec<Vec<u8>> = rest.collect();

        if !self.verify(&signature, [&header, &parent, &metadata, &content]) {
            return Err(WireError::BadSignature);
        }
        // Remembered in one spelling: hex digits in capitals carry the same
        // HMAC, and must not pass as a new message.
        if self.signs() && !self.remember(&signature.to_ascii_lowercase()) {
            return Err(WireError::ReplayedSignature);
        }

        let header: Header =
            serde_json::from_slice(&header).map_err(|error| WireError::InvalidJson {
                frame: "header",
                reason: error.to_string(),
            })?;
        let parent_header = parse_object(&parent, "parent_header")?;
        let metadata = parse_object(&metadata, "metadata")?;
        let content = parse_object(&content, "content")?;
        Ok(Message {
            identities,
            header,
            parent_header,
            metadata,
            content,
            buffers,
        })
    }

    /// Serialise and sign one outgoing message into frames.
    pub fn encode(
        &self,
        identities: &[Vec<u8>],
        header: &Header,
        parent_header: &Value,
        metadata: &Value,
        content: &Value,
    ) -> Vec<Vec<u8>> {
        let header = to_json_bytes(header);
        let parent = to_json_bytes(parent_header);
        let metadata = to_json_bytes(metadata);
        let content = to_json_bytes(content);
        let signature = self.sign([&header, &parent, &metadata, &content]);
        let mut frames = Vec::with_capacity(identities.len() + 6);
        frames.extend(identities.iter().cloned());
        frames.push(DELIMITER.to_vec());
        frames.push(signature.into_bytes());
        frames.push(header);
        frames.push(parent);
        frames.push(metadata);
        frames.push(content);
        frames
    }

    /// Record a signature; false when it was seen before.
    fn remember(&self, signature: &[u8]) -> bool {
        let mut seen = match self.seen.lock() {
            Ok(guard) => guard,
            Err(poisoned) => poisoned.into_inner(),
        };
        if seen.set.contains(signature) {
            return false;
        }
        if seen.order.len() >= SIGNATURES_REMEMBERED {
            if let Some(oldest) = seen.order.pop_front() {
                seen.set.remove(&oldest);
            }
        }
        seen.set.insert(signature.to_vec());
        seen.order.push_back(signature.to_vec());
        true
    }
}

fn parse_object(bytes: &[u8], frame: &'static str) -> Result<Value, WireError> {
    let value: Value = serde_json::from_slice(bytes).map_err(|error| WireError::InvalidJson {
        frame,
        reason: error.to_string(),
    })?;
    match value {
        Value::Object(_) => Ok(value),
        Value::Null => Ok(Value::Object(Map::new())),
        other => Err(WireError::InvalidJson {
            frame,
            reason: format!("found {other}"),
        }),
    }
}

fn to_json_bytes<T: Serialize>(value: &T) -> Vec<u8> {
    // Serialising a Value or a plain struct of strings cannot fail.
    serde_json::to_vec(value).unwrap_or_else(|_| b"{}".to_vec())
}

fn to_hex(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut text = String::with_capacity(bytes.len() * 2);
    for byte in bytes {
        text.push(DIGITS[(byte >> 4) as usize] as char);
        text.push(DIGITS[(byte & 0x0f) as usize] as char);
    }
    text
}

fn from_hex(text: &[u8]) -> Option<Vec<u8>> {
    if !text.len().is_multiple_of(2) {
        return None;
    }
    fn digit(c: u8) -> Option<u8> {
        match c {
            b'0'..=b'9' => Some(c - b'0'),
            b'a'..=b'f' => Some(c - b'a' + 10),
            b'A'..=b'F' => Some(c - b'A' + 10),
            _ => None,
        }
    }
    text.chunks(2)
        .map(|pair| Some(digit(pair[0])? << 4 | digit(pair[1])?))
        .collect()
}

/// A random message or session id (UUID version 4, RFC 9562).
pub fn new_id() -> String {
    uuid::Uuid::new_v4().to_string()
}

/// The current UTC time as ISO 8601 with microseconds, e.g.
/// "2031-04-02T09:15:27.004512Z" (the form Jupyter's clients parse).
pub fn iso8601_now() -> String {
    let since_epoch = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .unwrap_or_default();
    iso8601(since_epoch.as_secs() as i64, since_epoch.subsec_micros())
}

/// Format seconds since the Unix epoch (UTC, no leap seconds, as POSIX
/// counts them) plus microseconds.
pub fn iso8601(seconds: i64, micros: u32) -> String {
    let days = seconds.div_euclid(86_400);
    let second_of_day = seconds.rem_euclid(86_400);
    let (year, month, day) = civil_from_days(days);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}.{micros:06}Z",
        second_of_day / 3600,
        (second_of_day % 3600) / 60,
        second_of_day % 60
    )
}

/// Proleptic Gregorian date of a day count from 1970-01-01 (H. Hinnant,
/// "chrono-Compatible Low-Level Date Algorithms", civil_from_days).
fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let day_of_era = z.rem_euclid(146_097);
    let year_of_era =
        (day_of_era - day_of_era / 1460 + day_of_era / 36_524 - day_of_era / 146_096) / 365;
    let day_of_year = day_of_era - (365 * year_of_era + year_of_era / 4 - year_of_era / 100);
    let month_index = (5 * day_of_year + 2) / 153;
    let day = (day_of_year - (153 * month_index + 2) / 5 + 1) as u32;
    let month = if month_index < 10 {
        month_index + 3
    } else {
        month_index - 9
    } as u32;
    let year = year_of_era + era * 400 + i64::from(month <= 2);
    (year, month, day)
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn hmac_sha256_matches_rfc_4231_test_case_2() {
        // RFC 4231 section 4.3: key "Jefe", data "what do ya want for nothing?".
        let auth = Authenticator::new("Jefe");
        let signature = auth.sign([b"what do ya ", b"want ", b"for nothing?", b""]);
        assert_eq!(
            signature,
            "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
        );
    }

    fn sample(auth: &Authenticator) -> Vec<Vec<u8>> {
        let header = Header::new("kernel_info_request", "client-session");
        auth.encode(
            &[b"peer-1".to_vec()],
            &header,
            &json!({}),
            &json!({}),
            &json!({"a": 1}),
        )
    }

    #[test]
    fn round_trip_keeps_identities_and_content() {
        let auth = Authenticator::new("secret");
        let message = auth.decode(sample(&auth)).unwrap();
        assert_eq!(message.identities, vec![b"peer-1".to_vec()]);
        assert_eq!(message.msg_type(), "kernel_info_request");
        assert_eq!(message.content, json!({"a": 1}));
        assert_eq!(message.header.version, PROTOCOL_VERSION);
    }

    #[test]
    fn wrong_key_tampering_and_replay_are_refused() {
        let sender = Authenticator::new("secret");
        let receiver = Authenticator::new("other key");
        assert_eq!(
            receiver.decode(sample(&sender)),
            Err(WireError::BadSignature)
        );

        let receiver = Authenticator::new("secret");
        let mut frames = sample(&sender);
        let content = frames.len() - 1;
        frames[content] = br#"{"a": 2}"#.to_vec();
        assert_eq!(receiver.decode(frames), Err(WireError::BadSignature));

        let frames = sample(&sender);
        assert!(receiver.decode(frames.clone()).is_ok());
        assert_eq!(receiver.decode(frames.clone()), Err(WireError::ReplayedSignature));
        // The same signature in capital hex digits is the same HMAC: a replay.
        let mut shouted = frames;
        let at = shouted.iter().position(|f| f.as_slice() == DELIMITER).unwrap() + 1;
        shouted[at] = shouted[at].to_ascii_uppercase();
        assert_eq!(receiver.decode(shouted), Err(WireError::ReplayedSignature));
    }

    #[test]
    fn garbage_signature_and_short_messages_are_refused() {
        let auth = Authenticator::new("secret");
        let mut frames = sample(&auth);
        frames[2] = b"zz-not-hex".to_vec();
        assert_eq!(auth.decode(frames), Err(WireError::BadSignature));
        assert_eq!(
            auth.decode(vec![b"peer".to_vec(), b"{}".to_vec()]),
            Err(WireError::MissingDelimiter)
        );
        assert_eq!(
            auth.decode(vec![DELIMITER.to_vec(), b"sig".to_vec()]),
            Err(WireError::TooFewFrames { found: 1 })
        );
    }

    #[test]
    fn empty_key_means_unsigned() {
        let auth = Authenticator::new("");
        let frames = sample(&auth);
        assert!(frames[2].is_empty());
        assert!(auth.decode(frames.clone()).is_ok());
        // Unsigned messages carry no signature to remember, so repeats pass.
        assert!(auth.decode(frames).is_ok());
    }

    #[test]
    fn iso8601_matches_python_datetime() {
        // Values from Python: datetime.fromtimestamp(t, timezone.utc).isoformat().
        assert_eq!(iso8601(0, 0), "1970-01-01T00:00:00.000000Z");
        assert_eq!(iso8601(951_782_400, 5), "2000-02-29T00:00:00.000005Z");
        assert_eq!(
            iso8601(1_709_251_199, 999_999),
            "2024-02-29T23:59:59.999999Z"
        );
        assert_eq!(iso8601(-1, 0), "1969-12-31T23:59:59.000000Z");
    }

    #[test]
    fn hex_round_trip() {
        assert_eq!(to_hex(&[0x00, 0xab, 0xff]), "00abff");
        assert_eq!(from_hex(b"00ABff"), Some(vec![0x00, 0xab, 0xff]));
        assert_eq!(from_hex(b"0g"), None);
        assert_eq!(from_hex(b"abc"), None);
    }
}
