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

/// Prints a measured figure and keeps it in `target/tmp/test-figures.txt`,
/// one line per figure, so the figures of passing tests (whose output cargo
/// captures) can be read after the run; `.ci/run` prints the file. The file
/// is started afresh by the first figure of each run.
pub fn figure(line: &str) {
    use std::io::Write;
    use std::sync::{Mutex, OnceLock};
    static FILE: OnceLock<Mutex<Option<std::fs::File>>> = OnceLock::new();
    eprintln!("{line}");
    let file = FILE.get_or_init(|| {
        let path = Path::new(env!("CARGO_TARGET_TMPDIR")).join("test-figures.txt");
        Mutex::new(std::fs::File::create(&path).ok())
    });
    if let Some(f) = file.lock().unwrap_or_else(|e| e.into_inner()).as_mut() {
        // One write per line, so lines from parallel tests never interleave.
        let _ = f.write_all(format!("{}\n", line.replace('\n', " ")).as_bytes());
    }
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
/// use (type, required, properties, additionalProperties: false, items,
/// enum, const, and `$ref` to `#/$defs/NAME`). Returns the
/// problems found, each with its JSON path.
pub fn schema_problems(v: &serde_json::Value, schema: &serde_json::Value, at: &str) -> Vec<String> {
    schema_problems_in(v, schema, schema, at)
}

fn schema_problems_in(
    v: &serde_json::Value,
    schema: &serde_json::Value,
    root: &serde_json::Value,
    at: &str,
) -> Vec<String> {
    use serde_json::Value;
    let mut out = Vec::new();
    if let Some(r) = schema.get("$ref").and_then(Value::as_str) {
        let def = r
            .strip_prefix("#/$defs/")
            .and_then(|name| root.get("$defs").and_then(|d| d.get(name)));
        return match def {
            Some(d) => schema_problems_in(v, d, root, at),
            None => vec![format!("{at}: unresolved $ref {r}")],
        };
    }
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
                out.extend(schema_problems_in(val, sub, root, &format!("{at}.{k}")));
            }
        }
        if schema.get("additionalProperties") == Some(&Value::Bool(false)) {
            for k in obj.keys().filter(|k| !props.contains_key(*k)) {
                out.push(format!("{at}: `{k}` is not in the schema"));
            }
        }
    }
    if let (Some(items), Some(arr)) = (schema.get("items"), v.as_array()) {
        for (i, val) in arr.iter().enumerate() {
            out.extend(schema_problems_in(val, items, root, &format!("{at}[{i}]")));
        }
    }
    out
}

/// The default embedding model, or None with a clear message when it is not
/// on this machine. Under CI=true its absence is a failure: CI runs
/// `eval/models/fetch` first.
pub fn model() -> Option<std::sync::Arc<dyn onrecord::embed::Embedder>> {
    let r =
        onrecord::embed::resolve(&onrecord::embed::EmbedderChoice::Auto).expect("auto never fails");
    if r.embedder.is_some() {
        return r.embedder;
    }
    let msg = format!(
        "embedding model absent ({}); run eval/models/fetch",
        r.note.unwrap_or_default()
    );
    if std::env::var("CI").is_ok_and(|v| v == "true") {
        panic!("{msg} (required under CI=true)");
    }
    eprintln!("{msg}; check skipped");
    None
}

/// A small deterministic embedder for testing the index mechanics without a
/// model: each word (lower-cased) adds to one of 64 dimensions chosen by its
/// hash, and the vector is scaled to unit length. It counts what it embeds
/// and can be told to fail after some number of calls.
pub struct HashEmbedder {
    pub id: String,
    pub embedded: std::sync::atomic::AtomicUsize,
    pub calls: std::sync::atomic::AtomicUsize,
    pub fail_after_calls: Option<usize>,
}

impl HashEmbedder {
    pub fn new() -> HashEmbedder {
        HashEmbedder {
            id: "hash-words@test".into(),
            embedded: Default::default(),
            calls: Default::default(),
            fail_after_calls: None,
        }
    }

    pub fn embedded(&self) -> usize {
        self.embedded.load(std::sync::atomic::Ordering::SeqCst)
    }
}

impl onrecord::embed::Embedder for HashEmbedder {
    fn id(&self) -> &str {
        &self.id
    }
    fn dim(&self) -> usize {
        64
    }
    fn token_ids(&self, text: &str) -> onrecord::Result<Vec<u32>> {
        Ok(text.split_whitespace().map(|w| w.len() as u32).collect())
    }
    fn embed(&self, texts: &[&str]) -> onrecord::Result<Vec<Vec<f32>>> {
        use std::sync::atomic::Ordering::SeqCst;
        let call = self.calls.fetch_add(1, SeqCst);
        if self.fail_after_calls.is_some_and(|n| call >= n) {
            return Err(onrecord::Error::Invalid(
                "test embedder told to fail".into(),
            ));
        }
        self.embedded.fetch_add(texts.len(), SeqCst);
        Ok(texts
            .iter()
            .map(|t| {
                let mut v = vec![0f32; 64];
                for w in onrecord::text::terms(t) {
                    let h = onrecord::text::hash_hex(w.as_bytes());
                    let i = usize::from_str_radix(&h[..4], 16).unwrap() % 64;
                    v[i] += 1.0;
                }
                onrecord::embed::normalise(&mut v);
                v
            })
            .collect())
    }
}

