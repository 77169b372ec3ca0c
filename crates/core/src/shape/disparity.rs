//! Morphological disparity: Procrustes variance and sum of variances, per group, with
//! bootstrap intervals, rarefaction, a permutation test and partial disparities.
//!
//! All functions take an `n × p` matrix of superimposed coordinates, one specimen per row:
//! either the aligned coordinates ([`super::Sample::to_rows`]) or the tangent coordinates
//! ([`super::tangent::tangent_coordinates`]). For a group `G` with mean row `x̄_G`:
//!
//! - **Procrustes variance** `Σ_{i∈G} ‖xᵢ − x̄_G‖² / d`: the summed squared (Euclidean, i.e.
//!   partial Procrustes, in the superimposed coordinates) distances to the group mean, divided by
//!   `d = n_G − 1` by default ([`Divisor::NMinusOne`]) or `d = n_G` ([`Divisor::N`]; common
//!   practice in some disparity studies, e.g. Zelditch et al. 2012, *Geometric Morphometrics for
//!   Biologists*, 2nd ed., ch. 7).
//! - **Sum of variances**: the trace of the covariance matrix of the rows (divisor `n_G − 1`).
//!   Algebraically this equals the Procrustes variance with divisor `n_G − 1` on the same rows;
//!   it is computed column by column here and kept as its own figure because studies report it
//!   under this name (Wills, Briggs & Fortey 1994, *Paleobiology* 20:93–130).
//!
//! Resampling uses `ChaCha8Rng::seed_from_u64(seed)` with one stream per resample
//! (`set_stream(r)`), so results are reproducible and independent of the thread count; loops
//! run in parallel with rayon. Intervals are percentile intervals with linear interpolation
//! between order statistics (Hyndman & Fan 1996 type 7, the numpy default).

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use rand::Rng;
use rand::SeedableRng;
use rand::seq::{SliceRandom, index};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::Serialize;

use super::ShapeError;

/// Divisor of the Procrustes variance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub enum Divisor {
    /// `n − 1` (unbiased; the default).
    #[default]
    NMinusOne,
    /// `n`.
    N,
}

impl Divisor {
    fn value(self, n: usize) -> f64 {
        match self {
            Self::NMinusOne => (n - 1) as f64,
            Self::N => n as f64,
        }
    }
}

/// Rows prepared for fast resampling: centred on the grand mean, with squared row norms.
struct Prepared {
    x: DMatrix<f64>,
    norms2: Vec<f64>,
}

impl Prepared {
    fn new(rows: &DMatrix<f64>) -> Result<Self, ShapeError> {
        if rows.iter().any(|v| !v.is_finite()) {
            return Err(ShapeError::InvalidOption(
                "disparity data contain non-finite values".into(),
            ));
        }
        let (n, p) = rows.shape();
        let mut x = rows.clone();
        if n > 0 {
            for c in 0..p {
                let mean = x.column(c).mean();
                x.column_mut(c).add_scalar_mut(-mean);
            }
        }
        // Stored transposed (p × n, column-major) so that each specimen is contiguous.
        let x = x.transpose();
        let norms2 = x.column_iter().map(|c| c.norm_squared()).collect();
        Ok(Self { x, norms2 })
    }

    /// `Σ ‖xᵢ − x̄‖²` over the multiset `idx`, as `Σ ‖xᵢ‖² − n ‖x̄‖²` (rows are pre-centred on
    /// the grand mean, which keeps the cancellation small).
    fn sum_sq(&self, idx: &[usize], buf: &mut [f64]) -> f64 {
        buf.fill(0.0);
        let p = self.x.nrows();
        let data = self.x.as_slice();
        let mut s2 = 0.0;
        for &i in idx {
            s2 += self.norms2[i];
            for (b, v) in buf.iter_mut().zip(&data[i * p..(i + 1) * p]) {
                *b += v;
            }
        }
        let n = idx.len() as f64;
        let m2: f64 = buf.iter().map(|v| v * v).sum::<f64>() / n;
        (s2 - m2).max(0.0)
    }

