//! Following without a terminal: the loop behind `closeout status --follow`, the
//! demo when it does not draw a dashboard, and `closeout watch` when standard output
//! is not a terminal.
//!
//! One loop over one channel of [`Hints`]; the loop owns the [`Live`] tally, polls on
//! every hint (a burst folded into one look) and on the tick, assesses at
//! `clock.now()`, and writes what [`FollowOutput`] says to the two sinks it is given.
//! The caller builds the hints (and decides who may send a stop on them: Ctrl-C, the
//! demo's writer when it is done), so this module knows nothing of signals.

use std::io::Write;

use crate::assess::{self, Detail, Snapshot};
use crate::clock::Clock;
use crate::event_log::EventLog;
use crate::hints::{Hint, Hints};
use crate::live::Live;
use crate::report::FollowOutput;
use crate::study::Study;

/// How the loop reports and when it ends.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct FollowOptions {
    /// The whole snapshot as one JSON line per tally change, instead of summary lines.
    pub json: bool,
    /// End (exit code 0) as soon as the study is ready to close.
    pub until_ready: bool,
    /// On a stop, exit 1 if the study is not ready to close.
    pub exit_code: bool,
}

/// Write lines to the sinks, flushing standard output. `Err` carries the exit code
/// when standard output is gone: 0 for a closed pipe (not an error), 1 for another
/// failed write (said on `err`). Failures to write `err` itself are ignored.
pub fn write_lines(
    lines: &[String],
    err_lines: &[String],
    out: &mut impl Write,
    err: &mut impl Write,
) -> Result<(), u8> {
    for line in err_lines {
        let _ = writeln!(err, "{line}");
    }
    let written = lines
        .iter()
        .try_for_each(|line| writeln!(out, "{line}"))
        .and_then(|()| out.flush());
    match written {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Err(0),
        Err(e) => {
            let _ = writeln!(err, "closeout: cannot write the output: {e}");
            Err(1)
        }
    }
}

