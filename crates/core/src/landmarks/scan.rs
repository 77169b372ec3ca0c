//! Opening a scan with the voxel size a project recorded for it.
//!
//! TIFF scans rarely carry a full voxel size (only folders Sutura wrote record the slice
//! spacing), so the user usually gives one; `NIfTI` files carry
//! their own geometry, which a user value rescales axis by axis (keeping the direction cosines
//! and the origin). Both the command line and the project use [`open_scan`], so a specimen's
//! scan is placed in the world the same way every time it is opened.
//!
//! An OME-Zarr store ([`crate::store`]) opens here too, for the consumers that need the whole
//! grid in memory (projects, picking on the command line, labels, meshes, conversion to a
//! file): its full-resolution level is read whole, within the same voxel limit as a file.
//! Views that read a store a block at a time open it as a [`crate::volume::VolumeSource`]
//! instead.

use std::path::Path;

use crate::geometry::Affine3;
use crate::io::slices::{self, SliceReader};
use crate::io::{self, Format, IoError, OpenOptions, Progress};
use crate::volume::Volume;

/// Opens a scan; `voxel_size_mm`, if given, overrides the file's voxel size (see the module
/// docs). The override is recorded in the volume's notes.
pub fn open_scan(
    path: &Path,
    voxel_size_mm: Option<[f64; 3]>,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    let options = OpenOptions {
        voxel_size_mm,
        ..OpenOptions::default()
    };
    open_scan_with(path, &options, progress)
}

/// [`open_scan`] with every option of [`io::open`] (the DICOM series to read, decode limits);
/// `options.voxel_size_mm` overrides the file's voxel size as in [`open_scan`].
pub fn open_scan_with(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    let voxel_size_mm = options.voxel_size_mm;
    if let Some(s) = voxel_size_mm
        && s.iter().any(|v| !(v.is_finite() && *v > 0.0))
    {
        return Err(IoError::usage(
            path,
            format!(
                "voxel size {} x {} x {} mm is not positive and finite",
                s[0], s[1], s[2]
            ),
        ));
    }
    if crate::store::is_store(path) {
        return open_store_whole(path, voxel_size_mm, options);
    }
    let mut volume = io::open(path, options, progress)?;
    if let Some(s) = voxel_size_mm
        && io::detect(path)?.records_placement()
    {
        set_voxel_size(&mut volume, Format::Nifti, s);
    }
    Ok(volume)
}

/// A scan of any size behind the volume interface: a store read a block at a time through a
/// chunk cache of `cache_bytes`, anything else opened whole with [`open_scan`]. `voxel_size_mm`
/// overrides the file's voxel size as in [`open_scan`].
pub fn open_source(
    path: &Path,
    voxel_size_mm: Option<[f64; 3]>,
    cache_bytes: u64,
) -> Result<Box<dyn crate::volume::VolumeSource + Send + Sync>, IoError> {
    if crate::store::is_store(path) {
        if let Some(s) = voxel_size_mm
            && s.iter().any(|v| !(v.is_finite() && *v > 0.0))
        {
            return Err(IoError::usage(
                path,
                format!("voxel size {s:?} mm is not positive and finite"),
            ));
        }
        let store = crate::store::Store::open(
            path,
            &crate::store::StoreOptions {
                cache_bytes,
                max_block_bytes: cache_bytes.max(64 << 20),
                voxel_size_mm,
            },
        )?;
        return Ok(Box::new(store));
    }
    Ok(Box::new(open_scan(path, voxel_size_mm, &Progress::none())?))
}

