//! Named point sets (a project's landmarks) as files: the long and wide CSV (through
//! [`LandmarkTable`]), JSON, `NumPy` `.npy` with an index file, and PLY point sets.
//! `landmarks::project::points::flatten` fills a [`PointSets`] from a project; this module only
//! writes it, so `export` does not depend on `landmarks`.
//!
//! The `.npy` array is float64 of shape `(observations, points, 3)`, C order, NaN where a point
//! has no position. Its index file (`NAME.index.json` beside `NAME.npy`) says what the axes are:
//! `{"array", "shape", "axes", "units", "missing", "points", "semilandmark", "observations":
//! [{"index", "specimen", "trial", "operator", "groups", "states"}]}`.

use serde::Serialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::ply::{NamedPoint, PointKind, write_ply};
use super::table::{LandmarkTable, State};
use super::{ExportError, write_json, write_npy_f64};

/// Observations of named points with their metadata, ready to write.
#[derive(Clone, Debug, PartialEq)]
pub struct PointSets {
    pub table: LandmarkTable,
    /// Which points are semilandmarks (same order as `table.landmarks`).
    pub semilandmark: Vec<bool>,
    /// Per observation: operator and all group labels.
    pub operators: Vec<String>,
    pub groups: Vec<BTreeMap<String, String>>,
    /// Landmarks (not semilandmarks) absent from their trial, written as missing.
    pub not_digitised: usize,
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

impl PointSets {
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
    use crate::export::table::Observation;

    fn sets() -> PointSets {
        PointSets {
            table: LandmarkTable {
                dim: 3,
                landmarks: vec!["tip".into(), "eye".into(), "c_s01".into()],
                observations: vec![Observation {
                    specimen: "A".into(),
                    trial: "1".into(),
                    group: None,
                    coords: vec![Some([1.0, 2.0, 3.0]), None, Some([0.5, 0.25, 0.0])],
                    states: vec![State::Placed, State::Missing, State::Placed],
                }],
            },
            semilandmark: vec![false, false, true],
            operators: vec!["ana".into()],
            groups: vec![[("locality".to_owned(), "pit".to_owned())].into()],
            not_digitised: 1,
        }
    }

    #[test]
    fn npy_index_json_and_ply() {
        let e = sets();
        let dir = tempfile::tempdir().unwrap();
        let npy = dir.path().join("lm.npy");
        let idx = e.write_npy(&npy).unwrap();
        assert_eq!(idx, dir.path().join("lm.index.json"));
        let index: serde_json::Value =
            serde_json::from_slice(&std::fs::read(&idx).unwrap()).unwrap();
        assert_eq!(index["shape"], serde_json::json!([1, 3, 3]));
        assert_eq!(index["observations"][0]["states"][1], "missing");
        assert_eq!(index["observations"][0]["groups"]["locality"], "pit");
        assert_eq!(
            index["semilandmark"],
            serde_json::json!([false, false, true])
        );
        let b = std::fs::read(&npy).unwrap();
        let data: Vec<f64> = b[b.len() - 72..]
            .chunks(8)
            .map(|c| f64::from_le_bytes(c.try_into().unwrap()))
            .collect();
        assert_eq!(&data[..3], &[1.0, 2.0, 3.0]);
        assert!(data[3..6].iter().all(|v| v.is_nan()));
        let j = dir.path().join("lm.json");
        e.write_json(&j, "s").unwrap();
        let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&j).unwrap()).unwrap();
        assert_eq!(v["observations"][0]["points"][2]["kind"], "semilandmark");
        assert!(
            v["observations"][0]["points"][1]
                .get("position_mm")
                .is_none()
        );
        let plys = e.write_ply_sets(&dir.path().join("ply")).unwrap();
        assert_eq!(plys.len(), 1);
        assert!(plys[0].ends_with("A_1.ply"));
        let text = std::fs::read_to_string(&plys[0]).unwrap();
        assert!(text.contains("element vertex 2\n") && text.contains("comment missing eye"));
    }
}
