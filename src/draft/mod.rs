//! Drafters write an answer as sentences with citations. Every draft goes
//! through the verifier before anything is shown.
//!
//! The extractive drafter (the default) needs no model: it quotes, verbatim,
//! the candidate sentences the selector (`crate::select`) finds likely
//! enough to answer, best first and diverse (MMR). It declines when none
//! clears the selector's calibrated threshold, with a reason that says
//! which test failed, and sets aside likely sentences that the relevance
//! check finds are about something else.
//!
//! invariant: a drafter never reads the store or the network directly; it
//! sees only the question, the retrieved chunks and the selector's scores.

use crate::bm25::QueryTerm;
use crate::error::Result;
use crate::retrieve::Retrieved;
use crate::select::{AnswerKind, Candidate, Selection, Selector};
use crate::verify::{Draft, DraftCitation, DraftSentence};
use std::collections::HashSet;

pub mod model;
pub use model::{ModelDraft, ModelDraftConfig, ModelDrafter};

/// Everything a drafter may look at.
pub struct DraftRequest<'a> {
    pub question: &'a str,
    pub retrieved: &'a [Retrieved],
    pub query_terms: &'a [QueryTerm],
    /// The selector's scored candidates. Without one, the extractive
    /// drafter scores with the words-only model itself.
    pub selection: Option<&'a Selection>,
}

/// Writes a draft answer from retrieved chunks.
pub trait Drafter {
    fn name(&self) -> String;
    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft>;
}

/// Settings of the extractive drafter.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ExtractiveConfig {
    /// Most sentences in an answer. (The probability an answer needs is
    /// the selection's threshold: `Selector::min_probability` changes it.)
    pub max_sentences: usize,
    /// MMR trade-off between relevance (1.0) and diversity (0.0).
    pub lambda: f32,
    /// Most sentences set aside by the relevance check that are listed.
    pub max_set_aside: usize,
}

impl Default for ExtractiveConfig {
    fn default() -> Self {
        ExtractiveConfig {
            max_sentences: 3,
            lambda: 0.7,
            max_set_aside: 3,
        }
    }
}

#[derive(Debug, Default, Clone, Copy)]
pub struct Extractive {
    pub cfg: ExtractiveConfig,
}

/// The rule-based score at which a sentence may follow the first one in an
/// answer (the rule-based drafter's own threshold before the selector).
pub const RULE_FLOOR: f32 = 0.40;

fn jaccard(a: &HashSet<String>, b: &HashSet<String>) -> f32 {
    let inter = a.intersection(b).count() as f32;
    let union = a.union(b).count() as f32;
    if union == 0.0 { 0.0 } else { inter / union }
}

/// Why nothing was given as an answer, saying which test failed. Every
/// clause is a fact about these candidates.
pub fn decline_reason(sel: &Selection, retrieved: usize) -> String {
    if retrieved == 0 {
        return "no record matched the question".into();
    }
    if sel.candidates.is_empty() {
        return "the retrieved passages hold no full sentence to quote (only headings, tables or header lines)".into();
    }
    // Likely enough, but every such sentence was set aside; or every
    // sentence was.
    let set_aside = match sel.best() {
        None => sel.candidates.first(),
        Some(_) => sel
            .candidates
            .iter()
            .find(|c| c.probability >= sel.threshold),
    };
    if let Some(c) = set_aside {
        return format!(
            "the sentences that come closest do not answer this question: {}",
            c.off_question.as_deref().unwrap_or("set aside")
        );
    }
    let mut reason = format!(
        "no retrieved sentence is likely enough to answer it (the closest is {:.0}% likely; an answer needs {:.0}%)",
        sel.answer_probability() * 100.0,
        sel.threshold * 100.0
    );
    let kind = match sel.kind {
        AnswerKind::Money => Some("an amount of money"),
        AnswerKind::Quantity => Some("a number"),
        AnswerKind::Date => Some("a date"),
        AnswerKind::Time => Some("a time of day"),
        AnswerKind::Name => Some("a name"),
        AnswerKind::Any => None,
    };
    if let Some(k) = kind {
        // Any such fact counts here, even one the question gives.
        let stating = sel
            .candidates
            .iter()
            .filter(|c| sel.kind.satisfied_by(&c.raw, ""))
            .count();
        if stating == 0 {
            reason.push_str(&format!(
                "; none of the {} sentences read states {k}",
                sel.candidates.len()
            ));
        }
    }
    reason
}

impl Extractive {
    pub fn new(cfg: ExtractiveConfig) -> Self {
        Extractive { cfg }
    }

    /// A candidate as a drafted sentence quoting itself.
    fn quote(&self, req: &DraftRequest<'_>, c: &Candidate) -> DraftSentence {
        DraftSentence {
            text: c.text.clone(),
            citations: vec![DraftCitation {
                chunk_id: req.retrieved[c.chunk_idx].chunk.id,
                quote: c.raw.clone(),
            }],
        }
    }
}

impl Drafter for Extractive {
    fn name(&self) -> String {
        "extractive".into()
    }

    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft> {
        let own;
        let sel = match req.selection {
            Some(s) => s,
            None => {
                own =
                    Selector::default().select(req.question, req.retrieved, req.query_terms, None);
                &own
            }
        };
        let threshold = sel.threshold;
        // Likely sentences the relevance check set aside, listed apart.
        let set_aside: Vec<(DraftSentence, String)> = sel
            .candidates
            .iter()
            .filter(|c| c.probability >= threshold)
            .filter_map(|c| Some((self.quote(req, c), c.off_question.clone()?)))
            .take(self.cfg.max_set_aside)
            .collect();
        let Some(first) = sel.opening() else {
            return Ok(Draft {
                sentences: vec![],
                abstain: Some(decline_reason(sel, req.retrieved.len())),
                model: None,
                set_aside,
            });
        };
        // The best-ranked sentence first. Then maximal marginal relevance
        // over the other likely sentences and those the rule-based score
        // rates highly (the question's own words, in the records' wording),
        // so extra sentences add something. A line of a block (a header
        // field, a line item) follows only when it is likely itself: its
        // words are mostly names and labels, which the rule-based score
        // over-rates.
        let pool: Vec<&Candidate> = sel
            .candidates
            .iter()
            .filter(|c| c.off_question.is_none())
            .filter(|c| c.probability >= threshold || (!c.line && c.rule_score >= RULE_FLOOR))
            .collect();
        let relevance = |c: &Candidate| c.probability.max(c.rule_score);
        let mut chosen: Vec<&Candidate> = vec![first];
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
                        self.cfg.lambda * relevance(c) - (1.0 - self.cfg.lambda) * sim,
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
            sentences: chosen.into_iter().map(|c| self.quote(req, c)).collect(),
            abstain: None,
            model: None,
            set_aside,
        })
    }
}
