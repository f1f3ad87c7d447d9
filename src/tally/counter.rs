//! The fast way to count many records: [`Counter`] gives exactly what
//! [`Tally::add_record`] gives record by record, without the per-record allocations.
//! It has two halves joined by a [`Batch`], which `tally::pipe` runs on separate
//! threads for a one-shot read, and [`Counter::beside`] on two for the follower
//! (the counting half on a thread of its own, the tally going to it and back at
//! each flush):
//!
//! - [`Reading`]: a record whose every check passes is read in place: the cell is
//!   found from its raw values through a small cache (raw bytes → cell), answers are
//!   classified through a cache per measure (raw answer → yes / no / missing /
//!   unexpected); before either, a record split in place looks up the run of bytes
//!   from its cell's first column to the last, and from its measures' first to the
//!   last, whole (a run of up to 32 bytes → the cell, or every answer). Times in
//!   the usual `YYYY-MM-DDTHH:MM:SS[.f…]Z` form are computed from a cached start of
//!   their hour, and the id's bytes and hash are kept.
//!   Anything else — a wrong field count, text that is not UTF-8, a bad weight or
//!   time — is kept whole, to go through [`Tally::add_record`] itself, so every
//!   rejection is the one the record-by-record path gives. Cells, spellings and
//!   weights are numbered in a [`Registry`] shared with the other halves of the same
//!   count.
//! - [`Counting`]: the batch's records are counted in file order, their ids in runs
//!   of [`AHEAD`]; at the start of each run the id set's slots for the next run are
//!   asked for (prefetched) together, so the memory fetches overlap with each other
//!   and with the counting. A cell's sums go to a staging copy of the cell (counts
//!   per measure and weight), merged into the tally by [`Counter::flush`] (exact
//!   sums, so the grouping does not change a bit).
//!
//! Duplicates, rejections, unexpected values and the newest time go to the tally as
//! each record is counted, in file order, so the first-fifty lists and the
//! unexpected-value limit come out as in one pass.

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hash, Hasher};
use std::sync::{Arc, Mutex, mpsc};

use jiff::Timestamp;

use super::ids::id_hash;
use super::{Arrivals, CellKey, CellTally, Rejection, Tally, max_option};
use crate::follow::Fields;
use crate::rows::{self, Answer, Layout};

/// Slots of each measure's cache of raw answers (a power of two).
const ANSWER_SLOTS: usize = 64;
/// Raw cell spellings remembered; later ones are looked up by their normalised key.
const CELL_CACHE: usize = 4096;
/// Weight texts and distinct weights remembered.
const WEIGHT_CACHE: usize = 256;
/// Records read before they are counted together, on one thread.
const BATCH: usize = 256;
/// Records sent at a time to a counting thread beside (see [`Counter::beside`]), and
/// batches that may wait for it.
const BESIDE_BATCH: usize = 2048;
const BESIDE_QUEUED: usize = 16;
/// Cells of up to this many columns are looked up by their packed values.
const PACKED_CELLS: usize = 4;
/// The ids whose slots in the id set are prefetched together, one run ahead (see
/// [`Counting::count`]).
const AHEAD: usize = 16;
/// The most columns a record may be read from in place (more go record by record).
const MAX_USED: usize = 24;
/// Places in the caches of runs of bytes (see [`RunKey`]): of the measures' answers
/// together, and of the cell's values together.
const ANSWER_RUNS: usize = 256;
const CELL_RUNS: usize = 64;
/// The most measures whose answers are looked up together by their run of bytes.
const RUN_MEASURES: usize = 8;
/// The most measures whose answers a cell counts together, as one combination (4
/// kinds of answer each: at most 256 counts a cell).
const COMBINED_MEASURES: usize = 4;

/// A cell being counted: its key and the sums since the last flush.
#[derive(Debug)]
struct Staged {
    key: CellKey,
    cell: CellTally,
    /// Per measure, per remembered weight: [yes, no] answers not yet in `cell`.
    counts: Vec<Vec<[u64; 2]>>,
    /// Records of weight 1 not yet in `cell`, by the combination of their answers
    /// ([`combination`]); empty for more than [`COMBINED_MEASURES`] measures.
    combined: Vec<u64>,
    /// Arrivals in the current hour bucket not yet in `cell.arrivals`: (hour, count,
    /// the hour's first second).
    run: Option<(i64, u64, i64)>,
    /// The first and the latest time counted and not yet in `cell.arrivals`, as
    /// numbers that sort as the times do (see [`Entry::order_of`]); none counted
    /// while the first is above the latest ([`Staged::NO_SPAN`]).
    span: (i128, i128),
}

impl Staged {
    fn new(key: CellKey, measures: usize) -> Staged {
        let combinations = if measures <= COMBINED_MEASURES {
            1 << (2 * measures)
        } else {
            0
        };
        Staged {
            key,
            cell: CellTally::new(Vec::new(), measures),
            counts: vec![Vec::new(); measures],
            combined: vec![0; combinations],
            run: None,
            span: Staged::NO_SPAN,
        }
    }

    /// Move the counts per weight (and per combination of answers) into the cell's
    /// sums.
    fn flush_counts(&mut self, weights: &[f64]) {
        for (code, count) in self.combined.iter_mut().enumerate() {
            let n = std::mem::take(count);
            if n == 0 {
                continue;
            }
            for (m, (measure, counts)) in self
                .cell
                .measures
                .iter_mut()
                .zip(&mut self.counts)
                .enumerate()
            {
                match (code >> (2 * m)) & 3 {
                    kind @ (0 | 1) => {
                        // Weight 1 is the registry's weight 0.
                        if counts.is_empty() {
                            counts.push([0, 0]);
                        }
                        if let Some(yes_no) = counts.first_mut().and_then(|c| c.get_mut(kind)) {
                            *yes_no += n;
                        }
                    }
                    2 => measure.missing += n,
                    _ => measure.unexpected += n,
                }
            }
        }
        for (measure, counts) in self.cell.measures.iter_mut().zip(&mut self.counts) {
            for (&w, [yes, no]) in weights.iter().zip(counts.iter_mut()) {
                measure.add_many(*yes, *no, w);
                (*yes, *no) = (0, 0);
            }
        }
    }

    fn flush_run(&mut self) {
        if let Some((hour, count, _)) = self.run.take() {
            *self.cell.arrivals.hours.entry(hour).or_insert(0) += count;
        }
    }

    /// A span with no time in it: any time's number is below the first and above the
    /// latest.
    const NO_SPAN: (i128, i128) = (i128::MAX, i128::MIN);

    /// Move the first and latest times into the cell's arrivals.
    fn flush_span(&mut self) {
        let (first, latest) = std::mem::replace(&mut self.span, Staged::NO_SPAN);
        if first > latest {
            return;
        }
        let (first, latest) = (Entry::parts_of_order(first), Entry::parts_of_order(latest));
        let arrivals = &mut self.cell.arrivals;
        if let Some(first) = Entry::timestamp_of(first) {
            arrivals.first = Some(arrivals.first.map_or(first, |f| f.min(first)));
        }
        if let Some(latest) = Entry::timestamp_of(latest) {
            arrivals.latest = Some(arrivals.latest.map_or(latest, |l| l.max(latest)));
        }
    }
}

/// Counts records into a [`Tally`] (see the module notes): a `Reading` and a
/// `Counting` joined by a `Batch`, both on the caller's thread ([`Counter::new`]) or
/// with the counting half on a thread of its own ([`Counter::beside`]). Call
/// [`Counter::flush`] before reading the tally: until then the sums of the cells are
/// held here (and, beside, the tally itself is on the counting thread).
#[derive(Debug)]
pub struct Counter {
    reading: Reading,
    batch: Batch,
    counting: Half,
}

/// Where a [`Counter`]'s counting half runs.
#[derive(Debug)]
enum Half {
    Here(Counting),
    Beside(Beside),
}

/// A counting half on a thread of its own (see [`Counter::beside`]).
#[derive(Debug)]
struct Beside {
    work: mpsc::SyncSender<Work>,
    /// Batches the counting thread has emptied, to fill again.
    spare: mpsc::Receiver<Batch>,
    /// The tally, back at each flush.
    counted: mpsc::Receiver<Box<Tally>>,
    /// Whether the tally is on the counting thread (from the first batch after a
    /// flush to the next flush).
    away: bool,
    measures: usize,
}

/// What the counting thread is handed, in order: a batch to count (with the tally,
/// when it is the first since a flush), and whether to flush after it (merge the
/// staged sums and send the tally back).
struct Work {
    batch: Batch,
    tally: Option<Box<Tally>>,
    flush: bool,
}

/// The counting thread beside: counts what it is handed until the counter goes.
fn count_beside(
    mut counting: Counting,
    work: mpsc::Receiver<Work>,
    spare: mpsc::Sender<Batch>,
    counted: mpsc::Sender<Box<Tally>>,
) {
    let mut tally: Option<Box<Tally>> = None;
    for Work {
        mut batch,
        tally: given,
        flush,
    } in work
    {
        if given.is_some() {
            tally = given;
        }
        match tally.as_mut() {
            Some(tally) => counting.count(tally, &mut batch),
            None => batch.clear(), // unreachable: the tally comes with the first batch
        }
        // The counter may have gone; then the batch goes too.
        let _ = spare.send(batch);
        if flush && let Some(mut tally) = tally.take() {
            counting.flush(&mut tally);
            if counted.send(tally).is_err() {
                return;
            }
        }
    }
}

