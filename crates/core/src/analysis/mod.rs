//! A whole-sample shape analysis: the pipeline behind `sutura superimpose` and the
//! workstation's analysis view, so both show the same numbers.
//!
//! From a [`LandmarkTable`] (a landmark CSV, or a project flattened by
//! `landmarks::project::points::flatten`): one observation per specimen (its first trial),
//! missing landmarks estimated, generalized Procrustes superimposition, tangent coordinates,
//! optionally semilandmarks slid along their curves ([`analyse_sliding`]),
//! PCA, disparity per group with bootstrap intervals, partial disparity, a permutation test of
//! two groups' disparity, Procrustes distances, allometry, and, where specimens were digitised
//! more than once, measurement error by Procrustes ANOVA over all trials.
//!
//! [`Analysis::write_tables`] and [`Analysis::write_figures`] ([`output`]) write every output
//! in open formats (CSV, JSON, `.npy`, SVG, PNG); the README documents each column.
//!
//! **What it cannot produce, it says.** Only the core can fail the analysis: too few
//! specimens, missing landmarks that cannot be estimated, the superimposition (and sliding)
//! itself. Every later step is optional: when one cannot be computed on this sample (regression
//! on size when all centroid sizes are equal, a group's disparity with one specimen, a figure
//! of principal components when the shapes do not vary) the analysis goes on, and
//! [`Analysis::report`] lists each output left out with its reason, for `summary.json`, the
//! command line's stderr and the workstation. Errors about one specimen name it by its id.
//!
//! Depends on `shape`, `export`, `chart` and `render::png`. Knows nothing of volumes and must
//! not import `gui` or `cli`.

pub mod checks;
pub mod evolution;
pub mod exports;
pub mod operators;
mod output;
pub mod project;

pub use exports::{ExportKind, ExportSource, Exported, write_export, write_export_into};
pub use project::{ProjectAnalysisOptions, TrialChoice, analyse_project};

pub use output::PlannedFigure;

use nalgebra::{DMatrix, DVector};
use std::collections::{BTreeMap, HashSet};

use crate::export::ExportError;
use crate::export::table::{LandmarkTable, Observation, State};
use crate::shape::anova::{self, AnovaError, ProcrustesAnova};
use crate::shape::disparity::{self, Divisor, Interval, PermutationTest};
use crate::shape::distance::{Distance, distance_matrix};
use crate::shape::missing::{MissingError, MissingMethod, MissingOptions, estimate_missing};
use crate::shape::pca::{Allometry, Pca};
use crate::shape::sliding::{
    Curve, SlideCriterion, SlideOptions, SlideProcedureError, SlidingError, slide_semilandmarks,
};
use crate::shape::{Gpa, GpaOptions, Sample, ShapeError, gpa, pca, tangent};

