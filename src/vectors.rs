//! The vector index: an HNSW graph (usearch) over chunk embeddings, keyed by
//! chunk id, stored under `<index>/vectors/`. Vectors themselves live in the
//! store; this index is derived and can always be rebuilt from it
//! (`onrecord reindex`), without embedding anything again.
//!
//! The index records the store generation and high-water marks it reflects.
//! On open it catches up: chunks dropped since then are removed, chunks with
//! newer embeddings are added. Anything that does not add up (another model,
//! another format, a missing or unreadable file) leads to a full rebuild.
//!
//! invariant: the vector index never holds a chunk id that the store no
//! longer has once `open_synced` returns.
//! invariant: search never returns a chunk outside `allowed`.
//! invariant: the index file is replaced atomically (written beside, then
//! renamed), and its state file is written after it.

use crate::embed::Embedder;
use crate::error::{Error, Result};
use crate::store::Store;
use crate::types::ChunkId;
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};
use usearch::{Index, IndexOptions, MetricKind, ScalarKind};

/// Format of the files under `vectors/`. Bump on incompatible change.
pub const VECTORS_FORMAT: u32 = 1;
/// HNSW links per node (usearch "connectivity", M in the paper).
pub const CONNECTIVITY: usize = 16;
/// Candidate list size while building.
pub const EXPANSION_ADD: usize = 128;
/// Smallest candidate list size while searching.
pub const EXPANSION_SEARCH: usize = 96;
/// When a filter leaves at most this many chunks, they are scored exactly.
pub const EXACT_BELOW: usize = 4096;
/// Embeddings committed to the store per transaction during ingest.
pub const EMBED_COMMIT: usize = 64;

/// How vectors are held in the graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Scalar {
    F32,
    F16,
    I8,
}

impl Scalar {
    fn kind(self) -> ScalarKind {
        match self {
            Scalar::F32 => ScalarKind::F32,
            Scalar::F16 => ScalarKind::F16,
            Scalar::I8 => ScalarKind::I8,
        }
    }
}

impl std::str::FromStr for Scalar {
    type Err = String;
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        match s {
            "f32" => Ok(Scalar::F32),
            "f16" => Ok(Scalar::F16),
            "i8" => Ok(Scalar::I8),
            _ => Err(format!("unknown vector type `{s}` (f32, f16 or i8)")),
        }
    }
}

/// The default: f16 (see eval/README.md for the recall measured against i8).
pub const DEFAULT_SCALAR: Scalar = Scalar::F16;

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
struct State {
    format: u32,
    model: String,
    dim: usize,
    scalar: Scalar,
    /// Store generation, embedding row and chunk id reflected in the file.
    generation: u64,
    embedding_row: i64,
    chunk_id: u64,
    count: usize,
}

/// What a sync did.
#[derive(Debug, Default, Clone, Copy, Serialize, PartialEq, Eq)]
pub struct SyncReport {
    pub rebuilt: bool,
    pub added: usize,
    pub removed: usize,
    pub total: usize,
}

pub struct VectorIndex {
    index: Index,
    dir: PathBuf,
    state: State,
    pub last_sync: SyncReport,
    /// A filter leaving at most this many chunks is scored exactly.
    pub exact_below: usize,
    /// Score every search exactly, never through the graph (whose build
    /// runs on several threads, so its answers can differ from one build
    /// to the next): for training, which must give the same weights twice.
    pub exact_always: bool,
}

/// A nearest neighbour: chunk id and cosine similarity.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Neighbour {
    pub chunk_id: ChunkId,
    pub similarity: f32,
}

