//! `sutura project …` and `sutura trial …`: make a project, add specimens and trials, check
//! that the scans are still the ones digitised, and see how far each trial has got.
//!
//! Every command that changes a project takes its lock, loads it, applies library
//! [`Edit`]s, and saves it atomically with the previous version kept as `NAME.bak`.

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use std::fmt::Write as _;

use anyhow::{Context, Result, bail};
use clap::{Args, Subcommand};
use std::path::{Path, PathBuf};

use sutura_core::geometry::parse_length_mm;
use sutura_core::io::{self, Progress};
use sutura_core::landmarks::project::{
    Edit, Project, ProjectLock, ScanRecord, Specimen, Timestamp, Trial,
};
use sutura_core::landmarks::scheme::{Scheme, is_valid_id};

#[derive(Debug, Subcommand)]
pub enum ProjectCommand {
    /// Start a project from a landmark scheme, optionally with one specimen per scan in a
    /// folder (specimen id = scan name without its extension).
    New(NewArgs),
    /// Add one specimen and its scan.
    Add(AddArgs),
    /// Check every specimen's scan against its fingerprint (exit code 1 on a mismatch).
    Check(CheckArgs),
    /// Show each specimen's scan and how far each trial has got.
    Status(StatusArgs),
    /// Set or remove a group label of a specimen (locality, horizon, …).
    Label(LabelArgs),
}

#[derive(Debug, Subcommand)]
pub enum TrialCommand {
    /// Start a new digitisation (trial) of a specimen.
    New(TrialNewArgs),
}

/// When an edit happens; shared by every changing command.
#[derive(Debug, Args, Clone)]
pub struct TimeArgs {
    /// Time stamp recorded with the change (RFC 3339, e.g. 2025-03-01T14:02:11Z; any offset is
    /// converted to UTC). Default: now.
    #[arg(long, value_name = "RFC3339")]
    pub time: Option<String>,
}

impl TimeArgs {
    pub fn timestamp(&self) -> Result<Timestamp> {
        match &self.time {
            Some(t) => Timestamp::parse(t).map_err(|e| anyhow::anyhow!("--time: {e}")),
            None => Ok(Timestamp::now()),
        }
    }
}

#[derive(Debug, Args)]
pub struct NewArgs {
    /// The project file to create (JSON; the folder is created if missing).
    project: PathBuf,

    /// The landmark scheme (TOML). The project keeps a copy of it.
    #[arg(long)]
    scheme: PathBuf,

    /// A folder of scans: each `.nii`, `.nii.gz`, `.hdr`, `.tif`/`.tiff` file and each folder
    /// of TIFF slices becomes a specimen, in name order.
    #[arg(long)]
    scans: Option<PathBuf>,

    /// Voxel size for the TIFF scans found (NIfTI files carry their own): one length (`12um`)
    /// or three (`12um,12um,30um`).
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    voxel_size: Option<String>,

    /// A group label given to every specimen added, as KEY=VALUE (repeatable).
    #[arg(long = "label", value_name = "KEY=VALUE")]
    labels: Vec<String>,

    /// Replace an existing project file (its previous version is kept as NAME.bak).
    #[arg(long)]
    force: bool,
}

#[derive(Debug, Args)]
pub struct AddArgs {
    /// The project file.
    project: PathBuf,

    /// The scan: a NIfTI file, a TIFF file, or a folder of TIFF slices.
    scan: PathBuf,

    /// Specimen id (default: the scan's name without its extension).
    #[arg(long)]
    id: Option<String>,

    /// Voxel size (required for TIFF scans; overrides a NIfTI file's own): `12um` or
    /// `12um,12um,30um`.
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    voxel_size: Option<String>,

    /// A group label, as KEY=VALUE (repeatable).
    #[arg(long = "label", value_name = "KEY=VALUE")]
    labels: Vec<String>,
}

#[derive(Debug, Args)]
pub struct CheckArgs {
    /// The project file.
    project: PathBuf,

    /// Also load each scan and compare its sampled voxels and placement (slower).
    #[arg(long)]
    full: bool,
}

