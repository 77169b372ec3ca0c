//! Virtual preparation and meshing on an n³ u16 scan (n = 1024 unless `SUTURA_BENCH_N` says
//! otherwise): region growing, a radius-3-voxel opening, the label volume's memory, a brush
//! stroke to the plane overlay, and mesh extraction against scikit-image's `marching_cubes` on
//! the same data in the same run (ratio printed; needs the Python venv with scikit-image).
//!
//! `cargo bench -p sutura-core --bench prep`. Wall times; the machine's load average is printed
//! with them. A core bench: it needs no GUI crate built for release.

#[path = "../../../benches/common/mod.rs"]
mod common;

use std::path::PathBuf;
use std::process::Command;
use std::time::Instant;

use sutura_core::geometry::WorldPoint;
use sutura_core::labels::brush::{BrushShape, Stroke, paint};
use sutura_core::labels::morph::{MorphOp, morph};
use sutura_core::labels::region::{Connectivity, GrowOptions, IntensityRange, grow};
use sutura_core::labels::{Combine, LabelVolume};
use sutura_core::mesh::IntensityField;
use sutura_core::mesh::march::extract;

fn python() -> PathBuf {
    std::env::var_os("SUTURA_PYTHON").map_or_else(
        || PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../.venv/bin/python"),
        PathBuf::from,
    )
}

fn load() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_default()
}

#[allow(clippy::too_many_lines)] // reason: one straight sequence of measurements
fn main() {
    let n: usize = std::env::var("SUTURA_BENCH_N")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1024);
    let spacing = 0.01;
    println!(
        "prep bench: {n}³ u16, rayon threads {}, load {}",
        rayon::current_num_threads(),
        load()
    );
    let t = Instant::now();
    let volume = common::synth(n, spacing);
    println!("generate: {:.2} s", t.elapsed().as_secs_f64());
    let total = (n * n * n) as f64;

    // region growing: the ellipsoid (shell and interior) from its centre
    let c = n / 2;
    let options = GrowOptions {
        range: IntensityRange::new(10_000.0, 65_535.0).unwrap(),
        connectivity: Connectivity::Faces6,
        max_distance_mm: None,
    };
    let t = Instant::now();
    let region = grow(&volume, [c, c, c], &options, None).unwrap();
    let grow_s = t.elapsed().as_secs_f64();
    println!(
        "grow (6-connected): {grow_s:.3} s for {} voxels ({:.1} % of the scan); target ≤ 1.5 s at 10 %",
        region.count(),
        100.0 * region.count() as f64 / total
    );

    // opening by a ball of radius 3 voxels
    let t = Instant::now();
    let opened = morph(&region, MorphOp::Open, 3.0 * spacing, [spacing; 3]).unwrap();
    let open_s = t.elapsed().as_secs_f64();
    println!(
        "opening r = 3 voxels: {open_s:.3} s ({} voxels kept); target ≤ 2 s",
        opened.count()
    );

    // the label volume: memory per voxel
    let mut labels = LabelVolume::new(volume.dims(), volume.spacing_mm());
    let value = labels.add_label("specimen").unwrap();
    let t = Instant::now();
    labels.apply(&region, value, Combine::Add, false).unwrap();
    println!(
        "label apply: {:.3} s; labels hold {:.3} bytes per voxel ({} of {} bricks allocated); \
         the selection mask 0.125 bytes per voxel",
        t.elapsed().as_secs_f64(),
        labels.bytes() as f64 / total,
        labels.allocated_bricks(),
        labels.brick_grid().iter().product::<usize>()
    );

    // a brush stroke on the middle k plane, then that plane's labels for the overlay
    let mid = c as f64 * spacing;
    let stroke = Stroke {
        points: (0..10)
            .map(|s| {
                WorldPoint::new(
                    mid * (0.5 + 0.1 * f64::from(s)),
                    mid * (0.8 + 0.03 * f64::from(s)),
                    mid,
                )
            })
            .collect(),
        radius_mm: 20.0 * spacing,
        shape: BrushShape::Disc { axis: 2 },
    };
    let mut worst = 0.0f64;
    for _ in 0..5 {
        let t = Instant::now();
        let edit = paint(
            &mut labels,
            volume.world_from_voxel(),
            &stroke,
            value,
            Combine::Subtract,
            true,
        )
        .unwrap();
        let overlay = labels.plane(2, c);
        let ms = t.elapsed().as_secs_f64() * 1e3;
        worst = worst.max(ms);
        std::hint::black_box(overlay);
        labels.undo(edit);
    }
    println!(
        "brush stroke (10 points, r = 20 voxels) + plane overlay read: worst {worst:.2} ms of 5; target < 16 ms"
    );

    // mesh extraction at the shell's outer iso-level
    let iso = 20_000.0;
    let field = IntensityField {
        volume: &volume,
        iso,
        outside: 1_000.0,
        within: None,
    };
    let t = Instant::now();
    let mesh = extract(&field, volume.world_from_voxel());
    let mesh_s = t.elapsed().as_secs_f64();
    println!(
        "mesh extraction: {mesh_s:.3} s, {} vertices, {} triangles",
        mesh.vertices.len(),
        mesh.triangles.len()
    );
    drop(mesh);

    if std::env::var_os("SUTURA_BENCH_NO_PYTHON").is_some() {
        return;
    }
    // scikit-image on the same voxels (as float32, which marching_cubes works in)
    let raw = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../target/prep_bench.raw");
    match volume.voxels() {
        sutura_core::volume::Voxels::U16(b) => {
            std::fs::write(&raw, bytemuck_bytes(b.as_slice())).expect("write bench volume");
        }
        _ => unreachable!(),
    }
    drop(volume);
    let script =
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../tests/python/prep_marching_bench.py");
    let out = Command::new(python())
        .arg(&script)
        .args([raw.to_str().unwrap(), &n.to_string(), &iso.to_string()])
        .output();
    let _ = std::fs::remove_file(&raw);
    match out {
        Ok(o) if o.status.success() => {
            let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("json");
            let sk = v["seconds"].as_f64().unwrap();
            println!(
                "scikit-image {} marching_cubes: {sk:.3} s ({} vertices); Sutura {:.1}x faster (target ≥ 5x); load {}",
                v["version"].as_str().unwrap_or("?"),
                v["vertices"],
                sk / mesh_s,
                load()
            );
        }
        Ok(o) => println!(
            "SCIKIT-IMAGE BASELINE FAILED: {}",
            String::from_utf8_lossy(&o.stderr)
        ),
        Err(e) => println!("SCIKIT-IMAGE BASELINE NOT RUN ({e}); set SUTURA_PYTHON"),
    }
}

fn bytemuck_bytes(s: &[u16]) -> Vec<u8> {
    s.iter().flat_map(|v| v.to_le_bytes()).collect()
}
