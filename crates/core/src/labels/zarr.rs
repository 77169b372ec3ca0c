//! Label volumes on disk: an OME-Zarr label image (NGFF 0.5, Zarr v3), written with `zarrs`.
//!
//! The label image is a group holding one array, `0`: `uint8`, shape `(z, y, x)` =
//! `(nz, ny, nx)`, chunks of 64³ (one per [`BRICK`](super::BRICK), the same bytes in the same
//! order), `zstd`-compressed; bricks with no labelled voxel are not written (they read as the
//! fill value 0). The group's attributes follow the NGFF label image rules under `ome`:
//! `multiscales` (one level, axes `z y x` in millimetres, a `scale` transform of the voxel size)
//! and `image-label` (`colors` with each `label-value`'s `rgba`, `properties` with its `name`,
//! `source.image` pointing at the scan's image two levels up, where a scan store keeps it).
//! Sutura's own facts sit under `sutura`: the format name and version, and the scan's
//! fingerprint.
//!
//! [`write_label_image`] and [`read_label_image`] work on any `zarrs` store at any group path,
//! so the same code writes the labels into a scan's store as `labels/NAME`. [`save`] writes a
//! label image folder atomically: into a temporary folder, flushed, then renamed into place;
//! the folder it replaces is kept as `NAME.bak` until the next save (at every instant `NAME` or
//! `NAME.bak` is a whole copy). Saved as `STORE/labels/NAME` inside a scan's OME-Zarr store,
//! it is also listed in the store's `labels` group, where NGFF readers look for label images;
//! anywhere else it is a standalone label image.

use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use serde_json::{Map, Value, json};
use zarrs::array::{Array, ArrayBuilder, data_type};
use zarrs::filesystem::FilesystemStore;
use zarrs::group::{Group, GroupBuilder};
use zarrs::storage::ReadableWritableListableStorage;

use super::{BRICK, LabelInfo, LabelVolume, LabelsError};
use crate::landmarks::fingerprint::Fingerprint;

/// The `sutura.format` attribute.
pub const FORMAT: &str = "sutura-labels";
/// The `sutura.format_version` attribute.
pub const FORMAT_VERSION: u32 = 1;
/// zstd level of the chunks (label chunks are long runs: level 3 already shrinks them ~100×).
const ZSTD_LEVEL: i32 = 3;

fn file_err(path: &Path, what: impl std::fmt::Display) -> LabelsError {
    LabelsError::File {
        path: path.to_owned(),
        what: what.to_string(),
    }
}

fn join(group: &str, name: &str) -> String {
    if group == "/" {
        format!("/{name}")
    } else {
        format!("{}/{name}", group.trim_end_matches('/'))
    }
}

/// Writes `labels` as a label image group at `group` in `store`. `path` names the store in
/// errors.
pub fn write_label_image(
    store: &ReadableWritableListableStorage,
    group: &str,
    labels: &LabelVolume,
    path: &Path,
) -> Result<(), LabelsError> {
    let err = |e: &dyn std::fmt::Display| file_err(path, e);
    let [nx, ny, nz] = labels.dims();
    let [sx, sy, sz] = labels.spacing_mm;
    let axes: Vec<Value> = ["z", "y", "x"]
        .iter()
        .map(|n| json!({"name": n, "type": "space", "unit": "millimeter"}))
        .collect();
    let colors: Vec<Value> = labels
        .labels()
        .iter()
        .map(|l| json!({"label-value": l.value, "rgba": l.rgba}))
        .collect();
    let properties: Vec<Value> = labels
        .labels()
        .iter()
        .map(|l| json!({"label-value": l.value, "name": l.name}))
        .collect();
    let mut attrs = Map::new();
    attrs.insert(
        "ome".into(),
        json!({
            "version": "0.5",
            "multiscales": [{
                "name": "labels",
                "axes": axes,
                "datasets": [{
                    "path": "0",
                    "coordinateTransformations": [{"type": "scale", "scale": [sz, sy, sx]}],
                }],
            }],
            "image-label": {
                "version": "0.5",
                "colors": colors,
                "properties": properties,
                "source": {"image": "../../"},
            },
        }),
    );
    attrs.insert(
        "sutura".into(),
        json!({
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "fingerprint": labels.fingerprint,
        }),
    );
    let mut g = GroupBuilder::new()
        .build(store.clone(), group)
        .map_err(|e| err(&e))?;
    *g.attributes_mut() = attrs;
    g.store_metadata().map_err(|e| err(&e))?;

    let array = ArrayBuilder::new(
        vec![nz as u64, ny as u64, nx as u64],
        vec![BRICK as u64; 3],
        data_type::uint8(),
        0u8,
    )
    .bytes_to_bytes_codecs(vec![Arc::new(zarrs::array::codec::ZstdCodec::new(
        ZSTD_LEVEL, false,
    ))])
    .dimension_names(["z", "y", "x"].into())
    .build(store.clone(), &join(group, "0"))
    .map_err(|e| err(&e))?;
    array.store_metadata().map_err(|e| err(&e))?;
    let grid = labels.brick_grid();
    let bricks: Vec<[usize; 3]> = (0..grid[2])
        .flat_map(|k| (0..grid[1]).flat_map(move |j| (0..grid[0]).map(move |i| [i, j, k])))
        .collect();
    bricks.par_iter().try_for_each(|&b| {
        if let Some(data) = labels.brick(b) {
            array
                .store_chunk(&[b[2] as u64, b[1] as u64, b[0] as u64], data)
                .map_err(|e| err(&e))?;
        }
        Ok(())
    })
}

