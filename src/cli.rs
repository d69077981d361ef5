//! Command-line parsing (clap) and printing. Arguments are parsed and
//! checked here, then resolved into the library's configuration types; no
//! retrieval, drafting or verification logic lives in this file.

use anyhow::{Context, Result, bail};
use clap::{Args, Parser, Subcommand, ValueEnum};
use onrecord::answer::{self, AnswerRecord, CAUTION};
use onrecord::draft::{Drafter, Extractive, ExtractiveConfig, ModelDraftConfig, ModelDrafter};
use onrecord::embed::{self, Embedder, EmbedderChoice};
use onrecord::extract::ExtractOptions;
use onrecord::extract::pdf::{PdfRoute, default_route};
use onrecord::fuse::Weights;
use onrecord::ingest::{self, IngestConfig, Severity};
use onrecord::llm::remote::{DEFAULT_KEY_ENV, RemoteConfig, RemoteModel};
use onrecord::llm::{GenOptions, Generator, LlmChoice};
use onrecord::manifest::Manifest;
use onrecord::retrieve::{self, Index, RetrieverKind, SearchOptions};
use onrecord::types::{DocId, DocMeta, Filters, check_date};
use onrecord::verify::{Judge, JudgeKind, RulesJudge};
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;

const AFTER_HELP: &str = "\
Typical session:
  onrecord add ./release-2023-0412 --manifest ./release-2023-0412/manifest.csv
  onrecord find \"Pier 3 budget\" --from 2020 --org harbour
  onrecord answer \"How much did the Pier 3 budget increase in 2021?\" --markdown > answer.md
  onrecord replay answer.md            # weeks later: does every sentence still hold?

Words used here:
  records   the documents of a release, as `add` stores them
  passages  the page-aware pieces of text that `find` lists and `answer` reads
            (how many: --passages N)
  proof     the words on the page printed under each sentence `answer` gives,
            with where they are: doc-id · p. N

The index lives in ./.onrecord unless --index or ONRECORD_INDEX says otherwise.
Exit codes: 0 success; 1 an error, or (add) a file that failed, or (replay)
a sentence that no longer holds; 2 bad arguments, or (replay) unusable input.";

/// Answer questions from released records with sentences that verbatim
/// quotes from cited pages support.
#[derive(Parser, Debug)]
#[command(name = "onrecord", version, about, long_about = None, after_help = AFTER_HELP)]
struct Cli {
    #[command(subcommand)]
    command: Command,
    /// Log what each stage does (repeat for more detail).
    #[arg(short, long, action = clap::ArgAction::Count, global = true)]
    verbose: u8,
    /// Embedding model: `auto` (the default model if it is on this machine),
    /// `off` (BM25 only), a model folder, or a repository id already fetched.
    #[arg(
        long,
        global = true,
        env = "ONRECORD_EMBEDDER",
        default_value = "auto",
        value_name = "auto|off|DIR"
    )]
    embedder: EmbedderChoice,
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum RetrieverArg {
    /// Keyword ranking (BM25): best for names, file numbers and exact phrases.
    Bm25,
    /// Embedding similarity: finds paraphrases and other wordings.
    Dense,
    /// Both, fused by reciprocal rank (the default when a model is present).
    Hybrid,
}

impl RetrieverArg {
    fn kind(self) -> RetrieverKind {
        match self {
            RetrieverArg::Bm25 => RetrieverKind::Bm25,
            RetrieverArg::Dense => RetrieverKind::Dense,
            RetrieverArg::Hybrid => RetrieverKind::Hybrid,
        }
    }
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum DrafterArg {
    /// Quotes the best-matching sentences verbatim; no model (the default).
    Extractive,
    /// A quantized GGUF model on this machine's CPU (see --llm).
    Local,
    /// An OpenAI-compatible chat endpoint (see --remote-url, --remote-model).
    Remote,
}

/// Who writes the draft. Whatever writes it, every sentence goes through
/// the verifier; a model draft with no supported sentence falls back to the
/// extractive answer, and says so. Defaults for these options may be set in
/// the settings file (`$ONRECORD_CONFIG`, else ~/.config/onrecord/config.json);
/// flags and ONRECORD_* variables override it.
#[derive(Args, Debug, Clone)]
struct DraftArgs {
    /// Who writes the draft. [default: extractive]
    #[arg(long, value_enum, env = "ONRECORD_DRAFTER")]
    drafter: Option<DrafterArg>,
    /// Local model for `--drafter local` and `--rewrite`: `auto` (the default
    /// SmolLM2-135M-Instruct from the models folder or the hub cache), a
    /// .gguf file, a folder holding one, or a repository id already fetched.
    /// Llama-family, Qwen2 and Qwen3 files are supported. [default: auto]
    #[arg(long, env = "ONRECORD_LLM", value_name = "auto|FILE|DIR")]
    llm: Option<LlmChoice>,
    /// Base URL of an OpenAI-compatible endpoint, such as http://localhost:8080/v1.
    #[arg(long, env = "ONRECORD_REMOTE_URL", value_name = "URL")]
    remote_url: Option<String>,
    /// Model name the endpoint knows.
    #[arg(long, env = "ONRECORD_REMOTE_MODEL", value_name = "NAME")]
    remote_model: Option<String>,
    /// Environment variable holding the endpoint's API key (never printed or
    /// logged). [default: ONRECORD_API_KEY]
    #[arg(long, value_name = "VAR")]
    remote_key_env: Option<String>,
    /// Longest wait for the endpoint's whole reply, in seconds. [default: 300]
    #[arg(long, value_name = "SECONDS")]
    remote_timeout: Option<f64>,
    /// Ask the endpoint for one reply instead of a stream.
    #[arg(long)]
    no_stream: bool,
    /// Sampling temperature; 0 (the default) always picks the likeliest token.
    #[arg(long, default_value_t = 0.0, value_name = "T")]
    temperature: f64,
    /// Seed of the sampler, so a non-zero temperature is repeatable.
    #[arg(long, default_value_t = GenOptions::default().seed, value_name = "N")]
    seed: u64,
    /// Most tokens the model may write.
    #[arg(long, default_value_t = GenOptions::default().max_tokens, value_name = "N")]
    max_tokens: usize,
    /// Most excerpts shown to the model.
    #[arg(long, default_value_t = ModelDraftConfig::default().max_excerpts, value_name = "N")]
    excerpts: usize,
    /// Have the model propose up to three more search queries; their results
    /// are fused with the question's before drafting.
    #[arg(long)]
    rewrite: bool,
}

impl DraftArgs {
    /// Fill what the flags left unset from the settings file, then defaults.
    fn with_settings(mut self, cfg: &onrecord::config::Config) -> Result<DraftArgs> {
        if self.drafter.is_none() {
            self.drafter = Some(match cfg.drafter.as_deref() {
                Some("local") => DrafterArg::Local,
                Some("remote") => DrafterArg::Remote,
                _ => DrafterArg::Extractive,
            });
        }
        if self.llm.is_none() {
            self.llm = Some(match &cfg.llm {
                Some(l) => l.parse().map_err(anyhow::Error::msg)?,
                None => LlmChoice::Auto,
            });
        }
        let r = &cfg.remote;
        self.remote_url = self.remote_url.take().or_else(|| r.url.clone());
        self.remote_model = self.remote_model.take().or_else(|| r.model.clone());
        self.remote_key_env = Some(
            self.remote_key_env
                .take()
                .or_else(|| r.key_env.clone())
                .unwrap_or_else(|| DEFAULT_KEY_ENV.into()),
        );
        self.remote_timeout = Some(self.remote_timeout.or(r.timeout_secs).unwrap_or(300.0));
        if r.stream == Some(false) {
            self.no_stream = true;
        }
        Ok(self)
    }

    fn drafter(&self) -> DrafterArg {
        self.drafter.unwrap_or(DrafterArg::Extractive)
    }

    fn gen_options(&self) -> Result<GenOptions> {
        if !(self.temperature.is_finite() && self.temperature >= 0.0) {
            bail!("--temperature must be 0 or more (got {})", self.temperature);
        }
        if self.max_tokens == 0 {
            bail!("--max-tokens must be at least 1");
        }
        Ok(GenOptions {
            max_tokens: self.max_tokens,
            temperature: self.temperature,
            seed: self.seed,
            ..GenOptions::default()
        })
    }

    fn wants_model(&self) -> bool {
        self.drafter() != DrafterArg::Extractive || self.rewrite
    }

    /// The model to prompt: the remote endpoint for `--drafter remote` (or
    /// for `--rewrite` when a URL is given), else the local model.
    fn generator(&self, quiet: bool) -> Result<Arc<dyn Generator>> {
        let remote = self.drafter() == DrafterArg::Remote
            || (self.drafter() == DrafterArg::Extractive && self.remote_url.is_some());
        if remote {
            let Some(url) = &self.remote_url else {
                bail!(
                    "--drafter remote needs --remote-url (or ONRECORD_REMOTE_URL, or remote.url in {}), such as http://localhost:8080/v1",
                    onrecord::config::config_path().display()
                );
            };
            let Some(model) = &self.remote_model else {
                bail!(
                    "--drafter remote needs --remote-model (or ONRECORD_REMOTE_MODEL, or remote.model in {}): the model name the endpoint knows",
                    onrecord::config::config_path().display()
                );
            };
            let timeout = self.remote_timeout.unwrap_or(300.0);
            if !(timeout.is_finite() && timeout > 0.0) {
                bail!("--remote-timeout must be a positive number of seconds");
            }
            let mut cfg = RemoteConfig::new(url.clone(), model.clone());
            cfg.key_env = self
                .remote_key_env
                .clone()
                .unwrap_or_else(|| DEFAULT_KEY_ENV.into());
            cfg.timeout = std::time::Duration::from_secs_f64(timeout);
            cfg.stream = !self.no_stream;
            return Ok(Arc::new(RemoteModel::new(cfg)?));
        }
        let path = onrecord::llm::resolve(self.llm.as_ref().unwrap_or(&LlmChoice::Auto))?;
        if !quiet {
            eprintln!("Loading {} ...", path.display());
        }
        let m = onrecord::llm::local::LocalModel::load(
            &path,
            Some(onrecord::llm::reencode_cache_dir()),
        )?;
        if !quiet {
            eprintln!("Loaded {} in {:.1} s.", m.id(), m.load_secs);
        }
        Ok(Arc::new(m))
    }
}

#[derive(Args, Debug, Clone)]
struct RetrievalArgs {
    /// Retriever; without an embedding model every choice falls back to bm25.
    /// [default: hybrid when a model is present, else bm25]
    #[arg(long, value_enum)]
    retriever: Option<RetrieverArg>,
    /// Weight of the BM25 ranking in the fused score.
    #[arg(long, default_value_t = 1.0, value_name = "W")]
    bm25_weight: f64,
    /// Weight of the embedding ranking in the fused score.
    #[arg(long, default_value_t = 1.0, value_name = "W")]
    dense_weight: f64,
    /// The k of reciprocal rank fusion: score = sum of weight / (k + rank).
    #[arg(long, default_value_t = onrecord::fuse::RRF_K, value_name = "K")]
    rrf_k: f64,
    /// Candidates taken from each retriever before fusing.
    #[arg(long, default_value_t = 100, value_name = "N")]
    depth: usize,
    /// Expand the BM25 query with the words of its own best passages
    /// (pseudo-relevance feedback, RM3: 10 passages, 10 terms, half the
    /// weight kept on the question's words). Can find passages worded
    /// differently from the question; can also drift off the subject.
    #[arg(long)]
    feedback: bool,
    /// Find passages by their closest sentence as well as by their whole
    /// text, with the sentence vectors `add` already stores (the first
    /// search takes about a second per 10,000 sentences to prepare them).
    #[arg(long)]
    sentence_vectors: bool,
}

impl RetrievalArgs {
    fn resolve(&self) -> Result<SearchOptions> {
        for (name, w) in [
            ("--bm25-weight", self.bm25_weight),
            ("--dense-weight", self.dense_weight),
        ] {
            if !(w.is_finite() && w >= 0.0) {
                bail!("{name} must be a number of 0 or more (got {w})");
            }
        }
        if !(self.rrf_k.is_finite() && self.rrf_k >= 0.0) {
            bail!("--rrf-k must be a number of 0 or more (got {})", self.rrf_k);
        }
        Ok(SearchOptions {
            retriever: self.retriever.map(RetrieverArg::kind),
            weights: Weights {
                bm25: self.bm25_weight,
                dense: self.dense_weight,
            },
            rrf_k: self.rrf_k,
            depth: self.depth.max(1),
            feedback: self.feedback.then(onrecord::feedback::Feedback::default),
            sentences: self.sentence_vectors,
        })
    }
}

#[derive(Args, Debug, Clone)]
struct IndexArg {
    /// Index folder.
    #[arg(
        long,
        env = "ONRECORD_INDEX",
        default_value = ".onrecord",
        value_name = "DIR"
    )]
    index: PathBuf,
}

