//! The event log (`[log] file` in the study): one JSON object per line for every
//! change of a cell's status, every time the responses file starts over, and the
//! moment the study becomes ready to close (or stops being ready), so that anyone
//! can see afterwards why collection closed when it did.
//!
//! The file is opened for appending and never truncated or rewritten: earlier runs'
//! lines stay. It may not be the responses file or the study file.

use std::collections::BTreeMap;
use std::fs::{File, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};

use serde_json::{Value, json};

use crate::assess::{CellView, Snapshot, Status};
use crate::live::LiveEvent;

/// Why the event log cannot be written.
#[derive(Debug, thiserror::Error)]
pub enum LogError {
    #[error(
        "{path}: cannot open the event log for appending: {error}; check [log] file in the study"
    )]
    Open { path: String, error: String },
    #[error("{path}: cannot write to the event log: {error}")]
    Write { path: String, error: String },
    #[error("{path}: the event log would be written into the {what}: give [log] file another name")]
    NotOurs { path: String, what: &'static str },
}

/// What was last logged: each cell's status (by label) and whether the study was
/// ready to close.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Memory {
    statuses: BTreeMap<String, Status>,
    ready: Option<bool>,
}

/// The log entries for the events of one look and the snapshot after them, oldest
/// first: resets, then cells whose status changed (or that appear for the first
/// time) and cells no longer seen (`"to": null`), then a change of readiness.
pub fn entries(memory: &mut Memory, events: &[LiveEvent], snapshot: &Snapshot) -> Vec<Value> {
    let time = snapshot.as_of;
    let mut out = Vec::new();
    for event in events {
        if let LiveEvent::Reset { why, columns } = event {
            out.push(json!({
                "time": time,
                "event": "reset",
                "why": why.word(),
                "columns_added": columns.as_ref().map(|c| c.added.clone()).unwrap_or_default(),
                "columns_removed": columns.as_ref().map(|c| c.removed.clone()).unwrap_or_default(),
                "rows_read": snapshot.rows_read,
            }));
        }
    }
    for cell in &snapshot.cells {
        let before = memory.statuses.insert(cell.label.clone(), cell.status);
        if before != Some(cell.status) {
            out.push(json!({
                "time": time,
                "event": "cell_status",
                "cell": cell.cell,
                "label": cell.label,
                "planned": cell.planned,
                "from": before.map(Status::word),
                "to": cell.status.word(),
                "responses": cell.responses,
                "method": snapshot.decide_by,
                "measures": measures(cell),
            }));
        }
    }
    // Cells no longer seen (the file started over without them).
    let gone: Vec<String> = memory
        .statuses
        .keys()
        .filter(|label| !snapshot.cells.iter().any(|c| &c.label == *label))
        .cloned()
        .collect();
    for label in gone {
        let before = memory.statuses.remove(&label);
        out.push(json!({
            "time": time,
            "event": "cell_status",
            "label": label,
            "from": before.map(Status::word),
            "to": null,
            "responses": 0,
            "method": snapshot.decide_by,
        }));
    }
    let before = memory.ready.replace(snapshot.ready_to_close);
    if before.is_some_and(|b| b != snapshot.ready_to_close)
        || (before.is_none() && snapshot.ready_to_close)
    {
        let cells: Vec<Value> = snapshot
            .cells
            .iter()
            .filter(|c| c.planned)
            .map(|c| json!({"cell": c.cell, "label": c.label, "responses": c.responses, "measures": measures(c)}))
            .collect();
        out.push(json!({
            "time": time,
            "event": if snapshot.ready_to_close { "ready_to_close" } else { "no_longer_ready" },
            "method": snapshot.decide_by,
            "margin_target": snapshot.margin_target,
            "confidence": snapshot.confidence,
            "responses": snapshot.responses,
            "cells": cells,
        }));
    }
    out
}

fn measures(cell: &CellView) -> Vec<Value> {
    cell.measures
        .iter()
        .map(|m| json!({"name": m.name, "n": m.n, "estimate": m.estimate, "margin": m.margin, "met": m.met}))
        .collect()
}

/// The open event log.
#[derive(Debug)]
pub struct EventLog {
    path: PathBuf,
    file: File,
    memory: Memory,
}

impl EventLog {
    /// Open `path` for appending (creating it), refusing the files the user gave us.
    pub fn open(path: &Path, responses: &Path, study: &Path) -> Result<EventLog, LogError> {
        let shown = path.display().to_string();
        for (other, what) in [(responses, "responses file"), (study, "study file")] {
            let same = match (std::fs::canonicalize(path), std::fs::canonicalize(other)) {
                (Ok(a), Ok(b)) => a == b,
                _ => path == other,
            };
            if same {
                return Err(LogError::NotOurs { path: shown, what });
            }
        }
        let file = OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)
            .map_err(|e| LogError::Open {
                path: shown,
                error: e.to_string(),
            })?;
        Ok(EventLog {
            path: path.to_path_buf(),
            file,
            memory: Memory::default(),
        })
    }

    /// Append the entries for this look, each line written whole.
    pub fn record(&mut self, events: &[LiveEvent], snapshot: &Snapshot) -> Result<(), LogError> {
        for entry in entries(&mut self.memory, events, snapshot) {
            let line = format!("{entry}\n");
            self.file
                .write_all(line.as_bytes())
                .map_err(|e| LogError::Write {
                    path: self.path.display().to_string(),
                    error: e.to_string(),
                })?;
        }
        Ok(())
    }
}
