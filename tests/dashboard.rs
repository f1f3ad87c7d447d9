//! The dashboard without a terminal: the reading side ([`Feed`]) follows a responses
//! file in a temporary folder, the app takes its updates and scripted keys, and the
//! whole screen is drawn on ratatui's `TestBackend`. The clock is injected (every look
//! and tick carries its moment), times are shown in UTC, so every frame is the same on
//! every run. The committed screens live in `tests/snapshots/` (insta); after an
//! intended change, review them with `cargo insta review` or regenerate with
//! `INSTA_UPDATE=always cargo test --test dashboard` and read the diff.
//!
//! The study and its responses are invented for these tests.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use closeout::assess::Status;
use closeout::bounds::Method;
use closeout::dashboard::app::{Overlay, Page, SortKey};
use closeout::dashboard::{self, App, Command, Effect, Event, Feed, Settings, Theme};
use closeout::follow::Follower;
use closeout::live::Live;
use closeout::study::Study;
use jiff::tz::TimeZone;
use jiff::{SignedDuration, Timestamp};
use ratatui::Terminal;
use ratatui::backend::TestBackend;
use ratatui::crossterm::event::{KeyCode, KeyEvent, KeyModifiers};
use ratatui::style::{Color, Modifier};

const STUDY: &str = r#"
title = "Riverside library users' survey (invented for tests)"
[source]
file = "responses.csv"
id = "id"
time = "at"
[target]
margin = 0.10
confidence = 0.95
decide_by = "wilson"
deadline = "2026-03-06T18:00:00Z"
[log]
file = "events.jsonl"
[cells]
by = ["branch", "age"]
[[measure]]
name = "satisfied"
column = "q1"
yes = ["yes"]
no = ["no"]
[[measure]]
name = "visits_weekly"
column = "q2"
yes = ["yes"]
no = ["no"]
[[quota]]
cell = { branch = "east", age = "under 40" }
minimum = 60
[[quota]]
cell = { branch = "east", age = "40+" }
[[quota]]
cell = { branch = "west", age = "under 40" }
[[quota]]
cell = { branch = "west", age = "40+" }
population = 900
"#;

const HEADER: &str = "id,branch,age,q1,q2,at\n";

/// When fieldwork starts.
fn start() -> Timestamp {
    "2026-03-02T08:00:00Z".parse().unwrap()
}

/// The four cells, with the share of yes answers each question gets there.
const CELLS: [(&str, &str, u64, u64); 4] = [
    ("east", "under 40", 6, 3),
    ("east", "40+", 3, 5),
    ("west", "under 40", 5, 7),
    ("west", "40+", 8, 2),
];

/// Responses `from..to` of cell `c`, one every 20 minutes of fieldwork, each with
/// answers that cycle so that the proportion of yes is known (`yes` in 10).
fn rows(c: usize, from: u64, to: u64) -> String {
    let (branch, age, yes1, yes2) = CELLS[c];
    (from..to)
        .map(|i| {
            let at = start() + SignedDuration::from_mins(20 * i as i64 + c as i64);
            let q1 = if (i * 7 + c as u64) % 10 < yes1 {
                "yes"
            } else {
                "no"
            };
            let q2 = match (i * 3 + c as u64) % 10 {
                9 => "",
                k if k < yes2 => "yes",
                _ => "no",
            };
            format!("r{c}-{i},{branch},{age},{q1},{q2},{at}\n")
        })
        .collect()
}

/// The moment just after response `i` of the slowest cell.
fn after(i: u64) -> Timestamp {
    start() + SignedDuration::from_mins(20 * i as i64 + 5)
}

struct Fieldwork {
    _dir: tempfile::TempDir,
    path: PathBuf,
    feed: Feed,
    app: App,
    terminal: Terminal<TestBackend>,
    real: Instant,
}

impl Fieldwork {
    /// The study in a fresh folder with `first` as the responses file, read `read_limit`
    /// bytes per follower poll, and a dashboard of `width` × `height`.
    fn new(first: &str, read_limit: u64, width: u16, height: u16, theme: Theme) -> Fieldwork {
        Fieldwork::with_study(STUDY, first, read_limit, width, height, theme)
    }

