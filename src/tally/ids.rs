//! The set of respondent ids already counted, held as 128-bit hashes in an
//! open-addressing table (linear probing), split into [`SHARDS`] shards by the hash's
//! top bits so that a shard that grows copies only its own slots. A shard keeps each
//! hash's low 96 bits ([`key_of`]); the shard itself stands for the top five.
//!
//! # Exactness
//!
//! Ids are not kept, only their hashes: the 128-bit XXH3 hash of the trimmed id bytes,
//! with seed 0 (so the same in every run), of which 101 bits are kept and compared
//! (the top five, as the shard, and the low 96). Two distinct ids agree on those bits
//! with probability 2⁻¹⁰¹ per pair if the hash behaves like a random function, so
//! among n distinct ids the chance that any two do is below n²/2¹⁰²: about 2 × 10⁻¹⁷
//! for 10⁷ ids, 2 × 10⁻¹⁵ for 10⁸, 2 × 10⁻¹³ for 10⁹. Only then would a genuine
//! response count as a duplicate (and be listed as one). XXH3 is not a cryptographic
//! hash, so this is no defence against ids crafted to collide; ids come from the
//! survey system, not from respondents. (Until issue 7's third round the hash was two
//! SipHash-2-4 values under fixed keys; XXH3 gives it for about a tenth of the time.
//! Until the eighth round all 128 bits were kept, 16 bytes a slot, for a bound of
//! n²/2¹²⁹; 12 bytes a slot took a quarter off the memory to fill and to miss, and
//! the bound stays far below any other cause of a wrong count.)
//!
//! # Memory
//!
//! [`SLOT_BYTES`] (12) a slot. A shard grows by half when it would pass 4/5 full, so
//! after the first few thousand ids every shard is between 8/15 and 4/5 full: at most
//! 22.5 bytes per distinct id, and a growth copies one shard (1/32 of the set) at a
//! time. A set given room in advance ([`IdSet::reserve`], from an estimate) holds that
//! room.
//!
//! A shard of 48 KiB or more is mapped on its own and given all its memory at once
//! (`MADV_POPULATE_WRITE`, Linux 5.14 and later, through memmap2's safe call), and
//! the maps of a large reserve are made on every core. Left to the lookups (as a
//! vector's memory is), each page's first lookup maps the shared zero page and its
//! first insert copies it, interrupting the other cores to drop the old mapping:
//! `perf stat` counted 12,000 page faults and as many flushes of the address cache
//! for the 1 M-row benchmark, 35,000 for the 10 M-row one. Taking the memory is
//! advice: where the kernel declines, the pages come with the first inserts, only
//! slower.
//!
//! The maps are not offered for huge pages any more (`MADV_HUGEPAGE` until issue 7's
//! eighth round). On the project's virtual machines, huge pages made of memory freed
//! a few seconds before took 0.43–0.58 s of system time to give for the 213 MB that
//! the 10 M-row benchmark's set then took, against 0.09–0.13 s for the same memory
//! in 4 KiB pages, while the address translation misses that huge pages save cost
//! less than that (see DEVELOPERS.md, "Reading fast").

use std::fmt;

/// Shards, chosen by the top five bits of the hash.
const SHARDS: usize = 32;
/// Slots from which a shard is mapped on its own, its memory taken at once (48 KiB).
const MAPPED_SLOTS: usize = 1 << 12;
/// Slots from which a reserve makes its maps on every core (1.5 MiB a shard).
const SPREAD_SLOTS: usize = 1 << 17;
/// The smallest shard that holds anything.
const FIRST_CAPACITY: usize = 8;

/// A set of 128-bit hashes, each kept as its shard (the top five bits) and its low
/// 96 bits ([`key_of`]).
#[derive(Clone, Default)]
pub(super) struct IdSet {
    shards: Vec<Shard>,
    len: usize,
}

#[derive(Clone, Default)]
struct Shard {
    slots: Slots,
    len: usize,
    /// The key 0 marks an empty slot, so a hash whose key is 0 is held here.
    zero: bool,
}

/// Bytes a slot: a hash's low 96 bits, little-endian.
pub(super) const SLOT_BYTES: usize = 12;

/// The part of a hash a shard keeps: its low 96 bits (the shard is chosen by the top
/// five, and the probe starts from the low 64).
fn key_of(hash: u128) -> u128 {
    hash & ((1u128 << 96) - 1)
}

/// A shard's slots ([`SLOT_BYTES`] each): in a vector, or (when large) in memory mapped
/// on its own. The key 0 marks an empty slot.
enum Slots {
    Vec(Vec<u8>),
    Mapped(memmap2::MmapMut, usize),
}

