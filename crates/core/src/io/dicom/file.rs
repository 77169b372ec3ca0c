//! One DICOM file: its header (the facts a series is built from) and its pixels.
//!
//! Every file is walked first ([`super::walk`]) so that no length it claims reaches past its
//! end; the header is then parsed with `dicom-object` up to the Pixel Data element, and the
//! pixels with `dicom-object` and `dicom-pixeldata`. The parser and the decoders run under
//! `catch_unwind`: a panic inside them on a damaged file becomes an error naming the file.

use super::walk::{self, EXPLICIT_VR_BE, Stop};
use crate::io::IoError;
use dicom_core::header::HasLength as _;
use dicom_core::{DicomValue, PrimitiveValue, Tag};
use dicom_dictionary_std::tags;
use dicom_object::{DefaultDicomObject, OpenFileOptions};
use std::io::Read;
use std::path::{Path, PathBuf};

/// The facts of one image file that a series is built from.
#[derive(Clone, Debug)]
pub(super) struct SliceHeader {
    pub path: PathBuf,
    pub transfer_syntax: String,
    pub series_uid: String,
    pub series_description: String,
    pub rows: u16,
    pub columns: u16,
    pub samples_per_pixel: u16,
    pub bits_allocated: u16,
    pub bits_stored: u16,
    pub signed: bool,
    pub frames: u32,
    pub photometric: String,
    /// `ImageOrientationPatient`: the row direction (increasing column index), then the column
    /// direction (increasing row index), LPS.
    pub orientation: Option<[f64; 6]>,
    /// `ImagePositionPatient`: the centre of the first voxel, LPS mm.
    pub position: Option<[f64; 3]>,
    /// `PixelSpacing`: between rows, then between columns (mm).
    pub pixel_spacing: Option<[f64; 2]>,
    pub slope: f64,
    pub intercept: f64,
}

impl SliceHeader {
    /// Bytes of one sample as stored.
    pub fn sample_bytes(&self) -> usize {
        usize::from(self.bits_allocated / 8)
    }

    /// The grid and sample facts a slice must share with the series' first one.
    pub fn layout(&self) -> (u16, u16, u16, u16, bool) {
        (
            self.rows,
            self.columns,
            self.bits_allocated,
            self.bits_stored,
            self.signed,
        )
    }
}

/// The file's name, for messages.
pub(super) fn name(path: &Path) -> String {
    path.file_name().map_or_else(
        || path.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}

/// An error and its causes, as one line.
fn chain(e: &dyn std::error::Error) -> String {
    let mut text = e.to_string();
    let mut source = e.source();
    while let Some(s) = source {
        let t = s.to_string();
        if !text.contains(&t) {
            text.push_str(": ");
            text.push_str(&t);
        }
        source = s.source();
    }
    text
}

/// The text of a panic, for the message that replaces it.
fn panic_text(p: &(dyn std::any::Any + Send)) -> String {
    p.downcast_ref::<&str>()
        .map(|s| (*s).to_owned())
        .or_else(|| p.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "an unexpected fault".into())
}

/// Runs the parser or a decoder on a damaged file without letting a panic through.
fn guarded<T>(
    path: &Path,
    what: &str,
    f: impl FnOnce() -> Result<T, String>,
) -> Result<T, IoError> {
    match std::panic::catch_unwind(std::panic::AssertUnwindSafe(f)) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(IoError::corrupt(path, format!("{what}: {e}"))),
        Err(p) => Err(IoError::corrupt(
            path,
            format!("{what} failed on damaged data: {}", panic_text(&*p)),
        )),
    }
}

/// Whether a file looks like DICOM: the Part 10 marker at byte 128. Reads 132 bytes.
pub(super) fn has_marker(path: &Path) -> bool {
    let mut head = [0u8; 132];
    std::fs::File::open(path)
        .and_then(|mut f| f.read_exact(&mut head))
        .is_ok_and(|()| walk::has_marker(&head))
}

/// The error of a walk, naming the file.
fn walk_error(path: &Path, e: String) -> IoError {
    IoError::corrupt(path, e)
}

