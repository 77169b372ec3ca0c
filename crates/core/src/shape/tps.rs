//! Thin-plate splines between two landmark configurations, in 2D and 3D.
//!
//! A configuration is a `k × m` matrix (one row per landmark, `m` = 2 or 3 columns). The spline
//! `f: R^m → R^m` interpolating `source[i] ↦ target[i]` is
//!
//! ```text
//! f(x) = a₀ + Aᵀx + Σᵢ wᵢ U(|x − pᵢ|)
//! ```
//!
//! with the kernel `U` the fundamental solution of the biharmonic equation in `R^m`, signed so
//! that `Δ²U = 8π δ` in both dimensions:
//!
//! * 2D: `U(r) = r² log r` (Bookstein 1989, "Principal warps", IEEE PAMI 11(6), eq. 1 uses
//!   `r² log r²`, which is twice this and gives the same spline; only the bending-energy scale
//!   differs by that factor);
//! * 3D: `U(r) = −r` (Δr = 2/r and Δ(1/r) = −4πδ in R³, so Δ²(−r) = 8πδ). Bookstein's papers
//!   treat 2D only; the 3D kernel `|r|` is Duchon's (1977) biharmonic spline, used with the sign
//!   flipped here so that the bending-energy matrix is positive semidefinite (the spline itself is
//!   the same for `±r`, only the weights change sign).
//!
//! The weights `W` (k × m) and the affine part `[a₀; A]` ((m+1) × m) solve `L [W; A] = [Y; 0]`
//! with `L = [[K, P], [Pᵀ, 0]]`, `Kᵢⱼ = U(|pᵢ − pⱼ|)`, `P = [1 | source]` (Bookstein 1989,
//! eq. 3–4). The bending-energy matrix is the upper-left `k × k` block `Bₑ` of `L⁻¹`; the bending
//! energy of the deformation onto `Y` is `tr(Yᵀ Bₑ Y) = tr(Wᵀ K W)` (Bookstein 1989, p. 570),
//! which is the integral `∫ Σ_{|α|=2} (2/α!)·(∂^α f)²` over `R^m` divided by `8π` (the factor
//! follows from `Δ²U = 8πδ`; the unit test `energy_matches_integral_2d` checks it numerically).
//! It is zero exactly for affine deformations and is invariant to rotating, translating or
//! reflecting the target.
//!
//! This module does not import anything beyond nalgebra: it knows nothing about samples.

use nalgebra::{DMatrix, DVector};
use thiserror::Error;

/// Failures of spline fitting.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum TpsError {
    /// Only 2D and 3D configurations have a kernel here.
    #[error("thin-plate spline: configurations must have 2 or 3 columns, got {0}")]
    Dimension(usize),
    /// Source and target (or points) disagree in shape.
    #[error(
        "thin-plate spline: source is {source_rows}×{source_cols} but target is {target_rows}×{target_cols}"
    )]
    ShapeMismatch {
        source_rows: usize,
        source_cols: usize,
        target_rows: usize,
        target_cols: usize,
    },
    /// Fewer than `m + 1` landmarks: the affine part is not determined.
    #[error("thin-plate spline: {landmarks} landmarks in {dims}D, at least {needed} are needed")]
    TooFewLandmarks {
        landmarks: usize,
        dims: usize,
        needed: usize,
    },
    /// A coordinate is NaN or infinite.
    #[error("thin-plate spline: landmark {0} has a non-finite coordinate")]
    NonFinite(usize),
    /// `L` is singular: coincident landmarks, or all landmarks on a line (2D) / plane (3D).
    #[error(
        "thin-plate spline: the source configuration is degenerate (coincident landmarks, or all on a line in 2D / a plane in 3D)"
    )]
    Degenerate,
}

