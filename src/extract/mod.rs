//! Turns one source file into pages of text plus the metadata the file itself
//! carries (a PDF's title, an e-mail's headers, an HTML page's title).
//!
//! invariant: extraction never edits the words of a page beyond decoding and
//! line-ending normalisation; quotes must be findable in what it returns.
//! invariant: nothing here touches the store or the index.

mod eml;
mod html;
pub mod pdf;
mod plain;
pub mod worker;

use crate::types::DocMeta;
use std::path::Path;

/// The kinds of file ingest understands, chosen by file extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Pdf,
    Text,
    Markdown,
    Html,
    Email,
}

impl Kind {
    pub fn of(path: &Path) -> Option<Kind> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        Some(match ext.as_str() {
            "pdf" => Kind::Pdf,
            "txt" | "text" => Kind::Text,
            "md" | "markdown" => Kind::Markdown,
            "html" | "htm" | "xhtml" => Kind::Html,
            "eml" => Kind::Email,
            _ => return None,
        })
    }

    pub fn name(self) -> &'static str {
        match self {
            Kind::Pdf => "pdf",
            Kind::Text => "text",
            Kind::Markdown => "markdown",
            Kind::Html => "html",
            Kind::Email => "email",
        }
    }
}

/// What a file yields: pages (page 1 first), metadata found in the file,
/// extra headers, and notes worth showing the user (not errors).
#[derive(Debug, Clone, Default, serde::Serialize, serde::Deserialize)]
pub struct Extracted {
    pub pages: Vec<String>,
    pub meta: DocMeta,
    pub headers: Option<serde_json::Value>,
    pub notes: Vec<String>,
    /// For PDFs, what each page draws (for OCR); empty for other kinds.
    pub drawings: Vec<pdf::PageDrawing>,
}

/// Why a file could not be extracted; shown to the user next to the path.
#[derive(Debug, thiserror::Error)]
pub enum ExtractError {
    #[error(transparent)]
    Pdf(#[from] pdf::PdfError),
    #[error("the file is empty (no text)")]
    Empty,
    #[error("not a readable e-mail message: {0}")]
    Email(String),
    /// The separate reader process failed, ran out of time or memory.
    #[error("{0}")]
    Reader(String),
    /// An HTML page nested deeper than any real page.
    #[error(
        "the page nests its tags {depth} deep, more than the {max} a real page needs (broken or hostile HTML)"
    )]
    TooDeep { depth: usize, max: usize },
    /// A text, Markdown or HTML file whose bytes are not text.
    #[error(
        "the file holds binary data, not text (a NUL byte in its first {BINARY_PROBE} bytes); check that its extension is right"
    )]
    Binary,
}

/// How many leading bytes are checked for a NUL byte, the sign of binary
/// data (common practice: git decides "binary" the same way, on its first
/// 8,000 bytes).
pub const BINARY_PROBE: usize = 8000;

/// Whether `bytes` look like binary data rather than text: a NUL byte near
/// the start, unless the file declares UTF-16 by its byte-order mark.
pub fn looks_binary(bytes: &[u8]) -> bool {
    if bytes.starts_with(b"\xFF\xFE") || bytes.starts_with(b"\xFE\xFF") {
        return false;
    }
    bytes[..bytes.len().min(BINARY_PROBE)].contains(&0)
}

/// Extraction settings.
#[derive(Debug, Clone, Copy)]
pub struct ExtractOptions {
    pub pdf_route: pdf::PdfRoute,
}

impl Default for ExtractOptions {
    fn default() -> Self {
        ExtractOptions {
            pdf_route: pdf::default_route(),
        }
    }
}

