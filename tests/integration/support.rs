//! Shared helpers for the integration tests.

use onrecord::ingest::{Diagnostic, IngestConfig, Report, ingest_paths};
use std::path::{Path, PathBuf};

/// Slow tests run only when ONRECORD_SLOW=1 (CI sets it).
pub fn slow_enabled(name: &str) -> bool {
    let on = std::env::var("ONRECORD_SLOW").is_ok_and(|v| v == "1");
    if !on {
        eprintln!("{name}: slow test skipped; set ONRECORD_SLOW=1 to run it");
    }
    on
}

/// A folder under the shared open data, or None with a clear message when it
/// is absent. Under CI=true an absent folder is a failure.
pub fn shared_data(rel: &str) -> Option<PathBuf> {
    let dir = onrecord::shared_data_dir().join(rel);
    if dir.exists() {
        return Some(dir);
    }
    let msg = format!(
        "open data {} not found; set ONRECORD_SHARED_DATA to the folder holding scifact/, squad-v1.1/, unicode-uax29-15.0.0/",
        dir.display()
    );
    if std::env::var("CI").is_ok_and(|v| v == "true") {
        panic!("{msg} (required under CI=true)");
    }
    eprintln!("{msg}; check skipped");
    None
}

pub fn write(dir: &Path, name: &str, body: impl AsRef<[u8]>) -> PathBuf {
    let p = dir.join(name);
    if let Some(parent) = p.parent() {
        std::fs::create_dir_all(parent).unwrap();
    }
    std::fs::write(&p, body).unwrap();
    p
}

pub fn ingest(index: &Path, paths: &[PathBuf]) -> (Report, Vec<Diagnostic>) {
    ingest_paths(index, paths, &IngestConfig::default()).expect("ingest runs")
}

pub fn ingest_with(
    index: &Path,
    paths: &[PathBuf],
    cfg: &IngestConfig,
) -> (Report, Vec<Diagnostic>) {
    ingest_paths(index, paths, cfg).expect("ingest runs")
}
