//! Landmark tables: the long CSV (one row per specimen × trial × landmark).
//!
//! Columns (header names, any order; extra columns are ignored):
//! - `specimen` (required): the specimen id;
//! - `trial` (optional, default `1`): the digitisation trial, for measurement error;
//! - `landmark` (required): the landmark id;
//! - `x`, `y` (required), `z` (optional: without it the table is 2D), in mm;
//! - `state` (optional): `placed`, `missing` or `estimated`. A row marked missing is missing
//!   whatever coordinates it holds; a row without a state and without coordinates (empty, `NaN`
//!   or `NA`) is missing; a row marked placed or estimated must have all its coordinates, and
//!   a row with some coordinates but not all is refused;
//! - `group` (optional): a group label of the specimen (all its rows must agree).
//!
//! Every specimen × trial must name the same landmarks; the order of first appearance fixes the
//! order of landmarks and of observations.

use super::{ExportError, num, write_csv};
use crate::message::quoted;
use serde::Serialize;
use std::collections::HashMap;
use std::path::Path;

/// How a landmark's position came about.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum State {
    Placed,
    Missing,
    Estimated,
}

impl State {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Placed => "placed",
            Self::Missing => "missing",
            Self::Estimated => "estimated",
        }
    }
}

/// One digitisation of one specimen.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Observation {
    pub specimen: String,
    pub trial: String,
    pub group: Option<String>,
    /// Per landmark, in the table's landmark order: coordinates (`dim` used) or `None`.
    pub coords: Vec<Option<[f64; 3]>>,
    pub states: Vec<State>,
}

/// A whole landmark table.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LandmarkTable {
    pub dim: usize,
    pub landmarks: Vec<String>,
    pub observations: Vec<Observation>,
}

