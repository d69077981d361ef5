//! Guided decoding for the answer grammar (`<sentence> [n] "quote"`), for
//! local models too small to keep to it unaided. The model writes freely;
//! when it ends a line (or its turn) without a citation, the guide writes
//! ` [` for it, lets it choose only an excerpt number that exists, writes
//! `] "`, and lets it copy a quote from that excerpt until it closes the
//! quotation mark. While quoting, the model chooses its likeliest token
//! among those that keep the quote a verbatim run of the excerpt.
//! The guide decides form only: every word of the sentence and the choice
//! of quote is the model's, and the verifier still checks all of it.

use super::chat::ChatFormat;
use crate::error::Result;

/// Where the line being written stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stage {
    /// Writing the sentence (or a finished citation's tail).
    Free,
    /// Choosing the excerpt number after ` [`.
    Number,
    /// Copying the quote after `] "`.
    Quote,
    /// After a closed quote: another citation, or the end of the line.
    Cited,
}

/// What to do with the token the sampler proposed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Step {
    /// Keep it.
    Accept,
    /// Drop it and feed these tokens instead (then sample again).
    Force(Vec<u32>),
    /// Keep it, then feed these tokens.
    AcceptThen(Vec<u32>),
    /// End the answer here, without this token.
    Stop,
}

/// A sentence this long without a citation gets one.
pub const SENTENCE_MAX_WORDS: usize = 60;
/// Most citations after one sentence.
pub const MAX_CITES_PER_LINE: usize = 2;
/// Shortest quote, in words, the model may close.
pub const QUOTE_MIN_WORDS: usize = 3;
/// Longest quote, in words, before the guide closes it.
pub const QUOTE_MAX_WORDS: usize = 40;

pub struct CiteGuide {
    open: Vec<u32>,
    close: Vec<u32>,
    end_quote: Vec<u32>,
    newline: Vec<u32>,
    /// Token ids that are an excerpt number in range, with the number.
    numbers: Vec<(u32, usize)>,
    /// Each excerpt's text, white space squashed.
    sources: Vec<String>,
    /// Excerpt being quoted (index into `sources`) and the quote so far.
    quoting: Option<usize>,
    quote: String,
    pub stage: Stage,
}

/// Runs of white space as one space (kept at the ends).
fn squash(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    let mut space = false;
    for c in s.chars() {
        if c.is_whitespace() {
            space = true;
        } else {
            if space {
                out.push(' ');
                space = false;
            }
            out.push(c);
        }
    }
    if space {
        out.push(' ');
    }
    out
}

impl CiteGuide {
    /// A guide for excerpts numbered 1..=`excerpts.len()`.
    pub fn new(format: &ChatFormat, excerpts: &[String]) -> Result<CiteGuide> {
        let texts = format.token_texts();
        let mut numbers: Vec<(u32, usize)> = texts
            .iter()
            .enumerate()
            .filter_map(|(id, t)| {
                if t.is_empty() || !t.bytes().all(|b| b.is_ascii_digit()) || t.starts_with('0') {
                    return None;
                }
                let n: usize = t.parse().ok()?;
                (1..=excerpts.len()).contains(&n).then_some((id as u32, n))
            })
            .collect();
        numbers.sort_unstable();
        Ok(CiteGuide {
            open: format.encode(" [")?,
            close: format.encode("] \"")?,
            end_quote: format.encode("\"")?,
            newline: format.encode("\n")?,
            numbers,
            sources: excerpts.iter().map(|e| squash(e)).collect(),
            quoting: None,
            quote: String::new(),
            stage: Stage::Free,
        })
    }

    fn keep_only(logits: &mut [f32], keep: &[u32]) {
        let kept: Vec<(u32, f32)> = keep
            .iter()
            .filter_map(|&id| logits.get(id as usize).map(|&l| (id, l)))
            .collect();
        logits.fill(f32::NEG_INFINITY);
        for (id, l) in kept {
            logits[id as usize] = l;
        }
    }

    /// Whether `piece` may follow the quote so far: the quote stays a run
    /// of the excerpt's text, or `piece` closes a quote of two words or more.
    #[cfg(test)]
    fn fits_quote(&self, piece: &str) -> bool {
        if piece.is_empty() || piece.contains('\n') {
            return false;
        }
        if piece.starts_with(char::is_whitespace)
            && (self.quote.is_empty() || self.quote.ends_with(char::is_whitespace))
        {
            return false; // no leading or doubled white space
        }
        let Some(src) = self.quoting.and_then(|i| self.sources.get(i)) else {
            return true;
        };
        let word = |c: Option<char>| c.is_some_and(char::is_alphanumeric);
        // Starts of `q` in the excerpt that begin a word, with their ends.
        let runs = |q: &str| -> Vec<usize> {
            src.match_indices(q)
                .filter(|(i, _)| !word(src[..*i].chars().next_back()))
                .map(|(i, m)| i + m.len())
                .collect()
        };
        if let Some(before) = piece.split('"').next().filter(|_| piece.contains('"')) {
            // Closing: QUOTE_MIN_WORDS or more, ending at a word's end.
            let q = squash(&format!("{}{before}", self.quote));
            let q = q.trim();
            return q.split_whitespace().count() >= QUOTE_MIN_WORDS
                && runs(q).iter().any(|&end| !word(src[end..].chars().next()));
        }
        let q = squash(&format!("{}{piece}", self.quote));
        let q = q.trim_start();
        !q.is_empty() && !runs(q).is_empty()
    }

