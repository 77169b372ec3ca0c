//! Brownian motion, early burst and Ornstein–Uhlenbeck compared on **all** shape dimensions by
//! pairwise composite likelihood, with an information criterion and intervals adjusted for it.
//!
//! **Why all dimensions.** Fitting models to the first few principal components of shape biases
//! the choice towards early burst (Uyeda, Caetano & Pennell 2015, *Syst. Biol.* 64:677–689).
//! The full multivariate likelihood is singular when there are more shape dimensions than tips,
//! so the fit uses the **pairwise composite likelihood** (Goolsby 2016, "Likelihood-based
//! parameter estimation for high-dimensional phenotypic data using pairwise composite
//! likelihood", *Syst. Biol.* 65:852–870): the sum over all pairs of variables `(i, j)` of
//! their bivariate likelihoods under `vec Y_ij ~ N(1 a_ij, R_ij ⊗ C_θ)`, every model sharing
//! one unrestricted rate matrix `R` and differing only in the tree covariance `C_θ`
//! ([`super::gls::Covariance`]). For a given `θ` each pair's maximum is at the GLS root and at
//! the 2 × 2 block of `R̂ = (Y − 1â)ᵀC_θ⁻¹(Y − 1â)/n`, so the profile composite log-likelihood is
//!
//! ```text
//! CL(θ) = Σ_{i<j} −½ [2n log 2π + n log det R̂_ij + 2 log |C_θ| + 2n],
//! ```
//!
//! maximised over `θ` (early burst's `r ∈ [ln(10⁻⁵)/H, 0]`: the rate may fall to 10⁻⁵ of its
//! start over the tree's height `H`; the OU pull `α ∈ [0, ln 2/(0.01 H)]`: a half-life of at
//! least 1 % of the height) by a grid and Brent's method.
//!
//! **Adjusting for the composite likelihood.** A composite likelihood counts each variable in
//! `p − 1` pairs, so its ratios are too large for a χ² and a raw `AICc` would favour the richer
//! model. The adjustment here divides `CL` by `c = J/H`, the ratio of the variability to the
//! sensitivity of the composite score for `θ` (Godambe information; Varin & Vidoni 2005,
//! *Biometrika* 92:519–528, whose composite-likelihood information criterion penalises by
//! `tr(J H⁻¹)`; Chandler & Bate 2007, *Biometrika* 94:167–183, for the scaled ratio). With the
//! tree covariance normalised to unit determinant (a reparametrisation that leaves `CL`
//! unchanged), `θ` is orthogonal to `R` in both `J` and `H`, and for a Gaussian model both have
//! closed forms (derived here, checked by simulation in the tests):
//! `H = P · tr(G²)`, `J = ½ tr(WRWR) · tr(G²)` with `G = C⁻¹ ∂C/∂θ` centred, `P` the number of
//! pairs and `W = Σ_{i<j} R_ij⁻¹` (each 2 × 2 inverse added into rows and columns `i, j`), so
//! `c = tr(WRWR) / (2P)`, free of the tree and of `θ`. It is `p − 1` for independent variables
//! (the exact overcount) and is computed once from the Brownian fit's `R̂`. Then:
//! - `ℓ* = CL / c` is the log-likelihood the criterion uses;
//! - `AICc = −2ℓ* + 2k + 2k(k + 1)/(n − k − 1)`, with `k` the model's parameters per variable
//!   (rate and root state, plus `r` or `α`: 2, 3, 3) and `n` the tips; the other entries of `R`
//!   are shared by all three models and left out, so only differences of `AICc` mean anything;
//! - intervals for `r`, `α` and the rate are those where `2(ℓ*(θ̂) − ℓ*(θ)) ≤ χ²₁(level)`.
//!
//! The rate reported is `σ² = tr(R̂)/p`, the mean per-dimension rate (σ²mult, Adams 2014) at
//! the start of the tree for early burst.

use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::gls::{Covariance, TreeTimes, minimise, whiten};
use super::{EvolutionError, Tree, data_err};

