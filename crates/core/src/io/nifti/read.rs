//! The loader: locate the header and voxel files, validate the header into a plan, read the
//! voxel bytes (parallel positioned reads, or one gzip stream), fix byte order, convert types.

use super::header::{self, Header, Version};
use crate::io::{IoError, OpenOptions, Progress};
use crate::volume::{IntoVoxels, Rescale, Volume, VoxelBuffer, Voxels};
use rayon::prelude::*;
use std::fs::File;
use std::io::{BufReader, ErrorKind, Read};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// Bytes per positioned read of uncompressed voxels (one rayon task each).
const PREAD_CHUNK_BYTES: usize = 16 << 20;
/// Bytes inflated per `read` call into the voxel buffer (and per progress report).
const GZ_CHUNK_BYTES: usize = 8 << 20;
/// Chunks faulted in ahead of the inflater.
const GZ_CHUNKS_AHEAD: usize = 4;
/// Buffer between the compressed file and the inflater. Large, because every call into the
/// inflater ends by copying up to 32 KiB of output into its window: with 1 MiB of input per call
/// that copy was 3-4% of the inflating thread's time, with 8 MiB it is under 0.5%.
const GZ_INPUT_BUFFER_BYTES: usize = 8 << 20;

/// The stored type of the voxels in the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Src {
    U8,
    I16,
    U16,
    F32,
    I8,
    I32,
    U32,
    I64,
    U64,
    F64,
}

impl Src {
    /// From a `datatype` code (reference: nifti1.h, `NIFTI_TYPE_*` / `DT_*`).
    fn from_code(path: &Path, code: i16) -> Result<Self, IoError> {
        Ok(match code {
            2 => Self::U8,
            4 => Self::I16,
            8 => Self::I32,
            16 => Self::F32,
            64 => Self::F64,
            256 => Self::I8,
            512 => Self::U16,
            768 => Self::U32,
            1024 => Self::I64,
            1280 => Self::U64,
            1 => {
                return Err(IoError::unsupported(
                    path,
                    "datatype 1 (binary, 1 bit per voxel)",
                ));
            }
            32 | 1792 | 2048 => {
                return Err(IoError::unsupported(
                    path,
                    format!("datatype {code} (complex voxels)"),
                ));
            }
            128 => return Err(IoError::unsupported(path, "datatype 128 (RGB voxels)")),
            2304 => return Err(IoError::unsupported(path, "datatype 2304 (RGBA voxels)")),
            1536 => {
                return Err(IoError::unsupported(
                    path,
                    "datatype 1536 (float128 voxels)",
                ));
            }
            _ => {
                return Err(IoError::corrupt(
                    path,
                    format!("unknown datatype code {code}"),
                ));
            }
        })
    }

    pub(super) const fn size(self) -> usize {
        match self {
            Self::U8 | Self::I8 => 1,
            Self::I16 | Self::U16 => 2,
            Self::F32 | Self::I32 | Self::U32 => 4,
            Self::I64 | Self::U64 | Self::F64 => 8,
        }
    }

    pub(super) const fn name(self) -> &'static str {
        match self {
            Self::U8 => "uint8",
            Self::I16 => "int16",
            Self::U16 => "uint16",
            Self::F32 => "float32",
            Self::I8 => "int8",
            Self::I32 => "int32",
            Self::U32 => "uint32",
            Self::I64 => "int64",
            Self::U64 => "uint64",
            Self::F64 => "float64",
        }
    }
}

/// Where the header and the voxels live.
pub(super) struct Files {
    pub(super) header: PathBuf,
    pub(super) data: PathBuf,
}

fn lower_name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default()
}

/// `path` with its last `strip` characters of file name replaced by each of `exts`; the first
/// that exists.
fn partner(path: &Path, strip: usize, exts: &[&str]) -> Option<PathBuf> {
    let name = path.file_name()?.to_string_lossy().into_owned();
    let stem = name.get(..name.len().checked_sub(strip)?)?;
    exts.iter()
        .map(|e| path.with_file_name(format!("{stem}{e}")))
        .find(|p| p.is_file())
}

