//! Geometry: the coordinate frames Sutura works in, and lengths with their units.
//!
//! Three kinds of position are kept apart by type:
//! - [`VoxelIndex`]: an integer voxel, `(i, j, k)` with `i` fastest in memory;
//! - [`VoxelPoint`]: a continuous voxel coordinate; voxel centres sit at integer values, so
//!   voxel `(0, 0, 0)` covers `[-0.5, 0.5)` on each axis;
//! - [`WorldPoint`]: a physical position in millimetres, in the scan's world frame.
//!
//! [`Affine3`] maps between them and is named by what it maps to and from
//! (`world_from_voxel`, `voxel_from_world`). [`Plane`] is a point with an orthonormal in-plane
//! basis, used for slices and picking. [`parse_length_mm`] reads lengths such as `12um`.
//!
//! This module imports nothing else from the crate.

mod units;

pub use units::{LengthError, LengthMm, Triple, VoxelSizeMm, format_length_mm, parse_length_mm};

use nalgebra::{Matrix3, Matrix4, Point3, Vector3};
use serde::{Deserialize, Serialize};

/// An integer voxel index `(i, j, k)`; `i` runs fastest in memory.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct VoxelIndex {
    pub i: usize,
    pub j: usize,
    pub k: usize,
}

impl VoxelIndex {
    #[must_use]
    pub const fn new(i: usize, j: usize, k: usize) -> Self {
        Self { i, j, k }
    }

    /// The continuous coordinate of this voxel's centre.
    #[must_use]
    pub fn centre(self) -> VoxelPoint {
        VoxelPoint::new(self.i as f64, self.j as f64, self.k as f64)
    }
}

/// A continuous voxel coordinate; integer values are voxel centres.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct VoxelPoint(pub Point3<f64>);

impl VoxelPoint {
    #[must_use]
    pub const fn new(x: f64, y: f64, z: f64) -> Self {
        Self(Point3::new(x, y, z))
    }

    /// The nearest voxel, or `None` when the point lies outside `dims`.
    #[must_use]
    pub fn nearest_index(self, dims: [usize; 3]) -> Option<VoxelIndex> {
        let mut out = [0usize; 3];
        for (axis, slot) in out.iter_mut().enumerate() {
            let r = (self.0[axis] + 0.5).floor();
            if !(r >= 0.0 && r < dims[axis] as f64) {
                return None;
            }
            *slot = r as usize;
        }
        Some(VoxelIndex::new(out[0], out[1], out[2]))
    }
}

/// A physical position in millimetres in the scan's world frame.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct WorldPoint(pub Point3<f64>);

impl WorldPoint {
    #[must_use]
    pub const fn new(x: f64, y: f64, z: f64) -> Self {
        Self(Point3::new(x, y, z))
    }

    /// Euclidean distance in millimetres.
    #[must_use]
    pub fn distance_mm(self, other: Self) -> f64 {
        (self.0 - other.0).norm()
    }
}

/// An affine map of 3D space held as a 4x4 homogeneous matrix (last row `0 0 0 1`).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(into = "[[f64; 4]; 4]", try_from = "[[f64; 4]; 4]")]
pub struct Affine3 {
    m: Matrix4<f64>,
}

impl Default for Affine3 {
    fn default() -> Self {
        Self::identity()
    }
}

impl From<Affine3> for [[f64; 4]; 4] {
    fn from(a: Affine3) -> Self {
        a.rows()
    }
}

impl TryFrom<[[f64; 4]; 4]> for Affine3 {
    type Error = AffineError;
    fn try_from(rows: [[f64; 4]; 4]) -> Result<Self, AffineError> {
        Self::from_rows(rows)
    }
}

/// Why a matrix cannot serve as an affine map.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum AffineError {
    #[error("affine has a non-finite entry")]
    NotFinite,
    #[error("affine's last row is not 0 0 0 1")]
    NotAffine,
    #[error("affine is singular (determinant {0:e})")]
    Singular(f64),
}

