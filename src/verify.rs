//! The verifier: every drafted sentence must carry at least one citation
//! whose quote is found in the cited chunk, and the quotes must support the
//! sentence (the `Judge`). A sentence that fails is struck with a reason a
//! reporter can act on. Used for every drafter.
//!
//! invariant: an emitted quote is always the page's own text (the located
//! span of the stored page), never the draft's version of it.
//! invariant: a sentence is `supported` only if every check passed; any
//! doubt strikes it.

use crate::chunk::PAGE_BREAK;
use crate::store::StoredChunk;
use crate::text::{byte_to_char, content_terms, fold_ws, normalize};
use crate::types::{ChunkId, Citation, DocId};
use regex::Regex;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeSet, HashMap, HashSet};
use std::sync::LazyLock;

/// A citation as a drafter proposes it: which chunk, and the words quoted from it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DraftCitation {
    pub chunk_id: ChunkId,
    pub quote: String,
}

/// One drafted sentence with its proposed citations.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DraftSentence {
    pub text: String,
    pub citations: Vec<DraftCitation>,
}

/// What a drafter returns: sentences, or a reason to abstain.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Draft {
    pub sentences: Vec<DraftSentence>,
    pub abstain: Option<String>,
    /// A language model's own text and costs, when a model wrote the draft.
    pub model: Option<crate::draft::ModelDraft>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    Supported,
    Struck,
}

/// A judge's decision on one sentence against its located quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct Judgement {
    pub supported: bool,
    /// 0..1; for the rules judge, the content-word coverage.
    pub confidence: f32,
    /// Why the sentence is not supported, in words a reporter understands.
    pub reason: Option<String>,
}

/// Decides whether quotes support a sentence.
pub trait Judge {
    fn name(&self) -> &'static str;
    fn judge(&self, sentence: &str, quotes: &[&str]) -> Judgement;
}

/// A verified sentence, ready to emit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VerifiedSentence {
    pub text: String,
    pub verdict: Verdict,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    pub confidence: f32,
    pub citations: Vec<Citation>,
}

/// Where a quote was found inside a chunk.
#[derive(Debug, Clone, PartialEq)]
pub struct Located {
    pub page: u32,
    pub start_char: usize,
    pub end_page: u32,
    pub end_char: usize,
    /// The chunk's own text for the span, white space folded.
    pub page_text: String,
    /// Byte range of the span in the chunk's text.
    pub bytes: std::ops::Range<usize>,
}

/// Find `quote` in the chunk after normalising white space, quote and dash
/// characters, ligatures and broken hyphenation (case is kept). Returns the
/// exact page and character range in the stored page text.
pub fn locate(quote: &str, chunk: &StoredChunk) -> Option<Located> {
    let q = normalize(strip_wrapping_quotes(quote));
    if q.text.is_empty() {
        return None;
    }
    let hay = normalize(&chunk.text);
    let at = hay.text.find(&q.text)?;
    let r = hay.source_range(at..at + q.text.len());
    let (page, start_char) = page_offset(chunk, r.start);
    let (end_page, end_char) = page_offset(chunk, r.end);
    Some(Located {
        page,
        start_char,
        end_page,
        end_char,
        page_text: fold_ws(&chunk.text[r.clone()]),
        bytes: r,
    })
}

fn strip_wrapping_quotes(q: &str) -> &str {
    let t = q.trim();
    let t = t
        .strip_prefix(['"', '\u{201C}', '\u{00AB}'])
        .and_then(|s| s.strip_suffix(['"', '\u{201D}', '\u{00BB}']))
        .unwrap_or(t);
    t.trim_matches(|c: char| c == '…' || c.is_whitespace())
        .trim_start_matches("...")
        .trim_end_matches("...")
        .trim()
}

/// Map a byte offset in a chunk's text to (page, char offset on that page).
fn page_offset(chunk: &StoredChunk, byte: usize) -> (u32, usize) {
    let before = &chunk.text[..byte];
    match before.rfind(PAGE_BREAK) {
        None => (
            chunk.span.start_page,
            chunk.span.start_char + byte_to_char(&chunk.text, byte),
        ),
        Some(ff) => {
            let breaks = before.matches(PAGE_BREAK).count() as u32;
            let line_start = ff + PAGE_BREAK.len_utf8();
            (
                chunk.span.start_page + breaks,
                chunk.text[line_start..byte].chars().count(),
            )
        }
    }
}

