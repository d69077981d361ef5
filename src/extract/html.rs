//! HTML: the visible text only. Scripts, styles, templates, the head and
//! elements marked `hidden` are skipped; block elements become line breaks.

use super::{Extracted, decode_text};
use crate::types::DocMeta;
use scraper::{ElementRef, Html, Node};

const SKIP: &[&str] = &[
    "script", "style", "noscript", "template", "head", "svg", "iframe", "object",
];
const BLOCK: &[&str] = &[
    "p",
    "div",
    "section",
    "article",
    "header",
    "footer",
    "nav",
    "aside",
    "main",
    "h1",
    "h2",
    "h3",
    "h4",
    "h5",
    "h6",
    "ul",
    "ol",
    "li",
    "table",
    "tr",
    "blockquote",
    "pre",
    "hr",
    "dl",
    "dt",
    "dd",
    "figure",
    "figcaption",
    "address",
    "form",
    "fieldset",
    "caption",
    "thead",
    "tbody",
    "tfoot",
];

pub(super) fn extract(bytes: &[u8]) -> Extracted {
    let (src, _) = decode_text(bytes);
    let doc = Html::parse_document(&src);
    let title = doc
        .select(&scraper::Selector::parse("title").expect("static selector"))
        .next()
        .map(|t| crate::text::fold_ws(&t.text().collect::<String>()))
        .filter(|t| !t.is_empty());
    let mut out = String::new();
    walk(doc.root_element(), &mut out, false);
    let text = tidy(&out);
    Extracted {
        pages: vec![text],
        meta: DocMeta {
            title,
            ..Default::default()
        },
        headers: None,
        notes: Vec::new(),
        drawings: Vec::new(),
    }
}

fn walk(el: ElementRef<'_>, out: &mut String, pre: bool) {
    let name = el.value().name();
    if SKIP.contains(&name) || el.value().attr("hidden").is_some() {
        return;
    }
    let pre = pre || name == "pre";
    let block = BLOCK.contains(&name);
    if block {
        out.push_str("\n\n");
    }
    if name == "br" {
        out.push('\n');
    }
    for child in el.children() {
        match child.value() {
            Node::Text(t) => {
                if pre {
                    out.push_str(t);
                } else {
                    // Collapse source formatting white space, keep one space.
                    let folded = crate::text::fold_ws(t);
                    if t.starts_with(char::is_whitespace) && !out.ends_with(char::is_whitespace) {
                        out.push(' ');
                    }
                    out.push_str(&folded);
                    if t.ends_with(char::is_whitespace) && !folded.is_empty() {
                        out.push(' ');
                    }
                }
            }
            Node::Element(_) => {
                if let Some(e) = ElementRef::wrap(child) {
                    let cell = matches!(e.value().name(), "td" | "th");
                    if cell && !out.ends_with(['\n', ' ', '\t']) && !out.is_empty() {
                        out.push('\t');
                    }
                    walk(e, out, pre);
                }
            }
            _ => {}
        }
    }
    if block {
        out.push_str("\n\n");
    }
}

/// Trim every line and keep at most one blank line between blocks.
fn tidy(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    let mut blank = 0;
    for line in s.lines() {
        let l = line.trim();
        if l.is_empty() {
            blank += 1;
            continue;
        }
        if !out.is_empty() {
            out.push_str(if blank > 0 { "\n\n" } else { "\n" });
        }
        blank = 0;
        out.push_str(l);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn visible_text_only() {
        let html = br#"<html><head><title>Notice &amp; Update</title><style>p{color:red}</style>
            <script>var secret = "do not index";</script></head>
            <body><nav><a href="/">Home</a></nav>
            <h1>Terminal closure</h1><p>The Pier 3 terminal will close on
            <b>4 March 2023</b>.</p><p hidden>hidden text</p>
            <table><tr><td>Phase 1</td><td>2023-03-04</td></tr></table>
            <p>Fermeture du terminal &eacute;t&eacute;</p></body></html>"#;
        let e = extract(html);
        let t = &e.pages[0];
        assert_eq!(e.meta.title.as_deref(), Some("Notice & Update"));
        assert!(
            t.contains("The Pier 3 terminal will close on 4 March 2023."),
            "{t}"
        );
        assert!(t.contains("Phase 1\t2023-03-04"), "{t}");
        assert!(t.contains("Fermeture du terminal été"));
        for absent in ["do not index", "color:red", "hidden text"] {
            assert!(!t.contains(absent), "{absent} leaked into {t}");
        }
    }
}
