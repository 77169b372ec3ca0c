//! Text in rendered images: the one font the crate bundles and its glyphs drawn as
//! anti-aliased paths.
//!
//! The font is `DejaVu Sans` 2.37 (`crates/core/fonts/DejaVuSans.ttf`, its licence beside it),
//! compiled into the binary with `include_bytes!` and never looked up on the system, so an
//! overlay or a chart reads the same on every machine. Charts hand the same bytes to resvg
//! ([`crate::chart`]); overlays ([`super::overlay`]) draw through [`draw_text`]: characters are
//! mapped to glyphs by the font's character map (a character the font lacks gets its
//! `.notdef` box), advanced by their horizontal metrics (no kerning), and each glyph's outline
//! is read once with skrifa — the outline reader of the resvg stack — cached at one unit per
//! font unit and filled with tiny-skia at the size asked.

use skrifa::instance::{LocationRef, Size};
use skrifa::outline::{DrawSettings, OutlinePen};
use skrifa::prelude::{FontRef, GlyphId, MetadataProvider};
use std::collections::HashMap;
use std::sync::{Mutex, OnceLock};
use tiny_skia::{FillRule, Paint, Path, PathBuilder, Pixmap, Transform};

/// The bundled font file (`DejaVu Sans` 2.37, Bitstream Vera and Arev licences).
pub static FONT: &[u8] = include_bytes!("../../fonts/DejaVuSans.ttf");

/// The family name the bundled font declares, for SVG `font-family`.
pub const FONT_FAMILY: &str = "DejaVu Sans";

struct Face {
    font: FontRef<'static>,
    units_per_em: f32,
    cap_height: f32,
    ascent: f32,
    descent: f32,
    /// Outlines in font units (y up), by glyph; `None` for a glyph with no outline (space).
    outlines: Mutex<HashMap<GlyphId, Option<Path>>>,
}

fn face() -> &'static Face {
    static FACE: OnceLock<Face> = OnceLock::new();
    FACE.get_or_init(|| {
        // the file is part of the source tree and `tests::bundled_font_parses` reads it: a
        // failure here is a broken checkout, not bad input
        let font = FontRef::new(FONT).expect("the bundled DejaVu Sans parses");
        let m = font.metrics(Size::unscaled(), LocationRef::default());
        let units_per_em = f32::from(m.units_per_em);
        Face {
            font,
            units_per_em,
            cap_height: m.cap_height.unwrap_or(0.73 * units_per_em),
            ascent: m.ascent,
            descent: m.descent,
            outlines: Mutex::new(HashMap::new()),
        }
    })
}

/// Vertical metrics of the font at one size, in pixels (positive down from the baseline for
/// `descent`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineMetrics {
    /// Height of a capital letter above the baseline.
    pub cap_height_px: f32,
    /// Height of the tallest glyphs above the baseline.
    pub ascent_px: f32,
    /// Depth of the lowest glyphs below the baseline.
    pub descent_px: f32,
}

/// The font's vertical metrics at `size_px` (the em size in pixels).
#[must_use]
pub fn line_metrics(size_px: f32) -> LineMetrics {
    let f = face();
    let s = size_px / f.units_per_em;
    LineMetrics {
        cap_height_px: f.cap_height * s,
        ascent_px: f.ascent * s,
        descent_px: -f.descent * s,
    }
}

/// Whether the bundled font has a glyph for `ch` (otherwise it is drawn as a box).
#[must_use]
pub fn has_glyph(ch: char) -> bool {
    face().font.charmap().map(ch).is_some()
}

fn glyph_of(ch: char) -> GlyphId {
    face().font.charmap().map(ch).unwrap_or(GlyphId::NOTDEF)
}

/// Advance of one glyph in font units.
fn advance(gid: GlyphId) -> f32 {
    let f = face();
    f.font
        .glyph_metrics(Size::unscaled(), LocationRef::default())
        .advance_width(gid)
        .unwrap_or(0.0)
}

/// Width in pixels of one line of `text` at `size_px`.
#[must_use]
pub fn text_width_px(text: &str, size_px: f32) -> f32 {
    let s = size_px / face().units_per_em;
    text.chars().map(|c| advance(glyph_of(c))).sum::<f32>() * s
}

/// Collects a glyph's outline into a tiny-skia path.
struct Pen(PathBuilder);

impl OutlinePen for Pen {
    fn move_to(&mut self, x: f32, y: f32) {
        self.0.move_to(x, y);
    }
    fn line_to(&mut self, x: f32, y: f32) {
        self.0.line_to(x, y);
    }
    fn quad_to(&mut self, cx0: f32, cy0: f32, x: f32, y: f32) {
        self.0.quad_to(cx0, cy0, x, y);
    }
    fn curve_to(&mut self, cx0: f32, cy0: f32, cx1: f32, cy1: f32, x: f32, y: f32) {
        self.0.cubic_to(cx0, cy0, cx1, cy1, x, y);
    }
    fn close(&mut self) {
        self.0.close();
    }
}

