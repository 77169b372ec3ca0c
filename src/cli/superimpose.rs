//! `sutura superimpose`: generalized Procrustes analysis of a landmark table or a project, with
//! the morphospace, disparity, distances and measurement error ([`crate::analysis`]), written as
//! CSV/JSON/NPY and charts.

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};
use std::path::PathBuf;

use crate::analysis::{AnalysisOptions, analyse};
use crate::export::table::LandmarkTable;
use crate::shape::missing::MissingMethod;
use crate::shape::{Fit, GpaOptions};

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum FitArg {
    /// Partial Procrustes: unit centroid size, rotation only (the usual choice for tangent-space statistics).
    Partial,
    /// Full Procrustes: each specimen also scaled to fit the mean.
    Full,
}

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum FillArg {
    /// Thin-plate spline from the mean of the complete specimens.
    Tps,
    /// Multivariate regression on the present landmarks across complete specimens.
    Regression,
}

#[derive(Debug, Args)]
pub struct SuperimposeArgs {
    /// Landmark table, long CSV: specimen, [trial], landmark, x, y, [z], [state], [group];
    /// or a Sutura project file (its landmarks; those not digitised count as missing).
    table: PathBuf,

    /// With a project: the group label that names the groups compared.
    #[arg(long, default_value = "group")]
    group_key: String,

    /// Output folder.
    #[arg(short, long)]
    output: PathBuf,

    /// Procrustes fit.
    #[arg(long, value_enum, default_value = "partial")]
    fit: FitArg,

    /// How missing landmarks are estimated before superimposition.
    #[arg(long, value_enum, default_value = "tps")]
    fill: FillArg,

    /// Convergence tolerance: change of the mean shape (Frobenius norm) between iterations.
    #[arg(long, default_value_t = 1e-10)]
    tolerance: f64,

    /// Bootstrap resamples for disparity intervals and permutations for tests.
    #[arg(long, default_value_t = 999)]
    resamples: usize,

    /// Seed of the resampling, for reproducible intervals.
    #[arg(long, default_value_t = 1)]
    seed: u64,
}

/// Reads the input: a project file (JSON, starts with `{`) or a long CSV.
fn read_input(a: &SuperimposeArgs) -> Result<LandmarkTable> {
    let mut head = [0u8; 64];
    let n = {
        use std::io::Read;
        std::fs::File::open(&a.table)
            .and_then(|mut f| f.read(&mut head))
            .with_context(|| a.table.display().to_string())?
    };
    if head[..n].iter().find(|b| !b.is_ascii_whitespace()) != Some(&b'{') {
        return Ok(LandmarkTable::read_csv(&a.table)?);
    }
    let project = crate::landmarks::Project::load(&a.table)?;
    let e = crate::landmarks::project::points::flatten(&project, Some(&a.group_key), false);
    if e.not_digitised > 0 {
        eprintln!(
            "note: {} landmarks are not digitised yet; they are treated as missing",
            e.not_digitised
        );
    }
    if e.table.observations.is_empty() {
        bail!("{}: no trials to superimpose", a.table.display());
    }
    Ok(e.table)
}

pub fn run(a: &SuperimposeArgs) -> Result<()> {
    let table = read_input(a)?;
    let opts = AnalysisOptions {
        gpa: GpaOptions {
            fit: match a.fit {
                FitArg::Partial => Fit::Partial,
                FitArg::Full => Fit::Full,
            },
            tolerance: a.tolerance,
            ..GpaOptions::default()
        },
        fill: match a.fill {
            FillArg::Tps => MissingMethod::ThinPlateSpline,
            FillArg::Regression => MissingMethod::Regression { ridge: 0.0 },
        },
        resamples: a.resamples,
        seed: a.seed,
    };
    let analysis = analyse(&table, &opts).with_context(|| a.table.display().to_string())?;
    analysis.write_tables(&a.output, &a.table.display().to_string())?;
    analysis.write_figures(&a.output)?;
    let g = &analysis.gpa;
    eprintln!(
        "superimposed {} specimens x {} landmarks in {} iterations (converged: {}); results in {}",
        analysis.n(),
        analysis.landmarks.len(),
        g.iterations,
        g.converged,
        a.output.display()
    );
    Ok(())
}
