//! Measurement error with operator as a factor: a two-way ANOVA of individual, operator,
//! individual × operator and residual (repeats within an operator), for shape (Procrustes
//! ANOVA, sums of squares over all coordinates, degrees of freedom times the shape dimension
//! `D`, as in the one-way case) and for single measurements.
//!
//! **Sums of squares** are sequential (type I, in the order individual, operator, interaction):
//! `SS_ind = TSS − RSS(ind)`, `SS_op = RSS(ind) − RSS(ind + op)`,
//! `SS_int = RSS(ind + op) − RSS(cells)`, `SS_res = RSS(cells)`, each `RSS` the residual sum of
//! squares of the least-squares fit with those effects (the additive fit by an SVD solve, so
//! unbalanced and incomplete designs work). Degrees of freedom are the rank increments. F
//! tests divide by the residual mean square, as a fixed-effects table does (statsmodels'
//! `anova_lm`, the check in `tests/`). When no individual is measured twice by the same
//! operator, the interaction cannot be told from repeat error: both are pooled as the residual,
//! and the table says so.
//!
//! **Shares of the variance** (balanced designs: every individual measured `r` times by each of
//! `b` operators, `a` individuals), from the expected mean squares of the random two-way model
//! (Sokal & Rohlf, *Biometry*, two-way ANOVA with replication, model II, from memory; for
//! morphometric error, Bailey & Byrnes 1990, *Syst. Zool.* 39:124–130):
//! `σ²_res = MS_res`, `σ²_int = (MS_int − MS_res)/r`, `σ²_op = (MS_op − MS_int)/(a r)`,
//! `σ²_ind = (MS_ind − MS_int)/(b r)`, negative estimates set to 0 (common practice).
//! Inter-operator error is `σ²_op + σ²_int`, intra-operator error `σ²_res`, each as a share of
//! the sum of all components. Unbalanced designs get the table without the shares.

use nalgebra::DMatrix;
use serde::Serialize;
use statrs::distribution::{ContinuousCDF, FisherSnedecor};

use super::{AnovaError, groups, shape_dims};
use crate::shape::{GpaOptions, Sample, centroid_size, gpa};

/// One term of the two-way table.
#[derive(Debug, Clone, Serialize)]
pub struct OperatorTerm {
    /// `individual`, `operator`, `individual:operator` or `residual`.
    pub term: &'static str,
    pub ss: f64,
    pub df: f64,
    pub ms: f64,
    /// Against the residual mean square (`None` for the residual).
    pub f: Option<f64>,
    pub p: Option<f64>,
}

/// Variance components and shares (balanced designs).
#[derive(Debug, Clone, Copy, Serialize)]
pub struct VarianceComponents {
    pub individual: f64,
    pub operator: f64,
    /// `None` when the interaction is pooled with the residual.
    pub interaction: Option<f64>,
    pub residual: f64,
    /// `(operator + interaction) / total`.
    pub inter_operator_share: f64,
    /// `residual / total` (with no repeats, the pooled interaction and repeat error).
    pub intra_operator_share: f64,
    pub individual_share: f64,
}

/// A two-way ANOVA of individual and operator.
#[derive(Debug, Clone, Serialize)]
pub struct OperatorAnova {
    pub terms: Vec<OperatorTerm>,
    pub total_ss: f64,
    pub individuals: usize,
    pub operators: usize,
    pub measurements: usize,
    /// Whether some individual was measured more than once by one operator (else the
    /// interaction is pooled with the residual).
    pub repeats: bool,
    /// Repeats per individual × operator cell, when every cell has the same number.
    pub balanced_repeats: Option<usize>,
    pub components: Option<VarianceComponents>,
}

impl OperatorAnova {
    /// The term named `name`.
    #[must_use]
    pub fn term(&self, name: &str) -> Option<&OperatorTerm> {
        self.terms.iter().find(|t| t.term == name)
    }
}

fn rss_of_means(data: &DMatrix<f64>, index: &[usize], count: usize) -> f64 {
    let p = data.ncols();
    let mut sums = DMatrix::zeros(count, p);
    let mut sizes = vec![0usize; count];
    for (i, &g) in index.iter().enumerate() {
        let mut row = sums.row_mut(g);
        row += data.row(i);
        sizes[g] += 1;
    }
    let mut rss = 0.0;
    for (i, &g) in index.iter().enumerate() {
        let mean = sums.row(g) / sizes[g] as f64;
        rss += (data.row(i) - mean).norm_squared();
    }
    rss
}

