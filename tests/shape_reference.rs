//! Shape statistics checked against outside references: scipy's Procrustes routines, the
//! closed-form planar full Procrustes mean, Kendall's triangle facts and the project's batched
//! numpy GPA; plus property tests of the invariances the theory guarantees. The Python answers
//! are the committed fixtures `shape_*` (see `tests/common`); the scripts generate their own
//! data from seeded generators.

mod common;

use nalgebra::DMatrix;
use proptest::prelude::*;
use serde_json::Value;
use sutura_core::shape::distance::{
    Distance, distance_matrix, full_procrustes_distance, partial_procrustes_distance,
    procrustes_angle,
};
use sutura_core::shape::gpa::rotation_onto;
use sutura_core::shape::pca::pca;
use sutura_core::shape::tangent::tangent_coordinates;
use sutura_core::shape::{Fit, GpaOptions, Sample, gpa, opa};

fn mat(v: &Value) -> DMatrix<f64> {
    let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).unwrap();
    DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j])
}

fn f(v: &Value) -> f64 {
    v.as_f64().unwrap()
}

#[test]
fn scipy_procrustes_docstring_example_is_a_mirror_image() {
    // reference: scipy.spatial.procrustes docstring example (scipy/spatial/_procrustes.py);
    // scipy reaches disparity 0 only by reflecting (its rotation has det −1).
    let r = common::Reference::new("shape_scipy", "shape_scipy.py").run();
    let c = &r["procrustes_doc"];
    let (a, b) = (mat(&c["a"]), mat(&c["b"]));
    assert!(f(&c["scipy_disparity"]) < 1e-12);
    assert!(f(&c["scipy_det"]) < 0.0);
    let d_f = full_procrustes_distance(&a, &b).unwrap();
    // Ours, with reflections forbidden, is strictly larger than scipy's …
    assert!(d_f * d_f > f(&c["scipy_disparity"]) + 0.1, "{d_f}");
    // … and equals the proper-rotation value of the complex formula (Dryden & Mardia 2016 eq. 3.9).
    assert!((d_f * d_f - f(&c["complex_df2"])).abs() < 1e-12);
    let fit = opa(&a, &b, true).unwrap();
    assert!((fit.rotation.determinant() - 1.0).abs() < 1e-12);
}

#[test]
fn scipy_orthogonal_procrustes_docstring_and_3d() {
    // reference: scipy.linalg.orthogonal_procrustes docstring example (A, fliplr(A)). With two
    // points a proper rotation also maps A exactly onto B, so the residual and the singular value
    // sum (scipy's `scale`) agree although scipy's R is a reflection.
    let r = common::Reference::new("shape_scipy", "shape_scipy.py").run();
    let c = &r["orthogonal_doc"];
    let (a, b) = (mat(&c["a"]), mat(&c["b"]));
    assert!(f(&c["det"]) < 0.0);
    let (rot, trace) = rotation_onto(&a, &b).unwrap();
    assert!((rot.determinant() - 1.0).abs() < 1e-12);
    assert!((&a * &rot - &b).norm() < 1e-12 + f(&c["residual"]));
    assert!((trace - f(&c["scale"])).abs() < 1e-12);
    // 3D case whose optimum is proper: the same rotation as scipy.
    let c = &r["orthogonal_3d"];
    assert!(f(&c["det"]) > 0.0);
    let (rot, trace) = rotation_onto(&mat(&c["a"]), &mat(&c["b"])).unwrap();
    assert!((rot - mat(&c["r"])).norm() < 1e-12);
    assert!((trace - f(&c["scale"])).abs() < 1e-12);
}

