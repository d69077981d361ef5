//! A BERT-family sentence embedder on candle, CPU only.
//!
//! Texts are tokenised with the model's own `tokenizer.json` (truncated at
//! the model's maximum length, never padded by the tokenizer), sorted by
//! length and cut into batches, so a short chunk is never padded to a long
//! one. Each batch runs through the encoder; the token vectors are pooled
//! as the model's pooling config says (mean over real tokens, or the CLS
//! token) and scaled to unit length.

use super::{Embedder, model_err, normalise};
use crate::error::Result;
use candle_core::{DType, Device, Tensor};
use candle_nn::VarBuilder;
use candle_transformers::models::bert::{BertModel, Config};
use sha2::{Digest, Sha256};
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use tokenizers::{Tokenizer, TruncationDirection, TruncationParams, TruncationStrategy};

/// How token vectors become one text vector.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pooling {
    Mean,
    Cls,
}

/// Most texts in one forward pass.
pub const BATCH_SIZE: usize = 32;
/// Most (padded) tokens in one forward pass, which bounds memory.
pub const BATCH_TOKENS: usize = 4096;

pub struct BertEmbedder {
    model: BertModel,
    tokenizer: Tokenizer,
    pooling: Pooling,
    max_tokens: usize,
    dim: usize,
    id: String,
    dir: PathBuf,
}

fn read_json(path: &Path) -> Result<Option<serde_json::Value>> {
    match std::fs::read_to_string(path) {
        Ok(s) => serde_json::from_str(&s)
            .map(Some)
            .map_err(|e| model_err(path, format!("not valid JSON: {e}"))),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(crate::error::Error::io(path, e)),
    }
}

impl BertEmbedder {
    /// Load from a folder holding `config.json`, `tokenizer.json` and `model.safetensors`.
    pub fn load(dir: &Path) -> Result<BertEmbedder> {
        for f in ["config.json", "tokenizer.json", "model.safetensors"] {
            if !dir.join(f).is_file() {
                return Err(model_err(
                    dir,
                    format!(
                        "not a model folder: `{f}` is missing (a model folder holds config.json, \
                         tokenizer.json and model.safetensors)"
                    ),
                ));
            }
        }
        let config_path = dir.join("config.json");
        let config_text = std::fs::read_to_string(&config_path)
            .map_err(|e| crate::error::Error::io(&config_path, e))?;
        let config: Config = serde_json::from_str(&config_text)
            .map_err(|e| model_err(&config_path, format!("not a BERT config: {e}")))?;

        // Pooling: the sentence-transformers module list names the pooling
        // folder; its config says CLS or mean. Without one, mean pooling.
        let pooling_dir = read_json(&dir.join("modules.json"))?
            .and_then(|m| {
                m.as_array()?.iter().find_map(|e| {
                    let ty = e["type"].as_str()?;
                    ty.ends_with("Pooling")
                        .then(|| e["path"].as_str().map(str::to_owned))
                        .flatten()
                })
            })
            .unwrap_or_else(|| "1_Pooling".to_owned());
        let pooling = match read_json(&dir.join(&pooling_dir).join("config.json"))? {
            Some(p) if p["pooling_mode_cls_token"].as_bool() == Some(true) => Pooling::Cls,
            Some(p)
                if p["pooling_mode_max_tokens"].as_bool() == Some(true)
                    || p["pooling_mode_mean_sqrt_len_tokens"].as_bool() == Some(true) =>
            {
                return Err(model_err(
                    dir,
                    "pooling modes other than mean and CLS are not supported",
                ));
            }
            _ => Pooling::Mean,
        };
        let max_tokens = read_json(&dir.join("sentence_bert_config.json"))?
            .and_then(|v| v["max_seq_length"].as_u64())
            .map(|n| n as usize)
            .unwrap_or(config.max_position_embeddings)
            .min(config.max_position_embeddings);

        let tok_path = dir.join("tokenizer.json");
        let mut tokenizer = Tokenizer::from_file(&tok_path).map_err(|e| model_err(&tok_path, e))?;
        tokenizer
            .with_truncation(Some(TruncationParams {
                max_length: max_tokens,
                strategy: TruncationStrategy::LongestFirst,
                stride: 0,
                direction: TruncationDirection::Right,
            }))
            .map_err(|e| model_err(&tok_path, e))?;
        tokenizer.with_padding(None);

        let weights = dir.join("model.safetensors");
        // SAFETY: the file is memory-mapped read-only; onrecord never writes
        // model files, and the tensors are copied out as they are built.
        let vb = unsafe {
            VarBuilder::from_mmaped_safetensors(
                std::slice::from_ref(&weights),
                DType::F32,
                &Device::Cpu,
            )
        }
        .map_err(|e| model_err(&weights, e))?;
        let model = BertModel::load(vb, &config).map_err(|e| model_err(&weights, e))?;
        let name = dir
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "model".into());
        // A snapshot folder in the hub cache is named by a commit hash; the
        // repository folder two levels up is the readable name.
        let name = hub::display_name(dir).unwrap_or(name);
        let fp = fingerprint(dir, &config_text, pooling, max_tokens)?;
        Ok(BertEmbedder {
            model,
            tokenizer,
            pooling,
            max_tokens,
            dim: config.hidden_size,
            id: format!("{name}@{fp}"),
            dir: dir.to_path_buf(),
        })
    }

    pub fn pooling(&self) -> Pooling {
        self.pooling
    }

    pub fn max_tokens(&self) -> usize {
        self.max_tokens
    }

    pub fn dir(&self) -> &Path {
        &self.dir
    }

    fn encode(&self, texts: &[&str]) -> Result<Vec<Vec<u32>>> {
        let enc = self
            .tokenizer
            .encode_batch(texts.to_vec(), true)
            .map_err(|e| model_err(&self.dir, format!("tokenizer: {e}")))?;
        Ok(enc.into_iter().map(|e| e.get_ids().to_vec()).collect())
    }

    fn forward(&self, batch: &[&Vec<u32>]) -> candle_core::Result<Vec<Vec<f32>>> {
        let len = batch.iter().map(|b| b.len()).max().unwrap_or(0).max(1);
        let n = batch.len();
        let mut ids = vec![0u32; n * len];
        let mut mask = vec![0u32; n * len];
        for (i, b) in batch.iter().enumerate() {
            ids[i * len..i * len + b.len()].copy_from_slice(b);
            mask[i * len..i * len + b.len()].fill(1);
        }
        let dev = Device::Cpu;
        let ids = Tensor::from_vec(ids, (n, len), &dev)?;
        let mask = Tensor::from_vec(mask, (n, len), &dev)?;
        let types = ids.zeros_like()?;
        let hidden = self.model.forward(&ids, &types, Some(&mask))?; // (n, len, dim)
        let pooled = match self.pooling {
            Pooling::Cls => hidden.narrow(1, 0, 1)?.squeeze(1)?,
            Pooling::Mean => {
                let m = mask.to_dtype(DType::F32)?.unsqueeze(2)?; // (n, len, 1)
                let sum = hidden.broadcast_mul(&m)?.sum(1)?; // (n, dim)
                let count = m.sum(1)?.clamp(1e-9f32, f32::MAX)?; // (n, 1)
                sum.broadcast_div(&count)?
            }
        };
        let mut out = pooled.to_vec2::<f32>()?;
        out.iter_mut().for_each(|v| normalise(v));
        Ok(out)
    }
}

