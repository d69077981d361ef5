//! The HTTP JSON API. Each handler checks its input (4xx with a message
//! that says what to change), then does the work on a pooled index and
//! returns the same record the CLI's `--json` prints.

use super::AppState;
use crate::answer::{self, AnswerRecord, AskPlan};
use crate::draft::model::{ModelDraftConfig, ModelDrafter};
use crate::draft::{DraftRequest, Drafter, Extractive, ExtractiveConfig};
use crate::llm::Generator;
use crate::retrieve::{Index, RetrieverKind};
use crate::types::{DocId, Filters};
use crate::verify::Draft;
use crate::verify::JudgeKind;
use axum::Json;
use axum::extract::rejection::{JsonRejection, QueryRejection};
use axum::extract::{Path, Query, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::sse::{Event, KeepAlive, Sse};
use axum::response::{IntoResponse, Response};
use serde::Deserialize;
use serde_json::{Value, json};
use std::convert::Infallible;
use std::path::PathBuf;
use std::sync::{Arc, Mutex};
use tokio::sync::mpsc::UnboundedSender;

/// An error answer: `{"error": {"status": 400, "message": "..."}}`.
#[derive(Debug)]
pub struct ApiError {
    pub status: StatusCode,
    pub message: String,
}

impl ApiError {
    pub fn new(status: StatusCode, message: impl Into<String>) -> ApiError {
        ApiError {
            status,
            message: message.into(),
        }
    }

    fn bad(message: impl Into<String>) -> ApiError {
        ApiError::new(StatusCode::BAD_REQUEST, message)
    }

    pub(super) fn busy(waiting: usize) -> ApiError {
        ApiError::new(
            StatusCode::TOO_MANY_REQUESTS,
            format!("the server is busy ({waiting} requests are waiting); try again shortly"),
        )
    }

    /// A fault of ours: logged in full, answered with a generic message.
    pub(super) fn internal(detail: impl std::fmt::Display) -> ApiError {
        tracing::error!("internal error: {detail}");
        ApiError::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "internal error; the server's log has the details",
        )
    }

    fn body(&self) -> Value {
        json!({"error": {"status": self.status.as_u16(), "message": self.message}})
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        (self.status, Json(self.body())).into_response()
    }
}

impl From<JsonRejection> for ApiError {
    fn from(r: JsonRejection) -> ApiError {
        let status = r.status();
        let message = if status == StatusCode::PAYLOAD_TOO_LARGE {
            "the request body is larger than this server accepts".to_string()
        } else {
            r.body_text()
        };
        ApiError::new(status, message)
    }
}

impl From<QueryRejection> for ApiError {
    fn from(r: QueryRejection) -> ApiError {
        ApiError::bad(r.body_text())
    }
}

type Body<T> = Result<Json<T>, JsonRejection>;
type Params<T> = Result<Query<T>, QueryRejection>;

/// Drafting models this server can use, found when it starts.
pub struct Models {
    local: Option<PathBuf>,
    remote: Option<crate::llm::remote::RemoteConfig>,
    loaded: Mutex<Option<Arc<dyn Generator>>>,
}

impl Models {
    pub fn discover() -> Models {
        let local = crate::llm::resolve(&crate::llm::LlmChoice::Auto).ok();
        let remote = match crate::config::Config::load() {
            Ok(c) => match (c.remote.url, c.remote.model) {
                (Some(url), Some(model)) => {
                    let mut cfg = crate::llm::remote::RemoteConfig::new(url, model);
                    if let Some(k) = c.remote.key_env {
                        cfg.key_env = k;
                    }
                    if let Some(t) = c.remote.timeout_secs.filter(|t| t.is_finite() && *t > 0.0) {
                        cfg.timeout = std::time::Duration::from_secs_f64(t);
                    }
                    cfg.stream = c.remote.stream.unwrap_or(true);
                    Some(cfg)
                }
                _ => None,
            },
            Err(e) => {
                tracing::warn!("settings file not read: {e}");
                None
            }
        };
        Models {
            local,
            remote,
            loaded: Mutex::new(None),
        }
    }