#[derive(Args, Debug, Clone, Default)]
struct FilterArgs {
    /// Only records dated on or after this day (YYYY-MM-DD, YYYY-MM or YYYY).
    #[arg(long, value_name = "DATE", value_parser = parse_date)]
    from: Option<String>,
    /// Only records dated on or before this day; a month or year covers all of it.
    #[arg(long, value_name = "DATE", value_parser = parse_date)]
    to: Option<String>,
    /// Only records whose organisation contains this text (case-insensitive).
    #[arg(long, value_name = "TEXT")]
    org: Option<String>,
    /// Only this document (repeat for several).
    #[arg(long = "doc", value_name = "ID")]
    docs: Vec<String>,
}

impl FilterArgs {
    fn resolve(&self) -> Filters {
        Filters {
            from: self.from.clone(),
            to: self.to.clone(),
            org: self.org.clone(),
            docs: self.docs.iter().cloned().map(DocId).collect(),
        }
    }
}

fn parse_date(s: &str) -> std::result::Result<String, String> {
    check_date(s).map(|_| s.to_string())
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum PdfRouteArg {
    /// pdftotext (poppler-utils) when installed, else the built-in reader.
    Auto,
    Pdftotext,
    /// The built-in pure-Rust reader.
    Builtin,
}

/// When and how PDF pages are read by OCR.
#[derive(Args, Debug, Clone)]
struct OcrArgs {
    /// auto: pages with no text layer, a page image with under 200
    /// characters of text, or a layer that is mostly not words; always: every
    /// PDF page (the OCR text replaces the layer); never: no OCR.
    #[arg(long, value_enum, default_value_t = OcrModeArg::Auto)]
    ocr: OcrModeArg,
    /// Tesseract languages, joined with '+'; those not installed are left out.
    #[arg(long, default_value = "eng+fra", value_name = "LANGS")]
    ocr_languages: String,
    /// The tesseract program.
    #[arg(
        long,
        env = "ONRECORD_TESSERACT",
        default_value = "tesseract",
        value_name = "PROGRAM"
    )]
    tesseract: PathBuf,
    /// Pages read at once (one tesseract process each); default: one per core.
    #[arg(long, value_name = "N")]
    ocr_workers: Option<usize>,
}

impl OcrArgs {
    fn resolve(&self) -> Result<(onrecord::ocr::OcrMode, onrecord::ocr::engine::OcrSettings)> {
        let mut s = onrecord::ocr::engine::OcrSettings {
            program: self.tesseract.clone().into_os_string(),
            languages: self
                .ocr_languages
                .split('+')
                .map(str::trim)
                .filter(|l| !l.is_empty())
                .map(str::to_string)
                .collect(),
            ..Default::default()
        };
        if s.languages.is_empty() {
            bail!("--ocr-languages names no language (write e.g. eng+fra)");
        }
        if let Some(n) = self.ocr_workers {
            if n == 0 {
                bail!("--ocr-workers must be at least 1");
            }
            s.workers = n;
        }
        let mode = match self.ocr {
            OcrModeArg::Auto => onrecord::ocr::OcrMode::Auto,
            OcrModeArg::Always => onrecord::ocr::OcrMode::Always,
            OcrModeArg::Never => onrecord::ocr::OcrMode::Never,
        };
        Ok((mode, s))
    }
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum OcrModeArg {
    Auto,
    Always,
    Never,
}

/// How `answer` and `replay` print their result.
#[derive(Args, Debug, Clone, Copy)]
struct ExportArgs {
    /// Print the versioned record as JSON: the answer record (`answer`, with a
    /// model's raw draft and the verdicts on it) or the replay report.
    #[arg(long, conflicts_with_all = ["csv", "markdown"])]
    json: bool,
    /// Print one CSV row per sentence and quote (RFC 4180): question,
    /// sentence, verdict, reason, doc_id, title, organisation, date, page,
    /// quote, fingerprint, ocr_confidence, ocr_warning (the last two for pages read by OCR).
    #[arg(long, conflicts_with = "markdown")]
    csv: bool,
    /// Print Markdown with footnotes (doc id, page, fingerprint and the
    /// verbatim quote), which `replay` reads back; after a replay, with
    /// each sentence's verdict.
    #[arg(long)]
    markdown: bool,
}

impl ExportArgs {
    fn format(self) -> Export {
        match (self.json, self.csv, self.markdown) {
            (true, _, _) => Export::Json,
            (_, true, _) => Export::Csv,
            (_, _, true) => Export::Markdown,
            _ => Export::Text,
        }
    }
}

impl PdfRouteArg {
    fn route(self) -> PdfRoute {
        match self {
            PdfRouteArg::Auto => default_route(),
            PdfRouteArg::Pdftotext => PdfRoute::Pdftotext,
            PdfRouteArg::Builtin => PdfRoute::PureRust,
        }
    }
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Add files and folders (PDF, .txt, .md, .html, .eml) to the index.
    ///
    /// Folders are read recursively; hidden entries are skipped. A file that
    /// is unchanged since the last run is left alone; a changed one replaces
    /// its old version. A bad file is reported and the run goes on.
    ///
    /// Scanned PDF pages (no text layer, or one that is mostly not words) are
    /// rendered at 300 dpi and read by tesseract (English and French), one
    /// page per core. Each word's confidence is kept, so a quote from shaky
    /// OCR is flagged later. OCR results are cached in the index by what the
    /// page draws: re-ingesting never reads a page twice. Without tesseract
    /// the other pages are still ingested, and the run says how to install it.
    Add {
        /// Files or folders.
        #[arg(required = true, value_name = "PATH")]
        paths: Vec<PathBuf>,
        #[command(flatten)]
        index: IndexArg,
        /// CSV or JSON Lines file mapping files to title, organisation, date,
        /// release and url (columns: file,id,title,organisation,date,release,url).
        #[arg(long, value_name = "FILE")]
        manifest: Vec<PathBuf>,
        /// Title for every file in this run.
        #[arg(long)]
        title: Option<String>,
        /// Organisation for every file in this run.
        #[arg(long = "set-org", value_name = "ORG")]
        org: Option<String>,
        /// Date (YYYY-MM-DD) for every file in this run.
        #[arg(long = "set-date", value_name = "DATE", value_parser = parse_date)]
        date: Option<String>,
        /// Release or request number for every file in this run.
        #[arg(long)]
        release: Option<String>,
        /// Source URL for every file in this run.
        #[arg(long)]
        url: Option<String>,
        /// Most word tokens in a chunk.
        #[arg(long, default_value_t = 160, value_name = "N")]
        chunk_tokens: usize,
        /// Word tokens repeated between neighbouring chunks (whole sentences).
        #[arg(long, default_value_t = 32, value_name = "N")]
        chunk_overlap: usize,
        /// How to read PDF text layers.
        #[arg(long, value_enum, default_value_t = PdfRouteArg::Auto)]
        pdf_reader: PdfRouteArg,
        /// Memory, in MB, that reading one PDF, HTML page or e-mail may use.
        /// Each is read in a process of its own; one that needs more is
        /// stopped and reported, and the run goes on. Larger files are
        /// refused unread.
        #[arg(long, default_value_t = onrecord::extract::worker::DEFAULT_MEMORY_MB, value_name = "MB")]
        reader_memory: u64,
        /// Seconds that reading one such file may take before it is stopped
        /// and reported (OCR of its pages is not counted).
        #[arg(long, default_value_t = onrecord::extract::worker::DEFAULT_SECONDS, value_name = "S")]
        reader_seconds: u64,
        #[command(flatten)]
        ocr: OcrArgs,
        /// Print the summary and diagnostics as JSON.
        #[arg(long)]
        json: bool,
        /// No progress bar.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Find passages, with page numbers and highlighted snippets.
    ///
    /// BM25 finds the words you typed; the embedding model finds other
    /// wordings of the same thing; hybrid (the default when the model is
    /// present) fuses both rankings. --why shows each retriever's rank
    /// and score beside the fused score.
    Find {
        /// What to look for.
        query: String,
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        #[command(flatten)]
        retrieval: RetrievalArgs,
        /// How many passages to list.
        #[arg(long = "passages", default_value_t = 10, value_name = "N")]
        k: usize,
        /// Show why each passage was returned: each retriever's rank and score.
        #[arg(long = "why")]
        explain: bool,
        #[arg(long)]
        json: bool,
    },
    /// Answer a question with verified, quoted sentences and page references.
    Answer {
        /// The question, in your own words.
        question: String,
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        #[command(flatten)]
        retrieval: RetrievalArgs,
        /// How many passages to read for the answer.
        #[arg(long = "passages", default_value_t = 10, value_name = "N")]
        k: usize,
        /// Most sentences in the answer.
        #[arg(long, default_value_t = 3)]
        max_sentences: usize,
        /// Answer only with sentences at least this likely to answer the
        /// question (0-1). [default: the selector's calibrated threshold]
        #[arg(long, value_name = "P")]
        min_score: Option<f32>,
        /// Which judge decides whether a quote supports a sentence: rules
        /// (explicit checks on dates, amounts, names, negation, quantities,
        /// swapped words and content-word coverage) or learned (a classifier
        /// over the same checks, trained on open data).
        #[arg(long, value_enum, default_value_t = JudgeKind::default())]
        judge: JudgeKind,
        #[command(flatten)]
        draft: DraftArgs,
        #[command(flatten)]
        export: ExportArgs,
    },
    /// List the answers logged by `answer`, newest first.
    ///
    /// Every answer is kept in the index with its question, configuration
    /// and full record, through re-adding and reindex. Check one again with
    /// `onrecord replay --id N`.
    History {
        #[command(flatten)]
        index: IndexArg,
        /// Show at most this many.
        #[arg(short = 'n', long, default_value_t = 50)]
        limit: usize,
        /// First delete all but the newest N answers, and the page texts
        /// that only the deleted ones cite. The log is otherwise never
        /// shortened: every answer stays replayable.
        #[arg(long, value_name = "N")]
        keep: Option<usize>,
        #[arg(long)]
        json: bool,
    },
    /// Check a saved answer, or a footnoted draft, again: sentence by
    /// sentence, against the pages as they are now.
    ///
    /// Reads JSON from `answer --json`, Markdown from `answer --markdown` (or a
    /// draft written with the same footnotes), or an answer from the log
    /// (--id). Each sentence: holds; fails (with the reason); source
    /// changed (the page's content differs from its fingerprint, with the
    /// words that changed); source missing.
    ///
    /// Exit codes: 0 every sentence holds; 1 any sentence fails or its
    /// source changed or is missing; 2 the answer or the sources could not
    /// be used (nothing was checked).
    #[command(
        after_help = "Examples:\n  onrecord answer \"...\" --markdown > answer.md\n  onrecord replay answer.md\n  onrecord replay answer.md --sources ./release-2023-0412\n  onrecord replay --id 12 --csv > checked.csv"
    )]
    Replay {
        /// The answer: JSON from `answer --json`, or Markdown with footnotes.
        #[arg(
            required_unless_present = "id",
            conflicts_with = "id",
            value_name = "FILE"
        )]
        file: Option<PathBuf>,
        /// Replay answer N from the index's answer log (see `onrecord history`).
        #[arg(long, value_name = "N")]
        id: Option<u64>,
        #[command(flatten)]
        index: IndexArg,
        /// Read pages straight from the original files in this folder
        /// (re-extracted, no index needed) instead of the index. Document
        /// ids come from a manifest in the folder or --manifest, else from
        /// file names.
        #[arg(long, value_name = "DIR")]
        sources: Option<PathBuf>,
        /// Manifest giving the document ids of the files under --sources.
        #[arg(long, value_name = "FILE", requires = "sources")]
        manifest: Option<PathBuf>,
        /// How to read PDFs under --sources: as the index was built, so
        /// that page fingerprints agree.
        #[arg(long, value_enum, default_value_t = PdfRouteArg::Auto, requires = "sources")]
        pdf_reader: PdfRouteArg,
        /// The judge (default: the one that made the answer; rules for Markdown).
        #[arg(long, value_enum)]
        judge: Option<JudgeKind>,
        #[command(flatten)]
        export: ExportArgs,
    },
    /// List the records (documents) in the index.
    Records {
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        #[arg(long)]
        json: bool,
    },
    /// Build the bundled demo release (invented records), add it to an
    /// index, and answer three sample questions.
    Demo {
        /// Demo sources (default: eval/demo).
        #[arg(long, value_name = "DIR")]
        source: Option<PathBuf>,
        /// Where the PDFs and the demo index go.
        #[arg(long, default_value = ".onrecord-demo", value_name = "DIR")]
        workdir: PathBuf,
        /// Print the answers as JSON Lines (one answer record per line).
        #[arg(long)]
        json: bool,
    },
    /// Open onrecord's page and HTTP JSON API to a browser on this computer.
    ///
    /// Open the address it prints: put a question with filters, read each
    /// verified sentence with its evidence beneath it (the quote, then
    /// `doc-id · p. N`), unfold the page under it with the quote marked,
    /// see what was struck and why, download the answer (Markdown, CSV, JSON)
    /// and check an earlier answer again. Everything the page needs is inside
    /// onrecord; it fetches nothing from elsewhere.
    ///
    /// By default it listens on 127.0.0.1 only. To let other machines in, bind another
    /// address and set a token (16 characters or more), which every request
    /// must then carry: the printed address ends in ?token=..., and API
    /// clients send "Authorization: Bearer TOKEN". Records may be sensitive:
    /// think before opening the server to a network.
    Web {
        #[command(flatten)]
        index: IndexArg,
        /// Open the bundled demo release (built under .onrecord-demo when needed).
        #[arg(long)]
        demo: bool,
        /// Address and port to listen on.
        #[arg(long, default_value = "127.0.0.1:8417", value_name = "ADDR:PORT")]
        bind: std::net::SocketAddr,
        /// Token every request must carry; needed for a non-loopback --bind.
        /// Prefer the ONRECORD_TOKEN variable: a command line is visible to
        /// other users of the machine.
        #[arg(
            long,
            env = "ONRECORD_TOKEN",
            hide_env_values = true,
            value_name = "TOKEN"
        )]
        token: Option<String>,
        /// Requests worked on at once. [default: one per core]
        #[arg(long, value_name = "N")]
        workers: Option<usize>,
    },
    /// Measure quality on open data.
    #[command(subcommand)]
    Eval(EvalCommand),
    /// Rebuild learned components from open data.
    #[command(subcommand)]
    Train(TrainCommand),
    /// Read one file and print its text as one JSON line (the worker
    /// process `add` runs for each PDF, HTML page and e-mail).
    #[command(name = "read-one", hide = true)]
    ReadOne {
        #[arg(long)]
        kind: String,
        #[arg(long)]
        pdf_route: String,
        #[arg(long)]
        memory_bytes: u64,
        path: PathBuf,
    },
    /// Rebuild the search indexes from the store: BM25, and the vector
    /// index (embedding any chunk that has no vector yet).
    Reindex {
        #[command(flatten)]
        index: IndexArg,
        #[arg(long)]
        json: bool,
        /// No progress bar.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Models (embedding and drafting): where onrecord looks, and fetching one.
    #[command(subcommand)]
    Models(ModelsCommand),
    /// Speed measurements that print JSON, to set beside other tools.
    #[command(subcommand)]
    Bench(BenchCommand),
}

