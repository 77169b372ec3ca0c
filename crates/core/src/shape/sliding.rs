//! Sliding semilandmarks along curves.
//!
//! A curve is an ordered run of landmark indices whose first and last entries stay fixed; the
//! entries between them are semilandmarks, which may move along the curve's tangent so that
//! their exact position along the curve (an artefact of how they were placed) stops carrying
//! shape information. Each semilandmark slides along the unit tangent estimated from its two
//! curve neighbours, `(x_next − x_prev)/‖x_next − x_prev‖`, by an amount chosen to minimise
//! either
//!
//! * the thin-plate bending energy of the deformation from the current mean onto the specimen
//!   (Bookstein 1997, "Landmark methods for forms without landmarks", Med. Image Anal. 1(3);
//!   Gunz, Mitteroecker & Bookstein 2005, "Semilandmarks in three dimensions", eq. for
//!   `T = −(Uᵀ B U)⁻¹ Uᵀ B X`): a linear solve in the slide amounts, or
//! * the Procrustes distance to the mean: each slide is the projection of `mean − specimen`
//!   (in the specimen's frame) onto its tangent (Gunz et al. 2005, the Procrustes alternative).
//!
//! Because the tangent step leaves the curve, each slid point is then projected onto the
//! nearest point of the piecewise-linear curve through the specimen's *originally digitised*
//! points of that curve (its end points included), so semilandmarks never drift off the
//! recorded outline; this can be turned off. The step is alternated with GPA: superimpose, slide
//! every specimen towards the new mean, repeat until the mean moves less than a tolerance.
//!
//! Slides are computed in each specimen's own frame, so the output coordinates are the
//! specimen's (not Procrustes) coordinates. The bending energy `tr(Xᵀ Bₑ X)` is unchanged by
//! rotating or translating `X` and scales with the square of its size, so its minimiser is the
//! same in either frame; for the Procrustes criterion the mean is mapped into the specimen's frame
//! by the similarity that takes the specimen's aligned copy back onto it.

use nalgebra::{DMatrix, DVector, RowDVector};
use thiserror::Error;

use super::tps::{self, TpsError};

/// One curve of semilandmarks: `landmarks[0]` and `landmarks[last]` are fixed, the rest slide.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Curve {
    pub landmarks: Vec<usize>,
}

/// What sliding minimises.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum SlideCriterion {
    /// Thin-plate bending energy of the deformation from the mean onto the specimen.
    BendingEnergy,
    /// Procrustes distance to the mean.
    ProcrustesDistance,
}

/// Failures of semilandmark sliding.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum SlidingError {
    /// A curve with fewer than three entries has nothing to slide.
    #[error(
        "curve {curve}: {len} landmarks, at least 3 are needed (two fixed ends and a semilandmark)"
    )]
    CurveTooShort { curve: usize, len: usize },
    /// A curve names a landmark beyond the configuration.
    #[error("curve {curve}: landmark {landmark} does not exist (configurations have {landmarks})")]
    BadIndex {
        curve: usize,
        landmark: usize,
        landmarks: usize,
    },
    /// A semilandmark appears twice (in one curve's interior twice, in two curves, or also as a
    /// fixed curve end).
    #[error("landmark {0} is listed as a semilandmark more than once or is also a fixed curve end")]
    Duplicate(usize),
    /// The two curve neighbours of a semilandmark coincide, so it has no tangent.
    #[error("specimen {specimen}: semilandmark {landmark} has coincident neighbours, no tangent")]
    NoTangent { specimen: usize, landmark: usize },
    /// Configuration shapes disagree.
    #[error("configuration is {got_rows}×{got_cols}, expected {rows}×{cols}")]
    ShapeMismatch {
        rows: usize,
        cols: usize,
        got_rows: usize,
        got_cols: usize,
    },
    /// The mean configuration is degenerate for a thin-plate spline.
    #[error("bending energy of the mean: {0}")]
    Tps(#[from] TpsError),
    /// A configuration has zero size, so no similarity to the mean exists.
    #[error("specimen {0}: zero centroid size")]
    ZeroSize(usize),
}

/// The sliding semilandmarks of a set of curves, validated against `k` landmarks.
#[derive(Debug, Clone)]
pub(crate) struct Semis {
    /// (landmark, prev neighbour, next neighbour, curve index).
    points: Vec<(usize, usize, usize, usize)>,
}

