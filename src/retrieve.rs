//! Retrieval: resolve filters in the store, run BM25, dense (embedding) or
//! hybrid search, and return chunks with their documents' fields, ranks,
//! scores and a highlighted snippet. Every result says which retrievers
//! found it, at what rank and with what score, and how they were fused.
//!
//! invariant: retrieval never changes the store; it may only bring the
//! derived indexes up to date with it.
//! invariant: no result lies outside the filters, whichever retriever found it.

use crate::bm25::{Bm25Index, QueryTerm};
use crate::embed::Embedder;
use crate::error::Result;
use crate::fuse::{RRF_K, Weights, rrf};
use crate::store::{Store, StoredChunk};
use crate::text::{fold_ws, term_spans};
use crate::types::{ChunkId, Filters};
use crate::vectors::{DEFAULT_SCALAR, VectorIndex};
use serde::Serialize;
use std::collections::{HashMap, HashSet};
use std::path::Path;
use std::sync::Arc;

/// Which retriever ranks the results.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum RetrieverKind {
    Bm25,
    Dense,
    Hybrid,
}

impl RetrieverKind {
    pub fn name(self) -> &'static str {
        match self {
            RetrieverKind::Bm25 => "bm25",
            RetrieverKind::Dense => "dense",
            RetrieverKind::Hybrid => "hybrid",
        }
    }
}

/// How to search.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SearchOptions {
    /// `None`: hybrid when an embedder and vectors are available, else BM25.
    pub retriever: Option<RetrieverKind>,
    pub weights: Weights,
    pub rrf_k: f64,
    /// Candidates taken from each retriever before fusing (at least k).
    pub depth: usize,
    /// Pseudo-relevance feedback (RM3) for the BM25 ranking; off by default.
    pub feedback: Option<crate::feedback::Feedback>,
    /// Dense search by each chunk's best sentence as well as by its whole
    /// text (the stored sentence vectors); off by default.
    pub sentences: bool,
}

impl Default for SearchOptions {
    fn default() -> Self {
        SearchOptions {
            retriever: None,
            weights: Weights::default(),
            rrf_k: RRF_K,
            depth: 100,
            feedback: None,
            sentences: false,
        }
    }
}

/// One retriever's view of a result.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Signal {
    pub retriever: &'static str,
    /// 1-based rank in that retriever's list; `None` when it did not return the chunk.
    pub rank: Option<usize>,
    /// BM25 score, or cosine similarity for dense.
    pub score: Option<f32>,
}

/// A retrieved chunk and why it was returned.
#[derive(Debug, Clone)]
pub struct Retrieved {
    pub chunk: StoredChunk,
    /// The retriever whose order this is: bm25, dense or hybrid.
    pub retriever: &'static str,
    /// 1-based rank in the final order.
    pub rank: usize,
    /// The final score: BM25, cosine, or the fused RRF score.
    pub score: f32,
    /// Each retriever's rank and score for this chunk.
    pub signals: Vec<Signal>,
}

/// A snippet of text with the byte ranges of matched terms.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Snippet {
    pub text: String,
    pub highlights: Vec<(usize, usize)>,
}

/// An open index: the store, its BM25 index, and (with an embedder) its
/// vector index.
pub struct Index {
    pub store: Store,
    pub bm25: Bm25Index,
    pub embedder: Option<Arc<dyn Embedder>>,
    pub vectors: Option<VectorIndex>,
    /// One-line notes for the user (a fallback to BM25, chunks not yet embedded).
    pub notes: Vec<String>,
    /// What `find` uses.
    pub options: SearchOptions,
    /// The sentence vector graph, built on first use.
    units: std::sync::OnceLock<crate::units::UnitIndex>,
}

impl Index {
    /// Open with BM25 only.
    pub fn open(dir: &Path) -> Result<Index> {
        Self::open_with(dir, None)
    }

