//! A project's landmarks as tables and arrays: the long and wide CSV (through
//! [`LandmarkTable`]), JSON, `NumPy` `.npy` with an index file, and PLY point sets.
//!
//! One observation per specimen × trial, in project order (trials with nothing digitised yet
//! are left out); landmarks in scheme order, then
//! (with semilandmarks) each curve's semilandmarks in curve order, named as
//! `CurveDef::semilandmark_names` says. A landmark not yet digitised is written as missing (and
//! counted in [`Export::not_digitised`] so the caller can say so); a curve not traced, or whose
//! anchors lack positions, gives missing semilandmarks.
//!
//! The `.npy` array is float64 of shape `(observations, points, 3)`, C order, NaN where a point
//! has no position. Its index file (`NAME.index.json` beside `NAME.npy`) says what the axes are:
//! `{"array", "shape", "axes", "units", "missing", "points", "observations": [{"index",
//! "specimen", "trial", "operator", "groups", "states"}]}`.

use serde::Serialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::ply::{NamedPoint, PointKind, write_ply};
use super::table::{LandmarkTable, Observation, State};
use super::{ExportError, write_json, write_npy_f64};
use crate::landmarks::project::{LandmarkState, Project};

/// A project's points, flattened.
#[derive(Clone, Debug, PartialEq)]
pub struct Export {
    pub table: LandmarkTable,
    /// Which points are semilandmarks (same order as `table.landmarks`).
    pub semilandmark: Vec<bool>,
    /// Per observation: operator and all group labels.
    pub operators: Vec<String>,
    pub groups: Vec<BTreeMap<String, String>>,
    /// Landmarks (not semilandmarks) absent from their trial, written as missing.
    pub not_digitised: usize,
}

/// Flattens a project. `group_key`: the group label copied into the table's `group` column.
#[must_use]
pub fn flatten(project: &Project, group_key: Option<&str>, with_semilandmarks: bool) -> Export {
    let scheme = project.scheme();
    let mut names: Vec<String> = scheme.landmarks.iter().map(|l| l.id.clone()).collect();
    let mut semilandmark = vec![false; names.len()];
    if with_semilandmarks {
        for c in &scheme.curves {
            let n = c.semilandmark_names();
            semilandmark.extend(std::iter::repeat_n(true, n.len()));
            names.extend(n);
        }
    }
    let mut observations = Vec::new();
    let (mut operators, mut groups) = (Vec::new(), Vec::new());
    let mut not_digitised = 0;
    for s in project.specimens() {
        for t in s
            .trials
            .iter()
            .filter(|t| !(t.landmarks.is_empty() && t.curves.is_empty()))
        {
            let mut coords = Vec::with_capacity(names.len());
            let mut states = Vec::with_capacity(names.len());
            for l in &scheme.landmarks {
                match t.landmark(&l.id) {
                    None => {
                        not_digitised += 1;
                        coords.push(None);
                        states.push(State::Missing);
                    }
                    Some(e) => {
                        coords.push(e.position_mm);
                        states.push(match e.state {
                            LandmarkState::Placed => State::Placed,
                            LandmarkState::Missing => State::Missing,
                            LandmarkState::Estimated => State::Estimated,
                        });
                    }
                }
            }
            if with_semilandmarks {
                for c in &scheme.curves {
                    let pts = t.curve(&c.id).and_then(|e| e.semilandmarks(c));
                    for i in 0..c.total_semilandmarks() {
                        let p = pts.as_ref().map(|v| v[i]);
                        coords.push(p);
                        states.push(if p.is_some() {
                            State::Placed
                        } else {
                            State::Missing
                        });
                    }
                }
            }
            observations.push(Observation {
                specimen: s.id.clone(),
                trial: t.id.clone(),
                group: group_key.and_then(|k| s.groups.get(k).cloned()),
                coords,
                states,
            });
            operators.push(t.operator.clone());
            groups.push(s.groups.clone());
        }
    }
    Export {
        table: LandmarkTable {
            dim: 3,
            landmarks: names,
            observations,
        },
        semilandmark,
        operators,
        groups,
        not_digitised,
    }
}

#[derive(Serialize)]
struct JsonPoint<'a> {
    point: &'a str,
    kind: &'static str,
    state: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    position_mm: Option<[f64; 3]>,
}

#[derive(Serialize)]
struct JsonObservation<'a> {
    specimen: &'a str,
    trial: &'a str,
    operator: &'a str,
    groups: &'a BTreeMap<String, String>,
    points: Vec<JsonPoint<'a>>,
}

