//! The set of respondent ids already counted, held as 128-bit hashes in an
//! open-addressing table (linear probing), split into [`SHARDS`] shards by the hash's
//! top byte so that a shard that grows copies only its own slots.
//!
//! # Exactness
//!
//! Ids are not kept, only their hashes: two SipHash-2-4 values of the trimmed id bytes
//! under two fixed keys (so the same in every run). Two distinct ids share a hash with
//! probability 2⁻¹²⁸ per pair if the hash behaves like a random function, so among n
//! distinct ids the chance that any two collide is below n²/2¹²⁹: about 1.5 × 10⁻²³
//! for 10⁸ ids. A collision would make a genuine response count as a duplicate (and be
//! listed as one). The keys are public, so this is no defence against ids crafted to
//! collide; ids come from the survey system, not from respondents.
//!
//! # Memory
//!
//! 16 bytes a slot. A shard grows by half when it would pass 4/5 full, so after the
//! first few thousand ids every shard is between 8/15 and 4/5 full: at most 30 bytes
//! per distinct id, and a growth copies one shard (1/256 of the set) at a time. A set
//! given room in advance ([`IdSet::reserve`], from an estimate) holds that room.

use std::fmt;

/// Shards, chosen by the top byte of the hash.
const SHARDS: usize = 256;
/// The smallest shard that holds anything.
const FIRST_CAPACITY: usize = 8;

/// A set of 128-bit hashes. The value 0 marks an empty slot, so a hash of 0 is kept
/// aside in `zero`.
#[derive(Clone, Default)]
pub(super) struct IdSet {
    shards: Vec<Shard>,
    zero: bool,
    len: usize,
}

#[derive(Clone, Default)]
struct Shard {
    slots: Vec<u128>,
    len: usize,
}

impl Shard {
    /// The slot where `hash`'s probe starts: the hash's low word scaled to the capacity
    /// (Lemire's multiply-shift), so any capacity works.
    fn home(&self, hash: u128) -> usize {
        ((u128::from(hash as u64) * self.slots.len() as u128) >> 64) as usize
    }

    /// Insert a nonzero hash; false if it was there already. The shard has room.
    fn insert(&mut self, hash: u128) -> bool {
        let capacity = self.slots.len();
        let mut i = self.home(hash);
        loop {
            match self.slots.get(i).copied() {
                Some(0) => {
                    self.slots[i] = hash;
                    self.len += 1;
                    return true;
                }
                Some(h) if h == hash => return false,
                Some(_) => i += 1,
                None => i = 0,
            }
            if i == capacity {
                i = 0;
            }
        }
    }

    fn contains(&self, hash: u128) -> bool {
        if self.slots.is_empty() {
            return false;
        }
        let mut i = self.home(hash);
        loop {
            match self.slots.get(i).copied() {
                Some(0) => return false,
                Some(h) if h == hash => return true,
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
        let old = std::mem::replace(&mut self.slots, vec![0; capacity]);
        self.len = 0;
        for h in old {
            if h != 0 {
                self.insert(h);
            }
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
        for shard in &mut self.shards {
            if shard.slots.len() < capacity {
                shard.resize(capacity);
            }
        }
    }

    fn shard_of(hash: u128) -> usize {
        (hash >> 120) as usize
    }

    /// Insert a hash: true if it was not there before.
    pub(super) fn insert_hash(&mut self, hash: u128) -> bool {
        if hash == 0 {
            let new = !self.zero;
            self.zero = true;
            self.len += usize::from(new);
            return new;
        }
        if self.shards.is_empty() {
            self.shards = vec![Shard::default(); SHARDS];
        }
        let Some(shard) = self.shards.get_mut(Self::shard_of(hash)) else {
            return false; // unreachable: there are SHARDS shards and the index is a byte
        };
        shard.reserve_one();
        let new = shard.insert(hash);
        self.len += usize::from(new);
        new
    }

    /// Claim an id: true if it was not seen before.
    pub(super) fn insert(&mut self, id: &[u8]) -> bool {
        self.insert_hash(id_hash(id))
    }

    /// The value in the slot where `hash`'s probe starts (0 when there is none):
    /// reading it ahead of [`IdSet::insert_hash`] brings that memory in early.
    pub(super) fn peek(&self, hash: u128) -> u128 {
        self.shards
            .get(Self::shard_of(hash))
            .and_then(|s| s.slots.get(s.home(hash)))
            .copied()
            .unwrap_or(0)
    }

    pub(super) fn contains_hash(&self, hash: u128) -> bool {
        if hash == 0 {
            return self.zero;
        }
        self.shards
            .get(Self::shard_of(hash))
            .is_some_and(|s| s.contains(hash))
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

    fn hashes(&self) -> impl Iterator<Item = u128> + '_ {
        self.zero.then_some(0).into_iter().chain(
            self.shards
                .iter()
                .flat_map(|s| s.slots.iter().copied().filter(|&h| h != 0)),
        )
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

const ID_KEYS: [(u64, u64); 2] = [
    // The first hexadecimal digits of π: constants with nothing up the sleeve.
    (0x243f_6a88_85a3_08d3, 0x1319_8a2e_0370_7344),
    (0xa409_3822_299f_31d0, 0x082e_fa98_ec4e_6c89),
];

/// The 128-bit hash of an id: two SipHash-2-4 values under the two keys.
pub(super) fn id_hash(id: &[u8]) -> u128 {
    let [(a0, a1), (b0, b1)] = ID_KEYS;
    (u128::from(siphash24(a0, a1, id)) << 64) | u128::from(siphash24(b0, b1, id))
}

/// SipHash-2-4 (Aumasson & Bernstein 2012) of `message` under the key (k0, k1).
pub(super) fn siphash24(k0: u64, k1: u64, message: &[u8]) -> u64 {
    let mut v = [
        k0 ^ 0x736f_6d65_7073_6575,
        k1 ^ 0x646f_7261_6e64_6f6d,
        k0 ^ 0x6c79_6765_6e65_7261,
        k1 ^ 0x7465_6462_7974_6573,
    ];
    fn round(v: &mut [u64; 4]) {
        v[0] = v[0].wrapping_add(v[1]);
        v[1] = v[1].rotate_left(13) ^ v[0];
        v[0] = v[0].rotate_left(32);
        v[2] = v[2].wrapping_add(v[3]);
        v[3] = v[3].rotate_left(16) ^ v[2];
        v[0] = v[0].wrapping_add(v[3]);
        v[3] = v[3].rotate_left(21) ^ v[0];
        v[2] = v[2].wrapping_add(v[1]);
        v[1] = v[1].rotate_left(17) ^ v[2];
        v[2] = v[2].rotate_left(32);
    }
    let compress = |v: &mut [u64; 4], m: u64| {
        v[3] ^= m;
        round(v);
        round(v);
        v[0] ^= m;
    };
    let blocks = message.chunks_exact(8);
    let tail = blocks.remainder();
    for block in blocks {
        let mut bytes = [0u8; 8];
        bytes.copy_from_slice(block);
        compress(&mut v, u64::from_le_bytes(bytes));
    }
    let mut last = (message.len() as u64) << 56;
    for (i, &b) in tail.iter().enumerate() {
        last |= u64::from(b) << (8 * i);
    }
    compress(&mut v, last);
    v[2] ^= 0xff;
    for _ in 0..4 {
        round(&mut v);
    }
    v[0] ^ v[1] ^ v[2] ^ v[3]
}