#[allow(
    clippy::case_sensitive_file_extension_comparisons,
    reason = "`name` is already lowercased"
)]
pub(super) fn locate(path: &Path) -> Files {
    const IMG: &[&str] = &[".img", ".IMG", ".img.gz", ".IMG.gz", ".IMG.GZ"];
    const HDR: &[&str] = &[".hdr", ".HDR", ".hdr.gz", ".HDR.gz", ".HDR.GZ"];
    let name = lower_name(path);
    let own = || Files {
        header: path.to_owned(),
        data: path.to_owned(),
    };
    let pair = |header: PathBuf, data: PathBuf| Files { header, data };
    if name.ends_with(".hdr") || name.ends_with(".hdr.gz") {
        let strip = if name.ends_with(".gz") { 7 } else { 4 };
        match partner(path, strip, IMG) {
            Some(img) => pair(path.to_owned(), img),
            None => own(),
        }
    } else if name.ends_with(".img") || name.ends_with(".img.gz") {
        let strip = if name.ends_with(".gz") { 7 } else { 4 };
        match partner(path, strip, HDR) {
            Some(hdr) => pair(hdr, path.to_owned()),
            None => own(),
        }
    } else {
        own()
    }
}

pub(super) fn is_gzip(path: &Path) -> Result<bool, IoError> {
    let f = File::open(path).map_err(|e| IoError::os(path, e))?;
    let mut m = [0u8; 2];
    let n = f.read_at(&mut m, 0).map_err(|e| IoError::os(path, e))?;
    Ok(n == 2 && m == [0x1f, 0x8b])
}

/// An error from the inflater or the file under it: damaged data is the file's fault.
pub(super) fn gz_error(path: &Path, e: std::io::Error) -> IoError {
    match e.kind() {
        ErrorKind::InvalidData | ErrorKind::InvalidInput | ErrorKind::UnexpectedEof => {
            IoError::corrupt(path, format!("gzip stream is damaged: {e}"))
        }
        _ => IoError::os(path, e),
    }
}

