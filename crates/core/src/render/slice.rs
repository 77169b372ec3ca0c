//! Resampling a plane of a volume into an [`F32Image`].
//!
//! A [`SliceGeometry`] says where the pixels are: the world position of the centre of pixel
//! `(0, 0)`, the unit in-plane directions `u` (columns) and `v` (rows), the pixel side in
//! millimetres and the image size. Pixels are square in world units, so anisotropic voxels do
//! not distort the picture. Builders cover the common cases: a voxel plane
//! ([`SliceGeometry::axis`]), any plane cut to the volume's footprint
//! ([`SliceGeometry::covering`]) or a fixed-size view centred on a point
//! ([`SliceGeometry::centred`]).
//!
//! [`render_slice`] fills the image with rescaled values, `NaN` where a pixel lies outside the
//! volume. Sampling follows [`crate::volume::sample`]: trilinear interpolation between voxel
//! centres inside `[0, n - 1]`, the edge value in the outer half-voxel rim, nothing outside
//! `[-0.5, n - 0.5)`; nearest takes the voxel whose cell holds the point.
//!
//! Speed: rows run in parallel; within a row the voxel coordinate advances by a constant step
//! (the plane's `u` step mapped once through `voxel_from_world`), with no per-pixel matrix
//! product; the inner loop is monomorphised per voxel type. When the pixel grid coincides with
//! the voxel grid (a voxel plane at native spacing) voxels are copied directly.

use super::geom::{PixelGrid, cell_corners, orthonormal_pair};
use super::{F32Image, RenderError, check_positive, check_size};
use crate::geometry::{Plane, VoxelPoint, WorldPoint};
use crate::volume::{Volume, Voxel};
use nalgebra::Vector3;
use rayon::prelude::*;

/// How values between voxel centres are obtained.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Interpolation {
    Nearest,
    #[default]
    Trilinear,
}

/// A voxel plane: all voxels with voxel coordinate `index` on `axis` (0 = i, 1 = j, 2 = k).
///
/// Image columns and rows follow the two other voxel axes in increasing order: axis 2 gives
/// columns along `i` and rows along `j`; axis 1 gives `i` and `k`; axis 0 gives `j` and `k`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct AxisPlane {
    pub axis: usize,
    pub index: usize,
}

impl AxisPlane {
    /// The voxel axes along image columns and rows.
    pub fn in_plane_axes(self) -> Result<(usize, usize), RenderError> {
        match self.axis {
            0 => Ok((1, 2)),
            1 => Ok((0, 2)),
            2 => Ok((0, 1)),
            a => Err(RenderError::BadAxis(a)),
        }
    }
}

/// How the samples across a thick slab are combined.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SlabMode {
    Mean,
    Max,
}

/// A slab of `thickness_mm` centred on the plane, along its normal. Samples are spaced at most
/// half the smallest voxel spacing apart, both faces included; samples outside the volume are
/// left out, and a pixel with none inside is `NaN`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Slab {
    pub thickness_mm: f64,
    pub mode: SlabMode,
}

/// Where the pixels of a slice lie in the world.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SliceGeometry {
    /// World position of the centre of pixel `(0, 0)` (top-left).
    pub origin: WorldPoint,
    /// Unit direction of increasing column.
    pub u: Vector3<f64>,
    /// Unit direction of increasing row, orthogonal to `u`.
    pub v: Vector3<f64>,
    pub pixel_mm: f64,
    pub width: usize,
    pub height: usize,
}

impl SliceGeometry {
    /// The world position of pixel `(col, row)` (fractional values allowed).
    #[must_use]
    pub fn pixel_world(&self, col: f64, row: f64) -> WorldPoint {
        WorldPoint(self.origin.0 + self.u * (col * self.pixel_mm) + self.v * (row * self.pixel_mm))
    }

    /// The pixel (fractional column, row) a world point projects to along the normal.
    #[must_use]
    pub fn world_to_pixel(&self, p: WorldPoint) -> (f64, f64) {
        let d = p.0 - self.origin.0;
        (
            d.dot(&self.u) / self.pixel_mm,
            d.dot(&self.v) / self.pixel_mm,
        )
    }

    /// `u × v`.
    #[must_use]
    pub fn normal(&self) -> Vector3<f64> {
        self.u.cross(&self.v)
    }

    /// The plane of the image, origin at pixel `(0, 0)`.
    #[must_use]
    pub fn plane(&self) -> Plane {
        Plane {
            origin: self.origin,
            u: self.u,
            v: self.v,
        }
    }

    /// A `width`×`height` view of `plane` with `plane.origin` at the image centre.
    pub fn centred(
        plane: &Plane,
        width: usize,
        height: usize,
        pixel_mm: f64,
    ) -> Result<Self, RenderError> {
        check_size(width, height)?;
        check_positive("pixel size", pixel_mm)?;
        let (u, v) = orthonormal(plane)?;
        let half_w = (width as f64 - 1.0) / 2.0 * pixel_mm;
        let half_h = (height as f64 - 1.0) / 2.0 * pixel_mm;
        Ok(Self {
            origin: WorldPoint(plane.origin.0 - u * half_w - v * half_h),
            u,
            v,
            pixel_mm,
            width,
            height,
        })
    }

