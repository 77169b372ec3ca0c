//! `sutura disparity-through-time`, `sutura rates`, `sutura models`, `sutura ancestral-shapes`:
//! a landmark table or project superimposed ([`sutura_core::analysis`]), then matched to ages or
//! to a tree's tips ([`sutura_core::analysis::evolution`]), with tables and figures written.

#![allow(
    clippy::doc_markdown,
    reason = "clap doc comments are --help text, where backticks would show literally"
)]

use anyhow::{Context, Result, bail};
use clap::Args;
use std::path::{Path, PathBuf};

use sutura_core::analysis::evolution::{
    AgeKeys, BinsSpec, SpecimenLabels, TipData, TipMatch, ancestral_of, models_of, rates_of,
    through_time_of, write_models,
};
use sutura_core::analysis::{Analysis, AnalysisOptions, analyse};
use sutura_core::evolution::Tree;
use sutura_core::evolution::models::ModelOptions;
use sutura_core::evolution::time::TimeOptions;
use sutura_core::export::table::LandmarkTable;

/// The sample and its specimen data; shared by the four commands.
#[derive(Debug, Args)]
pub struct SampleInput {
    /// Landmark table (long CSV: specimen, [trial], landmark, x, y, [z], …) or a Sutura project.
    input: PathBuf,

    /// Specimen data: a CSV with a `specimen` column and any other columns (ages, taxon,
    /// clade, …). Default for a project: its group labels.
    #[arg(long, value_name = "CSV")]
    specimen_data: Option<PathBuf>,

    /// Output folder.
    #[arg(short, long)]
    output: PathBuf,

    /// Seed of every resampling, simulation and permutation.
    #[arg(long, default_value_t = 1)]
    seed: u64,
}

/// Tree options; shared by the tree commands.
#[derive(Debug, Args)]
pub struct TreeInput {
    /// The phylogeny: one Newick tree with branch lengths (e.g. in Myr).
    #[arg(long, value_name = "NEWICK")]
    tree: PathBuf,

    /// Match tips to specimens by this specimen-data column (e.g. `taxon`; several specimens
    /// of a tip are averaged). Default: the tip label is the specimen id.
    #[arg(long, value_name = "COLUMN")]
    tip_label: Option<String>,

    /// Drop tips that have no specimen instead of stopping.
    #[arg(long)]
    prune_tips: bool,
}

/// Superimposes the input (each specimen's first trial) and reads its specimen data.
fn load(s: &SampleInput) -> Result<(Analysis, SpecimenLabels)> {
    let (table, project) = if sutura_core::landmarks::project::is_project_file(&s.input) {
        let project = sutura_core::landmarks::Project::load(&s.input)?;
        let e = sutura_core::landmarks::project::points::flatten(&project, None, false);
        if e.not_digitised > 0 {
            eprintln!(
                "note: {} landmarks are not digitised yet; they are treated as missing",
                e.not_digitised
            );
        }
        (e.table, Some(project))
    } else {
        (LandmarkTable::read_csv(&s.input)?, None)
    };
    let labels = match (&s.specimen_data, &project) {
        (Some(p), _) => SpecimenLabels::read_csv(p)?,
        (None, Some(project)) => {
            SpecimenLabels::from_project(project, &s.input.display().to_string())
        }
        (None, None) => bail!(
            "{}: a landmark table carries no ages, taxa or clades: give --specimen-data CSV",
            s.input.display()
        ),
    };
    let opts = AnalysisOptions {
        seed: s.seed,
        ..AnalysisOptions::default()
    };
    let a = analyse(&table, &opts).with_context(|| s.input.display().to_string())?;
    Ok((a, labels))
}

fn tip_data(a: &Analysis, labels: &SpecimenLabels, t: &TreeInput) -> Result<TipData> {
    let tree = Tree::read(&t.tree)?;
    let by = t
        .tip_label
        .as_ref()
        .map_or(TipMatch::SpecimenId, |k| TipMatch::Label(k.clone()));
    let td = TipData::assemble(a, labels, &tree, &by, t.prune_tips)
        .with_context(|| t.tree.display().to_string())?;
    for n in &td.notes {
        eprintln!("note: {n}");
    }
    Ok(td)
}

fn report(paths: &[PathBuf], out: &Path) {
    eprintln!("wrote {} files in {}", paths.len(), out.display());
}

#[derive(Debug, Args)]
pub struct ThroughTimeArgs {
    #[command(flatten)]
    sample: SampleInput,