/// Reads until `buf` is full or the stream ends; returns the bytes read.
pub(super) fn read_full(r: &mut impl Read, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut filled = 0;
    while filled < buf.len() {
        match r.read(&mut buf[filled..]) {
            Ok(0) => break,
            Ok(n) => filled += n,
            Err(e) if e.kind() == ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(filled)
}

pub(super) fn gz_reader(
    path: &Path,
) -> Result<flate2::read::MultiGzDecoder<BufReader<File>>, IoError> {
    let f = File::open(path).map_err(|e| IoError::os(path, e))?;
    Ok(flate2::read::MultiGzDecoder::new(BufReader::with_capacity(
        GZ_INPUT_BUFFER_BYTES,
        f,
    )))
}

/// The first bytes of a (possibly gzipped) file, up to the longest header.
pub(super) fn read_prefix(path: &Path) -> Result<Vec<u8>, IoError> {
    let mut buf = vec![0u8; Version::Nifti2.header_len()];
    let n = if is_gzip(path)? {
        read_full(&mut gz_reader(path)?, &mut buf).map_err(|e| gz_error(path, e))?
    } else {
        let mut f = File::open(path).map_err(|e| IoError::os(path, e))?;
        read_full(&mut f, &mut buf).map_err(|e| IoError::os(path, e))?
    };
    buf.truncate(n);
    Ok(buf)
}

/// Reads and parses the header of a `NIfTI` file (for a pair, give either file).
pub fn read_header(path: &Path) -> Result<Header, IoError> {
    let files = locate(path);
    let bytes = read_prefix(&files.header)?;
    Header::parse(&bytes).map_err(|e| IoError::corrupt(&files.header, e.to_string()))
}

/// Bytes of the voxels a `NIfTI` scan opens to, from its header alone (no voxel is read): the
/// stored type's size for the types held as they are, 4 (at most `f32`) for a type narrowed
/// when read. What a front end compares with its memory budget before reading.
pub fn header_voxel_bytes(path: &Path) -> Result<u64, IoError> {
    let h = read_header(path)?;
    let src = Src::from_code(path, h.datatype)?;
    let (dims3, _) = dim_axis(path, &h)?;
    let per: u64 = match src {
        Src::U8 => 1,
        Src::I16 | Src::U16 => 2,
        _ => 4,
    };
    dims3
        .iter()
        .try_fold(per, |acc, &d| acc.checked_mul(d))
        .ok_or_else(|| IoError::corrupt(path, "voxel byte count overflows"))
}

/// What the header asks us to read, after every check.
pub(super) struct Plan {
    pub(super) dims: [usize; 3],
    pub(super) src: Src,
    /// Byte offset of the voxels in the data file (decompressed offset for gzip).
    pub(super) offset: u64,
    pub(super) nbytes: usize,
    /// Volumes in the file (`dim[4]`); the first is read.
    pub(super) volumes: u64,
    pub(super) world_from_voxel: crate::geometry::Affine3,
    pub(super) rescale: Option<Rescale>,
    pub(super) notes: Vec<String>,
}

fn dim_axis(path: &Path, h: &Header) -> Result<([u64; 3], u64), IoError> {
    let ndim = h.dim[0];
    if !(1..=7).contains(&ndim) {
        return Err(IoError::corrupt(
            path,
            format!("dim[0] is {ndim}, expected 1 to 7"),
        ));
    }
    let ndim = ndim as usize;
    let mut d = [1u64; 8];
    for (i, (di, &v)) in d.iter_mut().zip(&h.dim).enumerate().take(ndim + 1).skip(1) {
        if v < 1 {
            return Err(IoError::corrupt(
                path,
                format!("dim[{i}] is {v}, expected at least 1"),
            ));
        }
        *di = v as u64;
    }
    if let Some(i) = (5..=ndim).find(|&i| d[i] > 1) {
        return Err(IoError::unsupported(
            path,
            format!(
                "{ndim}-dimensional data (dim[{i}] = {}): vector or matrix voxels are not a scan",
                d[i]
            ),
        ));
    }
    Ok(([d[1], d[2], d[3]], d[4]))
}

fn finite_all(v: &[f64]) -> bool {
    v.iter().all(|x| x.is_finite())
}

/// `world_from_voxel` in mm: sform, else qform, else pixdim (nifti1.h's three methods).
fn placement(
    path: &Path,
    h: &Header,
    notes: &mut Vec<String>,
) -> Result<crate::geometry::Affine3, IoError> {
    // pixdim (reference: nifti1.h: pixdim[1..3] are the voxel sizes, pixdim[0] is qfac)
    if !finite_all(&h.pixdim[1..4]) {
        return Err(IoError::corrupt(
            path,
            format!(
                "pixdim[1..3] = {} is not finite",
                crate::message::numbers(&h.pixdim[1..4])
            ),
        ));
    }
    let mm_per_unit = h.mm_per_unit().unwrap_or_else(|| {
        notes.push(format!(
            "xyzt_units {} names no spatial unit; millimetres assumed",
            h.xyzt_units
        ));
        1.0
    });
    let (m, method) = if h.sform_code > 0 {
        let flat: Vec<f64> = h.srow.iter().flatten().copied().collect();
        if !finite_all(&flat) {
            return Err(IoError::corrupt(path, "sform (srow_x/y/z) is not finite"));
        }
        (h.sform_matrix(), "sform")
    } else if h.qform_code > 0 {
        if !finite_all(&h.quatern) || !finite_all(&h.qoffset) {
            return Err(IoError::corrupt(
                path,
                "qform quaternion or offset is not finite",
            ));
        }
        if h.pixdim[1..4].iter().any(|&d| d <= 0.0) {
            notes.push(format!(
                "pixdim[1..3] = {} has a non-positive voxel size; 1 used for it in the qform (nifti1_io rule)",
                crate::message::numbers(&h.pixdim[1..4])
            ));
        }
        (h.qform_matrix(), "qform")
    } else {
        if h.pixdim[1..4].contains(&0.0) {
            notes.push(format!(
                "pixdim[1..3] = {} has a zero voxel size; 1 used for it",
                crate::message::numbers(&h.pixdim[1..4])
            ));
        }
        notes.push("no sform or qform: voxels placed by pixdim scaling alone".into());
        (h.pixdim_matrix(), "pixdim")
    };
    let affine = header::affine(header::to_mm(&m, mm_per_unit))
        .map_err(|e| IoError::corrupt(path, format!("{method}: {e}")))?;
    // Every length, area and step downstream comes from these column lengths: refuse one that
    // is infinite or zero (a column whose squared length over- or underflows f64).
    for (axis, len) in affine.column_lengths().into_iter().enumerate() {
        if !(len.is_finite() && len > 0.0) {
            let field = match method {
                "sform" => format!("column {} of srow_x/srow_y/srow_z", axis + 1),
                _ => format!("pixdim[{}]", axis + 1),
            };
            let why = if len.is_finite() {
                "its length underflows to 0"
            } else {
                "its length overflows"
            };
            return Err(IoError::corrupt(
                path,
                format!(
                    "{method}: the voxel size along {} ({field}) is {len} mm: {why}",
                    ["i", "j", "k"][axis]
                ),
            ));
        }
    }
    Ok(affine)
}

pub(super) fn plan(
    path: &Path,
    h: &Header,
    options: &OpenOptions,
    data_len: Option<u64>,
) -> Result<Plan, IoError> {
    let mut notes = Vec::new();
    if (3000..=3099).contains(&h.intent_code) {
        return Err(IoError::unsupported(
            path,
            format!("CIFTI-2 file (intent code {}), not a scan", h.intent_code),
        ));
    }
    let src = Src::from_code(path, h.datatype)?;
    let (dims3, nt) = dim_axis(path, h)?;
    let n = options.limits.check(path, dims3, src.size() as u64)?;
    let nbytes = n
        .checked_mul(src.size())
        .ok_or_else(|| IoError::corrupt(path, "voxel byte count overflows"))?;
    if nt > 1 {
        notes.push(format!(
            "file holds {nt} volumes (dim[4] = {nt}); the first is loaded"
        ));
    }

    // vox_offset (reference: nifti1.h: for a single file it must be ≥ 352; nibabel 5.x
    // nifti1.py treats 0 in a single file as "unset" and uses the minimum, as here)
    let vo = h.vox_offset;
    if !vo.is_finite() || vo < 0.0 || vo.fract() != 0.0 || vo > 9.0e15 {
        return Err(IoError::corrupt(
            path,
            format!(
                "vox_offset {} is not a byte offset",
                crate::message::number(vo)
            ),
        ));
    }
    let mut offset = vo as u64;
    let hdr_len = h.version.header_len() as u64;
    if h.single_file {
        if offset == 0 {
            offset = hdr_len + 4;
        } else if offset < hdr_len {
            return Err(IoError::corrupt(
                path,
                format!("vox_offset {offset} lies inside the {hdr_len}-byte header"),
            ));
        }
    }
    if let Some(len) = data_len {
        if offset > len {
            return Err(IoError::corrupt(
                path,
                format!("vox_offset {offset} is beyond the end of the file ({len} bytes)"),
            ));
        }
        if len - offset < nbytes as u64 {
            return Err(IoError::corrupt(
                path,
                format!(
                    "truncated: expected {nbytes} bytes of voxel data after offset {offset}, file has {}",
                    len - offset
                ),
            ));
        }
    }

    let world_from_voxel = placement(path, h, &mut notes)?;

    // scl_slope / scl_inter (reference: nifti1.h: slope 0 means no scaling; nibabel 5.x also
    // treats a non-finite slope as none)
    let mut inter = h.scl_inter;
    if h.scl_slope != 0.0 && h.scl_slope.is_finite() && !inter.is_finite() {
        notes.push(format!("scl_inter {inter} is not finite; 0 used"));
        inter = 0.0;
    }
    let rescale = Rescale::new(h.scl_slope, inter);
    Ok(Plan {
        dims: [dims3[0] as usize, dims3[1] as usize, dims3[2] as usize],
        src,
        offset,
        nbytes,
        volumes: nt,
        world_from_voxel,
        rescale,
        notes,
    })
}

/// Opens a `.nii`, `.nii.gz` or `.hdr`/`.img` pair (either file of the pair may be given).
pub fn open(
    path: &Path,
    options: &OpenOptions,
    progress: &Progress<'_>,
) -> Result<Volume, IoError> {
    let files = locate(path);
    let prefix = read_prefix(&files.header)?;
    let h = Header::parse(&prefix).map_err(|e| IoError::corrupt(&files.header, e.to_string()))?;
    let data_path = if h.single_file {
        files.header.clone()
    } else if files.data == files.header {
        return Err(IoError::usage(
            &files.header,
            "header says the voxels are in a separate .img file, and none was found beside it",
        ));
    } else {
        files.data.clone()
    };
    let gz = is_gzip(&data_path)?;
    let data_len = if gz {
        None
    } else {
        Some(
            std::fs::metadata(&data_path)
                .map_err(|e| IoError::os(&data_path, e))?
                .len(),
        )
    };
    let plan = plan(&files.header, &h, options, data_len)?;
    let swap = h.big_endian != cfg!(target_endian = "big");
    let source = Source {
        path: &data_path,
        gz,
        offset: plan.offset,
        check_gz_tail: plan.volumes == 1,
    };
    let voxels = match plan.src {
        Src::U8 => read_native::<u8>(&source, plan.dims, swap, progress)?.into_voxels(),
        Src::I16 => read_native::<i16>(&source, plan.dims, swap, progress)?.into_voxels(),
        Src::U16 => read_native::<u16>(&source, plan.dims, swap, progress)?.into_voxels(),
        Src::F32 => read_native::<f32>(&source, plan.dims, swap, progress)?.into_voxels(),
        other => {
            let mut raw =
                VoxelBuffer::<u8>::zeroed(plan.nbytes).map_err(|e| IoError::os(&data_path, e))?;
            source.read_into(raw.as_bytes_mut(), progress)?;
            if swap {
                swap_in_place(raw.as_bytes_mut(), other.size());
            }
            let (voxels, note) =
                convert(raw.as_slice(), other).map_err(|e| IoError::os(&data_path, e))?;
            let mut v = Volume::new(plan.dims, plan.world_from_voxel, voxels, plan.rescale)
                .map_err(|e| IoError::volume(path, &e))?;
            v.notes = plan.notes;
            v.notes.push(note);
            return Ok(v);
        }
    };
    let mut v = Volume::new(plan.dims, plan.world_from_voxel, voxels, plan.rescale)
        .map_err(|e| IoError::volume(path, &e))?;
    v.notes = plan.notes;
    Ok(v)
}

/// The voxel bytes of one file: uncompressed at an offset, or inside a gzip stream.
struct Source<'a> {
    path: &'a Path,
    gz: bool,
    offset: u64,
    /// Read a gzip stream to its end after the voxels, so its CRC and length are checked (off
    /// for time series, whose later volumes would all have to be inflated for it).
    check_gz_tail: bool,
}

impl Source<'_> {
    fn truncated(&self, want: usize, got: u64) -> IoError {
        IoError::corrupt(
            self.path,
            format!(
                "truncated: expected {want} bytes of voxel data after offset {}, file has {got}",
                self.offset
            ),
        )
    }

    fn read_into(&self, out: &mut [u8], progress: &Progress<'_>) -> Result<(), IoError> {
        if self.gz {
            self.read_gz(out, progress)
        } else {
            self.read_plain(out, progress)
        }
    }

    fn read_plain(&self, out: &mut [u8], progress: &Progress<'_>) -> Result<(), IoError> {
        let f = File::open(self.path).map_err(|e| IoError::os(self.path, e))?;
        let total = out.len() as u64;
        let want = out.len();
        let done = AtomicU64::new(0);
        out.par_chunks_mut(PREAD_CHUNK_BYTES)
            .enumerate()
            .try_for_each(|(i, chunk)| {
                if progress.is_cancelled() {
                    return Err(IoError::Cancelled {
                        path: self.path.to_owned(),
                    });
                }
                let pos = self.offset + (i * PREAD_CHUNK_BYTES) as u64;
                f.read_exact_at(chunk, pos).map_err(|e| {
                    if e.kind() == ErrorKind::UnexpectedEof {
                        let len = f.metadata().map_or(0, |m| m.len());
                        self.truncated(want, len.saturating_sub(self.offset))
                    } else {
                        IoError::os(self.path, e)
                    }
                })?;
                let d = done.fetch_add(chunk.len() as u64, Ordering::Relaxed) + chunk.len() as u64;
                if progress.report(d, total) {
                    Ok(())
                } else {
                    Err(IoError::Cancelled {
                        path: self.path.to_owned(),
                    })
                }
            })
    }

    fn read_gz(&self, out: &mut [u8], progress: &Progress<'_>) -> Result<(), IoError> {
        let mut dec = gz_reader(self.path)?;
        let skipped = std::io::copy(&mut (&mut dec).take(self.offset), &mut std::io::sink())
            .map_err(|e| gz_error(self.path, e))?;
        if skipped < self.offset {
            return Err(IoError::corrupt(
                self.path,
                format!(
                    "vox_offset {} is beyond the end of the decompressed file ({skipped} bytes)",
                    self.offset
                ),
            ));
        }
        let total = out.len() as u64;
        let want = out.len();
        // Inflating is serial, but the first touch of fresh memory costs about as much again
        // (the kernel zeroes every page); a helper thread faults the pages in ahead, chunk by
        // chunk, and hands each chunk over once it is mapped, so the two costs overlap on two
        // cores instead of adding up on one.
        let (ready, chunks) = std::sync::mpsc::sync_channel::<&mut [u8]>(GZ_CHUNKS_AHEAD);
        std::thread::scope(|scope| {
            scope.spawn(move || {
                for chunk in out.chunks_mut(GZ_CHUNK_BYTES) {
                    touch_pages(chunk);
                    if ready.send(chunk).is_err() {
                        break; // the inflater stopped (error or cancel)
                    }
                }
            });
            let mut done = 0u64;
            for chunk in chunks {
                let n = read_full(&mut dec, chunk).map_err(|e| gz_error(self.path, e))?;
                done += n as u64;
                if n < chunk.len() {
                    return Err(self.truncated(want, done));
                }
                if !progress.report(done, total) {
                    return Err(IoError::Cancelled {
                        path: self.path.to_owned(),
                    });
                }
            }
            Ok(())
        })?;
        if self.check_gz_tail {
            std::io::copy(&mut dec, &mut std::io::sink()).map_err(|e| gz_error(self.path, e))?;
        }
        Ok(())
    }
}

