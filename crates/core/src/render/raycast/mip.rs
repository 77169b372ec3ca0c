//! Maximum-intensity projection by shear-warp factorisation (Lacroute & Levoy, "Fast volume
//! rendering using a shear-warp factorization of the viewing transformation", SIGGRAPH 1994).
//!
//! In voxel coordinates every ray of an orthographic view is parallel to `d`. Take the voxel
//! axis `a` along which `d` is largest and the other two, `b` and `e`. A ray crosses the voxel
//! plane `x_a = s` at `(u_b + s·k_b, u_e + s·k_e)` with `k = d / d_a`, where `(u_b, u_e)` is
//! where it crosses plane 0. On that plane trilinear interpolation is bilinear.
//!
//! The factorisation: cast rays not through the picture's pixels but through the integer
//! points `(P, Q)` of plane 0 (the *intermediate image*, on the voxel grid). Then on plane `s`
//! every such ray samples at `(P + s·k_b, Q + s·k_e)`: the same fractional offset for the whole
//! plane, so the four bilinear weights are constant over the plane and the inner loop is a
//! weighted sum of two voxel rows and a running maximum, contiguous in memory and vectorised
//! when `b` is the fastest axis (`a` = 1 or 2). The picture is then one 2D warp: each pixel's
//! ray crosses plane 0 at a point of the intermediate image, read bilinearly.
//!
//! The result differs from casting a ray per pixel only by that last interpolation (a maximum
//! of interpolated samples versus an interpolation of maxima), which is the projection's
//! resolution anyway: one voxel across the rays. Where the picture's pixels fall on the
//! intermediate grid (a view along a voxel axis at the voxel spacing) the two are equal.
//!
//! When `a` = 0 the voxel rows of a plane are strided; blocks of 16 planes are then copied
//! plane by plane into a buffer first (reading each voxel once, along its cache line) and the
//! same kernel runs on the copy.
//!
//! Edges follow trilinear sampling: samples are taken where the point lies in the cells
//! `[-0.5, n - 0.5)` of both in-plane axes, holding the edge value in the outer half-voxel
//! rim; a pixel whose ray misses the box is `NaN`.

use super::{Camera, Quality, VoxelRays, upsample_f32};
use crate::render::slice::{Grid, prefetch};
use crate::render::{F32Image, RenderError, check_positive, check_size};
use crate::volume::{Volume, Voxel};
use rayon::prelude::*;

/// Options of the maximum-intensity projection.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MipOptions {
    pub quality: Quality,
}

