//! Verifier evaluation on labelled (claim, evidence) pairs, and the pair
//! generators: adversarial pairs from SQuAD v1.1 and claim pairs from
//! SciFact.
//!
//! Pair file (JSON Lines), one object per line:
//! `{"id", "claim", "evidence": "text" | ["sentence", ...],
//!   "label": "supported" | "unsupported", "kind"?}`.
//!
//! Figures: balanced accuracy (mean of retention and rejection), the
//! pass-through rate (unsupported judged supported) and the retention rate
//! (supported kept).
//!
//! invariant: generation is deterministic for a given input and seed.

use super::Rng;
use crate::error::{Error, Result};
use crate::verify::{Evidence, Judge};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashSet};
use std::io::Write;
use std::ops::RangeInclusive;
use std::path::Path;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Label {
    Supported,
    Unsupported,
}

/// Evidence as one text or as a list of sentences.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum EvidenceField {
    Text(String),
    Sentences(Vec<String>),
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Pair {
    pub id: String,
    pub claim: String,
    pub evidence: EvidenceField,
    pub label: Label,
    /// How the pair was made ("verbatim", "number", ...), for the breakdown.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kind: Option<String>,
}

impl Pair {
    pub fn evidence(&self) -> Vec<Evidence<'_>> {
        match &self.evidence {
            EvidenceField::Text(t) => vec![Evidence::text(t)],
            EvidenceField::Sentences(s) => s.iter().map(|t| Evidence::text(t)).collect(),
        }
    }
}

/// Read a JSON Lines file; a bad line names the file, the line and `what`
/// the line should have been.
fn read_jsonl<T: serde::de::DeserializeOwned>(path: &Path, what: &str) -> Result<Vec<T>> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        out.push(serde_json::from_str(line).map_err(|e| Error::BadInput {
            path: path.to_path_buf(),
            line: i + 1,
            message: format!("not {what} ({e})"),
        })?);
    }
    Ok(out)
}

/// Read a pair file; a bad line names the file and the line.
pub fn read_pairs(path: &Path) -> Result<Vec<Pair>> {
    let out: Vec<Pair> = read_jsonl(
        path,
        "a verifier pair: expected {\"id\", \"claim\", \"evidence\": text or [sentences], \
         \"label\": \"supported\" | \"unsupported\"}",
    )?;
    if out.is_empty() {
        return Err(Error::BadInput {
            path: path.to_path_buf(),
            line: 0,
            message: "the pair file holds no pairs".into(),
        });
    }
    Ok(out)
}

pub fn write_pairs(pairs: &[Pair], out: &mut dyn Write) -> std::io::Result<()> {
    for p in pairs {
        serde_json::to_writer(&mut *out, p)?;
        writeln!(out)?;
    }
    Ok(())
}

/// Per-kind counts.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct KindCounts {
    pub label: Option<Label>,
    pub pairs: usize,
    pub judged_supported: usize,
}

/// The verifier's figures on a pair set. Key names are stable.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VerifierReport {
    pub judge: String,
    pub pairs: usize,
    pub supported: usize,
    pub unsupported: usize,
    pub balanced_accuracy: f64,
    /// Share of unsupported pairs judged supported.
    pub pass_through: f64,
    /// Share of supported pairs judged supported.
    pub retention: f64,
    pub true_supported: usize,
    pub false_supported: usize,
    pub true_struck: usize,
    pub false_struck: usize,
    pub by_kind: BTreeMap<String, KindCounts>,
    /// For struck pairs: how often each check gave the reason.
    pub strike_reasons: BTreeMap<String, usize>,
    pub mean_ms_per_pair: f64,
    /// The pairs judged wrongly, in input order (written by `--errors`).
    #[serde(skip)]
    pub misjudged: Vec<Misjudged>,
}

/// A pair the judge got wrong, and what it said.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Misjudged {
    pub id: String,
    pub kind: Option<String>,
    pub label: Label,
    pub claim: String,
    pub confidence: f32,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
}

