//! Any OpenAI-compatible chat endpoint as a [`Generator`], over reqwest.
//!
//! Request: `POST <base>/chat/completions` (the base URL normally ends in
//! `/v1`; if it does not, `/v1` is added) with `model`, `messages`,
//! `temperature`, `top_p`, `max_tokens`, `seed` and `stream`. With
//! streaming, the reply is server-sent events whose `data:` lines carry
//! `choices[0].delta.content`, ending with `data: [DONE]`; without, one JSON
//! body with `choices[0].message.content`. `usage` is read when present.
//!
//! HTTP 429 and 5xx are retried with exponential backoff (or the server's
//! `Retry-After`, capped); other failures are reported at once, in words.
//!
//! invariant: the API key is read from the environment, sent only in the
//! `Authorization` header (marked sensitive), and never written to a log
//! line or an error message; any error text from the server is scrubbed of it.

use super::{ChatMessage, Finish, GenOptions, Generation, Generator};
use crate::error::{Error, Result};
use std::io::BufRead;
use std::time::{Duration, Instant};

/// The environment variable the API key is read from by default.
pub const DEFAULT_KEY_ENV: &str = "ONRECORD_API_KEY";

/// How to reach the endpoint.
#[derive(Debug, Clone)]
pub struct RemoteConfig {
    pub base_url: String,
    pub model: String,
    /// Name of the environment variable that holds the key (may be unset).
    pub key_env: String,
    pub connect_timeout: Duration,
    /// Longest wait for the whole reply.
    pub timeout: Duration,
    pub retries: u32,
    /// First backoff; doubled on each retry.
    pub backoff: Duration,
    pub stream: bool,
    /// Tokens the model attends over, for trimming excerpts.
    pub context: usize,
}

impl RemoteConfig {
    pub fn new(base_url: impl Into<String>, model: impl Into<String>) -> Self {
        RemoteConfig {
            base_url: base_url.into(),
            model: model.into(),
            key_env: DEFAULT_KEY_ENV.into(),
            connect_timeout: Duration::from_secs(10),
            timeout: Duration::from_secs(300),
            retries: 4,
            backoff: Duration::from_millis(500),
            stream: true,
            context: 8192,
        }
    }

    /// The chat-completions URL.
    pub fn url(&self) -> String {
        let base = self.base_url.trim_end_matches('/');
        if base.ends_with("/v1") {
            format!("{base}/chat/completions")
        } else {
            format!("{base}/v1/chat/completions")
        }
    }
}

/// The key, kept out of `Debug` output.
struct Secret(String);

impl std::fmt::Debug for Secret {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("[redacted]")
    }
}

pub struct RemoteModel {
    cfg: RemoteConfig,
    key: Option<Secret>,
    client: reqwest::blocking::Client,
}

fn remote_err(cfg: &RemoteConfig, message: impl Into<String>) -> Error {
    Error::Remote {
        endpoint: cfg.url(),
        message: message.into(),
    }
}

impl RemoteModel {
    pub fn new(cfg: RemoteConfig) -> Result<RemoteModel> {
        let key = std::env::var(&cfg.key_env)
            .ok()
            .filter(|k| !k.trim().is_empty())
            .map(|k| Secret(k.trim().to_string()));
        let client = reqwest::blocking::Client::builder()
            .connect_timeout(cfg.connect_timeout)
            .timeout(cfg.timeout)
            .build()
            .map_err(|e| remote_err(&cfg, format!("setting up the HTTP client: {e}")))?;
        Ok(RemoteModel { cfg, key, client })
    }

    /// Remove the key from text that came from the server or the network layer.
    fn scrub(&self, s: &str) -> String {
        match &self.key {
            Some(k) if k.0.len() >= 4 => s.replace(&k.0, "[redacted]"),
            _ => s.to_string(),
        }
    }

    fn err(&self, message: impl AsRef<str>) -> Error {
        remote_err(&self.cfg, self.scrub(message.as_ref()))
    }

