//! Charts for shape results: a morphospace scatter with group hulls, estimates with intervals,
//! and wireframe shapes — each one scene ([`Figure`]) drawn to SVG text or to a PNG.
//!
//! A figure is described once in pixel coordinates (origin top-left) and written as SVG
//! ([`Figure::to_svg`]); its PNG is that SVG rasterised by resvg ([`Figure::to_rgba`]), so the
//! two always show the same thing and every glyph is a real one, set in the font the crate
//! bundles ([`crate::render::text`], `DejaVu Sans`), never one looked up on the system.
//! [`plots`] builds the figures from plain numbers.
//!
//! Imports `render` only for its font; knows nothing about shapes or volumes.

pub mod evolution;
pub mod plots;

use resvg::{tiny_skia, usvg};
use std::fmt::Write as _;
use std::sync::{Arc, OnceLock};

/// What can go wrong turning a figure into pixels.
#[derive(Debug, thiserror::Error)]
pub enum ChartError {
    #[error("chart of {width}x{height} pixels: too large or empty to rasterise")]
    BadSize { width: u32, height: u32 },
    #[error("chart SVG could not be read back for rasterising: {0}")]
    Svg(#[from] usvg::Error),
}

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
    /// Text with its baseline-left (or middle/end) at `at`; `size` is the font size (em) in px.
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
            r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="{family}, sans-serif">"#,
            w = self.width,
            h = self.height,
            family = crate::render::text::FONT_FAMILY,
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

    /// The figure rasterised to RGBA (row-major, 4 bytes a pixel, not premultiplied): its SVG
    /// drawn by resvg at one pixel per SVG unit, text in the bundled font.
    pub fn to_rgba(&self) -> Result<Vec<u8>, ChartError> {
        let bad = ChartError::BadSize {
            width: self.width,
            height: self.height,
        };
        let mut pm = tiny_skia::Pixmap::new(self.width, self.height).ok_or(bad)?;
        let opt = usvg::Options {
            font_family: crate::render::text::FONT_FAMILY.to_owned(),
            fontdb: fonts(),
            ..usvg::Options::default()
        };
        let tree = usvg::Tree::from_str(&self.to_svg(), &opt)?;
        pm.fill(tiny_skia::Color::WHITE);
        resvg::render(&tree, tiny_skia::Transform::identity(), &mut pm.as_mut());
        // tiny-skia stores premultiplied alpha; the canvas is opaque white, so every pixel is
        // opaque and the bytes are already straight RGBA
        Ok(pm.take())
    }
}

