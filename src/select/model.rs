//! The selector's learned weights: one logistic-regression model per
//! feature set (with embeddings, words only) that scores and ranks the
//! candidates, each with a second, unweighted logistic regression (the
//! trigger) that turns a candidate's score and features into the
//! probability that it answers the question, and the threshold an answer
//! must clear.
//!
//! The weights are a small JSON file compiled into the binary
//! (`src/select/selector.json`); `onrecord train selector` rebuilds it
//! deterministically from WikiQA train and dev and SQuAD v1.1 articles 1-24.
//!
//! invariant: a model's feature list must equal its feature set's in this
//! build; a mismatch is refused when the file is loaded.

use super::features::FeatureSet;
use crate::error::{Error, Result};
use crate::learn::{dot, sigmoid};
use serde::{Deserialize, Serialize};
use std::path::Path;

fn one() -> f32 {
    1.0
}

/// How far a vetoed candidate's score is lowered.
pub const VETOED: f32 = 1000.0;

/// Format version of the weights file.
pub const SELECTOR_FORMAT: u32 = 1;

/// One model: standardisation, weights, calibration and threshold.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SelectorModel {
    /// `semantic-v1` or `lexical-v1`: recorded in every answer it selects for.
    pub name: String,
    pub features: Vec<String>,
    /// Each feature is standardised, `(x - mean) / scale`, before weighting
    /// (the bias is left as 1).
    pub mean: Vec<f32>,
    pub scale: Vec<f32>,
    pub weights: Vec<f32>,
    /// The trigger's weights over `[1, score, standardised features
    /// (without the bias)]`: `p = sigmoid(trigger · that)`. Fitted without
    /// class weights on the best candidate of each tuning question, so `p`
    /// estimates how often such a candidate answers.
    pub trigger: Vec<f32>,
    /// The trigger reads the score divided by this (its spread on the
    /// training candidates), so both stay on the scale of the features.
    #[serde(default = "one")]
    pub score_scale: f32,
    /// The probability at or above which a sentence is given as an answer.
    pub threshold: f32,
    /// Features that rule a candidate out when they are 1: such a
    /// candidate ranks below every other and is never an answer (a
    /// how-much question is not answered by a sentence without an amount).
    #[serde(default)]
    pub veto: Vec<String>,
    /// Figures on the training data.
    #[serde(default)]
    pub figures: serde_json::Value,
}

impl SelectorModel {
    /// The feature set this model reads.
    pub fn set(&self) -> FeatureSet {
        if self.features == FeatureSet::Semantic.names() {
            FeatureSet::Semantic
        } else {
            FeatureSet::Lexical
        }
    }

    /// The standardised feature row (the bias stays 1).
    pub fn standardise(&self, x: &[f32]) -> Vec<f32> {
        x.iter()
            .enumerate()
            .map(|(i, v)| {
                if i == 0 {
                    *v
                } else {
                    (v - self.mean[i]) / self.scale[i]
                }
            })
            .collect()
    }

    /// Whether no veto feature rules the candidate out.
    pub fn eligible(&self, x: &[f32]) -> bool {
        !self
            .veto
            .iter()
            .filter_map(|v| self.features.iter().position(|f| f == v))
            .any(|i| x[i] >= 0.5)
    }

    /// The ranking score (log-odds of the ranking model), lowered by
    /// [`VETOED`] for a candidate a veto rules out.
    pub fn score(&self, x: &[f32]) -> f32 {
        let s = self.raw_score(&self.standardise(x));
        if self.eligible(x) { s } else { s - VETOED }
    }

    fn raw_score(&self, z: &[f32]) -> f32 {
        dot(z, &self.weights)
    }

    /// The trigger's input for a candidate: `[1, score, standardised
    /// features without the bias]`.
    pub fn trigger_input(&self, x: &[f32]) -> Vec<f32> {
        let z = self.standardise(x);
        let z_score = self.raw_score(&z);
        let mut t = Vec::with_capacity(z.len() + 1);
        t.push(1.0);
        t.push(z_score / self.score_scale);
        t.extend_from_slice(&z[1..]);
        t
    }

