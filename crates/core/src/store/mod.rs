//! The chunked multiscale store: a scan of any size on disk as OME-Zarr (Zarr v3, OME-NGFF
//! 0.5, the layout the Python `zarr` 3 and `ome-zarr` packages read), read through a chunk
//! cache with a byte budget.
//!
//! Layout of `NAME.ome.zarr/`:
//! - `zarr.json`: the group, with `ome.multiscales` (axes `z`, `y`, `x` in millimetres; per
//!   level a `scale` and a `translation`) and Sutura's facts under [`meta::FACTS_KEY`]: the
//!   exact `world_from_voxel`, the source and its fingerprint, intensity statistics, ISO-50,
//!   the levels' factors, `complete`;
//! - `0/`, `1/`, ...: the levels, finest first, arrays of shape `[nz, ny, nx]` in chunks of
//!   64³ voxels (by default) compressed with zstd; each coarser level is the block mean of
//!   level 0 over its factor (halving the finer axes first) until the coarsest fits in 64 MiB;
//! - `block_range/`: per level-0 chunk, the minimum and maximum stored value;
//! - `labels/`: label images added later (OME-NGFF labels), see [`Store::add_label_image`].
//!
//! [`write`] converts any scan a slab of slices at a time, with bounded memory, into
//! `NAME.ome.zarr.partial/`, renamed to `NAME.ome.zarr` only once whole: a half-written store
//! is never opened as a whole one, and an interrupted conversion resumes from its last
//! checkpoint. [`Store`] opens stores Sutura wrote and multiscale images written by others
//! (Zarr v2 with NGFF 0.4 or Zarr v3 with 0.5; `uint8`, `int16`, `uint16` or `float32`; any
//! regular chunking and the codecs zstd, blosc and gzip) and implements the volume interface
//! ([`VolumeSource`]): every block is assembled from chunks held in a [`ChunkCache`], missing
//! chunks decoded in parallel.
//!
//! Must not import `render` or `landmarks`.

pub mod cache;
pub mod labels;
pub mod meta;
pub mod write;
mod write_behind;

pub use cache::{CacheStats, ChunkCache};
pub use labels::{LabelImage, LabelValue};
pub use write::{Codec, ConvertOptions, ConvertReport, convert, partial_path};

#[cfg(test)]
mod tests;

use crate::geometry::{Affine3, VoxelPoint};
use crate::volume::{
    Block, DType, Intensity, IntoVoxels, Level, ReadError, Region, Rescale, SpacingOrigin, Volume,
    VolumeSource, Voxel, VoxelBuffer, Voxels, source::clamp_region,
};
use meta::{FACTS_KEY, Facts};
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use zarrs::array::{Array, CodecOptions, data_type};
use zarrs::filesystem::FilesystemStore;
use zarrs::group::Group;

/// The default byte budget of a store's chunk cache: 1 GiB.
pub const DEFAULT_CACHE_BYTES: u64 = 1 << 30;

/// The suffix of a store being written.
pub const PARTIAL_SUFFIX: &str = ".partial";

/// What went wrong with a store. Every variant names the store.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The operating system could not read or write.
    #[error("{}: {source}", path.display())]
    Os {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// The store is damaged, half-written, or not a multiscale image.
    #[error("{}: {what}", path.display())]
    Corrupt { path: PathBuf, what: String },
    /// Valid, but uses something Sutura does not read.
    #[error("{}: unsupported: {what}", path.display())]
    Unsupported { path: PathBuf, what: String },
    /// The caller asked for something that cannot be done.
    #[error("{}: {what}", path.display())]
    Usage { path: PathBuf, what: String },
    /// Reading the source scan failed.
    #[error(transparent)]
    Source(#[from] crate::io::IoError),
    /// The conversion was cancelled; the partial store stays for a resume.
    #[error("{}: conversion cancelled (run it again to resume)", path.display())]
    Cancelled { path: PathBuf },
}

impl StoreError {
    pub(crate) fn corrupt(path: &Path, what: impl Into<String>) -> Self {
        Self::Corrupt {
            path: path.to_owned(),
            what: what.into(),
        }
    }
    pub(crate) fn unsupported(path: &Path, what: impl Into<String>) -> Self {
        Self::Unsupported {
            path: path.to_owned(),
            what: what.into(),
        }
    }
    pub(crate) fn usage(path: &Path, what: impl Into<String>) -> Self {
        Self::Usage {
            path: path.to_owned(),
            what: what.into(),
        }
    }
    pub(crate) fn os(path: &Path, e: std::io::Error) -> Self {
        Self::Os {
            path: path.to_owned(),
            source: e,
        }
    }
}

impl From<StoreError> for ReadError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::Os { path, source } => Self::Storage {
                path,
                what: source.to_string(),
            },
            StoreError::Corrupt { path, what }
            | StoreError::Unsupported { path, what }
            | StoreError::Usage { path, what } => Self::Storage { path, what },
            StoreError::Cancelled { path } => Self::Storage {
                path,
                what: "cancelled".into(),
            },
            StoreError::Source(e) => Self::Storage {
                path: PathBuf::new(),
                what: e.to_string(),
            },
        }
    }
}