impl Semis {
    pub(crate) fn new(curves: &[Curve], k: usize) -> Result<Self, SlidingError> {
        let mut role = vec![0u8; k]; // 1 = curve end, 2 = semilandmark
        let mut points = Vec::new();
        for (c, curve) in curves.iter().enumerate() {
            let n = curve.landmarks.len();
            if n < 3 {
                return Err(SlidingError::CurveTooShort { curve: c, len: n });
            }
            for &l in &curve.landmarks {
                if l >= k {
                    return Err(SlidingError::BadIndex {
                        curve: c,
                        landmark: l,
                        landmarks: k,
                    });
                }
            }
            for (pos, &l) in curve.landmarks.iter().enumerate() {
                let end = pos == 0 || pos == n - 1;
                match (end, role[l]) {
                    (true, 2) | (false, 1 | 2) => return Err(SlidingError::Duplicate(l)),
                    (true, _) => role[l] = 1,
                    (false, _) => {
                        role[l] = 2;
                        points.push((l, curve.landmarks[pos - 1], curve.landmarks[pos + 1], c));
                    }
                }
            }
        }
        Ok(Self { points })
    }

    pub(crate) fn len(&self) -> usize {
        self.points.len()
    }

    /// Unit tangents (`s × m`) of the semilandmarks in `x`.
    fn tangents(&self, x: &DMatrix<f64>, specimen: usize) -> Result<DMatrix<f64>, SlidingError> {
        let m = x.ncols();
        let mut u = DMatrix::zeros(self.points.len(), m);
        for (j, &(l, p, n, _)) in self.points.iter().enumerate() {
            let d: RowDVector<f64> = x.row(n) - x.row(p);
            let len = d.norm();
            if len <= 0.0 || !len.is_finite() {
                return Err(SlidingError::NoTangent {
                    specimen,
                    landmark: l,
                });
            }
            u.row_mut(j).copy_from(&(d / len));
        }
        Ok(u)
    }
}

/// Slide amounts `t` minimising `tr((X + Σtⱼeₗⱼuⱼᵀ)ᵀ B (X + …))`: the normal equations
/// `Σᵢ B[lⱼ,lᵢ](uⱼ·uᵢ) tᵢ = −uⱼ·(BX)[lⱼ]`, solved by SVD with a relative cut-off so that
/// directions of zero curvature (which cannot change the energy) get no slide.
fn bending_slides(
    semis: &Semis,
    b: &DMatrix<f64>,
    x: &DMatrix<f64>,
    u: &DMatrix<f64>,
) -> DVector<f64> {
    let s = semis.len();
    let bx = b * x;
    let mut a = DMatrix::zeros(s, s);
    let mut g = DVector::zeros(s);
    for (j, &(lj, ..)) in semis.points.iter().enumerate() {
        g[j] = -u.row(j).dot(&bx.row(lj));
        for (i, &(li, ..)) in semis.points.iter().enumerate() {
            a[(j, i)] = b[(lj, li)] * u.row(j).dot(&u.row(i));
        }
    }
    let svd = a.svd(true, true);
    let tol = svd.singular_values.max() * 1e-12;
    svd.solve(&g, tol).unwrap_or_else(|_| DVector::zeros(s))
}

/// Nearest point to `p` on the polyline through `poly`'s rows.
fn project_onto_polyline(p: &RowDVector<f64>, poly: &DMatrix<f64>) -> RowDVector<f64> {
    let mut best = poly.row(0).into_owned();
    let mut best_d = (p - &best).norm_squared();
    for i in 0..poly.nrows().saturating_sub(1) {
        let a = poly.row(i);
        let ab: RowDVector<f64> = poly.row(i + 1) - a;
        let len2 = ab.norm_squared();
        let t = if len2 > 0.0 {
            ((p - a).dot(&ab) / len2).clamp(0.0, 1.0)
        } else {
            0.0
        };
        let q: RowDVector<f64> = a + ab * t;
        let d = (p - &q).norm_squared();
        if d < best_d {
            best_d = d;
            best = q;
        }
    }
    best
}

