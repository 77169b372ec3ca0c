//! A missing landmark estimated from its bilateral partner: the partner's position reflected
//! across the specimen's midsagittal plane.
//!
//! **The plane** is fitted by least squares (orthogonal regression: the plane through the
//! centroid whose normal is the direction of least spread, the smallest singular vector) to the
//! trial's *placed* midline landmarks (those without a partner) and the midpoints of its placed
//! bilateral pairs; every such point lies on the midsagittal plane of a symmetric specimen.
//! Where those points do not span a plane (fewer than three, or nearly collinear: the smallest
//! two singular values are within a factor 10 of each other), the pairs give the normal instead:
//! the mean of the unit vectors from each right landmark to its left partner (signs aligned),
//! with the plane through the points' centroid. Estimated landmarks never take part, so an
//! estimate is not built on another estimate. The residual (root mean square and largest
//! distance of the fitted points from the plane) says how symmetric the specimen is.
//!
//! Reflection across the plane through `c` with unit normal `n`: `p' = p − 2 (n·(p − c)) n`.

use nalgebra::{Matrix3, Vector3};
use serde::Serialize;

use super::project::{LandmarkState, Trial};
use super::scheme::Scheme;

/// Why no estimate can be made.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum MirrorError {
    #[error("'{0}' is not a landmark of the scheme")]
    Unknown(String),
    #[error("{0} has no bilateral partner in the scheme")]
    NoPartner(String),
    #[error("{landmark}'s partner {partner} is not placed in this trial")]
    PartnerNotPlaced { landmark: String, partner: String },
    #[error(
        "the midsagittal plane needs a placed bilateral pair, or three placed midline landmarks \
         that span a plane; this trial has {0} midline points and no pair"
    )]
    TooFewPoints(usize),
}

/// A fitted midsagittal plane.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct MidPlane {
    /// A point of the plane (the fitted points' centroid), world mm.
    pub point_mm: [f64; 3],
    /// Its unit normal.
    pub normal: [f64; 3],
    /// The landmarks it was fitted to: midline ids, and `L|R` for a pair's midpoint.
    pub used: Vec<String>,
    /// Root mean square distance of the fitted points from the plane, mm.
    pub rms_mm: f64,
    /// Largest such distance, mm.
    pub max_mm: f64,
    /// Whether the normal came from the pairs' directions (the points alone span no plane).
    pub normal_from_pairs: bool,
}

impl MidPlane {
    /// `p` reflected across the plane.
    #[must_use]
    pub fn reflect(&self, p: [f64; 3]) -> [f64; 3] {
        let (p, c, n) = (
            Vector3::from(p),
            Vector3::from(self.point_mm),
            Vector3::from(self.normal),
        );
        (p - n * (2.0 * n.dot(&(p - c)))).into()
    }
}

/// A landmark estimated from its partner.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PartnerEstimate {
    pub landmark: String,
    pub partner: String,
    pub position_mm: [f64; 3],
    pub plane: MidPlane,
}

impl PartnerEstimate {
    /// One line saying what was done: kept as the landmark's note and shown to the user.
    #[must_use]
    pub fn describe(&self) -> String {
        format!(
            "estimated from {} mirrored across the midsagittal plane fitted to {} ({} points{}; rms {:.4} mm, max {:.4} mm)",
            self.partner,
            self.plane.used.join(", "),
            self.plane.used.len(),
            if self.plane.normal_from_pairs {
                ", normal from the pairs"
            } else {
                ""
            },
            self.plane.rms_mm,
            self.plane.max_mm
        )
    }
}

fn placed(trial: &Trial, id: &str) -> Option<[f64; 3]> {
    trial
        .landmark(id)
        .filter(|l| l.state == LandmarkState::Placed)
        .and_then(|l| l.position_mm)
}

