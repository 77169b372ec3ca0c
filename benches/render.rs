//! Rendering throughput on synthetic scans (run: `cargo bench --bench render`).
//!
//! Builds a 1024³ u16 volume (an ellipsoid with a shell and noise; `SUTURA_BENCH_N` changes the
//! side) and a 512³ one, then times oblique and axis slices, window/level, a thick slab, the
//! maximum-intensity projection and the shaded surface, coarse and full. Prints the median of
//! several runs in milliseconds. Targets (from the project brief): 1024² oblique slice of
//! 1024³ ≤ 30 ms, 512² MIP of 512³ ≤ 150 ms, on 2 cores.

use nalgebra::Vector3;
use rayon::prelude::*;
use std::time::Instant;
use sutura::geometry::{Affine3, Plane};
use sutura::render::raycast::{Bricks, Camera, MipOptions, Quality, SurfaceOptions, mip, surface};
use sutura::render::slice::{
    AxisPlane, Interpolation, Slab, SlabMode, SliceGeometry, render_slice,
};
use sutura::render::window::{ColourMap, WindowLevel};
use sutura::volume::{Volume, VoxelBuffer, Voxels};

fn synth(n: usize, spacing_mm: f64) -> Volume {
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
                    // xorshift noise
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

fn time<T>(label: &str, runs: usize, mut f: impl FnMut() -> T) -> T {
    let mut ms = Vec::with_capacity(runs);
    let mut out = None;
    for _ in 0..runs {
        let t = Instant::now();
        out = Some(f());
        ms.push(t.elapsed().as_secs_f64() * 1e3);
    }
    ms.sort_by(f64::total_cmp);
    println!(
        "{label:<48} median {:8.1} ms   (min {:.1}, max {:.1}, {runs} runs)",
        ms[runs / 2],
        ms[0],
        ms[runs - 1]
    );
    out.expect("at least one run")
}

fn main() {
    let n: usize = std::env::var("SUTURA_BENCH_N")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1024);
    println!("rayon threads: {}", rayon::current_num_threads());
    let t = Instant::now();
    let big = synth(n, 0.01);
    println!(
        "synthesised {n}³ u16 in {:.0} ms",
        t.elapsed().as_secs_f64() * 1e3
    );

    let plane = Plane::from_normal(
        big.centre_world(),
        Vector3::new(0.3, 0.4, 0.87),
        Vector3::y(),
    )
    .expect("plane");
    let g = SliceGeometry::centred(&plane, n, n, 0.01).expect("geometry");
    let img = time(&format!("oblique slice {n}² trilinear"), 7, || {
        render_slice(&big, &g, Interpolation::Trilinear, None).expect("slice")
    });
    time(&format!("oblique slice {n}² nearest"), 7, || {
        render_slice(&big, &g, Interpolation::Nearest, None).expect("slice")
    });
    let wl = time("window from 1–99 % percentiles of the slice", 5, || {
        WindowLevel::from_image_percentiles(&img, 1.0, 99.0).expect("window")
    });
    time("window/level + viridis to RGBA", 5, || {
        wl.colourize(&img, ColourMap::Viridis)
    });
    let ag = SliceGeometry::axis(
        &big,
        AxisPlane {
            axis: 2,
            index: n / 2,
        },
        None,
    )
    .expect("axis");
    time(
        &format!("axis slice k (direct copy) {n}² + window/level"),
        7,
        || {
            let s = render_slice(&big, &ag, Interpolation::Trilinear, None).expect("axis slice");
            wl.apply(&s)
        },
    );
    let ag0 = SliceGeometry::axis(
        &big,
        AxisPlane {
            axis: 0,
            index: n / 2,
        },
        None,
    )
    .expect("axis");
    time(
        &format!("axis slice i (direct copy, strided) {n}²"),
        7,
        || render_slice(&big, &ag0, Interpolation::Trilinear, None).expect("axis slice"),
    );
    let slab = Slab {
        thickness_mm: 0.1,
        mode: SlabMode::Max,
    };
    time(
        &format!("oblique slab {n}², 0.1 mm = 10 voxels (21 samples), max"),
        3,
        || render_slice(&big, &g, Interpolation::Trilinear, Some(slab)).expect("slab"),
    );
    drop(big);

    let m = n / 2;
    let small = synth(m, 0.02);
    let dir = Vector3::new(0.3, -0.5, 0.81);
    let cam = Camera::fit(&small, dir, Vector3::z(), 512, 512).expect("camera");
    time(&format!("MIP 512² of {m}³, full"), 5, || {
        mip(&small, &cam, MipOptions::default()).expect("mip")
    });
    time(&format!("MIP 512² of {m}³, coarse"), 5, || {
        mip(
            &small,
            &cam,
            MipOptions {
                quality: Quality::coarse(),
            },
        )
        .expect("mip")
    });
    let cam_x =
        Camera::fit(&small, Vector3::new(0.9, 0.3, 0.2), Vector3::z(), 512, 512).expect("camera");
    time(
        &format!("MIP 512² of {m}³, full, view mostly along i"),
        5,
        || mip(&small, &cam_x, MipOptions::default()).expect("mip"),
    );
    let bricks = time(&format!("bricks (8³ min/max) of {m}³"), 3, || {
        Bricks::new(&small)
    });
    let opts = SurfaceOptions::new(20_000.0);
    time(
        &format!("surface 512² of {m}³, coarse (¼ res, 2-voxel steps)"),
        5,
        || {
            surface(
                &small,
                &cam,
                &SurfaceOptions {
                    quality: Quality::coarse(),
                    ..opts
                },
                Some(&bricks),
            )
            .expect("surface")
        },
    );
    time(
        &format!("surface 512² of {m}³, full (½-voxel steps)"),
        5,
        || surface(&small, &cam, &opts, Some(&bricks)).expect("surface"),
    );
    time(
        &format!("surface 512² of {m}³, full, no bricks"),
        3,
        || surface(&small, &cam, &opts, None).expect("surface"),
    );
}