/// Two-way ANOVA of `data` (`N × p`, SS summed over columns, df times `dims`) with the
/// individual and operator of each row (see the module docs).
#[allow(
    clippy::too_many_lines,
    reason = "the sequential fits and the table read best in one place"
)]
pub fn two_way(
    data: &DMatrix<f64>,
    individuals: &[usize],
    operators: &[usize],
    dims: usize,
) -> Result<OperatorAnova, AnovaError> {
    let n = data.nrows();
    for labels in [individuals, operators] {
        if labels.len() != n {
            return Err(AnovaError::LabelCount {
                labels: labels.len(),
                rows: n,
            });
        }
    }
    for i in 0..n {
        if data.row(i).iter().any(|v| !v.is_finite()) {
            return Err(AnovaError::NonFinite(i));
        }
    }
    let (ind, ind_sizes) = groups(individuals);
    let (op, op_sizes) = groups(operators);
    let (a, b) = (ind_sizes.len(), op_sizes.len());
    if a < 2 {
        return Err(AnovaError::TooFewIndividuals(a));
    }
    if b < 2 {
        return Err(AnovaError::TooFewOperators(b));
    }
    let cell_keys: Vec<usize> = ind.iter().zip(&op).map(|(&i, &o)| i * b + o).collect();
    let (cell, cell_sizes) = groups(&cell_keys);
    let c = cell_sizes.len();
    let grand = data.row_mean();
    let tss: f64 = (0..n).map(|i| (data.row(i) - &grand).norm_squared()).sum();
    let rss_ind = rss_of_means(data, &ind, a);
    let rss_cell = rss_of_means(data, &cell, c);
    // additive fit: intercept, individuals 1.., operators 1..
    let mut x = DMatrix::zeros(n, a + b - 1);
    for r in 0..n {
        x[(r, 0)] = 1.0;
        if ind[r] > 0 {
            x[(r, ind[r])] = 1.0;
        }
        if op[r] > 0 {
            x[(r, a + op[r] - 1)] = 1.0;
        }
    }
    let svd = x.clone().svd(true, true);
    let smax = svd.singular_values.max();
    let eps = smax * 1e-10 * (n.max(a + b)) as f64;
    let rank_add = svd.singular_values.iter().filter(|&&s| s > eps).count();
    let coef = svd.solve(data, eps).map_err(|_| {
        AnovaError::Shape(crate::shape::ShapeError::NoConvergence(
            "the operator ANOVA's fit",
        ))
    })?;
    let rss_add = (data - &x * coef).norm_squared();
    let repeats = n > c;
    let dims_f = dims as f64;
    let df_ind = (a - 1) as f64;
    let df_op = (rank_add - a) as f64;
    let (mut terms, ss_res, df_res) = if repeats {
        let df_int = (c - rank_add) as f64;
        let t = vec![
            ("individual", (tss - rss_ind).max(0.0), df_ind),
            ("operator", (rss_ind - rss_add).max(0.0), df_op),
            ("individual:operator", (rss_add - rss_cell).max(0.0), df_int),
        ];
        (t, rss_cell, (n - c) as f64)
    } else {
        let t = vec![
            ("individual", (tss - rss_ind).max(0.0), df_ind),
            ("operator", (rss_ind - rss_add).max(0.0), df_op),
        ];
        (t, rss_add, (n - rank_add) as f64)
    };
    if df_res <= 0.0 {
        return Err(AnovaError::NoReplicates {
            measurements: n,
            individuals: a,
        });
    }
    let ms_res = ss_res / (df_res * dims_f);
    let mut out: Vec<OperatorTerm> = terms
        .drain(..)
        .map(|(term, ss, df)| {
            let dfd = df * dims_f;
            let ms = if dfd > 0.0 { ss / dfd } else { f64::NAN };
            let f = ms / ms_res;
            let p = if dfd > 0.0 && f.is_finite() {
                FisherSnedecor::new(dfd, df_res * dims_f).map_or(f64::NAN, |d| d.sf(f))
            } else if f.is_infinite() {
                0.0
            } else {
                f64::NAN
            };
            OperatorTerm {
                term,
                ss,
                df: dfd,
                ms,
                f: Some(f),
                p: Some(p),
            }
        })
        .collect();
    out.push(OperatorTerm {
        term: "residual",
        ss: ss_res,
        df: df_res * dims_f,
        ms: ms_res,
        f: None,
        p: None,
    });
    // balanced: every cell present, equal sizes
    let balanced_repeats =
        (c == a * b && cell_sizes.iter().all(|&s| s == cell_sizes[0])).then_some(cell_sizes[0]);
    let components = balanced_repeats.map(|r| {
        let (af, bf, rf) = (a as f64, b as f64, r as f64);
        let ms = |name: &str| out.iter().find(|t| t.term == name).map_or(0.0, |t| t.ms);
        let (ms_ind, ms_op) = (ms("individual"), ms("operator"));
        let (interaction, denom) = if repeats {
            let ms_int = ms("individual:operator");
            (Some(((ms_int - ms_res) / rf).max(0.0)), ms_int)
        } else {
            (None, ms_res)
        };
        let individual = ((ms_ind - denom) / (bf * rf)).max(0.0);
        let operator = ((ms_op - denom) / (af * rf)).max(0.0);
        let residual = ms_res;
        let total = individual + operator + interaction.unwrap_or(0.0) + residual;
        let share = |v: f64| if total > 0.0 { v / total } else { f64::NAN };
        VarianceComponents {
            individual,
            operator,
            interaction,
            residual,
            inter_operator_share: share(operator + interaction.unwrap_or(0.0)),
            intra_operator_share: share(residual),
            individual_share: share(individual),
        }
    });
    Ok(OperatorAnova {
        terms: out,
        total_ss: tss,
        individuals: a,
        operators: b,
        measurements: n,
        repeats,
        balanced_repeats,
        components,
    })
}

