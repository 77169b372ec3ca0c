//! `sutura export`: a project's landmarks in open formats (columns and layouts in the README).

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use anyhow::Result;
use clap::{Args, ValueEnum};
use std::path::PathBuf;

use super::project::load;
use sutura_core::landmarks::project::points::flatten;

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

    /// The group label written in the `group` column of the CSVs.
    #[arg(long, default_value = "group")]
    group_key: String,

    /// Also export each curve's semilandmarks (named CURVE_s01, CURVE_s02, …).
    #[arg(long)]
    semilandmarks: bool,
}

pub fn run(a: &ExportArgs) -> Result<()> {
    let project = load(&a.project)?;
    let e = flatten(&project, Some(&a.group_key), a.semilandmarks);
    if e.not_digitised > 0 {
        eprintln!(
            "note: {} landmarks are not digitised yet; they are written as missing",
            e.not_digitised
        );
    }
    match a.format {
        ExportFormat::Long => e.table.write_long_csv(&a.output)?,
        ExportFormat::Wide => e.table.write_wide_csv(&a.output)?,
        ExportFormat::Json => e.write_json(&a.output, &project.scheme().id)?,
        ExportFormat::Npy => {
            let index = e.write_npy(&a.output)?;
            eprintln!("wrote {}", index.display());
        }
        ExportFormat::Ply => {
            let files = e.write_ply_sets(&a.output)?;
            eprintln!("wrote {} PLY files", files.len());
        }
    }
    eprintln!(
        "wrote {} ({} observations, {} points each)",
        a.output.display(),
        e.table.observations.len(),
        e.table.landmarks.len()
    );
    Ok(())
}
