//! Starting a project in the window: a landmark scheme (a file, or the bundled example), scans
//! (files and folders of slices, several at once, by typing, by the file dialog or by dropping
//! them on the window), each with a specimen id proposed from its name and a voxel size where
//! the scan lacks one (the form shows what the file says), groups for every specimen, and where
//! to save the project. Each scan is opened in the background as soon as it is listed, to say
//! what it records; the project is made by the library's rules
//! ([`project_from_scheme_file`], [`NewSpecimen`]), as `sutura project new` makes it.
//!
//! Keys: the "save as" field has the focus when the form opens; Enter there moves to the scans
//! field; Enter in the scans field adds what was typed (a scan, or every scan in a folder), and
//! on an empty field makes the project; Esc cancels.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::sync::mpsc::{Receiver, Sender, channel};
use std::sync::{Mutex, PoisonError};

use eframe::egui::{self, Color32, Key, RichText};

use super::command::{AppCommand, Command, DialogKind};
use sutura_core::geometry::{VoxelSizeMm, format_length_mm};
use sutura_core::io;
use sutura_core::landmarks::Project;
use sutura_core::landmarks::project::create::{
    FileVoxelSize, NewSpecimen, parse_group, probe_scan, project_from_scheme_file,
};
use sutura_core::landmarks::scheme::{Scheme, is_valid_id};

/// What opening a listed scan found.
#[derive(Clone, Debug, PartialEq)]
pub enum Probe {
    Pending,
    Read {
        dims: [usize; 3],
        voxel: FileVoxelSize,
    },
    Failed(String),
}

/// One scan in the form.
#[derive(Clone, Debug, PartialEq)]
pub struct ScanRow {
    pub path: PathBuf,
    pub id: String,
    /// A voxel size typed for it (`36um` or `36um,36um,50um`); empty: the file's own.
    pub voxel_text: String,
    pub probe: Probe,
}

/// The form's state while it is open.
pub struct NewProjectForm {
    pub scheme_text: String,
    pub scans: Vec<ScanRow>,
    pub add_text: String,
    pub target_text: String,
    /// `KEY=VALUE` groups given to every specimen, comma-separated.
    pub groups_text: String,
    /// Why the project could not be made.
    pub error: Option<String>,
    default_voxel: Option<[f64; 3]>,
    probe_tx: Sender<PathBuf>,
    probe_rx: Mutex<Receiver<(PathBuf, Probe)>>,
    /// Ask for the focus on this field next frame.
    focus: Option<&'static str>,
}

impl NewProjectForm {
    /// An empty form; `scheme` is proposed (the bundled example), `default_voxel` is typed for
    /// scans that record no full voxel size (the preference for TIFF scans); `wake` repaints the
    /// window when a scan has been read.
    pub fn new(
        scheme: Option<PathBuf>,
        default_voxel: Option<[f64; 3]>,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let (probe_tx, jobs) = channel::<PathBuf>();
        let (done_tx, probe_rx) = channel();
        let _ = std::thread::Builder::new()
            .name("sutura-probe".into())
            .spawn(move || {
                // the header only: a scan of any size is listed at once
                for path in jobs {
                    let probe = match probe_scan(&path) {
                        Ok((dims, voxel)) => Probe::Read { dims, voxel },
                        Err(e) => Probe::Failed(e.to_string()),
                    };
                    if done_tx.send((path, probe)).is_err() {
                        return;
                    }
                    wake();
                }
            });
        Self {
            scheme_text: scheme.map(|p| p.display().to_string()).unwrap_or_default(),
            scans: Vec::new(),
            add_text: String::new(),
            target_text: String::new(),
            groups_text: String::new(),
            error: None,
            default_voxel,
            probe_tx,
            probe_rx: Mutex::new(probe_rx),
            focus: Some("target"),
        }
    }

    /// Takes the scans read since the last frame.
    pub fn poll(&mut self) {
        let rx = self.probe_rx.lock().unwrap_or_else(PoisonError::into_inner);
        while let Ok((path, probe)) = rx.try_recv() {
            for r in self.scans.iter_mut().filter(|r| r.path == path) {
                if let Probe::Read { voxel, .. } = &probe
                    && !voxel.complete
                    && r.voxel_text.is_empty()
                    && let Some(v) = self.default_voxel
                {
                    r.voxel_text = VoxelSizeMm(v).to_text();
                }
                r.probe = probe.clone();
            }
        }
    }

    /// Whether every listed scan has been read.
    #[must_use]
    pub fn all_read(&self) -> bool {
        self.scans.iter().all(|r| r.probe != Probe::Pending)
    }

    pub fn set_scheme(&mut self, p: &Path) {
        self.scheme_text = p.display().to_string();
    }

    pub fn set_target(&mut self, p: &Path) {
        self.target_text = p.display().to_string();
    }