    /// Open with an embedder: its vector index is brought up to date with
    /// the store. Chunks not yet embedded are not embedded here (that is
    /// ingest's and reindex's job); a note says how many are missing.
    pub fn open_with(dir: &Path, embedder: Option<Arc<dyn Embedder>>) -> Result<Index> {
        let store = Store::open(dir)?;
        let bm25 = Bm25Index::open_synced(dir, &store)?;
        let mut notes = Vec::new();
        // An `add` running on this index: what it has committed is
        // searched, and it brings the rest (and its vectors) in itself.
        let writer = crate::lock::writer_elsewhere(dir);
        if let Some(h) = &writer {
            notes.push(format!(
                "note: this index is being written by {h}; results cover what it has stored so far"
            ));
        }
        let vectors = match &embedder {
            Some(e) => {
                let v = VectorIndex::open_synced(dir, &store, e.id(), e.dim(), DEFAULT_SCALAR)?;
                let missing = store.count_pending_embeddings(e.id())?;
                if writer.is_some() {
                    // The writer embeds them; `reindex` would only repeat it.
                } else if v.is_empty() {
                    notes.push(format!(
                        "note: no chunk has an embedding from {}; using BM25 only (run `onrecord reindex`)",
                        e.id()
                    ));
                } else if missing > 0 {
                    notes.push(format!(
                        "note: {missing} chunk(s) have no embedding yet, so dense search cannot find them; \
                         run `onrecord reindex`"
                    ));
                }
                Some(v)
            }
            None => None,
        };
        Ok(Index {
            store,
            bm25,
            embedder,
            vectors,
            notes,
            options: SearchOptions::default(),
            units: std::sync::OnceLock::new(),
        })
    }

    /// Whether dense search can run.
    pub fn has_dense(&self) -> bool {
        self.embedder.is_some() && self.vectors.as_ref().is_some_and(|v| !v.is_empty())
    }

    /// The retriever `opts` resolves to here: hybrid or dense fall back to
    /// BM25 when there is no embedder or no vectors.
    pub fn effective(&self, opts: &SearchOptions) -> RetrieverKind {
        match opts.retriever {
            _ if !self.has_dense() => RetrieverKind::Bm25,
            None => RetrieverKind::Hybrid,
            Some(r) => r,
        }
    }

    /// The top `k` chunks for `query` under `filters`, with `self.options`.
    pub fn search(&self, query: &str, filters: &Filters, k: usize) -> Result<Vec<Retrieved>> {
        self.search_with(query, filters, k, &self.options)
    }

    /// The retriever `find` uses.
    pub fn retriever(&self) -> RetrieverKind {
        self.effective(&self.options)
    }

    /// The top `k` chunks for `query` under `filters`.
    pub fn search_with(
        &self,
        query: &str,
        filters: &Filters,
        k: usize,
        opts: &SearchOptions,
    ) -> Result<Vec<Retrieved>> {
        let qv = match self.effective(opts) {
            RetrieverKind::Bm25 => None,
            _ => Some(self.embed_query(query)?),
        };
        self.search_embedded(query, qv.as_deref(), filters, k, opts)
    }

    /// As [`Index::search_with`], with the query's vector already made
    /// (`None` is only valid when the effective retriever is BM25).
    pub fn search_embedded(
        &self,
        query: &str,
        qv: Option<&[f32]>,
        filters: &Filters,
        k: usize,
        opts: &SearchOptions,
    ) -> Result<Vec<Retrieved>> {
        let allowed = self.store.docs_matching(filters)?;
        let kind = self.effective(opts);
        let depth = opts.depth.max(k);
        let bm25 = match kind {
            RetrieverKind::Dense => Vec::new(),
            RetrieverKind::Bm25 => self.bm25_search(query, allowed.as_deref(), k, opts)?,
            RetrieverKind::Hybrid => self.bm25_search(query, allowed.as_deref(), depth, opts)?,
        };
        let dense = match kind {
            RetrieverKind::Bm25 => Vec::new(),
            _ => {
                let qv = qv.ok_or_else(|| {
                    crate::Error::Invalid("dense search needs the query's vector".into())
                })?;
                let n = if kind == RetrieverKind::Dense {
                    k
                } else {
                    depth
                };
                if opts.sentences {
                    self.dense_search_sentences(qv, allowed.as_deref(), n)?
                } else {
                    self.dense_search(qv, allowed.as_deref(), n)?
                }
            }
        };
        let bm25_ids: Vec<u64> = bm25.iter().map(|h| h.chunk_id.0).collect();
        let dense_ids: Vec<u64> = dense.iter().map(|n| n.chunk_id.0).collect();
        let bm25_score: HashMap<u64, f32> = bm25.iter().map(|h| (h.chunk_id.0, h.score)).collect();
        let dense_score: HashMap<u64, f32> =
            dense.iter().map(|n| (n.chunk_id.0, n.similarity)).collect();
        let fused = rrf(
            &[
                (opts.weights.bm25, &bm25_ids),
                (opts.weights.dense, &dense_ids),
            ],
            opts.rrf_k,
        );
        let order: Vec<(u64, f32)> = match kind {
            RetrieverKind::Bm25 => bm25.iter().map(|h| (h.chunk_id.0, h.score)).collect(),
            RetrieverKind::Dense => dense.iter().map(|n| (n.chunk_id.0, n.similarity)).collect(),
            RetrieverKind::Hybrid => fused
                .iter()
                .take(k)
                .map(|f| (f.id, f.score as f32))
                .collect(),
        };
        let ranks: HashMap<u64, &Vec<Option<usize>>> =
            fused.iter().map(|f| (f.id, &f.ranks)).collect();
        let ids: Vec<ChunkId> = order.iter().map(|(id, _)| ChunkId(*id)).collect();
        // Pair by id: a hit whose chunk is no longer in the store is dropped
        // rather than lending its rank and score to a neighbour.
        let mut chunks: HashMap<_, _> = self
            .store
            .chunks(&ids)?
            .into_iter()
            .map(|c| (c.id.0, c))
            .collect();
        let mut out = Vec::with_capacity(order.len());
        for (id, score) in order {
            let Some(chunk) = chunks.remove(&id) else {
                continue;
            };
            let r = ranks.get(&id);
            let mut signals = Vec::new();
            if kind != RetrieverKind::Dense {
                signals.push(Signal {
                    retriever: "bm25",
                    rank: r.and_then(|r| r[0]),
                    score: bm25_score.get(&id).copied(),
                });
            }
            if kind != RetrieverKind::Bm25 {
                signals.push(Signal {
                    retriever: "dense",
                    rank: r.and_then(|r| r[1]),
                    score: dense_score.get(&id).copied(),
                });
            }
            out.push(Retrieved {
                chunk,
                retriever: kind.name(),
                rank: out.len() + 1,
                score,
                signals,
            });
        }
        Ok(out)
    }

