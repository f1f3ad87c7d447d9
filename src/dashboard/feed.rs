//! The dashboard's reading side: follows the responses file with [`Live`], assesses
//! the study after each look that changed something (or once a minute of the clock,
//! for rates, ETAs and "nothing arrived lately"), keeps the short history the chart
//! needs, writes the event log, and hands the dashboard an owned [`Update`]. It runs
//! on its own thread ([`spawn`]); [`Feed::look`] is the whole of one step, so tests
//! drive it without threads or real time. The dashboard draws what it is sent and
//! never recomputes.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::sync::mpsc::Sender;
use std::thread::JoinHandle;
use std::time::Instant;

use jiff::{SignedDuration, Timestamp};

use crate::assess::{self, CellView, Detail, Snapshot};

use crate::bounds::{BoundRow, Method};
use crate::clock::Clock;
use crate::event_log::EventLog;
use crate::hints::{self, Hint, Hints};
use crate::live::{Live, LiveEvent};
use crate::report;
use crate::study::Study;
use crate::tally::Arrivals;

/// Points kept of each cell's observed margin; older ones are thinned out.
pub const HISTORY_POINTS: usize = 240;

/// Points of the projected margin curve.
pub const PROJECTION_POINTS: usize = 24;

/// Hours of arrivals kept for the sparklines (a week).
pub const ARRIVAL_HOURS: usize = 7 * 24;

/// Notices kept for the problems page.
pub const NOTICES_KEPT: usize = 200;

/// What the dashboard asks of the reading side.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Command {
    /// Show the verdict as it would be under this method too (`None`: stop).
    Preview(Option<Method>),
    /// The cell whose projection and arrivals are wanted (by label).
    Focus(Option<String>),
    /// Stop reading.
    Stop,
}

/// One message to the reading thread: a hint about the file, or a command.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Work {
    Hint(Hint),
    Command(Command),
}

impl From<Hint> for Work {
    fn from(hint: Hint) -> Work {
        Work::Hint(hint)
    }
}

/// Where the reading of the responses file stands.
#[derive(Clone, Debug, PartialEq)]
pub enum Reading {
    /// Nothing looked at yet.
    Starting,
    /// The first read of the file: bytes read of its size, and bytes per second.
    FirstRead {
        done: u64,
        total: u64,
        bytes_per_second: f64,
    },
    /// Caught up, following the file as it grows.
    Following,
    /// The file is missing; the last figures stand.
    WaitingForFile,
    /// The header does not fit the study; nothing is counted until it does.
    HeaderProblem(String),
    /// The file cannot be read (the message says why and what to do).
    Failed(String),
}

/// Something that happened, with the time by the feed's clock.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Notice {
    pub time: Timestamp,
    pub text: String,
}

/// The focused cell's extras: every method's interval, its projected margin, and
/// arrivals per hour.
#[derive(Clone, Debug, PartialEq)]
pub struct Focus {
    pub label: String,
    /// Every method's interval for each of the cell's measures, in the order of its
    /// measures (as [`assess::every_method`] gives them): the snapshots sent hold only
    /// the deciding method's ([`Detail::Verdict`]).
    pub methods: Vec<Vec<BoundRow>>,
    /// (responses, deciding margin) if the proportions held, from now to where the
    /// target is met (or further, when it is out of reach).
    pub projected: Vec<(u64, f64)>,
    /// Arrivals per hour, oldest first, the last of them the hour holding `as_of`;
    /// `None` without arrival times.
    pub arrivals: Option<Vec<u64>>,
}

/// Everything the dashboard draws, as of one look.
#[derive(Clone, Debug)]
pub struct Update {
    /// The verdict under the study's own method, assessed with [`Detail::Verdict`]
    /// (each measure's `bounds` holds the deciding method's row only; the focused
    /// cell's every method is in [`Focus::methods`]).
    pub snapshot: Arc<Snapshot>,
    /// The verdict under a previewed method, when one is asked for (also
    /// [`Detail::Verdict`]).
    pub preview: Option<Arc<Snapshot>>,
    pub reading: Reading,
    /// Notices since the last update, oldest first.
    pub notices: Vec<Notice>,
    /// Each cell's deciding margin after each look at which its responses changed:
    /// (responses, margin), oldest first, since the dashboard opened or the file last
    /// started over. Under the study's method.
    pub history: BTreeMap<String, Arc<Vec<(u64, f64)>>>,
    /// Arrivals per hour over every cell, as [`Focus::arrivals`].
    pub arrivals: Option<Vec<u64>>,
    pub focus: Option<Focus>,
    /// Whether the first read of the file has finished.
    pub caught_up_once: bool,
    /// When the file last started over, and why ("replaced", "truncated", …).
    pub last_reset: Option<(Timestamp, &'static str)>,
}

/// The reading side's state. One [`Feed::look`] per hint.
pub struct Feed {
    live: Live,
    log: Option<EventLog>,
    preview: Option<Method>,
    focus: Option<String>,
    /// Something the dashboard asked for since the last update.
    asked: bool,
    history: BTreeMap<String, Arc<Vec<(u64, f64)>>>,
    reading: Reading,
    caught_up_once: bool,
    first_read_began: Option<Instant>,
    last_assessed: Option<Timestamp>,
    last_error: Option<String>,
    last_log_error: Option<String>,
    last_reset: Option<(Timestamp, &'static str)>,
    /// Notices to hand over with the next update.
    pending: Vec<Notice>,
}

impl Feed {
    pub fn new(study: Study, log: Option<EventLog>) -> Feed {
        Feed::with_live(Live::new(study), log)
    }