/// Reads a file's header. `Ok(None)`: a DICOM file without pixel data (a DICOMDIR, a report).
pub(super) fn read_header(path: &Path) -> Result<Option<SliceHeader>, IoError> {
    crate::io::require_regular_file(path).map_err(|e| IoError::os(path, e))?;
    let mut file = std::fs::File::open(path).map_err(|e| IoError::os(path, e))?;
    let file_len = file.metadata().map_err(|e| IoError::os(path, e))?.len();
    let mut bytes = Vec::new();
    let mut want: u64 = 64 << 10;
    let walked = loop {
        let more = want.min(file_len).saturating_sub(bytes.len() as u64);
        (&mut file)
            .take(more)
            .read_to_end(&mut bytes)
            .map_err(|e| IoError::os(path, e))?;
        let got = bytes.len() as u64;
        // a file that shrank while read: walk what there is as the whole file
        let len = if got < want.min(file_len) {
            got
        } else {
            file_len
        };
        let w = walk::walk(&bytes, len, true).map_err(|e| walk_error(path, e))?;
        if w.stop != Stop::NeedMore {
            break w;
        }
        want = want.saturating_mul(4);
    };
    let at = match walked.stop {
        Stop::PixelData(at) => at,
        Stop::End | Stop::NeedMore => return Ok(None),
    };
    if walked.transfer_syntax == walk::DEFLATED_EXPLICIT_VR_LE {
        return Err(IoError::unsupported(
            path,
            "the deflated transfer syntax (1.2.840.10008.1.2.1.99)",
        ));
    }
    let obj = guarded(path, "reading the header", || {
        OpenFileOptions::new()
            .read_until(tags::PIXEL_DATA)
            .from_reader(&bytes[..at])
            .map_err(|e| chain(&e))
    })?;
    header_of(path, &obj, walked.transfer_syntax).map(Some)
}

fn text(obj: &DefaultDicomObject, tag: Tag) -> Option<String> {
    let e = obj.element_opt(tag).ok().flatten()?;
    let s = e.to_str().ok()?;
    let s = s.trim_matches(['\0', ' ']).to_owned();
    (!s.is_empty()).then_some(s)
}

fn uint(
    path: &Path,
    obj: &DefaultDicomObject,
    tag: Tag,
    what: &str,
) -> Result<Option<u32>, IoError> {
    let Some(e) = obj.element_opt(tag).ok().flatten() else {
        return Ok(None);
    };
    if e.is_empty() {
        return Ok(None);
    }
    e.to_int::<u32>()
        .map(Some)
        .map_err(|_| IoError::corrupt(path, format!("{what} is not a whole number")))
}

fn floats<const N: usize>(
    path: &Path,
    obj: &DefaultDicomObject,
    tag: Tag,
    what: &str,
) -> Result<Option<[f64; N]>, IoError> {
    let Some(e) = obj.element_opt(tag).ok().flatten() else {
        return Ok(None);
    };
    if e.is_empty() {
        return Ok(None);
    }
    let v = e
        .to_multi_float64()
        .map_err(|_| IoError::corrupt(path, format!("{what} is not a list of numbers")))?;
    let arr: [f64; N] = v.as_slice().try_into().map_err(|_| {
        IoError::corrupt(
            path,
            format!("{what} holds {} numbers, expected {N}", v.len()),
        )
    })?;
    if arr.iter().any(|x| !x.is_finite()) {
        return Err(IoError::corrupt(
            path,
            format!("{what} = {} is not finite", crate::message::numbers(&arr)),
        ));
    }
    Ok(Some(arr))
}

