//! A dense llama-family decoder (SmolLM2, Llama 3.x) on candle whose linear
//! layers keep two copies of each weight: the quantized one, for decoding
//! one token at a time (memory-bound, where 8-bit weights win), and, when
//! the model is small enough, an f32 one for reading the prompt (compute-
//! bound, where candle's f32 matrix product is about four times faster than
//! its quantized one on x86). The layer arithmetic follows
//! candle-transformers' `quantized_llama` (same rotary tables, mask and
//! attention), so both paths compute the same function.
//!
//! invariant: the two copies of a weight come from the same tensor; which
//! one runs depends only on how many positions are in the call.

use candle_core::quantized::{QMatMul, QTensor, gguf_file};
use candle_core::{DType, Device, IndexOp, Module, Result, Tensor};
use candle_transformers::quantized_nn::RmsNorm;
use std::io::{Read, Seek};

/// Rotary tables cover this many positions (as candle's llama does).
pub const MAX_SEQ_LEN: usize = 4096;

/// A weight with its quantized form and, optionally, an f32 form.
struct Dual {
    q: QMatMul,
    f: Option<QMatMul>,
}

impl Dual {
    fn new(t: QTensor, f32_copy: bool) -> Result<Dual> {
        let f = if f32_copy {
            Some(QMatMul::Tensor(t.dequantize(&Device::Cpu)?))
        } else {
            None
        };
        Ok(Dual {
            q: QMatMul::from_qtensor(t)?,
            f,
        })
    }

    fn forward(&self, x: &Tensor) -> Result<Tensor> {
        let rows = x.dims().iter().rev().skip(1).product::<usize>();
        match &self.f {
            Some(f) if rows > 1 => f.forward(x),
            _ => self.q.forward(x),
        }
    }
}

struct Layer {
    wq: Dual,
    wk: Dual,
    wv: Dual,
    wo: Dual,
    w_gate: Dual,
    w_up: Dual,
    w_down: Dual,
    attn_norm: RmsNorm,
    ffn_norm: RmsNorm,
    /// Keys and values written in place into a buffer that grows in
    /// blocks, so a decoding step copies nothing it already has.
    kv: candle_nn::kv_cache::KvCache,
}

/// Positions the key/value buffers grow by.
const KV_BLOCK: usize = 512;

pub struct Llama {
    embed: candle_nn::Embedding,
    layers: Vec<Layer>,
    norm: RmsNorm,
    output: QMatMul,
    n_head: usize,
    n_kv_head: usize,
    head_dim: usize,
    cos: Tensor,
    sin: Tensor,
    neg_inf: Tensor,
    /// True when the f32 copies for prompts were made.
    pub prefill_f32: bool,
}

fn md<'a>(ct: &'a gguf_file::Content, key: &str) -> Result<&'a gguf_file::Value> {
    ct.metadata
        .get(key)
        .ok_or_else(|| candle_core::Error::Msg(format!("cannot find {key} in metadata")))
}

/// Bytes the f32 copies of a file's block weights would take.
pub fn f32_copy_bytes(ct: &gguf_file::Content) -> usize {
    ct.tensor_infos
        .iter()
        .filter(|(n, _)| n.starts_with("blk."))
        .map(|(_, t)| t.shape.elem_count() * 4)
        .sum()
}

impl Llama {
    /// Whether a GGUF file is a dense llama this module runs (no experts).
    pub fn handles(ct: &gguf_file::Content) -> bool {
        ct.metadata
            .get("llama.expert_count")
            .and_then(|v| v.to_u32().ok())
            .unwrap_or(0)
            <= 1
    }