/// Judge every pair and compute the figures.
pub fn evaluate(pairs: &[Pair], judge: &dyn Judge) -> VerifierReport {
    let t0 = std::time::Instant::now();
    let mut r = VerifierReport {
        judge: judge.name().into(),
        pairs: pairs.len(),
        supported: 0,
        unsupported: 0,
        balanced_accuracy: 0.0,
        pass_through: 0.0,
        retention: 0.0,
        true_supported: 0,
        false_supported: 0,
        true_struck: 0,
        false_struck: 0,
        by_kind: BTreeMap::new(),
        strike_reasons: BTreeMap::new(),
        mean_ms_per_pair: 0.0,
        misjudged: Vec::new(),
    };
    for p in pairs {
        let j = judge.judge(&p.claim, &p.evidence());
        let kind = p.kind.clone().unwrap_or_else(|| "-".into());
        let k = r.by_kind.entry(kind).or_default();
        k.label = Some(p.label);
        k.pairs += 1;
        if j.supported {
            k.judged_supported += 1;
        } else {
            let why = j.reason.as_deref().unwrap_or("");
            let head = why.split(':').next().unwrap_or(why).to_string();
            *r.strike_reasons.entry(head).or_default() += 1;
        }
        if (p.label == Label::Supported) != j.supported {
            r.misjudged.push(Misjudged {
                id: p.id.clone(),
                kind: p.kind.clone(),
                label: p.label,
                claim: p.claim.clone(),
                confidence: j.confidence,
                reason: j.reason.clone(),
            });
        }
        match (p.label, j.supported) {
            (Label::Supported, true) => r.true_supported += 1,
            (Label::Supported, false) => r.false_struck += 1,
            (Label::Unsupported, true) => r.false_supported += 1,
            (Label::Unsupported, false) => r.true_struck += 1,
        }
    }
    r.supported = r.true_supported + r.false_struck;
    r.unsupported = r.false_supported + r.true_struck;
    let share = |n: usize, d: usize| if d == 0 { 0.0 } else { n as f64 / d as f64 };
    r.retention = share(r.true_supported, r.supported);
    r.pass_through = share(r.false_supported, r.unsupported);
    r.balanced_accuracy = (r.retention + (1.0 - r.pass_through)) / 2.0;
    r.mean_ms_per_pair = t0.elapsed().as_secs_f64() * 1000.0 / pairs.len().max(1) as f64;
    r
}

/// Train the learned judge on `pairs`: logistic regression over the
/// analysis features, then the threshold that keeps the training
/// pass-through at or below `max_pass_through`. Deterministic.
pub fn train_judge(
    pairs: &[Pair],
    max_pass_through: f32,
    mut trained_on: serde_json::Value,
) -> crate::verify::learned::Weights {
    use crate::verify::learned::{
        Example, FEATURES, WEIGHTS_FORMAT, Weights, features, fit, pick_threshold,
    };
    let examples: Vec<Example> = pairs
        .iter()
        .map(|p| Example {
            x: features(&crate::verify::rules::analyse(&p.claim, &p.evidence())),
            supported: p.label == Label::Supported,
        })
        .collect();
    let w = fit(&examples, 1e-3, 4000);
    let threshold = pick_threshold(&examples, &w, max_pass_through);
    let weights = Weights {
        format: WEIGHTS_FORMAT,
        features: FEATURES.iter().map(|f| f.to_string()).collect(),
        weights: w.iter().map(|v| (v * 1e4).round() / 1e4).collect(),
        threshold: (threshold * 1e4).round() / 1e4,
        trained_on: serde_json::Value::Null,
    };
    let judge = crate::verify::LearnedJudge {
        weights: weights.clone(),
    };
    let r = evaluate(pairs, &judge);
    if let Some(o) = trained_on.as_object_mut() {
        o.insert(
            "training_figures".into(),
            serde_json::json!({
                "balanced_accuracy": (r.balanced_accuracy * 1e4).round() / 1e4,
                "pass_through": (r.pass_through * 1e4).round() / 1e4,
                "retention": (r.retention * 1e4).round() / 1e4,
            }),
        );
    }
    Weights {
        trained_on,
        ..weights
    }
}

// ---------------------------------------------------------------- SQuAD

#[derive(Deserialize)]
struct SquadFile {
    data: Vec<SquadArticle>,
}