    /// The same with another study file.
    fn with_study(
        study: &str,
        first: &str,
        read_limit: u64,
        width: u16,
        height: u16,
        theme: Theme,
    ) -> Fieldwork {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("study.toml"), study).unwrap();
        let path = dir.path().join("responses.csv");
        std::fs::write(&path, first).unwrap();
        let study = Study::load(&dir.path().join("study.toml")).unwrap();
        let log = closeout::event_log::EventLog::open(
            &dir.path().join("events.jsonl"),
            &study.source.file,
            &study.study_path,
        )
        .unwrap();
        let follower = Follower::new(study.source.file.clone(), b',').with_read_limit(read_limit);
        let feed = Feed::with_live(Live::with_follower(study, follower), Some(log));
        let app = App::new(Settings {
            zone: TimeZone::UTC,
            theme,
            simulated: false,
            size: (width, height),
            now: start(),
        });
        Fieldwork {
            _dir: dir,
            path,
            feed,
            app,
            terminal: Terminal::new(TestBackend::new(width, height)).unwrap(),
            real: Instant::now(),
        }
    }

    fn folder(&self) -> &Path {
        self.path.parent().unwrap()
    }

    fn append(&self, text: &str) {
        use std::io::Write;
        let mut f = std::fs::OpenOptions::new()
            .append(true)
            .open(&self.path)
            .unwrap();
        f.write_all(text.as_bytes()).unwrap();
    }

    /// One look at `now`, a real second after the last; the app takes the update (if
    /// any) and the effects go where they would (commands to the feed).
    fn look(&mut self, now: Timestamp) -> Vec<Effect> {
        self.real += Duration::from_secs(1);
        let mut effects = self.app.update(Event::Tick(now));
        if let Some(update) = self.feed.look(now, self.real) {
            effects.extend(self.app.update(Event::Feed(Box::new(update))));
        }
        self.route(&effects);
        effects
    }

    fn route(&mut self, effects: &[Effect]) {
        for effect in effects {
            if let Effect::Tell(command) = effect {
                self.feed.command(command.clone());
            }
        }
    }

    /// Look until the file is read to its end.
    fn catch_up(&mut self, now: Timestamp) -> Vec<Effect> {
        let mut effects = self.look(now);
        while !self.feed.caught_up() {
            effects.extend(self.look(now));
        }
        effects
    }

    fn key(&mut self, code: KeyCode) -> Vec<Effect> {
        let effects = self
            .app
            .update(Event::Key(KeyEvent::new(code, KeyModifiers::NONE)));
        self.route(&effects);
        effects
    }

    fn screen(&mut self) -> String {
        dashboard::draw(&mut self.terminal, &mut self.app).unwrap();
        self.terminal.backend().to_string()
    }

    fn status(&self, label: &str) -> Status {
        self.app
            .snapshot()
            .unwrap()
            .cells
            .iter()
            .find(|c| c.label == label)
            .unwrap()
            .status
    }
}

/// The first stage: every cell under way, east × under 40 met, the rest open.
fn first_stage() -> String {
    let mut text = HEADER.to_string();
    for (c, n) in [(0, 110), (1, 70), (2, 60), (3, 20)] {
        text.push_str(&rows(c, 0, n));
    }
    text
}

#[test]
fn first_read_shows_a_gauge_then_the_cells() {
    let mut f = Fieldwork::new(&first_stage(), 64, 100, 30, Theme::colour());
    f.look(after(109));
    assert!(
        !f.feed.caught_up(),
        "the first look reads only part of the file"
    );
    insta::assert_snapshot!("first_read_under_way", f.screen());
    f.catch_up(after(109));
    let s = f.app.snapshot().unwrap();
    assert_eq!(s.responses, 260);
    assert_eq!(f.status("east × under 40"), Status::Met);
    insta::assert_snapshot!("first_read_done", f.screen());
}

