//! Local drafting speed: `cargo bench --bench generate`.
//!
//! With the default model (SmolLM2-135M-Instruct, placed by
//! `eval/models/fetch`) on this machine's cores, prints:
//! - load time: the first load (which re-encodes Q4_1 tensors to Q8_0 into
//!   an empty cache) and a cached load;
//! - prompt tokens/s (a 512-token prompt) and generated tokens/s (128
//!   greedy tokens), for the re-encoded model and the file as shipped;
//! - the same two figures from llama.cpp on the same files and token ids,
//!   when `ONRECORD_YARDSTICK_PYTHON` names a Python that has the
//!   llama-cpp-python package (see `eval/bench/yardstick.py`), and the ratio
//!   of ours to it (target: at least 0.8 on both);
//! - the time to the first verified sentence for a demo question (retrieval,
//!   prompt, generation to the end of the first line, verification);
//! - with `--rewrite` as an argument: gold-page recall of retrieval on the
//!   demo questions with and without model-proposed queries;
//! - peak resident memory.

use onrecord::answer::{gather, rewrite_queries};
use onrecord::draft::{DraftRequest, ModelDraftConfig};
use onrecord::llm::local::LocalModel;
use onrecord::llm::{GenOptions, Generator};
use onrecord::retrieve::Index;
use onrecord::types::{ChunkId, Filters};
use onrecord::verify::{Draft, DraftCitation, DraftSentence, RulesJudge, Verdict, verify};
use std::collections::HashMap;
use std::path::Path;
use std::time::Instant;

#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

const PROMPT_TOKENS: usize = 512;
/// A drafting-sized prompt: the model drafter's default budget.
const LONG_PROMPT_TOKENS: usize = 1536;
const GEN_TOKENS: usize = 128;
const TARGET_RATIO: f64 = 0.8;

use onrecord::eval::peak_rss_mib;

fn rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmRSS:"))
                .and_then(|l| l.split_whitespace().nth(1)?.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Best of three runs: (prompt tokens/s, generated tokens/s).
fn speed(m: &LocalModel, ids: &[u32]) -> (f64, f64) {
    let mut best = (0.0f64, 0.0f64);
    for _ in 0..3 {
        let (p, g) = m.timing_run(ids, GEN_TOKENS).unwrap();
        best.0 = best.0.max(ids.len() as f64 / p);
        best.1 = best.1.max(GEN_TOKENS as f64 / g);
    }
    best
}

fn yardstick(python: &str, model: &Path, ids: &[u32]) -> Option<(f64, f64)> {
    let dir = tempfile::tempdir().ok()?;
    let ids_file = dir.path().join("ids.json");
    std::fs::write(&ids_file, serde_json::to_string(ids).ok()?).ok()?;
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/bench/yardstick.py");
    let threads = std::thread::available_parallelism().map_or(2, |n| n.get());
    let out = std::process::Command::new(python)
        .arg(script)
        .arg(model)
        .arg(&ids_file)
        .arg(GEN_TOKENS.to_string())
        .arg(threads.to_string())
        .output()
        .ok()?;
    if !out.status.success() {
        eprintln!("yardstick failed: {}", String::from_utf8_lossy(&out.stderr));
        return None;
    }
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).ok()?;
    Some((
        v["prompt_tokens_per_s"].as_f64()?,
        v["generated_tokens_per_s"].as_f64()?,
    ))
}

fn demo_index(work: &Path) -> Index {
    let source = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
    let release = work.join("release");
    let manifest = onrecord::demo::build(&source, &release).unwrap();
    let cfg = onrecord::ingest::IngestConfig {
        manifest: onrecord::manifest::Manifest::load(&manifest).unwrap(),
        ..Default::default()
    };
    let idx = work.join("index");
    onrecord::ingest::ingest_paths(&idx, std::slice::from_ref(&release), &cfg).unwrap();
    Index::open(&idx).unwrap()
}

