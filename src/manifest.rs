//! The metadata manifest: a CSV (with a header row) or JSON Lines file that
//! maps each source file to its title, organisation, date, release number and
//! source URL. Paths in the manifest are relative to the manifest's folder.
//!
//! Columns / keys: `file` (required), `id`, `title`, `organisation` (or
//! `org`), `date` (YYYY-MM-DD), `release` (or `request`), `url`.

use crate::error::{Error, Result};
use crate::types::{DocMeta, check_date};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// One manifest entry.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Entry {
    pub id: Option<String>,
    pub meta: DocMeta,
}

/// Manifest entries keyed by canonical file path.
#[derive(Debug, Default)]
pub struct Manifest {
    entries: HashMap<PathBuf, Entry>,
}

impl Manifest {
    pub fn get(&self, canonical: &Path) -> Option<&Entry> {
        self.entries.get(canonical)
    }

    pub fn len(&self) -> usize {
        self.entries.len()
    }

    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// Merge another manifest in; entries in `other` win.
    pub fn extend(&mut self, other: Manifest) {
        self.entries.extend(other.entries);
    }

    /// Read a manifest. Format by extension: `.csv`, or `.jsonl`/`.ndjson`/`.json`.
    /// A row naming a file that does not exist is an error naming the line.
    pub fn load(path: &Path) -> Result<Manifest> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let base = path.parent().unwrap_or(Path::new("."));
        let ext = path
            .extension()
            .and_then(|e| e.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        let rows: Vec<(usize, HashMap<String, String>)> = match ext.as_str() {
            "csv" => csv_rows(path, &text)?,
            "jsonl" | "ndjson" | "json" => json_rows(path, &text)?,
            _ => {
                return Err(Error::BadInput {
                    path: path.to_path_buf(),
                    line: 0,
                    message: "a manifest must be .csv or .jsonl".into(),
                });
            }
        };
        let mut entries = HashMap::new();
        for (line, mut row) in rows {
            let bad = |message: String| Error::BadInput {
                path: path.to_path_buf(),
                line,
                message,
            };
            let file = row
                .remove("file")
                .filter(|f| !f.trim().is_empty())
                .ok_or_else(|| bad("missing `file`".into()))?;
            let full = base.join(file.trim());
            let canonical = full
                .canonicalize()
                .map_err(|e| bad(format!("file {} : {e}", full.display())))?;
            let mut take = |keys: &[&str]| {
                keys.iter()
                    .find_map(|k| row.remove(*k))
                    .map(|v| v.trim().to_string())
                    .filter(|v| !v.is_empty())
            };
            let entry = Entry {
                id: take(&["id"]),
                meta: DocMeta {
                    title: take(&["title"]),
                    organisation: take(&["organisation", "organization", "org"]),
                    date: take(&["date"]),
                    release: take(&["release", "request"]),
                    url: take(&["url", "source_url"]),
                },
            };
            if let Some(d) = &entry.meta.date {
                check_date(d).map_err(bad)?;
            }
            if let Some(id) = &entry.id {
                check_doc_id(id).map_err(bad)?;
            }
            entries.insert(canonical, entry);
        }
        Ok(Manifest { entries })
    }
}

/// Document ids are short, printable and free of white space, so they can be
/// typed in a `--doc` filter and written in a footnote.
pub fn check_doc_id(id: &str) -> std::result::Result<(), String> {
    if id.is_empty() || id.len() > 200 || id.chars().any(|c| c.is_whitespace() || c.is_control()) {
        Err(format!(
            "document id `{id}` must be 1-200 characters with no spaces"
        ))
    } else {
        Ok(())
    }
}

fn csv_rows(path: &Path, text: &str) -> Result<Vec<(usize, HashMap<String, String>)>> {
    let mut rdr = csv::ReaderBuilder::new()
        .flexible(false)
        .from_reader(text.as_bytes());
    let headers: Vec<String> = rdr
        .headers()
        .map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: 1,
            message: e.to_string(),
        })?
        .iter()
        .map(|h| h.trim().to_ascii_lowercase())
        .collect();
    let mut out = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: e.position().map(|p| p.line() as usize).unwrap_or(0),
            message: e.to_string(),
        })?;
        let line = rec.position().map(|p| p.line() as usize).unwrap_or(0);
        let row = headers
            .iter()
            .cloned()
            .zip(rec.iter().map(|s| s.to_string()))
            .collect();
        out.push((line, row));
    }
    Ok(out)
}

fn json_rows(path: &Path, text: &str) -> Result<Vec<(usize, HashMap<String, String>)>> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        let v: serde_json::Map<String, serde_json::Value> =
            serde_json::from_str(line).map_err(|e| Error::BadInput {
                path: path.to_path_buf(),
                line: i + 1,
                message: format!("not a JSON object: {e}"),
            })?;
        let row = v
            .into_iter()
            .filter_map(|(k, v)| {
                let s = match v {
                    serde_json::Value::String(s) => s,
                    serde_json::Value::Null => return None,
                    other => other.to_string(),
                };
                Some((k.to_ascii_lowercase(), s))
            })
            .collect();
        out.push((i + 1, row));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_and_jsonl_manifests() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("a.txt"), "x").unwrap();
        std::fs::write(
            dir.path().join("m.csv"),
            "file,title,org,date,release,url\na.txt,\"Memo, re: Pier 3\",Harbour Authority,2019-03-14,KARA-1,https://x.example/a\n",
        )
        .unwrap();
        let m = Manifest::load(&dir.path().join("m.csv")).unwrap();
        let e = m
            .get(&dir.path().join("a.txt").canonicalize().unwrap())
            .unwrap();
        assert_eq!(e.meta.title.as_deref(), Some("Memo, re: Pier 3"));
        assert_eq!(e.meta.organisation.as_deref(), Some("Harbour Authority"));
        assert_eq!(e.meta.release.as_deref(), Some("KARA-1"));

        std::fs::write(
            dir.path().join("m.jsonl"),
            "{\"file\":\"a.txt\",\"id\":\"memo-1\",\"date\":\"2019-03\"}\n",
        )
        .unwrap();
        let m = Manifest::load(&dir.path().join("m.jsonl")).unwrap();
        let e = m
            .get(&dir.path().join("a.txt").canonicalize().unwrap())
            .unwrap();
        assert_eq!(e.id.as_deref(), Some("memo-1"));
    }

    #[test]
    fn bad_rows_name_the_line() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("a.txt"), "x").unwrap();
        let cases = [
            (
                "m.jsonl",
                "{\"file\":\"a.txt\"}\n{\"file\":\"a.txt\",\"date\":\"March 2019\"}\n",
                2,
                "not a date",
            ),
            ("m2.jsonl", "{\"file\":\"missing.txt\"}\n", 1, "missing.txt"),
            ("m3.jsonl", "{\"title\":\"x\"}\n", 1, "missing `file`"),
            ("m4.jsonl", "not json\n", 1, "not a JSON object"),
        ];
        for (name, body, want_line, want_msg) in cases {
            std::fs::write(dir.path().join(name), body).unwrap();
            match Manifest::load(&dir.path().join(name)) {
                Err(Error::BadInput { line, message, .. }) => {
                    assert_eq!(line, want_line, "{name}");
                    assert!(message.contains(want_msg), "{name}: {message}");
                }
                other => panic!("{name}: expected a bad-input error, got {other:?}"),
            }
        }
    }
}
