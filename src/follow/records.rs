//! The push reader under the follower: bytes in, complete records out, with the line
//! each record starts on. It is never told that the input has ended, so a record is
//! only ever complete when its line end has been seen outside quotes.
//!
//! Line numbers follow `tally::tally_csv` exactly: the header is line 1; CR and LF
//! bytes between records are skipped (blank lines) and every LF consumed is counted;
//! a record's line is the line its first byte is on. On top of that, NUL bytes
//! between records are skipped too (the hole a writer leaves after a truncating
//! rotation), and a UTF-8 byte-order mark at the very start is dropped.

use csv::ByteRecord;

use super::Warning;

/// A complete record, with where it starts.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Record {
    /// The line the record starts on (the header is line 1).
    pub line: u64,
    /// The byte offset in the file where the record starts.
    pub offset: u64,
    /// The fields. Empty when the record was too long to hold (see `too_long`).
    pub fields: ByteRecord,
    /// `Some(bytes)` when the record was longer than the limit: its fields were
    /// dropped while it was read, and only its size is known.
    pub too_long: Option<u64>,
}

/// A complete record's fields, borrowed from the reader for the time of one call.
///
/// Field `i` is `bytes[start(i)..ends[i]]`, where `start(0) = 0` and
/// `start(i) = ends[i − 1] + gap`: the csv parser writes fields back to back
/// (`gap` 0), a record without quotes is split in place (`gap` 1, the delimiter).
#[derive(Clone, Copy, Debug)]
pub struct Fields<'a> {
    bytes: &'a [u8],
    ends: &'a [usize],
    gap: usize,
    /// Every byte is known to be ASCII (false: not known).
    ascii: bool,
}

impl<'a> Fields<'a> {
    /// Whether every byte of every field is known to be ASCII (a record split in
    /// place is checked as it is split; false when not known).
    pub fn known_ascii(&self) -> bool {
        self.ascii
    }

    /// Fields `first` to `last` as one run of bytes, the delimiters between them
    /// included: the record's bytes and where the run starts and ends in them. Only
    /// for a record split in place (no quotes, one delimiter between fields) and known
    /// to be ASCII, where equal runs mean equal fields; `None` for any other.
    pub(crate) fn run(&self, first: usize, last: usize) -> Option<(&'a [u8], usize, usize)> {
        if self.gap != 1 || !self.ascii {
            return None;
        }
        let start = match first.checked_sub(1) {
            None => 0,
            Some(before) => self.ends.get(before)? + 1,
        };
        let end = *self.ends.get(last)?;
        (start <= end && end <= self.bytes.len()).then_some((self.bytes, start, end))
    }

    /// The record's bytes from the first byte of `value` on, when `value` is part of
    /// them (a field, or part of one); otherwise anything (the caller checks that
    /// what it gets starts where `value` does).
    pub(crate) fn rest_from(&self, value: &[u8]) -> &'a [u8] {
        let at = (value.as_ptr() as usize).wrapping_sub(self.bytes.as_ptr() as usize);
        self.bytes.get(at..).unwrap_or_default()
    }

    /// The number of fields.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// Whether there are no fields (a record too long to hold).
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    /// Field `i`, if there is one.
    pub fn get(&self, i: usize) -> Option<&'a [u8]> {
        let end = *self.ends.get(i)?;
        let start = match i.checked_sub(1) {
            None => 0,
            Some(before) => self.ends.get(before)? + self.gap,
        };
        self.bytes.get(start..end)
    }

    /// The fields as an owned record.
    pub fn to_byte_record(&self) -> ByteRecord {
        let mut record = ByteRecord::with_capacity(self.bytes.len(), self.ends.len());
        for i in 0..self.len() {
            record.push_field(self.get(i).unwrap_or_default());
        }
        record
    }
}

