//! The project document: one landmark scheme and many specimens, each with its scan and its
//! digitisations (trials).
//!
//! ```text
//! Project
//! ├── scheme: the scheme text, verbatim, with where it came from and its SHA-256
//! └── specimens[]: id, group labels (free key → value), scan record, trials[]
//!     ├── scan: path relative to the project file, voxel size used and its source,
//!     │         world_from_voxel, fingerprint (see `landmarks::fingerprint`)
//!     └── trials[]: id, operator, started (RFC 3339, UTC)
//!         ├── landmarks[]: id, state (placed / missing / estimated), position_mm (world mm),
//!         │                method (slice / surface / typed / estimated), pick (for a surface
//!         │                point found along a ray: the ray, threshold, refinement), at, note
//!         └── curves[]: id, traced_mm (per segment, the control points between its anchors),
//!                       semilandmarks_mm (per segment, equal arc-length resampling), at, note
//! ```
//!
//! Invariants (checked on load and by every [`Edit`]): ids are valid ([`is_valid_id`]) and
//! unique where they must be; a trial holds only the scheme's landmarks and curves, at most once
//! each, in the scheme's order; a placed or estimated landmark has a finite position and a
//! method (`estimated` exactly when the state is), a missing one has neither; a curve has one
//! traced list per segment and, per segment, either no semilandmarks (an anchor lacks a
//! position) or exactly the scheme's count. A landmark absent from a trial has not been
//! digitised yet.
//!
//! The document's fields are private: every change goes through [`Edit::apply`], which returns
//! the edit that undoes it exactly, so the command line and the GUI share one code path and the
//! GUI's undo stack is a stack of inverses. The file format lives in [`file`]; [`points`]
//! flattens the landmarks for export.

mod check;
pub mod create;
mod edit;
pub mod file;
pub mod points;
pub mod session;

pub use check::ScanStatus;
pub use edit::{Edit, EditError};
pub use file::{
    AutosaveStatus, FORMAT_NAME, FORMAT_VERSION, ProjectError, ProjectLock, autosave_path,
    autosave_status, backup_path, is_project_file, lock_path, remove_stale_temp_files,
};
pub use session::{Session, SessionError};

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::curve;
use super::fingerprint::{Fingerprint, Mismatch};
use super::scan::{open_scan, open_source};

/// A scan behind the volume interface (see [`open_source`]).
pub type SourceBox = Box<dyn crate::volume::VolumeSource + Send + Sync>;
use super::scheme::{Scheme, SchemeError, is_valid_id, sha256_hex};
use crate::geometry::{Affine3, VoxelPoint, WorldPoint};
use crate::io::{IoError, Progress};
use crate::volume::{SpacingOrigin, Volume};

/// The scheme a project was made with: its text verbatim, so the project file stands alone.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SchemeCopy {
    /// Where the text was read from when the project was made (as given, or relative to the
    /// project file's folder when it could be made so).
    pub origin: String,
    /// SHA-256 of `text`, lowercase hex.
    pub sha256: String,
    pub text: String,
}

/// Where a scan's voxel size came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum VoxelSizeSource {
    /// The file's own header (`NIfTI`) or resolution tags (TIFF).
    File,
    /// Given by the user (usual for TIFF scans).
    User,
}

/// A specimen's scan as the project knows it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScanRecord {
    /// The scan (file or folder of slices), relative to the project file's folder, `/`
    /// separated; absolute if it could not be made relative.
    pub path: String,
    /// The voxel size used, mm along `i`, `j`, `k` (the column lengths of `world_from_voxel`).
    pub voxel_size_mm: [f64; 3],
    pub voxel_size_source: VoxelSizeSource,
    /// The map from voxel coordinates to world mm that every position of this specimen is in.
    pub world_from_voxel: Affine3,
    pub fingerprint: Fingerprint,
}

