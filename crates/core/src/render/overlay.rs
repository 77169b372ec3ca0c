//! Overlays drawn over a rendered image with tiny-skia: a scale bar in physical units,
//! orientation labels at the image edges, markers with labels, lines and polylines.
//!
//! Coordinates are image pixels, `(0, 0)` at the top-left corner of the top-left pixel (so the
//! centre of pixel `(c, r)` is `(c + 0.5, r + 0.5)`). Text is set in the bundled font
//! ([`super::text`]), anti-aliased, over a dark shadow so it reads on any background.

use super::text::{draw_text, line_metrics, text_width_px};
use super::{RenderError, RgbaImage};
use crate::geometry::format_length_mm;
use nalgebra::Vector3;
use tiny_skia::{Paint, PathBuilder, Pixmap, Rect, Stroke, Transform};

/// An RGBA colour, straight alpha.
pub type Colour = [u8; 4];

/// Shapes of point markers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MarkerShape {
    Circle,
    Cross,
}

/// Names of the world axes' two ends, for orientation labels.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct AxisNames {
    pub negative: [String; 3],
    pub positive: [String; 3],
}

impl Default for AxisNames {
    /// `-X`/`+X`, `-Y`/`+Y`, `-Z`/`+Z`.
    fn default() -> Self {
        Self {
            negative: ["-X".into(), "-Y".into(), "-Z".into()],
            positive: ["+X".into(), "+Y".into(), "+Z".into()],
        }
    }
}

/// The label of a world direction: the end of the world axis it is closest to, followed by
/// the second-closest when that component exceeds 0.38 of the unit vector (about 22°; common
/// practice for oblique views is to name both).
#[must_use]
pub fn direction_label(dir: &Vector3<f64>, names: &AxisNames) -> String {
    let Some(d) = dir.try_normalize(1e-12) else {
        return String::new();
    };
    let mut axes = [0usize, 1, 2];
    axes.sort_by(|&a, &b| d[b].abs().total_cmp(&d[a].abs()));
    let name = |a: usize| {
        if d[a] >= 0.0 {
            names.positive[a].clone()
        } else {
            names.negative[a].clone()
        }
    };
    let mut s = name(axes[0]);
    if d[axes[1]].abs() > 0.38 {
        s.push_str(&name(axes[1]));
    }
    s
}

/// The largest length of the 1–2–5 series (`{1, 2, 5}·10^k` mm) not above `max_mm`;
/// `None` if `max_mm` is not finite and positive.
#[must_use]
pub fn nice_length_mm(max_mm: f64) -> Option<f64> {
    if !(max_mm.is_finite() && max_mm > 0.0) {
        return None;
    }
    let mut decade = 10f64.powf(max_mm.log10().floor());
    // guard against log10 rounding just below a power of ten
    if decade * 10.0 <= max_mm {
        decade *= 10.0;
    }
    [5.0, 2.0, 1.0]
        .iter()
        .map(|m| m * decade)
        .find(|&l| l <= max_mm * (1.0 + 1e-12))
        .or(Some(decade / 2.0))
}

/// A drawing surface over a copy of an image.
pub struct Overlay {
    pixmap: Pixmap,
}

fn paint(c: Colour) -> Paint<'static> {
    let mut p = Paint::default();
    p.set_color_rgba8(c[0], c[1], c[2], c[3]);
    p.anti_alias = true;
    p
}

const SHADOW: Colour = [0, 0, 0, 200];

impl Overlay {
    /// Starts drawing over `image` (copied).
    pub fn new(image: &RgbaImage) -> Result<Self, RenderError> {
        let bad = || RenderError::BadSize {
            width: image.width,
            height: image.height,
        };
        super::check_size(image.width, image.height)?;
        if image.pixels.len() != 4 * image.width * image.height {
            return Err(RenderError::BufferSize {
                width: image.width,
                height: image.height,
                expected: 4 * image.width * image.height,
                got: image.pixels.len(),
            });
        }
        let size =
            tiny_skia::IntSize::from_wh(image.width as u32, image.height as u32).ok_or_else(bad)?;
        // tiny-skia stores premultiplied alpha
        let mut data = image.pixels.clone();
        for px in data.chunks_exact_mut(4) {
            let a = u16::from(px[3]);
            for c in &mut px[..3] {
                *c = ((u16::from(*c) * a + 127) / 255) as u8;
            }
        }
        let pixmap = Pixmap::from_vec(data, size).ok_or_else(bad)?;
        Ok(Self { pixmap })
    }

