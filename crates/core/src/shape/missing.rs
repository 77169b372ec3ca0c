//! Estimating missing landmarks from the complete specimens of a sample.
//!
//! Input is a [`Sample`] with placeholder values (ignored) where landmarks are missing, and a
//! mask `missing[i·k + j]` (specimen-major, like the sample). [`sample_with_missing`] builds both
//! from flat data with `NaN` for the missing coordinates. Two estimators:
//!
//! * **Thin-plate spline** ([`MissingMethod::ThinPlateSpline`]): the reference is the GPA mean
//!   of the complete specimens (the single complete specimen itself when there is only one). For
//!   each incomplete specimen the spline taking the reference's *present* landmarks onto the
//!   specimen's is fitted, and the reference's missing landmarks are warped through it
//!   (Gunz, Mitteroecker, Neubauer, Weber & Bookstein 2009, "Principles for the virtual
//!   reconstruction of hominin crania", J. Hum. Evol. 57, the TPS approach). Exact for affine
//!   differences between reference and specimen.
//! * **Multivariate regression** ([`MissingMethod::Regression`]): for each pattern of present
//!   landmarks, the complete specimens are superimposed by GPA *on the present landmarks only*;
//!   each complete specimen is carried whole by the similarity fitted on its present landmarks,
//!   as is the incomplete specimen. The missing coordinates (`|M|·m` responses) are regressed on
//!   the present ones (`|P|·m` predictors) with an intercept across the complete specimens, the
//!   prediction for the incomplete specimen mapped back into its own frame (Gunz et al. 2009,
//!   the regression approach; Neeser, Ackermann & Gain 2009 compare the two). Predictors nearly
//!   always outnumber the complete specimens, so the fit is taken through the SVD of the centred
//!   predictor matrix: with `ridge = 0` the minimum-norm least-squares solution (equivalently,
//!   regression on all principal components of the predictors with non-zero variance, cut off at
//!   `1e-10` of the largest singular value), with `ridge = λ > 0` ridge regression
//!   `β = (XᵀX + λI)⁻¹XᵀY`, `λ` in squared Procrustes units (unit-centroid-size configurations).
//!   Exact when the sample varies by affine transformations, as in the unit tests.
//!
//! Both need at least `m + 1` present landmarks per incomplete specimen, and at least one
//! complete specimen (two for regression). The result marks every estimated landmark so that
//! downstream output can flag it.

use std::collections::HashMap;

use nalgebra::{DMatrix, RowDVector};
use serde::Serialize;
use thiserror::Error;

use super::align::Similarity;
use super::tps::{Tps, TpsError};
use super::{GpaOptions, Sample, ShapeError, gpa, opa};

/// How missing landmarks are estimated.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum MissingMethod {
    /// Warp the complete specimens' mean onto each specimen with a thin-plate spline.
    ThinPlateSpline,
    /// Regress missing on present coordinates across the complete specimens; `ridge` ≥ 0 (0 is
    /// minimum-norm least squares).
    Regression { ridge: f64 },
}

/// Options of [`estimate_missing`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MissingOptions {
    pub method: MissingMethod,
    /// Superimposition of the complete specimens (its `scale` must stay `true` for regression).
    pub gpa: GpaOptions,
}

impl Default for MissingOptions {
    fn default() -> Self {
        Self {
            method: MissingMethod::ThinPlateSpline,
            gpa: GpaOptions::default(),
        }
    }
}

/// Failures of missing-landmark estimation.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum MissingError {
    /// The mask's length is not `n·k`.
    #[error("missing-landmark mask has {got} entries, expected {expected} (specimens × landmarks)")]
    MaskLength { expected: usize, got: usize },
    /// Not enough complete specimens to build a reference.
    #[error(
        "{method} estimation needs at least {needed} complete specimen(s), the sample has {got}"
    )]
    TooFewComplete {
        method: &'static str,
        needed: usize,
        got: usize,
    },
    /// A specimen has too few present landmarks to fit the map.
    #[error(
        "specimen {specimen}: {present} landmarks present, at least {needed} are needed to estimate the rest"
    )]
    TooFewPresent {
        specimen: usize,
        present: usize,
        needed: usize,
    },
    /// The spline from the reference's present landmarks is degenerate.
    #[error("specimen {specimen}: {source}")]
    Tps { specimen: usize, source: TpsError },
    /// The ridge parameter is negative or not finite.
    #[error("ridge parameter {0} must be finite and non-negative")]
    BadRidge(f64),
    /// `data.len()` is not `n·k·m`, or the dimension is not 2 or 3.
    #[error("sample with missing values: {0}")]
    Shape(#[from] ShapeError),
}

