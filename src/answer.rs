//! Ask: retrieve → draft → verify, and the versioned answer record that
//! `answer --json` prints and later tools replay.
//!
//! Answer record, schema version 1 (see `eval/answer-record.schema.json`):
//! `schema_version`, `onrecord_version`, `created_at`, `question`, `config`
//! (retriever, k, drafter, judge, filters, ...), `retrieved` (chunk ids with
//! content hashes, ranks and scores), `sentences` (each with `text`,
//! `verdict` = `supported` | `struck`, `reason`, `confidence` and
//! `citations`, each with `doc_id`, `title`, `page`, `quote`, offsets and
//! the page hash), `abstained`, `abstain_reason` and `caution`; when a
//! language model drafted, `draft` (the model's raw text, its costs, and —
//! if the answer fell back to the extractive drafter — the model's own
//! verdicts and the reason), with `--rewrite`, `queries`, and `timings`
//! (milliseconds per stage).
//!
//! invariant: no sentence reaches the answer without passing the verifier.
//! invariant: a fallback answer is marked as one, and the struck model
//! sentences it replaced stay in the record.

use crate::draft::{DraftRequest, Drafter, Extractive, ModelDraft};
use crate::error::Result;
use crate::llm::{GenOptions, Generator};
use crate::retrieve::{Index, Retrieved, RetrieverKind, SearchOptions};
use crate::select::{Selection, Selector, Vectors};
use crate::types::{ChunkId, Citation, DocId, Filters};
use crate::verify::{
    Draft, DraftCitation, DraftSentence, Judge, Verdict, VerifiedSentence, verify,
};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

pub const ANSWER_SCHEMA_VERSION: u32 = 1;

/// The caution shown with every answer.
pub const CAUTION: &str = "onrecord checks that each sentence is supported by the cited text. It does not establish that the documents are accurate, complete or authentic. Records may be wrong, forged, redacted or out of context. Check the original pages and apply legal review (defamation, privacy) before publication.";

/// How an answer was made, recorded with it.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct AskConfig {
    pub retriever: String,
    /// The embedding model behind dense or hybrid retrieval.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub embedder: Option<String>,
    pub k: usize,
    pub drafter: String,
    pub judge: String,
    #[serde(default)]
    pub filters: Filters,
    #[serde(default)]
    pub drafter_settings: serde_json::Value,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RetrievedRecord {
    pub chunk_id: ChunkId,
    pub doc_id: DocId,
    pub title: String,
    pub page: u32,
    pub end_page: u32,
    /// SHA-256 of the chunk text.
    pub hash: String,
    pub retriever: String,
    pub rank: usize,
    pub score: f32,
}

/// The versioned answer record.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct AnswerRecord {
    pub schema_version: u32,
    pub onrecord_version: String,
    pub created_at: String,
    pub question: String,
    pub config: AskConfig,
    pub retrieved: Vec<RetrievedRecord>,
    pub sentences: Vec<VerifiedSentence>,
    pub abstained: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub abstain_reason: Option<String>,
    /// What a language model drafted, when one did.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub draft: Option<DraftRecord>,
    /// Extra search queries a model proposed (`--rewrite`), fused with the question.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub queries: Vec<String>,
    /// How long each stage took.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub timings: Option<Timings>,
    /// How the selector scored the candidate sentences, and its decision.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub selection: Option<SelectionRecord>,
    /// Sentences the records support that do not answer this question
    /// (another year, a failed proposal, another numbered thing), each
    /// with its reason. Never part of the answer.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub off_question: Vec<VerifiedSentence>,
    /// When the answer is declined: the closest candidate sentences,
    /// quoted with their pages. They are not answers.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub closest: Vec<ClosestSentence>,
    pub caution: String,
}

