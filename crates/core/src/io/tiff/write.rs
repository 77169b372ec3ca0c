//! Writing volumes as TIFF: a folder of single-page slices, or one multi-page file (`BigTIFF` when
//! it would pass 4 GiB). Samples keep their stored type (`u8`, `u16`, `i16`, `f32`), so the
//! voxels read back exactly. The voxel size is written twice: in full, as a small JSON object in
//! every page's `ImageDescription` (`{"voxel_size_mm":[0.036,0.036,0.05]}`, numbers in the
//! shortest form that reads back to the same f64), which Sutura's reader prefers; and in the
//! resolution tags in pixels per centimetre for other programs (x and y only, since TIFF has no
//! slice spacing; about 7 significant digits). TIFF has no field for an intensity rescale: the
//! stored values are written and a note saying so is returned.

use crate::io::IoError;
use crate::volume::{Volume, Voxels};
use rayon::prelude::*;
use std::fs::File;
use std::io::{BufWriter, Seek, Write};
use std::ops::Range;
use std::path::Path;
use tiff::TiffResult;
use tiff::encoder::colortype::{ColorType, Gray8, Gray16, Gray32Float, GrayI16};
use tiff::encoder::{Compression, DeflateLevel, Rational, TiffEncoder, TiffKind, TiffValue};
use tiff::tags::{ResolutionUnit, Tag};

/// How to write.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct WriteOptions {
    /// Deflate-compress the pixel data (smaller files, slower); otherwise uncompressed.
    pub deflate: bool,
}

/// Writes `slice_0000.tif`, `slice_0001.tif`, … (at least four digits) into `dir`, uncompressed.
/// `dir` is created if missing and must not hold TIFF files already (stale slices would join the
/// stack on reading). Returns notes for the user (a rescale that could not be written).
pub fn write_stack(volume: &Volume, dir: &Path) -> Result<Vec<String>, IoError> {
    write_stack_with(volume, dir, WriteOptions::default())
}

/// [`write_stack`] with options.
pub fn write_stack_with(
    volume: &Volume,
    dir: &Path,
    options: WriteOptions,
) -> Result<Vec<String>, IoError> {
    std::fs::create_dir_all(dir).map_err(|e| IoError::os(dir, e))?;
    let has_tiffs = std::fs::read_dir(dir)
        .map_err(|e| IoError::os(dir, e))?
        .filter_map(Result::ok)
        .any(|e| {
            let n = e.file_name().to_string_lossy().to_lowercase();
            #[allow(
                clippy::case_sensitive_file_extension_comparisons,
                reason = "`n` is already lowercased"
            )]
            let tiff = n.ends_with(".tif") || n.ends_with(".tiff");
            tiff
        });
    if has_tiffs {
        return Err(IoError::usage(
            dir,
            "the folder already holds TIFF files; write the slices into an empty folder",
        ));
    }
    let (w, h) = page_size(volume, dir)?;
    let nz = volume.dims()[2];
    let digits = nz.saturating_sub(1).to_string().len().max(4);
    (0..nz).into_par_iter().try_for_each(|k| {
        let path = dir.join(format!("slice_{k:0digits$}.tif"));
        atomic(&path, |out| {
            let mut enc = TiffEncoder::new(out)?.with_compression(compression(options));
            write_pages(&mut enc, volume, w, h, k..k + 1)
        })
    })?;
    Ok(notes(volume))
}

/// Writes all slices as the pages of one file (`BigTIFF` when the data pass 4 GiB).
pub fn write_multipage(
    volume: &Volume,
    path: &Path,
    options: WriteOptions,
) -> Result<Vec<String>, IoError> {
    let (w, h) = page_size(volume, path)?;
    let nz = volume.dims()[2];
    // room for each page's directory and tags beside the pixel data (common practice: a few
    // hundred bytes per directory; 4 KiB is generous)
    let needed = volume.voxel_bytes() as u64 + nz as u64 * 4096;
    atomic(path, |out| {
        if needed > u64::from(u32::MAX) {
            let mut enc = TiffEncoder::new_big(out)?.with_compression(compression(options));
            write_pages(&mut enc, volume, w, h, 0..nz)
        } else {
            let mut enc = TiffEncoder::new(out)?.with_compression(compression(options));
            write_pages(&mut enc, volume, w, h, 0..nz)
        }
    })?;
    Ok(notes(volume))
}

