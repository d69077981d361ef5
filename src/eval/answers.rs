//! Answer metrics as the SQuAD v1.1 evaluation script defines them
//! (Rajpurkar et al. 2016, `evaluate-v1.1.py`): answers are normalised by
//! lower-casing, removing punctuation, removing the articles "a", "an" and
//! "the", and collapsing white space; exact match compares the normalised
//! strings; F1 is over the normalised tokens as a bag (shared tokens
//! counted with multiplicity); against several gold answers the best
//! score counts.

use std::collections::HashMap;

/// SQuAD v1.1's `normalize_answer`: lower case, punctuation removed
/// (ASCII punctuation, as Python's `string.punctuation`), articles removed,
/// white space collapsed.
pub fn normalize_answer(s: &str) -> String {
    let lower = s.to_lowercase();
    let no_punct: String = lower
        .chars()
        .filter(|c| !c.is_ascii_punctuation())
        .collect();
    no_punct
        .split_whitespace()
        .filter(|w| !matches!(*w, "a" | "an" | "the"))
        .collect::<Vec<_>>()
        .join(" ")
}

/// 1 when the normalised strings are equal.
pub fn exact_match(prediction: &str, gold: &str) -> f64 {
    f64::from(u8::from(
        normalize_answer(prediction) == normalize_answer(gold),
    ))
}

/// Token F1 between the normalised prediction and gold answer.
pub fn f1(prediction: &str, gold: &str) -> f64 {
    let p = normalize_answer(prediction);
    let g = normalize_answer(gold);
    let pt: Vec<&str> = p.split_whitespace().collect();
    let gt: Vec<&str> = g.split_whitespace().collect();
    let mut counts: HashMap<&str, i64> = HashMap::new();
    for t in &gt {
        *counts.entry(t).or_default() += 1;
    }
    let mut same = 0;
    for t in &pt {
        if let Some(c) = counts.get_mut(t)
            && *c > 0
        {
            *c -= 1;
            same += 1;
        }
    }
    if same == 0 {
        return 0.0;
    }
    let precision = same as f64 / pt.len() as f64;
    let recall = same as f64 / gt.len() as f64;
    2.0 * precision * recall / (precision + recall)
}

/// The best score of `metric` over the gold answers (0 when there are none),
/// as `metric_max_over_ground_truths` does.
pub fn best_over(metric: fn(&str, &str) -> f64, prediction: &str, golds: &[String]) -> f64 {
    golds
        .iter()
        .map(|g| metric(prediction, g))
        .fold(0.0, f64::max)
}

/// Whether a normalised gold answer appears, on word boundaries, in the
/// normalised text.
pub fn contains_answer(text: &str, golds: &[String]) -> bool {
    let t = format!(" {} ", normalize_answer(text));
    golds.iter().any(|g| {
        let g = normalize_answer(g);
        !g.is_empty() && t.contains(&format!(" {g} "))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Cases worked by hand following the definitions in SQuAD v1.1's
    /// `evaluate-v1.1.py` (normalize_answer, exact_match_score, f1_score).
    #[test]
    fn squad_normalisation_and_scores() {
        let norm = [
            ("The Cat!", "cat"),
            ("  an  Apple,  a day ", "apple day"),
            ("Theatre", "theatre"),
            ("$1,400,000", "1400000"),
            ("Vessane Gulls", "vessane gulls"),
            ("the", ""),
        ];
        for (input, want) in norm {
            assert_eq!(normalize_answer(input), want, "{input}");
        }
        assert_eq!(exact_match("the Vessane Gulls", "Vessane Gulls!"), 1.0);
        assert_eq!(exact_match("Gulls", "Vessane Gulls"), 0.0);
        // prediction {cat, sat}, gold {cat, sat, on, mat}: P = 1, R = 1/2.
        assert!((f1("the cat sat", "a cat sat on the mat") - 2.0 / 3.0).abs() < 1e-12);
        // Multiplicity: prediction {to, to, be}, gold {to, be}: 2 shared;
        // P = 2/3, R = 1, F1 = 0.8.
        assert!((f1("to to be", "to be") - 0.8).abs() < 1e-12);
        assert_eq!(f1("nothing shared", "other words"), 0.0);
        assert_eq!(f1("", "gold"), 0.0);
        let golds = vec!["Vessane Gulls".to_string(), "Gulls".to_string()];
        assert_eq!(best_over(exact_match, "gulls", &golds), 1.0);
        assert!(contains_answer("In 2016 the Vessane Gulls won.", &golds));
        assert!(!contains_answer("The Gullstadium.", &["Gulls".into()]));
    }
}
