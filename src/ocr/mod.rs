//! OCR for PDF pages whose text layer is missing or unusable: deciding which
//! pages need it ([`assess`]), rendering them with poppler's `pdftoppm` and
//! reading them with tesseract ([`engine`]), and carrying each word's box and
//! confidence so a citation from shaky OCR can say so ([`span_confidence`]).
//!
//! invariant: OCR never runs on a page whose text layer is usable unless the
//! user asks for it (`--ocr always`).
//! invariant: a page's OCR text is exactly the words tesseract read, joined
//! by single spaces and line breaks; every word's `start` is its character
//! offset in that text, so a quote's character range maps to its words.
//! invariant: OCR results are cached by what the page draws (its
//! [`PageDrawing`](crate::extract::pdf::PageDrawing) key) and the engine
//! settings; a page already read is never read again.

pub mod engine;
pub mod image;

use serde::{Deserialize, Serialize};

/// Below this character-weighted mean word confidence (0-100) a quoted span
/// is flagged for checking against the page image. Tesseract's word
/// confidences on clean 300 dpi print sit around 90-96; 80 is where
/// misreadings become common (common practice).
pub const LOW_CONFIDENCE: f32 = 80.0;

/// A single word (with a letter or digit) below this confidence flags its
/// span too, however good the rest is: one misread figure changes a story
/// (common practice).
pub const LOW_WORD_CONFIDENCE: f32 = 50.0;

/// When to OCR a PDF page.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum OcrMode {
    /// Pages with no text layer, too little text for a page carrying an
    /// image, or a layer that is mostly not words.
    #[default]
    Auto,
    /// Every PDF page; the OCR text replaces the text layer.
    Always,
    /// No OCR; pages without a text layer stay empty.
    Never,
}

impl OcrMode {
    pub fn name(self) -> &'static str {
        match self {
            OcrMode::Auto => "auto",
            OcrMode::Always => "always",
            OcrMode::Never => "never",
        }
    }
}

/// One word as tesseract read it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OcrWord {
    pub text: String,
    /// Character offset (Unicode scalar values) of the word in the page text.
    pub start: usize,
    /// Bounding box in pixels of the rendered page (see [`OcrPage::dpi`]).
    pub left: u32,
    pub top: u32,
    pub width: u32,
    pub height: u32,
    /// Tesseract's confidence, 0-100.
    pub conf: f32,
}

/// A page read by OCR.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OcrPage {
    pub text: String,
    pub words: Vec<OcrWord>,
    /// Character-weighted mean word confidence, 0-100 (`None` with no words).
    pub confidence: Option<f32>,
    /// Resolution the page was rendered at.
    pub dpi: u32,
}

/// What the store keeps for a page whose text came from OCR.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PageOcr {
    /// 1-based.
    pub page: u32,
    pub cache_key: String,
    pub reason: OcrReason,
    pub confidence: Option<f32>,
    pub words: Vec<OcrWord>,
}

/// Parses tesseract's TSV output (columns level, page_num, block_num,
/// par_num, line_num, word_num, left, top, width, height, conf, text) into
/// page text: words of a line joined by a space, lines by a line break,
/// blocks and paragraphs by a blank line.
pub fn parse_tsv(tsv: &str, dpi: u32) -> Result<OcrPage, String> {
    let mut text = String::new();
    let mut chars = 0usize;
    let mut words = Vec::new();
    let mut last: Option<(u32, u32, u32)> = None;
    let mut last_para: Option<(u32, u32)> = None;
    for (n, line) in tsv.lines().enumerate() {
        if n == 0 && line.starts_with("level") {
            continue;
        }
        if line.trim().is_empty() {
            continue;
        }
        let cols: Vec<&str> = line.splitn(12, '\t').collect();
        if cols.len() < 12 {
            return Err(format!(
                "OCR output line {} has {} columns, not 12",
                n + 1,
                cols.len()
            ));
        }
        if cols[0] != "5" {
            continue;
        }
        let word = cols[11].trim();
        if word.is_empty() {
            continue;
        }
        let num = |i: usize| {
            cols[i]
                .trim()
                .parse::<f64>()
                .map_err(|_| format!("OCR output line {}: `{}` is not a number", n + 1, cols[i]))
        };
        let (block, par, ln) = (num(2)? as u32, num(3)? as u32, num(4)? as u32);
        if let Some(prev) = last {
            let sep = if last_para != Some((block, par)) {
                "\n\n"
            } else if prev != (block, par, ln) {
                "\n"
            } else {
                " "
            };
            text.push_str(sep);
            chars += sep.chars().count();
        }
        last = Some((block, par, ln));
        last_para = Some((block, par));
        words.push(OcrWord {
            text: word.to_string(),
            start: chars,
            left: num(6)?.max(0.0) as u32,
            top: num(7)?.max(0.0) as u32,
            width: num(8)?.max(0.0) as u32,
            height: num(9)?.max(0.0) as u32,
            conf: num(10)?.clamp(0.0, 100.0) as f32,
        });
        text.push_str(word);
        chars += word.chars().count();
    }
    let confidence = weighted_mean(words.iter());
    Ok(OcrPage {
        text,
        words,
        confidence,
        dpi,
    })
}

