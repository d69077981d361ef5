//! Markdown answers with footnotes: written by `answer --markdown` and read
//! back by `replay`, so that a reporter's own draft written the same way
//! can be checked with one command.
//!
//! The convention (README, "Markdown answers"): each checked sentence ends
//! with one or more footnote markers `[^N]`; each footnote's first line ends
//! with where the quote is — `doc `ID`, page N` (or `pages N-M`) and,
//! optionally, `fingerprint HEX` (the first hex digits of the page's content
//! hash) — and the quote follows on its own indented `>` line(s):
//!
//! ```text
//! The contract price was $31.7 million.[^1]
//!
//! [^1]: *Pier 3 construction contract*, Ministry of Public Works, 2019-03-14 — doc `brindlemoor-contract`, page 2, fingerprint 3fa9c2d41b07
//!     > The contract price is $31.7 million.
//! ```
//!
//! Prose paragraphs and list items are checked; headings, block quotes,
//! code, tables, HTML comments and footnote text are not.

use super::{CitedQuote, Claim, Claims, FINGERPRINT_LEN, ReplayReport};
use crate::answer::{AnswerRecord, CAUTION};
use crate::types::DocId;
use crate::verify::Verdict;
use regex::Regex;
use std::collections::HashMap;
use std::fmt::Write;
use std::sync::LazyLock;

static MARKER: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"\[\^([^\]\s\\]+)\]").unwrap());
static DEFINITION: LazyLock<Regex> =
    LazyLock::new(|| Regex::new(r"^\[\^([^\]\s]+)\]:\s?(.*)$").unwrap());
static DOC: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"\bdoc\s+`([^`]+)`").unwrap());
static PAGE: LazyLock<Regex> =
    LazyLock::new(|| Regex::new(r"\bpages?\s+(\d+)(?:\s*[-–]\s*(\d+))?").unwrap());
static FINGERPRINT: LazyLock<Regex> =
    LazyLock::new(|| Regex::new(r"\bfingerprint\s+([0-9a-fA-F]+)\b").unwrap());
static TITLE: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"^\*(.+?)\*").unwrap());
static LIST_ITEM: LazyLock<Regex> =
    LazyLock::new(|| Regex::new(r"^\s{0,3}(?:[-*+]|\d{1,9}[.)])\s+").unwrap());

/// Record text made inert in Markdown: characters that would start a
/// link, an image, raw HTML (so a `<script>` or a `javascript:` link in a
/// record stays text), emphasis, code or a table are escaped with a
/// backslash (CommonMark 0.31, "Backslash escapes"), and so is a first
/// character that would start a heading, block quote or list. [`parse`]
/// removes the escapes, so a quote reads back as the page has it.
pub fn inert(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 8);
    let lead_digits = s.chars().take_while(char::is_ascii_digit).count();
    for (i, c) in s.chars().enumerate() {
        let lead = (i == 0 && matches!(c, '#' | '>' | '-' | '+' | '='))
            || (i == lead_digits && lead_digits > 0 && matches!(c, '.' | ')'));
        if lead
            || matches!(
                c,
                '\\' | '`' | '*' | '_' | '[' | ']' | '<' | '&' | '~' | '|'
            )
        {
            out.push('\\');
        }
        out.push(c);
    }
    out
}

/// Undo [`inert`] (any backslash before ASCII punctuation, as CommonMark
/// reads it).
pub fn unescape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    let mut chars = s.chars().peekable();
    while let Some(c) = chars.next() {
        if c == '\\'
            && let Some(&n) = chars.peek()
            && n.is_ascii_punctuation()
        {
            out.push(n);
            chars.next();
            continue;
        }
        out.push(c);
    }
    out
}

