//! One TIFF page: what its directory says ([`probe`]) and its pixels ([`decode`]).
//!
//! The `tiff` crate parses directories and decodes compressed data. Every directory is checked
//! by [`super::ifd`] before the crate reads it ([`open_decoder`], [`next_image`]), so that
//! counts and offsets a damaged file makes up are refused in words, before the crate allocates
//! for them or prints its own debug output. The crate's errors are mapped onto [`IoError`]
//! categories in Sutura's words (no debug formatting of its enums); as a last resort every
//! call into it runs under `catch_unwind`, so that a panic inside the crate on a malformed file
//! becomes a `Corrupt` error instead of taking the program down (a guard, not a known bug: no
//! panic is known in tiff 0.11).

use super::FileDecoder;
use super::chunks::{self, ChunkPlan, Scratch};
use super::ifd;
use crate::io::IoError;
use crate::volume::DType;
use std::fs::File;
use std::io::BufReader;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::Path;
use tiff::decoder::Decoder;
use tiff::tags::Tag;
use tiff::{TiffError, TiffResult};

/// Width, height and sample type: what every page of one scan must share.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Shape {
    pub width: u32,
    pub height: u32,
    pub dtype: DType,
}

impl Shape {
    /// Bytes of one decoded page. Call only after the limits check has passed on the same
    /// numbers (which bounds the product); before it, the product may overflow.
    pub fn bytes(&self) -> usize {
        self.width as usize * self.height as usize * self.dtype.size_bytes()
    }
}

impl std::fmt::Display for Shape {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}x{} {}", self.width, self.height, self.dtype)
    }
}

/// `XResolution` / `YResolution` (pixels per unit) and `ResolutionUnit` (TIFF 6.0 tags 282, 283, 296).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct Resolution {
    pub x: f64,
    pub y: f64,
    pub unit: u16,
}

/// What one page's directory says.
#[derive(Clone, Debug)]
pub(super) struct PageInfo {
    pub shape: Shape,
    /// How Sutura decodes the page itself; `None`: through the crate's decoder.
    pub chunks: Option<ChunkPlan>,
    pub resolution: Option<Resolution>,
}

/// The key of the JSON object in `ImageDescription` (TIFF 6.0 tag 270) that holds the full 3D
/// voxel size, `{"voxel_size_mm":[x,y,z]}`, written by Sutura's TIFF writers.
pub(super) const DESCRIPTION_KEY: &str = "voxel_size_mm";

/// What a page's `ImageDescription` says of the voxel size: a size, nothing, or why its
/// voxel size is unusable (for a note).
pub(super) type Described = Result<Option<[f64; 3]>, String>;

/// The voxel size in the current page's `ImageDescription`, if it is a JSON object with a
/// [`DESCRIPTION_KEY`] of three positive finite numbers. Any other description (plain text,
/// other programs' JSON) is no voxel size: `Ok(None)`; one with the key but unusable values
/// is `Err` with what is wrong, for a note.
pub(super) fn described_voxel_size(
    dec: &mut FileDecoder,
    walk: &Walk,
    path: &Path,
) -> Result<Described, IoError> {
    if let Some(why) = &walk.unreadable_description {
        return Ok(Err(format!(
            "{why}; the description (and any voxel size in it) is ignored"
        )));
    }
    let Some(tiff::decoder::ifd::Value::Ascii(text)) =
        catch(path, || dec.find_tag(Tag::ImageDescription))?
    else {
        return Ok(Ok(None));
    };
    let Ok(serde_json::Value::Object(map)) = serde_json::from_str(text.trim_end_matches('\0'))
    else {
        return Ok(Ok(None));
    };
    let Some(value) = map.get(DESCRIPTION_KEY) else {
        return Ok(Ok(None));
    };
    let sizes: Option<Vec<f64>> = value
        .as_array()
        .map(|a| a.iter().map(serde_json::Value::as_f64).collect())
        .and_then(|v: Option<Vec<f64>>| v);
    match sizes.as_deref() {
        Some(&[x, y, z]) if [x, y, z].iter().all(|v| v.is_finite() && *v > 0.0) => {
            Ok(Ok(Some([x, y, z])))
        }
        _ => Ok(Err(format!(
            "the image description's {DESCRIPTION_KEY} {value} is not three positive sizes; ignored"
        ))),
    }
}

