//! The workstation app: owns the three state tiers, the loader and the render workers, lays
//! out the panels and views each frame, and applies the commands they return.
//!
//! One frame: take finished loads and pictures → keyboard and dropped files → panels and views
//! (reading the state, returning commands) → apply the commands → ask the workers for any
//! picture whose [`RenderKey`] changed. Nothing in a frame waits for a load or a render.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use eframe::egui::{self, Color32, Key, Modifiers, Rect, RichText, TextureOptions, Vec2};

use super::analysis_view::{self, AnalysisState};
use super::desk::{Session, is_project_path};
use super::digitise::{self, SNAP_REACH_VOXELS};
use super::files::{self, FileBrowser};
use super::loader::{Loading, Outcome};
use super::panels;
use super::state::{
    Answer, Command, DialogKind, Document, Preferences, Scan, ViewId, ViewState, VolumeMode,
    Workspace,
};
use super::view::{self, Desk, Shown, VIEW_BACKGROUND, pixels_for, plane_map, view_ui};
use super::worker::{PlaneKey, RenderKey, VolumeKey, Workers};
use sutura_core::geometry::{Plane, WorldPoint, parse_length_mm};
use sutura_core::io::OpenOptions;
use sutura_core::landmarks::Edit;
use sutura_core::landmarks::pick::{
    Crossing, PickOptions, SliceSearch, pick_along_ray, pick_in_slice,
};
use sutura_core::landmarks::project::{AutosaveStatus, Method, PickRecord, Timestamp};
use sutura_core::render::{Quality, SliceGeometry};

/// How long the 3D view must be still before its full-quality pass is asked for.
const SETTLE_SECS: f64 = 0.25;
/// A plane view whose last full-resolution redraw took longer than this shows half-resolution
/// pictures while it moves (one frame at 60 Hz).
const PLANE_BUDGET_MS: f64 = 16.0;
/// Width of the strip of small views, in points.
const STRIP_WIDTH: f32 = 232.0;

/// The smoke run: puts each view on the stage in turn, says on stdout when its full picture is
/// on screen, holds it for a screenshot, then closes the window. Driven by environment
/// variables (see [`Smoke::from_env`]).
pub struct Smoke {
    sequence: Vec<ViewId>,
    step: usize,
    ready_at: Option<f64>,
    hold_secs: f64,
    started: Instant,
    deadline: Duration,
    frames: u64,
    max_frames: u64,
    failed: Arc<AtomicBool>,
    /// `SUTURA_SMOKE=desk`: the desk sequence (a specimen with its landmarks while placing,
    /// then the analysis view) instead of the views one by one.
    desk: bool,
}

impl Smoke {
    /// `SUTURA_SMOKE=1` turns it on (`desk`: the desk sequence on a project); `SUTURA_SMOKE_HOLD` (seconds a view stays, default 2.5)
    /// and `SUTURA_SMOKE_FRAMES` (the most frames before giving up, default 20000) tune it.
    #[must_use]
    pub fn from_env(failed: Arc<AtomicBool>) -> Option<Self> {
        let on = std::env::var("SUTURA_SMOKE").is_ok_and(|v| !v.is_empty() && v != "0");
        if !on {
            return None;
        }
        let num = |name: &str, default: f64| {
            std::env::var(name)
                .ok()
                .and_then(|v| v.parse::<f64>().ok())
                .filter(|v| v.is_finite() && *v > 0.0)
                .unwrap_or(default)
        };
        Some(Self {
            sequence: vec![
                ViewId::PlaneK,
                ViewId::PlaneI,
                ViewId::PlaneJ,
                ViewId::Oblique,
                ViewId::Volume,
            ],
            step: 0,
            ready_at: None,
            hold_secs: num("SUTURA_SMOKE_HOLD", 2.5),
            started: Instant::now(),
            deadline: Duration::from_mins(4),
            frames: 0,
            max_frames: num("SUTURA_SMOKE_FRAMES", 20_000.0) as u64,
            failed,
            desk: std::env::var("SUTURA_SMOKE").is_ok_and(|v| v == "desk"),
        })
    }
}

/// The workstation.
pub struct App {
    doc: Document,
    prefs: Preferences,
    vs: ViewState,
    pending: Vec<Command>,
    ctx: Option<egui::Context>,
    workers: Option<Workers>,
    loading: Option<Loading>,
    shown: [Option<Shown>; 5],
    sent: [Option<RenderKey>; 5],
    rects: [Option<Rect>; 5],
    /// How long each view's last full-resolution picture took to render, milliseconds.
    render_ms: [f64; 5],
    next_scan_id: u64,
    dialog: Option<FileBrowser>,
    smoke: Option<Smoke>,
    desk: DeskUi,
    analysis: AnalysisState,
    /// The window was told to close (after any question about unsaved changes).
    closing: bool,
}

/// What the app does once the unsaved-changes question is answered.
#[derive(Clone, Debug, PartialEq)]
pub enum After {
    Quit,
    Open(PathBuf),
}

/// A question the app is waiting for the user to answer.
pub enum Prompt {
    /// The project has unsaved changes: save, discard or cancel, then do this.
    Unsaved(After),
    /// An autosave newer than the project file was found.
    Autosave(std::time::SystemTime),
    /// A specimen's scan is not the one its landmarks were placed on.
    Mismatch {
        specimen: String,
        scan: Box<Scan>,
        why: String,
    },
    /// The operator's name, asked before the first trial.
    Operator,
}

/// The desk's view state: never saved.
#[derive(Default)]
struct DeskUi {
    workspace: Workspace,
    placing: bool,
    /// The iso-value snapping looks for (the scan's ISO-50 when it opens).
    snap_threshold: Option<f64>,
    /// The controls column shows the scan's controls instead of the desk.
    scan_tab: bool,
    prompt: Option<Prompt>,
    /// The note being typed, and the (specimen, trial, landmark) it belongs to.
    note: String,
    note_for: Option<(String, String, String)>,
    /// The specimen whose scan is shown, and whether it failed its fingerprint check.
    scan_of: Option<String>,
    scan_read_only: bool,
    operator_text: String,
    /// The curve and segment being traced.
    tracing: Option<(String, usize)>,
}

impl App {
    /// An app with these preferences; `open` is queued to be opened on the first frame.
    #[must_use]
    pub fn new(prefs: Preferences, open: Option<PathBuf>) -> Self {
        let mut app = Self {
            doc: Document::default(),
            prefs,
            vs: ViewState::default(),
            pending: Vec::new(),
            ctx: None,
            workers: None,
            loading: None,
            shown: Default::default(),
            sent: [None; 5],
            rects: [None; 5],
            render_ms: [0.0; 5],
            next_scan_id: 0,
            dialog: None,
            smoke: None,
            desk: DeskUi::default(),
            analysis: AnalysisState::default(),
            closing: false,
        };
        if let Some(p) = open {
            app.send(Command::Open(p));
        }
        app
    }

    /// Runs the smoke sequence in this app.
    #[must_use]
    pub fn with_smoke(mut self, smoke: Option<Smoke>) -> Self {
        self.smoke = smoke;
        self
    }

    /// Queues a command, applied at the start of the next frame (as if a panel returned it).
    pub fn send(&mut self, cmd: Command) {
        self.pending.push(cmd);
    }

    #[must_use]
    pub fn document(&self) -> &Document {
        &self.doc
    }

    #[must_use]
    pub fn preferences(&self) -> &Preferences {
        &self.prefs
    }

    #[must_use]
    pub fn view_state(&self) -> &ViewState {
        &self.vs
    }

    /// The open project, if any.
    #[must_use]
    pub fn session(&self) -> Option<&Session> {
        self.doc.session.as_ref()
    }

    /// The open project, for tests that tune it (e.g. the autosave delay).
    pub fn session_mut(&mut self) -> Option<&mut Session> {
        self.doc.session.as_mut()
    }

    /// Whether placing mode is on.
    #[must_use]
    pub fn is_placing(&self) -> bool {
        self.desk.placing
    }

    /// The iso-value snapping looks for.
    #[must_use]
    pub fn snap_threshold(&self) -> Option<f64> {
        self.desk.snap_threshold
    }

    /// The question the app waits on, if any.
    #[must_use]
    pub fn prompt(&self) -> Option<&Prompt> {
        self.desk.prompt.as_ref()
    }

    #[must_use]
    pub fn workspace(&self) -> Workspace {
        self.desk.workspace
    }

    /// The specimen whose scan is shown.
    #[must_use]
    pub fn scan_of(&self) -> Option<&str> {
        self.desk.scan_of.as_deref()
    }

