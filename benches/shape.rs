//! Shape statistics benchmark: GPA of 10,000 specimens × 100 landmarks × 3D to tolerance 1e-10,
//! against the batched numpy implementation of the project's baseline kit measured in the same
//! run on the same data; then PCA of the tangent coordinates and a 1,000-resample bootstrap of
//! the Procrustes variance.
//!
//! Run: `cargo bench --bench shape` (set `SUTURA_PYTHON` to the reference venv's interpreter).
//! Target: Sutura's GPA at least 5× faster than numpy's.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use sutura_core::shape::disparity::{Divisor, bootstrap};
use sutura_core::shape::pca::pca;
use sutura_core::shape::tangent::tangent_coordinates;
use sutura_core::shape::{GpaOptions, Sample, gpa};

fn python() -> PathBuf {
    std::env::var_os("SUTURA_PYTHON").map_or_else(
        || PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(".venv/bin/python"),
        PathBuf::from,
    )
}

/// Reads a little-endian f64 C-order `.npy` file (format version 1 or 2).
fn read_npy(path: &Path) -> (Vec<usize>, Vec<f64>) {
    let bytes = std::fs::read(path).expect("read .npy");
    assert_eq!(&bytes[..6], b"\x93NUMPY", "not an .npy file");
    let (hlen, start) = if bytes[6] == 1 {
        (usize::from(u16::from_le_bytes([bytes[8], bytes[9]])), 10)
    } else {
        (
            u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
            12,
        )
    };
    let header = std::str::from_utf8(&bytes[start..start + hlen]).expect("ascii header");
    assert!(
        header.contains("'<f8'") && header.contains("'fortran_order': False"),
        "{header}"
    );
    let shape_txt = &header[header.find("'shape': (").expect("shape") + 10..];
    let shape: Vec<usize> = shape_txt[..shape_txt.find(')').expect("shape end")]
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect();
    let data = bytes[start + hlen..]
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes")))
        .collect();
    (shape, data)
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn main() {
    let (n, l, m) = (10_000usize, 100usize, 3usize);
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target");
    let npy = dir.join("shape_bench_10000x100x3.npy");
    let script = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/python/shape_gpa_numpy.py");
    println!(
        "shape bench: GPA of {n} specimens x {l} landmarks x {m}D, tol 1e-10, rayon threads {}",
        rayon::current_num_threads()
    );
    let out = Command::new(python())
        .arg(&script)
        .args([n.to_string(), l.to_string(), m.to_string()])
        .arg("--out")
        .arg(&npy)
        .output();
    let numpy: Option<serde_json::Value> = match out {
        Ok(o) if o.status.success() => Some(serde_json::from_slice(&o.stdout).expect("numpy json")),
        Ok(o) => {
            println!(
                "NUMPY BASELINE FAILED: {}",
                String::from_utf8_lossy(&o.stderr)
            );
            None
        }
        Err(e) => {
            println!("NUMPY BASELINE NOT RUN ({e}); set SUTURA_PYTHON");
            None
        }
    };
    let (shape, data) = read_npy(&npy);
    assert_eq!(shape, vec![n, l, m]);
    let sample = Sample::new(n, l, m, data).expect("sample");
    let opts = GpaOptions::default();
    let _warm = gpa(&sample, &opts).expect("gpa");
    let mut times = Vec::new();
    let mut g = None;
    for _ in 0..5 {
        let t0 = Instant::now();
        let r = gpa(&sample, &opts).expect("gpa");
        times.push(t0.elapsed().as_secs_f64());
        g = Some(r);
    }
    let g = g.expect("ran");
    let t_gpa = median(times);
    println!(
        "sutura gpa: {:.4} s median of 5 ({} iterations, converged {}, final change {:.2e})",
        t_gpa, g.iterations, g.converged, g.final_change
    );
    if let Some(np) = &numpy {
        let t_np = np["seconds"].as_f64().expect("seconds");
        let mean: Vec<Vec<f64>> = serde_json::from_value(np["mean"].clone()).expect("mean");
        let diff = (0..l)
            .flat_map(|j| (0..m).map(move |d| (j, d)))
            .map(|(j, d)| (g.mean[(j, d)] - mean[j][d]).abs())
            .fold(0.0, f64::max);
        println!(
            "numpy gpa_vectorized: {:.4} s median of 3 ({} iterations); max |mean diff| {:.1e}",
            t_np, np["iterations"], diff
        );
        println!("ratio numpy/sutura: {:.1}x (target >= 5x)", t_np / t_gpa);
    }
    let t0 = Instant::now();
    let tangent = tangent_coordinates(&g);
    let t_tan = t0.elapsed().as_secs_f64();
    let t0 = Instant::now();
    let p = pca(&tangent).expect("pca");
    let t_pca = t0.elapsed().as_secs_f64();
    println!(
        "tangent projection: {:.4} s; pca ({} x {}): {:.4} s, {} components, PC1 {:.1}% of variance",
        t_tan,
        tangent.nrows(),
        tangent.ncols(),
        t_pca,
        p.variances.len(),
        100.0 * p.proportions[0]
    );
    let all: Vec<usize> = (0..n).collect();
    let t0 = Instant::now();
    let ci = bootstrap(&tangent, &all, Divisor::NMinusOne, 1000, 0.95, 42).expect("bootstrap");
    let t_bs = t0.elapsed().as_secs_f64();
    println!(
        "bootstrap of Procrustes variance, 1000 resamples: {:.4} s; estimate {:.6e}, 95% [{:.6e}, {:.6e}]",
        t_bs, ci.estimate, ci.lower, ci.upper
    );
}