/// Follow the study's responses file until a stop arrives on `hints` (or, with
/// `until_ready`, until the study is ready to close), printing as `status --follow`
/// does; returns the exit code. `clock` gives the moment of each look (rates, ETAs
/// and the times printed), so a simulated clock shows simulated times.
pub fn follow(
    study: Study,
    mut log: Option<EventLog>,
    options: FollowOptions,
    clock: &Clock,
    hints: &Hints,
    out: &mut impl Write,
    err: &mut impl Write,
) -> u8 {
    if let Some(e) = &hints.watch_error {
        let _ = writeln!(
            err,
            "closeout: cannot watch the folder of the responses file ({e}): looking every second instead"
        );
    }
    let mut live = Live::new(study);
    let mut output = FollowOutput::new(options.json);
    // The JSON lines carry every method; the summary lines need the verdict alone.
    let detail = if options.json {
        Detail::EveryMethod
    } else {
        Detail::Verdict
    };
    let look = |live: &Live| {
        let study = live.study();
        assess::assess_with(
            study,
            live.tally(),
            clock.now(),
            study.target.decide_by,
            detail,
        )
    };
    let mut last_error: Option<String> = None;
    let mut last_log_error: Option<String> = None;
    let mut snapshot: Snapshot = look(&live);
    let mut hint = Some(Hint::File);
    loop {
        match hint {
            None | Some(Hint::Stop) => {
                let text = output.last_state(&snapshot);
                return match write_lines(&[text], &[], out, err) {
                    Ok(()) => u8::from(options.exit_code && !snapshot.ready_to_close),
                    Err(code) => code,
                };
            }
            Some(Hint::File | Hint::Tick) => {}
        }
        // Fold a burst of hints into one look; a stop waiting in it still counts.
        let mut stopping = false;
        while let Some(h) = hints.try_next() {
            stopping |= h == Hint::Stop;
        }
        let events = match live.poll() {
            Ok(events) => {
                last_error = None;
                events
            }
            Err(e) => {
                let message = format!("closeout: {e}");
                if last_error.as_deref() != Some(message.as_str()) {
                    let _ = writeln!(err, "{message}");
                    last_error = Some(message);
                }
                Vec::new()
            }
        };
        snapshot = look(&live);
        if let Some(l) = &mut log
            && let Err(e) = l.record(&events, &snapshot)
        {
            let message = format!("closeout: {e}");
            if last_log_error.as_deref() != Some(message.as_str()) {
                let _ = writeln!(err, "{message}");
                last_log_error = Some(message);
            }
        }
        let lines = output.update(&events, &snapshot);
        if let Err(code) = write_lines(&lines.out, &lines.err, out, err) {
            return code;
        }
        if options.until_ready && snapshot.ready_to_close {
            return 0;
        }
        hint = if stopping {
            Some(Hint::Stop)
        } else if !live.caught_up() {
            Some(Hint::File)
        } else {
            hints.next()
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    const STUDY: &str = r#"title = "headless test"
[source]
file = "responses.csv"
id = "id"
[target]
margin = 0.2
confidence = 0.95
[[measure]]
name = "q"
column = "q1"
yes = ["y"]
no = ["n"]
"#;

    fn setup() -> (tempfile::TempDir, Study) {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("study.toml"), STUDY).unwrap();
        std::fs::write(dir.path().join("responses.csv"), "id,q1\n1,y\n2,n\n2,y\n").unwrap();
        let study = Study::load(&dir.path().join("study.toml")).unwrap();
        (dir, study)
    }

    /// A stop already waiting: one look (its summary), then the last state, both at
    /// the clock's moment, not the wall clock's.
    #[test]
    fn a_waiting_stop_prints_the_state_at_the_clocks_moment() {
        let (_dir, study) = setup();
        let hints = Hints::start(&study.source.file, true, Duration::from_secs(3600));
        hints.sender().send(Hint::Stop).unwrap();
        let t: jiff::Timestamp = "2026-03-02T09:00:00Z".parse().unwrap();
        let (mut out, mut err) = (Vec::new(), Vec::new());
        let options = FollowOptions {
            exit_code: true,
            ..FollowOptions::default()
        };
        let code = follow(
            study,
            None,
            options,
            &Clock::Fixed(t),
            &hints,
            &mut out,
            &mut err,
        );
        assert_eq!(code, 1, "--exit-code and not ready to close");
        let out = String::from_utf8(out).unwrap();
        let lines: Vec<&str> = out.lines().collect();
        assert_eq!(lines.len(), 2, "{out}");
        for line in lines {
            assert!(
                line.starts_with(
                    "2026-03-02 09:00 UTC 2 responses (3 rows read, 0 rejected, 1 duplicates)"
                ),
                "{line}"
            );
        }
        assert!(err.is_empty());
    }

    struct Failing(std::io::ErrorKind);

    impl Write for Failing {
        fn write(&mut self, _: &[u8]) -> std::io::Result<usize> {
            Err(std::io::Error::from(self.0))
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Err(std::io::Error::from(self.0))
        }
    }

    #[test]
    fn a_closed_pipe_is_not_an_error_and_another_failed_write_is() {
        let lines = ["x".to_string()];
        let mut err = Vec::new();
        let closed = write_lines(
            &lines,
            &[],
            &mut Failing(std::io::ErrorKind::BrokenPipe),
            &mut err,
        );
        assert_eq!(closed, Err(0));
        assert!(err.is_empty());
        let full = write_lines(
            &lines,
            &["notice".to_string()],
            &mut Failing(std::io::ErrorKind::StorageFull),
            &mut err,
        );
        assert_eq!(full, Err(1));
        let err = String::from_utf8(err).unwrap();
        assert!(
            err.starts_with("notice\ncloseout: cannot write the output"),
            "{err}"
        );
    }
}
