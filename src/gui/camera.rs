//! Where each view looks, and the maps between its screen points and the world.
//!
//! Pure geometry, no egui and no rendering, so that the rules the views follow can be tested
//! on their own:
//! - a plane view shows the plane through the crosshair point with an in-plane basis `(u, v)`
//!   (columns along `u`, rows along `v`, as [`sutura_core::render::slice`] draws them); its
//!   [`PlaneCamera`] holds the world point at the view's centre and a zoom relative to "the
//!   whole volume fits" — so a view keeps its framing when it moves between the large stage
//!   and a small strip slot;
//! - a [`ScreenMap`] is one frame's map between screen points (egui's logical pixels) and world
//!   millimetres for a view rectangle;
//! - zooming keeps the world point under the pointer fixed on screen ([`zoom_about`]);
//! - the oblique plane is a rotation of the k plane's basis ([`Oblique`]);
//! - the 3D view is an orbit around the volume ([`Orbit`]) turned into a
//!   [`render::Camera`](sutura_core::render::Camera).

use nalgebra::{Matrix3, Rotation3, UnitQuaternion, Vector3};

use sutura_core::geometry::{VoxelPoint, WorldPoint};
use sutura_core::render::{Camera, RenderError};
use sutura_core::volume::VolumeSource;

/// Zoom limits relative to the fitted view (1 = the whole volume fits).
pub const MIN_ZOOM: f64 = 0.25;
pub const MAX_ZOOM: f64 = 64.0;

/// The in-plane basis `(u, v)` of voxel plane `axis` (0 = i, 1 = j, 2 = k): `u` along the
/// first other voxel axis, `v` along the second, made orthogonal to `u` — the convention of
/// [`sutura_core::render::SliceGeometry::axis`].
#[must_use]
pub fn axis_basis(volume: &dyn VolumeSource, axis: usize) -> (Vector3<f64>, Vector3<f64>) {
    let (ca, ra) = match axis {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    let lin = volume.world_from_voxel().linear();
    let u = lin.column(ca).normalize();
    let vr = lin.column(ra).into_owned();
    let v = (vr - u * u.dot(&vr)).normalize();
    (u, v)
}

/// The half extents (mm) of the volume's box (voxel cells included) along `u` and `v`,
/// measured from its centre.
#[must_use]
pub fn half_extents(volume: &dyn VolumeSource, u: &Vector3<f64>, v: &Vector3<f64>) -> (f64, f64) {
    let d = volume.dims();
    let c = volume.centre_world().0;
    let (mut eu, mut ev) = (0.0f64, 0.0f64);
    for corner in 0..8 {
        let pick = |bit: usize, n: usize| {
            if corner & bit == 0 {
                -0.5
            } else {
                n as f64 - 0.5
            }
        };
        let p = volume.voxel_to_world(VoxelPoint::new(pick(1, d[0]), pick(2, d[1]), pick(4, d[2])));
        let w = p.0 - c;
        eu = eu.max(w.dot(u).abs());
        ev = ev.max(w.dot(v).abs());
    }
    (eu, ev)
}

/// The millimetres per screen point at which a box of half extents `(eu, ev)` fits a view of
/// `size` points with a 4 % margin.
#[must_use]
pub fn fit_mm_per_point(half_extents: (f64, f64), size: [f64; 2]) -> f64 {
    let w = size[0].max(1.0);
    let h = size[1].max(1.0);
    let m = (2.0 * half_extents.0 / w).max(2.0 * half_extents.1 / h) * 1.04;
    if m.is_finite() && m > 0.0 { m } else { 1.0 }
}

/// A plane view's framing: the world point shown at the view's centre (it may lie off the
/// plane; the view projects it) and the zoom relative to the fitted view.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlaneCamera {
    pub centre: WorldPoint,
    pub zoom: f64,
}

impl PlaneCamera {
    /// Centred on the volume, whole volume in view.
    #[must_use]
    pub fn fitted(volume: &dyn VolumeSource) -> Self {
        Self {
            centre: volume.centre_world(),
            zoom: 1.0,
        }
    }
}

