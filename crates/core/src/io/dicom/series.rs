//! From the files of a folder to one series: which files are DICOM images, which series they
//! belong to, which series is read, the order of its slices and where they lie.

use super::file::{self, SliceHeader, name};
use crate::geometry::Affine3;
use crate::io::names::natural_cmp;
use crate::io::{IoError, Limits, OpenOptions};
use crate::volume::{DType, Rescale, SpacingOrigin};
use nalgebra::{Matrix3, Vector3};
use rayon::prelude::*;
use std::path::{Path, PathBuf};

/// How far two slices' steps along the normal may differ, relative to the series' step: 1%, a
/// rule of thumb of ours (positions are written with a few decimals; a missing slice doubles
/// a step and is caught far beyond it). Never below [`MIN_TOLERANCE_MM`].
pub const SPACING_TOLERANCE: f64 = 0.01;
/// The smallest tolerance on positions, in mm (DICOM decimal strings carry about 1 µm).
pub const MIN_TOLERANCE_MM: f64 = 1e-3;
/// How far `ImageOrientationPatient` may differ between slices (per direction cosine), and how
/// far its rows may be from unit length and from perpendicular.
const ORIENTATION_TOLERANCE: f64 = 1e-4;
const ORTHONORMAL_TOLERANCE: f64 = 1e-3;

/// One series of a folder, as listed to the user.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SeriesSummary {
    /// `SeriesInstanceUID` (empty when the files do not say).
    pub uid: String,
    /// `SeriesDescription` (empty when the files do not say).
    pub description: String,
    pub slices: usize,
}

impl std::fmt::Display for SeriesSummary {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let uid = if self.uid.is_empty() {
            "(no UID)"
        } else {
            &self.uid
        };
        write!(f, "{uid}")?;
        if !self.description.is_empty() {
            write!(f, " \"{}\"", self.description)?;
        }
        write!(
            f,
            " ({} slice{})",
            self.slices,
            if self.slices == 1 { "" } else { "s" }
        )
    }
}

/// The DICOM files of a folder, in natural order of their names: visible regular files named
/// `.dcm` (any case) or carrying the DICM marker at byte 128. Fails on more than `max_files`.
pub fn dicom_files(dir: &Path, max_files: u64) -> Result<Vec<PathBuf>, IoError> {
    let mut files = Vec::new();
    for entry in std::fs::read_dir(dir).map_err(|e| IoError::os(dir, e))? {
        let entry = entry.map_err(|e| IoError::os(dir, e))?;
        let fname = entry.file_name();
        let fname = fname.to_string_lossy();
        if fname.starts_with('.') {
            continue;
        }
        let path = entry.path();
        if !path.is_file() {
            continue;
        }
        if crate::io::names::is_dicom_name(&fname) || file::has_marker(&path) {
            if files.len() as u64 >= max_files {
                return Err(IoError::LimitExceeded {
                    path: dir.to_owned(),
                    what: "number of DICOM files in the folder".into(),
                    limit: max_files.to_string(),
                });
            }
            files.push(path);
        }
    }
    files.sort_by(|a, b| natural_cmp(&name(a), &name(b)));
    Ok(files)
}

/// The image headers of a folder's DICOM files, read in parallel; files without pixel data
/// (a DICOMDIR, a report) are counted, not kept. With `tolerant`, files whose header cannot be
/// read are left out too and the first one's error returned beside the count of them.
fn image_headers(
    files: &[PathBuf],
    tolerant: bool,
) -> Result<(Vec<SliceHeader>, usize, Vec<IoError>), IoError> {
    let read: Vec<Result<Option<SliceHeader>, IoError>> =
        files.par_iter().map(|f| file::read_header(f)).collect();
    let mut headers = Vec::with_capacity(read.len());
    let (mut skipped, mut bad) = (0, Vec::new());
    for r in read {
        match r {
            Ok(Some(h)) => headers.push(h),
            Ok(None) => skipped += 1,
            Err(e) if tolerant => bad.push(e),
            Err(e) => return Err(e),
        }
    }
    Ok((headers, skipped, bad))
}

/// The series among `headers`, in order of first appearance.
fn group(headers: Vec<SliceHeader>) -> Vec<Vec<SliceHeader>> {
    let mut groups: Vec<Vec<SliceHeader>> = Vec::new();
    for h in headers {
        match groups.iter_mut().find(|g| g[0].series_uid == h.series_uid) {
            Some(g) => g.push(h),
            None => groups.push(vec![h]),
        }
    }
    groups
}