    fn disparity(&self, idx: &[usize], divisor: Divisor, buf: &mut [f64]) -> f64 {
        self.sum_sq(idx, buf) / divisor.value(idx.len())
    }
}

fn check_indices(
    rows: &DMatrix<f64>,
    idx: &[usize],
    need: usize,
    what: &'static str,
) -> Result<(), ShapeError> {
    if idx.len() < need {
        return Err(ShapeError::TooFewSpecimens {
            what,
            needed: need,
            got: idx.len(),
        });
    }
    if let Some(&bad) = idx.iter().find(|&&i| i >= rows.nrows()) {
        return Err(ShapeError::InvalidOption(format!(
            "specimen index {bad} out of range for {} specimens",
            rows.nrows()
        )));
    }
    Ok(())
}

/// Procrustes variance of the rows at `indices` (see the module docs). Needs 2 specimens.
pub fn procrustes_variance(
    rows: &DMatrix<f64>,
    indices: &[usize],
    divisor: Divisor,
) -> Result<f64, ShapeError> {
    check_indices(rows, indices, 2, "Procrustes variance")?;
    let pr = Prepared::new(rows)?;
    let mut buf = vec![0.0; rows.ncols()];
    Ok(pr.disparity(indices, divisor, &mut buf))
}

/// Sum of variances (trace of the covariance, divisor `n − 1`) of the rows at `indices`.
pub fn sum_of_variances(rows: &DMatrix<f64>, indices: &[usize]) -> Result<f64, ShapeError> {
    check_indices(rows, indices, 2, "sum of variances")?;
    let n = indices.len() as f64;
    Ok((0..rows.ncols())
        .map(|c| {
            let mean = indices.iter().map(|&i| rows[(i, c)]).sum::<f64>() / n;
            indices
                .iter()
                .map(|&i| (rows[(i, c)] - mean).powi(2))
                .sum::<f64>()
                / (n - 1.0)
        })
        .sum())
}

/// Indices of each group, in label order.
pub fn group_indices<L: Ord + Clone>(labels: &[L]) -> BTreeMap<L, Vec<usize>> {
    let mut g: BTreeMap<L, Vec<usize>> = BTreeMap::new();
    for (i, l) in labels.iter().enumerate() {
        g.entry(l.clone()).or_default().push(i);
    }
    g
}

/// Disparity of one group.
#[derive(Debug, Clone, Serialize)]
pub struct GroupDisparity<L> {
    pub label: L,
    pub n: usize,
    /// Procrustes variance with the requested divisor.
    pub procrustes_variance: f64,
    /// Trace of the covariance (divisor `n − 1`).
    pub sum_of_variances: f64,
}

/// Procrustes variance and sum of variances of every group (`labels[i]` is the group of row
/// `i`), in label order. Every group needs at least 2 members.
pub fn disparity_by_group<L: Ord + Clone>(
    rows: &DMatrix<f64>,
    labels: &[L],
    divisor: Divisor,
) -> Result<Vec<GroupDisparity<L>>, ShapeError> {
    check_labels(rows, labels)?;
    group_indices(labels)
        .into_iter()
        .map(|(label, idx)| {
            Ok(GroupDisparity {
                n: idx.len(),
                procrustes_variance: procrustes_variance(rows, &idx, divisor)?,
                sum_of_variances: sum_of_variances(rows, &idx)?,
                label,
            })
        })
        .collect()
}

fn check_labels<L>(rows: &DMatrix<f64>, labels: &[L]) -> Result<(), ShapeError> {
    if labels.len() == rows.nrows() {
        Ok(())
    } else {
        Err(ShapeError::LabelMismatch {
            what: "group labels",
            expected: rows.nrows(),
            got: labels.len(),
        })
    }
}