    /// The part of `plane` that the volume's box (voxel cells included) projects onto, with
    /// `plane.origin` on a pixel centre. `pixel_mm` defaults to the smallest voxel spacing.
    pub fn covering(
        volume: &Volume,
        plane: &Plane,
        pixel_mm: Option<f64>,
    ) -> Result<Self, RenderError> {
        Self::covering_grid(volume.dims(), volume.world_from_voxel(), plane, pixel_mm)
    }

    /// [`Self::covering`] for a grid of `dims` voxels placed by `world_from_voxel` (a level of
    /// a [`VolumeSource`](crate::volume::VolumeSource)).
    pub fn covering_grid(
        dims: [usize; 3],
        world_from_voxel: &crate::geometry::Affine3,
        plane: &Plane,
        pixel_mm: Option<f64>,
    ) -> Result<Self, RenderError> {
        let sp = world_from_voxel.column_lengths();
        let px = check_positive(
            "pixel size",
            pixel_mm.unwrap_or(sp[0].min(sp[1]).min(sp[2])),
        )?;
        let (u, v) = orthonormal(plane)?;
        let (mut smin, mut smax, mut tmin, mut tmax) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
        for corner in super::geom::cell_corners_of(dims, world_from_voxel) {
            let w = corner - plane.origin.0;
            let (s, t) = (w.dot(&u) / px, w.dot(&v) / px);
            smin = smin.min(s);
            smax = smax.max(s);
            tmin = tmin.min(t);
            tmax = tmax.max(t);
        }
        let (c0, c1) = (smin.floor(), smax.ceil());
        let (r0, r1) = (tmin.floor(), tmax.ceil());
        let width = side(c1 - c0 + 1.0)?;
        let height = side(r1 - r0 + 1.0)?;
        check_size(width, height)?;
        Ok(Self {
            origin: WorldPoint(plane.origin.0 + u * (c0 * px) + v * (r0 * px)),
            u,
            v,
            pixel_mm: px,
            width,
            height,
        })
    }

    /// The voxel plane `plane`, from voxel centre 0 to the last along both in-plane axes.
    /// `pixel_mm` defaults to the smaller in-plane voxel spacing; at the native spacing of an
    /// axis-aligned volume every pixel is one voxel.
    pub fn axis(
        volume: &Volume,
        plane: AxisPlane,
        pixel_mm: Option<f64>,
    ) -> Result<Self, RenderError> {
        Self::axis_grid(volume.dims(), volume.world_from_voxel(), plane, pixel_mm)
    }

    /// [`Self::axis`] for a grid of `d` voxels placed by `world_from_voxel` (a level of a
    /// [`VolumeSource`](crate::volume::VolumeSource)).
    pub fn axis_grid(
        d: [usize; 3],
        world_from_voxel: &crate::geometry::Affine3,
        plane: AxisPlane,
        pixel_mm: Option<f64>,
    ) -> Result<Self, RenderError> {
        let (ca, ra) = plane.in_plane_axes()?;
        if plane.index >= d[plane.axis] {
            return Err(RenderError::IndexOutOfRange {
                axis: plane.axis,
                index: plane.index,
                len: d[plane.axis],
            });
        }
        let sp = world_from_voxel.column_lengths();
        let px = check_positive("pixel size", pixel_mm.unwrap_or(sp[ca].min(sp[ra])))?;
        let lin = world_from_voxel.linear();
        let u = lin.column(ca).normalize();
        let vr = lin.column(ra).into_owned();
        let v = (vr - u * u.dot(&vr)).normalize();
        // extents of the centres 0..n-1 along u and v
        let ext_u = (d[ca] as f64 - 1.0) * lin.column(ca).norm();
        let ext_v = (d[ra] as f64 - 1.0) * (vr - u * u.dot(&vr)).norm();
        let width = side((ext_u / px + 1e-9).floor() + 1.0)?;
        let height = side((ext_v / px + 1e-9).floor() + 1.0)?;
        check_size(width, height)?;
        let mut o = [0.0; 3];
        o[plane.axis] = plane.index as f64;
        Ok(Self {
            origin: world_from_voxel.voxel_to_world(VoxelPoint::new(o[0], o[1], o[2])),
            u,
            v,
            pixel_mm: px,
            width,
            height,
        })
    }
}

fn side(n: f64) -> Result<usize, RenderError> {
    if n.is_finite() && n >= 1.0 && n <= super::MAX_SIDE as f64 {
        Ok(n as usize)
    } else {
        Err(RenderError::BadSize {
            width: usize::MAX,
            height: usize::MAX,
        })
    }
}

fn orthonormal(plane: &Plane) -> Result<(Vector3<f64>, Vector3<f64>), RenderError> {
    orthonormal_pair(plane.u, plane.v, ("plane u", "plane v"))
}

/// The voxel `axis` plane at `index`, at native in-plane resolution (see
/// [`SliceGeometry::axis`]).
pub fn axis_slice(
    volume: &Volume,
    plane: AxisPlane,
    interpolation: Interpolation,
) -> Result<F32Image, RenderError> {
    let g = SliceGeometry::axis(volume, plane, None)?;
    render_slice(volume, &g, interpolation, None)
}

