//! A project open for changing: its lock, its undo history, whether it differs from the file,
//! and its autosave. The command line and the workstation both change projects through a
//! [`Session`], so the lock and the save are one rule.
//!
//! Every change goes through [`Session::edit`], which applies an [`Edit`] and keeps the exact
//! inverse it returns; [`Session::undo`] applies that inverse and keeps *its* inverse for
//! [`Session::redo`]. Whether the document differs from the file is decided by comparing it with
//! the copy last read or written, so undoing back to the saved state makes it clean again.
//!
//! The autosave (`NAME.autosave` beside the project) is written atomically once the document has
//! rested for [`Session::autosave_delay`] after a change, and removed when the project is saved
//! or its changes are discarded.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use super::file::{AutosaveStatus, ProjectError, ProjectLock, autosave_path, autosave_status};
use super::{Edit, EditError, Project};

/// How long the document must rest after a change before the autosave is written.
pub const AUTOSAVE_DELAY: Duration = Duration::from_secs(3);
/// How many edits undo reaches back.
pub const UNDO_DEPTH: usize = 500;

/// Why a session refused a change or a save.
#[derive(Debug, thiserror::Error)]
pub enum SessionError {
    /// The project is open read-only (another program holds it, or its folder is read-only).
    #[error("{name} {why}: changes are not allowed here")]
    ReadOnly { name: String, why: String },
    /// The edit broke one of the document's rules; the document is unchanged.
    #[error("cannot {what}: {source}")]
    Edit {
        what: String,
        #[source]
        source: EditError,
    },
    /// Undo or redo could not be replayed (the document changed under it).
    #[error("cannot {verb} {what}: {source}")]
    Replay {
        verb: &'static str,
        what: String,
        #[source]
        source: EditError,
    },
    #[error("{}: its scheme differs from the project's; not recovered", path.display())]
    AutosaveScheme { path: PathBuf },
    #[error(transparent)]
    Project(#[from] ProjectError),
}

/// One undoable step: the edits that reverse it, in the order to apply them, and what it did.
#[derive(Clone, Debug)]
struct Step {
    inverse: Vec<Edit>,
    what: String,
}

/// Applies edits in order and returns their inverses in the order that undoes them; on a
/// failure, undoes the ones applied and returns the failing edit's description and error.
fn apply_all(project: &mut Project, edits: Vec<Edit>) -> Result<Vec<Edit>, (String, EditError)> {
    let mut inverses: Vec<Edit> = Vec::with_capacity(edits.len());
    for e in edits {
        let what = e.describe();
        match e.apply(project) {
            Ok(inv) => inverses.push(inv),
            Err(err) => {
                for inv in inverses.into_iter().rev() {
                    // an inverse of an edit just applied always applies
                    let _ = inv.apply(project);
                }
                return Err((what, err));
            }
        }
    }
    inverses.reverse();
    Ok(inverses)
}

/// Whether the session may change and save the project.
#[derive(Debug)]
enum Access {
    /// The session holds the project's lock.
    Writable(
        #[allow(dead_code, reason = "held for its Drop, which releases the lock")] ProjectLock,
    ),
    /// It does not; `why` reads after the project's name ("is open in another program").
    ReadOnly { why: String },
}

/// An open project.
#[derive(Debug)]
pub struct Session {
    path: PathBuf,
    pub project: Project,
    /// The document as last read from or written to `path`.
    saved: Project,
    undo: Vec<Step>,
    redo: Vec<Step>,
    /// When the document last changed without an autosave since.
    changed_at: Option<Instant>,
    pub autosave_delay: Duration,
    access: Access,
}

impl Session {
    /// Opens a project for the workstation: takes its lock, or opens it read-only when another
    /// program holds it (or its folder cannot be written). Also says whether an autosave newer
    /// than the file lies beside it.
    pub fn open(path: &Path) -> Result<(Self, AutosaveStatus), ProjectError> {
        let path = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
        let access = match ProjectLock::acquire(&path) {
            Ok(l) => Access::Writable(l),
            Err(ProjectError::Busy { .. }) => Access::ReadOnly {
                why: "is open in another program".into(),
            },
            Err(e) => Access::ReadOnly {
                why: format!("cannot be locked for writing ({e})"),
            },
        };
        let project = Project::load(&path)?;
        let status = autosave_status(&path)?;
        Ok((Self::with(path, project, access), status))
    }