/// Writes one byte of every 4 KiB page (common practice: the smallest page size on the
/// platforms Sutura runs on), so the kernel maps the pages now. The buffer is zeroed already,
/// and stays so.
fn touch_pages(chunk: &mut [u8]) {
    for b in chunk.iter_mut().step_by(4096) {
        *b = 0;
    }
}

fn read_native<T: crate::volume::Voxel>(
    source: &Source<'_>,
    dims: [usize; 3],
    swap: bool,
    progress: &Progress<'_>,
) -> Result<VoxelBuffer<T>, IoError> {
    let n = dims[0] * dims[1] * dims[2];
    let mut buf = VoxelBuffer::<T>::zeroed(n).map_err(|e| IoError::os(source.path, e))?;
    source.read_into(buf.as_bytes_mut(), progress)?;
    if swap {
        swap_in_place(buf.as_bytes_mut(), size_of::<T>());
    }
    Ok(buf)
}

/// Reverses the byte order of every `size`-byte element, in parallel.
pub(super) fn swap_in_place(bytes: &mut [u8], size: usize) {
    const CHUNK: usize = 1 << 20;
    match size {
        2 => {
            if let Ok(s) = bytemuck::try_cast_slice_mut::<u8, u16>(bytes) {
                s.par_chunks_mut(CHUNK)
                    .for_each(|c| c.iter_mut().for_each(|v| *v = v.swap_bytes()));
                return;
            }
        }
        4 => {
            if let Ok(s) = bytemuck::try_cast_slice_mut::<u8, u32>(bytes) {
                s.par_chunks_mut(CHUNK)
                    .for_each(|c| c.iter_mut().for_each(|v| *v = v.swap_bytes()));
                return;
            }
        }
        8 => {
            if let Ok(s) = bytemuck::try_cast_slice_mut::<u8, u64>(bytes) {
                s.par_chunks_mut(CHUNK)
                    .for_each(|c| c.iter_mut().for_each(|v| *v = v.swap_bytes()));
                return;
            }
        }
        _ => return,
    }
    bytes
        .par_chunks_mut(CHUNK * size)
        .for_each(|c| c.chunks_exact_mut(size).for_each(<[u8]>::reverse));
}

