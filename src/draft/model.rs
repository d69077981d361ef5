//! The model drafter: a language model (local or remote, any
//! [`Generator`]) writes the answer from numbered, fenced excerpts, in the
//! grammar `prompts/system.jinja` asks for; the parser turns its text into
//! sentences with proposed citations. The verifier decides what survives.
//!
//! invariant: a citation marker is mapped only to an excerpt the model was
//! shown; a marker outside that range is dropped, never guessed.

use super::{DraftRequest, Drafter};
use crate::chunk::PAGE_BREAK;
use crate::error::Result;
use crate::llm::{Finish, GenOptions, Generator};
use crate::prompt::{self, Excerpt};
use crate::verify::{Draft, DraftCitation, DraftSentence};
use serde::{Deserialize, Serialize};

/// Settings of the model drafter.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelDraftConfig {
    /// Most excerpts shown to the model.
    pub max_excerpts: usize,
    /// Most prompt tokens, below the model's own window; excerpts are
    /// trimmed to fit.
    pub max_prompt_tokens: usize,
    /// Show the model the selector's likeliest sentences, each with the
    /// sentences around it, instead of whole retrieved passages.
    pub selected_excerpts: bool,
    pub generation: GenOptions,
}

impl Default for ModelDraftConfig {
    fn default() -> Self {
        ModelDraftConfig {
            max_excerpts: 5,
            max_prompt_tokens: 1536,
            selected_excerpts: true,
            generation: GenOptions::default(),
        }
    }
}

/// What the model wrote and what it cost, kept in the answer record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelDraft {
    pub model: String,
    /// The model's text exactly as generated.
    pub raw: String,
    pub finish: Finish,
    pub prompt_tokens: usize,
    pub generated_tokens: usize,
    pub prompt_secs: f64,
    pub generate_secs: f64,
    /// Excerpts shown to the model, and how many of them were cut to fit.
    pub excerpts_shown: usize,
    pub excerpts_trimmed: usize,
    /// The model said the excerpts do not answer the question.
    pub said_no_answer: bool,
}

/// Receives each new piece of a draft as it is generated.
pub type TextSink = Box<dyn Fn(&str) + Send + Sync>;

pub struct ModelDrafter {
    pub generator: std::sync::Arc<dyn Generator>,
    pub cfg: ModelDraftConfig,
    /// Receives the draft as it is generated (for the terminal).
    pub on_text: Option<TextSink>,
}

/// Cut `text` to about `tokens` tokens at a word boundary.
fn cut_words(text: &str, tokens: usize, count: &dyn Fn(&str) -> usize) -> String {
    let words: Vec<&str> = text.split(' ').collect();
    let (mut lo, mut hi) = (0usize, words.len());
    // Largest prefix of words that fits.
    while lo < hi {
        let mid = (lo + hi).div_ceil(2);
        if count(&words[..mid].join(" ")) <= tokens {
            lo = mid;
        } else {
            hi = mid - 1;
        }
    }
    format!("{} …", words[..lo].join(" "))
}

impl ModelDrafter {
    pub fn new(generator: std::sync::Arc<dyn Generator>, cfg: ModelDraftConfig) -> Self {
        ModelDrafter {
            generator,
            cfg,
            on_text: None,
        }
    }

    /// What the model is shown, before trimming: (chunk index, title,
    /// date, pages, text). With a selection (and `selected_excerpts`), the
    /// likeliest candidate sentences each with its neighbours in the
    /// chunk, best first; else the retrieved passages in rank order.
    fn sources(&self, req: &DraftRequest<'_>) -> Vec<(usize, String)> {
        let n = self.cfg.max_excerpts;
        match req.selection {
            Some(sel) if self.cfg.selected_excerpts && !sel.candidates.is_empty() => {
                let mut out: Vec<(usize, std::ops::Range<usize>)> = Vec::new();
                for c in sel.candidates.iter().filter(|c| c.off_question.is_none()) {
                    if out.len() == n {
                        break;
                    }
                    let text = &req.retrieved[c.chunk_idx].chunk.text;
                    let w = window(text, &c.span);
                    // A window overlapping one already shown adds nothing.
                    if out
                        .iter()
                        .any(|(i, r)| *i == c.chunk_idx && r.start < w.end && w.start < r.end)
                    {
                        continue;
                    }
                    out.push((c.chunk_idx, w));
                }
                out.into_iter()
                    .map(|(i, r)| (i, req.retrieved[i].chunk.text[r].to_string()))
                    .collect()
            }
            _ => req
                .retrieved
                .iter()
                .take(n)
                .enumerate()
                .map(|(i, r)| (i, r.chunk.text.clone()))
                .collect(),
        }
    }

