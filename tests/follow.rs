//! Following a growing responses file: whatever the writer does — appends that cut
//! lines and quoted fields, truncation, rewrites, atomic replacement, rotation,
//! deletion — the live tally equals a fresh one-pass read (`tally_csv`, through
//! `batch::read`) of the complete records in the file as it is at the end, exactly,
//! rejected rows and duplicates included. No test here depends on timing: every
//! write is followed by polls, and the writer-thread test polls until the thread has
//! finished, then once more.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::io::Write;
use std::path::{Path, PathBuf};

use closeout::batch;
use closeout::follow::{Follower, ResetReason, Warning};
use closeout::live::{HeaderChange, Live, LiveEvent};
use closeout::study::Study;
use closeout::tally::{Tally, tally_csv};
use proptest::prelude::*;
use proptest::test_runner::RngSeed;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const STUDY: &str = r#"title = "follow test"
[source]
file = "responses.csv"
id = "id"
time = "t"
[target]
margin = 0.2
confidence = 0.95
decide_by = "wilson"
[cells]
by = ["region"]
[[measure]]
name = "q"
column = "q1"
yes = ["y"]
no = ["n"]
"#;

struct Fixture {
    _dir: tempfile::TempDir,
    csv: PathBuf,
    study: Study,
}

fn fixture() -> Fixture {
    let dir = tempfile::tempdir().unwrap();
    let study_path = dir.path().join("study.toml");
    std::fs::write(&study_path, STUDY).unwrap();
    let study = Study::load(&study_path).unwrap();
    Fixture {
        csv: dir.path().join("responses.csv"),
        _dir: dir,
        study,
    }
}

fn append(path: &Path, bytes: &[u8]) {
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
        .unwrap();
    f.write_all(bytes).unwrap();
}

/// Write a file whole under a temporary name and rename it over `path`.
fn replace(path: &Path, bytes: &[u8]) {
    let temp = path.with_extension("tmp");
    std::fs::write(&temp, bytes).unwrap();
    std::fs::rename(&temp, path).unwrap();
}

/// A fresh one-pass read of the file as it is.
fn fresh(study: &Study) -> Tally {
    batch::read(study).unwrap()
}

/// The one-pass read of some bytes.
fn one_pass(study: &Study, bytes: &[u8]) -> Tally {
    tally_csv(|h| study.layout(h), bytes, b',').unwrap().1
}

fn poll(live: &mut Live) -> Vec<LiveEvent> {
    live.poll().unwrap()
}

fn resets(events: &[LiveEvent]) -> Vec<ResetReason> {
    events
        .iter()
        .filter_map(|e| match e {
            LiveEvent::Reset { why, .. } => Some(*why),
            _ => None,
        })
        .collect()
}

/// Rows with a rejected record (a bad time), a field-count rejection and a duplicate.
const FIRST_RECORDS: &[&str] = &[
    "id,region,q1,t\n",
    "a,north,y,2026-05-01T09:00:00Z\n",
    "b,north,n,2026-05-01T09:05:00Z\n",
    "c,south,y,not-a-time\n",
    "a,south,y,2026-05-01T09:10:00Z\n",
    "d,south\n",
    "e,\"so\nuth\",\"y\",2026-05-01T09:20:00Z\n",
];
const FIRST: &[u8] = b"id,region,q1,t\n\
a,north,y,2026-05-01T09:00:00Z\n\
b,north,n,2026-05-01T09:05:00Z\n\
c,south,y,not-a-time\n\
a,south,y,2026-05-01T09:10:00Z\n\
d,south\n\
e,\"so\nuth\",\"y\",2026-05-01T09:20:00Z\n";

const MORE_RECORDS: &[&str] = &[
    "f,north,y,2026-05-01T10:00:00Z\n",
    "b,north,y,2026-05-01T10:01:00Z\n",
    "g,\"north\",\"n\"\"\",\n",
];
const MORE: &[u8] = b"f,north,y,2026-05-01T10:00:00Z\n\
b,north,y,2026-05-01T10:01:00Z\n\
g,\"north\",\"n\"\"\",\n";

#[test]
fn the_fixture_has_rejections_and_duplicates() {
    let f = fixture();
    let all = [FIRST, MORE].concat();
    let t = one_pass(&f.study, &all);
    assert_eq!((t.rows_read, t.rejected, t.duplicates), (9, 2, 2));
}

