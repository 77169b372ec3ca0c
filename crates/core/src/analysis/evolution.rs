//! A superimposed sample through time and on a tree: specimens matched to ages and to tree
//! tips, then disparity through time, rates (σ²mult, Kmult), the model comparison and ancestral
//! shapes ([`crate::evolution`]), each with its tables and figures — one call per result for
//! the command line and the workstation alike.
//!
//! **Specimen data** ([`SpecimenLabels`]): key/value labels per specimen, from a CSV with a
//! `specimen` column (every other column a key; empty cells are no value) or from a project's
//! group labels. **Ages** ([`AgeKeys`]): the `age_ma` key holds a number, an interval
//! (`83.6-72.1`) or a bin name; else `oldest_ma` and `youngest_ma` give an interval; else the
//! `bin` key a bin name. A specimen without an age is left out, and said so.
//!
//! **Tips**: each tip is matched to the specimens whose id equals its label, or whose value of
//! a chosen key (e.g. `taxon`) does. A tip with several specimens gets the mean of their
//! tangent coordinates (all specimens are superimposed together first, so the mean is taken in
//! one tangent space). A tip without specimens is an error unless tips may be pruned;
//! specimens without a tip are left out, and said so.

use nalgebra::{DMatrix, DVector};
use serde_json::json;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::output::save_figure;
use super::{Analysis, AnalysisError};
use crate::chart::Figure;
use crate::chart::evolution::{TimeSeries, through_time, tree_in_plane};
use crate::chart::plots;
use crate::evolution::ancestral::{Ancestors, ancestral_states};
use crate::evolution::models::{ModelComparison, ModelOptions, compare_models};
use crate::evolution::rates::{Kmult, RateComparison, compare_rates, k_mult, sigma_mult};
use crate::evolution::time::{
    Age, Metric, ThroughTime, TimeBins, TimeOptions, disparity_through_time,
};
use crate::evolution::{EvolutionError, Tree};
use crate::export::{ExportError, num, write_csv, write_json};
use crate::shape::pca;
use crate::shape::tangent::from_tangent;

impl From<EvolutionError> for AnalysisError {
    fn from(e: EvolutionError) -> Self {
        Self::Evolution(e)
    }
}

/// Key/value labels of specimens.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SpecimenLabels {
    pub labels: BTreeMap<String, BTreeMap<String, String>>,
    /// Where they came from, for messages.
    pub source: String,
}

impl SpecimenLabels {
    /// Reads a CSV with a `specimen` column; every other column is a key.
    pub fn read_csv(path: &Path) -> Result<Self, AnalysisError> {
        let mut rdr = csv::ReaderBuilder::new()
            .trim(csv::Trim::All)
            .from_path(path)
            .map_err(|e| ExportError::format(path, e.to_string()))?;
        let headers = rdr
            .headers()
            .map_err(|e| ExportError::format(path, e.to_string()))?
            .clone();
        let Some(c_spec) = headers
            .iter()
            .position(|h| h.eq_ignore_ascii_case("specimen"))
        else {
            return Err(ExportError::format(path, "no 'specimen' column".to_owned()).into());
        };
        let mut labels: BTreeMap<String, BTreeMap<String, String>> = BTreeMap::new();
        for (n, rec) in rdr.records().enumerate() {
            let rec = rec.map_err(|e| ExportError::format(path, e.to_string()))?;
            let id = rec.get(c_spec).unwrap_or("").to_owned();
            if id.is_empty() {
                return Err(
                    ExportError::format(path, format!("line {}: no specimen id", n + 2)).into(),
                );
            }
            if labels.contains_key(&id) {
                return Err(ExportError::format(
                    path,
                    format!("line {}: specimen '{id}' is listed twice", n + 2),
                )
                .into());
            }
            let row = headers
                .iter()
                .enumerate()
                .filter(|&(c, _)| c != c_spec)
                .filter_map(|(c, h)| {
                    let v = rec.get(c).unwrap_or("");
                    (!v.is_empty()).then(|| (h.to_owned(), v.to_owned()))
                })
                .collect();
            labels.insert(id, row);
        }
        Ok(Self {
            labels,
            source: path.display().to_string(),
        })
    }

