//! `sutura superimpose`: generalized Procrustes analysis of a landmark table, with the
//! morphospace, disparity, distances and measurement error, written as CSV/JSON/NPY and charts.

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};
use nalgebra::DMatrix;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use crate::chart::plots;
use crate::export::table::{LandmarkTable, Observation, State};
use crate::export::{num, write_csv, write_json, write_npy_f64};
use crate::shape::disparity::{self, Divisor};
use crate::shape::distance::{Distance, distance_matrix};
use crate::shape::missing::{MissingMethod, MissingOptions, estimate_missing};
use crate::shape::{Fit, GpaOptions, Sample, anova, gpa, pca, tangent};

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

/// One observation per specimen for the sample statistics: the first trial listed.
fn first_trials(t: &LandmarkTable) -> Vec<usize> {
    let mut seen = std::collections::HashSet::new();
    (0..t.observations.len())
        .filter(|&i| seen.insert(t.observations[i].specimen.clone()))
        .collect()
}

fn to_sample(
    t: &LandmarkTable,
    idx: &[usize],
    fill: FillArg,
    gopts: &GpaOptions,
) -> Result<(Sample, Vec<bool>)> {
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
    let method = match fill {
        FillArg::Tps => MissingMethod::ThinPlateSpline,
        FillArg::Regression => MissingMethod::Regression { ridge: 0.0 },
    };
    let filled = estimate_missing(
        &sample,
        &missing,
        &MissingOptions {
            method,
            gpa: *gopts,
        },
    )
    .context("estimating missing landmarks")?;
    Ok((filled.sample, filled.estimated))
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
    std::fs::create_dir_all(&a.output).with_context(|| a.output.display().to_string())?;
    let gopts = GpaOptions {
        fit: match a.fit {
            FitArg::Partial => Fit::Partial,
            FitArg::Full => Fit::Full,
        },
        tolerance: a.tolerance,
        ..GpaOptions::default()
    };
    let idx = first_trials(&table);
    if idx.len() < 3 {
        bail!(
            "{}: {} specimens; a superimposition needs at least 3",
            a.table.display(),
            idx.len()
        );
    }
    let (sample, estimated) = to_sample(&table, &idx, a.fill, &gopts)?;
    let g = gpa(&sample, &gopts)?;
    let obs: Vec<&Observation> = idx.iter().map(|&i| &table.observations[i]).collect();
    let groups: Vec<String> = obs
        .iter()
        .map(|o| o.group.clone().unwrap_or_else(|| "all".into()))
        .collect();
    let (k, m) = (sample.k(), sample.m());
    let out = |name: &str| a.output.join(name);

    // aligned coordinates, long / wide / npy
    let aligned = LandmarkTable {
        dim: m,
        landmarks: table.landmarks.clone(),
        observations: obs
            .iter()
            .enumerate()
            .map(|(s, o)| Observation {
                specimen: o.specimen.clone(),
                trial: o.trial.clone(),
                group: o.group.clone(),
                coords: (0..k)
                    .map(|l| {
                        let c = g.aligned.config_slice(s);
                        let mut p = [0.0; 3];
                        p[..m].copy_from_slice(&c[l * m..(l + 1) * m]);
                        Some(p)
                    })
                    .collect(),
                states: (0..k)
                    .map(|l| {
                        if estimated[s * k + l] {
                            State::Estimated
                        } else {
                            o.states[l]
                        }
                    })
                    .collect(),
            })
            .collect(),
    };
    aligned.write_long_csv(&out("aligned_long.csv"))?;
    aligned.write_wide_csv(&out("aligned_wide.csv"))?;
    write_npy_f64(
        &out("aligned.npy"),
        &[sample.n() as u64, k as u64, m as u64],
        g.aligned.data(),
    )?;
    let id_rows: Vec<Vec<String>> = obs
        .iter()
        .zip(&g.centroid_sizes)
        .zip(&groups)
        .enumerate()
        .map(|(s, ((o, cs), gr))| {
            let n_est = (0..k).filter(|l| estimated[s * k + l]).count();
            vec![
                s.to_string(),
                o.specimen.clone(),
                o.trial.clone(),
                gr.clone(),
                num(*cs),
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

    // morphospace
    let tan = tangent::tangent_coordinates(&g);
    let p = pca::pca(&tan)?;
    let ncomp = p.variances.len();
    let mut header: Vec<String> = vec!["specimen".into(), "trial".into(), "group".into()];
    header.extend((1..=ncomp).map(|c| format!("PC{c}")));
    let rows: Vec<Vec<String>> = (0..sample.n())
        .map(|s| {
            let mut r = vec![
                obs[s].specimen.clone(),
                obs[s].trial.clone(),
                groups[s].clone(),
            ];
            r.extend((0..ncomp).map(|c| num(p.scores[(s, c)])));
            r
        })
        .collect();
    write_csv(
        &out("pc_scores.csv"),
        &header.iter().map(String::as_str).collect::<Vec<_>>(),
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
                table.landmarks[r / m].clone(),
                ["x", "y", "z"][r % m].to_owned(),
            ];
            row.extend((0..ncomp).map(|c| num(p.loadings[(r, c)])));
            row
        })
        .collect();
    let mut lh: Vec<String> = vec!["landmark".into(), "axis".into()];
    lh.extend((1..=ncomp).map(|c| format!("PC{c}")));
    write_csv(
        &out("pc_loadings.csv"),
        &lh.iter().map(String::as_str).collect::<Vec<_>>(),
        &load_rows,
    )?;

    // disparity per group with bootstrap intervals, partial disparity, group test
    let by_group = disparity::disparity_by_group(&tan, &groups, Divisor::NMinusOne)?;
    let (partials, total) = disparity::partial_disparity(&tan, &groups)?;
    let gi = disparity::group_indices(&groups);
    let mut disp_rows = Vec::new();
    let (mut names, mut est, mut lo, mut hi) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for (d, pd) in by_group.iter().zip(&partials) {
        let iv = disparity::bootstrap(
            &tan,
            &gi[&d.label],
            Divisor::NMinusOne,
            a.resamples,
            0.95,
            a.seed,
        )?;
        disp_rows.push(vec![
            d.label.clone(),
            d.n.to_string(),
            num(d.procrustes_variance),
            num(iv.lower),
            num(iv.upper),
            iv.resamples.to_string(),
            num(d.sum_of_variances),
            num(pd.partial),
            num(pd.share),
        ]);
        names.push(d.label.clone());
        est.push(d.procrustes_variance);
        lo.push(iv.lower);
        hi.push(iv.upper);
    }
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
            a.resamples,
            a.seed,
        )?)
    } else {
        None
    };

    // distances
    let dm = distance_matrix(&g.aligned, Distance::Angle)?;
    let labels: Vec<String> = obs.iter().map(|o| o.specimen.clone()).collect();
    let mut dh: Vec<String> = vec!["specimen".into()];
    dh.extend(labels.iter().cloned());
    let drows: Vec<Vec<String>> = (0..sample.n())
        .map(|i| {
            let mut r = vec![labels[i].clone()];
            r.extend((0..sample.n()).map(|j| num(dm[(i, j)])));
            r
        })
        .collect();
    write_csv(
        &out("procrustes_distances.csv"),
        &dh.iter().map(String::as_str).collect::<Vec<_>>(),
        &drows,
    )?;

    let allo = pca::allometry(&tan, &g.centroid_sizes, a.resamples, a.seed)?;

    // measurement error over repeated trials
    let anova_summary = measurement_error(&table, a.fill, &gopts, &out("anova.csv"))?;

    write_json(
        &out("summary.json"),
        &serde_json::json!({
            "table": a.table.display().to_string(),
            "specimens": sample.n(), "landmarks": k, "dims": m,
            "fit": format!("{:?}", gopts.fit).to_lowercase(), "tolerance": a.tolerance,
            "iterations": g.iterations, "converged": g.converged, "final_change": g.final_change,
            "estimated_landmarks": estimated.iter().filter(|&&e| e).count(),
            "total_procrustes_variance": total,
            "disparity_divisor": "n - 1",
            "group_difference_test": group_test,
            "allometry": {"r_squared": allo.r_squared, "p_value": allo.p_value, "permutations": allo.permutations},
            "measurement_error": anova_summary,
        }),
    )?;

    // charts
    if ncomp >= 2 {
        let xs: Vec<f64> = (0..sample.n()).map(|s| p.scores[(s, 0)]).collect();
        let ys: Vec<f64> = (0..sample.n()).map(|s| p.scores[(s, 1)]).collect();
        let f = plots::scatter_with_hulls(
            &xs,
            &ys,
            &groups,
            &format!("PC1 ({:.1}%)", 100.0 * p.proportions[0]),
            &format!("PC2 ({:.1}%)", 100.0 * p.proportions[1]),
            "Morphospace",
        );
        save_figure(&f, &out("morphospace"))?;
    }
    save_figure(
        &plots::intervals(
            &names,
            &est,
            &lo,
            &hi,
            "Procrustes variance (95% bootstrap interval)",
            "Disparity by group",
        ),
        &out("disparity"),
    )?;
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
    save_figure(
        &plots::wireframes(&shapes, &edges, (0, 1), &format!("PC1 shapes (SD {sd:.4})")),
        &out("pc1_shapes"),
    )?;

    eprintln!(
        "superimposed {} specimens x {} landmarks in {} iterations (converged: {}); results in {}",
        sample.n(),
        k,
        g.iterations,
        g.converged,
        a.output.display()
    );
    Ok(())
}

