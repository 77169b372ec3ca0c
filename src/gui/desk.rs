//! The desk: a landmark project open for digitising.
//!
//! The project itself, its lock, its undo history and its autosave are the library's
//! [`Session`] (the command line changes projects through the same type). What the desk adds
//! is what the user is working on — the selected specimen, trial and current landmark — and the
//! modes of the window: placing, tracing a curve, the note being typed. [`Desk::apply`] applies
//! every [`DeskCommand`]; what it needs of the rest of the app (the scan shown, the view state,
//! the preferences) comes in a [`DeskEnv`], and what it asks of the rest of the app goes out as
//! [`Effects`].

use std::path::Path;
use std::sync::Arc;

use nalgebra::Vector3;

use super::command::{AppCommand, Command, DeskCommand, TypedPosition, ViewCommand};
use super::state::{Preferences, Scan, ViewId, ViewState, clamp_to_volume};
use super::status::Status;
use super::view::plane_basis;
use sutura_core::analysis::checks::{TrialChecks, check_trial};
use sutura_core::geometry::WorldPoint;
use sutura_core::landmarks::mirror::estimate_from_partner;
use sutura_core::landmarks::pick::PickOptions;
use sutura_core::landmarks::pick_source::{pick_view_ray, snap_options, snap_to_boundary};
use sutura_core::landmarks::project::{
    AutosaveStatus, Edit, LandmarkState, Method, PickRecord, ProjectError, Session, Specimen,
    Timestamp, Trial,
};
use sutura_core::volume::{Volume, VolumeSource};

/// What a desk command may read of the rest of the app.
#[derive(Clone, Copy)]
pub struct DeskEnv<'a> {
    /// The scan shown (the selected specimen's once it has loaded).
    pub scan: Option<&'a Arc<Scan>>,
    pub vs: &'a ViewState,
    pub prefs: &'a Preferences,
    /// The volume surface picks land on, when not the scan itself: the preparation's copy
    /// keeping only some labels' material, which the 3D view then shows.
    pub surface: Option<&'a Arc<Volume>>,
}

/// What a desk command asks of the rest of the app.
#[derive(Debug, Default)]
pub struct Effects {
    /// Commands to apply next (moving the crosshair, loading a scan, …).
    pub then: Vec<Command>,
    pub status: Option<Status>,
    /// The document changed (an analysis shown is now out of date).
    pub changed: bool,
    /// The operator's name is needed before a trial can start.
    pub ask_operator: bool,
}

impl Effects {
    fn status(status: Status) -> Self {
        Self {
            status: Some(status),
            ..Self::default()
        }
    }
}

/// An open project with what the user is working on.
#[derive(Debug)]
pub struct Desk {
    pub session: Session,
    pub specimen: Option<String>,
    pub trial: Option<String>,
    pub current: Option<String>,
    /// Placing mode: a click on the stage places the current landmark.
    pub placing: bool,
    /// The curve and segment being traced.
    pub tracing: Option<(String, usize)>,
    /// The specimen whose scan is shown, and whether it failed its fingerprint check.
    pub scan_of: Option<String>,
    pub scan_read_only: bool,
    /// The digitising checks of the selected trial against the rest of the sample, and the
    /// (specimen, trial, revision) they were made for.
    checks: Option<TrialChecks>,
    checks_for: Option<(String, String, u64)>,
    /// Counts the document's changes made through the desk (edits, undo, redo, recovery).
    revision: u64,
}

impl Desk {
    /// Opens a project (read-only if another program holds it); says whether a newer autosave
    /// lies beside it.
    pub fn open(path: &Path) -> Result<(Self, AutosaveStatus), ProjectError> {
        let (session, status) = Session::open(path)?;
        Ok((Self::with(session), status))
    }

    /// A desk on a session, its first specimen selected.
    #[must_use]
    pub fn with(session: Session) -> Self {
        let mut d = Self {
            session,
            specimen: None,
            trial: None,
            current: None,
            placing: false,
            tracing: None,
            scan_of: None,
            scan_read_only: false,
            checks: None,
            checks_for: None,
            revision: 0,
        };
        if let Some(first) = d.session.project.specimens().first().map(|x| x.id.clone()) {
            d.select_specimen(&first);
        }
        d.refresh_checks();
        d
    }