fn outline(gid: GlyphId) -> Option<Path> {
    let f = face();
    let mut cache = f
        .outlines
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    cache
        .entry(gid)
        .or_insert_with(|| {
            let glyph = f.font.outline_glyphs().get(gid)?;
            let mut pen = Pen(PathBuilder::new());
            glyph
                .draw(
                    DrawSettings::unhinted(Size::unscaled(), LocationRef::default()),
                    &mut pen,
                )
                .ok()?;
            pen.0.finish()
        })
        .clone()
}

/// The outline of one line of `text` at `size_px` with its baseline starting at `(x, y)`, in
/// image coordinates (y down); `None` when nothing in it has ink (empty or blank text).
#[must_use]
pub fn text_path(text: &str, size_px: f32, x: f32, baseline_y: f32) -> Option<Path> {
    let s = size_px / face().units_per_em;
    let mut pb = PathBuilder::new();
    let mut pen_x = 0.0f32;
    for ch in text.chars() {
        let gid = glyph_of(ch);
        if let Some(p) = outline(gid) {
            // font units, y up → pixels, y down
            let t = Transform::from_row(s, 0.0, 0.0, -s, x + pen_x * s, baseline_y);
            if let Some(p) = p.transform(t) {
                pb.push_path(&p);
            }
        }
        pen_x += advance(gid);
    }
    pb.finish()
}

/// Fills one line of `text` at `size_px` with its baseline starting at `(x, baseline_y)`,
/// anti-aliased, in a straight-alpha colour.
pub fn draw_text(
    pixmap: &mut Pixmap,
    x: f32,
    baseline_y: f32,
    text: &str,
    size_px: f32,
    colour: [u8; 4],
) {
    if let Some(path) = text_path(text, size_px, x, baseline_y) {
        let mut paint = Paint::default();
        paint.set_color_rgba8(colour[0], colour[1], colour[2], colour[3]);
        paint.anti_alias = true;
        pixmap.fill_path(
            &path,
            &paint,
            FillRule::Winding,
            Transform::identity(),
            None,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bundled_font_parses_and_covers_the_labels() {
        let m = line_metrics(100.0);
        // DejaVu Sans: 2048 units per em, cap height 1493 units (≈ 72.9 px at 100 px)
        assert!((m.cap_height_px - 72.9).abs() < 0.2, "{m:?}");
        assert!(m.ascent_px > m.cap_height_px && m.descent_px > 0.0, "{m:?}");
        for ch in "0123456789%µμσ²±×–()[]abcdefghijklmnopqrstuvwxyzABCXYZ".chars() {
            assert!(has_glyph(ch), "{ch} missing from the bundled font");
        }
        assert!(
            !has_glyph('\u{E000}'),
            "a private-use character has no glyph"
        );
    }

    #[test]
    fn widths_add_up_and_scale() {
        let a = text_width_px("PC1 (", 20.0);
        let b = text_width_px("93.5%)", 20.0);
        assert!((text_width_px("PC1 (93.5%)", 20.0) - (a + b)).abs() < 1e-3);
        assert!((text_width_px("mm", 40.0) - 2.0 * text_width_px("mm", 20.0)).abs() < 1e-3);
        assert!(text_width_px("", 20.0).abs() < f32::EPSILON);
        // lower case is narrower than capitals in this font: case is kept
        assert!(text_width_px("clay", 20.0) < text_width_px("CLAY", 20.0));
    }

    #[test]
    fn glyphs_are_drawn_inside_their_box() {
        let mut pm = Pixmap::new(120, 40).unwrap();
        let size = 24.0;
        draw_text(&mut pm, 10.0, 30.0, "%", size, [255, 255, 255, 255]);
        let w = text_width_px("%", size);
        let cap = line_metrics(size).cap_height_px;
        let mut inside = 0;
        for (i, px) in pm.data().chunks_exact(4).enumerate() {
            if px[3] > 0 {
                let (x, y) = ((i % 120) as f32, (i / 120) as f32);
                // the per-mille ring of '%' reaches a little above the capitals
                assert!(x >= 9.0 && x <= 11.0 + w, "ink at x {x}");
                assert!(y >= 29.0 - 1.1 * cap && y <= 31.0, "ink at y {y}");
                inside += 1;
            }
        }
        assert!(inside > 40, "only {inside} pixels of '%'");
        assert!(text_path(" ", size, 0.0, 10.0).is_none());
    }
}
