#![allow(
    clippy::float_cmp,
    reason = "round trips and exact decimal parsing must reproduce values bit for bit"
)]

use super::header::{Header, linear_to_quatern, quatern_to_linear};
use super::*;
use crate::geometry::Affine3;
use crate::io::{IoError, Limits, OpenOptions, Progress};
use crate::volume::{DType, Volume};
use nalgebra::{Matrix3, Rotation3, Unit, Vector3};

fn assert_mat_close(a: &Matrix3<f64>, b: &Matrix3<f64>, tol: f64) {
    assert!((a - b).abs().max() < tol, "{a} vs {b}");
}

#[test]
fn quaternion_of_a_known_rotation() {
    // 90° about z: unit quaternion (cos 45°, 0, 0, sin 45°) (nifti1.h METHOD 2 formula)
    let s = std::f64::consts::FRAC_1_SQRT_2;
    let m = quatern_to_linear([0.0, 0.0, s], [2.0, 3.0, 4.0], 1.0);
    let want = Matrix3::new(0.0, -3.0, 0.0, 2.0, 0.0, 0.0, 0.0, 0.0, 4.0);
    assert_mat_close(&m, &want, 1e-12);
}

#[test]
fn quaternion_near_zero_a_is_renormalised() {
    // b²+c²+d² just below 1 (as float32 headers store a 180° turn): nifti1_io.c sets a = 0
    // and renormalises (b, c, d); 180° about z is diag(-1, -1, 1)
    let m = quatern_to_linear([0.0, 0.0, 0.999_999_99], [1.0, 1.0, 1.0], 1.0);
    assert_mat_close(
        &m,
        &Matrix3::from_diagonal(&Vector3::new(-1.0, -1.0, 1.0)),
        1e-12,
    );
    // 180° about x from b = 1 exactly
    let m = quatern_to_linear([1.0, 0.0, 0.0], [1.0, 1.0, 1.0], 1.0);
    assert_mat_close(
        &m,
        &Matrix3::from_diagonal(&Vector3::new(1.0, -1.0, -1.0)),
        1e-12,
    );
}

#[test]
fn qfac_minus_one_flips_k() {
    let a = quatern_to_linear([0.1, 0.2, 0.3], [0.5, 0.6, 0.7], 1.0);
    let b = quatern_to_linear([0.1, 0.2, 0.3], [0.5, 0.6, 0.7], -1.0);
    assert!((a.column(0) - b.column(0)).norm() < 1e-15);
    assert!((a.column(1) - b.column(1)).norm() < 1e-15);
    assert!((a.column(2) + b.column(2)).norm() < 1e-15);
    assert!(b.determinant() < 0.0);
    // pixdim[0] = 0 counts as +1 (nifti1.h: "qfac ... 0 treated as 1")
    let mut h = sample_header();
    h.pixdim[0] = 0.0;
    h.quatern = [0.1, 0.2, 0.3];
    let q0 = h.qform_matrix();
    h.pixdim[0] = 1.0;
    assert_eq!(q0, h.qform_matrix());
}

#[test]
fn quaternion_round_trips_proper_and_improper() {
    for (axis, angle) in [
        (Vector3::new(1.0, 2.0, 3.0), 0.3),
        (Vector3::new(0.0, 0.0, 1.0), 3.1),
        (Vector3::new(1.0, -1.0, 0.5), 2.9),
        (Vector3::new(0.2, 1.0, 0.0), 0.0),
    ] {
        for flip in [1.0, -1.0] {
            let r = Rotation3::from_axis_angle(&Unit::new_normalize(axis), angle);
            let lin = r.matrix() * Matrix3::from_diagonal(&Vector3::new(0.5, 0.25, 2.0 * flip));
            let (q, s, qfac) = linear_to_quatern(&lin).unwrap();
            assert_eq!(qfac, flip);
            assert_mat_close(&quatern_to_linear(q, s, qfac), &lin, 1e-12);
        }
    }
    let shear = Matrix3::new(1.0, 0.2, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0);
    assert!(linear_to_quatern(&shear).is_none());
}

fn sample_header() -> Header {
    let v = Volume::from_vec(
        [2, 2, 2],
        Affine3::from_spacing([1.0, 2.0, 3.0]),
        vec![0u8; 8],
    )
    .unwrap();
    write::header_for(&v)
}

#[test]
fn spatial_units_scale_to_mm() {
    // nifti1.h NIFTI_UNITS_METER 1, _MM 2, _MICRON 3; the time unit bits (8, 16, 24) are ignored
    let mut h = sample_header();
    for (units, want) in [
        (1u8, Some(1000.0)),
        (2, Some(1.0)),
        (3, Some(0.001)),
        (0, None),
        (10, Some(1.0)),
        (11, Some(0.001)),
        (8, None),
    ] {
        h.xyzt_units = units;
        assert_eq!(h.mm_per_unit(), want, "xyzt_units {units}");
    }
}

