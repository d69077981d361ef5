//! Features of a candidate answer sentence, the same for training (WikiQA,
//! SQuAD) and for answering: how close the sentence is to the question in
//! meaning (embedding cosines, when a model is loaded) and in words
//! (IDF-weighted overlap, in the sentence and in its passage), whether it
//! states the kind of fact asked for, and where it sits.
//!
//! invariant: a feature is computed from the question, the sentence, its
//! passage and their vectors only; nothing here knows where they came from.

use super::kind::AnswerKind;
use crate::text::{content_terms, is_stopword, term_spans};
use std::collections::{HashMap, HashSet};

/// Which features a model reads: with embedding cosines, or words only.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FeatureSet {
    Semantic,
    Lexical,
}

/// Every feature, in order. `bias` is the constant 1.
pub const SEMANTIC: [&str; 15] = [
    "bias",
    "cos_sentence",
    "cos_titled",
    "cos_window",
    "cos_passage",
    "idf_overlap",
    "idf_context",
    "lexical_fit",
    "term_share",
    "bigrams",
    "kind_fresh",
    "kind_missing",
    "novelty",
    "length",
    "rank",
];

/// The features of the words-only model: [`SEMANTIC`] without the cosines.
pub const LEXICAL: [&str; 11] = [
    "bias",
    "idf_overlap",
    "idf_context",
    "lexical_fit",
    "term_share",
    "bigrams",
    "kind_fresh",
    "kind_missing",
    "novelty",
    "length",
    "rank",
];

impl FeatureSet {
    pub fn names(self) -> &'static [&'static str] {
        match self {
            FeatureSet::Semantic => &SEMANTIC,
            FeatureSet::Lexical => &LEXICAL,
        }
    }
}

/// Inverse document frequency of terms among `sentences` (each sentence a
/// document), as BM25 computes it: `ln(1 + (N - df + 0.5) / (df + 0.5))`.
pub fn local_idf<'a>(sentences: impl Iterator<Item = &'a str>) -> impl Fn(&str) -> f32 {
    let mut df: HashMap<String, usize> = HashMap::new();
    let mut n = 0usize;
    for s in sentences {
        n += 1;
        let terms: HashSet<String> = crate::text::terms(s).into_iter().collect();
        for t in terms {
            *df.entry(t).or_default() += 1;
        }
    }
    move |t: &str| {
        let d = df.get(t).copied().unwrap_or(0) as f32;
        (1.0 + (n as f32 - d + 0.5) / (d + 0.5)).ln()
    }
}

/// A question, analysed once for all its candidates.
#[derive(Debug, Clone)]
pub struct QuestionInfo {
    pub text: String,
    pub kind: AnswerKind,
    /// Content terms (stemmed, no stop words) and their IDF.
    weights: HashMap<String, f32>,
    total: f32,
    /// The same terms weighted by their IDF in the whole collection.
    global: HashMap<String, f32>,
    global_total: f32,
    /// Adjacent content-term pairs.
    bigrams: HashSet<(String, String)>,
    /// Every analysed term of the question.
    terms: HashSet<String>,
}

impl QuestionInfo {
    /// `idf` gives a term's inverse document frequency among the
    /// candidates (see [`local_idf`]), `global` in the whole collection
    /// (the index, or the data set's passages).
    pub fn new(
        question: &str,
        idf: &dyn Fn(&str) -> f32,
        global: &dyn Fn(&str) -> f32,
    ) -> QuestionInfo {
        let content = content_terms(question);
        let mut weights = HashMap::new();
        let mut global_w = HashMap::new();
        for t in &content {
            weights.entry(t.clone()).or_insert_with(|| idf(t).max(0.05));
            global_w
                .entry(t.clone())
                .or_insert_with(|| global(t).max(0.05));
        }
        let total = weights.values().sum();
        let global_total = global_w.values().sum();
        let bigrams = content
            .windows(2)
            .map(|w| (w[0].clone(), w[1].clone()))
            .collect();
        QuestionInfo {
            text: question.to_string(),
            kind: AnswerKind::of(question),
            weights,
            total,
            global: global_w,
            global_total,
            bigrams,
            terms: crate::text::terms(question).into_iter().collect(),
        }
    }
}

/// The passage a candidate comes from: a retrieved chunk, a WikiQA
/// summary, a SQuAD paragraph.
#[derive(Debug, Clone, Default)]
pub struct PassageInfo<'a> {
    /// Analysed terms of the title and the passage's whole text.
    pub context: HashSet<String>,
    /// The passage's vector (title and text), the title's vector.
    pub vector: Option<&'a [f32]>,
    pub title_vector: Option<&'a [f32]>,
    /// 1-based rank of the passage among those retrieved (1 for a
    /// question's only passage).
    pub rank: usize,
}

