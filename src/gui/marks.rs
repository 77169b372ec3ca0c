//! Landmarks drawn over the views.
//!
//! In a plane view a landmark within [`NEAR_SLICES`] slice spacings of the plane is drawn: a
//! filled dot when it lies on the shown slice (within half a spacing), a ring when it lies in
//! front (towards the viewer) and a dashed ring when it lies behind, fading with distance.
//! In the 3D view a landmark is drawn unless the surface in the picture lies in front of it.
//! Labels are placed beside their marks where they overlap neither another label nor a mark.

use eframe::egui::{self, Align2, Color32, FontId, Pos2, Rect, Stroke, Vec2};

use super::camera::ScreenMap;
use super::desk::Desk;
use super::state::{Scan, ViewId};
use super::view::Shown;
use super::worker::RenderKey;
use sutura_core::geometry::WorldPoint;
use sutura_core::landmarks::palette;
use sutura_core::landmarks::project::LandmarkState;
use sutura_core::volume::VolumeSource;

/// How many slice spacings from the plane a landmark is still drawn in a plane view.
pub const NEAR_SLICES: f64 = 8.0;
/// How far (points) from a landmark's mark a press grabs it for dragging.
pub const GRAB_POINTS: f32 = 9.0;

/// Colours of the landmark states (the same in every view, the checklist and PLY exports).
pub const PLACED: Color32 = rgb(palette::PLACED);
pub const ESTIMATED: Color32 = rgb(palette::ESTIMATED);
pub const MISSING: Color32 = rgb(palette::MISSING);
pub const OPEN: Color32 = rgb(palette::OPEN);
/// The current landmark's highlight.
pub const CURRENT: Color32 = rgb(palette::CURRENT);

const fn rgb(c: [u8; 3]) -> Color32 {
    Color32::from_rgb(c[0], c[1], c[2])
}

/// The colour of a landmark state (`None`: not digitised yet).
#[must_use]
pub fn state_colour(state: Option<LandmarkState>) -> Color32 {
    match state {
        Some(LandmarkState::Placed) => PLACED,
        Some(LandmarkState::Estimated) => ESTIMATED,
        Some(LandmarkState::Missing) => MISSING,
        None => OPEN,
    }
}

/// Where a landmark sits relative to a plane view's slice.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Depth {
    On,
    /// Towards the viewer, by this many slice spacings.
    InFront(f64),
    Behind(f64),
}

/// The slice spacing of a plane view: the voxel spacing along its normal.
#[must_use]
pub fn slice_spacing(volume: &dyn VolumeSource, m: &ScreenMap) -> f64 {
    let n = m.u.cross(&m.v);
    let sp = volume.spacing_mm();
    // the spacing seen along n: the voxel box's extent along n, at least the smallest spacing
    let along = (n.x.abs() * sp[0]) + (n.y.abs() * sp[1]) + (n.z.abs() * sp[2]);
    along.max(sp[0].min(sp[1]).min(sp[2]))
}

/// Where `p` lies relative to the plane of `m`, or `None` if farther than [`NEAR_SLICES`].
/// The screen's `u × v` points into the screen (away from the viewer).
#[must_use]
pub fn depth_of(m: &ScreenMap, spacing: f64, p: WorldPoint) -> Option<Depth> {
    let n = m.u.cross(&m.v);
    let d = (p.0 - m.origin.0).dot(&n) / spacing;
    if d.abs() <= 0.5 {
        Some(Depth::On)
    } else if d.abs() > NEAR_SLICES {
        None
    } else if d < 0.0 {
        Some(Depth::InFront(-d))
    } else {
        Some(Depth::Behind(d))
    }
}

fn pos(p: [f64; 2]) -> Pos2 {
    Pos2::new(p[0] as f32, p[1] as f32)
}

