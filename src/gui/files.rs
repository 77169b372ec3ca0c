//! The open dialog, drawn in egui itself (no GTK or portal needed, so it works wherever the
//! window does).
//!
//! It lists a folder: sub-folders first, then the files the dialog is for (scans, landmark
//! projects, or landmark schemes), each group in the library's natural order (`s2` before
//! `s10`); hidden entries are left out. A double click enters a folder or opens a file; the
//! path field (which has the focus) takes a typed path, Enter opens it, Esc cancels. For a
//! folder of TIFF slices, "Open this folder" opens the folder shown. When adding scans, several
//! entries can be ticked at once (Ctrl+click); when saving a project, a name field says the
//! file's name.
//!
//! egui 0.37's built-in fonts cover Latin text but no emoji or pictographs, so the dialog uses
//! words and a trailing `/` where other dialogs draw icons.

use std::path::{Path, PathBuf};

use eframe::egui::{self, Color32, Key, RichText};

use super::command::DialogKind;
use sutura_core::io::names::{is_scan_name, natural_cmp};
use sutura_core::landmarks::project::is_project_file;

/// A listed entry.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Entry {
    pub name: String,
    pub is_dir: bool,
    pub bytes: u64,
}

/// How the dialog ended this frame.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Outcome {
    /// The paths chosen (one, except when adding scans).
    Chose(Vec<PathBuf>),
    Cancelled,
}

/// Which files a dialog of this kind lists besides folders.
fn lists(kind: DialogKind, path: &Path, name: &str) -> bool {
    match kind {
        DialogKind::Scheme => name.to_lowercase().ends_with(".toml"),
        DialogKind::Project | DialogKind::SaveProject => is_project_file(path),
        DialogKind::ExportFolder => false,
        DialogKind::ScanFile | DialogKind::SliceFolder | DialogKind::AddScans => {
            is_scan_name(name) || is_project_file(path)
        }
    }
}

/// The folders and the files a dialog of `kind` is for in `dir`, folders first, each in natural
/// order.
pub fn list(dir: &Path, kind: DialogKind) -> std::io::Result<Vec<Entry>> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir)? {
        let e = e?;
        let name = e.file_name().to_string_lossy().into_owned();
        if name.starts_with('.') {
            continue;
        }
        // follow links: a linked folder is a folder
        let Ok(meta) = std::fs::metadata(e.path()) else {
            continue;
        };
        if meta.is_dir() || lists(kind, &e.path(), &name) {
            out.push(Entry {
                name,
                is_dir: meta.is_dir(),
                bytes: meta.len(),
            });
        }
    }
    out.sort_by(|a, b| {
        b.is_dir
            .cmp(&a.is_dir)
            .then_with(|| natural_cmp(&a.name, &b.name))
    });
    Ok(out)
}

/// The open dialog's state.
pub struct FileBrowser {
    kind: DialogKind,
    dir: PathBuf,
    entries: Vec<Entry>,
    /// Ticked entries (one, except when adding scans).
    selected: Vec<usize>,
    path_text: String,
    /// The new project's file name (saving a project).
    name_text: String,
    error: Option<String>,
    /// The focus goes to the path field when the dialog opens.
    focus: bool,
}

impl FileBrowser {
    /// A dialog showing `dir`.
    #[must_use]
    pub fn new(kind: DialogKind, dir: &Path) -> Self {
        let mut b = Self {
            kind,
            dir: PathBuf::new(),
            entries: Vec::new(),
            selected: Vec::new(),
            path_text: String::new(),
            name_text: if kind == DialogKind::SaveProject {
                "project.json".into()
            } else {
                String::new()
            },
            error: None,
            focus: true,
        };
        b.go(dir);
        b
    }

    /// The folder shown.
    #[must_use]
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    #[must_use]
    pub fn entries(&self) -> &[Entry] {
        &self.entries
    }

    /// Shows `dir` (made absolute); on error keeps the current listing and says why.
    pub fn go(&mut self, dir: &Path) {
        let dir = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
        match list(&dir, self.kind) {
            Ok(entries) => {
                self.entries = entries;
                self.path_text = dir.display().to_string();
                self.dir = dir;
                self.selected.clear();
                self.error = None;
            }
            Err(e) => self.error = Some(format!("{}: {e}", dir.display())),
        }
    }

