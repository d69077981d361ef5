//! `eval run`: every question of a set under every configuration, side by
//! side, with retrieval, answer, abstention, citation, strike and latency
//! figures per configuration, and paired bootstrap intervals for the
//! difference between each pair of configurations.
//!
//! A configuration (TOML) names the retriever and its k, the drafter and
//! its model, the judge, and filters. Configurations that read the same
//! corpus share one index.
//!
//! invariant: each question's figures come from the same answer record
//! `answer` would print for it; nothing is scored that a reader would not see.
//! invariant: citation support is judged by a different judge from the one
//! that filtered the answer, or the report carries a warning.

use super::answers::{best_over, contains_answer, exact_match, f1};
use super::bootstrap::{self, Interval};
use super::metrics::{Qrels, ndcg_at, quantile, recall_at, rr_at};
use super::questions::{GoldPage, Question};
use crate::answer::{AnswerRecord, AskPlan, CAUTION, ask_with};
use crate::draft::{Drafter, Extractive, ExtractiveConfig, ModelDraftConfig, ModelDrafter};
use crate::error::{Error, Result};
use crate::retrieve::{Index, RetrieverKind, SearchOptions};
use crate::select::Selector;
use crate::types::Filters;
use crate::verify::{Evidence, Judge, JudgeKind, Verdict};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Version of the report (`eval run --json`, `report.json`); see
/// `eval/eval-report.schema.json`.
pub const EVAL_SCHEMA_VERSION: u32 = 1;

/// One configuration, as written in its TOML file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EvalConfig {
    pub name: String,
    #[serde(default)]
    pub retrieval: RetrievalSection,
    #[serde(default)]
    pub drafting: DraftingSection,
    #[serde(default)]
    pub verifying: VerifyingSection,
    /// Filters applied to every question (a question's own filters win).
    #[serde(default)]
    pub filters: Filters,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RetrievalSection {
    /// bm25, dense or hybrid.
    #[serde(default = "bm25")]
    pub retriever: String,
    /// How many passages each answer reads.
    #[serde(default = "ten", rename = "passages")]
    pub k: usize,
    /// Pseudo-relevance feedback (RM3) for the BM25 ranking.
    #[serde(default)]
    pub feedback: bool,
    /// Dense search by each chunk's best sentence as well.
    #[serde(default)]
    pub sentence_vectors: bool,
}

impl Default for RetrievalSection {
    fn default() -> Self {
        RetrievalSection {
            retriever: bm25(),
            k: ten(),
            feedback: false,
            sentence_vectors: false,
        }
    }
}

fn bm25() -> String {
    "bm25".into()
}

fn ten() -> usize {
    10
}

#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DraftingSection {
    /// extractive (default), local or remote.
    #[serde(default)]
    pub drafter: Option<String>,
    /// For local: a GGUF file, a folder or a fetched repository id (default:
    /// the default model). For remote: the model name the endpoint knows.
    #[serde(default)]
    pub model: Option<String>,
    /// For remote: the endpoint's base URL.
    #[serde(default)]
    pub url: Option<String>,
    /// For remote: the environment variable holding the API key.
    #[serde(default)]
    pub key_env: Option<String>,
    #[serde(default)]
    pub max_sentences: Option<usize>,
    #[serde(default)]
    pub min_score: Option<f32>,
    /// For model drafters: most tokens generated.
    #[serde(default)]
    pub max_tokens: Option<usize>,
    /// For model drafters: what the model reads, `selected` (the
    /// selector's likeliest sentences with their neighbours; the default)
    /// or `passages` (whole retrieved passages).
    #[serde(default)]
    pub excerpts: Option<String>,
}

#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VerifyingSection {
    /// The judge that filters the answer.
    #[serde(default)]
    pub judge: JudgeKind,
    /// The judge that scores citation support (ALCE); default: the other one.
    #[serde(default)]
    pub citation_judge: Option<JudgeKind>,
}