    /// The digitising checks of the selected trial (see [`check_trial`]): flags with their
    /// reasons, or why the trial is not checked yet. They only report; nothing is blocked.
    #[must_use]
    pub fn checks(&self) -> Option<&TrialChecks> {
        self.checks.as_ref()
    }

    /// Runs the checks again when the selected trial or the document changed (cheap when
    /// neither did: [`Desk::apply`] calls it after every command).
    pub fn refresh_checks(&mut self) {
        let key = self
            .specimen
            .clone()
            .zip(self.trial.clone())
            .map(|(sp, t)| (sp, t, self.revision));
        if key != self.checks_for {
            self.checks = key
                .as_ref()
                .map(|(sp, t, _)| check_trial(&self.session.project, sp, t));
            self.checks_for = key;
        }
    }

    #[must_use]
    pub fn name(&self) -> String {
        self.session.name()
    }

    /// Selects a specimen and its latest trial, and the first landmark not yet recorded.
    pub fn select_specimen(&mut self, id: &str) {
        let Some(s) = self.session.project.specimen(id) else {
            return;
        };
        self.specimen = Some(s.id.clone());
        self.trial = s.trials.last().map(|t| t.id.clone());
        self.current = self.first_open_after(None);
    }

    /// Selects a trial of the selected specimen.
    pub fn select_trial(&mut self, id: &str) {
        if self.specimen_ref().is_some_and(|s| s.trial(id).is_some()) {
            self.trial = Some(id.to_owned());
            self.current = self.first_open_after(None);
        }
    }

    /// Keeps the selection pointing at things that exist (after undo, recovery, discard).
    pub fn fix_selection(&mut self) {
        if self.specimen_ref().is_none() {
            let first = self
                .session
                .project
                .specimens()
                .first()
                .map(|s| s.id.clone());
            self.specimen = None;
            self.trial = None;
            if let Some(f) = first {
                self.select_specimen(&f);
            }
            return;
        }
        let s = self.specimen_ref().expect("checked");
        if self.trial.as_deref().is_none_or(|t| s.trial(t).is_none()) {
            self.trial = s.trials.last().map(|t| t.id.clone());
        }
        if self.current.is_none() {
            self.current = self.first_open_after(None);
        }
    }

    #[must_use]
    pub fn specimen_ref(&self) -> Option<&Specimen> {
        self.session.project.specimen(self.specimen.as_deref()?)
    }

    #[must_use]
    pub fn trial_ref(&self) -> Option<&Trial> {
        self.specimen_ref()?.trial(self.trial.as_deref()?)
    }

    /// The first landmark in scheme order after `after` (wrapping; from the start for `None`)
    /// that the selected trial has not recorded yet.
    #[must_use]
    pub fn first_open_after(&self, after: Option<&str>) -> Option<String> {
        let scheme = self.session.project.scheme();
        let lms = &scheme.landmarks;
        let trial = self.trial_ref()?;
        let start = after
            .and_then(|a| scheme.landmark_index(a))
            .map_or(0, |i| i + 1);
        (0..lms.len())
            .map(|k| &lms[(start + k) % lms.len()])
            .find(|l| trial.landmark(&l.id).is_none())
            .map(|l| l.id.clone())
    }

    /// The landmark `by` places from the current one in scheme order (wrapping).
    #[must_use]
    pub fn stepped(&self, by: isize) -> Option<String> {
        let scheme = self.session.project.scheme();
        let lms = &scheme.landmarks;
        if lms.is_empty() {
            return None;
        }
        let n = lms.len() as isize;
        let i = self
            .current
            .as_deref()
            .and_then(|c| scheme.landmark_index(c))
            .map_or(if by >= 0 { -1 } else { 0 }, |i| i as isize);
        Some(lms[(i + by).rem_euclid(n) as usize].id.clone())
    }

    /// A landmark's state in the selected trial (`None`: not yet digitised).
    #[must_use]
    pub fn state_of(&self, landmark: &str) -> Option<LandmarkState> {
        self.trial_ref()?.landmark(landmark).map(|l| l.state)
    }