/// The counting thread of a [`Counter::beside`] stopped before it gave the tally
/// back (it does not, short of a fault in the program).
#[derive(Debug, thiserror::Error)]
#[error("the counting thread stopped unexpectedly")]
pub struct CountingStopped;

impl Counter {
    /// A counter for records read through `layout`, on the caller's thread.
    pub fn new(layout: &Layout) -> Counter {
        let (reading, counting) = Counter::halves(layout);
        Counter {
            reading,
            batch: Batch::default(),
            counting: Half::Here(counting),
        }
    }

    /// A counter whose counting half (the id set, the sums) runs on a thread of its
    /// own, beside the caller's reading half: a long read takes about as long as
    /// its reading alone. Batches of 2,048 records go to it as they fill;
    /// the tally goes with the first after a flush and is back when
    /// [`Counter::flush`] returns. Counts exactly as [`Counter::new`] does. Where no
    /// thread can be started, the counter is [`Counter::new`]'s.
    pub fn beside(layout: &Layout) -> Counter {
        let (reading, counting) = Counter::halves(layout);
        let (work, to_count) = mpsc::sync_channel(BESIDE_QUEUED);
        let (give_spare, spare) = mpsc::channel();
        let (give_back, counted) = mpsc::channel();
        // The counting half goes to the thread once it runs.
        let (hand, handed) = mpsc::sync_channel::<Counting>(1);
        let spawned = std::thread::Builder::new()
            .name("closeout counting".into())
            .spawn(move || {
                if let Ok(counting) = handed.recv() {
                    count_beside(counting, to_count, give_spare, give_back);
                }
            });
        if spawned.is_err() {
            return Counter::new(layout);
        }
        let counting = match hand.send(counting) {
            Ok(()) => Half::Beside(Beside {
                work,
                spare,
                counted,
                away: false,
                measures: layout.measures.len(),
            }),
            Err(mpsc::SendError(counting)) => Half::Here(counting),
        };
        Counter {
            reading,
            batch: Batch::default(),
            counting,
        }
    }

    /// A reading half and a counting half for `layout`, sharing one registry.
    pub(crate) fn halves(layout: &Layout) -> (Reading, Counting) {
        let registry = Shared::default();
        (
            Reading::new(layout, Arc::clone(&registry)),
            Counting::new(layout, registry),
        )
    }

    /// Count one record (as [`Tally::add_record`] would) starting on `line`.
    pub fn add(&mut self, tally: &mut Tally, fields: Fields<'_>, line: u64) {
        self.reading.read(fields, line, &mut self.batch);
        self.count_if_full(tally);
    }

    /// Reject a record longer than the limit (`bytes` long) starting on `line`, in its
    /// place among the records counted before and after it.
    pub fn add_too_long(&mut self, tally: &mut Tally, line: u64, bytes: u64) {
        self.batch.push_too_long(line, bytes);
        self.count_if_full(tally);
    }

    fn count_if_full(&mut self, tally: &mut Tally) {
        let full = match self.counting {
            Half::Here(_) => BATCH,
            Half::Beside(_) => BESIDE_BATCH,
        };
        if self.batch.len() >= full {
            self.count(tally, false);
        }
    }

    /// Count the batch: here, or send it to the counting thread (with the tally, if
    /// it is still here, and then ask for the tally back if `flush`).
    fn count(&mut self, tally: &mut Tally, flush: bool) {
        match &mut self.counting {
            Half::Here(counting) => {
                counting.count(tally, &mut self.batch);
                if flush {
                    counting.flush(tally);
                }
            }
            Half::Beside(beside) => {
                let next = beside.spare.try_recv().unwrap_or_default();
                let work = Work {
                    batch: std::mem::replace(&mut self.batch, next),
                    tally: (!beside.away)
                        .then(|| Box::new(std::mem::replace(tally, Tally::new(beside.measures)))),
                    flush,
                };
                beside.away = !flush;
                // A thread that has stopped shows at the flush.
                let _ = beside.work.send(work);
            }
        }
    }

    /// Merge the staged sums into the tally. Exact: the tally then equals the one
    /// built record by record. Beside, the tally comes back from the counting thread
    /// (an error only if that thread stopped, which leaves `tally` empty).
    pub fn flush(&mut self, tally: &mut Tally) -> Result<(), CountingStopped> {
        if let Half::Beside(beside) = &self.counting
            && !beside.away
            && self.batch.len() == 0
        {
            return Ok(()); // nothing counted since the last flush: nothing staged either
        }
        self.count(tally, true);
        if let Half::Beside(beside) = &self.counting {
            *tally = *beside.counted.recv().map_err(|_| CountingStopped)?;
        }
        Ok(())
    }
}

/// Records read, in file order, on their way from a [`Reading`] to a [`Counting`]:
/// everything the counting side needs, besides the numbers of the shared
/// [`Registry`].
#[derive(Debug, Default)]
pub(crate) struct Batch {
    entries: Vec<Entry>,
    /// The answers of the records read in place, `measures` per record.
    answers: Vec<Answer>,
    /// The ids of the records read in place, back to back.
    ids: Vec<u8>,
    /// Their hashes ([`id_hash`]), one per record read in place with an id, in order.
    hashes: Vec<u128>,
    /// Unexpected answers (measure, raw value), in record order.
    unexpected: Vec<(usize, RawAnswer)>,
    /// The records that go record by record, in order.
    records: Vec<csv::ByteRecord>,
    /// Spellings of cells carried by their records (the cache of spellings is full).
    own_spellings: Vec<Vec<String>>,
    /// Weights counted one by one, in record order.
    weights: Vec<f64>,
    /// After counting this batch, give the id set room for a file of this size:
    /// (bytes read, total bytes).
    pub(crate) reserve: Option<(u64, u64)>,
}

impl Batch {
    /// Records in the batch.
    pub(crate) fn len(&self) -> usize {
        self.entries.len()
    }

    /// A record longer than the limit: rejected, in its place among the others.
    pub(crate) fn push_too_long(&mut self, line: u64, bytes: u64) {
        self.entries.push(Entry {
            kind: TOO_LONG,
            second: bytes as i64,
            ..Entry::at(line)
        });
    }

    /// Append an id. `after` is the record's bytes from the id's first byte on: an
    /// id of at most 16 bytes with 16 bytes there goes as one copy of those 16, cut
    /// back to the id (a copy of fixed length needs no call to `memcpy`).
    fn push_id(&mut self, id: &[u8], after: &[u8]) {
        let start = self.ids.len();
        match after.first_chunk::<16>() {
            Some(window) if id.len() <= 16 && std::ptr::eq(after.as_ptr(), id.as_ptr()) => {
                self.ids.extend_from_slice(window);
                self.ids.truncate(start + id.len());
            }
            _ => self.ids.extend_from_slice(id),
        }
    }

    fn clear(&mut self) {
        self.entries.clear();
        self.answers.clear();
        self.ids.clear();
        self.hashes.clear();
        self.unexpected.clear();
        self.records.clear();
        self.own_spellings.clear();
        self.weights.clear();
        self.reserve = None;
    }
}

/// An unexpected answer as read: packed (see [`pack`]) when it is short, else its text.
#[derive(Debug)]
enum RawAnswer {
    Packed(u128),
    Text(String),
}

/// One record in a [`Batch`], 48 bytes (it crosses from one core to another, so it
/// is kept small): what `kind` says, and for a record read in place what counting
/// it needs, with [`NONE`] for "not there".
#[derive(Debug, Clone, Copy)]
struct Entry {
    line: u64,
    /// The time's whole second (floor), or a record's size when it is too long.
    second: i64,
    cell: u32,
    /// Its cell's spelling among the registry's, or [`NONE`] for the next of the
    /// batch's `own_spellings`.
    spelling: u32,
    /// Its weight's index among the registry's weights, or [`NONE`] for the next of
    /// the batch's `weights` (a weight counted one by one).
    weight_index: u32,
    /// How many of the batch's `unexpected` answers are this record's.
    unexpected: u32,
    /// The id's bytes in the batch's `ids`, or `id_end` [`NONE`] without an id.
    id_start: u32,
    id_end: u32,
    /// The time's nanoseconds within its second, or [`NONE_NANOS`] without a time.
    nanos: i32,
    kind: u16,
    /// The record's answers as one [`combination`], or [`NO_COMBINATION`] (more
    /// than [`COMBINED_MEASURES`] measures).
    combined: u16,
}

/// Kinds of [`Entry`]: read in place; the next of the batch's `records`, counted
/// record by record; longer than the limit.
const IN_PLACE: u16 = 0;
const RECORD: u16 = 1;
const TOO_LONG: u16 = 2;
/// "Not counted as a combination", in an [`Entry`].
const NO_COMBINATION: u16 = u16::MAX;
/// "Not there", in an [`Entry`]'s numbers.
const NONE: u32 = u32::MAX;
const NONE_NANOS: i32 = i32::MIN;

impl Entry {
    /// A record on `line` with nothing else known yet.
    fn at(line: u64) -> Entry {
        Entry {
            line,
            second: 0,
            cell: 0,
            spelling: NONE,
            weight_index: NONE,
            unexpected: 0,
            id_start: 0,
            id_end: NONE,
            nanos: NONE_NANOS,
            kind: IN_PLACE,
            combined: NO_COMBINATION,
        }
    }

    fn id(&self) -> Option<std::ops::Range<usize>> {
        (self.kind == IN_PLACE && self.id_end != NONE)
            .then_some(self.id_start as usize..self.id_end as usize)
    }

