//! Ask end to end on a small invented release: verified sentences carry the
//! right page and the page's own words; unrelated questions abstain.

use crate::support::{self, ingest, write};
use onrecord::answer::{ANSWER_SCHEMA_VERSION, ask};
use onrecord::draft::{DraftRequest, Drafter};
use onrecord::error::Result;
use onrecord::retrieve::Index;
use onrecord::types::{DocId, Filters};
use onrecord::verify::{Draft, DraftCitation, DraftSentence, RulesJudge, Verdict};

fn release() -> (tempfile::TempDir, tempfile::TempDir) {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "pier3-memo.txt",
        "MEMORANDUM\n\nTo: Deputy Minister\n\nThe tender for the Pier 3 ferry terminal closed on 2 October 2018.\n\
         Four firms submitted bids.\u{c}BUDGET\n\nThe budget for the Pier 3 works has increased by\n$2.3 million \
         because of ground conditions at the berth. The steering committee did not approve\nthe second design change.",
    );
    write(
        src.path(),
        "ramp-report.txt",
        "The inspection found corrosion in the hinge pins of the old ferry ramp.\n\
         The ramp was closed to vehicles on 14 March 2022.",
    );
    ingest(idx.path(), &[src.path().to_path_buf()]);
    (src, idx)
}

#[test]
fn an_answer_quotes_the_page_it_cites() {
    let (_src, idx) = release();
    let index = Index::open(idx.path()).unwrap();
    let a = support::ask_extractive(&index, "By how much did the Pier 3 budget increase?");
    assert_eq!(a.schema_version, ANSWER_SCHEMA_VERSION);
    assert!(!a.abstained, "{a:#?}");
    let s = a.supported().next().unwrap();
    assert!(s.text.contains("$2.3 million"), "{}", s.text);
    let c = &s.citations[0];
    assert_eq!(c.doc_id, DocId("pier3-memo".into()));
    assert_eq!(c.page, 2);
    // The quote is the page's own text at the recorded offsets.
    let (page, hash) = index.store.page(&c.doc_id, c.page).unwrap().unwrap();
    let slice: String = page
        .chars()
        .skip(c.start_char)
        .take(c.end_char - c.start_char)
        .collect();
    assert_eq!(onrecord::text::fold_ws(&slice), c.quote);
    assert_eq!(hash, c.page_hash);
    assert!(a.retrieved.iter().all(|r| r.hash.len() == 64));
}

#[test]
fn questions_the_records_do_not_answer_abstain() {
    let (_src, idx) = release();
    let index = Index::open(idx.path()).unwrap();
    for q in [
        "What is the salary of the harbour master?",
        "Which airline serves the northern islands?",
    ] {
        let a = support::ask_extractive(&index, q);
        assert!(a.abstained, "{q}: {a:#?}");
        assert!(a.supported().next().is_none());
    }
}

/// A drafter that writes fixed sentences, to drive the verifier through `answer`.
struct Fixed(Vec<(String, String)>);

impl Drafter for Fixed {
    fn name(&self) -> String {
        "fixed".into()
    }
    fn draft(&self, req: &DraftRequest<'_>) -> Result<Draft> {
        let id = req.retrieved[0].chunk.id;
        Ok(Draft {
            sentences: self
                .0
                .iter()
                .map(|(t, q)| DraftSentence {
                    text: t.clone(),
                    citations: vec![DraftCitation {
                        chunk_id: id,
                        quote: q.clone(),
                    }],
                })
                .collect(),
            abstain: None,
            model: None,
            set_aside: vec![],
        })
    }
}

#[test]
fn unsupported_drafted_sentences_are_struck_with_reasons() {
    let (_src, idx) = release();
    let index = Index::open(idx.path()).unwrap();
    let drafter = Fixed(vec![
        (
            "The ramp was closed to vehicles on 14 March 2022.".into(),
            "The ramp was closed to vehicles on 14 March 2022.".into(),
        ),
        (
            "The ramp was closed to vehicles on 21 March 2022.".into(),
            "The ramp was closed to vehicles on 14 March 2022.".into(),
        ),
        (
            "The ramp was demolished.".into(),
            "The ramp was demolished in 2023.".into(),
        ),
    ]);
    let a = ask(
        &index,
        "When was the ferry ramp closed to vehicles?",
        &Filters::default(),
        5,
        &drafter,
        serde_json::Value::Null,
        &RulesJudge::default(),
    )
    .unwrap();
    let verdicts: Vec<Verdict> = a.sentences.iter().map(|s| s.verdict).collect();
    assert_eq!(
        verdicts,
        vec![Verdict::Supported, Verdict::Struck, Verdict::Struck]
    );
    assert!(
        a.sentences[1]
            .reason
            .as_deref()
            .unwrap()
            .contains("21 March 2022")
    );
    assert!(
        a.sentences[2]
            .reason
            .as_deref()
            .unwrap()
            .starts_with("quote not found on p. 1 of")
    );
    let text = onrecord::answer::render_text(&a);
    assert!(text.contains("STRUCK BY THE VERIFIER (2)"), "{text}");
    assert!(text.contains("does not establish that the documents are accurate"));
}
