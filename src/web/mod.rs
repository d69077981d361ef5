//! `onrecord web`: the reporter's page and the HTTP JSON API behind it.
//!
//! One axum router serves the page (HTML, CSS and script compiled into the
//! binary) and `/api/*`, which returns the same versioned records as the
//! CLI's `--json`. Heavy work (search, ask, replay) runs on blocking threads,
//! at most `workers` at once, each with an [`Index`] taken from a small pool;
//! requests beyond that wait in a bounded queue and are refused with 429
//! when it is full.
//!
//! invariant: every response carries the strict Content-Security-Policy and
//! `Cache-Control: no-store`; the page loads nothing from elsewhere.
//! invariant: when a token is set, no route answers without it; tokens are
//! compared in constant time (SHA-256 digests, XOR-folded).
//! invariant: without a token the server binds to loopback only and answers
//! only requests addressed to a loopback name (no DNS rebinding).
//! invariant: document text reaches the page only through `textContent`;
//! the script never builds HTML from strings.

mod api;
mod assets;
pub mod conn;

use crate::embed::Embedder;
use crate::retrieve::Index;
use axum::Router;
use axum::extract::{DefaultBodyLimit, Request, State};
use axum::http::{HeaderMap, HeaderValue, Method, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use sha2::{Digest, Sha256};
use std::net::SocketAddr;
use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};

pub use api::ApiError;

/// Version of the HTTP API; `/api/info` reports it.
pub const API_VERSION: u32 = 1;

/// The Content-Security-Policy on every response: only this server's own
/// script, style and images, no framing, no plugins, no inline script.
pub const CSP: &str = "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; \
connect-src 'self'; form-action 'self'; base-uri 'none'; frame-ancestors 'none'";

/// Name of the cookie that carries the token after the first visit.
pub const TOKEN_COOKIE: &str = "onrecord_token";

/// Limits on what a request may ask of the server.
#[derive(Debug, Clone, Copy, serde::Serialize)]
pub struct Limits {
    /// Largest request body, except replay uploads (bytes).
    pub max_body_bytes: usize,
    /// Largest answer sent to `/api/replay` (bytes).
    pub max_replay_bytes: usize,
    /// Longest question or search query (characters).
    pub max_question_chars: usize,
    /// Most passages a request may retrieve.
    pub max_passages: usize,
    /// Requests doing work at once.
    pub workers: usize,
    /// Requests that may wait for a worker; more are refused with 429.
    pub max_waiting: usize,
    /// Connections open at once; more wait to be accepted (see `conn`).
    pub max_connections: usize,
    /// Time a new connection has to send its first request's headers.
    #[serde(skip)]
    pub header_timeout: std::time::Duration,
    /// Time a connection may sit with nothing read or written.
    #[serde(skip)]
    pub idle_timeout: std::time::Duration,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            max_body_bytes: 64 * 1024,
            max_replay_bytes: 2 * 1024 * 1024,
            max_question_chars: 1000,
            max_passages: 50,
            workers: std::thread::available_parallelism().map_or(2, |n| n.get()),
            max_waiting: 256,
            max_connections: 512,
            header_timeout: std::time::Duration::from_secs(10),
            idle_timeout: std::time::Duration::from_secs(120),
        }
    }
}

/// Everything `web` needs.
pub struct ServeOptions {
    pub index: PathBuf,
    pub bind: SocketAddr,
    pub token: Option<String>,
    pub embedder: Option<Arc<dyn Embedder>>,
    pub limits: Limits,
}

/// Why the server would not start.
#[derive(Debug, thiserror::Error)]
pub enum ServeError {
    #[error(
        "refusing to listen on {0} without a token: anyone who can reach that address could read the documents; \
         give --token (or ONRECORD_TOKEN), or bind to 127.0.0.1"
    )]
    NeedsToken(SocketAddr),
    #[error("the token must be at least 16 characters (got {0})")]
    ShortToken(usize),
    #[error(
        "the token may hold only letters, digits and - _ . ~ + / = (it travels in an address and a cookie); \
         for example: head -c 24 /dev/urandom | base64"
    )]
    TokenChars,
    #[error("cannot listen on {addr}: {source}")]
    Bind {
        addr: SocketAddr,
        #[source]
        source: std::io::Error,
    },
    #[error(transparent)]
    Index(#[from] crate::Error),
}