/// An integer source type, read from native-order bytes.
trait SrcInt: Copy {
    const SIZE: usize;
    fn get(b: &[u8]) -> i128;
}

macro_rules! src_int {
    ($t:ty) => {
        impl SrcInt for $t {
            const SIZE: usize = size_of::<$t>();
            #[inline]
            fn get(b: &[u8]) -> i128 {
                let mut a = [0u8; size_of::<$t>()];
                a.copy_from_slice(b);
                i128::from(<$t>::from_ne_bytes(a))
            }
        }
    };
}
src_int!(i8);
src_int!(i32);
src_int!(u32);
src_int!(i64);
src_int!(u64);

const CONVERT_CHUNK: usize = 1 << 16;

/// Fills a new buffer of `T` from `raw` elements of `size` bytes through `f`, in parallel.
fn fill<T: crate::volume::Voxel>(
    raw: &[u8],
    size: usize,
    f: impl Fn(&[u8]) -> T + Sync,
) -> std::io::Result<VoxelBuffer<T>> {
    let mut out = VoxelBuffer::<T>::zeroed(raw.len() / size)?;
    out.as_mut_slice()
        .par_chunks_mut(CONVERT_CHUNK)
        .zip(raw.par_chunks(CONVERT_CHUNK * size))
        .for_each(|(o, r)| {
            for (o, b) in o.iter_mut().zip(r.chunks_exact(size)) {
                *o = f(b);
            }
        });
    Ok(out)
}