/// One sliding step of a single configuration `x` (in its own frame) against `reference`
/// (already in `x`'s frame for the Procrustes criterion; any frame for bending energy, whose
/// matrix `b` is that of the reference). `outline`, when given, is the configuration whose
/// curve points define the polylines to project onto.
#[allow(
    clippy::too_many_arguments,
    reason = "internal step shared by the public entry points"
)]
pub(crate) fn slide_step(
    semis: &Semis,
    curves: &[Curve],
    x: &DMatrix<f64>,
    reference: &DMatrix<f64>,
    b: Option<&DMatrix<f64>>,
    criterion: SlideCriterion,
    outline: Option<&DMatrix<f64>>,
    specimen: usize,
) -> Result<DMatrix<f64>, SlidingError> {
    let u = semis.tangents(x, specimen)?;
    let t = match criterion {
        SlideCriterion::BendingEnergy => {
            let owned;
            let b = if let Some(b) = b {
                b
            } else {
                owned = tps::bending_energy_matrix(reference)?;
                &owned
            };
            bending_slides(semis, b, x, &u)
        }
        SlideCriterion::ProcrustesDistance => DVector::from_fn(semis.len(), |j, _| {
            let l = semis.points[j].0;
            u.row(j).dot(&(reference.row(l) - x.row(l)))
        }),
    };
    let mut y = x.clone();
    for (j, &(l, .., c)) in semis.points.iter().enumerate() {
        let moved: RowDVector<f64> = x.row(l) + u.row(j) * t[j];
        let moved = match outline {
            Some(o) => {
                let idx = &curves[c].landmarks;
                let poly = DMatrix::from_fn(idx.len(), x.ncols(), |r, d| o[(idx[r], d)]);
                project_onto_polyline(&moved, &poly)
            }
            None => moved,
        };
        y.row_mut(l).copy_from(&moved);
    }
    Ok(y)
}

/// Slides the semilandmarks of one configuration `x` against a fixed `reference` (same shape;
/// for [`SlideCriterion::ProcrustesDistance`] `x` is first superimposed on the reference), for
/// `iterations` steps, each followed by projection onto the polyline through `x`'s original
/// curve points when `project` is set. Returns the slid configuration in `x`'s frame.
pub fn slide_to_reference(
    x: &DMatrix<f64>,
    reference: &DMatrix<f64>,
    curves: &[Curve],
    criterion: SlideCriterion,
    iterations: usize,
    project: bool,
) -> Result<DMatrix<f64>, SlidingError> {
    if x.shape() != reference.shape() {
        return Err(SlidingError::ShapeMismatch {
            rows: reference.nrows(),
            cols: reference.ncols(),
            got_rows: x.nrows(),
            got_cols: x.ncols(),
        });
    }
    let semis = Semis::new(curves, x.nrows())?;
    let b = match criterion {
        SlideCriterion::BendingEnergy => Some(tps::bending_energy_matrix(reference)?),
        SlideCriterion::ProcrustesDistance => None,
    };
    let mut cur = x.clone();
    for _ in 0..iterations {
        let r_in_x = match criterion {
            SlideCriterion::BendingEnergy => reference.clone(),
            SlideCriterion::ProcrustesDistance => {
                // The reference in x's frame: the inverse of the fit of x onto the reference.
                let s = super::align::fit_similarity(&cur, reference, true)
                    .and_then(|s| s.inverse())
                    .ok_or(SlidingError::ZeroSize(0))?;
                s.apply(reference)
            }
        };
        cur = slide_step(
            &semis,
            curves,
            &cur,
            &r_in_x,
            b.as_ref(),
            criterion,
            project.then_some(x),
            0,
        )?;
    }
    Ok(cur)
}

/// Options of [`slide_semilandmarks`].
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SlideOptions {
    pub criterion: SlideCriterion,
    /// Project slid points onto the polyline through the specimen's original curve points.
    pub project: bool,
    /// Stop when the partial Procrustes distance between successive GPA means is below this
    /// (default `1e-8`).
    pub tolerance: f64,
    /// At most this many slide + GPA rounds (default 20).
    pub max_iterations: usize,
    /// The superimposition run between slides.
    pub gpa: super::GpaOptions,
}

impl Default for SlideOptions {
    fn default() -> Self {
        Self {
            criterion: SlideCriterion::BendingEnergy,
            project: true,
            tolerance: 1e-8,
            max_iterations: 20,
            gpa: super::GpaOptions::default(),
        }
    }
}

