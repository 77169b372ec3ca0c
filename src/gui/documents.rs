//! The app's documents: opening scans and projects in the background, starting a project from
//! the new-project form, adding specimens, the unsaved-changes answer, the autosave, and
//! closing. These are the app's own commands' work; the commands themselves are dispatched in
//! [`super::app`].

use std::path::{Path, PathBuf};
use std::sync::Arc;

use eframe::egui;

use super::analysis_view::AnalysisState;
use super::app::{App, UiState};
use super::command::{AnalysisCommand, Answer, AppCommand, DialogKind};
use super::desk::Desk;
use super::loader::{Loading, Outcome};
use super::prompts::{After, Prompt};
use super::state::{Scan, ViewState};
use super::status::Status;
use sutura_core::io::OpenOptions;
use sutura_core::landmarks::project::{AutosaveStatus, Session};

impl App {
    /// What a file dialog chose, by what it was choosing.
    pub(super) fn dialog_chose(&mut self, kind: DialogKind, paths: Vec<PathBuf>) {
        match kind {
            DialogKind::ScanFile | DialogKind::SliceFolder | DialogKind::Project => {
                if let Some(p) = paths.into_iter().next() {
                    self.pending.push(AppCommand::Open(p).into());
                }
            }
            DialogKind::ExportFolder => {
                if let Some(p) = paths.into_iter().next() {
                    self.pending
                        .push(AnalysisCommand::SetExportFolder(p).into());
                }
            }
            DialogKind::Scheme => {
                if let (Some(f), Some(p)) = (&mut self.ui.new_project, paths.into_iter().next()) {
                    f.set_scheme(&p);
                }
            }
            DialogKind::AddScans => {
                if let Some(f) = &mut self.ui.new_project {
                    f.add_scans(paths);
                } else if let Some(d) = &self.desk {
                    let new = super::new_project::specimens_for(
                        &paths,
                        &d.session.project,
                        self.prefs.tiff_voxel_size_mm(),
                    );
                    self.pending.push(AppCommand::AddSpecimens(new).into());
                }
            }
            DialogKind::SaveProject => {
                if let (Some(f), Some(p)) = (&mut self.ui.new_project, paths.into_iter().next()) {
                    f.set_target(&p);
                }
            }
        }
    }

    /// Answers the unsaved-changes question.
    pub(super) fn unsaved(&mut self, answer: Answer) {
        let Some(Prompt::Unsaved(after)) = self.ui.prompt.take() else {
            return;
        };
        let go = match answer {
            Answer::Cancel => false,
            Answer::Save => match self.desk.as_mut().map(|d| d.session.save()) {
                Some(Err(e)) => {
                    self.status = Some(Status::error(e.to_string()));
                    false
                }
                _ => true,
            },
            Answer::Discard => {
                if let Some(d) = &mut self.desk {
                    d.session.discard_changes();
                    d.fix_selection();
                }
                true
            }
        };
        if go {
            match after {
                After::Quit => self.close_window(),
                After::Open(p) => self.pending.push(AppCommand::Open(p).into()),
                After::NewProject => self.pending.push(AppCommand::NewProject.into()),
            }
        }
    }

    /// Makes the project the new-project form describes: writes the project file (with no
    /// specimens yet), opens it, then adds the specimens in the background as the desk's
    /// first undoable step.
    pub(super) fn create_project(&mut self) {
        let Some(f) = &mut self.ui.new_project else {
            return;
        };
        let (path, project, specimens) = match f.build() {
            Ok(x) => x,
            Err(e) => {
                f.error = Some(e);
                return;
            }
        };
        match Session::create(&path, project) {
            Ok(session) => {
                self.ui.new_project = None;
                self.close_project();
                self.desk = Some(Desk::with(session));
                self.prefs.remember(path.clone());
                self.status = Some(Status::info(format!(
                    "started project {}; adding {} specimens",
                    path.display(),
                    specimens.len()
                )));
                if !specimens.is_empty() {
                    self.pending
                        .push(AppCommand::AddSpecimens(specimens).into());
                }
            }
            Err(e) => {
                if let Some(f) = &mut self.ui.new_project {
                    f.error = Some(e.to_string());
                }
            }
        }
    }

    pub(super) fn close_window(&mut self) {
        self.settle_prep();
        if let Some(d) = &self.desk
            && !d.session.is_dirty()
        {
            d.session.remove_autosave();
        }
        self.closing = true;
        if let Some(ctx) = &self.ctx {
            ctx.send_viewport_cmd(egui::ViewportCommand::Close);
        }
    }

