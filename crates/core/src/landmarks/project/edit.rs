//! Edits: the only way a project changes.
//!
//! `edit.apply(&mut project)` checks the edit against the document and the scheme, applies it
//! whole or not at all, and returns the edit that undoes it. Applying that inverse restores the
//! document exactly (the same bytes on save), which the tests check for every variant. Edits
//! inside a trial return [`Edit::RestoreTrial`] with the trial as it was (a trial is a few
//! kilobytes), so undo is exact even for the semilandmarks that an anchor's move recomputed.
//!
//! Specimens and trials are named by id, not position, so an inverse still finds its target
//! after other edits; removals return an insertion at the same index.

use super::{
    CurveEntry, LandmarkEntry, LandmarkState, Method, PickRecord, Project, ScanRecord, Specimen,
    Timestamp, Trial, resample_curve, validate_specimen, validate_trial,
};
use crate::landmarks::scheme::is_valid_id;

/// One change to a project (see the module docs).
#[derive(Clone, Debug, PartialEq)]
pub enum Edit {
    /// Adds a specimen at `index` (`None`: at the end).
    AddSpecimen {
        specimen: Box<Specimen>,
        index: Option<usize>,
    },
    RemoveSpecimen {
        specimen: String,
    },
    /// Sets (`Some`) or removes (`None`) a group label.
    SetGroup {
        specimen: String,
        key: String,
        value: Option<String>,
    },
    /// Replaces the scan record (the scan was moved, or re-fingerprinted after a check).
    SetScan {
        specimen: String,
        scan: Box<ScanRecord>,
    },
    /// Adds a trial at `index` (`None`: at the end).
    AddTrial {
        specimen: String,
        trial: Box<Trial>,
        index: Option<usize>,
    },
    RemoveTrial {
        specimen: String,
        trial: String,
    },
    /// Places a landmark (state `placed`, or `estimated` when `method` is `Estimated`), keeping
    /// its note; recomputes the curves anchored at it. `pick` records how a surface point was
    /// found (method `Surface` only).
    SetLandmark {
        specimen: String,
        trial: String,
        landmark: String,
        position_mm: [f64; 3],
        method: Method,
        pick: Option<PickRecord>,
        at: Timestamp,
    },
    /// Marks a landmark missing (no position), keeping its note.
    MarkMissing {
        specimen: String,
        trial: String,
        landmark: String,
        at: Timestamp,
    },
    /// Forgets a landmark (back to not digitised), note included.
    ClearLandmark {
        specimen: String,
        trial: String,
        landmark: String,
    },
    /// Sets or removes the note of a landmark that is placed, estimated or missing.
    SetNote {
        specimen: String,
        trial: String,
        landmark: String,
        note: Option<String>,
    },
    /// Sets a curve's traced control points, one list per segment, and resamples it.
    SetCurve {
        specimen: String,
        trial: String,
        curve: String,
        traced_mm: Vec<Vec<[f64; 3]>>,
        at: Timestamp,
    },
    ClearCurve {
        specimen: String,
        trial: String,
        curve: String,
    },
    /// Puts a whole trial back as given (the inverse of the edits inside a trial).
    RestoreTrial {
        specimen: String,
        trial: Box<Trial>,
    },
}

/// Why an edit was refused. The project is unchanged.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum EditError {
    #[error("no specimen '{0}' in the project")]
    UnknownSpecimen(String),
    #[error("specimen {specimen} has no trial '{trial}'")]
    UnknownTrial { specimen: String, trial: String },
    #[error("'{0}' is not a landmark of the project's scheme")]
    UnknownLandmark(String),
    #[error("'{0}' is not a curve of the project's scheme")]
    UnknownCurve(String),
    #[error("specimen '{0}' already exists")]
    DuplicateSpecimen(String),
    #[error("specimen {specimen} already has a trial '{trial}'")]
    DuplicateTrial { specimen: String, trial: String },
    #[error("{0}")]
    Invalid(String),
}

