//! The rules judge: explicit checks, each with a reason a reporter can act
//! on. Every check compares the sentence with the evidence (the located
//! quotes, or an evidence passage in `eval verifier`):
//!
//! - dates, normalised ("5 January 2021" = "2021-01-05" = "Jan. 5, 2021");
//! - numbers, amounts, percentages and ranges, normalised
//!   ("$4.1 million" = "$4,100,000" = "4.1M dollars"), OCR digits read back;
//! - names and organisations (case, possessives, initials, acronyms);
//! - negation, modality ("may" vs "will") and status ("proposed" vs
//!   "approved");
//! - quantifiers ("all", "some", "none");
//! - substitution: the sentence copies a passage of the evidence but swaps
//!   some of its words for others;
//! - content-word coverage.
//!
//! [`analyse`] runs every check and also returns the numeric features the
//! learned judge reads.
//!
//! invariant: a check only ever strikes; none of them can turn a failed
//! check into support.

use super::align::skeleton;
use super::{Evidence, Judge, Judgement};
use crate::text::{fold_ws, is_stopword, normalize};
use regex::Regex;
use std::collections::HashSet;
use std::sync::LazyLock;

/// The checks, in the order they run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Check {
    Date,
    Number,
    Name,
    Negation,
    Modality,
    Status,
    Quantifier,
    Direction,
    Substitution,
    Coverage,
}

impl Check {
    pub const ALL: [Check; 10] = [
        Check::Date,
        Check::Number,
        Check::Name,
        Check::Negation,
        Check::Modality,
        Check::Status,
        Check::Quantifier,
        Check::Direction,
        Check::Substitution,
        Check::Coverage,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Check::Date => "date",
            Check::Number => "number",
            Check::Name => "name",
            Check::Negation => "negation",
            Check::Modality => "modality",
            Check::Status => "status",
            Check::Quantifier => "quantifier",
            Check::Direction => "direction",
            Check::Substitution => "substitution",
            Check::Coverage => "coverage",
        }
    }
}

/// One failed check.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    pub check: Check,
    pub reason: String,
}

/// Everything the checks found, plus numeric features.
#[derive(Debug, Clone, PartialEq)]
pub struct Analysis {
    /// Failed checks, in the order they ran (coverage is judged by the caller).
    pub findings: Vec<Finding>,
    /// Share of the sentence's content terms found in the evidence.
    pub coverage: f32,
    /// The sentence's content terms missing from the evidence.
    pub missing: Vec<String>,
    /// Longest in-order token match with one evidence sentence, over the sentence's tokens.
    pub aligned: f32,
    /// Share of the sentence's word bigrams found in the evidence.
    pub bigrams: f32,
    /// Sentence tokens over tokens of the best-aligned evidence sentence (capped at 2).
    pub length_ratio: f32,
    /// Where the evidence is, for reasons: "page 7", "the quoted pages", "the evidence".
    pub place: String,
}

impl Analysis {
    pub fn failed(&self, c: Check) -> bool {
        self.findings.iter().any(|f| f.check == c)
    }
}

