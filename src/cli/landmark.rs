//! `sutura landmark …` and `sutura curve …`: digitise from the command line.
//!
//! Positions are given in world millimetres (`--world-mm X,Y,Z`, the frame every position is
//! stored in) or in continuous voxel coordinates of the specimen's scan (`--voxel I,J,K`, voxel
//! centres at integers), converted with the `world_from_voxel` the project recorded. A
//! position outside the scan's grid is refused (a unit slip, µm for mm, lands far outside).
//!
//! The trial is `--trial ID`, else the specimen's last trial; a specimen with no trial gets
//! trial `1` on its first landmark, by `--operator` (default: the `USER` environment variable).

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use std::fmt::Write as _;

use anyhow::{Context, Result, bail};
use clap::{Args, Subcommand, ValueEnum};
use std::path::PathBuf;

use super::project::{TimeArgs, load, open};
use nalgebra::Vector3;
use sutura_core::geometry::{LengthMm, Triple, WorldPoint};
use sutura_core::landmarks::project::{
    Edit, LandmarkState, Method, PickRecord, Project, Session, Trial,
};
use sutura_core::landmarks::{mirror, pick, pick_source};
use sutura_core::message::numbers;

#[derive(Debug, Subcommand)]
pub enum LandmarkCommand {
    /// Place a landmark at a position (world mm or voxel coordinates).
    Set(SetArgs),
    /// Mark a landmark missing on this specimen (absent or broken).
    Missing(MissingArgs),
    /// Forget a landmark (back to not digitised).
    Clear(TargetArgs),
    /// Place a landmark where a ray first meets the specimen's surface (sub-voxel, at the
    /// scan's iso-value: ISO-50 unless given), as a click in a 3D view does.
    Pick(PickArgs),
    /// Estimate a landmark from its bilateral partner, mirrored across the specimen's
    /// midsagittal plane (fitted by least squares to the trial's placed midline landmarks and
    /// pair midpoints); its state becomes `estimated`.
    Mirror(TargetArgs),
    /// Set or remove (empty text) the note of a digitised landmark.
    Note(NoteArgs),
    /// List the landmarks of a project, a specimen or a trial, with voxel coordinates.
    List(ListArgs),
}

#[derive(Debug, Subcommand)]
pub enum CurveCommand {
    /// Set the control points traced along a curve; its semilandmarks are resampled at equal
    /// arc length between its anchor landmarks.
    Trace(TraceArgs),
    /// Forget a traced curve.
    Clear(CurveTarget),
}

/// Which landmark of which trial.
#[derive(Debug, Args)]
pub struct TargetArgs {
    /// The project file.
    pub project: PathBuf,
    /// The specimen id.
    pub specimen: String,
    /// The landmark id (as in the scheme).
    pub landmark: String,
    /// The trial (default: the specimen's last trial).
    #[arg(long)]
    pub trial: Option<String>,
    /// Operator of the trial created when the specimen has none yet (default: $USER).
    #[arg(long)]
    pub operator: Option<String>,
}

/// A position: world mm or voxel coordinates.
#[derive(Debug, Args)]
#[group(required = true, multiple = false)]
pub struct PositionArgs {
    /// World position in millimetres, `X,Y,Z`.
    #[arg(long, value_name = "X,Y,Z", allow_hyphen_values = true)]
    pub world_mm: Option<Triple>,
    /// Continuous voxel coordinates `I,J,K` of the specimen's scan (voxel centres at integers).
    #[arg(long, value_name = "I,J,K", allow_hyphen_values = true)]
    pub voxel: Option<Triple>,
}

/// The frame points are typed in.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, ValueEnum)]
pub enum Frame {
    /// World millimetres (the frame every position is stored in).
    #[default]
    World,
    /// Continuous voxel coordinates of the specimen's scan (voxel centres at integers).
    Voxel,
}

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum MethodArg {
    /// Typed coordinates.
    Typed,
    /// Read off a plane view.
    Slice,
    /// Found on the surface (see `landmark pick` for picking along a ray).
    Surface,
    /// Estimated, not seen (state `estimated`).
    Estimated,
}