/// Shared state of one server.
#[derive(Clone)]
pub struct AppState {
    inner: Arc<Shared>,
}

struct Shared {
    dir: PathBuf,
    embedder: Option<Arc<dyn Embedder>>,
    pool: Mutex<Vec<Index>>,
    work: tokio::sync::Semaphore,
    waiting: AtomicUsize,
    limits: Limits,
    token: Option<[u8; 32]>,
    /// `Host` values answered when there is no token.
    hosts: Vec<String>,
    models: api::Models,
}

impl AppState {
    /// Opens the index once (so a missing or mismatched index is reported
    /// before the server listens) and keeps it for the pool.
    pub fn new(
        index: PathBuf,
        embedder: Option<Arc<dyn Embedder>>,
        token: Option<&str>,
        limits: Limits,
        bind: SocketAddr,
    ) -> crate::Result<AppState> {
        let first = Index::open_with(&index, embedder.clone())?;
        for n in &first.notes {
            tracing::warn!("{n}");
        }
        let port = bind.port();
        // The loopback names, and the address actually bound when it is
        // another loopback one (127.0.0.23, say): the address printed must
        // answer.
        let bound = match bind.ip() {
            std::net::IpAddr::V4(a) => a.to_string(),
            std::net::IpAddr::V6(a) => format!("[{a}]"),
        };
        let mut names = vec!["127.0.0.1".to_string(), "localhost".into(), "[::1]".into()];
        if bind.ip().is_loopback() && !names.contains(&bound) {
            names.push(bound);
        }
        let hosts = names
            .iter()
            .flat_map(|h| [format!("{h}:{port}"), h.clone()])
            .collect();
        Ok(AppState {
            inner: Arc::new(Shared {
                dir: index,
                embedder,
                pool: Mutex::new(vec![first]),
                work: tokio::sync::Semaphore::new(limits.workers.max(1)),
                waiting: AtomicUsize::new(0),
                limits,
                token: token.map(digest),
                hosts,
                models: api::Models::discover(),
            }),
        })
    }

    pub fn limits(&self) -> &Limits {
        &self.inner.limits
    }

    /// Runs `f` with an index on a blocking thread, once a worker is free.
    async fn with_index<T, F>(&self, f: F) -> Result<T, ApiError>
    where
        T: Send + 'static,
        F: FnOnce(&mut Index) -> Result<T, ApiError> + Send + 'static,
    {
        let s = &self.inner;
        let waiting = s.waiting.fetch_add(1, Ordering::SeqCst);
        let _queued = Decrement(&s.waiting);
        if waiting >= s.limits.max_waiting {
            return Err(ApiError::busy(waiting));
        }
        let _permit = s
            .work
            .acquire()
            .await
            .map_err(|_| ApiError::internal("the worker pool is closed"))?;
        drop(_queued);
        let state = self.clone();
        tokio::task::spawn_blocking(move || {
            let mut idx = state.take_index()?;
            let out = f(&mut idx);
            state.put_index(idx);
            out
        })
        .await
        .map_err(|e| ApiError::internal(format!("worker failed: {e}")))?
    }

    fn take_index(&self) -> Result<Index, ApiError> {
        let s = &self.inner;
        let pooled = s.pool.lock().map(|mut p| p.pop()).unwrap_or_default();
        match pooled {
            Some(i) => Ok(i),
            None => Index::open_with(&s.dir, s.embedder.clone())
                .map_err(|e| ApiError::internal(format!("opening the index: {e}"))),
        }
    }

    fn put_index(&self, mut idx: Index) {
        idx.options = crate::retrieve::SearchOptions::default();
        if let Ok(mut p) = self.inner.pool.lock()
            && p.len() < self.inner.limits.workers.max(1)
        {
            p.push(idx);
        }
    }
}