/// Why an analysis cannot be run or written.
#[derive(Debug, thiserror::Error)]
pub enum AnalysisError {
    #[error("{0} specimens; a superimposition needs at least 3")]
    TooFewSpecimens(usize),
    #[error(transparent)]
    Shape(#[from] ShapeError),
    #[error("estimating missing landmarks: {0}")]
    Missing(#[from] MissingError),
    #[error("measurement error: {0}")]
    Anova(#[from] AnovaError),
    #[error("sliding semilandmarks: {0}")]
    Sliding(#[from] SlideProcedureError),
    #[error(transparent)]
    Export(#[from] ExportError),
    #[error(transparent)]
    Render(#[from] crate::render::RenderError),
    #[error(transparent)]
    Chart(#[from] crate::chart::ChartError),
    #[error(transparent)]
    Evolution(crate::evolution::EvolutionError),
    /// A fault of one specimen, named by its id (and trial where it has several).
    #[error("specimen {specimen}: {what}")]
    Specimen { specimen: String, what: String },
}

impl AnalysisError {
    /// The error with a specimen index in it rewritten to name that specimen by `names[i]`.
    fn naming(self, names: &[String]) -> Self {
        let indexed = match &self {
            Self::Shape(e)
            | Self::Missing(MissingError::Shape(e))
            | Self::Sliding(SlideProcedureError::Shape(e)) => shape_index(e),
            Self::Missing(
                MissingError::TooFewPresent { specimen, .. } | MissingError::Tps { specimen, .. },
            )
            | Self::Sliding(SlideProcedureError::Sliding(
                SlidingError::NoTangent { specimen, .. } | SlidingError::ZeroSize(specimen),
            )) => Some(*specimen),
            _ => None,
        };
        let Some(i) = indexed.filter(|&i| i < names.len()) else {
            return self;
        };
        let text = self.to_string();
        // the inner messages read "specimen {i}: …" or "specimen {i}, landmark …: …"; keep
        // what follows the index
        let tag = format!("specimen {i}");
        let what = text
            .match_indices(&tag)
            .map(|(at, _)| &text[at + tag.len()..])
            .find(|rest| rest.starts_with([':', ',']))
            .map_or(text.as_str(), |rest| {
                rest.trim_start_matches([':', ',']).trim_start()
            });
        let what = match &self {
            Self::Missing(_) => format!("estimating missing landmarks: {what}"),
            Self::Sliding(_) => format!("sliding semilandmarks: {what}"),
            _ => what.to_owned(),
        };
        Self::Specimen {
            specimen: names[i].clone(),
            what,
        }
    }
}

fn shape_index(e: &ShapeError) -> Option<usize> {
    match e {
        ShapeError::ZeroSize(i) | ShapeError::TooLarge(i) | ShapeError::FullFitCollapse(i) => {
            Some(*i)
        }
        ShapeError::NonFinite { specimen, .. } => Some(*specimen),
        _ => None,
    }
}

/// An output the analysis could not produce, and why.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct Omission {
    /// The result or file left out (`allometry`, `pc1_shapes.png/.svg`, …).
    pub output: String,
    /// Why, in a sentence about this sample.
    pub reason: String,
}

impl Omission {
    fn new(output: impl Into<String>, reason: impl Into<String>) -> Self {
        Self {
            output: output.into(),
            reason: reason.into(),
        }
    }
}

/// What an analysis left out and what it changed to produce a result: the list
/// `summary.json`, the command line and the workstation show.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct Report {
    /// Outputs not produced, with the reason.
    pub not_produced: Vec<Omission>,
    /// Outputs produced differently than usual, and how (e.g. a figure's excursion scaled).
    pub notes: Vec<String>,
}

/// How to run the analysis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct AnalysisOptions {
    /// Procrustes fit and convergence.
    pub gpa: GpaOptions,
    /// How missing landmarks are estimated before superimposition.
    pub fill: MissingMethod,
    /// Bootstrap resamples for disparity intervals, permutations for the tests.
    pub resamples: usize,
    /// Seed of the resampling, for reproducible intervals.
    pub seed: u64,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        Self {
            gpa: GpaOptions::default(),
            fill: MissingMethod::ThinPlateSpline,
            resamples: 999,
            seed: 1,
        }
    }
}

/// Semilandmarks to slide along their curves before the analysis: each curve's first and last
/// entries (landmark indices of the table) stay fixed, the ones between slide.
#[derive(Clone, Copy, Debug)]
pub struct Sliding<'a> {
    pub curves: &'a [Curve],
    pub criterion: SlideCriterion,
}

/// How the sliding went, for the summary.
#[derive(Clone, Copy, Debug, serde::Serialize)]
pub struct SlidingSummary {
    pub criterion: SlideCriterion,
    pub curves: usize,
    pub semilandmarks: usize,
    /// Slide + superimposition rounds.
    pub iterations: usize,
    pub converged: bool,
    /// Partial Procrustes distance between the last two mean shapes.
    pub final_change: f64,
}

/// Disparity of one group.
#[derive(Clone, Debug)]
pub struct GroupDisparity {
    pub group: String,
    pub n: usize,
    /// Σ squared Procrustes distances to the group mean / (n − 1).
    pub procrustes_variance: f64,
    /// Percentile bootstrap interval (95 %) of the Procrustes variance.
    pub interval: Interval,
    pub sum_of_variances: f64,
    /// Distances to the grand mean / (N − 1); sums to the total over groups.
    pub partial: f64,
    pub partial_share: f64,
    /// Why a figure of this row is missing (NaN), e.g. the disparity of a group of one.
    pub note: Option<String>,
}

/// Everything the analysis computed, in the order of [`Analysis::observations`].
#[derive(Clone, Debug)]
pub struct Analysis {
    pub landmarks: Vec<String>,
    /// 2 or 3.
    pub dim: usize,
    /// The observation used for each specimen (its first trial), as read.
    pub observations: Vec<Observation>,
    /// Each observation's group (`"all"` where it has none).
    pub groups: Vec<String>,
    /// `estimated[s * k + l]`: landmark `l` of specimen `s` was missing and estimated.
    pub estimated: Vec<bool>,
    pub gpa: Gpa,
    /// Tangent coordinates, one row per specimen.
    pub tangent: DMatrix<f64>,
    pub pca: Pca,
    /// Per group, in label order.
    pub disparity: Vec<GroupDisparity>,
    pub total_variance: f64,
    /// Permutation test of the difference in disparity, when there are exactly two groups.
    pub group_test: Option<PermutationTest>,
    /// Procrustes angles ρ (radians) between specimens (`None`: see [`Self::omitted`]).
    pub distances: Option<DMatrix<f64>>,
    /// Regression of shape on size (`None`: see [`Self::omitted`]).
    pub allometry: Option<Allometry>,
    /// Over all trials, when some specimen was digitised more than once (and the ANOVA could
    /// be computed: else see [`Self::omitted`]).
    pub measurement_error: Option<ProcrustesAnova>,
    /// The optional steps that could not be computed on this sample, with the reason. The
    /// figures' omissions are added by [`Self::report`].
    pub omitted: Vec<Omission>,
    /// When semilandmarks were slid before the superimposition.
    pub sliding: Option<SlidingSummary>,
    pub options: AnalysisOptions,
}

/// One observation per specimen: the first trial listed.
fn first_trials(t: &LandmarkTable) -> Vec<usize> {
    let mut seen = HashSet::new();
    (0..t.observations.len())
        .filter(|&i| seen.insert(t.observations[i].specimen.clone()))
        .collect()
}

/// The observations at `idx` as a sample, missing landmarks estimated (and flagged).
fn to_sample(
    t: &LandmarkTable,
    idx: &[usize],
    opts: &AnalysisOptions,
) -> Result<(Sample, Vec<bool>), AnalysisError> {
    let (k, m) = (t.landmarks.len(), t.dim);
    let mut data = Vec::with_capacity(idx.len() * k * m);
    let mut missing = Vec::with_capacity(idx.len() * k);
    for &i in idx {
        for c in &t.observations[i].coords {
            missing.push(c.is_none());
            data.extend_from_slice(&c.unwrap_or([0.0; 3])[..m]);
        }
    }
    let sample = Sample::new(idx.len(), k, m, data)?;
    if !missing.iter().any(|&b| b) {
        return Ok((sample, missing));
    }
    let filled = estimate_missing(
        &sample,
        &missing,
        &MissingOptions {
            method: opts.fill,
            gpa: opts.gpa,
        },
    )?;
    Ok((filled.sample, filled.estimated))
}

/// Slides `sample`'s semilandmarks (after missing ones were estimated) with the analysis's
/// superimposition between rounds; returns the slid sample and its GPA.
fn slide(
    sample: &Sample,
    sliding: &Sliding<'_>,
    opts: &AnalysisOptions,
) -> Result<(Sample, Gpa, SlidingSummary), AnalysisError> {
    let slid = slide_semilandmarks(
        sample,
        sliding.curves,
        &SlideOptions {
            criterion: sliding.criterion,
            gpa: opts.gpa,
            ..SlideOptions::default()
        },
    )?;
    let summary = SlidingSummary {
        criterion: sliding.criterion,
        curves: sliding.curves.len(),
        semilandmarks: sliding
            .curves
            .iter()
            .map(|c| c.landmarks.len().saturating_sub(2))
            .sum(),
        iterations: slid.iterations,
        converged: slid.converged,
        final_change: slid.final_change,
    };
    Ok((slid.sample, slid.gpa, summary))
}

/// Runs the whole analysis on a landmark table.
pub fn analyse(table: &LandmarkTable, opts: &AnalysisOptions) -> Result<Analysis, AnalysisError> {
    analyse_sliding(table, opts, None)
}

/// [`analyse`], with the semilandmarks of `sliding` slid along their curves first (alternating
/// with the superimposition until the mean shape settles), in the analysed sample and in the
/// measurement-error sample alike.
pub fn analyse_sliding(
    table: &LandmarkTable,
    opts: &AnalysisOptions,
    sliding: Option<Sliding<'_>>,
) -> Result<Analysis, AnalysisError> {
    let idx = first_trials(table);
    if idx.len() < 3 {
        return Err(AnalysisError::TooFewSpecimens(idx.len()));
    }
    let names: Vec<String> = idx
        .iter()
        .map(|&i| table.observations[i].specimen.clone())
        .collect();
    let (sample, estimated) = to_sample(table, &idx, opts).map_err(|e| e.naming(&names))?;
    let (g, sliding_summary) = match &sliding {
        None => (
            gpa(&sample, &opts.gpa).map_err(|e| AnalysisError::from(e).naming(&names))?,
            None,
        ),
        Some(s) => {
            let (_, g, summary) = slide(&sample, s, opts).map_err(|e| e.naming(&names))?;
            (g, Some(summary))
        }
    };
    let observations: Vec<Observation> =
        idx.iter().map(|&i| table.observations[i].clone()).collect();
    let groups: Vec<String> = observations
        .iter()
        .map(|o| o.group.clone().unwrap_or_else(|| "all".into()))
        .collect();

    let tan = tangent::tangent_coordinates(&g);
    let mut omitted = Vec::new();
    // Shapes of unit size that differ only by rounding (the same shape in other poses) have
    // tangent coordinates about 1e-16 apart: a standard deviation under 1e-12 is no variation.
    let floor = if g.scaled { 1e-24 } else { 0.0 };
    let (p, no_variation) = match pca::pca_above(&tan, floor) {
        Ok(p) => {
            let none = p.variances.is_empty();
            (p, none)
        }
        Err(e) => {
            omitted.push(Omission::new(
                "principal components (pc_scores.csv, pc_variance.csv, pc_loadings.csv)",
                e.to_string(),
            ));
            (no_components(tan.nrows(), tan.ncols()), false)
        }
    };
    let (disp, total_variance) = group_disparities(&tan, &groups, opts, &mut omitted);
    let group_test = group_test(&tan, &groups, opts, &mut omitted);
    let distances = distance_matrix(&g.aligned, Distance::Angle)
        .map_err(|e| {
            omitted.push(Omission::new(
                "procrustes_distances.csv",
                AnalysisError::from(e).naming(&names).to_string(),
            ));
        })
        .ok();
    let allometry = if no_variation {
        omitted.push(Omission::new(
            "allometry",
            "no shape variation: every specimen has the same shape, so there is nothing to regress on size",
        ));
        None
    } else {
        allometry(&tan, &g, opts, &mut omitted)
    };
    let measurement_error = match measurement_error(table, opts, sliding.as_ref()) {
        Ok(me) => me,
        Err(e) => {
            omitted.push(Omission::new(
                "measurement error (anova.csv)",
                e.to_string(),
            ));
            None
        }
    };
    Ok(Analysis {
        landmarks: table.landmarks.clone(),
        dim: table.dim,
        observations,
        groups,
        estimated,
        gpa: g,
        tangent: tan,
        pca: p,
        disparity: disp,
        total_variance,
        group_test,
        distances,
        allometry,
        measurement_error,
        omitted,
        sliding: sliding_summary,
        options: *opts,
    })
}

/// A principal component analysis with no components, for a sample whose PCA failed.
fn no_components(n: usize, p: usize) -> Pca {
    Pca {
        center: DVector::zeros(p),
        loadings: DMatrix::zeros(p, 0),
        variances: Vec::new(),
        proportions: Vec::new(),
        scores: DMatrix::zeros(n, 0),
        total_variance: 0.0,
    }
}

/// Disparity of every group (a group of one gets NaN and a note: its variance is undefined)
/// and the total Procrustes variance.
fn group_disparities(
    tan: &DMatrix<f64>,
    groups: &[String],
    opts: &AnalysisOptions,
    omitted: &mut Vec<Omission>,
) -> (Vec<GroupDisparity>, f64) {
    let (partials, total_variance) = match disparity::partial_disparity(tan, groups) {
        Ok((p, t)) => (p.into_iter().map(|d| (d.partial, d.share)).collect(), t),
        Err(e) => {
            omitted.push(Omission::new(
                "partial disparity and total Procrustes variance",
                e.to_string(),
            ));
            (Vec::new(), f64::NAN)
        }
    };
    let mut out = Vec::new();
    for (gi, (label, idx)) in disparity::group_indices(groups).into_iter().enumerate() {
        let (partial, partial_share) = partials.get(gi).copied().unwrap_or((f64::NAN, f64::NAN));
        let undefined = Interval {
            estimate: f64::NAN,
            resample_mean: f64::NAN,
            lower: f64::NAN,
            upper: f64::NAN,
            level: 0.95,
            resamples: 0,
        };
        let computed =
            disparity::procrustes_variance(tan, &idx, Divisor::NMinusOne).and_then(|pv| {
                let sv = disparity::sum_of_variances(tan, &idx)?;
                let interval = disparity::bootstrap(
                    tan,
                    &idx,
                    Divisor::NMinusOne,
                    opts.resamples,
                    0.95,
                    opts.seed,
                )?;
                Ok((pv, sv, interval))
            });
        let (procrustes_variance, sum_of_variances, interval, note) = match computed {
            Ok((pv, sv, interval)) => (pv, sv, interval, None),
            Err(e) => {
                let why = if idx.len() < 2 {
                    format!(
                        "undefined for a group of {} specimen (a variance needs at least 2)",
                        idx.len()
                    )
                } else {
                    e.to_string()
                };
                omitted.push(Omission::new(
                    format!("disparity of group {label}"),
                    why.clone(),
                ));
                (f64::NAN, f64::NAN, undefined, Some(why))
            }
        };
        out.push(GroupDisparity {
            group: label,
            n: idx.len(),
            procrustes_variance,
            interval,
            sum_of_variances,
            partial,
            partial_share,
            note,
        });
    }
    (out, total_variance)
}

/// The permutation test of two groups' disparity: with exactly two groups of two or more.
fn group_test(
    tan: &DMatrix<f64>,
    groups: &[String],
    opts: &AnalysisOptions,
    omitted: &mut Vec<Omission>,
) -> Option<PermutationTest> {
    let gi = disparity::group_indices(groups);
    if gi.len() != 2 {
        return None;
    }
    let mut it = gi.iter();
    let ((n1, g1), (n2, g2)) = (it.next()?, it.next()?);
    let result =
        disparity::permutation_test(tan, g1, g2, Divisor::NMinusOne, opts.resamples, opts.seed);
    match result {
        Ok(t) => Some(t),
        Err(e) => {
            let why = if g1.len() < 2 || g2.len() < 2 {
                format!(
                    "groups {n1} ({}) and {n2} ({}): each needs at least 2 specimens",
                    g1.len(),
                    g2.len()
                )
            } else {
                e.to_string()
            };
            omitted.push(Omission::new("group difference test", why));
            None
        }
    }
}

/// Regression of shape on log centroid size, or why it cannot be run.
fn allometry(
    tan: &DMatrix<f64>,
    g: &Gpa,
    opts: &AnalysisOptions,
    omitted: &mut Vec<Omission>,
) -> Option<Allometry> {
    let cs = &g.centroid_sizes;
    let (lo, hi) = cs
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &c| {
            (l.min(c), h.max(c))
        });
    #[allow(
        clippy::float_cmp,
        reason = "equal sizes leave no variance to regress on"
    )]
    let why = if lo == hi {
        Some(format!(
            "all centroid sizes are equal ({} mm), so shape cannot be regressed on size",
            crate::export::num(lo)
        ))
    } else {
        None
    };
    let result = match why {
        Some(w) => Err(w),
        None => pca::allometry(tan, cs, opts.resamples, opts.seed).map_err(|e| e.to_string()),
    };
    result
        .map_err(|why| omitted.push(Omission::new("allometry", why)))
        .ok()
}

