//! OCR-tolerant quote location.
//!
//! Both the quote and the page are reduced to a *skeleton*: letters and
//! digits only (white space, punctuation and hyphens dropped, so missing
//! spaces and broken hyphenation cost nothing), lower-cased, accents and
//! ligatures folded, and the classic OCR confusions folded to one class:
//! `l`/`1`/`I`/`i`/`|`, `O`/`0`, `rn`/`m`, `cl`/`d`, `vv`/`w`. An exact
//! skeleton match is tried first; otherwise a semi-global alignment (the
//! quote aligned end to end, free to start and end anywhere in the page)
//! runs in the few windows that a q-gram filter proposes, with a lower cost
//! for other look-alike letters.
//!
//! invariant: every match is a byte range of the haystack itself, on char
//! boundaries; the page's own text is what gets emitted.

use std::collections::HashMap;
use std::ops::Range;

/// A located quote: where it is in the haystack and how close it is.
#[derive(Debug, Clone, PartialEq)]
pub struct Match {
    /// Byte range in the haystack.
    pub bytes: Range<usize>,
    /// 1 for a skeleton-exact match; 1 − (edit cost / quote length) otherwise.
    pub similarity: f32,
}

/// Tuning for approximate location.
#[derive(Debug, Clone, Copy)]
pub struct AlignConfig {
    /// Lowest similarity accepted for an approximate match.
    pub min_similarity: f32,
    /// Quotes with fewer skeleton characters than this must match exactly.
    pub min_fuzzy_len: usize,
}

impl Default for AlignConfig {
    fn default() -> Self {
        // 0.82 admits roughly one damaged character in six, which covers
        // heavy photocopy OCR while two different sentences of a record
        // stay far apart (tuned on the OCR property tests and the demo).
        AlignConfig {
            min_similarity: 0.82,
            min_fuzzy_len: 16,
        }
    }
}

/// The skeleton of a text, with each skeleton char's source byte range.
#[derive(Debug, Clone)]
pub struct Skeleton {
    pub chars: Vec<char>,
    pub src: Vec<(usize, usize)>,
}

fn fold_char(c: char) -> Option<char> {
    let c = match c {
        '|' => return Some('l'),
        _ if !c.is_alphanumeric() => return None,
        _ => c,
    };
    let lower = c.to_lowercase().next().unwrap_or(c);
    Some(match lower {
        '1' | 'i' | 'l' | 'ı' | 'í' | 'ì' | 'î' | 'ï' => 'l',
        '0' | 'o' | 'ò' | 'ó' | 'ô' | 'õ' | 'ö' | 'ø' => 'o',
        'à' | 'á' | 'â' | 'ã' | 'ä' | 'å' => 'a',
        'ç' => 'c',
        'è' | 'é' | 'ê' | 'ë' => 'e',
        'ñ' => 'n',
        'ù' | 'ú' | 'û' | 'ü' => 'u',
        'ý' | 'ÿ' => 'y',
        other => other,
    })
}

