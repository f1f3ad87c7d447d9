//! The live tally of a growing responses file: a [`Follower`] for the file the study
//! names, feeding its complete records into a [`Tally`], rebuilt from scratch
//! whenever the file starts over, so that the tally always equals a fresh read of
//! the complete records in the file as it is now.
//!
//! Two schemas are never mixed: when the header changes, the columns added and
//! removed are reported; if every column the study reads is still there the columns
//! are found again by name and the tally rebuilt, otherwise the problem is reported,
//! the last statistics are kept, and nothing more is counted until a header that
//! fits arrives.

use csv::ByteRecord;

use crate::follow::{Change, FollowError, Follower, Record, ResetReason, Warning};
use crate::rows::{Layout, Reason, Rejection};
use crate::study::Study;
use crate::tally::Tally;

/// The most follower polls one [`Live::poll`] makes (each reads at most
/// [`crate::follow::READ_LIMIT`] bytes).
pub const POLLS_AT_ONCE: usize = 64;

/// Columns added to and removed from the header, by name, in header order.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct HeaderChange {
    pub added: Vec<String>,
    pub removed: Vec<String>,
}

impl std::fmt::Display for HeaderChange {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let list = |names: &[String]| {
            names
                .iter()
                .map(|n| format!("'{}'", crate::rows::quote_safely(n)))
                .collect::<Vec<_>>()
                .join(", ")
        };
        match (self.added.is_empty(), self.removed.is_empty()) {
            (false, false) => write!(
                f,
                "columns added: {}; columns removed: {}",
                list(&self.added),
                list(&self.removed)
            ),
            (false, true) => write!(f, "columns added: {}", list(&self.added)),
            (true, false) => write!(f, "columns removed: {}", list(&self.removed)),
            (true, true) => f.write_str("the columns were reordered"),
        }
    }
}

/// What one [`Live::poll`] did.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum LiveEvent {
    /// The header fits the study and counting began (first read, or after a
    /// header that did not fit).
    Started,
    /// This many records were counted (responses, duplicates and rejections).
    Counted {
        records: u64,
    },
    /// The file started over and the tally was rebuilt from its start.
    Reset {
        why: ResetReason,
        columns: Option<HeaderChange>,
    },
    /// The file is missing: the last statistics stand.
    Waiting,
    /// The file is back.
    Resumed,
    /// The header does not fit the study: nothing is counted until one does.
    HeaderProblem {
        message: String,
        columns: Option<HeaderChange>,
    },
    Warning(Warning),
}

/// A study's responses file, followed, and its tally.
#[derive(Debug)]
pub struct Live {
    study: Study,
    follower: Follower,
    header: Option<Vec<String>>,
    layout: Option<Layout>,
    tally: Tally,
    problem: Option<String>,
    repeated_headers: u64,
}

impl Live {
    /// Follow the responses file of `study`. Nothing is read until [`Live::poll`].
    pub fn new(study: Study) -> Live {
        let follower = Follower::new(study.source.file.clone(), study.source.delimiter);
        Live::with_follower(study, follower)
    }

    /// The same with a follower set up by the caller (another record limit).
    pub fn with_follower(study: Study, follower: Follower) -> Live {
        let tally = Tally::new(study.measures.len());
        Live {
            study,
            follower,
            header: None,
            layout: None,
            tally,
            problem: None,
            repeated_headers: 0,
        }
    }

    pub fn study(&self) -> &Study {
        &self.study
    }

    /// The tally of the complete records read so far (the last one that fitted the
    /// study, while [`Live::problem`] is set).
    pub fn tally(&self) -> &Tally {
        &self.tally
    }

    /// The header of the file being counted, once it is complete and valid UTF-8.
    pub fn header(&self) -> Option<&[String]> {
        self.header.as_deref()
    }

    /// Why records are not being counted, if they are not.
    pub fn problem(&self) -> Option<&str> {
        self.problem.as_deref()
    }

    /// The byte offset up to which the responses file has been read (for a gauge of
    /// the first read; compare with the file's size).
    pub fn bytes_read(&self) -> u64 {
        self.follower.offset()
    }

    /// Whether the file is missing.
    pub fn waiting(&self) -> bool {
        self.follower.waiting()
    }

    /// Records skipped because they repeat the header, since the last reset.
    pub fn repeated_headers(&self) -> u64 {
        self.repeated_headers
    }

