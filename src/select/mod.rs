//! Answer-sentence selection: every sentence of the retrieved passages is a
//! candidate; a small learned model scores how likely each one is to answer
//! the question, from its meaning (embedding cosines, when a model is
//! loaded), its words (IDF-weighted overlap in the sentence and its
//! passage), the kind of fact asked for, its length and its passage's
//! rank. A calibrated probability and a threshold chosen on open data
//! (WikiQA and SQuAD answer triggering) decide between answering and
//! declining; the relevance check
//! sets aside sentences about another year, a failed proposal, or another
//! numbered thing.
//!
//! invariant: selection reads only the question, the retrieved chunks, the
//! query terms' IDF and the vectors it is handed; it never reads the store
//! or the network.
//! invariant: a candidate is a sentence of a retrieved chunk exactly as the
//! chunk holds it (a byte range of the chunk's text).

pub mod features;
pub mod kind;
pub mod model;
pub mod relevance;

pub use features::FeatureSet;
pub use kind::AnswerKind;
pub use model::{SelectorModel, SelectorWeights};

use crate::bm25::QueryTerm;
use crate::retrieve::Retrieved;
use crate::segment::sentence_spans;
use crate::text::{fold_ws, term_spans};
use crate::types::ChunkId;
use features::{PassageInfo, QuestionInfo, SentenceInfo};
use std::collections::{HashMap, HashSet};
use std::ops::Range;

/// Which rules made the candidates. Ingest records, per embedding model,
/// how far it has embedded the candidates under these rules; a change of
/// rules makes the next ingest or reindex embed the new ones.
pub const CANDIDATE_RULES: u32 = 2;

/// What a candidate is: a prose sentence, or one line of a block of lines
/// (a header field, a distribution line, a line item of a table).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    Sentence,
    Line,
}

/// What can be quoted as an answer: prose sentences of at least four
/// terms (not a heading, a table row, a header line or page furniture)
/// and the lines of non-prose blocks that state a fact on their own (see
/// [`candidate_units`]). Ingest embeds exactly these, so selection finds
/// their vectors stored.
pub fn candidate_spans(text: &str) -> Vec<Range<usize>> {
    candidate_units(text).into_iter().map(|(r, _)| r).collect()
}

/// [`candidate_spans`] with each one's unit. A block that is not prose
/// (header fields, a distribution list, line items) is offered line by
/// line: records state names, dates and amounts there ("To: Hon. A. B.,
/// Minister of ...", "Surveyor: ...", "Extended site overheads, 18 weeks
/// at $84,000 per week"), and such a line quotes as it stands.
pub fn candidate_units(text: &str) -> Vec<(Range<usize>, Unit)> {
    let mut out = Vec::new();
    for r in sentence_spans(text) {
        let s = &text[r.clone()];
        if prose_like(s) && term_spans(s).len() >= 4 {
            out.push((r, Unit::Sentence));
            continue;
        }
        let mut at = r.start;
        for line in s.split_inclusive('\n') {
            let start = at + (line.len() - line.trim_start().len());
            at += line.len();
            let core = line.trim();
            if record_line(core) {
                out.push((start..start + core.len(), Unit::Line));
            }
        }
    }
    out
}