/// The selector's part in an answer.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SelectionRecord {
    /// `semantic-v1` (embedding cosines and words) or `lexical-v1` (words
    /// only, when no embedding model is loaded).
    pub model: String,
    /// Candidate sentences scored.
    pub candidates: usize,
    /// The highest estimated probability that a candidate not set aside
    /// answers: an answer is given when it reaches the threshold.
    pub answer_probability: f32,
    /// The probability an answer needs.
    pub threshold: f32,
}

/// A candidate sentence shown with a declined answer: the record's own
/// words and page, and why it was not given as an answer.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ClosestSentence {
    pub text: String,
    /// Estimated probability that it answers the question.
    pub probability: f32,
    pub why_not: String,
    pub citations: Vec<Citation>,
}

/// Wall-clock milliseconds per stage of one answer. A model fallback's
/// second draft and verification count in `draft_ms` and `verify_ms`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Timings {
    /// Query rewriting (if any) and retrieval.
    pub retrieve_ms: f64,
    /// Scoring the candidate sentences (with their vectors).
    #[serde(default)]
    pub select_ms: f64,
    pub draft_ms: f64,
    pub verify_ms: f64,
    pub total_ms: f64,
}

/// A language model's draft as it was written and as the verifier judged it.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct DraftRecord {
    #[serde(flatten)]
    pub model: ModelDraft,
    /// Why the answer is the extractive drafter's instead of the model's.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fallback: Option<String>,
    /// The verdicts on the model's own sentences when the answer fell back
    /// (otherwise they are the answer's `sentences`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub verdicts: Vec<VerifiedSentence>,
}

impl AnswerRecord {
    pub fn supported(&self) -> impl Iterator<Item = &VerifiedSentence> {
        self.sentences
            .iter()
            .filter(|s| s.verdict == Verdict::Supported)
    }

    pub fn struck(&self) -> impl Iterator<Item = &VerifiedSentence> {
        self.sentences
            .iter()
            .filter(|s| s.verdict == Verdict::Struck)
    }
}

/// At most this many chunks of one document go to the drafter, so one long
/// record (or a pile of copies of one e-mail) cannot crowd out the others.
pub const MAX_CHUNKS_PER_DOC: usize = 3;

/// With hybrid retrieval, BM25's top this-many chunks always reach the
/// drafter, even when fusion ranks them lower.
pub const LEXICAL_FLOOR: usize = 8;

/// Keep rank order, at most `per_doc` chunks per document, `k` in all;
/// ranks are renumbered from 1.
pub fn diversify(hits: Vec<Retrieved>, k: usize, per_doc: usize) -> Vec<Retrieved> {
    let mut counts: HashMap<DocId, usize> = HashMap::new();
    let mut out = Vec::with_capacity(k);
    for mut h in hits {
        let n = counts.entry(h.chunk.doc_id.clone()).or_default();
        if *n >= per_doc {
            continue;
        }
        *n += 1;
        h.rank = out.len() + 1;
        out.push(h);
        if out.len() == k {
            break;
        }
    }
    out
}

/// Everything `ask_with` needs besides the index and the question.
pub struct AskPlan<'a> {
    pub filters: &'a Filters,
    pub k: usize,
    pub drafter: &'a dyn Drafter,
    pub drafter_settings: serde_json::Value,
    pub judge: &'a dyn Judge,
    /// When a model's draft has no supported sentence, answer with this
    /// drafter instead (and say so).
    pub fallback: Option<&'a dyn Drafter>,
    /// Ask this model for up to [`MAX_REWRITES`] extra search queries and fuse
    /// their results with the question's.
    pub rewrite: Option<&'a dyn Generator>,
    /// Scores the candidate sentences (default: the built-in weights).
    pub selector: Option<&'a Selector>,
}

/// Most extra queries `--rewrite` adds.
pub const MAX_REWRITES: usize = 3;

/// Run the whole chain for one question.
pub fn ask(
    index: &Index,
    question: &str,
    filters: &Filters,
    k: usize,
    drafter: &dyn Drafter,
    drafter_settings: serde_json::Value,
    judge: &dyn Judge,
) -> Result<AnswerRecord> {
    ask_with(
        index,
        question,
        AskPlan {
            filters,
            k,
            drafter,
            drafter_settings,
            judge,
            fallback: None,
            rewrite: None,
            selector: None,
        },
    )
}

