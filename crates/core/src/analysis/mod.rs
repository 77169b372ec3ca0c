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
//! [`Analysis::write_tables`] and [`Analysis::write_figures`] write every output in open
//! formats (CSV, JSON, `.npy`, SVG, PNG); the README documents each column.
//!
//! Depends on `shape`, `export`, `chart` and `render::png`. Knows nothing of volumes and must
//! not import `gui` or `cli`.

pub mod exports;
pub mod project;

pub use exports::{ExportKind, ExportSource, Exported, write_export, write_export_into};
pub use project::{ProjectAnalysisOptions, TrialChoice, analyse_project};

use nalgebra::DMatrix;
use serde_json::json;
use std::collections::{BTreeMap, HashSet};
use std::path::{Path, PathBuf};

use crate::chart::{Figure, plots};
use crate::export::table::{LandmarkTable, Observation, State};
use crate::export::{ExportError, num, write_csv, write_json, write_npy_f64};
use crate::shape::anova::{self, AnovaError, AnovaTable, ProcrustesAnova};
use crate::shape::disparity::{self, Divisor, Interval, PermutationTest};
use crate::shape::distance::{Distance, distance_matrix};
use crate::shape::missing::{MissingError, MissingMethod, MissingOptions, estimate_missing};
use crate::shape::pca::{Allometry, Pca};
use crate::shape::sliding::{
    Curve, SlideCriterion, SlideOptions, SlideProcedureError, slide_semilandmarks,
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
    /// Procrustes angles ρ (radians) between specimens.
    pub distances: DMatrix<f64>,
    pub allometry: Allometry,
    /// Over all trials, when some specimen was digitised more than once.
    pub measurement_error: Option<ProcrustesAnova>,
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
    let (sample, estimated) = to_sample(table, &idx, opts)?;
    let (g, sliding_summary) = match &sliding {
        None => (gpa(&sample, &opts.gpa)?, None),
        Some(s) => {
            let (_, g, summary) = slide(&sample, s, opts)?;
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
    let p = pca::pca(&tan)?;

    let by_group = disparity::disparity_by_group(&tan, &groups, Divisor::NMinusOne)?;
    let (partials, total_variance) = disparity::partial_disparity(&tan, &groups)?;
    let gi = disparity::group_indices(&groups);
    let mut disp = Vec::with_capacity(by_group.len());
    for (d, pd) in by_group.iter().zip(&partials) {
        let interval = disparity::bootstrap(
            &tan,
            &gi[&d.label],
            Divisor::NMinusOne,
            opts.resamples,
            0.95,
            opts.seed,
        )?;
        disp.push(GroupDisparity {
            group: d.label.clone(),
            n: d.n,
            procrustes_variance: d.procrustes_variance,
            interval,
            sum_of_variances: d.sum_of_variances,
            partial: pd.partial,
            partial_share: pd.share,
        });
    }
    let group_test = if gi.len() == 2 {
        let mut it = gi.values();
        let (g1, g2) = (
            it.next().expect("two groups"),
            it.next().expect("two groups"),
        );
        Some(disparity::permutation_test(
            &tan,
            g1,
            g2,
            Divisor::NMinusOne,
            opts.resamples,
            opts.seed,
        )?)
    } else {
        None
    };
    let distances = distance_matrix(&g.aligned, Distance::Angle)?;
    let allometry = pca::allometry(&tan, &g.centroid_sizes, opts.resamples, opts.seed)?;
    let measurement_error = measurement_error(table, opts, sliding.as_ref())?;
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
        sliding: sliding_summary,
        options: *opts,
    })
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
    let (mut sample, _) = to_sample(t, &all, opts)?;
    if let Some(s) = sliding {
        sample = slide(&sample, s, opts)?.0;
    }
    Ok(Some(anova::procrustes_anova(&sample, &labels, &opts.gpa)?))
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

    /// Writes every table into `dir` (created if needed) and returns the paths written.
    /// `source` names the input in `summary.json`.
    #[allow(
        clippy::too_many_lines,
        reason = "one file after another, in the README's order"
    )]
    pub fn write_tables(&self, dir: &Path, source: &str) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let out = |name: &str| dir.join(name);
        let (n, k, m) = (self.n(), self.landmarks.len(), self.dim);
        let mut written = Vec::new();

        let aligned = self.aligned_table();
        aligned.write_long_csv(&out("aligned_long.csv"))?;
        aligned.write_wide_csv(&out("aligned_wide.csv"))?;
        write_npy_f64(
            &out("aligned.npy"),
            &[n as u64, k as u64, m as u64],
            self.gpa.aligned.data(),
        )?;
        written.extend(["aligned_long.csv", "aligned_wide.csv", "aligned.npy"].map(out));

        let id_rows: Vec<Vec<String>> = (0..n)
            .map(|s| {
                let o = &self.observations[s];
                let n_est = (0..k).filter(|l| self.estimated[s * k + l]).count();
                vec![
                    s.to_string(),
                    o.specimen.clone(),
                    o.trial.clone(),
                    self.groups[s].clone(),
                    num(self.gpa.centroid_sizes[s]),
                    n_est.to_string(),
                ]
            })
            .collect();
        write_csv(
            &out("specimens.csv"),
            &[
                "index",
                "specimen",
                "trial",
                "group",
                "centroid_size_mm",
                "estimated_landmarks",
            ],
            &id_rows,
        )?;
        written.push(out("specimens.csv"));

        written.extend(self.write_pca_tables(dir)?);

        let disp_rows: Vec<Vec<String>> = self
            .disparity
            .iter()
            .map(|d| {
                vec![
                    d.group.clone(),
                    d.n.to_string(),
                    num(d.procrustes_variance),
                    num(d.interval.lower),
                    num(d.interval.upper),
                    d.interval.resamples.to_string(),
                    num(d.sum_of_variances),
                    num(d.partial),
                    num(d.partial_share),
                ]
            })
            .collect();
        write_csv(
            &out("disparity.csv"),
            &[
                "group",
                "n",
                "procrustes_variance",
                "ci95_lower",
                "ci95_upper",
                "resamples",
                "sum_of_variances",
                "partial_disparity",
                "partial_share",
            ],
            &disp_rows,
        )?;
        written.push(out("disparity.csv"));

        written.push(self.write_distances(dir)?);

        let anova_summary = match &self.measurement_error {
            None => serde_json::Value::Null,
            Some(pa) => {
                write_anova(&out("anova.csv"), pa)?;
                written.push(out("anova.csv"));
                json!({
                    "shape_repeatability": pa.shape.repeatability,
                    "size_repeatability": pa.size.repeatability,
                    "individuals": pa.shape.individuals,
                    "measurements": pa.shape.measurements,
                })
            }
        };
        let g = &self.gpa;
        let allo = &self.allometry;
        write_json(
            &out("summary.json"),
            &json!({
                "table": source,
                "specimens": n, "landmarks": k, "dims": m,
                "fit": format!("{:?}", self.options.gpa.fit).to_lowercase(),
                "tolerance": self.options.gpa.tolerance,
                "iterations": g.iterations, "converged": g.converged, "final_change": g.final_change,
                "estimated_landmarks": self.estimated.iter().filter(|&&e| e).count(),
                "total_procrustes_variance": self.total_variance,
                "disparity_divisor": "n - 1",
                "group_difference_test": self.group_test,
                "allometry": {"r_squared": allo.r_squared, "p_value": allo.p_value, "permutations": allo.permutations},
                "measurement_error": anova_summary,
                "sliding": self.sliding,
            }),
        )?;
        written.push(out("summary.json"));
        Ok(written)
    }

    /// `procrustes_distances.csv`: the square matrix of Procrustes angles.
    fn write_distances(&self, dir: &Path) -> Result<PathBuf, AnalysisError> {
        let path = dir.join("procrustes_distances.csv");
        let n = self.n();
        let labels: Vec<String> = self
            .observations
            .iter()
            .map(|o| o.specimen.clone())
            .collect();
        let mut dh: Vec<String> = vec!["specimen".into()];
        dh.extend(labels.iter().cloned());
        let drows: Vec<Vec<String>> = (0..n)
            .map(|i| {
                let mut r = vec![labels[i].clone()];
                r.extend((0..n).map(|j| num(self.distances[(i, j)])));
                r
            })
            .collect();
        write_csv_owned(&path, &dh, &drows)?;

        Ok(path)
    }

    /// `pc_scores.csv`, `pc_variance.csv` and `pc_loadings.csv`.
    fn write_pca_tables(&self, dir: &Path) -> Result<[PathBuf; 3], AnalysisError> {
        let out = |name: &str| dir.join(name);
        let (n, m) = (self.n(), self.dim);
        let k = self.landmarks.len();
        let ncomp = self.components();
        let p = &self.pca;
        let pcs: Vec<String> = (1..=ncomp).map(|c| format!("PC{c}")).collect();
        let with_pcs = |first: &[&str]| -> Vec<String> {
            first
                .iter()
                .map(|s| (*s).to_owned())
                .chain(pcs.iter().cloned())
                .collect()
        };
        let rows: Vec<Vec<String>> = (0..n)
            .map(|s| {
                let o = &self.observations[s];
                let mut r = vec![o.specimen.clone(), o.trial.clone(), self.groups[s].clone()];
                r.extend((0..ncomp).map(|c| num(p.scores[(s, c)])));
                r
            })
            .collect();
        write_csv_owned(
            &out("pc_scores.csv"),
            &with_pcs(&["specimen", "trial", "group"]),
            &rows,
        )?;
        let mut cum = 0.0;
        let var_rows: Vec<Vec<String>> = (0..ncomp)
            .map(|c| {
                cum += p.proportions[c];
                vec![
                    format!("PC{}", c + 1),
                    num(p.variances[c]),
                    num(p.proportions[c]),
                    num(cum),
                ]
            })
            .collect();
        write_csv(
            &out("pc_variance.csv"),
            &["component", "variance", "proportion", "cumulative"],
            &var_rows,
        )?;
        let load_rows: Vec<Vec<String>> = (0..k * m)
            .map(|r| {
                let mut row = vec![
                    self.landmarks[r / m].clone(),
                    ["x", "y", "z"][r % m].to_owned(),
                ];
                row.extend((0..ncomp).map(|c| num(p.loadings[(r, c)])));
                row
            })
            .collect();
        write_csv_owned(
            &out("pc_loadings.csv"),
            &with_pcs(&["landmark", "axis"]),
            &load_rows,
        )?;

        Ok(["pc_scores.csv", "pc_variance.csv", "pc_loadings.csv"].map(out))
    }

    /// The PC1–PC2 scatter with group hulls (`None` with fewer than two components).
    #[must_use]
    pub fn morphospace_figure(&self) -> Option<Figure> {
        if self.components() < 2 {
            return None;
        }
        let p = &self.pca;
        let xs: Vec<f64> = (0..self.n()).map(|s| p.scores[(s, 0)]).collect();
        let ys: Vec<f64> = (0..self.n()).map(|s| p.scores[(s, 1)]).collect();
        Some(plots::scatter_with_hulls(
            &xs,
            &ys,
            &self.groups,
            &format!("PC1 ({:.1}%)", 100.0 * p.proportions[0]),
            &format!("PC2 ({:.1}%)", 100.0 * p.proportions[1]),
            "Morphospace",
        ))
    }

    /// Procrustes variance per group with its bootstrap interval.
    #[must_use]
    pub fn disparity_figure(&self) -> Figure {
        let names: Vec<String> = self.disparity.iter().map(|d| d.group.clone()).collect();
        let est: Vec<f64> = self
            .disparity
            .iter()
            .map(|d| d.procrustes_variance)
            .collect();
        let lo: Vec<f64> = self.disparity.iter().map(|d| d.interval.lower).collect();
        let hi: Vec<f64> = self.disparity.iter().map(|d| d.interval.upper).collect();
        plots::intervals(
            &names,
            &est,
            &lo,
            &hi,
            "Procrustes variance (95% bootstrap interval)",
            "Disparity by group",
        )
    }

    /// The mean shape and the shapes at ±2 SD along PC1, as wireframes in the x–y plane.
    pub fn pc1_shapes_figure(&self) -> Result<Figure, AnalysisError> {
        let (g, p, m) = (&self.gpa, &self.pca, self.dim);
        let mean = to_points(&g.mean, m);
        let sd = p.variances[0].sqrt();
        let minus = to_points(&p.shape_at(&g.mean, g.scaled, 0, -2.0)?, m);
        let plus = to_points(&p.shape_at(&g.mean, g.scaled, 0, 2.0)?, m);
        let edges = spanning_tree(&mean);
        let shapes = vec![
            ("mean".to_owned(), mean),
            ("PC1 -2 SD".to_owned(), minus),
            ("PC1 +2 SD".to_owned(), plus),
        ];
        Ok(plots::wireframes(
            &shapes,
            &edges,
            (0, 1),
            &format!("PC1 shapes (SD {sd:.4})"),
        ))
    }

    /// Writes the figures as SVG and PNG into `dir` and returns the paths written.
    pub fn write_figures(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut figures = Vec::new();
        if let Some(f) = self.morphospace_figure() {
            figures.push(("morphospace", f));
        }
        figures.push(("disparity", self.disparity_figure()));
        figures.push(("pc1_shapes", self.pc1_shapes_figure()?));
        let mut written = Vec::new();
        for (name, f) in figures {
            let stem = dir.join(name);
            written.extend(save_figure(&f, &stem)?);
        }
        Ok(written)
    }
}