    /// Whether the last [`Live::poll`] read everything up to the size it saw. When
    /// false, poll again at once.
    pub fn caught_up(&self) -> bool {
        self.follower.caught_up()
    }

    /// Look at the file, count what is new, and say what happened. Polls the
    /// follower until it has caught up with the size it saw, or has read
    /// [`POLLS_AT_ONCE`] pieces (so a caller's loop is never starved by a file that
    /// grows faster than it is read: see [`Live::caught_up`]).
    pub fn poll(&mut self) -> Result<Vec<LiveEvent>, FollowError> {
        let mut events = Vec::new();
        for _ in 0..POLLS_AT_ONCE {
            let change = self.follower.poll()?;
            self.apply(change, &mut events);
            for warning in self.follower.take_warnings() {
                if matches!(warning, Warning::RepeatedHeader { .. }) {
                    self.repeated_headers += 1;
                }
                events.push(LiveEvent::Warning(warning));
            }
            if self.follower.caught_up() {
                break;
            }
        }
        Ok(events)
    }

    fn apply(&mut self, change: Change, events: &mut Vec<LiveEvent>) {
        match change {
            Change::Nothing => {}
            Change::Waiting => events.push(LiveEvent::Waiting),
            Change::Resumed(records) => {
                events.push(LiveEvent::Resumed);
                self.count(&records, events);
            }
            Change::Appended(records) => self.count(&records, events),
            Change::Header { header, records } => self.begin(&header, &records, None, events),
            Change::Reset {
                why,
                header: Some(header),
                records,
            } => self.begin(&header, &records, Some(why), events),
            Change::Reset {
                why, header: None, ..
            } => {
                // A fresh read of a file without a complete header counts nothing.
                self.tally = Tally::new(self.study.measures.len());
                self.layout = None;
                self.repeated_headers = 0;
                events.push(LiveEvent::Reset { why, columns: None });
            }
        }
    }

    fn begin(
        &mut self,
        header: &ByteRecord,
        records: &[Record],
        why: Option<ResetReason>,
        events: &mut Vec<LiveEvent>,
    ) {
        self.repeated_headers = 0;
        let names: Result<Vec<String>, usize> = header
            .iter()
            .enumerate()
            .map(|(i, f)| {
                std::str::from_utf8(f)
                    .map(str::to_string)
                    .map_err(|_| i + 1)
            })
            .collect();
        let names = match names {
            Ok(names) => names,
            Err(column) => {
                self.refuse(
                    format!(
                        "{}: column {column} of the header is not valid UTF-8 text: save the file as UTF-8",
                        self.study.source.file.display()
                    ),
                    None,
                    events,
                );
                return;
            }
        };
        let columns = match &self.header {
            Some(old) if *old != names => Some(HeaderChange {
                added: names.iter().filter(|n| !old.contains(n)).cloned().collect(),
                removed: old.iter().filter(|n| !names.contains(n)).cloned().collect(),
            }),
            _ => None,
        };
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        match self.study.layout(&refs) {
            Ok(layout) => {
                self.tally = Tally::new(self.study.measures.len());
                self.layout = Some(layout);
                self.header = Some(names);
                self.problem = None;
                events.push(match why {
                    Some(why) => LiveEvent::Reset { why, columns },
                    None => LiveEvent::Started,
                });
                self.count(records, events);
            }
            Err(e) => self.refuse(e.to_string(), columns, events),
        }
    }

    /// The header does not fit: keep the last statistics, count nothing more.
    fn refuse(
        &mut self,
        message: String,
        columns: Option<HeaderChange>,
        events: &mut Vec<LiveEvent>,
    ) {
        self.layout = None;
        self.problem = Some(message.clone());
        events.push(LiveEvent::HeaderProblem { message, columns });
    }

    fn count(&mut self, records: &[Record], events: &mut Vec<LiveEvent>) {
        let Some(layout) = &self.layout else {
            return;
        };
        if records.is_empty() {
            return;
        }
        for record in records {
            match record.too_long {
                Some(bytes) => self.tally.reject(Rejection {
                    line: record.line,
                    reason: Reason::TooLong { bytes },
                }),
                None => self.tally.add_record(layout, &record.fields, record.line),
            }
        }
        events.push(LiveEvent::Counted {
            records: records.len() as u64,
        });
    }
}