/// Procrustes ANOVA over every trial of every specimen, when some specimen has several.
fn measurement_error(
    t: &LandmarkTable,
    opts: &AnalysisOptions,
    sliding: Option<&Sliding<'_>>,
) -> Result<Option<ProcrustesAnova>, AnalysisError> {
    let mut ids: BTreeMap<&str, usize> = BTreeMap::new();
    for o in &t.observations {
        let n = ids.len();
        ids.entry(o.specimen.as_str()).or_insert(n);
    }
    if t.observations.len() == ids.len() {
        return Ok(None);
    }
    let all: Vec<usize> = (0..t.observations.len()).collect();
    let labels: Vec<usize> = t
        .observations
        .iter()
        .map(|o| ids[o.specimen.as_str()])
        .collect();
    let names: Vec<String> = t
        .observations
        .iter()
        .map(|o| format!("{} (trial {})", o.specimen, o.trial))
        .collect();
    let name = |e: AnalysisError| e.naming(&names);
    let (mut sample, _) = to_sample(t, &all, opts).map_err(name)?;
    if let Some(s) = sliding {
        sample = slide(&sample, s, opts).map_err(name)?.0;
    }
    anova::procrustes_anova(&sample, &labels, &opts.gpa)
        .map(Some)
        .map_err(|e| match e {
            AnovaError::Shape(e) => name(e.into()),
            other => other.into(),
        })
}