    /// A project's group labels.
    #[must_use]
    pub fn from_project(project: &crate::landmarks::Project, source: &str) -> Self {
        Self {
            labels: project
                .specimens()
                .iter()
                .map(|s| (s.id.clone(), s.groups.clone().into_iter().collect()))
                .collect(),
            source: source.to_owned(),
        }
    }

    /// The value of `key` for `specimen`.
    #[must_use]
    pub fn get(&self, specimen: &str, key: &str) -> Option<&str> {
        self.labels.get(specimen)?.get(key).map(String::as_str)
    }
}

/// The keys ages are read from (module docs).
#[derive(Clone, Debug)]
pub struct AgeKeys {
    pub age: String,
    pub oldest: String,
    pub youngest: String,
    pub bin: String,
}

impl Default for AgeKeys {
    fn default() -> Self {
        Self {
            age: "age_ma".into(),
            oldest: "oldest_ma".into(),
            youngest: "youngest_ma".into(),
            bin: "bin".into(),
        }
    }
}

impl AgeKeys {
    /// A specimen's age, `Ok(None)` when it has none.
    pub fn age_of(
        &self,
        labels: &SpecimenLabels,
        specimen: &str,
    ) -> Result<Option<Age>, AnalysisError> {
        if let Some(v) = labels.get(specimen, &self.age) {
            return Ok(Some(Age::parse(v)));
        }
        match (
            labels.get(specimen, &self.oldest),
            labels.get(specimen, &self.youngest),
        ) {
            (Some(o), Some(y)) => {
                let parse = |t: &str, key: &str| {
                    t.parse::<f64>()
                        .ok()
                        .filter(|v| v.is_finite())
                        .ok_or_else(|| {
                            AnalysisError::Evolution(EvolutionError::Data(format!(
                                "{}: specimen '{specimen}': {key} = '{t}' is not a number",
                                labels.source
                            )))
                        })
                };
                let (o, y) = (parse(o, &self.oldest)?, parse(y, &self.youngest)?);
                Ok(Some(Age::Range {
                    oldest: o.max(y),
                    youngest: o.min(y),
                }))
            }
            (Some(_), None) | (None, Some(_)) => {
                Err(AnalysisError::Evolution(EvolutionError::Data(format!(
                    "{}: specimen '{specimen}' has only one of {} and {}",
                    labels.source, self.oldest, self.youngest
                ))))
            }
            (None, None) => Ok(labels.get(specimen, &self.bin).map(|b| Age::Bin {
                label: b.to_owned(),
            })),
        }
    }
}

/// How the bins are given.
#[derive(Clone, Debug)]
pub enum BinsSpec {
    /// Edges in Ma.
    Edges(Vec<f64>),
    /// Equal bins over the ages' span.
    Count(usize),
    /// Named bins, oldest first.
    Names(Vec<String>),
}

/// Disparity through time of an analysed sample.
#[derive(Clone, Debug)]
pub struct ThroughTimeReport {
    pub result: ThroughTime,
    /// Specimens used, in the order of `result`'s indices.
    pub specimens: Vec<String>,
    /// Each used specimen's age.
    pub ages: Vec<Age>,
    /// Specimens left out and why.
    pub left_out: Vec<(String, String)>,
    /// PC1 and PC2 scores of the used specimens (the sample's PCA), when there are two PCs.
    pub scores: Option<(Vec<f64>, Vec<f64>, f64, f64)>,
}

