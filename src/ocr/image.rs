//! An 8-bit grayscale picture and the portable anymap (PGM/PPM) bytes that
//! pass pictures between pdftoppm, tesseract and the demo's scan maker.

/// An 8-bit grayscale image, row by row, 0 black and 255 white.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Gray {
    pub width: usize,
    pub height: usize,
    pub pixels: Vec<u8>,
}

impl Gray {
    /// A `width` x `height` image of one shade.
    pub fn filled(width: usize, height: usize, shade: u8) -> Gray {
        Gray {
            width,
            height,
            pixels: vec![shade; width * height],
        }
    }

    pub fn get(&self, x: usize, y: usize) -> u8 {
        self.pixels[y * self.width + x]
    }

    pub fn set(&mut self, x: usize, y: usize, v: u8) {
        self.pixels[y * self.width + x] = v;
    }

    /// Reads binary PGM (`P5`) or PPM (`P6`, averaged to gray) with a
    /// maximum value of 255, as pdftoppm writes them.
    pub fn from_pnm(bytes: &[u8]) -> Result<Gray, String> {
        let mut fields = Vec::with_capacity(4);
        let mut i = 0;
        while fields.len() < 4 {
            // Skip white space and comments.
            while i < bytes.len() && (bytes[i].is_ascii_whitespace() || bytes[i] == b'#') {
                if bytes[i] == b'#' {
                    while i < bytes.len() && bytes[i] != b'\n' {
                        i += 1;
                    }
                } else {
                    i += 1;
                }
            }
            let start = i;
            while i < bytes.len() && !bytes[i].is_ascii_whitespace() {
                i += 1;
            }
            if start == i {
                return Err("the image header is cut short".into());
            }
            fields.push(String::from_utf8_lossy(&bytes[start..i]).into_owned());
        }
        i += 1; // the single white-space byte before the raster
        let channels = match fields[0].as_str() {
            "P5" => 1,
            "P6" => 3,
            other => return Err(format!("not a binary PGM/PPM image (magic `{other}`)")),
        };
        let num = |s: &str| {
            s.parse::<usize>()
                .map_err(|_| format!("bad number `{s}` in the image header"))
        };
        let (width, height, max) = (num(&fields[1])?, num(&fields[2])?, num(&fields[3])?);
        if max != 255 {
            return Err(format!("unsupported maximum value {max} (want 255)"));
        }
        let want = width
            .checked_mul(height)
            .and_then(|n| n.checked_mul(channels))
            .ok_or("the image is too large")?;
        let raster = bytes.get(i..).unwrap_or_default();
        if raster.len() < want {
            return Err(format!(
                "the image data is cut short ({} of {want} bytes)",
                raster.len()
            ));
        }
        let pixels = if channels == 1 {
            raster[..want].to_vec()
        } else {
            raster[..want]
                .chunks_exact(3)
                .map(|p| ((u16::from(p[0]) + u16::from(p[1]) + u16::from(p[2])) / 3) as u8)
                .collect()
        };
        Ok(Gray {
            width,
            height,
            pixels,
        })
    }

    /// Binary PGM bytes.
    pub fn to_pgm(&self) -> Vec<u8> {
        let mut out = format!("P5\n{} {}\n255\n", self.width, self.height).into_bytes();
        out.extend_from_slice(&self.pixels);
        out
    }

    /// Share of pixels clearly darker than the paper (an eighth darker than
    /// the median shade, and at least 16 levels): how much ink the page
    /// carries, whether the print is black or a faint, blurred photocopy.
    pub fn ink_share(&self) -> f64 {
        if self.pixels.is_empty() {
            return 0.0;
        }
        let mut hist = [0usize; 256];
        for &p in &self.pixels {
            hist[p as usize] += 1;
        }
        let half = self.pixels.len() / 2;
        let (mut seen, mut paper) = (0, 255usize);
        for (shade, n) in hist.iter().enumerate() {
            seen += n;
            if seen > half {
                paper = shade;
                break;
            }
        }
        let cut = paper.saturating_sub((paper / 8).max(16));
        let dark: usize = hist[..cut].iter().sum();
        dark as f64 / self.pixels.len() as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pgm_round_trip_and_ppm_to_gray() {
        let mut g = Gray::filled(3, 2, 255);
        g.set(1, 1, 0);
        let back = Gray::from_pnm(&g.to_pgm()).unwrap();
        assert_eq!(back, g);
        assert!((g.ink_share() - 1.0 / 6.0).abs() < 1e-9);
        // Faint print on grey paper is still ink.
        let mut faint = Gray::filled(4, 1, 238);
        faint.set(0, 0, 205);
        assert!((faint.ink_share() - 0.25).abs() < 1e-9);
        assert_eq!(Gray::filled(4, 4, 250).ink_share(), 0.0);
        // Netpbm's PPM format: header "P6 width height maxval", one white
        // space byte, then RGB triples (netpbm.sourceforge.net/doc/ppm.html).
        let ppm = b"P6\n# made by hand\n2 1\n255\n\x00\x00\x00\xff\xff\xff";
        let g = Gray::from_pnm(ppm).unwrap();
        assert_eq!(g.pixels, vec![0, 255]);
    }

    #[test]
    fn broken_images_are_errors() {
        for (bytes, want) in [
            (&b"P2\n1 1\n255\n0"[..], "magic"),
            (b"P5\n4 4\n255\n\x00", "cut short"),
            (b"P5\n4", "cut short"),
            (b"P5\n1 1\n65535\n\x00\x00", "maximum"),
        ] {
            let e = Gray::from_pnm(bytes).unwrap_err();
            assert!(e.contains(want), "{e}");
        }
    }
}