impl LandmarkTable {
    /// Reads a long CSV.
    #[allow(
        clippy::too_many_lines,
        reason = "one pass over the rows with its checks in order"
    )]
    pub fn read_csv(path: &Path) -> Result<Self, ExportError> {
        type Rows = Vec<(usize, Option<[f64; 3]>, State)>;
        crate::io::require_regular_file(path).map_err(|e| ExportError::os(path, e))?;
        let mut rdr = csv::ReaderBuilder::new()
            .trim(csv::Trim::All)
            .from_path(path)
            .map_err(|e| csv_error(path, &e))?;
        let headers = rdr.headers().map_err(|e| csv_error(path, &e))?.clone();
        let col = |name: &str| headers.iter().position(|h| h.eq_ignore_ascii_case(name));
        let need = |name: &str| {
            col(name).ok_or_else(|| {
                ExportError::format(
                    path,
                    format!(
                        "no '{name}' column (header: {})",
                        headers.iter().collect::<Vec<_>>().join(",")
                    ),
                )
            })
        };
        let (c_spec, c_lm, c_x, c_y) =
            (need("specimen")?, need("landmark")?, need("x")?, need("y")?);
        let (c_trial, c_z, c_state, c_group) = (col("trial"), col("z"), col("state"), col("group"));
        let dim = if c_z.is_some() { 3 } else { 2 };

        let mut landmarks: Vec<String> = Vec::new();
        let mut lm_index: HashMap<String, usize> = HashMap::new();
        let mut obs_order: Vec<(String, String)> = Vec::new();
        let mut obs_rows: HashMap<(String, String), (Option<String>, Rows)> = HashMap::new();

        for (n, rec) in rdr.records().enumerate() {
            let line = n + 2;
            let rec = rec.map_err(|e| csv_error(path, &e))?;
            let field = |c: usize| rec.get(c).unwrap_or("");
            let at = |what: String| ExportError::format(path, format!("line {line}: {what}"));
            let spec = field(c_spec).to_owned();
            let lm = field(c_lm).to_owned();
            if spec.is_empty() || lm.is_empty() {
                return Err(at("empty specimen or landmark".into()));
            }
            let trial = c_trial.map_or("1", field).to_owned();
            let trial = if trial.is_empty() {
                "1".to_owned()
            } else {
                trial
            };
            // each coordinate: a number, or absent (empty, NaN or NA: common practice for a
            // missing value in landmark tables)
            let parse = |c: usize, name: &str| -> Result<Result<f64, String>, ExportError> {
                let t = field(c);
                if t.is_empty() {
                    return Ok(Err("empty".into()));
                }
                if t.eq_ignore_ascii_case("nan") || t.eq_ignore_ascii_case("na") {
                    return Ok(Err(quoted(t)));
                }
                t.parse::<f64>()
                    .ok()
                    .filter(|v| v.is_finite())
                    .map(Ok)
                    .ok_or_else(|| at(format!("{name} = {} is not a finite number", quoted(t))))
            };
            let mut cells = vec![("x", parse(c_x, "x")?), ("y", parse(c_y, "y")?)];
            if let Some(c) = c_z {
                cells.push(("z", parse(c, "z")?));
            }
            let state_cell = c_state.map_or("", field);
            let state = match state_cell {
                "" | "placed" => State::Placed,
                "missing" => State::Missing,
                "estimated" => State::Estimated,
                s => {
                    return Err(at(format!(
                        "state {} is not placed, missing or estimated",
                        quoted(s)
                    )));
                }
            };
            let absent: Vec<(&str, &String)> = cells
                .iter()
                .filter_map(|(n, c)| c.as_ref().err().map(|why| (*n, why)))
                .collect();
            let (coords, state) = if state == State::Missing {
                // a row marked missing is missing, whatever coordinates it still holds
                (None, State::Missing)
            } else if absent.is_empty() {
                let mut p = [0.0; 3];
                for (slot, (_, c)) in p.iter_mut().zip(&cells) {
                    *slot = *c.as_ref().unwrap_or(&0.0);
                }
                (Some(p), state)
            } else if absent.len() < cells.len() {
                let given: Vec<&str> = cells
                    .iter()
                    .filter(|(_, c)| c.is_ok())
                    .map(|(n, _)| *n)
                    .collect();
                let (n, why) = absent[0];
                return Err(at(format!(
                    "{lm}: {n} is {why} but {} {} given; a landmark has all its coordinates, or none (state missing)",
                    given.join(" and "),
                    if given.len() == 1 { "is" } else { "are" }
                )));
            } else if state_cell.is_empty() {
                (None, State::Missing)
            } else {
                return Err(at(format!(
                    "{lm} is marked {state_cell} but has no coordinates; give them, or mark it missing"
                )));
            };
            let li = *lm_index.entry(lm.clone()).or_insert_with(|| {
                landmarks.push(lm.clone());
                landmarks.len() - 1
            });
            let key = (spec.clone(), trial.clone());
            let group = c_group
                .map(field)
                .filter(|g| !g.is_empty())
                .map(str::to_owned);
            let entry = obs_rows.entry(key.clone()).or_insert_with(|| {
                obs_order.push(key.clone());
                (group.clone(), Vec::new())
            });
            if entry.0 != group {
                return Err(at(format!("specimen {spec} has two group labels")));
            }
            if entry.1.iter().any(|r| r.0 == li) {
                return Err(at(format!(
                    "landmark {lm} given twice for specimen {spec} trial {trial}"
                )));
            }
            entry.1.push((li, coords, state));
        }
        if obs_order.is_empty() {
            return Err(ExportError::format(path, "no landmark rows"));
        }
        let k = landmarks.len();
        let mut observations = Vec::with_capacity(obs_order.len());
        for key in obs_order {
            let (group, rows) = obs_rows.remove(&key).expect("key recorded");
            if rows.len() != k {
                let have: Vec<usize> = rows.iter().map(|r| r.0).collect();
                let lacking: Vec<&str> = (0..k)
                    .filter(|i| !have.contains(i))
                    .map(|i| landmarks[i].as_str())
                    .collect();
                return Err(ExportError::format(
                    path,
                    format!(
                        "specimen {} trial {} lacks rows for {} (write them with state missing)",
                        key.0,
                        key.1,
                        lacking.join(", ")
                    ),
                ));
            }
            let mut coords = vec![None; k];
            let mut states = vec![State::Missing; k];
            for (li, c, s) in rows {
                coords[li] = c;
                states[li] = s;
            }
            observations.push(Observation {
                specimen: key.0,
                trial: key.1,
                group,
                coords,
                states,
            });
        }
        Ok(Self {
            dim,
            landmarks,
            observations,
        })
    }

    /// Writes the long CSV (the format [`Self::read_csv`] reads).
    pub fn write_long_csv(&self, path: &Path) -> Result<(), ExportError> {
        let mut header = vec!["specimen", "trial", "group", "landmark", "x", "y"];
        if self.dim == 3 {
            header.push("z");
        }
        header.push("state");
        let mut rows = Vec::new();
        for o in &self.observations {
            for (li, lm) in self.landmarks.iter().enumerate() {
                let mut r = vec![
                    o.specimen.clone(),
                    o.trial.clone(),
                    o.group.clone().unwrap_or_default(),
                    lm.clone(),
                ];
                let c = o.coords[li].unwrap_or([f64::NAN; 3]);
                r.extend(c[..self.dim].iter().map(|&v| num(v)));
                r.push(o.states[li].name().to_owned());
                rows.push(r);
            }
        }
        write_csv(path, &header, &rows)
    }

    /// Writes the wide CSV: one row per specimen × trial, columns `LM_x, LM_y[, LM_z]` per
    /// landmark; missing coordinates are empty.
    pub fn write_wide_csv(&self, path: &Path) -> Result<(), ExportError> {
        let axes = ["x", "y", "z"];
        let mut names: Vec<String> = vec!["specimen".into(), "trial".into(), "group".into()];
        for lm in &self.landmarks {
            for a in &axes[..self.dim] {
                names.push(format!("{lm}_{a}"));
            }
        }
        let header: Vec<&str> = names.iter().map(String::as_str).collect();
        let rows: Vec<Vec<String>> = self
            .observations
            .iter()
            .map(|o| {
                let mut r = vec![
                    o.specimen.clone(),
                    o.trial.clone(),
                    o.group.clone().unwrap_or_default(),
                ];
                for c in &o.coords {
                    let c = c.unwrap_or([f64::NAN; 3]);
                    r.extend(c[..self.dim].iter().map(|&v| num(v)));
                }
                r
            })
            .collect();
        write_csv(path, &header, &rows)
    }
}

