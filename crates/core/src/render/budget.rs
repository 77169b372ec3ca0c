//! Pictures sized by what they show: a pixel limit for every slice and 3D view, and slices cut
//! to where the plane (or slab) actually crosses the scan.
//!
//! A scan's header may be legal and still absurd: a 16×12×5 scan whose slices are sheared by
//! 512 mm projects onto an oblique plane as a 2.5-metre footprint, 26,429×17,717 pixels at
//! the voxel size, gigabytes for an image that is empty but for a few hundred pixels. So:
//! - [`SliceGeometry::section`] frames the part of the plane inside the box (for a slab, the
//!   part of the box between its two faces, projected onto the plane), not the box's whole
//!   shadow; a plane that misses the box is refused;
//! - every builder here respects a pixel limit ([`DEFAULT_MAX_PIXELS`] unless the caller
//!   raises it): with the default pixel size (the smallest voxel spacing) the pixels are made
//!   coarser until the picture fits, and a note says so; a pixel size the caller chose that
//!   would pass the limit is refused with the size it would make.

use super::geom::{cell_corners_of, orthonormal_pair};
use super::slice::{AxisPlane, SliceGeometry};
use super::{MAX_SIDE, RenderError, check_positive};
use crate::geometry::{Affine3, Plane, WorldPoint, format_length_mm};
use crate::volume::Volume;
use nalgebra::{Point3, Vector3};

/// The largest picture a slice or 3D view makes unless the caller raises it: 64 megapixels
/// (8000 × 8000), about 256 MB of values and as much again of RGBA. A chosen bound: far more
/// than a screen or a figure needs, far less than a machine's memory.
pub const DEFAULT_MAX_PIXELS: usize = 64_000_000;

/// A length for a message, also when it is far below a micrometre.
fn length(mm: f64) -> String {
    if (1e-4..1e6).contains(&mm) {
        format_length_mm(mm)
    } else {
        format!("{mm:.3e} mm")
    }
}

/// A count of pixels for a message: whole up to a billion, else in powers of ten.
pub(crate) fn count(n: f64) -> String {
    if n < 1e9 {
        format!("{n:.0}")
    } else {
        format!("{n:.2e}")
    }
}

/// Which limit a picture of `width × height` passes, for messages.
pub(crate) fn what_is_passed(width: f64, height: f64, max_pixels: usize) -> String {
    if width > MAX_SIDE as f64 || height > MAX_SIDE as f64 || !(width * height).is_finite() {
        format!("has a side longer than {MAX_SIDE} pixels, the most a picture may have")
    } else {
        format!("passes the limit of {} megapixels", max_pixels / 1_000_000)
    }
}

/// Whether a [`RenderError::TooManyPixels`] is about the megapixel limit (which a caller may
/// raise) rather than the side limit (which it may not).
#[must_use]
pub fn limit_can_be_raised(e: &RenderError) -> bool {
    matches!(e, RenderError::TooManyPixels { width, height, .. }
        if *width <= MAX_SIDE as f64 && *height <= MAX_SIDE as f64)
}

/// Checks a picture size against a pixel limit (and [`MAX_SIDE`]).
pub fn check_pixels(width: usize, height: usize, max_pixels: usize) -> Result<(), RenderError> {
    let fits = width > 0
        && height > 0
        && width <= MAX_SIDE
        && height <= MAX_SIDE
        && width.saturating_mul(height) <= max_pixels;
    if fits {
        Ok(())
    } else {
        Err(RenderError::TooManyPixels {
            width: width as f64,
            height: height as f64,
            max_pixels,
        })
    }
}

