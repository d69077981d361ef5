//! Replay: prove a saved answer, or a reporter's footnoted draft, again,
//! sentence by sentence, against the pages as they are now: in the store,
//! or re-extracted straight from the original files.
//!
//! Each citation's page is found by document id and page number; its
//! content hash is compared with the fingerprint the answer recorded; the
//! quote is located on it with the verifier's own quote location; and the
//! judge decides again whether the quotes support the sentence.
//!
//! invariant: a sentence `holds` only when every cited page exists, no
//! cited page's content hash differs from the recorded fingerprint, every
//! quote reads exactly as the page does, and the judge finds support.
//! invariant: a page whose content hash differs is reported as
//! `source_changed`, even when the quote is still on it: never a silent pass.

pub mod markdown;
pub mod sources;
pub mod table;

use crate::answer::{AnswerRecord, CAUTION};
use crate::chunk::PAGE_BREAK;
use crate::store::StoredChunk;
use crate::text::fold_ws;
use crate::types::{ChunkId, ChunkSpan, DocId};
use crate::verify::{Evidence, Judge, Verdict, align, locate};
use serde::{Deserialize, Serialize};
use std::sync::Arc;

pub use sources::{SourceFiles, StorePages};

/// Version of the replay report (`replay --json`); see
/// `eval/replay-record.schema.json`.
pub const REPLAY_SCHEMA_VERSION: u32 = 1;

/// Hex digits of a page's content hash shown as its fingerprint in
/// Markdown answers and CSV exports. 48 bits: a chance edit colliding is
/// about one in 2.8 × 10^14.
pub const FINGERPRINT_LEN: usize = 12;

/// Shortest fingerprint prefix replay accepts.
pub const MIN_FINGERPRINT_LEN: usize = 8;

/// The short form of a page's content hash.
pub fn fingerprint(page_hash: &str) -> &str {
    &page_hash[..page_hash.len().min(FINGERPRINT_LEN)]
}

/// A sentence to prove again and the records it cites.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Claim {
    pub text: String,
    pub citations: Vec<CitedQuote>,
    /// Why the sentence cannot be checked as written (for example a
    /// footnote marker with no footnote).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub problem: Option<String>,
}

/// A citation as an answer or draft gives it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CitedQuote {
    pub doc_id: DocId,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub title: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub organisation: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub date: Option<String>,
    pub page: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub end_page: Option<u32>,
    pub quote: String,
    /// The page's content hash when the answer was made (or a prefix of at
    /// least [`MIN_FINGERPRINT_LEN`] hex digits); absent in a draft that
    /// gives none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fingerprint: Option<String>,
    /// The chunk the answer cited and its content hash, when the answer
    /// record has them.
    #[serde(skip)]
    pub chunk: Option<(ChunkId, String)>,
    /// The low-OCR-confidence warning the answer gave this quote, carried
    /// into Markdown exports (not checked on replay).
    #[serde(skip)]
    pub ocr_warning: Option<String>,
}

impl From<&crate::types::Citation> for CitedQuote {
    fn from(c: &crate::types::Citation) -> CitedQuote {
        CitedQuote {
            doc_id: c.doc_id.clone(),
            title: Some(c.title.clone()),
            organisation: c.organisation.clone(),
            date: c.date.clone(),
            page: c.page,
            end_page: c.end_page,
            quote: c.quote.clone(),
            fingerprint: (!c.page_hash.is_empty()).then(|| c.page_hash.clone()),
            chunk: None,
            ocr_warning: c.ocr.as_ref().and_then(|o| o.warning()),
        }
    }
}

/// What to replay: the claims, and what the input says about itself.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Claims {
    pub question: Option<String>,
    pub created_at: Option<String>,
    /// The judge that made the answer, when known.
    pub judge: Option<String>,
    pub claims: Vec<Claim>,
}

impl Claims {
    /// The judge to replay with: the one that made the answer, else the default.
    pub fn judge_kind(&self) -> crate::verify::JudgeKind {
        match self.judge.as_deref() {
            Some(j) if j.starts_with("learned") => crate::verify::JudgeKind::Learned,
            Some(_) => crate::verify::JudgeKind::Rules,
            None => crate::verify::JudgeKind::default(),
        }
    }
}