impl Default for Slots {
    fn default() -> Slots {
        Slots::Vec(Vec::new())
    }
}

impl Clone for Slots {
    fn clone(&self) -> Slots {
        let mut copy = Slots::zeroed(self.len());
        copy.bytes_mut().copy_from_slice(self.bytes());
        copy
    }
}

impl Slots {
    /// `capacity` empty slots.
    fn zeroed(capacity: usize) -> Slots {
        if capacity >= MAPPED_SLOTS
            && let Ok(map) = memmap2::MmapMut::map_anon(capacity * SLOT_BYTES)
        {
            // Only advice (see the module notes): the map works the same if the
            // kernel ignores it.
            let _ = map.advise(memmap2::Advice::PopulateWrite);
            return Slots::Mapped(map, capacity);
        }
        Slots::Vec(vec![0; capacity * SLOT_BYTES])
    }

    fn len(&self) -> usize {
        match self {
            Slots::Vec(v) => v.len() / SLOT_BYTES,
            Slots::Mapped(_, capacity) => *capacity,
        }
    }

    fn bytes(&self) -> &[u8] {
        match self {
            Slots::Vec(v) => v,
            Slots::Mapped(map, _) => map,
        }
    }

    fn bytes_mut(&mut self) -> &mut [u8] {
        match self {
            Slots::Vec(v) => v,
            Slots::Mapped(map, _) => map,
        }
    }

    /// The key in slot `i` (0: empty), or `None` past the end.
    fn get(&self, i: usize) -> Option<u128> {
        let slot: &[u8; SLOT_BYTES] = self.bytes().get(i * SLOT_BYTES..)?.first_chunk()?;
        let (low, high) = slot.split_first_chunk::<8>()?;
        let high: &[u8; 4] = high.try_into().ok()?;
        Some(u128::from(u32::from_le_bytes(*high)) << 64 | u128::from(u64::from_le_bytes(*low)))
    }

    fn set(&mut self, i: usize, key: u128) {
        let Some(slot) = self
            .bytes_mut()
            .get_mut(i * SLOT_BYTES..(i + 1) * SLOT_BYTES)
        else {
            return;
        };
        if let Some((low, high)) = slot.split_first_chunk_mut::<8>() {
            *low = (key as u64).to_le_bytes();
            high.copy_from_slice(&((key >> 64) as u32).to_le_bytes());
        }
    }

    /// Prefetch the cache line of byte `at` (nothing past the end).
    fn prefetch(&self, at: usize) {
        if let Some(byte) = self.bytes().get(at) {
            mem_prefetch::prefetch_read_data::<_, 3>(byte);
        }
    }

    /// The keys held (not 0), in slot order.
    fn keys(&self) -> impl Iterator<Item = u128> + '_ {
        (0..self.len()).filter_map(|i| self.get(i).filter(|&k| k != 0))
    }
}

impl Shard {
    /// The slot where `key`'s probe starts: its low word scaled to the capacity
    /// (Lemire's multiply-shift), so any capacity works.
    fn home(&self, key: u128) -> usize {
        ((u128::from(key as u64) * self.slots.len() as u128) >> 64) as usize
    }

    /// Insert a key; false if it was there already. The shard has room.
    fn insert(&mut self, key: u128) -> bool {
        if key == 0 {
            let new = !self.zero;
            self.zero = true;
            return new;
        }
        let capacity = self.slots.len();
        let mut i = self.home(key);
        loop {
            match self.slots.get(i) {
                Some(0) => {
                    self.slots.set(i, key);
                    self.len += 1;
                    return true;
                }
                Some(k) if k == key => return false,
                Some(_) => i += 1,
                None => i = 0,
            }
            if i == capacity {
                i = 0;
            }
        }
    }

    fn contains(&self, key: u128) -> bool {
        if key == 0 {
            return self.zero;
        }
        if self.slots.len() == 0 {
            return false;
        }
        let mut i = self.home(key);
        loop {
            match self.slots.get(i) {
                Some(0) => return false,
                Some(k) if k == key => return true,
                Some(_) => i += 1,
                None => i = 0,
            }
            if i == self.slots.len() {
                i = 0;
            }
        }
    }

    /// Make room for one more: grow by half when it would pass 4/5 full.
    fn reserve_one(&mut self) {
        let capacity = self.slots.len();
        if (self.len + 1) * 5 <= capacity * 4 {
            return;
        }
        let grown = (capacity + capacity / 2).max(FIRST_CAPACITY);
        self.resize(grown);
    }

    fn resize(&mut self, capacity: usize) {
        self.move_into(Slots::zeroed(capacity));
    }

