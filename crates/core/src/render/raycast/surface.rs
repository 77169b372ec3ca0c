//! The shaded iso-surface view: the first crossing of a threshold along each ray.
//!
//! Each ray steps through the volume (half a voxel of the smallest spacing at full quality)
//! and the first step at or above the threshold is refined by bisection on trilinear values;
//! the normal is the negated gradient (central differences) mapped to world space; Lambert
//! shading with ambient light and an optional Blinn–Phong highlight and depth cue. Blocks of
//! 8³ voxels whose maximum is below the threshold are skipped whole ([`Bricks`]).

use super::{Camera, Quality, VoxelRays};
use crate::geometry::WorldPoint;
use crate::render::geom::{cell_corners, clip_to_cells};
use crate::render::pyramid::{Level, Pyramid, build_level};
use crate::render::slice::Grid;
use crate::render::{RenderError, RgbaImage, check_positive, check_size};
use crate::volume::{Volume, Voxel, Voxels};
use nalgebra::{Matrix3, Point3, Vector3};
use rayon::prelude::*;

/// Minimum and maximum stored value over blocks of [`Bricks::SIZE`]³ voxels (each block
/// extended by one voxel on its upper faces, the reach of trilinear interpolation), for
/// skipping empty space. Build once per volume and reuse across renders.
#[derive(Clone, Debug)]
pub struct Bricks {
    fine: BrickLevel,
    /// Groups of [`Bricks::GROUP`]³ bricks, for skipping large empty regions in one step.
    coarse: BrickLevel,
}

/// Minimum and maximum stored value per cell of `size`³ voxels.
#[derive(Clone, Debug)]
struct BrickLevel {
    size: usize,
    counts: [usize; 3],
    min: Vec<f32>,
    max: Vec<f32>,
}

impl BrickLevel {
    /// The cell holding voxel coordinate `p` (clamped into the grid) and its linear index.
    #[inline]
    fn cell(&self, p: &Vector3<f64>) -> ([usize; 3], usize) {
        let inv = 1.0 / self.size as f64;
        let c = [0, 1, 2].map(|a| ((p[a].max(0.0) * inv) as usize).min(self.counts[a] - 1));
        (c, c[0] + self.counts[0] * (c[1] + self.counts[1] * c[2]))
    }

    /// The ray parameter step from `p` to where `p + t·d` leaves cell `c` (towards a face
    /// inside the grid; the volume's own faces are the ray's clip).
    #[inline]
    fn exit(&self, c: [usize; 3], p: &Vector3<f64>, d: &Vector3<f64>) -> f64 {
        let n = self.size as f64;
        let mut exit = f64::INFINITY;
        for a in 0..3 {
            if d[a] > 1e-15 {
                exit = exit.min(((c[a] + 1) as f64 * n - p[a]) / d[a]);
            } else if d[a] < -1e-15 {
                let face = c[a] as f64 * n;
                if face > 0.0 {
                    exit = exit.min((face - p[a]) / d[a]);
                }
            }
        }
        exit.max(0.0)
    }

    /// The groups of `g`³ cells of this level.
    fn grouped(&self, g: usize) -> Self {
        let counts = self.counts.map(|c| c.div_ceil(g));
        let mut min = vec![f32::INFINITY; counts.iter().product()];
        let mut max = vec![f32::NEG_INFINITY; min.len()];
        for z in 0..self.counts[2] {
            for y in 0..self.counts[1] {
                for x in 0..self.counts[0] {
                    let i = x + self.counts[0] * (y + self.counts[1] * z);
                    let o = x / g + counts[0] * (y / g + counts[1] * (z / g));
                    min[o] = min[o].min(self.min[i]);
                    max[o] = max[o].max(self.max[i]);
                }
            }
        }
        Self {
            size: self.size * g,
            counts,
            min,
            max,
        }
    }
}

impl Bricks {
    pub const SIZE: usize = 8;
    /// Bricks per group side in the coarse skipping level (32³ voxels per group).
    pub const GROUP: usize = 4;

    /// The bricks of a volume, from a 4× block min/max pass over it (see [`Pyramid`]); use
    /// [`Self::from_pyramid`] when the pyramid is built anyway.
    #[must_use]
    pub fn new(volume: &Volume) -> Self {
        Self::from_level(&build_level(volume, 4), volume.dims())
    }

