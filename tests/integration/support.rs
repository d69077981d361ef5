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

/// Check `v` against the subset of JSON Schema the project's schema files
/// use (type, required, properties, items, enum, const). Returns the
/// problems found, each with its JSON path.
pub fn schema_problems(v: &serde_json::Value, schema: &serde_json::Value, at: &str) -> Vec<String> {
    use serde_json::Value;
    let mut out = Vec::new();
    if let Some(t) = schema.get("type").and_then(Value::as_str) {
        let ok = match t {
            "object" => v.is_object(),
            "array" => v.is_array(),
            "string" => v.is_string(),
            "integer" => v.is_i64() || v.is_u64(),
            "number" => v.is_number(),
            "boolean" => v.is_boolean(),
            _ => true,
        };
        if !ok {
            out.push(format!("{at}: expected {t}, got {v}"));
            return out;
        }
    }
    if let Some(c) = schema.get("const")
        && v != c
    {
        out.push(format!("{at}: expected {c}, got {v}"));
    }
    if let Some(e) = schema.get("enum").and_then(Value::as_array)
        && !e.contains(v)
    {
        out.push(format!("{at}: {v} is not one of {e:?}"));
    }
    if let Some(req) = schema.get("required").and_then(Value::as_array) {
        for k in req.iter().filter_map(Value::as_str) {
            if v.get(k).is_none() {
                out.push(format!("{at}: missing `{k}`"));
            }
        }
    }
    if let (Some(props), Some(obj)) = (
        schema.get("properties").and_then(Value::as_object),
        v.as_object(),
    ) {
        for (k, sub) in props {
            if let Some(val) = obj.get(k) {
                out.extend(schema_problems(val, sub, &format!("{at}.{k}")));
            }
        }
    }
    if let (Some(items), Some(arr)) = (schema.get("items"), v.as_array()) {
        for (i, val) in arr.iter().enumerate() {
            out.extend(schema_problems(val, items, &format!("{at}[{i}]")));
        }
    }
    out
}
