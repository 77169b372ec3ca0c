//! The panels around the views: the top bar, the controls column, the status line, the
//! loading card and the help overlay. Each reads the state and returns commands; none
//! changes the document or the view state itself.

use eframe::egui::{self, Color32, RichText, Ui};

use std::path::Path;
use std::time::Instant;

use super::actions::{Action, help_rows, keys_text};
use super::command::{
    AppCommand, Command, DeskCommand, DialogKind, PrefsCommand, ViewCommand, Workspace,
};
use super::desk::Desk;
use super::state::{Document, Preferences, Scan, ViewId, ViewState, VolumeMode};
use super::status::Status;
use super::view::{colour32, format_value, hover_text};
use sutura_core::geometry::{VoxelSizeMm, format_length_mm};
use sutura_core::render::{ColourMap, WindowLevel};

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
    (
        "drop files",
        "open a scan or a project · add scans to the new-project form",
    ),
    (
        "placing: click",
        "place the current landmark (3D view: on the surface)",
    ),
    ("placing: drag a mark", "move a placed landmark"),
    (
        "preparing: drag (brush, eraser)",
        "paint or erase the chosen label on the stage's plane",
    ),
    (
        "preparing: click (grow, keep piece)",
        "grow the chosen label from the voxel, or keep its piece there",
    ),
    (
        "placing: click a mark",
        "make that landmark the current one",
    ),
];

/// A menu entry for an action: its text and its keys from the action table.
fn entry(ui: &mut egui::Ui, enabled: bool, text: impl Into<String>, action: Action) -> bool {
    ui.add_enabled(
        enabled,
        egui::Button::new(text.into()).shortcut_text(keys_text(action)),
    )
    .clicked()
}

/// The top bar: the file and edit menus, the workspace and stage selectors, and help.
#[allow(clippy::too_many_lines)] // reason: the bar's menus and selectors, left to right
pub fn top_bar_ui(
    ui: &mut Ui,
    doc: &Document,
    desk: Option<&Desk>,
    prefs: &Preferences,
    workspace: Workspace,
) -> Vec<Command> {
    let mut out: Vec<Command> = Vec::new();
    egui::MenuBar::new().ui(ui, |ui| {
        ui.menu_button("File", |ui| {
            if entry(ui, true, "New project…", Action::NewProject) {
                out.push(AppCommand::NewProject.into());
            }
            if entry(ui, true, "Open project…", Action::OpenProject) {
                out.push(AppCommand::ShowDialog(DialogKind::Project).into());
            }
            if entry(ui, true, "Open scan file…", Action::OpenScan) {
                out.push(AppCommand::ShowDialog(DialogKind::ScanFile).into());
            }
            if entry(ui, true, "Open folder of slices…", Action::OpenSliceFolder) {
                out.push(AppCommand::ShowDialog(DialogKind::SliceFolder).into());
            }
            let dirty = desk.is_some_and(|d| d.session.is_dirty() && !d.session.is_read_only());
            if entry(ui, dirty, "Save project", Action::Save) {
                out.push(DeskCommand::Save.into());
            }
            ui.separator();
            // typed settings: a click in their fields keeps the menu open
            egui::containers::menu::SubMenuButton::new("Settings")
                .config(
                    egui::containers::menu::MenuConfig::new()
                        .close_behavior(egui::PopupCloseBehavior::CloseOnClickOutside),
                )
                .ui(ui, |ui| settings_ui(ui, prefs, &mut out));
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
                        out.push(AppCommand::Open(p.clone()).into());
                    }
                }
            }
            ui.separator();
            if entry(ui, true, "Quit", Action::Quit) {
                out.push(AppCommand::Quit.into());
            }
        });
        ui.menu_button("Edit", |ui| {
            let s = desk.map(|d| &d.session);
            let undo = s.and_then(|s| s.next_undo()).map(|w| format!("Undo {w}"));
            if entry(
                ui,
                undo.is_some(),
                undo.unwrap_or_else(|| "Undo".into()),
                Action::Undo,
            ) {
                out.push(DeskCommand::Undo.into());
            }
            let redo = s.and_then(|s| s.next_redo()).map(|w| format!("Redo {w}"));
            if entry(
                ui,
                redo.is_some(),
                redo.unwrap_or_else(|| "Redo".into()),
                Action::Redo,
            ) {
                out.push(DeskCommand::Redo.into());
            }
            ui.separator();
            if entry(ui, desk.is_some(), "New trial", Action::NewTrial) {
                out.push(DeskCommand::StartTrial.into());
            }
            if ui
                .add_enabled(desk.is_some(), egui::Button::new("Add specimens…"))
                .clicked()
            {
                out.push(AppCommand::ShowDialog(DialogKind::AddScans).into());
            }
        });
        ui.add_space(12.0);
        if desk.is_some() {
            for (w, name) in [
                (Workspace::Digitise, "Digitising"),
                (Workspace::Analysis, "Analysis"),
            ] {
                if ui
                    .selectable_label(workspace == w, RichText::new(name).strong())
                    .on_hover_text(format!("{}: switch", keys_text(Action::Workspace)))
                    .clicked()
                {
                    out.push(AppCommand::SetWorkspace(w).into());
                }
            }
            ui.add_space(12.0);
        }
        if doc.scan.is_some() {
            ui.label(RichText::new("Stage").weak());
            for v in ViewId::ALL {
                let text = RichText::new(v.label()).color(if prefs.stage == v {
                    colour32(v.colour())
                } else {
                    Color32::from_gray(200)
                });
                if ui
                    .selectable_label(prefs.stage == v, text)
                    .on_hover_text(format!("key {}", keys_text(Action::Stage(v))))
                    .clicked()
                {
                    out.push(PrefsCommand::SetStage(v).into());
                }
            }
        }
        ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
            if ui.button("Help").clicked() {
                out.push(AppCommand::ToggleHelp.into());
            }
            if let Some(s) = &doc.scan {
                ui.label(RichText::new(s.name()).strong());
            }
            if let Some(d) = desk {
                let dirty = if d.session.is_dirty() {
                    " (unsaved)"
                } else {
                    ""
                };
                ui.label(RichText::new(format!("{}{dirty} ·", d.name())).weak());
            }
        });
    });
    out
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
                "File > New project (Ctrl+N) to start one from your scans, File > Open project, \
                 File > Open scan (Ctrl+O), or drop a file on the window.",
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

