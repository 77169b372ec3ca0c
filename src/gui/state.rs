//! The workstation's state in three tiers.
//!
//! - [`Document`]: what the user opened (the scan; the project lives on the desk). Panels only
//!   read it.
//! - [`Preferences`]: how the user likes to work (the large view, colour map, window presets,
//!   overlays). Saved with eframe's storage; every field has a default (`#[serde(default)]`),
//!   so preferences written by an older version still load. Changed only by
//!   [`Preferences::apply`].
//! - [`ViewState`]: where each view looks, the crosshair, the window, the iso-value, the hover
//!   read-out: never saved. Changed only by [`ViewState::apply`].
//!
//! Panels and views return [`Command`](super::command::Command)s; the app hands each to its
//! owner after the frame. Tests drive the app with the same values.

use std::path::PathBuf;
use std::sync::Arc;

use serde::{Deserialize, Serialize};

use super::camera::{Oblique, Orbit, PlaneCamera, onto_slice, slice_index, zoom_about};
use super::command::{PrefsCommand, ViewCommand};
use sutura_core::geometry::{VoxelIndex, VoxelPoint, WorldPoint};
use sutura_core::landmarks::pick::{IsoValue, default_iso_value};
use sutura_core::render::{ColourMap, Interpolation, WindowLevel};
use sutura_core::volume::{Volume, VolumeSource};

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
    /// One family, blue-violet to pink, kept apart from the landmark states' green, amber, red
    /// and grey and from the curves' sky blue (see `sutura_core::landmarks::palette`).
    #[must_use]
    pub const fn colour(self) -> [u8; 3] {
        match self {
            Self::PlaneI => [100, 100, 255],  // indigo
            Self::PlaneJ => [176, 116, 250],  // violet
            Self::PlaneK => [226, 112, 236],  // orchid
            Self::Oblique => [252, 112, 190], // pink
            Self::Volume => [214, 200, 255],  // lilac
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
    /// The shaded surface at the scan's iso-value.
    #[default]
    Surface,
    /// The maximum-intensity projection, through the window.
    Projection,
}

/// A scan that is open, with what the views need to start from.
pub struct Scan {
    /// Distinguishes scans opened one after the other (renders of an older one are dropped).
    pub id: u64,
    pub path: PathBuf,
    /// The voxels, through the volume interface: the whole scan in memory, or an OME-Zarr
    /// store larger than the memory budget, read chunk by chunk at the level each view needs.
    pub source: Arc<dyn VolumeSource>,
    /// The 0.5th and 99.5th percentiles of the intensities: the default window.
    pub robust_range: (f64, f64),
    /// The minimum and maximum intensity.
    pub full_range: (f64, f64),
    /// The scan's default iso-value (ISO-50, or the library's stated fallback): the 3D view's
    /// surface, snapping and 3D picking start at it.
    pub iso: IsoValue,
    /// Bytes of the level the 3D view reads of a scan that is not in memory (the finest level
    /// within them).
    pub volume_view_bytes: u64,
    /// The OME-Zarr store the voxels are read from when the window built one for the scan at
    /// `path` (the scan's records — fingerprints, label images — stay the scan's own).
    pub store: Option<PathBuf>,
}

impl std::fmt::Debug for Scan {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Scan")
            .field("id", &self.id)
            .field("path", &self.path)
            .field("dims", &self.source.dims())
            .field("in_memory", &self.source.whole().is_some())
            .finish_non_exhaustive()
    }
}

impl Scan {
    /// Summarises a loaded volume (one pass over the voxels for the percentiles).
    #[must_use]
    pub fn new(id: u64, path: PathBuf, volume: Volume) -> Self {
        let p = volume.percentiles(&[0.0, 0.5, 99.5, 100.0]);
        let iso = default_iso_value(&volume);
        Self {
            id,
            path,
            source: Arc::new(volume),
            robust_range: (p[1], p[2]),
            full_range: (p[0], p[3]),
            iso,
            volume_view_bytes: 0,
            store: None,
        }
    }

    /// A scan read through `source` (a store): its intensity statistics, percentiles and
    /// ISO-50 are the ones the source keeps (written when the store was made), so opening reads
    /// no voxels.
    pub fn from_source(
        id: u64,
        path: PathBuf,
        source: Arc<dyn VolumeSource>,
        volume_view_bytes: u64,
    ) -> Result<Self, String> {
        let name = path.display().to_string();
        let intensity = source.intensity().map_err(|e| format!("{name}: {e}"))?;
        let p = |q: f64| intensity.percentile(q).unwrap_or(f64::NAN);
        let (lo, hi) = (intensity.stats.min, intensity.stats.max);
        let iso = sutura_core::landmarks::pick_source::default_iso_value(&*source)
            .map_err(|e| format!("{name}: {e}"))?;
        Ok(Self {
            id,
            path,
            source,
            robust_range: (p(0.5), p(99.5)),
            full_range: (lo, hi),
            iso,
            volume_view_bytes,
            store: None,
        })
    }

