//! `eval run` from the command line: the demo question set under two
//! configurations, the report parsed back (HTML with an HTML5 parser, JSON
//! against its schema), identical configurations compared, and document
//! text escaped in the report.

use crate::support::{schema_problems, slow_enabled, write};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn onrecord(args: &[&str], embedder: &str) -> Output {
    Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(args)
        .env("ONRECORD_EMBEDDER", embedder)
        .env_remove("ONRECORD_INDEX")
        .env_remove("RUST_LOG")
        .output()
        .expect("the binary runs")
}

/// One demo work folder for the demo-set runs here, used by one run at a
/// time (the index takes one writer): the first run builds the release and
/// ingests it through `eval run --workdir`, the next finds it up to date.
fn demo_workdir() -> (std::sync::MutexGuard<'static, Option<PathBuf>>, PathBuf) {
    static WORK: std::sync::Mutex<Option<PathBuf>> = std::sync::Mutex::new(None);
    let mut guard = WORK.lock().unwrap_or_else(|e| e.into_inner());
    let dir = guard
        .get_or_insert_with(|| tempfile::tempdir().unwrap().keep().join("demo"))
        .clone();
    (guard, dir)
}

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn check_schema(v: &Value) {
    let schema: Value = serde_json::from_str(
        &std::fs::read_to_string(root().join("eval/eval-report.schema.json")).unwrap(),
    )
    .unwrap();
    let problems = schema_problems(v, &schema, "$");
    assert!(
        problems.is_empty(),
        "eval report breaks its schema: {problems:#?}"
    );
}

/// `onrecord eval run ARGS --json`: exit 0, JSON that keeps its schema.
fn eval_json(args: &[&str], embedder: &str) -> Value {
    let mut all = vec!["eval", "run"];
    all.extend_from_slice(args);
    all.push("--json");
    let out = onrecord(&all, embedder);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    check_schema(&v);
    v
}

/// Parse the HTML report with html5ever (through scraper): no parse errors,
/// no script, every question present.
fn check_html(path: &Path, ids: &[String]) -> scraper::Html {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = scraper::Html::parse_document(&text);
    assert!(doc.errors.is_empty(), "HTML parse errors: {:?}", doc.errors);
    let sel = |s: &str| scraper::Selector::parse(s).unwrap();
    assert_eq!(doc.select(&sel("script")).count(), 0, "no scripts");
    assert!(
        !text.contains("src=\"http") && !text.contains("href=\"http"),
        "no external assets"
    );
    let summaries: Vec<String> = doc
        .select(&sel("details > summary"))
        .map(|s| s.text().collect())
        .collect();
    assert_eq!(summaries.len(), ids.len());
    for id in ids {
        assert!(
            summaries.iter().any(|s| s.starts_with(id.as_str())),
            "question {id} is in the drill-down"
        );
    }
    assert!(
        doc.select(&sel("svg")).count() >= 2,
        "charts are inline SVG"
    );
    assert!(text.contains("Caution:"));
    doc
}

