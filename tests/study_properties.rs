//! No input makes the study reader panic: random text, random edits of a valid study
//! file, and random CSV headers. Whatever it accepts is usable, and whatever it
//! refuses comes with a located message.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::Path;

use closeout::rows::normalise;
use closeout::study::{Study, StudyErrorKind};
use proptest::prelude::*;
use proptest::test_runner::RngSeed;

const GOOD: &str = include_str!("study-files/good.toml");

fn config(cases: u32, seed: u64) -> ProptestConfig {
    ProptestConfig {
        cases,
        rng_seed: RngSeed::Fixed(seed),
        failure_persistence: None,
        ..ProptestConfig::default()
    }
}

/// Whatever `parse` says, it says it without panicking, and an accepted study can be
/// used: every quota is found again by its own cell, and a header with exactly the
/// named columns lays out.
fn check(text: &str) {
    match Study::parse(text, Path::new("study.toml")) {
        Ok(study) => {
            for q in &study.quotas {
                let key: Vec<String> = q.cell.iter().map(|v| normalise(v)).collect();
                let found = study
                    .quota_for(&key)
                    .expect("a quota is found by its own cell");
                assert!(study.tune_for(Some(found)) >= q.minimum.unwrap_or(1));
            }
            assert!(study.tune_for(None) >= 1);
            let _ = study.decision_level(study.planned_cells().unwrap_or(7));
            let mut names: Vec<&str> = study.cells.iter().map(String::as_str).collect();
            names.extend(study.measures.iter().map(|m| m.column.as_str()));
            names.extend(
                [&study.source.id, &study.source.time, &study.source.weight]
                    .into_iter()
                    .flatten()
                    .map(String::as_str),
            );
            names.sort();
            names.dedup();
            // Names that differ only in case or spacing would be ambiguous together.
            let mut loose: Vec<String> = names.iter().map(|n| normalise(n)).collect();
            loose.sort();
            loose.dedup();
            if loose.len() == names.len() {
                study
                    .layout(&names)
                    .expect("a header of exactly the named columns");
            }
        }
        Err(e) => {
            let message = e.to_string();
            assert!(message.starts_with("study.toml"), "{message}");
            assert!(!e.message().is_empty());
            if let Some(line) = e.line() {
                assert!(
                    line >= 1 && line <= text.lines().count().max(1) + 1,
                    "{message}"
                );
                assert!(
                    message.starts_with(&format!("study.toml:{line}:")),
                    "{message}"
                );
            }
        }
    }
}

/// Pieces of TOML and awkward values to splice into the valid file.
const PIECES: &[&str] = &[
    "\"",
    "'",
    "[",
    "]",
    "[[",
    "]]",
    "{",
    "}",
    "=",
    ",",
    ".",
    "#",
    "\n",
    " ",
    "0",
    "-1",
    "1e400",
    "nan",
    "inf",
    "true",
    "\"\"",
    "[]",
    "{}",
    "x",
    "é",
    "\u{feff}",
    "\u{1b}",
    "0.0000001",
    "0.9999999999999999",
    "99999999999999999999",
    "2026-12-20",
    "T18:00:00",
    "[target]\n",
    "[[measure]]\n",
    "[[quota]]\n",
    "[cells]\n",
    "[log]\n",
    "cell = {}\n",
    "minimum = 0\n",
    "population = 1\n",
    "yes = [\"1\"]\n",
    "name = \"satisfied\"\n",
    "region = \"north\"",
    "\"age_band\"",
    "confidance = 0.9\n",
    "decide_by = \"wald\"\n",
];

/// Values of every type, valid and not, for the keys of the valid file.
const VALUES: &[&str] = &[
    "0",
    "1",
    "-1",
    "2",
    "0.5",
    "1.5",
    "0.05",
    "0.0001",
    "150",
    "12000",
    "99999999999",
    "nan",
    "-inf",
    "true",
    "false",
    "\"\"",
    "\" \"",
    "\"x\"",
    "\"North\"",
    "\"anytime\"",
    "\"wilson\"",
    "\";\"",
    "[]",
    "[\"a\", \"A\"]",
    "[\"4\", 5]",
    "[1.5]",
    "{}",
    "{ region = \"north\" }",
    "{ region = \"south\", age_band = \"18-34\" }",
    "2026-12-20T18:00:00Z",
    "2026-12-20",
    "\"2026-12-20T18:00:00+01:00\"",
];

#[derive(Clone, Debug)]
enum Edit {
    SetValue { line: usize, value: usize },
    Delete { at: usize, len: usize },
    Insert { at: usize, piece: usize },
    Replace { at: usize, piece: usize },
    DuplicateLine { line: usize },
    DeleteLine { line: usize },
    SwapLines { a: usize, b: usize },
}

/// Edits of the text itself: mostly they break the TOML.
fn text_edit() -> impl Strategy<Value = Edit> {
    let at = 0..2000usize;
    prop_oneof![
        (at.clone(), 1..12usize).prop_map(|(at, len)| Edit::Delete { at, len }),
        (at.clone(), 0..PIECES.len()).prop_map(|(at, piece)| Edit::Insert { at, piece }),
        (at, 0..PIECES.len()).prop_map(|(at, piece)| Edit::Replace { at, piece }),
        (0..60usize).prop_map(|line| Edit::DuplicateLine { line }),
    ]
}

