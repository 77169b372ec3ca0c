//! `sutura convert`: write a scan, cropped or downsampled, as NIfTI-1 or a TIFF slice folder.

use super::ScanArgs;
use anyhow::{Context, Result, bail};
use clap::Args;
use std::ops::Range;
use std::path::{Path, PathBuf};

#[derive(Debug, Args)]
pub struct ConvertArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Output: `NAME.nii` or `NAME.nii.gz` (NIfTI-1), or a folder `NAME/` of TIFF slices
    /// (`NAME.tif` and `NAME.tiff` also write a folder of that name).
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
