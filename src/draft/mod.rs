//! Drafters write an answer as sentences with citations. Every draft goes
//! through the verifier before anything is shown.
//!
//! The extractive drafter (the default) needs no model: it picks the
//! sentences from the top chunks that best answer the question — query-term
//! coverage weighted by IDF, term proximity, and diversity (MMR) — and quotes
//! each one verbatim. It abstains when no sentence scores above a threshold.
//!
//! invariant: a drafter never reads the store or the network directly; it
//! sees only the question and the retrieved chunks.

use crate::bm25::QueryTerm;
use crate::error::Result;
use crate::retrieve::Retrieved;
use crate::segment::sentence_spans;
use crate::text::{content_terms, fold_ws, term_spans};
use crate::verify::{Draft, DraftCitation, DraftSentence};
use std::collections::{HashMap, HashSet};

pub mod model;
pub use model::{ModelDraft, ModelDraftConfig, ModelDrafter};

/// Everything a drafter may look at.
pub struct DraftRequest<'a> {
    pub question: &'a str,
    pub retrieved: &'a [Retrieved],
    pub query_terms: &'a [QueryTerm],
}

/// Writes a draft answer from retrieved chunks.
pub trait Drafter {
    fn name(&self) -> String;
    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft>;
}

/// Settings of the extractive drafter.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ExtractiveConfig {
    /// How many of the top chunks to take sentences from.
    pub top_chunks: usize,
    /// Most sentences in an answer.
    pub max_sentences: usize,
    /// Abstain when the best sentence scores below this (0..1).
    pub min_score: f32,
    /// MMR trade-off between relevance (1.0) and diversity (0.0).
    pub lambda: f32,
    /// Credit (0..1) for a query term found in the sentence's chunk or its
    /// document title but not in the sentence itself: the context that
    /// makes "the options memo" or "in 2019" true of the sentence.
    pub context_weight: f32,
    /// Share (0..1) of the question's weighted terms that the sentence itself
    /// must contain, whatever its context adds.
    pub min_sentence_coverage: f32,
}

impl Default for ExtractiveConfig {
    fn default() -> Self {
        ExtractiveConfig {
            top_chunks: 8,
            max_sentences: 3,
            min_score: 0.40,
            lambda: 0.7,
            context_weight: 0.75,
            min_sentence_coverage: 0.2,
        }
    }
}

#[derive(Debug, Default, Clone, Copy)]
pub struct Extractive {
    pub cfg: ExtractiveConfig,
}

/// A candidate sentence with its score.
#[derive(Debug, Clone)]
pub struct Candidate {
    pub chunk_idx: usize,
    pub text: String,
    pub raw: String,
    pub score: f32,
    terms: HashSet<String>,
}

impl Extractive {
    pub fn new(cfg: ExtractiveConfig) -> Self {
        Extractive { cfg }
    }