    /// Starts a new, empty trial of the selected specimen by `operator` and selects it.
    pub fn start_trial(&mut self, operator: &str) -> Result<String, Status> {
        let specimen = self
            .specimen
            .clone()
            .ok_or_else(|| Status::error("select a specimen first"))?;
        let id = self
            .specimen_ref()
            .map_or_else(|| "1".into(), Specimen::next_trial_id);
        self.edit(Edit::AddTrial {
            specimen,
            trial: Box::new(Trial::new(&id, operator, Timestamp::now())),
            index: None,
        })?;
        self.trial = Some(id.clone());
        self.current = self.first_open_after(None);
        Ok(id)
    }

    fn edit(&mut self, edit: Edit) -> Result<(), Status> {
        self.revision += 1;
        self.session
            .edit(edit)
            .map_err(|e| Status::error(e.to_string()))
    }

    fn edit_all(&mut self, edits: Vec<Edit>, what: String) -> Result<(), Status> {
        self.revision += 1;
        self.session
            .edit_all(edits, what)
            .map_err(|e| Status::error(e.to_string()))
    }

    /// The selected specimen and trial, ready for a landmark edit; says why not otherwise.
    fn target(&self) -> Result<(String, String), Status> {
        let (Some(sp), Some(t)) = (&self.specimen, &self.trial) else {
            return Err(Status::error(if self.specimen.is_none() {
                "select a specimen first"
            } else {
                "start a trial first: New trial (Ctrl+T)"
            }));
        };
        if self.scan_read_only && self.scan_of.as_ref() == Some(sp) {
            return Err(Status::error(
                "this specimen's scan is not the recorded one: its landmarks cannot be changed",
            ));
        }
        Ok((sp.clone(), t.clone()))
    }

    /// The current landmark and whether it lies on the surface, if placing can go ahead on the
    /// shown scan.
    fn placing_target(&self, env: &DeskEnv<'_>) -> Result<(String, String, String, bool), Status> {
        let (specimen, trial) = self.target()?;
        if self.scan_of.as_deref() != Some(specimen.as_str()) || env.scan.is_none() {
            return Err(Status::error(format!(
                "{specimen}: its scan is still opening"
            )));
        }
        let Some(lm) = self.current.clone() else {
            return Err(Status::info(
                "every landmark is done: pick one in the checklist to revise it",
            ));
        };
        let on_surface = self
            .session
            .project
            .scheme()
            .landmark(&lm)
            .is_some_and(|d| d.on_surface);
        Ok((specimen, trial, lm, on_surface))
    }

    /// After a landmark is placed: the next open one becomes current; says so.
    fn placed(&mut self, lm: &str, how: &str) -> Status {
        self.current = self.first_open_after(Some(lm));
        let next = self.current.as_deref().map_or_else(
            || "every landmark is done".to_owned(),
            |c| format!("next: {c}"),
        );
        Status::info(format!("placed {lm}{how}; {next}"))
    }

    /// Applies a desk command, then brings the digitising checks up to date.
    pub fn apply(&mut self, cmd: DeskCommand, env: &DeskEnv<'_>) -> Effects {
        let effects = self.apply_command(cmd, env);
        if effects.changed {
            self.revision += 1;
        }
        self.refresh_checks();
        effects
    }