    /// Where the voxels are read from: the store built for the scan, else the scan itself.
    #[must_use]
    pub fn voxels_path(&self) -> &std::path::Path {
        self.store.as_deref().unwrap_or(&self.path)
    }

    /// The whole scan in memory, when it is (else it is read through [`Self::source`]).
    #[must_use]
    pub fn whole(&self) -> Option<&Volume> {
        self.source.whole()
    }

    /// The scan's full-resolution grid and placement (and its voxels, read as needed).
    #[must_use]
    pub fn grid(&self) -> &dyn VolumeSource {
        &*self.source
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
    /// Voxel size given for TIFF scans (`36um` or `36um,36um,50um`, as
    /// [`sutura_core::geometry::VoxelSizeMm`] reads it); empty: the file's own.
    pub tiff_voxel_size: String,
    /// The name new trials are recorded under.
    pub operator: String,
    /// Snap surface landmarks to the material's boundary when placing them on a plane view.
    pub snap: bool,
    /// Labels beside the landmarks in the views.
    pub landmark_labels: bool,
    /// The window's memory budget in GiB (`None`: a quarter of the machine's memory); see
    /// [`super::loader::MemoryBudget`].
    pub memory_budget_gib: Option<f64>,
    /// The folder where stores built of scans over the budget are kept (empty: the user's
    /// cache folder, see [`Preferences::store_cache_dir`]).
    pub store_cache: String,
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
            memory_budget_gib: None,
            store_cache: String::new(),
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

    /// The memory budget scans are opened with.
    #[must_use]
    pub fn budget(&self) -> super::loader::MemoryBudget {
        super::loader::MemoryBudget::new(self.memory_budget_gib)
    }

    /// Where stores built of scans over the budget go: the folder set, else
    /// `$XDG_CACHE_HOME/sutura/stores`, else `~/.cache/sutura/stores` (the XDG base directory
    /// convention), else the system's temporary folder.
    #[must_use]
    pub fn store_cache_dir(&self) -> PathBuf {
        let set = self.store_cache.trim();
        if !set.is_empty() {
            return PathBuf::from(set);
        }
        let var = |k: &str| {
            std::env::var_os(k)
                .filter(|v| !v.is_empty())
                .map(PathBuf::from)
        };
        var("XDG_CACHE_HOME")
            .or_else(|| var("HOME").map(|h| h.join(".cache")))
            .unwrap_or_else(std::env::temp_dir)
            .join("sutura")
            .join("stores")
    }

    /// The voxel size for TIFF scans opened from now on (`None`: the file's own).
    #[must_use]
    pub fn tiff_voxel_size_mm(&self) -> Option<[f64; 3]> {
        sutura_core::geometry::VoxelSizeMm::parse_optional(&self.tiff_voxel_size)
            .ok()
            .flatten()
            .map(|v| v.0)
    }

    /// Applies a preferences command.
    pub fn apply(&mut self, cmd: PrefsCommand) {
        match cmd {
            PrefsCommand::SetStage(v) => self.stage = v,
            PrefsCommand::CycleStage(by) => self.stage = self.stage.cycled(by),
            PrefsCommand::SavePreset { name, window } => {
                let name = name.trim();
                if !name.is_empty() {
                    self.presets.retain(|p| p.name != name);
                    self.presets.push(WindowPreset {
                        name: name.to_owned(),
                        centre: window.centre,
                        width: window.width,
                    });
                }
            }
            PrefsCommand::DeletePreset(i) => {
                if i < self.presets.len() {
                    self.presets.remove(i);
                }
            }
            PrefsCommand::SetColourMap(m) => self.colour_map = m,
            PrefsCommand::ToggleCrosshair => self.show_crosshair = !self.show_crosshair,
            PrefsCommand::ToggleScaleBar => self.show_scale_bar = !self.show_scale_bar,
            PrefsCommand::ToggleLabels => self.landmark_labels = !self.landmark_labels,
            PrefsCommand::ToggleSnap => self.snap = !self.snap,
            PrefsCommand::SetTiffVoxelSize(v) => {
                self.tiff_voxel_size = v.map(|v| v.to_text()).unwrap_or_default();
            }
            PrefsCommand::SetMemoryBudget(gib) => {
                self.memory_budget_gib = gib.filter(|g| g.is_finite() && *g > 0.0);
            }
            PrefsCommand::SetStoreCache(folder) => folder.trim().clone_into(&mut self.store_cache),
        }
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
    /// The one surface value: the 3D view's surface, snapping on the planes and picking in 3D.
    pub iso: IsoValue,
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
            iso: IsoValue::given(0.0),
            hover: None,
            help_open: false,
            wheel_rest: 0.0,
            volume_changed_at: f64::NEG_INFINITY,
            planes_changed_at: f64::NEG_INFINITY,
            drag: None,
        }
    }
}