    /// Bin edges in Ma, e.g. 140,125,110,95,80 (any order).
    #[arg(long, value_name = "MA,MA,…", value_delimiter = ',', conflicts_with_all = ["bin_count", "bin_names"])]
    bins: Option<Vec<f64>>,

    /// Equal bins over the ages' span.
    #[arg(long, value_name = "N", conflicts_with = "bin_names")]
    bin_count: Option<usize>,

    /// Named bins, oldest first (the ages are bin names).
    #[arg(long, value_name = "NAME,NAME,…", value_delimiter = ',')]
    bin_names: Option<Vec<String>>,

    /// Specimen-data column holding the age: a number (Ma), an interval (83.6-72.1) or a bin
    /// name. Specimens without it use --oldest-column/--youngest-column, then --bin-column.
    #[arg(long, default_value = "age_ma")]
    age_column: String,

    #[arg(long, default_value = "oldest_ma")]
    oldest_column: String,

    #[arg(long, default_value = "youngest_ma")]
    youngest_column: String,

    #[arg(long, default_value = "bin")]
    bin_column: String,

    /// Bootstrap resamples (each also draws interval ages) and permutations.
    #[arg(long, default_value_t = 999)]
    resamples: usize,
}

pub fn run_through_time(a: &ThroughTimeArgs) -> Result<()> {
    let (analysis, labels) = load(&a.sample)?;
    let bins = match (&a.bins, a.bin_count, &a.bin_names) {
        (Some(e), _, _) => BinsSpec::Edges(e.clone()),
        (None, Some(c), _) => BinsSpec::Count(c),
        (None, None, Some(n)) => BinsSpec::Names(n.clone()),
        (None, None, None) => {
            bail!("give the time bins: --bins EDGES, --bin-count N or --bin-names A,B,…")
        }
    };
    let keys = AgeKeys {
        age: a.age_column.clone(),
        oldest: a.oldest_column.clone(),
        youngest: a.youngest_column.clone(),
        bin: a.bin_column.clone(),
    };
    let r = through_time_of(
        &analysis,
        &labels,
        &keys,
        &bins,
        &TimeOptions {
            resamples: a.resamples,
            level: 0.95,
            seed: a.sample.seed,
        },
    )
    .with_context(|| a.sample.input.display().to_string())?;
    for (s, why) in &r.left_out {
        eprintln!("note: {s} left out: {why}");
    }
    for n in &r.result.notes {
        eprintln!("note: {n}");
    }
    let mut paths = r.write_tables(&a.sample.output)?;
    paths.extend(r.write_figures(&a.sample.output)?);
    for b in &r.result.bins {
        let pv = &b.metrics[0];
        eprintln!(
            "{:<16} n {:>3}  Procrustes variance {:.6} [{:.6}, {:.6}]  rarefied to {}: {:.6}",
            b.bin.label,
            b.n,
            pv.estimate,
            pv.boot_lower,
            pv.boot_upper,
            r.result.rarefied_to,
            pv.rarefied
        );
    }
    report(&paths, &a.sample.output);
    Ok(())
}

#[derive(Debug, Args)]
pub struct RatesArgs {
    #[command(flatten)]
    sample: SampleInput,

    #[command(flatten)]
    tree: TreeInput,

    /// Compare σ²mult between the groups of this specimen-data column (clades, or intervals).
    #[arg(long, value_name = "COLUMN")]
    compare: Option<String>,

    /// Brownian simulations for the p-value of the rate ratio.
    #[arg(long, default_value_t = 999)]
    simulations: usize,

    /// Permutations for the p-value of Kmult.
    #[arg(long, default_value_t = 999)]
    permutations: usize,
}

pub fn run_rates(a: &RatesArgs) -> Result<()> {
    let (analysis, labels) = load(&a.sample)?;
    let td = tip_data(&analysis, &labels, &a.tree)?;
    let r = rates_of(
        &analysis,
        &labels,
        &td,
        a.compare.as_deref(),
        a.simulations,
        a.permutations,
        a.sample.seed,
    )?;
    let paths = r.write_tables(&a.sample.output)?;
    eprintln!(
        "σ²mult {:.6e} over {} tips ({} dimensions)",
        r.sigma_mult, r.tips, r.dimensions
    );
    if let Some(c) = &r.comparison {
        for g in &c.groups {
            eprintln!(
                "  {:<16} {:>3} tips  σ²mult {:.6e}",
                g.group, g.tips, g.sigma_mult
            );
        }
        eprintln!(
            "  largest/smallest {:.3}, p = {:.4} ({} simulations)",
            c.ratio, c.p_value, c.simulations
        );
    }
    eprintln!(
        "Kmult {:.4}, p = {:.4} ({} permutations)",
        r.k_mult.k_mult, r.k_mult.p_value, r.k_mult.permutations
    );
    report(&paths, &a.sample.output);
    Ok(())
}