/// Verify a draft against the chunks it may cite. `page_hash` looks up a
/// page's content hash for the citation record.
pub fn verify(
    draft: &Draft,
    chunks: &HashMap<ChunkId, StoredChunk>,
    judge: &dyn Judge,
    page_hash: &dyn Fn(&DocId, u32) -> Option<String>,
) -> Vec<VerifiedSentence> {
    draft
        .sentences
        .iter()
        .map(|s| verify_sentence(s, chunks, judge, page_hash))
        .collect()
}

fn struck(s: &DraftSentence, reason: String, citations: Vec<Citation>) -> VerifiedSentence {
    VerifiedSentence {
        text: s.text.clone(),
        verdict: Verdict::Struck,
        reason: Some(reason),
        confidence: 0.0,
        citations,
    }
}

fn verify_sentence(
    s: &DraftSentence,
    chunks: &HashMap<ChunkId, StoredChunk>,
    judge: &dyn Judge,
    page_hash: &dyn Fn(&DocId, u32) -> Option<String>,
) -> VerifiedSentence {
    if s.citations.is_empty() {
        return struck(
            s,
            "no citation: the sentence does not point to any record".into(),
            vec![],
        );
    }
    let mut citations = Vec::new();
    for c in &s.citations {
        let Some(chunk) = chunks.get(&c.chunk_id) else {
            return struck(
                s,
                format!(
                    "cites excerpt {}, which was not among the retrieved records",
                    c.chunk_id
                ),
                citations,
            );
        };
        let Some(loc) = locate(&c.quote, chunk) else {
            return struck(
                s,
                format!(
                    "quote not found on {} of \u{201C}{}\u{201D}",
                    chunk.span.pages_label(),
                    chunk.title
                ),
                citations,
            );
        };
        if let Some(context) = addressed_to_model(chunk, &loc.bytes) {
            return struck(
                s,
                format!(
                    "the quoted words are an instruction aimed at an AI model, written inside \
                     the record (\u{201C}{}\u{201D}), not a statement the record makes",
                    crate::text::fold_ws(&context)
                ),
                citations,
            );
        }
        citations.push(Citation {
            chunk_id: chunk.id,
            doc_id: chunk.doc_id.clone(),
            title: chunk.title.clone(),
            organisation: chunk.organisation.clone(),
            date: chunk.date.clone(),
            page: loc.page,
            end_page: (loc.end_page != loc.page).then_some(loc.end_page),
            start_char: loc.start_char,
            end_char: loc.end_char,
            page_hash: page_hash(&chunk.doc_id, loc.page).unwrap_or_default(),
            quote: loc.page_text,
        });
    }
    let quotes: Vec<&str> = citations.iter().map(|c| c.quote.as_str()).collect();
    let j = judge.judge(&s.text, &quotes);
    VerifiedSentence {
        text: s.text.clone(),
        verdict: if j.supported {
            Verdict::Supported
        } else {
            Verdict::Struck
        },
        reason: j.reason,
        confidence: j.confidence,
        citations,
    }
}

static INSTRUCTION: LazyLock<Vec<Regex>> = LazyLock::new(|| {
    [
        // "Ignore the excerpts", "disregard all previous instructions".
        r"(?i)\b(?:ignore|disregard|forget|override)\b[^.!?\n]{0,60}\b(?:excerpts?|instructions?|prompts?|context|rules|everything above|previous)\b",
        // An imperative to assert something: "... and state that ...".
        r"(?i)(?:^|[.;:!?]\s+|\b(?:and|then|instead|now)\s+)(?:state|say|write|answer|respond|reply|claim)\s+(?:that|with|only)\b",
        r"(?i)\b(?:as an ai|system prompt|new instructions|language model,|assistant:)",
    ]
    .iter()
    .map(|p| Regex::new(p).unwrap())
    .collect()
});

/// The sentence(s) of `chunk` around `bytes`, if they read as instructions
/// aimed at an AI model (prompt injection planted in a record). Quoting
/// such text would let a document dictate the answer.
pub fn addressed_to_model(chunk: &StoredChunk, bytes: &std::ops::Range<usize>) -> Option<String> {
    let spans = crate::segment::sentence_spans(&chunk.text);
    let around: Vec<&str> = spans
        .iter()
        .filter(|r| r.start < bytes.end && bytes.start < r.end)
        .map(|r| &chunk.text[r.clone()])
        .collect();
    let context = if around.is_empty() {
        chunk.text[bytes.clone()].to_string()
    } else {
        around.join(" ")
    };
    INSTRUCTION
        .iter()
        .any(|re| re.is_match(&context))
        .then_some(context)
}

