//! Measurement error from repeated digitisations: one-way (Procrustes) ANOVA and repeatability.
//!
//! The design is one-way random: each individual is digitised `rᵢ ≥ 1` times, `N = Σ rᵢ`
//! configurations in all, `a` individuals. Between-individual and within-individual
//! (measurement-error) sums of squares are
//!
//! ```text
//! SS_ind = Σᵢ rᵢ ‖x̄ᵢ − x̄‖²        SS_err = Σᵢ Σⱼ ‖xᵢⱼ − x̄ᵢ‖²
//! ```
//!
//! summed over every coordinate of the Procrustes-aligned configurations (Klingenberg and `McIntyre`
//! 1998, "Geometric morphometrics of developmental instability", Evolution 52(5), the
//! individual + error part of their Procrustes ANOVA; Goodall 1991 for the F test).
//!
//! **Degrees of freedom.** For shape the per-individual degrees of freedom are multiplied by the
//! dimension of shape space after superimposition, `D = k·m − m − m(m−1)/2 − 1` (translation,
//! rotation and scale removed: `2k − 4` in 2D, `3k − 7` in 3D): `df_ind = (a − 1)·D`,
//! `df_err = (N − a)·D`. `D` cancels in `F = MS_ind / MS_err`, but not in the p-value, which is
//! from the F distribution with those degrees of freedom (Goodall's F, which assumes isotropic
//! variation). For a single linear measurement (e.g. centroid size) `D = 1`.
//!
//! **Repeatability.** The intraclass correlation from the mean squares,
//! `ICC = (MS_ind − MS_err) / (MS_ind + (n₀ − 1)·MS_err)`, with `n₀` the replicates per
//! individual, and for unbalanced designs `n₀ = (N − Σ rᵢ² / N) / (a − 1)` (Lessells & Boag
//! 1987, "Unrepeatable repeatabilities: a common mistake", Auk 104, eqs. 1–3; Sokal & Rohlf,
//! Biometry, one-way random ANOVA, from memory). It may be negative when `MS_ind < MS_err`.

use nalgebra::DMatrix;
use serde::Serialize;
use statrs::distribution::{ContinuousCDF, FisherSnedecor};
use thiserror::Error;

use super::{Gpa, GpaOptions, Sample, ShapeError, centroid_size, gpa};

mod operators;
pub use operators::{
    OperatorAnova, OperatorTerm, ProcrustesOperatorAnova, VarianceComponents,
    procrustes_operator_anova, two_way,
};

/// Failures of the ANOVA.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum AnovaError {
    /// The label list and the data disagree in length.
    #[error("{labels} individual labels for {rows} measurements")]
    LabelCount { labels: usize, rows: usize },
    /// Fewer than two individuals.
    #[error("{0} individual(s): at least 2 are needed")]
    TooFewIndividuals(usize),
    /// No individual was measured twice, so there is no error term.
    #[error(
        "{measurements} measurements of {individuals} individuals: no replicates, no error term"
    )]
    NoReplicates {
        measurements: usize,
        individuals: usize,
    },
    /// A measurement is NaN or infinite.
    #[error("measurement {0} is not finite")]
    NonFinite(usize),
    /// Superimposition failed.
    #[error("superimposition for the ANOVA: {0}")]
    Shape(#[from] ShapeError),
    /// Fewer than two operators.
    #[error("{0} operator(s): the operator ANOVA needs at least 2")]
    TooFewOperators(usize),
}

/// One row of an ANOVA table.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct AnovaTerm {
    pub ss: f64,
    pub df: f64,
    pub ms: f64,
}

/// A one-way ANOVA of individuals against measurement error, with repeatability.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnovaTable {
    pub individual: AnovaTerm,
    pub error: AnovaTerm,
    pub total_ss: f64,
    /// `MS_ind / MS_err` (infinite when the error is exactly zero and individuals differ).
    pub f: f64,
    /// Upper tail of `F(df_ind, df_err)` at `f`.
    pub p: f64,
    /// Number of individuals `a`.
    pub individuals: usize,
    /// Number of measurements `N`.
    pub measurements: usize,
    /// Replicates per individual `n₀` (the unbalanced-design average of the module header).
    pub replicates: f64,
    /// Intraclass correlation `(MS_ind − MS_err) / (MS_ind + (n₀ − 1) MS_err)`.
    pub repeatability: f64,
}

