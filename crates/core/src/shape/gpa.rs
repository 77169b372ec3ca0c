//! Ordinary (OPA) and generalized (GPA) Procrustes superimposition.
//!
//! Every configuration is centred; with [`GpaOptions::scale`] it is also scaled to unit centroid
//! size (a *preshape*). Rotations are found by the SVD of the `m × m` cross-product matrix
//! `H = Xᵀ M = U S Vᵀ`; the optimal rotation of `X` onto `M` is `R = U D Vᵀ` with
//! `D = diag(1, …, 1, sign det(U Vᵀ))`, so reflections are forbidden and `det R = +1`
//! (Dryden & Mardia 2016, *Statistical Shape Analysis*, 2nd ed., §7.2.1; Kabsch 1976).
//! `tr(Rᵀ H) = s₁ + … + d·s_m` is then the largest attainable `tr(Rᵀ H)`; for unit-size
//! configurations it equals `cos ρ`, the cosine of the Procrustes angle.
//!
//! GPA iterates: rotate (and, for the full fit, scale) every specimen onto the current mean,
//! recompute the mean, rescale it to unit size, and stop when the Frobenius norm of the change
//! in the mean falls below [`GpaOptions::tolerance`]. The first specimen is the initial mean,
//! so the result is expressed in its orientation.
//!
//! **Partial fit is the default** because tangent-space statistics (PCA, regression, disparity)
//! are conventionally done on partial Procrustes coordinates: all specimens keep unit centroid
//! size, and their orthogonal projections onto the tangent plane at the mean are the Procrustes
//! tangent coordinates (Dryden & Mardia 2016, §4.4 and §7.3; Rohlf 1999, *J. Classification*
//! 16:197–223). The full fit additionally scales each specimen by `β = cos ρ` to the mean, which
//! minimises the full Procrustes sum of squares and converges to the full Procrustes mean
//! (Dryden & Mardia 2016, §7.3, algorithm of Gower 1975 / Ten Berge 1977).
//!
//! Inner loops work on the flat data with fixed-size 2×2/3×3 matrices and run in parallel over
//! specimens; they do not allocate per specimen.

use nalgebra::{DMatrix, DVector, Matrix2, Matrix3};
use rayon::prelude::*;
use serde::Serialize;

use super::{Sample, ShapeError};

/// Which Procrustes fit GPA performs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub enum Fit {
    /// Rotation only (specimens keep unit centroid size). The default: see the module docs.
    #[default]
    Partial,
    /// Rotation and scaling of each specimen by `cos ρ` to the mean (needs `scale = true`).
    Full,
}

/// Options of [`gpa`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct GpaOptions {
    /// Partial (default) or full Procrustes fit.
    pub fit: Fit,
    /// Stop when `‖mean_new − mean_old‖_F` is below this (default `1e-10`).
    pub tolerance: f64,
    /// Give up after this many iterations (default 200); the result then has `converged = false`.
    pub max_iterations: usize,
    /// Scale every configuration to unit centroid size (shape analysis, default `true`). With
    /// `false` the specimens are only centred and rotated (size-and-shape, "form"), the mean is
    /// the plain average and the fit must be [`Fit::Partial`].
    pub scale: bool,
}

impl Default for GpaOptions {
    fn default() -> Self {
        Self {
            fit: Fit::Partial,
            tolerance: 1e-10,
            max_iterations: 200,
            scale: true,
        }
    }
}

/// The result of [`gpa`].
#[derive(Debug, Clone, Serialize)]
pub struct Gpa {
    /// The superimposed specimens (centred; unit size for a partial fit with `scale`).
    pub aligned: Sample,
    /// The consensus (mean) configuration, `k × m`; unit centroid size when `scale` is set.
    pub mean: DMatrix<f64>,
    /// Centroid size of every input specimen, in input units.
    pub centroid_sizes: Vec<f64>,
    /// Iterations performed (each rotates all specimens once and updates the mean).
    pub iterations: usize,
    /// Whether the change in the mean fell below the tolerance.
    pub converged: bool,
    /// Frobenius norm of the last change in the mean.
    pub final_change: f64,
    /// The fit used.
    pub fit: Fit,
    /// Whether specimens were scaled to unit centroid size.
    pub scaled: bool,
}