/// Where the reader hands its complete records: the header once (the first record
/// of the file), then every record after it, in file order.
pub trait Out {
    /// What was read before no longer stands: the file is read again from its start
    /// (called by the follower, never by the reader).
    fn start_over(&mut self, _why: super::ResetReason) {}
    /// The header is complete.
    fn header(&mut self, _header: &ByteRecord) {}
    /// A complete record after the header: the line it starts on, its byte offset,
    /// its fields, and `Some(bytes)` when it was longer than the limit (its fields
    /// were dropped).
    fn record(&mut self, line: u64, offset: u64, fields: Fields<'_>, too_long: Option<u64>);
}

impl Out for Vec<Record> {
    fn record(&mut self, line: u64, offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        self.push(Record {
            line,
            offset,
            fields: fields.to_byte_record(),
            too_long,
        });
    }
}

const BOM: &[u8] = b"\xef\xbb\xbf";

/// Where lines handed off by [`Reader::hand_off`] start.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct Handed {
    line: u64,
    taken: u64,
}

/// The state of reading one file from its first byte.
#[derive(Debug)]
pub(crate) struct Reader {
    csv: csv_core::Reader,
    /// Bytes of the file taken so far: every byte before this offset has been seen.
    taken: u64,
    /// The line of the next byte.
    line: u64,
    /// Whether the start of the file has been checked for a byte-order mark.
    bom_checked: bool,
    /// A record has begun and not yet ended.
    in_record: bool,
    start_line: u64,
    start_offset: u64,
    /// Input bytes of the record being read so far.
    pending: u64,
    limit: u64,
    /// The record being read is past the limit: its output is being dropped.
    dropping: bool,
    fields: Vec<u8>,
    ends: Vec<usize>,
    out: usize,
    end: usize,
    header: Option<ByteRecord>,
    /// The bytes of the header's fields, together.
    header_bytes: usize,
    /// A run of NUL bytes between records: where it began and how long it is so far.
    nul_run: Option<(u64, u64)>,
    /// The delimiter, when records without quotes may be split in place (it is not
    /// the quote or a line end).
    split_on: Option<u8>,
    /// The field ends of a record split in place.
    split_ends: Vec<usize>,
}

impl Reader {
    pub(crate) fn new(delimiter: u8, limit: u64) -> Reader {
        Reader {
            csv: csv_core::ReaderBuilder::new().delimiter(delimiter).build(),
            taken: 0,
            line: 1,
            bom_checked: false,
            in_record: false,
            start_line: 1,
            start_offset: 0,
            pending: 0,
            limit,
            dropping: false,
            fields: vec![0; 1024],
            ends: vec![0; 64],
            out: 0,
            end: 0,
            header: None,
            header_bytes: 0,
            nul_run: None,
            split_on: (!matches!(delimiter, b'"' | b'\r' | b'\n')).then_some(delimiter),
            split_ends: Vec::with_capacity(64),
        }
    }

    /// Bytes of the file taken so far.
    pub(crate) fn taken(&self) -> u64 {
        self.taken
    }

    /// The header, once its record is complete.
    pub(crate) fn header(&self) -> Option<&ByteRecord> {
        self.header.as_ref()
    }

    /// Hand the whole lines at the front of `data` (the bytes that follow those
    /// taken) to another reader (see [`Reader::for_hand_offs`]), which gives exactly
    /// what this one would (records and warnings), when there are such lines (see
    /// [`Reader::whole_lines`]). Every record among them is split in place and ends
    /// before their last LF, and any run of NUL bytes between them ends there too,
    /// so this reader's only change would be the bytes and lines taken; it takes
    /// them (see [`Reader::taken`]) and returns how many bytes they are and where
    /// they start, for the other reader ([`Reader::resume`]). `None`, with nothing
    /// taken, otherwise.
    pub(crate) fn hand_off(&mut self, data: &[u8]) -> Option<(usize, Handed)> {
        let cut = self.whole_lines(data)?;
        let lines = data.get(..cut)?;
        let start = Handed {
            line: self.line,
            taken: self.taken,
        };
        self.taken += cut as u64;
        self.line += memchr::memchr_iter(b'\n', lines).count() as u64;
        Some((cut, start))
    }