impl From<MethodArg> for Method {
    fn from(m: MethodArg) -> Self {
        match m {
            MethodArg::Typed => Self::Typed,
            MethodArg::Slice => Self::Slice,
            MethodArg::Surface => Self::Surface,
            MethodArg::Estimated => Self::Estimated,
        }
    }
}

#[derive(Debug, Args)]
pub struct SetArgs {
    #[command(flatten)]
    pub target: TargetArgs,
    #[command(flatten)]
    pub position: PositionArgs,
    /// How the position was obtained.
    #[arg(long, value_enum, default_value = "typed")]
    pub method: MethodArg,
    /// A note to keep with the landmark.
    #[arg(long)]
    pub note: Option<String>,
    #[command(flatten)]
    pub time: TimeArgs,
}

#[derive(Debug, Args)]
pub struct PickArgs {
    #[command(flatten)]
    pub target: TargetArgs,
    /// Start of the ray, `X,Y,Z` in the --frame. Start it outside the material: the first
    /// entry into material is taken.
    #[arg(long, value_name = "X,Y,Z", allow_hyphen_values = true)]
    pub from: Triple,
    /// A point the ray passes through (the ray runs from --from towards it).
    #[arg(
        long,
        value_name = "X,Y,Z",
        allow_hyphen_values = true,
        conflicts_with = "direction",
        required_unless_present = "direction"
    )]
    pub toward: Option<Triple>,
    /// The ray's direction `DX,DY,DZ` along the --frame's axes; need not be unit length.
    #[arg(long, value_name = "DX,DY,DZ", allow_hyphen_values = true)]
    pub direction: Option<Triple>,
    /// The frame of --from, --toward and --direction.
    #[arg(long, value_enum, default_value = "world")]
    pub frame: Frame,
    /// The iso-value separating material from background, in the scan's grey values
    /// (default: the scan's ISO-50, halfway between the histogram's background and material
    /// peaks; the same value the workstation's 3D view and snapping use).
    #[arg(long, value_name = "GREY", allow_hyphen_values = true)]
    pub iso_value: Option<f64>,
    /// How far along the ray to search (default: through the whole scan), e.g. 2mm.
    #[arg(long, value_name = "LEN")]
    pub max_distance: Option<LengthMm>,
    /// Move the crossing to the steepest point of the edge along the surface normal.
    #[arg(long)]
    pub refine: bool,
    /// A note to keep with the landmark.
    #[arg(long)]
    pub note: Option<String>,
    #[command(flatten)]
    pub time: TimeArgs,
}

#[derive(Debug, Args)]
pub struct MissingArgs {
    #[command(flatten)]
    target: TargetArgs,
    /// Why it is missing (kept as the landmark's note).
    #[arg(long)]
    note: Option<String>,
    #[command(flatten)]
    time: TimeArgs,
}

#[derive(Debug, Args)]
pub struct NoteArgs {
    #[command(flatten)]
    target: TargetArgs,
    /// The note; an empty text removes it.
    text: String,
}

#[derive(Debug, Args)]
pub struct ListArgs {
    /// The project file.
    project: PathBuf,
    /// Only this specimen.
    #[arg(long)]
    specimen: Option<String>,
    /// Only this trial.
    #[arg(long)]
    trial: Option<String>,
}

#[derive(Debug, Args)]
pub struct CurveTarget {
    /// The project file.
    project: PathBuf,
    /// The specimen id.
    specimen: String,
    /// The curve id (as in the scheme).
    curve: String,
    /// The trial (default: the specimen's last trial).
    #[arg(long)]
    trial: Option<String>,
}

#[derive(Debug, Args)]
pub struct TraceArgs {
    #[command(flatten)]
    target: CurveTarget,
    /// The control points of one segment (between two consecutive anchors), in tracing order,
    /// as `X,Y,Z;X,Y,Z;…` (empty for a straight segment). Give it once per segment, in order.
    #[arg(long = "segment", value_name = "POINTS", allow_hyphen_values = true)]
    segments: Vec<String>,
    /// The frame of the points.
    #[arg(long, value_enum, default_value = "world")]
    frame: Frame,
    #[command(flatten)]
    time: TimeArgs,
}