/// Edits of values and whole lines: mostly they keep the TOML valid, so the checks
/// of the study itself are reached.
fn value_edit() -> impl Strategy<Value = Edit> {
    prop_oneof![
        6 => (0..60usize, 0..VALUES.len()).prop_map(|(line, value)| Edit::SetValue { line, value }),
        1 => (0..60usize).prop_map(|line| Edit::DeleteLine { line }),
        1 => (0..60usize, 0..60usize).prop_map(|(a, b)| Edit::SwapLines { a, b }),
    ]
}

fn apply(text: &str, edits: &[Edit]) -> String {
    let mut chars: Vec<char> = text.chars().collect();
    for e in edits {
        match *e {
            Edit::SetValue { line, value } => {
                let s: String = chars.iter().collect();
                let mut lines: Vec<String> = s.lines().map(str::to_string).collect();
                let keyed: Vec<usize> = (0..lines.len())
                    .filter(|&i| lines[i].contains(" = "))
                    .collect();
                if !keyed.is_empty() {
                    let i = keyed[line % keyed.len()];
                    let key = lines[i].split(" = ").next().unwrap_or("").to_string();
                    lines[i] = format!("{key} = {}", VALUES[value]);
                }
                chars = lines.join("\n").chars().collect();
            }
            Edit::Delete { at, len } => {
                let at = at % (chars.len() + 1);
                let end = (at + len).min(chars.len());
                chars.drain(at..end);
            }
            Edit::Insert { at, piece } => {
                let at = at % (chars.len() + 1);
                chars.splice(at..at, PIECES[piece].chars());
            }
            Edit::Replace { at, piece } => {
                let at = at % (chars.len() + 1);
                let end = (at + 1).min(chars.len());
                chars.splice(at..end, PIECES[piece].chars());
            }
            Edit::DuplicateLine { line } | Edit::DeleteLine { line } => {
                let s: String = chars.iter().collect();
                let mut lines: Vec<&str> = s.lines().collect();
                if !lines.is_empty() {
                    let i = line % lines.len();
                    if matches!(e, Edit::DuplicateLine { .. }) {
                        lines.insert(i, lines[i]);
                    } else {
                        lines.remove(i);
                    }
                }
                chars = lines.join("\n").chars().collect();
            }
            Edit::SwapLines { a, b } => {
                let s: String = chars.iter().collect();
                let mut lines: Vec<&str> = s.lines().collect();
                if !lines.is_empty() {
                    let n = lines.len();
                    lines.swap(a % n, b % n);
                }
                chars = lines.join("\n").chars().collect();
            }
        }
    }
    chars.into_iter().collect()
}

/// A header name: one the good study uses (in any case, with spaces or a byte-order
/// mark), a near miss, or arbitrary text.
fn header_name() -> impl Strategy<Value = String> {
    let used = prop::sample::select(vec![
        "respondent_id",
        "submitted_at",
        "weight",
        "region",
        "age_band",
        "q1",
        "q7",
    ]);
    prop_oneof![
        3 => (used.clone(), any::<bool>(), 0..3usize, any::<bool>()).prop_map(|(n, upper, pad, bom)| {
            let n = if upper { n.to_uppercase() } else { n.to_string() };
            let pad = " ".repeat(pad);
            format!("{}{pad}{n}{pad}", if bom { "\u{feff}" } else { "" })
        }),
        1 => used.prop_map(|n| format!("{n}x")),
        1 => any::<String>(),
        1 => "[a-z_ ]{0,12}",
    ]
}

proptest! {
    #![proptest_config(config(256, 20261202))]

    #[test]
    fn parse_never_panics_on_random_text(text in any::<String>()) {
        check(&text);
    }

    #[test]
    fn parse_never_panics_on_random_toml_like_text(text in "[\\[\\]{}=\",.a-z0-9_ \n#-]{0,300}") {
        check(&text);
    }
}

proptest! {
    #![proptest_config(config(200, 20261203))]

    #[test]
    fn parse_never_panics_on_text_edits_of_a_valid_study(edits in prop::collection::vec(text_edit(), 1..6)) {
        check(&apply(GOOD, &edits));
    }

    #[test]
    fn parse_never_panics_on_value_edits_of_a_valid_study(edits in prop::collection::vec(value_edit(), 1..4)) {
        check(&apply(GOOD, &edits));
    }
}

proptest! {
    #![proptest_config(config(256, 20261204))]

    #[test]
    fn layout_never_panics_and_every_column_it_finds_has_the_name(
        header in prop::collection::vec(header_name(), 0..14)
    ) {
        let study = Study::parse(GOOD, Path::new("study.toml")).unwrap();
        let refs: Vec<&str> = header.iter().map(String::as_str).collect();
        match study.layout(&refs) {
            Ok(layout) => {
                prop_assert_eq!(layout.width, header.len());
                let loose = |i: usize| normalise(header[i].trim_start_matches('\u{feff}'));
                for (i, name) in layout.cells.iter().zip(&study.cells) {
                    prop_assert!(*i < header.len());
                    prop_assert_eq!(loose(*i), normalise(name));
                }
                for (rule, m) in layout.measures.iter().zip(&study.measures) {
                    prop_assert_eq!(loose(rule.column), normalise(&m.column));
                }
                prop_assert_eq!(layout.id.map(loose), Some("respondent_id".to_string()));
                prop_assert_eq!(layout.time.map(loose), Some("submitted_at".to_string()));
                prop_assert_eq!(layout.weight.map(loose), Some("weight".to_string()));
            }
            Err(e) => {
                prop_assert!(matches!(
                    e.kind(),
                    StudyErrorKind::MissingColumn | StudyErrorKind::DuplicateColumn
                ));
                prop_assert!(e.to_string().starts_with("responses.csv: "), "{}", e);
            }
        }
    }
}