/// Any plane, cut to the volume's footprint (see [`SliceGeometry::covering`]).
pub fn oblique_slice(
    volume: &Volume,
    plane: &Plane,
    pixel_mm: Option<f64>,
    interpolation: Interpolation,
) -> Result<(SliceGeometry, F32Image), RenderError> {
    let g = SliceGeometry::covering(volume, plane, pixel_mm)?;
    let img = render_slice(volume, &g, interpolation, None)?;
    Ok((g, img))
}

/// Resamples the volume on the pixels of `geometry`; a `slab` averages or takes the maximum
/// across a thickness along the normal.
pub fn render_slice(
    volume: &Volume,
    geometry: &SliceGeometry,
    interpolation: Interpolation,
    slab: Option<Slab>,
) -> Result<F32Image, RenderError> {
    let mut out = F32Image {
        width: 0,
        height: 0,
        pixels: Vec::new(),
        pixel_mm: geometry.pixel_mm,
    };
    render_slice_into(volume, geometry, interpolation, slab, &mut out)?;
    Ok(out)
}

/// As [`render_slice`], into `out`, reusing its pixel buffer: a view redrawn at the same size
/// allocates nothing (fresh multi-megabyte buffers cost a page fault per 4 KiB).
pub fn render_slice_into(
    volume: &Volume,
    geometry: &SliceGeometry,
    interpolation: Interpolation,
    slab: Option<Slab>,
    out: &mut F32Image,
) -> Result<(), RenderError> {
    let n = check_size(geometry.width, geometry.height)?;
    let px = check_positive("pixel size", geometry.pixel_mm)?;
    let a = volume.voxel_from_world();
    let grid = PixelGrid::new(volume, geometry.origin, geometry.u * px, geometry.v * px)?;
    let slab_steps = match slab {
        None => None,
        Some(s) => {
            let t = check_positive("slab thickness", s.thickness_mm)?;
            let sp = volume.spacing_mm();
            // half the smallest spacing, but never less than half a voxel / √3 along the
            // normal's major voxel axis (the same for ordinary voxels; bounded for a spacing
            // of 1e-31 mm beside 0.07 mm)
            let nv = a.apply_vector(geometry.normal());
            let h = (0.5 * sp[0].min(sp[1]).min(sp[2])).max(0.5 / (3f64.sqrt() * nv.amax()));
            // samples beyond the box count for nothing: a slab thicker than the box is sampled
            // at the same spacing only as far as the box reaches
            let reach = cell_corners(volume)
                .iter()
                .map(|c| (c - geometry.origin.0).dot(&geometry.normal()).abs())
                .fold(0.0, f64::max);
            let span = t.min(2.0 * reach + 2.0 * h);
            let intervals = ((span / h).ceil() as usize).clamp(1, 1 << 16);
            let dn = a.apply_vector(geometry.normal() * (span / intervals as f64));
            Some((intervals + 1, dn, s.mode))
        }
    };
    let job = Job {
        grid,
        width: geometry.width,
        interpolation,
        slab: slab_steps,
    };
    out.pixels.clear();
    out.pixels.resize(n, f32::NAN);
    out.width = geometry.width;
    out.height = geometry.height;
    out.pixel_mm = px;
    let pixels = &mut out.pixels;
    crate::with_voxels!(volume.voxels(), |s| {
        let grid = Grid::new(s, volume.dims());
        if slab.is_none() && job.fill_direct(&grid, pixels) {
            // the pixel grid is the voxel grid
        } else {
            job.fill(&grid, pixels);
        }
    });
    if let Some(r) = volume.rescale() {
        let (m, b) = (r.slope as f32, r.intercept as f32);
        pixels.par_iter_mut().for_each(|p| *p = *p * m + b);
    }
    Ok(())
}

/// How many columns ahead an oblique trilinear row prefetches its cells.
const PREFETCH_COLS: usize = 12;

/// Tile size of trilinear slices (see [`Job::fill_tiled`]).
const TILE_COLS: usize = 64;
const TILE_ROWS: usize = 16;

struct Job {
    grid: PixelGrid,
    width: usize,
    interpolation: Interpolation,
    slab: Option<(usize, Vector3<f64>, SlabMode)>,
}

/// The voxel axis `d` runs along, when it has exactly one non-zero component.
fn single_axis(d: &Vector3<f64>) -> Option<usize> {
    let mut found = None;
    for a in 0..3 {
        if d[a] != 0.0 {
            if found.is_some() {
                return None;
            }
            found = Some(a);
        }
    }
    found
}

/// `Some(±axis)` when `d` is a unit step along one voxel axis.
fn unit_axis(d: &Vector3<f64>) -> Option<(usize, isize)> {
    let mut found = None;
    for a in 0..3 {
        if (d[a].abs() - 1.0).abs() < 1e-9 {
            if found.is_some() {
                return None;
            }
            found = Some((a, if d[a] > 0.0 { 1 } else { -1 }));
        } else if d[a].abs() > 1e-9 {
            return None;
        }
    }
    found
}

