//! Shape statistics, second half (thin-plate splines, missing landmarks, sliding, measurement
//! error, symmetry), checked against outside references in the Python venv (their answers are
//! the committed fixtures `shape2_*`, see `tests/common`).

mod common;

use nalgebra::DMatrix;
use serde_json::json;
use sutura_core::shape::tps::{self, Tps};

fn to_json(m: &DMatrix<f64>) -> serde_json::Value {
    json!(
        (0..m.nrows())
            .map(|i| m.row(i).iter().copied().collect::<Vec<f64>>())
            .collect::<Vec<_>>()
    )
}

fn from_json(v: &serde_json::Value, cols: usize) -> DMatrix<f64> {
    let rows = v.as_array().unwrap();
    DMatrix::from_fn(rows.len(), cols, |i, j| rows[i][j].as_f64().unwrap())
}

/// Warp values against scipy's `RBFInterpolator` (`thin_plate_spline` in 2D, linear = −r in 3D,
/// degree 1, no smoothing), and bending energy against numpy's own inverse of Bookstein's L.
/// Reference: scipy.interpolate.RBFInterpolator (scipy 1.x); Bookstein 1989 eqs. 3–4.
#[test]
fn tps_matches_scipy_rbf_interpolator() {
    // 2D: the unit square with a centre point displaced, plus two asymmetric points.
    let src2 = DMatrix::from_row_slice(
        7,
        2,
        &[0., 0., 1., 0., 1., 1., 0., 1., 0.5, 0.5, 0.3, 0.8, 0.9, 0.2],
    );
    let mut tgt2 = src2.clone();
    tgt2[(4, 0)] += 0.15;
    tgt2[(5, 1)] -= 0.1;
    tgt2[(6, 0)] += 0.05;
    // 3D: cube corners and an interior point.
    let mut src3 = DMatrix::zeros(9, 3);
    for c in 0..8 {
        for d in 0..3 {
            src3[(c, d)] = ((c >> d) & 1) as f64;
        }
    }
    src3.row_mut(8).copy_from_slice(&[0.4, 0.6, 0.5]);
    let mut tgt3 = &src3 * 1.2;
    tgt3[(8, 2)] += 0.2;
    tgt3[(3, 0)] -= 0.1;
    for (src, tgt) in [(src2, tgt2), (src3, tgt3)] {
        let m = src.ncols();
        let points = DMatrix::from_fn(25, m, |i, d| {
            -0.5 + 2.0 * ((i * 7 + d * 13) % 25) as f64 / 24.0
        });
        let arg =
            json!({"source": to_json(&src), "target": to_json(&tgt), "points": to_json(&points)});
        let r = common::Reference::new(&format!("shape2_tps_{m}d"), "shape2_tps.py")
            .arg(arg.to_string())
            .run();
        let expected = from_json(&r["warp"], m);
        let fit = Tps::fit(&src, &tgt).unwrap();
        let got = fit.warp(&points).unwrap();
        let err = (&got - &expected).abs().max();
        assert!(err < 1e-9, "{m}D warp differs from scipy by {err}");
        let e_ref = r["energy"].as_f64().unwrap();
        let e = tps::bending_energy(&src, &tgt).unwrap();
        assert!(e > 0.0);
        assert!(
            (e - e_ref).abs() < 1e-9 * e_ref,
            "{m}D energy {e} vs numpy {e_ref}"
        );
    }
}

/// Repeated digitisations: `individuals` shapes, each digitised `reps[i]` times with small
/// landmark noise. Deterministic (`ChaCha8` seeded).
fn replicates(
    reps: &[usize],
    k: usize,
    m: usize,
    seed: u64,
) -> (sutura_core::shape::Sample, Vec<usize>) {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let base: Vec<f64> = (0..k * m).map(|_| rng.random_range(-1.0..1.0)).collect();
    let mut configs = Vec::new();
    let mut labels = Vec::new();
    for (ind, &r) in reps.iter().enumerate() {
        let shape: Vec<f64> = base
            .iter()
            .map(|v| v + rng.random_range(-0.15..0.15))
            .collect();
        for _ in 0..r {
            let scale = rng.random_range(0.8..1.2);
            let th: f64 = rng.random_range(-0.3..0.3);
            let config = DMatrix::from_fn(k, m, |j, d| {
                let (x, y) = (shape[j * m], shape[j * m + 1]);
                let mut noisy = |v: f64| v + rng.random_range(-0.03..0.03);
                match d {
                    0 => noisy(scale * (x * th.cos() - y * th.sin())) + 5.0,
                    1 => noisy(scale * (x * th.sin() + y * th.cos())),
                    _ => noisy(scale * shape[j * m + d]),
                }
            });
            configs.push(config);
            labels.push(100 + ind);
        }
    }
    (
        sutura_core::shape::Sample::from_configs(&configs).unwrap(),
        labels,
    )
}