impl ScanRecord {
    /// Opens a scan for a new specimen and records it: path relative to `project_file`'s
    /// folder (which must exist), voxel size (`voxel_size_mm` if given, else the file's own;
    /// a TIFF scan without a recorded 3D voxel size needs it given), placement, fingerprint.
    pub fn create(
        project_file: &Path,
        scan: &Path,
        voxel_size_mm: Option<[f64; 3]>,
        progress: &Progress<'_>,
    ) -> Result<(Self, Volume), IoError> {
        let volume = open_scan(scan, voxel_size_mm, progress)?;
        if voxel_size_mm.is_none() && volume.spacing_origin == SpacingOrigin::Guessed {
            return Err(IoError::usage(
                scan,
                "the scan records no full voxel size (TIFF resolution tags hold no slice \
                 spacing): give it, e.g. 12um or 12um,12um,30um",
            ));
        }
        let fingerprint = Fingerprint::of(scan, &volume)?;
        let path =
            relative_path(&project_dir(project_file), scan).map_err(|e| IoError::os(scan, e))?;
        let record = Self {
            path,
            voxel_size_mm: voxel_size_mm.unwrap_or_else(|| volume.spacing_mm()),
            voxel_size_source: if voxel_size_mm.is_some() {
                VoxelSizeSource::User
            } else {
                VoxelSizeSource::File
            },
            world_from_voxel: *volume.world_from_voxel(),
            fingerprint,
        };
        Ok((record, volume))
    }

    /// Opens the recorded scan with the recorded voxel size and compares it with the record:
    /// the fingerprint and the placement (`world_from_voxel`). Returns the volume and, if it is
    /// not the scan that was recorded, what differs.
    pub fn open(
        &self,
        project_file: &Path,
        progress: &Progress<'_>,
    ) -> Result<(Volume, Option<Mismatch>), IoError> {
        let path = self.resolve(project_file);
        let files = self.fingerprint.check_files(&path)?;
        let volume = open_scan(&path, self.voxel_size_override(), progress)?;
        let voxels = self.fingerprint.check_volume(&path, &volume);
        let mismatch = self.compare(path, files, voxels, volume.world_from_voxel());
        Ok((volume, mismatch))
    }

    /// [`ScanRecord::open`] for a scan of any size: a store is read a block at a time through
    /// a chunk cache of `cache_bytes` (see [`open_source`]), with the same checks.
    pub fn open_source(
        &self,
        project_file: &Path,
        cache_bytes: u64,
    ) -> Result<(SourceBox, Option<Mismatch>), IoError> {
        self.open_source_from(project_file, None, cache_bytes)
    }

    /// [`ScanRecord::open_source`] reading the voxels from `store` when given: a store
    /// converted from the recorded scan (`crate::landmarks::scan::convert_to_store`). The
    /// recorded scan's files are checked as they are, and the voxels sampled from the store, so
    /// a store of another scan, or of the scan since changed, shows as a mismatch.
    pub fn open_source_from(
        &self,
        project_file: &Path,
        store: Option<&Path>,
        cache_bytes: u64,
    ) -> Result<(SourceBox, Option<Mismatch>), IoError> {
        let path = self.resolve(project_file);
        let files = self.fingerprint.check_files(&path)?;
        let read_from = store.unwrap_or(&path);
        let source = open_source(read_from, self.voxel_size_override(), cache_bytes)?;
        let voxels = self
            .fingerprint
            .check_source(&path, source.as_ref())
            .map_err(|e| IoError::corrupt(&path, e.to_string()))?;
        let mismatch = self.compare(path, files, voxels, &source.world_from_voxel());
        Ok((source, mismatch))
    }

    /// What differs between the record and an opened scan: its files, its sampled voxels, its
    /// placement.
    fn compare(
        &self,
        path: PathBuf,
        files: Option<Mismatch>,
        voxels: Option<Mismatch>,
        world_from_voxel: &Affine3,
    ) -> Option<Mismatch> {
        let mut differences: Vec<String> = files.map(|m| m.differences).unwrap_or_default();
        if let Some(m) = voxels {
            differences.extend(m.differences);
        }
        let (a, b) = (world_from_voxel.rows(), self.world_from_voxel.rows());
        let worst = (0..4)
            .flat_map(|r| (0..4).map(move |c| (r, c)))
            .map(|(r, c)| (a[r][c] - b[r][c]).abs())
            .fold(0.0, f64::max);
        if worst > 1e-9 {
            differences.push(format!(
                "placement (world_from_voxel) differs from the record by up to {worst:.3e} mm"
            ));
        }
        (!differences.is_empty()).then_some(Mismatch { path, differences })
    }