/// The rules judge (v1): numbers, amounts, percentages, dates and
/// capitalised names in the sentence must appear in the quotes; enough of the
/// sentence's content words must appear; negation must agree.
#[derive(Debug, Clone, Copy)]
pub struct RulesJudge {
    /// Minimum share of the sentence's content terms found in the quotes.
    pub min_coverage: f32,
}

impl Default for RulesJudge {
    fn default() -> Self {
        RulesJudge { min_coverage: 0.6 }
    }
}

impl Judge for RulesJudge {
    fn name(&self) -> &'static str {
        "rules-v1"
    }

    fn judge(&self, sentence: &str, quotes: &[&str]) -> Judgement {
        let quote = quotes.join(" \n ");
        let fail = |reason: String, confidence: f32| Judgement {
            supported: false,
            confidence,
            reason: Some(reason),
        };
        // Dates first, so their digits are not read again as bare numbers.
        let (s_dates, s_rest) = dates(sentence);
        let (q_dates, q_rest) = dates(&quote);
        for (surface, key) in &s_dates {
            if !q_dates
                .iter()
                .any(|(_, qk)| qk == key || qk.starts_with(&format!("{key}-")))
            {
                return fail(format!("the date {surface} is not in the quote"), 0.0);
            }
        }
        let mut q_nums: HashSet<String> = numbers(&q_rest).into_iter().map(|(_, k)| k).collect();
        for (_, k) in &q_dates {
            // A year or day written inside a quoted date still counts as that number.
            for part in k.split('-') {
                q_nums.insert(part.trim_start_matches('0').to_string());
            }
        }
        for (surface, key) in numbers(&s_rest) {
            if !q_nums.contains(&key) {
                let what = if surface.contains('%') || surface.contains("per") {
                    "percentage"
                } else if surface.contains(['$', '€', '£']) || key.len() > 4 {
                    "amount"
                } else {
                    "number"
                };
                return fail(format!("{what} {surface} is not in the quote"), 0.0);
            }
        }
        let q_words: HashSet<String> = words_lower(&quote);
        for name in names(sentence) {
            if !q_words.contains(&name.to_lowercase()) {
                return fail(
                    format!("the name \u{201C}{name}\u{201D} is not in the quote"),
                    0.0,
                );
            }
        }
        let s_neg = negation(sentence);
        let q_neg = negation(&quote);
        match (&s_neg, &q_neg) {
            (None, Some(q)) => {
                return fail(format!("the quote says \u{201C}{q}\u{201D}"), 0.0);
            }
            (Some(s), None) => {
                return fail(
                    format!("the sentence says \u{201C}{s}\u{201D} but the quote has no negation"),
                    0.0,
                );
            }
            _ => {}
        }
        let s_terms: BTreeSet<String> = content_terms(sentence).into_iter().collect();
        let q_terms: HashSet<String> = content_terms(&quote).into_iter().collect();
        let coverage = if s_terms.is_empty() {
            1.0
        } else {
            s_terms.iter().filter(|t| q_terms.contains(*t)).count() as f32 / s_terms.len() as f32
        };
        if coverage < self.min_coverage {
            let missing: Vec<&str> = s_terms
                .iter()
                .filter(|t| !q_terms.contains(*t))
                .take(4)
                .map(|s| s.as_str())
                .collect();
            return fail(
                format!(
                    "only {:.0}% of the sentence's content words are in the quote (missing: {})",
                    coverage * 100.0,
                    missing.join(", ")
                ),
                coverage,
            );
        }
        Judgement {
            supported: true,
            confidence: coverage,
            reason: None,
        }
    }
}

fn words_lower(s: &str) -> HashSet<String> {
    static W: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"[\p{L}\p{N}]+").unwrap());
    W.find_iter(&normalize(s).text)
        .map(|m| m.as_str().to_lowercase())
        .collect()
}

const MONTHS: [&str; 12] = [
    "jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec",
];