    /// Opens a project for a command that changes it: fails at once if another program holds
    /// its lock.
    pub fn open_exclusive(path: &Path) -> Result<Self, ProjectError> {
        let lock = ProjectLock::acquire(path)?;
        let project = Project::load(path)?;
        Ok(Self::with(path.to_owned(), project, Access::Writable(lock)))
    }

    /// Starts a new project file at `path` with `project` (no file may exist there yet): takes
    /// the lock and writes it.
    pub fn create(path: &Path, project: Project) -> Result<Self, ProjectError> {
        let path = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
        if path.exists() {
            return Err(ProjectError::Corrupt {
                path,
                what: "a file of this name already exists; choose another name".into(),
            });
        }
        let lock = ProjectLock::acquire(&path)?;
        project.save(&path)?;
        Ok(Self::with(path, project, Access::Writable(lock)))
    }

    fn with(path: PathBuf, project: Project, access: Access) -> Self {
        Self {
            path,
            saved: project.clone(),
            project,
            undo: Vec::new(),
            redo: Vec::new(),
            changed_at: None,
            autosave_delay: AUTOSAVE_DELAY,
            access,
        }
    }

    /// The project file.
    #[must_use]
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The project's file name.
    #[must_use]
    pub fn name(&self) -> String {
        self.path.file_name().map_or_else(
            || self.path.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        )
    }

    /// Why the project cannot be changed here, if it cannot (a phrase after its name).
    #[must_use]
    pub fn read_only_why(&self) -> Option<&str> {
        match &self.access {
            Access::Writable(_) => None,
            Access::ReadOnly { why } => Some(why),
        }
    }

    #[must_use]
    pub fn is_read_only(&self) -> bool {
        self.read_only_why().is_some()
    }

    fn writable(&self) -> Result<(), SessionError> {
        match self.read_only_why() {
            None => Ok(()),
            Some(why) => Err(SessionError::ReadOnly {
                name: self.name(),
                why: why.to_owned(),
            }),
        }
    }

    /// Whether the document differs from the file.
    #[must_use]
    pub fn is_dirty(&self) -> bool {
        self.project != self.saved
    }

    /// Applies an edit; on success it can be undone.
    pub fn edit(&mut self, edit: Edit) -> Result<(), SessionError> {
        let what = edit.describe();
        self.edit_all(vec![edit], what)
    }

    /// Applies several edits as one step (one undo undoes them all); if one fails, those
    /// before it are undone and the document is unchanged.
    pub fn edit_all(&mut self, edits: Vec<Edit>, what: String) -> Result<(), SessionError> {
        self.writable()?;
        let inverse =
            apply_all(&mut self.project, edits).map_err(|(e, source)| SessionError::Edit {
                what: if e.is_empty() { what.clone() } else { e },
                source,
            })?;
        self.undo.push(Step { inverse, what });
        if self.undo.len() > UNDO_DEPTH {
            self.undo.remove(0);
        }
        self.redo.clear();
        self.touched();
        Ok(())
    }

    /// Undoes the last edit; returns what it was (`None`: nothing to undo).
    pub fn undo(&mut self) -> Option<Result<String, SessionError>> {
        let step = self.undo.pop()?;
        Some(self.replay(step, true))
    }

    /// Redoes the last undone edit; returns what it was (`None`: nothing to redo).
    pub fn redo(&mut self) -> Option<Result<String, SessionError>> {
        let step = self.redo.pop()?;
        Some(self.replay(step, false))
    }

    fn replay(&mut self, step: Step, undoing: bool) -> Result<String, SessionError> {
        let Step { inverse, what } = step;
        match apply_all(&mut self.project, inverse).map_err(|(_, e)| e) {
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
                Ok(what)
            }
            Err(source) => Err(SessionError::Replay {
                verb: if undoing { "undo" } else { "redo" },
                what,
                source,
            }),
        }
    }