fn weighted_mean<'a>(words: impl Iterator<Item = &'a OcrWord>) -> Option<f32> {
    let (mut sum, mut n) = (0f64, 0usize);
    for w in words {
        let len = w.text.chars().count();
        sum += f64::from(w.conf) * len as f64;
        n += len;
    }
    (n > 0).then(|| (sum / n as f64) as f32)
}

/// OCR confidence of a quoted span.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpanConfidence {
    /// Character-weighted mean confidence of the words the span touches, 0-100.
    pub confidence: f32,
    /// The least certain of those words and its confidence.
    pub weakest_word: String,
    pub weakest_conf: f32,
    /// Below [`LOW_CONFIDENCE`], or a word below [`LOW_WORD_CONFIDENCE`].
    pub low: bool,
}

impl SpanConfidence {
    /// The warning a reporter sees beside the quote, when the span is low.
    pub fn warning(&self) -> Option<String> {
        if !self.low {
            return None;
        }
        let mut s = format!("OCR confidence {:.0}% on this span", self.confidence);
        if self.weakest_conf < LOW_WORD_CONFIDENCE {
            s.push_str(&format!(
                " (\u{201C}{}\u{201D} {:.0}%)",
                self.weakest_word, self.weakest_conf
            ));
        }
        s.push_str(" \u{2014} check the page image before quoting");
        Some(s)
    }
}

/// The words overlapping characters `start..end` of a page read by OCR.
pub fn span_words(words: &[OcrWord], start: usize, end: usize) -> impl Iterator<Item = &OcrWord> {
    words
        .iter()
        .filter(move |w| w.start < end && w.start + w.text.chars().count() > start)
}

/// Confidence of a quoted span from the words it touches; `None` when it
/// touches none.
pub fn confidence_of<'a>(words: impl IntoIterator<Item = &'a OcrWord>) -> Option<SpanConfidence> {
    let hit: Vec<&OcrWord> = words.into_iter().collect();
    let confidence = weighted_mean(hit.iter().copied())?;
    // The weakest word with a letter or digit: a lone speck read as a
    // full stop is no reason to doubt the words around it.
    let weakest = hit
        .iter()
        .filter(|w| w.text.chars().any(char::is_alphanumeric))
        .min_by(|a, b| a.conf.total_cmp(&b.conf))
        .or_else(|| hit.iter().min_by(|a, b| a.conf.total_cmp(&b.conf)))
        .expect("at least one word");
    Some(SpanConfidence {
        confidence,
        weakest_word: weakest.text.clone(),
        weakest_conf: weakest.conf,
        low: confidence < LOW_CONFIDENCE || weakest.conf < LOW_WORD_CONFIDENCE,
    })
}

/// Confidence of the words overlapping characters `start..end` of a page
/// read by OCR; `None` when no word overlaps.
pub fn span_confidence(words: &[OcrWord], start: usize, end: usize) -> Option<SpanConfidence> {
    confidence_of(span_words(words, start, end))
}

/// Why a page is read by OCR.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum OcrReason {
    /// Fewer than [`MIN_LAYER_CHARS`] characters in the text layer.
    NoText,
    /// The page draws an image but its layer holds under [`IMAGE_PAGE_CHARS`]
    /// characters (a scan with a stamped number, say).
    LittleText { chars: usize },
    /// Under [`MIN_WORD_SHARE`] of the layer's tokens look like words.
    NotWords { share: f32 },
    /// `--ocr always`.
    Asked,
}