/// The font database resvg sets text from: the bundled font alone, also standing for the
/// generic `sans-serif`.
fn fonts() -> Arc<usvg::fontdb::Database> {
    static DB: OnceLock<Arc<usvg::fontdb::Database>> = OnceLock::new();
    DB.get_or_init(|| {
        let mut db = usvg::fontdb::Database::new();
        db.load_font_source(usvg::fontdb::Source::Binary(Arc::new(
            crate::render::text::FONT,
        )));
        db.set_sans_serif_family(crate::render::text::FONT_FAMILY);
        Arc::new(db)
    })
    .clone()
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
        f.text((20.0, 10.0), "a<b", 9.0, Anchor::Middle);
        let svg = f.to_svg();
        assert!(svg.contains("<line") && svg.contains("a&lt;b"), "{svg}");
        let px = f.to_rgba().unwrap();
        assert_eq!(px.len(), 40 * 30 * 4);
        let at = |x: usize, y: usize| px[(y * 40 + x) * 4];
        assert!(at(20, 15) < 50, "line drawn");
        assert_eq!(at(20, 25), 255, "background white");
        assert!(
            (0..12).any(|y| (10..30).any(|x| at(x, y) < 128)),
            "text drawn"
        );
    }

    /// The value of an attribute of the SVG's root element.
    fn root_attr(svg: &str, name: &str) -> u32 {
        let head = &svg[..svg.find('>').unwrap()];
        let from = head.find(&format!(" {name}=\"")).unwrap() + name.len() + 3;
        head[from..from + head[from..].find('"').unwrap()]
            .parse()
            .unwrap()
    }

    #[test]
    fn png_and_svg_agree_in_size() {
        let names: Vec<String> = vec!["a".into(), "b".into()];
        let figures = [
            plots::scatter_with_hulls(
                &[0.0, 1.0, 2.0, 3.0],
                &[1.0, 0.0, 2.0, 1.0],
                &[
                    names[0].clone(),
                    names[0].clone(),
                    names[1].clone(),
                    names[1].clone(),
                ],
                "PC1 (50.0%)",
                "PC2 (30.0%)",
                "Morphospace",
            ),
            plots::intervals(&names, &[1.0, 2.0], &[0.5, 1.5], &[1.5, 2.5], "x", "t"),
        ];
        for f in figures {
            let svg = f.to_svg();
            let (w, h) = (root_attr(&svg, "width"), root_attr(&svg, "height"));
            assert_eq!((w, h), (f.width, f.height));
            assert_eq!(f.to_rgba().unwrap().len(), (w * h * 4) as usize);
        }
        assert!(matches!(
            Figure::new(0, 10).to_rgba(),
            Err(ChartError::BadSize { .. })
        ));
    }

    /// A figure of `like`'s size holding one text item alone.
    fn text_alone(like: &Figure, at: (f64, f64), text: &str, size: f64) -> Vec<u8> {
        let mut f = Figure::new(like.width, like.height);
        f.text(at, text, size, Anchor::Start);
        f.to_rgba().unwrap()
    }

    /// Pixels of rows `rows` and columns `cols` of an RGBA image `width` wide.
    fn crop(
        px: &[u8],
        width: u32,
        rows: std::ops::Range<usize>,
        cols: std::ops::Range<usize>,
    ) -> Vec<u8> {
        let w = width as usize;
        rows.flat_map(|y| px[(y * w + cols.start) * 4..(y * w + cols.end) * 4].to_vec())
            .collect()
    }

    /// Columns holding ink (any channel below 128) within `rows`.
    fn ink_columns(px: &[u8], width: u32, rows: std::ops::Range<usize>) -> Vec<usize> {
        let w = width as usize;
        (0..w)
            .filter(|&x| rows.clone().any(|y| px[(y * w + x) * 4] < 128))
            .collect()
    }

    #[test]
    fn percent_sign_and_group_names_are_real_glyphs() {
        let groups: Vec<String> = ["Harrowdene Clay", "Harrowdene Clay", "Harrowdene Clay"]
            .iter()
            .map(|s| (*s).to_owned())
            .chain(["Tarn Flats"; 3].iter().map(|s| (*s).to_owned()))
            .collect();
        let f = plots::scatter_with_hulls(
            &[0.0, 1.0, 0.5, 3.0, 4.0, 3.5],
            &[0.0, 0.0, 1.0, 3.0, 3.0, 4.0],
            &groups,
            "PC1 (93.5%)",
            "PC2 (4.1%)",
            "Morphospace",
        );
        let png = f.to_rgba().unwrap();
        // Find the items as the chart placed them.
        let text_at = |t: &str| {
            f.items
                .iter()
                .find_map(|i| match i {
                    Item::Text { at, text, size, .. } if text == t => Some((*at, *size)),
                    _ => None,
                })
                .unwrap()
        };
        for label in ["PC2 (4.1%)", "Harrowdene Clay"] {
            let (at, size) = text_at(label);
            let rows = (at.1 - size) as usize..(at.1 + 0.4 * size) as usize;
            let cols = at.0 as usize - 2..f.width as usize;
            // the chart's pixels there are exactly those of the text rendered alone
            let alone = text_alone(&f, at, label, size);
            assert_eq!(
                crop(&png, f.width, rows.clone(), cols.clone()),
                crop(&alone, f.width, rows.clone(), cols.clone()),
                "{label}: the chart draws its text as the text alone would be drawn"
            );
        }
        // '%' is drawn: it widens the label by about its advance, and it is not the box a
        // missing glyph would get
        let (at, size) = text_at("PC2 (4.1%)");
        let rows = (at.1 - size) as usize..(at.1 + 0.4 * size) as usize;
        let with = ink_columns(
            &text_alone(&f, at, "PC2 (4.1%)", size),
            f.width,
            rows.clone(),
        );
        let without = ink_columns(
            &text_alone(&f, at, "PC2 (4.1)", size),
            f.width,
            rows.clone(),
        );
        let pct = crate::render::text::text_width_px("%", size as f32);
        let grew = (with.last().unwrap() - without.last().unwrap()) as f32;
        assert!(
            (grew - pct).abs() < 2.5,
            "'%' widened the label by {grew} px, advance {pct}"
        );
        let glyph = text_alone(&f, at, "%", size);
        let missing = text_alone(&f, at, "\u{E000}", size);
        assert!(ink_columns(&glyph, f.width, rows.clone()).len() > 4);
        assert_ne!(glyph, missing, "'%' drawn as the missing-glyph box");
        // group names keep their case
        let (at, size) = text_at("Harrowdene Clay");
        assert_ne!(
            text_alone(&f, at, "Harrowdene Clay", size),
            text_alone(&f, at, "HARROWDENE CLAY", size)
        );
        assert!(f.to_svg().contains(">Harrowdene Clay</text>"));
    }
}
