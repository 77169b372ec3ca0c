//! `sutura convert`: write a scan as an OME-Zarr store (streamed, bounded memory), or, cropped
//! or downsampled, as NIfTI-1 or a TIFF slice folder.

use super::ScanArgs;
use anyhow::{Context, Result, bail};
use clap::Args;
use std::ops::Range;
use std::path::{Path, PathBuf};
use sutura_core::io::Progress;
use sutura_core::landmarks::scan::convert_to_store;
use sutura_core::store::{Codec, ConvertOptions};

#[derive(Debug, Args)]
pub struct ConvertArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Output: `NAME.ome.zarr` (a chunked multiscale store, written a slab of slices at a time
    /// whatever the scan's size), `NAME.nii` or `NAME.nii.gz` (NIfTI-1), or a folder `NAME/` of
    /// TIFF slices (`NAME.tif` and `NAME.tiff` also write a folder of that name).
    #[arg(short, long, value_name = "OUT")]
    output: PathBuf,

    /// Keep only a box of voxels, as half-open index ranges `i0:i1,j0:j1,k0:k1`
    /// (an empty part keeps the whole axis, e.g. `:,:,100:200`).
    #[arg(long, value_name = "I0:I1,J0:J1,K0:K1")]
    crop: Option<String>,

    /// Crop to the bounding box of a label: `DIR:NAME` (a label image and its label), grown by
    /// --margin voxels on every side.
    #[arg(long, value_name = "DIR:NAME", conflicts_with = "crop")]
    crop_to_label: Option<String>,

    /// Voxels added around the label's box by --crop-to-label.
    #[arg(
        long,
        value_name = "N",
        default_value_t = 0,
        requires = "crop_to_label"
    )]
    margin: usize,

    /// Average blocks of N×N×N voxels into one (after cropping); the voxel size grows N-fold.
    #[arg(long, value_name = "N", default_value_t = 1)]
    downsample: usize,

    /// Store only: the compressor of the chunks, `zstd[/LEVEL]`, `blosc-lz4[/LEVEL]`,
    /// `gzip[/LEVEL]` or `raw`.
    #[arg(long, value_name = "CODEC", default_value = "zstd/1")]
    codec: String,

    /// Store only: the side of the cubic chunks, in voxels (16 to 256).
    #[arg(long, value_name = "N", default_value_t = 64)]
    chunk: usize,

    /// Store only: coarser levels are added until one holds at most this many KiB of voxels.
    #[arg(long, value_name = "KIB", default_value_t = 65_536, value_parser = clap::value_parser!(u64).range(1..))]
    coarsest_kib: u64,

    /// Store only: start afresh instead of resuming an interrupted conversion.
    #[arg(long)]
    restart: bool,
}

/// Whether an output name asks for a store.
fn is_store_name(out: &Path) -> bool {
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    #[allow(
        clippy::case_sensitive_file_extension_comparisons,
        reason = "lower-cased above"
    )]
    let store = name.ends_with(".zarr");
    store
}

/// Streams the scan into a store with a progress bar; Ctrl-C leaves a partial store that the
/// same command resumes.
fn run_store(a: &ConvertArgs) -> Result<()> {
    if a.crop.is_some() || a.downsample != 1 {
        bail!(
            "--crop and --downsample write NIfTI or TIFF; a store keeps the whole scan at every level of detail"
        );
    }
    let codec = Codec::parse(&a.codec).map_err(|e| anyhow::anyhow!("--codec {}: {e}", a.codec))?;
    let options = ConvertOptions {
        chunk: a.chunk,
        codec,
        source_fingerprint: None,
        resume: !a.restart,
        coarsest_bytes: a.coarsest_kib.saturating_mul(1024),
    };
    let bar = (!a.scan.quiet).then(|| {
        let b = indicatif::ProgressBar::with_draw_target(
            None,
            indicatif::ProgressDrawTarget::stderr_with_hz(4),
        );
        b.set_style(
            indicatif::ProgressStyle::with_template(
                "converting {bar:40} {pos}/{len} slices {elapsed} (eta {eta})",
            )
            .expect("static template"),
        );
        b
    });
    let report = |done: u64, total: u64| {
        if let Some(b) = &bar {
            b.set_length(total);
            b.set_position(done);
        }
        true
    };
    let progress = Progress::new(Some(&report));
    let started = std::time::Instant::now();
    let r = convert_to_store(
        &a.scan.scan,
        &a.scan.open_options(),
        &a.output,
        options,
        &progress,
    )?;
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let [nx, ny, nz] = r.levels[0].dims;
    let coarsest = r.levels.last().map_or([0; 3], |l| l.dims);
    eprintln!(
        "wrote {} ({nx} x {ny} x {nz} {}, {}, {:.1} MiB, {:.1} s{})",
        a.output.display(),
        r.dtype,
        if r.levels.len() == 1 {
            "1 level".to_owned()
        } else {
            format!(
                "{} levels down to {} x {} x {}",
                r.levels.len(),
                coarsest[0],
                coarsest[1],
                coarsest[2]
            )
        },
        r.stored_bytes as f64 / f64::from(1 << 20),
        started.elapsed().as_secs_f64(),
        r.resumed_from
            .map(|k| format!(", resumed from slice {k}"))
            .unwrap_or_default()
    );
    Ok(())
}

