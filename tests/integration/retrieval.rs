//! Dense and hybrid retrieval: embedding parity with the reference
//! library, the vector index kept in step with the store (add, replace,
//! rebuild, resume after a failure), and filters that never leak.

use crate::support::{HashEmbedder, model};
use onrecord::embed::{Embedder, cosine};
use onrecord::ingest::{MemDoc, ingest_docs};
use onrecord::retrieve::{Index, RetrieverKind, SearchOptions};
use onrecord::store::Store;
use onrecord::types::{DocId, DocMeta, Filters};
use onrecord::vectors::{self, DEFAULT_SCALAR, VectorIndex};
use std::collections::HashSet;
use std::path::Path;
use std::sync::Arc;

/// Parity with sentence-transformers 6.2.0 (all-MiniLM-L6-v2, mean pooling,
/// normalised, max_seq_length 256): the fixture
/// ../shared/reference/minilm-l6-v2-embeddings.json holds 24 texts with their
/// token ids and embeddings. Token ids must match exactly and every cosine
/// must reach 0.9999.
#[test]
fn minilm_matches_the_reference_library() {
    let Some(e) = model() else { return };
    let path = onrecord::shared_reference_dir().join("minilm-l6-v2-embeddings.json");
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|err| panic!("reference fixture {} unreadable: {err}", path.display()));
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    let items = v["items"].as_array().unwrap();
    assert_eq!(items.len(), 24);
    let texts: Vec<&str> = items.iter().map(|i| i["text"].as_str().unwrap()).collect();
    // All at once, so the length buckets and padding are exercised too.
    let got = e.embed(&texts).unwrap();
    let mut worst = 1.0f32;
    for (i, item) in items.iter().enumerate() {
        let want_ids: Vec<u32> = item["input_ids"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_u64().unwrap() as u32)
            .collect();
        assert_eq!(
            e.token_ids(texts[i]).unwrap(),
            want_ids,
            "token ids of item {i}"
        );
        let want: Vec<f32> = item["embedding"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap() as f32)
            .collect();
        assert_eq!(got[i].len(), 384);
        let c = cosine(&got[i], &want);
        worst = worst.min(c);
        assert!(c >= 0.9999, "item {i}: cosine {c} below 0.9999");
        // One at a time gives the same vector as in a padded batch.
        let alone = e.embed(&[texts[i]]).unwrap().remove(0);
        assert!(
            cosine(&alone, &got[i]) >= 0.99999,
            "item {i}: batch and single differ"
        );
    }
    crate::support::figure(&format!(
        "MiniLM parity: worst cosine {worst:.6} over {} items",
        items.len()
    ));
}

fn doc(id: &str, org: &str, date: &str, text: &str) -> MemDoc {
    MemDoc {
        doc_id: DocId(id.into()),
        meta: DocMeta {
            title: Some(format!("Record {id}")),
            organisation: Some(org.into()),
            date: Some(date.into()),
            ..Default::default()
        },
        pages: vec![text.into()],
    }
}

fn corpus(n: usize) -> Vec<MemDoc> {
    let orgs = ["Harbour Authority", "Transit Board", "Health Region"];
    let topics = [
        "ferry terminal budget increase pier works contractor",
        "bus route cancellation ridership survey depot",
        "hospital wait times nurse staffing overtime ward",
        "bridge inspection corrosion steel repair closure",
    ];
    (0..n)
        .map(|i| {
            doc(
                &format!("d{i:03}"),
                orgs[i % 3],
                &format!("202{}-0{}-1{}", i % 4, 1 + i % 9, i % 10),
                &format!(
                    "Memo {i}. The {} were discussed at meeting {i}. Item {}.",
                    topics[i % 4],
                    i * 7
                ),
            )
        })
        .collect()
}

fn embed_all(dir: &Path, e: &dyn Embedder) -> vectors::SyncReport {
    vectors::update(dir, e, false).unwrap().1
}

/// Texts an update embeds besides the chunks: candidate sentences and titles.
fn sentence_texts(dir: &Path) -> u64 {
    let store = Store::open(dir).unwrap();
    let mut chunks = Vec::new();
    store
        .for_each_chunk(|c| {
            chunks.push((c.title, c.text));
            Ok(())
        })
        .unwrap();
    onrecord::select::inputs_of(chunks.iter().map(|(t, x)| (t.as_str(), x.as_str()))).len() as u64
}

