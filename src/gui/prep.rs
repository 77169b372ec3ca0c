//! Virtual preparation in the window: the label image of the scan shown, the current label, the
//! tool and the undo history.
//!
//! Every step is one call of [`sutura_core::labels::ops`] or [`sutura_core::labels::brush::paint`],
//! the calls `sutura labels` makes, so the window and the command line write the same voxels.
//! The label image lives behind a lock shared with the render workers, which blend it over the
//! plane views; the 3D view renders a copy of the scan keeping only the ticked labels'
//! material ([`sutura_core::render::labels::keep_labels`]), made again when the labels change,
//! and surface picks land on that copy.

use std::path::{Path, PathBuf};
use std::sync::{Arc, PoisonError, RwLock, RwLockReadGuard, RwLockWriteGuard};

use super::command::{GrowSettings, PrepCommand, PrepTool};
use super::state::Scan;
use super::status::Status;
use sutura_core::geometry::WorldPoint;
use sutura_core::labels::brush::{self, BrushShape, Stroke};
use sutura_core::labels::region::{Connectivity, GrowOptions, IntensityRange};
use sutura_core::labels::{Combine, Edit, LabelInfo, LabelVolume, ops, zarr};
use sutura_core::landmarks::fingerprint::Fingerprint;
use sutura_core::mesh::MeshReport;
use sutura_core::mesh::write::MeshFormat;
use sutura_core::volume::Volume;

/// The undo history keeps at most this many bytes of saved bricks; older steps are forgotten
/// first (one full 64³ brick is 256 KiB).
pub const UNDO_BUDGET_BYTES: usize = 512 << 20;

/// A set of label values (one bit per value).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct LabelSet([u64; 4]);

impl LabelSet {
    #[must_use]
    pub fn contains(&self, v: u8) -> bool {
        self.0[usize::from(v / 64)] >> (v % 64) & 1 == 1
    }

    pub fn set(&mut self, v: u8, on: bool) {
        let bit = 1u64 << (v % 64);
        let w = &mut self.0[usize::from(v / 64)];
        if on {
            *w |= bit;
        } else {
            *w &= !bit;
        }
    }

    pub fn toggle(&mut self, v: u8) {
        let on = !self.contains(v);
        self.set(v, on);
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.0.iter().all(|w| *w == 0)
    }
}

/// What decides the labels drawn over a plane view.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct OverlayKey {
    pub revision: u64,
    pub drawn: LabelSet,
    pub opacity: f32,
    pub outline: bool,
}

/// What decides the 3D view's kept-labels copy of the scan.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KeptKey {
    pub revision: u64,
    pub kept: LabelSet,
    /// The 3D view's iso-value (its bits): the kept labels' rims keep what lies below it.
    pub iso_bits: u64,
}

/// What the views need of the preparation this frame.
#[derive(Clone)]
pub struct Layers {
    pub labels: Arc<RwLock<LabelVolume>>,
    pub overlay: Option<OverlayKey>,
    /// The 3D view's copy of the scan with only the kept labels, and its key.
    pub kept: Option<(KeptKey, Arc<Volume>)>,
}

/// The label image of the scan shown and how the user works on it.
pub struct Prep {
    path: PathBuf,
    scan_id: u64,
    labels: Arc<RwLock<LabelVolume>>,
    revision: u64,
    saved_revision: u64,
    counts: [u64; 256],
    voxel_mm3: f64,
    pub current: u8,
    pub drawn: LabelSet,
    pub kept: LabelSet,
    pub kept_in_3d: bool,
    pub opacity: f32,
    pub outline: bool,
    pub tool: PrepTool,
    pub brush_um: f64,
    pub grow: GrowSettings,
    pub morph_um: f64,
    pub min_voxels: u64,
    /// The other label: what a threshold keeps within and the current label combines with
    /// (0: none).
    pub other: u8,
    /// The scan's largest value: the top of a grow range shown when the range has none.
    pub scan_max: f64,
    undo: Vec<Edit>,
    redo: Vec<Edit>,
    /// The stroke being painted: what it changed so far and its last point.
    stroke: Option<(Edit, WorldPoint)>,
    kept_volume: Option<(KeptKey, Arc<Volume>)>,
    /// The scan is in memory (not read through its store): the 3D view can keep ticked labels
    /// only.
    pub scan_in_memory: bool,
    /// The last mesh written: its file and what it measures.
    pub last_mesh: Option<(PathBuf, MeshReport)>,
}