/// Parses `i0:i1,j0:j1,k0:k1` against the volume's dims.
pub fn parse_crop(text: &str, dims: [usize; 3]) -> Result<[Range<usize>; 3]> {
    let parts: Vec<&str> = text.split(',').collect();
    if parts.len() != 3 {
        bail!("--crop {text}: give three ranges i0:i1,j0:j1,k0:k1");
    }
    let mut out = [0..0, 0..0, 0..0];
    for (a, p) in parts.iter().enumerate() {
        let (lo, hi) = p
            .split_once(':')
            .with_context(|| format!("--crop {text}: '{p}' is not a range lo:hi"))?;
        let lo: usize = if lo.trim().is_empty() {
            0
        } else {
            lo.trim()
                .parse()
                .with_context(|| format!("--crop {text}: '{lo}'"))?
        };
        let hi: usize = if hi.trim().is_empty() {
            dims[a]
        } else {
            hi.trim()
                .parse()
                .with_context(|| format!("--crop {text}: '{hi}'"))?
        };
        out[a] = lo..hi;
    }
    Ok(out)
}

pub fn run(a: &ConvertArgs) -> Result<()> {
    if is_store_name(&a.output) {
        return run_store(a);
    }
    let mut v = a.scan.open()?;
    if let Some(c) = &a.crop {
        let r = parse_crop(c, v.dims())?;
        v = v.crop(r)?;
    }
    if let Some(spec) = &a.crop_to_label {
        let (dir, name) = spec
            .rsplit_once(':')
            .with_context(|| format!("--crop-to-label {spec}: write DIR:NAME"))?;
        let dir = Path::new(dir);
        let lv = super::labels::load(dir)?;
        if lv.dims() != v.dims() {
            bail!(
                "{}: labels for a {:?} grid, but {} is {:?}",
                dir.display(),
                lv.dims(),
                a.scan.scan.display(),
                v.dims()
            );
        }
        if let Some(f) = &lv.fingerprint
            && let Some(m) = f.check_volume(&a.scan.scan, &v)
        {
            bail!("{}: {m}", dir.display());
        }
        let r = sutura_core::labels::label_box(&lv, lv.value_of(name)?, a.margin)
            .with_context(|| format!("{}: label {name} holds no voxel", dir.display()))?;
        eprintln!("label {name}: box {r:?}");
        v = v.crop(r)?;
    }
    if a.downsample > 1 {
        v = v.downsample(a.downsample)?;
    } else if a.downsample == 0 {
        bail!("--downsample must be at least 1");
    }
    write_volume(&v, &a.output)?;
    let [nx, ny, nz] = v.dims();
    eprintln!(
        "wrote {} ({nx} x {ny} x {nz} {})",
        a.output.display(),
        v.dtype()
    );
    Ok(())
}

/// Writes a volume by the output name: `.nii`/`.nii.gz` as NIfTI-1, anything else as a folder
/// of TIFF slices.
pub fn write_volume(v: &sutura_core::volume::Volume, out: &Path) -> Result<()> {
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    // `name` is lower-cased above, so these comparisons ignore case
    #[allow(
        clippy::case_sensitive_file_extension_comparisons,
        reason = "lower-cased above"
    )]
    let (nifti, tiff) = (
        name.ends_with(".nii") || name.ends_with(".nii.gz"),
        name.ends_with(".tif") || name.ends_with(".tiff"),
    );
    if nifti {
        sutura_core::io::nifti::write(v, out)?;
    } else {
        let dir = if tiff {
            out.with_extension("")
        } else {
            out.to_owned()
        };
        sutura_core::io::tiff::write_stack(v, &dir)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crop_ranges() {
        let r = parse_crop("1:3,:,5:", [10, 20, 30]).unwrap();
        assert_eq!(r, [1..3, 0..20, 5..30]);
        assert!(parse_crop("1:3,:", [10, 20, 30]).is_err());
        assert!(parse_crop("a:3,:,:", [10, 20, 30]).is_err());
    }
}