/// The result of [`opa`]: `aligned = scale · target · rotation + 1 translationᵀ`.
#[derive(Debug, Clone, Serialize)]
pub struct OpaResult {
    /// Proper rotation (`det = +1`), `m × m`, acting on row vectors from the right.
    pub rotation: DMatrix<f64>,
    /// Scale applied to the target (1 when scaling was not requested).
    pub scale: f64,
    /// Translation (length `m`) added after rotation and scaling.
    pub translation: DVector<f64>,
    /// The target superimposed on the reference, in the reference's frame and units.
    pub aligned: DMatrix<f64>,
    /// `‖aligned − reference‖_F`, the residual in the reference's units.
    pub distance: f64,
    /// Procrustes angle ρ between the two shapes, radians in `[0, π/2]`.
    pub angle_rad: f64,
}

/// A proper rotation `R` (row-major in the first `m·m` entries) maximising `tr(Rᵀ H)` for
/// the row-major `m × m` matrix `h`, and that maximum (the sign-corrected singular value sum).
pub(crate) fn proper_rotation(h: &[f64], m: usize) -> Result<([f64; 9], f64), ShapeError> {
    let mut r = [0.0; 9];
    let trace = if m == 2 {
        let hm = Matrix2::from_row_slice(&h[..4]);
        let svd = hm
            .try_svd(true, true, f64::EPSILON, 1000)
            .ok_or(ShapeError::NoConvergence(
                "2x2 singular value decomposition",
            ))?;
        let (u, vt) = (svd.u.expect("u requested"), svd.v_t.expect("v requested"));
        let s = svd.singular_values;
        let (mut u, d) = correct_sign(u, u.determinant() * vt.determinant());
        let last = usize::from(s[0] >= s[1]);
        if d < 0.0 {
            u.column_mut(last).neg_mut();
        }
        let rot = u * vt;
        for a in 0..2 {
            for b in 0..2 {
                r[a * 2 + b] = rot[(a, b)];
            }
        }
        s[0] + s[1] - if d < 0.0 { 2.0 * s[last] } else { 0.0 }
    } else {
        let hm = Matrix3::from_row_slice(&h[..9]);
        let svd = hm
            .try_svd(true, true, f64::EPSILON, 1000)
            .ok_or(ShapeError::NoConvergence(
                "3x3 singular value decomposition",
            ))?;
        let (u, vt) = (svd.u.expect("u requested"), svd.v_t.expect("v requested"));
        let s = svd.singular_values;
        let (mut u, d) = correct_sign(u, u.determinant() * vt.determinant());
        let last = s.imin();
        if d < 0.0 {
            u.column_mut(last).neg_mut();
        }
        let rot = u * vt;
        for a in 0..3 {
            for b in 0..3 {
                r[a * 3 + b] = rot[(a, b)];
            }
        }
        s.sum() - if d < 0.0 { 2.0 * s[last] } else { 0.0 }
    };
    Ok((r, trace))
}

fn correct_sign<T>(u: T, det: f64) -> (T, f64) {
    (u, if det < 0.0 { -1.0 } else { 1.0 })
}

/// `H = Xᵀ Y` for flat row-major `k × m` configurations, row-major `m × m` in `h`.
#[inline]
pub(crate) fn cross(x: &[f64], y: &[f64], m: usize) -> [f64; 9] {
    let mut h = [0.0; 9];
    if m == 3 {
        for (p, q) in x.chunks_exact(3).zip(y.chunks_exact(3)) {
            for a in 0..3 {
                h[a * 3] += p[a] * q[0];
                h[a * 3 + 1] += p[a] * q[1];
                h[a * 3 + 2] += p[a] * q[2];
            }
        }
    } else {
        for (p, q) in x.chunks_exact(2).zip(y.chunks_exact(2)) {
            h[0] += p[0] * q[0];
            h[1] += p[0] * q[1];
            h[2] += p[1] * q[0];
            h[3] += p[1] * q[1];
        }
    }
    h
}

