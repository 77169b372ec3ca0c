//! The chunked store's speed (run: `cargo bench --bench store`), with zarr-python timed in the
//! same run when the reference interpreter has it.
//!
//! On an N³ u16 scan (`SUTURA_BENCH_N`, default 512; the figures use 1024), written as
//! `.nii` under `target/bench-store/`:
//! - the bound: reading and decoding the source slab by slab (what conversion cannot beat);
//! - conversion with each candidate compressor: time, ratio to the bound, stored size, and the
//!   time to decode every level-0 chunk back (the compressor is chosen on these figures);
//! - from opening the store to the first picture (a 1024² view of the whole scan);
//! - a full-resolution plane: cold (a new store, empty cache) and warm; scrolling through
//!   consecutive planes with prefetch (planes per second);
//! - zarr-python (`tests/python/zarr_bench.py`): writing the same array from memory with the
//!   same codec, and reading the same planes (across k at three depths, across i), for the
//!   ratios.
//!
//! Targets (issue 11): conversion within 1.3× of the bound and faster than zarr-python; first
//! picture < 1 s; full-resolution plane < 16 ms warm, < 150 ms cold; ≥ 30 planes/s scrolling;
//! a plane read ≥ 3× faster than zarr-python. Peak memory is measured on the command line
//! (`/usr/bin/time -v sutura convert ...`), see the README.

mod common;

use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::time::Instant;
use sutura_core::geometry::Plane;
use sutura_core::io::slices::open_slices;
use sutura_core::io::{OpenOptions, Progress};
use sutura_core::render::slice::{AxisPlane, Interpolation, SliceGeometry};
use sutura_core::render::source::{Detail, render_slice, slice_region};
use sutura_core::store::{Codec, ConvertOptions, Store, StoreOptions, convert};
use sutura_core::volume::VolumeSource;

fn secs(t: Instant) -> f64 {
    t.elapsed().as_secs_f64()
}

fn main() {
    let n: usize = std::env::var("SUTURA_BENCH_N")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(512);
    let dir = PathBuf::from("target/bench-store");
    std::fs::create_dir_all(&dir).expect("bench folder");
    let src = dir.join(format!("vol_{n}.nii"));
    if !src.exists() {
        let v = common::synth(n, 0.01);
        sutura_core::io::nifti::write(&v, &src).expect("write the bench scan");
    }
    let mib = (n * n * n * 2) as f64 / f64::from(1 << 20);
    println!(
        "scan {n}³ u16 ({mib:.0} MiB), {} threads",
        rayon::current_num_threads()
    );

    let bound = read_bound(&src, n);
    println!("read bound            {bound:7.2} s");

    let mut default_store = None;
    for codec in ["zstd/1", "zstd/3", "blosc-lz4/5", "gzip/6", "raw"] {
        let out = dir.join(format!("vol_{n}_{}.ome.zarr", codec.replace('/', "_")));
        let _ = std::fs::remove_dir_all(&out);
        let _ = std::fs::remove_dir_all(sutura_core::store::partial_path(&out));
        let mut r = open_slices(&src, &OpenOptions::default()).expect("open");
        let options = ConvertOptions {
            codec: Codec::parse(codec).expect("codec"),
            ..ConvertOptions::default()
        };
        let t = Instant::now();
        let rep = convert(r.as_mut(), &out, &options, &Progress::none()).expect("convert");
        let dt = secs(t);
        // decode every level-0 chunk back, in parallel, from a fresh store
        let store = Store::open(&out, &StoreOptions::default()).expect("open store");
        let t = Instant::now();
        let c = store.chunk_shape(0);
        let grid: Vec<[usize; 3]> = (0..n.div_ceil(c[2]))
            .flat_map(|k| {
                (0..n.div_ceil(c[1]))
                    .flat_map(move |j| (0..n.div_ceil(c[0])).map(move |i| [i, j, k]))
            })
            .collect();
        grid.par_iter().for_each(|&ci| {
            store.chunk(0, ci).expect("chunk");
        });
        let decode = secs(t);
        println!(
            "convert {codec:<12} {dt:7.2} s ({:.2}× the bound), {:7.1} MiB stored ({:.2}:1), decode level 0 {decode:6.2} s",
            dt / bound,
            rep.stored_bytes as f64 / f64::from(1 << 20),
            mib * f64::from(1 << 20) / rep.stored_bytes as f64
        );
        if codec == "zstd/1" {
            default_store = Some(out);
        }
    }
    let out = default_store.expect("the default codec ran");
    compressed_source(&src, &dir, n);
    views(&out, n);
    python(&src, &out, n);
}