    /// Lists scans: a scan file or a folder of slices is one scan; a folder holding scans
    /// adds each of them. Ids are proposed from the names, unique within the form.
    pub fn add_scans(&mut self, paths: Vec<PathBuf>) {
        for p in paths {
            let expanded = if p.is_dir() && !is_one_scan(&p) {
                io::names::scans_in(&p).unwrap_or_default()
            } else {
                vec![p]
            };
            for scan in expanded {
                if self.scans.iter().any(|r| r.path == scan) {
                    continue;
                }
                let taken: BTreeSet<String> = self.scans.iter().map(|r| r.id.clone()).collect();
                let id = unique_id(&io::names::specimen_id_from_scan(&scan), &taken);
                let _ = self.probe_tx.send(scan.clone());
                self.scans.push(ScanRow {
                    path: scan,
                    id,
                    voxel_text: String::new(),
                    probe: Probe::Pending,
                });
            }
        }
    }

    /// The project file, the empty project and the specimens to add, or why not.
    pub fn build(&self) -> Result<(PathBuf, Project, Vec<NewSpecimen>), String> {
        let scheme = PathBuf::from(self.scheme_text.trim());
        if self.scheme_text.trim().is_empty() {
            return Err("choose a landmark scheme (or use the bundled example)".into());
        }
        let mut target = PathBuf::from(self.target_text.trim());
        if self.target_text.trim().is_empty() {
            return Err("say where to save the project (a .json file)".into());
        }
        if target.extension().is_none() {
            target.set_extension("json");
        }
        if target.exists() {
            return Err(format!(
                "{} already exists: choose another name",
                target.display()
            ));
        }
        if let Some(dir) = target.parent().filter(|d| !d.as_os_str().is_empty())
            && !dir.is_dir()
        {
            return Err(format!("{}: no such folder", dir.display()));
        }
        let project = project_from_scheme_file(&scheme, &target).map_err(|e| e.to_string())?;
        let mut groups = BTreeMap::new();
        for g in self
            .groups_text
            .split(',')
            .map(str::trim)
            .filter(|g| !g.is_empty())
        {
            let (k, v) = parse_group(g).map_err(|e| e.to_string())?;
            if let Some(v) = v {
                groups.insert(k, v);
            }
        }
        let mut seen = BTreeSet::new();
        let mut specimens = Vec::new();
        for r in &self.scans {
            let id = r.id.trim().to_owned();
            if !is_valid_id(&id) {
                return Err(format!(
                    "{}: '{id}' is not a valid specimen id (1-64 letters, digits, _ . -)",
                    r.path.display()
                ));
            }
            if !seen.insert(id.clone()) {
                return Err(format!("two specimens are called {id}"));
            }
            let voxel = VoxelSizeMm::parse_optional(&r.voxel_text)
                .map_err(|e| format!("{id}: {e}"))?
                .map(|v| v.0);
            match &r.probe {
                Probe::Pending => return Err(format!("{id}: still reading the scan")),
                Probe::Failed(e) => return Err(format!("{id}: {e}")),
                Probe::Read { voxel: v, .. } if !v.complete && voxel.is_none() => {
                    return Err(format!(
                        "{id}: the scan records no full voxel size ({}); type one, e.g. 36um or 36um,36um,50um",
                        v.note
                    ));
                }
                Probe::Read { .. } => {}
            }
            specimens.push(NewSpecimen {
                scan: r.path.clone(),
                id,
                voxel_size_mm: voxel,
                groups: groups.clone(),
            });
        }
        Ok((target, project, specimens))
    }
}

fn unique_id(base: &str, taken: &BTreeSet<String>) -> String {
    if !taken.contains(base) {
        return base.to_owned();
    }
    // among taken.len() + 1 candidates one is free
    (2..=taken.len() + 2)
        .map(|n| format!("{base}_{n}"))
        .find(|c| !taken.contains(c))
        .expect("a free id")
}

/// New specimens for scans added to an open project: ids proposed from the names, unique
/// against the project's; TIFF scans get the preferred voxel size, if any.
#[must_use]
pub fn specimens_for(
    paths: &[PathBuf],
    project: &Project,
    tiff_voxel: Option<[f64; 3]>,
) -> Vec<NewSpecimen> {
    let mut taken: BTreeSet<String> = project.specimens().iter().map(|s| s.id.clone()).collect();
    let mut out = Vec::new();
    for p in paths {
        let scans = if p.is_dir() && !is_one_scan(p) {
            io::names::scans_in(p).unwrap_or_default()
        } else {
            vec![p.clone()]
        };
        for scan in scans {
            let mut n = NewSpecimen::for_scan(&scan);
            n.id = unique_id(&n.id, &taken);
            taken.insert(n.id.clone());
            if io::detect(&scan).is_ok_and(|f| !f.records_placement()) {
                n.voxel_size_mm = tiff_voxel;
            }
            out.push(n);
        }
    }
    out
}

