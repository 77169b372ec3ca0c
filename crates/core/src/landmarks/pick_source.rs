//! Picking on a scan of any size: the searches of [`super::pick`], run on full-resolution
//! blocks read around the ray or the click, so a landmark's precision never depends on the
//! scan's size or on the level a view shows.
//!
//! - Along a ray ([`pick_along_ray`]): the ray is clipped to the scan and cut into segments of
//!   [`SEGMENT_STEPS`] march steps; each segment is searched on a block holding it and
//!   [`MARGIN_VOXELS`] more on every side (what the normal and the refinement to the edge read
//!   around a crossing), until one finds a crossing. Segments start on the march's own step
//!   positions, so the crossing, its normal and its refinement are those of the whole scan in
//!   memory (to rounding, far below the 1e-9 voxel of the bisection's end).
//! - From a slice point ([`pick_in_slice`]): one block holding the search disc; a search with
//!   no distance limit looks within [`UNBOUNDED_SLICE_RADIUS_VOXELS`] voxels on a scan that is
//!   not in memory.
//! - ISO-50 ([`iso50`]): from the histogram the source keeps (exact for a store Sutura wrote
//!   from an integer scan).
//!
//! A scan wholly in memory is searched directly.

use super::pick::{
    self, Iso50, IsoSource, IsoValue, MARCH_STEP_VOXELS, Pick, PickError, PickOptions, SliceSearch,
};
use crate::geometry::{VoxelPoint, WorldPoint};
use crate::volume::source::region_around;
use crate::volume::{ReadError, VolumeSource};
use nalgebra::Vector3;

/// March steps per segment of a ray (64 voxels along the ray's major axis).
pub const SEGMENT_STEPS: usize = 1024;
/// Voxels read beyond a segment or a search disc on every side: the refinement samples up to
/// 3 voxels along the normal plus a 1-voxel difference, and trilinear interpolation one more.
pub const MARGIN_VOXELS: usize = 6;
/// How far a slice search without a distance limit looks on a scan that is not in memory.
pub const UNBOUNDED_SLICE_RADIUS_VOXELS: f64 = 128.0;

