//! The built-in simulated fieldwork (`closeout demo`): an invented study whose
//! responses file is written, change by change, as an exporter would write it, so a
//! newcomer can watch the whole job work, and the tests can run it end to end.
//!
//! - [`scenario`]: the invented study — places, cells, true proportions, rates.
//! - [`plan`]: one seed → every file action at its simulated moment.
//! - [`writer`]: carries the actions out, at once or paced by a [`Clock`].
//! - [`bulk`]: `--write N`, many rows fast, for benchmarks.
//!
//! Three ways to run it: [`run_headless`] performs the actions in lockstep with a
//! [`Live`] tally (no threads, no real time: fully deterministic); [`play`] runs the
//! paced writer beside the follow loop of [`crate::headless`] on a simulated clock;
//! and the dashboard can run the paced writer ([`Demo::start_writer`]) beside
//! itself. Because the true proportions are known, [`coverage`] says at the end
//! whether each cell's final interval covers its true value. Knows nothing of the
//! dashboard's internals.

use std::io::Write;
use std::path::{Path, PathBuf};

use jiff::Timestamp;

use crate::assess::{self, Detail, Snapshot};
use crate::clock::Clock;
use crate::event_log::{EventLog, LogError};
use crate::headless::{self, FollowOptions};
use crate::hints::{Hint, Hints};
use crate::live::Live;
use crate::report::{self, FollowOutput};
use crate::study::{Study, StudyError};

pub mod bulk;
pub mod plan;
pub mod scenario;
pub mod writer;

pub use plan::{Action, CellTruth, FileAction, Plan, PlannedRow, RowKind, plan};
pub use writer::{Writer, perform, spawn_writer};

/// The seed used when none is given.
pub const DEFAULT_SEED: u64 = 2026;

/// Simulated seconds per real second by default: the default seed's fieldwork
/// (07:00 on a Monday to 21:10 the next Monday, about 7.6 simulated days) plays in
/// about two minutes: 90 simulated minutes a real second.
pub const DEFAULT_SPEED: f64 = 5400.0;

/// The word put before every time the demo shows, so that no simulated time is
/// taken for a real one.
pub const SIMULATED: &str = "simulated";

/// Why the demo cannot run.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    #[error(
        "{path}: the folder is not empty: give --dir a new or empty folder (the demo never writes over files)"
    )]
    NotEmpty { path: String },
    #[error("{path}: {error}")]
    Io { path: String, error: String },
    #[error("{0}")]
    Study(#[from] StudyError),
    #[error("{0}")]
    Log(#[from] LogError),
    #[error("{0}")]
    Follow(String),
    #[error("the demo's writer stopped unexpectedly")]
    WriterFailed,
    /// Standard output could not be written (a closed pipe among them).
    #[error("cannot write the output: {0}")]
    Output(std::io::Error),
}

fn io_error(path: &Path, e: &std::io::Error) -> DemoError {
    DemoError::Io {
        path: path.display().to_string(),
        error: e.to_string(),
    }
}

/// A folder for the demo's files: `dir` if it is new or empty (created if needed),
/// else a refusal; without `dir`, a new folder under the system's temporary folder
/// (kept afterwards, so its files can be looked at).
pub fn fresh_dir(dir: Option<&Path>) -> Result<PathBuf, DemoError> {
    match dir {
        Some(dir) => {
            if dir.exists() {
                let mut entries = std::fs::read_dir(dir).map_err(|e| io_error(dir, &e))?;
                if entries.next().is_some() {
                    return Err(DemoError::NotEmpty {
                        path: dir.display().to_string(),
                    });
                }
            } else {
                std::fs::create_dir_all(dir).map_err(|e| io_error(dir, &e))?;
            }
            Ok(dir.to_path_buf())
        }
        None => {
            let base = std::env::temp_dir();
            let stamp = std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_nanos());
            for attempt in 0..100u32 {
                let dir = base.join(format!(
                    "closeout-demo-{}-{}",
                    std::process::id(),
                    stamp.wrapping_add(u128::from(attempt))
                ));
                match std::fs::create_dir(&dir) {
                    Ok(()) => return Ok(dir),
                    Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {}
                    Err(e) => return Err(io_error(&dir, &e)),
                }
            }
            Err(DemoError::Io {
                path: base.display().to_string(),
                error: "cannot create a new folder there: give one with --dir".into(),
            })
        }
    }
}