    /// Score every sentence of the top chunks.
    pub fn candidates(&self, req: &DraftRequest<'_>) -> Vec<Candidate> {
        let content: HashSet<String> = content_terms(req.question).into_iter().collect();
        let weights: HashMap<&str, f32> = req
            .query_terms
            .iter()
            .filter(|q| content.contains(&q.term))
            .map(|q| (q.term.as_str(), q.idf.max(0.05)))
            .collect();
        let total: f32 = weights.values().sum();
        if total <= 0.0 {
            return Vec::new();
        }
        let wants = AnswerKind::of(req.question);
        // The same sentence in overlapping chunks is one candidate, scored in
        // whichever chunk gives it the most context, so the result does not
        // depend on which of the overlapping chunks was retrieved first.
        let mut seen: HashMap<(String, String), usize> = HashMap::new();
        let mut out: Vec<Candidate> = Vec::new();
        // The top chunks of the final order, and any chunk BM25 alone ranks
        // that high (hybrid retrieval appends those): this drafter scores by
        // the question's words, so it reads every chunk lexical search puts
        // at the top.
        let hybrid = req.retrieved.iter().any(|r| r.retriever == "hybrid");
        let lexical_top = |r: &Retrieved| {
            hybrid
                && r.signals.iter().any(|s| {
                    s.retriever == "bm25" && s.rank.is_some_and(|x| x <= self.cfg.top_chunks)
                })
        };
        for (ci, r) in req
            .retrieved
            .iter()
            .enumerate()
            .filter(|(i, r)| *i < self.cfg.top_chunks || lexical_top(r))
        {
            let text = &r.chunk.text;
            let context: HashSet<String> = crate::text::terms(&format!("{} {text}", r.chunk.title))
                .into_iter()
                .filter(|t| weights.contains_key(t.as_str()))
                .collect();
            for span in sentence_spans(text) {
                let raw = &text[span];
                let spans = term_spans(raw);
                if spans.len() < 4 || !prose_like(raw) {
                    continue; // headings, header lines, tables, page furniture
                }
                let folded = fold_ws(raw);
                let key = (r.chunk.doc_id.0.clone(), folded.clone());
                let mut matched: HashSet<&str> = HashSet::new();
                let mut positions = Vec::new();
                for (i, (t, _)) in spans.iter().enumerate() {
                    if weights.contains_key(t.as_str()) {
                        matched.insert(t.as_str());
                        positions.push(i);
                    }
                }
                if matched.is_empty() || !wants.satisfied_by(raw, req.question) {
                    continue;
                }
                let in_context: f32 = context
                    .iter()
                    .filter(|t| !matched.contains(t.as_str()))
                    .map(|t| weights[t.as_str()])
                    .sum();
                let own = matched.iter().map(|t| weights[t]).sum::<f32>() / total;
                if own < self.cfg.min_sentence_coverage {
                    continue;
                }
                let coverage = own + self.cfg.context_weight * in_context / total;
                let window = positions.last().unwrap() - positions.first().unwrap() + 1;
                let proximity = positions.len() as f32 / window as f32;
                // Long sentences match more terms by chance and quote badly.
                let words = spans.len() as f32;
                let length = if words > LONG_SENTENCE {
                    (LONG_SENTENCE / words).sqrt()
                } else {
                    1.0
                };
                let mut score = coverage * (0.85 + 0.15 * proximity) * length;
                score += 0.03 / r.rank as f32;
                let cand = Candidate {
                    chunk_idx: ci,
                    text: folded,
                    raw: raw.to_string(),
                    score,
                    terms: spans.into_iter().map(|(t, _)| t).collect(),
                };
                match seen.get(&key) {
                    Some(&i) if out[i].score >= score => {}
                    Some(&i) => out[i] = cand,
                    None => {
                        seen.insert(key, out.len());
                        out.push(cand);
                    }
                }
            }
        }
        out.sort_by(|a, b| b.score.total_cmp(&a.score));
        out
    }
}

/// Sentences longer than this many terms are scored down.
const LONG_SENTENCE: f32 = 45.0;

/// Whether a sentence reads as prose rather than a heading, a table row or
/// a rule: mostly lower-case letters, not mostly digits, no long rules.
fn prose_like(s: &str) -> bool {
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

/// Distribution and header lines ("cc: ...", "From: ...") are not statements.
fn is_header_line(s: &str) -> bool {
    let head = s.trim_start().to_ascii_lowercase();
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
    ]
    .iter()
    .any(|k| head.starts_with(k))
}

/// What kind of answer a question asks for, when its wording says so.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnswerKind {
    /// An amount of money: the sentence must state a currency amount the question does not.
    Money,
    /// A count, quantity or duration: the sentence must state a number the
    /// question does not, outside any date, time of day or label ("Pier 3").
    Quantity,
    /// A date: the sentence must state a date or year the question does not.
    Date,
    Any,
}

impl AnswerKind {
    pub fn of(question: &str) -> AnswerKind {
        let q = format!(" {} ", question.to_lowercase());
        const MONEY: &[&str] = &[
            "what amount",
            "how much money",
            " cost",
            " price",
            " paid ",
            " pay ",
            " worth",
            " fee ",
            " fees ",
            "salary",
            " spend",
            " spent",
        ];
        const DATE: &[&str] = &[
            " when ",
            "what date",
            "which date",
            "what day",
            "what year",
            "which year",
        ];
        const QUANTITY: &[&str] = &[
            "how much",
            "how many",
            "how long",
            "how far",
            "how old",
            "how big",
            "how large",
            "what percentage",
            "what share",
            "what proportion",
        ];
        if MONEY.iter().any(|k| q.contains(k)) {
            AnswerKind::Money
        } else if DATE.iter().any(|k| q.contains(k)) {
            AnswerKind::Date
        } else if QUANTITY.iter().any(|k| q.contains(k)) {
            AnswerKind::Quantity
        } else {
            AnswerKind::Any
        }
    }

