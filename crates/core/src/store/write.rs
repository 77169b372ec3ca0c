//! Streaming conversion of any scan into a store, with bounded memory.
//!
//! The source is read one layer of chunks at a time (`chunk` slices, decoded in parallel by
//! the [`SliceReader`]) into the level-0 layer buffer, whose chunks are then compressed and
//! written in parallel. Every level-0 slice also feeds the coarser levels: each level keeps the
//! sums and counts of the one slice it is building (f64, exact for every integer type), and a
//! finished slice is rounded into that level's layer buffer and passed on, as sums, to the next
//! level. So every level is the exact block mean of level 0 (integers rounded half to even, as
//! numpy rounds), and memory is the layer buffers, about 4/3 of `chunk` source slices, plus
//! one slice of sums per level, whatever the scan's depth.
//!
//! Levels: each halves the axes whose voxel side is under 1.5 times the finest side (so an
//! anisotropic scan halves its finer axes first) until a level fits in `coarsest_bytes`.
//!
//! Safety: everything is written under `NAME.ome.zarr.partial/`, renamed to `NAME.ome.zarr`
//! once whole. A checkpoint (`sutura-progress.json`) is written each time every level's
//! buffers are empty (every `chunk · 2^levels` slices or so) with the intensity counts so far;
//! a conversion run again on the same source and options resumes from it, any other restarts
//! cleanly.

use super::meta::{self, Facts, IntensityFacts, LevelFacts, SourceFacts};
use super::write_behind::WriteBehind;
use super::{PARTIAL_SUFFIX, StoreError};
use crate::io::Progress;
use crate::io::slices::SliceReader;
use crate::volume::stats::{Partial as FloatPartial, partial_of};
use crate::volume::stats::{count_into, intensity_from_counts, intensity_from_fine_histogram};
use crate::volume::{DType, Histogram, Intensity, Level, Rescale, Stats, Voxel};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use zarrs::array::BytesToBytesCodecTraits;
use zarrs::array::builder::ArrayBuilderFillValue;
use zarrs::array::codec::{
    BloscCodec, BloscCompressionLevel, BloscCompressor, BloscShuffleMode, GzipCodec, ZstdCodec,
};
use zarrs::array::{Array, ArrayBuilder, CodecOptions, DataType, Element, data_type};
use zarrs::group::GroupBuilder;

/// The compressor of a store's chunks.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Codec {
    /// Zstandard at a level (1 fastest … 22 smallest).
    Zstd(i32),
    /// Blosc with LZ4 and byte shuffling, at a level (0 … 9).
    BloscLz4(u8),
    /// gzip at a level (0 … 9).
    Gzip(u32),
    /// No compression.
    Raw,
}

impl Codec {
    /// The default: zstd at level 1, the fastest zstd level (planes are read far more often
    /// than written). `cargo bench --bench store` measures every candidate on the same scan.
    pub const DEFAULT: Self = Self::Zstd(1);

    /// `zstd/1`, `blosc-lz4/5`, `gzip/6`, `raw`.
    #[must_use]
    pub fn name(self) -> String {
        match self {
            Self::Zstd(l) => format!("zstd/{l}"),
            Self::BloscLz4(l) => format!("blosc-lz4/{l}"),
            Self::Gzip(l) => format!("gzip/{l}"),
            Self::Raw => "raw".into(),
        }
    }

    /// Parses [`Self::name`]'s form (`zstd`, `zstd/3`, `blosc-lz4`, `gzip/6`, `raw`).
    pub fn parse(text: &str) -> Result<Self, String> {
        let (name, level) = match text.split_once('/') {
            Some((n, l)) => (
                n,
                Some(
                    l.parse::<i64>()
                        .map_err(|_| format!("codec level '{l}' is not a whole number"))?,
                ),
            ),
            None => (text, None),
        };
        Ok(match (name, level) {
            ("zstd", l) => Self::Zstd(l.unwrap_or(1).clamp(-7, 22) as i32),
            ("blosc-lz4", l) => Self::BloscLz4(l.unwrap_or(5).clamp(0, 9) as u8),
            ("gzip", l) => Self::Gzip(l.unwrap_or(6).clamp(0, 9) as u32),
            ("raw", None) => Self::Raw,
            _ => {
                return Err(format!(
                    "codec '{text}': expected zstd[/L], blosc-lz4[/L], gzip[/L] or raw"
                ));
            }
        })
    }

    fn build(self, dtype: DType) -> Result<Vec<Arc<dyn BytesToBytesCodecTraits>>, String> {
        Ok(match self {
            Self::Zstd(l) => vec![Arc::new(ZstdCodec::new(l, false))],
            Self::BloscLz4(l) => vec![Arc::new(
                BloscCodec::new(
                    BloscCompressor::LZ4,
                    BloscCompressionLevel::try_from(l).map_err(|e| e.to_string())?,
                    None,
                    BloscShuffleMode::Shuffle,
                    Some(dtype.size_bytes()),
                )
                .map_err(|e| e.to_string())?,
            )],
            Self::Gzip(l) => vec![Arc::new(GzipCodec::new(l).map_err(|e| e.to_string())?)],
            Self::Raw => Vec::new(),
        })
    }
}

