//! Embeddings: the [`Embedder`] trait, a BERT implementation on candle
//! ([`bert::BertEmbedder`]), and where model folders come from.
//!
//! One code path loads every model: a local folder holding `config.json`,
//! `tokenizer.json` and `model.safetensors` (plus the optional
//! sentence-transformers files `sentence_bert_config.json` and
//! `1_Pooling/config.json`). That folder may have been named by the user,
//! placed by `eval/models/fetch`, or fetched into the hub cache by
//! `onrecord models fetch`.
//!
//! invariant: every vector an embedder returns has length `dim()` and unit
//! L2 norm (or is all zeros for a degenerate input).
//! invariant: `id()` changes whenever the weights, tokenizer, pooling or
//! truncation change, so vectors from different models are never mixed.

pub mod bert;
pub mod cache;
pub mod hub;

use crate::error::{Error, Result};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The default small embedding model.
pub const DEFAULT_MODEL: &str = "all-MiniLM-L6-v2";
/// Its repository id on the model hub, for `models fetch` and cache lookups.
pub const DEFAULT_REPO: &str = "sentence-transformers/all-MiniLM-L6-v2";

/// Turns texts into unit vectors.
pub trait Embedder: Send + Sync {
    /// Name and fingerprint of the model and its settings.
    fn id(&self) -> &str;
    /// Length of every vector.
    fn dim(&self) -> usize;
    /// Token ids the model sees for `text`, after truncation.
    fn token_ids(&self, text: &str) -> Result<Vec<u32>>;
    /// One vector per text, in input order.
    fn embed(&self, texts: &[&str]) -> Result<Vec<Vec<f32>>>;
}

/// Which embedder the user asked for.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum EmbedderChoice {
    /// The default model if a copy is found locally, else none.
    Auto,
    /// No embedder: BM25 only.
    Off,
    /// This model folder; an error if it cannot be loaded.
    Dir(PathBuf),
}

impl std::str::FromStr for EmbedderChoice {
    type Err = String;
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        Ok(match s {
            "" | "auto" => EmbedderChoice::Auto,
            "off" | "none" => EmbedderChoice::Off,
            p => EmbedderChoice::Dir(PathBuf::from(p)),
        })
    }
}

/// Folder that `eval/models/fetch` fills: `ONRECORD_MODELS`, else
/// `$XDG_CACHE_HOME/onrecord/models`, else `~/.cache/onrecord/models`.
pub fn models_dir() -> PathBuf {
    if let Some(d) = std::env::var_os("ONRECORD_MODELS") {
        return d.into();
    }
    let cache = std::env::var_os("XDG_CACHE_HOME")
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".cache")))
        .unwrap_or_else(|| PathBuf::from(".cache"));
    cache.join("onrecord").join("models")
}

/// Places the default model is looked for, in order.
pub fn default_model_candidates() -> Vec<PathBuf> {
    let mut out = vec![models_dir().join(DEFAULT_MODEL)];
    if let Some(p) = hub::cached(DEFAULT_REPO) {
        out.push(p);
    }
    out
}

/// Whether `dir` holds the three files every model needs.
pub fn is_model_dir(dir: &Path) -> bool {
    ["config.json", "tokenizer.json", "model.safetensors"]
        .iter()
        .all(|f| dir.join(f).is_file())
}

/// The outcome of resolving a choice: the embedder, if any, and a one-line
/// note for the user when there is none.
pub struct Resolved {
    pub embedder: Option<Arc<dyn Embedder>>,
    pub note: Option<String>,
}

/// Load the embedder the user chose. `Auto` never fails: without a model it
/// returns none and a note saying so; `Dir` fails with the folder's name.
pub fn resolve(choice: &EmbedderChoice) -> Result<Resolved> {
    match choice {
        EmbedderChoice::Off => Ok(Resolved {
            embedder: None,
            note: None,
        }),
        EmbedderChoice::Dir(dir) => {
            let dir = hub::resolve_repo_or_dir(dir)?;
            let e = bert::BertEmbedder::load(&dir)?;
            Ok(Resolved {
                embedder: Some(Arc::new(e)),
                note: None,
            })
        }
        EmbedderChoice::Auto => {
            let candidates = default_model_candidates();
            for dir in &candidates {
                if is_model_dir(dir) {
                    return match bert::BertEmbedder::load(dir) {
                        Ok(e) => Ok(Resolved {
                            embedder: Some(Arc::new(e)),
                            note: None,
                        }),
                        Err(e) => Ok(Resolved {
                            embedder: None,
                            note: Some(format!(
                                "note: the embedding model could not be loaded ({e}); using BM25 only"
                            )),
                        }),
                    };
                }
            }
            Ok(Resolved {
                embedder: None,
                note: Some(format!(
                    "note: no embedding model in {}; using BM25 only (run eval/models/fetch, \
                     `onrecord models fetch {DEFAULT_REPO}`, or pass --embedder DIR)",
                    candidates[0].display()
                )),
            })
        }
    }
}

pub(crate) fn model_err(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Model {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

/// Cosine similarity of two vectors (their dot product when both are unit).
pub fn cosine(a: &[f32], b: &[f32]) -> f32 {
    let (mut d, mut na, mut nb) = (0f64, 0f64, 0f64);
    for (x, y) in a.iter().zip(b) {
        d += (*x as f64) * (*y as f64);
        na += (*x as f64) * (*x as f64);
        nb += (*y as f64) * (*y as f64);
    }
    if na == 0.0 || nb == 0.0 {
        return 0.0;
    }
    (d / (na.sqrt() * nb.sqrt())) as f32
}

/// Scale `v` to unit L2 norm in place; a zero vector stays zero.
pub fn normalise(v: &mut [f32]) {
    let n = v.iter().map(|x| x * x).sum::<f32>().sqrt();
    if n > 0.0 {
        v.iter_mut().for_each(|x| *x /= n);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn choice_parses() {
        assert_eq!("auto".parse(), Ok(EmbedderChoice::Auto));
        assert_eq!("off".parse(), Ok(EmbedderChoice::Off));
        assert_eq!(
            "/m/x".parse(),
            Ok(EmbedderChoice::Dir(PathBuf::from("/m/x")))
        );
    }

    #[test]
    fn missing_folder_is_a_clear_error_and_auto_never_fails() {
        let e = resolve(&EmbedderChoice::Dir("/nonexistent/model".into()))
            .err()
            .unwrap();
        assert!(e.to_string().contains("/nonexistent/model"), "{e}");
        assert!(resolve(&EmbedderChoice::Auto).is_ok());
    }

    #[test]
    fn normalise_gives_unit_norm() {
        let mut v = vec![3.0, 4.0];
        normalise(&mut v);
        assert!((v[0] - 0.6).abs() < 1e-6 && (v[1] - 0.8).abs() < 1e-6);
        let mut z = vec![0.0; 3];
        normalise(&mut z);
        assert_eq!(z, vec![0.0; 3]);
        assert!((cosine(&[1.0, 0.0], &[1.0, 1.0]) - std::f32::consts::FRAC_1_SQRT_2).abs() < 1e-6);
    }
}