impl std::fmt::Display for OcrReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            OcrReason::NoText => f.write_str("no text layer"),
            OcrReason::LittleText { chars } => write!(
                f,
                "{chars} characters of text layer on a page that carries an image"
            ),
            OcrReason::NotWords { share } => write!(
                f,
                "text layer mostly not words ({:.0}% word-like)",
                share * 100.0
            ),
            OcrReason::Asked => f.write_str("--ocr always"),
        }
    }
}

/// A page with fewer non-space characters than this has no usable layer.
pub const MIN_LAYER_CHARS: usize = 20;
/// A page that draws an image with fewer characters than this is treated as
/// a scan: a page of print carries about 2,000-4,000 (common practice).
pub const IMAGE_PAGE_CHARS: usize = 200;
/// A layer with at least [`MIN_TOKENS`] tokens, fewer than this share of
/// which look like words or numbers, is unusable.
pub const MIN_WORD_SHARE: f32 = 0.5;
pub const MIN_TOKENS: usize = 10;

/// Measurements of a page's text layer.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct LayerStats {
    /// Non-white-space characters.
    pub chars: usize,
    /// White-space separated tokens, and how many look like words or numbers.
    pub tokens: usize,
    pub word_like: usize,
}

impl LayerStats {
    pub fn of(text: &str) -> LayerStats {
        let mut s = LayerStats {
            chars: text.chars().filter(|c| !c.is_whitespace()).count(),
            tokens: 0,
            word_like: 0,
        };
        for tok in text.split_whitespace() {
            s.tokens += 1;
            if is_word_like(tok) {
                s.word_like += 1;
            }
        }
        s
    }

    pub fn word_share(&self) -> f32 {
        if self.tokens == 0 {
            0.0
        } else {
            self.word_like as f32 / self.tokens as f32
        }
    }
}

/// A token is word-like when, stripped of surrounding punctuation, it is a
/// run of letters (inner hyphens and apostrophes allowed) with a vowel or
/// of one or two letters, or a number (digits with separators).
pub fn is_word_like(tok: &str) -> bool {
    let t = tok.trim_matches(|c: char| !c.is_alphanumeric());
    if t.is_empty() {
        // Pure punctuation (a dash, a bullet) is neither help nor harm.
        return tok.chars().all(|c| "-–—•·*§".contains(c));
    }
    if t.chars().any(|c| c.is_ascii_digit()) {
        return t
            .chars()
            .all(|c| c.is_ascii_digit() || ",.:/-%$".contains(c));
    }
    let letters_ok = t
        .chars()
        .all(|c| c.is_alphabetic() || c == '-' || c == '\'' || c == '\u{2019}');
    let n = t.chars().filter(|c| c.is_alphabetic()).count();
    letters_ok
        && (n <= 2
            || t.chars()
                .any(|c| "aeiouyàâäéèêëîïôöùûüÿœæAEIOUYÀÂÄÉÈÊËÎÏÔÖÙÛÜŸŒÆ".contains(c)))
}

/// Whether (and why) a page needs OCR, from its text layer and whether it
/// draws an image.
pub fn assess(text: &str, has_image: bool, mode: OcrMode) -> (LayerStats, Option<OcrReason>) {
    let stats = LayerStats::of(text);
    let reason = match mode {
        OcrMode::Never => None,
        OcrMode::Always => Some(OcrReason::Asked),
        OcrMode::Auto if stats.chars < MIN_LAYER_CHARS => Some(OcrReason::NoText),
        OcrMode::Auto if has_image && stats.chars < IMAGE_PAGE_CHARS => {
            Some(OcrReason::LittleText { chars: stats.chars })
        }
        OcrMode::Auto if stats.tokens >= MIN_TOKENS && stats.word_share() < MIN_WORD_SHARE => {
            Some(OcrReason::NotWords {
                share: stats.word_share(),
            })
        }
        OcrMode::Auto => None,
    };
    (stats, reason)
}

/// Whether a page's OCR reading replaces its text layer: always when asked
/// (`--ocr always`), else when the reading has more word-like tokens than
/// the layer (a cover page with a logo and a good layer keeps its layer).
pub fn prefer_ocr(layer: &str, reason: &OcrReason, ocr_text: &str) -> bool {
    if ocr_text.trim().is_empty() {
        return false;
    }
    *reason == OcrReason::Asked
        || LayerStats::of(ocr_text).word_like > LayerStats::of(layer).word_like
}