/// The landmarks of the selected trial in a plane view. `drag` is a landmark being moved
/// (drawn at the pointer instead).
#[allow(clippy::too_many_arguments)] // reason: what to draw, where, and how it is styled
pub fn plane_marks(
    painter: &egui::Painter,
    scan: &Scan,
    m: &ScreenMap,
    d: &Desk,
    drag: Option<&(String, WorldPoint)>,
    labels: bool,
    on_stage: bool,
) {
    let Some(t) = d.trial_ref() else {
        return;
    };
    let spacing = slice_spacing(scan.grid(), m);
    let r = if on_stage { 5.5 } else { 3.5 };
    let mut labels_out = Labels::default();
    for e in &t.landmarks {
        let Some(p) = e.position_mm else {
            continue;
        };
        let mut p = WorldPoint::new(p[0], p[1], p[2]);
        if let Some((id, to)) = drag
            && *id == e.id
        {
            p = *to;
        }
        let Some(depth) = depth_of(m, spacing, p) else {
            continue;
        };
        let at = pos(m.screen(p));
        if !painter.clip_rect().expand(10.0).contains(at) {
            continue;
        }
        let base = state_colour(Some(e.state));
        let current = d.current.as_deref() == Some(e.id.as_str());
        let fade = |k: f64| (1.0 - 0.75 * (k / NEAR_SLICES)) as f32;
        let shadow = Stroke::new(3.0, Color32::from_black_alpha(160));
        match depth {
            Depth::On => {
                painter.circle_filled(at, r + 1.5, Color32::from_black_alpha(170));
                painter.circle_filled(at, r, base);
            }
            Depth::InFront(k) => {
                let c = base.gamma_multiply(fade(k));
                painter.circle_stroke(at, r, shadow);
                painter.circle_stroke(at, r, Stroke::new(1.8, c));
                painter.circle_filled(at, 1.5, c);
            }
            Depth::Behind(k) => {
                let c = base.gamma_multiply(fade(k));
                let n = 8;
                for i in 0..n {
                    if i % 2 == 1 {
                        continue;
                    }
                    let a0 = i as f32 / n as f32 * std::f32::consts::TAU;
                    let a1 = (i + 1) as f32 / n as f32 * std::f32::consts::TAU;
                    let q = |a: f32| at + Vec2::new(a.cos(), a.sin()) * r;
                    painter.line_segment([q(a0), q(a1)], Stroke::new(1.6, c));
                }
            }
        }
        if current {
            painter.circle_stroke(at, r + 4.0, Stroke::new(1.5, CURRENT));
        }
        labels_out.mark(at, r + if current { 4.0 } else { 0.0 });
        if labels && on_stage {
            labels_out.label(at, r, &e.id, current);
        }
    }
    labels_out.draw(painter);
    // curves: traced control points (squares) and semilandmarks (diamonds) near the slice
    for c in &t.curves {
        let near = |p: &[f64; 3]| {
            let w = WorldPoint::new(p[0], p[1], p[2]);
            depth_of(m, spacing, w).map(|d| (pos(m.screen(w)), d))
        };
        for p in c.traced_mm.iter().flatten() {
            if let Some((at, d)) = near(p) {
                let col = CURVE.gamma_multiply(if d == Depth::On { 1.0 } else { 0.5 });
                painter.rect_stroke(
                    Rect::from_center_size(at, Vec2::splat(7.0)),
                    0.0,
                    Stroke::new(1.5, col),
                    egui::StrokeKind::Middle,
                );
            }
        }
        for p in c.semilandmarks_mm.iter().flatten() {
            if let Some((at, d)) = near(p) {
                let col = CURVE.gamma_multiply(if d == Depth::On { 1.0 } else { 0.5 });
                diamond(painter, at, 3.5, col);
            }
        }
    }
}

/// The colour of curves: traced points and semilandmarks.
pub const CURVE: Color32 = rgb(palette::CURVE);

fn diamond(painter: &egui::Painter, at: Pos2, d: f32, col: Color32) {
    painter.add(egui::Shape::convex_polygon(
        vec![
            at + Vec2::new(0.0, -d),
            at + Vec2::new(d, 0.0),
            at + Vec2::new(0.0, d),
            at + Vec2::new(-d, 0.0),
        ],
        col,
        Stroke::new(1.0, Color32::from_black_alpha(180)),
    ));
}

/// Places landmark labels so that they overlap neither each other nor the marks: each label
/// tries a ring of places around its mark (right, left, above, below, then the diagonals, then
/// farther out) and takes the first free one; the current landmark's label is placed first.
#[derive(Default)]
pub struct Labels {
    /// Marks (centre, radius) and the labels to place (mark centre, radius, text, current).
    marks: Vec<(Pos2, f32)>,
    wanted: Vec<(Pos2, f32, String, bool)>,
}

impl Labels {
    pub fn mark(&mut self, at: Pos2, r: f32) {
        self.marks.push((at, r));
    }