#[test]
fn scipy_procrustes_when_reflection_does_not_matter() {
    // reference: scipy.spatial.procrustes; its disparity is 1 − (Σσ)² = sin²ρ = d_F² for
    // standardised inputs when the optimal orthogonal matrix is a rotation (Dryden & Mardia
    // 2016, §3.3: d_F = sin ρ).
    let r = common::Reference::new("shape_scipy", "shape_scipy.py").run();
    for c in r["proper_cases"].as_array().unwrap() {
        assert!(f(&c["scipy_det"]) > 0.0);
        let (a, b) = (mat(&c["a"]), mat(&c["b"]));
        let d_f = full_procrustes_distance(&a, &b).unwrap();
        assert!(
            (d_f * d_f - f(&c["scipy_disparity"])).abs() < 1e-12,
            "{} vs {}",
            d_f * d_f,
            f(&c["scipy_disparity"])
        );
        let fit = opa(&a, &b, true).unwrap();
        // Residual of OPA in the reference's units: ‖a_c‖ · sin ρ.
        let ca = sutura_core::shape::centroid_size(&a);
        assert!((fit.distance - ca * d_f).abs() < 1e-10);
        if let Some(z) = c.get("complex_df2") {
            assert!((d_f * d_f - f(z)).abs() < 1e-12);
        }
    }
    // A chiral 3D shape and its mirror: scipy reflects back to ~0, we may not.
    let c = &r["mirror_3d"];
    assert!(f(&c["scipy_disparity"]) < 1e-20);
    let d_f = full_procrustes_distance(&mat(&c["a"]), &mat(&c["b"])).unwrap();
    assert!(d_f * d_f > f(&c["scipy_disparity"]) + 0.05, "{d_f}");
}

#[test]
fn full_gpa_matches_the_closed_form_planar_mean() {
    // reference: Kent 1994 (J. R. Stat. Soc. B 56:285–299); Dryden & Mardia 2016 §6.2: the planar
    // full Procrustes mean is the dominant eigenvector of Σ zᵢzᵢ*/(zᵢ*zᵢ).
    let r = common::Reference::new("shape_kent", "shape_kent.py").run();
    let configs: Vec<DMatrix<f64>> = r["configs"].as_array().unwrap().iter().map(mat).collect();
    let s = Sample::from_configs(&configs).unwrap();
    let g = gpa(
        &s,
        &GpaOptions {
            fit: Fit::Full,
            tolerance: 1e-13,
            ..GpaOptions::default()
        },
    )
    .unwrap();
    assert!(g.converged);
    let closed = mat(&r["mean"]);
    let rho = procrustes_angle(&g.mean, &closed).unwrap();
    assert!(
        rho < 1e-7,
        "full GPA mean is {rho} rad from the closed form"
    );
    // The largest eigenvalue is Σ cos²ρᵢ to the mean (same references), i.e. n − Σ d_F².
    let sum_df2: f64 = configs
        .iter()
        .map(|c| full_procrustes_distance(c, &closed).unwrap().powi(2))
        .sum();
    assert!((configs.len() as f64 - sum_df2 - f(&r["eigenvalue"])).abs() < 1e-9);
    // Triangles: full distance by the complex formula d_F² = 1 − |z*w|² (Dryden & Mardia eq. 3.9).
    for t in r["triangles"].as_array().unwrap() {
        let d = full_procrustes_distance(&mat(&t["a"]), &mat(&t["b"])).unwrap();
        assert!((d * d - f(&t["df2"])).abs() < 1e-12);
    }
}

#[test]
fn numpy_batched_gpa_agrees() {
    // reference: the batched numpy GPA of the project's baseline kit (algorithm copied in
    // tests/python/shape_gpa_numpy.py from /work/shared/bench/py_baseline.py gpa_vectorized).
    for (n, l, m) in [("40", "12", "3"), ("25", "9", "2")] {
        let r = common::Reference::new(
            &format!("shape_gpa_numpy_{n}x{l}x{m}"),
            "shape_gpa_numpy.py",
        )
        .arg(n)
        .arg(l)
        .arg(m)
        .run();
        let input: Vec<DMatrix<f64>> = r["input"].as_array().unwrap().iter().map(mat).collect();
        let g = gpa(
            &Sample::from_configs(&input).unwrap(),
            &GpaOptions::default(),
        )
        .unwrap();
        assert_eq!(g.iterations as u64, r["iterations"].as_u64().unwrap());
        assert!((g.mean.clone() - mat(&r["mean"])).abs().max() < 1e-9);
        for (i, a) in r["aligned"].as_array().unwrap().iter().enumerate() {
            assert!((g.aligned.config(i) - mat(a)).abs().max() < 1e-9);
        }
    }
}