fn summary(g: &[SliceHeader]) -> SeriesSummary {
    SeriesSummary {
        uid: g[0].series_uid.clone(),
        description: g[0].series_description.clone(),
        slices: g.len(),
    }
}

/// The series of a folder (or of the folder of a DICOM file), as listed to the user.
pub fn list_series(path: &Path, limits: &Limits) -> Result<Vec<SeriesSummary>, IoError> {
    let dir = if path.is_dir() {
        path
    } else {
        path.parent().unwrap_or(Path::new("."))
    };
    let files = dicom_files(dir, limits.max_slices)?;
    let (headers, _, _) = image_headers(&files, !path.is_dir())?;
    Ok(group(headers).iter().map(|g| summary(g)).collect())
}

/// A series ready to read: its slices in order and everything known from their headers.
#[derive(Debug)]
pub(super) struct Series {
    pub path: PathBuf,
    pub slices: Vec<SliceHeader>,
    pub dims: [usize; 3],
    pub dtype: DType,
    pub world_from_voxel: Affine3,
    pub rescale: Option<Rescale>,
    pub notes: Vec<String>,
    pub spacing_origin: SpacingOrigin,
}

/// Finds, checks, orders and places the series at `path`: a folder (its one series, or the one
/// `options.dicom_series` names) or a DICOM file (the series it belongs to, in its folder;
/// other files of the folder whose header cannot be read are then left out with a note, since
/// they need not belong to that series, and a slice missing inside the series is still caught
/// as a gap).
pub(super) fn open_series(path: &Path, options: &OpenOptions) -> Result<Series, IoError> {
    let (dir, wanted) = if path.is_dir() {
        (path.to_owned(), options.dicom_series.clone())
    } else {
        let h = file::read_header(path)?
            .ok_or_else(|| IoError::usage(path, "a DICOM file without pixel data: not an image"))?;
        let dir = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."))
            .to_owned();
        (
            dir,
            Some(options.dicom_series.clone().unwrap_or(h.series_uid)),
        )
    };
    let files = dicom_files(&dir, options.limits.max_slices)?;
    if files.is_empty() {
        return Err(IoError::usage(&dir, "the folder holds no DICOM files"));
    }
    let (headers, skipped, bad) = image_headers(&files, !path.is_dir())?;
    if headers.is_empty() {
        return Err(IoError::usage(
            &dir,
            format!("the folder's {} DICOM files hold no images", files.len()),
        ));
    }
    let mut groups = group(headers);
    let chosen = match wanted {
        Some(uid) => {
            let Some(i) = groups.iter().position(|g| g[0].series_uid == uid) else {
                let list: Vec<String> = groups.iter().map(|g| summary(g).to_string()).collect();
                return Err(IoError::usage(
                    &dir,
                    format!("no series {uid}; the folder holds: {}", list.join("; ")),
                ));
            };
            groups.swap_remove(i)
        }
        None if groups.len() == 1 => groups.pop().expect("one series"),
        None => {
            let list: Vec<String> = groups.iter().map(|g| summary(g).to_string()).collect();
            return Err(IoError::usage(
                &dir,
                format!(
                    "the folder holds {} DICOM series; choose one by its SeriesInstanceUID (--series UID): {}",
                    groups.len(),
                    list.join("; ")
                ),
            ));
        }
    };
    let mut notes = Vec::new();
    if let Some(e) = bad.first() {
        notes.push(format!(
            "{} unreadable file{} of the folder left out (the first: {e})",
            bad.len(),
            if bad.len() == 1 { "" } else { "s" }
        ));
    }
    if skipped > 0 {
        notes.push(format!(
            "{skipped} DICOM file{} without pixel data left out",
            if skipped == 1 { "" } else { "s" }
        ));
    }
    build(path, chosen, options, notes)
}

