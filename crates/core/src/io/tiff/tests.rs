#![allow(
    clippy::float_cmp,
    reason = "round trips and exact decimal parsing must reproduce values bit for bit"
)]

use super::*;
use crate::io::Limits;
use crate::volume::Rescale;
use std::path::Path;

fn volume_u16(dims: [usize; 3], spacing: [f64; 3]) -> Volume {
    let n = dims[0] * dims[1] * dims[2];
    let data: Vec<u16> = (0..n).map(|i| (i * 7919 % 65521) as u16).collect();
    Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap()
}

fn same_voxels(a: &Volume, b: &Volume) -> bool {
    a.dims() == b.dims()
        && a.dtype() == b.dtype()
        && (0..a.len()).all(|i| a.voxels().raw_f64(i).to_bits() == b.voxels().raw_f64(i).to_bits())
}

#[test]
fn stack_round_trips_all_types_and_voxel_size() {
    let dims = [13, 7, 5];
    let n = 13 * 7 * 5;
    // anisotropic, and not exact in binary: the description must carry all three exactly
    let spacing = [0.0125, 0.036, 0.05];
    let a = Affine3::from_spacing(spacing);
    let vols = [
        volume_u16(dims, spacing),
        Volume::from_vec(dims, a, (0..n).map(|i| (i % 251) as u8).collect()).unwrap(),
        Volume::from_vec(
            dims,
            a,
            (0..n)
                .map(|i| (((i * 97) % 60000) - 30000) as i16)
                .collect(),
        )
        .unwrap(),
        Volume::from_vec(dims, a, (0..n).map(|i| (i as f32).sin() * 1e3).collect()).unwrap(),
    ];
    for deflate in [false, true] {
        for v in &vols {
            let dir = tempfile::tempdir().unwrap();
            let notes = write_stack_with(v, dir.path(), WriteOptions { deflate }).unwrap();
            assert!(notes.is_empty());
            let back = open_folder(dir.path(), &OpenOptions::default(), &Progress::none()).unwrap();
            assert!(same_voxels(v, &back), "{} deflate={deflate}", v.dtype());
            assert_eq!(back.spacing_mm(), spacing);
            assert!(back.notes.is_empty(), "{:?}", back.notes);
            let file = dir.path().join("m.tiff");
            write_multipage(v, &file, WriteOptions { deflate }).unwrap();
            let back = open_file(&file, &OpenOptions::default(), &Progress::none()).unwrap();
            assert!(same_voxels(v, &back));
            assert_eq!(back.spacing_mm(), spacing);
        }
    }
}

#[test]
fn rescale_is_not_written_but_noted() {
    let mut v = volume_u16([4, 4, 2], [1.0; 3]);
    v.set_rescale(Rescale::new(2.0, -5.0));
    let dir = tempfile::tempdir().unwrap();
    let notes = write_stack(&v, dir.path()).unwrap();
    assert_eq!(notes.len(), 1);
    assert!(
        write_stack(&v, dir.path()).is_err(),
        "refuses a folder with slices"
    );
}

#[test]
fn mismatched_slice_names_both_files() {
    let dir = tempfile::tempdir().unwrap();
    let sub = dir.path().join("a");
    write_stack(&volume_u16([8, 8, 3], [1.0; 3]), &sub).unwrap();
    let other = dir.path().join("b");
    write_stack(&volume_u16([8, 6, 1], [1.0; 3]), &other).unwrap();
    std::fs::rename(other.join("slice_0000.tif"), sub.join("slice_0002.tif")).unwrap();
    let e = open_folder(&sub, &OpenOptions::default(), &Progress::none()).unwrap_err();
    assert!(matches!(e, IoError::Inconsistent { .. }));
    assert!(
        e.to_string()
            .contains("slice_0002.tif: 8x6 u16, expected 8x8 u16 like slice_0000.tif"),
        "{e}"
    );
}

