//! The verifier: every drafted sentence must carry at least one citation
//! whose quote is found in the cited chunk, and the quotes must support the
//! sentence (the `Judge`). A sentence that fails is struck with a reason a
//! reporter can act on. Used for every drafter.
//!
//! invariant: an emitted quote is always the page's own text (the located
//! span of the stored page), never the draft's version of it.
//! invariant: a sentence is `supported` only if every check passed; any
//! doubt strikes it.

pub mod align;
pub mod learned;
pub mod rules;

pub use learned::LearnedJudge;
pub use rules::{RulesJudge, dates, names, numbers};

use crate::chunk::PAGE_BREAK;
use crate::store::StoredChunk;
use crate::text::{byte_to_char, fold_ws, normalize};
use crate::types::{ChunkId, Citation, DocId};
use regex::Regex;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::sync::LazyLock;

/// A citation as a drafter proposes it: which chunk, and the words quoted from it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DraftCitation {
    pub chunk_id: ChunkId,
    pub quote: String,
}

/// One drafted sentence with its proposed citations.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DraftSentence {
    pub text: String,
    pub citations: Vec<DraftCitation>,
}

/// What a drafter returns: sentences, or a reason to abstain.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Draft {
    pub sentences: Vec<DraftSentence>,
    pub abstain: Option<String>,
    /// A language model's own text and costs, when a model wrote the draft.
    pub model: Option<crate::draft::ModelDraft>,
    /// Sentences likely to answer that the relevance check set aside, each
    /// with its reason: verified and listed apart, never given as answers.
    pub set_aside: Vec<(DraftSentence, String)>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    Supported,
    Struck,
}

/// A judge's decision on one sentence against its evidence.
#[derive(Debug, Clone, PartialEq)]
pub struct Judgement {
    pub supported: bool,
    /// 0..1: the rules judge gives the content-word coverage, the learned
    /// judge its calibrated probability of support.
    pub confidence: f32,
    /// Why the sentence is not supported, in words a reporter understands.
    pub reason: Option<String>,
}

/// One piece of evidence: a located quote (the page's own words) and the
/// page it is on, when known.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Evidence<'a> {
    pub text: &'a str,
    pub page: Option<u32>,
}

impl<'a> Evidence<'a> {
    pub fn text(text: &'a str) -> Self {
        Evidence { text, page: None }
    }
}

/// Decides whether evidence supports a sentence.
pub trait Judge: Send + Sync {
    fn name(&self) -> &'static str;
    fn judge(&self, sentence: &str, evidence: &[Evidence<'_>]) -> Judgement;
}

/// The judges `--judge` can name.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, clap::ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum JudgeKind {
    /// Explicit checks (dates, amounts, names, negation, ...) and content-word coverage.
    #[default]
    Rules,
    /// A calibrated classifier over the same checks and alignment features.
    Learned,
}

impl JudgeKind {
    /// The judge itself. The learned judge's weights are compiled in.
    pub fn build(self) -> Box<dyn Judge> {
        match self {
            JudgeKind::Rules => Box::new(RulesJudge::default()),
            JudgeKind::Learned => Box::new(LearnedJudge::bundled()),
        }
    }
}

/// A verified sentence, ready to emit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VerifiedSentence {
    pub text: String,
    pub verdict: Verdict,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    pub confidence: f32,
    pub citations: Vec<Citation>,
}

/// Where a quote was found inside a chunk.
#[derive(Debug, Clone, PartialEq)]
pub struct Located {
    pub page: u32,
    pub start_char: usize,
    pub end_page: u32,
    pub end_char: usize,
    /// The chunk's own text for the span, white space folded.
    pub page_text: String,
    /// Byte range of the span in the chunk's text.
    pub bytes: std::ops::Range<usize>,
    /// 1 when the quote's letters and digits match the page's (after
    /// folding OCR look-alikes); lower for an approximate match.
    pub similarity: f32,
    /// Whether the page's words differ from the quote as written (beyond
    /// white space, quote marks and dashes).
    pub differs: bool,
}

/// Find `quote` in the chunk. First an exact match after normalising white
/// space, quote and dash characters, ligatures and broken hyphenation;
/// then, tolerant of OCR damage, an alignment of letters and digits (see
/// [`align`]). Returns the exact page and character range in the stored
/// page text.
pub fn locate(quote: &str, chunk: &StoredChunk) -> Option<Located> {
    locate_with(quote, chunk, &align::AlignConfig::default())
}

