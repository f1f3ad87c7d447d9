//! Turning one CSV record into a response, or a rejection with its line and reason.
//! Knows nothing of files or statistics: it sees one record at a time.

use std::fmt;

/// Which column holds what, resolved once from the study and the CSV header.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Layout {
    /// Fields a record must have (the header's width).
    pub width: usize,
    /// The columns whose values make up the cell, in the study's `cells.by` order.
    pub cells: Vec<usize>,
    /// One rule per measure, in the study's order.
    pub measures: Vec<MeasureRule>,
    pub id: Option<usize>,
    pub time: Option<usize>,
    pub weight: Option<usize>,
}

impl Layout {
    /// The columns the study reads (cells, answers, id, weight, time), each once, in
    /// header order.
    pub fn used_columns(&self) -> Vec<usize> {
        let mut used: Vec<usize> = self
            .cells
            .iter()
            .copied()
            .chain(self.measures.iter().map(|m| m.column))
            .chain(self.id)
            .chain(self.weight)
            .chain(self.time)
            .collect();
        used.sort_unstable();
        used.dedup();
        used
    }
}

/// How one measure reads its column.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MeasureRule {
    pub column: usize,
    /// Answers counted as yes, normalised with [`normalise`].
    pub yes: Vec<String>,
    /// Answers counted as no, normalised with [`normalise`].
    pub no: Vec<String>,
}

/// What one answer counts as.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Answer {
    Yes,
    No,
    /// Blank: not in the denominator.
    Missing,
    /// A value that is neither yes nor no: not in the denominator, reported.
    Unexpected,
}

/// The form in which answers and cell values are compared: surrounding white space
/// removed, letters lower-cased.
pub fn normalise(raw: &str) -> String {
    raw.trim().to_lowercase()
}

impl MeasureRule {
    /// Classify one raw answer (trimmed, case ignored).
    pub fn classify(&self, raw: &str) -> Answer {
        let trimmed = raw.trim();
        if trimmed.is_empty() {
            return Answer::Missing;
        }
        let matches = |list: &[String]| {
            list.iter()
                .any(|v| v.as_str() == trimmed || *v == trimmed.to_lowercase())
        };
        if matches(&self.yes) {
            Answer::Yes
        } else if matches(&self.no) {
            Answer::No
        } else {
            Answer::Unexpected
        }
    }
}

/// One accepted record: the raw values it holds, read through a [`Layout`].
///
/// Values are borrowed from the record, trimmed of surrounding white space and
/// otherwise kept as given: they are untrusted text, and escaping them is the
/// display's job.
#[derive(Clone, Debug, PartialEq)]
pub struct Response<'a> {
    /// The cell values, in the layout's `cells` order.
    pub cell: Vec<&'a str>,
    /// One answer per measure, in the layout's order, with the raw trimmed value.
    pub answers: Vec<(Answer, &'a str)>,
    /// The design weight: finite and 0 or more; 1.0 without a weight column.
    pub weight: f64,
    /// The respondent id, trimmed; `None` without an id column or when blank.
    pub id: Option<&'a [u8]>,
    /// The arrival time; `None` without a time column or when blank.
    pub time: Option<jiff::Timestamp>,
}

/// A record that could not be read, with the line it starts on.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Rejection {
    /// The line of the file on which the record starts (1-based).
    pub line: u64,
    pub reason: Reason,
}

/// Why a record was rejected. The values are kept as given; [`fmt::Display`]
/// escapes control characters and shortens long values.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Reason {
    /// The record does not have one field per header column.
    FieldCount { expected: usize, found: usize },
    /// A column the study reads is not valid UTF-8 (1-based column number).
    NotUtf8 { column: usize },
    /// The weight is blank or not a finite number (the raw trimmed value).
    BadWeight(String),
    /// The weight is a number below 0 (the raw trimmed value).
    NegativeWeight(String),
    /// The time is not an RFC 3339 timestamp (the raw trimmed value).
    BadTime(String),
    /// The record is longer than a follower holds (its size in bytes); usually a
    /// quote that was opened and never closed.
    TooLong { bytes: u64 },
}

impl Reason {
    /// A stable name for the kind of problem, for JSON and CSV outputs.
    pub fn kind(&self) -> &'static str {
        match self {
            Reason::FieldCount { .. } => "field_count",
            Reason::NotUtf8 { .. } => "not_utf8",
            Reason::BadWeight(_) => "bad_weight",
            Reason::NegativeWeight(_) => "negative_weight",
            Reason::BadTime(_) => "bad_time",
            Reason::TooLong { .. } => "too_long",
        }
    }
}