    #[must_use]
    pub fn analysis(&self) -> &AnalysisState {
        &self.analysis
    }

    /// Whether the app told its window to close.
    #[must_use]
    pub fn is_closing(&self) -> bool {
        self.closing
    }

    /// Whether a scan is being opened.
    #[must_use]
    pub fn is_loading(&self) -> bool {
        self.loading.is_some()
    }

    /// Whether the view shows its latest requested picture (no render outstanding).
    #[must_use]
    pub fn is_view_current(&self, view: ViewId) -> bool {
        let i = view.index();
        match (&self.shown[i], &self.sent[i]) {
            (Some(s), Some(k)) => s.key == *k,
            _ => false,
        }
    }

    /// Where each view was drawn in the last frame.
    #[must_use]
    pub fn view_rect(&self, view: ViewId) -> Option<Rect> {
        self.rects[view.index()]
    }

    /// One frame of the whole UI (what [`eframe::App::ui`] calls; tests call it directly).
    pub fn ui_for_test(&mut self, ui: &mut egui::Ui) {
        self.frame(ui);
    }

    #[allow(clippy::too_many_lines)] // reason: one frame in order: input, panels, commands, renders
    fn frame(&mut self, ui: &mut egui::Ui) {
        let ctx = ui.ctx().clone();
        if self.ctx.is_none() {
            style(&ctx);
            let c = ctx.clone();
            self.workers = Some(Workers::start(move || c.request_repaint()));
            self.ctx = Some(ctx.clone());
        }
        let now = ctx.input(|i| i.time);
        let mut cmds = std::mem::take(&mut self.pending);
        self.poll_loading();
        self.poll_renders(&ctx);
        self.analysis.poll();
        self.autosave_tick(&ctx);
        if ctx.input(|i| i.viewport().close_requested()) && !self.closing {
            if self.doc.session.as_ref().is_some_and(Session::is_dirty) {
                ctx.send_viewport_cmd(egui::ViewportCommand::CancelClose);
                self.desk.prompt = Some(Prompt::Unsaved(After::Quit));
            } else {
                self.closing = true;
            }
        }
        self.vs.hover = None;
        self.rects = [None; 5];

        if !ctx.egui_wants_keyboard_input() && self.dialog.is_none() && self.desk.prompt.is_none() {
            if self.doc.session.is_some() {
                desk_shortcuts(&ctx, self.desk.placing, &mut cmds);
            }
            shortcuts(
                &ctx,
                &self.prefs,
                &self.vs,
                self.loading.is_some(),
                &mut cmds,
            );
        }
        let dropped: Vec<PathBuf> = ctx.input(|i| {
            i.raw
                .dropped_files
                .iter()
                .map(|f| f.path().to_path_buf())
                .collect()
        });
        if let Some(p) = dropped.into_iter().next() {
            cmds.push(Command::Open(p));
        }

        egui::Panel::top("top_bar").show(ui, |ui| {
            cmds.extend(panels::top_bar_ui(
                ui,
                &self.doc,
                &self.prefs,
                self.desk.workspace,
            ));
        });
        egui::Panel::bottom("status_line").show(ui, |ui| {
            panels::status_ui(ui, &self.doc, &self.vs);
        });
        let analysing = self.desk.workspace == Workspace::Analysis && self.doc.session.is_some();
        egui::Panel::left("controls")
            .resizable(true)
            .default_size(if self.doc.session.is_some() {
                290.0
            } else {
                250.0
            })
            .min_size(200.0)
            .show(ui, |ui| self.controls_ui(ui, &mut cmds));
        if analysing {
            egui::CentralPanel::default().show(ui, |ui| {
                if let Some(s) = &self.doc.session {
                    analysis_view::analysis_ui(ui, &self.analysis, &s.project, &mut cmds);
                }
            });
        } else if self.doc.scan.is_some() {
            let strip = match self.prefs.strip_side {
                super::state::StripSide::Left => egui::Panel::left("strip"),
                super::state::StripSide::Right => egui::Panel::right("strip"),
            };
            strip
                .exact_size(STRIP_WIDTH)
                .resizable(false)
                .show(ui, |ui| self.strip_ui(ui, &mut cmds));
        }
        if !analysing {
            egui::CentralPanel::no_frame()
                .frame(egui::Frame::new().fill(Color32::from_rgb(20, 23, 28)))
                .show(ui, |ui| self.stage_ui(ui, &mut cmds));
        }

        if let Some(l) = &self.loading {
            cmds.extend(panels::loading_ui(&ctx, l));
        }
        cmds.extend(panels::help_ui(&ctx, self.vs.help_open));
        self.dialog_ui(&ctx, &mut cmds);
        self.prompt_ui(&ctx, &mut cmds);
        if ctx.input(|i| !i.raw.hovered_files.is_empty()) {
            drop_hint(&ctx);
        }

        let changed = !cmds.is_empty();
        for c in cmds {
            self.apply(c, now);
        }
        self.request_renders(&ctx, now);
        if changed {
            ctx.request_repaint();
        }
        self.smoke_step(&ctx, now);
    }

    fn stage_ui(&mut self, ui: &mut egui::Ui, cmds: &mut Vec<Command>) {
        let rect = ui.available_rect_before_wrap().shrink(6.0);
        let Some(scan) = self.doc.scan.clone() else {
            let painter = ui.painter_at(rect);
            painter.rect_filled(rect, 6.0, VIEW_BACKGROUND);
            let text = if self.loading.is_some() {
                "opening…"
            } else {
                "Open a scan: Scan > Open scan file (Ctrl+O), or drop a file or folder here"
            };
            painter.text(
                rect.center(),
                egui::Align2::CENTER_CENTER,
                text,
                egui::FontId::proportional(16.0),
                Color32::from_gray(170),
            );
            return;
        };
        let view = self.prefs.stage;
        self.rects[view.index()] = Some(rect);
        view_ui(
            ui,
            rect,
            view,
            true,
            &scan,
            &self.prefs,
            &mut self.vs,
            self.shown[view.index()].as_ref(),
            desk_of(&self.doc, &self.desk),
            cmds,
        );
    }

    fn strip_ui(&mut self, ui: &mut egui::Ui, cmds: &mut Vec<Command>) {
        let Some(scan) = self.doc.scan.clone() else {
            return;
        };
        let others: Vec<ViewId> = ViewId::ALL
            .into_iter()
            .filter(|v| *v != self.prefs.stage)
            .collect();
        let area = ui.available_rect_before_wrap();
        let gap = 6.0;
        let h =
            ((area.height() - gap * (others.len() as f32 + 1.0)) / others.len() as f32).max(40.0);
        for (n, v) in others.iter().enumerate() {
            let top = area.min.y + gap + n as f32 * (h + gap);
            let rect = Rect::from_min_size(
                egui::pos2(area.min.x + 2.0, top),
                Vec2::new(area.width() - 4.0, h),
            );
            self.rects[v.index()] = Some(rect);
            view_ui(
                ui,
                rect,
                *v,
                false,
                &scan,
                &self.prefs,
                &mut self.vs,
                self.shown[v.index()].as_ref(),
                Desk {
                    placing: false,
                    ..desk_of(&self.doc, &self.desk)
                },
                cmds,
            );
        }
    }

    /// The controls column: with a project open, the desk or the scan's controls.
    fn controls_ui(&mut self, ui: &mut egui::Ui, cmds: &mut Vec<Command>) {
        let Some(s) = &self.doc.session else {
            cmds.extend(panels::controls_ui(ui, &self.doc, &self.prefs, &self.vs));
            return;
        };
        ui.add_space(4.0);
        ui.horizontal(|ui| {
            if ui
                .selectable_label(!self.desk.scan_tab, RichText::new("Digitise").strong())
                .clicked()
            {
                self.desk.scan_tab = false;
            }
            if ui
                .selectable_label(self.desk.scan_tab, RichText::new("Scan").strong())
                .on_hover_text("window, colours, oblique plane, 3D view")
                .clicked()
            {
                self.desk.scan_tab = true;
            }
        });
        ui.separator();
        if self.desk.scan_tab {
            cmds.extend(panels::controls_ui(ui, &self.doc, &self.prefs, &self.vs));
            return;
        }
        // the note field follows the current landmark
        let key = s
            .specimen
            .clone()
            .zip(s.trial.clone())
            .zip(s.current.clone())
            .map(|((a, b), c)| (a, b, c));
        if key != self.desk.note_for {
            self.desk.note = key
                .as_ref()
                .and_then(|(_, _, c)| s.trial_ref()?.landmark(c)?.note.clone())
                .unwrap_or_default();
            self.desk.note_for = key;
        }
        digitise::desk_ui(
            ui,
            s,
            &self.prefs,
            &digitise::DeskFlags {
                placing: self.desk.placing,
                snap_threshold: self.desk.snap_threshold,
                tracing: self.desk.tracing.clone(),
            },
            &mut self.desk.note,
            cmds,
        );
    }

