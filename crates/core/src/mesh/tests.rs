use super::march::{extract, extract_in_slabs};
use super::*;
use crate::geometry::Affine3;
use statrs::function::erf::erf;

/// The indicator of a ball of radius `big_r` convolved with an isotropic Gaussian of standard
/// deviation `sigma`, at distance `r` from the centre (closed form):
/// `f(r) = ½[erf((R−r)/σ√2) + erf((R+r)/σ√2)] − σ/(r√(2π)) [e^{−(R−r)²/2σ²} − e^{−(R+r)²/2σ²}]`.
/// Source: the probability that a normal vector `N(p, σ²I)` with `|p| = r` falls in the ball,
/// i.e. the CDF of the noncentral chi-square distribution with 3 degrees of freedom and
/// noncentrality `(r/σ)²` at `(R/σ)²` (Johnson, Kotz and Balakrishnan, Continuous Univariate
/// Distributions vol. 2, ch. 29, the closed form for odd degrees of freedom); the radial
/// integral is derived step by step beside the picking tests (`landmarks::pick`), which check
/// it against `scipy.stats.ncx2.cdf`.
fn blurred_ball(r: f64, big_r: f64, sigma: f64) -> f64 {
    let s2 = sigma * std::f64::consts::SQRT_2;
    let erfs = 0.5 * (erf((big_r - r) / s2) + erf((big_r + r) / s2));
    let e = |x: f64| (-(x * x) / (2.0 * sigma * sigma)).exp();
    if r < 1e-9 {
        return erfs - 2.0 * big_r / (sigma * (2.0 * std::f64::consts::PI).sqrt()) * e(big_r);
    }
    erfs - sigma / (r * (2.0 * std::f64::consts::PI).sqrt()) * (e(big_r - r) - e(big_r + r))
}

