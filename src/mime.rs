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

    /// The size at which a front end should show the bundle's picture, in
    /// CSS pixels: the SVG's own `width` and `height` (a PNG drawn at a higher
    /// dpi has more device pixels than that), else the PNG's (from its IHDR
    /// chunk: PNG specification, ISO/IEC 15948, section 11.2.2). `None` when
    /// the bundle holds no picture or its size cannot be read.
    pub fn image_size(&self) -> Option<(u32, u32)> {
        if let Some(svg) = self.text("image/svg+xml") {
            let start = svg.find("<svg")?;
            let tag = &svg[start..start + svg[start..].find('>')?];
            let attribute = |name: &str| -> Option<u32> {
                let at = tag.find(&format!(" {name}=\""))? + name.len() + 3;
                let value = &tag[at..at + tag[at..].find('"')?];
                value.trim_end_matches("px").parse::<f64>().ok().filter(|v| v.is_finite() && *v > 0.0).map(|v| v.round() as u32)
            };
            if let (Some(w), Some(h)) = (attribute("width"), attribute("height")) {
                return Some((w, h));
            }
        }
        let png = self.binary("image/png")?;
        if png.len() < 24 || &png[..8] != b"\x89PNG\r\n\x1a\n" || &png[12..16] != b"IHDR" {
            return None;
        }
        let w = u32::from_be_bytes(png[16..20].try_into().ok()?);
        let h = u32::from_be_bytes(png[20..24].try_into().ok()?);
        Some((w, h))
    }

    /// The plain-text form; every bundle has one.
    pub fn plain_text(&self) -> &str {
        self.text("text/plain").unwrap_or("")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn image_size_prefers_the_svg_size_over_png_pixels() {
        let mut bundle = MimeBundle::plain("a map");
        bundle.insert_text("image/svg+xml", "<?xml version=\"1.0\"?>\n<svg width=\"800\" height=\"600\" viewBox=\"0 0 800 600\"></svg>");
        // A PNG signature and IHDR of 1600 x 1200 (PNG specification, 11.2.2).
        let mut png = b"\x89PNG\r\n\x1a\n\0\0\0\x0dIHDR".to_vec();
        png.extend_from_slice(&1600u32.to_be_bytes());
        png.extend_from_slice(&1200u32.to_be_bytes());
        bundle.insert_binary("image/png", png.clone());
        assert_eq!(bundle.image_size(), Some((800, 600)));
        let mut only_png = MimeBundle::plain("a map");
        only_png.insert_binary("image/png", png);
        assert_eq!(only_png.image_size(), Some((1600, 1200)));
        assert_eq!(MimeBundle::plain("text").image_size(), None);
        let mut broken = MimeBundle::plain("x");
        broken.insert_binary("image/png", b"\x89PNG".to_vec());
        assert_eq!(broken.image_size(), None);
    }
}
