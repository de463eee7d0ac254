//! MIME bundles: the one currency between renderers and front ends.
//!
//! Every renderable value becomes a bundle keyed by MIME type. The notebook
//! kernel sends it as `data` of display_data / execute_result, the evcxr hook
//! prints it between its content markers, the CLI and reports pick the entry
//! they can use. Invariant: `text/plain` is always present.

use std::collections::BTreeMap;

/// One entry's payload: text (SVG, HTML, plain, JSON) or binary (PNG).
#[derive(Debug, Clone, PartialEq)]
pub enum MimeData {
    Text(String),
    Binary(Vec<u8>),
}

/// A set of alternative representations of one value.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MimeBundle {
    pub entries: BTreeMap<String, MimeData>,
}

impl MimeBundle {
    /// A bundle holding only plain text.
    pub fn plain(text: impl Into<String>) -> Self {
        let mut bundle = Self::default();
        bundle.insert_text("text/plain", text);
        bundle
    }

    pub fn insert_text(&mut self, mime: &str, text: impl Into<String>) {
        self.entries.insert(mime.to_string(), MimeData::Text(text.into()));
    }

    pub fn insert_binary(&mut self, mime: &str, bytes: Vec<u8>) {
        self.entries.insert(mime.to_string(), MimeData::Binary(bytes));
    }

    pub fn text(&self, mime: &str) -> Option<&str> {
        match self.entries.get(mime) {
            Some(MimeData::Text(text)) => Some(text),
            _ => None,
        }
    }

    pub fn binary(&self, mime: &str) -> Option<&[u8]> {
        match self.entries.get(mime) {
            Some(MimeData::Binary(bytes)) => Some(bytes),
            _ => None,
        }
    }

    /// The plain-text form; every bundle has one.
    pub fn plain_text(&self) -> &str {
        self.text("text/plain").unwrap_or("")
    }
}
