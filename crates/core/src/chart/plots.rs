//! The figures of a shape analysis, built from plain numbers.

use super::{Anchor, Figure, GROUP_COLOURS, Item, Rgba, convex_hull};

/// Font sizes (em, px) of the figures' text.
const TICK_PX: f64 = 11.0;
const AXIS_TITLE_PX: f64 = 13.0;
const LEGEND_PX: f64 = 12.0;
const TITLE_PX: f64 = 17.0;

/// A linear map from data to pixels on one axis, with "nice" tick values.
pub(super) struct Axis {
    pub(super) lo: f64,
    pub(super) hi: f64,
    pub(super) px_lo: f64,
    pub(super) px_hi: f64,
}

impl Axis {
    pub(super) fn new(values: impl Iterator<Item = f64>, px_lo: f64, px_hi: f64) -> Self {
        let (mut lo, mut hi) = values
            .filter(|v| v.is_finite())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                (a.min(v), b.max(v))
            });
        if !lo.is_finite() {
            (lo, hi) = (-1.0, 1.0);
        }
        if hi - lo < 1e-12 {
            lo -= 0.5;
            hi += 0.5;
        }
        let pad = 0.08 * (hi - lo);
        Self {
            lo: lo - pad,
            hi: hi + pad,
            px_lo,
            px_hi,
        }
    }

    pub(super) fn px(&self, v: f64) -> f64 {
        self.px_lo + (v - self.lo) / (self.hi - self.lo) * (self.px_hi - self.px_lo)
    }

    /// Tick values on a 1-2-5 series, about five of them.
    pub(super) fn ticks(&self) -> Vec<f64> {
        let raw = (self.hi - self.lo) / 5.0;
        let mag = 10f64.powf(raw.log10().floor());
        let step = [1.0, 2.0, 5.0, 10.0]
            .iter()
            .map(|m| m * mag)
            .find(|s| *s >= raw)
            .unwrap_or(10.0 * mag);
        let mut t = (self.lo / step).ceil() * step;
        let mut out = Vec::new();
        while t <= self.hi + 1e-12 * step {
            out.push(if t.abs() < step * 1e-9 { 0.0 } else { t });
            t += step;
        }
        out
    }
}

pub(super) fn tick_label(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.to_owned() }
}

/// Frame, ticks and titles of a two-axis chart (either axis may run backwards, e.g. time in Ma
/// growing to the left).
pub(super) fn frame(f: &mut Figure, x: &Axis, y: &Axis, x_title: &str, y_title: &str, title: &str) {
    let (l, r) = (x.px_lo.min(x.px_hi), x.px_lo.max(x.px_hi));
    let (t, b) = (y.px_hi.min(y.px_lo), y.px_hi.max(y.px_lo));
    for tv in x.ticks() {
        let px = x.px(tv);
        f.line((px, t), (px, b), Rgba::LIGHT, 1.0);
        f.text((px, b + 16.0), tick_label(tv), TICK_PX, Anchor::Middle);
    }
    for tv in y.ticks() {
        let py = y.px(tv);
        f.line((l, py), (r, py), Rgba::LIGHT, 1.0);
        f.text((l - 6.0, py + 4.0), tick_label(tv), TICK_PX, Anchor::End);
    }
    for (a, z) in [
        ((l, t), (r, t)),
        ((r, t), (r, b)),
        ((r, b), (l, b)),
        ((l, b), (l, t)),
    ] {
        f.line(a, z, Rgba::GREY, 1.0);
    }
    f.text(
        (f64::midpoint(l, r), b + 36.0),
        x_title,
        AXIS_TITLE_PX,
        Anchor::Middle,
    );
    f.text((l, t - 10.0), y_title, AXIS_TITLE_PX, Anchor::Start);
    f.text((f64::midpoint(l, r), 22.0), title, TITLE_PX, Anchor::Middle);
}

