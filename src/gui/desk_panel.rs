//! The desk column: the project and its specimens (with their groups), the trial, the current
//! landmark's card (place, type a position, estimate from the partner, missing, note), then
//! the trial's lists ([`super::trial_lists`]: the checklist with its checks, the curves and the
//! live measurements). Like every panel it only reads the state
//! and returns [`Command`]s; the text being typed lives in the app's [`UiState`].

use eframe::egui::{self, Color32, RichText, Sense, Stroke, Ui, Vec2};

use super::app::UiState;
use super::command::{AppCommand, Command, DeskCommand, DialogKind, TypedPosition, ViewCommand};
use super::desk::Desk;
use super::marks::{CURRENT, MISSING, PLACED, state_colour};
use super::state::{Preferences, Scan, ViewState};
use super::trial_lists;
use sutura_core::landmarks::project::{LandmarkState, Method};

/// A trial's progress bar before it is complete: neutral, not a landmark state's colour.
const PROGRESS: Color32 = Color32::from_rgb(86, 140, 150);

/// The frame a position is typed in.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum TypedFrame {
    #[default]
    WorldMm,
    Voxel,
}

/// A position being typed for the current landmark.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct TypedForm {
    pub frame: TypedFrame,
    pub values: [f64; 3],
    /// The (specimen, trial, landmark) the values were filled in for.
    pub filled_for: Option<(String, String, String)>,
}

/// A group being set for the ticked specimens.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct GroupForm {
    pub key: String,
    pub value: String,
}

/// A small painted icon of a landmark state: filled dot placed, half-filled estimated, cross
/// missing, ring not yet.
pub(super) fn state_icon(ui: &mut Ui, state: Option<LandmarkState>) {
    let (rect, _) = ui.allocate_exact_size(Vec2::splat(12.0), Sense::hover());
    let p = ui.painter();
    let c = rect.center();
    let col = state_colour(state);
    match state {
        Some(LandmarkState::Placed) => {
            p.circle_filled(c, 4.5, col);
        }
        Some(LandmarkState::Estimated) => {
            p.circle_stroke(c, 4.0, Stroke::new(1.5, col));
            p.circle_filled(c, 2.2, col);
        }
        Some(LandmarkState::Missing) => {
            let d = 3.5;
            p.line_segment(
                [c + Vec2::new(-d, -d), c + Vec2::new(d, d)],
                Stroke::new(2.0, col),
            );
            p.line_segment(
                [c + Vec2::new(-d, d), c + Vec2::new(d, -d)],
                Stroke::new(2.0, col),
            );
        }
        None => {
            p.circle_stroke(c, 4.0, Stroke::new(1.2, col));
        }
    }
}

pub(super) fn heading(ui: &mut Ui, text: &str) {
    ui.add_space(6.0);
    ui.label(RichText::new(text).strong().size(14.0));
}

/// The desk column. `form` holds what is being typed (kept by the app between frames).
pub fn desk_ui(
    ui: &mut Ui,
    s: &Desk,
    prefs: &Preferences,
    vs: &ViewState,
    scan: Option<&Scan>,
    form: &mut UiState,
    out: &mut Vec<Command>,
) {
    egui::ScrollArea::vertical()
        .auto_shrink([false, false])
        .show(ui, |ui| {
            project_header_ui(ui, s, out);
            specimens_ui(ui, s, form, out);
            groups_ui(ui, s, form, out);
            ui.separator();
            trial_ui(ui, s, prefs, out);
            if s.trial_ref().is_some() {
                ui.separator();
                current_ui(ui, s, prefs, vs, scan, form, out);
                ui.separator();
                trial_lists::checklist_ui(ui, s, out);
                trial_lists::curves_ui(ui, s, out);
                ui.separator();
                trial_lists::measurements_ui(ui, s);
            }
        });
}