impl Job {
    /// Copies voxels when every pixel centre is a voxel centre; `false` if not applicable.
    fn fill_direct<T: Voxel>(&self, g: &Grid<'_, T>, out: &mut [f32]) -> bool {
        let PixelGrid { p0, dc, dr } = self.grid;
        let (Some((ua, us)), Some((va, vs))) = (unit_axis(&dc), unit_axis(&dr)) else {
            return false;
        };
        if p0.iter().any(|c| (c - c.round()).abs() > 1e-9) {
            return false;
        }
        let start = [
            p0.x.round() as isize,
            p0.y.round() as isize,
            p0.z.round() as isize,
        ];
        let dims = g.dims.map(|d| d as isize);
        let stride = [1, dims[0], dims[0] * dims[1]];
        out.par_chunks_mut(self.width)
            .enumerate()
            .for_each(|(row, line)| {
                let mut at = start;
                at[va] += vs * row as isize;
                if !(0..3).all(|a| a == ua || (0..dims[a]).contains(&at[a])) {
                    return;
                }
                for (col, px) in line.iter_mut().enumerate() {
                    let ci = at[ua] + us * col as isize;
                    if (0..dims[ua]).contains(&ci) {
                        let mut lin = ci * stride[ua];
                        for a in (0..3).filter(|&a| a != ua) {
                            lin += at[a] * stride[a];
                        }
                        *px = g.data[lin as usize].to_f32();
                    }
                }
            });
        true
    }

    /// Trilinear slices in tiles of [`TILE_COLS`]×[`TILE_ROWS`] pixels: an oblique plane
    /// touches a few new cache lines (and pages) per pixel, and within a tile the neighbouring
    /// rows reuse them while they are still in the first-level cache, which a whole image row
    /// (thousands of lines) would not allow.
    fn fill_tiled<T: Voxel>(&self, g: &Grid<'_, T>, out: &mut [f32]) {
        let w = self.width;
        if single_axis(&self.grid.dc).is_some() {
            // rows along a voxel axis read a few voxel rows each: whole rows, no tiles
            out.par_chunks_mut(w).enumerate().for_each(|(r, line)| {
                g.trilinear_row(&self.grid.at(0, r), &self.grid.dc, line);
            });
            return;
        }
        out.par_chunks_mut(TILE_ROWS * w)
            .enumerate()
            .for_each(|(band, rows)| {
                for c0 in (0..w).step_by(TILE_COLS) {
                    let c1 = (c0 + TILE_COLS).min(w);
                    for (ri, line) in rows.chunks_mut(w).enumerate() {
                        let s = self.grid.at(c0, band * TILE_ROWS + ri);
                        g.trilinear_row(&s, &self.grid.dc, &mut line[c0..c1]);
                    }
                }
            });
    }

    fn fill<T: Voxel>(&self, g: &Grid<'_, T>, out: &mut [f32]) {
        if self.slab.is_none() && self.interpolation == Interpolation::Trilinear {
            self.fill_tiled(g, out);
            return;
        }
        out.par_chunks_mut(self.width)
            .enumerate()
            .for_each(|(row, line)| {
                let s = self.grid.at(0, row);
                let d = self.grid.dc;
                match (self.slab, self.interpolation) {
                    (None, Interpolation::Trilinear) => g.trilinear_row(&s, &d, line),
                    (None, Interpolation::Nearest) => {
                        for (c, px) in line.iter_mut().enumerate() {
                            let c = c as f64;
                            *px = g.nearest(s.x + d.x * c, s.y + d.y * c, s.z + d.z * c);
                        }
                    }
                    (Some((ns, dn, mode)), interp) => {
                        let half = (ns as f64 - 1.0) / 2.0;
                        for (c, px) in line.iter_mut().enumerate() {
                            let c = c as f64;
                            let (x, y, z) = (s.x + d.x * c, s.y + d.y * c, s.z + d.z * c);
                            let (mut acc, mut count, mut max) = (0.0f64, 0u32, f32::NEG_INFINITY);
                            for k in 0..ns {
                                let o = k as f64 - half;
                                let (x, y, z) = ((x + dn.x * o), (y + dn.y * o), (z + dn.z * o));
                                let val = match interp {
                                    Interpolation::Trilinear => g.trilinear(x, y, z),
                                    Interpolation::Nearest => g.nearest(x, y, z),
                                };
                                if !val.is_nan() {
                                    acc += f64::from(val);
                                    count += 1;
                                    max = max.max(val);
                                }
                            }
                            if count > 0 {
                                *px = match mode {
                                    SlabMode::Mean => (acc / f64::from(count)) as f32,
                                    SlabMode::Max => max,
                                };
                            }
                        }
                    }
                }
            });
    }
}

/// A typed view of the voxels for the inner loops of slicing and ray casting, with the edge
/// rules of [`crate::volume::sample::trilinear_raw`].
pub(crate) struct Grid<'a, T> {
    pub(crate) data: &'a [T],
    pub(crate) dims: [usize; 3],
    /// `n - 0.5` per axis: the upper end of the cells.
    lim: [f64; 3],
    /// `n - 1`: the last centre.
    last: [f64; 3],
    /// Largest base index of an interpolation cell, `max(n - 2, 0)`.
    base_max: [usize; 3],
    /// Linear strides; 0 on a single-voxel axis so the "upper neighbour" is the voxel itself.
    stride: [usize; 3],
}

impl<'a, T: Voxel> Grid<'a, T> {
    pub(crate) fn new(data: &'a [T], dims: [usize; 3]) -> Self {
        let st = |a: usize, s: usize| if dims[a] > 1 { s } else { 0 };
        Self {
            data,
            dims,
            lim: dims.map(|n| n as f64 - 0.5),
            last: dims.map(|n| n as f64 - 1.0),
            base_max: dims.map(|n| n.saturating_sub(2)),
            stride: [st(0, 1), st(1, dims[0]), st(2, dims[0] * dims[1])],
        }
    }

