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

use sutura_core::geometry::VoxelSizeMm;
use sutura_core::io::{self, Progress};
use sutura_core::landmarks::project::create::{
    NewSpecimen, parse_group, project_from_scheme_file, specimen_from_scan, specimen_from_store,
};
use sutura_core::landmarks::project::{Edit, Project, ProjectLock, Session, Timestamp, Trial};

#[derive(Debug, Subcommand)]
pub enum ProjectCommand {
    /// Start a project from a landmark scheme, optionally with one specimen per scan in a
    /// folder (specimen id = scan name without its extension).
    New(NewArgs),
    /// Add one specimen and its scan.
    Add(AddArgs),
    /// Check every specimen's scan against its fingerprint (exit code 1 on a mismatch), and
    /// each trial against the rest of the sample: swapped bilateral pairs, outlying landmarks
    /// and measurements (reported only; they never change data or the exit code).
    Check(CheckArgs),
    /// Show each specimen's scan and how far each trial has got.
    Status(StatusArgs),
    /// Set or remove a specimen's group under a key (e.g. locality=Harrowdene Clay).
    Group(GroupArgs),
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
    #[arg(long, value_name = "RFC3339", value_parser = Timestamp::parse)]
    pub time: Option<Timestamp>,
}

impl TimeArgs {
    #[must_use]
    pub fn timestamp(&self) -> Timestamp {
        self.time.clone().unwrap_or_else(Timestamp::now)
    }
}

#[derive(Debug, Args)]
pub struct NewArgs {
    /// The project file to create (JSON; the folder is created if missing).
    project: PathBuf,

    /// The landmark scheme (TOML). The project keeps a copy of it.
    #[arg(long)]
    scheme: PathBuf,

    /// A folder of scans: each `.nii`, `.nii.gz`, `.hdr`, `.tif`/`.tiff` file, each folder
    /// of TIFF slices and each OME-Zarr store becomes a specimen, in name order.
    #[arg(long)]
    scans: Option<PathBuf>,

    /// Voxel size for the TIFF scans found (NIfTI files carry their own): one length (`12um`)
    /// or three (`12um,12um,30um`).
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    voxel_size: Option<VoxelSizeMm>,

    /// A group given to every specimen added, as KEY=VALUE (repeatable).
    #[arg(long = "group", value_name = "KEY=VALUE", value_parser = group_arg)]
    groups: Vec<(String, Option<String>)>,

    /// Replace an existing project file (its previous version is kept as NAME.bak).
    #[arg(long)]
    force: bool,
}

#[derive(Debug, Args)]
pub struct AddArgs {
    /// The project file.
    project: PathBuf,

    /// The scan: a NIfTI file, a TIFF file, a folder of TIFF slices or DICOM slices, or an
    /// OME-Zarr store (recorded without reading it whole).
    scan: PathBuf,

    /// Specimen id (default: the scan's name without its extension).
    #[arg(long)]
    id: Option<String>,

    /// Voxel size (required for TIFF scans; overrides a NIfTI file's own): `12um` or
    /// `12um,12um,30um`.
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    voxel_size: Option<VoxelSizeMm>,

