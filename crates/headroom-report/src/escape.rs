//! Escaping of text placed in HTML and SVG, in element content and in quoted attributes.

/// Replaces `&`, `<`, `>`, `"` and `'` with character references.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::escape;

    #[test]
    fn markup_characters_become_references() {
        assert_eq!(
            escape(r#"<b class="x">Tom's & Jerry's</b>"#),
            "&lt;b class=&quot;x&quot;&gt;Tom&#39;s &amp; Jerry&#39;s&lt;/b&gt;"
        );
        assert_eq!(escape("plain – ü"), "plain – ü");
    }
}
