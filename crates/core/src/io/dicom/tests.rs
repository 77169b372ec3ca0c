//! Series written here with `dicom-object` (known values and positions), read back; every
//! inconsistency the module docs list is refused with a message naming the files. The checks
//! against pydicom are in `tests/dicom_reference.rs`.

use super::*;
use crate::io::{self, Format};
use dicom_core::{DataElement, PrimitiveValue, VR};
use dicom_dictionary_std::{tags, uids};
use dicom_object::{FileMetaTableBuilder, InMemDicomObject};
use std::path::PathBuf;

/// One slice to write.
#[derive(Clone)]
struct Slice {
    uid: &'static str,
    rows: u16,
    columns: u16,
    orientation: Option<[f64; 6]>,
    position: Option<[f64; 3]>,
    values: Vec<i16>,
    slope: f64,
}

fn ds(v: &[f64]) -> String {
    v.iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join("\\")
}

fn write(path: &Path, s: &Slice) {
    let mut o = InMemDicomObject::new_empty();
    let mut put = |tag, vr, v: PrimitiveValue| {
        o.put(DataElement::new(tag, vr, v));
    };
    put(tags::SOP_CLASS_UID, VR::UI, uids::CT_IMAGE_STORAGE.into());
    put(tags::SOP_INSTANCE_UID, VR::UI, "1.2.3.4.5".into());
    put(tags::SERIES_INSTANCE_UID, VR::UI, s.uid.into());
    put(tags::SERIES_DESCRIPTION, VR::LO, "test".into());
    if let Some(p) = s.position {
        put(tags::IMAGE_POSITION_PATIENT, VR::DS, ds(&p).into());
    }
    if let Some(o) = s.orientation {
        put(tags::IMAGE_ORIENTATION_PATIENT, VR::DS, ds(&o).into());
    }
    put(tags::SAMPLES_PER_PIXEL, VR::US, PrimitiveValue::from(1u16));
    put(
        tags::PHOTOMETRIC_INTERPRETATION,
        VR::CS,
        "MONOCHROME2".into(),
    );
    put(tags::ROWS, VR::US, PrimitiveValue::from(s.rows));
    put(tags::COLUMNS, VR::US, PrimitiveValue::from(s.columns));
    put(tags::PIXEL_SPACING, VR::DS, "0.5\\0.25".into());
    put(tags::BITS_ALLOCATED, VR::US, PrimitiveValue::from(16u16));
    put(tags::BITS_STORED, VR::US, PrimitiveValue::from(16u16));
    put(tags::HIGH_BIT, VR::US, PrimitiveValue::from(15u16));
    put(
        tags::PIXEL_REPRESENTATION,
        VR::US,
        PrimitiveValue::from(1u16),
    );
    put(tags::RESCALE_SLOPE, VR::DS, s.slope.to_string().into());
    put(tags::RESCALE_INTERCEPT, VR::DS, "-1024".into());
    let words: Vec<u16> = s.values.iter().map(|v| v.cast_unsigned()).collect();
    put(tags::PIXEL_DATA, VR::OW, PrimitiveValue::U16(words.into()));
    let file = o
        .with_meta(
            FileMetaTableBuilder::new()
                .transfer_syntax(uids::EXPLICIT_VR_LITTLE_ENDIAN)
                .media_storage_sop_class_uid(uids::CT_IMAGE_STORAGE)
                .media_storage_sop_instance_uid("1.2.3.4.5"),
        )
        .unwrap();
    file.write_to_file(path).unwrap();
}

const AXIAL: [f64; 6] = [1.0, 0.0, 0.0, 0.0, 1.0, 0.0];

/// Slice `k` of a 4×3 series with 1.25 mm steps along z; values encode (i, j, k).
fn slice(k: usize) -> Slice {
    let values = (0..12)
        .map(|p| i16::try_from(100 * k + p).unwrap() - 50)
        .collect();
    Slice {
        uid: "1.2.826.0.1.1",
        rows: 3,
        columns: 4,
        orientation: Some(AXIAL),
        position: Some([-10.0, 20.0, 5.0 + 1.25 * k as f64]),
        values,
        slope: 2.0,
    }
}

