//! Derived volumes: a crop to a box of voxels, and block-mean downsampling.
//!
//! Both keep the voxel type and the rescale, and adjust `world_from_voxel` so that every kept
//! voxel stays where it was in the world: a crop shifts the origin to the box's first voxel; a
//! downsample by `f` places each new voxel at the centre of the `f³` block it averages.

use super::{IntoVoxels, Volume, Voxel, VoxelBuffer, Voxels};
use crate::geometry::{Affine3, VoxelPoint};
use nalgebra::Matrix3;
use rayon::prelude::*;
use std::ops::Range;

/// Why a derived volume cannot be made.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum ResizeError {
    #[error("crop {axis} range {start}..{end} is empty or outside 0..{extent}")]
    BadCrop {
        axis: char,
        start: usize,
        end: usize,
        extent: usize,
    },
    #[error("downsample factor must be at least 1")]
    BadFactor,
}

impl Volume {
    /// The voxels in `ranges` (half-open voxel index ranges for i, j, k).
    #[allow(
        clippy::needless_pass_by_value,
        reason = "callers write the ranges inline (`crop([1..4, 2..5, 1..3])`); a reference would only add `&`"
    )]
    pub fn crop(&self, ranges: [Range<usize>; 3]) -> Result<Self, ResizeError> {
        let d = self.dims();
        for (a, r) in ranges.iter().enumerate() {
            if r.start >= r.end || r.end > d[a] {
                return Err(ResizeError::BadCrop {
                    axis: ['i', 'j', 'k'][a],
                    start: r.start,
                    end: r.end,
                    extent: d[a],
                });
            }
        }
        let nd = [ranges[0].len(), ranges[1].len(), ranges[2].len()];
        let voxels = match self.voxels() {
            Voxels::U8(b) => crop_typed(b.as_slice(), d, &ranges).into_voxels(),
            Voxels::I16(b) => crop_typed(b.as_slice(), d, &ranges).into_voxels(),
            Voxels::U16(b) => crop_typed(b.as_slice(), d, &ranges).into_voxels(),
            Voxels::F32(b) => crop_typed(b.as_slice(), d, &ranges).into_voxels(),
        };
        let origin = self.voxel_to_world(VoxelPoint::new(
            ranges[0].start as f64,
            ranges[1].start as f64,
            ranges[2].start as f64,
        ));
        let wfv =
            Affine3::from_linear_translation(&self.world_from_voxel().linear(), &origin.0.coords);
        let mut out = Self::new(nd, wfv, voxels, self.rescale()).expect("crop dims are consistent");
        out.notes.clone_from(&self.notes);
        Ok(out)
    }

    /// Block-mean downsampling by `factor` on every axis; a partial block at the far edge is
    /// averaged over the voxels it has. Integer types round to nearest.
    pub fn downsample(&self, factor: usize) -> Result<Self, ResizeError> {
        if factor == 0 {
            return Err(ResizeError::BadFactor);
        }
        let d = self.dims();
        let nd = d.map(|n| n.div_ceil(factor));
        let voxels = match self.voxels() {
            Voxels::U8(b) => down_typed(b.as_slice(), d, factor, |x| x.round() as u8).into_voxels(),
            Voxels::I16(b) => {
                down_typed(b.as_slice(), d, factor, |x| x.round() as i16).into_voxels()
            }
            Voxels::U16(b) => {
                down_typed(b.as_slice(), d, factor, |x| x.round() as u16).into_voxels()
            }
            Voxels::F32(b) => down_typed(b.as_slice(), d, factor, |x| x as f32).into_voxels(),
        };
        let f = factor as f64;
        let lin = self.world_from_voxel().linear() * Matrix3::from_diagonal_element(f);
        let half = (f - 1.0) / 2.0;
        let origin = self.voxel_to_world(VoxelPoint::new(half, half, half));
        let wfv = Affine3::from_linear_translation(&lin, &origin.0.coords);
        let mut out =
            Self::new(nd, wfv, voxels, self.rescale()).expect("downsample dims are consistent");
        out.notes.clone_from(&self.notes);
        Ok(out)
    }
}

fn crop_typed<T: Voxel>(src: &[T], d: [usize; 3], r: &[Range<usize>; 3]) -> VoxelBuffer<T> {
    let (nx, ny) = (r[0].len(), r[1].len());
    let mut out = vec![T::default(); nx * ny * r[2].len()];
    out.par_chunks_mut(nx * ny)
        .enumerate()
        .for_each(|(kk, plane)| {
            let k = r[2].start + kk;
            for (jj, row) in plane.chunks_mut(nx).enumerate() {
                let j = r[1].start + jj;
                let s = r[0].start + d[0] * (j + d[1] * k);
                row.copy_from_slice(&src[s..s + nx]);
            }
        });
    VoxelBuffer::from_vec(out)
}

