//! Turns demo pages into scans: each page is rendered from its source text,
//! then damaged as photocopied and scanned paper is (a faint, uneven toner;
//! a slight skew; speckle and grain; a rubber stamp over part of the text),
//! and written as an image-only PDF. Deterministic for a given seed.

use crate::error::{Error, Result};
use crate::eval::Rng;
use crate::extract::pdf::{PdfPage, write_scanned_pdf, write_text_pdf};
use crate::ocr::engine::render_page;
use crate::ocr::image::Gray;
use std::path::Path;
use std::time::Duration;

/// How a demo document is damaged (from its manifest row's `scan` field).
#[derive(Debug, Clone, PartialEq, serde::Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct ScanSpec {
    /// Rotation in degrees (alternating sign page to page).
    #[serde(default = "default_skew")]
    pub skew: f32,
    /// Standard deviation of the grain, as a share of full scale (0-1).
    #[serde(default = "default_noise")]
    pub noise: f32,
    /// How dark the toner prints, 0-1 (lower is fainter).
    #[serde(default = "default_toner")]
    pub toner: f32,
    /// Text of a rubber stamp set over the text of the first page.
    #[serde(default)]
    pub stamp: Option<String>,
}

impl Default for ScanSpec {
    fn default() -> Self {
        ScanSpec {
            skew: default_skew(),
            noise: default_noise(),
            toner: default_toner(),
            stamp: None,
        }
    }
}

fn default_skew() -> f32 {
    0.7
}
fn default_noise() -> f32 {
    0.05
}
fn default_toner() -> f32 {
    0.72
}

/// Resolution the scans are made at (and embedded at).
pub const SCAN_DPI: u32 = 300;

/// Renders `pages` (lines of text) into an image-only PDF at `out`.
pub fn write_scan(
    out: &Path,
    title: &str,
    pages: &[PdfPage],
    spec: &ScanSpec,
    seed: u64,
) -> Result<()> {
    let work = tempfile::tempdir().map_err(|e| Error::io(out, e))?;
    let text_pdf = work.path().join("text.pdf");
    write_text_pdf(&text_pdf, title, pages).map_err(|e| extract_err(out, e.to_string()))?;
    let stamp = match &spec.stamp {
        Some(s) => Some(stamp_image(work.path(), s, out)?),
        None => None,
    };
    let mut images = Vec::with_capacity(pages.len());
    for i in 0..pages.len() {
        let page = render_page(&text_pdf, i as u32 + 1, SCAN_DPI, Duration::from_secs(120))
            .map_err(|e| extract_err(out, e.to_string()))?
            .image;
        let mut rng = Rng::new(seed, i, 7);
        let mut page = photocopy(&page, spec.toner, &mut rng);
        if i == 0
            && let Some(st) = &stamp
        {
            // Over the right half of the first third of the page, where
            // letterheads and headings sit.
            let x = page.width * 9 / 20;
            let y = page.height / 7;
            press_stamp(&mut page, st, x, y);
        }
        let angle = if i % 2 == 0 {
            spec.skew
        } else {
            -spec.skew * 0.6
        };
        let mut page = rotate(&page, angle, 238);
        grain(&mut page, spec.noise, &mut rng);
        images.push(page);
    }
    write_scanned_pdf(out, title, &images, None).map_err(|e| extract_err(out, e.to_string()))
}

fn extract_err(path: &Path, message: String) -> Error {
    Error::Extract {
        path: path.to_path_buf(),
        message,
    }
}

/// Faint, uneven toner on off-white paper: ink lightened to `toner` of
/// full darkness, with slow bands of lighter and darker print.
fn photocopy(src: &Gray, toner: f32, rng: &mut Rng) -> Gray {
    let mut out = src.clone();
    let paper = 238.0f32;
    let phase = (rng.below(1000) as f32) / 1000.0 * std::f32::consts::TAU;
    for y in 0..src.height {
        // Bands down the page, as a worn drum prints.
        let band = 0.85 + 0.15 * ((y as f32 / 410.0) + phase).sin();
        for x in 0..src.width {
            let ink = 1.0 - f32::from(src.get(x, y)) / 255.0;
            let across = 0.93 + 0.07 * ((x as f32 / 690.0) + phase * 0.5).cos();
            let dark = ink * toner * band * across;
            out.set(x, y, (paper * (1.0 - dark)).clamp(0.0, 255.0) as u8);
        }
    }
    out
}

/// Rotates by `degrees` about the centre (bilinear), filling with `fill`.
fn rotate(src: &Gray, degrees: f32, fill: u8) -> Gray {
    let (s, c) = degrees.to_radians().sin_cos();
    let (cx, cy) = (src.width as f32 / 2.0, src.height as f32 / 2.0);
    let mut out = Gray::filled(src.width, src.height, fill);
    for y in 0..src.height {
        for x in 0..src.width {
            let (dx, dy) = (x as f32 - cx, y as f32 - cy);
            let sx = c * dx + s * dy + cx;
            let sy = -s * dx + c * dy + cy;
            if sx < 0.0 || sy < 0.0 {
                continue;
            }
            let (x0, y0) = (sx as usize, sy as usize);
            if x0 + 1 >= src.width || y0 + 1 >= src.height {
                continue;
            }
            let (fx, fy) = (sx - x0 as f32, sy - y0 as f32);
            let p = |xx, yy| f32::from(src.get(xx, yy));
            let v = p(x0, y0) * (1.0 - fx) * (1.0 - fy)
                + p(x0 + 1, y0) * fx * (1.0 - fy)
                + p(x0, y0 + 1) * (1.0 - fx) * fy
                + p(x0 + 1, y0 + 1) * fx * fy;
            out.set(x, y, v as u8);
        }
    }
    out
}

