use super::*;
use crate::io::Limits;
use crate::volume::Rescale;

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
    let spacing = [0.0125, 0.0125, 0.0125];
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
            for (s, t) in back.spacing_mm().iter().zip(spacing) {
                assert!((s - t).abs() < 1e-9, "{s} vs {t}");
            }
            let file = dir.path().join("m.tiff");
            write_multipage(v, &file, WriteOptions { deflate }).unwrap();
            let back = open_file(&file, &OpenOptions::default(), &Progress::none()).unwrap();
            assert!(same_voxels(v, &back));
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

#[test]
fn unknown_voxel_size_is_noted_and_given_one_wins() {
    let v = volume_u16([4, 4, 2], [1.0; 3]);
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("x.tif");
    write_multipage(&v, &f, WriteOptions::default()).unwrap();
    let opts = OpenOptions {
        voxel_size_mm: Some([0.1, 0.2, 0.3]),
        ..OpenOptions::default()
    };
    let back = open_file(&f, &opts, &Progress::none()).unwrap();
    assert!((back.spacing_mm()[2] - 0.3).abs() < 1e-12);
    assert!(back.notes.is_empty());
    // 1 mm per pixel is 10 px/cm: plausible, so used with a note about z
    let back = open_file(&f, &OpenOptions::default(), &Progress::none()).unwrap();
    assert_eq!(back.notes.len(), 1);
    assert!(back.notes[0].contains("slice spacing"));
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
