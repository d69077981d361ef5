//! The text side of a local model: its tokenizer and its chat template, both
//! read from the GGUF file's own metadata, and the tokens that end a turn.
//!
//! invariant: the prompt a model sees is its own chat template rendered over
//! the messages, tokenised without adding special tokens a second time.

use super::ChatMessage;
use crate::error::{Error, Result};
use candle_core::quantized::gguf_file;
use candle_core::quantized::tokenizer::TokenizerFromGguf;
use std::collections::HashMap;
use std::path::Path;
use tokenizers::Tokenizer;
use tokenizers::pre_tokenizers::PreTokenizerWrapper;
use tokenizers::pre_tokenizers::byte_level::ByteLevel;
use tokenizers::pre_tokenizers::digits::Digits;
use tokenizers::pre_tokenizers::sequence::Sequence;
use tokenizers::pre_tokenizers::split::{Split, SplitPattern};
use tokenizers::tokenizer::SplitDelimiterBehavior;

/// ChatML, used when a file carries no template of its own.
pub const FALLBACK_TEMPLATE: &str = "{% for message in messages %}<|im_start|>{{ message['role'] }}\n{{ message['content'] }}<|im_end|>\n{% endfor %}{% if add_generation_prompt %}<|im_start|>assistant\n{% endif %}";

/// Names of turn-ending tokens across the supported families.
const END_TOKENS: [&str; 6] = [
    "<|im_end|>",
    "<|eot_id|>",
    "<|end_of_text|>",
    "<|endoftext|>",
    "<|end|>",
    "</s>",
];

const REGEX_LLAMA3: &str = r"(?:'[sS]|'[tT]|'[rR][eE]|'[vV][eE]|'[mM]|'[lL][lL]|'[dD])|[^\r\n\p{L}\p{N}]?\p{L}+|\p{N}{1,3}| ?[^\s\p{L}\p{N}]+[\r\n]*|\s*[\r\n]+|\s+(?!\S)|\s+";

fn err(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Model {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

fn meta_str<'a>(md: &'a HashMap<String, gguf_file::Value>, key: &str) -> Option<&'a str> {
    md.get(key)
        .and_then(|v| v.to_string().ok())
        .map(|s| s.as_str())
}

fn meta_u32(md: &HashMap<String, gguf_file::Value>, key: &str) -> Option<u32> {
    md.get(key).and_then(|v| v.to_u32().ok())
}

/// Tokenizer, chat template and end tokens of one model.
pub struct ChatFormat {
    pub tokenizer: Tokenizer,
    template: String,
    /// True when the file had no template and ChatML is used instead.
    pub template_is_fallback: bool,
    bos: String,
    eos: String,
    /// Generation stops at any of these.
    pub end_ids: Vec<u32>,
    texts: std::sync::OnceLock<Vec<String>>,
}

/// The pre-tokenizer the model was trained with, where candle's GGUF reader
/// gets it wrong or does not know the name.
fn pre_tokenizer_fix(pre: &str) -> Result<Option<PreTokenizerWrapper>, String> {
    Ok(match pre {
        // SmolLM2's tokenizer.json: single digits, then byte-level without a
        // leading space.
        "smollm" => Some(
            Sequence::new(vec![
                Digits::new(true).into(),
                ByteLevel::new(false, true, true).into(),
            ])
            .into(),
        ),
        // Llama 3 files name their pre-tokenizer "llama-bpe".
        "llama-bpe" => {
            let split = Split::new(
                SplitPattern::Regex(REGEX_LLAMA3.into()),
                SplitDelimiterBehavior::Isolated,
                false,
            )
            .map_err(|e| e.to_string())?;
            Some(
                Sequence::new(vec![
                    split.into(),
                    ByteLevel::new(false, true, false).into(),
                ])
                .into(),
            )
        }
        _ => None,
    })
}