/// Dense `n × n` covariances limit the tips: 8,000 tips take 512 MiB per matrix.
pub const MAX_TIPS: usize = 8_000;

/// The three models.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Model {
    BrownianMotion,
    EarlyBurst,
    OrnsteinUhlenbeck,
}

impl Model {
    /// The model's name in tables.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::BrownianMotion => "Brownian motion",
            Self::EarlyBurst => "early burst",
            Self::OrnsteinUhlenbeck => "Ornstein-Uhlenbeck",
        }
    }

    const fn parameters(self) -> usize {
        match self {
            Self::BrownianMotion => 2,
            Self::EarlyBurst | Self::OrnsteinUhlenbeck => 3,
        }
    }
}

/// An estimate with an adjusted likelihood interval; an end at a search bound says so.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Estimate {
    pub value: f64,
    pub lower: f64,
    pub upper: f64,
    pub lower_at_bound: bool,
    pub upper_at_bound: bool,
}

/// One model's fit.
#[derive(Debug, Clone, Serialize)]
pub struct ModelFit {
    pub model: Model,
    /// The profile pairwise composite log-likelihood `CL`.
    pub composite_log_likelihood: f64,
    /// `CL / c`.
    pub log_likelihood: f64,
    /// Parameters per variable (2 or 3).
    pub parameters: usize,
    pub aicc: f64,
    pub delta_aicc: f64,
    /// Akaike weight `exp(−Δ/2) / Σ exp(−Δ/2)`.
    pub weight: f64,
    /// σ² = tr(R̂)/p.
    pub rate: Estimate,
    /// Early burst's `r` or OU's `α`.
    pub parameter: Option<Estimate>,
    /// For OU, `ln 2 / α` (infinite at α = 0).
    pub half_life: Option<f64>,
    /// Likelihood evaluations.
    pub evaluations: usize,
}

/// The comparison.
#[derive(Debug, Clone, Serialize)]
pub struct ModelComparison {
    pub fits: Vec<ModelFit>,
    /// The model with the smallest `AICc`.
    pub best: Model,
    pub tips: usize,
    /// Variables used (columns with no variance are left out).
    pub dimensions: usize,
    pub dropped_dimensions: usize,
    /// Pairs used (pairs perfectly correlated are left out).
    pub pairs: usize,
    pub dropped_pairs: usize,
    /// The composite likelihood adjustment `c = J/H`.
    pub adjustment: f64,
    pub tree_height: f64,
    pub ultrametric: bool,
    /// Coverage of the intervals.
    pub level: f64,
    pub early_burst_bounds: (f64, f64),
    pub alpha_bounds: (f64, f64),
}

/// The data after dropping constant columns, with the pairs to use.
struct Setup {
    y: DMatrix<f64>,
    pairs: Vec<(usize, usize)>,
    times: TreeTimes,
}

impl Setup {
    /// `(CL, R̂)` at a covariance.
    fn profile(&self, cov: Covariance) -> Result<(f64, DMatrix<f64>), EvolutionError> {
        let n = self.y.nrows() as f64;
        let w = whiten(cov.matrix(&self.times), &self.y)?;
        let r = w.residuals.tr_mul(&w.residuals) / n;
        let ln2pi = (2.0 * std::f64::consts::PI).ln();
        let cl = if self.y.ncols() == 1 {
            -0.5 * (n * ln2pi + n * r[(0, 0)].ln() + w.log_det + n)
        } else {
            self.pairs
                .iter()
                .map(|&(i, j)| {
                    let det = r[(i, i)] * r[(j, j)] - r[(i, j)] * r[(i, j)];
                    -0.5 * (2.0 * n * ln2pi + n * det.ln() + 2.0 * w.log_det + 2.0 * n)
                })
                .sum()
        };
        Ok((cl, r))
    }

    /// Pairs counted by the composite likelihood (1 for one variable, as a "pair" of itself).
    fn m(&self) -> f64 {
        if self.y.ncols() == 1 {
            1.0
        } else {
            2.0 * self.pairs.len() as f64
        }
    }
}