#[test]
fn appends_that_cut_lines_and_quoted_fields() {
    let f = fixture();
    let mut live = Live::new(f.study.clone());
    assert_eq!(poll(&mut live), vec![LiveEvent::Waiting]);
    let all = [FIRST, MORE].concat();
    // Where each record (the header first) ends, from the records as written.
    let records = [FIRST_RECORDS, MORE_RECORDS].concat();
    let ends: Vec<usize> = records
        .iter()
        .scan(0, |at, r| {
            *at += r.len();
            Some(*at)
        })
        .collect();
    assert_eq!(records.concat().as_bytes(), &all[..]);
    let quoted_break = all.windows(3).position(|w| w == b"so\n").unwrap() + 3;
    // Cut in the header, in a line, just after the quoted line break, just before
    // the last line end, and at the end.
    let cuts = [
        5,
        20,
        quoted_break,
        quoted_break + 4,
        all.len() - 1,
        all.len(),
    ];
    let mut from = 0;
    for cut in cuts {
        append(&f.csv, &all[from..cut]);
        from = cut;
        poll(&mut live);
        match ends.iter().rev().find(|&&e| e <= cut) {
            Some(&end) => {
                assert_eq!(live.tally(), &one_pass(&f.study, &all[..end]), "cut {cut}")
            }
            None => assert!(live.header().is_none()),
        }
    }
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally().rows_read, 9);
}

#[test]
fn truncate_then_regrow_rebuilds_from_the_new_content() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    assert_eq!(poll(&mut live)[0], LiveEvent::Started);
    assert_eq!(live.tally(), &fresh(&f.study));

    // Seen empty: a reset with no header yet, then the new header starts counting.
    std::fs::OpenOptions::new()
        .write(true)
        .open(&f.csv)
        .unwrap()
        .set_len(0)
        .unwrap();
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Truncated]);
    assert_eq!(live.tally().rows_read, 0);
    append(&f.csv, b"id,region,q1,t\nz,east,n,\n");
    assert_eq!(poll(&mut live)[0], LiveEvent::Started);
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally().rows_read, 1);

    // Truncated and regrown past the old size before the next poll: the bytes before
    // the offset changed, so it is a rewrite.
    let file = std::fs::OpenOptions::new()
        .write(true)
        .open(&f.csv)
        .unwrap();
    file.set_len(0).unwrap();
    drop(file);
    append(&f.csv, MORE.strip_suffix(b"\n").unwrap());
    let mut text = b"id,region,q1,t\n".to_vec();
    text.extend_from_slice(MORE);
    std::fs::write(&f.csv, &text).unwrap();
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Rewritten]);
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally().rows_read, 3);
}

#[test]
fn a_rewrite_in_place_of_the_same_size_is_noticed() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    let changed: Vec<u8> = FIRST
        .iter()
        .map(|&b| if b == b'y' { b'n' } else { b })
        .collect();
    let file = std::fs::OpenOptions::new()
        .write(true)
        .open(&f.csv)
        .unwrap();
    std::os::unix::fs::FileExt::write_all_at(&file, &changed, 0).unwrap();
    drop(file);
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Rewritten]);
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(
        live.tally().cells.values().next().unwrap().measures[0].successes,
        0
    );
    // Nothing more happened: nothing more is said.
    assert!(poll(&mut live).is_empty());
}

#[test]
fn an_atomic_replace_with_a_grown_export_carries_on_without_a_reset() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    let before = live.tally().clone();
    replace(&f.csv, &[FIRST, MORE].concat());
    let events = poll(&mut live);
    assert!(resets(&events).is_empty(), "{events:?}");
    assert!(events.contains(&LiveEvent::Warning(Warning::ReplacedButGrew)));
    assert!(events.contains(&LiveEvent::Counted { records: 3 }));
    assert_ne!(live.tally(), &before);
    assert_eq!(live.tally(), &fresh(&f.study));
}

#[test]
fn an_atomic_replace_with_a_different_export_resets() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    // Same header, same length, one answer changed near the start.
    let mut other = FIRST.to_vec();
    other[26] = b'n';
    other.extend_from_slice(MORE);
    replace(&f.csv, &other);
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Replaced]);
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally().rows_read, 9);
}

