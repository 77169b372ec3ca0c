//! Downsampled copies of a volume for quick previews and for skipping empty space.
//!
//! A [`Pyramid`] level of factor `f` holds the maximum and the minimum of each `f`×`f`×`f`
//! block of voxels (stored values, as `f32`, which is exact for the 8- and 16-bit types), as
//! volumes placed in the same world: a level voxel sits at the centre of its block, so the
//! level's box of cells is the source's (blocks at the far faces may be partial).
//!
//! Uses:
//! - the 3D view's coarse pass renders the 4× level ([`Pyramid::preview`]), 1/64 of the
//!   voxels. It is the block maximum (the minimum under a negative rescale slope, which maps
//!   the smallest stored value to the largest), so a bright structure thinner than a block
//!   shows in the preview instead of vanishing: a projection keeps every peak, an iso-surface
//!   looks up to a block thicker until the full pass replaces it;
//! - the surface renderer's empty-space skipping ([`super::raycast::Bricks::from_pyramid`])
//!   reads its 8³ bricks' ranges off the 4× level instead of passing over the whole volume.
//!
//! Build once per volume (one parallel pass over the voxels), in the background.

use super::RenderError;
use crate::geometry::Affine3;
use crate::volume::{Volume, Voxel};
use nalgebra::{Matrix3, Vector3};
use rayon::prelude::*;

/// One level of a [`Pyramid`].
#[derive(Debug)]
pub struct Level {
    /// Source voxels per level voxel along each axis.
    pub factor: usize,
    /// Block maxima and minima of the stored values, with the source's rescale.
    pub max: Volume,
    pub min: Volume,
}

/// Block-maximum and block-minimum copies of a volume at a few downsampling factors.
#[derive(Debug)]
pub struct Pyramid {
    levels: Vec<Level>,
    /// The rescale slope is negative: the largest rescaled values are the smallest stored.
    negative_slope: bool,
}

impl Pyramid {
    /// The factor of the preview level built by [`Pyramid::new`].
    pub const PREVIEW_FACTOR: usize = 4;

    /// The 4× level: what the coarse pass and the bricks need (1/32 of the source's voxel
    /// bytes for a 16-bit scan).
    pub fn new(volume: &Volume) -> Result<Self, RenderError> {
        Self::with_factors(volume, &[Self::PREVIEW_FACTOR])
    }

    /// Levels at the given factors (each at least 2), each built from the source.
    pub fn with_factors(volume: &Volume, factors: &[usize]) -> Result<Self, RenderError> {
        let mut levels = Vec::new();
        for &f in factors {
            if f < 2 {
                return Err(RenderError::NotPositive {
                    name: "pyramid factor above 1",
                    value: f as f64,
                });
            }
            levels.push(build_level(volume, f));
        }
        levels.sort_by_key(|l| l.factor);
        Ok(Self {
            levels,
            negative_slope: volume.rescale().is_some_and(|r| r.slope < 0.0),
        })
    }

    /// The level of factor `f`, if built.
    #[must_use]
    pub fn level(&self, factor: usize) -> Option<&Level> {
        self.levels.iter().find(|l| l.factor == factor)
    }

    #[must_use]
    pub fn levels(&self) -> &[Level] {
        &self.levels
    }

    /// The volume to render a coarse pass from: the finest level of factor at least
    /// [`Self::PREVIEW_FACTOR`] (else the coarsest built), as block maxima of the rescaled
    /// values.
    #[must_use]
    pub fn preview(&self) -> Option<&Volume> {
        let level = self
            .levels
            .iter()
            .find(|l| l.factor >= Self::PREVIEW_FACTOR)
            .or(self.levels.last())?;
        Some(if self.negative_slope {
            &level.min
        } else {
            &level.max
        })
    }
}

/// `world_from_level = world_from_voxel ∘ (v ↦ f·v + (f − 1)/2)`.
fn level_affine(volume: &Volume, f: usize) -> Affine3 {
    let f64f = f as f64;
    let scale = Affine3::from_linear_translation(
        &Matrix3::from_diagonal_element(f64f),
        &Vector3::repeat((f64f - 1.0) / 2.0),
    );
    volume.world_from_voxel().compose(&scale)
}

pub(crate) fn build_level(volume: &Volume, f: usize) -> Level {
    let dims = volume.dims();
    let (max, min, out_dims) = crate::with_voxels!(volume.voxels(), |s| block_min_max(s, dims, f));
    let affine = level_affine(volume, f);
    let wrap = |data: Vec<f32>| {
        let mut v = Volume::from_vec(out_dims, affine, data)
            .expect("level dims are the source's divided and rounded up");
        v.set_rescale(volume.rescale());
        v
    };
    Level {
        factor: f,
        max: wrap(max),
        min: wrap(min),
    }
}

