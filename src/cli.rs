//! Command-line parsing (clap) and printing. Arguments are parsed and
//! checked here, then resolved into the library's configuration types; no
//! retrieval, drafting or verification logic lives in this file.

use anyhow::{Context, Result, bail};
use clap::{Args, Parser, Subcommand, ValueEnum};
use onrecord::answer::{self, AnswerRecord, CAUTION};
use onrecord::draft::{Extractive, ExtractiveConfig};
use onrecord::extract::ExtractOptions;
use onrecord::extract::pdf::{PdfRoute, default_route};
use onrecord::ingest::{self, IngestConfig, Severity};
use onrecord::manifest::Manifest;
use onrecord::retrieve::{self, Index};
use onrecord::types::{DocId, DocMeta, Filters, check_date};
use onrecord::verify::RulesJudge;
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

const AFTER_HELP: &str = "\
Typical session:
  onrecord ingest ./release-2023-0412 --manifest ./release-2023-0412/manifest.csv
  onrecord search \"Pier 3 budget\" --from 2020 --org harbour
  onrecord ask \"How much did the Pier 3 budget increase in 2021?\"

The index lives in ./.onrecord unless --index or ONRECORD_INDEX says otherwise.
Exit codes: 0 success; 1 an error, or (ingest) a file that failed; 2 bad arguments.";

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