impl Export {
    /// Writes the JSON export: `{"scheme", "units", "observations": [{"specimen", "trial",
    /// "operator", "groups", "points": [{"point", "kind", "state", "position_mm"}]}]}`.
    pub fn write_json(&self, path: &Path, scheme_id: &str) -> Result<(), ExportError> {
        let obs: Vec<JsonObservation> = self
            .table
            .observations
            .iter()
            .enumerate()
            .map(|(o, ob)| JsonObservation {
                specimen: &ob.specimen,
                trial: &ob.trial,
                operator: &self.operators[o],
                groups: &self.groups[o],
                points: self
                    .table
                    .landmarks
                    .iter()
                    .enumerate()
                    .map(|(i, name)| JsonPoint {
                        point: name,
                        kind: if self.semilandmark[i] {
                            "semilandmark"
                        } else {
                            "landmark"
                        },
                        state: ob.states[i].name(),
                        position_mm: ob.coords[i],
                    })
                    .collect(),
            })
            .collect();
        write_json(
            path,
            &serde_json::json!({
                "scheme": scheme_id,
                "units": "mm",
                "observations": obs,
            }),
        )
    }

    /// Writes `path` (`.npy`) and its index file; returns the index file's path.
    pub fn write_npy(&self, path: &Path) -> Result<PathBuf, ExportError> {
        let t = &self.table;
        let (n, k) = (t.observations.len(), t.landmarks.len());
        let mut data = Vec::with_capacity(n * k * 3);
        for o in &t.observations {
            for c in &o.coords {
                data.extend_from_slice(&c.unwrap_or([f64::NAN; 3]));
            }
        }
        write_npy_f64(path, &[n as u64, k as u64, 3], &data)?;
        let index = index_path(path);
        let observations: Vec<serde_json::Value> = t
            .observations
            .iter()
            .enumerate()
            .map(|(i, o)| {
                serde_json::json!({
                    "index": i,
                    "specimen": o.specimen,
                    "trial": o.trial,
                    "operator": self.operators[i],
                    "groups": self.groups[i],
                    "states": o.states.iter().map(|s| s.name()).collect::<Vec<_>>(),
                })
            })
            .collect();
        write_json(
            &index,
            &serde_json::json!({
                "array": path.file_name().map(|f| f.to_string_lossy().into_owned()),
                "shape": [n, k, 3],
                "axes": ["observation", "point", "coordinate"],
                "coordinates": ["x", "y", "z"],
                "units": "mm",
                "missing": "NaN",
                "points": t.landmarks,
                "semilandmark": self.semilandmark,
                "observations": observations,
            }),
        )?;
        Ok(index)
    }

    /// Writes one PLY file per observation into `dir` as `SPECIMEN_TRIAL.ply`; returns the
    /// files written.
    pub fn write_ply_sets(&self, dir: &Path) -> Result<Vec<PathBuf>, ExportError> {
        std::fs::create_dir_all(dir).map_err(|e| ExportError::os(dir, e))?;
        let mut out = Vec::new();
        for o in &self.table.observations {
            let points: Vec<NamedPoint> = self
                .table
                .landmarks
                .iter()
                .enumerate()
                .map(|(i, name)| NamedPoint {
                    name: name.clone(),
                    position_mm: o.coords[i],
                    kind: if self.semilandmark[i] {
                        PointKind::Semilandmark
                    } else if o.states[i] == State::Estimated {
                        PointKind::Estimated
                    } else {
                        PointKind::Placed
                    },
                })
                .collect();
            let path = dir.join(format!("{}_{}.ply", o.specimen, o.trial));
            write_ply(
                &path,
                &format!(
                    "sutura landmarks: specimen {} trial {}",
                    o.specimen, o.trial
                ),
                &points,
            )?;
            out.push(path);
        }
        Ok(out)
    }
}

/// `NAME.index.json` beside `NAME.npy`.
#[must_use]
pub fn index_path(npy: &Path) -> PathBuf {
    npy.with_extension("index.json")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::landmarks::project::tests::sample_project;

    #[test]
    fn flattens_in_scheme_order_with_semilandmarks() {
        let p = sample_project();
        let e = flatten(&p, Some("locality"), true);
        // 4 landmarks, then outline's 3 + 2 semilandmarks
        assert_eq!(e.table.landmarks.len(), 9);
        assert_eq!(e.table.landmarks[4], "outline_s01");
        assert_eq!(e.table.observations.len(), 1, "B has no trial");
        let o = &e.table.observations[0];
        assert_eq!(o.group.as_deref(), Some("north pit"));
        assert_eq!(o.coords[0], Some([3.0, 0.2, 0.3]));
        assert_eq!(o.states[2], State::Missing, "eye_R not digitised");
        assert_eq!(e.not_digitised, 1);
        assert!(o.coords[4..].iter().all(Option::is_some));
        let dir = tempfile::tempdir().unwrap();
        let npy = dir.path().join("lm.npy");
        let idx = e.write_npy(&npy).unwrap();
        assert_eq!(idx, dir.path().join("lm.index.json"));
        let index: serde_json::Value =
            serde_json::from_slice(&std::fs::read(&idx).unwrap()).unwrap();
        assert_eq!(index["shape"], serde_json::json!([1, 9, 3]));
        assert_eq!(index["observations"][0]["states"][2], "missing");
        let plys = e.write_ply_sets(&dir.path().join("ply")).unwrap();
        assert_eq!(plys.len(), 1);
        assert!(plys[0].ends_with("A_1.ply"));
    }
}