    #[allow(clippy::too_many_lines)] // reason: one arm per command, each short
    fn apply_command(&mut self, cmd: DeskCommand, env: &DeskEnv<'_>) -> Effects {
        let r = match cmd {
            DeskCommand::SelectSpecimen(id) => {
                self.select_specimen(&id);
                return Effects {
                    then: vec![AppCommand::LoadSpecimen.into()],
                    ..Effects::default()
                };
            }
            DeskCommand::SelectTrial(id) => {
                self.select_trial(&id);
                Ok(None)
            }
            DeskCommand::StartTrial => {
                if env.prefs.operator.trim().is_empty() {
                    return Effects {
                        ask_operator: true,
                        ..Effects::default()
                    };
                }
                let op = env.prefs.operator.clone();
                self.start_trial(&op).map(|t| {
                    self.placing = true;
                    Some(Status::info(format!(
                        "trial {t} started by {op}; other trials are hidden. Placing is on: \
                         click the stage to place {}",
                        self.current.clone().unwrap_or_default()
                    )))
                })
            }
            DeskCommand::SelectLandmark(id) => {
                self.current = Some(id);
                Ok(None)
            }
            DeskCommand::StepLandmark(by) => {
                self.current = self.stepped(by);
                Ok(None)
            }
            DeskCommand::TogglePlacing => {
                self.placing = !self.placing;
                return Effects {
                    then: vec![ViewCommand::Drag(None).into()],
                    ..Effects::default()
                };
            }
            DeskCommand::StopPlacing => {
                self.placing = false;
                Ok(None)
            }
            DeskCommand::PlaceOnPlane { view, at } => self.place_on_plane(view, at, env),
            DeskCommand::PlaceOnSurface { through, direction } => {
                return self.place_on_surface(through, direction, env);
            }
            DeskCommand::PlaceTyped(p) => self.place_typed(p, env),
            DeskCommand::EstimateFromPartner => self.estimate_from_partner(),
            DeskCommand::MoveLandmark { landmark, to } => self.target().and_then(|(sp, t)| {
                let to = env.scan.map_or(to, |sc| clamp_to_volume(sc.grid(), to));
                self.edit(Edit::SetLandmark {
                    specimen: sp,
                    trial: t,
                    landmark: landmark.clone(),
                    position_mm: [to.0.x, to.0.y, to.0.z],
                    method: Method::Slice,
                    pick: None,
                    at: Timestamp::now(),
                })
                .map(|()| Some(Status::info(format!("moved {landmark}"))))
            }),
            DeskCommand::MarkMissing => match self.current.clone() {
                None => Ok(None),
                Some(lm) => self.target().and_then(|(sp, t)| {
                    self.edit(Edit::MarkMissing {
                        specimen: sp,
                        trial: t,
                        landmark: lm.clone(),
                        at: Timestamp::now(),
                    })?;
                    self.current = self.first_open_after(Some(&lm));
                    Ok(Some(Status::info(format!("{lm} marked missing"))))
                }),
            },
            DeskCommand::ClearLandmark => match self.current.clone() {
                Some(lm) if self.state_of(&lm).is_some() => self.target().and_then(|(sp, t)| {
                    self.edit(Edit::ClearLandmark {
                        specimen: sp,
                        trial: t,
                        landmark: lm,
                    })
                    .map(|()| None)
                }),
                _ => Ok(None),
            },
            DeskCommand::SetNote { landmark, note } => self.target().and_then(|(sp, t)| {
                let note = note.trim();
                self.edit(Edit::SetNote {
                    specimen: sp,
                    trial: t,
                    landmark,
                    note: (!note.is_empty()).then(|| note.to_owned()),
                })
                .map(|()| None)
            }),
            DeskCommand::GoToLandmark => {
                let p = self
                    .current
                    .as_deref()
                    .and_then(|c| self.trial_ref()?.position(c));
                return Effects {
                    then: p
                        .map(|p| ViewCommand::MoveCursor(WorldPoint::new(p[0], p[1], p[2])).into())
                        .into_iter()
                        .collect(),
                    ..Effects::default()
                };
            }
            DeskCommand::SetTracing(t) => {
                self.tracing.clone_from(&t);
                Ok(t.map(|(c, seg)| {
                    self.placing = true;
                    Status::info(format!(
                        "tracing {c}, segment {}: click control points in order from its first \
                         anchor to its second; Ctrl+Z takes one back",
                        seg + 1
                    ))
                }))
            }
            DeskCommand::CycleTracing => {
                let all: Vec<(String, usize)> = self
                    .session
                    .project
                    .scheme()
                    .curves
                    .iter()
                    .flat_map(|c| (0..c.segments()).map(|k| (c.id.clone(), k)))
                    .collect();
                let next = match &self.tracing {
                    None => all.first().cloned(),
                    Some(t) => all
                        .iter()
                        .position(|x| x == t)
                        .and_then(|i| all.get(i + 1).cloned()),
                };
                return Effects {
                    then: vec![DeskCommand::SetTracing(next.clone()).into()],
                    status: next
                        .is_none()
                        .then(|| Status::info("back to placing landmarks")),
                    ..Effects::default()
                };
            }
            DeskCommand::ClearCurve(curve) => self.target().and_then(|(sp, t)| {
                if self
                    .trial_ref()
                    .is_some_and(|tr| tr.curve(&curve).is_some())
                {
                    self.edit(Edit::ClearCurve {
                        specimen: sp,
                        trial: t,
                        curve,
                    })?;
                }
                Ok(None)
            }),
            DeskCommand::Undo | DeskCommand::Redo => {
                let undo = cmd == DeskCommand::Undo;
                let r = if undo {
                    self.session.undo()
                } else {
                    self.session.redo()
                };
                self.fix_selection();
                let verb = if undo { "undo" } else { "redo" };
                match r {
                    Some(Ok(what)) => Ok(Some(Status::info(format!(
                        "{} {what}",
                        if undo { "undid" } else { "redid" }
                    )))),
                    Some(Err(e)) => Err(Status::error(e.to_string())),
                    None => {
                        return Effects::status(Status::info(format!("nothing to {verb}")));
                    }
                }
            }
            DeskCommand::Save => match self.session.save() {
                Ok(()) => {
                    return Effects::status(Status::info(format!(
                        "saved {}",
                        self.session.path().display()
                    )));
                }
                Err(e) => Err(Status::error(e.to_string())),
            },
            DeskCommand::Autosave(recover) => {
                let r = if recover {
                    self.session
                        .recover_autosave()
                        .map(|()| {
                            Some(Status::warning(
                                "recovered the autosave: save (Ctrl+S) to keep it",
                            ))
                        })
                        .map_err(|e| Status::error(e.to_string()))
                } else {
                    self.session.remove_autosave();
                    Ok(None)
                };
                self.fix_selection();
                let mut e = Effects {
                    then: vec![AppCommand::LoadSpecimen.into()],
                    changed: recover,
                    ..Effects::default()
                };
                match r {
                    Ok(s) => e.status = s,
                    Err(s) => e.status = Some(s),
                }
                return e;
            }
            DeskCommand::RemoveSpecimen(id) => self
                .edit(Edit::RemoveSpecimen {
                    specimen: id.clone(),
                })
                .map(|()| {
                    self.fix_selection();
                    Some(Status::info(format!(
                        "removed specimen {id} (Ctrl+Z brings it back)"
                    )))
                }),
            DeskCommand::SetGroup {
                specimens,
                key,
                value,
            } => {
                let n = specimens.len();
                let edits = specimens
                    .into_iter()
                    .map(|specimen| Edit::SetGroup {
                        specimen,
                        key: key.clone(),
                        value: value.clone(),
                    })
                    .collect();
                let what = match &value {
                    Some(v) => format!("set {key} = {v} for {n} specimens"),
                    None => format!("remove {key} from {n} specimens"),
                };
                self.edit_all(edits, what.clone())
                    .map(|()| Some(Status::info(what)))
            }
        };
        match r {
            Ok(status) => Effects {
                status,
                changed: true,
                ..Effects::default()
            },
            Err(s) => Effects::status(s),
        }
    }