#[derive(Deserialize)]
struct SquadArticle {
    paragraphs: Vec<SquadParagraph>,
}

#[derive(Deserialize)]
struct SquadParagraph {
    context: String,
    qas: Vec<SquadQa>,
}

#[derive(Deserialize)]
struct SquadQa {
    id: String,
    answers: Vec<SquadAnswer>,
}

#[derive(Deserialize)]
struct SquadAnswer {
    text: String,
    answer_start: usize,
}

/// Parse "A-B" (1-based, inclusive).
pub fn parse_articles(s: &str) -> std::result::Result<RangeInclusive<usize>, String> {
    let (a, b) = s
        .split_once('-')
        .ok_or_else(|| format!("`{s}` is not a range; write FIRST-LAST, e.g. 1-24"))?;
    let a: usize = a
        .trim()
        .parse()
        .map_err(|_| format!("`{a}` is not a number"))?;
    let b: usize = b
        .trim()
        .parse()
        .map_err(|_| format!("`{b}` is not a number"))?;
    if a == 0 || b < a {
        return Err(format!(
            "`{s}`: articles count from 1 and the range must not be empty"
        ));
    }
    Ok(a..=b)
}

/// Adversarial pairs from SQuAD v1.1 articles `articles` (1-based).
///
/// For each question, the sentence of the paragraph that holds the gold
/// answer gives supported claims (the sentence verbatim, the clause that
/// holds the answer, a white-space and punctuation variant) and
/// unsupported ones (a number changed, a date changed, a name swapped for
/// another from the same article, a negation inserted or removed, the
/// answer replaced by another question's answer on the same paragraph, and
/// the sentence paired with another paragraph of the same article). Each
/// sentence is used once. The evidence is always a whole paragraph.
pub fn squad_pairs(path: &Path, articles: RangeInclusive<usize>, seed: u64) -> Result<Vec<Pair>> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let file: SquadFile = serde_json::from_str(&text).map_err(|e| Error::BadInput {
        path: path.to_path_buf(),
        line: e.line(),
        message: format!("not a SQuAD v1.1 file: {e}"),
    })?;
    if *articles.end() > file.data.len() {
        return Err(Error::BadInput {
            path: path.to_path_buf(),
            line: 0,
            message: format!(
                "asked for articles up to {}, but the file has {}",
                articles.end(),
                file.data.len()
            ),
        });
    }
    let mut out = Vec::new();
    for ai in articles {
        let art = &file.data[ai - 1];
        // Names seen anywhere in the article, for entity swaps.
        let mut pool: Vec<String> = Vec::new();
        for p in &art.paragraphs {
            for n in crate::verify::names(&p.context) {
                if !pool.contains(&n) {
                    pool.push(n);
                }
            }
        }
        for (pi, para) in art.paragraphs.iter().enumerate() {
            let mut rng = Rng::new(seed, ai, pi);
            let ctx = &para.context;
            let spans = crate::segment::sentence_spans(ctx);
            let mut used: HashSet<usize> = HashSet::new();
            let answers: Vec<&SquadAnswer> =
                para.qas.iter().filter_map(|q| q.answers.first()).collect();
            for qa in &para.qas {
                let Some(ans) = qa.answers.first() else {
                    continue;
                };
                // SQuAD counts answer_start in characters.
                let at = crate::text::char_to_byte(ctx, ans.answer_start);
                if ctx.get(at..at + ans.text.len()) != Some(ans.text.as_str()) {
                    continue;
                }
                let Some(si) = spans.iter().position(|r| r.start <= at && at < r.end) else {
                    continue;
                };
                if !used.insert(si) {
                    continue;
                }
                let r = spans[si].clone();
                let sentence = &ctx[r.clone()];
                if sentence.split_whitespace().count() < 5 {
                    continue;
                }
                let id = |kind: &str| format!("squad-{ai}-{pi}-{}-{kind}", qa.id);
                let mut push = |kind: &str, claim: String, evidence: &str, label: Label| {
                    out.push(Pair {
                        id: id(kind),
                        claim,
                        evidence: EvidenceField::Text(evidence.to_string()),
                        label,
                        kind: Some(kind.to_string()),
                    });
                };
                push("verbatim", sentence.to_string(), ctx, Label::Supported);
                let a_in = at - r.start;
                if let Some(c) = clause_with(sentence, a_in) {
                    push("clause", c, ctx, Label::Supported);
                }
                push(
                    "variant",
                    punct_variant(sentence, &mut rng),
                    ctx,
                    Label::Supported,
                );
                if let Some(c) = change_number(sentence, &mut rng) {
                    push("number", c, ctx, Label::Unsupported);
                }
                if let Some(c) = change_date(sentence, &mut rng) {
                    push("date", c, ctx, Label::Unsupported);
                }
                if let Some(c) = swap_entity(sentence, ctx, &pool, &mut rng) {
                    push("entity", c, ctx, Label::Unsupported);
                }
                if let Some(c) = flip_negation(sentence) {
                    push("negation", c, ctx, Label::Unsupported);
                }
                let rel = at - r.start;
                if sentence.get(rel..rel + ans.text.len()) == Some(ans.text.as_str()) {
                    let others: Vec<&&SquadAnswer> = answers
                        .iter()
                        .filter(|o| {
                            !o.text.eq_ignore_ascii_case(&ans.text)
                                && !sentence.to_lowercase().contains(&o.text.to_lowercase())
                                && !o.text.to_lowercase().contains(&ans.text.to_lowercase())
                        })
                        .collect();
                    if !others.is_empty() {
                        let o = others[rng.below(others.len())];
                        let claim = format!(
                            "{}{}{}",
                            &sentence[..rel],
                            o.text,
                            &sentence[rel + ans.text.len()..]
                        );
                        push("answer", claim, ctx, Label::Unsupported);
                    }
                }
                let candidates: Vec<usize> = (0..art.paragraphs.len())
                    .filter(|&j| j != pi && !art.paragraphs[j].context.contains(ans.text.as_str()))
                    .collect();
                if !candidates.is_empty() {
                    let j = candidates[rng.below(candidates.len())];
                    push(
                        "other-paragraph",
                        sentence.to_string(),
                        &art.paragraphs[j].context,
                        Label::Unsupported,
                    );
                }
            }
        }
    }
    Ok(out)
}

