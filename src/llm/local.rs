//! A local GGUF model as a [`Generator`]: the chat template renders the
//! messages, the prompt goes through the model in blocks, and a seeded
//! sampler picks each next token until an end token or the token budget.

use super::chat::ChatFormat;
use super::guide::{CiteGuide, Step};
use super::weights::{LoadOptions, Weights};
use super::{ChatMessage, Finish, GenOptions, Generation, Generator};
use crate::error::{Error, Result};
use candle_transformers::generation::{LogitsProcessor, Sampling};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::Instant;

/// Prompt tokens fed to the model per forward pass.
pub const PROMPT_BLOCK: usize = 256;

pub struct LocalModel {
    weights: Mutex<Weights>,
    pub format: ChatFormat,
    pub path: PathBuf,
    name: String,
    /// Seconds the load took (including any one-off re-encoding).
    pub load_secs: f64,
}

/// Picks the next token: greedy at temperature 0, else top-p with a seed.
pub struct Sampler(LogitsProcessor);

impl Sampler {
    pub fn new(opts: &GenOptions) -> Self {
        let sampling = if opts.temperature <= 0.0 {
            Sampling::ArgMax
        } else {
            Sampling::TopP {
                p: opts.top_p,
                temperature: opts.temperature,
            }
        };
        Sampler(LogitsProcessor::from_sampling(opts.seed, sampling))
    }

    pub fn next(&mut self, logits: &[f32]) -> Result<u32> {
        let t = candle_core::Tensor::new(logits, &candle_core::Device::Cpu)
            .map_err(|e| Error::Invalid(format!("sampling: {e}")))?;
        self.0
            .sample(&t)
            .map_err(|e| Error::Invalid(format!("sampling: {e}")))
    }
}

/// Finds a completed line that repeats an earlier one.
#[derive(Default)]
struct RepeatGuard;

impl RepeatGuard {
    /// Completed lines with their start offsets, each reduced to its
    /// sentence (the part before any citation).
    fn complete_lines(text: &str) -> Vec<(usize, &str)> {
        let mut out = Vec::new();
        let mut start = 0;
        for (i, c) in text.char_indices() {
            if c == '\n' {
                let line = &text[start..i];
                let sentence = line.split(" [").next().unwrap_or(line);
                out.push((start, sentence.trim()));
                start = i + 1;
            }
        }
        out
    }

    /// Byte offset where a repeated complete line starts, if there is one.
    fn repeated_line(&mut self, text: &str) -> Option<usize> {
        let lines = Self::complete_lines(text);
        let (start, last) = *lines.last()?;
        if last.is_empty() {
            return None;
        }
        lines[..lines.len() - 1]
            .iter()
            .any(|(_, l)| *l == last)
            .then_some(start)
    }

    /// How much of `text` can be shown: all of it, unless the unfinished
    /// last line may yet repeat an earlier one — its sentence is so far the
    /// start of an earlier line's, or is an earlier line's sentence with its
    /// citation still being written (which [`Self::repeated_line`] cuts
    /// once the line ends, whatever it cites).
    fn safe_prefix(&self, text: &str) -> usize {
        let start = text.rfind('\n').map_or(0, |i| i + 1);
        let partial = text[start..].trim();
        if partial.is_empty() {
            return text.len();
        }
        let (sentence, citing) = match partial.split_once(" [") {
            Some((s, _)) => (s.trim(), true),
            None => (partial, false),
        };
        let earlier = Self::complete_lines(&text[..start]);
        let may_repeat = earlier.iter().any(|(_, l)| {
            if citing {
                *l == sentence
            } else {
                l.starts_with(sentence)
            }
        });
        if may_repeat { start } else { text.len() }
    }
}

impl LocalModel {
    /// Load a GGUF file; slow tensor types are re-encoded once into `reencode_cache`.
    pub fn load(path: &Path, reencode_cache: Option<PathBuf>) -> Result<LocalModel> {
        Self::load_with(
            path,
            &LoadOptions {
                reencode_cache,
                prompt_f32_budget: super::weights::PROMPT_F32_BUDGET,
            },
        )
    }