    /// `t` as (floor second, nanoseconds from it, 0 or more): how an entry keeps it.
    fn parts_of(t: Timestamp) -> (i64, i32) {
        (
            Arrivals::second_of(t),
            t.subsec_nanosecond().rem_euclid(1_000_000_000),
        )
    }

    /// The time whose [`Entry::parts_of`] these are. Parts sort as their times do.
    fn timestamp_of((second, nanos): (i64, i32)) -> Option<Timestamp> {
        Timestamp::new(second, nanos).ok()
    }

    /// Parts (nanoseconds 0 or more) as one number that sorts as they do, compared
    /// in one step: the second above 32 bits of nanoseconds.
    fn order_of((second, nanos): (i64, i32)) -> i128 {
        i128::from(second) << 32 | i128::from(nanos)
    }

    /// The parts whose [`Entry::order_of`] this is.
    fn parts_of_order(order: i128) -> (i64, i32) {
        ((order >> 32) as i64, (order & 0xffff_ffff) as i32)
    }
}

/// The cells, spellings and weights met so far, numbered in the order they were
/// first met, shared by every [`Reading`] of one count and its [`Counting`]: a
/// record refers to them by number, and they only grow, so every number in a batch
/// is known by the time the batch is counted. Consulted only when a reading side's
/// own caches miss.
#[derive(Debug)]
pub(crate) struct Registry {
    by_key: HashMap<CellKey, u32>,
    cells: Vec<CellKey>,
    /// Raw spellings of cells, trimmed: the label if it is the first counted in its
    /// cell.
    spellings: Vec<Vec<String>>,
    /// The distinct weights counted per weight (index 0 is the weight 1).
    by_weight: HashMap<u64, u32, BuildHasherDefault<Mix>>,
    weights: Vec<f64>,
}

impl Default for Registry {
    fn default() -> Registry {
        Registry {
            by_key: HashMap::new(),
            cells: Vec::new(),
            spellings: Vec::new(),
            by_weight: HashMap::from_iter([(1f64.to_bits(), 0)]),
            weights: vec![1.0],
        }
    }
}

type Shared = Arc<Mutex<Registry>>;

fn lock(registry: &Shared) -> std::sync::MutexGuard<'_, Registry> {
    // A thread that panicked while holding it left it whole (every change is one push).
    registry.lock().unwrap_or_else(|e| e.into_inner())
}

/// The reading half: records in, [`Batch`] entries out. Touches no tally.
#[derive(Debug)]
pub(crate) struct Reading {
    layout: Layout,
    /// The columns the layout reads, sorted, each once (the order of the UTF-8 check).
    used: Vec<usize>,
    slots: Slots,
    cells: CellCache,
    registry: Shared,
    weights: Weights,
    /// Each measure's answers by their packed text (see [`pack`]).
    answers: Vec<ByPlace<u128, Answer, ANSWER_SLOTS>>,
    /// The columns from the first to the last of the cell's, and of the measures'
    /// (at most [`RUN_MEASURES`] of them): each range is looked up as one run of
    /// bytes (see [`RunKey`]) before its values are looked up one by one.
    cell_run: Option<(usize, usize)>,
    answer_run: Option<(usize, usize)>,
    /// (cell, spelling) by the cell's run; the answers, in measure order, by the
    /// measures' run (runs with an unexpected answer are not kept).
    cells_by_run: ByPlace<RunKey, (u32, u32), CELL_RUNS>,
    answers_by_run: ByPlace<RunKey, ([Answer; RUN_MEASURES], u16), ANSWER_RUNS>,
    /// What the last times in the usual form leave for the next (see [`time_parts`]).
    clock: Clock,
}

impl Reading {
    fn new(layout: &Layout, registry: Shared) -> Reading {
        let used = layout.used_columns();
        let slot = |column: usize| used.iter().position(|&c| c == column).unwrap_or(0);
        let slots = Slots {
            cells: layout.cells.iter().map(|&c| slot(c)).collect(),
            measures: layout.measures.iter().map(|m| slot(m.column)).collect(),
            id: layout.id.map(slot),
            weight: layout.weight.map(slot),
            time: layout.time.map(slot),
        };
        Reading {
            slots,
            weights: Weights::default(),
            layout: layout.clone(),
            used,
            cells: CellCache::default(),
            registry,
            answers: vec![ByPlace::new(Answer::Missing); layout.measures.len()],
            cell_run: column_range(layout.cells.iter().copied()),
            answer_run: column_range(layout.measures.iter().map(|m| m.column))
                .filter(|_| layout.measures.len() <= RUN_MEASURES),
            cells_by_run: ByPlace::new((0, 0)),
            answers_by_run: ByPlace::new(([Answer::Missing; RUN_MEASURES], NO_COMBINATION)),
            clock: Clock::default(),
        }
    }

    /// Another reading half for the same count (for another thread): the same
    /// registry, its own caches.
    pub(crate) fn another(&self) -> Reading {
        Reading::new(&self.layout, Arc::clone(&self.registry))
    }

    /// Read one record (starting on `line`) into the batch: in place when every check
    /// passes, else whole, to be counted record by record.
    pub(crate) fn read(&mut self, fields: Fields<'_>, line: u64, batch: &mut Batch) {
        match self.read_in_place(fields, line, batch) {
            Some(entry) => batch.entries.push(entry),
            None => {
                batch.records.push(fields.to_byte_record());
                batch.entries.push(Entry {
                    kind: RECORD,
                    ..Entry::at(line)
                });
            }
        }
    }

    /// Read a record in place; `None` (with nothing of it in the batch) when it needs
    /// the record-by-record path.
    #[inline]
    fn read_in_place(&mut self, fields: Fields<'_>, line: u64, batch: &mut Batch) -> Option<Entry> {
        if fields.len() != self.layout.width || self.used.len() > MAX_USED {
            return None;
        }
        // Every column the layout reads, checked as UTF-8 (in column order, as the
        // record-by-record path does) and trimmed as `str::trim` trims. A record known
        // to be ASCII needs no check: its values are trimmed as they are asked for.
        let checked = match fields.known_ascii() {
            true => None,
            false => {
                let mut values: [&[u8]; MAX_USED] = [&[]; MAX_USED];
                for (value, &column) in values.iter_mut().zip(&self.used) {
                    let bytes = fields.get(column)?;
                    *value = if bytes.is_ascii() {
                        trim_ascii(bytes)
                    } else {
                        std::str::from_utf8(bytes).ok()?.trim().as_bytes()
                    };
                }
                Some(values)
            }
        };
        let used = &self.used;
        let value = |slot: usize| match &checked {
            Some(values) => values.get(slot).copied().unwrap_or_default(),
            None => used
                .get(slot)
                .and_then(|&column| fields.get(column))
                .map_or(&[][..], trim_ascii),
        };
        let slots = &self.slots;
        let (weight, weight_index) = match slots.weight {
            None => (1.0, Some(0)),
            Some(slot) => self.weights.get(value(slot), &self.registry)?,
        };
        let time = match slots.time.map(value) {
            None | Some(b"") => None,
            Some(raw) => Some(time_parts(&mut self.clock, raw)?),
        };
        // The cell, from its raw values: (cell, spelling). First the run of bytes of
        // its columns together (a record split in place), then short values of a few
        // columns packed (see `pack`), others joined.
        let cell_run = RunKey::of_columns(&fields, self.cell_run);
        let by_run = cell_run.and_then(|run| self.cells_by_run.get(run));
        let (cell, spelling) = match by_run {
            Some(&(cell, spelling)) => (cell, Some(spelling)),
            None => {
                let mut values: [&[u8]; MAX_USED] = [&[]; MAX_USED];
                for (v, &slot) in values.iter_mut().zip(&slots.cells) {
                    *v = value(slot);
                }
                let values = values.get(..slots.cells.len()).unwrap_or_default();
                let found = self.cells.find(values, &self.registry, batch);
                if let (Some(run), (cell, Some(spelling))) = (cell_run, found) {
                    self.cells_by_run.put(run, (cell, spelling));
                }
                found
            }
        };
        let mut entry = Entry {
            cell,
            spelling: spelling.unwrap_or(NONE),
            weight_index: weight_index.unwrap_or(NONE),
            ..Entry::at(line)
        };
        if weight_index.is_none() {
            batch.weights.push(weight);
        }
        if let Some((second, nanos)) = time {
            (entry.second, entry.nanos) = (second, nanos);
        }
        if let Some(raw) = slots.id.map(value).filter(|raw| !raw.is_empty()) {
            entry.id_start = batch.ids.len() as u32;
            batch.push_id(raw, fields.rest_from(raw));
            entry.id_end = batch.ids.len() as u32;
            batch.hashes.push(id_hash(raw));
        }
        // The answers: first by the run of bytes of the measures' columns together.
        let answer_run = RunKey::of_columns(&fields, self.answer_run);
        let measures = self.layout.measures.len();
        if let Some(&(answers, combined)) = answer_run
            .and_then(|run| self.answers_by_run.get(run))
            .filter(|_| measures <= RUN_MEASURES)
        {
            // All of them at once (a copy of fixed length), cut back to the measures.
            let start = batch.answers.len();
            batch.answers.extend_from_slice(&answers);
            batch.answers.truncate(start + measures);
            entry.combined = combined;
            return Some(entry);
        }
        let first_answer = batch.answers.len();
        let mut unexpected = 0;
        for (m, (rule, &slot)) in self.layout.measures.iter().zip(&slots.measures).enumerate() {
            let raw = value(slot);
            let packed = pack(raw);
            let cache = self.answers.get_mut(m);
            let answer = match (packed, cache) {
                (Some(p), Some(cache)) => cache.get(p).copied().unwrap_or_else(|| {
                    let a = rule.classify(std::str::from_utf8(raw).unwrap_or_default());
                    cache.put(p, a);
                    a
                }),
                _ => rule.classify(std::str::from_utf8(raw).unwrap_or_default()),
            };
            if answer == Answer::Unexpected {
                let raw = match packed {
                    Some(p) => RawAnswer::Packed(p),
                    None => RawAnswer::Text(std::str::from_utf8(raw).unwrap_or_default().into()),
                };
                batch.unexpected.push((m, raw));
                unexpected += 1;
            }
            batch.answers.push(answer);
        }
        entry.unexpected = unexpected;
        let read = batch.answers.get(first_answer..).unwrap_or_default();
        if measures <= COMBINED_MEASURES {
            entry.combined = combination(read) as u16;
        }
        if let Some(run) = answer_run
            && unexpected == 0
        {
            let mut answers = [Answer::Missing; RUN_MEASURES];
            for (kept, &answer) in answers.iter_mut().zip(read) {
                *kept = answer;
            }
            self.answers_by_run.put(run, (answers, entry.combined));
        }
        Some(entry)
    }
}

