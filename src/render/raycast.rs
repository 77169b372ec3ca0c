//! 3D views by ray casting on the CPU, with an orthographic [`Camera`].
//!
//! Every pixel owns one ray: it starts on the image plane (through [`Camera::centre`],
//! perpendicular to the view direction), runs along [`Camera::view_dir`] both ways, and is
//! clipped to the volume's box of cells `[-0.5, n - 0.5)` in voxel coordinates.
//!
//! - [`mip`]: maximum-intensity projection. Samples are taken where the ray crosses the voxel
//!   planes of the axis most aligned with the ray (the slice-order traversal of shear-warp
//!   rendering, Lacroute & Levoy 1994): there trilinear interpolation reduces to bilinear
//!   interpolation within one voxel plane, and the loop walks the volume plane by plane over a
//!   band of image rows, which keeps memory access local. The step along the ray is one voxel
//!   plane, at most √3 voxels long.
//! - [`surface`]: a shaded iso-surface: the first crossing of `threshold` along each ray,
//!   found by stepping and refined by bisection on trilinear values; the normal is the
//!   negated gradient (central differences) mapped to world space; Lambert shading with
//!   ambient light and an optional Blinn–Phong highlight and depth cue. Blocks of 8³ voxels
//!   whose maximum is below the threshold are skipped whole ([`Bricks`]). The world point of
//!   each hit is returned for picking.
//!
//! Progressive rendering: a [`Quality`] with `downsample = 4` casts one ray per 4×4 pixels
//! with longer steps, replicated to the full image size, for a quick preview while the view
//! moves; [`Quality::full`] then renders every pixel.

use super::slice::Grid;
use super::{F32Image, RenderError, RgbaImage, check_positive, check_size};
use crate::geometry::WorldPoint;
use crate::volume::{Volume, Voxel};
use nalgebra::{Matrix3, Point3, Vector3};
use rayon::prelude::*;

/// An orthographic camera. Image columns run along `view_dir × up` (the right), rows along
/// `-up` (down), so that `up` points to the top of the picture.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Camera {
    /// The world point shown at the image centre.
    pub centre: WorldPoint,
    /// The direction the rays travel (from the viewer into the scene).
    pub view_dir: Vector3<f64>,
    /// Up in the picture; only its part orthogonal to `view_dir` matters.
    pub up: Vector3<f64>,
    /// Side of a pixel in millimetres.
    pub pixel_mm: f64,
    pub width: usize,
    pub height: usize,
}

/// Render quality: `downsample` (1 = every pixel, 4 = one ray per 4×4 pixels) and the step
/// along the ray in voxels (of the smallest spacing). The maximum-intensity projection steps
/// from one voxel plane to the next, skipping `step_voxels.floor() - 1` planes between.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quality {
    pub downsample: usize,
    pub step_voxels: f64,
}

impl Quality {
    /// Every pixel, half-voxel steps.
    #[must_use]
    pub const fn full() -> Self {
        Self {
            downsample: 1,
            step_voxels: 0.5,
        }
    }

    /// One ray per 4×4 pixels, two-voxel steps: the preview while the view is moving.
    #[must_use]
    pub const fn coarse() -> Self {
        Self {
            downsample: 4,
            step_voxels: 2.0,
        }
    }
}

impl Default for Quality {
    fn default() -> Self {
        Self::full()
    }
}

/// The camera's frame in world space: unit right, down and view vectors.
#[derive(Clone, Copy, Debug)]
struct Frame {
    right: Vector3<f64>,
    down: Vector3<f64>,
    dir: Vector3<f64>,
}

impl Camera {
    /// A camera looking along `view_dir` at the volume's centre, zoomed so that the whole box
    /// fits the smaller image side whatever the direction (its diagonal spans that side).
    pub fn fit(
        volume: &Volume,
        view_dir: Vector3<f64>,
        up: Vector3<f64>,
        width: usize,
        height: usize,
    ) -> Result<Self, RenderError> {
        check_size(width, height)?;
        let d = volume.dims();
        // the longest of the four box diagonals
        let mut longest: f64 = 0.0;
        for s in [
            [1.0, 1.0, 1.0],
            [-1.0, 1.0, 1.0],
            [1.0, -1.0, 1.0],
            [1.0, 1.0, -1.0],
        ] {
            let v = volume.world_from_voxel().apply_vector(Vector3::new(
                s[0] * d[0] as f64,
                s[1] * d[1] as f64,
                s[2] * d[2] as f64,
            ));
            longest = longest.max(v.norm());
        }
        let cam = Self {
            centre: volume.centre_world(),
            view_dir,
            up,
            pixel_mm: longest / width.min(height) as f64,
            width,
            height,
        };
        cam.frame()?;
        Ok(cam)
    }