impl From<StoreError> for crate::io::IoError {
    fn from(e: StoreError) -> Self {
        use crate::io::IoError;
        match e {
            StoreError::Os { path, source } => IoError::Os { path, source },
            StoreError::Corrupt { path, what } => IoError::Corrupt { path, what },
            StoreError::Unsupported { path, what } => IoError::Unsupported { path, what },
            StoreError::Usage { path, what } => IoError::Usage { path, what },
            StoreError::Cancelled { path } => IoError::Cancelled { path },
            StoreError::Source(e) => e,
        }
    }
}

/// Whether a path names an OME-Zarr store (a folder holding `zarr.json` or `.zgroup`).
#[must_use]
pub fn is_store(path: &Path) -> bool {
    path.is_dir() && (path.join("zarr.json").is_file() || path.join(".zgroup").is_file())
}

/// How to open a store.
#[derive(Clone, Copy, Debug)]
pub struct StoreOptions {
    /// Bytes of decoded chunks kept in memory.
    pub cache_bytes: u64,
    /// Largest block one read may assemble (a view's slab or a level for a 3D view).
    pub max_block_bytes: u64,
    /// Voxel size in mm to place the scan with instead of the store's (keeps direction and
    /// origin).
    pub voxel_size_mm: Option<[f64; 3]>,
}

impl Default for StoreOptions {
    fn default() -> Self {
        Self {
            cache_bytes: DEFAULT_CACHE_BYTES,
            max_block_bytes: DEFAULT_CACHE_BYTES,
            voxel_size_mm: None,
        }
    }
}

pub(crate) type ZArray = Array<FilesystemStore>;

/// One level's array and its chunking.
struct LevelArray {
    array: ZArray,
    /// Chunk shape along `i`, `j`, `k`.
    chunk: [usize; 3],
    /// Axes before `z`, `y`, `x` (each of extent 1).
    leading: usize,
    /// The chunks are little-endian voxels compressed by zstd alone (the layout Sutura
    /// writes): decoded by [`decode_zstd`] instead of zarrs' codec chain.
    zstd_only: bool,
}

/// Whether an array's chunks are little-endian voxels compressed by zstd and nothing else
/// (Zarr v3 codecs `bytes` then `zstd`, no storage transformer).
fn is_zstd_only(array: &ZArray) -> bool {
    let zarrs::metadata::ArrayMetadata::V3(m) = array.metadata() else {
        return false;
    };
    let [bytes, zstd] = m.codecs.as_slice() else {
        return false;
    };
    let little = bytes
        .configuration()
        .and_then(|c| c.get("endian"))
        .is_none_or(|e| e == "little");
    m.storage_transformers.is_empty()
        && bytes.name() == "bytes"
        && little
        && cfg!(target_endian = "little")
        && zstd.name() == "zstd"
}

/// A thread's zstd contexts (whole chunks; leading parts) and file buffer.
struct Decoders {
    bulk: zstd::bulk::Decompressor<'static>,
    stream: zstd::zstd_safe::DCtx<'static>,
    file: Vec<u8>,
}

thread_local! {
    /// This thread's zstd contexts for decoding chunks and its buffer for a chunk's file (made
    /// once, not per chunk).
    static ZSTD_DECODER: std::cell::RefCell<Option<Decoders>> =
        const { std::cell::RefCell::new(None) };
}

/// The spare capacity of a voxel vector as zstd's output, up to `limit` bytes: the decoded
/// bytes become voxels in place, without zeroing the buffer first.
struct SpareVoxels<'a, T> {
    voxels: &'a mut Vec<T>,
    limit: usize,
}

