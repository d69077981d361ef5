//! Page-aware chunking: sentences are packed into chunks bounded in word
//! tokens, with an overlap of whole sentences between neighbours. Every chunk
//! records exactly where it lies: (first page, char offset) to (last page,
//! char offset), and its text is the page text between those points, with a
//! form feed standing for each page break it crosses.
//!
//! invariant: a chunk's text is always rebuildable from the page texts and its
//! span (`chunk_text_from_pages`); nothing here edits or cleans text.

use crate::segment::{sentence_spans, word_spans};
use crate::text::byte_to_char;
use crate::types::ChunkSpan;
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// Chunk size and overlap, in word tokens (UAX #29 words with a letter or digit).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChunkConfig {
    pub max_tokens: usize,
    pub overlap_tokens: usize,
}

impl Default for ChunkConfig {
    fn default() -> Self {
        ChunkConfig {
            max_tokens: 160,
            overlap_tokens: 32,
        }
    }
}

/// The separator that stands for a page break inside a chunk's text.
pub const PAGE_BREAK: char = '\u{c}';

/// One chunk of a document. Pages are 1-based; offsets are characters.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Chunk {
    pub seq: u32,
    pub span: ChunkSpan,
    pub text: String,
    pub tokens: usize,
}

#[derive(Debug, Clone)]
struct Unit {
    page: usize,
    bytes: Range<usize>,
    tokens: usize,
}

fn units(pages: &[String], max_tokens: usize) -> Vec<Unit> {
    let mut out = Vec::new();
    for (p, text) in pages.iter().enumerate() {
        for s in sentence_spans(text) {
            let words: Vec<Range<usize>> = word_spans(&text[s.clone()])
                .into_iter()
                .map(|w| w.start + s.start..w.end + s.start)
                .collect();
            if words.len() <= max_tokens {
                out.push(Unit {
                    page: p,
                    bytes: s,
                    tokens: words.len(),
                });
                continue;
            }
            // An over-long sentence (a table, a run-on OCR line) is cut at word
            // boundaries; the first piece starts at the sentence start and the
            // last one ends at the sentence end so no text falls between units.
            let pieces: Vec<&[Range<usize>]> = words.chunks(max_tokens).collect();
            let n = pieces.len();
            for (i, piece) in pieces.into_iter().enumerate() {
                let start = if i == 0 { s.start } else { piece[0].start };
                let end = if i + 1 == n {
                    s.end
                } else {
                    piece[piece.len() - 1].end
                };
                out.push(Unit {
                    page: p,
                    bytes: start..end,
                    tokens: piece.len(),
                });
            }
        }
    }
    out
}

/// Cut a document's pages into chunks.
pub fn chunk_pages(pages: &[String], cfg: ChunkConfig) -> Vec<Chunk> {
    let max = cfg.max_tokens.max(1);
    let overlap = cfg.overlap_tokens.min(max.saturating_sub(1));
    let units = units(pages, max);
    let mut chunks = Vec::new();
    let mut i = 0;
    while i < units.len() {
        let mut j = i;
        let mut total = 0;
        while j < units.len() && (j == i || total + units[j].tokens <= max) {
            total += units[j].tokens;
            j += 1;
        }
        let first = &units[i];
        let last = &units[j - 1];
        let sp = first.page;
        let ep = last.page;
        chunks.push(Chunk {
            seq: chunks.len() as u32,
            span: ChunkSpan {
                start_page: sp as u32 + 1,
                start_char: byte_to_char(&pages[sp], first.bytes.start),
                end_page: ep as u32 + 1,
                end_char: byte_to_char(&pages[ep], last.bytes.end),
            },
            text: slice_pages(pages, sp, first.bytes.start, ep, last.bytes.end),
            tokens: total,
        });
        if j == units.len() {
            break;
        }
        // Step back over whole trailing units that fit in the overlap budget,
        // always moving forward by at least one unit.
        let mut back = j;
        let mut carried = 0;
        while back > i + 1 && carried + units[back - 1].tokens <= overlap {
            carried += units[back - 1].tokens;
            back -= 1;
        }
        i = back;
    }
    chunks
}

/// Text between (page `sp`, byte `sb`) and (page `ep`, byte `eb`), 0-based
/// pages, with a form feed for each page break.
fn slice_pages(pages: &[String], sp: usize, sb: usize, ep: usize, eb: usize) -> String {
    if sp == ep {
        return pages[sp][sb..eb].to_string();
    }
    let mut s = String::from(&pages[sp][sb..]);
    for page in &pages[sp + 1..ep] {
        s.push(PAGE_BREAK);
        s.push_str(page);
    }
    s.push(PAGE_BREAK);
    s.push_str(&pages[ep][..eb]);
    s
}

