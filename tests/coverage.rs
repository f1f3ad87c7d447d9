#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]
//! Coverage of the margin engine's intervals: how often each method's interval
//! contains the true proportion p.
//!
//! The coverage of a procedure at p and n is `P_p(p ∈ I(S))` with `S ~ Binomial(n, p)`
//! (the coverage definition, common practice in the trade). Because the interval depends
//! on S only, it is computed once for every S = 0..=n and the coverage is then either
//! summed exactly, `Σ_S P(S) · 1[p ∈ I(S)]`, with a binomial probability computed here
//! independently of the engine (log space, `ln Γ` from statrs), or counted over seeded
//! simulated samples. Intervals are closed: p on an end counts as covered.
//!
//! Monte-Carlo slack, wherever a frequency is compared with a level: 4 standard errors
//! of a frequency over R independent replications, `4 √(c(1 − c)/R)`. A one-sided
//! normal tail beyond 4 standard errors has probability about 3·10⁻⁵, and every seed
//! is fixed, so the outcome is the same on every run.

use closeout::bounds::{Guarantee, Level, Method, Query, interval};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use statrs::function::gamma::ln_gamma;

const P_GRID: [f64; 6] = [0.02, 0.1, 0.3, 0.5, 0.77, 0.95];
const N_GRID: [u64; 4] = [10, 57, 200, 1000];
const DELTAS: [f64; 2] = [0.05, 0.1];

/// Room for rounding in an exact coverage: the binomial probabilities below carry a
/// relative error near 10⁻¹², and sums of up to 1001 of them are compared with 1 − δ.
const ROUNDING: f64 = 1e-9;

/// The methods with a guarantee at a fixed n: `fixed-n` and `worst-case`, and also
/// `anytime`, whose promise at every n at once includes each fixed n.
fn guaranteed_methods() -> Vec<Method> {
    let methods: Vec<Method> = Method::ALL
        .into_iter()
        .filter(|m| m.guarantee() != Guarantee::Approximate)
        .collect();
    // Guard against a method silently leaving the test through a relabelled guarantee.
    for wanted in [
        Method::ClopperPearson,
        Method::Chebyshev,
        Method::Hoeffding,
        Method::Chernoff,
        Method::Bernstein,
        Method::Binomial,
        Method::Anytime,
    ] {
        assert!(
            methods.contains(&wanted),
            "{wanted} is no longer guaranteed"
        );
    }
    methods
}

fn level(delta: f64) -> Level {
    Level::from_delta(delta).expect("valid delta")
}

/// Binomial(n, ·) probabilities from `ln C(n, k) + k ln p + (n − k) ln(1 − p)`, with
/// `ln C(n, k)` from `ln Γ`: an implementation that shares nothing with the engine's.
struct Binomial {
    n: u64,
    ln_choose: Vec<f64>,
}

impl Binomial {
    fn new(n: u64) -> Binomial {
        let top = ln_gamma(n as f64 + 1.0);
        let ln_choose = (0..=n)
            .map(|k| top - ln_gamma(k as f64 + 1.0) - ln_gamma((n - k) as f64 + 1.0))
            .collect();
        Binomial { n, ln_choose }
    }

    /// `P(S = k)` for `0 < p < 1`.
    fn pmf(&self, k: u64, p: f64) -> f64 {
        let (kf, rest) = (k as f64, (self.n - k) as f64);
        (self.ln_choose[k as usize] + kf * p.ln() + rest * (-p).ln_1p()).exp()
    }
}

/// The interval `(lower, upper)` of one method for every S = 0..=n.
fn table(method: Method, n: u64, delta: f64) -> Vec<(f64, f64)> {
    (0..=n)
        .map(|s| {
            let q = Query::new(s, n, level(delta)).expect("valid query");
            let i = interval(method, &q).unwrap_or_else(|e| panic!("S={s} n={n}: {e}"));
            (i.lower, i.upper)
        })
        .collect()
}

