//! Plain data types shared by every stage: document and chunk identifiers,
//! page spans, document metadata, filters and citations. No behaviour beyond
//! small conversions lives here.

use serde::{Deserialize, Serialize};
use std::fmt;

/// A document's stable identifier inside one index (from the manifest, or
/// derived from the file name).
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(transparent)]
pub struct DocId(pub String);

impl fmt::Display for DocId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

/// A chunk's identifier. Ids are never reused inside one index, so a stale
/// reference can never silently point at different text.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(transparent)]
pub struct ChunkId(pub u64);

impl fmt::Display for ChunkId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

/// Where a chunk lies in its document: from (`start_page`, `start_char`)
/// to (`end_page`, `end_char`). Pages count from 1; character offsets count
/// Unicode scalar values in each page's stored text, end exclusive.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct ChunkSpan {
    pub start_page: u32,
    pub start_char: usize,
    pub end_page: u32,
    pub end_char: usize,
}

impl ChunkSpan {
    /// "p. 3" or "pp. 3-4".
    pub fn pages_label(&self) -> String {
        if self.start_page == self.end_page {
            format!("p. {}", self.start_page)
        } else {
            format!("pp. {}-{}", self.start_page, self.end_page)
        }
    }
}

/// Descriptive metadata of a document, from the manifest, flags or the file.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct DocMeta {
    pub title: Option<String>,
    pub organisation: Option<String>,
    /// ISO date, `YYYY-MM-DD`.
    pub date: Option<String>,
    /// Release or access-request number.
    pub release: Option<String>,
    pub url: Option<String>,
}

impl DocMeta {
    /// Fields set in `other` win over fields set here.
    pub fn overlay(&mut self, other: &DocMeta) {
        fn pick(dst: &mut Option<String>, src: &Option<String>) {
            if src.is_some() {
                dst.clone_from(src);
            }
        }
        pick(&mut self.title, &other.title);
        pick(&mut self.organisation, &other.organisation);
        pick(&mut self.date, &other.date);
        pick(&mut self.release, &other.release);
        pick(&mut self.url, &other.url);
    }

    /// Fill only the fields that are unset here.
    pub fn fill_from(&mut self, other: &DocMeta) {
        let mut merged = other.clone();
        merged.overlay(self);
        *self = merged;
    }
}

/// Restrictions on which documents a search may return.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Filters {
    /// Inclusive lower bound, `YYYY-MM-DD` (a shorter prefix such as `2021` works).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub from: Option<String>,
    /// Inclusive upper bound, `YYYY-MM-DD` (a shorter prefix covers the whole period).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub to: Option<String>,
    /// Case-insensitive substring of the organisation.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub org: Option<String>,
    /// Exact document ids.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub docs: Vec<DocId>,
}

impl Filters {
    pub fn is_empty(&self) -> bool {
        self.from.is_none() && self.to.is_none() && self.org.is_none() && self.docs.is_empty()
    }
}

/// Where a quote sits: the document, its descriptive fields, the page span and
/// the page's own words.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Citation {
    pub chunk_id: ChunkId,
    pub doc_id: DocId,
    pub title: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub organisation: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub date: Option<String>,
    /// First page of the quote (1-based).
    pub page: u32,
    /// Last page of the quote, when it runs over a page break.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub end_page: Option<u32>,
    /// Character range on `page` (and, when `end_page` is set, the end is on `end_page`).
    pub start_char: usize,
    pub end_char: usize,
    /// The quote exactly as the page has it, with runs of white space folded to one space.
    pub quote: String,
    /// Content hash of the page the quote starts on.
    pub page_hash: String,
    /// The drafter's wording of the quote, when the page reads differently
    /// (OCR damage, or a quote the drafter "cleaned"): shown as
    /// "quoted as … / page reads …".
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quoted_as: Option<String>,
    /// How closely the quote as written matched the page: 1 when its letters
    /// and digits match (OCR look-alikes folded), lower for an approximate
    /// match.
    #[serde(default = "one")]
    pub similarity: f32,
    /// The chunk the drafter cited, when the quote was found in another
    /// retrieved chunk and the citation was corrected.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub corrected_from: Option<ChunkId>,
    /// OCR confidence of the quoted words, when the page was read by OCR;
    /// `low` asks the reporter to check the page image before quoting.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ocr: Option<crate::ocr::SpanConfidence>,
}

fn one() -> f32 {
    1.0
}

/// Validate an ISO date or date prefix (`YYYY`, `YYYY-MM`, `YYYY-MM-DD`).
pub fn check_date(s: &str) -> Result<(), String> {
    let parts: Vec<&str> = s.split('-').collect();
    let ok = match parts.as_slice() {
        [y] => is_digits(y, 4),
        [y, m] => is_digits(y, 4) && is_digits(m, 2) && in_range(m, 1, 12),
        [y, m, d] => {
            is_digits(y, 4)
                && is_digits(m, 2)
                && is_digits(d, 2)
                && in_range(m, 1, 12)
                && in_range(d, 1, 31)
        }
        _ => false,
    };
    if ok {
        Ok(())
    } else {
        Err(format!(
            "`{s}` is not a date; write YYYY-MM-DD (or YYYY-MM, or YYYY)"
        ))
    }
}

fn is_digits(s: &str, n: usize) -> bool {
    s.len() == n && s.bytes().all(|b| b.is_ascii_digit())
}

fn in_range(s: &str, lo: u32, hi: u32) -> bool {
    s.parse::<u32>().is_ok_and(|v| (lo..=hi).contains(&v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dates_are_checked() {
        for ok in ["2021", "2021-03", "2021-03-05"] {
            assert!(check_date(ok).is_ok(), "{ok}");
        }
        for bad in [
            "21",
            "2021-13",
            "2021-3-5",
            "5 March 2021",
            "2021-02-32",
            "",
        ] {
            assert!(check_date(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn overlay_prefers_the_other_side() {
        let mut a = DocMeta {
            title: Some("a".into()),
            date: Some("2020-01-01".into()),
            ..Default::default()
        };
        a.overlay(&DocMeta {
            title: Some("b".into()),
            ..Default::default()
        });
        assert_eq!(a.title.as_deref(), Some("b"));
        assert_eq!(a.date.as_deref(), Some("2020-01-01"));
        a.fill_from(&DocMeta {
            title: Some("c".into()),
            organisation: Some("Harbour".into()),
            ..Default::default()
        });
        assert_eq!(a.title.as_deref(), Some("b"));
        assert_eq!(a.organisation.as_deref(), Some("Harbour"));
    }
}