// SAFETY: `as_slice` covers the vector's initialised voxels and `capacity` / `as_mut_ptr` at
// most its whole allocation; `filled_until(n)` is called once zstd has written the first `n`
// bytes, and marks the voxels those bytes hold initialised (every bit pattern is a voxel:
// `T: Pod`).
unsafe impl<T: Voxel> zstd::zstd_safe::WriteBuf for SpareVoxels<'_, T> {
    fn as_slice(&self) -> &[u8] {
        bytemuck::cast_slice(self.voxels.as_slice())
    }
    fn capacity(&self) -> usize {
        (self.voxels.capacity() * size_of::<T>()).min(self.limit)
    }
    fn as_mut_ptr(&mut self) -> *mut u8 {
        self.voxels.as_mut_ptr().cast()
    }
    unsafe fn filled_until(&mut self, n: usize) {
        // SAFETY: the first `n` bytes, so the first `n / size_of::<T>()` voxels, are written,
        // and `n` is within the capacity (zstd-safe checks it)
        unsafe { self.voxels.set_len(n / size_of::<T>()) }
    }
}

/// Decodes one zstd-compressed chunk of `whole` little-endian voxels straight into its
/// buffer with this thread's context (the codec chain would make a context per chunk, zero the
/// buffer and copy between its steps). With `want < whole`, decodes only the frame's leading
/// blocks (zstd blocks hold at most 128 KiB) until `want` voxels are out, and keeps everything
/// those blocks held. `Ok(None)`: the chunk is not stored (it holds the fill value).
fn decode_zstd<T: Voxel>(
    array: &ZArray,
    idx: &[u64],
    whole: usize,
    want: usize,
) -> Result<Option<Vec<T>>, String> {
    use std::io::Read;
    use zstd::zstd_safe::{InBuffer, OutBuffer, ResetDirective};
    let path = array.storage().key_to_fspath(&array.chunk_key(idx));
    let mut out: Vec<T> = Vec::with_capacity(whole);
    let whole_bytes = whole * size_of::<T>();
    let zstd = |e: usize| format!("zstd: {}", zstd::zstd_safe::get_error_name(e));
    let found = ZSTD_DECODER.with(|d| -> Result<bool, String> {
        let mut d = d.borrow_mut();
        let Decoders { bulk, stream, file } = match &mut *d {
            Some(d) => d,
            empty => empty.insert(Decoders {
                bulk: zstd::bulk::Decompressor::new().map_err(|e| format!("zstd: {e}"))?,
                stream: zstd::zstd_safe::DCtx::create(),
                file: Vec::new(),
            }),
        };
        // the file into this thread's buffer (no new memory per chunk)
        file.clear();
        match std::fs::File::open(&path) {
            Ok(mut f) => f.read_to_end(file).map_err(|e| e.to_string())?,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(false),
            Err(e) => return Err(e.to_string()),
        };
        if want >= whole {
            let mut sink = SpareVoxels {
                voxels: &mut out,
                limit: whole_bytes,
            };
            bulk.decompress_to_buffer(file.as_slice(), &mut sink)
                .map_err(|e| format!("zstd: {e}"))?;
            return Ok(true);
        }
        stream.reset(ResetDirective::SessionOnly).map_err(zstd)?;
        let want_bytes = want * size_of::<T>();
        let mut sink = SpareVoxels {
            voxels: &mut out,
            limit: want_bytes,
        };
        let mut input = InBuffer::around(file.as_slice());
        let mut output = OutBuffer::around(&mut sink);
        while output.pos() < want_bytes && input.pos() < input.src.len() {
            stream
                .decompress_stream(&mut output, &mut input)
                .map_err(zstd)?;
        }
        let (pos, used) = (output.pos(), input.pos());
        // what the decoded blocks still hold, without decoding more
        sink.limit = whole_bytes;
        let mut rest = InBuffer::around(&file[..used]);
        rest.pos = used;
        let mut output = OutBuffer::around_pos(&mut sink, pos);
        stream
            .decompress_stream(&mut output, &mut rest)
            .map_err(zstd)?;
        Ok(true)
    })?;
    if !found {
        return Ok(None);
    }
    if out.len() < want.min(whole) {
        return Err(format!(
            "decodes to {} bytes, {} expected",
            out.len() * size_of::<T>(),
            whole_bytes
        ));
    }
    if want >= whole && out.len() != whole {
        return Err(format!(
            "decodes to {} bytes, {whole_bytes} expected",
            out.len() * size_of::<T>()
        ));
    }
    Ok(Some(out))
}