/// Runs a call into the `tiff` crate, mapping its errors and any panic.
pub(super) fn catch<T>(path: &Path, f: impl FnOnce() -> TiffResult<T>) -> Result<T, IoError> {
    match catch_unwind(AssertUnwindSafe(f)) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(map_err(path, e)),
        Err(_) => Err(IoError::corrupt(
            path,
            "the TIFF decoder failed on malformed data",
        )),
    }
}

fn map_err(path: &Path, e: TiffError) -> IoError {
    use std::io::ErrorKind;
    use tiff::{TiffFormatError as F, TiffUnsupportedError as U};
    let tag = |t: Tag| ifd::tag_label(t.to_u16());
    match e {
        TiffError::IoError(io) => match io.kind() {
            ErrorKind::UnexpectedEof => IoError::corrupt(
                path,
                "truncated: data the directory points to run past the end of the file",
            ),
            // a seek past any file's size (an offset of 2^63 or more)
            ErrorKind::InvalidInput => IoError::corrupt(
                path,
                "an offset in the file points far beyond its end (damaged file)",
            ),
            _ => IoError::os(path, io),
        },
        TiffError::FormatError(f) => IoError::corrupt(
            path,
            match f {
                F::TiffSignatureNotFound | F::TiffSignatureInvalid => {
                    "not a TIFF file (bad header)".to_owned()
                }
                F::ImageFileDirectoryNotFound => "a page's directory is missing".to_owned(),
                F::InvalidDimensions(w, h) => format!("page is {w}x{h} pixels"),
                F::InvalidTagValueType(t) => format!("{} has a value of the wrong type", tag(t)),
                F::RequiredTagNotFound(t) => format!("{} is missing", tag(t)),
                F::InvalidCountForTag(t, n) => format!("{} has {n} values, a wrong number", tag(t)),
                F::UnknownPredictor(p) => format!("unknown predictor {p}"),
                F::UnknownPlanarConfiguration(c) => format!("unknown planar configuration {c}"),
                F::CycleInOffsets => {
                    "its pages form a loop (a directory points back to an earlier one)".to_owned()
                }
                F::SamplesPerPixelIsZero => "0 samples per pixel".to_owned(),
                F::CompressedDataCorrupt(m) => format!("compressed data damaged: {m}"),
                F::StripTileTagConflict => {
                    "a page has both strips and tiles, or neither".to_owned()
                }
                _ => "a page's directory is damaged (an invalid tag, type or size)".to_owned(),
            },
        ),
        TiffError::UnsupportedError(u) => IoError::unsupported(
            path,
            match u {
                U::UnsupportedSampleFormat(v) => format!(
                    "sample format tag with {} values{}; Sutura reads one sample per pixel, unsigned, signed or float",
                    v.len(),
                    if v.len() == 1 {
                        ""
                    } else {
                        " (one per sample)"
                    }
                ),
                U::InconsistentBitsPerSample(v) => {
                    format!(
                        "bits per sample differ between the {} samples of a pixel",
                        v.len()
                    )
                }
                U::UnsupportedSampleDepth(n) => format!("{n} samples per pixel"),
                U::UnsupportedBitsPerChannel(n) => format!("{n} bits per sample"),
                U::UnsupportedPlanarConfig(_) => "this planar configuration".to_owned(),
                U::UnknownInterpretation | U::UnsupportedInterpretation(_) => {
                    "this photometric interpretation (colour model)".to_owned()
                }
                U::UnknownCompressionMethod | U::UnsupportedCompressionMethod(_) => {
                    "this compression method".to_owned()
                }
                U::FloatingPointPredictor(_) | U::HorizontalPredictor(_) => {
                    "this predictor on these samples".to_owned()
                }
                _ => "a TIFF feature Sutura does not read (colour, subsampling or odd bit depths)"
                    .to_owned(),
            },
        ),
        TiffError::LimitsExceeded => IoError::corrupt(
            path,
            format!(
                "a tag's value is larger than {} MiB, more than a scan's TIFF directory holds (damaged file)",
                ifd::MAX_TEXT_BYTES >> 20
            ),
        ),
        TiffError::IntSizeError => IoError::corrupt(
            path,
            "a size or offset in the file is larger than this computer can address",
        ),
        TiffError::UsageError(_) => IoError::corrupt(
            path,
            "the TIFF decoder was asked for data the page does not have (damaged directory)",
        ),
    }
}