    /// The modal questions: unsaved changes, autosave recovery, scan mismatch, operator.
    #[allow(clippy::too_many_lines)] // reason: four short dialogs, each read top to bottom
    fn prompt_ui(&mut self, ctx: &egui::Context, cmds: &mut Vec<Command>) {
        let Some(p) = self.desk.prompt.take() else {
            return;
        };
        let mut keep = true;
        let name = self
            .doc
            .session
            .as_ref()
            .map(Session::name)
            .unwrap_or_default();
        let modal = egui::Modal::new(egui::Id::unique("sutura-prompt"));
        let _ = modal.show(ctx, |ui| {
            ui.set_width(420.0);
            match &p {
                Prompt::Unsaved(after) => {
                    ui.heading("Unsaved changes");
                    let what = match after {
                        After::Quit => "before quitting",
                        After::Open(_) => "before opening another file",
                    };
                    ui.label(format!(
                        "{name} has changes that are not saved. Save them {what}?"
                    ));
                    ui.add_space(8.0);
                    ui.horizontal(|ui| {
                        if ui.button("Save changes").clicked() {
                            cmds.push(Command::Unsaved(Answer::Save));
                        }
                        if ui.button("Discard changes").clicked() {
                            cmds.push(Command::Unsaved(Answer::Discard));
                        }
                        if ui.button("Cancel").clicked() {
                            cmds.push(Command::Unsaved(Answer::Cancel));
                        }
                    });
                }
                Prompt::Autosave(when) => {
                    ui.heading("Recover unsaved work?");
                    let ago = when
                        .elapsed()
                        .map_or_else(|_| "recently".to_owned(), |d| ago_text(d.as_secs()));
                    ui.label(format!(
                        "An autosave of {name} written {ago} holds changes that were never \
                         saved (the program may have stopped unexpectedly)."
                    ));
                    ui.add_space(8.0);
                    ui.horizontal(|ui| {
                        if ui.button("Recover").clicked() {
                            cmds.push(Command::Autosave(true));
                        }
                        if ui.button("Discard autosave").clicked() {
                            cmds.push(Command::Autosave(false));
                        }
                    });
                }
                Prompt::Mismatch { specimen, why, .. } => {
                    ui.heading("Not the recorded scan");
                    ui.label(format!(
                        "The scan found for {specimen} is not the one its landmarks were placed on:"
                    ));
                    ui.label(RichText::new(why).monospace().small());
                    ui.label(
                        "Open it anyway to look (its landmarks cannot be changed), or cancel and \
                         put the right scan in place.",
                    );
                    ui.add_space(8.0);
                    ui.horizontal(|ui| {
                        if ui.button("Open read-only").clicked() {
                            cmds.push(Command::Mismatch(true));
                        }
                        if ui.button("Cancel").clicked() {
                            cmds.push(Command::Mismatch(false));
                        }
                    });
                }
                Prompt::Operator => {
                    ui.heading("Who is digitising?");
                    ui.label("Trials record their operator. Your name is kept for later trials.");
                    let r = ui.add(
                        egui::TextEdit::singleline(&mut self.desk.operator_text)
                            .hint_text("your name or initials"),
                    );
                    r.request_focus();
                    let enter = r.lost_focus() && ui.input(|i| i.key_pressed(Key::Enter));
                    ui.horizontal(|ui| {
                        let ok = !self.desk.operator_text.trim().is_empty();
                        if (ui
                            .add_enabled(ok, egui::Button::new("Start trial"))
                            .clicked()
                            || enter)
                            && ok
                        {
                            cmds.push(Command::SetOperator(self.desk.operator_text.clone()));
                        }
                        if ui.button("Cancel").clicked() {
                            keep = false;
                        }
                    });
                }
            }
        });
        if keep {
            self.desk.prompt = Some(p);
        }
    }

    fn dialog_ui(&mut self, ctx: &egui::Context, cmds: &mut Vec<Command>) {
        let Some(d) = &mut self.dialog else {
            return;
        };
        if ctx.input(|i| i.key_pressed(Key::Escape)) {
            self.dialog = None;
            return;
        }
        match d.show(ctx) {
            Some(files::Outcome::Open(p)) => {
                cmds.push(if d.kind() == DialogKind::ExportFolder {
                    Command::SetExportFolder(p)
                } else {
                    Command::Open(p)
                });
                self.dialog = None;
            }
            Some(files::Outcome::Cancelled) => self.dialog = None,
            None => {}
        }
    }

    /// Applies one command.
    pub fn apply(&mut self, cmd: Command, now: f64) {
        if let Some(s) = &self.smoke
            && let Command::MoveCursor(p) = &cmd
        {
            println!(
                "smoke: crosshair moved to {:.3} {:.3} {:.3} (step {})",
                p.0.x, p.0.y, p.0.z, s.step
            );
        }
        match cmd {
            Command::Open(path) => {
                if self.doc.session.as_ref().is_some_and(Session::is_dirty) {
                    self.desk.prompt = Some(Prompt::Unsaved(After::Open(path)));
                } else if is_project_path(&path) {
                    self.open_project(&path);
                } else {
                    self.close_project();
                    self.open(&path);
                }
            }
            Command::ShowOpenDialog(kind) => {
                let start = self
                    .doc
                    .session
                    .as_ref()
                    .and_then(|s| s.path.parent().map(Path::to_path_buf))
                    .or_else(|| {
                        self.doc
                            .scan
                            .as_ref()
                            .and_then(|s| s.path.parent().map(Path::to_path_buf))
                    })
                    .or_else(|| std::env::current_dir().ok())
                    .unwrap_or_else(|| PathBuf::from("."));
                self.dialog = Some(FileBrowser::new(kind, &start));
            }
            Command::SetTiffVoxelSize(text) => match tiff_voxel_size(&text) {
                Ok(_) => text.trim().clone_into(&mut self.prefs.tiff_voxel_size),
                Err(e) => self.vs.message = Some((e, true)),
            },
            Command::CancelLoad => {
                if let Some(l) = &self.loading {
                    l.cancel();
                }
            }
            Command::Quit => {
                if self.doc.session.as_ref().is_some_and(Session::is_dirty) {
                    self.desk.prompt = Some(Prompt::Unsaved(After::Quit));
                } else {
                    self.close_window();
                }
            }
            Command::ToggleHelp => self.vs.help_open = !self.vs.help_open,
            Command::SetStage(v) => self.prefs.stage = v,
            Command::CycleStage(by) => self.prefs.stage = self.prefs.stage.cycled(by),
            Command::ToggleCrosshair => self.prefs.show_crosshair = !self.prefs.show_crosshair,
            Command::ToggleScaleBar => self.prefs.show_scale_bar = !self.prefs.show_scale_bar,
            other => {
                if let Err(other) = self.apply_desk(other)
                    && let Some(scan) = self.doc.scan.clone()
                {
                    self.vs.apply(&scan, &mut self.prefs, &other, now);
                }
            }
        }
    }

    fn close_window(&mut self) {
        if let Some(s) = &self.doc.session
            && !s.is_dirty()
        {
            s.remove_autosave();
        }
        self.closing = true;
        if let Some(ctx) = &self.ctx {
            ctx.send_viewport_cmd(egui::ViewportCommand::Close);
        }
    }

    /// Closes the project (its unsaved changes, if any, already answered for).
    fn close_project(&mut self) {
        self.doc.session = None;
        self.desk = DeskUi {
            scan_tab: self.desk.scan_tab,
            ..DeskUi::default()
        };
        self.analysis = AnalysisState::default();
    }

    /// Opens a landmark project: its first specimen's scan starts loading, and a newer
    /// autosave is offered.
    fn open_project(&mut self, path: &Path) {
        match Session::open(path) {
            Ok((session, status)) => {
                self.close_project();
                let read_only = session.read_only.then(|| session.read_only_why.clone());
                let name = session.name();
                match status {
                    AutosaveStatus::Newer { modified } => {
                        self.desk.prompt = Some(Prompt::Autosave(modified));
                    }
                    AutosaveStatus::Stale => session.remove_autosave(),
                    AutosaveStatus::None => {}
                }
                self.doc.session = Some(session);
                self.prefs.remember(path.to_path_buf());
                self.vs.message = Some(if let Some(why) = read_only {
                    (format!("{name} {why}: read-only here"), true)
                } else {
                    (format!("opened project {name}"), false)
                });
                self.load_specimen();
            }
            Err(e) => self.vs.message = Some((e.to_string(), true)),
        }
    }