    /// The same over a [`Live`] set up by the caller (a smaller read per look, in tests).
    pub fn with_live(live: Live, log: Option<EventLog>) -> Feed {
        Feed {
            live,
            log,
            preview: None,
            focus: None,
            asked: false,
            history: BTreeMap::new(),
            reading: Reading::Starting,
            caught_up_once: false,
            first_read_began: None,
            last_assessed: None,
            last_error: None,
            last_log_error: None,
            last_reset: None,
            pending: Vec::new(),
        }
    }

    /// Hand this notice over with the next update.
    pub fn note(&mut self, notice: Notice) {
        self.pending.push(notice);
    }

    pub fn study(&self) -> &Study {
        self.live.study()
    }

    /// Whether the last look read everything it saw (otherwise look again at once).
    pub fn caught_up(&self) -> bool {
        self.live.caught_up()
    }

    /// Take a command from the dashboard. `Stop` is the caller's to handle.
    pub fn command(&mut self, command: Command) {
        match command {
            Command::Preview(m) => {
                let m = m.filter(|&m| m != self.study().target.decide_by);
                if m != self.preview {
                    self.preview = m;
                    self.asked = true;
                }
            }
            Command::Focus(label) => {
                if label != self.focus {
                    self.focus = label;
                    self.asked = true;
                }
            }
            Command::Stop => {}
        }
    }

    /// Look at the file at `now` (by the feed's clock, which may be simulated) and
    /// say what the dashboard should show, if anything changed: new records, a reset
    /// or a wait, a command, or a minute of the clock since the last verdict. `real`
    /// is the real moment of the look, for the first read's speed.
    pub fn look(&mut self, now: Timestamp, real: Instant) -> Option<Update> {
        let began = *self.first_read_began.get_or_insert(real);
        let mut notices = std::mem::take(&mut self.pending);
        let events = match self.live.poll() {
            Ok(events) => {
                self.last_error = None;
                events
            }
            Err(e) => {
                let message = e.to_string();
                notices.extend(once(&mut self.last_error, &message, now));
                let reading = Reading::Failed(report::clean(&message, 400));
                let changed = reading != self.reading;
                self.reading = reading;
                return (changed || !notices.is_empty()).then(|| self.update(now, notices, None));
            }
        };
        for event in &events {
            if let Some(text) = report::notice(event) {
                notices.push(Notice { time: now, text });
            }
            if let LiveEvent::Reset { why, .. } = event {
                self.history.clear();
                self.last_reset = Some((now, why.word()));
            }
        }
        let was = self.reading.clone();
        let caught_up = self.live.caught_up();
        self.reading = if self.live.waiting() {
            Reading::WaitingForFile
        } else if let Some(problem) = self.live.problem() {
            Reading::HeaderProblem(report::clean(problem, 400))
        } else if !caught_up && !self.caught_up_once {
            let done = self.live.bytes_read();
            let total = std::fs::metadata(&self.study().source.file)
                .map(|m| m.len())
                .unwrap_or(done)
                .max(done);
            let seconds = real.saturating_duration_since(began).as_secs_f64();
            Reading::FirstRead {
                done,
                total,
                bytes_per_second: if seconds > 0.0 {
                    done as f64 / seconds
                } else {
                    0.0
                },
            }
        } else {
            Reading::Following
        };
        let first_read_ended = caught_up && !self.caught_up_once;
        if caught_up {
            self.caught_up_once = true;
        }
        let counted = events.iter().any(|e| {
            matches!(
                e,
                LiveEvent::Started | LiveEvent::Counted { .. } | LiveEvent::Reset { .. }
            )
        });
        let minute_passed = self
            .last_assessed
            .is_none_or(|t| now.duration_since(t) >= SignedDuration::from_mins(1));
        let changed = counted
            || minute_passed
            || first_read_ended
            || self.asked
            || !notices.is_empty()
            || was != self.reading;
        if !changed {
            return None;
        }
        Some(self.update(now, notices, Some(&events)))
    }