/// Prefixes an error's description with the page index.
pub(super) fn with_page(e: IoError, path: &Path, index: usize) -> IoError {
    match e {
        IoError::Corrupt { what, .. } => IoError::corrupt(path, format!("page {index}: {what}")),
        IoError::Unsupported { what, .. } => {
            IoError::unsupported(path, format!("page {index}: {what}"))
        }
        IoError::Inconsistent { what, .. } => {
            IoError::inconsistent(path, format!("page {index}: {what}"))
        }
        other => other,
    }
}

/// Where a decoder is in the file's chain of directories, checked one ahead of the crate.
pub(super) struct Walk {
    layout: ifd::Layout,
    /// Offset of the next directory (0: none).
    next: u64,
    /// Index of the current page.
    index: usize,
    /// Why the current page's `ImageDescription` is not read, if it is not.
    pub unreadable_description: Option<String>,
}

/// Opens a file and reads its first directory (checked first, see [`super::ifd`]).
pub(super) fn open_decoder(path: &Path) -> Result<(FileDecoder, Walk), IoError> {
    let file = File::open(path).map_err(|e| IoError::os(path, e))?;
    let (layout, first) = ifd::header(&file, path)?;
    let dir = ifd::check(&file, path, layout, first, 0)?;
    let walk = Walk {
        layout,
        next: dir.next,
        index: 0,
        unreadable_description: dir.unreadable_description,
    };
    // Pixels are decoded into the caller's buffer (sized by our own limits), never into a
    // crate-allocated result, so the crate's `decoding_buffer_size` only bounds the arrays it
    // allocates for tag values (strip offsets etc.): 16 MiB is ample for 65,536 strips and
    // keeps a corrupt count from asking for exabytes. The other limits stay at their defaults.
    let mut limits = tiff::decoder::Limits::default();
    limits.decoding_buffer_size = 16 << 20;
    let dec = catch(path, || {
        Decoder::new(BufReader::new(file)).map(|d| d.with_limits(limits))
    })?;
    Ok((dec, walk))
}

/// Moves the decoder to the next page, checking its directory first.
pub(super) fn next_image(
    dec: &mut FileDecoder,
    walk: &mut Walk,
    path: &Path,
) -> Result<(), IoError> {
    let index = walk.index + 1;
    let dir = ifd::check(dec.inner().get_ref(), path, walk.layout, walk.next, index)?;
    catch(path, || dec.next_image()).map_err(|e| with_page(e, path, index))?;
    walk.next = dir.next;
    walk.index = index;
    walk.unreadable_description = dir.unreadable_description;
    Ok(())
}

pub(super) fn first_u16(
    dec: &mut FileDecoder,
    path: &Path,
    tag: Tag,
    default: u16,
) -> Result<u16, IoError> {
    let v: Option<Vec<u16>> = catch(path, || dec.find_tag_unsigned_vec(tag))?;
    Ok(v.and_then(|v| v.first().copied()).unwrap_or(default))
}

fn rational(v: tiff::decoder::ifd::Value) -> Option<f64> {
    use tiff::decoder::ifd::Value;
    match v {
        Value::Rational(n, d) if d != 0 => Some(f64::from(n) / f64::from(d)),
        Value::Float(f) => Some(f64::from(f)),
        Value::Double(f) => Some(f),
        Value::Short(s) => Some(f64::from(s)),
        Value::Unsigned(s) => Some(f64::from(s)),
        Value::List(mut l) if !l.is_empty() => rational(l.swap_remove(0)),
        _ => None,
    }
}

fn compression_name(code: u16) -> String {
    // TIFF 6.0 section 3 and the TIFF tag registry
    let name = match code {
        2 => "CCITT modified Huffman",
        3 => "CCITT group 3 fax",
        4 => "CCITT group 4 fax",
        6 => "old-style JPEG",
        7 => "JPEG",
        34712 => "JPEG 2000",
        34925 => "LZMA",
        50000 | 34926 => "Zstandard",
        50001 | 34927 => "WebP",
        _ => "code",
    };
    format!("compression {name} ({code}); Sutura reads uncompressed, LZW, Deflate and PackBits")
}