/// Write sentences and their citations as Markdown with footnotes. Each
/// distinct (document, page, quote) gets one footnote.
pub fn render_claims(out: &mut String, sentences: &[(&str, &[CitedQuote])]) {
    let mut notes: Vec<&CitedQuote> = Vec::new();
    let mut body = Vec::new();
    for (text, cites) in sentences {
        let mut s = inert(&crate::text::fold_ws(text));
        for c in cites.iter() {
            let n = match notes
                .iter()
                .position(|x| x.doc_id == c.doc_id && x.page == c.page && x.quote == c.quote)
            {
                Some(i) => i + 1,
                None => {
                    notes.push(c);
                    notes.len()
                }
            };
            let _ = write!(s, "[^{n}]");
        }
        body.push(s);
    }
    let _ = writeln!(out, "{}\n", body.join(" "));
    for (i, c) in notes.iter().enumerate() {
        let _ = writeln!(out, "[^{}]: {}", i + 1, footnote_head(c));
        let _ = writeln!(out, "    > {}", inert(&crate::text::fold_ws(&c.quote)));
        // An indented line that is not a quote: read past on replay.
        if let Some(w) = &c.ocr_warning {
            let _ = writeln!(out, "    {w}");
        }
    }
    if !notes.is_empty() {
        out.push('\n');
    }
}

fn footnote_head(c: &CitedQuote) -> String {
    let mut head = String::new();
    if let Some(t) = c.title.as_deref().filter(|t| !t.is_empty()) {
        // Asterisks inside a title would end the emphasis early.
        let _ = write!(head, "*{}*", inert(&t.replace('*', "\u{2217}")));
    }
    for part in [&c.organisation, &c.date].into_iter().flatten() {
        let _ = write!(head, ", {}", inert(part));
    }
    if !head.is_empty() {
        head.push_str(" \u{2014} ");
    }
    let _ = write!(head, "doc `{}`, ", c.doc_id);
    match c.end_page {
        Some(e) if e != c.page => {
            let _ = write!(head, "pages {}-{e}", c.page);
        }
        _ => {
            let _ = write!(head, "page {}", c.page);
        }
    }
    if let Some(f) = &c.fingerprint {
        let _ = write!(head, ", fingerprint {}", &f[..f.len().min(FINGERPRINT_LEN)]);
    }
    head
}

fn blockquote(out: &mut String, text: &str) {
    for line in text.lines() {
        if line.is_empty() {
            out.push_str(">\n");
        } else {
            let _ = writeln!(out, "> {line}");
        }
    }
    out.push('\n');
}

/// An answer record as Markdown: the question as a heading, the verified
/// sentences with footnotes, the struck sentences and the caution as block
/// quotes (which replay does not check), and how the answer was made in an
/// HTML comment.
pub fn render_answer(a: &AnswerRecord) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "# {}\n", inert(&one_line(&a.question)));
    if a.abstained {
        blockquote(
            &mut out,
            &format!(
                "**No answer:** {}.",
                inert(
                    a.abstain_reason
                        .as_deref()
                        .unwrap_or("the retrieved records do not answer this question")
                )
            ),
        );
    } else {
        let claims = super::claims_from_record(a);
        let pairs: Vec<(&str, &[CitedQuote])> = claims
            .claims
            .iter()
            .map(|c| (c.text.as_str(), c.citations.as_slice()))
            .collect();
        render_claims(&mut out, &pairs);
    }
    // Block quotes with page references in words, not footnotes: these
    // are not answers, and replay does not check them.
    let place = |c: &crate::types::Citation| match c.end_page {
        Some(e) if e != c.page => format!("doc `{}`, pages {}-{e}", c.doc_id, c.page),
        _ => format!("doc `{}`, page {}", c.doc_id, c.page),
    };
    if !a.closest.is_empty() {
        let mut q = String::from(
            "**Closest sentences in the records** (not answers; check them yourself):\n\n",
        );
        for c in &a.closest {
            let at = c.citations.first().map(place).unwrap_or_default();
            let _ = writeln!(
                q,
                "- \u{201C}{}\u{201D} ({at}) \u{2014} {}",
                inert(&one_line(&c.text)),
                inert(&c.why_not)
            );
        }
        blockquote(&mut out, &q);
    }
    if !a.off_question.is_empty() {
        let mut q =
            String::from("**Supported by the records, but not an answer to this question:**\n\n");
        for s in &a.off_question {
            let at = s.citations.first().map(place).unwrap_or_default();
            let _ = writeln!(
                q,
                "- \u{201C}{}\u{201D} ({at}) \u{2014} {}",
                inert(&one_line(&s.text)),
                inert(s.reason.as_deref().unwrap_or("not about what was asked"))
            );
        }
        blockquote(&mut out, &q);
    }
    let mut struck: Vec<_> = a.struck().collect();
    if let Some(d) = &a.draft {
        struck.extend(d.verdicts.iter().filter(|s| s.verdict == Verdict::Struck));
    }
    if !struck.is_empty() {
        let mut q = String::from("**Struck by the verifier** (not part of the answer):\n\n");
        for s in struck {
            let _ = writeln!(
                q,
                "- \u{201C}{}\u{201D} \u{2014} {}",
                inert(&one_line(&s.text)),
                inert(s.reason.as_deref().unwrap_or("not supported"))
            );
        }
        blockquote(&mut out, &q);
    }
    blockquote(&mut out, &format!("**Caution:** {CAUTION}"));
    let _ = writeln!(
        out,
        "<!-- onrecord {} answer, record schema {}, made {}; retriever {}, k {}, drafter {}, judge {}. \
         Check it again with: onrecord replay THIS-FILE -->",
        a.onrecord_version,
        a.schema_version,
        a.created_at,
        a.config.retriever,
        a.config.k,
        a.config.drafter.replace("--", "-"),
        a.config.judge
    );
    out
}

