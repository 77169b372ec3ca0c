//! Label images kept in a store, as OME-NGFF 0.5 labels: `labels/NAME/` is a multiscale image
//! on the scan's grid (same levels, same factors, same chunks) of `u8` or `u16` label values,
//! listed in `labels/zarr.json`, with `image-label` metadata pointing back at the scan.
//!
//! Level 0 is written chunk by chunk ([`LabelImage::write_chunk`]), so a label volume of any
//! size never has to be in memory, and a brush stroke rewrites only the chunks it touched; the
//! coarser levels are then brought up to date over the chunks that changed
//! ([`LabelImage::update_levels`]) by nearest sampling (each coarse voxel takes the label of
//! the level-0 voxel at its block's first corner), which keeps labels labels (a mean of two
//! labels is no label).

use super::{Store, StoreError, ZArray};
use crate::volume::Voxel;
use serde_json::json;
use std::sync::Arc;
use zarrs::array::codec::ZstdCodec;
use zarrs::array::{ArrayBuilder, CodecOptions, Element, ElementOwned, data_type};
use zarrs::filesystem::FilesystemStore;
use zarrs::group::{Group, GroupBuilder};

/// A label value type.
pub trait LabelValue:
    Voxel + Element + ElementOwned + Into<zarrs::array::builder::ArrayBuilderFillValue>
{
    fn zarr() -> zarrs::array::DataType;
}
impl LabelValue for u8 {
    fn zarr() -> zarrs::array::DataType {
        data_type::uint8()
    }
}
impl LabelValue for u16 {
    fn zarr() -> zarrs::array::DataType {
        data_type::uint16()
    }
}

/// A label image of a store (see the module docs).
pub struct LabelImage<T> {
    name: String,
    arrays: Vec<ZArray>,
    /// Per level: dims along `i`, `j`, `k` and factor over level 0.
    dims: Vec<[usize; 3]>,
    factors: Vec<[usize; 3]>,
    chunk: [usize; 3],
    _t: std::marker::PhantomData<T>,
}

fn fs_of(store: &Store) -> Result<Arc<FilesystemStore>, StoreError> {
    let path = store.path();
    Ok(Arc::new(
        FilesystemStore::new(path).map_err(|e| StoreError::corrupt(path, e.to_string()))?,
    ))
}

fn valid_name(name: &str) -> bool {
    !name.is_empty()
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
}

impl Store {
    /// The names of the label images the store holds.
    pub fn label_names(&self) -> Result<Vec<String>, StoreError> {
        let fs = fs_of(self)?;
        let Ok(g) = Group::open(fs, "/labels") else {
            return Ok(Vec::new());
        };
        Ok(g.attributes()
            .get("ome")
            .and_then(|o| o.get("labels"))
            .and_then(|l| l.as_array())
            .map(|a| {
                a.iter()
                    .filter_map(|v| v.as_str().map(str::to_owned))
                    .collect()
            })
            .unwrap_or_default())
    }