/// How to convert.
#[derive(Clone, Debug)]
pub struct ConvertOptions {
    /// Chunk side in voxels (64 by default; 16 to 256).
    pub chunk: usize,
    pub codec: Codec,
    /// Levels are added until one holds at most this many bytes (64 MiB by default).
    pub coarsest_bytes: u64,
    /// The source's fingerprint, recorded in the facts (and checked on resume).
    pub source_fingerprint: Option<serde_json::Value>,
    /// Resume an interrupted conversion of the same source with the same options.
    pub resume: bool,
}

impl Default for ConvertOptions {
    fn default() -> Self {
        Self {
            chunk: 64,
            codec: Codec::DEFAULT,
            coarsest_bytes: 64 << 20,
            source_fingerprint: None,
            resume: true,
        }
    }
}

/// What a conversion did.
#[derive(Clone, Debug)]
pub struct ConvertReport {
    pub path: PathBuf,
    /// The stored voxel type.
    pub dtype: DType,
    pub levels: Vec<Level>,
    /// The level-0 slice a resumed conversion started from.
    pub resumed_from: Option<usize>,
    pub intensity: Intensity,
    /// Bytes of the chunk files written, all levels.
    pub stored_bytes: u64,
}

/// The factors over level 0 of every level (see the module docs).
#[must_use]
pub fn plan_levels(
    dims: [usize; 3],
    spacing_mm: [f64; 3],
    voxel_bytes: usize,
    coarsest_bytes: u64,
) -> Vec<[usize; 3]> {
    let mut out = vec![[1usize; 3]];
    loop {
        let f = *out.last().expect("level 0");
        let d = [0, 1, 2].map(|a| dims[a].div_ceil(f[a]));
        let bytes = d.iter().map(|&n| n as u64).product::<u64>() * voxel_bytes as u64;
        if bytes <= coarsest_bytes || out.len() >= 16 {
            return out;
        }
        let s = [0, 1, 2].map(|a| spacing_mm[a] * f[a] as f64);
        let finest = (0..3)
            .filter(|&a| d[a] > 1)
            .map(|a| s[a])
            .fold(f64::INFINITY, f64::min);
        let mut next = f;
        for a in 0..3 {
            if d[a] > 1 && s[a] < 1.5 * finest {
                next[a] *= 2;
            }
        }
        if next == f {
            return out;
        }
        out.push(next);
    }
}

/// The progress file's name inside a partial store.
const PROGRESS_FILE: &str = "sutura-progress.json";
const COUNTS_FILE: &str = "sutura-progress-counts.bin";

/// A checkpoint (see the module docs).
#[derive(Serialize, Deserialize, PartialEq, Debug)]
struct Checkpoint {
    source: String,
    fingerprint: Option<serde_json::Value>,
    dims: [usize; 3],
    dtype: DType,
    chunk: usize,
    codec: Codec,
    factors: Vec<[usize; 3]>,
    /// Level-0 slices done.
    next_k: usize,
    /// Float scans: the statistics so far.
    partial: Option<FloatPartial>,
}

/// A voxel type a store holds: its Zarr data type and the rounding of a block mean.
trait StoreVoxel: Voxel + Element + Into<ArrayBuilderFillValue> {
    fn zarr() -> DataType;
    /// `None` for floats; the value range for the count table of integers.
    const TABLE_MIN: Option<i64>;
    const TABLE_LEN: usize;
    fn from_mean(x: f64) -> Self;
    /// Adds a row of the level below to the running sums and counts of a row of this level,
    /// `rx` voxels to each (the last block may be shorter; NaN skipped), in order.
    fn add_row(row: &[Self], rx: usize, sums: &mut [f64], counts: &mut [u32]);
    /// The smallest and largest number in `values` (NaN skipped); `None` when there is none.
    fn range(values: &[Self]) -> Option<(f32, f32)>;
}

