//! Carrying out the plan's file actions: at once (for the lockstep run and the
//! tests), or paced by a clock on a thread of its own (for the live demo, beside the
//! follow loop or the dashboard).

use std::fs::OpenOptions;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{RecvTimeoutError, Sender, channel};
use std::thread::JoinHandle;

use super::DemoError;
use super::plan::{Action, FileAction, RESPONSES};
use crate::clock::Clock;

/// The temporary name an atomic replacement is written under, in the same folder.
pub const TEMPORARY: &str = "responses.csv.partial";

fn io(path: &Path) -> impl Fn(std::io::Error) -> DemoError + '_ {
    move |e| DemoError::Io {
        path: path.display().to_string(),
        error: e.to_string(),
    }
}

/// Carry out one action on the responses file in `dir`.
pub fn perform(action: &FileAction, dir: &Path) -> Result<(), DemoError> {
    let target = dir.join(RESPONSES);
    match action {
        FileAction::Append(bytes) => {
            let mut file = OpenOptions::new()
                .create(true)
                .append(true)
                .open(&target)
                .map_err(io(&target))?;
            file.write_all(bytes).map_err(io(&target))?;
        }
        FileAction::Replace(bytes) => {
            let temporary = dir.join(TEMPORARY);
            std::fs::write(&temporary, bytes).map_err(io(&temporary))?;
            std::fs::rename(&temporary, &target).map_err(io(&target))?;
        }
    }
    Ok(())
}

/// The paced writer: a thread that carries out each action when the clock reaches
/// its moment.
pub struct Writer {
    stop: Sender<()>,
    thread: JoinHandle<Result<usize, DemoError>>,
}

/// Start a thread that carries out `actions` (in order) on the responses file in
/// `dir`, each when `clock` reaches its moment, then calls `done` (also after a
/// failed write; not after [`Writer::stop`]).
pub fn spawn_writer(
    actions: Vec<Action>,
    dir: PathBuf,
    clock: Clock,
    done: impl FnOnce() + Send + 'static,
) -> Writer {
    let (stop, stopped) = channel::<()>();
    let thread = std::thread::spawn(move || {
        let mut performed = 0;
        for action in &actions {
            // Wait for the action's moment, or a stop (a message or the handle gone).
            loop {
                let wait = clock.real_time_until(action.at);
                if wait.is_zero() {
                    break;
                }
                match stopped.recv_timeout(wait.min(std::time::Duration::from_secs(1))) {
                    Err(RecvTimeoutError::Timeout) => {}
                    Ok(()) | Err(RecvTimeoutError::Disconnected) => return Ok(performed),
                }
            }
            if let Err(e) = perform(&action.file, &dir) {
                done();
                return Err(e);
            }
            performed += 1;
        }
        done();
        Ok(performed)
    });
    Writer { stop, thread }
}

impl Writer {
    /// Whether every action has been carried out (or a write failed).
    pub fn is_finished(&self) -> bool {
        self.thread.is_finished()
    }

    /// Stop (if still running) and wait for the thread: the number of actions
    /// carried out, or the write that failed.
    pub fn stop(self) -> Result<usize, DemoError> {
        let _ = self.stop.send(());
        self.join()
    }

    /// Wait for every action to be carried out.
    pub fn join(self) -> Result<usize, DemoError> {
        match self.thread.join() {
            Ok(result) => result,
            Err(_) => Err(DemoError::WriterFailed),
        }
    }
}