/// `c = tr(WRWR)/(2P)` (module docs); 1 for one variable.
fn adjustment(r: &DMatrix<f64>, pairs: &[(usize, usize)]) -> f64 {
    let p = r.nrows();
    if p == 1 {
        return 1.0;
    }
    let mut w = DMatrix::zeros(p, p);
    for &(i, j) in pairs {
        let det = r[(i, i)] * r[(j, j)] - r[(i, j)] * r[(i, j)];
        w[(i, i)] += r[(j, j)] / det;
        w[(j, j)] += r[(i, i)] / det;
        w[(i, j)] -= r[(i, j)] / det;
        w[(j, i)] -= r[(i, j)] / det;
    }
    let m = &w * r;
    (&m * &m).trace() / (2.0 * pairs.len() as f64)
}

/// The profile pairwise composite log-likelihood `CL` of `y` on `tree` under one covariance
/// (every pair of columns used), as the fits evaluate it.
pub fn composite_log_likelihood(
    tree: &Tree,
    y: &DMatrix<f64>,
    cov: Covariance,
) -> Result<f64, EvolutionError> {
    tree.check_for_analysis(2)?;
    if y.nrows() != tree.n_tips() {
        return Err(data_err(format!(
            "{} data rows for {} tips",
            y.nrows(),
            tree.n_tips()
        )));
    }
    let p = y.ncols();
    let setup = Setup {
        y: y.clone(),
        pairs: (0..p)
            .flat_map(|i| (i + 1..p).map(move |j| (i, j)))
            .collect(),
        times: TreeTimes::new(tree),
    };
    Ok(setup.profile(cov)?.0)
}

/// Options of [`compare_models`].
#[derive(Debug, Clone, Copy)]
pub struct ModelOptions {
    /// Coverage of the intervals (default 0.95).
    pub level: f64,
}

impl Default for ModelOptions {
    fn default() -> Self {
        Self { level: 0.95 }
    }
}

