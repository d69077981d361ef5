//! Reading one file in a separate process, with a memory and a time
//! allowance. A hostile or broken file (a decompression bomb, a page tree
//! of millions of objects, tags nested a million deep) can make a parser
//! allocate without bound, loop, or overflow its stack; in a process of
//! its own that costs only that file, never the ingest or the machine.
//!
//! The parent runs the same program with the hidden `read-one` command
//! ([`serve_one`]), which reads the file with [`super::extract`] and prints
//! one JSON line. The parent kills it when the time allowance runs out or,
//! on Linux, when its resident memory passes the allowance (read from /proc
//! every 10 ms); the child also caps its own address space (`RLIMIT_AS`,
//! Unix) at the allowance plus room for the allocator's reservations, the
//! backstop where /proc is not there.
//!
//! invariant: a worker's failure is a failure of that file only: it comes
//! back as [`ExtractError::Reader`] naming the allowance that ran out.

use super::pdf::{Ended, PdfRoute};
use super::{ExtractError, ExtractOptions, Extracted, Kind};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

/// The hidden command the worker runs as.
pub const COMMAND: &str = "read-one";

/// Where and how files are read out of process.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Isolation {
    /// The program that serves [`COMMAND`] (the onrecord binary itself).
    pub program: PathBuf,
    /// Most resident memory, in bytes, reading one file may use; a file
    /// larger than this is refused without being read.
    pub memory_bytes: u64,
    /// Most time the reader may take for one file.
    pub time_limit: Duration,
}

/// Default memory allowance, in MiB: ample for any real record (the
/// largest PDF of a release is a few hundred MB of scans), small enough
/// that a laptop survives.
pub const DEFAULT_MEMORY_MB: u64 = 2048;
/// Default time allowance, in seconds, per file.
pub const DEFAULT_SECONDS: u64 = 300;

impl Isolation {
    /// This program as the worker, with the default allowances.
    pub fn this_program() -> std::io::Result<Isolation> {
        Ok(Isolation {
            program: std::env::current_exe()?,
            memory_bytes: DEFAULT_MEMORY_MB << 20,
            time_limit: Duration::from_secs(DEFAULT_SECONDS),
        })
    }
}

/// What the worker prints: the extraction, or why it failed.
#[derive(Debug, serde::Serialize, serde::Deserialize)]
enum Reply {
    Read(Extracted),
    Failed(String),
}

fn route_name(r: PdfRoute) -> &'static str {
    match r {
        PdfRoute::Pdftotext => "pdftotext",
        PdfRoute::PureRust => "built-in",
    }
}

fn mib(bytes: u64) -> u64 {
    bytes >> 20
}

/// Why a file of `size` bytes is refused unread, if it is: it could not be
/// read within the memory allowance.
pub fn too_large(iso: &Isolation, size: u64) -> Option<String> {
    (size > iso.memory_bytes).then(|| {
        format!(
            "the file is {} MB, more than the {} MB of memory allowed for reading one file, so it was not read (raise the limit with --reader-memory)",
            mib(size),
            mib(iso.memory_bytes)
        )
    })
}

/// Read `path` in a worker process under `iso`'s allowances (the caller
/// has refused a file [`too_large`] for them).
pub fn extract_isolated(
    iso: &Isolation,
    path: &Path,
    kind: Kind,
    opts: &ExtractOptions,
) -> Result<Extracted, ExtractError> {
    let mut cmd = Command::new(&iso.program);
    cmd.arg(COMMAND)
        .arg("--kind")
        .arg(kind.name())
        .arg("--pdf-route")
        .arg(route_name(opts.pdf_route))
        .arg("--memory-bytes")
        .arg(iso.memory_bytes.to_string())
        .arg(path)
        // The worker logs nothing the parent would show.
        .env_remove("RUST_LOG")
        .env("RUST_BACKTRACE", "0");
    let ended = super::pdf::output_watched(cmd, None, iso.time_limit, Some(iso.memory_bytes))
        .map_err(|e| {
            ExtractError::Reader(format!(
                "could not start onrecord's file reader ({}): {e}",
                iso.program.display()
            ))
        })?;
    let (status, stdout, stderr) = match ended {
        Ended::Finished(f) => f,
        Ended::TimedOut => {
            return Err(ExtractError::Reader(format!(
                "reading it took longer than the {} s allowed, so it was stopped (raise the limit with --reader-seconds)",
                iso.time_limit.as_secs()
            )));
        }
        Ended::OverMemory(seen) => return Err(ExtractError::Reader(over_memory(iso, Some(seen)))),
    };
    let line = stdout.split(|b| *b == b'\n').find(|l| l.starts_with(b"{"));
    match line.map(serde_json::from_slice::<Reply>) {
        Some(Ok(Reply::Read(x))) if status.success() => Ok(x),
        Some(Ok(Reply::Failed(msg))) => Err(ExtractError::Reader(msg)),
        _ => Err(ExtractError::Reader(crash_reason(status, &stderr, iso))),
    }
}