/// `x ← s · x · R` in place.
#[inline]
pub(crate) fn rotate_in_place(x: &mut [f64], r: &[f64; 9], s: f64, m: usize) {
    if m == 3 {
        for p in x.chunks_exact_mut(3) {
            let (a, b, c) = (p[0], p[1], p[2]);
            p[0] = s * (a * r[0] + b * r[3] + c * r[6]);
            p[1] = s * (a * r[1] + b * r[4] + c * r[7]);
            p[2] = s * (a * r[2] + b * r[5] + c * r[8]);
        }
    } else {
        for p in x.chunks_exact_mut(2) {
            let (a, b) = (p[0], p[1]);
            p[0] = s * (a * r[0] + b * r[2]);
            p[1] = s * (a * r[1] + b * r[3]);
        }
    }
}

/// Divides a flat configuration by its largest magnitude, centres it, and returns that
/// magnitude and the centred configuration's size: the centroid size is their product, and
/// neither over- nor underflows on the way (coordinates of 1e300 or 1e-300 are sized exactly).
/// An all-zero configuration gives `(0, 0)`; a non-finite one `(∞ or NaN, …)`.
pub(crate) fn centre_scaled(x: &mut [f64], m: usize) -> (f64, f64) {
    let scale = x.iter().fold(0.0_f64, |a, v| a.max(v.abs()));
    if !(scale > 0.0 && scale.is_finite()) {
        return (scale, 0.0);
    }
    for v in x.iter_mut() {
        *v /= scale;
    }
    centre_in_place(x, m);
    (scale, sum_sq(x).sqrt())
}

/// Centres a flat configuration in place and returns its centroid.
pub(crate) fn centre_in_place(x: &mut [f64], m: usize) -> [f64; 3] {
    let k = x.len() / m;
    let mut c = [0.0; 3];
    for p in x.chunks_exact(m) {
        for d in 0..m {
            c[d] += p[d];
        }
    }
    for v in c.iter_mut().take(m) {
        *v /= k as f64;
    }
    for p in x.chunks_exact_mut(m) {
        for d in 0..m {
            p[d] -= c[d];
        }
    }
    c
}

pub(crate) fn sum_sq(x: &[f64]) -> f64 {
    x.iter().map(|v| v * v).sum()
}

fn check_config(c: &DMatrix<f64>, k: usize, m: usize) -> Result<(), ShapeError> {
    if c.shape() != (k, m) {
        return Err(ShapeError::ShapeMismatch {
            k,
            m,
            got_k: c.nrows(),
            got_m: c.ncols(),
        });
    }
    if let Some(pos) = c.iter().position(|v| !v.is_finite()) {
        return Err(ShapeError::NonFinite {
            specimen: 0,
            landmark: pos % k,
        });
    }
    Ok(())
}

/// Row-major flat copy of a `k × m` matrix.
pub(crate) fn flat(c: &DMatrix<f64>) -> Vec<f64> {
    c.transpose().as_slice().to_vec()
}

/// The proper rotation `R` (`m × m`, `det R = +1`) minimising `‖x · R − y‖_F` for `k × m`
/// configurations, with no centring or scaling (the orthogonal Procrustes problem restricted to
/// rotations), and the attained `tr(Rᵀ xᵀ y)`.
pub fn rotation_onto(
    x: &DMatrix<f64>,
    y: &DMatrix<f64>,
) -> Result<(DMatrix<f64>, f64), ShapeError> {
    let (k, m) = y.shape();
    if m != 2 && m != 3 {
        return Err(ShapeError::UnsupportedDimension(m));
    }
    check_config(y, k, m)?;
    check_config(x, k, m)?;
    let (r, trace) = proper_rotation(&cross(&flat(x), &flat(y), m), m)?;
    Ok((DMatrix::from_row_slice(m, m, &r[..m * m]), trace))
}