    /// Compares the scan's files with the record without loading it (sizes and header hashes).
    pub fn check_files(&self, project_file: &Path) -> Result<Option<Mismatch>, IoError> {
        self.fingerprint.check_files(&self.resolve(project_file))
    }

    /// The scan path resolved against the project file's folder.
    #[must_use]
    pub fn resolve(&self, project_file: &Path) -> PathBuf {
        let p = Path::new(&self.path);
        if p.is_absolute() {
            p.to_owned()
        } else {
            project_dir(project_file).join(p)
        }
    }

    /// The voxel size to open the scan with: `Some` when the user gave it.
    #[must_use]
    pub fn voxel_size_override(&self) -> Option<[f64; 3]> {
        (self.voxel_size_source == VoxelSizeSource::User).then_some(self.voxel_size_mm)
    }

    /// Continuous voxel coordinates → world mm.
    #[must_use]
    pub fn world_from_voxel_point(&self, p: [f64; 3]) -> [f64; 3] {
        let w = self
            .world_from_voxel
            .voxel_to_world(VoxelPoint::new(p[0], p[1], p[2]));
        [w.0.x, w.0.y, w.0.z]
    }

    /// World mm → continuous voxel coordinates.
    #[must_use]
    pub fn voxel_from_world_point(&self, p: [f64; 3]) -> [f64; 3] {
        let v = self
            .world_from_voxel
            .inverse()
            .world_to_voxel(WorldPoint::new(p[0], p[1], p[2]));
        [v.0.x, v.0.y, v.0.z]
    }

    /// Whether a world point lies inside the scan's grid (within half a voxel of the outer
    /// voxel centres).
    #[must_use]
    pub fn contains(&self, p: [f64; 3]) -> bool {
        let v = self.voxel_from_world_point(p);
        (0..3).all(|a| v[a] >= -0.5 && v[a] <= self.fingerprint.dims[a] as f64 - 0.5)
    }
}

/// A UTC time in RFC 3339 form (`2025-03-01T14:02:11Z`), kept as written.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub struct Timestamp(String);

impl Timestamp {
    /// Now, to the second.
    #[must_use]
    pub fn now() -> Self {
        let t = time::OffsetDateTime::now_utc()
            .replace_nanosecond(0)
            .expect("0 ns is valid");
        Self(
            t.format(&time::format_description::well_known::Rfc3339)
                .expect("a UTC time formats as RFC 3339"),
        )
    }

    /// Parses RFC 3339 with any offset and normalises it to UTC (`Z`).
    pub fn parse(text: &str) -> Result<Self, String> {
        use time::format_description::well_known::Rfc3339;
        let t = time::OffsetDateTime::parse(text, &Rfc3339)
            .map_err(|e| format!("'{text}' is not an RFC 3339 time ({e})"))?;
        let utc = t.to_offset(time::UtcOffset::UTC);
        Ok(Self(utc.format(&Rfc3339).map_err(|e| e.to_string())?))
    }

    #[must_use]
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl TryFrom<String> for Timestamp {
    type Error = String;
    fn try_from(s: String) -> Result<Self, String> {
        let t = Self::parse(&s)?;
        if t.0 == s {
            Ok(t)
        } else {
            Err(format!(
                "'{s}' is not a UTC time in RFC 3339 form (expected '{}')",
                t.0
            ))
        }
    }
}

impl From<Timestamp> for String {
    fn from(t: Timestamp) -> Self {
        t.0
    }
}

impl std::fmt::Display for Timestamp {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// The state of a digitised landmark.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum LandmarkState {
    Placed,
    /// Absent or broken on this specimen; no position.
    Missing,
    /// A position inferred rather than seen (e.g. mirrored from its bilateral partner).
    Estimated,
}

impl LandmarkState {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Placed => "placed",
            Self::Missing => "missing",
            Self::Estimated => "estimated",
        }
    }
}

