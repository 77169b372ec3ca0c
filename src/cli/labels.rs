//! `sutura labels …`: virtual preparation from the command line, one library call per command.
//!
//! Every command reads a label image (`--labels NAME.labels.zarr`), makes one selection with the
//! library, writes it into a label in a combine mode (`--mode add|subtract|intersect`), saves
//! the label image atomically and prints what changed. Commands that read intensities or take
//! world coordinates also take the scan, which must match the fingerprint the label image
//! recorded.

use anyhow::{Context, Result, bail};
use clap::{Args, Subcommand, ValueEnum};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use sutura_core::geometry::{VoxelIndex, WorldPoint, parse_length_mm};
use sutura_core::labels::brush::{BrushShape, Stroke};
use sutura_core::labels::morph::MorphOp;
use sutura_core::labels::region::{Connectivity, GrowOptions, IntensityRange};
use sutura_core::labels::{self, BitMask, Combine, LabelVolume, zarr};
use sutura_core::landmarks::fingerprint::Fingerprint;
use sutura_core::volume::{Volume, VolumeSource};

use super::ScanArgs;

#[derive(Debug, Subcommand)]
pub enum LabelsCommand {
    /// Make an empty label image for a scan, with the labels named.
    New(NewArgs),
    /// List a label image's labels: voxels, volume (mm³), bounding box.
    Info(InfoArgs),
    /// Select voxels in an intensity range (within a box or a label).
    Threshold(ThresholdArgs),
    /// Grow a region from a seed through voxels in an intensity range.
    Grow(GrowArgs),
    /// Keep only the connected piece of a label under a point.
    KeepPiece(PieceArgs),
    /// Remove a label's connected pieces smaller than N voxels.
    RemoveSmall(SmallArgs),
    /// Paint or erase a brush stroke: a disc on a voxel plane or a ball.
    Brush(BrushArgs),
    /// Fill the slices between a label's drawn slices by signed-distance interpolation.
    Interpolate(InterpolateArgs),
    /// Erode, dilate, open or close a label with a ball of a radius in µm.
    Morph(MorphArgs),
    /// Fill a label's enclosed holes.
    FillHoles(TargetArgs),
    /// Add, subtract or intersect another label (of this or another label image).
    Combine(CombineArgs),
    /// Write a label as a mask in `NIfTI` (`u8`, 1 inside) on the scan's grid.
    Export(ExportArgs),
}

/// The label image and the label an operation changes.
#[derive(Debug, Args)]
pub struct TargetArgs {
    /// The label image (`NAME.labels.zarr`, a folder).
    #[arg(long, value_name = "DIR")]
    labels: PathBuf,
    /// The label to change (added if missing).
    #[arg(long, value_name = "NAME")]
    label: String,
}

