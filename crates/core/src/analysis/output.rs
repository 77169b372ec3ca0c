//! The analysis's files: every table (CSV, JSON, `.npy`) and figure (SVG and PNG), each
//! written atomically; and the plan of figures, which says for each one that cannot be drawn on
//! this sample why, so `summary.json` lists it before any figure is written.

use nalgebra::DMatrix;
use serde_json::json;
use std::path::{Path, PathBuf};

use super::{Analysis, AnalysisError, Omission, Report};
use crate::chart::{Figure, plots};
use crate::export::{ExportError, num, write_atomic, write_csv, write_json, write_npy_f64};
use crate::shape::Fit;
use crate::shape::anova::{AnovaTable, ProcrustesAnova};

/// The largest length of a tangent vector drawn as a shape. The inverse projection onto the
/// preshape sphere, `x = √(1 − ‖v‖²) μ + v`, needs `‖v‖ < 1`; near 1 it keeps almost none of the
/// mean (at 0.99, 14 % of it). A chosen bound, not a published one.
pub const MAX_TANGENT_NORM: f64 = 0.99;

/// The excursion along PC1 that the PC1 shapes figure draws, in standard deviations.
pub const PC1_EXCURSION_SD: f64 = 2.0;

/// One figure of the analysis: drawn, or left out with the reason.
#[derive(Clone, Debug)]
pub struct PlannedFigure {
    /// File stem (`morphospace`, `disparity`, `pc1_shapes`).
    pub name: &'static str,
    /// The figure, or why it cannot be drawn on this sample.
    pub figure: Result<Figure, String>,
    /// How the figure departs from the usual one (also written on the figure itself).
    pub note: Option<String>,
}