macro_rules! store_int {
    ($t:ty, $z:expr, $min:expr, $len:expr) => {
        impl StoreVoxel for $t {
            fn zarr() -> DataType {
                $z
            }
            const TABLE_MIN: Option<i64> = Some($min);
            const TABLE_LEN: usize = $len;
            fn from_mean(x: f64) -> Self {
                if x.is_nan() {
                    0
                } else {
                    x.round_ties_even()
                        .clamp(f64::from(<$t>::MIN), f64::from(<$t>::MAX)) as $t
                }
            }
            #[inline]
            fn add_row(row: &[Self], rx: usize, sums: &mut [f64], counts: &mut [u32]) {
                // integers add exactly in any order: one conversion per block; pairs (the
                // usual halving) without a loop per block, so the compiler vectorises them
                if rx == 2 {
                    let mut pairs = row.chunks_exact(2);
                    for ((s, c), p) in sums.iter_mut().zip(counts.iter_mut()).zip(&mut pairs) {
                        *s += f64::from(i32::from(p[0]) + i32::from(p[1]));
                        *c += 2;
                    }
                    if let [v] = pairs.remainder() {
                        sums[row.len() / 2] += f64::from(*v);
                        counts[row.len() / 2] += 1;
                    }
                    return;
                }
                for ((s, c), block) in sums.iter_mut().zip(counts.iter_mut()).zip(row.chunks(rx)) {
                    let b: i64 = block.iter().map(|&v| i64::from(v)).sum();
                    *s += b as f64;
                    *c += block.len() as u32;
                }
            }
            fn range(values: &[Self]) -> Option<(f32, f32)> {
                let lo = values.iter().copied().min()?;
                let hi = values.iter().copied().max()?;
                Some((lo.to_f32(), hi.to_f32()))
            }
        }
    };
}
store_int!(u8, data_type::uint8(), 0, 256);
store_int!(i16, data_type::int16(), -32768, 65536);
store_int!(u16, data_type::uint16(), 0, 65536);

impl StoreVoxel for f32 {
    fn zarr() -> DataType {
        data_type::float32()
    }
    const TABLE_MIN: Option<i64> = None;
    const TABLE_LEN: usize = 0;
    fn from_mean(x: f64) -> Self {
        x as f32
    }
    #[inline]
    fn add_row(row: &[Self], rx: usize, sums: &mut [f64], counts: &mut [u32]) {
        // voxel by voxel into the running sum: the rounding of the level's means is the
        // order of the voxels
        for ((sum, count), block) in sums.iter_mut().zip(counts.iter_mut()).zip(row.chunks(rx)) {
            for &v in block {
                if !v.is_nan() {
                    *sum += f64::from(v);
                    *count += 1;
                }
            }
        }
    }
    fn range(values: &[Self]) -> Option<(f32, f32)> {
        let (lo, hi) = values
            .iter()
            .fold((f32::INFINITY, f32::NEG_INFINITY), |(lo, hi), &x| {
                (lo.min(x), hi.max(x))
            });
        (lo <= hi).then_some((lo, hi))
    }
}

/// Bytes of slices the reading thread decodes at once (at most 8 slices).
const READ_GROUP_BYTES: usize = 32 << 20;
/// Groups of slices in flight between the reading thread and the converter: enough for the
/// reader to run a whole 64-slice layer of 1024² u16 slices ahead while a layer is compressed
/// (at most 256 MiB). With three, a `.nii.gz` reader waited for buffers during each layer's
/// compression: 1024³ converted in 9.2–9.7 s against 7.6–7.7 s with eight (measured).
const READ_BUFFERS: usize = 8;

/// Slices `k .. k + n` read into a buffer, or why not.
type Read<T> = Result<(usize, usize, Vec<T>), crate::io::IoError>;

/// Converts a scan into a store at `out` (a folder, normally `NAME.ome.zarr`); see the module
/// docs. Refuses an existing `out`.
pub fn convert(
    reader: &mut dyn SliceReader,
    out: &Path,
    options: &ConvertOptions,
    progress: &Progress<'_>,
) -> Result<ConvertReport, StoreError> {
    if out.exists() {
        return Err(StoreError::usage(
            out,
            "already exists; remove it or choose another name",
        ));
    }
    if !(16..=256).contains(&options.chunk) {
        return Err(StoreError::usage(
            out,
            format!("chunk side {} is outside 16..256", options.chunk),
        ));
    }
    match reader.dtype() {
        DType::U8 => Converter::<u8>::run(reader, out, options, progress),
        DType::I16 => Converter::<i16>::run(reader, out, options, progress),
        DType::U16 => Converter::<u16>::run(reader, out, options, progress),
        DType::F32 => Converter::<f32>::run(reader, out, options, progress),
    }
}

/// The partial folder of a store path.
#[must_use]
pub fn partial_path(out: &Path) -> PathBuf {
    let mut s = out.as_os_str().to_owned();
    s.push(PARTIAL_SUFFIX);
    PathBuf::from(s)
}

/// One level being written.
struct LevelWriter<T> {
    dims: [usize; 3],
    /// Factor over the level below (1 or 2 per axis); `[1; 3]` at level 0.
    rel: [usize; 3],
    array: Array<WriteBehind>,
    /// `chunk` slices of this level.
    layer: Vec<T>,
    /// Slices of `layer` filled.
    filled: usize,
    /// The chunk layer `layer` belongs to.
    layer_index: usize,
    /// Sums and counts of the slice being built (levels above 0).
    sum: Vec<f64>,
    cnt: Vec<u32>,
    /// Lower-level slices added to it.
    seen: usize,
    /// The index of the slice being built.
    k: usize,
}