/// A one-page u16 TIFF written with the tiff crate directly: optional resolution (pixels per
/// centimetre) and description, as another program would write them.
fn foreign_tiff(path: &Path, px_per_cm: Option<u32>, description: Option<&str>) {
    use tiff::encoder::{Rational, TiffEncoder, colortype::Gray16};
    let mut enc = TiffEncoder::new(File::create(path).unwrap()).unwrap();
    let mut image = enc.new_image::<Gray16>(4, 3).unwrap();
    if let Some(d) = description {
        image
            .encoder()
            .write_tag(tiff::tags::Tag::ImageDescription, d)
            .unwrap();
    }
    if let Some(r) = px_per_cm {
        image.resolution_unit(tiff::tags::ResolutionUnit::Centimeter);
        image.x_resolution(Rational { n: r, d: 1 });
        image.y_resolution(Rational { n: r, d: 1 });
    }
    image.write_data(&[7u16; 12]).unwrap();
}

#[test]
fn voxel_size_from_caller_then_description_then_resolution() {
    let v = volume_u16([4, 4, 2], [0.1, 0.2, 0.3]);
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("x.tif");
    write_multipage(&v, &f, WriteOptions::default()).unwrap();
    // our own file: the description's full size, no note
    let back = open_file(&f, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(back.spacing_mm(), [0.1, 0.2, 0.3]);
    assert!(back.notes.is_empty(), "{:?}", back.notes);
    // the caller's size wins
    let opts = OpenOptions {
        voxel_size_mm: Some([0.5, 0.6, 0.7]),
        ..OpenOptions::default()
    };
    let back = open_file(&f, &opts, &Progress::none()).unwrap();
    assert_eq!(back.spacing_mm(), [0.5, 0.6, 0.7]);
    assert!(back.notes.is_empty());
    // another program's file: 80 px/cm = 0.125 mm in-plane, z taken equal, with a note
    let g = dir.path().join("foreign.tif");
    foreign_tiff(&g, Some(80), Some("{\"shape\": [3, 4]}"));
    let back = open_file(&g, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(back.spacing_mm(), [0.125; 3]);
    assert_eq!(back.notes.len(), 1);
    assert!(back.notes[0].contains("slice spacing"), "{:?}", back.notes);
    // our key with unusable values: ignored with a note, then the resolution tags
    foreign_tiff(&g, Some(80), Some("{\"voxel_size_mm\": [0.1, -1, 0.2]}"));
    let back = open_file(&g, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(back.spacing_mm(), [0.125; 3]);
    assert_eq!(back.notes.len(), 2, "{:?}", back.notes);
    assert!(back.notes[0].contains("ignored"), "{:?}", back.notes);
    // nothing at all: 1 mm with a note
    foreign_tiff(&g, None, Some("plain text"));
    let back = open_file(&g, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(back.spacing_mm(), [1.0; 3]);
    assert!(back.notes[0].contains("unknown"), "{:?}", back.notes);
}

#[test]
fn cancel_and_limits() {
    let v = volume_u16([16, 16, 8], [1.0; 3]);
    let dir = tempfile::tempdir().unwrap();
    write_stack(&v, dir.path()).unwrap();
    let stop = |done: u64, _total: u64| done < 2;
    let p = Progress::new(Some(&stop));
    let e = open_folder(dir.path(), &OpenOptions::default(), &p).unwrap_err();
    assert!(matches!(e, IoError::Cancelled { .. }), "{e}");
    let opts = OpenOptions {
        limits: Limits {
            max_voxel_bytes: 1000,
            ..Limits::default()
        },
        ..OpenOptions::default()
    };
    let e = open_folder(dir.path(), &opts, &Progress::none()).unwrap_err();
    assert!(matches!(e, IoError::LimitExceeded { .. }), "{e}");
    let opts = OpenOptions {
        limits: Limits {
            max_slices: 4,
            ..Limits::default()
        },
        ..OpenOptions::default()
    };
    let e = open_folder(dir.path(), &opts, &Progress::none()).unwrap_err();
    assert!(matches!(e, IoError::LimitExceeded { .. }), "{e}");
}