    /// Assess (when the data or the clock moved) and build the update.
    fn update(
        &mut self,
        now: Timestamp,
        notices: Vec<Notice>,
        events: Option<&[LiveEvent]>,
    ) -> Update {
        let study = self.live.study();
        let tally = self.live.tally();
        let snapshot = Arc::new(assess::assess_with(
            study,
            tally,
            now,
            study.target.decide_by,
            Detail::Verdict,
        ));
        self.last_assessed = Some(now);
        let mut notices = notices;
        if let (Some(log), Some(events)) = (&mut self.log, events) {
            match log.record(events, &snapshot) {
                Ok(()) => self.last_log_error = None,
                Err(e) => notices.extend(once(&mut self.last_log_error, &e.to_string(), now)),
            }
        }
        for cell in &snapshot.cells {
            record_margin(&mut self.history, cell);
        }
        self.history
            .retain(|label, _| snapshot.cells.iter().any(|c| &c.label == label));
        let preview = self
            .preview
            .map(|m| Arc::new(assess::assess_with(study, tally, now, m, Detail::Verdict)));
        let shown = preview.as_ref().unwrap_or(&snapshot);
        let hour = Arrivals::hour_of(now);
        let timed = study.source.time.is_some();
        let arrivals = timed.then(|| {
            let mut total = vec![0; ARRIVAL_HOURS];
            for cell in tally.cells.values() {
                for (slot, count) in total.iter_mut().zip(hourly(&cell.arrivals, hour)) {
                    *slot += count;
                }
            }
            total
        });
        let focus = self.focus.as_ref().and_then(|label| {
            let view = shown.cells.iter().find(|c| &c.label == label)?;
            let upto = match view.needed {
                Some(k) if k > 0 => view.responses + k + k / 5,
                Some(_) => view.responses,
                None => view.responses.saturating_mul(4).max(50),
            };
            let key = assess::tally_key(study, view);
            Some(Focus {
                label: label.clone(),
                methods: assess::every_method(study, tally, shown, label),
                projected: assess::projection(study, tally, shown, label, upto, PROJECTION_POINTS),
                arrivals: timed.then(|| {
                    tally
                        .cells
                        .get(&key)
                        .map_or_else(|| vec![0; ARRIVAL_HOURS], |c| hourly(&c.arrivals, hour))
                }),
            })
        });
        self.asked = false;
        Update {
            snapshot,
            preview,
            reading: self.reading.clone(),
            notices,
            history: self.history.clone(),
            arrivals,
            focus,
            caught_up_once: self.caught_up_once,
            last_reset: self.last_reset,
        }
    }
}

/// A notice of `message` unless it is the one `last` holds (a failure that repeats at
/// every look is told once); `last` then holds it.
fn once(last: &mut Option<String>, message: &str, time: Timestamp) -> Option<Notice> {
    if last.as_deref() == Some(message) {
        return None;
    }
    *last = Some(message.to_string());
    Some(Notice {
        time,
        text: report::clean(message, 400),
    })
}

/// Add the cell's deciding margin to its history when its responses changed.
fn record_margin(history: &mut BTreeMap<String, Arc<Vec<(u64, f64)>>>, cell: &CellView) {
    let widest = cell
        .measures
        .iter()
        .map(|m| m.margin)
        .try_fold(None::<f64>, |w, m| {
            m.map(|m| Some(w.map_or(m, |w: f64| w.max(m))))
        });
    let Some(Some(margin)) = widest else {
        return;
    };
    let points = history.entry(cell.label.clone()).or_default();
    if points.last().is_some_and(|&(n, _)| n == cell.responses) {
        return;
    }
    let points = Arc::make_mut(points);
    if points.len() >= HISTORY_POINTS {
        // Keep the first and the latest points and every other one between.
        let last = points.len() - 1;
        let mut i = 0;
        points.retain(|_| {
            let keep = i == 0 || i == last || i % 2 == 0;
            i += 1;
            keep
        });
    }
    points.push((cell.responses, margin));
}

/// Arrivals per hour for the [`ARRIVAL_HOURS`] hours ending with `hour`, oldest first.
fn hourly(arrivals: &Arrivals, hour: i64) -> Vec<u64> {
    let first = hour - ARRIVAL_HOURS as i64 + 1;
    let mut out = vec![0; ARRIVAL_HOURS];
    for (h, count) in arrivals.hours() {
        if (first..=hour).contains(&h) {
            out[(h - first) as usize] += count;
        }
    }
    out
}

/// The reading thread's handle: a sender for commands, and the thread.
pub struct FeedThread {
    pub commands: Sender<Work>,
    pub thread: JoinHandle<()>,
    /// Why the folder cannot be watched, when it cannot (the file is then looked at
    /// every second).
    pub watch_error: Option<String>,
}

/// Start the reading thread: it looks at the file on every hint (file events from
/// the folder's watcher unless `poll_only`, and the safety tick), folds a burst of
/// hints into one look, reads on at once while it has not caught up, and sends each
/// update through `send` until that fails or it is told to stop.
pub fn spawn<F>(
    study: Study,
    log: Option<EventLog>,
    clock: Clock,
    poll_only: bool,
    send: F,
) -> FeedThread
where
    F: Fn(Box<Update>) -> bool + Send + 'static,
{
    let hints: Hints<Work> = Hints::start(&study.source.file, poll_only, hints::TICK);
    let commands = hints.sender();
    let watch_error = hints.watch_error.clone();
    let thread_error = watch_error.clone();
    let thread = std::thread::spawn(move || {
        let mut feed = Feed::new(study, log);
        if let Some(e) = &thread_error {
            feed.note(Notice {
                time: clock.now(),
                text: format!(
                    "cannot watch the folder of the responses file ({e}): looking every second instead"
                ),
            });
        }
        let mut next = Some(Work::Hint(Hint::File));
        loop {
            let mut stop = false;
            let mut take = |work: Option<Work>, feed: &mut Feed| match work {
                None | Some(Work::Command(Command::Stop)) | Some(Work::Hint(Hint::Stop)) => {
                    stop = true;
                }
                Some(Work::Command(c)) => feed.command(c),
                Some(Work::Hint(_)) => {}
            };
            take(next.take(), &mut feed);
            while let Some(work) = hints.try_next() {
                take(Some(work), &mut feed);
            }
            if stop {
                return;
            }
            if let Some(update) = feed.look(clock.now(), Instant::now())
                && !send(Box::new(update))
            {
                return;
            }
            next = if feed.caught_up() {
                hints.next()
            } else {
                Some(Work::Hint(Hint::File))
            };
        }
    });
    FeedThread {
        commands,
        thread,
        watch_error,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::assess::{MeasureView, Status};

    fn cell(responses: u64, margins: &[Option<f64>]) -> CellView {
        CellView {
            cell: BTreeMap::new(),
            label: "north".into(),
            planned: true,
            responses,
            minimum: None,
            population: None,
            tune_for: 100,
            status: Status::Open,
            rate_per_hour: None,
            eta: None,
            needed: None,
            progress: 0.0,
            latest_arrival: None,
            measures: margins
                .iter()
                .map(|&margin| MeasureView {
                    name: "q".into(),
                    n: responses,
                    successes: 0,
                    missing: 0,
                    unexpected: 0,
                    estimate: None,
                    effective_n: None,
                    margin,
                    met: false,
                    needed: None,
                    bounds: Vec::new(),
                })
                .collect(),
            warnings: Vec::new(),
        }
    }

    #[test]
    fn the_history_keeps_the_widest_margin_once_per_count_and_thins_itself() {
        let mut history = BTreeMap::new();
        record_margin(&mut history, &cell(10, &[Some(0.2), Some(0.3)]));
        record_margin(&mut history, &cell(10, &[Some(0.1), Some(0.1)]));
        // A measure without a margin: no point.
        record_margin(&mut history, &cell(11, &[Some(0.2), None]));
        assert_eq!(*history["north"], vec![(10, 0.3)]);
        for n in 12..1000 {
            record_margin(&mut history, &cell(n, &[Some(1.0 / n as f64)]));
        }
        let points = &history["north"];
        assert!(points.len() <= HISTORY_POINTS, "{}", points.len());
        assert_eq!(points.first(), Some(&(10, 0.3)), "the first point stays");
        assert_eq!(
            points.last(),
            Some(&(999, 1.0 / 999.0)),
            "the latest is there"
        );
        assert!(points.windows(2).all(|w| w[0].0 < w[1].0), "in order");
    }

    #[test]
    fn arrivals_per_hour_cover_the_week_that_ends_now() {
        let now: Timestamp = "2026-03-09T10:30:00Z".parse().unwrap();
        let mut arrivals = Arrivals::default();
        for t in [
            "2026-03-09T10:05:00Z", // this hour
            "2026-03-09T10:59:00Z",
            "2026-03-09T09:00:00Z", // the hour before
            "2026-03-02T11:00:00Z", // the first hour of the week
            "2026-03-02T10:59:00Z", // just before it: left out
            "2026-03-09T11:00:00Z", // after now's hour: left out
        ] {
            arrivals.add(Some(t.parse().unwrap()));
        }
        let hours = hourly(&arrivals, Arrivals::hour_of(now));
        assert_eq!(hours.len(), ARRIVAL_HOURS);
        assert_eq!(hours[ARRIVAL_HOURS - 1], 2);
        assert_eq!(hours[ARRIVAL_HOURS - 2], 1);
        assert_eq!(hours[0], 1);
        assert_eq!(hours.iter().sum::<u64>(), 4);
    }
}