/// The bound of a conversion: reading and decoding the source slab by slab, in seconds, with
/// the file in the page cache as the conversions that follow find it (it is read once first,
/// untimed).
fn read_bound(src: &Path, n: usize) -> f64 {
    let _ = std::io::copy(
        &mut std::fs::File::open(src).expect("the bench scan"),
        &mut std::io::sink(),
    );
    let t = Instant::now();
    let mut r = open_slices(src, &OpenOptions::default()).expect("open");
    let mut slab = vec![0u8; r.slice_bytes() * 64];
    let mut k = 0;
    while k < n {
        let m = 64.min(n - k);
        r.read_slices(k, &mut slab[..m * r.slice_bytes()], &Progress::none())
            .expect("read");
        k += m;
    }
    secs(t)
}

/// The same scan as `.nii.gz` (gzip level 1, made once): inflating it is most of the bound,
/// and the conversion's reading thread overlaps it with counting, averaging, compressing and
/// writing.
fn compressed_source(src: &Path, dir: &Path, n: usize) {
    let gz = dir.join(format!("vol_{n}.nii.gz"));
    if !gz.exists() {
        let tmp = dir.join(format!("vol_{n}.nii.gz.tmp"));
        let mut r = std::io::BufReader::new(std::fs::File::open(src).expect("the bench scan"));
        let w = std::io::BufWriter::new(std::fs::File::create(&tmp).expect("gz copy"));
        let mut e = flate2::write::GzEncoder::new(w, flate2::Compression::fast());
        std::io::copy(&mut r, &mut e).expect("gz copy");
        e.finish().expect("gz copy");
        std::fs::rename(&tmp, &gz).expect("gz copy");
    }
    let bound = read_bound(&gz, n);
    let out = dir.join(format!("vol_{n}_from_gz.ome.zarr"));
    let _ = std::fs::remove_dir_all(&out);
    let _ = std::fs::remove_dir_all(sutura_core::store::partial_path(&out));
    let mut r = open_slices(&gz, &OpenOptions::default()).expect("open");
    let t = Instant::now();
    convert(
        r.as_mut(),
        &out,
        &ConvertOptions::default(),
        &Progress::none(),
    )
    .expect("convert");
    let dt = secs(t);
    let _ = std::fs::remove_dir_all(&out);
    println!(
        "from .nii.gz (gzip/1)  read bound {bound:6.2} s, convert zstd/1 {dt:6.2} s ({:.2}× the bound)",
        dt / bound
    );
}