fn write_csv_owned(
    path: &Path,
    header: &[String],
    rows: &[Vec<String>],
) -> Result<(), ExportError> {
    let h: Vec<&str> = header.iter().map(String::as_str).collect();
    write_csv(path, &h, rows)
}

fn write_anova(path: &Path, pa: &ProcrustesAnova) -> Result<(), ExportError> {
    let row = |term: &str, tab: &AnovaTable| {
        vec![
            vec![
                term.to_owned(),
                "individual".into(),
                num(tab.individual.ss),
                num(tab.individual.df),
                num(tab.individual.ms),
                num(tab.f),
                num(tab.p),
                num(tab.repeatability),
            ],
            vec![
                term.to_owned(),
                "error".into(),
                num(tab.error.ss),
                num(tab.error.df),
                num(tab.error.ms),
                String::new(),
                String::new(),
                String::new(),
            ],
        ]
    };
    let mut rows = row("shape", &pa.shape);
    rows.extend(row("centroid_size", &pa.size));
    write_csv(
        path,
        &[
            "variable",
            "effect",
            "ss",
            "df",
            "ms",
            "f",
            "p",
            "repeatability",
        ],
        &rows,
    )
}

fn to_points(c: &DMatrix<f64>, m: usize) -> Vec<[f64; 3]> {
    (0..c.nrows())
        .map(|r| {
            let mut p = [0.0; 3];
            for (d, v) in p.iter_mut().enumerate().take(m) {
                *v = c[(r, d)];
            }
            p
        })
        .collect()
}

