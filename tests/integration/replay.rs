//! Replay, exports and the answer log, as a fact-checker meets them on the
//! command line: answers made from the demo release, proved again after
//! tampering, wrong footnotes, edited and deleted sources, and read back
//! from CSV with a general-purpose reader (RFC 4180).

use crate::support::{schema_problems, write};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn onrecord(args: &[&str], index: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(args)
        .env("ONRECORD_INDEX", index)
        .env("ONRECORD_EMBEDDER", "off")
        .env_remove("RUST_LOG")
        .output()
        .expect("the binary runs")
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn replay_json(args: &[&str], index: &Path, want_code: i32) -> Value {
    let mut all = vec!["replay"];
    all.extend_from_slice(args);
    all.push("--json");
    let out = onrecord(&all, index);
    assert_eq!(
        out.status.code(),
        Some(want_code),
        "replay {args:?}: {}\n{}",
        stderr(&out),
        stdout(&out)
    );
    let v: Value = serde_json::from_str(&stdout(&out)).expect("replay --json prints JSON");
    let schema: Value = serde_json::from_str(
        &std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/replay-record.schema.json"),
        )
        .unwrap(),
    )
    .unwrap();
    let problems = schema_problems(&v, &schema, "$");
    assert!(
        problems.is_empty(),
        "replay report breaks its schema: {problems:#?}"
    );
    assert_eq!(v["exit_code"], want_code);
    v
}