#[test]
fn rotation_waits_then_reads_the_new_file() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    let before = live.tally().clone();
    std::fs::rename(&f.csv, f.csv.with_extension("csv.1")).unwrap();
    assert_eq!(poll(&mut live), vec![LiveEvent::Waiting]);
    assert!(live.waiting());
    assert!(poll(&mut live).is_empty());
    assert_eq!(live.tally(), &before, "the last statistics stand");
    append(&f.csv, b"id,region,q1,t\n");
    append(&f.csv, MORE);
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Replaced]);
    assert!(!live.waiting());
    assert_eq!(live.tally(), &fresh(&f.study));
}

#[test]
fn delete_and_recreate() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    // Re-created with the same start and more: resumed, nothing counted twice.
    std::fs::remove_file(&f.csv).unwrap();
    assert_eq!(poll(&mut live), vec![LiveEvent::Waiting]);
    append(&f.csv, &[FIRST, MORE].concat());
    let events = poll(&mut live);
    assert_eq!(events[0], LiveEvent::Resumed);
    assert!(resets(&events).is_empty());
    assert_eq!(live.tally(), &fresh(&f.study));
    // Re-created as another export: a reset.
    std::fs::remove_file(&f.csv).unwrap();
    assert_eq!(poll(&mut live), vec![LiveEvent::Waiting]);
    append(&f.csv, b"id,region,q1,t\nq,west,y,\n");
    let events = poll(&mut live);
    // The file system may give the new file the inode number of the deleted one,
    // and then it looks like the same file, shorter.
    let why = resets(&events);
    assert!(
        why == [ResetReason::Replaced] || why == [ResetReason::Truncated],
        "{events:?}"
    );
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally().rows_read, 1);
}

#[test]
fn a_changed_header_is_mapped_by_name_or_refused() {
    let f = fixture();
    append(&f.csv, FIRST);
    let mut live = Live::new(f.study.clone());
    poll(&mut live);
    let first = live.tally().clone();

    // A column added and the order changed: every study column is still there.
    replace(
        &f.csv,
        b"note,q1,region,id,t\nhi,y,north,a,\nho,n,south,b,2026-05-01T09:00:00Z\n",
    );
    let events = poll(&mut live);
    assert_eq!(
        events[0],
        LiveEvent::Reset {
            why: ResetReason::Replaced,
            columns: Some(HeaderChange {
                added: vec!["note".into()],
                removed: vec![],
            }),
        }
    );
    assert_eq!(live.tally(), &fresh(&f.study));
    let mapped = live.tally().clone();
    assert_eq!(mapped.responses(), 2);

    // A column the study reads is gone: refused, the last statistics stand, and
    // records appended to that file are not counted.
    replace(&f.csv, b"note,region,id,t\nhi,north,a,\n");
    let events = poll(&mut live);
    let LiveEvent::HeaderProblem { message, columns } = &events[0] else {
        panic!("{events:?}");
    };
    assert!(message.contains("q1"), "{message}");
    assert_eq!(
        columns,
        &Some(HeaderChange {
            added: vec![],
            removed: vec!["q1".into()],
        })
    );
    assert!(live.problem().is_some());
    append(&f.csv, b"ho,south,b,\n");
    poll(&mut live);
    assert_eq!(live.tally(), &mapped);
    assert_ne!(live.tally(), &first);

    // Put right: counted again from the start of the new file.
    replace(&f.csv, FIRST);
    let events = poll(&mut live);
    assert_eq!(resets(&events), vec![ResetReason::Replaced]);
    assert!(live.problem().is_none());
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(live.tally(), &first);
}

