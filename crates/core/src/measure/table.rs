//! Measuring a whole project: every measurement of its scheme, for every specimen and trial.
//!
//! One [`Row`] per specimen × trial × measurement, in project order (specimens, their trials,
//! the scheme's measurements). A row has a value and a resolution, or a reason why it was
//! skipped: a landmark not yet digitised or marked missing, a curve not traced, or points
//! that coincide. Values that use estimated landmarks are computed and name them.
//!
//! CSV columns ([`write_csv`]), documented in the README:
//! `specimen, trial, operator, measurement, kind, unit, value, resolution, estimated_points,
//! status, reason`, then one `group_KEY` column per group label key used in the project
//! (sorted by key). `status` is `ok` or `skipped`; `value` and `resolution` are empty when
//! skipped; `estimated_points` lists estimated landmarks used, separated by `;`.

use nalgebra::Matrix3;
use std::collections::BTreeSet;
use std::path::Path;

use super::{Degenerate, Measured, angle, distance, point_to_line, polyline_length};
use crate::export::{ExportError, num, write_csv};
use crate::landmarks::project::{LandmarkState, Project, ScanRecord, Specimen, Trial};
use crate::landmarks::scheme::{MeasurementDef, MeasurementKind, Scheme};

/// One measurement of one trial.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    pub specimen: String,
    pub trial: String,
    pub operator: String,
    pub measurement: String,
    /// `distance`, `angle`, `point_to_line`, `curve_length`.
    pub kind: &'static str,
    /// `mm` or `deg`.
    pub unit: &'static str,
    /// The value and its resolution, or why there is none.
    pub result: Result<Measured, String>,
    /// Estimated landmarks the value rests on.
    pub estimated: Vec<String>,
}

/// Measures every trial of every specimen.
#[must_use]
pub fn measure_project(project: &Project) -> Vec<Row> {
    let scheme = project.scheme();
    project
        .specimens()
        .iter()
        .flat_map(|s| {
            s.trials
                .iter()
                .flat_map(move |t| measure_trial(scheme, s, t))
        })
        .collect()
}

/// Measures one trial of a specimen.
#[must_use]
pub fn measure_trial(scheme: &Scheme, specimen: &Specimen, trial: &Trial) -> Vec<Row> {
    let edges = voxel_edges(&specimen.scan);
    scheme
        .measurements
        .iter()
        .map(|def| {
            let (result, estimated) = measure_one(scheme, &edges, trial, def);
            Row {
                specimen: specimen.id.clone(),
                trial: trial.id.clone(),
                operator: trial.operator.clone(),
                measurement: def.id.clone(),
                kind: def.kind.name(),
                unit: def.kind.unit(),
                result,
                estimated,
            }
        })
        .collect()
}

/// The voxel edge vectors (columns of `world_from_voxel`'s linear part), mm.
#[must_use]
pub fn voxel_edges(scan: &ScanRecord) -> Matrix3<f64> {
    scan.world_from_voxel.linear()
}

fn measure_one(
    scheme: &Scheme,
    edges: &Matrix3<f64>,
    trial: &Trial,
    def: &MeasurementDef,
) -> (Result<Measured, String>, Vec<String>) {
    let mut estimated = Vec::new();
    let mut point = |id: &str| -> Result<[f64; 3], String> {
        match trial.landmark(id) {
            None => Err(format!("{id} not digitised")),
            Some(l) => match (l.state, l.position_mm) {
                (LandmarkState::Missing, _) | (_, None) => Err(format!("{id} missing")),
                (state, Some(p)) => {
                    if state == LandmarkState::Estimated && !estimated.iter().any(|e| e == id) {
                        estimated.push(id.to_owned());
                    }
                    Ok(p)
                }
            },
        }
    };
    let degenerate = |e: Degenerate| e.to_string();
    let result = match &def.kind {
        MeasurementKind::Distance { from, to } => point(from)
            .and_then(|a| Ok((a, point(to)?)))
            .and_then(|(a, b)| distance(edges, a, b).map_err(degenerate)),
        MeasurementKind::Angle { from, vertex, to } => point(from)
            .and_then(|a| Ok((a, point(vertex)?, point(to)?)))
            .and_then(|(a, b, c)| angle(edges, a, b, c).map_err(degenerate)),
        MeasurementKind::PointToLine { point: p, line } => point(p)
            .and_then(|q| Ok((q, point(&line[0])?, point(&line[1])?)))
            .and_then(|(q, a, b)| point_to_line(edges, q, a, b).map_err(degenerate)),
        MeasurementKind::CurveLength { curve } => {
            let def = scheme.curve(curve).expect("validated scheme");
            match trial.curve(curve) {
                None => Err(format!("curve {curve} not traced")),
                Some(c) => {
                    let mut poly = Vec::new();
                    let mut bad = None;
                    for (s, anchor) in def.anchors.iter().enumerate() {
                        match point(anchor) {
                            Ok(p) => poly.push(p),
                            Err(e) => {
                                bad.get_or_insert(e);
                            }
                        }
                        if let Some(traced) = c.traced_mm.get(s) {
                            poly.extend_from_slice(traced);
                        }
                    }
                    match bad {
                        Some(e) => Err(e),
                        None => polyline_length(edges, &poly).map_err(degenerate),
                    }
                }
            }
        }
    };
    (result, estimated)
}

