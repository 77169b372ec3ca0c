//! The workstation app: owns the three state tiers, the desk, the loader and the render
//! workers; lays out the panels and views each frame, and hands the commands they return to the
//! types that own what they change.
//!
//! One frame: take finished loads and pictures → keys (from the action table) and dropped
//! files → panels and views (reading the state, returning commands) → apply the commands →
//! ask the workers for any picture whose key changed. Nothing in a frame waits for a load or a
//! render.

use std::path::{Path, PathBuf};

use eframe::egui::{self, Color32, RichText, Vec2};

use super::actions::{self, KeyContext};
use super::adding::Adding;
use super::analysis_view::{self, AnalysisState};
use super::camera::ScreenMap;
use super::command::{
    AppCommand, Command, DeskCommand, PrepCommand, PrepTool, ViewCommand, Workspace,
};
use super::desk::{Desk, DeskEnv, Effects};
use super::desk_panel;
use super::files::{self, FileBrowser};
use super::loader::Loading;
use super::new_project::NewProjectForm;
use super::panels;
use super::prep::Prep;
use super::prep_panel;
use super::prompts::{After, Prompt};
use super::smoke::Smoke;
use super::state::Scan;
use super::state::{Document, Preferences, StripSide, ViewId, ViewState};
use super::status::Status;
use super::view::PrepInput;
use super::view::{VIEW_BACKGROUND, ViewInput, view_ui};
use super::views::Views;
use super::worker::{RenderKey, Workers};
use sutura_core::landmarks::project::is_project_file;

/// Width of the strip of small views, in points.
const STRIP_WIDTH: f32 = 232.0;

/// The left column's tabs (the landmarks tab while a project is open).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum ColumnTab {
    /// Specimens, trial, landmarks, measurements.
    #[default]
    Landmarks,
    /// Window, colours, oblique plane, 3D view.
    Display,
    /// Virtual preparation: the scan's label image, tools and steps.
    Prepare,
}

/// Window state that is neither document, preferences nor view state: modes of panels and
/// text being typed. Never saved.
#[derive(Default)]
pub struct UiState {
    pub workspace: Workspace,
    pub column: ColumnTab,
    pub prompt: Option<Prompt>,
    /// The note being typed, and the (specimen, trial, landmark) it belongs to.
    pub note: String,
    pub note_for: Option<(String, String, String)>,
    pub operator_text: String,
    /// The position being typed for the current landmark.
    pub typed: desk_panel::TypedForm,
    pub new_project: Option<NewProjectForm>,
    /// Specimens ticked in the specimen list, for editing their groups together.
    pub ticked: Vec<String>,
    pub group_form: desk_panel::GroupForm,
    /// The name being typed for a new label.
    pub new_label: String,
}

/// The workstation.
pub struct App {
    pub(super) doc: Document,
    pub(super) prefs: Preferences,
    pub(super) vs: ViewState,
    pub(super) views: Views,
    pub(super) desk: Option<Desk>,
    /// The label image of the scan shown, while preparing it.
    pub(super) prep: Option<Prep>,
    pub(super) analysis: AnalysisState,
    pub(super) status: Option<Status>,
    pub(super) ui: UiState,
    pub(super) pending: Vec<Command>,
    pub(super) loading: Option<Loading>,
    pub(super) adding: Option<Adding>,
    pub(super) smoke: Option<Smoke>,
    pub(super) ctx: Option<egui::Context>,
    pub(super) workers: Option<Workers>,
    pub(super) next_scan_id: u64,
    pub(super) dialog: Option<FileBrowser>,
    /// The window was told to close (after any question about unsaved changes).
    pub(super) closing: bool,
}