impl Analysis {
    /// Number of specimens analysed.
    #[must_use]
    pub fn n(&self) -> usize {
        self.observations.len()
    }

    /// Number of principal components (descending variance).
    #[must_use]
    pub fn components(&self) -> usize {
        self.pca.variances.len()
    }

    /// The aligned coordinates as a landmark table (`state` = estimated where filled in).
    #[must_use]
    pub fn aligned_table(&self) -> LandmarkTable {
        let (k, m) = (self.landmarks.len(), self.dim);
        LandmarkTable {
            dim: m,
            landmarks: self.landmarks.clone(),
            observations: self
                .observations
                .iter()
                .enumerate()
                .map(|(s, o)| {
                    let c = self.gpa.aligned.config_slice(s);
                    Observation {
                        specimen: o.specimen.clone(),
                        trial: o.trial.clone(),
                        group: o.group.clone(),
                        coords: (0..k)
                            .map(|l| {
                                let mut p = [0.0; 3];
                                p[..m].copy_from_slice(&c[l * m..(l + 1) * m]);
                                Some(p)
                            })
                            .collect(),
                        states: (0..k)
                            .map(|l| {
                                if self.estimated[s * k + l] {
                                    State::Estimated
                                } else {
                                    o.states[l]
                                }
                            })
                            .collect(),
                    }
                })
                .collect(),
        }
    }
}