    /// The excerpts shown to the model for `req`, trimmed to the token
    /// budget; returns (excerpts, the retrieved chunk each comes from, how
    /// many were cut).
    pub fn excerpts(&self, req: &DraftRequest<'_>) -> Result<(Vec<Excerpt>, Vec<usize>, usize)> {
        let window = self.generator.context_window().unwrap_or(4096);
        let budget = self
            .cfg
            .max_prompt_tokens
            .min(window.saturating_sub(self.cfg.generation.max_tokens + 16));
        let overhead: usize = prompt::answer_messages(req.question, &[])?
            .iter()
            .map(|m| self.generator.count_tokens(&m.content) + 8)
            .sum();
        let mut left = budget.saturating_sub(overhead);
        let mut out = Vec::new();
        let mut from = Vec::new();
        let mut trimmed = 0;
        for (i, (ci, text)) in self.sources(req).into_iter().enumerate() {
            let c = &req.retrieved[ci].chunk;
            let pages = pages_of(c, &text);
            let text = text.replace(PAGE_BREAK, "\n");
            let head = format!("[{}] {} ({:?}), {}", i + 1, c.title, c.date, pages);
            let cost = self.generator.count_tokens(&head) + 24;
            if left <= cost + 48 {
                break;
            }
            let body = self.generator.count_tokens(&text);
            let text = if cost + body <= left {
                left -= cost + body;
                text
            } else {
                trimmed += 1;
                let count = |s: &str| self.generator.count_tokens(s);
                let t = cut_words(&text, left - cost, &count);
                left = 0;
                t
            };
            out.push(Excerpt {
                n: i + 1,
                title: c.title.clone(),
                date: c.date.clone(),
                pages,
                text,
            });
            from.push(ci);
            if left == 0 {
                break;
            }
        }
        Ok((out, from, trimmed))
    }
}

/// The candidate's sentence with the sentence before and after it in the
/// chunk (within the chunk), as a byte range of the chunk's text.
fn window(text: &str, span: &std::ops::Range<usize>) -> std::ops::Range<usize> {
    let spans = crate::segment::sentence_spans(text);
    let at = spans
        .iter()
        .position(|r| r.start <= span.start && span.start < r.end.max(r.start + 1));
    match at {
        Some(i) => {
            let lo = spans[i.saturating_sub(1)].start.min(span.start);
            let hi = spans[(i + 1).min(spans.len() - 1)].end.max(span.end);
            lo..hi
        }
        None => span.clone(),
    }
}

/// The page label of `part` (a piece of the chunk's text, or all of it).
fn pages_of(c: &crate::store::StoredChunk, part: &str) -> String {
    let Some(at) = c.text.find(part) else {
        return c.span.pages_label();
    };
    let before = c.text[..at].matches(PAGE_BREAK).count() as u32;
    let within = part.matches(PAGE_BREAK).count() as u32;
    let span = crate::types::ChunkSpan {
        start_page: c.span.start_page + before,
        end_page: c.span.start_page + before + within,
        ..c.span
    };
    span.pages_label()
}