    /// Starts loading the selected specimen's scan (unless it is the one shown).
    fn load_specimen(&mut self) {
        let Some(s) = &self.doc.session else {
            return;
        };
        let Some(sp) = s.specimen_ref() else {
            return;
        };
        if self.desk.scan_of.as_deref() == Some(sp.id.as_str()) && self.doc.scan.is_some() {
            return;
        }
        if let Some(l) = &self.loading {
            l.cancel();
        }
        self.next_scan_id += 1;
        let wake = self.ctx.clone();
        self.loading = Some(Loading::start_specimen(
            &s.path,
            &sp.id,
            sp.scan.clone(),
            self.next_scan_id,
            move || {
                if let Some(c) = &wake {
                    c.request_repaint();
                }
            },
        ));
    }

    /// Writes the autosave when it is due, and wakes the app when it will be.
    fn autosave_tick(&mut self, ctx: &egui::Context) {
        let Some(s) = &mut self.doc.session else {
            return;
        };
        if !s.autosave_pending() {
            return;
        }
        match s.autosave_if_due() {
            Ok(true) => {}
            Ok(false) => ctx.request_repaint_after(s.autosave_delay),
            Err(e) => self.vs.message = Some((format!("autosave failed: {e}"), true)),
        }
    }

    /// Applies an edit to the project, reporting a refusal on the status line.
    fn edit(&mut self, edit: Edit) -> bool {
        let Some(s) = &mut self.doc.session else {
            return false;
        };
        match s.edit(edit) {
            Ok(()) => {
                self.analysis.stale = self.analysis.result.is_some();
                self.desk.note_for = None;
                true
            }
            Err(e) => {
                self.vs.message = Some((e, true));
                false
            }
        }
    }

    /// The selected specimen and trial, ready for a landmark edit; says why not otherwise.
    fn target(&mut self) -> Option<(String, String)> {
        let s = self.doc.session.as_ref()?;
        let why = if s.specimen.is_none() {
            Some("select a specimen first")
        } else if s.trial.is_none() {
            Some("start a trial first: New trial (Ctrl+T)")
        } else if self.desk.scan_read_only && self.desk.scan_of == s.specimen {
            Some("this specimen's scan is not the recorded one: its landmarks cannot be changed")
        } else {
            None
        };
        if let Some(w) = why {
            self.vs.message = Some((w.to_owned(), true));
            return None;
        }
        s.specimen.clone().zip(s.trial.clone())
    }

    /// The desk's commands; gives back the ones that are not.
    #[allow(clippy::too_many_lines)] // reason: one arm per command, each short
    fn apply_desk(&mut self, cmd: Command) -> Result<(), Command> {
        match cmd {
            Command::SelectSpecimen(id) => {
                if let Some(s) = &mut self.doc.session {
                    s.select_specimen(&id);
                }
                self.load_specimen();
            }
            Command::SelectTrial(id) => {
                if let Some(s) = &mut self.doc.session {
                    s.select_trial(&id);
                }
            }
            Command::StartTrial => {
                if self.doc.session.is_none() {
                    return Ok(());
                }
                if self.prefs.operator.trim().is_empty() {
                    self.desk.operator_text.clear();
                    self.desk.prompt = Some(Prompt::Operator);
                    return Ok(());
                }
                let op = self.prefs.operator.clone();
                if let Some(s) = &mut self.doc.session {
                    match s.start_trial(&op) {
                        Ok(t) => {
                            self.vs.message = Some((
                                format!(
                                    "trial {t} started by {op}; other trials are hidden. \
                                     Placing is on: click the stage to place {}",
                                    s.current.clone().unwrap_or_default()
                                ),
                                false,
                            ));
                            self.desk.placing = true;
                            self.analysis.stale = self.analysis.result.is_some();
                        }
                        Err(e) => self.vs.message = Some((e, true)),
                    }
                }
            }
            Command::SetOperator(name) => {
                let name = name.trim().to_owned();
                if !name.is_empty() {
                    self.prefs.operator = name;
                    self.desk.prompt = None;
                    self.pending.push(Command::StartTrial);
                }
            }
            Command::SelectLandmark(id) => {
                if let Some(s) = &mut self.doc.session {
                    s.current = Some(id);
                }
            }
            Command::StepLandmark(by) => {
                if let Some(s) = &mut self.doc.session {
                    s.current = s.stepped(by);
                }
            }
            Command::TogglePlacing => {
                if self.doc.session.is_some() {
                    self.desk.placing = !self.desk.placing;
                    self.vs.drag = None;
                }
            }
            Command::PlaceOnPlane { view, at } => self.place_on_plane(view, at),
            Command::PlaceOnSurface { origin, direction } => {
                self.place_on_surface(origin, direction);
            }
            Command::MoveLandmark { landmark, to } => {
                if let Some((specimen, trial)) = self.target() {
                    let to = self
                        .doc
                        .scan
                        .as_ref()
                        .map_or(to, |sc| super::state::clamp_to_volume(&sc.volume, to));
                    if self.edit(Edit::SetLandmark {
                        specimen,
                        trial,
                        landmark: landmark.clone(),
                        position_mm: [to.0.x, to.0.y, to.0.z],
                        method: Method::Slice,
                        pick: None,
                        at: Timestamp::now(),
                    }) {
                        self.vs.message = Some((format!("moved {landmark}"), false));
                    }
                }
            }
            Command::MarkMissing => {
                let Some(lm) = self.doc.session.as_ref().and_then(|s| s.current.clone()) else {
                    return Ok(());
                };
                if let Some((specimen, trial)) = self.target()
                    && self.edit(Edit::MarkMissing {
                        specimen,
                        trial,
                        landmark: lm.clone(),
                        at: Timestamp::now(),
                    })
                    && let Some(s) = &mut self.doc.session
                {
                    s.current = s.first_open_after(Some(&lm));
                    self.vs.message = Some((format!("{lm} marked missing"), false));
                }
            }
            Command::ClearLandmark => {
                let Some(lm) = self.doc.session.as_ref().and_then(|s| s.current.clone()) else {
                    return Ok(());
                };
                if let Some((specimen, trial)) = self.target()
                    && self
                        .doc
                        .session
                        .as_ref()
                        .is_some_and(|s| s.state_of(&lm).is_some())
                {
                    self.edit(Edit::ClearLandmark {
                        specimen,
                        trial,
                        landmark: lm,
                    });
                }
            }
            Command::SetNote { landmark, note } => {
                if let Some((specimen, trial)) = self.target() {
                    let note = note.trim();
                    self.edit(Edit::SetNote {
                        specimen,
                        trial,
                        landmark,
                        note: (!note.is_empty()).then(|| note.to_owned()),
                    });
                }
            }
            Command::GoToLandmark => {
                let p = self.doc.session.as_ref().and_then(|s| {
                    let c = s.current.as_deref()?;
                    s.trial_ref()?.position(c)
                });
                if let (Some(p), Some(scan)) = (p, self.doc.scan.clone()) {
                    let cmd = Command::MoveCursor(WorldPoint::new(p[0], p[1], p[2]));
                    self.vs.apply(&scan, &mut self.prefs, &cmd, 0.0);
                }
            }
            Command::SetTracing(t) => {
                self.desk.tracing.clone_from(&t);
                if let Some((c, seg)) = t {
                    self.desk.placing = true;
                    self.vs.message = Some((
                        format!(
                            "tracing {c}, segment {}: click control points in order from its \
                             first anchor to its second; Ctrl+Z takes one back",
                            seg + 1
                        ),
                        false,
                    ));
                }
            }
            Command::CycleTracing => {
                let Some(s) = &self.doc.session else {
                    return Ok(());
                };
                let all: Vec<(String, usize)> = s
                    .project
                    .scheme()
                    .curves
                    .iter()
                    .flat_map(|c| (0..c.segments()).map(|k| (c.id.clone(), k)))
                    .collect();
                let next = match &self.desk.tracing {
                    None => all.first().cloned(),
                    Some(t) => all
                        .iter()
                        .position(|x| x == t)
                        .and_then(|i| all.get(i + 1).cloned()),
                };
                if next.is_none() {
                    self.vs.message = Some(("back to placing landmarks".to_owned(), false));
                }
                self.pending.push(Command::SetTracing(next));
            }
            Command::ClearCurve(curve) => {
                if let Some((specimen, trial)) = self.target()
                    && self
                        .doc
                        .session
                        .as_ref()
                        .and_then(|s| s.trial_ref())
                        .is_some_and(|t| t.curve(&curve).is_some())
                {
                    self.edit(Edit::ClearCurve {
                        specimen,
                        trial,
                        curve,
                    });
                }
            }
            Command::ToggleSnap => self.prefs.snap = !self.prefs.snap,
            Command::SetSnapThreshold(t) => {
                if t.is_finite() {
                    self.desk.snap_threshold = Some(t);
                }
            }
            Command::Undo | Command::Redo => {
                let undo = cmd == Command::Undo;
                let Some(s) = &mut self.doc.session else {
                    return Ok(());
                };
                let r = if undo { s.undo() } else { s.redo() };
                if s.current.is_none() {
                    s.current = s.first_open_after(None);
                }
                self.desk.note_for = None;
                self.vs.message = Some(match r {
                    Some(Ok(what)) => {
                        self.analysis.stale = self.analysis.result.is_some();
                        (
                            format!("{} {what}", if undo { "undid" } else { "redid" }),
                            false,
                        )
                    }
                    Some(Err(e)) => (e, true),
                    None => (
                        format!("nothing to {}", if undo { "undo" } else { "redo" }),
                        false,
                    ),
                });
            }
            Command::Save => {
                if let Some(s) = &mut self.doc.session {
                    self.vs.message = Some(match s.save() {
                        Ok(()) => (format!("saved {}", s.path.display()), false),
                        Err(e) => (e, true),
                    });
                }
            }
            Command::Unsaved(answer) => {
                let Some(Prompt::Unsaved(after)) = self.desk.prompt.take() else {
                    return Ok(());
                };
                let go = match answer {
                    Answer::Cancel => false,
                    Answer::Save => match self.doc.session.as_mut().map(Session::save) {
                        Some(Err(e)) => {
                            self.vs.message = Some((e, true));
                            false
                        }
                        _ => true,
                    },
                    Answer::Discard => {
                        if let Some(s) = &mut self.doc.session {
                            s.discard_changes();
                        }
                        true
                    }
                };
                if go {
                    match after {
                        After::Quit => self.close_window(),
                        After::Open(p) => self.pending.push(Command::Open(p)),
                    }
                }
            }
            Command::Autosave(recover) => {
                if !matches!(self.desk.prompt, Some(Prompt::Autosave(_))) {
                    return Ok(());
                }
                self.desk.prompt = None;
                if let Some(s) = &mut self.doc.session {
                    if recover {
                        self.vs.message = Some(match s.recover_autosave() {
                            Ok(()) => (
                                "recovered the autosave: save (Ctrl+S) to keep it".to_owned(),
                                false,
                            ),
                            Err(e) => (e, true),
                        });
                    } else {
                        s.remove_autosave();
                    }
                }
                self.load_specimen();
            }
            Command::Mismatch(open) => {
                if let Some(Prompt::Mismatch { specimen, scan, .. }) = self.desk.prompt.take() {
                    if open {
                        self.install(*scan);
                        self.desk.scan_of = Some(specimen.clone());
                        self.desk.scan_read_only = true;
                        self.vs.message = Some((
                            format!("{specimen}: not the recorded scan, opened read-only"),
                            true,
                        ));
                    } else {
                        self.vs.message = Some((format!("{specimen}: scan not opened"), false));
                    }
                }
            }
            Command::SetWorkspace(w) => {
                if self.doc.session.is_some() {
                    self.desk.workspace = w;
                    self.vs.drag = None;
                }
            }
            Command::RunAnalysis => {
                if let Some(s) = &self.doc.session
                    && !self.analysis.is_running()
                {
                    let wake = self.ctx.clone();
                    self.analysis.start(&s.project, move || {
                        if let Some(c) = &wake {
                            c.request_repaint();
                        }
                    });
                }
            }
            Command::ToggleWorkspace => {
                let w = match self.desk.workspace {
                    Workspace::Digitise => Workspace::Analysis,
                    Workspace::Analysis => Workspace::Digitise,
                };
                self.pending.push(Command::SetWorkspace(w));
            }
            Command::ToggleLabels => self.prefs.landmark_labels = !self.prefs.landmark_labels,
            Command::SetAxes(a) => self.analysis.axes = a,
            Command::SetExportFolder(p) => self.analysis.folder = Some(p),
            Command::Export(kind) => {
                let (Some(s), Some(folder)) = (&self.doc.session, &self.analysis.folder) else {
                    return Ok(());
                };
                let r = analysis_view::export(
                    kind,
                    folder,
                    &s.project,
                    &s.path,
                    self.analysis.result.as_deref(),
                );
                let msg = match r {
                    Ok(m) => (m, false),
                    Err(e) => (e, true),
                };
                self.vs.message = Some(msg.clone());
                self.analysis.last_export = Some(msg);
            }
            other => return Err(other),
        }
        Ok(())
    }