/// How a position was obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Clicked on a plane view.
    Slice,
    /// Found on the material's surface along a ray (picking).
    Surface,
    /// Typed in as coordinates.
    Typed,
    /// Estimated (state `estimated`).
    Estimated,
}

impl Method {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Slice => "slice",
            Self::Surface => "surface",
            Self::Typed => "typed",
            Self::Estimated => "estimated",
        }
    }
}

/// Which boundary a pick found (see `landmarks::pick::Crossing`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum PickCrossing {
    /// From background into material.
    Entry,
    /// The search started in material; the point is where it leaves.
    Exit,
}

/// How a surface point was picked: enough to repeat the pick on the same scan.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PickRecord {
    /// Start of the ray, world mm.
    pub origin_mm: [f64; 3],
    /// Unit direction of the ray, world.
    pub direction: [f64; 3],
    /// The iso-value used, in the scan's rescaled units.
    pub threshold: f64,
    /// Whether the crossing was moved to the steepest point of the edge.
    pub refined: bool,
    pub crossing: PickCrossing,
}

impl PickRecord {
    /// The record of `pick`, found from `origin` along `direction` at `threshold`; `None` for a
    /// point on the volume's face, which is no surface.
    #[must_use]
    pub fn of(
        origin: crate::geometry::WorldPoint,
        direction: nalgebra::Vector3<f64>,
        threshold: f64,
        pick: &crate::landmarks::pick::Pick,
    ) -> Option<Self> {
        use crate::landmarks::pick::Crossing;
        let crossing = match pick.crossing {
            Crossing::Entry => PickCrossing::Entry,
            Crossing::Exit => PickCrossing::Exit,
            Crossing::VolumeFace => return None,
        };
        let (o, d) = (origin.0, direction);
        Some(Self {
            origin_mm: [o.x, o.y, o.z],
            direction: [d.x, d.y, d.z],
            threshold,
            refined: pick.refined,
            crossing,
        })
    }
}

/// One landmark of one trial.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LandmarkEntry {
    pub id: String,
    pub state: LandmarkState,
    /// World mm; `None` exactly when missing.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub position_mm: Option<[f64; 3]>,
    /// `None` exactly when missing.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub method: Option<Method>,
    /// For a point picked along a ray (method `surface`): how (format version 2 on).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pick: Option<PickRecord>,
    /// When the state or position was last set.
    pub at: Timestamp,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

/// One curve of one trial.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CurveEntry {
    pub id: String,
    /// Per segment (between consecutive anchors): the control points the user traced, world
    /// mm, strictly between the two anchors, in tracing order.
    pub traced_mm: Vec<Vec<[f64; 3]>>,
    /// Per segment: the scheme's number of semilandmarks, at equal arc length along
    /// anchor → traced points → anchor; empty while either anchor has no position.
    pub semilandmarks_mm: Vec<Vec<[f64; 3]>>,
    pub at: Timestamp,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

impl CurveEntry {
    /// All semilandmarks in curve order, or `None` while a segment lacks them.
    #[must_use]
    pub fn semilandmarks(&self, def: &super::scheme::CurveDef) -> Option<Vec<[f64; 3]>> {
        let mut out = Vec::with_capacity(def.total_semilandmarks());
        for (seg, &n) in self.semilandmarks_mm.iter().zip(&def.semilandmarks) {
            if seg.len() != n {
                return None;
            }
            out.extend_from_slice(seg);
        }
        Some(out)
    }
}

/// One digitisation of a specimen by one operator.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Trial {
    pub id: String,
    pub operator: String,
    pub started: Timestamp,
    pub landmarks: Vec<LandmarkEntry>,
    pub curves: Vec<CurveEntry>,
}

impl Trial {
    /// An empty trial.
    #[must_use]
    pub fn new(id: &str, operator: &str, started: Timestamp) -> Self {
        Self {
            id: id.to_owned(),
            operator: operator.to_owned(),
            started,
            landmarks: Vec::new(),
            curves: Vec::new(),
        }
    }

    #[must_use]
    pub fn landmark(&self, id: &str) -> Option<&LandmarkEntry> {
        self.landmarks.iter().find(|l| l.id == id)
    }

