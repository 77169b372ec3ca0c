//! A page's strips or tiles decoded by Sutura itself, straight into the page's place in the
//! voxel buffer.
//!
//! The `tiff` crate parses the directory; this module reads each chunk (strip or tile) with a
//! positioned read and decodes it: uncompressed strips land in the destination directly,
//! Deflate is inflated by libdeflate into the destination (the inflater tifffile's codecs use;
//! 1.35x less CPU than zlib-rs on the benchmark volume's noisy strips), falling back to flate2
//! (zlib-rs) streaming for a chunk libdeflate refuses whole, LZW is decoded by weezl (the
//! crate the `tiff` crate itself uses: most significant bit first, TIFF's early code-width
//! switch, 8-bit literals). Then byte order and predictor are undone in place. Tiles go through
//! one scratch tile per worker and are copied into the page, cropped at the right and bottom
//! edges.
//!
//! Each LZW chunk is decoded in one call into its whole output. The crate's streaming LZW
//! reader (weezl in its yield-on-full-buffer mode, fed row by row) stops with "no lzw end code
//! found" on some LZW tiles that tifffile writes, although each of those tiles does end with the
//! end-of-information code (checked: weezl without yielding reaches it right after the
//! tile's last pixel). A chunk that fills its output is accepted even without that code,
//! as libtiff does (with a warning); one that ends short is an error.
//!
//! Covered: compression none, LZW, Deflate (codes 8 and 32946); predictor none, horizontal
//! (TIFF 6.0 section 14, on samples of 8, 16 or 32 bits) and floating point (Adobe Photoshop
//! TIFF Technical Note 3) on `f32`; strips or tiles; both byte orders; black-is-zero. A page
//! outside that (`PackBits`, white-is-zero, no byte counts, absurd tile sizes) gets no plan and
//! is left to the crate's decoder, which also reports what is wrong with malformed layouts.

use super::FileDecoder;
use super::page::{Shape, catch};
use crate::io::IoError;
use crate::volume::DType;
use flate2::{Decompress, FlushDecompress, Status};
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::Path;
use tiff::decoder::ChunkType;
use tiff::tags::Tag;

/// Largest decoded tile kept in a scratch buffer; a tile claiming more is left to the crate
/// (which applies its own limits). Common practice: tiles are 16 to 1024 pixels square.
const MAX_TILE_BYTES: usize = 64 << 20;

/// The compression of a page's chunks.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Codec {
    None,
    Lzw,
    Deflate,
}

impl Codec {
    fn name(self) -> &'static str {
        match self {
            Self::None => "uncompressed",
            Self::Lzw => "LZW",
            Self::Deflate => "Deflate",
        }
    }
}

/// TIFF `Predictor` (tag 317): 1 none, 2 horizontal differencing, 3 floating point.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Predictor {
    None,
    Horizontal,
    Float,
}

/// How to decode one page: where its chunks are and what was done to them.
#[derive(Clone, Debug)]
pub(super) struct ChunkPlan {
    pub codec: Codec,
    pub predictor: Predictor,
    pub big_endian: bool,
    /// `FillOrder` 2: bits of each byte stored lowest first (uncompressed data only).
    pub reverse_bits: bool,
    pub tiled: bool,
    /// Chunk width and height in pixels (strips: the page width and `RowsPerStrip`).
    pub chunk_width: usize,
    pub chunk_height: usize,
    /// `(file offset, byte count)` of every chunk, in the file's order (row by row of tiles).
    pub chunks: Vec<(u64, u64)>,
}

impl ChunkPlan {
    fn kind(&self) -> &'static str {
        if self.tiled { "tile" } else { "strip" }
    }
}

/// Per-worker buffers and decoders, reused from page to page.
#[derive(Default)]
pub(super) struct Scratch {
    /// Compressed bytes of one chunk.
    input: Vec<u8>,
    /// One decoded tile.
    tile: Vec<u8>,
    /// One row, for the floating-point predictor's byte shuffle.
    row: Vec<u8>,
    lzw: Option<weezl::decode::Decoder>,
    zlib: Option<Decompress>,
    deflate: Option<libdeflater::Decompressor>,
}