/// Group index (0..a) of each row, in order of first appearance, and the group sizes.
pub(super) fn groups(labels: &[usize]) -> (Vec<usize>, Vec<usize>) {
    let mut seen: Vec<usize> = Vec::new();
    let mut index = Vec::with_capacity(labels.len());
    let mut sizes = Vec::new();
    for &l in labels {
        let g = if let Some(g) = seen.iter().position(|&s| s == l) {
            g
        } else {
            seen.push(l);
            sizes.push(0);
            seen.len() - 1
        };
        sizes[g] += 1;
        index.push(g);
    }
    (index, sizes)
}

/// One-way ANOVA of the rows of `data` (`N × p`, every column a variable) grouped by `labels`,
/// with sums of squares summed over the columns and degrees of freedom multiplied by `dims`.
pub fn one_way(
    data: &DMatrix<f64>,
    labels: &[usize],
    dims: usize,
) -> Result<AnovaTable, AnovaError> {
    let n = data.nrows();
    if labels.len() != n {
        return Err(AnovaError::LabelCount {
            labels: labels.len(),
            rows: n,
        });
    }
    for i in 0..n {
        if data.row(i).iter().any(|v| !v.is_finite()) {
            return Err(AnovaError::NonFinite(i));
        }
    }
    let (index, sizes) = groups(labels);
    let a = sizes.len();
    if a < 2 {
        return Err(AnovaError::TooFewIndividuals(a));
    }
    if n <= a {
        return Err(AnovaError::NoReplicates {
            measurements: n,
            individuals: a,
        });
    }
    let p = data.ncols();
    let grand = data.row_mean();
    let mut means = DMatrix::zeros(a, p);
    for (i, &g) in index.iter().enumerate() {
        let mut row = means.row_mut(g);
        row += data.row(i);
    }
    for (g, &s) in sizes.iter().enumerate() {
        let mut row = means.row_mut(g);
        row /= s as f64;
    }
    let mut ss_ind = 0.0;
    for (g, &s) in sizes.iter().enumerate() {
        ss_ind += s as f64 * (means.row(g) - &grand).norm_squared();
    }
    let mut ss_err = 0.0;
    let mut ss_tot = 0.0;
    for (i, &g) in index.iter().enumerate() {
        ss_err += (data.row(i) - means.row(g)).norm_squared();
        ss_tot += (data.row(i) - &grand).norm_squared();
    }
    let dims = dims as f64;
    let df_ind = (a - 1) as f64 * dims;
    let df_err = (n - a) as f64 * dims;
    let ms_ind = ss_ind / df_ind;
    let ms_err = ss_err / df_err;
    let f = ms_ind / ms_err;
    let p_value = if f.is_nan() {
        f64::NAN
    } else if f.is_infinite() {
        0.0
    } else {
        FisherSnedecor::new(df_ind, df_err).map_or(f64::NAN, |d| d.sf(f))
    };
    let nf = n as f64;
    let sum_sq: f64 = sizes.iter().map(|&s| (s * s) as f64).sum();
    let n0 = (nf - sum_sq / nf) / (a - 1) as f64;
    let repeatability = (ms_ind - ms_err) / (ms_ind + (n0 - 1.0) * ms_err);
    Ok(AnovaTable {
        individual: AnovaTerm {
            ss: ss_ind,
            df: df_ind,
            ms: ms_ind,
        },
        error: AnovaTerm {
            ss: ss_err,
            df: df_err,
            ms: ms_err,
        },
        total_ss: ss_tot,
        f,
        p: p_value,
        individuals: a,
        measurements: n,
        replicates: n0,
        repeatability,
    })
}

/// One-way ANOVA and repeatability (ICC) of a single linear measurement.
pub fn linear_anova(values: &[f64], labels: &[usize]) -> Result<AnovaTable, AnovaError> {
    one_way(
        &DMatrix::from_column_slice(values.len(), 1, values),
        labels,
        1,
    )
}

/// Dimension of shape space after Procrustes superimposition: `k·m − m − m(m−1)/2 − 1`
/// (saturating at 0).
#[must_use]
pub fn shape_dims(landmarks: usize, dims: usize) -> usize {
    (landmarks * dims).saturating_sub(dims + dims * dims.saturating_sub(1) / 2 + 1)
}