    /// Drafters on offer: extractive always, local when a model file is
    /// present, remote when the settings name an endpoint and a model.
    pub fn drafters(&self) -> Vec<&'static str> {
        let mut d = vec!["extractive"];
        if self.local.is_some() {
            d.push("local");
        }
        if self.remote.is_some() {
            d.push("remote");
        }
        d
    }

    fn generator(&self, which: &str) -> Result<Arc<dyn Generator>, ApiError> {
        match which {
            "remote" => {
                let cfg = self.remote.clone().ok_or_else(|| {
                    ApiError::bad("no remote endpoint is configured on this server")
                })?;
                let m = crate::llm::remote::RemoteModel::new(cfg)
                    .map_err(|e| ApiError::new(StatusCode::BAD_GATEWAY, e.to_string()))?;
                Ok(Arc::new(m))
            }
            _ => {
                let path = self
                    .local
                    .as_ref()
                    .ok_or_else(|| ApiError::bad("no local drafting model on this server"))?;
                let mut slot = self
                    .loaded
                    .lock()
                    .map_err(|_| ApiError::internal("model slot poisoned"))?;
                if let Some(m) = slot.as_ref() {
                    return Ok(m.clone());
                }
                let m = crate::llm::local::LocalModel::load(
                    path,
                    Some(crate::llm::reencode_cache_dir()),
                )
                .map_err(|e| ApiError::internal(format!("loading {}: {e}", path.display())))?;
                let m: Arc<dyn Generator> = Arc::new(m);
                *slot = Some(m.clone());
                Ok(m)
            }
        }
    }
}

fn retrievers(idx: &Index) -> Vec<&'static str> {
    if idx.has_dense() {
        vec!["hybrid", "bm25", "dense"]
    } else {
        vec!["bm25"]
    }
}

/// `GET /api/info`: what the page needs to draw its form.
pub async fn info(State(st): State<AppState>) -> Result<Json<Value>, ApiError> {
    let drafters = st.inner.models.drafters();
    let limits = st.inner.limits;
    st.with_index(move |idx| {
        let store = &idx.store;
        let (documents, pages, chunks) = store.counts().map_err(ApiError::internal)?;
        let docs = store.documents().map_err(ApiError::internal)?;
        let mut orgs: Vec<&str> = docs
            .iter()
            .filter_map(|d| d.organisation.as_deref())
            .collect();
        orgs.sort_unstable();
        orgs.dedup();
        let dates: Vec<&str> = docs.iter().filter_map(|d| d.date.as_deref()).collect();
        let list: Vec<Value> = docs
            .iter()
            .map(|d| {
                json!({"doc_id": d.doc_id, "title": d.title, "organisation": d.organisation,
                       "date": d.date, "pages": d.pages})
            })
            .collect();
        let r = retrievers(idx);
        Ok(Json(json!({
            "api_version": super::API_VERSION,
            "onrecord_version": env!("CARGO_PKG_VERSION"),
            "counts": {"documents": documents, "pages": pages, "chunks": chunks},
            "organisations": orgs,
            "dates": {"first": dates.iter().min(), "last": dates.iter().max()},
            "documents": list,
            "retrievers": r,
            "default_retriever": r[0],
            "drafters": drafters,
            "judges": ["rules", "learned"],
            "limits": limits,
            "caution": answer::CAUTION,
        })))
    })
    .await
}

/// Filters as the page and API clients send them (empty strings mean unset).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FilterBody {
    #[serde(default)]
    from: Option<String>,
    #[serde(default)]
    to: Option<String>,
    #[serde(default)]
    org: Option<String>,
    #[serde(default)]
    docs: Vec<String>,
}