/// A demo folder with its plan, before any response is written.
#[derive(Clone, Debug)]
pub struct Demo {
    pub dir: PathBuf,
    pub study_file: PathBuf,
    pub plan: Plan,
}

impl Demo {
    /// The study, read back from the file the demo wrote (so the demo runs on
    /// exactly what a user would).
    pub fn study(&self) -> Result<Study, DemoError> {
        Ok(Study::load(&self.study_file)?)
    }

    /// The study's event log, opened for appending.
    pub fn event_log(&self, study: &Study) -> Result<Option<EventLog>, DemoError> {
        match &study.log {
            Some(path) => Ok(Some(EventLog::open(
                path,
                &study.source.file,
                &study.study_path,
            )?)),
            None => Ok(None),
        }
    }

    /// Start the fieldwork on `clock` (a simulated clock starting at `plan.start`):
    /// what happens at the start (the file's header) is written at once, so the file
    /// is there before the first look, and the rest by the paced writer, which calls
    /// `done` after its last action. The dashboard runs beside the returned writer and
    /// stops it on quit.
    pub fn start_writer(
        &self,
        clock: Clock,
        done: impl FnOnce() + Send + 'static,
    ) -> Result<Writer, DemoError> {
        let (now, later): (Vec<Action>, Vec<Action>) = self
            .plan
            .actions
            .iter()
            .cloned()
            .partition(|a| a.at <= self.plan.start);
        for action in &now {
            perform(&action.file, &self.dir)?;
        }
        Ok(spawn_writer(later, self.dir.clone(), clock, done))
    }

    /// What the demo says first: where the files are, that the data are invented
    /// and the clock simulated, and the story to watch for.
    pub fn introduction(&self, speed: Option<f64>) -> Vec<String> {
        let mut lines = vec![
            format!(
                "closeout demo: INVENTED data for a made-up study (seed {}); the clock is SIMULATED.",
                self.plan.seed
            ),
            format!("files: {}", self.dir.display()),
            format!(
                "study: {} (24 quota cells, three measures, target ±{} points at 95 %, decided by anytime)",
                self.study_file.display(),
                scenario::MARGIN * 100.0
            ),
        ];
        match speed {
            Some(speed) => lines.push(format!(
                "simulated time runs {speed} times faster than real time: one real second is {} simulated minutes",
                (speed / 6.0).round() / 10.0
            )),
            None => lines.push(
                "headless: every file action in order, each looked at at its simulated moment"
                    .into(),
            ),
        }
        lines.push("what happens (simulated times, UTC):".into());
        for moment in &self.plan.story {
            lines.push(format!(
                "  {SIMULATED} {}  {}",
                report::when(moment.at),
                moment.what
            ));
        }
        lines.push(String::new());
        lines
    }
}

/// Write the study file, a note saying the data are invented, and the true
/// proportions into `dir` (a folder from [`fresh_dir`]).
pub fn prepare(dir: &Path, plan: Plan) -> Result<Demo, DemoError> {
    let study_file = dir.join("study.toml");
    let write = |name: &str, text: &str| -> Result<(), DemoError> {
        let path = dir.join(name);
        std::fs::write(&path, text).map_err(|e| io_error(&path, &e))
    };
    write("study.toml", &plan.study_text)?;
    write("README.txt", &scenario::readme_text(plan.seed))?;
    let mut truth = String::from(
        "# INVENTED: the true proportions the demo's responses were drawn from\n\
         zone,age_band,measure,true_proportion,population\n",
    );
    for cell in &plan.truth {
        let (z, a) = cell.cell;
        for (spec, p) in scenario::MEASURES.iter().zip(cell.proportions) {
            truth.push_str(&format!(
                "{},{},{},{p:.4},{}\n",
                scenario::ZONES.get(z).unwrap_or(&""),
                scenario::AGE_BANDS.get(a).unwrap_or(&""),
                spec.name,
                cell.population.map_or_else(String::new, |n| n.to_string())
            ));
        }
    }
    write("truth.csv", &truth)?;
    Ok(Demo {
        dir: dir.to_path_buf(),
        study_file,
        plan,
    })
}