    #[must_use]
    pub fn width(&self) -> usize {
        self.pixmap.width() as usize
    }

    #[must_use]
    pub fn height(&self) -> usize {
        self.pixmap.height() as usize
    }

    /// The image with everything drawn, straight alpha again.
    #[must_use]
    pub fn finish(self) -> RgbaImage {
        let (width, height) = (self.width(), self.height());
        let mut pixels = self.pixmap.take();
        for px in pixels.chunks_exact_mut(4) {
            let a = u32::from(px[3]);
            if a > 0 && a < 255 {
                for c in &mut px[..3] {
                    *c = ((u32::from(*c) * 255 + a / 2) / a).min(255) as u8;
                }
            }
        }
        RgbaImage {
            width,
            height,
            pixels,
        }
    }

    /// A straight line `width_px` wide.
    pub fn line(&mut self, from: (f32, f32), to: (f32, f32), colour: Colour, width_px: f32) {
        self.polyline(&[from, to], false, colour, width_px);
    }

    /// A polyline through `points` (closed back to the first when `closed`).
    pub fn polyline(&mut self, points: &[(f32, f32)], closed: bool, colour: Colour, width_px: f32) {
        if points.len() < 2 || points.iter().any(|p| !p.0.is_finite() || !p.1.is_finite()) {
            return;
        }
        let mut pb = PathBuilder::new();
        pb.move_to(points[0].0, points[0].1);
        for p in &points[1..] {
            pb.line_to(p.0, p.1);
        }
        if closed {
            pb.close();
        }
        if let Some(path) = pb.finish() {
            let stroke = Stroke {
                width: width_px.max(0.1),
                ..Stroke::default()
            };
            self.pixmap
                .stroke_path(&path, &paint(colour), &stroke, Transform::identity(), None);
        }
    }

    /// A marker of `size_px` (diameter) at `at`, with an optional label to its upper right.
    pub fn marker(
        &mut self,
        at: (f32, f32),
        shape: MarkerShape,
        size_px: f32,
        colour: Colour,
        label: Option<&str>,
    ) {
        if !at.0.is_finite() || !at.1.is_finite() {
            return;
        }
        let r = (size_px / 2.0).max(1.0);
        let w = (size_px / 6.0).clamp(1.0, 3.0);
        match shape {
            MarkerShape::Circle => {
                if let Some(path) = PathBuilder::from_circle(at.0, at.1, r) {
                    let shadow = Stroke {
                        width: w + 1.5,
                        ..Stroke::default()
                    };
                    let stroke = Stroke {
                        width: w,
                        ..Stroke::default()
                    };
                    let t = Transform::identity();
                    self.pixmap
                        .stroke_path(&path, &paint(SHADOW), &shadow, t, None);
                    self.pixmap
                        .stroke_path(&path, &paint(colour), &stroke, t, None);
                }
            }
            MarkerShape::Cross => {
                for (d0, d1) in [((-r, 0.0), (r, 0.0)), ((0.0, -r), (0.0, r))] {
                    let a = (at.0 + d0.0, at.1 + d0.1);
                    let b = (at.0 + d1.0, at.1 + d1.1);
                    self.line(a, b, SHADOW, w + 1.5);
                    self.line(a, b, colour, w);
                }
            }
        }
        if let Some(text) = label {
            let size = self.label_size_px();
            let x = at.0 + r + 2.0;
            let y = at.1 - r - line_metrics(size).cap_height_px;
            self.text((x, y), text, size, colour);
        }
    }