impl ViewState {
    /// The start state for a freshly opened scan.
    #[must_use]
    pub fn for_scan(scan: &Scan) -> Self {
        let v = scan.grid();
        Self {
            cursor: v.centre_world(),
            planes: [PlaneCamera::fitted(v); 4],
            window: scan.default_window(),
            iso: scan.iso.clone(),
            ..Self::default()
        }
    }

    /// The crosshair's slice index in a voxel-plane view.
    #[must_use]
    pub fn slice(&self, volume: &dyn VolumeSource, view: ViewId) -> Option<usize> {
        view.axis().map(|a| slice_index(volume, a, self.cursor))
    }

    /// Applies a view command. `now` is the time in seconds (for the 3D view's coarse-then-full
    /// rendering).
    #[allow(clippy::too_many_lines)] // reason: one arm per command, each a few lines
    pub fn apply(&mut self, scan: &Scan, cmd: ViewCommand, now: f64) {
        let vol = scan.grid();
        if matches!(
            cmd,
            ViewCommand::Scroll { .. }
                | ViewCommand::Wheel { .. }
                | ViewCommand::Zoom { .. }
                | ViewCommand::Pan { .. }
                | ViewCommand::MoveCursor(_)
                | ViewCommand::NudgeWindow { .. }
                | ViewCommand::SetWindow(_)
                | ViewCommand::TurnOblique { .. }
                | ViewCommand::SetObliqueAngles(_)
        ) {
            self.planes_changed_at = now;
        }
        match cmd {
            ViewCommand::Scroll { view, steps } => self.scroll(vol, view, steps),
            ViewCommand::Wheel { view, lines } => {
                self.wheel_rest += lines;
                let steps = self.wheel_rest.trunc();
                self.wheel_rest -= steps;
                if steps != 0.0 {
                    self.scroll(vol, view, steps as i32);
                }
            }
            ViewCommand::Zoom {
                view,
                factor,
                anchor,
            } => {
                if view == ViewId::Volume {
                    let centre = WorldPoint(vol.centre_world().0 + self.orbit.pan);
                    let (c, z) =
                        zoom_about(centre, self.orbit.zoom, anchor.unwrap_or(centre), factor);
                    self.orbit.zoom = z;
                    self.orbit.pan = c.0 - vol.centre_world().0;
                    self.volume_changed_at = now;
                } else {
                    let cam = &mut self.planes[view.index()];
                    let (c, z) =
                        zoom_about(cam.centre, cam.zoom, anchor.unwrap_or(cam.centre), factor);
                    cam.centre = c;
                    cam.zoom = z;
                }
            }
            ViewCommand::Pan { view, by } => {
                if view == ViewId::Volume {
                    self.orbit.pan -= by;
                    self.volume_changed_at = now;
                } else {
                    let cam = &mut self.planes[view.index()];
                    cam.centre = WorldPoint(cam.centre.0 - by);
                }
            }
            ViewCommand::ResetView(view) => {
                if view == ViewId::Volume {
                    self.orbit = Orbit::default();
                    self.volume_changed_at = now;
                } else {
                    self.planes[view.index()] = PlaneCamera::fitted(vol);
                }
            }
            ViewCommand::ResetAll => {
                let keep_help = self.help_open;
                *self = Self::for_scan(scan);
                self.help_open = keep_help;
                self.volume_changed_at = now;
            }
            ViewCommand::MoveCursor(p) => self.cursor = clamp_to_volume(vol, p),
            ViewCommand::NudgeWindow {
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
            ViewCommand::SetWindow(wl) => {
                if let Some(wl) = WindowLevel::new(wl.centre, wl.width) {
                    self.window = wl;
                    self.touch_volume_if(VolumeMode::Projection, now);
                }
            }
            ViewCommand::ResetWindow => {
                self.window = scan.default_window();
                self.touch_volume_if(VolumeMode::Projection, now);
            }
            ViewCommand::TurnOblique {
                about_u_deg,
                about_v_deg,
            } => self.oblique = self.oblique.turned(about_u_deg, about_v_deg),
            ViewCommand::SetObliqueAngles(a) => {
                if a.iter().all(|x| x.is_finite()) {
                    self.oblique = Oblique::from_angles_deg(a);
                }
            }
            ViewCommand::Orbit {
                d_azimuth_deg,
                d_elevation_deg,
            } => {
                self.orbit = self.orbit.turned(d_azimuth_deg, d_elevation_deg);
                self.volume_changed_at = now;
            }
            ViewCommand::SetOrbitAngles {
                azimuth_deg,
                elevation_deg,
            } => {
                let o = Orbit {
                    azimuth_deg: 0.0,
                    elevation_deg: 0.0,
                    ..self.orbit
                };
                self.orbit = o.turned(azimuth_deg, elevation_deg);
                self.volume_changed_at = now;
            }
            ViewCommand::SetVolumeMode(m) => {
                self.volume_mode = m;
                self.volume_changed_at = now;
            }
            ViewCommand::ToggleVolumeMode => {
                self.volume_mode = match self.volume_mode {
                    VolumeMode::Surface => VolumeMode::Projection,
                    VolumeMode::Projection => VolumeMode::Surface,
                };
                self.volume_changed_at = now;
            }
            ViewCommand::SetIsoValue(t) => {
                if t.is_finite() {
                    self.iso = IsoValue::given(t);
                    self.touch_volume_if(VolumeMode::Surface, now);
                }
            }
            ViewCommand::NudgeIsoValue(frac) => {
                let span = scan.full_range.1 - scan.full_range.0;
                let t = self.iso.value + frac * span;
                if t.is_finite() {
                    self.iso = IsoValue::given(t.clamp(scan.full_range.0, scan.full_range.1));
                    self.touch_volume_if(VolumeMode::Surface, now);
                }
            }
            ViewCommand::ResetIsoValue => {
                self.iso = scan.iso.clone();
                self.touch_volume_if(VolumeMode::Surface, now);
            }
            ViewCommand::Hover(h) => self.hover = h,
            ViewCommand::Drag(d) => self.drag = d,
        }
    }

    fn touch_volume_if(&mut self, mode: VolumeMode, now: f64) {
        if self.volume_mode == mode {
            self.volume_changed_at = now;
        }
    }

    fn scroll(&mut self, vol: &dyn VolumeSource, view: ViewId, steps: i32) {
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
    pub fn hover_at(volume: &dyn VolumeSource, view: ViewId, world: WorldPoint) -> Hover {
        let voxel = volume.world_to_voxel(world).nearest_index(volume.dims());
        Hover {
            view,
            world,
            voxel,
            value: voxel.and_then(|v| volume.voxel_value(v).ok().flatten()),
        }
    }
}

/// The point moved into the volume's box of voxel centres.
#[must_use]
pub fn clamp_to_volume(volume: &dyn VolumeSource, p: WorldPoint) -> WorldPoint {
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
        let mut vs = ViewState::for_scan(&s);
        // centre of 5 slices along k is 2
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneK), Some(2));
        vs.apply(
            &s,
            ViewCommand::Scroll {
                view: ViewId::PlaneK,
                steps: 1,
            },
            0.0,
        );
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneK), Some(3));
        // the other planes' slices do not move
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneI), Some(4));
        vs.apply(
            &s,
            ViewCommand::Scroll {
                view: ViewId::PlaneK,
                steps: 10,
            },
            0.0,
        );
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneK), Some(4));
        vs.apply(
            &s,
            ViewCommand::Scroll {
                view: ViewId::PlaneK,
                steps: -99,
            },
            0.0,
        );
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneK), Some(0));
    }

    #[test]
    fn window_nudges_and_resets() {
        let s = scan();
        let mut vs = ViewState::for_scan(&s);
        let w0 = vs.window;
        vs.apply(
            &s,
            ViewCommand::NudgeWindow {
                centre_by: 25.0,
                width_factor: 2.0,
            },
            0.0,
        );
        assert_relative_eq!(vs.window.centre, w0.centre + 25.0);
        assert_relative_eq!(vs.window.width, w0.width * 2.0);
        vs.apply(&s, ViewCommand::ResetWindow, 0.0);
        assert_eq!(vs.window, w0);
    }

    #[test]
    fn presets_are_kept_in_preferences_by_name() {
        let s = scan();
        let mut prefs = Preferences::default();
        let mut vs = ViewState::for_scan(&s);
        vs.apply(
            &s,
            ViewCommand::SetWindow(WindowLevel {
                centre: 100.0,
                width: 40.0,
            }),
            0.0,
        );
        prefs.apply(PrefsCommand::SavePreset {
            name: " bone ".into(),
            window: vs.window,
        });
        vs.apply(
            &s,
            ViewCommand::SetWindow(WindowLevel {
                centre: 10.0,
                width: 4.0,
            }),
            0.0,
        );
        prefs.apply(PrefsCommand::SavePreset {
            name: "bone".into(),
            window: vs.window,
        });
        assert_eq!(prefs.presets.len(), 1);
        assert_relative_eq!(prefs.presets[0].centre, 10.0);
        vs.apply(&s, ViewCommand::ResetWindow, 0.0);
        let p = &prefs.presets[0];
        vs.apply(
            &s,
            ViewCommand::SetWindow(WindowLevel {
                centre: p.centre,
                width: p.width,
            }),
            0.0,
        );
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
        let mut vs = ViewState::for_scan(&s);
        vs.apply(
            &s,
            ViewCommand::MoveCursor(WorldPoint::new(-5.0, 0.1, 99.0)),
            0.0,
        );
        let v = s.grid().world_to_voxel(vs.cursor).0;
        assert_relative_eq!(v.x, 0.0, epsilon = 1e-9);
        assert_relative_eq!(v.y, 0.1 / 0.036, epsilon = 1e-9);
        assert_relative_eq!(v.z, 4.0, epsilon = 1e-9);
    }

    #[test]
    fn view_colours_stay_clear_of_the_landmark_state_colours() {
        use sutura_core::landmarks::palette;
        let dist = |a: [u8; 3], b: [u8; 3]| {
            a.iter()
                .zip(b)
                .map(|(x, y)| (f64::from(*x) - f64::from(y)).powi(2))
                .sum::<f64>()
                .sqrt()
        };
        for v in ViewId::ALL {
            for s in [
                palette::PLACED,
                palette::ESTIMATED,
                palette::MISSING,
                palette::OPEN,
                palette::CURVE,
                palette::CURRENT,
            ] {
                assert!(dist(v.colour(), s) > 80.0, "{v:?} vs {s:?}");
            }
        }
    }

    #[test]
    fn stage_cycles_through_all_views() {
        let mut prefs = Preferences::default();
        let mut seen = Vec::new();
        for _ in 0..5 {
            prefs.apply(PrefsCommand::CycleStage(1));
            seen.push(prefs.stage);
        }
        assert_eq!(seen.last(), Some(&ViewId::PlaneK));
        seen.sort_by_key(|v| v.index());
        assert_eq!(seen, ViewId::ALL.to_vec());
    }

    #[test]
    fn hover_reads_the_voxel_value() {
        let s = scan();
        let p = s.grid().voxel_to_world(VoxelPoint::new(3.2, 1.9, 4.4));
        let h = ViewState::hover_at(s.grid(), ViewId::PlaneK, p);
        assert_eq!(h.voxel, Some(VoxelIndex::new(3, 2, 4)));
        // value = 10 × linear index
        assert_eq!(h.value, Some(10.0 * f64::from(3 + 8 * (2 + 6 * 4))));
    }

    #[test]
    fn scan_defaults_come_from_percentiles_and_the_library_iso_value() {
        let s = scan();
        // values 0, 10, …, 2390; numpy linear percentiles of a uniform ramp
        assert_relative_eq!(s.robust_range.0, 0.005 * 2390.0, epsilon = 1e-9);
        assert_relative_eq!(s.robust_range.1, 0.995 * 2390.0, epsilon = 1e-9);
        // one surface value: the one the command line's render and pick default to
        assert_eq!(s.iso, default_iso_value(s.whole().unwrap()));
        assert_eq!(ViewState::for_scan(&s).iso, s.iso);
    }

    #[test]
    fn the_wheel_keeps_fractions_of_a_line_for_the_next_movement() {
        let s = scan();
        let mut vs = ViewState::for_scan(&s);
        let k0 = vs.slice(s.grid(), ViewId::PlaneK).unwrap();
        for _ in 0..3 {
            vs.apply(
                &s,
                ViewCommand::Wheel {
                    view: ViewId::PlaneK,
                    lines: 0.4,
                },
                0.0,
            );
        }
        assert_eq!(vs.slice(s.grid(), ViewId::PlaneK), Some(k0 + 1));
    }
}
