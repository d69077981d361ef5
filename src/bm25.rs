//! BM25 over chunks, through tantivy. The index is derived from the store:
//! each tantivy document is one chunk (its document's title plus its text),
//! keyed by chunk id. Filters arrive as a set of allowed document ids,
//! resolved by the store, and are applied inside the query.
//!
//! invariant: this index holds no text that is not in the store; it can be
//! deleted and rebuilt from the store at any time (`rebuild`).
//! invariant: a commit records the store generation it reflects, so a stale
//! index is detected on open.

use crate::error::{Error, Result};
use crate::store::{Store, StoredChunk};
use crate::text::{ANALYZER, analyzer, terms};
use crate::types::{ChunkId, DocId};
use std::path::{Path, PathBuf};
use tantivy::collector::TopDocs;
use tantivy::query::{BooleanQuery, BoostQuery, Occur, Query, TermQuery, TermSetQuery};
use tantivy::schema::{
    FAST, Field, INDEXED, IndexRecordOption, STRING, Schema, TextFieldIndexing, TextOptions,
};
use tantivy::{Index, IndexReader, IndexWriter, ReloadPolicy, TantivyDocument, Term};

pub const BM25_DIR: &str = "bm25";

/// One search hit: a chunk, its BM25 score and its 1-based rank.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Hit {
    pub chunk_id: ChunkId,
    pub score: f32,
    pub rank: usize,
}

/// A query term with its inverse document frequency in this index.
#[derive(Debug, Clone, PartialEq)]
pub struct QueryTerm {
    pub term: String,
    pub idf: f32,
}

pub struct Bm25Index {
    index: Index,
    reader: IndexReader,
    dir: PathBuf,
    chunk_id: Field,
    doc: Field,
    body: Field,
}

fn schema() -> Schema {
    let mut b = Schema::builder();
    b.add_u64_field("chunk_id", INDEXED | FAST);
    b.add_text_field("doc", STRING);
    let body = TextOptions::default().set_indexing_options(
        TextFieldIndexing::default()
            .set_tokenizer(ANALYZER)
            .set_index_option(IndexRecordOption::WithFreqs),
    );
    b.add_text_field("body", body);
    b.build()
}

impl Bm25Index {
    /// Open the index under `index_dir/bm25`, creating it when absent.
    pub fn open_or_create(index_dir: &Path) -> Result<Bm25Index> {
        let dir = index_dir.join(BM25_DIR);
        let e = |err: tantivy::TantivyError| Error::search(&dir, err);
        let index = if dir.join("meta.json").exists() {
            let idx = Index::open_in_dir(&dir).map_err(e)?;
            if idx.schema() != schema() {
                // A derived index in an older layout: start it afresh.
                drop(idx);
                std::fs::remove_dir_all(&dir).map_err(|err| Error::io(&dir, err))?;
                std::fs::create_dir_all(&dir).map_err(|err| Error::io(&dir, err))?;
                Index::create_in_dir(&dir, schema()).map_err(e)?
            } else {
                idx
            }
        } else {
            std::fs::create_dir_all(&dir).map_err(|err| Error::io(&dir, err))?;
            Index::create_in_dir(&dir, schema()).map_err(e)?
        };
        index.tokenizers().register(ANALYZER, analyzer());
        let reader = index
            .reader_builder()
            .reload_policy(ReloadPolicy::Manual)
            .try_into()
            .map_err(e)?;
        let s = index.schema();
        let field = |name: &str| s.get_field(name).map_err(e);
        Ok(Bm25Index {
            chunk_id: field("chunk_id")?,
            doc: field("doc")?,
            body: field("body")?,
            index,
            reader,
            dir,
        })
    }

    /// Open the index and make sure it reflects the store, rebuilding it when
    /// it does not (for example after a crash between the two commits).
    ///
    /// While another process holds the index's writer lock (an `add` is
    /// running), the index is left as that process last committed it: the
    /// writer brings it up to date, and a rebuild here would race it.
    pub fn open_synced(index_dir: &Path, store: &Store) -> Result<Bm25Index> {
        let idx = Bm25Index::open_or_create(index_dir)?;
        let want = store.generation()?;
        if idx.synced_generation()? != Some(want) {
            match crate::lock::try_acquire(
                index_dir,
                "a repair of the search index",
                crate::lock::PATIENCE,
            )? {
                Ok(_writer) => {
                    tracing::info!("BM25 index is behind the store; rebuilding it");
                    idx.rebuild(store)?;
                }
                Err(holder) => tracing::debug!(
                    "BM25 index is behind the store while {} writes; searching what is committed",
                    holder.map_or_else(|| "another process".to_string(), |h| h.to_string())
                ),
            }
        }
        Ok(idx)
    }

    fn err(&self, e: impl std::fmt::Display) -> Error {
        Error::search(&self.dir, e)
    }

    /// The store generation recorded by the last commit.
    pub fn synced_generation(&self) -> Result<Option<u64>> {
        let metas = self.index.load_metas().map_err(|e| self.err(e))?;
        Ok(metas.payload.and_then(|p| p.parse().ok()))
    }