impl<'a> PassageInfo<'a> {
    pub fn context_of(title: &str, text: &str) -> HashSet<String> {
        let mut c: HashSet<String> = crate::text::terms(title).into_iter().collect();
        c.extend(crate::text::terms(text));
        c
    }
}

/// One candidate sentence.
#[derive(Debug, Clone, Copy)]
pub struct SentenceInfo<'a> {
    pub raw: &'a str,
    pub vector: Option<&'a [f32]>,
    /// The vectors of the sentences before and after it in the passage.
    pub neighbours: [Option<&'a [f32]>; 2],
}

/// `lexical_fit`: least share of the question's weight a sentence must
/// hold itself, the weight of terms found only in its passage, and the
/// length over which a sentence is scored down.
const MIN_OWN: f32 = 0.2;
const CONTEXT_WEIGHT: f32 = 0.75;
const LONG_SENTENCE: f32 = 45.0;

/// Sentences over this many words count as this long.
const LONG: f32 = 60.0;

/// The feature row of one candidate, in the order of `set.names()`.
pub fn features(
    set: FeatureSet,
    q: &QuestionInfo,
    qv: Option<&[f32]>,
    p: &PassageInfo<'_>,
    s: &SentenceInfo<'_>,
) -> Vec<f32> {
    let spans = term_spans(s.raw);
    let mut own: HashSet<&str> = HashSet::new();
    let mut content: Vec<&str> = Vec::new();
    let mut positions: Vec<usize> = Vec::new();
    for (i, (t, r)) in spans.iter().enumerate() {
        if q.weights.contains_key(t) {
            own.insert(t.as_str());
            positions.push(i);
        }
        if !is_stopword(&s.raw[r.clone()].to_lowercase()) {
            content.push(t.as_str());
        }
    }
    let share = |w: f32| if q.total > 0.0 { w / q.total } else { 0.0 };
    let idf_overlap = share(own.iter().map(|t| q.weights[*t]).sum());
    let idf_context = share(
        q.weights
            .iter()
            .filter(|(t, _)| !own.contains(t.as_str()) && p.context.contains(*t))
            .map(|(_, w)| *w)
            .sum(),
    );
    // The rule-based extractive score, with the collection's IDF: the
    // question's weighted terms in the sentence, and at three quarters
    // weight in its passage; matches
    // close together; long sentences scored down; nothing under a fifth
    // of the question's weight in the sentence itself.
    let gshare = |w: f32| {
        if q.global_total > 0.0 {
            w / q.global_total
        } else {
            0.0
        }
    };
    let g_own = gshare(own.iter().map(|t| q.global[*t]).sum());
    let g_context = gshare(
        q.global
            .iter()
            .filter(|(t, _)| !own.contains(t.as_str()) && p.context.contains(*t))
            .map(|(_, w)| *w)
            .sum(),
    );
    let lexical_fit = if g_own < MIN_OWN {
        0.0
    } else {
        let proximity = match (positions.first(), positions.last()) {
            (Some(a), Some(b)) => positions.len() as f32 / (b - a + 1) as f32,
            _ => 0.0,
        };
        let words = spans.len() as f32;
        let length = if words > LONG_SENTENCE {
            (LONG_SENTENCE / words).sqrt()
        } else {
            1.0
        };
        (g_own + CONTEXT_WEIGHT * g_context) * (0.85 + 0.15 * proximity) * length
    };
    let term_share = if q.weights.is_empty() {
        0.0
    } else {
        own.len() as f32 / q.weights.len() as f32
    };
    let sentence_pairs: HashSet<(&str, &str)> = content.windows(2).map(|w| (w[0], w[1])).collect();
    let bigrams = if q.bigrams.is_empty() {
        0.0
    } else {
        q.bigrams
            .iter()
            .filter(|(a, b)| sentence_pairs.contains(&(a.as_str(), b.as_str())))
            .count() as f32
            / q.bigrams.len() as f32
    };
    let asks = q.kind != AnswerKind::Any;
    let fresh = asks && q.kind.satisfied_by(s.raw, &q.text);
    let novelty = if content.is_empty() {
        0.0
    } else {
        content.iter().filter(|t| !q.terms.contains(**t)).count() as f32 / content.len() as f32
    };
    let flag = |b: bool| if b { 1.0 } else { 0.0 };
    let cos = |a: Option<&[f32]>| match (qv, a) {
        (Some(q), Some(v)) => crate::embed::cosine(q, v),
        _ => 0.0,
    };
    let semantic = set == FeatureSet::Semantic;
    let cos_sentence = if semantic { cos(s.vector) } else { 0.0 };
    let cos_titled = match (semantic, s.vector, p.title_vector) {
        (true, Some(v), Some(t)) => {
            let mut sum: Vec<f32> = v.iter().zip(t).map(|(a, b)| a + b).collect();
            crate::embed::normalise(&mut sum);
            cos(Some(&sum))
        }
        _ => cos_sentence,
    };
    // The sentence read with its neighbours: the sum of the three vectors.
    let cos_window = match (semantic, s.vector) {
        (true, Some(v)) => {
            let mut sum = v.to_vec();
            for n in s.neighbours.iter().flatten() {
                sum.iter_mut().zip(*n).for_each(|(a, b)| *a += b);
            }
            crate::embed::normalise(&mut sum);
            cos(Some(&sum)).max(cos_sentence)
        }
        _ => cos_sentence,
    };
    let value = |name: &str| -> f32 {
        match name {
            "bias" => 1.0,
            "cos_sentence" => cos_sentence,
            "cos_titled" => cos_titled,
            "cos_window" => cos_window,
            "cos_passage" => cos(p.vector),
            "idf_overlap" => idf_overlap,
            "idf_context" => idf_context,
            "lexical_fit" => lexical_fit,
            "term_share" => term_share,
            "bigrams" => bigrams,
            "kind_fresh" => flag(fresh),
            "kind_missing" => flag(asks && !fresh),
            "novelty" => novelty,
            "length" => (spans.len() as f32).min(LONG) / LONG,
            "rank" => 1.0 / p.rank.max(1) as f32,
            other => unreachable!("no feature named {other}"),
        }
    };
    set.names().iter().map(|n| value(n)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(q: &str, s: &str, title: &str, passage: &str) -> HashMap<&'static str, f32> {
        let qi = QuestionInfo::new(q, &|_| 1.0, &|_| 1.0);
        let p = PassageInfo {
            context: PassageInfo::context_of(title, passage),
            rank: 2,
            ..Default::default()
        };
        let x = features(
            FeatureSet::Lexical,
            &qi,
            None,
            &p,
            &SentenceInfo {
                raw: s,
                vector: None,
                neighbours: [None, None],
            },
        );
        LEXICAL.iter().copied().zip(x).collect()
    }

    /// Worked by hand: the question's content terms are {contract, award,
    /// harbour, work} (stemmed; "who", "the", "was", "for" are stop words).
    #[test]
    fn overlap_features_worked_by_hand() {
        let f = row(
            "Who was the contract for the harbour works awarded to?",
            "The contract was awarded to Brindlemoor Civil.",
            "Harbour works tender report",
            "The contract was awarded to Brindlemoor Civil. Four firms bid.",
        );
        assert_eq!(f["bias"], 1.0);
        assert!((f["term_share"] - 0.5).abs() < 1e-6, "{f:?}");
        assert!((f["idf_overlap"] - 0.5).abs() < 1e-6);
        // "harbour" and "works" are in the title, not the sentence.
        assert!((f["idf_context"] - 0.5).abs() < 1e-6);
        // A "who" question, and the sentence names someone new.
        assert_eq!((f["kind_fresh"], f["kind_missing"]), (1.0, 0.0));
        assert!((f["rank"] - 0.5).abs() < 1e-6);
        // Content terms of the sentence: contract, award, brindlemoor,
        // civil; two are new.
        assert!((f["novelty"] - 0.5).abs() < 1e-6, "{}", f["novelty"]);
    }

    #[test]
    fn a_sentence_without_the_fact_asked_for_is_marked() {
        let f = row(
            "How much did the dredging cost?",
            "The dredging was finished in the spring.",
            "",
            "",
        );
        assert_eq!((f["kind_fresh"], f["kind_missing"]), (0.0, 1.0));
        let f = row(
            "What happened at the meeting?",
            "The dredging was finished in the spring.",
            "",
            "",
        );
        assert_eq!((f["kind_fresh"], f["kind_missing"]), (0.0, 0.0));
    }

    #[test]
    fn semantic_rows_carry_four_cosines_first() {
        let qi = QuestionInfo::new("pier budget", &|_| 1.0, &|_| 1.0);
        let qv = [1.0f32, 0.0];
        let sv = [0.0f32, 1.0];
        let tv = [1.0f32, 0.0];
        let pv = [0.6f32, 0.8];
        let p = PassageInfo {
            vector: Some(&pv),
            title_vector: Some(&tv),
            ..Default::default()
        };
        let s = SentenceInfo {
            raw: "The budget rose.",
            vector: Some(&sv),
            neighbours: [None, None],
        };
        let x = features(FeatureSet::Semantic, &qi, Some(&qv), &p, &s);
        assert_eq!(x.len(), SEMANTIC.len());
        assert!(x[1].abs() < 1e-6); // orthogonal sentence
        assert!((x[2] - std::f32::consts::FRAC_1_SQRT_2).abs() < 1e-5); // sentence + title
        assert!(x[3].abs() < 1e-6); // no neighbours: the sentence alone
        assert!((x[4] - 0.6).abs() < 1e-6);
    }
}
