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
}

impl Default for ExtractiveConfig {
    fn default() -> Self {
        ExtractiveConfig {
            top_chunks: 8,
            max_sentences: 3,
            min_score: 0.5,
            lambda: 0.7,
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
        let wants_number = wants_number(req.question);
        let mut seen: HashSet<(String, String)> = HashSet::new();
        let mut out = Vec::new();
        for (ci, r) in req.retrieved.iter().take(self.cfg.top_chunks).enumerate() {
            let text = &r.chunk.text;
            for span in sentence_spans(text) {
                let raw = &text[span];
                let spans = term_spans(raw);
                if spans.len() < 4 {
                    continue; // headings, header lines, page furniture
                }
                let folded = fold_ws(raw);
                if !seen.insert((r.chunk.doc_id.0.clone(), folded.clone())) {
                    continue; // the same sentence in an overlapping chunk
                }
                let mut matched: HashSet<&str> = HashSet::new();
                let mut positions = Vec::new();
                for (i, (t, _)) in spans.iter().enumerate() {
                    if weights.contains_key(t.as_str()) {
                        matched.insert(t.as_str());
                        positions.push(i);
                    }
                }
                if matched.is_empty() {
                    continue;
                }
                let coverage: f32 = matched.iter().map(|t| weights[t]).sum::<f32>() / total;
                let window = positions.last().unwrap() - positions.first().unwrap() + 1;
                let proximity = positions.len() as f32 / window as f32;
                let mut score = coverage * (0.85 + 0.15 * proximity);
                if wants_number && raw.chars().any(|c| c.is_ascii_digit()) {
                    score += 0.05;
                }
                score += 0.03 / r.rank as f32;
                out.push(Candidate {
                    chunk_idx: ci,
                    text: folded,
                    raw: raw.to_string(),
                    score,
                    terms: spans.into_iter().map(|(t, _)| t).collect(),
                });
            }
        }
        out.sort_by(|a, b| b.score.total_cmp(&a.score));
        out
    }
}

fn wants_number(q: &str) -> bool {
    let q = q.to_lowercase();
    [
        "how much",
        "how many",
        "what amount",
        "cost",
        "when",
        "what date",
        "how long",
        "what year",
        "percentage",
        "how big",
    ]
    .iter()
    .any(|k| q.contains(k))
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
            return Ok(Draft {
                sentences: vec![],
                abstain: Some(if req.retrieved.is_empty() {
                    "no record matched the question".into()
                } else {
                    format!(
                        "the retrieved records do not answer this question (best sentence scored {best:.2}, below the {:.2} threshold)",
                        self.cfg.min_score
                    )
                }),
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
        })
    }
}