/// Extra search queries for `question` from a model.
pub fn rewrite_queries(model: &dyn Generator, question: &str) -> Result<Vec<String>> {
    let messages = crate::prompt::rewrite_messages(question, MAX_REWRITES)?;
    let opts = GenOptions {
        max_tokens: 96,
        ..GenOptions::default()
    };
    let g = model.generate(&messages, &opts, &mut |_| {})?;
    Ok(crate::prompt::parse_queries(
        &g.text,
        question,
        MAX_REWRITES,
    ))
}

/// The chunks the drafter reads: the question's top `k` (at most
/// [`MAX_CHUNKS_PER_DOC`] per document), fused by reciprocal rank with the
/// results of any extra `queries`; with hybrid retrieval, BM25's own top
/// chunks for the question follow.
pub fn gather(
    index: &Index,
    question: &str,
    queries: &[String],
    filters: &Filters,
    k: usize,
) -> Result<Vec<Retrieved>> {
    let qv = match index.retriever() {
        RetrieverKind::Bm25 => None,
        _ => Some(index.embed_query(question)?),
    };
    gather_embedded(index, question, qv.as_deref(), queries, filters, k)
}

/// As [`gather`], with the question's vector already made (`None` only
/// when the index searches with BM25).
pub fn gather_embedded(
    index: &Index,
    question: &str,
    qv: Option<&[f32]>,
    queries: &[String],
    filters: &Filters,
    k: usize,
) -> Result<Vec<Retrieved>> {
    let hits = index.search_embedded(question, qv, filters, k * 3, &index.options)?;
    let hits = if queries.is_empty() {
        hits
    } else {
        let mut lists = vec![hits];
        for q in queries {
            lists.push(index.search(q, filters, k * 3)?);
        }
        let ids: Vec<Vec<u64>> = lists
            .iter()
            .map(|l| l.iter().map(|r| r.chunk.id.0).collect())
            .collect();
        let weighted: Vec<(f64, &[u64])> = ids.iter().map(|l| (1.0, l.as_slice())).collect();
        let mut by_id: HashMap<u64, Retrieved> = HashMap::new();
        for l in lists {
            for r in l {
                by_id.entry(r.chunk.id.0).or_insert(r);
            }
        }
        crate::fuse::rrf(&weighted, crate::fuse::RRF_K)
            .into_iter()
            .filter_map(|f| {
                let mut r = by_id.remove(&f.id)?;
                r.score = f.score as f32;
                r.retriever = "multi-query";
                Some(r)
            })
            .collect()
    };
    let mut retrieved = diversify(hits, k, MAX_CHUNKS_PER_DOC);
    if index.retriever() == RetrieverKind::Hybrid {
        // Fusion reorders; it must not hide what lexical search ranks at the
        // top. BM25's own top chunks that the fused list left out follow it,
        // marked as BM25's, so hybrid widens what the drafter may read.
        let opts = SearchOptions {
            retriever: Some(RetrieverKind::Bm25),
            ..index.options
        };
        let have: std::collections::HashSet<ChunkId> =
            retrieved.iter().map(|r| r.chunk.id).collect();
        for mut r in index.search_with(question, filters, LEXICAL_FLOOR, &opts)? {
            if !have.contains(&r.chunk.id) {
                r.rank = retrieved.len() + 1;
                retrieved.push(r);
            }
        }
    }
    Ok(retrieved)
}