#[cfg(test)]
mod degenerate;

#[cfg(test)]
mod tests {
    use super::*;

    /// Two groups of four noisy triangles-plus-apex (3D): the analysis runs end to end, the
    /// group whose shapes vary more has the larger Procrustes variance, and partial disparity
    /// sums to the total (Foote 1993's additivity, as `shape::disparity` documents).
    #[test]
    fn analysis_runs_on_a_small_table_and_its_figures_add_up() {
        let base = [
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.3, 0.3, 1.0],
        ];
        let mut observations = Vec::new();
        for s in 0..8 {
            let spread = if s < 4 { 0.02 } else { 0.15 };
            let coords = base
                .iter()
                .enumerate()
                .map(|(l, p)| {
                    let w = ((s * 7 + l * 3) % 5) as f64 - 2.0;
                    Some([
                        p[0] + spread * w,
                        p[1] - spread * w * 0.5,
                        p[2] + spread * 0.3 * w,
                    ])
                })
                .collect();
            observations.push(Observation {
                specimen: format!("S{s}"),
                trial: "1".into(),
                group: Some(if s < 4 { "calm" } else { "wild" }.into()),
                coords,
                states: vec![State::Placed; 4],
            });
        }
        let table = LandmarkTable {
            dim: 3,
            landmarks: ["a", "b", "c", "d"].map(String::from).to_vec(),
            observations,
        };
        let opts = AnalysisOptions {
            resamples: 99,
            ..AnalysisOptions::default()
        };
        let a = analyse(&table, &opts).unwrap();
        assert_eq!(a.n(), 8);
        assert_eq!(a.disparity.len(), 2);
        let (calm, wild) = (&a.disparity[0], &a.disparity[1]);
        assert!(wild.procrustes_variance > calm.procrustes_variance);
        let partial_sum: f64 = a.disparity.iter().map(|d| d.partial).sum();
        assert!((partial_sum - a.total_variance).abs() < 1e-12 * a.total_variance.max(1.0));
        assert!(a.group_test.is_some() && a.measurement_error.is_none());
        let dir = tempfile::tempdir().unwrap();
        let tables = a.write_tables(dir.path(), "test").unwrap();
        let figures = a.write_figures(dir.path()).unwrap();
        for p in tables.iter().chain(&figures) {
            assert!(p.metadata().unwrap().len() > 0, "{}", p.display());
        }
    }

    /// Semilandmarks spread unevenly along a straight curve carry no shape information, only
    /// digitising noise: sliding them (either criterion) must bring the sample's Procrustes
    /// variance back to that of the same specimens with the semilandmarks at matching places,
    /// and measurement error is computed on slid trials too.
    #[test]
    fn sliding_removes_semilandmark_spacing_noise() {
        let fixed = [
            [0.0, 0.0, 0.0],
            [2.0, 0.0, 0.0],
            [0.5, 1.0, 0.0],
            [0.6, 0.4, 1.0],
        ];
        let table = |jitter: f64| {
            let mut observations = Vec::new();
            for s in 0..8 {
                for trial in 0..=usize::from(s < 2) {
                    // real shape variation: the apex moves with the specimen
                    let mut pts = fixed.to_vec();
                    pts[3][2] += 0.04 * (s % 4) as f64;
                    pts[2][0] += 0.03 * (s / 4) as f64;
                    // three semilandmarks on the segment a-b, spaced unevenly per specimen
                    for (j, f) in [0.25, 0.5, 0.75].into_iter().enumerate() {
                        let w = ((s * 5 + j * 3 + trial) % 7) as f64 / 6.0 - 0.5;
                        pts.push([2.0 * (f + jitter * w), 0.0, 0.0]);
                    }
                    // each specimen in its own pose and size
                    let (a, k) = (0.3 * s as f64, 1.0 + 0.1 * s as f64);
                    let coords = pts
                        .iter()
                        .map(|p| {
                            Some([
                                k * (a.cos() * p[0] - a.sin() * p[1]) + s as f64,
                                k * (a.sin() * p[0] + a.cos() * p[1]),
                                k * p[2] - 1.0,
                            ])
                        })
                        .collect();
                    observations.push(Observation {
                        specimen: format!("S{s}"),
                        trial: format!("{}", trial + 1),
                        group: Some(if s < 4 { "low" } else { "high" }.into()),
                        coords,
                        states: vec![State::Placed; 7],
                    });
                }
            }
            LandmarkTable {
                dim: 3,
                landmarks: ["a", "b", "c", "d", "s1", "s2", "s3"]
                    .map(String::from)
                    .to_vec(),
                observations,
            }
        };
        let opts = AnalysisOptions {
            resamples: 19,
            ..AnalysisOptions::default()
        };
        let curves = [Curve {
            landmarks: vec![0, 4, 5, 6, 1],
        }];
        let even = analyse(&table(0.0), &opts).unwrap().total_variance;
        let noisy = table(0.2);
        let unslid = analyse(&noisy, &opts).unwrap();
        assert!(unslid.sliding.is_none());
        assert!(
            unslid.total_variance - even > 0.2 * even,
            "{} {even}",
            unslid.total_variance
        );
        for criterion in [
            SlideCriterion::ProcrustesDistance,
            SlideCriterion::BendingEnergy,
        ] {
            let sliding = Sliding {
                curves: &curves,
                criterion,
            };
            let a = analyse_sliding(&noisy, &opts, Some(sliding)).unwrap();
            let s = a.sliding.unwrap();
            assert_eq!(s.semilandmarks, 3);
            // Under the Procrustes criterion the semilandmarks of all specimens may drift
            // together along the curve, so the mean settles slowly (here 4e-5 after 20
            // rounds); bending energy pins them to the fixed landmarks and settles at once.
            if criterion == SlideCriterion::BendingEnergy {
                assert!(s.converged && s.iterations <= 5, "{s:?}");
            }
            assert!(
                (a.total_variance - even).abs() < 0.02 * (unslid.total_variance - even),
                "{criterion:?}: slid {} even {even} unslid {}",
                a.total_variance,
                unslid.total_variance
            );
            // repeat trials differ only in semilandmark spacing: after sliding, nothing is left
            // for measurement error
            let me = a.measurement_error.as_ref().unwrap();
            let me_unslid = unslid.measurement_error.as_ref().unwrap();
            assert!(
                me.shape.repeatability > me_unslid.shape.repeatability,
                "{criterion:?}"
            );
        }
    }

    #[test]
    fn fewer_than_three_specimens_is_refused() {
        let table = LandmarkTable {
            dim: 2,
            landmarks: vec!["a".into()],
            observations: Vec::new(),
        };
        assert!(matches!(
            analyse(&table, &AnalysisOptions::default()),
            Err(AnalysisError::TooFewSpecimens(0))
        ));
    }
}