/// The sample with missing landmarks filled in.
#[derive(Debug, Clone, Serialize)]
pub struct Filled {
    /// All landmarks, estimated ones included, in each specimen's own frame and units.
    pub sample: Sample,
    /// `estimated[i·k + j]`: landmark `j` of specimen `i` was estimated (equal to the input mask).
    pub estimated: Vec<bool>,
    /// Indices of the complete specimens used as the reference set.
    pub complete: Vec<usize>,
}

/// Builds a sample and its missing mask from flat `n × k × m` data (specimen-major, as
/// [`Sample`]) in which any non-finite coordinate marks its landmark missing. Missing
/// landmarks get placeholder zeros.
pub fn sample_with_missing(
    n: usize,
    k: usize,
    m: usize,
    mut data: Vec<f64>,
) -> Result<(Sample, Vec<bool>), MissingError> {
    let cells = n.saturating_mul(k);
    let mut missing = vec![
        false;
        if data.len() == cells.saturating_mul(m) {
            cells
        } else {
            0
        }
    ];
    if !missing.is_empty() {
        for (cell, flag) in missing.iter_mut().enumerate() {
            let vals = &mut data[cell * m..(cell + 1) * m];
            if vals.iter().any(|v| !v.is_finite()) {
                *flag = true;
                vals.fill(0.0);
            }
        }
    }
    let sample = Sample::new(n, k, m, data)?;
    Ok((sample, missing))
}

fn from_opa(r: &super::OpaResult) -> Similarity {
    Similarity {
        scale: r.scale,
        rotation: r.rotation.clone(),
        translation: RowDVector::from_iterator(r.translation.len(), r.translation.iter().copied()),
    }
}

fn rows(c: &DMatrix<f64>, idx: &[usize]) -> DMatrix<f64> {
    DMatrix::from_fn(idx.len(), c.ncols(), |r, d| c[(idx[r], d)])
}

/// Row-major flattening of the rows `idx` of `c`.
fn flat_rows(c: &DMatrix<f64>, idx: &[usize]) -> Vec<f64> {
    idx.iter()
        .flat_map(|&j| (0..c.ncols()).map(move |d| c[(j, d)]))
        .collect()
}