/// One cell × measure of the final coverage check.
#[derive(Clone, Debug, PartialEq)]
pub struct Covered {
    pub label: String,
    pub measure: String,
    pub lower: f64,
    pub upper: f64,
    pub truth: f64,
    pub covers: bool,
}

/// For every planned cell and measure with an interval under the deciding method:
/// whether it covers the true proportion.
pub fn coverage(snapshot: &Snapshot, truth: &[CellTruth]) -> Vec<Covered> {
    let mut out = Vec::new();
    for t in truth {
        let Some(cell) = snapshot
            .cells
            .iter()
            .find(|c| c.planned && c.label == t.label)
        else {
            continue;
        };
        for (m, &p) in cell.measures.iter().zip(t.proportions.iter()) {
            let Some(row) = m.bounds.iter().find(|b| b.method == snapshot.decide_by) else {
                continue;
            };
            if let (Some(lower), Some(upper)) = (row.lower, row.upper) {
                out.push(Covered {
                    label: t.label.clone(),
                    measure: m.name.clone(),
                    lower,
                    upper,
                    truth: p,
                    covers: lower <= p && p <= upper,
                });
            }
        }
    }
    out
}

/// The coverage check in words, labelled as the small check it is.
pub fn coverage_text(snapshot: &Snapshot, rows: &[Covered]) -> Vec<String> {
    let covered = rows.iter().filter(|r| r.covers).count();
    let mut lines = vec![
        "A small honest check: the data are simulated, so the true proportions are known (truth.csv).".to_string(),
        format!(
            "The final {} intervals at {} cover the true proportion in {covered} of {} cell × measure pairs.",
            snapshot.decide_by,
            report::confidence_label(snapshot.decision_confidence, 1.0 - snapshot.decision_confidence),
            rows.len()
        ),
    ];
    for r in rows.iter().filter(|r| !r.covers) {
        lines.push(format!(
            "  missed: {}, {}: {} to {}, true {}",
            r.label,
            r.measure,
            report::percent(r.lower),
            report::percent(r.upper),
            report::percent(r.truth)
        ));
    }
    lines.push(
        "One run is one draw: at 95 % about 1 interval in 20 may miss in a run (an anytime \
         interval misses less often, since its promise holds at every look at once; approximate \
         methods miss more often). Sampling error only."
            .to_string(),
    );
    lines
}

/// The cells that were at risk along the way, from the event log: label, from, to
/// (`None`: still at risk at the end).
pub fn at_risk_periods(log: &Path) -> Vec<(String, Timestamp, Option<Timestamp>)> {
    let Ok(text) = std::fs::read_to_string(log) else {
        return Vec::new();
    };
    let mut open: Vec<(String, Timestamp)> = Vec::new();
    let mut periods = Vec::new();
    for line in text.lines() {
        let Ok(entry) = serde_json::from_str::<serde_json::Value>(line) else {
            continue;
        };
        if entry["event"] != "cell_status" {
            continue;
        }
        let (Some(label), Some(time)) = (
            entry["label"].as_str(),
            entry["time"]
                .as_str()
                .and_then(|t| t.parse::<Timestamp>().ok()),
        ) else {
            continue;
        };
        if let Some(i) = open.iter().position(|(l, _)| l == label) {
            let (l, from) = open.remove(i);
            periods.push((l, from, Some(time)));
        }
        if entry["to"] == assess::Status::AtRisk.word() {
            open.push((label.to_string(), time));
        }
    }
    periods.extend(open.into_iter().map(|(l, from)| (l, from, None)));
    periods.sort_by(|a, b| a.1.cmp(&b.1).then_with(|| a.0.cmp(&b.0)));
    periods
}