/// Disparity through time of `a`'s specimens (tangent coordinates) with ages from `labels`.
pub fn through_time_of(
    a: &Analysis,
    labels: &SpecimenLabels,
    keys: &AgeKeys,
    bins: &BinsSpec,
    opts: &TimeOptions,
) -> Result<ThroughTimeReport, AnalysisError> {
    let mut used = Vec::new();
    let mut ages = Vec::new();
    let mut left_out = Vec::new();
    for (i, o) in a.observations.iter().enumerate() {
        match keys.age_of(labels, &o.specimen)? {
            Some(age) => {
                used.push(i);
                ages.push(age);
            }
            None => left_out.push((o.specimen.clone(), format!("no age in {}", labels.source))),
        }
    }
    if used.len() < 2 {
        return Err(EvolutionError::Data(format!(
            "{} of {} specimens have an age in {}; disparity through time needs 2 or more",
            used.len(),
            a.n(),
            labels.source
        ))
        .into());
    }
    let bins = match bins {
        BinsSpec::Edges(e) => TimeBins::from_edges(e)?,
        BinsSpec::Count(c) => TimeBins::equal(&ages, *c)?,
        BinsSpec::Names(n) => TimeBins::from_labels(n)?,
    };
    let rows = DMatrix::from_fn(used.len(), a.tangent.ncols(), |r, c| {
        a.tangent[(used[r], c)]
    });
    let result = disparity_through_time(&rows, &ages, &bins, opts)?;
    for &i in &result.outside {
        left_out.push((
            a.observations[used[i]].specimen.clone(),
            "age outside every time bin".into(),
        ));
    }
    let scores = (a.components() >= 2).then(|| {
        (
            used.iter().map(|&i| a.pca.scores[(i, 0)]).collect(),
            used.iter().map(|&i| a.pca.scores[(i, 1)]).collect(),
            a.pca.proportions[0],
            a.pca.proportions[1],
        )
    });
    Ok(ThroughTimeReport {
        result,
        specimens: used
            .iter()
            .map(|&i| a.observations[i].specimen.clone())
            .collect(),
        ages,
        left_out,
        scores,
    })
}

fn bin_span(b: &crate::evolution::time::Bin, index: usize) -> (f64, f64, f64) {
    if let (Some(o), Some(y)) = (b.oldest_ma, b.youngest_ma) {
        (o, y, 0.5 * (o + y))
    } else {
        // named bins: one unit each, oldest first, drawn on a count of bins before present
        let o = -(index as f64);
        (o, o - 1.0, o - 0.5)
    }
}

impl ThroughTimeReport {
    /// Writes `disparity_through_time.csv` (one row per bin and metric), `bin_changes.csv`,
    /// `time_specimens.csv` and `through_time.json`.
    #[allow(clippy::too_many_lines, reason = "four files, one after another")]
    pub fn write_tables(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let r = &self.result;
        let mut rows = Vec::new();
        for b in &r.bins {
            for m in &b.metrics {
                rows.push(vec![
                    b.bin.label.clone(),
                    b.bin.oldest_ma.map(num).unwrap_or_default(),
                    b.bin.youngest_ma.map(num).unwrap_or_default(),
                    b.n.to_string(),
                    num(b.n_mean),
                    m.metric.name().to_owned(),
                    num(m.estimate),
                    num(m.boot_lower),
                    num(m.boot_upper),
                    r.rarefied_to.to_string(),
                    num(m.rarefied),
                    num(m.rarefied_lower),
                    num(m.rarefied_upper),
                    (r.resamples - b.boot_skipped).to_string(),
                    (r.resamples - b.rarefied_skipped).to_string(),
                ]);
            }
        }
        let dtt = dir.join("disparity_through_time.csv");
        write_csv(
            &dtt,
            &[
                "bin",
                "oldest_ma",
                "youngest_ma",
                "n",
                "n_mean_over_age_draws",
                "metric",
                "estimate",
                "boot_lower",
                "boot_upper",
                "rarefied_n",
                "rarefied_mean",
                "rarefied_lower",
                "rarefied_upper",
                "boot_resamples",
                "rarefied_resamples",
            ],
            &rows,
        )?;
        let changes = dir.join("bin_changes.csv");
        write_csv(
            &changes,
            &[
                "from_bin",
                "to_bin",
                "difference_procrustes_variance",
                "p_value",
                "permutations",
            ],
            &r.changes
                .iter()
                .map(|c| {
                    vec![
                        c.from.clone(),
                        c.to.clone(),
                        num(c.difference),
                        num(c.p_value),
                        r.resamples.to_string(),
                    ]
                })
                .collect::<Vec<_>>(),
        )?;
        let mut bin_of = vec![String::new(); self.specimens.len()];
        for b in &r.bins {
            for &i in &b.members {
                bin_of[i].clone_from(&b.bin.label);
            }
        }
        let sp = dir.join("time_specimens.csv");
        write_csv(
            &sp,
            &["specimen", "age", "bin_at_midpoint"],
            &self
                .specimens
                .iter()
                .zip(&self.ages)
                .zip(&bin_of)
                .map(|((s, a), b)| {
                    let age = match a {
                        Age::Point { ma } => num(*ma),
                        Age::Range { oldest, youngest } => {
                            format!("{}-{}", num(*oldest), num(*youngest))
                        }
                        Age::Bin { label } => label.clone(),
                    };
                    vec![s.clone(), age, b.clone()]
                })
                .collect::<Vec<_>>(),
        )?;
        let js = dir.join("through_time.json");
        write_json(
            &js,
            &json!({
                "resamples": r.resamples,
                "level": r.level,
                "seed": r.seed,
                "rarefied_to": r.rarefied_to,
                "age_draws": r.age_draws,
                "bins": r.bins.iter().map(|b| json!({"bin": b.bin, "n": b.n, "metrics": b.metrics})).collect::<Vec<_>>(),
                "changes": r.changes,
                "notes": r.notes,
                "left_out": self.left_out.iter().map(|(s, why)| json!({"specimen": s, "reason": why})).collect::<Vec<_>>(),
            }),
        )?;
        Ok(vec![dtt, changes, sp, js])
    }