#[derive(Subcommand, Debug)]
enum ModelsCommand {
    /// Download a model from the model hub into its standard cache
    /// (HF_HOME, else ~/.cache/huggingface). Afterwards pass the same id,
    /// or the folder printed, to --embedder.
    Fetch {
        /// Repository id, such as sentence-transformers/all-MiniLM-L6-v2 or
        /// HuggingFaceTB/SmolLM2-135M-Instruct-GGUF.
        repo_id: String,
        /// For a repository of GGUF files: which one (default: the Q8_0 file,
        /// else the first).
        #[arg(long, value_name = "NAME.gguf")]
        file: Option<String>,
        #[arg(long)]
        json: bool,
    },
    /// Where the default model is looked for, and which embedder would load.
    Where {
        #[arg(long)]
        json: bool,
    },
}

#[derive(Subcommand, Debug)]
enum BenchCommand {
    /// Embedding throughput on the first N documents of a BEIR corpus
    /// (title + text, truncated as the model requires). Prints JSON.
    Embed {
        /// A BEIR corpus.jsonl (`_id`, `title`, `text`).
        #[arg(long, value_name = "FILE")]
        beir_corpus: PathBuf,
        /// How many documents.
        #[arg(long, default_value_t = 1000, value_name = "N")]
        limit: usize,
    },
}

#[derive(Args, Debug, Clone)]
struct FusionArgs {
    /// Weight of the BM25 ranking in the fused score.
    #[arg(long, default_value_t = 1.0, value_name = "W")]
    bm25_weight: f64,
    /// Weight of the embedding ranking in the fused score.
    #[arg(long, default_value_t = 1.0, value_name = "W")]
    dense_weight: f64,
    /// Expand the BM25 query with pseudo-relevance feedback (RM3).
    #[arg(long)]
    feedback: bool,
    /// Dense search by each chunk's best sentence too (embeds the
    /// collection's sentences, which takes several times longer).
    #[arg(long)]
    sentence_vectors: bool,
    /// Keep the embeddings in this file, so a second run embeds nothing.
    #[arg(long, value_name = "FILE")]
    cache: Option<PathBuf>,
}

#[derive(Subcommand, Debug)]
enum EvalCommand {
    /// Run a question set under one or more configurations, side by side,
    /// and write a report an editor can read.
    ///
    /// Scores retrieval (recall@k, MRR@10, nDCG@10 by page and by document),
    /// answers (SQuAD v1.1 exact match and F1, gold answer in a verified
    /// sentence), abstention, citations (against gold pages, and ALCE with a
    /// second judge), strikes and their reasons, and time per stage; for
    /// each pair of configurations, the difference in each metric with a
    /// paired bootstrap 95% interval. Writes report.html (self-contained,
    /// works offline), report.json and summary.md to --report.
    #[command(
        after_help = "Examples:\n  onrecord eval run eval/demo/questions.jsonl\n  onrecord eval run my-questions.jsonl --index ./release-index --config a.toml --config b.toml\n  onrecord eval run ../shared/data/squad-v1.1/dev-v1.1.json --articles 1-2 --limit 100\n  onrecord eval run ../shared/data/scifact --limit 100   (BEIR layout: retrieval only)"
    )]
    Run(EvalRunArgs),
    /// Answer-sentence selection and answer triggering on WikiQA (and,
    /// optionally, SQuAD v1.1 paragraphs).
    ///
    /// Each question's candidate sentences are ranked by the selector:
    /// MAP and MRR over the questions that have an answering sentence;
    /// answer triggering (answer only when the best sentence clears the
    /// threshold) as precision, recall and F1 over all questions, as Yang,
    /// Yih and Meek (2015) define them. Report on `--split test`; the
    /// weights were tuned on train and dev.
    #[command(
        after_help = "Examples:\n  onrecord eval answers --wikiqa ../shared/data/wikiqa --split test --json\n  onrecord eval answers --wikiqa ../shared/data/wikiqa --squad ../shared/data/squad-v1.1/dev-v1.1.json --articles 25-48"
    )]
    Answers {
        /// WikiQA folder holding WikiQA-{train,dev,test}.tsv.
        #[arg(long, value_name = "DIR")]
        wikiqa: PathBuf,
        #[arg(long, default_value = "test", value_parser = ["train", "dev", "test"])]
        split: String,
        /// Also score SQuAD v1.1 paragraphs (the sentence holding the gold
        /// answer against the paragraph's others).
        #[arg(long, value_name = "FILE")]
        squad: Option<PathBuf>,
        /// SQuAD articles, FIRST-LAST counting from 1 (report on 25-48).
        #[arg(long, value_name = "A-B", default_value = "25-48", value_parser = parse_articles)]
        articles: std::ops::RangeInclusive<usize>,
        /// Selector weights to use instead of the built-in ones.
        #[arg(long, value_name = "FILE")]
        weights: Option<PathBuf>,
        /// Keep the embeddings in this file, so a second run embeds nothing.
        #[arg(long, value_name = "FILE")]
        cache: Option<PathBuf>,
        #[arg(long)]
        json: bool,
    },
    /// Retrieval quality on a BEIR-layout collection: nDCG@10, recall@100, MRR@10.
    Retrieval {
        /// Folder with corpus.jsonl, queries.jsonl and qrels/<split>.tsv.
        #[arg(long, value_name = "DIR")]
        beir: PathBuf,
        #[arg(long, default_value = "test")]
        split: String,
        /// Retrievers to score (repeat); default: all that can run here.
        #[arg(long, value_enum)]
        retriever: Vec<RetrieverArg>,
        #[command(flatten)]
        fusion: FusionArgs,
        /// Most word tokens in a chunk (a BEIR document longer than this
        /// becomes several chunks; it scores as its best chunk).
        #[arg(long, default_value_t = 160, value_name = "N")]
        chunk_tokens: usize,
        /// Word tokens repeated between neighbouring chunks.
        #[arg(long, default_value_t = 32, value_name = "N")]
        chunk_overlap: usize,
        #[arg(long)]
        json: bool,
    },
    /// Calibrate and check when the extractive drafter abstains, on SQuAD v1.1.
    ///
    /// Odd-numbered articles are ingested and even-numbered ones left out, so
    /// questions on the latter have no answer in the records. The threshold is
    /// tuned on articles 1-24 and reported on articles 25-48.
    Abstention {
        /// The SQuAD v1.1 dev file (dev-v1.1.json).
        #[arg(long, value_name = "FILE")]
        squad: PathBuf,
        /// Most questions per class and split.
        #[arg(long, default_value_t = 600)]
        cap: usize,
        #[arg(long)]
        json: bool,
    },
    /// Score the verifier's judge on labelled (claim, evidence) pairs.
    ///
    /// Each line of the pair file: {"id", "claim", "evidence": "text" or
    /// ["sentence", ...], "label": "supported" | "unsupported"}. Prints the
    /// balanced accuracy, the pass-through rate (unsupported claims judged
    /// supported: the errors that reach a reporter) and the retention rate
    /// (supported claims kept), with counts per kind of pair and the reasons
    /// given for strikes.
    Verifier {
        /// JSON Lines pair file (see `eval make-pairs`).
        #[arg(long, value_name = "FILE")]
        pairs: PathBuf,
        #[arg(long, value_enum, default_value_t = JudgeKind::default())]
        judge: JudgeKind,
        /// Learned-judge weights to use instead of the built-in ones.
        #[arg(long, value_name = "FILE")]
        weights: Option<PathBuf>,
        /// Rules judge: lowest share of the sentence's content words that must
        /// be in the evidence (default: the built-in value).
        #[arg(long, value_name = "SHARE")]
        min_coverage: Option<f32>,
        /// Write every misjudged pair, with the judge's reason, to this JSON Lines file.
        #[arg(long, value_name = "FILE")]
        errors: Option<PathBuf>,
        #[arg(long)]
        json: bool,
    },
    /// Write verifier pairs built from open data, as JSON Lines.
    ///
    /// From SQuAD v1.1 (--squad): for the sentence holding each gold answer,
    /// supported claims (the sentence, the clause that holds the answer, a
    /// spacing and punctuation variant) and unsupported ones (a number or a
    /// date changed, a name swapped for another from the same article, a
    /// negation inserted or removed, the answer replaced by another
    /// question's answer, the sentence against another paragraph). Seeded and
    /// deterministic. From SciFact (--scifact): each claim against its
    /// rationale sentences; SUPPORT is supported, CONTRADICT unsupported.
    MakePairs {
        /// SQuAD v1.1 file (dev-v1.1.json).
        #[arg(
            long,
            value_name = "FILE",
            conflicts_with = "scifact",
            required_unless_present = "scifact"
        )]
        squad: Option<PathBuf>,
        /// Articles to use, FIRST-LAST counting from 1 (tune on 1-24, report on 25-48).
        #[arg(long, value_name = "A-B", default_value = "1-24", value_parser = parse_articles)]
        articles: std::ops::RangeInclusive<usize>,
        /// SciFact claims file (claims_train.jsonl or claims_dev.jsonl); the
        /// corpus.jsonl beside it supplies the sentences.
        #[arg(long, value_name = "FILE")]
        scifact: Option<PathBuf>,
        /// Seed for the choices made while perturbing (which number, which name, ...).
        #[arg(long, default_value_t = 20_240_601)]
        seed: u64,
        /// Where to write (default: standard output).
        #[arg(long, short, value_name = "FILE")]
        out: Option<PathBuf>,
    },
}

fn parse_articles(s: &str) -> std::result::Result<std::ops::RangeInclusive<usize>, String> {
    onrecord::eval::pairs::parse_articles(s)
}