    /// Adds an empty (all 0) label image named `name` (letters, digits, `_`, `-`) on the
    /// scan's grid; refuses a name already used.
    pub fn add_label_image<T: LabelValue>(&self, name: &str) -> Result<LabelImage<T>, StoreError> {
        let path = self.path();
        if !valid_name(name) {
            return Err(StoreError::usage(
                path,
                format!("label image name '{name}': use letters, digits, _ and -"),
            ));
        }
        let mut names = self.label_names()?;
        if names.iter().any(|n| n == name) {
            return Err(StoreError::usage(
                path,
                format!("a label image '{name}' exists already"),
            ));
        }
        let fs = fs_of(self)?;
        let chunk = self.chunk_shape(0);
        let levels = self.inner.levels.clone();
        let mut arrays = Vec::new();
        let mut datasets = Vec::new();
        for (l, level) in levels.iter().enumerate() {
            let d = level.dims;
            let mut b = ArrayBuilder::new(
                vec![d[2] as u64, d[1] as u64, d[0] as u64],
                vec![chunk[2] as u64, chunk[1] as u64, chunk[0] as u64],
                T::zarr(),
                T::default(),
            );
            b.bytes_to_bytes_codecs(vec![Arc::new(ZstdCodec::new(1, false))]);
            b.dimension_names(Some(["z", "y", "x"]));
            let a = b
                .build(fs.clone(), &format!("/labels/{name}/{l}"))
                .map_err(|e| StoreError::corrupt(path, format!("label level {l}: {e}")))?;
            a.store_metadata()
                .map_err(|e| StoreError::corrupt(path, format!("label level {l}: {e}")))?;
            arrays.push(a);
            let (scale, translation) = super::meta::ngff_scale_translation(&level.world_from_voxel);
            datasets.push(json!({"path": l.to_string(), "coordinateTransformations": [
                {"type": "scale", "scale": scale}, {"type": "translation", "translation": translation}]}));
        }
        let attrs = json!({"ome": {"version": "0.5",
            "multiscales": [{"name": name, "axes": [
                {"name": "z", "type": "space", "unit": "millimeter"},
                {"name": "y", "type": "space", "unit": "millimeter"},
                {"name": "x", "type": "space", "unit": "millimeter"}],
                "datasets": datasets, "type": "nearest"}],
            "image-label": {"version": "0.5", "source": {"image": "../../"}}}});
        let mut g = GroupBuilder::new();
        g.attributes(attrs.as_object().cloned().unwrap_or_default());
        g.build(fs.clone(), &format!("/labels/{name}"))
            .map_err(|e| StoreError::corrupt(path, format!("label group: {e}")))?
            .store_metadata()
            .map_err(|e| StoreError::corrupt(path, format!("label group: {e}")))?;
        names.push(name.to_owned());
        let mut lg = GroupBuilder::new();
        lg.attributes(
            json!({"ome": {"version": "0.5", "labels": names}})
                .as_object()
                .cloned()
                .unwrap_or_default(),
        );
        lg.build(fs, "/labels")
            .map_err(|e| StoreError::corrupt(path, format!("labels group: {e}")))?
            .store_metadata()
            .map_err(|e| StoreError::corrupt(path, format!("labels group: {e}")))?;
        Ok(LabelImage {
            name: name.to_owned(),
            arrays,
            dims: levels.iter().map(|l| l.dims).collect(),
            factors: levels.iter().map(|l| l.factor).collect(),
            chunk,
            _t: std::marker::PhantomData,
        })
    }
}