    /// Procrustes variance per bin with its bootstrap interval, and the rarefied values.
    #[must_use]
    pub fn figure(&self) -> Figure {
        self.metric_figure(Metric::ProcrustesVariance)
    }

    /// One metric per bin: the estimate with its bootstrap interval and the rarefied mean with
    /// its interval, against the bins' midpoints.
    #[must_use]
    pub fn metric_figure(&self, metric: Metric) -> Figure {
        let r = &self.result;
        let k = Metric::ALL.iter().position(|m| *m == metric).unwrap_or(0);
        let spans: Vec<(f64, f64, f64)> = r
            .bins
            .iter()
            .enumerate()
            .map(|(i, b)| bin_span(&b.bin, i))
            .collect();
        let mids: Vec<f64> = spans.iter().map(|s| s.2).collect();
        let pick = |f: &dyn Fn(&crate::evolution::time::MetricResult) -> f64| -> Vec<f64> {
            r.bins.iter().map(|b| f(&b.metrics[k])).collect()
        };
        let series = [
            TimeSeries {
                name: "all specimens".into(),
                ages: mids.clone(),
                values: pick(&|m| m.estimate),
                lower: pick(&|m| m.boot_lower),
                upper: pick(&|m| m.boot_upper),
            },
            TimeSeries {
                name: format!("rarefied to {}", r.rarefied_to),
                ages: mids,
                values: pick(&|m| m.rarefied),
                lower: pick(&|m| m.rarefied_lower),
                upper: pick(&|m| m.rarefied_upper),
            },
        ];
        let title = format!(
            "{} through time ({}% intervals)",
            metric.name().replace('_', " "),
            (100.0 * r.level).round()
        );
        through_time(
            &series,
            &spans.iter().map(|s| (s.0, s.1)).collect::<Vec<_>>(),
            metric.name(),
            &title,
        )
    }

    /// PC1–PC2 of the sample with each bin's specimens and hull (midpoint ages).
    #[must_use]
    pub fn morphospace_figure(&self) -> Option<Figure> {
        let (xs, ys, p1, p2) = self.scores.as_ref()?;
        let mut groups = vec![String::new(); self.specimens.len()];
        for b in &self.result.bins {
            for &i in &b.members {
                groups[i].clone_from(&b.bin.label);
            }
        }
        let keep: Vec<usize> = (0..groups.len())
            .filter(|&i| !groups[i].is_empty())
            .collect();
        Some(plots::scatter_with_hulls(
            &keep.iter().map(|&i| xs[i]).collect::<Vec<_>>(),
            &keep.iter().map(|&i| ys[i]).collect::<Vec<_>>(),
            &keep.iter().map(|&i| groups[i].clone()).collect::<Vec<_>>(),
            &format!("PC1 ({:.1}%)", 100.0 * p1),
            &format!("PC2 ({:.1}%)", 100.0 * p2),
            "Morphospace occupation per time bin",
        ))
    }