    /// The same camera with pixels `zoom` times smaller (`zoom > 1` magnifies).
    #[must_use]
    pub fn zoomed(mut self, zoom: f64) -> Self {
        self.pixel_mm /= zoom;
        self
    }

    fn frame(&self) -> Result<Frame, RenderError> {
        check_positive("camera pixel size", self.pixel_mm)?;
        if !self.centre.0.coords.iter().all(|c| c.is_finite()) {
            return Err(RenderError::NotFinite {
                name: "camera centre",
                value: f64::NAN,
            });
        }
        let dir = self
            .view_dir
            .try_normalize(1e-12)
            .ok_or(RenderError::BadDirection("view direction"))?;
        let up = self.up - dir * dir.dot(&self.up);
        let up = up
            .try_normalize(1e-9)
            .ok_or(RenderError::BadDirection("up"))?;
        let right = dir.cross(&up);
        Ok(Frame {
            right,
            down: -up,
            dir,
        })
    }

    /// The point on the image plane at pixel `(col, row)` (its ray runs along `view_dir`).
    pub fn pixel_world(&self, col: f64, row: f64) -> Result<WorldPoint, RenderError> {
        let f = self.frame()?;
        let c = col - (self.width as f64 - 1.0) / 2.0;
        let r = row - (self.height as f64 - 1.0) / 2.0;
        Ok(WorldPoint(
            self.centre.0 + f.right * (c * self.pixel_mm) + f.down * (r * self.pixel_mm),
        ))
    }

    /// The fractional pixel `(col, row)` a world point projects to.
    pub fn project(&self, p: WorldPoint) -> Result<(f64, f64), RenderError> {
        let f = self.frame()?;
        let d = p.0 - self.centre.0;
        Ok((
            d.dot(&f.right) / self.pixel_mm + (self.width as f64 - 1.0) / 2.0,
            d.dot(&f.down) / self.pixel_mm + (self.height as f64 - 1.0) / 2.0,
        ))
    }

    /// The camera for a downsampled pass: one pixel per `factor`×`factor` block, same view.
    fn downsampled(&self, factor: usize) -> Self {
        if factor <= 1 {
            return *self;
        }
        let w = self.width.div_ceil(factor);
        let h = self.height.div_ceil(factor);
        let f = factor as f64;
        // the small image's pixel (c, r) sits at the centre of the block it stands for
        let shift_c =
            ((w as f64 * f - 1.0) / 2.0 - (self.width as f64 - 1.0) / 2.0) * self.pixel_mm;
        let shift_r =
            ((h as f64 * f - 1.0) / 2.0 - (self.height as f64 - 1.0) / 2.0) * self.pixel_mm;
        let mut out = *self;
        if let Ok(fr) = self.frame() {
            out.centre = WorldPoint(self.centre.0 + fr.right * shift_c + fr.down * shift_r);
        }
        out.width = w;
        out.height = h;
        out.pixel_mm = self.pixel_mm * f;
        out
    }
}

/// Rays in voxel coordinates: the ray of pixel `(c, r)` starts at `p0 + c·dc + r·dr` and
/// moves by `dir` per millimetre.
#[derive(Clone, Copy, Debug)]
struct VoxelRays {
    p0: Vector3<f64>,
    dc: Vector3<f64>,
    dr: Vector3<f64>,
    dir: Vector3<f64>,
}

impl VoxelRays {
    fn new(volume: &Volume, cam: &Camera) -> Result<Self, RenderError> {
        let f = cam.frame()?;
        let a = volume.voxel_from_world();
        let p0 = a.apply_point(cam.pixel_world(0.0, 0.0)?.0).coords;
        Ok(Self {
            p0,
            dc: a.apply_vector(f.right * cam.pixel_mm),
            dr: a.apply_vector(f.down * cam.pixel_mm),
            dir: a.apply_vector(f.dir),
        })
    }

    fn origin(&self, c: usize, r: usize) -> Vector3<f64> {
        self.p0 + self.dc * c as f64 + self.dr * r as f64
    }
}

/// The parameter interval `[t0, t1]` (mm) where `o + t·d` lies in the box `[-0.5, n - 0.5]`.
fn clip_box(o: &Vector3<f64>, d: &Vector3<f64>, dims: [usize; 3]) -> Option<(f64, f64)> {
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

/// Options of the maximum-intensity projection.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MipOptions {
    pub quality: Quality,
}

