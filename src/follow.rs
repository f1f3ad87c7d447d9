//! Follow a growing CSV file by name, as `tail -F` does, and hand out its complete
//! records exactly once. Knows nothing of the study's columns or of statistics.
//!
//! # Events are hints; `stat` and the bytes decide
//!
//! [`Follower::poll`] is called whenever the caller has a hint that the file may
//! have changed, and on a safety tick. Each poll opens the path afresh, reads the
//! opened file's identity (device and inode) and size, and compares them and two
//! small fingerprints — the first [`FINGERPRINT`] bytes of the file and the
//! [`FINGERPRINT`] bytes just before the read offset — with what it saw before:
//!
//! | what the poll finds | what it says |
//! | --- | --- |
//! | the path is missing | [`Change::Waiting`] once; the caller keeps the last statistics |
//! | same file, larger or the same size, fingerprints equal | [`Change::Appended`] with the new complete records (or [`Change::Nothing`]) |
//! | same file, smaller than the read offset | [`Change::Reset`], [`ResetReason::Truncated`] |
//! | same file, fingerprints differ | [`Change::Reset`], [`ResetReason::Rewritten`] |
//! | another file (new inode) that begins with the same bytes and is no shorter | carried on without re-reading (a regenerated export that merely grew) |
//! | another file otherwise | [`Change::Reset`], [`ResetReason::Replaced`] |
//! | the path is back after [`Change::Waiting`] | as above, but [`Change::Resumed`] instead of [`Change::Appended`] |
//!
//! After a reset the file is read again from its first byte, so that whatever the
//! caller builds from the records equals a fresh read of the file as it is now.
//!
//! # Only complete records
//!
//! Bytes are read from the read offset up to the size just seen (never "until the
//! end"), at most [`READ_LIMIT`] bytes per poll ([`Follower::caught_up`] says
//! whether to poll again at once), and pushed into `csv_core`'s parser, which is
//! never told that the input ended: a half-written last line or a quoted field still
//! open is held until its line end arrives. The bytes of a record still open live
//! in the parser's state, so the next poll reads on from where this one stopped
//! instead of reading the open record again from its start (and the fingerprint of
//! the bytes before the read offset covers them). A record longer than the limit (an
//! unbalanced quote that swallows the rest of the file) is reported once with its
//! offset and then counted without its fields, so memory never grows with the file.

use std::fs::File;
use std::io::ErrorKind;
use std::os::unix::fs::{FileExt, MetadataExt};
use std::path::{Path, PathBuf};

use csv::ByteRecord;

pub(crate) mod records;

pub use records::{Fields, Record};
pub(crate) use records::{Handed, Out, Reader, looks_like_utf16};

/// The size of each fingerprint: the file's first bytes, and the bytes just before
/// the read offset.
pub const FINGERPRINT: usize = 4096;

/// The longest record held, in bytes. Longer ones are reported and counted without
/// their fields.
pub const RECORD_LIMIT: u64 = 1 << 20;

/// The most bytes one poll reads (so the records one poll hands out stay a few MB).
pub const READ_LIMIT: u64 = 1 << 20;

const BLOCK: usize = 64 * 1024;

/// A file's identity: the device and inode it lives on.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FileId {
    pub device: u64,
    pub inode: u64,
}

/// Why what was read before no longer stands.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ResetReason {
    /// The file became shorter than what was read.
    Truncated,
    /// The file's first bytes, or the bytes before the read offset, changed.
    Rewritten,
    /// Another file now has the name, and it does not begin with what was read.
    Replaced,
}

impl ResetReason {
    /// A stable name, for JSON and logs.
    pub fn word(self) -> &'static str {
        match self {
            ResetReason::Truncated => "truncated",
            ResetReason::Rewritten => "rewritten",
            ResetReason::Replaced => "replaced",
        }
    }
}

/// What one poll found.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Change {
    /// No new complete record.
    Nothing,
    /// The header is complete for the first time in this file; `records` follow it.
    Header {
        header: ByteRecord,
        records: Vec<Record>,
    },
    /// Complete records added at the end since the last poll.
    Appended(Vec<Record>),
    /// Start over: the file was read again from its start. `header` is `None` while
    /// the new file's header is not complete yet ([`Change::Header`] follows then).
    Reset {
        why: ResetReason,
        header: Option<ByteRecord>,
        records: Vec<Record>,
    },
    /// The path is missing: keep what was read, and wait for it to come back.
    Waiting,
    /// The path is back with the same content, and these records were added.
    Resumed(Vec<Record>),
}