struct Inner {
    path: PathBuf,
    arrays: Vec<LevelArray>,
    levels: Vec<Level>,
    dtype: DType,
    rescale: Option<Rescale>,
    notes: Vec<String>,
    spacing_origin: SpacingOrigin,
    facts: Option<Facts>,
    cache: ChunkCache,
    max_block_bytes: u64,
    prefetching: AtomicBool,
}

/// An OME-Zarr multiscale image opened for reading (see the module docs). Cheap to clone:
/// clones share the cache.
#[derive(Clone)]
pub struct Store {
    inner: Arc<Inner>,
}

impl std::fmt::Debug for Store {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Store")
            .field("path", &self.inner.path)
            .field("levels", &self.inner.levels.len())
            .field("dtype", &self.inner.dtype)
            .finish_non_exhaustive()
    }
}

fn dtype_of(path: &Path, dt: &zarrs::array::DataType) -> Result<DType, StoreError> {
    if *dt == data_type::uint8() {
        Ok(DType::U8)
    } else if *dt == data_type::int16() {
        Ok(DType::I16)
    } else if *dt == data_type::uint16() {
        Ok(DType::U16)
    } else if *dt == data_type::float32() {
        Ok(DType::F32)
    } else {
        Err(StoreError::unsupported(
            path,
            format!("voxel type {dt:?}; Sutura reads uint8, int16, uint16 and float32"),
        ))
    }
}