/// A line of a block that states something on its own: a field ("Label:
/// value") or a line item with an amount of money, of at least four terms
/// with some words among them; not a rule, a page number, a heading in
/// capitals, a subject or reference line or contact details. A row of
/// bare figures means nothing without its table's headings.
fn record_line(l: &str) -> bool {
    static FIELD: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(r"^[A-Za-z][A-Za-z()/ .-]{0,30}:\s").expect("static regex")
    });
    let letters = l.chars().filter(|c| c.is_alphabetic()).count();
    let upper = l.chars().filter(|c| c.is_uppercase()).count();
    let digits = l.chars().filter(|c| c.is_ascii_digit()).count();
    // Quoted mail ("> Subject: ...") reads as the line it quotes.
    let head = l
        .trim_start_matches(|c: char| c == '>' || c.is_whitespace())
        .to_ascii_lowercase();
    const NOT_FACTS: &[&str] = &[
        "subject:",
        "re:",
        "reference:",
        "memo:",
        "memorandum:",
        "title:",
        "briefing note",
        "ref:",
        "file:",
        "our file",
        "your file",
        "attachment",
        "page ",
        "tel",
        "phone",
        "fax",
        "email",
        "e-mail",
        "direct line",
        "classification",
        "security",
        "[signature]",
        "signed:",
        "per:",
    ];
    (FIELD.is_match(l) || kind::states_money(l))
        && letters >= 10
        && upper * 2 < letters
        && digits <= letters
        && term_spans(l).len() >= 4
        && !l.contains("---")
        && !l.contains("___")
        && !l.contains("===")
        && !l.contains('\u{a9}')
        && !NOT_FACTS.iter().any(|k| head.starts_with(k))
}

/// The text a candidate sentence is embedded as.
pub fn sentence_input(raw: &str) -> String {
    fold_ws(raw)
}

/// Whether a sentence reads as prose rather than a heading, a table row of
/// mostly figures or a rule: mostly lower-case letters, not mostly digits,
/// no long rules.
pub fn prose_like(s: &str) -> bool {
    let letters = s.chars().filter(|c| c.is_alphabetic()).count();
    let upper = s.chars().filter(|c| c.is_uppercase()).count();
    let digits = s.chars().filter(|c| c.is_ascii_digit()).count();
    letters >= 12
        && upper * 2 < letters
        && digits * 3 < letters
        && !s.contains("-----")
        && !s.contains("_____")
        && !s.contains("=====")
        && !s.contains('\u{a9}')
        && !is_header_line(s)
}

/// Distribution, header and signature lines ("cc: ...", "From: ...",
/// "[signature] ...") and blocks of form fields ("Contract: ...",
/// "Owner: ..." on lines of their own) are not statements.
fn is_header_line(s: &str) -> bool {
    static FIELD: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(r"^\s*[A-Z][A-Za-z()/ -]{0,30}:\s").expect("static regex")
    });
    if s.lines().filter(|l| FIELD.is_match(l)).count() >= 2 {
        return true;
    }
    let head = s
        .trim_start_matches(|c: char| c == '>' || c.is_whitespace())
        .to_ascii_lowercase();
    [
        "cc:",
        "bcc:",
        "from:",
        "to:",
        "subject:",
        "re:",
        "date:",
        "sent:",
        "attachments:",
        "[signature]",
        "signed:",
        "prepared for:",
        "prepared by:",
        "approved by:",
        "memo:",
        "memorandum:",
        "title:",
    ]
    .iter()
    .any(|k| head.starts_with(k))
}

/// Vectors for the semantic model, gathered by the caller: the question's,
/// and those of the candidate sentences, titles (both by embedding key of
/// their text) and passages (by chunk).
#[derive(Debug, Clone, Default)]
pub struct Vectors {
    pub question: Vec<f32>,
    pub texts: HashMap<String, Vec<f32>>,
    pub passages: HashMap<ChunkId, Vec<f32>>,
}

impl Vectors {
    /// The vector of `text` (a sentence's embedding input or a title), if
    /// it was gathered.
    pub fn of_text(&self, text: &str) -> Option<&[f32]> {
        self.texts
            .get(&crate::store::embedding_key(text))
            .map(Vec::as_slice)
    }
}

/// One candidate sentence, scored.
#[derive(Debug, Clone)]
pub struct Candidate {
    /// Index of its chunk in the retrieved list.
    pub chunk_idx: usize,
    /// Byte range in the chunk's text.
    pub span: Range<usize>,
    /// The chunk's own text for the span, and the same with white space folded.
    pub raw: String,
    pub text: String,
    /// The model's score and the calibrated probability that it answers.
    pub score: f32,
    pub probability: f32,
    /// The rule-based extractive score (`lexical_fit`: the question's
    /// weighted words in the sentence and its passage), 0 when a veto rules
    /// the candidate out.
    pub rule_score: f32,
    /// Why it does not answer the question, though it may be supported.
    pub off_question: Option<String>,
    /// A line of a block (a field, a line item) rather than a sentence.
    pub line: bool,
    pub terms: HashSet<String>,
}

