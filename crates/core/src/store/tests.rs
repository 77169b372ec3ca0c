use super::write::{partial_path, plan_levels};
use super::*;
use crate::geometry::VoxelIndex;
use crate::io::slices::VolumeSlices;
use crate::io::{IoError, Progress};
use crate::volume::{Intensity, VolumeSource};
use rand::{Rng, SeedableRng};

fn ramp(dims: [usize; 3], seed: u64) -> Volume {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let data: Vec<u16> = (0..dims[0] * dims[1] * dims[2])
        .map(|n| (n % 1000) as u16 * 40 + rng.random_range(0..40))
        .collect();
    let w = Affine3::from_rows([
        [0.02, 0.0, 0.0, 1.5],
        [0.0, 0.02, 0.0, -2.0],
        [0.0, 0.0, 0.04, 0.25],
        [0.0, 0.0, 0.0, 1.0],
    ])
    .unwrap();
    let mut v = Volume::from_vec(dims, w, data).unwrap();
    v.set_rescale(Rescale::new(0.5, -100.0));
    v
}

fn small_options() -> ConvertOptions {
    ConvertOptions {
        chunk: 16,
        coarsest_bytes: 2_000,
        ..ConvertOptions::default()
    }
}

fn convert_volume(v: &Volume, out: &Path, options: &ConvertOptions) -> ConvertReport {
    let mut r = VolumeSlices::new(v, Path::new("memory"));
    convert(&mut r, out, options, &Progress::none()).unwrap()
}

/// The block mean of level 0 over `f` at level voxel `(i, j, k)`, rounded half to even: the
/// definition the levels follow (numpy's `np.round(block.mean())` on the voxels present).
fn block_mean(v: &Volume, f: [usize; 3], [i, j, k]: [usize; 3]) -> f64 {
    let d = v.dims();
    let (mut s, mut n) = (0.0, 0.0);
    for z in k * f[2]..((k + 1) * f[2]).min(d[2]) {
        for y in j * f[1]..((j + 1) * f[1]).min(d[1]) {
            for x in i * f[0]..((i + 1) * f[0]).min(d[0]) {
                s += crate::with_voxels!(v.voxels(), |a| a
                    [v.linear_index(VoxelIndex::new(x, y, z))]
                .to_f64());
                n += 1.0;
            }
        }
    }
    (s / n).round_ties_even()
}

#[test]
fn levels_are_exact_block_means_placed_in_the_same_world() {
    let dir = tempfile::tempdir().unwrap();
    let v = ramp([37, 29, 23], 1);
    let out = dir.path().join("ramp.ome.zarr");
    let report = convert_volume(&v, &out, &small_options());
    assert!(report.levels.len() >= 3, "{:?}", report.levels);
    assert!(!partial_path(&out).exists());
    let store = Store::open(&out, &StoreOptions::default()).unwrap();
    assert_eq!(store.level_count(), report.levels.len());
    assert_eq!(store.dims(), v.dims());
    assert_eq!(store.rescale(), v.rescale());
    // level 0 bit-identical
    let b = store.read_block(0, &store.level(0).full_region()).unwrap();
    crate::with_voxels!(b.voxels(), |a| crate::with_voxels!(
        v.voxels(),
        |e| assert!(bytemuck::cast_slice::<_, u8>(a) == bytemuck::cast_slice::<_, u8>(e))
    ));
    assert_eq!(b.world_from_voxel(), v.world_from_voxel());
    for l in 1..store.level_count() {
        let lv = store.level(l);
        let block = store.read_block(l, &lv.full_region()).unwrap();
        for idx in [
            [0, 0, 0],
            [1, 2, 1],
            [lv.dims[0] - 1, lv.dims[1] - 1, lv.dims[2] - 1],
        ] {
            let raw = block
                .value(VoxelIndex::new(idx[0], idx[1], idx[2]))
                .unwrap();
            let want = v.apply_rescale(block_mean(&v, lv.factor, idx));
            assert!(
                (raw - want).abs() < 1e-9,
                "level {l} {idx:?}: {raw} vs {want}"
            );
        }
        // a level voxel sits at the centre of its block of level-0 voxels
        let f = lv.factor.map(|x| x as f64);
        let p = lv
            .world_from_voxel
            .voxel_to_world(VoxelPoint::new(1.0, 1.0, 1.0));
        let q = v.voxel_to_world(VoxelPoint::new(
            1.5 * f[0] - 0.5,
            1.5 * f[1] - 0.5,
            1.5 * f[2] - 0.5,
        ));
        assert!((p.0 - q.0).norm() < 1e-12);
    }
    // intensity facts are the in-memory volume's, exactly
    let i = store.intensity().unwrap();
    let want = Intensity::of_volume(&v);
    assert_eq!(i.stats, want.stats);
    assert_eq!(i.percentiles, want.percentiles);
    assert_eq!(i.histogram, want.histogram);
    assert!(i.exact);
    assert!(out.join("block_range").is_dir());
}

