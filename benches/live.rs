//! B2 and B3 of issue 7. Run with `cargo bench --bench live` (`-- b2` or `-- b3` for
//! one of them; `CLOSEOUT_BENCH_ROWS="1000000"` to follow one file size only).
//!
//! - B2 append: a followed file of 1 M (and 10 M) rows, caught up; then 1,000 rows
//!   are appended and the clock runs from the write to the updated `Snapshot` as the
//!   dashboard sees it: `Live::poll` until caught up, then the verdict alone
//!   (`assess_with(.., Detail::Verdict)`). Also the same with every method (`assess`,
//!   as `status --follow --format json`), and the first read (the dashboard's start)
//!   and its rate.
//! - B3 verdict: `assess` of a study with 100 cells × 3 measures, as the live case
//!   sees it: before each timed call every cell gets one more response, so every
//!   cell's n is new and nothing memoised per n helps. Twice: the verdict alone, and
//!   every method.
//!
//! Medians of RUNS runs. Speed is measured here, never asserted in a test. B2's file
//! is the demo's invented study (`closeout::demo::bulk::write`, as `closeout demo
//! --write`), written once under `target/bench-data/`: N + 15,000 rows, of which the
//! followed copy starts with the first N and each append takes the next 1,000.

#![allow(clippy::unwrap_used, clippy::expect_used)]

use std::io::Write;
use std::path::Path;
use std::time::Instant;

use closeout::assess::{Detail, assess, assess_with};
use closeout::live::Live;
use closeout::rows::Layout;
use closeout::study::Study;
use closeout::tally::Tally;

const RUNS: usize = 15;

fn median(mut xs: Vec<f64>) -> f64 {
    xs.sort_by(f64::total_cmp);
    xs[xs.len() / 2]
}

fn ms(seconds: f64) -> String {
    format!("{:.2} ms", seconds * 1e3)
}

/// SplitMix64, for B3's answers.
struct Mix(u64);

impl Mix {
    fn below(&mut self, n: u64) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        (((z ^ (z >> 31)) as u128 * n as u128) >> 64) as u64
    }
}

fn b2(rows: u64) {
    let source = Path::new("target/bench-data").join(format!("demo-source-{rows}"));
    let extra = RUNS as u64 * 1000;
    let csv = source.join("responses.csv");
    let lines_wanted = (rows + extra + 1) as usize;
    let text = match std::fs::read(&csv) {
        Ok(text) if text.iter().filter(|&&b| b == b'\n').count() == lines_wanted => text,
        _ => {
            std::fs::remove_dir_all(&source).ok();
            std::fs::create_dir_all(&source).unwrap();
            closeout::demo::bulk::write(&source, rows + extra, closeout::demo::DEFAULT_SEED)
                .expect("written");
            std::fs::read(&csv).unwrap()
        }
    };
    // Line starts: the followed copy is the header and the first `rows` rows.
    let ends: Vec<usize> = text
        .iter()
        .enumerate()
        .filter(|&(_, &b)| b == b'\n')
        .map(|(i, _)| i + 1)
        .collect();
    let cut = ends[rows as usize];
    let dir = Path::new("target/bench-data").join(format!("demo-followed-{rows}"));
    std::fs::remove_dir_all(&dir).ok();
    std::fs::create_dir_all(&dir).unwrap();
    let followed = dir.join("responses.csv");
    std::fs::write(&followed, &text[..cut]).unwrap();
    let study_text = std::fs::read_to_string(source.join("study.toml")).unwrap();
    std::fs::write(dir.join("study.toml"), study_text).unwrap();
    let study = Study::load(&dir.join("study.toml")).expect("a valid study");
    let as_of: jiff::Timestamp = "2026-03-10T00:00:00Z".parse().unwrap();

    let bytes = cut as f64;
    let start = Instant::now();
    let mut live = Live::new(study.clone());
    let mut polls = 0;
    loop {
        live.poll().expect("readable");
        polls += 1;
        if live.caught_up() {
            break;
        }
    }
    let first = start.elapsed().as_secs_f64();
    assert_eq!(live.tally().rows_read, rows);
    println!(
        "B2 {rows} rows: first read {first:.2} s ({:.0} MB/s, {polls} polls)",
        bytes / first / 1e6
    );
    let _ = assess(&study, live.tally(), as_of);
    let _ = assess_with(
        &study,
        live.tally(),
        as_of,
        study.target.decide_by,
        Detail::Verdict,
    );

    let mut file = std::fs::OpenOptions::new()
        .append(true)
        .open(&followed)
        .unwrap();
    // Runs alternate: even ones the verdict alone, odd ones every method.
    let (mut verdict, mut every, mut poll_times) = (Vec::new(), Vec::new(), Vec::new());
    for run in 0..RUNS {
        let from = ends[rows as usize + run * 1000];
        let to = ends[rows as usize + (run + 1) * 1000];
        let before = live.tally().rows_read;
        let start = Instant::now();
        file.write_all(&text[from..to]).unwrap();
        loop {
            live.poll().expect("readable");
            if live.caught_up() {
                break;
            }
        }
        let polled = start.elapsed().as_secs_f64();
        let detail = if run % 2 == 0 {
            Detail::Verdict
        } else {
            Detail::EveryMethod
        };
        let snapshot = assess_with(&study, live.tally(), as_of, study.target.decide_by, detail);
        let total = start.elapsed().as_secs_f64();
        assert_eq!(live.tally().rows_read, before + 1000);
        std::hint::black_box(snapshot);
        if run % 2 == 0 {
            verdict.push(total);
        } else {
            every.push(total);
        }
        poll_times.push(polled);
    }
    println!(
        "B2 {rows} rows: append 1,000 rows → Snapshot, the verdict alone {} (poll {}, assess the rest), median of {}",
        ms(median(verdict.clone())),
        ms(median(poll_times)),
        verdict.len()
    );
    println!(
        "B2 {rows} rows: append 1,000 rows → Snapshot with every method {}, median of {}",
        ms(median(every.clone())),
        every.len()
    );
    std::fs::remove_dir_all(&dir).ok();
}