/// The kernel `U(r)` for `dims` = 2 (`r² log r`, 0 at r = 0) or 3 (`−r`).
///
/// # Panics
/// Never for `dims` 2 or 3; any other value returns NaN rather than panicking.
#[must_use]
pub fn kernel(r: f64, dims: usize) -> f64 {
    match dims {
        2 => {
            if r > 0.0 {
                r * r * r.ln()
            } else {
                0.0
            }
        }
        3 => -r,
        _ => f64::NAN,
    }
}

fn check_config(c: &DMatrix<f64>) -> Result<(), TpsError> {
    let (k, m) = c.shape();
    if m != 2 && m != 3 {
        return Err(TpsError::Dimension(m));
    }
    if k < m + 1 {
        return Err(TpsError::TooFewLandmarks {
            landmarks: k,
            dims: m,
            needed: m + 1,
        });
    }
    for i in 0..k {
        if c.row(i).iter().any(|v| !v.is_finite()) {
            return Err(TpsError::NonFinite(i));
        }
    }
    Ok(())
}

fn same_shape(a: &DMatrix<f64>, b: &DMatrix<f64>) -> Result<(), TpsError> {
    if a.shape() == b.shape() {
        Ok(())
    } else {
        Err(TpsError::ShapeMismatch {
            source_rows: a.nrows(),
            source_cols: a.ncols(),
            target_rows: b.nrows(),
            target_cols: b.ncols(),
        })
    }
}

fn distance(a: &DMatrix<f64>, i: usize, b: &DMatrix<f64>, j: usize) -> f64 {
    (0..a.ncols())
        .map(|d| (a[(i, d)] - b[(j, d)]).powi(2))
        .sum::<f64>()
        .sqrt()
}

/// The kernel matrix `Kᵢⱼ = U(|pᵢ − pⱼ|)` of a `k × m` configuration.
fn kernel_matrix(source: &DMatrix<f64>) -> DMatrix<f64> {
    let (k, m) = source.shape();
    DMatrix::from_fn(k, k, |i, j| kernel(distance(source, i, source, j), m))
}

/// Bookstein's `L` matrix (`(k+m+1)²`) for a `k × m` source configuration.
pub fn l_matrix(source: &DMatrix<f64>) -> Result<DMatrix<f64>, TpsError> {
    check_config(source)?;
    let (k, m) = source.shape();
    let n = k + m + 1;
    let mut l = DMatrix::zeros(n, n);
    l.view_mut((0, 0), (k, k)).copy_from(&kernel_matrix(source));
    for i in 0..k {
        l[(i, k)] = 1.0;
        l[(k, i)] = 1.0;
        for d in 0..m {
            l[(i, k + 1 + d)] = source[(i, d)];
            l[(k + 1 + d, i)] = source[(i, d)];
        }
    }
    Ok(l)
}

/// `L⁻¹` of the source as given; a residual check rejects numerically singular systems.
fn l_inverse(source: &DMatrix<f64>) -> Result<DMatrix<f64>, TpsError> {
    let l = l_matrix(source)?;
    let n = l.nrows();
    let inv = l
        .clone()
        .full_piv_lu()
        .try_inverse()
        .ok_or(TpsError::Degenerate)?;
    // A matrix that LU deems invertible may still be singular to working precision (e.g. three
    // exactly collinear points in 2D give a zero pivot only up to rounding): check L·L⁻¹ = I.
    let resid = (&l * &inv - DMatrix::<f64>::identity(n, n)).abs().max();
    if !resid.is_finite() || resid > 1e-6 {
        return Err(TpsError::Degenerate);
    }
    Ok(inv)
}

/// The bending-energy matrix `Bₑ` (`k × k`): the upper-left block of `L⁻¹` (Bookstein 1989).
/// Symmetric, positive semidefinite, with the `m + 1` affine directions (constant vector and the
/// source coordinates) in its null space.
pub fn bending_energy_matrix(source: &DMatrix<f64>) -> Result<DMatrix<f64>, TpsError> {
    let k = source.nrows();
    let inv = l_inverse(source)?;
    let b = inv.view((0, 0), (k, k)).into_owned();
    // Symmetrise away rounding so that quadratic forms are exactly symmetric.
    Ok((&b + b.transpose()) * 0.5)
}