/// A store's full-resolution level, read whole (refused above the voxel limit of `options`).
fn open_store_whole(
    path: &Path,
    voxel_size_mm: Option<[f64; 3]>,
    options: &OpenOptions,
) -> Result<Volume, IoError> {
    use crate::store::{Store, StoreOptions};
    use crate::volume::{Block, VolumeSource};
    let store = Store::open(
        path,
        &StoreOptions {
            // every chunk is read once: a small cache is enough
            cache_bytes: 64 << 20,
            max_block_bytes: options.limits.max_voxel_bytes,
            voxel_size_mm,
        },
    )?;
    let level = store.level(0);
    let block = store
        .read_block(0, &level.full_region())
        .map_err(|e| IoError::corrupt(path, e.to_string()))?;
    match block {
        Block::Read(v) => Ok(v),
        // a store holds no volume in memory; were it to, it could not be handed out whole
        Block::Whole(_) => Err(IoError::corrupt(
            path,
            "the store's voxels are held in memory and cannot be read out",
        )),
    }
}

/// Gives a loaded volume the voxel size `s` (mm) as [`open_scan`] would have: a TIFF scan is
/// placed at index × voxel size; a `NIfTI` scan's axes are rescaled one by one, keeping their
/// directions and the origin. The override is recorded in the volume's notes.
pub fn set_voxel_size(volume: &mut Volume, format: Format, s: [f64; 3]) {
    match format {
        Format::Nifti | Format::Dicom => {
            let lin = volume.world_from_voxel().linear();
            let cols = volume.spacing_mm();
            let mut new = lin;
            for a in 0..3 {
                let c = lin.column(a) * (s[a] / cols[a]);
                new.set_column(a, &c);
            }
            let t = volume.world_from_voxel().translation();
            volume.set_world_from_voxel(Affine3::from_linear_translation(&new, &t));
            volume.notes.push(format!(
                "voxel size overridden by the user: {} x {} x {} mm",
                s[0], s[1], s[2]
            ));
        }
        Format::Tiff | Format::TiffFolder => {
            volume.set_world_from_voxel(Affine3::from_spacing(s));
        }
    }
    volume.spacing_origin = crate::volume::SpacingOrigin::Caller;
}

/// A slab reader over a scan (see [`crate::io::slices`]) placed as [`open_scan`] places it:
/// `voxel_size_mm`, if given, overrides the file's voxel size.
pub fn open_scan_slices(
    path: &Path,
    voxel_size_mm: Option<[f64; 3]>,
) -> Result<Box<dyn SliceReader>, IoError> {
    let options = OpenOptions {
        voxel_size_mm,
        ..OpenOptions::default()
    };
    open_scan_slices_with(path, &options)
}

/// [`open_scan_slices`] with every option of [`slices::open_slices`] (the DICOM series to
/// read, decode limits).
pub fn open_scan_slices_with(
    path: &Path,
    options: &OpenOptions,
) -> Result<Box<dyn SliceReader>, IoError> {
    let voxel_size_mm = options.voxel_size_mm;
    if let Some(s) = voxel_size_mm
        && s.iter().any(|v| !(v.is_finite() && *v > 0.0))
    {
        return Err(IoError::usage(
            path,
            format!("voxel size {s:?} mm is not positive and finite"),
        ));
    }
    if crate::store::is_store(path) {
        use crate::store::{Store, StoreOptions};
        // one slab at a time: the cache holds the chunks of one slab
        let store = Store::open(
            path,
            &StoreOptions {
                cache_bytes: 256 << 20,
                max_block_bytes: options.limits.max_voxel_bytes,
                voxel_size_mm,
            },
        )?;
        return Ok(Box::new(slices::SourceSlices::new(store, path)));
    }
    let reader = slices::open_slices(path, options)?;
    match voxel_size_mm {
        Some(s) if io::detect(path)?.records_placement() => {
            let w = reader.world_from_voxel();
            let lin = w.linear();
            let cols = w.column_lengths();
            let mut new = lin;
            for a in 0..3 {
                let c = lin.column(a) * (s[a] / cols[a]);
                new.set_column(a, &c);
            }
            Ok(Box::new(Resized {
                world: Affine3::from_linear_translation(&new, &w.translation()),
                note: format!("voxel size overridden by the user: {s:?} mm"),
                inner: reader,
            }))
        }
        _ => Ok(reader),
    }
}

