//! A first look at each image file directory (IFD) before the `tiff` crate reads it.
//!
//! The crate trusts a directory's counts and offsets: a tag claiming 2³¹ characters makes it
//! print a debug line to stderr and allocate before it fails, and a directory offset beyond the
//! file ends in an operating-system error ("Invalid argument") that says nothing about the
//! file. [`check`] reads the header and one directory itself (TIFF 6.0 §2 "Image File
//! Directory"; `BigTIFF`: 8-byte counts and offsets) and refuses, in words, a directory that runs
//! past the end of the file and any tag the crate or Sutura reads whose values do not fit in the
//! file or that holds text where numbers belong. It reads a few hundred bytes and allocates
//! nothing that the file's length does not bound.

use crate::io::IoError;
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::Path;

/// The longest `ImageDescription` read (Sutura's own is about 40 bytes; 16 MiB matches the
/// crate's buffer limit set in `page::open_decoder`). A longer one is ignored with a note.
pub(super) const MAX_TEXT_BYTES: u64 = 16 << 20;

/// TIFF 6.0 tag numbers of every tag the crate (to set up a page) or Sutura reads.
const READ_TAGS: &[(u16, &str)] = &[
    (256, "ImageWidth"),
    (257, "ImageLength"),
    (258, "BitsPerSample"),
    (259, "Compression"),
    (262, "PhotometricInterpretation"),
    (266, "FillOrder"),
    (270, "ImageDescription"),
    (273, "StripOffsets"),
    (277, "SamplesPerPixel"),
    (278, "RowsPerStrip"),
    (279, "StripByteCounts"),
    (282, "XResolution"),
    (283, "YResolution"),
    (284, "PlanarConfiguration"),
    (296, "ResolutionUnit"),
    (317, "Predictor"),
    (322, "TileWidth"),
    (323, "TileLength"),
    (324, "TileOffsets"),
    (325, "TileByteCounts"),
    (338, "ExtraSamples"),
    (339, "SampleFormat"),
    (347, "JPEGTables"),
    (530, "YCbCrSubSampling"),
];

const IMAGE_DESCRIPTION: u16 = 270;
/// Field type 2 (TIFF 6.0 §2): 7-bit ASCII text.
const ASCII: u16 = 2;

/// The name of a tag, for messages: `tag 270 (ImageDescription)`.
pub(super) fn tag_label(tag: u16) -> String {
    READ_TAGS
        .iter()
        .find(|t| t.0 == tag)
        .map_or_else(|| format!("tag {tag}"), |t| format!("tag {tag} ({})", t.1))
}

/// Bytes per value of a field type (TIFF 6.0 §2, `BigTIFF` adds 16–18); `None` if unknown.
fn type_size(t: u16) -> Option<u64> {
    Some(match t {
        1 | 2 | 6 | 7 => 1,
        3 | 8 => 2,
        4 | 9 | 11 | 13 => 4,
        5 | 10 | 12 | 16..=18 => 8,
        _ => return None,
    })
}

/// The file's layout, from its 8- or 16-byte header.
#[derive(Clone, Copy, Debug)]
pub(super) struct Layout {
    big_endian: bool,
    bigtiff: bool,
    len: u64,
}

/// What [`check`] learnt about one directory.
#[derive(Clone, Debug, Default)]
pub(super) struct Directory {
    /// Offset of the next directory (0: none).
    pub next: u64,
    /// Why the `ImageDescription` is not to be read (too long, or beyond the end of the
    /// file): it is optional, so the page is still read, with this as a note.
    pub unreadable_description: Option<String>,
}

fn read_exact(
    file: &File,
    path: &Path,
    buf: &mut [u8],
    at: u64,
    what: &str,
) -> Result<(), IoError> {
    file.read_exact_at(buf, at).map_err(|e| {
        if e.kind() == std::io::ErrorKind::UnexpectedEof {
            IoError::corrupt(
                path,
                format!("truncated: {what} at offset {at} runs past the end of the file"),
            )
        } else {
            IoError::os(path, e)
        }
    })
}

impl Layout {
    fn u16(self, b: &[u8]) -> u16 {
        let a = [b[0], b[1]];
        if self.big_endian {
            u16::from_be_bytes(a)
        } else {
            u16::from_le_bytes(a)
        }
    }

