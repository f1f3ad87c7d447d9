//! `closeout status --follow` as a running program: it reports while rows are
//! appended, exits 0 with `--until-ready` once the study is ready to close, and ends
//! cleanly on SIGTERM with the last state printed. Waits are bounded by generous
//! deadlines and only ever wait for something the program must do; none makes a
//! test pass by being fast enough.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::io::{BufRead, BufReader, Write};
use std::path::Path;
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::mpsc::{Receiver, channel};
use std::time::{Duration, Instant};

use serde_json::Value;

const DEADLINE: Duration = Duration::from_secs(120);

const STUDY: &str = r#"title = "follow cli test"
[source]
file = "responses.csv"
id = "id"
[target]
margin = 0.2
confidence = 0.95
decide_by = "wilson"
[[measure]]
name = "q"
column = "q1"
yes = ["y"]
no = ["n"]
[[quota]]
minimum = 122
[log]
file = "events.jsonl"
"#;

fn setup() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("study.toml"), STUDY).unwrap();
    std::fs::write(dir.path().join("responses.csv"), "id,q1\n1,y\n2,n\n2,y\n").unwrap();
    dir
}

fn start(dir: &Path, args: &[&str]) -> (Child, Receiver<String>) {
    start_command(dir, "status", args)
}

fn start_command(dir: &Path, command: &str, args: &[&str]) -> (Child, Receiver<String>) {
    let mut child = Command::new(assert_cmd::cargo::cargo_bin("closeout"))
        .arg(command)
        .arg(dir.join("study.toml"))
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let stdout = child.stdout.take().unwrap();
    let (send, lines) = channel();
    std::thread::spawn(move || {
        for line in BufReader::new(stdout).lines() {
            if send.send(line.unwrap()).is_err() {
                break;
            }
        }
    });
    (child, lines)
}

fn next_line(lines: &Receiver<String>) -> String {
    lines
        .recv_timeout(DEADLINE)
        .expect("the program printed nothing before the deadline")
}

/// Wait for the program to end. (Its remaining output is then read to the end with
/// `lines.iter()`, which stops when the program's standard output closes.)
fn wait(child: &mut Child) -> ExitStatus {
    let until = Instant::now() + DEADLINE;
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            return status;
        }
        if Instant::now() > until {
            child.kill().unwrap();
            panic!("the program did not end before the deadline");
        }
        std::thread::sleep(Duration::from_millis(20));
    }
}

fn append(dir: &Path, text: &str) {
    let mut f = std::fs::OpenOptions::new()
        .append(true)
        .open(dir.join("responses.csv"))
        .unwrap();
    f.write_all(text.as_bytes()).unwrap();
}

fn follow_until_ready(extra: &[&str]) {
    let dir = setup();
    let mut args = vec!["--follow", "--until-ready", "--format", "json"];
    args.extend_from_slice(extra);
    let (mut child, lines) = start(dir.path(), &args);
    let first: Value = serde_json::from_str(&next_line(&lines)).unwrap();
    assert_eq!(first["ready_to_close"], false);
    assert_eq!(first["responses"], 2);
    assert_eq!(first["duplicates"], 1);
    // A rejected row, then the 120 responses that reach the minimum of 122 (the
    // margin is met long before), the last one cut in two: readiness comes exactly
    // with the last line end, whenever the program looks.
    let mut rows = String::from("bad\n");
    for i in 0..120 {
        rows.push_str(&format!("r{i},{}\n", if i % 3 == 0 { "y" } else { "n" }));
    }
    let (a, b) = rows.split_at(rows.len() - 3);
    append(dir.path(), a);
    append(dir.path(), b);
    let status = wait(&mut child);
    assert!(status.success(), "{status:?}");
    let rest: Vec<Value> = lines
        .iter()
        .map(|l| serde_json::from_str(&l).unwrap())
        .collect();
    let last = rest.last().expect("a snapshot after the rows arrived");
    assert_eq!(last["ready_to_close"], true);
    assert_eq!(last["responses"], 122);
    assert_eq!(last["rows_rejected"], 1);
    assert_eq!(last["duplicates"], 1);
    // The event log ends with the moment the study became ready.
    let log = std::fs::read_to_string(dir.path().join("events.jsonl")).unwrap();
    let entry: Value = serde_json::from_str(log.lines().last().unwrap()).unwrap();
    assert_eq!(entry["event"], "ready_to_close", "{log}");
    assert_eq!(entry["responses"], 122);
    // Every snapshot but the last is still collecting.
    assert!(
        rest[..rest.len() - 1]
            .iter()
            .all(|s| s["ready_to_close"] == false)
    );
}

