//! The panels around the views: the top bar, the controls column, the status line, the
//! loading card and the help overlay. Each reads the state and returns commands; none
//! changes the document or the view state itself.

use eframe::egui::{self, Color32, RichText, Ui};

use super::loader::Loading;
use super::state::{
    Command, DialogKind, Document, Preferences, Scan, ViewId, ViewState, VolumeMode, Workspace,
};
use super::view::{colour32, format_value, hover_text};
use sutura_core::geometry::format_length_mm;
use sutura_core::render::{ColourMap, WindowLevel};

/// Every keyboard shortcut, as the help overlay lists it (the app's `shortcuts` handles them).
pub const SHORTCUTS: &[(&str, &str)] = &[
    ("F1  or  H", "show or hide this help"),
    ("Ctrl+O", "open a scan file"),
    ("Ctrl+Shift+O", "open a folder of TIFF slices"),
    ("Esc", "close help · cancel loading"),
    (
        "1 2 3 4 5",
        "put the i, j, k, oblique or 3D view on the stage",
    ),
    ("Tab  /  Shift+Tab", "next / previous view on the stage"),
    ("Up / Down", "next / previous slice (3D: elevation)"),
    ("Page Up / Page Down", "ten slices forward / back"),
    ("Left / Right", "oblique: turn the plane · 3D: orbit"),
    ("+  /  -", "zoom the stage view in / out"),
    ("R  /  Shift+R", "reset the stage view / every view"),
    ("W", "reset the window to the scan's range"),
    ("C", "crosshair on / off"),
    ("B", "scale bar on / off"),
    ("M", "3D: surface or projection"),
    ("[  ]", "3D: surface threshold down / up"),
    (
        "Ctrl+Q",
        "quit (asks first if the project has unsaved changes)",
    ),
    (
        "P",
        "placing on / off: a click on the stage places the current landmark",
    ),
    ("N  /  Shift+N", "next / previous landmark"),
    ("X", "mark the current landmark missing"),
    ("Delete", "clear the current landmark"),
    ("G", "move the crosshair to the current landmark"),
    ("S", "snap surface landmarks to the boundary on / off"),
    ("L", "landmark labels on / off"),
    (
        "T",
        "trace the next curve segment (after the last: back to landmarks)",
    ),
    ("Ctrl+T", "new trial of the specimen"),
    ("Ctrl+Z", "undo"),
    ("Ctrl+Shift+Z  or  Ctrl+Y", "redo"),
    ("Ctrl+S", "save the project"),
    ("A", "analysis workspace / back to digitising"),
];

/// What the pointer does, for the help overlay.
pub const POINTER: &[(&str, &str)] = &[
    ("left button", "plane views: move the crosshair · 3D: orbit"),
    ("Ctrl + left (oblique)", "turn the oblique plane"),
    ("middle, or Shift + left", "pan"),
    (
        "right button",
        "window/level: sideways = width, up/down = brightness",
    ),
    ("wheel", "plane views: slices · 3D: zoom"),
    ("Ctrl + wheel", "zoom about the pointer"),
    ("double click", "reset the view"),
    ("click a small view", "put it on the stage"),
    ("drop a file", "open it (a scan or a project)"),
    (
        "placing: click",
        "place the current landmark (3D view: on the surface)",
    ),
    ("placing: drag a mark", "move a placed landmark"),
    (
        "placing: click a mark",
        "make that landmark the current one",
    ),
];

