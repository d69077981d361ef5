//! The optional settings file: defaults for drafting that a newsroom sets
//! once instead of on every command. JSON, read from `$ONRECORD_CONFIG`,
//! else `$XDG_CONFIG_HOME/onrecord/config.json`, else
//! `~/.config/onrecord/config.json`; absent means built-in defaults.
//! Command-line flags and `ONRECORD_*` variables override it.
//!
//! ```json
//! {
//!   "drafter": "remote",
//!   "llm": "/models/Llama-3.2-1B-Instruct-Q8_0.gguf",
//!   "remote": {"url": "http://gpu-box:8080/v1", "model": "llama-3.1-8b",
//!              "key_env": "NEWSROOM_LLM_KEY", "timeout_secs": 120, "stream": true}
//! }
//! ```
//!
//! invariant: an API key is never read from this file (it names the
//! environment variable that holds the key); a file that tries to hold one
//! is refused, since settings files get copied and shared.

use crate::error::{Error, Result};
use serde::Deserialize;
use std::path::{Path, PathBuf};

#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Config {
    /// extractive, local or remote.
    pub drafter: Option<String>,
    /// auto, a GGUF file, a folder or a fetched repository id.
    pub llm: Option<String>,
    #[serde(default)]
    pub remote: RemoteSettings,
}

#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RemoteSettings {
    pub url: Option<String>,
    pub model: Option<String>,
    /// Name of the environment variable holding the API key.
    pub key_env: Option<String>,
    pub timeout_secs: Option<f64>,
    pub stream: Option<bool>,
}

/// Where the settings file is looked for.
pub fn config_path() -> PathBuf {
    if let Some(p) = std::env::var_os("ONRECORD_CONFIG") {
        return p.into();
    }
    std::env::var_os("XDG_CONFIG_HOME")
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".config")))
        .unwrap_or_else(|| PathBuf::from(".config"))
        .join("onrecord")
        .join("config.json")
}

impl Config {
    /// The settings file at [`config_path`], or defaults when there is none.
    pub fn load() -> Result<Config> {
        let path = config_path();
        if !path.exists() {
            if std::env::var_os("ONRECORD_CONFIG").is_some() {
                return Err(Error::Invalid(format!(
                    "ONRECORD_CONFIG names {}, which does not exist",
                    path.display()
                )));
            }
            return Ok(Config::default());
        }
        Self::read(&path)
    }

    /// Read and check one settings file.
    pub fn read(path: &Path) -> Result<Config> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let value: serde_json::Value =
            serde_json::from_str(&text).map_err(|e| Error::BadInput {
                path: path.to_path_buf(),
                line: e.line(),
                message: format!("not valid JSON: {e}"),
            })?;
        let has_key = |v: &serde_json::Value| {
            v.as_object().is_some_and(|o| {
                o.keys()
                    .any(|k| matches!(k.as_str(), "api_key" | "key" | "token" | "apikey"))
            })
        };
        if has_key(&value) || value.get("remote").is_some_and(has_key) {
            return Err(Error::BadInput {
                path: path.to_path_buf(),
                line: 1,
                message: "holds an API key; put the key in an environment variable and \
                          name that variable in remote.key_env instead"
                    .into(),
            });
        }
        let cfg: Config = serde_json::from_value(value).map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: 1,
            message: e.to_string(),
        })?;
        if let Some(d) = &cfg.drafter
            && !matches!(d.as_str(), "extractive" | "local" | "remote")
        {
            return Err(Error::BadInput {
                path: path.to_path_buf(),
                line: 1,
                message: format!(
                    "drafter \u{201C}{d}\u{201D} is not one of extractive, local, remote"
                ),
            });
        }
        Ok(cfg)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(text: &str) -> Result<Config> {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("config.json");
        std::fs::write(&p, text).unwrap();
        Config::read(&p)
    }

    #[test]
    fn settings_are_read_and_bad_ones_name_the_problem() {
        let c = read(r#"{"drafter": "remote", "remote": {"url": "http://h:1/v1", "model": "m", "timeout_secs": 9}}"#).unwrap();
        assert_eq!(c.drafter.as_deref(), Some("remote"));
        assert_eq!(c.remote.url.as_deref(), Some("http://h:1/v1"));
        assert_eq!(c.remote.timeout_secs, Some(9.0));
        let cases = [
            (r#"{"remote": {"api_key": "sk-1"}}"#, "holds an API key"),
            (r#"{"api_key": "sk-1"}"#, "holds an API key"),
            (r#"{"drafter": "magic"}"#, "not one of extractive"),
            (r#"{"remote": {"urll": "x"}}"#, "unknown field `urll`"),
            ("{\n  \"drafter\": \n}", "line 3"),
        ];
        for (text, want) in cases {
            let e = read(text).unwrap_err().to_string();
            assert!(e.contains(want) && e.contains("config.json"), "{text}: {e}");
        }
    }
}