struct Decrement<'a>(&'a AtomicUsize);

impl Drop for Decrement<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::SeqCst);
    }
}

fn digest(s: &str) -> [u8; 32] {
    Sha256::digest(s.as_bytes()).into()
}

/// Equal tokens, in time that does not depend on where they differ.
pub fn token_matches(expected: &[u8; 32], presented: &str) -> bool {
    let got = digest(presented);
    expected
        .iter()
        .zip(got.iter())
        .fold(0u8, |acc, (a, b)| acc | (a ^ b))
        == 0
}

/// The router: the page, its assets and the API, behind the guard.
pub fn app(state: AppState) -> Router {
    let limits = state.inner.limits;
    let api = Router::new()
        .route("/api/info", get(api::info))
        .route("/api/records", get(api::docs))
        .route("/api/find", post(api::search))
        .route("/api/question", post(api::ask))
        .route("/api/question/stream", post(api::ask_stream))
        .route("/api/page", get(api::page))
        .route("/api/export", post(api::export))
        .route("/api/answers", get(api::answers))
        .route("/api/answers/{id}", get(api::answer))
        .route(
            "/api/replay",
            post(api::replay).layer(DefaultBodyLimit::max(limits.max_replay_bytes)),
        )
        .fallback(api::not_found);
    Router::new()
        .route("/", get(assets::page))
        .route("/app.js", get(assets::script))
        .route("/app.css", get(assets::style))
        .route("/icon.svg", get(assets::icon))
        .merge(api)
        .layer(DefaultBodyLimit::max(limits.max_body_bytes))
        .layer(axum::middleware::from_fn_with_state(state.clone(), guard))
        .with_state(state)
}

/// Token and host checks, then the security headers on whatever comes back.
async fn guard(State(state): State<AppState>, req: Request, next: Next) -> Response {
    let mut resp = match admit(&state, &req) {
        Admit::Yes => next.run(req).await,
        Admit::SetCookie(token) => {
            // The token arrived in the address: keep it in a cookie and
            // take it out of the address bar (and the history).
            let cookie = format!("{TOKEN_COOKIE}={token}; Path=/; HttpOnly; SameSite=Strict");
            let mut r = (StatusCode::SEE_OTHER, [(header::LOCATION, "/")]).into_response();
            if let Ok(v) = HeaderValue::from_str(&cookie) {
                r.headers_mut().insert(header::SET_COOKIE, v);
            }
            r
        }
        Admit::No(e) => {
            // Refused before any work: the connection is not kept open for
            // another try.
            let mut r = e.into_response();
            r.headers_mut()
                .insert(header::CONNECTION, HeaderValue::from_static("close"));
            r
        }
    };
    secure_headers(resp.headers_mut());
    resp
}

enum Admit {
    Yes,
    SetCookie(String),
    No(ApiError),
}

fn admit(state: &AppState, req: &Request) -> Admit {
    let s = &state.inner;
    let Some(expected) = &s.token else {
        let host = req
            .headers()
            .get(header::HOST)
            .and_then(|h| h.to_str().ok())
            .unwrap_or("");
        return if s.hosts.iter().any(|h| h.eq_ignore_ascii_case(host)) {
            Admit::Yes
        } else {
            Admit::No(ApiError::new(
                StatusCode::FORBIDDEN,
                format!(
                    "this server answers only requests addressed to 127.0.0.1 or localhost (got host {host:?})"
                ),
            ))
        };
    };
    let headers = req.headers();
    let bearer = headers
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.strip_prefix("Bearer "));
    let cookie = cookie_token(headers);
    if bearer
        .into_iter()
        .chain(cookie.as_deref())
        .any(|t| token_matches(expected, t))
    {
        return Admit::Yes;
    }
    if req.method() == Method::GET && req.uri().path() == "/" {
        let query = req.uri().query().unwrap_or("");
        for pair in query.split('&') {
            if let Some(t) = pair.strip_prefix("token=")
                && token_matches(expected, t)
            {
                return Admit::SetCookie(t.to_string());
            }
        }
    }
    Admit::No(ApiError::new(
        StatusCode::UNAUTHORIZED,
        "this server needs its token: open the address printed by `onrecord web` (it ends in ?token=...), \
         or send the header Authorization: Bearer TOKEN",
    ))
}

