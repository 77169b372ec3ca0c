//! Opening a scan on a background thread, with progress and cancel.
//!
//! The thread runs [`sutura_core::io::open`] with a progress callback that stores `(done, total)` in
//! atomics the UI reads each frame, and returns `false` (cancel) once the user has asked to
//! cancel; then it summarises the scan ([`Scan::new`]: one pass for the intensity
//! percentiles). The outcome comes back by channel; the UI thread never waits for it. A project
//! specimen's scan is opened through its [`ScanRecord`], which also checks that it is the scan
//! the landmarks were placed on.
//!
//! Memory: a scan is read whole only when its voxels fit the [`MemoryBudget`]. An OME-Zarr
//! store larger than that is opened as a [`VolumeSource`] and read a chunk at a time
//! (through a chunk cache); any other scan larger than that is opened from the store built
//! for it in the store folder when one is there, else not read at all: the load ends with
//! [`Outcome::TooLarge`], and the app offers to build the store ([`Loading::build_store`]).
//! The file checks this takes run here, off the window's thread.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::time::Instant;

use super::state::Scan;
use sutura_core::io::{self, OpenOptions, Progress};
use sutura_core::landmarks::project::ScanRecord;
use sutura_core::landmarks::scan::{
    build_store_of, cached_store_path, open_source, scan_voxel_bytes, store_is_of,
};
use sutura_core::store::write::ConvertOptions;
use sutura_core::volume::{Volume, VolumeSource};

/// How much memory the window gives the scan it shows.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MemoryBudget {
    /// A scan whose voxels take at most this many bytes is read whole into memory; a larger
    /// one is read from an OME-Zarr store, a chunk at a time.
    pub bytes: u64,
}

impl MemoryBudget {
    /// The smallest budget the window accepts (a few chunks: small enough for the tests to
    /// read a sample scan through its store).
    pub const MIN_BYTES: u64 = 256 << 10;

    /// A budget of `gib` GiB, or a quarter of this machine's memory when `None` (common
    /// practice: room for the system, the user's other programs and the window's own
    /// pictures).
    #[must_use]
    pub fn new(gib: Option<f64>) -> Self {
        let bytes = match gib {
            Some(g) if g.is_finite() && g > 0.0 => (g * f64::from(1u32 << 30)) as u64,
            _ => machine_memory_bytes() / 4,
        };
        Self {
            bytes: bytes.max(Self::MIN_BYTES),
        }
    }

    /// Bytes of voxels the window holds of a scan read from its store: a quarter of the
    /// budget, shared by the chunk cache and the 3D view's level (the rest of the budget is
    /// room for the pictures, a preparation's label bricks and its selections).
    #[must_use]
    pub fn voxel_bytes(self) -> u64 {
        self.bytes / 4
    }

    /// Bytes of decoded chunks a store keeps in memory: the voxel share less the 3D view's
    /// level.
    #[must_use]
    pub fn cache_bytes(self) -> u64 {
        (self.voxel_bytes().saturating_sub(self.volume_view_bytes())).max(64 << 10)
    }

    /// How the window builds a store: levels down to one the 3D view can read (within
    /// [`Self::volume_view_bytes`], at most the usual 64 MiB), and chunks of 64³ voxels, or
    /// smaller when the chunk cache would hold fewer than eight of them (16-bit voxels).
    #[must_use]
    pub fn convert_options(self) -> ConvertOptions {
        let cache = self.cache_bytes();
        let chunk = [64usize, 32]
            .into_iter()
            .find(|&c| 8 * 2 * (c as u64).pow(3) <= cache)
            .unwrap_or(16);
        ConvertOptions {
            chunk,
            coarsest_bytes: self.volume_view_bytes().min(64 << 20),
            ..ConvertOptions::default()
        }
    }