/// Run the whole chain for one question, with the plan's options.
pub fn ask_with(index: &Index, question: &str, plan: AskPlan<'_>) -> Result<AnswerRecord> {
    let started = std::time::Instant::now();
    let ms = |t: std::time::Instant| t.elapsed().as_secs_f64() * 1000.0;
    let mut timings = Timings::default();
    let queries = match plan.rewrite {
        Some(m) => rewrite_queries(m, question)?,
        None => vec![],
    };
    // The question's vector serves dense retrieval and the selector alike.
    let semantic = index.has_dense();
    let qv = if semantic {
        Some(index.embed_query(question)?)
    } else {
        None
    };
    let retrieval_qv = qv
        .as_deref()
        .filter(|_| index.retriever() != RetrieverKind::Bm25);
    let retrieved = gather_embedded(
        index,
        question,
        retrieval_qv,
        &queries,
        plan.filters,
        plan.k,
    )?;
    let query_terms = index.query_terms(question)?;
    timings.retrieve_ms = ms(started);
    let t = std::time::Instant::now();
    let vectors = match qv {
        Some(q) => Some(selection_vectors(index, q, &retrieved)?),
        None => None,
    };
    let selection = plan.selector.unwrap_or(&Selector::default()).select(
        question,
        &retrieved,
        &query_terms,
        vectors.as_ref(),
    );
    timings.select_ms = ms(t);
    let req = DraftRequest {
        question,
        retrieved: &retrieved,
        query_terms: &query_terms,
        selection: Some(&selection),
    };
    let chunks: HashMap<ChunkId, _> = retrieved
        .iter()
        .map(|r| (r.chunk.id, r.chunk.clone()))
        .collect();
    let store = &index.store;
    let page_hash = |d: &DocId, p: u32| store.page(d, p).ok().flatten().map(|(_, h)| h);
    let t = std::time::Instant::now();
    let mut draft = plan.drafter.draft(&req)?;
    timings.draft_ms = ms(t);
    let t = std::time::Instant::now();
    let mut sentences = verify(&draft, &chunks, plan.judge, &page_hash);
    timings.verify_ms = ms(t);
    let mut drafter_name = plan.drafter.name();
    let mut draft_record = draft.model.take().map(|model| DraftRecord {
        model,
        fallback: None,
        verdicts: vec![],
    });
    // A model's supported sentence about another year, a failed proposal
    // or another numbered thing is set aside, as the extractive drafter's
    // candidates are.
    let mut off_question = set_aside_off_question(question, &mut sentences);
    let supported = |v: &[VerifiedSentence]| v.iter().any(|s| s.verdict == Verdict::Supported);
    if let (Some(rec), Some(fb)) = (draft_record.as_mut(), plan.fallback)
        && !supported(&sentences)
    {
        let why = if !off_question.is_empty() {
            "the model's supported sentences do not answer the question"
        } else if !sentences.is_empty() {
            "every sentence of the model's draft was struck by the verifier"
        } else if rec.model.said_no_answer {
            "the model found no answer in the excerpts"
        } else {
            "the model's draft had no sentence with a citation to check"
        };
        rec.fallback = Some(format!(
            "{why}; the answer below comes from the {} drafter instead, which quotes the records' own sentences",
            fb.name()
        ));
        rec.verdicts = std::mem::take(&mut sentences);
        rec.verdicts.append(&mut off_question);
        let t = std::time::Instant::now();
        draft = fb.draft(&req)?;
        timings.draft_ms += ms(t);
        let t = std::time::Instant::now();
        sentences = verify(&draft, &chunks, plan.judge, &page_hash);
        off_question = set_aside_off_question(question, &mut sentences);
        timings.verify_ms += ms(t);
        drafter_name = format!("{} (fallback from {})", fb.name(), drafter_name);
    }
    // The drafter's own set-aside sentences are verified like any other:
    // only a supported one is listed.
    let t = std::time::Instant::now();
    for (d, why) in std::mem::take(&mut draft.set_aside) {
        let one = Draft {
            sentences: vec![d],
            ..Draft::default()
        };
        for mut v in verify(&one, &chunks, plan.judge, &page_hash) {
            if v.verdict == Verdict::Supported {
                v.reason = Some(why.clone());
                off_question.push(v);
            }
        }
    }
    timings.verify_ms += ms(t);
    note_ocr(store, &mut sentences);
    note_ocr(store, &mut off_question);
    if let Some(rec) = draft_record.as_mut() {
        note_ocr(store, &mut rec.verdicts);
    }
    let any_supported = supported(&sentences);
    let abstain_reason = match (&draft.abstain, any_supported) {
        (Some(r), _) => Some(r.clone()),
        (None, false) if !off_question.is_empty() => Some(
            "the supported sentences found do not answer this question (see those set aside)"
                .into(),
        ),
        (None, false) => Some("every drafted sentence was struck by the verifier".into()),
        (None, true) => None,
    };
    let closest = if any_supported {
        Vec::new()
    } else {
        closest_sentences(
            &selection, &retrieved, &chunks, plan.judge, &page_hash, store,
        )
    };
    Ok(AnswerRecord {
        schema_version: ANSWER_SCHEMA_VERSION,
        onrecord_version: env!("CARGO_PKG_VERSION").into(),
        created_at: now_utc(),
        question: question.into(),
        config: AskConfig {
            retriever: index.retriever().name().into(),
            embedder: (index.retriever() != crate::retrieve::RetrieverKind::Bm25 || semantic)
                .then(|| index.embedder.as_ref().map(|e| e.id().to_owned()))
                .flatten(),
            k: plan.k,
            drafter: drafter_name,
            judge: plan.judge.name().into(),
            filters: plan.filters.clone(),
            drafter_settings: plan.drafter_settings,
        },
        retrieved: retrieved
            .iter()
            .map(|r| RetrievedRecord {
                chunk_id: r.chunk.id,
                doc_id: r.chunk.doc_id.clone(),
                title: r.chunk.title.clone(),
                page: r.chunk.span.start_page,
                end_page: r.chunk.span.end_page,
                hash: r.chunk.hash.clone(),
                retriever: r.retriever.into(),
                rank: r.rank,
                score: r.score,
            })
            .collect(),
        abstained: !any_supported,
        abstain_reason,
        draft: draft_record,
        queries,
        sentences,
        selection: Some(SelectionRecord {
            model: selection.model.clone(),
            candidates: selection.candidates.len(),
            answer_probability: selection.answer_probability(),
            threshold: selection.threshold,
        }),
        off_question,
        closest,
        timings: Some(Timings {
            total_ms: ms(started),
            ..timings
        }),
        caution: CAUTION.into(),
    })
}