    /// Closes the project (its unsaved changes, if any, already answered for).
    pub(super) fn close_project(&mut self) {
        self.desk = None;
        self.ui = UiState {
            column: self.ui.column,
            ..UiState::default()
        };
        self.analysis = AnalysisState::default();
    }

    /// Opens a landmark project: its first specimen's scan starts loading, and a newer
    /// autosave is offered.
    pub(super) fn open_project(&mut self, path: &Path) {
        match Desk::open(path) {
            Ok((desk, status)) => {
                self.close_project();
                let name = desk.name();
                let read_only = desk.session.read_only_why().map(str::to_owned);
                match status {
                    AutosaveStatus::Newer { modified } => {
                        self.ui.prompt = Some(Prompt::Autosave(modified));
                    }
                    AutosaveStatus::Stale => desk.session.remove_autosave(),
                    AutosaveStatus::None => {}
                }
                self.analysis.options = sutura_core::analysis::ProjectAnalysisOptions::for_project(
                    &desk.session.project,
                );
                self.desk = Some(desk);
                self.prefs.remember(path.to_path_buf());
                self.status = Some(match read_only {
                    Some(why) => Status::warning(format!("{name} {why}: read-only here")),
                    None => Status::info(format!("opened project {name}")),
                });
                self.load_specimen();
            }
            Err(e) => self.status = Some(Status::error(e.to_string())),
        }
    }

    /// Starts loading the selected specimen's scan (unless it is the one shown).
    pub(super) fn load_specimen(&mut self) {
        let Some(d) = &self.desk else {
            return;
        };
        let Some(sp) = d.specimen_ref() else {
            return;
        };
        if d.scan_of.as_deref() == Some(sp.id.as_str()) && self.doc.scan.is_some() {
            return;
        }
        if let Some(l) = &self.loading {
            l.cancel();
        }
        self.next_scan_id += 1;
        let wake = self.ctx.clone();
        self.loading = Some(Loading::start_specimen(
            d.session.path(),
            &sp.id,
            sp.scan.clone(),
            self.prefs.budget(),
            self.prefs.store_cache_dir(),
            self.next_scan_id,
            move || {
                if let Some(c) = &wake {
                    c.request_repaint();
                }
            },
        ));
    }

    /// Writes the autosave when it is due, and wakes the app when it will be.
    pub(super) fn autosave_tick(&mut self, ctx: &egui::Context) {
        let Some(d) = &mut self.desk else {
            return;
        };
        if !d.session.autosave_pending() {
            return;
        }
        match d.session.autosave_if_due() {
            Ok(true) => {}
            Ok(false) => ctx.request_repaint_after(d.session.autosave_delay),
            Err(e) => self.status = Some(Status::error(format!("autosave failed: {e}"))),
        }
    }

    pub(super) fn open(&mut self, path: &Path) {
        if let Some(l) = &self.loading {
            l.cancel();
        }
        self.next_scan_id += 1;
        let options = OpenOptions {
            voxel_size_mm: self.prefs.tiff_voxel_size_mm(),
            ..OpenOptions::default()
        };
        let wake = self.ctx.clone();
        self.loading = Some(Loading::start(
            path,
            options,
            self.prefs.budget(),
            self.prefs.store_cache_dir(),
            self.next_scan_id,
            move || {
                if let Some(c) = &wake {
                    c.request_repaint();
                }
            },
        ));
        self.status = None;
    }

    /// Shows a volume already in memory as if it had just been opened from `path` (derived
    /// volumes, tests and the benchmark).
    pub fn open_volume(&mut self, path: PathBuf, volume: sutura_core::volume::Volume) {
        self.next_scan_id += 1;
        self.install(Scan::new(self.next_scan_id, path, volume));
    }

    pub(super) fn install(&mut self, scan: Scan) {
        // the label image belongs to the scan it replaces
        self.settle_prep();
        self.prep = None;
        let help = self.vs.help_open;
        self.vs = ViewState::for_scan(&scan);
        self.vs.help_open = help;
        if let Some(ctx) = &self.ctx {
            ctx.send_viewport_cmd(egui::ViewportCommand::Title(format!(
                "Sutura — {}",
                scan.name()
            )));
        }
        if let Some(d) = &mut self.desk {
            d.scan_of = None;
            d.scan_read_only = false;
        }
        self.doc.scan = Some(Arc::new(scan));
        self.views.clear();
        if let Some(w) = &mut self.workers {
            w.clear();
        }
    }