/// A setting typed in a menu: a label, a text field (what is typed is kept until it loses the
/// focus; `hint` shows when it is empty) and, when the text then differs from `current`, the
/// command `parse` makes of it, or its message under the field until a text parses.
struct TextSetting<'a> {
    key: &'a str,
    label: &'a str,
    current: &'a str,
    hint: String,
    width: f32,
    tip: &'a str,
}

fn text_setting(
    ui: &mut Ui,
    s: &TextSetting<'_>,
    parse: impl Fn(&str) -> Result<Command, String>,
    out: &mut Vec<Command>,
) {
    let id = ui.scope_id().with(s.key);
    let mut text = ui.data_mut(|d| {
        d.get_temp::<String>(id)
            .unwrap_or_else(|| s.current.to_owned())
    });
    ui.horizontal(|ui| {
        let l = ui.label(s.label);
        let r = ui
            .add(
                egui::TextEdit::singleline(&mut text)
                    .hint_text(s.hint.as_str())
                    .desired_width(s.width),
            )
            .labelled_by(l.id)
            .on_hover_text(s.tip);
        if r.lost_focus() && text.trim() != s.current {
            match parse(text.trim()) {
                Ok(cmd) => {
                    out.push(cmd);
                    ui.ctx().data_mut(|d| {
                        d.remove::<String>(id.with("error"));
                    });
                }
                Err(e) => {
                    ui.ctx().data_mut(|d| d.insert_temp(id.with("error"), e));
                }
            }
        }
    });
    if let Some(e) = ui.ctx().data(|d| d.get_temp::<String>(id.with("error"))) {
        ui.label(
            RichText::new(e)
                .small()
                .color(Color32::from_rgb(240, 120, 100)),
        );
    }
    ui.data_mut(|d| d.insert_temp(id, text));
}

