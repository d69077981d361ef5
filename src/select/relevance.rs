//! The relevance check: a sentence can be supported by its quote and still
//! not answer the question. Each check gives a reason a reporter can read:
//! another year than the one asked about; a proposal that failed
//! (defeated, rejected, not approved) when the question asks what was done;
//! another numbered thing (Pier 5, Amendment No. 3) than the one named; no
//! rate in the unit asked for (a price per tonne, a daily penalty); only
//! money when the question asks how many; the fact asked for withheld
//! (a redacted name or figure).
//!
//! invariant: a check only sets a sentence aside, with a reason naming what
//! differs; it never makes a sentence an answer, and never touches the
//! verifier's verdict.

use regex::Regex;
use std::collections::BTreeSet;
use std::sync::LazyLock;

/// What the check sees of a sentence's record.
#[derive(Debug, Clone, Copy, Default)]
pub struct Context<'a> {
    /// The record's date (`YYYY-MM-DD`, `YYYY-MM` or `YYYY`), when known.
    pub date: Option<&'a str>,
    /// The text that follows the sentence in its record (a motion's
    /// outcome, "CARRIED" or "DEFEATED", often stands on the next line).
    pub after: Option<&'a str>,
}

/// Why `sentence` does not answer `question`, if it does not.
pub fn check(question: &str, sentence: &str, ctx: Context<'_>) -> Option<String> {
    other_year(question, sentence, ctx)
        .or_else(|| failed_proposal(question, sentence, ctx))
        .or_else(|| other_label(question, sentence))
        .or_else(|| no_rate(question, sentence))
        .or_else(|| money_for_a_count(question, sentence))
        .or_else(|| redacted(question, sentence))
}

/// A redaction mark: "[REDACTED - s. 21(1)]", "[withheld]", a run of
/// blocks.
static REDACTION: LazyLock<Regex> = LazyLock::new(|| {
    Regex::new(r"(?i)\[\s*(?:redacted|withheld|exempt|severed)[^\]]*\]|\u{2588}{2,}")
        .expect("static regex")
});

/// A sentence whose name (for a question asking who or which company) or
/// whose only fact of the asked kind is withheld does not answer; it says
/// where the answer was removed, which a reporter may want to challenge.
fn redacted(question: &str, sentence: &str) -> Option<String> {
    use super::AnswerKind;
    if !REDACTION.is_match(sentence) {
        return None;
    }
    let kind = AnswerKind::of(question);
    let open = REDACTION.replace_all(sentence, " ");
    let withheld = match kind {
        AnswerKind::Any => false,
        AnswerKind::Name => true,
        _ => !kind.satisfied_by(&open, question),
    };
    withheld
        .then(|| "supported, but the part that would answer is redacted in this record".to_string())
}

/// "How many" asks for a count; a sentence whose only fresh numbers are
/// amounts of money does not give one.
fn money_for_a_count(question: &str, sentence: &str) -> Option<String> {
    let q = question.to_lowercase();
    if !q.contains("how many") || q.contains("how many dollars") {
        return None;
    }
    if !super::kind::states_money(sentence) {
        return None;
    }
    let counts = super::kind::states_count_besides_money(sentence, question);
    (!counts).then(|| {
        "supported, but states an amount of money, and the question asks how many".to_string()
    })
}

/// The unit of a rate the question asks for: "per tonne", "a pile",
/// "daily", "weekly" (as the unit's noun: tonne, pile, day, week).
fn rate_unit(question: &str) -> Option<String> {
    static PER: LazyLock<Regex> =
        LazyLock::new(|| Regex::new(r"(?i)\b(?:per|each|an?)\s+([a-z]+)\b").expect("static regex"));
    const ADJECTIVES: &[(&str, &str)] = &[
        ("hourly", "hour"),
        ("daily", "day"),
        ("weekly", "week"),
        ("monthly", "month"),
        ("annual", "year"),
        ("yearly", "year"),
    ];
    let q = question.to_lowercase();
    // Only a question about an amount asks for a rate.
    let kind = super::AnswerKind::of(question);
    if !matches!(kind, super::AnswerKind::Money | super::AnswerKind::Quantity) {
        return None;
    }
    for w in q.split(|c: char| !c.is_alphabetic()) {
        if let Some((_, unit)) = ADJECTIVES.iter().find(|(a, _)| *a == w) {
            return Some(unit.to_string());
        }
    }
    // "per tonne", "for each pile"; "a" only before a unit of time or
    // measure ("$40 a tonne"), where it reads as "per".
    const MEASURES: &[&str] = &[
        "hour",
        "day",
        "week",
        "month",
        "year",
        "tonne",
        "ton",
        "metre",
        "meter",
        "kilometre",
        "kilometer",
        "litre",
        "liter",
        "kilogram",
        "pile",
        "unit",
        "trip",
        "sailing",
        "passenger",
        "vehicle",
        "person",
        "head",
    ];
    PER.captures_iter(&q)
        .find(|c| {
            let w = &c[0].to_lowercase();
            w.starts_with("per") || w.starts_with("each") || MEASURES.contains(&&c[1])
        })
        .map(|c| c[1].to_string())
}