/// The supported sentences of an answer record, as claims to replay.
/// Struck sentences were never part of the answer and are not replayed.
/// Reads an answer given as text: an answer record from `answer --json`
/// (JSON) or a Markdown answer from `answer --markdown`. Returns the claims and
/// the format's name; the error says what the text is not.
pub fn read_answer(text: &str) -> Result<(Claims, &'static str), String> {
    if !text.trim_start().starts_with('{') {
        return Ok((markdown::parse(text)?, "markdown"));
    }
    let v: serde_json::Value =
        serde_json::from_str(text).map_err(|e| format!("not valid JSON: {e}"))?;
    let version = crate::answer::ANSWER_SCHEMA_VERSION;
    match v.get("schema_version").and_then(serde_json::Value::as_u64) {
        Some(n) if n == u64::from(version) => {}
        Some(n) => {
            return Err(format!(
                "answer record schema version {n}; this onrecord reads version {version}"
            ));
        }
        None => {
            return Err(
                "not an answer record (no schema_version); give JSON from `answer --json` or a Markdown answer"
                    .into(),
            );
        }
    }
    let a: AnswerRecord = serde_json::from_value(v)
        .map_err(|e| format!("not an answer record from `answer --json`: {e}"))?;
    Ok((claims_from_record(&a), "json"))
}

pub fn claims_from_record(a: &AnswerRecord) -> Claims {
    let chunk_hash = |id: ChunkId| {
        a.retrieved
            .iter()
            .find(|r| r.chunk_id == id)
            .map(|r| r.hash.clone())
    };
    Claims {
        question: Some(a.question.clone()),
        created_at: Some(a.created_at.clone()),
        judge: Some(a.config.judge.clone()),
        claims: a
            .sentences
            .iter()
            .filter(|s| s.verdict == Verdict::Supported)
            .map(|s| Claim {
                text: s.text.clone(),
                problem: None,
                citations: s
                    .citations
                    .iter()
                    .map(|c| CitedQuote {
                        chunk: chunk_hash(c.chunk_id).map(|h| (c.chunk_id, h)),
                        ocr_warning: c.ocr.as_ref().and_then(|o| o.warning()),
                        ..CitedQuote::from(c)
                    })
                    .collect(),
            })
            .collect(),
    }
}

/// A sentence's verdict on replay.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ReplayVerdict {
    /// Every quote reads as the page does and supports the sentence.
    Holds,
    /// A quote is not on the cited page, or the quotes do not support the sentence.
    Fails,
    /// A cited page's content differs from when the answer was made.
    SourceChanged,
    /// A cited document or page is no longer there.
    SourceMissing,
}

impl ReplayVerdict {
    /// The words shown to a reader.
    pub fn label(self) -> &'static str {
        match self {
            ReplayVerdict::Holds => "holds",
            ReplayVerdict::Fails => "fails",
            ReplayVerdict::SourceChanged => "source changed",
            ReplayVerdict::SourceMissing => "source missing",
        }
    }
}

/// What replay found for one citation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum QuoteStatus {
    /// The quote reads exactly as the cited page does, and the page is unchanged.
    Found,
    /// The quote is not on the cited page (nor elsewhere in the document).
    NotFound,
    /// The quote (or its fingerprint) belongs to another page of the document.
    WrongPage,
    /// The cited page reads differently from the quote: the quote was altered.
    Misquoted,
    /// The page's content hash differs from the recorded fingerprint.
    PageChanged,
    /// The document or the page is not there.
    Missing,
}

/// Where a quote is now.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct FoundAt {
    pub page: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub end_page: Option<u32>,
    pub start_char: usize,
    pub end_char: usize,
}

/// The quoted region before and after a change, a few words either side.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct RegionDiff {
    /// The region as it read when the answer was made.
    pub was: String,
    /// The region as it reads now (empty when the words are gone).
    pub now: String,
}