    /// Load with explicit options.
    pub fn load_with(path: &Path, opts: &LoadOptions) -> Result<LocalModel> {
        let t0 = Instant::now();
        let format = ChatFormat::from_gguf(path)?;
        let weights = Weights::load(path, opts)?;
        let name = path
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "model".into());
        Ok(LocalModel {
            name: format!(
                "{name}{}@{}",
                if weights.reencoded { "+q8_0" } else { "" },
                super::weights::fingerprint(path)?
            ),
            weights: Mutex::new(weights),
            format,
            path: path.to_path_buf(),
            load_secs: t0.elapsed().as_secs_f64(),
        })
    }

    /// Greedy decoding of exactly `n` tokens after `ids`, end tokens
    /// ignored; returns (prompt seconds, generation seconds). For benchmarks.
    pub fn timing_run(&self, ids: &[u32], n: usize) -> Result<(f64, f64)> {
        let mut w = self.weights.lock().unwrap_or_else(|p| p.into_inner());
        w.reset();
        let t0 = Instant::now();
        let mut logits = prefill(&mut w, ids)?;
        let prompt = t0.elapsed().as_secs_f64();
        let t1 = Instant::now();
        let mut sampler = Sampler::new(&GenOptions::default());
        for i in 0..n {
            let next = sampler.next(&logits)?;
            logits = w.forward(&[next], ids.len() + i)?;
        }
        Ok((prompt, t1.elapsed().as_secs_f64()))
    }

    /// The file the weights were read from (the re-encoded copy, if any).
    pub fn loaded_from(&self) -> PathBuf {
        self.weights
            .lock()
            .unwrap_or_else(|p| p.into_inner())
            .loaded_from
            .clone()
    }

    /// Logits for the next token after `ids` (a fresh sequence).
    pub fn first_logits(&self, ids: &[u32]) -> Result<Vec<f32>> {
        let mut w = self.weights.lock().unwrap_or_else(|p| p.into_inner());
        w.reset();
        prefill(&mut w, ids)
    }
}

fn prefill(w: &mut Weights, ids: &[u32]) -> Result<Vec<f32>> {
    let mut logits = Vec::new();
    for (i, block) in ids.chunks(PROMPT_BLOCK).enumerate() {
        logits = w.forward(block, i * PROMPT_BLOCK)?;
    }
    Ok(logits)
}

impl Generator for LocalModel {
    fn id(&self) -> String {
        self.name.clone()
    }

    fn context_window(&self) -> Option<usize> {
        Some(
            self.weights
                .lock()
                .unwrap_or_else(|p| p.into_inner())
                .context,
        )
    }

    fn count_tokens(&self, text: &str) -> usize {
        self.format
            .encode(text)
            .map(|v| v.len())
            .unwrap_or(text.len() / 3)
    }