    /// How many bytes at the front of `data` (the bytes that follow those taken) are
    /// whole lines that hold no quote: up to the last LF before any quote. `None`
    /// unless the header is known, no record or run of NUL bytes is open, records
    /// may be split in place and there is such an LF. Every record among those
    /// lines splits in place (see [`Reader::split_in_place`]).
    fn whole_lines(&self, data: &[u8]) -> Option<usize> {
        self.split_on?;
        if self.in_record || self.nul_run.is_some() || !self.bom_checked || self.header.is_none() {
            return None;
        }
        let before = memchr::memchr(b'"', data).map_or(data, |q| data.get(..q).unwrap_or_default());
        Some(memchr::memrchr(b'\n', before)? + 1)
    }

    /// A reader for the lines this one hands off (see [`Reader::hand_off`]): the same
    /// settings and header (`None` before the header is known).
    pub(crate) fn for_hand_offs(&self) -> Option<Reader> {
        let mut other = Reader::new(self.split_on?, self.limit);
        other.bom_checked = true;
        other.header = Some(self.header.clone()?);
        other.header_bytes = self.header_bytes;
        Some(other)
    }

    /// Read lines handed off at `start` next (between records, as they start).
    pub(crate) fn resume(&mut self, start: Handed) {
        self.line = start.line;
        self.taken = start.taken;
        self.in_record = false;
    }

    /// Take the bytes that follow those already taken. The header and the complete
    /// records after it go to `out`; a record equal to the header is skipped and noted.
    /// Returns how many bytes were taken: all of them, except at the very start of
    /// the file while fewer bytes than a byte-order mark have arrived and they could
    /// still be one (then none).
    pub(crate) fn feed(
        &mut self,
        mut data: &[u8],
        out: &mut impl Out,
        warnings: &mut Vec<Warning>,
    ) -> usize {
        let given = data.len();
        if !self.bom_checked {
            if data.len() < BOM.len() && BOM.starts_with(data) {
                return 0;
            }
            self.bom_checked = true;
            if data.starts_with(BOM) {
                data = &data[BOM.len()..];
                self.taken += BOM.len() as u64;
            }
        }
        while !data.is_empty() {
            if !self.in_record {
                // The usual case, one LF before the next record, without the loop below.
                if self.nul_run.is_none()
                    && let [b'\n', next, ..] = data
                    && !matches!(next, b'\r' | b'\n' | 0)
                {
                    self.line += 1;
                    self.taken += 1;
                    data = &data[1..];
                } else {
                    let skip = data
                        .iter()
                        .take_while(|&&b| matches!(b, b'\r' | b'\n' | 0))
                        .count();
                    for &b in &data[..skip] {
                        if b == 0 {
                            let offset = self.taken;
                            let run = self.nul_run.get_or_insert((offset, 0));
                            run.1 += 1;
                        } else {
                            self.end_nul_run(warnings);
                            if b == b'\n' {
                                self.line += 1;
                            }
                        }
                        self.taken += 1;
                    }
                    data = &data[skip..];
                    if data.is_empty() {
                        break;
                    }
                    self.end_nul_run(warnings);
                }
                if let Some(len) = self.split_in_place(data, out, warnings) {
                    data = &data[len..];
                    continue;
                }
                self.in_record = true;
                self.start_line = self.line;
                self.start_offset = self.taken;
                self.pending = 0;
                self.dropping = false;
                self.out = 0;
                self.end = 0;
            }
            let (result, nin, nout, nend) = self.csv.read_record(
                data,
                &mut self.fields[self.out..],
                &mut self.ends[self.end..],
            );
            let consumed = data.get(..nin).unwrap_or_default();
            self.line += consumed.iter().filter(|&&b| b == b'\n').count() as u64;
            self.taken += nin as u64;
            self.pending += nin as u64;
            data = data.get(nin..).unwrap_or_default();
            self.out += nout;
            self.end += nend;
            if self.pending > self.limit && !self.dropping {
                self.dropping = true;
                warnings.push(Warning::LongRecord {
                    offset: self.start_offset,
                    line: self.start_line,
                    limit: self.limit,
                });
            }
            self.after_read(result, out, warnings);
        }
        given - data.len()
    }