#[derive(Debug, Args)]
pub struct StatusArgs {
    /// The project file.
    project: PathBuf,
}

#[derive(Debug, Args)]
pub struct LabelArgs {
    /// The project file.
    project: PathBuf,
    /// The specimen.
    specimen: String,
    /// KEY=VALUE to set, or KEY= to remove.
    #[arg(value_name = "KEY=VALUE")]
    label: String,
}

#[derive(Debug, Args)]
pub struct TrialNewArgs {
    /// The project file.
    project: PathBuf,
    /// The specimen.
    specimen: String,
    /// Who digitises this trial.
    #[arg(long)]
    operator: String,
    /// Trial id (default: the next free number).
    #[arg(long)]
    id: Option<String>,
    #[command(flatten)]
    time: TimeArgs,
}

/// A project opened for changing: locked, loaded, saved once at the end.
pub struct Session {
    pub path: PathBuf,
    pub project: Project,
    _lock: ProjectLock,
}

impl Session {
    pub fn open(path: &Path) -> Result<Self> {
        let lock = ProjectLock::acquire(path)?;
        let project = Project::load(path)?;
        Ok(Self {
            path: path.to_owned(),
            project,
            _lock: lock,
        })
    }

    pub fn apply(&mut self, edit: Edit) -> Result<()> {
        let what = edit.describe();
        edit.apply(&mut self.project).with_context(|| what)?;
        Ok(())
    }

    pub fn save(&self) -> Result<()> {
        self.project.save(&self.path)?;
        Ok(())
    }
}

/// Reads a project for looking only.
pub fn load(path: &Path) -> Result<Project> {
    Ok(Project::load(path)?)
}

/// Parses `--voxel-size`.
pub fn voxel_size(text: Option<&str>) -> Result<Option<[f64; 3]>> {
    let Some(text) = text else { return Ok(None) };
    let parts: Vec<f64> = text
        .split(',')
        .map(parse_length_mm)
        .collect::<Result<_, _>>()
        .with_context(|| format!("--voxel-size {text}"))?;
    match parts.as_slice() {
        [s] => Ok(Some([*s; 3])),
        [x, y, z] => Ok(Some([*x, *y, *z])),
        _ => bail!("--voxel-size {text}: give one length or three (x,y,z)"),
    }
}

fn labels(items: &[String]) -> Result<Vec<(String, Option<String>)>> {
    items
        .iter()
        .map(|kv| {
            let (k, v) = kv
                .split_once('=')
                .with_context(|| format!("label '{kv}': write KEY=VALUE"))?;
            let k = k.trim();
            if !is_valid_id(k) {
                bail!("label '{kv}': the key must be 1-64 ASCII letters, digits, _ . -");
            }
            let v = v.trim();
            Ok((k.to_owned(), (!v.is_empty()).then(|| v.to_owned())))
        })
        .collect()
}

/// The specimen id a scan gets by default: its file name without the scan extension.
#[must_use]
pub fn id_from_scan(scan: &Path) -> String {
    let name = scan
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let lower = name.to_lowercase();
    for ext in [".nii.gz", ".nii", ".hdr", ".tiff", ".tif"] {
        if lower.ends_with(ext) {
            return name[..name.len() - ext.len()].to_owned();
        }
    }
    name.strip_suffix("_slices").unwrap_or(&name).to_owned()
}

/// The scans in a folder, in name order: NIfTI and TIFF files and folders holding TIFF slices.
fn scans_in(dir: &Path) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).with_context(|| dir.display().to_string())? {
        let path = entry.with_context(|| dir.display().to_string())?.path();
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().to_lowercase())
            .unwrap_or_default();
        if name.starts_with('.') {
            continue;
        }
        let is_scan = if path.is_dir() {
            io::tiff::list_slices(&path, io::Limits::default().max_slices).is_ok()
        } else {
            [".nii", ".nii.gz", ".hdr", ".tif", ".tiff"]
                .iter()
                .any(|e| name.ends_with(e))
        };
        if is_scan {
            out.push(path);
        }
    }
    out.sort_by(|a, b| io::tiff::natural_cmp(&a.to_string_lossy(), &b.to_string_lossy()));
    Ok(out)
}