/// Reads a label image group written by [`write_label_image`].
#[allow(clippy::too_many_lines)] // reason: one check after another on the group's metadata, in order
pub fn read_label_image(
    store: &ReadableWritableListableStorage,
    group: &str,
    path: &Path,
) -> Result<LabelVolume, LabelsError> {
    let err = |e: &dyn std::fmt::Display| file_err(path, e);
    let g = Group::open(store.clone(), group).map_err(|e| err(&e))?;
    let attrs = g.attributes();
    let sutura = attrs
        .get("sutura")
        .ok_or_else(|| file_err(path, "not a Sutura label image (no 'sutura' attributes)"))?;
    if sutura.get("format").and_then(Value::as_str) != Some(FORMAT) {
        return Err(file_err(path, "not a Sutura label image (format)"));
    }
    let version = sutura.get("format_version").and_then(Value::as_u64);
    if version != Some(u64::from(FORMAT_VERSION)) {
        return Err(file_err(
            path,
            format!("label format version {version:?}; this Sutura reads {FORMAT_VERSION}"),
        ));
    }
    let fingerprint: Option<Fingerprint> = match sutura.get("fingerprint") {
        None | Some(Value::Null) => None,
        Some(v) => Some(
            serde_json::from_value(v.clone())
                .map_err(|e| file_err(path, format!("fingerprint: {e}")))?,
        ),
    };
    let ome = attrs
        .get("ome")
        .ok_or_else(|| file_err(path, "no 'ome' attributes"))?;
    let scale = ome
        .pointer("/multiscales/0/datasets/0/coordinateTransformations/0/scale")
        .and_then(Value::as_array)
        .and_then(|a| a.iter().map(Value::as_f64).collect::<Option<Vec<f64>>>())
        .filter(|s| s.len() == 3 && s.iter().all(|v| v.is_finite() && *v > 0.0))
        .ok_or_else(|| file_err(path, "no valid voxel size (multiscales scale)"))?;
    let array = Array::open(store.clone(), &join(group, "0")).map_err(|e| err(&e))?;
    let shape = array.shape().to_vec();
    if shape.len() != 3 || array.data_type() != &data_type::uint8() {
        return Err(file_err(
            path,
            format!("array 0 is not a 3-D uint8 array (shape {shape:?})"),
        ));
    }
    let dims = [shape[2] as usize, shape[1] as usize, shape[0] as usize];
    let mut labels = LabelVolume::new(dims, [scale[2], scale[1], scale[0]]);
    labels.fingerprint = fingerprint;
    let colours = ome
        .pointer("/image-label/colors")
        .and_then(Value::as_array)
        .cloned()
        .unwrap_or_default();
    let props = ome
        .pointer("/image-label/properties")
        .and_then(Value::as_array)
        .cloned()
        .unwrap_or_default();
    for p in &props {
        let value = p
            .get("label-value")
            .and_then(Value::as_u64)
            .filter(|v| (1..=255).contains(v))
            .ok_or_else(|| file_err(path, format!("label property without a valid value: {p}")))?
            as u8;
        let name = p
            .get("name")
            .and_then(Value::as_str)
            .ok_or_else(|| file_err(path, format!("label {value} has no name")))?;
        let rgba = colours
            .iter()
            .find(|c| c.get("label-value").and_then(Value::as_u64) == Some(u64::from(value)))
            .and_then(|c| c.get("rgba"))
            .and_then(|c| serde_json::from_value::<[u8; 4]>(c.clone()).ok())
            .unwrap_or_else(|| super::palette_colour(value));
        labels
            .insert_label(LabelInfo {
                value,
                name: name.to_owned(),
                rgba,
            })
            .map_err(|e| file_err(path, e))?;
    }
    let grid = labels.brick_grid();
    let known: std::collections::BTreeSet<u8> = labels.labels().iter().map(|l| l.value).collect();
    for bk in 0..grid[2] {
        for bj in 0..grid[1] {
            for bi in 0..grid[0] {
                let chunk: Option<Vec<u8>> = array
                    .retrieve_chunk_if_exists(&[bk as u64, bj as u64, bi as u64])
                    .map_err(|e| err(&e))?;
                if let Some(data) = chunk {
                    if data.len() != super::BRICK_VOXELS {
                        return Err(file_err(path, "a chunk is not 64³"));
                    }
                    if let Some(v) = data.iter().find(|&&v| v != 0 && !known.contains(&v)) {
                        return Err(file_err(
                            path,
                            format!("voxels hold label value {v}, which has no name"),
                        ));
                    }
                    labels.put_brick([bi, bj, bk], Some(data.into_boxed_slice()));
                }
            }
        }
    }
    Ok(labels)
}