    /// The BM25 ranking, with RM3 feedback when `opts` asks for it: the
    /// first pass's passages (title and text) expand the query.
    fn bm25_search(
        &self,
        query: &str,
        allowed: Option<&[crate::types::DocId]>,
        k: usize,
        opts: &SearchOptions,
    ) -> Result<Vec<crate::bm25::Hit>> {
        let Some(fb) = opts.feedback else {
            return self.bm25.search(query, allowed, k);
        };
        let first = self.bm25.search(query, allowed, fb.docs)?;
        if first.is_empty() {
            return Ok(first);
        }
        let ids: Vec<ChunkId> = first.iter().map(|h| h.chunk_id).collect();
        let chunks: HashMap<ChunkId, StoredChunk> = self
            .store
            .chunks(&ids)?
            .into_iter()
            .map(|c| (c.id, c))
            .collect();
        let texts: Vec<(String, f32)> = first
            .iter()
            .filter_map(|h| {
                chunks
                    .get(&h.chunk_id)
                    .map(|c| (format!("{}\n{}", c.title, c.text), h.score))
            })
            .collect();
        let passages: Vec<(&str, f32)> = texts.iter().map(|(t, s)| (t.as_str(), *s)).collect();
        let expanded = crate::feedback::expand(query, &passages, &fb);
        self.bm25.search_weighted(&expanded, allowed, k)
    }

    /// The query's vector.
    pub fn embed_query(&self, query: &str) -> Result<Vec<f32>> {
        let e = self
            .embedder
            .as_ref()
            .ok_or_else(|| crate::Error::Invalid("dense search needs an embedding model".into()))?;
        Ok(e.embed(&[query])?.remove(0))
    }

    /// Nearest chunks to a query vector among the allowed documents.
    pub fn dense_search(
        &self,
        qv: &[f32],
        allowed_docs: Option<&[crate::types::DocId]>,
        k: usize,
    ) -> Result<Vec<crate::vectors::Neighbour>> {
        let Some(v) = &self.vectors else {
            return Ok(Vec::new());
        };
        v.search(qv, self.allowed_chunks(allowed_docs)?.as_ref(), k)
    }

    /// The chunk ids of the allowed documents (`None`: all).
    fn allowed_chunks(
        &self,
        allowed_docs: Option<&[crate::types::DocId]>,
    ) -> Result<Option<HashSet<u64>>> {
        Ok(match allowed_docs {
            Some(docs) => Some(
                self.store
                    .chunk_ids_of(docs)?
                    .into_iter()
                    .map(|c| c.0)
                    .collect(),
            ),
            None => None,
        })
    }

    /// Nearest chunks by whole text or by best sentence, whichever is
    /// nearer.
    pub fn dense_search_sentences(
        &self,
        qv: &[f32],
        allowed_docs: Option<&[crate::types::DocId]>,
        k: usize,
    ) -> Result<Vec<crate::vectors::Neighbour>> {
        let (Some(e), Some(v)) = (&self.embedder, &self.vectors) else {
            return Ok(Vec::new());
        };
        let allowed = self.allowed_chunks(allowed_docs)?;
        let whole = v.search(qv, allowed.as_ref(), k)?;
        let units = match self.units.get() {
            Some(u) => u,
            None => {
                let built = crate::units::UnitIndex::build(&self.store, e.id(), e.dim())?;
                self.units.get_or_init(|| built)
            }
        };
        let best = units.search(qv, allowed.as_ref(), k)?;
        Ok(crate::units::merge_best(&[&whole, &best], k))
    }

