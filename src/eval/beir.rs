//! The BEIR-layout retrieval check: `corpus.jsonl` (`_id`, `title`, `text`),
//! `queries.jsonl` (`_id`, `text`) and `qrels/<split>.tsv` (query-id,
//! corpus-id, score, with a header row). The corpus is ingested into a
//! temporary index through the normal ingest path; each corpus entry is a
//! one-page document.

use super::metrics::{Qrels, ndcg_at, quantile, recall_at, rr_at, trec_order};
use crate::chunk::ChunkConfig;
use crate::embed::Embedder;
use crate::error::{Error, Result};
use crate::ingest::{MemDoc, ingest_docs};
use crate::retrieve::{Index, RetrieverKind, SearchOptions};
use crate::types::{DocId, DocMeta, Filters};
use crate::vectors::{Scalar, VectorIndex};
use serde::Serialize;
use std::collections::HashMap;
use std::io::BufRead;
use std::path::Path;
use std::sync::Arc;
use std::time::Instant;

/// Figures from one run. The first three keys are stable.
#[derive(Debug, Clone, Serialize)]
pub struct RetrievalReport {
    #[serde(rename = "ndcg@10")]
    pub ndcg10: f64,
    #[serde(rename = "recall@100")]
    pub recall100: f64,
    #[serde(rename = "mrr@10")]
    pub mrr10: f64,
    pub retriever: String,
    pub split: String,
    pub queries: usize,
    pub documents: usize,
    pub chunks: usize,
    pub ingest_seconds: f64,
    pub ingest_docs_per_second: f64,
    pub search_p50_ms: f64,
    pub search_p95_ms: f64,
}

fn read_jsonl(
    path: &Path,
    mut f: impl FnMut(usize, serde_json::Value) -> Result<()>,
) -> Result<()> {
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    for (i, line) in std::io::BufReader::new(file).lines().enumerate() {
        let line = line.map_err(|e| Error::io(path, e))?;
        if line.trim().is_empty() {
            continue;
        }
        let v = serde_json::from_str(&line).map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: i + 1,
            message: e.to_string(),
        })?;
        f(i + 1, v)?;
    }
    Ok(())
}

fn field(v: &serde_json::Value, k: &str) -> String {
    match &v[k] {
        serde_json::Value::String(s) => s.clone(),
        serde_json::Value::Null => String::new(),
        other => other.to_string(),
    }
}

/// Load qrels: query id -> (doc id -> grade).
pub fn load_qrels(path: &Path) -> Result<HashMap<String, Qrels>> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let mut out: HashMap<String, Qrels> = HashMap::new();
    for (i, line) in text.lines().enumerate() {
        let cols: Vec<&str> = line.split('\t').collect();
        if i == 0 && cols.first().is_some_and(|c| c.contains("query")) {
            continue;
        }
        if line.trim().is_empty() {
            continue;
        }
        let [q, d, s] = cols[..] else {
            return Err(Error::BadInput {
                path: path.to_path_buf(),
                line: i + 1,
                message: "expected three tab-separated columns: query-id, corpus-id, score".into(),
            });
        };
        let grade: i32 = s.trim().parse().map_err(|_| Error::BadInput {
            path: path.to_path_buf(),
            line: i + 1,
            message: format!("score `{s}` is not a whole number"),
        })?;
        out.entry(q.to_string())
            .or_default()
            .insert(d.to_string(), grade);
    }
    Ok(out)
}

/// Judged queries as (query id, text).
pub(crate) type Queries = Vec<(String, String)>;

/// The qrels, the judged queries, and the corpus as one-page in-memory documents.
pub(crate) fn load(
    dir: &Path,
    split: &str,
) -> Result<(HashMap<String, Qrels>, Queries, Vec<MemDoc>)> {
    let qrels = load_qrels(&dir.join("qrels").join(format!("{split}.tsv")))?;
    let mut queries: Vec<(String, String)> = Vec::new();
    read_jsonl(&dir.join("queries.jsonl"), |_, v| {
        let id = field(&v, "_id");
        if qrels.contains_key(&id) {
            queries.push((id, field(&v, "text")));
        }
        Ok(())
    })?;
    let mut docs = Vec::new();
    read_jsonl(&dir.join("corpus.jsonl"), |line, v| {
        let id = field(&v, "_id");
        if id.is_empty() {
            return Err(Error::BadInput {
                path: dir.join("corpus.jsonl"),
                line,
                message: "missing `_id`".into(),
            });
        }
        let title = field(&v, "title");
        docs.push(MemDoc {
            doc_id: DocId(id),
            meta: DocMeta {
                title: (!title.is_empty()).then_some(title),
                ..Default::default()
            },
            pages: vec![field(&v, "text")],
        });
        Ok(())
    })?;
    Ok((qrels, queries, docs))
}