fn down_typed<T: Voxel>(
    src: &[T],
    d: [usize; 3],
    f: usize,
    from_f64: impl Fn(f64) -> T + Sync,
) -> VoxelBuffer<T> {
    let nd = d.map(|n| n.div_ceil(f));
    let mut out = vec![T::default(); nd[0] * nd[1] * nd[2]];
    out.par_chunks_mut(nd[0] * nd[1])
        .enumerate()
        .for_each(|(k2, plane)| {
            let mut acc = vec![0.0f64; nd[0]];
            let mut cnt = vec![0u32; nd[0]];
            for (j2, row) in plane.chunks_mut(nd[0]).enumerate() {
                acc.fill(0.0);
                cnt.fill(0);
                for k in k2 * f..((k2 + 1) * f).min(d[2]) {
                    for j in j2 * f..((j2 + 1) * f).min(d[1]) {
                        let line = &src[d[0] * (j + d[1] * k)..][..d[0]];
                        for (i, &v) in line.iter().enumerate() {
                            let x = v.to_f64();
                            if !x.is_nan() {
                                acc[i / f] += x;
                                cnt[i / f] += 1;
                            }
                        }
                    }
                }
                for ((o, &a), &c) in row.iter_mut().zip(&acc).zip(&cnt) {
                    *o = from_f64(if c == 0 { f64::NAN } else { a / f64::from(c) });
                }
            }
        });
    VoxelBuffer::from_vec(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::VoxelIndex;
    use approx::assert_relative_eq;

    fn ramp() -> Volume {
        let data: Vec<u16> = (0..(6 * 5 * 4)).map(|v| v as u16).collect();
        Volume::from_vec(
            [6, 5, 4],
            Affine3::from_rows([
                [0.02, 0.0, 0.0, 1.0],
                [0.0, 0.02, 0.0, 2.0],
                [0.0, 0.0, 0.05, 3.0],
                [0.0, 0.0, 0.0, 1.0],
            ])
            .unwrap(),
            data,
        )
        .unwrap()
    }

    #[test]
    fn crop_keeps_voxels_in_place() {
        let v = ramp();
        let c = v.crop([1..4, 2..5, 1..3]).unwrap();
        assert_eq!(c.dims(), [3, 3, 2]);
        for (i, j, k) in [(0, 0, 0), (2, 2, 1), (1, 0, 1)] {
            let src = VoxelIndex::new(i + 1, j + 2, k + 1);
            assert_eq!(c.value(VoxelIndex::new(i, j, k)), v.value(src));
            let wc = c.voxel_to_world(VoxelIndex::new(i, j, k).centre());
            let wv = v.voxel_to_world(src.centre());
            assert_relative_eq!(wc.0, wv.0, epsilon = 1e-12);
        }
        assert!(v.crop([0..7, 0..5, 0..4]).is_err());
        assert!(v.crop([2..2, 0..5, 0..4]).is_err());
    }

    #[test]
    fn downsample_block_means() {
        let v = ramp();
        let d = v.downsample(2).unwrap();
        assert_eq!(d.dims(), [3, 3, 2]);
        // block (0,0,0): i 0..2, j 0..2, k 0..2 → mean of i + 6j + 30k
        let mean = (0..2)
            .flat_map(|k| {
                (0..2).flat_map(move |j| (0..2).map(move |i| f64::from(i + 6 * j + 30 * k)))
            })
            .sum::<f64>()
            / 8.0;
        assert_eq!(d.value(VoxelIndex::new(0, 0, 0)), Some(mean.round()));
        // partial block at the j edge (j = 4 only)
        let edge = (0..2)
            .flat_map(|k| (0..2).map(move |i| f64::from(i + 6 * 4 + 30 * k)))
            .sum::<f64>()
            / 4.0;
        assert_eq!(d.value(VoxelIndex::new(0, 2, 0)), Some(edge.round()));
        // new voxel (0,0,0) sits at the centre of old voxels 0 and 1
        let w = d.voxel_to_world(VoxelPoint::new(0.0, 0.0, 0.0));
        assert_relative_eq!(w.0.x, 1.01, epsilon = 1e-12);
        assert_relative_eq!(d.spacing_mm()[2], 0.1, epsilon = 1e-12);
        assert_eq!(v.downsample(0).unwrap_err(), ResizeError::BadFactor);
    }
}