fn project_header_ui(ui: &mut Ui, s: &Desk, out: &mut Vec<Command>) {
    ui.add_space(4.0);
    ui.horizontal(|ui| {
        let dirty = if s.session.is_dirty() {
            " (unsaved)"
        } else {
            ""
        };
        ui.label(
            RichText::new(format!("{}{dirty}", s.name()))
                .strong()
                .size(15.0),
        )
        .on_hover_text(s.session.path().display().to_string());
        if ui
            .add_enabled(
                s.session.is_dirty() && !s.session.is_read_only(),
                egui::Button::new("Save"),
            )
            .on_hover_text("save the project (Ctrl+S)")
            .clicked()
        {
            out.push(DeskCommand::Save.into());
        }
    });
    let scheme = s.session.project.scheme();
    ui.label(
        RichText::new(format!(
            "scheme: {} · {} landmarks, {} curve{}",
            scheme.name,
            scheme.landmarks.len(),
            scheme.curves.len(),
            if scheme.curves.len() == 1 { "" } else { "s" }
        ))
        .weak(),
    );
    if let Some(why) = s.session.read_only_why() {
        ui.label(RichText::new(format!("read-only: the project {why}")).color(MISSING));
    }
}

fn specimens_ui(ui: &mut Ui, s: &Desk, form: &mut UiState, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        heading(ui, "Specimens");
        if ui
            .small_button("Add…")
            .on_hover_text(
                "add specimens from scans (files, folders of slices, or a folder of scans)",
            )
            .clicked()
        {
            out.push(AppCommand::ShowDialog(DialogKind::AddScans).into());
        }
        if let Some(id) = &s.specimen
            && ui
                .small_button("Remove")
                .on_hover_text(format!(
                    "remove {id} from the project (Ctrl+Z brings it back)"
                ))
                .clicked()
        {
            out.push(DeskCommand::RemoveSpecimen(id.clone()).into());
        }
    });
    let project = &s.session.project;
    let total = project.scheme().landmarks.len();
    if project.specimens().is_empty() {
        ui.label(RichText::new("No specimens yet: Add… or drop scans on the window.").weak());
    }
    egui::ScrollArea::vertical()
        .id_salt("specimen_list")
        .max_height(200.0)
        .show(ui, |ui| {
            for sp in project.specimens() {
                let latest = sp.trials.last();
                let done = latest
                    .and_then(|t| project.progress(&sp.id, &t.id))
                    .map_or(0, |p| p.landmarks_done());
                let selected = s.specimen.as_deref() == Some(sp.id.as_str());
                ui.horizontal(|ui| {
                    let mut ticked = form.ticked.contains(&sp.id);
                    if ui
                        .checkbox(&mut ticked, "")
                        .on_hover_text("tick specimens to set their groups together")
                        .changed()
                    {
                        if ticked {
                            form.ticked.push(sp.id.clone());
                        } else {
                            form.ticked.retain(|t| *t != sp.id);
                        }
                    }
                    let r = ui.selectable_label(selected, RichText::new(&sp.id).strong());
                    if r.clicked() && !selected {
                        out.push(DeskCommand::SelectSpecimen(sp.id.clone()).into());
                    }
                    let frac = if total == 0 {
                        0.0
                    } else {
                        done as f32 / total as f32
                    };
                    ui.add(
                        egui::ProgressBar::new(frac)
                            .desired_width(48.0)
                            .desired_height(8.0)
                            .fill(if done == total { PLACED } else { PROGRESS }),
                    );
                    ui.label(
                        RichText::new(format!("{done} of {total}"))
                            .monospace()
                            .small(),
                    )
                    .on_hover_text(
                        "landmarks recorded in the latest trial (placed, estimated or missing)",
                    );
                    if sp.trials.len() > 1 {
                        ui.label(
                            RichText::new(format!("{} trials", sp.trials.len()))
                                .small()
                                .weak(),
                        );
                    }
                });
                if !sp.groups.is_empty() {
                    let g: Vec<String> =
                        sp.groups.iter().map(|(k, v)| format!("{k}: {v}")).collect();
                    ui.label(
                        RichText::new(format!("      {}", g.join(" · ")))
                            .small()
                            .weak(),
                    );
                }
            }
        });
}