    /// The current landmark's definition, if placing can go ahead on the shown scan.
    fn placing_target(&mut self) -> Option<(String, String, String, bool)> {
        let (specimen, trial) = self.target()?;
        let s = self.doc.session.as_ref()?;
        if self.desk.scan_of.as_deref() != Some(specimen.as_str()) || self.doc.scan.is_none() {
            self.vs.message = Some((format!("{specimen}: its scan is still opening"), true));
            return None;
        }
        let Some(lm) = s.current.clone() else {
            self.vs.message = Some((
                "every landmark is decided: pick one in the list to revise it".to_owned(),
                false,
            ));
            return None;
        };
        let on_surface = s.project.scheme().landmark(&lm)?.on_surface;
        Some((specimen, trial, lm, on_surface))
    }

    fn after_placing(&mut self, lm: &str, how: &str) {
        if let Some(s) = &mut self.doc.session {
            s.current = s.first_open_after(Some(lm));
            let next = s.current.as_deref().map_or_else(
                || "every landmark is decided".to_owned(),
                |c| format!("next: {c}"),
            );
            self.vs.message = Some((format!("placed {lm}{how}; {next}"), false));
        }
    }

    /// Places the current landmark at a point clicked on a plane view, snapped to the
    /// boundary within reach when snapping is on and the landmark lies on the surface.
    fn place_on_plane(&mut self, view: ViewId, at: WorldPoint) {
        if self.desk.tracing.is_some() {
            if let Some(scan) = self.doc.scan.clone() {
                self.trace_point(super::state::clamp_to_volume(&scan.volume, at));
            }
            return;
        }
        let Some((specimen, trial, lm, on_surface)) = self.placing_target() else {
            return;
        };
        let Some(scan) = self.doc.scan.clone() else {
            return;
        };
        let vol = &scan.volume;
        let at = super::state::clamp_to_volume(vol, at);
        let (_, _, normal) = view::plane_basis(vol, &self.vs, view);
        let mut placed = (at, Method::Slice, None, String::new());
        if self.prefs.snap && on_surface {
            let threshold = self
                .desk
                .snap_threshold
                .unwrap_or_else(|| scan.default_threshold());
            let sp = vol.spacing_mm();
            let options = PickOptions {
                threshold,
                max_distance_mm: SNAP_REACH_VOXELS * sp[0].min(sp[1]).min(sp[2]),
                refine_to_edge: true,
            };
            match pick_in_slice(vol, at, normal, SliceSearch::AllAround, &options) {
                Ok(Some(p)) if p.crossing != Crossing::VolumeFace => {
                    let d = p.point.0 - at.0;
                    let direction = d.try_normalize(1e-12).or(p.normal).unwrap_or(normal);
                    placed = (
                        p.point,
                        Method::Surface,
                        PickRecord::of(at, direction, threshold, &p),
                        format!(" (snapped {:.3} mm to the boundary)", d.norm()),
                    );
                }
                Ok(_) => {
                    placed.3 = format!(
                        " where clicked (no boundary at {} within {:.2} mm)",
                        view::format_value(threshold),
                        options.max_distance_mm
                    );
                }
                Err(e) => placed.3 = format!(" where clicked (snapping: {e})"),
            }
        }
        let (p, method, pick, how) = placed;
        if self.edit(Edit::SetLandmark {
            specimen,
            trial,
            landmark: lm.clone(),
            position_mm: [p.0.x, p.0.y, p.0.z],
            method,
            pick,
            at: Timestamp::now(),
        }) {
            self.after_placing(&lm, &how);
        }
    }

