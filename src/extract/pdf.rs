//! PDF writing and page-by-page text extraction for onrecord.
//!
//! What it is for:
//! - writing plain-text records out as PDFs that carry a real, searchable text layer
//!   ([`write_text_pdf`]), plus two small fixtures used by tests (an image-only scan and a
//!   password-protected file);
//! - reading a PDF back as one `String` per page ([`extract_pages`]), either through poppler's
//!   `pdftotext` (when installed) or through the pure-Rust `pdf-extract` crate, with the same
//!   page semantics, the same up-front checks (encrypted / corrupt / no pages, decided by
//!   `lopdf`) and the same post-processing on both routes.
//!
//! What it must not do:
//! - no network access of any kind; the only external process it may start is `pdftotext`;
//! - no knowledge of the record store: it takes paths and text and returns text or a
//!   [`PdfError`]; naming, storage, indexing, hyphenation repair and whitespace folding belong
//!   to the caller;
//! - no panics escaping to the caller on hostile input (panics inside the PDF libraries are
//!   caught and reported as [`PdfError::Corrupt`]; this relies on the default `panic = "unwind"`).

use std::io::Write as _;
use std::panic::{self, AssertUnwindSafe};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::{Arc, Mutex};

use lopdf::{Dictionary, Document, Object, ObjectId, Stream, StringFormat, dictionary};

/// One page of text to write: each entry becomes one PDF text line, top to bottom.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct PdfPage {
    /// The lines of the page, without line terminators.
    pub lines: Vec<String>,
}

/// The ways a PDF can fail to be written or read.
#[derive(Debug, thiserror::Error)]
pub enum PdfError {
    /// The file has a /Encrypt dictionary and the empty user password does not open it.
    #[error("the PDF is encrypted and needs a password")]
    Encrypted,
    /// The file cannot be parsed as a PDF (truncated, not a PDF, or the reader gave up).
    #[error("the file is not a readable PDF: {0}")]
    Corrupt(String),
    /// The file parses but its page tree holds no page.
    #[error("the PDF has no pages")]
    NoPages,
    /// Every page is empty or whitespace only.
    #[error("the PDF has no text layer on any of its {pages} pages (image-only scan?)")]
    NoText {
        /// Number of pages in the document.
        pages: usize,
    },
    /// The input could not be laid out or serialised as a PDF.
    #[error("could not write the PDF: {0}")]
    Write(String),
    /// A file-system or process error.
    #[error("{0}")]
    Io(#[from] std::io::Error),
}

/// How text is extracted from a PDF.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PdfRoute {
    /// poppler-utils' `pdftotext` binary (needs it on `PATH`).
    Pdftotext,
    /// The pure-Rust `pdf-extract` crate, on top of `lopdf`.
    PureRust,
}

// ---------------------------------------------------------------------------------------------
// Layout constants
// ---------------------------------------------------------------------------------------------

/// Most lines that fit on one page.
pub const MAX_LINES_PER_PAGE: usize = 62;
/// Most characters that fit on one line.
pub const MAX_CHARS_PER_LINE: usize = 93;

const PAGE_WIDTH: f64 = 612.0; // US Letter, points
const PAGE_HEIGHT: f64 = 792.0;
const MARGIN: f64 = 54.0;
const FONT_SIZE: f64 = 9.0;
const LEADING: f64 = 11.0;
const FONT_NAME: &str = "F1";

// ---------------------------------------------------------------------------------------------
// Writing
// ---------------------------------------------------------------------------------------------

/// Writes a PDF with a real text layer: Courier 9 pt, WinAnsiEncoding, one input line per PDF text line,
/// one PdfPage per PDF page, US Letter, 54 pt margins, 11 pt leading. Title goes into the Info dictionary.
/// Characters outside WinAnsi are mapped: U+2588 (full block) -> 'X', other unmappable -> '?'.
/// Parentheses and backslashes are escaped. Returns an error if a page has more than 62 lines or a line > 93 chars.
///
/// Line length is counted in Unicode scalar values (each maps to exactly one WinAnsi byte).
/// An empty `pages` slice writes a valid PDF with zero pages. The file is written to a
/// temporary sibling and renamed into place, so a reader never sees a half-written file.
pub fn write_text_pdf(path: &Path, title: &str, pages: &[PdfPage]) -> Result<(), PdfError> {
    for (p, page) in pages.iter().enumerate() {
        if page.lines.len() > MAX_LINES_PER_PAGE {
            return Err(PdfError::Write(format!(
                "page {} has {} lines (at most {MAX_LINES_PER_PAGE})",
                p + 1,
                page.lines.len()
            )));
        }
        for (l, line) in page.lines.iter().enumerate() {
            let n = line.chars().count();
            if n > MAX_CHARS_PER_LINE {
                return Err(PdfError::Write(format!(
                    "page {} line {} has {n} characters (at most {MAX_CHARS_PER_LINE})",
                    p + 1,
                    l + 1
                )));
            }
        }
    }

    let mut doc = Document::with_version("1.4");
    let pages_id = doc.new_object_id();
    let font_id = doc.add_object(dictionary! {
        "Type" => "Font",
        "Subtype" => "Type1",
        "BaseFont" => "Courier",
        "Encoding" => "WinAnsiEncoding",
    });
    let resources_id = doc.add_object(dictionary! {
        "Font" => dictionary! { FONT_NAME => font_id },
        "ProcSet" => vec![Object::Name(b"PDF".to_vec()), Object::Name(b"Text".to_vec())],
    });

    let mut kids = Vec::with_capacity(pages.len());
    for page in pages {
        let content = text_content_stream(&page.lines);
        let content_id = doc.add_object(Stream::new(Dictionary::new(), content));
        let page_id = doc.add_object(dictionary! {
            "Type" => "Page",
            "Parent" => pages_id,
            "Contents" => content_id,
        });
        kids.push(Object::Reference(page_id));
    }
    finish_document(&mut doc, pages_id, resources_id, kids, Some(title));
    save_atomically(&mut doc, path)
}

