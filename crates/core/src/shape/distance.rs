//! Procrustes distances between shapes (Dryden & Mardia 2016, *Statistical Shape Analysis*,
//! 2nd ed., §3.3): for centred unit-size preshapes `X`, `Y` the Procrustes angle
//! `ρ = arccos(max_R tr(Rᵀ Xᵀ Y))` over proper rotations, the partial Procrustes distance
//! `d_P = 2 sin(ρ/2)` (translation and rotation removed, both of unit size) and the full
//! Procrustes distance `d_F = sin ρ` (the target also optimally scaled). All three are
//! invariant to translating, rotating and scaling either input, and `0 ≤ d_F ≤ d_P ≤ ρ`.

use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::Serialize;

use super::gpa::{centre_in_place, cross, flat, proper_rotation, sum_sq};
use super::{Sample, ShapeError};

/// Which Procrustes distance to compute.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub enum Distance {
    /// The Procrustes angle ρ (the Riemannian distance in shape space), radians.
    #[default]
    Angle,
    /// Partial Procrustes distance `2 sin(ρ/2)`.
    Partial,
    /// Full Procrustes distance `sin ρ`.
    Full,
}

impl Distance {
    /// Converts a Procrustes angle to this distance.
    #[must_use]
    pub fn from_angle(self, rho: f64) -> f64 {
        match self {
            Self::Angle => rho,
            Self::Partial => 2.0 * (rho / 2.0).sin(),
            Self::Full => rho.sin(),
        }
    }
}

/// ρ for two flat centred configurations with their norms. Computed as `2 asin(d_P / 2)` from
/// the residual `d_P = ‖x̂R − ŷ‖` of the unit-size preshapes rather than `acos(tr)`, which
/// cannot resolve angles below ~1.5e-8.
pub(crate) fn angle_flat(
    x: &[f64],
    y: &[f64],
    nx: f64,
    ny: f64,
    m: usize,
) -> Result<f64, ShapeError> {
    let (r, _) = proper_rotation(&cross(x, y, m), m)?;
    let mut ss = 0.0;
    for (p, q) in x.chunks_exact(m).zip(y.chunks_exact(m)) {
        for b in 0..m {
            let rot: f64 = (0..m).map(|a| p[a] * r[a * m + b]).sum();
            ss += (rot / nx - q[b] / ny).powi(2);
        }
    }
    Ok(2.0 * (ss.sqrt() / 2.0).min(1.0).asin())
}

fn prepared(c: &DMatrix<f64>, which: usize) -> Result<(Vec<f64>, f64), ShapeError> {
    let m = c.ncols();
    if m != 2 && m != 3 {
        return Err(ShapeError::UnsupportedDimension(m));
    }
    if c.iter().any(|v| !v.is_finite()) {
        return Err(ShapeError::NonFinite {
            specimen: which,
            landmark: c.iter().position(|v| !v.is_finite()).unwrap_or(0) % c.nrows(),
        });
    }
    let mut x = flat(c);
    centre_in_place(&mut x, m);
    let n = sum_sq(&x).sqrt();
    if n == 0.0 {
        return Err(ShapeError::ZeroSize(which));
    }
    Ok((x, n))
}

/// The Procrustes angle ρ ∈ [0, π/2] between two `k × m` configurations (any position, size,
/// orientation); reflections are not allowed.
pub fn procrustes_angle(a: &DMatrix<f64>, b: &DMatrix<f64>) -> Result<f64, ShapeError> {
    if a.shape() != b.shape() {
        return Err(ShapeError::ShapeMismatch {
            k: a.nrows(),
            m: a.ncols(),
            got_k: b.nrows(),
            got_m: b.ncols(),
        });
    }
    let (x, nx) = prepared(a, 0)?;
    let (y, ny) = prepared(b, 1)?;
    angle_flat(&x, &y, nx, ny, a.ncols())
}

/// Partial Procrustes distance `d_P = 2 sin(ρ/2)`.
pub fn partial_procrustes_distance(a: &DMatrix<f64>, b: &DMatrix<f64>) -> Result<f64, ShapeError> {
    Ok(Distance::Partial.from_angle(procrustes_angle(a, b)?))
}

/// Full Procrustes distance `d_F = sin ρ`.
pub fn full_procrustes_distance(a: &DMatrix<f64>, b: &DMatrix<f64>) -> Result<f64, ShapeError> {
    Ok(Distance::Full.from_angle(procrustes_angle(a, b)?))
}