/// The clause of `sentence` that holds byte `at`: split at commas,
/// semicolons and colons; kept when it has at least five words and is
/// shorter than the sentence.
fn clause_with(sentence: &str, at: usize) -> Option<String> {
    let mut start = 0;
    let digit_at = |i: usize| sentence.as_bytes().get(i).is_some_and(u8::is_ascii_digit);
    for (i, ch) in sentence
        .char_indices()
        .chain(std::iter::once((sentence.len(), ',')))
    {
        // A comma inside a figure ("53,000") is not a clause break.
        let in_figure =
            ch == ',' && i > 0 && i + 1 < sentence.len() && digit_at(i - 1) && digit_at(i + 1);
        if matches!(ch, ',' | ';' | ':') && !in_figure {
            if start <= at && at < i {
                let c = sentence[start..i].trim().trim_end_matches('.').trim();
                let words = c.split_whitespace().count();
                if words >= 5 && c.len() + 3 < sentence.len() {
                    return Some(c.to_string());
                }
                return None;
            }
            start = i + ch.len_utf8();
        }
    }
    None
}

fn punct_variant(s: &str, rng: &mut Rng) -> String {
    match rng.below(3) {
        0 => s.replace(", ", " , ").replace("  ", " "),
        1 => format!("  {}  ", s.trim_end_matches('.').replace(' ', "  ")),
        _ => s.replace(',', "").replace('"', "\u{201C}"),
    }
}

