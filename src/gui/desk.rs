//! The desk: a landmark project open for digitising, with its undo history, its saved state
//! and its autosave.
//!
//! Every change to the project goes through [`Session::edit`], which applies a
//! [`sutura_core::landmarks::project::Edit`] and keeps the exact inverse it returns on the undo stack;
//! undo applies that inverse and keeps *its* inverse for redo. Whether the document differs
//! from the file is decided by comparing it with the copy last read or written, so undoing back
//! to the saved state makes it clean again.
//!
//! The autosave (`NAME.autosave` beside the project) is written atomically once the document
//! has been unchanged for [`Session::autosave_delay`] after a change, and removed when the
//! project is saved or its changes are discarded. A project opened while another program holds
//! its lock (or in a folder that cannot be written) is read-only here.
//!
//! The selection (specimen, trial, current landmark) lives here too: it is part of what the
//! user is working on, though it is never saved.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use sutura_core::landmarks::Project;
use sutura_core::landmarks::project::{
    AutosaveStatus, Edit, LandmarkState, ProjectError, ProjectLock, Specimen, Timestamp, Trial,
    autosave_path, autosave_status,
};

/// How long the document must rest after a change before the autosave is written.
pub const AUTOSAVE_DELAY: Duration = Duration::from_secs(3);
/// How many edits undo reaches back.
const UNDO_DEPTH: usize = 500;

/// One undoable step: the edit that reverses it and what it did.
#[derive(Clone, Debug)]
struct Step {
    inverse: Edit,
    what: String,
}

/// An open project.
#[derive(Debug)]
pub struct Session {
    pub path: PathBuf,
    pub project: Project,
    /// The document as last read from or written to `path`.
    saved: Project,
    undo: Vec<Step>,
    redo: Vec<Step>,
    /// When the document last changed without an autosave since.
    changed_at: Option<Instant>,
    pub autosave_delay: Duration,
    /// Another program holds the project (or its folder cannot be written): nothing may be
    /// changed or saved.
    pub read_only: bool,
    /// Why, as a phrase after the project's name.
    pub read_only_why: String,
    _lock: Option<ProjectLock>,
    /// The selection.
    pub specimen: Option<String>,
    pub trial: Option<String>,
    pub current: Option<String>,
}

impl Session {
    /// Opens a project file, taking its lock (read-only if another program holds it). Also
    /// says whether an autosave newer than the file lies beside it.
    pub fn open(path: &Path) -> Result<(Self, AutosaveStatus), ProjectError> {
        let path = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
        // busy: another program has it; an error: the folder cannot be written (read-only
        // media), so the project could not be saved either
        let (lock, why) = match ProjectLock::acquire(&path) {
            Ok(l) => (Some(l), None),
            Err(ProjectError::Busy { .. }) => (None, Some("is open in another program".into())),
            Err(e) => (None, Some(format!("cannot be locked for writing ({e})"))),
        };
        let project = Project::load(&path)?;
        let status = autosave_status(&path)?;
        let mut s = Self {
            path,
            saved: project.clone(),
            project,
            undo: Vec::new(),
            redo: Vec::new(),
            changed_at: None,
            autosave_delay: AUTOSAVE_DELAY,
            read_only: why.is_some(),
            read_only_why: why.unwrap_or_default(),
            _lock: lock,
            specimen: None,
            trial: None,
            current: None,
        };
        if let Some(first) = s.project.specimens().first().map(|x| x.id.clone()) {
            s.select_specimen(&first);
        }
        Ok((s, status))
    }

    /// The project's file name.
    #[must_use]
    pub fn name(&self) -> String {
        self.path.file_name().map_or_else(
            || self.path.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        )
    }

    /// Whether the document differs from the file.
    #[must_use]
    pub fn is_dirty(&self) -> bool {
        self.project != self.saved
    }