    /// Adds a control point to the curve segment being traced.
    fn trace_point(&mut self, p: WorldPoint) {
        let Some((curve, seg)) = self.desk.tracing.clone() else {
            return;
        };
        let Some((specimen, trial)) = self.target() else {
            return;
        };
        let Some(s) = &self.doc.session else {
            return;
        };
        let Some(def) = s.project.scheme().curve(&curve) else {
            return;
        };
        let n = def.segments();
        let mut traced = s
            .trial_ref()
            .and_then(|t| t.curve(&curve))
            .map_or_else(|| vec![Vec::new(); n], |c| c.traced_mm.clone());
        let seg = seg.min(n.saturating_sub(1));
        traced[seg].push([p.0.x, p.0.y, p.0.z]);
        let count = traced[seg].len();
        if self.edit(Edit::SetCurve {
            specimen,
            trial,
            curve: curve.clone(),
            traced_mm: traced,
            at: Timestamp::now(),
        }) {
            self.vs.message = Some((
                format!("{curve}, segment {}: {count} control points", seg + 1),
                false,
            ));
        }
    }

    /// Places the current landmark where the 3D view's pixel ray meets the surface shown
    /// (or, while tracing a curve, adds the point there to the curve).
    fn place_on_surface(&mut self, origin: WorldPoint, direction: nalgebra::Vector3<f64>) {
        let tracing = self.desk.tracing.is_some();
        let Some((specimen, trial, lm, on_surface)) = (if tracing {
            self.target().map(|(a, b)| (a, b, String::new(), true))
        } else {
            self.placing_target()
        }) else {
            return;
        };
        if !on_surface {
            self.vs.message = Some((
                format!(
                    "{lm} is a constructed point, not on the surface: place it on a plane view"
                ),
                true,
            ));
            return;
        }
        let Some(scan) = self.doc.scan.clone() else {
            return;
        };
        let vol = &scan.volume;
        let Some(dir) = direction.try_normalize(1e-12) else {
            return;
        };
        // start outside the volume so the first crossing is the surface the picture shows
        let d = vol.dims();
        let diag =
            vol.voxel_to_world(sutura_core::geometry::VoxelPoint::new(
                d[0] as f64,
                d[1] as f64,
                d[2] as f64,
            ))
            .0 - vol
                .voxel_to_world(sutura_core::geometry::VoxelPoint::new(-1.0, -1.0, -1.0))
                .0;
        let start = WorldPoint(origin.0 - dir * diag.norm());
        let threshold = self.vs.threshold;
        match pick_along_ray(vol, start, dir, &PickOptions::new(threshold)) {
            Ok(Some(p)) if p.crossing != Crossing::VolumeFace && tracing => {
                self.trace_point(p.point);
            }
            Ok(Some(p)) if p.crossing != Crossing::VolumeFace => {
                let ok = self.edit(Edit::SetLandmark {
                    specimen,
                    trial,
                    landmark: lm.clone(),
                    position_mm: [p.point.0.x, p.point.0.y, p.point.0.z],
                    method: Method::Surface,
                    pick: PickRecord::of(start, dir, threshold, &p),
                    at: Timestamp::now(),
                });
                if ok {
                    let cmd = Command::MoveCursor(p.point);
                    self.vs.apply(&scan, &mut self.prefs, &cmd, 0.0);
                    self.after_placing(&lm, " on the surface");
                }
            }
            Ok(_) => {
                self.vs.message = Some(("no surface under the pointer".to_owned(), true));
            }
            Err(e) => self.vs.message = Some((e.to_string(), true)),
        }
    }

    fn open(&mut self, path: &Path) {
        let voxel_size_mm = match tiff_voxel_size(&self.prefs.tiff_voxel_size) {
            Ok(v) => v,
            Err(e) => {
                self.vs.message = Some((e, true));
                return;
            }
        };
        if let Some(l) = &self.loading {
            l.cancel();
        }
        self.next_scan_id += 1;
        let options = OpenOptions {
            voxel_size_mm,
            ..OpenOptions::default()
        };
        let wake = self.ctx.clone();
        self.loading = Some(Loading::start(
            path,
            options,
            self.next_scan_id,
            move || {
                if let Some(c) = &wake {
                    c.request_repaint();
                }
            },
        ));
        self.vs.message = None;
    }

    /// Shows a volume already in memory as if it had just been opened from `path` (derived
    /// volumes, tests and the benchmark).
    pub fn open_volume(&mut self, path: PathBuf, volume: sutura_core::volume::Volume) {
        self.next_scan_id += 1;
        self.install(Scan::new(self.next_scan_id, path, volume));
    }

    fn install(&mut self, scan: Scan) {
        let help = self.vs.help_open;
        self.vs = ViewState::for_scan(&scan);
        self.vs.help_open = help;
        if let Some(ctx) = &self.ctx {
            ctx.send_viewport_cmd(egui::ViewportCommand::Title(format!(
                "Sutura — {}",
                scan.name()
            )));
        }
        self.desk.snap_threshold = scan.iso50.or_else(|| Some(scan.default_threshold()));
        self.desk.scan_of = None;
        self.desk.scan_read_only = false;
        self.doc.scan = Some(Arc::new(scan));
        self.shown = Default::default();
        self.sent = [None; 5];
        if let Some(w) = &mut self.workers {
            w.clear();
        }
    }

    /// The key of the last picture asked for in a view.
    #[must_use]
    pub fn requested(&self, view: ViewId) -> Option<RenderKey> {
        self.sent[view.index()]
    }