/// "page 7" when every piece of evidence is on one page; "pages 3 and 7";
/// "the evidence" when pages are unknown.
fn place(evidence: &[Evidence<'_>]) -> String {
    let mut pages: Vec<u32> = evidence.iter().filter_map(|e| e.page).collect();
    pages.sort_unstable();
    pages.dedup();
    match pages.as_slice() {
        [] => "the evidence".into(),
        [p] => format!("page {p}"),
        [a, b] => format!("pages {a} and {b}"),
        _ => "the quoted pages".into(),
    }
}

/// Run every check of `sentence` against `evidence`.
pub fn analyse(sentence: &str, evidence: &[Evidence<'_>]) -> Analysis {
    let sentence = &fold_ws(sentence);
    // Quotes arrive with white space folded, so a word broken at a line end
    // reads "sedi- ment"; join it back.
    let joined: Vec<String> = evidence.iter().map(|e| dehyphenate(e.text)).collect();
    let evidence: &[Evidence<'_>] = &evidence
        .iter()
        .zip(&joined)
        .map(|(e, t)| Evidence {
            text: t.as_str(),
            page: e.page,
        })
        .collect::<Vec<_>>();
    let ev_text: String = evidence
        .iter()
        .map(|e| e.text)
        .collect::<Vec<_>>()
        .join(" \n ");
    let ev_text = ocr_digits(&fold_ws(&ev_text));
    let where_ = place(evidence);
    let mut findings = Vec::new();

    // Dates first, so their digits are not read again as bare numbers.
    let (s_dates, s_rest) = dates(sentence);
    let (q_dates, q_rest) = dates(&ev_text);
    if let Some((surface, s_key)) = s_dates.iter().find(|(_, key)| {
        !q_dates.iter().any(|(_, qk)| {
            qk == key
                || qk.starts_with(&format!("{key}-"))
                || (key.starts_with("--") && qk.ends_with(&key[1..]))
        })
    }) {
        let reason = match nearest_date(s_key, &q_dates) {
            Some(q) => format!("date differs: the sentence says {surface}, {where_} reads {q}"),
            None => {
                format!("date not found: the sentence says {surface}, {where_} gives no such date")
            }
        };
        findings.push(Finding {
            check: Check::Date,
            reason,
        });
    }

    let q_numbers = numbers(&q_rest);
    let mut q_keys: HashSet<String> = q_numbers.iter().map(|(_, k)| k.clone()).collect();
    for (_, k) in &q_dates {
        // A year or day written inside a quoted date still counts as that number.
        for part in k.split('-').filter(|p| !p.is_empty()) {
            q_keys.insert(part.trim_start_matches('0').to_string());
        }
    }
    for (surface, key) in numbers(&s_rest) {
        let bare = key.trim_end_matches('%');
        // "12.5%" is supported by "12.5 per cent" and by a bare "12.5"
        // beside the word "percent" already normalised; a bare sentence
        // number is supported by the same figure with a percent sign.
        if q_keys.contains(&key) || q_keys.contains(&format!("{key}%")) {
            continue;
        }
        if key.ends_with('%') && q_keys.contains(bare) && ev_text.contains('%') {
            continue;
        }
        let kind = number_kind(&surface, &key);
        let reason = match nearest_number(&key, kind, &q_numbers) {
            Some(q) => format!("{kind} differs: the sentence says {surface}, {where_} reads {q}"),
            None => format!(
                "{kind} not found: the sentence says {surface}, {where_} gives no such {kind}"
            ),
        };
        findings.push(Finding {
            check: Check::Number,
            reason,
        });
        break;
    }

    let q_words = words_folded(&ev_text);
    let s_names = names(sentence);
    for (i, name) in s_names.iter().enumerate() {
        if q_words.contains(&fold_word(name)) {
            continue;
        }
        // "John Smith" is supported by "J. Smith"; "PAHA" by "Port Aubrel Harbour Authority".
        if s_names
            .get(i + 1)
            .is_some_and(|next| has_initial_then(&ev_text, name, next))
            || acronym_spelled_out(name, &ev_text)
        {
            continue;
        }
        findings.push(Finding {
            check: Check::Name,
            reason: format!(
                "name not found: the sentence names \u{201C}{name}\u{201D}, which {where_} does not mention"
            ),
        });
        break;
    }

    let (s_toks, s_words): (Vec<String>, Vec<String>) =
        words_and_keys(sentence).into_iter().unzip();
    let mut best = Alignment::default();
    let mut best_text = String::new();
    for e in evidence {
        for r in crate::segment::sentence_spans(e.text) {
            let (keys, words): (Vec<String>, Vec<String>) =
                words_and_keys(&ocr_digits(&e.text[r.clone()]))
                    .into_iter()
                    .unzip();
            let mut a = align_tokens(&s_toks, &keys, &s_words, &words);
            if a.matched > best.matched {
                a.evidence_words = words;
                a.text = e.text[r.clone()].to_string();
                best = a;
                best_text = e.text[r].to_string();
            }
        }
    }
    // Polarity checks read only the evidence sentences that speak to the
    // sentence: a negation elsewhere in a long passage is not about it.
    // When the sentence follows one evidence sentence closely, that one.
    let close = !s_toks.is_empty() && best.matched as f32 >= 0.8 * s_toks.len() as f32;
    let focus = if close {
        ocr_digits(&best_text)
    } else {
        focus(sentence, evidence)
    };
    type PolarityCheck = fn(&str, &str, &str) -> Option<String>;
    const POLARITY: [(Check, PolarityCheck); 5] = [
        (Check::Quantifier, quantifier_mismatch),
        (Check::Negation, negation_mismatch),
        (Check::Modality, modality_mismatch),
        (Check::Status, status_mismatch),
        (Check::Direction, direction_mismatch),
    ];
    for (check, run) in POLARITY {
        if let Some(reason) = run(sentence, &focus, &where_) {
            findings.push(Finding { check, reason });
        }
    }

    if let Some(reason) = best.substitution(&s_toks, &s_words, &where_) {
        findings.push(Finding {
            check: Check::Substitution,
            reason,
        });
    }

    let q_terms: HashSet<String> = content_keys(&ev_text).into_iter().collect();
    let mut uniq: Vec<(String, &str)> = Vec::new();
    for (t, w) in content_words(sentence) {
        if !uniq.iter().any(|(u, _)| *u == t) {
            uniq.push((t, w));
        }
    }
    // OCR that ran words together ("Theboard") still holds them.
    let run_together: Vec<&String> = q_words.iter().filter(|w| w.len() >= 8).collect();
    // Reported as the sentence writes them.
    let missing: Vec<String> = uniq
        .iter()
        .filter(|(t, _)| !q_terms.contains(t) && !q_terms.iter().any(|q| near(q, t)))
        .filter(|(t, _)| t.len() < 4 || !run_together.iter().any(|w| w.contains(t.as_str())))
        .map(|(_, w)| w.to_string())
        .collect();
    let coverage = if uniq.is_empty() {
        1.0
    } else {
        1.0 - missing.len() as f32 / uniq.len() as f32
    };
    let q_bigrams: HashSet<(String, String)> = tokens(&ev_text)
        .windows(2)
        .map(|w| (w[0].clone(), w[1].clone()))
        .collect();
    let s_bigrams: Vec<(String, String)> = s_toks
        .windows(2)
        .map(|w| (w[0].clone(), w[1].clone()))
        .collect();
    let bigrams = if s_bigrams.is_empty() {
        1.0
    } else {
        s_bigrams.iter().filter(|b| q_bigrams.contains(*b)).count() as f32 / s_bigrams.len() as f32
    };
    let aligned = if s_toks.is_empty() {
        1.0
    } else {
        best.matched as f32 / s_toks.len() as f32
    };
    let length_ratio = if best.evidence_len == 0 {
        2.0
    } else {
        (s_toks.len() as f32 / best.evidence_len as f32).min(2.0)
    };
    Analysis {
        findings,
        coverage,
        missing,
        aligned,
        bigrams,
        length_ratio,
        place: where_,
    }
}

/// The rules judge: a sentence is supported when no check fails and enough
/// of its content words are in the evidence.
#[derive(Debug, Clone, Copy)]
pub struct RulesJudge {
    /// Minimum share of the sentence's content terms found in the evidence.
    pub min_coverage: f32,
}

impl Default for RulesJudge {
    fn default() -> Self {
        // Chosen on SQuAD v1.1 articles 1–24 (`eval make-pairs`, then
        // `eval verifier`); see the closing figures in DEVELOPERS.md.
        RulesJudge { min_coverage: 0.75 }
    }
}

impl RulesJudge {
    /// Judge from an analysis already made.
    pub fn decide(&self, a: &Analysis) -> Judgement {
        if let Some(f) = a.findings.first() {
            return Judgement {
                supported: false,
                confidence: 0.0,
                reason: Some(f.reason.clone()),
            };
        }
        if a.coverage < self.min_coverage {
            let missing: Vec<&str> = a.missing.iter().take(4).map(String::as_str).collect();
            return Judgement {
                supported: false,
                confidence: a.coverage,
                reason: Some(format!(
                    "too little support: only {:.0}% of the sentence's content words are on {} (missing: {})",
                    a.coverage * 100.0,
                    a.place,
                    missing.join(", ")
                )),
            };
        }
        Judgement {
            supported: true,
            confidence: a.coverage,
            reason: None,
        }
    }
}

impl Judge for RulesJudge {
    fn name(&self) -> &'static str {
        "rules-v2"
    }

    fn judge(&self, sentence: &str, evidence: &[Evidence<'_>]) -> Judgement {
        self.decide(&analyse(sentence, evidence))
    }
}

/// Join words broken by hyphenation at a line end: "sedi- ment" or
/// "sedi-\nment" becomes "sediment" (a lower-case letter must follow).
fn dehyphenate(s: &str) -> String {
    static BROKEN: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"(\p{L})[-\u{00AD}]\s+(\p{Ll})").unwrap());
    BROKEN.replace_all(s, "$1$2").into_owned()
}

/// The evidence sentences that share the most content terms with the
/// sentence (at least 60% of the best overlap), joined.
fn focus(sentence: &str, evidence: &[Evidence<'_>]) -> String {
    let keys: HashSet<String> = content_keys(sentence).into_iter().collect();
    let mut scored: Vec<(usize, String)> = Vec::new();
    for e in evidence {
        for r in crate::segment::sentence_spans(e.text) {
            let t = ocr_digits(&e.text[r]);
            let ov = content_keys(&t)
                .into_iter()
                .collect::<HashSet<_>>()
                .intersection(&keys)
                .count();
            scored.push((ov, t));
        }
    }
    let best = scored.iter().map(|(o, _)| *o).max().unwrap_or(0);
    let need = ((best as f32 * 0.6).ceil() as usize).max(1);
    scored
        .into_iter()
        .filter(|(o, _)| *o >= need)
        .map(|(_, t)| t)
        .collect::<Vec<_>>()
        .join(" \n ")
}

/// Read OCR-damaged digits back inside numeric tokens: "2O22" → "2022",
/// "$1,12O,OOO" → "$1,120,000", "l5" → "15". A token qualifies when it
/// holds at least one real digit and otherwise only digit look-alikes and
/// separators.
pub fn ocr_digits(s: &str) -> String {
    static TOKEN: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"[0-9OolI|][0-9OolI|,.]*[0-9OolI|]|[0-9]").unwrap());
    TOKEN
        .replace_all(s, |c: &regex::Captures<'_>| {
            let t = &c[0];
            let m = c.get(0).unwrap();
            let glued = s[..m.start()]
                .chars()
                .next_back()
                .is_some_and(|ch| ch.is_alphabetic())
                || s[m.end()..]
                    .chars()
                    .next()
                    .is_some_and(|ch| ch.is_alphabetic());
            let digits = t.chars().filter(|ch| ch.is_ascii_digit()).count();
            let alike = t.chars().filter(|ch| "OolI|".contains(*ch)).count();
            if glued || digits == 0 || alike == 0 || digits < alike.min(2) {
                t.to_string()
            } else {
                t.chars()
                    .map(|ch| match ch {
                        'O' | 'o' => '0',
                        'l' | 'I' | '|' => '1',
                        other => other,
                    })
                    .collect()
            }
        })
        .into_owned()
}

