//! Starting a project and adding specimens: the rules `sutura project new/add` and the
//! workstation's new-project dialog share — where the scheme copy says it came from, which id a
//! scan proposes, how a scan's voxel size is chosen and recorded, and how a group is written.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::{Project, ScanRecord, Specimen, VoxelSizeSource, project_dir, relative_path};
use crate::io::{self, IoError, Progress};
use crate::landmarks::fingerprint::Fingerprint;
use crate::landmarks::scan::{open_scan, open_source, set_voxel_size};
use crate::landmarks::scheme::{Scheme, SchemeError, is_valid_id};
use crate::volume::{SpacingOrigin, Volume};

/// Why a project or a specimen cannot be made.
#[derive(Debug, thiserror::Error)]
pub enum CreateError {
    #[error(transparent)]
    Scheme(#[from] SchemeError),
    #[error(transparent)]
    Io(#[from] IoError),
    #[error(
        "{}: specimen id '{id}' is not valid (1-64 ASCII letters, digits, _ . -, starting with a letter or digit)",
        scan.display()
    )]
    BadId { scan: PathBuf, id: String },
    #[error("group '{0}': write KEY=VALUE (KEY= removes it)")]
    GroupSyntax(String),
    #[error(
        "group '{0}': the key must be 1-64 ASCII letters, digits, _ . - starting with a letter or digit"
    )]
    GroupKey(String),
}

/// A new project using the scheme file at `scheme`, to be saved at `project_file`: the project
/// keeps a copy of the scheme's text and where it came from (relative to the project's folder
/// when it can be).
pub fn project_from_scheme_file(
    scheme: &Path,
    project_file: &Path,
) -> Result<Project, CreateError> {
    let (_, text) = Scheme::load(scheme)?;
    let origin = relative_path(&project_dir(project_file), scheme)
        .unwrap_or_else(|_| scheme.display().to_string());
    Ok(Project::new(text, origin)?)
}

/// Reads a group as typed: `KEY=VALUE` sets it, `KEY=` removes it (`None`).
pub fn parse_group(text: &str) -> Result<(String, Option<String>), CreateError> {
    let (k, v) = text
        .split_once('=')
        .ok_or_else(|| CreateError::GroupSyntax(text.to_owned()))?;
    let k = k.trim();
    if !is_valid_id(k) {
        return Err(CreateError::GroupKey(text.to_owned()));
    }
    let v = v.trim();
    Ok((k.to_owned(), (!v.is_empty()).then(|| v.to_owned())))
}

/// What is needed to add a specimen from a scan.
#[derive(Clone, Debug, PartialEq)]
pub struct NewSpecimen {
    pub scan: PathBuf,
    pub id: String,
    /// The voxel size to use (mm); `None`: the file's own, which must be recorded in full.
    pub voxel_size_mm: Option<[f64; 3]>,
    pub groups: BTreeMap<String, String>,
}

impl NewSpecimen {
    /// A specimen for `scan` with the id its name proposes, the file's voxel size, no groups.
    #[must_use]
    pub fn for_scan(scan: &Path) -> Self {
        Self {
            scan: scan.to_owned(),
            id: io::names::specimen_id_from_scan(scan),
            voxel_size_mm: None,
            groups: BTreeMap::new(),
        }
    }
}

/// What a scan's own file says about its voxel size, for a user deciding whether to give one.
#[derive(Clone, Debug, PartialEq)]
pub struct FileVoxelSize {
    /// The voxel size read from the file (mm), if any part of it is recorded.
    pub voxel_size_mm: [f64; 3],
    /// Whether the file records it in full; if not, a voxel size must be given.
    pub complete: bool,
    /// What the file said, in words (from the loader's notes).
    pub note: String,
}

impl FileVoxelSize {
    /// What a loaded volume says about its voxel size.
    #[must_use]
    pub fn of(volume: &Volume) -> Self {
        Self::from_parts(volume.spacing_mm(), volume.spacing_origin, &volume.notes)
    }

    /// What a scan's header says about its voxel size (no voxel is read).
    #[must_use]
    pub fn of_header(reader: &dyn crate::io::slices::SliceReader) -> Self {
        Self::from_parts(
            reader.world_from_voxel().column_lengths(),
            reader.spacing_origin(),
            &reader.notes(),
        )
    }