/// Reads by OCR, in place, the pages of a PDF that need it (no cache), as
/// ingest does: for checking a page against its original file. Returns how
/// many pages were replaced.
pub fn read_in_place(
    pdf: &std::path::Path,
    pages: &mut [String],
    drawings: &[crate::extract::pdf::PageDrawing],
    mode: OcrMode,
    settings: &engine::OcrSettings,
) -> Result<usize, engine::OcrError> {
    let mut jobs = Vec::new();
    let mut reasons = Vec::new();
    for (i, (d, text)) in drawings.iter().zip(pages.iter()).enumerate() {
        if let (_, Some(r)) = assess(text, d.has_image, mode) {
            jobs.push(engine::Job {
                pdf: pdf.to_path_buf(),
                page: i as u32 + 1,
                drawing: d.clone(),
            });
            reasons.push(r);
        }
    }
    if jobs.is_empty() {
        return Ok(0);
    }
    let tesseract = engine::Tesseract::find(settings)?;
    let outcomes = engine::run_jobs(&jobs, &tesseract, settings, &|| {});
    let mut n = 0;
    for ((job, reason), out) in jobs.iter().zip(&reasons).zip(outcomes) {
        let page = out.page?;
        let slot = &mut pages[job.page as usize - 1];
        if prefer_ocr(slot, reason, &page.text) {
            *slot = page.text;
            n += 1;
        }
    }
    Ok(n)
}

/// Character error rate: the Levenshtein distance between the reference and
/// the hypothesis, in characters, over the reference length. Both sides have
/// runs of white space folded to one space, so layout spacing does not
/// count, and ruled lines (four or more `-`, `_` or `=` in a row, which
/// are drawn lines rather than words) dropped. Returns (edits, reference
/// length).
pub fn char_errors(reference: &str, hypothesis: &str) -> (usize, usize) {
    let clean = |s: &str| -> Vec<char> {
        let kept: Vec<&str> = s.split_whitespace().filter(|w| !is_rule(w)).collect();
        kept.join(" ").chars().collect()
    };
    let (r, h) = (clean(reference), clean(hypothesis));
    (levenshtein(&r, &h), r.len())
}

/// A token that is a drawn line: four or more of `-`, `_`, `=`, `—`, `–`
/// and nothing else.
fn is_rule(w: &str) -> bool {
    w.chars().count() >= 4 && w.chars().all(|c| "-_=—–".contains(c))
}