    /// A group, as KEY=VALUE (repeatable).
    #[arg(long = "group", value_name = "KEY=VALUE", value_parser = group_arg)]
    groups: Vec<(String, Option<String>)>,
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
pub struct GroupArgs {
    /// The project file.
    project: PathBuf,
    /// The specimens (one or more).
    #[arg(required = true, num_args = 1..)]
    specimens: Vec<String>,
    /// KEY=VALUE to set, or KEY= to remove.
    #[arg(long = "set", value_name = "KEY=VALUE", value_parser = group_arg, required = true)]
    groups: Vec<(String, Option<String>)>,
}

/// `KEY=VALUE` (or `KEY=` to remove), read by the library's rule.
fn group_arg(text: &str) -> Result<(String, Option<String>), String> {
    parse_group(text).map_err(|e| e.to_string())
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
    /// Trial id (default: one more than the specimen's largest trial number).
    #[arg(long)]
    id: Option<String>,
    #[command(flatten)]
    time: TimeArgs,
}

/// Reads a project for looking only.
pub fn load(path: &Path) -> Result<Project> {
    Ok(Project::load(path)?)
}

/// Opens a project for changing: locked (refused if another program holds it), loaded; saved
/// once at the end with `save`.
pub fn open(path: &Path) -> Result<Session> {
    Ok(Session::open_exclusive(path)?)
}

/// Opens a scan, records it and builds the specimen; says what was added.
fn new_specimen(
    project_file: &Path,
    new: &NewSpecimen,
) -> Result<sutura_core::landmarks::project::Specimen> {
    // a store is recorded without reading it whole (it may be larger than memory)
    let (s, [nx, ny, nz]) = if sutura_core::store::is_store(&new.scan) {
        specimen_from_store(project_file, new)?
    } else {
        let (s, volume) = specimen_from_scan(project_file, new, &Progress::none())?;
        (s, volume.dims())
    };
    let [sx, sy, sz] = s.scan.voxel_size_mm;
    eprintln!(
        "added {}: {} ({nx} x {ny} x {nz}, voxel {sx} x {sy} x {sz} mm, {})",
        s.id,
        s.scan.path,
        match s.scan.voxel_size_source {
            sutura_core::landmarks::project::VoxelSizeSource::File => "from the file",
            sutura_core::landmarks::project::VoxelSizeSource::User => "given",
        }
    );
    Ok(s)
}

fn groups_map(groups: &[(String, Option<String>)]) -> std::collections::BTreeMap<String, String> {
    groups
        .iter()
        .filter_map(|(k, v)| v.clone().map(|v| (k.clone(), v)))
        .collect()
}

pub fn run_project(c: &ProjectCommand) -> Result<()> {
    match c {
        ProjectCommand::New(a) => run_new(a),
        ProjectCommand::Add(a) => run_add(a),
        ProjectCommand::Check(a) => run_check(a),
        ProjectCommand::Status(a) => run_status(a),
        ProjectCommand::Group(a) => run_group(a),
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
    let mut project = project_from_scheme_file(&a.scheme, &a.project)?;
    if let Some(dir) = &a.scans {
        let scans = io::names::scans_in(dir)?;
        if scans.is_empty() {
            bail!(
                "{}: no scans found (NIfTI, TIFF, or folders of TIFF or DICOM slices)",
                dir.display()
            );
        }
        for scan in scans {
            let placed = io::detect(&scan)?.records_placement();
            let new = NewSpecimen {
                voxel_size_mm: if placed {
                    None
                } else {
                    a.voxel_size.map(|v| v.0)
                },
                groups: groups_map(&a.groups),
                ..NewSpecimen::for_scan(&scan)
            };
            let s = new_specimen(&a.project, &new)
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
    let mut session = open(&a.project)?;
    let new = NewSpecimen {
        voxel_size_mm: a.voxel_size.map(|v| v.0),
        groups: groups_map(&a.groups),
        ..NewSpecimen::for_scan(&a.scan)
    };
    let new = NewSpecimen {
        id: a.id.clone().unwrap_or(new.id.clone()),
        ..new
    };
    if session.project.specimen(&new.id).is_some() {
        bail!(
            "{}: specimen '{}' already exists (give another with --id)",
            a.project.display(),
            new.id
        );
    }
    let s = new_specimen(&a.project, &new)?;
    session.edit(Edit::AddSpecimen {
        specimen: Box::new(s),
        index: None,
    })?;
    Ok(session.save()?)
}

fn run_group(a: &GroupArgs) -> Result<()> {
    let mut session = open(&a.project)?;
    let mut edits = Vec::new();
    for specimen in &a.specimens {
        for (key, value) in &a.groups {
            edits.push(Edit::SetGroup {
                specimen: specimen.clone(),
                key: key.clone(),
                value: value.clone(),
            });
        }
    }
    session.edit_all(edits, "set groups".into())?;
    Ok(session.save()?)
}

fn run_trial_new(a: &TrialNewArgs) -> Result<()> {
    let mut session = open(&a.project)?;
    let s = session
        .project
        .specimen(&a.specimen)
        .with_context(|| format!("no specimen '{}' in {}", a.specimen, a.project.display()))?;
    let id = a.id.clone().unwrap_or_else(|| s.next_trial_id());
    session.edit(Edit::AddTrial {
        specimen: a.specimen.clone(),
        trial: Box::new(Trial::new(&id, &a.operator, a.time.timestamp())),
        index: None,
    })?;
    session.save()?;
    eprintln!("{}: trial {id} by {}", a.specimen, a.operator);
    Ok(())
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
    let checks = sutura_core::analysis::checks::check_project(&project);
    let flagged: usize = checks.iter().map(|c| c.flags.len()).sum();
    _ = writeln!(out, "digitising checks: {flagged} flag(s)");
    for c in &checks {
        for f in &c.flags {
            _ = writeln!(out, "{:<16} trial {:<4} {}", c.specimen, c.trial, f.reason);
        }
        if let Some(why) = &c.not_checked {
            _ = writeln!(
                out,
                "{:<16} trial {:<4} not checked: {why}",
                c.specimen, c.trial
            );
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