impl EvalConfig {
    /// Read and check a configuration file.
    pub fn read(path: &Path) -> Result<EvalConfig> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let c: EvalConfig = toml::from_str(&text).map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: e
                .span()
                .map(|s| text[..s.start].matches('\n').count() + 1)
                .unwrap_or(0),
            message: e.message().to_string(),
        })?;
        let bad = |m: String| Error::BadInput {
            path: path.to_path_buf(),
            line: 0,
            message: m,
        };
        c.retriever_kind().map_err(bad)?;
        if c.retrieval.k == 0 {
            return Err(bad("retrieval.passages must be at least 1".into()));
        }
        match c.drafting.drafter.as_deref().unwrap_or("extractive") {
            "extractive" | "local" => {}
            "remote" if c.drafting.url.is_some() && c.drafting.model.is_some() => {}
            "remote" => {
                return Err(bad(
                    "a remote drafter needs drafting.url and drafting.model".into(),
                ));
            }
            other => {
                return Err(bad(format!(
                    "drafting.drafter `{other}` is not one of extractive, local, remote"
                )));
            }
        }
        for d in [&c.filters.from, &c.filters.to].into_iter().flatten() {
            crate::types::check_date(d).map_err(bad)?;
        }
        Ok(c)
    }

    pub fn retriever_kind(&self) -> std::result::Result<RetrieverKind, String> {
        match self.retrieval.retriever.as_str() {
            "bm25" => Ok(RetrieverKind::Bm25),
            "dense" => Ok(RetrieverKind::Dense),
            "hybrid" => Ok(RetrieverKind::Hybrid),
            other => Err(format!(
                "retrieval.retriever `{other}` is not one of bm25, dense, hybrid"
            )),
        }
    }

    /// The judge that scores citations, and whether it is the filtering one.
    pub fn citation_judge(&self) -> (JudgeKind, bool) {
        let j = self
            .verifying
            .citation_judge
            .unwrap_or(match self.verifying.judge {
                JudgeKind::Rules => JudgeKind::Learned,
                JudgeKind::Learned => JudgeKind::Rules,
            });
        (j, j == self.verifying.judge)
    }
}

/// A cited or retrieved page.
pub type PageRef = GoldPage;

/// One sentence of an answer, as the report shows it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SentenceOut {
    pub text: String,
    pub verdict: Verdict,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    pub pages: Vec<PageRef>,
}

/// Per-question figures; a figure is absent when it does not apply (no
/// gold evidence, no gold answer, not answered).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct QuestionScores {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub page_recall: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub page_mrr10: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub page_ndcg10: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub doc_recall: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub doc_mrr10: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub doc_ndcg10: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub exact_match: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub f1: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub contained: Option<f64>,
    /// Gold pages: share of cited pages that are gold.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub citation_precision: Option<f64>,
    /// Gold pages: share of gold pages cited.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub citation_recall: Option<f64>,
    /// ALCE: share of citations that are relevant to their sentence.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub alce_precision: Option<f64>,
    /// ALCE: share of sentences their citations support together.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub alce_recall: Option<f64>,
}

/// One question under one configuration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct QuestionRun {
    pub id: String,
    pub answerable: bool,
    pub abstained: bool,
    /// The verified sentences, joined.
    pub answer: String,
    pub sentences: Vec<SentenceOut>,
    /// Retrieved pages, best first, each once.
    pub retrieved_pages: Vec<PageRef>,
    pub scores: QuestionScores,
    pub drafted: usize,
    pub struck: usize,
    pub timings: crate::answer::Timings,
    pub generated_tokens: usize,
}

/// Latency of one stage over the questions, in milliseconds.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Spread {
    pub p50: f64,
    pub p95: f64,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Latency {
    pub retrieve: Spread,
    pub draft: Spread,
    pub verify: Spread,
    pub total: Spread,
    pub generated_tokens: usize,
}

/// All questions under one configuration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConfigRun {
    pub name: String,
    pub config: EvalConfig,
    /// The configuration file.
    pub file: String,
    /// The judge that scored citations.
    pub citation_judge: String,
    pub headline: BTreeMap<String, f64>,
    /// The headline metrics of each group of questions, when the set has
    /// more than one: questions are grouped by the letters their ids start
    /// with (the demo's `r` questions are worded as a reporter words them,
    /// its `n` questions are near misses the records do not answer).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub groups: BTreeMap<String, Group>,
    pub latency: Latency,
    /// How many struck sentences gave each kind of reason.
    pub strike_reasons: BTreeMap<String, usize>,
    pub questions: Vec<QuestionRun>,
}

/// One group of questions' figures.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Group {
    pub questions: usize,
    pub headline: BTreeMap<String, f64>,
}

/// The group of a question id: the letters it starts with (`r12` → `r`).
pub fn group_of(id: &str) -> &str {
    let end = id
        .char_indices()
        .find(|(_, c)| !c.is_ascii_alphabetic())
        .map_or(id.len(), |(i, _)| i);
    &id[..end]
}

/// Headline metrics per group, or nothing when there is only one group.
pub fn groups(runs: &[QuestionRun]) -> BTreeMap<String, Group> {
    let mut by: BTreeMap<String, Vec<&QuestionRun>> = BTreeMap::new();
    for r in runs {
        by.entry(group_of(&r.id).to_string()).or_default().push(r);
    }
    if by.len() < 2 {
        return BTreeMap::new();
    }
    by.into_iter()
        .map(|(g, qs)| {
            (
                g,
                Group {
                    questions: qs.len(),
                    headline: headline(&qs),
                },
            )
        })
        .collect()
}

/// A configuration that could not run, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Skipped {
    pub name: String,
    pub file: String,
    pub reason: String,
}

/// The difference B − A in one metric.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MetricDiff {
    pub metric: String,
    pub a: f64,
    pub b: f64,
    #[serde(flatten)]
    pub interval: Interval,
    /// The 95% interval leaves out zero.
    pub beyond_noise: bool,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Comparison {
    pub a: String,
    pub b: String,
    pub metrics: Vec<MetricDiff>,
}