/// The plan for the decoder's current page, or `None` when the crate should decode it.
/// `compression`, `predictor` and `photometric` are the page's tag values, already read.
pub(super) fn plan(
    dec: &mut FileDecoder,
    path: &Path,
    shape: Shape,
    compression: u16,
    predictor: u16,
    photometric: u16,
) -> Result<Option<ChunkPlan>, IoError> {
    // TIFF tag registry: 1 none, 5 LZW, 8 Adobe Deflate, 32946 Deflate (PKZIP-style code)
    let codec = match compression {
        1 => Codec::None,
        5 => Codec::Lzw,
        8 | 32946 => Codec::Deflate,
        _ => return Ok(None),
    };
    let predictor = match (predictor, shape.dtype) {
        (1, _) => Predictor::None,
        (2, _) => Predictor::Horizontal,
        (3, DType::F32) => Predictor::Float,
        (3, dtype) => {
            return Err(IoError::unsupported(
                path,
                format!("floating-point predictor (3) on {dtype} samples"),
            ));
        }
        (p, _) => {
            return Err(IoError::unsupported(
                path,
                format!(
                    "predictor {p}; TIFF defines 1 (none), 2 (horizontal) and 3 (floating point)"
                ),
            ));
        }
    };
    // TIFF 6.0 PhotometricInterpretation 1: black is zero. White-is-zero pages are inverted by
    // the crate's decoder, so they go there.
    if photometric != 1 {
        return Ok(None);
    }
    let reverse_bits = super::page::first_u16(dec, path, Tag::FillOrder, 1)? == 2;
    if reverse_bits && codec != Codec::None {
        return Err(IoError::unsupported(
            path,
            "fill order 2 (bit-reversed bytes) with compression",
        ));
    }
    let tiled = dec.get_chunk_type() == ChunkType::Tile;
    let (offsets_tag, counts_tag) = if tiled {
        (Tag::TileOffsets, Tag::TileByteCounts)
    } else {
        (Tag::StripOffsets, Tag::StripByteCounts)
    };
    let offsets: Option<Vec<u64>> = catch(path, || dec.find_tag_unsigned_vec(offsets_tag))?;
    let counts: Option<Vec<u64>> = catch(path, || dec.find_tag_unsigned_vec(counts_tag))?;
    let (Some(offsets), Some(counts)) = (offsets, counts) else {
        return Ok(None);
    };
    let (width, height) = (shape.width as usize, shape.height as usize);
    let (chunk_width, chunk_height) = if tiled {
        let (w, h) = dec.chunk_dimensions();
        (w as usize, h as usize)
    } else {
        let rows: Option<u32> = catch(path, || dec.find_tag_unsigned(Tag::RowsPerStrip))?;
        // TIFF 6.0: RowsPerStrip defaults to 2^32 - 1, i.e. one strip for the page
        (
            width,
            rows.unwrap_or(u32::MAX).clamp(1, shape.height) as usize,
        )
    };
    if chunk_width == 0 || chunk_height == 0 {
        return Ok(None);
    }
    let chunk_bytes = chunk_width
        .checked_mul(chunk_height)
        .and_then(|n| n.checked_mul(shape.dtype.size_bytes()));
    if tiled && chunk_bytes.is_none_or(|b| b > MAX_TILE_BYTES) {
        return Ok(None);
    }
    let n_chunks = width.div_ceil(chunk_width) * height.div_ceil(chunk_height);
    if offsets.len() < n_chunks || counts.len() < n_chunks {
        return Ok(None);
    }
    let file_len = dec
        .inner()
        .get_ref()
        .metadata()
        .map_err(|e| IoError::os(path, e))?
        .len();
    if let Some((i, &o)) = offsets[..n_chunks]
        .iter()
        .enumerate()
        .find(|&(_, &o)| o > file_len)
    {
        let kind = if tiled { "tile" } else { "strip" };
        return Err(IoError::corrupt(
            path,
            format!(
                "{kind} {i} starts at offset {o}, beyond the end of the file ({file_len} bytes)"
            ),
        ));
    }
    Ok(Some(ChunkPlan {
        codec,
        predictor,
        big_endian: matches!(dec.byte_order(), tiff::tags::ByteOrder::BigEndian),
        reverse_bits,
        tiled,
        chunk_width,
        chunk_height,
        chunks: offsets.into_iter().zip(counts).take(n_chunks).collect(),
    }))
}

