//! Running sums per cell and measure, built from responses one at a time, with
//! duplicate ids removed; and the batch read of a whole CSV for `closeout status`.
//! Knows nothing of files (it reads any `std::io::Read`) or terminals.
//!
//! # Exact and mergeable
//!
//! Every accumulator here has `add` and `merge`. Counts are integers, and the weighted
//! sums Σw, Σw², Σwy are kept *exactly* (as a list of non-overlapping partial sums,
//! Shewchuk's method, the one behind Python's `math.fsum`) and rounded once when
//! read. So a sum does not depend on the order its terms arrived in, and a tally
//! built in pieces equals the one-pass tally bit for bit, weights included.
//!
//! A [`Tally`] is merged with the tally of the records that *follow* it, built with
//! [`Tally::continuing`]. The follower starts from what its predecessor has seen (the
//! ids, and the unexpected values given an entry of their own), so each follower
//! decides duplicates and the unexpected-value limit exactly as a single pass would,
//! and [`Tally::merge`] only adds. `merge` refuses a tally that does not begin
//! exactly where this one ends. See [`Tally::continuing`] for the patterns this
//! allows.

use std::collections::{BTreeMap, BTreeSet};
use std::io::Read;
use std::sync::atomic::{AtomicU64, Ordering};

use jiff::Timestamp;

use crate::bounds::WeightSums;
use crate::rows::{self, Answer, Layout, Rejection, Response};

mod counter;
mod ids;
mod pipe;

pub use counter::{Counter, CountingStopped};
use ids::IdSet;

/// Rejections and duplicates listed in full (the rest are counted).
pub const LISTED: usize = 50;

/// Distinct unexpected values given their own entry, per measure; later distinct
/// values are counted under [`OTHER_VALUES`].
pub const UNEXPECTED_LIMIT: usize = 100;

/// The entry under which unexpected values beyond the first [`UNEXPECTED_LIMIT`]
/// distinct ones are counted. (An answer that is literally "(other)" is counted
/// there too.)
pub const OTHER_VALUES: &str = "(other)";

/// A cell: its values normalised with [`rows::normalise`], in the `cells.by` order.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct CellKey(pub Vec<String>);

impl CellKey {
    /// The key of a response's raw cell values.
    pub fn of(raw: &[&str]) -> CellKey {
        CellKey(raw.iter().map(|v| rows::normalise(v)).collect())
    }
}

/// The running sums of one measure in one cell.
///
/// `n` counts yes and no answers, whatever their weight: a response with weight 0
/// is in `n` (and `successes` if yes) but adds nothing to the weighted sums.
/// Blank answers are `missing`, other answers `unexpected`; neither is in `n` or in
/// the weighted sums.
#[derive(Clone, Debug, Default)]
pub struct MeasureTally {
    /// Yes and no answers.
    pub n: u64,
    /// Yes answers.
    pub successes: u64,
    /// Blank answers.
    pub missing: u64,
    /// Answers that are neither yes nor no.
    pub unexpected: u64,
    /// Σw, Σw², Σwy over the yes and no answers (y = 1 for yes), each the exact sum
    /// rounded once to the nearest f64. Kept up to date by `add` and `merge`, which
    /// overwrite it; read it, do not write it.
    pub weights: WeightSums,
    exact: [ExactSum; 3],
}

impl PartialEq for MeasureTally {
    /// Equal counts and equal weighted sums (the exact sums' partials may be held
    /// differently for the same total).
    fn eq(&self, other: &MeasureTally) -> bool {
        self.n == other.n
            && self.successes == other.successes
            && self.missing == other.missing
            && self.unexpected == other.unexpected
            && self.weights == other.weights
    }
}

impl MeasureTally {
    /// Count one answer with its weight. The weight is expected finite and 0 or more
    /// (as [`rows::read_record`] guarantees); anything else makes the weighted sums
    /// meaningless (infinite or NaN) but never panics.
    pub fn add(&mut self, answer: Answer, weight: f64) {
        match answer {
            Answer::Yes | Answer::No => {
                let yes = answer == Answer::Yes;
                self.n += 1;
                self.exact[0].add(weight);
                self.exact[1].add(weight * weight);
                if yes {
                    self.successes += 1;
                    self.exact[2].add(weight);
                }
                self.round();
            }
            Answer::Missing => self.missing += 1,
            Answer::Unexpected => self.unexpected += 1,
        }
    }

    /// `yes` yes answers and `no` no answers, each of weight `weight`, without
    /// bringing `weights` up to date (call `round`). Exactly what adding them one by
    /// one gives, for a weight of 0 or between 2⁻⁴⁰⁰ and 2⁴⁰⁰ (see [`repeat_exactly`]).
    fn add_many(&mut self, yes: u64, no: u64, weight: f64) {
        let count = yes + no;
        if count == 0 {
            return;
        }
        self.n += count;
        self.successes += yes;
        for (sum, (times, term)) in
            self.exact
                .iter_mut()
                .zip([(count, weight), (count, weight * weight), (yes, weight)])
        {
            let (hi, lo) = repeat_exactly(times, term);
            sum.add(hi);
            sum.add(lo);
        }
    }

    /// [`MeasureTally::add`] without bringing `weights` up to date (call `round`).
    fn add_unrounded(&mut self, answer: Answer, weight: f64) {
        match answer {
            Answer::Yes | Answer::No => {
                self.n += 1;
                self.exact[0].add(weight);
                self.exact[1].add(weight * weight);
                if answer == Answer::Yes {
                    self.successes += 1;
                    self.exact[2].add(weight);
                }
            }
            Answer::Missing => self.missing += 1,
            Answer::Unexpected => self.unexpected += 1,
        }
    }

    /// Add another tally of the same measure. Exact, and the order does not matter.
    pub fn merge(&mut self, other: &MeasureTally) {
        self.n += other.n;
        self.successes += other.successes;
        self.missing += other.missing;
        self.unexpected += other.unexpected;
        for (mine, theirs) in self.exact.iter_mut().zip(&other.exact) {
            mine.merge(theirs);
        }
        self.round();
    }

    fn round(&mut self) {
        self.weights = WeightSums {
            sum_w: self.exact[0].value(),
            sum_w2: self.exact[1].value(),
            sum_wy: self.exact[2].value(),
        };
    }
}

/// Whether [`repeat_exactly`] is exact for a term: 0, or between 2⁻⁴⁰⁰ and 2⁴⁰⁰ (so
/// that the term, its square and their products with a count below 2⁵³ stay far from
/// underflow and overflow).
pub(crate) fn repeats_exactly(term: f64) -> bool {
    term == 0.0
        || (term.abs() >= f64::from_bits(623 << 52) && term.abs() <= f64::from_bits(1423 << 52))
}

/// `times × term` as two floats whose exact sum it is (the product rounded, and its
/// rounding error by a fused multiply-add; Dekker 1971, "A floating-point technique
/// for extending the available precision"). Exact when `times < 2⁵³` and
/// [`repeats_exactly`] holds for the term.
fn repeat_exactly(times: u64, term: f64) -> (f64, f64) {
    let c = times as f64;
    let hi = c * term;
    (hi, c.mul_add(term, -hi))
}

