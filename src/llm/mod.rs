//! Language models that write drafts: a quantized GGUF model run locally on
//! candle ([`local::LocalModel`]) or any OpenAI-compatible chat endpoint
//! ([`remote::RemoteModel`]). Both implement [`Generator`]; the drafter that
//! prompts them and parses their output lives in `draft`.
//!
//! Where a local model comes from is decided here, as for embedders: a GGUF
//! file or a folder holding one, a repository already fetched into the hub
//! cache with `onrecord models fetch`, or the default model placed by
//! `eval/models/fetch` in the models folder.
//!
//! invariant: a generator sees only the messages it is given; it never reads
//! the store. Its output is untrusted text until the verifier has passed it.

pub mod chat;
pub mod guide;
pub mod llama;
pub mod local;
pub mod remote;
pub mod weights;

use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

/// The default local drafting model.
pub const DEFAULT_LLM: &str = "SmolLM2-135M-Instruct";
/// Its GGUF repository on the model hub, for `models fetch`.
pub const DEFAULT_LLM_REPO: &str = "HuggingFaceTB/SmolLM2-135M-Instruct-GGUF";

/// One chat turn.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ChatMessage {
    pub role: String,
    pub content: String,
}

impl ChatMessage {
    pub fn system(s: impl Into<String>) -> Self {
        ChatMessage {
            role: "system".into(),
            content: s.into(),
        }
    }
    pub fn assistant(s: impl Into<String>) -> Self {
        ChatMessage {
            role: "assistant".into(),
            content: s.into(),
        }
    }
    pub fn user(s: impl Into<String>) -> Self {
        ChatMessage {
            role: "user".into(),
            content: s.into(),
        }
    }
}

/// Sampling settings. Temperature 0 is greedy decoding.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct GenOptions {
    pub max_tokens: usize,
    pub temperature: f64,
    pub top_p: f64,
    pub seed: u64,
    /// Excerpts to guide a local model's citations into (see `guide`):
    /// numbers 1..=len, quotes verbatim from these texts. Empty: no guide.
    /// Endpoints ignore it.
    #[serde(skip)]
    pub cite_excerpts: Vec<String>,
}

impl Default for GenOptions {
    fn default() -> Self {
        GenOptions {
            max_tokens: 320,
            temperature: 0.0,
            top_p: 0.9,
            seed: 20_240_601,
            cite_excerpts: Vec::new(),
        }
    }
}

/// Why generation stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Finish {
    /// The model ended its turn.
    Stop,
    /// `max_tokens` was reached.
    Length,
    /// The model began to repeat a line it had written; the repeat was cut.
    Repeat,
}

/// What a generator produced, with its costs.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Generation {
    pub text: String,
    pub finish: Finish,
    pub prompt_tokens: usize,
    pub generated_tokens: usize,
    /// Seconds spent reading the prompt (local) or waiting for the first
    /// token (remote).
    pub prompt_secs: f64,
    /// Seconds spent generating after the first token.
    pub generate_secs: f64,
}

/// Something that continues a chat: a local model or a remote endpoint.
pub trait Generator: Send + Sync {
    /// Model name and settings, for the answer record.
    fn id(&self) -> String;
    /// Tokens the model can attend over, prompt and answer together, when known.
    fn context_window(&self) -> Option<usize>;
    /// Tokens `text` takes, exactly for a local model, estimated otherwise.
    fn count_tokens(&self, text: &str) -> usize;
    /// Generate the assistant's turn, passing each new piece of text to `on_text`.
    fn generate(
        &self,
        messages: &[ChatMessage],
        opts: &GenOptions,
        on_text: &mut dyn FnMut(&str),
    ) -> Result<Generation>;
}

/// Which local model the user asked for.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LlmChoice {
    /// The default model from the models folder or the hub cache.
    Auto,
    /// A GGUF file, a folder holding one, or a repository id in the hub cache.
    Path(PathBuf),
}

impl std::str::FromStr for LlmChoice {
    type Err = String;
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        Ok(match s {
            "" | "auto" => LlmChoice::Auto,
            p => LlmChoice::Path(PathBuf::from(p)),
        })
    }
}

fn gguf_in(dir: &Path) -> Option<PathBuf> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
        .ok()?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            p.extension()
                .is_some_and(|x| x.eq_ignore_ascii_case("gguf"))
        })
        .collect();
    files.sort();
    // Prefer 8-bit, then 4-bit K quants, then whatever comes first.
    let rank = |p: &PathBuf| {
        let n = p.to_string_lossy().to_lowercase();
        if n.contains("q8_0") {
            0
        } else if n.contains("q4_k_m") {
            1
        } else {
            2
        }
    };
    files.sort_by_key(rank);
    files.into_iter().next()
}

/// Places the default local model is looked for, in order.
pub fn default_llm_candidates() -> Vec<PathBuf> {
    let mut out = vec![crate::embed::models_dir().join(DEFAULT_LLM)];
    if let Some(p) = crate::embed::hub::cached_gguf(DEFAULT_LLM_REPO) {
        out.push(p);
    }
    out
}

/// The GGUF file for `choice`.
pub fn resolve(choice: &LlmChoice) -> Result<PathBuf> {
    match choice {
        LlmChoice::Auto => default_llm_candidates()
            .iter()
            .find_map(|p| {
                if p.is_file() {
                    Some(p.clone())
                } else {
                    gguf_in(p)
                }
            })
            .ok_or_else(|| Error::Model {
                path: crate::embed::models_dir().join(DEFAULT_LLM),
                message: format!(
                    "the default drafting model {DEFAULT_LLM} is not here; place it with \
                     `eval/models/fetch`, run `onrecord models fetch {DEFAULT_LLM_REPO}`, \
                     or pass --llm <FILE.gguf>"
                ),
            }),
        LlmChoice::Path(p) => {
            if p.is_file() {
                return Ok(p.clone());
            }
            if p.is_dir() {
                return gguf_in(p).ok_or_else(|| Error::Model {
                    path: p.clone(),
                    message: "this folder holds no .gguf file".into(),
                });
            }
            let s = p.to_string_lossy();
            if s.matches('/').count() == 1
                && !s.starts_with('.')
                && !s.starts_with('/')
                && let Some(f) = crate::embed::hub::cached_gguf(&s)
            {
                return Ok(f);
            }
            Err(Error::Model {
                path: p.clone(),
                message: "no GGUF file here (and no such repository in the hub cache); \
                          pass a .gguf file or a folder holding one, or run \
                          `onrecord models fetch <repo-id> --file <NAME.gguf>` first"
                    .into(),
            })
        }
    }
}

/// Folder for re-encoded copies of slow model files.
pub fn reencode_cache_dir() -> PathBuf {
    crate::embed::models_dir().join("reencoded")
}