impl Store {
    /// Opens a store (see the module docs for what is read).
    #[allow(
        clippy::too_many_lines,
        reason = "one pass over the metadata, in the order a reader meets it"
    )]
    pub fn open(path: &Path, options: &StoreOptions) -> Result<Self, StoreError> {
        let name = path.to_string_lossy();
        if name.trim_end_matches('/').ends_with(PARTIAL_SUFFIX) {
            return Err(StoreError::corrupt(
                path,
                "a half-written store (its conversion has not finished); run the conversion again to resume it",
            ));
        }
        if !path.is_dir() {
            return Err(StoreError::usage(
                path,
                "not a folder: an OME-Zarr store is one",
            ));
        }
        let fs = Arc::new(
            FilesystemStore::new(path)
                .map_err(|e| StoreError::corrupt(path, format!("cannot open: {e}")))?,
        );
        let group = Group::open(fs.clone(), "/")
            .map_err(|e| StoreError::corrupt(path, format!("not a Zarr group: {e}")))?;
        let attrs = group.attributes();
        let facts: Option<Facts> = match attrs.get(FACTS_KEY) {
            None => None,
            Some(v) => Some(serde_json::from_value(v.clone()).map_err(|e| {
                StoreError::corrupt(path, format!("Sutura's facts are unreadable: {e}"))
            })?),
        };
        if let Some(f) = &facts
            && !f.complete
        {
            return Err(StoreError::corrupt(
                path,
                "a half-written store (not marked complete); convert the scan again",
            ));
        }
        let ms = meta::parse_multiscales(attrs).map_err(|e| StoreError::corrupt(path, e))?;
        let mut notes = ms.notes.clone();
        let mut arrays = Vec::new();
        let mut dtype = None;
        for p in &ms.paths {
            let key = format!("/{}", p.trim_matches('/'));
            let array = Array::open(fs.clone(), &key)
                .map_err(|e| StoreError::corrupt(path, format!("level {p}: {e}")))?;
            let dt = dtype_of(path, array.data_type())?;
            if dtype.is_some_and(|d| d != dt) {
                return Err(StoreError::corrupt(
                    path,
                    format!("level {p} is of another voxel type"),
                ));
            }
            dtype = Some(dt);
            let shape = array.shape().to_vec();
            if shape.len() != ms.leading_axes + 3 {
                return Err(StoreError::corrupt(
                    path,
                    format!(
                        "level {p} has {} axes, the metadata {}",
                        shape.len(),
                        ms.leading_axes + 3
                    ),
                ));
            }
            if shape[..ms.leading_axes].iter().any(|&n| n != 1) {
                return Err(StoreError::unsupported(
                    path,
                    format!("level {p} has {shape:?}: several time points or channels"),
                ));
            }
            let zero = vec![0u64; shape.len()];
            let cs = array
                .chunk_shape(&zero)
                .map_err(|e| StoreError::corrupt(path, format!("level {p}: {e}")))?;
            let cs: Vec<usize> = cs.iter().map(|c| c.get() as usize).collect();
            let grid = array.chunk_grid_shape().to_vec();
            let l = ms.leading_axes;
            let regular =
                (0..3).all(|a| grid[l + a] as usize == (shape[l + a] as usize).div_ceil(cs[l + a]));
            if !regular {
                return Err(StoreError::unsupported(
                    path,
                    format!("level {p}: an irregular chunk grid"),
                ));
            }
            arrays.push(LevelArray {
                zstd_only: is_zstd_only(&array),
                array,
                chunk: [cs[l + 2], cs[l + 1], cs[l]],
                leading: l,
            });
        }
        let dtype = dtype.ok_or_else(|| StoreError::corrupt(path, "no levels"))?;
        let dims_of = |a: &LevelArray| {
            let s = a.array.shape();
            let l = a.leading;
            [s[l + 2] as usize, s[l + 1] as usize, s[l] as usize]
        };
        // placement: Sutura's exact affine, else NGFF's scale and translation
        let mut levels = Vec::new();
        let dims0 = dims_of(&arrays[0]);
        let (world0, factors, rescale, spacing_origin) = if let Some(f) = &facts {
            if f.levels.len() != arrays.len() || f.dims != dims0 {
                return Err(StoreError::corrupt(
                    path,
                    "Sutura's facts do not match the arrays",
                ));
            }
            notes.extend(f.notes.iter().cloned());
            let w = Affine3::from_rows(f.world_from_voxel)
                .map_err(|e| StoreError::corrupt(path, format!("world_from_voxel: {e}")))?;
            (
                w,
                Some(f.levels.iter().map(|l| l.factor).collect::<Vec<_>>()),
                f.rescale,
                f.spacing_origin,
            )
        } else {
            let (s, t) = ms.transforms[0];
            let w = Affine3::from_rows([
                [s[2], 0.0, 0.0, t[2]],
                [0.0, s[1], 0.0, t[1]],
                [0.0, 0.0, s[0], t[0]],
                [0.0, 0.0, 0.0, 1.0],
            ])
            .map_err(|e| StoreError::corrupt(path, format!("level 0 placement: {e}")))?;
            (w, None, None, SpacingOrigin::File)
        };
        let world0 = match options.voxel_size_mm {
            None => world0,
            Some(s) => {
                if s.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
                    return Err(StoreError::usage(
                        path,
                        format!("voxel size {s:?} mm is not positive and finite"),
                    ));
                }
                let lin = world0.linear();
                let cols = world0.column_lengths();
                let mut new = lin;
                for a in 0..3 {
                    new.set_column(a, &(lin.column(a) * (s[a] / cols[a])));
                }
                notes.push(format!("voxel size overridden by the user: {s:?} mm"));
                Affine3::from_linear_translation(&new, &world0.translation())
            }
        };
        let spacing_origin = if options.voxel_size_mm.is_some() {
            SpacingOrigin::Caller
        } else {
            spacing_origin
        };
        for (l, a) in arrays.iter().enumerate() {
            let dims = dims_of(a);
            let level = if let Some(f) = &factors {
                Level::coarsened(dims0, &world0, f[l])
            } else {
                // the level's own NGFF placement, re-expressed over level 0's
                let (s, t) = ms.transforms[l];
                let (s0, t0) = ms.transforms[0];
                let ratio = [s[2] / s0[2], s[1] / s0[1], s[0] / s0[0]];
                let factor = ratio.map(|r| r.round().max(1.0) as usize);
                let shift = [
                    (t[2] - t0[2]) / s0[2],
                    (t[1] - t0[1]) / s0[1],
                    (t[0] - t0[0]) / s0[0],
                ];
                let scale = Affine3::from_rows([
                    [ratio[0], 0.0, 0.0, shift[0]],
                    [0.0, ratio[1], 0.0, shift[1]],
                    [0.0, 0.0, ratio[2], shift[2]],
                    [0.0, 0.0, 0.0, 1.0],
                ])
                .map_err(|e| StoreError::corrupt(path, format!("level {l} placement: {e}")))?;
                Level {
                    dims,
                    factor,
                    world_from_voxel: world0.compose(&scale),
                }
            };
            if level.dims != dims {
                return Err(StoreError::corrupt(
                    path,
                    format!("level {l} is {dims:?}, its factor says {:?}", level.dims),
                ));
            }
            levels.push(level);
        }
        Ok(Self {
            inner: Arc::new(Inner {
                path: path.to_owned(),
                arrays,
                levels,
                dtype,
                rescale,
                notes,
                spacing_origin,
                facts,
                cache: ChunkCache::new(options.cache_bytes),
                max_block_bytes: options.max_block_bytes,
                prefetching: AtomicBool::new(false),
            }),
        })
    }

    #[must_use]
    pub fn path(&self) -> &Path {
        &self.inner.path
    }

    /// Sutura's facts, for a store Sutura wrote.
    #[must_use]
    pub fn facts(&self) -> Option<&Facts> {
        self.inner.facts.as_ref()
    }

    /// The cache's counters.
    #[must_use]
    pub fn cache_stats(&self) -> CacheStats {
        self.inner.cache.stats()
    }

    /// Chunk shape of a level along `i`, `j`, `k`.
    #[must_use]
    pub fn chunk_shape(&self, level: usize) -> [usize; 3] {
        self.inner.arrays[level].chunk
    }

    /// The decoded chunk `c` (chunk indices along `i`, `j`, `k`) of a level, through the cache.
    pub fn chunk(&self, level: usize, c: [usize; 3]) -> Result<Arc<Voxels>, StoreError> {
        self.inner.chunk(level, c)
    }
}