/// Maximum-intensity projection: each pixel holds the largest rescaled value along its ray
/// (`NaN` where the ray misses the volume). With a negative rescale slope the smallest stored
/// value is taken, which is the largest rescaled one.
pub fn mip(volume: &Volume, camera: &Camera, options: MipOptions) -> Result<F32Image, RenderError> {
    check_size(camera.width, camera.height)?;
    check_positive("step", options.quality.step_voxels)?;
    let ds = options.quality.downsample.max(1);
    let cam = camera.downsampled(ds);
    let rays = VoxelRays::new(volume, &cam)?;
    let stride = (options.quality.step_voxels.floor() as usize).max(1);
    let negate = volume.rescale().is_some_and(|r| r.slope < 0.0);
    let mut pixels = vec![f32::NEG_INFINITY; cam.width * cam.height];
    crate::with_voxels!(volume.voxels(), |s| {
        let g = Grid::new(s, volume.dims());
        if negate {
            mip_fill::<_, true>(&g, &rays, cam.width, stride, &mut pixels);
        } else {
            mip_fill::<_, false>(&g, &rays, cam.width, stride, &mut pixels);
        }
    });
    let (m, b) = volume
        .rescale()
        .map_or((1.0f32, 0.0f32), |r| (r.slope as f32, r.intercept as f32));
    pixels.par_iter_mut().for_each(|p| {
        *p = if *p == f32::NEG_INFINITY {
            f32::NAN
        } else if negate {
            -*p * m + b
        } else {
            *p * m + b
        };
    });
    let img = F32Image {
        width: cam.width,
        height: cam.height,
        pixels,
        pixel_mm: cam.pixel_mm,
    };
    Ok(upsample_f32(
        &img,
        ds,
        camera.width,
        camera.height,
        camera.pixel_mm,
    ))
}

/// Rows per band in the slice-order traversal: small enough that a band's footprint on one
/// voxel plane stays in cache while the next planes reuse it.
const MIP_BAND_ROWS: usize = 8;

fn mip_fill<T: Voxel, const NEGATE: bool>(
    g: &Grid<'_, T>,
    rays: &VoxelRays,
    width: usize,
    stride: usize,
    out: &mut [f32],
) {
    let dims = g.dims;
    let d = rays.dir;
    // the slice axis: the voxel axis the ray crosses fastest
    let a = (0..3)
        .max_by(|&x, &y| d[x].abs().total_cmp(&d[y].abs()))
        .unwrap_or(2);
    let (b, e) = match a {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    if d[a].abs() < 1e-15 {
        return;
    }
    // on plane a = s, in-plane coordinate x_q = base_q + c·gc_q + r·gr_q + s·k_q (q = b, e)
    let k = |q: usize| d[q] / d[a];
    let base = |q: usize| rays.p0[q] - k(q) * rays.p0[a];
    let gc = |q: usize| rays.dc[q] - k(q) * rays.dc[a];
    let gr = |q: usize| rays.dr[q] - k(q) * rays.dr[a];
    let (kb, ke) = (k(b), k(e));
    let (base_b, base_e) = (base(b), base(e));
    let (gcb, gce, grb, gre) = (gc(b), gc(e), gr(b), gr(e));
    let plane_stride = [1, dims[0], dims[0] * dims[1]];
    let sampler = PlaneSampler::new(g, b, e);
    let nb_lim = dims[b] as f64 - 0.5;
    let ne_lim = dims[e] as f64 - 0.5;
    out.par_chunks_mut(MIP_BAND_ROWS * width)
        .enumerate()
        .for_each(|(band, rows)| {
            let r0 = band * MIP_BAND_ROWS;
            for s in (0..dims[a]).step_by(stride) {
                let sf = s as f64;
                let off = s * plane_stride[a];
                for (ri, line) in rows.chunks_mut(width).enumerate() {
                    let r = (r0 + ri) as f64;
                    let xb0 = base_b + r * grb + sf * kb;
                    let xe0 = base_e + r * gre + sf * ke;
                    let Some((c0, c1)) =
                        column_range(xb0, gcb, nb_lim, width).and_then(|(lo, hi)| {
                            column_range(xe0, gce, ne_lim, width)
                                .map(|(lo2, hi2)| (lo.max(lo2), hi.min(hi2)))
                        })
                    else {
                        continue;
                    };
                    for c in c0..c1 {
                        let cf = c as f64;
                        let xb = xb0 + cf * gcb;
                        let xe = xe0 + cf * gce;
                        if xb >= -0.5 && xb < nb_lim && xe >= -0.5 && xe < ne_lim {
                            let mut v = sampler.bilinear(off, xb, xe);
                            if NEGATE {
                                v = -v;
                            }
                            let px = &mut line[c];
                            if v > *px {
                                *px = v;
                            }
                        }
                    }
                }
            }
        });
}

/// Columns `c` in `0..width` where `x0 + c·g` may lie in `[-0.5, lim)`, widened by one
/// column each way (the caller checks each pixel exactly).
fn column_range(x0: f64, g: f64, lim: f64, width: usize) -> Option<(usize, usize)> {
    let (lo, hi) = if g.abs() < 1e-15 {
        if x0 >= -0.5 && x0 < lim {
            (0.0, width as f64)
        } else {
            return None;
        }
    } else {
        let (ta, tb) = ((-0.5 - x0) / g, (lim - x0) / g);
        (ta.min(tb).floor() - 1.0, ta.max(tb).ceil() + 1.0)
    };
    let lo = lo.max(0.0);
    let hi = hi.min(width as f64);
    (lo < hi).then_some((lo as usize, hi as usize))
}

/// Bilinear interpolation within one voxel plane, with the edge rules of trilinear sampling.
struct PlaneSampler<'a, T> {
    data: &'a [T],
    last: [f64; 2],
    base_max: [usize; 2],
    stride: [usize; 2],
    step: [usize; 2],
}