fn no_rate(question: &str, sentence: &str) -> Option<String> {
    let unit = rate_unit(question)?;
    let s = sentence.to_lowercase();
    let stem = unit.trim_end_matches('s');
    let stated = [
        format!("per {stem}"),
        format!("a {stem}"),
        format!("an {stem}"),
        format!("each {stem}"),
        format!("/{stem}"),
        format!("/ {stem}"),
    ]
    .iter()
    .any(|p| s.contains(p.as_str()))
        || [
            ("hour", "hourly"),
            ("day", "daily"),
            ("week", "weekly"),
            ("month", "monthly"),
            ("year", "annual"),
            ("year", "yearly"),
        ]
        .iter()
        .any(|(u, adj)| *u == stem && s.contains(adj));
    (!stated)
        .then(|| format!("supported, but states no amount per {stem}, which the question asks for"))
}

static YEAR: LazyLock<Regex> =
    LazyLock::new(|| Regex::new(r"\b(19\d\d|20\d\d)\b").expect("static regex"));

/// Years the question asks about, unless it gives a range or a bound
/// ("before 2020", "between 2019 and 2021", "by 2022"), which this check
/// does not read.
fn asked_years(question: &str) -> BTreeSet<u32> {
    const BOUNDS: &[&str] = &[
        "before", "after", "since", "until", "till", "through", "between", "from", "by", "to",
        "and", "or", "prior", "later", "earlier", "than",
    ];
    let mut out = BTreeSet::new();
    for m in YEAR.find_iter(question) {
        let before = question[..m.start()]
            .trim_end()
            .trim_end_matches([',', '\''])
            .rsplit(|c: char| !c.is_alphanumeric())
            .next()
            .unwrap_or("")
            .to_lowercase();
        // A year right after a month or day belongs to a date: look one
        // word further back for the bound.
        let further = question[..m.start()]
            .split_whitespace()
            .rev()
            .take(3)
            .map(|w| {
                w.trim_matches(|c: char| !c.is_alphanumeric())
                    .to_lowercase()
            })
            .collect::<Vec<_>>();
        if BOUNDS.contains(&before.as_str()) || further.iter().any(|w| BOUNDS.contains(&w.as_str()))
        {
            return BTreeSet::new();
        }
        if let Ok(y) = m.as_str().parse() {
            out.insert(y);
        }
    }
    out
}

fn years(s: &str) -> BTreeSet<u32> {
    YEAR.find_iter(s)
        .filter_map(|m| m.as_str().parse().ok())
        .collect()
}

fn join(ys: &BTreeSet<u32>) -> String {
    let v: Vec<String> = ys.iter().map(u32::to_string).collect();
    match v.len() {
        0 => String::new(),
        1 => v[0].clone(),
        _ => format!("{} and {}", v[..v.len() - 1].join(", "), v[v.len() - 1]),
    }
}

fn other_year(question: &str, sentence: &str, ctx: Context<'_>) -> Option<String> {
    let asked = asked_years(question);
    if asked.is_empty() {
        return None;
    }
    let record_year: Option<u32> = ctx
        .date
        .and_then(|d| d.get(..4))
        .and_then(|y| y.parse().ok());
    if record_year.is_some_and(|y| asked.contains(&y)) {
        return None;
    }
    let stated = years(sentence);
    if !stated.is_empty() {
        if stated.is_disjoint(&asked) {
            return Some(format!(
                "supported, but about {}, not {} as the question asks",
                join(&stated),
                join(&asked)
            ));
        }
        return None;
    }
    let first = *asked.iter().next()?;
    match record_year {
        Some(y) if y < first => Some(format!(
            "supported, but the record is dated {y}, before the {} the question asks about",
            join(&asked)
        )),
        _ => None,
    }
}

/// Words that make a question about a decision, a vote or a plan (or a
/// yes-or-no question), where a failed proposal is the answer.
fn asks_about_a_decision(question: &str) -> bool {
    static DECISION: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)\b(motions?|votes?|voted|voting|propos\w*|approv\w*|reject\w*|defeat\w*|decid\w*|decision\w*|agree\w*|turn(?:ed)? down|happen\w*|outcome|result|fate|why|plan\w*|recommend\w*|request\w*|ask\w*|refus\w*|declin\w*|cancel\w*|postpon\w*|deferr?\w*|withdr[ae]w\w*)\b",
        )
        .expect("static regex")
    });
    static YES_NO: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)^\s*(did|was|were|is|are|has|have|had|does|do|could|would|will|can|should)\b",
        )
        .expect("static regex")
    });
    DECISION.is_match(question) || YES_NO.is_match(question)
}

