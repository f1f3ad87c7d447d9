//! Published worked examples and facts of the trade, each with its source.

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use closeout::bounds::{self, Level, Method, Query, SizeQuery};

fn conf(c: f64) -> Level {
    Level::from_confidence(c).unwrap()
}

fn ends(method: Method, s: u64, n: u64) -> (f64, f64) {
    let i = bounds::interval(method, &Query::new(s, n, conf(0.95)).unwrap()).unwrap();
    (i.lower, i.upper)
}

fn size(method: Method, margin: f64, population: Option<u64>) -> u64 {
    let mut sq = SizeQuery::new(margin, conf(0.95)).unwrap();
    if let Some(total) = population {
        sq = sq.with_population(total).unwrap();
    }
    bounds::required_size(method, &sq).unwrap().n
}

/// Newcombe (1998), "Two-sided confidence intervals for the single proportion:
/// comparison of seven methods", Statistics in Medicine 17:857–872, Table I: 95 %
/// intervals for 81/263, 15/148, 0/20 and 1/29 by the simple asymptotic (Wald, with
/// its negative end truncated at 0), Wilson score and Clopper–Pearson methods, to four
/// decimals. Values from memory of the published table; the same cases are also
/// checked to 1e-9 against statsmodels in `reference.rs`.
#[test]
fn newcombe_1998_table() {
    type Row = (u64, u64, [(f64, f64); 3]);
    let table: [Row; 4] = [
        (
            81,
            263,
            [(0.2522, 0.3638), (0.2553, 0.3662), (0.2527, 0.3676)],
        ),
        (
            15,
            148,
            [(0.0527, 0.1500), (0.0624, 0.1605), (0.0578, 0.1617)],
        ),
        (
            0,
            20,
            [(0.0000, 0.0000), (0.0000, 0.1611), (0.0000, 0.1684)],
        ),
        (
            1,
            29,
            [(0.0000, 0.1009), (0.0061, 0.1718), (0.0009, 0.1776)],
        ),
    ];
    for (s, n, rows) in table {
        for (method, (lo, hi)) in [Method::Wald, Method::Wilson, Method::ClopperPearson]
            .into_iter()
            .zip(rows)
        {
            let (l, u) = ends(method, s, n);
            assert!(
                (l - lo).abs() <= 5e-5 && (u - hi).abs() <= 5e-5,
                "{method} {s}/{n}: ({l:.4}, {u:.4}) vs ({lo}, {hi})"
            );
        }
    }
}

/// The rule of three (Hanley & Lippman-Hand 1983, JAMA 249:1743–1745): with no events
/// in n trials the one-sided 95 % upper bound is about 3/n. The two-sided 90 %
/// Clopper–Pearson upper end is exactly that one-sided bound, 1 − 0.05^(1/n), and
/// n times it tends to −ln 0.05 = 2.9957.
#[test]
fn rule_of_three() {
    for n in [100u64, 1000, 100_000] {
        let i = bounds::interval(
            Method::ClopperPearson,
            &Query::new(0, n, conf(0.90)).unwrap(),
        )
        .unwrap();
        let scaled = i.upper * n as f64;
        assert!((scaled - 3.0).abs() < 0.05, "n={n}: n·upper = {scaled}");
        assert!(
            scaled < -(0.05f64.ln()) + 1e-9,
            "n·upper must stay below −ln 0.05: {scaled}"
        );
    }
}

/// Cochran's n₀ = z²pq/ε² at p = ½ (Cochran, Sampling Techniques, 3rd ed. 1977, §4.4),
/// rounded up: 385 for ±5 % and 1068 for ±3 % at 95 % (the often-quoted 384 and 1,067
/// are rounded to nearest). Common practice.
#[test]
fn cochran_sizes() {
    assert_eq!(size(Method::Wald, 0.05, None), 385);
    assert_eq!(size(Method::Wald, 0.03, None), 1068);
}

/// Krejcie & Morgan (1970), "Determining sample size for research activities",
/// Educational and Psychological Measurement 30:607–610, Table 1 (±5 %, 95 %, p = ½,
/// with the finite population correction; the table rounds to nearest): N = 100 → 80,
/// N = 1000 → 278, N = 10000 → 370. Values from memory of the published table.
#[test]
fn krejcie_morgan_table() {
    assert_eq!(size(Method::Wald, 0.05, Some(100)), 80);
    assert_eq!(size(Method::Wald, 0.05, Some(1000)), 278);
    assert_eq!(size(Method::Wald, 0.05, Some(10_000)), 370);
}

/// Closed forms at ±3 %, 95 %: Chebyshev n ≥ 1/(4ε²δ) = 5555.6 → 5556; Hoeffding
/// n ≥ ln(2/δ)/(2ε²) = 2049.4 → 2050 (Hoeffding 1963, Theorem 2).
#[test]
fn closed_form_sizes() {
    assert_eq!(size(Method::Chebyshev, 0.03, None), 5556);
    assert_eq!(size(Method::Hoeffding, 0.03, None), 2050);
    assert_eq!(size(Method::Chebyshev, 0.01, None), 50_000);
    assert_eq!(size(Method::Hoeffding, 0.01, None), 18_445);
}

/// Hoeffding's margin for n = 1000 at 95 %: √(ln 40 / 2000) = 0.042946940834673… and
/// Chebyshev's 1/(2√50) = 0.0707106781186547…, evaluated by hand from the closed forms.
#[test]
fn closed_form_margins() {
    let q = Query::new(500, 1000, conf(0.95)).unwrap();
    let h = bounds::interval(Method::Hoeffding, &q).unwrap();
    assert!((h.margin - (40f64.ln() / 2000.0).sqrt()).abs() < 1e-15);
    let c = bounds::interval(Method::Chebyshev, &q).unwrap();
    assert!((c.margin - 1.0 / (2.0 * 50f64.sqrt())).abs() < 1e-15);
}