impl Inner {
    fn chunk(&self, level: usize, c: [usize; 3]) -> Result<Arc<Voxels>, StoreError> {
        self.chunk_slices(level, c, usize::MAX)
    }

    /// Chunk `c` of a level through the cache, holding at least its first `slices` slices
    /// along `k` (every slice for `usize::MAX`). Read cold for fewer slices than it has, a
    /// chunk of zstd alone (the layout Sutura writes) is decoded only as far as its leading
    /// zstd blocks reach — a plane across `k` decodes about half of each chunk on average —
    /// and that part is cached; a cached part too short for a later read is replaced by the
    /// whole chunk, so scrolling decodes each chunk once plus a part.
    fn chunk_slices(
        &self,
        level: usize,
        c: [usize; 3],
        slices: usize,
    ) -> Result<Arc<Voxels>, StoreError> {
        let key = (level, c);
        let a = &self.arrays[level];
        let per_slice = a.chunk[0] * a.chunk[1];
        let whole = per_slice * a.chunk[2];
        let held = self.cache.get(&key);
        let want = per_slice.saturating_mul(slices).min(whole);
        if let Some(v) = &held
            && v.len() >= want
        {
            return Ok(v.clone());
        }
        let want = if held.is_some() { whole } else { want };
        let mut idx = vec![0u64; a.leading];
        idx.extend([c[2] as u64, c[1] as u64, c[0] as u64]);
        let corrupt =
            |e: String| StoreError::corrupt(&self.path, format!("level {level} chunk {c:?}: {e}"));
        if a.zstd_only {
            fn slices_of<T: Voxel>(mut v: Vec<T>, per_slice: usize) -> Voxels
            where
                VoxelBuffer<T>: IntoVoxels,
            {
                v.truncate(v.len() / per_slice * per_slice);
                // a part holds only its own memory (the cache counts it so)
                v.shrink_to_fit();
                VoxelBuffer::from_vec(v).into_voxels()
            }
            let direct = match self.dtype {
                DType::U8 => decode_zstd::<u8>(&a.array, &idx, whole, want)
                    .map(|v| v.map(|v| slices_of(v, per_slice))),
                DType::I16 => decode_zstd::<i16>(&a.array, &idx, whole, want)
                    .map(|v| v.map(|v| slices_of(v, per_slice))),
                DType::U16 => decode_zstd::<u16>(&a.array, &idx, whole, want)
                    .map(|v| v.map(|v| slices_of(v, per_slice))),
                DType::F32 => decode_zstd::<f32>(&a.array, &idx, whole, want)
                    .map(|v| v.map(|v| slices_of(v, per_slice))),
            }
            .map_err(corrupt)?;
            if let Some(voxels) = direct {
                let chunk = Arc::new(voxels);
                self.cache.insert(key, chunk.clone());
                return Ok(chunk);
            }
        }
        let opts = CodecOptions::default().with_concurrent_target(1);
        let err = |e: zarrs::array::ArrayError| corrupt(e.to_string());
        let voxels = match self.dtype {
            DType::U8 => VoxelBuffer::from_vec(
                a.array
                    .retrieve_chunk_opt::<Vec<u8>>(&idx, &opts)
                    .map_err(err)?,
            )
            .into_voxels(),
            DType::I16 => VoxelBuffer::from_vec(
                a.array
                    .retrieve_chunk_opt::<Vec<i16>>(&idx, &opts)
                    .map_err(err)?,
            )
            .into_voxels(),
            DType::U16 => VoxelBuffer::from_vec(
                a.array
                    .retrieve_chunk_opt::<Vec<u16>>(&idx, &opts)
                    .map_err(err)?,
            )
            .into_voxels(),
            DType::F32 => VoxelBuffer::from_vec(
                a.array
                    .retrieve_chunk_opt::<Vec<f32>>(&idx, &opts)
                    .map_err(err)?,
            )
            .into_voxels(),
        };
        let chunk = Arc::new(voxels);
        self.cache.insert(key, chunk.clone());
        Ok(chunk)
    }