/// Reduce `s` to its skeleton. One pass, with an ASCII fast path: this runs
/// over whole chunks and pages.
pub fn skeleton(s: &str) -> Skeleton {
    let mut chars: Vec<char> = Vec::with_capacity(s.len());
    let mut src: Vec<(usize, usize)> = Vec::with_capacity(s.len());
    // Push one folded char, merging rn→m, cl→d, vv→w with the previous one
    // when the two letters touch in the source.
    let push =
        |c: char, range: (usize, usize), chars: &mut Vec<char>, src: &mut Vec<(usize, usize)>| {
            if let (Some(&prev), Some(&pr)) = (chars.last(), src.last())
                && pr.1 == range.0
            {
                let merged = match (prev, c) {
                    ('r', 'n') => Some('m'),
                    ('c', 'l') => Some('d'),
                    ('v', 'v') => Some('w'),
                    _ => None,
                };
                if let Some(m) = merged {
                    // A merged letter never merges again ("rnn" is "mn").
                    *chars.last_mut().unwrap() = m;
                    src.last_mut().unwrap().1 = range.1;
                    return;
                }
            }
            chars.push(c);
            src.push(range);
        };
    for (b, c) in s.char_indices() {
        if c.is_ascii() {
            let f = match c {
                'a'..='z' => c,
                'A'..='Z' => c.to_ascii_lowercase(),
                '0'..='9' => c,
                '|' => 'l',
                _ => continue,
            };
            let f = match f {
                '1' | 'i' | 'l' => 'l',
                '0' | 'o' => 'o',
                f => f,
            };
            push(f, (b, b + 1), &mut chars, &mut src);
            continue;
        }
        let range = (b, b + c.len_utf8());
        let expanded: &[char] = match c {
            '\u{FB00}' => &['f', 'f'],
            '\u{FB01}' | '\u{FB02}' => &['f', 'l'],
            '\u{FB03}' | '\u{FB04}' => &['f', 'f', 'l'],
            'æ' | 'Æ' => &['a', 'e'],
            'œ' | 'Œ' => &['o', 'e'],
            'ß' => &['s', 's'],
            _ => {
                if let Some(f) = fold_char(c) {
                    push(f, range, &mut chars, &mut src);
                }
                continue;
            }
        };
        // Letters of one ligature share its source range and never merge.
        for &e in expanded {
            chars.push(e);
            src.push(range);
        }
    }
    Skeleton { chars, src }
}

/// Pairs that OCR confuses beyond the folded classes; substituting one for
/// the other costs half an edit.
fn look_alike(a: char, b: char) -> bool {
    const PAIRS: &[(char, char)] = &[
        ('e', 'c'),
        ('e', 'o'),
        ('c', 'o'),
        ('h', 'b'),
        ('n', 'u'),
        ('n', 'h'),
        ('a', 'o'),
        ('s', '5'),
        ('g', '9'),
        ('b', '6'),
        ('b', '8'),
        ('z', '2'),
        ('t', 'f'),
        ('u', 'v'),
        ('m', 'n'),
    ];
    PAIRS
        .iter()
        .any(|&(x, y)| (a == x && b == y) || (a == y && b == x))
}

fn sub_cost(a: char, b: char) -> f32 {
    if a == b {
        0.0
    } else if look_alike(a, b) {
        0.5
    } else {
        1.0
    }
}

/// Find `quote` in `hay`. Exact skeleton matches win; otherwise the best
/// approximate match at or above `cfg.min_similarity`.
pub fn find(quote: &str, hay: &str, cfg: &AlignConfig) -> Option<Match> {
    let q = skeleton(quote);
    if q.chars.is_empty() {
        return None;
    }
    let h = skeleton(hay);
    find_in(&q, &h, hay, cfg)
}

/// [`find`] with both skeletons already built (the haystack's can be reused
/// across quotes).
pub fn find_in(q: &Skeleton, h: &Skeleton, hay: &str, cfg: &AlignConfig) -> Option<Match> {
    let m = q.chars.len();
    if m == 0 || h.chars.is_empty() {
        return None;
    }
    if let Some(at) = find_exact(&q.chars, &h.chars) {
        return Some(Match {
            bytes: widen(hay, h.src[at].0..h.src[at + m - 1].1),
            similarity: 1.0,
        });
    }
    if m < cfg.min_fuzzy_len {
        return None;
    }
    let max_cost = (1.0 - cfg.min_similarity) * m as f32;
    let k = max_cost.ceil() as usize;
    let mut best: Option<(f32, usize, usize)> = None;
    for start in candidates(&q.chars, &h.chars, k) {
        let lo = start.saturating_sub(k + 8);
        let hi = (start + m + k + 8).min(h.chars.len());
        if lo >= hi {
            continue;
        }
        if let Some((cost, s, e)) = semi_global(&q.chars, &h.chars[lo..hi])
            && cost <= max_cost
            && best.is_none_or(|b| cost < b.0)
        {
            best = Some((cost, lo + s, lo + e));
        }
    }
    let (cost, s, e) = best?;
    if e <= s {
        return None;
    }
    Some(Match {
        bytes: widen(hay, h.src[s].0..h.src[e - 1].1),
        similarity: 1.0 - cost / m as f32,
    })
}