fn csv_error(path: &Path, e: &csv::Error) -> ExportError {
    let line = |pos: &Option<csv::Position>| {
        pos.as_ref()
            .map_or_else(String::new, |p| format!("line {}: ", p.line()))
    };
    let what = match e.kind() {
        csv::ErrorKind::Utf8 { pos, err } => format!(
            "{}field {} is not UTF-8 text (save the table as UTF-8)",
            line(pos),
            err.field() + 1
        ),
        csv::ErrorKind::UnequalLengths {
            pos,
            expected_len,
            len,
        } => format!(
            "{}{len} fields where the rows before have {expected_len}",
            line(pos)
        ),
        csv::ErrorKind::Io(io) => {
            return ExportError::os(path, std::io::Error::new(io.kind(), io.to_string()));
        }
        _ => format!("not a readable CSV: {e}"),
    };
    ExportError::format(path, what)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write(dir: &Path, text: &str) -> std::path::PathBuf {
        let p = dir.join("lm.csv");
        std::fs::write(&p, text).unwrap();
        p
    }

    #[test]
    fn reads_and_round_trips() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(
            dir.path(),
            "specimen,trial,landmark,x,y,z,state,group\n\
             a,1,tip,1,2,3,,north\n a,1,base,4,5,6,placed,north\n\
             b,1,tip,,,,missing,south\n b,1,base,7,8,9,estimated,south\n",
        );
        let t = LandmarkTable::read_csv(&p).unwrap();
        assert_eq!(t.dim, 3);
        assert_eq!(t.landmarks, vec!["tip", "base"]);
        assert_eq!(t.observations.len(), 2);
        assert_eq!(t.observations[1].coords[0], None);
        assert_eq!(
            t.observations[1].states,
            vec![State::Missing, State::Estimated]
        );
        assert_eq!(t.observations[0].group.as_deref(), Some("north"));
        let q = dir.path().join("out.csv");
        t.write_long_csv(&q).unwrap();
        assert_eq!(LandmarkTable::read_csv(&q).unwrap(), t);
        let w = dir.path().join("wide.csv");
        t.write_wide_csv(&w).unwrap();
        let text = std::fs::read_to_string(&w).unwrap();
        assert!(
            text.starts_with("specimen,trial,group,tip_x,tip_y,tip_z,base_x"),
            "{text}"
        );
        assert!(text.contains("b,1,south,,,,7,8,9"), "{text}");
    }

    #[test]
    fn errors_name_the_line() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "specimen,landmark,x,y\na,tip,1,zz\n");
        let e = LandmarkTable::read_csv(&p).unwrap_err().to_string();
        assert!(e.contains("line 2") && e.contains("'zz'"), "{e}");
        let p = write(
            dir.path(),
            "specimen,landmark,x,y\na,tip,1,2\na,base,1,2\nb,tip,1,2\n",
        );
        let e = LandmarkTable::read_csv(&p).unwrap_err().to_string();
        assert!(e.contains("lacks rows for base"), "{e}");
        let p = write(dir.path(), "specimen,x,y\na,1,2\n");
        assert!(
            LandmarkTable::read_csv(&p)
                .unwrap_err()
                .to_string()
                .contains("no 'landmark' column")
        );
        let p = write(dir.path(), "specimen,landmark,x,y\na,tip,1,\n");
        let e = LandmarkTable::read_csv(&p).unwrap_err().to_string();
        assert!(e.contains("line 2: tip: y is empty but x is given"), "{e}");
        let p = write(dir.path(), "specimen,landmark,x,y,z\na,tip,NaN,1,2\n");
        let e = LandmarkTable::read_csv(&p).unwrap_err().to_string();
        assert!(e.contains("x is 'NaN' but y and z are given"), "{e}");
        // placed with no coordinates is a contradiction, not a missing landmark
        let p = write(dir.path(), "specimen,landmark,x,y,state\na,tip,,,placed\n");
        let e = LandmarkTable::read_csv(&p).unwrap_err().to_string();
        assert!(
            e.contains("tip is marked placed but has no coordinates"),
            "{e}"
        );
        // NA everywhere without a state: missing
        let p = write(
            dir.path(),
            "specimen,landmark,x,y\na,tip,NA,NA\na,base,1,2\n",
        );
        let t = LandmarkTable::read_csv(&p).unwrap();
        assert_eq!(t.observations[0].states[0], State::Missing);
        // a byte-order mark before the header is not part of the first column's name
        let p = write(dir.path(), "\u{feff}specimen,landmark,x,y\na,tip,1,2\n");
        assert!(LandmarkTable::read_csv(&p).is_ok());
    }
}