/// The pixel size to draw with: `requested` if given and the picture `size(px)` (columns and
/// rows, possibly not finite) fits the limit, else refused; without a request `default_px`,
/// made coarser until the picture fits, with a note saying so.
fn choose_pixel(
    size: impl Fn(f64) -> (f64, f64),
    default_px: f64,
    requested: Option<f64>,
    max_pixels: usize,
) -> Result<(f64, Option<String>), RenderError> {
    let fits = |(w, h): (f64, f64)| {
        w.is_finite()
            && h.is_finite()
            && w <= MAX_SIDE as f64
            && h <= MAX_SIDE as f64
            && w * h <= max_pixels as f64
    };
    let px = check_positive("pixel size", requested.unwrap_or(default_px))?;
    let (w, h) = size(px);
    if fits((w, h)) {
        return Ok((px, None));
    }
    let too_many = |(w, h): (f64, f64)| RenderError::TooManyPixels {
        width: w,
        height: h,
        max_pixels,
    };
    if requested.is_some() {
        return Err(too_many((w, h)));
    }
    // the picture's sides shrink in proportion to the pixel size: start from the factor that
    // would just fit, then step up by 1 % for the rounding of the sides
    let factor = [
        (w * h / max_pixels as f64).sqrt(),
        w / MAX_SIDE as f64,
        h / MAX_SIDE as f64,
    ]
    .into_iter()
    .filter(|f| f.is_finite())
    .fold(1.0, f64::max);
    let mut p = px * factor;
    for _ in 0..200 {
        let (w2, h2) = size(p);
        if fits((w2, h2)) {
            let note = format!(
                "pixels of {} would make a {} x {} picture; drawn with pixels of {} ({w2:.0} x {h2:.0}) to stay within {} megapixels",
                length(px),
                count(w),
                count(h),
                length(p),
                max_pixels / 1_000_000
            );
            return Ok((p, Some(note)));
        }
        p *= 1.01;
    }
    Err(too_many((w, h)))
}

/// The unit normal's component of `p - origin`.
fn offset(p: &Point3<f64>, origin: &WorldPoint, n: &Vector3<f64>) -> f64 {
    (p - origin.0).dot(n)
}

impl SliceGeometry {
    /// The part of `plane` where it crosses the volume's box of cells — with
    /// `half_thickness_mm > 0`, where the slab of that half thickness about it does,
    /// projected onto the plane — with `plane.origin` on a pixel centre. `pixel_mm` defaults to
    /// the smallest voxel spacing, coarsened to fit `max_pixels` (the note says so); a given
    /// pixel size that would pass the limit is refused. A plane (or slab) that misses the box
    /// is refused.
    pub fn section(
        volume: &Volume,
        plane: &Plane,
        pixel_mm: Option<f64>,
        half_thickness_mm: f64,
        max_pixels: usize,
    ) -> Result<(Self, Option<String>), RenderError> {
        Self::section_grid(
            volume.dims(),
            volume.world_from_voxel(),
            plane,
            pixel_mm,
            half_thickness_mm,
            max_pixels,
        )
    }

    /// [`Self::section`] for a grid of `dims` voxels placed by `world_from_voxel` (a level of
    /// a [`VolumeSource`](crate::volume::VolumeSource)).
    pub fn section_grid(
        dims: [usize; 3],
        world_from_voxel: &Affine3,
        plane: &Plane,
        pixel_mm: Option<f64>,
        half_thickness_mm: f64,
        max_pixels: usize,
    ) -> Result<(Self, Option<String>), RenderError> {
        let (u, v) = orthonormal_pair(plane.u, plane.v, ("plane u", "plane v"))?;
        let n = u.cross(&v);
        let half = if half_thickness_mm.is_finite() {
            half_thickness_mm.max(0.0)
        } else {
            return Err(RenderError::NotFinite {
                name: "slab thickness",
                value: half_thickness_mm,
            });
        };
        let c = cell_corners_of(dims, world_from_voxel);
        // the vertices of box ∩ slab: corners between the faces, and where the box's edges
        // cross each face
        let mut pts: Vec<Point3<f64>> = c
            .iter()
            .filter(|p| offset(p, &plane.origin, &n).abs() <= half)
            .copied()
            .collect();
        let faces: &[f64] = if half > 0.0 { &[-half, half] } else { &[0.0] };
        for i in 0..8 {
            for bit in [1, 2, 4] {
                let j = i | bit;
                if j == i {
                    continue;
                }
                for &f in faces {
                    let (di, dj) = (
                        offset(&c[i], &plane.origin, &n) - f,
                        offset(&c[j], &plane.origin, &n) - f,
                    );
                    if (di <= 0.0) != (dj <= 0.0) {
                        let t = di / (di - dj);
                        pts.push(c[i] + (c[j] - c[i]) * t);
                    }
                }
            }
        }
        if pts.is_empty() {
            return Err(RenderError::MissesVolume);
        }
        let (mut smin, mut smax, mut tmin, mut tmax) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
        for p in &pts {
            let w = p - plane.origin.0;
            let (s, t) = (w.dot(&u), w.dot(&v));
            smin = smin.min(s);
            smax = smax.max(s);
            tmin = tmin.min(t);
            tmax = tmax.max(t);
        }
        let sp = world_from_voxel.column_lengths();
        let size = |px: f64| {
            (
                (smax / px).ceil() - (smin / px).floor() + 1.0,
                (tmax / px).ceil() - (tmin / px).floor() + 1.0,
            )
        };
        let (px, note) = choose_pixel(size, sp[0].min(sp[1]).min(sp[2]), pixel_mm, max_pixels)?;
        let (c0, r0) = ((smin / px).floor(), (tmin / px).floor());
        let (w, h) = size(px);
        Ok((
            Self {
                origin: WorldPoint(plane.origin.0 + u * (c0 * px) + v * (r0 * px)),
                u,
                v,
                pixel_mm: px,
                width: w as usize,
                height: h as usize,
            },
            note,
        ))
    }

