//! `sutura measure`: every measurement of a project's scheme, for every specimen and trial.

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use std::fmt::Write as _;

use anyhow::Result;
use clap::Args;
use std::path::PathBuf;

use super::project::load;
use sutura_core::measure::table::{measure_project, write_csv_file};

#[derive(Debug, Args)]
pub struct MeasureArgs {
    /// The project file.
    project: PathBuf,

    /// Write the measurements as CSV (one row per specimen x trial x measurement; columns in
    /// the README) instead of printing a table.
    #[arg(short, long)]
    output: Option<PathBuf>,
}

pub fn run(a: &MeasureArgs) -> Result<()> {
    let mut out = String::new();
    let project = load(&a.project)?;
    let rows = measure_project(&project);
    if let Some(out) = &a.output {
        write_csv_file(out, &project, &rows)?;
        let skipped = rows.iter().filter(|r| r.result.is_err()).count();
        eprintln!(
            "wrote {} ({} values, {skipped} skipped)",
            out.display(),
            rows.len() - skipped
        );
        return Ok(());
    }
    _ = writeln!(
        out,
        "{:<12} {:<5} {:<24} {:>12} {:>10}  unit  note",
        "specimen", "trial", "measurement", "value", "resolution"
    );
    for r in &rows {
        match &r.result {
            Ok(m) => {
                _ = writeln!(
                    out,
                    "{:<12} {:<5} {:<24} {:>12.4} {:>10.4}  {:<4}  {}",
                    r.specimen,
                    r.trial,
                    r.measurement,
                    m.value,
                    m.resolution,
                    r.unit,
                    if r.estimated.is_empty() {
                        String::new()
                    } else {
                        format!("uses estimated {}", r.estimated.join(", "))
                    }
                );
            }
            Err(why) => {
                _ = writeln!(
                    out,
                    "{:<12} {:<5} {:<24} {:>12} {:>10}  {:<4}  skipped: {why}",
                    r.specimen, r.trial, r.measurement, "-", "-", r.unit
                );
            }
        }
    }
    super::emit(&out)
}
