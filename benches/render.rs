//! Rendering speed, with the Python stack timed in the same run (run:
//! `cargo bench --bench render`).
//!
//! Volumes: `target/bench-volumes/vol_NxNxN.nii` from the shared kit's `make_volumes.py` (made
//! here with `--formats nii` when missing), N = `SUTURA_BENCH_N` (default 1024) and N/2. The
//! kit (`SUTURA_BENCH_KIT`, default `../shared/bench`) and the reference interpreter
//! (`SUTURA_PYTHON`, default `.venv/bin/python`) are needed for the ratios; without them the
//! bench times an in-memory synthetic volume and prints no ratio.
//!
//! Python figures (the kit's `py_baseline.py`, in a child process before Sutura's timings, on
//! the same files): `oblique_map_coordinates_1024` (a 1024² oblique slice of the N³ volume by
//! `scipy.ndimage.map_coordinates(order=1)` plus a window LUT) and `mip_ray_map_coordinates`
//! (an (N/2)² projection of the (N/2)³ volume along an arbitrary direction, one sample per voxel
//! along each ray). Sutura renders the same geometry: the same plane, direction and image size.
//!
//! Targets (issues 2 and 5): oblique slice ≥ 4× scipy, projection ≥ 40× scipy; for the GUI on
//! an N³ volume at a ~900×700 view: plane redraw (slice + window/level to RGBA) under 16 ms,
//! 3D coarse pass under 50 ms, full pass under 500 ms, on 2 cores. Prints medians in ms.

mod common;
use common::synth;

use nalgebra::{Matrix3, Vector3};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;
use sutura_core::geometry::Plane;
use sutura_core::io::{OpenOptions, Progress};
use sutura_core::render::pyramid::Pyramid;
use sutura_core::render::raycast::{
    Bricks, Camera, MipOptions, Quality, SurfaceOptions, mip, surface,
};
use sutura_core::render::slice::{
    Interpolation, Slab, SlabMode, SliceGeometry, render_slice, render_slice_into,
};
use sutura_core::render::window::{ColourMap, WindowLevel};
use sutura_core::render::{F32Image, RgbaImage};
use sutura_core::volume::Volume;

/// The reference interpreter and the kit, if both are there.
struct Kit {
    python: PathBuf,
    dir: PathBuf,
    volumes: PathBuf,
}

impl Kit {
    fn find() -> Option<Self> {
        let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
        let python = std::env::var_os("SUTURA_PYTHON")
            .map_or_else(|| root.join(".venv/bin/python"), PathBuf::from);
        let dir = std::env::var_os("SUTURA_BENCH_KIT")
            .map_or_else(|| root.join("../shared/bench"), PathBuf::from);
        if !python.exists() || !dir.join("py_baseline.py").exists() {
            println!(
                "no Python reference ({} or {} missing): no ratios",
                python.display(),
                dir.join("py_baseline.py").display()
            );
            return None;
        }
        Some(Self {
            python,
            dir,
            volumes: root.join("target/bench-volumes"),
        })
    }

    /// The kit's `.nii` of an n³ volume, made if missing.
    fn volume(&self, n: usize) -> Option<PathBuf> {
        let tag = format!("{n}x{n}x{n}");
        let nii = self.volumes.join(format!("vol_{tag}.nii"));
        if !nii.exists() {
            println!("making {} with the kit (once)", nii.display());
            let ok = Command::new(&self.python)
                .arg(self.dir.join("make_volumes.py"))
                .args(["--shape", &n.to_string(), &n.to_string(), &n.to_string()])
                .arg("--out")
                .arg(&self.volumes)
                .args(["--formats", "nii"])
                .status()
                .is_ok_and(|s| s.success());
            if !ok {
                println!("make_volumes.py failed: no ratios for {tag}");
                return None;
            }
        }
        Some(nii)
    }

    /// Median seconds of one `py_baseline.py` figure on the n³ volume.
    fn figure(&self, n: usize, name: &str, repeats: usize) -> Option<f64> {
        let tag = format!("{n}x{n}x{n}");
        let out = Command::new(&self.python)
            .env_remove("OPENBLAS_CORETYPE")
            .env_remove("OPENBLAS_L2_SIZE")
            .arg(self.dir.join("py_baseline.py"))
            .arg("--dir")
            .arg(&self.volumes)
            .args(["--tag", &tag, "--repeats", &repeats.to_string()])
            .args(["--only", &format!("^{name}$")])
            .output()
            .ok()?;
        let text = String::from_utf8_lossy(&out.stdout);
        text.lines()
            .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
            .find(|j| j["name"] == name)
            .and_then(|j| j["median_s"].as_f64())
    }
}