/// The top bar: the project and scan menus, the workspace and stage selectors, and help.
#[allow(clippy::too_many_lines)] // reason: the bar's menus and selectors, left to right
pub fn top_bar_ui(
    ui: &mut Ui,
    doc: &Document,
    prefs: &Preferences,
    workspace: Workspace,
) -> Option<Command> {
    let mut cmd = None;
    egui::MenuBar::new().ui(ui, |ui| {
        ui.menu_button("Project", |ui| {
            if ui.button("Open project…").clicked() {
                cmd = Some(Command::ShowOpenDialog(DialogKind::Project));
            }
            let s = doc.session.as_ref();
            if ui
                .add_enabled(
                    s.is_some_and(|s| s.is_dirty() && !s.read_only),
                    egui::Button::new("Save").shortcut_text("Ctrl+S"),
                )
                .clicked()
            {
                cmd = Some(Command::Save);
            }
            ui.separator();
            let undo = s.and_then(|s| s.next_undo()).map(|w| format!("Undo {w}"));
            if ui
                .add_enabled(
                    undo.is_some(),
                    egui::Button::new(undo.unwrap_or_else(|| "Undo".into()))
                        .shortcut_text("Ctrl+Z"),
                )
                .clicked()
            {
                cmd = Some(Command::Undo);
            }
            let redo = s.and_then(|s| s.next_redo()).map(|w| format!("Redo {w}"));
            if ui
                .add_enabled(
                    redo.is_some(),
                    egui::Button::new(redo.unwrap_or_else(|| "Redo".into()))
                        .shortcut_text("Ctrl+Shift+Z"),
                )
                .clicked()
            {
                cmd = Some(Command::Redo);
            }
            ui.separator();
            if ui
                .add_enabled(
                    s.is_some(),
                    egui::Button::new("New trial").shortcut_text("Ctrl+T"),
                )
                .clicked()
            {
                cmd = Some(Command::StartTrial);
            }
        });
        ui.menu_button("Scan", |ui| {
            if ui.button("Open scan file…").clicked() {
                cmd = Some(Command::ShowOpenDialog(DialogKind::ScanFile));
            }
            if ui.button("Open folder of slices…").clicked() {
                cmd = Some(Command::ShowOpenDialog(DialogKind::SliceFolder));
            }
            ui.separator();
            let id = ui.scope_id().with("tiff_voxel_size");
            let mut text = ui.data_mut(|d| {
                d.get_temp::<String>(id)
                    .unwrap_or_else(|| prefs.tiff_voxel_size.clone())
            });
            ui.horizontal(|ui| {
                let l = ui.label("TIFF voxel size");
                let r = ui
                    .add(
                        egui::TextEdit::singleline(&mut text)
                            .hint_text("from the file")
                            .desired_width(120.0),
                    )
                    .labelled_by(l.id)
                    .on_hover_text(
                        "for TIFF scans without a voxel size: 36um, or 36um,36um,50um for x,y,z",
                    );
                if r.lost_focus() && text.trim() != prefs.tiff_voxel_size {
                    cmd = Some(Command::SetTiffVoxelSize(text.clone()));
                }
            });
            ui.data_mut(|d| d.insert_temp(id, text));
            if !prefs.recent.is_empty() {
                ui.separator();
                ui.label(RichText::new("Recent").weak());
                for p in &prefs.recent {
                    let name = p.file_name().map_or_else(
                        || p.display().to_string(),
                        |n| n.to_string_lossy().into_owned(),
                    );
                    if ui
                        .button(name)
                        .on_hover_text(p.display().to_string())
                        .clicked()
                    {
                        cmd = Some(Command::Open(p.clone()));
                    }
                }
            }
            ui.separator();
            if ui.button("Quit").clicked() {
                cmd = Some(Command::Quit);
            }
        });
        ui.add_space(12.0);
        if doc.session.is_some() {
            for (w, name, key) in [
                (Workspace::Digitise, "Digitise", "A: switch"),
                (Workspace::Analysis, "Analysis", "A: switch"),
            ] {
                if ui
                    .selectable_label(workspace == w, RichText::new(name).strong())
                    .on_hover_text(key)
                    .clicked()
                {
                    cmd = Some(Command::SetWorkspace(w));
                }
            }
            ui.add_space(12.0);
        }
        ui.label(RichText::new("Stage").weak());
        for v in ViewId::ALL {
            let text = RichText::new(v.label()).color(if prefs.stage == v {
                colour32(v.colour())
            } else {
                Color32::from_gray(200)
            });
            if ui
                .selectable_label(prefs.stage == v, text)
                .on_hover_text(format!("key {}", v.index() + 1))
                .clicked()
            {
                cmd = Some(Command::SetStage(v));
            }
        }
        ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
            if ui.button("Help").clicked() {
                cmd = Some(Command::ToggleHelp);
            }
            if let Some(s) = &doc.scan {
                ui.label(RichText::new(s.name()).strong());
            }
            if let Some(s) = &doc.session {
                let dirty = if s.is_dirty() { " (unsaved)" } else { "" };
                ui.label(RichText::new(format!("{}{dirty} ·", s.name())).weak());
            }
        });
    });
    cmd
}