/// Seconds from the question to the first verified sentence: retrieval,
/// the prompt, generation up to the end of the first line, and verifying it.
fn first_verified(
    index: &Index,
    model: &std::sync::Arc<LocalModel>,
    question: &str,
) -> (f64, Option<Verdict>, String) {
    let t0 = Instant::now();
    let retrieved = gather(index, question, &[], &Filters::default(), 10).unwrap();
    let query_terms = index.query_terms(question).unwrap();
    let req = DraftRequest {
        question,
        retrieved: &retrieved,
        query_terms: &query_terms,
        selection: None,
    };
    let cfg = ModelDraftConfig::default();
    let drafter = onrecord::draft::ModelDrafter::new(model.clone(), cfg.clone());
    let (excerpts, from, _) = drafter.excerpts(&req).unwrap();
    let messages = onrecord::prompt::answer_messages(question, &excerpts).unwrap();
    let chunks: HashMap<ChunkId, _> = retrieved
        .iter()
        .map(|r| (r.chunk.id, r.chunk.clone()))
        .collect();
    let opts = GenOptions {
        cite_excerpts: excerpts.iter().map(|e| e.text.clone()).collect(),
        ..cfg.generation
    };
    let mut text = String::new();
    let mut first: Option<(f64, Verdict, String)> = None;
    let t_start = t0;
    let _ = model.generate(&messages, &opts, &mut |piece| {
        text.push_str(piece);
        if first.is_some() || !text.contains('\n') {
            return;
        }
        // The first complete line that reads as a sentence.
        let complete = &text[..text.rfind('\n').unwrap_or(0)];
        let Some((line, s)) = complete.lines().find_map(|l| {
            let p = onrecord::prompt::parse_answer(l);
            p.sentences.into_iter().next().map(|s| (l.to_string(), s))
        }) else {
            return;
        };
        let draft = Draft {
            sentences: vec![DraftSentence {
                text: s.text.clone(),
                citations: s
                    .cites
                    .iter()
                    .filter(|c| (1..=excerpts.len()).contains(&c.excerpt))
                    .map(|c| DraftCitation {
                        chunk_id: retrieved[from[c.excerpt - 1]].chunk.id,
                        quote: c.quote.clone().unwrap_or_else(|| s.text.clone()),
                    })
                    .collect(),
            }],
            abstain: None,
            model: None,
            set_aside: vec![],
        };
        let v = verify(&draft, &chunks, &RulesJudge::default(), &|_, _| None);
        first = Some((
            t_start.elapsed().as_secs_f64(),
            v[0].verdict,
            line.to_string(),
        ));
    });
    match first {
        Some((t, v, l)) => (t, Some(v), l),
        None => (t0.elapsed().as_secs_f64(), None, text),
    }
}

#[derive(serde::Deserialize)]
struct Evidence {
    doc: String,
    page: u32,
}

#[derive(serde::Deserialize)]
struct Question {
    question: String,
    #[serde(default)]
    evidence: Vec<Evidence>,
    answerable: bool,
}