/// Opens a scan, records it and builds the specimen.
fn new_specimen(
    project_file: &Path,
    scan: &Path,
    id: String,
    voxel_size_mm: Option<[f64; 3]>,
    labels: &[(String, Option<String>)],
) -> Result<Specimen> {
    if !is_valid_id(&id) {
        bail!(
            "{}: specimen id '{id}' is not valid (1-64 ASCII letters, digits, _ . -): give one with --id",
            scan.display()
        );
    }
    let (scan_record, volume) =
        ScanRecord::create(project_file, scan, voxel_size_mm, &Progress::none())?;
    let [nx, ny, nz] = volume.dims();
    let [sx, sy, sz] = scan_record.voxel_size_mm;
    eprintln!(
        "added {id}: {} ({nx} x {ny} x {nz}, voxel {sx} x {sy} x {sz} mm, {})",
        scan_record.path,
        match scan_record.voxel_size_source {
            sutura_core::landmarks::project::VoxelSizeSource::File => "from the file",
            sutura_core::landmarks::project::VoxelSizeSource::User => "given",
        }
    );
    Ok(Specimen {
        id,
        groups: labels
            .iter()
            .filter_map(|(k, v)| v.clone().map(|v| (k.clone(), v)))
            .collect(),
        scan: scan_record,
        trials: Vec::new(),
    })
}

pub fn run_project(c: &ProjectCommand) -> Result<()> {
    match c {
        ProjectCommand::New(a) => run_new(a),
        ProjectCommand::Add(a) => run_add(a),
        ProjectCommand::Check(a) => run_check(a),
        ProjectCommand::Status(a) => run_status(a),
        ProjectCommand::Label(a) => run_label(a),
    }
}

pub fn run_trial(c: &TrialCommand) -> Result<()> {
    match c {
        TrialCommand::New(a) => run_trial_new(a),
    }
}

fn run_new(a: &NewArgs) -> Result<()> {
    if a.project.exists() && !a.force {
        bail!(
            "{}: already exists (give --force to replace it; the old file is kept as .bak)",
            a.project.display()
        );
    }
    if let Some(dir) = a.project.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).with_context(|| dir.display().to_string())?;
    }
    let _lock = ProjectLock::acquire(&a.project)?;
    let (_, text) = Scheme::load(&a.scheme)?;
    let origin = sutura_core::landmarks::project::relative_path(
        &sutura_core::landmarks::project::project_dir(&a.project),
        &a.scheme,
    )
    .unwrap_or_else(|_| a.scheme.display().to_string());
    let mut project = Project::new(text, origin)?;
    let labels = labels(&a.labels)?;
    let voxel_size = voxel_size(a.voxel_size.as_deref())?;
    if let Some(dir) = &a.scans {
        let scans = scans_in(dir)?;
        if scans.is_empty() {
            bail!(
                "{}: no scans found (NIfTI, TIFF, or folders of TIFF slices)",
                dir.display()
            );
        }
        for scan in scans {
            let is_nifti = io::detect(&scan)? == io::Format::Nifti;
            let size = if is_nifti { None } else { voxel_size };
            let s = new_specimen(&a.project, &scan, id_from_scan(&scan), size, &labels)
                .with_context(|| format!("adding {}", scan.display()))?;
            Edit::AddSpecimen {
                specimen: Box::new(s),
                index: None,
            }
            .apply(&mut project)?;
        }
    }
    project.save(&a.project)?;
    eprintln!(
        "wrote {} (scheme {}: {} landmarks, {} curves, {} measurements; {} specimens)",
        a.project.display(),
        project.scheme().id,
        project.scheme().landmarks.len(),
        project.scheme().curves.len(),
        project.scheme().measurements.len(),
        project.specimens().len()
    );
    Ok(())
}