    /// The position of a placed or estimated landmark.
    #[must_use]
    pub fn position(&self, id: &str) -> Option<[f64; 3]> {
        self.landmark(id).and_then(|l| l.position_mm)
    }

    #[must_use]
    pub fn curve(&self, id: &str) -> Option<&CurveEntry> {
        self.curves.iter().find(|c| c.id == id)
    }
}

/// One specimen: its scan and its trials.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Specimen {
    pub id: String,
    /// Free labels such as `locality`, `horizon`, `group`; sorted by key.
    pub groups: BTreeMap<String, String>,
    pub scan: ScanRecord,
    pub trials: Vec<Trial>,
}

impl Specimen {
    #[must_use]
    pub fn trial(&self, id: &str) -> Option<&Trial> {
        self.trials.iter().find(|t| t.id == id)
    }

    /// The id a new trial of this specimen gets: one more than the largest number among its
    /// trial ids (`1` for the first), so trial numbers follow the order trials were started
    /// in even after one is deleted (trials {1, 3} → 4). The one rule both front ends use.
    #[must_use]
    pub fn next_trial_id(&self) -> String {
        let largest = self
            .trials
            .iter()
            .filter_map(|t| t.id.parse::<u64>().ok())
            .max()
            .unwrap_or(0);
        // a non-numeric id cannot collide with a number, so largest + 1 is free
        largest.saturating_add(1).to_string()
    }
}

/// How far a trial has got.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct TrialProgress {
    pub landmarks_total: usize,
    pub placed: usize,
    pub estimated: usize,
    pub missing: usize,
    pub curves_total: usize,
    /// Curves traced with all their semilandmarks computed.
    pub curves_done: usize,
}

impl TrialProgress {
    /// Landmarks with a decision (placed, estimated or missing).
    #[must_use]
    pub const fn landmarks_done(&self) -> usize {
        self.placed + self.estimated + self.missing
    }

    /// Every landmark recorded (placed, estimated or missing) and every curve done.
    #[must_use]
    pub const fn is_complete(&self) -> bool {
        self.landmarks_done() == self.landmarks_total && self.curves_done == self.curves_total
    }
}

/// The project document (see the module docs).
#[derive(Clone, Debug, PartialEq)]
pub struct Project {
    scheme: Scheme,
    scheme_copy: SchemeCopy,
    specimens: Vec<Specimen>,
}

impl Project {
    /// A new, empty project using the scheme `text`, read from `origin`.
    pub fn new(text: String, origin: String) -> Result<Self, SchemeError> {
        let scheme = Scheme::parse(&text, &origin)?;
        Ok(Self {
            scheme,
            scheme_copy: SchemeCopy {
                origin,
                sha256: sha256_hex(text.as_bytes()),
                text,
            },
            specimens: Vec::new(),
        })
    }

    #[must_use]
    pub fn scheme(&self) -> &Scheme {
        &self.scheme
    }

    #[must_use]
    pub fn scheme_copy(&self) -> &SchemeCopy {
        &self.scheme_copy
    }

    #[must_use]
    pub fn specimens(&self) -> &[Specimen] {
        &self.specimens
    }

    #[must_use]
    pub fn specimen(&self, id: &str) -> Option<&Specimen> {
        self.specimens.iter().find(|s| s.id == id)
    }

    /// How far a trial has got, or `None` if there is no such specimen or trial.
    #[must_use]
    pub fn progress(&self, specimen: &str, trial: &str) -> Option<TrialProgress> {
        let t = self.specimen(specimen)?.trial(trial)?;
        let mut p = TrialProgress {
            landmarks_total: self.scheme.landmarks.len(),
            curves_total: self.scheme.curves.len(),
            ..TrialProgress::default()
        };
        for l in &t.landmarks {
            match l.state {
                LandmarkState::Placed => p.placed += 1,
                LandmarkState::Estimated => p.estimated += 1,
                LandmarkState::Missing => p.missing += 1,
            }
        }
        p.curves_done = t
            .curves
            .iter()
            .filter(|c| {
                self.scheme
                    .curve(&c.id)
                    .is_some_and(|d| c.semilandmarks(d).is_some())
            })
            .count();
        Some(p)
    }