    /// What undo would do next.
    #[must_use]
    pub fn next_undo(&self) -> Option<&str> {
        self.undo.last().map(|s| s.what.as_str())
    }

    /// What redo would do next.
    #[must_use]
    pub fn next_redo(&self) -> Option<&str> {
        self.redo.last().map(|s| s.what.as_str())
    }

    fn touched(&mut self) {
        self.changed_at = Some(Instant::now());
    }

    /// Saves the project (atomically, keeping `NAME.bak`) and removes the autosave.
    pub fn save(&mut self) -> Result<(), SessionError> {
        self.writable()?;
        self.project.save(&self.path)?;
        self.saved = self.project.clone();
        self.changed_at = None;
        self.remove_autosave();
        Ok(())
    }

    /// Writes the autosave if the document has rested long enough since its last change.
    /// Returns whether it wrote.
    pub fn autosave_if_due(&mut self) -> Result<bool, SessionError> {
        match self.changed_at {
            Some(t) if t.elapsed() >= self.autosave_delay => self.autosave().map(|()| true),
            _ => Ok(false),
        }
    }

    /// Writes the autosave now if there are unsaved changes (or removes a stale one).
    pub fn autosave(&mut self) -> Result<(), SessionError> {
        if self.is_read_only() {
            return Ok(());
        }
        self.changed_at = None;
        if self.is_dirty() {
            self.project.save_autosave(&self.path)?;
        } else {
            self.remove_autosave();
        }
        Ok(())
    }

    /// Whether a change waits for its autosave.
    #[must_use]
    pub fn autosave_pending(&self) -> bool {
        self.changed_at.is_some()
    }

    /// Takes the autosave's document as the current one (unsaved; the undo history restarts).
    pub fn recover_autosave(&mut self) -> Result<(), SessionError> {
        let auto = autosave_path(&self.path);
        let recovered = Project::load(&auto)?;
        if recovered.scheme_copy() != self.project.scheme_copy() {
            return Err(SessionError::AutosaveScheme { path: auto });
        }
        self.project = recovered;
        self.undo.clear();
        self.redo.clear();
        Ok(())
    }

    /// Drops unsaved changes: back to the file, no autosave.
    pub fn discard_changes(&mut self) {
        self.project = self.saved.clone();
        self.undo.clear();
        self.redo.clear();
        self.changed_at = None;
        self.remove_autosave();
    }