/// One citation, checked again.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CitationCheck {
    #[serde(flatten)]
    pub cited: CitedQuote,
    pub status: QuoteStatus,
    /// The cited page's content hash now, when the page exists.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub current_fingerprint: Option<String>,
    /// Where the quote is now, when it reads exactly as the page does.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub found_at: Option<FoundAt>,
    /// What a reader should know, when anything is amiss.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub diff: Option<RegionDiff>,
    /// Whether the chunk the answer cited is still stored with the same
    /// content hash (replay against an index only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub chunk_unchanged: Option<bool>,
}

/// One sentence, checked again.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SentenceCheck {
    pub text: String,
    pub verdict: ReplayVerdict,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    pub citations: Vec<CitationCheck>,
}

#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Counts {
    pub holds: usize,
    pub fails: usize,
    pub source_changed: usize,
    pub source_missing: usize,
}

/// Where the replayed answer came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplayInput {
    /// A file path, or `answer log #N`.
    pub source: String,
    /// `json` or `markdown`.
    pub format: String,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub answer_id: Option<u64>,
    /// When the answer was made, when the input says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub created_at: Option<String>,
}

/// The versioned replay report.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplayReport {
    pub schema_version: u32,
    pub onrecord_version: String,
    pub replayed_at: String,
    pub input: ReplayInput,
    /// `index DIR` or `sources DIR`.
    pub against: String,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub question: Option<String>,
    pub judge: String,
    pub sentences: Vec<SentenceCheck>,
    pub counts: Counts,
    /// 0 when every sentence holds, else 1.
    pub exit_code: u8,
    pub caution: String,
}

/// A document's pages as they are now.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceDoc {
    pub doc_id: DocId,
    pub title: String,
    pub organisation: Option<String>,
    pub date: Option<String>,
    pub pages: Vec<String>,
    /// Content hash of each page (as the store computes it).
    pub hashes: Vec<String>,
}

impl SourceDoc {
    pub fn new(
        doc_id: DocId,
        title: String,
        organisation: Option<String>,
        date: Option<String>,
        pages: Vec<String>,
    ) -> SourceDoc {
        let hashes = pages
            .iter()
            .map(|p| crate::text::hash_hex(p.as_bytes()))
            .collect();
        SourceDoc {
            doc_id,
            title,
            organisation,
            date,
            pages,
            hashes,
        }
    }
}

/// Where replay reads pages from.
pub trait PageSource {
    /// `index DIR` or `sources DIR`, for the report.
    fn describe(&self) -> String;
    /// The document's current pages; `Ok(None)` when it is not there, and
    /// `Err` with a reader-facing message when it is there but unreadable.
    fn document(&mut self, id: &DocId) -> Result<Option<Arc<SourceDoc>>, String>;
    /// Why a document is not there, in a reader's words.
    fn missing(&self, id: &DocId) -> String;
    /// A page's text as it was when an answer cited it, by fingerprint.
    fn earlier_page(&self, _fingerprint: &str) -> Option<String> {
        None
    }
    /// Whether the chunk is still stored with this content hash.
    fn chunk_unchanged(&self, _chunk: ChunkId, _hash: &str) -> Option<bool> {
        None
    }
}

/// Replay every claim against `pages` with `judge`.
pub fn replay(
    claims: &Claims,
    input: ReplayInput,
    pages: &mut dyn PageSource,
    judge: &dyn Judge,
) -> ReplayReport {
    let sentences: Vec<SentenceCheck> = claims
        .claims
        .iter()
        .map(|c| replay_claim(c, pages, judge))
        .collect();
    let mut counts = Counts::default();
    for s in &sentences {
        match s.verdict {
            ReplayVerdict::Holds => counts.holds += 1,
            ReplayVerdict::Fails => counts.fails += 1,
            ReplayVerdict::SourceChanged => counts.source_changed += 1,
            ReplayVerdict::SourceMissing => counts.source_missing += 1,
        }
    }
    let all_hold = !sentences.is_empty() && counts.holds == sentences.len();
    ReplayReport {
        schema_version: REPLAY_SCHEMA_VERSION,
        onrecord_version: env!("CARGO_PKG_VERSION").into(),
        replayed_at: crate::answer::now_utc(),
        input,
        against: pages.describe(),
        question: claims.question.clone(),
        judge: judge.name().into(),
        sentences,
        counts,
        exit_code: if all_hold { 0 } else { 1 },
        caution: CAUTION.into(),
    }
}