/// Edit distance (insertions, deletions, substitutions, each costing one)
/// by the two-row dynamic programme.
pub fn levenshtein(a: &[char], b: &[char]) -> usize {
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for (i, ca) in a.iter().enumerate() {
        cur[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            cur[j + 1] = (prev[j] + usize::from(ca != cb))
                .min(prev[j + 1] + 1)
                .min(cur[j] + 1);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Tesseract 5 TSV as it prints it (the column layout is documented in
    /// tesseract's `TessBaseAPI::GetTSVText`); values invented.
    const TSV: &str = "level\tpage_num\tblock_num\tpar_num\tline_num\tword_num\tleft\ttop\twidth\theight\tconf\ttext
1\t1\t0\t0\t0\t0\t0\t0\t2550\t3300\t-1\t
2\t1\t1\t0\t0\t0\t229\t234\t647\t29\t-1\t
4\t1\t1\t1\t1\t0\t229\t234\t647\t29\t-1\t
5\t1\t1\t1\t1\t1\t229\t234\t100\t29\t96.5\tPORT
5\t1\t1\t1\t1\t2\t340\t234\t150\t29\t91\tAUBREL
5\t1\t1\t1\t2\t1\t229\t280\t90\t29\t40\tRarnp
5\t1\t1\t1\t2\t2\t330\t280\t60\t29\t88\t3A
5\t1\t2\t1\t1\t1\t229\t400\t60\t29\t-1\t 
5\t1\t2\t1\t1\t2\t229\t400\t60\t29\t95\tclosed.
";

    #[test]
    fn tsv_becomes_text_with_word_offsets() {
        let p = parse_tsv(TSV, 300).unwrap();
        assert_eq!(p.text, "PORT AUBREL\nRarnp 3A\n\nclosed.");
        for w in &p.words {
            let at: String = p
                .text
                .chars()
                .skip(w.start)
                .take(w.text.chars().count())
                .collect();
            assert_eq!(at, w.text);
        }
        assert_eq!(p.words[2].conf, 40.0);
        assert_eq!((p.words[1].left, p.words[1].width), (340, 150));
        // (4*96.5 + 6*91 + 5*40 + 2*88 + 7*95) / 24
        let want = (4.0 * 96.5 + 6.0 * 91.0 + 5.0 * 40.0 + 2.0 * 88.0 + 7.0 * 95.0) / 24.0;
        assert!((p.confidence.unwrap() - want).abs() < 1e-3);
        assert!(parse_tsv("5\t1\t1", 300).is_err());
    }

    #[test]
    fn span_confidence_covers_the_words_a_span_touches() {
        let p = parse_tsv(TSV, 300).unwrap();
        // "AUBREL" only.
        let s = span_confidence(&p.words, 5, 11).unwrap();
        assert_eq!((s.confidence, s.low), (91.0, false));
        // "RL\nRarnp 3" touches AUBREL, Rarnp and 3A; Rarnp is below 50.
        let s = span_confidence(&p.words, 9, 19).unwrap();
        assert!(s.low);
        assert_eq!(s.weakest_word, "Rarnp");
        let w = s.warning().unwrap();
        assert!(w.starts_with("OCR confidence "), "{w}");
        assert!(w.contains("\u{201C}Rarnp\u{201D} 40%") && w.ends_with("before quoting"));
        assert!(span_confidence(&p.words, 100, 120).is_none());
        // A speck read as punctuation at 20% does not flag good words.
        let mut words = p.words[..2].to_vec();
        words.push(OcrWord {
            text: ";".into(),
            start: 12,
            conf: 20.0,
            ..p.words[0].clone()
        });
        let s = span_confidence(&words, 0, 13).unwrap();
        assert!(!s.low, "{s:?}");
        assert_eq!(s.weakest_word, "AUBREL");
    }

    #[test]
    fn assessment_table() {
        let prose = "The Chair called the meeting to order at 9:03 a.m. A quorum was present and the agenda was approved as circulated.";
        let garbage = "ÿþ#@ x7$k Q§§q ~~%^ 0x1f?? zzkq! %%@! brrt@ ###x7 qqq$ ^^^";
        let cases: [(&str, bool, OcrMode, Option<&str>); 8] = [
            ("", false, OcrMode::Auto, Some("no text layer")),
            (
                "KARA-2023-0412-000123",
                true,
                OcrMode::Auto,
                Some("characters of text layer"),
            ),
            ("KARA-2023-0412-000123", false, OcrMode::Auto, None),
            (prose, false, OcrMode::Auto, None),
            (prose, true, OcrMode::Auto, Some("characters of text layer")),
            (garbage, false, OcrMode::Auto, Some("mostly not words")),
            (prose, false, OcrMode::Always, Some("--ocr always")),
            ("", true, OcrMode::Never, None),
        ];
        for (text, image, mode, want) in cases {
            let (_, got) = assess(text, image, mode);
            match (got, want) {
                (None, None) => {}
                (Some(r), Some(w)) => assert!(r.to_string().contains(w), "{text:?}: {r}"),
                (got, want) => panic!("{text:?} {mode:?}: got {got:?}, want {want:?}"),
            }
        }
        // OCR-damaged but readable text stays a usable layer.
        let damaged = "Discussion fo11owed. Director Ravensho1t asked whether Rarnp 3A was rea11y fit to be kept for another 3O years.";
        let s = LayerStats::of(damaged);
        assert!(s.word_share() > 0.6, "{s:?}");
    }

    /// Levenshtein's classic example: kitten → sitting takes three edits
    /// (two substitutions, one insertion) (from memory; also the worked
    /// example on the algorithm's encyclopedia page).
    #[test]
    fn levenshtein_worked_examples() {
        let c = |s: &str| s.chars().collect::<Vec<_>>();
        assert_eq!(levenshtein(&c("kitten"), &c("sitting")), 3);
        assert_eq!(levenshtein(&c("flaw"), &c("lawn")), 2);
        assert_eq!(levenshtein(&c(""), &c("abc")), 3);
        assert_eq!(char_errors("Rarnp  3A\nclosed", "Ramp 3A closed"), (2, 15));
        assert_eq!(
            char_errors("Total\n-------- ------\n12", "Total ————— 12"),
            (0, 8)
        );
    }

    proptest! {
        /// Against strsim's implementation (a general-purpose reference library).
        #[test]
        fn levenshtein_matches_strsim(a in "[a-c1lI ]{0,12}", b in "[a-c1lI ]{0,12}") {
            let c = |s: &str| s.chars().collect::<Vec<_>>();
            prop_assert_eq!(levenshtein(&c(&a), &c(&b)), strsim::levenshtein(&a, &b));
        }
    }
}