/// Extract a file whose bytes are already read. A PDF's pages may all be
/// empty (a scan, to be read by OCR); other kinds without text are
/// [`ExtractError::Empty`].
/// `bytes` are the file's contents, already read for hashing (pdftotext
/// still reads `path` itself).
pub fn extract(
    path: &Path,
    kind: Kind,
    bytes: &[u8],
    opts: &ExtractOptions,
) -> Result<Extracted, ExtractError> {
    let mut out = match kind {
        Kind::Pdf => {
            // PDF titles in released records are often tool debris ("Word -
            // memo.docx"), so the title comes from the manifest or the file
            // name instead.
            let (pages, drawings, notes) = pdf_with_fallback(path, bytes, opts.pdf_route)?;
            Extracted {
                pages,
                notes,
                drawings,
                ..Default::default()
            }
        }
        Kind::Text | Kind::Markdown | Kind::Html if looks_binary(bytes) => {
            return Err(ExtractError::Binary);
        }
        Kind::Text | Kind::Markdown => plain::extract(bytes, kind == Kind::Markdown),
        Kind::Html => html::extract(bytes)?,
        Kind::Email => eml::extract(bytes)?,
    };
    for p in &mut out.pages {
        if p.contains('\r') {
            *p = p.replace("\r\n", "\n").replace('\r', "\n");
        }
    }
    // A PDF without text may still be read by OCR; the caller decides.
    if kind != Kind::Pdf && out.pages.iter().all(|p| p.trim().is_empty()) {
        return Err(ExtractError::Empty);
    }
    Ok(out)
}

/// Pages, drawings and notes of a PDF.
type PdfRead = (Vec<String>, Vec<pdf::PageDrawing>, Vec<String>);

/// Read a PDF with `route`; when that reader fails on a file that the
/// parser could open, try the other reader (when installed) and say so.
fn pdf_with_fallback(
    path: &Path,
    bytes: &[u8],
    route: pdf::PdfRoute,
) -> Result<PdfRead, pdf::PdfError> {
    use pdf::{PdfError, PdfRoute, extract_layer as extract_pages};
    match extract_pages(path, bytes, route) {
        // The parser could not load it; pdftotext may still repair it.
        Err(PdfError::Corrupt(first))
            if !pdf::loads(bytes) && pdf::find_on_path("pdftotext").is_some() =>
        {
            match pdf::repaired_pages(path) {
                Ok(pages) => Ok((
                    pages,
                    Vec::new(),
                    vec![format!(
                        "damaged PDF ({first}): read with pdftotext, which repaired it; scanned pages in it, if any, were not read by OCR"
                    )],
                )),
                Err(_) => Err(PdfError::Corrupt(first)),
            }
        }
        Err(PdfError::Corrupt(first)) => {
            let other = match route {
                PdfRoute::Pdftotext => PdfRoute::PureRust,
                PdfRoute::PureRust if pdf::default_route() == PdfRoute::Pdftotext => {
                    PdfRoute::Pdftotext
                }
                PdfRoute::PureRust => return Err(PdfError::Corrupt(first)),
            };
            match extract_pages(path, bytes, other) {
                Ok((pages, drawings)) => Ok((
                    pages,
                    drawings,
                    vec![format!(
                        "read with the other PDF reader ({other:?}) after: {first}"
                    )],
                )),
                Err(_) => Err(PdfError::Corrupt(first)),
            }
        }
        other => other.map(|(p, d)| (p, d, Vec::new())),
    }
}

/// Decode bytes as UTF-8, or as Windows-1252 when they are not valid UTF-8
/// (older records often are). Returns the text and whether the fallback was used.
pub(crate) fn decode_text(bytes: &[u8]) -> (String, bool) {
    // UTF-16 with a byte-order mark, as Windows tools write "Unicode" text.
    let utf16 = |rest: &[u8], le: bool| -> String {
        let units: Vec<u16> = rest
            .chunks_exact(2)
            .map(|c| {
                if le {
                    u16::from_le_bytes([c[0], c[1]])
                } else {
                    u16::from_be_bytes([c[0], c[1]])
                }
            })
            .collect();
        String::from_utf16_lossy(&units)
    };
    if let Some(rest) = bytes.strip_prefix(b"\xFF\xFE") {
        return (utf16(rest, true), false);
    }
    if let Some(rest) = bytes.strip_prefix(b"\xFE\xFF") {
        return (utf16(rest, false), false);
    }
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    match std::str::from_utf8(bytes) {
        Ok(s) => (s.to_string(), false),
        Err(_) => (bytes.iter().map(|&b| cp1252(b)).collect(), true),
    }
}