fn opts() -> OpenOptions {
    OpenOptions {
        limits: Limits {
            max_voxel_bytes: 1 << 20,
            ..Limits::default()
        },
        ..OpenOptions::default()
    }
}

fn sample_volume() -> Volume {
    let lin = Rotation3::from_euler_angles(0.2, -0.4, 1.1).matrix()
        * Matrix3::from_diagonal(&Vector3::new(0.01, 0.02, -0.03));
    let a = Affine3::from_linear_translation(&lin, &Vector3::new(1.0, -2.0, 3.5));
    let data: Vec<i16> = (0..(5 * 4 * 3)).map(|i| i * 100 - 3000).collect();
    Volume::from_vec([5, 4, 3], a, data).unwrap()
}

#[test]
fn writes_and_reads_back() {
    let dir = tempfile::tempdir().unwrap();
    for name in ["a.nii", "a.nii.gz"] {
        let v = sample_volume();
        let p = dir.path().join(name);
        write(&v, &p).unwrap();
        let back = open(&p, &opts(), &Progress::none()).unwrap();
        assert_eq!(back.dims(), v.dims());
        assert_eq!(back.dtype(), DType::I16);
        assert_eq!(back.voxels().raw_f64(7), v.voxels().raw_f64(7));
        let d = (back.world_from_voxel().matrix() - v.world_from_voxel().matrix())
            .abs()
            .max();
        assert!(d < 1e-6, "{d}");
        let h = read_header(&p).unwrap();
        assert_eq!((h.sform_code, h.qform_code, h.vox_offset), (1, 1, 352.0));
        let dq = (h.qform_matrix() - v.world_from_voxel().matrix())
            .abs()
            .max();
        assert!(dq < 1e-6, "{dq}");
    }
}

fn written_bytes() -> Vec<u8> {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("a.nii");
    write(&sample_volume(), &p).unwrap();
    std::fs::read(p).unwrap()
}

fn open_bytes(bytes: &[u8], name: &str) -> Result<Volume, IoError> {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join(name);
    std::fs::write(&p, bytes).unwrap();
    open(&p, &opts(), &Progress::none())
}

#[test]
fn refuses_bad_headers_with_the_reason() {
    let good = written_bytes();
    let err = |f: &dyn Fn(&mut Vec<u8>)| {
        let mut b = good.clone();
        f(&mut b);
        open_bytes(&b, "x.nii").unwrap_err().to_string()
    };
    let e = err(&|b| b.truncate(352 + 50));
    assert!(
        e.contains("expected 120 bytes of voxel data after offset 352, file has 50"),
        "{e}"
    );
    let e = err(&|b| b[40..42].copy_from_slice(&9i16.to_le_bytes()));
    assert!(e.contains("dim[0] is 9"), "{e}");
    let e = err(&|b| b[42..44].copy_from_slice(&(-5i16).to_le_bytes()));
    assert!(e.contains("dim[1] is -5"), "{e}");
    let e = err(&|b| b[70..72].copy_from_slice(&99i16.to_le_bytes()));
    assert!(e.contains("unknown datatype code 99"), "{e}");
    let e = err(&|b| b[70..72].copy_from_slice(&128i16.to_le_bytes()));
    assert!(e.contains("unsupported") && e.contains("RGB"), "{e}");
    let e = err(&|b| b[80..84].copy_from_slice(&f32::NAN.to_le_bytes()));
    assert!(e.contains("pixdim"), "{e}");
    let e = err(&|b| b[280..284].copy_from_slice(&f32::INFINITY.to_le_bytes()));
    assert!(e.contains("sform"), "{e}");
    let e = err(&|b| b[108..112].copy_from_slice(&1.0e6f32.to_le_bytes()));
    assert!(e.contains("beyond the end of the file"), "{e}");
    let e = err(&|b| b[344..348].copy_from_slice(b"xyz\0"));
    assert!(e.contains("no NIfTI magic"), "{e}");
    let e = err(&|b| {
        b[42..44].copy_from_slice(&30000i16.to_le_bytes());
        b[44..46].copy_from_slice(&30000i16.to_le_bytes());
    });
    assert!(e.contains("exceeds Sutura's limit"), "{e}");
}

#[test]
fn cancel_is_honoured() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("a.nii.gz");
    write(&sample_volume(), &p).unwrap();
    let stop = |_: u64, _: u64| false;
    let progress = Progress::new(Some(&stop));
    assert!(matches!(
        open(&p, &opts(), &progress),
        Err(IoError::Cancelled { .. })
    ));
    let seen = std::sync::Mutex::new(Vec::new());
    let record = |d: u64, t: u64| {
        seen.lock().unwrap().push((d, t));
        true
    };
    let progress = Progress::new(Some(&record));
    open(&p, &opts(), &progress).unwrap();
    assert_eq!(seen.lock().unwrap().last(), Some(&(120, 120)));
}