    /// Move the keys into `slots` (empty, and with room for them all).
    fn move_into(&mut self, slots: Slots) {
        let old = std::mem::replace(&mut self.slots, slots);
        self.len = 0;
        for k in old.keys() {
            self.insert(k);
        }
    }
}

impl IdSet {
    /// Make room for about `ids` hashes in all, so that no shard grows (and copies
    /// its slots) before then. The room is taken at once: give an estimate of the
    /// distinct ids, not an upper bound.
    pub(super) fn reserve(&mut self, ids: usize) {
        let capacity = (ids.div_ceil(SHARDS) * 5).div_ceil(4).max(FIRST_CAPACITY);
        if self.shards.is_empty() {
            self.shards = vec![Shard::default(); SHARDS];
        }
        let short: Vec<usize> = (0..SHARDS)
            .filter(|&i| self.shards.get(i).is_some_and(|s| s.slots.len() < capacity))
            .collect();
        // The new slots' memory is taken (and zeroed by the kernel) on every core: a
        // large reserve is a few hundred megabytes, and the readers wait meanwhile.
        let per_thread = if capacity >= SPREAD_SLOTS { 1 } else { SHARDS };
        let fresh = crate::parallel::map_costliest_first(
            &short,
            per_thread,
            |_| 0,
            |_| Slots::zeroed(capacity),
        );
        for (i, slots) in short.into_iter().zip(fresh) {
            if let Some(shard) = self.shards.get_mut(i) {
                shard.move_into(slots);
            }
        }
    }

    fn shard_of(hash: u128) -> usize {
        (hash >> 123) as usize
    }

    /// Insert a hash: true if it was not there before.
    pub(super) fn insert_hash(&mut self, hash: u128) -> bool {
        if self.shards.is_empty() {
            self.shards = vec![Shard::default(); SHARDS];
        }
        let Some(shard) = self.shards.get_mut(Self::shard_of(hash)) else {
            return false; // unreachable: there are SHARDS shards and the index is a byte
        };
        shard.reserve_one();
        let new = shard.insert(key_of(hash));
        self.len += usize::from(new);
        new
    }

    /// Claim an id: true if it was not seen before.
    pub(super) fn insert(&mut self, id: &[u8]) -> bool {
        self.insert_hash(id_hash(id))
    }

    /// Ask for the memory of the slot where `hash`'s probe starts and of the cache
    /// line after it, ahead of [`IdSet::insert_hash`] (a prefetch: it changes nothing
    /// but speed). A new id's probe runs on to the first empty slot: 8.5 slots on
    /// average in a set 3/4 full (linear probing: (1 + 1/(1 − 3/4)²)/2), so it often
    /// crosses into the next line, which was then a second miss, one after the other.
    pub(super) fn prefetch(&self, hash: u128) {
        if let Some(shard) = self.shards.get(Self::shard_of(hash)) {
            let at = shard.home(key_of(hash)) * SLOT_BYTES;
            shard.slots.prefetch(at);
            shard.slots.prefetch(at + 64);
        }
    }

    pub(super) fn contains_hash(&self, hash: u128) -> bool {
        self.shards
            .get(Self::shard_of(hash))
            .is_some_and(|s| s.contains(key_of(hash)))
    }

    /// Distinct ids held.
    pub(super) fn len(&self) -> usize {
        self.len
    }

    /// Slots allocated (for the memory tests).
    #[cfg(test)]
    pub(super) fn capacity(&self) -> usize {
        self.shards.iter().map(|s| s.slots.len()).sum()
    }

    /// The hashes held, as far as they are kept: each shard's keys, with the shard's
    /// bits on top (which [`IdSet::contains_hash`] finds again).
    fn hashes(&self) -> impl Iterator<Item = u128> + '_ {
        self.shards.iter().enumerate().flat_map(|(i, s)| {
            let top = (i as u128) << 123;
            s.zero
                .then_some(0)
                .into_iter()
                .chain(s.slots.keys())
                .map(move |k| top | k)
        })
    }
}

impl PartialEq for IdSet {
    /// The same hashes, however the tables are laid out.
    fn eq(&self, other: &IdSet) -> bool {
        self.len == other.len && self.hashes().all(|h| other.contains_hash(h))
    }
}

impl Eq for IdSet {}

impl fmt::Debug for IdSet {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "IdSet({} ids)", self.len)
    }
}