/// Fits the midsagittal plane of a trial, leaving out the pair of `except` (the landmark being
/// estimated) if given.
pub fn fit_midsagittal_plane(
    scheme: &Scheme,
    trial: &Trial,
    except: Option<&str>,
) -> Result<MidPlane, MirrorError> {
    let mut points: Vec<Vector3<f64>> = Vec::new();
    let mut used = Vec::new();
    let mut pair_dirs: Vec<Vector3<f64>> = Vec::new();
    for l in &scheme.landmarks {
        match &l.partner {
            None => {
                if let Some(p) = placed(trial, &l.id) {
                    points.push(p.into());
                    used.push(l.id.clone());
                }
            }
            Some(partner) => {
                // each pair once, from the side that sorts first
                if l.id.as_str() > partner.as_str()
                    || except.is_some_and(|e| e == l.id || e == partner)
                {
                    continue;
                }
                if let (Some(a), Some(b)) = (placed(trial, &l.id), placed(trial, partner)) {
                    let (a, b) = (Vector3::from(a), Vector3::from(b));
                    points.push((a + b) * 0.5);
                    used.push(format!("{}|{}", l.id, partner));
                    if let Some(d) = (a - b).try_normalize(1e-12) {
                        pair_dirs.push(d);
                    }
                }
            }
        }
    }
    let n = points.len();
    if n == 0 {
        return Err(MirrorError::TooFewPoints(0));
    }
    let c = points.iter().sum::<Vector3<f64>>() / n as f64;
    let mut cov = Matrix3::zeros();
    for p in &points {
        let d = p - c;
        cov += d * d.transpose();
    }
    let eig = cov.symmetric_eigen();
    let mut order = [0usize, 1, 2];
    order.sort_by(|&i, &j| eig.eigenvalues[i].total_cmp(&eig.eigenvalues[j]));
    let (l0, l1) = (eig.eigenvalues[order[0]], eig.eigenvalues[order[1]]);
    // spread along the two in-plane directions must clearly exceed the spread across
    let spans_plane = n >= 3 && l1 > 0.0 && l0.max(0.0) * 100.0 < l1;
    let (normal, from_pairs) = if spans_plane {
        (eig.eigenvectors.column(order[0]).into_owned(), false)
    } else if let Some(&first) = pair_dirs.first() {
        // left-to-right vectors all point the same way on one specimen; align signs anyway
        let sum: Vector3<f64> = pair_dirs
            .iter()
            .map(|d| if d.dot(&first) < 0.0 { -d } else { *d })
            .sum();
        (sum.try_normalize(1e-12).unwrap_or(first), true)
    } else {
        return Err(MirrorError::TooFewPoints(n));
    };
    let dists: Vec<f64> = points.iter().map(|p| normal.dot(&(p - c))).collect();
    let rms = (dists.iter().map(|d| d * d).sum::<f64>() / n as f64).sqrt();
    let max = dists.iter().fold(0.0f64, |m, d| m.max(d.abs()));
    Ok(MidPlane {
        point_mm: c.into(),
        normal: normal.into(),
        used,
        rms_mm: rms,
        max_mm: max,
        normal_from_pairs: from_pairs,
    })
}

