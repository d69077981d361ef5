//! Ingest: walk the given paths, extract each file into pages, chunk them,
//! and write each document to the store (one transaction per document) and
//! to the BM25 index. One bad file becomes a diagnostic and the run goes on.
//!
//! invariant: a failure on one file never removes or alters what is already
//! stored for any file.
//! invariant: an unchanged file (same bytes, metadata and chunk settings) is
//! not rewritten.

use crate::bm25::Bm25Index;
use crate::chunk::{ChunkConfig, chunk_pages};
use crate::error::{Error, Result};
use crate::extract::{self, ExtractOptions, Kind};
use crate::manifest::Manifest;
use crate::store::{NewDocument, Store};
use crate::text::hash_hex;
use crate::types::{DocId, DocMeta};
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Settings for one ingest run.
#[derive(Debug, Default)]
pub struct IngestConfig {
    pub chunk: ChunkConfig,
    pub extract: ExtractOptions,
    pub manifest: Manifest,
    /// Metadata set by flags for this run; it wins over the manifest and the file.
    pub meta_override: DocMeta,
    pub progress: bool,
}

/// Counts for the final summary.
#[derive(Debug, Default, Clone, Serialize, PartialEq)]
pub struct Report {
    /// Files newly stored or replaced.
    pub ingested: usize,
    /// Of `ingested`, files that replaced an older version.
    pub replaced: usize,
    pub unchanged: usize,
    /// Files passed over (not a supported type).
    pub skipped: usize,
    /// Skipped files by extension (`(none)` for files without one).
    pub skipped_types: std::collections::BTreeMap<String, usize>,
    pub failed: usize,
    pub pages: usize,
    pub chunks: usize,
    pub seconds: f64,
}

#[derive(Debug, Clone, Copy, Serialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    Error,
    Warning,
    Note,
}

/// Something the user should know about one file.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Diagnostic {
    pub path: PathBuf,
    pub severity: Severity,
    pub message: String,
}

impl std::fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let s = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
            Severity::Note => "note",
        };
        write!(f, "{s}: {}: {}", self.path.display(), self.message)
    }
}

/// A document that does not come from a file (for example a corpus read
/// from JSON Lines), ready to be chunked and stored.
#[derive(Debug, Clone)]
pub struct MemDoc {
    pub doc_id: DocId,
    pub meta: DocMeta,
    pub pages: Vec<String>,
}

/// Collect the files under `paths` (folders recursively, hidden entries
/// skipped, sorted). Paths that do not exist become diagnostics.
pub fn collect_files(paths: &[PathBuf], diags: &mut Vec<Diagnostic>) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for p in paths {
        if p.is_file() {
            out.push(p.clone());
        } else if p.is_dir() {
            let walker = walkdir::WalkDir::new(p)
                .sort_by_file_name()
                .into_iter()
                .filter_entry(|e| {
                    e.depth() == 0 || !e.file_name().to_string_lossy().starts_with('.')
                });
            for entry in walker {
                match entry {
                    Ok(e) if e.file_type().is_file() => out.push(e.into_path()),
                    Ok(_) => {}
                    Err(e) => diags.push(Diagnostic {
                        path: e.path().map(Path::to_path_buf).unwrap_or_else(|| p.clone()),
                        severity: Severity::Error,
                        message: format!("cannot read: {e}"),
                    }),
                }
            }
        } else {
            diags.push(Diagnostic {
                path: p.clone(),
                severity: Severity::Error,
                message: "no such file or folder".into(),
            });
        }
    }
    out
}

/// Derive a document id from a file name: lower-case letters, digits, `-`, `_` and `.`.
pub fn slug(name: &str) -> String {
    let mut s = String::new();
    for c in name.chars() {
        if c.is_alphanumeric() || matches!(c, '-' | '_' | '.') {
            s.extend(c.to_lowercase());
        } else if !s.ends_with('-') {
            s.push('-');
        }
    }
    let s = s.trim_matches('-').to_string();
    if s.is_empty() { "doc".into() } else { s }
}

/// A document id from a file's name (its slug), with `-2`, `-3`, …
/// appended while `taken` says the id is in use.
pub fn id_from_file_name(
    path: &Path,
    mut taken: impl FnMut(&DocId) -> Result<bool>,
) -> Result<DocId> {
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    let base = slug(&stem);
    let mut candidate = DocId(base.clone());
    let mut n = 2;
    while taken(&candidate)? {
        candidate = DocId(format!("{base}-{n}"));
        n += 1;
        if n > 10_000 {
            return Err(Error::Invalid(format!(
                "cannot find a free document id for {}",
                path.display()
            )));
        }
    }
    Ok(candidate)
}

