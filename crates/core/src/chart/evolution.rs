//! Figures of shape through time and on a tree: estimates with intervals along a time axis
//! (older to the left), and a tree drawn in a morphospace plane.

use super::plots::{Axis, frame};
use super::{Anchor, Figure, GROUP_COLOURS, Item, Rgba};

/// One series along time: a value with an interval at each time.
#[derive(Clone, Debug)]
pub struct TimeSeries {
    pub name: String,
    /// Ages (Ma) of the points.
    pub ages: Vec<f64>,
    pub values: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// Series against age in Ma (older to the left), each a line through its values with interval
/// bars, slightly offset from each other so bars do not hide each other; non-finite values are
/// skipped (the line breaks there). `spans` (oldest, youngest) shade alternate time bins.
#[must_use]
pub fn through_time(
    series: &[TimeSeries],
    spans: &[(f64, f64)],
    y_title: &str,
    title: &str,
) -> Figure {
    let (w, h) = (760u32, 520u32);
    let mut f = Figure::new(w, h);
    let ages = series
        .iter()
        .flat_map(|s| s.ages.iter().copied())
        .chain(spans.iter().flat_map(|&(a, b)| [a, b]));
    // older (larger Ma) on the left: the axis runs from right to left
    let x = Axis::new(ages, f64::from(w) - 180.0, 80.0);
    let y = Axis::new(
        series
            .iter()
            .flat_map(|s| s.lower.iter().chain(&s.upper).chain(&s.values).copied())
            .chain(std::iter::once(0.0)),
        f64::from(h) - 70.0,
        50.0,
    );
    for (i, &(a, b)) in spans.iter().enumerate() {
        if i % 2 == 0 {
            let (xa, xb) = (x.px(a), x.px(b));
            f.items.push(Item::Polygon {
                points: vec![(xa, y.px_hi), (xb, y.px_hi), (xb, y.px_lo), (xa, y.px_lo)],
                fill: Rgba(240, 240, 240, 255),
                stroke: Rgba(240, 240, 240, 255),
                width: 0.0,
            });
        }
    }
    frame(&mut f, &x, &y, "Age (Ma)", y_title, title);
    let step = (x.px_lo - x.px_hi).abs() * 0.008;
    for (si, s) in series.iter().enumerate() {
        let c = GROUP_COLOURS[si % GROUP_COLOURS.len()];
        let off = (si as f64 - (series.len() as f64 - 1.0) / 2.0) * step;
        let mut prev: Option<(f64, f64)> = None;
        for i in 0..s.ages.len() {
            if !s.values[i].is_finite() {
                prev = None;
                continue;
            }
            let px = x.px(s.ages[i]) + off;
            let py = y.px(s.values[i]);
            if s.lower[i].is_finite() && s.upper[i].is_finite() {
                f.line((px, y.px(s.lower[i])), (px, y.px(s.upper[i])), c, 2.0);
                for v in [s.lower[i], s.upper[i]] {
                    f.line((px - 4.0, y.px(v)), (px + 4.0, y.px(v)), c, 1.5);
                }
            }
            if let Some(p) = prev {
                f.line(p, (px, py), c, 2.0);
            }
            prev = Some((px, py));
            f.items.push(Item::Circle {
                centre: (px, py),
                radius: 4.5,
                fill: c,
                stroke: Rgba::WHITE,
            });
        }
        let ly = 60.0 + 22.0 * si as f64;
        let lx = f64::from(w) - 165.0;
        f.line((lx, ly - 4.0), (lx + 16.0, ly - 4.0), c, 3.0);
        f.text((lx + 22.0, ly), s.name.clone(), 7.0, Anchor::Start);
    }
    f
}

/// A line from one point to another.
pub type Segment = ((f64, f64), (f64, f64));

/// A tree in a plane: `edges` join node positions (`nodes`), tips drawn as points coloured by
/// `tip_groups`, internal nodes as small grey points.
#[must_use]
pub fn tree_in_plane(
    tips: &[(f64, f64)],
    tip_groups: &[String],
    internal: &[(f64, f64)],
    edges: &[Segment],
    x_title: &str,
    y_title: &str,
    title: &str,
) -> Figure {
    let (w, h) = (720u32, 560u32);
    let mut f = Figure::new(w, h);
    let xs = tips.iter().chain(internal).map(|p| p.0);
    let ys = tips.iter().chain(internal).map(|p| p.1);
    let x = Axis::new(xs, 80.0, f64::from(w) - 170.0);
    let y = Axis::new(ys, f64::from(h) - 70.0, 50.0);
    frame(&mut f, &x, &y, x_title, y_title, title);
    for &(a, b) in edges {
        f.line(
            (x.px(a.0), y.px(a.1)),
            (x.px(b.0), y.px(b.1)),
            Rgba::GREY,
            1.2,
        );
    }
    for p in internal {
        f.items.push(Item::Circle {
            centre: (x.px(p.0), y.px(p.1)),
            radius: 2.5,
            fill: Rgba::GREY,
            stroke: Rgba::GREY,
        });
    }
    let mut names: Vec<&String> = Vec::new();
    for g in tip_groups {
        if !names.contains(&g) {
            names.push(g);
        }
    }
    for (i, p) in tips.iter().enumerate() {
        let gi = names.iter().position(|n| *n == &tip_groups[i]).unwrap_or(0);
        f.items.push(Item::Circle {
            centre: (x.px(p.0), y.px(p.1)),
            radius: 4.5,
            fill: GROUP_COLOURS[gi % GROUP_COLOURS.len()],
            stroke: Rgba::WHITE,
        });
    }
    for (gi, name) in names.iter().enumerate() {
        let ly = 60.0 + 22.0 * gi as f64;
        let lx = f64::from(w) - 155.0;
        f.items.push(Item::Circle {
            centre: (lx, ly - 4.0),
            radius: 5.0,
            fill: GROUP_COLOURS[gi % GROUP_COLOURS.len()],
            stroke: Rgba::WHITE,
        });
        f.text((lx + 12.0, ly), (*name).clone(), 7.0, Anchor::Start);
    }
    f
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn older_ages_are_drawn_left() {
        let s = TimeSeries {
            name: "a".into(),
            ages: vec![100.0, 70.0],
            values: vec![1.0, 2.0],
            lower: vec![0.5, 1.5],
            upper: vec![1.5, 2.5],
        };
        let f = through_time(&[s], &[(110.0, 90.0), (90.0, 60.0)], "v", "t");
        let centres: Vec<f64> = f
            .items
            .iter()
            .filter_map(|i| match i {
                Item::Circle { centre, radius, .. } if (*radius - 4.5).abs() < 1e-12 => {
                    Some(centre.0)
                }
                _ => None,
            })
            .collect();
        assert_eq!(centres.len(), 2);
        assert!(centres[0] < centres[1], "100 Ma left of 70 Ma: {centres:?}");
    }
}
