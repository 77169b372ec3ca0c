//! Adding specimens in the background: each new specimen's scan is opened and fingerprinted by
//! the library's rule ([`specimen_from_scan`], as `sutura project add` does) on a worker thread,
//! one scan at a time so memory holds one scan, with progress and cancel. The UI thread takes
//! the finished specimens and adds them to the project as one undoable step.
//!
//! A store is recorded through the volume interface ([`specimen_from_source`]); a scan over the
//! memory budget is converted to a store in the store folder first (or the one built for it
//! before is taken) and recorded from it — the record is the scan's own, so opening the
//! specimen later finds the same store.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::sync::{Arc, Mutex, PoisonError};
use std::time::Instant;

use super::loader::MemoryBudget;
use sutura_core::io::{OpenOptions, Progress};
use sutura_core::landmarks::project::Specimen;
use sutura_core::landmarks::project::create::{
    CreateError, NewSpecimen, specimen_from_scan, specimen_from_source,
};
use sutura_core::landmarks::scan::{build_store_of, cached_store_path, scan_voxel_bytes};

/// One new specimen recorded as the budget allows (see the module docs).
fn record(
    project_file: &Path,
    new: &NewSpecimen,
    budget: MemoryBudget,
    cache: &Path,
    progress: &Progress<'_>,
) -> Result<Specimen, CreateError> {
    if sutura_core::store::is_store(&new.scan) {
        return Ok(specimen_from_source(project_file, new, None)?.0);
    }
    let options = OpenOptions {
        voxel_size_mm: new.voxel_size_mm,
        ..OpenOptions::default()
    };
    if scan_voxel_bytes(&new.scan, &options)? <= budget.bytes {
        return Ok(specimen_from_scan(project_file, new, progress)?.0);
    }
    let store = cached_store_path(cache, &new.scan, new.voxel_size_mm)?;
    build_store_of(
        &new.scan,
        &options,
        &store,
        budget.convert_options(),
        progress,
    )?;
    Ok(specimen_from_source(project_file, new, Some(&store))?.0)
}

/// Specimens that were made, and why the others were not (one line each).
pub type Added = (Vec<Specimen>, Vec<String>);

/// A batch of specimens being added.
pub struct Adding {
    pub started: Instant,
    paths: Vec<PathBuf>,
    done: Arc<AtomicUsize>,
    /// Progress within the scan being opened, 0..=1000.
    within: Arc<AtomicUsize>,
    cancel: Arc<AtomicBool>,
    rx: Mutex<Receiver<Added>>,
}

impl Adding {
    /// Starts adding `new` to the project at `project_file`; `wake` is called on progress and
    /// at the end.
    pub fn start(
        project_file: &Path,
        new: Vec<NewSpecimen>,
        budget: MemoryBudget,
        cache: PathBuf,
        wake: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let paths = new.iter().map(|n| n.scan.clone()).collect();
        let done = Arc::new(AtomicUsize::new(0));
        let within = Arc::new(AtomicUsize::new(0));
        let cancel = Arc::new(AtomicBool::new(false));
        let (tx, rx) = channel();
        let (d, w, c) = (Arc::clone(&done), Arc::clone(&within), Arc::clone(&cancel));
        let project_file = project_file.to_path_buf();
        let spawned = std::thread::Builder::new()
            .name("sutura-add".into())
            .spawn(move || {
                let mut added = Vec::new();
                let mut failed = Vec::new();
                for n in &new {
                    if c.load(Ordering::Relaxed) {
                        failed.push(format!("{}: cancelled", n.id));
                        continue;
                    }
                    let report = |a: u64, of: u64| {
                        w.store(
                            (a * 1000).checked_div(of).unwrap_or(0) as usize,
                            Ordering::Relaxed,
                        );
                        wake();
                        !c.load(Ordering::Relaxed)
                    };
                    let progress = Progress::new(Some(&report));
                    match record(&project_file, n, budget, &cache, &progress) {
                        Ok(s) => added.push(s),
                        Err(e) => failed.push(format!("{}: {e}", n.id)),
                    }
                    d.fetch_add(1, Ordering::Relaxed);
                    w.store(0, Ordering::Relaxed);
                    wake();
                }
                let _ = tx.send((added, failed));
                wake();
            });
        if let Err(e) = spawned {
            let (tx2, rx2) = channel();
            let _ = tx2.send((Vec::new(), vec![format!("cannot start a thread: {e}")]));
            return Self {
                started: Instant::now(),
                paths: Vec::new(),
                done,
                within,
                cancel,
                rx: Mutex::new(rx2),
            };
        }
        Self {
            started: Instant::now(),
            paths,
            done,
            within,
            cancel,
            rx: Mutex::new(rx),
        }
    }

    /// How far the batch has got, 0..=1.
    #[must_use]
    pub fn fraction(&self) -> f32 {
        let n = self.paths.len().max(1) as f32;
        let d = self.done.load(Ordering::Relaxed) as f32;
        let w = self.within.load(Ordering::Relaxed) as f32 / 1000.0;
        ((d + w) / n).min(1.0)
    }

    /// The scan being opened now.
    #[must_use]
    pub fn current_path(&self) -> PathBuf {
        let d = self.done.load(Ordering::Relaxed);
        self.paths.get(d).cloned().unwrap_or_default()
    }

    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    #[must_use]
    pub fn is_cancelling(&self) -> bool {
        self.cancel.load(Ordering::Relaxed)
    }

    /// The batch's outcome once it has ended.
    pub fn poll(&self) -> Option<Added> {
        match self
            .rx
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .try_recv()
        {
            Ok(a) => Some(a),
            Err(TryRecvError::Empty) => None,
            Err(TryRecvError::Disconnected) => Some((
                Vec::new(),
                vec!["the thread adding specimens stopped".into()],
            )),
        }
    }
}
