//! HTML: the visible text only. Scripts, styles, templates, the head and
//! elements marked `hidden` are skipped; block elements become line breaks.

use super::{ExtractError, Extracted, decode_text};
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

/// Deepest tag nesting read. Real pages nest a few dozen deep; the parser's
/// work grows with the square of the depth, so a page nested a million deep
/// (a hostile file) would hold an ingest for hours.
pub const MAX_DEPTH: usize = 5_000;

/// Elements that never hold others, or that the parser closes by itself
/// when the next one opens: they do not deepen the nesting.
const FLAT: &[&str] = &[
    "area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track",
    "wbr", "p", "li", "td", "th", "tr", "dt", "dd", "option", "optgroup", "rb", "rt", "rp",
    "colgroup", "thead", "tbody", "tfoot", "!doctype",
];

/// The deepest nesting of start tags over end tags in `src`, counted on the
/// raw text before parsing (comments and processing instructions skipped).
pub fn nesting_depth(src: &str) -> usize {
    let b = src.as_bytes();
    let (mut depth, mut max, mut i) = (0usize, 0usize, 0usize);
    while let Some(off) = b[i..].iter().position(|&c| c == b'<') {
        i += off + 1;
        if b[i..].starts_with(b"!--") {
            match src[i..].find("-->") {
                Some(n) => i += n + 3,
                None => break,
            }
            continue;
        }
        match b.get(i) {
            Some(b'/') => depth = depth.saturating_sub(1),
            Some(c) if c.is_ascii_alphabetic() => {
                let end = b[i..]
                    .iter()
                    .position(|c| !c.is_ascii_alphanumeric())
                    .map_or(b.len(), |n| i + n);
                let name = src[i..end].to_ascii_lowercase();
                let close = b[end..].iter().position(|&c| c == b'>').map(|n| end + n);
                let self_closing = close.is_some_and(|c| c > 0 && b[c - 1] == b'/');
                if !self_closing && !FLAT.contains(&name.as_str()) {
                    depth += 1;
                    max = max.max(depth);
                }
            }
            _ => {}
        }
    }
    max
}

pub(super) fn extract(bytes: &[u8]) -> Result<Extracted, ExtractError> {
    let (src, _) = decode_text(bytes);
    let depth = nesting_depth(&src);
    if depth > MAX_DEPTH {
        return Err(ExtractError::TooDeep {
            depth,
            max: MAX_DEPTH,
        });
    }
    let doc = Html::parse_document(&src);
    let title = doc
        .select(&scraper::Selector::parse("title").expect("static selector"))
        .next()
        .map(|t| crate::text::fold_ws(&t.text().collect::<String>()))
        .filter(|t| !t.is_empty());
    let mut out = String::new();
    walk(doc.root_element(), &mut out);
    let text = tidy(&out);
    Ok(Extracted {
        pages: vec![text],
        meta: DocMeta {
            title,
            ..Default::default()
        },
        headers: None,
        notes: Vec::new(),
        drawings: Vec::new(),
    })
}

/// One step of the walk over the tree: an element to open (a table cell
/// first gets a tab), a text node, or the end of an element.
enum Step<'a> {
    Open(ElementRef<'a>, bool),
    Text(&'a str, bool),
    Close(bool),
}

/// The visible text under `root`, in document order. The walk keeps its own
/// stack, so tags nested a million deep cannot overflow the thread's.
fn walk(root: ElementRef<'_>, out: &mut String) {
    let mut stack = vec![Step::Open(root, false)];
    while let Some(step) = stack.pop() {
        match step {
            Step::Open(el, pre) => {
                let name = el.value().name();
                if matches!(name, "td" | "th")
                    && !out.ends_with(['\n', ' ', '\t'])
                    && !out.is_empty()
                {
                    out.push('\t');
                }
                if SKIP.contains(&name) || el.value().attr("hidden").is_some() {
                    continue;
                }
                let pre = pre || name == "pre";
                let block = BLOCK.contains(&name);
                if block {
                    out.push_str("\n\n");
                }
                if name == "br" {
                    out.push('\n');
                }
                stack.push(Step::Close(block));
                for child in el.children().rev() {
                    match child.value() {
                        Node::Text(t) => stack.push(Step::Text(t, pre)),
                        Node::Element(_) => {
                            if let Some(e) = ElementRef::wrap(child) {
                                stack.push(Step::Open(e, pre));
                            }
                        }
                        _ => {}
                    }
                }
            }
            Step::Text(t, true) => out.push_str(t),
            Step::Text(t, false) => {
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
            Step::Close(block) => {
                if block {
                    out.push_str("\n\n");
                }
            }
        }
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
        let e = extract(html).unwrap();
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

    /// Tags nested deeper than the walk could once recurse: read without
    /// overflowing a small stack (the walk recursed once per level and
    /// crashed the whole process).
    #[test]
    fn deeply_nested_tags_are_read_without_overflow() {
        let depth = MAX_DEPTH / 2 - 2; // two tags a level, inside html and body
        let mut html = String::from("<html><body>");
        for _ in 0..depth {
            html.push_str("<div><span>");
        }
        html.push_str("The ramp closes at noon.");
        html.push_str("</body></html>");
        let e = std::thread::Builder::new()
            .stack_size(128 * 1024)
            .spawn(move || extract(html.as_bytes()))
            .unwrap()
            .join()
            .expect("no stack overflow")
            .unwrap();
        assert!(e.pages[0].contains("The ramp closes at noon."));
    }

    /// Nesting is counted on the raw text: end tags, empty and self-closing
    /// elements and those the parser closes by itself do not deepen it.
    #[test]
    fn nesting_depth_table() {
        let cases = [
            ("plain text", 0),
            ("<p>a<p>b<p>c", 0),
            ("<div><div></div><div><b>x</b></div></div>", 3),
            ("<ul><li>a<li>b</ul><br><img src=x><hr/>", 1),
            ("<!-- <div> --><div/>", 0),
            ("a < b and c<d", 1),
        ];
        for (src, want) in cases {
            assert_eq!(nesting_depth(src), want, "{src}");
        }
        let bomb = "<div>".repeat(MAX_DEPTH + 1);
        let e = extract(bomb.as_bytes()).unwrap_err().to_string();
        assert!(e.contains(&format!("{}", MAX_DEPTH + 1)), "{e}");
    }
}
