//! Checks of the main job against published figures on open data.

use crate::support::{model, shared_data, slow_enabled};

/// BM25, dense and hybrid retrieval over SciFact (BEIR layout, test qrels,
/// 300 queries, 5,183 abstracts), from one ingest.
/// Sources: BEIR paper (Thakur et al. 2021, Table 2) BM25 nDCG@10 = 0.665;
/// Anserini BM25 flat regression (castorini/anserini,
/// regressions-beir-v1.0.0-scifact.flat) nDCG@10 = 0.679, R@100 = 0.925;
/// all-MiniLM-L6-v2 on SciFact about 0.64 in the MTEB leaderboard (from
/// memory). Floors: BM25 0.65, dense 0.60, hybrid 0.68 (the bars
/// for the slow suite), and HNSW recall@10 against brute-force exact search
/// of at least 0.98 (common practice for a graph index's operating point).
#[test]
fn retrieval_on_scifact_reaches_the_published_baselines() {
    if !slow_enabled("retrieval_on_scifact") {
        return;
    }
    let Some(dir) = shared_data("scifact/beir") else {
        return;
    };
    let embedder = model();
    let tmp = tempfile::tempdir().unwrap();
    let r = onrecord::eval::beir::run_all(
        &dir,
        "test",
        tmp.path(),
        false,
        embedder.clone(),
        &[],
        Default::default(),
        // One chunk per abstract (BEIR's unit; the model truncates at 256
        // word pieces, as MTEB does), which also halves the embedding work.
        onrecord::chunk::ChunkConfig {
            max_tokens: 512,
            overlap_tokens: 0,
        },
    )
    .unwrap();
    for x in &r.runs {
        crate::support::figure(&format!(
            "SciFact {}: nDCG@10 {:.4}, recall@100 {:.4}, MRR@10 {:.4} over {} queries; search p50 {:.2} ms",
            x.retriever, x.ndcg10, x.recall100, x.mrr10, x.queries, x.search_p50_ms
        ));
        assert_eq!(x.queries, 300);
        assert_eq!(x.documents, 5183);
    }
    let by = |name: &str| r.runs.iter().find(|x| x.retriever == name);
    let bm25 = by("bm25").expect("bm25 always runs");
    assert!(
        bm25.ndcg10 >= 0.65,
        "BM25 nDCG@10 {:.4} below 0.65",
        bm25.ndcg10
    );
    assert!(
        bm25.recall100 >= 0.85,
        "BM25 recall@100 {:.4} far below Anserini's 0.925",
        bm25.recall100
    );
    if embedder.is_none() {
        return;
    }
    let v = r.vectors.as_ref().expect("vector figures with a model");
    crate::support::figure(&format!(
        "SciFact vectors: {}",
        serde_json::to_string(v).unwrap()
    ));
    let dense = by("dense").expect("dense runs with a model");
    let hybrid = by("hybrid").expect("hybrid runs with a model");
    assert!(
        dense.ndcg10 >= 0.60,
        "dense nDCG@10 {:.4} below 0.60",
        dense.ndcg10
    );
    assert!(
        hybrid.ndcg10 >= 0.68,
        "hybrid nDCG@10 {:.4} below 0.68",
        hybrid.ndcg10
    );
    assert!(
        hybrid.ndcg10 > bm25.ndcg10 && hybrid.ndcg10 > dense.ndcg10,
        "fusion beats both parts"
    );
    let f16 = v
        .graph
        .iter()
        .find(|g| g.scalar == onrecord::vectors::Scalar::F16)
        .unwrap();
    assert!(
        f16.recall10 >= 0.98,
        "HNSW f16 recall@10 {:.4} below 0.98",
        f16.recall10
    );
}

