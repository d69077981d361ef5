//! CSV exports (RFC 4180: comma-separated, CRLF line ends, fields with a
//! comma, quote or line break in double quotes, quotes doubled), one row
//! per sentence and quote, for editors' spreadsheets.

use super::{CitedQuote, ReplayReport, fingerprint};
use crate::answer::AnswerRecord;
use crate::verify::VerifiedSentence;
use std::io::Write;

/// The columns, in order.
pub const COLUMNS: [&str; 13] = [
    "question",
    "sentence",
    "verdict",
    "reason",
    "doc_id",
    "title",
    "organisation",
    "date",
    "page",
    "quote",
    "fingerprint",
    "ocr_confidence",
    "ocr_warning",
];

fn writer<W: Write>(out: W) -> csv::Writer<W> {
    csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .quote_style(csv::QuoteStyle::Necessary)
        .from_writer(out)
}

/// A cell a spreadsheet would run as a formula (it begins with `=`, `+`,
/// `-` or `@`, or a tab or carriage return that hides one) gets a leading
/// apostrophe, so it is shown as text: the OWASP guidance on CSV injection
/// (the "formula injection" prevention). Records are untrusted input.
pub fn neutral_cell(s: &str) -> std::borrow::Cow<'_, str> {
    match s.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => format!("'{s}").into(),
        _ => s.into(),
    }
}

fn pages(page: u32, end: Option<u32>) -> String {
    match end {
        Some(e) if e != page => format!("{page}-{e}"),
        _ => page.to_string(),
    }
}

fn row<W: Write>(
    w: &mut csv::Writer<W>,
    lead: [&str; 4],
    c: Option<&CitedQuote>,
    ocr: Option<&crate::ocr::SpanConfidence>,
) -> csv::Result<()> {
    let ocr: [String; 2] = match ocr {
        Some(o) => [
            format!("{:.0}", o.confidence),
            o.warning().unwrap_or_default(),
        ],
        None => Default::default(),
    };
    let cite: [String; 7] = match c {
        Some(c) => [
            c.doc_id.0.clone(),
            c.title.clone().unwrap_or_default(),
            c.organisation.clone().unwrap_or_default(),
            c.date.clone().unwrap_or_default(),
            pages(c.page, c.end_page),
            c.quote.clone(),
            c.fingerprint
                .as_deref()
                .map(|f| fingerprint(f).to_string())
                .unwrap_or_default(),
        ],
        None => Default::default(),
    };
    w.write_record(
        lead.iter()
            .copied()
            .chain(cite.iter().map(String::as_str))
            .chain(ocr.iter().map(String::as_str))
            .map(|cell| neutral_cell(cell).into_owned()),
    )
}

fn sentence_rows<W: Write>(
    w: &mut csv::Writer<W>,
    question: &str,
    s: &VerifiedSentence,
) -> csv::Result<()> {
    let verdict = match s.verdict {
        crate::verify::Verdict::Supported => "supported",
        crate::verify::Verdict::Struck => "struck",
    };
    quote_rows(
        w,
        question,
        &s.text,
        verdict,
        s.reason.as_deref().unwrap_or(""),
        &s.citations,
    )
}

fn quote_rows<W: Write>(
    w: &mut csv::Writer<W>,
    question: &str,
    text: &str,
    verdict: &str,
    reason: &str,
    citations: &[crate::types::Citation],
) -> csv::Result<()> {
    let lead = [question, text, verdict, reason];
    if citations.is_empty() {
        return row(w, lead, None, None);
    }
    for c in citations {
        row(w, lead, Some(&CitedQuote::from(c)), c.ocr.as_ref())?;
    }
    Ok(())
}

/// An answer as CSV: every sentence the drafter wrote, supported or struck,
/// one row per quote (a sentence without citations gets one row).
pub fn write_answer<W: Write>(a: &AnswerRecord, out: W) -> csv::Result<()> {
    let mut w = writer(out);
    w.write_record(COLUMNS)?;
    for s in &a.sentences {
        sentence_rows(&mut w, &a.question, s)?;
    }
    if let Some(d) = &a.draft {
        for s in &d.verdicts {
            sentence_rows(&mut w, &a.question, s)?;
        }
    }
    // Supported sentences that do not answer, and a declined answer's
    // closest sentences: listed with their own verdicts, never as answers.
    for s in &a.off_question {
        let reason = s.reason.as_deref().unwrap_or("");
        quote_rows(
            &mut w,
            &a.question,
            &s.text,
            "not an answer",
            reason,
            &s.citations,
        )?;
    }
    for c in &a.closest {
        quote_rows(
            &mut w,
            &a.question,
            &c.text,
            "closest, not an answer",
            &c.why_not,
            &c.citations,
        )?;
    }
    w.flush()?;
    Ok(())
}

/// A replay report as CSV: each sentence's replay verdict, one row per
/// quote. Organisation and date come from the answer, else from the
/// source as it is now.
pub fn write_replay<W: Write>(r: &ReplayReport, out: W) -> csv::Result<()> {
    let mut w = writer(out);
    w.write_record(COLUMNS)?;
    let question = r.question.as_deref().unwrap_or("");
    for s in &r.sentences {
        let reason = s.reason.as_deref().unwrap_or("");
        let lead = [question, s.text.as_str(), s.verdict.label(), reason];
        if s.citations.is_empty() {
            row(&mut w, lead, None, None)?;
        }
        for c in &s.citations {
            row(&mut w, lead, Some(&c.cited), None)?;
        }
    }
    w.flush()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::neutral_cell;

    /// The OWASP CSV-injection guidance: cells starting with = + - @ (and
    /// tab or carriage return) are prefixed with a single quote; others
    /// are left as they are.
    #[test]
    fn formula_cells_are_neutralised() {
        for (cell, want) in [
            (
                "=HYPERLINK(\"http://x.example\",\"click\")",
                "'=HYPERLINK(\"http://x.example\",\"click\")",
            ),
            ("+1+cmd|' /C calc'!A0", "'+1+cmd|' /C calc'!A0"),
            ("-2+3", "'-2+3"),
            ("@SUM(A1:A2)", "'@SUM(A1:A2)"),
            ("\t=1+1", "'\t=1+1"),
            (
                "The board approved $1.4 million.",
                "The board approved $1.4 million.",
            ),
            ("7-8", "7-8"),
            ("", ""),
        ] {
            assert_eq!(neutral_cell(cell), want, "{cell:?}");
        }
    }
}