/// Ordinary Procrustes analysis: superimposes `target` on `reference` by translation, a proper
/// rotation and (if `scale`) the least-squares scale `s = tr(Rᵀ H) / ‖target_c‖²`
/// (Dryden & Mardia 2016, §7.2.1). Both must be `k × m` with `m ∈ {2, 3}`, neither of size 0.
pub fn opa(
    reference: &DMatrix<f64>,
    target: &DMatrix<f64>,
    scale: bool,
) -> Result<OpaResult, ShapeError> {
    let (k, m) = reference.shape();
    if m != 2 && m != 3 {
        return Err(ShapeError::UnsupportedDimension(m));
    }
    if k < 2 {
        return Err(ShapeError::TooFewLandmarks { needed: 2, got: k });
    }
    check_config(reference, k, m)?;
    check_config(target, k, m)?;
    let mut yr = flat(reference);
    let mut xt = flat(target);
    let cr = centre_in_place(&mut yr, m);
    let ct = centre_in_place(&mut xt, m);
    let (nr, nt) = (sum_sq(&yr).sqrt(), sum_sq(&xt).sqrt());
    if nr == 0.0 {
        return Err(ShapeError::ZeroSize(0));
    }
    if nt == 0.0 {
        return Err(ShapeError::ZeroSize(1));
    }
    let angle_rad = super::distance::angle_flat(&xt, &yr, nt, nr, m)?;
    let h = cross(&xt, &yr, m);
    let (r, trace) = proper_rotation(&h, m)?;
    let s = if scale { trace / (nt * nt) } else { 1.0 };
    rotate_in_place(&mut xt, &r, s, m);
    let rotation = DMatrix::from_row_slice(m, m, &r[..m * m]);
    let mut aligned = DMatrix::zeros(k, m);
    let mut ss = 0.0;
    for j in 0..k {
        for d in 0..m {
            let v = xt[j * m + d] + cr[d];
            aligned[(j, d)] = v;
            ss += (v - reference[(j, d)]).powi(2);
        }
    }
    // t = c_ref − s · c_target · R
    let mut ctr = ct;
    rotate_in_place(&mut ctr[..m], &r, s, m);
    let translation = DVector::from_fn(m, |d, _| cr[d] - ctr[d]);
    Ok(OpaResult {
        rotation,
        scale: s,
        translation,
        aligned,
        distance: ss.sqrt(),
        angle_rad,
    })
}