/// The default drafting model (SmolLM2-135M-Instruct GGUF), or None with a
/// clear message when it is not on this machine. Under CI=true its absence
/// is a failure: CI runs `eval/models/fetch` first.
pub fn llm_file() -> Option<PathBuf> {
    match onrecord::llm::resolve(&onrecord::llm::LlmChoice::Auto) {
        Ok(p) => Some(p),
        Err(e) => {
            let msg = format!("drafting model absent ({e}); run eval/models/fetch");
            if std::env::var("CI").is_ok_and(|v| v == "true") {
                panic!("{msg} (required under CI=true)");
            }
            eprintln!("{msg}; check skipped");
            None
        }
    }
}

/// The demo release rendered and ingested once per test run (BM25 only),
/// with the ingest report of that first build: `<dir>/release` and
/// `<dir>/index`, as `onrecord demo --workdir <dir>` lays them out. Nothing
/// writes here after it is built: a test that logs answers or adds vectors
/// works on a copy of the index (`copy_dir`). The index knows its files by
/// their full path, so a copied release would be read again on ingest; a
/// test that ingests or edits the release builds its own.
pub fn demo_workdir() -> &'static (PathBuf, Report) {
    use std::sync::OnceLock;
    static DIR: OnceLock<(PathBuf, Report)> = OnceLock::new();
    DIR.get_or_init(|| {
        let source = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
        let work = tempfile::tempdir().unwrap().keep();
        let (_, report, diags) = onrecord::demo::prepare(&source, &work, false).unwrap();
        assert_eq!(report.failed, 0, "{diags:#?}");
        (work, report)
    })
}

/// The shared demo index, for tests that only read it.
pub fn demo_index() -> &'static Path {
    static DIR: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    DIR.get_or_init(|| demo_workdir().0.join("index"))
}

/// A copy of the demo index for the web tests, which log answers into it
/// (so other tests' demo index stays as built).
pub fn web_index() -> &'static Path {
    use std::sync::OnceLock;
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let to = tempfile::tempdir().unwrap().keep().join("index");
        copy_dir(demo_index(), &to);
        to
    })
}

/// Copies a folder (an index, say) file by file.
pub fn copy_dir(from: &Path, to: &Path) {
    for e in walkdir::WalkDir::new(from) {
        let e = e.unwrap();
        let dst = to.join(e.path().strip_prefix(from).unwrap());
        if e.file_type().is_dir() {
            std::fs::create_dir_all(&dst).unwrap();
        } else if let Err(err) = std::fs::copy(e.path(), &dst) {
            // A reader closing the index removes SQLite's -wal and -shm
            // files; one that vanished while being copied was empty.
            assert_eq!(err.kind(), std::io::ErrorKind::NotFound, "{err}");
        }
    }
}

/// `onrecord web` on a free loopback port, in its own runtime thread,
/// stopped when dropped.
pub struct TestServer {
    pub addr: std::net::SocketAddr,
    stop: Option<tokio::sync::oneshot::Sender<()>>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl TestServer {
    pub fn start(index: &Path, token: Option<&str>) -> TestServer {
        TestServer::start_with(index, token, onrecord::web::Limits::default())
    }

    pub fn start_with(
        index: &Path,
        token: Option<&str>,
        limits: onrecord::web::Limits,
    ) -> TestServer {
        let (addr_tx, addr_rx) = std::sync::mpsc::channel();
        let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
        let opts = onrecord::web::ServeOptions {
            index: index.to_path_buf(),
            bind: "127.0.0.1:0".parse().unwrap(),
            token: token.map(str::to_string),
            embedder: None,
            limits,
        };
        let thread = std::thread::spawn(move || {
            let rt = tokio::runtime::Builder::new_multi_thread()
                .worker_threads(2)
                .enable_all()
                .build()
                .unwrap();
            rt.block_on(async move {
                let server = onrecord::web::Server::bind(opts).await.unwrap();
                addr_tx.send(server.addr).unwrap();
                server
                    .run(async {
                        let _ = stopped.await;
                    })
                    .await
                    .unwrap();
            });
        });
        let addr = addr_rx
            .recv_timeout(std::time::Duration::from_secs(60))
            .unwrap();
        TestServer {
            addr,
            stop: Some(stop),
            thread: Some(thread),
        }
    }
}

impl Drop for TestServer {
    fn drop(&mut self) {
        if let Some(s) = self.stop.take() {
            let _ = s.send(());
        }
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

/// One answer with the defaults: the extractive drafter, the rules judge,
/// k = 10, no filters.
pub fn ask_extractive(
    index: &onrecord::retrieve::Index,
    question: &str,
) -> onrecord::answer::AnswerRecord {
    onrecord::answer::ask(
        index,
        question,
        &onrecord::types::Filters::default(),
        10,
        &onrecord::draft::Extractive::default(),
        serde_json::Value::Null,
        &onrecord::verify::RulesJudge::default(),
    )
    .unwrap()
}