fn number_kind(surface: &str, key: &str) -> &'static str {
    if key.ends_with('%') {
        "percentage"
    } else if surface.contains(['$', '€', '£']) || key.len() > 4 {
        "amount"
    } else {
        "number"
    }
}

fn nearest_number(key: &str, kind: &str, q: &[(String, String)]) -> Option<String> {
    let v: f64 = key.trim_end_matches('%').parse().ok()?;
    q.iter()
        .filter(|(s, k)| number_kind(s, k) == kind)
        .filter_map(|(s, k)| {
            let w: f64 = k.trim_end_matches('%').parse().ok()?;
            Some(((v - w).abs() / v.abs().max(w.abs()).max(1.0), s))
        })
        .min_by(|a, b| a.0.partial_cmp(&b.0).unwrap())
        .map(|(_, s)| s.clone())
}

/// The quoted date whose key shares the longest prefix with `key` (same
/// year, then same month), as the evidence writes it.
fn nearest_date(key: &str, q: &[(String, String)]) -> Option<String> {
    q.iter()
        .max_by_key(|(_, k)| {
            let shared = k
                .bytes()
                .zip(key.bytes())
                .take_while(|(a, b)| a == b)
                .count();
            // The first date wins a tie.
            (shared, std::cmp::Reverse(q.iter().position(|x| x.1 == *k)))
        })
        .map(|(s, _)| s.clone())
}

/// Lower-case, OCR-folded form of a word, for comparisons.
fn fold_word(w: &str) -> String {
    let w = w
        .trim_end_matches("'s")
        .trim_end_matches("\u{2019}s")
        .trim_end_matches(['\'', '\u{2019}']);
    skeleton(w).chars.into_iter().collect()
}

/// Folded words of `s`, plus the letter runs inside words that mix letters
/// and digits ("Internet2" also gives "internet"), as names are read.
fn words_folded(s: &str) -> HashSet<String> {
    static W: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"[\p{L}\p{N}][\p{L}\p{N}'’]*").unwrap());
    static L: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"\p{L}+").unwrap());
    let mut out = HashSet::new();
    for m in W.find_iter(&normalize(s).text) {
        let w = m.as_str();
        out.insert(fold_word(w));
        if w.chars().any(|c| c.is_ascii_digit()) {
            for part in L.find_iter(w) {
                out.insert(fold_word(part.as_str()));
            }
        }
    }
    out
}

/// Word tokens for alignment: lower-cased and OCR-folded, possessives cut.
fn tokens(s: &str) -> Vec<String> {
    words_and_keys(s).into_iter().map(|(k, _)| k).collect()
}

/// (folded key, surface word) for every word of `s`.
fn words_and_keys(s: &str) -> Vec<(String, String)> {
    static W: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"[\p{L}\p{N}][\p{L}\p{N}'’.,]*[\p{L}\p{N}]|[\p{L}\p{N}]").unwrap()
    });
    W.find_iter(&normalize(s).text)
        .map(|m| (word_key(m.as_str()), m.as_str().to_string()))
        .filter(|(k, _)| !k.is_empty())
        .collect()
}

/// Content terms (stemmed, stop words removed), OCR-folded. Figures are
/// left to the number check, which reads "1,178,914" and "1178914" alike,
/// and month names to the date check ("March" and "2019-03-14").
fn content_keys(s: &str) -> Vec<String> {
    content_words(s).into_iter().map(|(k, _)| k).collect()
}

/// [`content_keys`] with each key's word as written.
fn content_words(s: &str) -> Vec<(String, &str)> {
    static W: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"[\p{L}\p{N}]+").unwrap());
    W.find_iter(s)
        .map(|m| m.as_str())
        .filter(|w| !is_stopword(&w.to_lowercase()))
        .filter(|w| !w.chars().all(|c| c.is_ascii_digit()))
        .filter(|w| numbers(w).is_empty() && month_num(w).is_none())
        .map(|w| (word_key(w), w))
        .filter(|(t, _)| !t.is_empty() && !UNITS.contains(t))
        .collect()
}

/// The comparison key of one word: OCR look-alikes read back inside
/// letter words ("unsuitab1e", "0CTOBER", "rernoved"), stemmed, then
/// folded to the skeleton, so "Inspection" and "lnspection" agree.
pub(crate) fn word_key(w: &str) -> String {
    thread_local! {
        static CACHE: std::cell::RefCell<std::collections::HashMap<String, String>> =
            std::cell::RefCell::new(std::collections::HashMap::new());
    }
    if let Some(k) = CACHE.with(|c| c.borrow().get(w).cloned()) {
        return k;
    }
    let k = word_key_uncached(w);
    CACHE.with(|c| {
        let mut c = c.borrow_mut();
        // Bounded: a long run over a large vocabulary starts afresh.
        if c.len() > 100_000 {
            c.clear();
        }
        c.insert(w.to_string(), k.clone());
    });
    k
}

