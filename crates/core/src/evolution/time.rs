//! Ages, time bins and disparity through time.
//!
//! A specimen's [`Age`] is a number (Ma), an interval (oldest, youngest Ma) to sample within,
//! or the label of an ordered bin. [`TimeBins`] are either numeric (edges in Ma; a bin holds
//! `youngest ≤ age < oldest`, the oldest bin also its oldest edge) or named (in order, oldest
//! first).
//!
//! [`disparity_through_time`] measures, per bin, on superimposed (tangent) coordinates:
//! - **Procrustes variance**: `Σ ‖xᵢ − x̄‖² / (n − 1)` (as `shape::disparity`);
//! - **sum of variances**: the trace of the covariance matrix (divisor `n − 1`; Wills, Briggs &
//!   Fortey 1994, *Paleobiology* 20:93–130). On the same coordinates it equals the Procrustes
//!   variance; both are given because studies report either;
//! - **mean pairwise distance**: the mean Euclidean (partial Procrustes) distance over all
//!   pairs of specimens (Ciampaglio, Kemp & `McShea` 2001, *Paleobiology* 27:695–715).
//!
//! The estimate puts interval ages at their midpoints. Each of `resamples` replicates first
//! draws every interval age uniformly within its interval (carrying age uncertainty into the
//! bins' membership), then per bin (i) a **bootstrap** sample of its size with replacement
//! (Efron & Tibshirani 1993) and (ii) a **rarefied** sample of the smallest bin's size (at the
//! midpoints) without replacement, common practice for comparing bins of unequal size. Intervals
//! are percentile intervals; the rarefied value is the mean over replicates. A replicate in
//! which a bin holds fewer specimens than a draw needs is left out of that bin's figures and
//! counted. The change between consecutive bins is tested by permuting bin membership over the
//! two bins' pooled specimens at the midpoints (Procrustes variance; `shape::disparity`).
//!
//! Randomness: `ChaCha8Rng`, one stream per replicate, so results do not depend on threads.

use nalgebra::DMatrix;
use rand::Rng;
use rand::seq::index;
use rayon::prelude::*;
use serde::Serialize;

use super::{EvolutionError, data_err, quantile, rng_for};
use crate::shape::disparity::{self, Divisor};

/// A specimen's age.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Age {
    /// Millions of years before present.
    Point { ma: f64 },
    /// Somewhere between `oldest` and `youngest` Ma (oldest ≥ youngest).
    Range { oldest: f64, youngest: f64 },
    /// A named bin.
    Bin { label: String },
}

impl Age {
    /// Reads an age written as a number (`72.1`), an interval (`83.6-72.1` or `83.6–72.1`,
    /// either order) or, failing both, a bin label.
    #[must_use]
    pub fn parse(text: &str) -> Self {
        let t = text.trim();
        if let Ok(v) = t.parse::<f64>()
            && v.is_finite()
        {
            return Self::Point { ma: v };
        }
        for sep in ['–', '—', '-', '/'] {
            if let Some((a, b)) = t.split_once(sep)
                && let (Ok(a), Ok(b)) = (a.trim().parse::<f64>(), b.trim().parse::<f64>())
                && a.is_finite()
                && b.is_finite()
            {
                return Self::Range {
                    oldest: a.max(b),
                    youngest: a.min(b),
                };
            }
        }
        Self::Bin {
            label: t.to_owned(),
        }
    }

    /// The midpoint of an interval, the number itself, `None` for a bin label.
    #[must_use]
    pub fn midpoint(&self) -> Option<f64> {
        match self {
            Self::Point { ma } => Some(*ma),
            Self::Range { oldest, youngest } => Some(0.5 * (oldest + youngest)),
            Self::Bin { .. } => None,
        }
    }
}

/// One time bin.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bin {
    pub label: String,
    /// Numeric bins: the edges in Ma.
    pub oldest_ma: Option<f64>,
    pub youngest_ma: Option<f64>,
}

/// Ordered time bins, oldest first.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TimeBins {
    pub bins: Vec<Bin>,
}

