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
use crate::ocr::engine::{self, Job, OcrEngine, OcrError, OcrSettings, Outcome, Tesseract};
use crate::ocr::{self, OcrMode, OcrReason, PageOcr};
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
    /// When PDF pages are read by OCR.
    pub ocr: OcrMode,
    pub ocr_settings: OcrSettings,
    /// Read PDFs, HTML and e-mail in a worker process with a memory and a
    /// time allowance (the command line always does); `None` reads them in
    /// this process.
    pub reader: Option<crate::extract::worker::Isolation>,
}

/// What a failure message adds when an earlier version of the file stays
/// in the index.
fn kept<T>(known: &Option<T>) -> &'static str {
    if known.is_some() {
        "; the version stored earlier is kept"
    } else {
        ""
    }
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
    /// Pages read by OCR in this run, taken from the OCR cache, and that
    /// needed OCR but could not be read.
    pub ocr_read: usize,
    pub ocr_cached: usize,
    pub ocr_failed: usize,
    /// Time spent rendering and reading pages (wall clock, all workers).
    pub ocr_seconds: f64,
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

/// What a directory entry that is neither a regular file nor a folder is,
/// in words for a diagnostic ("symbolic link", "named pipe").
pub fn special_kind(ft: &std::fs::FileType) -> &'static str {
    if ft.is_symlink() {
        return "symbolic link";
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if ft.is_fifo() {
            return "named pipe";
        }
        if ft.is_socket() {
            return "socket";
        }
        if ft.is_block_device() || ft.is_char_device() {
            return "device";
        }
    }
    "special file"
}