/// A sum of f64 terms held exactly, as non-overlapping partial sums in increasing
/// magnitude (Shewchuk 1997, "Adaptive precision floating-point arithmetic and fast
/// robust geometric predicates"; the algorithm of Python's `math.fsum`). [`value`]
/// is the exact sum correctly rounded, so it does not depend on the order of the
/// terms. A sum beyond the largest f64 is infinite.
///
/// [`value`]: ExactSum::value
#[derive(Clone, Debug, Default)]
struct ExactSum {
    partials: Vec<f64>,
    /// The sum of infinite or NaN terms, and +∞ after an overflow; 0 otherwise.
    special: f64,
}

impl ExactSum {
    fn add(&mut self, term: f64) {
        if !term.is_finite() {
            self.special += term;
            return;
        }
        let mut x = term;
        let mut kept = 0;
        for j in 0..self.partials.len() {
            let mut y = self.partials[j];
            if x.abs() < y.abs() {
                std::mem::swap(&mut x, &mut y);
            }
            let hi = x + y;
            let lo = y - (hi - x);
            if lo != 0.0 {
                self.partials[kept] = lo;
                kept += 1;
            }
            x = hi;
        }
        self.partials.truncate(kept);
        if !x.is_finite() {
            // Two finite partials overflowed: the sum is beyond the largest f64.
            self.special += x;
            self.partials.clear();
        } else if x != 0.0 {
            self.partials.push(x);
        }
    }

    fn merge(&mut self, other: &ExactSum) {
        self.special += other.special;
        for &p in &other.partials {
            self.add(p);
        }
    }

    /// The exact sum rounded to the nearest f64 (ties to even), as `math.fsum` does.
    fn value(&self) -> f64 {
        if self.special != 0.0 || self.special.is_nan() {
            return self.special;
        }
        let p = &self.partials;
        let Some(mut n) = p.len().checked_sub(1) else {
            return 0.0;
        };
        let mut hi = p[n];
        let mut lo = 0.0;
        while n > 0 {
            let x = hi;
            n -= 1;
            let y = p[n];
            hi = x + y;
            lo = y - (hi - x);
            if lo != 0.0 {
                break;
            }
        }
        // Round half to even across partials: when the rest has the sign of `lo`,
        // the exact sum is beyond the half-way point.
        if n > 0 && ((lo < 0.0 && p[n - 1] < 0.0) || (lo > 0.0 && p[n - 1] > 0.0)) {
            let y = lo * 2.0;
            let x = hi + y;
            if x - hi == y {
                hi = x;
            }
        }
        hi
    }
}

/// When a cell's responses arrived, from the time column: a count per hour (hours
/// since the Unix epoch, UTC), the first and latest time, and the responses without
/// a time. One entry per hour with arrivals, never one per response. Without a time
/// column every response is untimed and the caller measures rate by the wall clock.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Arrivals {
    hours: BTreeMap<i64, u64>,
    first: Option<Timestamp>,
    latest: Option<Timestamp>,
    untimed: u64,
}

impl Arrivals {
    /// The width of a bucket, in seconds.
    pub const BUCKET_SECONDS: i64 = 3600;

    /// The bucket (hour since the Unix epoch, rounded down) that holds `t`.
    pub fn hour_of(t: Timestamp) -> i64 {
        Self::hour_of_second(Self::second_of(t))
    }

    /// The bucket that holds the whole second `second` (see [`Arrivals::second_of`]).
    pub(crate) fn hour_of_second(second: i64) -> i64 {
        second.div_euclid(Self::BUCKET_SECONDS)
    }

    /// The whole second `t` falls in (the floor, also before 1970).
    pub(crate) fn second_of(t: Timestamp) -> i64 {
        let second = t.as_second();
        // `as_second` truncates toward zero; step back for a fraction before 1970.
        if t.subsec_nanosecond() < 0 {
            second - 1
        } else {
            second
        }
    }

    /// Count one arrival.
    pub fn add(&mut self, time: Option<Timestamp>) {
        let Some(t) = time else {
            self.untimed += 1;
            return;
        };
        *self.hours.entry(Self::hour_of(t)).or_insert(0) += 1;
        self.first = Some(self.first.map_or(t, |f| f.min(t)));
        self.latest = Some(self.latest.map_or(t, |l| l.max(t)));
    }

    pub fn merge(&mut self, other: &Arrivals) {
        for (&hour, &count) in &other.hours {
            *self.hours.entry(hour).or_insert(0) += count;
        }
        self.first = min_option(self.first, other.first);
        self.latest = max_option(self.latest, other.latest);
        self.untimed += other.untimed;
    }

    /// Arrivals in the hour that holds `t` and every later hour. Exact when `t` is on
    /// the hour; otherwise it includes the arrivals of that hour before `t` (at most
    /// one hour's worth too many).
    pub fn count_since(&self, t: Timestamp) -> u64 {
        self.hours.range(Self::hour_of(t)..).map(|(_, c)| c).sum()
    }

    /// The latest arrival time seen.
    pub fn latest(&self) -> Option<Timestamp> {
        self.latest
    }

    /// The earliest arrival time seen (not necessarily the first in the file).
    pub fn first(&self) -> Option<Timestamp> {
        self.first
    }

    /// Responses with a time.
    pub fn timed(&self) -> u64 {
        self.hours.values().sum()
    }

    /// Responses without a time (blank, or no time column).
    pub fn untimed(&self) -> u64 {
        self.untimed
    }

    /// The counts per hour, oldest first: (hour since the Unix epoch, arrivals).
    pub fn hours(&self) -> impl Iterator<Item = (i64, u64)> + '_ {
        self.hours.iter().map(|(&h, &c)| (h, c))
    }
}

fn min_option(a: Option<Timestamp>, b: Option<Timestamp>) -> Option<Timestamp> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.min(b)),
        (a, b) => a.or(b),
    }
}

fn max_option(a: Option<Timestamp>, b: Option<Timestamp>) -> Option<Timestamp> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.max(b)),
        (a, b) => a.or(b),
    }
}

/// The running sums of one cell.
#[derive(Clone, Debug, PartialEq)]
pub struct CellTally {
    /// The cell's values as the first counted response spelled them (trimmed).
    pub label: Vec<String>,
    /// Responses counted in the cell (not rejected, not duplicates).
    pub responses: u64,
    /// One per measure, in the study's order.
    pub measures: Vec<MeasureTally>,
    pub arrivals: Arrivals,
}

impl CellTally {
    pub fn new(label: Vec<String>, measure_count: usize) -> CellTally {
        CellTally {
            label,
            responses: 0,
            measures: vec![MeasureTally::default(); measure_count],
            arrivals: Arrivals::default(),
        }
    }

    /// Count one response (its cell is not checked). Answers beyond the cell's
    /// measures are ignored.
    pub fn add(&mut self, response: &Response) {
        self.responses += 1;
        for (measure, &(answer, _)) in self.measures.iter_mut().zip(&response.answers) {
            measure.add(answer, response.weight);
        }
        self.arrivals.add(response.time);
    }