/// The longest a quoted value may be in a message, in characters, before it is cut
/// short with an ellipsis.
pub const QUOTE_LIMIT: usize = 60;

/// A value made safe to show inside a message: control characters and the
/// characters that reorder or hide text (bidirectional controls, zero-width marks,
/// the byte-order mark) become `\u{…}` escapes, and a value longer than
/// [`QUOTE_LIMIT`] characters is cut short with `…`.
pub fn quote_safely(raw: &str) -> String {
    shown_safely(raw, QUOTE_LIMIT)
}

/// [`quote_safely`] with a length limit of `limit` characters (escapes included).
pub fn shown_safely(raw: &str, limit: usize) -> String {
    let mut out = String::new();
    let mut shown = 0;
    for c in raw.chars() {
        let piece = if hides_or_controls(c) {
            format!("\\u{{{:x}}}", c as u32)
        } else {
            c.to_string()
        };
        let width = piece.chars().count();
        if shown + width > limit {
            out.push('…');
            return out;
        }
        shown += width;
        out.push_str(&piece);
    }
    out
}

fn hides_or_controls(c: char) -> bool {
    c.is_control()
        || matches!(c,
            '\u{200b}'..='\u{200f}' // zero-width marks, left-to-right and right-to-left marks
            | '\u{2028}' | '\u{2029}' // line and paragraph separators
            | '\u{202a}'..='\u{202e}' // bidirectional embeddings and overrides
            | '\u{2060}'..='\u{2064}' // word joiner and invisible operators
            | '\u{2066}'..='\u{2069}' // bidirectional isolates
            | '\u{feff}') // byte-order mark
}

impl fmt::Display for Reason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Reason::FieldCount { expected, found } => write!(
                f,
                "found {found} {fields} where the header has {expected}: each record needs one value per column",
                fields = if *found == 1 { "field" } else { "fields" },
            ),
            Reason::NotUtf8 { column } => write!(
                f,
                "column {column} is not valid UTF-8 text: save the file as UTF-8"
            ),
            Reason::BadWeight(raw) if raw.is_empty() => {
                f.write_str("weight is blank: weights must be numbers, 0 or more")
            }
            Reason::BadWeight(raw) => write!(
                f,
                "weight '{}' is not a finite number: weights must be numbers, 0 or more",
                quote_safely(raw)
            ),
            Reason::NegativeWeight(raw) => write!(
                f,
                "weight '{}' is negative: weights must be 0 or more",
                quote_safely(raw)
            ),
            Reason::BadTime(raw) => write!(
                f,
                "time '{}' is not an RFC 3339 timestamp: write times with an offset, such as 2026-05-01T09:30:00Z",
                quote_safely(raw)
            ),
            Reason::TooLong { bytes } => write!(
                f,
                "the record is {bytes} bytes long, more than a record may be: look for a quote that is opened and never closed"
            ),
        }
    }
}

impl fmt::Display for Rejection {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}: {}", self.line, self.reason)
    }
}

impl std::error::Error for Rejection {}

/// Read one record through `layout`: the response it holds, or why it cannot be
/// counted. `line` is the line the record starts on, for the rejection.
///
/// Checks, in this order: the field count (the reader must be `flexible` so that a
/// short or long record arrives here instead of stopping the read); that every
/// column the layout reads is UTF-8 (the leftmost bad one is named); the weight
/// (finite, 0 or more, not blank); the time (RFC 3339 with an offset, as
/// `jiff::Timestamp` parses it; blank is no time, not an error). Columns the layout
/// does not read are not looked at.
pub fn read_record<'a>(
    layout: &Layout,
    record: &'a csv::ByteRecord,
    line: u64,
) -> Result<Response<'a>, Rejection> {
    let reject = |reason| Rejection { line, reason };
    if record.len() != layout.width {
        return Err(reject(Reason::FieldCount {
            expected: layout.width,
            found: record.len(),
        }));
    }
    for column in layout.used_columns() {
        match record.get(column) {
            None => {
                // Only a layout whose columns lie beyond its width reaches here.
                return Err(reject(Reason::FieldCount {
                    expected: column + 1,
                    found: record.len(),
                }));
            }
            Some(bytes) if std::str::from_utf8(bytes).is_err() => {
                return Err(reject(Reason::NotUtf8 { column: column + 1 }));
            }
            Some(_) => {}
        }
    }
    // Every used column is present and UTF-8 from here on.
    let text = |column: usize| -> &'a str {
        record
            .get(column)
            .and_then(|b| std::str::from_utf8(b).ok())
            .map_or("", str::trim)
    };
    let weight = match layout.weight {
        None => 1.0,
        Some(column) => parse_weight(text(column)).map_err(reject)?,
    };
    let time = match layout.time.map(text) {
        None | Some("") => None,
        Some(raw) => Some(
            raw.parse::<jiff::Timestamp>()
                .map_err(|_| reject(Reason::BadTime(raw.to_string())))?,
        ),
    };
    let id = layout
        .id
        .map(text)
        .filter(|raw| !raw.is_empty())
        .map(str::as_bytes);
    Ok(Response {
        cell: layout.cells.iter().map(|&c| text(c)).collect(),
        answers: layout
            .measures
            .iter()
            .map(|m| {
                let raw = text(m.column);
                (m.classify(raw), raw)
            })
            .collect(),
        weight,
        id,
        time,
    })
}