/// Maximum-intensity projection: each pixel holds the largest rescaled value along its ray
/// (`NaN` where the ray misses the volume). With a negative rescale slope the smallest stored
/// value is taken, which is the largest rescaled one. `quality.step_voxels` of 2 or more
/// takes every second (third, …) voxel plane.
pub fn mip(volume: &Volume, camera: &Camera, options: MipOptions) -> Result<F32Image, RenderError> {
    check_size(camera.width, camera.height)?;
    check_positive("step", options.quality.step_voxels)?;
    let ds = options.quality.downsample.max(1);
    let cam = camera.downsampled(ds);
    let rays = VoxelRays::new(volume, &cam)?;
    let stride = (options.quality.step_voxels.floor() as usize).max(1);
    let negate = volume.rescale().is_some_and(|r| r.slope < 0.0);
    let sign = if negate { -1.0 } else { 1.0 };
    let mut pixels = crate::with_voxels!(volume.voxels(), |s| {
        let g = Grid::new(s, volume.dims());
        shear_warp(&g, &rays, cam.width, cam.height, stride, sign)
    });
    let (m, b) = volume
        .rescale()
        .map_or((1.0f32, 0.0f32), |r| (r.slope as f32, r.intercept as f32));
    pixels.par_iter_mut().for_each(|p| {
        *p = if *p == f32::NEG_INFINITY || p.is_nan() {
            f32::NAN
        } else {
            sign * *p * m + b
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

/// Intermediate-image rows per parallel task.
const BAND_ROWS: usize = 8;

/// The shear factorisation of a set of parallel rays.
struct Shear {
    /// The plane axis (largest component of the ray direction) and the in-plane axes `b < e`.
    a: usize,
    b: usize,
    e: usize,
    /// In-plane shift per plane along `b` and `e`.
    k: [f64; 2],
    /// Plane-0 crossing of pixel `(c, r)`'s ray: `base + c·gc + r·gr` (components `b`, `e`).
    base: [f64; 2],
    gc: [f64; 2],
    gr: [f64; 2],
}

impl Shear {
    fn new(rays: &VoxelRays) -> Option<Self> {
        let d = rays.dir;
        let a = (0..3).max_by(|&x, &y| d[x].abs().total_cmp(&d[y].abs()))?;
        if d[a].is_nan() || d[a].abs() <= 1e-15 {
            return None;
        }
        let (b, e) = match a {
            0 => (1, 2),
            1 => (0, 2),
            _ => (0, 1),
        };
        let g = &rays.grid;
        let k = [d[b] / d[a], d[e] / d[a]];
        let sheared = |v: &nalgebra::Vector3<f64>| [v[b] - k[0] * v[a], v[e] - k[1] * v[a]];
        Some(Self {
            a,
            b,
            e,
            k,
            base: sheared(&g.p0),
            gc: sheared(&g.dc),
            gr: sheared(&g.dr),
        })
    }
}

/// The intermediate image: `values[(P - p0) + width·(Q - q0)]` is the maximum along the ray
/// through `(P, Q)` on plane 0; `NEG_INFINITY` where that ray takes no sample.
struct Intermediate {
    p0: i64,
    q0: i64,
    width: usize,
    height: usize,
    values: Vec<f32>,
}

/// The integer range `lo..=hi` of `P` for which some plane's sample `P + shift` lies in
/// `[-0.5, n - 0.5)`, `shift` ranging over `[shift_min, shift_max]`, cut to what the picture
/// reads (`[need_lo, need_hi]`, plus the bilinear neighbour).
fn axis_range(n: usize, shift_min: f64, shift_max: f64, need_lo: f64, need_hi: f64) -> (i64, i64) {
    let lo = (-0.5 - shift_max).ceil().max(need_lo.floor());
    let hi = ((n as f64 - 0.5 - shift_min).ceil() - 1.0).min(need_hi.floor() + 1.0);
    (lo as i64, hi as i64)
}

fn shear_warp<T: Voxel>(
    g: &Grid<'_, T>,
    rays: &VoxelRays,
    width: usize,
    height: usize,
    stride: usize,
    sign: f32,
) -> Vec<f32> {
    let mut out = vec![f32::NEG_INFINITY; width * height];
    let Some(sh) = Shear::new(rays) else {
        return out;
    };
    let dims = g.dims;
    let planes: Vec<usize> = (0..dims[sh.a]).step_by(stride).collect();
    let last = *planes.last().unwrap_or(&0) as f64;
    // the picture's plane-0 footprint, from its corners
    let (w1, h1) = ((width - 1) as f64, (height - 1) as f64);
    let corner = |q: usize, c: f64, r: f64| sh.base[q] + c * sh.gc[q] + r * sh.gr[q];
    let need = |q: usize| {
        let v = [
            corner(q, 0.0, 0.0),
            corner(q, w1, 0.0),
            corner(q, 0.0, h1),
            corner(q, w1, h1),
        ];
        (
            v.iter().copied().fold(f64::INFINITY, f64::min),
            v.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        )
    };
    let mut range = [(0i64, -1i64); 2];
    for (q, axis) in [sh.b, sh.e].into_iter().enumerate() {
        let (s0, s1) = (0.0f64.min(last * sh.k[q]), 0.0f64.max(last * sh.k[q]));
        let (n_lo, n_hi) = need(q);
        range[q] = axis_range(dims[axis], s0, s1, n_lo, n_hi);
    }
    if range[0].1 < range[0].0 || range[1].1 < range[1].0 {
        return out;
    }
    let mut inter = Intermediate {
        p0: range[0].0,
        q0: range[1].0,
        width: (range[0].1 - range[0].0 + 1) as usize,
        height: (range[1].1 - range[1].0 + 1) as usize,
        values: Vec::new(),
    };
    inter.values = vec![f32::NEG_INFINITY; inter.width * inter.height];
    fill(g, &sh, &planes, sign, &mut inter);
    warp(&inter, &sh, dims, (stride, last), width, &mut out);
    out
}

/// Bilinear weights and base indices of one plane's samples along one in-plane axis:
/// coordinate `x = i + shift` for integer `i`.
#[derive(Clone, Copy, Debug)]
struct AxisStep {
    /// `floor(shift)`.
    offset: i64,
    /// `shift - floor(shift)`.
    frac: f64,
    n: usize,
}

impl AxisStep {
    fn new(shift: f64, n: usize) -> Self {
        let mut offset = shift.floor();
        let mut frac = shift - offset;
        if frac >= 1.0 {
            // a shift a hair below an integer (-1e-30) rounds to `offset + 1.0`: the sample
            // sits on that integer, so say so rather than carry a weight of exactly 1
            offset += 1.0;
            frac = 0.0;
        }
        Self {
            offset: offset as i64,
            frac,
            n,
        }
    }

    /// `i` whose sample lies in the cells, `[-0.5, n - 0.5)`: `lo..hi`.
    fn valid(&self) -> (i64, i64) {
        let shift = self.offset as f64 + self.frac;
        (
            (-0.5 - shift).ceil() as i64,
            (self.n as f64 - 0.5 - shift).ceil() as i64,
        )
    }

    /// `i` whose sample lies strictly between the first and last centres' cell, so that
    /// both neighbours exist without clamping: `x ∈ [0, n - 1)`, as `lo..hi`.
    fn interior(&self) -> (i64, i64) {
        let shift = self.offset as f64 + self.frac;
        (
            (-shift).ceil() as i64,
            (self.n as f64 - 1.0 - shift).ceil() as i64,
        )
    }

    /// The clamped neighbours and weight of the sample at `i` (any valid `i`): indices
    /// `(i0, i1)` and the weight of `i1`.
    fn clamped(&self, i: i64) -> (usize, usize, f32) {
        let x = (i + self.offset) as f64 + self.frac;
        let last = self.n as f64 - 1.0;
        let x = x.clamp(0.0, last);
        let i0 = (x.floor() as usize).min(self.n.saturating_sub(2));
        let t = x - i0 as f64;
        let i1 = (i0 + 1).min(self.n - 1);
        (i0, i1, if i1 == i0 { 0.0 } else { t as f32 })
    }
}

/// `out[i] = max(out[i], w00·r0[i] + w10·r0[i+1] + w01·r1[i] + w11·r1[i+1])`; `r0` and `r1`
/// hold one more value than `out`. The inner loop of the projection: no branches, contiguous
/// loads, vectorised by the compiler; with AVX2 and FMA when the processor has them.
#[inline]
fn max_row<T: Voxel>(out: &mut [f32], r0: &[T], r1: &[T], w: [f32; 4]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
        {
            // SAFETY: the processor has AVX2 and FMA, checked just above (the result is
            // cached by the standard library, so the check costs a load per row).
            unsafe { max_row_avx2(out, r0, r1, w) };
            return;
        }
    }
    max_row_body::<T, false>(out, r0, r1, w);
}

/// [`max_row_body`] compiled for AVX2 and FMA (eight lanes, fused multiply-adds).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn max_row_avx2<T: Voxel>(out: &mut [f32], r0: &[T], r1: &[T], w: [f32; 4]) {
    max_row_body::<T, true>(out, r0, r1, w);
}

#[allow(
    clippy::inline_always,
    reason = "must be inlined into the target-feature wrapper to be compiled with its features"
)]
#[inline(always)]
fn max_row_body<T: Voxel, const FUSED: bool>(out: &mut [f32], r0: &[T], r1: &[T], w: [f32; 4]) {
    let n = out.len();
    let (a0, a1) = (&r0[..n], &r0[1..=n]);
    let (b0, b1) = (&r1[..n], &r1[1..=n]);
    for ((o, (x0, x1)), (y0, y1)) in out.iter_mut().zip(a0.iter().zip(a1)).zip(b0.iter().zip(b1)) {
        let (x0, x1, y0, y1) = (x0.to_f32(), x1.to_f32(), y0.to_f32(), y1.to_f32());
        let v = if FUSED {
            w[3].mul_add(y1, w[2].mul_add(y0, w[1].mul_add(x1, w[0] * x0)))
        } else {
            w[0] * x0 + w[1] * x1 + w[2] * y0 + w[3] * y1
        };
        // `max` (which ignores NaN) stores unconditionally; a conditional store
        // (`if v > *o { *o = v }`, even written as a select) becomes a masked vector store,
        // microcoded and many times slower on some processors
        *o = o.max(v);
    }
}

