//! `sutura info`: what a scan is, in a form that compares with other tools.

use super::ScanArgs;
use anyhow::Result;
use clap::Args;
use serde::Serialize;
use std::fmt::Write as _;

#[derive(Debug, Args)]
pub struct InfoArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Print JSON instead of text (dims, dtype, `voxel_size_mm`, `world_from_voxel` as 4x4
    /// row-major, min, max, mean, sum over rescaled values, percentiles, notes).
    #[arg(long)]
    json: bool,
}

/// The fields of `info --json`.
#[derive(Debug, Serialize)]
pub struct InfoReport {
    pub path: String,
    pub dims: [usize; 3],
    pub dtype: String,
    pub voxel_size_mm: [f64; 3],
    pub world_from_voxel: [[f64; 4]; 4],
    pub rescale_slope: f64,
    pub rescale_intercept: f64,
    pub min: f64,
    pub max: f64,
    pub mean: f64,
    pub sum: f64,
    pub nan_count: u64,
    /// 0.5th, 50th and 99.5th percentiles: the range of an automatic window.
    pub p0_5: f64,
    pub p50: f64,
    pub p99_5: f64,
    pub voxel_bytes: usize,
    /// Levels of detail, finest first (one for a scan read whole).
    pub levels: Vec<LevelReport>,
    /// Whether the statistics and percentiles cover every voxel (else a note says how far off
    /// they may be).
    pub intensity_exact: bool,
    pub notes: Vec<String>,
}

/// One level of detail in `info --json`.
#[derive(Debug, Serialize)]
pub struct LevelReport {
    pub dims: [usize; 3],
    pub factor: [usize; 3],
    pub voxel_size_mm: [f64; 3],
}

pub fn run(a: &InfoArgs) -> Result<()> {
    let v = a.scan.open_source()?;
    let intensity = v.intensity()?;
    let s = intensity.stats;
    let pct = |p: f64| intensity.percentile(p).unwrap_or(f64::NAN);
    let r = v.rescale();
    let mut notes = v.notes().to_vec();
    if let Some(n) = &intensity.note {
        notes.push(format!("intensity: {n}"));
    }
    let report = InfoReport {
        path: a.scan.scan.display().to_string(),
        dims: v.dims(),
        dtype: v.dtype().name().to_owned(),
        voxel_size_mm: v.spacing_mm(),
        world_from_voxel: v.world_from_voxel().rows(),
        rescale_slope: r.map_or(1.0, |r| r.slope),
        rescale_intercept: r.map_or(0.0, |r| r.intercept),
        min: s.min,
        max: s.max,
        mean: s.mean,
        sum: s.sum,
        nan_count: s.nan_count,
        p0_5: pct(0.5),
        p50: pct(50.0),
        p99_5: pct(99.5),
        voxel_bytes: v.voxel_bytes() as usize,
        levels: (0..v.level_count())
            .map(|l| {
                let info = v.level(l);
                LevelReport {
                    dims: info.dims,
                    factor: info.factor,
                    voxel_size_mm: info.spacing_mm(),
                }
            })
            .collect(),
        intensity_exact: intensity.exact,
        notes,
    };
    if a.json {
        return super::emit(&format!("{}\n", serde_json::to_string_pretty(&report)?));
    }
    super::emit(&text(&report, r.is_some()))
}

/// The report as lines for a reader.
fn text(report: &InfoReport, rescaled: bool) -> String {
    let [nx, ny, nz] = report.dims;
    let [sx, sy, sz] = report.voxel_size_mm;
    // written at once by `emit`, which ends quietly when the reader has gone (`| head`)
    let mut s = String::new();
    macro_rules! out {
        ($($t:tt)*) => {
            let _ = writeln!(s, $($t)*);
        };
    }
    out!("scan         {}", report.path);
    out!(
        "dimensions   {nx} x {ny} x {nz} voxels ({} MiB of {})",
        report.voxel_bytes >> 20,
        report.dtype
    );
    out!(
        "voxel size   {} x {} x {}",
        sutura_core::geometry::format_length_mm(sx),
        sutura_core::geometry::format_length_mm(sy),
        sutura_core::geometry::format_length_mm(sz)
    );
    out!(
        "extent       {:.3} x {:.3} x {:.3} mm",
        sx * nx as f64,
        sy * ny as f64,
        sz * nz as f64
    );
    out!("world_from_voxel (mm)");
    for row in &report.world_from_voxel {
        out!(
            "  {:>12.6} {:>12.6} {:>12.6} {:>12.6}",
            row[0],
            row[1],
            row[2],
            row[3]
        );
    }
    if rescaled {
        out!(
            "rescale      value = {} * stored + {}",
            report.rescale_slope,
            report.rescale_intercept
        );
    }
    out!(
        "intensity    min {}  max {}  mean {:.4}",
        report.min,
        report.max,
        report.mean
    );
    out!(
        "percentiles  0.5%: {}  50%: {}  99.5%: {}",
        report.p0_5,
        report.p50,
        report.p99_5
    );
    if report.levels.len() > 1 {
        for (l, lv) in report.levels.iter().enumerate() {
            let [x, y, z] = lv.dims;
            out!(
                "level {l:<6} {x} x {y} x {z} voxels ({}x{}x{} blocks)",
                lv.factor[0],
                lv.factor[1],
                lv.factor[2]
            );
        }
    }
    if report.nan_count > 0 {
        out!("NaN voxels   {}", report.nan_count);
    }
    for n in &report.notes {
        out!("note         {n}");
    }
    s
}