/// Decodes one page into `dst` (exactly the page's bytes), native byte order.
pub(super) fn decode_page(
    file: &File,
    plan: &ChunkPlan,
    shape: Shape,
    path: &Path,
    dst: &mut [u8],
    scratch: &mut Scratch,
) -> Result<(), IoError> {
    let size = shape.dtype.size_bytes();
    let (width, height) = (shape.width as usize, shape.height as usize);
    let row_bytes = width * size;
    debug_assert_eq!(dst.len(), row_bytes * height);
    if plan.tiled {
        let tile_row_bytes = plan.chunk_width * size;
        let tile_bytes = tile_row_bytes * plan.chunk_height;
        let across = width.div_ceil(plan.chunk_width);
        let mut tile = std::mem::take(&mut scratch.tile);
        tile.resize(tile_bytes, 0);
        for (index, &(offset, count)) in plan.chunks.iter().enumerate() {
            let (x0, y0) = (
                (index % across) * plan.chunk_width,
                (index / across) * plan.chunk_height,
            );
            decode_chunk(file, plan, path, index, (offset, count), &mut tile, scratch)?;
            post(
                &mut tile,
                plan,
                shape.dtype,
                plan.chunk_width,
                &mut scratch.row,
            );
            let cols = plan.chunk_width.min(width - x0) * size;
            let rows = plan.chunk_height.min(height - y0);
            for (r, src) in tile.chunks_exact(tile_row_bytes).take(rows).enumerate() {
                let at = (y0 + r) * row_bytes + x0 * size;
                dst[at..at + cols].copy_from_slice(&src[..cols]);
            }
        }
        scratch.tile = tile;
    } else {
        for (index, (&chunk, out)) in plan
            .chunks
            .iter()
            .zip(dst.chunks_mut(row_bytes * plan.chunk_height))
            .enumerate()
        {
            decode_chunk(file, plan, path, index, chunk, out, scratch)?;
            post(out, plan, shape.dtype, width, &mut scratch.row);
        }
    }
    Ok(())
}