    /// Load; `f32_budget` bytes or fewer of f32 copies are made for prompts.
    pub fn from_gguf<R: Read + Seek>(
        ct: gguf_file::Content,
        r: &mut R,
        f32_budget: usize,
    ) -> Result<Llama> {
        let dev = &Device::Cpu;
        let n_head = md(&ct, "llama.attention.head_count")?.to_u32()? as usize;
        let n_kv_head = md(&ct, "llama.attention.head_count_kv")?.to_u32()? as usize;
        let blocks = md(&ct, "llama.block_count")?.to_u32()? as usize;
        let embed_len = md(&ct, "llama.embedding_length")?.to_u32()? as usize;
        let rope_dim = md(&ct, "llama.rope.dimension_count")?.to_u32()? as usize;
        let eps = md(&ct, "llama.attention.layer_norm_rms_epsilon")?.to_f32()? as f64;
        let base = md(&ct, "llama.rope.freq_base")
            .and_then(|v| v.to_f32())
            .unwrap_or(10_000.0);
        let prefill_f32 = f32_copy_bytes(&ct) <= f32_budget;

        let theta: Vec<f32> = (0..rope_dim)
            .step_by(2)
            .map(|i| 1f32 / base.powf(i as f32 / rope_dim as f32))
            .collect();
        let theta = Tensor::new(theta.as_slice(), dev)?;
        let idx = Tensor::arange(0, MAX_SEQ_LEN as u32, dev)?
            .to_dtype(DType::F32)?
            .reshape((MAX_SEQ_LEN, 1))?
            .matmul(&theta.reshape((1, theta.elem_count()))?)?;
        let (cos, sin) = (idx.cos()?, idx.sin()?);

        let embed_q = ct.tensor(r, "token_embd.weight", dev)?;
        let embed = candle_nn::Embedding::new(embed_q.dequantize(dev)?, embed_len);
        let norm = RmsNorm::from_qtensor(ct.tensor(r, "output_norm.weight", dev)?, eps)?;
        let output = match ct.tensor(r, "output.weight", dev) {
            Ok(t) => t,
            Err(_) => embed_q,
        };
        let mut layers = Vec::with_capacity(blocks);
        for i in 0..blocks {
            let mut t = |name: &str| ct.tensor(r, &format!("blk.{i}.{name}.weight"), dev);
            let mut dual = |name: &str| -> Result<Dual> { Dual::new(t(name)?, prefill_f32) };
            let wq = dual("attn_q")?;
            let wk = dual("attn_k")?;
            let wv = dual("attn_v")?;
            let wo = dual("attn_output")?;
            let w_gate = dual("ffn_gate")?;
            let w_up = dual("ffn_up")?;
            let w_down = dual("ffn_down")?;
            let attn_norm = RmsNorm::from_qtensor(
                ct.tensor(r, &format!("blk.{i}.attn_norm.weight"), dev)?,
                eps,
            )?;
            let ffn_norm = RmsNorm::from_qtensor(
                ct.tensor(r, &format!("blk.{i}.ffn_norm.weight"), dev)?,
                eps,
            )?;
            layers.push(Layer {
                wq,
                wk,
                wv,
                wo,
                w_gate,
                w_up,
                w_down,
                attn_norm,
                ffn_norm,
                kv: candle_nn::kv_cache::KvCache::new(2, KV_BLOCK),
            });
        }
        Ok(Llama {
            embed,
            layers,
            norm,
            output: QMatMul::from_qtensor(output)?,
            n_head,
            n_kv_head,
            head_dim: embed_len / n_head,
            cos,
            sin,
            neg_inf: Tensor::new(f32::NEG_INFINITY, dev)?,
            prefill_f32,
        })
    }

    pub fn clear_kv_cache(&mut self) {
        for l in &mut self.layers {
            l.kv.reset();
        }
    }

    /// Logits for the last of `x`'s positions `pos..pos + len`, which must
    /// follow the positions already cached (or start at 0 after a reset).
    pub fn forward(&mut self, x: &Tensor, pos: usize) -> Result<Tensor> {
        let (b, seq) = x.dims2()?;
        let (n_head, n_kv, hd) = (self.n_head, self.n_kv_head, self.head_dim);
        let n_rep = n_head / n_kv;
        // Queries are grouped by the key/value head they share, so the
        // attention runs against each cached head once, without copies.
        let mask = if seq == 1 {
            None
        } else {
            let m = candle_transformers::utils::build_causal_mask(seq, pos, x.device())?;
            Some(Tensor::cat(&vec![&m; n_rep], 0)?)
        };
        let scale = 1.0 / (hd as f64).sqrt();
        let mut h = self.embed.forward(x)?;
        for l in self.layers.iter_mut() {
            let residual = h.clone();
            let xn = l.attn_norm.forward(&h)?;
            let q =
                l.wq.forward(&xn)?
                    .reshape((b, seq, n_head, hd))?
                    .transpose(1, 2)?;
            let k =
                l.wk.forward(&xn)?
                    .reshape((b, seq, n_kv, hd))?
                    .transpose(1, 2)?;
            let v =
                l.wv.forward(&xn)?
                    .reshape((b, seq, n_kv, hd))?
                    .transpose(1, 2)?
                    .contiguous()?;
            let q = rope(&self.cos, &self.sin, &q, pos)?;
            let k = rope(&self.cos, &self.sin, &k, pos)?;
            let (k, v) = l.kv.append(&k, &v)?;
            let q = q.reshape((b, n_kv, n_rep * seq, hd))?;
            let att = (q.matmul(&k.t()?)? * scale)?;
            let att = match &mask {
                None => att,
                Some(m) => {
                    let m = m.broadcast_as(att.shape())?;
                    m.where_cond(&self.neg_inf.broadcast_as(att.shape().dims())?, &att)?
                }
            };
            let att = candle_nn::ops::softmax_last_dim(&att)?;
            let y = att
                .matmul(&v)?
                .reshape((b, n_head, seq, hd))?
                .transpose(1, 2)?
                .reshape((b, seq, n_head * hd))?;
            let h1 = (l.wo.forward(&y)? + residual)?;
            let xn = l.ffn_norm.forward(&h1)?;
            let gate = candle_nn::ops::silu(&l.w_gate.forward(&xn)?)?;
            let mlp = l.w_down.forward(&(gate * l.w_up.forward(&xn)?)?)?;
            h = (mlp + h1)?;
        }
        let h = self.norm.forward(&h)?;
        let last = h.i((.., seq - 1, ..))?;
        self.output.forward(&last)
    }
}

fn rope(cos: &Tensor, sin: &Tensor, x: &Tensor, pos: usize) -> Result<Tensor> {
    let (_, _, seq, _) = x.dims4()?;
    let cos = cos.narrow(0, pos, seq)?;
    let sin = sin.narrow(0, pos, seq)?;
    candle_nn::rotary_emb::rope_i(&x.contiguous()?, &cos, &sin)
}
