//! The workstation's state in three tiers, and the commands that change it.
//!
//! - [`Document`]: what the user opened and will later save explicitly (for now the scan;
//!   the landmark project joins it). Panels only read it.
//! - [`Preferences`]: how the user likes to work (the large view, colour map, window presets,
//!   overlays). Saved with eframe's storage; every field has a default (`#[serde(default)]`),
//!   so preferences written by an older version still load.
//! - [`ViewState`]: where each view looks, the crosshair, the window, the hover read-out: never
//!   saved.
//!
//! Panels and views return [`Command`]s; the app applies them after the frame
//! ([`ViewState::apply`] for the view commands). Tests drive the app with the same values.

use std::path::PathBuf;
use std::sync::Arc;

use nalgebra::Vector3;
use serde::{Deserialize, Serialize};

use super::camera::{Oblique, Orbit, PlaneCamera, ScreenMap, onto_slice, slice_index, zoom_about};
use sutura_core::geometry::{VoxelIndex, VoxelPoint, WorldPoint};
use sutura_core::render::{ColourMap, Interpolation, WindowLevel};
use sutura_core::volume::Volume;

/// The five views. The first four are planes through the crosshair point.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize, Default)]
pub enum ViewId {
    /// The voxel plane of constant i (columns j, rows k).
    PlaneI,
    /// The voxel plane of constant j (columns i, rows k).
    PlaneJ,
    /// The voxel plane of constant k (columns i, rows j): a TIFF stack's own slices.
    #[default]
    PlaneK,
    /// A plane through the crosshair at any angle.
    Oblique,
    /// The 3D view: projection or shaded surface.
    Volume,
}

impl ViewId {
    pub const ALL: [Self; 5] = [
        Self::PlaneI,
        Self::PlaneJ,
        Self::PlaneK,
        Self::Oblique,
        Self::Volume,
    ];

    #[must_use]
    pub const fn index(self) -> usize {
        match self {
            Self::PlaneI => 0,
            Self::PlaneJ => 1,
            Self::PlaneK => 2,
            Self::Oblique => 3,
            Self::Volume => 4,
        }
    }

    /// The voxel axis of a voxel-plane view.
    #[must_use]
    pub const fn axis(self) -> Option<usize> {
        match self {
            Self::PlaneI => Some(0),
            Self::PlaneJ => Some(1),
            Self::PlaneK => Some(2),
            _ => None,
        }
    }

    /// Whether the view shows a plane (and takes part in the crosshair).
    #[must_use]
    pub const fn is_plane(self) -> bool {
        !matches!(self, Self::Volume)
    }

    /// The name shown in the view's corner and in menus.
    #[must_use]
    pub const fn label(self) -> &'static str {
        match self {
            Self::PlaneI => "i plane",
            Self::PlaneJ => "j plane",
            Self::PlaneK => "k plane",
            Self::Oblique => "oblique",
            Self::Volume => "3D",
        }
    }

    /// The view's identity colour (RGB): its frame, and its line in the other plane views.
    #[must_use]
    pub const fn colour(self) -> [u8; 3] {
        match self {
            Self::PlaneI => [232, 163, 61],  // amber
            Self::PlaneJ => [61, 184, 168],  // teal
            Self::PlaneK => [176, 124, 232], // lavender
            Self::Oblique => [232, 111, 90], // coral
            Self::Volume => [143, 179, 217], // steel blue
        }
    }

    /// The next view in [`Self::ALL`] order, wrapping.
    #[must_use]
    pub fn cycled(self, by: isize) -> Self {
        let n = Self::ALL.len() as isize;
        Self::ALL[(self.index() as isize + by).rem_euclid(n) as usize]
    }
}

/// What the 3D view shows.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum VolumeMode {
    /// The shaded iso-surface at the threshold.
    #[default]
    Surface,
    /// The maximum-intensity projection, through the window.
    Projection,
}