/// Test fixture: a valid PDF of `n` pages that carry only a drawn image (an inline or XObject gray image), no text operators.
///
/// Each page draws one 16 x 16 8-bit DeviceGray image XObject (a gradient, scaled up) and has no
/// font resource. `n == 0` writes a valid zero-page PDF.
pub fn write_image_only_pdf(path: &Path, n: usize) -> Result<(), PdfError> {
    let mut doc = Document::with_version("1.4");
    let pages_id = doc.new_object_id();
    let side = 16u8;
    let pixels: Vec<u8> = (0..side)
        .flat_map(|y| (0..side).map(move |x| x.wrapping_mul(8).wrapping_add(y.wrapping_mul(7))))
        .collect();
    let image_id = doc.add_object(Stream::new(
        dictionary! {
            "Type" => "XObject",
            "Subtype" => "Image",
            "Width" => i64::from(side),
            "Height" => i64::from(side),
            "ColorSpace" => "DeviceGray",
            "BitsPerComponent" => 8,
        },
        pixels,
    ));
    let resources_id = doc.add_object(dictionary! {
        "XObject" => dictionary! { "Im1" => image_id },
        "ProcSet" => vec![Object::Name(b"PDF".to_vec()), Object::Name(b"ImageB".to_vec())],
    });
    let mut kids = Vec::with_capacity(n);
    for _ in 0..n {
        let content = b"q 400 0 0 400 106 196 cm /Im1 Do Q\n".to_vec();
        let content_id = doc.add_object(Stream::new(Dictionary::new(), content));
        let page_id = doc.add_object(dictionary! {
            "Type" => "Page",
            "Parent" => pages_id,
            "Contents" => content_id,
        });
        kids.push(Object::Reference(page_id));
    }
    finish_document(
        &mut doc,
        pages_id,
        resources_id,
        kids,
        Some("image-only fixture"),
    );
    save_atomically(&mut doc, path)
}

/// Writes a PDF of scanned pages: each page is one 8-bit gray JPEG image
/// (`DCTDecode`, quality 60, as office scanners write them) filling a US
/// Letter page, with no text layer. `raw_data`, when given, replaces the
/// image data of the page with that index (to make a corrupt image for tests).
pub fn write_scanned_pdf(
    path: &Path,
    title: &str,
    pages: &[crate::ocr::image::Gray],
    raw_data: Option<(usize, Vec<u8>)>,
) -> Result<(), PdfError> {
    let mut doc = Document::with_version("1.5");
    let pages_id = doc.new_object_id();
    let resources_id = doc.add_object(dictionary! {
        "ProcSet" => vec![Object::Name(b"PDF".to_vec()), Object::Name(b"ImageB".to_vec())],
    });
    let mut kids = Vec::with_capacity(pages.len());
    for (i, img) in pages.iter().enumerate() {
        let (w, h) = (
            u16::try_from(img.width).map_err(|_| PdfError::Write("page image too wide".into()))?,
            u16::try_from(img.height).map_err(|_| PdfError::Write("page image too tall".into()))?,
        );
        let mut jpeg = Vec::new();
        jpeg_encoder::Encoder::new(&mut jpeg, 60)
            .encode(&img.pixels, w, h, jpeg_encoder::ColorType::Luma)
            .map_err(|e| PdfError::Write(format!("encoding page {}: {e}", i + 1)))?;
        if let Some((n, bytes)) = &raw_data
            && *n == i
        {
            jpeg = bytes.clone();
        }
        let stream = Stream::new(
            dictionary! {
                "Type" => "XObject",
                "Subtype" => "Image",
                "Width" => img.width as i64,
                "Height" => img.height as i64,
                "ColorSpace" => "DeviceGray",
                "BitsPerComponent" => 8,
                "Filter" => "DCTDecode",
            },
            jpeg,
        )
        .with_compression(false);
        let image_id = doc.add_object(stream);
        let content = format!("q {PAGE_WIDTH} 0 0 {PAGE_HEIGHT} 0 0 cm /Im1 Do Q\n").into_bytes();
        let content_id = doc.add_object(Stream::new(Dictionary::new(), content));
        let page_id = doc.add_object(dictionary! {
            "Type" => "Page",
            "Parent" => pages_id,
            "Contents" => content_id,
            "Resources" => dictionary! {
                "XObject" => dictionary! { "Im1" => image_id },
                "ProcSet" => vec![Object::Name(b"PDF".to_vec()), Object::Name(b"ImageB".to_vec())],
            },
        });
        kids.push(Object::Reference(page_id));
    }
    finish_document(&mut doc, pages_id, resources_id, kids, Some(title));
    save_atomically(&mut doc, path)
}

/// Test fixture: a PDF whose trailer has a Standard security handler /Encrypt dictionary (V 1, R 2) whose
/// O/U entries do not authenticate the empty user password, i.e. a reader needs a password to open it.
///
/// The file is genuinely RC4-40 encrypted with user password `onrecord-user` and owner password
/// `onrecord-owner`, so readers that know the password can open it and see one line of text.
pub fn write_password_protected_pdf(path: &Path) -> Result<(), PdfError> {
    use lopdf::encryption::{EncryptionState, EncryptionVersion, Permissions};

    let mut doc = Document::with_version("1.4");
    let pages_id = doc.new_object_id();
    let font_id = doc.add_object(dictionary! {
        "Type" => "Font",
        "Subtype" => "Type1",
        "BaseFont" => "Courier",
        "Encoding" => "WinAnsiEncoding",
    });
    let resources_id = doc.add_object(dictionary! {
        "Font" => dictionary! { FONT_NAME => font_id },
    });
    let content = text_content_stream(&["This record is password protected.".to_string()]);
    let content_id = doc.add_object(Stream::new(Dictionary::new(), content));
    let page_id = doc.add_object(dictionary! {
        "Type" => "Page",
        "Parent" => pages_id,
        "Contents" => content_id,
    });
    finish_document(
        &mut doc,
        pages_id,
        resources_id,
        vec![Object::Reference(page_id)],
        Some("password-protected fixture"),
    );
    // The Standard handler keys the file with the first /ID string.
    let file_id = Object::String(b"onrecord-fixture".to_vec(), StringFormat::Hexadecimal);
    doc.trailer
        .set("ID", Object::Array(vec![file_id.clone(), file_id]));

    let state = EncryptionState::try_from(EncryptionVersion::V1 {
        document: &doc,
        owner_password: "onrecord-owner",
        user_password: "onrecord-user",
        permissions: Permissions::all(),
    })
    .map_err(|e| PdfError::Write(format!("encryption setup failed: {e}")))?;
    doc.encrypt(&state)
        .map_err(|e| PdfError::Write(format!("encryption failed: {e}")))?;
    save_atomically(&mut doc, path)
}