fn word_key_uncached(w: &str) -> String {
    // "Jan." and "January" are one month ("0CTOBER" too); "may" in lower
    // case stays a modal.
    let read: String = w
        .chars()
        .map(|c| match c {
            '0' => 'O',
            '1' | '|' => 'l',
            c => c,
        })
        .collect();
    if let Some(m) = month_num(&read)
        && w.chars()
            .next()
            .is_some_and(|c| c.is_uppercase() || c == '0')
    {
        return MONTH_NAMES[m as usize - 1].to_string();
    }
    let w = w
        .trim_end_matches("'s")
        .trim_end_matches("\u{2019}s")
        .trim_end_matches(['\'', '\u{2019}']);
    let has_letter = w.chars().any(char::is_alphabetic);
    if !has_letter {
        return skeleton(w).chars.into_iter().collect();
    }
    let mut pre = String::with_capacity(w.len());
    for c in w.chars() {
        pre.push(match c {
            '1' | '|' => 'l',
            '0' => 'o',
            c => c,
        });
    }
    let pre = pre
        .to_lowercase()
        .replace("rn", "m")
        .replace("cl", "d")
        .replace("vv", "w");
    let stem = crate::text::terms(&pre).into_iter().next().unwrap_or(pre);
    skeleton(&stem).chars.into_iter().collect()
}

/// Two word keys that agree: equal; one a prefix of the other (at least
/// six characters, where stemming stopped early on a damaged word); or, at
/// five characters or more, one edit apart (residual OCR noise such as
/// "sevcre" for "severe").
fn near(a: &str, b: &str) -> bool {
    if a == b {
        return true;
    }
    let (a, b) = (a.as_bytes(), b.as_bytes());
    // Figures must match exactly: "1050s" is not "1060s".
    if a.iter().chain(b).any(u8::is_ascii_digit) {
        return false;
    }
    let (short, long) = if a.len() <= b.len() { (a, b) } else { (b, a) };
    if short.len() >= 6 && long.starts_with(short) {
        return true;
    }
    if short.len() < 5 || long.len() - short.len() > 1 || !a.is_ascii() || !b.is_ascii() {
        return false;
    }
    let i = short.iter().zip(long).take_while(|(x, y)| x == y).count();
    if short.len() == long.len() {
        short[i + 1..] == long[i + 1..]
    } else {
        short[i..] == long[i + 1..]
    }
}

/// "J. Smith" or "J Smith" in `ev` for the names `first` `next`.
fn has_initial_then(ev: &str, first: &str, next: &str) -> bool {
    let Some(initial) = first.chars().next() else {
        return false;
    };
    let pat = format!(
        r"\b{}\.?\s+{}\b",
        regex::escape(&initial.to_string()),
        regex::escape(next)
    );
    Regex::new(&pat).is_ok_and(|re| re.is_match(ev))
}

/// An all-capitals word spelled out in `ev` as capitalised words whose
/// initials give it ("of", "and", "the" may sit between them).
fn acronym_spelled_out(word: &str, ev: &str) -> bool {
    if word.len() < 2 || word.len() > 8 || !word.chars().all(|c| c.is_ascii_uppercase()) {
        return false;
    }
    static W: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"\p{L}+").unwrap());
    let ws: Vec<&str> = W
        .find_iter(ev)
        .map(|m| m.as_str())
        .filter(|w| !matches!(*w, "of" | "and" | "the" | "for" | "de" | "du" | "des"))
        .collect();
    let n = word.len();
    ws.windows(n).any(|win| {
        win.iter()
            .zip(word.chars())
            .all(|(w, c)| w.starts_with(c) && w.chars().next().is_some_and(char::is_uppercase))
    })
}

// ---------------------------------------------------------------- negation

static NEG: LazyLock<Regex> = LazyLock::new(|| {
    Regex::new(
        r"(?i)\b(not|never|no longer|no|none|nor|neither|without|cannot|\w+n['’]t)\b((?:\s+[\p{L}\-]+){0,3})",
    )
    .unwrap()
});

/// Negation cues with the first content word after each (within three words).
fn negations(s: &str) -> Vec<(String, Option<String>)> {
    NEG.captures_iter(s)
        .map(|c| {
            let cue = fold_ws(&c[1]).to_lowercase();
            let target = c
                .get(2)
                .map(|m| m.as_str())
                .unwrap_or("")
                .split_whitespace()
                .find(|w| {
                    !is_stopword(&w.to_lowercase()) && !AUX.contains(&w.to_lowercase().as_str())
                })
                .map(stem_key);
            (cue, target)
        })
        .collect()
}

const AUX: &[&str] = &[
    "be", "been", "being", "yet", "to", "have", "has", "had", "do", "does", "did", "was", "were",
    "is", "are", "longer", "the", "a", "an", "any", "further",
];

fn stem_key(w: &str) -> String {
    crate::text::terms(w)
        .into_iter()
        .next()
        .map(|t| skeleton(&t).chars.into_iter().collect())
        .unwrap_or_default()
}

fn negation_mismatch(sentence: &str, ev: &str, where_: &str) -> Option<String> {
    let s_neg = negations(sentence);
    let q_neg = negations(ev);
    let s_keys: HashSet<String> = content_keys(sentence).into_iter().collect();
    // The sentence negates something the evidence does not.
    for (cue, target) in &s_neg {
        let held = match target {
            Some(t) => q_neg.iter().any(|(_, qt)| qt.as_ref() == Some(t)),
            None => !q_neg.is_empty(),
        };
        if !held {
            let what = match target {
                Some(_) => NEG
                    .captures_iter(sentence)
                    .find(|c| fold_ws(&c[1]).to_lowercase() == *cue)
                    .map(|c| fold_ws(&c[0]))
                    .unwrap_or_else(|| cue.clone()),
                None => cue.clone(),
            };
            return Some(format!(
                "negation added: the sentence says \u{201C}{what}\u{201D}, {where_} has no such negation"
            ));
        }
    }
    // The evidence negates something the sentence asserts.
    for (cue, target) in &q_neg {
        if let Some(t) = target
            && s_keys.contains(t)
            && !s_neg.iter().any(|(_, st)| st.as_ref() == Some(t))
        {
            let what = NEG
                .captures_iter(ev)
                .find(|c| {
                    fold_ws(&c[1]).to_lowercase() == *cue
                        && c.get(2).is_some_and(|m| {
                            m.as_str().split_whitespace().any(|w| stem_key(w) == *t)
                        })
                })
                .map(|c| fold_ws(&c[0]))
                .unwrap_or_else(|| cue.clone());
            return Some(format!(
                "negation dropped: {where_} says \u{201C}{what}\u{201D}, the sentence does not"
            ));
        }
    }
    None
}

// ---------------------------------------------------------------- modality

const HEDGES: &[&str] = &[
    "may",
    "might",
    "could",
    "would",
    "should",
    "possibly",
    "perhaps",
    "likely",
    "unlikely",
    "potential",
    "potentially",
    "peut",
    "pourrait",
];
const FIRM: &[&str] = &[
    "will", "shall", "must", "is", "are", "was", "were", "has", "have", "had",
];

