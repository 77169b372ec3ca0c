//! The chunk cache: decoded chunks kept in memory up to a byte budget, least recently used
//! evicted first.
//!
//! Chunks are shared (`Arc`): a block being assembled keeps the chunks it copies from alive
//! even if they are evicted meanwhile, so the cache's own bytes never exceed the budget and a
//! reader's transient extra is at most the chunks of one chunk layer of its block.

use crate::volume::Voxels;
use std::collections::{BTreeMap, HashMap};
use std::sync::{Arc, Mutex, PoisonError};

/// A chunk's key: level and chunk index along `i`, `j`, `k`.
pub type ChunkKey = (usize, [usize; 3]);

/// Counters of a cache's use since it was made.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct CacheStats {
    /// Bytes of decoded chunks held now.
    pub bytes: u64,
    pub budget_bytes: u64,
    pub chunks: usize,
    pub hits: u64,
    pub misses: u64,
    pub evictions: u64,
}

struct Entry {
    chunk: Arc<Voxels>,
    bytes: u64,
    tick: u64,
}

#[derive(Default)]
struct State {
    entries: HashMap<ChunkKey, Entry>,
    /// Last use → key, oldest first.
    order: BTreeMap<u64, ChunkKey>,
    tick: u64,
    stats: CacheStats,
}

/// Decoded chunks up to a byte budget (see the module docs).
pub struct ChunkCache {
    budget_bytes: u64,
    state: Mutex<State>,
}

impl ChunkCache {
    #[must_use]
    pub fn new(budget_bytes: u64) -> Self {
        Self {
            budget_bytes,
            state: Mutex::new(State::default()),
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, State> {
        // a panic while holding the lock leaves the maps consistent (every update is a few
        // infallible inserts and removes), so a poisoned lock is still usable
        self.state.lock().unwrap_or_else(PoisonError::into_inner)
    }

    /// The chunk, if held; marks it as just used.
    pub fn get(&self, key: &ChunkKey) -> Option<Arc<Voxels>> {
        let mut s = self.lock();
        s.tick += 1;
        let tick = s.tick;
        let Some(e) = s.entries.get_mut(key) else {
            s.stats.misses += 1;
            return None;
        };
        let old = e.tick;
        e.tick = tick;
        let chunk = e.chunk.clone();
        s.order.remove(&old);
        s.order.insert(tick, *key);
        s.stats.hits += 1;
        Some(chunk)
    }

    /// Whether the chunk is held (does not count as a use).
    pub fn contains(&self, key: &ChunkKey) -> bool {
        self.lock().entries.contains_key(key)
    }

    /// How many voxels of the chunk are held (a chunk may be held in part: its leading
    /// slices); does not count as a use.
    pub fn voxels_of(&self, key: &ChunkKey) -> Option<usize> {
        self.lock().entries.get(key).map(|e| e.chunk.len())
    }

    /// Keeps a chunk, evicting the least recently used until the budget holds. A chunk larger
    /// than the whole budget is not kept.
    pub fn insert(&self, key: ChunkKey, chunk: Arc<Voxels>) {
        let bytes = (chunk.len() * chunk.dtype().size_bytes()) as u64;
        if bytes > self.budget_bytes {
            return;
        }
        let mut s = self.lock();
        s.tick += 1;
        let tick = s.tick;
        if let Some(old) = s.entries.remove(&key) {
            s.order.remove(&old.tick);
            s.stats.bytes -= old.bytes;
        }
        while s.stats.bytes + bytes > self.budget_bytes {
            let Some((_, victim)) = s.order.pop_first() else {
                break;
            };
            if let Some(e) = s.entries.remove(&victim) {
                s.stats.bytes -= e.bytes;
                s.stats.evictions += 1;
            }
        }
        s.entries.insert(key, Entry { chunk, bytes, tick });
        s.order.insert(tick, key);
        s.stats.bytes += bytes;
    }

    /// Counters and current size.
    pub fn stats(&self) -> CacheStats {
        let s = self.lock();
        CacheStats {
            budget_bytes: self.budget_bytes,
            chunks: s.entries.len(),
            ..s.stats
        }
    }

    #[must_use]
    pub fn budget_bytes(&self) -> u64 {
        self.budget_bytes
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::volume::VoxelBuffer;

    fn chunk(n: usize) -> Arc<Voxels> {
        Arc::new(Voxels::U16(VoxelBuffer::from_vec(vec![0u16; n])))
    }

    #[test]
    fn evicts_the_least_recently_used_within_the_budget() {
        let cache = ChunkCache::new(300);
        cache.insert((0, [0, 0, 0]), chunk(50)); // 100 bytes
        cache.insert((0, [1, 0, 0]), chunk(50));
        cache.insert((0, [2, 0, 0]), chunk(50));
        assert!(cache.get(&(0, [0, 0, 0])).is_some()); // [0] now most recent
        cache.insert((0, [3, 0, 0]), chunk(50)); // evicts [1]
        assert!(!cache.contains(&(0, [1, 0, 0])));
        assert!(cache.contains(&(0, [0, 0, 0])));
        let s = cache.stats();
        assert_eq!((s.bytes, s.chunks, s.evictions), (300, 3, 1));
        assert!(cache.get(&(1, [0, 0, 0])).is_none());
        assert_eq!(cache.stats().misses, 1);
        cache.insert((0, [9, 9, 9]), chunk(200)); // larger than the budget: not kept
        assert!(!cache.contains(&(0, [9, 9, 9])));
        assert!(cache.stats().bytes <= 300);
    }
}