/// Run the check with BM25 only. `index_dir` must be a fresh, empty folder.
pub fn run(dir: &Path, split: &str, index_dir: &Path, progress: bool) -> Result<RetrievalReport> {
    let mut out = run_all(
        dir,
        split,
        index_dir,
        progress,
        None,
        &[RetrieverKind::Bm25],
        SearchOptions::default(),
        ChunkConfig::default(),
    )?;
    Ok(out.runs.remove(0))
}

/// Graph search measured against exact search, for one vector type.
#[derive(Debug, Clone, Serialize)]
pub struct GraphRecall {
    pub scalar: Scalar,
    /// Mean share of the exact (f32, brute-force) top 10 that the graph returns.
    #[serde(rename = "recall@10")]
    pub recall10: f64,
    pub memory_bytes: usize,
    pub build_seconds: f64,
    pub search_p50_ms: f64,
}

/// What embedding the corpus cost, and how the graph compares to exact search.
#[derive(Debug, Clone, Serialize)]
pub struct VectorReport {
    pub embedder: String,
    pub chunks: usize,
    pub embed_seconds: f64,
    pub chunks_per_second: f64,
    /// Mean time to embed one query.
    pub query_embed_ms: f64,
    pub graph: Vec<GraphRecall>,
}

/// Every retriever's figures from one ingest of the corpus.
#[derive(Debug, Clone, Serialize)]
pub struct BeirRun {
    pub runs: Vec<RetrievalReport>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub vectors: Option<VectorReport>,
    /// Why a retriever asked for could not run.
    pub notes: Vec<String>,
}

/// Run the check for each of `kinds` (empty: every retriever that can run).
/// The corpus is ingested (with `chunk` settings) and embedded once.
/// `index_dir` must be a fresh, empty folder.
#[allow(clippy::too_many_arguments)]
pub fn run_all(
    dir: &Path,
    split: &str,
    index_dir: &Path,
    progress: bool,
    embedder: Option<Arc<dyn Embedder>>,
    kinds: &[RetrieverKind],
    base: SearchOptions,
    chunk: ChunkConfig,
) -> Result<BeirRun> {
    let (qrels, queries, docs) = load(dir, split)?;
    let n_docs = docs.len();
    let report = ingest_docs(index_dir, docs, chunk, progress.then_some(n_docs as u64))?;
    let mut notes = Vec::new();
    let mut vreport = None;
    if let Some(e) = &embedder {
        // Retrieval only: the answer selector's sentence vectors are needed
        // only to search by sentence.
        let (er, _) = crate::vectors::update_with(index_dir, e.as_ref(), progress, base.sentences)?;
        vreport = Some(VectorReport {
            embedder: e.id().to_owned(),
            chunks: report.chunks,
            embed_seconds: er.seconds,
            chunks_per_second: er.chunks_per_second,
            query_embed_ms: 0.0,
            graph: Vec::new(),
        });
    }
    let index = Index::open_with(index_dir, embedder.clone())?;
    let kinds: Vec<RetrieverKind> = if kinds.is_empty() {
        if index.has_dense() {
            vec![
                RetrieverKind::Bm25,
                RetrieverKind::Dense,
                RetrieverKind::Hybrid,
            ]
        } else {
            vec![RetrieverKind::Bm25]
        }
    } else {
        kinds.to_vec()
    };
    // Query vectors are made once, up front; search times exclude them.
    let mut qvecs: Vec<Option<Vec<f32>>> = vec![None; queries.len()];
    if let (Some(e), Some(v)) = (&embedder, vreport.as_mut()) {
        let t = Instant::now();
        for (i, (_, text)) in queries.iter().enumerate() {
            qvecs[i] = Some(e.embed(&[text.as_str()])?.remove(0));
        }
        v.query_embed_ms = t.elapsed().as_secs_f64() * 1000.0 / queries.len().max(1) as f64;
        v.graph = graph_recall(index_dir, &index, e.as_ref(), &qvecs)?;
    }
    let mut runs = Vec::new();
    for kind in kinds {
        let opts = SearchOptions {
            retriever: Some(kind),
            ..base
        };
        if index.effective(&opts) != kind {
            notes.push(format!(
                "{}: needs an embedding model and vectors; not run",
                kind.name()
            ));
            continue;
        }
        let (mut nd, mut rc, mut rr) = (0.0, 0.0, 0.0);
        let mut times = Vec::with_capacity(queries.len());
        for (i, (qid, text)) in queries.iter().enumerate() {
            let t = Instant::now();
            let hits = index.search_embedded(
                text,
                qvecs[i].as_deref(),
                &Filters::default(),
                300,
                &opts,
            )?;
            times.push(t.elapsed().as_secs_f64() * 1000.0);
            // Chunks to documents: a document scores as its best chunk. A
            // document whose id equals the query id is ignored, as BEIR does.
            let mut best: HashMap<String, f64> = HashMap::new();
            for h in hits {
                let d = h.chunk.doc_id.0;
                if &d == qid {
                    continue;
                }
                let e = best.entry(d).or_insert(f64::MIN);
                *e = e.max(h.score as f64);
            }
            let ranked = trec_order(best.into_iter().collect());
            let q = &qrels[qid];
            nd += ndcg_at(&ranked, q, 10);
            rc += recall_at(&ranked, q, 100);
            rr += rr_at(&ranked, q, 10);
        }
        // Queries judged in qrels but absent from queries.jsonl count as zero.
        let n = qrels.len().max(1) as f64;
        runs.push(RetrievalReport {
            ndcg10: nd / n,
            recall100: rc / n,
            mrr10: rr / n,
            retriever: kind.name().into(),
            split: split.into(),
            queries: queries.len(),
            documents: n_docs,
            chunks: report.chunks,
            ingest_seconds: report.seconds,
            ingest_docs_per_second: n_docs as f64 / report.seconds.max(1e-9),
            search_p50_ms: quantile(&times, 0.5),
            search_p95_ms: quantile(&times, 0.95),
        });
    }
    Ok(BeirRun {
        runs,
        vectors: vreport,
        notes,
    })
}

