//! What kind of answer a question asks for (an amount, a date, a count, a
//! name), read from its wording, and whether a sentence states such a fact
//! that the question does not already give.
//!
//! invariant: a sentence's facts that also appear in the question never
//! count as an answer.

use std::collections::HashSet;

/// What kind of answer a question asks for, when its wording says so.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnswerKind {
    /// An amount of money: the sentence must state a currency amount the question does not.
    Money,
    /// A count, quantity or duration: the sentence must state a number the
    /// question does not, outside any date, time of day or label ("Pier 3").
    Quantity,
    /// A date: the sentence must state a date or year the question does not.
    Date,
    /// A time of day ("what time did the last ferry leave"): the sentence
    /// must state a clock time the question does not.
    Time,
    /// A person or an organisation ("who", "which company"): the sentence
    /// must name someone the question does not.
    Name,
    Any,
}

impl AnswerKind {
    /// The kind of fact the question's focus asks for. Only a clear
    /// focus counts: a yes-or-no question, or one asking why or how
    /// something happened, asks for no particular kind, whatever money or
    /// date words it holds ("Why did the board refuse to cover the cost?").
    pub fn of(question: &str) -> AnswerKind {
        let q = format!(
            " {} ",
            question.to_lowercase().replace(['?', ',', ';', ':'], " ")
        );
        let has = |ks: &[&str]| ks.iter().any(|k| q.contains(k));
        const YES_NO: &[&str] = &[
            "did", "was", "were", "is", "are", "has", "have", "had", "does", "do", "could",
            "would", "will", "can", "should",
        ];
        let first = q.split_whitespace().next().unwrap_or("");
        if YES_NO.contains(&first)
            || has(&[
                " why ",
                "what reason",
                " how did ",
                " how was ",
                " how were ",
                "what caused",
                "what held",
                " in what way",
            ])
        {
            return AnswerKind::Any;
        }
        // A question that opens by asking who asks for a name, whatever
        // "when" clause follows ("Who was minister when it was signed?").
        if matches!(first, "who" | "whom" | "whose" | "who's") {
            return AnswerKind::Name;
        }
        const DATE: &[&str] = &[
            " when ",
            "what date",
            "which date",
            "what day ",
            "which day ",
            "what year",
            "which year",
            "what month",
            "which month",
        ];
        // "What time did it leave", not "what time of year" or "what time
        // period".
        if has(&[" what time ", "which time "]) && !has(&["time of ", "time period", "time frame"])
        {
            return AnswerKind::Time;
        }
        if has(DATE) {
            return AnswerKind::Date;
        }
        // Money words: nouns that name an amount, and verbs of paying.
        const MONEY_NOUNS: &[&str] = &[
            "amount",
            "cost",
            "costs",
            "price",
            "budget",
            "bill",
            "fee",
            "fees",
            "penalty",
            "penalties",
            "damages",
            "fine",
            "salary",
            "sum",
            "payment",
            "compensation",
            "funding",
            "grant",
            "deficit",
            "revenue",
            "rate",
            "rent",
            "value",
            "bid",
        ];
        const MONEY_VERBS: &[&str] = &[
            " cost ",
            " paid ",
            " pay ",
            " spend ",
            " spent ",
            " charge ",
            " charged ",
            " worth ",
            " owe ",
            " settle ",
            " settled ",
            " fund ",
            " funded ",
        ];
        let words: Vec<&str> = q.split_whitespace().collect();
        // "what/which" followed within three words by a money noun: "what
        // total budget", "what daily penalty", "which price".
        let money_focus = words.iter().enumerate().any(|(i, w)| {
            matches!(*w, "what" | "which")
                && words[i + 1..]
                    .iter()
                    .take(3)
                    .any(|n| MONEY_NOUNS.contains(&n.trim_end_matches("'s")))
        });
        if has(&[" how much ", " how big ", " how large "]) {
            return if has(MONEY_VERBS)
                || words.iter().any(|w| MONEY_NOUNS.contains(w))
                || has(&[" money "])
            {
                AnswerKind::Money
            } else {
                AnswerKind::Quantity
            };
        }
        let what_did = [
            "what did",
            "what does",
            "what do",
            "what would",
            "what will",
            "what had",
        ]
        .iter()
        .any(|k| q.trim_start().starts_with(k));
        if money_focus || (what_did && has(MONEY_VERBS)) {
            return AnswerKind::Money;
        }
        const QUANTITY: &[&str] = &[
            " how many ",
            " how long ",
            " how late ",
            " how early ",
            " how soon ",
            " how far ",
            " how old ",
            " how often ",
            "what percentage",
            "what share",
            "what proportion",
            "what fraction",
            "by how much",
            "what number",
        ];
        if has(QUANTITY) {
            return AnswerKind::Quantity;
        }
        const NAME: &[&str] = &[
            " who ",
            " whom ",
            " whose ",
            " who's ",
            "which company",
            "which firm",
            "which contractor",
            "which consultant",
            "which person",
            "which official",
            "what company",
            "what firm",
            "which organisation",
            "which organization",
            "which agency",
            "which body",
        ];
        // "Which law firm", "what engineering company": a kind of
        // organisation or person after which/what.
        static WHICH_WHO: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
            regex::Regex::new(
                r"\b(?:which|what)\s+(?:[a-z-]+\s+){0,2}(?:company|companies|firm|firms|contractor|consultant|bidder|person|people|official|officials|director|minister|engineer|inspector|surveyor|agency|body|organi[sz]ation|supplier|manufacturer|lawyer|councillor|member|members)\b",
            )
            .expect("static regex")
        });
        if has(NAME) || WHICH_WHO.is_match(&q) {
            return AnswerKind::Name;
        }
        AnswerKind::Any
    }

    /// Whether `sentence` can answer a question of this kind; `question` is
    /// the question itself, whose own figures do not count as an answer.
    pub fn satisfied_by(self, sentence: &str, question: &str) -> bool {
        let fresh = |found: HashSet<String>, asked: HashSet<String>| {
            found.iter().any(|n| !asked.contains(n))
        };
        match self {
            AnswerKind::Any => true,
            // An amount of money is a quantity too.
            AnswerKind::Quantity => {
                fresh(quantities(sentence), quantities(question))
                    || fresh(money(sentence), money(question))
            }
            AnswerKind::Money => fresh(money(sentence), money(question)),
            AnswerKind::Date => fresh(dates_and_years(sentence), dates_and_years(question)),
            AnswerKind::Time => fresh(clock_times(sentence), clock_times(question)),
            AnswerKind::Name => {
                let mut asked = name_keys(question);
                asked.extend(initialisms(question));
                fresh(name_keys(sentence), asked)
            }
        }
    }
}