/// Narrowest stored type for an integer range: u8, i16, u16, else f32.
fn narrow_int(lo: i128, hi: i128) -> crate::volume::DType {
    use crate::volume::DType;
    if lo >= 0 && hi <= 255 {
        DType::U8
    } else if lo >= -32768 && hi <= 32767 {
        DType::I16
    } else if lo >= 0 && hi <= 65535 {
        DType::U16
    } else {
        DType::F32
    }
}

fn convert_int<S: SrcInt>(raw: &[u8], name: &str) -> std::io::Result<(Voxels, String)> {
    use crate::volume::DType;
    let (lo, hi) = raw
        .par_chunks(CONVERT_CHUNK * S::SIZE)
        .map(|c| {
            c.chunks_exact(S::SIZE)
                .fold((i128::MAX, i128::MIN), |(lo, hi), b| {
                    let v = S::get(b);
                    (lo.min(v), hi.max(v))
                })
        })
        .reduce(
            || (i128::MAX, i128::MIN),
            |a, b| (a.0.min(b.0), a.1.max(b.1)),
        );
    let target = narrow_int(lo, hi);
    let voxels = match target {
        DType::U8 => Voxels::U8(fill(raw, S::SIZE, |b| S::get(b) as u8)?),
        DType::I16 => Voxels::I16(fill(raw, S::SIZE, |b| S::get(b) as i16)?),
        DType::U16 => Voxels::U16(fill(raw, S::SIZE, |b| S::get(b) as u16)?),
        DType::F32 => Voxels::F32(fill(raw, S::SIZE, |b| S::get(b) as f32)?),
    };
    // f32 holds every integer of magnitude ≤ 2^24 exactly
    let exact = target != DType::F32 || (lo >= -(1 << 24) && hi <= (1 << 24));
    let note = if exact {
        format!("stored type {name} converted to {target} (values {lo} to {hi}, all exact)")
    } else {
        format!(
            "stored type {name} converted to f32 (values {lo} to {hi}; those beyond ±2^24 are rounded)"
        )
    };
    Ok((voxels, note))
}