    /// What "this folder" means for the dialog: the folder itself, or the project file named
    /// in it.
    fn chosen_here(&self) -> Option<Outcome> {
        if self.kind == DialogKind::SaveProject {
            let name = self.name_text.trim();
            if name.is_empty() {
                return None;
            }
            return Some(Outcome::Chose(vec![self.dir.join(name)]));
        }
        Some(Outcome::Chose(vec![self.dir.clone()]))
    }

    fn title(&self) -> &'static str {
        match self.kind {
            DialogKind::ScanFile => "Open a scan file",
            DialogKind::SliceFolder => "Open a folder of TIFF slices",
            DialogKind::Project => "Open a landmark project",
            DialogKind::ExportFolder => "Choose the folder to export into",
            DialogKind::Scheme => "Choose a landmark scheme",
            DialogKind::AddScans => "Add scans as specimens",
            DialogKind::SaveProject => "Save the new project as",
        }
    }

    /// What the dialog is choosing.
    #[must_use]
    pub fn kind(&self) -> DialogKind {
        self.kind
    }

    /// Whether the dialog picks a folder (rather than a file).
    fn picks_folder(&self) -> bool {
        matches!(
            self.kind,
            DialogKind::SliceFolder
                | DialogKind::ExportFolder
                | DialogKind::AddScans
                | DialogKind::SaveProject
        )
    }

    /// Draws the dialog; returns how it ended, if it did this frame.
    #[allow(clippy::too_many_lines)] // reason: one dialog, drawn top to bottom
    pub fn show(&mut self, ctx: &egui::Context) -> Option<Outcome> {
        let mut outcome = None;
        let mut go_to: Option<PathBuf> = None;
        let mut open = true;
        if ctx.input(|i| i.key_pressed(Key::Escape)) {
            return Some(Outcome::Cancelled);
        }
        let focus = std::mem::take(&mut self.focus);
        let multi = self.kind == DialogKind::AddScans;
        egui::Window::new(self.title())
            .open(&mut open)
            .collapsible(false)
            .resizable(false)
            .default_size([560.0, 440.0])
            .anchor(egui::Align2::CENTER_CENTER, egui::Vec2::ZERO)
            .show(ctx, |ui| {
                ui.horizontal(|ui| {
                    if ui.button("Up").on_hover_text("the parent folder").clicked()
                        && let Some(p) = self.dir.parent()
                    {
                        go_to = Some(p.to_path_buf());
                    }
                    let l = ui.label("Folder");
                    let r = ui
                        .add(
                            egui::TextEdit::singleline(&mut self.path_text)
                                .desired_width(f32::INFINITY),
                        )
                        .labelled_by(l.id);
                    if focus {
                        r.request_focus();
                    }
                    if r.lost_focus() && ui.input(|i| i.key_pressed(Key::Enter)) {
                        let p = PathBuf::from(self.path_text.trim());
                        if p.is_dir() && p != self.dir {
                            go_to = Some(p);
                        } else if p.is_dir() && self.picks_folder() {
                            outcome = self.chosen_here();
                        } else if p.is_file() {
                            outcome = Some(Outcome::Chose(vec![p]));
                        } else {
                            self.error = Some(format!("{}: no such file or folder", p.display()));
                        }
                    }
                });
                ui.separator();
                egui::ScrollArea::vertical()
                    .max_height(300.0)
                    .auto_shrink([false, false])
                    .show(ui, |ui| {
                        if self.entries.is_empty() {
                            ui.label(RichText::new("no folders or scans here").weak());
                        }
                        for (i, e) in self.entries.iter().enumerate() {
                            let text = if e.is_dir {
                                RichText::new(format!("{}/", e.name)).strong()
                            } else {
                                RichText::new(format!("{}    {}", e.name, size_text(e.bytes)))
                            };
                            let r = ui.selectable_label(self.selected.contains(&i), text);
                            if r.clicked() {
                                let more = multi && ui.input(|i| i.modifiers.command);
                                if !more {
                                    self.selected.clear();
                                }
                                if let Some(k) = self.selected.iter().position(|s| *s == i) {
                                    self.selected.remove(k);
                                } else {
                                    self.selected.push(i);
                                }
                            }
                            if r.double_clicked() {
                                let p = self.dir.join(&e.name);
                                if e.is_dir
                                    && !(multi
                                        && sutura_core::io::tiff::list_slices(&p, u64::MAX).is_ok())
                                {
                                    go_to = Some(p);
                                } else {
                                    outcome = Some(Outcome::Chose(vec![p]));
                                }
                            }
                        }
                    });
                if let Some(err) = &self.error {
                    ui.label(RichText::new(err).color(Color32::from_rgb(240, 120, 100)));
                }
                if self.kind == DialogKind::SaveProject {
                    ui.horizontal(|ui| {
                        let l = ui.label("File name");
                        let r = ui
                            .add(
                                egui::TextEdit::singleline(&mut self.name_text)
                                    .desired_width(260.0),
                            )
                            .labelled_by(l.id);
                        if r.lost_focus() && ui.input(|i| i.key_pressed(Key::Enter)) {
                            outcome = self.chosen_here();
                        }
                    });
                }
                ui.separator();
                ui.horizontal(|ui| {
                    let chosen: Vec<&Entry> = self
                        .selected
                        .iter()
                        .filter_map(|i| self.entries.get(*i))
                        .collect();
                    let can_open = !chosen.is_empty()
                        && chosen.iter().all(|e| !e.is_dir || self.picks_folder())
                        && self.kind != DialogKind::SaveProject;
                    let open_text = if multi { "Add ticked" } else { "Open" };
                    if ui
                        .add_enabled(can_open, egui::Button::new(open_text))
                        .clicked()
                    {
                        outcome = Some(Outcome::Chose(
                            chosen.iter().map(|e| self.dir.join(&e.name)).collect(),
                        ));
                    }
                    let this = match self.kind {
                        DialogKind::ExportFolder => "Use this folder",
                        DialogKind::AddScans => "Add every scan in this folder",
                        DialogKind::SaveProject => "Save here",
                        _ => "Open this folder",
                    };
                    if self.picks_folder()
                        && ui.button(this).on_hover_text("the folder shown").clicked()
                    {
                        outcome = self.chosen_here();
                    }
                    if ui.button("Cancel").clicked() {
                        outcome = Some(Outcome::Cancelled);
                    }
                });
            });
        if let Some(p) = go_to {
            self.go(&p);
        }
        if !open {
            outcome = Some(Outcome::Cancelled);
        }
        outcome
    }
}

