//! Landmark schemes, the project document, and surface picking.
//!
//! This is the data a user spends weeks producing, so the module is built around three rules:
//!
//! - **Exact.** Positions are world millimetres in `f64`, in the frame of the scan's
//!   `world_from_voxel`; voxel coordinates are derived, never stored as the truth. The project
//!   file writes every float in its shortest form that reads back to the same bits, so loading
//!   and saving a project gives the same bytes.
//! - **Traceable.** A project carries a verbatim copy of its scheme with the file it came from
//!   and its SHA-256; each specimen records its scan's path (relative to the project file), the
//!   voxel size used and where it came from, and a fingerprint that tells a swapped scan; each
//!   landmark records how and when it was placed.
//! - **Impossible to lose.** Every change goes through one typed [`project::Edit`] whose
//!   `apply` returns the exact inverse (the GUI's undo stack); the file is written atomically
//!   with the previous version kept as a backup; older files are migrated, newer ones refused.
//!
//! Parts:
//! - [`scheme`]: the lab's landmark scheme (a small TOML file): landmarks with Bookstein types
//!   and bilateral partners, curves of semilandmarks, measurement definitions; validated on
//!   load with errors that name the key and line.
//! - [`project`]: the project document (scheme + specimens + trials), its edits, its file.
//! - [`fingerprint`]: what identifies a scan (sizes, header hashes, a hash of sampled voxels).
//! - [`curve`]: equal arc-length resampling of traced curves into semilandmarks.
//! - [`mirror`]: a missing landmark estimated from its bilateral partner across the fitted
//!   midsagittal plane.
//! - [`scan`]: opening a specimen's scan with the voxel size the project recorded.
//! - [`pick_source`]: the same picks on a scan of any size, on full-resolution blocks read
//!   around the ray or the click.
//! - [`pick`]: finding the material boundary along a ray (3D view) or from a point on a slice,
//!   at sub-voxel precision, and the ISO-50 default threshold.
//!
//! Depends on `geometry`, `volume`, `io` (to fingerprint and open scans) and `export` (atomic
//! writes). Must not import `gui` or `render`.

pub mod curve;
pub mod fingerprint;
pub mod mirror;
pub mod palette;
pub mod pick;
pub mod pick_source;
pub mod project;
pub mod scan;
pub mod scheme;

pub use project::{Edit, EditError, Project, ProjectError};
pub use scheme::{Scheme, SchemeError};
