//! Pseudo-relevance feedback for BM25: RM3 (Abdul-Jaleel et al., "UMass at
//! TREC 2004: Novelty and HARD", 2004). The first BM25 pass's top passages
//! are taken as relevant; the words they use most, weighted by how well
//! each passage scored, are added to the query, which runs again. It finds
//! passages in other words than the question's when the first pass found
//! some in both.
//!
//! invariant: expansion reads only the question and the texts and scores
//! it is handed; the original terms always keep at least `original` of the
//! query's weight.

use crate::text::{is_stopword, term_spans};
use std::collections::HashMap;

/// RM3's settings. The defaults are the usual ones (Anserini's: 10
/// passages, 10 terms, half the weight to the original query; common
/// practice).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Feedback {
    /// How many of the first pass's passages are read.
    pub docs: usize,
    /// How many of their terms join the query.
    pub terms: usize,
    /// The original query's share of the weight (RM3's lambda).
    pub original: f32,
}

impl Default for Feedback {
    fn default() -> Self {
        Feedback {
            docs: 10,
            terms: 10,
            original: 0.5,
        }
    }
}

/// Content terms of `text` (analysed, stop words and bare numbers left out).
fn content(text: &str) -> Vec<String> {
    term_spans(text)
        .into_iter()
        .filter(|(t, r)| {
            t.len() >= 2
                && !t.chars().all(|c| c.is_ascii_digit())
                && !is_stopword(&text[r.clone()].to_lowercase())
        })
        .map(|(t, _)| t)
        .collect()
}

/// The expanded query: each term with its weight, the weights summing to 1.
/// `passages` are the first pass's texts with their BM25 scores, best first.
///
/// RM1: P(w|R) = sum over passages D of P(w|D) * P(D|Q), with P(w|D) the
/// term's share of D's terms and P(D|Q) D's score over the scores' sum;
/// the top `terms` are kept and renormalised. RM3 mixes in the question:
/// `original` * P(w|Q) + (1 - `original`) * P(w|R).
pub fn expand(question: &str, passages: &[(&str, f32)], fb: &Feedback) -> Vec<(String, f32)> {
    let q = content(question);
    let used: Vec<&(&str, f32)> = passages.iter().take(fb.docs).collect();
    let total: f32 = used.iter().map(|(_, s)| s.max(0.0)).sum();
    let mut rm1: HashMap<String, f32> = HashMap::new();
    if total > 0.0 {
        for (text, score) in used {
            let terms = content(text);
            if terms.is_empty() {
                continue;
            }
            let each = score.max(0.0) / total / terms.len() as f32;
            for t in terms {
                *rm1.entry(t).or_default() += each;
            }
        }
    }
    let mut top: Vec<(String, f32)> = rm1.into_iter().collect();
    top.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    top.truncate(fb.terms);
    let mass: f32 = top.iter().map(|(_, w)| w).sum();
    // With nothing to learn from, the question keeps all the weight; with
    // no content term in the question, the feedback has it all.
    let (mine, theirs) = match (q.is_empty(), mass > 0.0) {
        (_, false) => (1.0, 0.0),
        (true, true) => (0.0, 1.0),
        (false, true) => (fb.original, 1.0 - fb.original),
    };
    let mut out: HashMap<String, f32> = HashMap::new();
    for t in &q {
        *out.entry(t.clone()).or_default() += mine / q.len() as f32;
    }
    for (t, w) in top {
        *out.entry(t).or_default() += theirs * w / mass;
    }
    let mut v: Vec<(String, f32)> = out.into_iter().collect();
    v.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand from RM1/RM3 as the paper defines them.
    #[test]
    fn rm3_weights_worked_by_hand() {
        let fb = Feedback {
            docs: 2,
            terms: 2,
            original: 0.5,
        };
        // Passage A (score 3): ferry ferry ramp; B (score 1): ramp dredging.
        // P(D|Q): A 0.75, B 0.25. RM1: ferry 0.75*2/3 = 0.5; ramp
        // 0.75/3 + 0.25/2 = 0.375; dredging 0.125. Top two: ferry, ramp,
        // renormalised to 0.5714 and 0.4286, times 0.5. The question's one
        // content term, "budget", has 0.5.
        let got = expand(
            "the budget",
            &[("ferry ferry ramp", 3.0), ("ramp dredging", 1.0)],
            &fb,
        );
        let want = [("budget", 0.5), ("ferri", 0.2857), ("ramp", 0.2143)];
        assert_eq!(got.len(), want.len(), "{got:?}");
        for ((t, w), (wt, ww)) in got.iter().zip(want) {
            assert_eq!(t, wt);
            assert!((w - ww).abs() < 1e-3, "{t}: {w} against {ww}");
        }
        let sum: f32 = got.iter().map(|(_, w)| w).sum();
        assert!((sum - 1.0).abs() < 1e-5);
    }

    #[test]
    fn no_feedback_leaves_the_question() {
        let got = expand("pier budget", &[], &Feedback::default());
        assert_eq!(
            got.iter().map(|(t, _)| t.as_str()).collect::<Vec<_>>(),
            ["budget", "pier"]
        );
        assert!((got[0].1 - 0.5).abs() < 1e-6 && (got[1].1 - 0.5).abs() < 1e-6);
    }
}