    /// Checks every invariant of the module docs; the error names the offending item.
    pub(crate) fn validate(&self) -> Result<(), String> {
        let mut ids = std::collections::HashSet::new();
        for s in &self.specimens {
            if !ids.insert(s.id.as_str()) {
                return Err(format!("specimen '{}' appears twice", s.id));
            }
            validate_specimen(&self.scheme, s)?;
        }
        Ok(())
    }
}

/// The folder holding a project file (`.` for a bare file name).
#[must_use]
pub fn project_dir(project_file: &Path) -> PathBuf {
    match project_file.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    }
}

/// `to` relative to the folder `from_dir`, `/` separated (both made absolute and resolved
/// first); the absolute path when no relative one exists (another drive) or a name is not
/// UTF-8.
pub fn relative_path(from_dir: &Path, to: &Path) -> std::io::Result<String> {
    let from = std::fs::canonicalize(from_dir)?;
    let to = std::fs::canonicalize(to)?;
    let (a, b): (Vec<_>, Vec<_>) = (from.components().collect(), to.components().collect());
    let common = a.iter().zip(&b).take_while(|(x, y)| x == y).count();
    let absolute = || to.to_string_lossy().into_owned();
    if common == 0 {
        return Ok(absolute());
    }
    let mut parts: Vec<String> = vec!["..".to_owned(); a.len() - common];
    for c in &b[common..] {
        match c.as_os_str().to_str() {
            Some(s) => parts.push(s.to_owned()),
            None => return Ok(absolute()),
        }
    }
    if parts.is_empty() {
        return Ok(".".to_owned());
    }
    Ok(parts.join("/"))
}

fn finite(p: &[f64; 3]) -> bool {
    p.iter().all(|v| v.is_finite())
}

/// Why a landmark's state, position and method do not go together, in words.
fn state_mismatch(
    state: LandmarkState,
    position: Option<[f64; 3]>,
    method: Option<Method>,
) -> String {
    let name = state.name();
    match (state, position, method) {
        (LandmarkState::Missing, Some(_), _) => {
            "is marked missing but has a position (remove position_mm, or mark it placed)".into()
        }
        (LandmarkState::Missing, None, Some(m)) => format!(
            "is marked missing but has a method ({}); a missing landmark has none",
            m.name()
        ),
        (_, None, _) => format!("is marked {name} but has no position (position_mm)"),
        (_, Some(p), _) if !finite(&p) => {
            format!("is marked {name} but its position_mm is not three finite numbers")
        }
        (_, Some(_), None) => format!("is marked {name} but has no method"),
        (LandmarkState::Estimated, _, Some(m)) => format!(
            "is marked estimated but its method is {}; an estimated landmark has method estimated",
            m.name()
        ),
        (LandmarkState::Placed, _, Some(Method::Estimated)) => {
            "is marked placed but its method is estimated; mark it estimated".into()
        }
        _ => format!("state {name} does not go with its position and method"),
    }
}

fn validate_specimen(scheme: &Scheme, s: &Specimen) -> Result<(), String> {
    if !is_valid_id(&s.id) {
        return Err(format!(
            "specimen id '{}' is not valid (1-64 ASCII letters, digits, _ . -)",
            s.id
        ));
    }
    let at = |what: String| format!("specimen {}: {what}", s.id);
    for k in s.groups.keys() {
        if !is_valid_id(k) {
            return Err(at(format!(
                "group key '{k}' is not valid (1-64 ASCII letters, digits, _ . -)"
            )));
        }
    }
    let v = &s.scan.voxel_size_mm;
    if !v.iter().all(|x| x.is_finite() && *x > 0.0) {
        return Err(at(format!(
            "voxel size {} x {} x {} mm is not positive and finite",
            v[0], v[1], v[2]
        )));
    }
    if s.scan.path.is_empty() {
        return Err(at("scan path is empty".into()));
    }
    let mut ids = std::collections::HashSet::new();
    for t in &s.trials {
        if !ids.insert(t.id.as_str()) {
            return Err(at(format!("trial '{}' appears twice", t.id)));
        }
        validate_trial(scheme, t).map_err(|e| at(format!("trial {}: {e}", t.id)))?;
    }
    Ok(())
}

