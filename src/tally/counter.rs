//! The fast way to count many records: [`Counter`] gives exactly what
//! [`Tally::add_record`] gives record by record, without the per-record allocations.
//!
//! - A record whose every check passes is read in place: the cell is found from its
//!   raw values through a small cache (raw bytes → cell), answers are classified
//!   through a cache per measure (raw answer → yes / no / missing / unexpected), times
//!   in the usual `YYYY-MM-DDTHH:MM:SS[.f…]Z` form are computed from a cached start of their
//!   hour, and the id is hashed. Records then wait in batches of [`BATCH`]: the id
//!   set's slot of each waiting id is loaded first (so the memory fetches overlap),
//!   then the records are counted in file order. A cell's sums go to a staging copy of
//!   the cell (counts per measure and weight), merged into the tally by
//!   [`Counter::flush`] (exact sums, so the grouping does not change a bit).
//! - Anything else — a wrong field count, text that is not UTF-8, a bad weight or time
//!   — goes through [`Tally::add_record`] itself, so every rejection is the one the
//!   record-by-record path gives.
//!
//! Duplicates, rejections, unexpected values and the newest time go to the tally as
//! each record is counted, in file order (a record that goes record by record first
//! lets the waiting ones be counted), so the first-fifty lists and the
//! unexpected-value limit come out as in one pass.

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

use jiff::Timestamp;

use super::ids::id_hash;
use super::{Arrivals, CellKey, CellTally, Tally, max_option};
use crate::follow::Fields;
use crate::rows::{self, Answer, Layout};

/// Raw answers remembered per measure; later distinct values are classified each time.
const ANSWER_CACHE: usize = 32;
/// Raw cell spellings remembered; later ones are looked up by their normalised key.
const CELL_CACHE: usize = 4096;
/// Weight texts and distinct weights remembered.
const WEIGHT_CACHE: usize = 256;
/// Records read before they are counted together.
const BATCH: usize = 32;
/// The most columns a record may be read from in place (more go record by record).
const MAX_USED: usize = 24;

/// A cell being counted: its key and the sums since the last flush.
#[derive(Debug)]
struct Staged {
    key: CellKey,
    cell: CellTally,
    /// Per measure, per remembered weight: [yes, no] answers not yet in `cell`.
    counts: Vec<Vec<[u64; 2]>>,
    /// Arrivals in the current hour bucket not yet in `cell.arrivals`.
    run: Option<(i64, u64)>,
}

impl Staged {
    /// Move the counts per weight into the cell's sums.
    fn flush_counts(&mut self, weights: &[f64]) {
        for (measure, counts) in self.cell.measures.iter_mut().zip(&mut self.counts) {
            for (&w, [yes, no]) in weights.iter().zip(counts.iter_mut()) {
                measure.add_many(*yes, *no, w);
                (*yes, *no) = (0, 0);
            }
        }
    }

    fn flush_run(&mut self) {
        if let Some((hour, count)) = self.run.take() {
            *self.cell.arrivals.hours.entry(hour).or_insert(0) += count;
        }
    }
}

/// Counts records into a [`Tally`] (see the module notes). Call [`Counter::flush`]
/// before reading the tally: until then the sums of the cells are held here.
#[derive(Debug)]
pub struct Counter {
    layout: Layout,
    /// The columns the layout reads, sorted, each once (the order of the UTF-8 check).
    used: Vec<usize>,
    staged: Vec<Staged>,
    /// Raw cell values (joined) → (cell, spelling).
    by_raw: HashMap<Vec<u8>, (usize, Option<usize>), BuildHasherDefault<Mix>>,
    /// The raw spellings of cells in `by_raw`, trimmed: the label if it is the first
    /// counted in its cell.
    spellings: Vec<Vec<String>>,
    /// The spelling of the record being read, when `by_raw` is full.
    unlisted: Vec<String>,
    waiting_slots: Vec<Waiting>,
    waiting: usize,
    by_key: HashMap<CellKey, usize>,
    raw_key: Vec<u8>,
    slots: Slots,
    weights: Weights,
    answers: Vec<Vec<(u128, Answer)>>,
    /// The last hour prefix (`YYYY-MM-DDTHH`) and the second its hour starts at
    /// (`None` when that is not a valid time).
    hour: Option<([u8; 13], Option<i64>)>,
}