/// A point estimate with a percentile interval from resampling.
#[derive(Debug, Clone, Serialize)]
pub struct Interval {
    /// The statistic on the data as given.
    pub estimate: f64,
    /// Mean of the resampled statistics.
    pub resample_mean: f64,
    pub lower: f64,
    pub upper: f64,
    /// Coverage, e.g. 0.95.
    pub level: f64,
    pub resamples: usize,
}

/// Quantile with linear interpolation between order statistics (Hyndman & Fan 1996, type 7).
fn quantile(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

fn check_level(level: f64, resamples: usize) -> Result<(), ShapeError> {
    if !(level > 0.0 && level < 1.0) {
        return Err(ShapeError::InvalidOption(format!(
            "interval level {level} must lie strictly between 0 and 1"
        )));
    }
    if resamples == 0 {
        return Err(ShapeError::InvalidOption(
            "at least one resample is needed".into(),
        ));
    }
    Ok(())
}

fn rng_for(seed: u64, stream: usize) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream as u64);
    rng
}

fn interval(estimate: f64, mut values: Vec<f64>, level: f64) -> Interval {
    values.sort_by(f64::total_cmp);
    let a = (1.0 - level) / 2.0;
    Interval {
        estimate,
        resample_mean: values.iter().sum::<f64>() / values.len() as f64,
        lower: quantile(&values, a),
        upper: quantile(&values, 1.0 - a),
        level,
        resamples: values.len(),
    }
}

/// Bootstrap percentile interval of the Procrustes variance of the rows at `indices`:
/// `resamples` samples of the same size drawn with replacement (Efron & Tibshirani 1993,
/// *An Introduction to the Bootstrap*, §13.3).
pub fn bootstrap(
    rows: &DMatrix<f64>,
    indices: &[usize],
    divisor: Divisor,
    resamples: usize,
    level: f64,
    seed: u64,
) -> Result<Interval, ShapeError> {
    check_indices(rows, indices, 2, "bootstrap of disparity")?;
    check_level(level, resamples)?;
    resampled_interval(
        rows,
        indices,
        indices.len(),
        divisor,
        resamples,
        level,
        seed,
        |rng, pick| {
            for v in pick.iter_mut() {
                *v = indices[rng.random_range(0..indices.len())];
            }
        },
    )
}

/// Rarefied disparity: Procrustes variance of `subsamples` random subsets of `size` rows drawn
/// without replacement from `indices` (common practice for comparing groups of unequal size).
pub fn rarefy(
    rows: &DMatrix<f64>,
    indices: &[usize],
    size: usize,
    divisor: Divisor,
    subsamples: usize,
    level: f64,
    seed: u64,
) -> Result<Interval, ShapeError> {
    check_indices(rows, indices, 2, "rarefaction")?;
    check_level(level, subsamples)?;
    if size < 2 || size > indices.len() {
        return Err(ShapeError::InvalidOption(format!(
            "rarefaction size {size} must lie between 2 and the group size {}",
            indices.len()
        )));
    }
    resampled_interval(
        rows,
        indices,
        size,
        divisor,
        subsamples,
        level,
        seed,
        |rng, pick| {
            let drawn = index::sample(rng, indices.len(), pick.len());
            for (slot, j) in pick.iter_mut().zip(drawn) {
                *slot = indices[j];
            }
        },
    )
}

/// The estimate on `indices` and the percentile interval of the disparity over `count`
/// resamples of `size` rows, each drawn by `draw` into its index buffer with a generator seeded
/// from `seed` and the resample number (so results do not depend on the thread count).
#[allow(
    clippy::too_many_arguments,
    reason = "the shared core of bootstrap and rarefy"
)]
fn resampled_interval(
    rows: &DMatrix<f64>,
    indices: &[usize],
    size: usize,
    divisor: Divisor,
    count: usize,
    level: f64,
    seed: u64,
    draw: impl Fn(&mut ChaCha8Rng, &mut [usize]) + Sync,
) -> Result<Interval, ShapeError> {
    let pr = Prepared::new(rows)?;
    let p = rows.ncols();
    let estimate = pr.disparity(indices, divisor, &mut vec![0.0; p]);
    let values: Vec<f64> = (0..count)
        .into_par_iter()
        .map_init(
            || (vec![0.0; p], vec![0; size]),
            |(buf, pick), r| {
                let mut rng = rng_for(seed, r);
                draw(&mut rng, pick);
                pr.disparity(pick, divisor, buf)
            },
        )
        .collect();
    Ok(interval(estimate, values, level))
}