    /// Applies an edit; on success it can be undone. `what` describes it for the undo menu.
    pub fn edit(&mut self, edit: Edit) -> Result<(), String> {
        if self.read_only {
            return Err(format!(
                "{} {}: changes are not allowed here",
                self.name(),
                self.read_only_why
            ));
        }
        let what = edit.describe();
        let inverse = edit.apply(&mut self.project).map_err(|e| e.to_string())?;
        self.undo.push(Step { inverse, what });
        if self.undo.len() > UNDO_DEPTH {
            self.undo.remove(0);
        }
        self.redo.clear();
        self.touched();
        Ok(())
    }

    /// Undoes the last edit; returns what it was.
    pub fn undo(&mut self) -> Option<Result<String, String>> {
        let step = self.undo.pop()?;
        Some(self.replay(step, true))
    }

    /// Redoes the last undone edit; returns what it was.
    pub fn redo(&mut self) -> Option<Result<String, String>> {
        let step = self.redo.pop()?;
        Some(self.replay(step, false))
    }

    fn replay(&mut self, step: Step, undoing: bool) -> Result<String, String> {
        let Step { inverse, what } = step;
        match inverse.apply(&mut self.project) {
            Ok(back) => {
                let s = Step {
                    inverse: back,
                    what: what.clone(),
                };
                if undoing {
                    self.redo.push(s);
                } else {
                    self.undo.push(s);
                }
                self.touched();
                self.fix_selection();
                Ok(what)
            }
            Err(e) => Err(format!(
                "cannot {} {what}: {e}",
                if undoing { "undo" } else { "redo" }
            )),
        }
    }

    /// What undo and redo would do next.
    #[must_use]
    pub fn next_undo(&self) -> Option<&str> {
        self.undo.last().map(|s| s.what.as_str())
    }

    #[must_use]
    pub fn next_redo(&self) -> Option<&str> {
        self.redo.last().map(|s| s.what.as_str())
    }

    fn touched(&mut self) {
        self.changed_at = Some(Instant::now());
    }

    /// Saves the project (atomically, keeping `NAME.bak`) and removes the autosave.
    pub fn save(&mut self) -> Result<(), String> {
        if self.read_only {
            return Err(format!("{} {}", self.name(), self.read_only_why));
        }
        self.project.save(&self.path).map_err(|e| e.to_string())?;
        self.saved = self.project.clone();
        self.changed_at = None;
        self.remove_autosave();
        Ok(())
    }

    /// Writes the autosave if the document has rested long enough since its last change.
    /// Returns whether it wrote.
    pub fn autosave_if_due(&mut self) -> Result<bool, String> {
        match self.changed_at {
            Some(t) if t.elapsed() >= self.autosave_delay => self.autosave().map(|()| true),
            _ => Ok(false),
        }
    }

    /// Writes the autosave now if there are unsaved changes (or removes a stale one).
    pub fn autosave(&mut self) -> Result<(), String> {
        if self.read_only {
            return Ok(());
        }
        self.changed_at = None;
        if self.is_dirty() {
            self.project
                .save_autosave(&self.path)
                .map_err(|e| e.to_string())
        } else {
            self.remove_autosave();
            Ok(())
        }
    }

    /// Whether a change waits for its autosave.
    #[must_use]
    pub fn autosave_pending(&self) -> bool {
        self.changed_at.is_some()
    }

    /// Takes the autosave's document as the current one (unsaved, undoable as one step).
    pub fn recover_autosave(&mut self) -> Result<(), String> {
        let auto = autosave_path(&self.path);
        let recovered = Project::load(&auto).map_err(|e| e.to_string())?;
        if recovered.scheme_copy() != self.project.scheme_copy() {
            return Err(format!(
                "{}: its scheme differs from the project's; not recovered",
                auto.display()
            ));
        }
        self.project = recovered;
        self.undo.clear();
        self.redo.clear();
        self.fix_selection();
        Ok(())
    }

    /// Drops unsaved changes: back to the file, no autosave.
    pub fn discard_changes(&mut self) {
        self.project = self.saved.clone();
        self.undo.clear();
        self.redo.clear();
        self.changed_at = None;
        self.remove_autosave();
        self.fix_selection();
    }