/// The at-risk periods in words: the long ones (a day or more) by name, the short
/// ones counted.
pub fn at_risk_text(
    periods: &[(String, Timestamp, Option<Timestamp>)],
    end: Timestamp,
) -> Vec<String> {
    let day = jiff::SignedDuration::from_hours(24);
    let (long, short): (Vec<_>, Vec<_>) = periods
        .iter()
        .partition(|(_, from, to)| to.unwrap_or(end).duration_since(*from) >= day);
    let mut lines = Vec::new();
    for (label, from, to) in &long {
        lines.push(format!(
            "at risk for a day or more: {label}, from {SIMULATED} {} {}",
            report::when(*from),
            match to {
                Some(t) => format!("to {SIMULATED} {}", report::when(*t)),
                None => "to the end".to_string(),
            }
        ));
    }
    if !short.is_empty() {
        lines.push(format!(
            "{} shorter spells of 'at risk' (a cell quiet for a while, or an ETA briefly past the deadline): see events.jsonl",
            short.len()
        ));
    }
    lines
}

fn simulated(line: &str) -> String {
    format!("{SIMULATED} {line}")
}

/// Run the fieldwork in lockstep, without threads or real time: carry out the
/// actions in order; after each group of actions at the same moment, poll the
/// [`Live`] tally, assess at that moment, record the event log and print what
/// `status --follow` prints in text mode (each line marked as simulated). Stops
/// after the last action, or before the first action later than `until`. Then
/// prints the cells that were at risk along the way and the coverage check, and
/// returns the last snapshot (assessed with [`Detail::Verdict`]: each measure's
/// `bounds` holds the deciding method's interval only).
pub fn run_headless(
    demo: &Demo,
    until: Option<Timestamp>,
    out: &mut impl Write,
) -> Result<Snapshot, DemoError> {
    let study = demo.study()?;
    let mut log = demo.event_log(&study)?;
    let log_path = study.log.clone();
    let mut live = Live::new(study);
    let mut output = FollowOutput::new(false);
    // Each look needs the verdict alone (the coverage check at the end reads the
    // deciding method's interval, which it keeps).
    let verdict = |live: &Live, at| {
        let study = live.study();
        assess::assess_with(
            study,
            live.tally(),
            at,
            study.target.decide_by,
            Detail::Verdict,
        )
    };
    let mut snapshot = verdict(&live, demo.plan.start);
    let print = |out: &mut dyn Write, lines: &[String]| -> Result<(), DemoError> {
        for line in lines {
            writeln!(out, "{line}").map_err(DemoError::Output)?;
        }
        Ok(())
    };
    let actions = &demo.plan.actions;
    let mut i = 0;
    let mut last = demo.plan.start;
    while let Some(first) = actions.get(i) {
        let moment = first.at;
        if until.is_some_and(|u| moment > u) {
            break;
        }
        while let Some(action) = actions.get(i).filter(|a| a.at == moment) {
            perform(&action.file, &demo.dir)?;
            i += 1;
        }
        let mut events = Vec::new();
        loop {
            events.extend(live.poll().map_err(|e| DemoError::Follow(e.to_string()))?);
            if live.caught_up() {
                break;
            }
        }
        snapshot = verdict(&live, moment);
        if let Some(l) = &mut log {
            l.record(&events, &snapshot)?;
        }
        let lines = output.update(&events, &snapshot);
        let marked: Vec<String> = lines
            .out
            .iter()
            .chain(lines.err.iter())
            .map(|l| simulated(l))
            .collect();
        print(out, &marked)?;
        last = moment;
    }
    let mut closing = vec![String::new()];
    if let Some(path) = &log_path {
        closing.extend(at_risk_text(&at_risk_periods(path), last));
    }
    closing.push(String::new());
    closing.extend(coverage_text(
        &snapshot,
        &coverage(&snapshot, &demo.plan.truth),
    ));
    print(out, &closing)?;
    Ok(snapshot)
}