#[test]
fn a_cell_becomes_met_and_then_the_study_is_ready_with_one_bell() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    let effects = f.catch_up(after(109));
    assert!(!effects.contains(&Effect::Bell));
    assert_ne!(f.status("east × 40+"), Status::Met);
    // East × 40+ gets its last responses.
    f.append(&rows(1, 70, 110));
    let effects = f.look(after(110));
    assert_eq!(f.status("east × 40+"), Status::Met);
    assert!(!effects.contains(&Effect::Bell));
    insta::assert_snapshot!("a_cell_became_met", f.screen());
    // The rest fill up: ready to close, and one bell.
    f.append(&rows(2, 60, 120));
    f.append(&rows(3, 20, 120));
    let effects = f.look(after(121));
    let s = f.app.snapshot().unwrap();
    assert!(s.ready_to_close, "{:?}", s.cells);
    assert_eq!(effects.iter().filter(|e| **e == Effect::Bell).count(), 1);
    insta::assert_snapshot!("ready_to_close", f.screen());
    // No second bell while it stays ready.
    f.append(&rows(3, 120, 121));
    let effects = f.look(after(130));
    assert!(!effects.contains(&Effect::Bell));
    // The event log has the moment.
    let log = std::fs::read_to_string(f.folder().join("events.jsonl")).unwrap();
    let ready: Vec<&str> = log
        .lines()
        .filter(|l| l.contains("\"event\":\"ready_to_close\""))
        .collect();
    assert_eq!(ready.len(), 1, "{log}");
    assert!(ready[0].contains(&after(121).to_string()), "{}", ready[0]);
}

#[test]
fn a_replaced_file_is_counted_again_and_the_screen_says_so() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    // The export is written again under another name and renamed over the file,
    // this time without west × 40+.
    let mut text = HEADER.to_string();
    for (c, n) in [(0, 110), (1, 70), (2, 60)] {
        text.push_str(&rows(c, 0, n));
    }
    let temporary = f.folder().join("responses.csv.tmp");
    std::fs::write(&temporary, text).unwrap();
    std::fs::rename(&temporary, &f.path).unwrap();
    f.look(after(112));
    let s = f.app.snapshot().unwrap();
    assert_eq!(s.responses, 240);
    assert!(
        f.app
            .notices()
            .any(|n| n.text.contains("replaced: counted again from its start")),
        "{:?}",
        f.app.notices().collect::<Vec<_>>()
    );
    insta::assert_snapshot!("file_replaced", f.screen());
}

#[test]
fn a_tiny_terminal_is_told_what_it_needs() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 60, 20, Theme::colour());
    f.catch_up(after(109));
    let screen = f.screen();
    assert!(screen.contains("needs at least 80×24"), "{screen}");
    insta::assert_snapshot!("tiny_terminal", screen);
    // It grows: the dashboard is back.
    f.terminal.backend_mut().resize(80, 24);
    f.app.update(Event::Resize(80, 24));
    insta::assert_snapshot!("smallest_size", f.screen());
}

/// A figure wider than its column's heading keeps every digit: with a target of
/// ±0.05 points the open cells without a population still need millions of
/// responses ("4 216 468", nine characters where the column was six wide and cut the
/// first digits off), and the columns beside it move over.
#[test]
fn large_figures_are_shown_whole() {
    let study = STUDY.replace("margin = 0.10", "margin = 0.0005");
    let mut f = Fieldwork::with_study(&study, &first_stage(), 1 << 20, 100, 30, Theme::mono());
    f.catch_up(after(109));
    let screen = f.screen();
    let s = f.app.snapshot().unwrap();
    let needs: Vec<u64> = s.cells.iter().filter_map(|c| c.needed).collect();
    // (The cell with a population of 900 needs fewer than that.)
    assert_eq!(
        needs.iter().filter(|&&n| n >= 1_000_000).count(),
        3,
        "{screen}"
    );
    for need in needs {
        let shown = closeout::dashboard::format::count(need);
        assert!(
            screen.contains(&format!(" {shown} ")),
            "{shown} not whole in\n{screen}"
        );
    }
}