    /// Add the tally of the same cell from later records: this cell's label stays.
    pub fn merge(&mut self, other: &CellTally) {
        self.responses += other.responses;
        for (mine, theirs) in self.measures.iter_mut().zip(&other.measures) {
            mine.merge(theirs);
        }
        if other.measures.len() > self.measures.len() {
            self.measures
                .extend_from_slice(&other.measures[self.measures.len()..]);
        }
        self.arrivals.merge(&other.arrivals);
    }
}

/// Where a tally sits in a stream of records: which stream, and how many records of
/// it came before its own.
#[derive(Clone, Copy, Debug)]
struct Place {
    stream: u64,
    start: u64,
}

static STREAMS: AtomicU64 = AtomicU64::new(0);

/// Why [`Tally::merge`] refused.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum MergeError {
    #[error(
        "the tally to merge does not continue this one: build it with Tally::continuing from this tally or its latest follower"
    )]
    NotContinuing,
    #[error(
        "the tally to merge begins after record {begins}, but this one ends after record {ends}: merge followers in the order of their records"
    )]
    OutOfOrder { begins: u64, ends: u64 },
}

/// The running sums of a stream of records: per cell and measure, with duplicate
/// ids removed, rejections counted and the first few listed.
///
/// Memory: per cell and measure a few numbers (and one entry per hour with
/// arrivals); the ids as a compact set of 128-bit hashes; at most [`LISTED`]
/// rejections and duplicates and [`UNEXPECTED_LIMIT`] + 1 unexpected values per
/// measure. Nothing is kept per record.
#[derive(Clone, Debug)]
pub struct Tally {
    pub cells: BTreeMap<CellKey, CellTally>,
    /// Every record offered (after the header), including rejected and duplicate ones:
    /// `rows_read = rejected + duplicates + Σ cells' responses`.
    pub rows_read: u64,
    pub rejected: u64,
    /// The first [`LISTED`] rejections, in file order.
    pub first_rejections: Vec<Rejection>,
    /// Responses whose id was already counted; the first one in file order wins.
    pub duplicates: u64,
    /// The first [`LISTED`] duplicates: (line, id with invalid UTF-8 replaced).
    pub first_duplicates: Vec<(u64, String)>,
    /// Per measure: unexpected answers by normalised value; after
    /// [`UNEXPECTED_LIMIT`] distinct values, further new ones under [`OTHER_VALUES`].
    pub unexpected_values: Vec<BTreeMap<String, u64>>,
    pub measure_count: usize,
    /// The latest arrival time among the counted responses.
    pub newest: Option<Timestamp>,
    ids: IdSet,
    /// Per measure, the unexpected values with their own entry so far in the stream
    /// (this tally's and its predecessors').
    named: Vec<BTreeSet<String>>,
    place: Place,
}

impl PartialEq for Tally {
    /// Equal sums, counts, lists and seen ids; where in which stream a tally sits
    /// does not matter.
    fn eq(&self, other: &Tally) -> bool {
        self.cells == other.cells
            && self.rows_read == other.rows_read
            && self.rejected == other.rejected
            && self.first_rejections == other.first_rejections
            && self.duplicates == other.duplicates
            && self.first_duplicates == other.first_duplicates
            && self.unexpected_values == other.unexpected_values
            && self.measure_count == other.measure_count
            && self.newest == other.newest
            && self.ids == other.ids
            && self.named == other.named
    }
}

impl Tally {
    /// An empty tally at the start of a new stream of records.
    pub fn new(measure_count: usize) -> Tally {
        Tally {
            cells: BTreeMap::new(),
            rows_read: 0,
            rejected: 0,
            first_rejections: Vec::new(),
            duplicates: 0,
            first_duplicates: Vec::new(),
            unexpected_values: vec![BTreeMap::new(); measure_count],
            measure_count,
            newest: None,
            ids: IdSet::default(),
            named: vec![BTreeSet::new(); measure_count],
            place: Place {
                stream: STREAMS.fetch_add(1, Ordering::Relaxed),
                start: 0,
            },
        }
    }

    /// An empty tally for the records that follow this one's. It starts with what
    /// this tally has seen — the ids and the unexpected values with their own entry
    /// (a copy: memory and time in proportion to the distinct ids) — so it counts
    /// exactly what a single pass would count for those records, and
    /// `self.merge(follower)` then gives the single-pass tally, bit for bit.
    ///
    /// Feed no more records to `self` until the follower is merged (`merge` refuses it
    /// otherwise). A follower may itself be continued, so a collector can keep only
    /// its latest tally, send each one away and continue from it:
    ///
    /// ```
    /// # use closeout::tally::Tally;
    /// let mut total = Tally::new(1);          // the main thread's
    /// let mut batch = total.continuing();     // the collector's
    /// // … the collector adds a batch of records to `batch`, then:
    /// let next = batch.continuing();
    /// total.merge(batch).unwrap();            // on the main thread, in order
    /// # let _ = next;
    /// ```
    pub fn continuing(&self) -> Tally {
        Tally {
            cells: BTreeMap::new(),
            rows_read: 0,
            rejected: 0,
            first_rejections: Vec::new(),
            duplicates: 0,
            first_duplicates: Vec::new(),
            unexpected_values: vec![BTreeMap::new(); self.measure_count],
            measure_count: self.measure_count,
            newest: None,
            ids: self.ids.clone(),
            named: self.named.clone(),
            place: Place {
                stream: self.place.stream,
                start: self.end(),
            },
        }
    }

    /// Records of the stream up to and including this tally's.
    fn end(&self) -> u64 {
        self.place.start + self.rows_read
    }

    /// Add the tally of the records that come next, built with [`Tally::continuing`]
    /// from this tally (or from a follower of it already merged here). Exact: the
    /// result equals the tally of all the records in one pass.
    pub fn merge(&mut self, later: Tally) -> Result<(), MergeError> {
        if later.place.stream != self.place.stream || later.measure_count != self.measure_count {
            return Err(MergeError::NotContinuing);
        }
        if later.place.start != self.end() {
            return Err(MergeError::OutOfOrder {
                begins: later.place.start,
                ends: self.end(),
            });
        }
        for (key, cell) in later.cells {
            match self.cells.get_mut(&key) {
                Some(mine) => mine.merge(&cell),
                None => {
                    self.cells.insert(key, cell);
                }
            }
        }
        self.rows_read += later.rows_read;
        self.rejected += later.rejected;
        self.duplicates += later.duplicates;
        let room = LISTED.saturating_sub(self.first_rejections.len());
        self.first_rejections
            .extend(later.first_rejections.into_iter().take(room));
        let room = LISTED.saturating_sub(self.first_duplicates.len());
        self.first_duplicates
            .extend(later.first_duplicates.into_iter().take(room));
        for (mine, theirs) in self
            .unexpected_values
            .iter_mut()
            .zip(later.unexpected_values)
        {
            for (value, count) in theirs {
                *mine.entry(value).or_insert(0) += count;
            }
        }
        self.newest = max_option(self.newest, later.newest);
        // The follower started from this tally's ids and names: its sets hold both.
        self.ids = later.ids;
        self.named = later.named;
        Ok(())
    }