/// Procrustes ANOVA sums of squares equal the per-coordinate one-way ANOVA sums of squares of
/// statsmodels (`ols` + `anova_lm`) on the same aligned coordinates, summed; and for one linear
/// variable (centroid size) F and p equal statsmodels' (reference: statsmodels 0.14+,
/// `statsmodels/stats/anova.py`; Klingenberg and `McIntyre` 1998 for the summation over coordinates).
#[test]
fn procrustes_anova_matches_statsmodels() {
    use sutura_core::shape::anova::{procrustes_anova, shape_dims};
    for (m, reps) in [(2, vec![3, 3, 3, 3, 3]), (3, vec![2, 4, 3, 2, 3, 2])] {
        let (sample, labels) = replicates(&reps, 7, m, 42 + m as u64);
        let r =
            procrustes_anova(&sample, &labels, &sutura_core::shape::GpaOptions::default()).unwrap();
        let rows = r.gpa.aligned.to_rows();
        let arg = json!({"data": to_json(&rows), "labels": labels});
        let py = common::Reference::new(&format!("shape2_anova_shape_{m}d"), "shape2_anova.py")
            .arg(arg.to_string())
            .run();
        let ss_ind = py["ss_individual"].as_f64().unwrap();
        let ss_err = py["ss_error"].as_f64().unwrap();
        assert!(
            (r.shape.individual.ss - ss_ind).abs() < 1e-10 * ss_ind,
            "{m}D SS_ind"
        );
        assert!(
            (r.shape.error.ss - ss_err).abs() < 1e-10 * ss_err,
            "{m}D SS_err"
        );
        // Shape degrees of freedom: statsmodels' per-coordinate df times D (2k−4 or 3k−7).
        let d = shape_dims(7, m) as f64;
        let col0 = &py["columns"][0];
        assert!((r.shape.individual.df - col0["df_individual"].as_f64().unwrap() * d).abs() < 1e-9);
        assert!((r.shape.error.df - col0["df_error"].as_f64().unwrap() * d).abs() < 1e-9);
        assert!(
            r.shape.p < 1e-6,
            "individuals differ by design: p = {}",
            r.shape.p
        );

        // Centroid size: one variable, so F and p are statsmodels' own.
        let sizes: Vec<f64> = (0..sample.n())
            .map(|i| sutura_core::shape::centroid_size(&sample.config(i)))
            .collect();
        let arg =
            json!({"data": sizes.iter().map(|v| vec![*v]).collect::<Vec<_>>(), "labels": labels});
        let py = common::Reference::new(&format!("shape2_anova_size_{m}d"), "shape2_anova.py")
            .arg(arg.to_string())
            .run();
        let c = &py["columns"][0];
        let (f, p) = (c["F"].as_f64().unwrap(), c["p"].as_f64().unwrap());
        assert!((r.size.f - f).abs() < 1e-10 * f, "F {} vs {f}", r.size.f);
        assert!(
            (r.size.p - p).abs() < 1e-10 * p.max(1e-300) + 1e-14,
            "p {} vs {p}",
            r.size.p
        );
        assert!((r.size.individual.ss - c["ss_individual"].as_f64().unwrap()).abs() < 1e-9);
    }
}

