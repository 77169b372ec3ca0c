//! Scan fingerprints: what tells that the scan at a path is still the one that was digitised.
//!
//! Landmarks are world coordinates in the frame of one particular scan. If a file is replaced
//! by another specimen's scan, or re-exported with a different crop or voxel size, the stored
//! positions silently mean something else. A [`Fingerprint`] is recorded when a specimen is
//! added and compared whenever its scan is opened:
//!
//! - `files`, `bytes`: the number of files (1, or the slices of a folder) and their total size;
//! - `head_sha256`: SHA-256 over the first [`HEAD_BYTES`] of the file (its header and the start
//!   of the data); for a folder of slices, over each slice's name, size and first
//!   [`SLICE_HEAD_BYTES`], in the loader's order;
//! - `dims`, `dtype`: the grid and the stored voxel type as loaded;
//! - `voxels_sha256`: SHA-256 over the stored values of the voxels on a regular lattice of up to
//!   [`LATTICE`]³ points (both ends of each axis included), each value as the little-endian
//!   bytes of its `f64` (exact for every stored type, so the hash is the same on any machine).
//!
//! The first three can be checked without loading the scan ([`Fingerprint::check_files`]); the
//! last two need the loaded volume ([`Fingerprint::check_volume`]). A mismatch is described in
//! words ([`Mismatch`]), one line per field that differs.

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::{Path, PathBuf};

use crate::io::{self, Format, IoError, Limits};
use crate::volume::Volume;

/// Bytes of a scan file hashed into `head_sha256`.
pub const HEAD_BYTES: u64 = 64 * 1024;
/// Bytes of each slice of a folder hashed into `head_sha256`.
pub const SLICE_HEAD_BYTES: u64 = 4 * 1024;
/// Lattice points per axis for `voxels_sha256`.
pub const LATTICE: usize = 17;

/// What identifies a scan (see the module docs).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Fingerprint {
    pub files: u64,
    pub bytes: u64,
    pub head_sha256: String,
    pub dims: [usize; 3],
    pub dtype: String,
    pub voxels_sha256: String,
}

/// The part of a fingerprint read from the file system alone.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct FileFacts {
    pub files: u64,
    pub bytes: u64,
    pub head_sha256: String,
}

/// How a scan differs from its fingerprint: one line per differing field.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Mismatch {
    pub path: PathBuf,
    pub differences: Vec<String>,
}

impl std::fmt::Display for Mismatch {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{} is not the scan this specimen was digitised on: {}",
            self.path.display(),
            self.differences.join("; ")
        )
    }
}

impl Fingerprint {
    /// The fingerprint of a scan at `path`, loaded as `volume`.
    pub fn of(path: &Path, volume: &Volume) -> Result<Self, IoError> {
        let facts = file_facts(path)?;
        Ok(Self {
            files: facts.files,
            bytes: facts.bytes,
            head_sha256: facts.head_sha256,
            dims: volume.dims(),
            dtype: volume.dtype().name().to_owned(),
            voxels_sha256: voxel_sample_sha256(volume),
        })
    }

    /// The fingerprint of a scan of any size at `path`, read through the volume interface.
    pub fn of_source(
        path: &Path,
        source: &dyn crate::volume::VolumeSource,
    ) -> Result<Self, IoError> {
        let facts = file_facts(path)?;
        Ok(Self {
            files: facts.files,
            bytes: facts.bytes,
            head_sha256: facts.head_sha256,
            dims: source.dims(),
            dtype: source.dtype().name().to_owned(),
            voxels_sha256: voxel_sample_sha256_of(source).map_err(|e| IoError::Corrupt {
                path: path.to_owned(),
                what: e.to_string(),
            })?,
        })
    }

    /// Compares the files at `path` with the fingerprint without loading them.
    pub fn check_files(&self, path: &Path) -> Result<Option<Mismatch>, IoError> {
        let facts = file_facts(path)?;
        let mut differences = Vec::new();
        if facts.files != self.files {
            differences.push(format!("{} files, recorded {}", facts.files, self.files));
        }
        if facts.bytes != self.bytes {
            differences.push(format!("{} bytes, recorded {}", facts.bytes, self.bytes));
        }
        if facts.head_sha256 != self.head_sha256 {
            differences.push(format!(
                "header hash {}…, recorded {}…",
                &facts.head_sha256[..12],
                short(&self.head_sha256)
            ));
        }
        Ok(Self::mismatch(path, differences))
    }