fn cp1252(b: u8) -> char {
    const HIGH: [char; 32] = [
        '€', '\u{81}', '‚', 'ƒ', '„', '…', '†', '‡', 'ˆ', '‰', 'Š', '‹', 'Œ', '\u{8d}', 'Ž',
        '\u{8f}', '\u{90}', '‘', '’', '“', '”', '•', '–', '—', '˜', '™', 'š', '›', 'œ', '\u{9d}',
        'ž', 'Ÿ',
    ];
    match b {
        0x80..=0x9F => HIGH[(b - 0x80) as usize],
        _ => b as char,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A NUL byte near the start marks binary data (common practice: git's
    /// own test, on the first 8,000 bytes); UTF-16 text with its byte-order
    /// mark is text and is decoded.
    #[test]
    fn binary_bytes_under_a_text_name_are_refused_and_utf16_is_read() {
        let opts = ExtractOptions::default();
        let junk: Vec<u8> = (0..4000u32).map(|i| (i * 7919 % 251) as u8).collect();
        for kind in [Kind::Text, Kind::Markdown, Kind::Html] {
            let e = extract(Path::new("x"), kind, &junk, &opts).unwrap_err();
            assert!(matches!(e, ExtractError::Binary), "{kind:?}: {e}");
        }
        let mut le = vec![0xFF, 0xFE];
        let mut be = vec![0xFE, 0xFF];
        for u in "Pier 3 closes at noon.".encode_utf16() {
            le.extend(u.to_le_bytes());
            be.extend(u.to_be_bytes());
        }
        for bytes in [le, be] {
            let x = extract(Path::new("x.txt"), Kind::Text, &bytes, &opts).unwrap();
            assert_eq!(x.pages, vec!["Pier 3 closes at noon.".to_string()]);
        }
        // A NUL after the probed prefix is not looked for.
        let mut late = b"A plain note. ".repeat(700);
        late.push(0);
        assert!(!looks_binary(&late));
    }

    /// A one-page PDF with a classic cross-reference table, its
    /// `startxref` pointing `shift` bytes past the table (0: intact).
    fn classic_pdf(sentence: &str, shift: usize) -> Vec<u8> {
        let content = format!("BT /F1 12 Tf 72 700 Td ({sentence}) Tj ET");
        let objs = [
            "<< /Type /Catalog /Pages 2 0 R >>".to_string(),
            "<< /Type /Pages /Kids [3 0 R] /Count 1 >>".into(),
            "<< /Type /Page /Parent 2 0 R /MediaBox [0 0 612 792] /Contents 4 0 R \
             /Resources << /Font << /F1 5 0 R >> >> >>"
                .into(),
            format!(
                "<< /Length {} >>\nstream\n{content}\nendstream",
                content.len()
            ),
            "<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica >>".into(),
        ];
        let mut out = String::from("%PDF-1.4\n");
        let mut offsets = Vec::new();
        for (i, o) in objs.iter().enumerate() {
            offsets.push(out.len());
            out.push_str(&format!("{} 0 obj\n{o}\nendobj\n", i + 1));
        }
        let xref = out.len();
        out.push_str("xref\n0 6\n0000000000 65535 f \n");
        for o in offsets {
            out.push_str(&format!("{o:010} 00000 n \n"));
        }
        out.push_str(&format!(
            "trailer\n<< /Size 6 /Root 1 0 R >>\nstartxref\n{}\n%%EOF\n",
            xref + shift
        ));
        out.into_bytes()
    }

    /// A PDF whose cross-reference pointer is wrong (a common fault of
    /// damaged downloads) is read by pdftotext, which rebuilds the table,
    /// and the file says so; the built-in parser alone refuses it.
    #[test]
    fn a_damaged_cross_reference_is_repaired_by_pdftotext() {
        let dir = tempfile::tempdir().unwrap();
        let sentence = "The quay gate was repaired in May.";
        let intact = dir.path().join("intact.pdf");
        std::fs::write(&intact, classic_pdf(sentence, 0)).unwrap();
        let damaged = dir.path().join("damaged.pdf");
        let bytes = classic_pdf(sentence, 7);
        std::fs::write(&damaged, &bytes).unwrap();
        assert!(pdf::loads(&std::fs::read(&intact).unwrap()));
        assert!(
            !pdf::loads(&bytes),
            "the parser should refuse the damaged file"
        );
        let opts = ExtractOptions {
            pdf_route: pdf::PdfRoute::PureRust,
        };
        let read = extract(&damaged, Kind::Pdf, &bytes, &opts);
        if pdf::find_on_path("pdftotext").is_none() {
            assert!(
                std::env::var("CI").as_deref() != Ok("true"),
                "pdftotext (poppler-utils) is required under CI=true"
            );
            assert!(matches!(
                read,
                Err(ExtractError::Pdf(pdf::PdfError::Corrupt(_)))
            ));
            return;
        }
        let x = read.unwrap();
        assert_eq!(x.pages.len(), 1);
        assert!(x.pages[0].contains(sentence), "{:?}", x.pages);
        assert!(
            x.notes.iter().any(|n| n.contains("repaired")),
            "{:?}",
            x.notes
        );
        assert!(x.drawings.is_empty());
    }

    #[test]
    fn kinds_by_extension() {
        let cases = [
            ("a.PDF", Some(Kind::Pdf)),
            ("a.txt", Some(Kind::Text)),
            ("a.md", Some(Kind::Markdown)),
            ("a.htm", Some(Kind::Html)),
            ("a.eml", Some(Kind::Email)),
            ("a.docx", None),
            ("noext", None),
        ];
        for (p, want) in cases {
            assert_eq!(Kind::of(Path::new(p)), want, "{p}");
        }
    }

    /// A page tree without /MediaBox crashes the built-in reader; poppler
    /// reads it, so ingest falls back to it and notes the fact.
    #[test]
    fn a_reader_failure_falls_back_to_the_other_reader() {
        if pdf::default_route() != pdf::PdfRoute::Pdftotext {
            assert!(
                std::env::var("CI").map_or(true, |v| v != "true"),
                "pdftotext is required under CI=true"
            );
            eprintln!("pdftotext not installed; skipped");
            return;
        }
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("nobox.pdf");
        let page = pdf::PdfPage {
            lines: vec!["The ramp was closed on 18 March 2022.".into()],
        };
        pdf::write_text_pdf(&path, "t", &[page]).unwrap();
        pdf::remove_media_box(&path);
        let opts = ExtractOptions {
            pdf_route: pdf::PdfRoute::PureRust,
        };
        let bytes = std::fs::read(&path).unwrap();
        let x = extract(&path, Kind::Pdf, &bytes, &opts).unwrap();
        assert!(x.pages[0].contains("The ramp was closed on 18 March 2022."));
        assert!(x.notes[0].contains("other PDF reader"), "{:?}", x.notes);
    }

    #[test]
    fn windows_1252_fallback() {
        // Windows-1252 code page table (Unicode's published mapping file
        // CP1252.TXT): 0x93/0x94 are curly double quotes, 0xE9 is é.
        let (s, fell_back) = decode_text(b"\x93caf\xe9\x94");
        assert!(fell_back);
        assert_eq!(s, "\u{201C}café\u{201D}");
        assert_eq!(decode_text("é".as_bytes()), ("é".to_string(), false));
    }
}
