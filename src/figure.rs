//! One drawing, two formats: every plot sufficit makes is a [`Figure`] drawn on any plotters
//! backend, so the same code gives the SVG that commands and the HTML report embed and the PNG
//! that `summary.md` links (text rendered with the shipped DejaVu Sans font, so PNGs need no
//! system fonts).

use crate::{Error, Result};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::sync::Once;

/// A plot that can draw itself on any backend.
pub trait Figure {
    /// Size in pixels (width, height).
    fn size(&self) -> (u32, u32);
    /// Draw on `root` (already the full size); errors are plotters' messages.
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> std::result::Result<(), String>;
}

/// Map a plotters error to its message.
pub fn msg<E: std::fmt::Display>(e: E) -> String {
    e.to_string()
}

/// The figure as an SVG document.
pub fn svg(f: &impl Figure) -> Result<String> {
    // Text sizes for the layout come from the font, in SVG too.
    register_font();
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, f.size()).into_drawing_area();
        f.draw(&root).and_then(|_| root.present().map_err(msg)).map_err(drawing_error)?;
    }
    Ok(out)
}

/// The figure as PNG bytes.
pub fn png(f: &impl Figure) -> Result<Vec<u8>> {
    register_font();
    let (w, h) = f.size();
    let mut rgb = vec![255u8; (w * h * 3) as usize];
    {
        let root = BitMapBackend::with_buffer(&mut rgb, (w, h)).into_drawing_area();
        f.draw(&root).and_then(|_| root.present().map_err(msg)).map_err(drawing_error)?;
    }
    let img = image::RgbImage::from_raw(w, h, rgb)
        .ok_or_else(|| Error::Usage(format!("a {w} x {h} figure's pixel buffer has the wrong length")))?;
    let mut bytes = Vec::new();
    img.write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png)
        .map_err(|e| Error::Usage(format!("cannot encode a figure as PNG: {e}")))?;
    Ok(bytes)
}

fn drawing_error(e: String) -> Error {
    Error::Usage(format!("cannot draw a figure: {e}"))
}

/// DejaVu Sans (free licence, see assets/DejaVuSans-LICENSE) serves every font family the
/// figures name when drawing bitmaps.
fn register_font() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        const FONT: &[u8] = include_bytes!("../assets/DejaVuSans.ttf");
        for style in [FontStyle::Normal, FontStyle::Bold, FontStyle::Italic, FontStyle::Oblique] {
            // Registration fails only for a corrupt font, which the test below would show.
            let _ = plotters::style::register_font("sans-serif", style, FONT);
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Line;
    impl Figure for Line {
        fn size(&self) -> (u32, u32) {
            (200, 120)
        }
        fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> std::result::Result<(), String> {
            root.fill(&WHITE).map_err(msg)?;
            let mut c = ChartBuilder::on(root)
                .x_label_area_size(30)
                .y_label_area_size(30)
                .build_cartesian_2d(0f64..1.0, 0f64..1.0)
                .map_err(msg)?;
            c.configure_mesh().x_desc("time (ms)").y_desc("rate (1)").draw().map_err(msg)?;
            c.draw_series(LineSeries::new([(0.0, 0.0), (1.0, 1.0)], BLACK.stroke_width(2))).map_err(msg)?;
            Ok(())
        }
    }

    #[test]
    fn one_figure_gives_svg_text_and_a_png_with_text_pixels() {
        let s = svg(&Line).unwrap();
        assert!(s.starts_with("<svg") && s.contains("time (ms)"), "{}", &s[..100]);
        let bytes = png(&Line).unwrap();
        let img = image::load_from_memory(&bytes).unwrap().to_rgb8();
        assert_eq!(img.dimensions(), (200, 120));
        // The axis label area (left 30 px) holds dark text pixels: the font rendered.
        let dark = (0..30).flat_map(|x| (0..90).map(move |y| (x, y))).filter(|&(x, y)| img.get_pixel(x, y)[0] < 128);
        assert!(dark.count() > 20, "no text drawn in the PNG's label area");
    }
}