/// The whole run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvalReport {
    pub schema_version: u32,
    pub onrecord_version: String,
    pub created_at: String,
    pub question_set: String,
    pub corpus: String,
    pub questions: Vec<Question>,
    pub configs: Vec<ConfigRun>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub skipped: Vec<Skipped>,
    pub comparisons: Vec<Comparison>,
    pub seed: u64,
    pub resamples: usize,
    pub warnings: Vec<String>,
    pub caution: String,
}

/// The headline metrics: key, label, and what they are averaged over.
pub const HEADLINE: &[(&str, &str)] = &[
    ("page_recall@k", "page recall@k (questions with gold pages)"),
    ("page_mrr@10", "page MRR@10"),
    ("page_ndcg@10", "page nDCG@10"),
    ("doc_recall@k", "document recall@k"),
    ("doc_mrr@10", "document MRR@10"),
    ("doc_ndcg@10", "document nDCG@10"),
    (
        "exact_match",
        "exact match (SQuAD v1.1; answerable questions with gold answers)",
    ),
    ("f1", "token F1 (SQuAD v1.1)"),
    ("answer_contained", "gold answer in a verified sentence"),
    ("answered_rate", "answered (answerable questions)"),
    (
        "abstain_precision",
        "abstention precision (unanswerable among abstentions)",
    ),
    (
        "abstain_recall",
        "abstention recall (unanswerable questions declined)",
    ),
    (
        "citation_precision",
        "citation precision against gold pages",
    ),
    ("citation_recall", "citation recall against gold pages"),
    (
        "alce_citation_precision",
        "ALCE citation precision (second judge)",
    ),
    (
        "alce_citation_recall",
        "ALCE citation recall (second judge)",
    ),
    ("strike_rate", "share of drafted sentences struck"),
];

/// Headline metrics where lower is better.
pub fn lower_is_better(metric: &str) -> bool {
    metric == "strike_rate"
}

fn mean(xs: impl Iterator<Item = f64>) -> Option<f64> {
    let (mut n, mut sum) = (0usize, 0.0);
    for x in xs {
        n += 1;
        sum += x;
    }
    (n > 0).then(|| sum / n as f64)
}

/// The headline metrics over some questions (repeats allowed, as a
/// bootstrap draw has them). A metric with no question it applies to is
/// left out.
pub fn headline(qs: &[&QuestionRun]) -> BTreeMap<String, f64> {
    let mut h = BTreeMap::new();
    let mut put = |k: &str, v: Option<f64>| {
        if let Some(v) = v {
            h.insert(k.to_string(), v);
        }
    };
    let s = |f: fn(&QuestionScores) -> Option<f64>| mean(qs.iter().filter_map(|q| f(&q.scores)));
    put("page_recall@k", s(|x| x.page_recall));
    put("page_mrr@10", s(|x| x.page_mrr10));
    put("page_ndcg@10", s(|x| x.page_ndcg10));
    put("doc_recall@k", s(|x| x.doc_recall));
    put("doc_mrr@10", s(|x| x.doc_mrr10));
    put("doc_ndcg@10", s(|x| x.doc_ndcg10));
    put("exact_match", s(|x| x.exact_match));
    put("f1", s(|x| x.f1));
    put("answer_contained", s(|x| x.contained));
    put(
        "answered_rate",
        mean(
            qs.iter()
                .filter(|q| q.answerable)
                .map(|q| f64::from(u8::from(!q.abstained))),
        ),
    );
    let abstained = qs.iter().filter(|q| q.abstained).count();
    let right = qs.iter().filter(|q| q.abstained && !q.answerable).count();
    let unanswerable = qs.iter().filter(|q| !q.answerable).count();
    put(
        "abstain_precision",
        (abstained > 0).then(|| right as f64 / abstained as f64),
    );
    put(
        "abstain_recall",
        (unanswerable > 0).then(|| right as f64 / unanswerable as f64),
    );
    put("citation_precision", s(|x| x.citation_precision));
    put("citation_recall", s(|x| x.citation_recall));
    put("alce_citation_precision", s(|x| x.alce_precision));
    put("alce_citation_recall", s(|x| x.alce_recall));
    let drafted: usize = qs.iter().map(|q| q.drafted).sum();
    let struck: usize = qs.iter().map(|q| q.struck).sum();
    put(
        "strike_rate",
        (drafted > 0).then(|| struck as f64 / drafted as f64),
    );
    h
}