/// The controls column: scan facts, display, oblique plane, 3D view, overlays.
pub fn controls_ui(
    ui: &mut Ui,
    doc: &Document,
    prefs: &Preferences,
    vs: &ViewState,
) -> Option<Command> {
    let Some(scan) = &doc.scan else {
        ui.add_space(8.0);
        ui.label("No scan open.");
        ui.label(
            RichText::new(
                "Project > Open project, Scan > Open (Ctrl+O), or drop a file on the window.",
            )
            .weak(),
        );
        return None;
    };
    let mut cmd = None;
    egui::ScrollArea::vertical().show(ui, |ui| {
        scan_facts_ui(ui, scan);
        ui.separator();
        if let Some(c) = display_ui(ui, scan, prefs, vs) {
            cmd = Some(c);
        }
        ui.separator();
        if let Some(c) = oblique_ui(ui, vs) {
            cmd = Some(c);
        }
        ui.separator();
        if let Some(c) = volume_ui(ui, scan, vs) {
            cmd = Some(c);
        }
        ui.separator();
        if let Some(c) = overlays_ui(ui, prefs) {
            cmd = Some(c);
        }
    });
    cmd
}

fn heading(ui: &mut Ui, text: &str) {
    ui.add_space(4.0);
    ui.label(RichText::new(text).strong().size(14.0));
}

fn scan_facts_ui(ui: &mut Ui, scan: &Scan) {
    heading(ui, "Scan");
    let v = &scan.volume;
    let d = v.dims();
    let sp = v.spacing_mm();
    egui::Grid::new("scan_facts")
        .num_columns(2)
        .spacing([8.0, 2.0])
        .show(ui, |ui| {
            ui.label(RichText::new("voxels").weak());
            ui.label(format!("{} × {} × {}", d[0], d[1], d[2]));
            ui.end_row();
            ui.label(RichText::new("voxel size").weak());
            let same = (sp[0] - sp[1]).abs() < 1e-12 && (sp[1] - sp[2]).abs() < 1e-12;
            if same {
                ui.label(format_length_mm(sp[0]));
            } else {
                ui.label(format!(
                    "{} × {} × {}",
                    format_length_mm(sp[0]),
                    format_length_mm(sp[1]),
                    format_length_mm(sp[2])
                ));
            }
            ui.end_row();
            ui.label(RichText::new("type").weak());
            ui.label(v.dtype().name());
            ui.end_row();
            ui.label(RichText::new("range").weak());
            ui.label(format!(
                "{} … {}",
                format_value(scan.full_range.0),
                format_value(scan.full_range.1)
            ));
            ui.end_row();
        });
    for note in &v.notes {
        ui.label(RichText::new(format!("• {note}")).small().weak());
    }
}

fn display_ui(ui: &mut Ui, scan: &Scan, prefs: &Preferences, vs: &ViewState) -> Option<Command> {
    let mut cmd = None;
    heading(ui, "Window");
    let span = (scan.full_range.1 - scan.full_range.0).abs().max(1e-9);
    let mut centre = vs.window.centre;
    let mut width = vs.window.width;
    egui::Grid::new("window_grid")
        .num_columns(2)
        .spacing([8.0, 2.0])
        .show(ui, |ui| {
            let l = ui.label(RichText::new("centre").weak());
            let c = ui
                .add(egui::DragValue::new(&mut centre).speed(span / 500.0))
                .labelled_by(l.id);
            ui.end_row();
            let l = ui.label(RichText::new("width").weak());
            let w = ui
                .add(
                    egui::DragValue::new(&mut width)
                        .speed(span / 500.0)
                        .range(span * 1e-4..=span * 4.0),
                )
                .labelled_by(l.id);
            ui.end_row();
            if (c.changed() || w.changed())
                && let Some(wl) = WindowLevel::new(centre, width)
            {
                cmd = Some(Command::SetWindow(wl));
            }
        });
    ui.horizontal(|ui| {
        if ui.button("Scan range").on_hover_text("W").clicked() {
            cmd = Some(Command::ResetWindow);
        }
        egui::ComboBox::from_id_salt("colour_map")
            .selected_text(colour_map_name(prefs.colour_map))
            .show_ui(ui, |ui| {
                for m in [ColourMap::Grey, ColourMap::InvertedGrey, ColourMap::Viridis] {
                    if ui
                        .selectable_label(prefs.colour_map == m, colour_map_name(m))
                        .clicked()
                    {
                        cmd = Some(Command::SetColourMap(m));
                    }
                }
            });
    });
    ui.horizontal_wrapped(|ui| {
        for (i, p) in prefs.presets.iter().enumerate() {
            let r = ui.button(&p.name).on_hover_text(format!(
                "centre {} width {} · right click to delete",
                format_value(p.centre),
                format_value(p.width)
            ));
            if r.clicked() {
                cmd = Some(Command::ApplyPreset(i));
            }
            if r.secondary_clicked() {
                cmd = Some(Command::DeletePreset(i));
            }
        }
    });
    let id = ui.scope_id().with("preset_name");
    let mut name = ui.data_mut(|d| d.get_temp::<String>(id).unwrap_or_default());
    ui.horizontal(|ui| {
        let l = ui.label(RichText::new("preset").weak());
        let edit = ui
            .add(
                egui::TextEdit::singleline(&mut name)
                    .hint_text("name")
                    .desired_width(90.0),
            )
            .labelled_by(l.id);
        let enter = edit.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter));
        if (ui.button("Keep window").clicked() || enter) && !name.trim().is_empty() {
            cmd = Some(Command::SavePreset(name.clone()));
            name.clear();
        }
    });
    ui.data_mut(|d| d.insert_temp(id, name));
    cmd
}

