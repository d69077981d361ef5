//! Reciprocal rank fusion (Cormack, Clarke and Büttcher, "Reciprocal Rank
//! Fusion outperforms Condorcet and individual Rank Learning Methods",
//! SIGIR 2009): an item's fused score is the sum over ranked lists of
//! `weight / (k + rank)`, with ranks counted from 1 and k = 60 in the paper.
//!
//! invariant: the fused order depends only on the ranks (and weights), never
//! on the retrievers' raw scores, so BM25 and cosine scores need no scaling.
//! invariant: ties are broken by the best single rank, then by the id, so
//! the order is deterministic.

use serde::Serialize;
use std::collections::HashMap;

/// The constant k of the paper.
pub const RRF_K: f64 = 60.0;

/// How much each retriever counts in the fused score.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Weights {
    pub bm25: f64,
    pub dense: f64,
}

impl Default for Weights {
    fn default() -> Self {
        Weights {
            bm25: 1.0,
            dense: 1.0,
        }
    }
}

/// One item of a fused list.
#[derive(Debug, Clone, PartialEq)]
pub struct Fused {
    pub id: u64,
    pub score: f64,
    /// The item's 1-based rank in each input list, `None` when absent.
    pub ranks: Vec<Option<usize>>,
}

/// Fuse ranked lists of ids (best first), each with a weight. An id repeated
/// within one list counts at its first (best) position only.
pub fn rrf(lists: &[(f64, &[u64])], k: f64) -> Vec<Fused> {
    let mut by_id: HashMap<u64, Fused> = HashMap::new();
    for (li, (weight, ids)) in lists.iter().enumerate() {
        for (pos, &id) in ids.iter().enumerate() {
            let e = by_id.entry(id).or_insert_with(|| Fused {
                id,
                score: 0.0,
                ranks: vec![None; lists.len()],
            });
            if e.ranks[li].is_none() {
                let rank = pos + 1;
                e.ranks[li] = Some(rank);
                e.score += weight / (k + rank as f64);
            }
        }
    }
    let mut out: Vec<Fused> = by_id.into_values().collect();
    out.sort_by(|a, b| {
        b.score
            .total_cmp(&a.score)
            .then_with(|| best_rank(a).cmp(&best_rank(b)))
            .then(a.id.cmp(&b.id))
    });
    out
}

fn best_rank(f: &Fused) -> usize {
    f.ranks
        .iter()
        .flatten()
        .copied()
        .min()
        .unwrap_or(usize::MAX)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Worked example (computed by hand from the paper's formula, k = 60):
    /// a is 1st and 3rd: 1/61 + 1/63; b is 2nd and 1st: 1/62 + 1/61.
    #[test]
    fn hand_worked_example() {
        let f = rrf(&[(1.0, &[1, 2, 3]), (1.0, &[2, 4, 1])], RRF_K);
        let ids: Vec<u64> = f.iter().map(|x| x.id).collect();
        assert_eq!(ids, vec![2, 1, 4, 3]);
        assert!((f[0].score - (1.0 / 62.0 + 1.0 / 61.0)).abs() < 1e-12);
        assert!((f[1].score - (1.0 / 61.0 + 1.0 / 63.0)).abs() < 1e-12);
        assert_eq!(f[2].ranks, vec![None, Some(2)]);
        // 4 (2nd in one list) and 3 (3rd in one list) do not tie.
        assert!(f[2].score > f[3].score);
    }

    #[test]
    fn weights_shift_the_order() {
        let f = rrf(&[(1.0, &[1, 2]), (3.0, &[2, 1])], RRF_K);
        assert_eq!(f[0].id, 2);
        let f = rrf(&[(3.0, &[1, 2]), (1.0, &[2, 1])], RRF_K);
        assert_eq!(f[0].id, 1);
    }

    /// The naive reference: for every id in any list, look up its first
    /// position in each list by linear search and sum the contributions.
    fn brute(lists: &[(f64, Vec<u64>)], k: f64) -> Vec<(u64, f64, usize)> {
        let mut ids: Vec<u64> = lists.iter().flat_map(|(_, l)| l.iter().copied()).collect();
        ids.sort();
        ids.dedup();
        let mut out: Vec<(u64, f64, usize)> = ids
            .into_iter()
            .map(|id| {
                let mut s = 0.0;
                let mut best = usize::MAX;
                for (w, l) in lists {
                    if let Some(p) = l.iter().position(|&x| x == id) {
                        s += w / (k + (p + 1) as f64);
                        best = best.min(p + 1);
                    }
                }
                (id, s, best)
            })
            .collect();
        out.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.2.cmp(&b.2)).then(a.0.cmp(&b.0)));
        out
    }

    proptest! {
        #[test]
        fn matches_brute_force(
            lists in prop::collection::vec(
                (0.1f64..4.0, prop::collection::vec(0u64..40, 0..30)), 0..4),
            k in 1.0f64..100.0,
        ) {
            let refs: Vec<(f64, &[u64])> = lists.iter().map(|(w, l)| (*w, l.as_slice())).collect();
            let got = rrf(&refs, k);
            let want = brute(&lists, k);
            prop_assert_eq!(got.len(), want.len());
            for (g, w) in got.iter().zip(&want) {
                prop_assert_eq!(g.id, w.0);
                prop_assert!((g.score - w.1).abs() < 1e-12);
            }
        }
    }
}