fn measurement_error(
    t: &LandmarkTable,
    fill: FillArg,
    gopts: &GpaOptions,
    path: &Path,
) -> Result<serde_json::Value> {
    let mut ids: BTreeMap<&str, usize> = BTreeMap::new();
    for o in &t.observations {
        let n = ids.len();
        ids.entry(o.specimen.as_str()).or_insert(n);
    }
    let repeated = t.observations.len() > ids.len();
    if !repeated {
        return Ok(serde_json::Value::Null);
    }
    let all: Vec<usize> = (0..t.observations.len()).collect();
    let labels: Vec<usize> = t
        .observations
        .iter()
        .map(|o| ids[o.specimen.as_str()])
        .collect();
    let (sample, _) = to_sample(t, &all, fill, gopts)?;
    let pa = anova::procrustes_anova(&sample, &labels, gopts)?;
    let row = |term: &str, tab: &anova::AnovaTable| {
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
    )?;
    Ok(serde_json::json!({
        "shape_repeatability": pa.shape.repeatability,
        "size_repeatability": pa.size.repeatability,
        "individuals": pa.shape.individuals,
        "measurements": pa.shape.measurements,
    }))
}

fn to_points(c: &DMatrix<f64>, m: usize) -> Vec<[f64; 3]> {
    (0..c.nrows())
        .map(|r| {
            let mut p = [0.0; 3];
            for d in 0..m {
                p[d] = c[(r, d)];
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
    let mut best = vec![(f64::INFINITY, 0usize); n];
    in_tree[0] = true;
    for j in 1..n {
        best[j] = (d(0, j), 0);
    }
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

fn save_figure(f: &crate::chart::Figure, stem: &Path) -> Result<()> {
    let svg = stem.with_extension("svg");
    crate::export::write_atomic(&svg, |w| w.write_all(f.to_svg().as_bytes()))?;
    crate::render::png::save_png(
        &stem.with_extension("png"),
        f.width as usize,
        f.height as usize,
        &f.to_rgba(),
    )?;
    Ok(())
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