/// A replay report as Markdown: the sentences with their footnotes as
/// given, then each sentence's verdict in a block quote, so the output can
/// itself be replayed.
pub fn render_replay(r: &ReplayReport) -> String {
    let mut out = String::new();
    if let Some(q) = &r.question {
        let _ = writeln!(out, "# {}\n", one_line(q));
    }
    let cited: Vec<Vec<CitedQuote>> = r
        .sentences
        .iter()
        .map(|s| s.citations.iter().map(|c| c.cited.clone()).collect())
        .collect();
    let pairs: Vec<(&str, &[CitedQuote])> = r
        .sentences
        .iter()
        .zip(&cited)
        .map(|(s, c)| (s.text.as_str(), c.as_slice()))
        .collect();
    render_claims(&mut out, &pairs);
    let mut q = format!(
        "**Replayed** {} against {}: {} hold, {} fail, {} source changed, {} source missing.\n\n",
        r.replayed_at,
        r.against,
        r.counts.holds,
        r.counts.fails,
        r.counts.source_changed,
        r.counts.source_missing
    );
    for s in &r.sentences {
        let _ = write!(
            q,
            "- **{}**: \u{201C}{}\u{201D}",
            s.verdict.label(),
            one_line(&s.text)
        );
        if let Some(why) = &s.reason {
            let _ = write!(q, " \u{2014} {}", one_line(why));
        }
        q.push('\n');
        for c in &s.citations {
            if let Some(d) = &c.diff {
                let _ = writeln!(
                    q,
                    "  - was: \u{201C}{}\u{201D}; now: \u{201C}{}\u{201D}",
                    d.was, d.now
                );
            }
        }
    }
    blockquote(&mut out, &q);
    blockquote(&mut out, &format!("**Caution:** {}", r.caution));
    out
}

fn one_line(s: &str) -> String {
    crate::text::fold_ws(s)
}

/// A footnote as written.
#[derive(Debug, Clone, Default)]
struct Footnote {
    head: String,
    quote: Vec<String>,
}