    pub(super) fn poll_loading(&mut self) {
        let Some(l) = &self.loading else {
            return;
        };
        let Some(outcome) = l.poll() else {
            return;
        };
        let secs = l.started.elapsed().as_secs_f64();
        let path = l.path.clone();
        let specimen = l.specimen.clone();
        self.loading = None;
        match outcome {
            Outcome::Loaded(scan) => {
                let msg = format!(
                    "opened {} in {secs:.1} s ({})",
                    scan.name(),
                    scan.iso.describe()
                );
                self.install(scan);
                if let Some(sp) = specimen {
                    if let Some(d) = &mut self.desk {
                        d.scan_of = Some(sp.clone());
                        d.scan_read_only = false;
                    }
                    if self.status.as_ref().is_none_or(|m| !m.is_error()) {
                        self.status = Some(Status::info(format!("{sp}: {msg}")));
                    }
                } else {
                    self.status = Some(Status::info(msg));
                    self.prefs.remember(path);
                }
            }
            Outcome::Mismatched(scan, why) => {
                if let Some(sp) = specimen {
                    self.ui.prompt = Some(Prompt::Mismatch {
                        specimen: sp,
                        scan: Box::new(scan),
                        why,
                    });
                }
            }
            Outcome::TooLarge { bytes, store } => self.too_large(path, store, specimen, bytes),
            Outcome::Failed(msg) => self.status = Some(Status::error(msg)),
            Outcome::Cancelled => {
                self.status = Some(Status::info(format!(
                    "cancelled opening {}",
                    path.display()
                )));
            }
        }
    }

    /// A scan over the memory budget with no store built for it yet (the loader opens one
    /// that is there): the user is asked whether to build it.
    fn too_large(&mut self, scan: PathBuf, store: PathBuf, specimen: Option<String>, bytes: u64) {
        self.ui.prompt = Some(Prompt::BuildStore {
            scan,
            store,
            bytes,
            budget: self.prefs.budget().bytes,
            specimen,
        });
    }

    /// Builds (or, when it is there, opens) the store `store` of the scan `scan` and shows it;
    /// for a project specimen, with its scan record's checks.
    pub(super) fn build_store(&mut self, scan: &Path, store: &Path, specimen: Option<String>) {
        if let Some(l) = &self.loading {
            l.cancel();
        }
        let record = specimen.as_ref().and_then(|id| {
            let d = self.desk.as_ref()?;
            let sp = d.session.project.specimen(id)?;
            Some((d.session.path().to_path_buf(), id.clone(), sp.scan.clone()))
        });
        if specimen.is_some() && record.is_none() {
            self.status = Some(Status::error(format!(
                "{}: the specimen is no longer in the project",
                specimen.unwrap_or_default()
            )));
            return;
        }
        self.next_scan_id += 1;
        let options = OpenOptions {
            voxel_size_mm: match &record {
                Some((_, _, r)) => r.voxel_size_override(),
                None => self.prefs.tiff_voxel_size_mm(),
            },
            ..OpenOptions::default()
        };
        let wake = self.ctx.clone();
        self.loading = Some(Loading::build_store(
            scan,
            store,
            options,
            self.prefs.budget(),
            self.next_scan_id,
            record,
            move || {
                if let Some(c) = &wake {
                    c.request_repaint();
                }
            },
        ));
        self.status = None;
    }

    /// Takes specimens whose scans finished loading and adds them to the project.
    pub(super) fn poll_adding(&mut self) {
        let Some(a) = &self.adding else {
            return;
        };
        let Some(outcome) = a.poll() else {
            return;
        };
        self.adding = None;
        let Some(d) = &mut self.desk else {
            return;
        };
        let (added, failed) = outcome;
        let mut parts = Vec::new();
        if !added.is_empty() {
            match d.insert_specimens(added) {
                Ok(s) => parts.push(s.text),
                Err(s) => {
                    self.status = Some(s);
                    return;
                }
            }
            self.analysis.stale = self.analysis.result.is_some();
        }
        self.status = Some(if failed.is_empty() {
            Status::info(parts.join("; "))
        } else {
            parts.push(format!("not added: {}", failed.join("; ")));
            Status::error(parts.join("; "))
        });
        self.pending.push(AppCommand::LoadSpecimen.into());
    }
}