impl Counter {
    /// A counter for records read through `layout`.
    pub fn new(layout: &Layout) -> Counter {
        let used = layout.used_columns();
        let slot = |column: usize| used.iter().position(|&c| c == column).unwrap_or(0);
        let slots = Slots {
            cells: layout.cells.iter().map(|&c| slot(c)).collect(),
            measures: layout.measures.iter().map(|m| slot(m.column)).collect(),
            id: layout.id.map(slot),
            weight: layout.weight.map(slot),
            time: layout.time.map(slot),
        };
        Counter {
            slots,
            weights: Weights::default(),
            layout: layout.clone(),
            used,
            staged: Vec::new(),
            by_raw: HashMap::default(),
            spellings: Vec::new(),
            unlisted: Vec::new(),
            waiting_slots: vec![Waiting::default(); BATCH],
            waiting: 0,
            by_key: HashMap::new(),
            raw_key: Vec::new(),
            answers: vec![Vec::new(); layout.measures.len()],
            hour: None,
        }
    }

    /// The layout records are read through.
    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// Count one record (as [`Tally::add_record`] would) starting on `line`.
    pub fn add(&mut self, tally: &mut Tally, fields: Fields<'_>, line: u64) {
        if self.read_in_place(fields, line) {
            if self.waiting == BATCH {
                self.count_waiting(tally);
            }
        } else {
            // Records read in place wait in order; this one goes after them.
            self.count_waiting(tally);
            tally.add_record(&self.layout, &fields.to_byte_record(), line);
        }
    }