fn find_exact(q: &[char], h: &[char]) -> Option<usize> {
    let first = q[0];
    let m = q.len();
    if m > h.len() {
        return None;
    }
    (0..=h.len() - m).find(|&i| h[i] == first && h[i..i + m] == *q)
}

/// Widen a byte range to whole words: a match that starts or ends inside a
/// word (OCR ran two words together, or an edit fell on the edge) is
/// extended to the word's edge, at most 12 bytes each way.
fn widen(hay: &str, r: Range<usize>) -> Range<usize> {
    let mut start = r.start;
    let mut steps = 0;
    while start > 0 && steps < 12 {
        let prev = hay[..start].chars().next_back().unwrap();
        if !prev.is_alphanumeric() {
            break;
        }
        start -= prev.len_utf8();
        steps += prev.len_utf8();
    }
    if steps >= 12
        && hay[..start]
            .chars()
            .next_back()
            .is_some_and(char::is_alphanumeric)
    {
        start = r.start;
    }
    let mut end = r.end;
    steps = 0;
    while end < hay.len() && steps < 12 {
        let next = hay[end..].chars().next().unwrap();
        if !next.is_alphanumeric() {
            break;
        }
        end += next.len_utf8();
        steps += next.len_utf8();
    }
    if steps >= 12 && hay[end..].chars().next().is_some_and(char::is_alphanumeric) {
        end = r.end;
    }
    start..end
}

const Q: usize = 3;

fn gram(c: &[char]) -> u64 {
    c.iter().fold(0u64, |acc, &ch| (acc << 21) | ch as u64)
}

/// Start positions in `h` where the quote may sit with at most `k` edits,
/// by the q-gram lemma: such an occurrence shares at least
/// `m − q + 1 − k·q` q-grams with the quote, on nearby diagonals.
fn candidates(q: &[char], h: &[char], k: usize) -> Vec<usize> {
    let m = q.len();
    if m < Q || h.len() < Q {
        return Vec::new();
    }
    let mut grams: HashMap<u64, Vec<usize>> = HashMap::with_capacity(m);
    for i in 0..=m - Q {
        grams.entry(gram(&q[i..i + Q])).or_default().push(i);
    }
    const BIN: usize = 8;
    let offset = m + k;
    let mut votes = vec![0u16; (h.len() + offset) / BIN + 2];
    let mut key = gram(&h[..Q - 1]);
    let mask = (1u64 << (21 * Q)) - 1;
    for p in 0..=h.len() - Q {
        key = ((key << 21) | h[p + Q - 1] as u64) & mask;
        if let Some(is) = grams.get(&key) {
            for &i in is {
                let diag = p + offset - i;
                let bin = diag / BIN;
                votes[bin] = votes[bin].saturating_add(1);
            }
        }
    }
    let need = ((m - Q + 1) as isize - (k * Q) as isize).max(2) as u32;
    let mut scored: Vec<(u32, usize)> = (0..votes.len())
        .filter_map(|b| {
            let s = votes[b] as u32
                + b.checked_sub(1).map_or(0, |x| votes[x] as u32)
                + votes.get(b + 1).map_or(0, |&x| x as u32);
            (s >= need && votes[b] > 0).then_some((s, b))
        })
        .collect();
    scored.sort_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(&b.1)));
    let mut picked: Vec<usize> = Vec::new();
    for (_, b) in scored {
        if picked.iter().any(|&p| p.abs_diff(b) <= 2) {
            continue;
        }
        picked.push(b);
        if picked.len() == 4 {
            break;
        }
    }
    picked
        .into_iter()
        .map(|b| (b * BIN).saturating_sub(offset))
        .collect()
}

