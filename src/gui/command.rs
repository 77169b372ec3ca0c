//! Everything a panel, a view, a key or a test can ask of the workstation, grouped by the
//! type that owns what the command changes. Panels and views return [`Command`]s; after the
//! frame the app hands each group to its owner, which applies it with an exhaustive `match`, so
//! the compiler proves that every command is handled and none is silently dropped:
//!
//! | group | owner | applied by |
//! |---|---|---|
//! | [`AppCommand`] | the app: opening files, loads, dialogs, questions, quitting | `App::apply_app` |
//! | [`ViewCommand`] | how the views look at the scan ([`super::state::ViewState`]) | `ViewState::apply` |
//! | [`PrefsCommand`] | the user's preferences ([`super::state::Preferences`]) | `Preferences::apply` |
//! | [`DeskCommand`] | the open project and its digitising ([`super::desk::Desk`]) | `Desk::apply` |
//! | [`AnalysisCommand`] | the analysis workspace ([`super::analysis_view::AnalysisState`]) | `AnalysisState::apply` |
//! | [`PrepCommand`] | virtual preparation: the scan's label image ([`super::prep::Prep`]) | `Prep::apply` (making or opening one: `App::apply_prep`) |

use std::path::PathBuf;

use nalgebra::Vector3;

use super::state::{Hover, ViewId, VolumeMode};
use sutura_core::analysis::{ExportKind, ProjectAnalysisOptions};
use sutura_core::geometry::{VoxelSizeMm, WorldPoint};
use sutura_core::labels::Combine;
use sutura_core::labels::morph::MorphOp;
use sutura_core::labels::region::Connectivity;
use sutura_core::landmarks::project::create::NewSpecimen;
use sutura_core::mesh::write::MeshFormat;
use sutura_core::render::{ColourMap, WindowLevel};

