//! Query latency at scale: `cargo bench --bench latency [-- 100000 1000000]`.
//!
//! Builds an index of N synthetic chunks (default 100,000; pass sizes as
//! arguments), with synthetic 384-dimension vectors from a seeded random
//! projection of each chunk's words (so related chunks are near each other,
//! as with a real model), and measures on 2 cores:
//! - hybrid search p50 and p95, excluding the query embedding, with BM25
//!   alone and the graph alone beside it;
//! - the query embedding alone, with the real model when it is present;
//! - peak resident memory.
//!
//! The target is hybrid p50 <= 15 ms at 1M chunks; the figure is printed as
//! a ratio to that target.

use onrecord::embed::{Embedder, normalise};
use onrecord::eval::peak_rss_mib;
use onrecord::ingest::{MemDoc, ingest_docs};
use onrecord::retrieve::{Index, RetrieverKind, SearchOptions};
use onrecord::types::{DocId, DocMeta, Filters};
use std::sync::Arc;
use std::time::Instant;

#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

const DIM: usize = 384;
const TARGET_P50_MS: f64 = 15.0;

/// Each word maps to a fixed pseudo-random unit direction; a text is the
/// normalised sum of its words' directions.
struct Projection;

fn splitmix(mut x: u64) -> u64 {
    x = x.wrapping_add(0x9e3779b97f4a7c15);
    let mut z = x;
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d049bb133111eb);
    z ^ (z >> 31)
}

fn word_seed(w: &str) -> u64 {
    w.bytes().fold(0xcbf29ce484222325u64, |h, b| {
        (h ^ b as u64).wrapping_mul(0x100000001b3)
    })
}

impl Embedder for Projection {
    fn id(&self) -> &str {
        "synthetic-projection@bench"
    }
    fn dim(&self) -> usize {
        DIM
    }
    fn token_ids(&self, text: &str) -> onrecord::Result<Vec<u32>> {
        Ok(text
            .split_whitespace()
            .map(|w| word_seed(w) as u32)
            .collect())
    }
    fn embed(&self, texts: &[&str]) -> onrecord::Result<Vec<Vec<f32>>> {
        Ok(texts
            .iter()
            .map(|t| {
                let mut v = vec![0f32; DIM];
                for w in t.split_whitespace() {
                    let mut s = word_seed(&w.to_lowercase());
                    for x in v.iter_mut() {
                        s = splitmix(s);
                        *x += ((s >> 40) as f32 / (1u64 << 24) as f32) - 0.5;
                    }
                }
                normalise(&mut v);
                v
            })
            .collect())
    }
}

/// A vocabulary of 20,000 made-up words with a skewed (Zipf-like) draw.
fn synthetic_text(i: u64, words: usize) -> String {
    let mut s = splitmix(i);
    let mut out = String::new();
    for _ in 0..words {
        s = splitmix(s);
        let u = (s >> 11) as f64 / (1u64 << 53) as f64;
        let rank = ((20_000f64).powf(u)) as u64; // log-uniform: Zipf-like
        out.push_str(&format!("w{rank} "));
    }
    out
}

fn quantile(v: &mut [f64], q: f64) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    v[((v.len() - 1) as f64 * q).round() as usize]
}

fn run(n: u64) {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    // One chunk per document: ~60 words stays under the 160-token chunk size.
    let t = Instant::now();
    let docs = (0..n).map(|i| MemDoc {
        doc_id: DocId(format!("s{i}")),
        meta: DocMeta {
            title: Some(format!("Synthetic record {i}")),
            organisation: Some(["Harbour", "Transit", "Health"][(i % 3) as usize].into()),
            date: Some(format!("20{:02}-01-01", 10 + i % 15)),
            ..Default::default()
        },
        pages: vec![synthetic_text(i, 60)],
    });
    let report = ingest_docs(dir, docs, Default::default(), None).unwrap();
    let ingest_s = t.elapsed().as_secs_f64();
    let e: Arc<dyn Embedder> = Arc::new(Projection);
    let t = Instant::now();
    let (er, _) = onrecord::vectors::update_with(dir, e.as_ref(), false, false).unwrap();
    let vec_s = t.elapsed().as_secs_f64();
    let index = Index::open_with(dir, Some(e.clone())).unwrap();
    let queries: Vec<String> = (0..300)
        .map(|i| synthetic_text(1_000_000_000 + i, 6))
        .collect();
    let qvecs = e
        .embed(&queries.iter().map(String::as_str).collect::<Vec<_>>())
        .unwrap();
    let mut line = format!(
        "{n} chunks ({} stored; ingest {ingest_s:.0}s, vectors {vec_s:.0}s, {:.0} vectors/s):",
        report.chunks,
        er.embedded as f64 / vec_s.max(1e-9)
    );
    let mut hybrid_p50 = f64::NAN;
    for kind in [
        RetrieverKind::Bm25,
        RetrieverKind::Dense,
        RetrieverKind::Hybrid,
    ] {
        let opts = SearchOptions {
            retriever: Some(kind),
            ..Default::default()
        };
        let mut times = Vec::new();
        for (q, v) in queries.iter().zip(&qvecs) {
            let t = Instant::now();
            let hits = index
                .search_embedded(q, Some(v), &Filters::default(), 10, &opts)
                .unwrap();
            times.push(t.elapsed().as_secs_f64() * 1000.0);
            assert!(!hits.is_empty());
        }
        let p50 = quantile(&mut times, 0.5);
        let p95 = quantile(&mut times, 0.95);
        if kind == RetrieverKind::Hybrid {
            hybrid_p50 = p50;
        }
        line.push_str(&format!(
            " {} p50 {p50:.2} ms p95 {p95:.2} ms;",
            kind.name()
        ));
    }
    println!("{line}");
    println!(
        "  hybrid p50 / target ({TARGET_P50_MS} ms at 1M chunks): {:.2}; peak RSS {:.0} MiB",
        hybrid_p50 / TARGET_P50_MS,
        peak_rss_mib()
    );
}

fn query_embedding() {
    let r = onrecord::embed::resolve(&onrecord::embed::EmbedderChoice::Auto).unwrap();
    let Some(e) = r.embedder else {
        println!(
            "query embedding: no model here ({})",
            r.note.unwrap_or_default()
        );
        return;
    };
    let qs = [
        "cost overruns on the ferry terminal",
        "who approved the Pier 3 contract extension",
        "nurse staffing shortfall at the regional hospital in 2022",
        "bridge inspection found corrosion",
    ];
    e.embed(&qs).unwrap(); // warm up
    let mut times = Vec::new();
    for _ in 0..25 {
        for q in qs {
            let t = Instant::now();
            e.embed(&[q]).unwrap();
            times.push(t.elapsed().as_secs_f64() * 1000.0);
        }
    }
    println!(
        "query embedding ({}): p50 {:.1} ms, p95 {:.1} ms",
        e.id(),
        quantile(&mut times, 0.5),
        quantile(&mut times, 0.95)
    );
}

fn main() {
    let sizes: Vec<u64> = std::env::args()
        .skip(1)
        .filter_map(|a| a.replace('_', "").parse().ok())
        .collect();
    let sizes = if sizes.is_empty() {
        vec![100_000]
    } else {
        sizes
    };
    println!(
        "threads: {}",
        std::thread::available_parallelism().map_or(1, |n| n.get())
    );
    query_embedding();
    for n in sizes {
        run(n);
    }
}