/// The typed settings (File → Settings): the voxel size for TIFF scans, the memory budget and
/// the folder of stores built for scans over it.
fn settings_ui(ui: &mut Ui, prefs: &Preferences, out: &mut Vec<Command>) {
    text_setting(
        ui,
        &TextSetting {
            key: "tiff_voxel_size",
            label: "Voxel size for TIFF scans",
            current: &prefs.tiff_voxel_size,
            hint: "from the file".into(),
            width: 120.0,
            tip: "for TIFF scans without a voxel size: 36um, or 36um,36um,50um for x,y,z",
        },
        |text| {
            VoxelSizeMm::parse_optional(text)
                .map(|v| PrefsCommand::SetTiffVoxelSize(v).into())
                .map_err(|e| e.to_string())
        },
        out,
    );
    let automatic = super::loader::MemoryBudget::new(None).bytes as f64 / f64::from(1u32 << 30);
    let current = prefs
        .memory_budget_gib
        .map_or_else(String::new, |g| format!("{g}"));
    text_setting(
        ui,
        &TextSetting {
            key: "memory_budget",
            label: "Memory budget, GiB",
            current: &current,
            hint: format!("automatic: {automatic:.2}"),
            width: 120.0,
            tip: "scans up to this size are read whole into memory; larger ones are read from an \
                  OME-Zarr store, a chunk at a time (empty: a quarter of this machine's memory)",
        },
        |text| {
            if text.is_empty() {
                return Ok(PrefsCommand::SetMemoryBudget(None).into());
            }
            match text.parse::<f64>() {
                Ok(g) if g.is_finite() && g > 0.0 => {
                    Ok(PrefsCommand::SetMemoryBudget(Some(g)).into())
                }
                _ => Err(format!(
                    "{text}: a memory budget is a number of GiB, e.g. 8 (empty: automatic)"
                )),
            }
        },
        out,
    );
    text_setting(
        ui,
        &TextSetting {
            key: "store_cache",
            label: "Store folder",
            current: &prefs.store_cache,
            hint: prefs.store_cache_dir().display().to_string(),
            width: 220.0,
            tip: "where stores of scans over the memory budget are built and kept",
        },
        |text| Ok(PrefsCommand::SetStoreCache(text.to_owned()).into()),
        out,
    );
}

fn heading(ui: &mut Ui, text: &str) {
    ui.add_space(4.0);
    ui.label(RichText::new(text).strong().size(14.0));
}