/// A scatter of two score columns coloured by group, each group's convex hull shaded, with a
/// legend. `groups[i]` is the group of point `i`.
#[must_use]
pub fn scatter_with_hulls(
    xs: &[f64],
    ys: &[f64],
    groups: &[String],
    x_title: &str,
    y_title: &str,
    title: &str,
) -> Figure {
    let (w, h) = (720u32, 560u32);
    let mut f = Figure::new(w, h);
    let x = Axis::new(xs.iter().copied(), 80.0, f64::from(w) - 170.0);
    let y = Axis::new(ys.iter().copied(), f64::from(h) - 70.0, 50.0);
    frame(&mut f, &x, &y, x_title, y_title, title);
    let mut names: Vec<&String> = Vec::new();
    for g in groups {
        if !names.contains(&g) {
            names.push(g);
        }
    }
    for (gi, name) in names.iter().enumerate() {
        let c = GROUP_COLOURS[gi % GROUP_COLOURS.len()];
        let pts: Vec<(f64, f64)> = (0..xs.len())
            .filter(|&i| &&groups[i] == name)
            .map(|i| (x.px(xs[i]), y.px(ys[i])))
            .collect();
        let hull = convex_hull(&pts);
        if hull.len() >= 3 {
            f.items.push(Item::Polygon {
                points: hull,
                fill: c.with_alpha(40),
                stroke: c.with_alpha(160),
                width: 1.5,
            });
        }
        for p in pts {
            f.items.push(Item::Circle {
                centre: p,
                radius: 4.5,
                fill: c,
                stroke: Rgba::WHITE,
            });
        }
        let ly = 60.0 + 22.0 * gi as f64;
        let lx = f64::from(w) - 155.0;
        f.items.push(Item::Circle {
            centre: (lx, ly - 4.0),
            radius: 5.0,
            fill: c,
            stroke: Rgba::WHITE,
        });
        f.text((lx + 12.0, ly), (*name).clone(), LEGEND_PX, Anchor::Start);
    }
    f
}

/// Estimates with intervals, one row per name (e.g. disparity per group). A row whose estimate
/// is not a number (a group of one has no variance) says "undefined" instead of a point.
#[must_use]
pub fn intervals(
    names: &[String],
    estimate: &[f64],
    lo: &[f64],
    hi: &[f64],
    x_title: &str,
    title: &str,
) -> Figure {
    let rows = names.len().max(1);
    let (w, h) = (720u32, (110 + 44 * rows) as u32);
    let mut f = Figure::new(w, h);
    let x = Axis::new(
        lo.iter().chain(hi).chain(estimate).copied(),
        170.0,
        f64::from(w) - 40.0,
    );
    let top = 50.0;
    let bottom = f64::from(h) - 60.0;
    let y = Axis {
        lo: -0.5,
        hi: rows as f64 - 0.5,
        px_lo: bottom,
        px_hi: top,
    };
    for tv in x.ticks() {
        let px = x.px(tv);
        f.line((px, top), (px, bottom), Rgba::LIGHT, 1.0);
        f.text((px, bottom + 16.0), tick_label(tv), TICK_PX, Anchor::Middle);
    }
    f.line((x.px_lo, bottom), (x.px_hi, bottom), Rgba::GREY, 1.0);
    f.text(
        (f64::midpoint(x.px_lo, x.px_hi), bottom + 36.0),
        x_title,
        AXIS_TITLE_PX,
        Anchor::Middle,
    );
    f.text((f64::from(w) / 2.0, 22.0), title, TITLE_PX, Anchor::Middle);
    for (i, name) in names.iter().enumerate() {
        let py = y.px((rows - 1 - i) as f64);
        let c = GROUP_COLOURS[i % GROUP_COLOURS.len()];
        f.text(
            (x.px_lo - 10.0, py + 4.0),
            name.clone(),
            LEGEND_PX,
            Anchor::End,
        );
        if lo[i].is_finite() && hi[i].is_finite() {
            f.line((x.px(lo[i]), py), (x.px(hi[i]), py), c, 3.0);
            for v in [lo[i], hi[i]] {
                f.line((x.px(v), py - 7.0), (x.px(v), py + 7.0), c, 2.0);
            }
        }
        if estimate[i].is_finite() {
            f.items.push(Item::Circle {
                centre: (x.px(estimate[i]), py),
                radius: 5.5,
                fill: c,
                stroke: Rgba::BLACK,
            });
        } else {
            f.text((x.px_lo + 8.0, py + 4.0), "undefined", 7.0, Anchor::Start);
        }
    }
    f
}