#[test]
fn kendall_triangle_facts() {
    // Kendall 1984 (Bull. London Math. Soc. 16:81–121); Dryden & Mardia 2016 §4.3.4: the shape
    // space of labelled planar triangles is a sphere of radius 1/2 with the equilateral triangle
    // and its reflection at the poles; ρ never exceeds π/2, attained between the poles.
    let h = 3f64.sqrt() / 2.0;
    let eq = DMatrix::from_row_slice(3, 2, &[0.0, 0.0, 1.0, 0.0, 0.5, h]);
    let re = DMatrix::from_row_slice(3, 2, &[0.0, 0.0, 1.0, 0.0, 0.5, -h]);
    assert!((procrustes_angle(&eq, &re).unwrap() - std::f64::consts::FRAC_PI_2).abs() < 1e-12);
    // Every triangle lies within ρ ≤ π/2 of every other; and ρ(T, eq) + ρ(T, re) = π/2 because
    // the poles are antipodal on the sphere (great-circle distance between poles is π/2 in ρ).
    let mut state = 1u64;
    let mut next = || {
        state = state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1);
        (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    for _ in 0..50 {
        let t = DMatrix::from_fn(3, 2, |_, _| next());
        let a = procrustes_angle(&t, &eq).unwrap();
        let b = procrustes_angle(&t, &re).unwrap();
        assert!(a <= std::f64::consts::FRAC_PI_2 + 1e-12);
        assert!(
            (a + b - std::f64::consts::FRAC_PI_2).abs() < 1e-9,
            "{a} + {b}"
        );
    }
}

fn config_strategy(k: usize, m: usize) -> impl Strategy<Value = DMatrix<f64>> {
    prop::collection::vec(-10.0f64..10.0, k * m)
        .prop_map(move |v| DMatrix::from_row_slice(k, m, &v))
}

fn rotation_strategy(m: usize) -> impl Strategy<Value = DMatrix<f64>> {
    (-3.2f64..3.2, -3.2f64..3.2, -3.2f64..3.2).prop_map(move |(a, b, c)| {
        if m == 2 {
            DMatrix::from_row_slice(2, 2, &[a.cos(), -a.sin(), a.sin(), a.cos()])
        } else {
            let r = nalgebra::Rotation3::from_euler_angles(a, b, c);
            DMatrix::from_fn(3, 3, |i, j| r[(i, j)])
        }
    })
}

fn well_spread(c: &DMatrix<f64>) -> bool {
    sutura_core::shape::centroid_size(c) > 1.0
}

fn check_invariance(
    a: &DMatrix<f64>,
    b: &DMatrix<f64>,
    r: &DMatrix<f64>,
    s: f64,
    t: &[f64],
) -> Result<(), TestCaseError> {
    let (k, m) = b.shape();
    let moved_b = (b * r) * s + DMatrix::from_fn(k, m, |_, d| t[d]);
    let moved_a = (a * r.transpose()) / s - DMatrix::from_fn(k, m, |_, d| t[d]);
    for kind in [Distance::Angle, Distance::Partial, Distance::Full] {
        let d0 = kind.from_angle(procrustes_angle(a, b).unwrap());
        let d1 = kind.from_angle(procrustes_angle(a, &moved_b).unwrap());
        let d2 = kind.from_angle(procrustes_angle(&moved_a, b).unwrap());
        let d3 = kind.from_angle(procrustes_angle(b, a).unwrap());
        prop_assert!((d0 - d1).abs() < 1e-9, "{} vs {}", d0, d1);
        prop_assert!((d0 - d2).abs() < 1e-9, "{} vs {}", d0, d2);
        prop_assert!((d0 - d3).abs() < 1e-12);
    }
    let dp = partial_procrustes_distance(a, b).unwrap();
    let df = full_procrustes_distance(a, b).unwrap();
    prop_assert!(df <= dp + 1e-15);
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    // Law (Dryden & Mardia 2016 §3.3): Procrustes distances are invariant to translating,
    // rotating and scaling either input.
    #[test]
    fn distances_are_similarity_invariant_2d(
        a in config_strategy(6, 2), b in config_strategy(6, 2), r in rotation_strategy(2),
        s in 0.1f64..10.0, t in prop::collection::vec(-50.0f64..50.0, 3),
    ) {
        prop_assume!(well_spread(&a) && well_spread(&b));
        check_invariance(&a, &b, &r, s, &t)?;
    }

    #[test]
    fn distances_are_similarity_invariant_3d(
        a in config_strategy(6, 3), b in config_strategy(6, 3), r in rotation_strategy(3),
        s in 0.1f64..10.0, t in prop::collection::vec(-50.0f64..50.0, 3),
    ) {
        prop_assume!(well_spread(&a) && well_spread(&b));
        check_invariance(&a, &b, &r, s, &t)?;
    }

    // GPA does not depend on the order of the specimens (up to the orientation of the whole,
    // which follows the first specimen): the mean shape and each specimen's aligned
    // coordinates agree. Specimens scatter around a common shape, as real samples do (widely
    // scattered random shapes can have several GPA fixed points).
    #[test]
    fn gpa_is_order_independent(
        base in config_strategy(5, 3),
        noise in prop::collection::vec(config_strategy(5, 3), 6),
        rots in prop::collection::vec(rotation_strategy(3), 6),
        shift in 1usize..6,
    ) {
        prop_assume!(well_spread(&base));
        let data: Vec<DMatrix<f64>> = noise
            .iter()
            .zip(&rots)
            .enumerate()
            .map(|(i, (e, r))| (&base + e * 0.05) * r * (1.0 + i as f64) + DMatrix::from_element(5, 3, i as f64))
            .collect();
        let s1 = Sample::from_configs(&data).unwrap();
        let mut rotated = data.clone();
        rotated.rotate_left(shift);
        let s2 = Sample::from_configs(&rotated).unwrap();
        let opts = GpaOptions { tolerance: 1e-13, max_iterations: 2000, ..GpaOptions::default() };
        let (g1, g2) = (gpa(&s1, &opts).unwrap(), gpa(&s2, &opts).unwrap());
        prop_assert!(g1.converged && g2.converged);
        let rho = procrustes_angle(&g1.mean, &g2.mean).unwrap();
        prop_assert!(rho < 1e-8, "means differ by {}", rho);
        let fit = opa(&g1.mean, &g2.mean, false).unwrap();
        for i in 0..6 {
            let j = (i + 6 - shift) % 6;
            let a = g1.aligned.config(i);
            let b = g2.aligned.config(j) * &fit.rotation;
            prop_assert!((a - b).norm() < 1e-7);
        }
    }

    // PCA: scores · loadingsᵀ + centre reproduce the tangent coordinates.
    #[test]
    fn pca_reproduces_tangent_coordinates(
        data in prop::collection::vec(config_strategy(6, 2), 8),
    ) {
        prop_assume!(data.iter().all(well_spread));
        let g = gpa(&Sample::from_configs(&data).unwrap(), &GpaOptions::default()).unwrap();
        let t = tangent_coordinates(&g);
        let p = pca(&t).unwrap();
        let rec = &p.scores * p.loadings.transpose();
        for i in 0..t.nrows() {
            let r = rec.row(i).transpose() + &p.center;
            let e = (r - t.row(i).transpose()).norm();
            prop_assert!(e < 1e-9, "specimen {}: reconstruction off by {:e}; variances {:?} of total {}", i, e, p.variances, p.total_variance);
        }
    }
}

#[test]
fn distance_matrix_matches_pairwise_calls() {
    let r = common::Reference::new("shape_kent", "shape_kent.py").run();
    let configs: Vec<DMatrix<f64>> = r["configs"]
        .as_array()
        .unwrap()
        .iter()
        .take(6)
        .map(mat)
        .collect();
    let s = Sample::from_configs(&configs).unwrap();
    let d = distance_matrix(&s, Distance::Full).unwrap();
    for i in 0..6 {
        for j in 0..6 {
            let e = if i == j {
                0.0
            } else {
                full_procrustes_distance(&configs[i], &configs[j]).unwrap()
            };
            assert!((d[(i, j)] - e).abs() < 1e-14);
        }
    }
}