/// Abstention on SQuAD v1.1 dev (Rajpurkar et al. 2016; CC BY-SA 4.0), split
/// as ../shared/data/README.md prescribes: the words-only selector and its
/// threshold were trained on WikiQA and articles 1-24, and the figures are
/// reported on articles 25-48. Odd articles are ingested, even ones left
/// out, so questions on the latter have no answer in the records. On the
/// held-out articles the selector must answer most answerable questions
/// and decline most unanswerable ones (floors set a little below the
/// measured 0.753 answered, 0.589 gold in the top sentence, 0.957
/// declined; the rule-based drafter before it measured 0.902, 0.596 and
/// 0.779). The best threshold by Youden's J on articles 1-24 is printed
/// for comparison.
#[test]
fn abstention_threshold_is_calibrated_on_squad() {
    use onrecord::eval::squad::{at_threshold, best_threshold, score_range};
    if !slow_enabled("abstention_threshold_is_calibrated_on_squad") {
        return;
    }
    let Some(dir) = shared_data("squad-v1.1") else {
        return;
    };
    let file = dir.join("dev-v1.1.json");
    let (t1, t2) = (tempfile::tempdir().unwrap(), tempfile::tempdir().unwrap());
    let tune = score_range(&file, 1..=24, 600, t1.path()).unwrap();
    let report = score_range(&file, 25..=48, 600, t2.path()).unwrap();
    let default = onrecord::select::Selector::default()
        .weights
        .lexical
        .threshold;
    let tuned = best_threshold(&tune);
    crate::support::figure(&format!(
        "SQuAD articles 1-24: best threshold by Youden's J {tuned:?}"
    ));
    let r = at_threshold(&report, default);
    crate::support::figure(&format!("SQuAD articles 25-48 at {default:.2}: {r:?}"));
    assert!(r.answered >= 0.70, "{r:?}");
    assert!(r.answered_with_gold >= 0.55, "{r:?}");
    assert!(r.abstained >= 0.90, "{r:?}");
}

/// The planted-instruction patterns against ordinary prose: the 2,067
/// paragraphs of SQuAD v1.1 dev (Wikipedia) and the 5,183 abstracts of the
/// SciFact corpus (BEIR layout), neither of which addresses an AI model.
/// A match would strike true sentences (a whole passage, for text
/// addressed to a model), so none may match. This check found that
/// "... and conclude that" and "We now report that", ordinary in
/// abstracts and minutes, were read as instructions (9 abstracts); those
/// verbs now count only when said to "you".
#[test]
fn instruction_patterns_match_no_ordinary_prose() {
    let (Some(squad), Some(scifact)) = (shared_data("squad-v1.1"), shared_data("scifact/beir"))
    else {
        return;
    };
    let squad: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(squad.join("dev-v1.1.json")).unwrap())
            .unwrap();
    let mut texts: Vec<(String, String)> = Vec::new();
    for article in squad["data"].as_array().unwrap() {
        for p in article["paragraphs"].as_array().unwrap() {
            texts.push(("SQuAD".into(), p["context"].as_str().unwrap().to_string()));
        }
    }
    let n_squad = texts.len();
    for line in std::fs::read_to_string(scifact.join("corpus.jsonl"))
        .unwrap()
        .lines()
    {
        let d: serde_json::Value = serde_json::from_str(line).unwrap();
        let t = format!(
            "{} {}",
            d["title"].as_str().unwrap_or(""),
            d["text"].as_str().unwrap_or("")
        );
        texts.push(("SciFact".into(), t));
    }
    assert_eq!(n_squad, 2067, "SQuAD v1.1 dev has 2,067 paragraphs");
    assert_eq!(
        texts.len() - n_squad,
        5183,
        "the SciFact corpus has 5,183 abstracts"
    );
    let hits: Vec<String> = texts
        .iter()
        .filter_map(|(src, t)| {
            let (addressed, instruction) = onrecord::verify::instruction_patterns(t);
            (addressed || instruction).then(|| format!("{src}: {}", &t[..t.len().min(120)]))
        })
        .collect();
    crate::support::figure(&format!(
        "instruction patterns on ordinary prose: {} of {} SQuAD dev paragraphs and {} SciFact abstracts match",
        hits.len(),
        n_squad,
        texts.len() - n_squad
    ));
    assert!(hits.is_empty(), "{hits:#?}");
}