fn fmt_ma(v: f64) -> String {
    let s = format!("{v:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_owned()
}

impl TimeBins {
    /// Bins between consecutive `edges` (Ma, any order, at least two, distinct).
    pub fn from_edges(edges: &[f64]) -> Result<Self, EvolutionError> {
        let mut e: Vec<f64> = edges.to_vec();
        if e.len() < 2 || e.iter().any(|v| !v.is_finite()) {
            return Err(EvolutionError::Option(
                "time bins need at least two finite edges (Ma)".into(),
            ));
        }
        e.sort_by(|a, b| b.total_cmp(a));
        if e.windows(2).any(|w| w[0].total_cmp(&w[1]).is_eq()) {
            return Err(EvolutionError::Option("time bin edges repeat".into()));
        }
        Ok(Self {
            bins: e
                .windows(2)
                .map(|w| Bin {
                    label: format!("{}-{} Ma", fmt_ma(w[0]), fmt_ma(w[1])),
                    oldest_ma: Some(w[0]),
                    youngest_ma: Some(w[1]),
                })
                .collect(),
        })
    }

    /// `count` equal bins spanning the ages given (midpoints and interval ends).
    pub fn equal(ages: &[Age], count: usize) -> Result<Self, EvolutionError> {
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for a in ages {
            match a {
                Age::Point { ma } => (lo, hi) = (lo.min(*ma), hi.max(*ma)),
                Age::Range { oldest, youngest } => (lo, hi) = (lo.min(*youngest), hi.max(*oldest)),
                Age::Bin { .. } => {}
            }
        }
        if count == 0 || !lo.is_finite() || hi <= lo {
            return Err(EvolutionError::Option(
                "equal time bins need numeric ages spanning some time and a bin count ≥ 1".into(),
            ));
        }
        let edges: Vec<f64> = (0..=count)
            .map(|i| hi - (hi - lo) * i as f64 / count as f64)
            .collect();
        Self::from_edges(&edges)
    }

    /// Named bins in the order given (oldest first).
    pub fn from_labels(labels: &[String]) -> Result<Self, EvolutionError> {
        if labels.is_empty() {
            return Err(EvolutionError::Option("no bin names given".into()));
        }
        let mut seen = std::collections::HashSet::new();
        for l in labels {
            if !seen.insert(l.as_str()) {
                return Err(EvolutionError::Option(format!("bin '{l}' is named twice")));
            }
        }
        Ok(Self {
            bins: labels
                .iter()
                .map(|l| Bin {
                    label: l.clone(),
                    oldest_ma: None,
                    youngest_ma: None,
                })
                .collect(),
        })
    }

    fn numeric(&self) -> bool {
        self.bins.iter().all(|b| b.oldest_ma.is_some())
    }

    /// The bin of a numeric age (see the module docs), if any.
    #[must_use]
    pub fn bin_of_ma(&self, ma: f64) -> Option<usize> {
        self.bins
            .iter()
            .enumerate()
            .position(|(i, b)| match (b.oldest_ma, b.youngest_ma) {
                (Some(o), Some(y)) => ma >= y && (ma < o || (i == 0 && ma.total_cmp(&o).is_eq())),
                _ => false,
            })
    }

    /// The bin of a specimen at the age's midpoint.
    #[must_use]
    pub fn bin_of(&self, age: &Age) -> Option<usize> {
        match age {
            Age::Bin { label } => self.bins.iter().position(|b| &b.label == label),
            a => a.midpoint().and_then(|m| self.bin_of_ma(m)),
        }
    }

    /// Checks that the ages suit the bins (numbers with numeric bins, labels with named ones).
    pub fn check(&self, ages: &[Age]) -> Result<(), EvolutionError> {
        let numeric = self.numeric();
        for a in ages {
            match (a, numeric) {
                (Age::Bin { label }, true) => {
                    return Err(data_err(format!(
                        "age '{label}' is a bin name, but the bins are numeric (Ma)"
                    )));
                }
                (Age::Bin { label }, false) if !self.bins.iter().any(|b| &b.label == label) => {
                    return Err(data_err(format!(
                        "age '{label}' is not one of the bins named ({})",
                        self.bins
                            .iter()
                            .map(|b| b.label.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    )));
                }
                (Age::Point { .. } | Age::Range { .. }, false) => {
                    return Err(data_err(
                        "numeric ages need numeric bins (edges in Ma), not bin names",
                    ));
                }
                _ => {}
            }
        }
        Ok(())
    }
}

/// The three disparity measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Metric {
    ProcrustesVariance,
    SumOfVariances,
    MeanPairwiseDistance,
}

impl Metric {
    pub const ALL: [Self; 3] = [
        Self::ProcrustesVariance,
        Self::SumOfVariances,
        Self::MeanPairwiseDistance,
    ];

    /// The column name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::ProcrustesVariance => "procrustes_variance",
            Self::SumOfVariances => "sum_of_variances",
            Self::MeanPairwiseDistance => "mean_pairwise_distance",
        }
    }
}

