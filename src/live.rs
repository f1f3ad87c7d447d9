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

use crate::follow::{Change, Fields, FollowError, Follower, Out, ResetReason, Warning};
use crate::study::Study;
use crate::tally::{Counter, Tally};

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
///
/// # Progress of a long read
///
/// [`Live::poll`] does a bounded amount of work: at most [`POLLS_AT_ONCE`] pieces of
/// [`crate::follow::READ_LIMIT`] bytes (64 MiB). When it returns with
/// [`Live::caught_up`] false there is more to read: a caller showing progress reads
/// [`Live::bytes_read`] against [`Live::file_size`] (a rate from two such readings
/// and the time between them) and polls again. The records are counted as they are
/// read, through the same record reader and [`Counter`] as the one-shot read; the
/// counting half (the id set, the sums) runs beside on a thread of its own
/// ([`Counter::beside`]), and the tally is back here whenever `poll` returns.
#[derive(Debug)]
pub struct Live {
    follower: Follower,
    state: State,
}

/// Everything but the follower, so that the follower can hand records to it.
#[derive(Debug)]
struct State {
    study: Study,
    header: Option<Vec<String>>,
    counter: Option<Counter>,
    tally: Tally,
    problem: Option<String>,
    repeated_headers: u64,
    /// The file is being read again from its start, for this reason; the header will
    /// say whether the study fits it.
    starting_over: Option<ResetReason>,
    /// Records counted in the current poll.
    counted: u64,
    /// Whether the id set was given its room for the file being read.
    sized: bool,
    events: Vec<LiveEvent>,
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
            follower,
            state: State {
                study,
                header: None,
                counter: None,
                tally,
                problem: None,
                repeated_headers: 0,
                starting_over: None,
                counted: 0,
                sized: false,
                events: Vec::new(),
            },
        }
    }

    pub fn study(&self) -> &Study {
        &self.state.study
    }

    /// The tally of the complete records read so far (the last one that fitted the
    /// study, while [`Live::problem`] is set).
    pub fn tally(&self) -> &Tally {
        &self.state.tally
    }

    /// The header of the file being counted, once it is complete and valid UTF-8.
    pub fn header(&self) -> Option<&[String]> {
        self.state.header.as_deref()
    }

    /// Why records are not being counted, if they are not.
    pub fn problem(&self) -> Option<&str> {
        self.state.problem.as_deref()
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
        self.state.repeated_headers
    }

    /// Whether the last [`Live::poll`] read everything up to the size it saw. When
    /// false, poll again at once.
    pub fn caught_up(&self) -> bool {
        self.follower.caught_up()
    }

    /// The file's size when it was last looked at (`None` before it was found).
    pub fn file_size(&self) -> Option<u64> {
        self.follower.size()
    }

    /// Look at the file, count what is new, and say what happened. Polls the
    /// follower until it has caught up with the size it saw, or has read
    /// [`POLLS_AT_ONCE`] pieces (so a caller's loop is never starved by a file that
    /// grows faster than it is read, and can show progress: see [`Live`]).
    pub fn poll(&mut self) -> Result<Vec<LiveEvent>, FollowError> {
        let state = &mut self.state;
        state.events.clear();
        for piece in 1..=POLLS_AT_ONCE {
            state.counted = 0;
            let change = self.follower.poll_into(state);
            // The tally is whole again (back from the counting thread) before this
            // returns, and before the id set is sized; in between, the counting
            // thread goes on while the next piece is read.
            let last = piece == POLLS_AT_ONCE || change.is_err() || self.follower.caught_up();
            if (last || !state.sized)
                && let Some(counter) = state.counter.as_mut()
                && let Err(stopped) = counter.flush(&mut state.tally)
            {
                return Err(FollowError::Io {
                    path: state.study.source.file.display().to_string(),
                    error: stopped.to_string(),
                });
            }
            state.after(change?);
            if !state.sized
                && state.counter.is_some()
                && let Some(size) = self.follower.size()
            {
                state.tally.reserve_ids_for(self.follower.offset(), size);
                // Without an id column there is nothing to size (nor a reason to
                // take the tally back after every piece).
                state.sized = state.tally.distinct_ids() > 0
                    || self.follower.caught_up()
                    || state.study.source.id.is_none();
            }
            for warning in self.follower.take_warnings() {
                if matches!(warning, Warning::RepeatedHeader { .. }) {
                    state.repeated_headers += 1;
                }
                state.events.push(LiveEvent::Warning(warning));
            }
            if self.follower.caught_up() {
                break;
            }
        }
        Ok(std::mem::take(&mut state.events))
    }
}

impl State {
    /// What a follower poll found, once its records are counted.
    fn after(&mut self, change: Change) {
        match change {
            Change::Waiting => self.events.push(LiveEvent::Waiting),
            Change::Resumed(_) => self.events.push(LiveEvent::Resumed),
            Change::Reset {
                why, header: None, ..
            } => {
                // A fresh read of a file without a complete header counts nothing.
                self.tally = Tally::new(self.study.measures.len());
                self.counter = None;
                self.repeated_headers = 0;
                self.events.push(LiveEvent::Reset { why, columns: None });
            }
            Change::Nothing
            | Change::Appended(_)
            | Change::Header { .. }
            | Change::Reset { .. } => {}
        }
        self.starting_over = None;
        if self.counted > 0 {
            self.events.push(LiveEvent::Counted {
                records: self.counted,
            });
        }
    }

    fn begin(&mut self, header: &ByteRecord, why: Option<ResetReason>) {
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
                self.counter = Some(Counter::beside(&layout));
                self.header = Some(names);
                self.problem = None;
                self.sized = false;
                self.events.push(match why {
                    Some(why) => LiveEvent::Reset { why, columns },
                    None => LiveEvent::Started,
                });
            }
            Err(e) => self.refuse(e.to_string(), columns),
        }
    }

    /// The header does not fit: keep the last statistics, count nothing more.
    fn refuse(&mut self, mut message: String, columns: Option<HeaderChange>) {
        // The tally comes back from the counting thread first, if it is there.
        if let Some(mut counter) = self.counter.take()
            && let Err(stopped) = counter.flush(&mut self.tally)
        {
            message = format!("{message} ({stopped})");
        }
        self.problem = Some(message.clone());
        self.events
            .push(LiveEvent::HeaderProblem { message, columns });
    }
}

impl Out for State {
    fn start_over(&mut self, why: ResetReason) {
        self.starting_over = Some(why);
    }

    fn header(&mut self, header: &ByteRecord) {
        let why = self.starting_over.take();
        self.begin(header, why);
    }

    fn record(&mut self, line: u64, _offset: u64, fields: Fields<'_>, too_long: Option<u64>) {
        let Some(counter) = self.counter.as_mut() else {
            return;
        };
        match too_long {
            Some(bytes) => counter.add_too_long(&mut self.tally, line, bytes),
            None => counter.add(&mut self.tally, fields, line),
        }
        self.counted += 1;
    }
}