#[test]
fn vector_index_follows_adds_and_replacements_and_rebuilds_from_the_store() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let e = Arc::new(HashEmbedder::new());
    ingest_docs(dir, corpus(30), Default::default(), None).unwrap();
    let sync = embed_all(dir, e.as_ref());
    let (_, _, chunks) = Store::open(dir).unwrap().counts().unwrap();
    assert_eq!(sync.total as u64, chunks);
    // Each chunk once, and each distinct candidate sentence and title once.
    let sentences = sentence_texts(dir);
    assert_eq!(
        e.embedded() as u64,
        chunks + sentences,
        "each chunk and sentence embedded once"
    );

    // Unchanged documents: nothing is embedded again, nothing changes.
    ingest_docs(dir, corpus(30), Default::default(), None).unwrap();
    let again = embed_all(dir, e.as_ref());
    assert_eq!(e.embedded() as u64, chunks + sentences);
    assert_eq!((again.added, again.removed), (0, 0));

    // Replace one document and add one: the old chunk leaves the index,
    // the new ones join, and only they are embedded.
    let mut docs = corpus(30);
    docs[4].pages = vec!["Lighthouse keeper salary arrears were settled in March.".into()];
    docs.push(doc(
        "d999",
        "Harbour Authority",
        "2024-05-01",
        "Dredging permit for the north channel.",
    ));
    ingest_docs(dir, docs, Default::default(), None).unwrap();
    let before = e.embedded();
    let (report, sync) = vectors::update(dir, e.as_ref(), false).unwrap();
    assert_eq!(report.embedded, 2, "only the two new chunks are embedded");
    // ...and only their sentences (and a new title): one sentence each.
    assert!((2..=3).contains(&report.sentences_embedded), "{report:?}");
    assert_eq!(e.embedded() - before, 2 + report.sentences_embedded);
    assert_eq!((sync.added, sync.removed), (2, 1));
    let idx = Index::open_with(dir, Some(e.clone())).unwrap();
    let dense = SearchOptions {
        retriever: Some(RetrieverKind::Dense),
        ..Default::default()
    };
    let hits = idx
        .search_with(
            "lighthouse keeper salary arrears",
            &Filters::default(),
            3,
            &dense,
        )
        .unwrap();
    assert_eq!(hits[0].chunk.doc_id.0, "d004");
    assert!(hits[0].chunk.text.contains("Lighthouse"));
    let all = idx
        .search_with("memo meeting item", &Filters::default(), 100, &dense)
        .unwrap();
    assert_eq!(
        all.len() as u64,
        chunks + 1,
        "every vector maps to a live chunk"
    );
    let first: Vec<u64> = all.iter().map(|h| h.chunk.id.0).collect();
    drop(idx);

    // Lose the vector index: it is rebuilt from the store, embedding nothing.
    std::fs::remove_dir_all(dir.join("vectors")).unwrap();
    let before = e.embedded();
    let idx = Index::open_with(dir, Some(e.clone())).unwrap();
    assert!(idx.vectors.as_ref().unwrap().last_sync.rebuilt);
    assert_eq!(e.embedded(), before, "a rebuild embeds nothing");
    let rebuilt: Vec<u64> = idx
        .search_with("memo meeting item", &Filters::default(), 100, &dense)
        .unwrap()
        .iter()
        .map(|h| h.chunk.id.0)
        .collect();
    assert_eq!(
        first.iter().collect::<HashSet<_>>(),
        rebuilt.iter().collect::<HashSet<_>>()
    );
}

#[test]
fn an_interrupted_embedding_run_keeps_its_work_and_the_next_continues() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    ingest_docs(dir, corpus(200), Default::default(), None).unwrap();
    let (_, _, chunks) = Store::open(dir).unwrap().counts().unwrap();
    assert!(chunks > vectors::EMBED_COMMIT as u64 * 2);
    let failing = HashEmbedder {
        fail_after_calls: Some(2),
        ..HashEmbedder::new()
    };
    let err = vectors::update(dir, &failing, false).unwrap_err();
    assert!(err.to_string().contains("told to fail"), "{err}");
    let done = failing.embedded();
    assert_eq!(done, 2 * vectors::EMBED_COMMIT);
    let store = Store::open(dir).unwrap();
    assert_eq!(
        store.count_pending_embeddings(&failing.id).unwrap(),
        chunks - done as u64,
        "committed batches survive the failure"
    );
    drop(store);
    let good = HashEmbedder::new();
    let (report, sync) = vectors::update(dir, &good, false).unwrap();
    assert_eq!(
        report.embedded as u64,
        chunks - done as u64,
        "only the rest is embedded"
    );
    assert_eq!(sync.total as u64, chunks);
}