impl<'a, T: Voxel> PlaneSampler<'a, T> {
    fn new(g: &Grid<'a, T>, b: usize, e: usize) -> Self {
        let d = g.dims;
        let strides = [1, d[0], d[0] * d[1]];
        Self {
            data: g.data,
            last: [d[b] as f64 - 1.0, d[e] as f64 - 1.0],
            base_max: [d[b].saturating_sub(2), d[e].saturating_sub(2)],
            stride: [strides[b], strides[e]],
            step: [
                if d[b] > 1 { strides[b] } else { 0 },
                if d[e] > 1 { strides[e] } else { 0 },
            ],
        }
    }

    #[inline]
    fn bilinear(&self, off: usize, x: f64, y: f64) -> f32 {
        let x = x.clamp(0.0, self.last[0]);
        let y = y.clamp(0.0, self.last[1]);
        let bx = (x as usize).min(self.base_max[0]);
        let by = (y as usize).min(self.base_max[1]);
        let tx = (x - bx as f64) as f32;
        let ty = (y - by as f64) as f32;
        let i = off + bx * self.stride[0] + by * self.stride[1];
        let [sx, sy] = self.step;
        let d = self.data;
        let v00 = d[i].to_f32();
        let v10 = d[i + sx].to_f32();
        let v01 = d[i + sy].to_f32();
        let v11 = d[i + sx + sy].to_f32();
        let c0 = v00 + (v10 - v00) * tx;
        let c1 = v01 + (v11 - v01) * tx;
        c0 + (c1 - c0) * ty
    }
}

fn upsample_f32(img: &F32Image, ds: usize, w: usize, h: usize, pixel_mm: f64) -> F32Image {
    if ds <= 1 {
        return img.clone();
    }
    let mut pixels = vec![f32::NAN; w * h];
    pixels.par_chunks_mut(w).enumerate().for_each(|(r, line)| {
        let src = &img.pixels[(r / ds) * img.width..][..img.width];
        for (c, p) in line.iter_mut().enumerate() {
            *p = src[c / ds];
        }
    });
    F32Image {
        width: w,
        height: h,
        pixels,
        pixel_mm,
    }
}

/// Minimum and maximum stored value over blocks of [`Bricks::SIZE`]³ voxels (each block
/// extended by one voxel on its upper faces, the reach of trilinear interpolation), for
/// skipping empty space. Build once per volume and reuse across renders.
#[derive(Clone, Debug)]
pub struct Bricks {
    counts: [usize; 3],
    min: Vec<f32>,
    max: Vec<f32>,
}

impl Bricks {
    pub const SIZE: usize = 8;

    #[must_use]
    pub fn new(volume: &Volume) -> Self {
        crate::with_voxels!(volume.voxels(), |s| Self::build(s, volume.dims()))
    }

    fn build<T: Voxel>(data: &[T], dims: [usize; 3]) -> Self {
        let n = Self::SIZE;
        let counts = dims.map(|d| d.div_ceil(n));
        let per_layer = counts[0] * counts[1];
        let layers: Vec<(Vec<f32>, Vec<f32>)> = (0..counts[2])
            .into_par_iter()
            .map(|bz| {
                let mut mn = vec![f32::INFINITY; per_layer];
                let mut mx = vec![f32::NEG_INFINITY; per_layer];
                let z_end = (bz * n + n + 1).min(dims[2]);
                for z in bz * n..z_end {
                    for y in 0..dims[1] {
                        let row = &data[dims[0] * (y + dims[1] * z)..][..dims[0]];
                        // a voxel on a block's lower face also serves the block below
                        let by_list = [
                            y / n,
                            if y % n == 0 && y > 0 {
                                y / n - 1
                            } else {
                                usize::MAX
                            },
                        ];
                        for (x, v) in row.iter().enumerate() {
                            let v = v.to_f32();
                            let bx_list = [
                                x / n,
                                if x % n == 0 && x > 0 {
                                    x / n - 1
                                } else {
                                    usize::MAX
                                },
                            ];
                            for &by in &by_list {
                                if by == usize::MAX {
                                    continue;
                                }
                                for &bx in &bx_list {
                                    if bx == usize::MAX {
                                        continue;
                                    }
                                    let i = bx + counts[0] * by;
                                    mn[i] = mn[i].min(v);
                                    mx[i] = mx[i].max(v);
                                }
                            }
                        }
                    }
                }
                (mn, mx)
            })
            .collect();
        let mut min = Vec::with_capacity(per_layer * counts[2]);
        let mut max = Vec::with_capacity(per_layer * counts[2]);
        for (a, b) in layers {
            min.extend(a);
            max.extend(b);
        }
        Self { counts, min, max }
    }