#[derive(Subcommand, Debug)]
enum TrainCommand {
    /// Rebuild the learned judge's weights from open data: SQuAD v1.1
    /// articles 1-24 (adversarial pairs) and SciFact train claims. The
    /// result is deterministic; the built-in weights are this command's
    /// output at its defaults.
    Judge {
        /// SQuAD v1.1 file (default: dev-v1.1.json in the shared data folder).
        #[arg(long, value_name = "FILE")]
        squad: Option<PathBuf>,
        /// SciFact train claims (default: claims_train.jsonl in the shared data folder).
        #[arg(long, value_name = "FILE")]
        scifact: Option<PathBuf>,
        /// Seed for the choices made while perturbing (which number, which name, ...).
        #[arg(long, default_value_t = 20_240_601)]
        seed: u64,
        /// Highest pass-through allowed on the training pairs when choosing the threshold.
        #[arg(long, default_value_t = 0.01)]
        max_pass_through: f32,
        /// Where to write the weights.
        #[arg(
            long,
            short,
            value_name = "FILE",
            default_value = "src/verify/learned-judge.json"
        )]
        out: PathBuf,
        /// Print the weights file as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Rebuild the answer selector's weights from open data: WikiQA train
    /// and dev (real search-engine questions) and SQuAD v1.1 articles 1-24.
    /// Fits a words-and-meaning model (needs the embedding model) and a
    /// words-only one, calibrates each on WikiQA's answer triggering and
    /// picks the threshold with the best F1 there. Deterministic; the
    /// built-in weights are this command's output at its defaults.
    Selector {
        /// WikiQA folder (default: wikiqa in the shared data folder).
        #[arg(long, value_name = "DIR")]
        wikiqa: Option<PathBuf>,
        /// SQuAD v1.1 file (default: dev-v1.1.json in the shared data folder).
        #[arg(long, value_name = "FILE")]
        squad: Option<PathBuf>,
        /// Keep the embeddings in this file, so a second run embeds nothing.
        #[arg(long, value_name = "FILE")]
        cache: Option<PathBuf>,
        /// Train on WikiQA train only and print the figures on dev, to try
        /// a change before training on both.
        #[arg(long)]
        hold_out_dev: bool,
        /// Where to write the weights.
        #[arg(
            long,
            short,
            value_name = "FILE",
            default_value = "src/select/selector.json"
        )]
        out: PathBuf,
        /// Print the weights file as JSON.
        #[arg(long)]
        json: bool,
    },
}

