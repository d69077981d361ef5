//! Text utilities shared by every stage: the search analyzer (so that the
//! index, the drafter and the verifier agree on what a "term" is), quote
//! normalisation with a map back to the original offsets, content hashes and
//! character/byte offset conversion.
//!
//! invariant: nothing here reads files or knows about the store.

use sha2::{Digest, Sha256};
use std::cell::RefCell;
use tantivy::tokenizer::{
    AsciiFoldingFilter, Language, LowerCaser, RemoveLongFilter, SimpleTokenizer, Stemmer,
    TextAnalyzer,
};

/// Name under which the analyzer is registered in the BM25 index.
pub const ANALYZER: &str = "onrecord_en";

/// The analyzer used for indexing, querying and term overlap: split on
/// non-alphanumerics, drop tokens over 40 bytes, lower-case, fold accents to
/// ASCII, English Porter stemming.
pub fn analyzer() -> TextAnalyzer {
    TextAnalyzer::builder(SimpleTokenizer::default())
        .filter(RemoveLongFilter::limit(40))
        .filter(LowerCaser)
        .filter(AsciiFoldingFilter)
        .filter(Stemmer::new(Language::English))
        .build()
}

thread_local! {
    static ANALYZER_TL: RefCell<TextAnalyzer> = RefCell::new(analyzer());
}

/// Analyzed terms of `text`, in order, duplicates kept.
pub fn terms(text: &str) -> Vec<String> {
    ANALYZER_TL.with(|a| {
        let mut a = a.borrow_mut();
        let mut stream = a.token_stream(text);
        let mut out = Vec::new();
        while stream.advance() {
            out.push(stream.token().text.clone());
        }
        out
    })
}

/// Analyzed terms with their byte ranges in `text`.
pub fn term_spans(text: &str) -> Vec<(String, std::ops::Range<usize>)> {
    ANALYZER_TL.with(|a| {
        let mut a = a.borrow_mut();
        let mut stream = a.token_stream(text);
        let mut out = Vec::new();
        while stream.advance() {
            let t = stream.token();
            out.push((t.text.clone(), t.offset_from..t.offset_to));
        }
        out
    })
}

/// A short English stop-word list (common practice: function words that
/// carry no content). Compared against lower-cased surface words.
pub fn is_stopword(word_lower: &str) -> bool {
    const STOP: &[&str] = &[
        "a",
        "about",
        "above",
        "after",
        "again",
        "against",
        "all",
        "am",
        "an",
        "and",
        "any",
        "are",
        "as",
        "at",
        "be",
        "because",
        "been",
        "before",
        "being",
        "below",
        "between",
        "both",
        "but",
        "by",
        "can",
        "could",
        "did",
        "do",
        "does",
        "doing",
        "down",
        "during",
        "each",
        "few",
        "for",
        "from",
        "further",
        "had",
        "has",
        "have",
        "having",
        "he",
        "her",
        "here",
        "hers",
        "herself",
        "him",
        "himself",
        "his",
        "how",
        "i",
        "if",
        "in",
        "into",
        "is",
        "it",
        "its",
        "itself",
        "just",
        "me",
        "more",
        "most",
        "my",
        "myself",
        "of",
        "off",
        "on",
        "once",
        "only",
        "or",
        "other",
        "our",
        "ours",
        "ourselves",
        "out",
        "over",
        "own",
        "same",
        "she",
        "should",
        "so",
        "such",
        "than",
        "that",
        "the",
        "their",
        "theirs",
        "them",
        "themselves",
        "then",
        "there",
        "these",
        "they",
        "this",
        "those",
        "through",
        "to",
        "too",
        "under",
        "until",
        "up",
        "very",
        "was",
        "we",
        "were",
        "what",
        "when",
        "where",
        "which",
        "while",
        "who",
        "whom",
        "why",
        "will",
        "with",
        "would",
        "you",
        "your",
        "yours",
        "yourself",
        "yourselves",
        "s",
        "t",
        "also",
        "per",
        "via",
        "upon",
        "within",
        "whether",
        "says",
        "said",
        "according",
        "tell",
        "much",
        "many",
    ];
    STOP.contains(&word_lower)
}

