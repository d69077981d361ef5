//! The one integration-test binary. Modules group the checks by feature;
//! `support` holds the shared helpers.

mod answers;
mod cli;
mod demo;
mod ingest;
mod open_data;
mod support;