/// Estimates the masked landmarks of `sample` (see the module header).
pub fn estimate_missing(
    sample: &Sample,
    missing: &[bool],
    opts: &MissingOptions,
) -> Result<Filled, MissingError> {
    let (n, k, m) = (sample.n(), sample.k(), sample.m());
    if missing.len() != n * k {
        return Err(MissingError::MaskLength {
            expected: n * k,
            got: missing.len(),
        });
    }
    if let MissingMethod::Regression { ridge } = opts.method
        && !(ridge.is_finite() && ridge >= 0.0)
    {
        return Err(MissingError::BadRidge(ridge));
    }
    let is_missing = |i: usize, j: usize| missing[i * k + j];
    let complete: Vec<usize> = (0..n)
        .filter(|&i| (0..k).all(|j| !is_missing(i, j)))
        .collect();
    let incomplete: Vec<usize> = (0..n)
        .filter(|&i| (0..k).any(|j| is_missing(i, j)))
        .collect();
    let mut configs: Vec<DMatrix<f64>> = (0..n).map(|i| sample.config(i)).collect();
    if incomplete.is_empty() {
        return Ok(Filled {
            sample: sample.clone(),
            estimated: missing.to_vec(),
            complete,
        });
    }
    for &i in &incomplete {
        let present = (0..k).filter(|&j| !is_missing(i, j)).count();
        if present < m + 1 {
            return Err(MissingError::TooFewPresent {
                specimen: i,
                present,
                needed: m + 1,
            });
        }
    }
    match opts.method {
        MissingMethod::ThinPlateSpline => {
            if complete.is_empty() {
                return Err(MissingError::TooFewComplete {
                    method: "thin-plate spline",
                    needed: 1,
                    got: 0,
                });
            }
            let reference = if complete.len() == 1 {
                configs[complete[0]].clone()
            } else {
                gpa(&sample.select(&complete), &opts.gpa)?.mean
            };
            for &i in &incomplete {
                let present: Vec<usize> = (0..k).filter(|&j| !is_missing(i, j)).collect();
                let absent: Vec<usize> = (0..k).filter(|&j| is_missing(i, j)).collect();
                let tps = Tps::fit(&rows(&reference, &present), &rows(&configs[i], &present))
                    .map_err(|source| MissingError::Tps {
                        specimen: i,
                        source,
                    })?;
                let est =
                    tps.warp(&rows(&reference, &absent))
                        .map_err(|source| MissingError::Tps {
                            specimen: i,
                            source,
                        })?;
                for (r, &j) in absent.iter().enumerate() {
                    configs[i].row_mut(j).copy_from(&est.row(r));
                }
            }
        }
        MissingMethod::Regression { ridge } => {
            if complete.len() < 2 {
                return Err(MissingError::TooFewComplete {
                    method: "regression",
                    needed: 2,
                    got: complete.len(),
                });
            }
            // One fitted model per pattern of present landmarks.
            let mut models: HashMap<Vec<usize>, RegressionModel> = HashMap::new();
            for &i in &incomplete {
                let present: Vec<usize> = (0..k).filter(|&j| !is_missing(i, j)).collect();
                let absent: Vec<usize> = (0..k).filter(|&j| is_missing(i, j)).collect();
                if !models.contains_key(&present) {
                    let model =
                        RegressionModel::fit(sample, &complete, &present, &absent, ridge, opts)?;
                    models.insert(present.clone(), model);
                }
                let model = &models[&present];
                let est = model.predict(&configs[i])?;
                for (r, &j) in absent.iter().enumerate() {
                    configs[i].row_mut(j).copy_from(&est.row(r));
                }
            }
        }
    }
    Ok(Filled {
        sample: Sample::from_configs(&configs)?,
        estimated: missing.to_vec(),
        complete,
    })
}

/// Regression of the absent landmarks on the present ones, in the Procrustes frame of the
/// complete specimens' present landmarks.
struct RegressionModel {
    present: Vec<usize>,
    absent_count: usize,
    /// GPA mean of the present landmarks.
    mean_present: DMatrix<f64>,
    x_mean: RowDVector<f64>,
    y_mean: RowDVector<f64>,
    /// `|P|·m × |M|·m`.
    beta: DMatrix<f64>,
    scale: bool,
}

impl RegressionModel {
    fn fit(
        sample: &Sample,
        complete: &[usize],
        present: &[usize],
        absent: &[usize],
        ridge: f64,
        opts: &MissingOptions,
    ) -> Result<Self, MissingError> {
        let m = sample.m();
        let sub: Vec<DMatrix<f64>> = complete
            .iter()
            .map(|&c| rows(&sample.config(c), present))
            .collect();
        let g = gpa(&Sample::from_configs(&sub)?, &opts.gpa)?;
        let scale = opts.gpa.scale;
        let nc = complete.len();
        let mut x = DMatrix::zeros(nc, present.len() * m);
        let mut y = DMatrix::zeros(nc, absent.len() * m);
        for (r, &c) in complete.iter().enumerate() {
            let full = sample.config(c);
            let t = from_opa(&opa(&g.mean, &sub[r], scale)?);
            let aligned = t.apply(&full);
            x.row_mut(r).copy_from_slice(&flat_rows(&aligned, present));
            y.row_mut(r).copy_from_slice(&flat_rows(&aligned, absent));
        }
        let x_mean = x.row_mean();
        let y_mean = y.row_mean();
        for mut row in x.row_iter_mut() {
            row -= &x_mean;
        }
        for mut row in y.row_iter_mut() {
            row -= &y_mean;
        }
        // β = V diag(σ / (σ² + λ)) Uᵀ Y, dropping σ below 1e-10·σ_max (λ = 0: pseudo-inverse).
        let svd = x.svd(true, true);
        let (u, v_t) = (svd.u.expect("u requested"), svd.v_t.expect("v requested"));
        let smax = svd.singular_values.max();
        let mut uty = u.transpose() * &y;
        for (r, &s) in svd.singular_values.iter().enumerate() {
            let f = if s > 1e-10 * smax {
                s / (s * s + ridge)
            } else {
                0.0
            };
            let mut row = uty.row_mut(r);
            row *= f;
        }
        let beta = v_t.transpose() * uty;
        Ok(Self {
            present: present.to_vec(),
            absent_count: absent.len(),
            mean_present: g.mean,
            x_mean,
            y_mean,
            beta,
            scale,
        })
    }