fn run_add(a: &AddArgs) -> Result<()> {
    let mut session = Session::open(&a.project)?;
    let id = a.id.clone().unwrap_or_else(|| id_from_scan(&a.scan));
    if session.project.specimen(&id).is_some() {
        bail!(
            "{}: specimen '{id}' already exists (give another with --id)",
            a.project.display()
        );
    }
    let s = new_specimen(
        &a.project,
        &a.scan,
        id,
        voxel_size(a.voxel_size.as_deref())?,
        &labels(&a.labels)?,
    )?;
    session.apply(Edit::AddSpecimen {
        specimen: Box::new(s),
        index: None,
    })?;
    session.save()
}

fn run_label(a: &LabelArgs) -> Result<()> {
    let mut session = Session::open(&a.project)?;
    for (key, value) in labels(std::slice::from_ref(&a.label))? {
        session.apply(Edit::SetGroup {
            specimen: a.specimen.clone(),
            key,
            value,
        })?;
    }
    session.save()
}

fn run_trial_new(a: &TrialNewArgs) -> Result<()> {
    let mut session = Session::open(&a.project)?;
    let s = session
        .project
        .specimen(&a.specimen)
        .with_context(|| format!("no specimen '{}' in {}", a.specimen, a.project.display()))?;
    let id = a.id.clone().unwrap_or_else(|| next_trial_id(s));
    session.apply(Edit::AddTrial {
        specimen: a.specimen.clone(),
        trial: Box::new(Trial::new(&id, &a.operator, a.time.timestamp()?)),
        index: None,
    })?;
    session.save()?;
    eprintln!("{}: trial {id} by {}", a.specimen, a.operator);
    Ok(())
}

/// The smallest positive number not yet a trial id of the specimen.
#[must_use]
pub fn next_trial_id(s: &Specimen) -> String {
    // among 1..=n+1 one number is free
    (1..=s.trials.len() + 1)
        .map(|n| n.to_string())
        .find(|id| s.trial(id).is_none())
        .expect("a free number exists")
}

fn run_check(a: &CheckArgs) -> Result<()> {
    let mut out = String::new();
    let project = load(&a.project)?;
    let mut bad = 0;
    for s in project.specimens() {
        let status = s.scan.status(&a.project, a.full);
        if status.is_fine() {
            _ = writeln!(out, "{:<16} {:<10} {}", s.id, status.label(), s.scan.path);
        } else {
            bad += 1;
            let text = sutura_core::message::one_line(
                &status.to_string(),
                sutura_core::message::MAX_MESSAGE_CHARS,
            );
            _ = writeln!(out, "{:<16} {:<10} {text}", s.id, status.label());
        }
    }
    super::emit(&out)?;
    if bad > 0 {
        bail!(
            "{}: {bad} of {} scans are missing, moved, unreadable or not the ones digitised",
            a.project.display(),
            project.specimens().len()
        );
    }
    Ok(())
}

fn run_status(a: &StatusArgs) -> Result<()> {
    let mut out = String::new();
    let project = load(&a.project)?;
    let sc = project.scheme();
    _ = writeln!(
        out,
        "scheme {} ({} landmarks, {} curves, {} measurements), copied from {}",
        sc.id,
        sc.landmarks.len(),
        sc.curves.len(),
        sc.measurements.len(),
        project.scheme_copy().origin
    );
    for s in project.specimens() {
        let labels: Vec<String> = s.groups.iter().map(|(k, v)| format!("{k}={v}")).collect();
        _ = writeln!(out, "{}  {}  [{}]", s.id, s.scan.path, labels.join(", "));
        if s.trials.is_empty() {
            _ = writeln!(out, "    no trials yet");
        }
        for t in &s.trials {
            let p = project.progress(&s.id, &t.id).expect("listed trial");
            _ = writeln!(
                out,
                "    trial {:<4} {:<12} {}  landmarks {}/{} (placed {}, estimated {}, missing {})  curves {}/{}{}",
                t.id,
                t.operator,
                t.started,
                p.landmarks_done(),
                p.landmarks_total,
                p.placed,
                p.estimated,
                p.missing,
                p.curves_done,
                p.curves_total,
                if p.is_complete() { "  complete" } else { "" }
            );
        }
    }
    super::emit(&out)
}