    /// Bytes of the level the 3D view reads of a store: an eighth of the budget (half the
    /// voxel share), at most 512 MiB (a 2400³ scan's 600³ level, more voxels across than a
    /// screen has pixels).
    #[must_use]
    pub fn volume_view_bytes(self) -> u64 {
        (self.bytes / 8).clamp(64 << 10, 512 << 20)
    }
}

/// This machine's memory (`MemTotal` of `/proc/meminfo`); 8 GiB where that cannot be read.
#[must_use]
pub fn machine_memory_bytes() -> u64 {
    std::fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|t| {
            t.lines()
                .find_map(|l| l.strip_prefix("MemTotal:"))
                .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
        })
        .map_or(8 << 30, |kib| kib * 1024)
}

/// How a load ended.
#[derive(Debug)]
pub enum Outcome {
    Loaded(Scan),
    /// A specimen's scan that is not the one its record describes: what differs.
    Mismatched(Scan, String),
    /// The scan's voxels take `bytes`, more than the budget: it was not read (see the module
    /// docs); `store` is where the store of it would be built (none of it is there yet).
    TooLarge {
        bytes: u64,
        store: PathBuf,
    },
    Failed(String),
    Cancelled,
}

/// What a loading job produced.
#[allow(
    clippy::large_enum_variant,
    reason = "one value per load, moved once to the loading thread's end"
)]
enum Opened {
    Memory(Volume),
    /// Read through a store: the scan itself, or the store built for it (its path).
    Source(Box<dyn VolumeSource + Send + Sync>, Option<PathBuf>),
    TooLarge(u64, PathBuf),
}

impl Opened {
    /// The load's outcome: the scan at `path` summarised as scan number `id`, flagged when
    /// `why` says it is not the recorded one; or why there is none.
    fn outcome(self, id: u64, path: PathBuf, budget: MemoryBudget, why: Option<String>) -> Outcome {
        let scan = match self {
            Self::TooLarge(bytes, store) => return Outcome::TooLarge { bytes, store },
            Self::Memory(v) => Ok(Scan::new(id, path, v)),
            Self::Source(s, built) => {
                let shared: Arc<dyn VolumeSource + Send + Sync> = Arc::from(s);
                Scan::from_source(id, path, shared, budget.volume_view_bytes()).map(|mut scan| {
                    scan.store = built;
                    scan
                })
            }
        };
        match (scan, why) {
            (Ok(s), None) => Outcome::Loaded(s),
            (Ok(s), Some(why)) => Outcome::Mismatched(s, why),
            (Err(e), _) => Outcome::Failed(e),
        }
    }
}

/// A load in progress.
pub struct Loading {
    /// The scan asked for.
    pub path: PathBuf,
    /// What is being done to it, for the progress window ("Opening", "Building a store of").
    pub action: &'static str,
    /// The project specimen whose scan this is.
    pub specimen: Option<String>,
    pub started: Instant,
    done: Arc<AtomicU64>,
    total: Arc<AtomicU64>,
    cancel: Arc<AtomicBool>,
    outcome: Receiver<Outcome>,
}

impl Loading {
    /// Starts loading `path` as scan number `id`; `wake` is called on progress and at the end
    /// (the app's repaint).
    /// A scan file over the budget is opened from the store built for it in `cache` when
    /// one is there.
    pub fn start(
        path: &Path,
        options: OpenOptions,
        budget: MemoryBudget,
        cache: PathBuf,
        id: u64,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        Self::spawn(path, None, id, budget, wake, move |p, progress| {
            let bytes = scan_voxel_bytes(p, &options).map_err(|e| e.to_string())?;
            let opened = if bytes <= budget.bytes {
                // within the budget: read whole at full resolution (a store like a file)
                if sutura_core::store::is_store(p) {
                    sutura_core::landmarks::scan::open_scan(p, options.voxel_size_mm, progress)
                } else {
                    io::open(p, &options, progress)
                }
                .map(Opened::Memory)
            } else if sutura_core::store::is_store(p) {
                open_source(p, options.voxel_size_mm, budget.cache_bytes())
                    .map(|s| Opened::Source(s, None))
            } else {
                cached_store_path(&cache, p, options.voxel_size_mm).and_then(|store| {
                    if store_is_of(&store, p) {
                        open_source(&store, options.voxel_size_mm, budget.cache_bytes())
                            .map(|s| Opened::Source(s, Some(store)))
                    } else {
                        Ok(Opened::TooLarge(bytes, store))
                    }
                })
            };
            opened.map(|o| (o, None)).map_err(|e| e.to_string())
        })
    }