    /// Draws one line of `text` at `size_px` (the font's em size) with the top of its capitals
    /// at `at.1` and its start at `at.0`, over a dark shadow so it reads on any image.
    pub fn text(&mut self, at: (f32, f32), text: &str, size_px: f32, colour: Colour) {
        let baseline = at.1 + line_metrics(size_px).cap_height_px;
        let d = (size_px / 12.0).clamp(1.0, 2.0);
        draw_text(
            &mut self.pixmap,
            at.0 + d,
            baseline + d,
            text,
            size_px,
            SHADOW,
        );
        draw_text(&mut self.pixmap, at.0, baseline, text, size_px, colour);
    }

    /// The font size used for labels: 12 px below 400 pixels, 16 px up to 1200, then 22 px
    /// (by the shorter side).
    #[must_use]
    pub fn label_size_px(&self) -> f32 {
        match self.width().min(self.height()) {
            0..400 => 12.0,
            400..1200 => 16.0,
            _ => 22.0,
        }
    }

    /// A scale bar in the lower-left corner: the longest 1–2–5 length up to a quarter of the
    /// image width, labelled above (`500 µm`, `2 mm`). Returns its length in millimetres, or
    /// `None` if `pixel_mm` is not positive or the image is too small to hold it.
    pub fn scale_bar(&mut self, pixel_mm: f64, colour: Colour) -> Option<f64> {
        let w = self.width() as f64;
        let len_mm = nice_length_mm(0.25 * w * pixel_mm)?;
        let len_px = (len_mm / pixel_mm) as f32;
        let size = self.label_size_px();
        let cap = line_metrics(size).cap_height_px;
        // margins and bar thickness grow with the labels (8 and 3 px at 12 px text)
        let margin = (size * 2.0 / 3.0).round();
        let bar_h = (size / 4.0).round();
        let y = self.height() as f32 - margin - bar_h;
        if y < cap + 2.0 || len_px < 2.0 {
            return None;
        }
        for (d, c) in [(1.0f32, SHADOW), (0.0, colour)] {
            if let Some(r) = Rect::from_xywh(margin + d, y + d, len_px, bar_h) {
                self.pixmap
                    .fill_rect(r, &paint(c), Transform::identity(), None);
            }
        }
        let label = format_length_mm(len_mm);
        let tw = text_width_px(&label, size);
        let tx = margin + (len_px - tw).max(0.0) / 2.0;
        // the label sits above the bar, clear of its descenders (µ)
        let ty = y - cap - line_metrics(size).descent_px - 1.0;
        self.text((tx, ty), &label, size, colour);
        Some(len_mm)
    }