struct Converter<T> {
    partial: PathBuf,
    storage: Arc<WriteBehind>,
    chunk: usize,
    levels: Vec<LevelWriter<T>>,
    block_range: Array<WriteBehind>,
    table: Vec<u64>,
    float: FloatPartial,
    codec_options: CodecOptions,
}

impl<T: StoreVoxel> Converter<T> {
    #[allow(
        clippy::too_many_lines,
        reason = "one pass from opening to renaming, in order"
    )]
    fn run(
        reader: &mut dyn SliceReader,
        out: &Path,
        options: &ConvertOptions,
        progress: &Progress<'_>,
    ) -> Result<ConvertReport, StoreError> {
        let dims = reader.dims();
        let world = reader.world_from_voxel();
        let factors = plan_levels(
            dims,
            world.column_lengths(),
            T::DTYPE.size_bytes(),
            options.coarsest_bytes,
        );
        let partial = partial_path(out);
        let checkpoint_now = Checkpoint {
            source: reader.path().display().to_string(),
            fingerprint: options.source_fingerprint.clone(),
            dims,
            dtype: T::DTYPE,
            chunk: options.chunk,
            codec: options.codec,
            factors: factors.clone(),
            next_k: 0,
            partial: None,
        };
        // resume, or start afresh
        let resume = if options.resume && partial.is_dir() {
            read_checkpoint(&partial, &checkpoint_now)
        } else {
            None
        };
        if resume.is_none() && partial.exists() {
            std::fs::remove_dir_all(&partial).map_err(|e| StoreError::os(&partial, e))?;
        }
        std::fs::create_dir_all(&partial).map_err(|e| StoreError::os(&partial, e))?;
        let fs = Arc::new(WriteBehind::new(&partial)?);
        let codecs = options
            .codec
            .build(T::DTYPE)
            .map_err(|e| StoreError::usage(out, e))?;
        let c = options.chunk as u64;
        let mut levels = Vec::new();
        for (l, f) in factors.iter().enumerate() {
            let info = Level::coarsened(dims, &world, *f);
            let d = info.dims;
            let mut b = ArrayBuilder::new(
                vec![d[2] as u64, d[1] as u64, d[0] as u64],
                vec![c, c, c],
                T::zarr(),
                T::default(),
            );
            b.bytes_to_bytes_codecs(codecs.clone());
            b.dimension_names(Some(["z", "y", "x"]));
            let array = b
                .build(fs.clone(), &format!("/{l}"))
                .map_err(|e| StoreError::corrupt(&partial, format!("level {l}: {e}")))?;
            array
                .store_metadata()
                .map_err(|e| StoreError::corrupt(&partial, format!("level {l}: {e}")))?;
            let rel = if l == 0 {
                [1; 3]
            } else {
                [0, 1, 2].map(|a| f[a] / factors[l - 1][a])
            };
            let slice = d[0] * d[1];
            levels.push(LevelWriter {
                dims: d,
                rel,
                array,
                layer: vec![T::default(); slice * options.chunk],
                filled: 0,
                layer_index: 0,
                sum: if l == 0 { Vec::new() } else { vec![0.0; slice] },
                cnt: if l == 0 { Vec::new() } else { vec![0; slice] },
                seen: 0,
                k: 0,
            });
        }
        let grid = [0, 1, 2].map(|a| dims[a].div_ceil(options.chunk) as u64);
        let mut rb = ArrayBuilder::new(
            vec![grid[2], grid[1], grid[0], 2],
            vec![1, grid[1], grid[0], 2],
            data_type::float32(),
            f32::NAN,
        );
        rb.bytes_to_bytes_codecs(vec![Arc::new(ZstdCodec::new(1, false))]);
        rb.dimension_names(Some(["z", "y", "x", "min_max"]));
        let block_range = rb
            .build(fs.clone(), "/block_range")
            .map_err(|e| StoreError::corrupt(&partial, format!("block_range: {e}")))?;
        block_range
            .store_metadata()
            .map_err(|e| StoreError::corrupt(&partial, format!("block_range: {e}")))?;
        let mut conv = Converter {
            partial: partial.clone(),
            storage: fs.clone(),
            chunk: options.chunk,
            levels,
            block_range,
            table: vec![0; T::TABLE_LEN],
            float: FloatPartial::EMPTY,
            codec_options: CodecOptions::default().with_concurrent_target(1),
        };
        let mut k0 = 0;
        if let Some((cp, table)) = &resume {
            k0 = cp.next_k;
            if let Some(p) = cp.partial {
                conv.float = p;
            }
            if let Some(t) = table {
                conv.table.clone_from(t);
            }
            // the levels' state at a checkpoint: every buffer empty, slice k of level l at
            // k0 / factor
            for (l, lw) in conv.levels.iter_mut().enumerate() {
                lw.k = k0 / factors[l][2];
                lw.layer_index = lw.k / options.chunk;
            }
        }
        let resumed_from = resume.as_ref().map(|_| k0);
        let coarsest_z = factors.last().expect("level 0")[2] * options.chunk;
        let nz = dims[2];
        let slice = dims[0] * dims[1];
        // Reading overlaps the rest: a reader thread decodes the next slices (a few at a time,
        // within one chunk layer) while this one counts, averages and compresses the layer.
        let group = (READ_GROUP_BYTES / (slice * T::DTYPE.size_bytes()).max(1)).clamp(1, 8);
        let chunk = options.chunk;
        let source: &mut dyn SliceReader = &mut *reader;
        // the reader only asks whether to go on; progress is the converter's (slices done)
        let go_on = |_: u64, _: u64| !progress.is_cancelled();
        let reading = Progress::new(Some(&go_on));
        let reading = &reading;
        std::thread::scope(|scope| -> Result<(), StoreError> {
            let (full_tx, full_rx) = std::sync::mpsc::sync_channel::<Read<T>>(READ_BUFFERS - 1);
            let (free_tx, free_rx) = std::sync::mpsc::channel::<Vec<T>>();
            for _ in 0..READ_BUFFERS {
                let _ = free_tx.send(vec![T::default(); group * slice]);
            }
            let start = k0;
            scope.spawn(move || {
                let mut k = start;
                while k < nz {
                    let layer_end = ((k / chunk + 1) * chunk).min(nz);
                    let n = group.min(layer_end - k);
                    let Ok(mut buf) = free_rx.recv() else { return };
                    let dst: &mut [u8] = bytemuck::cast_slice_mut(&mut buf[..n * slice]);
                    let read = source.read_slices(k, dst, reading);
                    let failed = read.is_err();
                    if full_tx.send(read.map(|()| (k, n, buf))).is_err() || failed {
                        return;
                    }
                    k += n;
                }
            });
            while k0 < nz {
                let n = chunk.min(nz - k0);
                let mut got = 0;
                while got < n {
                    let (k, m, buf) = full_rx
                        .recv()
                        .map_err(|_| StoreError::corrupt(out, "the reading thread stopped"))?
                        .map_err(|e| match e {
                            crate::io::IoError::Cancelled { .. } => StoreError::Cancelled {
                                path: out.to_owned(),
                            },
                            e => StoreError::Source(e),
                        })?;
                    debug_assert_eq!(k, k0 + got, "slices arrive in order");
                    conv.levels[0].layer[got * slice..(got + m) * slice]
                        .copy_from_slice(&buf[..m * slice]);
                    let _ = free_tx.send(buf);
                    conv.count(got * slice..(got + m) * slice);
                    for s in got..got + m {
                        conv.feed_from_level0(s, k0 + s == nz - 1)?;
                    }
                    got += m;
                }
                conv.levels[0].filled = n;
                conv.flush(0)?;
                k0 += n;
                if k0 % coarsest_z == 0 && k0 < nz {
                    conv.checkpoint(&checkpoint_now, k0)?;
                }
                if !progress.report(k0 as u64, nz as u64) {
                    return Err(StoreError::Cancelled {
                        path: out.to_owned(),
                    });
                }
            }
            Ok(())
        })?;
        // intensity
        let rescale = reader.rescale();
        let intensity = match T::TABLE_MIN {
            Some(min) => intensity_from_counts(&conv.table, min, rescale),
            None => conv.float_intensity(rescale)?,
        };
        let level_infos: Vec<Level> = factors
            .iter()
            .map(|f| Level::coarsened(dims, &world, *f))
            .collect();
        let facts = Facts {
            format_version: meta::FACTS_VERSION,
            complete: true,
            dims,
            dtype: T::DTYPE,
            world_from_voxel: world.rows(),
            rescale,
            spacing_origin: reader.spacing_origin(),
            notes: {
                let mut n = reader.notes();
                if !meta::ngff_is_exact(&world) {
                    n.push("the scan's voxel axes are oblique to the world: the NGFF scale and translation give the grid in its own frame; Sutura's facts keep the full placement".into());
                }
                n
            },
            source: SourceFacts {
                path: reader.path().display().to_string(),
                fingerprint: options.source_fingerprint.clone(),
            },
            levels: factors
                .iter()
                .enumerate()
                .map(|(l, f)| LevelFacts {
                    path: l.to_string(),
                    factor: *f,
                })
                .collect(),
            chunk: [options.chunk; 3],
            codec: options.codec.name(),
            intensity: IntensityFacts::from(&intensity),
            iso50: None,
            block_range_path: "block_range".into(),
        };
        let name = out
            .file_name()
            .map(|n| n.to_string_lossy().trim_end_matches(".ome.zarr").to_owned())
            .unwrap_or_default();
        let attrs = meta::group_attributes(
            &name,
            &level_infos
                .iter()
                .enumerate()
                .map(|(l, i)| (l.to_string(), i.world_from_voxel))
                .collect::<Vec<_>>(),
            &facts,
        );
        let mut gb = GroupBuilder::new();
        gb.attributes(attrs.as_object().cloned().unwrap_or_default());
        let group = gb
            .build(fs.clone(), "/")
            .map_err(|e| StoreError::corrupt(&partial, format!("group: {e}")))?;
        group
            .store_metadata()
            .map_err(|e| StoreError::corrupt(&partial, format!("group: {e}")))?;
        for f in [PROGRESS_FILE, COUNTS_FILE] {
            let p = partial.join(f);
            if p.exists() {
                std::fs::remove_file(&p).map_err(|e| StoreError::os(&p, e))?;
            }
        }
        conv.storage.settle()?;
        sync_dir(&partial);
        std::fs::rename(&partial, out).map_err(|e| StoreError::os(out, e))?;
        if let Some(parent) = out.parent() {
            sync_dir(parent);
        }
        Ok(ConvertReport {
            path: out.to_owned(),
            dtype: T::DTYPE,
            levels: level_infos,
            resumed_from,
            intensity,
            stored_bytes: dir_bytes(out),
        })
    }

    /// Adds the voxels `range` of the level-0 layer to the intensity counts.
    fn count(&mut self, range: std::ops::Range<usize>) {
        const PART: usize = 1 << 20;
        let data = &self.levels[0].layer[range];
        if let Some(min) = T::TABLE_MIN {
            {
                let len = T::TABLE_LEN;
                let t = data
                    .par_chunks(PART)
                    .fold(
                        || vec![0u64; len],
                        |mut t, c| {
                            count_into(&mut t, c, min);
                            t
                        },
                    )
                    .reduce(
                        || vec![0u64; len],
                        |mut a, b| {
                            for (x, y) in a.iter_mut().zip(&b) {
                                *x += y;
                            }
                            a
                        },
                    );
                for (x, y) in self.table.iter_mut().zip(&t) {
                    *x += y;
                }
            }
        } else {
            {
                let p = data
                    .par_chunks(PART)
                    .map(partial_of)
                    .reduce(|| FloatPartial::EMPTY, FloatPartial::merge);
                self.float = self.float.merge(p);
            }
        }
    }

    /// Feeds level-0 slice `s` of the layer into level 1 (and onwards as slices finish).
    fn feed_from_level0(&mut self, s: usize, last_of_scan: bool) -> Result<(), StoreError> {
        if self.levels.len() < 2 {
            return Ok(());
        }
        let (lower, upper) = self.levels.split_at_mut(1);
        let l0 = &lower[0];
        let d0 = l0.dims;
        let slice = &l0.layer[s * d0[0] * d0[1]..(s + 1) * d0[0] * d0[1]];
        let up = &mut upper[0];
        let [rx, ry, _] = up.rel;
        let nx = up.dims[0];
        up.sum
            .par_chunks_mut(nx)
            .zip(up.cnt.par_chunks_mut(nx))
            .enumerate()
            .for_each(|(j, (srow, crow))| {
                for y in j * ry..((j + 1) * ry).min(d0[1]) {
                    // one block of `rx` voxels per level voxel (no division per voxel)
                    T::add_row(&slice[y * d0[0]..(y + 1) * d0[0]], rx, srow, crow);
                }
            });
        up.seen += 1;
        if up.seen == up.rel[2] || last_of_scan {
            self.finish_slice(1, last_of_scan)?;
        }
        Ok(())
    }

    /// Level `l`'s slice is complete: round it into the layer, pass its sums on, flush a full
    /// layer.
    fn finish_slice(&mut self, l: usize, last_of_scan: bool) -> Result<(), StoreError> {
        {
            let lw = &mut self.levels[l];
            let slice = lw.dims[0] * lw.dims[1];
            let at = lw.filled * slice;
            let (sum, cnt) = (&lw.sum, &lw.cnt);
            lw.layer[at..at + slice]
                .par_iter_mut()
                .zip(sum.par_iter().zip(cnt.par_iter()))
                .for_each(|(o, (&s, &c))| {
                    *o = T::from_mean(if c == 0 { f64::NAN } else { s / f64::from(c) });
                });
            lw.filled += 1;
        }
        if l + 1 < self.levels.len() {
            let (lower, upper) = self.levels.split_at_mut(l + 1);
            let lo = &lower[l];
            let up = &mut upper[0];
            let [rx, ry, _] = up.rel;
            let (nx, d) = (up.dims[0], lo.dims);
            up.sum
                .par_chunks_mut(nx)
                .zip(up.cnt.par_chunks_mut(nx))
                .enumerate()
                .for_each(|(j, (srow, crow))| {
                    for y in j * ry..((j + 1) * ry).min(d[1]) {
                        let s = &lo.sum[y * d[0]..(y + 1) * d[0]];
                        let c = &lo.cnt[y * d[0]..(y + 1) * d[0]];
                        for (((so, co), sb), cb) in srow
                            .iter_mut()
                            .zip(crow.iter_mut())
                            .zip(s.chunks(rx))
                            .zip(c.chunks(rx))
                        {
                            // the same order of additions as voxel by voxel
                            for (v, n) in sb.iter().zip(cb) {
                                *so += v;
                                *co += n;
                            }
                        }
                    }
                });
            up.seen += 1;
            if up.seen == up.rel[2] || last_of_scan {
                self.finish_slice(l + 1, last_of_scan)?;
            }
        }
        let lw = &mut self.levels[l];
        lw.sum.fill(0.0);
        lw.cnt.fill(0);
        lw.seen = 0;
        lw.k += 1;
        if lw.filled == self.chunk || lw.k == lw.dims[2] {
            self.flush(l)?;
        }
        Ok(())
    }

    /// Compresses and writes the filled part of level `l`'s layer buffer, chunks in parallel;
    /// for level 0 also each chunk's minimum and maximum.
    fn flush(&mut self, l: usize) -> Result<(), StoreError> {
        let lw = &self.levels[l];
        if lw.filled == 0 {
            return Ok(());
        }
        let c = self.chunk;
        let d = lw.dims;
        let ck = lw.layer_index;
        let (gi, gj) = (d[0].div_ceil(c), d[1].div_ceil(c));
        let keys: Vec<[usize; 2]> = (0..gj)
            .flat_map(|cj| (0..gi).map(move |ci| [ci, cj]))
            .collect();
        let filled = lw.filled;
        let layer = &lw.layer;
        let array = &lw.array;
        let opts = &self.codec_options;
        let ranges: Vec<[f32; 2]> = keys
            .par_iter()
            .map_init(
                || vec![T::default(); c * c * c],
                |buf, &[ci, cj]| -> Result<[f32; 2], StoreError> {
                    buf.fill(T::default());
                    let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
                    let i0 = ci * c;
                    let iw = c.min(d[0] - i0);
                    for kk in 0..filled {
                        for jj in 0..c.min(d[1] - cj * c) {
                            let src = &layer[i0 + d[0] * (cj * c + jj + d[1] * kk)..][..iw];
                            buf[c * (jj + c * kk)..][..iw].copy_from_slice(src);
                            if l == 0
                                && let Some((a, b)) = T::range(src)
                            {
                                lo = lo.min(a);
                                hi = hi.max(b);
                            }
                        }
                    }
                    array
                        .store_chunk_opt(&[ck as u64, cj as u64, ci as u64], &buf[..], opts)
                        .map_err(|e| {
                            StoreError::corrupt(
                                &self.partial,
                                format!("level {l} chunk {ci},{cj},{ck}: {e}"),
                            )
                        })?;
                    Ok(if lo <= hi { [lo, hi] } else { [f32::NAN; 2] })
                },
            )
            .collect::<Result<_, _>>()?;
        if l == 0 {
            let flat: Vec<f32> = ranges.iter().flatten().copied().collect();
            self.block_range
                .store_chunk_opt(&[ck as u64, 0, 0, 0], &flat[..], opts)
                .map_err(|e| StoreError::corrupt(&self.partial, format!("block_range: {e}")))?;
        }
        let lw = &mut self.levels[l];
        lw.filled = 0;
        lw.layer_index += 1;
        Ok(())
    }

    fn checkpoint(&self, base: &Checkpoint, next_k: usize) -> Result<(), StoreError> {
        if let Some(l) = self
            .levels
            .iter()
            .position(|l| l.filled != 0 || l.seen != 0)
        {
            // not at a boundary of every level (cannot happen with power-of-two factors)
            return Err(StoreError::corrupt(
                &self.partial,
                format!("level {l} is mid-slice at a checkpoint"),
            ));
        }
        let cp = Checkpoint {
            next_k,
            partial: (T::TABLE_MIN.is_none()).then_some(self.float),
            fingerprint: base.fingerprint.clone(),
            source: base.source.clone(),
            factors: base.factors.clone(),
            ..*base
        };
        // the chunks the checkpoint vouches for are on disk before it is
        self.storage.settle()?;
        let counts: Vec<u8> = self.table.iter().flat_map(|c| c.to_le_bytes()).collect();
        write_atomic(&self.partial.join(COUNTS_FILE), &counts)?;
        let json = serde_json::to_vec_pretty(&cp)
            .map_err(|e| StoreError::corrupt(&self.partial, e.to_string()))?;
        write_atomic(&self.partial.join(PROGRESS_FILE), &json)
    }

    /// A float scan's intensity: exact statistics, then one more pass over level 0 (through a
    /// small cache) for a fine histogram.
    fn float_intensity(&mut self, rescale: Option<Rescale>) -> Result<Intensity, StoreError> {
        const FINE: usize = 1 << 16;
        let p = self.float;
        let apply = |x: f64| rescale.map_or(x, |r| r.apply(x));
        let (mut lo, mut hi) = (apply(p.min), apply(p.max));
        if lo > hi {
            std::mem::swap(&mut lo, &mut hi);
        }
        let sum = rescale.map_or(p.sum, |r| r.slope * p.sum + r.intercept * p.count as f64);
        let stats = if p.count == 0 {
            Stats {
                min: f64::NAN,
                max: f64::NAN,
                mean: f64::NAN,
                sum: 0.0,
                count: 0,
                nan_count: p.nan,
            }
        } else {
            Stats {
                min: lo,
                max: hi,
                mean: sum / p.count as f64,
                sum,
                count: p.count,
                nan_count: p.nan,
            }
        };
        let mut fine = Histogram {
            lo,
            hi,
            counts: vec![0; FINE],
            below: 0,
            above: 0,
            nan: 0,
        };
        if p.count > 0 && hi > lo {
            // level 0 as written so far, read back chunk layer by chunk layer
            let l0 = &self.levels[0];
            let c = self.chunk;
            let d = l0.dims;
            let scale = FINE as f64 / (hi - lo);
            let keys: Vec<[usize; 3]> = (0..d[2].div_ceil(c))
                .flat_map(|k| {
                    (0..d[1].div_ceil(c))
                        .flat_map(move |j| (0..d[0].div_ceil(c)).map(move |i| [i, j, k]))
                })
                .collect();
            let opts = &self.codec_options;
            let counts = keys
                .par_iter()
                .map(|&[ci, cj, ck]| -> Result<Vec<u64>, StoreError> {
                    let v: Vec<f32> = l0
                        .array
                        .retrieve_chunk_opt(&[ck as u64, cj as u64, ci as u64], opts)
                        .map_err(|e| StoreError::corrupt(&self.partial, e.to_string()))?;
                    let mut t = vec![0u64; FINE];
                    for kk in 0..c.min(d[2] - ck * c) {
                        for jj in 0..c.min(d[1] - cj * c) {
                            for &x in &v[c * (jj + c * kk)..][..c.min(d[0] - ci * c)] {
                                let x = apply(f64::from(x));
                                if !x.is_nan() {
                                    t[(((x - lo) * scale) as usize).min(FINE - 1)] += 1;
                                }
                            }
                        }
                    }
                    Ok(t)
                })
                .try_reduce(
                    || vec![0u64; FINE],
                    |mut a, b| {
                        for (x, y) in a.iter_mut().zip(&b) {
                            *x += y;
                        }
                        Ok(a)
                    },
                )?;
            fine.counts = counts;
        }
        Ok(intensity_from_fine_histogram(stats, &fine))
    }
}