/// Setting a group for the ticked specimens (or the selected one).
fn groups_ui(ui: &mut Ui, s: &Desk, form: &mut UiState, out: &mut Vec<Command>) {
    let targets: Vec<String> = if form.ticked.is_empty() {
        s.specimen.clone().into_iter().collect()
    } else {
        form.ticked.clone()
    };
    if targets.is_empty() {
        return;
    }
    egui::CollapsingHeader::new(format!(
        "Groups of {}",
        if targets.len() == 1 {
            targets[0].clone()
        } else {
            format!("{} ticked specimens", targets.len())
        }
    ))
    .id_salt("groups_editor")
    .show(ui, |ui| {
        ui.horizontal(|ui| {
            let l = ui.label("key");
            ui.add(
                egui::TextEdit::singleline(&mut form.group_form.key)
                    .hint_text("locality")
                    .desired_width(80.0),
            )
            .labelled_by(l.id);
            let l = ui.label("value");
            ui.add(
                egui::TextEdit::singleline(&mut form.group_form.value)
                    .hint_text("Harrowdene Clay")
                    .desired_width(110.0),
            )
            .labelled_by(l.id);
        });
        ui.horizontal(|ui| {
            let key = form.group_form.key.trim().to_owned();
            let value = form.group_form.value.trim().to_owned();
            if ui
                .add_enabled(
                    !key.is_empty() && !value.is_empty(),
                    egui::Button::new("Set"),
                )
                .clicked()
            {
                out.push(
                    DeskCommand::SetGroup {
                        specimens: targets.clone(),
                        key: key.clone(),
                        value: Some(value),
                    }
                    .into(),
                );
            }
            if ui
                .add_enabled(!key.is_empty(), egui::Button::new("Remove key"))
                .clicked()
            {
                out.push(
                    DeskCommand::SetGroup {
                        specimens: targets.clone(),
                        key,
                        value: None,
                    }
                    .into(),
                );
            }
            if !form.ticked.is_empty() && ui.button("Untick all").clicked() {
                form.ticked.clear();
            }
        });
    });
}

fn trial_ui(ui: &mut Ui, s: &Desk, prefs: &Preferences, out: &mut Vec<Command>) {
    let Some(sp) = s.specimen_ref() else {
        ui.label("Select a specimen.");
        return;
    };
    heading(ui, &format!("Trial of {}", sp.id));
    let _ = sp;
    ui.horizontal(|ui| {
        let current = s.trial.clone().unwrap_or_default();
        let sp = s.specimen_ref().expect("checked above");
        let label = s.trial_ref().map_or_else(
            || "none".to_owned(),
            |t| format!("{} · {}", t.id, t.operator),
        );
        egui::ComboBox::from_label("trial")
            .selected_text(label)
            .show_ui(ui, |ui| {
                for t in &sp.trials {
                    if ui
                        .selectable_label(t.id == current, format!("{} · {}", t.id, t.operator))
                        .clicked()
                    {
                        out.push(DeskCommand::SelectTrial(t.id.clone()).into());
                    }
                }
            });
        if ui
            .button("New trial")
            .on_hover_text(
                "digitise this specimen again from scratch (Ctrl+T); earlier trials stay \
                 hidden while you work",
            )
            .clicked()
        {
            out.push(DeskCommand::StartTrial.into());
        }
    });
    if let Some(t) = s.trial_ref() {
        let later = sp.trials.len() > 1;
        ui.label(
            RichText::new(format!(
                "operator {} · started {}{}",
                t.operator,
                t.started,
                if later { " · other trials hidden" } else { "" }
            ))
            .small()
            .weak(),
        );
    } else {
        ui.label(RichText::new("No trial yet: start one to digitise.").weak());
    }
    if prefs.operator.is_empty() {
        ui.label(RichText::new("You will be asked your name for the first trial.").weak());
    }
}