/// Reads the current page's directory and checks that Sutura can store its samples.
pub(super) fn probe(dec: &mut FileDecoder, path: &Path) -> Result<PageInfo, IoError> {
    let (width, height) = catch(path, || dec.dimensions())?;
    if width == 0 || height == 0 {
        return Err(IoError::corrupt(
            path,
            format!("page is {width}x{height} pixels"),
        ));
    }
    let spp = first_u16(dec, path, Tag::SamplesPerPixel, 1)?;
    if spp != 1 {
        return Err(IoError::unsupported(
            path,
            format!(
                "{spp} samples per pixel (a colour or multi-channel image); only single-channel scans are read"
            ),
        ));
    }
    // TIFF 6.0 PhotometricInterpretation: 0 white-is-zero, 1 black-is-zero, 3 palette, ...
    let photometric = first_u16(dec, path, Tag::PhotometricInterpretation, 1)?;
    if photometric > 1 {
        let what = match photometric {
            2 => "RGB colour",
            3 => "palette colour",
            4 => "transparency mask",
            5 => "separated (CMYK) colour",
            6 => "YCbCr colour",
            _ => "non-greyscale",
        };
        return Err(IoError::unsupported(
            path,
            format!(
                "{what} image (photometric interpretation {photometric}); only greyscale scans are read"
            ),
        ));
    }
    let bits = first_u16(dec, path, Tag::BitsPerSample, 1)?;
    // TIFF 6.0 SampleFormat: 1 unsigned, 2 signed, 3 IEEE float
    let format = first_u16(dec, path, Tag::SampleFormat, 1)?;
    let dtype = match (bits, format) {
        (8, 1) => DType::U8,
        (16, 1) => DType::U16,
        (16, 2) => DType::I16,
        (32, 3) => DType::F32,
        _ => {
            let kind = match format {
                1 => "unsigned integer",
                2 => "signed integer",
                3 => "floating-point",
                _ => "untyped",
            };
            return Err(IoError::unsupported(
                path,
                format!(
                    "{bits}-bit {kind} samples; Sutura stores 8/16-bit unsigned, 16-bit signed and 32-bit float"
                ),
            ));
        }
    };
    let compression = first_u16(dec, path, Tag::Compression, 1)?;
    // 1 none, 5 LZW, 8 Adobe Deflate, 32773 PackBits, 32946 Deflate (TIFF tag registry)
    if ![1, 5, 8, 32773, 32946].contains(&compression) {
        return Err(IoError::unsupported(path, compression_name(compression)));
    }
    let predictor = first_u16(dec, path, Tag::Predictor, 1)?;
    let shape = Shape {
        width,
        height,
        dtype,
    };
    let chunks = chunks::plan(dec, path, shape, compression, predictor, photometric)?;
    if chunks.is_none() && first_u16(dec, path, Tag::FillOrder, 1)? == 2 {
        return Err(IoError::unsupported(
            path,
            "fill order 2 (bit-reversed bytes) with PackBits or white-is-zero",
        ));
    }
    let resolution = {
        let x = catch(path, || dec.find_tag(Tag::XResolution))?.and_then(rational);
        let y = catch(path, || dec.find_tag(Tag::YResolution))?.and_then(rational);
        // TIFF 6.0: ResolutionUnit defaults to 2 (inch) when absent
        let unit = first_u16(dec, path, Tag::ResolutionUnit, 2)?;
        match (x, y) {
            (Some(x), Some(y)) => Some(Resolution { x, y, unit }),
            _ => None,
        }
    };
    Ok(PageInfo {
        shape,
        chunks,
        resolution,
    })
}

/// Decodes the decoder's current page (described by `info`) into `dst`, native byte order.
pub(super) fn decode(
    dec: &mut FileDecoder,
    info: &PageInfo,
    path: &Path,
    dst: &mut [u8],
    scratch: &mut Scratch,
) -> Result<(), IoError> {
    if let Some(plan) = &info.chunks {
        let file = dec.inner().get_ref();
        return chunks::decode_page(file, plan, info.shape, path, dst, scratch);
    }
    catch(path, || dec.read_image_bytes(dst))
}
