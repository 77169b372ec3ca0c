//! NIfTI-1 / NIfTI-2 loader and writer.
//!
//! Reads `.nii`, `.nii.gz`, and `.hdr`/`.img` pairs (either may be gzipped; given either file
//! of a pair the other is found by name), both byte orders (told by `sizeof_hdr`, 348 or 540).
//!
//! - **Types.** `uint8`, `int16`, `uint16` and `float32` are kept as stored. `int8`, `int32`,
//!   `uint32`, `int64`, `uint64` and `float64` are converted to the narrowest of u8 / i16 / u16
//!   / f32 that holds every value exactly, else to f32 (rounded), and a note says which.
//!   RGB, RGBA, complex, binary and float128 are refused as unsupported.
//! - **Placement** (`world_from_voxel`, mm) follows nifti1.h: the sform when `sform_code > 0`,
//!   else the qform when `qform_code > 0`, else pixdim scaling ("method 1", no offset), scaled
//!   to millimetres by `xyzt_units` (unknown units: mm, with a note). nibabel uses the same
//!   precedence for sform/qform but (a) ignores `xyzt_units` and (b) for method 1 centres the
//!   grid on the origin (Analyze convention); Sutura follows the standard in both.
//! - **Time series.** A 4D file with `dim[4] > 1` loads its first volume, with a note. Files
//!   with `dim[5..7] > 1` (vector or matrix voxels) and CIFTI files are refused.
//! - **Safety.** Every header value is checked (dims, `vox_offset`, pixdim, sform, datatype,
//!   decode [`Limits`](super::Limits)) before anything is allocated; a file shorter than its
//!   header says is refused as truncated.
//! - **Speed.** Uncompressed voxels are read straight into the voxel buffer with parallel
//!   positioned reads and byte-swapped in parallel; gzip is inflated with a large input buffer
//!   straight into the voxel bytes, while a second thread faults in the pages ahead of the
//!   inflater (a fresh page costs about as much to map as to inflate into). Progress is
//!   reported in bytes of voxel data.
//!
//! The writer ([`write`]) produces NIfTI-1 `.nii` / `.nii.gz`; see its docs for precision.

pub mod header;
mod read;
mod stream;
mod write;

pub use header::{Header, HeaderError, Version};
pub use read::{header_voxel_bytes, open, read_header};
pub use stream::open_slices;
pub use write::write;

#[cfg(test)]
mod tests;