/// Shapes as wireframes, projected on two coordinate axes: the mean in grey and each extra
/// shape (e.g. the extremes along a principal component) in its own colour, the same `edges`
/// joining landmarks in all. `shapes[s][l]` is landmark `l` of shape `s`.
#[must_use]
pub fn wireframes(
    shapes: &[(String, Vec<[f64; 3]>)],
    edges: &[(usize, usize)],
    axes: (usize, usize),
    title: &str,
) -> Figure {
    let (w, h) = (720u32, 560u32);
    let mut f = Figure::new(w, h);
    let all = || shapes.iter().flat_map(|(_, s)| s.iter());
    // equal scale on both axes: a wireframe must not be stretched
    let span = |a: usize| {
        let (lo, hi) = all().fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), p| {
            (l.min(p[a]), h.max(p[a]))
        });
        (lo, hi)
    };
    let (x0, x1) = span(axes.0);
    let (y0, y1) = span(axes.1);
    let (pw, ph) = (f64::from(w) - 200.0, f64::from(h) - 120.0);
    let scale = (pw / (x1 - x0).max(1e-12)).min(ph / (y1 - y0).max(1e-12));
    let cx = f64::midpoint(x0, x1);
    let cy = f64::midpoint(y0, y1);
    let to_px = |p: &[f64; 3]| {
        (
            40.0 + pw / 2.0 + (p[axes.0] - cx) * scale,
            60.0 + ph / 2.0 - (p[axes.1] - cy) * scale,
        )
    };
    f.text((f64::from(w) / 2.0, 22.0), title, TITLE_PX, Anchor::Middle);
    let axis_names = ["x", "y", "z"];
    f.text(
        (40.0, f64::from(h) - 20.0),
        format!(
            "projection on {} (right) and {} (up)",
            axis_names[axes.0], axis_names[axes.1]
        ),
        TICK_PX,
        Anchor::Start,
    );
    for (si, (name, shape)) in shapes.iter().enumerate() {
        let c = if si == 0 {
            Rgba::GREY
        } else {
            GROUP_COLOURS[(si - 1) % GROUP_COLOURS.len()]
        };
        let width = if si == 0 { 2.5 } else { 1.5 };
        for &(a, b) in edges {
            if a < shape.len() && b < shape.len() {
                f.line(to_px(&shape[a]), to_px(&shape[b]), c, width);
            }
        }
        for p in shape {
            f.items.push(Item::Circle {
                centre: to_px(p),
                radius: 2.5,
                fill: c,
                stroke: c,
            });
        }
        let ly = 60.0 + 22.0 * si as f64;
        let lx = f64::from(w) - 150.0;
        f.line((lx - 20.0, ly - 4.0), (lx - 4.0, ly - 4.0), c, 3.0);
        f.text((lx, ly), name.clone(), LEGEND_PX, Anchor::Start);
    }
    f
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        let a = Axis::new([0.013, 0.087].into_iter(), 0.0, 100.0);
        let t = a.ticks();
        assert!(t.len() >= 4 && t.len() <= 11, "{t:?}");
        assert!(t.iter().all(|v| *v >= a.lo && *v <= a.hi));
        let step = t[1] - t[0];
        assert!(
            (step - 0.01).abs() < 1e-12 || (step - 0.02).abs() < 1e-12,
            "{step}"
        );
    }

    #[test]
    fn scatter_has_a_hull_per_group_of_three_or_more() {
        let xs = [0.0, 1.0, 0.5, 3.0, 4.0, 3.5, 3.6];
        let ys = [0.0, 0.0, 1.0, 3.0, 3.0, 4.0, 3.4];
        let g: Vec<String> = ["a", "a", "a", "b", "b", "b", "b"]
            .iter()
            .map(|s| (*s).to_owned())
            .collect();
        let f = scatter_with_hulls(&xs, &ys, &g, "PC1", "PC2", "morphospace");
        let hulls = f
            .items
            .iter()
            .filter(|i| matches!(i, Item::Polygon { .. }))
            .count();
        assert_eq!(hulls, 2);
        let circles = f
            .items
            .iter()
            .filter(|i| matches!(i, Item::Circle { .. }))
            .count();
        assert_eq!(circles, 7 + 2, "points and legend");
    }
}
