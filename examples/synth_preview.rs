//! Quick look at the synthetic specimens and figures for the report: writes a PNG of the three
//! mid slices (through the skull's box centre) of each specimen, and prints generation time,
//! raw and gzip-compressed sizes.
//!
//! `cargo run --example synth_preview -- OUT_DIR [ID ...]`

use flate2::Compression;
use flate2::write::GzEncoder;
use image::{GrayImage, Luma};
use std::io::Write;
use std::time::Instant;
use sutura_core::synth::{self, SyntheticSpecimen};
use sutura_core::volume::Voxels;

fn main() -> anyhow::Result<()> {
    let mut args = std::env::args().skip(1);
    let out = std::path::PathBuf::from(args.next().unwrap_or_else(|| "synth_preview".into()));
    let wanted: Vec<String> = args.collect();
    std::fs::create_dir_all(&out)?;
    for long in [true, false] {
        let sk = synth::Skull::new(&synth::SkullParams::group_mean(long));
        for d in synth::scheme() {
            if sk.landmark(d.id).is_none() {
                println!("mean skull (long {long}): {} not found", d.id);
            }
        }
    }
    let mut total_raw = 0usize;
    let mut total_gz = 0usize;
    for spec in synth::default_series() {
        if !wanted.is_empty() && !wanted.contains(&spec.id) {
            continue;
        }
        let t0 = Instant::now();
        let s = synth::generate(&spec)?;
        let gen_ms = t0.elapsed().as_secs_f64() * 1e3;
        let Voxels::U16(buf) = s.volume.voxels() else {
            anyhow::bail!("expected u16");
        };
        let raw: Vec<u8> = buf
            .as_slice()
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let mut enc = GzEncoder::new(Vec::new(), Compression::default());
        enc.write_all(&raw)?;
        let gz = enc.finish()?.len();
        total_raw += raw.len();
        total_gz += gz;
        let tip = s
            .landmarks
            .iter()
            .find(|(n, _)| n == "snout_tip")
            .unwrap()
            .1;
        let occ = s
            .landmarks
            .iter()
            .find(|(n, _)| n == "occipital_condyle")
            .unwrap()
            .1;
        println!(
            "{} {:<16} dims {:?} gen {:7.1} ms raw {:7} B gz {:7} B ({:.2} bit/voxel) tip-occiput {:.3} mm bubbles {}",
            s.id,
            s.group,
            s.volume.dims(),
            gen_ms,
            raw.len(),
            gz,
            gz as f64 * 8.0 / buf.len() as f64,
            tip.distance_mm(occ),
            s.bubbles.len()
        );
        write_png(&s, &out.join(format!("{}.png", s.id)))?;
    }
    println!("total raw {total_raw} B, gz {total_gz} B");
    Ok(())
}

/// Axial (k), sagittal (j) and coronal (i) slices through the landmarks' centre, then a dorsal
/// maximum-intensity projection, side by side, nearest-neighbour, with z
/// stretched by the voxel aspect so the skull is not squashed; window 0..32000.
#[allow(clippy::needless_range_loop, reason = "axis index used on two arrays")]
fn write_png(s: &SyntheticSpecimen, path: &std::path::Path) -> anyhow::Result<()> {
    let [nx, ny, nz] = s.volume.dims();
    let sp = s.voxel_size_mm;
    // centre of the landmarks, in voxels
    let n = s.landmarks.len() as f64;
    let c = s.landmarks.iter().fold([0.0; 3], |mut a, (_, p)| {
        for ax in 0..3 {
            a[ax] += p.0[ax] / n;
        }
        a
    });
    let ci = ((c[0] / sp[0]).round() as usize).min(nx - 1);
    let cj = ((c[1] / sp[1]).round() as usize).min(ny - 1);
    let ck = ((c[2] / sp[2]).round() as usize).min(nz - 1);
    let zs = sp[2] / sp[0];
    let hz = (nz as f64 * zs).round() as usize;
    let scale = 3;
    let w = (nx + nx + ny + 2 + 1 + nx) * scale;
    let h = (ny.max(hz)) * scale;
    let mut img = GrayImage::new(w as u32, h as u32);
    let val = |i: usize, j: usize, k: usize| -> u8 {
        let v = s
            .volume
            .value(sutura_core::geometry::VoxelIndex::new(i, j, k))
            .unwrap_or(0.0);
        (v / 32000.0 * 255.0).clamp(0.0, 255.0) as u8
    };
    for y in 0..h {
        for x in 0..w {
            let (px, py) = (x / scale, y / scale);
            let g = if px < nx {
                // axial: i across, j down (flipped so +y is up)
                if py < ny { val(px, ny - 1 - py, ck) } else { 0 }
            } else if px == nx {
                255
            } else if px < 2 * nx + 1 {
                // sagittal-ish: i across, k down (flipped so dorsal is up) at j = cj
                let i = px - nx - 1;
                if py < hz {
                    let k = nz - 1 - ((py as f64 / zs) as usize).min(nz - 1);
                    val(i, cj, k)
                } else {
                    0
                }
            } else if px == 2 * nx + 1 || px == 2 * nx + ny + 2 {
                255
            } else if px > 2 * nx + ny + 2 {
                // dorsal view: maximum along k
                let i = px - (2 * nx + ny + 3);
                if py < ny && i < nx {
                    (0..nz).map(|k| val(i, ny - 1 - py, k)).max().unwrap_or(0)
                } else {
                    0
                }
            } else {
                // coronal: j across, k down at i = ci
                let j = px - 2 * nx - 2;
                if py < hz && j < ny {
                    let k = nz - 1 - ((py as f64 / zs) as usize).min(nz - 1);
                    val(ci, j, k)
                } else {
                    0
                }
            };
            img.put_pixel(x as u32, y as u32, Luma([g]));
        }
    }
    img.save(path)?;
    Ok(())
}