#[test]
fn blocks_through_a_tiny_cache_evict_and_still_agree() {
    let dir = tempfile::tempdir().unwrap();
    let v = ramp([40, 33, 35], 2);
    let out = dir.path().join("t.ome.zarr");
    convert_volume(&v, &out, &small_options());
    // four chunks of 16³ u16
    let options = StoreOptions {
        cache_bytes: 4 * 16 * 16 * 16 * 2,
        ..StoreOptions::default()
    };
    let store = Store::open(&out, &options).unwrap();
    for region in [
        [3..20, 5..6, 0..35],
        [0..40, 0..33, 17..18],
        [15..17, 15..17, 15..17],
    ] {
        let b = store.read_block(0, &region).unwrap();
        assert_eq!(
            b.dims(),
            [region[0].len(), region[1].len(), region[2].len()]
        );
        for (i, j, k) in [(0, 0, 0), (1, 0, 0), (0, 0, 1)] {
            let (i, j, k) = (
                i.min(b.dims()[0] - 1),
                j.min(b.dims()[1] - 1),
                k.min(b.dims()[2] - 1),
            );
            let src = VoxelIndex::new(
                region[0].start + i,
                region[1].start + j,
                region[2].start + k,
            );
            assert_eq!(b.value(VoxelIndex::new(i, j, k)), v.value(src));
            // placed where the source places it
            let pw = b.voxel_to_world(VoxelIndex::new(i, j, k).centre());
            assert!((pw.0 - v.voxel_to_world(src.centre()).0).norm() < 1e-12);
        }
    }
    let s = store.cache_stats();
    assert!(s.evictions > 0 && s.bytes <= s.budget_bytes, "{s:?}");
}

/// A cursor read-out and the grid's placement through the volume interface: one voxel read
/// through the cache equals the in-memory value (rescaled), `None` outside the grid; world and
/// voxel coordinates map as the volume maps them.
#[test]
fn one_voxel_and_the_placement_read_through_the_interface() {
    let dir = tempfile::tempdir().unwrap();
    let v = ramp([40, 33, 35], 5);
    let out = dir.path().join("t.ome.zarr");
    convert_volume(&v, &out, &small_options());
    let options = StoreOptions {
        cache_bytes: 2 * 16 * 16 * 16 * 2,
        ..StoreOptions::default()
    };
    let store = Store::open(&out, &options).unwrap();
    let source: &dyn VolumeSource = &store;
    let memory: &dyn VolumeSource = &v;
    for (i, j, k) in [(0, 0, 0), (39, 32, 34), (17, 16, 15), (31, 2, 20)] {
        let at = VoxelIndex::new(i, j, k);
        assert_eq!(source.voxel_value(at).unwrap(), v.value(at));
        assert_eq!(memory.voxel_value(at).unwrap(), v.value(at));
        let w = source.voxel_to_world(at.centre());
        assert!((w.0 - v.voxel_to_world(at.centre()).0).norm() < 1e-12);
        let back = source.world_to_voxel(w).0;
        assert!((back - at.centre().0).norm() < 1e-9, "{back:?}");
    }
    assert_eq!(source.voxel_value(VoxelIndex::new(40, 0, 0)).unwrap(), None);
    assert_eq!(source.voxel_value(VoxelIndex::new(0, 0, 35)).unwrap(), None);
}