/// The initials of every run of two to five words of `s`, lower-cased:
/// a sentence's "HPU" is the question's "hydraulic power unit", not a new
/// name.
fn initialisms(s: &str) -> HashSet<String> {
    let words: Vec<char> = s
        .split(|c: char| !c.is_alphanumeric())
        .filter_map(|w| w.chars().next())
        .map(|c| c.to_ascii_lowercase())
        .collect();
    let mut out = HashSet::new();
    for n in 2..=5 {
        for w in words.windows(n) {
            out.insert(w.iter().collect::<String>());
        }
    }
    out
}

/// Capitalised names (people, organisations, places), lower-cased.
/// `s` without the marker of a list item or numbered paragraph ("- ",
/// "(b) ", "2. ", "8.2 ", quoted mail's "> "): the marker is neither a
/// number stated nor the word before a name.
fn unmarked(s: &str) -> std::borrow::Cow<'_, str> {
    static MARKER: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(
            r"^(?:\s*(?:[-*\u{2022}>]|\(?[a-z]{1,3}\)|\(?\d{1,3}[.)]|\d{1,3}(?:\.\d{1,3})+\.?))+\s+",
        )
        .expect("static regex")
    });
    MARKER.replace(s, "")
}

/// A list item's marker does not make the next word a name: the item
/// starts a sentence there.
fn name_keys(s: &str) -> HashSet<String> {
    const PRONOUNS: &[&str] = &["you", "your", "my", "me", "us"];
    crate::verify::names(&unmarked(s))
        .into_iter()
        .map(|n| n.to_lowercase())
        .filter(|n| !PRONOUNS.contains(&n.as_str()))
        .collect()
}

fn number_re() -> &'static regex::Regex {
    static RE: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(
            r"\b\d{1,2}:\d{2}\b|(?:[$€£]\s?)?\d[\d,]*(?:\.\d+)?(?:\s?(?:million|billion|thousand|dollars|m\b|k\b))?",
        )
        .expect("static regex")
    });
    &RE
}

fn digits(m: &str) -> String {
    m.chars()
        .filter(|c| c.is_ascii_digit() || *c == '.')
        .collect::<String>()
        .trim_end_matches('.')
        .to_string()
}