    pub fn query_terms(&self, query: &str) -> Result<Vec<QueryTerm>> {
        self.bm25.query_terms(query)
    }
}

/// A window of about `width` characters of `text` around the densest run of
/// The search record `find --json` prints and `/api/find` returns:
/// the query, filters and retriever, and each result with its page span,
/// highlighted snippet and each retriever's rank and score.
pub fn search_record(
    idx: &Index,
    query: &str,
    filters: &Filters,
    hits: &[Retrieved],
) -> serde_json::Value {
    let used = idx.retriever();
    let rows: Vec<serde_json::Value> = hits
        .iter()
        .map(|h| {
            let s = snippet(&h.chunk.text, query, 240);
            serde_json::json!({
                "rank": h.rank,
                "score": h.score,
                "retriever": h.retriever,
                "signals": h.signals,
                "chunk_id": h.chunk.id,
                "doc_id": h.chunk.doc_id,
                "title": h.chunk.title,
                "organisation": h.chunk.organisation,
                "date": h.chunk.date,
                "page": h.chunk.span.start_page,
                "end_page": h.chunk.span.end_page,
                "snippet": s.text,
                "highlights": s.highlights,
                "hash": h.chunk.hash,
            })
        })
        .collect();
    serde_json::json!({
        "query": query,
        "filters": filters,
        "retriever": used.name(),
        "embedder": (used != RetrieverKind::Bm25)
            .then(|| idx.embedder.as_ref().map(|e| e.id().to_owned()))
            .flatten(),
        "fusion": (used == RetrieverKind::Hybrid).then(|| serde_json::json!({
            "method": "reciprocal rank fusion", "k": idx.options.rrf_k,
            "weights": idx.options.weights, "depth": idx.options.depth})),
        "results": rows,
    })
}

/// query-term matches, with white space folded and matches marked.
pub fn snippet(text: &str, query: &str, width: usize) -> Snippet {
    let text = fold_ws(&text.replace(crate::chunk::PAGE_BREAK, " "));
    let want: HashSet<String> = crate::text::terms(query).into_iter().collect();
    let matches: Vec<(usize, usize)> = term_spans(&text)
        .into_iter()
        .filter(|(t, _)| want.contains(t))
        .map(|(_, r)| (r.start, r.end))
        .collect();
    // Choose the start (a match position) whose window holds the most matches.
    let mut best = (0usize, 0usize);
    for (i, &(s, _)) in matches.iter().enumerate() {
        let n = matches[i..].iter().take_while(|m| m.1 <= s + width).count();
        if n > best.1 {
            best = (s, n);
        }
    }
    let mut start = best.0.saturating_sub(width / 5);
    while !text.is_char_boundary(start) {
        start -= 1;
    }
    // Begin at a word boundary.
    if start > 0
        && let Some(sp) = text[start..].find(' ')
        && sp < 20
    {
        start += sp + 1;
    }
    let mut end = (start + width).min(text.len());
    while !text.is_char_boundary(end) {
        end += 1;
    }
    if end < text.len()
        && let Some(sp) = text[start..end].rfind(' ')
    {
        end = start + sp;
    }
    let mut out = String::new();
    let lead = if start > 0 { "… " } else { "" };
    out.push_str(lead);
    out.push_str(&text[start..end]);
    if end < text.len() {
        out.push_str(" …");
    }
    let highlights = matches
        .into_iter()
        .filter(|&(s, e)| s >= start && e <= end)
        .map(|(s, e)| (s - start + lead.len(), e - start + lead.len()))
        .collect();
    Snippet {
        text: out,
        highlights,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn snippet_marks_matches_in_the_densest_window() {
        let text = format!(
            "{} The budget for the Pier 3 works has increased by $2.3M. {}",
            "filler words here. ".repeat(30),
            "more filler. ".repeat(30)
        );
        let s = snippet(&text, "pier budget", 120);
        assert!(
            s.text.contains("The budget for the Pier 3 works"),
            "{}",
            s.text
        );
        let marked: Vec<&str> = s.highlights.iter().map(|&(a, b)| &s.text[a..b]).collect();
        assert_eq!(marked, vec!["budget", "Pier"]);
        assert!(s.text.starts_with("… ") && s.text.ends_with(" …"));
    }
}