/// A metric's figures in one bin.
#[derive(Debug, Clone, Serialize)]
pub struct MetricResult {
    pub metric: Metric,
    /// On the bin at midpoint ages (NaN with fewer than 2 specimens).
    pub estimate: f64,
    pub boot_lower: f64,
    pub boot_upper: f64,
    /// Mean and percentile interval of the rarefied values.
    pub rarefied: f64,
    pub rarefied_lower: f64,
    pub rarefied_upper: f64,
}

/// One bin's disparity.
#[derive(Debug, Clone, Serialize)]
pub struct BinDisparity {
    pub bin: Bin,
    /// Specimens in the bin at midpoint ages.
    pub n: usize,
    /// Mean number of specimens over the replicates' age draws.
    pub n_mean: f64,
    /// Specimen indices in the bin at midpoint ages.
    pub members: Vec<usize>,
    pub metrics: Vec<MetricResult>,
    /// Replicates left out of the bootstrap (fewer than 2 specimens) and the rarefaction
    /// (fewer than the rarefied size) after the age draws.
    pub boot_skipped: usize,
    pub rarefied_skipped: usize,
}

/// A test of the change in Procrustes variance from one bin to the next.
#[derive(Debug, Clone, Serialize)]
pub struct BinChange {
    pub from: String,
    pub to: String,
    /// Later minus earlier.
    pub difference: f64,
    pub p_value: f64,
}

/// Disparity through time.
#[derive(Debug, Clone, Serialize)]
pub struct ThroughTime {
    pub bins: Vec<BinDisparity>,
    pub changes: Vec<BinChange>,
    /// Bins with fewer than 2 specimens, tests between them and their neighbours skipped.
    pub notes: Vec<String>,
    /// Size every bin was rarefied to (the smallest bin with at least 2 specimens).
    pub rarefied_to: usize,
    /// Specimens outside every bin (by index).
    pub outside: Vec<usize>,
    pub resamples: usize,
    pub level: f64,
    pub seed: u64,
    /// Whether some ages were intervals (and so were drawn in each replicate).
    pub age_draws: bool,
}

/// Options of [`disparity_through_time`].
#[derive(Debug, Clone, Copy)]
pub struct TimeOptions {
    pub resamples: usize,
    pub level: f64,
    pub seed: u64,
}

impl Default for TimeOptions {
    fn default() -> Self {
        Self {
            resamples: 999,
            level: 0.95,
            seed: 1,
        }
    }
}

/// Precomputed rows for the three metrics.
struct Measures<'a> {
    rows: &'a DMatrix<f64>,
    dist: DMatrix<f64>,
}