/// Generalized Procrustes analysis of a sample (see the module docs for the algorithm).
///
/// Needs at least 2 specimens and 2 landmarks; fails on a specimen whose landmarks all coincide
/// (when scaling) and on invalid options. Not converging within `max_iterations` is not an error:
/// the result reports `converged = false`.
#[allow(
    clippy::too_many_lines,
    reason = "the iteration reads best as one loop"
)]
pub fn gpa(sample: &Sample, opts: &GpaOptions) -> Result<Gpa, ShapeError> {
    let (n, k, m) = (sample.n(), sample.k(), sample.m());
    if n < 2 {
        return Err(ShapeError::TooFewSpecimens {
            what: "generalized Procrustes analysis",
            needed: 2,
            got: n,
        });
    }
    if k < 2 {
        return Err(ShapeError::TooFewLandmarks { needed: 2, got: k });
    }
    if !(opts.tolerance.is_finite() && opts.tolerance >= 0.0) {
        return Err(ShapeError::InvalidOption(format!(
            "tolerance {} must be finite and non-negative",
            opts.tolerance
        )));
    }
    if opts.max_iterations == 0 {
        return Err(ShapeError::InvalidOption(
            "max_iterations must be at least 1".into(),
        ));
    }
    if opts.fit == Fit::Full && !opts.scale {
        return Err(ShapeError::InvalidOption(
            "a full Procrustes fit needs scale = true".into(),
        ));
    }
    let km = k * m;
    let mut x = sample.data().to_vec();
    // Centre and size each specimen on coordinates divided by their largest magnitude, so that
    // neither 1e300 mm nor 1e-300 mm over- or underflows the sum of squares.
    let centroid_sizes: Vec<f64> = x
        .par_chunks_mut(km)
        .map(|c| {
            let (scale, unit_size) = centre_scaled(c, m);
            if opts.scale {
                if unit_size > 0.0 {
                    for v in c.iter_mut() {
                        *v /= unit_size;
                    }
                }
            } else {
                for v in c.iter_mut() {
                    *v *= scale;
                }
            }
            scale * unit_size
        })
        .collect();
    if let Some(i) = centroid_sizes.iter().position(|c| !c.is_finite()) {
        return Err(ShapeError::TooLarge(i));
    }
    if opts.scale
        && let Some(i) = centroid_sizes.iter().position(|&c| c == 0.0)
    {
        return Err(ShapeError::ZeroSize(i));
    }
    // The full fit scales each specimen by β = cos ρ to the mean. `x` keeps the unit-size
    // preshapes (rotated onto the mean each round) and `beta` the scales, applied when the mean
    // is formed and at the end: a specimen 90° from the mean in one round (β = 0) keeps its
    // shape for the next, where scaling it in place would have lost it.
    let full = opts.fit == Fit::Full;
    let mut beta = vec![1.0; n];
    let mut mean = x[..km].to_vec();
    let mut iterations = 0;
    let mut change = f64::INFINITY;
    let mut converged = false;
    while iterations < opts.max_iterations {
        iterations += 1;
        let mu = &mean;
        let sum = x
            .par_chunks_mut(km)
            .zip(beta.par_iter_mut())
            .with_min_len(32)
            .try_fold(
                || vec![0.0; km],
                |mut acc, (c, b)| {
                    let h = cross(c, mu, m);
                    let (r, trace) = proper_rotation(&h, m)?;
                    rotate_in_place(c, &r, 1.0, m);
                    if full {
                        // ‖c‖ = ‖μ‖ = 1, so tr(Rᵀ H) is cos ρ
                        *b = trace.max(0.0);
                    }
                    let bv = *b;
                    acc.iter_mut().zip(c.iter()).for_each(|(a, v)| *a += bv * v);
                    Ok::<_, ShapeError>(acc)
                },
            )
            .try_reduce(
                || vec![0.0; km],
                |mut a, b| {
                    a.iter_mut().zip(b).for_each(|(p, q)| *p += q);
                    Ok(a)
                },
            )?;
        let mut new_mean: Vec<f64> = sum.iter().map(|v| v / n as f64).collect();
        if opts.scale {
            let size = sum_sq(&new_mean).sqrt();
            if !(size > 0.0 && size.is_finite()) {
                return Err(ShapeError::ZeroMean);
            }
            for v in &mut new_mean {
                *v /= size;
            }
        }
        change = new_mean
            .iter()
            .zip(&mean)
            .map(|(a, b)| (a - b) * (a - b))
            .sum::<f64>()
            .sqrt();
        mean = new_mean;
        if change < opts.tolerance {
            converged = true;
            break;
        }
    }
    if full {
        // cos ρ below 1e-9: the specimen lies 90° from the mean and the fit shrinks it to a point
        if let Some(i) = beta.iter().position(|&b| b < 1e-9) {
            return Err(ShapeError::FullFitCollapse(i));
        }
        for (c, b) in x.chunks_exact_mut(km).zip(&beta) {
            for v in c.iter_mut() {
                *v *= b;
            }
        }
    }
    Ok(Gpa {
        aligned: Sample::new(n, k, m, x)?,
        mean: DMatrix::from_row_slice(k, m, &mean),
        centroid_sizes,
        iterations,
        converged,
        final_change: change,
        fit: opts.fit,
        scaled: opts.scale,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rot3(ax: f64, ay: f64, az: f64) -> DMatrix<f64> {
        let r = nalgebra::Rotation3::from_euler_angles(ax, ay, az);
        DMatrix::from_fn(3, 3, |i, j| r[(i, j)])
    }

    fn example3() -> DMatrix<f64> {
        DMatrix::from_row_slice(
            5,
            3,
            &[
                0.0, 0.0, 0.0, 2.0, 0.1, 0.0, 0.3, 1.5, 0.2, 0.5, 0.4, 1.1, 1.7, 1.2, 0.8,
            ],
        )
    }

    #[test]
    fn opa_recovers_a_similarity_transform() {
        let y = example3();
        let r = rot3(0.3, -1.1, 2.0);
        let x = (&y * &r) * 2.5 + DMatrix::from_fn(5, 3, |_, d| [1.0, -2.0, 3.0][d]);
        let fit = opa(&y, &x, true).unwrap();
        assert!(fit.distance < 1e-12, "{}", fit.distance);
        assert!(fit.angle_rad < 1e-10, "{}", fit.angle_rad);
        assert!((fit.scale - 0.4).abs() < 1e-12);
        assert!((fit.rotation.determinant() - 1.0).abs() < 1e-12);
        // aligned = s · x · R + t
        let again =
            &x * &fit.rotation * fit.scale + DMatrix::from_fn(5, 3, |_, d| fit.translation[d]);
        assert!((again - &fit.aligned).norm() < 1e-12);
    }

    #[test]
    fn opa_never_reflects() {
        let y = example3();
        let mut mirror = y.clone();
        mirror.column_mut(0).neg_mut();
        let fit = opa(&y, &mirror, true).unwrap();
        assert!((fit.rotation.determinant() - 1.0).abs() < 1e-12);
        assert!(
            fit.distance > 0.1,
            "a chiral shape cannot match its mirror image"
        );
        let planar = DMatrix::from_row_slice(3, 2, &[0.0, 0.0, 1.0, 0.0, 0.2, 1.0]);
        let mut pm = planar.clone();
        pm.column_mut(1).neg_mut();
        let fit2 = opa(&planar, &pm, true).unwrap();
        assert!((fit2.rotation.determinant() - 1.0).abs() < 1e-12);
        assert!(fit2.angle_rad > 0.1);
    }

    #[test]
    fn gpa_of_rotated_copies_converges_to_the_shape() {
        let y = example3();
        let configs: Vec<_> = (0..6)
            .map(|i| &y * rot3(0.4 * f64::from(i), 0.2, -0.3 * f64::from(i)) * (1.0 + f64::from(i)))
            .collect();
        let s = Sample::from_configs(&configs).unwrap();
        for fit in [Fit::Partial, Fit::Full] {
            let g = gpa(
                &s,
                &GpaOptions {
                    fit,
                    ..GpaOptions::default()
                },
            )
            .unwrap();
            assert!(g.converged);
            assert!(g.iterations <= 3, "{}", g.iterations);
            assert!((crate::shape::centroid_size(&g.mean) - 1.0).abs() < 1e-12);
            for i in 0..6 {
                assert!((g.aligned.config(i) - &g.mean).norm() < 1e-9);
                let expected = crate::shape::centroid_size(&y) * (1.0 + i as f64);
                assert!((g.centroid_sizes[i] - expected).abs() < 1e-9);
            }
        }
    }

    #[test]
    fn gpa_rejects_bad_input() {
        let s = Sample::new(1, 3, 2, vec![0.0, 0.0, 1.0, 0.0, 0.0, 1.0]).unwrap();
        assert!(matches!(
            gpa(&s, &GpaOptions::default()),
            Err(ShapeError::TooFewSpecimens { .. })
        ));
        let z = Sample::new(
            2,
            3,
            2,
            vec![0.0, 0.0, 1.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0],
        )
        .unwrap();
        assert_eq!(
            gpa(&z, &GpaOptions::default()).unwrap_err(),
            ShapeError::ZeroSize(1)
        );
        let opts = GpaOptions {
            fit: Fit::Full,
            scale: false,
            ..GpaOptions::default()
        };
        assert!(matches!(gpa(&z, &opts), Err(ShapeError::InvalidOption(_))));
    }
}
