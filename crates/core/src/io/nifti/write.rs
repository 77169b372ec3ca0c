//! The writer: NIfTI-1 `.nii` or `.nii.gz` (chosen by extension), voxels in their stored type.
//!
//! Header choices: `sform_code = qform_code = 1` (`NIFTI_XFORM_SCANNER_ANAT`: the scan's own
//! world frame); the sform is `world_from_voxel`, the qform its rotation as a quaternion with
//! `qfac = pixdim[0] = -1` for a left-handed grid, or `qform_code = 0` when the linear part has
//! shear (reference: nifti1.h, METHOD 2/3; `nifti1_io.c` `nifti_mat44_to_quatern`);
//! `xyzt_units = 2` (mm); `vox_offset = 352`; the rescale as `scl_slope` / `scl_inter`.
//!
//! Precision: NIfTI-1 stores srow, quaternion, pixdim and scl_* as float32, so the affine and
//! the rescale come back rounded to f32 (relative error ≤ 6e-8: 6 nm across a 100 mm scan).
//! Voxels and the voxel type round-trip exactly. Axes longer than 32,767 voxels do not fit
//! NIfTI-1's int16 `dim`; such volumes are written as NIfTI-2 (float64 fields, same layout of
//! the file otherwise).

use super::header::{Header, Version, linear_to_quatern};
use crate::io::IoError;
use crate::volume::{DType, Volume};
use std::io::Write;
use std::path::Path;

/// Bytes handed to the file (or the deflater) per `write` call.
const WRITE_CHUNK_BYTES: usize = 8 << 20;

/// The header that [`write`] puts in front of `volume`'s voxels.
#[must_use]
pub fn header_for(volume: &Volume) -> Header {
    let dims = volume.dims();
    let version = if dims.iter().all(|&d| i16::try_from(d).is_ok()) {
        Version::Nifti1
    } else {
        Version::Nifti2
    };
    let (datatype, bitpix) = match volume.dtype() {
        DType::U8 => (2, 8),
        DType::I16 => (4, 16),
        DType::U16 => (512, 16),
        DType::F32 => (16, 32),
    };
    let a = volume.world_from_voxel();
    let rows = a.rows();
    let lin = a.linear();
    let (qform_code, quatern, spacing, qfac) = match linear_to_quatern(&lin) {
        Some((q, s, qfac)) => (1, q, s, qfac),
        None => (0, [0.0; 3], a.column_lengths(), 1.0),
    };
    let (scl_slope, scl_inter) = volume
        .rescale()
        .map_or((1.0, 0.0), |r| (r.slope, r.intercept));
    Header {
        version,
        big_endian: false,
        single_file: true,
        dim: [
            3,
            dims[0] as i64,
            dims[1] as i64,
            dims[2] as i64,
            1,
            1,
            1,
            1,
        ],
        datatype,
        bitpix,
        pixdim: [qfac, spacing[0], spacing[1], spacing[2], 0.0, 0.0, 0.0, 0.0],
        vox_offset: (version.header_len() + 4) as f64,
        scl_slope,
        scl_inter,
        xyzt_units: 2,
        intent_code: 0,
        qform_code,
        sform_code: 1,
        quatern,
        qoffset: [rows[0][3], rows[1][3], rows[2][3]],
        srow: [rows[0], rows[1], rows[2]],
        descrip: "sutura".into(),
    }
}

/// Writes `volume` as a single-file `NIfTI` (`.nii`, or gzip-compressed when the name ends in
/// `.gz`). See the module docs for the header it writes and its precision.
#[allow(
    clippy::case_sensitive_file_extension_comparisons,
    reason = "`name` is lowercased first"
)]
pub fn write(volume: &Volume, path: &Path) -> Result<(), IoError> {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    if !(name.ends_with(".nii") || name.ends_with(".nii.gz")) {
        return Err(IoError::usage(
            path,
            "a NIfTI file name must end in .nii or .nii.gz",
        ));
    }
    if cfg!(target_endian = "big") {
        return Err(IoError::unsupported(
            path,
            "writing on a big-endian machine",
        ));
    }
    let header = header_for(volume).to_bytes();
    let body: &[u8] = crate::with_voxels!(volume.voxels(), |s| bytemuck::cast_slice(s));
    // atomically: a crash or a full disk leaves the previous file or none, never half a scan
    crate::export::write_atomic(path, |w| {
        if name.ends_with(".gz") {
            let mut enc = flate2::write::GzEncoder::new(w, flate2::Compression::new(6));
            enc.write_all(&header)?;
            for c in body.chunks(WRITE_CHUNK_BYTES) {
                enc.write_all(c)?;
            }
            enc.finish().map(|_| ())
        } else {
            w.write_all(&header)?;
            for c in body.chunks(WRITE_CHUNK_BYTES) {
                w.write_all(c)?;
            }
            Ok(())
        }
    })
    .map_err(IoError::from)?;
    Ok(())
}