    /// Compares a loaded volume with the fingerprint's grid, type and sampled voxels.
    #[must_use]
    pub fn check_volume(&self, path: &Path, volume: &Volume) -> Option<Mismatch> {
        let sampled = voxel_sample_sha256(volume);
        self.compare_voxels(path, volume.dims(), volume.dtype().name(), &sampled)
    }

    /// What differs between the record and a scan's grid, voxel type and sampled voxels.
    fn compare_voxels(
        &self,
        path: &Path,
        dims: [usize; 3],
        dtype: &str,
        sampled: &str,
    ) -> Option<Mismatch> {
        let mut differences = Vec::new();
        if dims != self.dims {
            differences.push(format!(
                "grid {}, recorded {}",
                crate::message::numbers(&dims),
                crate::message::numbers(&self.dims)
            ));
        }
        if dtype != self.dtype {
            differences.push(format!("voxel type {dtype}, recorded {}", self.dtype));
        }
        if sampled != self.voxels_sha256 {
            differences.push(format!(
                "sampled voxels hash {}…, recorded {}…",
                &sampled[..12],
                short(&self.voxels_sha256)
            ));
        }
        Self::mismatch(path, differences)
    }

    /// [`Fingerprint::check_volume`] for a scan of any size, read through the volume interface
    /// (the sampled voxels only).
    pub fn check_source(
        &self,
        path: &Path,
        source: &dyn crate::volume::VolumeSource,
    ) -> Result<Option<Mismatch>, crate::volume::ReadError> {
        let sampled = voxel_sample_sha256_of(source)?;
        Ok(self.compare_voxels(path, source.dims(), source.dtype().name(), &sampled))
    }

    fn mismatch(path: &Path, differences: Vec<String>) -> Option<Mismatch> {
        (!differences.is_empty()).then(|| Mismatch {
            path: path.to_owned(),
            differences,
        })
    }
}

fn short(hex: &str) -> &str {
    hex.get(..12).unwrap_or(hex)
}

use crate::landmarks::scheme::hex;

/// Reads the file-system part of a fingerprint.
pub fn file_facts(path: &Path) -> Result<FileFacts, IoError> {
    let os = |e| IoError::Os {
        path: path.to_owned(),
        source: e,
    };
    if crate::store::is_store(path) {
        // a store: its files and its group metadata (which holds the source's fingerprint,
        // the placement and the intensity facts)
        let meta = ["zarr.json", ".zattrs"]
            .iter()
            .map(|n| path.join(n))
            .find(|p| p.is_file())
            .unwrap_or_else(|| path.join("zarr.json"));
        let (mut files, mut bytes) = (0u64, 0u64);
        let mut stack = vec![path.to_owned()];
        while let Some(d) = stack.pop() {
            for e in std::fs::read_dir(&d).map_err(os)? {
                let e = e.map_err(os)?;
                let m = e.metadata().map_err(os)?;
                if m.is_dir() {
                    stack.push(e.path());
                } else {
                    files += 1;
                    bytes += m.len();
                }
            }
        }
        return Ok(FileFacts {
            files,
            bytes,
            head_sha256: hex(&Sha256::digest(head(&meta, HEAD_BYTES)?)),
        });
    }
    let format = io::detect(path)?;
    if format == Format::TiffFolder || (format == Format::Dicom && path.is_dir()) {
        let slices = if format == Format::Dicom {
            io::dicom::dicom_files(path, Limits::default().max_slices)?
        } else {
            io::tiff::list_slices(path, Limits::default().max_slices)?
        };
        let mut h = Sha256::new();
        let mut bytes = 0u64;
        for s in &slices {
            let size = std::fs::metadata(s).map_err(os)?.len();
            let name = s.file_name().unwrap_or_default().to_string_lossy();
            h.update((name.len() as u64).to_le_bytes());
            h.update(name.as_bytes());
            h.update(size.to_le_bytes());
            h.update(head(s, SLICE_HEAD_BYTES)?);
            bytes += size;
        }
        return Ok(FileFacts {
            files: slices.len() as u64,
            bytes,
            head_sha256: hex(&h.finalize()),
        });
    }
    let size = std::fs::metadata(path).map_err(os)?.len();
    Ok(FileFacts {
        files: 1,
        bytes: size,
        head_sha256: hex(&Sha256::digest(head(path, HEAD_BYTES)?)),
    })
}