#[test]
fn a_writer_thread_appending_in_random_pieces() {
    let f = fixture();
    let mut text = b"\xef\xbb\xbfid,region,q1,t\r\n".to_vec();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    for i in 0..3000 {
        let region = ["north", "south", "\"ea\r\nst\""][rng.random_range(0..3)];
        let q1 = ["y", "n", "\"y\"", "", "dk"][rng.random_range(0..5)];
        let id = rng.random_range(0..2500);
        let t = if i % 7 == 0 {
            "soon"
        } else {
            "2026-05-01T09:00:00Z"
        };
        let end = if rng.random_bool(0.5) { "\n" } else { "\r\n" };
        text.extend_from_slice(format!("{id},{region},{q1},{t}{end}").as_bytes());
        if i % 50 == 0 {
            text.extend_from_slice(b"\r\n");
        }
    }
    let expected = one_pass(&f.study, &text);
    assert!(expected.duplicates > 0 && expected.rejected > 0);
    let mut live = Live::new(f.study.clone());
    let writer = {
        let path = f.csv.clone();
        let text = text.clone();
        std::thread::spawn(move || {
            let mut rng = ChaCha8Rng::seed_from_u64(5);
            let mut file = std::fs::File::create(&path).unwrap();
            let mut at = 0;
            while at < text.len() {
                let k = rng.random_range(1..400).min(text.len() - at);
                file.write_all(&text[at..at + k]).unwrap();
                at += k;
                if rng.random_bool(0.1) {
                    std::thread::yield_now();
                }
            }
        })
    };
    let mut polls = 0u64;
    while !writer.is_finished() {
        live.poll().unwrap();
        polls += 1;
        // Whatever the moment, the records counted are a prefix of the file's.
        assert!(live.tally().rows_read <= expected.rows_read);
    }
    writer.join().unwrap();
    live.poll().unwrap();
    assert!(polls > 0);
    assert_eq!(live.tally(), &expected);
    assert_eq!(live.tally(), &fresh(&f.study));
}

#[test]
fn an_unbalanced_quote_is_rejected_as_too_long_once_it_ends() {
    let f = fixture();
    append(&f.csv, b"id,region,q1,t\na,north,y,\nb,\"north,y,\n");
    let follower = closeout::follow::Follower::new(&f.csv, b',').with_record_limit(64);
    let mut live = Live::with_follower(f.study.clone(), follower);
    poll(&mut live);
    let mut warned = 0;
    for i in 0..20 {
        append(&f.csv, format!("c{i},south,n,\n").as_bytes());
        warned += poll(&mut live)
            .iter()
            .filter(|e| {
                matches!(
                    e,
                    LiveEvent::Warning(Warning::LongRecord {
                        offset: 26,
                        line: 3,
                        ..
                    })
                )
            })
            .count();
    }
    assert_eq!(warned, 1);
    assert_eq!(live.tally().rows_read, 1);
    append(&f.csv, b"\"\nd,south,y,\n");
    poll(&mut live);
    let t = live.tally();
    assert_eq!((t.rows_read, t.rejected), (3, 1));
    assert_eq!(t.first_rejections[0].line, 3);
    assert_eq!(t.first_rejections[0].reason.kind(), "too_long");
    assert_eq!(t.responses(), 2);
}

// ---- the property: any chunking gives the one-pass read of the complete prefix ----

/// A field as written in the file: plain, or quoted with doubled quotes inside.
fn field() -> impl Strategy<Value = String> {
    prop_oneof![
        3 => prop::sample::select(vec![
            "y", "n", "", "north", "south", "dk", "2026-05-01T09:00:00Z", "later", "a", "b"
        ])
        .prop_map(str::to_string),
        1 => "[yn ,\r\n\"a]{0,6}".prop_map(|s| format!("\"{}\"", s.replace('"', "\"\""))),
    ]
}

#[derive(Clone, Debug)]
struct Stream {
    bytes: Vec<u8>,
    /// Where each complete record (the header first) ends: just after the first byte
    /// of its line end.
    ends: Vec<usize>,
}