    #[inline]
    fn index(&self, x: f64, y: f64, z: f64) -> [usize; 3] {
        let n = Self::SIZE as f64;
        [
            ((x.max(0.0) / n) as usize).min(self.counts[0] - 1),
            ((y.max(0.0) / n) as usize).min(self.counts[1] - 1),
            ((z.max(0.0) / n) as usize).min(self.counts[2] - 1),
        ]
    }
}

/// Options of the shaded iso-surface view.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SurfaceOptions {
    /// The iso-value in rescaled units: the surface is where the value first reaches it.
    pub threshold: f64,
    /// Surface colour (RGB).
    pub colour: [u8; 3],
    pub ambient: f64,
    pub diffuse: f64,
    /// Blinn–Phong highlight strength (0 = none) and exponent.
    pub specular: f64,
    pub shininess: f64,
    /// Darkening with depth across the volume: 0 = none, 0.5 = the far side at half brightness.
    pub depth_cue: f64,
    /// Direction towards the light in world space; `None` = from the viewer.
    pub light_dir: Option<Vector3<f64>>,
    /// RGBA where the ray finds no surface.
    pub background: [u8; 4],
    pub quality: Quality,
}

impl SurfaceOptions {
    /// Defaults for a given threshold: bone-white, ambient 0.15, diffuse 0.85, a mild
    /// highlight, no depth cue, light from the viewer, transparent background.
    #[must_use]
    pub fn new(threshold: f64) -> Self {
        Self {
            threshold,
            colour: [235, 225, 205],
            ambient: 0.15,
            diffuse: 0.85,
            specular: 0.25,
            shininess: 32.0,
            depth_cue: 0.0,
            light_dir: None,
            background: [0, 0, 0, 0],
            quality: Quality::full(),
        }
    }
}

/// A shaded surface view and, per pixel, the world point where its ray met the surface.
#[derive(Clone, Debug)]
pub struct SurfaceImage {
    pub image: RgbaImage,
    /// `hits[col + width·row]`: the surface point, `None` where the ray found none.
    pub hits: Vec<Option<WorldPoint>>,
    /// Outward unit normals at the hits (world space), `None` where there is no hit.
    pub normals: Vec<Option<Vector3<f64>>>,
}

#[derive(Clone, Copy)]
struct Hit {
    voxel: Vector3<f64>,
    t: f64,
}

