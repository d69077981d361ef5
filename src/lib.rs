//! onrecord answers questions from released public records and emits only
//! sentences that a verbatim quote from a cited page supports.
//!
//! Data flow: `ingest` (extract → chunk → store + BM25 → embed + vectors) →
//! `retrieve` (BM25, dense, fused) →
//! `draft` (extractive, or a language model in `llm` prompted from `prompt`) → `verify` → `answer` (emit). See DEVELOPERS.md for where each part lives
//! and the invariants each module keeps.

pub mod answer;
pub mod bm25;
pub mod chunk;
pub mod config;
pub mod demo;
pub mod draft;
pub mod embed;
pub mod error;
pub mod eval;
pub mod extract;
pub mod feedback;
pub mod fuse;
pub mod ingest;
pub mod learn;
pub mod llm;
pub mod lock;
pub mod manifest;
pub mod ocr;
pub mod prompt;
pub mod replay;
pub mod retrieve;
pub mod segment;
pub mod select;
pub mod store;
pub mod text;
pub mod types;
pub mod units;
pub mod vectors;
pub mod verify;
pub mod web;

pub use error::{Error, Result};

/// The folder of the open datasets used by external checks: the
/// `ONRECORD_SHARED_DATA` variable, else `../shared/data` beside the project.
pub fn shared_data_dir() -> std::path::PathBuf {
    match std::env::var_os("ONRECORD_SHARED_DATA") {
        Some(d) => d.into(),
        None => std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../shared/data"),
    }
}

/// The folder of reference outputs from general-purpose libraries (parity
/// fixtures): `ONRECORD_SHARED_REFERENCE`, else `reference` beside the
/// shared data folder.
pub fn shared_reference_dir() -> std::path::PathBuf {
    match std::env::var_os("ONRECORD_SHARED_REFERENCE") {
        Some(d) => d.into(),
        None => shared_data_dir().join("../reference"),
    }
}