impl ChatFormat {
    /// Read tokenizer and template from the GGUF metadata of `path`.
    pub fn from_gguf(path: &Path) -> Result<ChatFormat> {
        let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
        let ct = gguf_file::Content::read(&mut f)
            .map_err(|e| err(path, format!("not a readable GGUF file: {e}")))?;
        let mut tokenizer = Tokenizer::from_gguf(&ct)
            .map_err(|e| err(path, format!("tokenizer in the GGUF metadata: {e}")))?;
        let md = &ct.metadata;
        if let Some(pre) = meta_str(md, "tokenizer.ggml.pre")
            && let Some(fix) = pre_tokenizer_fix(pre).map_err(|e| err(path, e))?
        {
            tokenizer.with_pre_tokenizer(Some(fix));
        }
        let tokens: Vec<String> = match md.get("tokenizer.ggml.tokens") {
            Some(gguf_file::Value::Array(a)) => a
                .iter()
                .map(|v| v.to_string().cloned().unwrap_or_default())
                .collect(),
            _ => vec![],
        };
        let name_of = |key: &str| {
            meta_u32(md, key)
                .and_then(|id| tokens.get(id as usize))
                .cloned()
                .unwrap_or_default()
        };
        let bos = name_of("tokenizer.ggml.bos_token_id");
        let eos = name_of("tokenizer.ggml.eos_token_id");
        let mut end_ids: Vec<u32> = meta_u32(md, "tokenizer.ggml.eos_token_id")
            .into_iter()
            .collect();
        for (i, t) in tokens.iter().enumerate() {
            if END_TOKENS.contains(&t.as_str()) && !end_ids.contains(&(i as u32)) {
                end_ids.push(i as u32);
            }
        }
        let (template, template_is_fallback) = match meta_str(md, "tokenizer.chat_template") {
            Some(t) if !t.trim().is_empty() => (t.to_string(), false),
            _ => (FALLBACK_TEMPLATE.to_string(), true),
        };
        let fmt = ChatFormat {
            tokenizer,
            template,
            template_is_fallback,
            bos,
            eos,
            end_ids,
            texts: std::sync::OnceLock::new(),
        };
        // Fail at load, not at the first question.
        fmt.render(&[ChatMessage::user("test")])
            .map_err(|e| err(path, e))?;
        Ok(fmt)
    }

    /// Render the chat template over `messages`, ready for the assistant's turn.
    pub fn render(&self, messages: &[ChatMessage]) -> Result<String> {
        render_template(&self.template, messages, &self.bos, &self.eos)
    }

    /// Token ids of a rendered prompt.
    pub fn encode(&self, text: &str) -> Result<Vec<u32>> {
        self.tokenizer
            .encode(text, false)
            .map(|e| e.get_ids().to_vec())
            .map_err(|e| Error::Invalid(format!("tokenising the prompt: {e}")))
    }

    /// The text of every token id on its own (special tokens empty),
    /// computed once.
    pub fn token_texts(&self) -> &[String] {
        self.texts.get_or_init(|| {
            let n = self.tokenizer.get_vocab_size(true) as u32;
            (0..n)
                .map(|id| self.tokenizer.decode(&[id], true).unwrap_or_default())
                .collect()
        })
    }

    /// Text of generated ids, special tokens left out.
    pub fn decode(&self, ids: &[u32]) -> Result<String> {
        self.tokenizer
            .decode(ids, true)
            .map_err(|e| Error::Invalid(format!("decoding model output: {e}")))
    }
}

/// Render a Hugging Face style chat template with minijinja, with the same
/// whitespace rules (trim_blocks, lstrip_blocks) and Python string methods.
pub fn render_template(
    template: &str,
    messages: &[ChatMessage],
    bos: &str,
    eos: &str,
) -> Result<String> {
    let mut env = crate::prompt::jinja_environment()?;
    env.set_unknown_method_callback(minijinja_contrib::pycompat::unknown_method_callback);
    env.add_function(
        "raise_exception",
        |msg: String| -> std::result::Result<String, minijinja::Error> {
            Err(minijinja::Error::new(
                minijinja::ErrorKind::InvalidOperation,
                msg,
            ))
        },
    );
    env.add_function("strftime_now", |_fmt: String| {
        crate::answer::now_utc()[..10].to_string()
    });
    let tmpl = env
        .template_from_str(template)
        .map_err(|e| Error::Invalid(format!("chat template: {e}")))?;
    tmpl.render(minijinja::context! {
        messages => minijinja::Value::from(minijinja::value::Serde(messages)),
        add_generation_prompt => true,
        bos_token => bos,
        eos_token => eos,
    })
    .map_err(|e| Error::Invalid(format!("rendering the chat template: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chatml_fallback_renders_each_turn_and_the_assistant_prompt() {
        let out = render_template(
            FALLBACK_TEMPLATE,
            &[ChatMessage::system("S"), ChatMessage::user("Q?")],
            "",
            "",
        )
        .unwrap();
        assert_eq!(
            out,
            "<|im_start|>system\nS<|im_end|>\n<|im_start|>user\nQ?<|im_end|>\n<|im_start|>assistant\n"
        );
    }

    #[test]
    fn templates_may_use_python_string_methods_and_raise() {
        let t = "{% for m in messages %}{{ m.content.strip() }}{% endfor %}{% if messages|length > 1 %}{{ raise_exception('one only') }}{% endif %}";
        assert_eq!(
            render_template(t, &[ChatMessage::user("  hi  ")], "", "").unwrap(),
            "hi"
        );
        let e = render_template(t, &[ChatMessage::user("a"), ChatMessage::user("b")], "", "")
            .unwrap_err();
        assert!(e.to_string().contains("one only"), "{e}");
    }
}