#[allow(clippy::too_many_lines)] // reason: one card, read top to bottom as it is drawn
fn current_ui(
    ui: &mut Ui,
    s: &Desk,
    prefs: &Preferences,
    vs: &ViewState,
    scan: Option<&Scan>,
    form: &mut UiState,
    out: &mut Vec<Command>,
) {
    let scheme = s.session.project.scheme();
    let Some(def) = s.current.as_deref().and_then(|c| scheme.landmark(c)) else {
        heading(ui, "Every landmark is recorded");
        ui.label(RichText::new("Pick one in the checklist to revise it.").weak());
        return;
    };
    let entry = s.trial_ref().and_then(|t| t.landmark(&def.id));
    heading(ui, "Current landmark");
    egui::Frame::group(ui.style())
        .stroke(Stroke::new(1.0, CURRENT.gamma_multiply(0.6)))
        .show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.horizontal(|ui| {
                state_icon(ui, entry.map(|e| e.state));
                ui.label(RichText::new(&def.name).strong().color(CURRENT));
            });
            ui.label(
                RichText::new(format!(
                    "{} · type {} · {}",
                    def.id,
                    def.bookstein_type.name(),
                    if def.on_surface {
                        "on the surface"
                    } else {
                        "constructed (place on slices)"
                    }
                ))
                .small()
                .monospace(),
            );
            ui.label(RichText::new(&def.definition).italics());
            if let Some(p) = &def.partner {
                ui.label(RichText::new(format!("partner: {p}")).small().weak());
            }
            match entry {
                Some(e) => {
                    let what = match (e.position_mm, e.method) {
                        (Some(p), Some(m)) => format!(
                            "{} by {} at {:.3}, {:.3}, {:.3} mm",
                            e.state.name(),
                            method_words(m),
                            p[0],
                            p[1],
                            p[2]
                        ),
                        _ => e.state.name().to_owned(),
                    };
                    ui.label(
                        RichText::new(what)
                            .color(state_colour(Some(e.state)))
                            .small(),
                    );
                }
                None => {
                    ui.label(RichText::new("not digitised yet").small().weak());
                }
            }
            ui.add_space(4.0);
            let text = if s.placing {
                "Placing: click the stage (P to stop)"
            } else {
                "Place (P)"
            };
            let b = egui::Button::new(RichText::new(text).strong()).selected(s.placing);
            if ui
                .add_sized([ui.available_width(), 26.0], b)
                .on_hover_text(
                    "while placing, a click on the stage puts the current landmark there and a \
                     drag moves a placed one; otherwise clicks move the crosshair",
                )
                .clicked()
            {
                out.push(DeskCommand::TogglePlacing.into());
            }
            ui.horizontal_wrapped(|ui| {
                if ui
                    .button("Missing")
                    .on_hover_text("absent or broken on this specimen (X)")
                    .clicked()
                {
                    out.push(DeskCommand::MarkMissing.into());
                }
                if def.partner.is_some()
                    && ui
                        .button("From partner")
                        .on_hover_text(
                            "estimate it from its bilateral partner, mirrored across the \
                             midsagittal plane fitted to the placed midline landmarks and pairs (E)",
                        )
                        .clicked()
                {
                    out.push(DeskCommand::EstimateFromPartner.into());
                }
                if ui
                    .add_enabled(entry.is_some(), egui::Button::new("Clear"))
                    .on_hover_text("forget it: back to not digitised (Delete)")
                    .clicked()
                {
                    out.push(DeskCommand::ClearLandmark.into());
                }
                if ui
                    .add_enabled(
                        entry.is_some_and(|e| e.position_mm.is_some()),
                        egui::Button::new("Go to"),
                    )
                    .on_hover_text("move the crosshair to it (G)")
                    .clicked()
                {
                    out.push(DeskCommand::GoToLandmark.into());
                }
                if ui.button("Previous").on_hover_text("Shift+N").clicked() {
                    out.push(DeskCommand::StepLandmark(-1).into());
                }
                if ui.button("Next").on_hover_text("N").clicked() {
                    out.push(DeskCommand::StepLandmark(1).into());
                }
            });
            typed_ui(ui, s, vs, scan, form, out);
            ui.horizontal(|ui| {
                let l = ui.label("Note");
                let r = ui
                    .add(
                        egui::TextEdit::singleline(&mut form.note)
                            .hint_text(if entry.is_some() {
                                "Enter to keep"
                            } else {
                                "place or mark it first"
                            })
                            .desired_width(f32::INFINITY),
                    )
                    .labelled_by(l.id);
                let saved = entry.and_then(|e| e.note.clone()).unwrap_or_default();
                if r.lost_focus() && form.note != saved && entry.is_some() {
                    out.push(
                        DeskCommand::SetNote {
                            landmark: def.id.clone(),
                            note: form.note.clone(),
                        }
                        .into(),
                    );
                }
            });
            ui.horizontal(|ui| {
                let mut snap = prefs.snap;
                if ui
                    .checkbox(&mut snap, "Snap to boundary")
                    .on_hover_text(
                        "surface landmarks placed on a plane view move to the nearest boundary \
                         of the material within 10 voxels (S)",
                    )
                    .changed()
                {
                    out.push(super::command::PrefsCommand::ToggleSnap.into());
                }
            });
            iso_ui(ui, vs, scan, out);
        });
}