fn stream() -> impl Strategy<Value = Stream> {
    let record = (
        prop::collection::vec(field(), 3..=5),
        any::<bool>(),
        0usize..3,
        any::<bool>(),
    );
    (
        any::<bool>(),
        any::<bool>(),
        prop::collection::vec(record, 0..25),
        prop::collection::vec(field(), 0..3),
        any::<bool>(),
    )
        .prop_map(|(bom, crlf_header, records, tail, open_quote)| {
            let mut bytes = Vec::new();
            if bom {
                bytes.extend_from_slice(b"\xef\xbb\xbf");
            }
            bytes.extend_from_slice(b"id,region,q1,t");
            let mut ends = vec![bytes.len() + 1];
            bytes.extend_from_slice(if crlf_header { b"\r\n" } else { b"\n" });
            for (fields, crlf, blanks, blank_crlf) in records {
                for _ in 0..blanks {
                    bytes.extend_from_slice(if blank_crlf { b"\r\n" } else { b"\n" });
                }
                bytes.extend_from_slice(fields.join(",").as_bytes());
                ends.push(bytes.len() + 1);
                bytes.extend_from_slice(if crlf { b"\r\n" } else { b"\n" });
            }
            // An unfinished last record: fields without a line end, perhaps with a
            // quote still open (and a line break inside it).
            bytes.extend_from_slice(tail.join(",").as_bytes());
            if open_quote {
                bytes.extend_from_slice(b",\"still\r\nopen");
            }
            Stream { bytes, ends }
        })
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 128,
        rng_seed: RngSeed::Fixed(20_261_202),
        ..ProptestConfig::default()
    })]

    #[test]
    fn any_chunking_counts_the_complete_records_exactly_once(
        s in stream(),
        chunks in prop::collection::vec(1usize..40, 1..60),
    ) {
        let f = fixture();
        std::fs::write(&f.csv, b"").unwrap();
        let mut live = Live::new(f.study.clone());
        let mut at = 0;
        let mut sizes = chunks.iter().cycle();
        while at < s.bytes.len() {
            let k = (*sizes.next().unwrap()).min(s.bytes.len() - at);
            append(&f.csv, &s.bytes[at..at + k]);
            at += k;
            live.poll().unwrap();
            let complete = s.ends.iter().rev().find(|&&e| e <= at).copied();
            match complete {
                None => prop_assert!(live.header().is_none()),
                Some(end) => {
                    let expected = one_pass(&f.study, &s.bytes[..end]);
                    prop_assert_eq!(live.tally(), &expected, "after {} bytes", at);
                }
            }
        }
        let last = *s.ends.last().unwrap();
        prop_assert_eq!(live.tally(), &one_pass(&f.study, &s.bytes[..last]));
    }
}

#[test]
fn follow_output_prints_when_the_verdict_or_rejections_change() {
    use closeout::assess::assess;
    use closeout::report::FollowOutput;
    let f = fixture();
    let as_of: jiff::Timestamp = "2026-05-01T12:00:00Z".parse().unwrap();
    let mut live = Live::new(f.study.clone());
    let mut text = FollowOutput::new(false);
    let mut json = FollowOutput::new(true);
    let mut step = |live: &mut Live| {
        let events = poll(live);
        let snapshot = assess(live.study(), live.tally(), as_of);
        (
            text.update(&events, &snapshot),
            json.update(&events, &snapshot),
        )
    };
    // Missing: a notice and the first summary; JSON prints the first snapshot.
    let (t, j) = step(&mut live);
    assert_eq!(t.out.len(), 2, "{t:?}");
    assert!(t.out[0].contains("missing"));
    assert_eq!((j.out.len(), j.err.len()), (1, 1));
    append(&f.csv, b"id,region,q1,t\na,north,y,\n");
    let (t, j) = step(&mut live);
    // One cell seen, not met: the verdict changed from no planned cell.
    assert_eq!(t.out.len(), 1, "{t:?}");
    assert_eq!(j.out.len(), 1);
    // Another accepted row, the verdict unchanged: no text line, a JSON line.
    append(&f.csv, b"b,north,n,\n");
    let (t, j) = step(&mut live);
    assert!(t.out.is_empty(), "{t:?}");
    assert_eq!(j.out.len(), 1);
    let v: serde_json::Value = serde_json::from_str(&j.out[0]).unwrap();
    assert_eq!(v["responses"], 2);
    // A rejected row: a text line.
    append(&f.csv, b"c,north\n");
    let (t, _) = step(&mut live);
    assert_eq!(t.out.len(), 1);
    assert!(t.out[0].contains("1 rejected"), "{t:?}");
    // Nothing new: nothing printed.
    let (t, j) = step(&mut live);
    assert!(t.out.is_empty() && j.out.is_empty());
    // A truncation: a notice and a summary, and a JSON line.
    replace(&f.csv, b"id,region,q1,t\n");
    let (t, j) = step(&mut live);
    assert_eq!(t.out.len(), 2, "{t:?}");
    assert!(t.out[0].contains("replaced"), "{t:?}");
    assert_eq!(j.out.len(), 1);
}