    /// The input has ended (a one-shot read of a finished file): a last record
    /// without a line end is complete after all. Nothing happens if no record is open.
    pub(crate) fn finish(&mut self, out: &mut impl Out, warnings: &mut Vec<Warning>) {
        self.end_nul_run(warnings);
        while self.in_record {
            let (result, _, nout, nend) = self.csv.read_record(
                &[],
                &mut self.fields[self.out..],
                &mut self.ends[self.end..],
            );
            self.out += nout;
            self.end += nend;
            if matches!(
                result,
                csv_core::ReadRecordResult::InputEmpty | csv_core::ReadRecordResult::End
            ) {
                self.in_record = false;
            } else {
                self.after_read(result, out, warnings);
            }
        }
    }

    /// The fast way through a record that starts at `data[0]`: when its line end is
    /// in `data` and no quote comes before it, the csv parser would give exactly the
    /// bytes between the delimiters, so split them in place. The record ends at the
    /// first CR or LF, as it does for the parser (which treats CR, LF and CRLF alike);
    /// the line end itself is left for the skip of line ends between records. The
    /// parser is not involved, and its state after the previous record (between
    /// records) stays right for the next one. Returns the record's length, or `None`
    /// to leave the record to the parser.
    fn split_in_place(
        &mut self,
        data: &[u8],
        out: &mut impl Out,
        warnings: &mut Vec<Warning>,
    ) -> Option<usize> {
        let delimiter = self.split_on?;
        let mut ends = std::mem::take(&mut self.split_ends);
        ends.clear();
        let found = split_line(data, delimiter, &mut ends);
        let (len, ascii) = match found {
            // The parser counts the line end in a record's length too.
            Some((len, ascii)) if (len as u64) < self.limit => (len, ascii),
            _ => {
                self.split_ends = ends;
                return None;
            }
        };
        let line = &data[..len];
        ends.push(len);
        self.start_line = self.line;
        self.start_offset = self.taken;
        self.taken += len as u64;
        let fields = Fields {
            bytes: line,
            ends: &ends,
            gap: 1,
            ascii,
        };
        self.complete(fields, None, out, warnings);
        self.split_ends = ends;
        Some(len)
    }

    /// What to do after one call of the csv parser: grow the output buffers (or, for
    /// a record past the limit, drop what it wrote), or complete the record.
    fn after_read(
        &mut self,
        result: csv_core::ReadRecordResult,
        out: &mut impl Out,
        warnings: &mut Vec<Warning>,
    ) {
        use csv_core::ReadRecordResult as Read;
        match result {
            Read::InputEmpty | Read::End => {}
            Read::OutputFull if self.dropping => self.out = 0,
            Read::OutputEndsFull if self.dropping => self.end = 0,
            Read::OutputFull => {
                let len = self.fields.len();
                self.fields.resize(len * 2, 0);
            }
            Read::OutputEndsFull => {
                let len = self.ends.len();
                self.ends.resize(len * 2, 0);
            }
            Read::Record => self.finish_record(out, warnings),
        }
    }

    fn end_nul_run(&mut self, warnings: &mut Vec<Warning>) {
        if let Some((offset, count)) = self.nul_run.take() {
            warnings.push(Warning::NulBytes { offset, count });
        }
    }

    fn finish_record(&mut self, out: &mut impl Out, warnings: &mut Vec<Warning>) {
        self.in_record = false;
        let too_long = self.dropping.then_some(self.pending);
        let (out_len, end_len) = if self.dropping {
            (0, 0)
        } else {
            (self.out, self.end)
        };
        self.dropping = false;
        self.out = 0;
        self.end = 0;
        let fields = std::mem::take(&mut self.fields);
        let ends = std::mem::take(&mut self.ends);
        let view = Fields {
            bytes: fields.get(..out_len).unwrap_or_default(),
            ends: ends.get(..end_len).unwrap_or_default(),
            gap: 0,
            ascii: false,
        };
        self.complete(view, too_long, out, warnings);
        self.fields = fields;
        self.ends = ends;
    }