/// Numbers that state a quantity: not in a date, not a time of day, and not
/// a label such as "Pier 3", "No. 4" or "90X".
fn quantities(s: &str) -> HashSet<String> {
    const WORDS: &[&str] = &[
        "two",
        "three",
        "four",
        "five",
        "six",
        "seven",
        "eight",
        "nine",
        "ten",
        "eleven",
        "twelve",
        "twenty",
        "thirty",
        "forty",
        "fifty",
        "hundred",
        "hundreds",
        "thousand",
        "thousands",
        "million",
        "millions",
        "dozen",
        "half",
        "quarter",
        "third",
    ];
    let (_, rest) = crate::verify::dates(&unmarked(s));
    let mut out: HashSet<String> = number_re()
        .find_iter(&rest)
        .filter(|m| {
            let before = rest[..m.start()].trim_end();
            let after = rest[m.end()..].chars().next();
            let glued = rest[..m.start()]
                .chars()
                .next_back()
                .is_some_and(|c| !c.is_whitespace() && !matches!(c, '(' | '"' | '\u{201C}'));
            let label = glued
                || before
                    .rsplit(|c: char| c.is_whitespace())
                    .next()
                    .is_some_and(|w| {
                        w.chars().next().is_some_and(char::is_uppercase) || w.ends_with('.')
                    });
            let year = m.as_str().len() == 4 && is_year(m.as_str());
            !m.as_str().contains(':') && !after.is_some_and(char::is_alphabetic) && !label && !year
        })
        .map(|m| digits(m.as_str()))
        .filter(|d| !d.is_empty())
        .collect();
    for w in rest.split(|c: char| !c.is_alphabetic()) {
        let w = w.to_lowercase();
        if WORDS.contains(&w.as_str()) {
            out.insert(w);
        }
    }
    out
}

fn is_year(s: &str) -> bool {
    s.parse::<u32>().is_ok_and(|y| (1500..2200).contains(&y))
}

/// Whether `s` states an amount with a currency sign ("$84,000").
pub(crate) fn states_money(s: &str) -> bool {
    number_re()
        .find_iter(s)
        .any(|m| m.as_str().starts_with(['$', '€', '£']))
}

/// Whether `s` states a count or quantity, not an amount of money, that
/// `question` does not give.
pub(crate) fn states_count_besides_money(s: &str, question: &str) -> bool {
    let rest = number_re().replace_all(s, |c: &regex::Captures<'_>| {
        if is_money(&c[0]) {
            " ".to_string()
        } else {
            c[0].to_string()
        }
    });
    let asked = quantities(question);
    quantities(&rest).iter().any(|n| !asked.contains(n))
}

/// Whether a match of [`number_re`] is an amount of money.
fn is_money(m: &str) -> bool {
    m.starts_with(['$', '€', '£'])
        || m.ends_with("million")
        || m.ends_with("billion")
        || m.ends_with("dollars")
}

/// Currency amounts, as digit strings.
fn money(s: &str) -> HashSet<String> {
    number_re()
        .find_iter(s)
        .map(|m| m.as_str())
        .filter(|m| is_money(m))
        .map(digits)
        .collect()
}

/// Times of day: "23:10", "6.15 a.m.", "noon", as keys (digits only, or
/// the word).
fn clock_times(s: &str) -> HashSet<String> {
    static CLOCK: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(
            r"(?i)\b(\d{1,2}):(\d{2})\b|\b(\d{1,2})(?:[.:](\d{2}))?\s?([ap])\.?m\b\.?|\b(noon|midnight|midday)\b",
        )
        .expect("static regex")
    });
    CLOCK
        .captures_iter(s)
        .map(|c| {
            if let Some(w) = c.get(6) {
                return w.as_str().to_lowercase();
            }
            match (c.get(1), c.get(2)) {
                (Some(h), Some(m)) => {
                    format!("{}:{}", h.as_str().trim_start_matches('0'), m.as_str())
                }
                _ => format!(
                    "{}:{}{}",
                    c.get(3).map_or("", |m| m.as_str()),
                    c.get(4).map_or("00", |m| m.as_str()),
                    c.get(5).map_or("", |m| m.as_str()).to_lowercase()
                ),
            }
        })
        .collect()
}