/// The name of the label image the window keeps inside a scan's OME-Zarr store.
pub const STORE_LABEL_IMAGE: &str = "preparation";

/// Where the window keeps a scan's label image: inside the scan's store as
/// `STORE/labels/preparation` when the scan is an OME-Zarr store; else beside the project as
/// `SPECIMEN.labels.zarr` when the scan is a project specimen's, else beside the scan as
/// `NAME.labels.zarr` (the scan's name without its extension, as specimen ids are made).
#[must_use]
pub fn default_path(scan: &Path, project: Option<(&Path, &str)>) -> PathBuf {
    if sutura_core::store::is_store(scan) {
        return scan.join("labels").join(STORE_LABEL_IMAGE);
    }
    if let Some((project, specimen)) = project {
        project
            .parent()
            .unwrap_or_else(|| Path::new("."))
            .join(format!("{specimen}.labels.zarr"))
    } else {
        let id = sutura_core::io::names::specimen_id_from_scan(scan);
        scan.parent()
            .unwrap_or_else(|| Path::new("."))
            .join(format!("{id}.labels.zarr"))
    }
}

impl Prep {
    /// An empty label image for `scan` with the labels `specimen` and `matrix`, saved at `path`.
    pub fn create(path: &Path, scan: &Scan) -> Result<Self, String> {
        if path.exists() {
            return Err(format!(
                "{} already exists: open it, or remove it first",
                path.display()
            ));
        }
        let v = scan.grid();
        let mut lv = LabelVolume::new(v.dims(), v.spacing_mm());
        lv.fingerprint = Some(Fingerprint::of_source(&scan.path, v).map_err(|e| e.to_string())?);
        for name in ["specimen", "matrix"] {
            lv.add_label(name).map_err(|e| e.to_string())?;
        }
        zarr::save(&lv, path).map_err(|e| e.to_string())?;
        Ok(Self::with(lv, path, scan))
    }

    /// The label image at `path`, checked to be on `scan`'s grid and made on it.
    pub fn open(path: &Path, scan: &Scan) -> Result<Self, String> {
        let v = scan.grid();
        let lv = zarr::load(path).map_err(|e| e.to_string())?;
        if lv.dims() != v.dims() {
            return Err(format!(
                "{}: labels for a {:?} grid, but the scan is {:?}",
                path.display(),
                lv.dims(),
                v.dims()
            ));
        }
        if let Some(f) = &lv.fingerprint
            && let Some(m) = f
                .check_source(&scan.path, v)
                .map_err(|e| format!("{}: {e}", scan.path.display()))?
        {
            return Err(format!("{}: {m}", path.display()));
        }
        Ok(Self::with(lv, path, scan))
    }

    fn with(lv: LabelVolume, path: &Path, scan: &Scan) -> Self {
        let spacing = scan.grid().spacing_mm();
        let finest_um = spacing.iter().copied().fold(f64::INFINITY, f64::min) * 1e3;
        let current = lv.labels().first().map_or(0, |l| l.value);
        let mut drawn = LabelSet::default();
        for l in lv.labels() {
            drawn.set(l.value, true);
        }
        let mut kept = LabelSet::default();
        if current != 0 {
            kept.set(current, true);
        }
        let counts = lv.counts();
        Self {
            path: path.to_path_buf(),
            scan_id: scan.id,
            labels: Arc::new(RwLock::new(lv)),
            revision: 1,
            saved_revision: 1,
            counts,
            voxel_mm3: spacing.iter().product(),
            current,
            drawn,
            kept,
            kept_in_3d: false,
            opacity: 0.45,
            outline: false,
            tool: PrepTool::Look,
            // three voxels across, and one and a half voxels: a first guess the user changes
            brush_um: (3.0 * finest_um).round().max(1.0),
            grow: GrowSettings {
                lo: scan.iso.value,
                hi: f64::INFINITY,
                connectivity: Connectivity::Faces6,
                max_distance_mm: None,
            },
            morph_um: (1.5 * finest_um).round().max(1.0),
            min_voxels: 100,
            other: 0,
            scan_max: scan.full_range.1,
            undo: Vec::new(),
            redo: Vec::new(),
            stroke: None,
            kept_volume: None,
            scan_in_memory: scan.whole().is_some(),
            last_mesh: None,
        }
    }