/// One frame's map between screen points and world millimetres for a plane view.
///
/// Screen point `p` shows world point `origin + u·(p.x − cx)·mm + v·(p.y − cy)·mm`, where
/// `(cx, cy)` is the centre of `rect` and `mm` is [`Self::mm_per_point`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScreenMap {
    /// `[min_x, min_y, max_x, max_y]` in screen points.
    pub rect: [f64; 4],
    /// The world point at the rectangle's centre, on the plane.
    pub origin: WorldPoint,
    pub u: Vector3<f64>,
    pub v: Vector3<f64>,
    pub mm_per_point: f64,
}

impl ScreenMap {
    #[must_use]
    pub fn centre(&self) -> [f64; 2] {
        [
            0.5 * (self.rect[0] + self.rect[2]),
            0.5 * (self.rect[1] + self.rect[3]),
        ]
    }

    #[must_use]
    pub fn size(&self) -> [f64; 2] {
        [self.rect[2] - self.rect[0], self.rect[3] - self.rect[1]]
    }

    /// The world point (on the plane) under screen point `p`.
    #[must_use]
    pub fn world(&self, p: [f64; 2]) -> WorldPoint {
        let c = self.centre();
        WorldPoint(
            self.origin.0
                + self.u * ((p[0] - c[0]) * self.mm_per_point)
                + self.v * ((p[1] - c[1]) * self.mm_per_point),
        )
    }

    /// The screen point a world point projects to (along the plane's normal).
    #[must_use]
    pub fn screen(&self, w: WorldPoint) -> [f64; 2] {
        let c = self.centre();
        let d = w.0 - self.origin.0;
        [
            c[0] + d.dot(&self.u) / self.mm_per_point,
            c[1] + d.dot(&self.v) / self.mm_per_point,
        ]
    }

    /// The signed distance (mm) of a world point from the plane, along `u × v`.
    #[must_use]
    pub fn depth(&self, w: WorldPoint) -> f64 {
        (w.0 - self.origin.0).dot(&self.u.cross(&self.v))
    }

    /// The world displacement of a drag by `d` screen points.
    #[must_use]
    pub fn world_delta(&self, d: [f64; 2]) -> Vector3<f64> {
        self.u * (d[0] * self.mm_per_point) + self.v * (d[1] * self.mm_per_point)
    }

    /// Whether a screen point lies in the rectangle.
    #[must_use]
    pub fn contains(&self, p: [f64; 2]) -> bool {
        p[0] >= self.rect[0] && p[0] <= self.rect[2] && p[1] >= self.rect[1] && p[1] <= self.rect[3]
    }
}

/// Zooms by `factor` (> 1 magnifies) about `anchor`: returns the new centre and zoom such that
/// `anchor` stays where it was on screen. The zoom is clamped to `[MIN_ZOOM, MAX_ZOOM]`, and the
/// centre moves by the factor actually applied.
#[must_use]
pub fn zoom_about(
    centre: WorldPoint,
    zoom: f64,
    anchor: WorldPoint,
    factor: f64,
) -> (WorldPoint, f64) {
    if !(factor.is_finite() && factor > 0.0) {
        return (centre, zoom);
    }
    let new_zoom = (zoom * factor).clamp(MIN_ZOOM, MAX_ZOOM);
    let applied = new_zoom / zoom;
    // screen offset of the anchor ∝ (anchor − centre)·zoom must not change
    let new_centre = anchor.0 + (centre.0 - anchor.0) / applied;
    (WorldPoint(new_centre), new_zoom)
}

/// The voxel plane through `point` nearest to it along `axis`: the slice index (clamped to the
/// volume).
#[must_use]
pub fn slice_index(volume: &dyn VolumeSource, axis: usize, point: WorldPoint) -> usize {
    let n = volume.dims()[axis];
    let c = volume.world_to_voxel(point).0[axis].round();
    if c.is_nan() || c < 0.0 {
        0
    } else {
        (c as usize).min(n - 1)
    }
}

/// `point` moved within voxel plane `axis` onto slice `index` (along the voxel axis, so it
/// keeps its other voxel coordinates).
#[must_use]
pub fn onto_slice(
    volume: &dyn VolumeSource,
    axis: usize,
    index: usize,
    point: WorldPoint,
) -> WorldPoint {
    let mut p = volume.world_to_voxel(point);
    p.0[axis] = index as f64;
    volume.voxel_to_world(p)
}