fn check_supported(h: &SliceHeader) -> Result<(), IoError> {
    use dicom_encoding::transfer_syntax::TransferSyntaxIndex as _;
    let p = h.path.as_path();
    match dicom_transfer_syntax_registry::TransferSyntaxRegistry.get(&h.transfer_syntax) {
        Some(ts) if ts.can_decode_all() => {}
        Some(ts) => {
            return Err(IoError::unsupported(
                p,
                format!(
                    "the transfer syntax {} ({}): no pure-Rust decoder for it",
                    ts.name(),
                    h.transfer_syntax
                ),
            ));
        }
        None => {
            return Err(IoError::unsupported(
                p,
                format!("the unknown transfer syntax {}", h.transfer_syntax),
            ));
        }
    }
    if h.samples_per_pixel != 1 {
        return Err(IoError::unsupported(
            p,
            format!(
                "{} samples per pixel ({}): Sutura reads greyscale CT slices",
                h.samples_per_pixel, h.photometric
            ),
        ));
    }
    if !matches!(h.photometric.as_str(), "MONOCHROME1" | "MONOCHROME2" | "") {
        return Err(IoError::unsupported(
            p,
            format!(
                "photometric interpretation {}: Sutura reads greyscale CT slices",
                h.photometric
            ),
        ));
    }
    if h.frames != 1 {
        return Err(IoError::unsupported(
            p,
            format!(
                "a multi-frame image ({} frames): Sutura reads series of single-frame slices",
                h.frames
            ),
        ));
    }
    if !matches!(h.bits_allocated, 8 | 16) {
        return Err(IoError::unsupported(
            p,
            format!(
                "{} bits allocated per sample (8 or 16 are read)",
                h.bits_allocated
            ),
        ));
    }
    if h.bits_stored == 0 || h.bits_stored > h.bits_allocated {
        return Err(IoError::corrupt(
            p,
            format!(
                "BitsStored {} does not fit BitsAllocated {}",
                h.bits_stored, h.bits_allocated
            ),
        ));
    }
    if h.rows == 0 || h.columns == 0 {
        return Err(IoError::corrupt(
            p,
            format!("an image of {} x {} pixels", h.columns, h.rows),
        ));
    }
    Ok(())
}

fn describe(h: &SliceHeader) -> String {
    format!(
        "{} x {} pixels of {} bits{}",
        h.columns,
        h.rows,
        h.bits_allocated,
        if h.signed { " signed" } else { "" }
    )
}

fn v3(a: &[f64]) -> Vector3<f64> {
    Vector3::new(a[0], a[1], a[2])
}

