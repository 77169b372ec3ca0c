//! Opening a scan on a background thread, with progress and cancel.
//!
//! The thread runs [`sutura_core::io::open`] with a progress callback that stores `(done, total)` in
//! atomics the UI reads each frame, and returns `false` (cancel) once the user has asked to
//! cancel; then it summarises the scan ([`Scan::new`]: one pass for the intensity
//! percentiles). The outcome comes back by channel; the UI thread never waits for it. A project
//! specimen's scan is opened through its [`ScanRecord`], which also checks that it is the scan
//! the landmarks were placed on.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::time::Instant;

use super::state::Scan;
use sutura_core::io::{self, OpenOptions, Progress};
use sutura_core::landmarks::project::ScanRecord;
use sutura_core::volume::Volume;

/// How a load ended.
#[derive(Debug)]
pub enum Outcome {
    Loaded(Scan),
    /// A specimen's scan that is not the one its record describes: what differs.
    Mismatched(Scan, String),
    Failed(String),
    Cancelled,
}

/// A load in progress.
pub struct Loading {
    pub path: PathBuf,
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
    pub fn start(
        path: &Path,
        options: OpenOptions,
        id: u64,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        Self::spawn(path, None, id, wake, move |p, progress| {
            // a store is read whole at full resolution, like a file
            if sutura_core::store::is_store(p) {
                sutura_core::landmarks::scan::open_scan(p, options.voxel_size_mm, progress)
            } else {
                io::open(p, &options, progress)
            }
            .map(|v| (v, None))
            .map_err(|e| e.to_string())
        })
    }

    /// Starts loading the scan of project specimen `specimen` as its record says (the recorded
    /// voxel size), checking it against the record's fingerprint and placement.
    pub fn start_specimen(
        project_file: &Path,
        specimen: &str,
        record: ScanRecord,
        id: u64,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let project_file = project_file.to_path_buf();
        let path = record.resolve(&project_file);
        Self::spawn(
            &path,
            Some(specimen.to_owned()),
            id,
            wake,
            move |_, progress| {
                let (volume, mismatch) = record
                    .open(&project_file, progress)
                    .map_err(|e| e.to_string())?;
                Ok((volume, mismatch.map(|m| m.differences.join("; "))))
            },
        )
    }

    fn spawn(
        path: &Path,
        specimen: Option<String>,
        id: u64,
        wake: impl Fn() + Send + Sync + 'static,
        job: impl FnOnce(&Path, &Progress<'_>) -> Result<(Volume, Option<String>), String>
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
                        Ok((volume, None)) => Outcome::Loaded(Scan::new(id, p, volume)),
                        Ok((volume, Some(why))) => {
                            Outcome::Mismatched(Scan::new(id, p, volume), why)
                        }
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
        let l = Loading::start(&p, OpenOptions::default(), 7, || {});
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
        let l = Loading::start(&p, OpenOptions::default(), 1, || {});
        l.cancel();
        assert!(matches!(wait(&l), Outcome::Cancelled));
    }

    #[test]
    fn a_bad_file_fails_with_its_name() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("broken.nii");
        std::fs::write(&p, b"not a scan at all").unwrap();
        let l = Loading::start(&p, OpenOptions::default(), 1, || {});
        match wait(&l) {
            Outcome::Failed(msg) => assert!(msg.contains("broken.nii"), "{msg}"),
            o => panic!("expected a failure, got {o:?}"),
        }
    }
}
