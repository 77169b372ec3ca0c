//! The open dialog, drawn in egui itself (no GTK or portal needed, so it works wherever the
//! window does).
//!
//! It lists a folder: sub-folders first, then the files Sutura reads (`.nii`, `.nii.gz`,
//! `.hdr`, `.img`, `.tif`, `.tiff`, and landmark projects), each group in natural order (`s2`
//! before `s10`); hidden entries are left out. A double click enters a folder or opens a file; the path field takes a
//! typed path. For a folder of TIFF slices, "Open this folder" opens the folder shown.
//!
//! egui 0.37's built-in fonts cover Latin text but no emoji or pictographs, so the dialog uses
//! words and a trailing `/` where other dialogs draw icons.

use std::cmp::Ordering;
use std::path::{Path, PathBuf};

use eframe::egui::{self, Color32, RichText};

use super::state::DialogKind;
use sutura_core::landmarks::project::FORMAT_NAME;

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
    Open(PathBuf),
    Cancelled,
}

/// Whether Sutura reads a file of this name (by its extension).
#[must_use]
pub fn is_scan_name(name: &str) -> bool {
    let n = name.to_lowercase();
    [".nii", ".nii.gz", ".hdr", ".img", ".tif", ".tiff"]
        .iter()
        .any(|e| n.ends_with(e))
}

/// Whether a file is a landmark project: a `.json` file whose first kilobytes name the
/// project format (other JSON files are not listed).
#[must_use]
pub fn is_project_file(path: &Path) -> bool {
    use std::io::Read;
    let is_json = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("json"));
    if !is_json {
        return false;
    }
    let mut head = Vec::with_capacity(1024);
    std::fs::File::open(path)
        .and_then(|f| f.take(1024).read_to_end(&mut head))
        .is_ok_and(|_| {
            let text = String::from_utf8_lossy(&head);
            let compact: String = text.split_whitespace().collect();
            compact.contains(&format!("\"format\":\"{FORMAT_NAME}\""))
        })
}

/// Compares names with runs of digits by value (`s2` before `s10`), then case-insensitively.
#[must_use]
pub fn natural_cmp(a: &str, b: &str) -> Ordering {
    let (mut x, mut y) = (a.chars().peekable(), b.chars().peekable());
    loop {
        match (x.peek().copied(), y.peek().copied()) {
            (None, None) => return a.cmp(b),
            (None, Some(_)) => return Ordering::Less,
            (Some(_), None) => return Ordering::Greater,
            (Some(c), Some(d)) if c.is_ascii_digit() && d.is_ascii_digit() => {
                let take = |it: &mut std::iter::Peekable<std::str::Chars<'_>>| {
                    let mut s = String::new();
                    while let Some(ch) = it.peek().copied().filter(char::is_ascii_digit) {
                        s.push(ch);
                        it.next();
                    }
                    s
                };
                let (p, q) = (take(&mut x), take(&mut y));
                let (pt, qt) = (p.trim_start_matches('0'), q.trim_start_matches('0'));
                let o = pt.len().cmp(&qt.len()).then_with(|| pt.cmp(qt));
                if o != Ordering::Equal {
                    return o;
                }
            }
            (Some(c), Some(d)) => {
                let o = c.to_lowercase().cmp(d.to_lowercase());
                if o != Ordering::Equal {
                    return o;
                }
                x.next();
                y.next();
            }
        }
    }
}

/// The folders and scan files in `dir`, folders first, each in natural order.
pub fn list(dir: &Path) -> std::io::Result<Vec<Entry>> {
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
        if meta.is_dir() || is_scan_name(&name) || is_project_file(&e.path()) {
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
    selected: Option<usize>,
    path_text: String,
    error: Option<String>,
}

impl FileBrowser {
    /// A dialog showing `dir`.
    #[must_use]
    pub fn new(kind: DialogKind, dir: &Path) -> Self {
        let mut b = Self {
            kind,
            dir: PathBuf::new(),
            entries: Vec::new(),
            selected: None,
            path_text: String::new(),
            error: None,
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
        match list(&dir) {
            Ok(entries) => {
                self.entries = entries;
                self.path_text = dir.display().to_string();
                self.dir = dir;
                self.selected = None;
                self.error = None;
            }
            Err(e) => self.error = Some(format!("{}: {e}", dir.display())),
        }
    }

    fn title(&self) -> &'static str {
        match self.kind {
            DialogKind::ScanFile => "Open a scan file",
            DialogKind::SliceFolder => "Open a folder of TIFF slices",
            DialogKind::Project => "Open a landmark project",
            DialogKind::ExportFolder => "Choose the folder to export into",
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
            DialogKind::SliceFolder | DialogKind::ExportFolder
        )
    }

    /// Draws the dialog; returns how it ended, if it did this frame.
    pub fn show(&mut self, ctx: &egui::Context) -> Option<Outcome> {
        let mut outcome = None;
        let mut go_to: Option<PathBuf> = None;
        let mut open = true;
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
                    if r.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter)) {
                        let p = PathBuf::from(self.path_text.trim());
                        if p.is_dir() {
                            go_to = Some(p);
                        } else if p.is_file() {
                            outcome = Some(Outcome::Open(p));
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
                            let r = ui.selectable_label(self.selected == Some(i), text);
                            if r.clicked() {
                                self.selected = Some(i);
                            }
                            if r.double_clicked() {
                                let p = self.dir.join(&e.name);
                                if e.is_dir {
                                    go_to = Some(p);
                                } else {
                                    outcome = Some(Outcome::Open(p));
                                }
                            }
                        }
                    });
                if let Some(err) = &self.error {
                    ui.label(RichText::new(err).color(Color32::from_rgb(240, 120, 100)));
                }
                ui.separator();
                ui.horizontal(|ui| {
                    let chosen = self.selected.and_then(|i| self.entries.get(i));
                    let can_open = chosen.is_some_and(|e| !e.is_dir || self.picks_folder());
                    if ui
                        .add_enabled(can_open, egui::Button::new("Open"))
                        .clicked()
                        && let Some(e) = chosen
                    {
                        outcome = Some(Outcome::Open(self.dir.join(&e.name)));
                    }
                    let this = if self.kind == DialogKind::ExportFolder {
                        "Use this folder"
                    } else {
                        "Open this folder"
                    };
                    if self.picks_folder()
                        && ui.button(this).on_hover_text("the folder shown").clicked()
                    {
                        outcome = Some(Outcome::Open(self.dir.clone()));
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
    fn natural_order_puts_numbers_by_value() {
        let mut v = vec!["s10.tif", "s2.tif", "S1.tif", "s02b.tif", "a.nii"];
        v.sort_by(|a, b| natural_cmp(a, b));
        assert_eq!(v, ["a.nii", "S1.tif", "s2.tif", "s02b.tif", "s10.tif"]);
    }

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
        let names: Vec<(String, bool)> = list(d.path())
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