fn replay_claim(claim: &Claim, pages: &mut dyn PageSource, judge: &dyn Judge) -> SentenceCheck {
    let checks: Vec<(CitationCheck, Option<String>)> = claim
        .citations
        .iter()
        .map(|c| check_citation(c, pages))
        .collect();
    let (citations, found): (Vec<CitationCheck>, Vec<Option<String>>) = checks.into_iter().unzip();
    let done = |verdict, reason: String| SentenceCheck {
        text: claim.text.clone(),
        verdict,
        reason: Some(reason),
        citations: citations.clone(),
    };
    if let Some(p) = &claim.problem {
        return done(ReplayVerdict::Fails, p.clone());
    }
    if citations.is_empty() {
        return done(
            ReplayVerdict::Fails,
            "no footnote: the sentence points to no record".into(),
        );
    }
    let first_note = |status: QuoteStatus| {
        citations
            .iter()
            .find(|c| c.status == status)
            .map(|c| c.note.clone().unwrap_or_default())
    };
    if let Some(n) = first_note(QuoteStatus::Missing) {
        return done(ReplayVerdict::SourceMissing, n);
    }
    // The judge reads every quote that still reads as its page does.
    let evidence: Vec<Evidence<'_>> = citations
        .iter()
        .zip(&found)
        .filter_map(|(c, f)| {
            f.as_deref().map(|text| Evidence {
                text,
                page: Some(c.cited.page),
            })
        })
        .collect();
    let all_found = evidence.len() == citations.len();
    if let Some(n) = first_note(QuoteStatus::PageChanged) {
        let tail = if all_found {
            let j = judge.judge(&claim.text, &evidence);
            if j.supported {
                "; the quote is still on the page and still supports the sentence: check the change before relying on it".to_string()
            } else {
                format!(
                    "; the quote is still on the page but no longer supports the sentence: {}",
                    j.reason.unwrap_or_default()
                )
            }
        } else {
            String::new()
        };
        return done(ReplayVerdict::SourceChanged, format!("{n}{tail}"));
    }
    for status in [
        QuoteStatus::Misquoted,
        QuoteStatus::WrongPage,
        QuoteStatus::NotFound,
    ] {
        if let Some(n) = first_note(status) {
            return done(ReplayVerdict::Fails, n);
        }
    }
    let j = judge.judge(&claim.text, &evidence);
    if j.supported {
        SentenceCheck {
            text: claim.text.clone(),
            verdict: ReplayVerdict::Holds,
            reason: None,
            citations,
        }
    } else {
        done(
            ReplayVerdict::Fails,
            j.reason
                .unwrap_or_else(|| "the quotes do not support it".into()),
        )
    }
}

fn pages_label(first: u32, last: u32) -> String {
    if first == last {
        format!("page {first}")
    } else {
        format!("pages {first}-{last}")
    }
}

/// The cited pages as one text, with a form feed at each page break, in the
/// shape the verifier's quote location reads.
fn span_of(doc: &SourceDoc, first: u32, last: u32) -> StoredChunk {
    let text = doc.pages[first as usize - 1..last as usize].join(&PAGE_BREAK.to_string());
    StoredChunk {
        id: ChunkId(0),
        doc_id: doc.doc_id.clone(),
        title: doc.title.clone(),
        organisation: doc.organisation.clone(),
        date: doc.date.clone(),
        seq: 0,
        span: ChunkSpan {
            start_page: first,
            start_char: 0,
            end_page: last,
            end_char: doc.pages[last as usize - 1].chars().count(),
        },
        text,
        hash: String::new(),
    }
}