fn colour_map_name(m: ColourMap) -> &'static str {
    match m {
        ColourMap::Grey => "grey",
        ColourMap::InvertedGrey => "inverted grey",
        ColourMap::Viridis => "viridis",
    }
}

fn oblique_ui(ui: &mut Ui, vs: &ViewState) -> Option<Command> {
    let mut cmd = None;
    heading(ui, "Oblique plane");
    let mut a = vs.oblique.angles_deg();
    let mut changed = false;
    egui::Grid::new("oblique_grid")
        .num_columns(2)
        .spacing([8.0, 2.0])
        .show(ui, |ui| {
            for (value, name) in a.iter_mut().zip(["tilt about u", "tilt about v", "spin"]) {
                let l = ui.label(RichText::new(name).weak());
                changed |= ui
                    .add(
                        egui::DragValue::new(value)
                            .speed(0.5)
                            .suffix("°")
                            .max_decimals(1),
                    )
                    .labelled_by(l.id)
                    .changed();
                ui.end_row();
            }
        });
    if changed {
        cmd = Some(Command::SetObliqueAngles(a));
    }
    ui.horizontal(|ui| {
        if ui
            .button("Level")
            .on_hover_text("the k plane's orientation")
            .clicked()
        {
            cmd = Some(Command::SetObliqueAngles([0.0; 3]));
        }
        ui.label(RichText::new("Ctrl + drag to turn").weak().small());
    });
    cmd
}

fn volume_ui(ui: &mut Ui, scan: &Scan, vs: &ViewState) -> Option<Command> {
    let mut cmd = None;
    heading(ui, "3D view");
    ui.horizontal(|ui| {
        for (m, name) in [
            (VolumeMode::Surface, "surface"),
            (VolumeMode::Projection, "projection"),
        ] {
            if ui.selectable_label(vs.volume_mode == m, name).clicked() {
                cmd = Some(Command::SetVolumeMode(m));
            }
        }
    });
    let mut t = vs.threshold;
    let (lo, hi) = scan.full_range;
    if hi > lo
        && ui
            .add(egui::Slider::new(&mut t, lo..=hi).text("threshold"))
            .changed()
    {
        cmd = Some(Command::SetThreshold(t));
    }
    let mut az = vs.orbit.azimuth_deg;
    let mut el = vs.orbit.elevation_deg;
    ui.horizontal(|ui| {
        let l = ui.label(RichText::new("azimuth").weak());
        let a = ui
            .add(
                egui::DragValue::new(&mut az)
                    .speed(1.0)
                    .suffix("°")
                    .max_decimals(0),
            )
            .labelled_by(l.id);
        let l = ui.label(RichText::new("elevation").weak());
        let e = ui
            .add(
                egui::DragValue::new(&mut el)
                    .speed(1.0)
                    .suffix("°")
                    .max_decimals(0),
            )
            .labelled_by(l.id);
        if a.changed() || e.changed() {
            cmd = Some(Command::SetOrbitAngles {
                azimuth_deg: az,
                elevation_deg: el,
            });
        }
    });
    if ui.button("Reset 3D view").clicked() {
        cmd = Some(Command::ResetView(ViewId::Volume));
    }
    cmd
}