impl Drafter for ModelDrafter {
    fn name(&self) -> String {
        format!("model:{}", self.generator.id())
    }

    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft> {
        if req.retrieved.is_empty() {
            return Ok(Draft {
                sentences: vec![],
                abstain: Some("no record matched the question".into()),
                model: None,
                set_aside: vec![],
            });
        }
        let (excerpts, from, trimmed) = self.excerpts(req)?;
        let messages = prompt::answer_messages(req.question, &excerpts)?;
        let mut sink = |s: &str| {
            if let Some(f) = &self.on_text {
                f(s)
            }
        };
        let opts = GenOptions {
            cite_excerpts: excerpts.iter().map(|e| e.text.clone()).collect(),
            ..self.cfg.generation.clone()
        };
        let g = self.generator.generate(&messages, &opts, &mut sink)?;
        let parsed = prompt::parse_answer(&g.text);
        let sentences: Vec<DraftSentence> = parsed
            .sentences
            .into_iter()
            .map(|p| DraftSentence {
                citations: p
                    .cites
                    .iter()
                    .filter(|c| (1..=excerpts.len()).contains(&c.excerpt))
                    .map(|c| DraftCitation {
                        chunk_id: req.retrieved[from[c.excerpt - 1]].chunk.id,
                        // A marker without a quote claims the sentence
                        // itself is the excerpt's wording.
                        quote: c.quote.clone().unwrap_or_else(|| p.text.clone()),
                    })
                    .collect(),
                text: p.text,
            })
            .collect();
        let abstain = sentences.is_empty().then(|| {
            if parsed.no_answer {
                "the model found no answer in the excerpts".to_string()
            } else {
                "the model wrote nothing that could be read as a cited sentence".to_string()
            }
        });
        Ok(Draft {
            sentences,
            abstain,
            model: Some(ModelDraft {
                model: self.generator.id(),
                raw: g.text,
                finish: g.finish,
                prompt_tokens: g.prompt_tokens,
                generated_tokens: g.generated_tokens,
                prompt_secs: g.prompt_secs,
                generate_secs: g.generate_secs,
                excerpts_shown: excerpts.len(),
                excerpts_trimmed: trimmed,
                said_no_answer: parsed.no_answer,
            }),
            set_aside: vec![],
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::llm::{ChatMessage, Generation};
    use crate::retrieve::Retrieved;
    use crate::store::StoredChunk;
    use crate::types::{ChunkId, ChunkSpan, DocId};

    /// Counts one token per word; a small window.
    struct Words(usize);

    impl Generator for Words {
        fn id(&self) -> String {
            "words".into()
        }
        fn context_window(&self) -> Option<usize> {
            Some(self.0)
        }
        fn count_tokens(&self, text: &str) -> usize {
            text.split_whitespace().count()
        }
        fn generate(
            &self,
            _: &[ChatMessage],
            _: &GenOptions,
            _: &mut dyn FnMut(&str),
        ) -> Result<Generation> {
            unreachable!()
        }
    }

    fn hit(i: u64, words: usize) -> Retrieved {
        Retrieved {
            chunk: StoredChunk {
                id: ChunkId(i),
                doc_id: DocId(format!("d{i}")),
                title: format!("Doc {i}"),
                organisation: None,
                date: None,
                seq: 0,
                span: ChunkSpan {
                    start_page: 1,
                    start_char: 0,
                    end_page: 1,
                    end_char: 0,
                },
                text: vec!["word"; words].join(" "),
                hash: String::new(),
            },
            retriever: "bm25",
            rank: i as usize,
            score: 1.0,
            signals: vec![],
        }
    }

    #[test]
    fn excerpts_are_trimmed_to_fit_the_window_with_room_for_the_answer() {
        let hits: Vec<Retrieved> = (1..=5).map(|i| hit(i, 300)).collect();
        let req = DraftRequest {
            question: "What happened?",
            retrieved: &hits,
            query_terms: &[],
            selection: None,
        };
        for window in [1200usize, 2000, 8000] {
            let g = Words(window);
            let mut cfg = ModelDraftConfig::default();
            cfg.generation.max_tokens = 200;
            let d = ModelDrafter::new(std::sync::Arc::new(g), cfg.clone());
            let (ex, _, trimmed) = d.excerpts(&req).unwrap();
            let prompt: usize = prompt::answer_messages(req.question, &ex)
                .unwrap()
                .iter()
                .map(|m| m.content.split_whitespace().count())
                .sum();
            let budget = cfg.max_prompt_tokens.min(window - 200 - 16);
            assert!(
                prompt <= budget,
                "window {window}: prompt {prompt} > {budget}"
            );
            assert!(!ex.is_empty());
            // Excerpts keep their rank order and numbering.
            assert!(
                ex.iter()
                    .enumerate()
                    .all(|(i, e)| e.n == i + 1 && e.title == format!("Doc {}", i + 1))
            );
            if window == 1200 {
                assert!(
                    trimmed == 1 && ex.len() < 5,
                    "{} excerpts, {trimmed} trimmed",
                    ex.len()
                );
                assert!(ex.last().unwrap().text.ends_with(" …"));
            }
        }
    }
}