    /// Adds specimens already recorded (their scans loaded and fingerprinted) as one step.
    pub fn insert_specimens(&mut self, specimens: Vec<Specimen>) -> Result<Status, Status> {
        let n = specimens.len();
        let ids: Vec<String> = specimens.iter().map(|s| s.id.clone()).collect();
        let edits = specimens
            .into_iter()
            .map(|s| Edit::AddSpecimen {
                specimen: Box::new(s),
                index: None,
            })
            .collect();
        self.edit_all(edits, format!("add {n} specimens"))?;
        if self.specimen.is_none()
            && let Some(first) = ids.first()
        {
            self.select_specimen(first);
        }
        self.refresh_checks();
        Ok(Status::info(format!("added {}", ids.join(", "))))
    }

    /// Places the current landmark at a point clicked on a plane view, snapped to the
    /// boundary within reach when snapping is on and the landmark lies on the surface (or adds
    /// the point to the curve being traced).
    fn place_on_plane(
        &mut self,
        view: ViewId,
        at: WorldPoint,
        env: &DeskEnv<'_>,
    ) -> Result<Option<Status>, Status> {
        if self.tracing.is_some() {
            let Some(scan) = env.scan else {
                return Ok(None);
            };
            return self.trace_point(clamp_to_volume(scan.grid(), at)).map(Some);
        }
        let (specimen, trial, lm, on_surface) = self.placing_target(env)?;
        let scan = env.scan.expect("placing_target checked");
        let vol = scan.grid();
        let at = clamp_to_volume(vol, at);
        let (_, _, normal) = plane_basis(vol, env.vs, view);
        let mut placed = (at, Method::Slice, None, String::new());
        if env.prefs.snap && on_surface {
            let iso = &env.vs.iso;
            match snap_to_boundary(vol, at, normal, iso.value) {
                Ok(Some(p)) => {
                    let d = p.point.0 - at.0;
                    let direction = d.try_normalize(1e-12).or(p.normal).unwrap_or(normal);
                    placed = (
                        p.point,
                        Method::Surface,
                        PickRecord::of(at, direction, iso.value, &p),
                        format!(" (snapped {:.3} mm to the boundary)", d.norm()),
                    );
                }
                Ok(None) => {
                    placed.3 = format!(
                        " where clicked (no boundary at the {} within {:.2} mm)",
                        iso.describe(),
                        snap_options(vol, iso.value).max_distance_mm
                    );
                }
                Err(e) => placed.3 = format!(" where clicked (snapping: {e})"),
            }
        }
        let (p, method, pick, how) = placed;
        self.edit(Edit::SetLandmark {
            specimen,
            trial,
            landmark: lm.clone(),
            position_mm: [p.0.x, p.0.y, p.0.z],
            method,
            pick,
            at: Timestamp::now(),
        })?;
        Ok(Some(self.placed(&lm, &how)))
    }

