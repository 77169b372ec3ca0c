//! Synthetic sample specimens: small skulls in a resin block, "scanned" in memory.
//!
//! The scenario (invented): skulls of a tiny reptile-like animal, a few millimetres long, from
//! two localities — [`GROUP_LONG`] (long snout, narrow braincase, larger) and [`GROUP_SHORT`]
//! (short snout, broad braincase, smaller) — embedded in a resin block with air bubbles and
//! scanned as 16-bit volumes with anisotropic voxels.
//!
//! Each specimen is a [`SpecimenSpec`]; [`generate`] turns it into a [`SyntheticSpecimen`]: the
//! volume (u16, `world_from_voxel` a pure voxel-size scaling, so world `x = i·sx`), the true
//! landmark positions in world millimetres, and the dorsal-midline curve. All randomness comes
//! from `ChaCha8Rng` seeded by the spec's seed, with one stream per purpose (shape, pose,
//! bubbles, resin ripple, noise), so the same spec always gives the same bytes, and turning the
//! noise off changes nothing else.
//!
//! Intensity model, per voxel centre: air 1000 outside the block, resin 9000 with a smooth
//! low-frequency density ripple, bone 30000; every boundary is a partial-volume edge
//! `background + (material − background)·S(−d / w)` where `d` is the signed distance-like value
//! of the boundary, `S` the cubic smoothstep mapped to `[-1, 1] → [0, 1]` (odd about 0.5) and
//! `w` the largest voxel size. Bone's iso-50 level (halfway between local resin and bone) is
//! therefore exactly the zero level of the skull's implicit function. Gaussian noise is added,
//! then values are rounded to a multiple of [`QUANTUM`] and clipped to u16.
//!
//! The skull geometry and landmark constructions live in [`skull`], the landmark scheme in
//! [`scheme`]. This module imports only `geometry` and `volume`; [`comparative`] (a tree of
//! fossil taxa and shapes evolved on it) also `evolution` and `export`.

pub mod comparative;
pub mod rock;
pub mod scheme;
pub mod skull;

pub use scheme::{CurveDef, LandmarkDef, SCHEME_ID, curves, scheme};
pub use skull::{Skull, SkullParams};

