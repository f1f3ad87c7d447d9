//! The tool never panics on input: random bytes as the responses file (after a valid
//! header, and with no valid header at all) go through the whole status path — read,
//! tally, assess, every output format.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::path::PathBuf;

use closeout::study::Study;
use closeout::{assess, report, tally};
use proptest::prelude::*;

fn sample_study() -> &'static Study {
    static STUDY: std::sync::OnceLock<Study> = std::sync::OnceLock::new();
    STUDY.get_or_init(|| {
        Study::load(
            &PathBuf::from(env!("CARGO_MANIFEST_DIR"))
                .join("sample-data/lakeside-residents/study.toml"),
        )
        .unwrap()
    })
}

const HEADER: &str = "respondent_id,submitted_at,district,age_band,weight,q_satisfaction,q_recommend,interviewer_note\n";

/// Bytes biased toward what breaks CSV readers: quotes, delimiters, line ends, NUL,
/// escape sequences, invalid UTF-8, and pieces of valid values.
fn nasty_bytes() -> impl Strategy<Value = Vec<u8>> {
    let piece = prop_oneof![
        Just(b",".to_vec()),
        Just(b"\"".to_vec()),
        Just(b"\n".to_vec()),
        Just(b"\r\n".to_vec()),
        Just(vec![0u8]),
        Just(b"\x1b[31m".to_vec()),
        Just(vec![0xff, 0xfe]),
        Just(b"north".to_vec()),
        Just(b"18-44".to_vec()),
        Just(b"2026-05-12T10:00:00Z".to_vec()),
        Just(b"-1".to_vec()),
        Just(b"1e308".to_vec()),
        Just(b"5".to_vec()),
        Just(b"R00001".to_vec()),
        proptest::collection::vec(any::<u8>(), 0..8),
    ];
    proptest::collection::vec(piece, 0..200).prop_map(|v| v.concat())
}

fn run_all(study: &Study, bytes: &[u8]) {
    if let Ok((_, t)) = tally::tally_csv(|h| study.layout(h), bytes, study.source.delimiter) {
        assert_eq!(t.rows_read, t.rejected + t.duplicates + t.responses());
        let s = assess::assess(study, &t, "2026-05-15T18:00:00Z".parse().unwrap());
        let text = report::status_text(&s);
        assert!(
            !text.contains('\u{1b}'),
            "an escape sequence reached the text output"
        );
        let _ = report::status_json(&s);
        let _ = report::status_csv(&s, &study.cells);
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, rng_seed: proptest::test_runner::RngSeed::Fixed(7), ..ProptestConfig::default() })]

    #[test]
    fn random_records_after_a_valid_header_never_panic(body in nasty_bytes()) {
        let study = sample_study();
        let mut bytes = HEADER.as_bytes().to_vec();
        bytes.extend(body);
        run_all(study, &bytes);
    }

    #[test]
    fn random_bytes_without_a_header_never_panic(bytes in nasty_bytes()) {
        run_all(sample_study(), &bytes);
    }
}