impl FilterBody {
    fn resolve(self) -> Result<Filters, ApiError> {
        let nonempty =
            |s: Option<String>| s.map(|s| s.trim().to_string()).filter(|s| !s.is_empty());
        let (from, to) = (nonempty(self.from), nonempty(self.to));
        for (name, d) in [("from", &from), ("to", &to)] {
            if let Some(d) = d {
                crate::types::check_date(d)
                    .map_err(|m| ApiError::bad(format!("filters.{name}: {m}")))?;
            }
        }
        if let (Some(f), Some(t)) = (&from, &to)
            && f.len() == t.len()
            && f > t
        {
            return Err(ApiError::bad(format!(
                "filters: the date range is empty (from {f} is after to {t})"
            )));
        }
        Ok(Filters {
            from,
            to,
            org: nonempty(self.org),
            docs: self
                .docs
                .into_iter()
                .map(|d| d.trim().to_string())
                .filter(|d| !d.is_empty())
                .map(DocId)
                .collect(),
        })
    }
}

/// Unknown document ids in a filter are an error, not an empty answer.
fn check_docs(idx: &Index, f: &Filters) -> Result<(), ApiError> {
    for d in &f.docs {
        if idx.store.document(d).map_err(ApiError::internal)?.is_none() {
            return Err(ApiError::bad(format!(
                "filters.docs: no document {:?} in this index",
                d.0
            )));
        }
    }
    Ok(())
}

fn check_text(what: &str, s: &str, max: usize) -> Result<String, ApiError> {
    let t = s.trim();
    if t.is_empty() {
        return Err(ApiError::bad(format!("{what} is empty")));
    }
    let n = t.chars().count();
    if n > max {
        return Err(ApiError::bad(format!(
            "{what} is {n} characters long; the limit is {max}"
        )));
    }
    Ok(t.to_string())
}

fn check_k(k: Option<usize>, max: usize) -> Result<usize, ApiError> {
    match k.unwrap_or(10) {
        k @ 1.. if k <= max => Ok(k),
        k => Err(ApiError::bad(format!(
            "passages must be 1 to {max} (got {k})"
        ))),
    }
}

