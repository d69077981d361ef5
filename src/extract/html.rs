//! HTML: the visible text only. Scripts, styles, templates, the head and
//! elements a browser would not show are skipped: marked `hidden`, or
//! styled (inline, or by a class rule in the page's own style sheet) with
//! `display: none`, `visibility: hidden`, a zero font size, zero opacity,
//! or text in the colour of its own background (white on the default white
//! page, say). Block elements become line breaks.

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
    let style_sheet: String = doc
        .select(&scraper::Selector::parse("style").expect("static selector"))
        .map(|s| s.text().collect::<String>())
        .collect::<Vec<_>>()
        .join("\n");
    let hidden_classes = hidden_classes(&style_sheet);
    let mut out = String::new();
    walk(doc.root_element(), &hidden_classes, &mut out);
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
fn walk(root: ElementRef<'_>, hidden_classes: &[String], out: &mut String) {
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
                if SKIP.contains(&name)
                    || el.value().attr("hidden").is_some()
                    || el.value().attr("style").is_some_and(hides)
                    || el
                        .value()
                        .classes()
                        .any(|c| hidden_classes.iter().any(|h| h == c))
                {
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

/// Whether CSS declarations (`prop: value; ...`) hide an element's text.
fn hides(declarations: &str) -> bool {
    let mut colour = None;
    let mut background = None;
    for d in declarations.split(';') {
        let Some((prop, value)) = d.split_once(':') else {
            continue;
        };
        let prop = prop.trim().to_ascii_lowercase();
        let value: String = value
            .to_ascii_lowercase()
            .replace("!important", "")
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ");
        let zero = |v: &str| {
            v.trim_end_matches(|c: char| c.is_ascii_alphabetic() || c == '%')
                .parse::<f64>()
                .is_ok_and(|n| n == 0.0)
        };
        match prop.as_str() {
            "display" if value == "none" => return true,
            "visibility" if value == "hidden" || value == "collapse" => return true,
            "font-size" | "opacity" if zero(&value) => return true,
            "color" => colour = Some(canonical_colour(&value)),
            "background" | "background-color" => background = Some(canonical_colour(&value)),
            _ => {}
        }
    }
    match (colour, background) {
        (Some(c), Some(b)) => c == b,
        // No background of its own: on the default white page.
        (Some(c), None) => c == "#ffffff",
        _ => false,
    }
}

/// A colour in one spelling, for comparing: white, #fff, #ffffff and
/// rgb(255, 255, 255) are all `#ffffff`; anything else as written.
fn canonical_colour(v: &str) -> String {
    let v = v.trim();
    match v {
        "white" => return "#ffffff".into(),
        "black" => return "#000000".into(),
        _ => {}
    }
    if let Some(hex) = v.strip_prefix('#') {
        if hex.len() == 3 && hex.chars().all(|c| c.is_ascii_hexdigit()) {
            return hex
                .chars()
                .flat_map(|c| [c, c])
                .fold(String::from("#"), |mut s, c| {
                    s.push(c);
                    s
                });
        }
        return format!("#{hex}");
    }
    if let Some(inner) = v.strip_prefix("rgb(").and_then(|r| r.strip_suffix(')')) {
        let parts: Vec<u8> = inner
            .split(',')
            .filter_map(|p| p.trim().parse().ok())
            .collect();
        if parts.len() == 3 {
            return format!("#{:02x}{:02x}{:02x}", parts[0], parts[1], parts[2]);
        }
    }
    v.to_string()
}

/// Class names that the page's own style sheet hides with a rule whose
/// selector is that one class (`.note-ai { display: none }`).
fn hidden_classes(css: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut rest = css;
    while let Some(open) = rest.find('{') {
        let Some(close) = rest[open..].find('}') else {
            break;
        };
        let selectors = &rest[..open];
        let body = &rest[open + 1..open + close];
        if hides(body) {
            for sel in selectors.split(',') {
                let sel = sel.trim();
                if let Some(class) = sel.strip_prefix('.')
                    && !class.is_empty()
                    && class
                        .chars()
                        .all(|c| c.is_alphanumeric() || c == '-' || c == '_')
                {
                    out.push(class.to_string());
                }
            }
        }
        rest = &rest[open + close + 1..];
    }
    out
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

    /// Issue 26, item 3: text a browser does not show is not indexed, so
    /// it can never be quoted. CSS 2.1 (display, visibility) and CSS Color
    /// Level 3 (white, #fff, rgb(255, 255, 255) are the same colour).
    #[test]
    fn text_a_browser_hides_is_not_read() {
        let html = br#"<html><head><style>
            .ai-note, .other { display : none }
            p.keep { color: red }
            </style></head><body>
            <p>Visible: the ramp closed on 14 March 2022.</p>
            <p style="display:none">Hidden one: the minister resigned.</p>
            <p style="visibility: hidden">Hidden two: the minister resigned.</p>
            <p style="font-size:0px">Hidden three: the minister resigned.</p>
            <p style="opacity: 0">Hidden four: the minister resigned.</p>
            <p style="color:#fff">Hidden five: the minister resigned.</p>
            <p style="color: rgb(255, 255, 255); background-color: white">Hidden six.</p>
            <span style="color:#123456;background:#123456">Hidden seven.</span>
            <div class="ai-note">Hidden eight: the minister resigned.</div>
            <p class="keep" style="color: #333; background: #fff">Shown: dark on white.</p>
            <p style="font-size: 0.9em">Shown: small print.</p>
            </body></html>"#;
        let t = extract(html).unwrap().pages.remove(0);
        assert!(t.contains("Visible: the ramp closed"), "{t}");
        assert!(
            t.contains("Shown: dark on white.") && t.contains("Shown: small print."),
            "{t}"
        );
        assert!(!t.contains("Hidden"), "hidden text read: {t}");
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