impl Affine3 {
    #[must_use]
    pub fn identity() -> Self {
        Self {
            m: Matrix4::identity(),
        }
    }

    /// A pure scaling by the voxel size in millimetres: the usual `world_from_voxel` of a scan
    /// with no orientation information (a TIFF stack).
    #[must_use]
    pub fn from_spacing(spacing_mm: [f64; 3]) -> Self {
        Self::from_linear_translation(
            &Matrix3::from_diagonal(&Vector3::from(spacing_mm)),
            &Vector3::zeros(),
        )
    }

    /// Builds `x ↦ linear·x + translation`.
    #[must_use]
    pub fn from_linear_translation(linear: &Matrix3<f64>, translation: &Vector3<f64>) -> Self {
        let mut m = Matrix4::identity();
        m.fixed_view_mut::<3, 3>(0, 0).copy_from(linear);
        m.fixed_view_mut::<3, 1>(0, 3).copy_from(translation);
        Self { m }
    }

    /// From a row-major 4x4 array, checking it is a finite, invertible affine.
    pub fn from_rows(rows: [[f64; 4]; 4]) -> Result<Self, AffineError> {
        let m = Matrix4::from_fn(|r, c| rows[r][c]);
        Self::from_matrix(m)
    }

    /// From a 4x4 matrix, checking it is a finite, invertible affine.
    pub fn from_matrix(m: Matrix4<f64>) -> Result<Self, AffineError> {
        if m.iter().any(|v| !v.is_finite()) {
            return Err(AffineError::NotFinite);
        }
        #[allow(
            clippy::float_cmp,
            reason = "an affine's bottom row is exactly 0 0 0 1; any other value is a projective matrix"
        )]
        let not_affine =
            m[(3, 0)] != 0.0 || m[(3, 1)] != 0.0 || m[(3, 2)] != 0.0 || m[(3, 3)] != 1.0;
        if not_affine {
            return Err(AffineError::NotAffine);
        }
        let det = m.fixed_view::<3, 3>(0, 0).determinant();
        if det.abs() < 1e-300 || !det.is_finite() {
            return Err(AffineError::Singular(det));
        }
        Ok(Self { m })
    }

    /// The matrix as row-major rows (the layout of `info --json`).
    #[must_use]
    pub fn rows(&self) -> [[f64; 4]; 4] {
        let mut out = [[0.0; 4]; 4];
        for (r, row) in out.iter_mut().enumerate() {
            for (c, v) in row.iter_mut().enumerate() {
                *v = self.m[(r, c)];
            }
        }
        out
    }

    #[must_use]
    pub fn matrix(&self) -> &Matrix4<f64> {
        &self.m
    }

    /// The 3x3 linear part.
    #[must_use]
    pub fn linear(&self) -> Matrix3<f64> {
        self.m.fixed_view::<3, 3>(0, 0).into_owned()
    }

    #[must_use]
    pub fn translation(&self) -> Vector3<f64> {
        self.m.fixed_view::<3, 1>(0, 3).into_owned()
    }

    /// The inverse map. Every `Affine3` is invertible by construction.
    #[must_use]
    pub fn inverse(&self) -> Self {
        let lin_inv = self
            .linear()
            .try_inverse()
            .expect("Affine3 is invertible by construction");
        let t = -(lin_inv * self.translation());
        Self::from_linear_translation(&lin_inv, &t)
    }

    /// `self ∘ other`: apply `other` first.
    #[must_use]
    pub fn compose(&self, other: &Self) -> Self {
        Self {
            m: self.m * other.m,
        }
    }

    #[must_use]
    pub fn apply_point(&self, p: Point3<f64>) -> Point3<f64> {
        Point3::from(self.linear() * p.coords + self.translation())
    }

    #[must_use]
    pub fn apply_vector(&self, v: Vector3<f64>) -> Vector3<f64> {
        self.linear() * v
    }

    /// Length of each voxel axis in world units: the column norms of the linear part.
    #[must_use]
    pub fn column_lengths(&self) -> [f64; 3] {
        let l = self.linear();
        [l.column(0).norm(), l.column(1).norm(), l.column(2).norm()]
    }

    /// Maps a voxel coordinate to a world point (for a `world_from_voxel` map).
    #[must_use]
    pub fn voxel_to_world(&self, p: VoxelPoint) -> WorldPoint {
        WorldPoint(self.apply_point(p.0))
    }

    /// Maps a world point to a voxel coordinate (for a `voxel_from_world` map).
    #[must_use]
    pub fn world_to_voxel(&self, p: WorldPoint) -> VoxelPoint {
        VoxelPoint(self.apply_point(p.0))
    }
}