struct Run<'a> {
    store: &'a mut Store,
    cfg: &'a IngestConfig,
    report: Report,
    diags: Vec<Diagnostic>,
}

/// Ingest files and folders into the index at `index_dir`.
pub fn ingest_paths(
    index_dir: &Path,
    paths: &[PathBuf],
    cfg: &IngestConfig,
) -> Result<(Report, Vec<Diagnostic>)> {
    let started = Instant::now();
    let mut store = Store::open_or_create(index_dir)?;
    let bm25 = Bm25Index::open_synced(index_dir, &store)?;
    let mut diags = Vec::new();
    let files = collect_files(paths, &mut diags);
    let failed_paths = diags.len();
    let bar = progress_bar(cfg.progress, files.len() as u64, "files");
    let mut run = Run {
        store: &mut store,
        cfg,
        report: Report {
            failed: failed_paths,
            ..Default::default()
        },
        diags,
    };
    let mut writer = bm25.writer()?;
    let mut since_commit = 0;
    for f in &files {
        bar.set_message(
            f.file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default(),
        );
        if run.one_file(f, &mut writer)? {
            since_commit += 1;
        }
        // Commit now and then so an interrupted run keeps its work.
        if since_commit >= 200 {
            writer.commit(run.store.generation()?)?;
            writer = bm25.writer()?;
            since_commit = 0;
        }
        bar.inc(1);
    }
    writer.commit(run.store.generation()?)?;
    bar.finish_and_clear();
    let mut report = run.report;
    report.seconds = started.elapsed().as_secs_f64();
    Ok((report, run.diags))
}

/// Ingest in-memory documents (an evaluation corpus, say) into `index_dir`.
pub fn ingest_docs(
    index_dir: &Path,
    docs: impl IntoIterator<Item = MemDoc>,
    chunk: ChunkConfig,
    progress: Option<u64>,
) -> Result<Report> {
    let started = Instant::now();
    let mut store = Store::open_or_create(index_dir)?;
    let bm25 = Bm25Index::open_synced(index_dir, &store)?;
    let bar = progress_bar(progress.is_some(), progress.unwrap_or(0), "documents");
    let mut writer = bm25.writer()?;
    let mut report = Report::default();
    for d in docs {
        let joined = d.pages.join("\u{c}");
        let key = hash_hex(format!("{joined}\u{0}{:?}\u{0}{:?}", d.meta, chunk).as_bytes());
        let source = format!("mem:{}", d.doc_id);
        if store
            .known_source(&source)?
            .is_some_and(|k| k.ingest_key == key)
        {
            report.unchanged += 1;
            bar.inc(1);
            continue;
        }
        let chunks = chunk_pages(&d.pages, chunk);
        let doc = NewDocument {
            doc_id: d.doc_id,
            source,
            file_hash: hash_hex(joined.as_bytes()),
            ingest_key: key,
            kind: "text".into(),
            meta: d.meta,
            headers: None,
            pages: d.pages,
            chunks,
        };
        let (p, c) = store_and_index(&mut store, &mut writer, &doc)?;
        report.ingested += 1;
        report.pages += p;
        report.chunks += c;
        bar.inc(1);
    }
    writer.commit(store.generation()?)?;
    bar.finish_and_clear();
    report.seconds = started.elapsed().as_secs_f64();
    Ok(report)
}

fn store_and_index(
    store: &mut Store,
    writer: &mut crate::bm25::Bm25Writer<'_>,
    doc: &NewDocument,
) -> Result<(usize, usize)> {
    let stored = store.put_document(doc)?;
    writer.delete_doc(&doc.doc_id);
    for c in &stored {
        writer.add(c)?;
    }
    Ok((doc.pages.len(), stored.len()))
}

fn progress_bar(show: bool, len: u64, unit: &str) -> indicatif::ProgressBar {
    if !show {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len);
    let style = indicatif::ProgressStyle::with_template(&format!(
        "{{spinner}} [{{elapsed_precise}}] {{bar:30}} {{pos}}/{{len}} {unit} ({{per_sec}}, ETA {{eta}}) {{wide_msg}}"
    ))
    .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar());
    bar.set_style(style);
    bar
}