/// Checks the slices against each other, orders them along the slice normal and places them.
#[allow(
    clippy::too_many_lines,
    reason = "one check after another on the slices' headers, in the order they are reported"
)]
fn build(
    path: &Path,
    mut slices: Vec<SliceHeader>,
    options: &OpenOptions,
    mut notes: Vec<String>,
) -> Result<Series, IoError> {
    let first = slices[0].clone();
    let fname = name(&first.path);
    for h in &slices {
        check_supported(h)?;
        if h.layout() != first.layout() {
            return Err(IoError::inconsistent(
                &h.path,
                format!(
                    "{}, expected {} like {fname}",
                    describe(h),
                    describe(&first)
                ),
            ));
        }
        if h.transfer_syntax != first.transfer_syntax {
            // allowed: each file is decoded by its own syntax; nothing to check
        }
        #[allow(
            clippy::float_cmp,
            reason = "the same decimal string gives the same f64"
        )]
        if h.slope != first.slope || h.intercept != first.intercept {
            return Err(IoError::inconsistent(
                &h.path,
                format!(
                    "rescale slope {} and intercept {} differ from {fname}'s {} and {}: slices rescaled differently",
                    h.slope, h.intercept, first.slope, first.intercept
                ),
            ));
        }
        let same_spacing = match (h.pixel_spacing, first.pixel_spacing) {
            (Some(a), Some(b)) => {
                (0..2).all(|i| (a[i] - b[i]).abs() <= 1e-4 * b[i].abs().max(1e-3))
            }
            (None, None) => true,
            _ => false,
        };
        if !same_spacing {
            return Err(IoError::inconsistent(
                &h.path,
                format!(
                    "PixelSpacing {} differs from {fname}'s {}",
                    spacing_text(h.pixel_spacing),
                    spacing_text(first.pixel_spacing)
                ),
            ));
        }
    }
    options.limits.check(
        path,
        [
            u64::from(first.columns),
            u64::from(first.rows),
            slices.len() as u64,
        ],
        if first.bits_allocated == 8 && !first.signed {
            1
        } else {
            2
        },
    )?;
    let dtype = match (first.bits_allocated, first.signed) {
        (8, false) => DType::U8,
        (8, true) => {
            notes.push("8-bit signed samples widened to i16".into());
            DType::I16
        }
        (_, false) => DType::U16,
        (_, true) => DType::I16,
    };
    if first.photometric == "MONOCHROME1" {
        notes
            .push("MONOCHROME1: the files show higher values darker; values kept as stored".into());
    }
    let mut spacing_origin = SpacingOrigin::File;
    let [row_mm, col_mm] = first.pixel_spacing.unwrap_or_else(|| {
        notes.push("no PixelSpacing: 1 mm pixels assumed".into());
        spacing_origin = SpacingOrigin::Guessed;
        [1.0, 1.0]
    });
    if !(row_mm > 0.0 && col_mm > 0.0) {
        return Err(IoError::corrupt(
            &first.path,
            format!("PixelSpacing {row_mm}\\{col_mm} is not positive"),
        ));
    }
    // the slices' placement, LPS
    let lps = if slices.len() == 1 && (first.orientation.is_none() || first.position.is_none()) {
        notes.push(
            "one slice without ImageOrientationPatient/ImagePositionPatient: placed at the origin, rows along x, 1 mm thick"
                .into(),
        );
        spacing_origin = SpacingOrigin::Guessed;
        Matrix3::from_diagonal(&Vector3::new(col_mm, row_mm, 1.0)).to_homogeneous()
    } else {
        let (m, note) = place(&mut slices, col_mm, row_mm)?;
        notes.extend(note);
        m
    };
    // LPS to RAS: negate x and y (see the module docs)
    let ras_from_lps =
        nalgebra::Matrix4::from_diagonal(&nalgebra::Vector4::new(-1.0, -1.0, 1.0, 1.0));
    let m = ras_from_lps * lps;
    let world_from_voxel = Affine3::from_matrix(m)
        .map_err(|e| IoError::corrupt(&first.path, format!("the slices' placement: {e}")))?;
    let o = first.orientation.unwrap_or([1.0, 0.0, 0.0, 0.0, 1.0, 0.0]);
    notes.insert(
        0,
        format!(
            "DICOM series {}; ImageOrientationPatient {} (LPS); slice step {} mm from ImagePositionPatient; world = LPS with x and y negated (RAS, as NIfTI)",
            summary(&slices),
            crate::message::numbers(&o),
            short(world_from_voxel.column_lengths()[2]),
        ),
    );
    Ok(Series {
        path: path.to_owned(),
        dims: [
            usize::from(first.columns),
            usize::from(first.rows),
            slices.len(),
        ],
        dtype,
        world_from_voxel,
        rescale: Rescale::new(first.slope, first.intercept),
        notes,
        spacing_origin,
        slices,
    })
}

fn spacing_text(s: Option<[f64; 2]>) -> String {
    s.map_or_else(|| "(none)".into(), |s| format!("{}\\{}", s[0], s[1]))
}