impl<T: LabelValue> LabelImage<T> {
    #[must_use]
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Chunk shape along `i`, `j`, `k` (the scan's).
    #[must_use]
    pub fn chunk_shape(&self) -> [usize; 3] {
        self.chunk
    }

    /// Writes level-0 chunk `c` (indices along `i`, `j`, `k`): `data` holds the whole chunk,
    /// `i` fastest (values beyond the grid's edge are ignored by readers).
    pub fn write_chunk(&self, c: [usize; 3], data: &[T]) -> Result<(), StoreError> {
        self.write(0, c, data)
    }

    fn write(&self, level: usize, c: [usize; 3], data: &[T]) -> Result<(), StoreError> {
        self.arrays[level]
            .store_chunk_opt(
                &[c[2] as u64, c[1] as u64, c[0] as u64],
                data,
                &CodecOptions::default(),
            )
            .map_err(|e| StoreError::Corrupt {
                path: self.name.clone().into(),
                what: format!("label level {level} chunk {c:?}: {e}"),
            })
    }

    /// Reads chunk `c` of a level (all 0 where nothing was written).
    pub fn read_chunk(&self, level: usize, c: [usize; 3]) -> Result<Vec<T>, StoreError> {
        self.arrays[level]
            .retrieve_chunk::<Vec<T>>(&[c[2] as u64, c[1] as u64, c[0] as u64])
            .map_err(|e| StoreError::Corrupt {
                path: self.name.clone().into(),
                what: format!("label level {level} chunk {c:?}: {e}"),
            })
    }

    /// Brings the coarser levels up to date over the level-0 chunks `changed` (nearest
    /// sampling, see the module docs).
    pub fn update_levels(&self, changed: &[[usize; 3]]) -> Result<(), StoreError> {
        let cs = self.chunk;
        for l in 1..self.arrays.len() {
            let f = self.factors[l];
            let d = self.dims[l];
            // the level-l chunks whose sampled voxels fall in a changed level-0 chunk
            let mut targets: Vec<[usize; 3]> = changed
                .iter()
                .map(|c| [0, 1, 2].map(|a| c[a] * cs[a] / f[a] / cs[a]))
                .collect();
            targets.sort_unstable();
            targets.dedup();
            for t in targets {
                let mut out = vec![T::default(); cs[0] * cs[1] * cs[2]];
                let mut cache: std::collections::HashMap<[usize; 3], Vec<T>> =
                    std::collections::HashMap::default();
                for k in 0..cs[2] {
                    for j in 0..cs[1] {
                        for i in 0..cs[0] {
                            let v = [t[0] * cs[0] + i, t[1] * cs[1] + j, t[2] * cs[2] + k];
                            if (0..3).any(|a| v[a] >= d[a]) {
                                continue;
                            }
                            let s = [0, 1, 2].map(|a| v[a] * f[a]);
                            let c0 = [0, 1, 2].map(|a| s[a] / cs[a]);
                            let src = match cache.entry(c0) {
                                std::collections::hash_map::Entry::Occupied(e) => e.into_mut(),
                                std::collections::hash_map::Entry::Vacant(e) => {
                                    e.insert(self.read_chunk(0, c0)?)
                                }
                            };
                            let o = [0, 1, 2].map(|a| s[a] - c0[a] * cs[a]);
                            out[i + cs[0] * (j + cs[1] * k)] =
                                src[o[0] + cs[0] * (o[1] + cs[1] * o[2])];
                        }
                    }
                }
                self.write(l, t, &out)?;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;
    use crate::io::Progress;
    use crate::io::slices::VolumeSlices;
    use crate::store::{ConvertOptions, StoreOptions, convert};
    use crate::volume::{Volume, VolumeSource};
    use std::path::Path;

    #[test]
    fn a_label_image_is_kept_beside_the_scan_with_its_levels() {
        let dir = tempfile::tempdir().unwrap();
        let v = Volume::from_vec(
            [40, 36, 34],
            Affine3::from_spacing([0.1; 3]),
            vec![7u16; 40 * 36 * 34],
        )
        .unwrap();
        let out = dir.path().join("s.ome.zarr");
        let options = ConvertOptions {
            chunk: 16,
            coarsest_bytes: 4000,
            ..ConvertOptions::default()
        };
        convert(
            &mut VolumeSlices::new(&v, Path::new("s")),
            &out,
            &options,
            &Progress::none(),
        )
        .unwrap();
        let store = Store::open(&out, &StoreOptions::default()).unwrap();
        assert!(store.level_count() >= 3);
        let labels = store.add_label_image::<u8>("bone").unwrap();
        assert!(store.add_label_image::<u8>("bone").is_err());
        assert!(store.add_label_image::<u8>("no/slash").is_err());
        assert_eq!(store.label_names().unwrap(), vec!["bone"]);
        // label 3 in level-0 chunk (1, 0, 1), whose voxel (16, 0, 16) level 1 samples at (8, 0, 8)
        let cs = labels.chunk_shape();
        labels
            .write_chunk([1, 0, 1], &vec![3u8; cs[0] * cs[1] * cs[2]])
            .unwrap();
        labels.update_levels(&[[1, 0, 1]]).unwrap();
        let l1 = labels.read_chunk(1, [0, 0, 0]).unwrap();
        assert_eq!(l1[8 + 16 * 16 * 8], 3);
        assert_eq!(l1[0], 0);
        // the scan still opens, its levels untouched
        let again = Store::open(&out, &StoreOptions::default()).unwrap();
        assert_eq!(again.level_count(), store.level_count());
    }
}
