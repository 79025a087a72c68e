//! PNG output of a figure (`fit --plot FILE.png`): the SVG rasterised by
//! resvg (a pure-Rust SVG renderer; no GPU, no browser), text in a sans-serif
//! font found among the system fonts.

/// Preferred sans-serif families, in order; otherwise the first font found.
const SANS: [&str; 6] = [
    "DejaVu Sans",
    "Liberation Sans",
    "Noto Sans",
    "Arial",
    "Helvetica",
    "FreeSans",
];

/// A figure rendered to PNG.
#[derive(Debug)]
pub struct Png {
    /// The PNG file's bytes.
    pub bytes: Vec<u8>,
    /// Width and height, px.
    pub size_px: (u32, u32),
    /// Whether a font was found for the text (without one the labels are missing).
    pub has_font: bool,
}

/// Rasterise an SVG document at `scale` × its own size (2 gives a sharp
/// figure on high-density screens and in print).
pub fn render(svg: &str, scale: f32) -> Result<Png, String> {
    let mut options = resvg::usvg::Options::default();
    let db = options.fontdb_mut();
    db.load_system_fonts();
    let families: Vec<String> = db
        .faces()
        .filter_map(|f| f.families.first().map(|(name, _)| name.clone()))
        .collect();
    let sans = SANS
        .iter()
        .find(|s| families.iter().any(|f| f == *s))
        .map(|s| s.to_string())
        .or_else(|| families.first().cloned());
    let has_font = sans.is_some();
    if let Some(family) = sans {
        db.set_sans_serif_family(family.clone());
        options.font_family = family;
    }
    let tree = resvg::usvg::Tree::from_str(svg, &options)
        .map_err(|e| format!("could not read the figure for PNG output: {e}"))?;
    let size = tree.size();
    let width = (size.width() * scale).ceil().max(1.0) as u32;
    let height = (size.height() * scale).ceil().max(1.0) as u32;
    let mut pixmap = resvg::tiny_skia::Pixmap::new(width, height)
        .ok_or_else(|| format!("figure of {width} × {height} px is too large for PNG output"))?;
    pixmap.fill(resvg::tiny_skia::Color::WHITE);
    resvg::render(
        &tree,
        resvg::tiny_skia::Transform::from_scale(scale, scale),
        &mut pixmap.as_mut(),
    );
    let bytes = pixmap
        .encode_png()
        .map_err(|e| format!("could not encode the PNG: {e}"))?;
    Ok(Png {
        bytes,
        size_px: (width, height),
        has_font,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_small_figure_becomes_a_png_of_twice_its_size() {
        let svg = r##"<svg xmlns="http://www.w3.org/2000/svg" width="40" height="20" viewBox="0 0 40 20"><rect width="40" height="20" fill="#0072B2"/><text x="2" y="14" font-family="sans-serif">a</text></svg>"##;
        let png = render(svg, 2.0).unwrap();
        assert_eq!(png.size_px, (80, 40));
        // PNG signature (ISO/IEC 15948, section 5.2), then the IHDR chunk
        // with the width and height as big-endian u32 at bytes 16..24.
        assert!(
            png.bytes
                .starts_with(&[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A])
        );
        assert_eq!(&png.bytes[12..16], b"IHDR");
        assert_eq!(
            u32::from_be_bytes(png.bytes[16..20].try_into().unwrap()),
            80
        );
        assert_eq!(
            u32::from_be_bytes(png.bytes[20..24].try_into().unwrap()),
            40
        );
        assert!(render("not svg", 1.0).is_err());
    }
}