/// The trial to work on: `--trial`, else the last one; a specimen without trials gets trial
/// `1` (created here) when `create` is set.
pub fn resolve_trial(
    session: &mut Session,
    specimen: &str,
    trial: Option<&str>,
    operator: Option<&str>,
    create: bool,
    time: &TimeArgs,
) -> Result<String> {
    let s = session
        .project
        .specimen(specimen)
        .with_context(|| format!("no specimen '{specimen}' in {}", session.path().display()))?;
    if let Some(t) = trial {
        if s.trial(t).is_none() {
            bail!(
                "specimen {specimen} has no trial '{t}' (trials: {}); start one with `sutura trial new`",
                list_or_none(s.trials.iter().map(|t| t.id.as_str()))
            );
        }
        return Ok(t.to_owned());
    }
    if let Some(last) = s.trials.last() {
        return Ok(last.id.clone());
    }
    if !create {
        bail!("specimen {specimen} has no trials yet");
    }
    let operator = operator
        .map(str::to_owned)
        .or_else(|| std::env::var("USER").ok())
        .unwrap_or_else(|| "unknown".to_owned());
    let id = s.next_trial_id();
    session.edit(Edit::AddTrial {
        specimen: specimen.to_owned(),
        trial: Box::new(Trial::new(&id, &operator, time.timestamp())),
        index: None,
    })?;
    eprintln!("{specimen}: started trial {id} by {operator}");
    Ok(id)
}

/// The trial to work on without creating one: `--trial`, else the specimen's last trial.
fn existing_trial(session: &mut Session, specimen: &str, trial: Option<&str>) -> Result<String> {
    resolve_trial(
        session,
        specimen,
        trial,
        None,
        false,
        &TimeArgs { time: None },
    )
}

fn list_or_none<'a>(items: impl Iterator<Item = &'a str>) -> String {
    let v: Vec<&str> = items.collect();
    if v.is_empty() {
        "none".into()
    } else {
        v.join(", ")
    }
}

/// The world position of `--world-mm` / `--voxel` for a specimen, refused outside its scan.
pub fn position(project: &Project, specimen: &str, p: &PositionArgs) -> Result<[f64; 3]> {
    let s = project
        .specimen(specimen)
        .with_context(|| format!("no specimen '{specimen}'"))?;
    let world = match (p.world_mm, p.voxel) {
        (Some(w), _) => w.0,
        (None, Some(v)) => s.scan.world_from_voxel_point(v.0),
        (None, None) => bail!("give --world-mm X,Y,Z or --voxel I,J,K"),
    };
    if !s.scan.contains(world) {
        let v = s.scan.voxel_from_world_point(world);
        bail!(
            "{specimen}: {} mm is outside the scan (voxel {:.1}, {:.1}, {:.1} of {}); \
             positions are world millimetres",
            numbers(&world),
            v[0],
            v[1],
            v[2],
            dims(s.scan.fingerprint.dims)
        );
    }
    Ok(world)
}

pub fn run_landmark(c: &LandmarkCommand) -> Result<()> {
    match c {
        LandmarkCommand::Set(a) => run_set(a),
        LandmarkCommand::Missing(a) => run_missing(a),
        LandmarkCommand::Clear(a) => run_clear(a),
        LandmarkCommand::Pick(a) => run_pick(a),
        LandmarkCommand::Mirror(a) => run_mirror(a),
        LandmarkCommand::Note(a) => run_note(a),
        LandmarkCommand::List(a) => run_list(a),
    }
}

pub fn run_curve(c: &CurveCommand) -> Result<()> {
    match c {
        CurveCommand::Trace(a) => run_trace(a),
        CurveCommand::Clear(a) => run_curve_clear(a),
    }
}