/// Sets the retriever a request asked for, if this index offers it.
fn choose_retriever(idx: &mut Index, name: Option<&str>) -> Result<(), ApiError> {
    let kind = match name.unwrap_or("auto") {
        "auto" | "" => None,
        "bm25" => Some(RetrieverKind::Bm25),
        "dense" => Some(RetrieverKind::Dense),
        "hybrid" => Some(RetrieverKind::Hybrid),
        other => {
            return Err(ApiError::bad(format!(
                "unknown retriever {other:?}; this index offers {}",
                retrievers(idx).join(", ")
            )));
        }
    };
    if matches!(kind, Some(RetrieverKind::Dense | RetrieverKind::Hybrid)) && !idx.has_dense() {
        return Err(ApiError::bad(format!(
            "retriever {:?} needs the embedding model and this index's vectors; this server offers bm25",
            name.unwrap_or_default()
        )));
    }
    idx.options.retriever = kind;
    Ok(())
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SearchBody {
    query: String,
    /// How many passages to list or read.
    #[serde(default, rename = "passages")]
    k: Option<usize>,
    #[serde(default)]
    retriever: Option<String>,
    #[serde(default)]
    filters: FilterBody,
}

/// `POST /api/find`: the record `find --json` prints.
pub async fn search(
    State(st): State<AppState>,
    body: Body<SearchBody>,
) -> Result<Json<Value>, ApiError> {
    let Json(b) = body?;
    let limits = st.inner.limits;
    let query = check_text("query", &b.query, limits.max_question_chars)?;
    let k = check_k(b.k, limits.max_passages)?;
    let filters = b.filters.resolve()?;
    st.with_index(move |idx| {
        choose_retriever(idx, b.retriever.as_deref())?;
        check_docs(idx, &filters)?;
        let hits = idx
            .search(&query, &filters, k)
            .map_err(ApiError::internal)?;
        Ok(Json(crate::retrieve::search_record(
            idx, &query, &filters, &hits,
        )))
    })
    .await
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AskBody {
    question: String,
    /// How many passages to list or read.
    #[serde(default, rename = "passages")]
    k: Option<usize>,
    #[serde(default)]
    retriever: Option<String>,
    #[serde(default)]
    drafter: Option<String>,
    #[serde(default)]
    judge: Option<String>,
    #[serde(default)]
    max_sentences: Option<usize>,
    #[serde(default)]
    filters: FilterBody,
}

/// An ask request, checked.
struct AskJob {
    question: String,
    k: usize,
    retriever: Option<String>,
    drafter: String,
    judge: JudgeKind,
    max_sentences: usize,
    filters: Filters,
}

fn check_ask(st: &AppState, b: AskBody) -> Result<AskJob, ApiError> {
    let limits = st.inner.limits;
    let question = check_text("question", &b.question, limits.max_question_chars)?;
    let k = check_k(b.k, limits.max_passages)?;
    let drafters = st.inner.models.drafters();
    let drafter = b.drafter.unwrap_or_else(|| "extractive".into());
    if !drafters.contains(&drafter.as_str()) {
        return Err(ApiError::bad(format!(
            "drafter {drafter:?} is not available here; choose one of {}",
            drafters.join(", ")
        )));
    }
    let judge = match b.judge.as_deref().unwrap_or("rules") {
        "rules" => JudgeKind::Rules,
        "learned" => JudgeKind::Learned,
        j => {
            return Err(ApiError::bad(format!(
                "unknown judge {j:?}; rules or learned"
            )));
        }
    };
    let max_sentences = match b.max_sentences.unwrap_or(3) {
        n @ 1..=10 => n,
        n => {
            return Err(ApiError::bad(format!(
                "max_sentences must be 1 to 10 (got {n})"
            )));
        }
    };
    let filters = b.filters.resolve()?;
    Ok(AskJob {
        question,
        k,
        retriever: b.retriever,
        drafter,
        judge,
        max_sentences,
        filters,
    })
}

/// Where progress events go while an answer is made.
type Sink = UnboundedSender<Event>;

fn stage(sink: Option<&Sink>, stage: &str, message: &str) {
    if let Some(t) = sink
        && let Ok(e) = Event::default()
            .event("stage")
            .json_data(json!({"stage": stage, "message": message}))
    {
        let _ = t.send(e);
    }
}

/// A drafter that reports when drafting starts and ends.
struct Announced<'a> {
    inner: &'a dyn Drafter,
    sink: Option<&'a Sink>,
}

impl Drafter for Announced<'_> {
    fn name(&self) -> String {
        self.inner.name()
    }

    fn draft(&self, req: &DraftRequest<'_>) -> crate::Result<Draft> {
        stage(
            self.sink,
            "drafting",
            "Drafting sentences from the passages found",
        );
        let d = self.inner.draft(req);
        stage(
            self.sink,
            "verifying",
            "Checking each sentence against its quote",
        );
        d
    }
}

fn run_ask(
    st: &AppState,
    idx: &mut Index,
    job: &AskJob,
    sink: Option<Sink>,
) -> Result<(AnswerRecord, Option<u64>), ApiError> {
    stage(sink.as_ref(), "retrieving", "Searching the records");
    choose_retriever(idx, job.retriever.as_deref())?;
    check_docs(idx, &job.filters)?;
    let judge = job.judge.build();
    let cfg = ExtractiveConfig {
        max_sentences: job.max_sentences,
        ..Default::default()
    };
    let extractive = Extractive::new(cfg);
    let model_drafter;
    let (drafter, settings): (&dyn Drafter, Value) = if job.drafter == "extractive" {
        (&extractive, serde_json::to_value(cfg).unwrap_or_default())
    } else {
        let model = st.inner.models.generator(&job.drafter)?;
        let mcfg = ModelDraftConfig::default();
        let mut d = ModelDrafter::new(model, mcfg.clone());
        if let Some(s) = sink.clone() {
            d.on_text = Some(Box::new(move |piece: &str| {
                if let Ok(e) = Event::default()
                    .event("draft")
                    .json_data(json!({"text": piece}))
                {
                    let _ = s.send(e);
                }
            }));
        }
        model_drafter = d;
        (
            &model_drafter,
            serde_json::to_value(mcfg).unwrap_or_default(),
        )
    };
    let announced = Announced {
        inner: drafter,
        sink: sink.as_ref(),
    };
    let fallback = Announced {
        inner: &extractive,
        sink: sink.as_ref(),
    };
    let a = answer::ask_with(
        idx,
        &job.question,
        AskPlan {
            filters: &job.filters,
            k: job.k,
            drafter: &announced,
            drafter_settings: settings,
            judge: judge.as_ref(),
            fallback: (job.drafter != "extractive").then_some(&fallback as &dyn Drafter),
            rewrite: None,
            selector: None,
        },
    )
    .map_err(|e| match e {
        crate::Error::Remote { .. } => ApiError::new(StatusCode::BAD_GATEWAY, e.to_string()),
        e => ApiError::internal(e),
    })?;
    let id = match idx.store.log_answer(&a) {
        Ok(n) => Some(n),
        Err(e) => {
            tracing::warn!("the answer was not logged: {e}");
            None
        }
    };
    Ok((a, id))
}