/// A reading half's cells by their raw values (trimmed), each value as read.
#[derive(Debug, Default)]
struct CellCache {
    /// Raw cell values (joined) → (cell, spelling).
    by_raw: HashMap<Vec<u8>, (u32, Option<u32>), BuildHasherDefault<Mix>>,
    /// The same for cells of at most [`PACKED_CELLS`] columns whose values are short
    /// enough to pack: packed values → (cell, spelling).
    by_packed: HashMap<PackedCell, (u32, Option<u32>), BuildHasherDefault<Mix>>,
    raw_key: Vec<u8>,
}

impl CellCache {
    /// The cell of these raw values (checked as UTF-8 and trimmed), and its spelling
    /// among the registry's: short values of a few columns are looked up packed (see
    /// [`pack`]), others joined; a cell not known yet is registered. Past
    /// [`CELL_CACHE`] spellings the record carries its own (`None`), pushed on the
    /// batch.
    fn find(
        &mut self,
        values: &[&[u8]],
        registry: &Shared,
        batch: &mut Batch,
    ) -> (u32, Option<u32>) {
        let mut packed = (values.len() <= PACKED_CELLS).then_some(PackedCell::default());
        if let Some(key) = packed.as_mut() {
            for (word, value) in key.0.iter_mut().zip(values) {
                match pack(value) {
                    Some(p) => *word = p,
                    None => {
                        packed = None;
                        break;
                    }
                }
            }
        }
        if packed.is_none() {
            self.raw_key.clear();
            for value in values {
                self.raw_key.extend_from_slice(value);
                self.raw_key.push(0xff); // never in UTF-8 text
            }
        }
        let known = match &packed {
            Some(key) => self.by_packed.get(key),
            None => self.by_raw.get(self.raw_key.as_slice()),
        };
        if let Some(&found) = known {
            return found;
        }
        let raw: Vec<&str> = values
            .iter()
            .map(|value| std::str::from_utf8(value).unwrap_or_default())
            .collect();
        let key = CellKey::of(&raw);
        let spelling: Vec<String> = raw.iter().map(|v| v.to_string()).collect();
        let cached = self.by_raw.len() + self.by_packed.len() < CELL_CACHE;
        let mut registry = lock(registry);
        let cell = match registry.by_key.get(&key) {
            Some(&i) => i,
            None => {
                let i = registry.cells.len() as u32;
                registry.cells.push(key.clone());
                registry.by_key.insert(key, i);
                i
            }
        };
        if cached {
            registry.spellings.push(spelling);
            let found = (cell, Some(registry.spellings.len() as u32 - 1));
            drop(registry);
            match packed {
                Some(key) => self.by_packed.insert(key, found),
                None => self.by_raw.insert(self.raw_key.clone(), found),
            };
            found
        } else {
            // The cache is full: this record carries its own spelling, so that
            // nothing kept grows with the records.
            batch.own_spellings.push(spelling);
            (cell, None)
        }
    }
}

/// The counting half: [`Batch`]es in, in file order, into the tally.
#[derive(Debug)]
pub(crate) struct Counting {
    layout: Layout,
    staged: Vec<Staged>,
    registry: Shared,
    /// Copies of the registry's spellings and weights, as far as batches so far need.
    spellings: Vec<Vec<String>>,
    weights: Vec<f64>,
    /// Short unexpected answers already counted once, by (measure, packed answer):
    /// the value the tally counts them under, and how many more wait to be added.
    unexpected: HashMap<(usize, u128), (String, u64), BuildHasherDefault<Mix>>,
}

impl Counting {
    fn new(layout: &Layout, registry: Shared) -> Counting {
        Counting {
            layout: layout.clone(),
            registry,
            staged: Vec::new(),
            spellings: Vec::new(),
            weights: vec![1.0],
            unexpected: HashMap::default(),
        }
    }

    /// Count the batch's records in order, and empty it (keeping its room). The ids
    /// are taken in runs of [`AHEAD`]: at the start of each run, the id set's slots
    /// for the next run are asked for (prefetched) in one short loop. On a virtual
    /// machine nearly every slot also misses the address translation cache, and a
    /// prefetch holds its place until its page walk ends: one prefetch per id, with
    /// the counting of a record between two of them, filled the processor's window
    /// of work in flight, so the walks ran one after another. Issued together, the
    /// walks overlap (see DEVELOPERS.md, "Reading fast").
    pub(crate) fn count(&mut self, tally: &mut Tally, batch: &mut Batch) {
        let measures = self.layout.measures.len();
        {
            // Every number in the batch was registered before the batch was sent.
            let registry = lock(&self.registry);
            for key in registry.cells.iter().skip(self.staged.len()) {
                self.staged.push(Staged::new(key.clone(), measures));
            }
            let known = self.spellings.len();
            self.spellings
                .extend(registry.spellings.iter().skip(known).cloned());
            let known = self.weights.len();
            self.weights
                .extend(registry.weights.iter().skip(known).copied());
        }
        let (mut answers, mut unexpected) = (0, 0);
        let (mut records, mut own) = (batch.records.iter(), batch.own_spellings.iter_mut());
        let mut own_weights = batch.weights.iter();
        // The id set's slots for the first run of ids; then, at the start of each run,
        // those of the run after it.
        for &hash in batch.hashes.iter().take(AHEAD) {
            tally.ids.prefetch(hash);
        }
        let mut hashes = batch.hashes.iter().enumerate();
        // The newest time counted in the batch, as its number (none: the least).
        let mut newest = i128::MIN;
        for read in &batch.entries {
            let line = read.line;
            match read.kind {
                IN_PLACE => {}
                RECORD => {
                    if let Some(record) = records.next() {
                        tally.add_record(&self.layout, record, line);
                    }
                    continue;
                }
                _ => {
                    let bytes = read.second as u64;
                    tally.reject(Rejection {
                        line,
                        reason: rows::Reason::TooLong { bytes },
                    });
                    continue;
                }
            }
            let mine = answers..answers + measures;
            answers += measures;
            let theirs = unexpected..unexpected + read.unexpected as usize;
            unexpected += read.unexpected as usize;
            let own_spelling = match read.spelling {
                NONE => own.next(),
                _ => None,
            };
            let (weight, weight_index) = match read.weight_index {
                NONE => (own_weights.next().copied().unwrap_or(1.0), None),
                i => (
                    self.weights.get(i as usize).copied().unwrap_or(1.0),
                    Some(i),
                ),
            };
            tally.rows_read += 1;
            let hash = match read.id() {
                Some(_) => hashes.next().map(|(i, &hash)| {
                    if i.is_multiple_of(AHEAD) {
                        let next = batch.hashes.get(i + AHEAD..).unwrap_or_default();
                        for &h in next.iter().take(AHEAD) {
                            tally.ids.prefetch(h);
                        }
                    }
                    hash
                }),
                None => None,
            };
            if let Some(hash) = hash
                && !tally.ids.insert_hash(hash)
            {
                let id = read.id().and_then(|id| batch.ids.get(id));
                tally.note_duplicate(line, id.unwrap_or_default());
                continue;
            }
            let Some(staged) = self.staged.get_mut(read.cell as usize) else {
                continue; // unreachable: new cells arrive before their records
            };
            if staged.cell.responses == 0 && staged.cell.label.is_empty() {
                // The cell's first counted response names it (if the tally has not).
                staged.cell.label = match tally.cells.get(&staged.key) {
                    Some(known) => known.label.clone(),
                    None => match (read.spelling, own_spelling) {
                        (NONE, Some(own)) => std::mem::take(own),
                        (NONE, None) => Vec::new(),
                        (i, _) => self.spellings.get(i as usize).cloned().unwrap_or_default(),
                    },
                };
            }
            staged.cell.responses += 1;
            let combined = match (weight_index, read.combined) {
                (_, NO_COMBINATION) => None,
                (Some(0), code) => staged.combined.get_mut(usize::from(code)),
                _ => None,
            };
            if let Some(count) = combined {
                *count += 1;
            } else {
                let answers = batch.answers.get(mine).unwrap_or_default();
                for (m, &answer) in answers.iter().enumerate() {
                    let counted = match (answer, weight_index) {
                        (Answer::Yes | Answer::No, Some(i)) => {
                            let i = i as usize;
                            staged.counts.get_mut(m).is_some_and(|counts| {
                                if counts.len() <= i {
                                    counts.resize(i + 1, [0, 0]);
                                }
                                counts[i][usize::from(answer == Answer::No)] += 1;
                                true
                            })
                        }
                        _ => false,
                    };
                    if !counted && let Some(measure) = staged.cell.measures.get_mut(m) {
                        measure.add_unrounded(answer, weight);
                    }
                }
            }
            for (m, raw) in batch.unexpected.get(theirs).unwrap_or_default() {
                match raw {
                    RawAnswer::Packed(p) => match self.unexpected.get_mut(&(*m, *p)) {
                        Some((_, count)) => *count += 1,
                        None => {
                            let text = unpack(*p);
                            let text = std::str::from_utf8(&text).unwrap_or_default();
                            if let Some(key) = tally.note_unexpected(*m, text) {
                                self.unexpected.insert((*m, *p), (key, 0));
                            }
                        }
                    },
                    RawAnswer::Text(text) => {
                        tally.note_unexpected(*m, text);
                    }
                }
            }
            if read.nanos == NONE_NANOS {
                staged.cell.arrivals.untimed += 1;
                continue;
            }
            match &mut staged.run {
                // The same hour as the run's (without dividing).
                Some((_, count, start))
                    if (*start..*start + Arrivals::BUCKET_SECONDS).contains(&read.second) =>
                {
                    *count += 1
                }
                _ => {
                    staged.flush_run();
                    let hour = Arrivals::hour_of_second(read.second);
                    let start = hour * Arrivals::BUCKET_SECONDS;
                    staged.run = Some((hour, 1, start));
                }
            }
            // Kept as numbers until the flush (or the batch's end): no `Timestamp` per
            // record.
            let order = Entry::order_of((read.second, read.nanos));
            staged.span = (staged.span.0.min(order), staged.span.1.max(order));
            newest = newest.max(order);
        }
        if newest > i128::MIN
            && let Some(t) = Entry::timestamp_of(Entry::parts_of_order(newest))
        {
            tally.newest = max_option(tally.newest, Some(t));
        }
        if let Some((read, total)) = batch.reserve {
            tally.reserve_ids_for(read, total);
        }
        batch.clear();
    }