fn scan_facts_ui(ui: &mut Ui, scan: &Scan) {
    heading(ui, "This scan");
    let v = scan.grid();
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
            if scan.whole().is_none() {
                ui.label(RichText::new("read").weak());
                let store = scan
                    .voxels_path()
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default();
                ui.label(format!("from its store, {} levels", v.level_count()))
                    .on_hover_text(format!(
                        "{store}: over the memory budget, read a chunk at a time, each view at \
                         the level it needs; picks and the read-out at full resolution"
                    ));
                ui.end_row();
            }
        });
    for note in v.notes() {
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
                cmd = Some(ViewCommand::SetWindow(wl).into());
            }
        });
    ui.horizontal(|ui| {
        if ui.button("Scan range").on_hover_text("W").clicked() {
            cmd = Some(ViewCommand::ResetWindow.into());
        }
        egui::ComboBox::from_id_salt("colour_map")
            .selected_text(colour_map_name(prefs.colour_map))
            .show_ui(ui, |ui| {
                for m in [ColourMap::Grey, ColourMap::InvertedGrey, ColourMap::Viridis] {
                    if ui
                        .selectable_label(prefs.colour_map == m, colour_map_name(m))
                        .clicked()
                    {
                        cmd = Some(PrefsCommand::SetColourMap(m).into());
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
            if r.clicked()
                && let Some(wl) = WindowLevel::new(p.centre, p.width)
            {
                cmd = Some(ViewCommand::SetWindow(wl).into());
            }
            if r.secondary_clicked() {
                cmd = Some(PrefsCommand::DeletePreset(i).into());
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
            cmd = Some(
                PrefsCommand::SavePreset {
                    name: name.clone(),
                    window: vs.window,
                }
                .into(),
            );
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
        cmd = Some(ViewCommand::SetObliqueAngles(a).into());
    }
    ui.horizontal(|ui| {
        if ui
            .button("Level")
            .on_hover_text("the k plane's orientation")
            .clicked()
        {
            cmd = Some(ViewCommand::SetObliqueAngles([0.0; 3]).into());
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
                cmd = Some(ViewCommand::SetVolumeMode(m).into());
            }
        }
    });
    let mut t = vs.iso.value;
    let (lo, hi) = scan.full_range;
    if hi > lo
        && ui
            .add(egui::Slider::new(&mut t, lo..=hi).text("iso-value"))
            .on_hover_text(format!(
                "the surface's grey value, also used by snapping and 3D picking: {}",
                vs.iso.describe()
            ))
            .changed()
    {
        cmd = Some(ViewCommand::SetIsoValue(t).into());
    }
    if vs.iso != scan.iso
        && ui
            .small_button("Back to ISO-50")
            .on_hover_text(scan.iso.describe())
            .clicked()
    {
        cmd = Some(ViewCommand::ResetIsoValue.into());
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
            cmd = Some(
                ViewCommand::SetOrbitAngles {
                    azimuth_deg: az,
                    elevation_deg: el,
                }
                .into(),
            );
        }
    });
    if ui.button("Reset 3D view").clicked() {
        cmd = Some(ViewCommand::ResetView(ViewId::Volume).into());
    }
    cmd
}

fn overlays_ui(ui: &mut Ui, prefs: &Preferences) -> Option<Command> {
    let mut cmd = None;
    heading(ui, "Overlays");
    let mut c = prefs.show_crosshair;
    if ui.checkbox(&mut c, "crosshair").changed() {
        cmd = Some(PrefsCommand::ToggleCrosshair.into());
    }
    let mut b = prefs.show_scale_bar;
    if ui.checkbox(&mut b, "scale bar").changed() {
        cmd = Some(PrefsCommand::ToggleScaleBar.into());
    }
    if ui
        .button("Reset all views")
        .on_hover_text("Shift+R")
        .clicked()
    {
        cmd = Some(ViewCommand::ResetAll.into());
    }
    cmd
}

/// The status line: the hover read-out, or the last message.
pub fn status_ui(ui: &mut Ui, doc: &Document, vs: &ViewState, status: Option<&Status>) {
    ui.horizontal(|ui| {
        if let Some(st) = status {
            ui.label(RichText::new(&st.text).color(st.colour()));
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
                        "crosshair: x {:.3}  y {:.3}  z {:.3} mm   window centre {}, width {}",
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
                ui.label(RichText::new(format!("{}: help", keys_text(Action::Help))).weak());
            }
        }
    });
}

/// The loading card over the stage: file, progress bar, cancel.
#[must_use]
pub fn loading_ui(
    ctx: &egui::Context,
    action: &str,
    path: &Path,
    fraction: Option<f32>,
    started: Instant,
    cancelling: bool,
) -> Option<Command> {
    let mut cmd = None;
    egui::Window::new("Opening")
        .collapsible(false)
        .resizable(false)
        .title_bar(false)
        .anchor(egui::Align2::CENTER_CENTER, egui::Vec2::ZERO)
        .show(ctx, |ui| {
            ui.set_width(360.0);
            ui.label(RichText::new(action).strong());
            ui.label(
                RichText::new(path.display().to_string())
                    .monospace()
                    .small(),
            );
            ui.add_space(4.0);
            let bar = match fraction {
                Some(f) => egui::ProgressBar::new(f).show_percentage(),
                None => egui::ProgressBar::new(0.0).animate(true),
            };
            ui.add(bar);
            ui.horizontal(|ui| {
                ui.label(RichText::new(format!("{:.1} s", started.elapsed().as_secs_f64())).weak());
                ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                    let label = if cancelling {
                        "Cancelling…"
                    } else {
                        "Cancel"
                    };
                    if ui
                        .add_enabled(!cancelling, egui::Button::new(label))
                        .clicked()
                    {
                        cmd = Some(AppCommand::CancelLoad.into());
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
                    for (k, what) in help_rows() {
                        ui.label(RichText::new(k).monospace().strong());
                        ui.label(what);
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
    (!still_open).then_some(AppCommand::ToggleHelp.into())
}
