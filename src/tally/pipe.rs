//! The one-shot read of a whole file ([`super::tally_csv_sized`]) on three threads:
//!
//! - the calling thread reads the bytes and splits the records; each batch of
//!   records it either reads itself ([`Reading`], into a [`Batch`]) or, when the
//!   helper has room, copies as split ([`RawBatch`]) for the helper to read;
//! - the helper reads the copied records with its own [`Reading`] (its own caches,
//!   the same registry of cells, spellings and weights);
//! - the counting thread counts the batches ([`Counting`]: the id set, the sums, the
//!   lists) strictly in file order: it is handed, in order, either a batch or the
//!   promise of one from the helper, and waits for that.
//!
//! Everything that depends on order happens on the counting thread in file order,
//! so the tally is the one a single thread gives, bit for bit. The helper takes work
//! only when it has room ([`RAW_BATCHES`] copies go round), so the calling thread
//! reads the rest itself and neither waits for the other.

use std::io::Read;
use std::sync::mpsc;

use super::counter::{Batch, Counting, Reading};
use super::{Counter, Tally, TallyError};
use crate::follow::Fields;
use crate::rows::Layout;

/// How many bytes a batch read asks for at a time.
const READ_BLOCK: usize = 64 << 10;
/// Records sent on at a time.
const PIPE_BATCH: usize = 2048;
/// Batches (or promises of one) that may wait for the counting thread.
const QUEUED: usize = 64;
/// Copies of records that go round between the calling thread and the helper.
const RAW_BATCHES: usize = 16;

/// Tally the whole input (see [`super::tally_csv_sized`]).
pub(super) fn tally<R: Read, E>(
    layout_for: impl FnOnce(&[&str]) -> Result<Layout, E>,
    mut reader: R,
    delimiter: u8,
    size: Option<u64>,
) -> Result<(Vec<String>, Tally), TallyError<E>> {
    std::thread::scope(|scope| {
        let (to_counting, slots) = mpsc::sync_channel::<Slot>(QUEUED);
        let (to_reading, spare) = mpsc::channel::<Batch>();
        let (start, started) = mpsc::sync_channel::<(Counting, Tally)>(1);
        let spawn_failed =
            |e: std::io::Error| TallyError::Io(format!("cannot start a thread: {e}"));
        let thread = |name: &str| std::thread::Builder::new().name(format!("closeout {name}"));
        let counting = thread("counting")
            .spawn_scoped(scope, move || {
                let (mut counting, mut tally) = started.recv().ok()?;
                for slot in slots {
                    let mut batch = match slot {
                        Slot::Ready(batch) => batch,
                        Slot::Pending(promise) => promise.recv().ok()?,
                    };
                    counting.count(&mut tally, &mut batch);
                    // The calling thread may have finished; then the batch is dropped.
                    let _ = to_reading.send(batch);
                }
                counting.flush(&mut tally);
                Some(tally)
            })
            .map_err(spawn_failed)?;
        let (to_helper, work) = mpsc::channel::<Work>();
        let (raw_back, spare_raw) = mpsc::channel::<RawBatch>();
        for _ in 0..RAW_BATCHES {
            let _ = raw_back.send(RawBatch::default());
        }
        thread("reading")
            .spawn_scoped(scope, move || {
                let mut reading = None;
                for work in work {
                    match work {
                        Work::Start(mine) => reading = Some(mine),
                        Work::Read(mut raw, mut batch, promise) => {
                            if let Some(reading) = reading.as_mut() {
                                raw.read_into(reading, &mut batch);
                            }
                            // The counting thread may have stopped; then it is dropped.
                            let _ = promise.send(batch);
                            raw.clear();
                            let _ = raw_back.send(raw);
                        }
                    }
                }
            })
            .map_err(spawn_failed)?;
        let mut sink = Sink {
            layout_for: Some(layout_for),
            state: None,
            start: Some(start),
            to_counting,
            to_helper,
            spare,
            spare_raw,
            problem: None,
        };
        let header = read_all(&mut sink, &mut reader, delimiter, size)?;
        sink.send();
        if let Some(problem) = sink.problem.take() {
            return Err(problem);
        }
        // Every sender goes, so that the threads end (the counting thread may still
        // be waiting for its start when there was no header).
        drop(sink);
        let tally = counting
            .join()
            .map_err(|_| TallyError::Io("the counting thread stopped unexpectedly".into()))?;
        match (header, tally) {
            (Some(header), Some(tally)) => Ok((header, tally)),
            (Some(_), None) => Err(TallyError::Io(
                "the counting thread stopped unexpectedly".into(),
            )),
            (None, _) => Err(TallyError::NoHeader),
        }
    })
}