/// Renders the iso-surface at `options.threshold`. `bricks` (from [`Bricks::new`] on the same
/// volume) enables empty-space skipping; without it every step is sampled.
pub fn surface(
    volume: &Volume,
    camera: &Camera,
    options: &SurfaceOptions,
    bricks: Option<&Bricks>,
) -> Result<SurfaceImage, RenderError> {
    check_size(camera.width, camera.height)?;
    let step_vox = check_positive("step", options.quality.step_voxels)?;
    if !options.threshold.is_finite() {
        return Err(RenderError::NotFinite {
            name: "threshold",
            value: options.threshold,
        });
    }
    let ds = options.quality.downsample.max(1);
    let cam = camera.downsampled(ds);
    let frame = cam.frame()?;
    let rays = VoxelRays::new(volume, &cam)?;
    let sp = volume.spacing_mm();
    let step_mm = step_vox * sp[0].min(sp[1]).min(sp[2]);
    // compare in "sign · stored" units so that inside is always the larger side
    let (sign, raw_thr) = match volume.rescale() {
        Some(r) => {
            let raw = (options.threshold - r.intercept) / r.slope;
            if r.slope < 0.0 {
                (-1.0f32, -raw)
            } else {
                (1.0, raw)
            }
        }
        None => (1.0, options.threshold),
    };
    let raw_thr = raw_thr as f32;
    let dims = volume.dims();
    // depth range of the whole box along the view, for the depth cue
    let (mut tn, mut tf) = (f64::MAX, f64::MIN);
    for corner in 0..8 {
        let p = crate::geometry::VoxelPoint::new(
            if corner & 1 == 0 {
                -0.5
            } else {
                dims[0] as f64 - 0.5
            },
            if corner & 2 == 0 {
                -0.5
            } else {
                dims[1] as f64 - 0.5
            },
            if corner & 4 == 0 {
                -0.5
            } else {
                dims[2] as f64 - 0.5
            },
        );
        let t = (volume.voxel_to_world(p).0 - cam.centre.0).dot(&frame.dir);
        tn = tn.min(t);
        tf = tf.max(t);
    }
    let a_t: Matrix3<f64> = volume.voxel_from_world().linear().transpose();
    let view = -frame.dir;
    let light = options
        .light_dir
        .and_then(|l| l.try_normalize(1e-12))
        .unwrap_or(view);
    let half = (light + view).try_normalize(1e-12).unwrap_or(view);
    let w = cam.width;
    let n = w * cam.height;
    let mut rgba = vec![0u8; 4 * n];
    let mut hits: Vec<Option<WorldPoint>> = vec![None; n];
    let mut normals: Vec<Option<Vector3<f64>>> = vec![None; n];
    let w2v = volume.world_from_voxel();
    crate::with_voxels!(volume.voxels(), |s| {
        let g = Grid::new(s, dims);
        let field = Field { g: &g, sign };
        rgba.par_chunks_mut(4 * w)
            .zip(hits.par_chunks_mut(w))
            .zip(normals.par_chunks_mut(w))
            .enumerate()
            .for_each(|(r, ((line, hit_line), normal_line))| {
                for c in 0..w {
                    let o = rays.origin(c, r);
                    let hit = clip_box(&o, &rays.dir, dims).and_then(|(t0, t1)| {
                        first_crossing(&field, bricks, &o, &rays.dir, t0, t1, step_mm, raw_thr)
                    });
                    let px = &mut line[4 * c..4 * c + 4];
                    let Some(hit) = hit else {
                        px.copy_from_slice(&options.background);
                        continue;
                    };
                    let gv = field.gradient(&hit.voxel);
                    let mut nrm = (-(a_t * gv)).try_normalize(1e-20).unwrap_or(view);
                    if nrm.dot(&view) < 0.0 {
                        // the back of a surface cut open by the box: light its front
                        nrm = -nrm;
                    }
                    let lambert = nrm.dot(&light).max(0.0);
                    let spec = if options.specular > 0.0 {
                        options.specular * nrm.dot(&half).max(0.0).powf(options.shininess)
                    } else {
                        0.0
                    };
                    let depth = if tf > tn {
                        ((hit.t - tn) / (tf - tn)).clamp(0.0, 1.0)
                    } else {
                        0.0
                    };
                    let cue = 1.0 - options.depth_cue.clamp(0.0, 1.0) * depth;
                    let k = (options.ambient + options.diffuse * lambert) * cue;
                    for ch in 0..3 {
                        let v = f64::from(options.colour[ch]) * k + 255.0 * spec * cue;
                        px[ch] = v.clamp(0.0, 255.0).round() as u8;
                    }
                    px[3] = 255;
                    hit_line[c] = Some(WorldPoint(w2v.apply_point(Point3::from(hit.voxel))));
                    normal_line[c] = Some(nrm);
                }
            });
    });
    let small = SurfaceImage {
        image: RgbaImage {
            width: cam.width,
            height: cam.height,
            pixels: rgba,
        },
        hits,
        normals,
    };
    Ok(upsample_surface(small, ds, camera.width, camera.height))
}

/// The scalar field `sign · stored value` sampled trilinearly (clamped into the grid).
struct Field<'a, 'b, T> {
    g: &'b Grid<'a, T>,
    sign: f32,
}

impl<T: Voxel> Field<'_, '_, T> {
    #[inline]
    fn at(&self, p: &Vector3<f64>) -> f32 {
        self.sign * self.g.trilinear_inside(p.x, p.y, p.z)
    }

    /// Central differences, one voxel each way (clamped at the edges), in voxel units.
    fn gradient(&self, p: &Vector3<f64>) -> Vector3<f64> {
        let mut gv = Vector3::zeros();
        for a in 0..3 {
            let mut e = Vector3::zeros();
            e[a] = 1.0;
            gv[a] = f64::from(self.at(&(p + e)) - self.at(&(p - e))) / 2.0;
        }
        gv
    }
}