/// The sample study and the generated 50,000-row file (whose batch tallies
/// `tests/status.rs` checks against pandas), copied into a temporary folder in
/// seeded random pieces with a poll after each: the live tally ends equal to the
/// batch read.
#[test]
fn the_sample_and_the_generated_file_followed_in_pieces_equal_the_batch_read() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    for (study_file, csv_name, seed) in [
        (
            "sample-data/lakeside-residents/study.toml",
            "responses.csv",
            1,
        ),
        (
            "tests/data/generated-50k.study.toml",
            "generated-50k.csv",
            2,
        ),
    ] {
        let original = Study::load(&root.join(study_file)).unwrap();
        let bytes = std::fs::read(&original.source.file).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let study_path = dir.path().join("study.toml");
        std::fs::copy(root.join(study_file), &study_path).unwrap();
        let study = Study::load(&study_path).unwrap();
        assert_eq!(study.source.file, dir.path().join(csv_name));
        let mut live = Live::new(study.clone());
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut at = 0;
        while at < bytes.len() {
            let k = rng.random_range(1..200_000).min(bytes.len() - at);
            append(&study.source.file, &bytes[at..at + k]);
            at += k;
            live.poll().unwrap();
        }
        assert_eq!(
            live.tally(),
            &batch::read(&original).unwrap(),
            "{study_file}"
        );
        assert!(live.tally().rejected > 0 && live.tally().duplicates > 0);
    }
}

#[test]
fn the_event_log_appends_status_changes_resets_and_readiness() {
    use closeout::assess::assess;
    use closeout::event_log::{EventLog, LogError};
    let f = fixture();
    let log_path = f.csv.with_file_name("events.jsonl");
    std::fs::write(&log_path, "{\"from an earlier run\":true}\n").unwrap();
    let mut log = EventLog::open(&log_path, &f.csv, &f.study.study_path).unwrap();
    let as_of: jiff::Timestamp = "2026-05-01T12:00:00Z".parse().unwrap();
    let mut live = Live::new(f.study.clone());
    let step = |live: &mut Live, log: &mut EventLog| {
        let events = poll(live);
        log.record(&events, &assess(live.study(), live.tally(), as_of))
            .unwrap();
    };
    append(&f.csv, b"id,region,q1,t\n1,north,y,\n");
    step(&mut live, &mut log);
    // 40 answers in north: met at +-20 points (Wilson); south appears, open.
    let mut rows = String::new();
    for i in 0..40 {
        rows.push_str(&format!(
            "n{i},north,{},\n",
            if i % 2 == 0 { "y" } else { "n" }
        ));
    }
    rows.push_str("s1,south,y,\n");
    append(&f.csv, rows.as_bytes());
    step(&mut live, &mut log);
    step(&mut live, &mut log); // nothing new: nothing logged
    let mut rows = String::new();
    for i in 0..40 {
        rows.push_str(&format!(
            "s{i}x,south,{},\n",
            if i % 2 == 0 { "y" } else { "n" }
        ));
    }
    append(&f.csv, rows.as_bytes());
    step(&mut live, &mut log);
    replace(&f.csv, b"id,region,q1,t\n1,north,y,\n");
    step(&mut live, &mut log);

    let text = std::fs::read_to_string(&log_path).unwrap();
    let lines: Vec<serde_json::Value> = text
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let kinds: Vec<String> = lines[1..]
        .iter()
        .map(|l| {
            let event = l["event"].as_str().unwrap();
            match l["label"].as_str() {
                Some(label) => format!("{event} {label} {}", l["to"].as_str().unwrap_or("gone")),
                None => event.to_string(),
            }
        })
        .collect();
    assert_eq!(lines[0]["from an earlier run"], true, "never truncated");
    assert_eq!(
        kinds,
        [
            "cell_status north open",
            // Worst first within one look.
            "cell_status south open",
            "cell_status north met",
            "cell_status south met",
            "ready_to_close",
            "reset",
            "cell_status north open",
            "cell_status south gone",
            "no_longer_ready",
        ],
        "{text}"
    );
    let met = &lines[3];
    assert_eq!(met["from"], "open");
    assert_eq!(met["method"], "wilson");
    assert_eq!(met["measures"][0]["n"], 41);
    assert_eq!(met["time"], "2026-05-01T12:00:00Z");
    assert!(met["measures"][0]["margin"].as_f64().unwrap() <= 0.2);
    assert_eq!(lines[6]["why"], "replaced");
    // The files the user gave us are refused.
    assert!(matches!(
        EventLog::open(&f.csv, &f.csv, &f.study.study_path),
        Err(LogError::NotOurs { .. })
    ));
    assert!(matches!(
        EventLog::open(&f.study.study_path, &f.csv, &f.study.study_path),
        Err(LogError::NotOurs { .. })
    ));
}

