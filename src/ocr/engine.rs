//! Rendering PDF pages with poppler's `pdftoppm` and reading them with
//! tesseract, page by page on a pool of worker threads.
//!
//! pdftoppm is used because poppler is already the preferred PDF text
//! reader (`pdftotext`), so one Debian package covers both, and it renders
//! every kind of page (scans in any image codec, vector text, forms) the
//! same way; extracting embedded images directly would cover only some.
//!
//! invariant: each tesseract process uses one thread (`OMP_THREAD_LIMIT=1`);
//! parallelism comes from running one page per worker, which scales better
//! on few cores than tesseract's own threading.

use super::image::Gray;
use super::{OcrPage, parse_tsv};
use crate::extract::pdf::{PageDrawing, find_on_path, output_within};
use std::ffi::OsString;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Duration;

/// How Debian and Ubuntu users install what OCR needs.
pub const INSTALL_HINT: &str = "install it with `apt-get install tesseract-ocr tesseract-ocr-eng tesseract-ocr-fra` (Debian, Ubuntu; `brew install tesseract tesseract-lang` on macOS), then run `onrecord add` again on the same files: pages already stored are kept and only the unread pages are read";

/// Why a page could not be read by OCR.
#[derive(Debug, Clone, thiserror::Error, PartialEq)]
pub enum OcrError {
    #[error(
        "tesseract is not installed (`{program}` was not found), so scanned pages cannot be read; {INSTALL_HINT}"
    )]
    NotInstalled { program: String },
    #[error(
        "pdftoppm is not installed, so scanned pages cannot be rendered for OCR; install it with `apt-get install poppler-utils`, then run `onrecord add` again on the same files"
    )]
    RendererMissing,
    #[error(
        "tesseract has none of the languages {wanted} (it has: {have}); install e.g. `apt-get install tesseract-ocr-eng`"
    )]
    NoLanguages { wanted: String, have: String },
    #[error("the page could not be rendered for OCR: {0}")]
    Render(String),
    #[error("the page image could not be decoded: {0}")]
    BadImage(String),
    #[error("OCR failed: {0}")]
    Failed(String),
    #[error("OCR did not finish within {0} s and was stopped")]
    TimedOut(u64),
}

impl OcrError {
    /// Errors that would recur on every page (nothing is installed).
    pub fn is_setup(&self) -> bool {
        matches!(
            self,
            OcrError::NotInstalled { .. }
                | OcrError::RendererMissing
                | OcrError::NoLanguages { .. }
        )
    }
}

/// Settings for reading pages.
#[derive(Debug, Clone)]
pub struct OcrSettings {
    /// The tesseract program (a name looked up on PATH, or a path).
    pub program: OsString,
    /// Tesseract language codes, tried together (`eng+fra`).
    pub languages: Vec<String>,
    /// Rendering resolution; 300 dpi is tesseract's recommended minimum for
    /// print (tesseract's "Improving the quality of the output" guide).
    pub dpi: u32,
    /// Worker threads (one page each); defaults to the number of cores.
    pub workers: usize,
    /// How long one page may take to render or read.
    pub page_limit: Duration,
}

impl Default for OcrSettings {
    fn default() -> Self {
        OcrSettings {
            program: std::env::var_os("ONRECORD_TESSERACT").unwrap_or_else(|| "tesseract".into()),
            languages: vec!["eng".into(), "fra".into()],
            dpi: 300,
            workers: std::thread::available_parallelism().map_or(2, |n| n.get()),
            page_limit: Duration::from_secs(120),
        }
    }
}

/// Longest side, in pixels, a page is rendered at; larger pages are
/// rendered at a lower resolution (a poster-sized page at 300 dpi would
/// take gigabytes).
pub const MAX_SIDE_PX: f64 = 7000.0;

/// Below this share of dark pixels a rendered page is blank and not read.
pub const BLANK_INK: f64 = 0.0005;