#[test]
fn until_ready_exits_as_soon_as_the_appended_rows_make_it_ready() {
    follow_until_ready(&[]);
}

#[test]
fn until_ready_works_by_polling_too() {
    follow_until_ready(&["--poll"]);
}

#[test]
fn sigterm_ends_cleanly_with_the_last_state() {
    sigterm_ends_cleanly("status", &["--follow"]);
}

/// `closeout watch` without a terminal (standard output is a pipe here) prints what
/// `status --follow` prints, and ends the same way.
#[test]
fn watch_without_a_terminal_prints_what_status_follow_prints() {
    sigterm_ends_cleanly("watch", &[]);
}

fn sigterm_ends_cleanly(command: &str, args: &[&str]) {
    let dir = setup();
    let (mut child, lines) = start_command(dir.path(), command, args);
    let first = next_line(&lines);
    assert!(first.contains("2 responses"), "{first}");
    assert!(first.contains("still collecting"), "{first}");
    // A rejected row makes a new summary line.
    append(dir.path(), "x\n");
    let second = next_line(&lines);
    assert!(second.contains("1 rejected"), "{second}");
    let killed = Command::new("kill")
        .arg("-TERM")
        .arg(child.id().to_string())
        .status()
        .unwrap();
    assert!(killed.success());
    let status = wait(&mut child);
    assert!(status.success(), "{status:?}");
    let last: Vec<String> = lines.iter().collect();
    assert_eq!(last.len(), 1, "{last:?}");
    assert!(last[0].contains("2 responses (4 rows read, 1 rejected, 1 duplicates)"));
}

#[test]
fn follow_refuses_csv_and_as_of() {
    let dir = setup();
    let study = dir.path().join("study.toml");
    let out = Command::new(assert_cmd::cargo::cargo_bin("closeout"))
        .args(["status", "--follow", "--format", "csv"])
        .arg(&study)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--follow prints text or json"));
    for args in [
        &["--follow", "--as-of", "2026-05-01T00:00:00Z"][..],
        &["--until-ready"][..],
        &["--poll"][..],
    ] {
        let out = Command::new(assert_cmd::cargo::cargo_bin("closeout"))
            .arg("status")
            .arg(&study)
            .args(args)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
    }
}

#[test]
fn a_missing_file_is_waited_for_then_read() {
    let dir = setup();
    std::fs::remove_file(dir.path().join("responses.csv")).unwrap();
    let (mut child, lines) = start(dir.path(), &["--follow", "--until-ready"]);
    let notice = next_line(&lines);
    assert!(notice.contains("missing"), "{notice}");
    let summary = next_line(&lines);
    assert!(summary.contains("0 responses"), "{summary}");
    let mut rows = String::from("id,q1\n");
    for i in 0..122 {
        rows.push_str(&format!("r{i},{}\n", if i % 2 == 0 { "y" } else { "n" }));
    }
    std::fs::write(dir.path().join("responses.csv"), rows).unwrap();
    let status = wait(&mut child);
    assert!(status.success(), "{status:?}");
    let rest: Vec<String> = lines.iter().collect();
    let last = rest.last().unwrap();
    assert!(last.contains("122 responses"), "{rest:?}");
    assert!(last.contains("READY TO CLOSE"), "{rest:?}");
}