    /// Read one record and count it: as a response, a duplicate or a rejection.
    pub fn add_record(&mut self, layout: &Layout, record: &csv::ByteRecord, line: u64) {
        match rows::read_record(layout, record, line) {
            Ok(response) => self.add(&response, line),
            Err(rejection) => self.reject(rejection),
        }
    }

    /// Count a record that could not be read.
    pub fn reject(&mut self, rejection: Rejection) {
        self.rows_read += 1;
        self.rejected += 1;
        if self.first_rejections.len() < LISTED {
            self.first_rejections.push(rejection);
        }
    }

    /// Count one response read from the record starting on `line`. A response whose
    /// id was already counted is a duplicate: counted and listed, not tallied (the
    /// first in file order wins; a rejected record claims no id).
    pub fn add(&mut self, response: &Response, line: u64) {
        self.rows_read += 1;
        if let Some(id) = response.id
            && !self.ids.insert(id)
        {
            self.note_duplicate(line, id);
            return;
        }
        let key = CellKey::of(&response.cell);
        let measure_count = self.measure_count;
        self.cells
            .entry(key)
            .or_insert_with(|| {
                CellTally::new(
                    response.cell.iter().map(|v| v.to_string()).collect(),
                    measure_count,
                )
            })
            .add(response);
        for (m, &(answer, raw)) in response.answers.iter().enumerate() {
            if answer == Answer::Unexpected {
                self.note_unexpected(m, raw);
            }
        }
        if response.time.is_some() {
            self.newest = max_option(self.newest, response.time);
        }
    }

    fn note_duplicate(&mut self, line: u64, id: &[u8]) {
        self.duplicates += 1;
        if self.first_duplicates.len() < LISTED {
            self.first_duplicates
                .push((line, String::from_utf8_lossy(id).into_owned()));
        }
    }

    /// Count an unexpected answer; the value it is counted under (its normalised
    /// form, or [`OTHER_VALUES`] once [`UNEXPECTED_LIMIT`] values are named). A raw
    /// answer is counted under the same value every time after its first: a value
    /// named stays named, and once the limit is reached no value is named again.
    fn note_unexpected(&mut self, measure: usize, raw: &str) -> Option<String> {
        let named = self.named.get_mut(measure)?;
        let value = rows::normalise(raw);
        let key = if named.contains(&value) {
            value
        } else if named.len() < UNEXPECTED_LIMIT {
            named.insert(value.clone());
            value
        } else {
            OTHER_VALUES.to_string()
        };
        self.add_unexpected(measure, &key, 1);
        Some(key)
    }

    /// Count `count` more unexpected answers under `key`, a value
    /// [`Tally::note_unexpected`] has returned.
    fn add_unexpected(&mut self, measure: usize, key: &str, count: u64) {
        if let Some(counts) = self.unexpected_values.get_mut(measure) {
            match counts.get_mut(key) {
                Some(n) => *n += count,
                None => {
                    counts.insert(key.to_string(), count);
                }
            }
        }
    }

    /// Make room for about `ids` distinct ids in all, at once (an estimate: the room
    /// is taken whether or not they come). Changes nothing but memory and speed.
    pub fn reserve_ids(&mut self, ids: usize) {
        self.ids.reserve(ids);
    }

    /// Make room for the ids of a whole input of `total` bytes, judging by the
    /// distinct ids in its first `read` bytes (nothing when there are none yet), with
    /// 1/16 to spare: a table sized to the estimate exactly would grow (copying every
    /// shard) just before the end whenever the estimate is a little short.
    pub fn reserve_ids_for(&mut self, read: u64, total: u64) {
        let seen = self.ids.len();
        if seen > 0 && read > 0 && total > read {
            let expected = seen as f64 * total as f64 / read as f64 * (17.0 / 16.0);
            self.ids
                .reserve(expected.min(usize::MAX as f64 / 2.0) as usize);
        }
    }

    /// Distinct ids counted so far in the stream (this tally's and its predecessors').
    pub fn distinct_ids(&self) -> usize {
        self.ids.len()
    }

    /// Responses counted in every cell.
    pub fn responses(&self) -> u64 {
        self.cells.values().map(|c| c.responses).sum()
    }
}

/// Why a batch read of a CSV failed. Bad records are never an error: they are
/// counted in the tally.
#[derive(Debug, thiserror::Error)]
pub enum TallyError<E> {
    #[error("cannot read the responses: {0}")]
    Io(String),
    #[error("the responses file is empty: expected a header line naming the columns")]
    NoHeader,
    #[error("column {column} of the header is not valid UTF-8 text: save the file as UTF-8")]
    HeaderNotUtf8 { column: usize },
    /// The header does not fit the study (from the caller's `layout_for`).
    #[error("{0}")]
    Layout(E),
}

/// Tally a whole CSV (header first) in one pass, for `closeout status`.
///
/// The records come from the same push reader the follower uses
/// ([`crate::follow`]), so a one-shot read and a follower that has caught up count
/// exactly the same records, with the same line numbers: a UTF-8 byte-order mark at
/// the start is dropped; records may end in LF or CRLF; quoted fields may hold the
/// delimiter and line breaks; blank lines and NUL runs between records are skipped; a
/// record identical to the header (two exports concatenated) is skipped; a record
/// longer than [`crate::follow::RECORD_LIMIT`] is rejected as too long. The one
/// difference is the end: here the input is finished, so a last record without a
/// line end counts, where a follower holds it back until its line end is written.
/// `layout_for` resolves the study's columns against the header (the names as
/// written). Returns the header and the tally.
pub fn tally_csv<R: Read, E>(
    layout_for: impl FnOnce(&[&str]) -> Result<Layout, E>,
    reader: R,
    delimiter: u8,
) -> Result<(Vec<String>, Tally), TallyError<E>> {
    tally_csv_sized(layout_for, reader, delimiter, None)
}

/// [`tally_csv`] of input whose size is known (`size` bytes, such as a file's), so
/// that the id set can be given its room once the first block shows how many ids a
/// byte holds, instead of growing step by step. The result is the same.
///
/// Three threads share the work (see the `pipe` module): the calling thread reads
/// the bytes and splits the records, it and a helper read the records, and a
/// counting thread counts them in file order. The tally is the one a single thread
/// gives, since everything that depends on order happens on the counting side in
/// file order.
pub fn tally_csv_sized<R: Read, E>(
    layout_for: impl FnOnce(&[&str]) -> Result<Layout, E>,
    reader: R,
    delimiter: u8,
    size: Option<u64>,
) -> Result<(Vec<String>, Tally), TallyError<E>> {
    pipe::tally(layout_for, reader, delimiter, size)
}

#[cfg(test)]
mod tests {
    use super::ids::id_hash;
    use super::*;
    use crate::rows::MeasureRule;
    use rand::seq::SliceRandom;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn ts(text: &str) -> Timestamp {
        text.parse().unwrap()
    }

    /// An exact power of two, subnormals included.
    fn pow2(n: i32) -> f64 {
        if n >= -1022 {
            f64::from_bits(((n + 1023) as u64) << 52)
        } else {
            f64::from_bits(1u64 << (n + 1074))
        }
    }

