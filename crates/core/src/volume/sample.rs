//! Sampling a volume at continuous positions.
//!
//! Voxel centres sit at integer voxel coordinates. Defined behaviour at the edges:
//! - [`Volume::sample_nearest`] answers for any point inside a voxel's cell,
//!   `[-0.5, n - 0.5)` on each axis, and `None` outside.
//! - [`Volume::sample_trilinear`] interpolates between the eight surrounding voxel centres inside
//!   the hull of centres `[0, n - 1]`; in the outer half-voxel rim it holds the edge value
//!   (constant extension, as a voxel's cell is uniform); outside the cells it is `None`.
//!   This equals `scipy.ndimage.map_coordinates(order=1)` inside `[0, n - 1]`.
//!
//! Both apply the rescale.

use super::{Volume, Voxel};
use crate::geometry::{VoxelPoint, WorldPoint};

impl Volume {
    /// The rescaled value of the voxel containing a world point, or `None` outside the grid.
    #[must_use]
    pub fn sample_nearest(&self, p: WorldPoint) -> Option<f64> {
        self.sample_nearest_voxel(self.world_to_voxel(p))
    }

    /// As [`Self::sample_nearest`], at a continuous voxel coordinate.
    #[must_use]
    pub fn sample_nearest_voxel(&self, p: VoxelPoint) -> Option<f64> {
        let v = p.nearest_index(self.dims())?;
        self.value(v)
    }

    /// The trilinearly interpolated, rescaled value at a world point (see the module docs for
    /// the edges), or `None` outside the grid.
    #[must_use]
    pub fn sample_trilinear(&self, p: WorldPoint) -> Option<f64> {
        self.sample_trilinear_voxel(self.world_to_voxel(p))
    }

    /// As [`Self::sample_trilinear`], at a continuous voxel coordinate.
    #[must_use]
    pub fn sample_trilinear_voxel(&self, p: VoxelPoint) -> Option<f64> {
        let raw = crate::with_voxels!(self.voxels(), |s| trilinear_raw(s, self.dims(), p))?;
        Some(self.apply_rescale(raw))
    }
}

/// Trilinear interpolation of stored values (no rescale) at voxel coordinate `p`.
#[inline]
#[must_use]
pub fn trilinear_raw<T: Voxel>(data: &[T], dims: [usize; 3], p: VoxelPoint) -> Option<f64> {
    let mut base = [0usize; 3];
    let mut frac = [0.0f64; 3];
    for a in 0..3 {
        let n = dims[a] as f64;
        let c = p.0[a];
        if !(c >= -0.5 && c < n - 0.5) {
            return None;
        }
        let c = c.clamp(0.0, n - 1.0);
        let f = c.floor();
        let mut b = f as usize;
        let mut t = c - f;
        if b + 1 >= dims[a] {
            // on the last centre (or a single-voxel axis): no neighbour above
            b = dims[a] - 1;
            t = 0.0;
        }
        base[a] = b;
        frac[a] = t;
    }
    let [nx, ny, _] = dims;
    let step = [
        usize::from(frac[0] > 0.0),
        usize::from(frac[1] > 0.0) * nx,
        usize::from(frac[2] > 0.0) * nx * ny,
    ];
    let i0 = base[0] + nx * (base[1] + ny * base[2]);
    let v = |o: usize| data[i0 + o].to_f64();
    let [tx, ty, tz] = frac;
    let c00 = v(0) * (1.0 - tx) + v(step[0]) * tx;
    let c10 = v(step[1]) * (1.0 - tx) + v(step[1] + step[0]) * tx;
    let c01 = v(step[2]) * (1.0 - tx) + v(step[2] + step[0]) * tx;
    let c11 = v(step[2] + step[1]) * (1.0 - tx) + v(step[2] + step[1] + step[0]) * tx;
    let c0 = c00 * (1.0 - ty) + c10 * ty;
    let c1 = c01 * (1.0 - ty) + c11 * ty;
    Some(c0 * (1.0 - tz) + c1 * tz)
}

#[cfg(test)]
mod tests {
    use crate::geometry::{Affine3, VoxelPoint, WorldPoint};
    use crate::volume::{Rescale, Volume};
    use approx::assert_relative_eq;

    /// A volume whose value is linear in the voxel coordinate: trilinear sampling must
    /// reproduce the linear function exactly inside the hull of centres.
    fn linear_volume() -> Volume {
        let dims = [5, 4, 3];
        let mut data = Vec::new();
        for k in 0..3 {
            for j in 0..4 {
                for i in 0..5 {
                    data.push(
                        (2.0 * f64::from(i) + 3.0 * f64::from(j) - 5.0 * f64::from(k)) as f32,
                    );
                }
            }
        }
        Volume::from_vec(dims, Affine3::from_spacing([0.1, 0.2, 0.5]), data).unwrap()
    }

    #[test]
    fn trilinear_reproduces_linear_functions() {
        let v = linear_volume();
        for &(x, y, z) in &[
            (0.0, 0.0, 0.0),
            (1.25, 2.5, 0.75),
            (4.0, 3.0, 2.0),
            (3.9, 0.1, 1.99),
        ] {
            let got = v.sample_trilinear_voxel(VoxelPoint::new(x, y, z)).unwrap();
            assert_relative_eq!(got, 2.0 * x + 3.0 * y - 5.0 * z, epsilon = 1e-5);
        }
        // through the world frame: voxel (1, 1, 1) sits at (0.1, 0.2, 0.5) mm
        let got = v.sample_trilinear(WorldPoint::new(0.1, 0.2, 0.5)).unwrap();
        assert_relative_eq!(got, 0.0, epsilon = 1e-6);
    }

    #[test]
    fn edges_are_defined() {
        let v = linear_volume();
        // half-voxel rim holds the edge value
        assert_relative_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(-0.4, 0.0, 0.0))
                .unwrap(),
            0.0
        );
        assert_relative_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(4.4, 0.0, 0.0))
                .unwrap(),
            8.0
        );
        assert_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(-0.6, 0.0, 0.0)),
            None
        );
        assert_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(4.5, 0.0, 0.0)),
            None
        );
        assert_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(f64::NAN, 0.0, 0.0)),
            None
        );
        assert_eq!(
            v.sample_nearest_voxel(VoxelPoint::new(1.6, 0.4, 0.0)),
            Some(4.0)
        );
        assert_eq!(v.sample_nearest_voxel(VoxelPoint::new(5.0, 0.0, 0.0)), None);
    }

    #[test]
    fn single_voxel_axis() {
        let v = Volume::from_vec([2, 1, 1], Affine3::identity(), vec![10u8, 20]).unwrap();
        assert_relative_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(0.5, 0.2, -0.3))
                .unwrap(),
            15.0
        );
    }

    #[test]
    fn sampling_applies_rescale() {
        let mut v = Volume::from_vec([2, 1, 1], Affine3::identity(), vec![10u8, 20]).unwrap();
        v.set_rescale(Rescale::new(2.0, 1.0));
        assert_relative_eq!(
            v.sample_trilinear_voxel(VoxelPoint::new(0.5, 0.0, 0.0))
                .unwrap(),
            31.0
        );
        assert_eq!(
            v.sample_nearest_voxel(VoxelPoint::new(0.0, 0.0, 0.0)),
            Some(21.0)
        );
    }
}