    /// The chunk index ranges covering a region of a level.
    fn chunk_ranges(&self, level: usize, r: &Region) -> [std::ops::Range<usize>; 3] {
        let cs = self.arrays[level].chunk;
        [0, 1, 2].map(|a| r[a].start / cs[a]..(r[a].end - 1) / cs[a] + 1)
    }

    fn read(&self, level: usize, region: &Region) -> Result<Volume, ReadError> {
        let Some(info) = self.levels.get(level) else {
            return Err(ReadError::NoLevel {
                level,
                count: self.levels.len(),
            });
        };
        let r = clamp_region(region, info.dims)?;
        let bytes = crate::volume::source::region_voxels(&r) * self.dtype.size_bytes() as u64;
        if bytes > self.max_block_bytes.max(64 << 20) {
            return Err(ReadError::TooLarge {
                bytes,
                budget: self.max_block_bytes,
            });
        }
        let voxels = match self.dtype {
            DType::U8 => self.assemble::<u8>(level, &r)?.into_voxels(),
            DType::I16 => self.assemble::<i16>(level, &r)?.into_voxels(),
            DType::U16 => self.assemble::<u16>(level, &r)?.into_voxels(),
            DType::F32 => self.assemble::<f32>(level, &r)?.into_voxels(),
        };
        let w = info.world_from_voxel;
        let origin = w.voxel_to_world(VoxelPoint::new(
            r[0].start as f64,
            r[1].start as f64,
            r[2].start as f64,
        ));
        let wfv = Affine3::from_linear_translation(&w.linear(), &origin.0.coords);
        let dims = [r[0].len(), r[1].len(), r[2].len()];
        let mut v =
            Volume::new(dims, wfv, voxels, self.rescale).map_err(|e| ReadError::Storage {
                path: self.path.clone(),
                what: e.to_string(),
            })?;
        v.spacing_origin = self.spacing_origin;
        Ok(v)
    }

    /// Copies a region out of its chunks, one layer of chunks along `k` at a time: the
    /// layer's chunks are fetched (missing ones decoded in parallel), then copied slice by
    /// slice in parallel.
    fn assemble<T: Voxel>(&self, level: usize, r: &Region) -> Result<VoxelBuffer<T>, ReadError>
    where
        VoxelBuffer<T>: IntoVoxels,
    {
        let cs = self.arrays[level].chunk;
        let cr = self.chunk_ranges(level, r);
        let (nx, ny, nz) = (r[0].len(), r[1].len(), r[2].len());
        let mut out = VoxelBuffer::<T>::zeroed(nx * ny * nz).map_err(|e| ReadError::Storage {
            path: self.path.clone(),
            what: e.to_string(),
        })?;
        let layer_keys: Vec<[usize; 2]> = cr[1]
            .clone()
            .flat_map(|cj| cr[0].clone().map(move |ci| [ci, cj]))
            .collect();
        for ck in cr[2].clone() {
            let k_lo = r[2].start.max(ck * cs[2]);
            let k_hi = r[2].end.min((ck + 1) * cs[2]);
            // the chunks' slices up to the region's last one in this layer
            let chunks: Vec<Arc<Voxels>> = layer_keys
                .par_iter()
                .map(|&[ci, cj]| self.chunk_slices(level, [ci, cj, ck], k_hi - ck * cs[2]))
                .collect::<Result<_, _>>()
                .map_err(ReadError::from)?;
            let typed: Vec<&[T]> = chunks
                .iter()
                .map(|c| crate::with_voxels!(c.as_ref(), |s| bytemuck::cast_slice::<_, T>(s)))
                .collect();
            let slice = nx * ny;
            let dst =
                &mut out.as_mut_slice()[(k_lo - r[2].start) * slice..(k_hi - r[2].start) * slice];
            dst.par_chunks_mut(slice)
                .enumerate()
                .for_each(|(dk, plane)| {
                    let kk = k_lo + dk - ck * cs[2];
                    for (n, &[ci, cj]) in layer_keys.iter().enumerate() {
                        let src = typed[n];
                        let i_lo = r[0].start.max(ci * cs[0]);
                        let i_hi = r[0].end.min((ci + 1) * cs[0]);
                        let j_lo = r[1].start.max(cj * cs[1]);
                        let j_hi = r[1].end.min((cj + 1) * cs[1]);
                        for j in j_lo..j_hi {
                            let s0 = (i_lo - ci * cs[0]) + cs[0] * ((j - cj * cs[1]) + cs[1] * kk);
                            let d0 = (i_lo - r[0].start) + nx * (j - r[1].start);
                            plane[d0..d0 + (i_hi - i_lo)]
                                .copy_from_slice(&src[s0..s0 + (i_hi - i_lo)]);
                        }
                    }
                });
        }
        Ok(out)
    }