#[test]
fn the_demo_set_runs_side_by_side_and_reports() {
    let tmp = tempfile::tempdir().unwrap();
    let bm25 = root().join("eval/configs/bm25-extractive.toml");
    let text = std::fs::read_to_string(&bm25).unwrap();
    let copy = write(
        tmp.path(),
        "same.toml",
        text.replace("name = \"bm25-extractive\"", "name = \"same-again\""),
    );
    let report = tmp.path().join("report");
    let (_shared, work) = demo_workdir();
    let questions = root().join("eval/demo/questions.jsonl");
    let out = onrecord(
        &[
            "eval",
            "run",
            questions.to_str().unwrap(),
            "--config",
            bm25.to_str().unwrap(),
            "--config",
            copy.to_str().unwrap(),
            "--report",
            report.to_str().unwrap(),
            "--workdir",
            work.to_str().unwrap(),
            "--json",
        ],
        "off",
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    check_schema(&v);
    let from_file: Value =
        serde_json::from_str(&std::fs::read_to_string(report.join("report.json")).unwrap())
            .unwrap();
    assert_eq!(
        from_file["configs"], v["configs"],
        "report.json holds the same numbers"
    );
    let ids: Vec<String> = v["questions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|q| q["id"].as_str().unwrap().to_string())
        .collect();
    let n_questions = std::fs::read_to_string(&questions)
        .unwrap()
        .lines()
        .filter(|l| !l.trim().is_empty())
        .count();
    assert_eq!(ids.len(), n_questions);
    let configs = v["configs"].as_array().unwrap();
    assert_eq!(configs.len(), 2);
    for c in configs {
        assert_eq!(c["questions"].as_array().unwrap().len(), n_questions);
        let h = &c["headline"];
        for key in [
            "page_recall@k",
            "page_ndcg@10",
            "answer_contained",
            "abstain_recall",
            "strike_rate",
        ] {
            assert!(h[key].is_number(), "{key} in {h:#}");
        }
        assert_eq!(c["citation_judge"], "learned-v1");
    }
    // Identical configurations: every difference is 0, inside its interval.
    let cmp = &v["comparisons"][0];
    assert_eq!(
        (cmp["a"].as_str(), cmp["b"].as_str()),
        (Some("bm25-extractive"), Some("same-again"))
    );
    for m in cmp["metrics"].as_array().unwrap() {
        assert_eq!(m["diff"], 0.0, "{m}");
        assert!(
            m["low"].as_f64().unwrap() <= 0.0 && m["high"].as_f64().unwrap() >= 0.0,
            "{m}"
        );
        assert_eq!(m["beyond_noise"], false);
    }
    check_html(&report.join("report.html"), &ids);
    let md = std::fs::read_to_string(report.join("summary.md")).unwrap();
    assert!(md.contains("| page nDCG@10 |") && md.contains("same-again minus bm25-extractive"));

    // Text from a question set is escaped; markup in it stays inert.
    let hostile = write(
        tmp.path(),
        "hostile.jsonl",
        "{\"id\": \"x1\", \"question\": \"What did <img src=x onerror=alert(1)> and <script>alert(2)</script> cost?\", \"answerable\": false}\n\
         {\"id\": \"x2\", \"question\": \"Why was Ramp 3A closed in March 2022?\", \"answers\": [\"not safe\"], \"answerable\": true}\n",
    );
    let report2 = tmp.path().join("report2");
    let out = onrecord(
        &[
            "eval",
            "run",
            hostile.to_str().unwrap(),
            "--config",
            bm25.to_str().unwrap(),
            "--index",
            work.join("index").to_str().unwrap(),
            "--report",
            report2.to_str().unwrap(),
        ],
        "off",
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let doc = check_html(&report2.join("report.html"), &["x1".into(), "x2".into()]);
    let img = scraper::Selector::parse("img").unwrap();
    assert_eq!(doc.select(&img).count(), 0, "the question's markup is text");
    let html = std::fs::read_to_string(report2.join("report.html")).unwrap();
    assert!(html.contains("&lt;img src=x onerror=alert(1)&gt;"));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains("| abstention recall (unanswerable questions declined) |"),
        "{stdout}"
    );

    // A bad configuration names its file and line.
    let bad = write(
        tmp.path(),
        "bad.toml",
        "name = \"b\"\n[retrieval]\nretriver = \"bm25\"\n",
    );
    let out = onrecord(
        &[
            "eval",
            "run",
            hostile.to_str().unwrap(),
            "--config",
            bad.to_str().unwrap(),
            "--index",
            work.join("index").to_str().unwrap(),
        ],
        "off",
    );
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("bad.toml, line 3") && err.contains("retriver"),
        "{err}"
    );
}

/// The bundled demo set under the bundled configurations, end to end:
/// both when the embedding model is present (CI fetches it), BM25 alone
/// otherwise. The figures are the demo's own, checked as behaviour (gold
/// pages found, answers found, unanswerable questions declined), not
/// against a published value.
#[test]
fn slow_the_bundled_demo_eval_runs_end_to_end() {
    if !slow_enabled("slow_the_bundled_demo_eval_runs_end_to_end") {
        return;
    }
    let model = crate::support::model();
    let tmp = tempfile::tempdir().unwrap();
    let report = tmp.path().join("report");
    let (_shared, work) = demo_workdir();
    let v = eval_json(
        &[
            root().join("eval/demo/questions.jsonl").to_str().unwrap(),
            "--report",
            report.to_str().unwrap(),
            "--workdir",
            work.to_str().unwrap(),
        ],
        "auto",
    );
    let configs = v["configs"].as_array().unwrap();
    assert_eq!(
        configs.len(),
        if model.is_some() { 2 } else { 1 },
        "{:#}",
        v["skipped"]
    );
    for c in configs {
        let h = &c["headline"];
        crate::support::figure(&format!("demo eval, {}: {h}", c["name"]));
        assert!(h["page_recall@k"].as_f64().unwrap() >= 0.70, "{h:#}");
        assert!(h["abstain_recall"].as_f64().unwrap() > 0.0, "{h:#}");
        // Each kind of question apart (ids a and b in the records' words,
        // r as a reporter words them, n near misses): the demo's own
        // figures (gold answer in a verified sentence for a and b together
        // 0.62 + 0.64 with BM25, 0.62 + 0.55 hybrid; for r 0.26 and 0.28
        // (0.21 before record lines, the new answer kinds and the ranker's
        // first sentence first); near misses declined 0.88 and 0.75 with
        // the rate, count and redaction checks, 0.62 and 0.50 without);
        // the floors sit below.
        let g = |group: &str, metric: &str| {
            c["groups"][group]["headline"][metric]
                .as_f64()
                .unwrap_or_else(|| panic!("no {metric} for group {group}: {:#}", c["groups"]))
        };
        crate::support::figure(&format!(
            "demo eval by group, {}: {:#}",
            c["name"], c["groups"]
        ));
        assert!(
            g("a", "answer_contained") + g("b", "answer_contained") >= 0.8,
            "{:#}",
            c["groups"]
        );
        assert!(g("r", "answer_contained") >= 0.22, "{:#}", c["groups"]);
        assert!(g("n", "abstain_recall") >= 0.6, "{:#}", c["groups"]);
    }
    if configs.len() == 2 {
        assert!(
            !v["comparisons"][0]["metrics"]
                .as_array()
                .unwrap()
                .is_empty()
        );
    }
}

/// The SQuAD v1.1 adapter: each paragraph of the chosen articles becomes a
/// one-page document, each question keeps its gold answers and page. The
/// extractive drafter answers with whole sentences, so exact match is near
/// 0 by construction; token F1 and "gold answer in a verified sentence"
/// carry the signal.
#[test]
fn a_squad_file_runs_through_its_adapter() {
    let Some(squad) = crate::support::shared_data("squad-v1.1/dev-v1.1.json") else {
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let v = eval_json(
        &[
            squad.to_str().unwrap(),
            "--articles",
            "1-1",
            "--limit",
            "40",
            "--config",
            root()
                .join("eval/configs/bm25-extractive.toml")
                .to_str()
                .unwrap(),
            "--report",
            tmp.path().join("r").to_str().unwrap(),
        ],
        "off",
    );
    let qs = v["questions"].as_array().unwrap();
    assert!((30..=40).contains(&qs.len()), "{}", qs.len());
    assert!(
        qs.iter()
            .all(|q| !q["answers"].as_array().unwrap().is_empty())
    );
    let h = &v["configs"][0]["headline"];
    crate::support::figure(&format!(
        "SQuAD article 1, 40 questions, bm25-extractive: {h}"
    ));
    assert!(h["f1"].as_f64().unwrap() > 0.05, "{h:#}");
    assert!(h["answer_contained"].as_f64().unwrap() > 0.3, "{h:#}");
    assert!(h["page_recall@k"].as_f64().unwrap() > 0.5, "{h:#}");
    assert!(h.get("abstain_precision").is_none() || h["abstain_precision"] == 0.0);
}

/// The BEIR adapter scores retrieval only (no gold answers): SciFact test
/// queries against its corpus, each abstract a one-page document. BM25's
/// nDCG@10 on SciFact is 0.665 in the BEIR paper (Thakur et al. 2021,
/// as listed in scifact/PROVENANCE.txt); on a 60-query slice the figure
/// must land near it.
#[test]
fn slow_a_beir_folder_runs_through_its_adapter() {
    if !slow_enabled("slow_a_beir_folder_runs_through_its_adapter") {
        return;
    }
    let Some(beir) = crate::support::shared_data("scifact/beir") else {
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let v = eval_json(
        &[
            beir.to_str().unwrap(),
            "--limit",
            "60",
            "--config",
            root()
                .join("eval/configs/bm25-extractive.toml")
                .to_str()
                .unwrap(),
            "--report",
            tmp.path().join("r").to_str().unwrap(),
            "--quiet",
        ],
        "off",
    );
    let h = &v["configs"][0]["headline"];
    crate::support::figure(&format!("SciFact test, 60 queries, bm25: {h}"));
    let ndcg = h["doc_ndcg@10"].as_f64().unwrap();
    assert!((0.5..=0.85).contains(&ndcg), "doc nDCG@10 {ndcg}");
    assert!(h.get("f1").is_none(), "no gold answers, no answer figures");
}
