//! Evaluation: retrieval metrics (computed as trec_eval computes them) and
//! the BEIR-layout retrieval check.
//!
//! invariant: evaluation builds its own temporary index; it never writes to
//! a user's index.

pub mod beir;
pub mod metrics;
pub mod pairs;
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