/// Which file dialog to open.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DialogKind {
    /// A scan file (`NIfTI`, TIFF).
    ScanFile,
    /// A folder of TIFF slices.
    SliceFolder,
    /// A landmark project (`.json`).
    Project,
    /// The folder exports are written into.
    ExportFolder,
}

/// The two workspaces: digitising one specimen, or the whole sample's analysis.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Workspace {
    #[default]
    Digitise,
    Analysis,
}

/// An answer to the unsaved-changes question.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Answer {
    Save,
    Discard,
    Cancel,
}

/// Everything the analysis view can write (see [`super::analysis_view`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ExportKind {
    /// The superimposition's tables (CSV, JSON, NPY).
    AnalysisTables,
    /// Its charts (SVG and PNG).
    AnalysisFigures,
    LongCsv,
    WideCsv,
    Json,
    Npy,
    Ply,
    Measurements,
}

/// Everything a panel or view can ask for; applied after the frame.
#[derive(Clone, Debug, PartialEq)]
pub enum Command {
    /// Open a scan (a file or a folder of slices) in the background.
    Open(PathBuf),
    ShowOpenDialog(DialogKind),
    /// The voxel size to give TIFF scans opened from now on (`36um` or `36um,36um,50um`;
    /// empty: the file's own).
    SetTiffVoxelSize(String),
    CancelLoad,
    Quit,

    /// Put a view on the large stage.
    SetStage(ViewId),
    /// Step `by` views through [`ViewId::ALL`] for the stage.
    CycleStage(isize),
    /// Move through slices: `steps` voxel planes along a voxel-plane view's axis, or `steps`
    /// smallest voxel spacings along the oblique plane's normal.
    Scroll {
        view: ViewId,
        steps: i32,
    },
    /// Zoom a view by `factor` (> 1 magnifies) keeping `anchor` (a world point on the view's
    /// plane, or on the 3D image plane) fixed on screen; `None` zooms about the centre.
    Zoom {
        view: ViewId,
        factor: f64,
        anchor: Option<WorldPoint>,
    },
    /// Move a view's content by a world displacement (the pointer's drag).
    Pan {
        view: ViewId,
        by: Vector3<f64>,
    },
    /// Fit the view to the volume again (and, for the 3D view, the default orbit).
    ResetView(ViewId),
    /// Every view, the crosshair, the oblique plane and the window back to their start.
    ResetAll,
    /// Move the crosshair point (clamped to the volume).
    MoveCursor(WorldPoint),

    /// Shift the window's centre by `centre_by` (intensity units) and scale its width.
    NudgeWindow {
        centre_by: f64,
        width_factor: f64,
    },
    SetWindow(WindowLevel),
    /// The window from the scan's intensity percentiles.
    ResetWindow,
    ApplyPreset(usize),
    /// Keep the current window as a named preset.
    SavePreset(String),
    DeletePreset(usize),
    SetColourMap(ColourMap),

    /// Turn the oblique plane about its own `u` and `v` axes (degrees).
    TurnOblique {
        about_u_deg: f64,
        about_v_deg: f64,
    },
    /// Set the oblique plane's `[tilt_u, tilt_v, spin]` in degrees.
    SetObliqueAngles([f64; 3]),

    /// Orbit the 3D view (degrees).
    Orbit {
        d_azimuth_deg: f64,
        d_elevation_deg: f64,
    },
    SetOrbitAngles {
        azimuth_deg: f64,
        elevation_deg: f64,
    },
    SetVolumeMode(VolumeMode),
    SetThreshold(f64),
    /// Change the threshold by a fraction of the scan's intensity range.
    NudgeThreshold(f64),

    ToggleCrosshair,
    ToggleScaleBar,
    ToggleHelp,