fn lower_words(s: &str) -> Vec<String> {
    static W: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"\p{L}+").unwrap());
    W.find_iter(s).map(|m| m.as_str().to_lowercase()).collect()
}

fn modality_mismatch(sentence: &str, ev: &str, where_: &str) -> Option<String> {
    let s = lower_words(sentence);
    let q = lower_words(ev);
    let s_hedge = s.iter().find(|w| HEDGES.contains(&w.as_str()));
    let q_hedge = q.iter().find(|w| HEDGES.contains(&w.as_str()));
    // Only a hedge in the evidence that the sentence drops, where the
    // sentence states it firmly and the hedge governs words it repeats.
    let h = match (s_hedge, q_hedge) {
        (None, Some(h)) if s.iter().any(|w| FIRM.contains(&w.as_str())) => h,
        _ => return None,
    };
    let s_keys: HashSet<String> = content_keys(sentence).into_iter().collect();
    hedge_scope(ev, h).iter().any(|k| s_keys.contains(k)).then(|| {
        format!(
            "certainty changed: {where_} says it \u{201C}{h}\u{201D} happen, the sentence states it as fact"
        )
    })
}

/// Content keys of the few words after a hedge in `text`.
fn hedge_scope(text: &str, hedge: &str) -> Vec<String> {
    let re = Regex::new(&format!(
        r"(?i)\b{}\b((?:\s+[\p{{L}}\-]+){{1,4}})",
        regex::escape(hedge)
    ))
    .unwrap();
    re.captures_iter(text)
        .flat_map(|c| {
            c[1].split_whitespace()
                .filter(|w| !is_stopword(&w.to_lowercase()))
                .map(stem_key)
                .collect::<Vec<_>>()
        })
        .collect()
}

// ---------------------------------------------------------------- status

/// (settled word stems, what the evidence may say instead, reader word).
const STATUS: &[(&[&str], &[&str])] = &[
    (
        &[
            "approv", "adopt", "authoris", "authoriz", "ratifi", "endors",
        ],
        &[
            "propos",
            "recommend",
            "request",
            "consid",
            "plan",
            "draft",
            "submit",
            "sought",
            "seek",
        ],
    ),
    (
        &["complet", "finish", "built", "open", "deliv"],
        &[
            "plan", "schedul", "start", "begun", "began", "expect", "intend", "target",
        ],
    ),
    (
        &["sign", "award", "execut"],
        &["draft", "negoti", "propos", "recommend", "tender"],
    ),
];

fn status_mismatch(sentence: &str, ev: &str, where_: &str) -> Option<String> {
    let s = lower_words(sentence);
    let q = lower_words(ev);
    for (settled, tentative) in STATUS {
        let has = |ws: &[String], stems: &[&str]| -> Option<String> {
            ws.iter()
                .find(|w| stems.iter().any(|st| w.starts_with(st)))
                .cloned()
        };
        if let Some(sw) = has(&s, settled)
            && has(&q, settled).is_none()
            && let Some(qw) = has(&q, tentative)
        {
            return Some(format!(
                "status differs: {where_} says \u{201C}{qw}\u{201D}, not \u{201C}{sw}\u{201D}"
            ));
        }
    }
    None
}

// ---------------------------------------------------------------- direction

/// Opposite directions, as word stems: (one way, the other way).
const DIRECTIONS: &[(&[&str], &[&str])] = &[
    (
        &[
            "increas", "rise", "rose", "risen", "grew", "grow", "gain", "climb", "doubl", "tripl",
        ],
        &[
            "decreas", "fall", "fell", "fallen", "drop", "declin", "shrank", "shrink", "lost",
            "loss", "reduc", "cut",
        ],
    ),
    (
        &[
            "higher", "more", "greater", "larger", "above", "over", "exceed",
        ],
        &["lower", "less", "fewer", "smaller", "below", "under"],
    ),
    (&["improv", "better"], &["worse", "deterior", "impair"]),
    (
        &["promot", "activat", "enhanc", "induc", "stimul", "upregul"],
        &[
            "inhibit",
            "suppress",
            "block",
            "prevent",
            "downregul",
            "attenu",
        ],
    ),
    (&["positiv"], &["negativ"]),
    (&["before", "earlier"], &["after", "later"]),
];

fn direction_mismatch(sentence: &str, ev: &str, where_: &str) -> Option<String> {
    let s = lower_words(sentence);
    let q = lower_words(ev);
    let has = |ws: &[String], stems: &[&str]| -> Option<String> {
        ws.iter()
            .find(|w| stems.iter().any(|st| w.starts_with(st)))
            .cloned()
    };
    for (up, down) in DIRECTIONS {
        for (mine, other) in [(up, down), (down, up)] {
            if let Some(sw) = has(&s, mine)
                && has(&q, mine).is_none()
                && let Some(qw) = has(&q, other)
            {
                return Some(format!(
                    "direction differs: the sentence says \u{201C}{sw}\u{201D}, {where_} says \u{201C}{qw}\u{201D}"
                ));
            }
        }
    }
    None
}

// ---------------------------------------------------------------- quantifiers

fn quantifier_mismatch(sentence: &str, ev: &str, where_: &str) -> Option<String> {
    const UNIVERSAL: &[&str] = &[
        "all", "every", "each", "always", "entire", "entirely", "whole",
    ];
    const PARTIAL: &[&str] = &[
        "some",
        "several",
        "most",
        "many",
        "few",
        "part",
        "partly",
        "partially",
        "certain",
        "majority",
        "minority",
        "sometimes",
        "half",
    ];
    const NONE: &[&str] = &["none", "nothing", "nobody"];
    let s = lower_words(sentence);
    let q = lower_words(ev);
    let find = |ws: &[String], set: &[&str]| ws.iter().find(|w| set.contains(&w.as_str())).cloned();
    if let Some(sq) = find(&s, UNIVERSAL)
        && find(&q, UNIVERSAL).is_none()
        && let Some(qq) = find(&q, PARTIAL).or_else(|| find(&q, NONE))
    {
        return Some(format!(
            "quantity differs: the sentence says \u{201C}{sq}\u{201D}, {where_} says \u{201C}{qq}\u{201D}"
        ));
    }
    if let Some(sq) = find(&s, NONE)
        && find(&q, NONE).is_none()
        && let Some(qq) = find(&q, PARTIAL).or_else(|| find(&q, UNIVERSAL))
    {
        return Some(format!(
            "quantity differs: the sentence says \u{201C}{sq}\u{201D}, {where_} says \u{201C}{qq}\u{201D}"
        ));
    }
    if let Some(sq) = find(&s, PARTIAL)
        && find(&q, PARTIAL).is_none()
        && let Some(qq) = find(&q, NONE)
    {
        return Some(format!(
            "quantity differs: the sentence says \u{201C}{sq}\u{201D}, {where_} says \u{201C}{qq}\u{201D}"
        ));
    }
    None
}

