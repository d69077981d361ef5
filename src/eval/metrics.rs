//! Ranking metrics as trec_eval defines them: nDCG@k with linear gain
//! (`rel / log2(rank + 1)`) and an ideal ranking built from all judged
//! relevant documents; recall@k; reciprocal rank cut at k. Ties in score are
//! broken as trec_eval does: by document id, descending.

use std::collections::HashMap;

/// Relevance judgements for one query: document id -> grade (> 0 is relevant).
pub type Qrels = HashMap<String, i32>;

/// Order (doc, score) pairs as trec_eval does: score descending, then doc id descending.
pub fn trec_order(mut run: Vec<(String, f64)>) -> Vec<String> {
    run.sort_by(|a, b| b.1.total_cmp(&a.1).then_with(|| b.0.cmp(&a.0)));
    run.into_iter().map(|(d, _)| d).collect()
}

/// nDCG at cut-off `k`. 0 when nothing is relevant.
pub fn ndcg_at(ranked: &[String], qrels: &Qrels, k: usize) -> f64 {
    let dcg: f64 = ranked
        .iter()
        .take(k)
        .enumerate()
        .map(|(i, d)| gain(qrels, d) / ((i + 2) as f64).log2())
        .sum();
    let mut ideal: Vec<f64> = qrels
        .values()
        .filter(|&&g| g > 0)
        .map(|&g| g as f64)
        .collect();
    ideal.sort_by(|a, b| b.total_cmp(a));
    let idcg: f64 = ideal
        .iter()
        .take(k)
        .enumerate()
        .map(|(i, g)| g / ((i + 2) as f64).log2())
        .sum();
    if idcg == 0.0 { 0.0 } else { dcg / idcg }
}

fn gain(qrels: &Qrels, d: &str) -> f64 {
    qrels.get(d).copied().filter(|&g| g > 0).unwrap_or(0) as f64
}

/// Share of relevant documents found in the top `k`.
pub fn recall_at(ranked: &[String], qrels: &Qrels, k: usize) -> f64 {
    let rel = qrels.values().filter(|&&g| g > 0).count();
    if rel == 0 {
        return 0.0;
    }
    let found = ranked
        .iter()
        .take(k)
        .filter(|d| gain(qrels, d) > 0.0)
        .count();
    found as f64 / rel as f64
}

/// 1 / rank of the first relevant document within the top `k`, else 0.
pub fn rr_at(ranked: &[String], qrels: &Qrels, k: usize) -> f64 {
    ranked
        .iter()
        .take(k)
        .position(|d| gain(qrels, d) > 0.0)
        .map(|i| 1.0 / (i + 1) as f64)
        .unwrap_or(0.0)
}

/// p-quantile (0..1) of `xs` by the nearest-rank method.
pub fn quantile(xs: &[f64], p: f64) -> f64 {
    if xs.is_empty() {
        return 0.0;
    }
    let mut v = xs.to_vec();
    v.sort_by(|a, b| a.total_cmp(b));
    let rank = (p * v.len() as f64).ceil().max(1.0) as usize;
    v[rank.min(v.len()) - 1]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ids(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    /// Worked example from the Wikipedia article "Discounted cumulative gain"
    /// (from memory): six results graded 3, 2, 3, 0, 1, 2 give DCG6 = 6.861,
    /// IDCG6 = 7.141 (ideal order 3, 3, 2, 2, 1, 0) and nDCG6 = 0.961.
    #[test]
    fn ndcg_matches_the_published_worked_example() {
        let ranked = ids(&["d1", "d2", "d3", "d4", "d5", "d6"]);
        let qrels: Qrels = [
            ("d1", 3),
            ("d2", 2),
            ("d3", 3),
            ("d4", 0),
            ("d5", 1),
            ("d6", 2),
        ]
        .into_iter()
        .map(|(d, g)| (d.to_string(), g))
        .collect();
        let n = ndcg_at(&ranked, &qrels, 6);
        assert!((n - 6.861 / 7.141).abs() < 5e-4, "{n}");
        assert!((n - 0.961).abs() < 5e-4, "{n}");
    }

    /// Binary-relevance cases worked by hand from the trec_eval definitions
    /// (ndcg_cut, recall, recip_rank).
    #[test]
    fn metric_table() {
        let qrels: Qrels = [("a", 1), ("c", 1), ("z", 0)]
            .into_iter()
            .map(|(d, g)| (d.to_string(), g))
            .collect();
        // (ranking, ndcg@10, recall@2, rr@10)
        let cases: &[(&[&str], f64, f64, f64)] = &[
            (&["a", "c"], 1.0, 1.0, 1.0),
            (
                &["b", "a"],
                (1.0 / 3f64.log2()) / (1.0 + 1.0 / 3f64.log2()),
                0.5,
                0.5,
            ),
            (
                &["z", "b", "c"],
                0.5 / (1.0 + 1.0 / 3f64.log2()),
                0.0,
                1.0 / 3.0,
            ),
            (&[], 0.0, 0.0, 0.0),
        ];
        for (ranking, nd, rc, rr) in cases {
            let r = ids(ranking);
            assert!((ndcg_at(&r, &qrels, 10) - nd).abs() < 1e-9, "{ranking:?}");
            assert!((recall_at(&r, &qrels, 2) - rc).abs() < 1e-9, "{ranking:?}");
            assert!((rr_at(&r, &qrels, 10) - rr).abs() < 1e-9, "{ranking:?}");
        }
    }

    #[test]
    fn ties_break_like_trec_eval() {
        let run = vec![("a".into(), 1.0), ("b".into(), 1.0), ("c".into(), 2.0)];
        assert_eq!(trec_order(run), ids(&["c", "b", "a"]));
    }

    #[test]
    fn nearest_rank_quantiles() {
        let xs = [5.0, 1.0, 4.0, 2.0, 3.0];
        assert_eq!(quantile(&xs, 0.5), 3.0);
        assert_eq!(quantile(&xs, 0.95), 5.0);
        assert_eq!(quantile(&xs, 0.0), 1.0);
    }
}