    /// Writes the figures (SVG and PNG): `disparity_through_time`, `mean_pairwise_distance_through_time`, `morphospace_by_bin`.
    pub fn write_figures(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut out = Vec::new();
        out.extend(save_figure(
            &self.figure(),
            &dir.join("disparity_through_time"),
        )?);
        out.extend(save_figure(
            &self.metric_figure(Metric::MeanPairwiseDistance),
            &dir.join("mean_pairwise_distance_through_time"),
        )?);
        if let Some(f) = self.morphospace_figure() {
            out.extend(save_figure(&f, &dir.join("morphospace_by_bin"))?);
        }
        Ok(out)
    }
}

/// How tips find their specimens.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum TipMatch {
    /// The tip label is the specimen id.
    SpecimenId,
    /// The tip label is the value of this key.
    Label(String),
}

/// Tip data: the tree restricted to matched tips, one row of mean tangent coordinates per tip.
#[derive(Clone, Debug)]
pub struct TipData {
    pub tree: Tree,
    pub rows: DMatrix<f64>,
    /// Indices (into the analysis's observations) of each tip's specimens.
    pub specimens: Vec<Vec<usize>>,
    pub notes: Vec<String>,
}

impl TipData {
    /// Matches `a`'s specimens to `tree`'s tips (module docs).
    pub fn assemble(
        a: &Analysis,
        labels: &SpecimenLabels,
        tree: &Tree,
        by: &TipMatch,
        prune: bool,
    ) -> Result<Self, AnalysisError> {
        tree.check_for_analysis(2)?;
        let key_of = |i: usize| -> Option<String> {
            let id = &a.observations[i].specimen;
            match by {
                TipMatch::SpecimenId => Some(id.clone()),
                TipMatch::Label(k) => labels.get(id, k).map(str::to_owned),
            }
        };
        let mut by_tip: BTreeMap<String, Vec<usize>> = BTreeMap::new();
        let mut notes = Vec::new();
        let labels_set: std::collections::HashSet<&str> = tree.tip_labels().into_iter().collect();
        let mut unmatched = Vec::new();
        for i in 0..a.n() {
            match key_of(i) {
                Some(k) if labels_set.contains(k.as_str()) => by_tip.entry(k).or_default().push(i),
                Some(k) => unmatched.push(format!("{} ({k})", a.observations[i].specimen)),
                None => unmatched.push(format!("{} (no label)", a.observations[i].specimen)),
            }
        }
        if !unmatched.is_empty() {
            notes.push(format!(
                "{} specimen(s) match no tip and are left out: {}",
                unmatched.len(),
                abbreviate(&unmatched)
            ));
        }
        let missing: Vec<usize> = (0..tree.n_tips())
            .filter(|&t| !by_tip.contains_key(tree.tip_labels()[t]))
            .collect();
        let tree = if missing.is_empty() {
            tree.clone()
        } else {
            let names: Vec<String> = missing
                .iter()
                .map(|&t| tree.tip_labels()[t].to_owned())
                .collect();
            if !prune {
                return Err(EvolutionError::Tree(format!(
                    "{} tip(s) have no specimen: {} (match tips by another label, or prune them)",
                    names.len(),
                    abbreviate(&names)
                ))
                .into());
            }
            notes.push(format!(
                "{} tip(s) without specimens pruned: {}",
                names.len(),
                abbreviate(&names)
            ));
            let keep: Vec<usize> = (0..tree.n_tips())
                .filter(|t| !missing.contains(t))
                .collect();
            if keep.len() < 2 {
                return Err(EvolutionError::Tree("fewer than 2 tips have specimens".into()).into());
            }
            tree.keep_tips(&keep)?
        };
        let p = a.tangent.ncols();
        let mut rows = DMatrix::zeros(tree.n_tips(), p);
        let mut specimens = Vec::with_capacity(tree.n_tips());
        let mut averaged = 0;
        for (t, l) in tree.tip_labels().iter().enumerate() {
            let members = by_tip[*l].clone();
            if members.len() > 1 {
                averaged += 1;
            }
            for &i in &members {
                let mut row = rows.row_mut(t);
                row += a.tangent.row(i) / members.len() as f64;
            }
            specimens.push(members);
        }
        if averaged > 0 {
            notes.push(format!(
                "{averaged} tip(s) have several specimens: each tip is the mean of its specimens' tangent coordinates"
            ));
        }
        if !tree.is_ultrametric() {
            notes.push("the tree is not ultrametric (tips at different times): fossil tips are used as dated".into());
        }
        if tree.polytomies() > 0 {
            notes.push(format!(
                "{} polytomies, taken as simultaneous splits (zero-length branches)",
                tree.polytomies()
            ));
        }
        Ok(Self {
            tree,
            rows,
            specimens,
            notes,
        })
    }

