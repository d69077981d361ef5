//! Where replay reads pages: the store (with the answer log's copies of
//! earlier page versions), or the original files, re-extracted without an
//! index exactly as ingest extracts them.

use super::{PageSource, SourceDoc};
use crate::extract::{self, ExtractOptions, Kind};
use crate::ingest::{Diagnostic, collect_files, id_from_file_name};
use crate::manifest::Manifest;
use crate::store::Store;
use crate::types::{ChunkId, DocId};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Pages from an index's store.
pub struct StorePages<'a> {
    pub store: &'a Store,
    pub dir: PathBuf,
    cache: HashMap<DocId, Option<Arc<SourceDoc>>>,
}

impl<'a> StorePages<'a> {
    pub fn new(store: &'a Store, dir: &Path) -> StorePages<'a> {
        StorePages {
            store,
            dir: dir.to_path_buf(),
            cache: HashMap::new(),
        }
    }
}

impl PageSource for StorePages<'_> {
    fn describe(&self) -> String {
        format!("index {}", self.dir.display())
    }

    fn document(&mut self, id: &DocId) -> Result<Option<Arc<SourceDoc>>, String> {
        if let Some(d) = self.cache.get(id) {
            return Ok(d.clone());
        }
        let doc = match self.store.document(id).map_err(|e| e.to_string())? {
            None => None,
            Some(s) => {
                let pages = self.store.pages(id).map_err(|e| e.to_string())?;
                Some(Arc::new(SourceDoc::new(
                    s.doc_id,
                    s.title,
                    s.organisation,
                    s.date,
                    pages,
                )))
            }
        };
        self.cache.insert(id.clone(), doc.clone());
        Ok(doc)
    }

    fn missing(&self, id: &DocId) -> String {
        format!(
            "document `{id}` is no longer in the index at {}",
            self.dir.display()
        )
    }

    fn earlier_page(&self, fingerprint: &str) -> Option<String> {
        self.store
            .cited_page(fingerprint)
            .ok()
            .flatten()
            .map(|(_, _, text)| text)
    }

    fn chunk_unchanged(&self, chunk: ChunkId, hash: &str) -> Option<bool> {
        let found = self.store.chunks(&[chunk]).ok()?;
        Some(found.first().is_some_and(|c| c.hash == hash))
    }
}

/// Pages straight from the original files under a folder. Document ids
/// come from a manifest (given, or `manifest.jsonl` / `manifest.csv` in the
/// folder) and otherwise from file names, as ingest derives them.
pub struct SourceFiles {
    dir: PathBuf,
    files: HashMap<DocId, PathBuf>,
    manifest: Manifest,
    opts: ExtractOptions,
    cache: HashMap<DocId, Option<Arc<SourceDoc>>>,
    /// An index whose answer log may hold earlier versions of pages.
    earlier: Option<Store>,
    /// Problems met while listing the folder.
    pub diagnostics: Vec<Diagnostic>,
}

impl SourceFiles {
    /// List the supported files under `dir`. Fails (with the path) when the
    /// folder or the manifest cannot be read.
    pub fn open(dir: &Path, manifest: Option<&Path>) -> crate::Result<SourceFiles> {
        if !dir.is_dir() {
            return Err(crate::Error::Invalid(format!(
                "{}: no such folder (--sources names the folder of original files)",
                dir.display()
            )));
        }
        let manifest = match manifest {
            Some(m) => Manifest::load(m)?,
            None => {
                let mut m = Manifest::default();
                for name in ["manifest.jsonl", "manifest.csv"] {
                    let p = dir.join(name);
                    if p.is_file() {
                        m.extend(Manifest::load(&p)?);
                    }
                }
                m
            }
        };
        let mut diagnostics = Vec::new();
        let mut files = HashMap::new();
        let listed = collect_files(&[dir.to_path_buf()], &mut diagnostics);
        // Manifest ids first, so a derived id never takes one a manifest names.
        let mut derived = Vec::new();
        for path in listed {
            if Kind::of(&path).is_none() {
                continue;
            }
            let Ok(canonical) = path.canonicalize() else {
                continue;
            };
            match manifest.get(&canonical).and_then(|e| e.id.clone()) {
                Some(id) => {
                    files.insert(DocId(id), canonical);
                }
                None => derived.push(canonical),
            }
        }
        for canonical in derived {
            let id = id_from_file_name(&canonical, |id| Ok(files.contains_key(id)))?;
            files.insert(id, canonical);
        }
        Ok(SourceFiles {
            dir: dir.to_path_buf(),
            files,
            manifest,
            opts: ExtractOptions::default(),
            cache: HashMap::new(),
            earlier: None,
            diagnostics,
        })
    }

    /// Use this index's answer log for earlier versions of changed pages.
    pub fn with_earlier_pages(mut self, store: Option<Store>) -> SourceFiles {
        self.earlier = store;
        self
    }

    /// Extract files with these options (the ones the index was built with).
    pub fn with_extract(mut self, opts: ExtractOptions) -> SourceFiles {
        self.opts = opts;
        self
    }

    /// How many documents the folder holds.
    pub fn len(&self) -> usize {
        self.files.len()
    }

    pub fn is_empty(&self) -> bool {
        self.files.is_empty()
    }
}

impl PageSource for SourceFiles {
    fn describe(&self) -> String {
        format!("sources {}", self.dir.display())
    }

    fn document(&mut self, id: &DocId) -> Result<Option<Arc<SourceDoc>>, String> {
        if let Some(d) = self.cache.get(id) {
            return Ok(d.clone());
        }
        let Some(path) = self.files.get(id).cloned() else {
            self.cache.insert(id.clone(), None);
            return Ok(None);
        };
        let kind = Kind::of(&path).expect("only supported files are listed");
        let bytes =
            std::fs::read(&path).map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
        let mut x = extract::extract(&path, kind, &bytes, &self.opts)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        // Scanned pages are read as ingest read them, so their text (and
        // hash) is the same.
        crate::ocr::read_in_place(
            &path,
            &mut x.pages,
            &x.drawings,
            crate::ocr::OcrMode::Auto,
            &crate::ocr::engine::OcrSettings::default(),
        )
        .map_err(|e| format!("{}: {e}", path.display()))?;
        let entry = self.manifest.get(&path).cloned().unwrap_or_default();
        let mut meta = entry.meta;
        meta.fill_from(&x.meta);
        let title = meta.title.clone().unwrap_or_else(|| {
            path.file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_else(|| id.0.clone())
        });
        let doc = Some(Arc::new(SourceDoc::new(
            id.clone(),
            title,
            meta.organisation,
            meta.date,
            x.pages,
        )));
        self.cache.insert(id.clone(), doc.clone());
        Ok(doc)
    }

    fn missing(&self, id: &DocId) -> String {
        format!(
            "no file for document `{id}` under {} (by manifest id or file name)",
            self.dir.display()
        )
    }

    fn earlier_page(&self, fingerprint: &str) -> Option<String> {
        self.earlier
            .as_ref()?
            .cited_page(fingerprint)
            .ok()
            .flatten()
            .map(|(_, _, text)| text)
    }
}