fn covers((lower, upper): (f64, f64), p: f64) -> bool {
    lower <= p && p <= upper
}

/// The exact coverage `Σ_S P(S) · 1[p ∈ I(S)]`.
fn exact_coverage(ends: &[(f64, f64)], binomial: &Binomial, p: f64) -> f64 {
    (0..=binomial.n)
        .filter(|&s| covers(ends[s as usize], p))
        .map(|s| binomial.pmf(s, p))
        .sum()
}

/// The test's own binomial probabilities must add up to 1 before anything rests on them.
#[test]
fn the_test_binomial_probabilities_add_up_to_one() {
    for n in N_GRID {
        let b = Binomial::new(n);
        for p in P_GRID {
            let total: f64 = (0..=n).map(|k| b.pmf(k, p)).sum();
            assert!((total - 1.0).abs() < 1e-10, "n={n} p={p}: Σ pmf = {total}");
            let mean: f64 = (0..=n).map(|k| k as f64 * b.pmf(k, p)).sum();
            assert!((mean - n as f64 * p).abs() < 1e-8 * n as f64, "n={n} p={p}");
        }
    }
}

/// Every method with a guarantee at a fixed n (clopper-pearson, chernoff, bernstein:
/// `fixed-n`; chebyshev, hoeffding, binomial: `worst-case`; and anytime, which promises
/// more) covers the true p with probability at least 1 − δ, computed exactly (no
/// Monte-Carlo error) on a grid of p and n at δ = 0.05 and 0.1. This is the coverage
/// definition, common practice in the trade, applied to the promise each method makes.
#[test]
fn guaranteed_methods_cover_at_least_the_level_on_the_grid() {
    let mut failures = Vec::new();
    for &delta in &DELTAS {
        for &n in &N_GRID {
            let binomial = Binomial::new(n);
            for method in guaranteed_methods() {
                let ends = table(method, n, delta);
                for &p in &P_GRID {
                    let c = exact_coverage(&ends, &binomial, p);
                    if c < 1.0 - delta - ROUNDING {
                        failures.push(format!("{method} δ={delta} n={n} p={p}: coverage {c}"));
                    }
                }
            }
        }
    }
    assert!(failures.is_empty(), "below 1 − δ:\n{}", failures.join("\n"));
}

/// The smallest coverage over every p in (0, 1), found exactly.
///
/// As p moves, the set of S whose interval contains p changes only where p crosses an
/// end of some interval. Between those points the set is fixed and, when both ends
/// rise with S (checked), it is a run `a ≤ S ≤ b`, whose probability
/// `P_p(a ≤ S ≤ b)` has derivative `n (P_{n−1}(a − 1) − P_{n−1}(b))` in p, which changes
/// sign once, from + to −: it is least at an end of the piece. Leaving an interval
/// through its upper end, or just before entering one through its lower end, gives the
/// lower value, so the infimum is the least coverage at `upper(S) + η` and
/// `lower(S) − η` over every S, and near 0 and 1. η = 10⁻¹² moves the smooth part by
/// at most `n · η` (well inside [`ROUNDING`]) and lies far above the rounding of the
/// ends themselves. Returns the coverage and the p where it occurs.
fn least_coverage(ends: &[(f64, f64)], binomial: &Binomial) -> (f64, f64) {
    for pair in ends.windows(2) {
        assert!(
            pair[0].0 <= pair[1].0 && pair[0].1 <= pair[1].1,
            "ends do not rise with S ({pair:?}): the argument above does not apply"
        );
    }
    const ETA: f64 = 1e-12;
    let mut points = vec![1e-9, 1.0 - 1e-9];
    for &(lower, upper) in ends {
        points.push(upper + ETA);
        points.push(lower - ETA);
    }
    points
        .into_iter()
        .filter(|&p| p > 0.0 && p < 1.0)
        .map(|p| (exact_coverage(ends, binomial, p), p))
        .fold(
            (f64::INFINITY, f64::NAN),
            |a, b| if b.0 < a.0 { b } else { a },
        )
}

