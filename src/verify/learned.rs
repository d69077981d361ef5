//! The learned judge: logistic regression over the rules judge's checks and
//! alignment features, trained on open data (SQuAD v1.1 articles 1–24
//! adversarial pairs and SciFact `train` claims; never on the halves the
//! figures are reported on). Logistic regression's output is a probability;
//! the threshold is chosen on the training pairs to keep pass-through low.
//!
//! The weights are a small JSON file compiled into the binary
//! (`src/verify/learned-judge.json`); `onrecord train judge` rebuilds it
//! deterministically.
//!
//! invariant: the feature list in the weights file must equal
//! [`FEATURES`]; a mismatch is refused when the file is loaded.

use super::rules::{Analysis, Check, analyse};
use super::{Evidence, Judge, Judgement};
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Feature names, in order. `bias` is the constant 1.
pub const FEATURES: [&str; 16] = [
    "bias",
    "coverage",
    "aligned",
    "bigrams",
    "length_ratio",
    "missing_words",
    "fail_date",
    "fail_number",
    "fail_name",
    "fail_negation",
    "fail_modality",
    "fail_status",
    "fail_quantifier",
    "fail_direction",
    "fail_substitution",
    "any_fail",
];

/// Format version of the weights file.
pub const WEIGHTS_FORMAT: u32 = 1;

/// The features of one (sentence, evidence) pair.
pub fn features(a: &Analysis) -> [f32; FEATURES.len()] {
    let f = |c: Check| if a.failed(c) { 1.0 } else { 0.0 };
    [
        1.0,
        a.coverage,
        a.aligned,
        a.bigrams,
        a.length_ratio / 2.0,
        (a.missing.len() as f32 / 5.0).min(1.0),
        f(Check::Date),
        f(Check::Number),
        f(Check::Name),
        f(Check::Negation),
        f(Check::Modality),
        f(Check::Status),
        f(Check::Quantifier),
        f(Check::Direction),
        f(Check::Substitution),
        if a.findings.is_empty() { 0.0 } else { 1.0 },
    ]
}

/// The weights file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Weights {
    pub format: u32,
    pub features: Vec<String>,
    pub weights: Vec<f32>,
    /// Probability of support at or above which a sentence is kept.
    pub threshold: f32,
    /// What the weights were trained on, and the training figures.
    pub trained_on: serde_json::Value,
}

impl Weights {
    pub fn parse(text: &str, origin: &Path) -> Result<Weights> {
        let w: Weights = serde_json::from_str(text).map_err(|e| Error::BadInput {
            path: origin.to_path_buf(),
            line: e.line(),
            message: format!("not a learned-judge weights file: {e}"),
        })?;
        if w.format != WEIGHTS_FORMAT {
            return Err(Error::BadInput {
                path: origin.to_path_buf(),
                line: 0,
                message: format!(
                    "weights file format {} is not the format this build reads ({WEIGHTS_FORMAT}); \
                     rebuild it with `onrecord train judge`",
                    w.format
                ),
            });
        }
        if w.features != FEATURES || w.weights.len() != FEATURES.len() {
            return Err(Error::BadInput {
                path: origin.to_path_buf(),
                line: 0,
                message: "the weights file's features differ from this build's; rebuild it with \
                          `onrecord train judge`"
                    .into(),
            });
        }
        Ok(w)
    }
}

/// The learned judge.
#[derive(Debug, Clone)]
pub struct LearnedJudge {
    pub weights: Weights,
}

const BUNDLED: &str = include_str!("learned-judge.json");

impl LearnedJudge {
    /// The weights compiled into this build.
    pub fn bundled() -> LearnedJudge {
        let weights = Weights::parse(BUNDLED, Path::new("src/verify/learned-judge.json"))
            .expect("the bundled weights match this build (checked by a unit test)");
        LearnedJudge { weights }
    }

    pub fn from_file(path: &Path) -> Result<LearnedJudge> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Ok(LearnedJudge {
            weights: Weights::parse(&text, path)?,
        })
    }

    /// Probability of support.
    pub fn probability(&self, a: &Analysis) -> f32 {
        let x = features(a);
        let z: f32 = x
            .iter()
            .zip(&self.weights.weights)
            .map(|(a, b)| a * b)
            .sum();
        sigmoid(z)
    }
}