impl Edit {
    /// Applies the edit and returns its inverse; on error the project is unchanged.
    #[allow(clippy::too_many_lines, reason = "one arm per variant, each short")]
    pub fn apply(self, project: &mut Project) -> Result<Self, EditError> {
        match self {
            Self::AddSpecimen { specimen, index } => {
                if project.specimen(&specimen.id).is_some() {
                    return Err(EditError::DuplicateSpecimen(specimen.id.clone()));
                }
                validate_specimen(&project.scheme, &specimen).map_err(EditError::Invalid)?;
                let at = index.unwrap_or(project.specimens.len());
                if at > project.specimens.len() {
                    return Err(EditError::Invalid(format!(
                        "index {at} is past the {} specimens",
                        project.specimens.len()
                    )));
                }
                let id = specimen.id.clone();
                project.specimens.insert(at, *specimen);
                Ok(Self::RemoveSpecimen { specimen: id })
            }
            Self::RemoveSpecimen { specimen } => {
                let i = specimen_index(project, &specimen)?;
                let s = project.specimens.remove(i);
                Ok(Self::AddSpecimen {
                    specimen: Box::new(s),
                    index: Some(i),
                })
            }
            Self::SetGroup {
                specimen,
                key,
                value,
            } => {
                if !is_valid_id(&key) {
                    return Err(EditError::Invalid(format!(
                        "group key '{key}' is not valid (1-64 ASCII letters, digits, _ . -)"
                    )));
                }
                let s = specimen_mut(project, &specimen)?;
                let old = match value {
                    Some(v) => s.groups.insert(key.clone(), v),
                    None => s.groups.remove(&key),
                };
                Ok(Self::SetGroup {
                    specimen,
                    key,
                    value: old,
                })
            }
            Self::SetScan { specimen, scan } => {
                let i = specimen_index(project, &specimen)?;
                let mut s = project.specimens[i].clone();
                s.scan = *scan;
                validate_specimen(&project.scheme, &s).map_err(EditError::Invalid)?;
                let old = std::mem::replace(&mut project.specimens[i].scan, s.scan);
                Ok(Self::SetScan {
                    specimen,
                    scan: Box::new(old),
                })
            }
            Self::AddTrial {
                specimen,
                trial,
                index,
            } => {
                let i = specimen_index(project, &specimen)?;
                let s = &mut project.specimens[i];
                if s.trial(&trial.id).is_some() {
                    return Err(EditError::DuplicateTrial {
                        specimen,
                        trial: trial.id.clone(),
                    });
                }
                validate_trial(&project.scheme, &trial)
                    .map_err(|e| EditError::Invalid(format!("trial {}: {e}", trial.id)))?;
                let at = index.unwrap_or(s.trials.len());
                if at > s.trials.len() {
                    return Err(EditError::Invalid(format!(
                        "index {at} is past the {} trials of {specimen}",
                        s.trials.len()
                    )));
                }
                let id = trial.id.clone();
                s.trials.insert(at, *trial);
                Ok(Self::RemoveTrial {
                    specimen,
                    trial: id,
                })
            }
            Self::RemoveTrial { specimen, trial } => {
                let s = specimen_mut(project, &specimen)?;
                let i = s.trials.iter().position(|t| t.id == trial).ok_or_else(|| {
                    EditError::UnknownTrial {
                        specimen: specimen.clone(),
                        trial: trial.clone(),
                    }
                })?;
                let t = s.trials.remove(i);
                Ok(Self::AddTrial {
                    specimen,
                    trial: Box::new(t),
                    index: Some(i),
                })
            }
            Self::RestoreTrial { specimen, trial } => {
                validate_trial(&project.scheme, &trial)
                    .map_err(|e| EditError::Invalid(format!("trial {}: {e}", trial.id)))?;
                let slot = trial_mut(&mut project.specimens, &specimen, &trial.id)?;
                let old = std::mem::replace(slot, *trial);
                Ok(Self::RestoreTrial {
                    specimen,
                    trial: Box::new(old),
                })
            }
            Self::SetLandmark {
                specimen,
                trial,
                landmark,
                position_mm,
                method,
                pick,
                at,
            } => {
                if !position_mm.iter().all(|v| v.is_finite()) {
                    return Err(EditError::Invalid(format!(
                        "position {} mm is not finite",
                        crate::message::numbers(&position_mm)
                    )));
                }
                if let Some(p) = &pick {
                    let finite = |v: &[f64; 3]| v.iter().all(|x| x.is_finite());
                    if method != Method::Surface {
                        return Err(EditError::Invalid(format!(
                            "a pick record goes with method surface, not {}",
                            method.name()
                        )));
                    }
                    if !(finite(&p.origin_mm) && finite(&p.direction) && p.threshold.is_finite()) {
                        return Err(EditError::Invalid("the pick record is not finite".into()));
                    }
                }
                let state = if method == Method::Estimated {
                    LandmarkState::Estimated
                } else {
                    LandmarkState::Placed
                };
                change_landmark(project, &specimen, &trial, &landmark, true, |e, id| {
                    *e = Some(LandmarkEntry {
                        id: id.to_owned(),
                        state,
                        position_mm: Some(position_mm),
                        method: Some(method),
                        pick,
                        at,
                        note: e.as_ref().and_then(|x| x.note.clone()),
                    });
                    Ok(())
                })
            }
            Self::MarkMissing {
                specimen,
                trial,
                landmark,
                at,
            } => change_landmark(project, &specimen, &trial, &landmark, true, |e, id| {
                *e = Some(LandmarkEntry {
                    id: id.to_owned(),
                    state: LandmarkState::Missing,
                    position_mm: None,
                    method: None,
                    pick: None,
                    at,
                    note: e.as_ref().and_then(|x| x.note.clone()),
                });
                Ok(())
            }),
            Self::ClearLandmark {
                specimen,
                trial,
                landmark,
            } => change_landmark(project, &specimen, &trial, &landmark, true, |e, id| {
                if e.take().is_none() {
                    return Err(EditError::Invalid(format!(
                        "landmark {id} is not digitised in this trial: nothing to clear"
                    )));
                }
                Ok(())
            }),
            Self::SetNote {
                specimen,
                trial,
                landmark,
                note,
            } => change_landmark(project, &specimen, &trial, &landmark, false, |e, id| {
                let entry = e.as_mut().ok_or_else(|| {
                    EditError::Invalid(format!(
                        "landmark {id} is not digitised in this trial: place it or mark it \
                         missing before adding a note"
                    ))
                })?;
                entry.note = note.filter(|n| !n.is_empty());
                Ok(())
            }),
            Self::SetCurve {
                specimen,
                trial,
                curve,
                traced_mm,
                at,
            } => {
                let def = project
                    .scheme
                    .curve(&curve)
                    .ok_or_else(|| EditError::UnknownCurve(curve.clone()))?;
                if traced_mm.len() != def.segments() {
                    return Err(EditError::Invalid(format!(
                        "curve {curve} has {} segments, {} traced lists given",
                        def.segments(),
                        traced_mm.len()
                    )));
                }
                if !traced_mm
                    .iter()
                    .flatten()
                    .all(|p| p.iter().all(|v| v.is_finite()))
                {
                    return Err(EditError::Invalid(format!(
                        "curve {curve}: a traced point is not finite"
                    )));
                }
                let segments = def.segments();
                change_curve(project, &specimen, &trial, &curve, |e| {
                    *e = Some(CurveEntry {
                        id: curve.clone(),
                        traced_mm,
                        semilandmarks_mm: vec![Vec::new(); segments],
                        at,
                        note: e.as_ref().and_then(|x| x.note.clone()),
                    });
                    Ok(())
                })
            }
            Self::ClearCurve {
                specimen,
                trial,
                curve,
            } => {
                if project.scheme.curve(&curve).is_none() {
                    return Err(EditError::UnknownCurve(curve));
                }
                change_curve(project, &specimen, &trial, &curve, |e| {
                    e.take().map(|_| ()).ok_or_else(|| {
                        EditError::Invalid(format!(
                            "curve {curve} is not traced in this trial: nothing to clear"
                        ))
                    })
                })
            }
        }
    }