    pub fn label(&mut self, at: Pos2, r: f32, text: &str, current: bool) {
        self.wanted.push((at, r, text.to_owned(), current));
    }

    /// The rectangles chosen for each label, in the order given.
    #[must_use]
    pub fn layout(&self, sizes: &[Vec2]) -> Vec<Rect> {
        let mut taken: Vec<Rect> = self
            .marks
            .iter()
            .map(|(c, r)| Rect::from_center_size(*c, Vec2::splat(2.0 * r + 2.0)))
            .collect();
        let mut order: Vec<usize> = (0..self.wanted.len()).collect();
        order.sort_by_key(|&i| !self.wanted[i].3);
        let mut out = vec![Rect::NOTHING; self.wanted.len()];
        for i in order {
            let (c, r, _, _) = &self.wanted[i];
            let size = sizes[i];
            let gap = r + 4.0;
            let candidates = |k: f32| {
                let g = gap + k * (size.y + 2.0);
                [
                    Pos2::new(c.x + g, c.y - size.y / 2.0),
                    Pos2::new(c.x - g - size.x, c.y - size.y / 2.0),
                    Pos2::new(c.x - size.x / 2.0, c.y - g - size.y),
                    Pos2::new(c.x - size.x / 2.0, c.y + g),
                    Pos2::new(c.x + g, c.y - g - size.y),
                    Pos2::new(c.x - g - size.x, c.y - g - size.y),
                    Pos2::new(c.x + g, c.y + g),
                    Pos2::new(c.x - g - size.x, c.y + g),
                ]
            };
            let free = |rect: &Rect| taken.iter().all(|t| !t.intersects(*rect));
            let chosen = (0..4)
                .flat_map(|k| candidates(k as f32))
                .map(|p| Rect::from_min_size(p, size))
                .find(|rect| free(rect))
                .unwrap_or_else(|| Rect::from_min_size(candidates(0.0)[0], size));
            taken.push(chosen.expand(1.0));
            out[i] = chosen;
        }
        out
    }

    /// Draws the labels where [`Labels::layout`] puts them.
    pub fn draw(self, painter: &egui::Painter) {
        let galleys: Vec<_> = self
            .wanted
            .iter()
            .map(|(_, _, text, current)| {
                let colour = if *current {
                    CURRENT
                } else {
                    Color32::from_gray(225)
                };
                painter.layout_no_wrap(text.clone(), FontId::proportional(11.0), colour)
            })
            .collect();
        let sizes: Vec<Vec2> = galleys
            .iter()
            .map(|g| g.size() + Vec2::new(4.0, 2.0))
            .collect();
        let rects = self.layout(&sizes);
        for ((g, rect), (_, _, _, current)) in galleys.into_iter().zip(rects).zip(&self.wanted) {
            let colour = if *current {
                CURRENT
            } else {
                Color32::from_gray(225)
            };
            painter.rect_filled(rect, 2.0, Color32::from_black_alpha(150));
            painter.galley(rect.min + Vec2::new(2.0, 1.0), g, colour);
        }
    }
}

/// The placed landmark whose mark on a plane view lies within [`GRAB_POINTS`] of `at` (only
/// those on or near the shown slice), nearest first.
#[must_use]
pub fn grab_on_plane(scan: &Scan, m: &ScreenMap, d: &Desk, at: Pos2) -> Option<String> {
    let t = d.trial_ref()?;
    let spacing = slice_spacing(scan.grid(), m);
    t.landmarks
        .iter()
        .filter_map(|e| {
            let p = e.position_mm?;
            let p = WorldPoint::new(p[0], p[1], p[2]);
            depth_of(m, spacing, p)?;
            let d = pos(m.screen(p)).distance(at);
            (d <= GRAB_POINTS).then_some((d, e.id.clone()))
        })
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, id)| id)
}

