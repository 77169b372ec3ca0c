//! The command line: clap options, validated into plain configurations, handed to the library.
//!
//! `main` only parses and maps errors to exit codes (0 success, 1 failure with a one-line
//! message on stderr, 2 usage errors from clap); every subcommand is a `run_*` function
//! returning `anyhow::Result`. No science lives here: each figure printed comes from a library
//! call the GUI makes too.

mod convert;
mod evolution;
mod info;
mod labels;
mod landmark;
mod landmark_export;
mod measure;
mod mesh;
mod project;
mod sample;
mod superimpose;
mod view;

use anyhow::Result;
use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

use sutura_core::geometry::VoxelSizeMm;
use sutura_core::io::{OpenOptions, Progress};
use sutura_core::volume::{Volume, VolumeSource};

/// Sutura: measure fossil specimens in CT scans.
///
/// Scans: a folder of TIFF slices, a multi-page (Big)TIFF, or NIfTI-1/2 (.nii, .nii.gz,
/// .hdr/.img); 8/16-bit integer or 32-bit float voxels.
#[derive(Debug, Parser)]
#[command(name = "sutura", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// Without a command, the workstation window opens on the bundled sample project.
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Open a scan (a file or a folder of TIFF slices) or a landmark project in the workstation window.
    Open(OpenArgs),
    /// Print a scan's dimensions, voxel type and size, placement and intensity statistics.
    Info(info::InfoArgs),
    /// Write a scan as a chunked multiscale OME-Zarr store (NAME.ome.zarr), or, optionally
    /// cropped and downsampled, as NIfTI-1 or a folder of TIFF slices.
    Convert(convert::ConvertArgs),
    /// Render a plane (voxel plane, oblique, or thick slab) of a scan to PNG.
    Slice(view::SliceArgs),
    /// Render a 3D view (projection or shaded surface) of a scan to PNG.
    Render(view::View3dArgs),
    /// Write the synthetic sample specimens with their true landmarks.
    Sample(sample::SampleArgs),
    /// Superimpose a landmark table or a project (GPA) into shape coordinates, morphospace
    /// and disparity.
    Superimpose(superimpose::SuperimposeArgs),
    /// Make and inspect a landmark project: specimens, scans, labels, progress.
    #[command(subcommand)]
    Project(project::ProjectCommand),
    /// Start a digitisation (trial) of a specimen.
    #[command(subcommand)]
    Trial(project::TrialCommand),
    /// Place, mark missing, clear, annotate and list landmarks.
    #[command(subcommand)]
    Landmark(landmark::LandmarkCommand),
    /// Trace the curves whose semilandmarks the scheme asks for.
    #[command(subcommand)]
    Curve(landmark::CurveCommand),
    /// Compute the scheme's measurements (mm, degrees) for every specimen and trial.
    Measure(measure::MeasureArgs),
    /// Export a project's landmarks: long or wide CSV, JSON, .npy arrays, PLY point sets.
    Export(landmark_export::ExportArgs),
    /// Disparity per time bin (Procrustes variance, sum of variances, mean pairwise distance)
    /// with bootstrap intervals, rarefaction, age uncertainty and tests between bins.
    DisparityThroughTime(evolution::ThroughTimeArgs),
    /// Rates of shape evolution on a tree (σ²mult, compared between groups) and
    /// phylogenetic signal (Kmult).
    Rates(evolution::RatesArgs),
    /// Brownian motion, early burst and Ornstein-Uhlenbeck compared on all shape dimensions
    /// (pairwise composite likelihood and its information criterion).
    Models(evolution::ModelsArgs),
    /// Ancestral shapes (GLS) at the root and every node, and the tree in the morphospace.
    AncestralShapes(evolution::AncestralArgs),
    /// Measurement error with operator as a factor: Procrustes ANOVA of individual, operator,
    /// their interaction and repeats, for shape, centroid size and each measurement.
    MeasurementError(evolution::MeasurementErrorArgs),
    /// Virtual preparation: label a scan's specimen, matrix and inclusions.
    #[command(subcommand)]
    Labels(labels::LabelsCommand),
    /// Write the surface of a scan's material or of a label as PLY, STL or OBJ, with its area,
    /// volume and pieces.
    Mesh(mesh::MeshArgs),
}

#[derive(Debug, Args)]
struct OpenArgs {
    /// The scan (a `NIfTI` or TIFF file, or a folder of TIFF slices) or a project (`.json`).
    path: PathBuf,
}

/// How to read a scan; shared by every command that opens one.
#[derive(Debug, Args, Clone)]
pub struct ScanArgs {
    /// The scan: a folder of TIFF slices, a TIFF file, a `NIfTI` file, a folder of DICOM
    /// slices (or one file of the series), or an OME-Zarr store (`NAME.ome.zarr`, see
    /// `sutura convert`).
    pub scan: PathBuf,

    /// The DICOM series to read, by its `SeriesInstanceUID`, when the folder holds several
    /// (the error without it lists them).
    #[arg(long, value_name = "UID")]
    pub series: Option<String>,

    /// Voxel size for scans that do not record one (TIFF), overriding any resolution tags:
    /// one length for cubic voxels (`12um`), or three for x,y,z (`12um,12um,30um`).
    /// Units: m, mm, um (µm), nm. Recorded in every output.
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    pub voxel_size: Option<VoxelSizeMm>,

    /// Hide the progress bar.
    #[arg(long)]
    pub quiet: bool,

    /// Memory for decoded chunks when the scan is an OME-Zarr store, in MiB.
    #[arg(long, value_name = "MIB", default_value_t = 1024)]
    pub cache_mib: u64,
}