#[test]
fn without_colour_the_selection_stays_visible() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::mono());
    f.catch_up(after(109));
    f.key(KeyCode::Down);
    let screen = f.screen();
    insta::assert_snapshot!("no_colour", screen);
    let buffer = f.terminal.backend().buffer().clone();
    let area = buffer.area;
    // No colour anywhere (what NO_COLOR asks) …
    for y in 0..area.height {
        for x in 0..area.width {
            let cell = &buffer[(x, y)];
            assert_eq!(
                (cell.fg, cell.bg),
                (Color::Reset, Color::Reset),
                "at {x},{y}"
            );
        }
    }
    // … and the selected row, marked ▶, is in reverse video across the table.
    let row = (0..area.height)
        .find(|&y| buffer[(1, y)].symbol() == "▶")
        .expect("a selected row");
    let reversed = (1..area.width - 1)
        .filter(|&x| buffer[(x, row)].modifier.contains(Modifier::REVERSED))
        .count();
    assert!(reversed > 80, "{reversed} cells reversed on row {row}");
}

#[test]
fn an_escape_sequence_in_the_data_never_reaches_the_screen() {
    let mut text = first_stage();
    // An unplanned cell whose value carries a terminal escape sequence, and an
    // unexpected answer with a bell and a right-to-left override.
    text.push_str("x1,\u{1b}[2J\u{1b}[31mEVIL,under 40,yes,no,2026-03-02T09:00:00Z\n");
    text.push_str("x2,east,40+,\u{7}\u{202e}gnp,no,2026-03-02T09:01:00Z\n");
    text.push_str(&format!(
        "x3,{},40+,yes,no,2026-03-02T09:02:00Z\n",
        "long".repeat(40)
    ));
    let mut f = Fieldwork::new(&text, 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    let mut screens = vec![f.screen()];
    f.key(KeyCode::Char('p'));
    screens.push(f.screen());
    insta::assert_snapshot!("escape_sequence_cleaned", screens[0]);
    insta::assert_snapshot!("escape_sequence_cleaned_problems", screens[1]);
    for screen in &screens {
        assert!(
            !screen.chars().any(|c| c.is_control() && c != '\n'),
            "a control character reached the screen"
        );
        assert!(!screen.contains('\u{202e}'));
    }
    assert!(screens[0].contains("\\u{1b}[2J"), "{}", screens[0]);
    assert!(screens[1].contains("\\u{7}\\u{202e}gnp"), "{}", screens[1]);
    assert!(
        screens[0]
            .lines()
            .any(|l| l.contains("longlonglong") && l.contains("…")),
        "a long value is cut with an ellipsis: {}",
        screens[0]
    );
}

#[test]
fn keys_move_the_selection_open_pages_and_sort() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    f.screen();
    let rows: Vec<String> = f.app.rows().iter().map(|c| c.label.clone()).collect();
    assert_eq!(
        f.app.selected(),
        Some(rows[0].as_str()),
        "the worst cell first"
    );
    f.key(KeyCode::Down);
    assert_eq!(f.app.selected(), Some(rows[1].as_str()));
    f.key(KeyCode::Up);
    f.key(KeyCode::Up);
    assert_eq!(
        f.app.selected(),
        Some(rows[0].as_str()),
        "no wrap at the top"
    );
    f.key(KeyCode::End);
    assert_eq!(f.app.selected(), Some(rows[3].as_str()));
    f.key(KeyCode::Home);
    // Enter opens the cell and asks the feed for its projection and arrivals.
    let effects = f.key(KeyCode::Enter);
    assert_eq!(f.app.page(), Page::Cell);
    assert_eq!(
        effects,
        vec![Effect::Tell(Command::Focus(Some(rows[0].clone())))]
    );
    f.key(KeyCode::Right);
    assert_eq!(f.app.measure(), 1);
    f.key(KeyCode::Right);
    assert_eq!(f.app.measure(), 1, "two measures only");
    f.key(KeyCode::Left);
    assert_eq!(f.app.measure(), 0);
    // Moving on the cell page moves the focus too.
    let effects = f.key(KeyCode::Down);
    assert_eq!(
        effects,
        vec![Effect::Tell(Command::Focus(Some(rows[1].clone())))]
    );
    // Esc goes back and drops the focus; Esc on the cells page quits.
    let effects = f.key(KeyCode::Esc);
    assert_eq!(f.app.page(), Page::Cells);
    assert_eq!(effects, vec![Effect::Tell(Command::Focus(None))]);
    // Sorting: by name, then reversed.
    f.key(KeyCode::Char('s'));
    assert_eq!(f.app.sort(), (SortKey::Name, false));
    let names: Vec<String> = f.app.rows().iter().map(|c| c.label.clone()).collect();
    let mut sorted = names.clone();
    sorted.sort();
    assert_eq!(names, sorted);
    f.key(KeyCode::Char('r'));
    let reversed: Vec<String> = f.app.rows().iter().map(|c| c.label.clone()).collect();
    sorted.reverse();
    assert_eq!(reversed, sorted);
    // The help box: any key closes it; q quits from anywhere.
    f.key(KeyCode::Char('?'));
    assert_eq!(f.app.overlay(), Some(Overlay::Help));
    insta::assert_snapshot!("help", f.screen());
    f.key(KeyCode::Char('x'));
    assert_eq!(f.app.overlay(), None);
    assert_eq!(f.key(KeyCode::Esc), vec![Effect::Quit]);
    assert_eq!(f.key(KeyCode::Char('q')), vec![Effect::Quit]);
    let ctrl_c = f.app.update(Event::Key(KeyEvent::new(
        KeyCode::Char('c'),
        KeyModifiers::CONTROL,
    )));
    assert_eq!(ctrl_c, vec![Effect::Quit]);
}