/// Read a Markdown answer or draft. `Err` (with a reader-facing message)
/// when the text holds no footnoted sentence to check.
pub fn parse(text: &str) -> Result<Claims, String> {
    let mut question = None;
    let mut paragraphs: Vec<String> = Vec::new();
    let mut notes: HashMap<String, Footnote> = HashMap::new();
    let mut current: Vec<String> = Vec::new();
    let mut in_note: Option<String> = None;
    let mut note_blank = false;
    let mut fence: Option<&str> = None;
    let mut in_comment = false;
    let flush = |current: &mut Vec<String>, paragraphs: &mut Vec<String>| {
        if !current.is_empty() {
            paragraphs.push(current.join(" "));
            current.clear();
        }
    };
    for raw in text.lines() {
        let line = raw.trim_end();
        let t = line.trim_start();
        if let Some(f) = fence {
            if t.starts_with(f) {
                fence = None;
            }
            continue;
        }
        if in_comment {
            if t.contains("-->") {
                in_comment = false;
            }
            continue;
        }
        if t.starts_with("```") || t.starts_with("~~~") {
            flush(&mut current, &mut paragraphs);
            in_note = None;
            fence = Some(if t.starts_with("```") { "```" } else { "~~~" });
            continue;
        }
        if t.starts_with("<!--") {
            flush(&mut current, &mut paragraphs);
            in_comment = !t.contains("-->");
            continue;
        }
        if let Some(m) = DEFINITION.captures(line) {
            flush(&mut current, &mut paragraphs);
            let label = m[1].to_string();
            notes.insert(
                label.clone(),
                Footnote {
                    head: m[2].to_string(),
                    quote: vec![],
                },
            );
            in_note = Some(label);
            note_blank = false;
            continue;
        }
        if let Some(label) = &in_note {
            // Indented lines continue a footnote; an unindented `>` line
            // does only straight after it (no blank line between).
            let indented = line.starts_with([' ', '\t']);
            if indented || (t.starts_with('>') && !note_blank) {
                if let Some(q) = t.strip_prefix('>') {
                    let note = notes.get_mut(label).expect("inserted above");
                    note.quote.push(q.trim().to_string());
                }
                continue;
            }
            if t.is_empty() {
                note_blank = true;
                continue;
            }
            in_note = None;
        }
        if t.is_empty() {
            flush(&mut current, &mut paragraphs);
            continue;
        }
        if let Some(h) = t.strip_prefix('#') {
            flush(&mut current, &mut paragraphs);
            if question.is_none() && !h.starts_with('#') {
                question = Some(unescape(h.trim()));
            }
            continue;
        }
        if t.starts_with('>') || t.starts_with('|') || is_rule(t) {
            flush(&mut current, &mut paragraphs);
            continue;
        }
        if let Some(m) = LIST_ITEM.find(line) {
            flush(&mut current, &mut paragraphs);
            current.push(line[m.end()..].trim().to_string());
            continue;
        }
        current.push(t.to_string());
    }
    flush(&mut current, &mut paragraphs);

    let mut claims = Vec::new();
    let mut used = 0;
    for p in &paragraphs {
        for (text, labels) in sentences_with_markers(p) {
            let mut citations = Vec::new();
            let mut problem = None;
            for label in &labels {
                used += 1;
                match notes.get(label).map(|n| footnote(label, n)) {
                    Some(Ok(c)) => citations.push(c),
                    Some(Err(e)) => problem = problem.or(Some(e)),
                    None => {
                        problem = problem.or(Some(format!(
                            "footnote [^{label}] is not defined anywhere in the file"
                        )))
                    }
                }
            }
            claims.push(Claim {
                text,
                citations,
                problem,
            });
        }
    }
    if used == 0 {
        return Err(if notes.is_empty() {
            "no footnoted sentence found: end each sentence to check with a marker such as [^1] \
             and give the footnote as README \u{201C}Markdown answers\u{201D} describes"
                .into()
        } else {
            "footnotes are defined but no sentence carries a marker such as [^1]".into()
        });
    }
    Ok(Claims {
        question,
        created_at: None,
        judge: None,
        claims,
    })
}

fn is_rule(t: &str) -> bool {
    let c: String = t.chars().filter(|c| !c.is_whitespace()).collect();
    c.len() >= 3
        && (c.chars().all(|x| x == '-')
            || c.chars().all(|x| x == '*')
            || c.chars().all(|x| x == '_'))
}