    /// Merge the staged sums into the tally. Exact: the tally then equals the one
    /// built record by record.
    pub fn flush(&mut self, tally: &mut Tally) {
        self.count_waiting(tally);
        for staged in &mut self.staged {
            if staged.cell.responses == 0 {
                continue;
            }
            staged.flush_run();
            staged.flush_counts(&self.weights.values);
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

    /// Read a record into the next waiting slot; false (with nothing kept) when it
    /// needs the record-by-record path. Touches nothing in the tally.
    fn read_in_place(&mut self, fields: Fields<'_>, line: u64) -> bool {
        if fields.len() != self.layout.width || self.used.len() > MAX_USED {
            return false;
        }
        // Every column the layout reads, checked as UTF-8 (in column order, as the
        // record-by-record path does) and trimmed as `str::trim` trims.
        let mut values: [&[u8]; MAX_USED] = [&[]; MAX_USED];
        for (value, &column) in values.iter_mut().zip(&self.used) {
            let Some(bytes) = fields.get(column) else {
                return false;
            };
            *value = if bytes.is_ascii() {
                trim_ascii(bytes)
            } else {
                match std::str::from_utf8(bytes) {
                    Ok(text) => text.trim().as_bytes(),
                    Err(_) => return false,
                }
            };
        }
        let slots = &self.slots;
        let value = |slot: usize| values.get(slot).copied().unwrap_or_default();
        let (weight, weight_index) = match slots.weight {
            None => (1.0, Some(0)),
            Some(slot) => match self.weights.get(value(slot)) {
                Some(w) => w,
                None => return false,
            },
        };
        let time = match slots.time.map(value) {
            None | Some(b"") => None,
            Some(raw) => match time_of(&mut self.hour, raw) {
                Some(t) => Some(t),
                None => return false,
            },
        };
        // The cell, from its raw values: (cell, spelling).
        self.raw_key.clear();
        for &slot in &slots.cells {
            self.raw_key.extend_from_slice(value(slot));
            self.raw_key.push(0xff); // never in UTF-8 text
        }
        let (cell, spelling) = match self.by_raw.get(self.raw_key.as_slice()) {
            Some(&found) => found,
            None => {
                let raw: Vec<&str> = slots
                    .cells
                    .iter()
                    .map(|&slot| std::str::from_utf8(value(slot)).unwrap_or_default())
                    .collect();
                let key = CellKey::of(&raw);
                let cell = match self.by_key.get(&key) {
                    Some(&i) => i,
                    None => {
                        self.staged.push(Staged {
                            key: key.clone(),
                            cell: CellTally::new(Vec::new(), self.layout.measures.len()),
                            counts: vec![Vec::new(); self.layout.measures.len()],
                            run: None,
                        });
                        self.by_key.insert(key, self.staged.len() - 1);
                        self.staged.len() - 1
                    }
                };
                let spelling: Vec<String> = raw.iter().map(|v| v.to_string()).collect();
                if self.by_raw.len() < CELL_CACHE {
                    self.spellings.push(spelling);
                    let found = (cell, Some(self.spellings.len() - 1));
                    self.by_raw.insert(self.raw_key.clone(), found);
                    found
                } else {
                    // The cache is full: this record carries its own spelling, so that
                    // nothing kept grows with the records.
                    self.unlisted = spelling;
                    (cell, None)
                }
            }
        };
        let Some(w) = self.waiting_slots.get_mut(self.waiting) else {
            return false; // unreachable: there are BATCH slots and `add` empties them
        };
        w.line = line;
        w.cell = cell;
        w.spelling = spelling;
        w.own_spelling = match spelling {
            Some(_) => Vec::new(),
            None => std::mem::take(&mut self.unlisted),
        };
        w.weight = weight;
        w.weight_index = weight_index;
        w.time = time;
        w.id_text.clear();
        w.id = match slots.id.map(value).filter(|raw| !raw.is_empty()) {
            Some(raw) => {
                w.id_text.extend_from_slice(raw);
                Some(id_hash(raw))
            }
            None => None,
        };
        w.answers.clear();
        w.unexpected.clear();
        for (m, (rule, &slot)) in self.layout.measures.iter().zip(&slots.measures).enumerate() {
            let raw = value(slot);
            let packed = pack(raw);
            let cache = &mut self.answers[m];
            let answer = match packed.and_then(|p| cache.iter().find(|(r, _)| *r == p)) {
                Some(&(_, a)) => a,
                None => {
                    let a = rule.classify(std::str::from_utf8(raw).unwrap_or_default());
                    if let Some(p) = packed
                        && cache.len() < ANSWER_CACHE
                    {
                        cache.push((p, a));
                    }
                    a
                }
            };
            if answer == Answer::Unexpected {
                w.unexpected
                    .push((m, std::str::from_utf8(raw).unwrap_or_default().to_string()));
            }
            w.answers.push(answer);
        }
        self.waiting += 1;
        true
    }

    /// Count the records waiting, in order: first load the id set's slot of every
    /// waiting id (independent loads, so the memory fetches overlap instead of
    /// waiting one after another), then decide each id and add each response.
    fn count_waiting(&mut self, tally: &mut Tally) {
        let waiting = self.waiting_slots.get(..self.waiting).unwrap_or_default();
        let mut warm = 0u128;
        for w in waiting {
            if let Some(hash) = w.id {
                warm ^= tally.ids.peek(hash);
            }
        }
        std::hint::black_box(warm);
        for w in waiting {
            tally.rows_read += 1;
            if let Some(hash) = w.id
                && !tally.ids.insert_hash(hash)
            {
                tally.note_duplicate(w.line, &w.id_text);
                continue;
            }
            let Some(staged) = self.staged.get_mut(w.cell) else {
                continue; // unreachable: cells index `staged`
            };
            if staged.cell.responses == 0 && staged.cell.label.is_empty() {
                // The cell's first counted response names it (if the tally has not).
                staged.cell.label = match tally.cells.get(&staged.key) {
                    Some(known) => known.label.clone(),
                    None => match w.spelling {
                        Some(i) => self.spellings.get(i).cloned().unwrap_or_default(),
                        None => w.own_spelling.clone(),
                    },
                };
            }
            staged.cell.responses += 1;
            for (m, &answer) in w.answers.iter().enumerate() {
                let counted = match (answer, w.weight_index) {
                    (Answer::Yes | Answer::No, Some(i)) => {
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
                    measure.add_unrounded(answer, w.weight);
                }
            }
            for (m, raw) in &w.unexpected {
                tally.note_unexpected(*m, raw);
            }
            match w.time {
                None => staged.cell.arrivals.untimed += 1,
                Some(t) => {
                    let hour = Arrivals::hour_of(t);
                    match &mut staged.run {
                        Some((h, count)) if *h == hour => *count += 1,
                        _ => {
                            staged.flush_run();
                            staged.run = Some((hour, 1));
                        }
                    }
                    let arrivals = &mut staged.cell.arrivals;
                    arrivals.first = Some(arrivals.first.map_or(t, |f| f.min(t)));
                    arrivals.latest = Some(arrivals.latest.map_or(t, |l| l.max(t)));
                    tally.newest = max_option(tally.newest, Some(t));
                }
            }
        }
        self.waiting = 0;
    }
}

/// A record read in place, waiting to be counted.
#[derive(Debug, Default, Clone)]
struct Waiting {
    line: u64,
    /// The id's hash, and its text (for the list of duplicates).
    id: Option<u128>,
    id_text: Vec<u8>,
    cell: usize,
    /// The raw spelling of its cell among `Counter::spellings`, or `None` with the
    /// spelling in `own_spelling` (when the cache of spellings is full).
    spelling: Option<usize>,
    own_spelling: Vec<String>,
    weight: f64,
    weight_index: Option<usize>,
    time: Option<Timestamp>,
    answers: Vec<Answer>,
    /// Unexpected answers: (measure, raw value).
    unexpected: Vec<(usize, String)>,
}

/// Surrounding white space removed from ASCII text, as `str::trim` removes it (which,
/// unlike `trim_ascii`, also removes the vertical tab).
fn trim_ascii(bytes: &[u8]) -> &[u8] {
    let space = |b: &u8| matches!(b, b' ' | b'\t' | b'\n' | b'\x0b' | b'\x0c' | b'\r');
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

/// Up to 15 bytes packed into one number (the bytes, then the length in the top
/// byte), so that equal numbers mean equal bytes; `None` for longer text.
fn pack(bytes: &[u8]) -> Option<u128> {
    if bytes.len() > 15 {
        return None;
    }
    // Shifted in byte by byte: copying into an array and reading it back as one
    // number stalls the processor (a wide load right after narrow stores).
    let mut word = (bytes.len() as u128) << 120;
    for (i, &b) in bytes.iter().enumerate() {
        word |= u128::from(b) << (8 * i);
    }
    Some(word)
}

/// The weights read so far, by their trimmed text (a weight is a pure function of its
/// text, so remembering it changes nothing), each distinct value with an index for
/// the counts per weight. Index 0 is the weight 1 (every response without a weight
/// column).
#[derive(Debug)]
struct Weights {
    by_text: HashMap<u128, (f64, Option<usize>), BuildHasherDefault<Mix>>,
    by_value: HashMap<u64, usize, BuildHasherDefault<Mix>>,
    values: Vec<f64>,
}

impl Default for Weights {
    fn default() -> Weights {
        Weights {
            by_text: HashMap::default(),
            by_value: HashMap::from_iter([(1f64.to_bits(), 0)]),
            values: vec![1.0],
        }
    }
}

impl Weights {
    /// The weight the text gives and its index (`None` for a weight counted one by
    /// one), or `None` when it is not a valid weight.
    fn get(&mut self, raw: &[u8]) -> Option<(f64, Option<usize>)> {
        let packed = pack(raw);
        if let Some(&known) = packed.and_then(|p| self.by_text.get(&p)) {
            return Some(known);
        }
        let w = rows::parse_weight(std::str::from_utf8(raw).ok()?).ok()?;
        let index = match self.by_value.get(&w.to_bits()) {
            Some(&i) => Some(i),
            None if crate::tally::repeats_exactly(w) && self.values.len() < WEIGHT_CACHE => {
                self.values.push(w);
                self.by_value.insert(w.to_bits(), self.values.len() - 1);
                Some(self.values.len() - 1)
            }
            None => None,
        };
        if let Some(p) = packed
            && self.by_text.len() < WEIGHT_CACHE
        {
            self.by_text.insert(p, (w, index));
        }
        Some((w, index))
    }
}

/// The time in `raw` (trimmed, not blank) as `jiff` parses it, or `None` when it is
/// not a valid time. The usual form `YYYY-MM-DDTHH:MM:SS[.f…]Z` (hours 00–23, minutes
/// and seconds 00–59, one to nine digits of fraction) is computed from the start of
/// its hour, which `jiff` parses once per hour (so a date `jiff` refuses is refused
/// here too); any other form goes to `jiff` whole.
fn time_of(hour: &mut Option<([u8; 13], Option<i64>)>, raw: &[u8]) -> Option<Timestamp> {
    if let Some((prefix, within, nanos)) = usual_form(raw) {
        let start = match hour {
            Some((p, start)) if *p == prefix => *start,
            _ => {
                let mut text = prefix.to_vec();
                text.extend_from_slice(b":00:00Z");
                let start = std::str::from_utf8(&text)
                    .ok()
                    .and_then(|t| t.parse::<Timestamp>().ok())
                    .map(|t| t.as_second());
                *hour = Some((prefix, start));
                start
            }
        };
        return start.and_then(|s| Timestamp::new(s + within, nanos).ok());
    }
    std::str::from_utf8(raw).ok()?.parse::<Timestamp>().ok()
}

/// `YYYY-MM-DDTHH:MM:SS[.f…]Z` split into the hour prefix, the seconds within the hour
/// and the nanoseconds, when `b` has exactly that form with HH ≤ 23, MM ≤ 59, SS ≤ 59
/// and one to nine digits after a `.`.
fn usual_form(b: &[u8]) -> Option<([u8; 13], i64, i32)> {
    if b.len() < 20 || b.len() == 21 || b.len() > 30 || b.last() != Some(&b'Z') {
        return None;
    }
    let digits = [0, 1, 2, 3, 5, 6, 8, 9, 11, 12, 14, 15, 17, 18];
    if !digits.iter().all(|&i| b[i].is_ascii_digit())
        || (b[4], b[7], b[10], b[13], b[16]) != (b'-', b'-', b'T', b':', b':')
    {
        return None;
    }
    let fraction = &b[19..b.len() - 1];
    let nanos = match fraction.split_first() {
        None => 0,
        Some((b'.', ds)) if ds.iter().all(u8::is_ascii_digit) => {
            let mut n: i32 = 0;
            for i in 0..9 {
                n = n * 10 + ds.get(i).map_or(0, |d| i32::from(d - b'0'));
            }
            n
        }
        _ => return None,
    };
    let two = |i: usize| i64::from(b[i] - b'0') * 10 + i64::from(b[i + 1] - b'0');
    let (hh, mm, ss) = (two(11), two(14), two(17));
    if hh > 23 || mm > 59 || ss > 59 {
        return None;
    }
    let mut prefix = [0u8; 13];
    prefix.copy_from_slice(&b[..13]);
    Some((prefix, mm * 60 + ss, nanos))
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

    #[test]
    fn times_in_the_usual_form_equal_jiffs_reading() {
        // Every hour of a few days across a month end and a leap day, every minute
        // and second pattern, and near-misses that jiff must decide.
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut hour = None;
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
            let want = text.parse::<Timestamp>().ok();
            assert_eq!(time_of(&mut hour, text.as_bytes()), want, "{text}");
        }
    }
}
