//! The real `closeout watch` in a real terminal: tmux runs the binary on a study in a
//! temporary folder, the test appends responses to the followed file, and reads the
//! screen with `capture-pane` until the new counts appear. After `q`, the shell's
//! next command must find the terminal restored (no alternate screen, line editing
//! and echo back on). Waits are bounded by generous deadlines and wait only for what
//! the program must do; nothing depends on how fast it does it.
//!
//! tmux is needed: `.ci/run` installs it when it is missing. The study and its
//! responses are invented for this test.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

const STUDY: &str = r#"
title = "Harbour ferry riders' survey (invented for tests)"
[source]
file = "responses.csv"
id = "id"
[target]
margin = 0.10
confidence = 0.95
decide_by = "wilson"
[cells]
by = ["deck"]
[[measure]]
name = "on_time"
column = "q1"
yes = ["yes"]
no = ["no"]
[[quota]]
cell = { deck = "upper" }
[[quota]]
cell = { deck = "lower" }
"#;

fn rows(from: u64, to: u64) -> String {
    (from..to)
        .map(|i| {
            let deck = if i % 2 == 0 { "upper" } else { "lower" };
            let q1 = if i % 5 < 3 { "yes" } else { "no" };
            format!("r{i},{deck},{q1}\n")
        })
        .collect()
}

/// A tmux server of our own (its own socket), killed when the test ends.
struct Tmux {
    socket: String,
}

impl Tmux {
    fn start(name: &str, width: u16, height: u16, command: &str, env: &[(&str, &str)]) -> Tmux {
        let found = Command::new("tmux").arg("-V").output();
        assert!(
            found.is_ok_and(|o| o.status.success()),
            "this test needs tmux (apt-get install tmux; .ci/run installs it)"
        );
        let tmux = Tmux {
            socket: format!("closeout-{name}-{}", std::process::id()),
        };
        let mut cmd = Command::new("tmux");
        cmd.args([
            "-u",
            "-L",
            &tmux.socket,
            "-f",
            "/dev/null",
            "new-session",
            "-d",
        ]);
        cmd.args(["-x", &width.to_string(), "-y", &height.to_string()]);
        for (k, v) in env {
            cmd.args(["-e", &format!("{k}={v}")]);
        }
        cmd.arg(command);
        let status = cmd.status().unwrap();
        assert!(status.success(), "tmux did not start");
        tmux
    }

    fn screen(&self, escapes: bool) -> String {
        let mut cmd = Command::new("tmux");
        cmd.args(["-u", "-L", &self.socket, "capture-pane", "-p"]);
        if escapes {
            cmd.arg("-e");
        }
        String::from_utf8_lossy(&cmd.output().unwrap().stdout).into_owned()
    }

    /// The screen once it holds `text`; panics with the screen after a minute.
    fn wait_for(&self, text: &str) -> String {
        let deadline = Instant::now() + Duration::from_secs(60);
        loop {
            let screen = self.screen(false);
            if screen.contains(text) {
                return screen;
            }
            assert!(
                Instant::now() < deadline,
                "'{text}' never appeared; the screen:\n{screen}"
            );
            std::thread::sleep(Duration::from_millis(100));
        }
    }

    fn keys(&self, keys: &str) {
        let status = Command::new("tmux")
            .args(["-u", "-L", &self.socket, "send-keys", "-l", keys])
            .status()
            .unwrap();
        assert!(status.success());
    }
}

impl Drop for Tmux {
    fn drop(&mut self) {
        let _ = Command::new("tmux")
            .args(["-L", &self.socket, "kill-server"])
            .status();
    }
}

fn study_in(dir: &Path, responses: &str) {
    std::fs::write(dir.join("study.toml"), STUDY).unwrap();
    std::fs::write(dir.join("responses.csv"), responses).unwrap();
}

/// The shell line tmux runs: the dashboard, then what the terminal looks like after.
fn command(dir: &Path) -> String {
    format!(
        "cd '{}' && '{}' watch study.toml; echo \"EXITED $?\"; stty -a | tr ' ;' '\\n\\n' | grep -x -e '-\\?icanon' -e '-\\?echo'; echo 'SHELL DONE'; sleep 600",
        dir.display(),
        env!("CARGO_BIN_EXE_closeout")
    )
}

#[test]
fn the_dashboard_follows_appends_and_restores_the_terminal() {
    let dir = tempfile::tempdir().unwrap();
    study_in(dir.path(), &format!("id,deck,q1\n{}", rows(0, 40)));
    let tmux = Tmux::start("follow", 100, 30, &command(dir.path()), &[("TZ", "UTC")]);
    let screen = tmux.wait_for("40 counted");
    assert!(screen.contains("Harbour ferry riders' survey"), "{screen}");
    assert!(screen.contains("0 of 2 planned cells met"), "{screen}");

    // Responses arrive: the counts move, and both cells are met (wilson, ±10 points).
    let mut file = std::fs::OpenOptions::new()
        .append(true)
        .open(dir.path().join("responses.csv"))
        .unwrap();
    std::io::Write::write_all(&mut file, rows(40, 240).as_bytes()).unwrap();
    drop(file);
    let screen = tmux.wait_for("240 counted");
    assert!(screen.contains("READY TO CLOSE"), "{screen}");

    // q quits; the shell finds its terminal as it was.
    tmux.keys("q");
    assert_restored(&tmux);
}

