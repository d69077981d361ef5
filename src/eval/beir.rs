//! The BEIR-layout retrieval check: `corpus.jsonl` (`_id`, `title`, `text`),
//! `queries.jsonl` (`_id`, `text`) and `qrels/<split>.tsv` (query-id,
//! corpus-id, score, with a header row). The corpus is ingested into a
//! temporary index through the normal ingest path; each corpus entry is a
//! one-page document.

use super::metrics::{Qrels, ndcg_at, quantile, recall_at, rr_at, trec_order};
use crate::chunk::ChunkConfig;
use crate::error::{Error, Result};
use crate::ingest::{MemDoc, ingest_docs};
use crate::retrieve::Index;
use crate::types::{DocId, DocMeta, Filters};
use serde::Serialize;
use std::collections::HashMap;
use std::io::BufRead;
use std::path::Path;
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

/// Run the check. `index_dir` must be a fresh, empty folder.
pub fn run(dir: &Path, split: &str, index_dir: &Path, progress: bool) -> Result<RetrievalReport> {
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
    let n_docs = docs.len();
    let report = ingest_docs(
        index_dir,
        docs,
        ChunkConfig::default(),
        progress.then_some(n_docs as u64),
    )?;
    let index = Index::open(index_dir)?;
    let (mut nd, mut rc, mut rr) = (0.0, 0.0, 0.0);
    let mut times = Vec::with_capacity(queries.len());
    for (qid, text) in &queries {
        let t = Instant::now();
        let hits = index.search(text, &Filters::default(), 300)?;
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
    Ok(RetrievalReport {
        ndcg10: nd / n,
        recall100: rc / n,
        mrr10: rr / n,
        retriever: "bm25".into(),
        split: split.into(),
        queries: queries.len(),
        documents: n_docs,
        chunks: report.chunks,
        ingest_seconds: report.seconds,
        ingest_docs_per_second: n_docs as f64 / report.seconds.max(1e-9),
        search_p50_ms: quantile(&times, 0.5),
        search_p95_ms: quantile(&times, 0.95),
    })
}