    /// Converts the scan at `scan` into an OME-Zarr store at `store` (resuming an interrupted
    /// conversion of the same scan), with progress and cancel, then opens the store as the
    /// scan shown.
    /// For a project specimen (`specimen`: the project file, the specimen and its scan
    /// record), the store is opened with the record's checks: the recorded scan's files as
    /// they are, the voxels sampled from the store.
    pub fn build_store(
        scan: &Path,
        store: &Path,
        options: OpenOptions,
        budget: MemoryBudget,
        id: u64,
        specimen: Option<(PathBuf, String, ScanRecord)>,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let out = store.to_path_buf();
        let name = specimen.as_ref().map(|(_, s, _)| s.clone());
        let mut loading = Self::spawn(scan, name, id, budget, wake, move |p, progress| {
            build_store_of(p, &options, &out, budget.convert_options(), progress)
                .map_err(|e| e.to_string())?;
            if progress.is_cancelled() {
                return Err("cancelled".into());
            }
            if let Some((project_file, _, record)) = specimen {
                let (source, mismatch) = record
                    .open_source_from(&project_file, Some(&out), budget.cache_bytes())
                    .map_err(|e| e.to_string())?;
                return Ok((
                    Opened::Source(source, Some(out)),
                    mismatch.map(|m| m.differences.join("; ")),
                ));
            }
            let source = open_source(&out, options.voxel_size_mm, budget.cache_bytes())
                .map_err(|e| e.to_string())?;
            Ok((Opened::Source(source, Some(out)), None))
        });
        loading.action = "Building a store of";
        loading
    }

    /// Starts loading the scan of project specimen `specimen` as its record says (the recorded
    /// voxel size), checking it against the record's fingerprint and placement.
    pub fn start_specimen(
        project_file: &Path,
        specimen: &str,
        record: ScanRecord,
        budget: MemoryBudget,
        cache: PathBuf,
        id: u64,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let project_file = project_file.to_path_buf();
        let path = record.resolve(&project_file);
        Self::spawn(
            &path,
            Some(specimen.to_owned()),
            id,
            budget,
            wake,
            move |p, progress| {
                let options = OpenOptions {
                    voxel_size_mm: record.voxel_size_override(),
                    ..OpenOptions::default()
                };
                let bytes = scan_voxel_bytes(p, &options).map_err(|e| e.to_string())?;
                let why = |m: Option<sutura_core::landmarks::fingerprint::Mismatch>| {
                    m.map(|m| m.differences.join("; "))
                };
                if bytes <= budget.bytes {
                    let (volume, mismatch) = record
                        .open(&project_file, progress)
                        .map_err(|e| e.to_string())?;
                    Ok((Opened::Memory(volume), why(mismatch)))
                } else if sutura_core::store::is_store(p) {
                    let (source, mismatch) = record
                        .open_source(&project_file, budget.cache_bytes())
                        .map_err(|e| e.to_string())?;
                    Ok((Opened::Source(source, None), why(mismatch)))
                } else {
                    let store = cached_store_path(&cache, p, options.voxel_size_mm)
                        .map_err(|e| e.to_string())?;
                    if !store_is_of(&store, p) {
                        return Ok((Opened::TooLarge(bytes, store), None));
                    }
                    let (source, mismatch) = record
                        .open_source_from(&project_file, Some(&store), budget.cache_bytes())
                        .map_err(|e| e.to_string())?;
                    Ok((Opened::Source(source, Some(store)), why(mismatch)))
                }
            },
        )
    }