    fn send(&self, body: &serde_json::Value) -> Result<reqwest::blocking::Response> {
        let url = self.cfg.url();
        let mut attempt = 0u32;
        loop {
            attempt += 1;
            tracing::debug!(url = %url, model = %self.cfg.model, attempt, "chat request");
            let mut req = self.client.post(&url).json(body);
            if let Some(k) = &self.key {
                let mut v = reqwest::header::HeaderValue::from_str(&format!("Bearer {}", k.0))
                    .map_err(|_| {
                        self.err(format!(
                            "${} holds characters a header cannot carry",
                            self.cfg.key_env
                        ))
                    })?;
                v.set_sensitive(true);
                req = req.header(reqwest::header::AUTHORIZATION, v);
            }
            let resp = match req.send() {
                Ok(r) => r,
                Err(e) if e.is_timeout() => {
                    return Err(self.err(format!(
                        "no reply within {} s (timed out); raise --remote-timeout or check the server",
                        self.cfg.timeout.as_secs_f64()
                    )));
                }
                Err(e) if e.is_connect() => {
                    return Err(self.err(format!("cannot reach the server: {}", error_chain(&e))));
                }
                Err(e) => return Err(self.err(format!("request failed: {}", error_chain(&e)))),
            };
            let status = resp.status();
            if status.is_success() {
                return Ok(resp);
            }
            let retryable = status.as_u16() == 429 || status.is_server_error();
            if retryable && attempt <= self.cfg.retries {
                let wait = retry_after(&resp)
                    .unwrap_or(self.cfg.backoff * 2u32.saturating_pow(attempt - 1))
                    .min(Duration::from_secs(30));
                tracing::warn!(
                    status = status.as_u16(),
                    wait_ms = wait.as_millis() as u64,
                    attempt,
                    "endpoint busy or failing; retrying"
                );
                std::thread::sleep(wait);
                continue;
            }
            let text: String = resp.text().unwrap_or_default().chars().take(300).collect();
            let detail = server_message(&text);
            return Err(self.err(match status.as_u16() {
                401 | 403 => {
                    let why = if detail.is_empty() {
                        String::new()
                    } else {
                        format!(": {detail}")
                    };
                    if self.key.is_none() {
                        format!(
                            "the server refused the request (HTTP {}{why}); no API key was sent because ${} is not set",
                            status.as_u16(),
                            self.cfg.key_env
                        )
                    } else {
                        format!(
                            "the server refused the API key (HTTP {}{why}); check ${}",
                            status.as_u16(),
                            self.cfg.key_env
                        )
                    }
                }
                404 if detail.to_lowercase().contains("model") => format!(
                    "the server has no model \u{201C}{}\u{201D} (HTTP 404: {detail}); check --remote-model",
                    self.cfg.model
                ),
                404 => format!(
                    "no chat-completions endpoint at this address (HTTP 404{}); check --remote-url",
                    if detail.is_empty() { String::new() } else { format!(": {detail}") }
                ),
                400 if detail.to_lowercase().contains("model") => format!(
                    "the server rejected model \u{201C}{}\u{201D} (HTTP 400: {detail}); check --remote-model",
                    self.cfg.model
                ),
                s if retryable => format!(
                    "HTTP {s} after {} attempts{}",
                    attempt,
                    if detail.is_empty() { String::new() } else { format!(": {detail}") }
                ),
                s => format!(
                    "HTTP {s}{}",
                    if detail.is_empty() { String::new() } else { format!(": {detail}") }
                ),
            }));
        }
    }
}

fn error_chain(e: &dyn std::error::Error) -> String {
    let mut s = e.to_string();
    let mut src = e.source();
    while let Some(c) = src {
        let t = c.to_string();
        if !s.contains(&t) {
            s.push_str(": ");
            s.push_str(&t);
        }
        src = c.source();
    }
    s
}

fn retry_after(resp: &reqwest::blocking::Response) -> Option<Duration> {
    let v = resp.headers().get(reqwest::header::RETRY_AFTER)?;
    let secs: f64 = v.to_str().ok()?.trim().parse().ok()?;
    (secs >= 0.0).then(|| Duration::from_secs_f64(secs))
}

/// The `error.message` of an OpenAI-style error body, else the body itself.
fn server_message(body: &str) -> String {
    serde_json::from_str::<serde_json::Value>(body)
        .ok()
        .and_then(|v| {
            v.pointer("/error/message")
                .or_else(|| v.get("error"))
                .or_else(|| v.get("message"))
                .and_then(|m| m.as_str().map(str::to_string))
        })
        .unwrap_or_else(|| body.trim().to_string())
}

fn short(s: &str) -> String {
    let t: String = s.chars().take(120).collect();
    if t.len() < s.len() {
        format!("{t}…")
    } else {
        t
    }
}

impl Generator for RemoteModel {
    fn id(&self) -> String {
        format!(
            "{} at {}",
            self.cfg.model,
            self.cfg.base_url.trim_end_matches('/')
        )
    }

    fn context_window(&self) -> Option<usize> {
        Some(self.cfg.context)
    }

    fn count_tokens(&self, text: &str) -> usize {
        // About four characters per token for English text (common practice).
        text.len().div_ceil(4)
    }