/// Voxel planes handed to [`fill_planes`]: plane `s` (its index along the plane axis, for the
/// shear) starts at `data[start(s)]`, its rows along `b` are contiguous and `e_stride` apart.
struct PlaneViews<'d, T, F> {
    data: &'d [T],
    start: F,
    e_stride: usize,
}

/// Planes transposed at a time when the plane axis is the fastest voxel axis (`a` = 0).
const TRANSPOSE_BLOCK: usize = 32;

/// The intermediate image. When `b` is the fastest voxel axis the planes are read in place;
/// when the plane axis is (`a` = 0) a plane's rows are strided, so blocks of
/// [`TRANSPOSE_BLOCK`] consecutive planes are first copied into a buffer laid out plane by
/// plane (each voxel read once, along its cache line, and written once), and the same
/// vectorised kernel runs on the copy.
fn fill<T: Voxel>(
    g: &Grid<'_, T>,
    sh: &Shear,
    planes: &[usize],
    sign: f32,
    inter: &mut Intermediate,
) {
    let dims = g.dims;
    let strides = [1, dims[0], dims[0] * dims[1]];
    if strides[sh.b] == 1 {
        let views = PlaneViews {
            data: g.data,
            start: |s: usize| s * strides[sh.a],
            e_stride: strides[sh.e],
        };
        fill_planes(sh, dims, planes, &views, sign, inter);
        return;
    }
    let (nb, ne) = (dims[sh.b], dims[sh.e]);
    // rows padded by 32 voxels: at a power-of-two pitch the block's rows would all fall in
    // the same few cache sets and evict each other on every write
    let pitch = nb + 32;
    let mut buf = vec![T::default(); TRANSPOSE_BLOCK * pitch * ne];
    for block in planes.chunks(TRANSPOSE_BLOCK) {
        // buf[(k·B + l)·pitch + j] = voxel (block[l], j, k): for each k, B rows along j
        buf.par_chunks_mut(TRANSPOSE_BLOCK * pitch)
            .enumerate()
            .for_each(|(k, rows)| {
                let row_start = |j: usize| strides[sh.b] * j + strides[sh.e] * k;
                let consecutive = block.len() == block[block.len() - 1] - block[0] + 1;
                // through a small tile: read TILE source rows (one cache line of consecutive
                // planes each), then write each plane's TILE voxels contiguously
                let mut tile = [[T::default(); TRANSPOSE_BLOCK]; TRANSPOSE_BLOCK];
                for j0 in (0..nb).step_by(TRANSPOSE_BLOCK) {
                    let jn = TRANSPOSE_BLOCK.min(nb - j0);
                    for (jj, t) in tile.iter_mut().enumerate().take(jn) {
                        // source rows are a cache line or more apart, too far for the
                        // hardware prefetcher: ask for the line a few rows ahead
                        prefetch(g.data, row_start(j0 + jj + PREFETCH_ROWS) + block[0]);
                        let src = &g.data[row_start(j0 + jj)..];
                        if consecutive {
                            t[..block.len()].copy_from_slice(&src[block[0]..][..block.len()]);
                        } else {
                            for (v, &s) in t.iter_mut().zip(block) {
                                *v = src[s];
                            }
                        }
                    }
                    for l in 0..block.len() {
                        let dst = &mut rows[l * pitch + j0..][..jn];
                        for (d, t) in dst.iter_mut().zip(&tile) {
                            *d = t[l];
                        }
                    }
                }
            });
        let views = PlaneViews {
            data: &buf,
            start: |s: usize| {
                let l = block.iter().position(|&b| b == s).unwrap_or(0);
                l * pitch
            },
            e_stride: TRANSPOSE_BLOCK * pitch,
        };
        fill_planes(sh, dims, block, &views, sign, inter);
    }
}