/// A study of 100 cells (column `cell`, values c000 … c099) and three measures; every
/// fourth quota has a population (so the hypergeometric forms run too).
fn b3_study() -> Study {
    let mut text = String::from(
        "title = \"B3 (invented)\"\n[source]\nfile = \"none.csv\"\n[target]\nmargin = 0.03\nconfidence = 0.95\n[cells]\nby = [\"cell\"]\n",
    );
    for (name, column) in [("a", "qa"), ("b", "qb"), ("c", "qc")] {
        text.push_str(&format!(
            "[[measure]]\nname = \"{name}\"\ncolumn = \"{column}\"\nyes = [\"1\"]\nno = [\"0\"]\n"
        ));
    }
    for c in 0..100 {
        text.push_str(&format!("[[quota]]\ncell = {{ cell = \"c{c:03}\" }}\n"));
        if c % 4 == 3 {
            text.push_str("population = 40000\n");
        }
    }
    Study::parse(&text, Path::new("b3.toml")).expect("a valid study")
}

fn b3() {
    let study = b3_study();
    let layout: Layout = study.layout(&["cell", "qa", "qb", "qc"]).unwrap();
    let mut tally = Tally::new(3);
    let mut rng = Mix(7);
    let mut record = csv::ByteRecord::new();
    let mut line = 2;
    let mut add = |tally: &mut Tally, cell: u64, rng: &mut Mix| {
        record.clear();
        record.push_field(format!("c{cell:03}").as_bytes());
        for p in [30, 50, 80] {
            record.push_field(if rng.below(100) < p { b"1" } else { b"0" });
        }
        tally.add_record(&layout, &record, line);
        line += 1;
    };
    // Cells of 1,000 to 20,000 responses.
    for cell in 0..100 {
        for _ in 0..1000 + 190 * cell {
            add(&mut tally, cell, &mut rng);
        }
    }
    let as_of: jiff::Timestamp = "2026-06-01T00:00:00Z".parse().unwrap();
    for (detail, what) in [
        (Detail::Verdict, "the verdict alone"),
        (Detail::EveryMethod, "every method"),
    ] {
        let mut times = Vec::new();
        for _ in 0..RUNS {
            for cell in 0..100 {
                add(&mut tally, cell, &mut rng);
            }
            let start = Instant::now();
            let snapshot = assess_with(&study, &tally, as_of, study.target.decide_by, detail);
            times.push(start.elapsed().as_secs_f64());
            assert_eq!(snapshot.cells.len(), 100);
            std::hint::black_box(snapshot);
        }
        let warm = {
            let start = Instant::now();
            std::hint::black_box(assess_with(
                &study,
                &tally,
                as_of,
                study.target.decide_by,
                detail,
            ));
            start.elapsed().as_secs_f64()
        };
        println!(
            "B3 assess, 100 cells × 3 measures, {what}, every n new: {} (median of {RUNS}); same n again: {}",
            ms(median(times)),
            ms(warm)
        );
    }
}

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| a != "--bench")
        .collect();
    let want = |name: &str| args.is_empty() || args.iter().any(|a| a == name);
    if want("b3") {
        b3();
    }
    if want("b2") {
        let sizes =
            std::env::var("CLOSEOUT_BENCH_ROWS").unwrap_or_else(|_| "1000000 10000000".to_string());
        for rows in sizes.split_whitespace() {
            b2(rows.parse().expect("a row count"));
        }
    }
}