use crate::geometry::{Affine3, WorldPoint};
use crate::volume::{Volume, VolumeError, Voxels};
use nalgebra::{Point3, Rotation3, Vector3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use rayon::prelude::*;
use std::collections::BTreeMap;

/// The generator's version, written into every ground-truth file.
pub const GENERATOR_VERSION: &str = "1";

/// The long-snouted group.
pub const GROUP_LONG: &str = "Harrowdene Clay";
/// The short-snouted group.
pub const GROUP_SHORT: &str = "Tallis Fissure";

/// Intensity of air outside the block.
pub const AIR: f64 = 1000.0;
/// Mean intensity of the resin.
pub const RESIN: f64 = 9000.0;
/// Intensity of bone.
pub const BONE: f64 = 30000.0;
/// Standard deviation of the Gaussian noise. Noise is what limits compression: at σ = 600 the
/// gzip size was 13.8 bit/voxel; at 300 with the 16-count quantum below it is about half.
pub const NOISE_SIGMA: f64 = 300.0;
/// Stored values are multiples of this, as from a 12-bit detector scaled into 16 bits.
pub const QUANTUM: f64 = 16.0;
/// Peak amplitude of each of the three resin ripple waves.
pub const RIPPLE_AMPLITUDE: f64 = 120.0;

/// Corner radius of the resin block in the `x`-`y` plane.
const BLOCK_CORNER_MM: f64 = 0.6;

/// What to generate.
#[derive(Clone, Debug, PartialEq)]
pub struct SpecimenSpec {
    pub id: String,
    /// One of [`GROUP_LONG`], [`GROUP_SHORT`].
    pub group: String,
    pub seed: u64,
    /// Grid size `[nx, ny, nz]`.
    pub dims: [usize; 3],
    /// Voxel size in millimetres along `i`, `j`, `k`.
    pub voxel_size_mm: [f64; 3],
    /// Add Gaussian noise (turn off for exact checks of the partial-volume edge).
    pub noise: bool,
    /// Free-form labels copied to the specimen (locality, collection number, …).
    pub labels: BTreeMap<String, String>,
}

/// A generated specimen.
#[derive(Debug)]
pub struct SyntheticSpecimen {
    pub id: String,
    pub group: String,
    pub seed: u64,
    pub labels: BTreeMap<String, String>,
    pub volume: Volume,
    /// True landmark positions in world millimetres, in [`scheme`] order.
    pub landmarks: Vec<(String, WorldPoint)>,
    /// True curve semilandmarks in world millimetres, per [`curves`] entry.
    pub curves: Vec<(String, Vec<WorldPoint>)>,
    pub voxel_size_mm: [f64; 3],
    /// The shape parameters drawn for this specimen.
    pub params: SkullParams,
    /// The rigid pose: `world = world_from_specimen · specimen`.
    pub world_from_specimen: Affine3,
    /// Air bubbles in the resin: centres (world mm) and radii (mm).
    pub bubbles: Vec<(WorldPoint, f64)>,
}

/// Why a specimen cannot be generated.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SynthError {
    #[error("specimen {id}: unknown group {group:?}")]
    UnknownGroup { id: String, group: String },
    #[error("specimen {id}: skull does not fit the {dims:?} grid at {voxel_size_mm:?} mm")]
    DoesNotFit {
        id: String,
        dims: [usize; 3],
        voxel_size_mm: [f64; 3],
    },
    #[error("specimen {id}: landmark {landmark} has no surface point")]
    LandmarkMissing { id: String, landmark: String },
    #[error("specimen {id}: voxel size {voxel_size_mm:?} is not positive and finite")]
    BadVoxelSize { id: String, voxel_size_mm: [f64; 3] },
    #[error("specimen {id}: {source}")]
    Volume { id: String, source: VolumeError },
}

/// Grid of the default series.
pub const DEFAULT_DIMS: [usize; 3] = [120, 88, 48];
/// Voxel size of the default series (36 µm in-plane, 50 µm between slices).
pub const DEFAULT_VOXEL_SIZE_MM: [f64; 3] = [0.036, 0.036, 0.05];

/// The default series: ten specimens, five per group.
#[must_use]
pub fn default_series() -> Vec<SpecimenSpec> {
    let mut out = Vec::new();
    for (g, (group, prefix, locality)) in [
        (GROUP_LONG, "HDC", "Harrowdene Clay pit, lower lens"),
        (GROUP_SHORT, "TF", "Tallis Fissure, infill block B"),
    ]
    .into_iter()
    .enumerate()
    {
        for n in 1..=5u64 {
            let id = format!("{prefix}-{n:03}");
            let mut labels = BTreeMap::new();
            labels.insert("locality".to_owned(), locality.to_owned());
            labels.insert("group".to_owned(), group.to_owned());
            labels.insert("synthetic".to_owned(), "true".to_owned());
            out.push(SpecimenSpec {
                id,
                group: group.to_owned(),
                seed: 0x5u64 << 32 | (g as u64) << 16 | n,
                dims: DEFAULT_DIMS,
                voxel_size_mm: DEFAULT_VOXEL_SIZE_MM,
                noise: true,
                labels,
            });
        }
    }
    out
}

/// Random streams of one specimen's generator.
#[derive(Clone, Copy)]
enum Stream {
    Shape = 1,
    Pose = 2,
    Bubbles = 3,
    Ripple = 4,
    /// Noise uses `Noise + k` for slice `k`.
    Noise = 16,
}

fn rng_for(seed: u64, stream: Stream) -> ChaCha8Rng {
    rng_stream(seed, stream as u64)
}

