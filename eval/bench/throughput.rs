//! Throughput benchmark: `cargo bench --bench throughput`.
//!
//! Prints figures and ratios against baselines measured in the same run, so
//! that the numbers mean something on a noisy machine:
//! - PDF text routes on the demo PDFs: character error rate against the
//!   demo source text, and speed of each route relative to pdftotext;
//! - ingest pages/s on the demo release, relative to extraction alone;
//! - ingest docs/s, search p50/p95 and retrieval quality on SciFact, with
//!   search latency relative to a naive scan over the same chunks;
//! - peak resident memory.

use onrecord::eval::peak_rss_mib;
use onrecord::extract::pdf::{PdfRoute, extract_pages};
use onrecord::extract::{ExtractOptions, Kind, extract};
use onrecord::ingest::{IngestConfig, ingest_paths};
use onrecord::manifest::Manifest;
use onrecord::retrieve::Index;
use onrecord::text::{fold_ws, terms};
use std::collections::HashSet;
use std::path::Path;
use std::time::Instant;

fn pdf_routes(source: &Path, release: &Path) {
    let entries = onrecord::demo::load_entries(source).unwrap();
    let have_pdftotext = onrecord::extract::pdf::default_route() == PdfRoute::Pdftotext;
    let mut routes = vec![PdfRoute::PureRust];
    if have_pdftotext {
        routes.insert(0, PdfRoute::Pdftotext);
    } else {
        println!("pdftotext not installed: only the built-in route is measured");
    }
    let mut base_rate = None;
    for route in routes {
        let (mut pages, mut err, mut chars) = (0usize, 0usize, 0usize);
        let t = Instant::now();
        let mut texts = Vec::new();
        // Scans have no text layer; `cargo bench --bench ocr` measures them.
        for e in entries
            .iter()
            .filter(|e| e.file.ends_with(".txt") && e.scan.is_none())
        {
            let got = extract_pages(&release.join(format!("{}.pdf", e.id)), route).unwrap();
            pages += got.len();
            texts.push((e.file.clone(), got));
        }
        let secs = t.elapsed().as_secs_f64();
        for (file, got) in &texts {
            let src = std::fs::read_to_string(source.join(file)).unwrap();
            let want: Vec<&str> = src
                .trim_end_matches(['\n', '\u{c}'])
                .split('\u{c}')
                .collect();
            for (w, g) in want.iter().zip(got) {
                let w: Vec<char> = fold_ws(&w.replace('\u{2588}', "X")).chars().collect();
                let g: Vec<char> = fold_ws(g).chars().collect();
                err += onrecord::ocr::levenshtein(&w, &g);
                chars += w.len();
            }
        }
        let rate = pages as f64 / secs;
        let base = *base_rate.get_or_insert(rate);
        println!(
            "pdf route {route:?}: {pages} pages, {rate:.0} pages/s ({:.2}x the first route), character error rate {:.4}%",
            rate / base,
            100.0 * err as f64 / chars.max(1) as f64
        );
    }
}

fn demo() {
    let source = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
    let work = tempfile::tempdir().unwrap();
    let release = work.path().join("release");
    let manifest = onrecord::demo::build(&source, &release).unwrap();
    pdf_routes(&source, &release);

    // Baseline: read and extract every file, nothing else.
    let opts = ExtractOptions::default();
    let t = Instant::now();
    let mut pages = 0;
    for f in std::fs::read_dir(&release).unwrap() {
        let p = f.unwrap().path();
        if let Some(kind) = Kind::of(&p) {
            let bytes = std::fs::read(&p).unwrap();
            pages += extract(&p, kind, &bytes, &opts).unwrap().pages.len();
        }
    }
    let extract_rate = pages as f64 / t.elapsed().as_secs_f64();

    let cfg = IngestConfig {
        manifest: Manifest::load(&manifest).unwrap(),
        ..Default::default()
    };
    let idx = work.path().join("index");
    let (r, _) = ingest_paths(&idx, std::slice::from_ref(&release), &cfg).unwrap();
    let ingest_rate = r.pages as f64 / r.seconds;
    println!(
        "demo ingest: {} files, {} pages, {} chunks in {:.2}s = {ingest_rate:.0} pages/s ({:.2}x extraction alone at {extract_rate:.0} pages/s)",
        r.ingested,
        r.pages,
        r.chunks,
        r.seconds,
        ingest_rate / extract_rate
    );
    let t = Instant::now();
    let (r2, _) = ingest_paths(&idx, std::slice::from_ref(&release), &cfg).unwrap();
    println!(
        "demo re-ingest of unchanged files: {} unchanged in {:.3}s ({:.3}x the first ingest)",
        r2.unchanged,
        t.elapsed().as_secs_f64(),
        t.elapsed().as_secs_f64() / r.seconds
    );
}

fn scifact() {
    let dir = onrecord::shared_data_dir().join("scifact/beir");
    if !dir.exists() {
        println!(
            "SciFact not found at {}; skipped (set ONRECORD_SHARED_DATA)",
            dir.display()
        );
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let r = onrecord::eval::beir::run(&dir, "test", tmp.path(), false).unwrap();
    println!(
        "SciFact BM25: nDCG@10 {:.4}, recall@100 {:.4}, MRR@10 {:.4} ({} queries)",
        r.ndcg10, r.recall100, r.mrr10, r.queries
    );
    println!(
        "SciFact ingest: {} documents (one page each), {} chunks, {:.0} pages/s",
        r.documents, r.chunks, r.ingest_docs_per_second
    );
    // Baseline: a naive scan that scores every chunk by matched query terms.
    let index = Index::open(tmp.path()).unwrap();
    let mut chunks: Vec<HashSet<String>> = Vec::new();
    index
        .store
        .for_each_chunk(|c| {
            chunks.push(
                terms(&format!("{} {}", c.title, c.text))
                    .into_iter()
                    .collect(),
            );
            Ok(())
        })
        .unwrap();
    let queries: Vec<String> = std::fs::read_to_string(dir.join("queries.jsonl"))
        .unwrap()
        .lines()
        .take(100)
        .map(|l| {
            serde_json::from_str::<serde_json::Value>(l).unwrap()["text"]
                .as_str()
                .unwrap()
                .to_string()
        })
        .collect();
    let t = Instant::now();
    let mut sink = 0usize;
    for q in &queries {
        let qt: Vec<String> = terms(q);
        sink += chunks
            .iter()
            .map(|c| qt.iter().filter(|t| c.contains(*t)).count())
            .max()
            .unwrap_or(0);
    }
    let scan_ms = t.elapsed().as_secs_f64() * 1000.0 / queries.len() as f64;
    println!(
        "SciFact search: p50 {:.2} ms, p95 {:.2} ms (p50 is {:.3}x a naive scan at {scan_ms:.2} ms/query){}",
        r.search_p50_ms,
        r.search_p95_ms,
        r.search_p50_ms / scan_ms,
        if sink == usize::MAX { "!" } else { "" }
    );
}

fn main() {
    // `cargo bench` passes `--bench`; nothing else to parse.
    demo();
    scifact();
    println!("peak resident memory: {:.0} MiB", peak_rss_mib());
}
