//! The storage a conversion writes through: the file system store's layout, without its
//! `fsync` after every file.
//!
//! zarrs' file system store flushes each file to disk before a write returns, so every chunk
//! the converter compresses waits for the disk (about a quarter of a 1024³ conversion's time,
//! measured). Here a chunk is written to the page cache and handed to a background thread
//! that flushes it; the converter goes on compressing. [`WriteBehind::settle`] waits until
//! every file written so far, and the folders holding them, are on disk: the converter calls
//! it before recording a checkpoint and before renaming the store whole, so neither ever
//! points at chunks that a crash could lose.

use super::StoreError;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use zarrs::filesystem::FilesystemStore;
use zarrs::storage::byte_range::ByteRangeIterator;
use zarrs::storage::{
    Bytes, MaybeBytes, MaybeBytesIterator, OffsetBytesIterator, ReadableStorageTraits,
    StorageError, StoreKey, StorePrefix, WritableStorageTraits,
};

/// A file the flushing thread failed to put on disk, and why.
type Failure = (PathBuf, std::io::Error);

enum Job {
    /// Flush this file (and, at the next settle, its folders).
    File(PathBuf),
    /// Reply once everything sent before is on disk.
    Settle(mpsc::SyncSender<Result<(), Failure>>),
}

/// See the module docs.
pub(crate) struct WriteBehind {
    fs: FilesystemStore,
    root: PathBuf,
    /// `None` only while dropping (closing the channel ends the flushing thread).
    jobs: Option<mpsc::Sender<Job>>,
    flusher: Option<std::thread::JoinHandle<()>>,
}

impl WriteBehind {
    pub(crate) fn new(root: &Path) -> Result<Self, StoreError> {
        let fs = FilesystemStore::new(root)
            .map_err(|e| StoreError::corrupt(root, format!("cannot open: {e}")))?;
        let (tx, rx) = mpsc::channel::<Job>();
        let top = root.to_owned();
        let flusher = std::thread::Builder::new()
            .name("store-flush".into())
            .spawn(move || flush_files(&rx, &top))
            .map_err(|e| StoreError::os(root, e))?;
        Ok(Self {
            fs,
            root: root.to_owned(),
            jobs: Some(tx),
            flusher: Some(flusher),
        })
    }

    fn send(&self, job: Job) -> bool {
        self.jobs.as_ref().is_some_and(|tx| tx.send(job).is_ok())
    }

    /// Waits until every file written so far, and its folders, are on disk.
    pub(crate) fn settle(&self) -> Result<(), StoreError> {
        let (tx, rx) = mpsc::sync_channel(1);
        if !self.send(Job::Settle(tx)) {
            return Err(StoreError::corrupt(
                &self.root,
                "the thread flushing the store to disk stopped",
            ));
        }
        match rx.recv() {
            Ok(Ok(())) => Ok(()),
            Ok(Err((path, e))) => Err(StoreError::os(&path, e)),
            Err(_) => Err(StoreError::corrupt(
                &self.root,
                "the thread flushing the store to disk stopped",
            )),
        }
    }
}

impl Drop for WriteBehind {
    fn drop(&mut self) {
        drop(self.jobs.take());
        if let Some(h) = self.flusher.take() {
            let _ = h.join();
        }
    }
}

/// The flushing thread: files as they come, folders (deepest first, up to `root`) at a settle;
/// the first failure is kept for the next settle.
fn flush_files(rx: &mpsc::Receiver<Job>, root: &Path) {
    let mut folders = BTreeSet::new();
    let mut failed: Option<Failure> = None;
    for job in rx {
        match job {
            Job::File(path) => {
                if failed.is_none()
                    && let Err(e) = std::fs::File::open(&path).and_then(|f| f.sync_all())
                {
                    failed = Some((path.clone(), e));
                }
                let mut d = path.parent();
                while let Some(dir) = d
                    && dir.starts_with(root)
                {
                    folders.insert(dir.to_owned());
                    d = dir.parent();
                }
            }
            Job::Settle(reply) => {
                for dir in std::mem::take(&mut folders).iter().rev() {
                    if failed.is_none()
                        && let Err(e) = std::fs::File::open(dir).and_then(|f| f.sync_all())
                    {
                        failed = Some((dir.clone(), e));
                    }
                }
                let _ = reply.send(failed.take().map_or(Ok(()), Err));
            }
        }
    }
}

impl ReadableStorageTraits for WriteBehind {
    fn get(&self, key: &StoreKey) -> Result<MaybeBytes, StorageError> {
        self.fs.get(key)
    }
    fn get_partial_many<'a>(
        &'a self,
        key: &StoreKey,
        byte_ranges: ByteRangeIterator<'a>,
    ) -> Result<MaybeBytesIterator<'a>, StorageError> {
        self.fs.get_partial_many(key, byte_ranges)
    }
    fn size_key(&self, key: &StoreKey) -> Result<Option<u64>, StorageError> {
        self.fs.size_key(key)
    }
    fn supports_get_partial(&self) -> bool {
        self.fs.supports_get_partial()
    }
}

impl WritableStorageTraits for WriteBehind {
    /// Writes the file whole (replacing any earlier one) and hands it to the flushing thread.
    fn set(&self, key: &StoreKey, value: Bytes) -> Result<(), StorageError> {
        let path = self.fs.key_to_fspath(key);
        if let Some(parent) = path.parent()
            && !parent.is_dir()
        {
            std::fs::create_dir_all(parent)?;
        }
        std::fs::write(&path, &value)?;
        if self.send(Job::File(path)) {
            Ok(())
        } else {
            Err(StorageError::Other(
                "the thread flushing the store to disk stopped".into(),
            ))
        }
    }
    fn set_partial_many(
        &self,
        key: &StoreKey,
        offset_values: OffsetBytesIterator,
    ) -> Result<(), StorageError> {
        self.fs.set_partial_many(key, offset_values)
    }
    fn erase(&self, key: &StoreKey) -> Result<(), StorageError> {
        self.fs.erase(key)
    }
    fn erase_prefix(&self, prefix: &StorePrefix) -> Result<(), StorageError> {
        self.fs.erase_prefix(prefix)
    }
    fn supports_set_partial(&self) -> bool {
        self.fs.supports_set_partial()
    }
}
