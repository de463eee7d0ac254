//! HTML escaping shared by tables and reports.

/// Escape text for HTML element content and double-quoted attribute values.
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + 8);
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    #[test]
    fn markup_characters_are_escaped() {
        // The five characters HTML gives meaning to (HTML Living Standard, 13.1).
        assert_eq!(
            super::escape(r#"<b a="1">Tom & 'Jerry'</b>"#),
            "&lt;b a=&quot;1&quot;&gt;Tom &amp; &#39;Jerry&#39;&lt;/b&gt;"
        );
    }
}