fn rewrite_recall(index: &Index, model: &LocalModel) {
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo/questions.jsonl"),
    )
    .unwrap();
    let qs: Vec<Question> = text
        .lines()
        .filter(|l| !l.trim().is_empty())
        .map(|l| serde_json::from_str(l).unwrap())
        .filter(|q: &Question| q.answerable)
        .collect();
    let (mut plain, mut rewritten, mut n_queries) = (0, 0, 0);
    let (mut cited_plain, mut cited_rewritten) = (0, 0);
    let fallback = onrecord::draft::Extractive::default();
    let cited = |a: &onrecord::answer::AnswerRecord, q: &Question| {
        a.supported().any(|s| {
            s.citations.iter().any(|c| {
                q.evidence
                    .iter()
                    .any(|e| e.doc == c.doc_id.0 && e.page == c.page)
            })
        })
    };
    let hit = |rs: &[onrecord::retrieve::Retrieved], q: &Question| {
        rs.iter().any(|r| {
            q.evidence.iter().any(|e| {
                e.doc == r.chunk.doc_id.0
                    && (r.chunk.span.start_page..=r.chunk.span.end_page).contains(&e.page)
            })
        })
    };
    let t0 = Instant::now();
    for q in &qs {
        let a = gather(index, &q.question, &[], &Filters::default(), 10).unwrap();
        let extra = rewrite_queries(model, &q.question).unwrap();
        n_queries += extra.len();
        let b = gather(index, &q.question, &extra, &Filters::default(), 10).unwrap();
        plain += hit(&a, q) as usize;
        rewritten += hit(&b, q) as usize;
        for (rewrite, count) in [
            (None, &mut cited_plain),
            (Some(model as &dyn Generator), &mut cited_rewritten),
        ] {
            let a = onrecord::answer::ask_with(
                index,
                &q.question,
                onrecord::answer::AskPlan {
                    filters: &Filters::default(),
                    k: 10,
                    drafter: &fallback,
                    drafter_settings: serde_json::Value::Null,
                    judge: &RulesJudge::default(),
                    fallback: None,
                    rewrite,
                    selector: None,
                },
            )
            .unwrap();
            *count += cited(&a, q) as usize;
        }
    }
    println!(
        "rewrite (demo, {} answerable questions, BM25, k=10): gold page retrieved {}/{} without, {}/{} with ({:.1} extra queries per question, {:.1} s per question)",
        qs.len(),
        plain,
        qs.len(),
        rewritten,
        qs.len(),
        n_queries as f64 / qs.len() as f64,
        t0.elapsed().as_secs_f64() / qs.len() as f64
    );
    println!(
        "rewrite, extractive answers: gold page cited {cited_plain}/{} without, {cited_rewritten}/{} with",
        qs.len(),
        qs.len()
    );
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let path = match onrecord::llm::resolve(&onrecord::llm::LlmChoice::Auto) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("generate bench: {e}");
            return;
        }
    };
    let threads = std::thread::available_parallelism().map_or(0, |n| n.get());
    println!("model: {} ({threads} threads)", path.display());
    let cache = tempfile::tempdir().unwrap();
    let t0 = Instant::now();
    let model = LocalModel::load(&path, Some(cache.path().to_path_buf())).unwrap();
    let first_load = t0.elapsed().as_secs_f64();
    let t0 = Instant::now();
    let model = {
        drop(model);
        std::sync::Arc::new(LocalModel::load(&path, Some(cache.path().to_path_buf())).unwrap())
    };
    let cached_load = t0.elapsed().as_secs_f64();
    let resident = rss_mib();
    let shipped = LocalModel::load(&path, None).unwrap();
    println!(
        "load: {first_load:.2} s first (re-encoding to Q8_0 included), {cached_load:.2} s from the cache, {:.2} s as shipped; resident after one load {resident:.0} MiB",
        shipped.load_secs
    );

    // A 512-token prompt from demo text, through the chat template.
    let work = tempfile::tempdir().unwrap();
    let index = demo_index(work.path());
    let q = onrecord::demo::SAMPLE_QUESTIONS[0];
    let retrieved = gather(&index, q, &[], &Filters::default(), 10).unwrap();
    let body: String = retrieved
        .iter()
        .map(|r| r.chunk.text.as_str())
        .collect::<Vec<_>>()
        .join("\n");
    let long = model
        .format
        .encode(
            &model
                .format
                .render(&[onrecord::llm::ChatMessage::user(body.repeat(3))])
                .unwrap(),
        )
        .unwrap();
    let long: Vec<u32> = long[..LONG_PROMPT_TOKENS.min(long.len())].to_vec();
    let ids: Vec<u32> = long[..PROMPT_TOKENS].to_vec();

    let (p8, g8) = speed(&model, &ids);
    let (p4, g4) = speed(&shipped, &ids);
    let (pl, gl) = speed(&model, &long);
    println!("candle, re-encoded Q8_0: prompt {p8:.0} tokens/s, generation {g8:.1} tokens/s");
    println!("candle, Q4_1 as shipped: prompt {p4:.0} tokens/s, generation {g4:.1} tokens/s");
    println!(
        "re-encoding speed-up: prompt {:.2}x, generation {:.2}x",
        p8 / p4,
        g8 / g4
    );
    println!(
        "candle, re-encoded Q8_0, {}-token prompt: prompt {pl:.0} tokens/s, generation {gl:.1} tokens/s",
        long.len()
    );

    match std::env::var("ONRECORD_YARDSTICK_PYTHON") {
        Ok(py) => {
            let q8 = std::fs::read_dir(cache.path())
                .unwrap()
                .filter_map(|e| e.ok().map(|e| e.path()))
                .find(|p| p.extension().is_some_and(|x| x == "gguf"));
            for (label, file, ours, prompt) in [
                ("Q8_0", q8.clone(), (p8, g8), &ids),
                ("Q4_1", Some(path.clone()), (p4, g4), &ids),
                ("Q8_0, long prompt", q8, (pl, gl), &long),
            ] {
                let Some(file) = file else { continue };
                match yardstick(&py, &file, prompt) {
                    Some((lp, lg)) => println!(
                        "llama.cpp {label}: prompt {lp:.0} tokens/s, generation {lg:.1} tokens/s; ours/theirs: prompt {:.2}, generation {:.2} (target {TARGET_RATIO})",
                        ours.0 / lp,
                        ours.1 / lg
                    ),
                    None => println!("llama.cpp {label}: yardstick did not run"),
                }
            }
        }
        Err(_) => println!(
            "llama.cpp: not measured (set ONRECORD_YARDSTICK_PYTHON to a Python with llama-cpp-python)"
        ),
    }

    for q in onrecord::demo::SAMPLE_QUESTIONS {
        let (t, v, line) = first_verified(&index, &model, q);
        println!(
            "first verified sentence: {t:.2} s ({}) for {q:?}: {line}",
            match v {
                Some(Verdict::Supported) => "supported",
                Some(Verdict::Struck) => "struck",
                None => "no complete sentence",
            }
        );
    }
    if args.iter().any(|a| a == "--rewrite") {
        rewrite_recall(&index, model.as_ref());
    }
    println!("peak RSS: {:.0} MiB", peak_rss_mib());
}