/// A permutation test of the difference in disparity between two groups.
#[derive(Debug, Clone, Serialize)]
pub struct PermutationTest {
    /// Disparity of group A minus that of group B.
    pub observed_difference: f64,
    /// Two-sided p-value `(#{|d_perm| ≥ |d_obs|} + 1) / (permutations + 1)`.
    pub p_value: f64,
    pub permutations: usize,
}

/// Permutation test of `disparity(a) − disparity(b)`: group memberships are shuffled over the
/// pooled rows (sizes kept) and the p-value carries the +1 correction (Phipson & Smyth 2010,
/// *Stat. Appl. Genet. Mol. Biol.* 9:39).
pub fn permutation_test(
    rows: &DMatrix<f64>,
    a: &[usize],
    b: &[usize],
    divisor: Divisor,
    permutations: usize,
    seed: u64,
) -> Result<PermutationTest, ShapeError> {
    check_indices(rows, a, 2, "permutation test (group A)")?;
    check_indices(rows, b, 2, "permutation test (group B)")?;
    if permutations == 0 {
        return Err(ShapeError::InvalidOption(
            "at least one permutation is needed".into(),
        ));
    }
    let pr = Prepared::new(rows)?;
    let p = rows.ncols();
    let mut buf = vec![0.0; p];
    let observed = pr.disparity(a, divisor, &mut buf) - pr.disparity(b, divisor, &mut buf);
    let pooled: Vec<usize> = a.iter().chain(b).copied().collect();
    let na = a.len();
    let thresh = observed.abs() * (1.0 - 1e-12);
    let hits: usize = (0..permutations)
        .into_par_iter()
        .map_init(
            || (vec![0.0; p], pooled.clone()),
            |(buf, perm), r| {
                let mut rng = rng_for(seed, r);
                perm.copy_from_slice(&pooled);
                perm.shuffle(&mut rng);
                let d = pr.disparity(&perm[..na], divisor, buf)
                    - pr.disparity(&perm[na..], divisor, buf);
                usize::from(d.abs() >= thresh)
            },
        )
        .sum();
    Ok(PermutationTest {
        observed_difference: observed,
        p_value: (hits + 1) as f64 / (permutations + 1) as f64,
        permutations,
    })
}

/// A group's share of the total disparity.
#[derive(Debug, Clone, Serialize)]
pub struct PartialDisparity<L> {
    pub label: L,
    pub n: usize,
    /// `Σ_{i∈G} ‖xᵢ − x̄‖² / (N − 1)`, with `x̄` the grand mean of all `N` rows.
    pub partial: f64,
    /// `partial / total`.
    pub share: f64,
}

/// Partial disparities (Foote 1993, *Paleobiology* 19:185–204): each group's summed squared
/// distances to the **grand** mean, divided by `N − 1`. They sum to the total disparity
/// `Σ_all ‖xᵢ − x̄‖² / (N − 1)`, returned second.
pub fn partial_disparity<L: Ord + Clone>(
    rows: &DMatrix<f64>,
    labels: &[L],
) -> Result<(Vec<PartialDisparity<L>>, f64), ShapeError> {
    check_labels(rows, labels)?;
    let all: Vec<usize> = (0..rows.nrows()).collect();
    check_indices(rows, &all, 2, "partial disparity")?;
    let pr = Prepared::new(rows)?;
    let d = (rows.nrows() - 1) as f64;
    let total = pr.norms2.iter().sum::<f64>() / d;
    let parts = group_indices(labels)
        .into_iter()
        .map(|(label, idx)| {
            let partial = idx.iter().map(|&i| pr.norms2[i]).sum::<f64>() / d;
            PartialDisparity {
                label,
                n: idx.len(),
                partial,
                share: if total > 0.0 { partial / total } else { 0.0 },
            }
        })
        .collect();
    Ok((parts, total))
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "these tests check values that are exact by construction"
)]
mod tests {
    use super::*;

