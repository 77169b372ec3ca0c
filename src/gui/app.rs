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

use super::files::{self, FileBrowser};
use super::loader::{Loading, Outcome};
use super::panels;
use super::state::{
    Command, DialogKind, Document, Preferences, Scan, ViewId, ViewState, VolumeMode,
};
use super::view::{self, Shown, VIEW_BACKGROUND, pixels_for, plane_map, view_ui};
use super::worker::{PlaneKey, RenderKey, VolumeKey, Workers};
use crate::geometry::{Plane, parse_length_mm};
use crate::io::OpenOptions;
use crate::render::{Quality, SliceGeometry};

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
}

impl Smoke {
    /// `SUTURA_SMOKE=1` turns it on; `SUTURA_SMOKE_HOLD` (seconds a view stays, default 2.5)
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
        self.vs.hover = None;
        self.rects = [None; 5];

        if !ctx.egui_wants_keyboard_input() && self.dialog.is_none() {
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
            cmds.extend(panels::top_bar_ui(ui, &self.doc, &self.prefs));
        });
        egui::Panel::bottom("status_line").show(ui, |ui| {
            panels::status_ui(ui, &self.doc, &self.vs);
        });
        egui::Panel::left("controls")
            .resizable(true)
            .default_size(250.0)
            .min_size(200.0)
            .show(ui, |ui| {
                cmds.extend(panels::controls_ui(ui, &self.doc, &self.prefs, &self.vs));
            });
        if self.doc.scan.is_some() {
            let strip = match self.prefs.strip_side {
                super::state::StripSide::Left => egui::Panel::left("strip"),
                super::state::StripSide::Right => egui::Panel::right("strip"),
            };
            strip
                .exact_size(STRIP_WIDTH)
                .resizable(false)
                .show(ui, |ui| self.strip_ui(ui, &mut cmds));
        }
        egui::CentralPanel::no_frame()
            .frame(egui::Frame::new().fill(Color32::from_rgb(20, 23, 28)))
            .show(ui, |ui| self.stage_ui(ui, &mut cmds));

        if let Some(l) = &self.loading {
            cmds.extend(panels::loading_ui(&ctx, l));
        }
        cmds.extend(panels::help_ui(&ctx, self.vs.help_open));
        self.dialog_ui(&ctx, &mut cmds);
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
                cmds,
            );
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
                cmds.push(Command::Open(p));
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
            Command::Open(path) => self.open(&path),
            Command::ShowOpenDialog(kind) => {
                let start = self
                    .doc
                    .scan
                    .as_ref()
                    .and_then(|s| s.path.parent().map(Path::to_path_buf))
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
                if let Some(ctx) = &self.ctx {
                    ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                }
            }
            Command::ToggleHelp => self.vs.help_open = !self.vs.help_open,
            Command::SetStage(v) => self.prefs.stage = v,
            Command::CycleStage(by) => self.prefs.stage = self.prefs.stage.cycled(by),
            Command::ToggleCrosshair => self.prefs.show_crosshair = !self.prefs.show_crosshair,
            Command::ToggleScaleBar => self.prefs.show_scale_bar = !self.prefs.show_scale_bar,
            other => {
                if let Some(scan) = self.doc.scan.clone() {
                    self.vs.apply(&scan, &mut self.prefs, &other, now);
                }
            }
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
    pub fn open_volume(&mut self, path: PathBuf, volume: crate::volume::Volume) {
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
        self.loading = None;
        match outcome {
            Outcome::Loaded(scan) => {
                let msg = format!("opened {} in {secs:.1} s", scan.name());
                self.install(scan);
                self.vs.message = Some((msg, false));
                self.prefs.remember(path);
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

impl eframe::App for App {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.frame(ui);
    }

    fn save(&mut self, storage: &mut dyn eframe::Storage) {
        if self.smoke.is_none() {
            eframe::set_value(storage, Preferences::STORAGE_KEY, &self.prefs);
        }
    }
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
