//! A check of every length a DICOM file claims, made before the parser sees the file.
//!
//! The parser (`dicom-parser`) allocates and zero-fills a value's buffer at the length its
//! header claims before it reads the value, so one damaged length field (up to 4 GiB) in a
//! file of a few kilobytes would cost gigabytes of memory before the read fails. This walk
//! goes over the element headers alone, with the data set's byte order and VR encoding, and
//! refuses any length that reaches past the end of the file, or past the end of the sequence
//! or item that holds it; every value the parser then allocates is backed by bytes that exist.
//! It does not interpret values (the parser does), except the transfer syntax UID, which tells
//! the encoding of the data set.

use dicom_core::dictionary::{DataDictionary, DataDictionaryEntry, VirtualVr};
use dicom_core::{Tag, VR};
use dicom_dictionary_std::StandardDataDictionary;

/// Where the walk stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Stop {
    /// At the root data set's Pixel Data element (or the first root element after it), at
    /// this byte offset; everything before it checked.
    PixelData(usize),
    /// At the end of the file; everything checked.
    End,
    /// The bytes given end before the walk could finish: give more of the file.
    NeedMore,
}

/// What the walk learnt on the way.
#[derive(Clone, Debug)]
pub(super) struct Walked {
    pub stop: Stop,
    pub transfer_syntax: String,
}

/// The transfer syntaxes whose data set is not explicit VR little endian.
pub(super) const IMPLICIT_VR_LE: &str = "1.2.840.10008.1.2";
pub(super) const EXPLICIT_VR_BE: &str = "1.2.840.10008.1.2.2";
pub(super) const DEFLATED_EXPLICIT_VR_LE: &str = "1.2.840.10008.1.2.1.99";

const UNDEFINED: u32 = 0xFFFF_FFFF;
const ITEM: Tag = Tag(0xFFFE, 0xE000);
const ITEM_END: Tag = Tag(0xFFFE, 0xE00D);
const SEQUENCE_END: Tag = Tag(0xFFFE, 0xE0DD);
const PIXEL_DATA: Tag = Tag(0x7FE0, 0x0010);

/// Whether `bytes` (a file's start) carry the DICOM Part 10 marker.
pub(super) fn has_marker(bytes: &[u8]) -> bool {
    bytes.get(128..132) == Some(b"DICM")
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Open {
    /// A sequence of items, ending at this offset or at its delimiter.
    Sequence(Option<usize>),
    /// An item of a sequence (a nested data set).
    Item(Option<usize>),
    /// The fragments of encapsulated pixel data (ends at its sequence delimiter).
    Fragments,
}

impl Open {
    fn end(self) -> Option<usize> {
        match self {
            Self::Sequence(e) | Self::Item(e) => e,
            Self::Fragments => None,
        }
    }
}

struct Cursor<'a> {
    bytes: &'a [u8],
    file_len: u64,
    big_endian: bool,
}

impl Cursor<'_> {
    fn u16_at(&self, at: usize) -> u16 {
        let b = [self.bytes[at], self.bytes[at + 1]];
        if self.big_endian {
            u16::from_be_bytes(b)
        } else {
            u16::from_le_bytes(b)
        }
    }
    fn u32_at(&self, at: usize) -> u32 {
        let b = [
            self.bytes[at],
            self.bytes[at + 1],
            self.bytes[at + 2],
            self.bytes[at + 3],
        ];
        if self.big_endian {
            u32::from_be_bytes(b)
        } else {
            u32::from_le_bytes(b)
        }
    }
}

/// Whether an explicit VR takes the long header form (2 reserved bytes and a 32-bit length):
/// every VR but the standard's short ones. Bytes that name no VR are read as UN by the parser,
/// a long form, so they are here too.
fn long_form(vr: [u8; 2]) -> bool {
    const SHORT: [&[u8; 2]; 21] = [
        b"AE", b"AS", b"AT", b"CS", b"DA", b"DS", b"DT", b"FL", b"FD", b"IS", b"LO", b"LT", b"PN",
        b"SH", b"SL", b"SS", b"ST", b"TM", b"UI", b"UL", b"US",
    ];
    !SHORT.contains(&&vr)
}

