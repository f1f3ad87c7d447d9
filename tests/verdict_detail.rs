//! The verdict alone (`assess::Detail::Verdict`, what the dashboard, the text of
//! `status --follow` and the demo compute at every look) is the full assessment with
//! every method but the deciding one left out of `bounds`, and `assess::every_method`
//! gives back exactly the rows left out, cell by cell. Checked on prefixes of the
//! invented lakeside sample (weights, populations, minimums, unplanned cells), with
//! and without its weight column, under every deciding method.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::PathBuf;

use closeout::assess::{self, Detail, Snapshot};
use closeout::bounds::Method;
use closeout::study::Study;
use closeout::tally::{self, Tally};
use proptest::prelude::*;

fn sample_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample-data/lakeside-residents")
}

/// The sample study, with its weight column or without it.
fn study(weighted: bool) -> Study {
    let path = sample_dir().join("study.toml");
    let text = std::fs::read_to_string(&path).unwrap();
    let text = if weighted {
        text
    } else {
        text.replace("weight = \"weight\"\n", "")
    };
    Study::parse(&text, &path).unwrap()
}

/// The first `rows` responses of the sample, tallied.
fn tally_of(study: &Study, rows: usize) -> Tally {
    let text = std::fs::read_to_string(sample_dir().join("responses.csv")).unwrap();
    let prefix: String = text.split_inclusive('\n').take(rows + 1).collect();
    let (_, t) = tally::tally_csv(
        |h| study.layout(h),
        prefix.as_bytes(),
        study.source.delimiter,
    )
    .unwrap();
    t
}

/// The snapshot with only the deciding method's row kept in each `bounds`.
fn deciding_rows_only(mut s: Snapshot) -> Snapshot {
    let decide_by = s.decide_by;
    for cell in &mut s.cells {
        for m in &mut cell.measures {
            m.bounds.retain(|b| b.method == decide_by);
        }
    }
    s
}

fn check(weighted: bool, rows: usize, method: usize) {
    let study = study(weighted);
    let tally = tally_of(&study, rows);
    let decide_by = Method::ALL[method];
    let as_of = "2026-05-15T18:00:00Z".parse().unwrap();
    let full = assess::assess_by(&study, &tally, as_of, decide_by);
    let verdict = assess::assess_with(&study, &tally, as_of, decide_by, Detail::Verdict);
    assert_eq!(verdict, deciding_rows_only(full.clone()));
    for cell in &full.cells {
        let rows = assess::every_method(&study, &tally, &verdict, &cell.label);
        let expected: Vec<_> = cell.measures.iter().map(|m| m.bounds.clone()).collect();
        assert_eq!(rows, expected, "{}", cell.label);
    }
    assert!(assess::every_method(&study, &tally, &verdict, "no such cell").is_empty());
}

#[test]
fn the_whole_sample_under_its_own_method() {
    check(
        true,
        900,
        Method::ALL
            .iter()
            .position(|&m| m == Method::Wilson)
            .unwrap(),
    );
    check(false, 900, 0);
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, rng_seed: proptest::test_runner::RngSeed::Fixed(11), ..ProptestConfig::default() })]

    #[test]
    fn the_verdict_alone_is_the_full_assessment_less_the_other_methods(
        weighted in any::<bool>(),
        rows in 0usize..=900,
        method in 0..Method::ALL.len(),
    ) {
        check(weighted, rows, method);
    }
}