/// Estimates `landmark` from its bilateral partner in `trial` (see the module docs).
pub fn estimate_from_partner(
    scheme: &Scheme,
    trial: &Trial,
    landmark: &str,
) -> Result<PartnerEstimate, MirrorError> {
    let def = scheme
        .landmark(landmark)
        .ok_or_else(|| MirrorError::Unknown(landmark.to_owned()))?;
    let partner = def
        .partner
        .clone()
        .ok_or_else(|| MirrorError::NoPartner(landmark.to_owned()))?;
    let source = placed(trial, &partner).ok_or_else(|| MirrorError::PartnerNotPlaced {
        landmark: landmark.to_owned(),
        partner: partner.clone(),
    })?;
    let plane = fit_midsagittal_plane(scheme, trial, Some(landmark))?;
    Ok(PartnerEstimate {
        landmark: landmark.to_owned(),
        partner,
        position_mm: plane.reflect(source),
        plane,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::landmarks::project::{LandmarkEntry, Method, Timestamp};
    use nalgebra::Rotation3;

    fn scheme() -> Scheme {
        let p = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../../sample_volumes/scheme.toml");
        Scheme::load(&p).unwrap().0
    }

    /// A bilaterally symmetric configuration (y = 0 is the midline, partners mirrored in y),
    /// turned and moved by a rigid motion.
    fn symmetric_trial(scheme: &Scheme, wobble: f64) -> (Trial, Rotation3<f64>, Vector3<f64>) {
        let rot = Rotation3::from_euler_angles(0.4, -0.7, 1.1);
        let shift = Vector3::new(3.0, -1.5, 12.0);
        let mut t = Trial::new("1", "test", Timestamp::now());
        for (k, l) in scheme.landmarks.iter().enumerate() {
            let x = (k as f64 * 1.7).sin() * 4.0;
            let z = (k as f64 * 0.9).cos() * 3.0;
            let half = k as f64 * 0.37 % 2.0 + 0.5;
            let y = match &l.partner {
                None => wobble * (k as f64).sin(),
                Some(p) if l.id < *p => half,
                Some(p) => {
                    // the partner's own y, mirrored
                    let kp = scheme.landmark_index(p).unwrap();
                    let xp = (kp as f64 * 1.7).sin() * 4.0;
                    let zp = (kp as f64 * 0.9).cos() * 3.0;
                    let hp = kp as f64 * 0.37 % 2.0 + 0.5;
                    let w = rot * Vector3::new(xp, -hp, zp) + shift;
                    t.landmarks.push(LandmarkEntry {
                        id: l.id.clone(),
                        state: LandmarkState::Placed,
                        position_mm: Some(w.into()),
                        method: Some(Method::Typed),
                        pick: None,
                        at: Timestamp::now(),
                        note: None,
                    });
                    continue;
                }
            };
            let w = rot * Vector3::new(x, y, z) + shift;
            t.landmarks.push(LandmarkEntry {
                id: l.id.clone(),
                state: LandmarkState::Placed,
                position_mm: Some(w.into()),
                method: Some(Method::Typed),
                pick: None,
                at: Timestamp::now(),
                note: None,
            });
        }
        (t, rot, shift)
    }

    #[test]
    fn a_symmetric_specimen_gives_back_the_exact_partner() {
        let sc = scheme();
        let (mut t, _, _) = symmetric_trial(&sc, 0.0);
        let target = sc
            .landmarks
            .iter()
            .find(|l| l.partner.is_some())
            .unwrap()
            .id
            .clone();
        let truth = t.position(&target).unwrap();
        t.landmarks.retain(|l| l.id != target);
        let e = estimate_from_partner(&sc, &t, &target).unwrap();
        for (got, want) in e.position_mm.iter().zip(truth) {
            assert!((got - want).abs() < 1e-9, "{e:?}");
        }
        assert!(e.plane.rms_mm < 1e-9 && !e.plane.normal_from_pairs);
        assert!(!e.plane.used.iter().any(|u| u.contains(&target)));
        assert!(
            e.describe().starts_with("estimated from "),
            "{}",
            e.describe()
        );
    }

    #[test]
    fn the_residual_measures_asymmetry_and_pairs_alone_give_the_normal() {
        let sc = scheme();
        let (t, rot, _) = symmetric_trial(&sc, 0.05);
        let p = fit_midsagittal_plane(&sc, &t, None).unwrap();
        assert!(p.rms_mm > 0.005 && p.rms_mm < 0.05, "{p:?}");
        // the fitted normal is the turned y axis
        let y = rot * Vector3::y();
        assert!(Vector3::from(p.normal).dot(&y).abs() > 0.999);
        // only pairs: the normal comes from their directions
        let mut pairs_only = t.clone();
        pairs_only
            .landmarks
            .retain(|l| sc.landmark(&l.id).unwrap().partner.is_some());
        let first_pair: Vec<String> = sc
            .landmarks
            .iter()
            .filter(|l| l.partner.is_some())
            .take(2)
            .map(|l| l.id.clone())
            .collect();
        pairs_only.landmarks.retain(|l| first_pair.contains(&l.id));
        let p = fit_midsagittal_plane(&sc, &pairs_only, None).unwrap();
        assert!(p.normal_from_pairs);
        assert!(Vector3::from(p.normal).dot(&y).abs() > 0.999_999);
    }

    #[test]
    fn refusals_name_the_reason() {
        let sc = scheme();
        let (mut t, _, _) = symmetric_trial(&sc, 0.0);
        let mid = sc.landmarks.iter().find(|l| l.partner.is_none()).unwrap();
        assert_eq!(
            estimate_from_partner(&sc, &t, &mid.id),
            Err(MirrorError::NoPartner(mid.id.clone()))
        );
        let l = sc.landmarks.iter().find(|l| l.partner.is_some()).unwrap();
        let partner = l.partner.clone().unwrap();
        t.landmarks.retain(|e| e.id != partner);
        assert!(matches!(
            estimate_from_partner(&sc, &t, &l.id),
            Err(MirrorError::PartnerNotPlaced { .. })
        ));
        t.landmarks.clear();
        assert_eq!(
            fit_midsagittal_plane(&sc, &t, None),
            Err(MirrorError::TooFewPoints(0))
        );
    }
}