impl App {
    /// An app with these preferences; `open` is queued to be opened on the first frame.
    #[must_use]
    pub fn new(prefs: Preferences, open: Option<PathBuf>) -> Self {
        let mut app = Self {
            doc: Document::default(),
            prefs,
            vs: ViewState::default(),
            views: Views::default(),
            desk: None,
            prep: None,
            analysis: AnalysisState::default(),
            status: None,
            ui: UiState::default(),
            pending: Vec::new(),
            loading: None,
            adding: None,
            smoke: None,
            ctx: None,
            workers: None,
            next_scan_id: 0,
            dialog: None,
            closing: false,
        };
        if let Some(p) = open {
            app.send(AppCommand::Open(p));
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
    pub fn send(&mut self, cmd: impl Into<Command>) {
        self.pending.push(cmd.into());
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
    pub fn desk(&self) -> Option<&Desk> {
        self.desk.as_ref()
    }

    /// The open project, for tests that tune it (e.g. the autosave delay).
    pub fn desk_mut(&mut self) -> Option<&mut Desk> {
        self.desk.as_mut()
    }

    /// Whether placing mode is on.
    /// The preparation of the scan shown, if a label image is open.
    #[must_use]
    pub fn prep(&self) -> Option<&Prep> {
        self.prep.as_ref()
    }

    #[must_use]
    pub fn is_placing(&self) -> bool {
        self.desk.as_ref().is_some_and(|d| d.placing)
    }

    /// The question the app waits on, if any.
    #[must_use]
    pub fn prompt(&self) -> Option<&Prompt> {
        self.ui.prompt.as_ref()
    }

    /// The new-project form, while it is open.
    #[must_use]
    pub fn new_project_form(&self) -> Option<&NewProjectForm> {
        self.ui.new_project.as_ref()
    }

    pub fn new_project_form_mut(&mut self) -> Option<&mut NewProjectForm> {
        self.ui.new_project.as_mut()
    }

    #[must_use]
    pub fn workspace(&self) -> Workspace {
        self.ui.workspace
    }

    /// The specimen whose scan is shown.
    #[must_use]
    pub fn scan_of(&self) -> Option<&str> {
        self.desk.as_ref()?.scan_of.as_deref()
    }

    #[must_use]
    pub fn analysis(&self) -> &AnalysisState {
        &self.analysis
    }

    /// The status line's message.
    #[must_use]
    pub fn status(&self) -> Option<&Status> {
        self.status.as_ref()
    }

    /// Whether the app told its window to close.
    #[must_use]
    pub fn is_closing(&self) -> bool {
        self.closing
    }

    /// Whether a scan is being opened, or specimens added.
    #[must_use]
    pub fn is_loading(&self) -> bool {
        self.loading.is_some() || self.adding.is_some()
    }

    /// Whether the view shows its latest requested picture (no render outstanding).
    #[must_use]
    pub fn is_view_current(&self, view: ViewId) -> bool {
        self.views.is_current(view)
    }

    /// Where each view was drawn in the last frame.
    #[must_use]
    pub fn view_rect(&self, view: ViewId) -> Option<egui::Rect> {
        self.views.slot(view).rect
    }

    /// A plane view's screen map in the last frame.
    #[must_use]
    pub fn screen_map(&self, view: ViewId) -> Option<ScreenMap> {
        self.views.slot(view).map
    }

    /// The key of the last picture asked for in a view.
    #[must_use]
    pub fn requested(&self, view: ViewId) -> Option<RenderKey> {
        self.views.slot(view).sent
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
        self.poll_adding();
        if let Some(w) = &self.workers {
            let id = self.doc.scan.as_ref().map(|s| s.id);
            if let Some(e) = self.views.take_finished(w, id, &ctx).pop() {
                self.status = Some(Status::error(e));
            }
        }
        self.analysis.poll(&ctx);
        self.autosave_tick(&ctx);
        if let Some(f) = &mut self.ui.new_project {
            f.poll();
        }
        if ctx.input(|i| i.viewport().close_requested()) && !self.closing {
            if self.is_dirty() {
                ctx.send_viewport_cmd(egui::ViewportCommand::CancelClose);
                self.ui.prompt = Some(Prompt::Unsaved(After::Quit));
            } else {
                self.closing = true;
            }
        }
        self.views.new_frame();

        let modal =
            self.dialog.is_some() || self.ui.prompt.is_some() || self.ui.new_project.is_some();
        if !ctx.egui_wants_keyboard_input() && !modal {
            let cx = KeyContext {
                stage: self.prefs.stage,
                scan: self.doc.scan.is_some(),
                project: self.desk.is_some(),
                loading: self.loading.is_some(),
                help_open: self.vs.help_open,
                placing: self.is_placing(),
                preparing: self.preparing(),
            };
            cmds.extend(actions::keyboard(&ctx, &cx));
        }
        let dropped: Vec<PathBuf> = ctx.input(|i| {
            i.raw
                .dropped_files
                .iter()
                .map(|f| f.path().to_path_buf())
                .collect()
        });
        if !dropped.is_empty() {
            if let Some(f) = &mut self.ui.new_project {
                f.add_scans(dropped);
            } else if let Some(p) = dropped.into_iter().next() {
                cmds.push(AppCommand::Open(p).into());
            }
        }

        egui::Panel::top("top_bar").show(ui, |ui| {
            cmds.extend(panels::top_bar_ui(
                ui,
                &self.doc,
                self.desk.as_ref(),
                &self.prefs,
                self.ui.workspace,
            ));
        });
        egui::Panel::bottom("status_line").show(ui, |ui| {
            panels::status_ui(ui, &self.doc, &self.vs, self.status.as_ref());
        });
        let analysing = self.ui.workspace == Workspace::Analysis && self.desk.is_some();
        egui::Panel::left("controls")
            .resizable(true)
            .default_size(if self.desk.is_some() { 300.0 } else { 250.0 })
            .min_size(200.0)
            .show(ui, |ui| self.column_ui(ui, &mut cmds));
        if analysing {
            egui::CentralPanel::default().show(ui, |ui| {
                if let Some(d) = &self.desk {
                    cmds.extend(analysis_view::analysis_ui(
                        ui,
                        &self.analysis,
                        &d.session.project,
                    ));
                }
            });
        } else if self.doc.scan.is_some() {
            let strip = match self.prefs.strip_side {
                StripSide::Left => egui::Panel::left("strip"),
                StripSide::Right => egui::Panel::right("strip"),
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
            cmds.extend(panels::loading_ui(
                &ctx,
                l.action,
                &l.path,
                l.fraction(),
                l.started,
                l.is_cancelling(),
            ));
        } else if let Some(a) = &self.adding {
            cmds.extend(panels::loading_ui(
                &ctx,
                "Adding",
                &a.current_path(),
                Some(a.fraction()),
                a.started,
                a.is_cancelling(),
            ));
        }
        cmds.extend(panels::help_ui(&ctx, self.vs.help_open));
        if let Some(f) = &mut self.ui.new_project {
            cmds.extend(super::new_project::form_ui(&ctx, f));
        }
        self.dialog_ui(&ctx, &mut cmds);
        let session_name = self.desk.as_ref().map(Desk::name).unwrap_or_default();
        cmds.extend(super::prompts::prompt_ui(
            &ctx,
            self.ui.prompt.as_ref(),
            &session_name,
            &mut self.ui.operator_text,
        ));
        if ctx.input(|i| !i.raw.hovered_files.is_empty()) {
            drop_hint(&ctx);
        }

        let changed = !cmds.is_empty();
        for c in cmds {
            self.apply(c, now);
        }
        if let (Some(scan), Some(workers)) = (self.doc.scan.clone(), self.workers.as_mut()) {
            let layers = self
                .prep
                .as_mut()
                .filter(|p| p.scan_id() == scan.id)
                .map(|p| p.layers(&scan, self.vs.iso.value));
            self.views.request(
                workers,
                &scan,
                &self.prefs,
                &self.vs,
                layers.as_ref(),
                &ctx,
                now,
            );
        }
        if changed {
            ctx.request_repaint();
        }
        super::smoke::step(self, &ctx, now);
    }

    /// Whether the open project has unsaved changes.
    fn is_dirty(&self) -> bool {
        self.desk.as_ref().is_some_and(|d| d.session.is_dirty())
    }

    /// Whether the preparation tab is open on a label image: its tools take the views' clicks
    /// and Ctrl+Z undoes its steps.
    #[must_use]
    pub fn preparing(&self) -> bool {
        self.column_shown() == ColumnTab::Prepare
            && self.prep.is_some()
            && (self.desk.is_none() || self.ui.workspace == Workspace::Digitise)
    }

    /// The column's tab on screen: without a project the landmarks tab is not offered, and
    /// the display tab takes its place.
    fn column_shown(&self) -> ColumnTab {
        match self.ui.column {
            ColumnTab::Landmarks if self.desk.is_none() => ColumnTab::Display,
            c => c,
        }
    }

    fn view_input(&self, view: ViewId, on_stage: bool) -> ViewInput<'_> {
        let prep = self
            .prep
            .as_ref()
            .filter(|p| on_stage && self.preparing() && p.tool != PrepTool::Look)
            .map(|p| PrepInput {
                tool: p.tool,
                radius_mm: p.brush_um * 1e-3,
                stroking: p.stroking(),
            });
        ViewInput {
            view,
            on_stage,
            prefs: &self.prefs,
            vs: &self.vs,
            shown: self.views.slot(view).shown.as_ref(),
            desk: self.desk.as_ref(),
            placing: on_stage
                && prep.is_none()
                && self.ui.workspace == Workspace::Digitise
                && self.is_placing(),
            prep,
        }
    }

    fn stage_ui(&mut self, ui: &mut egui::Ui, cmds: &mut Vec<Command>) {
        let rect = ui.available_rect_before_wrap().shrink(6.0);
        let Some(scan) = self.doc.scan.clone() else {
            let painter = ui.painter_at(rect);
            painter.rect_filled(rect, 6.0, VIEW_BACKGROUND);
            let text = if self.loading.is_some() {
                "opening…"
            } else {
                "Start a project (Ctrl+N), open one, or open a scan (Ctrl+O); or drop a file or folder here"
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
        let map = view_ui(ui, rect, &scan, &self.view_input(view, true), cmds);
        let slot = self.views.slot_mut(view);
        slot.rect = Some(rect);
        slot.map = map;
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
            let rect = egui::Rect::from_min_size(
                egui::pos2(area.min.x + 2.0, top),
                Vec2::new(area.width() - 4.0, h),
            );
            let map = view_ui(ui, rect, &scan, &self.view_input(*v, false), cmds);
            let slot = self.views.slot_mut(*v);
            slot.rect = Some(rect);
            slot.map = map;
        }
    }

    /// The left column: with a project open, the landmarks tab or the display tab.
    fn column_ui(&mut self, ui: &mut egui::Ui, cmds: &mut Vec<Command>) {
        if let Some(d) = &mut self.desk {
            d.refresh_checks();
        }
        let shown = self.column_shown();
        ui.add_space(4.0);
        ui.horizontal(|ui| {
            for (tab, name, tip) in [
                (
                    ColumnTab::Landmarks,
                    "Landmarks",
                    "specimens, trial, landmarks, measurements",
                ),
                (
                    ColumnTab::Display,
                    "Display",
                    "window, colours, oblique plane, 3D view",
                ),
                (
                    ColumnTab::Prepare,
                    "Prepare",
                    "label the specimen and its matrix: brush, grow, interpolate, keep in 3D",
                ),
            ] {
                if tab == ColumnTab::Landmarks && self.desk.is_none() {
                    continue;
                }
                if ui
                    .selectable_label(shown == tab, RichText::new(name).strong())
                    .on_hover_text(tip)
                    .clicked()
                {
                    self.ui.column = tab;
                }
            }
        });
        ui.separator();
        let shown = self.column_shown();
        match shown {
            ColumnTab::Display => {
                cmds.extend(panels::controls_ui(ui, &self.doc, &self.prefs, &self.vs));
                return;
            }
            ColumnTab::Prepare => {
                let path = self.doc.scan.as_ref().map(|s| self.prep_path(s));
                prep_panel::prep_ui(
                    ui,
                    self.prep.as_ref(),
                    path.as_deref(),
                    self.prefs.stage,
                    &mut self.ui.new_label,
                    cmds,
                );
                return;
            }
            ColumnTab::Landmarks => {}
        }
        let Some(d) = &self.desk else {
            return;
        };
        // the note field follows the current landmark
        let key = d
            .specimen
            .clone()
            .zip(d.trial.clone())
            .zip(d.current.clone())
            .map(|((a, b), c)| (a, b, c));
        if key != self.ui.note_for {
            self.ui.note = key
                .as_ref()
                .and_then(|(_, _, c)| d.trial_ref()?.landmark(c)?.note.clone())
                .unwrap_or_default();
            self.ui.note_for = key;
        }
        desk_panel::desk_ui(
            ui,
            d,
            &self.prefs,
            &self.vs,
            self.doc.scan.as_deref(),
            &mut self.ui,
            cmds,
        );
    }

    fn dialog_ui(&mut self, ctx: &egui::Context, cmds: &mut Vec<Command>) {
        let Some(d) = &mut self.dialog else {
            return;
        };
        match d.show(ctx) {
            Some(files::Outcome::Chose(paths)) => {
                cmds.push(AppCommand::DialogChose(d.kind(), paths).into());
                self.dialog = None;
            }
            Some(files::Outcome::Cancelled) => self.dialog = None,
            None => {}
        }
    }

    /// Applies one command: each group by the type that owns what it changes.
    pub fn apply(&mut self, cmd: Command, now: f64) {
        if let Some(s) = &self.smoke
            && let Command::View(ViewCommand::MoveCursor(p)) = &cmd
        {
            s.report_cursor(*p);
        }
        match cmd {
            Command::App(c) => self.apply_app(c),
            Command::View(c) => {
                if let Some(scan) = self.doc.scan.clone() {
                    self.vs.apply(&scan, c, now);
                }
            }
            Command::Prefs(c) => self.prefs.apply(c),
            Command::Desk(c) => {
                // the answer to the autosave question closes it (and counts only while asked)
                if matches!(c, DeskCommand::Autosave(_)) {
                    if !matches!(self.ui.prompt, Some(Prompt::Autosave(_))) {
                        return;
                    }
                    self.ui.prompt = None;
                }
                let Some(desk) = &mut self.desk else {
                    return;
                };
                let env = DeskEnv {
                    scan: self.doc.scan.as_ref(),
                    vs: &self.vs,
                    prefs: &self.prefs,
                    surface: self.prep.as_ref().and_then(Prep::pick_volume),
                };
                let effects = desk.apply(c, &env);
                self.take_effects(effects);
            }
            Command::Prep(c) => self.apply_prep(c),
            Command::Analysis(c) => {
                if let Some(d) = &self.desk {
                    let wake = self.ctx.clone();
                    let r = self.analysis.apply(c, &d.session, move || {
                        if let Some(c) = &wake {
                            c.request_repaint();
                        }
                    });
                    if let Some(s) = r {
                        self.status = Some(s);
                    }
                }
            }
        }
    }

    fn take_effects(&mut self, e: Effects) {
        if e.changed {
            self.analysis.stale = self.analysis.result.is_some();
            self.ui.note_for = None;
        }
        if let Some(s) = e.status {
            self.status = Some(s);
        }
        if e.ask_operator {
            self.ui.operator_text.clear();
            self.ui.prompt = Some(Prompt::Operator);
        }
        self.pending.extend(e.then);
    }

    /// Where the label image of `scan` is kept (see [`super::prep::default_path`]).
    fn prep_path(&self, scan: &Scan) -> PathBuf {
        let project = self.desk.as_ref().and_then(|d| {
            let id = d.scan_of.clone().or_else(|| d.specimen.clone())?;
            Some((d.session.path().to_path_buf(), id))
        });
        // the scan's own path, not the store built for it: the label image is found where it
        // was made whatever the budget (a scan that is itself a store keeps it inside)
        super::prep::default_path(
            &scan.path,
            project.as_ref().map(|(p, id)| (p.as_path(), id.as_str())),
        )
    }

    /// Saves the label image if it changed (the scan is being replaced, or the window closes):
    /// label work is never dropped unasked.
    pub(super) fn settle_prep(&mut self) {
        if let Some(p) = &mut self.prep
            && p.is_dirty()
        {
            self.status = Some(match p.save() {
                Ok(s) => s,
                Err(e) => Status::error(e),
            });
        }
    }

    /// Preparation commands: making or opening the label image here (they need the scan and
    /// where it is kept), everything else by [`Prep::apply`].
    fn apply_prep(&mut self, cmd: PrepCommand) {
        let Some(scan) = self.doc.scan.clone() else {
            return;
        };
        let r = match cmd {
            PrepCommand::Create | PrepCommand::Open => {
                self.settle_prep();
                let path = self.prep_path(&scan);
                let made = if cmd == PrepCommand::Create {
                    Prep::create(&path, &scan)
                } else {
                    Prep::open(&path, &scan)
                };
                made.map(|p| {
                    let what = if cmd == PrepCommand::Create {
                        "made"
                    } else {
                        "opened"
                    };
                    let s = Status::info(format!(
                        "{what} {} ({} labels)",
                        p.path().display(),
                        p.label_list().len()
                    ));
                    self.prep = Some(p);
                    Some(s)
                })
            }
            // the surface the 3D view shows: its iso-value
            PrepCommand::ExportMesh(format) => match &mut self.prep {
                Some(p) if p.scan_id() == scan.id => p
                    .export_mesh(&scan, format, Some(self.vs.iso.value))
                    .map(Some),
                _ => Ok(None),
            },
            c => match &mut self.prep {
                Some(p) if p.scan_id() == scan.id => p.apply(c, &scan),
                _ => Ok(None),
            },
        };
        match r {
            Ok(Some(s)) => self.status = Some(s),
            Ok(None) => {}
            Err(e) => self.status = Some(Status::error(e)),
        }
    }

    /// The app's own commands.
    #[allow(clippy::too_many_lines)] // reason: one arm per command, each short
    fn apply_app(&mut self, cmd: AppCommand) {
        match cmd {
            AppCommand::Open(path) => {
                if self.is_dirty() {
                    self.ui.prompt = Some(Prompt::Unsaved(After::Open(path)));
                } else if is_project_file(&path) {
                    self.open_project(&path);
                } else {
                    self.close_project();
                    self.open(&path);
                }
            }
            AppCommand::ShowDialog(kind) => {
                let start = self
                    .desk
                    .as_ref()
                    .and_then(|d| d.session.path().parent().map(Path::to_path_buf))
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
            AppCommand::DialogChose(kind, paths) => self.dialog_chose(kind, paths),
            AppCommand::CancelLoad => {
                if let Some(l) = &self.loading {
                    l.cancel();
                }
                if let Some(a) = &self.adding {
                    a.cancel();
                }
            }
            AppCommand::Quit => {
                if self.is_dirty() {
                    self.ui.prompt = Some(Prompt::Unsaved(After::Quit));
                } else {
                    self.close_window();
                }
            }
            AppCommand::ToggleHelp => self.vs.help_open = !self.vs.help_open,
            AppCommand::SetWorkspace(w) => {
                if self.desk.is_some() {
                    self.ui.workspace = w;
                    self.vs.drag = None;
                }
            }
            AppCommand::ToggleWorkspace => {
                let w = match self.ui.workspace {
                    Workspace::Digitise => Workspace::Analysis,
                    Workspace::Analysis => Workspace::Digitise,
                };
                self.pending.push(AppCommand::SetWorkspace(w).into());
            }
            AppCommand::NewProject => {
                if self.is_dirty() {
                    self.ui.prompt = Some(Prompt::Unsaved(After::NewProject));
                } else {
                    let wake = self.ctx.clone();
                    self.ui.new_project = Some(NewProjectForm::new(
                        super::sample_scheme(),
                        self.prefs.tiff_voxel_size_mm(),
                        move || {
                            if let Some(c) = &wake {
                                c.request_repaint();
                            }
                        },
                    ));
                }
            }
            AppCommand::CancelNewProject => self.ui.new_project = None,
            AppCommand::CreateProject => self.create_project(),
            AppCommand::Unsaved(answer) => self.unsaved(answer),
            AppCommand::Mismatch(open) => {
                if let Some(Prompt::Mismatch { specimen, scan, .. }) = self.ui.prompt.take() {
                    if open {
                        self.install(*scan);
                        if let Some(d) = &mut self.desk {
                            d.scan_of = Some(specimen.clone());
                            d.scan_read_only = true;
                        }
                        self.status = Some(Status::warning(format!(
                            "{specimen}: not the recorded scan, opened read-only"
                        )));
                    } else {
                        self.status = Some(Status::info(format!("{specimen}: scan not opened")));
                    }
                }
            }
            AppCommand::BuildStore(build) => {
                if let Some(Prompt::BuildStore {
                    scan,
                    store,
                    specimen,
                    ..
                }) = self.ui.prompt.take()
                {
                    if build {
                        self.build_store(&scan, &store, specimen);
                    } else {
                        self.status = Some(Status::info(format!(
                            "{}: not opened (over the memory budget)",
                            scan.display()
                        )));
                    }
                }
            }
            AppCommand::Operator(name) => {
                let name = name.map(|n| n.trim().to_owned()).filter(|n| !n.is_empty());
                if matches!(self.ui.prompt, Some(Prompt::Operator)) {
                    self.ui.prompt = None;
                }
                if let Some(n) = name {
                    self.prefs.operator = n;
                    self.pending.push(DeskCommand::StartTrial.into());
                }
            }
            AppCommand::LoadSpecimen => self.load_specimen(),
            AppCommand::AddSpecimens(new) => {
                let Some(d) = &self.desk else {
                    return;
                };
                let wake = self.ctx.clone();
                self.adding = Some(Adding::start(
                    d.session.path(),
                    new,
                    self.prefs.budget(),
                    self.prefs.store_cache_dir(),
                    move || {
                        if let Some(c) = &wake {
                            c.request_repaint();
                        }
                    },
                ));
            }
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
        self.settle_prep();
        if let Some(Status { text, .. }) = &self.status
            && self.prep.as_ref().is_some_and(Prep::is_dirty)
        {
            eprintln!("sutura: {text}");
        }
        if let Some(d) = &mut self.desk
            && d.session.is_dirty()
            && let Err(e) = d.session.autosave()
        {
            eprintln!("sutura: {e}");
        }
    }
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
}
