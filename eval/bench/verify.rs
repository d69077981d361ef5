//! Verifier speed: `cargo bench --bench verify`.
//!
//! Measures on this machine, single-threaded, with the bundled demo
//! records as text (invented data):
//! - verifying a 10-sentence answer against 10 retrieved chunks (locate
//!   every quote, then judge every sentence with the default rules judge);
//!   half the quotes are written in clean spelling against OCR-damaged
//!   pages, so the tolerant aligner runs; target <= 5 ms;
//! - locating one quote in a 50-page document (about 150,000 characters),
//!   both when it is there verbatim and when only an OCR-damaged copy is;
//!   target <= 2 ms.
//!
//! Figures are printed with their ratio to the target (below 1 is within
//! it).

use onrecord::store::StoredChunk;
use onrecord::types::{ChunkId, ChunkSpan, DocId};
use onrecord::verify::align::{AlignConfig, find};
use onrecord::verify::{Draft, DraftCitation, DraftSentence, RulesJudge, verify};
use std::collections::HashMap;
use std::time::Instant;

#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

const ANSWER_TARGET_MS: f64 = 5.0;
const LOCATE_TARGET_MS: f64 = 2.0;

/// The classic OCR confusions, applied to every third word.
fn damage(s: &str) -> String {
    s.split(' ')
        .enumerate()
        .map(|(i, w)| {
            if i % 3 == 1 {
                w.replacen('m', "rn", 1)
                    .replacen('l', "1", 1)
                    .replacen('o', "0", 1)
            } else {
                w.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

fn demo_text() -> String {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo/docs");
    let mut files: Vec<_> = std::fs::read_dir(&dir)
        .expect("the demo sources are in the source tree")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "txt"))
        .collect();
    files.sort();
    files
        .iter()
        .map(|p| std::fs::read_to_string(p).unwrap())
        .collect::<Vec<_>>()
        .join("\n")
}

fn chunk(id: u64, text: String) -> StoredChunk {
    StoredChunk {
        id: ChunkId(id),
        doc_id: DocId(format!("bench-{id}")),
        title: "bench".into(),
        organisation: None,
        date: None,
        seq: 0,
        span: ChunkSpan {
            start_page: 1,
            start_char: 0,
            end_page: 1,
            end_char: text.chars().count(),
        },
        text,
        hash: String::new(),
    }
}

fn time_per_call(mut f: impl FnMut(), min_secs: f64) -> f64 {
    f();
    let mut n = 0u32;
    let t0 = Instant::now();
    while t0.elapsed().as_secs_f64() < min_secs || n < 5 {
        f();
        n += 1;
    }
    t0.elapsed().as_secs_f64() * 1000.0 / n as f64
}

fn main() {
    let text = demo_text();
    let sentences: Vec<&str> = onrecord::segment::sentence_spans(&text)
        .into_iter()
        .map(|r| &text[r])
        .filter(|s| s.split_whitespace().count() >= 12 && s.len() < 400)
        .collect();
    assert!(sentences.len() > 200, "the demo has enough sentences");

    // 10 chunks of about 160 words, each holding the quote of one sentence.
    let mut chunks = HashMap::new();
    let mut draft = Draft::default();
    for i in 0..10u64 {
        let quoted = sentences[(i as usize) * 17 + 3];
        let around: Vec<&str> = sentences[(i as usize) * 17..(i as usize) * 17 + 8].to_vec();
        let body = around.join(" ");
        let body = if i % 2 == 0 { damage(&body) } else { body };
        chunks.insert(ChunkId(i), chunk(i, body));
        draft.sentences.push(DraftSentence {
            text: quoted.to_string(),
            citations: vec![DraftCitation {
                chunk_id: ChunkId(i),
                quote: quoted.to_string(),
            }],
        });
    }
    let judge = RulesJudge::default();
    let verified = verify(&draft, &chunks, &judge, &|_, _| None);
    let kept = verified
        .iter()
        .filter(|v| v.verdict == onrecord::verify::Verdict::Supported)
        .count();
    let answer_ms = time_per_call(
        || {
            std::hint::black_box(verify(&draft, &chunks, &judge, &|_, _| None));
        },
        2.0,
    );

    // A 50-page document of about 3,000 characters a page.
    let mut doc = String::new();
    while doc.len() < 150_000 {
        doc.push_str(&text);
    }
    let mut cut = 150_000;
    while !doc.is_char_boundary(cut) {
        cut += 1;
    }
    doc.truncate(cut);
    let damaged = damage(&doc);
    // A sentence two thirds of the way in.
    let in_doc: Vec<&str> = sentences
        .iter()
        .copied()
        .filter(|q| doc.find(q).is_some_and(|at| at > doc.len() * 2 / 3))
        .collect();
    let quote = in_doc[0];
    let cfg = AlignConfig::default();
    assert!(find(quote, &doc, &cfg).is_some());
    assert!(
        find(quote, &damaged, &cfg).is_some(),
        "the clean quote is found on the damaged copy"
    );
    let exact_ms = time_per_call(
        || {
            std::hint::black_box(find(quote, &doc, &cfg));
        },
        1.0,
    );
    let damaged_ms = time_per_call(
        || {
            std::hint::black_box(find(quote, &damaged, &cfg));
        },
        1.0,
    );
    let report = serde_json::json!({
        "answer_10_sentences_10_chunks_ms": answer_ms,
        "answer_sentences_supported": kept,
        "answer_ratio_to_target": answer_ms / ANSWER_TARGET_MS,
        "locate_50_pages_chars": doc.chars().count(),
        "locate_verbatim_ms": exact_ms,
        "locate_ocr_damaged_ms": damaged_ms,
        "locate_ratio_to_target": exact_ms.max(damaged_ms) / LOCATE_TARGET_MS,
        "peak_rss_mib": onrecord::eval::peak_rss_mib(),
    });
    println!("{}", serde_json::to_string_pretty(&report).unwrap());
}
