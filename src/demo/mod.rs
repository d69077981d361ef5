//! The bundled demo release: invented records from the fictional Province of
//! Kestrava. Source texts live in `eval/demo/docs/` with a manifest in
//! `eval/demo/manifest.jsonl`; `build` renders every `.txt` source into a
//! real PDF with a text layer (one source line per PDF line, a form feed per
//! page break), copies e-mails and HTML as they are, and writes a manifest
//! beside them, so that ingest exercises the PDF path as with a real release.
//! Sources whose manifest row has a `scan` field become image-only scans
//! instead ([`scan`]), rendered from the same text and damaged, so that OCR
//! can be measured against the text they came from.

pub mod scan;

use crate::error::{Error, Result};
use crate::extract::pdf::{PdfPage, write_text_pdf};
use std::path::{Path, PathBuf};

/// Three questions the demo asks.
pub const SAMPLE_QUESTIONS: [&str; 3] = [
    "What was Brindlemoor's bid price for the Pier 3 rebuild?",
    "Why was Ramp 3A closed in March 2022?",
    "How many passengers travelled on the first sailing from the reopened terminal?",
];

/// Where the demo sources are: `eval/demo` under the current folder, else
/// the one in the source tree this binary was built from.
pub fn default_source_dir() -> PathBuf {
    let local = PathBuf::from("eval/demo");
    if local.join("manifest.jsonl").exists() {
        local
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo")
    }
}

/// One manifest row of the demo sources.
#[derive(Debug, Clone, serde::Deserialize, serde::Serialize)]
pub struct DemoEntry {
    pub file: String,
    pub id: String,
    pub title: String,
    pub organisation: String,
    pub date: String,
    pub release: String,
    pub url: String,
    /// Render as a damaged image-only scan (not written to the release's
    /// manifest: the release looks as a real one would).
    #[serde(default, skip_serializing)]
    pub scan: Option<scan::ScanSpec>,
}

pub fn load_entries(source: &Path) -> Result<Vec<DemoEntry>> {
    let path = source.join("manifest.jsonl");
    let text = std::fs::read_to_string(&path).map_err(|e| Error::io(&path, e))?;
    text.lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(i, l)| {
            serde_json::from_str(l).map_err(|e| Error::BadInput {
                path: path.clone(),
                line: i + 1,
                message: e.to_string(),
            })
        })
        .collect()
}

/// Render the demo release into `out` (created if needed) and return the
/// path of the manifest written there. Files already up to date are kept.
pub fn build(source: &Path, out: &Path) -> Result<PathBuf> {
    std::fs::create_dir_all(out).map_err(|e| Error::io(out, e))?;
    let mut manifest = String::new();
    for mut e in load_entries(source)? {
        let src = source.join(&e.file);
        let is_text = src.extension().is_some_and(|x| x == "txt");
        let name = if is_text {
            format!("{}.pdf", e.id)
        } else {
            src.file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default()
        };
        let dst = out.join(&name);
        if !up_to_date(&src, &dst) || !up_to_date(&source.join("manifest.jsonl"), &dst) {
            if is_text {
                let text = std::fs::read_to_string(&src).map_err(|err| Error::io(&src, err))?;
                let pages: Vec<PdfPage> = text
                    .trim_end_matches(['\n', '\u{c}'])
                    .split('\u{c}')
                    .map(|p| PdfPage {
                        lines: p
                            .strip_prefix('\n')
                            .unwrap_or(p)
                            .trim_end_matches('\n')
                            .lines()
                            .map(str::to_string)
                            .collect(),
                    })
                    .collect();
                match &e.scan {
                    Some(spec) if can_scan() => {
                        let seed =
                            u64::from_str_radix(&crate::text::hash_hex(e.id.as_bytes())[..16], 16)
                                .unwrap_or(0);
                        scan::write_scan(&dst, &e.title, &pages, spec, seed)?;
                    }
                    _ => {
                        if e.scan.is_some() {
                            // The command line says this once for the
                            // whole release; the detail is for RUST_LOG.
                            tracing::debug!(
                                "{}: pdftoppm (poppler-utils) is not installed, so this page set is written with a text layer instead of as a scan",
                                src.display()
                            );
                        }
                        write_text_pdf(&dst, &e.title, &pages).map_err(|err| Error::Extract {
                            path: src.clone(),
                            message: err.to_string(),
                        })?;
                    }
                }
            } else {
                std::fs::copy(&src, &dst).map_err(|err| Error::io(&src, err))?;
            }
        }
        e.file = name;
        manifest.push_str(&serde_json::to_string(&e).expect("plain data serialises"));
        manifest.push('\n');
    }
    let mpath = out.join("manifest.jsonl");
    std::fs::write(&mpath, manifest).map_err(|e| Error::io(&mpath, e))?;
    Ok(mpath)
}

/// Render the demo release under `workdir/release` and ingest it into
/// `workdir/index` (files already up to date are left alone). Returns the
/// index folder, the ingest report and its diagnostics.
pub fn prepare(
    source: &Path,
    workdir: &Path,
    progress: bool,
) -> Result<(
    PathBuf,
    crate::ingest::Report,
    Vec<crate::ingest::Diagnostic>,
)> {
    let release = workdir.join("release");
    let index = workdir.join("index");
    let manifest = build(source, &release)?;
    let cfg = crate::ingest::IngestConfig {
        manifest: crate::manifest::Manifest::load(&manifest)?,
        progress,
        ..Default::default()
    };
    let (report, diags) =
        crate::ingest::ingest_paths(&index, std::slice::from_ref(&release), &cfg)?;
    Ok((index, report, diags))
}

/// Whether scans can be made here (they are rendered with pdftoppm).
pub fn can_scan() -> bool {
    crate::extract::pdf::find_on_path("pdftoppm").is_some()
}

/// Whether `dir` holds demo sources (a `manifest.jsonl` and `docs/`).
pub fn is_source_dir(dir: &Path) -> bool {
    dir.join("manifest.jsonl").is_file() && dir.join("docs").is_dir()
}

fn up_to_date(src: &Path, dst: &Path) -> bool {
    let m = |p: &Path| std::fs::metadata(p).and_then(|m| m.modified()).ok();
    matches!((m(src), m(dst)), (Some(s), Some(d)) if d >= s)
}