/// Property: whatever the filter and retriever, every result lies inside
/// the filter, as the store's own filter query (the reference) defines it.
/// Run with the exact path for small filters and, by lowering the switch
/// point, with the filter applied inside the graph walk.
#[test]
fn filters_never_leak_whatever_the_retriever() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let e = Arc::new(HashEmbedder::new());
    ingest_docs(dir, corpus(300), Default::default(), None).unwrap();
    embed_all(dir, e.as_ref());
    let filters = [
        Filters {
            org: Some("harbour".into()),
            ..Default::default()
        },
        Filters {
            from: Some("2022".into()),
            to: Some("2023-06".into()),
            ..Default::default()
        },
        Filters {
            docs: vec![DocId("d007".into()), DocId("d123".into())],
            ..Default::default()
        },
        Filters {
            org: Some("transit".into()),
            from: Some("2021-03-01".into()),
            ..Default::default()
        },
        Filters {
            org: Some("no such body".into()),
            ..Default::default()
        },
    ];
    for exact_below in [usize::MAX, 0] {
        let mut idx = Index::open_with(dir, Some(e.clone())).unwrap();
        idx.vectors.as_mut().unwrap().exact_below = exact_below;
        for f in &filters {
            let allowed: HashSet<String> = idx
                .store
                .docs_matching(f)
                .unwrap()
                .unwrap()
                .into_iter()
                .map(|d| d.0)
                .collect();
            for kind in [
                RetrieverKind::Bm25,
                RetrieverKind::Dense,
                RetrieverKind::Hybrid,
            ] {
                let opts = SearchOptions {
                    retriever: Some(kind),
                    ..Default::default()
                };
                for q in [
                    "ferry budget",
                    "nurse overtime ward",
                    "corrosion",
                    "memo 12",
                ] {
                    let hits = idx.search_with(q, f, 20, &opts).unwrap();
                    for h in &hits {
                        assert!(
                            allowed.contains(&h.chunk.doc_id.0),
                            "{kind:?} returned {} outside {f:?}",
                            h.chunk.doc_id
                        );
                    }
                    if kind == RetrieverKind::Dense && exact_below == usize::MAX {
                        assert_eq!(
                            hits.len(),
                            allowed.len().min(20),
                            "{f:?}: dense fills k from the allowed set"
                        );
                    }
                }
            }
        }
    }
}

#[test]
fn hybrid_explains_each_result_and_falls_back_without_a_model() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let e = Arc::new(HashEmbedder::new());
    ingest_docs(dir, corpus(40), Default::default(), None).unwrap();
    embed_all(dir, e.as_ref());
    let idx = Index::open_with(dir, Some(e.clone())).unwrap();
    assert_eq!(
        idx.retriever(),
        RetrieverKind::Hybrid,
        "hybrid is the default with a model"
    );
    let hits = idx
        .search("bridge corrosion repair", &Filters::default(), 10)
        .unwrap();
    assert!(!hits.is_empty());
    for (i, h) in hits.iter().enumerate() {
        assert_eq!(h.rank, i + 1);
        assert_eq!(h.retriever, "hybrid");
        assert_eq!(h.signals.len(), 2);
        // The fused score is the RRF sum of the listed ranks (k = 60, weights 1).
        let want: f64 = h
            .signals
            .iter()
            .filter_map(|s| s.rank)
            .map(|r| 1.0 / (60.0 + r as f64))
            .sum();
        assert!(
            (h.score as f64 - want).abs() < 1e-6,
            "{} vs {want}",
            h.score
        );
    }
    assert!(hits.windows(2).all(|w| w[0].score >= w[1].score));
    drop(idx);
    // No embedder: hybrid falls back to BM25 and the index says nothing is wrong.
    let bm = Index::open_with(dir, None).unwrap();
    assert_eq!(bm.retriever(), RetrieverKind::Bm25);
    let hits = bm
        .search("bridge corrosion repair", &Filters::default(), 5)
        .unwrap();
    assert!(
        hits.iter()
            .all(|h| h.retriever == "bm25" && h.signals.len() == 1)
    );
    // A graph saved for this model is reused on the next open.
    let vi = VectorIndex::open_synced(dir, &Store::open(dir).unwrap(), e.id(), 64, DEFAULT_SCALAR)
        .unwrap();
    assert!(!vi.last_sync.rebuilt);
}

/// A store written in format 1 (before embeddings) is upgraded in place:
/// the new tables appear and every chunk gets the embedding key a fresh
/// store would give it, so nothing needs re-ingesting.
#[test]
fn a_format_1_store_is_upgraded_in_place() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    ingest_docs(dir, corpus(12), Default::default(), None).unwrap();
    let path = dir.join(onrecord::store::STORE_FILE);
    let keys = |conn: &rusqlite::Connection| -> Vec<(i64, String)> {
        let mut st = conn
            .prepare("SELECT id, embed_key FROM chunks ORDER BY id")
            .unwrap();
        st.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
            .unwrap()
            .map(Result::unwrap)
            .collect()
    };
    let fresh = {
        let conn = rusqlite::Connection::open(&path).unwrap();
        let k = keys(&conn);
        // Freeze it back to format 1.
        conn.execute_batch(
            "DROP TABLE embeddings; DROP TABLE dropped_chunks;
             DROP TABLE answers; DROP TABLE cited_pages;
             ALTER TABLE chunks DROP COLUMN embed_key;
             UPDATE meta SET value = '1' WHERE key = 'format';",
        )
        .unwrap();
        k
    };
    let store = Store::open(dir).unwrap();
    assert_eq!(
        store.count_pending_embeddings("m").unwrap(),
        fresh.len() as u64
    );
    drop(store);
    let conn = rusqlite::Connection::open(&path).unwrap();
    assert_eq!(keys(&conn), fresh);
    let format: String = conn
        .query_row("SELECT value FROM meta WHERE key = 'format'", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(format, onrecord::store::STORE_FORMAT.to_string());
    // Format 3's answer log is there too.
    let logged: i64 = conn
        .query_row("SELECT count(*) FROM answers", [], |r| r.get(0))
        .unwrap();
    assert_eq!(logged, 0);
}