    /// Select a specimen of the open project and open its scan.
    SelectSpecimen(String),
    SelectTrial(String),
    /// Start a new trial of the selected specimen (asks for the operator's name once).
    StartTrial,
    /// The operator's name for trials from now on; starts the trial that asked for it.
    SetOperator(String),
    /// Make a landmark the current one.
    SelectLandmark(String),
    /// Step the current landmark through the scheme.
    StepLandmark(isize),
    /// Placing mode on or off: in it, a click on a view places the current landmark.
    TogglePlacing,
    /// Place the current landmark at a point clicked on a plane view (snapped to the
    /// boundary when snapping is on and the landmark lies on the surface).
    PlaceOnPlane {
        view: ViewId,
        at: WorldPoint,
    },
    /// Place the current landmark on the 3D view's surface: the ray from `origin` along
    /// `direction` (the pixel's view ray).
    PlaceOnSurface {
        origin: WorldPoint,
        direction: Vector3<f64>,
    },
    /// Move a placed landmark to a point (a drag on a plane view).
    MoveLandmark {
        landmark: String,
        to: WorldPoint,
    },
    /// Mark the current landmark missing on this specimen.
    MarkMissing,
    /// Forget the current landmark's position or state.
    ClearLandmark,
    SetNote {
        landmark: String,
        note: String,
    },
    /// Move the crosshair to the current landmark.
    GoToLandmark,
    /// Trace a curve: while placing, clicks add control points to segment `segment` (between
    /// its anchors `segment` and `segment + 1`); `None` goes back to landmarks.
    SetTracing(Option<(String, usize)>),
    /// Remove a curve's traced points.
    ClearCurve(String),
    /// Trace the next curve segment of the scheme (after the last one: back to landmarks).
    CycleTracing,
    ToggleSnap,
    /// The iso-value snapping looks for.
    SetSnapThreshold(f64),
    Undo,
    Redo,
    Save,
    /// Answer the unsaved-changes question.
    Unsaved(Answer),
    /// Recover (`true`) or discard the autosave found beside the project.
    Autosave(bool),
    /// Open a specimen whose scan is not the one recorded, read-only (`true`), or cancel.
    Mismatch(bool),
    SetWorkspace(Workspace),
    /// Digitise ↔ analysis.
    ToggleWorkspace,
    /// Landmark labels in the views on or off.
    ToggleLabels,
    RunAnalysis,
    /// PC axes of the morphospace (0-based).
    SetAxes([usize; 2]),
    SetExportFolder(PathBuf),
    Export(ExportKind),
}

/// A scan that is open, with what the views need to start from.
#[derive(Debug)]
pub struct Scan {
    /// Distinguishes scans opened one after the other (renders of an older one are dropped).
    pub id: u64,
    pub path: PathBuf,
    pub volume: Arc<Volume>,
    /// The 0.5th and 99.5th percentiles of the intensities: the default window.
    pub robust_range: (f64, f64),
    /// The minimum and maximum intensity.
    pub full_range: (f64, f64),
    /// The median: with the 99.5th percentile it gives the default surface threshold.
    pub median: f64,
    /// The ISO-50 iso-value (halfway between the background and material peaks), where the
    /// histogram has two; what snapping to the boundary looks for at first.
    pub iso50: Option<f64>,
}

impl Scan {
    /// Summarises a loaded volume (one pass over the voxels for the percentiles).
    #[must_use]
    pub fn new(id: u64, path: PathBuf, volume: Volume) -> Self {
        let p = volume.percentiles(&[0.0, 0.5, 50.0, 99.5, 100.0]);
        let iso50 = sutura_core::landmarks::pick::iso50_threshold(&volume).ok();
        Self {
            id,
            path,
            volume: Arc::new(volume),
            robust_range: (p[1], p[3]),
            full_range: (p[0], p[4]),
            median: p[2],
            iso50,
        }
    }

    /// The window from the 0.5th to the 99.5th percentile (common practice for a first look).
    #[must_use]
    pub fn default_window(&self) -> WindowLevel {
        WindowLevel::from_range(self.robust_range.0, self.robust_range.1)
            .or_else(|| WindowLevel::new(self.robust_range.0, 1.0))
            .unwrap_or(WindowLevel {
                centre: 0.0,
                width: 1.0,
            })
    }