/// The symmetric `n × n` matrix of `kind` distances between all pairs of specimens (zero
/// diagonal). Computed directly from each pair, so no prior superimposition is needed.
pub fn distance_matrix(sample: &Sample, kind: Distance) -> Result<DMatrix<f64>, ShapeError> {
    let (n, m) = (sample.n(), sample.m());
    let km = sample.k() * m;
    let mut pre = sample.data().to_vec();
    let norms: Vec<f64> = pre
        .chunks_exact_mut(km)
        .map(|c| {
            centre_in_place(c, m);
            sum_sq(c).sqrt()
        })
        .collect();
    if let Some(i) = norms.iter().position(|&v| v == 0.0) {
        return Err(ShapeError::ZeroSize(i));
    }
    let rows: Vec<Vec<f64>> = (0..n)
        .into_par_iter()
        .map(|i| {
            (0..n)
                .map(|j| {
                    if j <= i {
                        return Ok(0.0);
                    }
                    let rho = angle_flat(
                        &pre[i * km..(i + 1) * km],
                        &pre[j * km..(j + 1) * km],
                        norms[i],
                        norms[j],
                        m,
                    )?;
                    Ok(kind.from_angle(rho))
                })
                .collect::<Result<Vec<f64>, ShapeError>>()
        })
        .collect::<Result<_, _>>()?;
    Ok(DMatrix::from_fn(n, n, |i, j| match i.cmp(&j) {
        std::cmp::Ordering::Less => rows[i][j],
        std::cmp::Ordering::Greater => rows[j][i],
        std::cmp::Ordering::Equal => 0.0,
    }))
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "these tests check values that are exact by construction"
)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    fn tri(p: [f64; 6]) -> DMatrix<f64> {
        DMatrix::from_row_slice(3, 2, &p)
    }

    #[test]
    fn triangle_facts() {
        // Kendall's shape space of triangles is a sphere of radius 1/2 (Kendall 1984, Bull.
        // London Math. Soc. 16:81–121; Dryden & Mardia 2016 §4.3.4): the equilateral triangle
        // and its reflection are antipodal poles, so ρ between them is the maximum, π/2.
        let h = 3f64.sqrt() / 2.0;
        let eq = tri([0.0, 0.0, 1.0, 0.0, 0.5, h]);
        let refl = tri([0.0, 0.0, 1.0, 0.0, 0.5, -h]);
        let rho = procrustes_angle(&eq, &refl).unwrap();
        assert!((rho - PI / 2.0).abs() < 1e-12, "{rho}");
        assert!((full_procrustes_distance(&eq, &refl).unwrap() - 1.0).abs() < 1e-12);
        assert!((partial_procrustes_distance(&eq, &refl).unwrap() - 2f64.sqrt()).abs() < 1e-12);
        // A degenerate (collinear) triangle lies on the equator: ρ = π/4 from the equilateral
        // pole (same sphere picture, from memory of Kendall's spherical representation;
        // checked independently by the complex formula test in tests/shape_reference.rs).
        let line = tri([0.0, 0.0, 1.0, 0.0, 2.0, 0.0]);
        let rho2 = procrustes_angle(&eq, &line).unwrap();
        assert!((rho2 - PI / 4.0).abs() < 1e-12, "{rho2}");
    }

    #[test]
    fn distance_matrix_is_symmetric_and_matches_pairs() {
        let s = Sample::new(
            3,
            3,
            2,
            vec![
                0.0, 0.0, 1.0, 0.0, 0.3, 0.9, 0.0, 0.0, 2.0, 0.1, 1.0, 1.0, 1.0, 1.0, 0.0, 3.0,
                0.5, -0.2,
            ],
        )
        .unwrap();
        for kind in [Distance::Angle, Distance::Partial, Distance::Full] {
            let d = distance_matrix(&s, kind).unwrap();
            for i in 0..3 {
                assert_eq!(d[(i, i)], 0.0);
                for j in 0..3 {
                    assert_eq!(d[(i, j)], d[(j, i)]);
                    if i != j {
                        let rho = procrustes_angle(&s.config(i), &s.config(j)).unwrap();
                        assert!((d[(i, j)] - kind.from_angle(rho)).abs() < 1e-14);
                    }
                }
            }
        }
    }
}