/// A reader whose voxel size the user gave.
struct Resized {
    inner: Box<dyn SliceReader>,
    world: Affine3,
    note: String,
}

impl SliceReader for Resized {
    fn path(&self) -> &Path {
        self.inner.path()
    }
    fn dims(&self) -> [usize; 3] {
        self.inner.dims()
    }
    fn dtype(&self) -> crate::volume::DType {
        self.inner.dtype()
    }
    fn world_from_voxel(&self) -> Affine3 {
        self.world
    }
    fn rescale(&self) -> Option<crate::volume::Rescale> {
        self.inner.rescale()
    }
    fn notes(&self) -> Vec<String> {
        let mut n = self.inner.notes();
        n.push(self.note.clone());
        n
    }
    fn spacing_origin(&self) -> crate::volume::SpacingOrigin {
        crate::volume::SpacingOrigin::Caller
    }
    fn read_slices(
        &mut self,
        k0: usize,
        dst: &mut [u8],
        progress: &Progress<'_>,
    ) -> Result<(), IoError> {
        self.inner.read_slices(k0, dst, progress)
    }
}

/// Bytes of a scan's full-resolution voxels, from its header alone (no voxel is read): what a
/// front end compares with its memory budget before reading a scan whole.
pub fn scan_voxel_bytes(path: &Path, options: &OpenOptions) -> Result<u64, IoError> {
    if !crate::store::is_store(path) && io::detect(path)? == Format::Nifti {
        // a type narrowed when read would be read whole to open its slices
        return io::nifti::header_voxel_bytes(path);
    }
    let reader = open_scan_slices_with(path, options)?;
    let d = reader.dims();
    Ok(d.iter().map(|&n| n as u64).product::<u64>() * reader.dtype().size_bytes() as u64)
}

/// Converts the scan at `scan` into an OME-Zarr store at `out`, streaming a slab of slices at
/// a time ([`crate::store::write::convert`]), with the source's fingerprint recorded in the
/// store (so that a project's record of the scan still matches, and a resumed conversion
/// checks it is resuming the same source). `options.source_fingerprint` is filled here.
pub fn convert_to_store(
    scan: &Path,
    open: &OpenOptions,
    out: &Path,
    mut options: crate::store::write::ConvertOptions,
    progress: &Progress<'_>,
) -> Result<crate::store::write::ConvertReport, IoError> {
    let mut reader = open_scan_slices_with(scan, open)?;
    let f = super::fingerprint::file_facts(scan)?;
    options.source_fingerprint = Some(serde_json::json!({
        "files": f.files,
        "bytes": f.bytes,
        "head_sha256": f.head_sha256,
    }));
    Ok(crate::store::write::convert(
        reader.as_mut(),
        out,
        &options,
        progress,
    )?)
}

/// Where a front end keeps the store it builds of a scan too large for its memory, in the
/// cache folder `cache`: `STEM-HASH.ome.zarr`, `HASH` the first 12 hex digits of the scan's
/// head fingerprint (two scans of the same name do not share a store), with the voxel size
/// given, if any, in the name (`STEM-HASH-36x36x50um.ome.zarr`): a store is placed with the
/// voxel size it was built with.
pub fn cached_store_path(
    cache: &Path,
    scan: &Path,
    voxel_size_mm: Option<[f64; 3]>,
) -> Result<std::path::PathBuf, IoError> {
    let f = super::fingerprint::file_facts(scan)?;
    let stem = crate::io::names::specimen_id_from_scan(scan);
    let hash: String = f.head_sha256.chars().take(12).collect();
    let size = voxel_size_mm.map_or_else(String::new, |s| {
        let um = s.map(|v| format!("{}", (v * 1e6).round() / 1e3));
        format!("-{}x{}x{}um", um[0], um[1], um[2])
    });
    Ok(cache.join(format!("{stem}-{hash}{size}.ome.zarr")))
}