/// Grain (roughly Gaussian, from three uniforms) and toner specks.
fn grain(img: &mut Gray, noise: f32, rng: &mut Rng) {
    let sd = noise * 255.0;
    let mut uni = || (rng.next() >> 11) as f32 / (1u64 << 53) as f32;
    for p in img.pixels.iter_mut() {
        let g = (uni() + uni() + uni() - 1.5) * 2.0 * sd;
        *p = (f32::from(*p) + g).clamp(0.0, 255.0) as u8;
    }
    let specks = img.width * img.height / 12_000;
    for _ in 0..specks {
        let x = rng.below(img.width - 3);
        let y = rng.below(img.height - 3);
        let r = 1 + rng.below(2);
        for yy in y..(y + r).min(img.height) {
            for xx in x..(x + r).min(img.width) {
                img.set(xx, yy, 60);
            }
        }
    }
}

/// The stamp's picture: its text rendered large, in a double frame.
fn stamp_image(dir: &Path, text: &str, out: &Path) -> Result<Gray> {
    let pdf = dir.join("stamp.pdf");
    let lines: Vec<String> = text.split('|').map(|l| l.trim().to_string()).collect();
    write_text_pdf(&pdf, "stamp", &[PdfPage { lines }])
        .map_err(|e| extract_err(out, e.to_string()))?;
    let big = render_page(&pdf, 1, 3 * SCAN_DPI, Duration::from_secs(120))
        .map_err(|e| extract_err(out, e.to_string()))?
        .image;
    // Crop to the ink, with a margin for the frame.
    let (mut x0, mut y0, mut x1, mut y1) = (big.width, big.height, 0, 0);
    for y in 0..big.height {
        for x in 0..big.width {
            if big.get(x, y) < 128 {
                (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x), y1.max(y));
            }
        }
    }
    if x1 <= x0 {
        return Ok(Gray::filled(1, 1, 255));
    }
    let m = 40;
    let (w, h) = (x1 - x0 + 2 * m, y1 - y0 + 2 * m);
    let mut st = Gray::filled(w, h, 255);
    for y in 0..h {
        for x in 0..w {
            let (sx, sy) = ((x + x0).checked_sub(m), (y + y0).checked_sub(m));
            if let (Some(sx), Some(sy)) = (sx, sy)
                && sx < big.width
                && sy < big.height
            {
                st.set(x, y, big.get(sx, sy));
            }
            let edge = x.min(y).min(w - 1 - x).min(h - 1 - y);
            if edge < 8 || (14..18).contains(&edge) {
                st.set(x, y, 0);
            }
        }
    }
    Ok(rotate(&st, -4.0, 255))
}

/// Sets the stamp at (`x`, `y`) in a mid-gray ink that darkens what is under it.
fn press_stamp(page: &mut Gray, stamp: &Gray, x: usize, y: usize) {
    for sy in 0..stamp.height {
        for sx in 0..stamp.width {
            let (px, py) = (x + sx, y + sy);
            if px >= page.width || py >= page.height {
                continue;
            }
            let ink = 1.0 - f32::from(stamp.get(sx, sy)) / 255.0;
            if ink <= 0.0 {
                continue;
            }
            let under = f32::from(page.get(px, py));
            // A red stamp photocopied in gray: about 45% darkness.
            let v = under * (1.0 - 0.45 * ink);
            page.set(px, py, v as u8);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rotation_by_zero_is_the_identity_and_small_turns_move_ink() {
        let mut img = Gray::filled(40, 30, 255);
        for x in 5..35 {
            img.set(x, 15, 0);
        }
        assert_eq!(rotate(&img, 0.0, 255), img);
        let turned = rotate(&img, 5.0, 255);
        // A horizontal line turned 5 degrees: its ends move in opposite
        // directions, by about tan(5°) * 15 ≈ 1.3 pixels.
        let row_of_dark = |x: usize| (0..30).min_by_key(|&y| turned.get(x, y)).unwrap();
        assert!(row_of_dark(8) != row_of_dark(32), "line did not tilt");
    }

    #[test]
    fn photocopy_lightens_ink_and_greys_paper() {
        let mut img = Gray::filled(10, 10, 255);
        img.set(3, 3, 0);
        let mut rng = Rng::new(1, 0, 0);
        let out = photocopy(&img, 0.7, &mut rng);
        assert!(out.get(0, 0) < 255 && out.get(0, 0) > 200);
        assert!(
            out.get(3, 3) > 40 && out.get(3, 3) < 140,
            "{}",
            out.get(3, 3)
        );
    }
}
