//! The store's metadata: the OME-NGFF 0.5 `multiscales` the standard's readers follow, and
//! Sutura's own facts under the `sutura` attribute key.
//!
//! NGFF places each level by a `scale` and a `translation` per array axis (here `z`, `y`, `x`,
//! in millimetres). That is exact for a scan whose voxel axes are the world's; an oblique scan
//! (a `NIfTI` sform with rotation) cannot be said in NGFF 0.5, so the NGFF transforms then give
//! the voxel grid in its own frame and Sutura's facts keep the full `world_from_voxel`, which
//! Sutura reads in preference.

use crate::geometry::Affine3;
use crate::volume::{DType, Histogram, Intensity, Rescale, SpacingOrigin, Stats};
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

/// The attribute key of Sutura's facts.
pub const FACTS_KEY: &str = "sutura";

/// The version of [`Facts`]' layout.
pub const FACTS_VERSION: u32 = 1;

/// Sutura's facts about a store it wrote (see the module docs).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Facts {
    pub format_version: u32,
    /// Written last: a store without it is half-written.
    pub complete: bool,
    pub dims: [usize; 3],
    pub dtype: DType,
    /// Row-major 4×4, millimetres.
    pub world_from_voxel: [[f64; 4]; 4],
    pub rescale: Option<Rescale>,
    pub spacing_origin: SpacingOrigin,
    pub notes: Vec<String>,
    pub source: SourceFacts,
    pub levels: Vec<LevelFacts>,
    /// Chunk shape along `i`, `j`, `k`.
    pub chunk: [usize; 3],
    /// The compressor, as the codec's name and level (`zstd/3`).
    pub codec: String,
    pub intensity: IntensityFacts,
    /// The ISO-50 threshold, if one was found.
    pub iso50: Option<f64>,
    /// The array of per-chunk minimum and maximum of level 0 (shape `[nk, nj, ni, 2]` in
    /// chunks, stored values), for skipping empty space.
    pub block_range_path: String,
}

/// Where the store's voxels came from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SourceFacts {
    pub path: String,
    /// The source scan's fingerprint, as the project records it.
    pub fingerprint: Option<Value>,
}

/// One level: its array's path and its factor over level 0 along `i`, `j`, `k`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LevelFacts {
    pub path: String,
    pub factor: [usize; 3],
}

/// [`Intensity`] as stored.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct IntensityFacts {
    pub stats: Stats,
    pub percentiles: Vec<[f64; 2]>,
    pub histogram: Option<Histogram>,
    pub exact: bool,
    pub note: Option<String>,
}

impl From<&Intensity> for IntensityFacts {
    fn from(i: &Intensity) -> Self {
        Self {
            stats: i.stats,
            percentiles: i.percentiles.iter().map(|&(p, v)| [p, v]).collect(),
            histogram: i.histogram.clone(),
            exact: i.exact,
            note: i.note.clone(),
        }
    }
}

impl From<&IntensityFacts> for Intensity {
    fn from(f: &IntensityFacts) -> Self {
        Self {
            stats: f.stats,
            percentiles: f.percentiles.iter().map(|p| (p[0], p[1])).collect(),
            histogram: f.histogram.clone(),
            exact: f.exact,
            note: f.note.clone(),
        }
    }
}

/// NGFF's scale and translation (array order `z`, `y`, `x`) of a level placed by
/// `world_from_voxel` (voxel axes `i`, `j`, `k`): the column lengths, and the world position of
/// voxel 0 when the grid is axis-aligned (else of voxel 0 in the grid's own frame, i.e. 0).
#[must_use]
pub fn ngff_scale_translation(world_from_voxel: &Affine3) -> ([f64; 3], [f64; 3]) {
    let s = world_from_voxel.column_lengths();
    let lin = world_from_voxel.linear();
    let t = world_from_voxel.translation();
    let axis_aligned = (0..3).all(|r| (0..3).all(|c| r == c || lin[(r, c)].abs() <= 1e-12 * s[c]))
        && (0..3).all(|a| lin[(a, a)] > 0.0);
    if axis_aligned {
        ([s[2], s[1], s[0]], [t.z, t.y, t.x])
    } else {
        ([s[2], s[1], s[0]], [0.0; 3])
    }
}

/// Whether NGFF's scale and translation say the whole placement.
#[must_use]
pub fn ngff_is_exact(world_from_voxel: &Affine3) -> bool {
    let (s, t) = ngff_scale_translation(world_from_voxel);
    let back = Affine3::from_rows([
        [s[2], 0.0, 0.0, t[2]],
        [0.0, s[1], 0.0, t[1]],
        [0.0, 0.0, s[0], t[0]],
        [0.0, 0.0, 0.0, 1.0],
    ]);
    back.is_ok_and(|b| {
        let (a, b) = (world_from_voxel.rows(), b.rows());
        (0..3).all(|r| (0..4).all(|c| (a[r][c] - b[r][c]).abs() <= 1e-12 * (1.0 + a[r][c].abs())))
    })
}

