//! Plain text and Markdown: a form feed marks a page break.

use super::{Extracted, decode_text};
use crate::types::DocMeta;

pub(super) fn extract(bytes: &[u8], markdown: bool) -> Extracted {
    let (text, fell_back) = decode_text(bytes);
    let text = text.replace("\r\n", "\n");
    let mut pages: Vec<String> = text.split('\u{c}').map(|p| p.to_string()).collect();
    // A trailing form feed ends the last page; it does not open a new one.
    if pages.len() > 1 && pages.last().is_some_and(|p| p.trim().is_empty()) {
        pages.pop();
    }
    let title = if markdown {
        text.lines()
            .find_map(|l| l.strip_prefix("# ").map(|t| t.trim().to_string()))
    } else {
        None
    };
    let mut notes = Vec::new();
    if fell_back {
        notes.push("not valid UTF-8; read as Windows-1252".to_string());
    }
    Extracted {
        pages,
        meta: DocMeta {
            title,
            ..Default::default()
        },
        headers: None,
        notes,
        drawings: Vec::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn form_feeds_split_pages() {
        let cases: [(&[u8], Vec<&str>); 4] = [
            (b"one", vec!["one"]),
            (b"one\x0ctwo", vec!["one", "two"]),
            (b"one\x0ctwo\x0c", vec!["one", "two"]),
            (b"one\x0c\x0cthree", vec!["one", "", "three"]),
        ];
        for (input, want) in cases {
            assert_eq!(extract(input, false).pages, want);
        }
    }

    #[test]
    fn markdown_title_from_first_heading() {
        let e = extract(b"intro\n# Pier 3 budget\n\ntext", true);
        assert_eq!(e.meta.title.as_deref(), Some("Pier 3 budget"));
    }
}