fn change_number(s: &str, rng: &mut Rng) -> Option<String> {
    static NUM: std::sync::LazyLock<regex::Regex> =
        std::sync::LazyLock::new(|| regex::Regex::new(r"\b\d+(?:[.,]\d+)*\b").unwrap());
    let (_, rest) = crate::verify::dates(s);
    let ms: Vec<regex::Match<'_>> = NUM
        .find_iter(&rest)
        .filter(|m| !(m.as_str().len() == 4 && m.as_str().starts_with(['1', '2'])))
        .collect();
    if ms.is_empty() {
        return None;
    }
    let m = ms[rng.below(ms.len())];
    let digits: Vec<char> = m.as_str().chars().collect();
    // Change one significant digit so the figure stays plausible.
    let idx = digits
        .iter()
        .position(|c| c.is_ascii_digit() && *c != '0')
        .unwrap_or(0);
    let d = digits[idx].to_digit(10).unwrap_or(0);
    let nd = (d + 1 + rng.below(8) as u32) % 10;
    let nd = if nd == 0 && idx == 0 { 1 + (d % 9) } else { nd };
    if nd == d {
        return None;
    }
    let mut changed = digits.clone();
    changed[idx] = char::from_digit(nd, 10).unwrap();
    let new: String = changed.into_iter().collect();
    Some(format!("{}{}{}", &s[..m.start()], new, &s[m.end()..]))
}

fn change_date(s: &str, rng: &mut Rng) -> Option<String> {
    static YEAR: std::sync::LazyLock<regex::Regex> =
        std::sync::LazyLock::new(|| regex::Regex::new(r"\b(1[5-9]\d\d|20\d\d)\b").unwrap());
    static MONTH: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(r"\b(January|February|March|April|May|June|July|August|September|October|November|December)\b").unwrap()
    });
    const M: [&str; 12] = [
        "January",
        "February",
        "March",
        "April",
        "May",
        "June",
        "July",
        "August",
        "September",
        "October",
        "November",
        "December",
    ];
    let years: Vec<regex::Match<'_>> = YEAR.find_iter(s).collect();
    let months: Vec<regex::Match<'_>> = MONTH
        .find_iter(s)
        .filter(|m| {
            m.as_str() != "May"
                || s[m.end()..]
                    .trim_start()
                    .starts_with(|c: char| c.is_ascii_digit())
        })
        .collect();
    if years.is_empty() && months.is_empty() {
        return None;
    }
    if !years.is_empty() && (months.is_empty() || rng.below(2) == 0) {
        let m = years[rng.below(years.len())];
        let y: i32 = m.as_str().parse().ok()?;
        let delta = [1, 2, 3, 5, 10][rng.below(5)] * if rng.below(2) == 0 { 1 } else { -1 };
        return Some(format!("{}{}{}", &s[..m.start()], y + delta, &s[m.end()..]));
    }
    let m = months[rng.below(months.len())];
    let cur = M.iter().position(|x| *x == m.as_str())?;
    let new = M[(cur + 1 + rng.below(11)) % 12];
    Some(format!("{}{}{}", &s[..m.start()], new, &s[m.end()..]))
}

fn swap_entity(s: &str, ctx: &str, pool: &[String], rng: &mut Rng) -> Option<String> {
    let names = crate::verify::names(s);
    if names.is_empty() {
        return None;
    }
    let target = &names[rng.below(names.len())];
    let ctx_lower = ctx.to_lowercase();
    let options: Vec<&String> = pool
        .iter()
        .filter(|n| *n != target && !ctx_lower.contains(&n.to_lowercase()))
        .collect();
    if options.is_empty() {
        return None;
    }
    let new = options[rng.below(options.len())];
    let re = regex::Regex::new(&format!(r"\b{}\b", regex::escape(target))).ok()?;
    let out = re.replace_all(s, new.as_str()).into_owned();
    (out != s).then_some(out)
}

fn flip_negation(s: &str) -> Option<String> {
    static NEG: std::sync::LazyLock<regex::Regex> =
        std::sync::LazyLock::new(|| regex::Regex::new(r"\b(not|never) ").unwrap());
    static NT: std::sync::LazyLock<regex::Regex> =
        std::sync::LazyLock::new(|| regex::Regex::new(r"\b(\w+)n't\b").unwrap());
    static AUX: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(
            r"\b(is|was|are|were|has|had|have|can|will|could|would|should|did|does|do|must|may)\b ",
        )
        .unwrap()
    });
    if let Some(m) = NEG.find(s) {
        return Some(format!("{}{}", &s[..m.start()], &s[m.end()..]));
    }
    if let Some(c) = NT.captures(s) {
        let m = c.get(0).unwrap();
        let base = match &c[1] {
            "won" => "will",
            "can" => "can",
            b => b,
        };
        return Some(format!("{}{}{}", &s[..m.start()], base, &s[m.end()..]));
    }
    let m = AUX.find(s)?;
    Some(format!("{}not {}", &s[..m.end()], &s[m.end()..]))
}