/// A short name for the kind of a strike reason: the words before the
/// colon, or the opening words before a page number or a quotation.
pub fn reason_kind(reason: &str) -> String {
    if let Some((head, _)) = reason.split_once(':')
        && head.len() <= 40
    {
        return head.trim().to_string();
    }
    let mut words = Vec::new();
    for w in reason.split_whitespace() {
        let stop = w
            .chars()
            .any(|c| c.is_ascii_digit() || "\u{201C}\"(".contains(c))
            || (words.len() >= 2 && matches!(w, "on" | "of" | "in" | "which" | "because"));
        if stop || words.len() == 6 {
            break;
        }
        words.push(w.trim_end_matches(','));
    }
    words.join(" ")
}

/// Pages of a citation (start to end).
fn cited_pages(c: &crate::types::Citation) -> Vec<PageRef> {
    (c.page..=c.end_page.unwrap_or(c.page))
        .map(|p| PageRef {
            doc: c.doc_id.0.clone(),
            page: p,
        })
        .collect()
}

fn page_key(p: &PageRef) -> String {
    format!("{}#{}", p.doc, p.page)
}

/// Retrieved pages and documents, best first, each once. A passage that
/// runs over a page break puts both pages in.
pub fn ranked(retrieved: &[crate::answer::RetrievedRecord]) -> (Vec<PageRef>, Vec<String>) {
    let mut pages: Vec<PageRef> = Vec::new();
    let mut docs: Vec<String> = Vec::new();
    for r in retrieved {
        for p in r.page..=r.end_page {
            let pr = PageRef {
                doc: r.doc_id.0.clone(),
                page: p,
            };
            if !pages.contains(&pr) {
                pages.push(pr);
            }
        }
        if !docs.contains(&r.doc_id.0) {
            docs.push(r.doc_id.0.clone());
        }
    }
    (pages, docs)
}

/// Page- and document-level recall@k, MRR@10 and nDCG@10 (binary
/// relevance: the gold pages, and their documents).
pub fn retrieval_scores(
    sc: &mut QuestionScores,
    pages: &[PageRef],
    docs: &[String],
    gold: &[GoldPage],
    k: usize,
) {
    if gold.is_empty() {
        return;
    }
    let page_qrels: Qrels = gold.iter().map(|e| (page_key(e), 1)).collect();
    let doc_qrels: Qrels = gold.iter().map(|e| (e.doc.clone(), 1)).collect();
    let ranked_pages: Vec<String> = pages.iter().map(page_key).collect();
    sc.page_recall = Some(recall_at(&ranked_pages, &page_qrels, k));
    sc.page_mrr10 = Some(rr_at(&ranked_pages, &page_qrels, 10));
    sc.page_ndcg10 = Some(ndcg_at(&ranked_pages, &page_qrels, 10));
    sc.doc_recall = Some(recall_at(docs, &doc_qrels, k));
    sc.doc_mrr10 = Some(rr_at(docs, &doc_qrels, 10));
    sc.doc_ndcg10 = Some(ndcg_at(docs, &doc_qrels, 10));
}

/// Score one answer against its question.
pub fn score(q: &Question, a: &AnswerRecord, k: usize, citation_judge: &dyn Judge) -> QuestionRun {
    let supported: Vec<&crate::verify::VerifiedSentence> = a.supported().collect();
    let answer = supported
        .iter()
        .map(|s| s.text.as_str())
        .collect::<Vec<_>>()
        .join(" ");
    let (pages, docs) = ranked(&a.retrieved);
    let mut sc = QuestionScores::default();
    retrieval_scores(&mut sc, &pages, &docs, &q.evidence, k);
    if q.answerable && !q.answers.is_empty() {
        sc.exact_match = Some(best_over(exact_match, &answer, &q.answers));
        sc.f1 = Some(best_over(f1, &answer, &q.answers));
        sc.contained = Some(f64::from(u8::from(
            supported
                .iter()
                .any(|s| contains_answer(&s.text, &q.answers)),
        )));
    }
    if !supported.is_empty() {
        if !q.evidence.is_empty() {
            let gold: BTreeSet<String> = q.evidence.iter().map(page_key).collect();
            let cited: BTreeSet<String> = supported
                .iter()
                .flat_map(|s| s.citations.iter().flat_map(cited_pages))
                .map(|p| page_key(&p))
                .collect();
            if !cited.is_empty() {
                sc.citation_precision =
                    Some(cited.intersection(&gold).count() as f64 / cited.len() as f64);
            }
            sc.citation_recall = Some(cited.intersection(&gold).count() as f64 / gold.len() as f64);
        }
        let (recall, precision) = alce(&supported, citation_judge);
        sc.alce_recall = Some(recall);
        sc.alce_precision = precision;
    }
    let mut drafted = a.sentences.len();
    let mut struck = a.struck().count();
    if let Some(d) = &a.draft {
        drafted += d.verdicts.len();
        struck += d
            .verdicts
            .iter()
            .filter(|s| s.verdict == Verdict::Struck)
            .count();
    }
    let out_sentences = a
        .sentences
        .iter()
        .chain(a.draft.iter().flat_map(|d| d.verdicts.iter()))
        .map(|s| SentenceOut {
            text: s.text.clone(),
            verdict: s.verdict,
            reason: s.reason.clone(),
            pages: s.citations.iter().flat_map(cited_pages).collect(),
        })
        .collect();
    QuestionRun {
        id: q.id.clone(),
        answerable: q.answerable,
        abstained: a.abstained,
        answer,
        sentences: out_sentences,
        retrieved_pages: pages,
        scores: sc,
        drafted,
        struck,
        timings: a.timings.unwrap_or_default(),
        generated_tokens: a
            .draft
            .as_ref()
            .map(|d| d.model.generated_tokens)
            .unwrap_or(0),
    }
}