fn open_or_synth(path: Option<&Path>, n: usize) -> Volume {
    if let Some(p) = path {
        let t = Instant::now();
        let v = sutura_core::io::open(p, &OpenOptions::default(), &Progress::none()).expect("open");
        println!(
            "loaded {} in {:.0} ms",
            p.display(),
            t.elapsed().as_secs_f64() * 1e3
        );
        v
    } else {
        synth(n, 0.01)
    }
}

/// User plus system CPU seconds of this process so far (`/proc/self/stat`, Linux), if known.
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // fields after the command name (which may hold spaces) start after the last ')'
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    // utime and stime are fields 14 and 15 of the whole line: 12 and 13 after the name
    let ticks: f64 = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
    // USER_HZ is 100 on every Linux this runs on (from memory; the kernel's ABI default)
    Some(ticks / 100.0)
}

/// Median milliseconds of `runs` calls; prints a line, with the CPU time per call when the
/// process' CPU time is readable: on a shared machine the wall time includes waiting for a
/// core, the CPU time does not, and CPU time / threads is what the call would take on idle
/// cores (10 ms clock ticks, so meaningful over many runs).
fn time<T>(label: &str, runs: usize, mut f: impl FnMut() -> T) -> (Timing, T) {
    let mut ms = Vec::with_capacity(runs);
    let mut out = None;
    let cpu0 = cpu_seconds();
    for _ in 0..runs {
        let t = Instant::now();
        out = Some(f());
        ms.push(t.elapsed().as_secs_f64() * 1e3);
    }
    let cpu = cpu0
        .zip(cpu_seconds())
        .map(|(a, b)| (b - a) * 1e3 / runs as f64);
    ms.sort_by(f64::total_cmp);
    let median = ms[runs / 2];
    let threads = rayon::current_num_threads() as f64;
    let cpu_note = cpu.map_or(String::new(), |c| {
        format!(
            "; CPU {c:.1} ms/run, /{threads} threads = {:.1} ms",
            c / threads
        )
    });
    println!(
        "{label:<58} {median:8.1} ms  (min {:.1}, max {:.1}, {runs} runs{cpu_note})",
        ms[0],
        ms[runs - 1]
    );
    (
        Timing {
            median_ms: median,
            cpu_per_thread_ms: cpu.map(|c| c / threads),
        },
        out.expect("at least one run"),
    )
}

/// A timed case: the median wall time, and the CPU time per run divided by the threads.
#[derive(Clone, Copy)]
struct Timing {
    median_ms: f64,
    cpu_per_thread_ms: Option<f64>,
}

fn ratio_line(what: &str, ours: Timing, python_s: Option<f64>, target: f64) {
    match python_s {
        Some(p) => {
            let r = p * 1e3 / ours.median_ms;
            println!(
                "  -> {what}: Python {:.1} ms in this run, ratio {r:.1}x (target >= {target}x): {}",
                p * 1e3,
                if r >= target { "met" } else { "MISSED" }
            );
        }
        None => println!("  -> {what}: no Python figure"),
    }
}

fn budget_line(what: &str, ours: Timing, budget_ms: f64) {
    let verdict = |ms: f64| if ms <= budget_ms { "met" } else { "MISSED" };
    let cpu = ours.cpu_per_thread_ms.map_or(String::new(), |c| {
        format!("; by CPU time per thread {c:.1} ms: {}", verdict(c))
    });
    println!(
        "  -> {what}: wall {:.1} ms against {budget_ms} ms: {}{cpu}",
        ours.median_ms,
        verdict(ours.median_ms)
    );
}

