//! Broken and hostile files at volume, as a bulk release delivers them:
//! truncated, byte-flipped, junk-headed, empty and encrypted PDFs, a PDF of
//! thousands of pages, objects nested hundreds of thousands deep, a
//! decompression bomb, HTML nested megabytes deep, broken MIME, binary junk
//! under text names. Generated from good files by a seeded generator, mixed
//! with good files, and ingested through the command line with each PDF
//! reader. Nothing may crash, every file is either stored or named in one
//! error, the good files are stored intact, memory stays bounded, and a
//! second run changes nothing.

use crate::support::{figure, slow_enabled, write};
use onrecord::extract::pdf::{PdfPage, write_password_protected_pdf, write_text_pdf};
use std::collections::BTreeMap;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Instant;

/// xorshift64* (Marsaglia 2003; Vigna 2016): enough for a repeatable campaign.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
    fn bytes(&mut self, n: usize) -> Vec<u8> {
        (0..n).map(|_| self.next() as u8).collect()
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Expect {
    /// A good file: stored, its sentence on its first page.
    Good(&'static str),
    /// Unreadable by design: one error names it.
    Refused,
    /// Damaged, but perhaps still readable: stored, or one error.
    Either,
}

struct Campaign {
    files: Vec<(PathBuf, Expect, &'static str)>,
}

const GOOD_SENTENCES: [&str; 8] = [
    "The Vell Quay footbridge reopened to walkers on 3 May.",
    "Sallowcrest Marine was paid $412,000 for the pontoon repairs.",
    "The harbour clerk signed the berth register on 9 June.",
    "Dredging of the inner basin finished two weeks late.",
    "The ferry timetable changes from the first Monday of October.",
    "Inspectors found corrosion on four of the twelve bollards.",
    "The quay lighting contract went to Orrin Electric.",
    "The board deferred the fender replacement to next spring.",
];

fn good_pdf(path: &Path, sentence: &str) {
    let pages = vec![
        PdfPage {
            lines: vec![sentence.to_string(), "Page one of the record.".into()],
        },
        PdfPage {
            lines: vec!["A second page with routine notes on the quay works.".into()],
        },
    ];
    write_text_pdf(path, "Quay record", &pages).unwrap();
}

/// A PDF whose one page draws a FlateDecode stream that inflates to
/// `inflated` bytes of spaces, with `nested` levels of arrays in its
/// resources (0 for none).
fn hostile_pdf(inflated: usize, nested: usize) -> Vec<u8> {
    use std::io::Write;
    let mut z = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::best());
    let block = vec![b' '; 1 << 20];
    let mut left = inflated;
    while left > 0 {
        let n = left.min(block.len());
        z.write_all(&block[..n]).unwrap();
        left -= n;
    }
    z.write_all(b"BT /F1 9 Tf 54 700 Td (Bomb page.) Tj ET")
        .unwrap();
    let content = z.finish().unwrap();
    let deep = if nested == 0 {
        String::new()
    } else {
        format!("/Deep {}{}", "[".repeat(nested), "]".repeat(nested))
    };
    let objs: Vec<Vec<u8>> = vec![
        b"<< /Type /Catalog /Pages 2 0 R >>".to_vec(),
        b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>".to_vec(),
        format!(
            "<< /Type /Page /Parent 2 0 R /MediaBox [0 0 612 792] /Contents 4 0 R \
             /Resources << /Font << /F1 5 0 R >> {deep} >> >>"
        )
        .into_bytes(),
        {
            let mut s = format!(
                "<< /Length {} /Filter /FlateDecode >>\nstream\n",
                content.len()
            )
            .into_bytes();
            s.extend_from_slice(&content);
            s.extend_from_slice(b"\nendstream");
            s
        },
        b"<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica >>".to_vec(),
    ];
    raw_pdf(&objs)
}

fn email(headers: &str, body: &str) -> String {
    format!("{headers}\r\n\r\n{body}")
}

/// Builds the good files and at least 200 bad ones in `dir`.
fn generate(dir: &Path, seed: u64) -> Campaign {
    let mut rng = Rng(seed);
    let mut files = Vec::new();
    let add = |files: &mut Vec<_>, name: String, body: &[u8], e: Expect, cat| {
        files.push((write(dir, &name, body), e, cat));
    };
    // Good files of every kind.
    let mut good_pdfs = Vec::new();
    for (i, s) in GOOD_SENTENCES[..4].iter().enumerate() {
        let p = dir.join(format!("good-{i}.pdf"));
        good_pdf(&p, s);
        good_pdfs.push(std::fs::read(&p).unwrap());
        files.push((p, Expect::Good(s), "good"));
    }
    add(
        &mut files,
        "good-4.txt".into(),
        GOOD_SENTENCES[4].as_bytes(),
        Expect::Good(GOOD_SENTENCES[4]),
        "good",
    );
    add(
        &mut files,
        "good-5.md".into(),
        format!("# Quay notes\n\n{}\n", GOOD_SENTENCES[5]).as_bytes(),
        Expect::Good(GOOD_SENTENCES[5]),
        "good",
    );
    add(
        &mut files,
        "good-6.html".into(),
        format!(
            "<html><head><title>Notice</title></head><body><p>{}</p></body></html>",
            GOOD_SENTENCES[6]
        )
        .as_bytes(),
        Expect::Good(GOOD_SENTENCES[6]),
        "good",
    );
    add(
        &mut files,
        "good-7.eml".into(),
        email(
            "From: clerk@quay.example\r\nTo: board@quay.example\r\nSubject: Fenders\r\nDate: Mon, 2 Mar 2026 09:00:00 +0000",
            GOOD_SENTENCES[7],
        )
        .as_bytes(),
        Expect::Good(GOOD_SENTENCES[7]),
        "good",
    );

    // Truncated PDFs, at random offsets.
    for i in 0..40 {
        let src = &good_pdfs[i % good_pdfs.len()];
        let cut = rng.below(src.len() * 9 / 10);
        add(
            &mut files,
            format!("trunc-{i:02}.pdf"),
            &src[..cut],
            Expect::Either,
            "truncated pdf",
        );
    }
    // Byte flips at random offsets.
    for i in 0..40 {
        let mut b = good_pdfs[i % good_pdfs.len()].clone();
        for _ in 0..1 + rng.below(20) {
            let at = rng.below(b.len());
            b[at] ^= 1 << rng.below(8);
        }
        add(
            &mut files,
            format!("flip-{i:02}.pdf"),
            &b,
            Expect::Either,
            "byte-flipped pdf",
        );
    }
    // A PDF header, then junk.
    for i in 0..20 {
        let mut b = b"%PDF-1.7\n".to_vec();
        let n = 16 + rng.below(20_000);
        b.extend(rng.bytes(n));
        add(
            &mut files,
            format!("junkhead-{i:02}.pdf"),
            &b,
            Expect::Refused,
            "pdf header then junk",
        );
    }
    // Junk, then a whole PDF.
    for i in 0..10 {
        let n = 1 + rng.below(3000);
        let mut b = rng.bytes(n);
        b.extend_from_slice(&good_pdfs[i % good_pdfs.len()]);
        add(
            &mut files,
            format!("junkfirst-{i:02}.pdf"),
            &b,
            Expect::Either,
            "junk before a pdf",
        );
    }
    // Junk under a PDF name.
    for i in 0..20 {
        let n = rng.below(50_000);
        let b = rng.bytes(n);
        add(
            &mut files,
            format!("junk-{i:02}.pdf"),
            &b,
            Expect::Refused,
            "junk pdf",
        );
    }
    // Empty files of every kind.
    for ext in ["pdf", "txt", "md", "html", "htm", "eml"] {
        add(
            &mut files,
            format!("empty.{ext}"),
            b"",
            Expect::Refused,
            "empty",
        );
    }
    // Encrypted PDFs.
    for i in 0..3 {
        let p = dir.join(format!("locked-{i}.pdf"));
        write_password_protected_pdf(&p).unwrap();
        files.push((p, Expect::Refused, "encrypted pdf"));
    }
    // Thousands of pages.
    let many: Vec<PdfPage> = (1..=3000)
        .map(|n| PdfPage {
            lines: vec![format!("Berth log, sheet {n}.")],
        })
        .collect();
    let p = dir.join("many-pages.pdf");
    write_text_pdf(&p, "Berth log", &many).unwrap();
    files.push((p, Expect::Either, "3,000 pages"));
    // Deeply nested objects.
    for (i, depth) in [50_000, 300_000, 1_000_000].into_iter().enumerate() {
        add(
            &mut files,
            format!("nested-{i}.pdf"),
            &hostile_pdf(0, depth),
            Expect::Either,
            "deeply nested pdf",
        );
    }
    // A decompression bomb: 1.5 GB of spaces in a ~1.5 MB file.
    add(
        &mut files,
        "bomb.pdf".into(),
        &hostile_pdf(1536 << 20, 0),
        Expect::Either,
        "decompression bomb",
    );
    // HTML nested megabytes deep.
    for (i, unit) in ["<div>", "<b><i>", "<table><tr><td>"]
        .into_iter()
        .enumerate()
    {
        let mut h = String::from("<html><body>");
        while h.len() < 3 << 20 {
            h.push_str(unit);
        }
        h.push_str("The quay is closed.</body></html>");
        add(
            &mut files,
            format!("deep-{i}.html"),
            h.as_bytes(),
            Expect::Either,
            "deeply nested html",
        );
    }
    // Broken MIME.
    let hdr = "From: a@quay.example\r\nTo: b@quay.example\r\nSubject: Quay";
    let broken = [
        email(hdr, ""),
        email(
            &format!("{hdr}\r\nContent-Type: multipart/mixed; boundary=\"zz\""),
            "no parts at all",
        ),
        email(
            &format!("{hdr}\r\nContent-Type: multipart/mixed"),
            "--\r\nbody\r\n--",
        ),
        email(
            &format!("{hdr}\r\nContent-Type: text/plain\r\nContent-Transfer-Encoding: base64"),
            "!!!not base64 at all%%%",
        ),
        email(
            &format!(
                "{hdr}\r\nContent-Type: text/plain\r\nContent-Transfer-Encoding: quoted-printable"
            ),
            "broken =ZZ soft =\r\nbreaks =",
        ),
        email(
            &format!("{hdr}\r\nContent-Type: text/plain; charset=x-unknown-42"),
            "Body text.",
        ),
        email(&format!("Subject: {}", "x".repeat(1 << 20)), "Long header."),
        {
            let mut b = String::new();
            for d in 0..20_000 {
                b.push_str(&format!(
                    "Content-Type: multipart/mixed; boundary=\"b{d}\"\r\n\r\n--b{d}\r\n"
                ));
            }
            email(hdr, &b)
        },
        "no headers here, only a line of text".to_string(),
        email(
            &format!("{hdr}\r\nContent-Type: multipart/alternative; boundary=\"q\""),
            "--q\r\nContent-Type: text/plain\r\n\r\nhalf a part",
        ),
        email(
            &format!("{hdr}\r\nContent-Type: message/rfc822"),
            "From: inner\r\n",
        ),
        email(
            &format!("{hdr}\r\nContent-Type: text/html"),
            "<p>unclosed <b>html",
        ),
        "\r\n\r\n\r\n".to_string(),
        email(&format!("{hdr}\r\nContent-Type: ;;;;"), "body"),
        email(
            &format!("{hdr}\r\nContent-Transfer-Encoding: base64"),
            &"QUJD".repeat(100_000),
        ),
    ];
    for (i, b) in broken.iter().enumerate() {
        add(
            &mut files,
            format!("mime-{i:02}.eml"),
            b.as_bytes(),
            Expect::Either,
            "broken mime",
        );
    }
    // Invalid UTF-8 in text.
    for i in 0..5 {
        let mut b = b"Quay note with a bad byte: ".to_vec();
        b.extend([0xC3, 0x28, 0xA0, 0xFF, 0xFE]);
        b.extend(format!(" number {i}.").as_bytes());
        add(
            &mut files,
            format!("badutf8-{i}.txt"),
            &b,
            Expect::Either,
            "invalid utf-8",
        );
    }
    // Binary junk under text names (with a NUL byte, as binary data has).
    for i in 0..40 {
        let ext = ["txt", "md", "html", "htm", "eml"][i % 5];
        let n = 100 + rng.below(30_000);
        let mut b = rng.bytes(n);
        let at = rng.below(b.len().min(4000));
        b[at] = 0;
        let expect = if ext == "eml" {
            Expect::Either
        } else {
            Expect::Refused
        };
        add(
            &mut files,
            format!("binary-{i:02}.{ext}"),
            &b,
            expect,
            "binary under a text name",
        );
    }
    Campaign { files }
}

/// Peak resident memory (VmHWM, bytes) of `pid` and of each child it has
/// now, read from /proc (Linux).
fn peak_of_tree(pid: u32) -> u64 {
    let hwm = |pid: &str| -> u64 {
        std::fs::read_to_string(format!("/proc/{pid}/status"))
            .ok()
            .and_then(|s| {
                let line = s.lines().find(|l| l.starts_with("VmHWM:"))?.to_string();
                line.split_whitespace().nth(1)?.parse::<u64>().ok()
            })
            .unwrap_or(0)
            * 1024
    };
    let pid = pid.to_string();
    let children =
        std::fs::read_to_string(format!("/proc/{pid}/task/{pid}/children")).unwrap_or_default();
    children
        .split_whitespace()
        .map(hwm)
        .fold(hwm(&pid), u64::max)
}

/// Runs the ingest command; returns its JSON output, wall seconds and the
/// peak resident memory (MB) of it and its reader processes, polled every
/// 5 ms from /proc. (The kernel's own account, `wait4`, would also count
/// this test process's memory, which the child shares until it execs.)
fn ingest(index: &Path, dir: &Path, reader: &str) -> (serde_json::Value, f64, f64) {
    use std::sync::Arc;
    use std::sync::atomic::{AtomicBool, Ordering};
    let start = Instant::now();
    let mut child = Command::new(env!("CARGO_BIN_EXE_onrecord"))
        .args([
            "add",
            "--json",
            "--quiet",
            "--embedder",
            "off",
            "--ocr",
            "never",
        ])
        .args([
            "--pdf-reader",
            reader,
            "--reader-memory",
            "512",
            "--reader-seconds",
            "120",
        ])
        .arg("--index")
        .arg(index)
        .arg(dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let done = Arc::new(AtomicBool::new(false));
    let pid = child.id();
    let watcher = {
        let done = done.clone();
        std::thread::spawn(move || {
            let mut peak = 0;
            while !done.load(Ordering::Relaxed) {
                peak = peak.max(peak_of_tree(pid));
                std::thread::sleep(std::time::Duration::from_millis(5));
            }
            peak
        })
    };
    let mut err_pipe = child.stderr.take().unwrap();
    let err_thread = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = err_pipe.read_to_string(&mut s);
        s
    });
    let mut out = String::new();
    child
        .stdout
        .take()
        .unwrap()
        .read_to_string(&mut out)
        .unwrap();
    let stderr = err_thread.join().unwrap();
    let status = child.wait().unwrap();
    done.store(true, Ordering::Relaxed);
    let peak = watcher.join().unwrap();
    let secs = start.elapsed().as_secs_f64();
    {
        use std::os::unix::process::ExitStatusExt;
        assert!(
            status.signal().is_none(),
            "ingest was killed by signal {:?}; stderr: {stderr}",
            status.signal()
        );
    }
    assert!(
        matches!(status.code(), Some(0 | 1)),
        "{status}; stderr: {stderr}"
    );
    assert!(!stderr.contains("panicked"), "{stderr}");
    let v: serde_json::Value =
        serde_json::from_str(&out).unwrap_or_else(|e| panic!("{e}: {out} {stderr}"));
    (v, secs, peak as f64 / (1 << 20) as f64)
}

fn campaign(reader: &str) {
    let dir = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let c = generate(dir.path(), 0x5EED_0FBA_DF11_E500);
    let bad = c
        .files
        .iter()
        .filter(|f| !matches!(f.1, Expect::Good(_)))
        .count();
    assert!(bad >= 200, "only {bad} bad files");
    let (first, secs, peak_mb) = ingest(idx.path(), dir.path(), reader);

    let diags = first["diagnostics"].as_array().unwrap();
    let store = onrecord::store::Store::open(idx.path()).unwrap();
    let docs = store.documents().unwrap();
    let mut outcomes: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
    let mut samples: BTreeMap<&str, String> = BTreeMap::new();
    for (path, expect, cat) in &c.files {
        let name = path.file_name().unwrap().to_str().unwrap();
        let errors: Vec<&str> = diags
            .iter()
            .filter(|d| d["severity"] == "error")
            .filter(|d| {
                d["path"]
                    .as_str()
                    .is_some_and(|p| p.ends_with(&format!("/{name}")))
            })
            .map(|d| d["message"].as_str().unwrap_or(""))
            .collect();
        let stored = docs
            .iter()
            .find(|d| d.source.ends_with(&format!("/{name}")));
        assert!(
            errors.len() <= 1,
            "{name} ({cat}): several errors {errors:?}"
        );
        assert!(
            stored.is_none() || errors.is_empty(),
            "{name} ({cat}): stored and also failed: {errors:?}"
        );
        assert!(
            stored.is_some() || errors.len() == 1,
            "{name} ({cat}): neither stored nor named"
        );
        if let Some(e) = errors.first() {
            assert!(!e.trim().is_empty(), "{name}: empty diagnostic");
        }
        match expect {
            Expect::Good(sentence) => {
                let d = stored.unwrap_or_else(|| panic!("good file {name} not stored: {errors:?}"));
                let pages = store.pages(&d.doc_id).unwrap();
                let text = pages
                    .join("\n")
                    .split_whitespace()
                    .collect::<Vec<_>>()
                    .join(" ");
                assert!(text.contains(sentence), "{name}: {text}");
            }
            Expect::Refused => {
                assert_eq!(
                    errors.len(),
                    1,
                    "{name} ({cat}) was stored, though unreadable"
                )
            }
            Expect::Either => {}
        }
        let e = outcomes.entry(cat).or_default();
        if stored.is_some() {
            e.0 += 1
        } else {
            e.1 += 1
        }
        if let Some(msg) = errors.first() {
            samples
                .entry(cat)
                .or_insert_with(|| format!("{name}: {msg}"));
        }
    }
    let report = &first["report"];
    assert_eq!(
        report["ingested"].as_u64().unwrap() + report["failed"].as_u64().unwrap(),
        c.files.len() as u64,
        "{report}"
    );
    for s in samples.values() {
        eprintln!("  {s}");
    }
    let summary: Vec<String> = outcomes
        .iter()
        .map(|(cat, (s, f))| format!("{cat} {s} stored/{f} named"))
        .collect();
    figure(&format!(
        "fault campaign ({reader} reader): {} files ({bad} bad), {} stored, {} named in an error, 0 crashes; {secs:.1} s, peak memory {peak_mb:.0} MB; {}",
        c.files.len(),
        report["ingested"],
        report["failed"],
        summary.join("; ")
    ));
    // Bounded: the readers are capped at 512 MB; the ingest itself holds
    // one file at a time.
    assert!(peak_mb < 1024.0, "peak memory {peak_mb:.0} MB");

    // A second run changes nothing.
    let (second, _, _) = ingest(idx.path(), dir.path(), reader);
    let r2 = &second["report"];
    assert_eq!(r2["ingested"], 0, "{r2}");
    assert_eq!(r2["unchanged"], report["ingested"], "{r2}");
    assert_eq!(r2["failed"], report["failed"], "{r2}");
    let again = onrecord::store::Store::open(idx.path())
        .unwrap()
        .documents()
        .unwrap();
    let ids = |d: &[onrecord::store::DocSummary]| {
        d.iter()
            .map(|d| (d.doc_id.0.clone(), d.pages))
            .collect::<Vec<_>>()
    };
    assert_eq!(ids(&docs), ids(&again));
}

#[test]
fn slow_fault_campaign_with_the_built_in_pdf_reader() {
    if !slow_enabled("slow_fault_campaign_with_the_built_in_pdf_reader") {
        return;
    }
    campaign("builtin");
}

#[test]
fn slow_fault_campaign_with_pdftotext() {
    if !slow_enabled("slow_fault_campaign_with_pdftotext") {
        return;
    }
    if onrecord::extract::pdf::find_on_path("pdftotext").is_none() {
        assert!(
            std::env::var("CI").as_deref() != Ok("true"),
            "pdftotext (poppler-utils) is required under CI=true"
        );
        eprintln!("pdftotext not installed: the pdftotext campaign is skipped");
        return;
    }
    campaign("pdftotext");
}

/// A PDF from numbered objects (1 is the catalogue), with its xref table.
fn raw_pdf(objs: &[Vec<u8>]) -> Vec<u8> {
    let mut out = b"%PDF-1.4\n".to_vec();
    let mut offsets = Vec::new();
    for (i, o) in objs.iter().enumerate() {
        offsets.push(out.len());
        out.extend_from_slice(format!("{} 0 obj\n", i + 1).as_bytes());
        out.extend_from_slice(o);
        out.extend_from_slice(b"\nendobj\n");
    }
    let xref = out.len();
    out.extend_from_slice(format!("xref\n0 {}\n0000000000 65535 f \n", objs.len() + 1).as_bytes());
    for o in offsets {
        out.extend_from_slice(format!("{o:010} 00000 n \n").as_bytes());
    }
    out.extend_from_slice(
        format!(
            "trailer\n<< /Size {} /Root 1 0 R >>\nstartxref\n{xref}\n%%EOF\n",
            objs.len() + 1
        )
        .as_bytes(),
    );
    out
}

fn stream(dict: &str, body: &str) -> Vec<u8> {
    format!(
        "<< {dict} /Length {} >>\nstream\n{body}\nendstream",
        body.len()
    )
    .into_bytes()
}

/// Issue 26, item 1: PDFs whose structure loops or recurses without end.
/// A page tree whose node lists itself among its kids, a page tree 100,000
/// levels deep, and a form XObject that draws itself. With each reader,
/// every such file stays one file's diagnostic (or is read), the run ends
/// well inside the per-file time allowance, and the good file is stored.
#[test]
fn looping_and_self_drawing_pdfs_stay_one_files_problem_issue_26() {
    let dir = tempfile::tempdir().unwrap();
    let font = b"<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica >>".to_vec();
    let page = |parent: usize, contents: usize, res: &str| {
        format!(
            "<< /Type /Page /Parent {parent} 0 R /MediaBox [0 0 612 792] /Contents {contents} 0 R \
             /Resources << /Font << /F1 5 0 R >> {res} >> >>"
        )
        .into_bytes()
    };
    let text = stream("", "BT /F1 12 Tf 72 700 Td (Cycle page.) Tj ET");
    // 1 catalogue, 2 pages node listing itself, 3 page, 4 contents, 5 font.
    let cycle = raw_pdf(&[
        b"<< /Type /Catalog /Pages 2 0 R >>".to_vec(),
        b"<< /Type /Pages /Kids [3 0 R 2 0 R] /Count 2 >>".to_vec(),
        page(2, 4, ""),
        text.clone(),
        font.clone(),
    ]);
    std::fs::write(dir.path().join("page-tree-cycle.pdf"), cycle).unwrap();
    // 6 is a form that draws itself.
    let selfish = raw_pdf(&[
        b"<< /Type /Catalog /Pages 2 0 R >>".to_vec(),
        b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>".to_vec(),
        page(2, 4, "/XObject << /X1 6 0 R >>"),
        stream("", "BT /F1 12 Tf 72 700 Td (Form page.) Tj ET /X1 Do"),
        font.clone(),
        stream(
            "/Type /XObject /Subtype /Form /BBox [0 0 612 792] /Resources << /XObject << /X1 6 0 R >> >>",
            "/X1 Do",
        ),
    ]);
    std::fs::write(dir.path().join("self-drawing-form.pdf"), selfish).unwrap();
    // 1 catalogue, 2..=N+1 pages nodes each the only kid of the one above,
    // then the page, its contents and the font.
    let n = 100_000;
    let mut objs = vec![b"<< /Type /Catalog /Pages 2 0 R >>".to_vec()];
    let leaf = n + 2;
    for i in 0..n {
        let me = i + 2;
        let kid = if i + 1 == n { leaf } else { me + 1 };
        let parent = if i == 0 {
            String::new()
        } else {
            format!("/Parent {} 0 R ", me - 1)
        };
        objs.push(format!("<< /Type /Pages {parent}/Kids [{kid} 0 R] /Count 1 >>").into_bytes());
    }
    objs.push(
        format!(
            "<< /Type /Page /Parent {} 0 R /MediaBox [0 0 612 792] /Contents {} 0 R \
             /Resources << /Font << /F1 {} 0 R >> >> >>",
            n + 1,
            leaf + 1,
            leaf + 2
        )
        .into_bytes(),
    );
    objs.push(stream("", "BT /F1 12 Tf 72 700 Td (Deep page.) Tj ET"));
    objs.push(font);
    std::fs::write(dir.path().join("deep-page-tree.pdf"), raw_pdf(&objs)).unwrap();
    good_pdf(
        &dir.path().join("good.pdf"),
        "The quay wall was repaired in May 2021.",
    );

    let allowance = 20;
    for reader in ["builtin", "pdftotext"] {
        if reader == "pdftotext" && onrecord::extract::pdf::find_on_path("pdftotext").is_none() {
            assert!(
                std::env::var("CI").map_or(true, |v| v != "true"),
                "pdftotext missing under CI=true"
            );
            continue;
        }
        let idx = tempfile::tempdir().unwrap();
        let t = Instant::now();
        let out = Command::new(env!("CARGO_BIN_EXE_onrecord"))
            .args([
                "add",
                "--json",
                "--quiet",
                "--embedder",
                "off",
                "--ocr",
                "never",
            ])
            .args([
                "--pdf-reader",
                reader,
                "--reader-seconds",
                &allowance.to_string(),
            ])
            .arg("--index")
            .arg(idx.path())
            .arg(dir.path())
            .output()
            .unwrap();
        let secs = t.elapsed().as_secs_f64();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(
            matches!(out.status.code(), Some(0 | 1)),
            "{reader}: {:?} {stderr}",
            out.status
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        let report = &v["report"];
        let named: Vec<String> = v["diagnostics"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|d| d["severity"] == "error")
            .map(|d| {
                d["path"]
                    .as_str()
                    .unwrap()
                    .rsplit('/')
                    .next()
                    .unwrap()
                    .to_string()
            })
            .collect();
        let stored = report["ingested"].as_u64().unwrap();
        let failed = report["failed"].as_u64().unwrap();
        assert_eq!(stored + failed, 4, "{reader}: {v}");
        assert_eq!(
            failed as usize,
            named.len(),
            "{reader}: every failure is named: {v}"
        );
        assert!(!named.contains(&"good.pdf".to_string()), "{reader}: {v}");
        assert!(
            secs < f64::from(allowance) * 1.5 + 10.0,
            "{reader}: {secs:.1} s"
        );
        let messages: Vec<String> = v["diagnostics"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|d| d["severity"] == "error")
            .map(|d| d["message"].as_str().unwrap().chars().take(100).collect())
            .collect();
        figure(&format!(
            "looping PDFs ({reader}): {stored} of 4 stored, {failed} named in an error ({}), {secs:.1} s: {}",
            named.join(", "),
            messages.join(" | ")
        ));
    }
}