fn month_num(name: &str) -> Option<u32> {
    let n = name.to_lowercase();
    let n = n.trim_end_matches('.');
    if n.len() < 3 {
        return None;
    }
    let full = [
        "january",
        "february",
        "march",
        "april",
        "may",
        "june",
        "july",
        "august",
        "september",
        "october",
        "november",
        "december",
    ];
    let fr = [
        "janvier",
        "février",
        "mars",
        "avril",
        "mai",
        "juin",
        "juillet",
        "août",
        "septembre",
        "octobre",
        "novembre",
        "décembre",
    ];
    (0..12)
        .find(|&i| full[i] == n || fr[i] == n || (n == MONTHS[i] || (n == "sept" && i == 8)))
        .map(|i| i as u32 + 1)
}

/// Dates in `s` as (surface text, ISO key: `YYYY-MM-DD` or `YYYY-MM`), and
/// `s` with the dates blanked out.
pub fn dates(s: &str) -> (Vec<(String, String)>, String) {
    static ISO: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"\b(\d{4})-(\d{2})-(\d{2})\b").unwrap());
    static DMY: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b(\d{1,2})(?:st|nd|rd|th|er)?\s+(\p{L}{3,9}\.?),?\s+(\d{4})\b").unwrap()
    });
    static MDY: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b(\p{L}{3,9}\.?)\s+(\d{1,2})(?:st|nd|rd|th)?,?\s+(\d{4})\b").unwrap()
    });
    static MY: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"\b(\p{L}{3,9}\.?)\s+(\d{4})\b").unwrap());
    let mut out = Vec::new();
    let mut rest = s.to_string();
    let blank = |rest: &mut String, r: std::ops::Range<usize>| {
        rest.replace_range(r.clone(), &" ".repeat(r.len()));
    };
    for c in ISO.captures_iter(s) {
        let m = c.get(0).unwrap();
        out.push((m.as_str().to_string(), m.as_str().to_string()));
        blank(&mut rest, m.range());
    }
    let snapshot = rest.clone();
    for c in DMY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[2]) {
            let d: u32 = c[1].parse().unwrap_or(0);
            if (1..=31).contains(&d) {
                let m = c.get(0).unwrap();
                out.push((m.as_str().to_string(), format!("{}-{mo:02}-{d:02}", &c[3])));
                blank(&mut rest, m.range());
            }
        }
    }
    let snapshot = rest.clone();
    for c in MDY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[1]) {
            let d: u32 = c[2].parse().unwrap_or(0);
            if (1..=31).contains(&d) {
                let m = c.get(0).unwrap();
                out.push((m.as_str().to_string(), format!("{}-{mo:02}-{d:02}", &c[3])));
                blank(&mut rest, m.range());
            }
        }
    }
    let snapshot = rest.clone();
    for c in MY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[1]) {
            let m = c.get(0).unwrap();
            out.push((m.as_str().to_string(), format!("{}-{mo:02}", &c[2])));
            blank(&mut rest, m.range());
        }
    }
    (out, rest)
}

/// Numbers, amounts and percentages in `s` as (surface text, normalised key).
/// "$4.1 million", "$4,100,000" and "4.1M dollars" all give `4100000`;
/// "12.5%" and "12.5 per cent" give `12.5%`.
pub fn numbers(s: &str) -> Vec<(String, String)> {
    static NUM: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)([$€£]\s?)?(\d{1,3}(?:,\d{3})+|\d+)(\.\d+)?(?:\s?(million|billion|thousand|mn|bn|m|k)\b)?(\s?(?:%|per\s?cent|percent))?",
        )
        .unwrap()
    });
    let mut out = Vec::new();
    for c in NUM.captures_iter(s) {
        let m = c.get(0).unwrap();
        // Skip digits glued to letters (e.g. "v2", "A4", "Q3"), which are labels.
        let before = s[..m.start()].chars().next_back();
        if before.is_some_and(|ch| ch.is_alphabetic()) {
            continue;
        }
        let int: String = c[2].chars().filter(|ch| *ch != ',').collect();
        let frac = c.get(3).map(|f| f.as_str()).unwrap_or("");
        let mult: f64 = match c.get(4).map(|x| x.as_str().to_lowercase()).as_deref() {
            Some("million" | "mn" | "m") => 1e6,
            Some("billion" | "bn") => 1e9,
            Some("thousand" | "k") => 1e3,
            _ => 1.0,
        };
        let pct = c.get(5).is_some();
        let key = if mult == 1.0 {
            let frac = frac.trim_end_matches('0');
            let frac = if frac == "." { "" } else { frac };
            format!(
                "{}{frac}",
                int.trim_start_matches('0').to_string().max("0".into())
            )
        } else {
            let v: f64 = format!("{int}{frac}").parse().unwrap_or(0.0) * mult;
            format!("{}", v.round() as u64)
        };
        let key = if key.is_empty() { "0".to_string() } else { key };
        let key = if pct { format!("{key}%") } else { key };
        out.push((m.as_str().trim().to_string(), key));
    }
    out
}