/// Batches of indices into `lens`, shortest texts first, each at most
/// `max_batch` texts and `max_tokens` padded tokens.
pub fn length_buckets(lens: &[usize], max_batch: usize, max_tokens: usize) -> Vec<Vec<usize>> {
    let mut order: Vec<usize> = (0..lens.len()).collect();
    order.sort_by_key(|&i| (lens[i], i));
    let mut out: Vec<Vec<usize>> = Vec::new();
    let mut cur: Vec<usize> = Vec::new();
    for i in order {
        // Sorted ascending, so this text is the longest in the batch so far.
        let padded = (cur.len() + 1) * lens[i].max(1);
        if !cur.is_empty() && (cur.len() == max_batch || padded > max_tokens) {
            out.push(std::mem::take(&mut cur));
        }
        cur.push(i);
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

impl Embedder for BertEmbedder {
    fn id(&self) -> &str {
        &self.id
    }

    fn dim(&self) -> usize {
        self.dim
    }

    fn token_ids(&self, text: &str) -> Result<Vec<u32>> {
        Ok(self.encode(&[text])?.remove(0))
    }

    fn embed(&self, texts: &[&str]) -> Result<Vec<Vec<f32>>> {
        let ids = self.encode(texts)?;
        let lens: Vec<usize> = ids.iter().map(Vec::len).collect();
        let mut out: Vec<Vec<f32>> = vec![Vec::new(); texts.len()];
        for bucket in length_buckets(&lens, BATCH_SIZE, BATCH_TOKENS) {
            let batch: Vec<&Vec<u32>> = bucket.iter().map(|&i| &ids[i]).collect();
            let vecs = self.forward(&batch).map_err(|e| model_err(&self.dir, e))?;
            for (i, v) in bucket.into_iter().zip(vecs) {
                out[i] = v;
            }
        }
        Ok(out)
    }
}

use super::hub;

/// A short fingerprint of what determines the vectors: the config, the
/// tokenizer, the pooling, the truncation and the weights (their size and
/// first and last mebibyte, which is enough to tell real checkpoints apart
/// without hashing the whole file on every start).
fn fingerprint(dir: &Path, config: &str, pooling: Pooling, max_tokens: usize) -> Result<String> {
    let mut h = Sha256::new();
    h.update(config.as_bytes());
    let tok = dir.join("tokenizer.json");
    h.update(std::fs::read(&tok).map_err(|e| crate::error::Error::io(&tok, e))?);
    h.update(format!("{pooling:?}/{max_tokens}").as_bytes());
    let w = dir.join("model.safetensors");
    let io = |e| crate::error::Error::io(&w, e);
    let mut f = std::fs::File::open(&w).map_err(io)?;
    let len = f.metadata().map_err(io)?.len();
    h.update(len.to_le_bytes());
    const MIB: u64 = 1 << 20;
    let mut buf = vec![0u8; MIB.min(len) as usize];
    f.read_exact(&mut buf).map_err(io)?;
    h.update(&buf);
    f.seek(SeekFrom::Start(len.saturating_sub(MIB)))
        .map_err(io)?;
    f.read_exact(&mut buf).map_err(io)?;
    h.update(&buf);
    let d = h.finalize();
    Ok(d.iter().take(6).map(|b| format!("{b:02x}")).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn buckets_sort_by_length_and_respect_limits() {
        let lens = [5, 300, 7, 6, 200, 8, 9];
        let b = length_buckets(&lens, 3, 10_000);
        assert_eq!(b, vec![vec![0, 3, 2], vec![5, 6, 4], vec![1]]);
        // Token cap: two 300-token texts do not fit under 500 padded tokens.
        let b = length_buckets(&[300, 300, 10], 32, 500);
        assert_eq!(b, vec![vec![2], vec![0], vec![1]]);
        let all: Vec<usize> = {
            let mut v: Vec<usize> = length_buckets(&lens, 2, 50).concat();
            v.sort();
            v
        };
        assert_eq!(all, (0..lens.len()).collect::<Vec<_>>());
    }
}