/// The file name a label image is saved under for a project or scan stem: `STEM.labels.zarr`.
#[must_use]
pub fn default_path(stem: &Path) -> PathBuf {
    let mut s = stem.as_os_str().to_owned();
    s.push(".labels.zarr");
    PathBuf::from(s)
}

/// Saves a standalone label image folder at `path`, atomically (see the module docs).
pub fn save(labels: &LabelVolume, path: &Path) -> Result<(), LabelsError> {
    let name = path
        .file_name()
        .ok_or_else(|| file_err(path, "not a folder name"))?
        .to_string_lossy()
        .into_owned();
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_owned(),
        _ => PathBuf::from("."),
    };
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let backup = dir.join(format!("{name}.bak"));
    let io = |e: std::io::Error| file_err(path, e);
    if tmp.exists() {
        std::fs::remove_dir_all(&tmp).map_err(io)?;
    }
    let result = (|| {
        std::fs::create_dir_all(&tmp).map_err(io)?;
        let store: ReadableWritableListableStorage =
            Arc::new(FilesystemStore::new(&tmp).map_err(|e| file_err(path, e))?);
        write_label_image(&store, "/", labels, path)?;
        sync_tree(&tmp).map_err(io)?;
        if path.exists() {
            if backup.exists() {
                std::fs::remove_dir_all(&backup).map_err(io)?;
            }
            std::fs::rename(path, &backup).map_err(io)?;
        }
        std::fs::rename(&tmp, path).map_err(io)?;
        if let Ok(d) = std::fs::File::open(&dir) {
            let _ = d.sync_all(); // best effort: not every file system syncs folders
        }
        register_in_store(path)
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result
}

/// The scan store a label image at `path` lies in, when `path` is `STORE/labels/NAME` of an
/// OME-Zarr store.
#[must_use]
pub fn store_of(path: &Path) -> Option<&Path> {
    let labels = path.parent()?;
    let store = labels.parent()?;
    (labels.file_name()? == "labels" && crate::store::is_store(store)).then_some(store)
}

/// Lists a label image saved as `STORE/labels/NAME` in the store's `labels` group (NGFF: the
/// group's `ome.labels` attribute), so that OME-Zarr readers find it beside the scan; a label
/// image anywhere else is left alone.
fn register_in_store(path: &Path) -> Result<(), LabelsError> {
    let (Some(labels), Some(_)) = (path.parent(), store_of(path)) else {
        return Ok(());
    };
    let name = path.file_name().unwrap_or_default().to_string_lossy();
    let meta_path = labels.join("zarr.json");
    let mut meta: Value = match std::fs::read(&meta_path) {
        Ok(b) => serde_json::from_slice(&b)
            .map_err(|e| file_err(&meta_path, format!("not JSON: {e}")))?,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            json!({"zarr_format": 3, "node_type": "group", "attributes": {}})
        }
        Err(e) => return Err(file_err(&meta_path, e)),
    };
    let ome = meta
        .as_object_mut()
        .and_then(|m| {
            m.entry("attributes")
                .or_insert_with(|| json!({}))
                .as_object_mut()
        })
        .map(|a| a.entry("ome").or_insert_with(|| json!({"version": "0.5"})))
        .and_then(Value::as_object_mut)
        .ok_or_else(|| file_err(&meta_path, "not a group's metadata"))?;
    let list = ome
        .entry("labels")
        .or_insert_with(|| json!([]))
        .as_array_mut()
        .ok_or_else(|| file_err(&meta_path, "ome.labels is not a list"))?;
    if list.iter().any(|v| v.as_str() == Some(&*name)) {
        return Ok(());
    }
    list.push(json!(name));
    crate::export::write_json(&meta_path, &meta).map_err(|e| file_err(&meta_path, e))
}

