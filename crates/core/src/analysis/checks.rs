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
//! - **Outlying landmark**: a landmark's residual (its distance from the mean's landmark after
//!   the fit) against the same landmark's residuals in the reference, whose median is the
//!   robust scale: flagged above [`RESIDUAL_FACTOR`] times that median. For residuals of normal
//!   scatter the median length is 1.54 σ in 3-D (1.18 σ in 2-D), so 4 × it is 6.2 σ (4.7 σ),
//!   passed by chance with probability about 10⁻⁸ (2·10⁻⁵) — from the χ distribution with 3
//!   (2) degrees of freedom.
//! - **Outlying measurement**: each of the scheme's measurements the trial allows, against the
//!   reference's values: flagged when it lies outside their range by more than the range's
//!   width ([`RANGE_FACTOR`]). A rule of our own, for gross errors: quartile fences (Tukey's
//!   "far out" at 3 IQR) flagged real specimens of the bundled ten-skull sample, whose two
//!   localities differ in size, because nine values give unsteady quartiles; for nine values
//!   from one normal distribution the range spans about 3 σ, so a flag means about 4.5 σ or
//!   more from their mean.

use nalgebra::DMatrix;
use serde::Serialize;

use crate::landmarks::Project;
use crate::landmarks::project::{LandmarkState, Specimen, Trial};
use crate::measure::table::measure_trial;
use crate::shape::{GpaOptions, Sample, gpa, opa};

/// Complete reference specimens needed before a trial is checked.
pub const MIN_REFERENCE: usize = 5;
/// A landmark is flagged when its residual exceeds this many times the reference's median.
pub const RESIDUAL_FACTOR: f64 = 4.0;
/// A measurement is flagged beyond the reference's range by this many times its width.
pub const RANGE_FACTOR: f64 = 1.0;

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
    /// A landmark's residual over the reference's median, a measurement's distance beyond the
    /// reference's range over the range's width, or for a pair the squared-distance ratio
    /// after/before the swap.
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
                    if let Ok(d1) = dist2(&sw)
                        && d1 <= 0.5 * d0
                    {
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
                // residuals per landmark, the trial fitted to the mean without the landmarks
                // already explained (a swap) or flagged, so one bad point cannot drag the fit
                // onto its neighbours; the worst remaining one is tested, in turn
                let ref_median: Vec<f64> = (0..k)
                    .map(|l| {
                        let mut r: Vec<f64> = (0..refs.len())
                            .map(|i| (g.aligned.config(i).row(l) - g.mean.row(l)).norm())
                            .collect();
                        median(&mut r)
                    })
                    .collect();
                let mut left_out: Vec<usize> =
                    (0..k).filter(|&l| swapped.contains(&present[l])).collect();
                while k - left_out.len() >= 4 {
                    let fit_rows: Vec<usize> = (0..k).filter(|l| !left_out.contains(l)).collect();
                    let sub = |m: &DMatrix<f64>| {
                        DMatrix::from_fn(fit_rows.len(), 3, |r, c| m[(fit_rows[r], c)])
                    };
                    let Ok(fit) = opa(&sub(&g.mean), &sub(&config(&cand)), true) else {
                        break;
                    };
                    let placed = config(&cand) * &fit.rotation * fit.scale;
                    let worst = fit_rows
                        .iter()
                        .map(|&l| {
                            let r = (0..3)
                                .map(|d| {
                                    (placed[(l, d)] + fit.translation[d] - g.mean[(l, d)]).powi(2)
                                })
                                .sum::<f64>()
                                .sqrt();
                            (
                                l,
                                if ref_median[l] > 0.0 {
                                    r / ref_median[l]
                                } else {
                                    0.0
                                },
                            )
                        })
                        .max_by(|a, b| a.1.total_cmp(&b.1));
                    let Some((l, ratio)) = worst else { break };
                    if ratio <= RESIDUAL_FACTOR {
                        break;
                    }
                    out.flags.push(Flag {
                        kind: FlagKind::OutlyingLandmark,
                        items: vec![present[l].to_owned()],
                        reason: format!(
                            "{} lies {ratio:.1}× as far from the sample's mean position as is typical for it",
                            present[l]
                        ),
                        score: ratio,
                    });
                    left_out.push(l);
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
        let (lo, hi) = values
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        let width = hi - lo;
        let beyond = (lo - m.value).max(m.value - hi);
        if width > 0.0 && beyond > RANGE_FACTOR * width {
            out.flags.push(Flag {
                kind: FlagKind::OutlyingMeasurement,
                items: vec![row.measurement.clone()],
                reason: format!(
                    "{} = {:.4} {} is far outside the sample's range {lo:.4}–{hi:.4}",
                    row.measurement, m.value, row.unit
                ),
                score: beyond / width,
            });
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
#[allow(clippy::float_cmp, reason = "medians of small exact values")]
mod tests {
    use super::*;

    #[test]
    fn median_by_hand() {
        assert_eq!(median(&mut [3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&mut [4.0, 1.0, 2.0, 3.0]), 2.5);
    }
}