    fn poll_loading(&mut self) {
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
                let msg = format!("opened {} in {secs:.1} s", scan.name());
                self.install(scan);
                if let Some(sp) = specimen {
                    self.desk.scan_of = Some(sp.clone());
                    self.desk.scan_read_only = false;
                    if self.vs.message.as_ref().is_none_or(|m| !m.1) {
                        self.vs.message = Some((format!("{sp}: {msg}"), false));
                    }
                } else {
                    self.vs.message = Some((msg, false));
                    self.prefs.remember(path);
                }
            }
            Outcome::Mismatched(scan, why) => {
                if let Some(sp) = specimen {
                    self.desk.prompt = Some(Prompt::Mismatch {
                        specimen: sp,
                        scan: Box::new(scan),
                        why,
                    });
                }
            }
            Outcome::Failed(msg) => self.vs.message = Some((msg, true)),
            Outcome::Cancelled => {
                self.vs.message = Some((format!("cancelled opening {}", path.display()), false));
            }
        }
    }

    fn poll_renders(&mut self, ctx: &egui::Context) {
        let Some(w) = &self.workers else {
            return;
        };
        let scan_id = self.doc.scan.as_ref().map(|s| s.id);
        for r in w.finished() {
            let key_scan = match &r.key {
                RenderKey::Plane(k) => k.scan,
                RenderKey::Volume(k) => k.scan,
            };
            if Some(key_scan) != scan_id {
                continue;
            }
            let i = r.view.index();
            if !r.key.is_coarse() {
                self.render_ms[i] = r.elapsed.as_secs_f64() * 1e3;
            }
            if self.shown[i]
                .as_ref()
                .is_some_and(|s| s.generation >= r.generation)
            {
                continue;
            }
            match r.picture {
                Ok(pic) => {
                    if let Some(s) = &mut self.shown[i] {
                        s.texture.set(pic.image, TextureOptions::LINEAR);
                        s.key = r.key;
                        s.generation = r.generation;
                        s.hits = pic.hits;
                    } else {
                        let texture = ctx.load_texture(
                            format!("view-{}", r.view.label()),
                            pic.image,
                            TextureOptions::LINEAR,
                        );
                        self.shown[i] = Some(Shown {
                            texture,
                            key: r.key,
                            generation: r.generation,
                            hits: pic.hits,
                        });
                    }
                }
                Err(msg) => {
                    self.vs.message = Some((format!("{}: {msg}", r.view.label()), true));
                }
            }
        }
    }

    /// Asks for a new picture for every visible view whose key changed.
    fn request_renders(&mut self, ctx: &egui::Context, now: f64) {
        let (Some(scan), Some(workers)) = (self.doc.scan.clone(), self.workers.as_mut()) else {
            return;
        };
        let ppp = ctx.pixels_per_point();
        for view in ViewId::ALL {
            let i = view.index();
            let Some(rect) = self.rects[i] else {
                continue;
            };
            let pixels = pixels_for(rect, ppp);
            let on_stage = view == self.prefs.stage;
            let key = if view.is_plane() {
                let m = plane_map(&scan.volume, &self.vs, view, rect);
                let plane = Plane {
                    origin: m.origin,
                    u: m.u,
                    v: m.v,
                };
                let moving = now - self.vs.planes_changed_at < SETTLE_SECS;
                let coarse = on_stage && moving && self.render_ms[i] > PLANE_BUDGET_MS;
                if coarse {
                    ctx.request_repaint_after(Duration::from_secs_f64(SETTLE_SECS));
                }
                let f = if coarse { 2 } else { 1 };
                let Ok(geometry) = SliceGeometry::centred(
                    &plane,
                    pixels[0].div_ceil(f),
                    pixels[1].div_ceil(f),
                    m.mm_per_point / f64::from(ppp) * f as f64,
                ) else {
                    continue;
                };
                RenderKey::Plane(PlaneKey {
                    scan: scan.id,
                    geometry,
                    window: self.vs.window,
                    colours: self.prefs.colour_map,
                    interpolation: self.prefs.interpolation,
                    scale_bar: self.prefs.show_scale_bar,
                    orientation: self.prefs.show_orientation && on_stage,
                    coarse,
                })
            } else {
                let Some(camera) = view::volume_camera(&scan.volume, &self.vs, pixels) else {
                    continue;
                };
                let moving = now - self.vs.volume_changed_at < SETTLE_SECS;
                if moving {
                    ctx.request_repaint_after(Duration::from_secs_f64(SETTLE_SECS));
                }
                RenderKey::Volume(VolumeKey {
                    scan: scan.id,
                    camera,
                    mode: self.vs.volume_mode,
                    threshold: self.vs.threshold,
                    window: self.vs.window,
                    colours: self.prefs.colour_map,
                    quality: if moving && on_stage {
                        preview_quality(self.render_ms[i])
                    } else {
                        Quality::full()
                    },
                    scale_bar: self.prefs.show_scale_bar && on_stage,
                })
            };
            if self.sent[i] != Some(key) {
                workers.request(view, key, Arc::clone(&scan), u8::from(!on_stage));
                self.sent[i] = Some(key);
            }
        }
    }

    fn smoke_step(&mut self, ctx: &egui::Context, now: f64) {
        let Some(s) = &mut self.smoke else {
            return;
        };
        ctx.request_repaint_after(Duration::from_millis(30));
        s.frames += 1;
        if s.frames > s.max_frames || s.started.elapsed() > s.deadline {
            println!(
                "smoke: gave up after {} frames at step {} (loading: {})",
                s.frames,
                s.step,
                self.loading.is_some()
            );
            s.failed.store(true, Ordering::Relaxed);
            ctx.send_viewport_cmd(egui::ViewportCommand::Close);
            return;
        }
        if self.doc.scan.is_none() {
            if self.loading.is_none() && s.frames > 2 {
                println!("smoke: no scan to show ({:?})", self.vs.message);
                s.failed.store(true, Ordering::Relaxed);
                ctx.send_viewport_cmd(egui::ViewportCommand::Close);
            }
            return;
        }
        if s.desk {
            self.smoke_desk_step(ctx, now);
            return;
        }
        if s.step > s.sequence.len() {
            return; // closing
        }
        let Some(&view) = s.sequence.get(s.step) else {
            println!("smoke: done after {} frames", s.frames);
            ctx.send_viewport_cmd(egui::ViewportCommand::Close);
            s.step += 1;
            return;
        };
        if self.prefs.stage != view {
            self.prefs.stage = view;
            s.ready_at = None;
            ctx.request_repaint();
            return;
        }
        let i = view.index();
        let current = match (&self.shown[i], &self.sent[i]) {
            (Some(sh), Some(k)) => sh.key == *k && !k.is_coarse(),
            _ => false,
        };
        match s.ready_at {
            None if current => {
                s.ready_at = Some(now);
                let r = self.rects[i].unwrap_or(Rect::NOTHING);
                let ppp = ctx.pixels_per_point();
                println!(
                    "smoke: ready {} stage={},{},{},{}",
                    view.label().replace(' ', "_"),
                    (r.min.x * ppp).round(),
                    (r.min.y * ppp).round(),
                    (r.max.x * ppp).round(),
                    (r.max.y * ppp).round()
                );
            }
            Some(t) if now - t >= s.hold_secs => {
                s.step += 1;
            }
            _ => {}
        }
    }
}

impl App {
    /// The desk's smoke sequence: HDC-002 with its landmarks while placing (step 0), then the
    /// analysis view with its result (step 1), each reported ready and held for a screenshot.
    fn smoke_desk_step(&mut self, ctx: &egui::Context, now: f64) {
        let stage_current = self.is_view_current(self.prefs.stage);
        let Some(s) = &mut self.smoke else {
            return;
        };
        let screen = ctx.content_rect();
        let ready = |what: &str, r: Rect| {
            let ppp = ctx.pixels_per_point();
            println!(
                "smoke: ready {what} stage={},{},{},{}",
                (r.min.x * ppp).round(),
                (r.min.y * ppp).round(),
                (r.max.x * ppp).round(),
                (r.max.y * ppp).round()
            );
        };
        match s.step {
            0 => {
                let Some(session) = &mut self.doc.session else {
                    println!("smoke: no project open ({:?})", self.vs.message);
                    s.failed.store(true, Ordering::Relaxed);
                    ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                    s.step = 99;
                    return;
                };
                if session.specimen.as_deref() != Some("HDC-002") {
                    self.pending.push(Command::SelectSpecimen("HDC-002".into()));
                    return;
                }
                let shown = self.desk.scan_of.as_deref() == Some("HDC-002")
                    && self.loading.is_none()
                    && stage_current;
                if !shown {
                    return;
                }
                if !self.desk.placing {
                    // a landmark near the middle of the specimen current, its slice shown
                    session.current = Some("orbit_anterior_L".into());
                    self.desk.placing = true;
                    self.pending.push(Command::GoToLandmark);
                    s.ready_at = None;
                    return;
                }
                match s.ready_at {
                    None => {
                        s.ready_at = Some(now);
                        ready(
                            "digitise",
                            self.rects[self.prefs.stage.index()].unwrap_or(screen),
                        );
                    }
                    Some(t) if now - t >= s.hold_secs => {
                        s.step = 1;
                        s.ready_at = None;
                        self.desk.placing = false;
                        self.pending
                            .push(Command::SetWorkspace(Workspace::Analysis));
                        self.pending.push(Command::RunAnalysis);
                    }
                    _ => {}
                }
            }
            1 => {
                if self.analysis.result.is_none() || self.analysis.is_running() {
                    if let Some(e) = &self.analysis.error {
                        println!("smoke: the analysis failed: {e}");
                        s.failed.store(true, Ordering::Relaxed);
                        ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                        s.step = 99;
                    }
                    return;
                }
                match s.ready_at {
                    None => {
                        s.ready_at = Some(now);
                        ready("analysis", screen);
                    }
                    Some(t) if now - t >= s.hold_secs => {
                        println!("smoke: done after {} frames", s.frames);
                        ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                        s.step = 2;
                    }
                    _ => {}
                }
            }
            _ => {}
        }
    }
}

impl eframe::App for App {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.frame(ui);
    }

    fn save(&mut self, storage: &mut dyn eframe::Storage) {
        if self.smoke.is_none() {
            eframe::set_value(storage, Preferences::STORAGE_KEY, &self.prefs);
        }
    }

    /// Unsaved work left at exit (the window closed some other way than through the
    /// question) goes to the autosave, to be offered next time.
    fn on_exit(&mut self, _gl: Option<&eframe::glow::Context>) {
        if let Some(s) = &mut self.doc.session
            && s.is_dirty()
            && let Err(e) = s.autosave()
        {
            eprintln!("sutura: {e}");
        }
    }
}

/// What a view needs of the desk this frame.
fn desk_of<'a>(doc: &'a Document, desk: &'a DeskUi) -> Desk<'a> {
    Desk {
        session: doc.session.as_ref(),
        placing: desk.placing && desk.workspace == Workspace::Digitise,
        tracing: desk.tracing.as_ref().map(|t| t.0.as_str()),
    }
}

fn ago_text(secs: u64) -> String {
    match secs {
        0..=59 => format!("{secs} s ago"),
        60..=3599 => format!("{} min ago", secs / 60),
        _ => format!("{:.1} h ago", secs as f64 / 3600.0),
    }
}