impl Measures<'_> {
    /// The three metrics of the multiset `idx` (at least 2 entries).
    fn of(&self, idx: &[usize], buf: &mut [f64]) -> [f64; 3] {
        let p = self.rows.ncols();
        let n = idx.len() as f64;
        buf.fill(0.0);
        for &i in idx {
            for (c, b) in buf.iter_mut().enumerate().take(p) {
                *b += self.rows[(i, c)];
            }
        }
        for b in buf.iter_mut() {
            *b /= n;
        }
        let mut ss = 0.0;
        for &i in idx {
            for (c, b) in buf.iter().enumerate() {
                let d = self.rows[(i, c)] - b;
                ss += d * d;
            }
        }
        let pv = ss / (n - 1.0);
        // sum of variances, column by column (its own formula)
        let mut sov = 0.0;
        for (c, b) in buf.iter().enumerate() {
            sov += idx
                .iter()
                .map(|&i| (self.rows[(i, c)] - b).powi(2))
                .sum::<f64>()
                / (n - 1.0);
        }
        let mut dsum = 0.0;
        for (a, &i) in idx.iter().enumerate() {
            for &j in &idx[a + 1..] {
                dsum += self.dist[(i, j)];
            }
        }
        let pairs = n * (n - 1.0) / 2.0;
        [pv, sov, dsum / pairs]
    }
}

// Replicates: per bin, per metric, bootstrap and rarefied values; plus bin sizes.
struct Rep {
    boot: Vec<Option<[f64; 3]>>,
    rare: Vec<Option<[f64; 3]>>,
    sizes: Vec<usize>,
}