/// Places a landmark at a world position in one session (shared with `landmark pick`).
pub fn place(
    t: &TargetArgs,
    time: &TimeArgs,
    world: impl FnOnce(&Project) -> Result<([f64; 3], Option<PickRecord>)>,
    method: Method,
    note: Option<&str>,
) -> Result<[f64; 3]> {
    let mut session = open(&t.project)?;
    let (p, pick) = world(&session.project)?;
    let trial = resolve_trial(
        &mut session,
        &t.specimen,
        t.trial.as_deref(),
        t.operator.as_deref(),
        true,
        time,
    )?;
    session.edit(Edit::SetLandmark {
        specimen: t.specimen.clone(),
        trial: trial.clone(),
        landmark: t.landmark.clone(),
        position_mm: p,
        method,
        pick,
        at: time.timestamp(),
    })?;
    if let Some(n) = note {
        session.edit(Edit::SetNote {
            specimen: t.specimen.clone(),
            trial: trial.clone(),
            landmark: t.landmark.clone(),
            note: Some(n.to_owned()),
        })?;
    }
    session.save()?;
    eprintln!(
        "{} trial {trial}: {} at {} mm ({})",
        t.specimen,
        t.landmark,
        numbers(&p),
        method.name()
    );
    Ok(p)
}

fn run_set(a: &SetArgs) -> Result<()> {
    place(
        &a.target,
        &a.time,
        |project| Ok((position(project, &a.target.specimen, &a.position)?, None)),
        a.method.into(),
        a.note.as_deref(),
    )?;
    Ok(())
}

fn run_pick(a: &PickArgs) -> Result<()> {
    place(
        &a.target,
        &a.time,
        |project| pick_position(a, project),
        Method::Surface,
        a.note.as_deref(),
    )?;
    Ok(())
}

/// The chunk cache of a pick on a store: the blocks around one ray segment, many times over.
const PICK_CACHE_BYTES: u64 = 256 << 20;

/// Opens the specimen's scan (refusing one that differs from its fingerprint) and picks along
/// the ray `--from` → `--toward` / `--direction`.
fn pick_position(a: &PickArgs, project: &Project) -> Result<([f64; 3], Option<PickRecord>)> {
    let t = &a.target;
    let s = project
        .specimen(&t.specimen)
        .with_context(|| format!("no specimen '{}'", t.specimen))?;
    let scan = &s.scan;
    // a store is read a block at a time: full-resolution chunks around the ray only
    let (source, mismatch) = scan.open_source(&t.project, PICK_CACHE_BYTES)?;
    if let Some(m) = mismatch {
        bail!("{m}; refusing to pick on it");
    }
    let voxel = a.frame == Frame::Voxel;
    let point = |p: Triple| {
        if voxel {
            scan.world_from_voxel_point(p.0)
        } else {
            p.0
        }
    };
    let origin = point(a.from);
    let direction = match (a.toward, a.direction) {
        (Some(to), _) => {
            let to = point(to);
            [to[0] - origin[0], to[1] - origin[1], to[2] - origin[2]]
        }
        (None, Some(d)) => {
            if voxel {
                let v = scan.world_from_voxel.apply_vector(Vector3::from(d.0));
                [v.x, v.y, v.z]
            } else {
                d.0
            }
        }
        (None, None) => bail!("give --toward X,Y,Z or --direction DX,DY,DZ"),
    };
    let iso = match a.iso_value {
        Some(v) => pick::IsoValue::given(v),
        None => pick_source::default_iso_value(source.as_ref())?,
    };
    let threshold = iso.value;
    let options = pick::PickOptions {
        threshold,
        max_distance_mm: a.max_distance.map_or(f64::INFINITY, |l| l.0),
        refine_to_edge: a.refine,
    };
    let hit = pick_source::pick_along_ray(
        source.as_ref(),
        WorldPoint::new(origin[0], origin[1], origin[2]),
        Vector3::from(direction),
        &options,
    )?
    .with_context(|| {
        format!(
            "{}: the ray from {} mm meets no surface at the {} within the scan{}",
            t.specimen,
            numbers(&origin),
            iso.describe(),
            a.max_distance
                .map(|l| format!(" and {}", sutura_core::geometry::format_length_mm(l.0)))
                .unwrap_or_default()
        )
    })?;
    match hit.crossing {
        pick::Crossing::Entry => {}
        pick::Crossing::Exit => {
            eprintln!("note: the ray starts inside material; the point is where it leaves it");
        }
        pick::Crossing::VolumeFace => bail!(
            "{}: the ray enters the scan already inside material: no surface there",
            t.specimen
        ),
    }
    let unit = Vector3::from(direction).normalize();
    let p = hit.point.0;
    eprintln!(
        "picked at {:.1} µm along the ray, {}{}",
        hit.distance_mm * 1e3,
        iso.describe(),
        if hit.refined {
            ", refined to the edge"
        } else {
            ""
        }
    );
    Ok((
        [p.x, p.y, p.z],
        PickRecord::of(
            WorldPoint::new(origin[0], origin[1], origin[2]),
            unit,
            threshold,
            &hit,
        ),
    ))
}

