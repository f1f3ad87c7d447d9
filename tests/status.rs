//! `closeout status` end to end: the tallies of the sample study and of a generated
//! 50,000-row file against an independent pandas computation, the pinned JSON of the
//! sample, CSV formula neutralisation, exit codes and error messages.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use closeout::bounds::{self, Level, Method, Query};
use closeout::study::Study;
use closeout::tally::{CellKey, Tally};
use closeout::{assess, batch, report};
use serde_json::Value;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn closeout() -> Command {
    Command::cargo_bin("closeout").unwrap()
}

fn read(study: &Path) -> (Study, Tally) {
    let study = Study::load(study).unwrap();
    let tally = batch::read(&study).unwrap();
    (study, tally)
}

/// Compare a tally with the expected JSON written by the sample's `reference.py`
/// (Python's csv module for the parsing, a pandas groupby for the sums, statsmodels
/// `proportion_confint` for Wilson and Clopper–Pearson; versions in the file).
fn check_against_pandas(study_file: &Path, expected_file: &Path) {
    let (study, tally) = read(study_file);
    let e: Value = serde_json::from_str(&std::fs::read_to_string(expected_file).unwrap()).unwrap();
    assert!(e["versions"]["pandas"].is_string());
    assert_eq!(tally.rows_read, e["rows_read"].as_u64().unwrap());
    assert_eq!(tally.rejected, e["rows_rejected"].as_u64().unwrap());
    assert_eq!(tally.duplicates, e["duplicates"].as_u64().unwrap());
    for (got, want) in tally
        .first_rejections
        .iter()
        .zip(e["rejections"].as_array().unwrap())
    {
        assert_eq!(got.line, want["line"].as_u64().unwrap());
        assert_eq!(
            got.reason.kind(),
            want["reason"].as_str().unwrap(),
            "line {}",
            got.line
        );
    }
    for ((line, id), want) in tally
        .first_duplicates
        .iter()
        .zip(e["duplicate_lines"].as_array().unwrap())
    {
        assert_eq!(*line, want["line"].as_u64().unwrap());
        assert_eq!(id.trim(), want["id"].as_str().unwrap().trim());
    }
    for (i, measure) in study.measures.iter().enumerate() {
        let want = &e["unexpected"][&measure.name];
        let got = &tally.unexpected_values[i];
        assert_eq!(
            got.len(),
            want.as_object().unwrap().len(),
            "{}",
            measure.name
        );
        for (value, count) in got {
            assert_eq!(
                Some(*count),
                want[value].as_u64(),
                "{} '{value}'",
                measure.name
            );
        }
    }
    let cells = e["cells"].as_array().unwrap();
    assert_eq!(tally.cells.len(), cells.len());
    let level = Level::from_confidence(0.95).unwrap();
    for want in cells {
        let values: Vec<String> = study
            .cells
            .iter()
            .map(|c| want["cell"][c].as_str().unwrap().to_string())
            .collect();
        let cell = &tally.cells[&CellKey(values.clone())];
        assert_eq!(
            cell.responses,
            want["responses"].as_u64().unwrap(),
            "{values:?}"
        );
        for (m, w) in cell
            .measures
            .iter()
            .zip(want["measures"].as_array().unwrap())
        {
            let ctx = format!("{values:?} {}", w["name"]);
            assert_eq!(m.n, w["n"].as_u64().unwrap(), "{ctx}");
            assert_eq!(m.successes, w["successes"].as_u64().unwrap(), "{ctx}");
            assert_eq!(m.missing, w["missing"].as_u64().unwrap(), "{ctx}");
            assert_eq!(m.unexpected, w["unexpected"].as_u64().unwrap(), "{ctx}");
            // Weights are multiples of 1/16, so the sums are exact in any order.
            assert_eq!(m.weights.sum_w, w["sum_w"].as_f64().unwrap(), "{ctx}");
            assert_eq!(m.weights.sum_w2, w["sum_w2"].as_f64().unwrap(), "{ctx}");
            assert_eq!(m.weights.sum_wy, w["sum_wy"].as_f64().unwrap(), "{ctx}");
            if m.n == 0 {
                continue;
            }
            let q = Query::new(m.successes, m.n, level).unwrap();
            for (method, key) in [
                (Method::Wilson, "wilson"),
                (Method::ClopperPearson, "clopper_pearson"),
            ] {
                let i = bounds::interval(method, &q).unwrap();
                let ends = w[key].as_array().unwrap();
                assert!(
                    (i.lower - ends[0].as_f64().unwrap()).abs() < 1e-9,
                    "{ctx} {method}"
                );
                assert!(
                    (i.upper - ends[1].as_f64().unwrap()).abs() < 1e-9,
                    "{ctx} {method}"
                );
            }
        }
    }
}