/// Most candidate sentences shown with a declined answer.
pub const MAX_CLOSEST: usize = 3;

/// Moves supported sentences that do not answer `question` out of
/// `sentences`, each with the relevance check's reason.
fn set_aside_off_question(
    question: &str,
    sentences: &mut Vec<VerifiedSentence>,
) -> Vec<VerifiedSentence> {
    let mut out = Vec::new();
    sentences.retain(|s| {
        if s.verdict != Verdict::Supported {
            return true;
        }
        let date = s.citations.first().and_then(|c| c.date.as_deref());
        match crate::select::relevance::check(
            question,
            &s.text,
            crate::select::relevance::Context { date, after: None },
        ) {
            Some(why) => {
                let mut s = s.clone();
                s.reason = Some(why);
                out.push(s);
                false
            }
            None => true,
        }
    });
    out
}

/// The closest candidates of a declined answer, located on their pages by
/// the verifier (a candidate it would strike is not shown).
fn closest_sentences(
    selection: &Selection,
    retrieved: &[Retrieved],
    chunks: &HashMap<ChunkId, crate::store::StoredChunk>,
    judge: &dyn Judge,
    page_hash: &dyn Fn(&DocId, u32) -> Option<String>,
    store: &crate::store::Store,
) -> Vec<ClosestSentence> {
    let mut out = Vec::new();
    // Sentences set aside are listed with their reasons already.
    for c in selection
        .candidates
        .iter()
        .filter(|c| c.off_question.is_none())
    {
        if out.len() == MAX_CLOSEST {
            break;
        }
        let one = Draft {
            sentences: vec![DraftSentence {
                text: c.text.clone(),
                citations: vec![DraftCitation {
                    chunk_id: retrieved[c.chunk_idx].chunk.id,
                    quote: c.raw.clone(),
                }],
            }],
            ..Draft::default()
        };
        let mut v = verify(&one, chunks, judge, page_hash);
        note_ocr(store, &mut v);
        let Some(v) = v.pop().filter(|v| v.verdict == Verdict::Supported) else {
            continue;
        };
        let why_not = if c.probability < selection.threshold {
            format!(
                "{:.0}% likely to answer; an answer needs {:.0}%",
                c.probability * 100.0,
                selection.threshold * 100.0
            )
        } else {
            "likely enough, but the drafter did not use it".into()
        };
        out.push(ClosestSentence {
            text: c.text.clone(),
            probability: c.probability,
            why_not,
            citations: v.citations,
        });
    }
    out
}