/// `py_baseline.py`'s `_rot(ax, ay)` in (z, y, x) index order, with its columns turned into
/// Sutura's (x, y, z) voxel order.
fn kit_rotation(ax_deg: f64, ay_deg: f64) -> [Vector3<f64>; 3] {
    let (a, b) = (ax_deg.to_radians(), ay_deg.to_radians());
    let rx = Matrix3::new(a.cos(), -a.sin(), 0.0, a.sin(), a.cos(), 0.0, 0.0, 0.0, 1.0);
    let ry = Matrix3::new(b.cos(), 0.0, -b.sin(), 0.0, 1.0, 0.0, b.sin(), 0.0, b.cos());
    let r = ry * rx;
    [0, 1, 2].map(|c| Vector3::new(r[(2, c)], r[(1, c)], r[(0, c)]))
}

/// A world direction from a voxel-space one.
fn world_dir(volume: &Volume, v: Vector3<f64>) -> Vector3<f64> {
    volume.world_from_voxel().apply_vector(v).normalize()
}

#[allow(
    clippy::too_many_lines,
    reason = "one linear script: Python figures, then each case with its target"
)]
fn main() {
    let n: usize = std::env::var("SUTURA_BENCH_N")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1024);
    let m = n / 2;
    println!("rayon threads: {}", rayon::current_num_threads());
    let kit = Kit::find();
    let big_path = kit.as_ref().and_then(|k| k.volume(n));
    let small_path = kit.as_ref().and_then(|k| k.volume(m));
    // Python first, while this process holds no volume
    let py_oblique = kit.as_ref().and_then(|k| {
        big_path
            .as_ref()
            .and_then(|_| k.figure(n, "oblique_map_coordinates_1024", 5))
    });
    let py_mip = kit.as_ref().and_then(|k| {
        small_path
            .as_ref()
            .and_then(|_| k.figure(m, "mip_ray_map_coordinates", 3))
    });

    let big = open_or_synth(big_path.as_deref(), n);
    let spacing = big.spacing_mm()[0];
    // the kit's oblique plane: through the centre, spanned by the rotation's 2nd and 3rd
    // columns, one voxel per pixel; Sutura's columns run along the kit's fastest axis
    let [_, ku, kv] = kit_rotation(30.0, 20.0);
    let plane = Plane {
        origin: big.centre_world(),
        u: world_dir(&big, kv),
        v: world_dir(&big, ku),
    };
    let g = SliceGeometry::centred(&plane, 1024, 1024, spacing).expect("geometry");
    let wl = WindowLevel::new(20_000.0, 40_000.0).expect("window");
    let (t_obl, img) = time(
        &format!("oblique slice 1024² of {n}³, trilinear, + window LUT"),
        9,
        || {
            let s = render_slice(&big, &g, Interpolation::Trilinear, None).expect("slice");
            wl.apply(&s)
        },
    );
    drop(img);
    ratio_line("oblique slice vs map_coordinates", t_obl, py_oblique, 4.0);
    time(
        &format!("oblique slice 1024² of {n}³, nearest"),
        7,
        || render_slice(&big, &g, Interpolation::Nearest, None).expect("slice"),
    );
    let slab = Slab {
        thickness_mm: 10.0 * spacing,
        mode: SlabMode::Max,
    };
    time(
        &format!("oblique slab 1024² of {n}³, 10 voxels thick (21 samples), max"),
        3,
        || render_slice(&big, &g, Interpolation::Trilinear, Some(slab)).expect("slab"),
    );

    // GUI plane view: a 900×700 view of the axial plane through the centre, the whole slice
    // in view (pixels 1.5 voxels) and zoomed in (pixels half a voxel), to RGBA
    for (label, px) in [("fit", 1.5), ("zoom 2x", 0.5)] {
        let axial = Plane {
            origin: big.centre_world(),
            u: world_dir(&big, Vector3::x()),
            v: world_dir(&big, Vector3::y()),
        };
        let gv = SliceGeometry::centred(&axial, 900, 700, px * spacing).expect("view");
        // as a GUI redraws: into the buffers of the previous frame
        let mut values = F32Image {
            width: 0,
            height: 0,
            pixels: Vec::new(),
            pixel_mm: 0.0,
        };
        let mut rgba = RgbaImage {
            width: 0,
            height: 0,
            pixels: Vec::new(),
        };
        let (t, ()) = time(
            &format!("GUI plane view 900x700 of {n}³ ({label}) + W/L to RGBA"),
            15,
            || {
                render_slice_into(&big, &gv, Interpolation::Trilinear, None, &mut values)
                    .expect("slice");
                wl.colourize_into(&values, ColourMap::Grey, &mut rgba);
            },
        );
        budget_line("plane view redraw", t, 16.0);
    }
    // GUI 3D view of the big volume at 900×700
    let dir = world_dir(&big, Vector3::new(0.3, -0.5, 0.81));
    let cam = Camera::fit(&big, dir, Vector3::z(), 900, 700).expect("camera");
    let (_, pyramid) = time(&format!("pyramid (4x block min/max) of {n}³"), 3, || {
        Pyramid::new(&big).expect("pyramid")
    });
    let (_, bricks) = time("bricks (8³ min/max) from the pyramid", 3, || {
        Bricks::from_pyramid(&pyramid, &big).expect("bricks")
    });
    let preview = pyramid.preview().expect("preview level");
    let preview_bricks = Bricks::new(preview);
    let threshold = 36_000.0;
    let opts = SurfaceOptions::new(threshold);
    let coarse = SurfaceOptions {
        quality: Quality::coarse(),
        ..opts
    };
    let (t, _) = time(
        &format!("GUI 3D surface 900x700 of {n}³, coarse"),
        5,
        || surface(&big, &cam, &coarse, Some(&bricks)).expect("surface"),
    );
    budget_line("3D coarse pass (full volume)", t, 50.0);
    let on_preview = SurfaceOptions {
        quality: Quality::preview(),
        ..opts
    };
    let (t, _) = time(
        &format!("GUI 3D surface 900x700 of {n}³, coarse from the 4x pyramid"),
        5,
        || surface(preview, &cam, &on_preview, Some(&preview_bricks)).expect("surface"),
    );
    budget_line("3D coarse pass", t, 50.0);
    let (t, _) = time(&format!("GUI 3D surface 900x700 of {n}³, full"), 3, || {
        surface(&big, &cam, &opts, Some(&bricks)).expect("surface")
    });
    budget_line("3D full pass", t, 500.0);
    let mip_coarse = MipOptions {
        quality: Quality::coarse(),
    };
    let (t, _) = time(
        &format!("GUI 3D projection 900x700 of {n}³, coarse"),
        5,
        || mip(&big, &cam, mip_coarse).expect("mip"),
    );
    budget_line("3D coarse pass (full volume)", t, 50.0);
    let (t, _) = time(
        &format!("GUI 3D projection 900x700 of {n}³, coarse from the 4x pyramid"),
        5,
        || {
            mip(
                preview,
                &cam,
                MipOptions {
                    quality: Quality::preview(),
                },
            )
            .expect("mip")
        },
    );
    budget_line("3D coarse pass", t, 50.0);
    let (t, _) = time(
        &format!("GUI 3D projection 900x700 of {n}³, full"),
        3,
        || mip(&big, &cam, MipOptions::default()).expect("mip"),
    );
    budget_line("3D full pass", t, 500.0);
    drop(bricks);
    drop(preview_bricks);
    drop(pyramid);
    drop(big);

    // the kit's projection: an m² image of the m³ volume along its rotation's first column
    let small = open_or_synth(small_path.as_deref(), m);
    let [kd, ku, _] = kit_rotation(20.0, 30.0);
    let dir = world_dir(&small, kd);
    let cam = Camera {
        centre: small.centre_world(),
        view_dir: dir,
        up: world_dir(&small, ku),
        pixel_mm: small.spacing_mm()[0],
        width: m,
        height: m,
    };
    let (t_mip, _) = time(&format!("projection {m}² of {m}³, full"), 5, || {
        mip(&small, &cam, MipOptions::default()).expect("mip")
    });
    ratio_line("projection vs map_coordinates", t_mip, py_mip, 40.0);
    time(&format!("projection {m}² of {m}³, coarse"), 5, || {
        mip(&small, &cam, mip_coarse).expect("mip")
    });
    let side = Camera {
        view_dir: world_dir(&small, Vector3::new(0.9, 0.3, 0.2)),
        up: Vector3::z(),
        ..cam
    };
    time(
        &format!("projection {m}² of {m}³, full, view mostly along i"),
        5,
        || mip(&small, &side, MipOptions::default()).expect("mip"),
    );
    let bricks = Bricks::new(&small);
    let opts = SurfaceOptions::new(threshold);
    time(&format!("surface {m}² of {m}³, full"), 5, || {
        surface(&small, &cam, &opts, Some(&bricks)).expect("surface")
    });
}