    /// Restrict the logits to what the current stage allows. Returns false
    /// when nothing is allowed (the quote cannot go on).
    pub fn mask(&self, logits: &mut [f32], texts: &[String]) -> bool {
        match self.stage {
            Stage::Free | Stage::Cited => true,
            Stage::Number => {
                if !self.numbers.is_empty() {
                    let ids: Vec<u32> = self.numbers.iter().map(|n| n.0).collect();
                    Self::keep_only(logits, &ids);
                }
                true
            }
            Stage::Quote => {
                let allowed = self.quote_continuations(texts);
                if allowed.is_empty() {
                    return false;
                }
                Self::keep_only(logits, &allowed);
                true
            }
        }
    }

    /// Token ids that [`fits_quote`](Self::fits_quote) accepts, found by
    /// comparing each token's text with the excerpt at the places the quote
    /// so far ends (rather than searching the excerpt per token).
    fn quote_continuations(&self, texts: &[String]) -> Vec<u32> {
        let Some(src) = self.quoting.and_then(|i| self.sources.get(i)) else {
            return (0..texts.len() as u32).collect();
        };
        let word = |c: Option<char>| c.is_some_and(char::is_alphanumeric);
        let q = squash(&self.quote);
        let q = q.trim_start();
        let trailing_space = self.quote.ends_with(char::is_whitespace);
        // Where the quote so far ends in the excerpt (word starts when empty).
        let ends: Vec<usize> = if q.is_empty() {
            src.char_indices()
                .filter(|(i, c)| !c.is_whitespace() && !word(src[..*i].chars().next_back()))
                .map(|(i, _)| i)
                .collect()
        } else {
            src.match_indices(q)
                .filter(|(i, _)| !word(src[..*i].chars().next_back()))
                .map(|(i, m)| i + m.len())
                .collect()
        };
        let words = q.split_whitespace().count();
        let mut out = Vec::new();
        for (id, t) in texts.iter().enumerate() {
            if t.is_empty() || t.contains('\n') {
                continue;
            }
            let lead = t.starts_with(char::is_whitespace);
            if lead && (q.is_empty() || trailing_space) {
                continue;
            }
            // Squash only what needs it; most tokens are " word" or "word".
            let needs =
                t.contains(['\t', '\r']) || t.contains("  ") || t.ends_with(' ') && t.len() > 1;
            let t: std::borrow::Cow<str> = if needs {
                std::borrow::Cow::Owned(squash(t))
            } else {
                std::borrow::Cow::Borrowed(t.as_str())
            };
            let ok = if let Some(before) = t.split('"').next().filter(|_| t.contains('"')) {
                let extra = before.split_whitespace().count();
                words + extra >= QUOTE_MIN_WORDS
                    && ends.iter().any(|&e| {
                        src[e..].starts_with(before)
                            && !word(src[e + before.len()..].chars().next())
                            && !before.ends_with(' ')
                    })
            } else {
                ends.iter().any(|&e| src[e..].starts_with(&*t))
            };
            if ok {
                out.push(id as u32);
            }
        }
        out
    }

    /// The tokens that close the quote now (when `mask` found no way on).
    pub fn close_quote(&mut self) -> Vec<u32> {
        self.stage = Stage::Cited;
        self.quoting = None;
        self.quote.clear();
        self.end_quote.clone()
    }