/// The dashboard has ended with exit code 0 and the shell's terminal is as it was:
/// the dashboard's screen is gone (the alternate screen was left), line editing and
/// echo are on.
fn assert_restored(tmux: &Tmux) {
    let screen = tmux.wait_for("SHELL DONE");
    assert!(screen.contains("EXITED 0"), "{screen}");
    assert!(
        !screen.contains("counted"),
        "the dashboard is still on screen:\n{screen}"
    );
    let after: Vec<&str> = screen
        .lines()
        .skip_while(|l| !l.contains("EXITED"))
        .collect();
    assert!(after.contains(&"icanon"), "line editing is off:\n{screen}");
    assert!(after.contains(&"echo"), "echo is off:\n{screen}");
}

#[test]
fn without_colour_the_selection_is_in_reverse_video() {
    let dir = tempfile::tempdir().unwrap();
    study_in(dir.path(), &format!("id,deck,q1\n{}", rows(0, 40)));
    let tmux = Tmux::start(
        "mono",
        100,
        30,
        &command(dir.path()),
        &[("TZ", "UTC"), ("NO_COLOR", "1")],
    );
    tmux.wait_for("40 counted");
    let screen = tmux.screen(true);
    let selected = screen
        .lines()
        .find(|l| l.contains('▶'))
        .unwrap_or_else(|| panic!("no selected row:\n{screen}"));
    // SGR 7 is reverse video; 38;5 / 48;5 and 3x / 4x would be colours.
    assert!(selected.contains("\u{1b}[7m"), "{selected:?}");
    let colour = ["\u{1b}[38;", "\u{1b}[48;", "\u{1b}[3", "\u{1b}[4"];
    for line in screen.lines() {
        for c in colour {
            // tmux writes attributes alone as ESC[1m, ESC[4m (underline), ESC[7m.
            let coloured = line.match_indices(c).any(|(i, _)| {
                let rest = &line[i + 2..];
                !(rest.starts_with("4m") || rest.starts_with("39m") || rest.starts_with("49m"))
            });
            assert!(!coloured, "colour on screen under NO_COLOR: {line:?}");
        }
    }
    tmux.keys("q");
    tmux.wait_for("EXITED 0");
}

/// The dashboard's process in `dir` (its working folder tells it from other tests').
fn closeout_in(dir: &Path) -> Option<u32> {
    let found = Command::new("pgrep")
        .args(["-x", "closeout"])
        .output()
        .ok()?;
    String::from_utf8_lossy(&found.stdout)
        .lines()
        .filter_map(|l| l.trim().parse::<u32>().ok())
        .find(|pid| {
            std::fs::read_link(format!("/proc/{pid}/cwd"))
                .is_ok_and(|cwd| cwd == dir.canonicalize().unwrap())
        })
}

#[test]
fn sigterm_ends_the_dashboard_and_restores_the_terminal() {
    let dir = tempfile::tempdir().unwrap();
    study_in(dir.path(), &format!("id,deck,q1\n{}", rows(0, 40)));
    let tmux = Tmux::start("term", 100, 30, &command(dir.path()), &[("TZ", "UTC")]);
    tmux.wait_for("40 counted");
    let pid = closeout_in(dir.path()).expect("the dashboard's process");
    let killed = Command::new("kill")
        .args(["-TERM", &pid.to_string()])
        .status()
        .unwrap();
    assert!(killed.success());
    assert_restored(&tmux);
}

/// `closeout demo` on a terminal: the dashboard over the simulated fieldwork, to the
/// ready banner; after q, the closing check is printed on the restored terminal.
#[test]
fn the_demo_opens_the_dashboard_and_reaches_ready_to_close() {
    let dir = tempfile::tempdir().unwrap();
    let files = dir.path().join("demo");
    let command = format!(
        "'{}' demo --speed 200000 --dir '{}'; echo \"EXITED $?\"; sleep 600",
        env!("CARGO_BIN_EXE_closeout"),
        files.display()
    );
    let tmux = Tmux::start("demo", 100, 30, &command, &[]);
    let screen = tmux.wait_for("READY TO CLOSE");
    assert!(screen.contains("simulated clock"), "{screen}");
    assert!(screen.contains("all 24 planned cells met"), "{screen}");
    tmux.keys("q");
    let screen = tmux.wait_for("EXITED 0");
    assert!(screen.contains("A small honest check"), "{screen}");
    assert!(files.join("study.toml").is_file());
}
