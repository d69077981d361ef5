//! Abstention calibration on SQuAD v1.1 (dev). Within a range of articles,
//! the odd-numbered ones are ingested (one page per paragraph) and the
//! even-numbered ones are left out; questions on the ingested articles are
//! answerable, questions on the others are not (the records are silent).
//! The selector's probability that its best sentence answers (words-only
//! model, BM25 retrieval) is recorded for each question; a threshold is
//! chosen on articles 1–24 by Youden's J (answer rate on answerable +
//! abstention rate on unanswerable − 1) and reported on articles 25–48,
//! which are never used for tuning.

use crate::chunk::ChunkConfig;
use crate::error::{Error, Result};
use crate::ingest::{MemDoc, ingest_docs};
use crate::retrieve::Index;
use crate::select::Selector;
use crate::text::normalize;
use crate::types::{DocId, DocMeta, Filters};
use serde::{Deserialize, Serialize};
use std::ops::RangeInclusive;
use std::path::Path;

#[derive(Deserialize)]
pub(crate) struct File {
    pub(crate) data: Vec<Article>,
}

#[derive(Deserialize)]
pub(crate) struct Article {
    pub(crate) title: String,
    pub(crate) paragraphs: Vec<Paragraph>,
}

#[derive(Deserialize)]
pub(crate) struct Paragraph {
    pub(crate) context: String,
    pub(crate) qas: Vec<Qa>,
}

#[derive(Deserialize)]
pub(crate) struct Qa {
    #[serde(default)]
    pub(crate) id: String,
    pub(crate) question: String,
    pub(crate) answers: Vec<Answer>,
}

#[derive(Deserialize)]
pub(crate) struct Answer {
    pub(crate) text: String,
    #[serde(default)]
    pub(crate) answer_start: Option<usize>,
}

/// Read a SQuAD v1.1 file.
pub(crate) fn read_file(path: &Path) -> Result<File> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    serde_json::from_str(&text).map_err(|e| Error::BadInput {
        path: path.to_path_buf(),
        line: e.line(),
        message: e.to_string(),
    })
}

/// One question's outcome with abstention switched off.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Scored {
    pub answerable: bool,
    /// Best candidate sentence score (0 when there was none).
    pub best: f32,
    /// Whether the top sentence contains a gold answer.
    pub gold_in_top: bool,
}

/// Figures at one threshold.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct AtThreshold {
    pub threshold: f32,
    /// Share of answerable questions answered.
    pub answered: f64,
    /// Share of answerable questions answered with a gold answer in the top sentence.
    pub answered_with_gold: f64,
    /// Share of unanswerable questions where the drafter abstained.
    pub abstained: f64,
    pub youden_j: f64,
}

pub fn at_threshold(scored: &[Scored], t: f32) -> AtThreshold {
    let ans: Vec<&Scored> = scored.iter().filter(|s| s.answerable).collect();
    let un: Vec<&Scored> = scored.iter().filter(|s| !s.answerable).collect();
    let share = |n: usize, d: usize| if d == 0 { 0.0 } else { n as f64 / d as f64 };
    let answered = share(ans.iter().filter(|s| s.best >= t).count(), ans.len());
    let gold = share(
        ans.iter().filter(|s| s.best >= t && s.gold_in_top).count(),
        ans.len(),
    );
    let abstained = share(un.iter().filter(|s| s.best < t).count(), un.len());
    AtThreshold {
        threshold: t,
        answered,
        answered_with_gold: gold,
        abstained,
        youden_j: answered + abstained - 1.0,
    }
}

/// Figures at every threshold of the 0.05 grid from 0 to 1.
pub fn sweep(scored: &[Scored]) -> Vec<AtThreshold> {
    (0..=20)
        .map(|i| at_threshold(scored, i as f32 * 0.05))
        .collect()
}

/// The threshold (on the 0.05 grid) with the highest Youden's J; ties go to
/// the higher threshold, which abstains more.
pub fn best_threshold(scored: &[Scored]) -> AtThreshold {
    sweep(scored)
        .into_iter()
        .fold(None::<AtThreshold>, |best, x| match best {
            Some(b) if b.youden_j > x.youden_j + 1e-12 => Some(b),
            _ => Some(x),
        })
        .expect("non-empty grid")
}

/// Score every question (capped at `cap` per class) for the articles in `range` (1-based).
pub fn score_range(
    path: &Path,
    range: RangeInclusive<usize>,
    cap: usize,
    index_dir: &Path,
) -> Result<Vec<Scored>> {
    let file = read_file(path)?;
    let mut docs = Vec::new();
    let mut answerable = Vec::new();
    let mut unanswerable = Vec::new();
    for (i, a) in file.data.iter().enumerate() {
        let n = i + 1;
        if !range.contains(&n) {
            continue;
        }
        let present = n % 2 == 1;
        for (pi, p) in a.paragraphs.iter().enumerate() {
            if present {
                docs.push(MemDoc {
                    doc_id: DocId(format!("{}-{pi}", a.title)),
                    meta: DocMeta {
                        title: Some(a.title.replace('_', " ")),
                        ..Default::default()
                    },
                    pages: vec![p.context.clone()],
                });
            }
            for q in &p.qas {
                let golds: Vec<String> = q.answers.iter().map(|x| x.text.clone()).collect();
                if present {
                    answerable.push((q.question.clone(), golds));
                } else {
                    unanswerable.push((q.question.clone(), golds));
                }
            }
        }
    }
    ingest_docs(index_dir, docs, ChunkConfig::default(), None)?;
    let index = Index::open(index_dir)?;
    let selector = Selector::default();
    let mut out = Vec::new();
    for (set, is_answerable) in [(answerable, true), (unanswerable, false)] {
        let step = set.len().div_ceil(cap.max(1)).max(1);
        for (q, golds) in set.into_iter().step_by(step) {
            let retrieved = crate::answer::diversify(
                index.search(&q, &Filters::default(), 30)?,
                10,
                crate::answer::MAX_CHUNKS_PER_DOC,
            );
            let terms = index.query_terms(&q)?;
            let sel = selector.select(&q, &retrieved, &terms, None);
            let top = sel.best();
            let gold_in_top = top.is_some_and(|c| {
                let t = normalize(&c.text).text.to_lowercase();
                golds
                    .iter()
                    .any(|g| t.contains(&normalize(g).text.to_lowercase()))
            });
            out.push(Scored {
                answerable: is_answerable,
                best: top.map(|c| c.probability).unwrap_or(0.0),
                gold_in_top,
            });
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn youden_threshold_on_a_toy_set() {
        let s = |answerable, best| Scored {
            answerable,
            best,
            gold_in_top: answerable,
        };
        let scored = [
            s(true, 0.9),
            s(true, 0.7),
            s(true, 0.4),
            s(false, 0.3),
            s(false, 0.5),
            s(false, 0.1),
        ];
        let b = best_threshold(&scored);
        // J = 2/3 at 0.40 (answers 3/3, abstains on 2/3) and on 0.55..=0.70
        // (answers 2/3, abstains on 3/3); ties go to the higher threshold.
        assert!((b.youden_j - 2.0 / 3.0).abs() < 1e-9);
        assert!((b.threshold - 0.70).abs() < 1e-6, "{}", b.threshold);
        assert!((at_threshold(&scored, 0.45).youden_j - 1.0 / 3.0).abs() < 1e-9);
    }
}
