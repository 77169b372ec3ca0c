//! Shape statistics on landmark configurations: superimposition, distances, tangent
//! coordinates, morphospace and disparity.
//!
//! This module owns the statistics of *many specimens*. It works on plain landmark arrays
//! ([`Sample`]: specimens × landmarks × coordinates, f64) and must not import `volume`, `io`,
//! `render` or `gui`; the landmark document and the CLI convert to and from a [`Sample`].
//!
//! Conventions used throughout:
//! - A configuration is a `k × m` matrix, one landmark per row (`m` = 2 or 3).
//! - Rotations act on the right: an aligned configuration is `s · X · R + 1 tᵀ`.
//! - Rotations are always proper (`det R = +1`); reflections are never allowed, so a
//!   specimen and its mirror image have a positive Procrustes distance.
//! - Missing landmarks are not handled here; estimate them first (`NaN` is rejected).
//!
//! Submodules: [`gpa`] (ordinary and generalized Procrustes superimposition), [`distance`]
//! (Procrustes angle, partial and full distances, distance matrices), [`tangent`] (tangent-space
//! projection), [`pca`] (morphospace and allometry), [`disparity`] (Procrustes variance and its
//! resampling).

pub mod disparity;
pub mod distance;
pub mod gpa;
pub mod pca;
pub mod tangent;

// Second half (branch shape2): splines, missing landmarks, sliding, measurement error, symmetry.
mod align;
pub mod anova;
pub mod missing;
pub mod sliding;
pub mod symmetry;
pub mod tps;

use nalgebra::DMatrix;
use serde::Serialize;
use thiserror::Error;

pub use gpa::{Fit, Gpa, GpaOptions, OpaResult, gpa, opa};

/// Errors of the shape statistics. All are caller misuse or degenerate data; none is I/O.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum ShapeError {
    /// Landmark dimension other than 2 or 3.
    #[error("landmarks have {0} coordinates; only 2D and 3D configurations are supported")]
    UnsupportedDimension(usize),
    /// `data.len()` does not equal `n * k * m` (or the product overflows).
    #[error(
        "sample of {n} specimens x {k} landmarks x {m} coordinates needs {expected} values, got {got}"
    )]
    LengthMismatch {
        n: usize,
        k: usize,
        m: usize,
        expected: usize,
        got: usize,
    },
    /// Too few specimens for the requested operation.
    #[error("{what} needs at least {needed} specimens, got {got}")]
    TooFewSpecimens {
        what: &'static str,
        needed: usize,
        got: usize,
    },
    /// Too few landmarks for a shape (at least 2 distinct points, 3 for a shape with rotation).
    #[error("a configuration needs at least {needed} landmarks, got {got}")]
    TooFewLandmarks { needed: usize, got: usize },
    /// Two configurations (or a configuration and a sample) differ in size.
    #[error("configuration is {got_k}x{got_m}, expected {k}x{m}")]
    ShapeMismatch {
        k: usize,
        m: usize,
        got_k: usize,
        got_m: usize,
    },
    /// A coordinate is NaN or infinite.
    #[error(
        "specimen {specimen}, landmark {landmark}: coordinate is not finite (estimate missing landmarks first)"
    )]
    NonFinite { specimen: usize, landmark: usize },
    /// All landmarks of a configuration coincide, so it has no shape.
    #[error("specimen {0}: all landmarks coincide (centroid size 0)")]
    ZeroSize(usize),
    /// A configuration's centroid size exceeds the largest floating-point number.
    #[error("specimen {0}: coordinates too large (centroid size beyond 1.8e308)")]
    TooLarge(usize),
    /// In a full Procrustes fit a specimen lies 90° (the largest Procrustes distance) from the
    /// mean shape, so the fit scales it by cos 90° = 0 and it loses its shape.
    #[error(
        "specimen {0}: 90° from the mean shape (as far apart as shapes can be), so a full Procrustes fit scales it to a point; use the partial fit"
    )]
    FullFitCollapse(usize),
    /// The specimens cancel out: their mean configuration has size 0.
    #[error("the specimens' mean configuration has size 0 (they cancel out); no mean shape")]
    ZeroMean,
    /// A decomposition failed to converge.
    #[error("{0} did not converge")]
    NoConvergence(&'static str),
    /// An option value is invalid.
    #[error("invalid option: {0}")]
    InvalidOption(String),
    /// A label or index vector does not match the sample.
    #[error("{what} has {got} entries, expected {expected}")]
    LabelMismatch {
        what: &'static str,
        expected: usize,
        got: usize,
    },
}

/// A sample of `n` landmark configurations of `k` landmarks in `m` dimensions.
///
/// Stored flat, specimen-major, then landmark, then coordinate:
/// `data[(i * k + j) * m + c]` is coordinate `c` of landmark `j` of specimen `i`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Sample {
    n: usize,
    k: usize,
    m: usize,
    data: Vec<f64>,
}

impl Sample {
    /// Wraps flat data; checks `m ∈ {2, 3}`, `k ≥ 1`, the length and that every value is finite.
    pub fn new(n: usize, k: usize, m: usize, data: Vec<f64>) -> Result<Self, ShapeError> {
        if m != 2 && m != 3 {
            return Err(ShapeError::UnsupportedDimension(m));
        }
        if k == 0 {
            return Err(ShapeError::TooFewLandmarks { needed: 1, got: 0 });
        }
        let expected = n.checked_mul(k).and_then(|v| v.checked_mul(m));
        if expected != Some(data.len()) {
            return Err(ShapeError::LengthMismatch {
                n,
                k,
                m,
                expected: expected.unwrap_or(usize::MAX),
                got: data.len(),
            });
        }
        if let Some(pos) = data.iter().position(|v| !v.is_finite()) {
            return Err(ShapeError::NonFinite {
                specimen: pos / (k * m),
                landmark: (pos / m) % k,
            });
        }
        Ok(Self { n, k, m, data })
    }

