//! Evaluation: retrieval metrics (computed as trec_eval computes them) and
//! the BEIR-layout retrieval check.
//!
//! invariant: evaluation builds its own temporary index; it never writes to
//! a user's index.

pub mod beir;
pub mod metrics;
pub mod squad;
