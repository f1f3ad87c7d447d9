//! Time to draw one dashboard frame with 200 cells (issue 7's B4): the reading side
//! reads an invented file of 200 cells × 50 responses, the app takes the update, and
//! each frame follows a key that moves the selection (so every frame differs, as it
//! does when someone is using the dashboard). Drawn on ratatui's `TestBackend`, which
//! keeps the buffer and diff work of a real terminal but writes no bytes. Run with
//! `cargo bench --bench frame`; the figure is the median over 201 frames.

#![allow(clippy::unwrap_used, clippy::expect_used)]

use std::time::Instant;

use closeout::dashboard::{self, App, Event, Feed, Settings, Theme};
use closeout::study::Study;
use jiff::tz::TimeZone;
use ratatui::Terminal;
use ratatui::backend::TestBackend;
use ratatui::crossterm::event::{KeyCode, KeyEvent, KeyModifiers};

const FRAMES: usize = 201;

fn main() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("study.toml"),
        r#"
title = "Frame benchmark (invented)"
[source]
file = "responses.csv"
time = "at"
[target]
margin = 0.05
confidence = 0.95
decide_by = "wilson"
[cells]
by = ["region", "band"]
[[measure]]
name = "q1"
column = "q1"
yes = ["1"]
no = ["0"]
[[measure]]
name = "q2"
column = "q2"
yes = ["1"]
no = ["0"]
"#,
    )
    .unwrap();
    let mut csv = String::from("region,band,q1,q2,at\n");
    for i in 0..10_000u64 {
        let cell = i % 200;
        csv.push_str(&format!(
            "region-{:02},band-{},{},{},2026-03-02T{:02}:{:02}:00Z\n",
            cell / 10,
            cell % 10,
            (i * 7 / 3) % 2,
            (i / 3) % 2,
            8 + (i / 1000) % 10,
            i % 60
        ));
    }
    std::fs::write(dir.path().join("responses.csv"), csv).unwrap();
    let study = Study::load(&dir.path().join("study.toml")).unwrap();
    let now: jiff::Timestamp = "2026-03-02T18:00:00Z".parse().unwrap();
    let mut feed = Feed::new(study, None);
    let update = feed.look(now, Instant::now()).expect("a first update");
    assert_eq!(update.snapshot.cells.len(), 200);

    for (width, height) in [(80u16, 24u16), (120, 40), (200, 60)] {
        let mut app = App::new(Settings {
            zone: TimeZone::UTC,
            theme: Theme::colour(),
            simulated: false,
            size: (width, height),
            now,
        });
        app.update(Event::Feed(Box::new(update.clone())));
        let mut terminal = Terminal::new(TestBackend::new(width, height)).unwrap();
        dashboard::draw(&mut terminal, &mut app).unwrap();
        let mut times = Vec::with_capacity(FRAMES);
        for i in 0..FRAMES {
            let code = if (i / 100) % 2 == 0 {
                KeyCode::Down
            } else {
                KeyCode::Up
            };
            app.update(Event::Key(KeyEvent::new(code, KeyModifiers::NONE)));
            let start = Instant::now();
            dashboard::draw(&mut terminal, &mut app).unwrap();
            times.push(start.elapsed().as_secs_f64());
        }
        times.sort_by(f64::total_cmp);
        println!(
            "frame with 200 cells at {width}×{height}: median {:.2} ms, slowest {:.2} ms",
            1e3 * times[FRAMES / 2],
            1e3 * times[FRAMES - 1]
        );
    }
}