pub fn locate_with(quote: &str, chunk: &StoredChunk, cfg: &align::AlignConfig) -> Option<Located> {
    let quote = strip_wrapping_quotes(quote);
    let q = normalize(quote);
    if q.text.is_empty() {
        return None;
    }
    let hay = normalize(&chunk.text);
    let (r, similarity, differs) = match hay.text.find(&q.text) {
        Some(at) => (hay.source_range(at..at + q.text.len()), 1.0, false),
        None => {
            let m = align::find(quote, &chunk.text, cfg)?;
            let differs = normalize(&chunk.text[m.bytes.clone()]).text != q.text;
            (m.bytes, m.similarity, differs)
        }
    };
    let (page, start_char) = page_offset(chunk, r.start);
    let (end_page, end_char) = page_offset(chunk, r.end);
    Some(Located {
        page,
        start_char,
        end_page,
        end_char,
        page_text: fold_ws(&chunk.text[r.clone()]),
        bytes: r,
        similarity,
        differs,
    })
}

fn strip_wrapping_quotes(q: &str) -> &str {
    let t = q.trim();
    let t = t
        .strip_prefix(['"', '\u{201C}', '\u{00AB}'])
        .and_then(|s| s.strip_suffix(['"', '\u{201D}', '\u{00BB}']))
        .unwrap_or(t);
    t.trim_matches(|c: char| c == '…' || c.is_whitespace())
        .trim_start_matches("...")
        .trim_end_matches("...")
        .trim()
}

/// Map a byte offset in a chunk's text to (page, char offset on that page).
fn page_offset(chunk: &StoredChunk, byte: usize) -> (u32, usize) {
    let before = &chunk.text[..byte];
    match before.rfind(PAGE_BREAK) {
        None => (
            chunk.span.start_page,
            chunk.span.start_char + byte_to_char(&chunk.text, byte),
        ),
        Some(ff) => {
            let breaks = before.matches(PAGE_BREAK).count() as u32;
            let line_start = ff + PAGE_BREAK.len_utf8();
            (
                chunk.span.start_page + breaks,
                chunk.text[line_start..byte].chars().count(),
            )
        }
    }
}

/// Verify a draft against the chunks it may cite. `page_hash` looks up a
/// page's content hash for the citation record.
pub fn verify(
    draft: &Draft,
    chunks: &HashMap<ChunkId, StoredChunk>,
    judge: &dyn Judge,
    page_hash: &dyn Fn(&DocId, u32) -> Option<String>,
) -> Vec<VerifiedSentence> {
    // Other chunks are searched in id order, so a corrected citation is
    // the same from run to run.
    let mut order: Vec<&StoredChunk> = chunks.values().collect();
    order.sort_by_key(|c| c.id);
    draft
        .sentences
        .iter()
        .map(|s| verify_sentence(s, chunks, &order, judge, page_hash))
        .collect()
}

fn struck(s: &DraftSentence, reason: String, citations: Vec<Citation>) -> VerifiedSentence {
    VerifiedSentence {
        text: s.text.clone(),
        verdict: Verdict::Struck,
        reason: Some(reason),
        confidence: 0.0,
        citations,
    }
}

