//! `sutura export`: a project's landmarks in open formats (columns and layouts in the README).

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use anyhow::Result;
use clap::{Args, ValueEnum};
use std::path::PathBuf;

use super::project::load;
use sutura_core::analysis::{ExportKind, ExportSource, write_export};

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum ExportFormat {
    /// CSV, one row per specimen x trial x landmark: specimen, trial, group, landmark, x, y, z, state.
    Long,
    /// CSV, one row per specimen x trial: specimen, trial, group, LM_x, LM_y, LM_z, ….
    Wide,
    /// JSON with operators, group labels, states and positions.
    Json,
    /// NumPy .npy (observations x points x 3, NaN where missing) and NAME.index.json.
    Npy,
    /// A folder of PLY point sets, one SPECIMEN_TRIAL.ply per trial.
    Ply,
}

#[derive(Debug, Args)]
pub struct ExportArgs {
    /// The project file.
    project: PathBuf,

    /// What to write.
    #[arg(long, value_enum)]
    format: ExportFormat,

    /// Output file (a folder for ply).
    #[arg(short, long)]
    output: PathBuf,

    /// The group key whose values fill the `group` column of the CSVs (default: the
    /// project's first group key, if any).
    #[arg(long, value_name = "KEY")]
    group_by: Option<String>,

    /// Also export each curve's semilandmarks (named CURVE_s01, CURVE_s02, …).
    #[arg(long)]
    semilandmarks: bool,
}

pub fn run(a: &ExportArgs) -> Result<()> {
    let project = load(&a.project)?;
    let group_by = a.group_by.clone().or_else(|| {
        sutura_core::measure::table::group_keys(&project)
            .into_iter()
            .next()
    });
    let kind = match a.format {
        ExportFormat::Long => ExportKind::LongCsv,
        ExportFormat::Wide => ExportKind::WideCsv,
        ExportFormat::Json => ExportKind::Json,
        ExportFormat::Npy => ExportKind::Npy,
        ExportFormat::Ply => ExportKind::Ply,
    };
    let out = write_export(
        kind,
        &a.output,
        &ExportSource {
            project: &project,
            project_file: &a.project,
            group_by: group_by.as_deref(),
            semilandmarks: a.semilandmarks,
            analysis: None,
        },
    )?;
    if out.not_digitised > 0 {
        eprintln!(
            "note: {} landmarks are not digitised yet; they are written as missing",
            out.not_digitised
        );
    }
    eprintln!("{}", out.describe());
    Ok(())
}