/// How many strided rows ahead [`fill`]'s transposition prefetches.
const PREFETCH_ROWS: usize = 16;

/// Folds `planes` into the intermediate image, over bands of intermediate rows in parallel.
fn fill_planes<T: Voxel, F: Fn(usize) -> usize + Sync>(
    sh: &Shear,
    dims: [usize; 3],
    planes: &[usize],
    views: &PlaneViews<'_, T, F>,
    sign: f32,
    inter: &mut Intermediate,
) {
    let (nb, ne) = (dims[sh.b], dims[sh.e]);
    let (iw, p0, q0) = (inter.width, inter.p0, inter.q0);
    inter
        .values
        .par_chunks_mut(BAND_ROWS * iw)
        .enumerate()
        .for_each(|(band, rows)| {
            for &s in planes {
                let sb = AxisStep::new(s as f64 * sh.k[0], nb);
                let se = AxisStep::new(s as f64 * sh.k[1], ne);
                let plane = &views.data[(views.start)(s)..];
                let (pv_lo, pv_hi) = sb.valid();
                let (pi_lo, pi_hi) = sb.interior();
                let (qv_lo, qv_hi) = se.valid();
                let fb = sb.frac as f32;
                for (qi, line) in rows.chunks_mut(iw).enumerate() {
                    let q = q0 + (band * BAND_ROWS + qi) as i64;
                    if q < qv_lo || q >= qv_hi {
                        continue;
                    }
                    let (y0, y1, fe) = se.clamped(q);
                    let row0 = &plane[y0 * views.e_stride..][..nb];
                    let row1 = &plane[y1 * views.e_stride..][..nb];
                    let w = [
                        sign * (1.0 - fb) * (1.0 - fe),
                        sign * fb * (1.0 - fe),
                        sign * (1.0 - fb) * fe,
                        sign * fb * fe,
                    ];
                    // P over the line: interior part in the vectorised kernel, rims clamped
                    let lo = pv_lo.max(p0);
                    let hi = pv_hi.min(p0 + iw as i64);
                    let (ilo, ihi) = (pi_lo.max(lo), pi_hi.min(hi).max(pi_lo.max(lo)));
                    let rim = |p: i64, line: &mut [f32]| {
                        let (x0, x1, t) = sb.clamped(p);
                        let top = row0[x0].to_f32() * (1.0 - t) + row0[x1].to_f32() * t;
                        let bottom = row1[x0].to_f32() * (1.0 - t) + row1[x1].to_f32() * t;
                        let v = sign * (top * (1.0 - fe) + bottom * fe);
                        let o = &mut line[(p - p0) as usize];
                        *o = o.max(v);
                    };
                    for p in lo..ilo.min(hi) {
                        rim(p, line);
                    }
                    if ilo < ihi {
                        let x = (ilo + sb.offset) as usize;
                        let len = (ihi - ilo) as usize;
                        let out = &mut line[(ilo - p0) as usize..][..len];
                        max_row(out, &row0[x..=x + len], &row1[x..=x + len], w);
                    }
                    for p in ihi.max(lo)..hi {
                        rim(p, line);
                    }
                }
            }
        });
}