fn run_mirror(t: &TargetArgs) -> Result<()> {
    let mut session = open(&t.project)?;
    let trial = existing_trial(&mut session, &t.specimen, t.trial.as_deref())?;
    let s = session
        .project
        .specimen(&t.specimen)
        .with_context(|| format!("no specimen '{}'", t.specimen))?;
    let tr = s
        .trial(&trial)
        .with_context(|| format!("no trial '{trial}'"))?;
    let e = mirror::estimate_from_partner(session.project.scheme(), tr, &t.landmark)
        .with_context(|| format!("{} trial {trial}: {}", t.specimen, t.landmark))?;
    let note = e.describe();
    session.edit_all(
        vec![
            Edit::SetLandmark {
                specimen: t.specimen.clone(),
                trial: trial.clone(),
                landmark: t.landmark.clone(),
                position_mm: e.position_mm,
                method: Method::Estimated,
                pick: None,
                at: sutura_core::landmarks::project::Timestamp::now(),
            },
            Edit::SetNote {
                specimen: t.specimen.clone(),
                trial: trial.clone(),
                landmark: t.landmark.clone(),
                note: Some(note.clone()),
            },
        ],
        format!("estimate {} from its partner", t.landmark),
    )?;
    session.save()?;
    let p = e.position_mm;
    eprintln!(
        "{} trial {trial}: {} at [{:.4}, {:.4}, {:.4}] mm, {note}",
        t.specimen, t.landmark, p[0], p[1], p[2]
    );
    Ok(())
}

fn run_missing(a: &MissingArgs) -> Result<()> {
    let t = &a.target;
    let mut session = open(&t.project)?;
    let trial = resolve_trial(
        &mut session,
        &t.specimen,
        t.trial.as_deref(),
        t.operator.as_deref(),
        true,
        &a.time,
    )?;
    session.edit(Edit::MarkMissing {
        specimen: t.specimen.clone(),
        trial: trial.clone(),
        landmark: t.landmark.clone(),
        at: a.time.timestamp(),
    })?;
    if let Some(n) = &a.note {
        session.edit(Edit::SetNote {
            specimen: t.specimen.clone(),
            trial,
            landmark: t.landmark.clone(),
            note: Some(n.clone()),
        })?;
    }
    Ok(session.save()?)
}

fn run_clear(t: &TargetArgs) -> Result<()> {
    let mut session = open(&t.project)?;
    let trial = existing_trial(&mut session, &t.specimen, t.trial.as_deref())?;
    session.edit(Edit::ClearLandmark {
        specimen: t.specimen.clone(),
        trial,
        landmark: t.landmark.clone(),
    })?;
    Ok(session.save()?)
}

fn run_note(a: &NoteArgs) -> Result<()> {
    let t = &a.target;
    let mut session = open(&t.project)?;
    let trial = existing_trial(&mut session, &t.specimen, t.trial.as_deref())?;
    session.edit(Edit::SetNote {
        specimen: t.specimen.clone(),
        trial,
        landmark: t.landmark.clone(),
        note: Some(a.text.clone()),
    })?;
    Ok(session.save()?)
}