    /// Halfway between the median (the embedding matrix, in a specimen scan) and the 99.5th
    /// percentile (the densest material): a first guess for the specimen's surface, as the
    /// command line's `render` uses.
    #[must_use]
    pub fn default_threshold(&self) -> f64 {
        0.5 * (self.median + self.robust_range.1)
    }

    /// The file or folder name.
    #[must_use]
    pub fn name(&self) -> String {
        self.path.file_name().map_or_else(
            || self.path.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        )
    }
}

/// What the user opened. Panels read it; only commands change it.
#[derive(Debug, Default)]
pub struct Document {
    pub scan: Option<Arc<Scan>>,
    /// The landmark project, when one is open.
    pub session: Option<super::desk::Session>,
}

/// Where the strip of small views sits.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum StripSide {
    Left,
    #[default]
    Right,
}

/// A named window.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WindowPreset {
    pub name: String,
    pub centre: f64,
    pub width: f64,
}

/// The user's working preferences, kept between sessions.
#[allow(clippy::struct_excessive_bools)] // reason: independent on/off preferences, each a switch in the UI
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Preferences {
    /// The view on the large stage.
    pub stage: ViewId,
    pub strip_side: StripSide,
    pub colour_map: ColourMap,
    pub interpolation: Interpolation,
    pub show_crosshair: bool,
    pub show_scale_bar: bool,
    pub show_orientation: bool,
    pub presets: Vec<WindowPreset>,
    /// Recently opened scans, newest first.
    pub recent: Vec<PathBuf>,
    /// Voxel size given for TIFF scans (`36um` or `36um,36um,50um`); empty: the file's own.
    pub tiff_voxel_size: String,
    /// The name new trials are recorded under.
    pub operator: String,
    /// Snap surface landmarks to the material's boundary when placing them on a plane view.
    pub snap: bool,
    /// Labels beside the landmarks in the views.
    pub landmark_labels: bool,
}

impl Default for Preferences {
    fn default() -> Self {
        Self {
            stage: ViewId::PlaneK,
            strip_side: StripSide::Right,
            colour_map: ColourMap::Grey,
            interpolation: Interpolation::Trilinear,
            show_crosshair: true,
            show_scale_bar: true,
            show_orientation: true,
            presets: Vec::new(),
            recent: Vec::new(),
            tiff_voxel_size: String::new(),
            operator: String::new(),
            snap: true,
            landmark_labels: true,
        }
    }
}

impl Preferences {
    /// The key under which eframe stores them.
    pub const STORAGE_KEY: &'static str = "sutura.preferences";

    /// Remembers a path at the top of the recent list (at most 8).
    pub fn remember(&mut self, path: PathBuf) {
        self.recent.retain(|p| p != &path);
        self.recent.insert(0, path);
        self.recent.truncate(8);
    }
}

/// What the pointer is over: the status line's read-out.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Hover {
    pub view: ViewId,
    pub world: WorldPoint,
    pub voxel: Option<VoxelIndex>,
    pub value: Option<f64>,
}

/// How the views look at the scan right now; never saved.
#[derive(Clone, Debug)]
pub struct ViewState {
    /// The crosshair point: every plane view passes through it.
    pub cursor: WorldPoint,
    /// Framing of the four plane views, by [`ViewId::index`].
    pub planes: [PlaneCamera; 4],
    pub oblique: Oblique,
    pub orbit: Orbit,
    pub window: WindowLevel,
    pub volume_mode: VolumeMode,
    pub threshold: f64,
    /// Each view's screen map in the last frame (`None` for the 3D view and hidden views).
    pub maps: [Option<ScreenMap>; 5],
    pub hover: Option<Hover>,
    pub help_open: bool,
    /// Wheel movement not yet turned into whole slices.
    pub wheel_rest: f32,
    /// When the 3D view last changed (egui time, seconds): it shows a coarse image until it
    /// has been still for a moment.
    pub volume_changed_at: f64,
    /// When a plane view last changed: a plane view too slow to redraw at full resolution
    /// within a frame shows a half-resolution picture until it has been still for a moment.
    pub planes_changed_at: f64,
    /// A message for the status line, and whether it reports an error.
    pub message: Option<(String, bool)>,
    /// A landmark being dragged to a new place on a plane view, and where it is now.
    pub drag: Option<(String, WorldPoint)>,
}