/// The 128-bit hash of an id: XXH3-128 with seed 0 (Collet's xxHash, through the
/// `xxhash-rust` crate), checked against the xxHash C library in the tests.
pub(super) fn id_hash(id: &[u8]) -> u128 {
    xxhash_rust::xxh3::xxh3_128(id)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// SplitMix64 from `state`, two words made into a nonzero 128-bit "hash".
    fn hashes(mut state: u64, count: usize) -> Vec<u128> {
        let mut word = move || {
            state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^ (z >> 31)
        };
        (0..count)
            .map(|_| (u128::from(word()) << 64 | u128::from(word())) | 1)
            .collect()
    }

    /// Room taken for millions of ids (every shard a map of its own, the maps made
    /// on every core) keeps the hashes held before, and the set then
    /// answers as one grown insert by insert.
    #[test]
    fn a_large_reserve_keeps_what_was_held() {
        let before = hashes(7, 5_000);
        let after = hashes(8, 20_000);
        let mut reserved = IdSet::default();
        let mut grown = IdSet::default();
        for &h in &before {
            assert_eq!(reserved.insert_hash(h), grown.insert_hash(h));
        }
        // Enough for every shard's map to be made on every core.
        reserved.reserve(SHARDS * SPREAD_SLOTS);
        assert!(
            reserved
                .shards
                .iter()
                .all(|s| matches!(s.slots, Slots::Mapped(..)))
        );
        assert_eq!(reserved.len(), before.len());
        assert_eq!(reserved, grown);
        for &h in before.iter().chain(&after).chain(before.iter().step_by(3)) {
            assert_eq!(reserved.insert_hash(h), grown.insert_hash(h));
        }
        assert_eq!(reserved.len(), before.len() + after.len());
        assert_eq!(reserved, grown);
    }

    /// Hashes that differ only in their top five bits (the shard), or only in bits
    /// 96–122 (which no shard keeps), and hashes whose kept part is 0 (the empty
    /// slot's mark): the set tells the first kind apart, and takes the second for one
    /// hash, as the module notes say.
    #[test]
    fn what_is_kept_of_a_hash_decides() {
        let mut set = IdSet::default();
        let base = hashes(3, 1)[0];
        let low96 = key_of(base);
        for shard in 0..SHARDS as u128 {
            assert!(set.insert_hash(shard << 123 | low96));
            assert!(set.insert_hash(shard << 123), "key 0 in shard {shard}");
        }
        assert_eq!(set.len(), 2 * SHARDS);
        for shard in 0..SHARDS as u128 {
            // Bits 96–122 are not kept: the same key in the same shard.
            assert!(!set.insert_hash(shard << 123 | 0x5a5a_5a5a << 96 | low96));
            assert!(!set.insert_hash(shard << 123 | 1 << 100));
            assert!(set.contains_hash(shard << 123 | low96));
        }
        assert!(!set.contains_hash(low96 ^ 1));
        assert_eq!(set.len(), 2 * SHARDS);
        let copy = set.clone();
        assert_eq!(copy, set);
        assert_eq!(copy.hashes().count(), 2 * SHARDS);
    }

    /// A shard large enough to live in its own map holds and finds exactly what a
    /// vector-backed one does, through growth and cloning.
    #[test]
    fn mapped_slots_hold_what_vector_slots_hold() {
        let mapped = Slots::zeroed(MAPPED_SLOTS);
        assert!(matches!(mapped, Slots::Mapped(..)));
        let mut big = Shard {
            slots: mapped,
            len: 0,
            zero: false,
        };
        let mut small = Shard::default();
        let mut seeded = hashes(0x9e37_79b9_7f4a_7c15, MAPPED_SLOTS + 1000);
        let others = seeded.split_off(MAPPED_SLOTS);
        let hashes = seeded;
        let hashes: Vec<u128> = hashes.into_iter().map(key_of).collect();
        let others: Vec<u128> = others.into_iter().map(key_of).collect();
        for &h in &hashes {
            big.reserve_one();
            small.reserve_one();
            assert_eq!(big.insert(h), small.insert(h));
        }
        // Past 4/5 of the first map, the shard grew into a larger map.
        assert!(big.slots.len() > MAPPED_SLOTS);
        assert!(matches!(big.slots, Slots::Mapped(..)));
        assert_eq!(big.len, MAPPED_SLOTS);
        for &h in hashes.iter().step_by(7) {
            big.reserve_one();
            assert!(!big.insert(h), "a repeated hash is not new");
            assert!(big.contains(h) && small.contains(h));
        }
        let copy = big.clone();
        for &h in &others {
            assert_eq!(copy.contains(h), small.contains(h));
        }
        let mut held: Vec<u128> = copy.slots.keys().collect();
        let mut want = hashes.clone();
        held.sort_unstable();
        want.sort_unstable();
        want.dedup();
        assert_eq!(held, want);
    }
}
