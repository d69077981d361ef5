//! Loads and runs the weights of a quantized GGUF language model on the CPU
//! through candle-transformers. Nothing else: prompting, tokenising and
//! sampling live in the modules beside this one.
//!
//! Tensor types that have no fast CPU dot product in candle (Q4_1, Q5_0,
//! Q5_1) run 3–6× slower than Q8_0, so such a file is re-encoded once to
//! Q8_0 and the result cached beside the other models; later loads read the
//! cached copy directly.
//!
//! invariant: a cached re-encoding is used only when its recorded source
//! fingerprint (size plus hashes of the first and last MiB) matches the file
//! being loaded; it is written to a temporary name and renamed into place.

use crate::error::{Error, Result};
use candle_core::quantized::{GgmlDType, QTensor, gguf_file};
use candle_core::{Device, Tensor};
use candle_transformers::models::{quantized_llama, quantized_qwen2, quantized_qwen3};
use sha2::{Digest, Sha256};
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

/// Model families this build runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Arch {
    Llama,
    Qwen2,
    Qwen3,
}

impl Arch {
    pub fn name(self) -> &'static str {
        match self {
            Arch::Llama => "llama",
            Arch::Qwen2 => "qwen2",
            Arch::Qwen3 => "qwen3",
        }
    }
}

enum Net {
    /// Dense llama-family: our decoder with f32 prompt weights.
    Dense(super::llama::Llama),
    /// Llama-family with experts: candle-transformers' implementation.
    Llama(quantized_llama::ModelWeights),
    Qwen2(quantized_qwen2::ModelWeights),
    Qwen3(quantized_qwen3::ModelWeights),
}

/// A loaded model: call [`Weights::forward`] with consecutive token slices.
pub struct Weights {
    net: Net,
    pub arch: Arch,
    /// Positions the model (as loaded) can attend over.
    pub context: usize,
    /// Metadata of the GGUF file (tokenizer, chat template, ...).
    pub metadata: std::collections::HashMap<String, gguf_file::Value>,
    /// The file the weights were read from (the re-encoded copy if any).
    pub loaded_from: PathBuf,
    /// True when a slow tensor type was re-encoded (now or earlier).
    pub reencoded: bool,
    /// True when prompts run through f32 copies of the weights.
    pub prompt_f32: bool,
    device: Device,
}