fn rng_stream(seed: u64, stream: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream);
    rng
}

/// The scene: everything needed to evaluate an intensity at a world point.
struct Scene {
    skull: Skull,
    skull_box: (Point3<f64>, Point3<f64>),
    specimen_from_world: Affine3,
    block_lo: [f64; 2],
    block_hi: [f64; 2],
    block_corner: f64,
    bubbles: Vec<(Point3<f64>, f64)>,
    ripple: [(Vector3<f64>, f64); 3],
    edge_mm: f64,
}

/// Signed distance to the resin block: a box in `x`-`y` from `lo` to `hi` with corners rounded
/// to radius `corner`, unbounded in `z`.
fn block_sd(w: Point3<f64>, lo: [f64; 2], hi: [f64; 2], corner: f64) -> f64 {
    let mut q = [0.0; 2];
    for a in 0..2 {
        let centre = 0.5 * (lo[a] + hi[a]);
        let half = 0.5 * (hi[a] - lo[a]) - corner;
        q[a] = (w[a] - centre).abs() - half;
    }
    let outside = (q[0].max(0.0).powi(2) + q[1].max(0.0).powi(2)).sqrt();
    outside + q[0].max(q[1]).min(0.0) - corner
}

/// Cubic smoothstep on `u ∈ [-1, 1]` → `[0, 1]`, with `S(-u) = 1 - S(u)`.
fn smooth_edge(u: f64) -> f64 {
    let x = (0.5 * (u + 1.0)).clamp(0.0, 1.0);
    x * x * (3.0 - 2.0 * x)
}

impl Scene {
    fn resin_at(&self, w: Point3<f64>) -> f64 {
        RESIN
            + self
                .ripple
                .iter()
                .map(|(k, phase)| RIPPLE_AMPLITUDE * (k.dot(&w.coords) + phase).sin())
                .sum::<f64>()
    }

    fn block_sd(&self, w: Point3<f64>) -> f64 {
        block_sd(w, self.block_lo, self.block_hi, self.block_corner)
    }

    fn bubble_sd(&self, w: Point3<f64>) -> f64 {
        self.bubbles
            .iter()
            .map(|(c, r)| (w - c).norm() - r)
            .fold(f64::INFINITY, f64::min)
    }

    /// Noise-free intensity at a world point.
    fn intensity(&self, w: Point3<f64>) -> f64 {
        let e = self.edge_mm;
        let block = smooth_edge(-self.block_sd(w) / e);
        let bubble = smooth_edge(-self.bubble_sd(w) / e);
        let resin = self.resin_at(w);
        let background = AIR + block * (1.0 - bubble) * (resin - AIR);
        let q = self.specimen_from_world.apply_point(w);
        // outside the skull's box (grown by the edge width) there is no bone: skip the solid
        let (lo, hi) = &self.skull_box;
        if (0..3).any(|a| q[a] < lo[a] - e || q[a] > hi[a] + e) {
            return background;
        }
        let bone = smooth_edge(-self.skull.sdf(q) / e);
        background + bone * (BONE - background)
    }
}

/// The skull of a specimen (its drawn parameters and solid, in the specimen frame) without
/// rendering anything: cheap, for checks on shape alone.
pub fn skull_for(spec: &SpecimenSpec) -> Result<Skull, SynthError> {
    let long = match spec.group.as_str() {
        GROUP_LONG => true,
        GROUP_SHORT => false,
        _ => {
            return Err(SynthError::UnknownGroup {
                id: spec.id.clone(),
                group: spec.group.clone(),
            });
        }
    };
    let mean = SkullParams::group_mean(long);
    let params = SkullParams::sample(&mean, 0.05, 0.04, &mut rng_for(spec.seed, Stream::Shape));
    Ok(Skull::new(&params))
}