#[test]
fn a_preview_under_another_method_is_marked_and_changes_nothing_else() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    let own = f.app.snapshot().unwrap().clone();
    f.key(KeyCode::Char('m'));
    assert!(matches!(f.app.overlay(), Some(Overlay::Methods { .. })));
    insta::assert_snapshot!("method_picker", f.screen());
    // From wilson (the study's) down to anytime, the last.
    for _ in 0..10 {
        f.key(KeyCode::Down);
    }
    let effects = f.key(KeyCode::Enter);
    assert_eq!(
        effects,
        vec![Effect::Tell(Command::Preview(Some(Method::Anytime)))]
    );
    f.look(after(109) + SignedDuration::from_secs(5));
    assert!(f.app.previewing());
    let shown = f.app.shown().unwrap();
    assert_eq!(shown.decide_by, Method::Anytime);
    // The preview equals the verdict a study deciding by anytime would give.
    let mut study = f.feed.study().clone();
    study.target.decide_by = Method::Anytime;
    assert_eq!(shown.cells_met, {
        let tally = closeout::batch::read(&study).unwrap();
        closeout::assess::assess(&study, &tally, shown.as_of).cells_met
    });
    // The study's own verdict is unchanged, and the study file too.
    assert_eq!(f.app.snapshot().unwrap().decide_by, Method::Wilson);
    let verdict = |s: &closeout::assess::Snapshot| -> Vec<(String, Status, Vec<Option<f64>>)> {
        s.cells
            .iter()
            .map(|c| {
                let margins = c.measures.iter().map(|m| m.margin).collect();
                (c.label.clone(), c.status, margins)
            })
            .collect()
    };
    assert_eq!(verdict(f.app.snapshot().unwrap()), verdict(&own));
    assert_eq!(
        std::fs::read_to_string(f.folder().join("study.toml")).unwrap(),
        STUDY
    );
    let screen = f.screen();
    assert!(screen.contains("PREVIEW under anytime"), "{screen}");
    insta::assert_snapshot!("preview", screen);
    // Esc ends the preview.
    let effects = f.key(KeyCode::Esc);
    assert_eq!(effects, vec![Effect::Tell(Command::Preview(None))]);
    f.look(after(109) + SignedDuration::from_secs(10));
    assert!(!f.app.previewing());
}