/// Operator ANOVA of shape (aligned coordinates after one GPA of all trials) and of centroid
/// size.
#[derive(Debug, Clone, Serialize)]
pub struct ProcrustesOperatorAnova {
    pub shape: OperatorAnova,
    pub size: OperatorAnova,
    pub shape_dims: usize,
}

/// Superimposes every trial of `sample` together and runs [`two_way`] on shape and size.
pub fn procrustes_operator_anova(
    sample: &Sample,
    individuals: &[usize],
    operators: &[usize],
    opts: &GpaOptions,
) -> Result<ProcrustesOperatorAnova, AnovaError> {
    let g = gpa(sample, opts)?;
    let dims = shape_dims(sample.k(), sample.m()).max(1);
    let shape = two_way(&g.aligned.to_rows(), individuals, operators, dims)?;
    let sizes: Vec<f64> = (0..sample.n())
        .map(|i| centroid_size(&sample.config(i)))
        .collect();
    let size = two_way(
        &DMatrix::from_column_slice(sizes.len(), 1, &sizes),
        individuals,
        operators,
        1,
    )?;
    Ok(ProcrustesOperatorAnova {
        shape,
        size,
        shape_dims: dims,
    })
}

#[cfg(test)]
#[allow(clippy::float_cmp, reason = "degrees of freedom are whole numbers")]
mod tests {
    use super::*;

    /// Hand case, balanced 2 individuals × 2 operators × 2 repeats, one variable:
    /// cells (i1,o1) = {1, 3}, (i1,o2) = {3, 5}, (i2,o1) = {5, 7}, (i2,o2) = {9, 11}.
    /// Cell means 2, 4, 6, 10; individual means 3, 8; operator means 4, 7; grand 5.5.
    /// `SS_ind` = 4·(2.5² + 2.5²) = 50; `SS_op` = 4·(1.5² + 1.5²) = 18;
    /// `SS_int` = 2·Σ(cell − ind − op + grand)² = 2·4·0.5² = 2; `SS_res` = 8·1 = 8; total 78.
    /// MS: 50, 18, 2, 2 (df 1, 1, 1, 4); F = 25, 9, 1.
    /// Components (r = 2, a = b = 2): `σ²_res` = 2, `σ²_int` = (2 − 2)/2 = 0,
    /// `σ²_op` = (18 − 2)/4 = 4, `σ²_ind` = (50 − 2)/4 = 12; total 18: inter-operator 4/18,
    /// intra-operator 2/18.
    #[test]
    fn balanced_hand_case() {
        let y = [1.0, 3.0, 3.0, 5.0, 5.0, 7.0, 9.0, 11.0];
        let ind = [0, 0, 0, 0, 1, 1, 1, 1];
        let op = [0, 0, 1, 1, 0, 0, 1, 1];
        let t = two_way(&DMatrix::from_column_slice(8, 1, &y), &ind, &op, 1).unwrap();
        let ss: Vec<f64> = t.terms.iter().map(|t| t.ss).collect();
        for (got, want) in ss.iter().zip([50.0, 18.0, 2.0, 8.0]) {
            assert!((got - want).abs() < 1e-10, "{ss:?}");
        }
        assert!((t.term("individual").unwrap().f.unwrap() - 25.0).abs() < 1e-10);
        assert!((t.term("operator").unwrap().f.unwrap() - 9.0).abs() < 1e-10);
        let c = t.components.unwrap();
        assert!((c.inter_operator_share - 4.0 / 18.0).abs() < 1e-12);
        assert!((c.intra_operator_share - 2.0 / 18.0).abs() < 1e-12);
        assert_eq!(t.balanced_repeats, Some(2));
    }

    /// Without repeats within operators the interaction is pooled into the residual.
    #[test]
    fn no_repeats_pools_the_interaction() {
        let y = [1.0, 2.0, 5.0, 7.0, 9.0, 9.5];
        let ind = [0, 0, 1, 1, 2, 2];
        let op = [0, 1, 0, 1, 0, 1];
        let t = two_way(&DMatrix::from_column_slice(6, 1, &y), &ind, &op, 1).unwrap();
        assert!(!t.repeats);
        assert_eq!(t.terms.len(), 3);
        let sum: f64 = t.terms.iter().map(|t| t.ss).sum();
        assert!((sum - t.total_ss).abs() < 1e-10);
        assert_eq!(t.term("residual").unwrap().df, 2.0);
        assert!(matches!(
            two_way(&DMatrix::from_column_slice(6, 1, &y), &ind, &[0; 6], 1),
            Err(AnovaError::TooFewOperators(1))
        ));
    }
}