#[test]
fn an_interrupted_conversion_is_never_opened_and_resumes() {
    let dir = tempfile::tempdir().unwrap();
    let v = ramp([20, 18, 70], 3);
    let out = dir.path().join("r.ome.zarr");
    let options = ConvertOptions {
        coarsest_bytes: 20 * 18 * 70 * 2 / 7, // levels [1,1,1], [2,2,1], [4,4,2]: checkpoints every 32 slices
        ..small_options()
    };
    let reference_dir = dir.path().join("ref.ome.zarr");
    convert_volume(&v, &reference_dir, &options);
    // cancel once 48 slices are read
    let stop = |done: u64, _total: u64| done < 48;
    let mut r = VolumeSlices::new(&v, Path::new("memory"));
    let e = convert(&mut r, &out, &options, &Progress::new(Some(&stop))).unwrap_err();
    assert!(matches!(e, StoreError::Cancelled { .. }), "{e}");
    assert!(!out.exists());
    let partial = partial_path(&out);
    assert!(partial.is_dir());
    let e = Store::open(&partial, &StoreOptions::default()).unwrap_err();
    assert!(e.to_string().contains("half-written"), "{e}");
    // run again: resumes from the checkpoint at slice 32
    let report = convert_volume(&v, &out, &options);
    assert_eq!(report.resumed_from, Some(32));
    let a = Store::open(&out, &StoreOptions::default()).unwrap();
    let b = Store::open(&reference_dir, &StoreOptions::default()).unwrap();
    for l in 0..a.level_count() {
        let full = a.level(l).full_region();
        let (x, y) = (
            a.read_block(l, &full).unwrap(),
            b.read_block(l, &full).unwrap(),
        );
        crate::with_voxels!(x.voxels(), |p| crate::with_voxels!(
            y.voxels(),
            |q| assert!(
                bytemuck::cast_slice::<_, u8>(p) == bytemuck::cast_slice::<_, u8>(q),
                "level {l}"
            )
        ));
    }
    assert_eq!(a.intensity().unwrap(), b.intensity().unwrap());
    // a finished store is never overwritten
    let mut r = VolumeSlices::new(&v, Path::new("memory"));
    let e = convert(&mut r, &out, &options, &Progress::none()).unwrap_err();
    assert!(e.to_string().contains("already exists"));
}

#[test]
fn float_scans_state_the_error_of_their_percentiles() {
    let dir = tempfile::tempdir().unwrap();
    let mut data: Vec<f32> = (0..24 * 20 * 18)
        .map(|n| (n as f32 * 0.37).sin() * 500.0)
        .collect();
    data[5] = f32::NAN;
    let v = Volume::from_vec([24, 20, 18], Affine3::from_spacing([0.1, 0.1, 0.1]), data).unwrap();
    let out = dir.path().join("f.ome.zarr");
    convert_volume(&v, &out, &small_options());
    let store = Store::open(&out, &StoreOptions::default()).unwrap();
    let got = store.intensity().unwrap();
    let want = Intensity::of_volume(&v);
    assert_eq!(got.stats.count, want.stats.count);
    assert_eq!(got.stats.nan_count, 1);
    assert_eq!(
        (got.stats.min, got.stats.max),
        (want.stats.min, want.stats.max)
    );
    assert!(!got.exact && got.note.is_some());
    let width = (want.stats.max - want.stats.min) / 65536.0;
    for ((_, a), (_, b)) in got.percentiles.iter().zip(&want.percentiles) {
        assert!((a - b).abs() <= width + 1e-9, "{a} vs {b}");
    }
    // level 1 of a NaN voxel's block is the mean of the rest
    let b = store.read_block(0, &[0..24, 0..20, 0..18]).unwrap();
    assert!(b.value(VoxelIndex::new(5, 0, 0)).unwrap().is_nan());
}

#[test]
fn anisotropic_scans_halve_their_finer_axes_first() {
    let f = plan_levels([512, 512, 100], [0.01, 0.01, 0.04], 2, 1 << 16);
    assert_eq!(f[1], [2, 2, 1]);
    assert_eq!(f[2], [4, 4, 1]);
    assert_eq!(f[3], [8, 8, 2]);
    let last = f.last().unwrap();
    let bytes: usize = [512usize, 512, 100]
        .iter()
        .zip(last)
        .map(|(n, f)| n.div_ceil(*f))
        .product::<usize>()
        * 2;
    assert!(bytes <= 1 << 16);
}

#[test]
#[allow(
    clippy::items_after_statements,
    reason = "the failing reader belongs to this test alone"
)]
fn refuses_what_is_not_a_store() {
    let dir = tempfile::tempdir().unwrap();
    let e = Store::open(&dir.path().join("none.ome.zarr"), &StoreOptions::default()).unwrap_err();
    assert!(e.to_string().contains("not a folder"), "{e}");
    let e = Store::open(dir.path(), &StoreOptions::default()).unwrap_err();
    assert!(e.to_string().contains("Zarr group"), "{e}");
    // a source that fails mid-way names itself
    struct Failing;
    impl crate::io::slices::SliceReader for Failing {
        fn path(&self) -> &Path {
            Path::new("broken.nii")
        }
        fn dims(&self) -> [usize; 3] {
            [4, 4, 40]
        }
        fn dtype(&self) -> DType {
            DType::U8
        }
        fn world_from_voxel(&self) -> Affine3 {
            Affine3::identity()
        }
        fn rescale(&self) -> Option<Rescale> {
            None
        }
        fn notes(&self) -> Vec<String> {
            Vec::new()
        }
        fn spacing_origin(&self) -> SpacingOrigin {
            SpacingOrigin::File
        }
        fn read_slices(
            &mut self,
            k0: usize,
            _dst: &mut [u8],
            _p: &Progress<'_>,
        ) -> Result<(), IoError> {
            Err(IoError::Corrupt {
                path: "broken.nii".into(),
                what: format!("truncated at slice {k0}"),
            })
        }
    }
    let out = dir.path().join("x.ome.zarr");
    let e = convert(&mut Failing, &out, &small_options(), &Progress::none()).unwrap_err();
    assert_eq!(e.to_string(), "broken.nii: truncated at slice 0");
    assert!(!out.exists());
}