    /// Estimates the absent landmarks of `config` (`|M| × m`, in `config`'s frame).
    fn predict(&self, config: &DMatrix<f64>) -> Result<DMatrix<f64>, MissingError> {
        let m = config.ncols();
        let p = rows(config, &self.present);
        let o = opa(&self.mean_present, &p, self.scale)?;
        let t = from_opa(&o);
        let xs =
            RowDVector::from_row_slice(&flat_rows(&o.aligned, &(0..p.nrows()).collect::<Vec<_>>()));
        let ys = &self.y_mean + (xs - &self.x_mean) * &self.beta;
        let est = DMatrix::from_row_slice(self.absent_count, m, ys.as_slice());
        let back = t.inverse().ok_or(ShapeError::ZeroSize(0))?;
        Ok(back.apply(&est))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A 2D reference of 10 landmarks in general position.
    fn reference() -> DMatrix<f64> {
        DMatrix::from_row_slice(
            10,
            2,
            &[
                0.0, 0.0, 1.0, 0.1, 2.0, 0.0, 2.2, 1.0, 1.9, 2.0, 1.0, 2.3, 0.1, 1.9, -0.2, 1.0,
                0.8, 1.1, 1.3, 0.7,
            ],
        )
    }

    /// `n` specimens, each an affine image (random linear part near a rotation-scaling, random
    /// translation) of `base`, optionally with a smooth non-linear bend `y += bend·x²`.
    fn sample(base: &DMatrix<f64>, n: usize, bend: f64, seed: u64) -> Vec<DMatrix<f64>> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..n)
            .map(|_| {
                let th: f64 = rng.random_range(-0.5..0.5);
                let sc: f64 = rng.random_range(0.8..1.5);
                let (c, s) = (th.cos() * sc, th.sin() * sc);
                let a = DMatrix::from_row_slice(
                    2,
                    2,
                    &[
                        c + rng.random_range(-0.2..0.2),
                        s + rng.random_range(-0.2..0.2),
                        -s + rng.random_range(-0.2..0.2),
                        c + rng.random_range(-0.2..0.2),
                    ],
                );
                let mut x = base * a;
                let tx: f64 = rng.random_range(-3.0..3.0);
                let ty: f64 = rng.random_range(-3.0..3.0);
                let b = bend * rng.random_range(0.5..1.0);
                for mut row in x.row_iter_mut() {
                    let x0 = row[0];
                    row[0] += tx;
                    row[1] += ty + b * x0 * x0;
                }
                x
            })
            .collect()
    }

    fn remove(configs: &[DMatrix<f64>], holes: &[(usize, usize)]) -> (Sample, Vec<bool>) {
        let s = Sample::from_configs(configs).unwrap();
        let (n, k, m) = (s.n(), s.k(), s.m());
        let mut data = s.data().to_vec();
        for &(i, j) in holes {
            for d in 0..m {
                data[(i * k + j) * m + d] = f64::NAN;
            }
        }
        sample_with_missing(n, k, m, data).unwrap()
    }

    fn max_error(filled: &Filled, truth: &[DMatrix<f64>], holes: &[(usize, usize)]) -> f64 {
        holes
            .iter()
            .map(|&(i, j)| (filled.sample.config(i).row(j) - truth[i].row(j)).norm())
            .fold(0.0, f64::max)
    }

    #[test]
    fn affine_sample_is_recovered_by_both_methods() {
        let truth = sample(&reference(), 14, 0.0, 7);
        let holes = [(0, 3), (0, 8), (1, 5), (2, 0), (2, 9), (2, 4)];
        let (s, mask) = remove(&truth, &holes);
        for method in [
            MissingMethod::ThinPlateSpline,
            MissingMethod::Regression { ridge: 0.0 },
        ] {
            let opts = MissingOptions {
                method,
                ..MissingOptions::default()
            };
            let filled = estimate_missing(&s, &mask, &opts).unwrap();
            let err = max_error(&filled, &truth, &holes);
            assert!(err < 1e-8, "{method:?}: error {err}");
            assert_eq!(filled.estimated, mask);
            assert_eq!(filled.complete, (3..14).collect::<Vec<_>>());
            // Present landmarks are untouched.
            for i in 0..14 {
                for j in 0..10 {
                    if !mask[i * 10 + j] {
                        assert_eq!(filled.sample.config(i).row(j), truth[i].row(j));
                    }
                }
            }
        }
    }

    #[test]
    fn regression_learns_a_nonlinear_but_shared_pattern() {
        // Every specimen carries the same kind of bend with varying strength: a one-factor
        // model, which the regression learns from the complete specimens and which no affine
        // map can express.
        let truth = sample(&reference(), 30, 0.3, 11);
        let holes = [(0, 3), (1, 4)];
        let (s, mask) = remove(&truth, &holes);
        let opts = MissingOptions {
            method: MissingMethod::Regression { ridge: 0.0 },
            ..MissingOptions::default()
        };
        let reg = max_error(&estimate_missing(&s, &mask, &opts).unwrap(), &truth, &holes);
        let tps = max_error(
            &estimate_missing(&s, &mask, &MissingOptions::default()).unwrap(),
            &truth,
            &holes,
        );
        // Scale of the specimens is ~2; errors are relative to that.
        assert!(reg < 0.05, "regression error {reg}");
        assert!(tps < 0.2, "thin-plate error {tps}");
    }

    #[test]
    fn tps_recovers_an_interior_landmark_under_a_smooth_warp() {
        // Dense grid of 25 landmarks, bent smoothly; landmark 12 (the centre) removed.
        let base = DMatrix::from_fn(25, 2, |i, d| {
            if d == 0 {
                (i % 5) as f64
            } else {
                (i / 5) as f64
            }
        });
        let truth = sample(&base, 8, 0.05, 3);
        let holes = [(0, 12)];
        let (s, mask) = remove(&truth, &holes);
        let filled = estimate_missing(&s, &mask, &MissingOptions::default()).unwrap();
        let err = max_error(&filled, &truth, &holes);
        // The bend displaces the centre by up to ~0.4 from any affine prediction; the spline
        // recovers it to a small fraction of the grid spacing (1).
        assert!(err < 0.02, "error {err}");
    }

    #[test]
    fn too_few_present_or_complete_is_an_error() {
        let truth = sample(&reference(), 5, 0.0, 1);
        let holes: Vec<(usize, usize)> = (0..8).map(|j| (0, j)).collect();
        let (s, mask) = remove(&truth, &holes);
        assert_eq!(
            estimate_missing(&s, &mask, &MissingOptions::default()).unwrap_err(),
            MissingError::TooFewPresent {
                specimen: 0,
                present: 2,
                needed: 3
            }
        );
        let holes: Vec<(usize, usize)> = (0..5).map(|i| (i, i)).collect();
        let (s, mask) = remove(&truth, &holes);
        assert!(matches!(
            estimate_missing(&s, &mask, &MissingOptions::default()),
            Err(MissingError::TooFewComplete { .. })
        ));
        assert!(matches!(
            estimate_missing(&s, &mask[1..], &MissingOptions::default()),
            Err(MissingError::MaskLength { .. })
        ));
        let opts = MissingOptions {
            method: MissingMethod::Regression { ridge: -1.0 },
            ..MissingOptions::default()
        };
        assert_eq!(
            estimate_missing(&s, &mask, &opts).unwrap_err(),
            MissingError::BadRidge(-1.0)
        );
    }
}