// ---------------------------------------------------------------- substitution

/// Keys of the words that only qualify a figure.
static UNITS: LazyLock<HashSet<String>> = LazyLock::new(|| {
    [
        "million", "billion", "thousand", "dollars", "percent", "per", "cent", "m", "bn", "mn",
        "k", "euros", "pounds",
    ]
    .iter()
    .map(|u| word_key(u))
    .collect()
});

/// A token-level alignment of the sentence with one evidence sentence.
#[derive(Debug, Clone, Default)]
struct Alignment {
    matched: usize,
    evidence_len: usize,
    /// (sentence token index, evidence token index) of matched pairs, in order.
    pairs: Vec<(usize, usize)>,
    evidence: Vec<String>,
    /// The evidence sentence's words as written.
    evidence_words: Vec<String>,
    /// The evidence sentence itself.
    text: String,
}

fn align_tokens(s: &[String], e: &[String], s_words: &[String], e_words: &[String]) -> Alignment {
    let (n, m) = (s.len(), e.len());
    let sf: Vec<String> = s_words.iter().map(|w| fold_word(w)).collect();
    let ef: Vec<String> = e_words.iter().map(|w| fold_word(w)).collect();
    let same = |i: usize, j: usize| near(&s[i], &e[j]) || near(&sf[i], &ef[j]);
    let mut dp = vec![vec![0u16; m + 1]; n + 1];
    for i in (0..n).rev() {
        for j in (0..m).rev() {
            dp[i][j] = if same(i, j) {
                dp[i + 1][j + 1] + 1
            } else {
                dp[i + 1][j].max(dp[i][j + 1])
            };
        }
    }
    let mut pairs = Vec::new();
    let (mut i, mut j) = (0, 0);
    while i < n && j < m {
        if same(i, j) && dp[i][j] == dp[i + 1][j + 1] + 1 {
            pairs.push((i, j));
            i += 1;
            j += 1;
        } else if dp[i + 1][j] >= dp[i][j + 1] {
            i += 1;
        } else {
            j += 1;
        }
    }
    Alignment {
        matched: dp[0][0] as usize,
        evidence_len: m,
        pairs,
        evidence: e.to_vec(),
        evidence_words: e.to_vec(),
        text: String::new(),
    }
}

impl Alignment {
    /// When the sentence follows an evidence sentence closely but, between
    /// two matched words, has content words where the evidence has other
    /// content words, report the swap.
    fn substitution(&self, s: &[String], s_words: &[String], where_: &str) -> Option<String> {
        if s.is_empty() || self.matched < 3 || (self.matched as f32) < 0.5 * s.len() as f32 {
            return None;
        }
        // Stop words and auxiliaries are read on the surface word; figures
        // and units are the number check's business.
        let light = |surface: &str| {
            let l = surface.to_lowercase();
            is_stopword(&l) || AUX.contains(&l.as_str())
        };
        let content = |key: &String, surface: &str| {
            !light(surface)
                && !surface.chars().any(|c| c.is_ascii_digit())
                && !UNITS.contains(key.as_str())
                && numbers(surface).is_empty()
        };
        let (e_dates, _) = dates(&self.text);
        let e_months: HashSet<u32> = e_dates
            .iter()
            .filter_map(|(_, k)| {
                k.trim_start_matches('-')
                    .split('-')
                    .nth(if k.starts_with("--") { 0 } else { 1 })
            })
            .filter_map(|m| m.parse().ok())
            .collect();
        // Gaps between consecutive anchors, plus the tails when the other side has words there.
        let mut anchors = vec![(usize::MAX, usize::MAX)];
        anchors.extend(self.pairs.iter().copied());
        anchors.push((s.len(), self.evidence.len()));
        let e_nums: HashSet<String> = numbers(&self.evidence_words.join(" "))
            .into_iter()
            .map(|(_, k)| k)
            .collect();
        for w in anchors.windows(2) {
            let (a, b) = (w[0], w[1]);
            let s_from = a.0.wrapping_add(1);
            let e_from = a.1.wrapping_add(1);
            if s_from >= b.0 {
                continue;
            }
            // Words inserted between two matched words (the evidence has
            // nothing there) are checked too; at the ends they are framing.
            let inserted = e_from >= b.1;
            let inner = a.0 != usize::MAX && b.0 != s.len();
            if inserted && !inner {
                continue;
            }
            let e_from = e_from.min(b.1);
            let s_gap: Vec<&String> = (s_from..b.0)
                .filter(|&i| content(&s[i], &s_words[i]))
                .map(|i| &s[i])
                .collect();
            let e_gap: Vec<&String> = (e_from..b.1)
                .filter(|&j| !light(&self.evidence_words[j]))
                .map(|j| &self.evidence[j])
                .collect();
            // A figure in the sentence's gap must be a figure of the evidence
            // sentence ("4.1 million" for "4,100,000"), else it was swapped in.
            let s_gap_text = s_words[s_from..b.0].join(" ");
            let figure_swapped = !e_gap.is_empty()
                && numbers(&s_gap_text)
                    .iter()
                    .any(|(_, k)| !e_nums.contains(k) && !e_nums.contains(k.trim_end_matches('%')));
            let e_text = self.evidence_words[e_from..b.1].join(" ");
            let swapped: Vec<&String> = s_gap
                .iter()
                .copied()
                .filter(|w| !self.evidence.iter().any(|e| near(e, w)))
                .filter(|w| {
                    // A month written as a number in the evidence's date ("2019-03-14").
                    !month_num(w).is_some_and(|m| e_months.contains(&m))
                })
                .filter(|w| {
                    let i = s[s_from..b.0]
                        .iter()
                        .position(|x| x == *w)
                        .map(|p| p + s_from);
                    let f = i.map(|i| fold_word(&s_words[i])).unwrap_or_default();
                    !self.evidence_words.iter().any(|e| near(&fold_word(e), &f))
                })
                .filter(|w| {
                    // "Marcus" for "M.", "PAHA" for "Port Aubrel Harbour Authority".
                    let i = s[s_from..b.0]
                        .iter()
                        .position(|x| x == *w)
                        .map(|p| p + s_from);
                    let surface = i.map(|i| s_words[i].as_str()).unwrap_or("");
                    let initial = surface.chars().next().map(|c| c.to_string());
                    !(initial.is_some_and(|ini| self.evidence_words[e_from..b.1].contains(&ini))
                        || acronym_spelled_out(surface, &e_text))
                })
                .collect();
            if inserted {
                if !swapped.is_empty() {
                    let added: Vec<&str> =
                        s_words[s_from..b.0].iter().map(String::as_str).collect();
                    return Some(format!(
                        "words added: the sentence adds \u{201C}{}\u{201D}, which {where_} does not say there",
                        added.join(" ")
                    ));
                }
                continue;
            }
            if (figure_swapped || !swapped.is_empty()) && !e_gap.is_empty() && e_gap.len() <= 8 {
                let said: Vec<&str> = s_words[s_from..b.0].iter().map(String::as_str).collect();
                let reads: Vec<&str> = self.evidence_words[e_from..b.1]
                    .iter()
                    .map(String::as_str)
                    .collect();
                return Some(format!(
                    "words changed: {where_} reads \u{201C}{}\u{201D} where the sentence says \u{201C}{}\u{201D}",
                    reads.join(" "),
                    said.join(" ")
                ));
            }
        }
        None
    }
}

