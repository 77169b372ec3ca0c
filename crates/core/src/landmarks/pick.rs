//! Surface picking: where a ray from a 3D view, or a search from a point on a slice, meets the
//! boundary of the material, at sub-voxel precision.
//!
//! **The boundary** is the iso-surface at `threshold` (rescaled units) of the trilinear
//! interpolant of the voxels, the same field the slice and surface views show. Material is
//! the side at or above the threshold. The default threshold is ISO-50 ([`iso50`]): halfway
//! between the background and material peaks of the histogram.
//!
//! **Along a ray** ([`pick_along_ray`]) the ray is clipped to the volume's cells
//! (`[-0.5, n - 0.5)` in voxel coordinates) and to `max_distance_mm`, then marched in steps of
//! at most 1/16 voxel along every axis ([`MARCH_STEP_VOXELS`]); the first step whose end lies
//! on the other side of the threshold is bisected on the trilinear values down to 1e-9 voxel.
//! Only a crossing of the field thinner than the step along the ray can be stepped over: the
//! core of a bony sliver thinner than the scan's blur can be that thin above the threshold,
//! which is why the step is fine (a ray across a 1024³ volume is about 28,000 samples, around
//! a millisecond; a slice search all around casts about a hundred rays, so give it a
//! `max_distance_mm`).
//!
//! **Where the search starts** decides what is found (see [`Crossing`]):
//! - origin in background (or outside the volume, as a camera is): the first entry into
//!   material, [`Crossing::Entry`];
//! - origin inside the volume and already in material (a click on bone in a slice): the exit
//!   from that material, [`Crossing::Exit`], which is the boundary nearest along the search;
//!   reporting an error instead would make a click just inside an edge useless;
//! - origin outside the volume and the ray enters it already in material (a scan whose edge
//!   cuts the specimen): the point where it enters, [`Crossing::VolumeFace`], which is what the
//!   surface view draws there. It is not a boundary of the material, so it is never refined.
//!
//! **Normals** are the negated gradient of the trilinear field (central differences one voxel
//! each way, mapped to world space by the transpose of `voxel_from_world`), so they point
//! from material to background, correctly for anisotropic and oblique voxel grids.
//!
//! **Refinement to the edge** (`refine_to_edge`): a blurred edge's threshold crossing moves
//! with the threshold; its steepest point does not. The refinement samples the intensity
//! profile along the normal through the crossing, takes its derivative by central
//! differences one voxel each way, and moves the point to the top of the derivative's peak
//! (a least-squares parabola over the peak's upper half) if that lies within 1.5 voxels.
//! Otherwise (no single edge there) the crossing is kept and `refined` is false. On noisy
//! data the steepest point is less certain than the crossing (differentiating amplifies the
//! noise); refinement pays when the threshold is off, e.g. where the material's grey value
//! drifts across the scan.
//!
//! **From a slice** ([`pick_in_slice`]): the search stays in the slice's plane, along one
//! direction, both ways, or all around (nearest boundary point); refinement then moves along
//! the in-plane part of the normal so that the point stays on the slice.
//!
//! Must not import `gui`.

use crate::geometry::{VoxelPoint, WorldPoint};
use crate::volume::{Histogram, Volume};
use nalgebra::Vector3;
use serde::Serialize;

/// How a pick searches.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PickOptions {
    /// The iso-value in rescaled units; material is at or above it.
    pub threshold: f64,
    /// How far from the origin to search (mm); `f64::INFINITY` searches to the volume's far
    /// side.
    pub max_distance_mm: f64,
    /// Move the crossing to the steepest point of the edge along the normal (see the module
    /// docs).
    pub refine_to_edge: bool,
}

impl PickOptions {
    /// A search at `threshold` with no distance limit and no refinement.
    #[must_use]
    pub fn new(threshold: f64) -> Self {
        Self {
            threshold,
            max_distance_mm: f64::INFINITY,
            refine_to_edge: false,
        }
    }

    /// A search at the volume's ISO-50 threshold ([`iso50_threshold`]).
    pub fn iso50(volume: &Volume) -> Result<Self, PickError> {
        Ok(Self::new(iso50_threshold(volume)?))
    }

    fn check(&self) -> Result<(), PickError> {
        if !self.threshold.is_finite() {
            return Err(PickError::BadThreshold(self.threshold));
        }
        if self.max_distance_mm.is_nan() || self.max_distance_mm <= 0.0 {
            return Err(PickError::BadMaxDistance(self.max_distance_mm));
        }
        Ok(())
    }
}

/// Which kind of boundary a pick found (see the module docs).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Crossing {
    /// From background into material.
    Entry,
    /// The search started inside material; the point is where it leaves.
    Exit,
    /// The ray entered the volume already in material: the point is on the volume's face.
    VolumeFace,
}

/// A picked surface point.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pick {
    /// The surface point in world millimetres (after refinement, if any).
    pub point: WorldPoint,
    /// Distance from the origin along the search ray to the threshold crossing (mm). A
    /// refined point may lie off the ray, by at most 1.5 voxels.
    pub distance_mm: f64,
    /// Unit surface normal at the point, from material towards background (world space);
    /// `None` where the gradient vanishes or for [`Crossing::VolumeFace`].
    pub normal: Option<Vector3<f64>>,
    /// Whether the point was moved to the steepest point of the edge.
    pub refined: bool,
    pub crossing: Crossing,
}

/// Where a search from a slice point looks, always within the slice's plane.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SliceSearch {
    /// Along one direction (its component within the plane).
    Along(Vector3<f64>),
    /// Along a direction and its opposite; the nearer crossing wins.
    BothWays(Vector3<f64>),
    /// Every direction in the plane: the nearest boundary point. Casts
    /// [`ALL_AROUND_RAYS`] rays, then re-aims along the in-plane normal of the best hit
    /// (up to three times) while that brings the point closer.
    AllAround,
}

/// Rays cast by [`SliceSearch::AllAround`], evenly spaced in angle.
pub const ALL_AROUND_RAYS: usize = 36;

