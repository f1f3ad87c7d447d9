//! The live dashboard (`closeout watch`): the study's verdict on one screen, kept
//! current as responses arrive.
//!
//! Three threads feed one channel of [`Event`]s, owned values all: the terminal's
//! input (keys and resizes), the reading thread ([`feed`]: follows the file, assesses,
//! sends an [`Update`]), and a slow tick for the clock. The main thread owns the
//! [`App`]: all mutation happens in [`App::update`], the screen is a pure function of
//! the app ([`view::draw`]), and it is redrawn only when something changed. Nothing
//! here computes a statistic; the reading thread hands over finished snapshots.
//!
//! [`run_loop`] is generic over the ratatui backend, so tests drive the whole loop on a
//! `TestBackend` with scripted events and an injected clock.

use std::io::Write;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{Receiver, Sender, channel};
use std::time::Duration;

use ratatui::Terminal;
use ratatui::backend::Backend;
use ratatui::crossterm::event::{self as term, KeyEventKind};

pub mod app;
pub mod feed;
pub mod format;
pub mod theme;
pub mod view;

pub use app::{App, Effect, Event, Settings};
pub use feed::{Command, Feed, Update};
pub use theme::Theme;

use crate::clock::Clock;
use crate::event_log::EventLog;
use crate::study::Study;

/// How often the clock ticks (for the clock on screen; nothing is recomputed).
pub const TICK: Duration = Duration::from_secs(1);

/// How `closeout watch` runs.
#[derive(Clone, Debug)]
pub struct Options {
    pub clock: Clock,
    /// Look at the file every second instead of watching its folder.
    pub poll_only: bool,
    /// The time zone times are shown in.
    pub zone: jiff::tz::TimeZone,
    pub theme: Theme,
}

/// Run the loop until the app says quit or the events end: take every event waiting,
/// update, act on the effects, and draw when something changed. `act` carries out
/// what the app asks (tell the reading thread, ring the bell).
pub fn run_loop<B: Backend>(
    terminal: &mut Terminal<B>,
    app: &mut App,
    events: &Receiver<Event>,
    mut act: impl FnMut(Effect),
) -> Result<(), B::Error> {
    draw(terminal, app)?;
    while let Ok(first) = events.recv() {
        let mut effects = app.update(first);
        while let Ok(more) = events.try_recv() {
            effects.extend(app.update(more));
        }
        for effect in effects {
            match effect {
                Effect::Quit => return Ok(()),
                other => act(other),
            }
        }
        if app.take_dirty() {
            draw(terminal, app)?;
        }
    }
    Ok(())
}

/// Draw one frame and let the app know the layout it found.
pub fn draw<B: Backend>(terminal: &mut Terminal<B>, app: &mut App) -> Result<(), B::Error> {
    let mut drawn = app::Drawn::default();
    terminal.draw(|frame| drawn = view::draw(frame, app))?;
    app.after_draw(drawn);
    Ok(())
}

/// Open the dashboard on the study in this terminal and run it until the user quits
/// or a signal stops it. `on_stop` is given a sender for [`Event::Stop`], for the
/// caller's signal handler. The terminal is restored on the way out, and on a panic.
pub fn run(
    study: Study,
    log: Option<EventLog>,
    options: Options,
    on_stop: impl FnOnce(Sender<Event>),
) -> std::io::Result<()> {
    // Our themes decide colour (monochrome under NO_COLOR). Left to itself, crossterm
    // answers NO_COLOR by writing a bare "ESC[m" for every colour change, which also
    // switches off bold and reverse video; with colour output forced, the styles are
    // written exactly as the theme sets them.
    ratatui::crossterm::style::force_color_output(true);
    let (sender, events) = channel();
    let feed = feed::spawn(study, log, options.clock, options.poll_only, {
        let sender = sender.clone();
        move |update| sender.send(Event::Feed(update)).is_ok()
    });
    on_stop(sender.clone());
    let stop = Arc::new(AtomicBool::new(false));
    spawn_input(sender.clone(), Arc::clone(&stop));
    spawn_ticker(sender, options.clock, Arc::clone(&stop));

    let mut terminal = match ratatui::try_init() {
        Ok(terminal) => terminal,
        Err(e) => {
            ratatui::restore();
            stop.store(true, Ordering::Relaxed);
            return Err(e);
        }
    };
    let size = terminal.size()?;
    let mut app = App::new(Settings {
        zone: options.zone,
        theme: options.theme,
        simulated: options.clock.is_simulated(),
        size: (size.width, size.height),
        now: options.clock.now(),
    });
    let commands: Sender<feed::Work> = feed.commands.clone();
    let result = run_loop(&mut terminal, &mut app, &events, |effect| match effect {
        Effect::Tell(command) => {
            let _ = commands.send(feed::Work::Command(command));
        }
        Effect::Bell => {
            let mut out = std::io::stdout();
            let _ = out.write_all(b"\x07").and_then(|()| out.flush());
        }
        Effect::Quit => {}
    });
    ratatui::restore();
    stop.store(true, Ordering::Relaxed);
    let _ = commands.send(feed::Work::Command(Command::Stop));
    result
}

/// Keys and resizes, as events. Polls with a short timeout so that it notices `stop`.
fn spawn_input(sender: Sender<Event>, stop: Arc<AtomicBool>) {
    std::thread::spawn(move || {
        while !stop.load(Ordering::Relaxed) {
            match term::poll(Duration::from_millis(200)) {
                Ok(true) => {}
                Ok(false) => continue,
                Err(_) => return,
            }
            let event = match term::read() {
                Ok(term::Event::Key(key)) if key.kind == KeyEventKind::Press => Event::Key(key),
                Ok(term::Event::Resize(w, h)) => Event::Resize(w, h),
                Ok(_) => continue,
                Err(_) => return,
            };
            if sender.send(event).is_err() {
                return;
            }
        }
    });
}

/// The clock's tick.
fn spawn_ticker(sender: Sender<Event>, clock: Clock, stop: Arc<AtomicBool>) {
    std::thread::spawn(move || {
        while !stop.load(Ordering::Relaxed) {
            std::thread::sleep(TICK);
            if sender.send(Event::Tick(clock.now())).is_err() {
                return;
            }
        }
    });
}