/// Arcs of the unit circle (ends fixed, 7 semilandmarks spaced unevenly with a random exponent),
/// plus two fixed landmarks off the curve, each under a random similarity.
fn arcs(
    n: usize,
    seed: u64,
) -> (
    sutura_core::shape::Sample,
    Vec<sutura_core::shape::sliding::Curve>,
) {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let s = 7;
    let configs: Vec<DMatrix<f64>> = (0..n)
        .map(|_| {
            let p: f64 = rng.random_range(0.6..1.8);
            let mut pts = vec![[0.0, 0.0], [1.5, 1.5], [1.0, 0.0]];
            for j in 1..=s {
                let a = std::f64::consts::FRAC_PI_2 * (j as f64 / (s + 1) as f64).powf(p);
                pts.push([a.cos(), a.sin()]);
            }
            pts.push([0.0, 1.0]);
            let th: f64 = rng.random_range(-1.0..1.0);
            let sc: f64 = rng.random_range(0.5..2.0);
            let (c, si) = (th.cos() * sc, th.sin() * sc);
            DMatrix::from_fn(pts.len(), 2, |i, d| {
                let (x, y) = (pts[i][0], pts[i][1]);
                if d == 0 {
                    c * x - si * y + 3.0
                } else {
                    si * x + c * y - 1.0
                }
            })
        })
        .collect();
    let curve = sutura_core::shape::sliding::Curve {
        landmarks: (2..=3 + s).collect(),
    };
    (
        sutura_core::shape::Sample::from_configs(&configs).unwrap(),
        vec![curve],
    )
}

/// Total bending energy of the deformations from the GPA mean onto each aligned specimen.
fn total_energy(g: &sutura_core::shape::Gpa) -> f64 {
    let b = tps::bending_energy_matrix(&g.mean).unwrap();
    (0..g.aligned.n())
        .map(|i| {
            let x = g.aligned.config(i);
            (x.transpose() * &b * x).trace()
        })
        .sum()
}

/// Sliding alternated with GPA (Gunz, Mitteroecker & Bookstein 2005): the bending-energy
/// criterion lowers the summed bending energy against the mean, and the Procrustes criterion
/// converges to a state with no residual along the tangents.
#[test]
fn sliding_procedure_lowers_energy_and_clears_tangential_residuals() {
    use sutura_core::shape::sliding::{SlideCriterion, SlideOptions, slide_semilandmarks};
    let (sample, curves) = arcs(8, 5);
    let before = total_energy(
        &sutura_core::shape::gpa(&sample, &sutura_core::shape::GpaOptions::default()).unwrap(),
    );
    let slid = slide_semilandmarks(&sample, &curves, &SlideOptions::default()).unwrap();
    let after = total_energy(&slid.gpa);
    assert!(
        after <= before,
        "bending energy {before} before sliding, {after} after"
    );
    // Fixed landmarks never move.
    for i in 0..sample.n() {
        for j in [0, 1, 2, 10] {
            assert_eq!(sample.config(i).row(j), slid.sample.config(i).row(j));
        }
    }

    // Procrustes criterion without projection: each step removes the residual along the
    // tangents exactly (unit test in sliding.rs); across GPA rounds the residual against the
    // re-estimated mean shrinks geometrically (measured: 0.071 before, 9e-6 after 60 rounds),
    // while the mean itself keeps drifting slowly, since unprojected points may creep along
    // the curve together. Compared before and after sliding.
    let residual = |g: &sutura_core::shape::Gpa| -> f64 {
        let mut worst: f64 = 0.0;
        for i in 0..g.aligned.n() {
            let x = g.aligned.config(i);
            for l in 3..10 {
                let t = x.row(l + 1) - x.row(l - 1);
                let t = &t / t.norm();
                worst = worst.max(t.dot(&(x.row(l) - g.mean.row(l))).abs());
            }
        }
        worst
    };
    let r0 = residual(
        &sutura_core::shape::gpa(&sample, &sutura_core::shape::GpaOptions::default()).unwrap(),
    );
    {
        let rounds = 60;
        let opts = SlideOptions {
            criterion: SlideCriterion::ProcrustesDistance,
            project: false,
            tolerance: 0.0,
            max_iterations: rounds,
            ..SlideOptions::default()
        };
        let slid = slide_semilandmarks(&sample, &curves, &opts).unwrap();
        let r = residual(&slid.gpa);
        eprintln!(
            "tangential residual: {r0} before, {r} after {rounds} rounds (change {})",
            slid.final_change
        );
        assert!(
            r < 1e-3 * r0,
            "largest tangential residual {r0} before, {r} after {rounds} rounds"
        );
    }
}