#[test]
fn sample_study_tallies_match_pandas() {
    let dir = root().join("sample-data/lakeside-residents");
    check_against_pandas(&dir.join("study.toml"), &dir.join("expected.json"));
}

#[test]
fn generated_50k_tallies_match_pandas() {
    let dir = root().join("tests/data");
    check_against_pandas(
        &dir.join("generated-50k.study.toml"),
        &dir.join("generated-50k.expected.json"),
    );
}

const AS_OF: &str = "2026-05-15T18:00:00Z";

/// The sample's whole `status --format json` output, pinned. The parts that come
/// from outside sources are checked above; this pin catches any unintended change in
/// the verdict, ordering or field names. Regenerate with
/// `CLOSEOUT_UPDATE_PINS=1 cargo test --test status` and review the diff.
#[test]
fn sample_status_json_is_pinned() {
    let study = root().join("sample-data/lakeside-residents/study.toml");
    let out = closeout()
        .current_dir(root())
        .args([
            "status",
            "sample-data/lakeside-residents/study.toml",
            "--format",
            "json",
            "--as-of",
            AS_OF,
        ])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let got: Value = serde_json::from_slice(&out).unwrap();
    let pin = root().join("tests/pins/lakeside-status.json");
    if std::env::var_os("CLOSEOUT_UPDATE_PINS").is_some() {
        std::fs::create_dir_all(pin.parent().unwrap()).unwrap();
        std::fs::write(&pin, serde_json::to_string_pretty(&got).unwrap() + "\n").unwrap();
    }
    let want: Value = serde_json::from_str(&std::fs::read_to_string(&pin).unwrap()).unwrap();
    assert_eq!(got, want, "status JSON changed; see {}", pin.display());
    // The documented top-level and per-cell fields are there.
    for key in [
        "title",
        "rows_read",
        "rows_rejected",
        "duplicates",
        "decide_by",
        "margin_target",
        "confidence",
        "ready_to_close",
        "cells",
    ] {
        assert!(!got[key].is_null(), "{key}");
    }
    let cell = &got["cells"][0];
    for key in [
        "cell",
        "label",
        "planned",
        "responses",
        "status",
        "rate_per_hour",
        "eta",
        "measures",
    ] {
        assert!(cell.get(key).is_some(), "{key}");
    }
    for key in [
        "name",
        "n",
        "successes",
        "estimate",
        "margin",
        "met",
        "needed",
        "bounds",
    ] {
        assert!(cell["measures"][0].get(key).is_some(), "{key}");
    }
    assert!(study.exists());
}

/// The verdict follows the rules: a cell is met when every measure's deciding margin
/// is within the target and its minimum is reached; ready to close when every planned
/// cell is met; unplanned cells never count.
#[test]
fn the_verdict_follows_its_rules() {
    let (study, tally) = read(&root().join("sample-data/lakeside-residents/study.toml"));
    let s = assess::assess(&study, &tally, AS_OF.parse().unwrap());
    assert_eq!(s.cells_planned, study.quotas.len());
    for c in &s.cells {
        let measures_met = c
            .measures
            .iter()
            .all(|m| m.margin.is_some_and(|x| x <= study.target.margin));
        let minimum_met = c.responses >= c.minimum.unwrap_or(0);
        assert_eq!(
            c.status == assess::Status::Met,
            measures_met && minimum_met,
            "{}",
            c.label
        );
        for m in &c.measures {
            let decided = m
                .bounds
                .iter()
                .find(|b| b.method == study.target.decide_by)
                .unwrap();
            assert_eq!(m.margin, decided.margin, "{} {}", c.label, m.name);
        }
    }
    // The ETA is the rate carried forward: as_of + needed / rate hours (to the second).
    for c in s.cells.iter().filter(|c| c.status != assess::Status::Met) {
        if let (Some(eta), Some(needed), Some(rate)) = (c.eta, c.needed, c.rate_per_hour) {
            let hours = eta.duration_since(s.as_of).as_secs_f64() / 3600.0;
            assert!(
                (hours - needed as f64 / rate).abs() < 1.0 / 3600.0,
                "{}",
                c.label
            );
        }
    }
    assert!(
        s.cells.iter().any(|c| c.eta.is_some()),
        "the sample has a cell with an ETA"
    );
    let planned_met = s
        .cells
        .iter()
        .filter(|c| c.planned)
        .all(|c| c.status == assess::Status::Met);
    assert_eq!(s.ready_to_close, planned_met);
    assert!(
        s.cells.iter().any(|c| !c.planned),
        "the sample has unplanned cells"
    );
    // Worst first: planned cells by status, at risk before open before met.
    let statuses: Vec<_> = s
        .cells
        .iter()
        .filter(|c| c.planned)
        .map(|c| c.status)
        .collect();
    assert!(statuses.windows(2).all(|w| w[0] <= w[1]), "{statuses:?}");
}