    /// Each tip's value of `key` (all its specimens must agree).
    pub fn tip_groups(
        &self,
        a: &Analysis,
        labels: &SpecimenLabels,
        key: &str,
    ) -> Result<Vec<String>, AnalysisError> {
        self.tree
            .tip_labels()
            .iter()
            .zip(&self.specimens)
            .map(|(tip, members)| {
                let mut value: Option<&str> = None;
                for &i in members {
                    let id = &a.observations[i].specimen;
                    let v = labels.get(id, key).ok_or_else(|| {
                        AnalysisError::Evolution(EvolutionError::Data(format!(
                            "{}: specimen '{id}' has no '{key}'",
                            labels.source
                        )))
                    })?;
                    if value.is_some_and(|w| w != v) {
                        return Err(AnalysisError::Evolution(EvolutionError::Data(format!(
                            "tip '{tip}': its specimens disagree on '{key}'"
                        ))));
                    }
                    value = Some(v);
                }
                Ok(value.unwrap_or_default().to_owned())
            })
            .collect()
    }
}

fn abbreviate(items: &[String]) -> String {
    if items.len() <= 6 {
        items.join(", ")
    } else {
        format!("{}, … ({} more)", items[..5].join(", "), items.len() - 5)
    }
}

/// σ²mult (and its comparison between groups) and Kmult on the tips.
#[derive(Clone, Debug)]
pub struct RatesReport {
    pub tips: usize,
    pub dimensions: usize,
    pub sigma_mult: f64,
    pub comparison: Option<RateComparison>,
    pub compared_by: Option<String>,
    pub k_mult: Kmult,
    pub notes: Vec<String>,
}

/// Runs σ²mult, its comparison between the groups of `compare` (a label key) and Kmult.
pub fn rates_of(
    a: &Analysis,
    labels: &SpecimenLabels,
    td: &TipData,
    compare: Option<&str>,
    simulations: usize,
    permutations: usize,
    seed: u64,
) -> Result<RatesReport, AnalysisError> {
    let sigma = sigma_mult(&td.tree, &td.rows)?;
    let comparison = match compare {
        None => None,
        Some(key) => {
            let groups = td.tip_groups(a, labels, key)?;
            Some(compare_rates(
                &td.tree,
                &td.rows,
                &groups,
                simulations,
                seed,
            )?)
        }
    };
    let k = k_mult(&td.tree, &td.rows, permutations, seed)?;
    Ok(RatesReport {
        tips: td.tree.n_tips(),
        dimensions: td.rows.ncols(),
        sigma_mult: sigma,
        comparison,
        compared_by: compare.map(str::to_owned),
        k_mult: k,
        notes: td.notes.clone(),
    })
}

impl RatesReport {
    /// Writes `rates.csv` (`group, tips, sigma_mult` with the whole tree as `all`),
    /// `rate_ratios.csv`, `k_mult.csv` and `rates.json`.
    pub fn write_tables(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut rows = vec![vec![
            "all".to_owned(),
            self.tips.to_string(),
            num(self.sigma_mult),
        ]];
        if let Some(c) = &self.comparison {
            rows.extend(
                c.groups
                    .iter()
                    .map(|g| vec![g.group.clone(), g.tips.to_string(), num(g.sigma_mult)]),
            );
        }
        let rates = dir.join("rates.csv");
        write_csv(&rates, &["group", "tips", "sigma_mult"], &rows)?;
        let mut out = vec![rates];
        if let Some(c) = &self.comparison {
            let mut rows = vec![vec![
                "largest/smallest".to_owned(),
                String::new(),
                num(c.ratio),
                num(c.p_value),
                c.simulations.to_string(),
            ]];
            rows.extend(c.pairs.iter().map(|p| {
                vec![
                    p.faster.clone(),
                    p.slower.clone(),
                    num(p.ratio),
                    num(p.p_value),
                    c.simulations.to_string(),
                ]
            }));
            let ratios = dir.join("rate_ratios.csv");
            write_csv(
                &ratios,
                &["faster", "slower", "ratio", "p_value", "simulations"],
                &rows,
            )?;
            out.push(ratios);
        }
        let k = dir.join("k_mult.csv");
        write_csv(
            &k,
            &["k_mult", "p_value", "permutations"],
            &[vec![
                num(self.k_mult.k_mult),
                num(self.k_mult.p_value),
                self.k_mult.permutations.to_string(),
            ]],
        )?;
        out.push(k);
        let js = dir.join("rates.json");
        write_json(
            &js,
            &json!({
                "tips": self.tips,
                "dimensions": self.dimensions,
                "sigma_mult": self.sigma_mult,
                "compared_by": self.compared_by,
                "comparison": self.comparison,
                "k_mult": self.k_mult,
                "notes": self.notes,
            }),
        )?;
        out.push(js);
        Ok(out)
    }
}

