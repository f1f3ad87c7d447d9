//! The one-shot read of a whole file ([`super::tally_csv_sized`]) on three threads:
//!
//! - the calling thread reads the bytes; when the helper has room, it hands a block
//!   of whole lines to it (see [`crate::follow::Reader::hand_off`]: lines without
//!   quotes, which split the same on any thread), and otherwise splits the records
//!   and reads them itself ([`Reading`], into a [`Batch`]);
//! - the helper splits the lines it is handed and reads their records with its own
//!   [`Reading`] (its own caches, the same registry of cells, spellings and weights);
//! - the counting thread counts the batches ([`Counting`]: the id set, the sums, the
//!   lists) strictly in file order: it is handed, in order, either a batch or the
//!   promise of one from the helper, and waits for that.
//!
//! Everything that depends on order happens on the counting thread in file order,
//! so the tally is the one a single thread gives, bit for bit. The helper takes work
//! only when it has room ([`BLOCKS`] blocks go round), so the calling thread reads
//! the rest itself and neither waits for the other.

use std::io::Read;
use std::sync::mpsc;

use super::counter::{Batch, Counting, CountingStopped, Reading};
use super::{Counter, Tally, TallyError};
use crate::follow::{Fields, Handed, Reader};
use crate::rows::Layout;

/// How many bytes a batch read asks for at a time.
const READ_BLOCK: usize = 64 << 10;
/// Records sent on at a time.
const PIPE_BATCH: usize = 2048;
/// Batches (or promises of one) that may wait for the counting thread.
const QUEUED: usize = 64;
/// Blocks of lines that go round between the calling thread and the helper.
const BLOCKS: usize = 16;
/// A block goes to the helper once it holds this many bytes (about as many
/// records as [`PIPE_BATCH`]).
const BLOCK_BYTES: usize = 160 << 10;

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
        let (to_helper, work) = mpsc::channel::<Split>();
        let (start_helper, helper_started) = mpsc::sync_channel::<(Reading, Reader)>(1);
        let (block_back, spare_blocks) = mpsc::channel::<Vec<u8>>();
        for _ in 0..BLOCKS {
            let _ = block_back.send(Vec::new());
        }
        thread("reading")
            .spawn_scoped(scope, move || {
                // Its reading half and its reader come just before the first lines.
                let mut halves = None;
                let mut warnings = Vec::new();
                for Split {
                    mut lines,
                    start,
                    mut batch,
                    promise,
                } in work
                {
                    if halves.is_none() {
                        halves = helper_started.recv().ok();
                    }
                    if let Some((reading, reader)) = halves.as_mut() {
                        reader.resume(start);
                        let mut into = IntoBatch {
                            reading,
                            batch: &mut batch,
                        };
                        // The one-shot read keeps no warnings (nor does the calling
                        // thread's reader).
                        reader.feed(&lines, &mut into, &mut warnings);
                        warnings.clear();
                    }
                    // The counting thread may have stopped; then it is dropped.
                    let _ = promise.send(batch);
                    lines.clear();
                    let _ = block_back.send(lines);
                }
            })
            .map_err(spawn_failed)?;
        let mut sink = Sink {
            layout_for: Some(layout_for),
            state: None,
            start: Some(start),
            to_counting,
            to_helper,
            start_helper,
            spare,
            spare_blocks,
            block: None,
            block_start: Handed::default(),
            helper: None,
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
        let stopped = || TallyError::Io(CountingStopped.to_string());
        let tally = counting.join().map_err(|_| stopped())?;
        match (header, tally) {
            (Some(header), Some(tally)) => Ok((header, tally)),
            (Some(_), None) => Err(stopped()),
            (None, _) => Err(TallyError::NoHeader),
        }
    })
}

/// Feed the whole input through the record reader into the sink (each block of
/// whole lines to the helper instead when it has room and the reader may hand them
/// off); the header, once there is one.
fn read_all<R: Read, E, F: FnOnce(&[&str]) -> Result<Layout, E>>(
    sink: &mut Sink<E, F>,
    reader: &mut R,
    delimiter: u8,
    size: Option<u64>,
) -> Result<Option<Vec<String>>, TallyError<E>> {
    let mut sized = size.is_none();
    let mut parser = Reader::new(delimiter, crate::follow::RECORD_LIMIT);
    let mut warnings = Vec::new();
    let mut buffer = vec![0u8; READ_BLOCK];
    // Bytes at the front of `buffer` not taken yet (the start of a byte-order mark,
    // or of a line not yet complete).
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
        // A line not yet complete waits for the next read (unless no line ends in
        // these bytes), so that the reader is between records when the next block
        // arrives and may hand its lines to the helper.
        let whole = match got {
            0 => data.len(),
            _ => memchr::memrchr(b'\n', data).map_or(data.len(), |i| i + 1),
        };
        let data = data.get(..whole).unwrap_or_default();
        // Room for the ids is set before any lines go to the helper.
        let handed = match sized {
            true => sink.hand_off(&mut parser, data),
            false => 0,
        };
        let took =
            handed + parser.feed(data.get(handed..).unwrap_or_default(), sink, &mut warnings);
        if got == 0 {
            parser.finish(sink, &mut warnings);
        }
        if let Some(problem) = sink.problem.take() {
            return Err(problem);
        }
        if !sized && let (Some(total), Some((_, _, filling))) = (size, sink.state.as_mut()) {
            // Room for the ids once the first block shows how many a byte holds.
            filling.reserve = Some((parser.taken(), total));
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

/// What the helper is handed: whole lines to split (starting at `start`) and read
/// into the (empty) batch, which then goes to the promise.
struct Split {
    lines: Vec<u8>,
    start: Handed,
    batch: Batch,
    promise: mpsc::SyncSender<Batch>,
}

/// One record into the batch: read, or noted as too long.
fn read_one(
    reading: &mut Reading,
    batch: &mut Batch,
    line: u64,
    fields: Fields<'_>,
    too_long: Option<u64>,
) {
    match too_long {
        Some(size) => batch.push_too_long(line, size),
        None => reading.read(fields, line, batch),
    }
}

/// Where the helper's reader hands its records: into the helper's batch.
struct IntoBatch<'a> {
    reading: &'a mut Reading,
    batch: &'a mut Batch,
}

impl crate::follow::Out for IntoBatch<'_> {
    fn record(&mut self, line: u64, _offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        read_one(self.reading, self.batch, line, fields, too_long);
    }
}

