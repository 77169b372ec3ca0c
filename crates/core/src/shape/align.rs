//! Small similarity-fitting helpers shared by the missing-landmark, sliding and symmetry code.
//!
//! These work on single `k × m` configurations (rows are landmarks) and exist so that those
//! modules can move between a specimen's own frame and the Procrustes frame without relying on
//! what the GPA result exposes about each specimen's transform.

use nalgebra::{DMatrix, RowDVector};

/// A similarity `x ↦ s·x·R + t` acting on row vectors.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Similarity {
    pub scale: f64,
    pub rotation: DMatrix<f64>,
    pub translation: RowDVector<f64>,
}

impl Similarity {
    pub fn apply(&self, x: &DMatrix<f64>) -> DMatrix<f64> {
        let mut y = x * &self.rotation * self.scale;
        for mut row in y.row_iter_mut() {
            row += &self.translation;
        }
        y
    }

    /// The inverse map `y ↦ (y − t)·Rᵀ/s`; `None` for zero scale.
    pub fn inverse(&self) -> Option<Self> {
        if self.scale == 0.0 || !self.scale.is_finite() {
            return None;
        }
        let rotation = self.rotation.transpose();
        let translation = -(&self.translation * &rotation) / self.scale;
        Some(Self {
            scale: 1.0 / self.scale,
            rotation,
            translation,
        })
    }
}

/// Centroid (row mean) of a configuration.
pub(crate) fn centroid(x: &DMatrix<f64>) -> RowDVector<f64> {
    x.row_mean()
}

/// `x` with its centroid subtracted.
pub(crate) fn centred(x: &DMatrix<f64>) -> DMatrix<f64> {
    let c = centroid(x);
    let mut y = x.clone();
    for mut row in y.row_iter_mut() {
        row -= &c;
    }
    y
}

/// Least-squares similarity (rotation without reflection, optional scaling) taking `from` onto
/// `to` (Umeyama 1991, IEEE PAMI 13(4), eqs. 40–42; the determinant sign fix excludes
/// reflections). With `allow_scale = false` the scale is 1. Returns `None` when `from` has zero
/// size or the SVD fails.
pub(crate) fn fit_similarity(
    from: &DMatrix<f64>,
    to: &DMatrix<f64>,
    allow_scale: bool,
) -> Option<Similarity> {
    let m = from.ncols();
    let a = centred(from);
    let b = centred(to);
    let size2 = a.norm_squared();
    if size2 <= 0.0 || !size2.is_finite() {
        return None;
    }
    let h = a.transpose() * &b;
    let svd = h.svd(true, true);
    let u = svd.u?;
    let v_t = svd.v_t?;
    let mut d = DMatrix::<f64>::identity(m, m);
    if (&u * &v_t).determinant() < 0.0 {
        d[(m - 1, m - 1)] = -1.0;
    }
    let rotation = &u * &d * &v_t;
    let trace: f64 = (0..m).map(|i| svd.singular_values[i] * d[(i, i)]).sum();
    let scale = if allow_scale { trace / size2 } else { 1.0 };
    let translation = centroid(to) - centroid(from) * &rotation * scale;
    Some(Similarity {
        scale,
        rotation,
        translation,
    })
}

/// Partial Procrustes distance between two configurations: both centred and scaled to unit
/// centroid size, then `min_R ‖X − Y R‖` over rotations (Dryden & Mardia 2016, Statistical Shape
/// Analysis, 2nd ed., sec. 3.2; equals `2 sin(ρ/2)` with ρ the Procrustes distance).
/// `None` when either has zero size.
pub(crate) fn partial_procrustes_distance(x: &DMatrix<f64>, y: &DMatrix<f64>) -> Option<f64> {
    let a = centred(x);
    let b = centred(y);
    let (na, nb) = (a.norm(), b.norm());
    if na <= 0.0 || nb <= 0.0 {
        return None;
    }
    let a = a / na;
    let b = b / nb;
    let s = fit_similarity(&b, &a, false)?;
    Some((s.apply(&b) - a).norm())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recovers_a_known_similarity() {
        let x = DMatrix::from_row_slice(4, 3, &[0., 0., 0., 1., 0., 0., 0., 2., 0., 0., 0., 3.]);
        let (c, s) = (0.4f64.cos(), 0.4f64.sin());
        let r = DMatrix::from_row_slice(3, 3, &[c, s, 0., -s, c, 0., 0., 0., 1.]);
        let t = RowDVector::from_row_slice(&[1., -2., 0.5]);
        let truth = Similarity {
            scale: 1.7,
            rotation: r,
            translation: t,
        };
        let y = truth.apply(&x);
        let fit = fit_similarity(&x, &y, true).unwrap();
        assert!((fit.scale - 1.7).abs() < 1e-12);
        assert!((fit.apply(&x) - y).abs().max() < 1e-12);
    }

    #[test]
    fn distance_is_zero_for_similar_and_matches_complex_formula() {
        // Dryden & Mardia 2016, sec. 3.2 (planar case): cos ρ = |z* w| / (‖z‖ ‖w‖) for centred
        // complex configurations, d_P = 2 sin(ρ/2).
        let x = DMatrix::from_row_slice(4, 2, &[0., 0., 2., 0., 2., 1., 0., 1.5]);
        let y = DMatrix::from_row_slice(4, 2, &[0.1, 0., 2., 0.3, 1.8, 1., 0., 1.]);
        let zx: Vec<(f64, f64)> = {
            let c = centred(&x);
            (0..4).map(|i| (c[(i, 0)], c[(i, 1)])).collect()
        };
        let zy: Vec<(f64, f64)> = {
            let c = centred(&y);
            (0..4).map(|i| (c[(i, 0)], c[(i, 1)])).collect()
        };
        // z* w = Σ conj(z) w
        let (mut re, mut im) = (0.0, 0.0);
        for (a, b) in zx.iter().zip(&zy) {
            re += a.0 * b.0 + a.1 * b.1;
            im += a.0 * b.1 - a.1 * b.0;
        }
        let nz: f64 = zx.iter().map(|a| a.0 * a.0 + a.1 * a.1).sum::<f64>().sqrt();
        let nw: f64 = zy.iter().map(|a| a.0 * a.0 + a.1 * a.1).sum::<f64>().sqrt();
        let rho = (re.hypot(im) / (nz * nw)).acos();
        let expected = 2.0 * (rho / 2.0).sin();
        let d = partial_procrustes_distance(&x, &y).unwrap();
        assert!((d - expected).abs() < 1e-12, "{d} vs {expected}");
        let (c, s) = (1.1f64.cos(), 1.1f64.sin());
        let r = DMatrix::from_row_slice(2, 2, &[c, s, -s, c]);
        assert!(partial_procrustes_distance(&x, &(&x * r * 3.0)).unwrap() < 1e-12);
    }
}