/// Whether a folder is one scan (TIFF or DICOM slices) rather than a folder of scans.
fn is_one_scan(dir: &Path) -> bool {
    io::tiff::list_slices(dir, u64::MAX).is_ok()
        || io::dicom::dicom_files(dir, u64::MAX).is_ok_and(|f| !f.is_empty())
}

fn scheme_summary(path: &Path) -> Result<String, String> {
    let (s, _) = Scheme::load(path).map_err(|e| e.to_string())?;
    Ok(format!(
        "{}: {} landmarks, {} curves, {} measurements",
        s.name,
        s.landmarks.len(),
        s.curves.len(),
        s.measurements.len()
    ))
}

/// Draws the form; returns the commands it sends.
#[allow(clippy::too_many_lines)] // reason: one form, read top to bottom
pub fn form_ui(ctx: &egui::Context, f: &mut NewProjectForm) -> Vec<Command> {
    let mut out: Vec<Command> = Vec::new();
    let escape = ctx.input(|i| i.key_pressed(Key::Escape));
    if escape {
        out.push(AppCommand::CancelNewProject.into());
        return out;
    }
    let focus = f.focus.take();
    let mut open = true;
    egui::Window::new("New project")
        .open(&mut open)
        .collapsible(false)
        .resizable(true)
        .default_width(640.0)
        .anchor(egui::Align2::CENTER_CENTER, egui::Vec2::ZERO)
        .show(ctx, |ui| {
            ui.label(RichText::new("1. Landmark scheme").strong());
            ui.horizontal(|ui| {
                ui.add(
                    egui::TextEdit::singleline(&mut f.scheme_text)
                        .hint_text("scheme file (.toml)")
                        .desired_width(400.0),
                );
                if ui.button("Choose…").clicked() {
                    out.push(AppCommand::ShowDialog(DialogKind::Scheme).into());
                }
                if let Some(p) = super::sample_scheme()
                    && ui
                        .button("Bundled example")
                        .on_hover_text("the synthetic skull scheme of the sample specimens")
                        .clicked()
                {
                    f.set_scheme(&p);
                }
            });
            if !f.scheme_text.trim().is_empty() {
                match scheme_summary(Path::new(f.scheme_text.trim())) {
                    Ok(s) => ui.label(RichText::new(s).weak()),
                    Err(e) => ui.label(RichText::new(e).color(Color32::from_rgb(240, 120, 100))),
                };
            }
            ui.add_space(6.0);
            ui.label(RichText::new("2. Save the project as").strong());
            ui.horizontal(|ui| {
                let r = ui.add(
                    egui::TextEdit::singleline(&mut f.target_text)
                        .hint_text("folder/name.json")
                        .desired_width(400.0),
                );
                if focus == Some("target") {
                    r.request_focus();
                }
                if r.lost_focus() && ui.input(|i| i.key_pressed(Key::Enter)) {
                    f.focus = Some("add");
                }
                if ui.button("Choose…").clicked() {
                    out.push(AppCommand::ShowDialog(DialogKind::SaveProject).into());
                }
            });
            ui.add_space(6.0);
            ui.label(RichText::new("3. Scans (one specimen each)").strong());
            ui.horizontal(|ui| {
                let r = ui.add(
                    egui::TextEdit::singleline(&mut f.add_text)
                        .hint_text("a scan, a folder of slices, or a folder of scans; Enter adds")
                        .desired_width(400.0),
                );
                if focus == Some("add") {
                    r.request_focus();
                }
                if r.lost_focus() && ui.input(|i| i.key_pressed(Key::Enter)) {
                    let t = f.add_text.trim().to_owned();
                    if t.is_empty() {
                        out.push(AppCommand::CreateProject.into());
                    } else {
                        let p = PathBuf::from(&t);
                        if p.exists() {
                            f.add_scans(vec![p]);
                            f.add_text.clear();
                            f.error = None;
                        } else {
                            f.error = Some(format!("{t}: no such file or folder"));
                        }
                        f.focus = Some("add");
                    }
                }
                if ui.button("Add scans…").clicked() {
                    out.push(AppCommand::ShowDialog(DialogKind::AddScans).into());
                }
            });
            ui.label(RichText::new("or drop scans on the window").small().weak());
            let mut remove = None;
            egui::ScrollArea::vertical()
                .max_height(260.0)
                .show(ui, |ui| {
                    egui::Grid::new("new_project_scans")
                        .num_columns(5)
                        .striped(true)
                        .spacing([8.0, 3.0])
                        .show(ui, |ui| {
                            if !f.scans.is_empty() {
                                for h in ["specimen id", "scan", "the file says", "voxel size", ""] {
                                    ui.label(RichText::new(h).weak());
                                }
                                ui.end_row();
                            }
                            for (i, r) in f.scans.iter_mut().enumerate() {
                                ui.add(egui::TextEdit::singleline(&mut r.id).desired_width(110.0));
                                let name = r.path.file_name().map_or_else(
                                    || r.path.display().to_string(),
                                    |n| n.to_string_lossy().into_owned(),
                                );
                                ui.label(name).on_hover_text(r.path.display().to_string());
                                match &r.probe {
                                    Probe::Pending => {
                                        ui.horizontal(|ui| {
                                            ui.spinner();
                                            ui.label("reading");
                                        });
                                    }
                                    Probe::Failed(e) => {
                                        ui.label(
                                            RichText::new("cannot read")
                                                .color(Color32::from_rgb(240, 120, 100)),
                                        )
                                        .on_hover_text(e.as_str());
                                    }
                                    Probe::Read { dims, voxel } => {
                                        let sp = voxel.voxel_size_mm;
                                        let text = format!(
                                            "{}×{}×{}, {} × {} × {}{}",
                                            dims[0],
                                            dims[1],
                                            dims[2],
                                            format_length_mm(sp[0]),
                                            format_length_mm(sp[1]),
                                            format_length_mm(sp[2]),
                                            if voxel.complete { "" } else { " (incomplete)" }
                                        );
                                        let colour = if voxel.complete {
                                            Color32::from_gray(200)
                                        } else {
                                            Color32::from_rgb(236, 190, 84)
                                        };
                                        ui.label(RichText::new(text).color(colour).small())
                                            .on_hover_text(&voxel.note);
                                    }
                                }
                                let needs = matches!(&r.probe, Probe::Read { voxel, .. } if !voxel.complete);
                                ui.add(
                                    egui::TextEdit::singleline(&mut r.voxel_text)
                                        .hint_text(if needs { "needed" } else { "from the file" })
                                        .desired_width(130.0),
                                );
                                if ui.small_button("Remove").clicked() {
                                    remove = Some(i);
                                }
                                ui.end_row();
                            }
                        });
                });
            if let Some(i) = remove {
                f.scans.remove(i);
            }
            ui.add_space(6.0);
            ui.horizontal(|ui| {
                ui.label("Groups for every specimen");
                ui.add(
                    egui::TextEdit::singleline(&mut f.groups_text)
                        .hint_text("KEY=VALUE, … (optional; edit per specimen later)")
                        .desired_width(300.0),
                );
            });
            if let Some(e) = &f.error {
                ui.label(RichText::new(e).color(Color32::from_rgb(240, 120, 100)));
            }
            ui.separator();
            ui.horizontal(|ui| {
                let ready = f.all_read();
                if ui
                    .add_enabled(ready, egui::Button::new(RichText::new("Make project").strong()))
                    .on_hover_text("writes the project file and adds the specimens")
                    .clicked()
                {
                    out.push(AppCommand::CreateProject.into());
                }
                if ui.button("Cancel").clicked() {
                    out.push(AppCommand::CancelNewProject.into());
                }
                ui.label(
                    RichText::new(format!(
                        "{} scans{}",
                        f.scans.len(),
                        if ready { "" } else { " (reading…)" }
                    ))
                    .weak(),
                );
            });
        });
    if !open {
        out.push(AppCommand::CancelNewProject.into());
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_made_unique() {
        let taken: BTreeSet<String> = ["a".to_owned(), "a_2".to_owned()].into();
        assert_eq!(unique_id("a", &taken), "a_3");
        assert_eq!(unique_id("b", &taken), "b");
    }

    #[test]
    fn a_folder_of_scans_adds_each_and_the_form_builds_the_specimens() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes");
        let mut f = NewProjectForm::new(Some(root.join("scheme.toml")), None, || {});
        f.add_scans(vec![root.clone()]);
        assert_eq!(f.scans.len(), 10, "ten sample scans");
        assert_eq!(f.scans[0].id, "HDC-001");
        let t0 = std::time::Instant::now();
        while !f.all_read() {
            assert!(t0.elapsed().as_secs() < 120, "reading the scans");
            std::thread::sleep(std::time::Duration::from_millis(20));
            f.poll();
        }
        assert!(f.build().unwrap_err().contains("where to save"));
        let d = tempfile::tempdir().unwrap();
        f.target_text = d.path().join("mine").display().to_string();
        f.groups_text = "locality=Harrowdene Clay".into();
        let (target, project, specimens) = f.build().unwrap();
        assert_eq!(target.extension().unwrap(), "json");
        assert_eq!(project.specimens().len(), 0);
        assert_eq!(specimens.len(), 10);
        assert_eq!(specimens[3].groups["locality"], "Harrowdene Clay");
    }
}