/// Why a pick on a source failed: the pick's own reasons, or reading the voxels.
#[derive(Debug, thiserror::Error)]
pub enum SourcePickError {
    #[error(transparent)]
    Pick(#[from] PickError),
    #[error(transparent)]
    Read(#[from] ReadError),
}

/// [`pick::pick_along_ray`] on any source (see the module docs).
pub fn pick_along_ray(
    source: &dyn VolumeSource,
    origin: WorldPoint,
    direction: Vector3<f64>,
    options: &PickOptions,
) -> Result<Option<Pick>, SourcePickError> {
    if let Some(v) = source.whole() {
        return Ok(pick::pick_along_ray(v, origin, direction, options)?);
    }
    // the pick's own checks first (threshold, distance, finite origin and direction)
    let dir = direction
        .try_normalize(1e-300)
        .filter(|d| d.iter().all(|c| c.is_finite()))
        .ok_or(PickError::ZeroDirection("ray direction"))?;
    let level = source.level(0);
    let vfw = level.world_from_voxel.inverse();
    let o = vfw.world_to_voxel(origin).0.coords;
    let d = vfw.apply_vector(dir);
    let Some((t0, t1)) = clip(&o, &d, level.dims, options.max_distance_mm) else {
        // let the in-memory search refuse bad options the same way
        return probe_options(source, origin, dir, options);
    };
    let step = MARCH_STEP_VOXELS / d.amax();
    let seg = step * SEGMENT_STEPS as f64;
    let mut ts = 0.0;
    let mut first = true;
    loop {
        let start = if first { t0 } else { ts };
        let end = (start + seg).min(t1);
        let points = [o + d * start, o + d * end];
        let Some(region) = region_around(&points, level.dims, MARGIN_VOXELS) else {
            return Ok(None);
        };
        let block = source.read_block(0, &region)?;
        let hit = if first {
            // from the real origin, so the entry and its kind are the whole scan's
            let sub = PickOptions {
                max_distance_mm: end,
                ..*options
            };
            pick::pick_along_ray(&block, origin, dir, &sub)?
        } else {
            let at = level
                .world_from_voxel
                .voxel_to_world(crate::geometry::VoxelPoint::new(
                    points[0].x,
                    points[0].y,
                    points[0].z,
                ));
            let sub = PickOptions {
                max_distance_mm: end - start,
                ..*options
            };
            pick::pick_along_ray(&block, at, dir, &sub)?.map(|mut p| {
                p.distance_mm += start;
                p
            })
        };
        if let Some(p) = hit {
            return Ok(Some(p));
        }
        if end >= t1 {
            return Ok(None);
        }
        // the next segment starts on a march step of this one
        ts = if first { t0 + seg } else { start + seg };
        first = false;
        if ts >= t1 {
            return Ok(None);
        }
    }
}

/// Runs the in-memory search on a one-voxel block, so bad options are refused with the same
/// error as in memory; a ray that misses the scan finds nothing.
fn probe_options(
    source: &dyn VolumeSource,
    origin: WorldPoint,
    dir: Vector3<f64>,
    options: &PickOptions,
) -> Result<Option<Pick>, SourcePickError> {
    let block = source.read_block(0, &[0..1, 0..1, 0..1])?;
    pick::pick_along_ray(&block, origin, dir, options)?;
    Ok(None)
}

/// The parameter interval of `o + t·d` (`t` in mm, `0 ≤ t ≤ t_max`) inside the cells.
fn clip(o: &Vector3<f64>, d: &Vector3<f64>, dims: [usize; 3], t_max: f64) -> Option<(f64, f64)> {
    if t_max.is_nan() || t_max <= 0.0 || !o.iter().all(|c| c.is_finite()) {
        return None;
    }
    let (mut t0, mut t1) = (0.0f64, t_max);
    for a in 0..3 {
        let (lo, hi) = (-0.5, dims[a] as f64 - 0.5);
        if d[a].abs() < 1e-300 {
            if o[a] < lo || o[a] > hi {
                return None;
            }
        } else {
            let (ta, tb) = ((lo - o[a]) / d[a], (hi - o[a]) / d[a]);
            t0 = t0.max(ta.min(tb));
            t1 = t1.min(ta.max(tb));
        }
    }
    (t0 <= t1 && t0.is_finite()).then_some((t0, t1))
}

/// [`pick::pick_in_slice`] on any source (see the module docs).
pub fn pick_in_slice(
    source: &dyn VolumeSource,
    point: WorldPoint,
    slice_normal: Vector3<f64>,
    search: SliceSearch,
    options: &PickOptions,
) -> Result<Option<Pick>, SourcePickError> {
    if let Some(v) = source.whole() {
        return Ok(pick::pick_in_slice(
            v,
            point,
            slice_normal,
            search,
            options,
        )?);
    }
    let level = source.level(0);
    let s = level.spacing_mm();
    let finest = s[0].min(s[1]).min(s[2]);
    let radius = if options.max_distance_mm.is_finite() && options.max_distance_mm > 0.0 {
        options.max_distance_mm
    } else {
        UNBOUNDED_SLICE_RADIUS_VOXELS * finest
    };
    let vfw = level.world_from_voxel.inverse();
    let mut corners = Vec::with_capacity(8);
    for c in 0..8 {
        let sign = |b: usize| if c >> b & 1 == 0 { -radius } else { radius };
        let p = WorldPoint(point.0 + Vector3::new(sign(0), sign(1), sign(2)));
        corners.push(vfw.world_to_voxel(p).0.coords);
    }
    let options = PickOptions {
        max_distance_mm: radius,
        ..*options
    };
    let Some(region) = region_around(&corners, level.dims, MARGIN_VOXELS) else {
        let block = source.read_block(0, &[0..1, 0..1, 0..1])?;
        return Ok(pick::pick_in_slice(
            &block,
            point,
            slice_normal,
            search,
            &options,
        )?);
    };
    let block = source.read_block(0, &region)?;
    Ok(pick::pick_in_slice(
        &block,
        point,
        slice_normal,
        search,
        &options,
    )?)
}

/// The surface a view shows under a pixel: the ray through `through` along `direction` is
/// started outside the volume's box (a camera may sit inside it, or anywhere on the line), so
/// the first crossing is the surface the picture shows in front of everything else.
/// `Ok(None)` when the ray meets no boundary, or enters the volume already in material (the
/// view shows the volume's face there, not a surface of the specimen).
pub fn pick_view_ray(
    volume: &dyn VolumeSource,
    through: WorldPoint,
    direction: Vector3<f64>,
    options: &PickOptions,
) -> Result<Option<Pick>, SourcePickError> {
    pick::finite_point(through, "view ray point")?;
    let dir = pick::unit(direction, "view ray direction")?;
    let d = volume.dims();
    let corner = |v: [f64; 3]| volume.voxel_to_world(VoxelPoint::new(v[0], v[1], v[2])).0;
    let lo = [-0.5; 3];
    let hi = [d[0] as f64 - 0.5, d[1] as f64 - 0.5, d[2] as f64 - 0.5];
    // the farthest box corner from `through` bounds how far back the ray must start
    let mut reach: f64 = 0.0;
    for c in 0..8 {
        let v = [
            if c & 1 == 0 { lo[0] } else { hi[0] },
            if c & 2 == 0 { lo[1] } else { hi[1] },
            if c & 4 == 0 { lo[2] } else { hi[2] },
        ];
        reach = reach.max((corner(v) - through.0).norm());
    }
    let start = WorldPoint(through.0 - dir * (reach * (1.0 + 1e-6) + 1e-9));
    let pick = pick_along_ray(volume, start, dir, options)?;
    Ok(pick.filter(|p| p.crossing != pick::Crossing::VolumeFace))
}

/// How far a click on a plane looks for the boundary to snap to, in voxels (of the smallest
/// spacing).
pub const SNAP_REACH_VOXELS: f64 = 10.0;

/// Snaps a point clicked on a plane to the nearest boundary at `iso` within the plane and
/// within [`SNAP_REACH_VOXELS`], refined to the edge. `Ok(None)` when there is no boundary in
/// reach (or only the volume's face).
pub fn snap_to_boundary(
    volume: &dyn VolumeSource,
    at: WorldPoint,
    plane_normal: Vector3<f64>,
    iso: f64,
) -> Result<Option<Pick>, SourcePickError> {
    let options = snap_options(volume, iso);
    let pick = pick_in_slice(volume, at, plane_normal, SliceSearch::AllAround, &options)?;
    Ok(pick.filter(|p| p.crossing != pick::Crossing::VolumeFace))
}

/// The search [`snap_to_boundary`] makes: `iso`, [`SNAP_REACH_VOXELS`] of the smallest voxel
/// spacing, refined to the edge.
#[must_use]
pub fn snap_options(volume: &dyn VolumeSource, iso: f64) -> PickOptions {
    let sp = volume.spacing_mm();
    PickOptions {
        threshold: iso,
        max_distance_mm: SNAP_REACH_VOXELS * sp[0].min(sp[1]).min(sp[2]),
        refine_to_edge: true,
    }
}

/// [`pick::default_iso_value`] of any source: ISO-50 from the histogram it keeps, else halfway
/// between its median and 99.5th percentile.
pub fn default_iso_value(source: &dyn VolumeSource) -> Result<IsoValue, ReadError> {
    if let Some(v) = source.whole() {
        return Ok(pick::default_iso_value(v));
    }
    match iso50(source) {
        Ok(i) => Ok(IsoValue {
            value: i.threshold,
            source: IsoSource::Iso50,
        }),
        Err(SourcePickError::Read(e)) => Err(e),
        Err(SourcePickError::Pick(e)) => {
            let i = source.intensity()?;
            let p = |q| i.percentile(q).unwrap_or(f64::NAN);
            let why = match e {
                PickError::NoContrast(w) => w,
                other => other.to_string(),
            };
            Ok(IsoValue {
                value: 0.5 * (p(50.0) + p(99.5)),
                source: IsoSource::Fallback { why },
            })
        }
    }
}

/// The ISO-50 peaks of a source, from the histogram it keeps.
pub fn iso50(source: &dyn VolumeSource) -> Result<Iso50, SourcePickError> {
    if let Some(v) = source.whole() {
        return Ok(pick::iso50(v)?);
    }
    let i = source.intensity()?;
    let h = i.histogram.ok_or_else(|| {
        PickError::NoContrast("the scan holds no number or a single value".to_owned())
    })?;
    Ok(pick::iso50_from_histogram(&h)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;
    use crate::io::Progress;
    use crate::io::slices::VolumeSlices;
    use crate::store::{ConvertOptions, Store, StoreOptions, convert};
    use crate::volume::Volume;
    use std::path::Path;

    /// A blurred ball of dense material in a lighter matrix, 16-bit, anisotropic voxels.
    fn ball() -> Volume {
        let dims = [70, 64, 50];
        let mut data = Vec::with_capacity(dims[0] * dims[1] * dims[2]);
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    let (x, y, z) = (
                        i as f64 * 0.01 - 0.35,
                        j as f64 * 0.01 - 0.3,
                        k as f64 * 0.012 - 0.3,
                    );
                    let r = (x * x + y * y + z * z).sqrt();
                    let v = 1000.0 + 3000.0 / (1.0 + ((r - 0.22) / 0.012).exp());
                    data.push(v.round() as u16);
                }
            }
        }
        Volume::from_vec(dims, Affine3::from_spacing([0.01, 0.01, 0.012]), data).unwrap()
    }