/// Where the record reader hands the header and the records.
struct Sink<E, F> {
    layout_for: Option<F>,
    /// The header, the reading half and the batch being filled.
    state: Option<(Vec<String>, Reading, Batch)>,
    /// Where the counting half and the tally go once the header is read.
    start: Option<mpsc::SyncSender<(Counting, Tally)>>,
    to_counting: mpsc::SyncSender<Slot>,
    to_helper: mpsc::Sender<Split>,
    /// Where the helper's reading half and reader go, before its first lines.
    start_helper: mpsc::SyncSender<(Reading, Reader)>,
    /// Batches the counting thread has emptied, to fill again.
    spare: mpsc::Receiver<Batch>,
    /// Blocks the helper has read: while there is one, lines may go to it.
    spare_blocks: mpsc::Receiver<Vec<u8>>,
    /// A block taken from the spares and not sent yet: empty, or being filled
    /// with lines that start at `block_start`.
    block: Option<Vec<u8>>,
    block_start: Handed,
    /// The helper's reading half, until it goes before the first lines.
    helper: Option<Reading>,
    problem: Option<TallyError<E>>,
}

impl<E, F> Sink<E, F> {
    /// Send the batch being filled (if it holds anything) on its way.
    fn send(&mut self) {
        let Some((_, _, filling)) = self.state.as_mut() else {
            return;
        };
        if filling.len() == 0 && filling.reserve.is_none() {
            return;
        }
        let next = self.spare.try_recv().unwrap_or_default();
        let batch = std::mem::replace(filling, next);
        if self.to_counting.send(Slot::Ready(batch)).is_err() {
            self.stopped("counting");
        }
    }

    /// Hand the whole lines at the front of `data` to the helper when it has room
    /// and `parser` may hand them off (see [`Reader::hand_off`]); how many bytes
    /// went. They join the block being filled (after the batch being filled, which
    /// goes first), which goes once it holds [`BLOCK_BYTES`] or when bytes of
    /// `data` are left for the calling thread; when these lines cannot go, the
    /// block goes at once, as its lines come before them.
    fn hand_off(&mut self, parser: &mut Reader, data: &[u8]) -> usize {
        if self.state.is_none() {
            return 0;
        }
        let Some(mut lines) = self
            .block
            .take()
            .or_else(|| self.spare_blocks.try_recv().ok())
        else {
            return 0;
        };
        if let Some(reading) = self.helper.take() {
            let Some(reader) = parser.for_hand_offs() else {
                self.helper = Some(reading);
                self.block = Some(lines);
                return 0;
            };
            // A thread that has stopped shows when the lines are sent.
            let _ = self.start_helper.send((reading, reader));
        }
        let Some((cut, start)) = parser.hand_off(data) else {
            match lines.is_empty() {
                true => self.block = Some(lines),
                false => self.send_block(lines),
            }
            return 0;
        };
        if lines.is_empty() {
            self.send();
            self.block_start = start;
        }
        lines.extend_from_slice(data.get(..cut).unwrap_or_default());
        // The block goes when full, or before the calling thread reads the rest.
        match lines.len() >= BLOCK_BYTES || cut < data.len() {
            true => self.send_block(lines),
            false => self.block = Some(lines),
        }
        cut
    }

    /// Send a block of lines to the helper, and the promise of its batch on.
    fn send_block(&mut self, lines: Vec<u8>) {
        let (promise, pending) = mpsc::sync_channel(1);
        let batch = self.spare.try_recv().unwrap_or_default();
        let work = Split {
            lines,
            start: self.block_start,
            batch,
            promise,
        };
        if self.to_helper.send(work).is_err() {
            self.stopped("helper");
        } else if self.to_counting.send(Slot::Pending(pending)).is_err() {
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
                let (reading, counting) = Counter::halves(&layout);
                self.helper = Some(reading.another());
                if let Some(start) = self.start.take() {
                    let _ = start.send((counting, tally));
                }
                let filling = self.spare.try_recv().unwrap_or_default();
                self.state = Some((names, reading, filling));
            }
            Err(e) => self.problem = Some(TallyError::Layout(e)),
        }
    }

    fn record(&mut self, line: u64, _offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        let Some((_, reading, batch)) = self.state.as_mut() else {
            return;
        };
        read_one(reading, batch, line, fields, too_long);
        if batch.len() >= PIPE_BATCH {
            self.send();
        }
    }
}
