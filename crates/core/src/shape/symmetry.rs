//! Bilateral object symmetry: splitting each configuration into a symmetric and an asymmetric
//! component.
//!
//! A structure with object symmetry (a skull, a vertebra) carries its own mirror plane: each
//! paired landmark `(i, j)` has a counterpart on the other side, and the unpaired landmarks lie
//! on the midline. Following Klingenberg, Barluenga & Meyer 2002 ("Shape analysis of
//! symmetric structures: quantifying variation among individuals and asymmetry", Evolution
//! 56(10)) and Mardia, Bookstein & Moreton 2000 (Biometrika 87(2)):
//!
//! 1. every configuration is reflected (the first coordinate negated) and its paired landmarks
//!    swapped, giving the *relabelled reflection*, which is the same shape as the original
//!    exactly when the original is symmetric;
//! 2. the `n` originals and `n` relabelled reflections are superimposed together by GPA;
//! 3. the symmetric component of specimen `s` is the average of its aligned original and
//!    aligned relabelled reflection, and the asymmetric component is the aligned original minus
//!    that average (half the difference between the two);
//! 4. the per-specimen asymmetry magnitude is the partial Procrustes distance between the
//!    original and its relabelled reflection, fitted directly to each other (both at unit
//!    centroid size, rotation removed; Dryden & Mardia 2016, sec. 3.2). It is computed from the
//!    fitted residual rather than through an angle, so a symmetric configuration gives 0 to
//!    rounding (≈1e-16), not the ≈1e-8 an arccos would leave.
//!
//! Which coordinate is negated does not matter: reflections about different planes differ by a
//! rotation, which the superimposition removes.

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use thiserror::Error;

use super::align::partial_procrustes_distance;
use super::{Gpa, GpaOptions, Sample, ShapeError, gpa};

/// Landmark pairs and midline landmarks of a bilaterally symmetric structure. Every landmark
/// must appear exactly once (in one pair or on the midline).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SymmetryDesign {
    pub pairs: Vec<(usize, usize)>,
    pub midline: Vec<usize>,
}

/// Failures of the symmetry analysis.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum SymmetryError {
    /// A landmark is named twice, or not at all, by the pairs and midline.
    #[error(
        "symmetry design: landmark {landmark} appears {count} times in the pairs and midline (expected once)"
    )]
    Coverage { landmark: usize, count: usize },
    /// A landmark index is beyond the configuration.
    #[error("symmetry design names landmark {landmark}, but configurations have {landmarks}")]
    BadIndex { landmark: usize, landmarks: usize },
    /// Superimposition or a distance failed (e.g. a zero-size configuration).
    #[error("symmetry analysis: {0}")]
    Shape(#[from] ShapeError),
}

/// Result of [`object_symmetry`].
#[derive(Debug, Clone, Serialize)]
pub struct Symmetry {
    /// The joint GPA: specimens `0..n` are the originals, `n..2n` their relabelled reflections.
    pub gpa: Gpa,
    /// Symmetric component of each specimen (in the joint Procrustes frame).
    pub symmetric: Sample,
    /// Asymmetric component: aligned original minus its symmetric component.
    pub asymmetric: Sample,
    /// Partial Procrustes distance between each original and its relabelled reflection.
    pub asymmetry: Vec<f64>,
}

impl SymmetryDesign {
    fn validate(&self, k: usize) -> Result<(), SymmetryError> {
        let mut count = vec![0usize; k];
        for l in self
            .pairs
            .iter()
            .flat_map(|&(a, b)| [a, b])
            .chain(self.midline.iter().copied())
        {
            if l >= k {
                return Err(SymmetryError::BadIndex {
                    landmark: l,
                    landmarks: k,
                });
            }
            count[l] += 1;
        }
        if let Some((landmark, &count)) = count.iter().enumerate().find(|&(_, &c)| c != 1) {
            return Err(SymmetryError::Coverage { landmark, count });
        }
        Ok(())
    }
}

/// The relabelled reflection of `config`: its first coordinate negated, then the landmarks of
/// every pair swapped. The design is not validated here.
#[must_use]
pub fn reflect_relabel(config: &DMatrix<f64>, design: &SymmetryDesign) -> DMatrix<f64> {
    let mut r = config.clone();
    for v in r.column_mut(0).iter_mut() {
        *v = -*v;
    }
    for &(a, b) in &design.pairs {
        r.swap_rows(a, b);
    }
    r
}