    #[inline]
    pub(crate) fn inside(&self, x: f64, y: f64, z: f64) -> bool {
        x >= -0.5 && x < self.lim[0] && y >= -0.5 && y < self.lim[1] && z >= -0.5 && z < self.lim[2]
    }

    /// Trilinear value (stored units), `NaN` outside the cells.
    #[inline]
    pub(crate) fn trilinear(&self, x: f64, y: f64, z: f64) -> f32 {
        if !self.inside(x, y, z) {
            return f32::NAN;
        }
        self.trilinear_inside(x, y, z)
    }

    /// As [`Self::trilinear`] for a point known to lie inside the cells.
    #[inline]
    pub(crate) fn trilinear_inside(&self, x: f64, y: f64, z: f64) -> f32 {
        let x = x.clamp(0.0, self.last[0]);
        let y = y.clamp(0.0, self.last[1]);
        let z = z.clamp(0.0, self.last[2]);
        let bx = (x as usize).min(self.base_max[0]);
        let by = (y as usize).min(self.base_max[1]);
        let bz = (z as usize).min(self.base_max[2]);
        let (tx, ty, tz) = (x - bx as f64, y - by as f64, z - bz as f64);
        let [s0, s1, s2] = self.stride;
        let i = bx + self.dims[0] * (by + self.dims[1] * bz);
        let d = self.data;
        let v = |o: usize| d[i + o].to_f64();
        // blend in f64 (as cheap as f32 in scalar code) so the only rounding is the final one
        let c00 = lerp(v(0), v(s0), tx);
        let c10 = lerp(v(s1), v(s1 + s0), tx);
        let c01 = lerp(v(s2), v(s2 + s0), tx);
        let c11 = lerp(v(s2 + s1), v(s2 + s1 + s0), tx);
        let c0 = lerp(c00, c10, ty);
        let c1 = lerp(c01, c11, ty);
        lerp(c0, c1, tz) as f32
    }

    /// Trilinear values along `s + c·d` for `c` in `0..out.len()`, written to `out` (`NaN`
    /// outside the cells). Columns whose sample lies where all eight neighbours exist without
    /// clamping (`[0, n - 1)` on every axis, the bulk of any slice) take a branch-free path
    /// with the cell's base index and weights from one affine step; the rim takes
    /// [`Self::trilinear`].
    pub(crate) fn trilinear_row(&self, s: &Vector3<f64>, d: &Vector3<f64>, out: &mut [f32]) {
        let width = out.len();
        if let Some(a) = single_axis(d) {
            self.axis_row(a, s, d[a], out);
            return;
        }
        let at = |c: usize| {
            let c = c as f64;
            [s.x + d.x * c, s.y + d.y * c, s.z + d.z * c]
        };
        let core = |p: [f64; 3]| (0..3).all(|a| p[a] >= 0.0 && p[a] < self.last[a]);
        // the columns in the core, from the line's crossing of each axis' bounds; the point is
        // affine in c and rounding is monotone, so checking the two ends covers the range
        let (mut lo, mut hi) = (0.0f64, width as f64);
        for a in 0..3 {
            if d[a].abs() < 1e-300 {
                if !(s[a] >= 0.0 && s[a] < self.last[a]) {
                    hi = lo;
                }
                continue;
            }
            let (ta, tb) = ((0.0 - s[a]) / d[a], (self.last[a] - s[a]) / d[a]);
            lo = lo.max(ta.min(tb));
            hi = hi.min(ta.max(tb));
        }
        let mut c0 = lo.ceil().max(0.0) as usize;
        let mut c1 = (hi.floor() as usize + 1).min(width);
        if hi < lo {
            c1 = c0;
        }
        while c0 < c1 && !core(at(c0)) {
            c0 += 1;
        }
        while c1 > c0 && !core(at(c1 - 1)) {
            c1 -= 1;
        }
        if c0 >= c1 {
            (c0, c1) = (width, width);
        }
        for (c, px) in out.iter_mut().enumerate().take(c0) {
            let [x, y, z] = at(c);
            *px = self.trilinear(x, y, z);
        }
        let (nx, nxy) = (self.dims[0], self.dims[0] * self.dims[1]);
        let data = self.data;
        for (c, px) in out.iter_mut().enumerate().take(c1).skip(c0) {
            // an oblique row reaches new voxel rows every pixel or two, each a cache miss:
            // fetch the cell `PREFETCH_COLS` columns ahead so the misses overlap
            if c + PREFETCH_COLS < c1 {
                let [x, y, z] = at(c + PREFETCH_COLS);
                let i = x as i64 as usize + nx * (y as i64 as usize) + nxy * (z as i64 as usize);
                prefetch(data, i);
                prefetch(data, i + nx);
                prefetch(data, i + nxy);
                prefetch(data, i + nxy + nx);
            }
            let [x, y, z] = at(c);
            // in the core every coordinate is non-negative: truncation is floor (through i64,
            // a single instruction, where a direct f64 → usize conversion is not)
            let (bx, by, bz) = (x as i64 as usize, y as i64 as usize, z as i64 as usize);
            let (tx, ty, tz) = (
                (x - bx as f64) as f32,
                (y - by as f64) as f32,
                (z - bz as f64) as f32,
            );
            let i = bx + nx * by + nxy * bz;
            let v = |o: usize| data[i + o].to_f32();
            let c00 = lerp32(v(0), v(1), tx);
            let c10 = lerp32(v(nx), v(nx + 1), tx);
            let c01 = lerp32(v(nxy), v(nxy + 1), tx);
            let c11 = lerp32(v(nxy + nx), v(nxy + nx + 1), tx);
            *px = lerp32(lerp32(c00, c10, ty), lerp32(c01, c11, ty), tz);
        }
        for (c, px) in out.iter_mut().enumerate().skip(c1) {
            let [x, y, z] = at(c);
            *px = self.trilinear(x, y, z);
        }
    }