fn over_memory(iso: &Isolation, seen: Option<u64>) -> String {
    format!(
        "reading it needed more than the {} MB of memory allowed{}, so it was stopped (raise the limit with --reader-memory)",
        mib(iso.memory_bytes),
        seen.map(|b| format!(" ({} MB when stopped)", mib(b)))
            .unwrap_or_default()
    )
}

/// Why a worker ended without a reply, in the user's terms.
fn crash_reason(status: std::process::ExitStatus, stderr: &[u8], iso: &Isolation) -> String {
    let err = String::from_utf8_lossy(stderr);
    if err.contains("memory allocation") || err.contains("out of memory") {
        return over_memory(iso, None);
    }
    if err.contains("stack overflow") {
        return "the file is nested too deeply to read (the file reader overflowed its stack)"
            .into();
    }
    #[cfg(unix)]
    {
        use std::os::unix::process::ExitStatusExt;
        if let Some(sig) = status.signal() {
            return format!(
                "the file reader crashed on this file (signal {sig}); it may need more than the {} MB of memory allowed (raise the limit with --reader-memory)",
                mib(iso.memory_bytes)
            );
        }
    }
    let last = err
        .lines()
        .rev()
        .find(|l| !l.trim().is_empty())
        .unwrap_or("");
    format!(
        "the file reader failed on this file ({status}){}",
        if last.is_empty() {
            String::new()
        } else {
            format!(": {}", last.trim())
        }
    )
}

/// Address space a worker may reserve beyond its memory allowance: the
/// allocator reserves address space in large arenas that are never
/// resident. The parent enforces the allowance on resident memory (Linux);
/// this cap is the backstop elsewhere, and for a reader's own children
/// (pdftotext), which inherit it.
const RESERVE_HEADROOM: u64 = 4 << 30;

/// The worker's side: cap this process's address space, read one file,
/// print one JSON line. Returns the process's exit code.
pub fn serve_one(path: &Path, kind: Kind, route: PdfRoute, memory_bytes: u64) -> i32 {
    cap_memory(memory_bytes.saturating_add(RESERVE_HEADROOM));
    let opts = ExtractOptions { pdf_route: route };
    let reply = match std::fs::read(path) {
        Err(e) => Reply::Failed(format!("cannot read: {e}")),
        Ok(bytes) => match super::extract(path, kind, &bytes, &opts) {
            Ok(x) => Reply::Read(x),
            Err(e) => Reply::Failed(e.to_string()),
        },
    };
    let mut line = serde_json::to_string(&reply).unwrap_or_else(|e| {
        serde_json::to_string(&Reply::Failed(format!("could not report the text: {e}")))
            .unwrap_or_default()
    });
    line.push('\n');
    use std::io::Write;
    let mut stdout = std::io::stdout().lock();
    match stdout
        .write_all(line.as_bytes())
        .and_then(|_| stdout.flush())
    {
        Ok(()) => 0,
        Err(_) => 1,
    }
}

/// Parse a kind name as [`Kind::name`] gives it.
pub fn kind_named(name: &str) -> Option<Kind> {
    [
        Kind::Pdf,
        Kind::Text,
        Kind::Markdown,
        Kind::Html,
        Kind::Email,
    ]
    .into_iter()
    .find(|k| k.name() == name)
}

/// Parse a route name as the parent passes it.
pub fn route_named(name: &str) -> Option<PdfRoute> {
    [PdfRoute::Pdftotext, PdfRoute::PureRust]
        .into_iter()
        .find(|r| route_name(*r) == name)
}

#[cfg(unix)]
fn cap_memory(bytes: u64) {
    let lim = libc::rlimit {
        rlim_cur: bytes as libc::rlim_t,
        rlim_max: bytes as libc::rlim_t,
    };
    // SAFETY: setrlimit reads a valid, initialised struct; it only lowers
    // this process's own limit.
    unsafe {
        libc::setrlimit(libc::RLIMIT_AS, &lim);
    }
}

#[cfg(not(unix))]
fn cap_memory(_bytes: u64) {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        for k in [
            Kind::Pdf,
            Kind::Text,
            Kind::Markdown,
            Kind::Html,
            Kind::Email,
        ] {
            assert_eq!(kind_named(k.name()), Some(k));
        }
        for r in [PdfRoute::Pdftotext, PdfRoute::PureRust] {
            assert_eq!(route_named(route_name(r)), Some(r));
        }
        assert_eq!(kind_named("docx"), None);
    }

    #[test]
    fn a_file_over_the_memory_allowance_is_refused_unread() {
        let iso = |memory_bytes| Isolation {
            program: PathBuf::from("/nonexistent/reader"),
            memory_bytes,
            time_limit: Duration::from_secs(1),
        };
        let e = too_large(&iso(1 << 20), 3 << 20).unwrap();
        assert!(e.contains("3 MB") && e.contains("1 MB"), "{e}");
        assert_eq!(too_large(&iso(1 << 20), 1 << 20), None);
        // A worker program that cannot start is named.
        let e = extract_isolated(
            &iso(1 << 30),
            Path::new("a.pdf"),
            Kind::Pdf,
            &ExtractOptions::default(),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("/nonexistent/reader"), "{e}");
    }
}