/// A long run: a writer thread appends `CLOSEOUT_SOAK_ROWS` rows (default 1,000,000)
/// in random pieces, and now and then regenerates the whole export under a
/// temporary name and renames it over the file (a grown export), while the live
/// tally polls as fast as it can. At the end the live tally equals the batch read.
/// Run with `cargo test --release --test follow soak -- --ignored --nocapture`.
#[test]
#[ignore]
fn soak_a_long_run_of_appends_and_regenerated_exports() {
    let rows: usize = std::env::var("CLOSEOUT_SOAK_ROWS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1_000_000);
    let f = fixture();
    std::fs::write(&f.csv, b"id,region,q1,t\n").unwrap();
    let mut live = Live::new(f.study.clone());
    let path = f.csv.clone();
    let writer = std::thread::spawn(move || {
        let mut rng = ChaCha8Rng::seed_from_u64(99);
        let mut all = b"id,region,q1,t\n".to_vec();
        let mut file = std::fs::OpenOptions::new()
            .append(true)
            .open(&path)
            .unwrap();
        let mut replaced = 0;
        for i in 0..rows {
            let region = ["north", "south", "\"we\nst\""][rng.random_range(0..3)];
            let q1 = ["y", "n", "", "dk"][rng.random_range(0..4)];
            let id = rng.random_range(0..rows as u64 * 9 / 10);
            let row = format!("{id},{region},{q1},2026-05-01T09:00:00Z\n");
            let piece = row.as_bytes();
            let cut = rng.random_range(0..piece.len());
            file.write_all(&piece[..cut]).unwrap();
            file.write_all(&piece[cut..]).unwrap();
            all.extend_from_slice(piece);
            if i % 200_000 == 199_999 {
                replace(&path, &all);
                file = std::fs::OpenOptions::new()
                    .append(true)
                    .open(&path)
                    .unwrap();
                replaced += 1;
            }
        }
        replaced
    });
    let mut polls = 0u64;
    let mut resets = 0;
    while !writer.is_finished() {
        resets += self::resets(&live.poll().unwrap()).len();
        polls += 1;
    }
    let replaced = writer.join().unwrap();
    while {
        live.poll().unwrap();
        !live.caught_up()
    } {}
    eprintln!(
        "{rows} rows, {polls} polls, {replaced} replacements, {resets} resets, {} responses",
        live.tally().responses()
    );
    assert_eq!(resets, 0, "a regenerated export that grew never resets");
    assert_eq!(live.tally(), &fresh(&f.study));
}

#[test]
fn a_utf16_file_is_an_error_until_it_is_replaced_by_utf8() {
    let f = fixture();
    let utf16: Vec<u8> = "\u{feff}id,region,q1,t\na,north,y,\n"
        .encode_utf16()
        .flat_map(u16::to_le_bytes)
        .collect();
    std::fs::write(&f.csv, &utf16).unwrap();
    let mut live = Live::new(f.study.clone());
    for _ in 0..2 {
        let e = live.poll().unwrap_err();
        assert!(e.to_string().contains("UTF-16"), "{e}");
    }
    assert_eq!(live.tally().rows_read, 0);
    replace(&f.csv, FIRST);
    assert_eq!(poll(&mut live)[0], LiveEvent::Started);
    assert_eq!(live.tally(), &fresh(&f.study));
}

#[test]
fn records_repeating_the_header_are_skipped_and_counted() {
    let f = fixture();
    // Two exports joined, the second with its own byte-order mark.
    let mut joined = FIRST.to_vec();
    joined.extend_from_slice(b"\xef\xbb\xbfid,region,q1,t\n");
    joined.extend_from_slice(MORE);
    append(&f.csv, &joined);
    let mut live = Live::new(f.study.clone());
    let events = poll(&mut live);
    assert!(events.contains(&LiveEvent::Warning(Warning::RepeatedHeader { line: 9 })));
    assert_eq!(live.repeated_headers(), 1);
    // Counted as if the repeated header were not there (line numbers stay true).
    let t = live.tally();
    assert_eq!(t.rows_read, 9);
    assert_eq!(
        t.rejected,
        one_pass(&f.study, &[FIRST, MORE].concat()).rejected
    );
}

/// The one-shot read and the follower share one record reader, so the awkward bytes
/// the follower handles — a second header (two exports concatenated), a NUL run after
/// a truncating rotation, a record over the size limit — give the same tally either
/// way. The only difference is the end of input: a finished file's last record
/// without a line end counts in the one-shot read, and the follower holds it back
/// until its line end arrives.
#[test]
fn the_one_shot_read_and_the_follower_agree_on_awkward_bytes() {
    let f = fixture();
    let mut bytes = FIRST.to_vec();
    bytes.extend_from_slice(b"id,region,q1,t\n");
    bytes.extend_from_slice(b"\0\0\0\0\0\0");
    bytes.extend_from_slice(b"h,north,y,2026-05-01T11:00:00Z\n");
    bytes.extend_from_slice(b"i,north,\"");
    bytes.extend(std::iter::repeat_n(
        b'x',
        (closeout::follow::RECORD_LIMIT + 10) as usize,
    ));
    bytes.extend_from_slice(b"\",2026-05-01T11:05:00Z\n");
    bytes.extend_from_slice(b"j,south,n,2026-05-01T11:10:00Z");
    std::fs::write(&f.csv, &bytes).unwrap();
    let mut live = Live::new(f.study.clone());
    for _ in 0..100 {
        poll(&mut live);
        if live.caught_up() {
            break;
        }
    }
    let one_shot = fresh(&f.study);
    // The unterminated last record is the one difference.
    assert_eq!(one_shot.rows_read, live.tally().rows_read + 1);
    append(&f.csv, b"\n");
    poll(&mut live);
    assert_eq!(live.tally(), &fresh(&f.study));
    assert_eq!(one_shot, fresh(&f.study));
    assert_eq!(one_shot.rejected, 3, "bad time, field count, too long");
    assert_eq!(live.repeated_headers(), 1);
}

/// A first read larger than one `Live::poll` reads comes back in bounded pieces: each
/// poll returns with `caught_up` false until the end, `bytes_read` grows towards
/// `file_size` (what a progress gauge shows), and the tally at the end equals the
/// one-shot read, ids and duplicates included.
#[test]
fn a_long_first_read_shows_its_progress_between_polls() {
    let f = fixture();
    let mut text = b"id,region,q1,t\n".to_vec();
    // 4 KiB per follower poll, so a Live::poll reads 256 KiB.
    let read_limit = 4096;
    let piece = read_limit * closeout::live::POLLS_AT_ONCE as u64;
    let mut i = 0u64;
    while (text.len() as u64) < piece * 2 + 1000 {
        // Every 97th id repeats an earlier one; times run over several hours.
        let id = if i % 97 == 5 { i / 2 } else { i };
        let region = ["north", "south", "east"][(i % 3) as usize];
        let answer = ["y", "n", ""][(i % 5 % 3) as usize];
        text.extend_from_slice(
            format!(
                "r{id},{region},{answer},2026-05-01T{:02}:{:02}:00Z\n",
                8 + i / 2_000 % 12,
                i % 60
            )
            .as_bytes(),
        );
        i += 1;
    }
    append(&f.csv, &text);
    let follower = Follower::new(&f.csv, b',').with_read_limit(read_limit);
    let mut live = Live::with_follower(f.study.clone(), follower);
    let mut seen = Vec::new();
    loop {
        poll(&mut live);
        seen.push((live.bytes_read(), live.file_size()));
        if live.caught_up() {
            break;
        }
    }
    let size = text.len() as u64;
    assert_eq!(seen.len(), 3, "{seen:?}");
    assert!(seen.windows(2).all(|w| w[0].0 < w[1].0), "{seen:?}");
    assert!(seen.iter().all(|&(_, s)| s == Some(size)));
    assert_eq!(seen[0].0, piece);
    assert_eq!(seen[2].0, size);
    let t = live.tally();
    assert_eq!(t, &fresh(&f.study));
    assert!(t.duplicates > 0);
    assert_eq!(t.rows_read, i);
}