/// Fits the three models to `y` (rows in tip order) on `tree` and compares them.
#[allow(
    clippy::too_many_lines,
    reason = "the three fits and their bookkeeping read best together"
)]
pub fn compare_models(
    tree: &Tree,
    y: &DMatrix<f64>,
    opts: &ModelOptions,
) -> Result<ModelComparison, EvolutionError> {
    tree.check_for_analysis(6)?;
    let n = tree.n_tips();
    if n > MAX_TIPS {
        return Err(data_err(format!(
            "{n} tips: the model fits hold n × n covariances and take at most {MAX_TIPS} tips"
        )));
    }
    if y.nrows() != n {
        return Err(data_err(format!("{} data rows for {n} tips", y.nrows())));
    }
    if y.iter().any(|v| !v.is_finite()) {
        return Err(data_err("the data contain values that are not finite"));
    }
    if !(opts.level > 0.0 && opts.level < 1.0) {
        return Err(EvolutionError::Option(format!(
            "interval level {} must lie strictly between 0 and 1",
            opts.level
        )));
    }
    let times = TreeTimes::new(tree);
    let height = times.height;
    if height <= 0.0 {
        return Err(data_err("the tree has zero height"));
    }
    // drop columns without variance (under BM), then perfectly correlated pairs
    let full = Setup {
        y: y.clone(),
        pairs: Vec::new(),
        times,
    };
    let w = whiten(Covariance::Brownian.matrix(&full.times), &full.y)?;
    let s = w.residuals.tr_mul(&w.residuals);
    let smax = (0..s.nrows()).map(|i| s[(i, i)]).fold(0.0, f64::max);
    let keep: Vec<usize> = (0..s.nrows())
        .filter(|&i| s[(i, i)] > 1e-12 * smax && smax > 0.0)
        .collect();
    if keep.is_empty() {
        return Err(data_err("the data do not vary: no rate can be estimated"));
    }
    let yk = DMatrix::from_fn(n, keep.len(), |i, j| y[(i, keep[j])]);
    let mut pairs = Vec::new();
    let mut dropped_pairs = 0;
    for a in 0..keep.len() {
        for b in a + 1..keep.len() {
            let (i, j) = (keep[a], keep[b]);
            let det = s[(i, i)] * s[(j, j)] - s[(i, j)] * s[(i, j)];
            if det > 1e-10 * s[(i, i)] * s[(j, j)] {
                pairs.push((a, b));
            } else {
                dropped_pairs += 1;
            }
        }
    }
    if keep.len() > 1 && pairs.is_empty() {
        return Err(data_err(
            "every pair of variables is perfectly correlated: no composite likelihood",
        ));
    }
    let setup = Setup {
        y: yk,
        pairs,
        times: full.times,
    };
    let p = setup.y.ncols() as f64;
    let crit = ChiSquared::new(1.0)
        .map_err(|e| EvolutionError::Numerical(e.to_string()))?
        .inverse_cdf(opts.level);

    let (cl_bm, r_bm) = setup.profile(Covariance::Brownian)?;
    let c = adjustment(&r_bm, &setup.pairs);
    if !(c.is_finite() && c > 0.0) {
        return Err(EvolutionError::Numerical(format!(
            "the composite likelihood adjustment is {c}"
        )));
    }
    let rate_estimate = |r: &DMatrix<f64>| -> Estimate {
        let sigma = r.trace() / p;
        // 2(ℓ*(1) − ℓ*(s)) = m n (ln s + 1/s − 1)/c along the scale of R̂
        let target = crit * c / (setup.m() * n as f64);
        let g = |s: f64| s.ln() + 1.0 / s - 1.0 - target;
        let solve = |mut a: f64, mut b: f64| {
            for _ in 0..200 {
                let mid = 0.5 * (a + b);
                if (g(mid) > 0.0) == (g(a) > 0.0) {
                    a = mid;
                } else {
                    b = mid;
                }
            }
            0.5 * (a + b)
        };
        let mut hi = 2.0;
        while g(hi) < 0.0 {
            hi *= 2.0;
        }
        let mut lo = 0.5;
        while g(lo) < 0.0 {
            lo /= 2.0;
        }
        Estimate {
            value: sigma,
            lower: sigma * solve(lo, 1.0),
            upper: sigma * solve(1.0, hi),
            lower_at_bound: false,
            upper_at_bound: false,
        }
    };

    // One-parameter fits: grid (denser near the Brownian end), then Brent around the best.
    let fit_one = |make: &(dyn Fn(f64) -> Covariance + Sync),
                   bound: f64|
     -> Result<(f64, f64, DMatrix<f64>, Estimate, usize), EvolutionError> {
        const GRID: usize = 16;
        let xs: Vec<f64> = (0..GRID)
            .map(|i| bound * (i as f64 / (GRID - 1) as f64).powi(2))
            .collect();
        let vals: Vec<f64> = xs
            .par_iter()
            .map(|&x| setup.profile(make(x)).map(|v| v.0))
            .collect::<Result<_, _>>()?;
        let mut evals = GRID;
        let best = (0..GRID)
            .max_by(|&a, &b| vals[a].total_cmp(&vals[b]))
            .expect("grid is not empty");
        let (a, b) = (xs[best.saturating_sub(1)], xs[(best + 1).min(GRID - 1)]);
        let mut failed = None;
        let (mut x, _, e) = minimise(
            |x| match setup.profile(make(x)) {
                Ok(v) => -v.0,
                Err(err) => {
                    failed = Some(err);
                    f64::INFINITY
                }
            },
            a,
            b,
            1e-9 * bound.abs(),
        );
        if let Some(err) = failed {
            return Err(err);
        }
        evals += e;
        let (mut cl, mut r) = setup.profile(make(x))?;
        // the Brownian end of the grid is exact; prefer it when Brent did not beat it
        if vals[0] >= cl {
            x = 0.0;
            (cl, r) = setup.profile(make(0.0))?;
        }
        evals += 1;
        // adjusted likelihood interval on each side
        let drop = |t: f64| -> Result<f64, EvolutionError> {
            Ok(2.0 * (cl - setup.profile(make(t))?.0) / c - crit)
        };
        let mut side = |end: f64| -> Result<(f64, bool), EvolutionError> {
            if (end - x).abs() <= 1e-12 * bound.abs() {
                return Ok((x, true));
            }
            evals += 1;
            if drop(end)? < 0.0 {
                return Ok((end, true));
            }
            let (mut inside, mut outside) = (x, end);
            for _ in 0..24 {
                let mid = 0.5 * (inside + outside);
                evals += 1;
                if drop(mid)? < 0.0 {
                    inside = mid;
                } else {
                    outside = mid;
                }
            }
            Ok((0.5 * (inside + outside), false))
        };
        let (e1, b1) = side(0.0)?;
        let (e2, b2) = side(bound)?;
        let (lower, lower_at_bound, upper, upper_at_bound) = if bound < 0.0 {
            (e2, b2, e1, b1)
        } else {
            (e1, b1, e2, b2)
        };
        Ok((
            x,
            cl,
            r,
            Estimate {
                value: x,
                lower,
                upper,
                lower_at_bound,
                upper_at_bound,
            },
            evals,
        ))
    };

    let eb_bound = (1e-5f64).ln() / height;
    let alpha_bound = 2f64.ln() / (0.01 * height);
    // the two fits are independent: run them side by side
    let (eb, ou) = rayon::join(
        || fit_one(&|r| Covariance::EarlyBurst { r }, eb_bound),
        || {
            fit_one(
                &|alpha| Covariance::OrnsteinUhlenbeck { alpha },
                alpha_bound,
            )
        },
    );
    let (_, cl_eb, r_eb, r_est, eb_evals) = eb?;
    let (alpha, cl_ou, r_ou, a_est, ou_evals) = ou?;

    let nf = n as f64;
    let aicc = |ll: f64, k: usize| {
        let k = k as f64;
        -2.0 * ll + 2.0 * k + 2.0 * k * (k + 1.0) / (nf - k - 1.0)
    };
    let mut fits = vec![
        ModelFit {
            model: Model::BrownianMotion,
            composite_log_likelihood: cl_bm,
            log_likelihood: cl_bm / c,
            parameters: 2,
            aicc: aicc(cl_bm / c, 2),
            delta_aicc: 0.0,
            weight: 0.0,
            rate: rate_estimate(&r_bm),
            parameter: None,
            half_life: None,
            evaluations: 1,
        },
        ModelFit {
            model: Model::EarlyBurst,
            composite_log_likelihood: cl_eb,
            log_likelihood: cl_eb / c,
            parameters: 3,
            aicc: aicc(cl_eb / c, Model::EarlyBurst.parameters()),
            delta_aicc: 0.0,
            weight: 0.0,
            rate: rate_estimate(&r_eb),
            parameter: Some(r_est),
            half_life: None,
            evaluations: eb_evals,
        },
        ModelFit {
            model: Model::OrnsteinUhlenbeck,
            composite_log_likelihood: cl_ou,
            log_likelihood: cl_ou / c,
            parameters: 3,
            aicc: aicc(cl_ou / c, Model::OrnsteinUhlenbeck.parameters()),
            delta_aicc: 0.0,
            weight: 0.0,
            rate: rate_estimate(&r_ou),
            parameter: Some(a_est),
            half_life: Some(if alpha > 0.0 {
                2f64.ln() / alpha
            } else {
                f64::INFINITY
            }),
            evaluations: ou_evals,
        },
    ];
    let min = fits.iter().map(|f| f.aicc).fold(f64::INFINITY, f64::min);
    let total: f64 = fits.iter().map(|f| (-(f.aicc - min) / 2.0).exp()).sum();
    for f in &mut fits {
        f.delta_aicc = f.aicc - min;
        f.weight = (-f.delta_aicc / 2.0).exp() / total;
    }
    let best = fits
        .iter()
        .min_by(|a, b| a.aicc.total_cmp(&b.aicc))
        .expect("three fits")
        .model;
    let dims = setup.y.ncols();
    Ok(ModelComparison {
        fits,
        best,
        tips: n,
        dimensions: dims,
        dropped_dimensions: y.ncols() - dims,
        pairs: setup.pairs.len(),
        dropped_pairs,
        adjustment: c,
        tree_height: height,
        ultrametric: tree.is_ultrametric(),
        level: opts.level,
        early_burst_bounds: (eb_bound, 0.0),
        alpha_bounds: (0.0, alpha_bound),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// With independent variables (diagonal R) the adjustment is exactly p − 1.
    #[test]
    fn adjustment_of_independent_variables_is_p_minus_one() {
        let p = 7;
        let r = DMatrix::from_fn(p, p, |i, j| if i == j { 1.0 + i as f64 } else { 0.0 });
        let pairs: Vec<(usize, usize)> = (0..p)
            .flat_map(|i| (i + 1..p).map(move |j| (i, j)))
            .collect();
        assert!((adjustment(&r, &pairs) - (p - 1) as f64).abs() < 1e-12);
        // two variables: c = tr(I)/2 = 1 whatever R
        let r2 = DMatrix::from_row_slice(2, 2, &[2.0, 0.7, 0.7, 1.0]);
        assert!((adjustment(&r2, &[(0, 1)]) - 1.0).abs() < 1e-12);
    }

    /// The adjustment is the ratio of the variance of the composite score for `θ` to its
    /// expected curvature (module docs): simulated Brownian data with correlated variables give
    /// `Var(U)/E[H]` within 20 % of `c` computed from the true rate matrix. The score is that of
    /// early burst's `r` at 0, by central differences of the profile composite likelihood.
    #[test]
    fn adjustment_matches_simulated_score_variance() {
        use crate::evolution::simulate::brownian;
        let text = "((((a:1,b:1):1,(c:1.5,d:0.5):0.5):1,((e:2,f:2):0.5,g:2.5):0.5):1,                    (((h:1,i:1):2,(j:2.5,k:2.5):0.5):0.5,((l:1,m:1):1,(n:0.5,o:0.5):1.5):1.5):0.5);";
        let tree = Tree::parse(text, "t").unwrap();
        let p = 5;
        let f = DMatrix::from_fn(p, p, |i, j| {
            if i <= j {
                1.0 / (1.0 + (j - i) as f64)
            } else {
                0.0
            }
        });
        let r_true = f.transpose() * &f;
        let pairs: Vec<(usize, usize)> = (0..p)
            .flat_map(|i| (i + 1..p).map(move |j| (i, j)))
            .collect();
        let c = adjustment(&r_true, &pairs);
        let h = 1e-3;
        let mut rng = crate::evolution::rng_for(21, 0);
        let (mut scores, mut curv) = (Vec::new(), Vec::new());
        for _ in 0..400 {
            let y = brownian(&tree, &tree.lengths(), &vec![0.0; p], &f, &mut rng);
            let l =
                |r: f64| composite_log_likelihood(&tree, &y, Covariance::EarlyBurst { r }).unwrap();
            let (lm, l0, lp) = (l(-h), l(0.0), l(h));
            scores.push((lp - lm) / (2.0 * h));
            curv.push(-(lp - 2.0 * l0 + lm) / (h * h));
        }
        let n = scores.len() as f64;
        let mean = scores.iter().sum::<f64>() / n;
        let var = scores.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / (n - 1.0);
        let hbar = curv.iter().sum::<f64>() / n;
        let ratio = var / hbar;
        assert!((ratio / c - 1.0).abs() < 0.2, "Var(U)/H = {ratio}, c = {c}");
        assert!(c > 1.0 && c < (p - 1) as f64 * 2.0, "{c}");
    }
}