/// Block maxima and minima (NaN ignored; an all-NaN block gives NaN), in parallel over
/// output slices. For each output row the `f`×`f` source rows are first reduced element by
/// element in the stored type (vectorised), then each row's blocks of `f`.
fn block_min_max<T: Voxel>(
    data: &[T],
    dims: [usize; 3],
    f: usize,
) -> (Vec<f32>, Vec<f32>, [usize; 3]) {
    let out = dims.map(|n| n.div_ceil(f));
    let [nx, ny, nz] = dims;
    let per = out[0] * out[1];
    let mut max = vec![f32::NAN; per * out[2]];
    let mut min = vec![f32::NAN; per * out[2]];
    max.par_chunks_mut(per)
        .zip(min.par_chunks_mut(per))
        .enumerate()
        .for_each(|(k, (mx, mn))| {
            let mut hi = vec![T::default(); nx];
            let mut lo = vec![T::default(); nx];
            for j in 0..out[1] {
                let mut first = true;
                for z in k * f..((k + 1) * f).min(nz) {
                    for y in j * f..((j + 1) * f).min(ny) {
                        let row = &data[nx * (y + ny * z)..][..nx];
                        if first {
                            hi.copy_from_slice(row);
                            lo.copy_from_slice(row);
                            first = false;
                        } else {
                            fold_rows(&mut hi, &mut lo, row);
                        }
                    }
                }
                let o = j * out[0];
                for (i, (h, l)) in hi.chunks(f).zip(lo.chunks(f)).enumerate() {
                    let (mut a, mut b) = (h[0], l[0]);
                    for (&x, &y) in h.iter().zip(l).skip(1) {
                        (a, b) = (larger(a, x), smaller(b, y));
                    }
                    // a block that is NaN throughout stays NaN
                    mx[o + i] = a.to_f32();
                    mn[o + i] = b.to_f32();
                }
            }
        });
    (max, min, out)
}

/// The larger of two values, a number over NaN (`a != a` only for NaN, so integers compile to
/// a plain maximum).
#[inline]
#[allow(
    clippy::eq_op,
    reason = "x != x is the NaN test, and vanishes for integers"
)]
fn larger<T: Voxel>(a: T, b: T) -> T {
    if b > a || a != a { b } else { a }
}

#[inline]
#[allow(
    clippy::eq_op,
    reason = "x != x is the NaN test, and vanishes for integers"
)]
fn smaller<T: Voxel>(a: T, b: T) -> T {
    if b < a || a != a { b } else { a }
}

/// `hi = max(hi, row)`, `lo = min(lo, row)` element by element.
fn fold_rows<T: Voxel>(hi: &mut [T], lo: &mut [T], row: &[T]) {
    for ((h, l), &v) in hi.iter_mut().zip(lo.iter_mut()).zip(row) {
        *h = larger(*h, v);
        *l = smaller(*l, v);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::VoxelIndex;
    use crate::volume::Rescale;
    use rand::{Rng, SeedableRng};

    #[test]
    #[allow(
        clippy::float_cmp,
        reason = "block extremes are voxel values, copied exactly"
    )]
    fn levels_hold_block_extremes_in_the_same_world() {
        let dims = [9, 8, 7];
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let data: Vec<u16> = (0..9 * 8 * 7).map(|_| rng.random()).collect();
        let world = Affine3::from_spacing([0.1, 0.2, 0.3]);
        let v = Volume::from_vec(dims, world, data).unwrap();
        let p = Pyramid::with_factors(&v, &[2, 4]).unwrap();
        for level in p.levels() {
            let f = level.factor;
            assert_eq!(level.max.dims(), dims.map(|n| n.div_ceil(f)));
            // the box of cells starts where the source's does
            let c0 = level
                .max
                .voxel_to_world(crate::geometry::VoxelPoint::new(-0.5, -0.5, -0.5));
            assert!((c0.0.coords - Vector3::new(-0.05, -0.1, -0.15)).norm() < 1e-12);
            for (k, j, i) in [(0, 0, 0), (1, 2, 1), (3, 3, 4)] {
                let Some(got) = level.max.value(VoxelIndex::new(i, j, k)) else {
                    continue;
                };
                let mut want = f64::NEG_INFINITY;
                let mut low = f64::INFINITY;
                for z in k * f..((k + 1) * f).min(dims[2]) {
                    for y in j * f..((j + 1) * f).min(dims[1]) {
                        for x in i * f..((i + 1) * f).min(dims[0]) {
                            let s = v.value(VoxelIndex::new(x, y, z)).unwrap();
                            want = want.max(s);
                            low = low.min(s);
                        }
                    }
                }
                assert_eq!(got, want, "factor {f} block ({i}, {j}, {k})");
                assert_eq!(level.min.value(VoxelIndex::new(i, j, k)).unwrap(), low);
            }
        }
        assert!(Pyramid::with_factors(&v, &[1]).is_err());
    }

    #[test]
    fn preview_follows_the_sign_of_the_rescale() {
        let data: Vec<i16> = (0..64).map(|n| n as i16).collect();
        let mut v = Volume::from_vec([4, 4, 4], Affine3::identity(), data).unwrap();
        let p = Pyramid::new(&v).unwrap();
        assert_eq!(
            p.preview().unwrap().value(VoxelIndex::new(0, 0, 0)),
            Some(63.0)
        );
        v.set_rescale(Rescale::new(-1.0, 0.0));
        let p = Pyramid::new(&v).unwrap();
        // the largest rescaled value is -0: the minimum stored
        assert_eq!(
            p.preview().unwrap().value(VoxelIndex::new(0, 0, 0)),
            Some(0.0)
        );
        // NaN-only blocks stay NaN; other NaNs are ignored
        let mut f = vec![f32::NAN; 8];
        f[3] = 2.0;
        let v = Volume::from_vec([2, 2, 2], Affine3::identity(), f).unwrap();
        let p = Pyramid::with_factors(&v, &[2]).unwrap();
        assert_eq!(
            p.level(2).unwrap().max.value(VoxelIndex::new(0, 0, 0)),
            Some(2.0)
        );
    }
}