/// Something worth telling the user that does not stop the reading.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Warning {
    /// A record has grown beyond the limit without ending: usually a quote opened
    /// and never closed. Its fields are dropped; it is counted when it ends.
    LongRecord { offset: u64, line: u64, limit: u64 },
    /// NUL bytes between records were skipped.
    NulBytes { offset: u64, count: u64 },
    /// A record equal to the header was skipped (two exports joined together).
    RepeatedHeader { line: u64 },
    /// Another file took the name, beginning with the same bytes; reading went on
    /// where it was.
    ReplacedButGrew,
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Warning::LongRecord {
                offset,
                line,
                limit,
            } => write!(
                f,
                "the record starting on line {line} (byte {offset}) is longer than {limit} bytes and has not ended: look for a quote that is opened and never closed"
            ),
            Warning::NulBytes { offset, count } => {
                write!(f, "skipped {count} NUL bytes between records at byte {offset}")
            }
            Warning::RepeatedHeader { line } => write!(
                f,
                "line {line} repeats the header (two exports joined?): skipped"
            ),
            Warning::ReplacedButGrew => f.write_str(
                "the file was replaced by one that begins with the same bytes: reading on from where it was",
            ),
        }
    }
}

/// Why a poll failed. A missing file is not an error ([`Change::Waiting`]).
#[derive(Debug, thiserror::Error)]
pub enum FollowError {
    #[error("{path}: the responses file looks like UTF-16 text ({why}): save it as UTF-8")]
    Utf16 { path: String, why: &'static str },
    #[error("{path}: cannot read the responses file: {error}")]
    Io { path: String, error: String },
    #[error(
        "{path}: the responses file is not a regular file (a folder, a pipe or a device): give a CSV file in source.file"
    )]
    NotAFile { path: String },
}

/// What is known of the file being read.
#[derive(Debug)]
struct Reading {
    id: FileId,
    reader: Reader,
    /// The file's first bytes, up to [`FINGERPRINT`] of them.
    head: Vec<u8>,
    /// The bytes just before the read offset, up to [`FINGERPRINT`] of them.
    tail: Vec<u8>,
    /// Whether the header was reported.
    header_told: bool,
}

/// Follows one path. See the module documentation.
#[derive(Debug)]
pub struct Follower {
    path: PathBuf,
    delimiter: u8,
    limit: u64,
    read_limit: u64,
    reading: Option<Reading>,
    missing: bool,
    caught_up: bool,
    /// The size seen at the last poll that found the file.
    size: Option<u64>,
    warnings: Vec<Warning>,
}

impl Follower {
    /// Follow `path`, a CSV file with this delimiter. Nothing is read until
    /// [`Follower::poll`].
    pub fn new(path: impl Into<PathBuf>, delimiter: u8) -> Follower {
        Follower {
            path: path.into(),
            delimiter,
            limit: RECORD_LIMIT,
            read_limit: READ_LIMIT,
            reading: None,
            missing: false,
            caught_up: true,
            size: None,
            warnings: Vec::new(),
        }
    }

    /// The same, with another record size limit (for tests of the limit).
    pub fn with_record_limit(mut self, limit: u64) -> Follower {
        self.limit = limit;
        self
    }