    fn exact_sum(terms: &[f64]) -> f64 {
        let mut s = ExactSum::default();
        for &t in terms {
            s.add(t);
        }
        s.value()
    }

    /// XXH3-128 of ids of every length class, from the Python `xxhash` package
    /// (bindings to the xxHash C library; versions in the file), made by
    /// `tests/reference/make_id_hashes.py`.
    #[test]
    fn id_hashes_match_the_xxhash_c_library() {
        let text = include_str!("../tests/reference/id_hashes.json");
        let fixture: serde_json::Value = serde_json::from_str(text).unwrap();
        let cases = fixture["cases"].as_array().unwrap();
        assert!(cases.len() > 80);
        for case in cases {
            let hex = case["id_hex"].as_str().unwrap();
            let id: Vec<u8> = (0..hex.len())
                .step_by(2)
                .map(|i| u8::from_str_radix(&hex[i..i + 2], 16).unwrap())
                .collect();
            let want = u128::from_str_radix(case["xxh3_128"].as_str().unwrap(), 16).unwrap();
            assert_eq!(id_hash(&id), want, "id {hex}");
        }
    }

    #[test]
    fn id_hashes_differ_in_both_halves_and_are_the_same_every_run() {
        let (a, b) = (id_hash(b"R-1"), id_hash(b"R-2"));
        assert_ne!(a >> 64, b >> 64);
        assert_ne!(a as u64, b as u64);
        assert_eq!(id_hash(b"R-1"), a);
        assert_ne!(id_hash(b""), id_hash(b"\0"));
    }

    #[test]
    fn exact_sums_match_pythons_fsum_test_cases() {
        // CPython 3.11 Lib/test/test_math.py, testFsum (values rechecked with
        // math.fsum in Python 3.11.7).
        assert_eq!(exact_sum(&[]), 0.0);
        assert_eq!(exact_sum(&[0.1; 10]), 1.0);
        assert_eq!(exact_sum(&[1e16, 1.0, 1e-16]), 10000000000000002.0);
        assert_eq!(exact_sum(&[1e-16, 1.0, 1e16]), 10000000000000002.0);
        assert_eq!(
            exact_sum(&[1e100, 1.0, -1e100, 1e-100, 1e50, -1.0, -1e50]),
            1e-100
        );
        assert_eq!(exact_sum(&[pow2(53), -0.5, -pow2(-54)]), pow2(53) - 1.0);
        assert_eq!(exact_sum(&[pow2(53), 1.0, pow2(-100)]), pow2(53) + 2.0);
        assert_eq!(exact_sum(&[pow2(53) - 4.0, 0.5, pow2(-54)]), pow2(53) - 3.0);
        let harmonic: Vec<f64> = (1..=1000).map(|n| 1.0 / n as f64).collect();
        assert_eq!(exact_sum(&harmonic).to_bits(), 0x401d_f11f_45f4_e61a);
        let alternating: Vec<f64> = (1..=1000)
            .map(|n| if n % 2 == 0 { 1.0 } else { -1.0 } / n as f64)
            .collect();
        assert_eq!(exact_sum(&alternating).to_bits(), 0xbfe6_2a2a_f1bd_3624);
        let mut wide: Vec<f64> = (-1074..972)
            .step_by(2)
            .map(|n| pow2(n) - pow2(n + 50) + pow2(n + 52))
            .collect();
        wide.push(-pow2(1022));
        assert_eq!(exact_sum(&wide).to_bits(), 0x7c95_5555_5555_5555);
        // The naive left-to-right sums are different, so these checks can tell.
        assert_ne!([0.1f64; 10].iter().sum::<f64>(), 1.0);
        assert_ne!(
            harmonic.iter().sum::<f64>().to_bits(),
            0x401d_f11f_45f4_e61a
        );
    }

    #[test]
    fn exact_sums_do_not_depend_on_order_or_grouping() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut terms: Vec<f64> = (0..2000)
            .map(|_| rng.random::<f64>() * 10f64.powi(rng.random_range(-8..8)))
            .collect();
        let whole = exact_sum(&terms);
        for _ in 0..20 {
            terms.shuffle(&mut rng);
            assert_eq!(exact_sum(&terms).to_bits(), whole.to_bits());
            let cut = rng.random_range(0..=terms.len());
            let (mut a, mut b) = (ExactSum::default(), ExactSum::default());
            terms[..cut].iter().for_each(|&t| a.add(t));
            terms[cut..].iter().for_each(|&t| b.add(t));
            b.merge(&a);
            assert_eq!(b.value().to_bits(), whole.to_bits());
        }
    }

    #[test]
    fn sums_beyond_the_largest_float_are_infinite_not_a_panic() {
        assert_eq!(exact_sum(&[f64::MAX, f64::MAX]), f64::INFINITY);
        assert_eq!(exact_sum(&[f64::INFINITY, 1.0]), f64::INFINITY);
        let mut m = MeasureTally::default();
        m.add(Answer::Yes, 1e200);
        assert_eq!(m.weights.sum_w, 1e200);
        assert_eq!(m.weights.sum_w2, f64::INFINITY);
    }

    #[test]
    fn a_measure_counts_yes_no_missing_unexpected_evaluated_by_hand() {
        let mut m = MeasureTally::default();
        m.add(Answer::Yes, 2.0);
        m.add(Answer::No, 0.5);
        m.add(Answer::Yes, 0.0); // in n and successes, nothing in the sums
        m.add(Answer::Missing, 7.0);
        m.add(Answer::Unexpected, 9.0);
        assert_eq!((m.n, m.successes, m.missing, m.unexpected), (3, 2, 1, 1));
        // Σw = 2 + 0.5 + 0; Σw² = 4 + 0.25 + 0; Σwy = 2 + 0.
        assert_eq!(
            m.weights,
            WeightSums {
                sum_w: 2.5,
                sum_w2: 4.25,
                sum_wy: 2.0
            }
        );
        let mut other = MeasureTally::default();
        other.add(Answer::No, 1.5);
        m.merge(&other);
        assert_eq!((m.n, m.successes), (4, 2));
        assert_eq!(m.weights.sum_w, 4.0);
        assert_eq!(m.weights.sum_w2, 6.5);
    }

    #[test]
    fn arrivals_count_per_hour_and_since_a_time() {
        let mut a = Arrivals::default();
        for t in [
            "2026-05-01T09:10:00Z",
            "2026-05-01T09:50:00Z",
            "2026-05-01T10:05:00Z",
            "2026-05-01T12:00:00Z",
        ] {
            a.add(Some(ts(t)));
        }
        a.add(None);
        assert_eq!((a.timed(), a.untimed()), (4, 1));
        assert_eq!(a.first(), Some(ts("2026-05-01T09:10:00Z")));
        assert_eq!(a.latest(), Some(ts("2026-05-01T12:00:00Z")));
        // On the hour: exact.
        assert_eq!(a.count_since(ts("2026-05-01T10:00:00Z")), 2);
        // Within the hour: the whole hour counts.
        assert_eq!(a.count_since(ts("2026-05-01T09:30:00Z")), 4);
        assert_eq!(a.count_since(ts("2026-05-01T12:00:01Z")), 1);
        assert_eq!(a.count_since(ts("2026-05-01T13:00:00Z")), 0);
        let hour9 = ts("2026-05-01T09:00:00Z").as_second() / 3600;
        assert_eq!(
            a.hours().collect::<Vec<_>>(),
            vec![(hour9, 2), (hour9 + 1, 1), (hour9 + 3, 1)]
        );

        let mut b = Arrivals::default();
        b.add(Some(ts("2026-05-01T08:59:59Z")));
        b.add(Some(ts("2026-05-01T09:00:00Z")));
        b.merge(&a);
        assert_eq!(b.first(), Some(ts("2026-05-01T08:59:59Z")));
        assert_eq!(b.latest(), a.latest());
        assert_eq!(b.count_since(ts("2026-05-01T09:00:00Z")), 5);
        assert_eq!(b.untimed(), 1);
    }

    #[test]
    fn hours_round_down_before_1970_too() {
        assert_eq!(Arrivals::hour_of(ts("1970-01-01T00:00:00Z")), 0);
        assert_eq!(Arrivals::hour_of(ts("1970-01-01T00:59:59.9Z")), 0);
        assert_eq!(Arrivals::hour_of(ts("1969-12-31T23:59:59.5Z")), -1);
        assert_eq!(Arrivals::hour_of(ts("1969-12-31T23:00:00Z")), -1);
        assert_eq!(Arrivals::hour_of(ts("1969-12-31T22:59:59.999Z")), -2);
    }

    // ---- whole files ----

    /// The layout for the columns `region,age,q1,q2,id,w,t`: cells region × age,
    /// measures q1 (4–5 yes, 1–3 no) and q2 (yes / no).
    fn layout_for(header: &[&str]) -> Result<Layout, String> {
        let column = |name: &str| {
            header
                .iter()
                .position(|h| *h == name)
                .ok_or_else(|| format!("no column '{name}'"))
        };
        Ok(Layout {
            width: header.len(),
            cells: vec![column("region")?, column("age")?],
            measures: vec![
                MeasureRule {
                    column: column("q1")?,
                    yes: vec!["4".into(), "5".into()],
                    no: vec!["1".into(), "2".into(), "3".into()],
                },
                MeasureRule {
                    column: column("q2")?,
                    yes: vec!["yes".into()],
                    no: vec!["no".into()],
                },
            ],
            id: Some(column("id")?),
            weight: Some(column("w")?),
            time: Some(column("t")?),
        })
    }

    fn tally_text(text: &[u8]) -> (Vec<String>, Tally) {
        tally_csv(layout_for, text, b',').unwrap()
    }

    fn key(values: &[&str]) -> CellKey {
        CellKey(values.iter().map(|v| v.to_string()).collect())
    }

    const SMALL: &[u8] = b"region,age,q1,q2,id,w,t