fn verdicts(v: &Value) -> Vec<String> {
    v["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["verdict"].as_str().unwrap().to_string())
        .collect()
}

/// The demo sources copied (so they can be edited), rendered to PDFs and
/// ingested with BM25 only.
struct Demo {
    _tmp: tempfile::TempDir,
    src: PathBuf,
    release: PathBuf,
    index: PathBuf,
    work: PathBuf,
}

impl Demo {
    fn new() -> Demo {
        let tmp = tempfile::tempdir().unwrap();
        let src = tmp.path().join("demo-src");
        let from = Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
        for e in walkdir::WalkDir::new(&from) {
            let e = e.unwrap();
            let to = src.join(e.path().strip_prefix(&from).unwrap());
            if e.file_type().is_dir() {
                std::fs::create_dir_all(&to).unwrap();
            } else {
                std::fs::copy(e.path(), &to).unwrap();
            }
        }
        let release = tmp.path().join("release");
        let work = tmp.path().to_path_buf();
        let d = Demo {
            index: tmp.path().join("index"),
            _tmp: tmp,
            src,
            release,
            work,
        };
        d.ingest();
        d
    }

    /// Render the (possibly edited) sources and ingest them.
    fn ingest(&self) {
        onrecord::demo::build(&self.src, &self.release).unwrap();
        let out = onrecord(
            &[
                "add",
                self.release.to_str().unwrap(),
                "--manifest",
                self.release.join("manifest.jsonl").to_str().unwrap(),
                "--quiet",
            ],
            &self.index,
        );
        assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    }

    /// The demo source file of a document id.
    fn source_of(&self, doc: &str) -> PathBuf {
        let e = onrecord::demo::load_entries(&self.src)
            .unwrap()
            .into_iter()
            .find(|e| e.id == doc)
            .expect("cited document is in the demo manifest");
        self.src.join(e.file)
    }
}

const QUESTION: &str = "Why was Ramp 3A closed in March 2022?";

/// The first citation on a page after page 1 (so a wrong page can be
/// named), as (sentence index, citation index).
fn later_page_citation(answer: &Value) -> (usize, usize) {
    let supported: Vec<&Value> = answer["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["verdict"] == "supported")
        .collect();
    for (i, s) in supported.iter().enumerate() {
        for (j, c) in s["citations"].as_array().unwrap().iter().enumerate() {
            if c["page"].as_u64().unwrap() > 1 && c.get("end_page").is_none() {
                return (i, j);
            }
        }
    }
    panic!("the demo answer cites no page after page 1: {answer:#}");
}

#[test]
fn answers_replay_and_every_kind_of_change_is_caught() {
    let demo = Demo::new();
    let idx = &demo.index;
    let work = &demo.work;

    // ask → JSON, Markdown; each ask is logged.
    let out = onrecord(&["answer", QUESTION, "--json"], idx);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let answer_json = write(work, "answer.json", out.stdout.clone());
    let answer: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(answer["abstained"], false, "{answer:#}");
    let out = onrecord(&["answer", QUESTION, "--markdown"], idx);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let md = stdout(&out);
    let answer_md = write(work, "answer.md", &md);
    assert!(md.contains("[^1]: ") && md.contains("fingerprint "), "{md}");
    assert!(
        md.contains("Caution:"),
        "the caution travels with the answer"
    );
    let n_supported = answer["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["verdict"] == "supported")
        .count();

    // Round trips: both hold, against the index and against the files.
    let a = answer_json.to_str().unwrap();
    let m = answer_md.to_str().unwrap();
    let r = replay_json(&[a], idx, 0);
    assert_eq!(verdicts(&r), vec!["holds"; n_supported]);
    assert_eq!(r["question"], QUESTION);
    let c0 = &r["sentences"][0]["citations"][0];
    assert_eq!(c0["status"], "found");
    assert_eq!(c0["chunk_unchanged"], true);
    assert_eq!(
        c0["current_fingerprint"], answer["sentences"][0]["citations"][0]["page_hash"],
        "an unchanged page has the recorded hash"
    );
    let r_md = replay_json(&[m], idx, 0);
    assert_eq!(verdicts(&r_md), verdicts(&r));
    assert_eq!(r_md["input"]["format"], "markdown");
    // The footnote gives no organisation or date in a machine-read field;
    // the document as it is now fills them in (for the CSV).
    let c_md = &r_md["sentences"][0]["citations"][0];
    let first = answer["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["verdict"] == "supported")
        .unwrap();
    assert!(c_md["organisation"].is_string(), "{c_md:#}");
    assert_eq!(c_md["organisation"], first["citations"][0]["organisation"]);
    assert_eq!(c_md["date"], first["citations"][0]["date"]);
    let no_index = work.join("no-such-index");
    let release = demo.release.to_str().unwrap();
    let from_files = replay_json(&[a, "--sources", release], &no_index, 0);
    assert_eq!(verdicts(&from_files), verdicts(&r));
    assert_eq!(
        from_files["sentences"][0]["citations"][0]["current_fingerprint"],
        c0["current_fingerprint"],
        "re-extracting the file gives the stored page, hash for hash"
    );
    let text = onrecord(&["replay", m], idx);
    assert_eq!(text.status.code(), Some(0));
    assert!(
        stdout(&text).contains("Every sentence holds"),
        "{}",
        stdout(&text)
    );
    assert!(stdout(&text).contains("Caution:"));

    // The log has both asks; replay --id proves one again.
    let h = onrecord(&["history", "--json"], idx);
    let log: Value = serde_json::from_slice(&h.stdout).unwrap();
    let entries = log["answers"].as_array().unwrap();
    assert_eq!(entries.len(), 2, "{log:#}");
    assert_eq!(entries[0]["question"], QUESTION);
    assert_eq!(entries[1]["id"], 1);
    assert_eq!(entries[1]["supported"], n_supported);
    let by_id = replay_json(&["--id", "1"], idx, 0);
    assert_eq!(verdicts(&by_id), verdicts(&r));
    assert_eq!(by_id["input"]["answer_id"], 1);

    // A tampered quote: one word of the first quote changed.
    let mut tampered = answer.clone();
    let quote = tampered["sentences"][0]["citations"][0]["quote"]
        .as_str()
        .unwrap()
        .to_string();
    let word = quote
        .split_whitespace()
        .filter(|w| w.len() >= 5 && w.chars().all(char::is_alphabetic))
        .max_by_key(|w| w.len())
        .expect("a long word in the quote");
    let altered = quote.replacen(word, "unremarkable", 1);
    tampered["sentences"][0]["citations"][0]["quote"] = Value::String(altered.clone());
    let t = write(
        work,
        "tampered.json",
        serde_json::to_vec(&tampered).unwrap(),
    );
    let r = replay_json(&[t.to_str().unwrap()], idx, 1);
    assert_eq!(r["sentences"][0]["verdict"], "fails", "{r:#}");
    let status = r["sentences"][0]["citations"][0]["status"]
        .as_str()
        .unwrap();
    assert!(
        ["misquoted", "not_found"].contains(&status),
        "tampered quote status {status}"
    );
    assert_eq!(r["counts"]["fails"], 1);
    // The same in Markdown.
    let t = write(work, "tampered.md", md.replacen(&quote, &altered, 1));
    let r = replay_json(&[t.to_str().unwrap()], idx, 1);
    assert_eq!(r["counts"]["fails"], 1, "{r:#}");

    // A footnote that names a page without the quote, with the fingerprint
    // (it is the other page's) and without one (the quote is searched for).
    let (si, ci) = later_page_citation(&answer);
    let cited = &answer["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["verdict"] == "supported")
        .nth(si)
        .unwrap()["citations"][ci];
    let (doc, page) = (
        cited["doc_id"].as_str().unwrap(),
        cited["page"].as_u64().unwrap(),
    );
    let fp = &cited["page_hash"].as_str().unwrap()[..12];
    let head = format!("doc `{doc}`, page {page}, fingerprint {fp}");
    assert!(md.contains(&head), "{head} in {md}");
    for (name, replacement) in [
        (
            "wrong-page.md",
            format!("doc `{doc}`, page 1, fingerprint {fp}"),
        ),
        ("wrong-page-no-fp.md", format!("doc `{doc}`, page 1")),
    ] {
        let f = write(work, name, md.replace(&head, &replacement));
        let r = replay_json(&[f.to_str().unwrap()], idx, 1);
        let s = &r["sentences"][si];
        assert_eq!(s["verdict"], "fails", "{name}: {r:#}");
        assert_eq!(s["citations"][ci]["status"], "wrong_page", "{name}");
        let why = s["reason"].as_str().unwrap();
        assert!(
            why.contains(&format!("page {page}")),
            "{name}: the reason names the page the quote is on: {why}"
        );
    }

    // An edited source page: the longest word of the quote changed on its
    // page in the source, the PDF rendered again and re-ingested.
    let quote = cited["quote"].as_str().unwrap();
    let word = quote
        .split_whitespace()
        .map(|w| w.trim_matches(|c: char| !c.is_alphanumeric()))
        .filter(|w| w.chars().all(char::is_alphabetic))
        .max_by_key(|w| w.len())
        .unwrap()
        .to_string();
    let edited = format!("{word}Z");
    let src = demo.source_of(doc);
    let text = std::fs::read_to_string(&src).unwrap();
    let mut pages: Vec<String> = text.split('\u{c}').map(str::to_string).collect();
    let p = (page - 1) as usize;
    assert!(pages[p].contains(&word), "{word} on page {page} of {src:?}");
    pages[p] = pages[p].replace(&word, &edited);
    // The file's time moves forward so the demo build renders it again.
    std::thread::sleep(std::time::Duration::from_millis(1100));
    std::fs::write(&src, pages.join("\u{c}")).unwrap();
    demo.ingest();
    let out = onrecord(&["reindex", "--quiet"], idx);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    for args in [vec![a], vec!["--id", "1"], vec![a, "--sources", release]] {
        let r = replay_json(&args, idx, 1);
        let s = &r["sentences"][si];
        assert_eq!(s["verdict"], "source_changed", "{args:?}: {r:#}");
        let c = &s["citations"][ci];
        assert_eq!(c["status"], "page_changed");
        let diff = &c["diff"];
        assert!(
            diff["was"].as_str().unwrap().contains(&word)
                && diff["now"].as_str().unwrap().contains(&edited),
            "{args:?}: the diff shows the edit: {diff:#}"
        );
        assert_eq!(r["counts"]["source_changed"], 1);
        assert_eq!(
            r["counts"]["holds"].as_u64().unwrap() as usize,
            n_supported - 1,
            "the other sentences still hold"
        );
    }
    // The log survived the re-ingest and the reindex.
    let h = onrecord(&["history", "--json"], idx);
    let log: Value = serde_json::from_slice(&h.stdout).unwrap();
    assert_eq!(log["answers"].as_array().unwrap().len(), 2);

    // A deleted source: gone from the folder, and from a new index made
    // from the folder (the PDFs are named by document id, so ids match
    // without the manifest).
    let pdf = demo.release.join(format!("{doc}.pdf"));
    std::fs::remove_file(&pdf).unwrap();
    std::fs::remove_file(demo.release.join("manifest.jsonl")).unwrap();
    let r = replay_json(&[a, "--sources", release], &no_index, 1);
    assert_eq!(r["sentences"][si]["verdict"], "source_missing", "{r:#}");
    assert_eq!(r["sentences"][si]["citations"][ci]["status"], "missing");
    assert!(r["sentences"][si]["reason"].as_str().unwrap().contains(doc));
    let fresh = work.join("fresh-index");
    let out = onrecord(&["add", release, "--quiet"], &fresh);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let r = replay_json(&[a], &fresh, 1);
    assert_eq!(r["sentences"][si]["verdict"], "source_missing", "{r:#}");
}

#[test]
fn unusable_input_exits_2_and_names_the_file() {
    let tmp = tempfile::tempdir().unwrap();
    let idx = tmp.path().join("index");
    write(
        tmp.path(),
        "doc.txt",
        "The harbour board met on 3 June 2020.",
    );
    let out = onrecord(&["add", tmp.path().join("doc.txt").to_str().unwrap()], &idx);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let cases: Vec<(PathBuf, &str)> = vec![
        (
            write(tmp.path(), "prose.md", "Only prose, no footnotes.\n"),
            "no footnoted sentence",
        ),
        (
            write(tmp.path(), "broken.json", "{\"schema_version\": 1, "),
            "not valid JSON",
        ),
        (
            write(tmp.path(), "future.json", "{\"schema_version\": 99}"),
            "schema version 99",
        ),
        (
            write(tmp.path(), "other.json", "{\"a\": 1}"),
            "not an answer record",
        ),
    ];
    for (file, says) in &cases {
        let f = file.to_str().unwrap();
        let out = onrecord(&["replay", f], &idx);
        assert_eq!(out.status.code(), Some(2), "{f}: {}", stderr(&out));
        let err = stderr(&out);
        assert!(err.contains(says), "{f}: {err}");
        assert!(err.contains(f), "the message names the file: {err}");
    }
    let out = onrecord(&["replay", "--id", "7"], &idx);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("no answer 7"), "{}", stderr(&out));
    let out = onrecord(&["replay", "--id", "7"], &tmp.path().join("missing-index"));
    assert_eq!(out.status.code(), Some(2));
    let md = write(
        tmp.path(),
        "draft.md",
        "The board met on 3 June 2020.[^1]\n\n[^1]: doc `doc`, page 1\n    > The harbour board met on 3 June 2020.\n",
    );
    let out = onrecord(
        &[
            "replay",
            md.to_str().unwrap(),
            "--sources",
            "/no/such/folder",
        ],
        &idx,
    );
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("/no/such/folder"));
    // And the same draft, correctly sourced, holds.
    let out = onrecord(&["replay", md.to_str().unwrap()], &idx);
    assert_eq!(out.status.code(), Some(0), "{}", stdout(&out));
}

/// CSV export read back with the csv crate: fields with commas, double
/// quotes and line breaks survive (RFC 4180, section 2, rules 5-7).
#[test]
fn csv_exports_read_back_with_a_general_purpose_reader() {
    let tmp = tempfile::tempdir().unwrap();
    let idx = tmp.path().join("index");
    write(
        tmp.path(),
        "minutes.txt",
        "Minutes of the Tollmere Water Board.\n\nThe board approved the \"Eastbank\" reservoir contract, worth $2,450,000, on 3 June 2020. \
         The chair, Ms. Ardley, said the price was fair.",
    );
    let out = onrecord(&["add", tmp.path().to_str().unwrap()], &idx);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let question = "What did the board approve, and for how much\n(the \"Eastbank\" contract)?";
    let json = onrecord(&["answer", question, "--json"], &idx);
    let answer: Value = serde_json::from_slice(&json.stdout).unwrap();
    let csv_out = onrecord(&["answer", question, "--csv"], &idx);
    assert_eq!(csv_out.status.code(), Some(0), "{}", stderr(&csv_out));
    assert!(
        csv_out.stdout.windows(2).any(|w| w == b"\r\n"),
        "records end with CRLF (RFC 4180)"
    );
    let mut rdr = csv::Reader::from_reader(csv_out.stdout.as_slice());
    let header: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(header, onrecord::replay::table::COLUMNS);
    let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    let supported: Vec<&Value> = answer["sentences"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["verdict"] == "supported")
        .collect();
    assert!(!supported.is_empty(), "{answer:#}");
    let row = rows
        .iter()
        .find(|r| &r[2] == "supported")
        .expect("a supported row");
    assert_eq!(
        &row[0], question,
        "the question survives its comma, quotes and newline"
    );
    let s = supported[0];
    let c = &s["citations"][0];
    assert_eq!(&row[1], s["text"].as_str().unwrap());
    assert_eq!(&row[4], c["doc_id"].as_str().unwrap());
    assert_eq!(&row[8], c["page"].to_string());
    assert_eq!(&row[9], c["quote"].as_str().unwrap());
    assert!(row[9].contains('"') || row[9].contains(','), "{row:?}");
    assert_eq!(&row[10], &c["page_hash"].as_str().unwrap()[..12]);

    // Replay's CSV gives each sentence's replay verdict.
    let a = write(tmp.path(), "a.json", json.stdout.clone());
    let out = onrecord(&["replay", a.to_str().unwrap(), "--csv"], &idx);
    assert_eq!(out.status.code(), Some(0));
    let mut rdr = csv::Reader::from_reader(out.stdout.as_slice());
    let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    assert_eq!(
        rows.len(),
        supported
            .iter()
            .map(|s| s["citations"].as_array().unwrap().len())
            .sum::<usize>()
    );
    assert!(rows.iter().all(|r| &r[2] == "holds" && &r[0] == question));
}