/// Semi-global alignment: the whole quote against any substring of `h`.
/// Returns (cost, start, end) in `h` chars.
fn semi_global(q: &[char], h: &[char]) -> Option<(f32, usize, usize)> {
    let n = h.len();
    // prev[j] / cur[j]: (cost, start) for q[..i] aligned ending at h[..j].
    let mut prev: Vec<(f32, usize)> = (0..=n).map(|j| (0.0, j)).collect();
    let mut cur: Vec<(f32, usize)> = vec![(0.0, 0); n + 1];
    for &qc in q {
        cur[0] = (prev[0].0 + 1.0, 0);
        for j in 1..=n {
            let diag = (prev[j - 1].0 + sub_cost(qc, h[j - 1]), prev[j - 1].1);
            let up = (prev[j].0 + 1.0, prev[j].1);
            let left = (cur[j - 1].0 + 1.0, cur[j - 1].1);
            let mut best = diag;
            if up.0 < best.0 {
                best = up;
            }
            if left.0 < best.0 {
                best = left;
            }
            cur[j] = best;
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    let (end, &(cost, start)) = prev
        .iter()
        .enumerate()
        .skip(1)
        .min_by(|a, b| a.1.0.partial_cmp(&b.1.0).unwrap().then(a.0.cmp(&b.0)))?;
    // Trim the edges: an alignment that starts or ends with extra page
    // characters would have paid for them, so start..end is tight.
    Some((cost, start, end))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn located<'a>(quote: &str, hay: &'a str) -> Option<(&'a str, f32)> {
        find(quote, hay, &AlignConfig::default()).map(|m| (&hay[m.bytes], m.similarity))
    }

    #[test]
    fn ocr_confusions_fold_to_the_same_skeleton() {
        let pairs = [
            ("modern", "rnodern"),
            ("dredging", "clredging"),
            ("will", "wi11"),
            ("2022", "2O22"),
            ("Item", "ltem"),
            ("flood", "\u{FB02}ood"),
            ("contract", "con-\ntract"),
            ("of the", "ofthe"),
            ("wharf", "vvharf"),
        ];
        for (a, b) in pairs {
            assert_eq!(skeleton(a).chars, skeleton(b).chars, "{a} / {b}");
        }
        assert_ne!(skeleton("approved").chars, skeleton("proposed").chars);
    }

    #[test]
    fn clean_quote_found_in_damaged_page() {
        let page = "Notes:\n1. Quantities in BP-1 and BP-2 inc1ude the additiona1 0.5 rn over-dredge\n   requested by the Ministry for the new rarnp toe.\n";
        let (text, sim) = located(
            "the additional 0.5 m over-dredge requested by the Ministry for the new ramp toe",
            page,
        )
        .unwrap();
        assert!(text.starts_with("the additiona1 0.5 rn"));
        assert!(text.ends_with("rarnp toe"));
        assert_eq!(sim, 1.0);
    }

    #[test]
    fn residual_noise_is_aligned_with_a_score() {
        let page = "The inspector noted severe corrosion at the hinge pins of Ramp 3A.";
        // Two noisy characters (e→c is a look-alike; x is not).
        let damaged = page.replace("severe", "sevcre").replace("hinge", "hxnge");
        let (text, sim) = located("noted severe corrosion at the hinge pins", &damaged).unwrap();
        assert!(text.starts_with("noted sevcre"), "{text}");
        assert!(sim < 1.0 && sim > 0.9, "{sim}");
        assert!(located("the pier was demolished in the spring of 2021", page).is_none());
    }

    #[test]
    fn short_quotes_must_be_exact() {
        assert!(located("Ramp 3B", "the Ramp 3A hinge").is_none());
        assert!(located("Ramp 3A", "the Ramp 3A hinge").is_some());
    }
}
