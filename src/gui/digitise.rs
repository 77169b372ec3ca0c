//! Digitising: the desk column (specimens, trial, the landmark checklist, the current
//! landmark's card, the live measurements) and the landmarks drawn over the views.
//!
//! Like every panel these only read the state and return [`Command`]s. Placing a landmark is a
//! mode (*placing*, key P): while it is on, a click on the stage places the current landmark
//! and a drag on a placed one moves it; while it is off, clicks move the crosshair as always.
//!
//! In a plane view a landmark within [`NEAR_SLICES`] slice spacings of the plane is drawn: a
//! filled dot when it lies on the shown slice (within half a spacing), a ring when it lies in
//! front (towards the viewer) and a dashed ring when it lies behind, fading with distance.
//! In the 3D view a landmark is drawn unless the surface in the picture lies in front of it.

use eframe::egui::{self, Align2, Color32, FontId, Pos2, Rect, RichText, Sense, Stroke, Ui, Vec2};

use super::camera::ScreenMap;
use super::desk::Session;
use super::state::{Command, Preferences, Scan, ViewId};
use super::view::Shown;
use super::worker::RenderKey;
use sutura_core::geometry::WorldPoint;
use sutura_core::landmarks::project::{LandmarkState, Method};
use sutura_core::measure::table::measure_trial;

/// How many slice spacings from the plane a landmark is still drawn in a plane view.
pub const NEAR_SLICES: f64 = 8.0;
/// How far (points) from a landmark's mark a press grabs it for dragging.
pub const GRAB_POINTS: f32 = 9.0;
/// Snapping looks for a boundary up to this many (smallest) voxel spacings from the click.
pub const SNAP_REACH_VOXELS: f64 = 10.0;

/// Colours of the landmark states.
pub const PLACED: Color32 = Color32::from_rgb(108, 214, 134);
pub const ESTIMATED: Color32 = Color32::from_rgb(236, 190, 84);
pub const MISSING: Color32 = Color32::from_rgb(232, 104, 92);
pub const OPEN: Color32 = Color32::from_gray(150);
/// The current landmark's highlight.
pub const CURRENT: Color32 = Color32::from_rgb(255, 236, 120);

/// The colour of a landmark state (`None`: not digitised yet).
#[must_use]
pub fn state_colour(state: Option<LandmarkState>) -> Color32 {
    match state {
        Some(LandmarkState::Placed) => PLACED,
        Some(LandmarkState::Estimated) => ESTIMATED,
        Some(LandmarkState::Missing) => MISSING,
        None => OPEN,
    }
}