    /// Removes the autosave file (if any).
    pub fn remove_autosave(&self) {
        if !self.is_read_only() {
            let _ = std::fs::remove_file(autosave_path(&self.path));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::landmarks::project::{Method, Timestamp, Trial};

    fn copy_sample(dir: &Path) -> PathBuf {
        let src =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../sample_volumes/sample_project.json");
        let dst = dir.join("p.json");
        std::fs::copy(src, &dst).unwrap();
        dst
    }

    fn add_trial(s: &mut Session, specimen: &str) -> String {
        let id = s.project.specimen(specimen).unwrap().next_trial_id();
        s.edit(Edit::AddTrial {
            specimen: specimen.into(),
            trial: Box::new(Trial::new(&id, "ana", Timestamp::now())),
            index: None,
        })
        .unwrap();
        id
    }

    fn place(s: &mut Session, specimen: &str, trial: &str, lm: &str, p: [f64; 3]) {
        s.edit(Edit::SetLandmark {
            specimen: specimen.into(),
            trial: trial.into(),
            landmark: lm.into(),
            position_mm: p,
            method: Method::Slice,
            pick: None,
            at: Timestamp::now(),
        })
        .unwrap();
    }

    #[test]
    fn undo_and_redo_walk_the_history_and_dirtiness_follows_the_file() {
        let d = tempfile::tempdir().unwrap();
        let (mut s, status) = Session::open(&copy_sample(d.path())).unwrap();
        assert_eq!(status, AutosaveStatus::None);
        let before = s.project.clone();
        let t = add_trial(&mut s, "HDC-001");
        assert_eq!(t, "2");
        place(&mut s, "HDC-001", &t, "snout_tip", [1.0, 2.0, 3.0]);
        assert!(s.is_dirty());
        assert_eq!(
            s.next_undo(),
            Some("set landmark snout_tip of HDC-001 trial 2")
        );
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
        place(&mut s, "HDC-001", &t, "crest_top", [0.0; 3]);
        assert!(s.redo().is_none());
    }

    #[test]
    fn autosave_is_written_after_the_delay_and_removed_by_save() {
        let d = tempfile::tempdir().unwrap();
        let path = copy_sample(d.path());
        let (mut s, _) = Session::open(&path).unwrap();
        s.autosave_delay = Duration::from_millis(30);
        add_trial(&mut s, "HDC-001");
        assert!(!s.autosave_if_due().unwrap(), "not yet");
        std::thread::sleep(Duration::from_millis(40));
        assert!(s.autosave_if_due().unwrap());
        assert!(matches!(
            autosave_status(s.path()).unwrap(),
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
    fn a_second_session_on_the_same_file_is_read_only_and_a_command_is_refused() {
        let d = tempfile::tempdir().unwrap();
        let path = copy_sample(d.path());
        let (_first, _) = Session::open(&path).unwrap();
        let (mut second, _) = Session::open(&path).unwrap();
        assert!(second.is_read_only());
        let err = second
            .edit(Edit::RemoveSpecimen {
                specimen: "HDC-001".into(),
            })
            .unwrap_err();
        assert!(err.to_string().contains("another program"), "{err}");
        assert!(matches!(
            Session::open_exclusive(&path),
            Err(ProjectError::Busy { .. })
        ));
    }

    #[test]
    fn several_edits_undo_as_one_and_a_failure_changes_nothing() {
        let d = tempfile::tempdir().unwrap();
        let (mut s, _) = Session::open(&copy_sample(d.path())).unwrap();
        let before = s.project.clone();
        let t = s.project.specimen("HDC-001").unwrap().next_trial_id();
        let add = Edit::AddTrial {
            specimen: "HDC-001".into(),
            trial: Box::new(Trial::new(&t, "ana", Timestamp::now())),
            index: None,
        };
        let place = Edit::SetLandmark {
            specimen: "HDC-001".into(),
            trial: t.clone(),
            landmark: "snout_tip".into(),
            position_mm: [1.0, 2.0, 3.0],
            method: Method::Typed,
            pick: None,
            at: Timestamp::now(),
        };
        let bad = Edit::SetNote {
            specimen: "HDC-001".into(),
            trial: t.clone(),
            landmark: "no_such_landmark".into(),
            note: None,
        };
        let err = s
            .edit_all(vec![add.clone(), place.clone(), bad], "three".into())
            .unwrap_err();
        assert!(err.to_string().contains("no_such_landmark"), "{err}");
        assert_eq!(s.project, before);
        s.edit_all(vec![add, place], "trial and landmark".into())
            .unwrap();
        assert_eq!(s.next_undo(), Some("trial and landmark"));
        s.undo().unwrap().unwrap();
        assert_eq!(s.project, before);
        s.redo().unwrap().unwrap();
        assert!(s.project.specimen("HDC-001").unwrap().trial(&t).is_some());
    }

    #[test]
    fn create_refuses_an_existing_file() {
        let d = tempfile::tempdir().unwrap();
        let path = copy_sample(d.path());
        let project = Project::load(&path).unwrap();
        assert!(Session::create(&path, project.clone()).is_err());
        let new = d.path().join("new.json");
        let s = Session::create(&new, project.clone()).unwrap();
        assert!(!s.is_dirty());
        assert_eq!(Project::load(&new).unwrap(), project);
    }

    #[test]
    fn next_trial_id_follows_the_largest_number() {
        let d = tempfile::tempdir().unwrap();
        let (mut s, _) = Session::open(&copy_sample(d.path())).unwrap();
        // HDC-001 has trial 1: add 2 and 3, remove 2 → {1, 3}: the next is 4, not 2
        add_trial(&mut s, "HDC-001");
        add_trial(&mut s, "HDC-001");
        s.edit(Edit::RemoveTrial {
            specimen: "HDC-001".into(),
            trial: "2".into(),
        })
        .unwrap();
        assert_eq!(s.project.specimen("HDC-001").unwrap().next_trial_id(), "4");
    }
}