/// Feed the whole input through the record reader into the sink; the header, once
/// there is one.
fn read_all<R: Read, E, F: FnOnce(&[&str]) -> Result<Layout, E>>(
    sink: &mut Sink<E, F>,
    reader: &mut R,
    delimiter: u8,
    size: Option<u64>,
) -> Result<Option<Vec<String>>, TallyError<E>> {
    let mut sized = size.is_none();
    let mut parser = crate::follow::Reader::new(delimiter, crate::follow::RECORD_LIMIT);
    let mut warnings = Vec::new();
    let mut buffer = vec![0u8; READ_BLOCK];
    // Bytes at the front of `buffer` not taken yet (the start of a byte-order mark).
    let mut kept = 0;
    let mut head: Vec<u8> = Vec::new();
    loop {
        let got = loop {
            match reader.read(&mut buffer[kept..]) {
                Ok(k) => break k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(TallyError::Io(e.to_string())),
            }
        };
        let data = &buffer[..kept + got];
        if head.len() < 64 {
            let room = 64 - head.len();
            head.extend_from_slice(
                data.get(kept..(kept + room).min(data.len()))
                    .unwrap_or_default(),
            );
            if let Some(why) = crate::follow::looks_like_utf16(&head) {
                return Err(TallyError::Io(format!(
                    "the file looks like {why}: save it as UTF-8"
                )));
            }
        }
        let took = parser.feed(data, sink, &mut warnings);
        if got == 0 {
            parser.finish(sink, &mut warnings);
        }
        if let Some(problem) = sink.problem.take() {
            return Err(problem);
        }
        if !sized && let (Some(total), Some((_, _, filling))) = (size, sink.state.as_mut()) {
            // Room for the ids once the first block shows how many a byte holds.
            filling.set_reserve((parser.taken(), total));
            sink.send();
            sized = true;
        }
        warnings.clear();
        if got == 0 {
            break;
        }
        buffer.copy_within(took..kept + got, 0);
        kept = kept + got - took;
    }
    Ok(sink.state.as_ref().map(|(header, _, _)| header.clone()))
}

/// What the counting thread is handed, in file order.
enum Slot {
    Ready(Batch),
    /// The helper's batch, when it is read.
    Pending(mpsc::Receiver<Batch>),
}

/// What the helper is handed.
enum Work {
    /// Its reading half (once the header is read).
    Start(Reading),
    /// Records to read into the (empty) batch, which then goes to the promise.
    Read(RawBatch, Batch, mpsc::SyncSender<Batch>),
}

/// Records as split, copied for the helper to read.
#[derive(Debug, Default)]
struct RawBatch {
    bytes: Vec<u8>,
    ends: Vec<usize>,
    records: Vec<RawRecord>,
    reserve: Option<(u64, u64)>,
}

/// One copied record: where its bytes and field ends stop in the [`RawBatch`].
#[derive(Debug)]
struct RawRecord {
    line: u64,
    bytes_end: usize,
    ends_end: usize,
    gap: usize,
    ascii: bool,
    too_long: Option<u64>,
}

impl RawBatch {
    fn push(&mut self, line: u64, fields: Fields<'_>, too_long: Option<u64>) {
        let (bytes, ends, gap, ascii) = fields.parts();
        self.bytes.extend_from_slice(bytes);
        self.ends.extend_from_slice(ends);
        self.records.push(RawRecord {
            line,
            bytes_end: self.bytes.len(),
            ends_end: self.ends.len(),
            gap,
            ascii,
            too_long,
        });
    }

    /// Read every record, in order, into `batch`.
    fn read_into(&self, reading: &mut Reading, batch: &mut Batch) {
        let (mut bytes_start, mut ends_start) = (0, 0);
        for record in &self.records {
            let bytes = self.bytes.get(bytes_start..record.bytes_end);
            let ends = self.ends.get(ends_start..record.ends_end);
            match record.too_long {
                Some(size) => batch.push_too_long(record.line, size),
                None => {
                    let fields = Fields::from_parts(
                        bytes.unwrap_or_default(),
                        ends.unwrap_or_default(),
                        record.gap,
                        record.ascii,
                    );
                    reading.read(fields, record.line, batch);
                }
            }
            (bytes_start, ends_start) = (record.bytes_end, record.ends_end);
        }
        batch.reserve = self.reserve;
    }

    fn clear(&mut self) {
        self.bytes.clear();
        self.ends.clear();
        self.records.clear();
        self.reserve = None;
    }
}

/// The batch being filled on the calling thread.
enum Filling {
    /// Read here.
    InPlace(Batch),
    /// Copied for the helper.
    Raw(RawBatch),
}