    fn spawn(
        path: &Path,
        specimen: Option<String>,
        id: u64,
        budget: MemoryBudget,
        wake: impl Fn() + Send + Sync + 'static,
        job: impl FnOnce(&Path, &Progress<'_>) -> Result<(Opened, Option<String>), String>
        + Send
        + 'static,
    ) -> Self {
        let done = Arc::new(AtomicU64::new(0));
        let total = Arc::new(AtomicU64::new(0));
        let cancel = Arc::new(AtomicBool::new(false));
        let (tx, outcome) = channel();
        let (d, t, c, p) = (
            Arc::clone(&done),
            Arc::clone(&total),
            Arc::clone(&cancel),
            path.to_path_buf(),
        );
        let spawned = std::thread::Builder::new()
            .name("sutura-load".into())
            .spawn(move || {
                let report = |n: u64, of: u64| {
                    d.store(n, Ordering::Relaxed);
                    t.store(of, Ordering::Relaxed);
                    wake();
                    !c.load(Ordering::Relaxed)
                };
                let progress = Progress::new(Some(&report));
                let result = job(&p, &progress);
                let outcome = if c.load(Ordering::Relaxed) {
                    Outcome::Cancelled
                } else {
                    match result {
                        Ok((opened, why)) => opened.outcome(id, p, budget, why),
                        Err(e) => Outcome::Failed(e),
                    }
                };
                let _ = tx.send(outcome);
                wake();
            });
        let outcome = match spawned {
            Ok(_) => outcome,
            Err(e) => {
                let (tx, rx) = channel();
                let _ = tx.send(Outcome::Failed(format!(
                    "cannot start a loading thread: {e}"
                )));
                rx
            }
        };
        Self {
            path: path.to_path_buf(),
            action: "Opening",
            specimen,
            started: Instant::now(),
            done,
            total,
            cancel,
            outcome,
        }
    }

    /// The fraction done, when the loader has said how much there is.
    #[must_use]
    pub fn fraction(&self) -> Option<f32> {
        let t = self.total.load(Ordering::Relaxed);
        (t > 0).then(|| (self.done.load(Ordering::Relaxed) as f64 / t as f64).min(1.0) as f32)
    }

    /// Asks the loader to stop at its next progress report.
    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    #[must_use]
    pub fn is_cancelling(&self) -> bool {
        self.cancel.load(Ordering::Relaxed)
    }

    /// The outcome, once there is one.
    #[must_use]
    pub fn poll(&self) -> Option<Outcome> {
        match self.outcome.try_recv() {
            Ok(o) => Some(o),
            Err(TryRecvError::Empty) => None,
            Err(TryRecvError::Disconnected) => Some(Outcome::Failed(
                "the loading thread stopped unexpectedly".into(),
            )),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    /// A load with the machine's default budget (the sample scans are within it).
    fn start_default(path: &Path, id: u64) -> Loading {
        Loading::start(
            path,
            OpenOptions::default(),
            MemoryBudget::new(None),
            PathBuf::new(),
            id,
            || {},
        )
    }

    fn wait(l: &Loading) -> Outcome {
        let t0 = Instant::now();
        loop {
            if let Some(o) = l.poll() {
                return o;
            }
            assert!(t0.elapsed() < Duration::from_mins(1), "load never finished");
            std::thread::sleep(Duration::from_millis(5));
        }
    }

    #[test]
    fn loads_the_sample_scan_in_the_background() {
        let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-002.nii.gz");
        let l = start_default(&p, 7);
        match wait(&l) {
            Outcome::Loaded(s) => {
                assert_eq!(s.id, 7);
                assert!(s.robust_range.0 < s.robust_range.1);
            }
            o => panic!("expected a scan, got {o:?}"),
        }
        assert_eq!(l.fraction(), Some(1.0));
    }

    #[test]
    fn a_cancelled_load_reports_cancelled() {
        let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-002.nii.gz");
        let l = start_default(&p, 1);
        l.cancel();
        assert!(matches!(wait(&l), Outcome::Cancelled));
    }

    #[test]
    fn a_bad_file_fails_with_its_name() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("broken.nii");
        std::fs::write(&p, b"not a scan at all").unwrap();
        let l = start_default(&p, 1);
        match wait(&l) {
            Outcome::Failed(msg) => assert!(msg.contains("broken.nii"), "{msg}"),
            o => panic!("expected a failure, got {o:?}"),
        }
    }

    /// Over the budget, a scan file is not read (the app offers a store), and a store is read
    /// through the volume interface; within it, both are read whole.
    #[test]
    fn the_budget_decides_whole_source_or_too_large() {
        let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-002.nii.gz");
        let dir = tempfile::tempdir().unwrap();
        let store = dir.path().join("s.ome.zarr");
        let tiny = MemoryBudget::new(Some(1.0 / 4096.0));
        assert_eq!(tiny.bytes, MemoryBudget::MIN_BYTES);
        // a store of another scan at that path is set aside, never deleted, and replaced
        let other = p.with_file_name("HDC-003.nii.gz");
        let build = |scan: &Path| {
            build_store_of(
                scan,
                &OpenOptions::default(),
                &store,
                tiny.convert_options(),
                &Progress::none(),
            )
            .unwrap();
        };
        build(&other);
        assert!(sutura_core::landmarks::scan::store_is_of(&store, &other));
        build(&p);
        assert!(sutura_core::landmarks::scan::store_is_of(&store, &p));
        let aside: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with("s.ome.zarr.stale-"))
            .collect();
        assert_eq!(aside.len(), 1, "{aside:?}");
        // the store of this scan is kept as it is
        let stamp = std::fs::metadata(store.join("zarr.json"))
            .unwrap()
            .modified()
            .unwrap();
        build(&p);
        let again = std::fs::metadata(store.join("zarr.json"))
            .unwrap()
            .modified()
            .unwrap();
        assert_eq!(stamp, again);
        // over the budget: not read, and where its store would go is said
        let cache = dir.path().join("cache");
        let start = |path: &Path, budget, id| {
            wait(&Loading::start(
                path,
                OpenOptions::default(),
                budget,
                cache.clone(),
                id,
                || {},
            ))
        };
        let built = match start(&p, tiny, 1) {
            Outcome::TooLarge { bytes, store } => {
                assert_eq!(bytes, 120 * 88 * 48 * 2);
                assert!(store.starts_with(&cache) && !store.exists());
                store
            }
            o => panic!("expected too large, got {o:?}"),
        };
        // once that store is there, the scan opens from it at once
        build_store_of(
            &p,
            &OpenOptions::default(),
            &built,
            tiny.convert_options(),
            &Progress::none(),
        )
        .unwrap();
        match start(&p, tiny, 3) {
            Outcome::Loaded(s) => {
                assert!(s.whole().is_none());
                assert_eq!(s.store.as_deref(), Some(built.as_path()));
                assert_eq!(s.path, p);
            }
            o => panic!("expected a scan, got {o:?}"),
        }
        match start(&store, tiny, 2) {
            Outcome::Loaded(s) => {
                assert!(s.whole().is_none());
                assert!(
                    s.grid().level_count() > 1,
                    "levels down to the 3D view's share"
                );
            }
            o => panic!("expected a scan, got {o:?}"),
        }
        let roomy = MemoryBudget::new(Some(1.0));
        for (n, path) in [&p, &store].into_iter().enumerate() {
            match wait(&Loading::start(
                path,
                OpenOptions::default(),
                roomy,
                cache.clone(),
                n as u64,
                || {},
            )) {
                Outcome::Loaded(s) => assert!(s.whole().is_some()),
                o => panic!("expected a scan, got {o:?}"),
            }
        }
    }
}