/// Stores being built in this process, and a signal when one is done.
static BUILDING: std::sync::Mutex<Vec<std::path::PathBuf>> = std::sync::Mutex::new(Vec::new());
static BUILT: std::sync::Condvar = std::sync::Condvar::new();

/// The claim on building one store; released when dropped.
struct Building(std::path::PathBuf);

impl Building {
    fn start(out: &Path) -> Self {
        let mut set = BUILDING
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        while set.iter().any(|p| p == out) {
            set = BUILT
                .wait(set)
                .unwrap_or_else(std::sync::PoisonError::into_inner);
        }
        set.push(out.to_path_buf());
        Self(out.to_path_buf())
    }
}

impl Drop for Building {
    fn drop(&mut self) {
        BUILDING
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
            .retain(|p| p != &self.0);
        BUILT.notify_all();
    }
}

/// Makes `out` a complete store of the scan at `scan` ([`convert_to_store`], resuming an
/// interrupted conversion), unless it is one already ([`store_is_of`]). A store at `out` of
/// something else (the scan changed since) is set aside as `out.stale-SECONDS`, never deleted:
/// it may hold label images.
pub fn build_store_of(
    scan: &Path,
    open: &OpenOptions,
    out: &Path,
    options: crate::store::write::ConvertOptions,
    progress: &Progress<'_>,
) -> Result<(), IoError> {
    // one build of a store at a time in this process (a window opening a scan while adding
    // it to a project): the second waits, then finds the store made
    let _building = Building::start(out);
    if store_is_of(out, scan) {
        return Ok(());
    }
    if out.exists() {
        let secs = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.as_secs());
        let mut aside = out.as_os_str().to_owned();
        aside.push(format!(".stale-{secs}"));
        std::fs::rename(out, &aside).map_err(|e| IoError::os(out, e))?;
    }
    if let Some(parent) = out.parent() {
        std::fs::create_dir_all(parent).map_err(|e| IoError::os(parent, e))?;
    }
    convert_to_store(scan, open, out, options, progress).map(|_| ())
}

/// Whether `store` is a complete store converted from the scan at `scan` as it is now (the
/// source fingerprint the store recorded equals the scan's).
#[must_use]
pub fn store_is_of(store: &Path, scan: &Path) -> bool {
    let Ok(opened) = crate::store::Store::open(store, &crate::store::StoreOptions::default())
    else {
        return false;
    };
    let (Some(facts), Ok(f)) = (opened.facts(), super::fingerprint::file_facts(scan)) else {
        return false;
    };
    let want = serde_json::json!({
        "files": f.files,
        "bytes": f.bytes,
        "head_sha256": f.head_sha256,
    });
    facts.complete && facts.source.fingerprint.as_ref() == Some(&want)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two builds of the same store at once (a window opening a scan while adding it to a
    /// project) make one store: the second waits for the first and finds it made.
    #[test]
    fn two_builds_of_one_store_make_one() {
        let scan =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../sample_volumes/HDC-002.nii.gz");
        let dir = tempfile::tempdir().unwrap();
        let out = cached_store_path(dir.path(), &scan, None).unwrap();
        assert!(
            out.file_name()
                .unwrap()
                .to_string_lossy()
                .starts_with("HDC-002-")
        );
        std::thread::scope(|s| {
            for _ in 0..2 {
                s.spawn(|| {
                    build_store_of(
                        &scan,
                        &OpenOptions::default(),
                        &out,
                        crate::store::write::ConvertOptions::default(),
                        &Progress::none(),
                    )
                    .unwrap();
                });
            }
        });
        assert!(store_is_of(&out, &scan));
        let names: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names.len(), 1, "one store, nothing set aside: {names:?}");
        // a voxel size given is part of the name
        let named = cached_store_path(dir.path(), &scan, Some([0.036, 0.036, 0.05])).unwrap();
        assert!(
            named.to_string_lossy().ends_with("-36x36x50um.ome.zarr"),
            "{}",
            named.display()
        );
    }
}