/// ALCE citation recall and precision (Gao et al. 2023, "Enabling Large
/// Language Models to Generate Text with Citations", section 3): a
/// sentence counts toward recall when its citations together support it;
/// a citation is irrelevant when it alone does not support its sentence
/// and removing it does not change whether the rest do. The judge stands
/// in for ALCE's NLI model. Precision is `None` when there are no
/// citations.
pub fn alce(
    sentences: &[&crate::verify::VerifiedSentence],
    judge: &dyn Judge,
) -> (f64, Option<f64>) {
    let mut supported = 0usize;
    let (mut relevant, mut total) = (0usize, 0usize);
    for s in sentences {
        let ev: Vec<Evidence<'_>> = s
            .citations
            .iter()
            .map(|c| Evidence {
                text: &c.quote,
                page: Some(c.page),
            })
            .collect();
        let joint = !ev.is_empty() && judge.judge(&s.text, &ev).supported;
        if joint {
            supported += 1;
        }
        for i in 0..ev.len() {
            total += 1;
            let alone = judge.judge(&s.text, &ev[i..=i]).supported;
            let needed = joint && {
                let rest: Vec<Evidence<'_>> = ev
                    .iter()
                    .enumerate()
                    .filter(|(j, _)| *j != i)
                    .map(|(_, e)| *e)
                    .collect();
                rest.is_empty() || !judge.judge(&s.text, &rest).supported
            };
            if alone || needed {
                relevant += 1;
            }
        }
    }
    let recall = if sentences.is_empty() {
        0.0
    } else {
        supported as f64 / sentences.len() as f64
    };
    (recall, (total > 0).then(|| relevant as f64 / total as f64))
}

/// A configuration ready to run: its drafter and judges.
pub struct Prepared {
    pub config: EvalConfig,
    pub file: String,
    pub drafter: Box<dyn Drafter>,
    pub settings: serde_json::Value,
    pub fallback: Option<Extractive>,
    /// Scores the candidate sentences, with the configuration's `min_score`.
    pub selector: Selector,
    pub judge: Box<dyn Judge>,
    pub citation_judge: Box<dyn Judge>,
}

/// Build a configuration's drafter and judges.
pub fn prepare(config: EvalConfig, file: String) -> Result<Prepared> {
    let mut ext = ExtractiveConfig::default();
    if let Some(n) = config.drafting.max_sentences {
        ext.max_sentences = n;
    }
    if let Some(p) = config.drafting.min_score
        && !(0.0..=1.0).contains(&p)
    {
        return Err(Error::Invalid(format!(
            "configuration `{}`: min_score is a probability, from 0 to 1 (got {p})",
            config.name
        )));
    }
    let selector = Selector {
        min_probability: config.drafting.min_score,
        ..Selector::default()
    };
    let kind = config.drafting.drafter.as_deref().unwrap_or("extractive");
    let (drafter, settings, fallback): (Box<dyn Drafter>, serde_json::Value, _) = match kind {
        "extractive" => (
            Box::new(Extractive::new(ext)),
            serde_json::to_value(ext).unwrap_or_default(),
            None,
        ),
        _ => {
            let model: Arc<dyn crate::llm::Generator> = if kind == "remote" {
                let mut rc = crate::llm::remote::RemoteConfig::new(
                    config.drafting.url.clone().unwrap_or_default(),
                    config.drafting.model.clone().unwrap_or_default(),
                );
                if let Some(k) = &config.drafting.key_env {
                    rc.key_env = k.clone();
                }
                rc.stream = false;
                Arc::new(crate::llm::remote::RemoteModel::new(rc)?)
            } else {
                let choice: crate::llm::LlmChoice = config
                    .drafting
                    .model
                    .as_deref()
                    .unwrap_or("auto")
                    .parse()
                    .expect("infallible");
                let path = crate::llm::resolve(&choice)?;
                Arc::new(crate::llm::local::LocalModel::load(
                    &path,
                    Some(crate::llm::reencode_cache_dir()),
                )?)
            };
            let mut mc = ModelDraftConfig::default();
            if let Some(t) = config.drafting.max_tokens {
                mc.generation.max_tokens = t;
            }
            mc.selected_excerpts = match config.drafting.excerpts.as_deref() {
                None | Some("selected") => true,
                Some("passages") => false,
                Some(other) => {
                    return Err(Error::Invalid(format!(
                        "configuration `{}`: excerpts must be `selected` or `passages`, not `{other}`",
                        config.name
                    )));
                }
            };
            let settings = serde_json::to_value(&mc).unwrap_or_default();
            (
                Box::new(ModelDrafter::new(model, mc)),
                settings,
                Some(Extractive::new(ext)),
            )
        }
    };
    let (cj, _) = config.citation_judge();
    Ok(Prepared {
        judge: config.verifying.judge.build(),
        citation_judge: cj.build(),
        config,
        file,
        drafter,
        settings,
        fallback,
        selector,
    })
}