#[derive(Subcommand, Debug)]
enum Command {
    /// Add files and folders (PDF, .txt, .md, .html, .eml) to the index.
    ///
    /// Folders are read recursively; hidden entries are skipped. A file that
    /// is unchanged since the last run is left alone; a changed one replaces
    /// its old version. A bad file is reported and the run goes on.
    Ingest {
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
        /// Print the summary and diagnostics as JSON.
        #[arg(long)]
        json: bool,
        /// No progress bar.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Find passages with BM25, with page numbers and highlighted snippets.
    Search {
        /// What to look for.
        query: String,
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        /// How many passages.
        #[arg(short, long, default_value_t = 10)]
        k: usize,
        #[arg(long)]
        json: bool,
    },
    /// Answer a question with verified, quoted sentences and page references.
    Ask {
        question: String,
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        /// How many passages to retrieve.
        #[arg(short, long, default_value_t = 10)]
        k: usize,
        /// Most sentences in the answer.
        #[arg(long, default_value_t = 3)]
        max_sentences: usize,
        /// Abstain unless a sentence scores at least this (0-1).
        #[arg(long, default_value_t = ExtractiveConfig::default().min_score)]
        min_score: f32,
        /// Print the versioned answer record as JSON.
        #[arg(long)]
        json: bool,
    },
    /// List the documents in the index.
    Docs {
        #[command(flatten)]
        index: IndexArg,
        #[command(flatten)]
        filters: FilterArgs,
        #[arg(long)]
        json: bool,
    },
    /// Build the bundled demo release (invented records), ingest it, and ask
    /// three sample questions.
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
    /// Measure quality on open data.
    #[command(subcommand)]
    Eval(EvalCommand),
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum RetrieverArg {
    Bm25,
}

#[derive(Subcommand, Debug)]
enum EvalCommand {
    /// Retrieval quality on a BEIR-layout collection: nDCG@10, recall@100, MRR@10.
    Retrieval {
        /// Folder with corpus.jsonl, queries.jsonl and qrels/<split>.tsv.
        #[arg(long, value_name = "DIR")]
        beir: PathBuf,
        #[arg(long, default_value = "test")]
        split: String,
        #[arg(long, value_enum, default_value_t = RetrieverArg::Bm25)]
        retriever: RetrieverArg,
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
    match cli.command {
        Command::Ingest {
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
            json,
            quiet,
        } => {
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
                    pdf_route: match pdf_reader {
                        PdfRouteArg::Auto => default_route(),
                        PdfRouteArg::Pdftotext => PdfRoute::Pdftotext,
                        PdfRouteArg::Builtin => PdfRoute::PureRust,
                    },
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
            };
            cmd_ingest(&index.index, &paths, &cfg, json)
        }
        Command::Search {
            query,
            index,
            filters,
            k,
            json,
        } => cmd_search(&index.index, &query, &filters.resolve(), k, json),
        Command::Ask {
            question,
            index,
            filters,
            k,
            max_sentences,
            min_score,
            json,
        } => {
            let idx = Index::open(&index.index)?;
            let cfg = ExtractiveConfig {
                max_sentences,
                min_score,
                ..Default::default()
            };
            let a = ask_one(&idx, &question, &filters.resolve(), k, cfg)?;
            print_answer(&a, json)?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Docs {
            index,
            filters,
            json,
        } => cmd_docs(&index.index, &filters.resolve(), json),
        Command::Demo {
            source,
            workdir,
            json,
        } => cmd_demo(source, &workdir, json),
        Command::Eval(EvalCommand::Abstention { squad, cap, json }) => {
            cmd_eval_abstention(&squad, cap, json)
        }
        Command::Eval(EvalCommand::Retrieval {
            beir,
            split,
            retriever,
            json,
        }) => {
            let RetrieverArg::Bm25 = retriever;
            cmd_eval_retrieval(&beir, &split, json)
        }
    }
}

fn cmd_eval_abstention(squad: &std::path::Path, cap: usize, json: bool) -> Result<ExitCode> {
    use onrecord::eval::squad::{at_threshold, best_threshold, score_range, sweep};
    let tune_dir = tempfile::tempdir()?;
    let report_dir = tempfile::tempdir()?;
    let tune = score_range(squad, 1..=24, cap, tune_dir.path())?;
    let report = score_range(squad, 25..=48, cap, report_dir.path())?;
    let best = best_threshold(&tune);
    let default = ExtractiveConfig::default().min_score;
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

fn cmd_eval_retrieval(beir: &std::path::Path, split: &str, json: bool) -> Result<ExitCode> {
    let tmp = tempfile::tempdir().context("creating a temporary index folder")?;
    let progress = !json && std::io::stderr().is_terminal();
    let r = onrecord::eval::beir::run(beir, split, tmp.path(), progress)?;
    if json {
        print_json(&r)?;
    } else {
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "{} on {} ({} split, {} queries, {} documents, {} chunks)\n  nDCG@10    {:.4}\n  recall@100 {:.4}\n  MRR@10     {:.4}\n  ingest     {:.1} docs/s\n  search     p50 {:.2} ms, p95 {:.2} ms",
            r.retriever,
            beir.display(),
            r.split,
            r.queries,
            r.documents,
            r.chunks,
            r.ndcg10,
            r.recall100,
            r.mrr10,
            r.ingest_docs_per_second,
            r.search_p50_ms,
            r.search_p95_ms
        )?;
    }
    Ok(ExitCode::SUCCESS)
}

fn ask_one(
    idx: &Index,
    question: &str,
    filters: &Filters,
    k: usize,
    cfg: ExtractiveConfig,
) -> Result<AnswerRecord> {
    let drafter = Extractive::new(cfg);
    Ok(answer::ask(
        idx,
        question,
        filters,
        k,
        &drafter,
        serde_json::to_value(cfg)?,
        &RulesJudge::default(),
    )?)
}

/// Print a value as pretty JSON on standard output.
fn print_json(v: &impl serde::Serialize) -> Result<()> {
    let mut out = std::io::stdout().lock();
    writeln!(out, "{}", serde_json::to_string_pretty(v)?)?;
    Ok(())
}

fn print_answer(a: &AnswerRecord, json: bool) -> Result<()> {
    let mut out = std::io::stdout().lock();
    if json {
        print_json(a)?;
    } else {
        write!(out, "{}", answer::render_text(a))?;
    }
    Ok(())
}

fn cmd_ingest(
    index: &std::path::Path,
    paths: &[PathBuf],
    cfg: &IngestConfig,
    json: bool,
) -> Result<ExitCode> {
    let (report, diags) = ingest::ingest_paths(index, paths, cfg)?;
    let mut out = std::io::stdout().lock();
    if json {
        print_json(&serde_json::json!({
            "index": index,
            "report": report,
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
            format!(" (unsupported types: {})", skipped.join(", "))
        };
        writeln!(
            out,
            "{} ingested ({} replaced), {} unchanged, {} skipped{skipped}, {} failed; {} pages, {} chunks in {:.1}s -> {}",
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
    }
    let failed = report.failed > 0 || diags.iter().any(|d| d.severity == Severity::Error);
    Ok(if failed {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

fn cmd_search(
    index: &std::path::Path,
    query: &str,
    filters: &Filters,
    k: usize,
    json: bool,
) -> Result<ExitCode> {
    let idx = Index::open(index)?;
    let hits = idx.search(query, filters, k)?;
    let mut out = std::io::stdout().lock();
    if json {
        let rows: Vec<serde_json::Value> = hits
            .iter()
            .map(|h| {
                let s = retrieve::snippet(&h.chunk.text, query, 240);
                serde_json::json!({
                    "rank": h.rank,
                    "score": h.score,
                    "retriever": h.retriever,
                    "chunk_id": h.chunk.id,
                    "doc_id": h.chunk.doc_id,
                    "title": h.chunk.title,
                    "organisation": h.chunk.organisation,
                    "date": h.chunk.date,
                    "page": h.chunk.span.start_page,
                    "end_page": h.chunk.span.end_page,
                    "snippet": s.text,
                    "highlights": s.highlights,
                    "hash": h.chunk.hash,
                })
            })
            .collect();
        print_json(&serde_json::json!({"query": query, "filters": filters, "results": rows}))?;
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
        writeln!(out, "{head}, {pages}  [{} · bm25 {:.2}]", c.doc_id, h.score)?;
        let s = retrieve::snippet(&c.text, query, 240);
        writeln!(out, "   {}\n", mark(&s, tty))?;
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
    let mut out = String::new();
    let mut at = 0;
    for &(a, b) in &s.highlights {
        out.push_str(&s.text[at..a]);
        out.push_str(open);
        out.push_str(&s.text[a..b]);
        out.push_str(close);
        at = b;
    }
    out.push_str(&s.text[at..]);
    out
}

fn cmd_docs(index: &std::path::Path, filters: &Filters, json: bool) -> Result<ExitCode> {
    let store = onrecord::store::Store::open(index)?;
    let allowed = store.docs_matching(filters)?;
    let docs: Vec<_> = store
        .documents()?
        .into_iter()
        .filter(|d| allowed.as_ref().is_none_or(|a| a.contains(&d.doc_id)))
        .collect();
    let mut out = std::io::stdout().lock();
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

fn cmd_demo(source: Option<PathBuf>, workdir: &std::path::Path, json: bool) -> Result<ExitCode> {
    let source = source.unwrap_or_else(onrecord::demo::default_source_dir);
    let release = workdir.join("release");
    let index = workdir.join("index");
    let mut err = std::io::stderr().lock();
    writeln!(
        err,
        "Building the demo release from {} ...",
        source.display()
    )?;
    let manifest = onrecord::demo::build(&source, &release)?;
    let cfg = IngestConfig {
        manifest: Manifest::load(&manifest)?,
        progress: !json && std::io::stderr().is_terminal(),
        ..Default::default()
    };
    let (report, diags) = ingest::ingest_paths(&index, std::slice::from_ref(&release), &cfg)?;
    for d in diags.iter().filter(|d| d.severity != Severity::Note) {
        writeln!(err, "{d}")?;
    }
    writeln!(
        err,
        "Demo index {}: {} ingested, {} unchanged, {} failed; {} pages.\n",
        index.display(),
        report.ingested,
        report.unchanged,
        report.failed,
        report.pages
    )?;
    drop(err);
    let idx = Index::open(&index)?;
    let mut out = std::io::stdout().lock();
    for q in onrecord::demo::SAMPLE_QUESTIONS {
        let a = ask_one(
            &idx,
            q,
            &Filters::default(),
            10,
            ExtractiveConfig::default(),
        )?;
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
            "\nThe demo records are invented (the Province of Kestrava does not exist).\nTry: onrecord ask \"...\" --index {}",
            index.display()
        )?;
    }
    Ok(ExitCode::SUCCESS)
}
