//! A synthetic skull in a rock-like matrix: the sample for virtual preparation.
//!
//! The scenario (invented): specimen `RM-001`, a skull of the long-snouted group still in a
//! block of fine-grained rock. The rock is denser than resin and uneven: a base density
//! [`ROCK`] with a low-frequency texture, scattered mineral grains whose densities
//! ([`GRAIN_MIN`]–[`GRAIN_MAX`]) overlap the bone's ([`super::BONE`]), a few pores, and one dense
//! mineral vein ([`VEIN`], a vertical sheet [`VEIN_THICKNESS_MM`] thick) that touches the skull's
//! side. So no threshold separates bone from rock (the grains and vein pass any threshold the
//! bone passes), and a region grown from the bone leaks into the vein through the contact;
//! cutting the contact on a few slices, interpolating the cut and growing again isolates the
//! skull (the recipe in the README, tested in `tests/prep_cli.rs`).
//!
//! The skull, its pose, the block and the noise are those of [`super::generate`] for the same
//! spec; the truth is the skull's solid at the voxel centres ([`RockSpecimen::truth`], one byte
//! per voxel, 1 inside: where the implicit function is negative). Grains and pores keep clear
//! of the bone and of the vein; the vein is the only rock touching the bone.

use nalgebra::{Point3, Vector3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use rayon::prelude::*;

use super::{
    AIR, BLOCK_CORNER_MM, BONE, NOISE_SIGMA, QUANTUM, SpecimenSpec, SynthError, generate,
    skull_for, smooth_edge,
};
use crate::geometry::{Affine3, WorldPoint};
use crate::volume::Volume;

/// Mean density of the rock.
pub const ROCK: f64 = 14000.0;
/// Amplitude of each of the rock's three texture waves.
pub const ROCK_TEXTURE: f64 = 500.0;
/// Densities of mineral grains: drawn uniformly in this range, which holds the bone's.
pub const GRAIN_MIN: f64 = 25000.0;
pub const GRAIN_MAX: f64 = 36000.0;
/// Density of the pores.
pub const PORE: f64 = 5000.0;
/// Density of the vein.
pub const VEIN: f64 = 31000.0;
/// Thickness of the vein.
pub const VEIN_THICKNESS_MM: f64 = 0.12;
/// How far the vein's inner face reaches into the skull's side: the contact.
pub const VEIN_OVERLAP_MM: f64 = 0.035;

/// The sample's id.
pub const ROCK_ID: &str = "RM-001";

/// The sample's spec: the default grid and voxel size, a long-snouted skull.
#[must_use]
pub fn rock_spec() -> SpecimenSpec {
    let mut labels = std::collections::BTreeMap::new();
    labels.insert(
        "locality".to_owned(),
        "Harrowdene Clay pit, nodule bed".to_owned(),
    );
    labels.insert("synthetic".to_owned(), "true".to_owned());
    SpecimenSpec {
        id: ROCK_ID.to_owned(),
        group: super::GROUP_LONG.to_owned(),
        seed: 0x0052_4f43_4b01,
        dims: super::DEFAULT_DIMS,
        voxel_size_mm: super::DEFAULT_VOXEL_SIZE_MM,
        noise: true,
        labels,
    }
}

/// A generated rock sample.
#[derive(Debug)]
pub struct RockSpecimen {
    pub id: String,
    pub volume: Volume,
    /// The skull's voxels: one byte per voxel, 1 inside, in the volume's memory order.
    pub truth: Vec<u8>,
    /// The vein's mid-plane: a point on it and its unit normal (horizontal), world mm.
    pub vein_point: WorldPoint,
    pub vein_normal: Vector3<f64>,
    pub grains: usize,
    pub pores: usize,
}

struct RockScene {
    skull: super::Skull,
    skull_box: (Point3<f64>, Point3<f64>),
    specimen_from_world: Affine3,
    block_lo: [f64; 2],
    block_hi: [f64; 2],
    /// centre, radius, density
    grains: Vec<(Point3<f64>, f64, f64)>,
    texture: [(Vector3<f64>, f64); 3],
    vein_point: Point3<f64>,
    vein_normal: Vector3<f64>,
    edge_mm: f64,
}

impl RockScene {
    fn intensity(&self, w: Point3<f64>) -> f64 {
        let e = self.edge_mm;
        let mut v = ROCK
            + self
                .texture
                .iter()
                .map(|(k, phase)| ROCK_TEXTURE * (k.dot(&w.coords) + phase).sin())
                .sum::<f64>();
        for (c, r, density) in &self.grains {
            let d = (w - c).norm() - r;
            if d < e {
                v += smooth_edge(-d / e) * (density - v);
            }
        }
        let vein_sd =
            (self.vein_normal.dot(&(w - self.vein_point))).abs() - 0.5 * VEIN_THICKNESS_MM;
        if vein_sd < e {
            v += smooth_edge(-vein_sd / e) * (VEIN - v);
        }
        let block =
            smooth_edge(-super::block_sd(w, self.block_lo, self.block_hi, BLOCK_CORNER_MM) / e);
        let background = AIR + block * (v - AIR);
        let q = self.specimen_from_world.apply_point(w);
        let (lo, hi) = &self.skull_box;
        if (0..3).any(|a| q[a] < lo[a] - e || q[a] > hi[a] + e) {
            return background;
        }
        let bone = smooth_edge(-self.skull.sdf(q) / e);
        background + bone * (BONE - background)
    }
}

/// Generates the rock sample of `spec` (see the module docs).
#[allow(clippy::too_many_lines)] // reason: the sample is built in one pass, layer by layer
pub fn generate_in_rock(spec: &SpecimenSpec) -> Result<RockSpecimen, SynthError> {
    // the skull, its pose and the block exactly as the resin series places them
    let resin = generate(spec)?;
    let skull = skull_for(spec)?;
    let world_from_specimen = resin.world_from_specimen;
    let specimen_from_world = world_from_specimen.inverse();
    let extent = [0, 1, 2].map(|a| spec.dims[a] as f64 * spec.voxel_size_mm[a]);
    let inset = 0.12;
    let block_lo = [inset, inset];
    let block_hi = [extent[0] - inset, extent[1] - inset];
    let edge_mm = spec.voxel_size_mm.iter().copied().fold(0.0, f64::max);
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed ^ 0x726f_636b);

    // the vein: vertical, facing the skull's left side (specimen +y turned into the world and
    // made horizontal), its inner face VEIN_OVERLAP_MM inside the skull's furthest point
    let lateral = world_from_specimen.apply_vector(Vector3::y());
    let vein_normal = Vector3::new(lateral.x, lateral.y, 0.0).normalize();
    let (lo, hi) = skull.bounds();
    let steps = 48;
    let mut reach = f64::NEG_INFINITY;
    let mut at = Point3::origin();
    for a in 0..=steps {
        for b in 0..=steps {
            for c in 0..=steps {
                let t = [a, b, c].map(|x| f64::from(x) / f64::from(steps));
                let q = Point3::new(
                    lo.x + t[0] * (hi.x - lo.x),
                    lo.y + t[1] * (hi.y - lo.y),
                    lo.z + t[2] * (hi.z - lo.z),
                );
                if skull.sdf(q) < 0.0 {
                    let w = world_from_specimen.apply_point(q);
                    let h = vein_normal.dot(&w.coords);
                    if h > reach {
                        reach = h;
                        at = w;
                    }
                }
            }
        }
    }
    let mid = reach - VEIN_OVERLAP_MM + 0.5 * VEIN_THICKNESS_MM;
    let vein_point = at + vein_normal * (mid - vein_normal.dot(&at.coords));

    // texture: three waves of 0.8–2.5 mm wavelength
    let texture = [0, 1, 2].map(|_| {
        let dir = Vector3::new(
            rng.sample::<f64, _>(StandardNormal),
            rng.sample::<f64, _>(StandardNormal),
            rng.sample::<f64, _>(StandardNormal),
        )
        .try_normalize(1e-9)
        .unwrap_or_else(Vector3::x);
        let wavelength = rng.random_range(0.8..2.5);
        (
            dir * (std::f64::consts::TAU / wavelength),
            rng.random_range(0.0..std::f64::consts::TAU),
        )
    });

    // grains and pores: in the rock, clear of the bone by 3 voxels and of the vein by 2
    let clear_bone = 3.0 * edge_mm;
    let clear_vein = 2.0 * edge_mm;
    let mut grains: Vec<(Point3<f64>, f64, f64)> = Vec::new();
    let (mut n_grains, mut n_pores) = (0, 0);
    let mut tries = 0;
    while (n_grains < 220 || n_pores < 40) && tries < 40_000 {
        tries += 1;
        let pore = n_grains >= 220;
        let r: f64 = if pore {
            rng.random_range(0.03..0.07)
        } else {
            rng.random_range(0.025..0.075)
        };
        let c = Point3::new(
            rng.random_range(0.0..extent[0]),
            rng.random_range(0.0..extent[1]),
            rng.random_range(0.0..extent[2]),
        );
        let in_block =
            super::block_sd(c, block_lo, block_hi, BLOCK_CORNER_MM) < -(r + 2.0 * edge_mm);
        let off_bone = skull.sdf(specimen_from_world.apply_point(c)) > r + clear_bone;
        let off_vein =
            (vein_normal.dot(&(c - vein_point))).abs() > 0.5 * VEIN_THICKNESS_MM + r + clear_vein;
        let off_others = grains
            .iter()
            .all(|(g, rg, _)| (g - c).norm() > r + rg + edge_mm);
        if in_block && off_bone && off_vein && off_others {
            let density = if pore {
                n_pores += 1;
                PORE
            } else {
                n_grains += 1;
                rng.random_range(GRAIN_MIN..GRAIN_MAX)
            };
            grains.push((c, r, density));
        }
    }

    let scene = RockScene {
        skull_box: skull.bounds(),
        skull,
        specimen_from_world,
        block_lo,
        block_hi,
        grains,
        texture,
        vein_point,
        vein_normal,
        edge_mm,
    };
    let [nx, ny, nz] = spec.dims;
    let [sx, sy, sz] = spec.voxel_size_mm;
    let mut data = vec![0u16; nx * ny * nz];
    let mut truth = vec![0u8; nx * ny * nz];
    data.par_chunks_mut(nx * ny)
        .zip(truth.par_chunks_mut(nx * ny))
        .enumerate()
        .for_each(|(k, (slice, tslice))| {
            let mut rng = super::rng_stream(spec.seed ^ 0x726f_636b, 16 + k as u64);
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
                    let q = scene.specimen_from_world.apply_point(w);
                    tslice[i + nx * j] = u8::from(scene.skull.sdf(q) < 0.0);
                }
            }
        });
    let volume = Volume::from_vec(spec.dims, Affine3::from_spacing(spec.voxel_size_mm), data)
        .map_err(|source| SynthError::Volume {
            id: spec.id.clone(),
            source,
        })?;
    Ok(RockSpecimen {
        id: spec.id.clone(),
        volume,
        truth,
        vein_point: WorldPoint(scene.vein_point),
        vein_normal: scene.vein_normal,
        grains: n_grains,
        pores: n_pores,
    })
}