    /// The same, reading at most `bytes` per poll instead of [`READ_LIMIT`] (so that
    /// tests can watch a small file's first read take several polls).
    pub fn with_read_limit(mut self, bytes: u64) -> Follower {
        self.read_limit = bytes.max(1);
        self
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Whether the last poll read everything up to the size it saw. When false,
    /// poll again at once.
    pub fn caught_up(&self) -> bool {
        self.caught_up
    }

    /// Whether the path was missing at the last poll.
    pub fn waiting(&self) -> bool {
        self.missing
    }

    /// The byte offset up to which the file has been read.
    pub fn offset(&self) -> u64 {
        self.reading.as_ref().map_or(0, |r| r.reader.taken())
    }

    /// The warnings since the last call.
    pub fn take_warnings(&mut self) -> Vec<Warning> {
        std::mem::take(&mut self.warnings)
    }

    fn io(&self, error: std::io::Error) -> FollowError {
        FollowError::Io {
            path: self.path.display().to_string(),
            error: error.to_string(),
        }
    }

    /// Look at the file and say what happened since the last poll.
    pub fn poll(&mut self) -> Result<Change, FollowError> {
        let mut records = Vec::new();
        let change = self.poll_into(&mut records)?;
        Ok(match change {
            Change::Header { header, .. } => Change::Header { header, records },
            Change::Appended(_) => Change::Appended(records),
            Change::Resumed(_) => Change::Resumed(records),
            Change::Reset { why, header, .. } => Change::Reset {
                why,
                header,
                records,
            },
            other => other,
        })
    }

    /// [`Follower::poll`], handing the header and the records to `out` as they are
    /// read instead of collecting them: the change returned has no records. When the
    /// file is read again from its start, `out.start_over` is called first.
    pub(crate) fn poll_into(&mut self, out: &mut impl Out) -> Result<Change, FollowError> {
        self.caught_up = true;
        // Never open a FIFO or a device: opening a FIFO would block until a writer came.
        match std::fs::metadata(&self.path) {
            Ok(meta) if !meta.is_file() => {
                return Err(FollowError::NotAFile {
                    path: self.path.display().to_string(),
                });
            }
            _ => {}
        }
        let file = match File::open(&self.path) {
            Ok(file) => file,
            Err(e) if e.kind() == ErrorKind::NotFound => {
                let first = !self.missing;
                self.missing = true;
                return Ok(if first {
                    Change::Waiting
                } else {
                    Change::Nothing
                });
            }
            Err(e) => return Err(self.io(e)),
        };
        let meta = file.metadata().map_err(|e| self.io(e))?;
        let id = FileId {
            device: meta.dev(),
            inode: meta.ino(),
        };
        let size = meta.len();
        self.size = Some(size);
        // Back after a wait, with something read before it.
        let back = self.missing && self.reading.is_some();
        self.missing = false;

        let reset = match &self.reading {
            None => None,
            Some(reading) => {
                let same_start = reading.same_start(&file, size).map_err(|e| self.io(e))?;
                if reading.id != id {
                    if same_start {
                        self.warnings.push(Warning::ReplacedButGrew);
                        None
                    } else {
                        Some(ResetReason::Replaced)
                    }
                } else if size < reading.reader.taken() {
                    Some(ResetReason::Truncated)
                } else if !same_start {
                    Some(ResetReason::Rewritten)
                } else {
                    None
                }
            }
        };
        let mut reading = match (reset, self.reading.take()) {
            (None, Some(mut reading)) => {
                reading.id = id;
                reading
            }
            _ => Reading::new(id, self.delimiter, self.limit),
        };
        if let Some(why) = reset {
            out.start_over(why);
        }
        // An error keeps nothing of a file that cannot be read as UTF-8 CSV; the next
        // poll looks again from its start.
        let any = self.read(&mut reading, &file, size, out)?;
        let header_now = reading.reader.header().cloned();
        let told = reading.header_told;
        if header_now.is_some() {
            reading.header_told = true;
        }
        self.reading = Some(reading);
        let records = Vec::new();
        Ok(match (reset, header_now) {
            (Some(why), header) => Change::Reset {
                why,
                header,
                records,
            },
            (None, Some(header)) if !told => Change::Header { header, records },
            (None, _) if back => Change::Resumed(records),
            (None, _) if !any => Change::Nothing,
            (None, _) => Change::Appended(records),
        })
    }

    /// Read from the offset up to `size` (at most [`READ_LIMIT`] bytes), handing the
    /// records to `out`. Returns whether any record came out.
    fn read(
        &mut self,
        reading: &mut Reading,
        file: &File,
        size: u64,
        out: &mut impl Out,
    ) -> Result<bool, FollowError> {
        let mut counting = Counting { out, any: false };
        let stop = size.min(reading.reader.taken().saturating_add(self.read_limit));
        let mut buffer = vec![0u8; BLOCK];
        while reading.reader.taken() < stop {
            let at = reading.reader.taken();
            let want = usize::try_from(stop - at).unwrap_or(BLOCK).min(BLOCK);
            let got = match file.read_at(&mut buffer[..want], at) {
                Ok(0) => break, // shorter than it was a moment ago: the next poll sees it
                Ok(got) => got,
                Err(e) if e.kind() == ErrorKind::Interrupted => continue,
                Err(e) => return Err(self.io(e)),
            };
            let data = &buffer[..got];
            if reading.head.len() < 64 {
                let mut first = reading.head.clone();
                first.extend_from_slice(data.get(..64).unwrap_or(data));
                if let Some(why) = looks_like_utf16(&first) {
                    return Err(FollowError::Utf16 {
                        path: self.path.display().to_string(),
                        why,
                    });
                }
            }
            let took = reading.reader.feed(data, &mut counting, &mut self.warnings);
            reading.remember(&data[..took]);
            if took < got {
                break; // the first bytes might be a byte-order mark still arriving
            }
        }
        self.caught_up = reading.reader.taken() >= size || stop == size;
        Ok(counting.any)
    }

    /// The file's size at the last poll that found it.
    pub fn size(&self) -> Option<u64> {
        self.size
    }
}

/// An [`Out`] that notes whether any record passed through it.
struct Counting<'a, O> {
    out: &'a mut O,
    any: bool,
}