fn with_answer_id(mut resp: Response, id: Option<u64>) -> Response {
    if let Some(id) = id
        && let Ok(v) = HeaderValue::from_str(&id.to_string())
    {
        resp.headers_mut().insert("x-onrecord-answer-id", v);
    }
    resp
}

/// `POST /api/question`: the answer record `answer --json` prints; the answer's
/// number in the log is in the `X-Onrecord-Answer-Id` header.
pub async fn ask(State(st): State<AppState>, body: Body<AskBody>) -> Result<Response, ApiError> {
    let Json(b) = body?;
    let job = check_ask(&st, b)?;
    let st2 = st.clone();
    let (a, id) = st
        .with_index(move |idx| run_ask(&st2, idx, &job, None))
        .await?;
    Ok(with_answer_id(Json(a).into_response(), id))
}

/// `POST /api/question/stream`: server-sent events while the answer is made:
/// `stage` (`{"stage", "message"}`), `draft` (a model's text as it is
/// written, not yet verified), then `answer` (the answer record; the event
/// id is its number in the log) or `error` (`{"error": {...}}`).
pub async fn ask_stream(
    State(st): State<AppState>,
    body: Body<AskBody>,
) -> Result<Response, ApiError> {
    let Json(b) = body?;
    let job = check_ask(&st, b)?;
    // One channel, so the events arrive in the order they happened.
    let (tx, rx) = tokio::sync::mpsc::unbounded_channel::<Event>();
    stage(Some(&tx), "waiting", "Waiting for a free worker");
    let ptx = tx.clone();
    tokio::spawn(async move {
        let st2 = st.clone();
        let result = st
            .with_index(move |idx| run_ask(&st2, idx, &job, Some(ptx)))
            .await;
        let event = match result {
            Ok((a, id)) => {
                let mut e = Event::default().event("answer");
                if let Some(id) = id {
                    e = e.id(id.to_string());
                }
                e.json_data(&a)
            }
            Err(err) => Event::default().event("error").json_data(err.body()),
        };
        match event {
            Ok(e) => {
                let _ = tx.send(e);
            }
            Err(e) => tracing::error!("answer event not written: {e}"),
        }
    });
    let stream = futures_util::stream::unfold(rx, |mut rx| async move {
        rx.recv().await.map(|e| (Ok::<_, Infallible>(e), rx))
    });
    Ok(Sse::new(stream)
        .keep_alive(KeepAlive::default())
        .into_response())
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PageQuery {
    doc: String,
    page: u32,
    /// Character offsets of a quote on the page, to mark.
    #[serde(default)]
    from: Option<usize>,
    #[serde(default)]
    to: Option<usize>,
}

/// `GET /api/page?doc=ID&page=N[&from=C&to=C]`: one page's text, split
/// into `segments` with the quote (characters `from..to`) marked.
pub async fn page(
    State(st): State<AppState>,
    q: Params<PageQuery>,
) -> Result<Json<Value>, ApiError> {
    let Query(q) = q?;
    st.with_index(move |idx| {
        let store = &idx.store;
        let doc = DocId(q.doc.clone());
        let meta = store
            .document(&doc)
            .map_err(ApiError::internal)?
            .ok_or_else(|| {
                ApiError::new(
                    StatusCode::NOT_FOUND,
                    format!("no document {:?} in this index", q.doc),
                )
            })?;
        let (text, hash) = store
            .page(&doc, q.page)
            .map_err(ApiError::internal)?
            .ok_or_else(|| {
                ApiError::new(
                    StatusCode::NOT_FOUND,
                    format!(
                        "document {:?} has no page {} (it has {})",
                        q.doc, q.page, meta.pages
                    ),
                )
            })?;
        let segments = mark(&text, q.from, q.to);
        let ocr = store
            .page_ocr(&doc, q.page)
            .map_err(ApiError::internal)?
            .map(|o| json!({"reason": o.reason.to_string(), "confidence": o.confidence}));
        Ok(Json(json!({
            "doc_id": doc,
            "title": meta.title,
            "organisation": meta.organisation,
            "date": meta.date,
            "url": meta.url,
            "page": q.page,
            "pages": meta.pages,
            "page_hash": hash,
            "text": text,
            "segments": segments,
            "ocr": ocr,
        })))
    })
    .await
}

/// The page text in pieces, `{"text", "quote"}`, with characters
/// `from..to` (clamped to the page) as the quoted piece.
pub fn mark(text: &str, from: Option<usize>, to: Option<usize>) -> Vec<Value> {
    let n = text.chars().count();
    let Some(from) = from.map(|f| f.min(n)) else {
        return vec![json!({"text": text, "quote": false})];
    };
    let to = to.unwrap_or(n).clamp(from, n);
    let byte = |c: usize| text.char_indices().nth(c).map_or(text.len(), |(b, _)| b);
    let (a, b) = (byte(from), byte(to));
    [
        (&text[..a], false),
        (&text[a..b], true),
        (&text[b..], false),
    ]
    .into_iter()
    .filter(|(t, _)| !t.is_empty())
    .map(|(t, q)| json!({"text": t, "quote": q}))
    .collect()
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FormatQuery {
    #[serde(default)]
    format: Option<String>,
}

#[derive(Clone, Copy, PartialEq)]
enum Format {
    Json,
    Csv,
    Markdown,
}

impl Format {
    fn parse(s: Option<&str>) -> Result<Format, ApiError> {
        match s.unwrap_or("json") {
            "json" => Ok(Format::Json),
            "csv" => Ok(Format::Csv),
            "markdown" | "md" => Ok(Format::Markdown),
            f => Err(ApiError::bad(format!(
                "unknown format {f:?}; json, csv or markdown"
            ))),
        }
    }

    /// A record as a file's bytes: pretty JSON, or the CLI's Markdown or CSV.
    fn render<T: serde::Serialize>(
        self,
        value: &T,
        markdown: fn(&T) -> String,
        csv: impl FnOnce(&T, &mut Vec<u8>) -> csv::Result<()>,
    ) -> Result<Vec<u8>, ApiError> {
        match self {
            Format::Json => serde_json::to_vec_pretty(value).map_err(ApiError::internal),
            Format::Markdown => Ok(markdown(value).into_bytes()),
            Format::Csv => {
                let mut out = Vec::new();
                csv(value, &mut out).map_err(ApiError::internal)?;
                Ok(out)
            }
        }
    }

    fn file(self, stem: &str, body: Vec<u8>) -> Response {
        let (ext, mime) = match self {
            Format::Json => ("json", "application/json"),
            Format::Csv => ("csv", "text/csv; charset=utf-8"),
            Format::Markdown => ("md", "text/markdown; charset=utf-8"),
        };
        let disposition = format!("attachment; filename=\"{stem}.{ext}\"");
        let mut r = (StatusCode::OK, body).into_response();
        let h = r.headers_mut();
        h.insert(header::CONTENT_TYPE, HeaderValue::from_static(mime));
        if let Ok(v) = HeaderValue::from_str(&disposition) {
            h.insert(header::CONTENT_DISPOSITION, v);
        }
        r
    }
}

/// File name stem from a record's timestamp: `onrecord-answer-20241001-101500`.
fn stem(kind: &str, stamp: &str) -> String {
    let digits: String = stamp
        .chars()
        .filter(|c| c.is_ascii_digit())
        .take(14)
        .collect();
    match digits.len() {
        14 => format!("onrecord-{kind}-{}-{}", &digits[..8], &digits[8..]),
        _ => format!("onrecord-{kind}"),
    }
}

/// `POST /api/export?format=markdown|csv|json` with an answer record:
/// the same file `answer --markdown`, `--csv` or `--json` writes, as a download.
pub async fn export(
    q: Params<FormatQuery>,
    body: Body<AnswerRecord>,
) -> Result<Response, ApiError> {
    let Query(q) = q?;
    let format = Format::parse(q.format.as_deref())?;
    let Json(a) = body?;
    if a.schema_version != answer::ANSWER_SCHEMA_VERSION {
        return Err(ApiError::bad(format!(
            "answer record schema version {}; this onrecord writes version {}",
            a.schema_version,
            answer::ANSWER_SCHEMA_VERSION
        )));
    }
    let body = format.render(&a, crate::replay::markdown::render_answer, |a, out| {
        crate::replay::table::write_answer(a, out)
    })?;
    Ok(format.file(&stem("answer", &a.created_at), body))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReplayBody {
    /// A Markdown answer or an answer record (JSON), as text.
    #[serde(default)]
    text: Option<String>,
    /// An answer from this index's log.
    #[serde(default)]
    id: Option<u64>,
}

/// `POST /api/replay[?format=csv|markdown]` with `{"text": ...}` or
/// `{"id": N}`: the report `replay --json` prints, checked against this
/// index.
pub async fn replay(
    State(st): State<AppState>,
    q: Params<FormatQuery>,
    body: Body<ReplayBody>,
) -> Result<Response, ApiError> {
    use crate::replay::{ReplayInput, StorePages};
    let Query(q) = q?;
    let format = Format::parse(q.format.as_deref())?;
    let Json(b) = body?;
    let dir = st.inner.dir.clone();
    let report = st
        .with_index(move |idx| {
            let (claims, input) = match (b.text, b.id) {
                (Some(text), None) => {
                    let (claims, fmt) = crate::replay::read_answer(&text)
                        .map_err(|m| ApiError::bad(format!("the answer given: {m}")))?;
                    let input = ReplayInput {
                        source: "uploaded answer".into(),
                        format: fmt.into(),
                        answer_id: None,
                        created_at: claims.created_at.clone(),
                    };
                    (claims, input)
                }
                (None, Some(id)) => {
                    let json = idx
                        .store
                        .logged_answer(id)
                        .map_err(ApiError::internal)?
                        .ok_or_else(|| {
                            ApiError::new(
                                StatusCode::NOT_FOUND,
                                format!("no answer {id} in the log"),
                            )
                        })?;
                    let a: AnswerRecord =
                        serde_json::from_str(&json).map_err(ApiError::internal)?;
                    let input = ReplayInput {
                        source: format!("answer log #{id}"),
                        format: "json".into(),
                        answer_id: Some(id),
                        created_at: Some(a.created_at.clone()),
                    };
                    (crate::replay::claims_from_record(&a), input)
                }
                _ => return Err(ApiError::bad("give either text (the answer) or id")),
            };
            if claims.claims.is_empty() {
                return Err(ApiError::bad(
                    "nothing to replay: the answer has no verified sentence",
                ));
            }
            let judge = claims.judge_kind().build();
            let mut pages = StorePages::new(&idx.store, &dir);
            Ok(crate::replay::replay(
                &claims,
                input,
                &mut pages,
                judge.as_ref(),
            ))
        })
        .await?;
    if format == Format::Json {
        return Ok(Json(report).into_response());
    }
    let body = format.render(&report, crate::replay::markdown::render_replay, |r, out| {
        crate::replay::table::write_replay(r, out)
    })?;
    Ok(format.file(&stem("replay", &report.replayed_at), body))
}

/// `GET /api/records[?from&to&org]`: the list `records --json` prints.
pub async fn docs(
    State(st): State<AppState>,
    q: Params<FilterBody>,
) -> Result<Json<Value>, ApiError> {
    let Query(q) = q?;
    let filters = q.resolve()?;
    st.with_index(move |idx| {
        let store = &idx.store;
        let allowed = store.docs_matching(&filters).map_err(ApiError::internal)?;
        let docs: Vec<_> = store
            .documents()
            .map_err(ApiError::internal)?
            .into_iter()
            .filter(|d| allowed.as_ref().is_none_or(|a| a.contains(&d.doc_id)))
            .collect();
        Ok(Json(
            serde_json::to_value(docs).map_err(ApiError::internal)?,
        ))
    })
    .await
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LogQuery {
    #[serde(default)]
    limit: Option<usize>,
}

/// `GET /api/answers[?limit=N]`: the answer log, newest first, as `history --json`.
pub async fn answers(
    State(st): State<AppState>,
    q: Params<LogQuery>,
) -> Result<Json<Value>, ApiError> {
    let Query(q) = q?;
    let limit = q.limit.unwrap_or(50).clamp(1, 1000);
    let dir = st.inner.dir.clone();
    st.with_index(move |idx| {
        let log = idx.store.answer_log(limit).map_err(ApiError::internal)?;
        Ok(Json(json!({"index": dir, "answers": log})))
    })
    .await
}

/// `GET /api/answers/{id}`: one logged answer record.
pub async fn answer(
    State(st): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<Value>, ApiError> {
    let id: u64 = id
        .parse()
        .map_err(|_| ApiError::bad(format!("answer ids are numbers (got {id:?})")))?;
    st.with_index(move |idx| {
        let json = idx
            .store
            .logged_answer(id)
            .map_err(ApiError::internal)?
            .ok_or_else(|| {
                ApiError::new(StatusCode::NOT_FOUND, format!("no answer {id} in the log"))
            })?;
        Ok(Json(
            serde_json::from_str(&json).map_err(ApiError::internal)?,
        ))
    })
    .await
}

/// Any other address.
pub async fn not_found() -> ApiError {
    ApiError::new(StatusCode::NOT_FOUND, "no such address on this server")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Naive reference: characters collected one by one.
    fn naive(text: &str, from: usize, to: usize) -> (String, String, String) {
        let chars: Vec<char> = text.chars().collect();
        let n = chars.len();
        let (f, t) = (from.min(n), to.clamp(from.min(n), n));
        (
            chars[..f].iter().collect(),
            chars[f..t].iter().collect(),
            chars[t..].iter().collect(),
        )
    }

    #[test]
    fn mark_splits_on_characters_not_bytes() {
        let text = "Le terminal rouvrira le lundi 22 avril — à 6 h 15. «Fin»";
        let n = text.chars().count();
        for (from, to) in [
            (0, 5),
            (3, 3),
            (30, 42),
            (44, 48),
            (50, n),
            (10, 999),
            (n, n),
            (999, 1000),
            (12, 4),
        ] {
            let got = mark(text, Some(from), Some(to));
            let (a, q, b) = naive(text, from, to);
            let mut want = vec![];
            for (t, is_q) in [(a, false), (q, true), (b, false)] {
                if !t.is_empty() {
                    want.push(json!({"text": t, "quote": is_q}));
                }
            }
            assert_eq!(got, want, "{from}..{to}");
        }
        assert_eq!(
            mark(text, None, Some(3)),
            vec![json!({"text": text, "quote": false})]
        );
        // No end: to the end of the page (a quote that runs onto the next page).
        let got = mark(text, Some(n - 5), None);
        assert_eq!(
            got.last().unwrap(),
            &json!({"text": "«Fin»", "quote": true})
        );
    }

    #[test]
    fn stems_come_from_the_timestamp() {
        assert_eq!(
            stem("answer", "2024-10-01T10:15:00Z"),
            "onrecord-answer-20241001-101500"
        );
        assert_eq!(stem("replay", "garbled"), "onrecord-replay");
    }
}