/// The scan's iso-value, shared by snapping, the 3D view's surface and 3D picking.
pub fn iso_ui(ui: &mut Ui, vs: &ViewState, scan: Option<&Scan>, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        let l = ui.label("iso-value");
        let mut v = vs.iso.value;
        let r = ui
            .add(egui::DragValue::new(&mut v).speed(1.0))
            .labelled_by(l.id)
            .on_hover_text(
                "the grey value of the material's boundary: snapping on the planes, the 3D \
                 view's surface and clicks in the 3D view all use it",
            );
        if r.changed() && v.is_finite() {
            out.push(ViewCommand::SetIsoValue(v).into());
        }
        ui.label(
            RichText::new(format!("({})", vs.iso.source_name()))
                .small()
                .weak(),
        )
        .on_hover_text(vs.iso.describe());
        if let Some(sc) = scan
            && vs.iso != sc.iso
            && ui
                .small_button("ISO-50")
                .on_hover_text(sc.iso.describe())
                .clicked()
        {
            out.push(ViewCommand::ResetIsoValue.into());
        }
    });
}

/// Typing the current landmark's position, in world mm or voxel coordinates.
fn typed_ui(
    ui: &mut Ui,
    s: &Desk,
    vs: &ViewState,
    scan: Option<&Scan>,
    form: &mut UiState,
    out: &mut Vec<Command>,
) {
    let key = s
        .specimen
        .clone()
        .zip(s.trial.clone())
        .zip(s.current.clone())
        .map(|((a, b), c)| (a, b, c));
    let record = s.specimen_ref().map(|sp| &sp.scan);
    let t = &mut form.typed;
    if key != t.filled_for {
        // start from the landmark's position, else the crosshair
        let p = s
            .current
            .as_deref()
            .and_then(|c| s.trial_ref()?.position(c))
            .unwrap_or([vs.cursor.0.x, vs.cursor.0.y, vs.cursor.0.z]);
        t.values = match (t.frame, record) {
            (TypedFrame::Voxel, Some(r)) => r.voxel_from_world_point(p),
            _ => p,
        };
        t.filled_for = key;
    }
    let _ = scan;
    egui::CollapsingHeader::new("Type a position")
        .id_salt("typed_position")
        .show(ui, |ui| {
            ui.horizontal(|ui| {
                for (f, name) in [
                    (TypedFrame::WorldMm, "world mm"),
                    (TypedFrame::Voxel, "voxel"),
                ] {
                    if ui.selectable_label(t.frame == f, name).clicked() && t.frame != f {
                        if let Some(r) = record {
                            t.values = match f {
                                TypedFrame::Voxel => r.voxel_from_world_point(t.values),
                                TypedFrame::WorldMm => r.world_from_voxel_point(t.values),
                            };
                        }
                        t.frame = f;
                    }
                }
            });
            ui.horizontal(|ui| {
                let names = match t.frame {
                    TypedFrame::WorldMm => ["x", "y", "z"],
                    TypedFrame::Voxel => ["i", "j", "k"],
                };
                for (v, n) in t.values.iter_mut().zip(names) {
                    let l = ui.label(n);
                    ui.add(egui::DragValue::new(v).speed(0.01).max_decimals(4))
                        .labelled_by(l.id);
                }
            });
            if ui
                .button("Place here")
                .on_hover_text("place the current landmark at these coordinates (method: typed)")
                .clicked()
            {
                out.push(
                    DeskCommand::PlaceTyped(match t.frame {
                        TypedFrame::WorldMm => TypedPosition::WorldMm(t.values),
                        TypedFrame::Voxel => TypedPosition::Voxel(t.values),
                    })
                    .into(),
                );
            }
        });
}

fn method_words(m: Method) -> &'static str {
    match m {
        Method::Slice => "slice click",
        Method::Surface => "surface pick",
        Method::Typed => "typing",
        Method::Estimated => "estimate",
    }
}