impl Default for ViewState {
    fn default() -> Self {
        let origin = WorldPoint::new(0.0, 0.0, 0.0);
        let cam = PlaneCamera {
            centre: origin,
            zoom: 1.0,
        };
        Self {
            cursor: origin,
            planes: [cam; 4],
            oblique: Oblique::default(),
            orbit: Orbit::default(),
            window: WindowLevel {
                centre: 0.5,
                width: 1.0,
            },
            volume_mode: VolumeMode::Surface,
            threshold: 0.0,
            maps: [None; 5],
            hover: None,
            help_open: false,
            wheel_rest: 0.0,
            volume_changed_at: f64::NEG_INFINITY,
            planes_changed_at: f64::NEG_INFINITY,
            message: None,
            drag: None,
        }
    }
}

impl ViewState {
    /// The start state for a freshly opened scan.
    #[must_use]
    pub fn for_scan(scan: &Scan) -> Self {
        let v = &scan.volume;
        Self {
            cursor: v.centre_world(),
            planes: [PlaneCamera::fitted(v); 4],
            window: scan.default_window(),
            threshold: scan.default_threshold(),
            ..Self::default()
        }
    }

    /// The crosshair's slice index in a voxel-plane view.
    #[must_use]
    pub fn slice(&self, volume: &Volume, view: ViewId) -> Option<usize> {
        view.axis().map(|a| slice_index(volume, a, self.cursor))
    }