    /// Builds a sample from `k × m` configurations (all the same size, at least one).
    pub fn from_configs(configs: &[DMatrix<f64>]) -> Result<Self, ShapeError> {
        let Some(first) = configs.first() else {
            return Err(ShapeError::TooFewSpecimens {
                what: "a sample",
                needed: 1,
                got: 0,
            });
        };
        let (k, m) = first.shape();
        let mut data = Vec::with_capacity(configs.len() * k * m);
        for c in configs {
            if c.shape() != (k, m) {
                return Err(ShapeError::ShapeMismatch {
                    k,
                    m,
                    got_k: c.nrows(),
                    got_m: c.ncols(),
                });
            }
            for j in 0..k {
                for d in 0..m {
                    data.push(c[(j, d)]);
                }
            }
        }
        Self::new(configs.len(), k, m, data)
    }

    /// Number of specimens.
    #[must_use]
    pub fn n(&self) -> usize {
        self.n
    }

    /// Number of landmarks per specimen.
    #[must_use]
    pub fn k(&self) -> usize {
        self.k
    }

    /// Number of coordinates per landmark (2 or 3).
    #[must_use]
    pub fn m(&self) -> usize {
        self.m
    }

    /// The flat data (see the type's docs for the order).
    #[must_use]
    pub fn data(&self) -> &[f64] {
        &self.data
    }

    /// Specimen `i` as a `k × m` matrix. Panics if `i >= n`.
    #[must_use]
    pub fn config(&self, i: usize) -> DMatrix<f64> {
        DMatrix::from_row_slice(self.k, self.m, self.config_slice(i))
    }

    /// Specimen `i` as its flat row-major `k·m` slice. Panics if `i >= n`.
    #[must_use]
    pub fn config_slice(&self, i: usize) -> &[f64] {
        let len = self.k * self.m;
        &self.data[i * len..(i + 1) * len]
    }

    /// A new sample holding the specimens at `indices` (in that order; repeats allowed).
    /// Panics if an index is out of range.
    #[must_use]
    pub fn select(&self, indices: &[usize]) -> Self {
        let mut data = Vec::with_capacity(indices.len() * self.k * self.m);
        for &i in indices {
            data.extend_from_slice(self.config_slice(i));
        }
        Self {
            n: indices.len(),
            k: self.k,
            m: self.m,
            data,
        }
    }

    /// The whole sample as an `n × (k·m)` matrix, one flattened configuration per row.
    #[must_use]
    pub fn to_rows(&self) -> DMatrix<f64> {
        DMatrix::from_row_slice(self.n, self.k * self.m, &self.data)
    }
}

/// Centroid size: the square root of the summed squared distances of the landmarks from their
/// centroid (Dryden & Mardia 2016, *Statistical Shape Analysis*, 2nd ed., eq. 2.1).
#[must_use]
pub fn centroid_size(config: &DMatrix<f64>) -> f64 {
    let k = config.nrows();
    if k == 0 {
        return 0.0;
    }
    let mut ss = 0.0;
    for c in 0..config.ncols() {
        let col = config.column(c);
        let mean = col.sum() / k as f64;
        ss += col.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>();
    }
    ss.sqrt()
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "these tests check values that are exact by construction"
)]
mod tests {
    use super::*;

    #[test]
    fn sample_layout_and_checks() {
        let s = Sample::new(2, 3, 2, (0..12).map(f64::from).collect()).unwrap();
        assert_eq!(s.config(1)[(2, 1)], 11.0);
        assert_eq!(s.config_slice(0), &[0.0, 1.0, 2.0, 3.0, 4.0, 5.0]);
        let back = Sample::from_configs(&[s.config(0), s.config(1)]).unwrap();
        assert_eq!(back, s);
        assert!(matches!(
            Sample::new(1, 3, 4, vec![0.0; 12]),
            Err(ShapeError::UnsupportedDimension(4))
        ));
        assert!(matches!(
            Sample::new(2, 3, 2, vec![0.0; 11]),
            Err(ShapeError::LengthMismatch { .. })
        ));
        assert!(matches!(
            Sample::new(usize::MAX, 3, 2, vec![]),
            Err(ShapeError::LengthMismatch { .. })
        ));
        let mut d = vec![0.0; 12];
        d[9] = f64::NAN;
        assert_eq!(
            Sample::new(2, 3, 2, d),
            Err(ShapeError::NonFinite {
                specimen: 1,
                landmark: 1
            })
        );
    }

    #[test]
    fn centroid_size_of_unit_square() {
        // Four corners of a unit square: each at distance sqrt(1/2) from the centre, so
        // CS = sqrt(4 * 1/2) = sqrt(2) (definition, Dryden & Mardia 2016 eq. 2.1).
        let sq = DMatrix::from_row_slice(4, 2, &[0.0, 0.0, 1.0, 0.0, 1.0, 1.0, 0.0, 1.0]);
        assert!((centroid_size(&sq) - 2f64.sqrt()).abs() < 1e-15);
    }
}