/// Links for a wireframe when the table carries none: the minimum spanning tree of the mean
/// shape (Prim's algorithm), which joins each landmark to its nearest neighbours.
fn spanning_tree(pts: &[[f64; 3]]) -> Vec<(usize, usize)> {
    let n = pts.len();
    if n < 2 {
        return Vec::new();
    }
    let d = |a: usize, b: usize| (0..3).map(|c| (pts[a][c] - pts[b][c]).powi(2)).sum::<f64>();
    let mut in_tree = vec![false; n];
    let mut best: Vec<(f64, usize)> = (0..n).map(|j| (d(0, j), 0)).collect();
    in_tree[0] = true;
    let mut edges = Vec::with_capacity(n - 1);
    for _ in 1..n {
        let (j, _) = (0..n)
            .filter(|&j| !in_tree[j])
            .map(|j| (j, best[j].0))
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .expect("a vertex remains");
        in_tree[j] = true;
        edges.push((best[j].1, j));
        for q in 0..n {
            if !in_tree[q] && d(j, q) < best[q].0 {
                best[q] = (d(j, q), j);
            }
        }
    }
    edges
}

/// Writes `stem.svg` and `stem.png`.
fn save_figure(f: &Figure, stem: &Path) -> Result<[PathBuf; 2], AnalysisError> {
    let svg = stem.with_extension("svg");
    crate::export::write_atomic(&svg, |w| w.write_all(f.to_svg().as_bytes()))?;
    let png = stem.with_extension("png");
    crate::render::png::save_png(&png, f.width as usize, f.height as usize, &f.to_rgba())?;
    Ok([svg, png])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spanning_tree_links_every_landmark_once() {
        let pts = [
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [5.0, 0.0, 0.0],
            [1.0, 1.0, 0.0],
        ];
        let e = spanning_tree(&pts);
        assert_eq!(e.len(), 3);
        assert!(
            e.contains(&(0, 1)) && e.contains(&(1, 3)) && e.contains(&(1, 2)),
            "{e:?}"
        );
    }

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