    /// Merge the staged sums into the tally. Exact: the tally then equals the one
    /// built record by record.
    pub(crate) fn flush(&mut self, tally: &mut Tally) {
        for (&(m, _), (key, count)) in &mut self.unexpected {
            if *count > 0 {
                tally.add_unexpected(m, key, *count);
                *count = 0;
            }
        }
        for staged in &mut self.staged {
            if staged.cell.responses == 0 {
                continue;
            }
            staged.flush_run();
            staged.flush_span();
            staged.flush_counts(&self.weights);
            let fresh = CellTally::new(staged.cell.label.clone(), staged.cell.measures.len());
            let cell = std::mem::replace(&mut staged.cell, fresh);
            match tally.cells.get_mut(&staged.key) {
                Some(mine) => mine.merge(&cell),
                None => {
                    let mut cell = cell;
                    for m in &mut cell.measures {
                        m.round();
                    }
                    tally.cells.insert(staged.key.clone(), cell);
                }
            }
        }
    }
}

/// Surrounding white space removed from ASCII text, as `str::trim` removes it (which,
/// unlike `trim_ascii`, also removes the vertical tab).
fn trim_ascii(bytes: &[u8]) -> &[u8] {
    let space = |b: &u8| matches!(b, b' ' | b'\t' | b'\n' | b'\x0b' | b'\x0c' | b'\r');
    // The usual case: nothing to trim (every white space byte is at most a space).
    match (bytes.first(), bytes.last()) {
        (Some(&first), Some(&last)) if first > b' ' && last > b' ' => return bytes,
        _ => {}
    }
    let start = bytes.iter().position(|b| !space(b)).unwrap_or(bytes.len());
    let end = bytes
        .iter()
        .rposition(|b| !space(b))
        .map_or(start, |e| e + 1);
    bytes.get(start..end).unwrap_or_default()
}

/// Where each role's value sits among the columns read (`Counter::used`).
#[derive(Debug, Default)]
struct Slots {
    cells: Vec<usize>,
    measures: Vec<usize>,
    id: Option<usize>,
    weight: Option<usize>,
    time: Option<usize>,
}

/// Up to 15 bytes packed into one number (byte i at bits 8i, the length in the top
/// byte), so that equal numbers mean equal bytes; `None` for longer text.
fn pack(bytes: &[u8]) -> Option<u128> {
    let len = bytes.len();
    // Whole words read straight from the text, two of them overlapping when the
    // length is not a multiple of their size (the bytes they share are the same, so
    // or-ing them is exact). Never a copy into an array read back as one number,
    // which stalls the processor (a wide load right after narrow stores).
    let u64_at = |i: usize| {
        bytes
            .get(i..i + 8)
            .and_then(|b| b.try_into().ok())
            .map_or(0, u64::from_le_bytes)
    };
    let u32_at = |i: usize| {
        bytes
            .get(i..i + 4)
            .and_then(|b| b.try_into().ok())
            .map_or(0, u32::from_le_bytes)
    };
    let (low, high) = match len {
        0 => (0, 0),
        // The first, middle and last bytes: every byte of one to three.
        1..=3 => {
            let at = |i: usize| bytes.get(i).map_or(0, |&b| u64::from(b) << (8 * i));
            (at(0) | at(len / 2) | at(len - 1), 0)
        }
        4..=8 => {
            let low = u64::from(u32_at(0)) | u64::from(u32_at(len - 4)) << (8 * (len - 4));
            (low, 0)
        }
        9..=15 => (u64_at(0), u64_at(len - 8) >> (8 * (16 - len))),
        _ => return None,
    };
    Some(u128::from(high | (len as u64) << 56) << 64 | u128::from(low))
}

/// The bytes [`pack`] packed.
fn unpack(word: u128) -> Vec<u8> {
    let len = (word >> 120) as usize;
    (0..len.min(15)).map(|i| (word >> (8 * i)) as u8).collect()
}

/// The weights read so far, by their trimmed text (a weight is a pure function of its
/// text, so remembering it changes nothing), each with its index among the
/// registry's distinct weights for the counts per weight. Index 0 is the weight 1
/// (every response without a weight column).
#[derive(Debug, Default)]
struct Weights {
    by_text: HashMap<u128, (f64, Option<u32>), BuildHasherDefault<Mix>>,
}

impl Weights {
    /// The weight the text gives and its index (`None` for a weight counted one by
    /// one), or `None` when it is not a valid weight. A new distinct weight is given
    /// its index in the registry.
    fn get(&mut self, raw: &[u8], registry: &Shared) -> Option<(f64, Option<u32>)> {
        let packed = pack(raw);
        if let Some(&known) = packed.and_then(|p| self.by_text.get(&p)) {
            return Some(known);
        }
        let w = rows::parse_weight(std::str::from_utf8(raw).ok()?).ok()?;
        let mut registry = lock(registry);
        let index = match registry.by_weight.get(&w.to_bits()) {
            Some(&i) => Some(i),
            None if crate::tally::repeats_exactly(w) && registry.weights.len() < WEIGHT_CACHE => {
                let i = registry.weights.len() as u32;
                registry.by_weight.insert(w.to_bits(), i);
                registry.weights.push(w);
                Some(i)
            }
            None => None,
        };
        drop(registry);
        if let Some(p) = packed
            && self.by_text.len() < WEIGHT_CACHE
        {
            self.by_text.insert(p, (w, index));
        }
        Some((w, index))
    }
}

/// Where an hour or a minute starts: its first second, and whether every time in
/// its hour is one `jiff` accepts; `None` when `jiff` refuses the hour's start.
type Start = Option<(i64, bool)>;

/// What the last times in the usual form (see [`usual_form`]) leave for the next.
#[derive(Debug, Default)]
struct Clock {
    /// The last hour: its `YYYY-MM-DDTHH` as two words, and where it starts.
    hour: Option<((u64, u64), Start)>,
    /// The last time's first 16 bytes (`YYYY-MM-DDTHH:MM`), and where its minute
    /// starts.
    minute: Option<([u8; 16], Start)>,
}

/// The time in `raw` (trimmed, not blank) as (floor second, nanoseconds), the parts
/// [`Entry::parts_of`] gives, or `None` when it is not a valid time: exactly what
/// `jiff` parses. The usual form `YYYY-MM-DDTHH:MM:SS[.f…]Z` (hours 00–23, minutes and
/// seconds 00–59, one to nine digits of fraction) is computed from the start of its
/// hour, which `jiff` parses once per hour (so a date `jiff` refuses is refused here
/// too), without making a `Timestamp` unless the hour reaches past the last time
/// `jiff` accepts; any other form goes to `jiff` whole. A time whose first 16 bytes
/// are the last one's (the same minute, already checked) has only its seconds read.
fn time_parts(clock: &mut Clock, raw: &[u8]) -> Option<(i64, i32)> {
    if let (Some((head, start)), Some(first)) = (&clock.minute, raw.first_chunk::<16>())
        && head == first
        && let Some((second, nanos)) = seconds_part(raw)
    {
        return in_hour(*start, second, nanos);
    }
    let Some((prefix, minute, second, nanos)) = usual_form(raw) else {
        let t = std::str::from_utf8(raw).ok()?.parse::<Timestamp>().ok()?;
        return Some(Entry::parts_of(t));
    };
    let start = match clock.hour {
        Some((p, start)) if p == prefix => start,
        _ => {
            let mut text = raw.get(..13)?.to_vec();
            text.extend_from_slice(b":00:00Z");
            let start = std::str::from_utf8(&text)
                .ok()
                .and_then(|t| t.parse::<Timestamp>().ok())
                .map(|t| {
                    let s = t.as_second();
                    (s, Timestamp::new(s + 3599, 999_999_999).is_ok())
                });
            clock.hour = Some((prefix, start));
            start
        }
    };
    let start = start.map(|(s, whole)| (s + minute, whole));
    if let Some(first) = raw.first_chunk::<16>() {
        clock.minute = Some((*first, start));
    }
    in_hour(start, second, nanos)
}

