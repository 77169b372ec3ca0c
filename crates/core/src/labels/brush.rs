//! Brush and eraser strokes: a polyline of world points swept by a disc on a voxel plane or by
//! a ball in 3D.
//!
//! A voxel is under the stroke when its centre lies within the radius of the polyline
//! (segment by segment, in world millimetres, so anisotropic voxels get a round brush). A disc
//! stroke lies on one voxel plane: the points are moved onto the plane of the first point
//! (`axis` index rounded to the nearest voxel) and only that plane's voxels are painted. Only
//! the bricks under the stroke's box are visited ([`LabelVolume::apply_in_box`]), so a stroke
//! costs the voxels it covers, whatever the scan's size.

use std::ops::Range;

use nalgebra::{Point3, Vector3};

use super::{Combine, Edit, LabelVolume, LabelsError};
use crate::geometry::{Affine3, VoxelPoint, WorldPoint};

/// The brush's shape.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BrushShape {
    /// A disc on the voxel plane normal to `axis` (0 = i, 1 = j, 2 = k).
    Disc { axis: usize },
    /// A ball in 3D.
    Ball,
}

/// One stroke.
#[derive(Clone, Debug)]
pub struct Stroke {
    /// The polyline, world mm (one point paints a single disc or ball).
    pub points: Vec<WorldPoint>,
    pub radius_mm: f64,
    pub shape: BrushShape,
}

/// Paints (`Combine::Add`) or erases (`Combine::Subtract`) a stroke into label `value`.
pub fn paint(
    labels: &mut LabelVolume,
    world_from_voxel: &Affine3,
    stroke: &Stroke,
    value: u8,
    mode: Combine,
    overwrite: bool,
) -> Result<Edit, LabelsError> {
    let dims = labels.dims();
    let (bounds, segments) = prepare(dims, world_from_voxel, stroke)?;
    // a relative tolerance keeps voxels lying exactly on the brush's rim
    let r2 = stroke.radius_mm * stroke.radius_mm * (1.0 + 1e-9);
    labels.apply_in_box(&bounds, value, mode, overwrite, |i, j, k| {
        let p = world_from_voxel
            .voxel_to_world(VoxelPoint::new(i as f64, j as f64, k as f64))
            .0;
        segments
            .iter()
            .any(|(a, b)| dist2_to_segment(p, *a, *b) <= r2)
    })
}

/// The voxel box a stroke can touch and its segments (world mm, on the plane for a disc).
#[allow(
    clippy::type_complexity,
    reason = "a box and a list of segments, used once"
)]
fn prepare(
    dims: [usize; 3],
    world_from_voxel: &Affine3,
    stroke: &Stroke,
) -> Result<([Range<usize>; 3], Vec<(Point3<f64>, Point3<f64>)>), LabelsError> {
    if stroke.points.is_empty() {
        return Err(LabelsError::Invalid(
            "a stroke needs at least one point".into(),
        ));
    }
    if !(stroke.radius_mm.is_finite() && stroke.radius_mm > 0.0) {
        return Err(LabelsError::Invalid(format!(
            "brush radius {} mm is not a positive length",
            stroke.radius_mm
        )));
    }
    let voxel_from_world = world_from_voxel.inverse();
    let mut pts: Vec<Point3<f64>> = stroke
        .points
        .iter()
        .map(|p| voxel_from_world.world_to_voxel(*p).0)
        .collect();
    let plane = if let BrushShape::Disc { axis } = stroke.shape {
        if axis > 2 {
            return Err(LabelsError::Invalid(format!("plane axis {axis}")));
        }
        let index = pts[0][axis].round();
        if !(index >= 0.0 && index < dims[axis] as f64) {
            return Err(LabelsError::Outside(
                format!("the stroke's plane {}={index}", ["i", "j", "k"][axis]),
                dims,
            ));
        }
        for p in &mut pts {
            p[axis] = index;
        }
        Some((axis, index as usize))
    } else {
        None
    };
    let spacing = world_from_voxel.column_lengths();
    let reach: Vector3<f64> = Vector3::from(spacing.map(|s| stroke.radius_mm / s + 1.0));
    let mut lo = [usize::MAX; 3];
    let mut hi = [0usize; 3];
    for p in &pts {
        for a in 0..3 {
            let l = (p[a] - reach[a]).floor().max(0.0);
            let h = (p[a] + reach[a]).ceil() + 1.0;
            lo[a] = lo[a].min(l as usize);
            hi[a] = hi[a].max((h.max(0.0) as usize).min(dims[a]));
        }
    }
    let mut bounds = [lo[0]..hi[0], lo[1]..hi[1], lo[2]..hi[2]];
    if let Some((axis, index)) = plane {
        bounds[axis] = index..index + 1;
    }
    let world: Vec<Point3<f64>> = pts
        .iter()
        .map(|p| world_from_voxel.voxel_to_world(VoxelPoint(*p)).0)
        .collect();
    let segments = if world.len() == 1 {
        vec![(world[0], world[0])]
    } else {
        world.windows(2).map(|w| (w[0], w[1])).collect()
    };
    Ok((bounds, segments))
}

/// Squared distance from `p` to the segment `a`–`b`.
fn dist2_to_segment(p: Point3<f64>, a: Point3<f64>, b: Point3<f64>) -> f64 {
    let ab = b - a;
    let len2 = ab.norm_squared();
    let t = if len2 > 0.0 {
        ((p - a).dot(&ab) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (p - (a + ab * t)).norm_squared()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_disc_paints_one_plane_and_the_eraser_takes_it_back() {
        let spacing = [0.01, 0.02, 0.05];
        let mut lv = LabelVolume::new([100, 60, 20], spacing);
        let v = lv.add_label("skull").unwrap();
        let w = Affine3::from_spacing(spacing);
        let stroke = Stroke {
            points: vec![
                WorldPoint::new(0.3, 0.6, 0.51),
                WorldPoint::new(0.6, 0.6, 0.49),
            ],
            radius_mm: 0.1,
            shape: BrushShape::Disc { axis: 2 },
        };
        let e = paint(&mut lv, &w, &stroke, v, Combine::Add, false).unwrap();
        let m = lv.mask_of(v);
        let b = m.bbox().unwrap();
        assert_eq!(b[2], 10..11);
        assert_eq!(b[0], 20..71);
        assert_eq!(b[1], 25..36);
        // a capsule on the plane k = 10 (z = 0.5): count its voxel centres directly
        let mut want = 0;
        for j in 0..60 {
            for i in 0..100 {
                let (x, y) = (f64::from(i) * 0.01, f64::from(j) * 0.02);
                let t = ((x - 0.3) / 0.3).clamp(0.0, 1.0);
                let d2 = (x - (0.3 + 0.3 * t)).powi(2) + (y - 0.6).powi(2);
                if d2 <= 0.01 * (1.0 + 1e-9) {
                    want += 1;
                }
            }
        }
        assert_eq!(m.count(), want);
        // and about the capsule's area 2r·L + πr² in voxels of 0.01 × 0.02 mm²
        let area = (0.2 * 0.3 + std::f64::consts::PI * 0.01) / (0.01 * 0.02);
        assert!(
            (m.count() as f64 - area).abs() < 0.1 * area,
            "{} vs {area}",
            m.count()
        );
        let erase = Stroke {
            points: vec![WorldPoint::new(0.45, 0.6, 0.5)],
            radius_mm: 0.5,
            shape: BrushShape::Ball,
        };
        paint(&mut lv, &w, &erase, v, Combine::Subtract, false).unwrap();
        assert_eq!(lv.counts()[1], 0);
        assert_eq!(e.bricks(), 2);
    }
}