    /// Take the index's writer lock. The lock is a file lock, and a child
    /// process started by another thread (pdftotext) can hold a copy of a
    /// just-released lock for a moment until it executes, so a busy lock is
    /// retried for up to five seconds before giving up.
    pub fn writer(&self) -> Result<Bm25Writer<'_>> {
        let deadline = std::time::Instant::now() + std::time::Duration::from_secs(5);
        loop {
            match self.index.writer_with_num_threads(1, 64_000_000) {
                Ok(writer) => return Ok(Bm25Writer { idx: self, writer }),
                Err(tantivy::TantivyError::LockFailure(
                    tantivy::directory::error::LockError::LockBusy,
                    _,
                )) if std::time::Instant::now() < deadline => {
                    std::thread::sleep(std::time::Duration::from_millis(20));
                }
                Err(tantivy::TantivyError::LockFailure(..)) => {
                    return Err(self.err(
                        "another onrecord process is writing to this index; wait for it to finish",
                    ));
                }
                Err(e) => return Err(self.err(e)),
            }
        }
    }

    /// Drop every entry and index every chunk in the store again.
    pub fn rebuild(&self, store: &Store) -> Result<()> {
        let mut w = self.writer()?;
        w.writer.delete_all_documents().map_err(|e| self.err(e))?;
        store.for_each_chunk(|c| w.add(&c))?;
        w.commit(store.generation()?)
    }

    /// Analyzed query terms with their IDF (BM25's `ln(1 + (N - n + 0.5)/(n + 0.5))`).
    pub fn query_terms(&self, query: &str) -> Result<Vec<QueryTerm>> {
        let searcher = self.reader.searcher();
        let n = searcher.num_docs() as f32;
        let mut out: Vec<QueryTerm> = Vec::new();
        for t in terms(query) {
            if out.iter().any(|q| q.term == t) {
                continue;
            }
            let df = searcher
                .doc_freq(&Term::from_field_text(self.body, &t))
                .map_err(|e| self.err(e))? as f32;
            let idf = (1.0 + (n - df + 0.5) / (df + 0.5)).ln();
            out.push(QueryTerm { term: t, idf });
        }
        Ok(out)
    }

    /// Top `k` chunks for `query`; `allowed` restricts the documents (an
    /// empty slice allows none; `None` allows all).
    pub fn search(&self, query: &str, allowed: Option<&[DocId]>, k: usize) -> Result<Vec<Hit>> {
        // A repeated term counts again, as query term frequency does.
        let weighted: Vec<(String, f32)> = terms(query).into_iter().map(|t| (t, 1.0)).collect();
        self.search_weighted(&weighted, allowed, k)
    }

    /// Top `k` chunks for analysed terms, each term's BM25 score scaled by
    /// its weight (the expanded query of pseudo-relevance feedback).
    pub fn search_weighted(
        &self,
        qterms: &[(String, f32)],
        allowed: Option<&[DocId]>,
        k: usize,
    ) -> Result<Vec<Hit>> {
        if qterms.is_empty() || k == 0 || allowed.is_some_and(|a| a.is_empty()) {
            return Ok(Vec::new());
        }
        // Each query term is an optional clause, so scores add up as in plain
        // BM25.
        let clauses: Vec<(Occur, Box<dyn Query>)> = qterms
            .iter()
            .map(|(t, w)| {
                let term: Box<dyn Query> = Box::new(TermQuery::new(
                    Term::from_field_text(self.body, t),
                    IndexRecordOption::WithFreqs,
                ));
                let q: Box<dyn Query> = if *w == 1.0 {
                    term
                } else {
                    Box::new(BoostQuery::new(term, *w))
                };
                (Occur::Should, q)
            })
            .collect();
        let text_query: Box<dyn Query> = Box::new(BooleanQuery::new(clauses));
        let query: Box<dyn Query> = match allowed {
            None => text_query,
            Some(docs) => {
                let set =
                    TermSetQuery::new(docs.iter().map(|d| Term::from_field_text(self.doc, &d.0)));
                Box::new(BooleanQuery::new(vec![
                    (Occur::Must, text_query),
                    (
                        Occur::Must,
                        Box::new(tantivy::query::ConstScoreQuery::new(Box::new(set), 0.0)),
                    ),
                ]))
            }
        };
        let searcher = self.reader.searcher();
        let top = searcher
            .search(&query, &TopDocs::with_limit(k).order_by_score())
            .map_err(|e| self.err(e))?;
        let mut hits = Vec::with_capacity(top.len());
        for (score, addr) in top {
            let col = searcher
                .segment_reader(addr.segment_ord)
                .fast_fields()
                .u64("chunk_id")
                .map_err(|e| self.err(e))?;
            if let Some(id) = col.first(addr.doc_id) {
                hits.push(Hit {
                    chunk_id: ChunkId(id),
                    score,
                    rank: hits.len() + 1,
                });
            }
        }
        Ok(hits)
    }

    fn reload(&self) -> Result<()> {
        self.reader.reload().map_err(|e| self.err(e))
    }
}

/// Adds and deletes chunks; nothing is visible until `commit`.
pub struct Bm25Writer<'a> {
    idx: &'a Bm25Index,
    writer: IndexWriter,
}

impl Bm25Writer<'_> {
    pub fn add(&mut self, c: &StoredChunk) -> Result<()> {
        let mut d = TantivyDocument::default();
        d.add_u64(self.idx.chunk_id, c.id.0);
        d.add_text(self.idx.doc, &c.doc_id.0);
        // The title is indexed with every chunk so that a chunk is found by
        // the name of the record it sits in.
        d.add_text(self.idx.body, &c.title);
        d.add_text(self.idx.body, &c.text);
        self.writer.add_document(d).map_err(|e| self.idx.err(e))?;
        Ok(())
    }

    pub fn delete_doc(&mut self, doc: &DocId) {
        self.writer
            .delete_term(Term::from_field_text(self.idx.doc, &doc.0));
    }

    /// Commit, recording the store generation this state reflects.
    pub fn commit(mut self, generation: u64) -> Result<()> {
        let mut prepared = self.writer.prepare_commit().map_err(|e| self.idx.err(e))?;
        prepared.set_payload(&generation.to_string());
        prepared.commit().map_err(|e| self.idx.err(e))?;
        self.writer
            .wait_merging_threads()
            .map_err(|e| self.idx.err(e))?;
        self.idx.reload()
    }
}