/// One command, by owner.
#[derive(Clone, Debug, PartialEq)]
pub enum Command {
    App(AppCommand),
    View(ViewCommand),
    Prefs(PrefsCommand),
    Desk(DeskCommand),
    Analysis(AnalysisCommand),
    Prep(PrepCommand),
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
    /// A landmark scheme file (`.toml`), for a new project.
    Scheme,
    /// Scans (files or folders of slices) to add as specimens.
    AddScans,
    /// Where a new project file is saved.
    SaveProject,
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

/// The app's own commands.
#[derive(Clone, Debug, PartialEq)]
pub enum AppCommand {
    /// Open a scan (a file or a folder of slices) or a project, by what the path holds.
    Open(PathBuf),
    ShowDialog(DialogKind),
    /// A path chosen in a dialog of this kind.
    DialogChose(DialogKind, Vec<PathBuf>),
    CancelLoad,
    Quit,
    ToggleHelp,
    SetWorkspace(Workspace),
    /// Digitising to analysis, or back.
    ToggleWorkspace,
    /// Open the new-project form.
    NewProject,
    /// Close the new-project form without making a project.
    CancelNewProject,
    /// Make the project the new-project form describes and open it.
    CreateProject,
    /// Answer the unsaved-changes question.
    Unsaved(Answer),
    /// Open a specimen whose scan is not the one recorded, read-only (`true`), or cancel.
    Mismatch(bool),
    /// Build a store of a scan over the memory budget and open it (`true`), or cancel.
    BuildStore(bool),
    /// The operator's name for trials from now on (asked before the first trial); `None`
    /// cancels the question.
    Operator(Option<String>),
    /// Load the selected specimen's scan (unless it is the one shown).
    LoadSpecimen,
    /// Add specimens to the open project from scans, each loaded in the background to record
    /// its fingerprint.
    AddSpecimens(Vec<NewSpecimen>),
}

/// How the views look at the scan.
#[derive(Clone, Debug, PartialEq)]
pub enum ViewCommand {
    /// Move through slices: `steps` voxel planes along a voxel-plane view's axis, or `steps`
    /// smallest voxel spacings along the oblique plane's normal.
    Scroll {
        view: ViewId,
        steps: i32,
    },
    /// Wheel movement over a plane view, in lines; whole lines become slice steps and the rest
    /// is kept for the next movement.
    Wheel {
        view: ViewId,
        lines: f32,
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
    /// Shift the window's centre by `centre_by` (grey values) and scale its width.
    NudgeWindow {
        centre_by: f64,
        width_factor: f64,
    },
    SetWindow(WindowLevel),
    /// The window from the scan's intensity percentiles.
    ResetWindow,
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
    /// Switch the 3D view between surface and projection.
    ToggleVolumeMode,
    /// The scan's iso-value: the 3D view's surface, snapping and 3D picking all use it.
    SetIsoValue(f64),
    /// Change the iso-value by a fraction of the scan's grey range.
    NudgeIsoValue(f64),
    /// Back to the scan's default iso-value (ISO-50).
    ResetIsoValue,
    /// What the pointer is over (the status line's read-out).
    Hover(Option<Hover>),
    /// A landmark being dragged on a plane view, and where it is now (`None`: no drag).
    Drag(Option<(String, WorldPoint)>),
}

/// The user's preferences.
#[derive(Clone, Debug, PartialEq)]
pub enum PrefsCommand {
    /// Put a view on the large stage.
    SetStage(ViewId),
    /// Step `by` views through [`ViewId::ALL`] for the stage.
    CycleStage(isize),
    /// Keep a window as a named preset.
    SavePreset {
        name: String,
        window: WindowLevel,
    },
    DeletePreset(usize),
    SetColourMap(ColourMap),
    ToggleCrosshair,
    ToggleScaleBar,
    /// Landmark labels in the views on or off.
    ToggleLabels,
    /// Snapping surface landmarks to the boundary on or off.
    ToggleSnap,
    /// The voxel size given to TIFF scans opened from now on (`None`: the file's own).
    SetTiffVoxelSize(Option<VoxelSizeMm>),
    /// The memory budget in GiB for scans opened from now on (`None`: a quarter of the
    /// machine's memory).
    SetMemoryBudget(Option<f64>),
    /// The folder for stores built of scans over the budget (empty: the user's cache folder).
    SetStoreCache(String),
}

/// A landmark position typed by the user.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum TypedPosition {
    /// World millimetres.
    WorldMm([f64; 3]),
    /// Continuous voxel coordinates of the specimen's scan.
    Voxel([f64; 3]),
}

/// The open project and its digitising.
#[derive(Clone, Debug, PartialEq)]
pub enum DeskCommand {
    /// Select a specimen of the open project (its scan opens).
    SelectSpecimen(String),
    SelectTrial(String),
    /// Start a new trial of the selected specimen (asks for the operator's name once).
    StartTrial,
    /// Make a landmark the current one.
    SelectLandmark(String),
    /// Step the current landmark through the scheme.
    StepLandmark(isize),
    /// Placing mode on or off: in it, a click on a view places the current landmark.
    TogglePlacing,
    /// Placing off (Escape).
    StopPlacing,
    /// Place the current landmark at a point clicked on a plane view (snapped to the
    /// boundary when snapping is on and the landmark lies on the surface).
    PlaceOnPlane {
        view: ViewId,
        at: WorldPoint,
    },
    /// Place the current landmark on the 3D view's surface under a pixel: the view ray
    /// through `through` along `direction`.
    PlaceOnSurface {
        through: WorldPoint,
        direction: Vector3<f64>,
    },
    /// Place the current landmark at a typed position.
    PlaceTyped(TypedPosition),
    /// Estimate the current landmark from its bilateral partner across the midsagittal plane.
    EstimateFromPartner,
    /// Move a placed landmark to a point (the end of a drag on a plane view).
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
    Undo,
    Redo,
    Save,
    /// Recover (`true`) or discard the autosave found beside the project.
    Autosave(bool),
    RemoveSpecimen(String),
    /// Set (`Some`) or remove (`None`) a group under `key` for every listed specimen.
    SetGroup {
        specimens: Vec<String>,
        key: String,
        value: Option<String>,
    },
}

/// The analysis workspace.
#[derive(Clone, Debug, PartialEq)]
pub enum AnalysisCommand {
    /// Run the analysis of the project with these options.
    Run,
    SetOptions(Box<ProjectAnalysisOptions>),
    /// PC axes of the morphospace (0-based).
    SetAxes([usize; 2]),
    /// How disparity through time bins the ages.
    SetTimeBins(super::analysis_extras::TimeBins),
    SetExportFolder(PathBuf),
    Export(ExportKind),
}

/// Virtual preparation of the scan shown: its label image, the tools and the steps, each one
/// call of `sutura_core::labels` as `sutura labels` makes it.
#[derive(Clone, Debug, PartialEq)]
pub enum PrepCommand {
    /// Make an empty label image for the scan shown (labels `specimen` and `matrix`), saved
    /// at the preparation's path.
    Create,
    /// Open the label image saved at the preparation's path (it must fit the scan).
    Open,
    Save,
    AddLabel(String),
    /// The label the tools and steps change.
    SetCurrent(u8),
    /// Draw a label over the plane views or not.
    ToggleDrawn(u8),
    /// Keep a label in the 3D view (when the 3D view keeps only the ticked labels).
    ToggleKept(u8),
    /// The 3D view shows only the ticked labels' material (`true`) or the whole scan.
    SetKeptIn3d(bool),
    /// Opacity of the labels over the plane views (0 to 1).
    SetOpacity(f32),
    /// Labels over the plane views as outlines (`true`) or filled.
    SetOutline(bool),
    SetTool(PrepTool),
    /// The brush's radius, µm.
    SetBrushUm(f64),
    SetGrow(GrowSettings),
    /// The radius of erosion, dilation, opening and closing, µm.
    SetMorphUm(f64),
    /// Pieces with fewer voxels are removed by [`PrepCommand::RemoveSmall`].
    SetMinVoxels(u64),
    /// Paint (or erase, with the eraser) the current label from the stroke's last point to
    /// `at`: a disc on the voxel plane normal to `axis`, or a ball (`None`, the oblique view).
    PaintTo {
        at: WorldPoint,
        axis: Option<usize>,
    },
    /// The stroke ends: its painting is one step to undo.
    EndStroke,
    /// Grow the current label from a seed.
    Grow(WorldPoint),
    /// The current label keeps only its piece under a point.
    KeepPiece(WorldPoint),
    /// Fill the current label between its drawn slices along an axis (0 = i, 1 = j, 2 = k).
    Interpolate(usize),
    FillHoles,
    /// Add the voxels in the intensity range (within the other label, if one is chosen) to
    /// the current label.
    Threshold,
    /// The label the threshold keeps within and the current label combines with (0: none).
    SetOther(u8),
    /// Add, subtract or intersect the other label with the current one.
    Combine(Combine),
    Morph(MorphOp),
    RemoveSmall,
    /// Write the current label's surface (the scan at the 3D view's iso-value inside the
    /// label) beside the label image, and report it.
    ExportMesh(MeshFormat),
    Undo,
    Redo,
}

/// What a click or drag on a view does while preparing.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum PrepTool {
    /// Nothing: the views move the crosshair as usual.
    #[default]
    Look,
    Brush,
    Eraser,
    /// A click grows the current label from the voxel under it.
    Grow,
    /// A click keeps the current label's piece under it.
    KeepPiece,
}

/// How a region grows: through voxels in `lo..=hi` (rescaled units; an infinite end is open),
/// joined by faces (6) or also by edges and corners (26), up to a distance from the seed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GrowSettings {
    pub lo: f64,
    pub hi: f64,
    pub connectivity: Connectivity,
    pub max_distance_mm: Option<f64>,
}

macro_rules! group {
    ($variant:ident, $ty:ty) => {
        impl From<$ty> for Command {
            fn from(c: $ty) -> Self {
                Self::$variant(c)
            }
        }
    };
}
group!(App, AppCommand);
group!(View, ViewCommand);
group!(Prefs, PrefsCommand);
group!(Desk, DeskCommand);
group!(Analysis, AnalysisCommand);
group!(Prep, PrepCommand);
