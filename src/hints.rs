//! Hints that the responses file may have changed, as one channel of owned events:
//! a `notify` watcher on the file's *parent directory* (so that a file that is
//! replaced, rotated or re-created is still seen), filtered by file name; a safety
//! tick every second whatever the watcher says; and whatever else the caller sends
//! (a stop on Ctrl-C, or the dashboard's requests to its reading thread). Hints decide
//! nothing: the receiver polls the file and `stat` and the bytes decide.
//!
//! The channel carries the caller's own message type `T`, made from a [`Hint`] with
//! `From`, so that one receiver gets the hints and everything else its thread is told.

use std::ffi::OsString;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{Receiver, Sender, channel};
use std::time::Duration;

use notify::event::{AccessKind, AccessMode, EventKind};
use notify::{RecommendedWatcher, RecursiveMode, Watcher};

/// The safety tick.
pub const TICK: Duration = Duration::from_secs(1);

/// One event on the channel.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Hint {
    /// Something happened to a file of that name in its directory.
    File,
    /// The safety tick.
    Tick,
    /// The user asked to stop (Ctrl-C, SIGTERM).
    Stop,
}

/// The channel, and the watcher that feeds it while it lives.
pub struct Hints<T = Hint> {
    receiver: Receiver<T>,
    sender: Sender<T>,
    watcher: Option<RecommendedWatcher>,
    /// Why the watcher could not be created, if it could not (polling then).
    pub watch_error: Option<String>,
}

impl<T: From<Hint> + Send + 'static> Hints<T> {
    /// Hints for `file`: a watcher on its parent directory unless `poll_only`, and
    /// the safety tick every `tick`.
    pub fn start(file: &Path, poll_only: bool, tick: Duration) -> Hints<T> {
        let (sender, receiver) = channel();
        let ticker = sender.clone();
        std::thread::spawn(move || {
            loop {
                std::thread::sleep(tick);
                if ticker.send(T::from(Hint::Tick)).is_err() {
                    break;
                }
            }
        });
        let mut hints = Hints {
            receiver,
            sender,
            watcher: None,
            watch_error: None,
        };
        if !poll_only {
            match watch(file, hints.sender.clone()) {
                Ok(watcher) => hints.watcher = Some(watcher),
                Err(e) => hints.watch_error = Some(e.to_string()),
            }
        }
        hints
    }

    /// Whether file events arrive (otherwise only the tick does).
    pub fn watching(&self) -> bool {
        self.watcher.is_some()
    }

    /// A sender for other events on the same channel.
    pub fn sender(&self) -> Sender<T> {
        self.sender.clone()
    }

    /// The next message, waiting for it. `None` never happens while `self` holds a
    /// sender, but is handled as a stop.
    pub fn next(&self) -> Option<T> {
        self.receiver.recv().ok()
    }

    /// The next message, waiting at most `timeout` for it.
    pub fn next_within(&self, timeout: Duration) -> Option<T> {
        self.receiver.recv_timeout(timeout).ok()
    }

    /// A message that is already waiting, if any (to fold a burst into one poll).
    pub fn try_next(&self) -> Option<T> {
        self.receiver.try_recv().ok()
    }
}

/// Whether an event on these paths concerns the file of that name.
fn concerns(paths: &[PathBuf], name: Option<&std::ffi::OsStr>) -> bool {
    paths.iter().any(|p| p.file_name() == name)
}

/// Whether the event may mean the file changed. Opening, reading and closing a file
/// without writing change nothing, and every look at the file does exactly that: were
/// they hints, each look would cause the next, and the program would never rest.
fn may_change(kind: &EventKind) -> bool {
    match kind {
        EventKind::Access(AccessKind::Close(AccessMode::Write)) => true,
        EventKind::Access(_) => false,
        _ => true,
    }
}

fn watch<T: From<Hint> + Send + 'static>(
    file: &Path,
    sender: Sender<T>,
) -> notify::Result<RecommendedWatcher> {
    let name: Option<OsString> = file.file_name().map(OsString::from);
    let parent: PathBuf = match file.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut watcher = notify::recommended_watcher(move |event: notify::Result<notify::Event>| {
        let relevant = match &event {
            Ok(event) => may_change(&event.kind) && concerns(&event.paths, name.as_deref()),
            // An error from the watcher: poll anyway.
            Err(_) => true,
        };
        if relevant {
            let _ = sender.send(T::from(Hint::File));
        }
    })?;
    watcher.watch(&parent, RecursiveMode::NonRecursive)?;
    Ok(watcher)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A change to the file arrives as a hint from the watcher (the tick is an hour
    /// away); the deadline is generous and only bounds a failure.
    #[test]
    fn a_write_to_the_file_is_a_hint_and_the_sender_shares_the_channel() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("responses.csv");
        let hints: Hints = Hints::start(&path, false, Duration::from_secs(3600));
        assert!(hints.watching(), "{:?}", hints.watch_error);
        std::fs::write(&path, "a,b\n").unwrap();
        let got = hints.receiver.recv_timeout(Duration::from_secs(60));
        assert_eq!(got, Ok(Hint::File));
        hints.sender().send(Hint::Stop).unwrap();
        // Drain the file hints of the writes; the stop follows them.
        let mut rest = Vec::new();
        while let Ok(h) = hints.receiver.recv_timeout(Duration::from_secs(60)) {
            rest.push(h);
            if h == Hint::Stop {
                break;
            }
        }
        assert_eq!(rest.last(), Some(&Hint::Stop));
        assert!(rest.iter().all(|&h| h != Hint::Tick));
    }

    #[test]
    fn only_events_on_the_file_name_count() {
        let name = Some(std::ffi::OsStr::new("responses.csv"));
        let p = |s: &str| PathBuf::from(s);
        assert!(concerns(&[p("/d/responses.csv")], name));
        // A rename names both ends; either may be ours.
        assert!(concerns(&[p("/d/x.tmp"), p("/d/responses.csv")], name));
        assert!(!concerns(&[p("/d/responses.csv.1")], name));
        assert!(!concerns(&[p("/d/other.csv"), p("/d")], name));
        assert!(!concerns(&[], name));
    }

    /// Our own looks (open, read, close without writing) are no hints; a write, a
    /// finished write, a creation, a rename and a removal are.
    #[test]
    fn reading_the_file_is_no_hint() {
        use notify::event::{CreateKind, ModifyKind, RemoveKind, RenameMode};
        assert!(!may_change(&EventKind::Access(AccessKind::Open(
            AccessMode::Any
        ))));
        assert!(!may_change(&EventKind::Access(AccessKind::Read)));
        assert!(!may_change(&EventKind::Access(AccessKind::Close(
            AccessMode::Read
        ))));
        assert!(may_change(&EventKind::Access(AccessKind::Close(
            AccessMode::Write
        ))));
        assert!(may_change(&EventKind::Modify(ModifyKind::Any)));
        assert!(may_change(&EventKind::Modify(ModifyKind::Name(
            RenameMode::To
        ))));
        assert!(may_change(&EventKind::Create(CreateKind::File)));
        assert!(may_change(&EventKind::Remove(RemoveKind::File)));
        assert!(may_change(&EventKind::Any));
    }

    #[test]
    fn polling_only_has_no_watcher_and_ticks() {
        let dir = tempfile::tempdir().unwrap();
        let hints: Hints = Hints::start(&dir.path().join("r.csv"), true, Duration::from_millis(1));
        assert!(!hints.watching());
        assert_eq!(hints.next(), Some(Hint::Tick));
    }
}