fn file_stem(model: &str) -> String {
    model
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

pub(crate) fn new_index(dim: usize, scalar: Scalar) -> Result<Index> {
    Index::new(&IndexOptions {
        dimensions: dim,
        metric: MetricKind::Cos,
        quantization: scalar.kind(),
        connectivity: CONNECTIVITY,
        expansion_add: EXPANSION_ADD,
        expansion_search: EXPANSION_SEARCH,
        multi: false,
    })
    .map_err(|e| Error::Invalid(format!("cannot create vector index: {e}")))
}

impl VectorIndex {
    fn paths(index_dir: &Path, model: &str) -> (PathBuf, PathBuf, PathBuf) {
        let dir = index_dir.join("vectors");
        let stem = file_stem(model);
        (
            dir.clone(),
            dir.join(format!("{stem}.usearch")),
            dir.join(format!("{stem}.json")),
        )
    }

    fn err(&self, e: impl std::fmt::Display) -> Error {
        Error::Vectors {
            path: self.dir.clone(),
            message: e.to_string(),
        }
    }

    /// Open the vector index for `model`, bringing it up to date with the
    /// store (or rebuilding it), and save it if anything changed.
    pub fn open_synced(
        index_dir: &Path,
        store: &Store,
        model: &str,
        dim: usize,
        scalar: Scalar,
    ) -> Result<VectorIndex> {
        let (dir, file, state_file) = Self::paths(index_dir, model);
        let state: Option<State> = std::fs::read(&state_file)
            .ok()
            .and_then(|b| serde_json::from_slice(&b).ok());
        if let Some(st) = state.filter(|s| {
            s.format == VECTORS_FORMAT && s.model == model && s.dim == dim && s.scalar == scalar
        }) {
            let index = new_index(dim, scalar)?;
            if file.is_file()
                && index.load(&file.to_string_lossy()).is_ok()
                && index.size() == st.count
            {
                let mut vi = VectorIndex {
                    index,
                    dir: dir.clone(),
                    state: st,
                    last_sync: SyncReport::default(),
                    exact_below: EXACT_BELOW,
                    exact_always: false,
                };
                vi.catch_up(index_dir, store)?;
                return Ok(vi);
            }
            tracing::info!(
                "vector index at {} is unreadable or incomplete; rebuilding",
                file.display()
            );
        }
        Self::rebuild(index_dir, store, model, dim, scalar)
    }

    /// Build the index for `model` from the vectors in the store, replacing any file.
    pub fn rebuild(
        index_dir: &Path,
        store: &Store,
        model: &str,
        dim: usize,
        scalar: Scalar,
    ) -> Result<VectorIndex> {
        let (dir, _, _) = Self::paths(index_dir, model);
        let started = Instant::now();
        let (row, chunk) = store.high_water()?;
        let mut vi = VectorIndex {
            index: new_index(dim, scalar)?,
            dir,
            state: State {
                format: VECTORS_FORMAT,
                model: model.to_owned(),
                dim,
                scalar,
                generation: store.generation()?,
                embedding_row: row,
                chunk_id: chunk,
                count: 0,
            },
            last_sync: SyncReport {
                rebuilt: true,
                ..Default::default()
            },
            exact_below: EXACT_BELOW,
            exact_always: false,
        };
        let mut pending = Vec::new();
        store.for_each_embedded_chunk(model, 0, 0, |id, v| {
            pending.push((id, v));
            Ok(())
        })?;
        vi.add_all(&pending)?;
        vi.last_sync.added = pending.len();
        vi.save_unless_written(index_dir)?;
        tracing::info!(
            "vector index rebuilt: {} vectors in {:.1}s",
            pending.len(),
            started.elapsed().as_secs_f64()
        );
        Ok(vi)
    }

    fn add_all(&mut self, items: &[(ChunkId, Vec<f32>)]) -> Result<()> {
        let need = self.index.size() + items.len();
        if need > self.index.capacity() {
            let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
            self.index
                .reserve_capacity_and_threads(need.next_power_of_two().max(1024), threads)
                .map_err(|e| self.err(e))?;
        }
        for (id, v) in items {
            if v.len() != self.state.dim {
                return Err(self.err(format!(
                    "chunk {} has a {}-dimension vector; the index holds {}",
                    id.0,
                    v.len(),
                    self.state.dim
                )));
            }
            if self.index.contains(id.0) {
                self.index.remove(id.0).map_err(|e| self.err(e))?;
            }
        }
        // usearch adds concurrently from several threads.
        let index = &self.index;
        let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
        let per = items.len().div_ceil(threads.max(1)).max(1);
        let results: Vec<std::result::Result<(), String>> = std::thread::scope(|s| {
            let handles: Vec<_> = items
                .chunks(per)
                .map(|part| {
                    s.spawn(move || {
                        for (id, v) in part {
                            index.add(id.0, v).map_err(|e| e.to_string())?;
                        }
                        Ok(())
                    })
                })
                .collect();
            handles
                .into_iter()
                .map(|h| {
                    h.join()
                        .unwrap_or_else(|_| Err("panic while adding".into()))
                })
                .collect()
        });
        for r in results {
            r.map_err(|e| self.err(e))?;
        }
        self.state.count = self.index.size();
        Ok(())
    }

    /// Apply changes made to the store since the index was saved.
    fn catch_up(&mut self, index_dir: &Path, store: &Store) -> Result<()> {
        let generation = store.generation()?;
        let (row, chunk) = store.high_water()?;
        if generation == self.state.generation
            && row == self.state.embedding_row
            && chunk == self.state.chunk_id
        {
            self.last_sync.total = self.index.size();
            return Ok(());
        }
        let mut removed = 0;
        for id in store.dropped_since(self.state.generation)? {
            if self.index.contains(id.0) {
                self.index.remove(id.0).map_err(|e| self.err(e))?;
                removed += 1;
            }
        }
        let mut pending = Vec::new();
        store.for_each_embedded_chunk(
            &self.state.model,
            self.state.chunk_id,
            self.state.embedding_row,
            |id, v| {
                if !self.index.contains(id.0) {
                    pending.push((id, v));
                }
                Ok(())
            },
        )?;
        self.add_all(&pending)?;
        self.state.generation = generation;
        self.state.embedding_row = row;
        self.state.chunk_id = chunk;
        self.state.count = self.index.size();
        self.last_sync = SyncReport {
            rebuilt: false,
            added: pending.len(),
            removed,
            total: self.index.size(),
        };
        self.save_unless_written(index_dir)
    }

    /// Save, unless another process is writing this index: then the graph
    /// stays in memory, and the writer saves its own when it is done.
    fn save_unless_written(&mut self, index_dir: &Path) -> Result<()> {
        match crate::lock::try_acquire(index_dir, "a save of the search index", Duration::ZERO)? {
            Ok(_writer) => self.save(),
            Err(_) => {
                self.last_sync.total = self.index.size();
                Ok(())
            }
        }
    }

    fn save(&mut self) -> Result<()> {
        std::fs::create_dir_all(&self.dir).map_err(|e| Error::io(&self.dir, e))?;
        let stem = file_stem(&self.state.model);
        let file = self.dir.join(format!("{stem}.usearch"));
        let tmp = self.dir.join(format!("{stem}.usearch.tmp"));
        let state_file = self.dir.join(format!("{stem}.json"));
        let state_tmp = self.dir.join(format!("{stem}.json.tmp"));
        self.state.count = self.index.size();
        self.index
            .save(&tmp.to_string_lossy())
            .map_err(|e| self.err(e))?;
        std::fs::rename(&tmp, &file).map_err(|e| Error::io(&file, e))?;
        let json = serde_json::to_vec_pretty(&self.state).map_err(|e| self.err(e))?;
        std::fs::write(&state_tmp, json).map_err(|e| Error::io(&state_tmp, e))?;
        std::fs::rename(&state_tmp, &state_file).map_err(|e| Error::io(&state_file, e))?;
        self.last_sync.total = self.index.size();
        Ok(())
    }

    pub fn len(&self) -> usize {
        self.index.size()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    pub fn model(&self) -> &str {
        &self.state.model
    }

    pub fn scalar(&self) -> Scalar {
        self.state.scalar
    }

    /// Bytes the graph and vectors take in memory.
    pub fn memory_usage(&self) -> usize {
        self.index.memory_usage()
    }

    /// The `k` nearest chunks to `query` among `allowed` (all when `None`).
    /// A filter that leaves few chunks is scored exactly over just those
    /// chunks; a wider one is applied inside the graph walk.
    pub fn search(
        &self,
        query: &[f32],
        allowed: Option<&HashSet<u64>>,
        k: usize,
    ) -> Result<Vec<Neighbour>> {
        if k == 0 || self.is_empty() {
            return Ok(Vec::new());
        }
        if query.len() != self.state.dim {
            return Err(self.err(format!(
                "query vector has {} dimensions; the index holds {}",
                query.len(),
                self.state.dim
            )));
        }
        self.index.change_expansion_search(EXPANSION_SEARCH.max(k));
        let matches = match allowed {
            Some(set) if set.len() <= self.exact_below => return self.exact_among(query, set, k),
            Some(set) => self
                .index
                .filtered_search(query, k, |key| set.contains(&key))
                .map_err(|e| self.err(e))?,
            None if self.exact_always => return self.exact(query, k),
            None => self.index.search(query, k).map_err(|e| self.err(e))?,
        };
        Ok(matches
            .keys
            .iter()
            .zip(&matches.distances)
            .filter(|(key, _)| allowed.is_none_or(|s| s.contains(key)))
            .map(|(&key, &d)| Neighbour {
                chunk_id: ChunkId(key),
                similarity: 1.0 - d,
            })
            .collect())
    }

    /// Exact search over all vectors (for measuring the graph's recall).
    pub fn exact(&self, query: &[f32], k: usize) -> Result<Vec<Neighbour>> {
        let m = self.index.exact_search(query, k).map_err(|e| self.err(e))?;
        Ok(m.keys
            .iter()
            .zip(&m.distances)
            .map(|(&key, &d)| Neighbour {
                chunk_id: ChunkId(key),
                similarity: 1.0 - d,
            })
            .collect())
    }

    fn exact_among(&self, query: &[f32], set: &HashSet<u64>, k: usize) -> Result<Vec<Neighbour>> {
        let mut buf = vec![0f32; self.state.dim];
        let mut scored = Vec::with_capacity(set.len());
        for &key in set {
            if !self.index.contains(key) {
                continue;
            }
            self.index.get(key, &mut buf).map_err(|e| self.err(e))?;
            scored.push(Neighbour {
                chunk_id: ChunkId(key),
                similarity: crate::embed::cosine(query, &buf),
            });
        }
        scored.sort_by(|a, b| {
            b.similarity
                .total_cmp(&a.similarity)
                .then(a.chunk_id.0.cmp(&b.chunk_id.0))
        });
        scored.truncate(k);
        Ok(scored)
    }
}

/// What embedding the pending chunks did.
#[derive(Debug, Default, Clone, Serialize, PartialEq)]
pub struct EmbedReport {
    pub model: String,
    /// Chunks embedded in this run.
    pub embedded: usize,
    /// Chunks that shared an embedding input with another and reused its vector.
    pub reused: usize,
    pub seconds: f64,
    pub chunks_per_second: f64,
    /// Candidate sentences and titles embedded for answer selection.
    #[serde(default)]
    pub sentences_embedded: usize,
}

/// Embed every chunk that has no vector for `embedder` yet, committing to
/// the store every [`EMBED_COMMIT`] chunks, so an interrupted run keeps its
/// work and the next run continues where it stopped.
pub fn embed_pending(
    store: &mut Store,
    embedder: &dyn Embedder,
    progress: bool,
) -> Result<EmbedReport> {
    embed_pending_with(store, embedder, progress, true)
}

/// As [`embed_pending`]; without `sentences`, the chunks only (retrieval
/// benchmarks, which never answer).
pub fn embed_pending_with(
    store: &mut Store,
    embedder: &dyn Embedder,
    progress: bool,
    sentences: bool,
) -> Result<EmbedReport> {
    let started = Instant::now();
    let model = embedder.id().to_owned();
    let total = store.count_pending_embeddings(&model)?;
    let bar = chunk_bar(progress && total > 0, total, "embedding");
    let mut report = EmbedReport {
        model: model.clone(),
        ..Default::default()
    };
    let mut after = ChunkId(0);
    loop {
        let batch = store.pending_embeddings(&model, after, EMBED_COMMIT)?;
        let Some(last) = batch.last() else { break };
        after = last.chunk_id;
        // Identical inputs (repeated boilerplate pages, say) are embedded once.
        let mut seen = HashSet::new();
        let unique: Vec<_> = batch
            .iter()
            .filter(|p| seen.insert(p.key.as_str()))
            .collect();
        let texts: Vec<&str> = unique.iter().map(|p| p.input.as_str()).collect();
        let vectors = embedder.embed(&texts)?;
        let items: Vec<(String, Vec<f32>)> =
            unique.iter().map(|p| p.key.clone()).zip(vectors).collect();
        store.put_embeddings(&model, &items)?;
        report.embedded += items.len();
        report.reused += batch.len() - items.len();
        bar.inc(batch.len() as u64);
    }
    bar.finish_and_clear();
    if sentences {
        report.sentences_embedded = embed_pending_sentences(store, embedder, progress)?;
    }
    report.seconds = started.elapsed().as_secs_f64();
    report.chunks_per_second = if report.seconds > 0.0 {
        report.embedded as f64 / report.seconds
    } else {
        0.0
    };
    Ok(report)
}

/// A progress bar over `total` chunks (hidden unless `show`).
fn chunk_bar(show: bool, total: u64, what: &str) -> indicatif::ProgressBar {
    if !show {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(total);
    bar.set_style(
        indicatif::ProgressStyle::with_template(&format!(
            "{{spinner}} {what} [{{elapsed_precise}}] {{bar:30}} {{pos}}/{{len}} chunks ({{per_sec}}, ETA {{eta}})"
        ))
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    bar
}

/// Embed the candidate sentences and titles of every chunk added since the
/// last run (chunk ids only grow), so answer selection finds their vectors
/// stored. Committed every [`EMBED_COMMIT`] chunks with the mark of how far
/// it got; a text already stored (the same sentence in overlapping chunks,
/// a repeated title) is not embedded again. Returns how many were embedded.
pub fn embed_pending_sentences(
    store: &mut Store,
    embedder: &dyn Embedder,
    progress: bool,
) -> Result<usize> {
    let model = embedder.id().to_owned();
    let mut after = store.sentences_embedded_through(&model)?;
    let last = store.last_chunk_id()?;
    if after >= last {
        return Ok(0);
    }
    let bar = chunk_bar(progress, last.0 - after.0, "embedding sentences");
    let start = after;
    let mut done = 0;
    loop {
        let batch = store.chunks_after(after, EMBED_COMMIT)?;
        let Some((through, _, _)) = batch.last() else {
            break;
        };
        let through = *through;
        let inputs =
            crate::select::inputs_of(batch.iter().map(|(_, t, x)| (t.as_str(), x.as_str())));
        let keys: Vec<String> = inputs
            .iter()
            .map(|t| crate::store::embedding_key(t))
            .collect();
        let missing: HashSet<String> = store
            .missing_embeddings(&model, &keys)?
            .into_iter()
            .collect();
        let todo: Vec<(&String, &str)> = keys
            .iter()
            .zip(&inputs)
            .filter(|(k, _)| missing.contains(*k))
            .map(|(k, t)| (k, t.as_str()))
            .collect();
        let texts: Vec<&str> = todo.iter().map(|(_, t)| *t).collect();
        let vectors = if texts.is_empty() {
            Vec::new()
        } else {
            embedder.embed(&texts)?
        };
        let items: Vec<(String, Vec<f32>)> = todo
            .iter()
            .map(|(k, _)| (*k).clone())
            .zip(vectors)
            .collect();
        store.put_sentence_embeddings(&model, &items, through)?;
        done += items.len();
        bar.set_position(through.0 - start.0);
        after = through;
    }
    bar.finish_and_clear();
    Ok(done)
}

/// Embed what is pending in the index at `index_dir` and bring its vector
/// index up to date: the step ingest runs after storing documents.
pub fn update(
    index_dir: &Path,
    embedder: &dyn Embedder,
    progress: bool,
) -> Result<(EmbedReport, SyncReport)> {
    update_with(index_dir, embedder, progress, true)
}

/// As [`update`]; without `sentences`, the chunks only (retrieval
/// benchmarks, which never answer).
pub fn update_with(
    index_dir: &Path,
    embedder: &dyn Embedder,
    progress: bool,
    sentences: bool,
) -> Result<(EmbedReport, SyncReport)> {
    let _writer = crate::lock::acquire(index_dir, "`onrecord add`")?;
    let mut store = Store::open(index_dir)?;
    let report = embed_pending_with(&mut store, embedder, progress, sentences)?;
    let vi = VectorIndex::open_synced(
        index_dir,
        &store,
        embedder.id(),
        embedder.dim(),
        DEFAULT_SCALAR,
    )?;
    Ok((report, vi.last_sync))
}

/// The `k` nearest of `vectors` to `query` by brute force (the reference
/// the graph's recall is measured against).
pub fn brute_force(query: &[f32], vectors: &[(ChunkId, Vec<f32>)], k: usize) -> Vec<ChunkId> {
    let mut scored: Vec<(f32, u64)> = vectors
        .iter()
        .map(|(id, v)| (crate::embed::cosine(query, v), id.0))
        .collect();
    scored.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    scored
        .into_iter()
        .take(k)
        .map(|(_, id)| ChunkId(id))
        .collect()
}
