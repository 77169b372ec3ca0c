//! Measurement error with operator as a factor, over every trial of a project: the two-way
//! Procrustes ANOVA of shape, and the same for centroid size and each of the scheme's
//! measurements ([`crate::shape::anova::two_way`]). One call for the command line
//! (`sutura measurement-error`) and the workstation's analysis view.

use nalgebra::DMatrix;
use serde_json::json;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::{AnalysisError, AnalysisOptions, to_sample};
use crate::export::{ExportError, num, write_csv, write_json};
use crate::landmarks::Project;
use crate::landmarks::project::points::flatten;
use crate::measure::table::measure_project;
use crate::shape::anova::{OperatorAnova, procrustes_operator_anova, two_way};

/// One measurement's values with the individual and operator of each.
type Column = (Vec<f64>, Vec<usize>, Vec<usize>);

/// The operator ANOVAs of a project.
#[derive(Clone, Debug)]
pub struct OperatorError {
    pub shape: OperatorAnova,
    pub centroid_size: OperatorAnova,
    /// The multiplier of the shape degrees of freedom.
    pub shape_dims: usize,
    /// Per scheme measurement: its table, or why there is none.
    pub measurements: Vec<(String, Result<OperatorAnova, String>)>,
    pub operators: Vec<String>,
    pub notes: Vec<String>,
}

/// Runs the operator ANOVAs when the project's trials come from two or more operators
/// (`Ok(None)` otherwise). Missing landmarks are estimated as in the analysis.
pub fn operator_error(
    project: &Project,
    opts: &AnalysisOptions,
) -> Result<Option<OperatorError>, AnalysisError> {
    let sets = flatten(project, None, false);
    let mut op_ids: BTreeMap<&str, usize> = BTreeMap::new();
    for o in &sets.operators {
        let n = op_ids.len();
        op_ids.entry(o.as_str()).or_insert(n);
    }
    if op_ids.len() < 2 {
        return Ok(None);
    }
    let table = &sets.table;
    let mut ind_ids: BTreeMap<&str, usize> = BTreeMap::new();
    for o in &table.observations {
        let n = ind_ids.len();
        ind_ids.entry(o.specimen.as_str()).or_insert(n);
    }
    let individuals: Vec<usize> = table
        .observations
        .iter()
        .map(|o| ind_ids[o.specimen.as_str()])
        .collect();
    let operators: Vec<usize> = sets.operators.iter().map(|o| op_ids[o.as_str()]).collect();
    let all: Vec<usize> = (0..table.observations.len()).collect();
    let (sample, estimated) = to_sample(table, &all, opts)?;
    let mut notes = Vec::new();
    let n_est = estimated.iter().filter(|&&e| e).count();
    if n_est > 0 {
        notes.push(format!(
            "{n_est} missing landmark positions estimated before the ANOVA"
        ));
    }
    let pa = procrustes_operator_anova(&sample, &individuals, &operators, &opts.gpa)?;
    if !pa.shape.repeats {
        notes.push(
            "no specimen was digitised twice by one operator: the individual × operator \
             interaction is pooled with repeat error as the residual"
                .into(),
        );
    }
    if pa.shape.components.is_none() {
        notes.push(
            "the design is not balanced (every specimen the same number of times by every \
             operator): no variance shares"
                .into(),
        );
    }
    // measurements, by (specimen, trial)
    let rows = measure_project(project);
    // per measurement: values, their individuals, their operators
    let mut by_name: BTreeMap<String, Column> = BTreeMap::new();
    for def in &project.scheme().measurements {
        by_name.insert(def.id.clone(), (Vec::new(), Vec::new(), Vec::new()));
    }
    for r in &rows {
        let (Ok(m), Some(&i), Some(&o)) = (
            &r.result,
            ind_ids.get(r.specimen.as_str()),
            op_ids.get(r.operator.as_str()),
        ) else {
            continue;
        };
        if let Some(e) = by_name.get_mut(&r.measurement) {
            e.0.push(m.value);
            e.1.push(i);
            e.2.push(o);
        }
    }
    let measurements = project
        .scheme()
        .measurements
        .iter()
        .map(|def| {
            let (v, i, o) = &by_name[&def.id];
            let r = two_way(&DMatrix::from_column_slice(v.len(), 1, v), i, o, 1)
                .map_err(|e| e.to_string());
            (def.id.clone(), r)
        })
        .collect();
    let mut names: Vec<(usize, String)> =
        op_ids.iter().map(|(k, &v)| (v, (*k).to_owned())).collect();
    names.sort();
    Ok(Some(OperatorError {
        shape: pa.shape,
        centroid_size: pa.size,
        shape_dims: pa.shape_dims,
        measurements,
        operators: names.into_iter().map(|(_, n)| n).collect(),
        notes,
    }))
}

impl OperatorError {
    /// Every variable's table: shape, centroid size, then the measurements that have one.
    #[must_use]
    pub fn tables(&self) -> Vec<(&str, &OperatorAnova)> {
        let mut v = vec![
            ("shape", &self.shape),
            ("centroid_size", &self.centroid_size),
        ];
        for (name, r) in &self.measurements {
            if let Ok(t) = r {
                v.push((name.as_str(), t));
            }
        }
        v
    }

    /// Writes `operator_anova.csv` (`variable, term, ss, df, ms, f, p`),
    /// `operator_shares.csv` (`variable, individual_share, inter_operator_share,
    /// intra_operator_share`; balanced designs) and `operator_error.json`.
    pub fn write_tables(&self, dir: &Path) -> Result<Vec<PathBuf>, AnalysisError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut rows = Vec::new();
        let mut shares = Vec::new();
        for (name, t) in self.tables() {
            for term in &t.terms {
                rows.push(vec![
                    name.to_owned(),
                    term.term.to_owned(),
                    num(term.ss),
                    num(term.df),
                    num(term.ms),
                    term.f.map(num).unwrap_or_default(),
                    term.p.map(num).unwrap_or_default(),
                ]);
            }
            if let Some(c) = t.components {
                shares.push(vec![
                    name.to_owned(),
                    num(c.individual_share),
                    num(c.inter_operator_share),
                    num(c.intra_operator_share),
                ]);
            }
        }
        let anova = dir.join("operator_anova.csv");
        write_csv(
            &anova,
            &["variable", "term", "ss", "df", "ms", "f", "p"],
            &rows,
        )?;
        let sh = dir.join("operator_shares.csv");
        write_csv(
            &sh,
            &[
                "variable",
                "individual_share",
                "inter_operator_share",
                "intra_operator_share",
            ],
            &shares,
        )?;
        let js = dir.join("operator_error.json");
        write_json(
            &js,
            &json!({
                "operators": self.operators,
                "shape_dims": self.shape_dims,
                "shape": self.shape,
                "centroid_size": self.centroid_size,
                "measurements": self.measurements.iter().map(|(n, r)| match r {
                    Ok(t) => json!({"measurement": n, "anova": t}),
                    Err(e) => json!({"measurement": n, "not_computed": e}),
                }).collect::<Vec<_>>(),
                "notes": self.notes,
            }),
        )?;
        Ok(vec![anova, sh, js])
    }
}