    /// The bricks read off a pyramid level whose factor divides [`Self::SIZE`] (`None` if it
    /// has none). A brick's range is taken over the level blocks that overlap its voxels and
    /// the one-voxel reach beyond, a superset, so skipping stays safe.
    #[must_use]
    pub fn from_pyramid(pyramid: &Pyramid, volume: &Volume) -> Option<Self> {
        let level = pyramid
            .levels()
            .iter()
            .rev()
            .find(|l| Self::SIZE % l.factor == 0)?;
        Some(Self::from_level(level, volume.dims()))
    }

    fn from_level(level: &Level, dims: [usize; 3]) -> Self {
        let n = Self::SIZE;
        let f = level.factor;
        let counts = dims.map(|d| d.div_ceil(n));
        let ld = level.max.dims();
        let (Voxels::F32(mx), Voxels::F32(mn)) = (level.max.voxels(), level.min.voxels()) else {
            unreachable!("pyramid levels are f32");
        };
        let (mx, mn) = (mx.as_slice(), mn.as_slice());
        let per_layer = counts[0] * counts[1];
        let mut min = vec![f32::INFINITY; per_layer * counts[2]];
        let mut max = vec![f32::NEG_INFINITY; per_layer * counts[2]];
        // level cells [n·b/f, (n·b + n)/f] hold voxels n·b ..= n·b + n
        let cells = |b: usize, axis: usize| (n * b / f)..=((n * b + n) / f).min(ld[axis] - 1);
        max.par_chunks_mut(per_layer)
            .zip(min.par_chunks_mut(per_layer))
            .enumerate()
            .for_each(|(bz, (mxl, mnl))| {
                for by in 0..counts[1] {
                    for bx in 0..counts[0] {
                        let i = bx + counts[0] * by;
                        for z in cells(bz, 2) {
                            for y in cells(by, 1) {
                                for x in cells(bx, 0) {
                                    let li = x + ld[0] * (y + ld[1] * z);
                                    mxl[i] = mxl[i].max(mx[li]);
                                    mnl[i] = mnl[i].min(mn[li]);
                                }
                            }
                        }
                    }
                }
            });
        let fine = BrickLevel {
            size: n,
            counts,
            min,
            max,
        };
        Self {
            coarse: fine.grouped(Self::GROUP),
            fine,
        }
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
    let rays = VoxelRays::new(volume, &cam)?;
    let sp = volume.spacing_mm();
    // Half a voxel of the smallest spacing, but never a step that moves less than
    // step_vox / √3 voxels along the ray's major axis: with extreme anisotropy (a spacing of
    // 1e-31 mm beside 0.07 mm) the smallest spacing alone would take 1e30 steps across the
    // box. So a ray takes at most √3 · (longest side + 1) / step_vox steps whatever the
    // voxel sizes; for ordinary voxels (anisotropy under √3) the step is the usual one.
    let dmax = rays.dir.amax();
    let step_mm = (step_vox * sp[0].min(sp[1]).min(sp[2])).max(step_vox / (3f64.sqrt() * dmax));
    let max_samples = max_samples(volume.dims(), step_vox);
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
    let shader = Shader::new(volume, &cam, options)?;
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
                    let o = rays.grid.at(c, r);
                    let hit = clip_to_cells(&o, &rays.dir, dims).and_then(|(t0, t1)| {
                        first_crossing(
                            &field,
                            bricks,
                            &o,
                            &rays.dir,
                            (t0, t1),
                            step_mm,
                            raw_thr,
                            max_samples,
                        )
                    });
                    let px = &mut line[4 * c..4 * c + 4];
                    let Some(hit) = hit else {
                        px.copy_from_slice(&options.background);
                        continue;
                    };
                    let (colour, nrm) = shader.shade(&field.gradient(&hit.voxel), hit.t);
                    px.copy_from_slice(&colour);
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

/// Lighting of a hit: Lambert with ambient light, a Blinn–Phong highlight and a depth cue.
struct Shader<'o> {
    options: &'o SurfaceOptions,
    /// `voxel_from_world`'s linear part transposed: maps a voxel-space gradient to world.
    a_t: Matrix3<f64>,
    view: Vector3<f64>,
    light: Vector3<f64>,
    half: Vector3<f64>,
    /// Depth range of the whole box along the view (the ray parameter, mm).
    near: f64,
    far: f64,
}

impl<'o> Shader<'o> {
    fn new(
        volume: &Volume,
        cam: &Camera,
        options: &'o SurfaceOptions,
    ) -> Result<Self, RenderError> {
        let frame = cam.frame()?;
        let (mut near, mut far) = (f64::MAX, f64::MIN);
        for corner in cell_corners(volume) {
            let t = (corner - cam.centre.0).dot(&frame.dir);
            near = near.min(t);
            far = far.max(t);
        }
        let view = -frame.dir;
        let light = options
            .light_dir
            .and_then(|l| l.try_normalize(1e-12))
            .unwrap_or(view);
        Ok(Self {
            options,
            a_t: volume.voxel_from_world().linear().transpose(),
            view,
            light,
            half: (light + view).try_normalize(1e-12).unwrap_or(view),
            near,
            far,
        })
    }

