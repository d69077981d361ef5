//! Evaluation: retrieval metrics (computed as trec_eval computes them),
//! answer metrics (as SQuAD v1.1's script computes them), the BEIR-layout
//! retrieval check, the verifier's pairs, and the question-set harness
//! (`eval run`) with its paired bootstrap and report.
//!
//! invariant: evaluation builds its own index for open-data corpora; on a
//! user's index it only reads (no answer is logged, no document changes).

pub mod answers;
pub mod beir;
pub mod bootstrap;
pub mod metrics;
pub mod pairs;
pub mod questions;
pub mod report;
pub mod run;
pub mod selection;
pub mod squad;

/// Peak resident memory of this process in MiB (Linux `VmHWM`), NaN where
/// the kernel does not report it. Used by the benchmarks.
pub fn peak_rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).and_then(|l| {
                l.split_whitespace()
                    .nth(1)
                    .and_then(|v| v.parse::<f64>().ok())
            })
        })
        .map(|kb| kb / 1024.0)
        .unwrap_or(f64::NAN)
}

/// A small deterministic generator (SplitMix64), for seeded pair
/// generation and bootstrap resampling.
pub(crate) struct Rng(u64);

impl Rng {
    pub(crate) fn new(seed: u64, a: usize, b: usize) -> Rng {
        Rng(seed
            ^ (a as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15)
            ^ (b as u64).wrapping_mul(0xC2B2_AE3D_27D4_EB4F))
    }

    pub(crate) fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    pub(crate) fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}