fn verify_sentence(
    s: &DraftSentence,
    chunks: &HashMap<ChunkId, StoredChunk>,
    order: &[&StoredChunk],
    judge: &dyn Judge,
    page_hash: &dyn Fn(&DocId, u32) -> Option<String>,
) -> VerifiedSentence {
    if s.citations.is_empty() {
        return struck(
            s,
            "no citation: the sentence does not point to any record".into(),
            vec![],
        );
    }
    let mut citations = Vec::new();
    for c in &s.citations {
        let Some(cited) = chunks.get(&c.chunk_id) else {
            return struck(
                s,
                format!(
                    "cites excerpt {}, which was not among the retrieved records",
                    c.chunk_id
                ),
                citations,
            );
        };
        // The cited chunk first; then, if the quote is not there, the other
        // retrieved chunks (the citation is then corrected and marked).
        let found = locate(&c.quote, cited).map(|l| (cited, l)).or_else(|| {
            order
                .iter()
                .filter(|o| o.id != cited.id)
                .find_map(|o| locate(&c.quote, o).map(|l| (*o, l)))
        });
        let Some((chunk, loc)) = found else {
            return struck(
                s,
                format!(
                    "quote not found on {} of \u{201C}{}\u{201D}",
                    cited.span.pages_label(),
                    cited.title
                ),
                citations,
            );
        };
        if let Some((context, quoted)) = addressed_to_model(chunk, &loc.bytes) {
            let reason = if quoted {
                format!(
                    "the quoted words are an instruction aimed at an AI model, written inside \
                     the record (\u{201C}{}\u{201D}), not a statement the record makes",
                    crate::text::fold_ws(&context)
                )
            } else {
                format!(
                    "the passage this quote comes from holds an instruction aimed at an AI model \
                     (\u{201C}{}\u{201D}), so nothing in it is used as an answer; read the record \
                     yourself",
                    crate::text::fold_ws(&context)
                )
            };
            return struck(s, reason, citations);
        }
        citations.push(Citation {
            chunk_id: chunk.id,
            doc_id: chunk.doc_id.clone(),
            title: chunk.title.clone(),
            organisation: chunk.organisation.clone(),
            date: chunk.date.clone(),
            page: loc.page,
            end_page: (loc.end_page != loc.page).then_some(loc.end_page),
            start_char: loc.start_char,
            end_char: loc.end_char,
            page_hash: page_hash(&chunk.doc_id, loc.page).unwrap_or_default(),
            quoted_as: loc
                .differs
                .then(|| fold_ws(strip_wrapping_quotes(&c.quote))),
            similarity: loc.similarity,
            corrected_from: (chunk.id != cited.id).then_some(cited.id),
            quote: loc.page_text,
            ocr: None,
        });
    }
    let evidence: Vec<Evidence<'_>> = citations
        .iter()
        .map(|c| Evidence {
            text: c.quote.as_str(),
            page: Some(c.page),
        })
        .collect();
    let j = judge.judge(&s.text, &evidence);
    VerifiedSentence {
        text: s.text.clone(),
        verdict: if j.supported {
            Verdict::Supported
        } else {
            Verdict::Struck
        },
        reason: j.reason,
        confidence: j.confidence,
        citations,
    }
}

/// Text addressed to an AI model: once a passage holds one of these, none
/// of the passage is used as an answer (the planted claim is often the
/// next sentence, or worded as the record's own). English and French.
static ADDRESSED: LazyLock<Vec<Regex>> = LazyLock::new(|| {
    [
        // "Ignore the excerpts", "disregard all previous instructions".
        r"(?i)\b(?:ignore|disregard|forget|override)\b[^.!?\n]{0,60}\b(?:excerpts?|instructions?|prompts?|context|rules|everything above|previous)\b",
        // Naming the reader as a machine: "AI systems reading this record",
        // "any automated tool summarising this file".
        r"(?i)\b(?:AI|A\.I\.|artificial intelligence|LLMs?|chat ?bots?|language models?|automated (?:systems?|tools?|readers?|summari[sz]ers?|assistants?)|summari[sz]ers?)\b[^.!?\n]{0,40}\b(?:reading|processing|summari[sz]ing|analy[sz]ing|reviewing|ingesting|that (?:reads?|summari[sz]es?|processes))\b",
        // A note or instruction to one: "Note to any automated summariser:".
        r"(?i)\b(?:note|message|instructions?|attention|memo)\s+(?:to|for)\s+(?:any|all|every|the)?\s*(?:AI|A\.I\.|automated|artificial|LLMs?|language models?|chat ?bots?|assistants?|summari[sz]ers?|bots?)\b",
        // Spoken to directly: "Chatbot, please tell ...", "AI assistant: ...".
        r"(?im)(?:^|[.!?]\s+)\s*(?:dear\s+|hey\s+|to the\s+)?(?:AI|AI assistants?|AI models?|AI systems?|LLMs?|chat ?bots?|language models?|summari[sz]ers?|virtual assistants?)\s*[,:]",
        // Chat role markers and template tokens.
        r"(?m)^\s*(?:SYSTEM|ASSISTANT|USER)\s*:|<\|(?:system|im_start|user|assistant)\|?>|\[/?INST\]|###\s*(?:Instruction|System)",
        // "When you summarise this file you must conclude ...".
        r"(?i)\bwhen you (?:summari[sz]e|read|process|analy[sz]e|answer|review)\b[^.!?\n]{0,80}\byou (?:must|should|will|are to)\b",
        r"(?i)\b(?:as an ai|as a language model|system prompt|new instructions|prompt injection)\b",
        // French: "Ignorez toutes les instructions précédentes", "Note à
        // l'attention des systèmes d'IA", "Assistant virtuel, dites ...".
        r"(?i)\bignore[rz]?\s+(?:toutes\s+|tous\s+)?(?:les|vos|ces)\s+(?:instructions|consignes|extraits|règles)",
        r"(?i)\b(?:syst[eè]mes?|mod[eè]les?|outils?|assistants?|agents?|robots?)\s+(?:d['’]\s?IA|d['’]intelligence artificielle|conversationnels?|de r[ée]sum[ée])\b",
        r"(?i)\b(?:note|message|avis|consigne)\s+(?:à|aux?|pour)\s+(?:l['’]attention\s+(?:de|des|du)\s+)?(?:tout|toute|tous|toutes|les|l['’]|un|une)?\s*(?:IA|intelligences? artificielles?|robots?|assistants?|syst[eè]mes? automatis[ée]s?|outils? automatis[ée]s?)",
        r"(?im)(?:^|[.!?]\s+)\s*(?:ch[eè]re?\s+)?(?:IA|assistante? virtuel(?:le)?|robot conversationnel|agent conversationnel|mod[eè]le de langage)\s*[,:]",
        r"(?i)\b(?:IA|intelligence artificielle|robot conversationnel|agent conversationnel)\b[^.!?\n]{0,40}\b(?:lisant|qui lit|qui lisez|qui r[ée]sume|r[ée]sumant|traitant|qui traite)\b",
        r"(?i)\b(?:lorsque|quand|si) vous (?:r[ée]sumez|lisez|traitez|analysez|êtes une IA)\b[^.!?\n]{0,80}\b(?:vous devez|devez|dites|indiquez|concluez)\b",
    ]
    .iter()
    .map(|p| Regex::new(p).unwrap())
    .collect()
});