/// A plane in world space: an origin and an orthonormal in-plane basis `(u, v)`.
/// Its normal is `u × v`; image columns run along `u` and rows along `v`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Plane {
    pub origin: WorldPoint,
    pub u: Vector3<f64>,
    pub v: Vector3<f64>,
}

/// Why a plane cannot be built.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum PlaneError {
    #[error("plane normal has zero length")]
    ZeroNormal,
    #[error("the three points are collinear")]
    Collinear,
}

impl Plane {
    /// The plane through `origin` with the given normal; `u` is chosen as the projection of
    /// `up_hint × normal`, so that `v` is as close to `up_hint` as the normal allows.
    pub fn from_normal(
        origin: WorldPoint,
        normal: Vector3<f64>,
        up_hint: Vector3<f64>,
    ) -> Result<Self, PlaneError> {
        let n = normal.try_normalize(1e-12).ok_or(PlaneError::ZeroNormal)?;
        let mut up = up_hint - n * n.dot(&up_hint);
        if up.norm() < 1e-9 {
            // the hint is parallel to the normal: take the least aligned axis
            let axis = (0..3)
                .min_by(|&a, &b| n[a].abs().total_cmp(&n[b].abs()))
                .unwrap_or(0);
            let mut e = Vector3::zeros();
            e[axis] = 1.0;
            up = e - n * n.dot(&e);
        }
        let v = up.normalize();
        let u = v.cross(&n);
        Ok(Self { origin, u, v })
    }

    /// The plane through three points, origin at the first; `u` points from `a` to `b`.
    pub fn through_points(a: WorldPoint, b: WorldPoint, c: WorldPoint) -> Result<Self, PlaneError> {
        let ab = b.0 - a.0;
        let ac = c.0 - a.0;
        let n = ab.cross(&ac);
        if n.norm() < 1e-12 * ab.norm().max(1.0) * ac.norm().max(1.0) {
            return Err(PlaneError::Collinear);
        }
        let u = ab.normalize();
        let nn = n.normalize();
        let v = nn.cross(&u);
        Ok(Self { origin: a, u, v })
    }

    #[must_use]
    pub fn normal(&self) -> Vector3<f64> {
        self.u.cross(&self.v)
    }