/// Collect the files under `paths` (folders recursively, hidden entries
/// skipped, sorted). Paths that do not exist become errors. Entries inside
/// a folder that are not regular files (symbolic links, which are not
/// followed so that a release cannot pull in files from elsewhere on the
/// machine; named pipes, sockets, devices) become warnings naming them;
/// ingest counts them as skipped.
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
                    Ok(e) if e.file_type().is_dir() => {}
                    Ok(e) => {
                        let what = special_kind(&e.file_type());
                        let message = match std::fs::read_link(e.path()) {
                            Ok(to) if e.file_type().is_symlink() => format!(
                                "skipped: a {what} (to {}); links inside a folder are not followed, \
                                 so add the file it points to by name if it belongs to the release",
                                to.display()
                            ),
                            _ => format!("skipped: a {what}, not a file that can be read"),
                        };
                        diags.push(Diagnostic {
                            path: e.into_path(),
                            severity: Severity::Warning,
                            message,
                        });
                    }
                    Err(e) => diags.push(Diagnostic {
                        path: e.path().map(Path::to_path_buf).unwrap_or_else(|| p.clone()),
                        severity: Severity::Error,
                        message: format!("cannot read: {e}"),
                    }),
                }
            }
        } else {
            let message = match std::fs::symlink_metadata(p) {
                Ok(m) => format!(
                    "a {}, not a file or folder that can be read",
                    special_kind(&m.file_type())
                ),
                Err(_) => "no such file or folder".into(),
            };
            diags.push(Diagnostic {
                path: p.clone(),
                severity: Severity::Error,
                message,
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
    /// The OCR engine, found when the first page needs it.
    engine: Option<std::result::Result<Tesseract, OcrError>>,
    /// Files read and waiting for their OCR pages, in file order.
    pending: Vec<Pending>,
    bars: indicatif::MultiProgress,
    /// Shown from the first page read by OCR.
    ocr_bar: Option<indicatif::ProgressBar>,
}

/// A file read and checked, waiting for OCR before it is stored.
struct Pending {
    path: PathBuf,
    canonical: PathBuf,
    kind: Kind,
    file_hash: String,
    ingest_key: String,
    source: String,
    known: Option<crate::store::KnownSource>,
    entry: crate::manifest::Entry,
    meta: DocMeta,
    extracted: extract::Extracted,
    pages: Vec<OcrPending>,
    /// Pages that need OCR but could not be read for want of the tools.
    unread: Vec<u32>,
}

/// A page that needs OCR.
struct OcrPending {
    page: u32,
    reason: OcrReason,
    cache_key: String,
    job: Job,
    result: Option<Outcome>,
}

/// Read OCR pages in batches of about this many (across files), so both
/// cores stay busy when a release holds many one-page scans.
const OCR_BATCH_PAGES: usize = 16;
/// And never hold more than this many files waiting.
const OCR_BATCH_FILES: usize = 64;

/// Ingest files and folders into the index at `index_dir`.
pub fn ingest_paths(
    index_dir: &Path,
    paths: &[PathBuf],
    cfg: &IngestConfig,
) -> Result<(Report, Vec<Diagnostic>)> {
    let started = Instant::now();
    // One writer per index, for the whole run.
    let _writer = crate::lock::acquire(index_dir, "`onrecord add`")?;
    let mut store = Store::open_or_create(index_dir)?;
    let bm25 = Bm25Index::open_synced(index_dir, &store)?;
    let mut diags = Vec::new();
    let files = collect_files(paths, &mut diags);
    let failed_paths = diags
        .iter()
        .filter(|d| d.severity == Severity::Error)
        .count();
    let mut skipped_entries = std::collections::BTreeMap::<String, usize>::new();
    for d in diags.iter().filter(|d| d.severity == Severity::Warning) {
        let what = std::fs::symlink_metadata(&d.path)
            .map_or("special file", |m| special_kind(&m.file_type()));
        *skipped_entries.entry(format!("({what})")).or_default() += 1;
    }
    let bars = indicatif::MultiProgress::new();
    let bar = bars.add(progress_bar(cfg.progress, files.len() as u64, "files"));
    let mut run = Run {
        store: &mut store,
        cfg,
        report: Report {
            failed: failed_paths,
            skipped: skipped_entries.values().sum(),
            skipped_types: skipped_entries,
            ..Default::default()
        },
        diags,
        engine: None,
        pending: Vec::new(),
        bars,
        ocr_bar: None,
    };
    let mut writer = bm25.writer()?;
    let mut since_commit = 0;
    for f in &files {
        bar.set_message(
            f.file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default(),
        );
        if let Some(p) = run.prepare(f)? {
            run.pending.push(p);
        }
        if run.queued_pages() >= OCR_BATCH_PAGES
            || run.pending.len() >= OCR_BATCH_FILES
            || (run.queued_pages() == 0 && !run.pending.is_empty())
        {
            since_commit += run.flush(&mut writer)?;
        }
        // Commit now and then so an interrupted run keeps its work.
        if since_commit >= 200 {
            writer.commit(run.store.generation()?)?;
            writer = bm25.writer()?;
            since_commit = 0;
        }
        bar.inc(1);
    }
    run.flush(&mut writer)?;
    writer.commit(run.store.generation()?)?;
    bar.finish_and_clear();
    if let Some(b) = &run.ocr_bar {
        b.finish_and_clear();
    }
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
    let _writer = crate::lock::acquire(index_dir, "`onrecord add`")?;
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
            ocr: Vec::new(),
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

    /// Pages waiting for the OCR engine.
    fn queued_pages(&self) -> usize {
        self.pending
            .iter()
            .flat_map(|p| &p.pages)
            .filter(|p| p.result.is_none())
            .count()
    }

    /// The OCR engine, looked for once per run (with the page renderer); a
    /// missing one is reported once, with how to install it.
    fn engine(&mut self, path: &Path) -> Option<&Tesseract> {
        if self.engine.is_none() {
            let found = if crate::extract::pdf::find_on_path("pdftoppm").is_none() {
                Err(OcrError::RendererMissing)
            } else {
                Tesseract::find(&self.cfg.ocr_settings)
            };
            if let Err(e) = &found {
                self.diag(path, Severity::Warning, e.to_string());
            }
            self.engine = Some(found);
        }
        self.engine.as_ref().and_then(|e| e.as_ref().ok())
    }

    /// Reads and checks one file. Returns it when it is to be stored (after
    /// any OCR); `None` when it was skipped, unchanged or failed (counted and
    /// reported). Errors returned are store failures, which stop the run.
    fn prepare(&mut self, path: &Path) -> Result<Option<Pending>> {
        let Some(kind) = Kind::of(path) else {
            self.report.skipped += 1;
            let ext = path
                .extension()
                .map(|e| format!(".{}", e.to_string_lossy().to_lowercase()))
                .unwrap_or_else(|| "(none)".into());
            *self.report.skipped_types.entry(ext).or_default() += 1;
            return Ok(None);
        };
        let canonical = match path.canonicalize() {
            Ok(c) => c,
            Err(e) => {
                self.report.failed += 1;
                self.diag(path, Severity::Error, format!("cannot open: {e}"));
                return Ok(None);
            }
        };
        let source = canonical.to_string_lossy().into_owned();
        let known = self.store.known_source(&source)?;
        // Refuse before reading: the bytes are held for hashing.
        if let Some(iso) = &self.cfg.reader
            && let Ok(m) = std::fs::metadata(&canonical)
            && let Some(msg) = extract::worker::too_large(iso, m.len())
        {
            self.report.failed += 1;
            self.diag(path, Severity::Error, format!("{msg}{}", kept(&known)));
            return Ok(None);
        }
        let bytes = match std::fs::read(&canonical) {
            Ok(b) => b,
            Err(e) => {
                self.report.failed += 1;
                self.diag(path, Severity::Error, format!("cannot read: {e}"));
                return Ok(None);
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
        let ocr_mode = if kind == Kind::Pdf {
            self.cfg.ocr.name()
        } else {
            ""
        };
        let ingest_key = hash_hex(
            format!(
                "{file_hash}\u{0}{meta:?}\u{0}{:?}\u{0}{:?}\u{0}{ocr_mode}",
                entry.id, self.cfg.chunk
            )
            .as_bytes(),
        );
        if known.as_ref().is_some_and(|k| k.ingest_key == ingest_key) {
            self.report.unchanged += 1;
            return Ok(None);
        }
        let read = match &self.cfg.reader {
            Some(iso) if !matches!(kind, Kind::Text | Kind::Markdown) => {
                extract::worker::extract_isolated(iso, &canonical, kind, &self.cfg.extract)
            }
            _ => extract::extract(&canonical, kind, &bytes, &self.cfg.extract),
        };
        let extracted = match read {
            Ok(x) => x,
            Err(e) => {
                self.report.failed += 1;
                self.diag(path, Severity::Error, format!("{e}{}", kept(&known)));
                return Ok(None);
            }
        };
        for n in &extracted.notes {
            self.diag(path, Severity::Note, n.clone());
        }
        let mut pending = Pending {
            path: path.to_path_buf(),
            canonical,
            kind,
            file_hash,
            ingest_key,
            source,
            known,
            entry,
            meta,
            extracted,
            pages: Vec::new(),
            unread: Vec::new(),
        };
        self.plan_ocr(&mut pending)?;
        Ok(Some(pending))
    }

    /// Decides which pages of a PDF need OCR, and takes those already read
    /// from the cache.
    fn plan_ocr(&mut self, p: &mut Pending) -> Result<()> {
        let needs: Vec<(u32, OcrReason)> = p
            .extracted
            .drawings
            .iter()
            .zip(&p.extracted.pages)
            .enumerate()
            .filter_map(|(i, (d, text))| {
                ocr::assess(text, d.has_image, self.cfg.ocr)
                    .1
                    .map(|r| (i as u32 + 1, r))
            })
            .collect();
        if needs.is_empty() {
            return Ok(());
        }
        let Some(engine) = self.engine(&p.path).cloned() else {
            p.unread = needs.iter().map(|(n, _)| *n).collect();
            return Ok(());
        };
        for (page, reason) in needs {
            let drawing = p.extracted.drawings[page as usize - 1].clone();
            let dpi = engine::render_dpi(&drawing, self.cfg.ocr_settings.dpi);
            let cache_key = engine::cache_key(&drawing, &engine, dpi);
            let result = self.store.ocr_cached(&cache_key)?.map(|page| {
                self.report.ocr_cached += 1;
                Outcome {
                    blank: page.words.is_empty(),
                    page: Ok(page),
                    complaint: None,
                }
            });
            p.pages.push(OcrPending {
                page,
                reason,
                cache_key,
                job: Job {
                    pdf: p.canonical.clone(),
                    page,
                    drawing,
                },
                result,
            });
        }
        Ok(())
    }

    /// Reads every queued page on the worker pool, caches the results, and
    /// stores the waiting files in order. Returns how many were stored.
    fn flush(&mut self, writer: &mut crate::bm25::Bm25Writer<'_>) -> Result<usize> {
        let mut slots = Vec::new();
        let mut jobs = Vec::new();
        for (i, p) in self.pending.iter().enumerate() {
            for (j, page) in p.pages.iter().enumerate() {
                if page.result.is_none() {
                    slots.push((i, j));
                    jobs.push(page.job.clone());
                }
            }
        }
        if !jobs.is_empty()
            && let Some(Ok(engine)) = &self.engine
        {
            let started = Instant::now();
            let bar = self
                .ocr_bar
                .get_or_insert_with(|| {
                    self.bars
                        .add(progress_bar(self.cfg.progress, 0, "OCR pages"))
                })
                .clone();
            bar.inc_length(jobs.len() as u64);
            let outcomes = engine::run_jobs(&jobs, engine, &self.cfg.ocr_settings, &|| bar.inc(1));
            self.report.ocr_seconds += started.elapsed().as_secs_f64();
            for ((i, j), out) in slots.into_iter().zip(outcomes) {
                let page = &mut self.pending[i].pages[j];
                if let Ok(read) = &out.page {
                    self.store
                        .put_ocr_cached(&page.cache_key, engine.id(), read)?;
                    self.report.ocr_read += 1;
                }
                page.result = Some(out);
            }
        }
        let mut stored = 0;
        for p in std::mem::take(&mut self.pending) {
            if self.finish(p, writer)? {
                stored += 1;
            }
        }
        Ok(stored)
    }

    /// Puts OCR text in place of the pages that needed it, reports what
    /// happened, and stores the file. Returns Ok(true) when it was stored.
    fn finish(&mut self, p: Pending, writer: &mut crate::bm25::Bm25Writer<'_>) -> Result<bool> {
        let Pending {
            path,
            canonical,
            kind,
            file_hash,
            mut ingest_key,
            source,
            known,
            entry,
            mut meta,
            mut extracted,
            pages,
            unread,
        } = p;
        let mut ocr_pages = Vec::new();
        let mut read = Vec::new();
        let mut low = Vec::new();
        let mut blank = Vec::new();
        for op in pages {
            let Some(out) = op.result else { continue };
            let n = op.page;
            if let Some(c) = &out.complaint {
                self.diag(
                    &path,
                    Severity::Warning,
                    format!("page {n}: the page image is damaged ({c}); OCR read what it could"),
                );
            }
            let page = match out.page {
                Ok(page) => page,
                Err(e) => {
                    self.report.ocr_failed += 1;
                    if !e.is_setup() {
                        self.diag(
                            &path,
                            Severity::Warning,
                            format!("page {n}: {e}; the page is left without text"),
                        );
                    }
                    continue;
                }
            };
            if out.blank {
                blank.push(n);
                continue;
            }
            if page.text.trim().is_empty() {
                continue;
            }
            if !ocr::prefer_ocr(&extracted.pages[n as usize - 1], &op.reason, &page.text) {
                // The layer reads better than the picture (a cover page
                // with a logo, say): keep it.
                continue;
            }
            if let Some(c) = page.confidence.filter(|c| *c < ocr::LOW_CONFIDENCE) {
                low.push(format!("{n} ({c:.0}%)"));
            }
            read.push((n, op.reason.clone(), page.confidence));
            extracted.pages[n as usize - 1] = page.text;
            ocr_pages.push(PageOcr {
                page: n,
                cache_key: op.cache_key,
                reason: op.reason,
                confidence: page.confidence,
                words: page.words,
            });
        }
        if !read.is_empty() {
            let pages: Vec<u32> = read.iter().map(|r| r.0).collect();
            let mut reasons: Vec<String> = read.iter().map(|r| r.1.to_string()).collect();
            reasons.dedup();
            let (sum, n) = ocr_pages.iter().fold((0f64, 0usize), |(s, n), o| {
                let chars: usize = o.words.iter().map(|w| w.text.chars().count()).sum();
                (
                    s + f64::from(o.confidence.unwrap_or(0.0)) * chars as f64,
                    n + chars,
                )
            });
            self.diag(
                &path,
                Severity::Note,
                format!(
                    "{} read by OCR ({}); mean word confidence {:.0}%",
                    page_list(&pages),
                    reasons.join("; "),
                    sum / n.max(1) as f64
                ),
            );
        }
        if !low.is_empty() {
            self.diag(
                &path,
                Severity::Warning,
                format!(
                    "low OCR confidence on page(s) {}: quotes from them are flagged; check the page images",
                    low.join(", ")
                ),
            );
        }
        if !unread.is_empty() {
            self.report.ocr_failed += unread.len();
            self.diag(
                &path,
                Severity::Warning,
                format!(
                    "{} but could not be read (see the first warning for how to install what is missing); the file will be read again by the next `onrecord add`",
                    need_ocr(&unread)
                ),
            );
            // Never "unchanged" while pages wait for OCR.
            ingest_key.push_str(":ocr-pending");
        }
        if extracted.pages.iter().all(|p| p.trim().is_empty()) {
            self.report.failed += 1;
            let kept = kept(&known);
            let why = if kind != Kind::Pdf {
                "the file is empty (no text)".to_string()
            } else if !blank.is_empty() && blank.len() == extracted.pages.len() {
                format!(
                    "no text layer on any of its {} pages, and they render blank",
                    extracted.pages.len()
                )
            } else {
                format!(
                    "no text layer on any of its {} pages (image-only scan?), and OCR found no text",
                    extracted.pages.len()
                )
            };
            self.diag(&path, Severity::Error, format!("{why}{kept}"));
            return Ok(false);
        }
        let empty: Vec<u32> = extracted
            .pages
            .iter()
            .enumerate()
            .filter(|(_, p)| p.trim().is_empty())
            .map(|(i, _)| i as u32 + 1)
            .collect();
        if !empty.is_empty() {
            self.diag(
                &path,
                Severity::Warning,
                format!(
                    "{} have no text (blank, or image-only and not read); they cannot be searched or quoted",
                    page_list(&empty)
                ),
            );
        }
        // Metadata: flags > manifest > the file's own.
        meta.fill_from(&extracted.meta);
        if let Some(Err(m)) = meta.date.as_deref().map(crate::types::check_date) {
            self.diag(&path, Severity::Warning, format!("date ignored: {m}"));
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
                            &path,
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
            ocr: ocr_pages,
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

/// "page 1 needs OCR", "pages 1-3 need OCR".
fn need_ocr(pages: &[u32]) -> String {
    let verb = if pages.len() == 1 { "needs" } else { "need" };
    format!("{} {verb} OCR", page_list(pages))
}

/// "page 3" or "pages 1-4, 7".
fn page_list(pages: &[u32]) -> String {
    let mut parts: Vec<String> = Vec::new();
    let mut i = 0;
    while i < pages.len() {
        let mut j = i;
        while j + 1 < pages.len() && pages[j + 1] == pages[j] + 1 {
            j += 1;
        }
        parts.push(if i == j {
            pages[i].to_string()
        } else {
            format!("{}-{}", pages[i], pages[j])
        });
        i = j + 1;
    }
    let word = if pages.len() == 1 { "page" } else { "pages" };
    format!("{word} {}", parts.join(", "))
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

    #[test]
    fn page_lists() {
        assert_eq!(page_list(&[3]), "page 3");
        assert_eq!(page_list(&[1, 2, 3, 4, 7, 9, 10]), "pages 1-4, 7, 9-10");
        // Issue 26, item 10: the verb agrees ("page 1 need OCR" before).
        assert_eq!(need_ocr(&[1]), "page 1 needs OCR");
        assert_eq!(need_ocr(&[1, 2]), "pages 1-2 need OCR");
    }
}
