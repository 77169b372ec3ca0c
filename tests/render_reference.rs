//! Slicing and trilinear sampling checked against `SciPy`.
//!
//! Reference: `scipy.ndimage.map_coordinates(input, coords, order=1)` (`SciPy` ndimage,
//! first-order spline = trilinear interpolation between voxel centres), evaluated by
//! `tests/python/render_map_coordinates.py` at the same voxel coordinates, inside the hull of
//! voxel centres `[0, n - 1]` where the edge mode plays no part. `SciPy`'s answers are the
//! committed fixtures `render_*` (see `tests/common`): the volume comes from a seeded generator
//! and the points from fixed planes, so they are the same on every run.

mod common;

use nalgebra::{Matrix3, Rotation3, Vector3};
use rand::{Rng, SeedableRng};
use std::io::Write;
use sutura_core::geometry::{Affine3, Plane, VoxelPoint, WorldPoint};
use sutura_core::render::slice::{Interpolation, SliceGeometry, render_slice};
use sutura_core::volume::Volume;

const DIMS: [usize; 3] = [17, 13, 9];

/// A random u16 volume with anisotropic voxels and a rotated, shifted world frame, written
/// to `dir/vol.raw` as little-endian, i fastest.
fn random_volume(dir: &std::path::Path) -> Volume {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2024);
    let n = DIMS[0] * DIMS[1] * DIMS[2];
    let data: Vec<u16> = (0..n).map(|_| rng.random_range(0..60000)).collect();
    let mut f = std::fs::File::create(dir.join("vol.raw")).unwrap();
    for v in &data {
        f.write_all(&v.to_le_bytes()).unwrap();
    }
    let rot = Rotation3::from_euler_angles(0.3, -0.2, 0.7);
    let lin: Matrix3<f64> =
        rot.matrix() * Matrix3::from_diagonal(&Vector3::new(0.021, 0.034, 0.057));
    let w = Affine3::from_linear_translation(&lin, &Vector3::new(-1.0, 2.5, 0.3));
    Volume::from_vec(DIMS, w, data).unwrap()
}

fn reference_values(name: &str, dir: &std::path::Path, points: &[VoxelPoint]) -> Vec<f64> {
    let coords = dir.join("coords.f64");
    let mut f = std::fs::File::create(&coords).unwrap();
    for p in points {
        for a in 0..3 {
            f.write_all(&p.0[a].to_le_bytes()).unwrap();
        }
    }
    drop(f);
    let vol = dir.join("vol.raw");
    let d = DIMS.map(|n| n.to_string());
    let out = common::Reference::new(name, "render_map_coordinates.py")
        .dir("tmp", dir)
        .path_arg(&vol)
        .arg("<u2")
        .arg(d[0].as_str())
        .arg(d[1].as_str())
        .arg(d[2].as_str())
        .path_arg(&coords)
        .input(&vol)
        .input(&coords)
        .run();
    out["values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect()
}

fn in_hull(p: &VoxelPoint) -> bool {
    (0..3).all(|a| p.0[a] >= 0.0 && p.0[a] <= DIMS[a] as f64 - 1.0)
}

fn close(got: f64, want: f64) -> bool {
    (got - want).abs() <= 1e-4 * want.abs().max(1.0)
}

#[test]
fn oblique_slices_match_map_coordinates() {
    let dir = tempfile::tempdir().unwrap();
    let v = random_volume(dir.path());
    let planes = [
        Plane::from_normal(
            v.centre_world(),
            Vector3::new(0.3, -0.4, 0.87),
            Vector3::z(),
        )
        .unwrap(),
        Plane::from_normal(v.centre_world(), Vector3::new(-0.9, 0.1, 0.2), Vector3::y()).unwrap(),
        Plane::through_points(
            v.voxel_to_world(VoxelPoint::new(1.2, 3.4, 0.5)),
            v.voxel_to_world(VoxelPoint::new(15.0, 2.0, 7.3)),
            v.voxel_to_world(VoxelPoint::new(4.0, 11.9, 6.1)),
        )
        .unwrap(),
    ];
    for (n, plane) in planes.iter().enumerate() {
        // pixels finer than the voxels so that most pixels sit between centres
        let g = SliceGeometry::covering(&v, plane, Some(0.013)).unwrap();
        let img = render_slice(&v, &g, Interpolation::Trilinear, None).unwrap();
        let mut points = Vec::new();
        let mut got = Vec::new();
        for r in 0..g.height {
            for c in 0..g.width {
                // the pixel centre mapped through the full affine, independently of the
                // renderer's incremental stepping
                let p = v.world_to_voxel(g.pixel_world(c as f64, r as f64));
                if in_hull(&p) {
                    points.push(p);
                    got.push(f64::from(img.get(c, r)));
                }
            }
        }
        assert!(points.len() > 200, "only {} pixels inside", points.len());
        let want = reference_values(&format!("render_oblique_slice_{n}"), dir.path(), &points);
        assert_eq!(want.len(), got.len());
        let bad: Vec<_> = got
            .iter()
            .zip(&want)
            .enumerate()
            .filter(|(_, (g, w))| !close(**g, **w))
            .take(5)
            .collect();
        assert!(
            bad.is_empty(),
            "mismatches (index, (sutura, scipy)): {bad:?}"
        );
    }
}

#[test]
fn volume_trilinear_matches_map_coordinates() {
    let dir = tempfile::tempdir().unwrap();
    let v = random_volume(dir.path());
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let mut points: Vec<VoxelPoint> = (0..2000)
        .map(|_| {
            VoxelPoint::new(
                rng.random_range(0.0..=(DIMS[0] - 1) as f64),
                rng.random_range(0.0..=(DIMS[1] - 1) as f64),
                rng.random_range(0.0..=(DIMS[2] - 1) as f64),
            )
        })
        .collect();
    // the hull's faces and corners, where an off-by-one would show
    points.push(VoxelPoint::new(0.0, 0.0, 0.0));
    points.push(VoxelPoint::new(16.0, 12.0, 8.0));
    points.push(VoxelPoint::new(16.0, 0.5, 8.0));
    points.push(VoxelPoint::new(3.0, 12.0, 0.25));
    let want = reference_values("render_trilinear_points", dir.path(), &points);
    for (p, w) in points.iter().zip(&want) {
        let world: WorldPoint = v.voxel_to_world(*p);
        let via_world = v.sample_trilinear(world).unwrap();
        let via_voxel = v.sample_trilinear_voxel(*p).unwrap();
        assert!(
            close(via_voxel, *w),
            "at {p:?}: sutura {via_voxel}, scipy {w}"
        );
        assert!(
            close(via_world, *w),
            "at {p:?} via world: sutura {via_world}, scipy {w}"
        );
    }
}