    fn generate(
        &self,
        messages: &[ChatMessage],
        opts: &GenOptions,
        on_text: &mut dyn FnMut(&str),
    ) -> Result<Generation> {
        let body = serde_json::json!({
            "model": self.cfg.model,
            "messages": messages,
            "temperature": opts.temperature,
            "top_p": opts.top_p,
            "max_tokens": opts.max_tokens,
            "seed": opts.seed,
            "stream": self.cfg.stream,
        });
        let t0 = Instant::now();
        let resp = self.send(&body)?;
        let mut text = String::new();
        let mut finish = Finish::Stop;
        let mut usage: Option<(usize, usize)> = None;
        let mut first: Option<f64> = None;
        let read_usage = |v: &serde_json::Value| {
            let u = v.get("usage")?;
            Some((
                u.get("prompt_tokens")?.as_u64()? as usize,
                u.get("completion_tokens")?.as_u64()? as usize,
            ))
        };
        let timeout_err = |e: &std::io::Error| {
            self.err(format!(
                "the reply stopped arriving (timed out after {} s or the connection broke): {e}",
                self.cfg.timeout.as_secs_f64()
            ))
        };
        if self.cfg.stream {
            let mut done = false;
            for line in std::io::BufReader::new(resp).lines() {
                let line = line.map_err(|e| timeout_err(&e))?;
                let Some(data) = line.strip_prefix("data:") else {
                    continue; // comments, event names, blank separators
                };
                let data = data.trim();
                if data == "[DONE]" {
                    done = true;
                    break;
                }
                let v: serde_json::Value = serde_json::from_str(data).map_err(|e| {
                    self.err(format!(
                        "malformed streaming reply (not JSON: {e}) in \u{201C}{}\u{201D}",
                        short(data)
                    ))
                })?;
                if let Some(m) = v.get("error") {
                    return Err(self.err(format!("the server reported an error mid-stream: {m}")));
                }
                usage = read_usage(&v).or(usage);
                let Some(choice) = v.pointer("/choices/0") else {
                    if usage.is_some() {
                        continue; // a final usage-only event
                    }
                    return Err(self.err(format!(
                        "malformed streaming reply (no choices) in \u{201C}{}\u{201D}",
                        short(data)
                    )));
                };
                if let Some(piece) = choice.pointer("/delta/content").and_then(|c| c.as_str())
                    && !piece.is_empty()
                {
                    first.get_or_insert(t0.elapsed().as_secs_f64());
                    text.push_str(piece);
                    on_text(piece);
                }
                if choice.get("finish_reason").and_then(|f| f.as_str()) == Some("length") {
                    finish = Finish::Length;
                }
            }
            if !done && text.is_empty() {
                return Err(self.err("the stream ended before any text or [DONE]"));
            }
        } else {
            let body = resp.text().map_err(|e| {
                if e.is_timeout() {
                    self.err(format!(
                        "no reply within {} s (timed out)",
                        self.cfg.timeout.as_secs_f64()
                    ))
                } else {
                    self.err(format!("reading the reply: {}", error_chain(&e)))
                }
            })?;
            let v: serde_json::Value = serde_json::from_str(&body).map_err(|e| {
                self.err(format!(
                    "malformed reply (not JSON: {e}) in \u{201C}{}\u{201D}",
                    short(&body)
                ))
            })?;
            let content = v
                .pointer("/choices/0/message/content")
                .and_then(|c| c.as_str())
                .ok_or_else(|| {
                    self.err(format!(
                        "malformed reply (no choices[0].message.content) in \u{201C}{}\u{201D}",
                        short(&body)
                    ))
                })?;
            first = Some(t0.elapsed().as_secs_f64());
            text = content.to_string();
            on_text(&text);
            usage = read_usage(&v);
            if v.pointer("/choices/0/finish_reason")
                .and_then(|f| f.as_str())
                == Some("length")
            {
                finish = Finish::Length;
            }
        }
        let total = t0.elapsed().as_secs_f64();
        let prompt_secs = first.unwrap_or(total);
        let (prompt_tokens, generated_tokens) = usage.unwrap_or_else(|| {
            (
                messages.iter().map(|m| self.count_tokens(&m.content)).sum(),
                self.count_tokens(&text),
            )
        });
        tracing::debug!(prompt_tokens, generated_tokens, secs = total, "chat reply");
        Ok(Generation {
            text,
            finish,
            prompt_tokens,
            generated_tokens,
            prompt_secs,
            generate_secs: total - prompt_secs,
        })
    }
}