/// The voxels of a block as the scan's type, for comparing whole regions.
fn u16s(v: &Volume) -> Vec<u16> {
    crate::with_voxels!(v.voxels(), |a| a
        .iter()
        .map(|x| x.to_f64() as u16)
        .collect())
}

fn region_of(v: &Volume, r: &Region) -> Vec<u16> {
    let mut out = Vec::new();
    for k in r[2].clone() {
        for j in r[1].clone() {
            for i in r[0].clone() {
                out.push(crate::with_voxels!(v.voxels(), |a| a
                    [v.linear_index(VoxelIndex::new(i, j, k))]
                .to_f64()) as u16);
            }
        }
    }
    out
}

/// A plane across `k` read cold decodes only the leading zstd blocks (at most 128 KiB each)
/// of its chunks, and the cache holds just that part; a read deeper into the chunk decodes it
/// whole. Every read equals the scan, and a damaged chunk is an error naming it.
#[test]
fn a_plane_across_k_decodes_only_the_leading_blocks_of_its_chunks() {
    let dir = tempfile::tempdir().unwrap();
    let v = ramp([64, 64, 128], 7);
    let out = dir.path().join("deep.ome.zarr");
    let options = ConvertOptions {
        chunk: 64, // 512 KiB chunks of u16: at least four zstd blocks each
        coarsest_bytes: 1 << 30,
        ..ConvertOptions::default()
    };
    convert_volume(&v, &out, &options);
    let whole = 64 * 64 * 64 * 2;
    let store = Store::open(&out, &StoreOptions::default()).unwrap();
    let plane = |k: usize| [0..64, 0..64, k..k + 1];
    // slice 2 of the second chunk layer
    let b = store.read_block(0, &plane(66)).unwrap();
    assert_eq!(u16s(&b), region_of(&v, &plane(66)));
    let held = store.cache_stats().bytes;
    assert!(
        held >= 3 * 64 * 64 * 2 && held < whole,
        "the chunk's leading part only: {held} bytes"
    );
    // within the part held: no decoding
    let misses = store.cache_stats().misses;
    let b = store.read_block(0, &plane(65)).unwrap();
    assert_eq!(u16s(&b), region_of(&v, &plane(65)));
    assert_eq!(store.cache_stats().bytes, held);
    assert_eq!(store.cache_stats().misses, misses);
    // the chunk's last slice: the whole chunk replaces the part
    let b = store.read_block(0, &plane(127)).unwrap();
    assert_eq!(u16s(&b), region_of(&v, &plane(127)));
    assert_eq!(store.cache_stats().bytes, whole);
    // a slab across both layers on a fresh store, and every voxel through the chunk interface
    let fresh = Store::open(&out, &StoreOptions::default()).unwrap();
    let slab = [5..60, 0..64, 60..70];
    assert_eq!(
        u16s(&fresh.read_block(0, &slab).unwrap()),
        region_of(&v, &slab)
    );
    assert_eq!(
        fresh.chunk(0, [0, 0, 0]).unwrap().len(),
        64 * 64 * 64,
        "a chunk asked for whole is whole"
    );
    let all = [0..64, 0..64, 0..128];
    assert_eq!(
        u16s(&fresh.read_block(0, &all).unwrap()),
        region_of(&v, &all)
    );
    // a chunk cut short: its leading blocks may still serve a plane, the whole read fails
    let file = out.join("0/c/1/0/0");
    let bytes = std::fs::read(&file).unwrap();
    std::fs::write(&file, &bytes[..bytes.len() / 2]).unwrap();
    let damaged = Store::open(&out, &StoreOptions::default()).unwrap();
    let e = damaged.read_block(0, &all).unwrap_err().to_string();
    assert!(
        e.contains("deep.ome.zarr") && e.contains("level 0 chunk [0, 0, 1]"),
        "{e}"
    );
}