    fn generate(
        &self,
        messages: &[ChatMessage],
        opts: &GenOptions,
        on_text: &mut dyn FnMut(&str),
    ) -> Result<Generation> {
        let prompt = self.format.render(messages)?;
        let ids = self.format.encode(&prompt)?;
        let mut w = self.weights.lock().unwrap_or_else(|p| p.into_inner());
        let window = w.context;
        if ids.len() >= window {
            return Err(Error::Model {
                path: self.path.clone(),
                message: format!(
                    "the prompt takes {} tokens but the model attends over {window}",
                    ids.len()
                ),
            });
        }
        let budget = opts.max_tokens.min(window - ids.len());
        let t0 = Instant::now();
        w.reset();
        let mut logits = prefill(&mut w, &ids)?;
        let prompt_secs = t0.elapsed().as_secs_f64();
        let t1 = Instant::now();
        let mut sampler = Sampler::new(opts);
        let mut guide = if opts.cite_excerpts.is_empty() {
            None
        } else {
            Some(CiteGuide::new(&self.format, &opts.cite_excerpts)?)
        };
        let texts = self.format.token_texts();
        let mut out: Vec<u32> = Vec::new();
        let mut pos = ids.len();
        let mut shown = 0usize;
        let mut text = String::new();
        let mut finish = Finish::Length;
        let mut lines = RepeatGuard;
        while out.len() < budget {
            if let Some(g) = guide.as_mut()
                && !g.mask(&mut logits, texts)
            {
                // The quote cannot go on verbatim: close it.
                let feed = g.close_quote();
                out.extend_from_slice(&feed);
                text = self.format.decode(&out)?;
                logits = w.forward(&feed, pos)?;
                pos += feed.len();
                continue;
            }
            let next = sampler.next(&logits)?;
            let is_end = self.format.end_ids.contains(&next);
            let step = match guide.as_mut() {
                Some(g) => {
                    let piece = if is_end {
                        ""
                    } else {
                        texts.get(next as usize).map_or("", String::as_str)
                    };
                    g.step(&text, next, piece, is_end)
                }
                None => Step::Accept,
            };
            let feed: Vec<u32> = match step {
                Step::Accept if is_end => {
                    finish = Finish::Stop;
                    break;
                }
                Step::Stop => {
                    // Drop the unfinished line the guide rejected.
                    text.truncate(text.rfind('\n').map_or(0, |i| i + 1));
                    finish = Finish::Stop;
                    break;
                }
                Step::Accept => vec![next],
                Step::Force(toks) => toks,
                Step::AcceptThen(toks) => std::iter::once(next).chain(toks).collect(),
            };
            out.extend_from_slice(&feed);
            text = self.format.decode(&out)?;
            if let Some(cut) = lines.repeated_line(&text) {
                // Small models loop; a line already written adds nothing.
                text.truncate(cut);
                finish = Finish::Repeat;
                break;
            }
            // Hold back a partial multi-byte character, and a line that so
            // far repeats an earlier one.
            let upto = lines.safe_prefix(&text);
            if !text[..upto].ends_with('\u{FFFD}') && upto > shown && text.is_char_boundary(shown) {
                on_text(&text[shown..upto]);
                shown = upto;
            }
            if out.len() >= budget {
                break;
            }
            logits = w.forward(&feed, pos)?;
            pos += feed.len();
        }
        if text.len() > shown && text.is_char_boundary(shown) {
            on_text(&text[shown..]);
        }
        Ok(Generation {
            text,
            finish,
            prompt_tokens: ids.len(),
            generated_tokens: out.len(),
            prompt_secs,
            generate_secs: t1.elapsed().as_secs_f64(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::RepeatGuard;

    #[test]
    fn a_repeated_line_is_cut_and_held_back_while_it_may_repeat() {
        let mut g = RepeatGuard;
        let t = "A one.\nB two.\nA one.\n";
        assert_eq!(g.repeated_line(t), Some(14));
        // The same sentence citing another excerpt is a repeat too.
        let t = "A one. [1] \"x\"\nA one. [2] \"y\"\n";
        assert_eq!(g.repeated_line(t), Some(15));
        assert_eq!(g.repeated_line("A one.\nB two.\n"), None);
        assert_eq!(g.repeated_line("A one.\n\n\n"), None);
        // "A o" may become "A one." again: hold it back; "A ot" may not.
        assert_eq!(g.safe_prefix("A one.\nB two.\nA o"), 14);
        assert_eq!(g.safe_prefix("A one.\nB two.\nA ot"), 18);
        assert_eq!(g.safe_prefix("A on"), 4);
        // The same sentence citing another excerpt is held back while its
        // citation is written, since the whole line will be cut (a CI run
        // once streamed such a line that the record then did not keep).
        assert_eq!(g.safe_prefix("A one. [1] \"x\"\nA one. [2] \"y"), 15);
        assert_eq!(g.safe_prefix("A one. [1] \"x\"\nA one. ["), 15);
        assert_eq!(g.safe_prefix("A one. [1] \"x\"\nA two. [2] \"y"), 28);
    }
}
