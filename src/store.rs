//! The SQLite store: documents, pages and chunks, with character offsets into
//! each page's text and content hashes, and the embedding vectors of chunk
//! texts keyed by model and content hash. It is the source of truth; the BM25
//! and vector indexes are derived from it and can always be rebuilt.
//!
//! invariant: a document is replaced in one transaction: readers see the old
//! version or the new one, never a mix, and a failure leaves the old one.
//! invariant: the store refuses to open a file written in another format.
//! invariant: chunk ids are never reused (AUTOINCREMENT).
//! invariant: an embedding is stored once per (model, embedding key); a chunk
//! whose embedding input is unchanged is never embedded again.
//! invariant: the answer log is append-only; ingest, re-ingest and reindex
//! never touch it, and the text of every page an answer cites is kept
//! (by content hash) so a later replay can show what changed.

use crate::chunk::Chunk;
use crate::error::{Error, Result};
use crate::types::{ChunkId, ChunkSpan, DocId, DocMeta, Filters};
use rusqlite::{Connection, OptionalExtension, params};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Format version of the store. Bump on any incompatible schema change.
/// Format 2 added embeddings, format 3 the answer log, format 4 OCR (the
/// cache and each page's words); older stores are upgraded in place.
pub const STORE_FORMAT: u32 = 4;
pub const STORE_FILE: &str = "store.sqlite";

