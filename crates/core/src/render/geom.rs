//! Geometry shared by slices and 3D views: orthonormal frames, the volume's box, a pixel grid
//! carried into voxel coordinates, and a ray clipped to the box.
//!
//! Every picture here is a grid of pixels on a plane in the world: pixel `(c, r)` sits at
//! `origin + c·right + r·down` (a slice's `u`/`v` steps, a camera's image plane). Renderers
//! work in voxel coordinates, where that grid is still affine ([`PixelGrid`]), so moving one
//! pixel is one vector addition and no pixel needs a matrix product.

use super::RenderError;
use crate::geometry::{VoxelPoint, WorldPoint};
use crate::volume::Volume;
use nalgebra::{Point3, Vector3};

/// `a` normalised and `b` made orthogonal to it and normalised (Gram–Schmidt); `names` say
/// which input is degenerate in the error.
pub(crate) fn orthonormal_pair(
    a: Vector3<f64>,
    b: Vector3<f64>,
    names: (&'static str, &'static str),
) -> Result<(Vector3<f64>, Vector3<f64>), RenderError> {
    let a = a
        .try_normalize(1e-12)
        .ok_or(RenderError::BadDirection(names.0))?;
    let b = (b - a * a.dot(&b))
        .try_normalize(1e-9)
        .ok_or(RenderError::BadDirection(names.1))?;
    Ok((a, b))
}

/// The eight corners of the volume's box of cells (`[-0.5, n - 0.5]` on each voxel axis) in
/// world millimetres.
pub(crate) fn cell_corners(volume: &Volume) -> [Point3<f64>; 8] {
    cell_corners_of(volume.dims(), volume.world_from_voxel())
}

/// [`cell_corners`] of a grid of `d` voxels placed by `world_from_voxel`.
pub(crate) fn cell_corners_of(
    d: [usize; 3],
    world_from_voxel: &crate::geometry::Affine3,
) -> [Point3<f64>; 8] {
    std::array::from_fn(|corner| {
        let at = |axis: usize| {
            if corner >> axis & 1 == 0 {
                -0.5
            } else {
                d[axis] as f64 - 0.5
            }
        };
        world_from_voxel
            .voxel_to_world(VoxelPoint::new(at(0), at(1), at(2)))
            .0
    })
}

/// A grid of pixels in voxel coordinates: pixel `(c, r)` is at `p0 + c·dc + r·dr`.
#[derive(Clone, Copy, Debug)]
pub(crate) struct PixelGrid {
    pub(crate) p0: Vector3<f64>,
    pub(crate) dc: Vector3<f64>,
    pub(crate) dr: Vector3<f64>,
}

impl PixelGrid {
    /// The grid whose pixel `(0, 0)` is at `origin` and which steps by the world vectors
    /// `col_step` and `row_step` (millimetres) per column and row.
    pub(crate) fn new(
        volume: &Volume,
        origin: WorldPoint,
        col_step: Vector3<f64>,
        row_step: Vector3<f64>,
    ) -> Result<Self, RenderError> {
        let a = volume.voxel_from_world();
        let p0 = a.apply_point(origin.0).coords;
        if !p0.iter().all(|c| c.is_finite()) {
            return Err(RenderError::NotFinite {
                name: "image origin",
                value: f64::NAN,
            });
        }
        Ok(Self {
            p0,
            dc: a.apply_vector(col_step),
            dr: a.apply_vector(row_step),
        })
    }

    #[inline]
    pub(crate) fn at(&self, c: usize, r: usize) -> Vector3<f64> {
        self.p0 + self.dc * c as f64 + self.dr * r as f64
    }
}

/// The parameter interval `[t0, t1]` where `o + t·d` lies in the box `[-0.5, n - 0.5]`, or
/// `None` when the line misses it.
pub(crate) fn clip_to_cells(
    o: &Vector3<f64>,
    d: &Vector3<f64>,
    dims: [usize; 3],
) -> Option<(f64, f64)> {
    let (mut t0, mut t1) = (f64::NEG_INFINITY, f64::INFINITY);
    for a in 0..3 {
        let (lo, hi) = (-0.5, dims[a] as f64 - 0.5);
        if d[a].abs() < 1e-15 {
            if o[a] < lo || o[a] >= hi {
                return None;
            }
        } else {
            let (ta, tb) = ((lo - o[a]) / d[a], (hi - o[a]) / d[a]);
            t0 = t0.max(ta.min(tb));
            t1 = t1.min(ta.max(tb));
        }
    }
    (t0 <= t1).then_some((t0, t1))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;

    #[test]
    fn corners_span_the_cells() {
        let v = Volume::from_vec(
            [4, 3, 2],
            Affine3::from_spacing([1.0, 2.0, 3.0]),
            vec![0u8; 24],
        )
        .unwrap();
        let c = cell_corners(&v);
        assert_eq!(c[0], Point3::new(-0.5, -1.0, -1.5));
        assert_eq!(c[7], Point3::new(3.5, 5.0, 4.5));
    }

    #[test]
    fn clipping_and_frames() {
        let (t0, t1) =
            clip_to_cells(&Vector3::new(-5.0, 1.0, 1.0), &Vector3::x(), [4, 3, 3]).unwrap();
        assert!((t0 - 4.5).abs() < 1e-12 && (t1 - 8.5).abs() < 1e-12);
        assert!(clip_to_cells(&Vector3::new(-5.0, 9.0, 1.0), &Vector3::x(), [4, 3, 3]).is_none());
        let (a, b) =
            orthonormal_pair(Vector3::z() * 3.0, Vector3::new(1.0, 0.0, 1.0), ("a", "b")).unwrap();
        assert_eq!((a, b), (Vector3::z(), Vector3::x()));
        assert!(orthonormal_pair(Vector3::z(), Vector3::z(), ("a", "b")).is_err());
    }
}