use crate::learn::sigmoid;

impl Judge for LearnedJudge {
    fn name(&self) -> &'static str {
        "learned-v1"
    }

    fn judge(&self, sentence: &str, evidence: &[Evidence<'_>]) -> Judgement {
        let a = analyse(sentence, evidence);
        let p = self.probability(&a);
        if p >= self.weights.threshold {
            return Judgement {
                supported: true,
                confidence: p,
                reason: None,
            };
        }
        let reason = match a.findings.first() {
            Some(f) => f.reason.clone(),
            None => format!(
                "too little support: {} does not clearly say this (estimated {:.0}% likely to be supported)",
                a.place,
                p * 100.0
            ),
        };
        Judgement {
            supported: false,
            confidence: p,
            reason: Some(reason),
        }
    }
}

/// One training example.
#[derive(Debug, Clone)]
pub struct Example {
    pub x: [f32; FEATURES.len()],
    pub supported: bool,
}

/// Fit logistic regression (see [`crate::learn::fit_logistic`]): L2
/// regularisation not on the bias, balanced class weights. Deterministic.
pub fn fit(examples: &[Example], l2: f32, epochs: usize) -> Vec<f32> {
    let rows: Vec<(&[f32], bool)> = examples.iter().map(|e| (&e.x[..], e.supported)).collect();
    crate::learn::fit_logistic(&rows, l2, epochs, 1.0)
}

/// The lowest threshold at which the pass-through on `examples` (share of
/// unsupported examples kept) is at most `max_pass_through`.
pub fn pick_threshold(examples: &[Example], w: &[f32], max_pass_through: f32) -> f32 {
    let mut neg: Vec<f32> = examples
        .iter()
        .filter(|e| !e.supported)
        .map(|e| sigmoid(e.x.iter().zip(w).map(|(a, b)| a * b).sum()))
        .collect();
    if neg.is_empty() {
        return 0.5;
    }
    neg.sort_by(|a, b| b.partial_cmp(a).unwrap());
    // Allow at most floor(max · n) negatives at or above the threshold.
    let allowed = (max_pass_through * neg.len() as f32).floor() as usize;
    let t = neg.get(allowed).copied().unwrap_or(0.0);
    // Just above the first negative that must be excluded.
    (t + 1e-4).clamp(0.05, 0.95)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bundled_weights_load() {
        let j = LearnedJudge::bundled();
        assert_eq!(j.weights.weights.len(), FEATURES.len());
        assert!(j.weights.threshold > 0.0 && j.weights.threshold < 1.0);
    }

    #[test]
    fn mismatched_weights_are_refused_with_the_file_named() {
        let mut w = LearnedJudge::bundled().weights;
        w.features.pop();
        let text = serde_json::to_string(&w).unwrap();
        let err = Weights::parse(&text, Path::new("judge.json")).unwrap_err();
        let msg = err.to_string();
        assert!(
            msg.contains("judge.json") && msg.contains("train judge"),
            "{msg}"
        );
    }

    /// Logistic regression recovers a separable rule: label = coverage > 0.5.
    #[test]
    fn fit_separates_a_simple_rule() {
        let examples: Vec<Example> = (0..200)
            .map(|i| {
                let c = i as f32 / 200.0;
                let mut x = [0.0; FEATURES.len()];
                x[0] = 1.0;
                x[1] = c;
                Example {
                    x,
                    supported: c > 0.5,
                }
            })
            .collect();
        let w = fit(&examples, 0.0, 3000);
        let right = examples
            .iter()
            .filter(|e| {
                let z: f32 = e.x.iter().zip(&w).map(|(a, b)| a * b).sum();
                (z > 0.0) == e.supported
            })
            .count();
        assert!(right >= 190, "{right}/200");
        let t = pick_threshold(&examples, &w, 0.0);
        let kept_neg = examples
            .iter()
            .filter(|e| !e.supported)
            .filter(|e| sigmoid(e.x.iter().zip(&w).map(|(a, b)| a * b).sum()) >= t)
            .count();
        assert_eq!(kept_neg, 0);
    }
}