/// An OCR engine: reads a rendered page.
pub trait OcrEngine: Sync {
    /// Identifies the engine and its settings; part of the cache key, so a
    /// change of version or languages reads pages again.
    fn id(&self) -> &str;
    fn recognise(&self, image: &Gray, dpi: u32) -> Result<OcrPage, OcrError>;
}

/// Tesseract through its command line: `tesseract stdin stdout --dpi D -l
/// eng+fra tsv`, PGM in, TSV out.
#[derive(Debug, Clone)]
pub struct Tesseract {
    program: OsString,
    languages: String,
    id: String,
    limit: Duration,
}

impl Tesseract {
    /// Checks that the program runs and has at least one wanted language.
    pub fn find(settings: &OcrSettings) -> Result<Tesseract, OcrError> {
        let program = settings.program.clone();
        let shown = program.to_string_lossy().into_owned();
        let run = |arg: &str| {
            let mut cmd = Command::new(&program);
            cmd.arg(arg).stdin(std::process::Stdio::null());
            match output_within(cmd, None, Duration::from_secs(30)) {
                Ok(Some((_, out, err))) => Ok(format!(
                    "{}{}",
                    String::from_utf8_lossy(&out),
                    String::from_utf8_lossy(&err)
                )),
                Ok(None) => Err(OcrError::TimedOut(30)),
                Err(e) if e.kind() == std::io::ErrorKind::NotFound => Err(OcrError::NotInstalled {
                    program: shown.clone(),
                }),
                Err(e) => Err(OcrError::Failed(format!("cannot run `{shown}`: {e}"))),
            }
        };
        let version = run("--version")?;
        let version = version
            .lines()
            .find(|l| l.to_ascii_lowercase().starts_with("tesseract"))
            .unwrap_or("tesseract (unknown version)")
            .trim()
            .to_string();
        let listed = run("--list-langs")?;
        let have: Vec<&str> = listed
            .lines()
            .map(str::trim)
            .filter(|l| !l.is_empty() && !l.contains(' ') && !l.ends_with(':'))
            .collect();
        let langs: Vec<&str> = settings
            .languages
            .iter()
            .map(String::as_str)
            .filter(|l| have.contains(l))
            .collect();
        if langs.is_empty() {
            return Err(OcrError::NoLanguages {
                wanted: settings.languages.join(", "),
                have: if have.is_empty() {
                    "none".into()
                } else {
                    have.join(", ")
                },
            });
        }
        let languages = langs.join("+");
        Ok(Tesseract {
            id: format!("{version}; {languages}; tsv; sauvola when poor"),
            program,
            languages,
            limit: settings.page_limit,
        })
    }
}

impl OcrEngine for Tesseract {
    fn id(&self) -> &str {
        &self.id
    }

    /// Reads with tesseract's default (global Otsu) thresholding; when that
    /// reading is poor (mean confidence under [`super::LOW_CONFIDENCE`], or no
    /// words), reads again with Sauvola's adaptive thresholding, which copes
    /// with grain and uneven toner (Sauvola and Pietikäinen, "Adaptive
    /// document image binarization", Pattern Recognition 33, 2000), and
    /// keeps the better reading.
    fn recognise(&self, image: &Gray, dpi: u32) -> Result<OcrPage, OcrError> {
        let pgm = image.to_pgm();
        let first = self.run(&pgm, dpi, None)?;
        if first.confidence.is_some_and(|c| c >= super::LOW_CONFIDENCE) {
            return Ok(first);
        }
        let second = self.run(&pgm, dpi, Some("thresholding_method=2"))?;
        Ok(if weight(&second) > weight(&first) {
            second
        } else {
            first
        })
    }
}

/// How much a reading is worth: confidence times length of its words with
/// a letter or digit.
fn weight(p: &OcrPage) -> f64 {
    p.words
        .iter()
        .filter(|w| w.text.chars().any(char::is_alphanumeric))
        .map(|w| f64::from(w.conf) * w.text.chars().count() as f64)
        .sum()
}

