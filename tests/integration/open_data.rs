//! Checks of the main job against published figures on open data.

use crate::support::{shared_data, slow_enabled};

/// BM25 over SciFact (BEIR layout, test qrels, 300 queries, 5,183 abstracts).
/// Sources: BEIR paper (Thakur et al. 2021, Table 2) BM25 nDCG@10 = 0.665;
/// Anserini BM25 flat regression (castorini/anserini,
/// regressions-beir-v1.0.0-scifact.flat) nDCG@10 = 0.679, R@100 = 0.925.
#[test]
fn bm25_on_scifact_reaches_the_published_baseline() {
    if !slow_enabled("bm25_on_scifact") {
        return;
    }
    let Some(dir) = shared_data("scifact/beir") else {
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let r = onrecord::eval::beir::run(&dir, "test", tmp.path(), false).unwrap();
    eprintln!(
        "SciFact BM25: nDCG@10 {:.4}, recall@100 {:.4}, MRR@10 {:.4} over {} queries",
        r.ndcg10, r.recall100, r.mrr10, r.queries
    );
    assert_eq!(r.queries, 300);
    assert_eq!(r.documents, 5183);
    assert!(r.ndcg10 >= 0.65, "nDCG@10 {:.4} below 0.65", r.ndcg10);
    assert!(
        r.recall100 >= 0.85,
        "recall@100 {:.4} far below Anserini's 0.925",
        r.recall100
    );
}