/// Steps along `o + t·d` over `[t0, t1]` until the field reaches `thr`, skipping bricks whose
/// maximum is below it; refines the crossing by bisection to 1/1000 of a voxel.
#[allow(
    clippy::too_many_arguments,
    reason = "one ray's state, kept flat in the hot loop"
)]
fn first_crossing<T: Voxel>(
    f: &Field<'_, '_, T>,
    bricks: Option<&Bricks>,
    o: &Vector3<f64>,
    d: &Vector3<f64>,
    t0: f64,
    t1: f64,
    step_mm: f64,
    thr: f32,
) -> Option<Hit> {
    let mut t = t0;
    let mut below: Option<f64> = None;
    let bn = Bricks::SIZE as f64;
    while t <= t1 {
        let p = o + d * t;
        if let Some(b) = bricks {
            let [bx, by, bz] = b.index(p.x, p.y, p.z);
            let i = bx + b.counts[0] * (by + b.counts[1] * bz);
            let top = if f.sign > 0.0 { b.max[i] } else { -b.min[i] };
            if top < thr {
                // leave this brick: the nearest face ahead along the ray
                let mut exit = f64::INFINITY;
                for (a, &bi) in [bx, by, bz].iter().enumerate() {
                    if d[a] > 1e-15 {
                        exit = exit.min((((bi + 1) as f64) * bn - p[a]) / d[a]);
                    } else if d[a] < -1e-15 {
                        let face = bi as f64 * bn;
                        if face > 0.0 {
                            exit = exit.min((face - p[a]) / d[a]);
                        }
                    }
                }
                let next = t + exit.max(0.0) + 1e-6 * step_mm;
                below = Some(next.min(t1));
                t = next;
                continue;
            }
        }
        let v = f.at(&p);
        if v >= thr {
            let Some(mut lo) = below else {
                return Some(Hit { voxel: p, t });
            };
            let mut hi = t;
            // bisection: the value at `lo` is below, at `hi` at or above the threshold
            let len_vox = d.norm();
            while (hi - lo) * len_vox > 1e-3 {
                let mid = 0.5 * (lo + hi);
                if f.at(&(o + d * mid)) >= thr {
                    hi = mid;
                } else {
                    lo = mid;
                }
            }
            return Some(Hit {
                voxel: o + d * hi,
                t: hi,
            });
        }
        below = Some(t);
        t += step_mm;
    }
    None
}

