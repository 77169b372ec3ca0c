//! Shared by the benchmarks: the synthetic volume they measure on when no kit volume is used.

use rayon::prelude::*;
use sutura_core::geometry::Affine3;
use sutura_core::volume::{Volume, VoxelBuffer, Voxels};

/// An n³ u16 volume: an ellipsoid with a dense shell in a lighter matrix, with noise.
pub fn synth(n: usize, spacing_mm: f64) -> Volume {
    let mut buf = VoxelBuffer::<u16>::zeroed(n * n * n).expect("memory for the bench volume");
    let c = (n as f64 - 1.0) / 2.0;
    let (ra, rb, rc) = (0.42 * n as f64, 0.33 * n as f64, 0.27 * n as f64);
    buf.as_mut_slice()
        .par_chunks_mut(n * n)
        .enumerate()
        .for_each(|(k, plane)| {
            let z = (k as f64 - c) / rc;
            let mut h: u32 = (k as u32).wrapping_mul(0x9E37_79B9) | 1;
            for (j, row) in plane.chunks_mut(n).enumerate() {
                let y = (j as f64 - c) / rb;
                let yz = y * y + z * z;
                for (i, v) in row.iter_mut().enumerate() {
                    let x = (i as f64 - c) / ra;
                    let r2 = x * x + yz;
                    h ^= h << 13;
                    h ^= h >> 17;
                    h ^= h << 5;
                    let noise = (h & 1023) as u16;
                    let base = if r2 < 0.8 {
                        12_000
                    } else if r2 < 1.0 {
                        30_000
                    } else {
                        1_000
                    };
                    *v = base + noise;
                }
            }
        });
    Volume::new(
        [n, n, n],
        Affine3::from_spacing([spacing_mm; 3]),
        Voxels::U16(buf),
        None,
    )
    .expect("bench volume")
}