    /// Removes the autosave file (if any).
    pub fn remove_autosave(&self) {
        if !self.read_only {
            let _ = std::fs::remove_file(autosave_path(&self.path));
        }
    }

    /// Selects a specimen and its latest trial, and the first landmark not yet decided.
    pub fn select_specimen(&mut self, id: &str) {
        let Some(s) = self.project.specimen(id) else {
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
    fn fix_selection(&mut self) {
        let Some(s) = self.specimen_ref() else {
            self.specimen = None;
            self.trial = None;
            return;
        };
        if self.trial.as_deref().is_none_or(|t| s.trial(t).is_none()) {
            self.trial = s.trials.last().map(|t| t.id.clone());
        }
    }

    #[must_use]
    pub fn specimen_ref(&self) -> Option<&Specimen> {
        self.project.specimen(self.specimen.as_deref()?)
    }

    #[must_use]
    pub fn trial_ref(&self) -> Option<&Trial> {
        self.specimen_ref()?.trial(self.trial.as_deref()?)
    }

    /// The first landmark in scheme order after `after` (wrapping; from the start for `None`)
    /// that the selected trial has not decided yet.
    #[must_use]
    pub fn first_open_after(&self, after: Option<&str>) -> Option<String> {
        let lms = &self.project.scheme().landmarks;
        let trial = self.trial_ref()?;
        let start = after
            .and_then(|a| self.project.scheme().landmark_index(a))
            .map_or(0, |i| i + 1);
        (0..lms.len())
            .map(|k| &lms[(start + k) % lms.len()])
            .find(|l| trial.landmark(&l.id).is_none())
            .map(|l| l.id.clone())
    }

    /// The landmark `by` places from the current one in scheme order (wrapping).
    #[must_use]
    pub fn stepped(&self, by: isize) -> Option<String> {
        let lms = &self.project.scheme().landmarks;
        if lms.is_empty() {
            return None;
        }
        let n = lms.len() as isize;
        let i = self
            .current
            .as_deref()
            .and_then(|c| self.project.scheme().landmark_index(c))
            .map_or(if by >= 0 { -1 } else { 0 }, |i| i as isize);
        Some(lms[(i + by).rem_euclid(n) as usize].id.clone())
    }

    /// A landmark's state in the selected trial (`None`: not yet digitised).
    #[must_use]
    pub fn state_of(&self, landmark: &str) -> Option<LandmarkState> {
        self.trial_ref()?.landmark(landmark).map(|l| l.state)
    }

    /// The id the next trial of the selected specimen gets: one more than the largest number
    /// among its trial ids (`1` for the first).
    #[must_use]
    pub fn next_trial_id(&self) -> String {
        let n = self.specimen_ref().map_or(0, |s| {
            s.trials
                .iter()
                .filter_map(|t| t.id.parse::<u64>().ok())
                .max()
                .unwrap_or(0)
        });
        let mut id = n + 1;
        while self
            .specimen_ref()
            .is_some_and(|s| s.trial(&id.to_string()).is_some())
        {
            id += 1;
        }
        id.to_string()
    }

    /// Starts a new, empty trial of the selected specimen by `operator` and selects it.
    pub fn start_trial(&mut self, operator: &str) -> Result<String, String> {
        let specimen = self
            .specimen
            .clone()
            .ok_or_else(|| "select a specimen first".to_owned())?;
        let id = self.next_trial_id();
        self.edit(Edit::AddTrial {
            specimen,
            trial: Box::new(Trial::new(&id, operator, Timestamp::now())),
            index: None,
        })?;
        self.trial = Some(id.clone());
        self.current = self.first_open_after(None);
        Ok(id)
    }
}

/// Whether `path` names a project file (by its `.json` name) rather than a scan.
#[must_use]
pub fn is_project_path(path: &Path) -> bool {
    path.is_file()
        && path
            .extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("json"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use sutura_core::landmarks::project::Method;

    fn copy_sample(dir: &Path) -> PathBuf {
        let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/sample_project.json");
        let dst = dir.join("p.json");
        std::fs::copy(src, &dst).unwrap();
        dst
    }

    fn place(s: &mut Session, lm: &str, p: [f64; 3]) {
        let edit = Edit::SetLandmark {
            specimen: s.specimen.clone().unwrap(),
            trial: s.trial.clone().unwrap(),
            landmark: lm.into(),
            position_mm: p,
            method: Method::Slice,
            pick: None,
            at: Timestamp::now(),
        };
        s.edit(edit).unwrap();
    }

    #[test]
    fn undo_and_redo_walk_the_history_and_dirtiness_follows_the_file() {
        let d = tempfile::tempdir().unwrap();
        let (mut s, status) = Session::open(&copy_sample(d.path())).unwrap();
        assert_eq!(status, AutosaveStatus::None);
        assert_eq!(s.specimen.as_deref(), Some("HDC-001"));
        let before = s.project.clone();
        let t = s.start_trial("ana").unwrap();
        assert_eq!(t, "2");
        assert_eq!(s.current.as_deref(), Some("snout_tip"));
        place(&mut s, "snout_tip", [1.0, 2.0, 3.0]);
        assert!(s.is_dirty());
        let after = s.project.clone();
        assert!(s.undo().unwrap().is_ok());
        assert!(s.undo().unwrap().is_ok());
        assert_eq!(s.project, before);
        assert!(!s.is_dirty(), "undone back to the file");
        assert!(s.undo().is_none());
        s.redo().unwrap().unwrap();
        s.redo().unwrap().unwrap();
        assert_eq!(s.project, after);
        // a new edit drops the redo history
        s.undo().unwrap().unwrap();
        place(&mut s, "crest_top", [0.0; 3]);
        assert!(s.redo().is_none());
    }

    #[test]
    fn autosave_is_written_after_the_delay_and_removed_by_save() {
        let d = tempfile::tempdir().unwrap();
        let path = copy_sample(d.path());
        let (mut s, _) = Session::open(&path).unwrap();
        s.autosave_delay = Duration::from_millis(30);
        s.start_trial("ana").unwrap();
        assert!(!s.autosave_if_due().unwrap(), "not yet");
        std::thread::sleep(Duration::from_millis(40));
        assert!(s.autosave_if_due().unwrap());
        assert!(matches!(
            autosave_status(&s.path).unwrap(),
            AutosaveStatus::Newer { .. }
        ));
        let edited = s.project.clone();
        drop(s); // a crash: nothing saved
        let (mut s, status) = Session::open(&path).unwrap();
        assert!(matches!(status, AutosaveStatus::Newer { .. }));
        assert_ne!(s.project, edited);
        s.recover_autosave().unwrap();
        assert_eq!(s.project, edited);
        assert!(s.is_dirty());
        s.save().unwrap();
        assert!(!autosave_path(&path).exists());
        assert_eq!(Project::load(&path).unwrap(), edited);
    }

    #[test]
    fn a_second_session_on_the_same_file_is_read_only() {
        let d = tempfile::tempdir().unwrap();
        let path = copy_sample(d.path());
        let (_first, _) = Session::open(&path).unwrap();
        let (mut second, _) = Session::open(&path).unwrap();
        assert!(second.read_only);
        let err = second.start_trial("x").unwrap_err();
        assert!(err.contains("another program"), "{err}");
    }

    #[test]
    fn the_next_open_landmark_wraps_and_skips_decided_ones() {
        let d = tempfile::tempdir().unwrap();
        let (mut s, _) = Session::open(&copy_sample(d.path())).unwrap();
        s.start_trial("ana").unwrap();
        let lms: Vec<String> = s
            .project
            .scheme()
            .landmarks
            .iter()
            .map(|l| l.id.clone())
            .collect();
        place(&mut s, &lms[1], [0.0; 3]);
        assert_eq!(s.first_open_after(Some(&lms[0])), Some(lms[2].clone()));
        let last = lms.last().unwrap();
        assert_eq!(s.first_open_after(Some(last)), Some(lms[0].clone()));
        s.current = Some(lms[0].clone());
        assert_eq!(s.stepped(-1).as_ref(), Some(last));
    }
}