    /// Decodes the chunks of a region that the cache lacks (the background half of
    /// [`VolumeSource::prefetch`]).
    fn warm(&self, level: usize, region: &Region) {
        let Some(info) = self.levels.get(level) else {
            return;
        };
        let Ok(r) = clamp_region(region, info.dims) else {
            return;
        };
        let cr = self.chunk_ranges(level, &r);
        let whole = self.arrays[level].chunk.iter().product::<usize>();
        let [ri, rj, rk] = cr;
        let keys: Vec<[usize; 3]> = rk
            .flat_map(|k| {
                let ri = ri.clone();
                rj.clone()
                    .flat_map(move |j| ri.clone().map(move |i| [i, j, k]))
            })
            .filter(|c| self.cache.voxels_of(&(level, *c)) != Some(whole))
            .collect();
        // at most half the budget, so a prefetch never evicts what the view shows
        let per =
            (self.arrays[level].chunk.iter().product::<usize>() * self.dtype.size_bytes()) as u64;
        let most = (self.cache.budget_bytes() / 2 / per.max(1)) as usize;
        keys.par_iter().take(most).for_each(|&c| {
            let _ = self.chunk(level, c);
        });
    }
}

impl VolumeSource for Store {
    fn dtype(&self) -> DType {
        self.inner.dtype
    }
    fn rescale(&self) -> Option<Rescale> {
        self.inner.rescale
    }
    fn level_count(&self) -> usize {
        self.inner.levels.len()
    }
    fn level(&self, level: usize) -> Level {
        self.inner.levels[level]
    }
    fn read_block(&self, level: usize, region: &Region) -> Result<Block<'_>, ReadError> {
        self.inner.read(level, region).map(Block::Read)
    }
    fn notes(&self) -> &[String] {
        &self.inner.notes
    }
    fn spacing_origin(&self) -> SpacingOrigin {
        self.inner.spacing_origin
    }
    fn intensity(&self) -> Result<Intensity, ReadError> {
        if let Some(f) = &self.inner.facts {
            return Ok(Intensity::from(&f.intensity));
        }
        // a foreign store: exact from the coarsest level that fits the block limit, else say so
        let l = self.level_within(self.inner.max_block_bytes.min(256 << 20));
        let block = self.read_block(l, &self.level(l).full_region())?;
        let mut i = Intensity::of_volume(&block);
        if l > 0 {
            i.exact = false;
            i.note = Some(format!(
                "computed from level {l} (block means of {:?} voxels): the extremes and \
                 percentiles of the full resolution lie further out",
                self.level(l).factor
            ));
        }
        Ok(i)
    }
    fn prefetch(&self, level: usize, region: &Region) {
        let inner = self.inner.clone();
        if inner.prefetching.swap(true, Ordering::AcqRel) {
            return; // one prefetch at a time; the next request will ask again
        }
        let region = region.clone();
        rayon::spawn(move || {
            inner.warm(level, &region);
            inner.prefetching.store(false, Ordering::Release);
        });
    }
}