/// Adds the page tree, catalog and Info dictionary.
fn finish_document(
    doc: &mut Document,
    pages_id: ObjectId,
    resources_id: ObjectId,
    kids: Vec<Object>,
    title: Option<&str>,
) {
    let count = kids.len() as i64;
    doc.objects.insert(
        pages_id,
        Object::Dictionary(dictionary! {
            "Type" => "Pages",
            "Kids" => kids,
            "Count" => count,
            "Resources" => resources_id,
            "MediaBox" => vec![0.into(), 0.into(), PAGE_WIDTH.into(), PAGE_HEIGHT.into()],
        }),
    );
    let catalog_id = doc.add_object(dictionary! {
        "Type" => "Catalog",
        "Pages" => pages_id,
    });
    doc.trailer.set("Root", catalog_id);
    let mut info = Dictionary::new();
    if let Some(title) = title {
        info.set("Title", pdf_text_string(title));
    }
    info.set(
        "Producer",
        Object::string_literal("onrecord".as_bytes().to_vec()),
    );
    let info_id = doc.add_object(info);
    doc.trailer.set("Info", info_id);
}

/// Serialises `doc` next to `path` and renames it into place.
fn save_atomically(doc: &mut Document, path: &Path) -> Result<(), PdfError> {
    let mut bytes = Vec::new();
    doc.save_to(&mut bytes)
        .map_err(|e| PdfError::Write(e.to_string()))?;
    let tmp = temp_sibling(path);
    let result = (|| -> std::io::Result<()> {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(&bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result.map_err(PdfError::Io)
}

fn temp_sibling(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out.pdf".to_string());
    path.with_file_name(format!(".{name}.{}.tmp", std::process::id()))
}

/// Builds the content stream for one page of Courier text.
fn text_content_stream(lines: &[String]) -> Vec<u8> {
    let first_baseline = PAGE_HEIGHT - MARGIN - FONT_SIZE;
    let mut out = Vec::with_capacity(64 + lines.iter().map(|l| l.len() + 8).sum::<usize>());
    if lines.is_empty() {
        return out;
    }
    out.extend_from_slice(
        format!("BT\n/{FONT_NAME} {FONT_SIZE} Tf\n{LEADING} TL\n{MARGIN} {first_baseline} Td\n")
            .as_bytes(),
    );
    for (i, line) in lines.iter().enumerate() {
        if i > 0 {
            out.extend_from_slice(b"T*\n");
        }
        out.push(b'(');
        for c in line.chars() {
            let b = winansi_byte(c);
            if matches!(b, b'(' | b')' | b'\\') {
                out.push(b'\\');
            }
            out.push(b);
        }
        out.extend_from_slice(b") Tj\n");
    }
    out.extend_from_slice(b"ET\n");
    out
}

/// Maps a character to its WinAnsiEncoding (Windows-1252) byte: U+2588 -> 'X', unmappable -> '?'.
fn winansi_byte(c: char) -> u8 {
    let u = c as u32;
    match u {
        0x20..=0x7E | 0xA0..=0xFF => u as u8,
        _ => match c {
            '\u{2588}' => b'X',
            '€' => 0x80,
            '‚' => 0x82,
            'ƒ' => 0x83,
            '„' => 0x84,
            '…' => 0x85,
            '†' => 0x86,
            '‡' => 0x87,
            'ˆ' => 0x88,
            '‰' => 0x89,
            'Š' => 0x8A,
            '‹' => 0x8B,
            'Œ' => 0x8C,
            'Ž' => 0x8E,
            '\u{2018}' => 0x91,
            '\u{2019}' => 0x92,
            '\u{201C}' => 0x93,
            '\u{201D}' => 0x94,
            '•' => 0x95,
            '\u{2013}' => 0x96,
            '\u{2014}' => 0x97,
            '˜' => 0x98,
            '™' => 0x99,
            'š' => 0x9A,
            '›' => 0x9B,
            'œ' => 0x9C,
            'ž' => 0x9E,
            'Ÿ' => 0x9F,
            _ => b'?',
        },
    }
}

/// A PDF text string: literal if printable ASCII, else UTF-16BE with a byte-order mark.
fn pdf_text_string(s: &str) -> Object {
    if s.bytes().all(|b| (0x20..0x7F).contains(&b)) {
        Object::String(s.as_bytes().to_vec(), StringFormat::Literal)
    } else {
        let mut bytes = vec![0xFE, 0xFF];
        for unit in s.encode_utf16() {
            bytes.extend_from_slice(&unit.to_be_bytes());
        }
        Object::String(bytes, StringFormat::Hexadecimal)
    }
}

// ---------------------------------------------------------------------------------------------
// Extraction
// ---------------------------------------------------------------------------------------------

/// Pdftotext when the `pdftotext` binary (poppler-utils) is on PATH, else PureRust.
///
/// Looked up afresh on each call (a `PATH` scan, no process is started).
pub fn default_route() -> PdfRoute {
    if find_on_path("pdftotext").is_some() {
        PdfRoute::Pdftotext
    } else {
        PdfRoute::PureRust
    }
}

/// One String per page, in order (1-based page i = index i-1). Empty string for a page with no text.
///
/// Both routes first load the file with `lopdf`, which decides [`PdfError::Encrypted`] (an
/// /Encrypt dictionary the empty password does not open; one it does open is read normally),
/// [`PdfError::Corrupt`] (lopdf cannot parse it) and [`PdfError::NoPages`]. Text then comes
/// from `pdftotext -layout -enc UTF-8 -eol unix` or from `pdf-extract`, page by page.
/// (`-layout` was chosen by measurement: poppler's default reading order splits lines whose
/// words are separated by runs of spaces, as in aligned record fields, into separate blocks and
/// reorders them; `-layout` keeps every source line intact. It does pad with extra spaces, and
/// interleaves side-by-side columns line by line.)
///
/// Post-processing is the same on both routes: `"\r\n"` becomes `"\n"`, trailing spaces and
/// tabs are stripped from each line, line breaks are kept (pdf-extract may add leading blank
/// lines, `-layout` may add leading spaces), and a page holding only whitespace becomes `""`.
/// If every page is empty the result is [`PdfError::NoText`].
pub fn extract_pages(path: &Path, route: PdfRoute) -> Result<Vec<String>, PdfError> {
    extract_pages_read(path, &std::fs::read(path)?, route)
}

/// [`extract_pages`] for a file whose contents `bytes` are already read
/// (pdftotext still reads `path` itself).
pub fn extract_pages_read(
    path: &Path,
    bytes: &[u8],
    route: PdfRoute,
) -> Result<Vec<String>, PdfError> {
    let (pages, drawings) = extract_layer(path, bytes, route)?;
    if pages.iter().all(String::is_empty) {
        return Err(PdfError::NoText {
            pages: pages.len().max(drawings.len()),
        });
    }
    Ok(pages)
}

/// The text layer of every page (empty strings where a page has none, even
/// when every page is empty) and what each page draws, for OCR.
pub fn extract_layer(
    path: &Path,
    bytes: &[u8],
    route: PdfRoute,
) -> Result<(Vec<String>, Vec<PageDrawing>), PdfError> {
    let doc = load_checked(bytes)?;
    let page_count = doc.get_pages().len();
    if page_count == 0 {
        return Err(PdfError::NoPages);
    }
    let drawings = quietly(|| page_drawings(&doc))
        .map_err(|msg| PdfError::Corrupt(stopped("PDF parser", &msg)))?;
    let raw = match route {
        PdfRoute::Pdftotext => {
            drop(doc);
            pdftotext_pages(path, page_count)?
        }
        PdfRoute::PureRust => pure_rust_pages(doc)?,
    };
    let mut pages: Vec<String> = raw.iter().map(|p| normalize_page(p)).collect();
    // pdftotext drops trailing empty pages; keep one entry per page.
    while pages.len() < page_count {
        pages.push(String::new());
    }
    Ok((pages, drawings))
}

/// What OCR needs to know about one page of a PDF.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PageDrawing {
    /// SHA-256 of what the page draws: its content streams and the raw data
    /// of the images and forms they use. Two pages with the same key render
    /// to the same picture, so OCR results are cached by it.
    pub key: String,
    /// Whether the page draws a raster image (an image XObject, directly or
    /// inside a form, or an inline image).
    pub has_image: bool,
    /// The page's size in points (from its MediaBox, inherited if need be).
    pub width_pt: f64,
    pub height_pt: f64,
}

/// [`PageDrawing`] for every page, in page order.
fn page_drawings(doc: &Document) -> Vec<PageDrawing> {
    use sha2::{Digest, Sha256};
    let mut out = Vec::new();
    for (_, page_id) in doc.get_pages() {
        let mut h = Sha256::new();
        let content = doc.get_page_content(page_id).unwrap_or_default();
        let mut has_image = content.windows(4).any(|w| w == b"\nBI " || w == b" BI\n")
            || content.starts_with(b"BI ");
        h.update(&content);
        if let Ok((own, inherited)) = doc.get_page_resources(page_id) {
            let mut dicts: Vec<&Dictionary> = own.into_iter().collect();
            dicts.extend(
                inherited
                    .iter()
                    .filter_map(|id| doc.get_dictionary(*id).ok()),
            );
            for res in dicts {
                hash_xobjects(doc, res, &mut h, &mut has_image, 0);
            }
        }
        let (width_pt, height_pt) = media_box(doc, page_id).unwrap_or((PAGE_WIDTH, PAGE_HEIGHT));
        let digest = h.finalize();
        out.push(PageDrawing {
            key: digest.iter().map(|b| format!("{b:02x}")).collect(),
            has_image,
            width_pt,
            height_pt,
        });
    }
    out
}

/// Feeds the XObjects of a resource dictionary into `h` (by name, raw data),
/// descending into forms up to three levels.
fn hash_xobjects(
    doc: &Document,
    resources: &Dictionary,
    h: &mut sha2::Sha256,
    has_image: &mut bool,
    depth: usize,
) {
    use sha2::Digest;
    let Ok(xobjects) = resources
        .get(b"XObject")
        .and_then(|o| doc.dereference(o))
        .and_then(|(_, o)| o.as_dict())
    else {
        return;
    };
    let mut names: Vec<&Vec<u8>> = xobjects.iter().map(|(k, _)| k).collect();
    names.sort();
    for name in names {
        let Ok(stream) = xobjects
            .get(name)
            .and_then(|o| doc.dereference(o))
            .and_then(|(_, o)| o.as_stream())
        else {
            continue;
        };
        h.update(name);
        h.update(&stream.content);
        match stream.dict.get(b"Subtype").and_then(Object::as_name) {
            Ok(b"Image") => *has_image = true,
            Ok(b"Form") if depth < 3 => {
                if let Ok((_, Object::Dictionary(res))) = stream
                    .dict
                    .get(b"Resources")
                    .and_then(|o| doc.dereference(o))
                {
                    hash_xobjects(doc, res, h, has_image, depth + 1);
                }
            }
            _ => {}
        }
    }
}

/// A page's MediaBox width and height, looked up the page tree if need be.
fn media_box(doc: &Document, page_id: ObjectId) -> Option<(f64, f64)> {
    let mut node = doc.get_dictionary(page_id).ok()?;
    for _ in 0..32 {
        if let Ok(b) = node
            .get(b"MediaBox")
            .and_then(|o| doc.dereference(o))
            .and_then(|(_, o)| o.as_array())
        {
            let n: Vec<f64> = b
                .iter()
                .filter_map(|o| {
                    o.as_float()
                        .ok()
                        .map(f64::from)
                        .or(o.as_i64().ok().map(|i| i as f64))
                })
                .collect();
            if n.len() == 4 {
                return Some(((n[2] - n[0]).abs(), (n[3] - n[1]).abs()));
            }
            return None;
        }
        let parent = node.get(b"Parent").and_then(Object::as_reference).ok()?;
        node = doc.get_dictionary(parent).ok()?;
    }
    None
}

/// Whether the built-in parser loads these bytes at all (decrypted or not).
pub fn loads(bytes: &[u8]) -> bool {
    matches!(load_checked(bytes), Ok(_) | Err(PdfError::Encrypted))
}

/// Loads with lopdf (inside the panic guard) and applies the encryption rule.
fn load_checked(bytes: &[u8]) -> Result<Document, PdfError> {
    if bytes.is_empty() {
        return Err(PdfError::Corrupt("the file is empty".into()));
    }
    let loaded = quietly(|| Document::load_mem(bytes))
        .map_err(|msg| PdfError::Corrupt(stopped("PDF parser", &msg)))?;
    let mut doc = loaded.map_err(|e| PdfError::Corrupt(short(&e.to_string())))?;
    // lopdf 0.42 decrypts on load when the empty user password authenticates and then removes
    // /Encrypt from the trailer; /Encrypt still being there means that password failed.
    if doc.is_encrypted() {
        match quietly(|| doc.decrypt("")) {
            Ok(Ok(())) => {}
            _ => return Err(PdfError::Encrypted),
        }
    }
    Ok(doc)
}

/// A finished child: exit status, stdout, stderr.
pub(crate) type Finished = (std::process::ExitStatus, Vec<u8>, Vec<u8>);

/// How a watched child ended.
pub(crate) enum Ended {
    Finished(Finished),
    /// Killed when its time ran out.
    TimedOut,
    /// Killed when its resident memory passed the cap (bytes seen).
    OverMemory(u64),
}

/// Runs `cmd` to completion, or kills it after `limit`. `input`, when given,
/// is written to the child's standard input. Returns the exit status,
/// stdout and stderr, or `None` on time-out.
pub(crate) fn output_within(
    cmd: Command,
    input: Option<Vec<u8>>,
    limit: std::time::Duration,
) -> std::io::Result<Option<Finished>> {
    Ok(match output_watched(cmd, input, limit, None)? {
        Ended::Finished(f) => Some(f),
        _ => None,
    })
}

/// [`output_within`], and on Linux also kills the child once its resident
/// memory passes `rss_cap` bytes (read from /proc every 10 ms).
pub(crate) fn output_watched(
    mut cmd: Command,
    input: Option<Vec<u8>>,
    limit: std::time::Duration,
    rss_cap: Option<u64>,
) -> std::io::Result<Ended> {
    use std::io::Read;
    if input.is_some() {
        cmd.stdin(std::process::Stdio::piped());
    }
    let mut child = cmd
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()?;
    let writer = match (input, child.stdin.take()) {
        (Some(bytes), Some(mut stdin)) => Some(std::thread::spawn(move || {
            // A child that exits early closes the pipe; that is its answer.
            let _ = stdin.write_all(&bytes);
        })),
        _ => None,
    };
    let mut out = child.stdout.take().expect("piped stdout");
    let mut err = child.stderr.take().expect("piped stderr");
    let out_reader = std::thread::spawn(move || {
        let mut v = Vec::new();
        let _ = out.read_to_end(&mut v);
        v
    });
    let err_reader = std::thread::spawn(move || {
        let mut v = Vec::new();
        let _ = err.read_to_end(&mut v);
        v
    });
    let deadline = std::time::Instant::now() + limit;
    let status = loop {
        if let Some(status) = child.try_wait()? {
            break Ok(status);
        }
        if std::time::Instant::now() >= deadline {
            let _ = child.kill();
            let _ = child.wait();
            break Err(Ended::TimedOut);
        }
        if let Some(cap) = rss_cap
            && let Some(rss) = resident_bytes(child.id()).filter(|r| *r > cap)
        {
            let _ = child.kill();
            let _ = child.wait();
            break Err(Ended::OverMemory(rss));
        }
        std::thread::sleep(std::time::Duration::from_millis(10));
    };
    if let Some(w) = writer {
        let _ = w.join();
    }
    let stdout = out_reader.join().unwrap_or_default();
    let stderr = err_reader.join().unwrap_or_default();
    Ok(match status {
        Ok(st) => Ended::Finished((st, stdout, stderr)),
        Err(e) => e,
    })
}

/// A process's resident memory in bytes (Linux; `None` elsewhere or when
/// it has gone).
fn resident_bytes(pid: u32) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let line = status.lines().find(|l| l.starts_with("VmRSS:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// How long pdftotext may take on a file of `pages` pages before the file is
/// given up on (a hostile file must not stall an ingest).
fn pdftotext_limit(pages: usize) -> std::time::Duration {
    std::time::Duration::from_secs(60 + 2 * pages as u64)
}

fn pdftotext_pages(path: &Path, pages_hint: usize) -> Result<Vec<String>, PdfError> {
    // A relative path starting with '-' would be read as an option.
    let arg: PathBuf = if path.is_relative() && path.to_string_lossy().starts_with('-') {
        Path::new(".").join(path)
    } else {
        path.to_path_buf()
    };
    let mut cmd = Command::new("pdftotext");
    cmd.args(["-layout", "-enc", "UTF-8", "-eol", "unix"])
        .arg(&arg)
        .arg("-")
        .stdin(std::process::Stdio::null());
    let limit = pdftotext_limit(pages_hint);
    let Some((status, stdout, stderr)) = output_within(cmd, None, limit)? else {
        return Err(PdfError::Corrupt(format!(
            "pdftotext did not finish within {} s; the file was given up on",
            limit.as_secs()
        )));
    };
    let stderr = String::from_utf8_lossy(&stderr);
    if !status.success() {
        if stderr.to_ascii_lowercase().contains("password") {
            return Err(PdfError::Encrypted);
        }
        let first = stderr
            .lines()
            .map(str::trim)
            .find(|l| !l.is_empty())
            .unwrap_or("no message");
        return Err(PdfError::Corrupt(short(&format!(
            "pdftotext failed ({status}): {first}"
        ))));
    }
    let text = String::from_utf8_lossy(&stdout);
    let mut pages: Vec<String> = text.split('\x0c').map(str::to_string).collect();
    if pages.last().is_some_and(|p| p.is_empty()) {
        pages.pop();
    }
    Ok(pages)
}

/// The text of a PDF whose structure the built-in parser cannot load (a
/// truncated download, a damaged cross-reference table), read by
/// pdftotext, which rebuilds the structure from the objects it finds.
/// Without the parser nothing is known of what the pages draw, so no page
/// of such a file is sent to OCR.
pub fn repaired_pages(path: &Path) -> Result<Vec<String>, PdfError> {
    let pages: Vec<String> = pdftotext_pages(path, 0)?
        .iter()
        .map(|p| normalize_page(p))
        .collect();
    if pages.is_empty() {
        return Err(PdfError::NoPages);
    }
    if pages.iter().all(|p| p.trim().is_empty()) {
        return Err(PdfError::NoText { pages: pages.len() });
    }
    Ok(pages)
}

/// Extracts each page with pdf-extract's per-page output device.
fn pure_rust_pages(mut doc: Document) -> Result<Vec<String>, PdfError> {
    blank_image_xobjects(&mut doc);
    let page_numbers: Vec<u32> = doc.get_pages().keys().copied().collect();
    let doc = &doc;
    let result = quietly(|| -> Result<Vec<String>, PdfError> {
        let mut pages = Vec::with_capacity(page_numbers.len());
        for n in page_numbers {
            let mut s = String::new();
            {
                let mut out = pdf_extract::PlainTextOutput::new(&mut s);
                pdf_extract::output_doc_page(doc, &mut out, n)
                    .map_err(|e| PdfError::Corrupt(short(&format!("page {n}: {e}"))))?;
            }
            pages.push(s);
        }
        Ok(pages)
    });
    match result {
        Ok(r) => r,
        Err(msg) => Err(PdfError::Corrupt(stopped("text extractor", &msg))),
    }
}

/// pdf-extract 0.12.1 runs `Do` on every XObject as if it were a content stream, so the bytes
/// of a scanned image get parsed as operators (and `Content::decode(..).unwrap()` can panic).
/// Images carry no text, so their data is emptied before extraction.
fn blank_image_xobjects(doc: &mut Document) {
    for obj in doc.objects.values_mut() {
        if let Object::Stream(stream) = obj {
            let is_image = stream
                .dict
                .get(b"Subtype")
                .and_then(Object::as_name)
                .is_ok_and(|n| n == b"Image");
            if is_image {
                stream.dict.remove(b"Filter");
                stream.dict.remove(b"DecodeParms");
                stream.set_content(Vec::new());
            }
        }
    }
}

/// Shared post-processing: CRLF -> LF, trailing blanks stripped per line, blank page -> "".
fn normalize_page(raw: &str) -> String {
    let text = raw.replace("\r\n", "\n");
    let mut out = String::with_capacity(text.len());
    for (i, line) in text.split('\n').enumerate() {
        if i > 0 {
            out.push('\n');
        }
        out.push_str(line.trim_end_matches([' ', '\t']));
    }
    if out.trim().is_empty() {
        String::new()
    } else {
        out
    }
}

/// Keeps reasons short enough for a one-line error.
/// A readable diagnostic for a PDF library that stopped on an internal
/// error: its message is often a bare font or object name with broken
/// bytes in it ("F1\u{FFFD}9"), so it is cleaned and set in quotes after a
/// sentence that says what happened.
fn stopped(what: &str, msg: &str) -> String {
    let clean: String = msg
        .chars()
        .map(|c| {
            if c == '\u{FFFD}' || c.is_control() {
                '?'
            } else {
                c
            }
        })
        .collect();
    short(&format!(
        "the built-in {what} stopped on an internal error while reading this file (\u{201C}{}\u{201D}); the file may be damaged or use a font it cannot read",
        clean.trim()
    ))
}

fn short(s: &str) -> String {
    const MAX: usize = 160;
    let s = s.trim();
    if s.chars().count() <= MAX {
        s.to_string()
    } else {
        let mut t: String = s.chars().take(MAX).collect();
        t.push('…');
        t
    }
}

pub fn find_on_path(name: &str) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|dir| dir.join(name))
        .find(|candidate| is_executable(candidate))
}

#[cfg(unix)]
fn is_executable(p: &Path) -> bool {
    use std::os::unix::fs::PermissionsExt;
    std::fs::metadata(p).is_ok_and(|m| m.is_file() && m.permissions().mode() & 0o111 != 0)
}

#[cfg(not(unix))]
fn is_executable(p: &Path) -> bool {
    p.is_file() || p.with_extension("exe").is_file()
}

type PanicHook = Box<dyn Fn(&panic::PanicHookInfo<'_>) + Sync + Send + 'static>;

/// Serialises hook swaps so that two concurrent swaps cannot leave the silent hook installed.
static HOOK_SWAP: Mutex<()> = Mutex::new(());

thread_local! {
    static SILENCED: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Runs `f`, catching any panic and returning its message instead. While `f` runs, a panic
/// hook is swapped in that stays silent for this thread and forwards other threads' panics to
/// the previous hook; the previous hook is restored afterwards.
fn quietly<T>(f: impl FnOnce() -> T) -> Result<T, String> {
    let guard = HOOK_SWAP.lock().unwrap_or_else(|e| e.into_inner());
    let previous: Arc<PanicHook> = Arc::new(panic::take_hook());
    let forward = Arc::clone(&previous);
    panic::set_hook(Box::new(move |info| {
        if !SILENCED.with(|s| s.get()) {
            forward(info);
        }
    }));
    SILENCED.with(|s| s.set(true));
    let result = panic::catch_unwind(AssertUnwindSafe(f));
    SILENCED.with(|s| s.set(false));
    drop(panic::take_hook()); // drops `forward`
    match Arc::try_unwrap(previous) {
        Ok(hook) => panic::set_hook(hook),
        Err(shared) => panic::set_hook(Box::new(move |info| shared(info))),
    }
    drop(guard);
    result.map_err(|payload| {
        payload
            .downcast_ref::<&str>()
            .map(|s| (*s).to_string())
            .or_else(|| payload.downcast_ref::<String>().cloned())
            .map(|s| short(&s))
            .unwrap_or_else(|| "unknown panic".to_string())
    })
}

/// Test fixture: drop the page tree's /MediaBox from a PDF, which the
/// built-in reader cannot handle and poppler reads as US Letter.
#[cfg(test)]
pub(crate) fn remove_media_box(path: &Path) {
    let mut doc = Document::load(path).unwrap();
    let pages_id = doc
        .catalog()
        .unwrap()
        .get(b"Pages")
        .unwrap()
        .as_reference()
        .unwrap();
    doc.get_dictionary_mut(pages_id)
        .unwrap()
        .remove(b"MediaBox");
    doc.save(path).unwrap();
}

#[cfg(test)]
mod tests {
    use super::*;

    fn collapse(s: &str) -> String {
        s.split_whitespace().collect::<Vec<_>>().join(" ")
    }

    fn sample_pages() -> Vec<PdfPage> {
        let p = |v: &[&str]| PdfPage {
            lines: v.iter().map(|s| s.to_string()).collect(),
        };
        vec![
            p(&[
                "Procès-verbal de la séance du 3 mars — à huis clos",
                "Le maître d’œuvre a reçu « l’avis » du comité: déjà vu, voilà.",
                "“Quoted” and ‘single’ – en dash — em dash; cost $1,250.00 § 12(b)",
                "Path C:\\records\\2024 (draft) \\ back\\slash (nested (parens))",
            ]),
            p(&[
                "Page two: façade, garçon, reçu, ça va.",
                "",
                "After an empty line: élève, très, où, là-bas.",
            ]),
            p(&["Third page § 7 — final line (end) \\ done $."]),
        ]
    }

    fn round_trip(route: PdfRoute) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("round.pdf");
        let pages = sample_pages();
        write_text_pdf(&path, "Séance — test", &pages).unwrap();
        let got = extract_pages(&path, route).unwrap();
        assert_eq!(got.len(), pages.len(), "page count via {route:?}: {got:?}");
        for (i, (page, text)) in pages.iter().zip(&got).enumerate() {
            assert_eq!(
                collapse(text),
                collapse(&page.lines.join(" ")),
                "page {} via {route:?}",
                i + 1
            );
            assert!(!text.contains('\r'));
            assert!(text.lines().all(|l| !l.ends_with(' ')));
        }
    }

    fn pdftotext_present_or_skip() -> bool {
        if find_on_path("pdftotext").is_some() {
            return true;
        }
        if std::env::var("CI").is_ok_and(|v| v == "true") {
            panic!("pdftotext not installed but CI=true: install poppler-utils");
        }
        println!("pdftotext not installed; skipped");
        false
    }

    #[test]
    fn round_trip_pure_rust() {
        round_trip(PdfRoute::PureRust);
    }

    #[test]
    fn round_trip_pdftotext() {
        if !pdftotext_present_or_skip() {
            return;
        }
        assert_eq!(default_route(), PdfRoute::Pdftotext);
        round_trip(PdfRoute::Pdftotext);
    }

    fn routes() -> Vec<PdfRoute> {
        let mut r = vec![PdfRoute::PureRust];
        if find_on_path("pdftotext").is_some() {
            r.push(PdfRoute::Pdftotext);
        }
        r
    }

    #[test]
    fn unmappable_characters_are_replaced() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("map.pdf");
        let pages = vec![PdfPage {
            lines: vec!["name: \u{2588}\u{2588}\u{2588} 日本 ✓ end".to_string()],
        }];
        write_text_pdf(&path, "map", &pages).unwrap();
        for route in routes() {
            let got = extract_pages(&path, route).unwrap();
            assert_eq!(collapse(&got[0]), "name: XXX ?? ? end", "{route:?}");
        }
    }

    #[test]
    fn limits_are_enforced() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("limits.pdf");
        let full = PdfPage {
            lines: vec!["é".repeat(MAX_CHARS_PER_LINE); MAX_LINES_PER_PAGE],
        };
        write_text_pdf(&path, "full", std::slice::from_ref(&full)).unwrap();
        for route in routes() {
            let got = extract_pages(&path, route).unwrap();
            assert_eq!(got.len(), 1);
            let lines: Vec<&str> = got[0].lines().filter(|l| !l.is_empty()).collect();
            assert_eq!(lines.len(), MAX_LINES_PER_PAGE, "{route:?}");
            assert!(lines.iter().all(|l| l.trim() == full.lines[0]), "{route:?}");
        }
        let too_many = PdfPage {
            lines: vec!["x".into(); MAX_LINES_PER_PAGE + 1],
        };
        assert!(matches!(
            write_text_pdf(&path, "t", &[too_many]),
            Err(PdfError::Write(_))
        ));
        let too_long = PdfPage {
            lines: vec!["x".repeat(MAX_CHARS_PER_LINE + 1)],
        };
        assert!(matches!(
            write_text_pdf(&path, "t", &[too_long]),
            Err(PdfError::Write(_))
        ));
    }

    #[test]
    fn title_goes_into_info() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("title.pdf");
        write_text_pdf(&path, "Séance (1)", &sample_pages()).unwrap();
        let doc = Document::load(&path).unwrap();
        let info_id = doc.trailer.get(b"Info").unwrap().as_reference().unwrap();
        let info = doc.get_dictionary(info_id).unwrap();
        let title = info.get(b"Title").unwrap().as_str().unwrap();
        let units: Vec<u16> = title[2..]
            .chunks(2)
            .map(|c| u16::from_be_bytes([c[0], c[1]]))
            .collect();
        assert_eq!(String::from_utf16(&units).unwrap(), "Séance (1)");
    }

    #[test]
    fn image_only_is_no_text() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("scan.pdf");
        write_image_only_pdf(&path, 3).unwrap();
        for route in routes() {
            match extract_pages(&path, route) {
                Err(PdfError::NoText { pages: 3 }) => {}
                other => panic!("{route:?}: expected NoText {{ pages: 3 }}, got {other:?}"),
            }
        }
    }

    /// Image bytes that start like an inline image make pdf-extract 0.12.1 panic when it runs
    /// `Do` on the image as a content stream; images are blanked first, so this is NoText.
    #[test]
    fn scan_whose_bytes_look_like_operators_is_no_text() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("scan.pdf");
        write_image_only_pdf(&path, 2).unwrap();
        let mut doc = Document::load(&path).unwrap();
        for obj in doc.objects.values_mut() {
            if let Object::Stream(s) = obj
                && s.dict
                    .get(b"Subtype")
                    .is_ok_and(|n| n.as_name().is_ok_and(|n| n == b"Image"))
            {
                let mut data = b"BI /(".to_vec();
                data.resize(256, 0xAB);
                s.set_content(data);
            }
        }
        doc.save(&path).unwrap();
        for route in routes() {
            assert!(
                matches!(
                    extract_pages(&path, route),
                    Err(PdfError::NoText { pages: 2 })
                ),
                "{route:?}"
            );
        }
    }

    /// A child that outlives its limit is killed and reported as a time-out;
    /// one that finishes returns its output.
    #[test]
    fn slow_child_processes_are_stopped() {
        let mut slow = Command::new("sleep");
        slow.arg("5");
        let t = std::time::Instant::now();
        assert!(
            output_within(slow, None, std::time::Duration::from_millis(100))
                .unwrap()
                .is_none()
        );
        assert!(t.elapsed() < std::time::Duration::from_secs(4));
        let mut quick = Command::new("echo");
        quick.arg("done");
        let (status, out, _) = output_within(quick, None, std::time::Duration::from_secs(10))
            .unwrap()
            .unwrap();
        assert!(status.success());
        assert_eq!(out, b"done\n");
    }

    /// Issue 26, item 10: a library's panic message with broken bytes in
    /// it ("F1\u{FFFD}9") is cleaned and explained, not printed raw.
    #[test]
    fn an_internal_error_reads_as_a_sentence() {
        let m = stopped("text extractor", "F1\u{FFFD}9\u{7}");
        assert!(
            !m.contains('\u{FFFD}') && !m.chars().any(char::is_control),
            "{m}"
        );
        assert!(
            m.starts_with("the built-in text extractor stopped on an internal error")
                && m.contains("\u{201C}F1?9?\u{201D}"),
            "{m}"
        );
    }

    /// A page tree without /MediaBox makes pdf-extract panic (`expect("MediaBox")`): the panic
    /// is caught, silenced and reported as Corrupt. (poppler assumes Letter and reads it.)
    #[test]
    fn extractor_panic_is_corrupt() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("nobox.pdf");
        write_text_pdf(&path, "t", &sample_pages()).unwrap();
        remove_media_box(&path);
        match extract_pages(&path, PdfRoute::PureRust) {
            Err(PdfError::Corrupt(reason)) => assert!(
                reason.contains("stopped on an internal error") && reason.contains("MediaBox"),
                "{reason}"
            ),
            other => panic!("expected Corrupt, got {other:?}"),
        }
        if routes().contains(&PdfRoute::Pdftotext) {
            assert_eq!(extract_pages(&path, PdfRoute::Pdftotext).unwrap().len(), 3);
        }
    }

    #[test]
    fn zero_pages_is_no_pages() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("empty.pdf");
        write_text_pdf(&path, "nothing", &[]).unwrap();
        for route in routes() {
            assert!(
                matches!(extract_pages(&path, route), Err(PdfError::NoPages)),
                "{route:?}"
            );
        }
    }

    #[test]
    fn blank_page_among_text_pages_is_empty_string() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("blank.pdf");
        let pages = vec![
            PdfPage {
                lines: vec!["first".into()],
            },
            PdfPage {
                lines: vec!["   ".into()],
            },
            PdfPage {
                lines: vec!["third".into()],
            },
        ];
        write_text_pdf(&path, "blank", &pages).unwrap();
        for route in routes() {
            let got = extract_pages(&path, route).unwrap();
            assert_eq!(got.len(), 3, "{route:?}");
            assert_eq!(got[1], "", "{route:?}");
            assert_eq!(got[0].trim(), "first", "{route:?}");
            assert_eq!(got[2].trim(), "third", "{route:?}");
        }
    }

    #[test]
    fn password_protected_is_encrypted() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("locked.pdf");
        write_password_protected_pdf(&path).unwrap();
        let doc = Document::load(&path).unwrap();
        let enc = doc.get_encrypted().unwrap();
        assert_eq!(enc.get(b"V").unwrap().as_i64().unwrap(), 1);
        assert_eq!(enc.get(b"R").unwrap().as_i64().unwrap(), 2);
        assert_eq!(enc.get(b"Filter").unwrap().as_name().unwrap(), b"Standard");
        assert!(doc.authenticate_password("").is_err());
        assert!(doc.authenticate_password("onrecord-user").is_ok());
        for route in [PdfRoute::PureRust, PdfRoute::Pdftotext] {
            assert!(
                matches!(extract_pages(&path, route), Err(PdfError::Encrypted)),
                "{route:?}"
            );
        }
    }

    #[test]
    fn empty_password_encryption_is_read_normally() {
        use lopdf::encryption::{EncryptionState, EncryptionVersion, Permissions};
        let dir = tempfile::tempdir().unwrap();
        let plain = dir.path().join("plain.pdf");
        write_text_pdf(&plain, "open", &sample_pages()).unwrap();
        let mut doc = Document::load(&plain).unwrap();
        let id = Object::String(b"0123456789abcdef".to_vec(), StringFormat::Hexadecimal);
        doc.trailer.set("ID", Object::Array(vec![id.clone(), id]));
        let state = EncryptionState::try_from(EncryptionVersion::V1 {
            document: &doc,
            owner_password: "owner",
            user_password: "",
            permissions: Permissions::all(),
        })
        .unwrap();
        doc.encrypt(&state).unwrap();
        let path = dir.path().join("open.pdf");
        doc.save(&path).unwrap();
        for route in routes() {
            let got = extract_pages(&path, route).unwrap();
            assert_eq!(got.len(), 3, "{route:?}");
            assert!(collapse(&got[0]).starts_with("Procès-verbal"), "{route:?}");
        }
    }

    fn assert_corrupt(path: &Path) {
        // The Pdftotext route is listed even when the binary is absent: the lopdf check
        // runs first and must decide.
        for route in [PdfRoute::PureRust, PdfRoute::Pdftotext] {
            match extract_pages(path, route) {
                Err(PdfError::Corrupt(reason)) => {
                    assert!(!reason.is_empty() && reason.len() < 200, "{reason}")
                }
                other => panic!("{route:?}: expected Corrupt, got {other:?}"),
            }
        }
    }

    #[test]
    fn truncated_file_is_corrupt() {
        let dir = tempfile::tempdir().unwrap();
        let good = dir.path().join("good.pdf");
        write_text_pdf(&good, "t", &sample_pages()).unwrap();
        let bytes = std::fs::read(&good).unwrap();
        for cut in [bytes.len() / 2, bytes.len() - 40, 20] {
            let path = dir.path().join(format!("cut{cut}.pdf"));
            std::fs::write(&path, &bytes[..cut]).unwrap();
            assert_corrupt(&path);
        }
    }

    #[test]
    fn random_bytes_are_corrupt() {
        let dir = tempfile::tempdir().unwrap();
        let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
        let bytes: Vec<u8> = (0..4096)
            .map(|_| {
                x ^= x << 13;
                x ^= x >> 7;
                x ^= x << 17;
                (x >> 24) as u8
            })
            .collect();
        let path = dir.path().join("random.pdf");
        std::fs::write(&path, &bytes).unwrap();
        assert_corrupt(&path);
        let mut with_header = b"%PDF-1.4\n".to_vec();
        with_header.extend_from_slice(&bytes);
        std::fs::write(&path, &with_header).unwrap();
        assert_corrupt(&path);
    }

    #[test]
    fn text_file_named_pdf_is_corrupt() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("notes.pdf");
        std::fs::write(&path, "Minutes of the meeting\nNot a PDF at all.\n").unwrap();
        assert_corrupt(&path);
    }

    #[test]
    fn zero_byte_file_is_corrupt() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("zero.pdf");
        std::fs::write(&path, b"").unwrap();
        assert_corrupt(&path);
    }

    #[test]
    fn missing_file_is_io() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("absent.pdf");
        assert!(matches!(
            extract_pages(&path, PdfRoute::PureRust),
            Err(PdfError::Io(_))
        ));
    }

    #[test]
    fn quietly_catches_and_restores() {
        let r: Result<(), String> = quietly(|| panic!("boom {}", 1));
        assert_eq!(r.unwrap_err(), "boom 1");
        assert_eq!(quietly(|| 7).unwrap(), 7);
    }

    #[test]
    fn normalize_rules() {
        assert_eq!(normalize_page("a  \r\nb\t\n  \n"), "a\nb\n\n");
        assert_eq!(normalize_page(" \n\t\n"), "");
        assert_eq!(normalize_page("x-\ny"), "x-\ny");
    }
}