    fn from_parts(spacing_mm: [f64; 3], origin: SpacingOrigin, notes: &[String]) -> Self {
        let complete = origin != SpacingOrigin::Guessed;
        let note = if complete {
            "recorded in the file".to_owned()
        } else {
            notes
                .iter()
                .find(|n| n.contains("voxel size"))
                .cloned()
                .unwrap_or_else(|| "not recorded in the file".to_owned())
        };
        Self {
            voxel_size_mm: spacing_mm,
            complete,
            note,
        }
    }
}

/// The refusal of a scan that records no full voxel size when none is given.
fn no_voxel_size(scan: &Path) -> CreateError {
    IoError::usage(
        scan,
        "the scan records no full voxel size (TIFF resolution tags hold no slice spacing): \
         give it, e.g. 12um or 12um,12um,30um",
    )
    .into()
}

/// A scan's grid and what it says about its voxel size, from its header alone (a front end's
/// list of scans to add, whatever their size).
pub fn probe_scan(path: &Path) -> Result<([usize; 3], FileVoxelSize), IoError> {
    let reader = crate::landmarks::scan::open_scan_slices_with(path, &io::OpenOptions::default())?;
    Ok((reader.dims(), FileVoxelSize::of_header(reader.as_ref())))
}

/// Records a scan already loaded (without a voxel size given) as a new specimen of the project
/// at `project_file`: applies `new.voxel_size_mm` as opening it with that size would, takes the
/// fingerprint, and stores the path relative to the project's folder. The volume is returned
/// placed as recorded.
pub fn specimen_from_loaded(
    project_file: &Path,
    new: &NewSpecimen,
    mut volume: Volume,
) -> Result<(Specimen, Volume), CreateError> {
    if !is_valid_id(&new.id) {
        return Err(CreateError::BadId {
            scan: new.scan.clone(),
            id: new.id.clone(),
        });
    }
    if let Some(s) = new.voxel_size_mm {
        if s.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
            return Err(IoError::usage(
                &new.scan,
                format!("voxel size {s:?} mm is not positive and finite"),
            )
            .into());
        }
        set_voxel_size(&mut volume, io::detect(&new.scan)?, s);
    } else if volume.spacing_origin == SpacingOrigin::Guessed {
        return Err(no_voxel_size(&new.scan));
    }
    let fingerprint = Fingerprint::of(&new.scan, &volume)?;
    let path = relative_path(&project_dir(project_file), &new.scan)
        .map_err(|e| IoError::os(&new.scan, e))?;
    let record = ScanRecord {
        path,
        voxel_size_mm: new.voxel_size_mm.unwrap_or_else(|| volume.spacing_mm()),
        voxel_size_source: if new.voxel_size_mm.is_some() {
            VoxelSizeSource::User
        } else {
            VoxelSizeSource::File
        },
        world_from_voxel: *volume.world_from_voxel(),
        fingerprint,
    };
    let specimen = Specimen {
        id: new.id.clone(),
        groups: new.groups.clone(),
        scan: record,
        trials: Vec::new(),
    };
    Ok((specimen, volume))
}

/// Records an OME-Zarr store as a new specimen without reading it whole: the fingerprint from
/// the sampled voxels read through the volume interface, the placement and voxel size from the
/// store (the voxel size given in `new`, if any, overrides it). Returns the specimen and the
/// store's grid.
pub fn specimen_from_store(
    project_file: &Path,
    new: &NewSpecimen,
) -> Result<(Specimen, [usize; 3]), CreateError> {
    specimen_from_source(project_file, new, None)
}

/// [`specimen_from_store`] of the scan `new.scan` reading its voxels from `store` when given:
/// a store converted from it (`crate::landmarks::scan::convert_to_store`, with the same voxel
/// size). The record is the scan's: its path and file facts, the voxels sampled from the store
/// (the same voxels), so the specimen is the one [`specimen_from_scan`] would make, without
/// reading the scan whole.
pub fn specimen_from_source(
    project_file: &Path,
    new: &NewSpecimen,
    store: Option<&Path>,
) -> Result<(Specimen, [usize; 3]), CreateError> {
    if !is_valid_id(&new.id) {
        return Err(CreateError::BadId {
            scan: new.scan.clone(),
            id: new.id.clone(),
        });
    }
    // a small cache: the fingerprint reads a lattice of single voxels
    let source = open_source(store.unwrap_or(&new.scan), new.voxel_size_mm, 64 << 20)?;
    if new.voxel_size_mm.is_none() && source.spacing_origin() == SpacingOrigin::Guessed {
        return Err(no_voxel_size(&new.scan));
    }
    let fingerprint = Fingerprint::of_source(&new.scan, source.as_ref())?;
    let path = relative_path(&project_dir(project_file), &new.scan)
        .map_err(|e| IoError::os(&new.scan, e))?;
    let record = ScanRecord {
        path,
        voxel_size_mm: new
            .voxel_size_mm
            .unwrap_or_else(|| source.level(0).spacing_mm()),
        voxel_size_source: if new.voxel_size_mm.is_some() {
            VoxelSizeSource::User
        } else {
            VoxelSizeSource::File
        },
        world_from_voxel: source.world_from_voxel(),
        fingerprint,
    };
    let specimen = Specimen {
        id: new.id.clone(),
        groups: new.groups.clone(),
        scan: record,
        trials: Vec::new(),
    };
    Ok((specimen, source.dims()))
}