/// Whether the ray crossing plane 0 at `u` (components `b`, `e`) takes a sample: whether some
/// plane `s` (a multiple of `stride` up to `last`) sees it inside the cells of both in-plane
/// axes.
fn takes_a_sample(u: [f64; 2], sh: &Shear, dims: [usize; 3], stride: usize, last: f64) -> bool {
    let (mut lo, mut hi) = (0.0f64, last);
    for (q, axis) in [sh.b, sh.e].into_iter().enumerate() {
        let (min, max) = (-0.5 - u[q], dims[axis] as f64 - 0.5 - u[q]);
        let k = sh.k[q];
        if k.abs() < 1e-300 {
            if !(0.0 >= min && 0.0 < max) {
                return false;
            }
        } else {
            let (ta, tb) = (min / k, max / k);
            lo = lo.max(ta.min(tb));
            hi = hi.min(ta.max(tb));
        }
    }
    let first = (lo / stride as f64).ceil() * stride as f64;
    first <= hi
}

/// Reads the intermediate image at each pixel's plane-0 crossing, bilinearly; neighbours with
/// no sample are left out of the blend. Pixels whose ray takes no sample stay `NEG_INFINITY`.
fn warp(
    inter: &Intermediate,
    sh: &Shear,
    dims: [usize; 3],
    (stride, last): (usize, f64),
    width: usize,
    out: &mut [f32],
) {
    let at = |p: i64, q: i64| -> f32 {
        let (x, y) = (p - inter.p0, q - inter.q0);
        if x < 0 || y < 0 || x >= inter.width as i64 || y >= inter.height as i64 {
            f32::NEG_INFINITY
        } else {
            inter.values[x as usize + inter.width * y as usize]
        }
    };
    out.par_chunks_mut(width).enumerate().for_each(|(r, line)| {
        for (c, px) in line.iter_mut().enumerate() {
            let (cf, rf) = (c as f64, r as f64);
            let u = sh.base[0] + cf * sh.gc[0] + rf * sh.gr[0];
            let v = sh.base[1] + cf * sh.gc[1] + rf * sh.gr[1];
            if !takes_a_sample([u, v], sh, dims, stride, last) {
                continue;
            }
            let (pf, qf) = (u.floor(), v.floor());
            let (tx, ty) = ((u - pf) as f32, (v - qf) as f32);
            let (p, q) = (pf as i64, qf as i64);
            let mut acc = 0.0f32;
            let mut weight = 0.0f32;
            for (dp, dq, w) in [
                (0, 0, (1.0 - tx) * (1.0 - ty)),
                (1, 0, tx * (1.0 - ty)),
                (0, 1, (1.0 - tx) * ty),
                (1, 1, tx * ty),
            ] {
                let val = at(p + dp, q + dq);
                if w > 0.0 && val > f32::NEG_INFINITY {
                    acc += w * val;
                    weight += w;
                }
            }
            if weight > 0.0 {
                *px = acc / weight;
            }
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Affine3, VoxelPoint, WorldPoint};
    use crate::volume::Rescale;
    use nalgebra::{Matrix3, Rotation3, Vector3};
    use rand::{Rng, SeedableRng};

    /// Brute force: every pixel's own ray, sampled by trilinear interpolation where it
    /// crosses each voxel plane of the axis most aligned with it (inside the cells).
    fn mip_reference(volume: &Volume, cam: &Camera) -> Vec<f32> {
        let rays = VoxelRays::new(volume, cam).unwrap();
        let d = rays.dir;
        let a = (0..3)
            .max_by(|&x, &y| d[x].abs().total_cmp(&d[y].abs()))
            .unwrap();
        let dims = volume.dims();
        let mut out = vec![f32::NAN; cam.width * cam.height];
        for r in 0..cam.height {
            for c in 0..cam.width {
                let o = rays.grid.at(c, r);
                let mut best = f64::NEG_INFINITY;
                for s in 0..dims[a] {
                    let t = (s as f64 - o[a]) / d[a];
                    let p = o + d * t;
                    if let Some(v) = volume.sample_trilinear_voxel(VoxelPoint::new(p.x, p.y, p.z)) {
                        best = best.max(v);
                    }
                }
                if best > f64::NEG_INFINITY {
                    out[c + cam.width * r] = best as f32;
                }
            }
        }
        out
    }

    fn random_volume(dims: [usize; 3], world_from_voxel: Affine3, seed: u64) -> Volume {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let data: Vec<u16> = (0..dims.iter().product())
            .map(|_| rng.random_range(0..30000))
            .collect();
        Volume::from_vec(dims, world_from_voxel, data).unwrap()
    }

    /// A smooth volume: three Gaussian blobs (σ 2.5–4 voxels) on a floor.
    fn smooth_volume(dims: [usize; 3], world_from_voxel: Affine3) -> Volume {
        let blobs = [
            ([0.3, 0.4, 0.5], 3.0, 20000.0),
            ([0.7, 0.6, 0.3], 4.0, 15000.0),
            ([0.5, 0.2, 0.8], 2.5, 25000.0),
        ];
        let mut data = Vec::new();
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    let mut v = 1000.0;
                    for (c, s, h) in blobs {
                        let r2 = (i as f64 - c[0] * dims[0] as f64).powi(2)
                            + (j as f64 - c[1] * dims[1] as f64).powi(2)
                            + (k as f64 - c[2] * dims[2] as f64).powi(2);
                        v += h * (-r2 / (2.0 * s * s)).exp();
                    }
                    data.push(v as f32);
                }
            }
        }
        Volume::from_vec(dims, world_from_voxel, data).unwrap()
    }

    /// A camera looking along voxel axis `axis` whose pixel centres fall on voxel centres.
    fn aligned_camera(volume: &Volume, axis: usize) -> Camera {
        let d = volume.dims();
        let (b, e) = match axis {
            0 => (1, 2),
            1 => (0, 2),
            _ => (0, 1),
        };
        // looking along -j for axis 1 keeps right = dir × up along +b
        let mut dir = Vector3::zeros();
        dir[axis] = if axis == 1 { -1.0 } else { 1.0 };
        let mut up = Vector3::zeros();
        up[e] = -1.0;
        let sp = volume.spacing_mm()[b];
        // centre on a voxel centre so that pixel (0, 0) is one too (odd sizes)
        let mut centre = [0.0; 3];
        centre[b] = (d[b] / 2) as f64;
        centre[e] = (d[e] / 2) as f64;
        let cam = Camera {
            centre: volume.voxel_to_world(VoxelPoint::new(centre[0], centre[1], centre[2])),
            view_dir: dir,
            up,
            pixel_mm: sp,
            width: 2 * (d[b] / 2) + 1,
            height: 2 * (d[e] / 2) + 1,
        };
        // right = dir × up must run along +b for the grids to match
        assert!(cam.frame().unwrap().right[b] > 0.99, "axis {axis}");
        cam
    }

    /// A shift a hair below zero (a view a hair off a voxel axis, or a voxel 1e-31 mm thick)
    /// rounds its fraction to 1: the step must still sit in `[0, 1)` and index inside the row.
    #[test]
    fn a_shift_a_hair_below_an_integer_stays_in_range() {
        for shift in [-1e-30, -1e-17, 2.0 - 1e-17, -3.0 - 1e-300] {
            let s = AxisStep::new(shift, 8);
            assert!((0.0..1.0).contains(&s.frac), "{shift}: {s:?}");
            let (lo, _) = s.interior();
            assert!(lo + s.offset >= 0, "{shift}: {s:?}");
        }
        // the whole projection, through a scan whose slices are 1.6e-31 mm thick
        let v = random_volume(
            [16, 12, 5],
            Affine3::from_spacing([0.072, 0.036, 1.6e-31]),
            3,
        );
        for dir in [
            Vector3::new(-0.75, -0.43, -0.5),
            Vector3::new(0.3, 0.2, -0.9),
        ] {
            let cam = Camera::fit(&v, dir, Vector3::z(), 64, 64).unwrap();
            let img = mip(&v, &cam, MipOptions::default()).unwrap();
            assert!(img.pixels.iter().any(|p| p.is_finite()), "{dir:?}");
        }
    }

    #[test]
    fn along_an_axis_at_voxel_spacing_it_equals_a_ray_per_pixel() {
        // equal spacing on the two in-plane axes so that square pixels land on voxel centres
        for axis in 0..3 {
            let mut sp = [0.5, 0.5, 0.5];
            sp[axis] = 0.8;
            let v = random_volume([9, 8, 7], Affine3::from_spacing(sp), 11 + axis as u64);
            let cam = aligned_camera(&v, axis);
            let got = mip(&v, &cam, MipOptions::default()).unwrap();
            let want = mip_reference(&v, &cam);
            for (i, (a, b)) in got.pixels.iter().zip(&want).enumerate() {
                assert!(
                    (a - b).abs() <= 1e-3 * b.abs().max(1.0) || (a.is_nan() && b.is_nan()),
                    "axis {axis} pixel {i}: {a} vs {b}"
                );
            }
        }
    }

    #[test]
    fn oblique_views_match_a_ray_per_pixel_within_interpolation() {
        // anisotropic, rotated voxels; directions favouring each axis, and one diagonal
        let rot = Rotation3::from_euler_angles(0.2, -0.3, 0.4);
        let lin = rot.matrix() * Matrix3::from_diagonal(&Vector3::new(0.4, 0.5, 0.7));
        let a = Affine3::from_linear_translation(&lin, &Vector3::new(1.0, -2.0, 0.5));
        let v = smooth_volume([30, 26, 22], a);
        let range = 25000.0f32;
        for dir in [
            Vector3::new(0.3, -0.5, 0.81),
            Vector3::new(1.0, 0.2, 0.1),
            Vector3::new(-0.1, 1.0, 0.4),
            Vector3::new(0.577, 0.577, 0.577),
        ] {
            let cam = Camera::fit(&v, dir, Vector3::new(0.1, 1.0, 0.2), 48, 40).unwrap();
            let got = mip(&v, &cam, MipOptions::default()).unwrap();
            let want = mip_reference(&v, &cam);
            let (mut worst, mut both, mut one) = (0.0f32, 0, 0);
            let (w, h) = (cam.width as i64, cam.height as i64);
            // within two pixels (about a voxel here) of the silhouette the warp blends rays
            // whose paths through the box differ in length: checked only for range there
            let near_outline = |i: usize| {
                let (c, r) = ((i % cam.width) as i64, (i / cam.width) as i64);
                (-2..=2).any(|dr: i64| {
                    (-2..=2).any(|dc: i64| {
                        let (cc, rr) = (c + dc, r + dr);
                        cc < 0
                            || rr < 0
                            || cc >= w
                            || rr >= h
                            || want[(cc + w * rr) as usize].is_nan()
                    })
                })
            };
            for (i, (a, b)) in got.pixels.iter().zip(&want).enumerate() {
                match (a.is_nan(), b.is_nan()) {
                    (false, false) if near_outline(i) => {
                        assert!((999.0..=26_000.0).contains(a), "dir {dir:?}: {a}");
                    }
                    (false, false) => {
                        both += 1;
                        worst = worst.max((a - b).abs());
                    }
                    (true, true) => {}
                    _ => one += 1,
                }
            }
            // Two errors separate the methods. The warp interpolates maxima bilinearly between
            // rays one voxel apart: at most (h_b²·|f_bb| + h_e²·|f_ee|)/8 with h = 1 voxel, and
            // a Gaussian blob of height A and σ voxels has |f''| ≤ A/σ², so 2A/(8σ²). And each
            // method samples its rays only where they cross voxel planes, Δ = |d|/|d_a| voxels
            // apart, so each may miss a blob's peak by up to Δ/2: A·(1 − exp(−Δ²/(8σ²))).
            let d = VoxelRays::new(&v, &cam).unwrap().dir;
            let delta = d.norm() / d.amax();
            let (a, sigma) = (f64::from(range), 2.5f64);
            let bound = a
                * (2.0 / (8.0 * sigma * sigma) + 1.0
                    - (-delta * delta / (8.0 * sigma * sigma)).exp());
            assert!(
                f64::from(worst) < bound,
                "dir {dir:?}: worst {worst}, bound {bound:.0}"
            );
            assert!(both > 300, "dir {dir:?}: {both} pixels");
            // whether a ray samples at all is decided exactly; only rounding at a cell's edge
            // may differ
            assert!(one <= 2, "dir {dir:?}: {one} pixels differ in coverage");
        }
    }

    #[test]
    fn negative_slope_takes_the_largest_rescaled_value() {
        let mut v = random_volume([12, 10, 9], Affine3::from_spacing([1.0; 3]), 5);
        v.set_rescale(Rescale::new(-2.0, 100.0));
        let cam = aligned_camera(&v, 2);
        let got = mip(&v, &cam, MipOptions::default()).unwrap();
        let want = mip_reference(&v, &cam);
        for (a, b) in got.pixels.iter().zip(&want) {
            assert!(
                (a - b).abs() <= 1e-3 * b.abs().max(1.0) || (a.is_nan() && b.is_nan()),
                "{a} vs {b}"
            );
        }
    }

    fn one_bright_voxel(dims: [usize; 3], spacing: [f64; 3], at: [usize; 3]) -> Volume {
        let mut data = vec![0u16; dims[0] * dims[1] * dims[2]];
        data[at[0] + dims[0] * (at[1] + dims[1] * at[2])] = 1000;
        Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap()
    }

    #[test]
    fn a_bright_voxel_shows_at_its_projection() {
        let at = [13, 5, 9];
        let v = one_bright_voxel([20, 16, 12], [0.1, 0.1, 0.2], at);
        let world: WorldPoint = v.voxel_to_world(VoxelPoint::new(13.0, 5.0, 9.0));
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
            // rays one voxel apart (the intermediate image's grid) place the peak to within
            // half a voxel, up to 0.1 mm here: in pixels, plus one for the pixel grid
            let tol = 0.5 * 0.2 / cam.pixel_mm + 1.0;
            assert!(
                (bc - pc).abs() <= tol && (br - pr).abs() <= tol,
                "dir {dir:?}: max at ({bc}, {br}), projection ({pc:.2}, {pr:.2}), tol {tol:.2}"
            );
            assert!(img.pixels[best] > 100.0);
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

    #[test]
    fn a_view_that_misses_the_volume_is_all_nan() {
        let v = one_bright_voxel([8, 8, 8], [1.0; 3], [4, 4, 4]);
        let cam = Camera {
            centre: WorldPoint::new(100.0, 0.0, 0.0),
            view_dir: Vector3::z(),
            up: Vector3::y(),
            pixel_mm: 1.0,
            width: 10,
            height: 10,
        };
        let img = mip(&v, &cam, MipOptions::default()).unwrap();
        assert!(img.pixels.iter().all(|p| p.is_nan()));
    }
}