/// Every candidate, best first, with the decision's threshold.
#[derive(Debug, Clone)]
pub struct Selection {
    /// Which model scored: `semantic-v1` or `lexical-v1`.
    pub model: String,
    pub threshold: f32,
    pub kind: AnswerKind,
    pub candidates: Vec<Candidate>,
}

impl Selection {
    /// The best-ranked candidate that is not set aside.
    pub fn best(&self) -> Option<&Candidate> {
        self.candidates.iter().find(|c| c.off_question.is_none())
    }

    /// The highest probability that a candidate not set aside answers (0
    /// with none): what the decision to answer reads.
    pub fn answer_probability(&self) -> f32 {
        self.candidates
            .iter()
            .filter(|c| c.off_question.is_none())
            .map(|c| c.probability)
            .fold(0.0, f32::max)
    }

    /// Whether to answer: some candidate not set aside is likely enough.
    pub fn answers(&self) -> bool {
        self.answer_probability() >= self.threshold
    }

    /// The sentence an answer opens with: the best-ranked candidate not
    /// set aside (the ranker, trained for order, picks better than the
    /// probability does), a line of a block only when it is likely itself.
    /// `None` when the selection does not answer.
    pub fn opening(&self) -> Option<&Candidate> {
        if !self.answers() {
            return None;
        }
        self.candidates
            .iter()
            .find(|c| c.off_question.is_none() && (!c.line || c.probability >= self.threshold))
    }
}

/// Scores candidate sentences with learned weights.
#[derive(Debug, Clone)]
pub struct Selector {
    pub weights: SelectorWeights,
    /// Answer only at or above this probability instead of the model's
    /// own threshold.
    pub min_probability: Option<f32>,
}

impl Default for Selector {
    fn default() -> Self {
        Selector {
            weights: SelectorWeights::bundled(),
            min_probability: None,
        }
    }
}

