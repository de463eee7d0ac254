//! The Jupyter kernel front end.
//!
//! Speaks the Jupyter messaging protocol (version 5.3) over ZeroMQ so that
//! notebooks, consoles and other Jupyter clients can run Baroc. The kernel
//! knows nothing of the language: it drives a [`KernelSession`] (see
//! `session.rs`), which the language provides.
//!
//! Map:
//! - `session`: the trait the language implements and its value types;
//! - `connection`: the connection file;
//! - `wire`: frames, signatures, headers, timestamps;
//! - `transport`: the only place that touches the ZeroMQ crate;
//! - `server`: sockets, tasks and the request handlers;
//! - `worker`: the thread that owns the session and survives its panics;
//! - `history`: input history for history_request;
//! - `kernelspec` and `logo`: installing the kernel where Jupyter finds it.

pub mod baroc_session;
pub mod connection;
pub mod history;
pub mod kernelspec;
pub mod logo;
pub mod session;
pub mod wire;

mod server;
mod transport;
mod worker;

#[cfg(test)]
mod tests;

use std::path::PathBuf;

use base64::Engine;
use serde_json::{Map, Value};

use crate::mime::{MimeBundle, MimeData};

pub use connection::ConnectionInfo;
pub use kernelspec::{
    install_kernelspec, uninstall_kernelspec, KernelspecError, KernelspecLocation,
};
pub use server::{run_kernel, serve};
pub use session::{
    Completion, ExecuteOutcome, HelpLink, IsComplete, KernelError, KernelSession, LanguageInfo,
    Output, StreamName,
};

/// Why the kernel could not start or had to stop.
#[derive(Debug, thiserror::Error)]
pub enum KernelFailure {
    #[error("connection file {path}: {reason}")]
    ConnectionFile { path: PathBuf, reason: String },
    #[error(
        "cannot bind the {channel} channel to {endpoint}: {reason} (is another kernel using this \
         connection file's ports?)"
    )]
    Bind {
        channel: &'static str,
        endpoint: String,
        reason: String,
    },
    #[error("cannot start the kernel's runtime: {0}")]
    Runtime(String),
}

/// One line on standard error, where Jupyter managers collect kernel logs.
pub(crate) fn log(message: impl std::fmt::Display) {
    eprintln!("[baroc kernel] {message}");
}

/// A MIME bundle as the `data` object of display_data and execute_result:
/// text entries as strings, binary entries base64-encoded (RFC 4648, with
/// padding), and JSON types (`application/json`, `*+json`) as JSON values,
/// since front ends expect an object there rather than a string.
pub fn mime_bundle_to_json(bundle: &MimeBundle) -> Value {
    let mut data = Map::new();
    for (mime, entry) in &bundle.entries {
        let value = match entry {
            MimeData::Text(text) if is_json_type(mime) => {
                serde_json::from_str(text).unwrap_or_else(|_| Value::String(text.clone()))
            }
            MimeData::Text(text) => Value::String(text.clone()),
            MimeData::Binary(bytes) => {
                Value::String(base64::engine::general_purpose::STANDARD.encode(bytes))
            }
        };
        data.insert(mime.clone(), value);
    }
    Value::Object(data)
}

/// The `metadata` of a display_data or execute_result: a picture's size
/// for each image entry, so front ends lay it out before it loads and show a
/// high-dpi PNG at its intended size (messaging protocol, display_data:
/// "metadata ... width and height").
pub fn display_metadata(bundle: &MimeBundle) -> Value {
    let mut metadata = Map::new();
    if let Some((width, height)) = bundle.image_size() {
        for mime in bundle.entries.keys().filter(|mime| mime.starts_with("image/")) {
            metadata.insert(mime.clone(), serde_json::json!({"width": width, "height": height}));
        }
    }
    Value::Object(metadata)
}

fn is_json_type(mime: &str) -> bool {
    mime == "application/json" || mime.ends_with("+json")
}