#[test]
fn csv_output_never_carries_a_formula() {
    let out = closeout()
        .current_dir(root())
        .args([
            "status",
            "sample-data/lakeside-residents/study.toml",
            "--format",
            "csv",
            "--as-of",
            AS_OF,
        ])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let mut reader = csv::Reader::from_reader(out.as_slice());
    let mut saw_neutralised = false;
    for record in reader.records() {
        for field in record.unwrap().iter() {
            assert!(
                !field.starts_with(['=', '+', '-', '@', '\t', '\r']),
                "formula-like field {field:?}"
            );
            saw_neutralised |= field.starts_with("'=");
        }
    }
    assert!(
        saw_neutralised,
        "the sample's '=1+1' cell should appear neutralised"
    );
    assert_eq!(report::neutralise("@SUM(A1)"), "'@SUM(A1)");
    assert_eq!(report::neutralise("north"), "north");
}

#[test]
fn exit_code_says_whether_collection_can_close() {
    // The sample still has an open cell.
    closeout()
        .current_dir(root())
        .args([
            "status",
            "sample-data/lakeside-residents/study.toml",
            "--exit-code",
            "--as-of",
            AS_OF,
        ])
        .assert()
        .code(1);
    // The same data with a target every cell meets.
    let dir = tempfile::tempdir().unwrap();
    let text = std::fs::read_to_string(root().join("sample-data/lakeside-residents/study.toml"))
        .unwrap()
        .replace("margin = 0.10", "margin = 0.45")
        .replace("minimum = 120", "minimum = 1")
        .replace("minimum = 150", "minimum = 1")
        .replace("minimum = 80", "minimum = 1")
        .replace(
            "file = \"responses.csv\"",
            &format!(
                "file = {:?}",
                root().join("sample-data/lakeside-residents/responses.csv")
            ),
        );
    std::fs::write(dir.path().join("study.toml"), text).unwrap();
    closeout()
        .args(["status"])
        .arg(dir.path().join("study.toml"))
        .args(["--exit-code", "--as-of", AS_OF])
        .assert()
        .code(0);
}

#[test]
fn errors_name_the_place_and_exit_2() {
    let dir = tempfile::tempdir().unwrap();
    let study = dir.path().join("study.toml");
    let text =
        std::fs::read_to_string(root().join("sample-data/lakeside-residents/study.toml")).unwrap();
    // The responses file is missing.
    std::fs::write(&study, &text).unwrap();
    let out = closeout()
        .arg("status")
        .arg(&study)
        .assert()
        .code(2)
        .get_output()
        .stderr
        .clone();
    let err = String::from_utf8(out).unwrap();
    assert!(
        err.contains("responses.csv") && err.contains("cannot open"),
        "{err}"
    );
    // A column the study names is not in the header.
    std::fs::write(
        dir.path().join("responses.csv"),
        "respondent_id,submitted_at,distrikt,age_band,weight,q_satisfaction,q_recommend\n",
    )
    .unwrap();
    let out = closeout()
        .arg("status")
        .arg(&study)
        .assert()
        .code(2)
        .get_output()
        .stderr
        .clone();
    let err = String::from_utf8(out).unwrap();
    assert!(
        err.contains("'district'") && err.contains("did you mean 'distrikt'"),
        "{err}"
    );
    // The study file itself is missing.
    closeout()
        .arg("status")
        .arg(dir.path().join("nope.toml"))
        .assert()
        .code(2);
}