// ---------------------------------------------------------------- SciFact

#[derive(Deserialize)]
struct SciClaim {
    id: u64,
    claim: String,
    #[serde(default)]
    evidence: BTreeMap<String, Vec<SciEvidence>>,
}

#[derive(Deserialize)]
struct SciEvidence {
    sentences: Vec<usize>,
    label: String,
}

/// Pairs from SciFact: one per evidence set, the claim against its
/// rationale sentences; SUPPORT → supported, CONTRADICT → unsupported.
pub fn scifact_pairs(claims: &Path, corpus: &Path) -> Result<Vec<Pair>> {
    let mut abstracts: BTreeMap<String, Vec<String>> = BTreeMap::new();
    for v in read_jsonl::<serde_json::Value>(corpus, "a SciFact corpus line")? {
        let sents: Vec<String> = v["abstract"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|s| s.as_str().map(str::to_string))
                    .collect()
            })
            .unwrap_or_default();
        abstracts.insert(v["doc_id"].to_string(), sents);
    }
    let claims_list: Vec<SciClaim> = read_jsonl(claims, "a SciFact claim line")?;
    let mut out = Vec::new();
    for (i, c) in claims_list.iter().enumerate() {
        for (doc, sets) in &c.evidence {
            let Some(abs) = abstracts.get(doc) else {
                return Err(Error::BadInput {
                    path: claims.to_path_buf(),
                    line: i + 1,
                    message: format!(
                        "claim {} cites abstract {doc}, which the corpus lacks",
                        c.id
                    ),
                });
            };
            for (k, set) in sets.iter().enumerate() {
                let label = match set.label.as_str() {
                    "SUPPORT" => Label::Supported,
                    "CONTRADICT" => Label::Unsupported,
                    _ => continue,
                };
                let evidence: Vec<String> = set
                    .sentences
                    .iter()
                    .filter_map(|&s| abs.get(s).cloned())
                    .collect();
                out.push(Pair {
                    id: format!("scifact-{}-{doc}-{k}", c.id),
                    claim: c.claim.clone(),
                    evidence: EvidenceField::Sentences(evidence),
                    label,
                    kind: Some(set.label.to_lowercase()),
                });
            }
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn perturbations() {
        let mut rng = Rng::new(7, 1, 1);
        let s = "The tower was completed in 1889 and is 300 metres tall.";
        let n = change_number(s, &mut rng).unwrap();
        assert_ne!(n, s);
        assert!(n.contains("1889"), "years are left to the date change: {n}");
        let d = change_date(s, &mut rng).unwrap();
        assert!(!d.contains("1889") && d.contains("300"), "{d}");
        assert_eq!(
            flip_negation(s).unwrap(),
            "The tower was not completed in 1889 and is 300 metres tall."
        );
        assert_eq!(flip_negation("It did not rain.").unwrap(), "It did rain.");
        let c = clause_with(
            "In 1889, the tower was completed by a large crew, after delays.",
            14,
        )
        .unwrap();
        assert_eq!(c, "the tower was completed by a large crew");
        assert_eq!(parse_articles("25-48").unwrap(), 25..=48);
        assert!(parse_articles("0-3").is_err() && parse_articles("9").is_err());
    }

    #[test]
    fn bad_pair_line_names_file_and_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("pairs.jsonl");
        std::fs::write(
            &p,
            "{\"id\":\"a\",\"claim\":\"x\",\"evidence\":\"x\",\"label\":\"supported\"}\n{\"id\":\"b\",\"claim\":\"x\",\"evidence\":\"x\",\"label\":\"maybe\"}\n",
        )
        .unwrap();
        let e = read_pairs(&p).unwrap_err().to_string();
        assert!(e.contains("pairs.jsonl") && e.contains('2'), "{e}");
    }
}
