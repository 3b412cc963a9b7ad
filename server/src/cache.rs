//! A least-recently-used cache bounded in bytes, for decoded inputs and finished answers.
//!
//! Keys carry the dataset's load generation, so a reloaded file never answers from the old
//! one's entries; those age out. One mutex guards the map: lookups and inserts are a hash
//! probe and a B-tree update, far shorter than any read or computation they save.

use std::collections::{BTreeMap, HashMap};
use std::sync::{Arc, Mutex};

use axum::body::Bytes;
use shearbox_core::Fields;

/// What identifies a cached value.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub enum CacheKey {
    /// The decoded inputs of one block at one time step.
    Inputs {
        /// The dataset's load generation.
        generation: u64,
        /// Time step.
        time_idx: usize,
        /// First and past-the-end row of the block.
        rows: (usize, usize),
        /// First column and number of columns of the block.
        cols: (usize, usize),
    },
    /// The decoded inputs of a whole time step, kept when a step is small beside the cache.
    Step {
        /// The dataset's load generation.
        generation: u64,
        /// Time step.
        time_idx: usize,
    },
    /// A finished answer, by the canonical form of its request.
    Answer {
        /// The dataset's load generation.
        generation: u64,
        /// The request in canonical form.
        request: String,
    },
}

/// A cached value.
#[derive(Debug, Clone)]
pub enum Cached {
    /// Decoded inputs.
    Inputs(Arc<Fields>),
    /// An answer's JSON body.
    Answer(Bytes),
}

impl Cached {
    /// Bytes the value holds.
    pub fn size(&self) -> usize {
        match self {
            Cached::Answer(b) => b.len(),
            Cached::Inputs(f) => fields_bytes(f),
        }
    }
}

/// Bytes of the arrays of `fields`.
pub fn fields_bytes(f: &Fields) -> usize {
    let n3 = |a: Option<ndarray::ArrayView3<'_, f32>>| a.map_or(0, |a| a.len());
    let n2 = |a: Option<ndarray::ArrayView2<'_, f32>>| a.map_or(0, |a| a.len());
    let wind = f.wind().map_or(0, |(u, v)| u.len() + v.len());
    let values = n3(f.geopotential_height())
        + n3(f.temperature())
        + n3(f.specific_humidity())
        + wind
        + n2(f.surface_pressure())
        + n2(f.surface_height());
    values * std::mem::size_of::<f32>()
}

struct Entry {
    value: Cached,
    size: usize,
    tick: u64,
}

#[derive(Default)]
struct Lru {
    map: HashMap<CacheKey, Entry>,
    order: BTreeMap<u64, CacheKey>,
    bytes: usize,
    tick: u64,
}

/// The cache. Values larger than the whole capacity are not kept.
pub struct Cache {
    capacity: usize,
    inner: Mutex<Lru>,
}

impl Cache {
    /// A cache of at most `capacity_bytes`.
    pub fn new(capacity_bytes: usize) -> Self {
        Self { capacity: capacity_bytes, inner: Mutex::new(Lru::default()) }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Lru> {
        self.inner.lock().unwrap_or_else(|p| p.into_inner())
    }

    /// The value under `key`, marked as most recently used.
    pub fn get(&self, key: &CacheKey) -> Option<Cached> {
        let mut lru = self.lock();
        lru.tick += 1;
        let tick = lru.tick;
        let entry = lru.map.get_mut(key)?;
        let old = std::mem::replace(&mut entry.tick, tick);
        let value = entry.value.clone();
        if let Some(k) = lru.order.remove(&old) {
            lru.order.insert(tick, k);
        }
        Some(value)
    }

    /// Stores `value` under `key`, evicting the least recently used entries to make room.
    pub fn insert(&self, key: CacheKey, value: Cached) {
        let size = value.size();
        if size > self.capacity {
            return;
        }
        let mut lru = self.lock();
        if let Some(old) = lru.map.remove(&key) {
            lru.order.remove(&old.tick);
            lru.bytes -= old.size;
        }
        while lru.bytes + size > self.capacity {
            let Some((_, oldest)) = lru.order.pop_first() else { break };
            if let Some(e) = lru.map.remove(&oldest) {
                lru.bytes -= e.size;
            }
        }
        lru.tick += 1;
        let tick = lru.tick;
        lru.order.insert(tick, key.clone());
        lru.map.insert(key, Entry { value, size, tick });
        lru.bytes += size;
    }

    /// Bytes held and number of entries.
    pub fn usage(&self) -> (usize, usize) {
        let lru = self.lock();
        (lru.bytes, lru.map.len())
    }

    /// The capacity, bytes.
    pub fn capacity(&self) -> usize {
        self.capacity
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn answer(n: usize) -> Cached {
        Cached::Answer(Bytes::from(vec![b'x'; n]))
    }

    fn key(i: u64) -> CacheKey {
        CacheKey::Answer { generation: i, request: String::new() }
    }

    #[test]
    fn evicts_least_recently_used_within_capacity() {
        let cache = Cache::new(100);
        cache.insert(key(1), answer(40));
        cache.insert(key(2), answer(40));
        assert!(cache.get(&key(1)).is_some()); // 1 is now newer than 2
        cache.insert(key(3), answer(40)); // needs room: 2 goes
        assert!(cache.get(&key(2)).is_none());
        assert!(cache.get(&key(1)).is_some());
        assert!(cache.get(&key(3)).is_some());
        assert_eq!(cache.usage(), (80, 2));
        cache.insert(key(4), answer(101)); // larger than the cache: not kept
        assert!(cache.get(&key(4)).is_none());
        assert_eq!(cache.usage(), (80, 2));
        cache.insert(key(1), answer(10)); // replacing an entry frees its old size
        assert_eq!(cache.usage(), (50, 2));
    }
}