north,young,5,yes,a,2,2026-05-01T09:10:00Z
 North ,YOUNG,1,no,b,0.5,2026-05-01T09:50:00Z
north,young,,maybe,c,1,2026-05-01T10:05:00Z
north,young,dk,,d,3,
south,old,4,yes,e,1,2026-05-01T08:00:00Z
north,young,4,yes,a,9,2026-05-01T11:00:00Z
south,old,4,yes,f,-1,2026-05-01T08:30:00Z
south,old,3,NO,f,0,2026-05-01T08:40:00Z
";

    #[test]
    fn a_small_file_evaluated_by_hand() {
        let (header, t) = tally_text(SMALL);
        assert_eq!(header, ["region", "age", "q1", "q2", "id", "w", "t"]);
        assert_eq!(t.rows_read, 8);
        assert_eq!(t.cells.len(), 2);

        let north = &t.cells[&key(&["north", "young"])];
        assert_eq!(north.label, ["north", "young"]);
        // Lines 2–5; line 7 repeats id 'a' and is not counted.
        assert_eq!(north.responses, 4);
        let q1 = &north.measures[0];
        // 5 yes (w 2), 1 no (w 0.5), blank, 'dk'.
        assert_eq!(
            (q1.n, q1.successes, q1.missing, q1.unexpected),
            (2, 1, 1, 1)
        );
        assert_eq!(
            q1.weights,
            WeightSums {
                sum_w: 2.5,
                sum_w2: 4.25,
                sum_wy: 2.0
            }
        );
        let q2 = &north.measures[1];
        // yes (w 2), no (w 0.5), 'maybe', blank.
        assert_eq!(
            (q2.n, q2.successes, q2.missing, q2.unexpected),
            (2, 1, 1, 1)
        );
        // Arrivals 09:10, 09:50, 10:05; line 5 has no time.
        assert_eq!(north.arrivals.timed(), 3);
        assert_eq!(north.arrivals.untimed(), 1);
        assert_eq!(north.arrivals.first(), Some(ts("2026-05-01T09:10:00Z")));
        assert_eq!(north.arrivals.latest(), Some(ts("2026-05-01T10:05:00Z")));

        let south = &t.cells[&key(&["south", "old"])];
        // Line 6 (e); line 8 (f, weight −1) rejected, so line 9 (f) is the first f.
        assert_eq!(south.responses, 2);
        let q1 = &south.measures[0];
        assert_eq!((q1.n, q1.successes), (2, 1));
        // Weight 0 counts in n but not in the sums: Σw = 1, Σw² = 1, Σwy = 1.
        assert_eq!(
            q1.weights,
            WeightSums {
                sum_w: 1.0,
                sum_w2: 1.0,
                sum_wy: 1.0
            }
        );
        assert_eq!(south.measures[1].n, 2); // 'NO' is no, case ignored

        assert_eq!(t.duplicates, 1);
        assert_eq!(t.first_duplicates, vec![(7, "a".to_string())]);
        assert_eq!(t.rejected, 1);
        assert_eq!(t.first_rejections.len(), 1);
        assert_eq!(t.first_rejections[0].line, 8);
        assert_eq!(
            t.first_rejections[0].reason,
            rows::Reason::NegativeWeight("-1".into())
        );
        assert_eq!(
            t.unexpected_values,
            vec![
                BTreeMap::from([("dk".to_string(), 1)]),
                BTreeMap::from([("maybe".to_string(), 1)])
            ]
        );
        // 11:00 was a duplicate's time; the newest counted is 10:05.
        assert_eq!(t.newest, Some(ts("2026-05-01T10:05:00Z")));
        assert_eq!(t.distinct_ids(), 6); // a–f
        assert_eq!(t.rows_read, t.rejected + t.duplicates + t.responses());
    }

    #[test]
    fn a_quoted_line_break_makes_the_next_line_number_jump() {
        let text = b"region,age,q1,q2,id,w,t\r
north,young,5,\"yes\r
and more\",a,1,\r
north,young,5,yes,a,1,\r
\r
south,old,5,yes,b,x,\r
south,\"old\nold\nold\",5,yes,c,1,bad\r
south,old\r
";
        let (_, t) = tally_text(text);
        let lines: Vec<u64> = t.first_rejections.iter().map(|r| r.line).collect();
        // Record 1 spans lines 2–3; record 2 is on line 4; line 5 is blank;
        // record 3 on line 6; record 4 spans lines 7–9; record 5 on line 10.
        assert_eq!(lines, vec![6, 7, 10]);
        assert_eq!(t.first_duplicates, vec![(4, "a".to_string())]);
        assert_eq!(t.rows_read, 5);
        // The quoted answer is unexpected, kept whole and normalised.
        assert_eq!(
            t.unexpected_values[1],
            BTreeMap::from([("yes\r\nand more".to_string(), 1)])
        );
    }

    /// A reader that hands out one byte per call, so nothing arrives in one piece.
    struct Trickle<'a>(&'a [u8]);

    impl Read for Trickle<'_> {
        fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
            match (self.0.split_first(), buf.first_mut()) {
                (Some((&b, rest)), Some(slot)) => {
                    *slot = b;
                    self.0 = rest;
                    Ok(1)
                }
                _ => Ok(0),
            }
        }
    }

    #[test]
    fn a_byte_order_mark_is_removed_however_the_bytes_arrive() {
        let mut text = b"\xef\xbb\xbf".to_vec();
        text.extend_from_slice(SMALL);
        let (plain_header, plain) = tally_text(SMALL);
        let (header, whole) = tally_csv(layout_for, &text[..], b',').unwrap();
        assert_eq!(header, plain_header);
        assert_eq!(whole, plain);
        let (header, trickled) = tally_csv(layout_for, Trickle(&text), b',').unwrap();
        assert_eq!(header, plain_header);
        assert_eq!(trickled, plain);
        // A file shorter than a byte-order mark still reads.
        assert!(matches!(
            tally_csv(layout_for, &b"ab"[..], b','),
            Err(TallyError::Layout(_))
        ));
    }

    #[test]
    fn crlf_semicolons_and_lf_read_the_same() {
        let crlf: Vec<u8> = SMALL
            .iter()
            .flat_map(|&b| {
                if b == b'\n' {
                    vec![b'\r', b'\n']
                } else {
                    vec![b]
                }
            })
            .collect();
        let semicolons: Vec<u8> = SMALL
            .iter()
            .map(|&b| if b == b',' { b';' } else { b })
            .collect();
        let (_, plain) = tally_text(SMALL);
        assert_eq!(tally_text(&crlf).1, plain);
        assert_eq!(
            tally_csv(layout_for, &semicolons[..], b';').unwrap().1,
            plain
        );
    }

    struct Broken;

    impl Read for Broken {
        fn read(&mut self, _: &mut [u8]) -> std::io::Result<usize> {
            Err(std::io::Error::other("the disk went away"))
        }
    }

    #[test]
    fn file_level_problems_are_errors_with_plain_messages() {
        let empty = tally_csv(layout_for, &b""[..], b',').unwrap_err();
        assert!(matches!(empty, TallyError::NoHeader));
        assert_eq!(
            empty.to_string(),
            "the responses file is empty: expected a header line naming the columns"
        );
        let bad_header = tally_csv(layout_for, &b"region,\xffage\n"[..], b',').unwrap_err();
        assert!(matches!(
            bad_header,
            TallyError::HeaderNotUtf8 { column: 2 }
        ));
        let missing = tally_csv(layout_for, &b"region,age\n"[..], b',').unwrap_err();
        assert_eq!(missing.to_string(), "no column 'q1'");
        let io = tally_csv(layout_for, Broken, b',').unwrap_err();
        assert!(matches!(&io, TallyError::Io(m) if m.contains("the disk went away")));
        assert_eq!(
            io.to_string(),
            "cannot read the responses: the disk went away"
        );
    }

    #[test]
    fn a_header_only_file_is_an_empty_tally() {
        let (header, t) = tally_text(b"region,age,q1,q2,id,w,t\n");
        assert_eq!(header.len(), 7);
        assert_eq!(t, Tally::new(2));
        assert_eq!(t.rows_read, 0);
    }

    #[test]
    fn unexpected_values_are_counted_by_normalised_value_up_to_the_limit() {
        let mut text = b"region,age,q1,q2,id,w,t\n".to_vec();
        // 'DK' three ways, then 120 distinct values, then 'dk' and v0 again.
        for raw in ["DK", " dk ", "Dk"] {
            text.extend_from_slice(format!("n,y,{raw},yes,,1,\n").as_bytes());
        }
        for i in 0..120 {
            text.extend_from_slice(format!("n,y,v{i},yes,,1,\n").as_bytes());
        }
        text.extend_from_slice(b"n,y,dk,yes,,1,\nn,y,V0,yes,,1,\nn,y,v119,yes,,1,\n");
        let (_, t) = tally_text(&text);
        let q1 = &t.unexpected_values[0];
        assert_eq!(q1["dk"], 4);
        assert_eq!(q1["v0"], 2);
        // 'dk' and v0 … v98 have their own entries: 100 distinct values.
        assert!(q1.contains_key("v98"));
        assert!(!q1.contains_key("v99"));
        // v99 … v119 (21 values) and v119 again.
        assert_eq!(q1[OTHER_VALUES], 22);
        assert_eq!(q1.len(), UNEXPECTED_LIMIT + 1);
        assert_eq!(q1.values().sum::<u64>(), 126);
        let cell = &t.cells[&key(&["n", "y"])];
        assert_eq!(cell.measures[0].unexpected, 126);
        assert_eq!(cell.measures[0].n, 0);
        assert!(t.unexpected_values[1].is_empty());
    }

    #[test]
    fn only_the_first_fifty_rejections_and_duplicates_are_listed() {
        let mut text = b"region,age,q1,q2,id,w,t\nn,y,5,yes,same,1,\n".to_vec();
        for _ in 0..70 {
            text.extend_from_slice(b"n,y,5,yes,same,1,\nshort\n");
        }
        let (_, t) = tally_text(&text);
        assert_eq!((t.rejected, t.duplicates), (70, 70));
        assert_eq!(t.first_rejections.len(), LISTED);
        assert_eq!(t.first_duplicates.len(), LISTED);
        // Line 2 is the first 'same'; then duplicates on 3, 5, … and rejections on 4, 6, ….
        assert_eq!(t.first_duplicates[0], (3, "same".to_string()));
        assert_eq!(t.first_duplicates[49].0, 3 + 2 * 49);
        assert_eq!(t.first_rejections[49].line, 4 + 2 * 49);
        assert_eq!(t.responses(), 1);
    }

    // ---- merging ----

    fn records(text: &[u8]) -> Vec<(csv::ByteRecord, u64)> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            .flexible(true)
            .from_reader(text);
        reader
            .byte_records()
            .map(|r| {
                let r = r.unwrap();
                let line = r.position().unwrap().line();
                (r, line)
            })
            .collect()
    }

    fn small_layout() -> Layout {
        layout_for(&["region", "age", "q1", "q2", "id", "w", "t"]).unwrap()
    }

    #[test]
    fn a_duplicate_across_the_boundary_is_not_counted_after_merge() {
        let layout = small_layout();
        let all = records(SMALL);
        // Split after line 6: id 'a' (line 2) is in the first part, its repeat
        // (line 7) in the second.
        let (first, second) = all.split_at(5);
        let mut total = Tally::new(2);
        for (r, line) in first {
            total.add_record(&layout, r, *line);
        }
        let mut follower = total.continuing();
        for (r, line) in second {
            follower.add_record(&layout, r, *line);
        }
        assert_eq!(follower.duplicates, 1);
        assert_eq!(follower.responses(), 1); // only line 9
        total.merge(follower).unwrap();
        assert_eq!(total, tally_text(SMALL).1);

        // Without the context, a tally of the second part alone counts the repeat.
        let mut alone = Tally::new(2);
        for (r, line) in second {
            alone.add_record(&layout, r, *line);
        }
        assert_eq!(alone.duplicates, 0);
        assert_eq!(alone.responses(), 2);
        // … and merging it is refused rather than wrong.
        let mut again = Tally::new(2);
        for (r, line) in first {
            again.add_record(&layout, r, *line);
        }
        assert_eq!(again.merge(alone), Err(MergeError::NotContinuing));
    }

    #[test]
    fn merge_refuses_followers_out_of_order_or_after_more_records() {
        let layout = small_layout();
        let all = records(SMALL);
        let mut total = Tally::new(2);
        total.add_record(&layout, &all[0].0, all[0].1);
        let mut b = total.continuing();
        b.add_record(&layout, &all[1].0, all[1].1);
        let mut c = b.continuing();
        c.add_record(&layout, &all[2].0, all[2].1);
        // c begins after record 2, total ends after record 1.
        assert_eq!(
            total.clone().merge(c.clone()),
            Err(MergeError::OutOfOrder { begins: 2, ends: 1 })
        );
        // Fed after `continuing`: the follower no longer begins where it ends.
        let mut fed = total.clone();
        fed.add_record(&layout, &all[3].0, all[3].1);
        assert!(matches!(
            fed.merge(b.clone()),
            Err(MergeError::OutOfOrder { .. })
        ));
        // In order, a chain of followers merges into the one-pass tally.
        total.merge(b).unwrap();
        total.merge(c).unwrap();
        let mut one_pass = Tally::new(2);
        for (r, line) in &all[..3] {
            one_pass.add_record(&layout, r, *line);
        }
        assert_eq!(total, one_pass);
        // A tally of a different width is not a follower.
        let mut other = Tally::new(1);
        assert_eq!(
            other.merge(total.continuing()),
            Err(MergeError::NotContinuing)
        );
    }

    #[test]
    fn merged_weights_equal_one_pass_bit_for_bit() {
        // Random weights, and a run of 0.1s whose naive sums depend on the grouping
        // (Python: sum([0.1] * 500) = 50.00000000000044, math.fsum gives 50.0).
        let mut text = b"region,age,q1,q2,id,w,t\n".to_vec();
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        for i in 0..1000 {
            let w: f64 = if i % 2 == 0 {
                0.1
            } else {
                rng.random::<f64>() * 10f64.powi(rng.random_range(-3..4))
            };
            let q1 = if rng.random_bool(0.5) { "5" } else { "1" };
            text.extend_from_slice(format!("n,y,{q1},yes,,{w:e},\n").as_bytes());
        }
        let layout = small_layout();
        let all = records(&text);
        let (_, one_pass) = tally_text(&text);
        let mut total = Tally::new(2);
        let mut naive = 0.0f64;
        for (i, chunk) in all.chunks(7).enumerate() {
            let mut part = if i == 0 {
                Tally::new(2)
            } else {
                total.continuing()
            };
            for (r, line) in chunk {
                part.add_record(&layout, r, *line);
            }
            naive += part.cells[&key(&["n", "y"])].measures[0].weights.sum_w;
            if i == 0 {
                total = part;
            } else {
                total.merge(part).unwrap();
            }
        }
        let merged = total.cells[&key(&["n", "y"])].measures[0].weights;
        let single = one_pass.cells[&key(&["n", "y"])].measures[0].weights;
        assert_eq!(merged.sum_w.to_bits(), single.sum_w.to_bits());
        assert_eq!(merged.sum_w2.to_bits(), single.sum_w2.to_bits());
        assert_eq!(merged.sum_wy.to_bits(), single.sum_wy.to_bits());
        // Adding the chunks' rounded sums would not be exact here.
        assert_ne!(naive.to_bits(), single.sum_w.to_bits());
    }

    // ---- memory ----

    /// Entries the tally holds besides the id set: cells, measures, hour buckets,
    /// listed rejections and duplicates, unexpected values, named values.
    fn entries_besides_ids(t: &Tally) -> usize {
        t.cells
            .values()
            .map(|c| 1 + c.measures.len() + c.arrivals.hours.len())
            .sum::<usize>()
            + t.first_rejections.len()
            + t.first_duplicates.len()
            + t.unexpected_values.iter().map(BTreeMap::len).sum::<usize>()
            + t.named.iter().map(BTreeSet::len).sum::<usize>()
    }

    fn many_records(rows: u64, distinct_ids: u64) -> Tally {
        let layout = small_layout();
        let mut t = Tally::new(2);
        let mut record = csv::ByteRecord::new();
        let start = ts("2026-05-01T00:00:00Z").as_second();
        for i in 0..rows {
            record.clear();
            let time = Timestamp::from_second(start + (i % 18_000) as i64)
                .unwrap()
                .to_string();
            let id = format!("R{}", i % distinct_ids);
            for field in [
                ["north", "south", "east"][(i % 3) as usize],
                "young",
                ["5", "1", "", "dk"][(i % 4) as usize],
                "yes",
                &id,
                "1.5",
                &time,
            ] {
                record.push_field(field.as_bytes());
            }
            t.add_record(&layout, &record, i + 2);
        }
        t
    }

    #[test]
    fn memory_grows_with_distinct_ids_not_with_records() {
        let distinct = many_records(200_000, 200_000);
        assert_eq!(distinct.distinct_ids(), 200_000);
        assert_eq!(distinct.rows_read, 200_000);
        assert_eq!(distinct.duplicates, 0);
        // 12-byte slots in tables at least 8/15 full: at most 22.5 bytes per id.
        assert!(distinct.ids.capacity() * ids::SLOT_BYTES * 2 <= 45 * 200_000);

        let repeated = many_records(200_000, 1_000);
        assert_eq!(repeated.distinct_ids(), 1_000);
        assert_eq!(repeated.duplicates, 199_000);
        assert!(repeated.ids.capacity() < 256 * 16);

        // Besides the ids, what is kept does not grow with the records: 3 cells × 2
        // measures, 5 hour buckets each, one unexpected value (and its name).
        let fewer = many_records(20_000, 20_000);
        assert_eq!(entries_besides_ids(&distinct), entries_besides_ids(&fewer));
        assert_eq!(entries_besides_ids(&distinct), 3 * (1 + 2 + 5) + 1 + 1);
        assert_eq!(repeated.first_duplicates.len(), LISTED);
        // Only the first 1,000 records (all in the first hour) are counted here.
        assert_eq!(
            entries_besides_ids(&repeated),
            3 * (1 + 2 + 1) + 1 + 1 + LISTED
        );
    }
}