    /// Labels the four edges with the world directions they face: the right edge with `u`,
    /// the left with `-u`, the bottom with `v` and the top with `-v` (a slice's `u`/`v`, or a
    /// camera's right/down vectors).
    pub fn orientation_labels(
        &mut self,
        u: &Vector3<f64>,
        v: &Vector3<f64>,
        names: &AxisNames,
        colour: Colour,
    ) {
        let size = self.label_size_px();
        let (w, h) = (self.width() as f32, self.height() as f32);
        let gh = line_metrics(size).cap_height_px;
        let m = (size / 3.0).round();
        let place = |t: &str| text_width_px(t, size);
        let right = direction_label(u, names);
        let left = direction_label(&-u, names);
        let bottom = direction_label(v, names);
        let top = direction_label(&-v, names);
        self.text(
            (w - m - place(&right), (h - gh) / 2.0),
            &right,
            size,
            colour,
        );
        self.text((m, (h - gh) / 2.0), &left, size, colour);
        self.text(((w - place(&top)) / 2.0, m), &top, size, colour);
        self.text(
            ((w - place(&bottom)) / 2.0, h - m - gh),
            &bottom,
            size,
            colour,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nice_lengths_follow_1_2_5() {
        assert_eq!(nice_length_mm(0.7), Some(0.5));
        assert_eq!(nice_length_mm(2.0), Some(2.0));
        assert_eq!(nice_length_mm(4.99), Some(2.0));
        assert_eq!(nice_length_mm(9.9), Some(5.0));
        assert_eq!(nice_length_mm(10.0), Some(10.0));
        assert!((nice_length_mm(0.0013).unwrap() - 0.001).abs() < 1e-15);
        assert_eq!(nice_length_mm(0.0), None);
        assert_eq!(nice_length_mm(f64::NAN), None);
        assert_eq!(format_length_mm(0.5), "500 µm");
        assert_eq!(format_length_mm(2.0), "2 mm");
    }

    #[test]
    fn direction_labels() {
        let n = AxisNames::default();
        assert_eq!(direction_label(&Vector3::x(), &n), "+X");
        assert_eq!(direction_label(&-Vector3::z(), &n), "-Z");
        assert_eq!(direction_label(&Vector3::new(0.7, -0.7, 0.1), &n), "+X-Y");
    }

    /// Pixels at least 80% of the way to `c` in every channel (glyph edges are anti-aliased).
    fn count(img: &RgbaImage, c: Colour) -> usize {
        img.pixels
            .chunks_exact(4)
            .filter(|p| (0..3).all(|i| (i32::from(p[i]) - i32::from(c[i])).abs() <= 51))
            .count()
    }

    #[test]
    fn scale_bar_has_the_stated_length() {
        let img = RgbaImage::filled(400, 200, [0, 0, 0, 255]).unwrap();
        let mut o = Overlay::new(&img).unwrap();
        // 0.01 mm pixels: a quarter of 400 px is 1 mm → bar of 1 mm = 100 px
        let size = o.label_size_px();
        let len = o.scale_bar(0.01, [255, 255, 255, 255]).unwrap();
        assert!((len - 1.0).abs() < 1e-12);
        let out = o.finish();
        // the bar's middle row (margin 8 px and bar 3 px at 12 px labels): count white pixels
        assert!((size - 12.0).abs() < f32::EPSILON);
        let row = 200 - 8 - 3 + 1;
        let white = (0..400)
            .filter(|&c| out.get(c, row) == [255, 255, 255, 255])
            .count();
        assert!((99..=101).contains(&white), "bar {white} px");
        // the bar is 3 rows; a label ("1 mm") was drawn above it
        let bar_top = 200 - 8 - 3;
        let label = (0..bar_top)
            .flat_map(|r| (0..400).map(move |c| (c, r)))
            .filter(|&(c, r)| out.get(c, r)[0] > 128)
            .count();
        assert!(label > 30, "label {label} px");
        assert!(count(&out, [255, 255, 255, 255]) >= white * 3);
    }

    #[test]
    fn markers_lines_and_text_draw_where_asked() {
        let img = RgbaImage::filled(64, 64, [0, 0, 0, 0]).unwrap();
        let mut o = Overlay::new(&img).unwrap();
        o.marker(
            (20.5, 40.5),
            MarkerShape::Cross,
            9.0,
            [255, 0, 0, 255],
            None,
        );
        o.line((0.0, 5.5), (64.0, 5.5), [0, 255, 0, 255], 1.0);
        o.text((40.0, 40.0), "1", 16.0, [0, 0, 255, 255]);
        let out = o.finish();
        assert_eq!(out.get(20, 40), [255, 0, 0, 255]);
        assert_eq!(out.get(20, 36), [255, 0, 0, 255]);
        assert_eq!(out.get(30, 5), [0, 255, 0, 255]);
        assert_eq!(out.get(30, 20), [0, 0, 0, 0]);
        // '1' at 16 px: its stem (DejaVu Sans: x 0.22–0.33 em… of a 0.64 em advance) is solid
        // blue from the top of the capitals (y 40) to the baseline (y 40 + 11.7)
        let stem: Vec<usize> = (40..52)
            .filter(|&y| (40..48).any(|x| out.get(x, y) == [0, 0, 255, 255]))
            .collect();
        assert!(stem.len() >= 9, "stem rows {stem:?}");
        assert!((0..40).all(|y| (36..52).all(|x| out.get(x, y)[2] == 0 || y < 6)));
        let mut o = Overlay::new(&out).unwrap();
        o.orientation_labels(
            &Vector3::x(),
            &Vector3::y(),
            &AxisNames::default(),
            [255, 255, 255, 255],
        );
        let out2 = o.finish();
        assert!(count(&out2, [255, 255, 255, 255]) > 20);
    }
}