/// Flushes every file under a folder to disk.
fn sync_tree(dir: &Path) -> std::io::Result<()> {
    for entry in std::fs::read_dir(dir)? {
        let entry = entry?;
        let p = entry.path();
        if entry.file_type()?.is_dir() {
            sync_tree(&p)?;
        } else {
            std::fs::File::open(&p)?.sync_all()?;
        }
    }
    Ok(())
}

/// Loads a standalone label image folder.
pub fn load(path: &Path) -> Result<LabelVolume, LabelsError> {
    if !path.is_dir() {
        let backup = path.with_file_name(format!(
            "{}.bak",
            path.file_name().unwrap_or_default().to_string_lossy()
        ));
        return Err(file_err(
            path,
            if backup.is_dir() {
                format!(
                    "no label image here, but a previous copy is at {}",
                    backup.display()
                )
            } else {
                "no label image folder here".to_owned()
            },
        ));
    }
    let store: ReadableWritableListableStorage =
        Arc::new(FilesystemStore::new(path).map_err(|e| file_err(path, e))?);
    read_label_image(&store, "/", path)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::labels::{BitMask, Combine};

    #[test]
    fn save_and_load_round_trip() {
        let dir = tempfile::tempdir().unwrap();
        let dims = [70, 66, 5];
        let mut lv = LabelVolume::new(dims, [0.036, 0.036, 0.05]);
        let a = lv.add_label("skull").unwrap();
        let b = lv.add_label("matrix").unwrap();
        lv.apply(
            &BitMask::from_fn(dims, |i, j, _| i > 64 && j > 64),
            a,
            Combine::Add,
            false,
        )
        .unwrap();
        lv.apply(
            &BitMask::from_fn(dims, |i, j, k| i < 3 && j < 9 && k == 2),
            b,
            Combine::Add,
            false,
        )
        .unwrap();
        let path = dir.path().join("x.labels.zarr");
        save(&lv, &path).unwrap();
        save(&lv, &path).unwrap(); // over an existing one: keeps a backup
        assert!(dir.path().join("x.labels.zarr.bak").is_dir());
        let back = load(&path).unwrap();
        assert_eq!(back.dims(), dims);
        assert_eq!(back.labels(), lv.labels());
        assert_eq!(
            back.spacing_mm.map(f64::to_bits),
            lv.spacing_mm.map(f64::to_bits)
        );
        assert_eq!(back.mask_of(a), lv.mask_of(a));
        assert_eq!(back.mask_of(b), lv.mask_of(b));
        // bricks with no label are not stored: 2 bricks in x, 2 in y, 1 in z; 2 hold labels
        assert_eq!(back.allocated_bricks(), 2);
        let e = load(&dir.path().join("none.labels.zarr")).unwrap_err();
        assert!(e.to_string().ends_with("no label image folder here"), "{e}");
    }
}