impl<O: Out> Out for Counting<'_, O> {
    fn start_over(&mut self, why: ResetReason) {
        self.out.start_over(why);
    }
    fn header(&mut self, header: &ByteRecord) {
        self.out.header(header);
    }
    fn record(&mut self, line: u64, offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        self.any = true;
        self.out.record(line, offset, fields, too_long);
    }
}

impl Reading {
    fn new(id: FileId, delimiter: u8, limit: u64) -> Reading {
        Reading {
            id,
            reader: Reader::new(delimiter, limit),
            head: Vec::new(),
            tail: Vec::new(),
            header_told: false,
        }
    }

    /// Keep the fingerprints up to date with bytes just taken.
    fn remember(&mut self, taken: &[u8]) {
        if self.head.len() < FINGERPRINT {
            let room = FINGERPRINT - self.head.len();
            self.head
                .extend_from_slice(taken.get(..room).unwrap_or(taken));
        }
        if taken.len() >= FINGERPRINT {
            self.tail.clear();
            self.tail
                .extend_from_slice(&taken[taken.len() - FINGERPRINT..]);
        } else {
            self.tail.extend_from_slice(taken);
            let excess = self.tail.len().saturating_sub(FINGERPRINT);
            self.tail.drain(..excess);
        }
    }

    /// Whether `file` (of `size` bytes) begins with what was read: it is no shorter,
    /// and both fingerprints match.
    fn same_start(&self, file: &File, size: u64) -> std::io::Result<bool> {
        let taken = self.reader.taken();
        if size < taken {
            return Ok(false);
        }
        let tail_at = taken - self.tail.len() as u64;
        Ok(bytes_at(file, 0, self.head.len())? == self.head
            && bytes_at(file, tail_at, self.tail.len())? == self.tail)
    }
}