pub fn run() -> Result<ExitCode> {
    let cli = Cli::parse();
    let level = match cli.verbose {
        0 => "warn",
        1 => "info",
        _ => "debug",
    };
    let _ = tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_default_env().unwrap_or_else(|_| {
                tracing_subscriber::EnvFilter::new(format!("onrecord={level}"))
            }),
        )
        .with_writer(std::io::stderr)
        .try_init();
    let choice = cli.embedder.clone();
    match cli.command {
        Command::ReadOne {
            kind,
            pdf_route,
            memory_bytes,
            path,
        } => {
            use onrecord::extract::worker;
            let (Some(kind), Some(route)) =
                (worker::kind_named(&kind), worker::route_named(&pdf_route))
            else {
                bail!("read-one: unknown --kind {kind} or --pdf-route {pdf_route}");
            };
            let code = worker::serve_one(&path, kind, route, memory_bytes);
            Ok(ExitCode::from(code as u8))
        }
        Command::Add {
            paths,
            index,
            manifest,
            title,
            org,
            date,
            release,
            url,
            chunk_tokens,
            chunk_overlap,
            pdf_reader,
            reader_memory,
            reader_seconds,
            ocr,
            json,
            quiet,
        } => {
            if reader_memory < 64 || reader_seconds == 0 {
                bail!("--reader-memory must be at least 64 (MB) and --reader-seconds at least 1");
            }
            let mut reader = onrecord::extract::worker::Isolation::this_program()
                .context("finding this program to read files in a worker process")?;
            reader.memory_bytes = reader_memory << 20;
            reader.time_limit = std::time::Duration::from_secs(reader_seconds);
            let (ocr, ocr_settings) = ocr.resolve()?;
            let mut m = Manifest::default();
            for f in &manifest {
                m.extend(
                    Manifest::load(f)
                        .with_context(|| format!("reading manifest {}", f.display()))?,
                );
            }
            if chunk_tokens == 0 {
                bail!("--chunk-tokens must be at least 1");
            }
            let cfg = IngestConfig {
                chunk: onrecord::chunk::ChunkConfig {
                    max_tokens: chunk_tokens,
                    overlap_tokens: chunk_overlap.min(chunk_tokens.saturating_sub(1)),
                },
                extract: ExtractOptions {
                    pdf_route: pdf_reader.route(),
                },
                manifest: m,
                meta_override: DocMeta {
                    title,
                    organisation: org,
                    date,
                    release,
                    url,
                },
                progress: !quiet && !json && std::io::stderr().is_terminal(),
                ocr,
                ocr_settings,
                reader: Some(reader),
            };
            let progress = cfg.progress;
            cmd_ingest(&index.index, &paths, &cfg, &choice, progress, json)
        }
        Command::Find {
            query,
            index,
            filters,
            retrieval,
            k,
            explain,
            json,
        } => {
            let opts = retrieval.resolve()?;
            let idx = open_index(&index.index, &choice, &opts)?;
            cmd_search(&idx, &query, &filters.resolve(), k, explain, json)
        }
        Command::Answer {
            question,
            index,
            filters,
            retrieval,
            k,
            max_sentences,
            min_score,
            judge,
            draft,
            export,
        } => {
            let json = export.json;
            let judge = judge.build();
            let opts = retrieval.resolve()?;
            let idx = open_index(&index.index, &choice, &opts)?;
            let cfg = ExtractiveConfig {
                max_sentences,
                ..Default::default()
            };
            if let Some(p) = min_score
                && !(0.0..=1.0).contains(&p)
            {
                bail!("--min-score is a probability: give a number from 0 to 1 (got {p})");
            }
            let selector = onrecord::select::Selector {
                min_probability: min_score,
                ..Default::default()
            };
            let draft = draft.with_settings(&onrecord::config::Config::load()?)?;
            let a = if draft.wants_model() {
                ask_with_model(
                    &idx,
                    &question,
                    (&filters.resolve(), k),
                    (cfg, &selector),
                    &draft,
                    judge.as_ref(),
                    json,
                )?
            } else {
                ask_one(
                    &idx,
                    &question,
                    (&filters.resolve(), k),
                    (cfg, &selector),
                    judge.as_ref(),
                )?
            };
            // The answer stands even when the log cannot take it (a
            // read-only index, say); the reader is told.
            let logged = match idx.store.log_answer(&a) {
                Ok(n) => Some(n),
                Err(e) => {
                    eprintln!("warning: the answer was not logged: {e}");
                    None
                }
            };
            let mut out = std::io::stdout().lock();
            match export.format() {
                Export::Json => print_json(&a)?,
                Export::Csv => onrecord::replay::table::write_answer(&a, &mut out)?,
                Export::Markdown => {
                    write!(out, "{}", onrecord::replay::markdown::render_answer(&a))?
                }
                Export::Text => {
                    let mut out = onrecord::text::Printable::new(&mut out);
                    write!(out, "{}", answer::render_text(&a))?;
                    if let Some(n) = logged {
                        writeln!(
                            out,
                            "\nLogged as answer {n}; check it again later with: onrecord replay --id {n}"
                        )?;
                    }
                }
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::History {
            index,
            limit,
            keep,
            json,
        } => cmd_history(&index.index, limit, keep, json),
        Command::Replay {
            file,
            id,
            index,
            sources,
            manifest,
            pdf_reader,
            judge,
            export,
        } => {
            let format = export.format();
            cmd_replay(
                ReplayArgs {
                    file,
                    id,
                    index: index.index,
                    sources,
                    manifest,
                    pdf_route: pdf_reader.route(),
                    judge,
                },
                format,
            )
        }
        Command::Records {
            index,
            filters,
            json,
        } => cmd_docs(&index.index, &filters.resolve(), json),
        Command::Demo {
            source,
            workdir,
            json,
        } => cmd_demo(source, &workdir, &choice, json),
        Command::Web {
            index,
            demo,
            bind,
            token,
            workers,
        } => cmd_serve(index.index, demo, bind, token, workers, &choice),
        Command::Reindex { index, json, quiet } => cmd_reindex(
            &index.index,
            &choice,
            !quiet && !json && std::io::stderr().is_terminal(),
            json,
        ),
        Command::Models(ModelsCommand::Fetch {
            repo_id,
            file,
            json,
        }) => {
            let dir = embed::hub::fetch(
                &repo_id,
                file.as_deref(),
                !json && std::io::stderr().is_terminal(),
            )?;
            if dir.is_file() {
                let m = onrecord::llm::local::LocalModel::load(
                    &dir,
                    Some(onrecord::llm::reencode_cache_dir()),
                )?;
                if json {
                    print_json(
                        &serde_json::json!({"repo_id": repo_id, "file": dir, "model": m.id()}),
                    )?;
                } else {
                    println!(
                        "{repo_id}: {} (model {})\nUse it with: --drafter local --llm {repo_id}",
                        dir.display(),
                        m.id()
                    );
                }
                return Ok(ExitCode::SUCCESS);
            }
            let e = embed::bert::BertEmbedder::load(&dir)?;
            if json {
                print_json(
                    &serde_json::json!({"repo_id": repo_id, "dir": dir, "embedder": e.id(), "dim": e.dim()}),
                )?;
            } else {
                println!(
                    "{repo_id}: in {} (embedder {}, {} dimensions)\nUse it with: --embedder {repo_id}",
                    dir.display(),
                    e.id(),
                    e.dim()
                );
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Models(ModelsCommand::Where { json }) => cmd_models_list(&choice, json),
        Command::Bench(BenchCommand::Embed { beir_corpus, limit }) => {
            let r = embed::resolve(&choice)?;
            let Some(e) = r.embedder else {
                bail!(
                    "{}",
                    r.note
                        .unwrap_or_else(|| "no embedding model (--embedder off)".into())
                );
            };
            let report = onrecord::eval::beir::bench_embed(&beir_corpus, limit, e.as_ref())?;
            print_json(&report)?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Eval(EvalCommand::Run(args)) => cmd_eval_run(args, &choice),
        Command::Eval(EvalCommand::Abstention { squad, cap, json }) => {
            cmd_eval_abstention(&squad, cap, json)
        }
        Command::Eval(EvalCommand::Verifier {
            pairs,
            judge,
            weights,
            min_coverage,
            errors,
            json,
        }) => {
            let judge: Box<dyn Judge> = match (judge, weights, min_coverage) {
                (JudgeKind::Learned, Some(w), None) => {
                    Box::new(onrecord::verify::LearnedJudge::from_file(&w)?)
                }
                (JudgeKind::Rules, None, Some(c)) => Box::new(RulesJudge { min_coverage: c }),
                (k, None, None) => k.build(),
                (_, Some(_), _) if judge == JudgeKind::Rules => {
                    bail!("--weights is for --judge learned")
                }
                _ => bail!("--min-coverage is for --judge rules"),
            };
            cmd_eval_verifier(&pairs, judge.as_ref(), errors.as_deref(), json)
        }
        Command::Eval(EvalCommand::MakePairs {
            squad,
            articles,
            scifact,
            seed,
            out,
        }) => cmd_make_pairs(
            squad.as_deref(),
            articles,
            scifact.as_deref(),
            seed,
            out.as_deref(),
        ),
        Command::Train(TrainCommand::Judge {
            squad,
            scifact,
            seed,
            max_pass_through,
            out,
            json,
        }) => cmd_train_judge(squad, scifact, seed, max_pass_through, &out, json),
        Command::Train(TrainCommand::Selector {
            wikiqa,
            squad,
            cache,
            hold_out_dev,
            out,
            json,
        }) => cmd_train_selector(wikiqa, squad, cache, hold_out_dev, &choice, &out, json),
        Command::Eval(EvalCommand::Answers {
            wikiqa,
            split,
            squad,
            articles,
            weights,
            cache,
            json,
        }) => cmd_eval_answers(
            &wikiqa,
            &split,
            squad.as_deref().map(|f| (f, articles)),
            weights.as_deref(),
            cache.as_deref(),
            &choice,
            json,
        ),
        Command::Eval(EvalCommand::Retrieval {
            beir,
            split,
            retriever,
            fusion,
            chunk_tokens,
            chunk_overlap,
            json,
        }) => {
            if chunk_tokens == 0 {
                bail!("--chunk-tokens must be at least 1");
            }
            let chunk = onrecord::chunk::ChunkConfig {
                max_tokens: chunk_tokens,
                overlap_tokens: chunk_overlap.min(chunk_tokens - 1),
            };
            let kinds: Vec<RetrieverKind> = retriever.iter().map(|r| r.kind()).collect();
            let base = SearchOptions {
                weights: Weights {
                    bm25: fusion.bm25_weight,
                    dense: fusion.dense_weight,
                },
                feedback: fusion.feedback.then(onrecord::feedback::Feedback::default),
                sentences: fusion.sentence_vectors,
                ..Default::default()
            };
            cmd_eval_retrieval(
                &beir,
                &split,
                &choice,
                &kinds,
                base,
                chunk,
                fusion.cache.as_deref(),
                json,
            )
        }
    }
}

#[derive(Args, Debug)]
struct EvalRunArgs {
    /// Questions: our JSON Lines file, a BEIR-layout folder, or a SQuAD
    /// v1.1 JSON file.
    questions: PathBuf,
    /// A configuration file (repeat to compare); default: every file in
    /// eval/configs.
    #[arg(long = "config", value_name = "FILE")]
    configs: Vec<PathBuf>,
    /// Where to write report.html, report.json and summary.md.
    #[arg(long, default_value = "eval-report", value_name = "DIR")]
    report: PathBuf,
    /// The index the questions are about (JSON Lines sets). Default: the
    /// demo index when the set sits beside the demo sources, else
    /// ./.onrecord or ONRECORD_INDEX.
    #[arg(long, value_name = "DIR")]
    index: Option<PathBuf>,
    /// Where the demo release and its index are built.
    #[arg(long, default_value = ".onrecord-demo", value_name = "DIR")]
    workdir: PathBuf,
    /// The layout of QUESTIONS.
    #[arg(long, value_enum, default_value_t = onrecord::eval::questions::SetFormat::Auto)]
    format: onrecord::eval::questions::SetFormat,
    /// BEIR qrels split.
    #[arg(long, default_value = "test")]
    split: String,
    /// SQuAD articles to use (1-based, inclusive).
    #[arg(long, default_value = "1-2", value_parser = parse_articles, value_name = "A-B")]
    articles: std::ops::RangeInclusive<usize>,
    /// At most this many questions, taken evenly through the set (0: all).
    #[arg(long, default_value_t = 0, value_name = "N")]
    limit: usize,
    /// Bootstrap seed.
    #[arg(long, default_value_t = onrecord::eval::bootstrap::SEED)]
    seed: u64,
    /// Bootstrap resamples.
    #[arg(long, default_value_t = onrecord::eval::bootstrap::RESAMPLES)]
    resamples: usize,
    /// Print the report as JSON instead of the summary.
    #[arg(long)]
    json: bool,
    /// No progress bar.
    #[arg(short, long)]
    quiet: bool,
}

fn cmd_eval_run(args: EvalRunArgs, choice: &EmbedderChoice) -> Result<ExitCode> {
    use onrecord::eval::run::{self as harness, EvalConfig, Skipped};
    let json = args.json;
    let progress = !args.quiet && !json && std::io::stderr().is_terminal();
    let adapter = onrecord::eval::questions::AdapterOptions {
        split: args.split.clone(),
        articles: args.articles.clone(),
        limit: args.limit,
    };
    let set = onrecord::eval::questions::load(&args.questions, args.format, &adapter)?;
    let files = if args.configs.is_empty() {
        harness::configs_in(&harness::default_configs_dir())?
    } else {
        args.configs.clone()
    };
    if files.is_empty() {
        bail!("no configuration files: give --config FILE (see eval/configs for examples)");
    }
    let mut configs = Vec::new();
    for f in &files {
        configs.push((EvalConfig::read(f)?, f.display().to_string()));
    }
    // The corpus: the set's own (ingested once under the report folder), an
    // index, or the demo release beside the questions.
    let (index_dir, corpus) = match (set.corpus, &args.index) {
        (Some(docs), _) => {
            let dir = args.report.join("index");
            let n = docs.len();
            onrecord::ingest::ingest_docs(
                &dir,
                docs,
                onrecord::chunk::ChunkConfig::default(),
                progress.then_some(n as u64),
            )?;
            let corpus = format!("{n} documents from {}", args.questions.display());
            (dir, corpus)
        }
        (None, Some(dir)) => (dir.clone(), format!("index {}", dir.display())),
        (None, None) => match args.questions.parent() {
            Some(p) if onrecord::demo::is_source_dir(p) => {
                let (dir, _) = demo_index(p, &args.workdir, progress)?;
                (dir, format!("the demo release from {}", p.display()))
            }
            _ => {
                let dir = std::env::var_os("ONRECORD_INDEX")
                    .map(PathBuf::from)
                    .unwrap_or_else(|| PathBuf::from(".onrecord"));
                let corpus = format!("index {}", dir.display());
                (dir, corpus)
            }
        },
    };
    let wants_vectors = configs
        .iter()
        .any(|(c, _)| c.retriever_kind().is_ok_and(|k| k != RetrieverKind::Bm25));
    let embedder = if wants_vectors {
        load_embedder(choice)?
    } else {
        None
    };
    if let Some(e) = &embedder {
        onrecord::vectors::update(&index_dir, e.as_ref(), progress)?;
    }
    let mut idx = Index::open_with(&index_dir, embedder)?;
    let mut prepared = Vec::new();
    let mut skipped = Vec::new();
    for (c, file) in configs {
        let kind = c.retriever_kind().map_err(anyhow::Error::msg)?;
        let opts = SearchOptions {
            retriever: Some(kind),
            ..Default::default()
        };
        if idx.effective(&opts) != kind {
            let reason = format!(
                "needs an embedding model for {} retrieval, and none is on this machine (see README, \"Embedding model\")",
                kind.name()
            );
            eprintln!("Not running {} ({file}): {reason}", c.name);
            skipped.push(Skipped {
                name: c.name.clone(),
                file,
                reason,
            });
            continue;
        }
        prepared.push(harness::prepare(c, file)?);
    }
    if prepared.is_empty() {
        bail!("no configuration can run here");
    }
    let report = harness::run(
        &mut idx,
        prepared,
        skipped,
        harness::RunPlan {
            question_set: args.questions.display().to_string(),
            corpus,
            questions: &set.questions,
            resamples: args.resamples,
            seed: args.seed,
            progress,
        },
    )?;
    onrecord::eval::report::write_all(&report, &args.report)?;
    if json {
        print_json(&report)?;
    } else {
        print!("{}", onrecord::eval::report::markdown(&report));
        println!(
            "\nReport: {} (also report.json and summary.md there)",
            args.report.join("report.html").display()
        );
    }
    for w in &report.warnings {
        eprintln!("warning: {w}");
    }
    Ok(ExitCode::SUCCESS)
}

fn cmd_eval_verifier(
    pairs: &std::path::Path,
    judge: &dyn Judge,
    errors: Option<&std::path::Path>,
    json: bool,
) -> Result<ExitCode> {
    use onrecord::eval::pairs::{evaluate, read_pairs};
    let pairs = read_pairs(pairs)?;
    let r = evaluate(&pairs, judge);
    if let Some(path) = errors {
        let mut f = std::io::BufWriter::new(
            std::fs::File::create(path)
                .with_context(|| format!("cannot write {}", path.display()))?,
        );
        for m in &r.misjudged {
            writeln!(f, "{}", serde_json::to_string(m)?)?;
        }
        f.flush()?;
    }
    if json {
        print_json(&r)?;
        return Ok(ExitCode::SUCCESS);
    }
    println!(
        "Judge {}: {} pairs ({} supported, {} unsupported)",
        r.judge, r.pairs, r.supported, r.unsupported
    );
    println!("  balanced accuracy  {:.3}", r.balanced_accuracy);
    println!(
        "  pass-through       {:.2}%  (unsupported judged supported: {} of {})",
        r.pass_through * 100.0,
        r.false_supported,
        r.unsupported
    );
    println!(
        "  retention          {:.2}%  (supported kept: {} of {})",
        r.retention * 100.0,
        r.true_supported,
        r.supported
    );
    println!(
        "\n  {:<18} {:>12} {:>7} {:>16}",
        "kind", "label", "pairs", "judged supported"
    );
    for (kind, k) in &r.by_kind {
        let label = match k.label {
            Some(onrecord::eval::pairs::Label::Supported) => "supported",
            Some(onrecord::eval::pairs::Label::Unsupported) => "unsupported",
            None => "-",
        };
        println!(
            "  {kind:<18} {label:>12} {:>7} {:>16}",
            k.pairs, k.judged_supported
        );
    }
    if !r.strike_reasons.is_empty() {
        println!("\n  Reasons given for strikes:");
        let mut reasons: Vec<(&String, &usize)> = r.strike_reasons.iter().collect();
        reasons.sort_by(|a, b| b.1.cmp(a.1).then(a.0.cmp(b.0)));
        for (why, n) in reasons {
            println!("  {n:>7}  {why}");
        }
    }
    println!("\n  {:.3} ms per pair", r.mean_ms_per_pair);
    Ok(ExitCode::SUCCESS)
}

fn cmd_make_pairs(
    squad: Option<&std::path::Path>,
    articles: std::ops::RangeInclusive<usize>,
    scifact: Option<&std::path::Path>,
    seed: u64,
    out: Option<&std::path::Path>,
) -> Result<ExitCode> {
    use onrecord::eval::pairs::{scifact_pairs, squad_pairs, write_pairs};
    let pairs = match (squad, scifact) {
        (Some(sq), _) => squad_pairs(sq, articles, seed)?,
        (None, Some(claims)) => {
            let corpus = claims.with_file_name("corpus.jsonl");
            scifact_pairs(claims, &corpus)?
        }
        (None, None) => bail!("give --squad FILE or --scifact FILE"),
    };
    match out {
        Some(path) => {
            let mut f = std::io::BufWriter::new(
                std::fs::File::create(path)
                    .with_context(|| format!("cannot write {}", path.display()))?,
            );
            write_pairs(&pairs, &mut f)?;
            f.flush()?;
            eprintln!("{} pairs written to {}", pairs.len(), path.display());
        }
        None => write_pairs(&pairs, &mut std::io::stdout().lock())?,
    }
    Ok(ExitCode::SUCCESS)
}

fn cmd_train_judge(
    squad: Option<PathBuf>,
    scifact: Option<PathBuf>,
    seed: u64,
    max_pass_through: f32,
    out: &std::path::Path,
    json: bool,
) -> Result<ExitCode> {
    use onrecord::eval::pairs::{scifact_pairs, squad_pairs, train_judge};
    let data = onrecord::shared_data_dir();
    let squad = squad.unwrap_or_else(|| data.join("squad-v1.1/dev-v1.1.json"));
    let scifact = scifact.unwrap_or_else(|| data.join("scifact/claims_train.jsonl"));
    let mut pairs = squad_pairs(&squad, 1..=24, seed)?;
    let n_squad = pairs.len();
    pairs.extend(scifact_pairs(
        &scifact,
        &scifact.with_file_name("corpus.jsonl"),
    )?);
    let trained_on = serde_json::json!({
        "squad": {"file": squad.file_name().map(|f| f.to_string_lossy().into_owned()), "articles": "1-24", "seed": seed, "pairs": n_squad},
        "scifact": {"file": scifact.file_name().map(|f| f.to_string_lossy().into_owned()), "pairs": pairs.len() - n_squad},
        "max_pass_through": (f64::from(max_pass_through) * 1e4).round() / 1e4,
    });
    let w = train_judge(&pairs, max_pass_through, trained_on);
    write_weights(&w, out)?;
    if json {
        print_json(&w)?;
    } else {
        println!(
            "Learned judge trained on {} pairs; threshold {:.4}; written to {}",
            pairs.len(),
            w.threshold,
            out.display()
        );
        for (f, v) in w.features.iter().zip(&w.weights) {
            println!("  {f:<18} {v:>8.3}");
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// The embedding model for open-data selection work, wrapped in a cache
/// file when one is named.
fn selection_embedder(choice: &EmbedderChoice, what: &str) -> Result<Option<Arc<dyn Embedder>>> {
    let r = embed::resolve(choice)?;
    if r.embedder.is_none()
        && let Some(n) = &r.note
    {
        eprintln!("{n}");
        eprintln!("{what}");
    }
    Ok(r.embedder)
}

fn cmd_train_selector(
    wikiqa: Option<PathBuf>,
    squad: Option<PathBuf>,
    cache: Option<PathBuf>,
    hold_out_dev: bool,
    choice: &EmbedderChoice,
    out: &std::path::Path,
    json: bool,
) -> Result<ExitCode> {
    use onrecord::eval::selection::{
        Item, SQUAD_CAP, embed_items, read_wikiqa, squad_retrieval, train,
    };
    let data = onrecord::shared_data_dir();
    let wikiqa = wikiqa.unwrap_or_else(|| data.join("wikiqa"));
    let squad = squad.unwrap_or_else(|| data.join("squad-v1.1/dev-v1.1.json"));
    let Some(model) = selection_embedder(
        choice,
        "`train selector` fits the words-and-meaning model too, so it needs the embedding model",
    )?
    else {
        bail!("no embedding model: run eval/models/fetch, or pass --embedder DIR");
    };
    let model: Arc<dyn Embedder> = match &cache {
        Some(c) => Arc::new(onrecord::embed::cache::CachedEmbedder::open(model, c)?),
        None => model,
    };
    let splits: &[&str] = if hold_out_dev {
        &["train"]
    } else {
        &["train", "dev"]
    };
    let mut tuning: Vec<Item> = Vec::new();
    for split in splits {
        tuning.extend(read_wikiqa(&wikiqa.join(format!("WikiQA-{split}.tsv")))?);
    }
    let dev = if hold_out_dev {
        read_wikiqa(&wikiqa.join("WikiQA-dev.tsv"))?
    } else {
        Vec::new()
    };
    let progress = !json && std::io::stderr().is_terminal();
    let all: Vec<Item> = tuning.iter().chain(&dev).cloned().collect();
    let vectors = embed_items(&all, model.as_ref(), progress)?;
    // SQuAD articles 1-24 asked as answering asks: hybrid for the
    // words-and-meaning model, BM25 for the words-only one.
    let (w1, w2) = (tempfile::tempdir()?, tempfile::tempdir()?);
    let squad_semantic = squad_retrieval(
        &squad,
        1..=24,
        SQUAD_CAP,
        Some(model.clone()),
        w1.path(),
        progress,
    )?;
    let squad_lexical = squad_retrieval(&squad, 1..=24, SQUAD_CAP, None, w2.path(), progress)?;
    let trained_on = serde_json::json!({
        "wikiqa": {"splits": splits, "questions": tuning.len(),
                   "candidates": tuning.iter().map(|i| i.sentences.len()).sum::<usize>()},
        "squad": {"file": squad.file_name().map(|f| f.to_string_lossy().into_owned()),
                  "articles": "1-24 (odd ones ingested, even ones left out)",
                  "questions": squad_semantic.len(), "cap_per_kind": SQUAD_CAP},
        "embedder": model.id(),
        "trigger": "unweighted logistic regression on each question's best-scored candidate; threshold: best mean answer-triggering F1 over WikiQA and SQuAD",
    });
    let w = train(
        &tuning,
        &squad_semantic,
        &squad_lexical,
        &vectors,
        trained_on,
    );
    if hold_out_dev {
        use onrecord::eval::selection::{evaluate, item_rows};
        for m in [&w.semantic, &w.lexical] {
            let f = evaluate(&dev, &item_rows(&dev, m.set(), Some(&vectors)), m);
            eprintln!(
                "held-out WikiQA dev, {}: MAP {:.3} MRR {:.3} triggering P {:.3} R {:.3} F1 {:.3}",
                m.name, f.map, f.mrr, f.trigger_precision, f.trigger_recall, f.trigger_f1
            );
        }
    }
    write_weights(&w, out)?;
    if json {
        print_json(&w)?;
    } else {
        println!(
            "Answer selector trained on {} WikiQA and {} SQuAD questions; written to {}",
            tuning.len(),
            squad_semantic.len(),
            out.display()
        );
        for m in [&w.semantic, &w.lexical] {
            println!(
                "{} (threshold {:.3}; tuning figures {})",
                m.name, m.threshold, m.figures
            );
            for (f, v) in m.features.iter().zip(&m.weights) {
                println!("  {f:<14} {v:>8.3}");
            }
        }
    }
    Ok(ExitCode::SUCCESS)
}

fn cmd_eval_answers(
    wikiqa: &std::path::Path,
    split: &str,
    squad: Option<(&std::path::Path, std::ops::RangeInclusive<usize>)>,
    weights: Option<&std::path::Path>,
    cache: Option<&std::path::Path>,
    choice: &EmbedderChoice,
    json: bool,
) -> Result<ExitCode> {
    use onrecord::eval::selection::{embed_items, evaluate, item_rows, read_wikiqa, squad_items};
    use onrecord::select::{FeatureSet, SelectorWeights};
    let w = match weights {
        Some(f) => SelectorWeights::from_file(f)?,
        None => SelectorWeights::bundled(),
    };
    let model = selection_embedder(choice, "only the words-only selector is scored")?;
    let items = read_wikiqa(&wikiqa.join(format!("WikiQA-{split}.tsv")))?;
    let squad_set = match &squad {
        Some((f, a)) => squad_items(f, a.clone())?,
        None => Vec::new(),
    };
    let progress = !json && std::io::stderr().is_terminal();
    let all: Vec<_> = items.iter().chain(&squad_set).cloned().collect();
    let vectors = match (&model, cache) {
        (Some(m), Some(c)) => {
            let cached = onrecord::embed::cache::CachedEmbedder::open(m.clone(), c)?;
            Some(embed_items(&all, &cached, progress)?)
        }
        (Some(m), None) => Some(embed_items(&all, m.as_ref(), progress)?),
        (None, _) => None,
    };
    let sets: Vec<FeatureSet> = match vectors {
        Some(_) => vec![FeatureSet::Semantic, FeatureSet::Lexical],
        None => vec![FeatureSet::Lexical],
    };
    let mut models = Vec::new();
    for set in &sets {
        let m = w.model(*set);
        let f = evaluate(&items, &item_rows(&items, *set, vectors.as_ref()), m);
        let sq = (!squad_set.is_empty()).then(|| {
            evaluate(
                &squad_set,
                &item_rows(&squad_set, *set, vectors.as_ref()),
                m,
            )
        });
        models.push((f, sq));
    }
    let (first, first_squad) = &models[0];
    let mut v = serde_json::to_value(first)?;
    if let Some(o) = v.as_object_mut() {
        o.insert("dataset".into(), "wikiqa".into());
        o.insert("split".into(), split.into());
        if let Some(sq) = first_squad {
            o.insert(
                "squad".into(),
                serde_json::json!({"articles": squad.as_ref().map(|(_, a)| format!("{}-{}", a.start(), a.end())),
                                   "questions": sq.questions, "map": sq.map, "mrr": sq.mrr}),
            );
        }
        if let Some((lex, lex_squad)) = models.get(1) {
            let mut l = serde_json::to_value(lex)?;
            if let (Some(lo), Some(sq)) = (l.as_object_mut(), lex_squad) {
                lo.insert(
                    "squad".into(),
                    serde_json::json!({"map": sq.map, "mrr": sq.mrr}),
                );
            }
            o.insert("words_only".into(), l);
        }
        o.insert(
            "published".into(),
            serde_json::json!({"source": "Yang, Yih and Meek 2015 (WikiQA), test split",
                               "cnn_cnt_map": 0.652, "cnn_cnt_mrr": 0.665, "best_trigger_f1": 0.322}),
        );
    }
    if json {
        print_json(&v)?;
    } else {
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "WikiQA {split}: {} questions, {} with an answering sentence",
            first.questions, first.with_answer
        )?;
        for (f, sq) in &models {
            writeln!(
                out,
                "  {:<12} MAP {:.3}  MRR {:.3}  triggering P {:.3} R {:.3} F1 {:.3} (threshold {:.3})",
                f.model,
                f.map,
                f.mrr,
                f.trigger_precision,
                f.trigger_recall,
                f.trigger_f1,
                f.threshold
            )?;
            if let Some(sq) = sq {
                writeln!(
                    out,
                    "  {:<12} SQuAD {} questions: MAP {:.3}  MRR {:.3}",
                    "", sq.questions, sq.map, sq.mrr
                )?;
            }
        }
        writeln!(
            out,
            "Published (Yang et al. 2015, test): CNN-Cnt MAP 0.652, MRR 0.665; best triggering F1 about 0.32"
        )?;
    }
    Ok(ExitCode::SUCCESS)
}

/// Write a weights file through a temporary file, so a failed write never
/// leaves half a file.
fn write_weights(w: &impl serde::Serialize, out: &std::path::Path) -> Result<()> {
    let text = serde_json::to_string_pretty(w)? + "\n";
    let tmp = out.with_extension("json.tmp");
    std::fs::write(&tmp, text).with_context(|| format!("cannot write {}", tmp.display()))?;
    std::fs::rename(&tmp, out).with_context(|| format!("cannot write {}", out.display()))?;
    Ok(())
}

fn cmd_eval_abstention(squad: &std::path::Path, cap: usize, json: bool) -> Result<ExitCode> {
    use onrecord::eval::squad::{at_threshold, best_threshold, score_range, sweep};
    let tune_dir = tempfile::tempdir()?;
    let report_dir = tempfile::tempdir()?;
    let tune = score_range(squad, 1..=24, cap, tune_dir.path())?;
    let report = score_range(squad, 25..=48, cap, report_dir.path())?;
    let best = best_threshold(&tune);
    let default = onrecord::select::Selector::default()
        .weights
        .lexical
        .threshold;
    let sweep = sweep(&tune);
    let at_default = at_threshold(&report, default);
    if json {
        print_json(&serde_json::json!({
            "tuned_on": "articles 1-24",
            "tuned": best,
            "default_threshold": default,
            "reported_on": "articles 25-48",
            "report_at_default": at_default,
            "report_at_tuned": at_threshold(&report, best.threshold),
            "sweep_tuning_split": sweep,
            "questions": {"tuning": tune.len(), "report": report.len()},
        }))?;
    } else {
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "threshold  answered  with-gold  abstained  J   (articles 1-24, {} questions)",
            tune.len()
        )?;
        for r in &sweep {
            writeln!(
                out,
                "  {:.2}      {:.3}     {:.3}      {:.3}     {:.3}",
                r.threshold, r.answered, r.answered_with_gold, r.abstained, r.youden_j
            )?;
        }
        writeln!(
            out,
            "tuned threshold {:.2} (default {:.2})",
            best.threshold, default
        )?;
        writeln!(
            out,
            "articles 25-48 at {:.2}: answered {:.3} (gold in top sentence {:.3}), abstained {:.3}",
            default, at_default.answered, at_default.answered_with_gold, at_default.abstained
        )?;
    }
    Ok(ExitCode::SUCCESS)
}

#[allow(clippy::too_many_arguments)]
fn cmd_eval_retrieval(
    beir: &std::path::Path,
    split: &str,
    choice: &EmbedderChoice,
    kinds: &[RetrieverKind],
    base: SearchOptions,
    chunk: onrecord::chunk::ChunkConfig,
    cache: Option<&std::path::Path>,
    json: bool,
) -> Result<ExitCode> {
    let tmp = tempfile::tempdir().context("creating a temporary index folder")?;
    let progress = !json && std::io::stderr().is_terminal();
    let embedder = if kinds.iter().all(|k| *k == RetrieverKind::Bm25) && !kinds.is_empty() {
        None
    } else {
        load_embedder(choice)?
    };
    let embedder: Option<Arc<dyn Embedder>> = match (embedder, cache) {
        (Some(m), Some(c)) => Some(Arc::new(onrecord::embed::cache::CachedEmbedder::open(
            m, c,
        )?)),
        (m, _) => m,
    };
    let r = onrecord::eval::beir::run_all(
        beir,
        split,
        tmp.path(),
        progress,
        embedder,
        kinds,
        base,
        chunk,
    )?;
    for n in &r.notes {
        eprintln!("note: {n}");
    }
    if json {
        print_json(&r)?;
        return Ok(ExitCode::SUCCESS);
    }
    let mut out = std::io::stdout().lock();
    if let Some(first) = r.runs.first() {
        writeln!(
            out,
            "{} ({} split): {} queries, {} documents, {} chunks; ingest {:.1} docs/s",
            beir.display(),
            first.split,
            first.queries,
            first.documents,
            first.chunks,
            first.ingest_docs_per_second
        )?;
    }
    writeln!(
        out,
        "  retriever  nDCG@10  recall@100  MRR@10  search p50/p95 ms"
    )?;
    for x in &r.runs {
        writeln!(
            out,
            "  {:<9}  {:.4}   {:.4}      {:.4}  {:.2} / {:.2}",
            x.retriever, x.ndcg10, x.recall100, x.mrr10, x.search_p50_ms, x.search_p95_ms
        )?;
    }
    if let Some(v) = &r.vectors {
        writeln!(
            out,
            "  embedder {}: {} chunks in {:.0}s ({:.1} chunks/s); query embedding {:.1} ms",
            v.embedder, v.chunks, v.embed_seconds, v.chunks_per_second, v.query_embed_ms
        )?;
        for g in &v.graph {
            writeln!(
                out,
                "  HNSW {:?}: recall@10 vs exact {:.4}, {:.1} MiB, p50 {:.2} ms",
                g.scalar,
                g.recall10,
                g.memory_bytes as f64 / 1048576.0,
                g.search_p50_ms
            )?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// Load the chosen embedder, printing the one-line note when there is none.
fn load_embedder(choice: &EmbedderChoice) -> Result<Option<std::sync::Arc<dyn Embedder>>> {
    let r = embed::resolve(choice)?;
    if let Some(n) = r.note {
        eprintln!("{n}");
    }
    Ok(r.embedder)
}

/// Open the index with the chosen embedder (none when BM25 is asked for)
/// and search options, printing any note about falling back.
fn open_index(
    dir: &std::path::Path,
    choice: &EmbedderChoice,
    opts: &SearchOptions,
) -> Result<Index> {
    let embedder = if opts.retriever == Some(RetrieverKind::Bm25) {
        None
    } else {
        load_embedder(choice)?
    };
    let mut idx = Index::open_with(dir, embedder)?;
    idx.options = *opts;
    for n in &idx.notes {
        eprintln!("{n}");
    }
    Ok(idx)
}

fn cmd_reindex(
    index: &std::path::Path,
    choice: &EmbedderChoice,
    progress: bool,
    json: bool,
) -> Result<ExitCode> {
    use onrecord::vectors::{DEFAULT_SCALAR, VectorIndex, embed_pending};
    let started = std::time::Instant::now();
    let mut store = onrecord::store::Store::open(index)?;
    let _writer = onrecord::lock::acquire(index, "`onrecord reindex`")?;
    let bm25 = onrecord::bm25::Bm25Index::open_or_create(index)?;
    bm25.rebuild(&store)?;
    let (docs, _, chunks) = store.counts()?;
    let mut vectors = serde_json::Value::Null;
    let mut line = String::new();
    if let Some(e) = load_embedder(choice)? {
        let r = embed_pending(&mut store, e.as_ref(), progress)?;
        let vi = VectorIndex::rebuild(index, &store, e.id(), e.dim(), DEFAULT_SCALAR)?;
        line = format!(
            "; vector index rebuilt with {} ({} vectors, {} chunks newly embedded)",
            e.id(),
            vi.len(),
            r.embedded
        );
        vectors = serde_json::json!({"embedder": e.id(), "vectors": vi.len(), "embedding": r});
    }
    if json {
        print_json(&serde_json::json!({
            "index": index, "documents": docs, "chunks": chunks, "vectors": vectors,
            "seconds": started.elapsed().as_secs_f64(),
        }))?;
    } else {
        println!(
            "BM25 index rebuilt: {docs} documents, {chunks} chunks{line} in {:.1}s",
            started.elapsed().as_secs_f64()
        );
    }
    Ok(ExitCode::SUCCESS)
}

fn cmd_models_list(choice: &EmbedderChoice, json: bool) -> Result<ExitCode> {
    let candidates: Vec<(PathBuf, bool)> = embed::default_model_candidates()
        .into_iter()
        .map(|p| {
            let ok = embed::is_model_dir(&p);
            (p, ok)
        })
        .collect();
    let r = embed::resolve(choice)?;
    let active = r.embedder.as_ref().map(|e| (e.id().to_owned(), e.dim()));
    if json {
        print_json(&serde_json::json!({
            "choice": format!("{choice:?}"),
            "default_model": embed::DEFAULT_MODEL,
            "looked_in": candidates.iter().map(|(p, ok)| serde_json::json!({"dir": p, "present": ok})).collect::<Vec<_>>(),
            "embedder": active.as_ref().map(|(id, dim)| serde_json::json!({"id": id, "dim": dim})),
            "note": r.note,
            "drafting_model": {
                "default_model": onrecord::llm::DEFAULT_LLM,
                "looked_in": onrecord::llm::default_llm_candidates(),
                "file": onrecord::llm::resolve(&LlmChoice::Auto).ok(),
            },
        }))?;
        return Ok(ExitCode::SUCCESS);
    }
    println!("Default model {} is looked for in:", embed::DEFAULT_MODEL);
    for (p, ok) in &candidates {
        println!(
            "  {} {}",
            if *ok { "found  " } else { "missing" },
            p.display()
        );
    }
    println!(
        "Default drafting model {} (for --drafter local) is looked for in:",
        onrecord::llm::DEFAULT_LLM
    );
    for p in onrecord::llm::default_llm_candidates() {
        println!("  {}", p.display());
    }
    match onrecord::llm::resolve(&LlmChoice::Auto) {
        Ok(f) => println!("  found: {}", f.display()),
        Err(e) => println!("  not found: {e}"),
    }
    match active {
        Some((id, dim)) => println!("Embedder in use: {id} ({dim} dimensions)"),
        None => println!(
            "{}",
            r.note
                .unwrap_or_else(|| "No embedder (--embedder off): BM25 only".into())
        ),
    }
    Ok(ExitCode::SUCCESS)
}

fn ask_one(
    idx: &Index,
    question: &str,
    (filters, k): (&Filters, usize),
    (cfg, selector): (ExtractiveConfig, &onrecord::select::Selector),
    judge: &dyn Judge,
) -> Result<AnswerRecord> {
    let drafter = Extractive::new(cfg);
    Ok(answer::ask_with(
        idx,
        question,
        answer::AskPlan {
            filters,
            k,
            drafter: &drafter,
            drafter_settings: serde_json::to_value(cfg)?,
            judge,
            fallback: None,
            rewrite: None,
            selector: Some(selector),
        },
    )?)
}

/// Ask with a language model drafting and/or rewriting the query. The draft
/// streams to standard error as it is written (unless `json`); the verified
/// answer follows on standard output.
fn ask_with_model(
    idx: &Index,
    question: &str,
    (filters, k): (&Filters, usize),
    (cfg, selector): (ExtractiveConfig, &onrecord::select::Selector),
    args: &DraftArgs,
    judge: &dyn Judge,
    json: bool,
) -> Result<AnswerRecord> {
    let gen_opts = args.gen_options()?;
    let model = args.generator(json)?;
    let extractive = Extractive::new(cfg);
    let model_cfg = ModelDraftConfig {
        max_excerpts: args.excerpts.max(1),
        generation: gen_opts,
        ..ModelDraftConfig::default()
    };
    let mut model_drafter = ModelDrafter::new(model.clone(), model_cfg.clone());
    let show = !json;
    if show {
        let started = std::sync::atomic::AtomicBool::new(false);
        let name = model.id();
        model_drafter.on_text = Some(Box::new(move |piece: &str| {
            let mut err = std::io::stderr().lock();
            if !started.swap(true, std::sync::atomic::Ordering::Relaxed) {
                let _ = writeln!(err, "Draft by {name} (not yet verified):");
            }
            let _ = write!(err, "{piece}");
            let _ = err.flush();
        }));
    }
    let (drafter, settings): (&dyn Drafter, serde_json::Value) =
        if args.drafter() == DrafterArg::Extractive {
            (&extractive, serde_json::to_value(cfg)?)
        } else {
            (&model_drafter, serde_json::to_value(model_cfg)?)
        };
    let a = answer::ask_with(
        idx,
        question,
        answer::AskPlan {
            filters,
            k,
            drafter,
            drafter_settings: settings,
            judge,
            fallback: Some(&extractive),
            rewrite: args.rewrite.then_some(model.as_ref()),
            selector: Some(selector),
        },
    )?;
    if show && a.draft.is_some() {
        eprintln!("\n");
    }
    Ok(a)
}

/// Print a value as pretty JSON on standard output.
fn print_json(v: &impl serde::Serialize) -> Result<()> {
    let mut out = std::io::stdout().lock();
    writeln!(out, "{}", serde_json::to_string_pretty(v)?)?;
    Ok(())
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Export {
    Text,
    Json,
    Csv,
    Markdown,
}

struct ReplayArgs {
    file: Option<PathBuf>,
    id: Option<u64>,
    index: PathBuf,
    sources: Option<PathBuf>,
    manifest: Option<PathBuf>,
    pdf_route: PdfRoute,
    judge: Option<JudgeKind>,
}

/// Exit code for input replay cannot use.
const UNUSABLE: u8 = 2;

fn cmd_replay(args: ReplayArgs, format: Export) -> Result<ExitCode> {
    use onrecord::replay::{self, PageSource, ReplayInput, SourceFiles, StorePages};
    // Everything up to the verdicts: a failure here means nothing was checked.
    let prepared = (|| -> Result<(replay::Claims, ReplayInput, Option<onrecord::store::Store>)> {
        let (claims, input, store) = match (&args.file, args.id) {
            (_, Some(id)) => {
                let store = onrecord::store::Store::open(&args.index)?;
                let json = store.logged_answer(id)?.with_context(|| {
                    format!(
                        "no answer {id} in the log at {} (see: onrecord history)",
                        args.index.display()
                    )
                })?;
                let a: AnswerRecord = serde_json::from_str(&json)
                    .with_context(|| format!("answer {id} in the log is not readable"))?;
                let input = ReplayInput {
                    source: format!("answer log #{id}"),
                    format: "json".into(),
                    answer_id: Some(id),
                    created_at: Some(a.created_at.clone()),
                };
                (replay::claims_from_record(&a), input, Some(store))
            }
            (Some(file), None) => {
                let text = std::fs::read_to_string(file)
                    .with_context(|| format!("cannot read {}", file.display()))?;
                let (claims, format) = replay::read_answer(&text)
                    .map_err(|m| anyhow::anyhow!("{}: {m}", file.display()))?;
                let input = ReplayInput {
                    source: file.display().to_string(),
                    format: format.into(),
                    answer_id: None,
                    created_at: claims.created_at.clone(),
                };
                (claims, input, None)
            }
            (None, None) => bail!("give an answer FILE or --id N"),
        };
        if claims.claims.is_empty() {
            bail!(
                "{}: nothing to replay: the answer has no verified sentence",
                input.source
            );
        }
        Ok((claims, input, store))
    })();
    let (claims, input, store) = match prepared {
        Ok(p) => p,
        Err(e) => {
            eprintln!("error: {e:#}");
            return Ok(ExitCode::from(UNUSABLE));
        }
    };
    let judge = args.judge.unwrap_or_else(|| claims.judge_kind()).build();
    let opened;
    let mut pages: Box<dyn PageSource + '_> = match &args.sources {
        Some(dir) => {
            let earlier = match store {
                Some(s) => Some(s),
                None => onrecord::store::Store::open(&args.index).ok(),
            };
            match SourceFiles::open(dir, args.manifest.as_deref()) {
                Ok(s) => Box::new(s.with_earlier_pages(earlier).with_extract(ExtractOptions {
                    pdf_route: args.pdf_route,
                })),
                Err(e) => {
                    eprintln!("error: {e}");
                    return Ok(ExitCode::from(UNUSABLE));
                }
            }
        }
        None => {
            opened = match store {
                Some(s) => s,
                None => match onrecord::store::Store::open(&args.index) {
                    Ok(s) => s,
                    Err(e) => {
                        eprintln!("error: {e}");
                        return Ok(ExitCode::from(UNUSABLE));
                    }
                },
            };
            Box::new(StorePages::new(&opened, &args.index))
        }
    };
    let report = replay::replay(&claims, input, pages.as_mut(), judge.as_ref());
    let mut out = std::io::stdout().lock();
    match format {
        Export::Json => print_json(&report)?,
        Export::Csv => replay::table::write_replay(&report, &mut out)?,
        Export::Markdown => write!(out, "{}", replay::markdown::render_replay(&report))?,
        Export::Text => write!(
            onrecord::text::Printable::new(&mut out),
            "{}",
            replay::render_text(&report)
        )?,
    }
    Ok(ExitCode::from(report.exit_code))
}

fn cmd_history(
    index: &std::path::Path,
    limit: usize,
    keep: Option<usize>,
    json: bool,
) -> Result<ExitCode> {
    let store = onrecord::store::Store::open(index)?;
    let pruned = keep.map(|k| store.prune_answers(k)).transpose()?;
    let log = store.answer_log(limit)?;
    if json {
        let mut v = serde_json::json!({"index": index, "answers": log});
        if let Some((answers, pages)) = pruned {
            v["pruned"] = serde_json::json!({"answers": answers, "page_texts": pages});
        }
        print_json(&v)?;
        return Ok(ExitCode::SUCCESS);
    }
    if let (Some((answers, pages)), Some(k)) = (pruned, keep) {
        eprintln!(
            "Removed {answers} logged answer(s) and {pages} kept page text(s) that only they cited; at most the newest {k} remain."
        );
    }
    if log.is_empty() {
        println!(
            "No answers logged in {} yet; every `onrecord answer` is logged.",
            index.display()
        );
        return Ok(ExitCode::SUCCESS);
    }
    let mut out = onrecord::text::Printable::new(std::io::stdout().lock());
    writeln!(
        out,
        "{:>5}  {:<20}  {:<16}  Question",
        "#", "Asked (UTC)", "Sentences"
    )?;
    for e in &log {
        let counts = if e.abstained {
            "no answer".to_string()
        } else if e.struck > 0 {
            format!("{} ({} struck)", e.supported, e.struck)
        } else {
            e.supported.to_string()
        };
        let mut q: String = e.question.chars().take(60).collect();
        if e.question.chars().count() > 60 {
            q.push('…');
        }
        writeln!(
            out,
            "{:>5}  {:<20}  {:<16}  {}",
            e.id,
            e.created_at.replace('T', " ").trim_end_matches('Z'),
            counts,
            onrecord::text::fold_ws(&q)
        )?;
    }
    writeln!(out, "\nCheck one again: onrecord replay --id N")?;
    Ok(ExitCode::SUCCESS)
}

fn cmd_ingest(
    index: &std::path::Path,
    paths: &[PathBuf],
    cfg: &IngestConfig,
    choice: &EmbedderChoice,
    progress: bool,
    json: bool,
) -> Result<ExitCode> {
    let embedder = load_embedder(choice)?;
    // Held across storing and embedding, so no other writer slips in
    // between (the library calls below take it again, re-entrantly).
    let _writer = onrecord::lock::acquire(index, "`onrecord add`")?;
    let (report, diags) = ingest::ingest_paths(index, paths, cfg)?;
    // Documents are committed; now their chunks are embedded, committing as
    // it goes, so an interrupted run loses nothing and the next continues.
    let embedding = match &embedder {
        Some(e) if index.join(onrecord::store::STORE_FILE).exists() => {
            Some(onrecord::vectors::update(index, e.as_ref(), progress)?)
        }
        _ => None,
    };
    let mut out = std::io::stdout().lock();
    if json {
        print_json(&serde_json::json!({
            "index": index,
            "report": report,
            "embedding": embedding.as_ref().map(|(r, s)| serde_json::json!({"report": r, "vector_index": s})),
            "diagnostics": diags,
        }))?;
    } else {
        let mut err = std::io::stderr().lock();
        for d in &diags {
            writeln!(err, "{d}")?;
        }
        let skipped: Vec<String> = report
            .skipped_types
            .iter()
            .map(|(ext, n)| format!("{ext} {n}"))
            .collect();
        let skipped = if skipped.is_empty() {
            String::new()
        } else {
            format!(" (by type: {})", skipped.join(", "))
        };
        writeln!(
            out,
            "{} added ({} replaced), {} unchanged, {} skipped{skipped}, {} failed; {} pages, {} chunks in {:.1}s -> {}",
            report.ingested,
            report.replaced,
            report.unchanged,
            report.skipped,
            report.failed,
            report.pages,
            report.chunks,
            report.seconds,
            index.display()
        )?;
        if report.ocr_read + report.ocr_cached + report.ocr_failed > 0 {
            writeln!(
                out,
                "OCR: {} pages read in {:.1}s ({:.2} pages/s), {} from the OCR cache, {} not read",
                report.ocr_read,
                report.ocr_seconds,
                report.ocr_read as f64 / report.ocr_seconds.max(1e-9),
                report.ocr_cached,
                report.ocr_failed
            )?;
        }
        if let Some((r, sync)) = &embedding {
            writeln!(
                out,
                "embedded {} chunks with {} in {:.1}s ({:.1} chunks/s); vector index holds {}",
                r.embedded, r.model, r.seconds, r.chunks_per_second, sync.total
            )?;
        }
    }
    let failed = report.failed > 0 || diags.iter().any(|d| d.severity == Severity::Error);
    Ok(if failed {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

fn signal_text(sig: &retrieve::Signal) -> String {
    match (sig.rank, sig.score) {
        (Some(r), Some(sc)) => format!("{} #{r} ({sc:.3})", sig.retriever),
        _ => format!("{} not in its top list", sig.retriever),
    }
}

fn cmd_search(
    idx: &Index,
    query: &str,
    filters: &Filters,
    k: usize,
    explain: bool,
    json: bool,
) -> Result<ExitCode> {
    let hits = idx.search(query, filters, k)?;
    let used = idx.retriever();
    let mut out = std::io::stdout().lock();
    if json {
        print_json(&retrieve::search_record(idx, query, filters, &hits))?;
        return Ok(ExitCode::SUCCESS);
    }
    if hits.is_empty() {
        writeln!(
            out,
            "No passage matches {query:?}{}.",
            if filters.is_empty() {
                ""
            } else {
                " with these filters"
            }
        )?;
        return Ok(ExitCode::SUCCESS);
    }
    let tty = std::io::stdout().is_terminal();
    for h in &hits {
        let c = &h.chunk;
        let pages = if c.span.start_page == c.span.end_page {
            format!("p. {}", c.span.start_page)
        } else {
            format!("pp. {}-{}", c.span.start_page, c.span.end_page)
        };
        let mut head = format!("{}. {}", h.rank, c.title);
        if let Some(o) = &c.organisation {
            head.push_str(&format!(" — {o}"));
        }
        if let Some(d) = &c.date {
            head.push_str(&format!(", {d}"));
        }
        // Record text is shown, never obeyed, on a terminal.
        let head = onrecord::text::printable(&head);
        let score = match used {
            RetrieverKind::Hybrid => format!("fused {:.4}", h.score),
            RetrieverKind::Dense => format!("cosine {:.3}", h.score),
            RetrieverKind::Bm25 => format!("bm25 {:.2}", h.score),
        };
        writeln!(out, "{head}, {pages}  [{} · {score}]", c.doc_id)?;
        if explain {
            let parts: Vec<String> = h.signals.iter().map(signal_text).collect();
            let fused = if used == RetrieverKind::Hybrid {
                let terms: Vec<String> = h
                    .signals
                    .iter()
                    .filter_map(|s| {
                        let w = if s.retriever == "bm25" {
                            idx.options.weights.bm25
                        } else {
                            idx.options.weights.dense
                        };
                        s.rank.map(|r| format!("{w}/({}+{r})", idx.options.rrf_k))
                    })
                    .collect();
                format!(" → fused {} = {:.4}", terms.join(" + "), h.score)
            } else {
                String::new()
            };
            writeln!(out, "   why: {}{fused}", parts.join(" · "))?;
        }
        let s = retrieve::snippet(&c.text, query, 240);
        writeln!(out, "   {}\n", mark(&s, tty))?;
    }
    if explain {
        writeln!(
            out,
            "Retriever: {}{}",
            used.name(),
            match (&idx.embedder, used) {
                (Some(e), RetrieverKind::Dense | RetrieverKind::Hybrid) =>
                    format!(" (embedder {})", e.id()),
                _ => String::new(),
            }
        )?;
    }
    Ok(ExitCode::SUCCESS)
}

/// Mark highlights: bold on a terminal, «guillemets» otherwise.
fn mark(s: &retrieve::Snippet, tty: bool) -> String {
    let (open, close) = if tty {
        ("\x1b[1m", "\x1b[0m")
    } else {
        ("«", "»")
    };
    use onrecord::text::printable;
    let mut out = String::new();
    let mut at = 0;
    for &(a, b) in &s.highlights {
        out.push_str(&printable(&s.text[at..a]));
        out.push_str(open);
        out.push_str(&printable(&s.text[a..b]));
        out.push_str(close);
        at = b;
    }
    out.push_str(&printable(&s.text[at..]));
    out
}

fn cmd_serve(
    index: PathBuf,
    demo: bool,
    bind: std::net::SocketAddr,
    token: Option<String>,
    workers: Option<usize>,
    choice: &EmbedderChoice,
) -> Result<ExitCode> {
    use onrecord::web;
    let token = token.filter(|t| !t.is_empty());
    web::check_bind(bind, token.as_deref())?;
    let index = if demo {
        let source = onrecord::demo::default_source_dir();
        let progress = std::io::stderr().is_terminal();
        demo_index(&source, std::path::Path::new(".onrecord-demo"), progress)?.0
    } else {
        index
    };
    let embedder = load_embedder(choice)?;
    if let Some(e) = &embedder {
        onrecord::vectors::update(&index, e.as_ref(), std::io::stderr().is_terminal())?;
    }
    let mut limits = web::Limits::default();
    if let Some(n) = workers {
        if n == 0 {
            bail!("--workers must be at least 1");
        }
        limits.workers = n;
    }
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .context("cannot start the server's runtime")?;
    rt.block_on(async move {
        let server = web::Server::bind(web::ServeOptions {
            index: index.clone(),
            bind,
            token: token.clone(),
            embedder,
            limits,
        })
        .await?;
        let addr = server.addr;
        let mut err = std::io::stderr().lock();
        writeln!(err, "Serving the index at {}", index.display())?;
        match &token {
            Some(t) => writeln!(err, "Open http://{addr}/?token={t}")?,
            None => writeln!(err, "Open http://{addr}/ in a browser on this computer")?,
        }
        writeln!(
            err,
            "API: http://{addr}/api/info (see the README). Stop with Ctrl+C."
        )?;
        writeln!(err, "\nCaution: {CAUTION}")?;
        drop(err);
        server
            .run(async {
                let _ = tokio::signal::ctrl_c().await;
            })
            .await
            .context("the server stopped with an error")?;
        anyhow::Ok(())
    })?;
    Ok(ExitCode::SUCCESS)
}

fn cmd_docs(index: &std::path::Path, filters: &Filters, json: bool) -> Result<ExitCode> {
    let store = onrecord::store::Store::open(index)?;
    let allowed = store.docs_matching(filters)?;
    let docs: Vec<_> = store
        .documents()?
        .into_iter()
        .filter(|d| allowed.as_ref().is_none_or(|a| a.contains(&d.doc_id)))
        .collect();
    let mut out = onrecord::text::Printable::new(std::io::stdout().lock());
    if json {
        print_json(&docs)?;
    } else {
        for d in &docs {
            writeln!(
                out,
                "{:<40} {:>4} p.  {:<10} {:<32} {}",
                d.doc_id.0,
                d.pages,
                d.date.as_deref().unwrap_or("-"),
                d.organisation.as_deref().unwrap_or("-"),
                d.title
            )?;
        }
        writeln!(out, "{} documents", docs.len())?;
    }
    Ok(ExitCode::SUCCESS)
}

/// Build the demo release and add it to an index, printing what went wrong with any file.
fn demo_index(
    source: &std::path::Path,
    workdir: &std::path::Path,
    progress: bool,
) -> Result<(PathBuf, ingest::Report)> {
    eprintln!("Building the demo release from {} ...", source.display());
    let (index, report, diags) = onrecord::demo::prepare(source, workdir, progress)?;
    // A newcomer without the PDF and OCR tools gets one plain note, not a
    // line per scanned record.
    let no_ocr = |d: &&ingest::Diagnostic| d.message.contains("tesseract is not installed");
    for d in diags
        .iter()
        .filter(|d| d.severity != Severity::Note && !no_ocr(d))
    {
        eprintln!("{d}");
    }
    const TOOLS: &str =
        "apt-get install poppler-utils tesseract-ocr tesseract-ocr-eng tesseract-ocr-fra";
    if !onrecord::demo::can_scan() {
        eprintln!(
            "Note: pdftoppm (poppler-utils) is not installed, so the demo's scanned records were built with a text layer.\n\
             The answers are the same; reading damaged scans by OCR is not shown. To see it: {TOOLS}"
        );
    } else if diags.iter().any(|d| no_ocr(&d)) {
        eprintln!(
            "Note: tesseract is not installed, so the demo's scanned pages were not read and their answers are missing.\n\
             To read them: {TOOLS}"
        );
    }
    Ok((index, report))
}

fn cmd_demo(
    source: Option<PathBuf>,
    workdir: &std::path::Path,
    choice: &EmbedderChoice,
    json: bool,
) -> Result<ExitCode> {
    let source = source.unwrap_or_else(onrecord::demo::default_source_dir);
    let progress = !json && std::io::stderr().is_terminal();
    let (index, report) = demo_index(&source, workdir, progress)?;
    let embedder = load_embedder(choice)?;
    if let Some(e) = &embedder {
        onrecord::vectors::update(&index, e.as_ref(), progress)?;
    }
    let idx = Index::open_with(&index, embedder)?;
    for n in &idx.notes {
        eprintln!("{n}");
    }
    let mut err = std::io::stderr().lock();
    writeln!(
        err,
        "Demo index {}: {} added, {} unchanged, {} failed; {} pages.",
        index.display(),
        report.ingested,
        report.unchanged,
        report.failed,
        report.pages
    )?;
    if report.ocr_read + report.ocr_cached + report.ocr_failed > 0 {
        writeln!(
            err,
            "Scanned pages: {} read by OCR ({:.2} pages/s), {} from the OCR cache, {} not read.",
            report.ocr_read,
            report.ocr_read as f64 / report.ocr_seconds.max(1e-9),
            report.ocr_cached,
            report.ocr_failed
        )?;
    }
    writeln!(
        err,
        "Retrieval: {}\n",
        match (idx.retriever(), &idx.embedder) {
            (RetrieverKind::Hybrid, Some(e)) =>
                format!("hybrid (BM25 + embeddings from {})", e.id()),
            _ => "BM25 only (no embedding model on this machine; see README, \"Embedding model\")"
                .into(),
        }
    )?;
    drop(err);
    let mut out = onrecord::text::Printable::new(std::io::stdout().lock());
    let selector = onrecord::select::Selector::default();
    for q in onrecord::demo::SAMPLE_QUESTIONS {
        let a = ask_one(
            &idx,
            q,
            (&Filters::default(), 10),
            (ExtractiveConfig::default(), &selector),
            &RulesJudge::default(),
        )?;
        idx.store.log_answer(&a)?;
        if json {
            writeln!(out, "{}", serde_json::to_string(&a)?)?;
        } else {
            let text = answer::render_text(&a);
            // The caution closes the whole demo rather than every answer.
            let body = text.split("\nCaution:").next().unwrap_or(&text);
            writeln!(out, "{}\n{}", body.trim_end(), "-".repeat(78))?;
        }
    }
    if !json {
        writeln!(out, "{}", answer::wrap(&format!("Caution: {CAUTION}"), 78))?;
        writeln!(
            out,
            "\nThe demo records are invented (the Province of Kestrava does not exist).\nTry: onrecord answer \"...\" --index {0}\nCheck the answers above again later: onrecord history --index {0}, then onrecord replay --id N --index {0}",
            index.display()
        )?;
    }
    Ok(ExitCode::SUCCESS)
}