    /// Whether `sentence` can answer a question of this kind; `question` is
    /// the question itself, whose own figures do not count as an answer.
    pub fn satisfied_by(self, sentence: &str, question: &str) -> bool {
        let fresh = |found: HashSet<String>, asked: HashSet<String>| {
            found.iter().any(|n| !asked.contains(n))
        };
        match self {
            AnswerKind::Any => true,
            AnswerKind::Quantity => fresh(quantities(sentence), quantities(question)),
            AnswerKind::Money => fresh(money(sentence), money(question)),
            AnswerKind::Date => fresh(dates_and_years(sentence), dates_and_years(question)),
        }
    }
}

fn number_re() -> &'static regex::Regex {
    static RE: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(
            r"\b\d{1,2}:\d{2}\b|(?:[$€£]\s?)?\d[\d,]*(?:\.\d+)?(?:\s?(?:million|billion|thousand|dollars|m\b|k\b))?",
        )
        .expect("static regex")
    });
    &RE
}

fn digits(m: &str) -> String {
    m.chars()
        .filter(|c| c.is_ascii_digit() || *c == '.')
        .collect::<String>()
        .trim_end_matches('.')
        .to_string()
}

/// Numbers that state a quantity: not in a date, not a time of day, and not
/// a label such as "Pier 3", "No. 4" or "90X".
fn quantities(s: &str) -> HashSet<String> {
    const WORDS: &[&str] = &[
        "two",
        "three",
        "four",
        "five",
        "six",
        "seven",
        "eight",
        "nine",
        "ten",
        "eleven",
        "twelve",
        "twenty",
        "thirty",
        "forty",
        "fifty",
        "hundred",
        "hundreds",
        "thousand",
        "thousands",
        "million",
        "millions",
        "dozen",
        "half",
        "quarter",
        "third",
    ];
    let (_, rest) = crate::verify::dates(s);
    let mut out: HashSet<String> = number_re()
        .find_iter(&rest)
        .filter(|m| {
            let before = rest[..m.start()].trim_end();
            let after = rest[m.end()..].chars().next();
            let glued = rest[..m.start()]
                .chars()
                .next_back()
                .is_some_and(|c| !c.is_whitespace() && !matches!(c, '(' | '"' | '\u{201C}'));
            let label = glued
                || before
                    .rsplit(|c: char| c.is_whitespace())
                    .next()
                    .is_some_and(|w| {
                        w.chars().next().is_some_and(char::is_uppercase) || w.ends_with('.')
                    });
            let year = m.as_str().len() == 4 && is_year(m.as_str());
            !m.as_str().contains(':') && !after.is_some_and(char::is_alphabetic) && !label && !year
        })
        .map(|m| digits(m.as_str()))
        .filter(|d| !d.is_empty())
        .collect();
    for w in rest.split(|c: char| !c.is_alphabetic()) {
        let w = w.to_lowercase();
        if WORDS.contains(&w.as_str()) {
            out.insert(w);
        }
    }
    out
}

fn is_year(s: &str) -> bool {
    s.parse::<u32>().is_ok_and(|y| (1500..2200).contains(&y))
}

/// Currency amounts, as digit strings.
fn money(s: &str) -> HashSet<String> {
    number_re()
        .find_iter(s)
        .map(|m| m.as_str())
        .filter(|m| {
            m.starts_with(['$', '€', '£'])
                || m.ends_with("million")
                || m.ends_with("billion")
                || m.ends_with("dollars")
        })
        .map(digits)
        .collect()
}

/// Dates (ISO keys) and four-digit years.
fn dates_and_years(s: &str) -> HashSet<String> {
    static YEAR: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(r"\b(1[5-9]\d\d|2[01]\d\d)s?\b").expect("static regex")
    });
    let (ds, rest) = crate::verify::dates(s);
    let mut out: HashSet<String> = ds.into_iter().map(|(_, k)| k).collect();
    out.extend(YEAR.find_iter(&rest).map(|m| m.as_str().to_string()));
    out
}

fn jaccard(a: &HashSet<String>, b: &HashSet<String>) -> f32 {
    let inter = a.intersection(b).count() as f32;
    let union = a.union(b).count() as f32;
    if union == 0.0 { 0.0 } else { inter / union }
}