/// Generates one specimen.
#[allow(
    clippy::too_many_lines,
    reason = "one linear recipe: shape, pose, fit check, landmarks, bubbles, ripple, render"
)]
pub fn generate(spec: &SpecimenSpec) -> Result<SyntheticSpecimen, SynthError> {
    let id = spec.id.clone();
    if spec
        .voxel_size_mm
        .iter()
        .any(|v| !(v.is_finite() && *v > 0.0))
    {
        return Err(SynthError::BadVoxelSize {
            id,
            voxel_size_mm: spec.voxel_size_mm,
        });
    }
    let skull = skull_for(spec)?;
    let params = skull.params.clone();

    let extent = [0, 1, 2].map(|a| spec.dims[a] as f64 * spec.voxel_size_mm[a]);
    let field_centre = Point3::new(
        (spec.dims[0] as f64 - 1.0) * 0.5 * spec.voxel_size_mm[0],
        (spec.dims[1] as f64 - 1.0) * 0.5 * spec.voxel_size_mm[1],
        (spec.dims[2] as f64 - 1.0) * 0.5 * spec.voxel_size_mm[2],
    );
    let not_fit = || SynthError::DoesNotFit {
        id: spec.id.clone(),
        dims: spec.dims,
        voxel_size_mm: spec.voxel_size_mm,
    };

    // pose: small rotations about each axis and a small offset of the skull's box centre
    let mut prng = rng_for(spec.seed, Stream::Pose);
    let deg = std::f64::consts::PI / 180.0;
    let roll = prng.random_range(-6.0..6.0) * deg;
    let pitch = prng.random_range(-6.0..6.0) * deg;
    let yaw = prng.random_range(-8.0..8.0) * deg;
    let rot = Rotation3::from_euler_angles(roll, pitch, yaw);
    let (lo, hi) = skull.bounds();
    let mid = nalgebra::center(&lo, &hi);
    let offset = Vector3::new(
        prng.random_range(-0.08..0.08),
        prng.random_range(-0.08..0.08),
        prng.random_range(-0.05..0.05),
    );
    let translation = field_centre.coords + offset - rot * mid.coords;
    let world_from_specimen = Affine3::from_linear_translation(rot.matrix(), &translation);
    let specimen_from_world = world_from_specimen.inverse();

    // the rotated skull box must sit inside the resin block with a margin
    let margin = 0.1;
    let inset = 0.12;
    let block_lo = [inset, inset];
    let block_hi = [extent[0] - inset, extent[1] - inset];
    for corner in 0..8u8 {
        let c = Point3::new(
            if corner & 1 == 0 { lo.x } else { hi.x },
            if corner & 2 == 0 { lo.y } else { hi.y },
            if corner & 4 == 0 { lo.z } else { hi.z },
        );
        let w = world_from_specimen.apply_point(c);
        for a in 0..2 {
            if w[a] < block_lo[a] + margin || w[a] > block_hi[a] - margin {
                return Err(not_fit());
            }
        }
        if w.z < margin || w.z > extent[2] - margin {
            return Err(not_fit());
        }
    }

    // landmarks and curve in the specimen frame
    let mut landmarks_spec = Vec::new();
    for def in scheme() {
        let p = skull
            .landmark(def.id)
            .ok_or_else(|| SynthError::LandmarkMissing {
                id: spec.id.clone(),
                landmark: def.id.to_owned(),
            })?;
        landmarks_spec.push((def.id.to_owned(), p));
    }
    let mut curves_out = Vec::new();
    for c in curves() {
        let pts = skull
            .dorsal_midline(c.n_points)
            .ok_or_else(|| SynthError::LandmarkMissing {
                id: spec.id.clone(),
                landmark: c.id.to_owned(),
            })?;
        curves_out.push((
            c.id.to_owned(),
            pts.into_iter()
                .map(|p| WorldPoint(world_from_specimen.apply_point(p)))
                .collect::<Vec<_>>(),
        ));
    }
    let landmarks: Vec<(String, WorldPoint)> = landmarks_spec
        .iter()
        .map(|(n, p)| (n.clone(), WorldPoint(world_from_specimen.apply_point(*p))))
        .collect();

    // bubbles: in the resin, clear of bone and of every landmark
    let mut brng = rng_for(spec.seed, Stream::Bubbles);
    let n_bubbles = brng.random_range(7..=12);
    let mut bubbles: Vec<(Point3<f64>, f64)> = Vec::new();
    let mut tries = 0;
    while bubbles.len() < n_bubbles && tries < 2000 {
        tries += 1;
        let r: f64 = 0.03 + 0.15 * brng.random::<f64>().powi(2);
        let c = Point3::new(
            brng.random_range(0.0..extent[0]),
            brng.random_range(0.0..extent[1]),
            brng.random_range(0.0..extent[2]),
        );
        let clear_of_block = block_sd(c, block_lo, block_hi, BLOCK_CORNER_MM) < -(r + 0.05);
        let clear_of_bone = skull.sdf(specimen_from_world.apply_point(c)) > r + 0.06;
        let clear_of_landmarks = landmarks
            .iter()
            .map(|(_, p)| p)
            .chain(curves_out.iter().flat_map(|(_, v)| v.iter()))
            .all(|p| (p.0 - c).norm() > r + 0.2);
        let clear_of_bubbles = bubbles.iter().all(|(b, rb)| (b - c).norm() > r + rb + 0.05);
        if clear_of_block && clear_of_bone && clear_of_landmarks && clear_of_bubbles {
            bubbles.push((c, r));
        }
    }

    // resin ripple: three waves of 1.5–4 mm wavelength in random directions
    let mut rrng = rng_for(spec.seed, Stream::Ripple);
    let ripple = [0, 1, 2].map(|_| {
        let dir = Vector3::new(
            rrng.sample::<f64, _>(StandardNormal),
            rrng.sample::<f64, _>(StandardNormal),
            rrng.sample::<f64, _>(StandardNormal),
        )
        .try_normalize(1e-9)
        .unwrap_or_else(Vector3::x);
        let wavelength = rrng.random_range(1.5..4.0);
        let phase = rrng.random_range(0.0..std::f64::consts::TAU);
        (dir * (std::f64::consts::TAU / wavelength), phase)
    });

    let scene = Scene {
        skull_box: skull.bounds(),
        skull,
        specimen_from_world,
        block_lo,
        block_hi,
        block_corner: BLOCK_CORNER_MM,
        bubbles,
        ripple,
        edge_mm: spec.voxel_size_mm.iter().copied().fold(0.0, f64::max),
    };
    let volume = render(&scene, spec).map_err(|source| SynthError::Volume {
        id: spec.id.clone(),
        source,
    })?;
    Ok(SyntheticSpecimen {
        id: spec.id.clone(),
        group: spec.group.clone(),
        seed: spec.seed,
        labels: spec.labels.clone(),
        volume,
        landmarks,
        curves: curves_out,
        voxel_size_mm: spec.voxel_size_mm,
        params,
        world_from_specimen,
        bubbles: scene
            .bubbles
            .iter()
            .map(|(c, r)| (WorldPoint(*c), *r))
            .collect(),
    })
}

