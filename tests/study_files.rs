//! Study files: one good study read into every expected value, one bad file per kind
//! of mistake with its whole message checked, `load`, `layout` against CSV headers,
//! and the anytime tuning sizes.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::{Path, PathBuf};

use closeout::bounds::{self, Level, Method, SizeQuery};
use closeout::rows::{Answer, MeasureRule};
use closeout::study::{Study, StudyErrorKind};

fn folder() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/study-files")
}

fn good_text() -> String {
    std::fs::read_to_string(folder().join("good.toml")).unwrap()
}

/// The good study as if it were `study.toml` in the current folder.
fn good() -> Study {
    Study::parse(&good_text(), Path::new("study.toml")).unwrap()
}

fn anytime_size(margin: f64, level: Level, population: Option<u64>) -> u64 {
    let mut sq = SizeQuery::new(margin, level).unwrap();
    if let Some(p) = population {
        sq = sq.with_population(p).unwrap();
    }
    bounds::required_size(Method::Anytime, &sq).unwrap().n
}

#[test]
fn every_bad_study_file_gives_its_expected_message() {
    let mut checked = Vec::new();
    for entry in std::fs::read_dir(folder()).unwrap() {
        let path = entry.unwrap().path();
        let name = path.file_name().unwrap().to_str().unwrap().to_string();
        if !name.starts_with("bad-") {
            continue;
        }
        let text = std::fs::read_to_string(&path).unwrap();
        let expected = text
            .lines()
            .next()
            .and_then(|l| l.strip_prefix("# expect: "))
            .unwrap_or_else(|| panic!("{name}: the first line must be '# expect: <message>'"));
        let error = Study::parse(&text, Path::new(&name))
            .err()
            .unwrap_or_else(|| panic!("{name}: parsed without error"));
        assert_eq!(error.to_string(), expected, "{name}");
        assert!(error.to_string().starts_with(&format!("{name}:")));
        checked.push(name);
    }
    // The kinds of mistake the folder must cover.
    for required in [
        "bad-unknown-key.toml",
        "bad-margin.toml",
        "bad-confidence.toml",
        "bad-method.toml",
        "bad-deadline.toml",
        "bad-duplicate-measure.toml",
        "bad-quota-wrong-column.toml",
        "bad-duplicate-quota.toml",
        "bad-yes-and-no.toml",
        "bad-syntax.toml",
        "bad-wrong-type.toml",
    ] {
        assert!(checked.iter().any(|c| c == required), "missing {required}");
    }
}

#[test]
fn bad_files_carry_the_kind_line_and_key_of_their_mistake() {
    let cases: &[(&str, StudyErrorKind, Option<usize>, Option<&str>)] = &[
        (
            "bad-unknown-key.toml",
            StudyErrorKind::UnknownKey,
            Some(9),
            Some("target.confidance"),
        ),
        (
            "bad-margin.toml",
            StudyErrorKind::Invalid,
            Some(8),
            Some("target.margin"),
        ),
        (
            "bad-wrong-type.toml",
            StudyErrorKind::WrongType,
            Some(8),
            Some("target.margin"),
        ),
        ("bad-syntax.toml", StudyErrorKind::Syntax, Some(5), None),
        (
            "bad-duplicate-quota.toml",
            StudyErrorKind::Duplicate,
            Some(25),
            Some("quota.cell"),
        ),
        (
            "bad-quota-missing-column.toml",
            StudyErrorKind::Missing,
            Some(21),
            Some("quota.cell"),
        ),
        (
            "bad-no-measure.toml",
            StudyErrorKind::Missing,
            None,
            Some("measure"),
        ),
    ];
    for &(name, kind, line, key) in cases {
        let text = std::fs::read_to_string(folder().join(name)).unwrap();
        let e = Study::parse(&text, Path::new(name)).unwrap_err();
        assert_eq!(e.kind(), kind, "{name}");
        assert_eq!(e.line(), line, "{name}");
        assert_eq!(e.key(), key, "{name}");
        assert_eq!(e.file(), Path::new(name));
    }
}