impl Tesseract {
    fn run(&self, pgm: &[u8], dpi: u32, config: Option<&str>) -> Result<OcrPage, OcrError> {
        let mut cmd = Command::new(&self.program);
        cmd.args(["stdin", "stdout", "--dpi", &dpi.to_string(), "-l"])
            .arg(&self.languages);
        if let Some(c) = config {
            cmd.args(["-c", c]);
        }
        cmd.arg("tsv").env("OMP_THREAD_LIMIT", "1");
        let done = output_within(cmd, Some(pgm.to_vec()), self.limit)
            .map_err(|e| OcrError::Failed(format!("cannot run tesseract: {e}")))?;
        let Some((status, out, err)) = done else {
            return Err(OcrError::TimedOut(self.limit.as_secs()));
        };
        if !status.success() {
            return Err(OcrError::Failed(format!(
                "tesseract exited with {status}: {}",
                first_line(&err)
            )));
        }
        parse_tsv(&String::from_utf8_lossy(&out), dpi).map_err(OcrError::Failed)
    }
}

/// The first non-empty line of a program's error output.
fn first_line(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes)
        .lines()
        .map(str::trim)
        .find(|l| !l.is_empty())
        .unwrap_or("no message")
        .chars()
        .take(200)
        .collect()
}

/// A rendered page, and what the renderer complained about, if anything.
#[derive(Debug)]
pub struct Rendered {
    pub image: Gray,
    pub dpi: u32,
    pub complaint: Option<String>,
}

/// The resolution a page of this size is rendered at: `dpi`, lowered so
/// that no side exceeds [`MAX_SIDE_PX`].
pub fn render_dpi(drawing: &PageDrawing, dpi: u32) -> u32 {
    let side_in = drawing.width_pt.max(drawing.height_pt) / 72.0;
    if side_in <= 0.0 {
        return dpi;
    }
    let cap = (MAX_SIDE_PX / side_in).floor();
    (f64::from(dpi)).min(cap).max(1.0) as u32
}

/// Renders page `page` (1-based) of `pdf` as 8-bit gray with pdftoppm.
pub fn render_page(pdf: &Path, page: u32, dpi: u32, limit: Duration) -> Result<Rendered, OcrError> {
    if find_on_path("pdftoppm").is_none() {
        return Err(OcrError::RendererMissing);
    }
    let arg: PathBuf = if pdf.is_relative() && pdf.to_string_lossy().starts_with('-') {
        Path::new(".").join(pdf)
    } else {
        pdf.to_path_buf()
    };
    let n = page.to_string();
    let mut cmd = Command::new("pdftoppm");
    cmd.args([
        "-r",
        &dpi.to_string(),
        "-gray",
        "-f",
        &n,
        "-l",
        &n,
        "-singlefile",
    ])
    .arg(&arg)
    .stdin(std::process::Stdio::null());
    let done = output_within(cmd, None, limit)
        .map_err(|e| OcrError::Render(format!("cannot run pdftoppm: {e}")))?;
    let Some((status, out, err)) = done else {
        return Err(OcrError::TimedOut(limit.as_secs()));
    };
    let complaint = String::from_utf8_lossy(&err)
        .lines()
        .map(str::trim)
        .find(|l| l.contains("Error"))
        .map(|l| l.chars().take(200).collect::<String>());
    if !status.success() {
        return Err(OcrError::Render(format!(
            "pdftoppm exited with {status}: {}",
            first_line(&err)
        )));
    }
    let image = Gray::from_pnm(&out).map_err(OcrError::Render)?;
    Ok(Rendered {
        image,
        dpi,
        complaint,
    })
}

/// One page to read.
#[derive(Debug, Clone)]
pub struct Job {
    pub pdf: PathBuf,
    /// 1-based.
    pub page: u32,
    pub drawing: PageDrawing,
}

