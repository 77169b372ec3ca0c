//! Checks while digitising: one trial compared with the rest of the sample, for a front end to
//! call as each landmark is placed ([`check_trial`]) and for `sutura project check`
//! ([`check_project`]). The checks only report: they never block an edit or change data.
//!
//! **Reference**: the first complete trial (every landmark placed or estimated) of each other
//! specimen; at least [`MIN_REFERENCE`] of them, else the trial is not checked and the result
//! says why. The shape checks use the landmarks the trial has so far: the reference restricted
//! to them is superimposed (GPA), and the trial fitted to its mean (ordinary Procrustes with
//! scale).
//!
//! - **Swapped bilateral pair**: for each pair of partners in the scheme that the trial has,
//!   the partners' positions are exchanged; the pair is flagged when that brings the trial's
//!   squared Procrustes distance to the mean down to half or less (a swap moves both points by
//!   the whole bilateral width, far beyond digitising error; the factor is common practice
//!   here, not a published value).
//! - **Outlying landmark**: a landmark's residual from the mean, against the same landmark's
//!   residuals in the reference, by the modified z-score `0.6745 (x − median) / MAD` above
//!   [`ROBUST_Z`] (Iglewicz & Hoaglin 1993, *How to Detect and Handle Outliers*, ASQC, §3; the
//!   3.5 cut-off is theirs).
//! - **Outlying measurement**: each of the scheme's measurements the trial allows, against the
//!   reference's values, by the same modified z-score.

use nalgebra::DMatrix;
use serde::Serialize;

use crate::landmarks::Project;
use crate::landmarks::project::{LandmarkState, Specimen, Trial};
use crate::measure::table::measure_trial;
use crate::shape::{GpaOptions, Sample, gpa, opa};

/// Complete reference specimens needed before a trial is checked.
pub const MIN_REFERENCE: usize = 5;
/// Modified z-score above which a value is flagged (Iglewicz & Hoaglin 1993).
pub const ROBUST_Z: f64 = 3.5;

/// What a flag is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FlagKind {
    SwappedPair,
    OutlyingLandmark,
    OutlyingMeasurement,
}

/// One flag, with the landmarks or measurement it concerns and its reason in words.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Flag {
    pub kind: FlagKind,
    /// Landmark ids (two for a pair) or the measurement id.
    pub items: Vec<String>,
    /// One line for the checklist and `project check`.
    pub reason: String,
    /// The modified z-score, or for a pair the squared-distance ratio after/before the swap.
    pub score: f64,
}

/// The checks of one trial.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TrialChecks {
    pub specimen: String,
    pub trial: String,
    pub flags: Vec<Flag>,
    /// Reference specimens used.
    pub reference: usize,
    /// Why the trial was not checked (too few reference specimens or landmarks).
    pub not_checked: Option<String>,
}

fn position(t: &Trial, id: &str) -> Option<[f64; 3]> {
    t.landmark(id)
        .filter(|e| e.state != LandmarkState::Missing)
        .and_then(|e| e.position_mm)
}

