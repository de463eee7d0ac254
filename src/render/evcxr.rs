//! The display protocol of the evcxr Rust notebook kernel: a value shows
//! itself by printing, for each representation, a line
//! `EVCXR_BEGIN_CONTENT <mime type>`, the content (binary content such as
//! PNG in base64), and a line `EVCXR_END_CONTENT`.

use base64::Engine;

use crate::mime::{MimeBundle, MimeData};

/// The text evcxr reads from standard output for this bundle. Richer
/// representations come first; `text/plain` last.
pub fn evcxr_display_string(bundle: &MimeBundle) -> String {
    let mut entries: Vec<(&String, &MimeData)> = bundle.entries.iter().collect();
    entries.sort_by_key(|(mime, _)| (mime.as_str() == "text/plain", mime.to_string()));
    let mut out = String::new();
    for (mime, data) in entries {
        out.push_str("EVCXR_BEGIN_CONTENT ");
        out.push_str(mime);
        out.push('\n');
        match data {
            MimeData::Text(text) => {
                out.push_str(text);
                if !text.ends_with('\n') {
                    out.push('\n');
                }
            }
            MimeData::Binary(bytes) => {
                out.push_str(&base64::engine::general_purpose::STANDARD.encode(bytes));
                out.push('\n');
            }
        }
        out.push_str("EVCXR_END_CONTENT\n");
    }
    out
}

/// Print the bundle for evcxr.
pub fn evcxr_display(bundle: &MimeBundle) {
    use std::io::Write;
    let text = evcxr_display_string(bundle);
    let mut stdout = std::io::stdout().lock();
    // A closed standard output is not worth a panic in a notebook cell.
    let _ = stdout.write_all(text.as_bytes());
    let _ = stdout.flush();
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_entry_is_framed_and_binary_is_base64() {
        let mut bundle = MimeBundle::plain("a map");
        bundle.insert_binary("image/png", vec![0x89, b'P', b'N', b'G']);
        bundle.insert_text("image/svg+xml", "<svg/>");
        let text = evcxr_display_string(&bundle);
        // base64 of 89 50 4E 47 is "iVBORw==" (RFC 4648 alphabet).
        assert_eq!(
            text,
            "EVCXR_BEGIN_CONTENT image/png\niVBORw==\nEVCXR_END_CONTENT\n\
             EVCXR_BEGIN_CONTENT image/svg+xml\n<svg/>\nEVCXR_END_CONTENT\n\
             EVCXR_BEGIN_CONTENT text/plain\na map\nEVCXR_END_CONTENT\n"
        );
    }
}
