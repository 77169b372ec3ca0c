//! The smoke runs `scripts/gui_smoke.sh` drives under Xvfb. The app prints what it shows on
//! stdout (`smoke: ready VIEW stage=X0,Y0,X1,Y1`, `smoke: state …`) so the script knows when to
//! take a screenshot and where to click; every click and key in the runs are real X events.
//!
//! - `SUTURA_SMOKE=1`: each view on the stage in turn, held for a screenshot, then close.
//! - `SUTURA_SMOKE=desk`: a project's specimen with its landmarks while placing, then the
//!   analysis view.
//! - `SUTURA_SMOKE=user`: only reports: the script starts a project, a trial, places
//!   landmarks and saves, with keys and clicks; the app says when each step has landed.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use eframe::egui::{self, Rect};

use super::app::App;
use super::command::{AppCommand, DeskCommand, Workspace};
use super::state::ViewId;
use sutura_core::geometry::WorldPoint;

/// Which run.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Run {
    Views,
    Desk,
    User,
}

/// A smoke run in progress.
pub struct Smoke {
    run: Run,
    sequence: Vec<ViewId>,
    step: usize,
    ready_at: Option<f64>,
    hold_secs: f64,
    started: Instant,
    deadline: Duration,
    frames: u64,
    max_frames: u64,
    failed: Arc<AtomicBool>,
    /// States already reported in a user run.
    said: Vec<String>,
}

impl Smoke {
    /// `SUTURA_SMOKE=1|desk|user` turns it on; `SUTURA_SMOKE_HOLD` (seconds a view stays,
    /// default 2.5) and `SUTURA_SMOKE_FRAMES` (the most frames before giving up, default
    /// 20000) tune it.
    #[must_use]
    pub fn from_env(failed: Arc<AtomicBool>) -> Option<Self> {
        let v = std::env::var("SUTURA_SMOKE").ok()?;
        let run = match v.as_str() {
            "" | "0" => return None,
            "desk" => Run::Desk,
            "user" => Run::User,
            _ => Run::Views,
        };
        let num = |name: &str, default: f64| {
            std::env::var(name)
                .ok()
                .and_then(|v| v.parse::<f64>().ok())
                .filter(|v| v.is_finite() && *v > 0.0)
                .unwrap_or(default)
        };
        Some(Self {
            run,
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
            deadline: Duration::from_mins(if run == Run::User { 8 } else { 4 }),
            frames: 0,
            max_frames: num("SUTURA_SMOKE_FRAMES", 20_000.0) as u64,
            failed,
            said: Vec::new(),
        })
    }

    /// Says on stdout that the crosshair moved (the script checks its click arrived).
    pub fn report_cursor(&self, p: WorldPoint) {
        println!(
            "smoke: crosshair moved to {:.3} {:.3} {:.3} (step {})",
            p.0.x, p.0.y, p.0.z, self.step
        );
    }

    fn give_up(&mut self, ctx: &egui::Context, why: &str) {
        println!("smoke: {why}");
        self.failed.store(true, Ordering::Relaxed);
        ctx.send_viewport_cmd(egui::ViewportCommand::Close);
        self.step = 99;
    }
}

fn ready(ctx: &egui::Context, what: &str, r: Rect) {
    let ppp = ctx.pixels_per_point();
    println!(
        "smoke: ready {what} stage={},{},{},{}",
        (r.min.x * ppp).round(),
        (r.min.y * ppp).round(),
        (r.max.x * ppp).round(),
        (r.max.y * ppp).round()
    );
}

/// One frame of the smoke run, after the app's own.
pub fn step(app: &mut App, ctx: &egui::Context, now: f64) {
    let Some(s) = &mut app.smoke else {
        return;
    };
    ctx.request_repaint_after(Duration::from_millis(30));
    s.frames += 1;
    if s.frames > s.max_frames || s.started.elapsed() > s.deadline {
        let why = format!(
            "gave up after {} frames at step {} (loading: {})",
            s.frames,
            s.step,
            app.loading.is_some()
        );
        s.give_up(ctx, &why);
        return;
    }
    match s.run {
        Run::Views => views_step(app, ctx, now),
        Run::Desk => desk_step(app, ctx, now),
        Run::User => user_step(app, ctx),
    }
}