/// Run every question under one configuration on `index`.
pub fn run_config(
    index: &mut Index,
    p: &Prepared,
    questions: &[Question],
    mut on_question: impl FnMut(),
) -> Result<ConfigRun> {
    let kind = p.config.retriever_kind().map_err(Error::Invalid)?;
    index.options = SearchOptions {
        retriever: Some(kind),
        feedback: p
            .config
            .retrieval
            .feedback
            .then(crate::feedback::Feedback::default),
        sentences: p.config.retrieval.sentence_vectors,
        ..index.options
    };
    let k = p.config.retrieval.k;
    let mut runs = Vec::with_capacity(questions.len());
    for q in questions {
        let mut filters = p.config.filters.clone();
        let own = &q.filters;
        if own.from.is_some() {
            filters.from.clone_from(&own.from);
        }
        if own.to.is_some() {
            filters.to.clone_from(&own.to);
        }
        if own.org.is_some() {
            filters.org.clone_from(&own.org);
        }
        if !own.docs.is_empty() {
            filters.docs.clone_from(&own.docs);
        }
        let a = ask_with(
            index,
            &q.question,
            AskPlan {
                filters: &filters,
                k,
                drafter: p.drafter.as_ref(),
                drafter_settings: p.settings.clone(),
                judge: p.judge.as_ref(),
                fallback: p.fallback.as_ref().map(|f| f as &dyn Drafter),
                rewrite: None,
                selector: Some(&p.selector),
            },
        )
        .map_err(|e| {
            Error::Invalid(format!(
                "configuration `{}`, question `{}`: {e}",
                p.config.name, q.id
            ))
        })?;
        runs.push(score(q, &a, k, p.citation_judge.as_ref()));
        on_question();
    }
    let refs: Vec<&QuestionRun> = runs.iter().collect();
    let mut strike_reasons = BTreeMap::new();
    for r in &runs {
        for s in r.sentences.iter().filter(|s| s.verdict == Verdict::Struck) {
            *strike_reasons
                .entry(reason_kind(s.reason.as_deref().unwrap_or("not supported")))
                .or_default() += 1;
        }
    }
    let spread = |f: fn(&crate::answer::Timings) -> f64| {
        let xs: Vec<f64> = runs.iter().map(|r| f(&r.timings)).collect();
        Spread {
            p50: quantile(&xs, 0.5),
            p95: quantile(&xs, 0.95),
        }
    };
    Ok(ConfigRun {
        name: p.config.name.clone(),
        config: p.config.clone(),
        file: p.file.clone(),
        citation_judge: p.citation_judge.name().into(),
        headline: headline(&refs),
        groups: groups(&runs),
        latency: Latency {
            retrieve: spread(|t| t.retrieve_ms),
            draft: spread(|t| t.draft_ms),
            verify: spread(|t| t.verify_ms),
            total: spread(|t| t.total_ms),
            generated_tokens: runs.iter().map(|r| r.generated_tokens).sum(),
        },
        strike_reasons,
        questions: runs,
    })
}

/// Paired bootstrap intervals for every headline metric, B − A.
pub fn compare(a: &ConfigRun, b: &ConfigRun, resamples: usize, seed: u64) -> Comparison {
    let n = a.questions.len().min(b.questions.len());
    // Both configurations' headline figures once per draw, for every metric.
    let stat = |idx: &[usize]| {
        let qa: Vec<&QuestionRun> = idx.iter().map(|&i| &a.questions[i]).collect();
        let qb: Vec<&QuestionRun> = idx.iter().map(|&i| &b.questions[i]).collect();
        let (ha, hb) = (headline(&qa), headline(&qb));
        HEADLINE
            .iter()
            .map(|(key, _)| Some((*ha.get(*key)?, *hb.get(*key)?)))
            .collect()
    };
    let intervals = bootstrap::paired_many(n, resamples, seed, HEADLINE.len(), stat);
    let metrics = HEADLINE
        .iter()
        .zip(intervals)
        .filter_map(|((key, _), interval)| {
            let interval = interval?;
            Some(MetricDiff {
                metric: key.to_string(),
                a: a.headline.get(*key).copied().unwrap_or_default(),
                b: b.headline.get(*key).copied().unwrap_or_default(),
                beyond_noise: interval.excludes_zero(),
                interval,
            })
        })
        .collect();
    Comparison {
        a: a.name.clone(),
        b: b.name.clone(),
        metrics,
    }
}