/// Every candidate sentence of `retrieved` with its feature row for `set`
/// (unscored): the same sentence in overlapping chunks is one candidate, in
/// the best-ranked chunk that holds it. The question's terms are weighted
/// by how rare they are among the candidates (a word every candidate holds,
/// such as the project's name, tells them apart no better than none), and,
/// for the rule-based score, by their IDF in the index (`query_terms`).
/// Training reads these rows exactly as answering does.
pub fn featurize(
    set: FeatureSet,
    question: &str,
    retrieved: &[Retrieved],
    query_terms: &[QueryTerm],
    vectors: Option<&Vectors>,
) -> (QuestionInfo, Vec<(Candidate, Vec<f32>)>) {
    // The candidates first: their words weigh the question's terms.
    let mut seen: HashSet<(String, String)> = HashSet::new();
    // Per retrieved chunk: its index, its candidates' spans, which of them
    // are kept (not repeats, and lines only for fact questions), and which
    // are lines.
    type Found = (usize, Vec<Range<usize>>, Vec<usize>, Vec<bool>);
    let mut found: Vec<Found> = Vec::new();
    // A line of a block (a header field, a line item) can state a name,
    // a date or an amount, but not a reason or a course of events.
    let facts = AnswerKind::of(question) != AnswerKind::Any;
    for (ci, r) in retrieved.iter().enumerate() {
        let units = candidate_units(&r.chunk.text);
        let spans: Vec<Range<usize>> = units.iter().map(|(r, _)| r.clone()).collect();
        let keep: Vec<usize> = (0..spans.len())
            .filter(|i| facts || units[*i].1 == Unit::Sentence)
            .filter(|i| {
                let folded = fold_ws(&r.chunk.text[spans[*i].clone()]);
                seen.insert((r.chunk.doc_id.0.clone(), folded))
            })
            .collect();
        let lines = units.iter().map(|(_, u)| *u == Unit::Line).collect();
        found.push((ci, spans, keep, lines));
    }
    let idf = features::local_idf(found.iter().flat_map(|(ci, spans, keep, _)| {
        keep.iter()
            .map(move |i| &retrieved[*ci].chunk.text[spans[*i].clone()])
    }));
    let global: HashMap<&str, f32> = query_terms
        .iter()
        .map(|q| (q.term.as_str(), q.idf))
        .collect();
    // A term the index has never seen is as rare as a term can be.
    let unseen = query_terms.iter().map(|q| q.idf).fold(1.0f32, f32::max);
    let q = QuestionInfo::new(question, &idf, &|t| {
        global.get(t).copied().unwrap_or(unseen)
    });
    let qv = vectors.map(|v| v.question.as_slice());
    let mut out = Vec::new();
    for (ci, spans, keep, lines) in &found {
        let r = &retrieved[*ci];
        let text = &r.chunk.text;
        let passage = PassageInfo {
            context: PassageInfo::context_of(&r.chunk.title, text),
            vector: vectors.and_then(|v| v.passages.get(&r.chunk.id).map(Vec::as_slice)),
            title_vector: vectors.and_then(|v| v.of_text(&r.chunk.title)),
            rank: r.rank,
        };
        let vec_of = |r: &Range<usize>| vectors.and_then(|v| v.of_text(&fold_ws(&text[r.clone()])));
        for &i in keep {
            let span = spans[i].clone();
            let raw = &text[span.clone()];
            // What follows the sentence: up to 120 bytes, on a char boundary.
            let mut end = text.len().min(span.end + 120);
            while !text.is_char_boundary(end) {
                end -= 1;
            }
            let after = text[span.end..end].trim_start_matches('.');
            let folded = fold_ws(raw);
            let s = SentenceInfo {
                raw,
                vector: vectors.and_then(|v| v.of_text(&folded)),
                neighbours: [
                    i.checked_sub(1).and_then(|j| vec_of(&spans[j])),
                    spans.get(i + 1).and_then(vec_of),
                ],
            };
            let x = features::features(set, &q, qv, &passage, &s);
            let cand = Candidate {
                chunk_idx: *ci,
                span,
                raw: raw.to_string(),
                text: folded,
                score: 0.0,
                probability: 0.0,
                rule_score: 0.0,
                line: lines[i],
                off_question: relevance::check(
                    question,
                    raw,
                    relevance::Context {
                        date: r.chunk.date.as_deref(),
                        after: Some(after),
                    },
                ),
                terms: term_spans(raw).into_iter().map(|(t, _)| t).collect(),
            };
            out.push((cand, x));
        }
    }
    (q, out)
}

impl Selector {
    /// Score every candidate sentence of `retrieved`. With `vectors`, the
    /// semantic model scores; without, the words-only model.
    pub fn select(
        &self,
        question: &str,
        retrieved: &[Retrieved],
        query_terms: &[QueryTerm],
        vectors: Option<&Vectors>,
    ) -> Selection {
        let set = if vectors.is_some() {
            FeatureSet::Semantic
        } else {
            FeatureSet::Lexical
        };
        let model = self.weights.model(set);
        let (q, rows) = featurize(set, question, retrieved, query_terms, vectors);
        let fit = model.features.iter().position(|f| f == "lexical_fit");
        let mut out: Vec<Candidate> = rows
            .into_iter()
            .map(|(mut c, x)| {
                c.score = model.score(&x);
                c.rule_score = match fit {
                    Some(i) if model.eligible(&x) => x[i],
                    _ => 0.0,
                };
                c.probability = model.probability(&x);
                c
            })
            .collect();
        out.sort_by(|a, b| {
            b.score
                .total_cmp(&a.score)
                .then(a.chunk_idx.cmp(&b.chunk_idx))
                .then(a.span.start.cmp(&b.span.start))
        });
        for (i, c) in out.iter().take(10).enumerate() {
            tracing::debug!(
                rank = i + 1,
                passage = c.chunk_idx + 1,
                score = c.score,
                probability = c.probability,
                sentence = %c.text,
                "selector candidate"
            );
        }
        Selection {
            model: model.name.clone(),
            threshold: self.min_probability.unwrap_or(model.threshold),
            kind: q.kind,
            candidates: out,
        }
    }
}