const SCHEMA: &str = "
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS documents (
    rowid INTEGER PRIMARY KEY,
    doc_id TEXT NOT NULL UNIQUE,
    source TEXT NOT NULL UNIQUE,
    file_hash TEXT NOT NULL,
    ingest_key TEXT NOT NULL,
    kind TEXT NOT NULL,
    title TEXT NOT NULL,
    organisation TEXT,
    date TEXT,
    release TEXT,
    url TEXT,
    headers TEXT,
    page_count INTEGER NOT NULL,
    ingested_at INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS pages (
    doc INTEGER NOT NULL REFERENCES documents(rowid) ON DELETE CASCADE,
    page INTEGER NOT NULL,
    text TEXT NOT NULL,
    hash TEXT NOT NULL,
    PRIMARY KEY (doc, page)
);
CREATE TABLE IF NOT EXISTS chunks (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    doc INTEGER NOT NULL REFERENCES documents(rowid) ON DELETE CASCADE,
    seq INTEGER NOT NULL,
    start_page INTEGER NOT NULL,
    start_char INTEGER NOT NULL,
    end_page INTEGER NOT NULL,
    end_char INTEGER NOT NULL,
    text TEXT NOT NULL,
    hash TEXT NOT NULL,
    embed_key TEXT NOT NULL DEFAULT ''
);
CREATE INDEX IF NOT EXISTS chunks_doc ON chunks(doc);
";

/// Tables added in format 2.
const SCHEMA_2: &str = "
CREATE TABLE IF NOT EXISTS embeddings (
    rowid INTEGER PRIMARY KEY,
    model TEXT NOT NULL,
    key TEXT NOT NULL,
    vector BLOB NOT NULL,
    UNIQUE (model, key)
);
CREATE TABLE IF NOT EXISTS dropped_chunks (
    chunk_id INTEGER PRIMARY KEY,
    generation INTEGER NOT NULL
);
";

/// Tables added in format 3: the answer log, and the text of the pages its
/// answers cite, keyed by content hash (kept when a re-ingest replaces the
/// page).
const SCHEMA_3: &str = "
CREATE TABLE IF NOT EXISTS answers (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    created_at TEXT NOT NULL,
    question TEXT NOT NULL,
    config TEXT NOT NULL,
    record TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS cited_pages (
    hash TEXT PRIMARY KEY,
    doc_id TEXT NOT NULL,
    page INTEGER NOT NULL,
    text TEXT NOT NULL
);
";

/// Tables added in format 4: OCR results by page-drawing key (never
/// pruned by ingest, so re-ingesting never reads a page twice), and the
/// words and confidences of every stored page that came from OCR.
const SCHEMA_4: &str = "
CREATE TABLE IF NOT EXISTS ocr_cache (
    key TEXT PRIMARY KEY,
    engine TEXT NOT NULL,
    page TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS page_ocr (
    doc INTEGER NOT NULL REFERENCES documents(rowid) ON DELETE CASCADE,
    page INTEGER NOT NULL,
    cache_key TEXT NOT NULL,
    reason TEXT NOT NULL,
    confidence REAL,
    words TEXT NOT NULL,
    PRIMARY KEY (doc, page)
);
";

/// One entry of the answer log, without its record.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize, PartialEq)]
pub struct LoggedAnswer {
    pub id: u64,
    pub created_at: String,
    pub question: String,
    pub config: serde_json::Value,
    pub supported: usize,
    pub struck: usize,
    pub abstained: bool,
}

/// The text a chunk is embedded as: its document's title (when it is a real
/// title, not the id standing in for one) and its text.
pub fn embedding_input(doc_id: &str, title: &str, text: &str) -> String {
    if title.is_empty() || title == doc_id {
        text.to_owned()
    } else {
        format!("{title}\n{text}")
    }
}

/// Content key of an embedding input.
pub fn embedding_key(input: &str) -> String {
    crate::text::hash_hex(input.as_bytes())
}

/// Vectors are stored as little-endian f32.
pub fn vector_to_blob(v: &[f32]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

pub fn blob_to_vector(b: &[u8]) -> Vec<f32> {
    b.chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect()
}

/// A chunk still waiting for its embedding.
#[derive(Debug, Clone)]
pub struct PendingEmbedding {
    pub chunk_id: ChunkId,
    pub key: String,
    pub input: String,
}

/// A document ready to be written: its identity, metadata, pages and chunks.
#[derive(Debug, Clone)]
pub struct NewDocument {
    pub doc_id: DocId,
    /// Canonical path of the source file (or a synthetic `scheme:id` for in-memory corpora).
    pub source: String,
    pub file_hash: String,
    /// Hash of the file, the metadata and the chunking settings: when it is
    /// unchanged, re-ingesting the file does nothing.
    pub ingest_key: String,
    pub kind: String,
    pub meta: DocMeta,
    /// Extra headers (for e-mail: from, to, cc, subject, date), as JSON.
    pub headers: Option<serde_json::Value>,
    pub pages: Vec<String>,
    pub chunks: Vec<Chunk>,
    /// The pages whose text came from OCR.
    pub ocr: Vec<crate::ocr::PageOcr>,
}

/// What the store knows about a source file already ingested.
#[derive(Debug, Clone)]
pub struct KnownSource {
    pub doc_id: DocId,
    pub file_hash: String,
    /// Hash of the file, the metadata and the chunking settings it was stored with.
    pub ingest_key: String,
}

/// A chunk with its document's descriptive fields, as search and drafting need it.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredChunk {
    pub id: ChunkId,
    pub doc_id: DocId,
    pub title: String,
    pub organisation: Option<String>,
    pub date: Option<String>,
    pub seq: u32,
    pub span: ChunkSpan,
    pub text: String,
    pub hash: String,
}

/// A summary row for a document.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DocSummary {
    pub doc_id: DocId,
    pub title: String,
    pub organisation: Option<String>,
    pub date: Option<String>,
    pub release: Option<String>,
    pub url: Option<String>,
    pub kind: String,
    pub pages: u32,
    pub source: String,
}

pub struct Store {
    conn: Connection,
    path: PathBuf,
}

impl Store {
    /// Open the store in `dir`, creating the directory and the store if needed.
    pub fn open_or_create(dir: &Path) -> Result<Store> {
        std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
        let path = dir.join(STORE_FILE);
        let fresh = !path.exists();
        let conn = Connection::open(&path).map_err(|e| Error::store(&path, e))?;
        let store = Store { conn, path };
        store.pragmas()?;
        if fresh {
            store.init()?;
        } else {
            store.check_format()?;
        }
        Ok(store)
    }

    /// Upgrade a format 1 store in place: add the embedding tables and the
    /// embedding key of every chunk, in one transaction.
    fn upgrade_from_1(&self) -> Result<()> {
        let e = |e| Error::store(&self.path, e);
        let tx = self.conn.unchecked_transaction().map_err(e)?;
        tx.execute_batch("ALTER TABLE chunks ADD COLUMN embed_key TEXT NOT NULL DEFAULT '';")
            .map_err(e)?;
        tx.execute_batch(SCHEMA_2).map_err(e)?;
        {
            let mut read = tx
                .prepare("SELECT c.id, d.doc_id, d.title, c.text FROM chunks c JOIN documents d ON d.rowid = c.doc")
                .map_err(e)?;
            let rows = read
                .query_map([], |r| {
                    Ok((
                        r.get::<_, i64>(0)?,
                        r.get::<_, String>(1)?,
                        r.get::<_, String>(2)?,
                        r.get::<_, String>(3)?,
                    ))
                })
                .map_err(e)?
                .collect::<rusqlite::Result<Vec<_>>>()
                .map_err(e)?;
            let mut upd = tx
                .prepare("UPDATE chunks SET embed_key = ?2 WHERE id = ?1")
                .map_err(e)?;
            for (id, doc, title, text) in rows {
                upd.execute(params![
                    id,
                    embedding_key(&embedding_input(&doc, &title, &text))
                ])
                .map_err(e)?;
            }
        }
        tx.execute("UPDATE meta SET value = '2' WHERE key = 'format'", [])
            .map_err(e)?;
        tx.commit().map_err(e)
    }

    /// Upgrade a format 2 store in place: add the answer log.
    fn upgrade_from_2(&self) -> Result<()> {
        self.add_tables(SCHEMA_3, 3)
    }

    /// Upgrade a format 3 store in place: add the OCR tables.
    fn upgrade_from_3(&self) -> Result<()> {
        self.add_tables(SCHEMA_4, 4)
    }

    /// Creates `schema`'s tables and sets the format to `format`, in one
    /// transaction.
    fn add_tables(&self, schema: &str, format: u32) -> Result<()> {
        let e = |e| Error::store(&self.path, e);
        let tx = self.conn.unchecked_transaction().map_err(e)?;
        tx.execute_batch(schema).map_err(e)?;
        tx.execute(
            "UPDATE meta SET value = ?1 WHERE key = 'format'",
            params![format.to_string()],
        )
        .map_err(e)?;
        tx.commit().map_err(e)
    }

    /// Open an existing store; a missing one is an error that says how to make one.
    pub fn open(dir: &Path) -> Result<Store> {
        let path = dir.join(STORE_FILE);
        if !path.exists() {
            return Err(Error::NoIndex {
                path: dir.to_path_buf(),
            });
        }
        let conn = Connection::open(&path).map_err(|e| Error::store(&path, e))?;
        let store = Store { conn, path };
        store.pragmas()?;
        store.check_format()?;
        Ok(store)
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    fn err(&self, e: rusqlite::Error) -> Error {
        Error::store(&self.path, e)
    }

    fn pragmas(&self) -> Result<()> {
        self.conn
            .execute_batch(
                "PRAGMA foreign_keys = ON; PRAGMA journal_mode = WAL; PRAGMA synchronous = NORMAL; \
                 PRAGMA busy_timeout = 5000;",
            )
            .map_err(|e| self.err(e))
    }

    fn init(&self) -> Result<()> {
        self.conn.execute_batch(SCHEMA).map_err(|e| self.err(e))?;
        self.conn.execute_batch(SCHEMA_2).map_err(|e| self.err(e))?;
        self.conn.execute_batch(SCHEMA_3).map_err(|e| self.err(e))?;
        self.conn.execute_batch(SCHEMA_4).map_err(|e| self.err(e))?;
        self.conn
            .execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES ('format', ?1), ('generation', '0')",
                params![STORE_FORMAT.to_string()],
            )
            .map_err(|e| self.err(e))?;
        Ok(())
    }

    fn check_format(&self) -> Result<()> {
        let found: Option<String> = self
            .conn
            .query_row("SELECT value FROM meta WHERE key = 'format'", [], |r| {
                r.get(0)
            })
            .optional()
            .unwrap_or(None);
        match found {
            Some(v) if v == STORE_FORMAT.to_string() => Ok(()),
            Some(v) if v == "1" => {
                self.upgrade_from_1()?;
                self.upgrade_from_2()?;
                self.upgrade_from_3()
            }
            Some(v) if v == "2" => {
                self.upgrade_from_2()?;
                self.upgrade_from_3()
            }
            Some(v) if v == "3" => self.upgrade_from_3(),
            other => Err(Error::FormatMismatch {
                path: self.path.clone(),
                found: other.unwrap_or_else(|| "unknown (not an onrecord store)".into()),
                expected: STORE_FORMAT,
            }),
        }
    }

    /// A counter bumped by every change; the BM25 index records the value it
    /// was built at, so a stale index is detected and rebuilt.
    pub fn generation(&self) -> Result<u64> {
        let v: String = self
            .conn
            .query_row("SELECT value FROM meta WHERE key = 'generation'", [], |r| {
                r.get(0)
            })
            .map_err(|e| self.err(e))?;
        Ok(v.parse().unwrap_or(0))
    }

    pub fn known_source(&self, source: &str) -> Result<Option<KnownSource>> {
        self.conn
            .query_row(
                "SELECT doc_id, file_hash, ingest_key FROM documents WHERE source = ?1",
                params![source],
                |r| {
                    Ok(KnownSource {
                        doc_id: DocId(r.get(0)?),
                        file_hash: r.get(1)?,
                        ingest_key: r.get(2)?,
                    })
                },
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// The source path that holds `doc_id`, if any.
    pub fn source_of(&self, doc_id: &DocId) -> Result<Option<String>> {
        self.conn
            .query_row(
                "SELECT source FROM documents WHERE doc_id = ?1",
                params![doc_id.0],
                |r| r.get(0),
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// Insert a document, or replace the one with the same source, in one
    /// transaction. Returns the new chunks as stored, with their ids.
    pub fn put_document(&mut self, doc: &NewDocument) -> Result<Vec<StoredChunk>> {
        let path = self.path.clone();
        let e = |e: rusqlite::Error| Error::store(&path, e);
        let tx = self.conn.transaction().map_err(e)?;
        // The chunks of the version being replaced, so derived indexes can
        // drop them: they are tagged with the generation this change makes.
        tx.execute(
            "INSERT OR REPLACE INTO dropped_chunks(chunk_id, generation)
             SELECT c.id, (SELECT CAST(value AS INTEGER) + 1 FROM meta WHERE key = 'generation')
             FROM chunks c JOIN documents d ON d.rowid = c.doc WHERE d.source = ?1",
            params![doc.source],
        )
        .map_err(e)?;
        tx.execute(
            "DELETE FROM documents WHERE source = ?1",
            params![doc.source],
        )
        .map_err(e)?;
        let now = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_secs() as i64)
            .unwrap_or(0);
        let title = doc
            .meta
            .title
            .clone()
            .unwrap_or_else(|| doc.doc_id.0.clone());
        tx.execute(
            "INSERT INTO documents(doc_id, source, file_hash, ingest_key, kind, title, organisation, date, release, url, headers, page_count, ingested_at)
             VALUES (?1, ?2, ?3, ?13, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
            params![
                doc.doc_id.0,
                doc.source,
                doc.file_hash,
                doc.kind,
                title,
                doc.meta.organisation,
                doc.meta.date,
                doc.meta.release,
                doc.meta.url,
                doc.headers.as_ref().map(|h| h.to_string()),
                doc.pages.len() as i64,
                now,
                doc.ingest_key
            ],
        )
        .map_err(e)?;
        let rowid = tx.last_insert_rowid();
        {
            let mut ins = tx
                .prepare("INSERT INTO pages(doc, page, text, hash) VALUES (?1, ?2, ?3, ?4)")
                .map_err(e)?;
            for (i, p) in doc.pages.iter().enumerate() {
                ins.execute(params![
                    rowid,
                    i as i64 + 1,
                    p,
                    crate::text::hash_hex(p.as_bytes())
                ])
                .map_err(e)?;
            }
        }
        {
            let mut ins = tx
                .prepare(
                    "INSERT INTO page_ocr(doc, page, cache_key, reason, confidence, words)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                )
                .map_err(e)?;
            for o in &doc.ocr {
                ins.execute(params![
                    rowid,
                    o.page,
                    o.cache_key,
                    serde_json::to_string(&o.reason).expect("plain data serialises"),
                    o.confidence,
                    serde_json::to_string(&o.words).expect("plain data serialises"),
                ])
                .map_err(e)?;
            }
        }
        let mut out = Vec::with_capacity(doc.chunks.len());
        {
            let mut ins = tx
                .prepare(
                    "INSERT INTO chunks(doc, seq, start_page, start_char, end_page, end_char, text, hash, embed_key)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                )
                .map_err(e)?;
            for c in &doc.chunks {
                let hash = crate::text::hash_hex(c.text.as_bytes());
                let embed_key = embedding_key(&embedding_input(&doc.doc_id.0, &title, &c.text));
                ins.execute(params![
                    rowid,
                    c.seq,
                    c.span.start_page,
                    c.span.start_char as i64,
                    c.span.end_page,
                    c.span.end_char as i64,
                    c.text,
                    hash,
                    embed_key
                ])
                .map_err(e)?;
                out.push(StoredChunk {
                    id: ChunkId(tx.last_insert_rowid() as u64),
                    doc_id: doc.doc_id.clone(),
                    title: title.clone(),
                    organisation: doc.meta.organisation.clone(),
                    date: doc.meta.date.clone(),
                    seq: c.seq,
                    span: c.span,
                    text: c.text.clone(),
                    hash,
                });
            }
        }
        tx.execute(
            "UPDATE meta SET value = CAST(value AS INTEGER) + 1 WHERE key = 'generation'",
            [],
        )
        .map_err(e)?;
        tx.commit().map_err(e)?;
        Ok(out)
    }

    /// Look up chunks by id, with their documents' fields. Unknown ids are skipped.
    pub fn chunks(&self, ids: &[ChunkId]) -> Result<Vec<StoredChunk>> {
        let mut stmt = self
            .conn
            .prepare_cached(
                "SELECT c.id, d.doc_id, d.title, d.organisation, d.date, c.seq, c.start_page, c.start_char,
                        c.end_page, c.end_char, c.text, c.hash
                 FROM chunks c JOIN documents d ON d.rowid = c.doc WHERE c.id = ?1",
            )
            .map_err(|e| self.err(e))?;
        let mut out = Vec::with_capacity(ids.len());
        for id in ids {
            let row = stmt
                .query_row(params![id.0 as i64], row_to_chunk)
                .optional()
                .map_err(|e| self.err(e))?;
            out.extend(row);
        }
        Ok(out)
    }

    /// Every chunk in id order, for rebuilding derived indexes.
    pub fn for_each_chunk(&self, mut f: impl FnMut(StoredChunk) -> Result<()>) -> Result<()> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT c.id, d.doc_id, d.title, d.organisation, d.date, c.seq, c.start_page, c.start_char,
                        c.end_page, c.end_char, c.text, c.hash
                 FROM chunks c JOIN documents d ON d.rowid = c.doc ORDER BY c.id",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt.query_map([], row_to_chunk).map_err(|e| self.err(e))?;
        for r in rows {
            f(r.map_err(|e| self.err(e))?)?;
        }
        Ok(())
    }

    /// A page's text and content hash.
    pub fn page(&self, doc_id: &DocId, page: u32) -> Result<Option<(String, String)>> {
        self.conn
            .query_row(
                "SELECT p.text, p.hash FROM pages p JOIN documents d ON d.rowid = p.doc
                 WHERE d.doc_id = ?1 AND p.page = ?2",
                params![doc_id.0, page],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// The OCR words and confidence of a page, when its text came from OCR.
    pub fn page_ocr(&self, doc_id: &DocId, page: u32) -> Result<Option<crate::ocr::PageOcr>> {
        let row: Option<(String, String, Option<f64>, String)> = self
            .conn
            .query_row(
                "SELECT o.cache_key, o.reason, o.confidence, o.words FROM page_ocr o
                 JOIN documents d ON d.rowid = o.doc WHERE d.doc_id = ?1 AND o.page = ?2",
                params![doc_id.0, page],
                |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)),
            )
            .optional()
            .map_err(|e| self.err(e))?;
        let Some((cache_key, reason, confidence, words)) = row else {
            return Ok(None);
        };
        let bad = |what: &str, e: serde_json::Error| {
            Error::Invalid(format!(
                "{}: the stored OCR {what} of {doc_id} page {page} is unreadable: {e}",
                self.path.display()
            ))
        };
        Ok(Some(crate::ocr::PageOcr {
            page,
            cache_key,
            reason: serde_json::from_str(&reason).map_err(|e| bad("reason", e))?,
            confidence: confidence.map(|c| c as f32),
            words: serde_json::from_str(&words).map_err(|e| bad("words", e))?,
        }))
    }

    /// A cached OCR result by key (see [`crate::ocr::engine::cache_key`]).
    /// An unreadable entry counts as absent (the page is read again).
    pub fn ocr_cached(&self, key: &str) -> Result<Option<crate::ocr::OcrPage>> {
        let row: Option<String> = self
            .conn
            .query_row(
                "SELECT page FROM ocr_cache WHERE key = ?1",
                params![key],
                |r| r.get(0),
            )
            .optional()
            .map_err(|e| self.err(e))?;
        Ok(row.and_then(|j| serde_json::from_str(&j).ok()))
    }

    /// Stores an OCR result in the cache.
    pub fn put_ocr_cached(
        &self,
        key: &str,
        engine: &str,
        page: &crate::ocr::OcrPage,
    ) -> Result<()> {
        self.conn
            .execute(
                "INSERT OR REPLACE INTO ocr_cache(key, engine, page) VALUES (?1, ?2, ?3)",
                params![
                    key,
                    engine,
                    serde_json::to_string(page).expect("plain data serialises")
                ],
            )
            .map_err(|e| self.err(e))?;
        Ok(())
    }

    /// How many OCR results the cache holds.
    pub fn ocr_cache_len(&self) -> Result<u64> {
        self.conn
            .query_row("SELECT COUNT(*) FROM ocr_cache", [], |r| r.get::<_, i64>(0))
            .map(|n| n as u64)
            .map_err(|e| self.err(e))
    }

    /// All pages of a document, in order.
    pub fn pages(&self, doc_id: &DocId) -> Result<Vec<String>> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT p.text FROM pages p JOIN documents d ON d.rowid = p.doc
                 WHERE d.doc_id = ?1 ORDER BY p.page",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![doc_id.0], |r| r.get::<_, String>(0))
            .map_err(|e| self.err(e))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(|e| self.err(e))
    }

    /// The documents the filters allow, or `None` when there are no filters.
    pub fn docs_matching(&self, f: &Filters) -> Result<Option<Vec<DocId>>> {
        if f.is_empty() {
            return Ok(None);
        }
        let mut sql = String::from("SELECT doc_id FROM documents WHERE 1=1");
        let mut args: Vec<String> = Vec::new();
        if let Some(from) = &f.from {
            args.push(from.clone());
            sql.push_str(&format!(
                " AND date IS NOT NULL AND date >= ?{}",
                args.len()
            ));
        }
        if let Some(to) = &f.to {
            // A prefix such as `2021` or `2021-06` covers the whole period.
            args.push(to.clone());
            let n = args.len();
            sql.push_str(&format!(
                " AND date IS NOT NULL AND (date <= ?{n} OR substr(date, 1, length(?{n})) = ?{n})"
            ));
        }
        if let Some(org) = &f.org {
            args.push(org.to_lowercase());
            sql.push_str(&format!(
                " AND instr(lower(coalesce(organisation, '')), ?{}) > 0",
                args.len()
            ));
        }
        if !f.docs.is_empty() {
            let mut marks = Vec::new();
            for d in &f.docs {
                args.push(d.0.clone());
                marks.push(format!("?{}", args.len()));
            }
            sql.push_str(&format!(" AND doc_id IN ({})", marks.join(",")));
        }
        let mut stmt = self.conn.prepare(&sql).map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(rusqlite::params_from_iter(args.iter()), |r| {
                r.get::<_, String>(0).map(DocId)
            })
            .map_err(|e| self.err(e))?;
        Ok(Some(
            rows.collect::<rusqlite::Result<Vec<_>>>()
                .map_err(|e| self.err(e))?,
        ))
    }

    pub fn documents(&self) -> Result<Vec<DocSummary>> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT doc_id, title, organisation, date, release, url, kind, page_count, source
                 FROM documents ORDER BY date, doc_id",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map([], row_to_summary)
            .map_err(|e| self.err(e))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(|e| self.err(e))
    }

    /// Chunks with no stored embedding for `model`, in id order, after `after`.
    pub fn pending_embeddings(
        &self,
        model: &str,
        after: ChunkId,
        limit: usize,
    ) -> Result<Vec<PendingEmbedding>> {
        let mut stmt = self
            .conn
            .prepare_cached(
                "SELECT c.id, c.embed_key, d.doc_id, d.title, c.text
                 FROM chunks c JOIN documents d ON d.rowid = c.doc
                 WHERE c.id > ?2 AND NOT EXISTS
                     (SELECT 1 FROM embeddings e WHERE e.model = ?1 AND e.key = c.embed_key)
                 ORDER BY c.id LIMIT ?3",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![model, after.0 as i64, limit as i64], |r| {
                let (doc, title, text): (String, String, String) =
                    (r.get(2)?, r.get(3)?, r.get(4)?);
                Ok(PendingEmbedding {
                    chunk_id: ChunkId(r.get::<_, i64>(0)? as u64),
                    key: r.get(1)?,
                    input: embedding_input(&doc, &title, &text),
                })
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(|e| self.err(e))
    }

    /// How many chunks have no stored embedding for `model`.
    pub fn count_pending_embeddings(&self, model: &str) -> Result<u64> {
        self.conn
            .query_row(
                "SELECT count(*) FROM chunks c WHERE NOT EXISTS
                     (SELECT 1 FROM embeddings e WHERE e.model = ?1 AND e.key = c.embed_key)",
                params![model],
                |r| r.get::<_, i64>(0).map(|n| n as u64),
            )
            .map_err(|e| self.err(e))
    }

    /// Store vectors for `model`, all in one transaction. A key already
    /// stored keeps its vector.
    pub fn put_embeddings(&mut self, model: &str, items: &[(String, Vec<f32>)]) -> Result<()> {
        self.put_embeddings_marked(model, items, None)
    }

    /// Store vectors for `model` and, when given, a `meta` key and value,
    /// all in one transaction.
    fn put_embeddings_marked(
        &mut self,
        model: &str,
        items: &[(String, Vec<f32>)],
        mark: Option<(String, String)>,
    ) -> Result<()> {
        let path = self.path.clone();
        let e = |e: rusqlite::Error| Error::store(&path, e);
        let tx = self.conn.transaction().map_err(e)?;
        {
            let mut ins = tx
                .prepare("INSERT OR IGNORE INTO embeddings(model, key, vector) VALUES (?1, ?2, ?3)")
                .map_err(e)?;
            for (key, v) in items {
                ins.execute(params![model, key, vector_to_blob(v)])
                    .map_err(e)?;
            }
            if let Some((k, v)) = mark {
                tx.execute(
                    "INSERT INTO meta(key, value) VALUES (?1, ?2)
                     ON CONFLICT(key) DO UPDATE SET value = excluded.value",
                    params![k, v],
                )
                .map_err(e)?;
            }
        }
        tx.commit().map_err(e)
    }

    /// Stored vectors for `model` by embedding key; keys with none are absent.
    pub fn embeddings_by_key(
        &self,
        model: &str,
        keys: &[String],
    ) -> Result<HashMap<String, Vec<f32>>> {
        let mut stmt = self
            .conn
            .prepare_cached("SELECT vector FROM embeddings WHERE model = ?1 AND key = ?2")
            .map_err(|e| self.err(e))?;
        let mut out = HashMap::new();
        for k in keys {
            if out.contains_key(k) {
                continue;
            }
            let v: Option<Vec<u8>> = stmt
                .query_row(params![model, k], |r| r.get(0))
                .optional()
                .map_err(|e| self.err(e))?;
            if let Some(b) = v {
                out.insert(k.clone(), blob_to_vector(&b));
            }
        }
        Ok(out)
    }

    /// Which of `keys` have no vector for `model`.
    pub fn missing_embeddings(&self, model: &str, keys: &[String]) -> Result<Vec<String>> {
        let mut stmt = self
            .conn
            .prepare_cached("SELECT 1 FROM embeddings WHERE model = ?1 AND key = ?2")
            .map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        for k in keys {
            let found = stmt.exists(params![model, k]).map_err(|e| self.err(e))?;
            if !found {
                out.push(k.clone());
            }
        }
        Ok(out)
    }

    /// The stored chunk vectors for `model` of these chunks.
    pub fn chunk_vectors(
        &self,
        model: &str,
        ids: &[ChunkId],
    ) -> Result<HashMap<ChunkId, Vec<f32>>> {
        let mut stmt = self
            .conn
            .prepare_cached(
                "SELECT e.vector FROM chunks c JOIN embeddings e
                     ON e.model = ?1 AND e.key = c.embed_key WHERE c.id = ?2",
            )
            .map_err(|e| self.err(e))?;
        let mut out = HashMap::new();
        for id in ids {
            let v: Option<Vec<u8>> = stmt
                .query_row(params![model, id.0 as i64], |r| r.get(0))
                .optional()
                .map_err(|e| self.err(e))?;
            if let Some(b) = v {
                out.insert(*id, blob_to_vector(&b));
            }
        }
        Ok(out)
    }

    /// The highest chunk id whose candidate sentences (under the current
    /// candidate rules) have vectors for `model` (0 when none): sentence
    /// vectors are added in chunk order.
    pub fn sentences_embedded_through(&self, model: &str) -> Result<ChunkId> {
        let v: Option<String> = self
            .conn
            .query_row(
                "SELECT value FROM meta WHERE key = ?1",
                params![sentences_mark(model)],
                |r| r.get(0),
            )
            .optional()
            .map_err(|e| self.err(e))?;
        Ok(ChunkId(v.and_then(|v| v.parse().ok()).unwrap_or(0)))
    }

    /// Store sentence and title vectors for `model` and record that every
    /// chunk up to `through` has them, in one transaction.
    pub fn put_sentence_embeddings(
        &mut self,
        model: &str,
        items: &[(String, Vec<f32>)],
        through: ChunkId,
    ) -> Result<()> {
        let mark = (sentences_mark(model), through.0.to_string());
        self.put_embeddings_marked(model, items, Some(mark))
    }

    /// Chunks after `after` in id order, at most `limit`: id, title, text.
    pub fn chunks_after(
        &self,
        after: ChunkId,
        limit: usize,
    ) -> Result<Vec<(ChunkId, String, String)>> {
        let mut stmt = self
            .conn
            .prepare_cached(
                "SELECT c.id, d.title, c.text FROM chunks c JOIN documents d ON d.rowid = c.doc
                 WHERE c.id > ?1 ORDER BY c.id LIMIT ?2",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![after.0 as i64, limit as i64], |r| {
                Ok((ChunkId(r.get::<_, i64>(0)? as u64), r.get(1)?, r.get(2)?))
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(|e| self.err(e))
    }

    /// The highest chunk id ever given (0 when none).
    pub fn last_chunk_id(&self) -> Result<ChunkId> {
        Ok(ChunkId(self.high_water()?.1))
    }

    /// Chunks that have an embedding for `model`, with the vector, where the
    /// chunk id is above `after_chunk` or the embedding row is above
    /// `after_row` (both zero: every one).
    pub fn for_each_embedded_chunk(
        &self,
        model: &str,
        after_chunk: u64,
        after_row: i64,
        mut f: impl FnMut(ChunkId, Vec<f32>) -> Result<()>,
    ) -> Result<()> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT c.id, e.vector FROM chunks c JOIN embeddings e
                     ON e.model = ?1 AND e.key = c.embed_key
                 WHERE c.id > ?2 OR e.rowid > ?3 ORDER BY c.id",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![model, after_chunk as i64, after_row], |r| {
                Ok((r.get::<_, i64>(0)? as u64, r.get::<_, Vec<u8>>(1)?))
            })
            .map_err(|e| self.err(e))?;
        for r in rows {
            let (id, blob) = r.map_err(|e| self.err(e))?;
            f(ChunkId(id), blob_to_vector(&blob))?;
        }
        Ok(())
    }

    /// The highest embedding row and chunk id so far (0 when none).
    pub fn high_water(&self) -> Result<(i64, u64)> {
        self.conn
            .query_row(
                "SELECT coalesce((SELECT max(rowid) FROM embeddings), 0),
                        coalesce((SELECT seq FROM sqlite_sequence WHERE name = 'chunks'), 0)",
                [],
                |r| Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)? as u64)),
            )
            .map_err(|e| self.err(e))
    }

    /// Chunk ids removed by changes after `generation`.
    pub fn dropped_since(&self, generation: u64) -> Result<Vec<ChunkId>> {
        let mut stmt = self
            .conn
            .prepare("SELECT chunk_id FROM dropped_chunks WHERE generation > ?1")
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![generation as i64], |r| {
                r.get::<_, i64>(0).map(|v| ChunkId(v as u64))
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<rusqlite::Result<Vec<_>>>()
            .map_err(|e| self.err(e))
    }

    /// The ids of every chunk of these documents.
    pub fn chunk_ids_of(&self, docs: &[DocId]) -> Result<Vec<ChunkId>> {
        let mut stmt = self
            .conn
            .prepare_cached(
                "SELECT c.id FROM chunks c JOIN documents d ON d.rowid = c.doc WHERE d.doc_id = ?1",
            )
            .map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        for d in docs {
            let rows = stmt
                .query_map(params![d.0], |r| {
                    r.get::<_, i64>(0).map(|v| ChunkId(v as u64))
                })
                .map_err(|e| self.err(e))?;
            for r in rows {
                out.push(r.map_err(|e| self.err(e))?);
            }
        }
        Ok(out)
    }

    /// Append an answer to the log, with the text of every page it cites
    /// (kept by content hash, so a replay after a re-ingest can show what
    /// changed). Returns the entry's number.
    pub fn log_answer(&self, record: &crate::answer::AnswerRecord) -> Result<u64> {
        let e = |e| Error::store(&self.path, e);
        let json = serde_json::to_string(record)
            .map_err(|err| Error::Invalid(format!("answer record: {err}")))?;
        let config = serde_json::to_string(&record.config)
            .map_err(|err| Error::Invalid(format!("answer record: {err}")))?;
        let tx = self.conn.unchecked_transaction().map_err(e)?;
        tx.execute(
            "INSERT INTO answers(created_at, question, config, record) VALUES (?1, ?2, ?3, ?4)",
            params![record.created_at, record.question, config, json],
        )
        .map_err(e)?;
        let id = tx.last_insert_rowid() as u64;
        {
            let mut keep = tx
                .prepare_cached(
                    "INSERT OR IGNORE INTO cited_pages(hash, doc_id, page, text)
                     SELECT p.hash, d.doc_id, p.page, p.text FROM pages p
                     JOIN documents d ON d.rowid = p.doc
                     WHERE d.doc_id = ?1 AND p.page BETWEEN ?2 AND ?3",
                )
                .map_err(e)?;
            let drafts = record.draft.iter().flat_map(|d| d.verdicts.iter());
            for c in record
                .sentences
                .iter()
                .chain(drafts)
                .flat_map(|s| s.citations.iter())
            {
                keep.execute(params![c.doc_id.0, c.page, c.end_page.unwrap_or(c.page)])
                    .map_err(e)?;
            }
        }
        tx.commit().map_err(e)?;
        Ok(id)
    }

    /// The answer log, newest first (at most `limit` entries).
    pub fn answer_log(&self, limit: usize) -> Result<Vec<LoggedAnswer>> {
        let mut stmt = self
            .conn
            .prepare(
                "SELECT id, created_at, question, config, record FROM answers
                 ORDER BY id DESC LIMIT ?1",
            )
            .map_err(|e| self.err(e))?;
        let rows = stmt
            .query_map(params![limit.min(i64::MAX as usize) as i64], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get::<_, String>(1)?,
                    r.get::<_, String>(2)?,
                    r.get::<_, String>(3)?,
                    r.get::<_, String>(4)?,
                ))
            })
            .map_err(|e| self.err(e))?;
        let mut out = Vec::new();
        for row in rows {
            let (id, created_at, question, config, record) = row.map_err(|e| self.err(e))?;
            let record: serde_json::Value = serde_json::from_str(&record).unwrap_or_default();
            let count = |verdict: &str| {
                record["sentences"]
                    .as_array()
                    .map_or(0, |a| a.iter().filter(|s| s["verdict"] == verdict).count())
            };
            out.push(LoggedAnswer {
                id: id as u64,
                created_at,
                question,
                config: serde_json::from_str(&config).unwrap_or_default(),
                supported: count("supported"),
                struck: count("struck"),
                abstained: record["abstained"].as_bool().unwrap_or(false),
            });
        }
        Ok(out)
    }

    /// Delete all but the newest `keep` logged answers, and the kept page
    /// texts that no remaining answer cites. Returns (answers removed, page
    /// texts removed). The only call that shortens the log: nothing does it
    /// unasked.
    pub fn prune_answers(&self, keep: usize) -> Result<(usize, usize)> {
        let e = |e| Error::store(&self.path, e);
        let tx = self.conn.unchecked_transaction().map_err(e)?;
        let removed = tx
            .execute(
                "DELETE FROM answers WHERE id NOT IN
                 (SELECT id FROM answers ORDER BY id DESC LIMIT ?1)",
                params![keep.min(i64::MAX as usize) as i64],
            )
            .map_err(e)?;
        // What the remaining answers cite: the hash of each quote's first
        // page, and (document, later pages) of quotes that run over a page
        // break, whose hashes the record does not carry.
        let mut hashes: std::collections::HashSet<String> = std::collections::HashSet::new();
        let mut cited: std::collections::HashMap<String, Vec<(u64, u64)>> =
            std::collections::HashMap::new();
        {
            let mut stmt = tx.prepare("SELECT record FROM answers").map_err(e)?;
            let rows = stmt.query_map([], |r| r.get::<_, String>(0)).map_err(e)?;
            for row in rows {
                let record: serde_json::Value =
                    serde_json::from_str(&row.map_err(e)?).unwrap_or_default();
                let drafts = record["draft"]["verdicts"]
                    .as_array()
                    .cloned()
                    .unwrap_or_default();
                let sentences = record["sentences"].as_array().cloned().unwrap_or_default();
                for s in sentences.iter().chain(drafts.iter()) {
                    for c in s["citations"].as_array().into_iter().flatten() {
                        let (Some(doc), Some(page)) = (c["doc_id"].as_str(), c["page"].as_u64())
                        else {
                            continue;
                        };
                        if let Some(h) = c["page_hash"].as_str() {
                            hashes.insert(h.to_string());
                        }
                        let last = c["end_page"].as_u64().unwrap_or(page);
                        if last > page {
                            cited
                                .entry(doc.to_string())
                                .or_default()
                                .push((page + 1, last));
                        }
                    }
                }
            }
        }
        let mut orphans = Vec::new();
        {
            let mut stmt = tx
                .prepare("SELECT hash, doc_id, page FROM cited_pages")
                .map_err(e)?;
            let rows = stmt
                .query_map([], |r| {
                    Ok((
                        r.get::<_, String>(0)?,
                        r.get::<_, String>(1)?,
                        r.get::<_, i64>(2)?,
                    ))
                })
                .map_err(e)?;
            for row in rows {
                let (hash, doc, page) = row.map_err(e)?;
                let page = page as u64;
                let used = hashes.contains(&hash)
                    || cited
                        .get(&doc)
                        .is_some_and(|r| r.iter().any(|&(a, b)| a <= page && page <= b));
                if !used {
                    orphans.push(hash);
                }
            }
        }
        for h in &orphans {
            tx.execute("DELETE FROM cited_pages WHERE hash = ?1", params![h])
                .map_err(e)?;
        }
        tx.commit().map_err(e)?;
        Ok((removed, orphans.len()))
    }

    /// The answer record (JSON) logged as entry `id`.
    pub fn logged_answer(&self, id: u64) -> Result<Option<String>> {
        self.conn
            .query_row(
                "SELECT record FROM answers WHERE id = ?1",
                params![id as i64],
                |r| r.get(0),
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// A page's text as it was when an answer cited it, by content hash or a
    /// prefix of it (at least 8 hex digits): (document, page, text).
    pub fn cited_page(&self, hash_prefix: &str) -> Result<Option<(DocId, u32, String)>> {
        if hash_prefix.len() < 8 {
            return Ok(None);
        }
        self.conn
            .query_row(
                "SELECT doc_id, page, text FROM cited_pages
                 WHERE substr(hash, 1, length(?1)) = lower(?1) LIMIT 1",
                params![hash_prefix],
                |r| Ok((DocId(r.get(0)?), r.get(1)?, r.get(2)?)),
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// One document's summary row.
    pub fn document(&self, doc_id: &DocId) -> Result<Option<DocSummary>> {
        self.conn
            .query_row(
                "SELECT doc_id, title, organisation, date, release, url, kind, page_count, source
                 FROM documents WHERE doc_id = ?1",
                params![doc_id.0],
                row_to_summary,
            )
            .optional()
            .map_err(|e| self.err(e))
    }

    /// (documents, pages, chunks)
    pub fn counts(&self) -> Result<(u64, u64, u64)> {
        self.conn
            .query_row(
                "SELECT (SELECT count(*) FROM documents), (SELECT count(*) FROM pages), (SELECT count(*) FROM chunks)",
                [],
                |r| {
                    let n = |i: usize| r.get::<_, i64>(i).map(|v| v as u64);
                    Ok((n(0)?, n(1)?, n(2)?))
                },
            )
            .map_err(|e| self.err(e))
    }
}

fn row_to_summary(r: &rusqlite::Row<'_>) -> rusqlite::Result<DocSummary> {
    Ok(DocSummary {
        doc_id: DocId(r.get(0)?),
        title: r.get(1)?,
        organisation: r.get(2)?,
        date: r.get(3)?,
        release: r.get(4)?,
        url: r.get(5)?,
        kind: r.get(6)?,
        pages: r.get(7)?,
        source: r.get(8)?,
    })
}

fn row_to_chunk(r: &rusqlite::Row<'_>) -> rusqlite::Result<StoredChunk> {
    Ok(StoredChunk {
        id: ChunkId(r.get::<_, i64>(0)? as u64),
        doc_id: DocId(r.get(1)?),
        title: r.get(2)?,
        organisation: r.get(3)?,
        date: r.get(4)?,
        seq: r.get(5)?,
        span: ChunkSpan {
            start_page: r.get(6)?,
            start_char: r.get::<_, i64>(7)? as usize,
            end_page: r.get(8)?,
            end_char: r.get::<_, i64>(9)? as usize,
        },
        text: r.get(10)?,
        hash: r.get(11)?,
    })
}

/// The meta key recording how far candidate sentences are embedded for
/// `model`, under the current candidate rules.
fn sentences_mark(model: &str) -> String {
    format!(
        "sentences_embedded:r{}:{model}",
        crate::select::CANDIDATE_RULES
    )
}