impl Drafter for Extractive {
    fn name(&self) -> String {
        "extractive".into()
    }

    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft> {
        let cands = self.candidates(req);
        let best = cands.first().map(|c| c.score).unwrap_or(0.0);
        if best < self.cfg.min_score {
            let reason = if req.retrieved.is_empty() {
                "no record matched the question".to_string()
            } else if cands.is_empty() {
                match AnswerKind::of(req.question) {
                    AnswerKind::Money => "no retrieved sentence states an amount of money the question does not already give".into(),
                    AnswerKind::Quantity => "no retrieved sentence states a number the question does not already give".into(),
                    AnswerKind::Date => "no retrieved sentence states a date the question does not already give".into(),
                    AnswerKind::Any => "no retrieved sentence shares enough of the question's words".into(),
                }
            } else {
                format!(
                    "no sentence in the retrieved records answers it closely enough (closest match {best:.2}; an answer needs {:.2})",
                    self.cfg.min_score
                )
            };
            return Ok(Draft {
                sentences: vec![],
                abstain: Some(reason),
                model: None,
            });
        }
        // Maximal marginal relevance over the candidates that still clear a
        // relaxed bar, so extra sentences add something and stay relevant.
        let pool: Vec<&Candidate> = cands
            .iter()
            .filter(|c| c.score >= self.cfg.min_score * 0.8)
            .collect();
        let mut chosen: Vec<&Candidate> = Vec::new();
        while chosen.len() < self.cfg.max_sentences {
            let next = pool
                .iter()
                .filter(|c| !chosen.iter().any(|s| std::ptr::eq(*s, **c)))
                .map(|c| {
                    let sim = chosen
                        .iter()
                        .map(|s| jaccard(&s.terms, &c.terms))
                        .fold(0.0f32, f32::max);
                    (
                        c,
                        sim,
                        self.cfg.lambda * c.score - (1.0 - self.cfg.lambda) * sim,
                    )
                })
                .filter(|(_, sim, _)| *sim < 0.8) // near-duplicates add nothing
                .max_by(|a, b| a.2.total_cmp(&b.2));
            match next {
                Some((c, _, _)) => chosen.push(c),
                None => break,
            }
        }
        Ok(Draft {
            sentences: chosen
                .into_iter()
                .map(|c| DraftSentence {
                    text: c.text.clone(),
                    citations: vec![DraftCitation {
                        chunk_id: req.retrieved[c.chunk_idx].chunk.id,
                        quote: c.raw.clone(),
                    }],
                })
                .collect(),
            abstain: None,
            model: None,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn answer_kinds_from_question_wording() {
        let cases = [
            (
                "What amount did the contractor claim for the delay?",
                AnswerKind::Money,
            ),
            (
                "What does the yearly cost of the buses come to?",
                AnswerKind::Money,
            ),
            (
                "How many passengers took the first sailing?",
                AnswerKind::Quantity,
            ),
            ("When was the ramp closed?", AnswerKind::Date),
            ("By what date was the work due?", AnswerKind::Date),
            ("Which option did the engineers recommend?", AnswerKind::Any),
        ];
        for (q, want) in cases {
            assert_eq!(AnswerKind::of(q), want, "{q}");
        }
    }

    #[test]
    fn a_sentence_must_add_the_kind_of_fact_asked_for() {
        // (question, sentence, can it answer?)
        let cases = [
            (
                "How many passengers sailed on 22 April 2024?",
                "The terminal reopened on 22 April 2024 with the first sailing at 06:15.",
                false,
            ),
            (
                "How many passengers sailed on 22 April 2024?",
                "The rebuilt Pier 3 terminal reopened after a closure that began on 2 May 2022.",
                false,
            ),
            (
                "How many passengers sailed on 22 April 2024?",
                "On 22 April 2024, 1,240 passengers sailed.",
                true,
            ),
            (
                "How many bids were received?",
                "Four firms submitted bids.",
                true,
            ),
            (
                "How many passengers sailed?",
                "The terminal is expected to reopen in the autumn of 2023.",
                false,
            ),
            (
                "What amount did Brindlemoor claim in October 2023?",
                "The claim covers 18 weeks of delay.",
                false,
            ),
            (
                "What amount did Brindlemoor claim in October 2023?",
                "The claim is for $1.86 million.",
                true,
            ),
            (
                "When was the ramp closed?",
                "The ramp was closed to vehicles on 14 March 2022.",
                true,
            ),
            (
                "When was the ramp closed?",
                "The ramp was closed after the inspection.",
                false,
            ),
            ("What happened in 2019?", "Anything at all.", true),
        ];
        for (q, s, want) in cases {
            assert_eq!(AnswerKind::of(q).satisfied_by(s, q), want, "{q} / {s}");
        }
    }

    #[test]
    fn header_lines_are_not_prose() {
        assert!(!prose_like(
            "cc: Chair, Public Accounts Committee, Deputy Minister"
        ));
        assert!(!prose_like("BRINDLEMOOR AMENDMENT No. 4 NEW RAMP"));
        assert!(prose_like(
            "The board approved the amendment on 3 June 2020."
        ));
    }
}
