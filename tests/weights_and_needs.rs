//! Weights (Kish's effective sample size) and "how many more responses".

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use closeout::bounds::{self, Guarantee, Level, Method, Query, SizeQuery, WeightSums};

fn conf() -> Level {
    Level::from_confidence(0.95).unwrap()
}

fn sums(weights: &[f64], yes: &[bool]) -> WeightSums {
    let mut w = WeightSums::default();
    for (&x, &y) in weights.iter().zip(yes) {
        w.sum_w += x;
        w.sum_w2 += x * x;
        if y {
            w.sum_wy += x;
        }
    }
    w
}

/// Kish (1965), Survey Sampling, §11.7: n_eff = (Σw)²/Σw². For weights 1, 1, 2, 2 that
/// is 36/10 = 3.6 (fact of the trade, evaluated by hand).
#[test]
fn kish_effective_sample_size() {
    let w = sums(&[1.0, 1.0, 2.0, 2.0], &[true, false, true, false]);
    assert!((w.effective_n() - 3.6).abs() < 1e-15);
    assert!((w.estimate() - 0.5).abs() < 1e-15);
}

/// Equal weights change nothing but the labels: the same interval, with the guarantee
/// kept by Chebyshev and Hoeffding (rigorous for fixed design weights) and marked
/// approximate elsewhere.
#[test]
fn equal_weights_give_the_unweighted_interval() {
    let yes: Vec<bool> = (0..200).map(|i| i % 5 < 2).collect();
    let w = sums(&vec![3.0; 200], &yes);
    let plain = Query::new(80, 200, conf())
        .unwrap()
        .with_tune_for(200)
        .unwrap();
    let weighted = plain.with_weights(w).unwrap();
    for method in Method::ALL {
        let a = bounds::interval(method, &plain);
        let b = bounds::interval(method, &weighted);
        match (a, b) {
            (Ok(a), Ok(b)) => {
                assert!(
                    (a.lower - b.lower).abs() < 1e-9 && (a.upper - b.upper).abs() < 1e-9,
                    "{method}: {a:?} {b:?}"
                );
                let expected = if method.rigorous_with_weights() {
                    method.guarantee()
                } else {
                    Guarantee::Approximate
                };
                assert_eq!(b.guarantee, expected, "{method}");
                assert!(b.note.is_some());
            }
            (Ok(_), Err(u)) => assert_eq!(method, Method::ClopperPearson, "{u}"),
            (a, b) => panic!("{method}: {a:?} {b:?}"),
        }
    }
}

/// Unequal weights shrink n to n_eff and so widen the interval: Hoeffding at n_eff.
#[test]
fn unequal_weights_widen_by_the_design_effect() {
    let weights: Vec<f64> = (0..400)
        .map(|i| if i % 2 == 0 { 1.0 } else { 3.0 })
        .collect();
    let yes: Vec<bool> = (0..400).map(|i| i % 3 == 0).collect();
    let w = sums(&weights, &yes);
    let q = Query::new(0, 400, conf()).unwrap().with_weights(w).unwrap();
    let h = bounds::interval(Method::Hoeffding, &q).unwrap();
    // Σw = 800, Σw² = 2000, n_eff = 320.
    assert!((h.margin - (40f64.ln() / 640.0).sqrt()).abs() < 1e-15);
}

/// "How many more" at the current proportion equals the planning size for that
/// proportion less the responses in hand (Wald at p̂ = ½, ±5 %, 95 %: 385 − 100).
#[test]
fn more_needed_at_the_current_proportion() {
    let q = Query::new(50, 100, conf()).unwrap();
    assert_eq!(
        bounds::more_needed(Method::Wald, &q, 0.05).unwrap(),
        Some(285)
    );
    let q = Query::new(200, 400, conf()).unwrap();
    assert_eq!(
        bounds::more_needed(Method::Wald, &q, 0.05).unwrap(),
        Some(0)
    );
    for method in [
        Method::Wilson,
        Method::ClopperPearson,
        Method::Hoeffding,
        Method::Chernoff,
    ] {
        let q = Query::new(30, 100, conf()).unwrap();
        let more = bounds::more_needed(method, &q, 0.04).unwrap().unwrap();
        let n = 100 + more;
        // The search holds p̂ = 0.3 exactly; whole counts round it, so compare with the
        // first n whose rounded count meets the target, found by scanning.
        let at = |n: u64| {
            let s = (0.3 * n as f64).round() as u64;
            bounds::interval(method, &Query::new(s, n, conf()).unwrap())
                .unwrap()
                .margin
        };
        let scanned = (100u64..).find(|&n| at(n) <= 0.04).unwrap();
        assert!(
            scanned.abs_diff(n) <= 2,
            "{method}: search {n}, scan {scanned}"
        );
        let sq = SizeQuery::new(0.04, conf())
            .unwrap()
            .with_expect(0.3)
            .unwrap();
        let planned = bounds::required_size(method, &sq).unwrap().n;
        assert!(
            planned.abs_diff(n) <= 2,
            "{method}: planned {planned}, needed {n}"
        );
    }
}

/// With a population the need never exceeds the units not yet sampled.
#[test]
fn more_needed_is_capped_by_the_population() {
    let q = Query::new(10, 20, conf())
        .unwrap()
        .with_population(60)
        .unwrap();
    let more = bounds::more_needed(Method::Wald, &q, 0.01)
        .unwrap()
        .unwrap();
    assert!(more <= 40, "{more}");
    // At n = N the margin is 0, so the whole population always meets any target.
    let hyper = bounds::more_needed(Method::ClopperPearson, &q, 0.001).unwrap();
    assert_eq!(hyper, Some(40));
}

/// The dashboard's projected margin curve and "how many more" tell one story: at the
/// responses held now the projection is the margin itself, and it first reaches the
/// target after exactly the number of responses `more_needed` says (for methods whose
/// margin shrinks steadily with n at a fixed proportion). Whole-count proportions, so
/// that holding the proportion keeps the counts exact.
#[test]
fn the_projected_margin_meets_the_target_where_more_needed_says() {
    for (s, n) in [(30, 100), (9, 60), (150, 300), (1, 40)] {
        for method in [Method::Wald, Method::Hoeffding, Method::Chebyshev] {
            let q = Query::new(s, n, conf()).unwrap().with_tune_for(n).unwrap();
            let now = bounds::projected_margin(method, &q, n).unwrap().unwrap();
            let margin = bounds::interval(method, &q).unwrap().margin;
            assert!(
                (now - margin).abs() < 1e-12,
                "{method} {s}/{n}: {now} vs {margin}"
            );
            let target = 0.05;
            let more = bounds::more_needed(method, &q, target).unwrap().unwrap();
            let at = |k: u64| {
                bounds::projected_margin(method, &q, n + k)
                    .unwrap()
                    .unwrap()
            };
            assert!(at(more) <= target * (1.0 + 1e-12), "{method} {s}/{n}");
            if more > 0 {
                assert!(at(more - 1) > target, "{method} {s}/{n}: {more}");
            }
        }
    }
    // Before any response there is no proportion to hold.
    let empty = Query::new(0, 0, conf()).unwrap();
    assert!(bounds::projected_margin(Method::Wald, &empty, 10).is_none());
}