/// Up to `len` bytes of `file` from `at` (fewer if the file is shorter).
fn bytes_at(file: &File, at: u64, len: usize) -> std::io::Result<Vec<u8>> {
    let mut bytes = vec![0u8; len];
    let mut got = 0;
    while got < len {
        match file.read_at(&mut bytes[got..], at + got as u64) {
            Ok(0) => break,
            Ok(k) => got += k,
            Err(e) if e.kind() == ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    bytes.truncate(got);
    Ok(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    fn append(path: &Path, bytes: &[u8]) {
        let mut f = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)
            .unwrap();
        f.write_all(bytes).unwrap();
    }

    fn lines(change: &Change) -> Vec<u64> {
        match change {
            Change::Appended(r) | Change::Resumed(r) => r.iter().map(|r| r.line).collect(),
            Change::Header { records, .. } | Change::Reset { records, .. } => {
                records.iter().map(|r| r.line).collect()
            }
            _ => Vec::new(),
        }
    }

    #[test]
    fn a_half_written_line_and_an_open_quote_are_held_back() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.csv");
        let mut f = Follower::new(&path, b',');
        assert_eq!(f.poll().unwrap(), Change::Waiting);
        assert_eq!(f.poll().unwrap(), Change::Nothing);
        append(&path, b"\xef\xbb");
        assert_eq!(f.poll().unwrap(), Change::Nothing);
        append(&path, b"\xbfa,b\r");
        let Change::Header { header, records } = f.poll().unwrap() else {
            panic!("expected the header");
        };
        assert_eq!(header, ByteRecord::from(vec!["a", "b"]));
        assert!(records.is_empty());
        append(&path, b"\n1,\"x\r\n");
        assert_eq!(f.poll().unwrap(), Change::Nothing);
        append(&path, b"y\"\"\"\r\n\r\n2,z");
        let change = f.poll().unwrap();
        assert_eq!(lines(&change), vec![2]);
        let Change::Appended(r) = change else {
            panic!()
        };
        assert_eq!(&r[0].fields[1], b"x\r\ny\"");
        assert_eq!(r[0].offset, 8);
        append(&path, b"\n");
        assert_eq!(lines(&f.poll().unwrap()), vec![5]);
        assert_eq!(f.offset(), std::fs::metadata(&path).unwrap().len());
    }

    #[test]
    fn utf16_is_refused_with_a_clear_message() {
        let dir = tempfile::tempdir().unwrap();
        for (name, bytes) in [
            ("bom.csv", &b"\xff\xfea\0,\0b\0\n\0"[..]),
            ("big.csv", &b"\xfe\xff\0a\0,\0b\0\n"[..]),
            ("plain.csv", &b"a\0,\0b\0\n\x001\0,\x002\0\n\0"[..]),
        ] {
            let path = dir.path().join(name);
            append(&path, bytes);
            let err = Follower::new(&path, b',').poll().unwrap_err();
            assert!(matches!(err, FollowError::Utf16 { .. }), "{name}");
            assert!(err.to_string().contains("save it as UTF-8"), "{err}");
        }
        assert_eq!(looks_like_utf16(b"a,b\n\0\0\0\0\0\0\0\0\0\x001,2\n"), None);
        assert_eq!(looks_like_utf16(b"\0\0\0\0\0a,b\n1,2\n"), None);
    }

    #[test]
    fn a_folder_is_not_followed() {
        let dir = tempfile::tempdir().unwrap();
        let err = Follower::new(dir.path(), b',').poll().unwrap_err();
        assert!(matches!(err, FollowError::NotAFile { .. }), "{err}");
    }

    #[test]
    fn nul_runs_between_records_are_skipped_and_reported() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.csv");
        append(&path, b"a,b\n1,2\n\0\0\0\0\0\0\0\0\0\0\n3,4\n");
        let mut f = Follower::new(&path, b',');
        let change = f.poll().unwrap();
        assert_eq!(lines(&change), vec![2, 4]);
        assert_eq!(
            f.take_warnings(),
            vec![Warning::NulBytes {
                offset: 8,
                count: 10
            }]
        );
    }

    #[test]
    fn a_repeated_header_is_skipped_and_reported() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.csv");
        append(&path, b"a,b\n1,2\n\xef\xbb\xbfa,b\n3,4\na,b\n");
        let mut f = Follower::new(&path, b',');
        assert_eq!(lines(&f.poll().unwrap()), vec![2, 4]);
        assert_eq!(
            f.take_warnings(),
            vec![
                Warning::RepeatedHeader { line: 3 },
                Warning::RepeatedHeader { line: 5 }
            ]
        );
    }

    #[test]
    fn an_unbalanced_quote_is_reported_once_with_its_offset() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.csv");
        append(&path, b"a,b\n1,2\n3,\"open\n");
        let mut f = Follower::new(&path, b',').with_record_limit(100);
        assert_eq!(lines(&f.poll().unwrap()), vec![2]);
        for _ in 0..20 {
            append(&path, b"4,5\n6,7\n");
            assert_eq!(f.poll().unwrap(), Change::Nothing);
        }
        assert_eq!(
            f.take_warnings(),
            vec![Warning::LongRecord {
                offset: 8,
                line: 3,
                limit: 100
            }]
        );
        append(&path, b"end\"\n8,9\n");
        let Change::Appended(r) = f.poll().unwrap() else {
            panic!()
        };
        assert_eq!(r.len(), 2);
        assert_eq!((r[0].line, r[0].too_long), (3, Some(8 + 8 * 20 + 5)));
        assert!(r[0].fields.is_empty());
        assert_eq!((r[1].line, r[1].too_long), (45, None));
        assert!(f.take_warnings().is_empty());
    }

    #[test]
    fn a_big_file_is_read_in_pieces() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.csv");
        let mut text = b"a,b\n".to_vec();
        let row = b"1234567890,1234567890\n";
        let rows = (READ_LIMIT as usize / row.len()) * 2 + 7;
        for _ in 0..rows {
            text.extend_from_slice(row);
        }
        append(&path, &text);
        let mut f = Follower::new(&path, b',');
        let mut count = lines(&f.poll().unwrap()).len();
        let mut polls = 1;
        while !f.caught_up() {
            count += lines(&f.poll().unwrap()).len();
            polls += 1;
        }
        assert_eq!(count, rows);
        assert_eq!(polls, 3);
    }
}