/// Writes one TIFF file atomically (`export::write_atomic_seekable`): a crash or a full disk
/// leaves the previous file or none, never a file cut short.
fn atomic(
    path: &Path,
    fill: impl FnOnce(&mut BufWriter<File>) -> TiffResult<()>,
) -> Result<(), IoError> {
    let mut failure = None;
    let written = crate::export::write_atomic_seekable(path, |out| {
        fill(out).map_err(|e| {
            let io = std::io::Error::other(e.to_string());
            failure = Some(e);
            io
        })
    });
    match (written, failure) {
        (Ok(()), _) => Ok(()),
        (Err(_), Some(e)) => Err(encode_err(path, &e)),
        (Err(e), None) => Err(e.into()),
    }
}

fn compression(options: WriteOptions) -> Compression {
    if options.deflate {
        Compression::Deflate(DeflateLevel::Fast)
    } else {
        Compression::Uncompressed
    }
}

fn encode_err(path: &Path, e: &tiff::TiffError) -> IoError {
    match e {
        tiff::TiffError::IoError(io) => {
            IoError::os(path, std::io::Error::new(io.kind(), io.to_string()))
        }
        other => IoError::corrupt(path, format!("cannot encode: {other}")),
    }
}

fn page_size(volume: &Volume, path: &Path) -> Result<(u32, u32), IoError> {
    let [nx, ny, _] = volume.dims();
    match (u32::try_from(nx), u32::try_from(ny)) {
        (Ok(w), Ok(h)) => Ok((w, h)),
        _ => Err(IoError::usage(
            path,
            format!("slices of {nx}x{ny} voxels are too large for TIFF"),
        )),
    }
}

fn notes(volume: &Volume) -> Vec<String> {
    volume.rescale().map_or_else(Vec::new, |r| {
        vec![format!(
            "TIFF cannot store an intensity rescale: stored values were written, without the slope {} and intercept {}",
            r.slope, r.intercept
        )]
    })
}

/// Pixels per centimetre as a rational with as many digits as fit in u32.
fn per_cm(spacing_mm: f64) -> Option<Rational> {
    let px = 10.0 / spacing_mm;
    if !px.is_finite() || px <= 0.0 || px >= f64::from(u32::MAX) {
        return None;
    }
    let mut d: u32 = 1;
    while d < 1_000_000_000 && px * f64::from(d) * 10.0 < f64::from(u32::MAX) {
        d *= 10;
    }
    Some(Rational {
        n: (px * f64::from(d)).round() as u32,
        d,
    })
}

fn write_pages<W: Write + Seek, K: TiffKind>(
    enc: &mut TiffEncoder<W, K>,
    volume: &Volume,
    w: u32,
    h: u32,
    pages: Range<usize>,
) -> TiffResult<()> {
    let s = volume.spacing_mm();
    let tags = PageTags {
        resolution: per_cm(s[0]).zip(per_cm(s[1])),
        description: description(s),
    };
    match volume.voxels() {
        Voxels::U8(b) => pages_of::<W, K, Gray8>(enc, b.as_slice(), w, h, pages, &tags),
        Voxels::U16(b) => pages_of::<W, K, Gray16>(enc, b.as_slice(), w, h, pages, &tags),
        Voxels::I16(b) => pages_of::<W, K, GrayI16>(enc, b.as_slice(), w, h, pages, &tags),
        Voxels::F32(b) => pages_of::<W, K, Gray32Float>(enc, b.as_slice(), w, h, pages, &tags),
    }
}

/// What every page carries besides its pixels.
struct PageTags {
    resolution: Option<(Rational, Rational)>,
    description: String,
}

/// The `ImageDescription` JSON with the full voxel size (see the module docs).
fn description(spacing_mm: [f64; 3]) -> String {
    serde_json::json!({ super::page::DESCRIPTION_KEY: spacing_mm }).to_string()
}

fn pages_of<W: Write + Seek, K: TiffKind, C: ColorType>(
    enc: &mut TiffEncoder<W, K>,
    data: &[C::Inner],
    w: u32,
    h: u32,
    pages: Range<usize>,
    tags: &PageTags,
) -> TiffResult<()>
where
    [C::Inner]: TiffValue,
{
    let n = w as usize * h as usize;
    for k in pages {
        let mut image = enc.new_image::<C>(w, h)?;
        image
            .encoder()
            .write_tag(Tag::ImageDescription, tags.description.as_str())?;
        if let Some((x, y)) = &tags.resolution {
            image.resolution_unit(ResolutionUnit::Centimeter);
            image.x_resolution(Rational { n: x.n, d: x.d });
            image.y_resolution(Rational { n: y.n, d: y.d });
        }
        image.write_data(&data[k * n..(k + 1) * n])?;
    }
    Ok(())
}