/// Why a pick or a threshold cannot be computed. All but [`PickError::NoContrast`] are caller
/// mistakes.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum PickError {
    #[error("pick threshold {0} is not a finite number")]
    BadThreshold(f64),
    #[error("maximum pick distance {0} mm is not positive")]
    BadMaxDistance(f64),
    #[error("{0} has a coordinate that is not finite")]
    NotFinite(&'static str),
    #[error("{0} has zero length or is not finite")]
    ZeroDirection(&'static str),
    #[error("the search direction lies along the slice normal: it points out of the slice")]
    OutOfPlane,
    #[error("no iso-50 threshold: {0}")]
    NoContrast(String),
}

/// The first boundary crossing along the ray `origin + t·direction`, `0 ≤ t ≤ max_distance_mm`
/// (see the module docs for what "first" means when the origin is in material), at sub-voxel
/// precision (trilinear interpolation and bisection), optionally refined to the steepest point
/// of the edge. `Ok(None)` when the ray meets no boundary within the volume and the distance.
pub fn pick_along_ray(
    volume: &Volume,
    origin: WorldPoint,
    direction: Vector3<f64>,
    options: &PickOptions,
) -> Result<Option<Pick>, PickError> {
    options.check()?;
    finite_point(origin, "ray origin")?;
    let dir = unit(direction, "ray direction")?;
    let Some(hit) = cast(volume, origin, dir, options) else {
        return Ok(None);
    };
    Ok(Some(finish(volume, hit, options.refine_to_edge, None)))
}

/// The boundary nearest to `point` within the slice whose normal is `slice_normal`, searched
/// as `search` says, up to `max_distance_mm` from the point. Refinement moves along the
/// in-plane part of the surface normal so the point stays on the slice; where the surface
/// runs nearly parallel to the slice (in-plane part under 0.2 of the normal) it is skipped.
/// `distance_mm` is measured from `point`.
pub fn pick_in_slice(
    volume: &Volume,
    point: WorldPoint,
    slice_normal: Vector3<f64>,
    search: SliceSearch,
    options: &PickOptions,
) -> Result<Option<Pick>, PickError> {
    options.check()?;
    finite_point(point, "slice point")?;
    let pn = unit(slice_normal, "slice normal")?;
    let in_plane = |d: Vector3<f64>| -> Result<Vector3<f64>, PickError> {
        let d = unit(d, "search direction")?;
        (d - pn * pn.dot(&d))
            .try_normalize(1e-6)
            .ok_or(PickError::OutOfPlane)
    };
    let nearer = |a: Option<Hit>, b: Option<Hit>| match (a, b) {
        (Some(a), Some(b)) => Some(if b.t < a.t { b } else { a }),
        (a, b) => a.or(b),
    };
    let best = match search {
        SliceSearch::Along(d) => cast(volume, point, in_plane(d)?, options),
        SliceSearch::BothWays(d) => {
            let d = in_plane(d)?;
            nearer(
                cast(volume, point, d, options),
                cast(volume, point, -d, options),
            )
        }
        SliceSearch::AllAround => {
            let (e1, e2) = plane_basis(&pn);
            let ray = |a: f64| cast(volume, point, e1 * a.cos() + e2 * a.sin(), options);
            let spacing = std::f64::consts::TAU / ALL_AROUND_RAYS as f64;
            let mut best: Option<(f64, Hit)> = None;
            for k in 0..ALL_AROUND_RAYS {
                let a = spacing * k as f64;
                if let Some(h) = ray(a)
                    && best.is_none_or(|(_, b)| h.t < b.t)
                {
                    best = Some((a, h));
                }
            }
            best.map(|(a, h)| nearest_in_angle(&ray, a, spacing, h))
        }
    };
    let Some(hit) = best else {
        return Ok(None);
    };
    let refine_dir = if options.refine_to_edge {
        in_plane_normal(volume, &hit, &pn)
    } else {
        None
    };
    Ok(Some(finish(volume, hit, refine_dir.is_some(), refine_dir)))
}

/// Golden-section search for the nearest crossing over the angles `a ± spacing` around the
/// best of the evenly spaced rays, keeping the crossing kind of that ray. The distance to a
/// boundary is smooth in the angle near its minimum, so this converges on the foot of the
/// perpendicular from the point to the boundary.
fn nearest_in_angle(ray: &impl Fn(f64) -> Option<Hit>, a: f64, spacing: f64, start: Hit) -> Hit {
    let inv_phi = (5f64.sqrt() - 1.0) / 2.0;
    let mut best = start;
    let mut dist = |x: f64| match ray(x) {
        Some(h) if h.crossing == start.crossing => {
            if h.t < best.t {
                best = h;
            }
            h.t
        }
        _ => f64::INFINITY,
    };
    let (mut lo, mut hi) = (a - spacing, a + spacing);
    let mut x1 = hi - inv_phi * (hi - lo);
    let mut x2 = lo + inv_phi * (hi - lo);
    let (mut f1, mut f2) = (dist(x1), dist(x2));
    // 40 steps shrink the bracket by 0.618^40 ≈ 4e-9
    for _ in 0..40 {
        if f1 <= f2 {
            hi = x2;
            x2 = x1;
            f2 = f1;
            x1 = hi - inv_phi * (hi - lo);
            f1 = dist(x1);
        } else {
            lo = x1;
            x1 = x2;
            f1 = f2;
            x2 = lo + inv_phi * (hi - lo);
            f2 = dist(x2);
        }
    }
    best
}

/// The longest step of the march along a ray, in voxels along any axis.
pub const MARCH_STEP_VOXELS: f64 = 1.0 / 16.0;

/// A threshold crossing before normals and refinement.
#[derive(Clone, Copy, Debug)]
struct Hit {
    /// Voxel coordinate of the crossing.
    voxel: VoxelPoint,
    /// Distance from the origin (mm).
    t: f64,
    crossing: Crossing,
}

pub(super) fn finite_point(p: WorldPoint, what: &'static str) -> Result<(), PickError> {
    if p.0.iter().all(|c| c.is_finite()) {
        Ok(())
    } else {
        Err(PickError::NotFinite(what))
    }
}

pub(super) fn unit(d: Vector3<f64>, what: &'static str) -> Result<Vector3<f64>, PickError> {
    if !d.iter().all(|c| c.is_finite()) {
        return Err(PickError::ZeroDirection(what));
    }
    d.try_normalize(1e-300)
        .ok_or(PickError::ZeroDirection(what))
}

/// Two unit vectors completing `n` to an orthonormal frame.
fn plane_basis(n: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    let axis = (0..3)
        .min_by(|&a, &b| n[a].abs().total_cmp(&n[b].abs()))
        .unwrap_or(0);
    let mut e = Vector3::zeros();
    e[axis] = 1.0;
    let e1 = (e - n * n.dot(&e)).normalize();
    (e1, n.cross(&e1))
}

/// The unit in-plane part of the surface normal at a hit, if the surface crosses the plane
/// steeply enough for it to mean something (at least 0.2 of the normal).
fn in_plane_normal(volume: &Volume, hit: &Hit, pn: &Vector3<f64>) -> Option<Vector3<f64>> {
    if hit.crossing == Crossing::VolumeFace {
        return None;
    }
    let n = normal_at(volume, hit.voxel)?;
    let m = n - pn * pn.dot(&n);
    (m.norm() >= 0.2).then(|| m.normalize())
}

/// The trilinear value at a voxel coordinate.
fn value(volume: &Volume, p: &Vector3<f64>) -> Option<f64> {
    volume.sample_trilinear_voxel(VoxelPoint::new(p.x, p.y, p.z))
}

/// Finds the first crossing along a unit world direction (see the module docs).
fn cast(
    volume: &Volume,
    origin: WorldPoint,
    dir: Vector3<f64>,
    options: &PickOptions,
) -> Option<Hit> {
    let thr = options.threshold;
    let o = volume.world_to_voxel(origin).0.coords;
    // voxel displacement per millimetre along the ray
    let d = volume.voxel_from_world().apply_vector(dir);
    let dims = volume.dims();
    let (t0, t1) = clip_to_cells(&o, &d, dims, options.max_distance_mm)?;
    // Every point of [t0, t1] lies in the cells, but `o + d·t` computed at the clipped ends
    // may land a rounding error outside them (a ray from outside the box enters at t0):
    // sample at the point pulled back into the cells, so no sample of the segment is lost.
    let at = |t: f64| {
        let mut p = o + d * t;
        for a in 0..3 {
            p[a] = p[a].clamp(-0.5, dims[a] as f64 - 1.0);
        }
        p
    };
    let v0 = value(volume, &at(t0))?;
    let start_in_material = v0 >= thr;
    if start_in_material && t0 > 0.0 {
        return Some(Hit {
            voxel: voxel_point(at(t0)),
            t: t0,
            crossing: Crossing::VolumeFace,
        });
    }
    let crossing = if start_in_material {
        Crossing::Exit
    } else {
        Crossing::Entry
    };
    let step = MARCH_STEP_VOXELS / d.amax();
    // the march's length is bounded by the grid (a step moves 1/16 voxel along the ray's major
    // axis), and each step moves the parameter on even where `lo + step` rounds to `lo`
    let max_steps =
        (dims.iter().copied().max().unwrap_or(1) as f64 + 2.0) / MARCH_STEP_VOXELS * 2.0;
    let mut lo = t0;
    let mut steps = 0.0;
    while lo < t1 && steps < max_steps {
        steps += 1.0;
        let next = lo + step;
        let hi = if next > lo {
            next.min(t1)
        } else {
            lo.next_up().min(t1)
        };
        let v = value(volume, &at(hi))?;
        if (v >= thr) != start_in_material {
            let t = bisect(lo, hi, d.norm(), |t| {
                value(volume, &at(t)).is_some_and(|v| (v >= thr) == start_in_material)
            });
            return Some(Hit {
                voxel: voxel_point(at(t)),
                t,
                crossing,
            });
        }
        lo = hi;
    }
    None
}

fn voxel_point(v: Vector3<f64>) -> VoxelPoint {
    VoxelPoint::new(v.x, v.y, v.z)
}

/// Bisects `[lo, hi]` where `same(lo)` holds and `same(hi)` does not, to 1e-9 voxel
/// (`voxels_per_mm` converts); returns the midpoint of the last interval.
fn bisect(mut lo: f64, mut hi: f64, voxels_per_mm: f64, same: impl Fn(f64) -> bool) -> f64 {
    for _ in 0..200 {
        if (hi - lo) * voxels_per_mm <= 1e-9 {
            break;
        }
        let mid = 0.5 * (lo + hi);
        if same(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// The parameter interval of `o + t·d`, `0 ≤ t ≤ t_max`, inside the cells `[-0.5, n - 0.5)`
/// (pulled in by 1e-9 voxel at the open upper ends, so every point of it samples).
fn clip_to_cells(
    o: &Vector3<f64>,
    d: &Vector3<f64>,
    dims: [usize; 3],
    t_max: f64,
) -> Option<(f64, f64)> {
    let (mut t0, mut t1) = (0.0f64, t_max);
    for a in 0..3 {
        let (lo, hi) = (-0.5, dims[a] as f64 - 0.5 - 1e-9);
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

/// The unit normal (from material to background) at a voxel coordinate, `None` where the
/// gradient vanishes.
fn normal_at(volume: &Volume, p: VoxelPoint) -> Option<Vector3<f64>> {
    let dims = volume.dims();
    let p = p.0.coords;
    let mut gv = Vector3::zeros();
    for a in 0..3 {
        let last = dims[a] as f64 - 1.0;
        let (mut lo, mut hi) = (p, p);
        lo[a] = (p[a] - 1.0).clamp(0.0, last);
        hi[a] = (p[a] + 1.0).clamp(0.0, last);
        let span = hi[a] - lo[a];
        if span > 0.0 {
            gv[a] = (value(volume, &hi)? - value(volume, &lo)?) / span;
        }
    }
    // f(world) = F(voxel_from_world(world)): ∇_world = Aᵀ ∇_voxel
    let gw = volume.voxel_from_world().linear().transpose() * gv;
    (-gw).try_normalize(1e-300)
}

/// Refinement geometry, in voxels along the direction of refinement: the steepest point is
/// looked for within ±`REFINE_REACH`, the profile is sampled over ±`REFINE_WINDOW`, and its
/// derivative taken by central differences `REFINE_DIFF` each way (one voxel: half the noise
/// of a half-voxel difference, and the peak it blurs stays symmetric about the same top).
const REFINE_REACH_VOXELS: f64 = 1.5;
const REFINE_WINDOW_VOXELS: f64 = 3.0;
const REFINE_DIFF_VOXELS: f64 = 1.0;
const REFINE_SAMPLES_PER_VOXEL: f64 = 20.0;
/// The part of the derivative's peak fitted by a parabola: where it exceeds this fraction of
/// its maximum (the upper half: enough samples to average noise and the interpolant's kinks).
const REFINE_CAP: f64 = 0.5;

/// The steepest point of the edge along `n` (unit, world) through `p` (voxel coordinate).
///
/// The derivative of the trilinear profile is piecewise smooth with kinks at every cell face,
/// so its discrete maximum snaps to those kinks; instead a parabola is fitted by least squares
/// to the whole cap of the peak (every sample above [`REFINE_CAP`] of the maximum, contiguous
/// with it) and its vertex taken. `None` when the maximum lies beyond ±[`REFINE_REACH_VOXELS`],
/// its cap runs off the sampled window (no single edge there), or the intensity does not fall
/// along `n`.
fn steepest_point(volume: &Volume, p: VoxelPoint, n: &Vector3<f64>) -> Option<Vector3<f64>> {
    let dv = volume.voxel_from_world().apply_vector(*n);
    let mm_per_voxel = 1.0 / dv.norm();
    let h = REFINE_DIFF_VOXELS * mm_per_voxel;
    let step = mm_per_voxel / REFINE_SAMPLES_PER_VOXEL;
    let k_max = (REFINE_WINDOW_VOXELS * REFINE_SAMPLES_PER_VOXEL) as i64;
    let k_reach = (REFINE_REACH_VOXELS * REFINE_SAMPLES_PER_VOXEL) as i64;
    let o = p.0.coords;
    let f = |t: f64| value(volume, &(o + dv * t));
    // the fall of intensity along n per millimetre; None outside the volume
    let fall: Vec<Option<f64>> = (-k_max..=k_max)
        .map(|k| {
            let t = k as f64 * step;
            Some((f(t - h)? - f(t + h)?) / (2.0 * h))
        })
        .collect();
    let centre = k_max as usize;
    let reach = k_reach as usize;
    let (best, top) = (centre - reach..=centre + reach)
        .filter_map(|i| fall[i].map(|v| (i, v)))
        .max_by(|a, b| a.1.total_cmp(&b.1))?;
    if top <= 0.0 {
        return None;
    }
    let in_cap = |i: usize| fall[i].is_some_and(|v| v >= REFINE_CAP * top);
    let mut lo = best;
    while lo > 0 && in_cap(lo - 1) {
        lo -= 1;
    }
    let mut hi = best;
    while hi + 1 < fall.len() && in_cap(hi + 1) {
        hi += 1;
    }
    if lo == 0 || hi + 1 == fall.len() || !(fall[lo - 1].is_some() && fall[hi + 1].is_some()) {
        return None;
    }
    // least-squares parabola v = a + b·x + c·x² over the cap, x in samples from `best`
    let mut m = nalgebra::Matrix3::<f64>::zeros();
    let mut r = Vector3::<f64>::zeros();
    for (i, v) in fall.iter().enumerate().take(hi + 1).skip(lo) {
        let x = i as f64 - best as f64;
        let v = (*v)?;
        let basis = Vector3::new(1.0, x, x * x);
        m += basis * basis.transpose();
        r += basis * v;
    }
    let coef = m.lu().solve(&r)?;
    if coef[2] >= 0.0 {
        return None;
    }
    let x = -coef[1] / (2.0 * coef[2]);
    if !(x >= lo as f64 - best as f64 && x <= hi as f64 - best as f64) {
        return None;
    }
    let t = (best as f64 + x - k_max as f64) * step;
    (t.abs() <= REFINE_REACH_VOXELS * mm_per_voxel).then(|| o + dv * t)
}

/// Adds the normal and, if asked, the refinement; `refine_dir` overrides the direction of
/// refinement (the in-plane normal for slices).
fn finish(volume: &Volume, hit: Hit, refine: bool, refine_dir: Option<Vector3<f64>>) -> Pick {
    let face = hit.crossing == Crossing::VolumeFace;
    let mut normal = if face {
        None
    } else {
        normal_at(volume, hit.voxel)
    };
    let mut voxel = hit.voxel;
    let mut refined = false;
    if refine
        && !face
        && let Some(dir) = refine_dir.or(normal)
        && let Some(q) = steepest_point(volume, voxel, &dir)
    {
        voxel = voxel_point(q);
        refined = true;
        normal = normal_at(volume, voxel).or(normal);
    }
    Pick {
        point: volume.voxel_to_world(voxel),
        distance_mm: hit.t,
        normal,
        refined,
        crossing: hit.crossing,
    }
}

/// The two histogram peaks behind an ISO-50 threshold, in rescaled units.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Iso50 {
    /// The most populated peak below the material peak (matrix, resin, air).
    pub background: f64,
    /// The highest-intensity peak that stands out of the histogram (bone, fossil).
    pub material: f64,
    /// `(background + material) / 2`.
    pub threshold: f64,
}

/// Bins of the histogram behind [`iso50`].
pub const ISO50_BINS: usize = 512;

/// The ISO-50 threshold: halfway between the background and material peaks of the volume's
/// histogram. Taking the surface at 50 % of the step between the two materials' grey values is
/// common practice in CT metrology (dimensional measurement with industrial CT), because for a
/// blurred edge the 50 % level is where the edge's true position lies for a flat surface
/// whatever the blur. See [`iso50`] for how the peaks are found.
pub fn iso50_threshold(volume: &Volume) -> Result<f64, PickError> {
    Ok(iso50(volume)?.threshold)
}

/// The peaks behind the ISO-50 threshold: a [`ISO50_BINS`]-bin histogram of the rescaled values
/// between their 0.01th and 99.99th percentiles, passed to [`iso50_from_histogram`].
pub fn iso50(volume: &Volume) -> Result<Iso50, PickError> {
    let p = volume.percentiles(&[0.01, 99.99]);
    let (lo, hi) = (p[0], p[1]);
    if !(lo.is_finite() && hi.is_finite()) {
        return Err(PickError::NoContrast(
            "the volume holds no number".to_owned(),
        ));
    }
    if hi <= lo {
        return Err(PickError::NoContrast(format!(
            "nearly every voxel holds {lo}"
        )));
    }
    iso50_from_histogram(&volume.histogram(ISO50_BINS, lo, hi))
}

/// The ISO-50 peaks of a histogram.
///
/// The counts are smoothed (Gaussian, σ = 1.5 bins, zero outside the range) and every local
/// maximum gets its topographic prominence (its height above the higher of the lowest points
/// separating it from a higher maximum on either side, or from the range's end). A peak
/// counts when its prominence is at least half its height and its height at least 1/1000 of
/// the tallest: a hill of its own, not a ripple on a slope or a few stray voxels. The material
/// is the highest-intensity such peak (in CT the specimen is the densest phase); the
/// background is the tallest one below it (the embedding matrix rather than the thin layer of
/// air around a block). Peak positions are interpolated within their bin by a parabola.
pub fn iso50_from_histogram(h: &Histogram) -> Result<Iso50, PickError> {
    let n = h.counts.len();
    if n < 3 || h.hi.partial_cmp(&h.lo) != Some(std::cmp::Ordering::Greater) {
        return Err(PickError::NoContrast(format!(
            "a histogram of {n} bins over [{}, {}] is too small",
            h.lo, h.hi
        )));
    }
    let s = smooth(&h.counts, 1.5);
    let tallest = s.iter().copied().fold(0.0, f64::max);
    if tallest <= 0.0 {
        return Err(PickError::NoContrast("the histogram is empty".to_owned()));
    }
    let peaks: Vec<usize> = (0..n)
        .filter(|&i| {
            let left = if i == 0 { 0.0 } else { s[i - 1] };
            let right = if i + 1 == n { 0.0 } else { s[i + 1] };
            s[i] > left && s[i] >= right
        })
        .filter(|&i| s[i] >= 1e-3 * tallest && prominence(&s, i) >= 0.5 * s[i])
        .collect();
    let width = (h.hi - h.lo) / n as f64;
    let position = |i: usize| {
        let (a, b, c) = (
            if i == 0 { 0.0 } else { s[i - 1] },
            s[i],
            if i + 1 == n { 0.0 } else { s[i + 1] },
        );
        let curv = a - 2.0 * b + c;
        let frac = if curv < 0.0 && i > 0 && i + 1 < n {
            (0.5 * (a - c) / curv).clamp(-0.5, 0.5)
        } else {
            0.0
        };
        h.lo + (i as f64 + 0.5 + frac) * width
    };
    let (Some(&m), true) = (peaks.last(), peaks.len() >= 2) else {
        let at = peaks
            .first()
            .map_or_else(|| "none".to_owned(), |&i| format!("{:.6}", position(i)));
        return Err(PickError::NoContrast(format!(
            "the histogram has no separate background and material peaks (peak at {at}); \
             set the threshold by hand"
        )));
    };
    let b = peaks[..peaks.len() - 1]
        .iter()
        .copied()
        .max_by(|&x, &y| s[x].total_cmp(&s[y]))
        .unwrap_or(m);
    let (background, material) = (position(b), position(m));
    Ok(Iso50 {
        background,
        material,
        threshold: 0.5 * (background + material),
    })
}

/// Gaussian smoothing of counts (σ in bins), taking zero outside the range.
fn smooth(counts: &[u64], sigma: f64) -> Vec<f64> {
    let r = (3.0 * sigma).ceil() as i64;
    let kernel: Vec<f64> = (-r..=r)
        .map(|k| (-(k as f64).powi(2) / (2.0 * sigma * sigma)).exp())
        .collect();
    let total: f64 = kernel.iter().sum();
    let n = counts.len() as i64;
    (0..n)
        .map(|i| {
            (-r..=r)
                .filter(|k| (0..n).contains(&(i + k)))
                .map(|k| counts[(i + k) as usize] as f64 * kernel[(k + r) as usize])
                .sum::<f64>()
                / total
        })
        .collect()
}

/// Topographic prominence of the maximum at `i`, with zero beyond both ends.
fn prominence(s: &[f64], i: usize) -> f64 {
    let top = s[i];
    let mut left_min = top;
    let mut j = i;
    let mut left_base = 0.0;
    loop {
        if j == 0 {
            break; // reached the end: the floor is the zero beyond it
        }
        j -= 1;
        if s[j] > top {
            left_base = left_min;
            break;
        }
        left_min = left_min.min(s[j]);
    }
    let mut right_min = top;
    let mut right_base = 0.0;
    for &v in &s[i + 1..] {
        if v > top {
            right_base = right_min;
            break;
        }
        right_min = right_min.min(v);
    }
    top - f64::max(left_base, right_base)
}

/// How a scan's iso-value was chosen.
#[derive(Clone, Debug, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum IsoSource {
    /// ISO-50 of the histogram's background and material peaks ([`iso50`]).
    Iso50,
    /// The histogram has no two peaks to take ISO-50 from: halfway between the median (the
    /// embedding matrix) and the 99.5th percentile (the densest material), a first guess
    /// (common practice for a first look at a specimen scan). `why` says why ISO-50 failed.
    Fallback { why: String },
    /// Typed by the user.
    Given,
}

/// The one surface value of a scan: the 3D view draws its surface there, clicks on a plane
/// snap to it, clicks in the 3D view and `landmark pick` find it, and `render --mode surface`
/// draws it. ISO-50 by default.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct IsoValue {
    /// In rescaled grey values; material is at or above it.
    pub value: f64,
    pub source: IsoSource,
}

impl IsoValue {
    /// A value the user typed.
    #[must_use]
    pub fn given(value: f64) -> Self {
        Self {
            value,
            source: IsoSource::Given,
        }
    }

    /// What the value is and where it came from, for a status line or a log:
    /// `iso-value 23456 (ISO-50)`.
    #[must_use]
    pub fn describe(&self) -> String {
        let v = format_grey(self.value);
        match &self.source {
            IsoSource::Iso50 => format!("iso-value {v} (ISO-50)"),
            IsoSource::Given => format!("iso-value {v} (given)"),
            IsoSource::Fallback { why } => format!(
                "iso-value {v} (halfway between the median and the 99.5th percentile; no ISO-50: {why})"
            ),
        }
    }

    /// The short name of its source: `ISO-50`, `given` or `estimate`.
    #[must_use]
    pub fn source_name(&self) -> &'static str {
        match self.source {
            IsoSource::Iso50 => "ISO-50",
            IsoSource::Given => "given",
            IsoSource::Fallback { .. } => "estimate",
        }
    }
}

/// A grey value as people read them: whole numbers for integer-like values, else 4 significant
/// digits.
#[must_use]
pub fn format_grey(v: f64) -> String {
    if v.is_finite() && v.abs() >= 100.0 {
        format!("{v:.0}")
    } else {
        format!("{v:.4}")
            .trim_end_matches('0')
            .trim_end_matches('.')
            .to_owned()
    }
}

/// The scan's iso-value when the user has given none: ISO-50, else the stated fallback.
#[must_use]
pub fn default_iso_value(volume: &Volume) -> IsoValue {
    match iso50(volume) {
        Ok(i) => IsoValue {
            value: i.threshold,
            source: IsoSource::Iso50,
        },
        Err(e) => {
            let p = volume.percentiles(&[50.0, 99.5]);
            let why = match e {
                PickError::NoContrast(w) => w,
                other => other.to_string(),
            };
            IsoValue {
                value: 0.5 * (p[0] + p[1]),
                source: IsoSource::Fallback { why },
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;
    use crate::landmarks::pick_source::{SNAP_REACH_VOXELS, pick_view_ray, snap_to_boundary};
    use nalgebra::{Point3, Rotation3};
    use statrs::function::erf::erf;

    /// The value at distance `r` from the centre of a ball of radius `big_r` (indicator 1
    /// inside, 0 outside) convolved with an isotropic 3D Gaussian of standard deviation `sigma`.
    ///
    /// Derivation (radial integral): with `G` the Gaussian density, `f(r) = ∫_ball G(x − p) dx`
    /// for `|p| = r`. In spherical coordinates about the ball's centre the angular integral is
    /// elementary, `∫ exp(ρ r cosθ / σ²) dΩ = 2π σ² (e^{ρr/σ²} − e^{−ρr/σ²}) / (ρ r)`, leaving
    /// `f(r) = 1/(r σ √(2π)) ∫_0^R ρ [e^{−(ρ−r)²/2σ²} − e^{−(ρ+r)²/2σ²}] dρ`. Substituting
    /// `s = ρ ∓ r` splits each term into `∫ s e^{−s²/2σ²} ds` (exponentials) and
    /// `r ∫ e^{−s²/2σ²} ds` (error functions), which gives
    /// `f(r) = ½[erf((R−r)/σ√2) + erf((R+r)/σ√2)] − σ/(r√(2π)) [e^{−(R−r)²/2σ²} − e^{−(R+r)²/2σ²}]`:
    /// the flat-edge erf profile minus a curvature term. Equivalently `f(r)` is the probability
    /// that a normal vector `N(p, σ² I)` falls in the ball, the CDF of the noncentral
    /// chi-square distribution with 3 degrees of freedom and noncentrality `(r/σ)²` at
    /// `(R/σ)²`, which the test below checks against scipy.
    fn blurred_ball(r: f64, big_r: f64, sigma: f64) -> f64 {
        let s2 = sigma * std::f64::consts::SQRT_2;
        let erfs = 0.5 * (erf((big_r - r) / s2) + erf((big_r + r) / s2));
        if r < 1e-9 {
            // the limit r → 0 of the curvature term: 2R/(σ√(2π)) e^{−R²/2σ²}
            let g = (-(big_r * big_r) / (2.0 * sigma * sigma)).exp();
            return erfs - 2.0 * big_r / (sigma * (2.0 * std::f64::consts::PI).sqrt()) * g;
        }
        let e = |x: f64| (-(x * x) / (2.0 * sigma * sigma)).exp();
        erfs - sigma / (r * (2.0 * std::f64::consts::PI).sqrt()) * (e(big_r - r) - e(big_r + r))
    }

    #[test]
    fn blurred_ball_closed_form_matches_the_noncentral_chi_square_cdf() {
        // reference values: scipy 1.17.1, scipy.stats.ncx2.cdf((R/σ)², 3, (r/σ)²) with
        // R = 6, σ = 1.5, computed when this test was written
        for (r, want) in [
            (1.0, 0.997_267_159_614_436),
            (4.0, 0.847_285_002_290_966_5),
            (5.5, 0.527_635_961_356_521),
            (6.0, 0.400_264_429_899_642_5),
            (7.5, 0.110_261_109_027_628_38),
        ] {
            let got = blurred_ball(r, 6.0, 1.5);
            assert!((got - want).abs() < 1e-10, "r {r}: {got} vs scipy {want}");
        }
        // the centre: ncx2.cdf(16, 3, 0) = 0.9988660157102118 (scipy, as above)
        assert!((blurred_ball(0.0, 6.0, 1.5) - 0.998_866_015_710_211_8).abs() < 1e-12);
    }

    /// Solves `g(r) = 0` for an increasing-then-sign-changing `g` on `[lo, hi]` by bisection.
    fn root(mut lo: f64, mut hi: f64, g: impl Fn(f64) -> f64) -> f64 {
        let neg_lo = g(lo) < 0.0;
        assert_ne!(neg_lo, g(hi) < 0.0, "no sign change");
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if (g(mid) < 0.0) == neg_lo {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }

    const BALL_R: f64 = 8.0;
    const BALL_SIGMA: f64 = 1.2;
    const AIR: f64 = 1000.0;
    const DENSE: f64 = 21000.0;

    /// The blurred ball sampled at voxel centres (not blurred numerically) on an anisotropic,
    /// rotated grid: voxels 0.6 × 0.8 × 1.1 mm, axes turned by a few tens of degrees.
    fn ball_volume() -> (Volume, Point3<f64>) {
        let spacing = [0.6, 0.8, 1.1];
        let rot = Rotation3::from_euler_angles(0.3, -0.2, 0.5);
        let lin = rot.matrix() * nalgebra::Matrix3::from_diagonal(&Vector3::from(spacing));
        let dims = [48usize, 36, 27];
        let mid = Vector3::new(23.5, 17.5, 13.0);
        let centre = Point3::new(1.37, -2.21, 0.53);
        // voxel `mid + (0.31, -0.27, 0.19)` sits on the centre: the ball is off the grid
        let t = centre.coords - lin * (mid + Vector3::new(0.31, -0.27, 0.19));
        let world_from_voxel = Affine3::from_linear_translation(&lin, &t);
        let mut data = Vec::with_capacity(dims.iter().product());
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    let w = world_from_voxel.apply_point(Point3::new(i as f64, j as f64, k as f64));
                    let f = blurred_ball((w - centre).norm(), BALL_R, BALL_SIGMA);
                    data.push((AIR + (DENSE - AIR) * f) as f32);
                }
            }
        }
        (
            Volume::from_vec(dims, world_from_voxel, data).unwrap(),
            centre,
        )
    }

    /// Unit vectors spread evenly over the sphere (Fibonacci lattice).
    fn sphere_directions(n: usize) -> Vec<Vector3<f64>> {
        let golden = std::f64::consts::PI * (3.0 - 5f64.sqrt());
        (0..n)
            .map(|k| {
                let z = 1.0 - 2.0 * (k as f64 + 0.5) / n as f64;
                let r = (1.0 - z * z).sqrt();
                let a = golden * k as f64;
                Vector3::new(r * a.cos(), r * a.sin(), z)
            })
            .collect()
    }

    /// Millimetres along `n` per voxel step: the voxel size in the direction of `n`.
    fn voxel_mm_along(volume: &Volume, n: &Vector3<f64>) -> f64 {
        1.0 / volume.voxel_from_world().apply_vector(*n).norm()
    }

    #[test]
    fn picks_on_a_blurred_ball_lie_on_the_analytic_iso50_surface() {
        let (volume, c) = ball_volume();
        // ISO-50 radius: background 0, material 1 (the centre reads 1 − 4e-10 at R/σ = 6.7),
        // so the level is ½, below R because of the curvature term
        let r50 = root(BALL_R - 3.0 * BALL_SIGMA, BALL_R + 3.0 * BALL_SIGMA, |r| {
            0.5 - blurred_ball(r, BALL_R, BALL_SIGMA)
        });
        assert!(r50 < BALL_R - 0.05 && r50 > BALL_R - 0.5, "r50 {r50}");
        // steepest point of the radial profile: the maximum of −f'(r)
        let slope = |r: f64| {
            let h = 1e-5;
            (blurred_ball(r + h, BALL_R, BALL_SIGMA) - blurred_ball(r - h, BALL_R, BALL_SIGMA))
                / (2.0 * h)
        };
        // where f'' = 0
        let r_edge = root(BALL_R - 1.5 * BALL_SIGMA, BALL_R + 1.0 * BALL_SIGMA, |r| {
            let h = 1e-4;
            (slope(r + h) - slope(r - h)) / (2.0 * h)
        });
        let threshold = AIR + 0.5 * (DENSE - AIR);
        let plain = PickOptions::new(threshold);
        let refine = PickOptions {
            refine_to_edge: true,
            ..plain
        };
        let min_voxel = 0.6;
        let (mut worst, mut worst_refined) = (0.0f64, 0.0f64);
        let dirs = sphere_directions(400);
        for (k, d) in dirs.iter().enumerate() {
            // rays aimed past the centre by up to 0.55 R, so they meet the surface at
            // incidences from head-on to about 33° off the normal
            let (e1, e2) = plane_basis(d);
            let a = k as f64 * 2.4;
            let off = (e1 * a.cos() + e2 * a.sin()) * (0.55 * BALL_R * ((k % 7) as f64 / 6.0));
            let origin = WorldPoint(c - d * (BALL_R + 6.0 * BALL_SIGMA) + off);
            let pick = pick_along_ray(&volume, origin, *d, &plain)
                .unwrap()
                .expect("ray meets the ball");
            assert_eq!(pick.crossing, Crossing::Entry);
            assert!(!pick.refined);
            let radial = pick.point.0 - c;
            let n = radial.normalize();
            let err_voxels = (radial.norm() - r50).abs() / voxel_mm_along(&volume, &n);
            worst = worst.max(err_voxels);
            assert!(
                (radial.norm() - r50).abs() < 0.1 * min_voxel,
                "ray {k}: radius {} vs iso-50 {r50}",
                radial.norm()
            );
            let normal = pick.normal.expect("normal");
            assert!(
                normal.dot(&n) > 0.999,
                "ray {k}: normal {normal:?} vs {n:?}"
            );
            // the pick lies on the ray, at the distance reported
            let on_ray = origin.0 + d * pick.distance_mm;
            assert!((on_ray - pick.point.0).norm() < 1e-6);

            // refined: the steepest point of the edge, also within 0.1 of the smallest voxel side
            // (its radius differs from the iso-50 one by only 3 µm here, so this checks that
            // refinement does not move a good pick away)
            let r = pick_along_ray(&volume, origin, *d, &refine)
                .unwrap()
                .unwrap();
            assert!(r.refined, "ray {k} not refined");
            let rr = (r.point.0 - c).norm();
            let err = (rr - r_edge).abs() / voxel_mm_along(&volume, &n);
            worst_refined = worst_refined.max(err);
            assert!(
                (rr - r_edge).abs() < 0.1 * min_voxel,
                "ray {k}: refined radius {rr} vs steepest {r_edge} ({err:.3} voxel)"
            );
        }
        eprintln!(
            "iso-50 radius {r50:.4} mm, steepest {r_edge:.4} mm; worst error {worst:.4} voxel \
             (refined {worst_refined:.4}) along the normal"
        );
    }

    #[test]
    fn iso50_of_the_ball_is_halfway_between_air_and_dense() {
        let (volume, _) = ball_volume();
        let iso = iso50(&volume).unwrap();
        let contrast = DENSE - AIR;
        // the peaks are found to within a bin (1/512 of the range): allow 1 %
        assert!((iso.background - AIR).abs() < 0.01 * contrast, "{iso:?}");
        assert!((iso.material - DENSE).abs() < 0.01 * contrast, "{iso:?}");
        assert!((iso.threshold - 0.5 * (AIR + DENSE)).abs() < 0.01 * contrast);
        assert!((iso50_threshold(&volume).unwrap() - iso.threshold).abs() < 1e-12);
    }

    #[test]
    fn a_view_ray_finds_the_front_surface_wherever_its_point_lies() {
        let (volume, c) = ball_volume();
        let r50 = root(4.0, 12.0, |r| 0.5 - blurred_ball(r, BALL_R, BALL_SIGMA));
        let opts = PickOptions::new(0.5 * (AIR + DENSE));
        for d in sphere_directions(12) {
            // the point the ray passes through: the centre (inside material), a point beyond
            // the ball, and one far outside the box; each time the entry facing the viewer
            for through in [c, c + d * 30.0, c - d * 500.0] {
                let p = pick_view_ray(&volume, WorldPoint(through), d, &opts)
                    .unwrap()
                    .unwrap();
                assert_eq!(p.crossing, Crossing::Entry);
                let front = c - d * r50;
                assert!((p.point.0 - front).norm() < 0.06, "{:?}", p.point);
            }
        }
    }

    #[test]
    fn the_default_iso_value_is_iso50_or_a_stated_fallback() {
        let (volume, _) = ball_volume();
        let iso = default_iso_value(&volume);
        assert_eq!(iso.source, IsoSource::Iso50);
        assert!((iso.value - iso50_threshold(&volume).unwrap()).abs() < 1e-12);
        assert!(
            iso.describe().starts_with("iso-value "),
            "{}",
            iso.describe()
        );
        // a flat volume has no two peaks
        let flat = Volume::from_vec([4, 4, 4], Affine3::identity(), vec![7.0f32; 64]).unwrap();
        let iso = default_iso_value(&flat);
        assert!(matches!(iso.source, IsoSource::Fallback { .. }), "{iso:?}");
        assert!((iso.value - 7.0).abs() < 1e-12);
        assert!(iso.describe().contains("no ISO-50"), "{}", iso.describe());
    }

    #[test]
    fn snapping_finds_the_boundary_within_reach_only() {
        let (volume, c) = ball_volume();
        let r50 = root(4.0, 12.0, |r| 0.5 - blurred_ball(r, BALL_R, BALL_SIGMA));
        let iso = 0.5 * (AIR + DENSE);
        let sp = volume.spacing_mm();
        let reach = SNAP_REACH_VOXELS * sp[0].min(sp[1]).min(sp[2]);
        // a click 2 mm outside the ball on the plane z = centre snaps onto it
        let at = WorldPoint(c + Vector3::new(r50 + 2.0, 0.0, 0.0));
        let p = snap_to_boundary(&volume, at, Vector3::z(), iso)
            .unwrap()
            .unwrap();
        assert!(((p.point.0 - c).norm() - r50).abs() < 0.1, "{:?}", p.point);
        // one beyond reach finds nothing
        let far = WorldPoint(c + Vector3::new(r50 + reach + 1.0, 0.0, 0.0));
        assert_eq!(
            snap_to_boundary(&volume, far, Vector3::z(), iso).unwrap(),
            None
        );
    }

    #[test]
    fn from_inside_the_search_finds_the_exit() {
        let (volume, c) = ball_volume();
        let r50 = root(4.0, 12.0, |r| 0.5 - blurred_ball(r, BALL_R, BALL_SIGMA));
        let opts = PickOptions::new(0.5 * (AIR + DENSE));
        for d in sphere_directions(20) {
            let p = pick_along_ray(&volume, WorldPoint(c), d, &opts)
                .unwrap()
                .unwrap();
            assert_eq!(p.crossing, Crossing::Exit);
            assert!(((p.point.0 - c).norm() - r50).abs() < 0.06);
            assert!((p.distance_mm - r50).abs() < 0.06);
            // normals point from material to background: outwards here too
            assert!(p.normal.unwrap().dot(&d) > 0.999);
        }
    }

    #[test]
    fn misses_limits_and_the_volume_face() {
        let (volume, c) = ball_volume();
        let opts = PickOptions::new(0.5 * (AIR + DENSE));
        // a ray passing 12 mm from the centre misses
        let o = WorldPoint(c + Vector3::new(-40.0, 12.0, 0.0));
        assert_eq!(
            pick_along_ray(&volume, o, Vector3::x(), &opts).unwrap(),
            None
        );
        // a ray starting 40 mm out meets the ball only beyond a 20 mm limit
        let o = WorldPoint(c + Vector3::new(-40.0, 0.0, 0.0));
        let short = PickOptions {
            max_distance_mm: 20.0,
            ..opts
        };
        assert_eq!(
            pick_along_ray(&volume, o, Vector3::x(), &short).unwrap(),
            None
        );
        let hit = pick_along_ray(&volume, o, Vector3::x(), &opts)
            .unwrap()
            .unwrap();
        assert!((hit.distance_mm - 32.2).abs() < 0.3, "{hit:?}");

        // a slab of material cut by the volume's low-i face: from outside, the face
        let dims = [10, 4, 4];
        let data: Vec<u8> = (0..160)
            .map(|n| if n % 10 < 5 { 200 } else { 10 })
            .collect();
        let slab = Volume::from_vec(dims, Affine3::from_spacing([0.5, 1.0, 1.0]), data).unwrap();
        let o = PickOptions::new(105.0);
        let p = pick_along_ray(&slab, WorldPoint::new(-3.0, 1.5, 1.5), Vector3::x(), &o)
            .unwrap()
            .unwrap();
        assert_eq!(p.crossing, Crossing::VolumeFace);
        assert!((p.point.0.x - -0.25).abs() < 1e-9, "{p:?}");
        assert_eq!(p.normal, None);
        // from the other side, the material's boundary halfway between voxels 4 and 5
        let refine = PickOptions {
            refine_to_edge: true,
            ..o
        };
        let p = pick_along_ray(
            &slab,
            WorldPoint::new(9.0, 1.5, 1.5),
            -Vector3::x(),
            &refine,
        )
        .unwrap()
        .unwrap();
        assert_eq!(p.crossing, Crossing::Entry);
        // the linear ramp between the voxel centres at 2.0 and 2.5 mm is the steepest stretch;
        // its middle, to a hundredth of a voxel
        assert!((p.point.0.x - 2.25).abs() < 5e-3, "{p:?}");
        assert!((p.normal.unwrap() - Vector3::x()).norm() < 1e-9);
        // from inside the slab towards the face: the face is no boundary, no pick
        assert_eq!(
            pick_along_ray(&slab, WorldPoint::new(1.0, 1.5, 1.5), -Vector3::x(), &o).unwrap(),
            None
        );
    }

    #[test]
    fn slice_searches_stay_in_the_plane_and_find_the_nearest_boundary() {
        let (volume, c) = ball_volume();
        let r50 = root(4.0, 12.0, |r| 0.5 - blurred_ball(r, BALL_R, BALL_SIGMA));
        let opts = PickOptions {
            refine_to_edge: true,
            ..PickOptions::new(0.5 * (AIR + DENSE))
        };
        // a slice 3 mm above the centre, tilted: its circle of the surface has radius
        // √(r50² − 3²) about the foot of the centre on the plane
        let pn = Vector3::new(0.2, -0.1, 1.0).normalize();
        let foot = c + pn * 3.0;
        let ring = (r50 * r50 - 9.0).sqrt();
        let (e1, e2) = plane_basis(&pn);
        for (k, (start_r, angle)) in [(1.0, 0.3), (4.0, 2.0), (ring - 0.7, 4.0), (ring + 1.3, 5.5)]
            .into_iter()
            .enumerate()
        {
            let radial = e1 * f64::cos(angle) + e2 * f64::sin(angle);
            let point = WorldPoint(foot + radial * start_r);
            let p = pick_in_slice(&volume, point, pn, SliceSearch::AllAround, &opts)
                .unwrap()
                .unwrap();
            let q = p.point.0 - foot;
            assert!(q.dot(&pn).abs() < 1e-9, "case {k}: left the plane");
            // on the surface's circle, near the foot of the perpendicular from the click
            assert!(
                (q.norm() - ring).abs() < 0.1,
                "case {k}: {} vs {ring}",
                q.norm()
            );
            assert!(
                q.normalize().dot(&radial) > 0.999,
                "case {k}: not the nearest point"
            );
            assert!(
                (p.distance_mm - (ring - start_r).abs()).abs() < 0.1,
                "case {k}"
            );
            let want = if start_r < ring {
                Crossing::Exit
            } else {
                Crossing::Entry
            };
            assert_eq!(p.crossing, want, "case {k}");
        }
        // one direction, and both ways
        let point = WorldPoint(foot + e1 * 2.0);
        let along = pick_in_slice(&volume, point, pn, SliceSearch::Along(e1), &opts)
            .unwrap()
            .unwrap();
        assert!((along.distance_mm - (ring - 2.0)).abs() < 0.1);
        let back = pick_in_slice(&volume, point, pn, SliceSearch::Along(-e1), &opts)
            .unwrap()
            .unwrap();
        assert!((back.distance_mm - (ring + 2.0)).abs() < 0.1);
        // a direction with a component out of the plane is projected into it
        let both = pick_in_slice(
            &volume,
            point,
            pn,
            SliceSearch::BothWays(-e1 + pn * 5.0),
            &opts,
        )
        .unwrap()
        .unwrap();
        assert!((both.point.0 - along.point.0).norm() < 1e-9);
        assert_eq!(
            pick_in_slice(&volume, point, pn, SliceSearch::Along(pn), &opts),
            Err(PickError::OutOfPlane)
        );
    }

    /// The scan of the issue that found it: a ball of radius 0.5 mm blurred by σ = 30 µm on a
    /// flat background, 64×64×44 voxels of 20×20×30 µm, axis-aligned from the origin.
    fn small_ball() -> (Volume, Point3<f64>) {
        let spacing = [0.02, 0.02, 0.03];
        let dims = [64usize, 64, 44];
        let centre = Point3::new(0.634, 0.644, 0.657);
        let mut data = Vec::with_capacity(dims.iter().product());
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    let w = Point3::new(
                        i as f64 * spacing[0],
                        j as f64 * spacing[1],
                        k as f64 * spacing[2],
                    );
                    let f = blurred_ball((w - centre).norm(), 0.5, 0.03);
                    data.push((AIR + (DENSE - AIR) * f) as f32);
                }
            }
        }
        let volume = Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap();
        (volume, centre)
    }

    /// A ray that starts outside the scan's box enters it at a clipped parameter whose point
    /// may land a rounding error outside the cells; the cast must still sample there (this ray
    /// reported no surface before), and from inside the same ray finds the same point.
    #[test]
    fn a_ray_from_outside_the_box_finds_the_ball() {
        let (volume, c) = small_ball();
        let opts = PickOptions::new(AIR + 0.5 * (DENSE - AIR));
        let origin = WorldPoint::new(0.500_151_462, -0.077_617_434, 0.811_443_673);
        let d = c - origin.0;
        let hit = pick_along_ray(&volume, origin, d, &opts)
            .unwrap()
            .expect("the ray meets the ball");
        assert_eq!(hit.crossing, Crossing::Entry);
        let inside = WorldPoint(origin.0 + d.normalize() * 0.2);
        let again = pick_along_ray(&volume, inside, d, &opts).unwrap().unwrap();
        assert!((again.point.0 - hit.point.0).norm() < 1e-6);
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig { cases: 300, ..Default::default() })]

        /// Rays fired from anywhere outside the box (up to 5 mm away) at a point within half
        /// the radius of the ball's centre always find its surface, within a tenth of a voxel of
        /// the iso-50 sphere.
        #[test]
        fn every_ray_from_outside_finds_the_ball(
            dir in proptest::array::uniform3(-1.0f64..1.0),
            dist in 0.7f64..5.0,
            aim in proptest::array::uniform3(-0.25f64..0.25),
        ) {
            let (volume, c) = &*SMALL_BALL;
            let Some(u) = Vector3::from(dir).try_normalize(0.1) else { return Ok(()) };
            let origin = WorldPoint(c + u * (1.2 + dist));
            proptest::prop_assume!(!volume_contains(volume, origin));
            let target = c + Vector3::from(aim);
            let opts = PickOptions::new(AIR + 0.5 * (DENSE - AIR));
            let hit = pick_along_ray(volume, origin, target - origin.0, &opts).unwrap();
            let hit = hit.ok_or_else(|| proptest::test_runner::TestCaseError::fail(format!(
                "no surface from {origin:?} towards {target:?}"
            )))?;
            proptest::prop_assert_eq!(hit.crossing, Crossing::Entry);
            let r50 = root(0.3, 0.7, |r| 0.5 - blurred_ball(r, 0.5, 0.03));
            proptest::prop_assert!(((hit.point.0 - c).norm() - r50).abs() < 0.002);
        }
    }

    static SMALL_BALL: std::sync::LazyLock<(Volume, Point3<f64>)> =
        std::sync::LazyLock::new(small_ball);

    fn volume_contains(volume: &Volume, p: WorldPoint) -> bool {
        let v = volume.world_to_voxel(p).0;
        (0..3).all(|a| v[a] >= -0.5 && v[a] < volume.dims()[a] as f64 - 0.5)
    }

    #[test]
    fn bad_requests_are_refused() {
        let (volume, c) = ball_volume();
        let o = WorldPoint(c);
        let ok = PickOptions::new(11000.0);
        let x = Vector3::x();
        let bad = PickOptions::new(f64::NAN);
        assert!(matches!(
            pick_along_ray(&volume, o, x, &bad),
            Err(PickError::BadThreshold(_))
        ));
        for d in [-1.0, 0.0, f64::NAN] {
            let o2 = PickOptions {
                max_distance_mm: d,
                ..ok
            };
            assert!(matches!(
                pick_along_ray(&volume, o, x, &o2),
                Err(PickError::BadMaxDistance(_))
            ));
        }
        assert_eq!(
            pick_along_ray(&volume, o, Vector3::zeros(), &ok),
            Err(PickError::ZeroDirection("ray direction"))
        );
        assert_eq!(
            pick_along_ray(&volume, WorldPoint::new(f64::INFINITY, 0.0, 0.0), x, &ok),
            Err(PickError::NotFinite("ray origin"))
        );
        assert_eq!(
            pick_in_slice(&volume, o, Vector3::zeros(), SliceSearch::AllAround, &ok),
            Err(PickError::ZeroDirection("slice normal"))
        );
        assert_eq!(
            PickError::NoContrast("nearly every voxel holds 3".into()).to_string(),
            "no iso-50 threshold: nearly every voxel holds 3"
        );
    }

    fn histogram(counts: Vec<u64>, lo: f64, hi: f64) -> Histogram {
        Histogram {
            lo,
            hi,
            counts,
            below: 0,
            above: 0,
            nan: 0,
        }
    }

    /// Counts of normal distributions `(mean, sd, voxels)` over 512 bins of `[lo, hi]`, plus a
    /// flat floor.
    fn mixture(parts: &[(f64, f64, f64)], floor: f64, lo: f64, hi: f64) -> Histogram {
        let w = (hi - lo) / 512.0;
        let counts = (0..512)
            .map(|b| {
                let x = lo + (f64::from(b) + 0.5) * w;
                let mut c = floor;
                for &(m, s, n) in parts {
                    c += n * w / (s * (2.0 * std::f64::consts::PI).sqrt())
                        * (-(x - m).powi(2) / (2.0 * s * s)).exp();
                }
                c.round() as u64
            })
            .collect();
        histogram(counts, lo, hi)
    }

    #[test]
    fn iso50_takes_the_densest_peak_and_the_tallest_background() {
        // air around a resin block (a small narrow peak), resin (most voxels), bone (2 %),
        // with a floor of partial-volume voxels between resin and bone
        let h = mixture(
            &[
                (1000.0, 300.0, 150_000.0),
                (9000.0, 400.0, 800_000.0),
                (30000.0, 300.0, 20_000.0),
            ],
            20.0,
            0.0,
            32000.0,
        );
        let iso = iso50_from_histogram(&h).unwrap();
        assert!((iso.background - 9000.0).abs() < 40.0, "{iso:?}");
        assert!((iso.material - 30000.0).abs() < 40.0, "{iso:?}");
        assert!((iso.threshold - 19500.0).abs() < 40.0);
        // one phase only: refused with a reason
        let one = mixture(&[(9000.0, 400.0, 800_000.0)], 0.0, 0.0, 32000.0);
        let e = iso50_from_histogram(&one).unwrap_err();
        assert!(
            e.to_string()
                .contains("no separate background and material"),
            "{e}"
        );
        // a ripple on a slope is no peak: a ramp with a 10 % bump
        let ramp: Vec<u64> = (0..512u64)
            .map(|b| 1000 + 10 * b + if b == 300 { 400 } else { 0 })
            .collect();
        assert!(iso50_from_histogram(&histogram(ramp, 0.0, 1.0)).is_err());
        // a constant volume
        let flat = Volume::from_vec([3, 3, 3], Affine3::identity(), vec![7u16; 27]).unwrap();
        assert_eq!(
            iso50(&flat),
            Err(PickError::NoContrast(
                "nearly every voxel holds 7".to_owned()
            ))
        );
    }
}