/// Capitalised names and acronyms in `s`, possessives stripped. The first
/// word of the sentence counts only when the next word is capitalised too.
pub fn names(s: &str) -> Vec<String> {
    static WORD: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"[\p{L}][\p{L}'’\-]*").unwrap());
    const COMMON: &[&str] = &[
        "The",
        "A",
        "An",
        "In",
        "On",
        "At",
        "Of",
        "For",
        "And",
        "But",
        "Or",
        "It",
        "Its",
        "This",
        "That",
        "These",
        "Those",
        "He",
        "She",
        "They",
        "We",
        "I",
        "His",
        "Her",
        "Their",
        "Our",
        "As",
        "By",
        "To",
        "From",
        "With",
        "If",
        "When",
        "While",
        "After",
        "Before",
        "According",
        "Mr",
        "Mrs",
        "Ms",
        "Dr",
        "Hon",
        "Re",
        "No",
        "Not",
        "Yes",
        "Page",
        "Le",
        "La",
        "Les",
        "Un",
        "Une",
    ];
    let ws: Vec<regex::Match<'_>> = WORD.find_iter(s).collect();
    let mut out = Vec::new();
    for (i, m) in ws.iter().enumerate() {
        let w = m.as_str();
        if !w.chars().next().is_some_and(|c| c.is_uppercase()) || COMMON.contains(&w) {
            continue;
        }
        if month_num(w).is_some() || w.len() < 2 {
            continue;
        }
        let sentence_start = s[..m.start()].trim().is_empty()
            || s[..m.start()]
                .trim_end()
                .ends_with(['.', '!', '?', ':', '"', '\u{201C}']);
        if sentence_start {
            let next_cap = ws
                .get(i + 1)
                .is_some_and(|n| n.as_str().chars().next().is_some_and(|c| c.is_uppercase()));
            if !next_cap {
                continue;
            }
        }
        let base = w
            .trim_end_matches("'s")
            .trim_end_matches("’s")
            .trim_end_matches(['\'', '’', '-']);
        // Hyphenated names must match part by part.
        for part in base.split('-') {
            if part.chars().count() >= 2 && !COMMON.contains(&part) {
                out.push(part.to_string());
            }
        }
    }
    out
}