/// Writes the model comparison: `models.csv` and `models.json`.
pub fn write_models(
    m: &ModelComparison,
    notes: &[String],
    dir: &Path,
) -> Result<Vec<PathBuf>, AnalysisError> {
    std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
    let rows: Vec<Vec<String>> = m
        .fits
        .iter()
        .map(|f| {
            let (pname, p) = match (f.model, f.parameter) {
                (crate::evolution::models::Model::EarlyBurst, Some(e)) => ("r", Some(e)),
                (crate::evolution::models::Model::OrnsteinUhlenbeck, Some(e)) => ("alpha", Some(e)),
                _ => ("", None),
            };
            vec![
                f.model.name().to_owned(),
                num(f.composite_log_likelihood),
                num(f.log_likelihood),
                f.parameters.to_string(),
                num(f.aicc),
                num(f.delta_aicc),
                num(f.weight),
                num(f.rate.value),
                num(f.rate.lower),
                num(f.rate.upper),
                pname.to_owned(),
                p.map(|e| num(e.value)).unwrap_or_default(),
                p.map(|e| num(e.lower)).unwrap_or_default(),
                p.map(|e| num(e.upper)).unwrap_or_default(),
                f.half_life.map(num).unwrap_or_default(),
            ]
        })
        .collect();
    let csv = dir.join("models.csv");
    write_csv(
        &csv,
        &[
            "model",
            "composite_log_likelihood",
            "adjusted_log_likelihood",
            "parameters",
            "aicc",
            "delta_aicc",
            "akaike_weight",
            "sigma2",
            "sigma2_lower",
            "sigma2_upper",
            "parameter",
            "estimate",
            "lower",
            "upper",
            "half_life",
        ],
        &rows,
    )?;
    let js = dir.join("models.json");
    write_json(&js, &json!({"comparison": m, "notes": notes}))?;
    Ok(vec![csv, js])
}

/// Fits and compares the three models on the tips.
pub fn models_of(td: &TipData, opts: &ModelOptions) -> Result<ModelComparison, AnalysisError> {
    Ok(compare_models(&td.tree, &td.rows, opts)?)
}

/// Tip and node positions on PC1 and PC2, and the two components' shares of the variance.
pub type Plane = (Vec<(f64, f64)>, Vec<(f64, f64)>, f64, f64);

/// Ancestral shapes and the tree in the morphospace.
#[derive(Clone, Debug)]
pub struct AncestralReport {
    pub ancestors: Ancestors,
    /// Each internal node's configuration (`k × m`, aligned frame) in `ancestors.nodes` order.
    pub configs: Vec<DMatrix<f64>>,
    /// A name per internal node (its label, or the tips it joins).
    pub names: Vec<String>,
    /// Tip and node scores on PC1 and PC2 of the tips' PCA, when there are two PCs.
    pub plane: Option<Plane>,
    pub tip_groups: Vec<String>,
}