#[test]
fn the_good_study_parses_into_every_expected_value() {
    let path = folder().join("good.toml");
    let s = Study::load(&path).unwrap();
    assert_eq!(s.title, "Resident survey 2026");
    assert_eq!(s.study_path, path);

    assert_eq!(s.source.file, folder().join("responses.csv"));
    assert_eq!(s.source.id.as_deref(), Some("respondent_id"));
    assert_eq!(s.source.time.as_deref(), Some("submitted_at"));
    assert_eq!(s.source.weight.as_deref(), Some("weight"));
    assert_eq!(s.source.delimiter, b';');

    assert_eq!(s.target.margin, 0.05);
    assert_eq!(s.target.level, Level::from_confidence(0.95).unwrap());
    assert_eq!(s.target.decide_by, Method::Hoeffding);
    assert!(s.target.simultaneous);
    assert_eq!(
        s.target.deadline,
        Some("2026-12-20T18:00:00Z".parse::<jiff::Timestamp>().unwrap())
    );

    assert_eq!(s.cells, vec!["region", "age_band"]);

    assert_eq!(s.measures.len(), 2);
    assert_eq!(s.measures[0].name, "satisfied");
    assert_eq!(s.measures[0].column, "q1");
    assert_eq!(s.measures[0].yes, vec!["4", "5"]);
    // As written: the layout normalises, the study keeps the text.
    assert_eq!(s.measures[0].no, vec!["1", "2", " 3 "]);
    assert_eq!(s.measures[1].name, "Recommends");
    assert_eq!(s.measures[1].column, "q7");
    assert_eq!(s.measures[1].yes, vec!["Yes"]);
    assert_eq!(s.measures[1].no, vec!["No", "not really"]);

    assert_eq!(s.quotas.len(), 3);
    // Values in the order of cells.by, whatever the order in the file.
    assert_eq!(s.quotas[0].cell, vec!["North", "18-34"]);
    assert_eq!(s.quotas[0].minimum, Some(150));
    assert_eq!(s.quotas[0].population, Some(12000));
    assert_eq!(s.quotas[1].cell, vec!["north", "35+"]);
    assert_eq!(s.quotas[1].minimum, Some(2000));
    assert_eq!(s.quotas[1].population, None);
    assert_eq!(s.quotas[2].cell, vec!["south", "18-34"]);
    assert_eq!(s.quotas[2].minimum, None);
    assert_eq!(s.quotas[2].population, Some(300));

    assert_eq!(s.log, Some(folder().join("events.jsonl")));
    assert_eq!(s.planned_cells(), Some(3));
}

#[test]
fn tune_for_is_the_larger_of_the_minimum_and_the_anytime_size() {
    // Not simultaneous: the study's own level.
    let text = good_text().replace("simultaneous = true", "simultaneous = false");
    let s = Study::parse(&text, Path::new("study.toml")).unwrap();
    let level = s.target.level;
    let with_population = anytime_size(0.05, level, Some(12000));
    let without = anytime_size(0.05, level, None);
    // The population matters here, so the check below can tell the two apart.
    assert!(with_population < without, "{with_population} vs {without}");
    assert!(with_population > 150);
    assert_eq!(s.tune_for(Some(&s.quotas[0])), with_population);
    // The minimum 2000 is above the anytime size, so it decides.
    assert!(without < 2000);
    assert_eq!(s.tune_for(Some(&s.quotas[1])), 2000);
    assert_eq!(
        s.tune_for(Some(&s.quotas[2])),
        anytime_size(0.05, level, Some(300))
    );
    assert_eq!(s.tune_for(None), without);
}

#[test]
fn simultaneous_tuning_uses_the_level_shared_over_quotas_and_measures() {
    let s = good();
    // 3 quotas × 2 measures.
    let level = Level::from_confidence(0.95)
        .unwrap()
        .split(6, bounds::Split::Bonferroni);
    assert_eq!(s.tuning_level(), level);
    assert_eq!(s.decision_level(3), level);
    assert_eq!(
        s.tune_for(Some(&s.quotas[0])),
        anytime_size(0.05, level, Some(12000))
    );
    assert_eq!(
        s.tune_for(s.quota_for(&["south".into(), "18-34".into()])),
        anytime_size(0.05, level, Some(300))
    );
    assert_eq!(s.tune_for(None), anytime_size(0.05, level, None));
}

#[test]
fn load_names_a_missing_file() {
    let path = folder().join("not-there.toml");
    let e = Study::load(&path).unwrap_err();
    assert_eq!(e.kind(), StudyErrorKind::Read);
    assert_eq!(
        e.to_string(),
        format!(
            "{}: the study file is not there: check the path",
            path.display()
        )
    );
}

#[test]
fn load_refuses_text_that_is_not_utf8() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("study.toml");
    std::fs::write(&path, b"title = \"caf\xe9\"\n").unwrap();
    let e = Study::load(&path).unwrap_err();
    assert_eq!(e.kind(), StudyErrorKind::Read);
    assert_eq!(
        e.to_string(),
        format!(
            "{}: the study file is not UTF-8 text: save it as UTF-8",
            path.display()
        )
    );
}

const HEADER: &[&str] = &[
    "respondent_id",
    "submitted_at",
    "region",
    "age_band",
    "q1",
    "q7",
    "weight",
];

#[test]
fn layout_finds_every_column_the_study_names() {
    let s = good();
    let layout = s.layout(HEADER).unwrap();
    assert_eq!(layout.width, 7);
    assert_eq!(layout.cells, vec![2, 3]);
    assert_eq!(layout.id, Some(0));
    assert_eq!(layout.time, Some(1));
    assert_eq!(layout.weight, Some(6));
    assert_eq!(
        layout.measures,
        vec![
            MeasureRule {
                column: 4,
                yes: vec!["4".into(), "5".into()],
                no: vec!["1".into(), "2".into(), "3".into()],
            },
            MeasureRule {
                column: 5,
                yes: vec!["yes".into()],
                no: vec!["no".into(), "not really".into()],
            },
        ]
    );
    // The normalised lists classify answers as the study means them.
    assert_eq!(layout.measures[0].classify("3"), Answer::No);
    assert_eq!(layout.measures[1].classify(" YES "), Answer::Yes);
    assert_eq!(layout.measures[1].classify("Not Really"), Answer::No);
}