/// The group attributes of a multiscale image: `ome` (NGFF 0.5) and Sutura's facts.
#[must_use]
pub fn group_attributes(name: &str, levels: &[(String, Affine3)], facts: &Facts) -> Value {
    let datasets: Vec<Value> = levels
        .iter()
        .map(|(path, w)| {
            let (scale, translation) = ngff_scale_translation(w);
            json!({
                "path": path,
                "coordinateTransformations": [
                    {"type": "scale", "scale": scale},
                    {"type": "translation", "translation": translation}
                ]
            })
        })
        .collect();
    json!({
        "ome": {
            "version": "0.5",
            "multiscales": [{
                "name": name,
                "axes": [
                    {"name": "z", "type": "space", "unit": "millimeter"},
                    {"name": "y", "type": "space", "unit": "millimeter"},
                    {"name": "x", "type": "space", "unit": "millimeter"}
                ],
                "datasets": datasets,
                "type": "mean",
                "metadata": {"description": "block means of the level above, exact over level 0"}
            }]
        },
        FACTS_KEY: facts
    })
}

/// What Sutura reads of a multiscales entry written by anyone.
#[derive(Clone, Debug, PartialEq)]
pub struct Multiscale {
    /// Paths of the levels, finest first.
    pub paths: Vec<String>,
    /// Per level: scale and translation for the last three (spatial) array axes, in mm.
    pub transforms: Vec<([f64; 3], [f64; 3])>,
    /// Number of axes before the three spatial ones (time, channel), each must have extent 1.
    pub leading_axes: usize,
    pub notes: Vec<String>,
}

fn unit_mm(unit: Option<&str>) -> Result<(f64, Option<String>), String> {
    Ok(match unit {
        None => (
            1.0,
            Some("the multiscales axes give no unit; millimetres assumed".to_owned()),
        ),
        Some("millimeter") => (1.0, None),
        Some("micrometer") => (1e-3, None),
        Some("nanometer") => (1e-6, None),
        Some("centimeter") => (10.0, None),
        Some("meter") => (1e3, None),
        Some("angstrom") => (1e-7, None),
        Some(other) => return Err(format!("axis unit '{other}' is not a length Sutura reads")),
    })
}

/// Reads the `multiscales` of group attributes (NGFF 0.5 under `ome`, or 0.4 at the top).
#[allow(
    clippy::too_many_lines,
    reason = "the checks of one metadata object, in the standard's order"
)]
pub fn parse_multiscales(attrs: &serde_json::Map<String, Value>) -> Result<Multiscale, String> {
    let ms = attrs
        .get("ome")
        .and_then(|o| o.get("multiscales"))
        .or_else(|| attrs.get("multiscales"))
        .and_then(Value::as_array)
        .and_then(|a| a.first())
        .ok_or("no OME-NGFF multiscales metadata (not a multiscale image)")?;
    let axes = ms
        .get("axes")
        .and_then(Value::as_array)
        .ok_or("multiscales has no axes")?;
    if axes.len() < 3 {
        return Err(format!(
            "{} axes; a scan needs three spatial axes",
            axes.len()
        ));
    }
    let mut notes = Vec::new();
    let leading_axes = axes.len() - 3;
    let mut to_mm = [1.0; 3];
    for (a, axis) in axes.iter().skip(leading_axes).enumerate() {
        let kind = axis.get("type").and_then(Value::as_str);
        if kind.is_some_and(|t| t != "space") {
            return Err(format!(
                "axis {} is of type '{}', expected the last three to be space",
                leading_axes + a,
                kind.unwrap_or_default()
            ));
        }
        let (f, note) = unit_mm(axis.get("unit").and_then(Value::as_str))?;
        to_mm[a] = f;
        if let Some(n) = note
            && !notes.contains(&n)
        {
            notes.push(n);
        }
    }
    let numbers = |v: Option<&Value>, what: &str| -> Result<Vec<f64>, String> {
        v.and_then(Value::as_array)
            .and_then(|a| a.iter().map(Value::as_f64).collect::<Option<Vec<f64>>>())
            .filter(|a| a.len() == axes.len())
            .ok_or(format!("{what} is not {} numbers", axes.len()))
    };
    let transform = |list: Option<&Value>| -> Result<(Vec<f64>, Vec<f64>), String> {
        let mut scale = vec![1.0; axes.len()];
        let mut translation = vec![0.0; axes.len()];
        for t in list.and_then(Value::as_array).into_iter().flatten() {
            match t.get("type").and_then(Value::as_str) {
                Some("scale") => {
                    let s = numbers(t.get("scale"), "a scale")?;
                    for (x, y) in scale.iter_mut().zip(&s) {
                        *x *= y;
                    }
                    for (x, y) in translation.iter_mut().zip(&s) {
                        *x *= y;
                    }
                }
                Some("translation") => {
                    let d = numbers(t.get("translation"), "a translation")?;
                    for (x, y) in translation.iter_mut().zip(&d) {
                        *x += y;
                    }
                }
                Some("identity") => {}
                other => {
                    return Err(format!(
                        "coordinate transformation {other:?} is not one Sutura reads (scale, translation)"
                    ));
                }
            }
        }
        Ok((scale, translation))
    };
    let (gs, gt) = transform(ms.get("coordinateTransformations"))?;
    let datasets = ms
        .get("datasets")
        .and_then(Value::as_array)
        .filter(|d| !d.is_empty())
        .ok_or("multiscales has no datasets")?;
    let mut paths = Vec::new();
    let mut transforms = Vec::new();
    for d in datasets {
        let path = d
            .get("path")
            .and_then(Value::as_str)
            .ok_or("a dataset has no path")?;
        let (s, t) = transform(d.get("coordinateTransformations"))?;
        let mut scale = [0.0; 3];
        let mut translation = [0.0; 3];
        for a in 0..3 {
            let x = leading_axes + a;
            scale[a] = s[x] * gs[x] * to_mm[a];
            translation[a] = (t[x] * gs[x] + gt[x]) * to_mm[a];
            if !(scale[a].is_finite() && scale[a] > 0.0 && translation[a].is_finite()) {
                return Err(format!(
                    "dataset {path}: scale {} or translation {} of axis {x} is not usable",
                    s[x], t[x]
                ));
            }
        }
        paths.push(path.to_owned());
        transforms.push((scale, translation));
    }
    Ok(Multiscale {
        paths,
        transforms,
        leading_axes,
        notes,
    })
}