    /// Applies a view command; other commands are the app's and are ignored here. `now` is
    /// the time in seconds (for the 3D view's coarse-then-full rendering).
    #[allow(clippy::too_many_lines)] // reason: one arm per command, each a few lines
    pub fn apply(&mut self, scan: &Scan, prefs: &mut Preferences, cmd: &Command, now: f64) {
        let vol = &scan.volume;
        if matches!(
            cmd,
            Command::Scroll { .. }
                | Command::Zoom { .. }
                | Command::Pan { .. }
                | Command::MoveCursor(_)
                | Command::NudgeWindow { .. }
                | Command::SetWindow(_)
                | Command::TurnOblique { .. }
                | Command::SetObliqueAngles(_)
        ) {
            self.planes_changed_at = now;
        }
        match cmd {
            Command::SetStage(v) => prefs.stage = *v,
            Command::CycleStage(by) => prefs.stage = prefs.stage.cycled(*by),
            Command::Scroll { view, steps } => self.scroll(vol, *view, *steps),
            Command::Zoom {
                view,
                factor,
                anchor,
            } => {
                if *view == ViewId::Volume {
                    let centre = WorldPoint(vol.centre_world().0 + self.orbit.pan);
                    let (c, z) =
                        zoom_about(centre, self.orbit.zoom, anchor.unwrap_or(centre), *factor);
                    self.orbit.zoom = z;
                    self.orbit.pan = c.0 - vol.centre_world().0;
                    self.volume_changed_at = now;
                } else {
                    let cam = &mut self.planes[view.index()];
                    let (c, z) =
                        zoom_about(cam.centre, cam.zoom, anchor.unwrap_or(cam.centre), *factor);
                    cam.centre = c;
                    cam.zoom = z;
                }
            }
            Command::Pan { view, by } => {
                if *view == ViewId::Volume {
                    self.orbit.pan -= by;
                    self.volume_changed_at = now;
                } else {
                    let cam = &mut self.planes[view.index()];
                    cam.centre = WorldPoint(cam.centre.0 - by);
                }
            }
            Command::ResetView(view) => {
                if *view == ViewId::Volume {
                    self.orbit = Orbit::default();
                    self.volume_changed_at = now;
                } else {
                    self.planes[view.index()] = PlaneCamera::fitted(vol);
                }
            }
            Command::ResetAll => {
                let keep_help = self.help_open;
                *self = Self::for_scan(scan);
                self.help_open = keep_help;
                self.volume_changed_at = now;
            }
            Command::MoveCursor(p) => self.cursor = clamp_to_volume(vol, *p),
            Command::NudgeWindow {
                centre_by,
                width_factor,
            } => {
                let span = (scan.full_range.1 - scan.full_range.0).abs().max(1e-9);
                let w = (self.window.width * width_factor).clamp(span * 1e-4, span * 4.0);
                let c = self.window.centre + centre_by;
                if let Some(wl) = WindowLevel::new(c, w) {
                    self.window = wl;
                }
                self.touch_volume_if(VolumeMode::Projection, now);
            }
            Command::SetWindow(wl) => {
                if let Some(wl) = WindowLevel::new(wl.centre, wl.width) {
                    self.window = wl;
                    self.touch_volume_if(VolumeMode::Projection, now);
                }
            }
            Command::ResetWindow => {
                self.window = scan.default_window();
                self.touch_volume_if(VolumeMode::Projection, now);
            }
            Command::ApplyPreset(i) => {
                if let Some(p) = prefs.presets.get(*i)
                    && let Some(wl) = WindowLevel::new(p.centre, p.width)
                {
                    self.window = wl;
                    self.touch_volume_if(VolumeMode::Projection, now);
                }
            }
            Command::SavePreset(name) => {
                let name = name.trim();
                if !name.is_empty() {
                    prefs.presets.retain(|p| p.name != name);
                    prefs.presets.push(WindowPreset {
                        name: name.to_owned(),
                        centre: self.window.centre,
                        width: self.window.width,
                    });
                }
            }
            Command::DeletePreset(i) if *i < prefs.presets.len() => {
                prefs.presets.remove(*i);
            }
            Command::SetColourMap(m) => {
                prefs.colour_map = *m;
                self.touch_volume_if(VolumeMode::Projection, now);
            }
            Command::TurnOblique {
                about_u_deg,
                about_v_deg,
            } => self.oblique = self.oblique.turned(*about_u_deg, *about_v_deg),
            Command::SetObliqueAngles(a) if a.iter().all(|x| x.is_finite()) => {
                self.oblique = Oblique::from_angles_deg(*a);
            }
            Command::Orbit {
                d_azimuth_deg,
                d_elevation_deg,
            } => {
                self.orbit = self.orbit.turned(*d_azimuth_deg, *d_elevation_deg);
                self.volume_changed_at = now;
            }
            Command::SetOrbitAngles {
                azimuth_deg,
                elevation_deg,
            } => {
                let o = Orbit {
                    azimuth_deg: 0.0,
                    elevation_deg: 0.0,
                    ..self.orbit
                };
                self.orbit = o.turned(*azimuth_deg, *elevation_deg);
                self.volume_changed_at = now;
            }
            Command::SetVolumeMode(m) => {
                self.volume_mode = *m;
                self.volume_changed_at = now;
            }
            Command::SetThreshold(t) if t.is_finite() => {
                self.threshold = *t;
                self.volume_changed_at = now;
            }
            Command::NudgeThreshold(frac) => {
                let span = scan.full_range.1 - scan.full_range.0;
                let t = self.threshold + frac * span;
                if t.is_finite() {
                    self.threshold = t.clamp(scan.full_range.0, scan.full_range.1);
                    self.volume_changed_at = now;
                }
            }
            Command::ToggleCrosshair => prefs.show_crosshair = !prefs.show_crosshair,
            Command::ToggleScaleBar => prefs.show_scale_bar = !prefs.show_scale_bar,
            Command::ToggleHelp => self.help_open = !self.help_open,
            _ => {}
        }
    }