/// Evaluates the scene at every voxel centre, in parallel over slices.
fn render(scene: &Scene, spec: &SpecimenSpec) -> Result<Volume, VolumeError> {
    let [nx, ny, nz] = spec.dims;
    let n = crate::volume::voxel_count(spec.dims).ok_or(VolumeError::BadDims(spec.dims))?;
    let world_from_voxel = Affine3::from_spacing(spec.voxel_size_mm);
    let [sx, sy, sz] = spec.voxel_size_mm;
    let mut data = vec![0u16; n];
    if n == 0 {
        return Err(VolumeError::BadDims(spec.dims));
    }
    data.par_chunks_mut(nx * ny)
        .enumerate()
        .for_each(|(k, slice)| {
            let mut rng = rng_stream(spec.seed, Stream::Noise as u64 + k as u64);
            for j in 0..ny {
                for i in 0..nx {
                    let w = Point3::new(i as f64 * sx, j as f64 * sy, k as f64 * sz);
                    let mut v = scene.intensity(w);
                    if spec.noise {
                        let z: f64 = rng.sample(StandardNormal);
                        v += NOISE_SIGMA * z;
                    }
                    slice[i + nx * j] =
                        ((v / QUANTUM).round() * QUANTUM).clamp(0.0, 65520.0) as u16;
                }
            }
        });
    debug_assert_eq!(nz * nx * ny, n);
    Volume::from_vec(spec.dims, world_from_voxel, data)
}