    #[test]
    fn picks_on_a_store_through_a_tiny_cache_equal_picks_in_memory() {
        let dir = tempfile::tempdir().unwrap();
        let v = ball();
        let out = dir.path().join("ball.ome.zarr");
        let options = ConvertOptions {
            chunk: 16,
            coarsest_bytes: 20_000,
            ..ConvertOptions::default()
        };
        convert(
            &mut VolumeSlices::new(&v, Path::new("ball")),
            &out,
            &options,
            &Progress::none(),
        )
        .unwrap();
        // a cache of eight chunks: every ray evicts
        let store = Store::open(
            &out,
            &StoreOptions {
                cache_bytes: 8 * 16 * 16 * 16 * 2,
                ..StoreOptions::default()
            },
        )
        .unwrap();
        assert!(store.level_count() > 1);
        let iso_mem = pick::iso50(&v).unwrap();
        let iso_store = iso50(&store).unwrap();
        assert_eq!(iso_mem, iso_store);
        let centre = v.centre_world();
        for (n, refine) in [(0, false), (1, true), (2, false), (3, true), (4, true)] {
            let a = f64::from(n) * 1.3;
            let dir = Vector3::new(a.cos(), a.sin(), 0.4 * (f64::from(n) - 2.0)).normalize();
            let origin = WorldPoint(centre.0 - dir * 2.0); // outside the scan
            let opts = PickOptions {
                refine_to_edge: refine,
                ..PickOptions::new(iso_mem.threshold)
            };
            let m = pick::pick_along_ray(&v, origin, dir, &opts)
                .unwrap()
                .unwrap();
            let s = pick_along_ray(&store, origin, dir, &opts).unwrap().unwrap();
            assert!(
                (m.point.0 - s.point.0).norm() < 1e-9,
                "ray {n}: {:?} vs {:?}",
                m.point,
                s.point
            );
            assert!((m.distance_mm - s.distance_mm).abs() < 1e-9);
            assert_eq!((m.crossing, m.refined), (s.crossing, s.refined));
            // from inside the ball: the exit, found in a later segment
            let inside = pick::pick_along_ray(&v, centre, dir, &opts)
                .unwrap()
                .unwrap();
            let inside_s = pick_along_ray(&store, centre, dir, &opts).unwrap().unwrap();
            assert!((inside.point.0 - inside_s.point.0).norm() < 1e-9);
            // in a slice, all around, within 0.15 mm
            let opts = PickOptions {
                max_distance_mm: 0.15,
                ..opts
            };
            let p = WorldPoint(centre.0 + dir * 0.1);
            let m =
                pick::pick_in_slice(&v, p, Vector3::z(), SliceSearch::AllAround, &opts).unwrap();
            let s = pick_in_slice(&store, p, Vector3::z(), SliceSearch::AllAround, &opts).unwrap();
            assert_eq!(m.is_some(), s.is_some());
            if let (Some(m), Some(s)) = (m, s) {
                assert!((m.point.0 - s.point.0).norm() < 1e-9);
            }
        }
        assert!(store.cache_stats().evictions > 0);
        // a long ray across many segments that misses the ball
        let o = v.voxel_to_world(crate::geometry::VoxelPoint::new(-3.0, 1.0, 1.0));
        let opts = PickOptions::new(iso_mem.threshold);
        assert_eq!(
            pick_along_ray(&store, o, Vector3::x(), &opts).unwrap(),
            None
        );
        assert!(pick_along_ray(&store, o, Vector3::zeros(), &opts).is_err());
    }
}