    /// [`SliceGeometry::axis`] within a pixel limit: the default pixel size (the smaller
    /// in-plane voxel spacing) is coarsened until the picture fits, with a note; a given one
    /// that would pass the limit is refused.
    pub fn axis_within(
        volume: &Volume,
        plane: AxisPlane,
        pixel_mm: Option<f64>,
        max_pixels: usize,
    ) -> Result<(Self, Option<String>), RenderError> {
        Self::axis_within_grid(
            volume.dims(),
            volume.world_from_voxel(),
            plane,
            pixel_mm,
            max_pixels,
        )
    }

    /// [`Self::axis_within`] for a grid of `d` voxels placed by `world_from_voxel` (a level of
    /// a [`VolumeSource`](crate::volume::VolumeSource)).
    pub fn axis_within_grid(
        d: [usize; 3],
        world_from_voxel: &Affine3,
        plane: AxisPlane,
        pixel_mm: Option<f64>,
        max_pixels: usize,
    ) -> Result<(Self, Option<String>), RenderError> {
        let (ca, ra) = plane.in_plane_axes()?;
        let lin = world_from_voxel.linear();
        let sp = world_from_voxel.column_lengths();
        let u = lin.column(ca).normalize();
        let vr = lin.column(ra).into_owned();
        let ext_u = (d[ca] as f64 - 1.0) * lin.column(ca).norm();
        let ext_v = (d[ra] as f64 - 1.0) * (vr - u * u.dot(&vr)).norm();
        let size = |px: f64| {
            (
                (ext_u / px + 1e-9).floor() + 1.0,
                (ext_v / px + 1e-9).floor() + 1.0,
            )
        };
        let (px, note) = choose_pixel(size, sp[ca].min(sp[ra]), pixel_mm, max_pixels)?;
        Ok((Self::axis_grid(d, world_from_voxel, plane, Some(px))?, note))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;
    use nalgebra::Matrix3;

    /// The scan: 16×12×5 voxels of 36×36×50 µm whose slices are sheared 512 mm along
    /// x. Its box's shadow on an oblique plane is metres long; its section is a few voxels.
    fn sheared() -> Volume {
        let lin = Matrix3::new(0.036, 0.0, 512.0, 0.0, 0.036, 0.0, 0.0, 0.0, 0.05);
        let a = Affine3::from_linear_translation(&lin, &Vector3::zeros());
        Volume::from_vec([16, 12, 5], a, vec![1u16; 16 * 12 * 5]).unwrap()
    }

    #[test]
    fn a_section_frames_only_where_the_plane_crosses_the_box() {
        let v = sheared();
        let plane = Plane::from_normal(v.centre_world(), Vector3::new(1.0, 0.4, 0.3), Vector3::z())
            .unwrap();
        let old = SliceGeometry::covering(&v, &plane, None);
        assert!(
            old.is_err() || old.is_ok_and(|g| g.width * g.height > 100_000_000),
            "the shadow is huge"
        );
        let (g, note) = SliceGeometry::section(&v, &plane, None, 0.0, DEFAULT_MAX_PIXELS).unwrap();
        assert!(note.is_none());
        assert!(g.width * g.height < 10_000, "{}x{}", g.width, g.height);
        // every pixel inside the box is in the picture: the box's section corners project
        // inside the frame
        let img =
            crate::render::slice::render_slice(&v, &g, crate::render::Interpolation::Nearest, None)
                .unwrap();
        let inside = img.finite_values().count();
        assert!(
            inside >= 10,
            "{}x{} px {}: {inside}",
            g.width,
            g.height,
            g.pixel_mm
        );
        // on an ordinary scan the section's pixels are the shadow's pixels that hold a value:
        // both grids put the plane's origin on a pixel centre, so the one is a window of the
        // other, and the window loses none of the values
        let lin = Matrix3::new(0.03, 0.005, 0.0, -0.004, 0.035, 0.002, 0.0, 0.001, 0.05);
        let a = Affine3::from_linear_translation(&lin, &Vector3::new(1.0, 2.0, 3.0));
        let data: Vec<u16> = (0..20 * 18 * 9).map(|i| (i % 97) as u16).collect();
        let ordinary = Volume::from_vec([20, 18, 9], a, data).unwrap();
        for normal in [Vector3::new(1.0, 0.4, 0.3), Vector3::new(-0.2, 0.1, 1.0)] {
            let plane = Plane::from_normal(ordinary.centre_world(), normal, Vector3::z()).unwrap();
            let count = |g: &SliceGeometry| {
                crate::render::slice::render_slice(
                    &ordinary,
                    g,
                    crate::render::Interpolation::Trilinear,
                    None,
                )
                .unwrap()
                .finite_values()
                .count()
            };
            let shadow = SliceGeometry::covering(&ordinary, &plane, None).unwrap();
            let (section, _) =
                SliceGeometry::section(&ordinary, &plane, None, 0.0, DEFAULT_MAX_PIXELS).unwrap();
            assert!(section.width * section.height <= shadow.width * shadow.height);
            assert_eq!(count(&section), count(&shadow), "{normal:?}");
        }
        // a plane beside the box misses it
        let far = Plane::from_normal(
            WorldPoint::new(-1000.0, 0.0, 0.0),
            Vector3::x(),
            Vector3::z(),
        )
        .unwrap();
        assert!(matches!(
            SliceGeometry::section(&v, &far, None, 0.0, DEFAULT_MAX_PIXELS),
            Err(RenderError::MissesVolume)
        ));
        // ...unless a slab reaches it
        assert!(SliceGeometry::section(&v, &far, None, 800.0, DEFAULT_MAX_PIXELS).is_ok());
    }

    #[test]
    fn the_default_pixel_is_coarsened_to_the_limit_and_a_chosen_one_refused() {
        let v = Volume::from_vec(
            [100, 80, 3],
            Affine3::from_spacing([1.0, 1.0, 1.0]),
            vec![0u8; 24_000],
        )
        .unwrap();
        let plane = AxisPlane { axis: 2, index: 1 };
        let (g, note) = SliceGeometry::axis_within(&v, plane, None, 8000).unwrap();
        assert_eq!((g.width, g.height), (100, 80));
        assert!(note.is_none());
        let (g, note) = SliceGeometry::axis_within(&v, plane, None, 2000).unwrap();
        assert!(g.width * g.height <= 2000, "{}x{}", g.width, g.height);
        assert!(
            g.width * g.height > 1500,
            "not coarser than needed: {}x{}",
            g.width,
            g.height
        );
        assert!(note.unwrap().contains("to stay within"));
        let e = SliceGeometry::axis_within(&v, plane, Some(0.5), 2000).unwrap_err();
        assert!(e.to_string().contains("199 x 159 pixel picture"), "{e}");
        // extreme anisotropy in the plane: 1e-45 mm beside 36 µm
        let tiny = Volume::from_vec(
            [16, 12, 5],
            Affine3::from_spacing([1e-45, 0.036, 0.05]),
            vec![0u8; 960],
        )
        .unwrap();
        let (g, note) = SliceGeometry::axis_within(&tiny, plane, None, DEFAULT_MAX_PIXELS).unwrap();
        assert!(g.width * g.height <= DEFAULT_MAX_PIXELS && note.is_some());
    }
}