/// Result of [`slide_semilandmarks`].
#[derive(Debug, Clone, serde::Serialize)]
pub struct Slid {
    /// The specimens with slid semilandmarks, in their own frames and units.
    pub sample: super::Sample,
    /// GPA of the slid sample (its mean is the final reference).
    pub gpa: super::Gpa,
    /// Slide rounds performed.
    pub iterations: usize,
    /// Whether the mean moved less than the tolerance in the last round.
    pub converged: bool,
    /// Partial Procrustes distance between the last two means.
    pub final_change: f64,
}

/// Errors of the full sliding procedure: sliding itself or the superimposition.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum SlideProcedureError {
    #[error(transparent)]
    Sliding(#[from] SlidingError),
    #[error("superimposition while sliding: {0}")]
    Shape(#[from] super::ShapeError),
}

/// Slides the semilandmarks of every specimen, alternating with GPA: superimpose, slide every
/// specimen towards the mean (in its own frame), repeat until the mean moves less than
/// `tolerance` (partial Procrustes distance) or `max_iterations` rounds have run. The returned
/// GPA is of the final slid sample.
pub fn slide_semilandmarks(
    sample: &super::Sample,
    curves: &[Curve],
    opts: &SlideOptions,
) -> Result<Slid, SlideProcedureError> {
    use super::align::{fit_similarity, partial_procrustes_distance};
    let (n, k) = (sample.n(), sample.k());
    let semis = Semis::new(curves, k)?;
    let originals: Vec<DMatrix<f64>> = (0..n).map(|i| sample.config(i)).collect();
    let mut current = originals.clone();
    let mut g = super::gpa(sample, &opts.gpa)?;
    let mut iterations = 0;
    let mut converged = false;
    let mut final_change = f64::INFINITY;
    while iterations < opts.max_iterations {
        iterations += 1;
        let mean = g.mean.clone();
        let b = match opts.criterion {
            SlideCriterion::BendingEnergy => {
                Some(tps::bending_energy_matrix(&mean).map_err(SlidingError::from)?)
            }
            SlideCriterion::ProcrustesDistance => None,
        };
        for (i, cur) in current.iter_mut().enumerate() {
            let reference = match opts.criterion {
                SlideCriterion::BendingEnergy => mean.clone(),
                SlideCriterion::ProcrustesDistance => {
                    // The aligned copy is an exact similarity image of the specimen, so this fit
                    // is the inverse of the specimen's GPA transform.
                    let aligned = g.aligned.config(i);
                    fit_similarity(&aligned, cur, true)
                        .ok_or(SlidingError::ZeroSize(i))?
                        .apply(&mean)
                }
            };
            *cur = slide_step(
                &semis,
                curves,
                cur,
                &reference,
                b.as_ref(),
                opts.criterion,
                opts.project.then_some(&originals[i]),
                i,
            )?;
        }
        g = super::gpa(&super::Sample::from_configs(&current)?, &opts.gpa)?;
        final_change = partial_procrustes_distance(&mean, &g.mean).unwrap_or(f64::INFINITY);
        if final_change < opts.tolerance {
            converged = true;
            break;
        }
    }
    Ok(Slid {
        sample: super::Sample::from_configs(&current)?,
        gpa: g,
        iterations,
        converged,
        final_change,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Quarter-circle arc of radius 1: ends at angles 0 and π/2 fixed, `angles` in between
    /// sliding, plus two fixed landmarks off the curve (centre and an outer point) so the
    /// configuration is not degenerate.
    fn arc(angles: &[f64]) -> (DMatrix<f64>, Vec<Curve>) {
        let mut pts = vec![[0.0, 0.0], [1.5, 1.5], [1.0, 0.0]];
        for &a in angles {
            pts.push([a.cos(), a.sin()]);
        }
        pts.push([0.0, 1.0]);
        let k = pts.len();
        let x = DMatrix::from_fn(k, 2, |i, d| pts[i][d]);
        let curve = Curve {
            landmarks: (2..k).collect(),
        };
        (x, vec![curve])
    }

    fn even(s: usize) -> Vec<f64> {
        (1..=s)
            .map(|j| std::f64::consts::FRAC_PI_2 * j as f64 / (s + 1) as f64)
            .collect()
    }

    fn uneven(s: usize) -> Vec<f64> {
        (1..=s)
            .map(|j| std::f64::consts::FRAC_PI_2 * (j as f64 / (s + 1) as f64).powf(1.6))
            .collect()
    }

    fn angle_errors(x: &DMatrix<f64>, s: usize) -> f64 {
        let target = even(s);
        (0..s)
            .map(|j| (x[(3 + j, 1)].atan2(x[(3 + j, 0)]) - target[j]).abs())
            .fold(0.0, f64::max)
    }

    #[test]
    fn uneven_arc_slides_towards_even_reference_spacing() {
        let s = 9;
        let (reference, curves) = arc(&even(s));
        let (x, _) = arc(&uneven(s));
        let before = angle_errors(&x, s);
        for criterion in [
            SlideCriterion::ProcrustesDistance,
            SlideCriterion::BendingEnergy,
        ] {
            let y = slide_to_reference(&x, &reference, &curves, criterion, 30, true).unwrap();
            let after = angle_errors(&y, s);
            assert!(
                after < 0.2 * before,
                "{criterion:?}: max angular error {before} before, {after} after"
            );
            // Projection keeps the points on the specimen's polyline, i.e. inside the unit
            // circle by at most the chord sagitta.
            for j in 0..s {
                let r = y.row(3 + j).norm();
                assert!(r <= 1.0 + 1e-12 && r > 0.97, "radius {r}");
            }
        }
    }

    #[test]
    fn procrustes_step_leaves_no_tangential_residual() {
        let s = 7;
        let (reference, curves) = arc(&even(s));
        let (x, _) = arc(&uneven(s));
        let semis = Semis::new(&curves, x.nrows()).unwrap();
        let y = slide_step(
            &semis,
            &curves,
            &x,
            &reference,
            None,
            SlideCriterion::ProcrustesDistance,
            None,
            0,
        )
        .unwrap();
        let u = semis.tangents(&x, 0).unwrap();
        for (j, &(l, ..)) in semis.points.iter().enumerate() {
            let r = u.row(j).dot(&(y.row(l) - reference.row(l)));
            assert!(r.abs() < 1e-14, "tangential residual {r}");
        }
    }

    #[test]
    fn bending_step_minimises_energy_along_tangents() {
        let s = 7;
        let (reference, curves) = arc(&even(s));
        let (x, _) = arc(&uneven(s));
        let semis = Semis::new(&curves, x.nrows()).unwrap();
        let b = tps::bending_energy_matrix(&reference).unwrap();
        let y = slide_step(
            &semis,
            &curves,
            &x,
            &reference,
            Some(&b),
            SlideCriterion::BendingEnergy,
            None,
            0,
        )
        .unwrap();
        let e0 = tps::energy_with(&b, &x);
        let e1 = tps::energy_with(&b, &y);
        assert!(e1 <= e0, "energy rose from {e0} to {e1}");
        assert!(e1 < 0.5 * e0, "energy {e0} → {e1}: hardly any slide");
        // Stationarity (Gunz et al. 2005): the gradient along every tangent vanishes.
        let u = semis.tangents(&x, 0).unwrap();
        let by = &b * &y;
        for (j, &(l, ..)) in semis.points.iter().enumerate() {
            let g = u.row(j).dot(&by.row(l));
            assert!(g.abs() < 1e-9 * e0.max(1.0), "gradient {g}");
        }
        // And any other slide along the same tangents does no better.
        let mut z = y.clone();
        for (j, &(l, ..)) in semis.points.iter().enumerate() {
            let d = u.row(j) * (0.01 * (j as f64 - 3.0));
            let mut row = z.row_mut(l);
            row += d;
        }
        assert!(tps::energy_with(&b, &z) >= e1);
    }

    #[test]
    fn curve_validation() {
        let k = 6;
        let bad = |l: Vec<usize>| Semis::new(&[Curve { landmarks: l }], k).unwrap_err();
        assert_eq!(
            bad(vec![0, 1]),
            SlidingError::CurveTooShort { curve: 0, len: 2 }
        );
        assert!(matches!(bad(vec![0, 1, 9]), SlidingError::BadIndex { .. }));
        assert_eq!(bad(vec![0, 1, 1, 2]), SlidingError::Duplicate(1));
        let two = [
            Curve {
                landmarks: vec![0, 1, 2],
            },
            Curve {
                landmarks: vec![1, 3, 4],
            },
        ];
        assert_eq!(Semis::new(&two, k).unwrap_err(), SlidingError::Duplicate(1));
        // Shared end points are fine.
        let chain = [
            Curve {
                landmarks: vec![0, 1, 2],
            },
            Curve {
                landmarks: vec![2, 3, 4],
            },
        ];
        assert_eq!(Semis::new(&chain, k).unwrap().len(), 2);
    }
}