/// Procrustes ANOVA of repeated digitisations: shape (aligned coordinates, Goodall's F with
/// the shape-space degrees of freedom of the module header) and centroid size.
#[derive(Debug, Clone, Serialize)]
pub struct ProcrustesAnova {
    /// ANOVA of the aligned coordinates (SS summed over all `k·m` coordinates).
    pub shape: AnovaTable,
    /// ANOVA of centroid size, in input units.
    pub size: AnovaTable,
    /// The multiplier `D` of the shape degrees of freedom.
    pub shape_dims: usize,
    /// The superimposition of all measurements together.
    pub gpa: Gpa,
}

/// Procrustes ANOVA of `sample`, whose specimen `i` is a digitisation of individual
/// `individuals[i]` (any ids; replicates share an id). All digitisations are superimposed
/// together by GPA with `opts` (which should scale, for shape).
pub fn procrustes_anova(
    sample: &Sample,
    individuals: &[usize],
    opts: &GpaOptions,
) -> Result<ProcrustesAnova, AnovaError> {
    if individuals.len() != sample.n() {
        return Err(AnovaError::LabelCount {
            labels: individuals.len(),
            rows: sample.n(),
        });
    }
    let g = gpa(sample, opts)?;
    let dims = shape_dims(sample.k(), sample.m()).max(1);
    let shape = one_way(&g.aligned.to_rows(), individuals, dims)?;
    let sizes: Vec<f64> = (0..sample.n())
        .map(|i| centroid_size(&sample.config(i)))
        .collect();
    let size = linear_anova(&sizes, individuals)?;
    Ok(ProcrustesAnova {
        shape,
        size,
        shape_dims: dims,
        gpa: g,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn icc_hand_case() {
        // Hand computation: individuals A = {1, 3}, B = {5, 7}. Grand mean 4; group means 2, 6.
        // SS_ind = 2·4 + 2·4 = 16 (df 1), SS_err = 1+1+1+1 = 4 (df 2), MS 16 and 2, F = 8,
        // n₀ = 2, ICC = (16 − 2)/(16 + 2) = 7/9. F(1, 2) is the square of Student's t with 2 df,
        // whose two-sided tail is 1 − t/sqrt(t² + 2), so p = 1 − sqrt(F/(F + 2)) = 1 − sqrt(0.8).
        let t = linear_anova(&[1.0, 3.0, 5.0, 7.0], &[10, 10, 20, 20]).unwrap();
        assert!((t.individual.ss - 16.0).abs() < 1e-12);
        assert!((t.error.ss - 4.0).abs() < 1e-12);
        assert!((t.f - 8.0).abs() < 1e-12);
        assert!((t.replicates - 2.0).abs() < 1e-12);
        assert!((t.repeatability - 7.0 / 9.0).abs() < 1e-12);
        assert!((t.p - (1.0 - 0.8f64.sqrt())).abs() < 1e-10, "{}", t.p);
        assert!((t.total_ss - 20.0).abs() < 1e-12);
    }

    #[test]
    fn unbalanced_n0() {
        // Sizes 2, 3, 4: N = 9, Σr² = 29, n₀ = (9 − 29/9)/2 = 26/9 (Lessells & Boag 1987, eq. 3).
        let v = [1.0, 2.0, 3.0, 4.0, 4.5, 7.0, 8.0, 8.5, 9.0];
        let t = linear_anova(&v, &[0, 0, 1, 1, 1, 2, 2, 2, 2]).unwrap();
        assert!((t.replicates - 26.0 / 9.0).abs() < 1e-12);
        assert!((t.individual.ss + t.error.ss - t.total_ss).abs() < 1e-9);
    }

    #[test]
    fn rejects_bad_designs() {
        assert_eq!(
            linear_anova(&[1.0, 2.0], &[0, 0]),
            Err(AnovaError::TooFewIndividuals(1))
        );
        assert!(matches!(
            linear_anova(&[1.0, 2.0], &[0, 1]),
            Err(AnovaError::NoReplicates { .. })
        ));
        assert!(matches!(
            linear_anova(&[1.0, 2.0, 3.0], &[0, 1]),
            Err(AnovaError::LabelCount { .. })
        ));
        assert_eq!(
            linear_anova(&[1.0, f64::NAN, 3.0], &[0, 1, 1]),
            Err(AnovaError::NonFinite(1))
        );
    }

    #[test]
    fn shape_dimension_convention() {
        assert_eq!(shape_dims(10, 2), 16); // 2k − 4
        assert_eq!(shape_dims(10, 3), 23); // 3k − 7
    }
}