pub(crate) fn parse_weight(raw: &str) -> Result<f64, Reason> {
    match raw.parse::<f64>() {
        Ok(w) if w.is_finite() && w >= 0.0 => Ok(w + 0.0), // −0 becomes 0
        Ok(w) if w.is_finite() => Err(Reason::NegativeWeight(raw.to_string())),
        _ => Err(Reason::BadWeight(raw.to_string())),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn answers_are_matched_trimmed_and_without_case() {
        let rule = MeasureRule {
            column: 0,
            yes: vec!["4".into(), "yes".into()],
            no: vec!["1".into(), "no".into()],
        };
        assert_eq!(rule.classify(" 4 "), Answer::Yes);
        assert_eq!(rule.classify("YES"), Answer::Yes);
        assert_eq!(rule.classify("No"), Answer::No);
        assert_eq!(rule.classify("   "), Answer::Missing);
        assert_eq!(rule.classify("don't know"), Answer::Unexpected);
    }
}

#[cfg(test)]
mod reading {
    use super::*;

    /// Columns: 0 region, 1 age, 2 q1, 3 q2, 4 id, 5 weight, 6 time, 7 notes (unused).
    fn layout() -> Layout {
        Layout {
            width: 8,
            cells: vec![0, 1],
            measures: vec![
                MeasureRule {
                    column: 2,
                    yes: vec!["4".into(), "5".into()],
                    no: vec!["1".into(), "2".into(), "3".into()],
                },
                MeasureRule {
                    column: 3,
                    yes: vec!["yes".into()],
                    no: vec!["no".into()],
                },
            ],
            id: Some(4),
            weight: Some(5),
            time: Some(6),
        }
    }

    /// Parse CSV text the way the readers upstream do: flexible, no header row.
    fn records(text: &[u8]) -> Vec<csv::ByteRecord> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(text);
        reader.byte_records().map(|r| r.unwrap()).collect()
    }

    fn one(text: &[u8]) -> csv::ByteRecord {
        let mut all = records(text);
        assert_eq!(all.len(), 1, "expected one record in {text:?}");
        all.remove(0)
    }

    fn reason(text: &[u8]) -> Reason {
        read_record(&layout(), &one(text), 7).unwrap_err().reason
    }

    #[test]
    fn a_good_record_gives_trimmed_values_classified_answers_weight_id_and_time() {
        let record =
            one(b" North , 18-34 ,5, No , R-17 ,1.25,2026-05-01T09:30:00+02:00,anything\n");
        let r = read_record(&layout(), &record, 2).unwrap();
        assert_eq!(r.cell, vec!["North", "18-34"]);
        assert_eq!(r.answers, vec![(Answer::Yes, "5"), (Answer::No, "No")]);
        assert_eq!(r.weight, 1.25);
        assert_eq!(r.id, Some(&b"R-17"[..]));
        assert_eq!(
            r.time,
            Some("2026-05-01T07:30:00Z".parse::<jiff::Timestamp>().unwrap())
        );
    }

    #[test]
    fn blank_answers_id_and_time_are_missing_not_rejected() {
        let record = one(b"north,18-34,  ,,   ,2,,\n");
        let r = read_record(&layout(), &record, 2).unwrap();
        assert_eq!(
            r.answers,
            vec![(Answer::Missing, ""), (Answer::Missing, "")]
        );
        assert_eq!(r.id, None);
        assert_eq!(r.time, None);
        assert_eq!(r.weight, 2.0);
    }

    #[test]
    fn without_weight_id_or_time_columns_the_weight_is_one_and_the_rest_none() {
        let plain = Layout {
            width: 3,
            cells: vec![0],
            measures: vec![MeasureRule {
                column: 1,
                yes: vec!["y".into()],
                no: vec!["n".into()],
            }],
            id: None,
            weight: None,
            time: None,
        };
        let record = one(b"south,maybe,-3\n");
        let r = read_record(&plain, &record, 1).unwrap();
        assert_eq!(r.answers, vec![(Answer::Unexpected, "maybe")]);
        assert_eq!((r.weight, r.id, r.time), (1.0, None, None));
    }

    #[test]
    fn quoted_fields_keep_commas_and_line_breaks() {
        let record =
            one(b"\"North, coast\",18-34,\"4\",\"yes\",\"A\nB\",1,,\"a, \"\"quoted\"\"\nnote\"\n");
        let r = read_record(&layout(), &record, 2).unwrap();
        assert_eq!(r.cell, vec!["North, coast", "18-34"]);
        assert_eq!(r.id, Some(&b"A\nB"[..]));
        assert_eq!(r.answers[0].0, Answer::Yes);
    }

    #[test]
    fn crlf_and_lf_line_ends_read_the_same() {
        let lf = records(b"n,a,4,yes,1,1,,x\ns,b,1,no,2,0.5,,y\n");
        let crlf = records(b"n,a,4,yes,1,1,,x\r\ns,b,1,no,2,0.5,,y\r\n");
        assert_eq!(lf.len(), 2);
        for (a, b) in lf.iter().zip(&crlf) {
            assert_eq!(
                read_record(&layout(), a, 1).unwrap(),
                read_record(&layout(), b, 1).unwrap()
            );
        }
        assert_eq!(read_record(&layout(), &crlf[1], 1).unwrap().weight, 0.5);
    }

    #[test]
    fn a_byte_order_mark_at_the_start_of_the_file_is_not_part_of_the_first_value() {
        let record = one(b"\xef\xbb\xbfnorth,a,4,yes,1,1,,x\n");
        let r = read_record(&layout(), &record, 1).unwrap();
        assert_eq!(r.cell[0], "north");
    }

    #[test]
    fn the_wrong_number_of_fields_is_rejected_with_both_counts() {
        assert_eq!(
            reason(b"north,a,4\n"),
            Reason::FieldCount {
                expected: 8,
                found: 3
            }
        );
        assert_eq!(
            reason(b"n,a,4,yes,1,1,,x,extra\n"),
            Reason::FieldCount {
                expected: 8,
                found: 9
            }
        );
        assert_eq!(
            reason(b"north\n").to_string(),
            "found 1 field where the header has 8: each record needs one value per column"
        );
    }

    #[test]
    fn the_leftmost_column_that_is_not_utf8_is_named_one_based() {
        assert_eq!(
            reason(b"n,a,\xff,yes,\xfe,1,,x\n"),
            Reason::NotUtf8 { column: 3 }
        );
        assert_eq!(
            reason(b"n,a,4,yes,\xfe,1,,x\n"),
            Reason::NotUtf8 { column: 5 }
        );
        // A column the study does not read may hold anything.
        assert!(read_record(&layout(), &one(b"n,a,4,yes,1,1,,\xff\n"), 1).is_ok());
        assert_eq!(
            Reason::NotUtf8 { column: 5 }.to_string(),
            "column 5 is not valid UTF-8 text: save the file as UTF-8"
        );
    }

    #[test]
    fn weights_must_be_finite_numbers_of_zero_or_more() {
        assert_eq!(
            reason(b"n,a,4,yes,1,abc,,x\n"),
            Reason::BadWeight("abc".into())
        );
        assert_eq!(
            reason(b"n,a,4,yes,1,  ,,x\n"),
            Reason::BadWeight(String::new())
        );
        assert_eq!(
            reason(b"n,a,4,yes,1,inf,,x\n"),
            Reason::BadWeight("inf".into())
        );
        assert_eq!(
            reason(b"n,a,4,yes,1,NaN,,x\n"),
            Reason::BadWeight("NaN".into())
        );
        assert_eq!(
            reason(b"n,a,4,yes,1,\"1,5\",,x\n"),
            Reason::BadWeight("1,5".into())
        );
        assert_eq!(
            reason(b"n,a,4,yes,1, -2 ,,x\n"),
            Reason::NegativeWeight("-2".into())
        );
        assert_eq!(
            Reason::NegativeWeight("-2".into()).to_string(),
            "weight '-2' is negative: weights must be 0 or more"
        );
        assert_eq!(
            Reason::BadWeight(String::new()).to_string(),
            "weight is blank: weights must be numbers, 0 or more"
        );
        assert_eq!(
            Reason::BadWeight("abc".into()).to_string(),
            "weight 'abc' is not a finite number: weights must be numbers, 0 or more"
        );
        let weight = |text: &[u8]| read_record(&layout(), &one(text), 1).unwrap().weight;
        let zero = weight(b"n,a,4,yes,1,-0,,x\n");
        assert!(zero == 0.0 && zero.is_sign_positive());
        assert_eq!(weight(b"n,a,4,yes,1,2.5e1,,x\n"), 25.0);
    }

    #[test]
    fn times_must_be_rfc3339_with_an_offset() {
        assert_eq!(
            reason(b"n,a,4,yes,1,1,2026-13-01T00:00:00Z,x\n"),
            Reason::BadTime("2026-13-01T00:00:00Z".into())
        );
        // A civil time without an offset does not name an instant.
        assert_eq!(
            reason(b"n,a,4,yes,1,1,2026-05-01T09:30:00,x\n"),
            Reason::BadTime("2026-05-01T09:30:00".into())
        );
        assert_eq!(
            Reason::BadTime("yesterday".into()).to_string(),
            "time 'yesterday' is not an RFC 3339 timestamp: write times with an offset, such as 2026-05-01T09:30:00Z"
        );
    }

    #[test]
    fn the_rejection_carries_the_line_it_was_given() {
        let rejection = read_record(&layout(), &one(b"x\n"), 41).unwrap_err();
        assert_eq!(rejection.line, 41);
        assert!(rejection.to_string().starts_with("line 41: found 1 field"));
    }

    #[test]
    fn control_characters_in_a_bad_value_are_escaped_in_the_message() {
        let reason = reason(b"n,a,4,yes,1,\"\x1b[31m2\x07\r\nx\",,x\n");
        // The value itself is kept as given …
        assert_eq!(reason, Reason::BadWeight("\u{1b}[31m2\u{7}\r\nx".into()));
        // … and the message carries no control character.
        let message = reason.to_string();
        assert!(!message.chars().any(char::is_control), "{message:?}");
        assert!(
            message.contains(r"'\u{1b}[31m2\u{7}\u{d}\u{a}x'"),
            "{message}"
        );
        let hidden = Reason::BadTime("a\u{202e}b\u{feff}\u{200b}\u{85}".into()).to_string();
        assert!(
            hidden.contains(r"'a\u{202e}b\u{feff}\u{200b}\u{85}'"),
            "{hidden}"
        );
    }

    #[test]
    fn long_values_are_cut_short_with_an_ellipsis() {
        let long = "9".repeat(500);
        let message = Reason::BadTime(long.clone()).to_string();
        let expected = format!("time '{}…' is not", "9".repeat(QUOTE_LIMIT));
        assert!(message.starts_with(&expected), "{message}");
        // Exactly at the limit nothing is cut.
        assert_eq!(quote_safely(&long[..QUOTE_LIMIT]), long[..QUOTE_LIMIT]);
        // An escape is never split: 59 letters then a control character.
        let edge = format!("{}\u{1}", "a".repeat(QUOTE_LIMIT - 1));
        assert_eq!(
            quote_safely(&edge),
            format!("{}…", "a".repeat(QUOTE_LIMIT - 1))
        );
        // Multi-byte characters are counted as characters, never split.
        assert_eq!(
            quote_safely(&"é".repeat(61)),
            format!("{}…", "é".repeat(60))
        );
    }

    #[test]
    fn a_layout_column_beyond_the_width_is_a_rejection_not_a_panic() {
        let broken = Layout {
            width: 2,
            cells: vec![5],
            measures: vec![],
            id: None,
            weight: None,
            time: None,
        };
        let rejection = read_record(&broken, &one(b"a,b\n"), 3).unwrap_err();
        assert_eq!(
            rejection.reason,
            Reason::FieldCount {
                expected: 6,
                found: 2
            }
        );
    }
}