    /// [`Self::trilinear_row`] for a row along voxel axis `a` (a view of a voxel plane, panned
    /// or zoomed): the two other coordinates are constant, so their bilinear blend of the four
    /// voxel rows is computed once for the whole row (contiguous and vectorised when `a` is
    /// `i`) and each pixel is a linear interpolation in it.
    fn axis_row(&self, a: usize, s: &Vector3<f64>, da: f64, out: &mut [f32]) {
        let (p, q) = match a {
            0 => (1, 2),
            1 => (0, 2),
            _ => (0, 1),
        };
        if [p, q]
            .iter()
            .any(|&ax| !(s[ax] >= -0.5 && s[ax] < self.lim[ax]))
        {
            out.fill(f32::NAN);
            return;
        }
        let (p0, tp) = self.cell_axis(p, s[p]);
        let (q0, tq) = self.cell_axis(q, s[q]);
        let strides = [1, self.dims[0], self.dims[0] * self.dims[1]];
        // the voxels along a that the row reads
        let x_end = s[a] + da * (out.len() - 1) as f64;
        let first =
            (s[a].min(x_end).clamp(0.0, self.last[a]) as i64 as usize).min(self.dims[a] - 1);
        let last =
            ((s[a].max(x_end).clamp(0.0, self.last[a]) as i64 + 1) as usize).min(self.dims[a] - 1);
        let base = p0 * strides[p] + q0 * strides[q];
        let (sp, sq) = (self.stride[p], self.stride[q]);
        let w = [
            (1.0 - tp) * (1.0 - tq),
            tp * (1.0 - tq),
            (1.0 - tp) * tq,
            tp * tq,
        ];
        let d = self.data;
        let blend: Vec<f32> = (first..=last)
            .map(|i| {
                let o = base + i * strides[a];
                w[0] * d[o].to_f32()
                    + w[1] * d[o + sp].to_f32()
                    + w[2] * d[o + sq].to_f32()
                    + w[3] * d[o + sp + sq].to_f32()
            })
            .collect();
        let step = usize::from(self.dims[a] > 1);
        for (c, px) in out.iter_mut().enumerate() {
            let x = s[a] + da * c as f64;
            if !(x >= -0.5 && x < self.lim[a]) {
                *px = f32::NAN;
                continue;
            }
            let xc = x.clamp(0.0, self.last[a]);
            let b = (xc as i64 as usize).min(self.base_max[a]);
            let t = (xc - b as f64) as f32;
            let (v0, v1) = (blend[b - first], blend[b + step - first]);
            *px = lerp32(v0, v1, t);
        }
    }

    /// The clamped base index along `axis` of the cell holding coordinate `x` (inside the
    /// cells) and the weight of its upper neighbour.
    #[inline]
    fn cell_axis(&self, axis: usize, x: f64) -> (usize, f32) {
        let xc = x.clamp(0.0, self.last[axis]);
        let b = (xc as i64 as usize).min(self.base_max[axis]);
        (b, (xc - b as f64) as f32)
    }

    /// The value of the voxel whose cell holds the point, `NaN` outside.
    #[inline]
    pub(crate) fn nearest(&self, x: f64, y: f64, z: f64) -> f32 {
        if !self.inside(x, y, z) {
            return f32::NAN;
        }
        let ix = ((x + 0.5) as usize).min(self.dims[0] - 1);
        let iy = ((y + 0.5) as usize).min(self.dims[1] - 1);
        let iz = ((z + 0.5) as usize).min(self.dims[2] - 1);
        self.data[ix + self.dims[0] * (iy + self.dims[1] * iz)].to_f32()
    }
}