/// Split a paragraph into sentences, each with the footnote labels that
/// follow it.
fn sentences_with_markers(p: &str) -> Vec<(String, Vec<String>)> {
    // Remove the markers, remembering where each stood in the clean text.
    let mut clean = String::with_capacity(p.len());
    let mut marks: Vec<(usize, String)> = Vec::new();
    let mut last = 0;
    for m in MARKER.captures_iter(p) {
        let whole = m.get(0).expect("match");
        // An escaped bracket is text, not a marker.
        let slashes = p[..whole.start()]
            .chars()
            .rev()
            .take_while(|&c| c == '\\')
            .count();
        if slashes % 2 == 1 {
            continue;
        }
        clean.push_str(&p[last..whole.start()]);
        marks.push((clean.len(), m[1].to_string()));
        last = whole.end();
    }
    clean.push_str(&p[last..]);
    // Sentences are found in the text as the record has it (escapes
    // removed), as they were when the answer was made; `at[i]` is where
    // byte i of the escaped text lands.
    let mut plain = String::with_capacity(clean.len());
    let mut at = vec![0; clean.len() + 1];
    let mut chars = clean.char_indices().peekable();
    while let Some((i, c)) = chars.next() {
        at[i] = plain.len();
        if c == '\\'
            && let Some(&(j, n)) = chars.peek()
            && n.is_ascii_punctuation()
        {
            at[j] = plain.len();
            plain.push(n);
            chars.next();
            continue;
        }
        plain.push(c);
    }
    at[clean.len()] = plain.len();
    let marks: Vec<(usize, String)> = marks.into_iter().map(|(pos, l)| (at[pos], l)).collect();
    let clean = plain;
    let spans: Vec<std::ops::Range<usize>> = crate::segment::sentence_spans(&clean)
        .into_iter()
        .filter(|r| !clean[r.clone()].trim().is_empty())
        .collect();
    let mut out: Vec<(String, Vec<String>)> = spans
        .iter()
        .map(|r| (crate::text::fold_ws(clean[r.clone()].trim()), vec![]))
        .collect();
    for (pos, label) in marks {
        // The marker belongs to the last sentence that starts before it.
        let i = spans
            .iter()
            .rposition(|r| r.start < pos)
            .unwrap_or_default();
        if let Some(s) = out.get_mut(i) {
            s.1.push(label);
        }
    }
    out
}