impl Run<'_> {
    fn diag(&mut self, path: &Path, severity: Severity, message: impl Into<String>) {
        self.diags.push(Diagnostic {
            path: path.to_path_buf(),
            severity,
            message: message.into(),
        });
    }

    /// Returns Ok(true) when the file was stored. Errors returned are store or
    /// index failures, which stop the run; file problems become diagnostics.
    fn one_file(&mut self, path: &Path, writer: &mut crate::bm25::Bm25Writer<'_>) -> Result<bool> {
        let Some(kind) = Kind::of(path) else {
            self.report.skipped += 1;
            let ext = path
                .extension()
                .map(|e| format!(".{}", e.to_string_lossy().to_lowercase()))
                .unwrap_or_else(|| "(none)".into());
            *self.report.skipped_types.entry(ext).or_default() += 1;
            return Ok(false);
        };
        let canonical = match path.canonicalize() {
            Ok(c) => c,
            Err(e) => {
                self.report.failed += 1;
                self.diag(path, Severity::Error, format!("cannot open: {e}"));
                return Ok(false);
            }
        };
        let bytes = match std::fs::read(&canonical) {
            Ok(b) => b,
            Err(e) => {
                self.report.failed += 1;
                self.diag(path, Severity::Error, format!("cannot read: {e}"));
                return Ok(false);
            }
        };
        let file_hash = hash_hex(&bytes);
        let entry = self
            .cfg
            .manifest
            .get(&canonical)
            .cloned()
            .unwrap_or_default();
        let mut meta = entry.meta.clone();
        meta.overlay(&self.cfg.meta_override);
        let ingest_key = hash_hex(
            format!(
                "{file_hash}\u{0}{meta:?}\u{0}{:?}\u{0}{:?}",
                entry.id, self.cfg.chunk
            )
            .as_bytes(),
        );
        let source = canonical.to_string_lossy().into_owned();
        let known = self.store.known_source(&source)?;
        if known.as_ref().is_some_and(|k| k.ingest_key == ingest_key) {
            self.report.unchanged += 1;
            return Ok(false);
        }
        let extracted = match extract::extract(&canonical, kind, &bytes, &self.cfg.extract) {
            Ok(x) => x,
            Err(e) => {
                self.report.failed += 1;
                let kept = if known.is_some() {
                    "; the version stored earlier is kept"
                } else {
                    ""
                };
                self.diag(path, Severity::Error, format!("{e}{kept}"));
                return Ok(false);
            }
        };
        for n in &extracted.notes {
            self.diag(path, Severity::Note, n.clone());
        }
        let empty: Vec<String> = extracted
            .pages
            .iter()
            .enumerate()
            .filter(|(_, p)| p.trim().is_empty())
            .map(|(i, _)| (i + 1).to_string())
            .collect();
        if !empty.is_empty() {
            self.diag(
                path,
                Severity::Warning,
                format!(
                    "page(s) {} have no text (image-only?); they cannot be searched or quoted",
                    empty.join(", ")
                ),
            );
        }
        // Metadata: flags > manifest > the file's own.
        meta.fill_from(&extracted.meta);
        if let Some(Err(m)) = meta.date.as_deref().map(crate::types::check_date) {
            self.diag(path, Severity::Warning, format!("date ignored: {m}"));
            meta.date = None;
        }
        let doc_id = match (&known, &entry.id) {
            (Some(k), None) => k.doc_id.clone(),
            (_, Some(id)) => {
                let id = DocId(id.clone());
                match self.store.source_of(&id)? {
                    Some(other) if other != source => {
                        self.report.failed += 1;
                        self.diag(
                            path,
                            Severity::Error,
                            format!("the manifest gives id `{id}`, which {other} already has"),
                        );
                        return Ok(false);
                    }
                    _ => id,
                }
            }
            (None, None) => self.fresh_id(&canonical)?,
        };
        if meta.title.is_none() {
            meta.title = canonical
                .file_name()
                .map(|n| n.to_string_lossy().into_owned());
        }
        let chunks = chunk_pages(&extracted.pages, self.cfg.chunk);
        let doc = NewDocument {
            doc_id,
            source,
            file_hash,
            ingest_key,
            kind: kind.name().into(),
            meta,
            headers: extracted.headers,
            pages: extracted.pages,
            chunks,
        };
        let (p, c) = store_and_index(self.store, writer, &doc)?;
        self.report.ingested += 1;
        if known.is_some() {
            self.report.replaced += 1;
        }
        self.report.pages += p;
        self.report.chunks += c;
        Ok(true)
    }

    fn fresh_id(&self, canonical: &Path) -> Result<DocId> {
        id_from_file_name(canonical, |id| Ok(self.store.source_of(id)?.is_some()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slugs() {
        let cases = [
            ("MPW Memo 2019-03", "mpw-memo-2019-03"),
            ("Réunion (final)", "réunion-final"),
            ("  ", "doc"),
            ("a__b.v2", "a__b.v2"),
        ];
        for (input, want) in cases {
            assert_eq!(slug(input), want);
        }
    }
}