/// Bisection for the root of `g` in `[lo, hi]`.
fn root(mut lo: f64, mut hi: f64, g: impl Fn(f64) -> f64) -> f64 {
    let neg_lo = g(lo) < 0.0;
    assert_ne!(neg_lo, g(hi) < 0.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if (g(mid) < 0.0) == neg_lo {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

const R: f64 = 1.2;
const SIGMA: f64 = 0.07;
const AIR: f64 = 1000.0;
const BONE: f64 = 21000.0;

/// A blurred ball of radius `R` mm on a grid of 0.05 × 0.06 × 0.075 mm voxels, its centre off
/// the grid, as f32 intensities from `AIR` to `BONE`.
fn ball_volume() -> (Volume, [f64; 3]) {
    let spacing = [0.05, 0.06, 0.075];
    let centre = [1.6132, 1.5871, 1.6419];
    let dims = [65, 54, 44];
    let mut data = Vec::with_capacity(dims.iter().product());
    for k in 0..dims[2] {
        for j in 0..dims[1] {
            for i in 0..dims[0] {
                let p = [
                    i as f64 * spacing[0],
                    j as f64 * spacing[1],
                    k as f64 * spacing[2],
                ];
                let r = ((p[0] - centre[0]).powi(2)
                    + (p[1] - centre[1]).powi(2)
                    + (p[2] - centre[2]).powi(2))
                .sqrt();
                data.push((AIR + (BONE - AIR) * blurred_ball(r, R, SIGMA)) as f32);
            }
        }
    }
    (
        Volume::from_vec(dims, Affine3::from_spacing(spacing), data).unwrap(),
        centre,
    )
}

#[test]
fn blurred_ball_area_and_volume_match_the_iso50_sphere() {
    let (volume, centre) = ball_volume();
    // ISO-50: halfway between air and bone; the radius where the profile crosses ½ lies a
    // little inside R because of the curvature term
    let r50 = root(R - 4.0 * SIGMA, R + 4.0 * SIGMA, |r| {
        blurred_ball(r, R, SIGMA) - 0.5
    });
    assert!(r50 < R && r50 > R - 0.05, "r50 {r50}");
    let iso = 0.5 * (AIR + BONE);
    let field = IntensityField {
        volume: &volume,
        iso,
        outside: AIR,
        within: None,
    };
    let mesh = extract(&field, volume.world_from_voxel());
    let rep = mesh.report();
    let area = 4.0 * std::f64::consts::PI * r50 * r50;
    let vol = 4.0 / 3.0 * std::f64::consts::PI * r50.powi(3);
    let (ea, ev) = (rep.area_mm2 / area - 1.0, rep.volume_mm3 / vol - 1.0);
    eprintln!(
        "r50 {r50:.5} mm; area {:.5} vs {area:.5} ({:+.4} %), volume {:.5} vs {vol:.5} ({:+.4} %), {} triangles",
        rep.area_mm2,
        100.0 * ea,
        rep.volume_mm3,
        100.0 * ev,
        rep.triangles
    );
    assert!(ea.abs() < 0.003, "area off by {:.4} %", 100.0 * ea);
    assert!(ev.abs() < 0.003, "volume off by {:.4} %", 100.0 * ev);
    assert!(rep.closed, "{rep:?}");
    assert_eq!(rep.pieces, 1);
    assert_eq!(rep.euler_characteristic, 2);
    // every vertex on the sphere of radius r50 to within a tenth of the smallest voxel side
    let worst = mesh
        .vertices
        .iter()
        .map(|v| {
            (((v[0] - centre[0]).powi(2) + (v[1] - centre[1]).powi(2) + (v[2] - centre[2]).powi(2))
                .sqrt()
                - r50)
                .abs()
        })
        .fold(0.0, f64::max);
    assert!(worst < 0.005, "worst radial error {worst} mm");
}

#[test]
fn slabs_stitch_into_the_same_mesh() {
    let (volume, _) = ball_volume();
    let field = IntensityField {
        volume: &volume,
        iso: 0.5 * (AIR + BONE),
        outside: AIR,
        within: None,
    };
    let whole = extract_in_slabs(&field, volume.world_from_voxel(), 1000);
    for layers in [1, 3, 7] {
        let cut = extract_in_slabs(&field, volume.world_from_voxel(), layers);
        assert_eq!(cut.vertices.len(), whole.vertices.len(), "{layers}");
        assert_eq!(cut.triangles.len(), whole.triangles.len());
        let (a, b) = (cut.report(), whole.report());
        assert!(a.closed);
        assert!((a.area_mm2 - b.area_mm2).abs() < 1e-9 * b.area_mm2);
        assert!((a.volume_mm3 - b.volume_mm3).abs() < 1e-9 * b.volume_mm3);
    }
}

#[test]
fn a_label_closes_the_surface_where_it_cuts_material() {
    // a solid block of bone filling the grid; the label keeps the half i < 10
    let dims = [20, 12, 12];
    let volume = Volume::from_vec(
        dims,
        Affine3::from_spacing([0.1; 3]),
        vec![BONE as f32; 20 * 144],
    )
    .unwrap();
    let half = BitMask::from_fn(dims, |i, _, _| i < 10);
    let field = IntensityField {
        volume: &volume,
        iso: 0.5 * (AIR + BONE),
        outside: AIR,
        within: Some(&half),
    };
    let rep = extract(&field, volume.world_from_voxel()).report();
    assert!(rep.closed);
    assert_eq!(rep.pieces, 1);
    assert_eq!(rep.euler_characteristic, 2);
    // the surface closes halfway between the last label voxel and the next (i = 9.5) and
    // halfway to the padding (−0.5): a box of 1 × 1.2 × 1.2 mm with its edges and corners
    // bevelled by half a voxel (marching cubes cuts the corners of cells)
    let full = 1.0 * 1.2 * 1.2;
    // each of the 12 edges loses a prism of cross-section ½·(½ voxel)² = 0.125 · 0.01 mm²
    let edges = 4.0 * (1.0 + 1.2 + 1.2) * 0.125 * 0.01;
    assert!(
        rep.volume_mm3 < full && rep.volume_mm3 > full - 1.2 * edges,
        "{}",
        rep.volume_mm3
    );
    // the label's own voxels give the same surface here
    let rep2 = extract(&MaskField { mask: &half }, volume.world_from_voxel()).report();
    assert!((rep2.volume_mm3 - rep.volume_mm3).abs() < 1e-12);
    assert!((rep2.area_mm2 - rep.area_mm2).abs() < 1e-12);
}

#[test]
fn mirrored_frames_keep_normals_outward() {
    let dims = [6, 6, 6];
    let m = BitMask::from_fn(dims, |i, j, k| {
        (1..5).contains(&i) && (1..5).contains(&j) && (1..5).contains(&k)
    });
    let flip = Affine3::from_spacing([-0.5, 0.5, 0.5]);
    let rep = extract(&MaskField { mask: &m }, &flip).report();
    let plain = extract(&MaskField { mask: &m }, &Affine3::from_spacing([0.5; 3])).report();
    assert!(plain.volume_mm3 > 0.0);
    assert!(
        (rep.volume_mm3 - plain.volume_mm3).abs() < 1e-12,
        "{}",
        rep.volume_mm3
    );
    assert!(rep.closed);
}

#[test]
fn smoothing_keeps_the_volume_and_decimation_the_shape() {
    // a voxel ball (mask field): staircase surface
    let dims = [40, 40, 40];
    let m = BitMask::from_fn(dims, |i, j, k| {
        (i as f64 - 19.5).powi(2) + (j as f64 - 19.5).powi(2) + (k as f64 - 19.5).powi(2) < 144.0
    });
    let mut mesh = extract(&MaskField { mask: &m }, &Affine3::identity());
    let before = mesh.report();
    smooth::taubin(&mut mesh, 20);
    let after = mesh.report();
    // the true ball: 4/3 π 12³ = 7238; the staircase is close; Taubin keeps it within 1 %
    assert!(
        (after.volume_mm3 / before.volume_mm3 - 1.0).abs() < 0.01,
        "{before:?} {after:?}"
    );
    // and the area drops towards the sphere's (the staircase's is larger)
    let sphere = 4.0 * std::f64::consts::PI * 144.0;
    assert!((after.area_mm2 - sphere).abs() < (before.area_mm2 - sphere).abs());
    let n = mesh.triangles.len();
    let err = mesh.decimate(n / 5, 0.5);
    let dec = mesh.report();
    assert!(
        dec.triangles <= n / 5 + 2 && dec.triangles > n / 10,
        "{}",
        dec.triangles
    );
    assert!(
        dec.closed && dec.pieces == 1 && dec.euler_characteristic == 2,
        "{dec:?}"
    );
    assert!(
        (dec.volume_mm3 / after.volume_mm3 - 1.0).abs() < 0.01,
        "decimated {} vs {}",
        dec.volume_mm3,
        after.volume_mm3
    );
    assert!(err <= 0.5);
}

/// The edge checks of the report on meshes small enough to count by hand: one triangle (three
/// boundary edges), two triangles sharing an edge the same way round (four, the shared one
/// inner), the same triangle twice (each edge used twice in one direction: bad), and a
/// tetrahedron (closed; Euler characteristic 4 − 6 + 4 = 2).
#[test]
fn the_report_counts_boundary_bad_and_all_edges() {
    let v = vec![
        [0.0, 0.0, 0.0],
        [1.0, 0.0, 0.0],
        [0.0, 1.0, 0.0],
        [0.0, 0.0, 1.0],
    ];
    let report = |triangles: Vec<[u32; 3]>| {
        Mesh {
            vertices: v.clone(),
            triangles,
        }
        .report()
    };
    let one = report(vec![[0, 1, 2]]);
    assert_eq!(
        (one.boundary_edges, one.bad_edges, one.closed),
        (3, 0, false)
    );
    let two = report(vec![[0, 1, 2], [2, 1, 3]]);
    assert_eq!((two.boundary_edges, two.bad_edges), (4, 0));
    assert_eq!(two.euler_characteristic, 4 - 5 + 2);
    let twice = report(vec![[0, 1, 2], [0, 1, 2]]);
    assert_eq!((twice.boundary_edges, twice.bad_edges), (0, 3));
    assert!(!twice.closed);
    let tetra = report(vec![[0, 2, 1], [0, 1, 3], [1, 2, 3], [0, 3, 2]]);
    assert_eq!((tetra.boundary_edges, tetra.bad_edges), (0, 0));
    assert!(tetra.closed);
    assert_eq!(tetra.euler_characteristic, 2);
    assert_eq!(tetra.pieces, 1);
    assert!(
        (tetra.volume_mm3 - 1.0 / 6.0).abs() < 1e-12,
        "{}",
        tetra.volume_mm3
    );
}