/// How the selection changes the label.
#[derive(Debug, Args)]
pub struct ModeArgs {
    /// add: the selection joins the label; subtract: the label loses it; intersect: the label
    /// keeps only its voxels in the selection.
    #[arg(long, value_enum, default_value_t = ModeArg::Add)]
    mode: ModeArg,
    /// With add: take voxels other labels hold too (by default they are kept).
    #[arg(long)]
    overwrite: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum ModeArg {
    Add,
    Subtract,
    Intersect,
}

impl From<ModeArg> for Combine {
    fn from(m: ModeArg) -> Self {
        match m {
            ModeArg::Add => Self::Add,
            ModeArg::Subtract => Self::Subtract,
            ModeArg::Intersect => Self::Intersect,
        }
    }
}

#[derive(Debug, Args)]
pub struct NewArgs {
    #[command(flatten)]
    scan: ScanArgs,
    /// The label image to write (`NAME.labels.zarr`).
    #[arg(short, long, value_name = "DIR")]
    output: PathBuf,
    /// A label to create, in order (values 1, 2, …); repeat for more.
    #[arg(long = "label", value_name = "NAME")]
    names: Vec<String>,
}

#[derive(Debug, Args)]
pub struct InfoArgs {
    /// The label image.
    labels: PathBuf,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
}

#[derive(Debug, Args)]
pub struct ThresholdArgs {
    #[command(flatten)]
    scan: ScanArgs,
    #[command(flatten)]
    target: TargetArgs,
    #[command(flatten)]
    mode: ModeArgs,
    /// Intensity range LO:HI (closed; an empty end is open), rescaled units.
    #[arg(long, value_name = "LO:HI", allow_hyphen_values = true)]
    range: String,
    /// Only within this label.
    #[arg(long, value_name = "NAME")]
    within: Option<String>,
    /// Only within this box of voxels, half-open `i0:i1,j0:j1,k0:k1`.
    #[arg(long = "box", value_name = "I0:I1,J0:J1,K0:K1")]
    bounds: Option<String>,
}

#[derive(Debug, Args)]
pub struct GrowArgs {
    #[command(flatten)]
    scan: ScanArgs,
    #[command(flatten)]
    target: TargetArgs,
    #[command(flatten)]
    mode: ModeArgs,
    /// The seed in world mm `x,y,z`.
    #[arg(
        long,
        value_name = "X,Y,Z",
        conflicts_with = "seed_voxel",
        allow_hyphen_values = true
    )]
    seed: Option<String>,
    /// The seed as a voxel index `i,j,k`.
    #[arg(long, value_name = "I,J,K")]
    seed_voxel: Option<String>,
    /// Intensity range LO:HI the region grows through.
    #[arg(long, value_name = "LO:HI", allow_hyphen_values = true)]
    range: String,
    /// 6 (faces) or 26 (faces, edges, corners).
    #[arg(long, default_value_t = 6)]
    connectivity: u32,
    /// Largest distance from the seed (e.g. `2mm`, `800um`).
    #[arg(long, value_name = "LEN")]
    max_distance: Option<String>,
    /// Grow through voxels other labels hold too (by default they stop the region).
    #[arg(long)]
    through_labels: bool,
}

#[derive(Debug, Args)]
pub struct PieceArgs {
    #[command(flatten)]
    scan: ScanArgs,
    #[command(flatten)]
    target: TargetArgs,
    /// A point of the piece to keep, world mm `x,y,z`.
    #[arg(
        long,
        value_name = "X,Y,Z",
        conflicts_with = "at_voxel",
        allow_hyphen_values = true
    )]
    at: Option<String>,
    /// The same as a voxel index `i,j,k`.
    #[arg(long, value_name = "I,J,K")]
    at_voxel: Option<String>,
    #[arg(long, default_value_t = 6)]
    connectivity: u32,
}

#[derive(Debug, Args)]
pub struct SmallArgs {
    #[command(flatten)]
    target: TargetArgs,
    /// Pieces with fewer voxels are removed.
    #[arg(long, value_name = "N")]
    min_voxels: u64,
    #[arg(long, default_value_t = 6)]
    connectivity: u32,
}

#[derive(Debug, Args)]
pub struct BrushArgs {
    #[command(flatten)]
    scan: ScanArgs,
    #[command(flatten)]
    target: TargetArgs,
    /// The stroke's points in world mm: `x,y,z;x,y,z;…`.
    #[arg(long, value_name = "X,Y,Z;…", allow_hyphen_values = true)]
    points: String,
    /// Brush radius (e.g. `80um`).
    #[arg(long, value_name = "LEN")]
    radius: String,
    /// The voxel plane of a disc brush: i, j or k (the plane through the first point).
    #[arg(long, default_value = "k", conflicts_with = "ball")]
    plane: String,
    /// A ball in 3D instead of a disc on a plane.
    #[arg(long)]
    ball: bool,
    /// Erase the label under the stroke instead of painting it.
    #[arg(long)]
    erase: bool,
    /// Paint over other labels too.
    #[arg(long)]
    overwrite: bool,
}

#[derive(Debug, Args)]
pub struct InterpolateArgs {
    #[command(flatten)]
    target: TargetArgs,
    /// The axis the drawn slices are normal to: i, j or k.
    #[arg(long, default_value = "k")]
    axis: String,
}

#[derive(Debug, Args)]
pub struct MorphArgs {
    #[command(flatten)]
    target: TargetArgs,
    /// erode, dilate, open or close.
    #[arg(long, value_name = "OP")]
    op: String,
    /// Radius of the ball (e.g. `100um`).
    #[arg(long, value_name = "LEN")]
    radius: String,
}