    fn u32(self, b: &[u8]) -> u32 {
        let a = [b[0], b[1], b[2], b[3]];
        if self.big_endian {
            u32::from_be_bytes(a)
        } else {
            u32::from_le_bytes(a)
        }
    }

    fn u64(self, b: &[u8]) -> u64 {
        let a: [u8; 8] = b[..8].try_into().expect("8 bytes");
        if self.big_endian {
            u64::from_be_bytes(a)
        } else {
            u64::from_le_bytes(a)
        }
    }

    /// An offset field (4 bytes, or 8 in a `BigTIFF`).
    fn offset(self, b: &[u8]) -> u64 {
        if self.bigtiff {
            self.u64(b)
        } else {
            u64::from(self.u32(b))
        }
    }
}

/// Reads the header: the layout and the offset of the first directory.
pub(super) fn header(file: &File, path: &Path) -> Result<(Layout, u64), IoError> {
    let len = file.metadata().map_err(|e| IoError::os(path, e))?.len();
    let mut h = [0u8; 16];
    let n = h.len().min(usize::try_from(len).unwrap_or(usize::MAX));
    read_exact(file, path, &mut h[..n], 0, "the header")?;
    let big_endian = match &h[..2.min(n)] {
        b"II" => false,
        b"MM" => true,
        _ => {
            return Err(IoError::corrupt(
                path,
                "not a TIFF file (no II or MM byte-order mark)",
            ));
        }
    };
    let mut layout = Layout {
        big_endian,
        bigtiff: false,
        len,
    };
    if n < 8 {
        return Err(IoError::corrupt(
            path,
            format!("file is only {len} bytes long, shorter than a TIFF header"),
        ));
    }
    let first = match layout.u16(&h[2..4]) {
        42 => u64::from(layout.u32(&h[4..8])),
        43 => {
            if n < 16 || layout.u16(&h[4..6]) != 8 || layout.u16(&h[6..8]) != 0 {
                return Err(IoError::corrupt(
                    path,
                    "BigTIFF header is damaged (offset size not 8)",
                ));
            }
            layout.bigtiff = true;
            layout.u64(&h[8..16])
        }
        v => {
            return Err(IoError::corrupt(
                path,
                format!("TIFF version number is {v}, expected 42 (TIFF) or 43 (BigTIFF)"),
            ));
        }
    };
    Ok((layout, first))
}