/// Recall@10 of the graph against brute-force f32 search over the same
/// vectors, for each vector type, with the queries as probes.
fn graph_recall(
    index_dir: &Path,
    index: &Index,
    e: &dyn Embedder,
    qvecs: &[Option<Vec<f32>>],
) -> Result<Vec<GraphRecall>> {
    let mut all = Vec::new();
    index.store.for_each_embedded_chunk(e.id(), 0, 0, |id, v| {
        all.push((id, v));
        Ok(())
    })?;
    let exact: Vec<Vec<crate::types::ChunkId>> = qvecs
        .iter()
        .flatten()
        .map(|q| crate::vectors::brute_force(q, &all, 10))
        .collect();
    let mut out = Vec::new();
    for scalar in [Scalar::F32, Scalar::F16, Scalar::I8] {
        let t = Instant::now();
        let probe_dir = index_dir.join(format!("probe-{scalar:?}"));
        let vi = VectorIndex::rebuild(&probe_dir, &index.store, e.id(), e.dim(), scalar)?;
        let build_seconds = t.elapsed().as_secs_f64();
        let mut hit = 0usize;
        let mut total = 0usize;
        let mut times = Vec::new();
        for (q, want) in qvecs.iter().flatten().zip(&exact) {
            let t = Instant::now();
            let got = vi.search(q, None, 10)?;
            times.push(t.elapsed().as_secs_f64() * 1000.0);
            let got: std::collections::HashSet<u64> = got.iter().map(|n| n.chunk_id.0).collect();
            hit += want.iter().filter(|c| got.contains(&c.0)).count();
            total += want.len();
        }
        out.push(GraphRecall {
            scalar,
            recall10: hit as f64 / total.max(1) as f64,
            memory_bytes: vi.memory_usage(),
            build_seconds,
            search_p50_ms: quantile(&times, 0.5),
        });
        let _ = std::fs::remove_dir_all(&probe_dir);
    }
    Ok(out)
}

/// Embedding throughput, printed by `onrecord bench embed`.
#[derive(Debug, Clone, Serialize)]
pub struct EmbedBench {
    pub embedder: String,
    pub texts: usize,
    pub tokens: usize,
    pub seconds: f64,
    pub texts_per_s: f64,
    pub tokens_per_s: f64,
    pub threads: usize,
}

/// Embed the first `limit` documents of a BEIR corpus (title + text) and time it.
pub fn bench_embed(corpus: &Path, limit: usize, e: &dyn Embedder) -> Result<EmbedBench> {
    let mut texts = Vec::new();
    read_jsonl(corpus, |_, v| {
        if texts.len() < limit {
            let t = format!("{} {}", field(&v, "title"), field(&v, "text"));
            texts.push(t.trim().to_owned());
        }
        Ok(())
    })?;
    let refs: Vec<&str> = texts.iter().map(String::as_str).collect();
    let mut tokens = 0;
    for t in &refs {
        tokens += e.token_ids(t)?.len();
    }
    let t = Instant::now();
    let v = e.embed(&refs)?;
    let seconds = t.elapsed().as_secs_f64();
    debug_assert_eq!(v.len(), refs.len());
    Ok(EmbedBench {
        embedder: e.id().to_owned(),
        texts: refs.len(),
        tokens,
        seconds,
        texts_per_s: refs.len() as f64 / seconds.max(1e-9),
        tokens_per_s: tokens as f64 / seconds.max(1e-9),
        threads: candle_core::utils::get_num_threads(),
    })
}