/// Reads chunk `index` and decodes it into all of `out`.
fn decode_chunk(
    file: &File,
    plan: &ChunkPlan,
    path: &Path,
    index: usize,
    (offset, count): (u64, u64),
    out: &mut [u8],
    scratch: &mut Scratch,
) -> Result<(), IoError> {
    let kind = plan.kind();
    let read = |buf: &mut [u8]| {
        file.read_exact_at(buf, offset).map_err(|e| {
            if e.kind() == std::io::ErrorKind::UnexpectedEof {
                IoError::corrupt(
                    path,
                    format!(
                        "truncated: {kind} {index} ({} bytes at offset {offset}) runs past the end of the file",
                        buf.len()
                    ),
                )
            } else {
                IoError::os(path, e)
            }
        })
    };
    if plan.codec == Codec::None {
        if count < out.len() as u64 {
            return Err(IoError::corrupt(
                path,
                format!(
                    "{kind} {index} holds {count} bytes, expected {} for its pixels",
                    out.len()
                ),
            ));
        }
        read(out)?;
        if plan.reverse_bits {
            for b in out.iter_mut() {
                *b = b.reverse_bits();
            }
        }
        return Ok(());
    }
    // Neither codec expands data by half (LZW: at most 12 bits per byte; Deflate: 5 bytes per
    // stored block of 64 KiB), so bytes beyond twice the output are never needed: reading at
    // most that bounds the buffer whatever the byte count claims.
    let want = usize::try_from(count)
        .unwrap_or(usize::MAX)
        .min(out.len().saturating_mul(2).saturating_add(4096));
    scratch.input.resize(want, 0);
    // A byte count that runs past the end of the file is tolerated as long as the data there
    // decode to the whole chunk (the check after decoding): read what the file has.
    let got = read_upto(file, &mut scratch.input, offset).map_err(|e| IoError::os(path, e))?;
    scratch.input.truncate(got);
    let filled = match plan.codec {
        Codec::Lzw => {
            let dec = scratch.lzw.get_or_insert_with(|| {
                weezl::decode::Configuration::with_tiff_size_switch(weezl::BitOrder::Msb, 8).build()
            });
            dec.reset();
            lzw(dec, &scratch.input, out)
        }
        Codec::Deflate => {
            inflate_chunk(&mut scratch.deflate, &mut scratch.zlib, &scratch.input, out)
        }
        Codec::None => unreachable!("handled above"),
    }
    .map_err(|e| {
        IoError::corrupt(
            path,
            format!("{kind} {index}: {} data damaged: {e}", plan.codec.name()),
        )
    })?;
    if filled < out.len() {
        return Err(IoError::corrupt(
            path,
            format!(
                "{kind} {index}: {} data end after {filled} of {} bytes",
                plan.codec.name(),
                out.len()
            ),
        ));
    }
    Ok(())
}