/// Checks the directory at `offset` (see the module docs); `index` is its page number.
pub(super) fn check(
    file: &File,
    path: &Path,
    layout: Layout,
    offset: u64,
    index: usize,
) -> Result<Directory, IoError> {
    let page = |what: String| IoError::corrupt(path, format!("page {index}: {what}"));
    let (count_bytes, entry_bytes, field_bytes) = if layout.bigtiff {
        (8u64, 20u64, 8u64)
    } else {
        (2, 12, 4)
    };
    if offset == 0 || offset.saturating_add(count_bytes) > layout.len {
        return Err(page(format!(
            "its directory offset {offset} lies outside the file ({} bytes)",
            layout.len
        )));
    }
    let mut cb = [0u8; 8];
    read_exact(
        file,
        path,
        &mut cb[..count_bytes as usize],
        offset,
        "a directory",
    )?;
    let entries = if layout.bigtiff {
        layout.u64(&cb)
    } else {
        u64::from(layout.u16(&cb))
    };
    let body = entries
        .checked_mul(entry_bytes)
        .and_then(|b| b.checked_add(count_bytes + field_bytes))
        .filter(|&b| offset.checked_add(b).is_some_and(|end| end <= layout.len));
    let Some(body) = body else {
        return Err(page(format!(
            "its directory at offset {offset} claims {entries} entries, more than the file ({} bytes) holds",
            layout.len
        )));
    };
    // bounded by the file's length (checked just above)
    let mut buf = vec![0u8; usize::try_from(body - count_bytes).unwrap_or(0)];
    read_exact(file, path, &mut buf, offset + count_bytes, "a directory")?;
    let mut dir = Directory::default();
    for e in buf.chunks_exact(entry_bytes as usize) {
        let tag = layout.u16(&e[0..2]);
        let field_type = layout.u16(&e[2..4]);
        if !READ_TAGS.iter().any(|t| t.0 == tag) {
            continue;
        }
        let count = if layout.bigtiff {
            layout.u64(&e[4..12])
        } else {
            u64::from(layout.u32(&e[4..8]))
        };
        let Some(size) = type_size(field_type) else {
            continue;
        };
        if field_type == ASCII && tag != IMAGE_DESCRIPTION {
            return Err(page(format!(
                "{} holds text where numbers belong",
                tag_label(tag)
            )));
        }
        let bytes = count.checked_mul(size);
        let value_at = layout.offset(&e[(entry_bytes - field_bytes) as usize..]);
        let fits = bytes.is_some_and(|b| {
            b <= field_bytes || value_at.checked_add(b).is_some_and(|end| end <= layout.len)
        });
        let problem = if fits {
            None
        } else {
            Some(format!(
                "{} claims {count} values at offset {value_at}, beyond the end of the file ({} bytes)",
                tag_label(tag),
                layout.len
            ))
        };
        if tag == IMAGE_DESCRIPTION {
            dir.unreadable_description = problem.or_else(|| {
                (count > MAX_TEXT_BYTES).then(|| {
                    format!(
                        "{} is {count} bytes long, more than a voxel size needs",
                        tag_label(tag)
                    )
                })
            });
        } else if let Some(p) = problem {
            return Err(page(p));
        }
    }
    dir.next = layout.offset(&buf[buf.len() - field_bytes as usize..]);
    Ok(dir)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A little-endian classic TIFF with one directory of the given `(tag, type, count, value)`.
    fn tiff(entries: &[(u16, u16, u32, u32)], first: u32) -> Vec<u8> {
        let mut b = b"II*\0".to_vec();
        b.extend_from_slice(&first.to_le_bytes());
        b.extend_from_slice(&u16::try_from(entries.len()).unwrap().to_le_bytes());
        for &(tag, t, count, value) in entries {
            b.extend_from_slice(&tag.to_le_bytes());
            b.extend_from_slice(&t.to_le_bytes());
            b.extend_from_slice(&count.to_le_bytes());
            b.extend_from_slice(&value.to_le_bytes());
        }
        b.extend_from_slice(&0u32.to_le_bytes());
        b
    }

    fn run(bytes: &[u8]) -> Result<Directory, IoError> {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("t.tif");
        std::fs::write(&p, bytes).unwrap();
        let f = File::open(&p).unwrap();
        let (layout, first) = header(&f, &p)?;
        check(&f, &p, layout, first, 0)
    }

    #[test]
    fn accepts_a_plain_directory_and_flags_what_does_not_fit() {
        let ok = tiff(
            &[(256, 4, 1, 16), (257, 4, 1, 12), (270, 2, 4, 0x0061_6263)],
            8,
        );
        let d = run(&ok).unwrap();
        assert_eq!((d.next, d.unreadable_description), (0, None));
        // a description claiming 2^31 characters: noted, not read
        let long = tiff(&[(256, 4, 1, 16), (270, 2, 1 << 31, 8)], 8);
        let why = run(&long).unwrap().unreadable_description.unwrap();
        assert!(
            why.contains("tag 270 (ImageDescription) claims 2147483648 values"),
            "{why}"
        );
        // strip offsets beyond the end of the file
        let e = run(&tiff(&[(273, 4, 1000, 9999)], 8))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("tag 273 (StripOffsets)") && e.contains("beyond the end"),
            "{e}"
        );
        // text where numbers belong
        let e = run(&tiff(&[(258, 2, 2, 0x31)], 8)).unwrap_err().to_string();
        assert!(e.contains("BitsPerSample) holds text"), "{e}");
        // a directory offset beyond the file
        let e = run(&tiff(&[(256, 4, 1, 16)], 1 << 30))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("directory offset 1073741824 lies outside the file"),
            "{e}"
        );
        // tags nobody reads may be as odd as they like
        assert!(run(&tiff(&[(40000, 4, 1 << 30, 7)], 8)).is_ok());
    }
}