/// The same promise checked at every p at once, not just on a grid: the least
/// coverage over all p in (0, 1), found exactly at the points where the coverage
/// jumps (see [`least_coverage`]), is at least 1 − δ for every guaranteed method,
/// including very small n, where discreteness makes coverage most uneven.
#[test]
fn guaranteed_methods_cover_at_least_the_level_at_every_p() {
    let mut failures = Vec::new();
    for &delta in &DELTAS {
        for n in [1, 2, 3, 5, 10, 23, 57, 200, 1000] {
            let binomial = Binomial::new(n);
            for method in guaranteed_methods() {
                if method == Method::Bernstein && n < 2 {
                    continue; // it needs two responses and says so
                }
                let (c, p) = least_coverage(&table(method, n, delta), &binomial);
                if c < 1.0 - delta - ROUNDING {
                    failures.push(format!("{method} δ={delta} n={n}: coverage {c} at p={p}"));
                }
            }
        }
    }
    assert!(failures.is_empty(), "below 1 − δ:\n{}", failures.join("\n"));
}

/// The binomial margin claims to be the smallest margin of the form p̂ ± ε(n) that
/// holds for every p. So a margin shaved by 0.1 % must fail somewhere: its least
/// coverage over p (exact, as above) falls below 1 − δ. Without this, a method that
/// returned a wider, safe margin (Hoeffding's, say) would pass every coverage test.
#[test]
fn the_binomial_margin_cannot_be_shaved() {
    let mut failures = Vec::new();
    for &delta in &DELTAS {
        for n in [10, 57, 200, 1000] {
            let binomial = Binomial::new(n);
            let q = Query::new(n / 2, n, level(delta)).expect("valid query");
            let eps = interval(Method::Binomial, &q).expect("available").margin;
            let (c, _) = least_coverage(&table(Method::Binomial, n, delta), &binomial);
            assert!(c >= 1.0 - delta - ROUNDING, "n={n} δ={delta}: {c}");
            let shaved = eps * (1.0 - 1e-3);
            let ends: Vec<(f64, f64)> = (0..=n)
                .map(|s| {
                    let p_hat = s as f64 / n as f64;
                    ((p_hat - shaved).max(0.0), (p_hat + shaved).min(1.0))
                })
                .collect();
            let (c, p) = least_coverage(&ends, &binomial);
            if c >= 1.0 - delta - ROUNDING {
                failures.push(format!(
                    "n={n} δ={delta}: ε={eps} shaved to {shaved} still covers {c} (least at p={p})"
                ));
            }
        }
    }
    assert!(
        failures.is_empty(),
        "the binomial margin is not the smallest:\n{}",
        failures.join("\n")
    );
}

/// S ~ Binomial(n, p) as a sum of n Bernoulli(p) draws.
fn draw_binomial(rng: &mut ChaCha8Rng, n: u64, p: f64) -> u64 {
    (0..n).map(|_| u64::from(rng.random_bool(p))).sum()
}

/// A one-sided tail probability of about 4 standard errors of a normal, 3·10⁻⁵.
const TAIL: f64 = 3e-5;

/// Whether `misses` in `r` replications is plausible for a miss probability `m`:
/// neither `P(M ≥ misses)` nor `P(M ≤ misses)` is below [`TAIL`], `M ~ Binomial(r, m)`.
fn plausible_misses(misses: u64, r: u64, m: f64) -> bool {
    if m <= 0.0 {
        return misses == 0;
    }
    let b = Binomial::new(r);
    let at_least: f64 = (misses..=r).map(|k| b.pmf(k, m)).sum();
    let at_most: f64 = (0..=misses).map(|k| b.pmf(k, m)).sum();
    at_least >= TAIL && at_most >= TAIL
}