/// Disparity per bin of `rows` (`n × p` superimposed coordinates) with `ages[i]` the age of row
/// `i` (see the module docs).
#[allow(
    clippy::too_many_lines,
    reason = "estimate, replicates and tests in one pass over the bins"
)]
pub fn disparity_through_time(
    rows: &DMatrix<f64>,
    ages: &[Age],
    bins: &TimeBins,
    opts: &TimeOptions,
) -> Result<ThroughTime, EvolutionError> {
    let n = rows.nrows();
    if ages.len() != n {
        return Err(data_err(format!("{} ages for {n} specimens", ages.len())));
    }
    if rows.iter().any(|v| !v.is_finite()) {
        return Err(data_err(
            "the coordinates contain values that are not finite",
        ));
    }
    if opts.resamples == 0 || !(opts.level > 0.0 && opts.level < 1.0) {
        return Err(EvolutionError::Option(
            "disparity through time needs at least one resample and a level between 0 and 1".into(),
        ));
    }
    bins.check(ages)?;
    let nb = bins.bins.len();
    let at_mid: Vec<Option<usize>> = ages.iter().map(|a| bins.bin_of(a)).collect();
    let mut members: Vec<Vec<usize>> = vec![Vec::new(); nb];
    let mut outside = Vec::new();
    for (i, b) in at_mid.iter().enumerate() {
        match b {
            Some(b) => members[*b].push(i),
            None => outside.push(i),
        }
    }
    let rarefied_to = members
        .iter()
        .map(Vec::len)
        .filter(|&m| m >= 2)
        .min()
        .ok_or_else(|| data_err("no time bin holds 2 or more specimens"))?;
    let p = rows.ncols();
    let dist = DMatrix::from_fn(n, n, |i, j| (rows.row(i) - rows.row(j)).norm());
    let measures = Measures { rows, dist };
    let age_draws = ages.iter().any(|a| matches!(a, Age::Range { .. }));

    let reps: Vec<Rep> = (0..opts.resamples)
        .into_par_iter()
        .map_init(
            || vec![0.0; p],
            |buf, r| {
                let mut rng = rng_for(opts.seed, r as u64);
                let mut m: Vec<Vec<usize>> = vec![Vec::new(); nb];
                for (i, a) in ages.iter().enumerate() {
                    let b = match a {
                        Age::Range { oldest, youngest } => {
                            let t = if oldest > youngest {
                                rng.random_range(*youngest..*oldest)
                            } else {
                                *oldest
                            };
                            bins.bin_of_ma(t)
                        }
                        _ => at_mid[i],
                    };
                    if let Some(b) = b {
                        m[b].push(i);
                    }
                }
                let mut boot = Vec::with_capacity(nb);
                let mut rare = Vec::with_capacity(nb);
                for mb in &m {
                    if mb.len() >= 2 {
                        let pick: Vec<usize> = (0..mb.len())
                            .map(|_| mb[rng.random_range(0..mb.len())])
                            .collect();
                        boot.push(Some(measures.of(&pick, buf)));
                    } else {
                        boot.push(None);
                    }
                    if mb.len() >= rarefied_to {
                        let pick: Vec<usize> = index::sample(&mut rng, mb.len(), rarefied_to)
                            .into_iter()
                            .map(|j| mb[j])
                            .collect();
                        rare.push(Some(measures.of(&pick, buf)));
                    } else {
                        rare.push(None);
                    }
                }
                Rep {
                    boot,
                    rare,
                    sizes: m.iter().map(Vec::len).collect(),
                }
            },
        )
        .collect();

    let a = (1.0 - opts.level) / 2.0;
    let mut buf = vec![0.0; p];
    let mut out = Vec::with_capacity(nb);
    let mut notes = Vec::new();
    #[allow(
        clippy::needless_range_loop,
        reason = "b indexes bins, members, replicates alike"
    )]
    for b in 0..nb {
        let est = if members[b].len() >= 2 {
            measures.of(&members[b], &mut buf)
        } else {
            notes.push(format!(
                "bin {}: {} specimen(s) at midpoint ages; disparity needs 2",
                bins.bins[b].label,
                members[b].len()
            ));
            [f64::NAN; 3]
        };
        let boot: Vec<[f64; 3]> = reps.iter().filter_map(|r| r.boot[b]).collect();
        let rare: Vec<[f64; 3]> = reps.iter().filter_map(|r| r.rare[b]).collect();
        let metrics = Metric::ALL
            .iter()
            .enumerate()
            .map(|(k, &metric)| {
                let mut bv: Vec<f64> = boot.iter().map(|v| v[k]).collect();
                let mut rv: Vec<f64> = rare.iter().map(|v| v[k]).collect();
                bv.sort_by(f64::total_cmp);
                rv.sort_by(f64::total_cmp);
                MetricResult {
                    metric,
                    estimate: est[k],
                    boot_lower: quantile(&bv, a),
                    boot_upper: quantile(&bv, 1.0 - a),
                    rarefied: if rv.is_empty() {
                        f64::NAN
                    } else {
                        rv.iter().sum::<f64>() / rv.len() as f64
                    },
                    rarefied_lower: quantile(&rv, a),
                    rarefied_upper: quantile(&rv, 1.0 - a),
                }
            })
            .collect();
        out.push(BinDisparity {
            bin: bins.bins[b].clone(),
            n: members[b].len(),
            n_mean: reps.iter().map(|r| r.sizes[b] as f64).sum::<f64>() / reps.len() as f64,
            members: members[b].clone(),
            metrics,
            boot_skipped: reps.len() - boot.len(),
            rarefied_skipped: reps.len() - rare.len(),
        });
    }
    let mut changes = Vec::new();
    for b in 1..nb {
        let (x, y) = (&members[b - 1], &members[b]);
        if x.len() < 2 || y.len() < 2 {
            notes.push(format!(
                "no test from {} to {}: a bin has fewer than 2 specimens",
                bins.bins[b - 1].label,
                bins.bins[b].label
            ));
            continue;
        }
        let t = disparity::permutation_test(
            rows,
            y,
            x,
            Divisor::NMinusOne,
            opts.resamples,
            opts.seed.wrapping_add(b as u64),
        )
        .map_err(|e| data_err(e.to_string()))?;
        changes.push(BinChange {
            from: bins.bins[b - 1].label.clone(),
            to: bins.bins[b].label.clone(),
            difference: t.observed_difference,
            p_value: t.p_value,
        });
    }
    Ok(ThroughTime {
        bins: out,
        changes,
        notes,
        rarefied_to,
        outside,
        resamples: opts.resamples,
        level: opts.level,
        seed: opts.seed,
        age_draws,
    })
}