    fn touch_volume_if(&mut self, mode: VolumeMode, now: f64) {
        if self.volume_mode == mode {
            self.volume_changed_at = now;
        }
    }

    fn scroll(&mut self, vol: &Volume, view: ViewId, steps: i32) {
        if let Some(axis) = view.axis() {
            let n = vol.dims()[axis] as i64;
            let i = slice_index(vol, axis, self.cursor) as i64 + i64::from(steps);
            let i = i.clamp(0, n - 1) as usize;
            self.cursor = onto_slice(vol, axis, i, self.cursor);
        } else if view == ViewId::Oblique {
            let (_, _, n) = self.oblique.basis(vol);
            let sp = vol.spacing_mm();
            let step = sp[0].min(sp[1]).min(sp[2]);
            let p = WorldPoint(self.cursor.0 + n * (f64::from(steps) * step));
            self.cursor = clamp_to_volume(vol, p);
        }
    }

    /// The read-out for a world point in a view.
    #[must_use]
    pub fn hover_at(volume: &Volume, view: ViewId, world: WorldPoint) -> Hover {
        let voxel = volume.world_to_voxel(world).nearest_index(volume.dims());
        Hover {
            view,
            world,
            voxel,
            value: voxel.and_then(|v| volume.value(v)),
        }
    }
}