    /// The world point at in-plane offsets `(s, t)` millimetres along `u` and `v`.
    #[must_use]
    pub fn point_at(&self, s_mm: f64, t_mm: f64) -> WorldPoint {
        WorldPoint(self.origin.0 + self.u * s_mm + self.v * t_mm)
    }
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "lengths of exactly representable columns are exact"
)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use proptest::prelude::*;

    fn oblique() -> Affine3 {
        Affine3::from_rows([
            [0.012, 0.001, 0.0, -3.0],
            [-0.001, 0.012, 0.002, 1.5],
            [0.0, -0.002, 0.030, 7.0],
            [0.0, 0.0, 0.0, 1.0],
        ])
        .unwrap()
    }

    #[test]
    fn refuses_singular_and_non_affine() {
        let mut rows = Affine3::identity().rows();
        rows[2][2] = 0.0;
        assert!(matches!(
            Affine3::from_rows(rows),
            Err(AffineError::Singular(_))
        ));
        let mut rows = Affine3::identity().rows();
        rows[3][0] = 1.0;
        assert_eq!(Affine3::from_rows(rows), Err(AffineError::NotAffine));
        let mut rows = Affine3::identity().rows();
        rows[0][3] = f64::NAN;
        assert_eq!(Affine3::from_rows(rows), Err(AffineError::NotFinite));
    }

    #[test]
    fn spacing_column_lengths() {
        let a = Affine3::from_spacing([0.02, 0.02, 0.05]);
        assert_eq!(a.column_lengths(), [0.02, 0.02, 0.05]);
        let p = a.voxel_to_world(VoxelPoint::new(10.0, 5.0, 2.0));
        assert_relative_eq!(p.0, Point3::new(0.2, 0.1, 0.1), epsilon = 1e-15);
    }

    #[test]
    fn nearest_index_bounds() {
        let d = [4, 3, 2];
        assert_eq!(
            VoxelPoint::new(-0.49, 0.0, 0.0).nearest_index(d),
            Some(VoxelIndex::new(0, 0, 0))
        );
        assert_eq!(VoxelPoint::new(-0.51, 0.0, 0.0).nearest_index(d), None);
        assert_eq!(
            VoxelPoint::new(3.49, 2.2, 1.4).nearest_index(d),
            Some(VoxelIndex::new(3, 2, 1))
        );
        assert_eq!(VoxelPoint::new(3.5, 0.0, 0.0).nearest_index(d), None);
        assert_eq!(VoxelPoint::new(f64::NAN, 0.0, 0.0).nearest_index(d), None);
    }

    #[test]
    fn plane_bases_are_orthonormal() {
        let p = Plane::from_normal(
            WorldPoint::new(1.0, 2.0, 3.0),
            Vector3::new(0.3, -0.2, 0.9),
            Vector3::new(0.0, 1.0, 0.0),
        )
        .unwrap();
        assert_relative_eq!(p.u.norm(), 1.0, epsilon = 1e-12);
        assert_relative_eq!(p.v.norm(), 1.0, epsilon = 1e-12);
        assert_relative_eq!(p.u.dot(&p.v), 0.0, epsilon = 1e-12);
        assert_relative_eq!(
            p.normal(),
            Vector3::new(0.3, -0.2, 0.9).normalize(),
            epsilon = 1e-12
        );
        // hint parallel to the normal still gives a basis
        let q =
            Plane::from_normal(WorldPoint::new(0.0, 0.0, 0.0), Vector3::z(), Vector3::z()).unwrap();
        assert_relative_eq!(q.normal(), Vector3::z(), epsilon = 1e-12);
        assert_eq!(
            Plane::from_normal(
                WorldPoint::new(0.0, 0.0, 0.0),
                Vector3::zeros(),
                Vector3::z()
            ),
            Err(PlaneError::ZeroNormal)
        );
    }

    #[test]
    fn plane_through_points_contains_them() {
        let a = WorldPoint::new(0.0, 0.0, 1.0);
        let b = WorldPoint::new(2.0, 0.0, 1.0);
        let c = WorldPoint::new(0.0, 3.0, 2.0);
        let p = Plane::through_points(a, b, c).unwrap();
        for q in [a, b, c] {
            assert_relative_eq!((q.0 - p.origin.0).dot(&p.normal()), 0.0, epsilon = 1e-12);
        }
        assert_eq!(
            Plane::through_points(a, b, WorldPoint::new(4.0, 0.0, 1.0)),
            Err(PlaneError::Collinear)
        );
    }

    proptest! {
        // law: voxel_from_world ∘ world_from_voxel is the identity
        #[test]
        fn inverse_round_trips(x in -1e3..1e3f64, y in -1e3..1e3f64, z in -1e3..1e3f64) {
            let w = oblique();
            let v = w.inverse();
            let p = VoxelPoint::new(x, y, z);
            let back = v.world_to_voxel(w.voxel_to_world(p));
            prop_assert!((back.0 - p.0).norm() < 1e-9 * (1.0 + p.0.coords.norm()));
            let id = v.compose(&w);
            prop_assert!((id.matrix() - Matrix4::identity()).abs().max() < 1e-12);
        }
    }
}