/// Dates (ISO keys) and four-digit years.
fn dates_and_years(s: &str) -> HashSet<String> {
    static YEAR: std::sync::LazyLock<regex::Regex> = std::sync::LazyLock::new(|| {
        regex::Regex::new(r"\b(1[5-9]\d\d|2[01]\d\d)s?\b").expect("static regex")
    });
    let (ds, rest) = crate::verify::dates(s);
    let mut out: HashSet<String> = ds.into_iter().map(|(_, k)| k).collect();
    out.extend(YEAR.find_iter(&rest).map(|m| m.as_str().to_string()));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn answer_kinds_from_question_wording() {
        let cases = [
            (
                "What amount did the contractor claim for the delay?",
                AnswerKind::Money,
            ),
            (
                "What does the yearly cost of the buses come to?",
                AnswerKind::Money,
            ),
            (
                "How many passengers took the first sailing?",
                AnswerKind::Quantity,
            ),
            ("When was the ramp closed?", AnswerKind::Date),
            (
                "Who was the minister when the contract was signed?",
                AnswerKind::Name,
            ),
            (
                "What time did the last ferry leave before the closure?",
                AnswerKind::Time,
            ),
            ("What time of year is dredging allowed?", AnswerKind::Any),
            (
                "How late did the rebuilt terminal open, compared with the plan?",
                AnswerKind::Quantity,
            ),
            ("By what date was the work due?", AnswerKind::Date),
            ("Which option did the engineers recommend?", AnswerKind::Any),
            (
                "What total budget did the board first approve?",
                AnswerKind::Money,
            ),
            (
                "What daily penalty would the contractor owe?",
                AnswerKind::Money,
            ),
            ("When was the budget approved?", AnswerKind::Date),
            // A yes-or-no or why question asks for no kind, whatever words it holds.
            ("Did the settlement change the plan?", AnswerKind::Any),
            (
                "Why did the board refuse to cover the cost?",
                AnswerKind::Any,
            ),
            (
                "Who at the firm checked the cost figures?",
                AnswerKind::Name,
            ),
            ("How much had steel prices climbed?", AnswerKind::Quantity),
            ("How many bids came in?", AnswerKind::Quantity),
            (
                "What happened to the motion to pay for an inspection?",
                AnswerKind::Any,
            ),
            (
                "What did the inspection cost the Ministry?",
                AnswerKind::Money,
            ),
            (
                "Who signed the amendment for the contractor?",
                AnswerKind::Name,
            ),
            ("Which company won the dredging work?", AnswerKind::Name),
            (
                "Which law firm represented the contractor?",
                AnswerKind::Name,
            ),
        ];
        for (q, want) in cases {
            assert_eq!(AnswerKind::of(q), want, "{q}");
        }
    }

    #[test]
    fn a_sentence_must_add_the_kind_of_fact_asked_for() {
        // (question, sentence, can it answer?)
        let cases = [
            (
                "How many passengers sailed on 22 April 2024?",
                "The terminal reopened on 22 April 2024 with the first sailing at 06:15.",
                false,
            ),
            (
                "How many passengers sailed on 22 April 2024?",
                "The rebuilt Pier 3 terminal reopened after a closure that began on 2 May 2022.",
                false,
            ),
            (
                "How many passengers sailed on 22 April 2024?",
                "On 22 April 2024, 1,240 passengers sailed.",
                true,
            ),
            (
                "How many bids were received?",
                "Four firms submitted bids.",
                true,
            ),
            (
                "What time did the last ferry leave Pier 3?",
                "The last sailing from Pier 3 will leave for Vessane at 23:10 on Sunday, 1 May 2022.",
                true,
            ),
            (
                "How many change orders were approved?",
                "8.2 The Owner's Representative may approve a Change Order on its own.",
                false,
            ),
            (
                "How many change orders were approved?",
                "2. Eleven change orders were approved.",
                true,
            ),
            (
                "How many change orders were approved?",
                "2. The Owner approved the change orders.",
                false,
            ),
            (
                "Who approved the change order?",
                "- You were briefed that the change order was approved.",
                false,
            ),
            // The question's own words, abbreviated, are not a new name.
            (
                "Which company made the hydraulic power unit that failed its test?",
                "The hydraulic power unit (HPU) for the new ramp failed its factory pressure test.",
                false,
            ),
            (
                "Which company made the hydraulic power unit that failed its test?",
                "The HPU was made by Varrowdene Hydraulics Ltd. and failed its factory test.",
                true,
            ),
            (
                "What time did the last ferry leave Pier 3?",
                "The terminal will close to all ferry traffic from Monday, 2 May 2022.",
                false,
            ),
            (
                "What time did the first ferry leave?",
                "The first ferry left at 6.15 a.m. with 40 cars.",
                true,
            ),
            (
                "How many passengers sailed?",
                "The terminal is expected to reopen in the autumn of 2023.",
                false,
            ),
            (
                "What amount did Brindlemoor claim in October 2023?",
                "The claim covers 18 weeks of delay.",
                false,
            ),
            (
                "What amount did Brindlemoor claim in October 2023?",
                "The claim is for $1.86 million.",
                true,
            ),
            (
                "When was the ramp closed?",
                "The ramp was closed to vehicles on 14 March 2022.",
                true,
            ),
            (
                "When was the ramp closed?",
                "The ramp was closed after the inspection.",
                false,
            ),
            ("What happened in 2019?", "Anything at all.", true),
            (
                "Who signed the amendment for Brindlemoor?",
                "Carla Mendelow signed for Brindlemoor Civil on 2 November 2022.",
                true,
            ),
            (
                "Who signed the amendment for Brindlemoor?",
                "The amendment was signed for Brindlemoor.",
                false,
            ),
        ];
        for (q, s, want) in cases {
            assert_eq!(AnswerKind::of(q).satisfied_by(s, q), want, "{q} / {s}");
        }
    }
}