/// Every embedding input selection may look up for these chunks: their
/// candidate sentences and their titles.
pub fn inputs_of<'a>(chunks: impl IntoIterator<Item = (&'a str, &'a str)>) -> Vec<String> {
    let mut seen = HashSet::new();
    let mut out = Vec::new();
    for (title, text) in chunks {
        if !title.is_empty() && seen.insert(title.to_string()) {
            out.push(title.to_string());
        }
        for r in candidate_spans(text) {
            let s = sentence_input(&text[r]);
            if seen.insert(s.clone()) {
                out.push(s);
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_lines_are_not_prose() {
        assert!(!prose_like(
            "cc: Chair, Public Accounts Committee, Deputy Minister"
        ));
        assert!(!prose_like("BRINDLEMOOR AMENDMENT No. 4 NEW RAMP"));
        assert!(!prose_like(
            "Contract: MPW-C-2019-017 - Pier 3 rebuild\nOwner: the Province, as represented by the Minister\nAmendment date: 9 February 2024"
        ));
        assert!(!prose_like(
            "[signature] Odile Farrant Deputy Minister of Public Works"
        ));
        assert!(prose_like(
            "The board approved the amendment on 3 June 2020."
        ));
    }

    #[test]
    fn candidates_are_byte_ranges_of_the_chunk() {
        let text = "PIER 3 BUDGET\n\nThe budget rose to $49.0 million in April 2020.\n\n\
                    cc: Deputy Minister\n\nThe board met twice that month to discuss it.";
        let spans = candidate_spans(text);
        let got: Vec<&str> = spans.iter().map(|r| &text[r.clone()]).collect();
        assert_eq!(
            got,
            vec![
                "The budget rose to $49.0 million in April 2020.",
                "The board met twice that month to discuss it."
            ]
        );
    }

    #[test]
    fn a_block_of_fields_is_offered_line_by_line() {
        let text = "Report date:    June 22, 2018\n\
                    Surveyor:       Aldric Penhale, Certified Marine Surveyor\n\
                    Reviewed by:    Morwenna Trask, Senior Marine Surveyor\n\
                    Subject:        Ramp 3A condition survey, Pier 3 terminal\n\
                    Page 1 of 3\n";
        let units = candidate_units(text);
        let got: Vec<(&str, Unit)> = units.iter().map(|(r, u)| (&text[r.clone()], *u)).collect();
        assert_eq!(
            got,
            vec![
                ("Report date:    June 22, 2018", Unit::Line),
                (
                    "Surveyor:       Aldric Penhale, Certified Marine Surveyor",
                    Unit::Line
                ),
                (
                    "Reviewed by:    Morwenna Trask, Senior Marine Surveyor",
                    Unit::Line
                ),
            ]
        );
        // A line item states an amount; a row of bare figures does not.
        let items = "2.1 The Contract Price is increased by $1,860,000, made up of:\n\n\
                     Extended site overheads, 18 weeks at $84,000 per week   $1,512,000\n\
                     Total   $1,860,000   $348,000   18.0%\n\
                     Harbour Road traffic management   0.60   1.00   0.40\n";
        let got: Vec<&str> = candidate_spans(items)
            .iter()
            .map(|r| &items[r.clone()])
            .collect();
        assert!(
            got.contains(&"Extended site overheads, 18 weeks at $84,000 per week   $1,512,000"),
            "{got:?}"
        );
        assert!(!got.iter().any(|s| s.starts_with("Total")), "{got:?}");
        assert!(!got.iter().any(|s| s.starts_with("Harbour")), "{got:?}");
    }
}