/// Where the configurations of a run come from, and the run's settings.
pub struct RunPlan<'a> {
    pub question_set: String,
    pub corpus: String,
    pub questions: &'a [Question],
    pub resamples: usize,
    pub seed: u64,
    pub progress: bool,
}

/// Run the configurations on one index and assemble the report.
pub fn run(
    index: &mut Index,
    configs: Vec<Prepared>,
    skipped: Vec<Skipped>,
    plan: RunPlan<'_>,
) -> Result<EvalReport> {
    let mut warnings = Vec::new();
    let total = (configs.len() * plan.questions.len()) as u64;
    let bar = if plan.progress {
        let b = indicatif::ProgressBar::new(total);
        b.set_style(
            indicatif::ProgressStyle::with_template(
                "{spinner} [{elapsed_precise}] {bar:30} {pos}/{len} answers ({per_sec}, ETA {eta}) {wide_msg}",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        b
    } else {
        indicatif::ProgressBar::hidden()
    };
    let mut runs = Vec::new();
    for p in &configs {
        let (_, same) = p.config.citation_judge();
        if same {
            warnings.push(format!(
                "configuration `{}`: citation support is scored by the same judge ({}) that filtered \
                 the answer, so ALCE citation figures flatter it; set verifying.citation_judge to the other judge",
                p.config.name,
                p.judge.name()
            ));
        }
        bar.set_message(p.config.name.clone());
        runs.push(run_config(index, p, plan.questions, || bar.inc(1))?);
    }
    bar.finish_and_clear();
    let mut comparisons = Vec::new();
    for i in 0..runs.len() {
        for j in i + 1..runs.len() {
            comparisons.push(compare(&runs[i], &runs[j], plan.resamples, plan.seed));
        }
    }
    if plan.questions.len() < 30 {
        warnings.push(format!(
            "only {} questions: intervals are wide and differences rarely clear the noise",
            plan.questions.len()
        ));
    }
    Ok(EvalReport {
        schema_version: EVAL_SCHEMA_VERSION,
        onrecord_version: env!("CARGO_PKG_VERSION").into(),
        created_at: crate::answer::now_utc(),
        question_set: plan.question_set,
        corpus: plan.corpus,
        questions: plan.questions.to_vec(),
        configs: runs,
        skipped,
        comparisons,
        seed: plan.seed,
        resamples: plan.resamples,
        warnings,
        caution: CAUTION.into(),
    })
}

/// The configuration files under `dir` (`*.toml`, sorted).
pub fn configs_in(dir: &Path) -> Result<Vec<PathBuf>> {
    let mut out: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| Error::io(dir, e))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .collect();
    out.sort();
    Ok(out)
}

/// The bundled configurations: `eval/configs` under the current folder,
/// else the one in the source tree this binary was built from.
pub fn default_configs_dir() -> PathBuf {
    let local = PathBuf::from("eval/configs");
    if local.is_dir() {
        local
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/configs")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reason_kinds_are_short() {
        let cases = [
            (
                "amount differs: the sentence says $4.1 million",
                "amount differs",
            ),
            (
                "quote not found on p. 7 of \u{201C}Minutes\u{201D}",
                "quote not found",
            ),
            (
                "cites excerpt 12, which was not among the retrieved records",
                "cites excerpt",
            ),
            (
                "no citation: the sentence does not point to any record",
                "no citation",
            ),
        ];
        for (r, want) in cases {
            assert_eq!(reason_kind(r), want, "{r}");
        }
    }

    fn q(answerable: bool, abstained: bool) -> QuestionRun {
        QuestionRun {
            id: "q".into(),
            answerable,
            abstained,
            answer: String::new(),
            sentences: vec![],
            retrieved_pages: vec![],
            scores: QuestionScores::default(),
            drafted: 2,
            struck: 1,
            timings: Default::default(),
            generated_tokens: 0,
        }
    }

    /// Abstention precision and recall worked by hand: 4 questions, 2
    /// unanswerable; the tool abstains on one unanswerable and one
    /// answerable question.
    #[test]
    fn abstention_figures() {
        let runs = [
            q(true, false),
            q(true, true),
            q(false, true),
            q(false, false),
        ];
        let refs: Vec<&QuestionRun> = runs.iter().collect();
        let h = headline(&refs);
        assert_eq!(h["abstain_precision"], 0.5);
        assert_eq!(h["abstain_recall"], 0.5);
        assert_eq!(h["answered_rate"], 0.5);
        assert_eq!(h["strike_rate"], 0.5);
        assert!(!h.contains_key("f1"), "no gold answers, no F1");
    }

    /// A tiny run worked by hand following trec_eval's definitions
    /// (ndcg_cut.10 with gain 1 / log2(rank + 1), recip_rank, recall).
    #[test]
    fn page_and_document_figures_worked_by_hand() {
        let rec = |doc: &str, page, end_page| crate::answer::RetrievedRecord {
            chunk_id: crate::types::ChunkId(0),
            doc_id: crate::types::DocId(doc.into()),
            title: String::new(),
            page,
            end_page,
            hash: String::new(),
            retriever: "bm25".into(),
            rank: 0,
            score: 0.0,
        };
        let retrieved = [
            rec("d1", 2, 2),
            rec("d2", 1, 2),
            rec("d1", 2, 2),
            rec("d3", 5, 5),
        ];
        let (pages, docs) = ranked(&retrieved);
        let keys: Vec<String> = pages.iter().map(page_key).collect();
        assert_eq!(keys, ["d1#2", "d2#1", "d2#2", "d3#5"]);
        assert_eq!(docs, ["d1", "d2", "d3"]);
        let gold = [
            GoldPage {
                doc: "d2".into(),
                page: 2,
            },
            GoldPage {
                doc: "d3".into(),
                page: 5,
            },
        ];
        let mut sc = QuestionScores::default();
        retrieval_scores(&mut sc, &pages, &docs, &gold, 3);
        // Pages: relevant at ranks 3 and 4. DCG = 1/log2(4) + 1/log2(5) =
        // 0.5 + 0.430677; IDCG = 1 + 1/log2(3) = 1.630930.
        let close = |a: Option<f64>, b: f64| assert!((a.unwrap() - b).abs() < 1e-5, "{a:?} vs {b}");
        close(
            sc.page_ndcg10,
            (0.5 + 1.0 / 5f64.log2()) / (1.0 + 1.0 / 3f64.log2()),
        );
        close(sc.page_ndcg10, 0.570639);
        close(sc.page_mrr10, 1.0 / 3.0);
        close(sc.page_recall, 0.5);
        // Documents: relevant at ranks 2 and 3.
        close(
            sc.doc_ndcg10,
            (1.0 / 3f64.log2() + 0.5) / (1.0 + 1.0 / 3f64.log2()),
        );
        close(sc.doc_mrr10, 0.5);
        close(sc.doc_recall, 1.0);
    }

    /// Supports a sentence when every word of it appears in the evidence.
    struct WordJudge;

    impl Judge for WordJudge {
        fn name(&self) -> &'static str {
            "words"
        }
        fn judge(&self, sentence: &str, evidence: &[Evidence<'_>]) -> crate::verify::Judgement {
            let ev: String = evidence
                .iter()
                .map(|e| e.text)
                .collect::<Vec<_>>()
                .join(" ");
            let supported = sentence
                .split_whitespace()
                .all(|w| ev.split_whitespace().any(|e| e == w));
            crate::verify::Judgement {
                supported,
                confidence: 1.0,
                reason: None,
            }
        }
    }

    /// ALCE's definitions (Gao et al. 2023, section 3.1): "alpha beta"
    /// cites [alpha], [beta], [gamma]: together they support it (recall
    /// 1); alpha and beta are each needed, gamma neither supports alone nor
    /// is needed (precision 2/3). "alpha gamma" citing [alpha] is not
    /// supported (recall 0) and alpha alone does not support it.
    #[test]
    fn alce_citation_figures() {
        let cite = |q: &str| crate::types::Citation {
            chunk_id: crate::types::ChunkId(1),
            doc_id: crate::types::DocId("d".into()),
            title: String::new(),
            organisation: None,
            date: None,
            page: 1,
            end_page: None,
            start_char: 0,
            end_char: 0,
            quote: q.into(),
            page_hash: String::new(),
            quoted_as: None,
            similarity: 1.0,
            corrected_from: None,
            ocr: None,
        };
        let s = |text: &str, cites: &[&str]| crate::verify::VerifiedSentence {
            text: text.into(),
            verdict: Verdict::Supported,
            reason: None,
            confidence: 1.0,
            citations: cites.iter().map(|q| cite(q)).collect(),
        };
        let a = s("alpha beta", &["alpha", "beta", "gamma"]);
        assert_eq!(alce(&[&a], &WordJudge), (1.0, Some(2.0 / 3.0)));
        let b = s("alpha gamma", &["alpha"]);
        assert_eq!(alce(&[&b], &WordJudge), (0.0, Some(0.0)));
        let (r, p) = alce(&[&a, &b], &WordJudge);
        assert_eq!(r, 0.5);
        assert_eq!(p, Some(0.5));
        // A single citation that supports alone is relevant.
        let c = s("alpha", &["alpha beta"]);
        assert_eq!(alce(&[&c], &WordJudge), (1.0, Some(1.0)));
    }

    #[test]
    fn citation_judge_defaults_to_the_other_one() {
        let mut c: EvalConfig = toml::from_str("name = \"x\"").unwrap();
        assert_eq!(c.citation_judge(), (JudgeKind::Learned, false));
        c.verifying.citation_judge = Some(JudgeKind::Rules);
        assert_eq!(c.citation_judge(), (JudgeKind::Rules, true));
    }
}