/// Bending energy `tr(Yᵀ Bₑ Y)` of the spline taking `source` onto `target` (see the module
/// header for its scale).
pub fn bending_energy(source: &DMatrix<f64>, target: &DMatrix<f64>) -> Result<f64, TpsError> {
    same_shape(source, target)?;
    check_config(target)?;
    let b = bending_energy_matrix(source)?;
    Ok(energy_with(&b, target))
}

/// `tr(Yᵀ B Y)` for a precomputed bending-energy matrix `b`.
pub(crate) fn energy_with(b: &DMatrix<f64>, target: &DMatrix<f64>) -> f64 {
    (target.transpose() * b * target).trace()
}

/// A fitted thin-plate spline from a source to a target configuration.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Tps {
    source: DMatrix<f64>,
    /// Kernel weights, `k × m`; their columns sum to zero and are orthogonal to the source
    /// coordinates.
    weights: DMatrix<f64>,
    /// Affine part, `(m+1) × m`: first row the constant, then `A`.
    affine: DMatrix<f64>,
}

impl Tps {
    /// Fits the spline interpolating `source[i] ↦ target[i]`.
    pub fn fit(source: &DMatrix<f64>, target: &DMatrix<f64>) -> Result<Self, TpsError> {
        same_shape(source, target)?;
        check_config(target)?;
        let inv = l_inverse(source)?;
        let (k, m) = source.shape();
        let mut rhs = DMatrix::zeros(k + m + 1, m);
        rhs.view_mut((0, 0), (k, m)).copy_from(target);
        let sol = inv * rhs;
        Ok(Self {
            source: source.clone(),
            weights: sol.rows(0, k).into_owned(),
            affine: sol.rows(k, m + 1).into_owned(),
        })
    }

    /// Number of dimensions `m`.
    #[must_use]
    pub fn dims(&self) -> usize {
        self.source.ncols()
    }

    /// Kernel weights `W` (`k × m`).
    #[must_use]
    pub fn weights(&self) -> &DMatrix<f64> {
        &self.weights
    }

    /// Affine part: row 0 the constant `a₀`, rows `1..=m` the matrix `A` (so `x ↦ a₀ + xA` for a
    /// row vector `x`).
    #[must_use]
    pub fn affine(&self) -> &DMatrix<f64> {
        &self.affine
    }

    /// Warps one point (length `m`).
    #[must_use]
    pub fn warp_point(&self, x: &[f64]) -> DVector<f64> {
        let m = self.dims();
        let mut out = DVector::from_fn(m, |d, _| self.affine[(0, d)]);
        for (e, &xe) in x.iter().enumerate().take(m) {
            for d in 0..m {
                out[d] += xe * self.affine[(1 + e, d)];
            }
        }
        for i in 0..self.source.nrows() {
            let r = (0..m)
                .map(|d| (x.get(d).copied().unwrap_or(0.0) - self.source[(i, d)]).powi(2))
                .sum::<f64>()
                .sqrt();
            let u = kernel(r, m);
            for d in 0..m {
                out[d] += self.weights[(i, d)] * u;
            }
        }
        out
    }

    /// Warps each row of `points` (`n × m`).
    pub fn warp(&self, points: &DMatrix<f64>) -> Result<DMatrix<f64>, TpsError> {
        let m = self.dims();
        if points.ncols() != m {
            return Err(TpsError::ShapeMismatch {
                source_rows: self.source.nrows(),
                source_cols: m,
                target_rows: points.nrows(),
                target_cols: points.ncols(),
            });
        }
        let mut out = DMatrix::zeros(points.nrows(), m);
        let mut x = vec![0.0; m];
        for i in 0..points.nrows() {
            for d in 0..m {
                x[d] = points[(i, d)];
            }
            out.row_mut(i).copy_from(&self.warp_point(&x).transpose());
        }
        Ok(out)
    }