/// Check one citation. Returns the check and, when the quote reads exactly
/// as the page does, the page's words for the judge.
fn check_citation(c: &CitedQuote, pages: &mut dyn PageSource) -> (CitationCheck, Option<String>) {
    let mut check = CitationCheck {
        cited: c.clone(),
        status: QuoteStatus::Missing,
        current_fingerprint: None,
        found_at: None,
        note: None,
        diff: None,
        chunk_unchanged: c
            .chunk
            .as_ref()
            .and_then(|(id, h)| pages.chunk_unchanged(*id, h)),
    };
    let doc = match pages.document(&c.doc_id) {
        Ok(Some(d)) => d,
        Ok(None) => {
            check.note = Some(pages.missing(&c.doc_id));
            return (check, None);
        }
        Err(message) => {
            check.note = Some(message);
            return (check, None);
        }
    };
    // A draft's footnote may leave out the title, organisation and date;
    // the document as it is now fills them in for the report and the CSV.
    if check.cited.title.is_none() {
        check.cited.title = Some(doc.title.clone());
    }
    if check.cited.organisation.is_none() {
        check.cited.organisation.clone_from(&doc.organisation);
    }
    if check.cited.date.is_none() {
        check.cited.date.clone_from(&doc.date);
    }
    let title = &doc.title;
    let last = c.end_page.unwrap_or(c.page).max(c.page);
    if c.page == 0 || last as usize > doc.pages.len() {
        check.note = Some(format!(
            "{} of \u{201C}{title}\u{201D} ({}) is gone: the document now has {} page(s)",
            pages_label(c.page, last),
            c.doc_id,
            doc.pages.len()
        ));
        return (check, None);
    }
    let current = &doc.hashes[c.page as usize - 1];
    check.current_fingerprint = Some(current.clone());
    let span = span_of(&doc, c.page, last);
    let loc = locate(&c.quote, &span);
    let exact = loc.as_ref().filter(|l| !l.differs);
    if let Some(l) = exact {
        check.found_at = Some(FoundAt {
            page: l.page,
            end_page: (l.end_page != l.page).then_some(l.end_page),
            start_char: l.start_char,
            end_char: l.end_char,
        });
    }
    let fp = c.fingerprint.as_deref().map(str::to_ascii_lowercase);
    let changed = fp.as_deref().is_some_and(|f| !current.starts_with(f));
    if changed {
        let f = fp.as_deref().unwrap_or_default();
        // A fingerprint that matches another page of the document: the
        // footnote names the wrong page.
        if let Some(q) = doc.hashes.iter().position(|h| h.starts_with(f)) {
            check.status = QuoteStatus::WrongPage;
            check.note = Some(format!(
                "the footnote says page {} of \u{201C}{title}\u{201D}, but its fingerprint is page {}'s{}",
                c.page,
                q + 1,
                if exact.is_some() {
                    ""
                } else {
                    "; the quote is not on the page it names"
                }
            ));
            return (check, exact.map(|l| l.page_text.clone()));
        }
        check.status = QuoteStatus::PageChanged;
        let still = exact.is_some();
        check.note = Some(format!(
            "{} of \u{201C}{title}\u{201D} ({}) has changed since the answer was made \
             (fingerprint {} then, {} now){}",
            pages_label(c.page, last),
            c.doc_id,
            fingerprint(f),
            fingerprint(current),
            if still {
                ""
            } else {
                "; the quoted words no longer read as quoted"
            }
        ));
        let earlier = pages.earlier_page(f);
        check.diff = region_diff(&c.quote, earlier.as_deref(), &span.text, loc.as_ref());
        return (check, exact.map(|l| l.page_text.clone()));
    }
    match (&loc, exact) {
        (_, Some(l)) => {
            check.status = QuoteStatus::Found;
            (check, Some(l.page_text.clone()))
        }
        (Some(l), None) => {
            check.status = QuoteStatus::Misquoted;
            check.note = Some(format!(
                "the quote does not read as {} of \u{201C}{title}\u{201D} does: the page reads \u{201C}{}\u{201D}",
                pages_label(c.page, last),
                l.page_text
            ));
            check.diff = word_window(&c.quote, &l.page_text, None);
            (check, None)
        }
        (None, None) => {
            let elsewhere = (1..=doc.pages.len() as u32)
                .filter(|&p| p < c.page || p > last)
                .find(|&p| locate(&c.quote, &span_of(&doc, p, p)).is_some_and(|l| !l.differs));
            match elsewhere {
                Some(p) => {
                    check.status = QuoteStatus::WrongPage;
                    check.note = Some(format!(
                        "the quote is on page {p} of \u{201C}{title}\u{201D}, not on {} as the footnote says",
                        pages_label(c.page, last)
                    ));
                }
                None => {
                    check.status = QuoteStatus::NotFound;
                    check.note = Some(format!(
                        "quote not found on {} of \u{201C}{title}\u{201D} ({}), nor elsewhere in it",
                        pages_label(c.page, last),
                        c.doc_id
                    ));
                }
            }
            (check, None)
        }
    }
}

