//! The command line: clap options, validated into plain configurations, handed to the library.
//!
//! `main` only parses and maps errors to exit codes (0 success, 1 failure with a one-line
//! message on stderr, 2 usage errors from clap); every subcommand is a `run_*` function
//! returning `anyhow::Result`. No science lives here: each figure printed comes from a library
//! call the GUI makes too.

mod convert;
mod info;
mod sample;
mod superimpose;
mod view;

use anyhow::{Context, Result};
use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

use crate::geometry::{Affine3, parse_length_mm};
use crate::io::{self, OpenOptions, Progress};
use crate::volume::Volume;

/// Sutura: measure fossil specimens in CT scans.
///
/// Scans: a folder of TIFF slices, a multi-page (Big)TIFF, or NIfTI-1/2 (.nii, .nii.gz,
/// .hdr/.img); 8/16-bit integer or 32-bit float voxels.
#[derive(Debug, Parser)]
#[command(name = "sutura", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// Without a command, the workstation window opens on the bundled sample scan.
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Open a scan (a file or a folder of TIFF slices) in the workstation window.
    Open(OpenArgs),
    /// Print a scan's dimensions, voxel type and size, placement and intensity statistics.
    Info(info::InfoArgs),
    /// Write a scan, optionally cropped and downsampled, as NIfTI-1 or a folder of TIFF slices.
    Convert(convert::ConvertArgs),
    /// Render a plane (voxel plane, oblique, or thick slab) of a scan to PNG.
    Slice(view::SliceArgs),
    /// Render a 3D view (projection or shaded surface) of a scan to PNG.
    Render(view::View3dArgs),
    /// Write the synthetic sample specimens with their true landmarks.
    Sample(sample::SampleArgs),
    /// Superimpose a landmark table (GPA) into shape coordinates, morphospace and disparity.
    Superimpose(superimpose::SuperimposeArgs),
}

#[derive(Debug, Args)]
struct OpenArgs {
    /// The scan: a `NIfTI` or TIFF file, or a folder of TIFF slices.
    path: PathBuf,
}

/// How to read a scan; shared by every command that opens one.
#[derive(Debug, Args, Clone)]
pub struct ScanArgs {
    /// The scan: a folder of TIFF slices, a TIFF file, or a `NIfTI` file.
    pub scan: PathBuf,

    /// Voxel size for scans that do not record one (TIFF), overriding any resolution tags:
    /// one length for cubic voxels (`12um`), or three for x,y,z (`12um,12um,30um`).
    /// Units: m, mm, um (µm), nm. Recorded in every output.
    #[arg(long, value_name = "LEN[,LEN,LEN]")]
    pub voxel_size: Option<String>,

    /// Hide the progress bar.
    #[arg(long)]
    pub quiet: bool,
}

impl ScanArgs {
    /// The voxel size override in mm, if given.
    fn voxel_size_mm(&self) -> Result<Option<[f64; 3]>> {
        let Some(text) = &self.voxel_size else {
            return Ok(None);
        };
        let parts: Vec<f64> = text
            .split(',')
            .map(parse_length_mm)
            .collect::<Result<_, _>>()
            .with_context(|| format!("--voxel-size {text}"))?;
        match parts.as_slice() {
            [s] => Ok(Some([*s; 3])),
            [x, y, z] => Ok(Some([*x, *y, *z])),
            _ => anyhow::bail!("--voxel-size {text}: give one length or three (x,y,z)"),
        }
    }

    /// Opens the scan with a progress bar on stderr.
    pub fn open(&self) -> Result<Volume> {
        let voxel_size_mm = self.voxel_size_mm()?;
        let options = OpenOptions {
            voxel_size_mm,
            ..OpenOptions::default()
        };
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
        let mut volume = io::open(&self.scan, &options, &progress)?;
        if let Some(b) = &bar {
            b.finish_and_clear();
        }
        if let Some(s) = voxel_size_mm
            && io::detect(&self.scan)? == io::Format::Nifti
        {
            // NIfTI carries its own geometry; the override rescales its axes
            let lin = volume.world_from_voxel().linear();
            let cols = volume.spacing_mm();
            let mut new = lin;
            for a in 0..3 {
                let c = lin.column(a) * (s[a] / cols[a]);
                new.set_column(a, &c);
            }
            let t = volume.world_from_voxel().translation();
            volume.set_world_from_voxel(Affine3::from_linear_translation(&new, &t));
            volume.notes.push(format!(
                "voxel size overridden from the command line: {s:?} mm"
            ));
        }
        Ok(volume)
    }
}

/// Parses the command line, runs it, and maps the outcome to an exit code.
#[must_use]
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("sutura: {}", one_line(&e));
            ExitCode::FAILURE
        }
    }
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
    }
}

/// An error and its causes on one line, outermost first, without repeats.
fn one_line(e: &anyhow::Error) -> String {
    let mut parts: Vec<String> = Vec::new();
    for cause in e.chain() {
        let s = cause.to_string();
        if !parts.iter().any(|p| p.contains(&s)) {
            parts.push(s);
        }
    }
    parts.join(": ").replace('\n', " ")
}