/// The vectors the semantic selector reads for these chunks: the stored
/// vectors of their candidate sentences, titles and chunks. Any sentence
/// or title the store lacks (an index built before sentence vectors) is
/// embedded now; the store is not changed.
pub fn selection_vectors(
    index: &Index,
    question: Vec<f32>,
    retrieved: &[Retrieved],
) -> Result<Vectors> {
    let Some(e) = index.embedder.as_ref() else {
        return Err(crate::Error::Invalid(
            "the selector's vectors need an embedding model".into(),
        ));
    };
    let model = e.id().to_owned();
    let inputs = crate::select::inputs_of(
        retrieved
            .iter()
            .map(|r| (r.chunk.title.as_str(), r.chunk.text.as_str())),
    );
    let keys: Vec<String> = inputs
        .iter()
        .map(|t| crate::store::embedding_key(t))
        .collect();
    let mut texts = index.store.embeddings_by_key(&model, &keys)?;
    let missing: Vec<&str> = inputs
        .iter()
        .zip(&keys)
        .filter(|(_, k)| !texts.contains_key(*k))
        .map(|(t, _)| t.as_str())
        .collect();
    if !missing.is_empty() {
        tracing::info!(
            "{} sentence vectors not stored; embedding them now",
            missing.len()
        );
        for (t, v) in missing.iter().zip(e.embed(&missing)?) {
            texts.insert(crate::store::embedding_key(t), v);
        }
    }
    let ids: Vec<ChunkId> = retrieved.iter().map(|r| r.chunk.id).collect();
    let passages = index.store.chunk_vectors(&model, &ids)?;
    Ok(Vectors {
        question,
        texts,
        passages,
    })
}

/// Marks each citation whose page was read by OCR with the confidence of
/// the quoted words (across a page break, the words on both pages).
pub fn note_ocr(store: &crate::store::Store, sentences: &mut [VerifiedSentence]) {
    // Each cited page's OCR words, read once.
    let mut pages: HashMap<(DocId, u32), Option<crate::ocr::PageOcr>> = HashMap::new();
    for c in sentences.iter().flat_map(|s| &s.citations) {
        for p in [Some(c.page), c.end_page].into_iter().flatten() {
            pages
                .entry((c.doc_id.clone(), p))
                .or_insert_with(|| store.page_ocr(&c.doc_id, p).ok().flatten());
        }
    }
    let words = |d: &DocId, p: u32| {
        pages
            .get(&(d.clone(), p))
            .and_then(Option::as_ref)
            .map(|o| o.words.as_slice())
            .unwrap_or_default()
    };
    for c in sentences.iter_mut().flat_map(|s| &mut s.citations) {
        let hit: Vec<&crate::ocr::OcrWord> = match c.end_page {
            Some(e) if e != c.page => {
                crate::ocr::span_words(words(&c.doc_id, c.page), c.start_char, usize::MAX)
                    .chain(crate::ocr::span_words(words(&c.doc_id, e), 0, c.end_char))
                    .collect()
            }
            _ => {
                crate::ocr::span_words(words(&c.doc_id, c.page), c.start_char, c.end_char).collect()
            }
        };
        c.ocr = crate::ocr::confidence_of(hit);
    }
}