fn upsample_surface(s: SurfaceImage, ds: usize, w: usize, h: usize) -> SurfaceImage {
    if ds <= 1 {
        return s;
    }
    let sw = s.image.width;
    let mut pixels = vec![0u8; 4 * w * h];
    let mut hits = vec![None; w * h];
    let mut normals = vec![None; w * h];
    for r in 0..h {
        for c in 0..w {
            let si = c / ds + sw * (r / ds);
            let di = c + w * r;
            pixels[4 * di..4 * di + 4].copy_from_slice(&s.image.pixels[4 * si..4 * si + 4]);
            hits[di] = s.hits[si];
            normals[di] = s.normals[si];
        }
    }
    SurfaceImage {
        image: RgbaImage {
            width: w,
            height: h,
            pixels,
        },
        hits,
        normals,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Affine3, VoxelPoint};

    fn one_bright_voxel(dims: [usize; 3], spacing: [f64; 3], at: [usize; 3]) -> Volume {
        let mut data = vec![0u16; dims[0] * dims[1] * dims[2]];
        data[at[0] + dims[0] * (at[1] + dims[1] * at[2])] = 1000;
        Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap()
    }

    #[test]
    fn mip_shows_a_bright_voxel_at_its_projection() {
        let at = [13, 5, 9];
        let v = one_bright_voxel([20, 16, 12], [0.1, 0.1, 0.2], at);
        let world = v.voxel_to_world(VoxelPoint::new(13.0, 5.0, 9.0));
        for dir in [
            Vector3::new(0.3, -0.5, 0.81),
            Vector3::new(1.0, 0.2, 0.1),
            Vector3::new(-0.1, 1.0, 0.4),
            Vector3::z(),
        ] {
            let cam = Camera::fit(
                &v,
                dir,
                Vector3::new(0.1, 0.0, 1.0).cross(&dir).cross(&dir),
                64,
                48,
            )
            .unwrap()
            .zoomed(2.0);
            let img = mip(&v, &cam, MipOptions::default()).unwrap();
            let (best, _) = img
                .pixels
                .iter()
                .enumerate()
                .filter(|(_, p)| p.is_finite())
                .max_by(|a, b| a.1.total_cmp(b.1))
                .unwrap();
            let (bc, br) = ((best % img.width) as f64, (best / img.width) as f64);
            let (pc, pr) = cam.project(world).unwrap();
            assert!(
                (bc - pc).abs() <= 1.0 && (br - pr).abs() <= 1.0,
                "dir {dir:?}: max at ({bc}, {br}), projection ({pc:.2}, {pr:.2})"
            );
            assert!(img.pixels[best] > 100.0);
            // corners miss the box (zoomed in 2×, they may or may not): background is 0 or NaN
            assert!(
                img.pixels
                    .iter()
                    .all(|p| p.is_nan() || (0.0..=1000.0).contains(p))
            );
        }
    }

    #[test]
    fn coarse_mip_is_the_same_size() {
        let v = one_bright_voxel([16, 16, 16], [1.0, 1.0, 1.0], [8, 8, 8]);
        let cam = Camera::fit(&v, Vector3::new(0.2, 0.1, 1.0), Vector3::y(), 30, 22).unwrap();
        let img = mip(
            &v,
            &cam,
            MipOptions {
                quality: Quality::coarse(),
            },
        )
        .unwrap();
        assert_eq!((img.width, img.height, img.pixels.len()), (30, 22, 660));
        assert!(img.pixels.iter().any(|p| *p > 0.0));
    }

    fn sphere(n: usize, radius_vox: f64, spacing: f64) -> (Volume, WorldPoint) {
        let c = (n as f64 - 1.0) / 2.0 + 0.3;
        let mut data = Vec::with_capacity(n * n * n);
        for k in 0..n {
            for j in 0..n {
                for i in 0..n {
                    let r =
                        ((i as f64 - c).powi(2) + (j as f64 - c).powi(2) + (k as f64 - c).powi(2))
                            .sqrt();
                    // linear in the radius: the 0-crossing is the sphere
                    data.push((100.0 * (radius_vox - r)) as f32);
                }
            }
        }
        let v = Volume::from_vec([n; 3], Affine3::from_spacing([spacing; 3]), data).unwrap();
        let centre = v.voxel_to_world(VoxelPoint::new(c, c, c));
        (v, centre)
    }

    #[test]
    fn sphere_surface_hits_the_radius_with_outward_normals() {
        let (v, centre) = sphere(40, 12.0, 0.05);
        let bricks = Bricks::new(&v);
        for dir in [Vector3::new(0.3, 0.4, -0.86), Vector3::x()] {
            let cam = Camera::fit(&v, dir, Vector3::z(), 48, 48).unwrap();
            for b in [None, Some(&bricks)] {
                let out = surface(&v, &cam, &SurfaceOptions::new(0.0), b).unwrap();
                let mut n_hits = 0;
                for (h, n) in out.hits.iter().zip(&out.normals) {
                    let (Some(h), Some(n)) = (h, n) else { continue };
                    n_hits += 1;
                    let r = h.distance_mm(centre) / 0.05;
                    assert!((r - 12.0).abs() < 0.1, "hit at radius {r} voxels");
                    let radial = (h.0 - centre.0).normalize();
                    assert!(n.dot(&radial) > 0.99, "normal {n:?} vs radial {radial:?}");
                    // the visible side faces the camera
                    assert!(n.dot(&dir) < 0.0);
                }
                // the sphere covers about π·12²/(pixel²) pixels; pixel ≈ 40√3/48 voxels
                let px = 40.0 * 3f64.sqrt() / 48.0;
                let expect = std::f64::consts::PI * (12.0 / px).powi(2);
                assert!(
                    (n_hits as f64 - expect).abs() < 0.15 * expect,
                    "{n_hits} vs {expect}"
                );
                // shading: lit pixels are opaque, misses keep the background
                assert!(
                    out.image
                        .pixels
                        .chunks_exact(4)
                        .filter(|p| p[3] == 255)
                        .count()
                        == n_hits
                );
            }
        }
    }

    #[test]
    fn bricks_do_not_change_the_picture() {
        let (v, _) = sphere(33, 9.0, 1.0);
        let bricks = Bricks::new(&v);
        let cam = Camera::fit(&v, Vector3::new(-0.5, 0.2, 0.3), Vector3::z(), 40, 40).unwrap();
        let opts = SurfaceOptions {
            depth_cue: 0.5,
            ..SurfaceOptions::new(50.0)
        };
        let a = surface(&v, &cam, &opts, None).unwrap();
        let b = surface(&v, &cam, &opts, Some(&bricks)).unwrap();
        let mut differ = 0;
        for (x, y) in a.hits.iter().zip(&b.hits) {
            match (x, y) {
                (Some(x), Some(y)) => assert!(x.distance_mm(*y) < 0.6),
                (None, None) => {}
                _ => differ += 1,
            }
        }
        assert!(differ <= 2, "{differ} pixels differ");
        let coarse = surface(
            &v,
            &cam,
            &SurfaceOptions {
                quality: Quality::coarse(),
                ..opts
            },
            Some(&bricks),
        )
        .unwrap();
        assert_eq!(coarse.image.pixels.len(), a.image.pixels.len());
    }

    #[test]
    fn bad_cameras_are_refused() {
        let v = one_bright_voxel([4, 4, 4], [1.0; 3], [1, 1, 1]);
        assert!(Camera::fit(&v, Vector3::z(), Vector3::z(), 10, 10).is_err());
        assert!(Camera::fit(&v, Vector3::zeros(), Vector3::z(), 10, 10).is_err());
        assert!(Camera::fit(&v, Vector3::x(), Vector3::z(), 0, 10).is_err());
        let cam = Camera::fit(&v, Vector3::x(), Vector3::z(), 10, 10).unwrap();
        assert!(surface(&v, &cam, &SurfaceOptions::new(f64::NAN), None).is_err());
        let c = Camera {
            pixel_mm: -1.0,
            ..cam
        };
        assert!(mip(&v, &c, MipOptions::default()).is_err());
    }
}