/// The point moved into the volume's box of voxel centres.
#[must_use]
pub fn clamp_to_volume(volume: &Volume, p: WorldPoint) -> WorldPoint {
    let d = volume.dims();
    let v = volume.world_to_voxel(p).0;
    if !v.iter().all(|c| c.is_finite()) {
        return volume.centre_world();
    }
    volume.voxel_to_world(VoxelPoint::new(
        v.x.clamp(0.0, d[0] as f64 - 1.0),
        v.y.clamp(0.0, d[1] as f64 - 1.0),
        v.z.clamp(0.0, d[2] as f64 - 1.0),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use sutura_core::geometry::Affine3;

    fn scan() -> Scan {
        let dims = [8, 6, 5];
        let data: Vec<u16> = (0..8 * 6 * 5).map(|i| (i * 10) as u16).collect();
        let v = Volume::from_vec(dims, Affine3::from_spacing([0.036, 0.036, 0.05]), data).unwrap();
        Scan::new(1, PathBuf::from("test.nii"), v)
    }

    #[test]
    fn scrolling_steps_one_voxel_plane_and_stops_at_the_ends() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        // centre of 5 slices along k is 2
        assert_eq!(vs.slice(&s.volume, ViewId::PlaneK), Some(2));
        vs.apply(
            &s,
            &mut prefs,
            &Command::Scroll {
                view: ViewId::PlaneK,
                steps: 1,
            },
            0.0,
        );
        assert_eq!(vs.slice(&s.volume, ViewId::PlaneK), Some(3));
        // the other planes' slices do not move
        assert_eq!(vs.slice(&s.volume, ViewId::PlaneI), Some(4));
        vs.apply(
            &s,
            &mut prefs,
            &Command::Scroll {
                view: ViewId::PlaneK,
                steps: 10,
            },
            0.0,
        );
        assert_eq!(vs.slice(&s.volume, ViewId::PlaneK), Some(4));
        vs.apply(
            &s,
            &mut prefs,
            &Command::Scroll {
                view: ViewId::PlaneK,
                steps: -99,
            },
            0.0,
        );
        assert_eq!(vs.slice(&s.volume, ViewId::PlaneK), Some(0));
    }

    #[test]
    fn window_nudges_and_resets() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        let w0 = vs.window;
        vs.apply(
            &s,
            &mut prefs,
            &Command::NudgeWindow {
                centre_by: 25.0,
                width_factor: 2.0,
            },
            0.0,
        );
        assert_relative_eq!(vs.window.centre, w0.centre + 25.0);
        assert_relative_eq!(vs.window.width, w0.width * 2.0);
        vs.apply(&s, &mut prefs, &Command::ResetWindow, 0.0);
        assert_eq!(vs.window, w0);
    }

    #[test]
    fn presets_are_kept_in_preferences_by_name() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        vs.apply(
            &s,
            &mut prefs,
            &Command::SetWindow(WindowLevel {
                centre: 100.0,
                width: 40.0,
            }),
            0.0,
        );
        vs.apply(&s, &mut prefs, &Command::SavePreset(" bone ".into()), 0.0);
        vs.apply(
            &s,
            &mut prefs,
            &Command::SetWindow(WindowLevel {
                centre: 10.0,
                width: 4.0,
            }),
            0.0,
        );
        vs.apply(&s, &mut prefs, &Command::SavePreset("bone".into()), 0.0);
        assert_eq!(prefs.presets.len(), 1);
        assert_relative_eq!(prefs.presets[0].centre, 10.0);
        vs.apply(&s, &mut prefs, &Command::ResetWindow, 0.0);
        vs.apply(&s, &mut prefs, &Command::ApplyPreset(0), 0.0);
        assert_relative_eq!(vs.window.width, 4.0);
        // they survive a round trip through storage, and missing fields take defaults
        let text = serde_json::to_string(&prefs).unwrap();
        let back: Preferences = serde_json::from_str(&text).unwrap();
        assert_eq!(back, prefs);
        let old: Preferences = serde_json::from_str(r#"{"stage":"Volume"}"#).unwrap();
        assert_eq!(old.stage, ViewId::Volume);
        assert!(old.show_crosshair);
    }

    #[test]
    fn cursor_is_clamped_into_the_volume() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        vs.apply(
            &s,
            &mut prefs,
            &Command::MoveCursor(WorldPoint::new(-5.0, 0.1, 99.0)),
            0.0,
        );
        let v = s.volume.world_to_voxel(vs.cursor).0;
        assert_relative_eq!(v.x, 0.0, epsilon = 1e-9);
        assert_relative_eq!(v.y, 0.1 / 0.036, epsilon = 1e-9);
        assert_relative_eq!(v.z, 4.0, epsilon = 1e-9);
    }

    #[test]
    fn stage_cycles_through_all_views() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        let mut seen = Vec::new();
        for _ in 0..5 {
            vs.apply(&s, &mut prefs, &Command::CycleStage(1), 0.0);
            seen.push(prefs.stage);
        }
        assert_eq!(seen.last(), Some(&ViewId::PlaneK));
        seen.sort_by_key(|v| v.index());
        assert_eq!(seen, ViewId::ALL.to_vec());
    }

    #[test]
    fn hover_reads_the_voxel_value() {
        let s = scan();
        let p = s.volume.voxel_to_world(VoxelPoint::new(3.2, 1.9, 4.4));
        let h = ViewState::hover_at(&s.volume, ViewId::PlaneK, p);
        assert_eq!(h.voxel, Some(VoxelIndex::new(3, 2, 4)));
        // value = 10 × linear index
        assert_eq!(h.value, Some(10.0 * f64::from(3 + 8 * (2 + 6 * 4))));
    }

    #[test]
    fn scan_defaults_come_from_percentiles() {
        let s = scan();
        // values 0, 10, …, 2390; numpy linear percentiles of a uniform ramp
        assert_relative_eq!(s.median, 1195.0);
        assert_relative_eq!(s.robust_range.0, 0.005 * 2390.0, epsilon = 1e-9);
        assert_relative_eq!(
            s.default_threshold(),
            0.5 * (1195.0 + 0.995 * 2390.0),
            epsilon = 1e-9
        );
    }
}