/// The oblique plane's orientation: a rotation of the k plane's basis `(u, v, n)`. The numbers
/// a user types are three angles in degrees: `tilt_u` about the k plane's `u`, then `tilt_v`
/// about its `v`, then `spin` about the normal (applied in that order, each about the k
/// plane's fixed axes).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Oblique {
    pub rotation: UnitQuaternion<f64>,
}

impl Default for Oblique {
    /// Tilted 30° about `u` and 20° about `v`, so that it is visibly not a voxel plane.
    fn default() -> Self {
        Self::from_angles_deg([30.0, 20.0, 0.0])
    }
}

impl Oblique {
    /// From `[tilt_u, tilt_v, spin]` in degrees.
    #[must_use]
    pub fn from_angles_deg(a: [f64; 3]) -> Self {
        let r = UnitQuaternion::from_euler_angles(
            a[0].to_radians(),
            a[1].to_radians(),
            a[2].to_radians(),
        );
        Self { rotation: r }
    }

    /// `[tilt_u, tilt_v, spin]` in degrees (the inverse of [`Self::from_angles_deg`], with
    /// `tilt_v` in `[-90, 90]`).
    #[must_use]
    pub fn angles_deg(&self) -> [f64; 3] {
        let (r, p, y) = self.rotation.euler_angles();
        [r.to_degrees(), p.to_degrees(), y.to_degrees()]
    }

    /// Turns the plane about its own current `u` (a vertical drag) and `v` (a horizontal drag)
    /// axes by the given angles in degrees.
    #[must_use]
    pub fn turned(&self, about_u_deg: f64, about_v_deg: f64) -> Self {
        let du = UnitQuaternion::from_axis_angle(&Vector3::x_axis(), about_u_deg.to_radians());
        let dv = UnitQuaternion::from_axis_angle(&Vector3::y_axis(), about_v_deg.to_radians());
        Self {
            rotation: self.rotation * dv * du,
        }
    }

    /// The world basis `(u, v, n)` of the oblique plane for a volume.
    #[must_use]
    pub fn basis(&self, volume: &dyn VolumeSource) -> (Vector3<f64>, Vector3<f64>, Vector3<f64>) {
        let (ku, kv) = axis_basis(volume, 2);
        let k = Matrix3::from_columns(&[ku, kv, ku.cross(&kv)]);
        let r: Rotation3<f64> = self.rotation.to_rotation_matrix();
        let m = k * r.matrix();
        (
            m.column(0).into_owned(),
            m.column(1).into_owned(),
            m.column(2).into_owned(),
        )
    }
}

/// The 3D view's camera: an orbit about the volume's centre (shifted by `pan`), by azimuth
/// about world `z` from `+x` and elevation above the `xy` plane, in degrees; `zoom` relative
/// to "the whole volume fits".
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Orbit {
    pub azimuth_deg: f64,
    pub elevation_deg: f64,
    pub zoom: f64,
    /// Offset of the image centre from the volume's centre, world mm.
    pub pan: Vector3<f64>,
}

/// Elevation stays short of the poles, where "up" (world `z`) would be the viewing direction.
pub const MAX_ELEVATION_DEG: f64 = 89.0;

impl Default for Orbit {
    /// From the front right and above, magnified a little: the fit is to the box's longest
    /// diagonal, which leaves a margin from every direction.
    fn default() -> Self {
        Self {
            azimuth_deg: 30.0,
            elevation_deg: 25.0,
            zoom: 1.3,
            pan: Vector3::zeros(),
        }
    }
}

impl Orbit {
    /// The viewing direction, from the camera into the scene.
    #[must_use]
    pub fn view_dir(&self) -> Vector3<f64> {
        let (az, el) = (
            self.azimuth_deg.to_radians(),
            self.elevation_deg.to_radians(),
        );
        -Vector3::new(el.cos() * az.cos(), el.cos() * az.sin(), el.sin())
    }

    /// Turned by a drag: azimuth and elevation change, elevation clamped short of the poles,
    /// azimuth kept in `[0, 360)`.
    #[must_use]
    pub fn turned(mut self, d_azimuth_deg: f64, d_elevation_deg: f64) -> Self {
        self.azimuth_deg = (self.azimuth_deg + d_azimuth_deg).rem_euclid(360.0);
        self.elevation_deg =
            (self.elevation_deg + d_elevation_deg).clamp(-MAX_ELEVATION_DEG, MAX_ELEVATION_DEG);
        self
    }