/// Rebuild a chunk's text from page texts and its span. Returns `None` when the span does not exist in these pages.
pub fn chunk_text_from_pages(pages: &[String], span: &ChunkSpan) -> Option<String> {
    let (start_char, end_char) = (span.start_char, span.end_char);
    let sp = (span.start_page as usize).checked_sub(1)?;
    let ep = (span.end_page as usize).checked_sub(1)?;
    if sp > ep || ep >= pages.len() {
        return None;
    }
    let sb = char_byte_checked(&pages[sp], start_char)?;
    let eb = char_byte_checked(&pages[ep], end_char)?;
    if sp == ep && sb > eb {
        return None;
    }
    Some(slice_pages(pages, sp, sb, ep, eb))
}

fn char_byte_checked(s: &str, ch: usize) -> Option<usize> {
    if ch == s.chars().count() {
        return Some(s.len());
    }
    s.char_indices().nth(ch).map(|(b, _)| b)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn pages(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    #[test]
    fn a_chunk_can_span_a_page_break_and_records_both_pages() {
        let p = pages(&[
            "Alpha beta gamma delta. Epsilon zeta.",
            "Eta theta iota. Kappa lambda.",
        ]);
        let cs = chunk_pages(
            &p,
            ChunkConfig {
                max_tokens: 5,
                overlap_tokens: 0,
            },
        );
        let spanning = cs
            .iter()
            .find(|c| c.span.start_page != c.span.end_page)
            .unwrap();
        assert_eq!(spanning.text, "Epsilon zeta.\u{c}Eta theta iota.");
        assert_eq!((spanning.span.start_char, spanning.span.end_char), (24, 15));
        assert_eq!((spanning.span.start_page, spanning.span.end_page), (1, 2));
    }

    #[test]
    fn overlap_repeats_trailing_sentences() {
        let p = pages(&["One two three. Four five six. Seven eight nine. Ten eleven twelve."]);
        let cs = chunk_pages(
            &p,
            ChunkConfig {
                max_tokens: 6,
                overlap_tokens: 3,
            },
        );
        let texts: Vec<&str> = cs.iter().map(|c| c.text.as_str()).collect();
        assert_eq!(
            texts,
            vec![
                "One two three. Four five six.",
                "Four five six. Seven eight nine.",
                "Seven eight nine. Ten eleven twelve."
            ]
        );
    }

    #[test]
    fn long_sentences_are_cut_at_words() {
        let long = (0..25)
            .map(|i| format!("w{i}"))
            .collect::<Vec<_>>()
            .join(" ");
        let p = pages(&[&long]);
        let cs = chunk_pages(
            &p,
            ChunkConfig {
                max_tokens: 10,
                overlap_tokens: 0,
            },
        );
        assert_eq!(cs.len(), 3);
        assert!(cs.iter().all(|c| c.tokens <= 10));
    }

    proptest! {
        /// Property: every chunk's text equals the page-text slice its span points to,
        /// and every word of every page lies in some chunk.
        #[test]
        fn chunk_text_is_exactly_the_page_slice(
            raw in proptest::collection::vec("[a-zA-Zéü0-9$.,;:() \n\u{c}-]{0,300}", 1..5),
            max in 1usize..40,
            overlap in 0usize..20,
        ) {
            let pages: Vec<String> = raw;
            let cs = chunk_pages(&pages, ChunkConfig { max_tokens: max, overlap_tokens: overlap });
            for c in &cs {
                let rebuilt = chunk_text_from_pages(&pages, &c.span);
                prop_assert_eq!(rebuilt.as_deref(), Some(c.text.as_str()));
            }
            let total_words: usize = pages.iter().map(|p| word_spans(p).len()).sum();
            let mut covered = 0;
            for (pi, p) in pages.iter().enumerate() {
                for w in word_spans(p) {
                    let wc = byte_to_char(p, w.start);
                    let page = pi as u32 + 1;
                    if cs.iter().any(|c| {
                        (c.span.start_page, c.span.start_char) <= (page, wc)
                            && (page, wc) < (c.span.end_page, c.span.end_char)
                    }) {
                        covered += 1;
                    }
                }
            }
            prop_assert_eq!(covered, total_words);
        }
    }
}
