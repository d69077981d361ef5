//! The one integration-test binary. Modules group the checks by feature;
//! `support` holds the shared helpers.

mod answers;
mod browser;
mod cli;
mod demo;
mod drafting;
mod endpoint;
mod eval_run;
mod faults;
mod ingest;
mod kills;
mod ocr;
mod open_data;
mod replay;
mod retrieval;
mod selection;
mod support;
mod verifier;
mod web;

/// As in the binary: the embedding model allocates many short-lived tensors.
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;