/// The first negation cue in `s` with the word after it, if any.
pub fn negation(s: &str) -> Option<String> {
    static NEG: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)\b(not|never|no longer|no|none|nor|neither|without|cannot|\w+n['’]t)\b(\s+[\p{L}\-]+)?",
        )
        .unwrap()
    });
    NEG.find(s).map(|m| fold_ws(m.as_str()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chunk(text: &str) -> StoredChunk {
        StoredChunk {
            id: ChunkId(7),
            doc_id: DocId("memo-1".into()),
            title: "Pier 3 budget memo".into(),
            organisation: Some("Ministry of Public Works".into()),
            date: Some("2019-03-14".into()),
            seq: 0,
            span: crate::types::ChunkSpan {
                start_page: 3,
                start_char: 10,
                end_page: 4,
                end_char: 20,
            },
            text: text.into(),
            hash: String::new(),
        }
    }

    #[test]
    fn locate_maps_to_page_and_chars_across_a_page_break() {
        let c = chunk("The board met.\u{c}It did not approve the con-\ntract amendment.");
        let a = locate("The board met.", &c).unwrap();
        assert_eq!((a.page, a.start_char, a.end_char), (3, 10, 24));
        let b = locate("\u{201C}did not approve the contract amendment\u{201D}", &c).unwrap();
        assert_eq!((b.page, b.start_char), (4, 3));
        assert_eq!(b.page_text, "did not approve the con- tract amendment");
        assert!(locate("approved the contract", &c).is_none());
    }

    /// Data-driven verifier cases: (sentence, quote, supported?, reason fragment).
    #[test]
    fn rules_judge_table() {
        let cases: &[(&str, &str, bool, &str)] = &[
            (
                "The budget rose to $4.1 million.",
                "the budget for the Pier 3 works rose to $4,100,000",
                true,
                "",
            ),
            (
                "The budget rose to $4.1 million.",
                "the budget rose to $4.3 million in 2020",
                false,
                "amount $4.1 million is not in the quote",
            ),
            (
                "The contract was signed on 14 March 2019.",
                "The contract was signed March 14, 2019 by both parties.",
                true,
                "",
            ),
            (
                "The contract was signed on 15 March 2019.",
                "The contract was signed on 14 March 2019 by both parties.",
                false,
                "the date 15 March 2019 is not in the quote",
            ),
            (
                "The contract was signed in March 2019.",
                "The contract was signed on 2019-03-14.",
                true,
                "",
            ),
            (
                "Odile Farrant approved the amendment.",
                "The deputy minister, Marcus Tennival, approved the amendment.",
                false,
                "the name \u{201C}Odile\u{201D} is not in the quote",
            ),
            (
                "Brindlemoor's bid was the lowest.",
                "The bid from Brindlemoor Civil Ltd. was the lowest.",
                true,
                "",
            ),
            (
                "The board approved the second amendment.",
                "The board did not approve the second amendment.",
                false,
                "the quote says \u{201C}not approve\u{201D}",
            ),
            (
                "The ramp did not pass inspection.",
                "The ramp passed inspection in May.",
                false,
                "the sentence says \u{201C}not pass\u{201D}",
            ),
            (
                "Costs rose 12.5%.",
                "Costs rose 12.5 per cent over the period.",
                true,
                "",
            ),
            (
                "The ferry terminal opening was delayed by flooding and union strikes.",
                "The ferry terminal opening was delayed.",
                false,
                "content words are in the quote",
            ),
        ];
        let judge = RulesJudge::default();
        for (sentence, quote, want, frag) in cases {
            let j = judge.judge(sentence, &[quote]);
            assert_eq!(j.supported, *want, "{sentence} / {quote}: {:?}", j.reason);
            if !want {
                let r = j.reason.unwrap();
                assert!(r.contains(frag), "{sentence}: reason {r:?} lacks {frag:?}");
            }
        }
    }

    #[test]
    fn absent_quote_is_struck_with_the_page_and_title() {
        let c = chunk("The board met on Tuesday.");
        let chunks = HashMap::from([(c.id, c)]);
        let draft = Draft {
            sentences: vec![DraftSentence {
                text: "The board met on Monday.".into(),
                citations: vec![DraftCitation {
                    chunk_id: ChunkId(7),
                    quote: "The board met on Monday.".into(),
                }],
            }],
            abstain: None,
            model: None,
        };
        let v = verify(&draft, &chunks, &RulesJudge::default(), &|_, _| None);
        assert_eq!(v[0].verdict, Verdict::Struck);
        assert_eq!(
            v[0].reason.as_deref(),
            Some("quote not found on pp. 3-4 of \u{201C}Pier 3 budget memo\u{201D}")
        );
    }

    #[test]
    fn number_normalisation() {
        let cases = [
            ("$4.1 million", "4100000"),
            ("$4,100,000", "4100000"),
            ("4.1M dollars", "4100000"),
            ("12.5%", "12.5%"),
            ("12.50 per cent", "12.5%"),
            ("$38.6 million", "38600000"),
            ("007", "7"),
        ];
        for (s, want) in cases {
            let got = numbers(s);
            assert_eq!(got.first().map(|x| x.1.as_str()), Some(want), "{s}");
        }
        assert!(numbers("version v2 and A4 paper").is_empty());
    }

    #[test]
    fn date_normalisation() {
        let cases = [
            ("5 January 2021", "2021-01-05"),
            ("2021-01-05", "2021-01-05"),
            ("Jan. 5, 2021", "2021-01-05"),
            ("January 5th, 2021", "2021-01-05"),
            ("le 5 janvier 2021", "2021-01-05"),
            ("March 2019", "2019-03"),
        ];
        for (s, want) in cases {
            let (d, _) = dates(s);
            assert_eq!(d.first().map(|x| x.1.as_str()), Some(want), "{s}");
        }
    }
}
