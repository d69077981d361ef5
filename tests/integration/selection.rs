//! Answer selection: the learned selector against open data (WikiQA,
//! SQuAD v1.1), the answer-or-decline decision and the relevance check on
//! the demo release, and sentence vectors stored at ingest.

use crate::support::{HashEmbedder, figure, shared_data, slow_enabled};
use onrecord::answer::{AskPlan, ask_with};
use onrecord::draft::Extractive;
use onrecord::embed::Embedder;
use onrecord::retrieve::Index;
use onrecord::select::SelectorWeights;
use onrecord::types::Filters;
use onrecord::verify::RulesJudge;
use std::sync::Arc;

fn plan<'a>(filters: &'a Filters, drafter: &'a Extractive, judge: &'a RulesJudge) -> AskPlan<'a> {
    AskPlan {
        filters,
        k: 10,
        drafter,
        drafter_settings: serde_json::Value::Null,
        judge,
        fallback: None,
        rewrite: None,
        selector: None,
    }
}

/// WikiQA test split (Yang, Yih and Meek 2015, "WikiQA: A Challenge
/// Dataset for Open-Domain Question Answering", EMNLP; the split
/// ../shared/data/README.md reserves for reporting), through the command a
/// user runs. Answer selection over the 243 questions that have an
/// answering sentence must beat the paper's best published system, CNN-Cnt
/// (MAP 0.652, MRR 0.665; the issue asks for 0.70 and 0.71), and answer
/// triggering over all 633 questions must reach F1 0.40 (the paper's best
/// is about 0.32, from memory of its Table 5, as wikiqa/PROVENANCE.txt
/// notes). Measured with the bundled weights: MAP 0.752, MRR 0.767,
/// triggering F1 0.411; words only MAP 0.644.
#[test]
fn wikiqa_test_selection_and_triggering_beat_the_published_figures() {
    if !slow_enabled("wikiqa_test_selection_and_triggering_beat_the_published_figures") {
        return;
    }
    let Some(dir) = shared_data("wikiqa") else {
        return;
    };
    let Some(_) = crate::support::model() else {
        return;
    };
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args(["eval", "answers", "--wikiqa"])
        .arg(&dir)
        .args(["--split", "test", "--json"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    figure(&format!("WikiQA test (semantic selector): {v}"));
    let f = |k: &str| v[k].as_f64().unwrap_or_else(|| panic!("no {k} in {v}"));
    assert_eq!(v["model"], "semantic-v1");
    assert_eq!(
        (v["questions"].as_u64(), v["with_answer"].as_u64()),
        (Some(633), Some(243))
    );
    assert!(f("map") >= 0.70 && f("mrr") >= 0.71, "{v:#}");
    assert!(f("trigger_f1") >= 0.40, "{v:#}");
    // F1 is the harmonic mean of the two rates reported beside it.
    let (p, r) = (f("trigger_precision"), f("trigger_recall"));
    assert!((f("trigger_f1") - 2.0 * p * r / (p + r)).abs() < 1e-9);
    // Words only (no embedding model): still above the paper's word-count
    // baselines (MAP 0.489 and 0.510, from memory of its Table 3).
    let w = &v["words_only"];
    assert!(w["map"].as_f64().unwrap() >= 0.60, "{w:#}");
}

/// The built-in words-only weights are what `onrecord train selector`
/// makes: retrained here from WikiQA train and dev and SQuAD v1.1 articles
/// 1-24 (Rajpurkar et al. 2016), they must come out the same to within 0.01
/// (the fit is deterministic; BM25 can order tied passages differently
/// from one index build to the next, which moves the last digits). The
/// semantic model is left out: it needs 25,000 WikiQA sentences embedded.
#[test]
fn the_bundled_words_only_selector_is_what_training_makes() {
    use onrecord::eval::selection::{SQUAD_CAP, read_wikiqa, squad_retrieval, train_model};
    if !slow_enabled("the_bundled_words_only_selector_is_what_training_makes") {
        return;
    }
    let (Some(wikiqa), Some(squad)) = (shared_data("wikiqa"), shared_data("squad-v1.1")) else {
        return;
    };
    let mut tuning = read_wikiqa(&wikiqa.join("WikiQA-train.tsv")).unwrap();
    tuning.extend(read_wikiqa(&wikiqa.join("WikiQA-dev.tsv")).unwrap());
    let work = tempfile::tempdir().unwrap();
    let rows = squad_retrieval(
        &squad.join("dev-v1.1.json"),
        1..=24,
        SQUAD_CAP,
        None,
        work.path(),
        false,
    )
    .unwrap();
    let m = train_model(onrecord::select::FeatureSet::Lexical, &tuning, &rows, None);
    let bundled = SelectorWeights::bundled().lexical;
    let close = |a: &[f32], b: &[f32]| {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-2)
    };
    assert!(
        close(&m.weights, &bundled.weights),
        "{:?}\nvs bundled {:?}",
        m.weights,
        bundled.weights
    );
    assert!(
        close(&m.trigger, &bundled.trigger),
        "{:?}\nvs bundled {:?}",
        m.trigger,
        bundled.trigger
    );
    assert!((m.threshold - bundled.threshold).abs() <= 0.01 + 1e-6);
    figure(&format!("selector retrained (words only): {}", m.figures));
}

/// A question the demo's records come close to but do not answer: the
/// board's motion to fund a reopening celebration was defeated
/// (paha-minutes-2024-05-board, page 2). The motion is supported by its
/// quote, but it is not what the celebration cost: it must be set aside
/// with its reason, never given as the answer.
#[test]
fn a_defeated_motion_is_set_aside_not_given_as_an_answer_issue_20() {
    let index = Index::open(crate::support::demo_index()).unwrap();
    let (f, d, j) = (
        Filters::default(),
        Extractive::default(),
        RulesJudge::default(),
    );
    let q =
        "How much did the June 2024 public celebration of the terminal's reopening end up costing?";
    let a = ask_with(&index, q, plan(&f, &d, &j)).unwrap();
    assert!(
        a.supported().all(|s| !s.text.contains("celebration")),
        "{:#?}",
        a.sentences
    );
    let motion = a
        .off_question
        .iter()
        .find(|s| s.text.contains("public celebration") && s.text.starts_with("Moved by"))
        .unwrap_or_else(|| panic!("the motion is not listed apart: {:#?}", a.off_question));
    assert!(
        motion
            .reason
            .as_deref()
            .unwrap()
            .contains("motion that was defeated"),
        "{motion:#?}"
    );
    // It is listed with a located quote, like any verified sentence.
    let c = &motion.citations[0];
    assert_eq!(
        (c.doc_id.0.as_str(), c.page),
        ("paha-minutes-2024-05-board", 2)
    );
    let (page, _) = index.store.page(&c.doc_id, c.page).unwrap().unwrap();
    assert!(onrecord::text::fold_ws(&page).contains(&c.quote));
    if a.abstained {
        assert!(
            a.abstain_reason
                .as_deref()
                .unwrap()
                .contains("do not answer"),
            "{:?}",
            a.abstain_reason
        );
    }
}

/// A declined answer says which test failed, with figures that are the
/// record's own, and lists the closest sentences with their pages, each
/// quote found on its page.
#[test]
fn a_decline_lists_the_closest_sentences_with_a_true_reason() {
    let index = Index::open(crate::support::demo_index()).unwrap();
    let (f, d, j) = (
        Filters::default(),
        Extractive::default(),
        RulesJudge::default(),
    );
    // Demo question b23: the records never count the first sailing's passengers.
    let q = "How many passengers travelled on the first sailing from the reopened Aubrel Bay Ferry Terminal on 22 April 2024?";
    let a = ask_with(&index, q, plan(&f, &d, &j)).unwrap();
    assert!(a.abstained, "{:#?}", a.sentences);
    let sel = a.selection.as_ref().unwrap();
    assert_eq!(sel.model, "lexical-v1");
    assert!(sel.answer_probability < sel.threshold, "{sel:?}");
    let reason = a.abstain_reason.as_deref().unwrap();
    // The figures in the reason are the record's own.
    let pct = |p: f32| format!("{:.0}%", p * 100.0);
    assert!(
        reason.contains(&pct(sel.threshold)) && reason.contains(&pct(sel.answer_probability)),
        "{reason} / {sel:?}"
    );
    assert!(!a.closest.is_empty() && a.closest.len() <= onrecord::answer::MAX_CLOSEST);
    for c in &a.closest {
        assert!(c.probability < sel.threshold, "{c:#?}");
        let cit = &c.citations[0];
        let (page, _) = index.store.page(&cit.doc_id, cit.page).unwrap().unwrap();
        assert!(
            onrecord::text::fold_ws(&page).contains(&cit.quote),
            "{cit:#?}"
        );
    }
}

/// Sentence vectors are stored at ingest, once: a second update embeds
/// none, and answering then embeds only the question.
#[test]
fn sentence_vectors_are_stored_at_ingest_and_read_when_answering() {
    let dir = tempfile::tempdir().unwrap();
    let docs = dir.path().join("docs");
    crate::support::write(
        &docs,
        "memo.txt",
        "The harbour board approved the dredging amendment on 4 March 2020.\n\n\
         The amendment raised the contract price by $1,120,000.\n\n\
         Work resumed in the spring, after the ice had cleared from the berth.",
    );
    crate::support::write(
        &docs,
        "letter.txt",
        "The contractor asked for more time because the ice stayed late.\n\n\
         The Ministry agreed to extend the completion date by six weeks.",
    );
    let idx = dir.path().join("index");
    crate::support::ingest(&idx, &[docs]);
    let e = Arc::new(HashEmbedder::new());
    let (report, _) = onrecord::vectors::update(&idx, e.as_ref(), false).unwrap();
    assert!(report.sentences_embedded >= 5, "{report:?}");
    let store = onrecord::store::Store::open(&idx).unwrap();
    assert_eq!(
        store.sentences_embedded_through(e.id()).unwrap(),
        store.last_chunk_id().unwrap()
    );
    drop(store);
    let (again, _) = onrecord::vectors::update(&idx, e.as_ref(), false).unwrap();
    assert_eq!((again.embedded, again.sentences_embedded), (0, 0));
    let index =
        Index::open_with(&idx, Some(e.clone() as Arc<dyn onrecord::embed::Embedder>)).unwrap();
    let before = e.embedded();
    let (f, d, j) = (
        Filters::default(),
        Extractive::default(),
        RulesJudge::default(),
    );
    let a = ask_with(
        &index,
        "By how much did the amendment raise the price?",
        plan(&f, &d, &j),
    )
    .unwrap();
    assert_eq!(a.selection.as_ref().unwrap().model, "semantic-v1");
    // The question alone was embedded: every sentence and title vector came from the store.
    assert_eq!(e.embedded() - before, 1);
    assert!(
        a.supported().any(|s| s.text.contains("$1,120,000")),
        "{a:#?}"
    );
}

/// An invented two-record release (the Vell Quay ramp): a memo whose
/// header names the minister, whose body withholds the supplier's name
/// and states the steel price only as a total, and board minutes.
fn vell_quay() -> (tempfile::TempDir, Index) {
    let tmp = tempfile::tempdir().unwrap();
    let memo = crate::support::write(
        tmp.path(),
        "docs/memo-hpu.txt",
        "Memo: hydraulic power unit for the Vell Quay ramp\n\n\
         To:      Hon. Ysolde Marchbank, Minister of Harbours\n\
         From:    Corin Ashdale, Deputy Minister\n\
         Date:    14 June 2023\n\n\
         The contractor reported that its hydraulic supplier, [REDACTED - s. 21(1)], told it that \
         the pump skid of the hydraulic power unit failed its factory test on 2 June 2023.\n\
         The hydraulic power unit will now be delivered in late September 2023.\n\
         The fabricator's price for the structural steel of the new ramp was $4.2 million.\n\
         Steel prices have risen by 18 per cent since the contract was signed.\n",
    );
    let minutes = crate::support::write(
        tmp.path(),
        "docs/minutes.txt",
        "Minutes of the Vell Quay board, 3 July 2023\n\n\
         The board discussed the late delivery of the ramp equipment.\n\
         The chief executive said the ramp would open to vehicles in the autumn.\n\
         Director Pellow asked whether the supplier would pay for the delay.\n",
    );
    let idx = tmp.path().join("idx");
    let (report, diags) = crate::support::ingest(&idx, &[memo, minutes]);
    assert_eq!(report.ingested, 2, "{diags:?}");
    let index = Index::open(&idx).unwrap();
    (tmp, index)
}

/// A name that the release withholds is not an answer: the sentence is
/// listed apart, saying the answer was redacted (what a reporter may
/// challenge). A rate asked for ("per tonne") is not answered by a total.
/// A name that records give only in a header field ("To: Hon. …,
/// Minister of …") is found there and quoted as it stands.
#[test]
fn withheld_names_totals_for_rates_and_header_fields_issue_20() {
    let (_tmp, index) = vell_quay();
    let (f, d, j) = (
        Filters::default(),
        Extractive::default(),
        RulesJudge::default(),
    );
    let ask = |q: &str| ask_with(&index, q, plan(&f, &d, &j)).unwrap();

    let a = ask("Which company made the hydraulic power unit that failed its factory test?");
    assert!(
        a.supported().all(|s| !s.text.contains("REDACTED")),
        "{:#?}",
        a.sentences
    );
    let withheld = a
        .off_question
        .iter()
        .find(|s| s.text.contains("[REDACTED"))
        .unwrap_or_else(|| panic!("the redacted sentence is not listed apart: {a:#?}"));
    assert!(
        withheld.reason.as_deref().unwrap().contains("redacted"),
        "{withheld:#?}"
    );

    let a = ask("What price per tonne did the fabricator charge for the structural steel?");
    assert!(a.supported().all(|s| !s.text.contains("$4.2 million")));
    assert!(
        a.off_question
            .iter()
            .any(|s| s.text.contains("$4.2 million")
                && s.reason.as_deref().unwrap().contains("per tonne")),
        "{:#?}",
        a.off_question
    );

    let a = ask("Who was the harbours minister when the hydraulic unit failed?");
    assert!(!a.abstained, "{:?}", a.abstain_reason);
    let first = a.supported().next().unwrap();
    assert_eq!(
        first.text,
        "To: Hon. Ysolde Marchbank, Minister of Harbours"
    );
    let c = &first.citations[0];
    let (page, _) = index.store.page(&c.doc_id, c.page).unwrap().unwrap();
    assert!(onrecord::text::fold_ws(&page).contains(&c.quote), "{c:#?}");
    // The document's title line is not a statement.
    assert!(a.supported().all(|s| !s.text.starts_with("Memo:")));
}