/// First picture, plane redraws cold and warm, scrolling.
fn views(out: &Path, n: usize) {
    let t = Instant::now();
    let store = Store::open(out, &StoreOptions::default()).expect("open");
    let l0 = store.level(0);
    let plane = Plane {
        origin: store.centre_world(),
        u: nalgebra::Vector3::x(),
        v: nalgebra::Vector3::y(),
    };
    let extent = l0.spacing_mm()[0] * n as f64;
    let view = SliceGeometry::centred(&plane, 1024, 1024, extent / 1024.0).expect("geometry");
    let img = render_slice(
        &store,
        &view,
        Interpolation::Trilinear,
        None,
        Detail::Screen,
    )
    .expect("render");
    println!(
        "open to first picture  {:7.1} ms (level {}, {}x{})",
        secs(t) * 1e3,
        store.level_for_pixel(view.pixel_mm),
        img.width,
        img.height
    );
    let side = n.min(1024);
    let plane_at = |k: usize| {
        let mut g = SliceGeometry::axis_grid(
            l0.dims,
            &l0.world_from_voxel,
            AxisPlane { axis: 2, index: k },
            None,
        )
        .expect("axis");
        g.width = side;
        g.height = side;
        g
    };
    // cold: a new store (empty cache)
    let mut cold = Vec::new();
    for k in [n / 3, n / 2, 2 * n / 3] {
        let s = Store::open(out, &StoreOptions::default()).expect("open");
        let t = Instant::now();
        render_slice(
            &s,
            &plane_at(k),
            Interpolation::Trilinear,
            None,
            Detail::Full,
        )
        .expect("render");
        cold.push(secs(t) * 1e3);
    }
    // warm: the same plane again
    let g = plane_at(n / 2);
    render_slice(&store, &g, Interpolation::Trilinear, None, Detail::Full).expect("render");
    let mut warm = Vec::new();
    for _ in 0..10 {
        let t = Instant::now();
        render_slice(&store, &g, Interpolation::Trilinear, None, Detail::Full).expect("render");
        warm.push(secs(t) * 1e3);
    }
    cold.sort_by(f64::total_cmp);
    warm.sort_by(f64::total_cmp);
    println!(
        "full-res plane {side}²   cold {:6.1} ms, warm {:6.1} ms (medians)",
        cold[cold.len() / 2],
        warm[warm.len() / 2]
    );
    // scrolling with prefetch of the next chunk layer
    let s = Store::open(out, &StoreOptions::default()).expect("open");
    let t = Instant::now();
    let count = 128.min(n);
    for k in 0..count {
        let g = plane_at(k);
        if let Some(next) = slice_region(&s, 0, &plane_at((k + 16).min(n - 1)), None) {
            s.prefetch(0, &next);
        }
        render_slice(&s, &g, Interpolation::Trilinear, None, Detail::Full).expect("render");
    }
    println!(
        "scrolling              {:7.1} planes/s",
        count as f64 / secs(t)
    );
}

/// zarr-python writing the same array with zstd level 1 and reading one plane.
fn python(src: &Path, out: &Path, n: usize) {
    let py = std::env::var_os("SUTURA_PYTHON")
        .map_or_else(|| PathBuf::from(".venv/bin/python"), PathBuf::from);
    if !py.exists() {
        println!(
            "(no reference interpreter at {}: no zarr-python ratios)",
            py.display()
        );
        return;
    }
    let res = std::process::Command::new(&py)
        .arg("tests/python/zarr_bench.py")
        .arg(src)
        .arg(out)
        .output();
    let Ok(o) = res else { return };
    if !o.status.success() {
        println!(
            "zarr-python bench failed: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        return;
    }
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap_or_default();
    // the same planes as zarr-python: across k at a third, half and two thirds of the depth
    // (a fresh store each, three rounds, median of nine), and across i at half the width
    let plane = |region: [std::ops::Range<usize>; 3]| {
        let store = Store::open(out, &StoreOptions::default()).expect("open");
        let t = Instant::now();
        let b = store.read_block(0, &region).expect("plane");
        let dt = secs(t);
        drop(b);
        dt
    };
    let median = |mut v: Vec<f64>| {
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    let ours = median(
        (0..3)
            .flat_map(|_| [n / 3, n / 2, 2 * n / 3])
            .map(|k| plane([0..n, 0..n, k..k + 1]))
            .collect(),
    );
    let ours_x = median(
        (0..3)
            .map(|_| plane([n / 2..n / 2 + 1, 0..n, 0..n]))
            .collect(),
    );
    let mut r = open_slices(src, &OpenOptions::default()).expect("open");
    let t = Instant::now();
    convert(
        r.as_mut(),
        &PathBuf::from(format!("{}.again", out.display())),
        &ConvertOptions::default(),
        &Progress::none(),
    )
    .expect("convert");
    let conv = secs(t);
    let _ = std::fs::remove_dir_all(format!("{}.again", out.display()));
    let num = |k: &str| v[k].as_f64().unwrap_or(f64::NAN);
    let (pw, pr, px) = (num("write_s"), num("plane_s"), num("plane_x_s"));
    println!(
        "zarr-python write {pw:.2} s vs convert {conv:.2} s ({:.2}× faster)",
        pw / conv
    );
    println!(
        "plane across k (median of n/3, n/2, 2n/3): zarr-python {:.1} ms vs {:.1} ms ({:.1}× faster)",
        pr * 1e3,
        ours * 1e3,
        pr / ours
    );
    println!(
        "plane across i (whole chunks decoded):     zarr-python {:.1} ms vs {:.1} ms ({:.1}× faster)",
        px * 1e3,
        ours_x * 1e3,
        px / ours_x
    );
}