/// Opens a scan and records it as a new specimen (see [`specimen_from_loaded`]).
pub fn specimen_from_scan(
    project_file: &Path,
    new: &NewSpecimen,
    progress: &Progress<'_>,
) -> Result<(Specimen, Volume), CreateError> {
    let volume = open_scan(&new.scan, None, progress)?;
    specimen_from_loaded(project_file, new, volume)
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "voxel sizes typed as whole µm read back to the same doubles"
)]
mod tests {
    use super::*;

    fn sample(rel: &str) -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../../sample_volumes")
            .join(rel)
    }

    #[test]
    fn groups_are_key_value_or_a_removal() {
        assert_eq!(
            parse_group("locality = Harrowdene Clay").unwrap(),
            ("locality".into(), Some("Harrowdene Clay".into()))
        );
        assert_eq!(parse_group("sex=").unwrap(), ("sex".into(), None));
        assert!(matches!(
            parse_group("sex"),
            Err(CreateError::GroupSyntax(_))
        ));
        assert!(matches!(
            parse_group("a b=c"),
            Err(CreateError::GroupKey(_))
        ));
    }

    #[test]
    fn a_loaded_scan_records_as_opening_it_would() {
        let d = tempfile::tempdir().unwrap();
        let pf = d.path().join("p.json");
        let scan = sample("HDC-002.nii.gz");
        let new = NewSpecimen {
            voxel_size_mm: Some([0.05, 0.05, 0.06]),
            ..NewSpecimen::for_scan(&scan)
        };
        assert_eq!(new.id, "HDC-002");
        let loaded =
            crate::io::open(&scan, &io::OpenOptions::default(), &Progress::none()).unwrap();
        let (a, va) = specimen_from_loaded(&pf, &new, loaded).unwrap();
        let (b, vb) = specimen_from_scan(&pf, &new, &Progress::none()).unwrap();
        assert_eq!(a, b);
        assert_eq!(va.world_from_voxel(), vb.world_from_voxel());
        assert_eq!(a.scan.voxel_size_source, VoxelSizeSource::User);
        // and the record opens the scan placed the same way
        let (reopened, mismatch) = a.scan.open(&pf, &Progress::none()).unwrap();
        assert!(mismatch.is_none());
        assert_eq!(reopened.world_from_voxel(), va.world_from_voxel());
    }

    #[test]
    fn a_tiff_folder_without_a_full_voxel_size_needs_one() {
        let d = tempfile::tempdir().unwrap();
        let pf = d.path().join("p.json");
        let scan = sample("HDC-001_slices");
        let loaded =
            crate::io::open(&scan, &io::OpenOptions::default(), &Progress::none()).unwrap();
        let facts = FileVoxelSize::of(&loaded);
        let new = NewSpecimen::for_scan(&scan);
        assert_eq!(new.id, "HDC-001");
        if facts.complete {
            // the sample folder records its size in the description Sutura writes
            let (s, _) = specimen_from_loaded(&pf, &new, loaded).unwrap();
            assert_eq!(s.scan.voxel_size_source, VoxelSizeSource::File);
        } else {
            assert!(specimen_from_loaded(&pf, &new, loaded).is_err());
        }
        let given = NewSpecimen {
            voxel_size_mm: Some([0.036, 0.036, 0.05]),
            ..new
        };
        let (s, v) = specimen_from_scan(&pf, &given, &Progress::none()).unwrap();
        assert_eq!(s.scan.voxel_size_source, VoxelSizeSource::User);
        assert_eq!(v.spacing_mm(), [0.036, 0.036, 0.05]);
    }
}