#[derive(Debug, Args)]
pub struct ModelsArgs {
    #[command(flatten)]
    sample: SampleInput,

    #[command(flatten)]
    tree: TreeInput,
}

pub fn run_models(a: &ModelsArgs) -> Result<()> {
    let (analysis, labels) = load(&a.sample)?;
    let td = tip_data(&analysis, &labels, &a.tree)?;
    let m = models_of(&td, &ModelOptions::default())?;
    let paths = write_models(&m, &td.notes, &a.sample.output)?;
    eprintln!(
        "{} tips, {} shape dimensions in {} pairs (composite likelihood adjustment c = {:.2})",
        m.tips, m.dimensions, m.pairs, m.adjustment
    );
    for f in &m.fits {
        let param = match f.parameter {
            Some(e) => format!(
                "  {} {:.4} [{:.4}, {:.4}]",
                if f.half_life.is_some() { "alpha" } else { "r" },
                e.value,
                e.lower,
                e.upper
            ),
            None => String::new(),
        };
        eprintln!(
            "  {:<20} AICc {:>12.2}  ΔAICc {:>8.2}  weight {:.3}  σ² {:.4e}{param}",
            f.model.name(),
            f.aicc,
            f.delta_aicc,
            f.weight,
            f.rate.value
        );
    }
    eprintln!("best: {}", m.best.name());
    report(&paths, &a.sample.output);
    Ok(())
}

#[derive(Debug, Args)]
pub struct AncestralArgs {
    #[command(flatten)]
    sample: SampleInput,

    #[command(flatten)]
    tree: TreeInput,

    /// Colour the tips in the figure by this specimen-data column.
    #[arg(long, value_name = "COLUMN")]
    colour_by: Option<String>,
}

pub fn run_ancestral(a: &AncestralArgs) -> Result<()> {
    let (analysis, labels) = load(&a.sample)?;
    let td = tip_data(&analysis, &labels, &a.tree)?;
    let r = ancestral_of(&analysis, &labels, &td, a.colour_by.as_deref())?;
    let mut paths = r.write_tables(&td.tree, &analysis.landmarks, &a.sample.output)?;
    paths.extend(r.write_figures(&td.tree, &a.sample.output)?);
    eprintln!("{} ancestral shapes (root first)", r.configs.len());
    report(&paths, &a.sample.output);
    Ok(())
}

#[derive(Debug, Args)]
pub struct MeasurementErrorArgs {
    /// The project (its trials by two or more operators).
    project: PathBuf,

    /// Output folder.
    #[arg(short, long)]
    output: PathBuf,
}

pub fn run_measurement_error(a: &MeasurementErrorArgs) -> Result<()> {
    let project = sutura_core::landmarks::Project::load(&a.project)?;
    let Some(r) =
        sutura_core::analysis::operators::operator_error(&project, &AnalysisOptions::default())
            .with_context(|| a.project.display().to_string())?
    else {
        bail!(
            "{}: every trial is by one operator; the operator ANOVA needs two or more (`sutura superimpose` gives the one-way measurement error)",
            a.project.display()
        );
    };
    for n in &r.notes {
        eprintln!("note: {n}");
    }
    for (name, e) in &r.measurements {
        if let Err(e) = e {
            eprintln!("note: {name}: no operator ANOVA: {e}");
        }
    }
    let paths = r.write_tables(&a.output)?;
    for (name, t) in r.tables() {
        let share = t.components.map_or_else(
            || "shares need a balanced design".to_owned(),
            |c| {
                format!(
                    "inter-operator {:.1}%, intra-operator {:.1}%",
                    100.0 * c.inter_operator_share,
                    100.0 * c.intra_operator_share
                )
            },
        );
        let op = t
            .term("operator")
            .expect("every table has an operator term");
        eprintln!(
            "{name:<24} operator F {:.3}, p {:.4}; {share}",
            op.f.unwrap_or(f64::NAN),
            op.p.unwrap_or(f64::NAN)
        );
    }
    report(&paths, &a.output);
    Ok(())
}