/// The parts of the time `second` seconds and `nanos` nanoseconds after a minute's
/// `start`.
fn in_hour(start: Start, second: i64, nanos: i32) -> Option<(i64, i32)> {
    match start? {
        // With nanoseconds of 0 or more, (second, nanoseconds) are already the parts.
        (s, true) => Some((s + second, nanos)),
        (s, false) => Timestamp::new(s + second, nanos).ok().map(Entry::parts_of),
    }
}

/// `YYYY-MM-DDTHH:MM:SS[.f…]Z` split into its hour (bytes 0–7 and 5–12 as two words),
/// the minute's first second within the hour, the seconds within the minute and the
/// nanoseconds, when `b` has exactly that form with HH ≤ 23, MM ≤ 59, SS ≤ 59 and one
/// to nine digits after a `.`.
fn usual_form(b: &[u8]) -> Option<((u64, u64), i64, i64, i32)> {
    let word = |i: usize| {
        b.get(i..i + 8)
            .and_then(|w| w.try_into().ok())
            .map(u64::from_le_bytes)
    };
    // Each byte xor its template (digits against `0`, separators against themselves)
    // is at most 9 where a digit belongs and 0 where a separator does: the byte plus
    // 0x76 (digits) or 0x7f (separators) then stays below 0x80. Bytes of 0x80 or more
    // fail on their own, so no sum carries into the next byte.
    let fits = |w: u64, template: &[u8; 8]| {
        let add = template.map(|t| if t == b'0' { 0x76 } else { 0x7f });
        let x = w ^ u64::from_le_bytes(*template);
        (x | x.wrapping_add(u64::from_le_bytes(add))) & 0x8080_8080_8080_8080 == 0
    };
    // Bytes 0–7 and 8–15; the rest is `seconds_part`'s.
    let (w0, w1) = (word(0)?, word(8)?);
    if !(fits(w0, b"0000-00-") && fits(w1, b"00T00:00")) {
        return None;
    }
    let (second, nanos) = seconds_part(b)?;
    let digit = |i: usize| b.get(i).map_or(0, |&d| i64::from(d.wrapping_sub(b'0')));
    let two = |i: usize| digit(i) * 10 + digit(i + 1);
    let (hh, mm) = (two(11), two(14));
    if hh > 23 || mm > 59 {
        return None;
    }
    Some(((w0, word(5)?), mm * 60, second, nanos))
}

/// From byte 16 of a time in the usual form, `:SS[.f…]Z` (SS ≤ 59, one to nine
/// digits after a `.`, nothing after the `Z`): the seconds and the nanoseconds.
fn seconds_part(b: &[u8]) -> Option<(i64, i32)> {
    let len = b.len();
    if len < 20 || len == 21 || len > 30 || b.last() != Some(&b'Z') || b.get(16) != Some(&b':') {
        return None;
    }
    let digit = |i: usize| b.get(i).map(|&d| d.wrapping_sub(b'0')).filter(|&d| d <= 9);
    let second = i64::from(digit(17)?) * 10 + i64::from(digit(18)?);
    if second > 59 {
        return None;
    }
    let fraction = b.get(19..len - 1)?;
    let nanos = match fraction.split_first() {
        None => 0,
        Some((b'.', ds)) => {
            let mut n: i32 = 0;
            for &d in ds {
                let v = d.wrapping_sub(b'0');
                if v > 9 {
                    return None;
                }
                n = n * 10 + i32::from(v);
            }
            // One to nine digits (the lengths above): scaled to nanoseconds.
            n * [
                1,
                10,
                100,
                1_000,
                10_000,
                100_000,
                1_000_000,
                10_000_000,
                100_000_000,
            ]
            .get(9usize.checked_sub(ds.len())?)?
        }
        _ => return None,
    };
    Some((second, nanos))
}

/// A record's answers as one number: two bits each (yes 0, no 1, missing 2,
/// unexpected 3), the first measure's lowest.
fn combination(answers: &[Answer]) -> usize {
    answers.iter().rev().fold(0, |code, &answer| {
        code << 2
            | match answer {
                Answer::Yes => 0,
                Answer::No => 1,
                Answer::Missing => 2,
                Answer::Unexpected => 3,
            }
    })
}

/// The first and last of some columns, when there are any.
fn column_range(columns: impl Iterator<Item = usize> + Clone) -> Option<(usize, usize)> {
    Some((columns.clone().min()?, columns.max()?))
}

/// A run of at most 32 bytes (see [`Fields::run`]) as a key: its first sixteen bytes,
/// the rest, each padded with zeros, and its length, so that equal keys mean equal
/// bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct RunKey {
    low: u128,
    high: u128,
    len: usize,
}

impl RunKey {
    /// Bytes a run may have to make a key.
    const MAX: usize = 32;

    /// The run of `fields` from the first to the last of `columns` as a key, when
    /// there are columns and the record was split in place (see [`Fields::run`]).
    fn of_columns(fields: &Fields<'_>, columns: Option<(usize, usize)>) -> Option<RunKey> {
        let (first, last) = columns?;
        let (bytes, start, end) = fields.run(first, last)?;
        RunKey::of(bytes, start, end)
    }

    /// `bytes[start..end]` as a key (`None` if longer than [`RunKey::MAX`]). Read as
    /// whole sixteen-byte words of `bytes` ending at `end` or starting at `start`,
    /// shifted to the run (a copy only when the run ends in the first 16 bytes).
    fn of(bytes: &[u8], start: usize, end: usize) -> Option<RunKey> {
        let len = end.checked_sub(start)?;
        if len > Self::MAX {
            return None;
        }
        let word = |at: usize| {
            bytes
                .get(at..at + 16)
                .and_then(|b| b.try_into().ok())
                .map(u128::from_le_bytes)
        };
        // The `n` (at most 16) bytes that end at `end`, in the low bytes.
        let tail = |n: usize| match end.checked_sub(16).and_then(word) {
            Some(w) => Some(w.checked_shr(8 * (16 - n) as u32).unwrap_or(0)),
            None => {
                let mut padded = [0u8; 16];
                padded
                    .get_mut(..n)?
                    .copy_from_slice(bytes.get(end - n..end)?);
                Some(u128::from_le_bytes(padded))
            }
        };
        let (low, high) = match len {
            0..=16 => (tail(len)?, 0),
            _ => (word(start)?, tail(len - 16)?),
        };
        Some(RunKey { low, high, len })
    }
}

/// A key of a [`ByPlace`] table: where it goes in a table of `places` (a power of
/// two), and a key that no real one equals, marking a place never filled.
trait Placed: Copy + PartialEq {
    const NONE: Self;
    fn place(&self, places: usize) -> usize;
}

impl Placed for u128 {
    /// No packed text (see [`pack`]) has a top byte of 0xff (its length, at most 15).
    const NONE: u128 = u128::MAX;

    fn place(&self, places: usize) -> usize {
        (fold(0, *self) >> (64 - places.trailing_zeros())) as usize
    }
}

impl Placed for RunKey {
    /// No run has a length of `usize::MAX`.
    const NONE: RunKey = RunKey {
        low: 0,
        high: 0,
        len: usize::MAX,
    };

    fn place(&self, places: usize) -> usize {
        let h = fold(fold(self.len as u64, self.low), self.high);
        (h >> (64 - places.trailing_zeros())) as usize
    }
}

/// Values by their key (a packed text, a run of bytes), in a table of `N` (a power of
/// two) where each key has one place: the values are a pure function of the key, so
/// a key that takes another's place only has that one found again when it comes
/// back.
#[derive(Debug, Clone)]
struct ByPlace<K, V, const N: usize> {
    slots: Box<[(K, V); N]>,
}

impl<K: Placed, V: Copy, const N: usize> ByPlace<K, V, N> {
    /// An empty table (`empty` fills the places never found).
    fn new(empty: V) -> Self {
        ByPlace {
            slots: Box::new([(K::NONE, empty); N]),
        }
    }

    fn get(&self, key: K) -> Option<&V> {
        let (kept, value) = self.slots.get(key.place(N))?;
        (*kept == key).then_some(value)
    }

    fn put(&mut self, key: K, value: V) {
        if let Some(slot) = self.slots.get_mut(key.place(N)) {
            *slot = (key, value);
        }
    }
}

/// A cell's values packed (see [`pack`]): the key of [`Reading`]'s cache of cells.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
struct PackedCell([u128; PACKED_CELLS]);

