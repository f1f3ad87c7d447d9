//! `closeout status --follow`: what to print after each look at the file. A summary
//! line when the verdict changes, when rows are rejected and when the file starts
//! over (text), or the whole snapshot as one JSON line whenever the tallies change;
//! and a notice for each reset, wait, header problem or warning.

use super::{clean, status_json, verdict, when};
use crate::assess::Snapshot;
use crate::live::LiveEvent;

/// What to print now: lines for standard output and for standard error.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Lines {
    pub out: Vec<String>,
    pub err: Vec<String>,
}

/// Remembers what was last printed, to print only what changed.
#[derive(Clone, Debug, Default)]
pub struct FollowOutput {
    json: bool,
    /// (ready to close, cells met, cells planned, rows rejected) last summarised.
    last: Option<(bool, usize, usize, u64)>,
    printed_json: bool,
}

impl FollowOutput {
    pub fn new(json: bool) -> FollowOutput {
        FollowOutput {
            json,
            ..FollowOutput::default()
        }
    }

    /// The lines for the events of one poll and the snapshot after them.
    pub fn update(&mut self, events: &[LiveEvent], snapshot: &Snapshot) -> Lines {
        let mut lines = Lines::default();
        let stamp = when(snapshot.as_of);
        let mut started_over = false;
        let mut counted = false;
        for event in events {
            match event {
                LiveEvent::Started | LiveEvent::Counted { .. } => counted = true,
                LiveEvent::Reset { .. } => {
                    started_over = true;
                    counted = true;
                }
                _ => {}
            }
            if let Some(notice) = notice(event) {
                let line = format!("{stamp} {notice}");
                if self.json {
                    lines.err.push(line);
                } else {
                    lines.out.push(line);
                }
            }
        }
        if self.json {
            if counted || started_over || !self.printed_json {
                self.printed_json = true;
                lines.out.push(status_json(snapshot).to_string());
            }
        } else {
            let now = (
                snapshot.ready_to_close,
                snapshot.cells_met,
                snapshot.cells_planned,
                snapshot.rows_rejected,
            );
            if self.last != Some(now) || started_over {
                self.last = Some(now);
                lines.out.push(summary(snapshot));
            }
        }
        lines
    }

    /// The last state, for the end of the run.
    pub fn last_state(&self, snapshot: &Snapshot) -> String {
        if self.json {
            status_json(snapshot).to_string()
        } else {
            summary(snapshot)
        }
    }
}

/// What to tell the user about one event of a look, if anything: resets, waits, header
/// problems and warnings (counting itself says nothing).
pub fn notice(event: &LiveEvent) -> Option<String> {
    match event {
        LiveEvent::Started | LiveEvent::Counted { .. } => None,
        LiveEvent::Reset { why, columns } => Some(format!(
            "the responses file was {}{}: counted again from its start",
            why.word(),
            in_brackets(columns.as_ref())
        )),
        LiveEvent::Waiting => Some(
            "the responses file is missing: waiting for it (the last figures stand)".to_string(),
        ),
        LiveEvent::Resumed => Some("the responses file is back".to_string()),
        LiveEvent::HeaderProblem { message, columns } => Some(format!(
            "{}{}; nothing more is counted until the header fits the study",
            clean(message, 400),
            in_brackets(columns.as_ref())
        )),
        LiveEvent::Warning(w) => Some(format!("warning: {w}")),
    }
}

/// " (columns added: …)", or nothing.
fn in_brackets(columns: Option<&crate::live::HeaderChange>) -> String {
    columns.map(|c| format!(" ({c})")).unwrap_or_default()
}

/// One line: when, how many responses, rejected and duplicate rows, the verdict.
pub fn summary(s: &Snapshot) -> String {
    format!(
        "{} {} responses ({} rows read, {} rejected, {} duplicates): {}",
        when(s.as_of),
        s.responses,
        s.rows_read,
        s.rows_rejected,
        s.duplicates,
        verdict(s)
    )
}