/// The first complete trial of each specimen other than `specimen`.
fn reference_trials<'a>(project: &'a Project, specimen: &str) -> Vec<(&'a Specimen, &'a Trial)> {
    let ids: Vec<&str> = project
        .scheme()
        .landmarks
        .iter()
        .map(|l| l.id.as_str())
        .collect();
    project
        .specimens()
        .iter()
        .filter(|s| s.id != specimen)
        .filter_map(|s| {
            s.trials
                .iter()
                .find(|t| ids.iter().all(|id| position(t, id).is_some()))
                .map(|t| (s, t))
        })
        .collect()
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// The modified z-score of `x` against `values` (`None` when their MAD is 0).
fn robust_z(x: f64, values: &[f64]) -> Option<f64> {
    let mut v = values.to_vec();
    let med = median(&mut v);
    let mut dev: Vec<f64> = values.iter().map(|y| (y - med).abs()).collect();
    let mad = median(&mut dev);
    (mad > 0.0).then(|| 0.6745 * (x - med) / mad)
}

fn config(points: &[[f64; 3]]) -> DMatrix<f64> {
    DMatrix::from_fn(points.len(), 3, |r, c| points[r][c])
}

/// Checks trial `trial` of `specimen` (see the module docs). An unknown specimen or trial gives
/// a result with no flags that says so.
#[must_use]
#[allow(
    clippy::too_many_lines,
    reason = "the three checks share their reference and read best in order"
)]
pub fn check_trial(project: &Project, specimen: &str, trial: &str) -> TrialChecks {
    let mut out = TrialChecks {
        specimen: specimen.to_owned(),
        trial: trial.to_owned(),
        flags: Vec::new(),
        reference: 0,
        not_checked: None,
    };
    let Some(sp) = project.specimen(specimen) else {
        out.not_checked = Some(format!("no specimen '{specimen}'"));
        return out;
    };
    let Some(tr) = sp.trial(trial) else {
        out.not_checked = Some(format!("no trial '{trial}' of {specimen}"));
        return out;
    };
    let refs = reference_trials(project, specimen);
    out.reference = refs.len();
    if refs.len() < MIN_REFERENCE {
        out.not_checked = Some(format!(
            "{} other specimens are complete; the checks start at {MIN_REFERENCE}",
            refs.len()
        ));
        return out;
    }
    let scheme = project.scheme();
    let present: Vec<&str> = scheme
        .landmarks
        .iter()
        .map(|l| l.id.as_str())
        .filter(|id| position(tr, id).is_some())
        .collect();
    if present.len() >= 4 {
        let cand: Vec<[f64; 3]> = present
            .iter()
            .map(|id| position(tr, id).expect("present"))
            .collect();
        let mut data = Vec::with_capacity(refs.len() * present.len() * 3);
        for (_, t) in &refs {
            for id in &present {
                data.extend_from_slice(&position(t, id).expect("complete"));
            }
        }
        let fitted = Sample::new(refs.len(), present.len(), 3, data)
            .and_then(|s| gpa(&s, &GpaOptions::default()));
        if let Ok(g) = fitted {
            let k = present.len();
            let dist2 =
                |pts: &[[f64; 3]]| opa(&g.mean, &config(pts), true).map(|o| o.distance.powi(2));
            let mut swapped: Vec<&str> = Vec::new();
            if let Ok(d0) = dist2(&cand) {
                for (a, la) in present.iter().enumerate() {
                    let Some(partner) = scheme
                        .landmarks
                        .iter()
                        .find(|l| l.id == *la)
                        .and_then(|l| l.partner.as_deref())
                    else {
                        continue;
                    };
                    let Some(b) = present.iter().position(|id| *id == partner) else {
                        continue;
                    };
                    if b < a {
                        continue;
                    }
                    let mut sw = cand.clone();
                    sw.swap(a, b);
                    if let Ok(d1) = dist2(&sw) {
                        if d1 <= 0.5 * d0 {
                            swapped.extend([*la, partner]);
                            out.flags.push(Flag {
                                kind: FlagKind::SwappedPair,
                                items: vec![(*la).to_owned(), partner.to_owned()],
                                reason: format!(
                                    "{la} and {partner} look swapped: exchanging them brings the specimen's Procrustes distance to the sample's mean from {:.4} to {:.4}",
                                    d0.sqrt(),
                                    d1.sqrt()
                                ),
                                score: d1 / d0,
                            });
                        }
                    }
                }
                // residuals per landmark: the trial against the reference's own
                if let Ok(fit) = opa(&g.mean, &config(&cand), true) {
                    for l in 0..k {
                        if swapped.contains(&present[l]) {
                            continue;
                        }
                        let res = (fit.aligned.row(l) - g.mean.row(l)).norm();
                        let ref_res: Vec<f64> = (0..refs.len())
                            .map(|i| (g.aligned.config(i).row(l) - g.mean.row(l)).norm())
                            .collect();
                        if let Some(z) = robust_z(res, &ref_res) {
                            if z > ROBUST_Z {
                                let mut v = ref_res.clone();
                                let med = median(&mut v);
                                out.flags.push(Flag {
                                    kind: FlagKind::OutlyingLandmark,
                                    items: vec![present[l].to_owned()],
                                    reason: format!(
                                        "{} lies {:.1}× as far from the sample's mean position as is typical (robust z {z:.1})",
                                        present[l],
                                        if med > 0.0 { res / med } else { f64::INFINITY },
                                    ),
                                    score: z,
                                });
                            }
                        }
                    }
                }
            }
        }
    }
    // measurements
    let mine = measure_trial(scheme, sp, tr);
    let theirs: Vec<Vec<crate::measure::table::Row>> = refs
        .iter()
        .map(|(s, t)| measure_trial(scheme, s, t))
        .collect();
    for row in &mine {
        let Ok(m) = &row.result else { continue };
        let values: Vec<f64> = theirs
            .iter()
            .filter_map(|rows| rows.iter().find(|r| r.measurement == row.measurement))
            .filter_map(|r| r.result.as_ref().ok().map(|m| m.value))
            .collect();
        if values.len() < MIN_REFERENCE {
            continue;
        }
        if let Some(z) = robust_z(m.value, &values) {
            if z.abs() > ROBUST_Z {
                let (lo, hi) = values
                    .iter()
                    .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                        (a.min(v), b.max(v))
                    });
                out.flags.push(Flag {
                    kind: FlagKind::OutlyingMeasurement,
                    items: vec![row.measurement.clone()],
                    reason: format!(
                        "{} = {:.4} {} is far outside the sample's range {:.4}–{:.4} (robust z {z:.1})",
                        row.measurement, m.value, row.unit, lo, hi
                    ),
                    score: z,
                });
            }
        }
    }
    out
}

/// Checks every trial of every specimen that has something digitised.
#[must_use]
pub fn check_project(project: &Project) -> Vec<TrialChecks> {
    project
        .specimens()
        .iter()
        .flat_map(|s| {
            s.trials
                .iter()
                .filter(|t| !t.landmarks.is_empty())
                .map(|t| check_trial(project, &s.id, &t.id))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn robust_z_by_hand() {
        // median 3, deviations 2 1 0 1 2 → MAD 1; x = 10: 0.6745 · 7
        let z = robust_z(10.0, &[1.0, 2.0, 3.0, 4.0, 5.0]).unwrap();
        assert!((z - 0.6745 * 7.0).abs() < 1e-12);
        assert!(robust_z(1.0, &[2.0, 2.0, 2.0]).is_none());
    }
}