    /// The render camera for an image of `width`×`height` pixels.
    pub fn camera(
        &self,
        volume: &dyn VolumeSource,
        width: usize,
        height: usize,
    ) -> Result<Camera, RenderError> {
        let cam = Camera::fit(volume, self.view_dir(), Vector3::z(), width, height)?;
        let mut cam = cam.zoomed(self.zoom);
        cam.centre = WorldPoint(cam.centre.0 + self.pan);
        Ok(cam)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use sutura_core::geometry::Affine3;
    use sutura_core::volume::Volume;

    fn volume() -> Volume {
        // anisotropic, translated, slightly sheared: the maps must not assume a diagonal affine
        let a = Affine3::from_rows([
            [0.036, 0.002, 0.0, -1.0],
            [0.0, 0.036, 0.003, 2.0],
            [0.0, 0.0, 0.050, 0.5],
            [0.0, 0.0, 0.0, 1.0],
        ])
        .unwrap();
        Volume::from_vec([40, 30, 20], a, vec![0u16; 40 * 30 * 20]).unwrap()
    }

    fn map(volume: &dyn VolumeSource) -> ScreenMap {
        let (u, v) = axis_basis(volume, 2);
        ScreenMap {
            rect: [100.0, 50.0, 500.0, 350.0],
            origin: volume.centre_world(),
            u,
            v,
            mm_per_point: 0.01,
        }
    }

    #[test]
    fn screen_and_world_are_inverse_on_the_plane() {
        let vol = volume();
        let m = map(&vol);
        for p in [[100.0, 50.0], [321.5, 77.25], [500.0, 350.0]] {
            let w = m.world(p);
            let back = m.screen(w);
            assert_relative_eq!(back[0], p[0], epsilon = 1e-9);
            assert_relative_eq!(back[1], p[1], epsilon = 1e-9);
            assert_relative_eq!(m.depth(w), 0.0, epsilon = 1e-12);
        }
        // the centre of the rectangle shows the origin
        assert_relative_eq!(m.world(m.centre()).0, m.origin.0, epsilon = 1e-12);
    }

    #[test]
    fn screen_distance_is_world_distance_over_scale() {
        let vol = volume();
        let m = map(&vol);
        let a = m.world([150.0, 80.0]);
        let b = m.world([190.0, 110.0]);
        assert_relative_eq!(a.distance_mm(b), 50.0 * 0.01, epsilon = 1e-12);
    }

    #[test]
    fn zoom_keeps_the_point_under_the_cursor_fixed() {
        let vol = volume();
        let m = map(&vol);
        let cursor = [412.0, 101.0];
        let anchor = m.world(cursor);
        for factor in [1.25, 0.8, 3.0, 0.5] {
            let (centre, zoom) = zoom_about(m.origin, 2.0, anchor, factor);
            let after = ScreenMap {
                origin: centre,
                mm_per_point: m.mm_per_point * 2.0 / zoom,
                ..m
            };
            let s = after.screen(anchor);
            assert_relative_eq!(s[0], cursor[0], epsilon = 1e-9);
            assert_relative_eq!(s[1], cursor[1], epsilon = 1e-9);
            assert_relative_eq!(zoom, 2.0 * factor, epsilon = 1e-12);
        }
    }

    #[test]
    fn zoom_is_clamped_and_the_anchor_still_holds() {
        let c = WorldPoint::new(0.0, 0.0, 0.0);
        let a = WorldPoint::new(1.0, 2.0, 0.0);
        let (centre, zoom) = zoom_about(c, 32.0, a, 10.0);
        assert_relative_eq!(zoom, MAX_ZOOM);
        // applied factor 2: the centre halves its distance to the anchor
        assert_relative_eq!(
            centre.0,
            nalgebra::Point3::new(0.5, 1.0, 0.0),
            epsilon = 1e-12
        );
        let (same, z) = zoom_about(c, 1.0, a, f64::NAN);
        assert_eq!((same, z), (c, 1.0));
    }

    #[test]
    fn fitted_view_holds_the_whole_box() {
        let vol = volume();
        let (u, v) = axis_basis(&vol, 1);
        let e = half_extents(&vol, &u, &v);
        let size = [300.0, 200.0];
        let mpp = fit_mm_per_point(e, size);
        assert!(2.0 * e.0 / mpp <= size[0] && 2.0 * e.1 / mpp <= size[1]);
        // and not by much: one side is filled to the margin
        assert!(2.0 * e.0 / mpp > 0.9 * size[0] || 2.0 * e.1 / mpp > 0.9 * size[1]);
    }

    #[test]
    fn axis_basis_spans_the_voxel_plane() {
        let vol = volume();
        for axis in 0..3 {
            let (u, v) = axis_basis(&vol, axis);
            assert_relative_eq!(u.norm(), 1.0, epsilon = 1e-12);
            assert_relative_eq!(v.norm(), 1.0, epsilon = 1e-12);
            assert_relative_eq!(u.dot(&v), 0.0, epsilon = 1e-12);
            // moving along u or v keeps the voxel coordinate of the plane's axis
            let p = vol.centre_world();
            let q = WorldPoint(p.0 + u * 0.3 + v * 0.7);
            let (a, b) = (vol.world_to_voxel(p).0[axis], vol.world_to_voxel(q).0[axis]);
            assert_relative_eq!(a, b, epsilon = 1e-9);
        }
    }

    #[test]
    fn slices_snap_and_clamp() {
        let vol = volume();
        let p = vol.voxel_to_world(VoxelPoint::new(3.4, 7.6, 25.0));
        assert_eq!(slice_index(&vol, 0, p), 3);
        assert_eq!(slice_index(&vol, 1, p), 8);
        assert_eq!(slice_index(&vol, 2, p), 19);
        let q = onto_slice(&vol, 2, 5, p);
        let qv = vol.world_to_voxel(q).0;
        assert_relative_eq!(qv.x, 3.4, epsilon = 1e-9);
        assert_relative_eq!(qv.y, 7.6, epsilon = 1e-9);
        assert_relative_eq!(qv.z, 5.0, epsilon = 1e-9);
    }

    #[test]
    fn oblique_angles_round_trip_and_basis_is_orthonormal() {
        let vol = volume();
        let o = Oblique::from_angles_deg([30.0, -20.0, 45.0]);
        let a = o.angles_deg();
        assert_relative_eq!(a[0], 30.0, epsilon = 1e-9);
        assert_relative_eq!(a[1], -20.0, epsilon = 1e-9);
        assert_relative_eq!(a[2], 45.0, epsilon = 1e-9);
        let (u, v, n) = o.basis(&vol);
        assert_relative_eq!(u.cross(&v), n, epsilon = 1e-12);
        assert_relative_eq!(u.dot(&v), 0.0, epsilon = 1e-12);
        // no rotation: the k plane itself
        let (ku, kv) = axis_basis(&vol, 2);
        let (u0, v0, _) = Oblique::from_angles_deg([0.0; 3]).basis(&vol);
        assert_relative_eq!(u0, ku, epsilon = 1e-12);
        assert_relative_eq!(v0, kv, epsilon = 1e-12);
    }

    #[test]
    fn turning_the_oblique_about_u_keeps_u() {
        let vol = volume();
        let o = Oblique::from_angles_deg([10.0, 15.0, 5.0]);
        let (u, v, _) = o.basis(&vol);
        let (u2, v2, _) = o.turned(25.0, 0.0).basis(&vol);
        assert_relative_eq!(u2, u, epsilon = 1e-12);
        assert_relative_eq!(v2.dot(&v), 25f64.to_radians().cos(), epsilon = 1e-12);
        let (u3, v3, _) = o.turned(0.0, -40.0).basis(&vol);
        assert_relative_eq!(v3, v, epsilon = 1e-12);
        assert_relative_eq!(u3.dot(&u), 40f64.to_radians().cos(), epsilon = 1e-12);
    }

    #[test]
    fn orbit_direction_and_clamping() {
        let o = Orbit {
            azimuth_deg: 0.0,
            elevation_deg: 0.0,
            ..Orbit::default()
        };
        // looking from +x towards the centre
        assert_relative_eq!(o.view_dir(), -Vector3::x(), epsilon = 1e-12);
        let t = o.turned(-30.0, 120.0);
        assert_relative_eq!(t.azimuth_deg, 330.0);
        assert_relative_eq!(t.elevation_deg, MAX_ELEVATION_DEG);
        let vol = volume();
        let cam = t.camera(&vol, 64, 48).unwrap();
        assert_eq!((cam.width, cam.height), (64, 48));
    }
}