fn overlays_ui(ui: &mut Ui, prefs: &Preferences) -> Option<Command> {
    let mut cmd = None;
    heading(ui, "Overlays");
    let mut c = prefs.show_crosshair;
    if ui.checkbox(&mut c, "crosshair").changed() {
        cmd = Some(Command::ToggleCrosshair);
    }
    let mut b = prefs.show_scale_bar;
    if ui.checkbox(&mut b, "scale bar").changed() {
        cmd = Some(Command::ToggleScaleBar);
    }
    if ui
        .button("Reset all views")
        .on_hover_text("Shift+R")
        .clicked()
    {
        cmd = Some(Command::ResetAll);
    }
    cmd
}

/// The status line: the hover read-out, or the last message.
pub fn status_ui(ui: &mut Ui, doc: &Document, vs: &ViewState) {
    ui.horizontal(|ui| {
        if let Some((msg, is_error)) = &vs.message {
            let colour = if *is_error {
                Color32::from_rgb(240, 120, 100)
            } else {
                Color32::from_gray(200)
            };
            ui.label(RichText::new(msg).color(colour));
            ui.separator();
        }
        match (&vs.hover, &doc.scan) {
            (Some(h), Some(_)) => {
                ui.label(RichText::new(hover_text(h)).monospace());
            }
            (None, Some(s)) => {
                let c = vs.cursor.0;
                ui.label(
                    RichText::new(format!(
                        "crosshair: x {:.3}  y {:.3}  z {:.3} mm   window {} / {}",
                        c.x,
                        c.y,
                        c.z,
                        format_value(vs.window.centre),
                        format_value(vs.window.width)
                    ))
                    .monospace(),
                );
                let _ = s;
            }
            _ => {
                ui.label(RichText::new("F1: help").weak());
            }
        }
    });
}

/// The loading card over the stage: file, progress bar, cancel.
#[must_use]
pub fn loading_ui(ctx: &egui::Context, loading: &Loading) -> Option<Command> {
    let mut cmd = None;
    egui::Window::new("Opening")
        .collapsible(false)
        .resizable(false)
        .title_bar(false)
        .anchor(egui::Align2::CENTER_CENTER, egui::Vec2::ZERO)
        .show(ctx, |ui| {
            ui.set_width(360.0);
            ui.label(RichText::new("Opening").strong());
            ui.label(
                RichText::new(loading.path.display().to_string())
                    .monospace()
                    .small(),
            );
            ui.add_space(4.0);
            let bar = match loading.fraction() {
                Some(f) => egui::ProgressBar::new(f).show_percentage(),
                None => egui::ProgressBar::new(0.0).animate(true),
            };
            ui.add(bar);
            ui.horizontal(|ui| {
                ui.label(
                    RichText::new(format!("{:.1} s", loading.started.elapsed().as_secs_f64()))
                        .weak(),
                );
                ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                    let label = if loading.is_cancelling() {
                        "Cancelling…"
                    } else {
                        "Cancel"
                    };
                    if ui
                        .add_enabled(!loading.is_cancelling(), egui::Button::new(label))
                        .clicked()
                    {
                        cmd = Some(Command::CancelLoad);
                    }
                });
            });
        });
    cmd
}

/// The help overlay listing every shortcut and pointer action.
#[must_use]
pub fn help_ui(ctx: &egui::Context, open: bool) -> Option<Command> {
    if !open {
        return None;
    }
    let mut still_open = true;
    egui::Window::new("Keys and pointer")
        .open(&mut still_open)
        .collapsible(false)
        .resizable(false)
        .anchor(egui::Align2::CENTER_CENTER, egui::Vec2::ZERO)
        .show(ctx, |ui| {
            egui::Grid::new("help_keys")
                .num_columns(2)
                .spacing([18.0, 3.0])
                .striped(true)
                .show(ui, |ui| {
                    for (k, what) in SHORTCUTS {
                        ui.label(RichText::new(*k).monospace().strong());
                        ui.label(*what);
                        ui.end_row();
                    }
                });
            ui.add_space(8.0);
            egui::Grid::new("help_pointer")
                .num_columns(2)
                .spacing([18.0, 3.0])
                .striped(true)
                .show(ui, |ui| {
                    for (k, what) in POINTER {
                        ui.label(RichText::new(*k).strong());
                        ui.label(*what);
                        ui.end_row();
                    }
                });
        });
    (!still_open).then_some(Command::ToggleHelp)
}