fn get_f64(b: &[u8]) -> f64 {
    let mut a = [0u8; 8];
    a.copy_from_slice(b);
    f64::from_ne_bytes(a)
}

fn convert_f64(raw: &[u8]) -> std::io::Result<(Voxels, String)> {
    use crate::volume::DType;
    // (all integers?, all f32-exact?, min, max) over the finite values
    let (all_int, all_f32, lo, hi) = raw
        .par_chunks(CONVERT_CHUNK * 8)
        .map(|c| {
            c.chunks_exact(8).fold(
                (true, true, f64::INFINITY, f64::NEG_INFINITY),
                |(ai, af, lo, hi), b| {
                    let v = get_f64(b);
                    #[allow(clippy::float_cmp, reason = "exactness in f32 is the question")]
                    let exact32 = v.is_nan() || f64::from(v as f32) == v;
                    (
                        ai && v.is_finite() && v.fract() == 0.0,
                        af && exact32,
                        lo.min(v),
                        hi.max(v),
                    )
                },
            )
        })
        .reduce(
            || (true, true, f64::INFINITY, f64::NEG_INFINITY),
            |a, b| (a.0 && b.0, a.1 && b.1, a.2.min(b.2), a.3.max(b.3)),
        );
    let target = if all_int && lo >= -32768.0 && hi <= 65535.0 {
        narrow_int(lo as i128, hi as i128)
    } else {
        DType::F32
    };
    let voxels = match target {
        DType::U8 => Voxels::U8(fill(raw, 8, |b| get_f64(b) as u8)?),
        DType::I16 => Voxels::I16(fill(raw, 8, |b| get_f64(b) as i16)?),
        DType::U16 => Voxels::U16(fill(raw, 8, |b| get_f64(b) as u16)?),
        DType::F32 => Voxels::F32(fill(raw, 8, |b| get_f64(b) as f32)?),
    };
    let note = if target != DType::F32 {
        format!(
            "stored type float64 converted to {target} (integer values {lo} to {hi}, all exact)"
        )
    } else if all_f32 {
        "stored type float64 converted to f32 (every value is exact in f32)".to_owned()
    } else {
        "stored type float64 converted to f32 (values rounded to f32 precision)".to_owned()
    };
    Ok((voxels, note))
}

fn convert(raw: &[u8], src: Src) -> std::io::Result<(Voxels, String)> {
    match src {
        Src::I8 => convert_int::<i8>(raw, src.name()),
        Src::I32 => convert_int::<i32>(raw, src.name()),
        Src::U32 => convert_int::<u32>(raw, src.name()),
        Src::I64 => convert_int::<i64>(raw, src.name()),
        Src::U64 => convert_int::<u64>(raw, src.name()),
        Src::F64 => convert_f64(raw),
        Src::U8 | Src::I16 | Src::U16 | Src::F32 => unreachable!("native types are not converted"),
    }
}