impl Hash for PackedCell {
    /// Its words folded into one, which [`Mix`] takes in one step (an array of them
    /// is hashed as its 64 bytes and a length, nine steps).
    fn hash<H: Hasher>(&self, state: &mut H) {
        state.write_u64(self.0.iter().fold(0, |h, &word| fold(h, word)));
    }
}

/// A packed text (see [`pack`]) folded into `h`: both halves, then a multiply that
/// spreads them over the top bits (which [`ByPlace`] takes a place from).
fn fold(h: u64, word: u128) -> u64 {
    (h.rotate_left(23) ^ word as u64 ^ (word >> 64) as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15)
}

/// A small fast hash for the cell cache's keys (a few bytes each, not chosen by an
/// adversary who could gain anything: a bad spread only slows the cache).
#[derive(Default)]
struct Mix(u64);

impl Hasher for Mix {
    fn write(&mut self, bytes: &[u8]) {
        let mut chunks = bytes.chunks_exact(8);
        for chunk in &mut chunks {
            let mut word = [0u8; 8];
            word.copy_from_slice(chunk);
            self.eat(u64::from_le_bytes(word));
        }
        let tail = chunks.remainder();
        if !tail.is_empty() {
            // Shifted in byte by byte (see `pack`).
            let word = tail
                .iter()
                .enumerate()
                .fold(0u64, |w, (i, &b)| w | u64::from(b) << (8 * i));
            self.eat(word);
        }
    }
    fn write_u64(&mut self, word: u64) {
        self.eat(word);
    }
    fn finish(&self) -> u64 {
        self.0 ^ (self.0 >> 29)
    }
}