/// Whether the standard dictionary calls a tag a sequence (for implicit VR data sets).
fn is_sequence(tag: Tag) -> bool {
    StandardDataDictionary
        .by_tag(tag)
        .is_some_and(|e| e.vr() == VirtualVr::Exact(VR::SQ))
}

fn tag_text(t: Tag) -> String {
    format!("({:04X},{:04X})", t.0, t.1)
}

/// Walks a file's element headers (see the module docs). `bytes` is the file or its start;
/// `file_len` the whole file's length. With `stop_at_pixels` the walk ends at the root Pixel
/// Data element. An error says what is wrong, in words, without the file's name.
#[allow(
    clippy::too_many_lines,
    reason = "one element header after another, each with its own length check, in file order"
)]
pub(super) fn walk(bytes: &[u8], file_len: u64, stop_at_pixels: bool) -> Result<Walked, String> {
    let avail = bytes.len();
    let whole = avail as u64 >= file_len;
    let truncated = |what: &str, at: usize| {
        if whole {
            Err(format!("the file ends inside {what} at byte {at}"))
        } else {
            Ok(Walked {
                stop: Stop::NeedMore,
                transfer_syntax: String::new(),
            })
        }
    };
    if !has_marker(bytes) {
        return if avail < 132 && !whole {
            truncated("the preamble", 0)
        } else {
            Err("not a DICOM file (no DICM marker at byte 128)".into())
        };
    }
    // the file meta group: explicit VR little endian, group 0002
    let mut pos = 132usize;
    let mut ts = None;
    loop {
        if pos + 8 > avail {
            if whole && pos as u64 == file_len {
                break;
            }
            return truncated("the file meta group", pos);
        }
        let group = u16::from_le_bytes([bytes[pos], bytes[pos + 1]]);
        if group != 0x0002 {
            break;
        }
        let element = u16::from_le_bytes([bytes[pos + 2], bytes[pos + 3]]);
        let vr = [bytes[pos + 4], bytes[pos + 5]];
        let (len, header) = if long_form(vr) {
            if pos + 12 > avail {
                return truncated("the file meta group", pos);
            }
            let l = u32::from_le_bytes([
                bytes[pos + 8],
                bytes[pos + 9],
                bytes[pos + 10],
                bytes[pos + 11],
            ]);
            (l, 12)
        } else {
            (
                u32::from(u16::from_le_bytes([bytes[pos + 6], bytes[pos + 7]])),
                8,
            )
        };
        let start = pos + header;
        if len == UNDEFINED || start as u64 + u64::from(len) > file_len {
            return Err(format!(
                "file meta element (0002,{element:04X}) claims {len} bytes, past the end of the file"
            ));
        }
        let end = start + len as usize;
        if end > avail {
            return truncated("the file meta group", pos);
        }
        if element == 0x0010 {
            let text = String::from_utf8_lossy(&bytes[start..end]);
            ts = Some(text.trim_end_matches(['\0', ' ']).to_owned());
        }
        pos = end;
    }
    let Some(transfer_syntax) = ts else {
        return Err("the file meta group has no transfer syntax UID (0002,0010)".into());
    };
    if transfer_syntax == DEFLATED_EXPLICIT_VR_LE {
        // the data set is a deflate stream: nothing to walk, and the stream's expansion is
        // unbounded; the reader refuses this syntax
        return Ok(Walked {
            stop: Stop::End,
            transfer_syntax,
        });
    }
    let cursor = Cursor {
        bytes,
        file_len,
        big_endian: transfer_syntax == EXPLICIT_VR_BE,
    };
    let implicit = transfer_syntax == IMPLICIT_VR_LE;
    let mut stack: Vec<Open> = Vec::new();
    loop {
        // close the defined-length containers that end here
        while let Some(end) = stack.last().and_then(|o| o.end()) {
            if pos < end {
                break;
            }
            if pos > end {
                return Err(format!(
                    "an element at byte {pos} overruns its sequence or item, which ends at byte {end}"
                ));
            }
            stack.pop();
        }
        if pos as u64 == file_len {
            return Ok(Walked {
                stop: Stop::End,
                transfer_syntax,
            });
        }
        if pos + 8 > avail {
            return truncated("an element header", pos);
        }
        let tag = Tag(cursor.u16_at(pos), cursor.u16_at(pos + 2));
        if tag.0 == 0xFFFE {
            let len = cursor.u32_at(pos + 4);
            pos += 8;
            match tag {
                ITEM => match stack.last() {
                    Some(Open::Fragments) => {
                        if len == UNDEFINED || pos as u64 + u64::from(len) > file_len {
                            return Err(format!(
                                "a pixel data fragment at byte {} claims {len} bytes, past the end of the file",
                                pos - 8
                            ));
                        }
                        pos += len as usize;
                    }
                    Some(Open::Sequence(_)) => {
                        let end = bounded(&cursor, &stack, pos, len, "an item")?;
                        stack.push(Open::Item(end));
                    }
                    _ => return Err(format!("an item outside any sequence at byte {}", pos - 8)),
                },
                ITEM_END => {
                    if matches!(stack.last(), Some(Open::Item(None))) {
                        stack.pop();
                    } else {
                        return Err(format!("a stray item delimiter at byte {}", pos - 8));
                    }
                }
                SEQUENCE_END => {
                    if matches!(stack.last(), Some(Open::Sequence(None) | Open::Fragments)) {
                        stack.pop();
                    } else {
                        return Err(format!("a stray sequence delimiter at byte {}", pos - 8));
                    }
                }
                _ => {
                    return Err(format!(
                        "an unknown delimiter {} at byte {}",
                        tag_text(tag),
                        pos - 8
                    ));
                }
            }
            continue;
        }
        if stop_at_pixels && stack.is_empty() && tag >= PIXEL_DATA {
            return Ok(Walked {
                stop: Stop::PixelData(pos),
                transfer_syntax,
            });
        }
        let (len, header, sequence) = if implicit {
            let len = cursor.u32_at(pos + 4);
            (
                len,
                8,
                is_sequence(tag) || (len == UNDEFINED && tag != PIXEL_DATA),
            )
        } else {
            let vr = [bytes[pos + 4], bytes[pos + 5]];
            if long_form(vr) {
                if pos + 12 > avail {
                    return truncated("an element header", pos);
                }
                let len = cursor.u32_at(pos + 8);
                // an undefined-length UN holds an implicit VR sequence; walk it as a sequence
                (len, 12, &vr == b"SQ" || (&vr == b"UN" && len == UNDEFINED))
            } else {
                (u32::from(cursor.u16_at(pos + 6)), 8, false)
            }
        };
        pos += header;
        if sequence {
            let end = bounded(
                &cursor,
                &stack,
                pos,
                len,
                &format!("sequence {}", tag_text(tag)),
            )?;
            stack.push(Open::Sequence(end));
        } else if len == UNDEFINED {
            if tag != PIXEL_DATA {
                return Err(format!(
                    "element {} has an undefined length but is no sequence",
                    tag_text(tag)
                ));
            }
            stack.push(Open::Fragments);
        } else {
            let end = bounded(
                &cursor,
                &stack,
                pos,
                len,
                &format!("element {}", tag_text(tag)),
            )?;
            pos = end.unwrap_or(pos);
        }
    }
}

/// The end of a value of `len` bytes starting at `pos`, checked against the file and the
/// innermost container with a defined end; `None` for an undefined length.
fn bounded(
    cursor: &Cursor<'_>,
    stack: &[Open],
    pos: usize,
    len: u32,
    what: &str,
) -> Result<Option<usize>, String> {
    if len == UNDEFINED {
        return Ok(None);
    }
    let end = pos as u64 + u64::from(len);
    if end > cursor.file_len {
        return Err(format!(
            "{what} claims {len} bytes at byte {pos}, past the end of the file ({} bytes): the file is truncated or damaged",
            cursor.file_len
        ));
    }
    if let Some(outer) = stack.iter().rev().find_map(|o| o.end())
        && end > outer as u64
    {
        return Err(format!(
            "{what} claims {len} bytes at byte {pos}, past the end of its sequence at byte {outer}"
        ));
    }
    Ok(Some(end as usize))
}