fn header_of(
    path: &Path,
    obj: &DefaultDicomObject,
    transfer_syntax: String,
) -> Result<SliceHeader, IoError> {
    let need = |tag, what: &str| -> Result<u32, IoError> {
        uint(path, obj, tag, what)?
            .ok_or_else(|| IoError::corrupt(path, format!("an image without {what}")))
    };
    let small = |v: u32, what: &str| -> Result<u16, IoError> {
        u16::try_from(v).map_err(|_| IoError::corrupt(path, format!("{what} {v} is out of range")))
    };
    let rows = small(need(tags::ROWS, "Rows (0028,0010)")?, "Rows")?;
    let columns = small(need(tags::COLUMNS, "Columns (0028,0011)")?, "Columns")?;
    let bits_allocated = small(
        need(tags::BITS_ALLOCATED, "BitsAllocated (0028,0100)")?,
        "BitsAllocated",
    )?;
    let bits_stored = match uint(path, obj, tags::BITS_STORED, "BitsStored (0028,0101)")? {
        Some(b) => small(b, "BitsStored")?,
        None => bits_allocated,
    };
    let samples_per_pixel = match uint(
        path,
        obj,
        tags::SAMPLES_PER_PIXEL,
        "SamplesPerPixel (0028,0002)",
    )? {
        Some(s) => small(s, "SamplesPerPixel")?,
        None => 1,
    };
    let signed = uint(
        path,
        obj,
        tags::PIXEL_REPRESENTATION,
        "PixelRepresentation (0028,0103)",
    )?
    .unwrap_or(0)
        == 1;
    let frames = uint(
        path,
        obj,
        tags::NUMBER_OF_FRAMES,
        "NumberOfFrames (0028,0008)",
    )?
    .unwrap_or(1);
    let rescale = |tag, what: &str, default: f64| -> Result<f64, IoError> {
        Ok(floats::<1>(path, obj, tag, what)?.map_or(default, |v| v[0]))
    };
    Ok(SliceHeader {
        path: path.to_owned(),
        transfer_syntax,
        series_uid: text(obj, tags::SERIES_INSTANCE_UID).unwrap_or_default(),
        series_description: text(obj, tags::SERIES_DESCRIPTION).unwrap_or_default(),
        rows,
        columns,
        samples_per_pixel,
        bits_allocated,
        bits_stored,
        signed,
        frames,
        photometric: text(obj, tags::PHOTOMETRIC_INTERPRETATION).unwrap_or_default(),
        orientation: floats(
            path,
            obj,
            tags::IMAGE_ORIENTATION_PATIENT,
            "ImageOrientationPatient (0020,0037)",
        )?,
        position: floats(
            path,
            obj,
            tags::IMAGE_POSITION_PATIENT,
            "ImagePositionPatient (0020,0032)",
        )?,
        pixel_spacing: floats(path, obj, tags::PIXEL_SPACING, "PixelSpacing (0028,0030)")?,
        slope: rescale(tags::RESCALE_SLOPE, "RescaleSlope (0028,1053)", 1.0)?,
        intercept: rescale(tags::RESCALE_INTERCEPT, "RescaleIntercept (0028,1052)", 0.0)?,
    })
}

/// How many bytes of decoded pixels a compressed frame may claim per byte of the file: more
/// than any real codec reaches on a CT slice (RLE at most 64, lossless JPEG about 16), far
/// less than a damaged header's billions.
const MAX_EXPANSION: u64 = 1024;

/// Reads a slice's pixels into `dst` (`rows × columns` samples of the series' voxel type,
/// native byte order). `expect` is the header the series was built from: the file must still
/// agree with it.
pub(super) fn read_pixels(expect: &SliceHeader, dst: &mut [u8]) -> Result<(), IoError> {
    let path = expect.path.as_path();
    crate::io::require_regular_file(path).map_err(|e| IoError::os(path, e))?;
    let bytes = std::fs::read(path).map_err(|e| IoError::os(path, e))?;
    let walked = walk::walk(&bytes, bytes.len() as u64, false).map_err(|e| walk_error(path, e))?;
    let obj = guarded(path, "reading the file", || {
        OpenFileOptions::new()
            .from_reader(bytes.as_slice())
            .map_err(|e| chain(&e))
    })?;
    let now = header_of(path, &obj, walked.transfer_syntax.clone())?;
    if now.layout() != expect.layout() {
        return Err(IoError::inconsistent(
            path,
            "the file changed while the series was read (its image size or sample type differ)",
        ));
    }
    let pixels = expect.rows as usize * expect.columns as usize;
    let sample = expect.sample_bytes();
    let raw_len = pixels * sample;
    let element = obj
        .element(tags::PIXEL_DATA)
        .map_err(|_| IoError::corrupt(path, "the image has no Pixel Data (7FE0,0010)"))?;
    match element.value() {
        DicomValue::Primitive(value) => {
            let big_endian = walked.transfer_syntax == EXPLICIT_VR_BE;
            native(path, value, big_endian, raw_len, expect, dst)
        }
        DicomValue::PixelSequence(seq) => {
            let compressed: u64 = seq.fragments().iter().map(|f| f.len() as u64).sum();
            if raw_len as u64 > compressed.saturating_mul(MAX_EXPANSION) {
                return Err(IoError::corrupt(
                    path,
                    format!(
                        "{} x {} pixels claimed from {compressed} bytes of compressed data: the header is damaged",
                        expect.columns, expect.rows
                    ),
                ));
            }
            let decoded = guarded(path, "decoding the pixel data", || {
                use dicom_pixeldata::PixelDecoder;
                obj.decode_pixel_data()
                    .map(|d| d.data().to_vec())
                    .map_err(|e| chain(&e))
            })?;
            let Some(raw) = decoded.get(..raw_len) else {
                return Err(IoError::corrupt(
                    path,
                    format!(
                        "the pixel data decode to {} bytes, not the {raw_len} of {} x {} samples",
                        decoded.len(),
                        expect.columns,
                        expect.rows
                    ),
                ));
            };
            store(raw, false, expect, dst);
            Ok(())
        }
        DicomValue::Sequence(_) => Err(IoError::corrupt(path, "Pixel Data is a sequence")),
    }
}