/// Content terms of `text`: analyzed terms whose surface word is not a stop word.
pub fn content_terms(text: &str) -> Vec<String> {
    term_spans(text)
        .into_iter()
        .filter(|(_, r)| !is_stopword(&text[r.clone()].to_lowercase()))
        .map(|(t, _)| t)
        .collect()
}

/// Lower-case hex SHA-256 of `bytes`.
pub fn hash_hex(bytes: &[u8]) -> String {
    let digest = Sha256::digest(bytes);
    let mut s = String::with_capacity(64);
    for b in digest.iter() {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

/// Fold every run of white space (including line and page breaks) into one
/// space and trim the ends.
pub fn fold_ws(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for w in s.split_whitespace() {
        if !out.is_empty() {
            out.push(' ');
        }
        out.push_str(w);
    }
    out
}

/// Character offset of byte offset `byte` in `s` (which must be a char boundary).
pub fn byte_to_char(s: &str, byte: usize) -> usize {
    s[..byte].chars().count()
}

/// Byte offset of character offset `ch` in `s`; `s.len()` when past the end.
pub fn char_to_byte(s: &str, ch: usize) -> usize {
    s.char_indices().nth(ch).map(|(b, _)| b).unwrap_or(s.len())
}

/// Text normalised for quote matching, with a map from every normalised byte
/// back to the source byte range it came from.
#[derive(Debug, Clone)]
pub struct Normalized {
    pub text: String,
    /// For each byte of `text`, the source byte range of the character that produced it.
    src: Vec<(usize, usize)>,
}

impl Normalized {
    /// Source byte range covered by the normalised byte range `r` (non-empty).
    pub fn source_range(&self, r: std::ops::Range<usize>) -> std::ops::Range<usize> {
        debug_assert!(r.start < r.end && r.end <= self.src.len());
        self.src[r.start].0..self.src[r.end - 1].1
    }
}

/// Normalise for matching: white-space runs become one space; curly and
/// angle quotes become straight ones; every dash becomes `-`; ligatures are
/// spelled out; the ellipsis becomes three dots; a soft hyphen is dropped; a
/// hyphen at a line end followed by a lower-case letter (broken hyphenation)
/// is removed together with the line break. Case is kept.
pub fn normalize(s: &str) -> Normalized {
    let mut text = String::with_capacity(s.len());
    let mut src: Vec<(usize, usize)> = Vec::with_capacity(s.len());
    let chars: Vec<(usize, char)> = s.char_indices().collect();
    let end_of = |i: usize| chars.get(i + 1).map(|c| c.0).unwrap_or(s.len());
    let mut push = |text: &mut String, out: &str, range: (usize, usize)| {
        text.push_str(out);
        for _ in 0..out.len() {
            src.push(range);
        }
    };
    let mut i = 0;
    let mut pending_space: Option<(usize, usize)> = None;
    while i < chars.len() {
        let (b, c) = chars[i];
        if c.is_whitespace() {
            let start = b;
            let mut j = i;
            while j < chars.len() && chars[j].1.is_whitespace() {
                j += 1;
            }
            let end = chars.get(j).map(|c| c.0).unwrap_or(s.len());
            if !text.is_empty() {
                pending_space = Some((start, end));
            }
            i = j;
            continue;
        }
        if c == '\u{00AD}' {
            i += 1;
            continue;
        }
        if matches!(c, '-' | '\u{2010}' | '\u{2011}') {
            // Broken hyphenation: "con-\ntract" -> "contract".
            let mut j = i + 1;
            let mut saw_newline = false;
            while j < chars.len() && chars[j].1.is_whitespace() {
                saw_newline |= matches!(chars[j].1, '\n' | '\r' | '\u{c}');
                j += 1;
            }
            if saw_newline
                && j < chars.len()
                && chars[j].1.is_lowercase()
                && i > 0
                && chars[i - 1].1.is_alphabetic()
            {
                i = j;
                continue;
            }
        }
        if let Some(sp) = pending_space.take() {
            push(&mut text, " ", sp);
        }
        let range = (b, end_of(i));
        let mapped: Option<&str> = match c {
            '\u{2018}' | '\u{2019}' | '\u{201A}' | '\u{201B}' | '\u{2032}' | '`' => Some("'"),
            '\u{201C}' | '\u{201D}' | '\u{201E}' | '\u{201F}' | '\u{00AB}' | '\u{00BB}'
            | '\u{2033}' => Some("\""),
            '\u{2010}' | '\u{2011}' | '\u{2012}' | '\u{2013}' | '\u{2014}' | '\u{2015}'
            | '\u{2212}' => Some("-"),
            '\u{FB00}' => Some("ff"),
            '\u{FB01}' => Some("fi"),
            '\u{FB02}' => Some("fl"),
            '\u{FB03}' => Some("ffi"),
            '\u{FB04}' => Some("ffl"),
            '\u{FB05}' | '\u{FB06}' => Some("st"),
            '\u{2026}' => Some("..."),
            _ => None,
        };
        match mapped {
            Some(m) => push(&mut text, m, range),
            None => {
                let mut buf = [0u8; 4];
                push(&mut text, c.encode_utf8(&mut buf), range);
            }
        }
        i += 1;
    }
    Normalized { text, src }
}

/// A writer for text meant for a terminal: control characters from records
/// (escape sequences that retitle a window, clear the screen or move the
/// cursor; carriage returns that overwrite a line; C1 controls) are shown
/// as visible symbols instead of being acted on. Line feeds and tabs pass.
/// JSON and the file exports are not written through it: JSON escapes
/// controls itself, and a Markdown answer must keep the page's characters
/// to replay.
pub struct Printable<W: std::io::Write> {
    inner: W,
    /// A 0xC2 byte seen at the end of the last write (C1 controls are
    /// 0xC2 0x80..=0x9F in UTF-8).
    pending_c2: bool,
}

impl<W: std::io::Write> Printable<W> {
    pub fn new(inner: W) -> Self {
        Printable {
            inner,
            pending_c2: false,
        }
    }
}

/// The visible stand-in for a C0 control byte or DEL: the Unicode control
/// pictures (U+2400 + byte, U+2421 for DEL).
fn control_picture(b: u8) -> char {
    if b == 0x7f {
        '\u{2421}'
    } else {
        char::from_u32(0x2400 + u32::from(b)).unwrap_or('\u{FFFD}')
    }
}

/// `s` with its control characters (but line feeds and tabs) shown as
/// [`Printable`] shows them, for text that is mixed with the program's own
/// terminal styling before it is written.
pub fn printable(s: &str) -> std::borrow::Cow<'_, str> {
    if !s.chars().any(|c| c.is_control() && c != '\n' && c != '\t') {
        return std::borrow::Cow::Borrowed(s);
    }
    s.chars()
        .map(|c| match c {
            '\n' | '\t' => c,
            '\u{0}'..='\u{1f}' | '\u{7f}' => control_picture(c as u8),
            c if c.is_control() => '\u{FFFD}',
            c => c,
        })
        .collect::<String>()
        .into()
}

impl<W: std::io::Write> std::io::Write for Printable<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let mut out = Vec::with_capacity(buf.len() + 8);
        let mut i = 0;
        if self.pending_c2 {
            self.pending_c2 = false;
            match buf.first() {
                Some(&b) if (0x80..=0x9f).contains(&b) => {
                    out.extend_from_slice("\u{FFFD}".as_bytes());
                    i = 1;
                }
                _ => out.push(0xc2),
            }
        }
        while i < buf.len() {
            let b = buf[i];
            match b {
                b'\n' | b'\t' => out.push(b),
                0x00..=0x1f | 0x7f => {
                    let mut tmp = [0u8; 4];
                    out.extend_from_slice(control_picture(b).encode_utf8(&mut tmp).as_bytes());
                }
                0xc2 if i + 1 == buf.len() => self.pending_c2 = true,
                0xc2 if (0x80..=0x9f).contains(&buf[i + 1]) => {
                    out.extend_from_slice("\u{FFFD}".as_bytes());
                    i += 1;
                }
                _ => out.push(b),
            }
            i += 1;
        }
        self.inner.write_all(&out)?;
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        if std::mem::take(&mut self.pending_c2) {
            self.inner.write_all(&[0xc2])?;
        }
        self.inner.flush()
    }
}