    /// Decide on the proposed token `id` (text `piece`, `is_end` when it ends
    /// the turn) given the text written so far.
    pub fn step(&mut self, text: &str, id: u32, piece: &str, is_end: bool) -> Step {
        let line = &text[text.rfind('\n').map_or(0, |i| i + 1)..];
        let ends_line = is_end || piece.contains('\n');
        match self.stage {
            Stage::Number => {
                self.quoting = self.numbers.iter().find(|n| n.0 == id).map(|n| n.1 - 1);
                self.quote.clear();
                self.stage = Stage::Quote;
                Step::AcceptThen(self.close.clone())
            }
            Stage::Quote => {
                if ends_line || self.quote.split_whitespace().count() >= QUOTE_MAX_WORDS {
                    // Close the quote before the line ends.
                    Step::Force(self.close_quote())
                } else if piece.contains('"') {
                    self.close_quote();
                    Step::Accept
                } else {
                    self.quote.push_str(piece);
                    Step::Accept
                }
            }
            Stage::Cited => {
                if piece.contains('[') && line.matches(" [").count() < MAX_CITES_PER_LINE {
                    self.stage = Stage::Number;
                    Step::Force(self.open.clone())
                } else if ends_line {
                    self.stage = Stage::Free;
                    Step::Accept
                } else if piece.trim().is_empty() {
                    Step::Accept
                } else {
                    // One sentence per line: end this one.
                    self.stage = Stage::Free;
                    Step::Force(self.newline.clone())
                }
            }
            Stage::Free => {
                let bare = line.trim();
                // A line that opens with a bracket, or echoes the prompt's
                // fences, is not an answer sentence: the answer is over.
                let echo = format!("{line}{piece}");
                let echo = echo.trim_start();
                if bare.is_empty() && piece.trim_start().starts_with('[')
                    || echo.contains("<<<")
                    || echo.contains(">>>")
                    || echo.contains("EXCERPT")
                    || echo.starts_with("Question")
                    || echo.starts_with("Excerpts")
                {
                    return Step::Stop;
                }
                let wants_cite = piece.contains('[')
                    && !bare.contains('[')
                    && bare.chars().filter(|c| c.is_alphanumeric()).count() >= 3;
                if wants_cite && !self.numbers.is_empty() {
                    // The model starts a citation itself: the guide takes
                    // over, so the number and the quote are checked too.
                    self.stage = Stage::Number;
                    return Step::Force(self.open.clone());
                }
                // A sentence ends at a line break, at the end of the turn,
                // at a full stop followed by a space, or when it runs on.
                let sentence_ends = ends_line
                    || bare.ends_with(['.', '!', '?']) && piece.starts_with(char::is_whitespace)
                    || bare.split_whitespace().count() >= SENTENCE_MAX_WORDS;
                let needs_cite = sentence_ends
                    && bare.chars().filter(|c| c.is_alphanumeric()).count() >= 3
                    && !bare.contains('[')
                    && !bare
                        .trim_matches(|c: char| !c.is_alphanumeric())
                        .eq_ignore_ascii_case(crate::prompt::NO_ANSWER);
                if needs_cite && !self.numbers.is_empty() {
                    self.stage = Stage::Number;
                    Step::Force(self.open.clone())
                } else {
                    Step::Accept
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn guide(sources: &[&str]) -> CiteGuide {
        CiteGuide {
            open: vec![],
            close: vec![],
            end_quote: vec![],
            newline: vec![6],
            numbers: vec![(10, 1), (11, 2)],
            sources: sources.iter().map(|s| squash(s)).collect(),
            quoting: Some(0),
            quote: String::new(),
            stage: Stage::Quote,
        }
    }

    #[test]
    fn quotes_stay_verbatim_runs_of_the_excerpt() {
        let mut g = guide(&["The ramp was  closed to\nvehicles on 14 March 2022."]);
        assert!(g.fits_quote("The"));
        assert!(!g.fits_quote(""), "an end token does not continue a quote");
        assert!(!g.fits_quote("\n"));
        assert!(
            !g.fits_quote(" "),
            "a quote does not start with white space"
        );
        assert!(
            !g.fits_quote(" ramp"),
            "nor with a space before its first word"
        );
        assert!(g.fits_quote("ramp"));
        assert!(!g.fits_quote("Ramp"));
        g.quote = "The ramp was".into();
        assert!(g.fits_quote(" closed"));
        assert!(!g.fits_quote(" opened"));
        // Closing needs three words that are in the excerpt.
        assert!(g.fits_quote("\""));
        g.quote = "The ramp".into();
        assert!(!g.fits_quote("\""));
        g.quote = "The ramp ".into();
        assert!(!g.fits_quote(" was"), "no doubled white space");
        assert!(g.fits_quote("was"));
        g.quote = "closed to".into();
        assert!(
            g.fits_quote(" vehicles"),
            "white space is squashed across lines"
        );
        // Quotes start and end at word boundaries.
        g.quote = String::new();
        assert!(!g.fits_quote("amp"));
        g.quote = "closed to veh".into();
        assert!(!g.fits_quote("\""));
        g.quote = "closed to vehicles".into();
        assert!(g.fits_quote("\"."));
        // The fast scan agrees with the plain check, token by token.
        let vocab: Vec<String> = [
            "The",
            " ramp",
            "ramp",
            " was",
            " closed",
            "closed",
            " to",
            "\"",
            "\".",
            " vehicles",
            "veh",
            "icles",
            " on",
            " 14",
            " March",
            " 2022",
            ".",
            " cars",
            "amp",
            " ",
            "\n",
            "",
            " was closed",
            "  closed",
        ]
        .map(String::from)
        .to_vec();
        for quote in [
            "",
            "The",
            "The ramp",
            "The ramp ",
            "The ramp was",
            "closed to",
            "closed to veh",
            "vehicles on 14",
        ] {
            g.quote = quote.into();
            let fast = g.quote_continuations(&vocab);
            let slow: Vec<u32> = (0..vocab.len() as u32)
                .filter(|&i| g.fits_quote(&vocab[i as usize]))
                .collect();
            assert_eq!(fast, slow, "after {quote:?}");
        }
        // Masking over a vocabulary keeps only verbatim continuations.
        let texts: Vec<String> = [" vehicles", " cars", "\"", " on"]
            .map(String::from)
            .to_vec();
        g.quote = "was closed to".into();
        let mut logits = vec![1.0, 5.0, 3.0, 2.0];
        assert!(g.mask(&mut logits, &texts));
        assert!(logits[0].is_finite() && logits[2].is_finite());
        assert!(logits[1] == f32::NEG_INFINITY && logits[3] == f32::NEG_INFINITY);
    }

    #[test]
    fn a_line_without_a_citation_gets_one_and_only_real_numbers_are_allowed() {
        let mut g = guide(&["a b c", "d e f"]);
        g.stage = Stage::Free;
        g.quoting = None;
        g.open = vec![1, 2];
        g.close = vec![3, 4];
        g.end_quote = vec![5];
        assert_eq!(
            g.step("The ramp closed.", 99, "\n", false),
            Step::Force(vec![1, 2])
        );
        assert_eq!(g.stage, Stage::Number);
        g.stage = Stage::Free;
        // So does a full stop followed by a space, and a run-on sentence.
        g.stage = Stage::Free;
        assert_eq!(
            g.step("The ramp closed.", 99, " He", false),
            Step::Force(vec![1, 2])
        );
        g.stage = Stage::Free;
        assert_eq!(g.step("It cost $4.1", 99, " million", false), Step::Accept);
        let long = "word ".repeat(SENTENCE_MAX_WORDS);
        assert_eq!(g.step(&long, 99, " more", false), Step::Force(vec![1, 2]));
        g.stage = Stage::Free;
        // The model opening a bracket itself is taken over the same way.
        assert_eq!(
            g.step("The ramp closed.", 99, " [", false),
            Step::Force(vec![1, 2])
        );
        assert_eq!(g.stage, Stage::Number);
        let mut logits = vec![0.0f32; 16];
        logits[3] = 9.0;
        assert!(g.mask(&mut logits, &[]));
        let best = logits
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .unwrap()
            .0;
        assert!(best == 10 || best == 11, "only excerpt numbers survive");
        assert_eq!(
            g.step("The ramp closed. [", 11, "2", false),
            Step::AcceptThen(vec![3, 4])
        );
        assert_eq!(g.quoting, Some(1));
        assert_eq!(g.step("x", 7, " d", false), Step::Accept);
        // The line ends before the quote is closed: the guide closes it.
        assert_eq!(g.step("x", 7, "\n", false), Step::Force(vec![5]));
        assert_eq!(g.stage, Stage::Cited);
        // After the quote, more text on the line is cut by a line break.
        assert_eq!(g.step("x", 7, " \"B", false), Step::Force(vec![6]));
        assert_eq!(g.stage, Stage::Free);
        // A second citation may follow a sentence; a third may not.
        g.stage = Stage::Cited;
        assert_eq!(
            g.step("A. [1] \"a b c\"", 7, " [", false),
            Step::Force(vec![1, 2])
        );
        g.stage = Stage::Cited;
        assert_eq!(
            g.step("A. [1] \"a b c\" [2] \"d e f\"", 7, " [", false),
            Step::Force(vec![6])
        );
        // A cited line, a "NO ANSWER" line and a blank line end as they are.
        assert_eq!(
            g.step("It closed. [1] \"a b\"", 0, "\n", false),
            Step::Accept
        );
        assert_eq!(g.step("NO ANSWER", 0, "", true), Step::Accept);
        assert_eq!(g.step("", 0, "", true), Step::Accept);
        // A new line that opens with a bracket or echoes a fence ends the answer.
        assert_eq!(g.step("A. [1] \"a b\"\n", 0, "[", false), Step::Stop);
        assert_eq!(g.step("A. [1] \"a b\"\nEXC", 0, "ERPT", false), Step::Stop);
        assert_eq!(g.step("A. [1] \"a b\"\n", 0, "Question", false), Step::Stop);
    }
}
