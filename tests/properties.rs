//! Invariants of the margin engine that hold for every input: no NaN, no panic, ends
//! inside [0, 1], the mirror symmetry lower(S, n) = 1 − upper(n − S, n), the
//! always-true bounds with a population, and a zero margin once the whole population
//! has answered.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use closeout::bounds::{self, Level, Method, Query};
use proptest::prelude::*;

fn level(delta: f64) -> Level {
    Level::from_delta(delta).expect("valid delta")
}

/// n from three ranges so that small, medium and very large counts all occur.
fn counts() -> impl Strategy<Value = (u64, u64)> {
    prop_oneof![
        (1u64..=300).prop_flat_map(|n| (0..=n, Just(n))),
        (301u64..=20_000).prop_flat_map(|n| (0..=n, Just(n))),
        (1_000_000u64..=10_000_000)
            .prop_flat_map(|n| (prop_oneof![0..=5u64, (n - 5)..=n, 0..=n], Just(n))),
    ]
}

fn deltas() -> impl Strategy<Value = f64> {
    prop_oneof![
        Just(0.05),
        Just(0.1),
        Just(0.01),
        Just(1e-6),
        Just(1e-12),
        1e-12f64..0.5
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 192, rng_seed: proptest::test_runner::RngSeed::Fixed(20261201), ..ProptestConfig::default() })]

    #[test]
    fn every_interval_is_finite_ordered_and_in_the_unit_interval((s, n) in counts(), delta in deltas()) {
        let q = Query::new(s, n, level(delta)).expect("valid query");
        for row in bounds::intervals(&q) {
            let Ok(i) = row else { continue };
            prop_assert!(i.lower.is_finite() && i.upper.is_finite() && i.margin.is_finite(), "{i:?}");
            prop_assert!(0.0 <= i.lower && i.lower <= i.upper && i.upper <= 1.0, "{i:?}");
            let p = s as f64 / n as f64;
            prop_assert!(i.lower <= p + 1e-12 && p <= i.upper + 1e-12, "estimate outside: {i:?} p={p}");
            prop_assert!(i.margin >= 0.0 && i.margin <= 1.0);
        }
    }

    #[test]
    fn mirror_symmetry_holds_for_every_method((s, n) in counts(), delta in deltas()) {
        let a = bounds::intervals(&Query::new(s, n, level(delta)).expect("valid"));
        let b = bounds::intervals(&Query::new(n - s, n, level(delta)).expect("valid"));
        for (x, y) in a.iter().zip(&b) {
            match (x, y) {
                (Ok(x), Ok(y)) => {
                    prop_assert!((x.lower - (1.0 - y.upper)).abs() < 1e-12, "{x:?} vs {y:?}");
                    prop_assert!((x.upper - (1.0 - y.lower)).abs() < 1e-12, "{x:?} vs {y:?}");
                    prop_assert!((x.margin - y.margin).abs() < 1e-12, "{x:?} vs {y:?}");
                }
                (Err(_), Err(_)) => {}
                _ => prop_assert!(false, "one side unavailable: {x:?} {y:?}"),
            }
        }
    }

    #[test]
    fn finite_population_intervals_respect_the_always_true_bounds(
        (s, n) in (1u64..=400).prop_flat_map(|n| (0..=n, Just(n))),
        extra in prop_oneof![Just(0u64), 1u64..5, 5u64..5000, 100_000u64..2_000_000],
        delta in deltas(),
    ) {
        let total = n + extra;
        let q = Query::new(s, n, level(delta)).expect("valid").with_population(total).expect("valid");
        let (floor, ceiling) = (s as f64 / total as f64, 1.0 - (n - s) as f64 / total as f64);
        for row in bounds::intervals(&q) {
            let Ok(i) = row else { continue };
            prop_assert!(i.lower >= floor - 1e-15 && i.upper <= ceiling + 1e-15, "{i:?} floor={floor} ceiling={ceiling}");
            prop_assert!(i.lower <= i.upper);
            if extra == 0 {
                prop_assert!(i.margin <= 1e-15, "whole population answered, margin {}: {i:?}", i.margin);
            }
        }
    }
}

#[test]
fn methods_without_a_finite_population_form_say_so() {
    let q = Query::new(40, 100, level(0.05))
        .expect("valid")
        .with_population(500)
        .expect("valid");
    for method in [Method::Bernstein, Method::Binomial] {
        let err = bounds::interval(method, &q).expect_err("no finite-population form");
        assert!(err.reason.contains("finite-population"), "{err}");
    }
}

/// The size search needs the widest margin over every outcome. Check its search
/// against the exhaustive maximum, for every method, at several levels and sizes.
#[test]
fn the_widest_outcome_search_matches_an_exhaustive_scan() {
    let sizes: Vec<u64> = (1..=60)
        .chain([120, 401, 402, 650, 999, 1500, 2400])
        .collect();
    for delta in [0.05, 0.01, 1e-6] {
        for &n in &sizes {
            for method in Method::ALL {
                let l = level(delta);
                let Ok(found) = bounds::widest_margin(method, n, l, None) else {
                    continue;
                };
                let mut exhaustive: f64 = 0.0;
                for s in 0..=n {
                    let q = Query::new(s, n, l).expect("valid");
                    if let Ok(i) = bounds::interval(method, &q) {
                        exhaustive = exhaustive.max(i.margin);
                    }
                }
                assert!(
                    found >= exhaustive - 1e-15,
                    "{method} n={n} δ={delta}: search {found} < exhaustive {exhaustive}"
                );
            }
        }
    }
}

#[test]
fn no_response_yet_gives_no_interval() {
    let q = Query::new(0, 0, level(0.05)).expect("valid");
    assert!(bounds::intervals(&q).iter().all(|r| r.is_err()));
}

#[test]
fn bad_queries_are_refused_with_a_clear_message() {
    let e = Query::new(5, 4, level(0.05)).expect_err("S > n");
    assert!(
        e.to_string().contains("'5'") && e.to_string().contains("'4'"),
        "{e}"
    );
    let e = Query::new(5, 10, level(0.05))
        .expect("valid")
        .with_population(9)
        .expect_err("N < n");
    assert!(e.to_string().contains("population '9'"), "{e}");
    assert!(Level::from_confidence(1.0).is_err() && Level::from_confidence(0.0).is_err());
    assert!(Level::from_confidence(f64::NAN).is_err());
}

#[test]
fn confidence_is_held_as_its_decimal_complement() {
    // 1 − 0.95 in binary floating point is 0.050000000000000044; the level keeps 0.05.
    assert_eq!(Level::from_confidence(0.95).expect("valid").delta(), 0.05);
    assert_eq!(Level::from_confidence(0.999).expect("valid").delta(), 0.001);
    assert_eq!(Level::from_confidence(0.9).expect("valid").delta(), 0.1);
}

#[test]
fn splitting_delta_over_cells() {
    let l = level(0.05);
    assert!((l.split(10, bounds::Split::Bonferroni).delta() - 0.005).abs() < 1e-18);
    // Šidák: 1 − 0.95^(1/10) = 0.005116196891… (closed form, evaluated by hand with
    // the identity −expm1(ln(0.95)/10)); it is always a little above Bonferroni.
    let sidak = l.split(10, bounds::Split::Sidak).delta();
    assert!((sidak - (1.0 - 0.95f64.powf(0.1))).abs() < 1e-15);
    assert!(sidak > 0.005);
}