    /// A short description for an undo menu or a log line, e.g.
    /// `set landmark snout_tip of HDC-001 trial 1`.
    #[must_use]
    pub fn describe(&self) -> String {
        match self {
            Self::AddSpecimen { specimen, .. } => format!("add specimen {}", specimen.id),
            Self::RemoveSpecimen { specimen } => format!("remove specimen {specimen}"),
            Self::SetGroup {
                specimen,
                key,
                value,
            } => match value {
                Some(v) => format!("set {key} = {v} on {specimen}"),
                None => format!("remove {key} from {specimen}"),
            },
            Self::SetScan { specimen, .. } => format!("set the scan of {specimen}"),
            Self::AddTrial {
                specimen, trial, ..
            } => format!("add trial {} to {specimen}", trial.id),
            Self::RemoveTrial { specimen, trial } => format!("remove trial {trial} of {specimen}"),
            Self::RestoreTrial { specimen, trial } => {
                format!("restore trial {} of {specimen}", trial.id)
            }
            Self::SetLandmark {
                specimen,
                trial,
                landmark,
                ..
            } => format!("set landmark {landmark} of {specimen} trial {trial}"),
            Self::MarkMissing {
                specimen,
                trial,
                landmark,
                ..
            } => format!("mark {landmark} missing on {specimen} trial {trial}"),
            Self::ClearLandmark {
                specimen,
                trial,
                landmark,
            } => format!("clear landmark {landmark} of {specimen} trial {trial}"),
            Self::SetNote {
                specimen,
                trial,
                landmark,
                ..
            } => format!("note on {landmark} of {specimen} trial {trial}"),
            Self::SetCurve {
                specimen,
                trial,
                curve,
                ..
            } => format!("trace curve {curve} of {specimen} trial {trial}"),
            Self::ClearCurve {
                specimen,
                trial,
                curve,
            } => format!("clear curve {curve} of {specimen} trial {trial}"),
        }
    }
}