/// What reading one page gave.
#[derive(Debug)]
pub struct Outcome {
    pub page: Result<OcrPage, OcrError>,
    /// The renderer's complaint about the page (a damaged image, say).
    pub complaint: Option<String>,
    /// Whether the page rendered blank (nothing to read).
    pub blank: bool,
}

/// Reads one page: render, skip if blank, OCR.
pub fn read_page(job: &Job, engine: &dyn OcrEngine, settings: &OcrSettings) -> Outcome {
    let dpi = render_dpi(&job.drawing, settings.dpi);
    let rendered = match render_page(&job.pdf, job.page, dpi, settings.page_limit) {
        Ok(r) => r,
        Err(e) => {
            return Outcome {
                page: Err(e),
                complaint: None,
                blank: false,
            };
        }
    };
    if rendered.image.ink_share() < BLANK_INK {
        // A blank render with the renderer complaining is a broken image.
        let page = match &rendered.complaint {
            Some(c) => Err(OcrError::BadImage(c.clone())),
            None => Ok(OcrPage {
                text: String::new(),
                words: vec![],
                confidence: None,
                dpi,
            }),
        };
        return Outcome {
            page,
            complaint: None,
            blank: rendered.complaint.is_none(),
        };
    }
    Outcome {
        page: engine.recognise(&rendered.image, dpi),
        complaint: rendered.complaint,
        blank: false,
    }
}

/// Reads `jobs` on `settings.workers` threads, calling `done` after each
/// page (for a progress bar). Results come back in job order.
pub fn run_jobs(
    jobs: &[Job],
    engine: &dyn OcrEngine,
    settings: &OcrSettings,
    done: &(dyn Fn() + Sync),
) -> Vec<Outcome> {
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<Outcome>>> = Mutex::new((0..jobs.len()).map(|_| None).collect());
    let workers = settings.workers.clamp(1, jobs.len().max(1));
    std::thread::scope(|s| {
        for _ in 0..workers {
            s.spawn(|| {
                loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(job) = jobs.get(i) else { break };
                    let out = read_page(job, engine, settings);
                    results.lock().expect("no worker panics while holding it")[i] = Some(out);
                    done();
                }
            });
        }
    });
    results
        .into_inner()
        .expect("workers finished")
        .into_iter()
        .map(|o| {
            o.unwrap_or(Outcome {
                page: Err(OcrError::Failed("the OCR worker stopped".into())),
                complaint: None,
                blank: false,
            })
        })
        .collect()
}

/// The cache key of a page: what it draws, the engine and the resolution.
pub fn cache_key(drawing: &PageDrawing, engine: &dyn OcrEngine, dpi: u32) -> String {
    crate::text::hash_hex(format!("{}\u{0}{}\u{0}{}", drawing.key, engine.id(), dpi).as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn drawing(w: f64, h: f64) -> PageDrawing {
        PageDrawing {
            key: String::new(),
            has_image: true,
            width_pt: w,
            height_pt: h,
        }
    }

    #[test]
    fn large_pages_render_at_lower_resolution() {
        assert_eq!(render_dpi(&drawing(612.0, 792.0), 300), 300);
        // A 100-inch poster: 7000 px / 100 in = 70 dpi.
        assert_eq!(render_dpi(&drawing(7200.0, 3600.0), 300), 70);
    }

    #[test]
    fn a_missing_program_says_how_to_install_it() {
        let settings = OcrSettings {
            program: "onrecord-no-such-tesseract".into(),
            ..Default::default()
        };
        let e = Tesseract::find(&settings).unwrap_err();
        assert!(e.is_setup());
        let msg = e.to_string();
        assert!(msg.contains("apt-get install tesseract-ocr"), "{msg}");
        assert!(msg.contains("onrecord-no-such-tesseract"), "{msg}");
    }
}