impl ScanArgs {
    /// Opens the scan for reading through the volume interface: an OME-Zarr store is opened
    /// where it lies (chunks read as needed, within `--cache-mib`); any other scan is loaded.
    pub fn open_source(&self) -> Result<Box<dyn VolumeSource>> {
        if sutura_core::store::is_store(&self.scan) {
            return Ok(sutura_core::landmarks::scan::open_source(
                &self.scan,
                self.voxel_size.map(|v| v.0),
                self.cache_mib << 20,
            )?);
        }
        Ok(Box::new(self.open()?))
    }

    /// The options of opening the scan: the voxel size and the DICOM series given.
    #[must_use]
    pub fn open_options(&self) -> OpenOptions {
        OpenOptions {
            voxel_size_mm: self.voxel_size.map(|v| v.0),
            dicom_series: self.series.clone(),
            ..OpenOptions::default()
        }
    }

    /// Opens the scan with a progress bar on stderr.
    pub fn open(&self) -> Result<Volume> {
        let bar = (!self.quiet).then(|| {
            let b = indicatif::ProgressBar::with_draw_target(
                None,
                indicatif::ProgressDrawTarget::stderr_with_hz(10),
            );
            b.set_style(
                indicatif::ProgressStyle::with_template("loading {bar:40} {percent:>3}% {elapsed}")
                    .expect("static template"),
            );
            b
        });
        let report = |done: u64, total: u64| {
            if let Some(b) = &bar {
                b.set_length(total);
                b.set_position(done);
            }
            true
        };
        let progress = Progress::new(Some(&report));
        let volume = sutura_core::landmarks::scan::open_scan_with(
            &self.scan,
            &self.open_options(),
            &progress,
        )?;
        if let Some(b) = &bar {
            b.finish_and_clear();
        }
        Ok(volume)
    }
}

/// Parses the command line, runs it, and maps the outcome to an exit code.
#[must_use]
pub fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => return usage_error(&e),
    };
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("sutura: {}", one_line(&e));
            ExitCode::FAILURE
        }
    }
}

/// Two finite numbers `A,B` (an `--orbit` or a `--window`), read at the command line's boundary.
pub fn pair(text: &str) -> Result<[f64; 2], String> {
    let v: Vec<f64> = text
        .split(',')
        .map(|s| s.trim().parse::<f64>())
        .collect::<Result<_, _>>()
        .map_err(|_| format!("'{text}' is not two numbers A,B"))?;
    match v.as_slice() {
        [a, b] if a.is_finite() && b.is_finite() => Ok([*a, *b]),
        _ => Err(format!("'{text}': give two finite numbers A,B")),
    }
}

/// A command line clap refuses: help and version print as clap writes them; a mistake is one
/// line on stderr (clap's first line, without its own prefix) and exit code 2.
fn usage_error(e: &clap::Error) -> ExitCode {
    use clap::error::ErrorKind;
    if matches!(
        e.kind(),
        ErrorKind::DisplayHelp
            | ErrorKind::DisplayVersion
            | ErrorKind::DisplayHelpOnMissingArgumentOrSubcommand
    ) {
        let _ = e.print();
        return ExitCode::SUCCESS;
    }
    let text = e.render().to_string();
    let first = text
        .lines()
        .find(|l| !l.trim().is_empty())
        .unwrap_or("invalid command line");
    let first = first.strip_prefix("error: ").unwrap_or(first);
    eprintln!("sutura: {first} (see sutura --help)");
    ExitCode::from(2)
}

/// Runs a parsed command line.
pub fn run(cli: Cli) -> Result<()> {
    let Some(command) = cli.command else {
        return crate::gui::run(None);
    };
    match command {
        Command::Open(a) => crate::gui::run(Some(a.path)),
        Command::Info(a) => info::run(&a),
        Command::Convert(a) => convert::run(&a),
        Command::Slice(a) => view::run_slice(&a),
        Command::Render(a) => view::run_view3d(&a),
        Command::Sample(a) => sample::run(&a),
        Command::Superimpose(a) => superimpose::run(&a),
        Command::Project(c) => project::run_project(&c),
        Command::Trial(c) => project::run_trial(&c),
        Command::Landmark(c) => landmark::run_landmark(&c),
        Command::Curve(c) => landmark::run_curve(&c),
        Command::Measure(a) => measure::run(&a),
        Command::Export(a) => landmark_export::run(&a),
        Command::DisparityThroughTime(a) => evolution::run_through_time(&a),
        Command::Rates(a) => evolution::run_rates(&a),
        Command::Models(a) => evolution::run_models(&a),
        Command::AncestralShapes(a) => evolution::run_ancestral(&a),
        Command::MeasurementError(a) => evolution::run_measurement_error(&a),
        Command::Labels(c) => labels::run(&c),
        Command::Mesh(a) => mesh::run(&a),
    }
}

/// Writes a command's output to stdout; a reader that stops early (`| head`) is not an error.
fn emit(text: &str) -> Result<()> {
    use std::io::Write;
    let mut stdout = std::io::stdout().lock();
    match stdout
        .write_all(text.as_bytes())
        .and_then(|()| stdout.flush())
    {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(e.into()),
        _ => Ok(()),
    }
}

/// An error and its causes on one line, outermost first, without repeats, cleaned and capped
/// by the library's message rule ([`sutura_core::message::one_line`]).
fn one_line(e: &anyhow::Error) -> String {
    let mut parts: Vec<String> = Vec::new();
    for cause in e.chain() {
        let s = cause.to_string();
        if !parts.iter().any(|p| p.contains(&s)) {
            parts.push(s);
        }
    }
    sutura_core::message::one_line(&parts.join(": "), sutura_core::message::MAX_MESSAGE_CHARS)
}
