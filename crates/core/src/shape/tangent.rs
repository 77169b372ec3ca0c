//! Tangent-space coordinates at the Procrustes mean.
//!
//! For shape (unit-size) superimpositions the tangent coordinates of a specimen `x` at the pole
//! `μ` (the mean, rescaled to unit size) are its orthogonal projection onto the tangent plane of
//! the preshape sphere at `μ`: `v = x − (x·μ) μ`, with `x·μ` the Frobenius inner product
//! (Dryden & Mardia 2016, *Statistical Shape Analysis*, 2nd ed., §4.4.1, partial Procrustes
//! tangent coordinates `v = (I − μμᵀ) x`). For a size-and-shape (unscaled) superimposition the
//! "tangent" coordinates are the plain residuals `x − μ`, the space being Euclidean.
//!
//! Rows of the returned `n × (k·m)` matrix are specimens; columns are landmark-major
//! (`x₁, y₁, z₁, x₂, …`), the same order as [`Sample`].

use nalgebra::{DMatrix, DVector};

use super::gpa::{Gpa, flat, sum_sq};
use super::{Sample, ShapeError};

/// Tangent coordinates of a GPA result at its mean (see the module docs).
#[must_use]
pub fn tangent_coordinates(g: &Gpa) -> DMatrix<f64> {
    project(&g.aligned, &g.mean, g.scaled).expect("a GPA result is consistent")
}

/// Projects every specimen of `aligned` (already superimposed on `pole`) into the tangent space
/// at `pole`: orthogonal projection `x − (x·μ̂)μ̂` with `μ̂ = pole/‖pole‖` when `unit_size`, else
/// `x − pole`.
pub fn project(
    aligned: &Sample,
    pole: &DMatrix<f64>,
    unit_size: bool,
) -> Result<DMatrix<f64>, ShapeError> {
    let (n, k, m) = (aligned.n(), aligned.k(), aligned.m());
    if pole.shape() != (k, m) {
        return Err(ShapeError::ShapeMismatch {
            k,
            m,
            got_k: pole.nrows(),
            got_m: pole.ncols(),
        });
    }
    let mut mu = flat(pole);
    if unit_size {
        let s = sum_sq(&mu).sqrt();
        if s == 0.0 {
            return Err(ShapeError::ZeroSize(0));
        }
        for v in &mut mu {
            *v /= s;
        }
    }
    let km = k * m;
    let mut out = DMatrix::zeros(n, km);
    for i in 0..n {
        let x = aligned.config_slice(i);
        if unit_size {
            let dot: f64 = x.iter().zip(&mu).map(|(a, b)| a * b).sum();
            for c in 0..km {
                out[(i, c)] = x[c] - dot * mu[c];
            }
        } else {
            for c in 0..km {
                out[(i, c)] = x[c] - mu[c];
            }
        }
    }
    Ok(out)
}

/// Maps tangent coordinates `v` (length `k·m`) at `pole` back to a configuration.
///
/// With `unit_size`, the exact inverse of the orthogonal projection onto the unit preshape
/// sphere, `x = √(1 − ‖v‖²) μ̂ + v` (Dryden & Mardia 2016, §4.4.1), which needs `‖v‖ < 1`
/// (otherwise the point has no preimage and an error is returned); else `x = pole + v`.
pub fn from_tangent(
    v: &DVector<f64>,
    pole: &DMatrix<f64>,
    unit_size: bool,
) -> Result<DMatrix<f64>, ShapeError> {
    let (k, m) = pole.shape();
    if v.len() != k * m {
        return Err(ShapeError::LabelMismatch {
            what: "tangent vector",
            expected: k * m,
            got: v.len(),
        });
    }
    let mut mu = flat(pole);
    let w = if unit_size {
        let s = sum_sq(&mu).sqrt();
        if s == 0.0 {
            return Err(ShapeError::ZeroSize(0));
        }
        for x in &mut mu {
            *x /= s;
        }
        let vv = v.norm_squared();
        if vv >= 1.0 {
            return Err(ShapeError::InvalidOption(format!(
                "tangent vector of length {:.3} lies outside the unit preshape sphere",
                vv.sqrt()
            )));
        }
        (1.0 - vv).sqrt()
    } else {
        1.0
    };
    Ok(DMatrix::from_fn(k, m, |j, d| {
        w * mu[j * m + d] + v[j * m + d]
    }))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::shape::gpa::{GpaOptions, gpa};

    #[test]
    fn tangent_vectors_are_orthogonal_to_the_pole_and_invert() {
        let s = Sample::new(
            3,
            4,
            2,
            vec![
                0.0, 0.0, 1.0, 0.1, 1.1, 1.0, -0.1, 0.9, //
                0.0, 0.0, 1.2, 0.0, 1.0, 1.1, 0.0, 1.0, //
                0.1, 0.0, 0.9, -0.1, 1.0, 0.8, 0.1, 1.2,
            ],
        )
        .unwrap();
        let g = gpa(&s, &GpaOptions::default()).unwrap();
        let t = tangent_coordinates(&g);
        let mu = flat(&g.mean);
        for i in 0..3 {
            let v = t.row(i).transpose();
            let dot: f64 = v.iter().zip(&mu).map(|(a, b)| a * b).sum();
            assert!(dot.abs() < 1e-14);
            // Inverse projection recovers the unit-size aligned specimen (x·μ > 0 here).
            let back = from_tangent(&v, &g.mean, true).unwrap();
            assert!((back - g.aligned.config(i)).norm() < 1e-12);
        }
        // The column means of the tangent coordinates vanish at the converged mean.
        for c in 0..8 {
            assert!(t.column(c).mean().abs() < 1e-9);
        }
    }
}