fn failed_proposal(question: &str, sentence: &str, ctx: Context<'_>) -> Option<String> {
    static FAILED: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)\b(defeated|rejected|voted down|turned down|not (?:been )?approved|did not approve|declined to|was withdrawn|were withdrawn|motion (?:was )?lost|failed to pass|was not held|were not held|never held|never took place|did not take place|did not proceed|was cancell?ed|were cancell?ed)\b",
        )
        .expect("static regex")
    });
    // A motion: its outcome, "CARRIED" or "DEFEATED", often stands on the
    // line after it.
    static MOTION: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"(?i)(^\W*moved by\b|\bmotion\b.*\bthat\b)").expect("static regex")
    });
    // A recommendation, a request or a proposal: what was proposed.
    static PROPOSAL: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(
            r"(?i)(^\W*moved by\b|^\W*(?:\d+\.\s*)?that you approve\b|\bproposed\b|\brecommends? that\b|\basks? (?:treasury board|the board|the minister) to\b)",
        )
        .expect("static regex")
    });
    // A question that asks what happened in the end.
    static OUTCOME_ASKED: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"(?i)\b(end(?:ed)? up|in the end|finally|actually|eventually|ultimately)\b")
            .expect("static regex")
    });
    static FAILED_AFTER: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"^[\s>]*(?i:(defeated|lost|withdrawn|tabled))\b").expect("static regex")
    });
    if asks_about_a_decision(question) {
        return None;
    }
    if let Some(m) = FAILED.find(sentence) {
        return Some(format!(
            "supported, but it reports a proposal that was {}, not what was done",
            m.as_str().to_lowercase()
        ));
    }
    if MOTION.is_match(sentence)
        && let Some(c) = ctx.after.and_then(|a| FAILED_AFTER.captures(a))
    {
        return Some(format!(
            "supported, but it reports a motion that was {}, not what was done",
            c[1].to_lowercase()
        ));
    }
    if OUTCOME_ASKED.is_match(question) && PROPOSAL.is_match(sentence) {
        return Some(
            "supported, but it reports what was proposed, not what was done in the end".into(),
        );
    }
    None
}

/// Numbered or lettered names: "Pier 3", "Ramp 3A", "Amendment No. 4",
/// "Route 90X", "Option B". Months and single capitals are not heads.
fn labels(s: &str) -> Vec<(String, String)> {
    static LABEL: LazyLock<Regex> = LazyLock::new(|| {
        Regex::new(r"\b([A-Z][a-z]{2,})\s+(?:No\.?\s*)?(\d{1,4}[A-Z]?|[A-H])\b")
            .expect("static regex")
    });
    LABEL
        .captures_iter(s)
        .filter(|c| crate::verify::rules::month_num(&c[1]).is_none())
        // A four-digit "label" after a word is a year ("Budget 2021"), not a label.
        .filter(|c| !(c[2].len() == 4 && c[2].chars().all(|ch| ch.is_ascii_digit())))
        .map(|c| (c[1].to_string(), c[2].to_string()))
        .collect()
}