/// Native (uncompressed) pixel data into `dst`.
fn native(
    path: &Path,
    value: &PrimitiveValue,
    big_endian: bool,
    raw_len: usize,
    expect: &SliceHeader,
    dst: &mut [u8],
) -> Result<(), IoError> {
    let short = |have: usize| {
        IoError::corrupt(
            path,
            format!(
                "the pixel data hold {have} bytes, fewer than the {raw_len} of {} x {} samples of {} bits",
                expect.columns, expect.rows, expect.bits_allocated
            ),
        )
    };
    match value {
        PrimitiveValue::U16(v) => {
            let b: &[u8] = bytemuck::cast_slice(v.as_slice());
            let raw = b.get(..raw_len).ok_or_else(|| short(b.len()))?;
            store(raw, cfg!(target_endian = "big"), expect, dst);
        }
        PrimitiveValue::I16(v) => {
            let b: &[u8] = bytemuck::cast_slice(v.as_slice());
            let raw = b.get(..raw_len).ok_or_else(|| short(b.len()))?;
            store(raw, cfg!(target_endian = "big"), expect, dst);
        }
        PrimitiveValue::U8(v) => {
            let raw = v.get(..raw_len).ok_or_else(|| short(v.len()))?;
            store(raw, big_endian && expect.bits_allocated == 16, expect, dst);
        }
        _ => return Err(IoError::corrupt(path, "Pixel Data hold no sample values")),
    }
    Ok(())
}

/// Stores raw samples (`big_endian` or little-endian) as the series' voxel type: 8-bit
/// unsigned as `u8`, 8-bit signed widened to `i16`, 16-bit as `u16`/`i16`. With fewer bits
/// stored than allocated, signed samples are sign-extended from their highest stored bit and
/// unsigned ones keep only their stored bits (the bits above are no part of the value; pydicom
/// reads them the same way).
fn store(raw: &[u8], big_endian: bool, expect: &SliceHeader, dst: &mut [u8]) {
    let bits = u32::from(expect.bits_stored.clamp(1, expect.bits_allocated));
    match (expect.bits_allocated, expect.signed) {
        (8, false) => {
            let mask = u8::MAX >> (8 - bits.min(8));
            for (d, &s) in dst.iter_mut().zip(raw) {
                *d = s & mask;
            }
        }
        (8, true) => {
            let shift = 8 - bits.min(8);
            for (d, &s) in dst.chunks_exact_mut(2).zip(raw) {
                let v = i16::from((s.cast_signed() << shift) >> shift);
                d.copy_from_slice(&v.to_ne_bytes());
            }
        }
        (_, signed) => {
            let shift = 16 - bits.min(16);
            for (d, s) in dst.chunks_exact_mut(2).zip(raw.chunks_exact(2)) {
                let b = [s[0], s[1]];
                let u = if big_endian {
                    u16::from_be_bytes(b)
                } else {
                    u16::from_le_bytes(b)
                };
                let u = if signed {
                    ((u.cast_signed() << shift) >> shift).cast_unsigned()
                } else {
                    u & (u16::MAX >> shift)
                };
                d.copy_from_slice(&u.to_ne_bytes());
            }
        }
    }
}