/// The landmarks (and curves' semilandmarks) of the selected trial over the 3D view's picture,
/// hidden where the picture's surface lies in front of them.
pub fn volume_marks(
    painter: &egui::Painter,
    rect: Rect,
    scan: &Scan,
    shown: &Shown,
    d: &Desk,
    labels: bool,
) {
    let (Some(t), RenderKey::Volume(k)) = (d.trial_ref(), &shown.key) else {
        return;
    };
    let cam = &k.camera;
    let dir = cam.view_dir.normalize();
    let sp = scan.grid().spacing_mm();
    let tolerance = 2.0 * sp[0].max(sp[1]).max(sp[2]);
    let [w, h] = shown.key.size();
    // the picture is stretched over the rect: pixel (col, row) → point
    let sx = rect.width() / w as f32;
    let sy = rect.height() / h as f32;
    let visible = |p: [f64; 3]| -> Option<Pos2> {
        let p = WorldPoint::new(p[0], p[1], p[2]);
        let (col, row) = cam.project(p).ok()?;
        if col < -0.5 || row < -0.5 || col > w as f64 - 0.5 || row > h as f64 - 0.5 {
            return None;
        }
        let ci = (col.round().max(0.0) as usize).min(w - 1);
        let ri = (row.round().max(0.0) as usize).min(h - 1);
        let hidden = shown
            .hits
            .as_ref()
            .and_then(|hits| hits.get(ci + w * ri).copied().flatten())
            .is_some_and(|hit| (p.0 - hit.0).dot(&dir) > tolerance);
        (!hidden).then(|| {
            Pos2::new(
                rect.min.x + (col as f32 + 0.5) * sx,
                rect.min.y + (row as f32 + 0.5) * sy,
            )
        })
    };
    for c in &t.curves {
        for p in c.semilandmarks_mm.iter().flatten() {
            if let Some(at) = visible(*p) {
                diamond(painter, at, 3.0, CURVE);
            }
        }
    }
    let mut labels_out = Labels::default();
    for e in &t.landmarks {
        let Some(at) = e.position_mm.and_then(visible) else {
            continue;
        };
        let current = d.current.as_deref() == Some(e.id.as_str());
        painter.circle_filled(at, 5.5, Color32::from_black_alpha(170));
        painter.circle_filled(at, 4.0, state_colour(Some(e.state)));
        if current {
            painter.circle_stroke(at, 8.0, Stroke::new(1.5, CURRENT));
        }
        labels_out.mark(at, if current { 8.0 } else { 5.5 });
        if labels {
            labels_out.label(at, 5.5, &e.id, current);
        }
    }
    labels_out.draw(painter);
}

/// The badge over the stage while placing: what a click will do.
pub fn placing_badge(painter: &egui::Painter, rect: Rect, d: &Desk, view: ViewId) {
    let text = match (d.current.as_deref(), &d.tracing) {
        (_, Some((c, seg))) => format!(
            "tracing {c}, segment {}: click control points in order",
            seg + 1
        ),
        (Some(c), None) if view == ViewId::Volume => format!("placing {c}: click the surface"),
        (Some(c), None) => format!("placing {c}: click to place · drag a mark to move it"),
        (None, None) => "placing: every landmark is done; pick one in the checklist".to_owned(),
    };
    let galley = painter.layout_no_wrap(text, FontId::proportional(13.0), Color32::BLACK);
    let size = galley.size() + Vec2::new(16.0, 8.0);
    let at = Align2::CENTER_TOP.align_size_within_rect(size, rect.shrink(8.0));
    painter.rect_filled(at, 4.0, CURRENT);
    painter.galley(at.min + Vec2::new(8.0, 4.0), galley, Color32::BLACK);
    painter.rect_stroke(
        rect.shrink(1.0),
        3.0,
        Stroke::new(2.0, CURRENT.gamma_multiply(0.8)),
        egui::StrokeKind::Inside,
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_of_close_marks_do_not_overlap_each_other_or_the_marks() {
        let mut l = Labels::default();
        // three marks a few points apart, as close landmarks are on a zoomed-out view
        let pts = [
            Pos2::new(100.0, 100.0),
            Pos2::new(106.0, 103.0),
            Pos2::new(103.0, 110.0),
        ];
        for (i, p) in pts.iter().enumerate() {
            l.mark(*p, 5.5);
            l.label(*p, 5.5, &format!("landmark_{i}"), i == 1);
        }
        let sizes = vec![Vec2::new(70.0, 14.0); 3];
        let rects = l.layout(&sizes);
        for (i, a) in rects.iter().enumerate() {
            for b in &rects[i + 1..] {
                assert!(!a.intersects(*b), "{a:?} overlaps {b:?}");
            }
            for p in &pts {
                assert!(!a.contains(*p), "{a:?} covers the mark at {p:?}");
            }
        }
    }
}