fn specimen_index(project: &Project, id: &str) -> Result<usize, EditError> {
    project
        .specimens
        .iter()
        .position(|s| s.id == id)
        .ok_or_else(|| EditError::UnknownSpecimen(id.to_owned()))
}

fn specimen_mut<'a>(project: &'a mut Project, id: &str) -> Result<&'a mut Specimen, EditError> {
    let i = specimen_index(project, id)?;
    Ok(&mut project.specimens[i])
}

fn trial_mut<'a>(
    specimens: &'a mut [Specimen],
    specimen: &str,
    trial: &str,
) -> Result<&'a mut Trial, EditError> {
    let s = specimens
        .iter_mut()
        .find(|s| s.id == specimen)
        .ok_or_else(|| EditError::UnknownSpecimen(specimen.to_owned()))?;
    s.trials
        .iter_mut()
        .find(|t| t.id == trial)
        .ok_or_else(|| EditError::UnknownTrial {
            specimen: specimen.to_owned(),
            trial: trial.to_owned(),
        })
}

/// Runs `change` on the landmark's slot in the trial (`None`: not digitised), keeps the
/// scheme's order, recomputes the curves anchored at it when `moves`, and returns the old trial
/// as the inverse.
fn change_landmark(
    project: &mut Project,
    specimen: &str,
    trial: &str,
    landmark: &str,
    moves: bool,
    change: impl FnOnce(&mut Option<LandmarkEntry>, &str) -> Result<(), EditError>,
) -> Result<Edit, EditError> {
    let Project {
        scheme, specimens, ..
    } = project;
    let index = scheme
        .landmark_index(landmark)
        .ok_or_else(|| EditError::UnknownLandmark(landmark.to_owned()))?;
    let t = trial_mut(specimens, specimen, trial)?;
    let old = t.clone();
    let pos = t.landmarks.iter().position(|l| l.id == landmark);
    let mut slot = pos.map(|i| t.landmarks[i].clone());
    change(&mut slot, landmark)?;
    match (pos, slot) {
        (Some(i), Some(e)) => t.landmarks[i] = e,
        (Some(i), None) => {
            t.landmarks.remove(i);
        }
        (None, Some(e)) => {
            let at = t
                .landmarks
                .iter()
                .position(|l| scheme.landmark_index(&l.id).is_some_and(|j| j > index))
                .unwrap_or(t.landmarks.len());
            t.landmarks.insert(at, e);
        }
        (None, None) => {}
    }
    if moves {
        for c in &mut t.curves {
            if scheme.curves_anchored_at(landmark).any(|d| d.id == c.id) {
                resample_curve(scheme, &t.landmarks, c);
            }
        }
    }
    Ok(Edit::RestoreTrial {
        specimen: specimen.to_owned(),
        trial: Box::new(old),
    })
}

/// As [`change_landmark`] for a curve's slot; resamples the curve after the change.
fn change_curve(
    project: &mut Project,
    specimen: &str,
    trial: &str,
    curve: &str,
    change: impl FnOnce(&mut Option<CurveEntry>) -> Result<(), EditError>,
) -> Result<Edit, EditError> {
    let Project {
        scheme, specimens, ..
    } = project;
    let index = scheme
        .curve_index(curve)
        .ok_or_else(|| EditError::UnknownCurve(curve.to_owned()))?;
    let t = trial_mut(specimens, specimen, trial)?;
    let old = t.clone();
    let pos = t.curves.iter().position(|c| c.id == curve);
    let mut slot = pos.map(|i| t.curves[i].clone());
    change(&mut slot)?;
    if let Some(c) = slot.as_mut() {
        resample_curve(scheme, &t.landmarks, c);
    }
    match (pos, slot) {
        (Some(i), Some(e)) => t.curves[i] = e,
        (Some(i), None) => {
            t.curves.remove(i);
        }
        (None, Some(e)) => {
            let at = t
                .curves
                .iter()
                .position(|c| scheme.curve_index(&c.id).is_some_and(|j| j > index))
                .unwrap_or(t.curves.len());
            t.curves.insert(at, e);
        }
        (None, None) => {}
    }
    Ok(Edit::RestoreTrial {
        specimen: specimen.to_owned(),
        trial: Box::new(old),
    })
}