fn other_label(question: &str, sentence: &str) -> Option<String> {
    let asked = labels(question);
    let stated = labels(sentence);
    for (head, id) in &asked {
        let same_head: Vec<&(String, String)> = stated.iter().filter(|(h, _)| h == head).collect();
        if !same_head.is_empty() && !same_head.iter().any(|(_, i)| i == id) {
            let (h, other) = same_head[0];
            return Some(format!(
                "supported, but about {h} {other}, not {head} {id} as the question asks"
            ));
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A motion's outcome often stands on the line after it.
    #[test]
    fn a_motion_is_read_with_its_outcome() {
        let q = "How much did the reopening celebration end up costing?";
        let motion = "Moved by Moulinaux, seconded by Sundaresh, that the board approve a public celebration with a budget not to exceed $35,000.";
        let ask = |question, after| {
            check(
                question,
                motion,
                Context {
                    date: None,
                    after: Some(after),
                },
            )
        };
        let at = |after| ask(q, after);
        assert!(
            at("DEFEATED. In favour: Moulinaux")
                .unwrap()
                .contains("motion that was defeated")
        );
        // Carried, or no outcome in sight: a question about what happened
        // "in the end" is still not answered by a motion.
        assert!(at(" CARRIED.").unwrap().contains("what was proposed"));
        let plain = "How much was the reopening celebration's budget?";
        assert!(ask(plain, " CARRIED.").is_none());
        assert!(ask(plain, "DEFEATED.").is_some());
        // A question about the motion itself takes it as an answer.
        assert!(
            check(
                "What did the motion to hold a celebration propose?",
                motion,
                Context::default()
            )
            .is_none()
        );
    }

    /// (question, sentence, record date, expected reason fragment or None).
    #[test]
    fn relevance_table() {
        let cases: &[(&str, &str, Option<&str>, Option<&str>)] = &[
            // Another year.
            (
                "How much was the dredging contract worth in 2021?",
                "In 2019 the dredging contract was worth $5.1 million.",
                Some("2019-03-01"),
                Some("about 2019, not 2021"),
            ),
            (
                "How much was the dredging contract worth in 2021?",
                "The dredging contract was worth $5.1 million.",
                Some("2019-03-01"),
                Some("dated 2019, before the 2021"),
            ),
            // A later record may speak of the year asked about without naming it.
            (
                "How much was the dredging contract worth in 2021?",
                "The dredging contract was worth $6.4 million.",
                Some("2024-03-01"),
                None,
            ),
            // The record's own year is the year asked about.
            (
                "What did the board decide in 2022 about rents?",
                "The 2018 rent schedule stays in force.",
                Some("2022-04-14"),
                None,
            ),
            // A bound is not a year asked about.
            (
                "What changed in the budget between 2019 and 2021?",
                "In 2020 the budget rose to $49.0 million.",
                Some("2020-04-01"),
                None,
            ),
            (
                "How much had been spent by 2021?",
                "By 2020, $12 million had been spent.",
                Some("2020-12-01"),
                None,
            ),
            // A failed proposal when the question asks what was done.
            (
                "How much did the authority pay for the opening ceremony?",
                "A motion to spend $25,000 on an opening ceremony was defeated.",
                None,
                Some("proposal that was defeated"),
            ),
            // ...but not when the question asks about the decision.
            (
                "What happened to the motion to fund an opening ceremony?",
                "A motion to spend $25,000 on an opening ceremony was defeated.",
                None,
                None,
            ),
            (
                "Did the board give tenants a rent cut?",
                "The board did not approve a general rent reduction.",
                None,
                None,
            ),
            // Another numbered thing.
            (
                "What did the Pier 3 rebuild cost in the end?",
                "The Pier 5 rebuild cost $12.0 million.",
                None,
                Some("about Pier 5, not Pier 3"),
            ),
            (
                "What new completion date did Amendment No. 2 set?",
                "Amendment No. 3 moved Substantial Completion to 30 June 2023.",
                None,
                Some("about Amendment 3, not Amendment 2"),
            ),
            (
                "What did the Pier 3 rebuild cost in the end?",
                "The final cost of the Pier 3 rebuild was $65.1 million.",
                None,
                None,
            ),
            // A rate in the unit asked for.
            (
                "What price per tonne did the contractor bid for structural steel?",
                "The contractor's bid for structural steel was $4.2 million.",
                None,
                Some("no amount per tonne"),
            ),
            (
                "What price per tonne did the contractor bid for structural steel?",
                "Structural steel was priced at $3,150 per tonne.",
                None,
                None,
            ),
            (
                "What daily penalty applies if the dredging is late?",
                "Liquidated damages are $4,000 for each day of delay.",
                None,
                None,
            ),
            (
                "What daily penalty applies if the dredging is late?",
                "Liquidated damages are capped at $200,000.",
                None,
                Some("no amount per day"),
            ),
            // Not a rate: "a" before something other than a unit.
            (
                "How much did a consultant charge for the review?",
                "The review cost $18,000.",
                None,
                None,
            ),
            // A count, not money.
            (
                "How many change orders were approved by the end of 2019?",
                "The approved project budget for all the works stands at $52.4 million.",
                None,
                Some("asks how many"),
            ),
            (
                "How many change orders were approved by the end of 2019?",
                "27 change orders, worth $1.2 million, had been approved.",
                None,
                None,
            ),
            // Withheld.
            (
                "Which company made the pump that failed its factory test?",
                "Our supplier, [REDACTED - s. 21(1)], told us the pump failed its factory test.",
                None,
                Some("redacted"),
            ),
            (
                "How much was the settlement?",
                "The settlement of [REDACTED] was paid to the claimant.",
                None,
                Some("redacted"),
            ),
            (
                "How much was the settlement?",
                "The settlement of $2.1 million was approved by [REDACTED].",
                None,
                None,
            ),
            // A month is not a label.
            (
                "What happened on May 3?",
                "On May 4 the ramp was closed.",
                None,
                None,
            ),
        ];
        for (q, s, date, want) in cases {
            let got = check(
                q,
                s,
                Context {
                    date: *date,
                    after: None,
                },
            );
            match (want, &got) {
                (None, None) => {}
                (Some(w), Some(g)) if g.contains(w) => {}
                _ => panic!("{q} / {s}: expected {want:?}, got {got:?}"),
            }
        }
    }
}
