//! Answer-sentence selection on open data: training the selector and
//! measuring it.
//!
//! - WikiQA (Yang, Yih and Meek 2015): real search-engine questions, each
//!   with the sentences of one Wikipedia summary labelled as answering it or
//!   not; about two thirds have no answering sentence. Answer selection is
//!   scored by MAP and MRR over the questions that have an answer; answer
//!   triggering (answer only when the best sentence answers) by precision,
//!   recall and F1 over all questions, as the paper defines them.
//! - SQuAD v1.1 (Rajpurkar et al. 2016): within a paragraph, the sentence
//!   holding a gold answer's start answers; the others do not.
//!
//! Training reads WikiQA `train` and `dev` and SQuAD articles 1-24 only;
//! figures are reported on WikiQA `test` and SQuAD articles 25-48.
//!
//! invariant: training is deterministic for the same data and embedding
//! model; it never reads a reporting split.

use crate::embed::Embedder;
use crate::error::{Error, Result};
use crate::learn::dot;
use crate::select::features::{self, FeatureSet, PassageInfo, QuestionInfo, SentenceInfo};
use crate::select::{SelectorModel, SelectorWeights, model::SELECTOR_FORMAT, sentence_input};
use serde::Serialize;
use std::collections::{HashMap, HashSet};
use std::ops::RangeInclusive;
use std::path::Path;

/// One question with its candidate sentences, all from one passage.
#[derive(Debug, Clone)]
pub struct Item {
    pub id: String,
    pub question: String,
    pub title: String,
    pub sentences: Vec<String>,
    pub labels: Vec<bool>,
}

impl Item {
    pub fn has_answer(&self) -> bool {
        self.labels.iter().any(|l| *l)
    }

    fn passage_text(&self) -> String {
        self.sentences.join(" ")
    }
}

/// Read a WikiQA split (`WikiQA-train.tsv`, `-dev`, `-test`): tab-separated,
/// no quoting, header `QuestionID Question DocumentID DocumentTitle
/// SentenceID Sentence Label`. Candidates keep the file's order.
pub fn read_wikiqa(path: &Path) -> Result<Vec<Item>> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let mut items: Vec<Item> = Vec::new();
    let mut at: HashMap<String, usize> = HashMap::new();
    for (n, line) in text.lines().enumerate() {
        if n == 0 || line.trim().is_empty() {
            continue;
        }
        let f: Vec<&str> = line.split('\t').collect();
        if f.len() != 7 {
            return Err(Error::BadInput {
                path: path.to_path_buf(),
                line: n + 1,
                message: format!("expected 7 tab-separated fields, found {}", f.len()),
            });
        }
        let label = match f[6].trim() {
            "1" => true,
            "0" => false,
            other => {
                return Err(Error::BadInput {
                    path: path.to_path_buf(),
                    line: n + 1,
                    message: format!("the label must be 0 or 1, found {other:?}"),
                });
            }
        };
        let i = *at.entry(f[0].to_string()).or_insert_with(|| {
            items.push(Item {
                id: f[0].to_string(),
                question: f[1].to_string(),
                title: f[3].to_string(),
                sentences: Vec::new(),
                labels: Vec::new(),
            });
            items.len() - 1
        });
        items[i].sentences.push(f[5].to_string());
        items[i].labels.push(label);
    }
    Ok(items)
}

/// SQuAD v1.1 questions of the given articles (1-based), each against its
/// paragraph's sentences; a sentence answers when a gold answer starts in it.
pub fn squad_items(path: &Path, articles: RangeInclusive<usize>) -> Result<Vec<Item>> {
    let file = crate::eval::squad::read_file(path)?;
    let mut out = Vec::new();
    for (ai, a) in file.data.iter().enumerate() {
        if !articles.contains(&(ai + 1)) {
            continue;
        }
        for p in &a.paragraphs {
            let spans = crate::segment::sentence_spans(&p.context);
            let sentences: Vec<String> = spans
                .iter()
                .map(|r| p.context[r.clone()].to_string())
                .collect();
            for qa in &p.qas {
                // SQuAD's answer_start counts characters; spans are bytes.
                let starts: Vec<usize> = qa
                    .answers
                    .iter()
                    .filter_map(|x| x.answer_start)
                    .map(|c| crate::text::char_to_byte(&p.context, c))
                    .collect();
                let labels: Vec<bool> = spans
                    .iter()
                    .map(|r| starts.iter().any(|s| r.contains(s)))
                    .collect();
                out.push(Item {
                    id: qa.id.clone(),
                    question: qa.question.clone(),
                    title: a.title.replace('_', " "),
                    sentences: sentences.clone(),
                    labels,
                });
            }
        }
    }
    Ok(out)
}