#[test]
fn layout_leaves_optional_columns_out_when_the_study_does_not_name_them() {
    let text = good_text()
        .replace("id = \"respondent_id\"\n", "")
        .replace("time = \"submitted_at\"\n", "")
        .replace("weight = \"weight\"\n", "");
    let s = Study::parse(&text, Path::new("study.toml")).unwrap();
    let layout = s.layout(&["region", "age_band", "q1", "q7"]).unwrap();
    assert_eq!((layout.id, layout.time, layout.weight), (None, None, None));
    assert_eq!(layout.width, 4);
}

#[test]
fn layout_names_a_missing_column_and_suggests_the_nearest() {
    let s = good();
    let header = [
        "respondent_id",
        "submitted_at",
        "region",
        "age_bnd",
        "q1",
        "q7",
        "weight",
    ];
    let e = s.layout(&header).unwrap_err();
    assert_eq!(e.kind(), StudyErrorKind::MissingColumn);
    assert_eq!(e.file(), Path::new("responses.csv"));
    assert_eq!(
        e.to_string(),
        "responses.csv: column 'age_band' (cells.by in study.toml:19) is not in the header; \
         did you mean 'age_bnd'? The header has: respondent_id, submitted_at, region, age_bnd, q1, q7, weight"
    );
}

#[test]
fn layout_gives_no_suggestion_when_nothing_is_close() {
    let s = good();
    let header = [
        "respondent_id",
        "submitted_at",
        "region",
        "age_band",
        "q1",
        "q7",
    ];
    let e = s.layout(&header).unwrap_err();
    assert_eq!(
        e.to_string(),
        "responses.csv: column 'weight' (source.weight in study.toml:8) is not in the header. \
         The header has: respondent_id, submitted_at, region, age_band, q1, q7"
    );
}

#[test]
fn layout_matches_names_without_case_or_surrounding_space_or_a_byte_order_mark() {
    let s = good();
    let header = [
        "\u{feff}Respondent_ID",
        " Submitted_At ",
        "REGION",
        "age_band ",
        "Q1",
        "q7",
        "Weight",
    ];
    let layout = s.layout(&header).unwrap();
    assert_eq!(layout.id, Some(0));
    assert_eq!(layout.time, Some(1));
    assert_eq!(layout.cells, vec![2, 3]);
    assert_eq!(layout.measures[0].column, 4);
    assert_eq!(layout.weight, Some(6));
}

#[test]
fn layout_prefers_the_exact_name_to_a_loose_match() {
    let s = good();
    let mut header = HEADER.to_vec();
    header.push("Region");
    let layout = s.layout(&header).unwrap();
    assert_eq!(layout.cells, vec![2, 3]);
}

#[test]
fn layout_refuses_a_used_name_that_appears_twice() {
    let s = good();
    let mut header = HEADER.to_vec();
    header.push("q1");
    let e = s.layout(&header).unwrap_err();
    assert_eq!(e.kind(), StudyErrorKind::DuplicateColumn);
    assert_eq!(
        e.to_string(),
        "responses.csv: column 'q1' (measure 'satisfied' in study.toml:23) appears 2 times in the \
         header (fields 5, 8): rename or remove the extra columns so that the name is used once"
    );
}

#[test]
fn layout_refuses_a_name_that_matches_two_headers_loosely() {
    let s = good();
    let header = [
        "respondent_id",
        "submitted_at",
        "Region",
        "REGION ",
        "age_band",
        "q1",
        "q7",
        "weight",
    ];
    let e = s.layout(&header).unwrap_err();
    assert_eq!(e.kind(), StudyErrorKind::DuplicateColumn);
    assert_eq!(
        e.to_string(),
        "responses.csv: column 'region' (cells.by in study.toml:19) matches 2 header names once \
         case and spaces are ignored: 'Region' (field 3), 'REGION ' (field 4); write the name \
         exactly as one of them, or rename the others"
    );
}

#[test]
fn layout_ignores_duplicate_names_the_study_does_not_use() {
    let s = good();
    let mut header = HEADER.to_vec();
    header.extend(["notes", "notes"]);
    assert_eq!(s.layout(&header).unwrap().width, 9);
}

#[test]
fn layout_escapes_header_text_and_shortens_a_long_header_list() {
    let s = good();
    let mut header: Vec<String> = (0..40).map(|i| format!("x{i}")).collect();
    header[0] = "evil\u{1b}[2J".to_string();
    let refs: Vec<&str> = header.iter().map(String::as_str).collect();
    let e = s.layout(&refs).unwrap_err().to_string();
    assert!(!e.contains('\u{1b}'), "{e}");
    assert!(e.contains("evil\\u{1b}[2J"), "{e}");
    assert!(e.ends_with("x29, … (10 more)"), "{e}");
}

#[test]
fn layout_against_an_empty_header_says_so() {
    let e = good().layout(&[]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "responses.csv: column 'region' (cells.by in study.toml:19) is not in the header \
         (the header is empty): check source.file and source.delimiter"
    );
}
