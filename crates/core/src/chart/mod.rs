//! Charts for shape results: a morphospace scatter with group hulls, estimates with intervals,
//! and wireframe shapes — each one scene ([`Figure`]) drawn to SVG text or to a PNG.
//!
//! A figure is described once in pixel coordinates (origin top-left) and rendered by two
//! backends, so the SVG and the PNG always show the same thing: [`Figure::to_svg`] writes text,
//! [`Figure::to_rgba`] rasterises with tiny-skia (text from the overlay bitmap font of
//! [`crate::render::overlay`]). [`plots`] builds the figures from plain numbers.
//!
//! Imports `render` only for its font and PNG writer; knows nothing about shapes or volumes.

pub mod evolution;
pub mod plots;

use std::fmt::Write as _;

/// An sRGB colour with alpha.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Rgba(pub u8, pub u8, pub u8, pub u8);

impl Rgba {
    pub const BLACK: Self = Self(0, 0, 0, 255);
    pub const GREY: Self = Self(120, 120, 120, 255);
    pub const LIGHT: Self = Self(225, 225, 225, 255);
    pub const WHITE: Self = Self(255, 255, 255, 255);

    fn svg(self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.0, self.1, self.2)
    }

    fn opacity(self) -> f64 {
        f64::from(self.3) / 255.0
    }

    /// The same colour with another alpha.
    #[must_use]
    pub const fn with_alpha(self, a: u8) -> Self {
        Self(self.0, self.1, self.2, a)
    }
}

/// A qualitative palette for groups, chosen here to stay distinct in grey print too.
pub const GROUP_COLOURS: [Rgba; 6] = [
    Rgba(27, 110, 160, 255),
    Rgba(214, 110, 20, 255),
    Rgba(60, 150, 70, 255),
    Rgba(170, 50, 120, 255),
    Rgba(110, 90, 60, 255),
    Rgba(90, 90, 200, 255),
];

/// Horizontal anchoring of text.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

/// One drawing element, in pixels.
#[derive(Clone, Debug, PartialEq)]
pub enum Item {
    Line {
        from: (f64, f64),
        to: (f64, f64),
        colour: Rgba,
        width: f64,
    },
    Polygon {
        points: Vec<(f64, f64)>,
        fill: Rgba,
        stroke: Rgba,
        width: f64,
    },
    Circle {
        centre: (f64, f64),
        radius: f64,
        fill: Rgba,
        stroke: Rgba,
    },
    /// Text with its baseline-left (or middle/end) at `at`; `size` is the glyph height in px.
    Text {
        at: (f64, f64),
        text: String,
        size: f64,
        colour: Rgba,
        anchor: Anchor,
    },
}

/// A chart: a white canvas of `width × height` pixels and its items, drawn in order.
#[derive(Clone, Debug, PartialEq)]
pub struct Figure {
    pub width: u32,
    pub height: u32,
    pub items: Vec<Item>,
}

impl Figure {
    #[must_use]
    pub fn new(width: u32, height: u32) -> Self {
        Self {
            width,
            height,
            items: Vec::new(),
        }
    }

    pub fn line(&mut self, from: (f64, f64), to: (f64, f64), colour: Rgba, width: f64) {
        self.items.push(Item::Line {
            from,
            to,
            colour,
            width,
        });
    }

    pub fn text(&mut self, at: (f64, f64), text: impl Into<String>, size: f64, anchor: Anchor) {
        self.items.push(Item::Text {
            at,
            text: text.into(),
            size,
            colour: Rgba::BLACK,
            anchor,
        });
    }