// ---------------------------------------------------------------- dates, numbers, names

const MONTHS: [&str; 12] = [
    "jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec",
];

/// English month names, in order.
const MONTH_NAMES: [&str; 12] = [
    "january",
    "february",
    "march",
    "april",
    "may",
    "june",
    "july",
    "august",
    "september",
    "october",
    "november",
    "december",
];

pub(crate) fn month_num(name: &str) -> Option<u32> {
    let n = name.to_lowercase();
    let n = n.trim_end_matches('.');
    if n.len() < 3 {
        return None;
    }
    let fr = [
        "janvier",
        "février",
        "mars",
        "avril",
        "mai",
        "juin",
        "juillet",
        "août",
        "septembre",
        "octobre",
        "novembre",
        "décembre",
    ];
    (0..12)
        .find(|&i| MONTH_NAMES[i] == n || fr[i] == n || (n == MONTHS[i] || (n == "sept" && i == 8)))
        .map(|i| i as u32 + 1)
}

/// Dates in `s` as (surface text, ISO key: `YYYY-MM-DD` or `YYYY-MM`), and
/// `s` with the dates blanked out.
pub fn dates(s: &str) -> (Vec<(String, String)>, String) {
    static ISO: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"\b(\d{4})-(\d{2})-(\d{2})\b").unwrap());
    static DMY: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b(\d{1,2})(?:st|nd|rd|th|er)?\s+(\p{L}{3,9}\.?),?\s+(\d{4})\b").unwrap()
    });
    static MDY: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b(\p{L}{3,9}\.?)\s+(\d{1,2})(?:st|nd|rd|th)?,?\s+(\d{4})\b").unwrap()
    });
    static MY: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"\b(\p{L}{3,9}\.?)\s+(\d{4})\b").unwrap());
    let mut out = Vec::new();
    let mut rest = s.to_string();
    let blank = |rest: &mut String, r: std::ops::Range<usize>| {
        rest.replace_range(r.clone(), &" ".repeat(r.len()));
    };
    for c in ISO.captures_iter(s) {
        let m = c.get(0).unwrap();
        out.push((m.as_str().to_string(), m.as_str().to_string()));
        blank(&mut rest, m.range());
    }
    let snapshot = rest.clone();
    for c in DMY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[2]) {
            let d: u32 = c[1].parse().unwrap_or(0);
            if (1..=31).contains(&d) {
                let m = c.get(0).unwrap();
                out.push((m.as_str().to_string(), format!("{}-{mo:02}-{d:02}", &c[3])));
                blank(&mut rest, m.range());
            }
        }
    }
    let snapshot = rest.clone();
    for c in MDY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[1]) {
            let d: u32 = c[2].parse().unwrap_or(0);
            if (1..=31).contains(&d) {
                let m = c.get(0).unwrap();
                out.push((m.as_str().to_string(), format!("{}-{mo:02}-{d:02}", &c[3])));
                blank(&mut rest, m.range());
            }
        }
    }
    static DM: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b(\d{1,2})(?:st|nd|rd|th|er)?\s+(\p{L}{3,9}\.?)\b|\b(\p{L}{3,9}\.?)\s+(\d{1,2})(?:st|nd|rd|th)?\b").unwrap()
    });
    let snapshot = rest.clone();
    for c in DM.captures_iter(&snapshot) {
        let (d, mo) = match (c.get(1), c.get(2), c.get(3), c.get(4)) {
            (Some(d), Some(m), _, _) => (d.as_str(), m.as_str()),
            (_, _, Some(m), Some(d)) => (d.as_str(), m.as_str()),
            _ => continue,
        };
        if mo.eq_ignore_ascii_case("may") && !mo.starts_with('M') {
            continue;
        }
        if let Some(mo) = month_num(mo) {
            let d: u32 = d.parse().unwrap_or(0);
            if (1..=31).contains(&d) {
                let m = c.get(0).unwrap();
                out.push((m.as_str().to_string(), format!("--{mo:02}-{d:02}")));
                blank(&mut rest, m.range());
            }
        }
    }
    let snapshot = rest.clone();
    for c in MY.captures_iter(&snapshot) {
        if let Some(mo) = month_num(&c[1]) {
            let m = c.get(0).unwrap();
            out.push((m.as_str().to_string(), format!("{}-{mo:02}", &c[2])));
            blank(&mut rest, m.range());
        }
    }
    (out, rest)
}

