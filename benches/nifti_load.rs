//! `NIfTI` load speed: writes a synthetic u16 scan (`SUTURA_BENCH_MB`, default 512 MiB) as `.nii`
//! and `.nii.gz`, then times `nifti::open` on each (best of 3) and, when `SUTURA_PYTHON` is set,
//! nibabel's `np.asanyarray(nib.load(p).dataobj)` on the same files for comparison.
//!
//! Targets (from the task brief): `.nii` at ≥ 5× nibabel, `.nii.gz` at ≥ 3× nibabel.
//! Run: `cargo bench --bench nifti_load` (release build).

use std::path::Path;
use std::time::Instant;
use sutura_core::geometry::Affine3;
use sutura_core::io::{OpenOptions, Progress, nifti};
use sutura_core::volume::Volume;

fn best_of<F: FnMut()>(n: usize, mut f: F) -> f64 {
    (0..n)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

fn nibabel_secs(python: &str, path: &Path) -> Option<f64> {
    let code = "import sys, time, numpy as np, nibabel as nib\n\
                best = 1e9\n\
                for _ in range(2):\n    t = time.perf_counter(); a = np.asanyarray(nib.load(sys.argv[1]).dataobj); best = min(best, time.perf_counter() - t)\n\
                print(best)";
    let out = std::process::Command::new(python)
        .args(["-c", code, path.to_str()?])
        .output()
        .ok()?;
    String::from_utf8_lossy(&out.stdout).trim().parse().ok()
}

fn main() {
    let mb: usize = std::env::var("SUTURA_BENCH_MB")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(512);
    let nx = 1024usize;
    let ny = 1024usize;
    let nz = (mb << 20) / (nx * ny * 2);
    let n = nx * ny * nz;
    // a smooth-ish field with noise, compressible like a CT scan
    let data: Vec<u16> = (0..n)
        .map(|i| {
            ((i % nx) as u16 / 4)
                .wrapping_add(((i / nx) % ny) as u16 / 8)
                .wrapping_add((i as u32).wrapping_mul(2_654_435_761) as u16 >> 11)
        })
        .collect();
    let v = Volume::from_vec(
        [nx, ny, nz],
        Affine3::from_spacing([0.02, 0.02, 0.02]),
        data,
    )
    .unwrap();
    let dir = tempfile::tempdir().unwrap();
    let python = std::env::var("SUTURA_PYTHON").ok();
    for name in ["bench.nii", "bench.nii.gz"] {
        let p = dir.path().join(name);
        nifti::write(&v, &p).unwrap();
        let secs = best_of(3, || {
            let r = nifti::open(&p, &OpenOptions::default(), &Progress::none()).unwrap();
            assert_eq!(r.len(), n);
        });
        let gib = (n * 2) as f64 / f64::from(1 << 30);
        print!(
            "{name:<14} {gib:.2} GiB: sutura {secs:.3} s ({:.2} GiB/s)",
            gib / secs
        );
        if let Some(py) = &python
            && let Some(nb) = nibabel_secs(py, &p)
        {
            print!(", nibabel {nb:.3} s, speed-up {:.1}x", nb / secs);
        }
        println!();
    }
}