/// Object-symmetry analysis of `sample` (see the module header).
pub fn object_symmetry(
    sample: &Sample,
    design: &SymmetryDesign,
    opts: &GpaOptions,
) -> Result<Symmetry, SymmetryError> {
    let (n, k) = (sample.n(), sample.k());
    design.validate(k)?;
    let originals: Vec<DMatrix<f64>> = (0..n).map(|i| sample.config(i)).collect();
    let mut all = originals.clone();
    all.extend(originals.iter().map(|c| reflect_relabel(c, design)));
    let joint = gpa(&Sample::from_configs(&all)?, opts)?;
    let mut symmetric = Vec::with_capacity(n);
    let mut asymmetric = Vec::with_capacity(n);
    let mut asymmetry = Vec::with_capacity(n);
    for (i, original) in originals.iter().enumerate() {
        let a = joint.aligned.config(i);
        let b = joint.aligned.config(n + i);
        let sym = (&a + &b) * 0.5;
        asymmetric.push(&a - &sym);
        symmetric.push(sym);
        asymmetry.push(
            partial_procrustes_distance(original, &all[n + i]).ok_or(ShapeError::ZeroSize(i))?,
        );
    }
    Ok(Symmetry {
        gpa: joint,
        symmetric: Sample::from_configs(&symmetric)?,
        asymmetric: Sample::from_configs(&asymmetric)?,
        asymmetry,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 2D configuration symmetric about the y axis: pairs (0,1), (2,3), (4,5); midline 6, 7.
    fn symmetric_2d() -> (DMatrix<f64>, SymmetryDesign) {
        let x = DMatrix::from_row_slice(
            8,
            2,
            &[
                -1.0, 0.0, 1.0, 0.0, -0.7, 1.2, 0.7, 1.2, -0.4, -0.9, 0.4, -0.9, 0.0, 1.8, 0.0,
                -0.3,
            ],
        );
        let design = SymmetryDesign {
            pairs: vec![(0, 1), (2, 3), (4, 5)],
            midline: vec![6, 7],
        };
        (x, design)
    }

    fn rotated(x: &DMatrix<f64>, angle: f64, shift: f64) -> DMatrix<f64> {
        let (c, s) = (angle.cos(), angle.sin());
        let mut y = x * DMatrix::from_row_slice(2, 2, &[c, s, -s, c]) * 2.5;
        y.add_scalar_mut(shift);
        y
    }

    #[test]
    fn symmetric_configurations_have_no_asymmetry() {
        let (x, design) = symmetric_2d();
        // Symmetric about an arbitrary line once rotated and moved; different sizes.
        let configs = [x.clone(), rotated(&x, 0.7, 3.0), rotated(&x, -2.0, -1.0)];
        let sample = Sample::from_configs(&configs).unwrap();
        let r = object_symmetry(&sample, &design, &GpaOptions::default()).unwrap();
        for &a in &r.asymmetry {
            assert!(a < 1e-12, "asymmetry {a}");
        }
        assert!(r.asymmetric.data().iter().all(|v| v.abs() < 1e-9));
        // 3D: a symmetric tetrahedral shape with a midline apex.
        let x3 = DMatrix::from_row_slice(
            5,
            3,
            &[
                -1., 0., 0., 1., 0., 0., -0.5, 1., 0.3, 0.5, 1., 0.3, 0., 0.5, 1.2,
            ],
        );
        let d3 = SymmetryDesign {
            pairs: vec![(0, 1), (2, 3)],
            midline: vec![4],
        };
        let s3 = Sample::from_configs(&[x3.clone(), &x3 * 2.0]).unwrap();
        let r3 = object_symmetry(&s3, &d3, &GpaOptions::default()).unwrap();
        assert!(
            r3.asymmetry.iter().all(|&a| a < 1e-12),
            "{:?}",
            r3.asymmetry
        );
    }

    #[test]
    fn one_sided_perturbation_gives_the_predicted_asymmetry() {
        let (x, design) = symmetric_2d();
        let mut y = x.clone();
        y[(3, 0)] += 0.1;
        y[(3, 1)] -= 0.05;
        let sample = Sample::from_configs(&[x.clone(), y.clone()]).unwrap();
        let r = object_symmetry(&sample, &design, &GpaOptions::default()).unwrap();
        // Prediction: the relabelled reflection of y is y with landmark 2 (not 3) moved by
        // (−0.1, −0.05). The planar partial Procrustes distance between y and it, from the
        // complex closed form cos ρ = |z*w|/(‖z‖‖w‖), d_P = 2 sin(ρ/2) (Dryden & Mardia 2016,
        // sec. 3.2), computed here without any SVD.
        let mut w = x.clone();
        w[(2, 0)] -= 0.1;
        w[(2, 1)] -= 0.05;
        let cz = super::super::align::centred(&y);
        let cw = super::super::align::centred(&w);
        let (mut re, mut im, mut nz, mut nw) = (0.0, 0.0, 0.0, 0.0);
        for i in 0..8 {
            let (a, b) = ((cz[(i, 0)], cz[(i, 1)]), (cw[(i, 0)], cw[(i, 1)]));
            re += a.0 * b.0 + a.1 * b.1;
            im += a.0 * b.1 - a.1 * b.0;
            nz += a.0 * a.0 + a.1 * a.1;
            nw += b.0 * b.0 + b.1 * b.1;
        }
        let rho = (re.hypot(im) / (nz * nw).sqrt()).min(1.0).acos();
        let predicted = 2.0 * (rho / 2.0).sin();
        assert!(r.asymmetry[0] < 1e-12);
        assert!(
            (r.asymmetry[1] - predicted).abs() < 1e-12,
            "{} vs {predicted}",
            r.asymmetry[1]
        );
        // The symmetric component is symmetric: its relabelled reflection is the same shape.
        let sym = r.symmetric.config(1);
        let d = partial_procrustes_distance(&sym, &reflect_relabel(&sym, &design)).unwrap();
        assert!(d < 1e-9, "symmetric component is asymmetric by {d}");
    }

    #[test]
    fn design_must_cover_every_landmark_once() {
        let (x, _) = symmetric_2d();
        let s = Sample::from_configs(&[x]).unwrap();
        let missing = SymmetryDesign {
            pairs: vec![(0, 1), (2, 3), (4, 5)],
            midline: vec![6],
        };
        assert_eq!(
            object_symmetry(&s, &missing, &GpaOptions::default()).unwrap_err(),
            SymmetryError::Coverage {
                landmark: 7,
                count: 0
            }
        );
        let twice = SymmetryDesign {
            pairs: vec![(0, 1), (2, 3), (4, 5), (5, 6)],
            midline: vec![7],
        };
        assert!(matches!(
            object_symmetry(&s, &twice, &GpaOptions::default()),
            Err(SymmetryError::Coverage { landmark: 5, .. })
        ));
        let out = SymmetryDesign {
            pairs: vec![(0, 9)],
            midline: vec![],
        };
        assert!(matches!(
            object_symmetry(&s, &out, &GpaOptions::default()),
            Err(SymmetryError::BadIndex { .. })
        ));
    }
}