/// A hint to fetch the cache line holding `data[i]` (nothing when `i` is out of range or the
/// target has no prefetch instruction).
#[inline]
pub(crate) fn prefetch<T>(data: &[T], i: usize) {
    #[cfg(target_arch = "x86_64")]
    if let Some(p) = data.get(i) {
        // SAFETY: a prefetch is a hint with no architectural effect; the pointer is valid
        // (it comes from a reference into the slice) and SSE is part of the x86_64 baseline.
        unsafe {
            std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(
                std::ptr::from_ref(p).cast::<i8>(),
            );
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = (data, i);
}

/// `a + (b - a)·t` in f32, for the slice's inner loop (16-bit stored values are exact in f32,
/// and the output is f32).
#[inline]
fn lerp32(a: f32, b: f32, t: f32) -> f32 {
    a + (b - a) * t
}

/// `a + (b - a)·t`, written out so that no slow software fused multiply-add is used on targets
/// without the FMA instruction.
#[inline]
fn lerp(a: f64, b: f64, t: f64) -> f64 {
    a + (b - a) * t
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Affine3, VoxelIndex};
    use crate::volume::Rescale;
    use rand::{Rng, SeedableRng};

    fn random_volume(dims: [usize; 3], spacing: [f64; 3], seed: u64) -> Volume {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let data: Vec<u16> = (0..dims[0] * dims[1] * dims[2])
            .map(|_| rng.random())
            .collect();
        Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap()
    }

    #[test]
    #[allow(
        clippy::float_cmp,
        reason = "voxels copied or sampled on their centres are exact"
    )]
    fn axis_slice_equals_direct_voxel_read() {
        let v = random_volume([7, 5, 4], [0.1, 0.1, 0.1], 1);
        for axis in 0..3 {
            let index = 2;
            let img = axis_slice(&v, AxisPlane { axis, index }, Interpolation::Trilinear).unwrap();
            let (ca, ra) = AxisPlane { axis, index }.in_plane_axes().unwrap();
            assert_eq!((img.width, img.height), (v.dims()[ca], v.dims()[ra]));
            for r in 0..img.height {
                for c in 0..img.width {
                    let mut ijk = [0; 3];
                    ijk[axis] = index;
                    ijk[ca] = c;
                    ijk[ra] = r;
                    let want = v.value(VoxelIndex::new(ijk[0], ijk[1], ijk[2])).unwrap();
                    assert_eq!(f64::from(img.get(c, r)), want);
                }
            }
        }
        assert!(matches!(
            axis_slice(&v, AxisPlane { axis: 2, index: 4 }, Interpolation::Nearest),
            Err(RenderError::IndexOutOfRange { .. })
        ));
        assert!(matches!(
            axis_slice(&v, AxisPlane { axis: 3, index: 0 }, Interpolation::Nearest),
            Err(RenderError::BadAxis(3))
        ));
    }

    #[test]
    #[allow(
        clippy::float_cmp,
        reason = "voxels copied or sampled on their centres are exact"
    )]
    fn anisotropic_axis_slice_has_square_pixels() {
        // k spacing 3× i: an axis-1 slice (columns i, rows k) gets 3 rows per voxel
        let v = random_volume([6, 4, 3], [0.01, 0.02, 0.03], 2);
        let g = SliceGeometry::axis(&v, AxisPlane { axis: 1, index: 1 }, None).unwrap();
        assert!((g.pixel_mm - 0.01).abs() < 1e-15);
        assert_eq!((g.width, g.height), (6, 7));
        let img = render_slice(&v, &g, Interpolation::Nearest, None).unwrap();
        // row 3 is at k = 1.0 exactly
        for c in 0..6 {
            assert_eq!(
                f64::from(img.get(c, 3)),
                v.value(VoxelIndex::new(c, 1, 1)).unwrap()
            );
        }
        // trilinear row 1 is a third of the way from k = 0 to k = 1
        let img = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        let a = v.value(VoxelIndex::new(2, 1, 0)).unwrap();
        let b = v.value(VoxelIndex::new(2, 1, 1)).unwrap();
        assert!((f64::from(img.get(2, 1)) - (a + (b - a) / 3.0)).abs() < 1e-2);
    }

    #[test]
    fn oblique_plane_through_voxel_plane_equals_axis_slice() {
        let v = random_volume([9, 8, 5], [0.02, 0.02, 0.05], 3);
        let axis = AxisPlane { axis: 2, index: 3 };
        let want = axis_slice(&v, axis, Interpolation::Trilinear).unwrap();
        // the same plane, found from three world points on it: no fast path, general stepping
        let p = |i: f64, j: f64| v.voxel_to_world(crate::geometry::VoxelPoint::new(i, j, 3.0));
        let plane = Plane::through_points(p(0.0, 0.0), p(1.0, 0.0), p(0.0, 1.0)).unwrap();
        let mut g = SliceGeometry::centred(&plane, 9, 8, 0.02).unwrap();
        g.origin = plane.origin;
        // perturb by far less than a voxel so the direct copy cannot be used
        g.origin.0.x += 1e-9;
        let got = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        for (a, b) in got.pixels.iter().zip(&want.pixels) {
            assert!((a - b).abs() <= 1e-3 * b.abs().max(1.0), "{a} vs {b}");
        }
        let near = render_slice(&v, &g, Interpolation::Nearest, None).unwrap();
        assert_eq!(near.pixels, want.pixels);
    }

    #[test]
    fn outside_is_nan_and_rescale_applies() {
        let mut v = random_volume([4, 4, 4], [1.0, 1.0, 1.0], 4);
        v.set_rescale(Rescale::new(2.0, -5.0));
        let plane = Plane::from_normal(
            WorldPoint::new(1.5, 1.5, 1.5),
            Vector3::new(1.0, 1.0, 1.0),
            Vector3::z(),
        )
        .unwrap();
        let g = SliceGeometry::centred(&plane, 40, 40, 0.25).unwrap();
        let img = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        assert!(img.get(0, 0).is_nan());
        let mid = img.get(20, 20);
        let p = g.pixel_world(20.0, 20.0);
        let w = v.sample_trilinear(p).unwrap();
        assert!((f64::from(mid) - w).abs() <= 1e-6 * w.abs().max(1.0));
        // every pixel agrees with Volume::sample_trilinear, NaN where it says None
        for r in 0..40 {
            for c in 0..40 {
                let want = v.sample_trilinear(g.pixel_world(c as f64, r as f64));
                let got = img.get(c, r);
                match want {
                    None => assert!(got.is_nan(), "({c}, {r})"),
                    Some(w) => assert!(
                        (f64::from(got) - w).abs() <= 1e-6 * w.abs().max(1.0),
                        "({c}, {r})"
                    ),
                }
            }
        }
    }

    #[test]
    fn panned_and_zoomed_voxel_plane_views_match_point_sampling() {
        // rows along each voxel axis take the row-blend path; every pixel must equal
        // Volume::sample_trilinear at its centre, NaN where that says None
        let v = random_volume([9, 8, 7], [0.1, 0.12, 0.15], 7);
        for (u, w) in [
            (Vector3::x(), Vector3::y()),
            (Vector3::y(), Vector3::z()),
            (Vector3::z(), -Vector3::x()),
        ] {
            let plane = Plane {
                origin: WorldPoint::new(0.33, 0.41, 0.52),
                u,
                v: w,
            };
            let mut out = F32Image {
                width: 0,
                height: 0,
                pixels: Vec::new(),
                pixel_mm: 0.0,
            };
            for px in [0.037, 0.07] {
                let g = SliceGeometry::centred(&plane, 41, 37, px).unwrap();
                render_slice_into(&v, &g, Interpolation::Trilinear, None, &mut out).unwrap();
                let mut inside = 0;
                for r in 0..g.height {
                    for c in 0..g.width {
                        let got = out.get(c, r);
                        match v.sample_trilinear(g.pixel_world(c as f64, r as f64)) {
                            None => assert!(got.is_nan(), "({c}, {r}) {got}"),
                            Some(want) => {
                                inside += 1;
                                assert!(
                                    (f64::from(got) - want).abs() <= 1e-4 * want.abs().max(1.0),
                                    "({c}, {r}): {got} vs {want}"
                                );
                            }
                        }
                    }
                }
                assert!(inside > 100, "{u:?} {px}: {inside}");
            }
        }
    }

    #[test]
    fn slab_max_is_at_least_mean() {
        let v = random_volume([12, 11, 10], [0.02, 0.03, 0.04], 5);
        let plane = Plane::from_normal(v.centre_world(), Vector3::new(0.2, 0.3, 1.0), Vector3::y())
            .unwrap();
        let g = SliceGeometry::covering(&v, &plane, None).unwrap();
        let slab = |mode| Slab {
            thickness_mm: 0.12,
            mode,
        };
        let mean =
            render_slice(&v, &g, Interpolation::Trilinear, Some(slab(SlabMode::Mean))).unwrap();
        let max =
            render_slice(&v, &g, Interpolation::Trilinear, Some(slab(SlabMode::Max))).unwrap();
        let thin = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        let mut inside = 0;
        for ((a, b), t) in max.pixels.iter().zip(&mean.pixels).zip(&thin.pixels) {
            if t.is_finite() {
                inside += 1;
                assert!(a >= b && a >= t, "max {a} mean {b} centre {t}");
            }
        }
        assert!(inside > 50);
        // a slab of a volume constant along the normal equals the thin slice
        let data: Vec<f32> = (0..5 * 5 * 5).map(|n| (n % 25) as f32).collect();
        let flat = Volume::from_vec([5, 5, 5], Affine3::identity(), data).unwrap();
        let g = SliceGeometry::axis(&flat, AxisPlane { axis: 2, index: 2 }, None).unwrap();
        let m = render_slice(
            &flat,
            &g,
            Interpolation::Trilinear,
            Some(Slab {
                thickness_mm: 2.0,
                mode: SlabMode::Mean,
            }),
        )
        .unwrap();
        let t = render_slice(&flat, &g, Interpolation::Trilinear, None).unwrap();
        for (a, b) in m.pixels.iter().zip(&t.pixels) {
            assert!((a - b).abs() < 1e-4);
        }
        assert!(matches!(
            render_slice(
                &flat,
                &g,
                Interpolation::Trilinear,
                Some(Slab {
                    thickness_mm: 0.0,
                    mode: SlabMode::Max
                })
            ),
            Err(RenderError::NotPositive { .. })
        ));
    }

    #[test]
    fn single_voxel_axes_and_bad_geometry() {
        let v = Volume::from_vec([3, 1, 1], Affine3::identity(), vec![1u8, 2, 3]).unwrap();
        let g = SliceGeometry::axis(&v, AxisPlane { axis: 2, index: 0 }, Some(0.5)).unwrap();
        assert_eq!((g.width, g.height), (5, 1));
        let img = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        assert_eq!(img.pixels, vec![1.0, 1.5, 2.0, 2.5, 3.0]);
        let bad = SliceGeometry { width: 0, ..g };
        assert!(render_slice(&v, &bad, Interpolation::Trilinear, None).is_err());
        let bad = SliceGeometry {
            pixel_mm: f64::NAN,
            ..g
        };
        assert!(render_slice(&v, &bad, Interpolation::Trilinear, None).is_err());
    }
}