/// Writes `slices` as `NAME` files into a fresh folder.
fn folder(slices: &[(&str, Slice)]) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let series = dir.path().join("series");
    std::fs::create_dir(&series).unwrap();
    for (name, s) in slices {
        write(&series.join(name), s);
    }
    (dir, series)
}

fn error_of(path: &Path) -> String {
    let e = io::open(path, &OpenOptions::default(), &Progress::none()).unwrap_err();
    let text = e.to_string();
    assert!(!text.contains('\n'), "one line: {text}");
    text
}

#[test]
fn a_shuffled_series_is_ordered_by_position_and_placed_in_ras() {
    // names in an order unrelated to the positions, one without an extension
    let (_d, dir) = folder(&[
        ("b.dcm", slice(2)),
        ("c", slice(0)),
        ("a.dcm", slice(3)),
        ("d.DCM", slice(1)),
    ]);
    std::fs::write(dir.join("notes.txt"), b"not a slice").unwrap();
    assert_eq!(io::detect(&dir).unwrap(), Format::Dicom);
    let v = io::open(&dir, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(v.dims(), [4, 3, 4]);
    assert_eq!(v.dtype(), DType::I16);
    assert_eq!(v.rescale(), Rescale::new(2.0, -1024.0));
    // voxel (i, j, k) holds 100 k + (i + 4 j) - 50
    for k in 0..4 {
        for j in 0..3 {
            for i in 0..4 {
                let raw = (100 * k + i + 4 * j) as f64 - 50.0;
                let got = v.value(crate::geometry::VoxelIndex::new(i, j, k)).unwrap();
                assert!((got - (2.0 * raw - 1024.0)).abs() < 1e-12);
            }
        }
    }
    // LPS: i along x by PixelSpacing[1] = 0.25, j along y by PixelSpacing[0] = 0.5,
    // k along z by 1.25, origin (-10, 20, 5); RAS negates x and y
    let rows = v.world_from_voxel().rows();
    let want = [
        [-0.25, 0.0, 0.0, 10.0],
        [0.0, -0.5, 0.0, -20.0],
        [0.0, 0.0, 1.25, 5.0],
        [0.0, 0.0, 0.0, 1.0],
    ];
    for r in 0..4 {
        for c in 0..4 {
            assert!((rows[r][c] - want[r][c]).abs() < 1e-12, "{rows:?}");
        }
    }
    // streamed: the same bytes, slab by slab
    let mut reader = io::slices::open_slices(&dir, &OpenOptions::default()).unwrap();
    let mut slab = vec![0u8; reader.slice_bytes() * 2];
    reader.read_slices(2, &mut slab, &Progress::none()).unwrap();
    let whole: &[u8] = crate::with_voxels!(v.voxels(), |s| bytemuck::cast_slice(s));
    assert_eq!(slab, whole[2 * 24..4 * 24]);
    // a file of the series opens the series
    let one = io::open(&dir.join("c"), &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(one.dims(), [4, 3, 4]);
}

#[test]
fn two_series_need_a_choice() {
    let mut other = slice(0);
    other.uid = "1.2.826.0.1.2";
    let (_d, dir) = folder(&[("a", slice(0)), ("b", slice(1)), ("c", other)]);
    let e = error_of(&dir);
    assert!(e.contains("holds 2 DICOM series"), "{e}");
    assert!(e.contains("1.2.826.0.1.1 \"test\" (2 slices)"), "{e}");
    assert!(e.contains("1.2.826.0.1.2 \"test\" (1 slice)"), "{e}");
    let options = OpenOptions {
        dicom_series: Some("1.2.826.0.1.1".into()),
        ..OpenOptions::default()
    };
    let v = io::open(&dir, &options, &Progress::none()).unwrap();
    assert_eq!(v.dims(), [4, 3, 2]);
    let listed = list_series(&dir, &crate::io::Limits::default()).unwrap();
    assert_eq!(listed.len(), 2);
}

#[test]
fn a_gap_is_named() {
    let (_d, dir) = folder(&[
        ("s0", slice(0)),
        ("s1", slice(1)),
        ("s3", slice(3)),
        ("s4", slice(4)),
    ]);
    let e = error_of(&dir);
    assert!(
        e.contains("a gap: s1 and s3 are 2.5 mm apart where the other slices are 1.25 mm apart (1 slice missing?)"),
        "{e}"
    );
}

#[test]
fn uneven_spacing_is_named() {
    let mut s2 = slice(2);
    s2.position = Some([-10.0, 20.0, 5.0 + 1.25 * 2.0 + 0.3]);
    let (_d, dir) = folder(&[
        ("s0", slice(0)),
        ("s1", slice(1)),
        ("s2", s2),
        ("s3", slice(3)),
    ]);
    let e = error_of(&dir);
    assert!(e.contains("uneven slice spacing: s1 and s2"), "{e}");
}

#[test]
fn mixed_sizes_orientations_positions_are_refused() {
    let mut big = slice(1);
    big.rows = 2;
    big.columns = 6;
    let (_d, dir) = folder(&[("s0", slice(0)), ("s1", big)]);
    let e = error_of(&dir);
    assert!(
        e.contains("s1: 6 x 2 pixels of 16 bits signed, expected 4 x 3 pixels"),
        "{e}"
    );
    assert!(e.contains("like s0"), "{e}");

    let mut tilted = slice(1);
    tilted.orientation = Some([1.0, 0.0, 0.0, 0.0, 0.8, 0.6]);
    let (_d, dir) = folder(&[("s0", slice(0)), ("s1", tilted)]);
    assert!(error_of(&dir).contains("mixed orientations"));

    let mut lost = slice(1);
    lost.position = None;
    let (_d, dir) = folder(&[("s0", slice(0)), ("s1", lost)]);
    assert!(error_of(&dir).contains("no ImagePositionPatient (0020,0032)"));

    let (_d, dir) = folder(&[("s0", slice(0)), ("s1", slice(0))]);
    assert!(error_of(&dir).contains("s0 and s1 lie at the same position"));

    let mut rescaled = slice(1);
    rescaled.slope = 1.0;
    let (_d, dir) = folder(&[("s0", slice(0)), ("s1", rescaled)]);
    assert!(error_of(&dir).contains("slices rescaled differently"));
}

#[test]
fn damaged_files_are_refused_without_panic_or_huge_allocation() {
    let (_d, dir) = folder(&[("s0", slice(0))]);
    let file = dir.join("s0");
    let good = std::fs::read(&file).unwrap();
    // truncated inside the pixel data
    std::fs::write(&file, &good[..good.len() - 7]).unwrap();
    assert!(error_of(&dir).contains("the file is truncated or damaged"));
    // every 32-bit length field set to 4 GiB - 2, one at a time: refused by the walk
    for at in (132..good.len() - 4).step_by(3) {
        let mut bad = good.clone();
        bad[at..at + 4].copy_from_slice(&0xFFFF_FFFEu32.to_le_bytes());
        std::fs::write(&file, &bad).unwrap();
        if let Err(e) = io::open(&dir, &OpenOptions::default(), &Progress::none()) {
            assert!(!e.to_string().contains('\n'));
        }
    }
    // not DICOM at all, but named .dcm
    std::fs::write(dir.join("s0"), b"x").unwrap();
    std::fs::write(dir.join("x.dcm"), vec![7u8; 300]).unwrap();
    let e = error_of(&dir.join("x.dcm"));
    assert!(e.contains("no DICM marker"), "{e}");
}

#[test]
fn the_length_walk_stops_at_pixel_data_and_asks_for_more() {
    let (_d, dir) = folder(&[("s0", slice(0))]);
    let bytes = std::fs::read(dir.join("s0")).unwrap();
    let whole = walk::walk(&bytes, bytes.len() as u64, false).unwrap();
    assert_eq!(whole.stop, walk::Stop::End);
    assert_eq!(whole.transfer_syntax, uids::EXPLICIT_VR_LITTLE_ENDIAN);
    let head = walk::walk(&bytes, bytes.len() as u64, true).unwrap();
    let walk::Stop::PixelData(at) = head.stop else {
        panic!("{head:?}")
    };
    assert_eq!(&bytes[at..at + 4], &[0xE0, 0x7F, 0x10, 0x00]);
    let part = walk::walk(&bytes[..200], bytes.len() as u64, true).unwrap();
    assert_eq!(part.stop, walk::Stop::NeedMore);
}