    /// The figure as an SVG 1.1 document.
    #[must_use]
    pub fn to_svg(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif">"#,
            w = self.width,
            h = self.height
        );
        let _ = writeln!(s, r#"<rect width="100%" height="100%" fill="white"/>"#);
        for item in &self.items {
            match item {
                Item::Line {
                    from,
                    to,
                    colour,
                    width,
                } => {
                    let _ = writeln!(
                        s,
                        r#"<line x1="{:.2}" y1="{:.2}" x2="{:.2}" y2="{:.2}" stroke="{}" stroke-opacity="{:.3}" stroke-width="{width}"/>"#,
                        from.0,
                        from.1,
                        to.0,
                        to.1,
                        colour.svg(),
                        colour.opacity()
                    );
                }
                Item::Polygon {
                    points,
                    fill,
                    stroke,
                    width,
                } => {
                    let pts: Vec<String> = points
                        .iter()
                        .map(|p| format!("{:.2},{:.2}", p.0, p.1))
                        .collect();
                    let _ = writeln!(
                        s,
                        r#"<polygon points="{}" fill="{}" fill-opacity="{:.3}" stroke="{}" stroke-opacity="{:.3}" stroke-width="{width}"/>"#,
                        pts.join(" "),
                        fill.svg(),
                        fill.opacity(),
                        stroke.svg(),
                        stroke.opacity()
                    );
                }
                Item::Circle {
                    centre,
                    radius,
                    fill,
                    stroke,
                } => {
                    let _ = writeln!(
                        s,
                        r#"<circle cx="{:.2}" cy="{:.2}" r="{radius}" fill="{}" fill-opacity="{:.3}" stroke="{}"/>"#,
                        centre.0,
                        centre.1,
                        fill.svg(),
                        fill.opacity(),
                        stroke.svg()
                    );
                }
                Item::Text {
                    at,
                    text,
                    size,
                    colour,
                    anchor,
                } => {
                    let a = match anchor {
                        Anchor::Start => "start",
                        Anchor::Middle => "middle",
                        Anchor::End => "end",
                    };
                    let _ = writeln!(
                        s,
                        r#"<text x="{:.2}" y="{:.2}" font-size="{size}" fill="{}" text-anchor="{a}">{}</text>"#,
                        at.0,
                        at.1,
                        colour.svg(),
                        xml_escape(text)
                    );
                }
            }
        }
        s.push_str("</svg>\n");
        s
    }

    /// The figure rasterised to RGBA (row-major, 4 bytes a pixel, not premultiplied).
    #[must_use]
    pub fn to_rgba(&self) -> Vec<u8> {
        use tiny_skia::{PathBuilder, Pixmap, Stroke};
        let mut pm = Pixmap::new(self.width.max(1), self.height.max(1)).expect("non-zero size");
        pm.fill(tiny_skia::Color::WHITE);
        for item in &self.items {
            match item {
                Item::Line {
                    from,
                    to,
                    colour,
                    width,
                } => {
                    let mut pb = PathBuilder::new();
                    pb.move_to(from.0 as f32, from.1 as f32);
                    pb.line_to(to.0 as f32, to.1 as f32);
                    if let Some(path) = pb.finish() {
                        paint_path(&mut pm, &path, None, Some((*colour, *width)));
                    }
                }
                Item::Polygon {
                    points,
                    fill,
                    stroke,
                    width,
                } => {
                    let mut pb = PathBuilder::new();
                    for (n, p) in points.iter().enumerate() {
                        if n == 0 {
                            pb.move_to(p.0 as f32, p.1 as f32);
                        } else {
                            pb.line_to(p.0 as f32, p.1 as f32);
                        }
                    }
                    pb.close();
                    if let Some(path) = pb.finish() {
                        paint_path(&mut pm, &path, Some(*fill), Some((*stroke, *width)));
                    }
                }
                Item::Circle {
                    centre,
                    radius,
                    fill,
                    stroke,
                } => {
                    if let Some(path) =
                        PathBuilder::from_circle(centre.0 as f32, centre.1 as f32, *radius as f32)
                    {
                        let hairline = f64::from(Stroke::default().width);
                        paint_path(&mut pm, &path, Some(*fill), Some((*stroke, hairline)));
                    }
                }
                Item::Text {
                    at,
                    text,
                    size,
                    colour,
                    anchor,
                } => {
                    let scale = (size / 7.0).round().max(1.0) as u32;
                    let w = f64::from(crate::render::overlay::text_width_px(text, scale));
                    let x = match anchor {
                        Anchor::Start => at.0,
                        Anchor::Middle => at.0 - w / 2.0,
                        Anchor::End => at.0 - w,
                    };
                    let top = at.1 - f64::from(7 * scale);
                    crate::render::overlay::draw_text(
                        &mut pm,
                        x.round() as f32,
                        top.round() as f32,
                        text,
                        scale as usize,
                        [colour.0, colour.1, colour.2, colour.3],
                    );
                }
            }
        }
        // demultiply: tiny-skia stores premultiplied alpha; the canvas is opaque white, so
        // every pixel is opaque and the bytes are already straight RGBA
        pm.take()
    }
}