fn head(path: &Path, n: u64) -> Result<Vec<u8>, IoError> {
    let os = |e| IoError::Os {
        path: path.to_owned(),
        source: e,
    };
    let mut buf = Vec::new();
    std::fs::File::open(path)
        .map_err(os)?
        .take(n)
        .read_to_end(&mut buf)
        .map_err(os)?;
    Ok(buf)
}

/// The lattice coordinates along an axis of `n` voxels: up to [`LATTICE`] evenly spaced
/// indices including 0 and `n - 1`, without repeats.
fn lattice(n: usize) -> Vec<usize> {
    let m = LATTICE.min(n);
    if m <= 1 {
        return vec![0; usize::from(n > 0)];
    }
    let mut v: Vec<usize> = (0..m).map(|i| i * (n - 1) / (m - 1)).collect();
    v.dedup();
    v
}

/// [`voxel_sample_sha256`] of a scan of any size, reading each lattice voxel through the volume
/// interface (in parallel); equal to it for the same voxels.
pub fn voxel_sample_sha256_of(
    source: &dyn crate::volume::VolumeSource,
) -> Result<String, crate::volume::ReadError> {
    use rayon::prelude::*;
    if let Some(v) = source.whole() {
        return Ok(voxel_sample_sha256(v));
    }
    let [nx, ny, nz] = source.dims();
    let points: Vec<[usize; 3]> = lattice(nz)
        .into_iter()
        .flat_map(|k| {
            lattice(ny)
                .into_iter()
                .flat_map(move |j| lattice(nx).into_iter().map(move |i| [i, j, k]))
        })
        .collect();
    let values: Vec<f64> = points
        .par_iter()
        .map(|&[i, j, k]| {
            let b = source.read_block(0, &[i..i + 1, j..j + 1, k..k + 1])?;
            let at = b.world_to_voxel(source.world_from_voxel().voxel_to_world(
                crate::geometry::VoxelPoint::new(i as f64, j as f64, k as f64),
            ));
            let v = at
                .nearest_index(b.dims())
                .expect("the block holds the voxel asked for");
            Ok(b.voxels().raw_f64(b.linear_index(v)))
        })
        .collect::<Result<_, crate::volume::ReadError>>()?;
    let mut h = Sha256::new();
    for v in values {
        h.update(v.to_le_bytes());
    }
    Ok(hex(&h.finalize()))
}

/// SHA-256 of the stored values on the sampling lattice (see the module docs).
#[must_use]
pub fn voxel_sample_sha256(volume: &Volume) -> String {
    let [nx, ny, nz] = volume.dims();
    let voxels = volume.voxels();
    let mut h = Sha256::new();
    for &k in &lattice(nz) {
        for &j in &lattice(ny) {
            for &i in &lattice(nx) {
                let idx = i + nx * (j + ny * k);
                h.update(voxels.raw_f64(idx).to_le_bytes());
            }
        }
    }
    hex(&h.finalize())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;

    fn volume(seed: u16) -> Volume {
        let dims = [20, 9, 5];
        let data: Vec<u16> = (0..900u16)
            .map(|i| i.wrapping_mul(7).wrapping_add(seed))
            .collect();
        Volume::from_vec(dims, Affine3::from_spacing([0.1, 0.1, 0.2]), data).unwrap()
    }

    #[test]
    fn lattice_covers_both_ends() {
        assert_eq!(lattice(1), vec![0]);
        assert_eq!(lattice(3), vec![0, 1, 2]);
        let l = lattice(1000);
        assert_eq!((l.len(), l[0], l[16]), (17, 0, 999));
    }

    #[test]
    fn detects_a_swapped_file_and_changed_voxels() {
        let dir = tempfile::tempdir().unwrap();
        let a = dir.path().join("a.nii");
        let b = dir.path().join("b.nii");
        crate::io::nifti::write(&volume(0), &a).unwrap();
        crate::io::nifti::write(&volume(1), &b).unwrap();
        let fa = Fingerprint::of(&a, &volume(0)).unwrap();
        assert_eq!(fa.check_files(&a).unwrap(), None);
        assert_eq!(fa.check_volume(&a, &volume(0)), None);
        // same size, same header, different voxels
        let m = fa.check_files(&b).unwrap().expect("header region differs");
        assert!(m.to_string().contains("header hash"), "{m}");
        let m = fa.check_volume(&b, &volume(1)).expect("voxels differ");
        assert_eq!(m.differences.len(), 1, "{m}");
        assert!(m.differences[0].starts_with("sampled voxels hash"), "{m}");
    }
}