/// A writer that puts "simulated " before every line it passes on.
struct Marked<'a, W: Write> {
    inner: &'a mut W,
    at_line_start: bool,
}

impl<W: Write> Write for Marked<'_, W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        for piece in buf.split_inclusive(|&b| b == b'\n') {
            if self.at_line_start {
                self.inner.write_all(SIMULATED.as_bytes())?;
                self.inner.write_all(b" ")?;
            }
            self.inner.write_all(piece)?;
            self.at_line_start = piece.ends_with(b"\n");
        }
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// What a live run says at its end, from a fresh read of the file as the writer left
/// it at `clock`'s moment (or the plan's end): the at-risk spells from the event log,
/// the coverage check, and where the files are.
pub fn closing(demo: &Demo, clock: &Clock) -> Result<Vec<String>, DemoError> {
    let end = clock.now().min(demo.plan.end);
    let study = demo.study()?;
    let mut lines = vec![String::new()];
    if let Some(path) = &study.log {
        lines.extend(at_risk_text(&at_risk_periods(path), end));
    }
    let tally = crate::batch::read(&study).map_err(|e| DemoError::Follow(e.to_string()))?;
    let snapshot = assess::assess(&study, &tally, end);
    lines.push(String::new());
    lines.extend(coverage_text(
        &snapshot,
        &coverage(&snapshot, &demo.plan.truth),
    ));
    lines.push(String::new());
    lines.push(format!(
        "The files are kept in {}; try: closeout status {} --as-of {}",
        demo.dir.display(),
        demo.study_file.display(),
        end
    ));
    Ok(lines)
}

/// The live run on a terminal: the dashboard on the simulated clock while the writer
/// plays the fieldwork, until the user quits (the writer is then stopped where it
/// is). Times are shown in UTC, as the simulated fieldwork is planned. Returns the
/// closing lines to print once the terminal is restored.
pub fn watch(
    demo: &Demo,
    speed: f64,
    theme: crate::dashboard::Theme,
    on_stop: impl FnOnce(std::sync::mpsc::Sender<crate::dashboard::Event>),
) -> Result<Vec<String>, DemoError> {
    let study = demo.study()?;
    let log = demo.event_log(&study)?;
    let clock = Clock::simulated(demo.plan.start, speed);
    let writer = demo.start_writer(clock, || {})?;
    let options = crate::dashboard::Options {
        clock,
        poll_only: false,
        zone: jiff::tz::TimeZone::UTC,
        theme,
    };
    let shown = crate::dashboard::run(study, log, options, on_stop);
    writer.stop()?;
    shown.map_err(DemoError::Output)?;
    closing(demo, &clock)
}