/// Reads from `offset` until `buf` is full or the file ends; returns the bytes read.
fn read_upto(file: &File, buf: &mut [u8], offset: u64) -> std::io::Result<usize> {
    let mut got = 0;
    while got < buf.len() {
        match file.read_at(&mut buf[got..], offset + got as u64) {
            Ok(0) => break,
            Ok(n) => got += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(got)
}

/// Decodes LZW until `out` is full or the data end; returns the bytes written.
fn lzw(dec: &mut weezl::decode::Decoder, input: &[u8], out: &mut [u8]) -> Result<usize, String> {
    let (mut i, mut o) = (0, 0);
    while o < out.len() {
        let r = dec.decode_bytes(&input[i..], &mut out[o..]);
        i += r.consumed_in;
        o += r.consumed_out;
        match r.status {
            Ok(weezl::LzwStatus::Ok) if r.consumed_in + r.consumed_out > 0 => {}
            Ok(_) => break,
            Err(e) => return Err(e.to_string()),
        }
    }
    Ok(o)
}

/// Inflates one chunk's zlib stream into `out`; returns the bytes written. libdeflate takes
/// the whole stream at once; a stream it refuses (one that decodes to more than the chunk, or
/// one cut short or with a bad checksum) goes through the streaming inflater, which fills what
/// it can, so the caller's length check decides as it did before libdeflate was used.
fn inflate_chunk(
    whole: &mut Option<libdeflater::Decompressor>,
    streaming: &mut Option<Decompress>,
    input: &[u8],
    out: &mut [u8],
) -> Result<usize, String> {
    let whole = whole.get_or_insert_with(libdeflater::Decompressor::new);
    if let Ok(n) = whole.zlib_decompress(input, out) {
        return Ok(n);
    }
    let z = streaming.get_or_insert_with(|| Decompress::new(true));
    z.reset(true);
    inflate(z, input, out)
}

/// Inflates a zlib stream until `out` is full or the stream ends; returns the bytes written.
fn inflate(z: &mut Decompress, input: &[u8], out: &mut [u8]) -> Result<usize, String> {
    let (mut i, mut o) = (0, 0);
    while o < out.len() {
        let (in0, out0) = (z.total_in(), z.total_out());
        let status = z
            .decompress(&input[i..], &mut out[o..], FlushDecompress::Finish)
            .map_err(|e| e.to_string())?;
        let (di, d_o) = (z.total_in() - in0, z.total_out() - out0);
        // the deltas are bounded by the slices just passed in
        i += usize::try_from(di).unwrap_or(usize::MAX);
        o += usize::try_from(d_o).unwrap_or(usize::MAX);
        if status == Status::StreamEnd || di + d_o == 0 {
            break;
        }
    }
    Ok(o)
}

/// Undoes byte order and predictor in place on decoded rows of `row_samples` samples each.
fn post(buf: &mut [u8], plan: &ChunkPlan, dtype: DType, row_samples: usize, row: &mut Vec<u8>) {
    let size = dtype.size_bytes();
    let row_bytes = row_samples * size;
    if plan.predictor == Predictor::Float {
        // TN3: each row's samples are split into byte planes, most significant first, and the
        // bytes differenced along the row; undo the differences, then interleave the planes.
        row.resize(row_bytes, 0);
        for r in buf.chunks_exact_mut(row_bytes) {
            prefix_sum_u8(r);
            row.copy_from_slice(r);
            let [p0, p1, p2, p3] = planes(row, row_samples);
            for (i, out) in r.chunks_exact_mut(4).enumerate() {
                let v = u32::from_be_bytes([p0[i], p1[i], p2[i], p3[i]]);
                out.copy_from_slice(&v.to_ne_bytes());
            }
        }
        return;
    }
    if plan.big_endian != cfg!(target_endian = "big") {
        match size {
            2 => buf.chunks_exact_mut(2).for_each(|c| c.swap(0, 1)),
            4 => buf.chunks_exact_mut(4).for_each(<[u8]>::reverse),
            _ => {}
        }
    }
    if plan.predictor == Predictor::Horizontal {
        for r in buf.chunks_exact_mut(row_bytes) {
            match size {
                1 => prefix_sum_u8(r),
                2 => prefix_sum::<u16, 2>(r, u16::wrapping_add),
                // libtiff and the tiff crate difference 32-bit float samples as integers
                _ => prefix_sum::<u32, 4>(r, u32::wrapping_add),
            }
        }
    }
}

fn planes(row: &[u8], n: usize) -> [&[u8]; 4] {
    let (p0, rest) = row.split_at(n);
    let (p1, rest) = rest.split_at(n);
    let (p2, p3) = rest.split_at(n);
    [p0, p1, p2, p3]
}

fn prefix_sum_u8(r: &mut [u8]) {
    let mut acc = 0u8;
    for b in r {
        acc = acc.wrapping_add(*b);
        *b = acc;
    }
}

/// Running sum of native-order `N`-byte samples, wrapping.
fn prefix_sum<T: bytemuck::Pod + Default, const N: usize>(r: &mut [u8], add: fn(T, T) -> T) {
    let mut acc = T::default();
    for c in r.chunks_exact_mut(N) {
        acc = add(acc, bytemuck::pod_read_unaligned(c));
        c.copy_from_slice(bytemuck::bytes_of(&acc));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn float_predictor_inverts_its_encoding() {
        // encode two rows of three f32 the way TN3 describes, then decode
        let values: [f32; 6] = [1.5, -2.25, 1e-40, f32::INFINITY, 0.0, 1234.5];
        let mut buf = Vec::new();
        for row in values.chunks(3) {
            let mut planes = vec![0u8; 12];
            for (i, v) in row.iter().enumerate() {
                for (p, b) in v.to_bits().to_be_bytes().into_iter().enumerate() {
                    planes[p * 3 + i] = b;
                }
            }
            let mut prev = 0u8;
            for b in &mut planes {
                let d = b.wrapping_sub(prev);
                prev = *b;
                *b = d;
            }
            buf.extend(planes);
        }
        let plan = ChunkPlan {
            codec: Codec::None,
            predictor: Predictor::Float,
            big_endian: true,
            reverse_bits: false,
            tiled: false,
            chunk_width: 3,
            chunk_height: 2,
            chunks: Vec::new(),
        };
        post(&mut buf, &plan, DType::F32, 3, &mut Vec::new());
        let got: Vec<f32> = buf
            .chunks_exact(4)
            .map(bytemuck::pod_read_unaligned)
            .collect();
        assert_eq!(
            got.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            values.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
    }

    #[test]
    fn lzw_without_end_code_is_accepted_when_output_is_full() {
        // weezl's own encoder writes an end code; cut it off and the data must still decode
        let data: Vec<u8> = (0..5000u32).map(|i| (i * 7 % 251) as u8).collect();
        let enc = weezl::encode::Encoder::with_tiff_size_switch(weezl::BitOrder::Msb, 8)
            .encode(&data)
            .unwrap();
        let mut dec =
            weezl::decode::Configuration::with_tiff_size_switch(weezl::BitOrder::Msb, 8).build();
        let mut out = vec![0u8; data.len()];
        // the end code is the last 12-bit code: dropping the last byte loses part of it
        assert_eq!(
            lzw(&mut dec, &enc[..enc.len() - 1], &mut out),
            Ok(data.len())
        );
        assert_eq!(out, data);
        dec.reset();
        let mut out = vec![0u8; data.len()];
        let got = lzw(&mut dec, &enc[..enc.len() / 2], &mut out).unwrap();
        assert!(got < data.len(), "half the data cannot fill the output");
    }

    #[test]
    fn inflate_fills_or_reports_short() {
        use std::io::Write;
        let data: Vec<u8> = (0..100_000u32).map(|i| (i % 13) as u8).collect();
        let mut e = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::fast());
        e.write_all(&data).unwrap();
        let enc = e.finish().unwrap();
        let mut z = Decompress::new(true);
        let mut out = vec![0u8; data.len()];
        assert_eq!(inflate(&mut z, &enc, &mut out), Ok(data.len()));
        assert_eq!(out, data);
        z.reset(true);
        let mut out = vec![0u8; data.len() + 10];
        assert_eq!(inflate(&mut z, &enc, &mut out), Ok(data.len()));
        z.reset(true);
        assert!(inflate(&mut z, &[0x78, 0x9c, 0xff, 0xff, 0xff], &mut out).is_err());
    }

    #[test]
    fn chunk_inflate_whole_then_streaming() {
        use std::io::Write;
        let data: Vec<u8> = (0..100_000u32).map(|i| (i * 7 % 251) as u8).collect();
        let mut e = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::default());
        e.write_all(&data).unwrap();
        let enc = e.finish().unwrap();
        let (mut whole, mut streaming) = (None, None);
        // exact size: libdeflate alone
        let mut out = vec![0u8; data.len()];
        assert_eq!(
            inflate_chunk(&mut whole, &mut streaming, &enc, &mut out),
            Ok(data.len())
        );
        assert_eq!(out, data);
        assert!(streaming.is_none(), "libdeflate took the whole stream");
        // a stream longer than the chunk (padding some writers leave): filled, not refused
        let mut out = vec![0u8; 1000];
        assert_eq!(
            inflate_chunk(&mut whole, &mut streaming, &enc, &mut out),
            Ok(1000)
        );
        assert_eq!(out, data[..1000]);
        // cut short: what there is, so the caller can report where the data end
        let mut out = vec![0u8; data.len()];
        let got = inflate_chunk(&mut whole, &mut streaming, &enc[..enc.len() / 2], &mut out);
        assert!(got.unwrap() < data.len());
        // a damaged checksum is still an error
        let mut bad = enc.clone();
        *bad.last_mut().unwrap() ^= 1;
        let mut out = vec![0u8; data.len()];
        assert!(inflate_chunk(&mut whole, &mut streaming, &bad, &mut out).is_err());
    }
}