/// The default fallback for model drafters.
pub fn default_fallback() -> Extractive {
    Extractive::default()
}

/// Current time as an RFC 3339 UTC timestamp.
pub fn now_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0);
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    let (y, m, d) = civil_from_days(days);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        (rem % 3600) / 60,
        rem % 60
    )
}

/// Days since 1970-01-01 to a proleptic Gregorian date (H. Hinnant's
/// `civil_from_days` algorithm).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

/// Render an answer as a reporter reads it in a terminal: a ledger in
/// which every verified sentence is followed by the words that prove it
/// and where they are (`doc-id · p. N`), so claim and evidence are read
/// together. Sentences that are not answers, and struck ones, follow in
/// sections of their own, each with its reason.
pub fn render_text(a: &AnswerRecord) -> String {
    use std::fmt::Write;
    let mut out = String::new();
    let _ = writeln!(out, "Asked: {}", a.question);
    if !a.queries.is_empty() {
        let _ = writeln!(out, "Also looked for: {}", a.queries.join(" | "));
    }
    if let Some(fb) = a.draft.as_ref().and_then(|d| d.fallback.as_deref()) {
        let _ = writeln!(out, "\n{}", wrap(&format!("Note: {fb}."), 78));
    }
    if a.abstained {
        let _ = writeln!(
            out,
            "\n{}",
            wrap(
                &format!(
                    "Not answered: {}.",
                    a.abstain_reason
                        .as_deref()
                        .unwrap_or("the retrieved records do not answer this question")
                ),
                78
            )
        );
        if !a.closest.is_empty() {
            let _ = writeln!(
                out,
                "\nNEAREST IN THE RECORDS: not answers; read them yourself\n"
            );
            for c in &a.closest {
                let _ = writeln!(out, "   \u{201C}{}\u{201D}", c.text);
                if let Some(cit) = c.citations.first() {
                    let _ = writeln!(out, "      from    {}", whereabouts(cit));
                }
                let _ = writeln!(out, "      not     {}\n", c.why_not);
            }
        } else if !a.retrieved.is_empty() {
            let _ = writeln!(
                out,
                "\nNEAREST RECORDS: nothing quoted; read them yourself\n"
            );
            let mut seen = Vec::new();
            for r in a.retrieved.iter() {
                if seen.contains(&&r.doc_id) {
                    continue;
                }
                seen.push(&r.doc_id);
                let _ = writeln!(
                    out,
                    "   {} \u{00B7} p. {} \u{2014} {}",
                    r.doc_id, r.page, r.title
                );
                if seen.len() == 3 {
                    break;
                }
            }
        }
    } else {
        let held: Vec<&VerifiedSentence> = a.supported().collect();
        let _ = writeln!(
            out,
            "\nON THE RECORD: {}, above the words that prove it\n",
            match held.len() {
                1 => "1 sentence".to_string(),
                n => format!("{n} sentences, each"),
            }
        );
        for (i, s) in held.iter().enumerate() {
            let _ = writeln!(out, "{:>2}  {}", i + 1, s.text);
            for c in &s.citations {
                evidence_lines(&mut out, c);
            }
            let _ = writeln!(out);
        }
    }
    if !a.off_question.is_empty() {
        let _ = writeln!(
            out,
            "\nTRUE TO THE RECORDS, BUT NOT AN ANSWER TO THIS QUESTION ({})\n",
            a.off_question.len()
        );
        for s in &a.off_question {
            let _ = writeln!(out, "   \u{201C}{}\u{201D}", s.text);
            if let Some(cit) = s.citations.first() {
                let _ = writeln!(out, "      from    {}", whereabouts(cit));
            }
            let _ = writeln!(
                out,
                "      why     {}\n",
                s.reason.as_deref().unwrap_or("not about what was asked")
            );
        }
    }
    let mut struck: Vec<&VerifiedSentence> = a.struck().collect();
    if let Some(d) = &a.draft {
        struck.extend(d.verdicts.iter().filter(|s| s.verdict == Verdict::Struck));
    }
    if !struck.is_empty() {
        let _ = writeln!(
            out,
            "\nSTRUCK BY THE VERIFIER ({}): drafted, not proved, left out\n",
            struck.len()
        );
        for s in struck {
            let _ = writeln!(
                out,
                "   \u{2717} {}\n      why     {}\n",
                s.text,
                s.reason.as_deref().unwrap_or("not supported")
            );
        }
    }
    let _ = writeln!(out, "{}", wrap(&format!("Caution: {CAUTION}"), 78));
    // Sections end in a blank line and start after one: never two.
    while out.contains("\n\n\n") {
        out = out.replace("\n\n\n", "\n\n");
    }
    out
}