    /// A record is complete: it is the header, a repeat of the header, or a record.
    fn complete(
        &mut self,
        fields: Fields<'_>,
        too_long: Option<u64>,
        out: &mut impl Out,
        warnings: &mut Vec<Warning>,
    ) {
        let Some(header) = &self.header else {
            let header = fields.to_byte_record();
            out.header(&header);
            self.header_bytes = header.as_slice().len();
            self.header = Some(header);
            return;
        };
        if too_long.is_none() && same_as_header(&fields, header, self.header_bytes) {
            warnings.push(Warning::RepeatedHeader {
                line: self.start_line,
            });
            return;
        }
        out.record(self.start_line, self.start_offset, fields, too_long);
    }
}

/// The first CR or LF in `data`, having pushed on `ends` the position of every
/// delimiter before it, and whether every byte before it is ASCII; `None` when a
/// quote comes first or there is no line end (`ends` then holds nothing of use).
///
/// On x86-64 the bytes are looked at thirty-two at a time, as two halves of sixteen
/// with SSE2 (part of every x86-64 processor; through `safe_arch`'s safe calls): one
/// pass gives, for each thirty-two bytes, which are line ends, quotes, delimiters and
/// bytes beyond ASCII.
/// Elsewhere [`split_line_by_words`] does the same with memchr and eight bytes at a
/// time. The tests hold both to a byte-by-byte scan.
#[cfg(target_arch = "x86_64")]
fn split_line(data: &[u8], delimiter: u8, ends: &mut Vec<usize>) -> Option<(usize, bool)> {
    use safe_arch::{
        bitor_m128i, cmp_eq_mask_i8_m128i, load_unaligned_m128i, m128i, move_mask_i8_m128i,
        set_splat_i8_m128i,
    };
    let splat = |b: u8| set_splat_i8_m128i(b as i8);
    let (lf, cr, quote, delim) = (splat(b'\n'), splat(b'\r'), splat(b'"'), splat(delimiter));
    // Bits of the bytes before the line end that are beyond ASCII, so far.
    let mut high = 0u32;
    // Thirty-two bytes from `base` (of which the `valid` bits are data), as two halves
    // of sixteen: the answer once the line end or a quote is among them.
    let mut block = |bytes: &[u8; 32], base: usize, valid: u32| {
        let (first, second) = bytes.split_at(16);
        let (a, b) = (
            load_unaligned_m128i(first.try_into().ok()?),
            load_unaligned_m128i(second.try_into().ok()?),
        );
        // One bit a byte, the first half's in the low bits.
        let mask = |x: m128i, y: m128i| {
            (move_mask_i8_m128i(x) as u32 | (move_mask_i8_m128i(y) as u32) << 16) & valid
        };
        let eq = cmp_eq_mask_i8_m128i;
        let stop = mask(
            bitor_m128i(eq(a, lf), eq(a, cr)),
            bitor_m128i(eq(b, lf), eq(b, cr)),
        );
        // The bytes before the line end, if it is among these.
        let before = match stop {
            0 => valid,
            _ => (1u32 << stop.trailing_zeros()) - 1,
        };
        if mask(eq(a, quote), eq(b, quote)) & before != 0 {
            return Some(None);
        }
        let mut hits = mask(eq(a, delim), eq(b, delim)) & before;
        while hits != 0 {
            ends.push(base + hits.trailing_zeros() as usize);
            hits &= hits - 1;
        }
        high |= mask(a, b) & before;
        (stop != 0).then(|| Some((base + stop.trailing_zeros() as usize, high == 0)))
    };
    let mut base = 0;
    while let Some(bytes) = data.get(base..base + 32) {
        if let Ok(bytes) = bytes.try_into()
            && let Some(found) = block(bytes, base, u32::MAX)
        {
            return found;
        }
        base += 32;
    }
    let rest = data.get(base..).unwrap_or_default();
    let mut padded = [0u8; 32];
    padded.get_mut(..rest.len())?.copy_from_slice(rest);
    block(&padded, base, (1u32 << rest.len()) - 1).flatten()
}

