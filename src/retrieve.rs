//! Retrieval: resolve filters in the store, run BM25, and return chunks with
//! their documents' fields, ranks, scores and a highlighted snippet. Every
//! result says which retriever found it and at what rank and score.
//!
//! invariant: retrieval never changes the store or the index.

use crate::bm25::{Bm25Index, QueryTerm};
use crate::error::Result;
use crate::store::{Store, StoredChunk};
use crate::text::{fold_ws, term_spans};
use crate::types::Filters;
use serde::Serialize;
use std::collections::HashSet;
use std::path::Path;

/// A retrieved chunk and why it was returned.
#[derive(Debug, Clone)]
pub struct Retrieved {
    pub chunk: StoredChunk,
    pub retriever: &'static str,
    pub rank: usize,
    pub score: f32,
}

/// A snippet of text with the byte ranges of matched terms.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Snippet {
    pub text: String,
    pub highlights: Vec<(usize, usize)>,
}

/// An open index: the store plus its BM25 index.
pub struct Index {
    pub store: Store,
    pub bm25: Bm25Index,
}

impl Index {
    pub fn open(dir: &Path) -> Result<Index> {
        let store = Store::open(dir)?;
        let bm25 = Bm25Index::open_synced(dir, &store)?;
        Ok(Index { store, bm25 })
    }

    /// The top `k` chunks for `query` under `filters`.
    pub fn search(&self, query: &str, filters: &Filters, k: usize) -> Result<Vec<Retrieved>> {
        let allowed = self.store.docs_matching(filters)?;
        let hits = self.bm25.search(query, allowed.as_deref(), k)?;
        let ids: Vec<_> = hits.iter().map(|h| h.chunk_id).collect();
        // Pair by id: a hit whose chunk is no longer in the store is dropped
        // rather than lending its rank and score to a neighbour.
        let mut chunks: std::collections::HashMap<_, _> = self
            .store
            .chunks(&ids)?
            .into_iter()
            .map(|c| (c.id, c))
            .collect();
        Ok(hits
            .iter()
            .filter_map(|h| {
                chunks.remove(&h.chunk_id).map(|c| Retrieved {
                    chunk: c,
                    retriever: "bm25",
                    rank: h.rank,
                    score: h.score,
                })
            })
            .collect())
    }

    pub fn query_terms(&self, query: &str) -> Result<Vec<QueryTerm>> {
        self.bm25.query_terms(query)
    }
}

/// A window of about `width` characters of `text` around the densest run of
/// query-term matches, with white space folded and matches marked.
pub fn snippet(text: &str, query: &str, width: usize) -> Snippet {
    let text = fold_ws(&text.replace(crate::chunk::PAGE_BREAK, " "));
    let want: HashSet<String> = crate::text::terms(query).into_iter().collect();
    let matches: Vec<(usize, usize)> = term_spans(&text)
        .into_iter()
        .filter(|(t, _)| want.contains(t))
        .map(|(_, r)| (r.start, r.end))
        .collect();
    // Choose the start (a match position) whose window holds the most matches.
    let mut best = (0usize, 0usize);
    for (i, &(s, _)) in matches.iter().enumerate() {
        let n = matches[i..].iter().take_while(|m| m.1 <= s + width).count();
        if n > best.1 {
            best = (s, n);
        }
    }
    let mut start = best.0.saturating_sub(width / 5);
    while !text.is_char_boundary(start) {
        start -= 1;
    }
    // Begin at a word boundary.
    if start > 0
        && let Some(sp) = text[start..].find(' ')
        && sp < 20
    {
        start += sp + 1;
    }
    let mut end = (start + width).min(text.len());
    while !text.is_char_boundary(end) {
        end += 1;
    }
    if end < text.len()
        && let Some(sp) = text[start..end].rfind(' ')
    {
        end = start + sp;
    }
    let mut out = String::new();
    let lead = if start > 0 { "… " } else { "" };
    out.push_str(lead);
    out.push_str(&text[start..end]);
    if end < text.len() {
        out.push_str(" …");
    }
    let highlights = matches
        .into_iter()
        .filter(|&(s, e)| s >= start && e <= end)
        .map(|(s, e)| (s - start + lead.len(), e - start + lead.len()))
        .collect();
    Snippet {
        text: out,
        highlights,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn snippet_marks_matches_in_the_densest_window() {
        let text = format!(
            "{} The budget for the Pier 3 works has increased by $2.3M. {}",
            "filler words here. ".repeat(30),
            "more filler. ".repeat(30)
        );
        let s = snippet(&text, "pier budget", 120);
        assert!(
            s.text.contains("The budget for the Pier 3 works"),
            "{}",
            s.text
        );
        let marked: Vec<&str> = s.highlights.iter().map(|&(a, b)| &s.text[a..b]).collect();
        assert_eq!(marked, vec!["budget", "Pier"]);
        assert!(s.text.starts_with("… ") && s.text.ends_with(" …"));
    }
}
