//! Question sets for `eval run`: our own JSON Lines format, and adapters
//! that turn a BEIR-layout folder (retrieval only) or a SQuAD v1.1 file
//! (each paragraph a one-page document, with the gold answers) into it.
//!
//! Our format, one JSON object per line: `id`, `question`, `answerable`
//! (bool), and optionally `answers` (gold answer texts), `evidence` (the
//! pages that hold the answer, `[{"doc": ID, "page": N}]`) and `filters`
//! (`from`, `to`, `org`, `docs`, as on the command line).

use crate::error::{Error, Result};
use crate::ingest::MemDoc;
use crate::types::{DocId, DocMeta, Filters, check_date};
use serde::{Deserialize, Serialize};
use std::ops::RangeInclusive;
use std::path::Path;

/// A page that holds a question's answer.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct GoldPage {
    pub doc: String,
    pub page: u32,
}

/// One question of a set.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Question {
    pub id: String,
    pub question: String,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub answers: Vec<String>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub evidence: Vec<GoldPage>,
    /// Whether the records answer it; `false` means the tool should abstain.
    pub answerable: bool,
    #[serde(default, skip_serializing_if = "Filters::is_empty")]
    pub filters: Filters,
}

/// Which layout a question set is in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SetFormat {
    /// Decide from the path: a folder with `queries.jsonl` is BEIR, a
    /// `.json` file with `data` is SQuAD, anything else our JSON Lines.
    Auto,
    Jsonl,
    Beir,
    Squad,
}

/// A question set, with the corpus to ingest when the set brings its own.
pub struct QuestionSet {
    pub questions: Vec<Question>,
    /// The documents of a BEIR or SQuAD set; `None` for our format, whose
    /// questions are about an index (or the demo release).
    pub corpus: Option<Vec<MemDoc>>,
    pub format: SetFormat,
}

/// Options for the adapters.
#[derive(Debug, Clone)]
pub struct AdapterOptions {
    /// BEIR qrels split.
    pub split: String,
    /// SQuAD articles (1-based).
    pub articles: RangeInclusive<usize>,
    /// At most this many questions (0: all), taken evenly through the set.
    pub limit: usize,
}

impl Default for AdapterOptions {
    fn default() -> Self {
        AdapterOptions {
            split: "test".into(),
            articles: 1..=2,
            limit: 0,
        }
    }
}

/// Read a question set in `format`.
pub fn load(path: &Path, format: SetFormat, opts: &AdapterOptions) -> Result<QuestionSet> {
    let format = match format {
        SetFormat::Auto if path.is_dir() => SetFormat::Beir,
        SetFormat::Auto if path.extension().is_some_and(|e| e == "json") => SetFormat::Squad,
        SetFormat::Auto => SetFormat::Jsonl,
        f => f,
    };
    let mut set = match format {
        SetFormat::Beir => beir(path, &opts.split)?,
        SetFormat::Squad => squad(path, opts.articles.clone())?,
        _ => QuestionSet {
            questions: read_jsonl(path)?,
            corpus: None,
            format: SetFormat::Jsonl,
        },
    };
    if set.questions.is_empty() {
        return Err(Error::Invalid(format!(
            "{}: no questions in this set",
            path.display()
        )));
    }
    if opts.limit > 0 && set.questions.len() > opts.limit {
        let step = set.questions.len().div_ceil(opts.limit);
        set.questions = set.questions.into_iter().step_by(step).collect();
    }
    Ok(set)
}

/// Our JSON Lines format; a bad line is an error naming the file and line.
pub fn read_jsonl(path: &Path) -> Result<Vec<Question>> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let mut out = Vec::new();
    let mut seen = std::collections::HashSet::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        let bad = |message: String| Error::BadInput {
            path: path.to_path_buf(),
            line: i + 1,
            message,
        };
        let q: Question = serde_json::from_str(line).map_err(|e| bad(e.to_string()))?;
        if q.id.is_empty() || q.question.trim().is_empty() {
            return Err(bad("`id` and `question` must not be empty".into()));
        }
        if !seen.insert(q.id.clone()) {
            return Err(bad(format!("id `{}` is used twice", q.id)));
        }
        for d in [&q.filters.from, &q.filters.to].into_iter().flatten() {
            check_date(d).map_err(bad)?;
        }
        if q.evidence.iter().any(|e| e.page == 0) {
            return Err(bad("evidence pages count from 1".into()));
        }
        out.push(q);
    }
    Ok(out)
}

fn beir(dir: &Path, split: &str) -> Result<QuestionSet> {
    let (qrels, queries, docs) = super::beir::load(dir, split)?;
    let questions = queries
        .into_iter()
        .map(|(id, text)| {
            let mut evidence: Vec<GoldPage> = qrels[&id]
                .iter()
                .filter(|(_, g)| **g > 0)
                .map(|(d, _)| GoldPage {
                    doc: d.clone(),
                    page: 1,
                })
                .collect();
            evidence.sort();
            Question {
                id,
                question: text,
                answers: vec![],
                evidence,
                answerable: true,
                filters: Filters::default(),
            }
        })
        .collect();
    Ok(QuestionSet {
        questions,
        corpus: Some(docs),
        format: SetFormat::Beir,
    })
}

fn squad(path: &Path, articles: RangeInclusive<usize>) -> Result<QuestionSet> {
    let file = super::squad::read_file(path)?;
    let mut docs = Vec::new();
    let mut questions = Vec::new();
    for (ai, a) in file.data.iter().enumerate() {
        if !articles.contains(&(ai + 1)) {
            continue;
        }
        for (pi, p) in a.paragraphs.iter().enumerate() {
            let doc = format!("{}-{pi}", a.title);
            docs.push(MemDoc {
                doc_id: DocId(doc.clone()),
                meta: DocMeta {
                    title: Some(a.title.replace('_', " ")),
                    ..Default::default()
                },
                pages: vec![p.context.clone()],
            });
            for (qi, q) in p.qas.iter().enumerate() {
                let mut answers: Vec<String> = Vec::new();
                for x in &q.answers {
                    if !answers.contains(&x.text) {
                        answers.push(x.text.clone());
                    }
                }
                questions.push(Question {
                    id: if q.id.is_empty() {
                        format!("{doc}-{qi}")
                    } else {
                        q.id.clone()
                    },
                    question: q.question.clone(),
                    answers,
                    evidence: vec![GoldPage {
                        doc: doc.clone(),
                        page: 1,
                    }],
                    answerable: true,
                    filters: Filters::default(),
                });
            }
        }
    }
    Ok(QuestionSet {
        questions,
        corpus: Some(docs),
        format: SetFormat::Squad,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bad_lines_are_named() {
        let dir = tempfile::tempdir().unwrap();
        let cases = [
            ("{\"id\": \"a\", \"question\": \"q\"}", "answerable"),
            (
                "{\"id\": \"a\", \"question\": \"q\", \"answerable\": true, \"colour\": 1}",
                "colour",
            ),
            (
                "{\"id\": \"a\", \"question\": \"q\", \"answerable\": true}\n{\"id\": \"a\", \"question\": \"r\", \"answerable\": true}",
                "used twice",
            ),
            (
                "{\"id\": \"a\", \"question\": \"q\", \"answerable\": true, \"filters\": {\"from\": \"June\"}}",
                "not a date",
            ),
        ];
        for (text, says) in cases {
            let p = dir.path().join("q.jsonl");
            std::fs::write(&p, text).unwrap();
            let e = read_jsonl(&p).unwrap_err().to_string();
            assert!(e.contains(says) && e.contains("q.jsonl, line"), "{e}");
        }
    }
}