fn views_step(app: &mut App, ctx: &egui::Context, now: f64) {
    let loading = app.loading.is_some();
    let no_scan = app.doc.scan.is_none();
    let status = app.status.clone();
    let stage = app.prefs.stage;
    let Some(s) = &mut app.smoke else {
        return;
    };
    if no_scan {
        if !loading && s.frames > 2 {
            s.give_up(ctx, &format!("no scan to show ({status:?})"));
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
    if stage != view {
        s.ready_at = None;
        app.pending
            .push(super::command::PrefsCommand::SetStage(view).into());
        ctx.request_repaint();
        return;
    }
    let slot = app.views.slot(view);
    let current = match (&slot.shown, &slot.sent) {
        (Some(sh), Some(k)) => sh.key == *k && !k.is_coarse(),
        _ => false,
    };
    let rect = slot.rect.unwrap_or(Rect::NOTHING);
    match s.ready_at {
        None if current => {
            s.ready_at = Some(now);
            ready(ctx, &view.label().replace(' ', "_"), rect);
        }
        Some(t) if now - t >= s.hold_secs => s.step += 1,
        _ => {}
    }
}

/// The desk's run: HDC-002 with its landmarks while placing (step 0), then the analysis view
/// with its result (step 1), each reported ready and held for a screenshot.
fn desk_step(app: &mut App, ctx: &egui::Context, now: f64) {
    let stage_current = app.views.is_current(app.prefs.stage);
    let stage_rect = app.views.slot(app.prefs.stage).rect;
    let loading = app.loading.is_some();
    let screen = ctx.content_rect();
    let Some(s) = &mut app.smoke else {
        return;
    };
    match s.step {
        0 => {
            let Some(d) = &mut app.desk else {
                let why = format!("no project open ({:?})", app.status);
                s.give_up(ctx, &why);
                return;
            };
            if d.specimen.as_deref() != Some("HDC-002") {
                app.pending
                    .push(DeskCommand::SelectSpecimen("HDC-002".into()).into());
                return;
            }
            if d.scan_of.as_deref() != Some("HDC-002") || loading || !stage_current {
                return;
            }
            if !d.placing {
                // a landmark near the middle of the specimen current, its slice shown
                d.current = Some("orbit_anterior_L".into());
                d.placing = true;
                app.pending.push(DeskCommand::GoToLandmark.into());
                s.ready_at = None;
                return;
            }
            match s.ready_at {
                None => {
                    s.ready_at = Some(now);
                    ready(ctx, "digitise", stage_rect.unwrap_or(screen));
                }
                Some(t) if now - t >= s.hold_secs => {
                    s.step = 1;
                    s.ready_at = None;
                    d.placing = false;
                    app.pending
                        .push(AppCommand::SetWorkspace(Workspace::Analysis).into());
                    app.pending
                        .push(super::command::AnalysisCommand::Run.into());
                }
                _ => {}
            }
        }
        1 => {
            if app.analysis.result.is_none() || app.analysis.is_running() {
                if let Some(e) = &app.analysis.error {
                    let why = format!("the analysis failed: {e}");
                    s.give_up(ctx, &why);
                }
                return;
            }
            match s.ready_at {
                None => {
                    s.ready_at = Some(now);
                    ready(ctx, "analysis", screen);
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

/// The user run: says when each step a user takes has landed, so the script can take the
/// next one (the script does every step with real keys and clicks).
fn user_step(app: &mut App, ctx: &egui::Context) {
    let mut states: Vec<String> = vec!["window".into()];
    if let Some(f) = &app.ui.new_project {
        states.push("form".into());
        if !f.scans.is_empty() && f.all_read() {
            states.push(format!("form read {}", f.scans.len()));
        }
    }
    if matches!(app.ui.prompt, Some(super::prompts::Prompt::Operator)) {
        states.push("operator".into());
    }
    let stage_current = app.views.is_current(app.prefs.stage);
    let stage_rect = app.views.slot(app.prefs.stage).rect;
    let loading = app.is_loading();
    if let Some(d) = &app.desk {
        states.push(format!("project {}", d.session.path().display()));
        if !d.session.project.specimens().is_empty() {
            states.push(format!("specimens {}", d.session.project.specimens().len()));
        }
        if let Some(t) = d.trial_ref() {
            states.push(format!("trial {} by {}", t.id, t.operator));
            let placed = t
                .landmarks
                .iter()
                .filter(|l| l.position_mm.is_some())
                .count();
            states.push(format!("placed {placed}"));
        }
        if !d.session.is_dirty() && d.trial_ref().is_some_and(|t| !t.landmarks.is_empty()) {
            states.push("saved".into());
        }
        if d.placing
            && d.scan_of.is_some()
            && d.scan_of == d.specimen
            && !loading
            && stage_current
            && let Some(r) = stage_rect
            && let Some(s) = &mut app.smoke
            && !s.said.iter().any(|x| x == "stage")
        {
            s.said.push("stage".into());
            ready(ctx, "placing", r);
        }
    }
    if let Some(s) = &mut app.smoke {
        for st in states {
            if !s.said.contains(&st) {
                println!("smoke: state {st}");
                s.said.push(st);
            }
        }
    }
}