    /// Calibrated probability that a candidate with features `x` answers
    /// (0 when a veto rules it out).
    pub fn probability(&self, x: &[f32]) -> f32 {
        if !self.eligible(x) {
            return 0.0;
        }
        sigmoid(dot(&self.trigger_input(x), &self.trigger))
    }
}

/// The weights file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SelectorWeights {
    pub format: u32,
    pub semantic: SelectorModel,
    pub lexical: SelectorModel,
    /// What the weights were trained on, and how.
    pub trained_on: serde_json::Value,
}

const BUNDLED: &str = include_str!("selector.json");

impl SelectorWeights {
    pub fn parse(text: &str, origin: &Path) -> Result<SelectorWeights> {
        let bad = |line: usize, message: String| Error::BadInput {
            path: origin.to_path_buf(),
            line,
            message,
        };
        let w: SelectorWeights = serde_json::from_str(text)
            .map_err(|e| bad(e.line(), format!("not a selector weights file: {e}")))?;
        if w.format != SELECTOR_FORMAT {
            return Err(bad(
                0,
                format!(
                    "selector weights format {} is not the format this build reads ({SELECTOR_FORMAT}); \
                     rebuild it with `onrecord train selector`",
                    w.format
                ),
            ));
        }
        for (m, set) in [
            (&w.semantic, FeatureSet::Semantic),
            (&w.lexical, FeatureSet::Lexical),
        ] {
            let n = set.names().len();
            if m.features != set.names()
                || [
                    m.weights.len(),
                    m.mean.len(),
                    m.scale.len(),
                    m.trigger.len(),
                ] != [n, n, n, n + 1]
                || m.scale.iter().any(|s| !(s.is_finite() && *s > 0.0))
                || m.veto.iter().any(|v| !m.features.contains(v))
            {
                return Err(bad(
                    0,
                    format!(
                        "the {} model's features differ from this build's; rebuild the file with \
                         `onrecord train selector`",
                        m.name
                    ),
                ));
            }
        }
        Ok(w)
    }

    /// The weights compiled into this build, parsed once per process.
    pub fn bundled() -> SelectorWeights {
        static PARSED: std::sync::LazyLock<SelectorWeights> = std::sync::LazyLock::new(|| {
            SelectorWeights::parse(BUNDLED, Path::new("src/select/selector.json"))
                .expect("the bundled selector weights match this build (checked by a unit test)")
        });
        PARSED.clone()
    }

    pub fn from_file(path: &Path) -> Result<SelectorWeights> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Self::parse(&text, path)
    }

    pub fn model(&self, set: FeatureSet) -> &SelectorModel {
        match set {
            FeatureSet::Semantic => &self.semantic,
            FeatureSet::Lexical => &self.lexical,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bundled_weights_load() {
        let w = SelectorWeights::bundled();
        for m in [&w.semantic, &w.lexical] {
            assert!(m.threshold > 0.0 && m.threshold < 1.0, "{}", m.name);
            assert!(
                m.trigger[1] > 0.0,
                "{}: a higher score must mean likelier",
                m.name
            );
        }
        assert_eq!(w.semantic.set(), FeatureSet::Semantic);
        assert_eq!(w.lexical.set(), FeatureSet::Lexical);
    }

    #[test]
    fn mismatched_weights_are_refused_with_the_file_named() {
        let mut w = SelectorWeights::bundled();
        w.lexical.features.pop();
        let text = serde_json::to_string(&w).unwrap();
        let msg = SelectorWeights::parse(&text, Path::new("sel.json"))
            .unwrap_err()
            .to_string();
        assert!(
            msg.contains("sel.json") && msg.contains("train selector"),
            "{msg}"
        );
        let mut w = SelectorWeights::bundled();
        w.format = 99;
        let text = serde_json::to_string(&w).unwrap();
        let msg = SelectorWeights::parse(&text, Path::new("sel.json"))
            .unwrap_err()
            .to_string();
        assert!(msg.contains("format 99"), "{msg}");
    }
}