    /// Adds a control point to the curve segment being traced.
    fn trace_point(&mut self, p: WorldPoint) -> Result<Status, Status> {
        let Some((curve, seg)) = self.tracing.clone() else {
            return Err(Status::error("not tracing a curve"));
        };
        let (specimen, trial) = self.target()?;
        let Some(def) = self.session.project.scheme().curve(&curve) else {
            return Err(Status::error(format!("no curve {curve} in the scheme")));
        };
        let n = def.segments();
        let mut traced = self
            .trial_ref()
            .and_then(|t| t.curve(&curve))
            .map_or_else(|| vec![Vec::new(); n], |c| c.traced_mm.clone());
        let seg = seg.min(n.saturating_sub(1));
        traced[seg].push([p.0.x, p.0.y, p.0.z]);
        let count = traced[seg].len();
        self.edit(Edit::SetCurve {
            specimen,
            trial,
            curve: curve.clone(),
            traced_mm: traced,
            at: Timestamp::now(),
        })?;
        Ok(Status::info(format!(
            "{curve}, segment {}: {count} control points",
            seg + 1
        )))
    }

    /// Places the current landmark where the 3D view's pixel ray meets the surface shown at the
    /// iso-value (or, while tracing a curve, adds the point there to the curve).
    fn place_on_surface(
        &mut self,
        through: WorldPoint,
        direction: Vector3<f64>,
        env: &DeskEnv<'_>,
    ) -> Effects {
        let tracing = self.tracing.is_some();
        let target = if tracing {
            self.target().map(|(a, b)| (a, b, String::new(), true))
        } else {
            self.placing_target(env)
        };
        let (specimen, trial, lm, on_surface) = match target {
            Ok(t) => t,
            Err(s) => return Effects::status(s),
        };
        if !on_surface {
            return Effects::status(Status::error(format!(
                "{lm} is a constructed point, not on the surface: place it on a plane view"
            )));
        }
        let Some(scan) = env.scan else {
            return Effects::default();
        };
        let iso = env.vs.iso.value;
        let surface: &dyn VolumeSource = env.surface.map_or(scan.grid(), |s| &**s);
        let hit = match pick_view_ray(surface, through, direction, &PickOptions::new(iso)) {
            Ok(Some(p)) => p,
            Ok(None) => {
                return Effects::status(Status::error(format!(
                    "no surface under the pointer at the {}",
                    env.vs.iso.describe()
                )));
            }
            Err(e) => return Effects::status(Status::error(e.to_string())),
        };
        let r = if tracing {
            self.trace_point(hit.point)
        } else {
            let dir = direction.normalize();
            self.edit(Edit::SetLandmark {
                specimen,
                trial,
                landmark: lm.clone(),
                position_mm: [hit.point.0.x, hit.point.0.y, hit.point.0.z],
                method: Method::Surface,
                pick: PickRecord::of(
                    WorldPoint(hit.point.0 - dir * hit.distance_mm),
                    dir,
                    iso,
                    &hit,
                ),
                at: Timestamp::now(),
            })
            .map(|()| self.placed(&lm, " on the surface"))
        };
        match r {
            Ok(s) => Effects {
                then: vec![ViewCommand::MoveCursor(hit.point).into()],
                status: Some(s),
                changed: true,
                ..Effects::default()
            },
            Err(s) => Effects::status(s),
        }
    }