/// The group label keys used anywhere in the project, sorted.
#[must_use]
pub fn group_keys(project: &Project) -> Vec<String> {
    let keys: BTreeSet<&String> = project
        .specimens()
        .iter()
        .flat_map(|s| s.groups.keys())
        .collect();
    keys.into_iter().cloned().collect()
}

/// The fixed leading columns of the measurements CSV.
pub const COLUMNS: [&str; 11] = [
    "specimen",
    "trial",
    "operator",
    "measurement",
    "kind",
    "unit",
    "value",
    "resolution",
    "estimated_points",
    "status",
    "reason",
];

/// The CSV's rows as text (header from [`COLUMNS`] and [`group_keys`]).
#[must_use]
pub fn csv_rows(project: &Project, rows: &[Row]) -> (Vec<String>, Vec<Vec<String>>) {
    let keys = group_keys(project);
    let mut header: Vec<String> = COLUMNS.iter().map(|s| (*s).to_owned()).collect();
    header.extend(keys.iter().map(|k| format!("group_{k}")));
    let out = rows
        .iter()
        .map(|r| {
            let (value, resolution, status, reason) = match &r.result {
                Ok(m) => (num(m.value), num(m.resolution), "ok", String::new()),
                Err(e) => (String::new(), String::new(), "skipped", e.clone()),
            };
            let mut row = vec![
                r.specimen.clone(),
                r.trial.clone(),
                r.operator.clone(),
                r.measurement.clone(),
                r.kind.to_owned(),
                r.unit.to_owned(),
                value,
                resolution,
                r.estimated.join(";"),
                status.to_owned(),
                reason,
            ];
            let groups = project.specimen(&r.specimen).map(|s| &s.groups);
            row.extend(
                keys.iter()
                    .map(|k| groups.and_then(|g| g.get(k)).cloned().unwrap_or_default()),
            );
            row
        })
        .collect();
    (header, out)
}

/// Writes the measurements CSV atomically (columns in the module docs).
pub fn write_csv_file(path: &Path, project: &Project, rows: &[Row]) -> Result<(), ExportError> {
    let (header, out) = csv_rows(project, rows);
    let h: Vec<&str> = header.iter().map(String::as_str).collect();
    write_csv(path, &h, &out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::landmarks::project::tests::{sample_project, ts};
    use crate::landmarks::project::{Edit, Method};

    #[test]
    fn rows_for_every_trial_and_measurement_with_reasons() {
        let mut p = sample_project();
        // sample: A trial 1 has tip (3,.2,.3), eye_L, back (.1,.2,.3); B has no trial
        let rows = measure_project(&p);
        assert_eq!(rows.len(), 1);
        let m = rows[0].result.as_ref().unwrap();
        assert!((m.value - 2.9).abs() < 1e-12, "{m:?}");
        assert!((m.resolution - 2f64.sqrt() * 0.036).abs() < 1e-15);
        Edit::MarkMissing {
            specimen: "A".into(),
            trial: "1".into(),
            landmark: "back".into(),
            at: ts(30),
        }
        .apply(&mut p)
        .unwrap();
        Edit::AddTrial {
            specimen: "B".into(),
            trial: Box::new(Trial::new("1", "bo", ts(31))),
            index: None,
        }
        .apply(&mut p)
        .unwrap();
        for (lm, pos, method) in [
            ("tip", [1.0, 1.0, 1.0], Method::Typed),
            ("back", [1.0, 4.0, 5.0], Method::Estimated),
        ] {
            Edit::SetLandmark {
                specimen: "B".into(),
                trial: "1".into(),
                landmark: lm.into(),
                position_mm: pos,
                method,
                pick: None,
                at: ts(32),
            }
            .apply(&mut p)
            .unwrap();
        }
        let rows = measure_project(&p);
        assert_eq!(rows[0].result, Err("back missing".to_owned()));
        assert!((rows[1].result.as_ref().unwrap().value - 5.0).abs() < 1e-12);
        assert_eq!(rows[1].estimated, vec!["back".to_owned()]);
        let (header, out) = csv_rows(&p, &rows);
        assert_eq!(header.last().unwrap(), "group_locality");
        assert_eq!(
            out[0],
            [
                "A",
                "1",
                "ana",
                "length",
                "distance",
                "mm",
                "",
                "",
                "",
                "skipped",
                "back missing",
                "north pit"
            ]
        );
        assert_eq!(out[1][6], "5");
        assert_eq!(out[1][8], "back");
        assert_eq!(out[1][9], "ok");
    }
}