#[test]
fn the_cell_page_shows_every_method_the_chart_and_arrivals() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 140, 44, Theme::colour());
    f.catch_up(after(59));
    // Select west × under 40 and open it; the feed answers with its projection.
    while f.app.selected() != Some("west × under 40") {
        f.key(KeyCode::Down);
    }
    f.key(KeyCode::Enter);
    f.look(after(59) + SignedDuration::from_secs(1));
    // More responses arrive while watching: the history grows.
    f.append(&rows(2, 60, 80));
    f.look(after(79));
    f.append(&rows(2, 80, 90));
    f.look(after(89));
    let update = f
        .feed
        .look(after(89) + SignedDuration::from_mins(2), f.real);
    let update = update.expect("a minute passed: a new verdict");
    let history = &update.history["west × under 40"];
    assert_eq!(
        history.iter().map(|p| p.0).collect::<Vec<_>>(),
        vec![60, 80, 90]
    );
    let focus = update.focus.as_ref().unwrap();
    assert_eq!(focus.label, "west × under 40");
    assert!(focus.projected.first().unwrap().0 == 90);
    let arrivals = focus.arrivals.as_ref().unwrap();
    assert_eq!(
        arrivals.iter().sum::<u64>(),
        90,
        "every response arrived within the week"
    );
    f.app.update(Event::Feed(Box::new(update)));
    insta::assert_snapshot!("cell_page", f.screen());
}

#[test]
fn the_feed_speaks_only_when_something_changed() {
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    let t = after(109);
    // Nothing new within the minute: no update.
    assert!(
        f.feed
            .look(t + SignedDuration::from_secs(30), f.real)
            .is_none()
    );
    // A minute of the clock: a fresh verdict (rates and ETAs move with the clock).
    let update = f
        .feed
        .look(t + SignedDuration::from_secs(61), f.real)
        .unwrap();
    assert_eq!(update.snapshot.as_of, t + SignedDuration::from_secs(61));
    // A command: an update at once, even within the minute.
    f.feed.command(Command::Focus(Some("east × 40+".into())));
    let update = f
        .feed
        .look(t + SignedDuration::from_secs(62), f.real)
        .unwrap();
    assert_eq!(update.focus.unwrap().label, "east × 40+");
    // Previewing the study's own method is no preview.
    f.feed.command(Command::Preview(Some(Method::Wilson)));
    assert!(
        f.feed
            .look(t + SignedDuration::from_secs(63), f.real)
            .is_none()
    );
}

#[test]
fn a_missing_file_and_a_header_that_does_not_fit_are_shown_and_the_figures_stand() {
    use closeout::dashboard::feed::Reading;
    let mut f = Fieldwork::new(&first_stage(), 1 << 20, 100, 30, Theme::colour());
    f.catch_up(after(109));
    std::fs::remove_file(&f.path).unwrap();
    f.look(after(110));
    let reading = |f: &Fieldwork| f.app.feed_reading().cloned();
    assert_eq!(reading(&f), Some(Reading::WaitingForFile));
    assert_eq!(
        f.app.snapshot().unwrap().responses,
        260,
        "the last figures stand"
    );
    let screen = f.screen();
    assert!(screen.contains("waiting for the file"), "{screen}");
    // It comes back with a header that lacks a column the study reads.
    std::fs::write(
        &f.path,
        "id,branch,age,q1,at\nz1,east,40+,yes,2026-03-03T21:00:00Z\n",
    )
    .unwrap();
    f.look(after(111));
    match reading(&f) {
        Some(Reading::HeaderProblem(message)) => assert!(message.contains("q2"), "{message}"),
        other => panic!("{other:?}"),
    }
    assert_eq!(
        f.app.snapshot().unwrap().responses,
        260,
        "the last figures stand"
    );
    f.key(KeyCode::Char('p'));
    let screen = f.screen();
    let folder = f.folder().display().to_string();
    insta::with_settings!({filters => vec![(folder.as_str(), "[folder]")]}, {
        insta::assert_snapshot!("header_problem", screen);
    });
}