/// The desk's keys (a project is open), in the order they are tried: a shifted key comes before
/// the same key unshifted, which egui would also match.
const DESK_KEYS: &[(Modifiers, Key, Command)] = &[
    (
        Modifiers::COMMAND.plus(Modifiers::SHIFT),
        Key::Z,
        Command::Redo,
    ),
    (Modifiers::COMMAND, Key::Y, Command::Redo),
    (Modifiers::COMMAND, Key::Z, Command::Undo),
    (Modifiers::COMMAND, Key::S, Command::Save),
    (Modifiers::COMMAND, Key::T, Command::StartTrial),
    (Modifiers::NONE, Key::P, Command::TogglePlacing),
    (Modifiers::SHIFT, Key::N, Command::StepLandmark(-1)),
    (Modifiers::NONE, Key::N, Command::StepLandmark(1)),
    (Modifiers::NONE, Key::X, Command::MarkMissing),
    (Modifiers::NONE, Key::Delete, Command::ClearLandmark),
    (Modifiers::NONE, Key::Backspace, Command::ClearLandmark),
    (Modifiers::NONE, Key::G, Command::GoToLandmark),
    (Modifiers::NONE, Key::S, Command::ToggleSnap),
    (Modifiers::NONE, Key::L, Command::ToggleLabels),
    (Modifiers::NONE, Key::T, Command::CycleTracing),
    (Modifiers::NONE, Key::A, Command::ToggleWorkspace),
];

/// The desk's keys (a project is open); Escape also ends placing.
fn desk_shortcuts(ctx: &egui::Context, placing: bool, cmds: &mut Vec<Command>) {
    ctx.input_mut(|i| {
        for (modifiers, key, command) in DESK_KEYS {
            if i.consume_key(*modifiers, *key) {
                cmds.push(command.clone());
            }
        }
        if placing && i.consume_key(Modifiers::NONE, Key::Escape) {
            cmds.push(Command::TogglePlacing);
        }
    });
}

/// The 3D view's picture while it moves: the render module's coarse pass, or one ray per 8×8
/// pixels when the last full picture took over half a second (a large scan filling the view).
fn preview_quality(last_full_ms: f64) -> Quality {
    if last_full_ms > 500.0 {
        Quality {
            downsample: 8,
            step_voxels: 3.0,
        }
    } else {
        Quality::coarse()
    }
}

/// The voxel size typed for TIFF scans, in mm; empty means the file's own.
fn tiff_voxel_size(text: &str) -> Result<Option<[f64; 3]>, String> {
    let t = text.trim();
    if t.is_empty() {
        return Ok(None);
    }
    let parts: Result<Vec<f64>, _> = t.split(',').map(parse_length_mm).collect();
    match parts.as_deref() {
        Ok([s]) => Ok(Some([*s; 3])),
        Ok([x, y, z]) => Ok(Some([*x, *y, *z])),
        Ok(_) => Err(format!(
            "TIFF voxel size {t}: give one length or three (x,y,z)"
        )),
        Err(e) => Err(format!("TIFF voxel size {t}: {e}")),
    }
}

#[allow(clippy::too_many_lines)] // reason: one flat list of keys reads best, as the help lists them
fn shortcuts(
    ctx: &egui::Context,
    prefs: &Preferences,
    vs: &ViewState,
    loading: bool,
    cmds: &mut Vec<Command>,
) {
    let stage = prefs.stage;
    let key_count = |i: &mut egui::InputState, k: Key| i.count_and_consume_key(Modifiers::NONE, k);
    ctx.input_mut(|i| {
        let key = |i: &mut egui::InputState, m: Modifiers, k: Key| i.consume_key(m, k);
        let none = Modifiers::NONE;
        if key(i, none, Key::F1) || key(i, none, Key::H) {
            cmds.push(Command::ToggleHelp);
        }
        if key(i, none, Key::Escape) {
            if loading {
                cmds.push(Command::CancelLoad);
            } else if vs.help_open {
                cmds.push(Command::ToggleHelp);
            }
        }
        if key(i, Modifiers::COMMAND | Modifiers::SHIFT, Key::O) {
            cmds.push(Command::ShowOpenDialog(DialogKind::SliceFolder));
        } else if key(i, Modifiers::COMMAND, Key::O) {
            cmds.push(Command::ShowOpenDialog(DialogKind::ScanFile));
        }
        if key(i, Modifiers::COMMAND, Key::Q) {
            cmds.push(Command::Quit);
        }
        for (k, v) in [
            (Key::Num1, ViewId::PlaneI),
            (Key::Num2, ViewId::PlaneJ),
            (Key::Num3, ViewId::PlaneK),
            (Key::Num4, ViewId::Oblique),
            (Key::Num5, ViewId::Volume),
        ] {
            if key(i, none, k) {
                cmds.push(Command::SetStage(v));
            }
        }
        if key(i, Modifiers::SHIFT, Key::Tab) {
            cmds.push(Command::CycleStage(-1));
        } else if key(i, none, Key::Tab) {
            cmds.push(Command::CycleStage(1));
        }
        let vertical = [
            (Key::ArrowUp, 1),
            (Key::ArrowDown, -1),
            (Key::PageUp, 10),
            (Key::PageDown, -10),
        ];
        for (k, steps) in vertical {
            let steps: i32 = steps;
            let n = key_count(i, k) as i32;
            if n == 0 {
                continue;
            }
            if stage == ViewId::Volume {
                cmds.push(Command::Orbit {
                    d_azimuth_deg: 0.0,
                    d_elevation_deg: f64::from(steps.signum() * n) * 5.0,
                });
            } else {
                cmds.push(Command::Scroll {
                    view: stage,
                    steps: steps * n,
                });
            }
        }
        for (k, sign) in [(Key::ArrowLeft, -1.0), (Key::ArrowRight, 1.0)] {
            let n = f64::from(key_count(i, k) as u32);
            if n == 0.0 {
                continue;
            }
            match stage {
                ViewId::Volume => cmds.push(Command::Orbit {
                    d_azimuth_deg: sign * 5.0 * n,
                    d_elevation_deg: 0.0,
                }),
                ViewId::Oblique => cmds.push(Command::TurnOblique {
                    about_u_deg: 0.0,
                    about_v_deg: sign * 2.0 * n,
                }),
                _ => {}
            }
        }
        if key(i, none, Key::Plus) || key(i, none, Key::Equals) {
            cmds.push(Command::Zoom {
                view: stage,
                factor: 1.25,
                anchor: None,
            });
        }
        if key(i, none, Key::Minus) {
            cmds.push(Command::Zoom {
                view: stage,
                factor: 0.8,
                anchor: None,
            });
        }
        if key(i, Modifiers::SHIFT, Key::R) {
            cmds.push(Command::ResetAll);
        } else if key(i, none, Key::R) {
            cmds.push(Command::ResetView(stage));
        }
        if key(i, none, Key::W) {
            cmds.push(Command::ResetWindow);
        }
        if key(i, none, Key::C) {
            cmds.push(Command::ToggleCrosshair);
        }
        if key(i, none, Key::B) {
            cmds.push(Command::ToggleScaleBar);
        }
        if key(i, none, Key::M) {
            cmds.push(Command::SetVolumeMode(match vs.volume_mode {
                VolumeMode::Surface => VolumeMode::Projection,
                VolumeMode::Projection => VolumeMode::Surface,
            }));
        }
        if key(i, none, Key::OpenBracket) {
            cmds.push(Command::NudgeThreshold(-0.01));
        }
        if key(i, none, Key::CloseBracket) {
            cmds.push(Command::NudgeThreshold(0.01));
        }
    });
}

fn drop_hint(ctx: &egui::Context) {
    egui::Area::new(egui::Id::unique("sutura-drop-hint"))
        .anchor(egui::Align2::CENTER_CENTER, Vec2::ZERO)
        .show(ctx, |ui| {
            egui::Frame::popup(ui.style()).show(ui, |ui| {
                ui.label(RichText::new("Drop to open").size(18.0).strong());
            });
        });
}

/// The workstation's look: dark panels, a muted teal for selection.
fn style(ctx: &egui::Context) {
    let mut v = egui::Visuals::dark();
    v.panel_fill = Color32::from_rgb(27, 30, 36);
    v.window_fill = Color32::from_rgb(32, 36, 43);
    v.extreme_bg_color = Color32::from_rgb(17, 19, 23);
    v.selection.bg_fill = Color32::from_rgb(40, 98, 104);
    v.selection.stroke.color = Color32::from_rgb(170, 230, 225);
    v.hyperlink_color = Color32::from_rgb(120, 200, 210);
    ctx.set_visuals_of(egui::Theme::Dark, v);
    ctx.set_theme(egui::ThemePreference::Dark);
}
