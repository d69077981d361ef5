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
    let bm25 = score(&Index::open(&idx).unwrap(), &qs);
    crate::support::figure(&format!("demo, bm25: {}", bm25.describe()));
    assert!(bm25.unanswerable >= 5);
    assert!(
        bm25.rate() >= 0.70,
        "gold page cited for only {:.0}%",
        bm25.rate() * 100.0
    );
    // Issue 2 asks for abstention on at least 4 of 5 unanswerable questions.
    // The set holds 7, two of them written as near-misses whose vocabulary
    // the records share; the bar is the count of 4.
    assert!(
        bm25.abstained >= 4,
        "abstained on only {}/{}",
        bm25.abstained,
        bm25.unanswerable
    );

    // With the embedding model, hybrid retrieval must do at least as well.
    let Some(e) = crate::support::model() else {
        return;
    };
    onrecord::vectors::update(&idx, e.as_ref(), false).unwrap();
    let index = Index::open_with(&idx, Some(e)).unwrap();
    assert_eq!(index.retriever(), onrecord::retrieve::RetrieverKind::Hybrid);
    let hybrid = score(&index, &qs);
    crate::support::figure(&format!("demo, hybrid: {}", hybrid.describe()));
    assert!(
        hybrid.gold_cited >= bm25.gold_cited,
        "hybrid cites the gold page for {} questions, BM25 for {}",
        hybrid.gold_cited,
        bm25.gold_cited
    );
    assert!(
        hybrid.abstained >= 4,
        "hybrid abstained on only {}/{}",
        hybrid.abstained,
        hybrid.unanswerable
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