fn size_text(bytes: u64) -> String {
    let b = bytes as f64;
    if b >= 1e9 {
        format!("{:.1} GB", b / 1e9)
    } else if b >= 1e6 {
        format!("{:.1} MB", b / 1e6)
    } else {
        format!("{:.0} kB", (b / 1e3).ceil())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lists_folders_first_then_scans_only() {
        let d = tempfile::tempdir().unwrap();
        for f in [
            "b.nii.gz",
            "a.TIF",
            "notes.txt",
            ".hidden.nii",
            "scan.hdr",
            "scan.img",
            "other.json",
        ] {
            std::fs::write(d.path().join(f), b"x").unwrap();
        }
        std::fs::write(
            d.path().join("p.json"),
            b"{\n  \"format\": \"sutura-project\",\n  \"format_version\": 2\n}",
        )
        .unwrap();
        std::fs::create_dir(d.path().join("slices")).unwrap();
        std::fs::create_dir(d.path().join(".cache")).unwrap();
        let names: Vec<(String, bool)> = list(d.path(), DialogKind::ScanFile)
            .unwrap()
            .into_iter()
            .map(|e| (e.name, e.is_dir))
            .collect();
        assert_eq!(
            names,
            [
                ("slices".to_owned(), true),
                ("a.TIF".to_owned(), false),
                ("b.nii.gz".to_owned(), false),
                ("p.json".to_owned(), false),
                ("scan.hdr".to_owned(), false),
                ("scan.img".to_owned(), false),
            ]
        );
    }

    #[test]
    fn a_missing_folder_keeps_the_listing_and_says_why() {
        let d = tempfile::tempdir().unwrap();
        std::fs::write(d.path().join("x.nii"), b"x").unwrap();
        let mut b = FileBrowser::new(DialogKind::ScanFile, d.path());
        assert_eq!(b.entries().len(), 1);
        b.go(&d.path().join("gone"));
        assert_eq!(b.entries().len(), 1);
        assert!(b.error.as_deref().is_some_and(|e| e.contains("gone")));
    }
}
