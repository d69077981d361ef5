//! An ingest killed with SIGKILL at any point loses nothing: the next
//! ingest completes, and then every file is stored once, in its latest
//! version, the store passes SQLite's integrity check, search and ask work
//! without a manual `reindex`, and the answer log is intact.
//!
//! Each cycle rewrites every file (so every document is replaced), starts
//! an ingest, kills it after a share of a full run's time (early: reading
//! and storing; late: the BM25 commit, embedding and saving vectors when
//! the embedding model is present), then runs the ingest again.

use crate::support::{figure, slow_enabled};
use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

const FILES: usize = 300;

fn onrecord(args: &[&str], index: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(args)
        .arg("--index")
        .arg(index)
        .output()
        .unwrap()
}

fn ingest_args(dir: &Path) -> Vec<String> {
    vec![
        "add".into(),
        dir.to_string_lossy().into_owned(),
        "--json".into(),
        "--quiet".into(),
    ]
}

/// The word that marks file `i` in revision `rev`, for search.
fn marker(i: usize, rev: usize) -> String {
    format!("tallyq{i}r{rev}")
}

/// Writes every record as a PDF (each is read in a worker process, so the
/// reading and storing phase lasts seconds, like the embedding phase).
fn write_revision(dir: &Path, rev: usize) {
    use onrecord::extract::pdf::{PdfPage, write_text_pdf};
    for i in 0..FILES {
        let page = PdfPage {
            lines: vec![
                format!("Record {i} of the Vell Quay harbour release, revision {rev}."),
                format!(
                    "The fender at berth {i} was inspected by crew {}.",
                    marker(i, rev)
                ),
                "The crew found the timber sound and the bolts tight.".into(),
                format!("The next inspection of berth {i} is due in the spring."),
            ],
        };
        write_text_pdf(
            &dir.join(format!("rec-{i:03}.pdf")),
            "Berth record",
            &[page],
        )
        .unwrap();
    }
}

fn run_ingest(dir: &Path, index: &Path) -> serde_json::Value {
    let args = ingest_args(dir);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let out = onrecord(&args, index);
    assert!(
        out.status.success(),
        "ingest failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// Starts an ingest and kills it with SIGKILL after `after`. Returns
/// whether it was still running when killed.
fn killed_ingest(dir: &Path, index: &Path, after: Duration) -> bool {
    let mut child = Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(ingest_args(dir))
        .arg("--index")
        .arg(index)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while start.elapsed() < after {
        if child.try_wait().unwrap().is_some() {
            return false;
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    // Child::kill sends SIGKILL on Unix.
    let running = child.try_wait().unwrap().is_none();
    let _ = child.kill();
    let _ = child.wait();
    running
}

/// Everything that must hold after a completed ingest of revision `rev`.
fn check(index: &Path, rev: usize, report: &serde_json::Value, history: usize) {
    let conn = rusqlite::Connection::open(index.join(onrecord::store::STORE_FILE)).unwrap();
    let ok: String = conn
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ok, "ok");
    let docs: i64 = conn
        .query_row("SELECT count(*) FROM documents", [], |r| r.get(0))
        .unwrap();
    assert_eq!(docs, FILES as i64, "document count");
    let dups: i64 = conn
        .query_row(
            "SELECT count(*) FROM (SELECT source FROM documents GROUP BY source HAVING count(*) > 1)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(dups, 0, "duplicate documents");
    let stale: i64 = conn
        .query_row(
            "SELECT count(*) FROM pages WHERE text NOT LIKE ?1",
            [format!("%revision {rev}.%")],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(stale, 0, "pages of an older revision remain");
    if let Some(sync) = report["embedding"]["vector_index"].as_object() {
        let chunks: i64 = conn
            .query_row("SELECT count(*) FROM chunks", [], |r| r.get(0))
            .unwrap();
        assert_eq!(sync["total"].as_i64(), Some(chunks), "vectors: {sync:?}");
    }
    // Search finds the latest revision's words, without a reindex.
    for i in [0, FILES / 2, FILES - 1] {
        let out = onrecord(&["find", &marker(i, rev), "--json"], index);
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        assert!(text.contains(&format!("rec-{i:03}")), "search {i}: {text}");
    }
    let out = onrecord(
        &["answer", "Who inspected the fender at berth 7?", "--json"],
        index,
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let out = onrecord(&["history", "--json"], index);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(
        v["answers"].as_array().unwrap().len() >= history,
        "the answer log lost records: {v}"
    );
}

/// How far the killed run got: documents already at revision `rev`.
fn stored_at(index: &Path, rev: usize) -> i64 {
    let Ok(conn) = rusqlite::Connection::open(index.join(onrecord::store::STORE_FILE)) else {
        return 0;
    };
    conn.query_row(
        "SELECT count(DISTINCT doc) FROM pages WHERE text LIKE ?1",
        [format!("%revision {rev}.%")],
        |r| r.get(0),
    )
    .unwrap_or(0)
}

#[test]
fn slow_an_ingest_killed_at_any_point_loses_nothing() {
    if !slow_enabled("slow_an_ingest_killed_at_any_point_loses_nothing") {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write_revision(dir.path(), 0);
    let report = run_ingest(dir.path(), idx.path());
    let embedded = report["embedding"].is_object();
    // One answer in the log before any kill; each check asks once more, so
    // revision `rev` starts with at least `rev` answers logged.
    check(idx.path(), 0, &report, 0);
    // How long a run that replaces every document takes, uninterrupted.
    write_revision(dir.path(), 1);
    let start = Instant::now();
    let report = run_ingest(dir.path(), idx.path());
    let full = start.elapsed();
    check(idx.path(), 1, &report, 1);
    let shares = [0.05, 0.2, 0.35, 0.5, 0.65, 0.8];
    let mut landed = Vec::new();
    for (n, share) in shares.iter().enumerate() {
        let rev = n + 2;
        write_revision(dir.path(), rev);
        if killed_ingest(dir.path(), idx.path(), full.mul_f64(*share)) {
            landed.push(format!("{}/{FILES}", stored_at(idx.path(), rev)));
        }
        let report = run_ingest(dir.path(), idx.path());
        check(idx.path(), rev, &report, rev);
    }
    figure(&format!(
        "kill -9 during ingest: {FILES} files replaced per run, a full run {:.1} s{}; {} of {} runs killed while running (at {:?} of a run; new versions stored when killed: {}); every one recovered by the next ingest: counts, no duplicates, latest version only, integrity ok, search and ask without reindex, answer log intact",
        full.as_secs_f64(),
        if embedded {
            " with embeddings"
        } else {
            " (no embedding model)"
        },
        landed.len(),
        shares.len(),
        shares,
        landed.join(", ")
    ));
    assert!(
        landed.len() >= shares.len() - 1,
        "only {} kills landed mid-run",
        landed.len()
    );
}