#[cfg(test)]
#[allow(clippy::float_cmp, reason = "hand values exact in binary")]
mod tests {
    use super::*;

    #[test]
    fn ages_parse_and_bin() {
        assert_eq!(Age::parse(" 72.5 "), Age::Point { ma: 72.5 });
        assert_eq!(
            Age::parse("72.1-83.6"),
            Age::Range {
                oldest: 83.6,
                youngest: 72.1
            }
        );
        assert_eq!(
            Age::parse("Campanian"),
            Age::Bin {
                label: "Campanian".into()
            }
        );
        let b = TimeBins::from_edges(&[60.0, 100.0, 80.0]).unwrap();
        assert_eq!(b.bins[0].label, "100-80 Ma");
        assert_eq!(b.bin_of_ma(100.0), Some(0)); // the oldest edge belongs to the oldest bin
        assert_eq!(b.bin_of_ma(80.0), Some(0)); // a shared edge is the older bin's youngest
        assert_eq!(b.bin_of_ma(60.0), Some(1));
        assert_eq!(b.bin_of_ma(59.9), None);
        assert!(b.check(&[Age::parse("Campanian")]).is_err());
    }

    /// Hand case: bin 1 holds x = 0, 2 (one variable): Procrustes variance = (1 + 1)/1 = 2,
    /// the same sum of variances, mean pairwise distance 2. Bin 2 holds 0, 3, 6: variance
    /// (9 + 0 + 9)/2 = 9, distances 3, 6, 3 → mean 4.
    #[test]
    fn hand_values_and_rarefaction() {
        let rows = DMatrix::from_row_slice(5, 1, &[0.0, 2.0, 0.0, 3.0, 6.0]);
        let ages = [95.0, 90.0, 70.0, 65.0, 62.0].map(|ma| Age::Point { ma });
        let bins = TimeBins::from_edges(&[100.0, 80.0, 60.0]).unwrap();
        let t = disparity_through_time(
            &rows,
            &ages,
            &bins,
            &TimeOptions {
                resamples: 200,
                ..TimeOptions::default()
            },
        )
        .unwrap();
        let m = |b: usize, k: usize| t.bins[b].metrics[k].estimate;
        assert_eq!([m(0, 0), m(0, 1), m(0, 2)], [2.0, 2.0, 2.0]);
        assert_eq!([m(1, 0), m(1, 1), m(1, 2)], [9.0, 9.0, 4.0]);
        assert_eq!(t.rarefied_to, 2);
        // bin 1 rarefied to pairs of {0, 3, 6}: variances 4.5, 18, 4.5 → mean 9 over many draws
        let r = t.bins[1].metrics[0].rarefied;
        assert!((r - 9.0).abs() < 1.5, "{r}");
        assert_eq!(t.changes.len(), 1);
    }

    /// Interval ages move specimens between bins across replicates.
    #[test]
    fn interval_ages_are_drawn() {
        let rows = DMatrix::from_fn(8, 2, |i, j| ((i * 3 + j) as f64).sin());
        let mut ages: Vec<Age> = [95.0, 92.0, 88.0, 85.0, 75.0, 72.0, 68.0, 65.0]
            .iter()
            .map(|&ma| Age::Point { ma })
            .collect();
        ages[3] = Age::Range {
            oldest: 84.0,
            youngest: 76.0,
        };
        let bins = TimeBins::from_edges(&[100.0, 80.0, 60.0]).unwrap();
        let t = disparity_through_time(
            &rows,
            &ages,
            &bins,
            &TimeOptions {
                resamples: 400,
                ..TimeOptions::default()
            },
        )
        .unwrap();
        assert!(t.age_draws);
        // the interval's midpoint, 80, is the older bin's youngest edge: it counts there, and
        // half of the draws (80–84 of 76–84) do too
        assert_eq!(t.bins[0].n, 4);
        assert!(
            t.bins[0].n_mean > 3.3 && t.bins[0].n_mean < 3.7,
            "{}",
            t.bins[0].n_mean
        );
    }
}