#[cfg(not(target_arch = "x86_64"))]
fn split_line(data: &[u8], delimiter: u8, ends: &mut Vec<usize>) -> Option<(usize, bool)> {
    split_line_by_words(data, delimiter, ends)
}

/// [`split_line`] without SSE2: the line end and the quote are found by memchr's
/// search; the delimiters of the line eight bytes at a time, each word's bytes equal
/// to the delimiter found together (exactly: no false matches) and visited in order.
#[cfg(any(test, not(target_arch = "x86_64")))]
fn split_line_by_words(data: &[u8], delimiter: u8, ends: &mut Vec<usize>) -> Option<(usize, bool)> {
    let len = memchr::memchr2(b'\n', b'\r', data)?;
    let line = data.get(..len)?;
    if memchr::memchr(b'"', line).is_some() {
        return None;
    }
    let d = u64::from_ne_bytes([delimiter; 8]);
    let mut words = line.chunks_exact(8);
    let mut base = 0;
    let mut high = 0u64;
    for word in &mut words {
        let mut bytes = [0u8; 8];
        bytes.copy_from_slice(word);
        let w = u64::from_le_bytes(bytes);
        high |= w;
        // The top bit of each byte equal to the delimiter, and no other bit.
        const LOW7: u64 = 0x7f7f_7f7f_7f7f_7f7f;
        let x = w ^ d;
        let mut hits = !(((x & LOW7).wrapping_add(LOW7)) | x | LOW7);
        while hits != 0 {
            ends.push(base + (hits.trailing_zeros() / 8) as usize);
            hits &= hits - 1;
        }
        base += 8;
    }
    for (i, &b) in words.remainder().iter().enumerate() {
        high |= u64::from(b);
        if b == delimiter {
            ends.push(base + i);
        }
    }
    Some((len, high & 0x8080_8080_8080_8080 == 0))
}

/// Whether a record repeats the header (a second export appended to the first,
/// perhaps with its own byte-order mark).
/// `header_bytes` is the bytes of the header's fields together.
fn same_as_header(record: &Fields<'_>, header: &ByteRecord, header_bytes: usize) -> bool {
    // The bytes of the fields, together: the header's, or 3 more with a byte-order mark.
    let total = match record.ends.last() {
        Some(&last) => last - record.gap * (record.ends.len() - 1),
        None => 0,
    };
    (total == header_bytes || total == header_bytes + BOM.len())
        && record.len() == header.len()
        && header.iter().enumerate().all(|(i, theirs)| {
            let mine = record.get(i).unwrap_or_default();
            let mine = if i == 0 {
                mine.strip_prefix(BOM).unwrap_or(mine)
            } else {
                mine
            };
            mine == theirs
        })
}