/// Mutates every header byte to several values and truncates at many lengths, plain and
/// gzipped: every outcome must be Ok or Err, never a panic (fuzz-like, common practice).
#[test]
fn mutated_and_truncated_headers_never_panic() {
    let good = written_bytes();
    let dir = tempfile::tempdir().unwrap();
    let plain = dir.path().join("m.nii");
    let gz = dir.path().join("m.nii.gz");
    let mut outcomes = [0usize; 2];
    let mut try_bytes = |b: &[u8]| {
        std::fs::write(&plain, b).unwrap();
        outcomes[usize::from(open(&plain, &opts(), &Progress::none()).is_ok())] += 1;
    };
    for pos in 0..352 {
        for val in [
            0x00u8,
            0xff,
            0x80,
            0x7f,
            good[pos] ^ 0x01,
            good[pos].wrapping_add(1),
        ] {
            let mut b = good.clone();
            b[pos] = val;
            try_bytes(&b);
        }
    }
    for len in (0..good.len()).step_by(3) {
        try_bytes(&good[..len]);
    }
    assert!(outcomes[0] > 100 && outcomes[1] > 100, "{outcomes:?}");
    // gzip: truncated and bit-flipped compressed streams
    let dir2 = tempfile::tempdir().unwrap();
    let src = dir2.path().join("s.nii.gz");
    write(&sample_volume(), &src).unwrap();
    let z = std::fs::read(&src).unwrap();
    for len in 0..z.len() {
        std::fs::write(&gz, &z[..len]).unwrap();
        assert!(
            open(&gz, &opts(), &Progress::none()).is_err(),
            "truncated gzip at {len} read"
        );
    }
    for pos in (10..z.len()).step_by(2) {
        let mut b = z.clone();
        b[pos] ^= 0x55;
        std::fs::write(&gz, &b).unwrap();
        let _ = open(&gz, &opts(), &Progress::none());
    }
}

#[test]
fn gzip_over_many_chunks_reads_cancels_and_refuses_truncation() {
    // 24 MiB of voxels: several chunks of the inflater / page-toucher pipeline
    let dims = [1024, 1024, 12];
    let data: Vec<u16> = (0..dims[0] * dims[1] * dims[2])
        .map(|i| (i % 65_521) as u16)
        .collect();
    let v = Volume::from_vec(dims, Affine3::from_spacing([0.1; 3]), data).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("big.nii.gz");
    write(&v, &p).unwrap();
    let opts = OpenOptions::default();
    let back = open(&p, &opts, &Progress::none()).unwrap();
    assert_eq!(
        back.voxels().raw_f64(12_345_678),
        v.voxels().raw_f64(12_345_678)
    );
    assert_eq!(
        back.voxels().raw_f64(v.len() - 1),
        v.voxels().raw_f64(v.len() - 1)
    );
    // cancel after the first chunk
    let stop = |done: u64, _: u64| done < (8 << 20);
    let e = open(&p, &opts, &Progress::new(Some(&stop))).unwrap_err();
    assert!(matches!(e, IoError::Cancelled { .. }), "{e}");
    // cut in the middle of the compressed stream
    let z = std::fs::read(&p).unwrap();
    std::fs::write(&p, &z[..z.len() / 2]).unwrap();
    let e = open(&p, &opts, &Progress::none()).unwrap_err();
    assert!(matches!(e, IoError::Corrupt { .. }), "{e}");
}

/// The size a front end weighs against its budget comes from the header alone: a file whose
/// voxels are missing altogether still gives it, and a type narrowed when read counts 4 bytes
/// (at most `f32`) per voxel; datatype codes from nifti1.h (`DT_INT32` 8, `DT_FLOAT64` 64).
#[test]
fn header_voxel_bytes_reads_no_voxel() {
    let good = written_bytes();
    let dir = tempfile::tempdir().unwrap();
    let at = |name: &str, f: &dyn Fn(&mut Vec<u8>)| {
        let mut b = good.clone();
        f(&mut b);
        let p = dir.path().join(name);
        std::fs::write(&p, &b).unwrap();
        p
    };
    let v = sample_volume();
    let n: u64 = v.dims().iter().map(|&d| d as u64).product();
    let whole = at("whole.nii", &|_| {});
    assert_eq!(
        header_voxel_bytes(&whole).unwrap(),
        n * v.dtype().size_bytes() as u64
    );
    // 2400³ claimed, no voxel data at all
    let big = at("big.nii", &|b| {
        b.truncate(352);
        for a in 0..3 {
            b[42 + 2 * a..44 + 2 * a].copy_from_slice(&2400i16.to_le_bytes());
        }
    });
    assert_eq!(
        header_voxel_bytes(&big).unwrap(),
        2400u64.pow(3) * v.dtype().size_bytes() as u64
    );
    for code in [8i16, 64] {
        let p = at(&format!("t{code}.nii"), &|b| {
            b[70..72].copy_from_slice(&code.to_le_bytes());
        });
        assert_eq!(header_voxel_bytes(&p).unwrap(), n * 4, "datatype {code}");
    }
}