/// A replay report as a fact-checker reads it in a terminal.
pub fn render_text(r: &ReplayReport) -> String {
    use crate::answer::wrap;
    use std::fmt::Write;
    let mut out = String::new();
    let made = r
        .input
        .created_at
        .as_deref()
        .map(|c| format!(" (made {c})"))
        .unwrap_or_default();
    let _ = writeln!(
        out,
        "Replay of {}{made} against {}",
        r.input.source, r.against
    );
    if let Some(q) = &r.question {
        let _ = writeln!(out, "Question: {q}");
    }
    out.push('\n');
    let indent = |s: &str| {
        wrap(s, 70)
            .lines()
            .map(|l| format!("      {l}"))
            .collect::<Vec<_>>()
            .join("\n")
    };
    for s in &r.sentences {
        let label = match s.verdict {
            ReplayVerdict::Holds => "holds".to_string(),
            v => v.label().to_uppercase(),
        };
        let _ = writeln!(out, "  {label}: \u{201C}{}\u{201D}", s.text);
        for c in &s.citations {
            let _ = writeln!(
                out,
                "{}",
                indent(&format!(
                    "{} {}, {} [{}]",
                    match c.status {
                        QuoteStatus::Found => "cites",
                        _ => "cited",
                    },
                    c.cited.title.as_deref().unwrap_or(&c.cited.doc_id.0),
                    match c.cited.end_page {
                        Some(e) if e != c.cited.page => format!("pp. {}-{e}", c.cited.page),
                        _ => format!("p. {}", c.cited.page),
                    },
                    c.cited.doc_id
                ))
            );
            if let Some(d) = &c.diff {
                let _ = writeln!(
                    out,
                    "{}",
                    indent(&format!("was: \u{201C}{}\u{201D}", d.was))
                );
                let now = if d.now.is_empty() {
                    "(the quoted words are gone)".to_string()
                } else {
                    format!("\u{201C}{}\u{201D}", d.now)
                };
                let _ = writeln!(out, "{}", indent(&format!("now: {now}")));
            }
        }
        if let Some(why) = &s.reason {
            let _ = writeln!(out, "{}", indent(&format!("reason: {why}")));
        }
        out.push('\n');
    }
    let c = &r.counts;
    let _ = writeln!(
        out,
        "{} sentence(s): {} hold, {} fail, {} source changed, {} source missing.",
        r.sentences.len(),
        c.holds,
        c.fails,
        c.source_changed,
        c.source_missing
    );
    let _ = writeln!(
        out,
        "{}",
        if r.exit_code == 0 {
            "Every sentence holds (exit code 0)."
        } else {
            "Not every sentence holds (exit code 1): check the ones above before relying on them."
        }
    );
    let _ = writeln!(out, "\n{}", wrap(&format!("Caution: {}", r.caution), 78));
    out
}

/// Words shown either side of a change.
const CONTEXT_WORDS: usize = 6;

/// The quoted region before and after a change. With the earlier page's
/// text (kept by the answer log) the two pages are compared and the change
/// nearest the quote is shown; without it, the quote is compared with the
/// region of the page that now best matches it.
fn region_diff(
    quote: &str,
    earlier: Option<&str>,
    now: &str,
    loc: Option<&crate::verify::Located>,
) -> Option<RegionDiff> {
    if let Some(before) = earlier {
        let before = fold_ws(before);
        let now = fold_ws(now);
        let q = fold_ws(quote);
        let focus = before.find(&q).map(|at| {
            let start = before[..at].split_whitespace().count();
            start..start + q.split_whitespace().count()
        });
        return word_window(&before, &now, focus);
    }
    let region = match loc {
        Some(l) => Some(l.page_text.clone()),
        None => {
            // A looser search, only to show the reader what the page now says.
            let loose = align::AlignConfig {
                min_similarity: 0.6,
                ..Default::default()
            };
            align::find(quote, now, &loose).map(|m| fold_ws(&now[m.bytes]))
        }
    };
    match region {
        Some(r) => word_window(quote, &r, None).or(Some(RegionDiff {
            was: fold_ws(quote),
            now: r,
        })),
        None => Some(RegionDiff {
            was: fold_ws(quote),
            now: String::new(),
        }),
    }
}

