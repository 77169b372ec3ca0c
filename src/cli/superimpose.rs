//! `sutura superimpose`: generalized Procrustes analysis of a landmark table or a project, with
//! the morphospace, disparity, distances and measurement error ([`sutura_core::analysis`]), written as
//! CSV/JSON/NPY and charts.

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};
use std::path::PathBuf;

use sutura_core::analysis::project::project_input;
use sutura_core::analysis::{
    AnalysisOptions, ProjectAnalysisOptions, Sliding, TrialChoice, analyse_sliding,
};
use sutura_core::export::table::LandmarkTable;
use sutura_core::shape::missing::MissingMethod;
use sutura_core::shape::sliding::{Curve, SlideCriterion};
use sutura_core::shape::{Fit, GpaOptions};

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

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum SlideArg {
    /// Minimise the thin-plate bending energy from the mean shape onto each specimen.
    BendingEnergy,
    /// Minimise each specimen's Procrustes distance to the mean shape.
    ProcrustesDistance,
}

#[derive(Debug, Args)]
pub struct SuperimposeArgs {
    /// Landmark table, long CSV: specimen, [trial], landmark, x, y, [z], [state], [group];
    /// or a Sutura project file (its landmarks; those not digitised count as missing).
    table: PathBuf,

    /// With a project: the group key whose values are the groups compared (default: the
    /// project's first group key, if any).
    #[arg(long, value_name = "KEY")]
    group_by: Option<String>,

    /// With a project: which trial of each specimen is analysed: first, latest, or a trial id
    /// (specimens without it use their first). Measurement error always uses every trial.
    #[arg(long, value_name = "first|latest|ID", default_value = "first")]
    trial: String,

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

    /// With a project: include its curves' semilandmarks and slide them along their curves
    /// (anchors fixed), by this criterion, before the analysis. Without it, curves are left out.
    #[arg(long, value_enum)]
    slide_curves: Option<SlideArg>,
}

impl SuperimposeArgs {
    fn options(&self) -> AnalysisOptions {
        AnalysisOptions {
            gpa: GpaOptions {
                fit: match self.fit {
                    FitArg::Partial => Fit::Partial,
                    FitArg::Full => Fit::Full,
                },
                tolerance: self.tolerance,
                ..GpaOptions::default()
            },
            fill: match self.fill {
                FillArg::Tps => MissingMethod::ThinPlateSpline,
                FillArg::Regression => MissingMethod::Regression { ridge: 0.0 },
            },
            resamples: self.resamples,
            seed: self.seed,
        }
    }

    fn slide(&self) -> Option<SlideCriterion> {
        self.slide_curves.map(|c| match c {
            SlideArg::BendingEnergy => SlideCriterion::BendingEnergy,
            SlideArg::ProcrustesDistance => SlideCriterion::ProcrustesDistance,
        })
    }
}

/// Reads the input: a project file (by its content) or a long CSV; with `--slide-curves`,
/// also the project's sliding curves.
fn read_input(a: &SuperimposeArgs) -> Result<(LandmarkTable, Vec<Curve>)> {
    if !sutura_core::landmarks::project::is_project_file(&a.table) {
        if a.slide_curves.is_some() {
            bail!(
                "{}: --slide-curves needs a project (a landmark table does not say which points form curves)",
                a.table.display()
            );
        }
        return Ok((LandmarkTable::read_csv(&a.table)?, Vec::new()));
    }
    let project = sutura_core::landmarks::Project::load(&a.table)?;
    let defaults = ProjectAnalysisOptions::for_project(&project);
    let opts = ProjectAnalysisOptions {
        analysis: a.options(),
        group_by: a.group_by.clone().or(defaults.group_by),
        slide: a.slide(),
        trial: match a.trial.as_str() {
            "first" => TrialChoice::First,
            "latest" => TrialChoice::Latest,
            id => TrialChoice::Named(id.to_owned()),
        },
    };
    let input = project_input(&project, &opts).with_context(|| a.table.display().to_string())?;
    if input.not_digitised > 0 {
        eprintln!(
            "note: {} landmarks are not digitised yet; they are treated as missing",
            input.not_digitised
        );
    }
    Ok((input.table, input.curves))
}

pub fn run(a: &SuperimposeArgs) -> Result<()> {
    let (table, curves) = read_input(a)?;
    let opts = a.options();
    let sliding = a.slide().map(|criterion| Sliding {
        curves: &curves,
        criterion,
    });
    let analysis =
        analyse_sliding(&table, &opts, sliding).with_context(|| a.table.display().to_string())?;
    analysis.write_tables(&a.output, &a.table.display().to_string())?;
    analysis.write_figures(&a.output)?;
    let g = &analysis.gpa;
    if let Some(s) = &analysis.sliding {
        eprintln!(
            "slid {} semilandmarks on {} curves in {} rounds (converged: {})",
            s.semilandmarks, s.curves, s.iterations, s.converged
        );
    }
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