pub(crate) fn validate_trial(scheme: &Scheme, t: &Trial) -> Result<(), String> {
    if !is_valid_id(&t.id) {
        return Err(format!(
            "trial id '{}' is not valid (1-64 ASCII letters, digits, _ . -)",
            t.id
        ));
    }
    let mut last: Option<usize> = None;
    for l in &t.landmarks {
        let i = scheme
            .landmark_index(&l.id)
            .ok_or_else(|| format!("'{}' is not a landmark of the scheme", l.id))?;
        if last.is_some_and(|p| p >= i) {
            return Err(format!(
                "landmark '{}' is out of the scheme's order or repeated",
                l.id
            ));
        }
        last = Some(i);
        let ok = match (l.state, l.position_mm, l.method) {
            (LandmarkState::Missing, None, None) => true,
            (LandmarkState::Estimated, Some(p), Some(Method::Estimated)) => finite(&p),
            (LandmarkState::Placed, Some(p), Some(m)) => m != Method::Estimated && finite(&p),
            _ => false,
        };
        let pick_ok = l.pick.is_none_or(|p| {
            l.method == Some(Method::Surface)
                && finite(&p.origin_mm)
                && finite(&p.direction)
                && p.threshold.is_finite()
        });
        if !pick_ok {
            return Err(format!(
                "landmark '{}': a pick record needs method surface and finite numbers",
                l.id
            ));
        }
        if !ok {
            return Err(format!(
                "landmark '{}': {}",
                l.id,
                state_mismatch(l.state, l.position_mm, l.method)
            ));
        }
    }
    let mut last: Option<usize> = None;
    for c in &t.curves {
        let i = scheme
            .curve_index(&c.id)
            .ok_or_else(|| format!("'{}' is not a curve of the scheme", c.id))?;
        if last.is_some_and(|p| p >= i) {
            return Err(format!(
                "curve '{}' is out of the scheme's order or repeated",
                c.id
            ));
        }
        last = Some(i);
        let def = &scheme.curves[i];
        if c.traced_mm.len() != def.segments() || c.semilandmarks_mm.len() != def.segments() {
            return Err(format!(
                "curve '{}': {} traced and {} resampled segments, the scheme has {}",
                c.id,
                c.traced_mm.len(),
                c.semilandmarks_mm.len(),
                def.segments()
            ));
        }
        for (s, (seg, &n)) in c
            .semilandmarks_mm
            .iter()
            .zip(&def.semilandmarks)
            .enumerate()
        {
            if !(seg.is_empty() || seg.len() == n) {
                return Err(format!(
                    "curve '{}' segment {}: {} semilandmarks, the scheme has {n}",
                    c.id,
                    s + 1,
                    seg.len()
                ));
            }
        }
        if !c
            .traced_mm
            .iter()
            .chain(&c.semilandmarks_mm)
            .flatten()
            .all(finite)
        {
            return Err(format!("curve '{}' has a non-finite coordinate", c.id));
        }
    }
    Ok(())
}

/// Recomputes the semilandmarks of one curve entry from the trial's anchor positions.
fn resample_curve(scheme: &Scheme, landmarks: &[LandmarkEntry], c: &mut CurveEntry) {
    let Some(def) = scheme.curve(&c.id) else {
        return;
    };
    let position = |id: &str| {
        landmarks
            .iter()
            .find(|l| l.id == id)
            .and_then(|l| l.position_mm)
    };
    for s in 0..def.segments() {
        let ends = (position(&def.anchors[s]), position(&def.anchors[s + 1]));
        c.semilandmarks_mm[s] = match ends {
            (Some(a), Some(b)) => {
                let mut poly = Vec::with_capacity(c.traced_mm[s].len() + 2);
                poly.push(a);
                poly.extend_from_slice(&c.traced_mm[s]);
                poly.push(b);
                curve::resample_interior(&poly, def.semilandmarks[s]).unwrap_or_default()
            }
            _ => Vec::new(),
        };
    }
}

#[cfg(test)]
pub(crate) mod tests;