    /// Bending energy `tr(Wᵀ K W)` of this spline (equal to [`bending_energy`]).
    #[must_use]
    pub fn bending_energy(&self) -> f64 {
        let k = kernel_matrix(&self.source);
        (self.weights.transpose() * k * &self.weights).trace()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid_2d() -> DMatrix<f64> {
        // Five landmarks: square corners and centre, plus one off-grid point.
        DMatrix::from_row_slice(6, 2, &[0., 0., 1., 0., 1., 1., 0., 1., 0.5, 0.5, 0.2, 0.7])
    }

    fn tetra_3d() -> DMatrix<f64> {
        DMatrix::from_row_slice(
            7,
            3,
            &[
                0., 0., 0., 1., 0., 0., 0., 1., 0., 0., 0., 1., 1., 1., 1., 0.3, 0.6, 0.2, 0.8,
                0.1, 0.5,
            ],
        )
    }

    fn affine_image(src: &DMatrix<f64>) -> DMatrix<f64> {
        let m = src.ncols();
        let a = DMatrix::from_fn(m, m, |i, j| {
            if i == j {
                1.3 - 0.1 * i as f64
            } else {
                0.2 * (i as f64 - j as f64)
            }
        });
        let mut y = src * a;
        for mut row in y.row_iter_mut() {
            row[0] += 2.0;
            row[1] -= 0.5;
        }
        y
    }

    #[test]
    fn affine_deformation_has_zero_energy() {
        // Bookstein 1989: affine maps lie in the null space of the bending-energy matrix.
        for src in [grid_2d(), tetra_3d()] {
            let y = affine_image(&src);
            let e = bending_energy(&src, &y).unwrap();
            assert!(e.abs() < 1e-10, "energy {e}");
            let tps = Tps::fit(&src, &y).unwrap();
            assert!(tps.bending_energy().abs() < 1e-10);
            assert!(tps.weights().abs().max() < 1e-10);
        }
    }

    #[test]
    fn warp_interpolates_landmarks() {
        for src in [grid_2d(), tetra_3d()] {
            let mut y = affine_image(&src);
            y[(2, 0)] += 0.3;
            y[(4, 1)] -= 0.2;
            let tps = Tps::fit(&src, &y).unwrap();
            let w = tps.warp(&src).unwrap();
            assert!((w - &y).abs().max() < 1e-10);
            let e1 = tps.bending_energy();
            let e2 = bending_energy(&src, &y).unwrap();
            assert!(e1 > 0.0);
            assert!((e1 - e2).abs() < 1e-10 * e1.max(1.0), "{e1} vs {e2}");
        }
    }

    #[test]
    fn energy_matrix_is_psd_with_affine_null_space() {
        for src in [grid_2d(), tetra_3d()] {
            let b = bending_energy_matrix(&src).unwrap();
            let eig = b.clone().symmetric_eigen();
            let m = src.ncols();
            let mut ev: Vec<f64> = eig.eigenvalues.iter().copied().collect();
            ev.sort_by(f64::total_cmp);
            for v in &ev[..=m] {
                assert!(v.abs() < 1e-10, "{ev:?}");
            }
            for v in &ev[m + 1..] {
                assert!(*v > 1e-6, "{ev:?}");
            }
        }
    }

    #[test]
    fn energy_is_invariant_to_rigid_motion_of_target() {
        let src = grid_2d();
        let mut y = src.clone();
        y[(4, 0)] += 0.1;
        let e = bending_energy(&src, &y).unwrap();
        let (c, s) = (0.3f64.cos(), 0.3f64.sin());
        let r = DMatrix::from_row_slice(2, 2, &[c, s, -s, c]);
        let mut yr = &y * r;
        for mut row in yr.row_iter_mut() {
            row[0] += 5.0;
        }
        let er = bending_energy(&src, &yr).unwrap();
        assert!((e - er).abs() < 1e-10 * e);
    }

    #[test]
    fn degenerate_sources_are_rejected() {
        let collinear = DMatrix::from_row_slice(4, 2, &[0., 0., 1., 1., 2., 2., 3., 3.]);
        assert_eq!(bending_energy_matrix(&collinear), Err(TpsError::Degenerate));
        let dup = DMatrix::from_row_slice(4, 2, &[0., 0., 1., 0., 0., 1., 1., 0.]);
        assert_eq!(bending_energy_matrix(&dup), Err(TpsError::Degenerate));
        let two = DMatrix::from_row_slice(2, 2, &[0., 0., 1., 0.]);
        assert!(matches!(
            bending_energy_matrix(&two),
            Err(TpsError::TooFewLandmarks { .. })
        ));
        let four_d = DMatrix::zeros(6, 4);
        assert_eq!(l_matrix(&four_d), Err(TpsError::Dimension(4)));
        let mut nan = grid_2d();
        nan[(3, 1)] = f64::NAN;
        assert_eq!(l_matrix(&nan), Err(TpsError::NonFinite(3)));
    }

    /// The scale of the bending energy: `tr(Wᵀ K W)` equals `(1/8π) ∫∫ f_xx² + 2f_xy² + f_yy²`
    /// (from `Δ²U = 8πδ`; derivation in the module header). Checked by integrating the analytic
    /// second derivatives of the 2D spline numerically: midpoint rule on a polar grid out to a
    /// large radius, where the integrand decays as r⁻⁴.
    #[test]
    fn energy_matches_integral_2d() {
        let src = grid_2d();
        let mut y = src.clone();
        y[(4, 0)] += 0.2;
        y[(5, 1)] -= 0.1;
        let tps = Tps::fit(&src, &y).unwrap();
        let w = tps.weights();
        // Hessian of r² log r at offset (dx, dy): U_xx = 2 log r + 1 + 2dx²/r², U_xy = 2dxdy/r²,
        // U_yy = 2 log r + 1 + 2dy²/r².
        let integrand = |x: f64, y: f64| -> f64 {
            let mut total = 0.0;
            for d in 0..2 {
                let (mut fxx, mut fxy, mut fyy) = (0.0, 0.0, 0.0);
                for i in 0..src.nrows() {
                    let dx = x - src[(i, 0)];
                    let dy = y - src[(i, 1)];
                    let r2 = dx * dx + dy * dy;
                    let l = r2.ln();
                    fxx += w[(i, d)] * (l + 1.0 + 2.0 * dx * dx / r2);
                    fxy += w[(i, d)] * (2.0 * dx * dy / r2);
                    fyy += w[(i, d)] * (l + 1.0 + 2.0 * dy * dy / r2);
                }
                total += fxx * fxx + 2.0 * fxy * fxy + fyy * fyy;
            }
            total
        };
        // Polar grid centred on the configuration, log-spaced radii; singularities of the
        // Hessian at landmarks are logarithmic and integrable.
        let (cx, cy) = (0.5, 0.5);
        let (nr, nt) = (1500, 360);
        let (r0, r1) = (1e-4f64, 2e3f64);
        let mut sum = 0.0;
        let lr = (r1 / r0).ln() / f64::from(nr);
        for a in 0..nr {
            let ra = r0 * (lr * f64::from(a)).exp();
            let rb = r0 * (lr * f64::from(a + 1)).exp();
            let rm = (ra * rb).sqrt();
            for b in 0..nt {
                let t = (f64::from(b) + 0.5) * std::f64::consts::TAU / f64::from(nt);
                sum += integrand(cx + rm * t.cos(), cy + rm * t.sin())
                    * 0.5
                    * (rb * rb - ra * ra)
                    * std::f64::consts::TAU
                    / f64::from(nt);
            }
        }
        let expected = 8.0 * std::f64::consts::PI * tps.bending_energy();
        assert!(
            (sum - expected).abs() < 2e-3 * expected,
            "integral {sum} vs 8π·tr(WᵀKW) {expected}"
        );
    }
}