    /// Places the current landmark at a typed position (world mm or voxel coordinates of the
    /// specimen's scan), refused outside the scan.
    fn place_typed(
        &mut self,
        p: TypedPosition,
        env: &DeskEnv<'_>,
    ) -> Result<Option<Status>, Status> {
        let (specimen, trial) = self.target()?;
        let Some(lm) = self.current.clone() else {
            return Err(Status::info("pick a landmark in the checklist first"));
        };
        let Some(record) = self.specimen_ref().map(|s| s.scan.clone()) else {
            return Ok(None);
        };
        let world = match p {
            TypedPosition::WorldMm(w) => w,
            TypedPosition::Voxel(v) => record.world_from_voxel_point(v),
        };
        if !record.contains(world) {
            let v = record.voxel_from_world_point(world);
            return Err(Status::error(format!(
                "{lm}: [{:.3}, {:.3}, {:.3}] mm is outside {specimen}'s scan (voxel {:.1}, {:.1}, {:.1}); \
                 positions are world millimetres",
                world[0], world[1], world[2], v[0], v[1], v[2]
            )));
        }
        self.edit(Edit::SetLandmark {
            specimen,
            trial,
            landmark: lm.clone(),
            position_mm: world,
            method: Method::Typed,
            pick: None,
            at: Timestamp::now(),
        })?;
        let _ = env;
        Ok(Some(self.placed(&lm, " at the typed position")))
    }

    /// Estimates the current landmark from its bilateral partner (the library's rule, as
    /// `sutura landmark mirror`), keeping what was done as its note; one undo step.
    fn estimate_from_partner(&mut self) -> Result<Option<Status>, Status> {
        let (specimen, trial) = self.target()?;
        let Some(lm) = self.current.clone() else {
            return Err(Status::info("pick a landmark in the checklist first"));
        };
        let tr = self
            .trial_ref()
            .ok_or_else(|| Status::error("no trial selected"))?;
        let e = estimate_from_partner(self.session.project.scheme(), tr, &lm)
            .map_err(|e| Status::error(format!("{lm}: {e}")))?;
        let note = e.describe();
        self.edit_all(
            vec![
                Edit::SetLandmark {
                    specimen: specimen.clone(),
                    trial: trial.clone(),
                    landmark: lm.clone(),
                    position_mm: e.position_mm,
                    method: Method::Estimated,
                    pick: None,
                    at: Timestamp::now(),
                },
                Edit::SetNote {
                    specimen,
                    trial,
                    landmark: lm.clone(),
                    note: Some(note.clone()),
                },
            ],
            format!("estimate {lm} from its partner"),
        )?;
        self.current = self.first_open_after(Some(&lm));
        Ok(Some(Status::warning(format!("{lm} {note}"))))
    }
}