fn read_checkpoint(partial: &Path, now: &Checkpoint) -> Option<(Checkpoint, Option<Vec<u64>>)> {
    let text = std::fs::read(partial.join(PROGRESS_FILE)).ok()?;
    let cp: Checkpoint = serde_json::from_slice(&text).ok()?;
    let same = cp.source == now.source
        && cp.fingerprint == now.fingerprint
        && cp.dims == now.dims
        && cp.dtype == now.dtype
        && cp.chunk == now.chunk
        && cp.codec == now.codec
        && cp.factors == now.factors
        && cp.next_k > 0
        && cp.next_k < now.dims[2];
    if !same {
        return None;
    }
    let table = if now.dtype == DType::F32 {
        None
    } else {
        let bytes = std::fs::read(partial.join(COUNTS_FILE)).ok()?;
        Some(
            bytes
                .chunks_exact(8)
                .map(|b| u64::from_le_bytes(b.try_into().expect("8 bytes")))
                .collect(),
        )
    };
    Some((cp, table))
}

fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), StoreError> {
    let tmp = path.with_extension("tmp");
    std::fs::write(&tmp, bytes).map_err(|e| StoreError::os(&tmp, e))?;
    if let Ok(f) = std::fs::File::open(&tmp) {
        let _ = f.sync_all();
    }
    std::fs::rename(&tmp, path).map_err(|e| StoreError::os(path, e))
}

/// Flushes a folder's entries to disk (best effort: not every file system allows it).
fn sync_dir(dir: &Path) {
    if let Ok(f) = std::fs::File::open(dir) {
        let _ = f.sync_all();
    }
}

/// Bytes of the files under a folder.
fn dir_bytes(dir: &Path) -> u64 {
    let mut total = 0;
    let mut stack = vec![dir.to_owned()];
    while let Some(d) = stack.pop() {
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        for e in rd.flatten() {
            match e.metadata() {
                Ok(m) if m.is_dir() => stack.push(e.path()),
                Ok(m) => total += m.len(),
                Err(_) => {}
            }
        }
    }
    total
}