    /// The colour of a hit at ray parameter `t` with voxel-space gradient `gv` (of
    /// `sign · stored`), and its outward world normal facing the viewer.
    fn shade(&self, gv: &Vector3<f64>, t: f64) -> ([u8; 4], Vector3<f64>) {
        let o = self.options;
        let mut nrm = (-(self.a_t * gv)).try_normalize(1e-20).unwrap_or(self.view);
        if nrm.dot(&self.view) < 0.0 {
            // the back of a surface cut open by the box: light its front
            nrm = -nrm;
        }
        let lambert = nrm.dot(&self.light).max(0.0);
        let spec = if o.specular > 0.0 {
            o.specular * nrm.dot(&self.half).max(0.0).powf(o.shininess)
        } else {
            0.0
        };
        let depth = if self.far > self.near {
            ((t - self.near) / (self.far - self.near)).clamp(0.0, 1.0)
        } else {
            0.0
        };
        let cue = 1.0 - o.depth_cue.clamp(0.0, 1.0) * depth;
        let k = (o.ambient + o.diffuse * lambert) * cue;
        let mut px = [0, 0, 0, 255];
        for (out, &base) in px.iter_mut().zip(&o.colour) {
            let v = f64::from(base) * k + 255.0 * spec * cue;
            *out = v.clamp(0.0, 255.0).round() as u8;
        }
        (px, nrm)
    }
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

/// The most samples a ray needs to cross a box of `dims` in steps of at least `step_vox / √3`
/// voxels along its major axis (see [`surface`]), with room for the skips' small overshoots:
/// the bound that makes every ray end, whatever rounding does to the ray parameter.
fn max_samples(dims: [usize; 3], step_vox: f64) -> usize {
    let longest = dims.iter().copied().max().unwrap_or(1) as f64 + 1.0;
    (2.0 * 3f64.sqrt() * longest / step_vox).ceil() as usize + 64
}

/// The next ray parameter after `t`: `t + step`, or the next representable number when the
/// step is below `t`'s precision, so that a march always moves on.
#[inline]
fn advance(t: f64, step: f64) -> f64 {
    let next = t + step;
    if next > t { next } else { t.next_up() }
}

/// Steps along `o + t·d` over `[t0, t1]` until the field reaches `thr`, skipping groups and
/// bricks whose maximum is below it; refines the crossing by bisection to 1/16 voxel and a
/// final linear interpolation. Takes at most `max_samples` steps.
#[allow(
    clippy::too_many_arguments,
    reason = "one ray's state, kept flat in the hot loop"
)]
fn first_crossing<T: Voxel>(
    f: &Field<'_, '_, T>,
    bricks: Option<&Bricks>,
    o: &Vector3<f64>,
    d: &Vector3<f64>,
    (t0, t1): (f64, f64),
    step_mm: f64,
    thr: f32,
    max_samples: usize,
) -> Option<Hit> {
    let mut t = t0;
    let mut below: Option<f64> = None;
    // the ray parameter up to which the current brick is known to hold something: no
    // skipping checks until then
    let mut occupied_until = f64::NEG_INFINITY;
    let mut samples = 0usize;
    while t <= t1 && samples < max_samples {
        samples += 1;
        let p = o + d * t;
        if let Some(b) = bricks
            && t >= occupied_until
        {
            // the group first, then the brick: leave whichever holds nothing to find
            let mut skip = None;
            for (fine, level) in [(false, &b.coarse), (true, &b.fine)] {
                let (c, i) = level.cell(&p);
                let top = if f.sign > 0.0 {
                    level.max[i]
                } else {
                    -level.min[i]
                };
                if top < thr {
                    skip = Some(level.exit(c, &p, d));
                    break;
                }
                if fine {
                    occupied_until = t + level.exit(c, &p, d);
                }
            }
            if let Some(exit) = skip {
                let next = advance(t, exit + 1e-6 * step_mm);
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
            let (mut hi, mut f_hi) = (t, v);
            let mut f_lo = f.at(&(o + d * lo));
            // bisection down to 1/16 voxel (the value at `lo` is below, at `hi` at or above
            // the threshold), then the crossing of the straight line between the two: within
            // a sixteenth of a voxel the field is linear to well under 1/1000 of a voxel
            let len_vox = d.norm();
            while (hi - lo) * len_vox > 1.0 / 16.0 {
                let mid = 0.5 * (lo + hi);
                if mid <= lo || mid >= hi {
                    break; // no number between: as fine as the ray parameter resolves
                }
                let fm = f.at(&(o + d * mid));
                if fm >= thr {
                    (hi, f_hi) = (mid, fm);
                } else {
                    (lo, f_lo) = (mid, fm);
                }
            }
            let s = if f_hi > f_lo {
                ((thr - f_lo) / (f_hi - f_lo)).clamp(0.0, 1.0)
            } else {
                1.0
            };
            let tc = lo + (hi - lo) * f64::from(s);
            return Some(Hit {
                voxel: o + d * tc,
                t: tc,
            });
        }
        below = Some(t);
        t = advance(t, step_mm);
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
    use crate::render::pyramid::Pyramid;

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
    fn skipping_empty_groups_and_bricks_finds_the_same_surface() {
        // a small ball far from the centre of a large box: whole 32³ groups are empty
        let n = 80;
        let c = [57.3, 24.6, 41.2];
        let mut data = Vec::with_capacity(n * n * n);
        for k in 0..n {
            for j in 0..n {
                for i in 0..n {
                    let r = ((i as f64 - c[0]).powi(2)
                        + (j as f64 - c[1]).powi(2)
                        + (k as f64 - c[2]).powi(2))
                    .sqrt();
                    data.push((100.0 * (9.0 - r)) as f32);
                }
            }
        }
        let v = Volume::from_vec([n; 3], Affine3::from_spacing([0.5, 0.5, 0.7]), data).unwrap();
        let pyramid = Pyramid::new(&v).unwrap();
        let from_pyramid = Bricks::from_pyramid(&pyramid, &v).unwrap();
        let direct = Bricks::new(&v);
        for dir in [Vector3::new(-0.5, 0.2, 0.3), Vector3::new(0.1, -0.9, 0.2)] {
            let cam = Camera::fit(&v, dir, Vector3::z(), 60, 60)
                .unwrap()
                .zoomed(3.0);
            let cam = Camera {
                centre: v.voxel_to_world(VoxelPoint::new(c[0], c[1], c[2])),
                ..cam
            };
            let opts = SurfaceOptions::new(0.0);
            let plain = surface(&v, &cam, &opts, None).unwrap();
            let mut seen = 0;
            for b in [&from_pyramid, &direct] {
                let fast = surface(&v, &cam, &opts, Some(b)).unwrap();
                for (x, y) in plain.hits.iter().zip(&fast.hits) {
                    match (x, y) {
                        (Some(x), Some(y)) => {
                            seen += 1;
                            // the refinement starts from a different bracket: 1/100 voxel
                            assert!(x.distance_mm(*y) < 5e-3, "{x:?} vs {y:?}");
                        }
                        (None, None) => {}
                        _ => panic!("coverage differs: {x:?} vs {y:?}"),
                    }
                }
            }
            assert!(seen > 500, "{seen} hits");
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
}