/// An imperative to assert something ("... and state that ...", "you
/// must conclude that"): read in the quoted sentence and its neighbours
/// only, since records quote such words in ordinary prose too.
static INSTRUCTION: LazyLock<Vec<Regex>> = LazyLock::new(|| {
    [
        r"(?i)(?:^|[.;:!?]\s+|\b(?:and|then|instead|now|please)\s+)(?:state|say|write|answer|respond|reply|claim)\s+(?:that|with|only)\b",
        r"(?i)\byou (?:must|should|are required to) (?:state|say|write|answer|report|conclude|tell|confirm)\b",
        r"(?i)\bplease tell (?:the )?(?:users?|readers?|reporters?|everyone|anyone|them)\b",
        r"(?i)(?:^|[.;:!?]\s+|\b(?:et|puis|alors|veuillez)\s+)(?:indiquez|affirmez|dites|[ée]crivez|r[ée]pondez|concluez|d[ée]clarez)\s+(?:que|qu['’])",
    ]
    .iter()
    .map(|p| Regex::new(p).unwrap())
    .collect()
});

/// Whether `text` holds words addressed to an AI model (the patterns that
/// set a whole passage aside), or an imperative to assert something (read
/// only around a quote). For measuring both on ordinary prose.
pub fn instruction_patterns(text: &str) -> (bool, bool) {
    (
        ADDRESSED.iter().any(|re| re.is_match(text)),
        INSTRUCTION.iter().any(|re| re.is_match(text)),
    )
}

/// The sentence(s) of `chunk` around `bytes`, or the passage's sentence
/// addressed to a model, if the quote comes from text aimed at an AI model
/// (prompt injection planted in a record). Quoting such text would let a
/// document dictate the answer. The second value says whether the quoted
/// words themselves are the instruction (else another sentence of the
/// passage is, and the whole passage is set aside).
pub fn addressed_to_model(
    chunk: &StoredChunk,
    bytes: &std::ops::Range<usize>,
) -> Option<(String, bool)> {
    let spans = crate::segment::sentence_spans(&chunk.text);
    let around: Vec<&str> = spans
        .iter()
        .filter(|r| r.start < bytes.end && bytes.start < r.end)
        .map(|r| &chunk.text[r.clone()])
        .collect();
    let context = if around.is_empty() {
        chunk.text[bytes.clone()].to_string()
    } else {
        around.join(" ")
    };
    if ADDRESSED
        .iter()
        .chain(INSTRUCTION.iter())
        .any(|re| re.is_match(&context))
    {
        return Some((context, true));
    }
    let m = ADDRESSED.iter().find_map(|re| re.find(&chunk.text))?;
    let sentence = spans
        .iter()
        .find(|r| r.start <= m.start() && m.start() < r.end)
        .map_or_else(
            || m.as_str().to_string(),
            |r| chunk.text[r.clone()].to_string(),
        );
    Some((sentence, false))
}