/// Why the first bytes of a file look like UTF-16 text, if they do: a UTF-16
/// byte-order mark, or NUL bytes standing alone between other bytes (as every other
/// byte of UTF-16 text in a Latin script is) after any leading run of NULs.
pub(crate) fn looks_like_utf16(first: &[u8]) -> Option<&'static str> {
    if first.starts_with(b"\xff\xfe") || first.starts_with(b"\xfe\xff") {
        return Some("it begins with a UTF-16 byte-order mark");
    }
    let start = first.iter().take_while(|&&b| b == 0).count();
    let window = first.get(start..).unwrap_or_default();
    let window = window.get(..64).unwrap_or(window);
    let lone = (0..window.len())
        .filter(|&i| {
            window[i] == 0
                && (i == 0 || window[i - 1] != 0)
                && window.get(i + 1).is_none_or(|&b| b != 0)
        })
        .count();
    if window.len() >= 4 && lone >= 2 && lone * 4 >= window.len() {
        Some("every other byte of its first line is a NUL byte")
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use super::{Reader, Record, Warning, split_line, split_line_by_words};
    use proptest::prelude::*;

    /// What `split_line` must give, byte by byte.
    fn plain(data: &[u8], delimiter: u8) -> (Option<(usize, bool)>, Vec<usize>) {
        let mut ends = Vec::new();
        for (i, &b) in data.iter().enumerate() {
            match b {
                b'\n' | b'\r' => return (Some((i, data[..i].is_ascii())), ends),
                b'"' => return (None, ends),
                _ if b == delimiter => ends.push(i),
                _ => {}
            }
        }
        (None, Vec::new())
    }

    /// `text` fed to one reader in the pieces that end at `cuts`: its records and
    /// warnings, and the reader.
    fn read_in_pieces(
        text: &[u8],
        cuts: &[usize],
        limit: u64,
    ) -> (Vec<Record>, Vec<Warning>, Reader) {
        let (mut reader, mut records, mut warnings) =
            (Reader::new(b',', limit), Vec::new(), Vec::new());
        let mut from = 0;
        for &cut in cuts {
            from += reader.feed(&text[from..cut], &mut records, &mut warnings);
        }
        reader.finish(&mut records, &mut warnings);
        (records, warnings, reader)
    }

    /// `text` read as the one-shot read reads it: each piece up to its last LF (the
    /// rest waits for the next piece, except after the last), handed off whenever the
    /// reader may (to a second reader, see `Reader::for_hand_offs`), else fed to the
    /// reader. The records and warnings of both in order, the first reader, and how
    /// many hand-offs.
    fn read_handing_off(
        text: &[u8],
        cuts: &[usize],
        limit: u64,
    ) -> Result<(Vec<Record>, Vec<Warning>, Reader, usize), TestCaseError> {
        let (mut main, mut other) = (Reader::new(b',', limit), None);
        let (mut records, mut warnings, mut handed) = (Vec::new(), Vec::new(), 0);
        let mut from = 0;
        for (i, &cut) in cuts.iter().enumerate() {
            let data = &text[from..cut];
            let whole = match i + 1 == cuts.len() {
                true => data.len(),
                false => data
                    .iter()
                    .rposition(|&b| b == b'\n')
                    .map_or(data.len(), |i| i + 1),
            };
            let data = &data[..whole];
            if other.is_none() {
                other = main.for_hand_offs();
            }
            let gave = match (main.hand_off(data), other.as_mut()) {
                (Some((n, start)), Some(reader)) => {
                    reader.resume(start);
                    prop_assert_eq!(reader.feed(&data[..n], &mut records, &mut warnings), n);
                    handed += 1;
                    n
                }
                (Some(_), None) => return Err(TestCaseError::fail("handed off before the header")),
                (None, _) => 0,
            };
            from += gave + main.feed(&data[gave..], &mut records, &mut warnings);
        }
        main.finish(&mut records, &mut warnings);
        Ok((records, warnings, main, handed))
    }

    #[test]
    fn plain_lines_are_handed_off_and_a_quote_keeps_its_piece() {
        let mut text = b"h1,h2\n".to_vec();
        let mut cuts = Vec::new();
        for i in 0..40 {
            match i {
                7 => text.extend_from_slice(b"\"a\nb\",1\n"),
                _ => text.extend_from_slice(format!("r{i},{i}\n").as_bytes()),
            }
            cuts.push(text.len());
        }
        let (want, _, _) = read_in_pieces(&text, &cuts, 1 << 20);
        let (got, _, _, handed) = read_handing_off(&text, &cuts, 1 << 20).unwrap();
        assert_eq!(got, want);
        assert_eq!(want.len(), 40);
        // Every piece after the header's but the one with the quote.
        assert_eq!(handed, 38);
        // The quoted record spans lines 9 and 10; the next starts on line 11.
        assert_eq!(
            (want[8].line, got[8].line, want[8].offset),
            (11, 11, got[8].offset)
        );
    }

    /// Both splitters give what the byte-by-byte scan gives.
    fn agrees(data: &[u8], delimiter: u8) -> Result<(), TestCaseError> {
        let (want, want_ends) = plain(data, delimiter);
        for split in [split_line, split_line_by_words] {
            let mut ends = Vec::new();
            let found = split(data, delimiter, &mut ends);
            prop_assert_eq!(found, want);
            if found.is_some() {
                prop_assert_eq!(&ends, &want_ends);
            }
        }
        Ok(())
    }

    proptest! {
        /// Bytes drawn mostly from the ones that matter (and their neighbours, and
        /// bytes with the top bit set, which a word-at-a-time search can confuse):
        /// the same line end and the same delimiters as a byte-by-byte scan.
        #[test]
        fn split_line_equals_a_byte_by_byte_scan(
            data in proptest::collection::vec(
                prop_oneof![
                    Just(b','), Just(b';'), Just(b'\t'), Just(b'"'), Just(b'\n'),
                    Just(b'\r'), Just(b'+'), Just(b'-'), Just(0u8), Just(0x80u8),
                    Just(0xacu8), Just(0xffu8), any::<u8>(), 0x61u8..0x7b,
                ],
                0..120,
            ),
            delimiter in prop_oneof![Just(b','), Just(b';'), Just(b'\t'), Just(0u8), Just(0xacu8)],
        ) {
            agrees(&data, delimiter)?;
        }

        /// Lines handed off (see `Reader::hand_off`) and fed to the reader for hand-offs
        /// give exactly the records (lines, offsets, fields, sizes) and warnings that one
        /// reader fed every byte gives, and the same bytes and lines taken; whatever the text
        /// (quotes with line ends inside, CR, CRLF, blank lines, NUL bytes, repeated
        /// headers, a byte-order mark) and however it arrives. The pieces are cut as
        /// the one-shot read cuts them (an incomplete line waits for the next piece).
        #[test]
        fn handed_off_lines_read_as_one_reader_reads_them(
            pieces in proptest::collection::vec(
                proptest::collection::vec(
                    prop_oneof![
                        4 => Just(&b"a,b\n"[..]), 4 => Just(&b"1,x\n"[..]),
                        2 => Just(&b"22,yy,z\r\n"[..]), 1 => Just(&b"\"q\n,\"\"\",3\n"[..]),
                        1 => Just(&b"\r"[..]), 1 => Just(&b"\n"[..]), 1 => Just(&b"\0\0"[..]),
                        1 => Just(&b"h1,h2\n"[..]), 1 => Just(&b"\xc3\xa9,\n"[..]),
                        1 => Just(&b"4,"[..]), 1 => Just(&b"\""[..]),
                    ],
                    0..12,
                ),
                1..12,
            ),
            bom in any::<bool>(),
            limit in prop_oneof![Just(1u64 << 20), Just(12u64)],
        ) {
            let mut text: Vec<u8> = match bom {
                true => b"\xef\xbb\xbfh1,h2\n".to_vec(),
                false => b"h1,h2\n".to_vec(),
            };
            let mut cuts = Vec::new();
            for piece in &pieces {
                text.extend(piece.iter().flat_map(|p| p.iter()));
                cuts.push(text.len());
            }
            let (want, want_warnings, one) = read_in_pieces(&text, &cuts, limit);
            let (got, warnings, main, _) = read_handing_off(&text, &cuts, limit)?;
            prop_assert_eq!(&got, &want);
            prop_assert_eq!(&warnings, &want_warnings);
            prop_assert_eq!((main.taken(), main.line), (one.taken(), one.line));
            prop_assert_eq!(main.taken(), text.len() as u64);
        }

        /// Long lines (several blocks of thirty-two and words of eight) with at most one
        /// line end or quote, anywhere.
        #[test]
        fn long_lines_split_as_byte_by_byte(
            mut data in proptest::collection::vec(
                prop_oneof![Just(b','), Just(b';'), Just(0xc3u8), 0x20u8..0x7f],
                0..100,
            ),
            stop in prop_oneof![Just(b'\n'), Just(b'\r'), Just(b'"'), Just(b'x')],
            at in 0usize..110,
            delimiter in prop_oneof![Just(b','), Just(b';')],
        ) {
            data.insert(at.min(data.len()), stop);
            agrees(&data, delimiter)?;
        }
    }
}