/// The words that differ between `was` and `now`, with a few words of
/// context either side. `focus` (a word range of `was`) picks the change
/// nearest to it when there are several. `None` when nothing differs.
pub fn word_window(
    was: &str,
    now: &str,
    focus: Option<std::ops::Range<usize>>,
) -> Option<RegionDiff> {
    use similar::{Algorithm, DiffTag, capture_diff_slices};
    let a: Vec<&str> = was.split_whitespace().collect();
    let b: Vec<&str> = now.split_whitespace().collect();
    let ops = capture_diff_slices(Algorithm::Myers, &a, &b);
    let changes: Vec<_> = ops.iter().filter(|o| o.tag() != DiffTag::Equal).collect();
    if changes.is_empty() {
        return None;
    }
    // Distance from a change to the focus, in words of `was`.
    let distance = |r: &std::ops::Range<usize>| match &focus {
        None => 0,
        Some(f) if r.end < f.start => f.start - r.end,
        Some(f) if r.start > f.end => r.start - f.end,
        Some(_) => 0,
    };
    let nearest = changes
        .iter()
        .min_by_key(|o| distance(&o.old_range()))
        .expect("not empty");
    // Changes close to the nearest one are shown with it.
    let (mut lo_a, mut hi_a) = (nearest.old_range().start, nearest.old_range().end);
    let (mut lo_b, mut hi_b) = (nearest.new_range().start, nearest.new_range().end);
    for o in &changes {
        let (ra, rb) = (o.old_range(), o.new_range());
        if ra.start <= hi_a + CONTEXT_WORDS && ra.end + CONTEXT_WORDS >= lo_a {
            lo_a = lo_a.min(ra.start);
            hi_a = hi_a.max(ra.end);
            lo_b = lo_b.min(rb.start);
            hi_b = hi_b.max(rb.end);
        }
    }
    let window = |words: &[&str], lo: usize, hi: usize| {
        let (s, e) = (
            lo.saturating_sub(CONTEXT_WORDS),
            (hi + CONTEXT_WORDS).min(words.len()),
        );
        let mut out = String::new();
        if s > 0 {
            out.push('…');
        }
        out.push_str(&words[s..e].join(" "));
        if e < words.len() {
            out.push('…');
        }
        out
    };
    Some(RegionDiff {
        was: window(&a, lo_a, hi_a),
        now: window(&b, lo_b, hi_b),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_changed_figure_is_shown_with_its_context() {
        let d = word_window(
            "The revised estimate for Pier 3 is $48.2 million, approved in March.",
            "The revised estimate for Pier 3 is $52.9 million, approved in March.",
            None,
        )
        .unwrap();
        assert_eq!(
            d.was,
            "…revised estimate for Pier 3 is $48.2 million, approved in March."
        );
        assert!(d.now.contains("$52.9"), "{d:?}");
        assert!(word_window("same words", "same  words", None).is_none());
    }

    #[test]
    fn the_change_nearest_the_quote_is_chosen() {
        let was = "alpha beta gamma delta one two three four five six seven eight nine ten eleven twelve thirteen fourteen fifteen";
        let now = "alpha BETA gamma delta one two three four five six seven eight nine ten eleven twelve thirteen FOURTEEN fifteen";
        let focus = 16..19; // "twelve thirteen fourteen"
        let d = word_window(was, now, Some(focus)).unwrap();
        assert!(
            d.now.contains("FOURTEEN") && !d.now.contains("BETA"),
            "{d:?}"
        );
        assert!(d.was.starts_with('…'), "{d:?}");
    }
}