/// A second, independent check by simulation (seeded): over R = 4000 samples per
/// (p, n) at δ = 0.05, the observed coverage of every guaranteed method is at least
/// 1 − δ minus 4 standard errors `√(δ(1 − δ)/R)`, and it agrees with the exact
/// coverage c, which checks the exact sums: the number of misses is not in either
/// tail of Binomial(R, 1 − c) beyond [`TAIL`]. (The exact tail, not 4 standard errors,
/// because c is often within 10⁻⁵ of 1, where the normal approximation fails.)
#[test]
fn simulated_coverage_agrees_with_the_exact_coverage() {
    const R: u64 = 4000;
    let delta = 0.05;
    let floor = 1.0 - delta - 4.0 * (delta * (1.0 - delta) / R as f64).sqrt();
    let methods = guaranteed_methods();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    let mut failures = Vec::new();
    for &n in &N_GRID {
        let binomial = Binomial::new(n);
        let tables: Vec<Vec<(f64, f64)>> = methods.iter().map(|&m| table(m, n, delta)).collect();
        for &p in &P_GRID {
            let mut hits = vec![0u64; methods.len()];
            for _ in 0..R {
                let s = draw_binomial(&mut rng, n, p) as usize;
                for (hit, ends) in hits.iter_mut().zip(&tables) {
                    *hit += u64::from(covers(ends[s], p));
                }
            }
            for ((&method, ends), &hit) in methods.iter().zip(&tables).zip(&hits) {
                let observed = hit as f64 / R as f64;
                let exact = exact_coverage(ends, &binomial, p);
                let misses = R - hit;
                if observed < floor || !plausible_misses(misses, R, 1.0 - exact) {
                    failures.push(format!(
                        "{method} n={n} p={p}: simulated {observed}, exact {exact}, floor {floor}"
                    ));
                }
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// `wald` is marked approximate because its coverage can fall well below 1 − δ. At
/// p = 0.02, n = 57, δ = 0.05 the most likely outcome is S = 0 (probability
/// 0.98⁵⁷ ≈ 0.316), where Wald's interval is the single point 0 and misses p; the exact
/// coverage is far below 0.95. The same computation finds the shortfall on the grid
/// and none for the guaranteed methods above, so the check can tell them apart.
#[test]
fn wald_falls_below_the_level_and_is_marked_approximate() {
    assert_eq!(Method::Wald.guarantee(), Guarantee::Approximate);
    let delta = 0.05;
    let (n, p) = (57, 0.02);
    let ends = table(Method::Wald, n, delta);
    assert_eq!(ends[0], (0.0, 0.0), "Wald at S = 0 is the point 0");
    let c = exact_coverage(&ends, &Binomial::new(n), p);
    let miss_at_zero = 0.98f64.powi(57);
    assert!(
        c <= 1.0 - miss_at_zero + ROUNDING,
        "coverage {c} counts S = 0"
    );
    assert!(
        c < 1.0 - delta - 0.1,
        "Wald at p={p} n={n}: coverage {c}, expected a real shortfall below 0.95"
    );
    // Across the grid Wald falls short in more places than this one.
    let mut short = 0;
    for &n in &N_GRID {
        let binomial = Binomial::new(n);
        let ends = table(Method::Wald, n, delta);
        short += P_GRID
            .iter()
            .filter(|&&p| exact_coverage(&ends, &binomial, p) < 1.0 - delta - ROUNDING)
            .count();
    }
    assert!(short >= 2, "Wald short at only {short} grid points");
}

/// Monitor R seeded sequences of Bernoulli(p) responses, checking after every response
/// n = 1..=N_MAX whether `method`'s interval excludes p. Returns the fraction of
/// sequences that ever exclude it. Each (S, n) is computed once and remembered, since
/// many sequences pass through the same counts.
fn ever_excluded(
    method: Method,
    p: f64,
    delta: f64,
    tune_for: Option<u64>,
    sequences: u64,
    seed: u64,
) -> f64 {
    const N_MAX: u64 = 2000;
    // 0 = not computed yet, 1 = covers, 2 = excludes.
    let mut memo: Vec<Vec<u8>> = (0..=N_MAX).map(|n| vec![0; n as usize + 1]).collect();
    let mut excludes = |s: u64, n: u64| {
        let cell = &mut memo[n as usize][s as usize];
        if *cell == 0 {
            let mut q = Query::new(s, n, level(delta)).expect("valid query");
            if let Some(t) = tune_for {
                q = q.with_tune_for(t).expect("valid size");
            }
            let i = interval(method, &q).expect("available");
            *cell = if p < i.lower || p > i.upper { 2 } else { 1 };
        }
        *cell == 2
    };
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut failed = 0u64;
    for _ in 0..sequences {
        let mut s = 0;
        // Draw every response even after a failure, so that each sequence uses the
        // same random numbers whatever the method.
        let mut ever = false;
        for n in 1..=N_MAX {
            s += u64::from(rng.random_bool(p));
            if !ever && excludes(s, n) {
                ever = true;
            }
        }
        failed += u64::from(ever);
    }
    failed as f64 / sequences as f64
}

/// Anytime validity under continuous monitoring, for one p (see the tests below).
/// With the sequence tuned once, in advance, for T = 500 responses, the fraction of
/// R = 3000 seeded sequences whose `anytime` interval ever excludes p at some
/// n = 1..=2000 is at most δ = 0.05 plus 4 standard errors `√(δ(1 − δ)/R)`. The same
/// sequences watched through `wilson` exclude p in more than 2δ of them, even after 4
/// standard errors of its own frequency are taken off.
fn anytime_holds_under_monitoring(p: f64, seed: u64) {
    const R: u64 = 3000;
    let delta = 0.05;
    let slack = |c: f64| 4.0 * (c * (1.0 - c) / R as f64).sqrt();
    let anytime = ever_excluded(Method::Anytime, p, delta, Some(500), R, seed);
    assert!(
        anytime <= delta + slack(delta),
        "anytime at p={p}: {anytime} of sequences ever excluded p, above δ={delta} + {}",
        slack(delta)
    );
    let wilson = ever_excluded(Method::Wilson, p, delta, None, R, seed);
    assert!(
        wilson - slack(wilson) > 2.0 * delta,
        "wilson at p={p}: only {wilson} of sequences ever excluded p (anytime {anytime})"
    );
}

/// The `anytime` guarantee: however often the supervisor looks, the interval misses
/// the true p at any moment with probability at most δ. For each p the mixture of
/// likelihood ratios is a nonnegative martingale with mean 1, so by Ville's
/// inequality (Ville 1939) it ever reaches 1/δ with probability at most δ (Howard,
/// Ramdas, McAuliffe & Sekhon 2021, Ann. Statist. 49:1055–1080). Checked by
/// simulation at p = 0.1, with `wilson` as the contrast: a fixed-n interval checked
/// after every response misses p far more often, which is why the anytime method exists.
#[test]
fn anytime_holds_under_monitoring_at_p_0_1() {
    anytime_holds_under_monitoring(0.1, 11);
}

/// As [`anytime_holds_under_monitoring_at_p_0_1`] (Ville's inequality; Howard et al.
/// 2021), at p = 0.3.
#[test]
fn anytime_holds_under_monitoring_at_p_0_3() {
    anytime_holds_under_monitoring(0.3, 33);
}

/// As [`anytime_holds_under_monitoring_at_p_0_1`] (Ville's inequality; Howard et al.
/// 2021), at p = 0.5, where the worst-case variance makes Wilson's misses most frequent.
#[test]
fn anytime_holds_under_monitoring_at_p_0_5() {
    anytime_holds_under_monitoring(0.5, 55);
}