    #[must_use]
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The scan (its id in the window) the labels are on.
    #[must_use]
    pub fn scan_id(&self) -> u64 {
        self.scan_id
    }

    fn read(&self) -> RwLockReadGuard<'_, LabelVolume> {
        self.labels.read().unwrap_or_else(PoisonError::into_inner)
    }

    fn write(&self) -> RwLockWriteGuard<'_, LabelVolume> {
        self.labels.write().unwrap_or_else(PoisonError::into_inner)
    }

    /// The labels, in value order.
    #[must_use]
    pub fn label_list(&self) -> Vec<LabelInfo> {
        self.read().labels().to_vec()
    }

    /// Voxels of label `value`, as of the last finished step.
    #[must_use]
    pub fn voxels(&self, value: u8) -> u64 {
        self.counts[usize::from(value)]
    }

    /// The volume of one voxel, mm³.
    #[must_use]
    pub fn voxel_mm3(&self) -> f64 {
        self.voxel_mm3
    }

    /// Changes since the label image was last saved.
    #[must_use]
    pub fn is_dirty(&self) -> bool {
        self.revision != self.saved_revision
    }

    /// Counts every change; the views redraw when it moves.
    #[must_use]
    pub fn revision(&self) -> u64 {
        self.revision
    }

    /// What undo and redo would undo and redo now.
    #[must_use]
    pub fn history(&self) -> (Option<&str>, Option<&str>) {
        (
            self.undo.last().map(|e| e.description.as_str()),
            self.redo.last().map(|e| e.description.as_str()),
        )
    }

    /// Whether a stroke is being painted.
    #[must_use]
    pub fn stroking(&self) -> bool {
        self.stroke.is_some()
    }

    /// Saves the label image atomically at its path.
    pub fn save(&mut self) -> Result<Status, String> {
        self.end_stroke();
        zarr::save(&self.read(), &self.path).map_err(|e| e.to_string())?;
        self.saved_revision = self.revision;
        Ok(Status::info(format!("saved {}", self.path.display())))
    }

    /// What the views draw this frame. The 3D view's copy of the scan is made again when the
    /// kept labels changed and no stroke is open.
    pub fn layers(&mut self, scan: &Scan, iso: f64) -> Layers {
        let overlay = (!self.drawn.is_empty()).then_some(OverlayKey {
            revision: self.revision,
            drawn: self.drawn,
            opacity: self.opacity,
            outline: self.outline,
        });
        if self.kept_in_3d && self.stroke.is_none() {
            let key = KeptKey {
                revision: self.revision,
                kept: self.kept,
                iso_bits: iso.to_bits(),
            };
            if self.kept_volume.as_ref().is_none_or(|(k, _)| *k != key)
                && let Some(volume) = scan.whole()
            {
                let kept = self.kept;
                let made = sutura_core::render::labels::keep_labels(
                    volume,
                    &self.read(),
                    &|v| kept.contains(v),
                    Some(iso),
                );
                self.kept_volume = made.ok().map(|v| (key, Arc::new(v)));
            }
        }
        Layers {
            labels: Arc::clone(&self.labels),
            overlay,
            kept: if self.kept_in_3d {
                self.kept_volume.clone()
            } else {
                None
            },
        }
    }

    /// The volume 3D picks land on: the kept-labels copy while the 3D view shows one.
    #[must_use]
    pub fn pick_volume(&self) -> Option<&Arc<Volume>> {
        self.kept_volume
            .as_ref()
            .filter(|_| self.kept_in_3d)
            .map(|(_, v)| v)
    }

    fn name_of(&self, value: u8) -> String {
        self.read()
            .labels()
            .iter()
            .find(|l| l.value == value)
            .map_or_else(|| format!("label {value}"), |l| l.name.clone())
    }

    fn current_label(&self) -> Result<(u8, String), String> {
        if self.current == 0 {
            return Err("no label chosen: add one first".into());
        }
        Ok((self.current, self.name_of(self.current)))
    }

    /// Records a finished step: its edit joins the history, the counts and views follow.
    fn record(&mut self, mut edit: Edit, what: &str, value: u8) -> Status {
        let before = self.counts[usize::from(value)];
        self.refresh_counts();
        self.revision += 1;
        let after = self.counts[usize::from(value)];
        what.clone_into(&mut edit.description);
        self.push_undo(edit);
        self.redo.clear();
        Status::info(format!(
            "{what}: {:+} voxels, now {after} voxels ({:.4} mm³)",
            after as i64 - before as i64,
            after as f64 * self.voxel_mm3
        ))
    }

    fn refresh_counts(&mut self) {
        let counts = self.read().counts();
        self.counts = counts;
    }

    /// Undoes the last step (`back`) or redoes the last undone one.
    fn replay(&mut self, back: bool) -> Status {
        let from = if back {
            self.undo.pop()
        } else {
            self.redo.pop()
        };
        let Some(edit) = from else {
            return Status::info(if back {
                "nothing to undo"
            } else {
                "nothing to redo"
            });
        };
        let inverse = self.write().undo(edit);
        let what = format!(
            "{} {}",
            if back { "undid" } else { "redid" },
            inverse.description
        );
        if back {
            self.redo.push(inverse);
        } else {
            self.push_undo(inverse);
        }
        self.refresh_counts();
        self.revision += 1;
        Status::info(what)
    }

    fn push_undo(&mut self, edit: Edit) {
        self.undo.push(edit);
        let mut total: usize = self.undo.iter().map(Edit::bytes).sum();
        while total > UNDO_BUDGET_BYTES && self.undo.len() > 1 {
            total -= self.undo.remove(0).bytes();
        }
    }

    fn end_stroke(&mut self) -> Option<Status> {
        let (edit, _) = self.stroke.take()?;
        let (value, name) = (self.current, self.name_of(self.current));
        let what = if self.tool == PrepTool::Eraser {
            format!("erase {name}")
        } else {
            format!("brush {name}")
        };
        Some(self.record(edit, &what, value))
    }

    /// Where the current label's mesh goes: beside the label image, named after it and the
    /// label (`RM-001.labels.zarr`, label `specimen`: `RM-001-specimen.ply`).
    #[must_use]
    pub fn mesh_path(&self, format: MeshFormat) -> PathBuf {
        // a label image inside a scan's store: the mesh goes beside the store
        let (beside, name) = match sutura_core::labels::zarr::store_of(&self.path) {
            Some(store) => (
                store.to_path_buf(),
                sutura_core::io::names::specimen_id_from_scan(store),
            ),
            None => (
                self.path.clone(),
                self.path
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default(),
            ),
        };
        let stem = name.strip_suffix(".labels.zarr").unwrap_or(&name);
        let label: String = self
            .name_of(self.current)
            .chars()
            .map(|c| {
                if c.is_alphanumeric() || c == '-' || c == '_' {
                    c
                } else {
                    '_'
                }
            })
            .collect();
        beside.with_file_name(format!("{stem}-{label}.{}", format.extension()))
    }

    /// Writes the current label's surface: the scan at `iso` (else its ISO-50) inside the
    /// label, by [`sutura_core::mesh::iso_surface`] as `sutura mesh --labels --label` makes it.
    pub fn export_mesh(
        &mut self,
        scan: &Scan,
        format: MeshFormat,
        iso: Option<f64>,
    ) -> Result<Status, String> {
        self.end_stroke();
        let (value, name) = self.current_label()?;
        let mask = self.read().mask_of(value);
        if mask.is_empty() {
            return Err(format!("label {name} holds no voxel"));
        }
        let (mesh, iso) = sutura_core::mesh::iso_surface(scan.grid(), iso, Some(&mask))
            .map_err(|e| e.to_string())?;
        let path = self.mesh_path(format);
        let title = format!("Sutura mesh of {}, label {name}", scan.name());
        sutura_core::mesh::write::write(&mesh, &path, &title).map_err(|e| e.to_string())?;
        let r = mesh.report();
        let text = format!(
            "wrote {}: {} triangles, {:.4} mm², {:.4} mm³, {} piece{}{} (iso-value {})",
            path.display(),
            r.triangles,
            r.area_mm2,
            r.volume_mm3,
            r.pieces,
            if r.pieces == 1 { "" } else { "s" },
            if r.closed { ", closed" } else { ", not closed" },
            super::view::format_value(iso.value)
        );
        self.last_mesh = Some((path, r));
        Ok(Status::info(text))
    }

    /// Applies a command that changes this preparation (not [`PrepCommand::Create`] or
    /// [`PrepCommand::Open`], which the app handles). Returns what to tell the user.
    #[allow(
        clippy::too_many_lines,
        reason = "one arm per command, each one library call and its report"
    )]
    pub fn apply(&mut self, cmd: PrepCommand, scan: &Scan) -> Result<Option<Status>, String> {
        if !matches!(cmd, PrepCommand::PaintTo { .. }) && self.stroke.is_some() {
            // any other command ends the stroke first, so it is one undo step of its own
            self.end_stroke();
        }
        let volume = scan.grid();
        let voxel = |w: WorldPoint| -> Result<[usize; 3], String> {
            volume
                .world_to_voxel(w)
                .nearest_index(volume.dims())
                .map(|v| [v.i, v.j, v.k])
                .ok_or_else(|| "that point lies outside the scan".to_owned())
        };
        let err = |e: sutura_core::labels::LabelsError| e.to_string();
        match cmd {
            PrepCommand::Create | PrepCommand::Open => Ok(None),
            PrepCommand::ExportMesh(format) => self.export_mesh(scan, format, None).map(Some),
            PrepCommand::Save => self.save().map(Some),
            PrepCommand::AddLabel(name) => {
                let name = name.trim().to_owned();
                let v = self.write().add_label(&name).map_err(err)?;
                self.current = v;
                self.drawn.set(v, true);
                self.revision += 1;
                Ok(Some(Status::info(format!("label {v}: {name}"))))
            }
            PrepCommand::SetCurrent(v) => {
                self.current = v;
                Ok(None)
            }
            PrepCommand::ToggleDrawn(v) => {
                self.drawn.toggle(v);
                Ok(None)
            }
            PrepCommand::ToggleKept(v) => {
                self.kept.toggle(v);
                Ok(None)
            }
            PrepCommand::SetKeptIn3d(on) => {
                self.kept_in_3d = on;
                Ok(None)
            }
            PrepCommand::SetOpacity(a) => {
                self.opacity = a.clamp(0.0, 1.0);
                Ok(None)
            }
            PrepCommand::SetOutline(on) => {
                self.outline = on;
                Ok(None)
            }
            PrepCommand::SetTool(t) => {
                self.tool = t;
                Ok(None)
            }
            PrepCommand::SetBrushUm(r) => {
                if r.is_finite() && r > 0.0 {
                    self.brush_um = r;
                }
                Ok(None)
            }
            PrepCommand::SetGrow(g) => {
                IntensityRange::new(g.lo, g.hi).map_err(err)?;
                self.grow = g;
                Ok(None)
            }
            PrepCommand::SetMorphUm(r) => {
                if r.is_finite() && r > 0.0 {
                    self.morph_um = r;
                }
                Ok(None)
            }
            PrepCommand::SetMinVoxels(n) => {
                self.min_voxels = n;
                Ok(None)
            }
            PrepCommand::PaintTo { at, axis } => {
                let (value, _) = self.current_label()?;
                let from = self.stroke.as_ref().map(|(_, p)| *p);
                if from == Some(at) {
                    return Ok(None);
                }
                let stroke = Stroke {
                    points: from.into_iter().chain([at]).collect(),
                    radius_mm: self.brush_um * 1e-3,
                    shape: axis.map_or(BrushShape::Ball, |axis| BrushShape::Disc { axis }),
                };
                let mode = if self.tool == PrepTool::Eraser {
                    Combine::Subtract
                } else {
                    Combine::Add
                };
                let edit = brush::paint(
                    &mut self.write(),
                    &volume.world_from_voxel(),
                    &stroke,
                    value,
                    mode,
                    false,
                )
                .map_err(err)?;
                let edit = match self.stroke.take() {
                    Some((so_far, _)) => so_far.then(edit),
                    None => edit,
                };
                self.stroke = Some((edit, at));
                // the overlay follows the stroke; the counts wait for its end
                self.revision += 1;
                Ok(None)
            }
            PrepCommand::EndStroke => Ok(self.end_stroke()),
            PrepCommand::Grow(at) => {
                let (value, name) = self.current_label()?;
                let seed = voxel(at)?;
                let g = self.grow;
                let options = GrowOptions {
                    range: IntensityRange::new(g.lo, g.hi).map_err(err)?,
                    connectivity: g.connectivity,
                    max_distance_mm: g.max_distance_mm,
                };
                let edit = ops::grow_label(
                    &mut self.write(),
                    volume,
                    value,
                    seed,
                    &options,
                    false,
                    Combine::Add,
                    false,
                )
                .map_err(err)?;
                Ok(Some(self.record(edit, &format!("grow {name}"), value)))
            }
            PrepCommand::KeepPiece(at) => {
                let (value, name) = self.current_label()?;
                let at = voxel(at)?;
                let edit = ops::keep_piece(&mut self.write(), value, at, self.grow.connectivity)
                    .map_err(err)?;
                Ok(Some(self.record(
                    edit,
                    &format!("keep piece of {name}"),
                    value,
                )))
            }
            PrepCommand::Interpolate(axis) => {
                let (value, name) = self.current_label()?;
                let (edit, drawn) =
                    ops::interpolate_label(&mut self.write(), value, axis).map_err(err)?;
                let axis_name = ["i", "j", "k"][axis.min(2)];
                let s = self.record(
                    edit,
                    &format!("interpolate {name} along {axis_name}"),
                    value,
                );
                Ok(Some(Status::info(format!(
                    "{} (drawn slices {})",
                    s.text,
                    drawn
                        .iter()
                        .map(ToString::to_string)
                        .collect::<Vec<_>>()
                        .join(", ")
                ))))
            }
            PrepCommand::Threshold => {
                let (value, name) = self.current_label()?;
                let g = self.grow;
                let range = IntensityRange::new(g.lo, g.hi).map_err(err)?;
                let within = (self.other != 0).then_some(self.other);
                let edit = ops::threshold_label(
                    &mut self.write(),
                    volume,
                    value,
                    range,
                    within,
                    None,
                    Combine::Add,
                    false,
                )
                .map_err(err)?;
                let place =
                    within.map_or_else(String::new, |w| format!(" within {}", self.name_of(w)));
                let what = format!("threshold {name}{place}");
                Ok(Some(self.record(edit, &what, value)))
            }
            PrepCommand::SetOther(v) => {
                self.other = v;
                Ok(None)
            }
            PrepCommand::Combine(mode) => {
                let (value, name) = self.current_label()?;
                if self.other == 0 {
                    return Err("choose the other label first".into());
                }
                let other = self.other;
                let edit =
                    ops::combine_labels(&mut self.write(), value, other, mode).map_err(err)?;
                let what = format!("{} {} {name}", mode.name(), self.name_of(other));
                Ok(Some(self.record(edit, &what, value)))
            }
            PrepCommand::FillHoles => {
                let (value, name) = self.current_label()?;
                let edit = ops::fill_label_holes(&mut self.write(), value).map_err(err)?;
                Ok(Some(self.record(
                    edit,
                    &format!("fill holes of {name}"),
                    value,
                )))
            }
            PrepCommand::Morph(op) => {
                let (value, name) = self.current_label()?;
                let edit = ops::morph_label(&mut self.write(), value, op, self.morph_um * 1e-3)
                    .map_err(err)?;
                let what = format!("{} {name} by {} µm", op.name(), self.morph_um);
                Ok(Some(self.record(edit, &what, value)))
            }
            PrepCommand::RemoveSmall => {
                let (value, name) = self.current_label()?;
                let edit = ops::remove_small_pieces(
                    &mut self.write(),
                    value,
                    self.min_voxels,
                    self.grow.connectivity,
                )
                .map_err(err)?;
                let what = format!("remove pieces of {name} under {} voxels", self.min_voxels);
                Ok(Some(self.record(edit, &what, value)))
            }
            PrepCommand::Undo => Ok(Some(self.replay(true))),
            PrepCommand::Redo => Ok(Some(self.replay(false))),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sutura_core::geometry::Affine3;
    use sutura_core::labels::Combine;

    /// A 24 × 20 × 10 scan of 0.1 mm voxels: value 100 for i < 12, 300 beyond.
    fn scan(dir: &Path) -> Scan {
        let dims = [24, 20, 10];
        let data: Vec<u16> = (0..dims.iter().product::<usize>())
            .map(|n| if n % 24 < 12 { 100 } else { 300 })
            .collect();
        let v = Volume::from_vec(dims, Affine3::from_spacing([0.1; 3]), data).unwrap();
        let path = dir.join("scan.nii");
        sutura_core::io::nifti::write(&v, &path).unwrap();
        Scan::new(1, path, v)
    }

    fn at(i: f64, j: f64, k: f64) -> WorldPoint {
        WorldPoint::new(i * 0.1, j * 0.1, k * 0.1)
    }

    #[test]
    fn a_stroke_is_one_step_and_undo_and_redo_replay_it() {
        let dir = tempfile::tempdir().unwrap();
        let s = scan(dir.path());
        let mut p = Prep::create(&dir.path().join("s.labels.zarr"), &s).unwrap();
        p.apply(PrepCommand::SetTool(PrepTool::Brush), &s).unwrap();
        p.apply(PrepCommand::SetBrushUm(150.0), &s).unwrap();
        for i in [3.0, 8.0, 14.0] {
            p.apply(
                PrepCommand::PaintTo {
                    at: at(i, 10.0, 5.0),
                    axis: Some(2),
                },
                &s,
            )
            .unwrap();
        }
        assert!(p.stroking());
        p.apply(PrepCommand::EndStroke, &s).unwrap();
        let painted = p.voxels(1);
        // a disc of 1.5 voxels swept from i = 3 to 14 on one plane: 12 columns of 3 rows plus
        // the round ends (centres within 1.5 voxels of the segment)
        assert!((36..60).contains(&painted), "{painted}");
        assert_eq!(p.history().0, Some("brush specimen"));
        p.apply(PrepCommand::Undo, &s).unwrap();
        assert_eq!(p.voxels(1), 0, "the whole stroke is one step");
        p.apply(PrepCommand::Redo, &s).unwrap();
        assert_eq!(p.voxels(1), painted);
        assert!(p.is_dirty());
        p.apply(PrepCommand::Save, &s).unwrap();
        assert!(!p.is_dirty());
        let back = Prep::open(p.path(), &s).unwrap();
        assert_eq!(back.voxels(1), painted);
    }

    #[test]
    fn threshold_within_the_other_label_and_combining_follow_the_library() {
        let dir = tempfile::tempdir().unwrap();
        let s = scan(dir.path());
        let mut p = Prep::create(&dir.path().join("s.labels.zarr"), &s).unwrap();
        // matrix (2): every voxel at 300 (i ≥ 12)
        p.apply(PrepCommand::SetCurrent(2), &s).unwrap();
        p.apply(
            PrepCommand::SetGrow(GrowSettings {
                lo: 250.0,
                hi: f64::INFINITY,
                connectivity: Connectivity::Faces6,
                max_distance_mm: None,
            }),
            &s,
        )
        .unwrap();
        p.apply(PrepCommand::Threshold, &s).unwrap();
        assert_eq!(p.voxels(2), 12 * 20 * 10);
        // a threshold of specimen (1) within the matrix takes nothing: other labels' voxels
        // are kept, as `labels threshold --within` keeps them
        p.apply(PrepCommand::SetCurrent(1), &s).unwrap();
        p.apply(PrepCommand::SetOther(2), &s).unwrap();
        p.apply(PrepCommand::Threshold, &s).unwrap();
        assert_eq!(p.voxels(1), 0);
        // adding the other label moves its voxels
        p.apply(PrepCommand::Combine(Combine::Add), &s).unwrap();
        assert_eq!((p.voxels(1), p.voxels(2)), (12 * 20 * 10, 0));
        // combining a label with itself is refused in words
        p.apply(PrepCommand::SetOther(1), &s).unwrap();
        let e = p.apply(PrepCommand::Combine(Combine::Add), &s).unwrap_err();
        assert!(e.contains("itself"), "{e}");
        // the kept-labels copy holds the scan's minimum outside the kept label
        p.apply(PrepCommand::SetKeptIn3d(true), &s).unwrap();
        let layers = p.layers(&s, 200.0);
        let (key, kept) = layers.kept.expect("a kept copy");
        assert!(key.kept.contains(1));
        let v = |vol: &Volume, i| vol.value(sutura_core::geometry::VoxelIndex::new(i, 3, 3));
        assert_eq!(v(&kept, 20), Some(300.0));
        assert_eq!(v(&kept, 2), Some(100.0));
        assert!(p.pick_volume().is_some());
    }
}