impl Analysis {
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
                    d.note.clone().unwrap_or_default(),
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
                "note",
            ],
            &disp_rows,
        )?;
        written.push(out("disparity.csv"));

        if let Some(d) = &self.distances {
            written.push(self.write_distances(dir, d)?);
        }

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
        let allometry = self.allometry.as_ref().map(|a| {
            json!({"r_squared": a.r_squared, "p_value": a.p_value, "permutations": a.permutations})
        });
        let report = self.report();
        write_json(
            &out("summary.json"),
            &json!({
                "table": source,
                "specimens": n, "landmarks": k, "dims": m,
                "fit": match self.options.gpa.fit { Fit::Partial => "partial", Fit::Full => "full" },
                "tolerance": self.options.gpa.tolerance,
                "iterations": g.iterations, "converged": g.converged, "final_change": g.final_change,
                "estimated_landmarks": self.estimated.iter().filter(|&&e| e).count(),
                "total_procrustes_variance": self.total_variance,
                "disparity_divisor": "n - 1",
                "group_difference_test": self.group_test,
                "allometry": allometry,
                "measurement_error": anova_summary,
                "sliding": self.sliding,
                "not_produced": report.not_produced,
                "notes": report.notes,
            }),
        )?;
        written.push(out("summary.json"));
        Ok(written)
    }

    /// `procrustes_distances.csv`: the square matrix of Procrustes angles.
    fn write_distances(&self, dir: &Path, d: &DMatrix<f64>) -> Result<PathBuf, AnalysisError> {
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
                r.extend((0..n).map(|j| num(d[(i, j)])));
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

    /// The PC1–PC2 scatter with group hulls, or why it cannot be drawn.
    pub fn morphospace_figure(&self) -> Result<Figure, String> {
        match self.components() {
            0 => return Err(no_variation()),
            1 => {
                return Err(
                    "only one principal component (all shape variation lies along PC1), and the morphospace plots PC1 against PC2"
                        .into(),
                );
            }
            _ => {}
        }
        let p = &self.pca;
        let xs: Vec<f64> = (0..self.n()).map(|s| p.scores[(s, 0)]).collect();
        let ys: Vec<f64> = (0..self.n()).map(|s| p.scores[(s, 1)]).collect();
        Ok(plots::scatter_with_hulls(
            &xs,
            &ys,
            &self.groups,
            &format!("PC1 ({:.1}%)", 100.0 * p.proportions[0]),
            &format!("PC2 ({:.1}%)", 100.0 * p.proportions[1]),
            "Morphospace",
        ))
    }

    /// Procrustes variance per group with its bootstrap interval (rows without one say why).
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

    /// The mean shape and the shapes at ±2 SD along PC1, as wireframes in the x–y plane, and a
    /// note when the excursion had to be smaller; or why the figure cannot be drawn.
    ///
    /// For a shape (unit-size) superimposition the shapes come back from the tangent space at
    /// the mean, which holds only tangent vectors shorter than 1: when ±2 SD along PC1 reaches
    /// beyond [`MAX_TANGENT_NORM`] (very dissimilar shapes, such as a triangle, its mirror image
    /// and a collinear one), the excursion is scaled down to the largest that stays inside, the
    /// same on both sides, and the figure's title and legend say by how much.
    pub fn pc1_shapes_figure(&self) -> Result<(Figure, Option<String>), String> {
        let (g, p, m) = (&self.gpa, &self.pca, self.dim);
        if self.components() == 0 {
            return Err(no_variation());
        }
        let sd = p.variances[0].sqrt();
        let mut excursion = PC1_EXCURSION_SD;
        if g.scaled {
            let reach = p
                .largest_excursion(0, PC1_EXCURSION_SD, MAX_TANGENT_NORM)
                .map_err(|e| e.to_string())?;
            if reach < PC1_EXCURSION_SD {
                // round down to two decimals, so the label never overstates the excursion
                excursion = (reach * 100.0).floor() / 100.0;
            }
        }
        if excursion <= 0.0 {
            return Err(format!(
                "the mean of the tangent coordinates lies at the edge of the tangent space (length {MAX_TANGENT_NORM} or more), so no excursion along PC1 can be drawn"
            ));
        }
        let scaled = excursion < PC1_EXCURSION_SD;
        let note = scaled.then(|| {
            format!(
                "pc1_shapes: drawn at ±{excursion:.2} SD instead of ±{PC1_EXCURSION_SD} SD, the largest excursion whose shapes stay inside the tangent space (tangent vectors shorter than {MAX_TANGENT_NORM})"
            )
        });
        let shape = |s: f64| -> Result<Vec<[f64; 3]>, String> {
            p.shape_at(&g.mean, g.scaled, 0, s)
                .map(|c| to_points(&c, m))
                .map_err(|e| e.to_string())
        };
        let mean = to_points(&g.mean, m);
        let minus = shape(-excursion)?;
        let plus = shape(excursion)?;
        let edges = spanning_tree(&mean);
        let shapes = vec![
            ("mean".to_owned(), mean),
            (format!("PC1 -{} SD", sd_label(excursion)), minus),
            (format!("PC1 +{} SD", sd_label(excursion)), plus),
        ];
        let title = if scaled {
            format!("PC1 shapes (SD {sd:.4}; ±2 SD leaves the tangent space)")
        } else {
            format!("PC1 shapes (SD {sd:.4})")
        };
        Ok((plots::wireframes(&shapes, &edges, (0, 1), &title), note))
    }

    /// Every figure of the analysis, drawn or with the reason it is left out.
    #[must_use]
    pub fn figures(&self) -> Vec<PlannedFigure> {
        let (pc1, note) = match self.pc1_shapes_figure() {
            Ok((f, note)) => (Ok(f), note),
            Err(why) => (Err(why), None),
        };
        vec![
            PlannedFigure {
                name: "morphospace",
                figure: self.morphospace_figure(),
                note: None,
            },
            PlannedFigure {
                name: "disparity",
                figure: Ok(self.disparity_figure()),
                note: None,
            },
            PlannedFigure {
                name: "pc1_shapes",
                figure: pc1,
                note,
            },
        ]
    }

    /// What this analysis left out (its optional steps and its figures) and what it drew
    /// differently, with the reasons.
    #[must_use]
    pub fn report(&self) -> Report {
        let mut report = Report {
            not_produced: self.omitted.clone(),
            notes: Vec::new(),
        };
        for f in self.figures() {
            if let Err(why) = &f.figure {
                report.not_produced.push(Omission::new(
                    format!("{0}.svg, {0}.png", f.name),
                    why.clone(),
                ));
            }
            report.notes.extend(f.note);
        }
        if !self.gpa.converged {
            report.notes.push(format!(
                "the superimposition stopped after {} iterations without reaching the tolerance {} (last change {:e})",
                self.gpa.iterations, self.options.gpa.tolerance, self.gpa.final_change
            ));
        }
        report
    }

    /// Writes the figures that can be drawn as SVG and PNG into `dir` and returns the paths
    /// written; [`Self::report`] says which were left out and why.
    pub fn write_figures(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut written = Vec::new();
        for f in self.figures() {
            if let Ok(figure) = &f.figure {
                written.extend(save_figure(figure, &dir.join(f.name))?);
            }
        }
        Ok(written)
    }
}

fn no_variation() -> String {
    "no shape variation: every specimen has the same shape after superimposition, so there is no principal component to draw".into()
}

/// `2` for whole numbers, else two decimals.
fn sd_label(v: f64) -> String {
    if v.fract() == 0.0 {
        format!("{v}")
    } else {
        format!("{v:.2}")
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

/// Writes `stem.svg` and `stem.png`, each atomically.
pub(super) fn save_figure(f: &Figure, stem: &Path) -> Result<[PathBuf; 2], AnalysisError> {
    let svg = stem.with_extension("svg");
    write_atomic(&svg, |w| w.write_all(f.to_svg().as_bytes()))?;
    let png = stem.with_extension("png");
    crate::render::png::save_png(&png, f.width as usize, f.height as usize, &f.to_rgba()?)?;
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
}
