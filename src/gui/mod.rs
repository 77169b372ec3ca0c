//! The workstation: an egui desktop app over the library.
//!
//! Owns the window, the layout and the input; no science and no drawing of scan data lives
//! here. Every picture of the scan comes from [`sutura_core::render`] on worker threads and is only
//! shown here as a texture (uploaded once, then replaced with `TextureHandle::set`).
//!
//! State comes in three tiers ([`state`]): the [`Document`] (what was opened), [`Preferences`]
//! (kept with eframe's storage) and the [`ViewState`] (never saved); an open project is the
//! [`desk`]. Panels and views are functions that read the state and return [`Command`]s, grouped
//! by the type that owns what they change ([`command`]); the [`App`] hands each group to its
//! owner after the frame, which applies it with an exhaustive `match`. Keys, menu shortcuts and
//! the help all come from one table ([`actions`]). Tests drive the app with the same values the
//! UI produces.
//!
//! The layout: one large working view (the *stage*) with the four other views live in a
//! *strip* beside it; a click on a small view puts it on the stage. Each view has an identity
//! colour for its frame and for its line in the other plane views' crosshair.
//!
//! A landmark project opens on the *desk* ([`desk`]: the library's project session with what
//! the user is working on); [`desk_panel`] draws its column, [`marks`] the landmarks over the
//! views, [`new_project`] the form that starts a project from scans, and [`analysis_view`] the
//! whole sample's superimposition and the exports. [`prep`] holds the scan's label image for
//! virtual preparation and [`prep_panel`] its column tab.
//!
//! Loading ([`loader`]) and rendering ([`worker`]) run on background threads and report by
//! channel; the UI thread never waits for either. The 3D view shows a coarse picture while it
//! moves and the full one once it is still.
//!
//! Only this module imports egui and eframe.

pub mod actions;
pub mod adding;
pub mod analysis_extras;
pub mod analysis_view;
pub mod app;
pub mod camera;
pub mod command;
pub mod desk;
pub mod desk_panel;
pub mod documents;
pub mod files;
pub mod loader;
pub mod marks;
pub mod new_project;
pub mod panels;
pub mod prep;
pub mod prep_panel;
pub mod prompts;
pub mod smoke;
pub mod state;
pub mod status;
pub mod trial_lists;
pub mod view;
pub mod views;
pub mod worker;

pub use app::App;
pub use command::{
    AnalysisCommand, Answer, AppCommand, Command, DeskCommand, DialogKind, GrowSettings,
    PrefsCommand, PrepCommand, PrepTool, TypedPosition, ViewCommand, Workspace,
};
pub use prompts::{After, Prompt};
pub use smoke::Smoke;
pub use state::{Document, Preferences, ViewId, ViewState};
pub use status::{Level, Status};

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

use anyhow::{Result, bail};
use eframe::egui;

/// The sample scan.
pub const SAMPLE_SCAN: &str = "sample_volumes/HDC-002.nii.gz";
/// The sample landmark project opened when the workstation starts without a path.
pub const SAMPLE_PROJECT: &str = "sample_volumes/sample_project.json";
/// The bundled example landmark scheme, offered for a new project.
pub const SAMPLE_SCHEME: &str = "sample_volumes/scheme.toml";

/// What to say when there is no display to open a window on.
const NO_DISPLAY: &str = "no display to open the workstation on (neither DISPLAY nor \
     WAYLAND_DISPLAY is set); the headless commands work without one: sutura info, slice, \
     render, convert, superimpose (see sutura --help)";

/// The bundled sample scan: beside the working directory, else beside the source tree.
#[must_use]
pub fn sample_scan() -> Option<PathBuf> {
    bundled(SAMPLE_SCAN)
}

/// The bundled sample project, found as [`sample_scan`] is.
#[must_use]
pub fn sample_project() -> Option<PathBuf> {
    bundled(SAMPLE_PROJECT)
}

/// The bundled example scheme, found as [`sample_scan`] is (absolute).
#[must_use]
pub fn sample_scheme() -> Option<PathBuf> {
    bundled(SAMPLE_SCHEME).map(|p| std::path::absolute(&p).unwrap_or(p))
}

fn bundled(rel: &str) -> Option<PathBuf> {
    let here = PathBuf::from(rel);
    if here.exists() {
        return Some(here);
    }
    let built = Path::new(env!("CARGO_MANIFEST_DIR")).join(rel);
    built.exists().then_some(built)
}

/// Whether a window system is reachable by its environment variables.
#[must_use]
pub fn has_display() -> bool {
    let set = |v: &str| std::env::var_os(v).is_some_and(|s| !s.is_empty());
    set("DISPLAY") || set("WAYLAND_DISPLAY") || set("WAYLAND_SOCKET")
}

/// Opens the workstation window on `path` (a scan or a project; without one the sample
/// project) and runs until it closes.
pub fn run(path: Option<PathBuf>) -> Result<()> {
    if let Some(p) = &path
        && !p.exists()
    {
        bail!("{}: no such file or folder", p.display());
    }
    if !has_display() {
        bail!("{NO_DISPLAY}");
    }
    let open = path.or_else(sample_project).or_else(sample_scan);
    let failed = Arc::new(AtomicBool::new(false));
    let smoke = Smoke::from_env(Arc::clone(&failed));
    let options = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default()
            .with_title("Sutura")
            .with_app_id("sutura")
            .with_inner_size([1280.0, 800.0])
            .with_min_inner_size([800.0, 500.0])
            .with_drag_and_drop(true),
        ..eframe::NativeOptions::default()
    };
    let in_smoke = smoke.is_some();
    let result = eframe::run_native(
        "sutura",
        options,
        Box::new(move |cc| {
            let prefs = if in_smoke {
                Preferences::default()
            } else {
                cc.storage
                    .and_then(|s| eframe::get_value(s, Preferences::STORAGE_KEY))
                    .unwrap_or_default()
            };
            Ok(Box::new(App::new(prefs, open).with_smoke(smoke)))
        }),
    );
    if let Err(e) = result {
        let text = e.to_string().replace('\n', " ");
        bail!(
            "cannot open the workstation window ({text}); the headless commands work without one: sutura info, slice, render, convert, superimpose (see sutura --help)"
        );
    }
    if failed.load(Ordering::Relaxed) {
        bail!("the smoke run did not finish (see its output above)");
    }
    Ok(())
}