#[cfg(test)]
#[allow(clippy::float_cmp, reason = "the test values are exact in binary")]
mod tests {
    use super::*;

    #[test]
    fn reads_ngff_04_and_05_with_units_and_global_transforms() {
        let v05 = json!({"ome": {"version": "0.5", "multiscales": [{
            "axes": [{"name":"c","type":"channel"},{"name":"z","type":"space","unit":"micrometer"},
                     {"name":"y","type":"space","unit":"micrometer"},{"name":"x","type":"space","unit":"micrometer"}],
            "datasets": [
                {"path": "s0", "coordinateTransformations": [{"type":"scale","scale":[1,2,3,4]}]},
                {"path": "s1", "coordinateTransformations": [{"type":"scale","scale":[1,4,6,8]},
                                                            {"type":"translation","translation":[0,1,1.5,2]}]}],
            "coordinateTransformations": [{"type":"scale","scale":[1,10,10,10]}]
        }]}});
        let m = parse_multiscales(v05.as_object().unwrap()).unwrap();
        assert_eq!(m.paths, vec!["s0", "s1"]);
        assert_eq!(m.leading_axes, 1);
        assert_eq!(m.transforms[0].0, [0.02, 0.03, 0.04]);
        assert_eq!(m.transforms[1].1, [0.01, 0.015, 0.02]);
        let v04 = json!({"multiscales": [{"version": "0.4",
            "axes": [{"name":"z","type":"space"},{"name":"y","type":"space"},{"name":"x","type":"space"}],
            "datasets": [{"path": "0", "coordinateTransformations": [{"type":"scale","scale":[1,1,1]}]}]}]});
        let m = parse_multiscales(v04.as_object().unwrap()).unwrap();
        assert_eq!(m.notes.len(), 1);
        let bad = json!({"multiscales": [{"axes": [{"name":"z","type":"space","unit":"second"},
            {"name":"y","type":"space"},{"name":"x","type":"space"}], "datasets": [{"path":"0"}]}]});
        assert!(parse_multiscales(bad.as_object().unwrap()).is_err());
        assert!(parse_multiscales(json!({}).as_object().unwrap()).is_err());
    }

    #[test]
    fn axis_aligned_placements_are_exact_in_ngff() {
        let w = Affine3::from_spacing([0.01, 0.02, 0.03]);
        assert!(ngff_is_exact(&w));
        assert_eq!(ngff_scale_translation(&w).0, [0.03, 0.02, 0.01]);
        let r = Affine3::from_rows([
            [0.0, -0.01, 0.0, 1.0],
            [0.01, 0.0, 0.0, 2.0],
            [0.0, 0.0, 0.01, 3.0],
            [0.0, 0.0, 0.0, 1.0],
        ])
        .unwrap();
        assert!(!ngff_is_exact(&r));
    }
}