fn run_trace(a: &TraceArgs) -> Result<()> {
    let t = &a.target;
    let mut session = open(&t.project)?;
    let s = session
        .project
        .specimen(&t.specimen)
        .with_context(|| format!("no specimen '{}'", t.specimen))?;
    let mut traced = Vec::with_capacity(a.segments.len());
    for seg in &a.segments {
        let mut pts = Vec::new();
        for p in seg.split(';').map(str::trim).filter(|p| !p.is_empty()) {
            let q = p
                .parse::<Triple>()
                .with_context(|| format!("--segment point '{p}'"))?
                .0;
            let w = if a.frame == Frame::Voxel {
                s.scan.world_from_voxel_point(q)
            } else {
                q
            };
            if !s.scan.contains(w) {
                bail!(
                    "{}: traced point {} mm is outside the scan",
                    t.specimen,
                    numbers(&w)
                );
            }
            pts.push(w);
        }
        traced.push(pts);
    }
    let trial = resolve_trial(
        &mut session,
        &t.specimen,
        t.trial.as_deref(),
        None,
        true,
        &a.time,
    )?;
    session.edit(Edit::SetCurve {
        specimen: t.specimen.clone(),
        trial,
        curve: t.curve.clone(),
        traced_mm: traced,
        at: a.time.timestamp(),
    })?;
    Ok(session.save()?)
}

fn run_curve_clear(t: &CurveTarget) -> Result<()> {
    let mut session = open(&t.project)?;
    let trial = existing_trial(&mut session, &t.specimen, t.trial.as_deref())?;
    session.edit(Edit::ClearCurve {
        specimen: t.specimen.clone(),
        trial,
        curve: t.curve.clone(),
    })?;
    Ok(session.save()?)
}

fn run_list(a: &ListArgs) -> Result<()> {
    let mut out = String::new();
    let project = load(&a.project)?;
    if let Some(s) = &a.specimen
        && project.specimen(s).is_none()
    {
        bail!("no specimen '{s}' in {}", a.project.display());
    }
    _ = writeln!(
        out,
        "{:<12} {:<5} {:<22} {:<9} {:<9} {:>10} {:>10} {:>10} {:>8} {:>8} {:>8}  note",
        "specimen", "trial", "landmark", "state", "method", "x_mm", "y_mm", "z_mm", "i", "j", "k"
    );
    for s in project.specimens() {
        if a.specimen.as_ref().is_some_and(|x| *x != s.id) {
            continue;
        }
        for t in &s.trials {
            if a.trial.as_ref().is_some_and(|x| *x != t.id) {
                continue;
            }
            for l in &project.scheme().landmarks {
                let e = t.landmark(&l.id);
                let (state, method) = match e {
                    None => ("-", "-"),
                    Some(e) => (e.state.name(), e.method.map_or("-", Method::name)),
                };
                let pos = match e.and_then(|e| e.position_mm) {
                    Some(p) => {
                        let v = s.scan.voxel_from_world_point(p);
                        format!(
                            "{:>10.4} {:>10.4} {:>10.4} {:>8.2} {:>8.2} {:>8.2}",
                            p[0], p[1], p[2], v[0], v[1], v[2]
                        )
                    }
                    None => format!(
                        "{:>10} {:>10} {:>10} {:>8} {:>8} {:>8}",
                        "", "", "", "", "", ""
                    ),
                };
                let note = e.and_then(|e| e.note.as_deref()).unwrap_or("");
                let state = if e.is_some_and(|e| e.state == LandmarkState::Missing) {
                    "MISSING"
                } else {
                    state
                };
                _ = writeln!(
                    out,
                    "{:<12} {:<5} {:<22} {:<9} {:<9} {pos}  {note}",
                    s.id, t.id, l.id, state, method
                );
            }
        }
    }
    super::emit(&out)
}

/// A grid size for a message: `64x64x44`.
fn dims(d: [usize; 3]) -> String {
    format!("{}x{}x{}", d[0], d[1], d[2])
}