/// Numbers, amounts and percentages in `s` as (surface text, normalised key).
/// "$4.1 million", "$4,100,000" and "4.1M dollars" all give `4100000`;
/// "12.5%" and "12.5 per cent" give `12.5%`; "three" gives `3`. A range
/// ("3 to 5", "3–5", "between 3 and 5") gives both ends.
pub fn numbers(s: &str) -> Vec<(String, String)> {
    static NUM: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)([$€£]\s?)?(\d{1,3}(?:,\d{3})+|\d+)(\.\d+)?(?:\s?(million|billion|thousand|mn|bn|m|k)\b)?(\s?(?:%|per\s?cent|percent))?",
        )
        .unwrap()
    });
    static WORDS: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"(?i)\b(two|three|four|five|six|seven|eight|nine|ten|eleven|twelve|twenty|thirty|forty|fifty|hundred|dozen)\b").unwrap()
    });
    let mut out = Vec::new();
    for c in NUM.captures_iter(s) {
        let m = c.get(0).unwrap();
        // Skip digits glued to letters (e.g. "v2", "A4", "Q3"), which are labels.
        let before = s[..m.start()].chars().next_back();
        if before.is_some_and(|ch| ch.is_alphabetic()) {
            continue;
        }
        let int: String = c[2].chars().filter(|ch| *ch != ',').collect();
        let frac = c.get(3).map(|f| f.as_str()).unwrap_or("");
        let mult: f64 = match c.get(4).map(|x| x.as_str().to_lowercase()).as_deref() {
            Some("million" | "mn" | "m") => 1e6,
            Some("billion" | "bn") => 1e9,
            Some("thousand" | "k") => 1e3,
            _ => 1.0,
        };
        let pct = c.get(5).is_some();
        let key = if mult == 1.0 {
            let frac = frac.trim_end_matches('0');
            let frac = if frac == "." { "" } else { frac };
            format!(
                "{}{frac}",
                int.trim_start_matches('0').to_string().max("0".into())
            )
        } else {
            let v: f64 = format!("{int}{frac}").parse().unwrap_or(0.0) * mult;
            format!("{}", v.round() as u64)
        };
        let key = if key.is_empty() { "0".to_string() } else { key };
        let key = if pct { format!("{key}%") } else { key };
        out.push((m.as_str().trim().to_string(), key));
    }
    for m in WORDS.find_iter(s) {
        let v = match m.as_str().to_lowercase().as_str() {
            "two" => 2,
            "three" => 3,
            "four" => 4,
            "five" => 5,
            "six" => 6,
            "seven" => 7,
            "eight" => 8,
            "nine" => 9,
            "ten" => 10,
            "eleven" => 11,
            "twelve" | "dozen" => 12,
            "twenty" => 20,
            "thirty" => 30,
            "forty" => 40,
            "fifty" => 50,
            _ => 100,
        };
        // "twenty" in "twenty-five" or "hundred" in "two hundred" are parts of a
        // larger number the digit rules cannot read; skip compounds.
        let after = &s[m.end()..];
        let before = &s[..m.start()];
        if after.starts_with('-')
            || before.ends_with('-')
            || after.trim_start().to_lowercase().starts_with("hundred")
            || m.as_str().eq_ignore_ascii_case("hundred")
        {
            continue;
        }
        out.push((m.as_str().to_string(), v.to_string()));
    }
    out
}

/// Capitalised names and acronyms in `s`, possessives stripped. The first
/// word of the sentence counts only when the next word is capitalised too.
pub fn names(s: &str) -> Vec<String> {
    static WORD: LazyLock<Regex> = LazyLock::new(|| Regex::new(r"[\p{L}][\p{L}'’\-]*").unwrap());
    const COMMON: &[&str] = &[
        "The",
        "A",
        "An",
        "In",
        "On",
        "At",
        "Of",
        "For",
        "And",
        "But",
        "Or",
        "It",
        "Its",
        "This",
        "That",
        "These",
        "Those",
        "He",
        "She",
        "They",
        "We",
        "I",
        "His",
        "Her",
        "Their",
        "Our",
        "As",
        "By",
        "To",
        "From",
        "With",
        "If",
        "When",
        "While",
        "After",
        "Before",
        "According",
        "Mr",
        "Mrs",
        "Ms",
        "Dr",
        "Hon",
        "Re",
        "No",
        "Not",
        "Yes",
        "Page",
        "Le",
        "La",
        "Les",
        "Un",
        "Une",
        "There",
        "However",
        "Although",
        "During",
        "Since",
        "Under",
        "Over",
        "All",
        "Some",
        "Most",
        "Many",
        "Each",
        "Every",
        "Both",
        "Neither",
        "None",
        "Also",
        "Then",
    ];
    let ws: Vec<regex::Match<'_>> = WORD.find_iter(s).collect();
    let mut out = Vec::new();
    for (i, m) in ws.iter().enumerate() {
        let w = m.as_str();
        if !w.chars().next().is_some_and(|c| c.is_uppercase()) || COMMON.contains(&w) {
            continue;
        }
        if month_num(w).is_some() || w.len() < 2 {
            continue;
        }
        let sentence_start = s[..m.start()].trim().is_empty()
            || s[..m.start()]
                .trim_end()
                .ends_with(['.', '!', '?', ':', '"', '\u{201C}']);
        if sentence_start {
            let next_cap = ws
                .get(i + 1)
                .is_some_and(|n| n.as_str().chars().next().is_some_and(|c| c.is_uppercase()));
            if !next_cap {
                continue;
            }
        }
        let base = w
            .trim_end_matches("'s")
            .trim_end_matches("’s")
            .trim_end_matches(['\'', '’', '-']);
        // Hyphenated names must match part by part.
        for part in base.split('-') {
            if part.chars().count() >= 2 && !COMMON.contains(&part) {
                out.push(part.to_string());
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn number_normalisation() {
        let cases = [
            ("$4.1 million", "4100000"),
            ("$4,100,000", "4100000"),
            ("4.1M dollars", "4100000"),
            ("12.5%", "12.5%"),
            ("12.50 per cent", "12.5%"),
            ("$38.6 million", "38600000"),
            ("007", "7"),
            ("three", "3"),
        ];
        for (s, want) in cases {
            let got = numbers(s);
            assert_eq!(got.first().map(|x| x.1.as_str()), Some(want), "{s}");
        }
        assert!(numbers("version v2 and A4 paper").is_empty());
        let range: Vec<String> = numbers("between 3 and 5 weeks")
            .into_iter()
            .map(|x| x.1)
            .collect();
        assert_eq!(range, ["3", "5"]);
    }

    #[test]
    fn date_normalisation() {
        let cases = [
            ("5 January 2021", "2021-01-05"),
            ("2021-01-05", "2021-01-05"),
            ("Jan. 5, 2021", "2021-01-05"),
            ("January 5th, 2021", "2021-01-05"),
            ("le 5 janvier 2021", "2021-01-05"),
            ("March 2019", "2019-03"),
        ];
        for (s, want) in cases {
            let (d, _) = dates(s);
            assert_eq!(d.first().map(|x| x.1.as_str()), Some(want), "{s}");
        }
    }

    #[test]
    fn ocr_digits_are_read_back_only_inside_numbers() {
        assert_eq!(ocr_digits("$1,12O,OOO"), "$1,120,000");
        assert_eq!(ocr_digits("May 2O22"), "May 2022");
        assert_eq!(ocr_digits("the Oak 1ane"), "the Oak 1ane");
        assert_eq!(ocr_digits("schedu1e"), "schedu1e");
        assert_eq!(ocr_digits("10 boats"), "10 boats");
    }

    #[test]
    fn token_alignment_finds_the_swap() {
        let s = "The new terminal opened in the harbour district.";
        let e = "The new terminal opened in the railway district, near the quay.";
        let (sk, sw): (Vec<String>, Vec<String>) = words_and_keys(s).into_iter().unzip();
        let (ek, ew): (Vec<String>, Vec<String>) = words_and_keys(e).into_iter().unzip();
        let mut a = align_tokens(&sk, &ek, &sw, &ew);
        a.evidence_words = ew;
        assert_eq!(a.matched, 7);
        let why = a.substitution(&sk, &sw, "page 2").unwrap();
        assert!(
            why.contains("\u{201C}railway\u{201D} where the sentence says \u{201C}harbour\u{201D}"),
            "{why}"
        );
    }
}