/// Orders `slices` along their normal and returns the LPS `world_from_voxel` (4×4).
#[allow(
    clippy::too_many_lines,
    reason = "one check after another on the slices' positions, in the order they are reported"
)]
fn place(
    slices: &mut [SliceHeader],
    col_mm: f64,
    row_mm: f64,
) -> Result<(nalgebra::Matrix4<f64>, Option<String>), IoError> {
    let first = slices[0].clone();
    let fname = name(&first.path);
    let Some(o) = first.orientation else {
        return Err(IoError::corrupt(
            &first.path,
            "no ImageOrientationPatient (0020,0037): the slices cannot be ordered",
        ));
    };
    let (x, y) = (v3(&o[..3]), v3(&o[3..]));
    if (x.norm() - 1.0).abs() > ORTHONORMAL_TOLERANCE
        || (y.norm() - 1.0).abs() > ORTHONORMAL_TOLERANCE
        || x.dot(&y).abs() > ORTHONORMAL_TOLERANCE
    {
        return Err(IoError::corrupt(
            &first.path,
            format!(
                "ImageOrientationPatient {} is not two perpendicular unit vectors",
                crate::message::numbers(&o)
            ),
        ));
    }
    let normal = x.cross(&y);
    let mut keyed = Vec::with_capacity(slices.len());
    for h in slices.iter() {
        let Some(ho) = h.orientation else {
            return Err(IoError::corrupt(
                &h.path,
                "no ImageOrientationPatient (0020,0037): the slices cannot be ordered",
            ));
        };
        if ho
            .iter()
            .zip(&o)
            .any(|(a, b)| (a - b).abs() > ORIENTATION_TOLERANCE)
        {
            return Err(IoError::inconsistent(
                &h.path,
                format!(
                    "ImageOrientationPatient {} differs from {fname}'s {}: mixed orientations in one series",
                    crate::message::numbers(&ho),
                    crate::message::numbers(&o)
                ),
            ));
        }
        let Some(p) = h.position else {
            return Err(IoError::corrupt(
                &h.path,
                "no ImagePositionPatient (0020,0032): the slices cannot be ordered",
            ));
        };
        keyed.push(normal.dot(&v3(&p)));
    }
    let mut order: Vec<usize> = (0..slices.len()).collect();
    order.sort_by(|&a, &b| keyed[a].total_cmp(&keyed[b]));
    let sorted: Vec<SliceHeader> = order.iter().map(|&i| slices[i].clone()).collect();
    let d: Vec<f64> = order.iter().map(|&i| keyed[i]).collect();
    slices.clone_from_slice(&sorted);
    let pos = |k: usize| v3(&slices[k].position.expect("checked above"));
    let n = slices.len();
    let k_column = if n == 1 {
        normal
    } else {
        let steps: Vec<f64> = d.windows(2).map(|w| w[1] - w[0]).collect();
        let mut sorted_steps = steps.clone();
        sorted_steps.sort_by(f64::total_cmp);
        let typical = sorted_steps[sorted_steps.len() / 2];
        let tol = (SPACING_TOLERANCE * typical.abs()).max(MIN_TOLERANCE_MM);
        for (k, &s) in steps.iter().enumerate() {
            let (a, b) = (name(&slices[k].path), name(&slices[k + 1].path));
            if s <= MIN_TOLERANCE_MM {
                return Err(IoError::inconsistent(
                    &slices[k + 1].path,
                    format!(
                        "{a} and {b} lie at the same position ({} mm along the slice normal): two acquisitions in one series?",
                        fmt_mm(d[k])
                    ),
                ));
            }
            if (s - typical).abs() > tol {
                let ratio = s / typical;
                let what = if ratio > 1.5 && (ratio - ratio.round()).abs() * typical <= tol {
                    format!(
                        "a gap: {a} and {b} are {} mm apart where the other slices are {} mm apart ({} slice{} missing?)",
                        fmt_mm(s),
                        fmt_mm(typical),
                        ratio.round() - 1.0,
                        if ratio.round() > 2.0 { "s" } else { "" }
                    )
                } else {
                    format!(
                        "uneven slice spacing: {a} and {b} are {} mm apart where the other slices are {} mm apart (tolerance {} mm)",
                        fmt_mm(s),
                        fmt_mm(typical),
                        fmt_mm(tol)
                    )
                };
                return Err(IoError::inconsistent(&slices[k + 1].path, what));
            }
        }
        let col = (pos(n - 1) - pos(0)) / (n - 1) as f64;
        // every position on the line from the first to the last
        for (k, slice) in slices.iter().enumerate().take(n - 1).skip(1) {
            let off = (pos(k) - (pos(0) + col * k as f64)).norm();
            if off > tol {
                return Err(IoError::inconsistent(
                    &slice.path,
                    format!(
                        "ImagePositionPatient is {} mm off the line through the other slices' positions",
                        fmt_mm(off)
                    ),
                ));
            }
        }
        col
    };
    let mut note = None;
    if n > 1 {
        let along = k_column.normalize().dot(&normal);
        if along < 1.0 - 1e-6 {
            note = Some(format!(
                "the slices are sheared by {:.3}° from their normal (gantry tilt); the placement keeps the shear",
                along.clamp(-1.0, 1.0).acos().to_degrees()
            ));
        }
    }
    let mut m = nalgebra::Matrix4::identity();
    m.fixed_view_mut::<3, 1>(0, 0).copy_from(&(x * col_mm));
    m.fixed_view_mut::<3, 1>(0, 1).copy_from(&(y * row_mm));
    m.fixed_view_mut::<3, 1>(0, 2).copy_from(&k_column);
    m.fixed_view_mut::<3, 1>(0, 3).copy_from(&pos(0));
    Ok((m, note))
}

fn fmt_mm(v: f64) -> String {
    short(v)
}

/// A length to 6 decimals without trailing zeros (decimal strings' last bits are noise).
fn short(v: f64) -> String {
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.to_owned() }
}