#[derive(Debug, Args)]
pub struct CombineArgs {
    #[command(flatten)]
    target: TargetArgs,
    #[command(flatten)]
    mode: ModeArgs,
    /// The other label.
    #[arg(long, value_name = "NAME")]
    with: String,
    /// The label image holding the other label (default: the same).
    #[arg(long, value_name = "DIR")]
    from: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct ExportArgs {
    #[command(flatten)]
    scan: ScanArgs,
    /// The label image.
    #[arg(long, value_name = "DIR")]
    labels: PathBuf,
    /// The label.
    #[arg(long, value_name = "NAME")]
    label: String,
    /// Output `.nii` or `.nii.gz`.
    #[arg(short, long, value_name = "OUT")]
    output: PathBuf,
}

pub fn run(c: &LabelsCommand) -> Result<()> {
    match c {
        LabelsCommand::New(a) => run_new(a),
        LabelsCommand::Info(a) => run_info(a),
        LabelsCommand::Threshold(a) => run_threshold(a),
        LabelsCommand::Grow(a) => run_grow(a),
        LabelsCommand::KeepPiece(a) => run_piece(a),
        LabelsCommand::RemoveSmall(a) => run_small(a),
        LabelsCommand::Brush(a) => run_brush(a),
        LabelsCommand::Interpolate(a) => run_interpolate(a),
        LabelsCommand::Morph(a) => run_morph(a),
        LabelsCommand::FillHoles(a) => run_fill(a),
        LabelsCommand::Combine(a) => run_combine(a),
        LabelsCommand::Export(a) => run_export(a),
    }
}

/// Loads a label image, naming the file in errors.
pub fn load(path: &Path) -> Result<LabelVolume> {
    Ok(zarr::load(path)?)
}

/// Opens the scan through the volume interface and checks it is the one the labels were made
/// on: a store is opened where it lies (chunks read as needed within `--cache-mib`), so every
/// command works on scans of any size.
pub fn open_matching_source(
    scan: &ScanArgs,
    labels: &LabelVolume,
    labels_path: &Path,
) -> Result<Box<dyn VolumeSource>> {
    let source = scan.open_source()?;
    check_matching(scan, labels, labels_path, source.as_ref())?;
    Ok(source)
}

/// Checks a scan read through the volume interface is the one the labels were made on (its
/// grid, and the fingerprint the label image recorded).
pub fn check_matching(
    scan: &ScanArgs,
    labels: &LabelVolume,
    labels_path: &Path,
    source: &dyn sutura_core::volume::VolumeSource,
) -> Result<()> {
    if source.dims() != labels.dims() {
        bail!(
            "{}: labels for a {:?} grid, but {} is {:?}",
            labels_path.display(),
            labels.dims(),
            scan.scan.display(),
            source.dims()
        );
    }
    if let Some(f) = &labels.fingerprint
        && let Some(m) = f.check_source(&scan.scan, source)?
    {
        bail!("{}: {m}", labels_path.display());
    }
    Ok(())
}

/// Writes a selection into the target label, saves, and reports.
fn commit(
    mut lv: LabelVolume,
    target: &TargetArgs,
    selection: &BitMask,
    mode: Combine,
    overwrite: bool,
    what: &str,
) -> Result<()> {
    let value = lv.value_or_add(&target.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = lv.apply(selection, value, mode, overwrite)?;
    save_and_report(&lv, target, value, before, what, edit.bricks())
}

fn save_and_report(
    lv: &LabelVolume,
    target: &TargetArgs,
    value: u8,
    before: u64,
    what: &str,
    bricks: usize,
) -> Result<()> {
    zarr::save(lv, &target.labels)?;
    let after = lv.counts()[usize::from(value)];
    let voxel_mm3: f64 = lv.spacing_mm.iter().product();
    eprintln!(
        "{what}: {} {:+} voxels, now {after} voxels ({:.4} mm³); {bricks} bricks changed; wrote {}",
        target.label,
        after as i64 - before as i64,
        after as f64 * voxel_mm3,
        target.labels.display()
    );
    Ok(())
}

/// `LO:HI` with open ends.
pub fn parse_range(text: &str) -> Result<IntensityRange> {
    let (lo, hi) = text
        .split_once(':')
        .with_context(|| format!("range '{text}': write LO:HI"))?;
    let num = |s: &str, default: f64| -> Result<f64> {
        if s.trim().is_empty() {
            Ok(default)
        } else {
            s.trim()
                .parse::<f64>()
                .with_context(|| format!("range '{text}': '{s}' is not a number"))
        }
    };
    Ok(IntensityRange::new(
        num(lo, f64::NEG_INFINITY)?,
        num(hi, f64::INFINITY)?,
    )?)
}

fn parse_triple(text: &str, what: &str) -> Result<[f64; 3]> {
    let t: sutura_core::geometry::Triple = text.parse().with_context(|| what.to_owned())?;
    Ok(t.0)
}

fn parse_voxel(text: &str, what: &str, dims: [usize; 3]) -> Result<[usize; 3]> {
    let v: Vec<usize> = text
        .split(',')
        .map(|s| s.trim().parse::<usize>())
        .collect::<Result<_, _>>()
        .with_context(|| format!("{what} '{text}': write three voxel indices i,j,k"))?;
    let [i, j, k] = v.as_slice() else {
        bail!("{what} '{text}': write three voxel indices i,j,k")
    };
    if *i >= dims[0] || *j >= dims[1] || *k >= dims[2] {
        bail!("{what} '{text}' lies outside the {dims:?} grid");
    }
    Ok([*i, *j, *k])
}

/// A point given in world mm (`--x`) or as a voxel (`--x-voxel`), as a voxel index.
fn point_voxel(
    mm: Option<&str>,
    voxel: Option<&str>,
    what: &str,
    volume: &dyn VolumeSource,
) -> Result<[usize; 3]> {
    match (mm, voxel) {
        (Some(t), _) => {
            let [x, y, z] = parse_triple(t, what)?;
            let v = volume
                .world_from_voxel()
                .inverse()
                .world_to_voxel(WorldPoint::new(x, y, z));
            let VoxelIndex { i, j, k } = v
                .nearest_index(volume.dims())
                .with_context(|| format!("{what} {t} mm lies outside the scan"))?;
            Ok([i, j, k])
        }
        (None, Some(t)) => parse_voxel(t, what, volume.dims()),
        (None, None) => bail!("give --{what} (world mm) or --{what}-voxel"),
    }
}

fn axis_of(text: &str) -> Result<usize> {
    match text {
        "i" | "x" => Ok(0),
        "j" | "y" => Ok(1),
        "k" | "z" => Ok(2),
        _ => bail!("axis '{text}': give i, j or k"),
    }
}

fn length(text: &str, what: &str) -> Result<f64> {
    parse_length_mm(text).with_context(|| format!("{what} {text}"))
}

fn run_new(a: &NewArgs) -> Result<()> {
    // the grid, voxel size and fingerprint: a store is not read whole for them
    let source = a.scan.open_source()?;
    let mut lv = LabelVolume::new(source.dims(), source.level(0).spacing_mm());
    lv.fingerprint = Some(Fingerprint::of_source(&a.scan.scan, source.as_ref())?);
    for n in &a.names {
        lv.add_label(n)?;
    }
    zarr::save(&lv, &a.output)?;
    eprintln!(
        "wrote {} ({} labels on a {:?} grid)",
        a.output.display(),
        lv.labels().len(),
        lv.dims()
    );
    Ok(())
}

fn run_info(a: &InfoArgs) -> Result<()> {
    let lv = load(&a.labels)?;
    let counts = lv.counts();
    let voxel_mm3: f64 = lv.spacing_mm.iter().product();
    let rows: Vec<serde_json::Value> = lv
        .labels()
        .iter()
        .map(|l| {
            let m = lv.mask_of(l.value);
            let bbox = m.bbox().map(|b| b.map(|r| [r.start, r.end]));
            serde_json::json!({
                "value": l.value,
                "name": l.name,
                "rgba": l.rgba,
                "voxels": counts[usize::from(l.value)],
                "volume_mm3": counts[usize::from(l.value)] as f64 * voxel_mm3,
                "bbox_voxels": bbox,
            })
        })
        .collect();
    if a.json {
        let out = serde_json::json!({
            "dims": lv.dims(),
            "voxel_size_mm": lv.spacing_mm,
            "bytes_in_memory": lv.bytes(),
            "labels": rows,
        });
        return super::emit(&format!("{}\n", serde_json::to_string_pretty(&out)?));
    }
    let mut s = format!(
        "{}: {:?} grid, voxel {:?} mm; {} of {} bricks hold labels\n",
        a.labels.display(),
        lv.dims(),
        lv.spacing_mm,
        lv.allocated_bricks(),
        lv.brick_grid().iter().product::<usize>()
    );
    s.push_str("value\tname\tvoxels\tvolume_mm3\tbbox (i0:i1,j0:j1,k0:k1)\n");
    for r in &rows {
        let bbox = r["bbox_voxels"].as_array().map_or_else(
            || "-".into(),
            |b| {
                b.iter()
                    .map(|p| format!("{}:{}", p[0], p[1]))
                    .collect::<Vec<_>>()
                    .join(",")
            },
        );
        let _ = writeln!(
            s,
            "{}\t{}\t{}\t{:.4}\t{bbox}",
            r["value"],
            r["name"].as_str().unwrap_or(""),
            r["voxels"],
            r["volume_mm3"].as_f64().unwrap_or(0.0),
        );
    }
    super::emit(&s)
}

fn run_threshold(a: &ThresholdArgs) -> Result<()> {
    let lv = load(&a.target.labels)?;
    let source = open_matching_source(&a.scan, &lv, &a.target.labels)?;
    let range = parse_range(&a.range)?;
    let within = a.within.as_deref().map(|n| lv.value_of(n)).transpose()?;
    let bounds = a
        .bounds
        .as_deref()
        .map(|b| super::convert::parse_crop(b, source.dims()))
        .transpose()?;
    let mut lv = lv;
    let value = lv.value_or_add(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::threshold_label(
        &mut lv,
        source.as_ref(),
        value,
        range,
        within,
        bounds.as_ref(),
        a.mode.mode.into(),
        a.mode.overwrite,
    )?;
    save_and_report(&lv, &a.target, value, before, "threshold", edit.bricks())
}

fn run_grow(a: &GrowArgs) -> Result<()> {
    let lv = load(&a.target.labels)?;
    let source = open_matching_source(&a.scan, &lv, &a.target.labels)?;
    let seed = point_voxel(
        a.seed.as_deref(),
        a.seed_voxel.as_deref(),
        "seed",
        source.as_ref(),
    )?;
    let options = GrowOptions {
        range: parse_range(&a.range)?,
        connectivity: Connectivity::from_count(a.connectivity)?,
        max_distance_mm: a
            .max_distance
            .as_deref()
            .map(|t| length(t, "--max-distance"))
            .transpose()?,
    };
    let mut lv = lv;
    let value = lv.value_or_add(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::grow_label(
        &mut lv,
        source.as_ref(),
        value,
        seed,
        &options,
        a.through_labels,
        a.mode.mode.into(),
        a.mode.overwrite,
    )?;
    save_and_report(&lv, &a.target, value, before, "grow", edit.bricks())
}

fn run_piece(a: &PieceArgs) -> Result<()> {
    let lv = load(&a.target.labels)?;
    let source = open_matching_source(&a.scan, &lv, &a.target.labels)?;
    let at = point_voxel(
        a.at.as_deref(),
        a.at_voxel.as_deref(),
        "at",
        source.as_ref(),
    )?;
    let mut lv = lv;
    let value = lv.value_of(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::keep_piece(
        &mut lv,
        value,
        at,
        Connectivity::from_count(a.connectivity)?,
    )?;
    save_and_report(&lv, &a.target, value, before, "keep piece", edit.bricks())
}

fn run_small(a: &SmallArgs) -> Result<()> {
    let mut lv = load(&a.target.labels)?;
    let value = lv.value_of(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::remove_small_pieces(
        &mut lv,
        value,
        a.min_voxels,
        Connectivity::from_count(a.connectivity)?,
    )?;
    save_and_report(
        &lv,
        &a.target,
        value,
        before,
        "remove small pieces",
        edit.bricks(),
    )
}

fn run_brush(a: &BrushArgs) -> Result<()> {
    let mut lv = load(&a.target.labels)?;
    let source = open_matching_source(&a.scan, &lv, &a.target.labels)?;
    let points = a
        .points
        .split(';')
        .filter(|s| !s.trim().is_empty())
        .map(|p| parse_triple(p, "point").map(|[x, y, z]| WorldPoint::new(x, y, z)))
        .collect::<Result<Vec<_>>>()?;
    let stroke = Stroke {
        points,
        radius_mm: length(&a.radius, "--radius")?,
        shape: if a.ball {
            BrushShape::Ball
        } else {
            BrushShape::Disc {
                axis: axis_of(&a.plane)?,
            }
        },
    };
    let value = lv.value_or_add(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let mode = if a.erase {
        Combine::Subtract
    } else {
        Combine::Add
    };
    let edit = labels::brush::paint(
        &mut lv,
        &source.world_from_voxel(),
        &stroke,
        value,
        mode,
        a.overwrite,
    )?;
    save_and_report(
        &lv,
        &a.target,
        value,
        before,
        if a.erase { "erase" } else { "brush" },
        edit.bricks(),
    )
}

fn run_interpolate(a: &InterpolateArgs) -> Result<()> {
    let mut lv = load(&a.target.labels)?;
    let value = lv.value_of(&a.target.label)?;
    let before = lv.counts()[usize::from(value)];
    let (edit, drawn) = labels::ops::interpolate_label(&mut lv, value, axis_of(&a.axis)?)?;
    eprintln!(
        "drawn {} slices: {}",
        a.axis,
        drawn
            .iter()
            .map(ToString::to_string)
            .collect::<Vec<_>>()
            .join(", ")
    );
    save_and_report(&lv, &a.target, value, before, "interpolate", edit.bricks())
}

fn run_morph(a: &MorphArgs) -> Result<()> {
    let lv = load(&a.target.labels)?;
    let value = lv.value_of(&a.target.label)?;
    let op = MorphOp::parse(&a.op)?;
    let radius_mm = length(&a.radius, "--radius")?;
    let mut lv = lv;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::morph_label(&mut lv, value, op, radius_mm)?;
    save_and_report(&lv, &a.target, value, before, &a.op, edit.bricks())
}

fn run_fill(a: &TargetArgs) -> Result<()> {
    let mut lv = load(&a.labels)?;
    let value = lv.value_of(&a.label)?;
    let before = lv.counts()[usize::from(value)];
    let edit = labels::ops::fill_label_holes(&mut lv, value)?;
    save_and_report(&lv, a, value, before, "fill holes", edit.bricks())
}

fn run_combine(a: &CombineArgs) -> Result<()> {
    let mut lv = load(&a.target.labels)?;
    let mode: Combine = a.mode.mode.into();
    let Some(p) = &a.from else {
        // one label image: the library's rule (adding moves the voxels; not with itself)
        let value = lv.value_or_add(&a.target.label)?;
        let other = lv.value_of(&a.with)?;
        let before = lv.counts()[usize::from(value)];
        let edit = labels::ops::combine_labels(&mut lv, value, other, mode)?;
        return save_and_report(&lv, &a.target, value, before, mode.name(), edit.bricks());
    };
    let o = load(p)?;
    if o.dims() != lv.dims() {
        bail!(
            "{}: a {:?} grid, but {} is {:?}",
            p.display(),
            o.dims(),
            a.target.labels.display(),
            lv.dims()
        );
    }
    let other = o.mask_of(o.value_of(&a.with)?);
    commit(lv, &a.target, &other, mode, a.mode.overwrite, mode.name())
}

fn run_export(a: &ExportArgs) -> Result<()> {
    let lv = load(&a.labels)?;
    let source = open_matching_source(&a.scan, &lv, &a.labels)?;
    let m = lv.mask_of(lv.value_of(&a.label)?);
    let out = Volume::from_vec(source.dims(), source.world_from_voxel(), m.to_bytes())?;
    sutura_core::io::nifti::write(&out, &a.output)?;
    eprintln!(
        "wrote {} ({} voxels of {})",
        a.output.display(),
        m.count(),
        a.label
    );
    Ok(())
}