/// GLS ancestral shapes of the tips; `group_key` colours the tips in the figure.
pub fn ancestral_of(
    a: &Analysis,
    labels: &SpecimenLabels,
    td: &TipData,
    group_key: Option<&str>,
) -> Result<AncestralReport, AnalysisError> {
    let anc = ancestral_states(&td.tree, &td.rows)?;
    let mut configs = Vec::with_capacity(anc.nodes.len());
    for r in 0..anc.values.nrows() {
        let v = DVector::from_iterator(anc.values.ncols(), anc.values.row(r).iter().copied());
        configs.push(from_tangent(&v, &a.gpa.mean, a.gpa.scaled)?);
    }
    let names = anc.nodes.iter().map(|&n| td.tree.describe(n)).collect();
    let tip_groups = match group_key {
        Some(k) => td.tip_groups(a, labels, k)?,
        None => vec!["tips".to_owned(); td.tree.n_tips()],
    };
    let plane = pca::pca(&td.rows)
        .ok()
        .filter(|p| p.variances.len() >= 2)
        .map(|p| {
            let project = |row: nalgebra::RowDVector<f64>| {
                let c = row - p.center.transpose();
                (
                    (&c * p.loadings.column(0))[0],
                    (&c * p.loadings.column(1))[0],
                )
            };
            let tips = (0..td.rows.nrows())
                .map(|i| project(td.rows.row(i).into_owned()))
                .collect();
            let nodes = (0..anc.values.nrows())
                .map(|i| project(anc.values.row(i).into_owned()))
                .collect();
            (tips, nodes, p.proportions[0], p.proportions[1])
        });
    Ok(AncestralReport {
        ancestors: anc,
        configs,
        names,
        plane,
        tip_groups,
    })
}

impl AncestralReport {
    /// Writes `ancestral_shapes.csv` (long: `node, name, landmark, x, y[, z]`; node 0 is the
    /// root) and `ancestral_tree.nwk` (the tree with internal nodes named `node0`, `node1`, …).
    pub fn write_tables(
        &self,
        tree: &Tree,
        landmarks: &[String],
        dir: &Path,
    ) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut rows = Vec::new();
        let m = self.configs.first().map_or(3, DMatrix::ncols);
        for (r, c) in self.configs.iter().enumerate() {
            for (l, name) in landmarks.iter().enumerate() {
                let mut row = vec![format!("node{r}"), self.names[r].clone(), name.clone()];
                row.extend((0..m).map(|d| num(c[(l, d)])));
                rows.push(row);
            }
        }
        let mut header = vec!["node", "name", "landmark", "x", "y"];
        if m == 3 {
            header.push("z");
        }
        let csv = dir.join("ancestral_shapes.csv");
        write_csv(&csv, &header, &rows)?;
        let mut nodes = tree.nodes().to_vec();
        for (r, &n) in self.ancestors.nodes.iter().enumerate() {
            nodes[n].label = Some(format!("node{r}"));
        }
        let named = Tree::from_nodes(nodes)?;
        let nwk = dir.join("ancestral_tree.nwk");
        let text = named.to_newick();
        crate::export::write_atomic(&nwk, |w| w.write_all(text.as_bytes()))?;
        Ok(vec![csv, nwk])
    }

    /// Writes `phylomorphospace.svg` and `.png` (nothing with fewer than two PCs).
    pub fn write_figures(&self, tree: &Tree, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        match self.figure(tree) {
            Some(f) => Ok(save_figure(&f, &dir.join("phylomorphospace"))?.to_vec()),
            None => Ok(Vec::new()),
        }
    }

    /// The tree drawn in the PC1–PC2 plane of the tips (phylomorphospace).
    #[must_use]
    pub fn figure(&self, tree: &Tree) -> Option<Figure> {
        let (tips, nodes, p1, p2) = self.plane.as_ref()?;
        let mut pos = vec![(0.0, 0.0); tree.nodes().len()];
        for (t, &n) in tree.tips().iter().enumerate() {
            pos[n] = tips[t];
        }
        for (r, &n) in self.ancestors.nodes.iter().enumerate() {
            pos[n] = nodes[r];
        }
        let edges: Vec<((f64, f64), (f64, f64))> = tree
            .nodes()
            .iter()
            .enumerate()
            .filter_map(|(i, n)| n.parent.map(|p| (pos[p], pos[i])))
            .collect();
        Some(tree_in_plane(
            tips,
            &self.tip_groups,
            nodes,
            &edges,
            &format!("PC1 ({:.1}%)", 100.0 * p1),
            &format!("PC2 ({:.1}%)", 100.0 * p2),
            "Phylomorphospace (tips and GLS ancestors)",
        ))
    }
}