impl Filling {
    fn len(&self) -> usize {
        match self {
            Filling::InPlace(batch) => batch.len(),
            Filling::Raw(raw) => raw.records.len(),
        }
    }

    fn reserve(&self) -> Option<(u64, u64)> {
        match self {
            Filling::InPlace(batch) => batch.reserve,
            Filling::Raw(raw) => raw.reserve,
        }
    }

    fn set_reserve(&mut self, reserve: (u64, u64)) {
        match self {
            Filling::InPlace(batch) => batch.reserve = Some(reserve),
            Filling::Raw(raw) => raw.reserve = Some(reserve),
        }
    }
}

/// Where the record reader hands the header and the records.
struct Sink<E, F> {
    layout_for: Option<F>,
    /// The header, the reading half and the batch being filled.
    state: Option<(Vec<String>, Reading, Filling)>,
    /// Where the counting half and the tally go once the header is read.
    start: Option<mpsc::SyncSender<(Counting, Tally)>>,
    to_counting: mpsc::SyncSender<Slot>,
    to_helper: mpsc::Sender<Work>,
    /// Batches the counting thread has emptied, to fill again.
    spare: mpsc::Receiver<Batch>,
    /// Copies the helper has read: while there is one, the next batch goes to it.
    spare_raw: mpsc::Receiver<RawBatch>,
    problem: Option<TallyError<E>>,
}

impl<E, F> Sink<E, F> {
    /// An empty batch to fill next: a copy for the helper if it has room, else one
    /// to read here.
    fn next_filling(&self) -> Filling {
        match self.spare_raw.try_recv() {
            Ok(raw) => Filling::Raw(raw),
            Err(_) => Filling::InPlace(self.spare.try_recv().unwrap_or_default()),
        }
    }

    /// Send the batch being filled (if it holds anything) on its way.
    fn send(&mut self) {
        match self.state.as_ref() {
            Some((_, _, filling)) if filling.len() > 0 || filling.reserve().is_some() => {}
            _ => return,
        }
        let next = self.next_filling();
        let Some((_, _, filling)) = self.state.as_mut() else {
            return;
        };
        let slot = match std::mem::replace(filling, next) {
            Filling::InPlace(batch) => Slot::Ready(batch),
            Filling::Raw(raw) => {
                let (promise, pending) = mpsc::sync_channel(1);
                let batch = self.spare.try_recv().unwrap_or_default();
                if self
                    .to_helper
                    .send(Work::Read(raw, batch, promise))
                    .is_err()
                {
                    self.stopped("helper");
                    return;
                }
                Slot::Pending(pending)
            }
        };
        if self.to_counting.send(slot).is_err() {
            self.stopped("counting");
        }
    }

    fn stopped(&mut self, which: &str) {
        self.problem.get_or_insert(TallyError::Io(format!(
            "the {which} thread stopped unexpectedly"
        )));
    }
}

impl<E, F: FnOnce(&[&str]) -> Result<Layout, E>> crate::follow::Out for Sink<E, F> {
    fn header(&mut self, header: &csv::ByteRecord) {
        let Some(resolve) = self.layout_for.take() else {
            return;
        };
        let names = header
            .iter()
            .enumerate()
            .map(|(i, field)| {
                std::str::from_utf8(field)
                    .map(str::to_string)
                    .map_err(|_| TallyError::HeaderNotUtf8 { column: i + 1 })
            })
            .collect::<Result<Vec<String>, _>>();
        let names = match names {
            Ok(names) => names,
            Err(e) => {
                self.problem = Some(e);
                return;
            }
        };
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        match resolve(&refs) {
            Ok(layout) => {
                let tally = Tally::new(layout.measures.len());
                let (reading, counting) = Counter::new(&layout).into_halves();
                // A thread that has stopped shows when the first batch is sent.
                let _ = self.to_helper.send(Work::Start(reading.another()));
                if let Some(start) = self.start.take() {
                    let _ = start.send((counting, tally));
                }
                let filling = self.next_filling();
                self.state = Some((names, reading, filling));
            }
            Err(e) => self.problem = Some(TallyError::Layout(e)),
        }
    }

    fn record(&mut self, line: u64, _offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        let Some((_, reading, filling)) = self.state.as_mut() else {
            return;
        };
        match (filling, too_long) {
            (Filling::InPlace(batch), Some(size)) => batch.push_too_long(line, size),
            (Filling::InPlace(batch), None) => reading.read(fields, line, batch),
            (Filling::Raw(raw), _) => raw.push(line, fields, too_long),
        }
        if self
            .state
            .as_ref()
            .is_some_and(|(_, _, f)| f.len() >= PIPE_BATCH)
        {
            self.send();
        }
    }
}
