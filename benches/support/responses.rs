//! A deterministic responses file for the benchmarks: invented data for a made-up
//! study (not real people or a real organisation). Stands in until `closeout demo
//! --write` is available.
//!
//! Shape (as issue 7 asks): ten columns, about 90 bytes a row, 24 cells (6 districts
//! × 4 age bands), three measures, increasing RFC 3339 times, design weights in
//! sixteenths, about 0.1 % malformed rows (too few fields, a bad weight, a bad time)
//! and about 0.1 % duplicate ids. The same seed and row count give the same bytes.

#![allow(dead_code)]

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

pub const HEADER: &str = "respondent_id,submitted_at,district,age_band,weight,q_satisfaction,q_recommend,q_trust,channel,interviewer_note\n";

const DISTRICTS: [&str; 6] = [
    "north", "harbour", "hillside", "old-town", "marina", "uplands",
];
const AGES: [&str; 4] = ["18-29", "30-44", "45-64", "65+"];
const CHANNELS: [&str; 3] = ["web-form", "telephone", "doorstep"];
const NOTES: [&str; 4] = [
    "second visit",
    "asked for a large print card",
    "called back later",
    "interview in the garden",
];
/// 2026-03-02T08:00:00Z.
const START: i64 = 1_772_438_400;

/// SplitMix64: small, fast and deterministic.
pub struct Mix(u64);

impl Mix {
    pub fn new(seed: u64) -> Mix {
        Mix(seed)
    }
    pub fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    pub fn below(&mut self, n: u64) -> u64 {
        ((u128::from(self.next()) * u128::from(n)) >> 64) as u64
    }
}

/// Days since 1970-01-01 → (year, month, day) (Howard Hinnant's civil_from_days).
fn civil(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (yoe + era * 400 + i64::from(m <= 2), m, d)
}

fn time_text(second: i64, out: &mut Vec<u8>) {
    let (y, mo, d) = civil(second.div_euclid(86_400));
    let s = second.rem_euclid(86_400);
    write!(
        out,
        "{y:04}-{mo:02}-{d:02}T{:02}:{:02}:{:02}Z",
        s / 3600,
        s / 60 % 60,
        s % 60
    )
    .ok();
}

/// Write `rows` records (after the header) to `out`, starting at record `from` of the
/// stream the seed defines, so a file can be written and then appended to.
pub fn write_rows(out: &mut impl Write, seed: u64, from: u64, rows: u64) -> std::io::Result<()> {
    let mut line = Vec::with_capacity(256);
    for i in from..from + rows {
        let mut rng = Mix::new(seed ^ i.wrapping_mul(0x2545_f491_4f6c_dd1d));
        line.clear();
        // About 0.1 % repeat an earlier id.
        let id = if i > 0 && rng.below(1000) == 0 {
            rng.below(i)
        } else {
            i
        };
        let cell = rng.below(24) as usize;
        let sat = rng.below(5) + 1;
        let rec = if rng.below(100) < 58 { "yes" } else { "no" };
        let trust = ["agree", "disagree", "unsure"][rng.below(3) as usize];
        let weight = f64::from(8 + rng.below(25) as u32) / 16.0;
        let channel = CHANNELS[rng.below(3) as usize];
        let note = if rng.below(4) == 0 {
            NOTES[rng.below(4) as usize]
        } else {
            ""
        };
        // About 0.1 % malformed: a field missing, a bad weight, a bad time.
        let bad = rng.below(3000);
        write!(line, "QS-2026-{:09},", id + 1)?;
        if bad == 2 {
            line.extend_from_slice(b"yesterday");
        } else {
            // A response every 0.9 s on average, times increasing.
            time_text(START + (i * 9 / 10) as i64, &mut line);
        }
        write!(line, ",{},{},", DISTRICTS[cell / 4], AGES[cell % 4])?;
        if bad == 1 {
            line.extend_from_slice(b"n/a");
        } else {
            write!(line, "{weight}")?;
        }
        write!(line, ",{sat},{rec},{trust},{channel}")?;
        if bad != 0 {
            write!(line, ",{note}")?;
        }
        line.push(b'\n');
        out.write_all(&line)?;
    }
    Ok(())
}

/// Write a responses file of `rows` records and two study files beside it: one that
/// de-duplicates on the id column and one that does not. Returns (responses, study
/// with ids, study without ids). An existing responses file of the right size is kept.
pub fn write_study(dir: &Path, rows: u64) -> std::io::Result<(PathBuf, PathBuf, PathBuf)> {
    std::fs::create_dir_all(dir)?;
    let csv = dir.join(format!("responses-{rows}.csv"));
    let expected = expected_size(rows);
    if std::fs::metadata(&csv).map(|m| m.len()).ok() != Some(expected) {
        let mut out = BufWriter::with_capacity(1 << 20, File::create(&csv)?);
        out.write_all(HEADER.as_bytes())?;
        write_rows(&mut out, SEED, 0, rows)?;
        out.flush()?;
    }
    let with_ids = dir.join(format!("study-{rows}.toml"));
    let without_ids = dir.join(format!("study-{rows}-no-ids.toml"));
    std::fs::write(&with_ids, study_text(&csv, true))?;
    std::fs::write(&without_ids, study_text(&csv, false))?;
    Ok((csv, with_ids, without_ids))
}

pub const SEED: u64 = 20_261_201;

/// The size the file of `rows` records has (computed by writing it to a sink).
fn expected_size(rows: u64) -> u64 {
    struct Count(u64);
    impl Write for Count {
        fn write(&mut self, b: &[u8]) -> std::io::Result<usize> {
            self.0 += b.len() as u64;
            Ok(b.len())
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }
    let mut c = Count(HEADER.len() as u64);
    write_rows(&mut c, SEED, 0, rows).ok();
    c.0
}

pub fn study_text(csv: &Path, ids: bool) -> String {
    let mut s = String::new();
    s.push_str("# Invented benchmark study: made-up data for a made-up town, not real people.\n");
    s.push_str("title = \"Benchmark study (invented)\"\n[source]\n");
    let name = csv
        .file_name()
        .map_or(String::new(), |n| n.to_string_lossy().into_owned());
    s.push_str(&format!("file = {name:?}\n"));
    if ids {
        s.push_str("id = \"respondent_id\"\n");
    }
    s.push_str("time = \"submitted_at\"\nweight = \"weight\"\n");
    s.push_str("[target]\nmargin = 0.03\nconfidence = 0.95\ndecide_by = \"anytime\"\n");
    s.push_str("[cells]\nby = [\"district\", \"age_band\"]\n");
    s.push_str("[[measure]]\nname = \"satisfied\"\ncolumn = \"q_satisfaction\"\nyes = [\"4\", \"5\"]\nno = [\"1\", \"2\", \"3\"]\n");
    s.push_str("[[measure]]\nname = \"would_recommend\"\ncolumn = \"q_recommend\"\nyes = [\"yes\"]\nno = [\"no\"]\n");
    s.push_str("[[measure]]\nname = \"trusts_council\"\ncolumn = \"q_trust\"\nyes = [\"agree\"]\nno = [\"disagree\", \"unsure\"]\n");
    for d in DISTRICTS {
        for a in AGES {
            s.push_str(&format!(
                "[[quota]]\ncell = {{ district = \"{d}\", age_band = \"{a}\" }}\nminimum = 200\n"
            ));
        }
    }
    s
}
