//! The bundled demo release answered end to end: gold pages among the
//! citations, and abstention where the records are silent. The demo is
//! invented data; this checks the product's behaviour on it, not a
//! published figure.

use onrecord::answer::ask;
use onrecord::draft::Extractive;
use onrecord::retrieve::Index;
use onrecord::types::Filters;
use onrecord::verify::RulesJudge;
use serde::Deserialize;

#[derive(Deserialize)]
struct Evidence {
    doc: String,
    page: u32,
}

#[derive(Deserialize)]
struct Question {
    id: String,
    question: String,
    #[serde(default)]
    answers: Vec<String>,
    #[serde(default)]
    evidence: Vec<Evidence>,
    answerable: bool,
}

#[test]
fn demo_release_builds_ingests_and_answers() {
    let source = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("eval/demo");
    // The shared build (`support::demo_workdir`, the same `demo::prepare`
    // the `demo` command runs) and its first ingest report; a copy of its
    // index, since the hybrid check below adds vectors to it.
    let (_, report) = crate::support::demo_workdir();
    let work = tempfile::tempdir().unwrap();
    let idx = work.path().join("index");
    crate::support::copy_dir(crate::support::demo_index(), &idx);
    let entries = onrecord::demo::load_entries(&source).unwrap();
    assert!(entries.len() >= 40, "at least 40 demo documents");
    assert_eq!(report.failed, 0);
    assert_eq!(report.ingested, entries.len());
    assert!(
        report.pages >= 150,
        "at least 150 demo pages, got {}",
        report.pages
    );
    let pdfs = entries.iter().filter(|e| e.file.ends_with(".txt")).count();
    assert!(pdfs >= 35, "most demo records go through the PDF path");

    let text = std::fs::read_to_string(source.join("questions.jsonl")).unwrap();
    let qs: Vec<Question> = text
        .lines()
        .filter(|l| !l.trim().is_empty())
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert!(qs.len() >= 30);
    // The questions written in the records' words (ids a, b, c, x) and
    // those worded as a reporter words them (r) with their near misses (n),
    // scored apart.
    let (original, reporter): (Vec<Question>, Vec<Question>) =
        qs.into_iter().partition(|q| !q.id.starts_with(['r', 'n']));
    assert!(reporter.iter().filter(|q| q.answerable).count() >= 25);
    assert!(reporter.iter().filter(|q| !q.answerable).count() >= 10);
    let index = Index::open(&idx).unwrap();
    let bm25 = score(&index, &original);
    crate::support::figure(&format!(
        "demo, bm25, original questions: {}",
        bm25.describe()
    ));
    assert!(bm25.unanswerable >= 5);
    // Measured 35 of 51 (69%) with the answer selector (the demo's own
    // figure; 70% was this test's floor for the rule-based drafter).
    assert!(
        bm25.rate() >= 0.65,
        "gold page cited for only {:.0}%",
        bm25.rate() * 100.0
    );
    // The demo's own figures (measured with BM25 and the words-only
    // selector: 12 of 61 reporter-worded questions cite a gold page); the
    // floors sit a little below.
    let worded = score(&index, &reporter);
    crate::support::figure(&format!(
        "demo, bm25, reporter-worded questions: {}",
        worded.describe()
    ));
    assert!(
        worded.rate() >= 0.15,
        "gold page cited for only {:.0}%",
        worded.rate() * 100.0
    );
    // The near misses: a redacted name, a rate the records give only as a
    // total, a count the records give only as money, a year they do not
    // cover. The relevance check sets such sentences aside (measured 15
    // of 16 declined with the words-only selector; 12 before the rate,
    // count and redaction checks).
    assert!(
        worded.abstained >= 13,
        "declined {} of {} near misses",
        worded.abstained,
        worded.unanswerable
    );
    // Of every question the records do not answer (original and near
    // miss), at least half are declined.
    let declined = bm25.abstained + worded.abstained;
    let silent = bm25.unanswerable + worded.unanswerable;
    assert!(declined * 2 >= silent, "declined {declined} of {silent}");

    // With the embedding model, hybrid retrieval must do at least as well.
    let Some(e) = crate::support::model() else {
        return;
    };
    onrecord::vectors::update(&idx, e.as_ref(), false).unwrap();
    let index = Index::open_with(&idx, Some(e)).unwrap();
    assert_eq!(index.retriever(), onrecord::retrieve::RetrieverKind::Hybrid);
    let hybrid = score(&index, &original);
    crate::support::figure(&format!(
        "demo, hybrid, original questions: {}",
        hybrid.describe()
    ));
    assert!(
        hybrid.gold_cited + 3 >= bm25.gold_cited,
        "hybrid cites the gold page for {} questions, BM25 for {}",
        hybrid.gold_cited,
        bm25.gold_cited
    );
    let worded_h = score(&index, &reporter);
    crate::support::figure(&format!(
        "demo, hybrid, reporter-worded questions: {}",
        worded_h.describe()
    ));
    assert!(
        worded_h.gold_cited >= worded.gold_cited,
        "hybrid cites the gold page for {} reporter-worded questions, BM25 for {}",
        worded_h.gold_cited,
        worded.gold_cited
    );
}

#[derive(Default)]
struct Score {
    answerable: usize,
    gold_cited: usize,
    unanswerable: usize,
    abstained: usize,
    misses: Vec<String>,
}

impl Score {
    fn rate(&self) -> f64 {
        self.gold_cited as f64 / self.answerable as f64
    }

    fn describe(&self) -> String {
        format!(
            "gold page cited for {}/{} answerable ({:.0}%), abstained on {}/{} unanswerable\nmisses:\n  {}",
            self.gold_cited,
            self.answerable,
            self.rate() * 100.0,
            self.abstained,
            self.unanswerable,
            self.misses.join("\n  ")
        )
    }
}

fn score(index: &Index, qs: &[Question]) -> Score {
    let mut s = Score::default();
    for q in qs {
        let a = ask(
            index,
            &q.question,
            &Filters::default(),
            10,
            &Extractive::default(),
            serde_json::Value::Null,
            &RulesJudge::default(),
        )
        .unwrap();
        if q.answerable {
            s.answerable += 1;
            assert!(!q.evidence.is_empty() && !q.answers.is_empty(), "{}", q.id);
            let hit = a.supported().any(|x| {
                x.citations.iter().any(|c| {
                    q.evidence.iter().any(|e| {
                        e.doc == c.doc_id.0
                            && (c.page..=c.end_page.unwrap_or(c.page)).contains(&e.page)
                    })
                })
            });
            if hit {
                s.gold_cited += 1;
            } else {
                s.misses.push(format!("{} {}", q.id, q.question));
            }
        } else {
            s.unanswerable += 1;
            if a.abstained {
                s.abstained += 1;
            } else {
                s.misses
                    .push(format!("{} (should abstain) {}", q.id, q.question));
            }
        }
    }
    s
}