/// Inverse document frequency over the items' distinct passages, as BM25
/// computes it: `ln(1 + (N - df + 0.5) / (df + 0.5))`.
pub fn passage_idf(items: &[Item]) -> HashMap<String, f32> {
    let mut seen = HashSet::new();
    let mut df: HashMap<String, usize> = HashMap::new();
    for it in items {
        let text = format!("{}\n{}", it.title, it.passage_text());
        if !seen.insert(text.clone()) {
            continue;
        }
        let terms: HashSet<String> = crate::text::terms(&text).into_iter().collect();
        for t in terms {
            *df.entry(t).or_default() += 1;
        }
    }
    let n = seen.len() as f32;
    df.into_iter()
        .map(|(t, d)| (t, (1.0 + (n - d as f32 + 0.5) / (d as f32 + 0.5)).ln()))
        .collect()
}

/// Vectors of every text the features read, by text.
pub type TextVectors = HashMap<String, Vec<f32>>;

/// Embed the questions, sentences, titles and passages of `items`, in
/// batches, with a progress bar on standard error when asked.
pub fn embed_items(items: &[Item], embedder: &dyn Embedder, progress: bool) -> Result<TextVectors> {
    let mut seen = HashSet::new();
    let mut texts: Vec<String> = Vec::new();
    let mut add = |t: String| {
        if seen.insert(t.clone()) {
            texts.push(t);
        }
    };
    for it in items {
        add(it.question.clone());
        add(it.title.clone());
        add(passage_input(it));
        for s in &it.sentences {
            add(sentence_input(s));
        }
    }
    let bar = if progress {
        let b = indicatif::ProgressBar::new(texts.len() as u64);
        b.set_style(
            indicatif::ProgressStyle::with_template(
                "{spinner} embedding [{elapsed_precise}] {bar:30} {pos}/{len} texts ({per_sec}, ETA {eta})",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        b
    } else {
        indicatif::ProgressBar::hidden()
    };
    let mut out = HashMap::with_capacity(texts.len());
    for batch in texts.chunks(256) {
        let refs: Vec<&str> = batch.iter().map(String::as_str).collect();
        for (t, v) in batch.iter().zip(embedder.embed(&refs)?) {
            out.insert(t.clone(), v);
        }
        bar.inc(batch.len() as u64);
    }
    bar.finish_and_clear();
    Ok(out)
}

/// The embedding input of an item's passage: title and text, as a chunk's is.
fn passage_input(it: &Item) -> String {
    crate::store::embedding_input("", &it.title, &it.passage_text())
}

/// Feature rows of every candidate of every item.
pub fn item_rows(
    items: &[Item],
    set: FeatureSet,
    vectors: Option<&TextVectors>,
) -> Vec<Vec<Vec<f32>>> {
    let global = passage_idf(items);
    let unseen = global.values().copied().fold(1.0f32, f32::max);
    items
        .iter()
        .map(|it| {
            let idf = features::local_idf(it.sentences.iter().map(String::as_str));
            let q = QuestionInfo::new(&it.question, &idf, &|t| {
                global.get(t).copied().unwrap_or(unseen)
            });
            let v = |t: &str| vectors.and_then(|m| m.get(t)).map(Vec::as_slice);
            let pinput = passage_input(it);
            let p = PassageInfo {
                context: PassageInfo::context_of(&it.title, &it.passage_text()),
                vector: v(&pinput),
                title_vector: v(&it.title),
                rank: 1,
            };
            let qv = v(&it.question);
            let sv: Vec<Option<&[f32]>> =
                it.sentences.iter().map(|s| v(&sentence_input(s))).collect();
            it.sentences
                .iter()
                .enumerate()
                .map(|(i, s)| {
                    let si = SentenceInfo {
                        raw: s,
                        vector: sv[i],
                        neighbours: [
                            i.checked_sub(1).and_then(|j| sv[j]),
                            sv.get(i + 1).copied().flatten(),
                        ],
                    };
                    features::features(set, &q, qv, &p, &si)
                })
                .collect()
        })
        .collect()
}

/// Candidate rows and labels of one question, as answering sees them.
pub type Rows = (Vec<Vec<f32>>, Vec<bool>);

/// SQuAD v1.1 in the setting answers are made in. Of `articles`, the odd
/// ones are ingested (one record per paragraph, titled with its article)
/// and the even ones left out; each question (at most `cap` per kind) is
/// retrieved for as `answer` retrieves (hybrid with `embedder`, else BM25),
/// and every candidate sentence of the retrieved passages is a row,
/// featurised as answering featurises it. A candidate answers when it lies
/// in the question's own paragraph and holds a gold answer; on a left-out
/// article no candidate answers (the records are silent).
pub fn squad_retrieval(
    path: &Path,
    articles: RangeInclusive<usize>,
    cap: usize,
    embedder: Option<std::sync::Arc<dyn Embedder>>,
    work: &Path,
    progress: bool,
) -> Result<Vec<Rows>> {
    use crate::ingest::{MemDoc, ingest_docs};
    use crate::retrieve::{Index, RetrieverKind, SearchOptions};
    use crate::types::{DocId, DocMeta, Filters};
    let file = crate::eval::squad::read_file(path)?;
    let mut docs = Vec::new();
    let mut asked: [Vec<(String, DocId, Vec<String>)>; 2] = [Vec::new(), Vec::new()];
    for (i, a) in file.data.iter().enumerate() {
        let n = i + 1;
        if !articles.contains(&n) {
            continue;
        }
        let present = n % 2 == 1;
        for (pi, p) in a.paragraphs.iter().enumerate() {
            let id = DocId(format!("{}-{pi}", a.title));
            if present {
                docs.push(MemDoc {
                    doc_id: id.clone(),
                    meta: DocMeta {
                        title: Some(a.title.replace('_', " ")),
                        ..Default::default()
                    },
                    pages: vec![p.context.clone()],
                });
            }
            for q in &p.qas {
                let golds = q.answers.iter().map(|x| x.text.clone()).collect();
                asked[usize::from(!present)].push((q.question.clone(), id.clone(), golds));
            }
        }
    }
    ingest_docs(work, docs, crate::chunk::ChunkConfig::default(), None)?;
    if let Some(e) = &embedder {
        crate::vectors::update(work, e.as_ref(), progress)?;
    }
    let mut index = Index::open_with(work, embedder.clone())?;
    // Exact dense search, so training gives the same weights every time.
    if let Some(v) = index.vectors.as_mut() {
        v.exact_always = true;
    }
    index.options = SearchOptions {
        retriever: Some(if embedder.is_some() {
            RetrieverKind::Hybrid
        } else {
            RetrieverKind::Bm25
        }),
        ..index.options
    };
    let set = if embedder.is_some() {
        FeatureSet::Semantic
    } else {
        FeatureSet::Lexical
    };
    let norm = |t: &str| crate::text::normalize(t).text.to_lowercase();
    let mut out = Vec::new();
    let total: usize = asked.iter().map(|a| a.len().min(cap)).sum();
    let bar = if progress {
        indicatif::ProgressBar::new(total as u64)
    } else {
        indicatif::ProgressBar::hidden()
    };
    for list in &asked {
        // An even spread over the articles when capped.
        let step = list.len().div_ceil(cap.max(1)).max(1);
        for (q, own, golds) in list.iter().step_by(step) {
            let qv = match &embedder {
                Some(_) => Some(index.embed_query(q)?),
                None => None,
            };
            let retrieved = crate::answer::gather_embedded(
                &index,
                q,
                qv.as_deref(),
                &[],
                &Filters::default(),
                10,
            )?;
            let vectors = match qv {
                Some(v) => Some(crate::answer::selection_vectors(&index, v, &retrieved)?),
                None => None,
            };
            let terms = index.query_terms(q)?;
            let (_, rows) = crate::select::featurize(set, q, &retrieved, &terms, vectors.as_ref());
            let golds: Vec<String> = golds.iter().map(|g| norm(g)).collect();
            let labels = rows
                .iter()
                .map(|(c, _)| {
                    retrieved[c.chunk_idx].chunk.doc_id == *own && {
                        let t = norm(&c.text);
                        golds.iter().any(|g| t.contains(g.as_str()))
                    }
                })
                .collect();
            out.push((rows.into_iter().map(|(_, x)| x).collect(), labels));
            bar.inc(1);
        }
    }
    bar.finish_and_clear();
    Ok(out)
}

/// Answer selection and triggering figures.
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
pub struct AnswerFigures {
    pub model: String,
    pub questions: usize,
    /// Questions with at least one answering sentence.
    pub with_answer: usize,
    /// Mean average precision and mean reciprocal rank over the questions
    /// with an answer.
    pub map: f64,
    pub mrr: f64,
    /// Answer triggering over all questions: a question counts as answered
    /// when its best candidate clears the threshold, and as answered rightly
    /// when that candidate is labelled as answering.
    pub trigger_precision: f64,
    pub trigger_recall: f64,
    pub trigger_f1: f64,
    pub threshold: f32,
}

/// Figures from each question's candidates, (score, probability) with
/// their labels: candidates are ranked by score, ties keeping their order;
/// a question is answered when its best-scored candidate's probability is
/// at least `threshold`.
pub fn figures(questions: &[Ranked], threshold: f32) -> AnswerFigures {
    let (mut ap_sum, mut rr_sum, mut with_answer) = (0.0, 0.0, 0usize);
    let (mut answered, mut right) = (0usize, 0usize);
    for (p, labels) in questions {
        let mut order: Vec<usize> = (0..p.len()).collect();
        order.sort_by(|a, b| p[*b].0.total_cmp(&p[*a].0).then(a.cmp(b)));
        let relevant = labels.iter().filter(|l| **l).count();
        if relevant > 0 {
            with_answer += 1;
            let (mut hits, mut ap, mut rr) = (0usize, 0.0, 0.0);
            for (rank, i) in order.iter().enumerate() {
                if labels[*i] {
                    hits += 1;
                    ap += hits as f64 / (rank + 1) as f64;
                    if rr == 0.0 {
                        rr = 1.0 / (rank + 1) as f64;
                    }
                }
            }
            ap_sum += ap / relevant as f64;
            rr_sum += rr;
        }
        if let Some(&top) = order.first()
            && p[top].1 >= threshold
        {
            answered += 1;
            if labels[top] {
                right += 1;
            }
        }
    }
    let div = |a: f64, b: usize| if b == 0 { 0.0 } else { a / b as f64 };
    let precision = div(right as f64, answered);
    let recall = div(right as f64, with_answer);
    AnswerFigures {
        model: String::new(),
        questions: questions.len(),
        with_answer,
        map: div(ap_sum, with_answer),
        mrr: div(rr_sum, with_answer),
        trigger_precision: precision,
        trigger_recall: recall,
        trigger_f1: if precision + recall > 0.0 {
            2.0 * precision * recall / (precision + recall)
        } else {
            0.0
        },
        threshold,
    }
}

/// Rank `items`' candidates by `model`'s score and compute the figures,
/// answering when the best-scored candidate's probability clears the
/// threshold.
pub fn evaluate(items: &[Item], rows: &[Vec<Vec<f32>>], model: &SelectorModel) -> AnswerFigures {
    let qs: Vec<Ranked> = items
        .iter()
        .zip(rows)
        .map(|(it, r)| ranked(model, r, &it.labels))
        .collect();
    AnswerFigures {
        model: model.name.clone(),
        ..figures(&qs, model.threshold)
    }
}

/// One question's candidates as `figures` reads them.
pub type Ranked = (Vec<(f32, f32)>, Vec<bool>);

/// Each candidate's (score, probability) under `model`.
pub fn ranked(model: &SelectorModel, rows: &[Vec<f32>], labels: &[bool]) -> Ranked {
    (
        rows.iter()
            .map(|x| (model.score(x), model.probability(x)))
            .collect(),
        labels.to_vec(),
    )
}

/// Fit one model from several data sets of questions, each counting
/// `share` of the whole however many candidates it has: standardise the
/// features, fit the ranking model (pairwise logistic regression) on the
/// candidates no veto rules out, fit the trigger (logistic regression
/// without class weights, so its output is calibrated) on each question's
/// best-scored candidate, and choose the threshold with the best mean
/// answer-triggering F1 over the sets.
pub fn fit_model(name: &str, set: FeatureSet, sets: &[(&[Rows], f32)]) -> SelectorModel {
    let n = set.names().len();
    let mut rows: Vec<(&[f32], bool)> = Vec::new();
    let mut weights: Vec<f32> = Vec::new();
    // Standardisation counts each set's candidates by its share.
    for (qs, share) in sets {
        let count: usize = qs.iter().map(|q| q.0.len()).sum();
        for (r, l) in *qs {
            for (x, y) in r.iter().zip(l) {
                rows.push((x.as_slice(), *y));
                weights.push(share / count.max(1) as f32);
            }
        }
    }
    let total_w: f32 = weights.iter().sum::<f32>().max(1e-9);
    let mut mean = vec![0.0f32; n];
    let mut scale = vec![1.0f32; n];
    for i in 1..n {
        let m = rows
            .iter()
            .zip(&weights)
            .map(|((x, _), w)| x[i] * w)
            .sum::<f32>()
            / total_w;
        let var = rows
            .iter()
            .zip(&weights)
            .map(|((x, _), w)| (x[i] - m).powi(2) * w)
            .sum::<f32>()
            / total_w;
        mean[i] = round(m);
        scale[i] = if var.sqrt() > 1e-3 {
            round(var.sqrt())
        } else {
            1.0
        };
    }
    let mut model = SelectorModel {
        name: name.to_string(),
        features: set.names().iter().map(|s| s.to_string()).collect(),
        mean,
        scale,
        weights: vec![0.0; n],
        trigger: vec![0.0; n + 1],
        score_scale: 1.0,
        threshold: 0.5,
        veto: VETO.iter().map(|v| v.to_string()).collect(),
        figures: serde_json::Value::Null,
    };
    // The ranking model: pairwise logistic regression (RankNet's loss
    // with a linear scorer; Burges et al. 2005). Within each question, an
    // answering candidate against each other candidate no veto rules out,
    // on the difference of their standardised features; each question
    // counts equally within its set.
    let mut pairs: Vec<(Vec<f32>, bool)> = Vec::new();
    let mut pair_w: Vec<f32> = Vec::new();
    for (qs, share) in sets {
        let answered = qs
            .iter()
            .filter(|(_, l)| l.iter().any(|y| *y))
            .count()
            .max(1);
        for (r, labels) in *qs {
            let z: Vec<Vec<f32>> = r.iter().map(|x| model.standardise(x)).collect();
            let pos: Vec<usize> = (0..r.len()).filter(|i| labels[*i]).collect();
            let neg: Vec<usize> = (0..r.len())
                .filter(|i| !labels[*i] && model.eligible(&r[*i]))
                .collect();
            let count = (pos.len() * neg.len()).max(1) as f32;
            for &a in &pos {
                for (k, &b) in neg.iter().enumerate() {
                    // Every other pair the other way round, so both labels occur.
                    let flip = k % 2 == 1;
                    let mut d: Vec<f32> = z[a]
                        .iter()
                        .zip(&z[b])
                        .map(|(u, v)| if flip { v - u } else { u - v })
                        .collect();
                    d[0] = 1.0;
                    pairs.push((d, !flip));
                    pair_w.push(share / answered as f32 / count);
                }
            }
        }
    }
    let mut w = crate::learn::fit_logistic_weighted(&pairs, &pair_w, 1e-3, 1500, 0.5);
    // A constant shifts every candidate alike: the ranking has no bias.
    if let Some(b) = w.first_mut() {
        *b = 0.0;
    }
    model.weights = round4(&w);
    let std_rows: Vec<Vec<f32>> = rows
        .iter()
        .filter(|(x, _)| model.eligible(x))
        .map(|(x, _)| model.standardise(x))
        .collect();
    // The spread of the scores, for the trigger's input.
    let scores: Vec<f32> = std_rows.iter().map(|z| dot(z, &model.weights)).collect();
    let mean_s = scores.iter().sum::<f32>() / scores.len().max(1) as f32;
    let sd = (scores.iter().map(|s| (s - mean_s).powi(2)).sum::<f32>()
        / scores.len().max(1) as f32)
        .sqrt();
    model.score_scale = if sd > 1e-3 { round(sd) } else { 1.0 };
    // The trigger: is the best-scored candidate an answer?
    let mut tops: Vec<(Vec<f32>, bool)> = Vec::new();
    let mut top_w: Vec<f32> = Vec::new();
    for (qs, share) in sets {
        for (r, labels) in *qs {
            if let Some(i) = best_by(r.iter().map(|x| model.score(x)))
                && model.eligible(&r[i])
            {
                tops.push((model.trigger_input(&r[i]), labels[i]));
                top_w.push(share / qs.len().max(1) as f32);
            }
        }
    }
    model.trigger = round4(&crate::learn::fit_calibrated(
        &tops, &top_w, 1e-3, 3000, 0.5,
    ));
    // The threshold with the best mean triggering F1 over the sets (ties go
    // to the higher one).
    let probs: Vec<Vec<Ranked>> = sets
        .iter()
        .map(|(qs, _)| qs.iter().map(|(r, l)| ranked(&model, r, l)).collect())
        .collect();
    let mut grid: Vec<f32> = (1..100).map(|i| i as f32 / 100.0).collect();
    grid.reverse();
    let mut best = (f64::MIN, 0.5f32);
    for t in grid {
        let f = probs
            .iter()
            .map(|qs| figures(qs, t).trigger_f1)
            .sum::<f64>()
            / probs.len() as f64;
        if f > best.0 + 1e-12 {
            best = (f, t);
        }
    }
    model.threshold = best.1;
    model
}

/// Features that rule a candidate out (see `SelectorModel::veto`).
pub const VETO: &[&str] = &["kind_missing"];

/// Index of the largest value (the first of equals).
fn best_by(xs: impl Iterator<Item = f32>) -> Option<usize> {
    xs.enumerate()
        .fold(None, |b: Option<(usize, f32)>, (i, s)| match b {
            Some((_, bs)) if bs >= s => b,
            _ => Some((i, s)),
        })
        .map(|(i, _)| i)
}

fn round(x: f32) -> f32 {
    (x * 1e4).round() / 1e4
}

fn round4(v: &[f32]) -> Vec<f32> {
    v.iter().map(|x| round(*x)).collect()
}

/// Train one model from WikiQA tuning questions (each with its one
/// summary) and SQuAD questions asked against an index as answering asks
/// them (`squad_retrieval` rows for the same feature set). Each data set
/// counts half. The semantic model needs `vectors` for the WikiQA texts.
pub fn train_model(
    set: FeatureSet,
    wikiqa: &[Item],
    squad: &[Rows],
    vectors: Option<&TextVectors>,
) -> SelectorModel {
    let name = match set {
        FeatureSet::Semantic => "semantic-v1",
        FeatureSet::Lexical => "lexical-v1",
    };
    let wiki: Vec<Rows> = wikiqa
        .iter()
        .zip(item_rows(wikiqa, set, vectors))
        .map(|(it, r)| (r, it.labels.clone()))
        .collect();
    let mut m = fit_model(name, set, &[(&wiki, 0.5), (squad, 0.5)]);
    let f = |qs: &[Rows]| {
        let probs: Vec<Ranked> = qs.iter().map(|(r, l)| ranked(&m, r, l)).collect();
        figure_json(&figures(&probs, m.threshold))
    };
    m.figures = serde_json::json!({"wikiqa_tuning": f(&wiki), "squad_retrieval_tuning": f(squad)});
    m
}

/// Train both models (see [`train_model`]).
pub fn train(
    wikiqa: &[Item],
    squad_semantic: &[Rows],
    squad_lexical: &[Rows],
    vectors: &TextVectors,
    trained_on: serde_json::Value,
) -> SelectorWeights {
    SelectorWeights {
        format: SELECTOR_FORMAT,
        semantic: train_model(FeatureSet::Semantic, wikiqa, squad_semantic, Some(vectors)),
        lexical: train_model(FeatureSet::Lexical, wikiqa, squad_lexical, None),
        trained_on,
    }
}

/// SQuAD questions of each kind (answerable, left-out article) the
/// selector is trained on.
pub const SQUAD_CAP: usize = 1500;

fn figure_json(f: &AnswerFigures) -> serde_json::Value {
    serde_json::json!({
        "map": round64(f.map),
        "mrr": round64(f.mrr),
        "trigger_precision": round64(f.trigger_precision),
        "trigger_recall": round64(f.trigger_recall),
        "trigger_f1": round64(f.trigger_f1),
    })
}

fn round64(x: f64) -> f64 {
    (x * 1e4).round() / 1e4
}

#[cfg(test)]
mod tests {
    use super::*;

    /// MAP, MRR and triggering worked by hand on three questions.
    #[test]
    fn figures_worked_by_hand() {
        // Scores double as probabilities here.
        let q = |v: Vec<f32>, l: Vec<bool>| -> Ranked { (v.iter().map(|x| (*x, *x)).collect(), l) };
        let qs = vec![
            // Relevant at ranks 1 and 3: AP = (1/1 + 2/3) / 2 = 5/6; RR = 1.
            q(vec![0.9, 0.7, 0.5], vec![true, false, true]),
            // Relevant at rank 2: AP = 1/2; RR = 1/2.
            q(vec![0.8, 0.6], vec![false, true]),
            // No answer: left out of MAP and MRR.
            q(vec![0.95, 0.1], vec![false, false]),
        ];
        let f = figures(&qs, 0.85);
        assert_eq!((f.questions, f.with_answer), (3, 2));
        assert!((f.map - (5.0 / 6.0 + 0.5) / 2.0).abs() < 1e-9);
        assert!((f.mrr - 0.75).abs() < 1e-9);
        // Answered: q1 (0.9, right) and q3 (0.95, wrong); q2's 0.8 is below.
        assert!((f.trigger_precision - 0.5).abs() < 1e-9);
        assert!((f.trigger_recall - 0.5).abs() < 1e-9);
        assert!((f.trigger_f1 - 0.5).abs() < 1e-9);
    }

    #[test]
    fn wikiqa_lines_are_grouped_by_question_and_bad_lines_named() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("w.tsv");
        std::fs::write(
            &p,
            "QuestionID\tQuestion\tDocumentID\tDocumentTitle\tSentenceID\tSentence\tLabel\n\
             Q1\twho?\tD1\tT\tD1-0\tA b.\t0\nQ1\twho?\tD1\tT\tD1-1\tC d.\t1\nQ2\twhat?\tD2\tU\tD2-0\tE.\t0\n",
        )
        .unwrap();
        let items = read_wikiqa(&p).unwrap();
        assert_eq!(items.len(), 2);
        assert_eq!(items[0].labels, vec![false, true]);
        assert!(!items[1].has_answer());
        std::fs::write(&p, "header\nQ1\twho?\tD1\n").unwrap();
        let e = read_wikiqa(&p).unwrap_err().to_string();
        assert!(e.contains("w.tsv") && e.contains("line 2"), "{e}");
    }
}