impl<W: std::io::Write> Drop for Printable<W> {
    fn drop(&mut self) {
        let _ = std::io::Write::flush(self);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn printable(parts: &[&[u8]]) -> String {
        use std::io::Write;
        let mut buf = Vec::new();
        {
            let mut w = Printable::new(&mut buf);
            for p in parts {
                w.write_all(p).unwrap();
            }
        }
        String::from_utf8(buf).unwrap()
    }

    /// Escape sequences from ECMA-48 (the standard terminals follow): OSC 0
    /// sets the window title, CSI 2 J clears the screen, CSI H homes the
    /// cursor; a carriage return overwrites the line; U+009B is the C1 form
    /// of CSI. None reaches the terminal as a control.
    #[test]
    fn terminal_controls_from_records_are_shown_not_obeyed() {
        let hostile =
            "Title\u{1b}]0;owned\u{7}\u{1b}[2J\u{1b}[H fine\rover \u{9b}31m\u{7f}é\tend\n";
        let shown = printable(&[hostile.as_bytes()]);
        assert!(
            !shown
                .chars()
                .any(|c| c.is_control() && c != '\n' && c != '\t'),
            "{shown:?}"
        );
        assert_eq!(
            shown,
            "Title\u{241b}]0;owned\u{2407}\u{241b}[2J\u{241b}[H fine\u{240d}over \u{FFFD}31m\u{2421}é\tend\n"
        );
        // Split anywhere, even inside a two-byte character or a C1 control:
        // the same output.
        let bytes = hostile.as_bytes();
        for cut in 0..bytes.len() {
            assert_eq!(
                printable(&[&bytes[..cut], &bytes[cut..]]),
                shown,
                "cut at {cut}"
            );
        }
        assert_eq!(super::printable(hostile), shown, "the string form agrees");
        // Ordinary text, accented letters included, passes unchanged.
        let plain = "Le ministère a payé 1 400 000 $ — « reçu » · p. 3\n";
        assert_eq!(printable(&[plain.as_bytes()]), plain);
    }

    #[test]
    fn normalisation_table() {
        // (input, expected normalised text)
        let cases = [
            ("a  b\n\tc", "a b c"),
            (
                "\u{201C}quoted\u{201D} and \u{2018}single\u{2019}",
                "\"quoted\" and 'single'",
            ),
            ("2019\u{2013}2020 \u{2014} done", "2019-2020 - done"),
            ("\u{FB01}nal o\u{FB03}ce", "final office"),
            ("con-\ntract", "contract"),
            ("con-\n   tract", "contract"),
            ("Port-\nAubrel", "Port- Aubrel"),
            ("well-known", "well-known"),
            ("co\u{00AD}operate", "cooperate"),
            ("wait\u{2026}", "wait..."),
            ("  lead and trail  ", "lead and trail"),
            ("page\u{c}break", "page break"),
        ];
        for (input, want) in cases {
            assert_eq!(normalize(input).text, want, "input {input:?}");
        }
    }

    #[test]
    fn normalised_ranges_map_back_to_source() {
        let src = "The \u{201C}con-\ntract\u{201D} was signed.";
        let n = normalize(src);
        let at = n.text.find("contract").unwrap();
        let r = n.source_range(at..at + "contract".len());
        assert_eq!(&src[r], "con-\ntract");
    }

    #[test]
    fn analyzer_stems_and_folds() {
        assert_eq!(terms("Contracts SIGNED é"), vec!["contract", "sign", "e"]);
        assert_eq!(
            content_terms("the contract was signed"),
            vec!["contract", "sign"]
        );
    }

    #[test]
    fn sha256_of_abc() {
        // FIPS 180-2, Appendix B.1: SHA-256("abc").
        assert_eq!(
            hash_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn offsets_round_trip() {
        let s = "é1ü2";
        for ch in 0..=4 {
            assert_eq!(byte_to_char(s, char_to_byte(s, ch)), ch);
        }
    }
}