/// Play the fieldwork in real time: the paced writer on its own thread, and the
/// follow loop of [`crate::headless`] on the same simulated clock printing what
/// `status --follow` prints (each line marked as simulated), until the study is
/// ready to close, the writer is done, or a stop arrives on `hints` (the caller
/// sends Ctrl-C there). Then the at-risk spells and the coverage check. Returns
/// the exit code.
pub fn play(
    demo: &Demo,
    speed: f64,
    hints: &Hints,
    out: &mut impl Write,
    err: &mut impl Write,
) -> u8 {
    let fail = |err: &mut dyn Write, e: DemoError| {
        let _ = writeln!(err, "closeout: {e}");
        2
    };
    let study = match demo.study() {
        Ok(s) => s,
        Err(e) => return fail(err, e),
    };
    let log = match demo.event_log(&study) {
        Ok(l) => l,
        Err(e) => return fail(err, e),
    };
    let clock = Clock::simulated(demo.plan.start, speed);
    let stop = hints.sender();
    let writer = match demo.start_writer(clock, move || {
        let _ = stop.send(Hint::Stop);
    }) {
        Ok(w) => w,
        Err(e) => return fail(err, e),
    };
    let options = FollowOptions {
        json: false,
        until_ready: true,
        exit_code: false,
    };
    let code = {
        let mut marked = Marked {
            inner: out,
            at_line_start: true,
        };
        headless::follow(study, log, options, &clock, hints, &mut marked, err)
    };
    if let Err(e) = writer.stop() {
        return fail(err, e);
    }
    let closing = match closing(demo, &clock) {
        Ok(lines) => lines,
        Err(e) => return fail(err, e),
    };
    match headless::write_lines(&closing, &[], out, err) {
        Ok(()) => code,
        Err(code) => code,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_line_is_marked_as_simulated_however_it_is_written() {
        let mut inner = Vec::new();
        {
            let mut m = Marked {
                inner: &mut inner,
                at_line_start: true,
            };
            m.write_all(b"one\ntw").unwrap();
            m.write_all(b"o\n\nthree\n").unwrap();
        }
        assert_eq!(
            String::from_utf8(inner).unwrap(),
            "simulated one\nsimulated two\nsimulated \nsimulated three\n"
        );
    }

    #[test]
    fn a_folder_given_must_be_new_or_empty() {
        let tmp = tempfile::tempdir().unwrap();
        let new = tmp.path().join("new/deeper");
        assert_eq!(fresh_dir(Some(&new)).unwrap(), new);
        assert_eq!(fresh_dir(Some(&new)).unwrap(), new, "empty is fine");
        std::fs::write(new.join("mine.txt"), "keep").unwrap();
        let e = fresh_dir(Some(&new)).unwrap_err();
        assert!(matches!(e, DemoError::NotEmpty { .. }), "{e}");
        assert!(e.to_string().contains("not empty"));
        assert_eq!(
            std::fs::read_to_string(new.join("mine.txt")).unwrap(),
            "keep"
        );
        let a = fresh_dir(None).unwrap();
        let b = fresh_dir(None).unwrap();
        assert_ne!(a, b);
        assert_eq!(std::fs::read_dir(&a).unwrap().count(), 0);
        std::fs::remove_dir(a).unwrap();
        std::fs::remove_dir(b).unwrap();
    }

    fn action(at: &str, file: FileAction) -> Action {
        Action {
            at: at.parse().unwrap(),
            file,
        }
    }

    /// A clock past every moment: the writer carries everything out at once; the
    /// replacement goes through a temporary file that does not stay behind.
    #[test]
    fn the_writer_carries_out_every_action_when_their_moments_have_passed() {
        let tmp = tempfile::tempdir().unwrap();
        let actions = vec![
            action(
                "2026-03-02T07:00:00Z",
                FileAction::Append(b"a,b\n1,".to_vec()),
            ),
            action("2026-03-02T07:01:00Z", FileAction::Append(b"2\n".to_vec())),
            action(
                "2026-03-02T07:02:00Z",
                FileAction::Replace(b"a,b\n3,4\n".to_vec()),
            ),
            action(
                "2026-03-02T07:03:00Z",
                FileAction::Append(b"5,6\n".to_vec()),
            ),
        ];
        let (done, finished) = std::sync::mpsc::channel();
        let clock = Clock::Fixed("2026-03-03T00:00:00Z".parse().unwrap());
        let w = spawn_writer(actions, tmp.path().to_path_buf(), clock, move || {
            done.send(()).unwrap();
        });
        assert_eq!(w.join().unwrap(), 4);
        finished.recv().unwrap();
        let text = std::fs::read_to_string(tmp.path().join(plan::RESPONSES)).unwrap();
        assert_eq!(text, "a,b\n3,4\n5,6\n");
        assert!(!tmp.path().join(writer::TEMPORARY).exists());
    }

    /// Actions years ahead: a stop ends the writer without carrying them out.
    #[test]
    fn a_stopped_writer_carries_out_nothing_more() {
        let tmp = tempfile::tempdir().unwrap();
        let actions = vec![action(
            "2030-01-01T00:00:00Z",
            FileAction::Append(b"x\n".to_vec()),
        )];
        let clock = Clock::Fixed("2026-03-02T07:00:00Z".parse().unwrap());
        let w = spawn_writer(actions, tmp.path().to_path_buf(), clock, || {});
        assert_eq!(w.stop().unwrap(), 0);
        assert!(!tmp.path().join(plan::RESPONSES).exists());
    }

    /// The start's actions are carried out before `start_writer` returns (the file's
    /// header is there for the first look); on a clock stopped at the start, nothing
    /// more is written until the writer is stopped.
    #[test]
    fn start_writer_writes_the_header_at_once_and_paces_the_rest() {
        let tmp = tempfile::tempdir().unwrap();
        let demo = prepare(tmp.path(), plan(3).unwrap()).unwrap();
        let clock = Clock::Fixed(demo.plan.start);
        let w = demo.start_writer(clock, || {}).unwrap();
        let text = std::fs::read_to_string(tmp.path().join(plan::RESPONSES)).unwrap();
        assert_eq!(text, plan::header());
        assert_eq!(w.stop().unwrap(), 0);
        let study = demo.study().unwrap();
        assert_eq!(study.quotas.len(), 24);
        assert!(study.log.is_some());
        let readme = std::fs::read_to_string(tmp.path().join("README.txt")).unwrap();
        assert!(readme.starts_with("INVENTED DATA"));
    }

    /// The check compares the deciding method's interval with the truth: 30 yes of
    /// 100 gives an anytime interval around 0.3 that holds 0.3 and not 0.9.
    #[test]
    fn coverage_reads_the_deciding_interval() {
        let tmp = tempfile::tempdir().unwrap();
        let study_text = "title = \"t\"\n[source]\nfile = \"r.csv\"\n[target]\nmargin = 0.1\nconfidence = 0.95\n\
            [cells]\nby = [\"zone\", \"age_band\"]\n[[measure]]\nname = \"m\"\ncolumn = \"q\"\nyes = [\"y\"]\nno = [\"n\"]\n\
            [[quota]]\ncell = { zone = \"a\", age_band = \"b\" }\n";
        std::fs::write(tmp.path().join("s.toml"), study_text).unwrap();
        let mut csv = String::from("zone,age_band,q\n");
        for i in 0..100 {
            csv.push_str(if i < 30 { "a,b,y\n" } else { "a,b,n\n" });
        }
        std::fs::write(tmp.path().join("r.csv"), csv).unwrap();
        let study = Study::load(&tmp.path().join("s.toml")).unwrap();
        let tally = crate::batch::read(&study).unwrap();
        let snapshot = assess::assess(&study, &tally, "2026-03-02T07:00:00Z".parse().unwrap());
        let truth = |p: f64| CellTruth {
            cell: (0, 0),
            label: "a × b".into(),
            proportions: [p, 0.5, 0.5],
            population: None,
        };
        let inside = coverage(&snapshot, &[truth(0.3)]);
        assert_eq!(inside.len(), 1, "one measure");
        assert!(inside[0].covers);
        assert!(inside[0].lower < 0.3 && 0.3 < inside[0].upper);
        let outside = coverage(&snapshot, &[truth(0.9)]);
        assert!(!outside[0].covers);
        let text = coverage_text(&snapshot, &outside).join("\n");
        assert!(
            text.contains("cover the true proportion in 0 of 1"),
            "{text}"
        );
        assert!(text.contains("missed: a × b, m"), "{text}");
        assert!(text.contains("One run is one draw"));
    }
}