/// A small painted icon of a landmark state: filled dot placed, half-filled estimated, cross
/// missing, ring not yet.
fn state_icon(ui: &mut Ui, state: Option<LandmarkState>) {
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

fn heading(ui: &mut Ui, text: &str) {
    ui.add_space(6.0);
    ui.label(RichText::new(text).strong().size(14.0));
}

/// The desk's modes, as the column shows them.
pub struct DeskFlags {
    pub placing: bool,
    pub snap_threshold: Option<f64>,
    /// The curve and segment being traced.
    pub tracing: Option<(String, usize)>,
}

/// The desk column. `note` is the note being typed for the current landmark (kept by the app
/// between frames).
pub fn desk_ui(
    ui: &mut Ui,
    s: &Session,
    prefs: &Preferences,
    flags: &DeskFlags,
    note: &mut String,
    out: &mut Vec<Command>,
) {
    let (placing, snap_threshold) = (flags.placing, flags.snap_threshold);
    egui::ScrollArea::vertical()
        .auto_shrink([false, false])
        .show(ui, |ui| {
            project_header_ui(ui, s, out);
            specimens_ui(ui, s, out);
            ui.separator();
            trial_ui(ui, s, prefs, out);
            if s.trial_ref().is_some() {
                ui.separator();
                current_ui(ui, s, prefs, placing, snap_threshold, note, out);
                ui.separator();
                checklist_ui(ui, s, out);
                curves_ui(ui, s, flags.tracing.as_ref(), out);
                ui.separator();
                measurements_ui(ui, s);
            }
        });
}

fn project_header_ui(ui: &mut Ui, s: &Session, out: &mut Vec<Command>) {
    ui.add_space(4.0);
    ui.horizontal(|ui| {
        let dirty = if s.is_dirty() { " *" } else { "" };
        ui.label(
            RichText::new(format!("{}{dirty}", s.name()))
                .strong()
                .size(15.0),
        )
        .on_hover_text(s.path.display().to_string());
        if ui
            .add_enabled(s.is_dirty() && !s.read_only, egui::Button::new("Save"))
            .on_hover_text("save the project (Ctrl+S)")
            .clicked()
        {
            out.push(Command::Save);
        }
    });
    let scheme = s.project.scheme();
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
    if s.read_only {
        ui.label(RichText::new("read-only: another program has this project open").color(MISSING));
    }
}

fn specimens_ui(ui: &mut Ui, s: &Session, out: &mut Vec<Command>) {
    heading(ui, "Specimens");
    let total = s.project.scheme().landmarks.len();
    egui::ScrollArea::vertical()
        .id_salt("specimen_list")
        .max_height(190.0)
        .show(ui, |ui| {
            for sp in s.project.specimens() {
                let latest = sp.trials.last();
                let done = latest
                    .and_then(|t| s.project.progress(&sp.id, &t.id))
                    .map_or(0, |p| p.landmarks_done());
                let group = sp.groups.get("group").cloned().unwrap_or_default();
                let selected = s.specimen.as_deref() == Some(sp.id.as_str());
                ui.horizontal(|ui| {
                    let r = ui.selectable_label(selected, RichText::new(&sp.id).strong());
                    if r.clicked() && !selected {
                        out.push(Command::SelectSpecimen(sp.id.clone()));
                    }
                    let frac = if total == 0 {
                        0.0
                    } else {
                        done as f32 / total as f32
                    };
                    ui.add(
                        egui::ProgressBar::new(frac)
                            .desired_width(54.0)
                            .desired_height(8.0)
                            .fill(if done == total { PLACED } else { ESTIMATED }),
                    );
                    ui.label(RichText::new(format!("{done}/{total}")).monospace().small());
                    if sp.trials.len() > 1 {
                        ui.label(
                            RichText::new(format!("×{}", sp.trials.len()))
                                .small()
                                .weak(),
                        )
                        .on_hover_text("trials (repeat digitisations)");
                    }
                });
                if !group.is_empty() {
                    ui.label(RichText::new(format!("    {group}")).small().weak());
                }
            }
        });
}

fn trial_ui(ui: &mut Ui, s: &Session, prefs: &Preferences, out: &mut Vec<Command>) {
    let Some(sp) = s.specimen_ref() else {
        ui.label("Select a specimen.");
        return;
    };
    heading(ui, &format!("Trial of {}", sp.id));
    ui.horizontal(|ui| {
        let current = s.trial.clone().unwrap_or_default();
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
                        out.push(Command::SelectTrial(t.id.clone()));
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
            out.push(Command::StartTrial);
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
    s: &Session,
    prefs: &Preferences,
    placing: bool,
    snap_threshold: Option<f64>,
    note: &mut String,
    out: &mut Vec<Command>,
) {
    let scheme = s.project.scheme();
    let Some(def) = s.current.as_deref().and_then(|c| scheme.landmark(c)) else {
        heading(ui, "All landmarks decided");
        ui.label(RichText::new("Pick one in the list to revise it.").weak());
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
            let text = if placing {
                "Placing: click the stage (P to stop)"
            } else {
                "Place (P)"
            };
            let b = egui::Button::new(RichText::new(text).strong()).selected(placing);
            if ui
                .add_sized([ui.available_width(), 26.0], b)
                .on_hover_text(
                    "while placing, a click on the stage puts the current landmark there and a \
                     drag moves a placed one; otherwise clicks move the crosshair",
                )
                .clicked()
            {
                out.push(Command::TogglePlacing);
            }
            ui.horizontal_wrapped(|ui| {
                if ui
                    .button("Missing")
                    .on_hover_text("absent or broken on this specimen (X)")
                    .clicked()
                {
                    out.push(Command::MarkMissing);
                }
                if ui
                    .add_enabled(entry.is_some(), egui::Button::new("Clear"))
                    .on_hover_text("forget it: back to not digitised (Delete)")
                    .clicked()
                {
                    out.push(Command::ClearLandmark);
                }
                if ui
                    .add_enabled(
                        entry.is_some_and(|e| e.position_mm.is_some()),
                        egui::Button::new("Go to"),
                    )
                    .on_hover_text("move the crosshair to it (G)")
                    .clicked()
                {
                    out.push(Command::GoToLandmark);
                }
                if ui.button("Previous").on_hover_text("Shift+N").clicked() {
                    out.push(Command::StepLandmark(-1));
                }
                if ui.button("Next").on_hover_text("N").clicked() {
                    out.push(Command::StepLandmark(1));
                }
            });
            ui.horizontal(|ui| {
                let l = ui.label("Note");
                let r = ui
                    .add(
                        egui::TextEdit::singleline(note)
                            .hint_text(if entry.is_some() {
                                "Enter to keep"
                            } else {
                                "place or mark it first"
                            })
                            .desired_width(f32::INFINITY),
                    )
                    .labelled_by(l.id);
                let saved = entry.and_then(|e| e.note.clone()).unwrap_or_default();
                if r.lost_focus() && *note != saved && entry.is_some() {
                    out.push(Command::SetNote {
                        landmark: def.id.clone(),
                        note: note.clone(),
                    });
                }
            });
            ui.horizontal(|ui| {
                let mut snap = prefs.snap;
                if ui
                    .checkbox(&mut snap, "Snap to boundary")
                    .on_hover_text(
                        "surface landmarks placed on a plane view move to the nearest boundary \
                         of the material within a few voxels (S)",
                    )
                    .changed()
                {
                    out.push(Command::ToggleSnap);
                }
            });
            if let Some(t) = snap_threshold {
                ui.horizontal(|ui| {
                    let l = ui.label("at");
                    let mut v = t;
                    let r = ui
                        .add_enabled(prefs.snap, egui::DragValue::new(&mut v).speed(1.0))
                        .labelled_by(l.id)
                        .on_hover_text(
                            "the iso-value of the boundary: halfway between the background and \
                             material peaks of the histogram (ISO-50) when the scan opens",
                        );
                    if r.changed() && v.is_finite() {
                        out.push(Command::SetSnapThreshold(v));
                    }
                    ui.label(RichText::new("(iso-value)").small().weak());
                });
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

fn checklist_ui(ui: &mut Ui, s: &Session, out: &mut Vec<Command>) {
    let scheme = s.project.scheme();
    if let Some(p) = s
        .specimen
        .as_deref()
        .zip(s.trial.as_deref())
        .and_then(|(sp, t)| s.project.progress(sp, t))
    {
        heading(
            ui,
            &format!("Landmarks  {}/{}", p.landmarks_done(), p.landmarks_total),
        );
        ui.label(
            RichText::new(format!(
                "{} placed · {} estimated · {} missing",
                p.placed, p.estimated, p.missing
            ))
            .small()
            .weak(),
        );
    }
    for def in &scheme.landmarks {
        let state = s.state_of(&def.id);
        let is_current = s.current.as_deref() == Some(def.id.as_str());
        ui.horizontal(|ui| {
            state_icon(ui, state);
            let text = RichText::new(&def.id).monospace();
            let text = if is_current {
                text.color(CURRENT).strong()
            } else {
                text
            };
            let r = ui.selectable_label(is_current, text).on_hover_text(format!(
                "{} (type {}): {}",
                def.name,
                def.bookstein_type.name(),
                def.definition
            ));
            if r.clicked() {
                out.push(Command::SelectLandmark(def.id.clone()));
            }
            ui.label(RichText::new(def.bookstein_type.name()).small().weak());
        });
    }
}

/// The scheme's curves: traced control points and semilandmarks, and the tracing switch.
fn curves_ui(ui: &mut Ui, s: &Session, tracing: Option<&(String, usize)>, out: &mut Vec<Command>) {
    let scheme = s.project.scheme();
    if scheme.curves.is_empty() {
        return;
    }
    ui.separator();
    heading(ui, "Curves");
    let t = s.trial_ref();
    for def in &scheme.curves {
        let entry = t.and_then(|t| t.curve(&def.id));
        let traced: usize = entry.map_or(0, |e| e.traced_mm.iter().map(Vec::len).sum());
        let done = entry.and_then(|e| e.semilandmarks(def)).is_some();
        ui.horizontal(|ui| {
            let (rect, _) = ui.allocate_exact_size(Vec2::splat(12.0), Sense::hover());
            let c = rect.center();
            let col = if done { PLACED } else { OPEN };
            let d = 4.5;
            let diamond = vec![
                c + Vec2::new(0.0, -d),
                c + Vec2::new(d, 0.0),
                c + Vec2::new(0.0, d),
                c + Vec2::new(-d, 0.0),
            ];
            if done {
                ui.painter()
                    .add(egui::Shape::convex_polygon(diamond, col, Stroke::NONE));
            } else {
                ui.painter()
                    .add(egui::Shape::closed_line(diamond, Stroke::new(1.2, col)));
            }
            ui.label(RichText::new(&def.id).monospace())
                .on_hover_text(format!("{}: {}", def.name, def.definition));
            ui.label(
                RichText::new(format!(
                    "{traced} pts · {}",
                    if done {
                        format!("{} semilandmarks", def.total_semilandmarks())
                    } else {
                        "anchors needed".to_owned()
                    }
                ))
                .small()
                .weak(),
            );
        });
        ui.horizontal(|ui| {
            for seg in 0..def.segments() {
                let on = tracing.is_some_and(|(c, k)| *c == def.id && *k == seg);
                let label = if def.segments() == 1 {
                    "Trace".to_owned()
                } else {
                    format!("Trace {}", seg + 1)
                };
                if ui
                    .add(egui::Button::new(label).selected(on))
                    .on_hover_text(format!(
                        "while placing, clicks add control points from {} towards {} (T)",
                        def.anchors[seg],
                        def.anchors[seg + 1]
                    ))
                    .clicked()
                {
                    out.push(Command::SetTracing((!on).then(|| (def.id.clone(), seg))));
                }
            }
            if ui
                .add_enabled(entry.is_some(), egui::Button::new("Clear curve"))
                .clicked()
            {
                out.push(Command::ClearCurve(def.id.clone()));
            }
        });
    }
}

/// The live measurements of the selected trial (the same numbers as `sutura measure`).
fn measurements_ui(ui: &mut Ui, s: &Session) {
    let (Some(sp), Some(t)) = (s.specimen_ref(), s.trial_ref()) else {
        return;
    };
    let rows = measure_trial(s.project.scheme(), sp, t);
    if rows.is_empty() {
        return;
    }
    heading(ui, "Measurements");
    egui::Grid::new("measurements")
        .num_columns(2)
        .striped(true)
        .spacing([10.0, 2.0])
        .show(ui, |ui| {
            for r in &rows {
                ui.label(RichText::new(&r.measurement).monospace().small());
                match &r.result {
                    Ok(m) => {
                        let mut text = format!("{:.3} {}", m.value, r.unit);
                        if !r.estimated.is_empty() {
                            text.push_str(" (est.)");
                        }
                        ui.label(RichText::new(text).monospace())
                            .on_hover_text(format!("± {:.3} {} (one voxel)", m.resolution, r.unit));
                    }
                    Err(why) => {
                        ui.label(RichText::new("—").weak())
                            .on_hover_text(why.as_str());
                    }
                }
                ui.end_row();
            }
        });
}

/// Where a landmark sits relative to a plane view's slice.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Depth {
    On,
    /// Towards the viewer, by this many slice spacings.
    InFront(f64),
    Behind(f64),
}

/// The slice spacing of a plane view: the voxel spacing along its normal.
#[must_use]
pub fn slice_spacing(volume: &sutura_core::volume::Volume, m: &ScreenMap) -> f64 {
    let n = m.u.cross(&m.v);
    let sp = volume.spacing_mm();
    // the spacing seen along n: the voxel box's extent along n, at least the smallest spacing
    let along = (n.x.abs() * sp[0]) + (n.y.abs() * sp[1]) + (n.z.abs() * sp[2]);
    along.max(sp[0].min(sp[1]).min(sp[2]))
}

/// Where `p` lies relative to the plane of `m`, or `None` if farther than [`NEAR_SLICES`].
/// The screen's `u × v` points into the screen (away from the viewer).
#[must_use]
pub fn depth_of(m: &ScreenMap, spacing: f64, p: WorldPoint) -> Option<Depth> {
    let n = m.u.cross(&m.v);
    let d = (p.0 - m.origin.0).dot(&n) / spacing;
    if d.abs() <= 0.5 {
        Some(Depth::On)
    } else if d.abs() > NEAR_SLICES {
        None
    } else if d < 0.0 {
        Some(Depth::InFront(-d))
    } else {
        Some(Depth::Behind(d))
    }
}

fn pos(p: [f64; 2]) -> Pos2 {
    Pos2::new(p[0] as f32, p[1] as f32)
}

/// The landmarks of the selected trial in a plane view. `drag` is a landmark being moved
/// (drawn at the pointer instead).
#[allow(clippy::too_many_arguments)] // reason: what to draw, where, and how it is styled
pub fn plane_marks(
    painter: &egui::Painter,
    scan: &Scan,
    m: &ScreenMap,
    s: &Session,
    drag: Option<&(String, WorldPoint)>,
    labels: bool,
    on_stage: bool,
) {
    let Some(t) = s.trial_ref() else {
        return;
    };
    let spacing = slice_spacing(&scan.volume, m);
    let r = if on_stage { 5.5 } else { 3.5 };
    for e in &t.landmarks {
        let Some(p) = e.position_mm else {
            continue;
        };
        let mut p = WorldPoint::new(p[0], p[1], p[2]);
        if let Some((id, to)) = drag
            && *id == e.id
        {
            p = *to;
        }
        let Some(depth) = depth_of(m, spacing, p) else {
            continue;
        };
        let at = pos(m.screen(p));
        if !painter.clip_rect().expand(10.0).contains(at) {
            continue;
        }
        let base = state_colour(Some(e.state));
        let current = s.current.as_deref() == Some(e.id.as_str());
        let fade = |k: f64| (1.0 - 0.75 * (k / NEAR_SLICES)) as f32;
        let shadow = Stroke::new(3.0, Color32::from_black_alpha(160));
        match depth {
            Depth::On => {
                painter.circle_filled(at, r + 1.5, Color32::from_black_alpha(170));
                painter.circle_filled(at, r, base);
            }
            Depth::InFront(k) => {
                let c = base.gamma_multiply(fade(k));
                painter.circle_stroke(at, r, shadow);
                painter.circle_stroke(at, r, Stroke::new(1.8, c));
                painter.circle_filled(at, 1.5, c);
            }
            Depth::Behind(k) => {
                let c = base.gamma_multiply(fade(k));
                let n = 8;
                for i in 0..n {
                    if i % 2 == 1 {
                        continue;
                    }
                    let a0 = i as f32 / n as f32 * std::f32::consts::TAU;
                    let a1 = (i + 1) as f32 / n as f32 * std::f32::consts::TAU;
                    let q = |a: f32| at + Vec2::new(a.cos(), a.sin()) * r;
                    painter.line_segment([q(a0), q(a1)], Stroke::new(1.6, c));
                }
            }
        }
        if current {
            painter.circle_stroke(at, r + 4.0, Stroke::new(1.5, CURRENT));
        }
        if labels && on_stage {
            label(painter, at + Vec2::new(r + 4.0, -r - 2.0), &e.id, current);
        }
    }
    // curves: traced control points (squares) and semilandmarks (diamonds) near the slice
    for c in &t.curves {
        let near = |p: &[f64; 3]| {
            let w = WorldPoint::new(p[0], p[1], p[2]);
            depth_of(m, spacing, w).map(|d| (pos(m.screen(w)), d))
        };
        for p in c.traced_mm.iter().flatten() {
            if let Some((at, d)) = near(p) {
                let col = CURVE.gamma_multiply(if d == Depth::On { 1.0 } else { 0.5 });
                painter.rect_stroke(
                    Rect::from_center_size(at, Vec2::splat(7.0)),
                    0.0,
                    Stroke::new(1.5, col),
                    egui::StrokeKind::Middle,
                );
            }
        }
        for p in c.semilandmarks_mm.iter().flatten() {
            if let Some((at, d)) = near(p) {
                let col = CURVE.gamma_multiply(if d == Depth::On { 1.0 } else { 0.5 });
                diamond(painter, at, 3.5, col);
            }
        }
    }
}

/// The colour of curves: traced points and semilandmarks.
pub const CURVE: Color32 = Color32::from_rgb(120, 200, 236);

fn diamond(painter: &egui::Painter, at: Pos2, d: f32, col: Color32) {
    painter.add(egui::Shape::convex_polygon(
        vec![
            at + Vec2::new(0.0, -d),
            at + Vec2::new(d, 0.0),
            at + Vec2::new(0.0, d),
            at + Vec2::new(-d, 0.0),
        ],
        col,
        Stroke::new(1.0, Color32::from_black_alpha(180)),
    ));
}

fn label(painter: &egui::Painter, at: Pos2, text: &str, current: bool) {
    let colour = if current {
        CURRENT
    } else {
        Color32::from_gray(225)
    };
    let galley = painter.layout_no_wrap(text.to_owned(), FontId::proportional(11.0), colour);
    let bg = Rect::from_min_size(
        at - Vec2::new(2.0, 1.0),
        galley.size() + Vec2::new(4.0, 2.0),
    );
    painter.rect_filled(bg, 2.0, Color32::from_black_alpha(150));
    painter.galley(at, galley, colour);
}

/// The placed landmark whose mark on a plane view lies within [`GRAB_POINTS`] of `at` (only
/// those on or near the shown slice), nearest first.
#[must_use]
pub fn grab_on_plane(scan: &Scan, m: &ScreenMap, s: &Session, at: Pos2) -> Option<String> {
    let t = s.trial_ref()?;
    let spacing = slice_spacing(&scan.volume, m);
    t.landmarks
        .iter()
        .filter_map(|e| {
            let p = e.position_mm?;
            let p = WorldPoint::new(p[0], p[1], p[2]);
            depth_of(m, spacing, p)?;
            let d = pos(m.screen(p)).distance(at);
            (d <= GRAB_POINTS).then_some((d, e.id.clone()))
        })
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, id)| id)
}

/// The landmarks (and curves' semilandmarks) of the selected trial over the 3D view's picture,
/// hidden where the picture's surface lies in front of them.
pub fn volume_marks(
    painter: &egui::Painter,
    rect: Rect,
    scan: &Scan,
    shown: &Shown,
    s: &Session,
    labels: bool,
) {
    let (Some(t), RenderKey::Volume(k)) = (s.trial_ref(), &shown.key) else {
        return;
    };
    let cam = &k.camera;
    let dir = cam.view_dir.normalize();
    let sp = scan.volume.spacing_mm();
    let tolerance = 2.0 * sp[0].max(sp[1]).max(sp[2]);
    let [w, h] = shown.key.size();
    // the picture is stretched over the rect: pixel (col, row) → point
    let sx = rect.width() / w as f32;
    let sy = rect.height() / h as f32;
    let visible = |p: [f64; 3]| -> Option<Pos2> {
        let p = WorldPoint::new(p[0], p[1], p[2]);
        let (col, row) = cam.project(p).ok()?;
        if col < -0.5 || row < -0.5 || col > w as f64 - 0.5 || row > h as f64 - 0.5 {
            return None;
        }
        let ci = (col.round().max(0.0) as usize).min(w - 1);
        let ri = (row.round().max(0.0) as usize).min(h - 1);
        let hidden = shown
            .hits
            .as_ref()
            .and_then(|hits| hits.get(ci + w * ri).copied().flatten())
            .is_some_and(|hit| (p.0 - hit.0).dot(&dir) > tolerance);
        (!hidden).then(|| {
            Pos2::new(
                rect.min.x + (col as f32 + 0.5) * sx,
                rect.min.y + (row as f32 + 0.5) * sy,
            )
        })
    };
    for c in &t.curves {
        for p in c.semilandmarks_mm.iter().flatten() {
            if let Some(at) = visible(*p) {
                diamond(painter, at, 3.0, CURVE);
            }
        }
    }
    for e in &t.landmarks {
        let Some(at) = e.position_mm.and_then(visible) else {
            continue;
        };
        let current = s.current.as_deref() == Some(e.id.as_str());
        painter.circle_filled(at, 5.5, Color32::from_black_alpha(170));
        painter.circle_filled(at, 4.0, state_colour(Some(e.state)));
        if current {
            painter.circle_stroke(at, 8.0, Stroke::new(1.5, CURRENT));
        }
        if labels {
            label(painter, at + Vec2::new(7.0, -8.0), &e.id, current);
        }
    }
}

/// The badge over the stage while placing: what a click will do.
pub fn placing_badge(
    painter: &egui::Painter,
    rect: Rect,
    s: &Session,
    view: ViewId,
    tracing: Option<&str>,
) {
    let text = match s.current.as_deref() {
        _ if tracing.is_some() => format!(
            "tracing {}: click control points in order",
            tracing.unwrap_or_default()
        ),
        Some(c) if view == ViewId::Volume => format!("placing {c}: click the surface"),
        Some(c) => format!("placing {c}: click to place · drag a mark to move it"),
        None => "placing: every landmark is decided; pick one in the list".to_owned(),
    };
    let galley = painter.layout_no_wrap(text, FontId::proportional(13.0), Color32::BLACK);
    let size = galley.size() + Vec2::new(16.0, 8.0);
    let at = Align2::CENTER_TOP.align_size_within_rect(size, rect.shrink(8.0));
    painter.rect_filled(at, 4.0, CURRENT);
    painter.galley(at.min + Vec2::new(8.0, 4.0), galley, Color32::BLACK);
    painter.rect_stroke(
        rect.shrink(1.0),
        3.0,
        Stroke::new(2.0, CURRENT.gamma_multiply(0.8)),
        egui::StrokeKind::Inside,
    );
}