/// Fills and/or strokes one path, anti-aliased, in straight-alpha colours.
fn paint_path(
    pm: &mut tiny_skia::Pixmap,
    path: &tiny_skia::Path,
    fill: Option<Rgba>,
    stroke: Option<(Rgba, f64)>,
) {
    use tiny_skia::{FillRule, Paint, Stroke, Transform};
    let paint = |c: Rgba| {
        let mut p = Paint::default();
        p.set_color_rgba8(c.0, c.1, c.2, c.3);
        p.anti_alias = true;
        p
    };
    if let Some(c) = fill {
        pm.fill_path(
            path,
            &paint(c),
            FillRule::Winding,
            Transform::identity(),
            None,
        );
    }
    if let Some((c, width)) = stroke {
        let st = Stroke {
            width: width as f32,
            ..Stroke::default()
        };
        pm.stroke_path(path, &paint(c), &st, Transform::identity(), None);
    }
}

fn xml_escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// The convex hull of points (Andrew's monotone chain), counter-clockwise in y-up terms,
/// without repeating the first point. Fewer than three distinct points come back as they are.
#[must_use]
pub fn convex_hull(points: &[(f64, f64)]) -> Vec<(f64, f64)> {
    let mut p: Vec<(f64, f64)> = points
        .iter()
        .copied()
        .filter(|q| q.0.is_finite() && q.1.is_finite())
        .collect();
    p.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    p.dedup();
    if p.len() < 3 {
        return p;
    }
    let cross = |o: (f64, f64), a: (f64, f64), b: (f64, f64)| {
        (a.0 - o.0) * (b.1 - o.1) - (a.1 - o.1) * (b.0 - o.0)
    };
    let mut lower: Vec<(f64, f64)> = Vec::new();
    for &q in &p {
        while lower.len() >= 2 && cross(lower[lower.len() - 2], lower[lower.len() - 1], q) <= 0.0 {
            lower.pop();
        }
        lower.push(q);
    }
    let mut upper: Vec<(f64, f64)> = Vec::new();
    for &q in p.iter().rev() {
        while upper.len() >= 2 && cross(upper[upper.len() - 2], upper[upper.len() - 1], q) <= 0.0 {
            upper.pop();
        }
        upper.push(q);
    }
    lower.pop();
    upper.pop();
    lower.extend(upper);
    lower
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hull_of_square_with_inner_points() {
        let pts = [
            (0.0, 0.0),
            (1.0, 0.0),
            (1.0, 1.0),
            (0.0, 1.0),
            (0.5, 0.5),
            (0.2, 0.7),
            (1.0, 0.5),
        ];
        let h = convex_hull(&pts);
        assert_eq!(h.len(), 4, "{h:?}");
        for c in [(0.0, 0.0), (1.0, 0.0), (1.0, 1.0), (0.0, 1.0)] {
            assert!(h.contains(&c));
        }
        assert_eq!(convex_hull(&[(1.0, 1.0), (1.0, 1.0)]).len(), 1);
    }

    #[test]
    fn svg_and_png_draw_the_same_items() {
        let mut f = Figure::new(40, 30);
        f.line((0.0, 15.0), (40.0, 15.0), Rgba::BLACK, 2.0);
        f.text((20.0, 10.0), "a<b", 7.0, Anchor::Middle);
        let svg = f.to_svg();
        assert!(svg.contains("<line") && svg.contains("a&lt;b"), "{svg}");
        let px = f.to_rgba();
        assert_eq!(px.len(), 40 * 30 * 4);
        let at = |x: usize, y: usize| px[(y * 40 + x) * 4];
        assert!(at(20, 15) < 50, "line drawn");
        assert_eq!(at(20, 25), 255, "background white");
    }
}