/// FNV-1a 64-bit hash of the voxels' little-endian bytes: a fingerprint linking a ground-truth
/// file to its volume. Reference: Fowler–Noll–Vo hash, offset basis 0xcbf29ce484222325 and prime
/// 0x100000001b3 (from memory; checked against a published test vector in the tests).
#[must_use]
pub fn fnv1a64(bytes: impl IntoIterator<Item = u8>) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in bytes {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0100_0000_01b3);
    }
    h
}

/// The fingerprint of a volume's voxels: [`fnv1a64`] over the stored values, little-endian for
/// u16 (the generator's type), native order for the other types.
#[must_use]
pub fn voxel_checksum(volume: &Volume) -> u64 {
    match volume.voxels() {
        Voxels::U16(b) => fnv1a64(b.as_slice().iter().flat_map(|v| v.to_le_bytes())),
        other => crate::with_voxels!(other, |s| fnv1a64(
            bytemuck::cast_slice::<_, u8>(s).iter().copied()
        )),
    }
}

/// The ground-truth landmark file of a specimen.
#[must_use]
pub fn landmarks_json(s: &SyntheticSpecimen) -> serde_json::Value {
    let pt = |p: &WorldPoint| [p.0.x, p.0.y, p.0.z];
    let defs = scheme();
    let landmarks: Vec<serde_json::Value> = s
        .landmarks
        .iter()
        .map(|(id, p)| {
            let def = defs.iter().find(|d| d.id == id);
            serde_json::json!({
                "id": id,
                "x": p.0.x, "y": p.0.y, "z": p.0.z,
                "on_surface": def.is_some_and(|d| d.on_surface),
            })
        })
        .collect();
    let curves: Vec<serde_json::Value> = s
        .curves
        .iter()
        .map(|(id, pts)| {
            let def = curves().into_iter().find(|c| c.id == id);
            serde_json::json!({
                "id": id,
                "start": def.as_ref().map(|d| d.start),
                "end": def.as_ref().map(|d| d.end),
                "points": pts.iter().map(pt).collect::<Vec<_>>(),
            })
        })
        .collect();
    serde_json::json!({
        "format": "sutura-synthetic-truth",
        "scheme": SCHEME_ID,
        "specimen": s.id,
        "group": s.group,
        "labels": s.labels,
        "units": "mm",
        "frame": "world (voxel centre (i, j, k) at (i*sx, j*sy, k*sz))",
        "dims": s.volume.dims(),
        "voxel_size_mm": s.voxel_size_mm,
        "generator": {"name": "sutura synth", "version": GENERATOR_VERSION, "seed": s.seed},
        "voxel_checksum_fnv1a64": format!("{:016x}", voxel_checksum(&s.volume)),
        "world_from_specimen": s.world_from_specimen.rows(),
        "intensity": {
            "air": AIR, "resin": RESIN, "bone": BONE,
            "noise_sigma": NOISE_SIGMA, "quantum": QUANTUM,
        },
        "landmarks": landmarks,
        "curves": curves,
    })
}

#[cfg(test)]
mod tests;
