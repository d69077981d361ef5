//! Models from the model hub: `onrecord models fetch <repo-id>` downloads a
//! model's files into the hub's standard cache (`HF_HOME`, else
//! `~/.cache/huggingface`), and offline lookups find a model already there.
//! The folder that results is loaded like any local model folder.

use super::model_err;
use crate::error::Result;
use std::path::{Path, PathBuf};

/// Files every model needs.
pub const REQUIRED: [&str; 3] = ["config.json", "tokenizer.json", "model.safetensors"];
/// Files used when present (sentence-transformers settings).
pub const OPTIONAL: [&str; 3] = [
    "sentence_bert_config.json",
    "modules.json",
    "1_Pooling/config.json",
];

/// The snapshot folder of `repo_id` in the hub cache, if all required files are there.
pub fn cached(repo_id: &str) -> Option<PathBuf> {
    let repo = hf_hub::Cache::from_env().model(repo_id.to_string());
    let config = repo.get("config.json")?;
    let dir = config.parent()?.to_path_buf();
    super::is_model_dir(&dir).then_some(dir)
}

/// The GGUF file of `repo_id` already in the hub cache (the 8-bit one when
/// there are several).
pub fn cached_gguf(repo_id: &str) -> Option<PathBuf> {
    let cache = hf_hub::Cache::from_env();
    let folder = format!("models--{}", repo_id.replace('/', "--"));
    let snapshots = cache.path().join(folder).join("snapshots");
    let mut found: Vec<PathBuf> = std::fs::read_dir(snapshots)
        .ok()?
        .filter_map(|e| e.ok())
        .flat_map(|snap| std::fs::read_dir(snap.path()).into_iter().flatten())
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            p.extension()
                .is_some_and(|x| x.eq_ignore_ascii_case("gguf"))
        })
        .collect();
    found.sort_by_key(|p| !p.to_string_lossy().to_lowercase().contains("q8_0"));
    found.into_iter().next()
}

/// Download a model from `repo_id` into the hub cache. A repository with
/// `config.json`, `tokenizer.json` and `model.safetensors` is an embedding
/// model and its folder is returned; otherwise one GGUF file is fetched
/// (`file`, else the 8-bit one, else the first) and its path returned.
pub fn fetch(repo_id: &str, file: Option<&str>, progress: bool) -> Result<PathBuf> {
    let api = hf_hub::api::sync::ApiBuilder::from_env()
        .with_progress(progress)
        .build()
        .map_err(|e| model_err(Path::new(repo_id), e))?;
    let repo = api.model(repo_id.to_string());
    let gguf = match file {
        Some(f) => Some(f.to_string()),
        None => {
            let info = repo
                .info()
                .map_err(|e| model_err(Path::new(repo_id), format!("listing files: {e}")))?;
            let names: Vec<String> = info.siblings.into_iter().map(|s| s.rfilename).collect();
            if REQUIRED.iter().all(|r| names.iter().any(|n| n == r)) {
                None
            } else {
                let mut ggufs: Vec<&String> = names
                    .iter()
                    .filter(|n| n.to_lowercase().ends_with(".gguf"))
                    .collect();
                ggufs.sort_by_key(|n| !n.to_lowercase().contains("q8_0"));
                match ggufs.first() {
                    Some(n) => Some((*n).clone()),
                    None => {
                        return Err(model_err(
                            Path::new(repo_id),
                            "the repository holds neither an embedding model \
                             (config.json, tokenizer.json, model.safetensors) nor a .gguf file",
                        ));
                    }
                }
            }
        }
    };
    if let Some(f) = gguf {
        return repo
            .get(&f)
            .map_err(|e| model_err(Path::new(repo_id), format!("fetching {f}: {e}")));
    }
    let mut dir = None;
    for f in REQUIRED {
        let p = repo
            .get(f)
            .map_err(|e| model_err(Path::new(repo_id), format!("fetching {f}: {e}")))?;
        dir = p.parent().map(Path::to_path_buf);
    }
    for f in OPTIONAL {
        // Absent in many repositories; the defaults then apply.
        let _ = repo.get(f);
    }
    dir.ok_or_else(|| model_err(Path::new(repo_id), "no files were fetched"))
}

/// `owner/name` for a snapshot folder inside the hub cache
/// (`.../models--owner--name/snapshots/<commit>`).
pub fn display_name(dir: &Path) -> Option<String> {
    let snapshots = dir.parent()?;
    if snapshots.file_name()? != "snapshots" {
        return None;
    }
    let repo = snapshots.parent()?.file_name()?.to_str()?;
    let rest = repo.strip_prefix("models--")?;
    Some(rest.replacen("--", "/", 1))
}

/// A model folder from what the user typed: a folder path, or the id of a
/// repository already in the hub cache.
pub fn resolve_repo_or_dir(given: &Path) -> Result<PathBuf> {
    if given.is_dir() {
        return Ok(given.to_path_buf());
    }
    let s = given.to_string_lossy();
    if s.matches('/').count() == 1
        && !s.starts_with('.')
        && !s.starts_with('/')
        && let Some(dir) = cached(&s)
    {
        return Ok(dir);
    }
    Err(model_err(
        given,
        "no model folder here (and no such repository in the hub cache); \
         pass a folder holding config.json, tokenizer.json and model.safetensors, \
         or run `onrecord models fetch <repo-id>` first",
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn snapshot_folders_get_their_repository_name() {
        let d =
            Path::new("/c/hub/models--sentence-transformers--all-MiniLM-L6-v2/snapshots/abc123");
        assert_eq!(
            display_name(d).as_deref(),
            Some("sentence-transformers/all-MiniLM-L6-v2")
        );
        assert_eq!(display_name(Path::new("/m/all-MiniLM-L6-v2")), None);
    }
}