fn cookie_token(headers: &HeaderMap) -> Option<String> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(';'))
        .find_map(|kv| {
            let (k, v) = kv.trim().split_once('=')?;
            (k == TOKEN_COOKIE).then(|| v.to_string())
        })
}

fn secure_headers(h: &mut HeaderMap) {
    let set = |h: &mut HeaderMap, k: header::HeaderName, v: &'static str| {
        h.insert(k, HeaderValue::from_static(v));
    };
    set(h, header::CONTENT_SECURITY_POLICY, CSP);
    set(h, header::X_CONTENT_TYPE_OPTIONS, "nosniff");
    set(h, header::REFERRER_POLICY, "no-referrer");
    set(h, header::X_FRAME_OPTIONS, "DENY");
    set(h, header::CACHE_CONTROL, "no-store");
    set(
        h,
        header::HeaderName::from_static("cross-origin-opener-policy"),
        "same-origin",
    );
    set(
        h,
        header::HeaderName::from_static("cross-origin-resource-policy"),
        "same-origin",
    );
}

/// Checks the bind address and token before anything is opened.
pub fn check_bind(bind: SocketAddr, token: Option<&str>) -> Result<(), ServeError> {
    match token {
        None if !bind.ip().is_loopback() => Err(ServeError::NeedsToken(bind)),
        Some(t) if t.chars().count() < 16 => Err(ServeError::ShortToken(t.chars().count())),
        Some(t)
            if !t
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || "-_.~+/=".contains(c)) =>
        {
            Err(ServeError::TokenChars)
        }
        _ => Ok(()),
    }
}

/// A bound listener and the router, ready to run; `addr` is the real
/// address (useful with port 0).
pub struct Server {
    pub addr: SocketAddr,
    listener: tokio::net::TcpListener,
    router: Router,
    limits: Limits,
}

impl Server {
    /// Checks the options, opens the index and binds the socket.
    pub async fn bind(opts: ServeOptions) -> Result<Server, ServeError> {
        check_bind(opts.bind, opts.token.as_deref())?;
        let listener = tokio::net::TcpListener::bind(opts.bind)
            .await
            .map_err(|source| ServeError::Bind {
                addr: opts.bind,
                source,
            })?;
        let addr = listener.local_addr().map_err(|source| ServeError::Bind {
            addr: opts.bind,
            source,
        })?;
        let state = AppState::new(
            opts.index,
            opts.embedder,
            opts.token.as_deref(),
            opts.limits,
            addr,
        )?;
        Ok(Server {
            addr,
            listener,
            router: app(state),
            limits: opts.limits,
        })
    }

    /// Serves until `shutdown` resolves.
    pub async fn run(
        self,
        shutdown: impl std::future::Future<Output = ()> + Send + 'static,
    ) -> std::io::Result<()> {
        axum::serve(conn::Guarded::new(self.listener, &self.limits), self.router)
            .with_graceful_shutdown(shutdown)
            .await
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tokens_match_only_when_equal() {
        let t = digest("correct horse battery staple");
        assert!(token_matches(&t, "correct horse battery staple"));
        for wrong in [
            "",
            "correct horse battery stapl",
            "correct horse battery staple ",
            "Correct horse battery staple",
        ] {
            assert!(!token_matches(&t, wrong), "{wrong:?}");
        }
    }

    #[test]
    fn the_cookie_is_found_among_others() {
        let mut h = HeaderMap::new();
        h.append(
            header::COOKIE,
            HeaderValue::from_static("a=1; onrecord_token=xyz; b=2"),
        );
        assert_eq!(cookie_token(&h).as_deref(), Some("xyz"));
        let mut h = HeaderMap::new();
        h.append(
            header::COOKIE,
            HeaderValue::from_static("onrecord_tokenx=1"),
        );
        assert_eq!(cookie_token(&h), None);
    }
}