fn footnote(label: &str, n: &Footnote) -> Result<CitedQuote, String> {
    let head = &n.head;
    let doc = DOC.captures_iter(head).last().ok_or_else(|| {
        format!("footnote [^{label}] does not name a document (write: doc `ID`, page N)")
    })?;
    let at = doc.get(0).expect("match").start();
    let rest = &head[at..];
    let page = PAGE.captures(rest).ok_or_else(|| {
        format!("footnote [^{label}] does not give a page (write: doc `ID`, page N)")
    })?;
    let first: u32 = page[1]
        .parse()
        .map_err(|_| format!("footnote [^{label}]: page {} is not a number", &page[1]))?;
    let end: Option<u32> = page.get(2).and_then(|m| m.as_str().parse().ok());
    let fingerprint = match FINGERPRINT.captures(rest) {
        Some(f) if f[1].len() < super::MIN_FINGERPRINT_LEN => {
            return Err(format!(
                "footnote [^{label}]: fingerprint {} is too short (at least {} hex digits)",
                &f[1],
                super::MIN_FINGERPRINT_LEN
            ));
        }
        Some(f) => Some(f[1].to_ascii_lowercase()),
        None => None,
    };
    let quote = unescape(n.quote.join(" ").trim());
    if quote.is_empty() {
        return Err(format!(
            "footnote [^{label}] has no quote (put it on an indented line starting with >)"
        ));
    }
    let before = head[..at].trim_end().trim_end_matches('\u{2014}').trim();
    let title = TITLE
        .captures(before)
        .map(|t| unescape(&t[1]).replace('\u{2217}', "*"))
        .or_else(|| (!before.is_empty()).then(|| unescape(before)));
    Ok(CitedQuote {
        doc_id: DocId(doc[1].to_string()),
        title,
        organisation: None,
        date: None,
        page: first,
        end_page: end.filter(|&e| e != first),
        quote,
        fingerprint,
        chunk: None,
        ocr_warning: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const DRAFT: &str = "# Pier 3 money

The ministry agreed a price of $31.7 million.[^a] It later rose.[^b][^a]

A sentence with no footnote.

- A listed fact.[^b]

> Quoted aside, not checked.[^a]

```
code[^a]
```

[^a]: *Contract, \u{2217}signed\u{2217}*, Ministry of Public Works, 2019-03-14 \u{2014} doc `brindlemoor-contract`, page 2, fingerprint 3FA9C2D41B07
    > The contract price is
    > $31.7 million.
[^b]: doc `mpw-amendment-no2`, pages 3-4
    > The price rose.

> A closing block quote is not part of the footnote.
";

    #[test]
    fn a_draft_is_read_into_claims() {
        let c = parse(DRAFT).unwrap();
        assert_eq!(c.question.as_deref(), Some("Pier 3 money"));
        let texts: Vec<&str> = c.claims.iter().map(|c| c.text.as_str()).collect();
        assert_eq!(
            texts,
            [
                "The ministry agreed a price of $31.7 million.",
                "It later rose.",
                "A sentence with no footnote.",
                "A listed fact."
            ]
        );
        let a = &c.claims[0].citations[0];
        assert_eq!(a.doc_id.0, "brindlemoor-contract");
        assert_eq!(a.title.as_deref(), Some("Contract, *signed*"));
        assert_eq!(a.page, 2);
        assert_eq!(a.quote, "The contract price is $31.7 million.");
        assert_eq!(a.fingerprint.as_deref(), Some("3fa9c2d41b07"));
        let labels: Vec<&str> = c.claims[1]
            .citations
            .iter()
            .map(|c| c.doc_id.0.as_str())
            .collect();
        assert_eq!(labels, ["mpw-amendment-no2", "brindlemoor-contract"]);
        assert_eq!(c.claims[1].citations[0].end_page, Some(4));
        assert_eq!(c.claims[1].citations[0].quote, "The price rose.");
        assert!(c.claims[2].citations.is_empty());
        assert_eq!(c.claims[3].citations.len(), 1);
    }

    #[test]
    fn broken_footnotes_are_named() {
        let c = parse("One.[^1] Two.[^2]\n\n[^1]: doc `a`\n    > words\n").unwrap();
        assert!(
            c.claims[0].problem.as_deref().unwrap().contains("page"),
            "{:?}",
            c.claims[0]
        );
        assert!(c.claims[1].problem.as_deref().unwrap().contains("[^2]"));
        assert!(parse("Just prose.\n").unwrap_err().contains("no footnoted"));
    }

    #[test]
    fn written_claims_read_back_the_same() {
        let cites = [
            CitedQuote {
                doc_id: DocId("d-1".into()),
                title: Some("A *starred* title".into()),
                organisation: Some("Harbour Board".into()),
                date: Some("2021-03-04".into()),
                page: 3,
                end_page: Some(4),
                quote: "The board approved $1.4 million, on 3 June.".into(),
                fingerprint: Some("0123456789abcdef".into()),
                chunk: None,
                ocr_warning: None,
            },
            CitedQuote {
                doc_id: DocId("d-2".into()),
                title: None,
                organisation: None,
                date: None,
                page: 1,
                end_page: None,
                quote: "Nothing else \u{201C}quoted\u{201D} here.".into(),
                fingerprint: None,
                chunk: None,
                ocr_warning: None,
            },
        ];
        let mut out = String::new();
        render_claims(
            &mut out,
            &[
                ("The board approved $1.4 million.", &cites[..1]),
                ("Nothing else\n- was said.", &cites[..]),
            ],
        );
        let back = parse(&out).unwrap();
        assert_eq!(back.claims.len(), 2, "{out}");
        assert_eq!(
            back.claims[1].text, "Nothing else - was said.",
            "a line break inside a sentence cannot start a list item"
        );
        assert_eq!(back.claims[0].text, "The board approved $1.4 million.");
        let c = &back.claims[1].citations;
        assert_eq!(c.len(), 2);
        assert_eq!(c[0].title.as_deref(), Some("A *starred* title"));
        assert_eq!((c[0].page, c[0].end_page), (3, Some(4)));
        assert_eq!(c[0].quote, cites[0].quote);
        assert_eq!(c[0].fingerprint.as_deref(), Some("0123456789ab"));
        assert_eq!(c[1].quote, cites[1].quote);
        assert_eq!(c[1].fingerprint, None);
    }

    /// Issue 26, item 5: links, images and raw HTML from a record are
    /// written as text (CommonMark backslash escapes), and read back as
    /// the record has them.
    #[test]
    fn hostile_markup_from_records_is_written_as_text() {
        let hostile = "See [the notice](javascript:alert(1)) and ![x](http://x.example/p.png) <img src=x onerror=alert(1)> <script>x()</script> &lt;b&gt; `code` *bold* ~~gone~~ | a | b |.";
        let c = CitedQuote {
            doc_id: DocId("notice".into()),
            title: Some("<b>raw</b> [title](javascript:x)".into()),
            organisation: Some("[Org](javascript:y)".into()),
            date: None,
            page: 1,
            end_page: None,
            quote: hostile.into(),
            fingerprint: None,
            chunk: None,
            ocr_warning: None,
        };
        // A claim is one sentence as the segmenter finds it: the "!" of
        // the image would end one, so the claim carries the rest.
        let said = "See [the notice](javascript:alert(1)) <img src=x onerror=alert(1)> <script>x()</script> &lt;b&gt; `code` *bold* ~~gone~~ | a | b |.";
        let mut out = String::new();
        render_claims(&mut out, &[(said, std::slice::from_ref(&c))]);
        // No unescaped opener of a link, image, tag, entity or code span
        // is left outside the footnote markers.
        let bare = MARKER.replace_all(&out, "");
        let bare = DOC.replace_all(&bare, "");
        let mut prev = ' ';
        let mut slashes = 0;
        for ch in bare.chars() {
            if matches!(ch, '[' | '<' | '&' | '`') {
                assert!(slashes % 2 == 1, "unescaped {ch:?} in:\n{out}");
            }
            slashes = if ch == '\\' { slashes + 1 } else { 0 };
            prev = ch;
        }
        let _ = prev;
        let back = parse(&out).unwrap();
        assert_eq!(back.claims[0].text, said);
        let got = &back.claims[0].citations[0];
        assert_eq!(got.quote, hostile);
        assert_eq!(
            got.title.as_deref(),
            Some("<b>raw</b> [title](javascript:x)")
        );
    }

    proptest::proptest! {
        /// Any quote, title and id written as a footnote reads back as
        /// written (white space folded), whatever punctuation it holds.
        #[test]
        fn footnotes_round_trip(
            quote in "[A-Za-z0-9 ,.;:'\"()\\[\\]*_`#><&~|!\\\\\u{201C}\u{201D}\u{2014}$%-]{1,80}",
            said in "[A-Za-z0-9][A-Za-z0-9 ,;:'\"()\\[\\]*_`#<>&~|\\\\$%-]{0,60}",
            title in "[A-Za-z0-9 ,.'()*-]{0,40}",
            id in "[a-z0-9][a-z0-9._-]{0,20}",
            page in 1u32..500,
            span in 0u32..3,
            fp in proptest::option::of("[0-9a-f]{64}"),
        ) {
            let quote = crate::text::fold_ws(&quote);
            proptest::prop_assume!(!quote.is_empty());
            let c = CitedQuote {
                doc_id: DocId(id.clone()),
                title: Some(title.trim().to_string()).filter(|t| !t.is_empty()),
                organisation: None,
                date: None,
                page,
                end_page: (span > 0).then_some(page + span),
                quote: quote.clone(),
                fingerprint: fp.clone(),
                chunk: None,
                ocr_warning: None,
            };
            let mut out = String::new();
            let sentence = format!("The board met {}.", said.trim_end_matches('\\'));
            render_claims(&mut out, &[(sentence.as_str(), std::slice::from_ref(&c))]);
            let back = parse(&out).unwrap();
            proptest::prop_assert_eq!(back.claims.len(), 1, "{}", out);
            proptest::prop_assert_eq!(&back.claims[0].text, &crate::text::fold_ws(&sentence));
            let got = &back.claims[0].citations[0];
            proptest::prop_assert_eq!(&got.quote, &quote);
            proptest::prop_assert_eq!(&got.doc_id.0, &id);
            proptest::prop_assert_eq!((got.page, got.end_page), (c.page, c.end_page));
            proptest::prop_assert_eq!(got.fingerprint.clone(), fp.map(|f| f[..FINGERPRINT_LEN].to_string()));
        }
    }
}