fn model_err(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Model {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

/// True for tensor types that candle multiplies without a SIMD kernel on x86.
pub fn is_slow(t: GgmlDType) -> bool {
    matches!(t, GgmlDType::Q4_1 | GgmlDType::Q5_0 | GgmlDType::Q5_1)
}

fn read_content(path: &Path) -> Result<(gguf_file::Content, std::fs::File)> {
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let ct = gguf_file::Content::read(&mut f)
        .map_err(|e| model_err(path, format!("not a readable GGUF file: {e}")))?;
    Ok((ct, f))
}

/// Size plus sha256 of the first and last MiB: cheap, and changes when the
/// file is replaced.
pub fn fingerprint(path: &Path) -> Result<String> {
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let len = f.metadata().map_err(|e| Error::io(path, e))?.len();
    let mut h = Sha256::new();
    h.update(len.to_le_bytes());
    let mut buf = vec![0u8; 1 << 20];
    let n = f.read(&mut buf).map_err(|e| Error::io(path, e))?;
    h.update(&buf[..n]);
    if len > (2 << 20) {
        f.seek(SeekFrom::End(-(1 << 20)))
            .map_err(|e| Error::io(path, e))?;
        f.read_exact(&mut buf).map_err(|e| Error::io(path, e))?;
        h.update(&buf);
    }
    let d = h.finalize();
    Ok(d.iter().take(8).map(|b| format!("{b:02x}")).collect())
}

/// Where the re-encoded copy of `source` lives.
pub fn reencoded_path(source: &Path, cache_dir: &Path) -> Result<PathBuf> {
    let stem = source
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "model".into());
    Ok(cache_dir.join(format!("{stem}.{}.q8_0.gguf", fingerprint(source)?)))
}

/// Re-encode the slow tensors of `source` to Q8_0 into `dest` (atomically).
pub fn reencode(source: &Path, dest: &Path) -> Result<()> {
    let (ct, mut f) = read_content(source)?;
    let mut names: Vec<&String> = ct.tensor_infos.keys().collect();
    names.sort();
    let mut tensors = Vec::with_capacity(names.len());
    for name in &names {
        let t = ct
            .tensor(&mut f, name, &Device::Cpu)
            .map_err(|e| model_err(source, format!("tensor {name}: {e}")))?;
        let t = if is_slow(t.dtype()) && t.shape().dims().last().is_some_and(|d| d % 32 == 0) {
            let full = t
                .dequantize(&Device::Cpu)
                .map_err(|e| model_err(source, e))?;
            QTensor::quantize(&full, GgmlDType::Q8_0).map_err(|e| model_err(source, e))?
        } else {
            t
        };
        tensors.push(t);
    }
    let mut meta: Vec<(&str, &gguf_file::Value)> =
        ct.metadata.iter().map(|(k, v)| (k.as_str(), v)).collect();
    meta.sort_by(|a, b| a.0.cmp(b.0));
    let pairs: Vec<(&str, &QTensor)> = names
        .iter()
        .map(|n| n.as_str())
        .zip(tensors.iter())
        .collect();
    let dir = dest.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut tmp = tempfile::NamedTempFile::new_in(dir).map_err(|e| Error::io(dir, e))?;
    {
        let mut w = std::io::BufWriter::new(tmp.as_file_mut());
        gguf_file::write(&mut w, &meta, &pairs).map_err(|e| model_err(dest, e))?;
        std::io::Write::flush(&mut w).map_err(|e| Error::io(dest, e))?;
    }
    tmp.persist(dest).map_err(|e| Error::io(dest, e.error))?;
    Ok(())
}

/// How the caller wants slow tensor types handled.
#[derive(Debug, Clone)]
pub struct LoadOptions {
    /// Folder for re-encoded copies; `None` loads the file as it is.
    pub reencode_cache: Option<PathBuf>,
    /// Most bytes of f32 weight copies made to read prompts faster (dense
    /// llama-family models only); 0 turns them off.
    pub prompt_f32_budget: usize,
}

/// Default for [`LoadOptions::prompt_f32_budget`]: enough for models of up
/// to about 250M parameters (the default model needs about 0.4 GiB).
pub const PROMPT_F32_BUDGET: usize = 1 << 30;

impl Weights {
    /// Load a GGUF file, re-encoding slow tensor types once if asked.
    pub fn load(path: &Path, opts: &LoadOptions) -> Result<Weights> {
        let (ct, _) = read_content(path)?;
        let slow = ct.tensor_infos.values().any(|t| is_slow(t.ggml_dtype));
        let mut reencoded = false;
        let source = match (&opts.reencode_cache, slow) {
            (Some(cache), true) => {
                let dest = reencoded_path(path, cache)?;
                if !dest.exists() {
                    tracing::info!(
                        "re-encoding {} to Q8_0 for speed (once; cached at {})",
                        path.display(),
                        dest.display()
                    );
                    reencode(path, &dest)?;
                }
                reencoded = true;
                dest
            }
            _ => path.to_path_buf(),
        };
        let (ct, mut f) = read_content(&source)?;
        let arch_name = ct
            .metadata
            .get("general.architecture")
            .and_then(|v| v.to_string().ok())
            .cloned()
            .unwrap_or_default();
        let arch = match arch_name.as_str() {
            "llama" => Arch::Llama,
            "qwen2" => Arch::Qwen2,
            "qwen3" => Arch::Qwen3,
            other => {
                return Err(model_err(
                    path,
                    format!(
                        "architecture \u{201C}{other}\u{201D} is not supported; \
                         use a llama-family, qwen2 or qwen3 GGUF file"
                    ),
                ));
            }
        };
        let trained = ct
            .metadata
            .get(&format!("{}.context_length", arch.name()))
            .and_then(|v| v.to_u32().ok())
            .unwrap_or(2048) as usize;
        // candle's llama precomputes rotary tables for MAX_SEQ_LEN positions.
        let context = match arch {
            Arch::Llama => trained
                .min(quantized_llama::MAX_SEQ_LEN)
                .min(super::llama::MAX_SEQ_LEN),
            _ => trained,
        };
        let metadata = ct.metadata.clone();
        let device = Device::Cpu;
        let net = match arch {
            Arch::Llama if super::llama::Llama::handles(&ct) => Net::Dense(
                super::llama::Llama::from_gguf(ct, &mut f, opts.prompt_f32_budget)
                    .map_err(|e| model_err(path, e))?,
            ),
            Arch::Llama => Net::Llama(
                quantized_llama::ModelWeights::from_gguf(ct, &mut f, &device)
                    .map_err(|e| model_err(path, e))?,
            ),
            Arch::Qwen2 => Net::Qwen2(
                quantized_qwen2::ModelWeights::from_gguf(ct, &mut f, &device)
                    .map_err(|e| model_err(path, e))?,
            ),
            Arch::Qwen3 => Net::Qwen3(
                quantized_qwen3::ModelWeights::from_gguf(ct, &mut f, &device)
                    .map_err(|e| model_err(path, e))?,
            ),
        };
        let prompt_f32 = matches!(&net, Net::Dense(m) if m.prefill_f32);
        Ok(Weights {
            prompt_f32,
            net,
            arch,
            context,
            metadata,
            loaded_from: source,
            reencoded,
            device,
        })
    }

    /// Forget the attention cache: the next call starts a new sequence.
    pub fn reset(&mut self) {
        match &mut self.net {
            Net::Dense(m) => m.clear_kv_cache(),
            Net::Llama(m) => m.clear_kv_cache(),
            Net::Qwen2(m) => m.clear_kv_cache(),
            Net::Qwen3(m) => m.clear_kv_cache(),
        }
    }

    /// Run `tokens` at positions `pos..pos + tokens.len()` and return the
    /// logits for the last one.
    pub fn forward(&mut self, tokens: &[u32], pos: usize) -> Result<Vec<f32>> {
        let err = |e: candle_core::Error| Error::Model {
            path: PathBuf::from(self.arch.name()),
            message: e.to_string(),
        };
        let x = Tensor::new(tokens, &self.device)
            .and_then(|t| t.unsqueeze(0))
            .map_err(err)?;
        let logits = match &mut self.net {
            Net::Dense(m) => m.forward(&x, pos),
            Net::Llama(m) => m.forward(&x, pos),
            Net::Qwen2(m) => m.forward(&x, pos),
            Net::Qwen3(m) => m.forward(&x, pos),
        }
        .map_err(err)?;
        logits
            .to_dtype(candle_core::DType::F32)
            .and_then(|l| l.flatten_all())
            .and_then(|l| l.to_vec1::<f32>())
            .map_err(err)
    }
}