    fn rows() -> DMatrix<f64> {
        DMatrix::from_fn(20, 4, |i, j| {
            let scale = if i < 10 { 1.0 } else { 3.0 };
            scale * ((i * 5 + j * 11) as f64 * 0.61).sin()
        })
    }

    #[test]
    fn variance_definitions_agree() {
        let x = rows();
        let idx: Vec<usize> = (0..20).collect();
        let pv = procrustes_variance(&x, &idx, Divisor::NMinusOne).unwrap();
        let sv = sum_of_variances(&x, &idx).unwrap();
        assert!((pv - sv).abs() < 1e-12 * sv);
        let pvn = procrustes_variance(&x, &idx, Divisor::N).unwrap();
        assert!((pvn - sv * 19.0 / 20.0).abs() < 1e-12 * sv);
        // Direct definition.
        let mean = x.row_mean();
        let direct: f64 = x
            .row_iter()
            .map(|r| (r - &mean).norm_squared())
            .sum::<f64>()
            / 19.0;
        assert!((pv - direct).abs() < 1e-12 * direct);
    }

    #[test]
    fn partial_disparities_sum_to_total() {
        let x = rows();
        let labels: Vec<&str> = (0..20).map(|i| ["a", "b", "c"][i % 3]).collect();
        let (parts, total) = partial_disparity(&x, &labels).unwrap();
        let all: Vec<usize> = (0..20).collect();
        let pv = procrustes_variance(&x, &all, Divisor::NMinusOne).unwrap();
        assert!((total - pv).abs() < 1e-12);
        let sum: f64 = parts.iter().map(|p| p.partial).sum();
        assert!((sum - total).abs() < 1e-12);
        assert_eq!(parts.iter().map(|p| p.n).sum::<usize>(), 20);
    }

    #[test]
    fn resampling_is_reproducible_and_sensible() {
        let x = rows();
        let a: Vec<usize> = (0..10).collect();
        let b: Vec<usize> = (10..20).collect();
        let bs = bootstrap(&x, &a, Divisor::NMinusOne, 500, 0.95, 3).unwrap();
        let bs2 = bootstrap(&x, &a, Divisor::NMinusOne, 500, 0.95, 3).unwrap();
        assert_eq!(bs.lower, bs2.lower);
        assert!(bs.lower < bs.estimate && bs.estimate < bs.upper);
        // Rarefying to the full size without replacement always returns the whole group.
        let full = rarefy(&x, &a, 10, Divisor::NMinusOne, 20, 0.9, 1).unwrap();
        assert!(
            (full.lower - full.estimate).abs() < 1e-12
                && (full.upper - full.estimate).abs() < 1e-12
        );
        let small = rarefy(&x, &b, 5, Divisor::NMinusOne, 200, 0.9, 1).unwrap();
        assert!(small.lower < small.upper);
        // Group B is 3× the spread of A: 9× the variance, a clear difference.
        let t = permutation_test(&x, &a, &b, Divisor::NMinusOne, 999, 5).unwrap();
        assert!(t.observed_difference < 0.0);
        assert!(t.p_value < 0.01, "{}", t.p_value);
        // Two halves of one group: no difference expected.
        let even: Vec<usize> = (0..10).step_by(2).collect();
        let odd: Vec<usize> = (1..10).step_by(2).collect();
        let t0 = permutation_test(&x, &even, &odd, Divisor::NMinusOne, 199, 5).unwrap();
        assert!(t0.p_value > 0.05, "{}", t0.p_value);
    }
}
