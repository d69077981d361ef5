//! OCR benchmark: `cargo bench --bench ocr`.
//!
//! On the demo release's scanned pages (rendered from the demo's own text
//! and damaged: faint toner, skew, grain, stamps):
//! - OCR throughput in pages/s with one worker and with one per core, and
//!   their ratio (how well reading scales across cores);
//! - a re-ingest after a metadata change: share of pages taken from the OCR
//!   cache and its time as a ratio of the first ingest's;
//! - character error rate per page and over all pages, against the source
//!   text (Levenshtein distance / reference length).
//!
//! Needs tesseract (tesseract-ocr, tesseract-ocr-eng, tesseract-ocr-fra)
//! and pdftoppm (poppler-utils).

use onrecord::ingest::{IngestConfig, ingest_paths};
use onrecord::manifest::Manifest;
use onrecord::ocr::engine::{OcrSettings, Tesseract};
use onrecord::store::Store;
use onrecord::types::{DocId, DocMeta};
use std::path::Path;

fn main() {
    if let Err(e) = Tesseract::find(&OcrSettings::default()) {
        println!("OCR benchmark skipped: {e}");
        return;
    }
    let source = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
    let work = tempfile::tempdir().unwrap();
    let release = work.path().join("release");
    let t = std::time::Instant::now();
    let manifest = onrecord::demo::build(&source, &release).unwrap();
    println!(
        "demo release rendered in {:.1}s (scans included)",
        t.elapsed().as_secs_f64()
    );
    let cores = std::thread::available_parallelism().map_or(2, |n| n.get());
    let cfg = |workers: usize, org: Option<&str>| IngestConfig {
        manifest: Manifest::load(&manifest).unwrap(),
        ocr_settings: OcrSettings {
            workers,
            ..Default::default()
        },
        meta_override: DocMeta {
            organisation: org.map(str::to_string),
            ..Default::default()
        },
        ..Default::default()
    };
    let mut rates = Vec::new();
    for workers in [1, cores] {
        let idx = work.path().join(format!("index-{workers}"));
        let (r, _) =
            ingest_paths(&idx, std::slice::from_ref(&release), &cfg(workers, None)).unwrap();
        let rate = r.ocr_read as f64 / r.ocr_seconds;
        println!(
            "OCR with {workers} worker(s): {} pages in {:.1}s = {rate:.2} pages/s (whole ingest {:.1}s)",
            r.ocr_read, r.ocr_seconds, r.seconds
        );
        rates.push((rate, r.seconds, idx));
    }
    println!(
        "OCR speed-up, {cores} workers vs 1: {:.2}x (ideal {cores}x)",
        rates[1].0 / rates[0].0
    );
    let (_, first_secs, idx) = &rates[1];
    let (r, _) = ingest_paths(
        idx,
        std::slice::from_ref(&release),
        &cfg(cores, Some("Re-ingested")),
    )
    .unwrap();
    let asked = r.ocr_cached + r.ocr_read;
    println!(
        "re-ingest after a metadata change: {}/{} OCR pages from the cache ({:.0}% hit), {:.1}s = {:.2}x the first ingest's time",
        r.ocr_cached,
        asked,
        100.0 * r.ocr_cached as f64 / asked.max(1) as f64,
        r.seconds,
        r.seconds / first_secs
    );
    let store = Store::open(idx).unwrap();
    let (mut edits, mut chars) = (0, 0);
    for e in onrecord::demo::load_entries(&source)
        .unwrap()
        .iter()
        .filter(|e| e.scan.is_some())
    {
        let text = std::fs::read_to_string(source.join(&e.file)).unwrap();
        let want: Vec<&str> = text
            .trim_end_matches(['\n', '\u{c}'])
            .split('\u{c}')
            .collect();
        let got = store.pages(&DocId(e.id.clone())).unwrap();
        for (i, (w, g)) in want.iter().zip(&got).enumerate() {
            let (d, n) = onrecord::ocr::char_errors(w, g);
            println!(
                "CER {:5.2}%  {} p.{}",
                100.0 * d as f64 / n as f64,
                e.id,
                i + 1
            );
            edits += d;
            chars += n;
        }
    }
    println!(
        "CER over all scanned pages: {:.2}%",
        100.0 * edits as f64 / chars as f64
    );
}