/// The evidence under a verified sentence: the page's words, where they
/// are, and any doubt about them (OCR, a corrected citation).
fn evidence_lines(out: &mut String, c: &Citation) {
    use std::fmt::Write;
    match &c.quoted_as {
        Some(q) => {
            let _ = writeln!(
                out,
                "    page reads \u{201C}{}\u{201D}{}",
                c.quote,
                if c.similarity < 1.0 {
                    format!(" (match {:.0}%)", c.similarity * 100.0)
                } else {
                    String::new()
                }
            );
            let _ = writeln!(out, "    quoted as  \u{201C}{q}\u{201D}");
        }
        None => {
            let _ = writeln!(out, "    proof   \u{201C}{}\u{201D}", c.quote);
        }
    }
    let _ = writeln!(out, "    from    {}", whereabouts(c));
    if c.corrected_from.is_some() {
        let _ = writeln!(
            out,
            "    note    the drafter cited another passage; the quote is here"
        );
    }
    if let Some(o) = &c.ocr {
        match o.warning() {
            Some(w) => {
                let _ = writeln!(out, "    ! {w}");
            }
            None => {
                let _ = writeln!(
                    out,
                    "    ocr     page read by OCR; confidence {:.0}% on this span",
                    o.confidence
                );
            }
        }
    }
}

/// `doc-id · p. N — title, organisation, date`: the short reference first,
/// so it can be copied, then what the document is.
fn whereabouts(c: &Citation) -> String {
    let mut s = format!(
        "{} \u{00B7} {} \u{2014} {}",
        c.doc_id,
        pages_label(c),
        c.title
    );
    if let Some(o) = &c.organisation {
        s.push_str(&format!(", {o}"));
    }
    if let Some(d) = &c.date {
        s.push_str(&format!(", {d}"));
    }
    s
}

/// "p. 3" or "pp. 3-4" for a citation.
fn pages_label(c: &Citation) -> String {
    match c.end_page {
        Some(e) if e != c.page => format!("pp. {}-{e}", c.page),
        _ => format!("p. {}", c.page),
    }
}

/// Greedy word wrap for terminal prose.
pub fn wrap(s: &str, width: usize) -> String {
    let mut out = String::new();
    let mut line = 0;
    for w in s.split_whitespace() {
        if line > 0 && line + 1 + w.chars().count() > width {
            out.push('\n');
            line = 0;
        } else if line > 0 {
            out.push(' ');
            line += 1;
        }
        out.push_str(w);
        line += w.chars().count();
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn civil_dates() {
        // Known points: the Unix epoch; 2000-02-29 is day 11016; 2024-12-31 is day 20088.
        assert_eq!(civil_from_days(0), (1970, 1, 1));
        assert_eq!(civil_from_days(11_016), (2000, 2, 29));
        assert_eq!(civil_from_days(20_088), (2024, 12, 31));
    }

    #[test]
    fn wrapping_keeps_words_whole() {
        let w = wrap("one two three four five six", 9);
        assert_eq!(w, "one two\nthree\nfour five\nsix");
    }
}
