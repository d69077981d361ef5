//! An embedder that keeps every vector it makes in a SQLite file, keyed by
//! the model id and the SHA-256 of the text, so training and evaluation on
//! open data embed each text once across runs.
//!
//! invariant: a cached vector is returned only for the same model id and
//! exactly the same text.

use super::Embedder;
use crate::error::{Error, Result};
use rusqlite::{Connection, OptionalExtension, params};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

pub struct CachedEmbedder {
    inner: std::sync::Arc<dyn Embedder>,
    conn: Mutex<Connection>,
    path: PathBuf,
}

impl CachedEmbedder {
    pub fn open(inner: std::sync::Arc<dyn Embedder>, path: &Path) -> Result<CachedEmbedder> {
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
            std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
        }
        let conn = Connection::open(path).map_err(|e| Error::store(path, e))?;
        conn.execute_batch(
            "PRAGMA journal_mode = WAL; PRAGMA synchronous = NORMAL;
             CREATE TABLE IF NOT EXISTS vectors (model TEXT NOT NULL, key TEXT NOT NULL,
                 vector BLOB NOT NULL, PRIMARY KEY (model, key));",
        )
        .map_err(|e| Error::store(path, e))?;
        Ok(CachedEmbedder {
            inner,
            conn: Mutex::new(conn),
            path: path.to_path_buf(),
        })
    }
}

impl Embedder for CachedEmbedder {
    fn id(&self) -> &str {
        self.inner.id()
    }

    fn dim(&self) -> usize {
        self.inner.dim()
    }

    fn token_ids(&self, text: &str) -> Result<Vec<u32>> {
        self.inner.token_ids(text)
    }

    fn embed(&self, texts: &[&str]) -> Result<Vec<Vec<f32>>> {
        let model = self.inner.id();
        let keys: Vec<String> = texts
            .iter()
            .map(|t| crate::text::hash_hex(t.as_bytes()))
            .collect();
        let err = |e| Error::store(&self.path, e);
        let mut out: Vec<Option<Vec<f32>>> = {
            let conn = self.conn.lock().expect("cache lock");
            let mut stmt = conn
                .prepare_cached("SELECT vector FROM vectors WHERE model = ?1 AND key = ?2")
                .map_err(err)?;
            keys.iter()
                .map(|k| {
                    stmt.query_row(params![model, k], |r| r.get::<_, Vec<u8>>(0))
                        .optional()
                        .map(|b| b.map(|b| crate::store::blob_to_vector(&b)))
                })
                .collect::<rusqlite::Result<_>>()
                .map_err(err)?
        };
        let missing: Vec<usize> = (0..texts.len()).filter(|i| out[*i].is_none()).collect();
        if !missing.is_empty() {
            let todo: Vec<&str> = missing.iter().map(|i| texts[*i]).collect();
            let made = self.inner.embed(&todo)?;
            let mut conn = self.conn.lock().expect("cache lock");
            let tx = conn.transaction().map_err(err)?;
            {
                let mut ins = tx
                    .prepare_cached(
                        "INSERT OR IGNORE INTO vectors(model, key, vector) VALUES (?1, ?2, ?3)",
                    )
                    .map_err(err)?;
                for (i, v) in missing.iter().zip(made) {
                    ins.execute(params![model, keys[*i], crate::store::vector_to_blob(&v)])
                        .map_err(err)?;
                    out[*i] = Some(v);
                }
            }
            tx.commit().map_err(err)?;
        }
        Ok(out.into_iter().map(|v| v.unwrap_or_default()).collect())
    }
}