impl Mix {
    fn eat(&mut self, word: u64) {
        self.0 = (self.0.rotate_left(5) ^ word).wrapping_mul(0x517c_c1b7_2722_0a95);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    proptest::proptest! {
        /// ASCII text is trimmed as the standard library's `str::trim` trims it:
        /// any ASCII in the middle, and at either end white space, bytes that are
        /// not white space just below and above the space (the unit separator,
        /// `!`), NUL or a letter.
        #[test]
        fn ascii_is_trimmed_as_str_trim_trims(
            text in "[ \\t\\n\\x0b\\x0c\\r\\x00\\x1f!a]{0,3}[\\x00-\\x7f]{0,8}[ \\t\\n\\x0b\\x0c\\r\\x00\\x1f!a]{0,3}",
        ) {
            proptest::prop_assert_eq!(trim_ascii(text.as_bytes()), text.trim().as_bytes());
        }
    }

    /// More raw spellings of cells than the cache holds (the later ones carried by
    /// their records), with the first record of some cells a duplicate: the same
    /// tally, labels included, as record by record.
    #[test]
    fn past_the_cache_of_spellings_the_tally_is_the_same() {
        use crate::rows::MeasureRule;
        let layout = Layout {
            width: 3,
            cells: vec![0],
            measures: vec![MeasureRule {
                column: 1,
                yes: vec!["y".into()],
                no: vec!["n".into()],
            }],
            id: Some(2),
            weight: None,
            time: None,
        };
        let mut text = b"cell,q,id\n".to_vec();
        for i in 0..3 * CELL_CACHE {
            let cell = i % (CELL_CACHE + 500);
            let spelling = match i % 3 {
                0 => format!("c{cell}"),
                1 => format!("C{cell}"),
                _ => format!(" c{cell} "),
            };
            // Every 7th record repeats the id of the record before it.
            let id = if i % 7 == 6 { i - 1 } else { i };
            let answer = ["y", "n", "", "maybe"][i % 4];
            text.extend_from_slice(format!("{spelling},{answer},r{id}\n").as_bytes());
        }
        let (_, fast) =
            super::super::tally_csv(|_| Ok::<_, ()>(layout.clone()), &text[..], b',').unwrap();
        let mut slow = Tally::new(1);
        let mut reader = csv::ReaderBuilder::new().from_reader(&text[..]);
        for (i, record) in reader.byte_records().enumerate() {
            slow.add_record(&layout, &record.unwrap(), i as u64 + 2);
        }
        assert!(fast.cells.len() > CELL_CACHE);
        assert_eq!(fast, slow);
        for (a, b) in fast.cells.values().zip(slow.cells.values()) {
            assert_eq!(a.label, b.label);
        }
    }

    /// Cells and answers looked up by the run of bytes of their columns together
    /// count as the record-by-record path counts them: values drawn from a few
    /// spellings (so that runs repeat), with white space, case, unexpected and blank
    /// answers, runs of more than 32 bytes, quoted fields and text beyond ASCII (read
    /// without runs), columns listed out of order, and an unused column inside the
    /// measures' run.
    #[test]
    fn runs_of_columns_read_together_count_as_values_read_one_by_one() {
        use crate::rows::MeasureRule;
        let rule = |column: usize| MeasureRule {
            column,
            yes: vec!["y".into(), "yes".into()],
            no: vec!["n".into(), "no".into()],
        };
        // Columns: id, two of the cell, one unused, three answers.
        let layouts = [
            Layout {
                width: 7,
                cells: vec![2, 1],
                measures: vec![rule(6), rule(4), rule(5)],
                id: Some(0),
                weight: None,
                time: None,
            },
            // The unused column 5 lies inside the measures' run.
            Layout {
                width: 7,
                cells: vec![1],
                measures: vec![rule(4), rule(6)],
                id: Some(0),
                weight: None,
                time: None,
            },
        ];
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut pick = |choices: &[&'static str]| choices[rng.random_range(0..choices.len())];
        let mut text = b"id,a,b,x,q1,q2,q3\n".to_vec();
        for i in 0..30_000 {
            let id = if i % 11 == 10 { i - 3 } else { i };
            let a = pick(&[
                "north",
                "North",
                " north",
                "south",
                "south ",
                "\"south\"",
                "süd",
            ]);
            let b = pick(&["1", "2", "2 ", "33"]);
            let x = pick(&["", "x", "xy", "unused and long enough to pass 32 bytes"]);
            let answers = ["y", "n", "", " y", "Y", "maybe", "yes", "no ", "\"n\"", "ñ"];
            let long = "y                                   ";
            let q: Vec<&str> = (0..3)
                .map(|_| match i % 97 {
                    0 => long,
                    _ => pick(&answers),
                })
                .collect();
            let line = format!("r{id},{a},{b},{x},{},{},{}\n", q[0], q[1], q[2]);
            text.extend_from_slice(line.as_bytes());
        }
        for layout in &layouts {
            let (_, fast) =
                super::super::tally_csv(|_| Ok::<_, ()>(layout.clone()), &text[..], b',').unwrap();
            let mut slow = Tally::new(layout.measures.len());
            let mut reader = csv::ReaderBuilder::new().from_reader(&text[..]);
            for (i, record) in reader.byte_records().enumerate() {
                slow.add_record(layout, &record.unwrap(), i as u64 + 2);
            }
            assert!(fast.duplicates > 0 && fast.cells.len() >= 3);
            assert_eq!(fast, slow);
            for (a, b) in fast.cells.values().zip(slow.cells.values()) {
                assert_eq!(a.label, b.label);
            }
        }
    }

    /// A counter whose counting half runs beside (on its own thread) counts what one
    /// on the caller's thread counts: the same records (with duplicates, rejected
    /// and too-long ones), read in seeded pieces, with flushes at seeded moments
    /// (none for thousands of records, several in a row, after a single record):
    /// after every flush the two tallies are equal, labels included, and the tally
    /// beside is whole again.
    #[test]
    fn counting_beside_counts_as_counting_here() {
        use crate::follow::{Out, Reader};
        use crate::rows::MeasureRule;
        let layout = Layout {
            width: 4,
            cells: vec![1],
            measures: vec![MeasureRule {
                column: 2,
                yes: vec!["y".into()],
                no: vec!["n".into()],
            }],
            id: Some(0),
            weight: None,
            time: Some(3),
        };
        struct Both {
            here: Counter,
            beside: Counter,
            tallies: (Tally, Tally),
        }
        impl Out for Both {
            fn record(&mut self, line: u64, _: u64, fields: Fields<'_>, too_long: Option<u64>) {
                let (here, beside) = (&mut self.tallies.0, &mut self.tallies.1);
                match too_long {
                    Some(bytes) => {
                        self.here.add_too_long(here, line, bytes);
                        self.beside.add_too_long(beside, line, bytes);
                    }
                    None => {
                        self.here.add(here, fields, line);
                        self.beside.add(beside, fields, line);
                    }
                }
            }
        }
        let mut rng = ChaCha8Rng::seed_from_u64(13);
        let mut text = b"id,cell,q,at\n".to_vec();
        for i in 0..40_000u32 {
            let id = if i % 13 == 12 { i - 5 } else { i };
            let cell = ["north", "South", " east", "west"][rng.random_range(0..4)];
            let q = ["y", "n", "", "maybe", " y"][rng.random_range(0..5)];
            let at = match i % 101 {
                0 => "not a time".to_string(),
                _ => format!("2026-03-02T07:{:02}:{:02}Z", (i / 60) % 60, i % 60),
            };
            let line = match i % 997 {
                0 => format!("r{id},{cell},{q},{at},one field too many\n"),
                1 => format!("r{id},\"{}\",{q},{at}\n", "x".repeat(300)),
                _ => format!("r{id},{cell},{q},{at}\n"),
            };
            text.extend_from_slice(line.as_bytes());
        }
        let mut both = Both {
            here: Counter::new(&layout),
            beside: Counter::beside(&layout),
            tallies: (Tally::new(1), Tally::new(1)),
        };
        assert!(matches!(both.beside.counting, Half::Beside(_)));
        let mut reader = Reader::new(b',', 256);
        let mut warnings = Vec::new();
        let (mut at, mut flushes) = (0, 0);
        while at < text.len() {
            let piece = match rng.random_range(0..4) {
                0 => 1,
                1 => rng.random_range(1..200),
                _ => rng.random_range(1..60_000),
            };
            let end = (at + piece).min(text.len());
            // Bytes not taken (none here: no byte-order mark) would come again.
            at += reader.feed(&text[at..end], &mut both, &mut warnings);
            if at >= text.len() {
                reader.finish(&mut both, &mut warnings);
            }
            if rng.random_range(0..3) == 0 || at >= text.len() {
                for _ in 0..rng.random_range(1..3) {
                    both.here.flush(&mut both.tallies.0).unwrap();
                    both.beside.flush(&mut both.tallies.1).unwrap();
                }
                flushes += 1;
                let (here, beside) = &both.tallies;
                assert_eq!(here, beside);
                for (a, b) in here.cells.values().zip(beside.cells.values()) {
                    assert_eq!(a.label, b.label);
                }
            }
        }
        let (here, _) = &both.tallies;
        assert!(flushes > 20 && here.duplicates > 0 && here.rejected > 0);
        assert!(here.cells.values().map(|c| c.responses).sum::<u64>() > 30_000);
    }

    /// A run's key holds its bytes and its length, however its words are read: at
    /// the start, middle and end of a record, of every length up to 32, with bytes
    /// of 0 at either end; longer runs make no key.
    #[test]
    fn equal_run_keys_mean_equal_bytes() {
        let mut rng = ChaCha8Rng::seed_from_u64(12);
        let mut keys = Vec::new();
        for _ in 0..3_000 {
            let size = rng.random_range(0..60);
            let record: Vec<u8> = (0..size)
                .map(|_| [0u8, b'a', b'b'][rng.random_range(0..3)])
                .collect();
            let start = rng.random_range(0..=size);
            let end = rng.random_range(start..=size);
            match RunKey::of(&record, start, end) {
                Some(key) => keys.push((key, record[start..end].to_vec())),
                None => assert!(end - start > RunKey::MAX),
            }
        }
        for (a, bytes_a) in &keys {
            for (b, bytes_b) in &keys {
                assert_eq!(a == b, bytes_a == bytes_b, "{bytes_a:?} {bytes_b:?}");
            }
        }
    }

    /// Packing keeps every byte and the length (so equal numbers mean equal bytes),
    /// and refuses more than 15 bytes.
    #[test]
    fn packed_bytes_unpack_to_themselves() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        for len in 0..=16 {
            for _ in 0..50 {
                let bytes: Vec<u8> = (0..len).map(|_| rng.random()).collect();
                match pack(&bytes) {
                    Some(word) => {
                        assert_eq!(unpack(word), bytes);
                        // Byte by byte, as the layout says.
                        let plain = bytes
                            .iter()
                            .enumerate()
                            .fold((len as u128) << 120, |w, (i, &b)| {
                                w | u128::from(b) << (8 * i)
                            });
                        assert_eq!(word, plain);
                    }
                    None => assert_eq!(len, 16),
                }
            }
        }
        assert_ne!(pack(b""), pack(b"\0"));
        assert_ne!(pack(b"a"), pack(b"a\0"));
    }

    /// A time kept in an entry as (floor second, nanoseconds) parts comes back the
    /// same, before 1970 and after, with and without a fraction; parts, and the
    /// numbers made of them, sort as their times do (the counting half's first,
    /// latest and newest rely on it); an entry without a time is marked so.
    #[test]
    fn times_in_entries_come_back_the_same() {
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let mut times: Vec<Timestamp> = ["1969-12-31T23:59:59.5Z", "1970-01-01T00:00:00Z"]
            .iter()
            .map(|t| t.parse().unwrap())
            .collect();
        for _ in 0..2000 {
            let second = rng.random_range(-377_705_116_800i64..=253_402_207_999);
            let nanos = rng.random_range(-999_999_999..=999_999_999);
            if let Ok(t) = Timestamp::new(second, nanos) {
                times.push(t);
            }
        }
        // Times a fraction of a second apart, on both sides of 1970.
        for second in [-2i64, -1, 0, 1, 1_772_438_400] {
            for nanos in [
                -999_999_999,
                -500_000_000,
                -1,
                0,
                1,
                500_000_000,
                999_999_999,
            ] {
                times.extend(Timestamp::new(second, nanos).ok());
            }
        }
        for t in &times {
            let parts = Entry::parts_of(*t);
            assert!((0..1_000_000_000).contains(&parts.1), "{t}");
            assert_eq!(Entry::timestamp_of(parts), Some(*t), "{t}");
            let order = Entry::order_of(parts);
            assert_eq!(Entry::parts_of_order(order), parts, "{t}");
            assert!(order > i128::MIN && order < i128::MAX, "{t}");
        }
        for a in times.iter().rev().take(60) {
            for b in &times {
                let (pa, pb) = (Entry::parts_of(*a), Entry::parts_of(*b));
                assert_eq!(pa.cmp(&pb), a.cmp(b), "{a} {b}");
                assert_eq!(
                    Entry::order_of(pa).cmp(&Entry::order_of(pb)),
                    a.cmp(b),
                    "{a} {b}"
                );
            }
        }
        assert_eq!(Entry::at(2).nanos, NONE_NANOS);
    }

    #[test]
    fn times_in_the_usual_form_equal_jiffs_reading() {
        // Every hour of a few days across a month end and a leap day, every minute
        // and second pattern, and near-misses that jiff must decide.
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut clock = Clock::default();
        let mut texts = Vec::new();
        for day in [
            "2024-02-28",
            "2024-02-29",
            "2024-02-30",
            "2023-02-29",
            "2026-12-31",
            "2026-13-01",
            "0000-01-01",
            "9999-12-31",
        ] {
            for h in 0..26 {
                let (m, s) = (rng.random_range(0..62), rng.random_range(0..62));
                texts.push(format!("{day}T{h:02}:{m:02}:{s:02}Z"));
            }
        }
        texts.extend(
            [
                "2026-05-01t10:00:00Z",
                "2026-05-01T10:00:00z",
                "2026-05-01 10:00:00Z",
                "2026-05-01T10:00:60Z",
                "2026-05-01T10:00:00+02:00",
                "2026-05-01T10:00Z",
            ]
            .map(String::from),
        );
        for text in &texts {
            let want = text.parse::<Timestamp>().ok().map(Entry::parts_of);
            assert_eq!(time_parts(&mut clock, text.as_bytes()), want, "{text}");
        }
    }

    /// Times in the usual form and near it, one byte changed (to a digit, a
    /// separator, a letter, a byte beyond ASCII, anything), cut or lengthened, with
    /// fractions of every length, in hours next to each other and near the ends of
    /// `jiff`'s range, half of them in the minute of the time before (so that the
    /// last minute's shortcut meets them too): the parts are jiff's, and `None`
    /// where jiff refuses.
    #[test]
    fn times_one_byte_off_the_usual_form_equal_jiffs_reading() {
        let mut rng = ChaCha8Rng::seed_from_u64(12);
        let days = [
            "2026-03-02",
            "1969-12-31",
            "0000-01-01",
            "9999-12-30",
            "9999-12-31",
        ];
        let bytes = b"0123456789-T:.Z+ zt\x00\x7f\x80\xff/;";
        let mut clock = Clock::default();
        let (mut refused, mut same_minute) = (0, 0);
        let (mut day, mut h, mut m) = (days[0], 20, 0);
        for _ in 0..60_000 {
            if rng.random_range(0..2) == 0 {
                day = days[rng.random_range(0..days.len())];
                (h, m) = (rng.random_range(20..24), rng.random_range(0..60));
            }
            let s = rng.random_range(0..60);
            let digits = rng.random_range(0..=10);
            let fraction: String = (0..digits)
                .map(|_| char::from(b'0' + rng.random_range(0..10)))
                .collect();
            let dot = if digits > 0 { "." } else { "" };
            let mut text = format!("{day}T{h:02}:{m:02}:{s:02}{dot}{fraction}Z").into_bytes();
            match rng.random_range(0..4) {
                0 => {}
                1 | 2 => {
                    let i = rng.random_range(0..text.len());
                    text[i] = match rng.random_range(0..2) {
                        0 => bytes[rng.random_range(0..bytes.len())],
                        _ => rng.random(),
                    };
                }
                _ => {
                    let i = rng.random_range(0..=text.len());
                    match rng.random_range(0..2) {
                        0 if i < text.len() => {
                            text.remove(i);
                        }
                        _ => text.insert(i, bytes[rng.random_range(0..bytes.len())]),
                    }
                }
            }
            let want = std::str::from_utf8(&text)
                .ok()
                .and_then(|t| t.parse::<Timestamp>().ok())
                .map(Entry::parts_of);
            refused += usize::from(want.is_none());
            same_minute += usize::from(
                clock
                    .minute
                    .is_some_and(|(head, _)| text.get(..16) == Some(&head[..])),
            );
            assert_eq!(
                time_parts(&mut clock, &text),
                want,
                "{}",
                String::from_utf8_lossy(&text)
            );
        }
        // Both answers, and the last minute's shortcut, are common enough to be tested.
        assert!((10_000..50_000).contains(&refused), "{refused}");
        assert!(same_minute > 5_000, "{same_minute}");
    }
}
