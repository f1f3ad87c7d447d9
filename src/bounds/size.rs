//! Required sample sizes: the smallest n whose margin is at most ε under each method,
//! for the worst case over the outcome or for an expected proportion, and how many
//! more responses a cell needs if its current proportion holds.

use std::collections::HashMap;
use std::sync::{Mutex, MutexGuard, OnceLock};

use serde::Serialize;

use super::{
    Basis, BoundsError, Guarantee, Level, Method, Query, Unavailable, margin_at, worst_case,
};

/// The largest n the size search considers without a population.
pub const SEARCH_LIMIT: u64 = 1_000_000_000;

/// A planning question: what n gives margin ε at this level?
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SizeQuery {
    margin: f64,
    level: Level,
    population: Option<u64>,
    expect: Option<f64>,
}

impl SizeQuery {
    pub fn new(margin: f64, level: Level) -> Result<SizeQuery, BoundsError> {
        if !(margin > 0.0 && margin < 1.0) {
            return Err(BoundsError::Margin(margin));
        }
        Ok(SizeQuery {
            margin,
            level,
            population: None,
            expect: None,
        })
    }

    pub fn with_population(mut self, population: u64) -> Result<SizeQuery, BoundsError> {
        if population == 0 {
            return Err(BoundsError::EmptyPopulation);
        }
        self.population = Some(population);
        Ok(self)
    }

    /// Plan for an expected proportion instead of the worst case.
    pub fn with_expect(mut self, p: f64) -> Result<SizeQuery, BoundsError> {
        if !(0.0..=1.0).contains(&p) {
            return Err(BoundsError::Expected(p));
        }
        self.expect = Some(p);
        Ok(self)
    }

    pub fn margin(&self) -> f64 {
        self.margin
    }
    pub fn level(&self) -> Level {
        self.level
    }
    pub fn population(&self) -> Option<u64> {
        self.population
    }
    pub fn expect(&self) -> Option<f64> {
        self.expect
    }
}

/// The size one method needs.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct RequiredSize {
    pub method: Method,
    /// The smallest n that meets the margin.
    pub n: u64,
    /// For `binomial`: the smallest n from which every larger n meets it too (its
    /// worst-case probability is not monotone in n).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub n_all_larger: Option<u64>,
    pub guarantee: Guarantee,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<&'static str>,
}

/// The basis at `n` responses with `s` successes (fractional allowed).
fn basis_at(n: u64, s: f64, level: Level, population: Option<u64>, tune_for: f64) -> Basis {
    let whole = (s.round() as u64).min(n);
    Basis {
        s,
        n: n as f64,
        whole: Some((whole, n)),
        delta: level.delta(),
        population,
        tune_for,
    }
}

/// The margin at `n` in the worst case over the outcome (the centre, which the tests
/// check is the widest), or at the expected proportion.
fn planned_margin(method: Method, n: u64, sq: &SizeQuery) -> Result<f64, Unavailable> {
    let tune_for = n as f64;
    match sq.expect {
        Some(p) => margin_at(
            method,
            &basis_at(n, p * n as f64, sq.level, sq.population, tune_for),
            false,
        ),
        None => worst_margin(method, n, sq.level, sq.population, tune_for),
    }
}

/// The widest margin at `n` over every outcome S = 0..n (and p̂ = ½), with the
/// anytime sequence tuned for `n`. Margins are mirror-symmetric in S, so only S ≤ n/2
/// is searched: exhaustively up to n = 400, and above that by a ternary search for the
/// peak (margins rise from S = 0 to a peak a little short of n/2, then dip slightly;
/// the tests check the search against the exhaustive answer) with a look around it.
pub fn widest_margin(
    method: Method,
    n: u64,
    level: Level,
    population: Option<u64>,
) -> Result<f64, Unavailable> {
    worst_margin(method, n, level, population, n as f64)
}

fn worst_margin(
    method: Method,
    n: u64,
    level: Level,
    population: Option<u64>,
    tune_for: f64,
) -> Result<f64, Unavailable> {
    let at = |s: f64| {
        let mut b = basis_at(n, s, level, population, tune_for);
        if s.fract() == 0.0 {
            b.whole = Some((s as u64, n));
        }
        margin_at(method, &b, false)
    };
    let half = n / 2;
    let mut worst = at(0.5 * n as f64)?.max(at(n.div_ceil(2) as f64)?);
    let (from, to) = if n <= 400 {
        (0, half)
    } else {
        let (mut a, mut b) = (0, half);
        while b - a > 8 {
            let m1 = a + (b - a) / 3;
            let m2 = b - (b - a) / 3;
            if at(m1 as f64)? < at(m2 as f64)? {
                a = m1;
            } else {
                b = m2;
            }
        }
        (a.saturating_sub(8), (b + 8).min(half))
    };
    for s in from..=to {
        worst = worst.max(at(s as f64)?);
    }
    Ok(worst)
}

/// Whether a margin meets a target, allowing for rounding in the last bits: at the
/// exact solution of a closed form (Chebyshev at ±1 %, 95 %: n = 50,000) the computed
/// margin may exceed the target by an ulp.
fn within(margin: f64, target: f64) -> bool {
    margin <= target * (1.0 + 8.0 * f64::EPSILON)
}

/// The smallest n a method can give a margin for.
fn first_n(method: Method) -> u64 {
    if method == Method::Bernstein { 2 } else { 1 }
}

/// The smallest n in `[from, cap]` with `meets(n)`, for a test that is false then
/// true (with a short look below the answer for the rare step back); `None` if even
/// `cap` fails.
fn smallest_meeting(
    from: u64,
    cap: u64,
    mut meets: impl FnMut(u64) -> Result<bool, Unavailable>,
) -> Result<Option<u64>, Unavailable> {
    let from = from.max(1);
    if from > cap {
        return Ok(None);
    }
    if meets(from)? {
        return Ok(Some(from));
    }
    let (mut lo, mut hi) = (from, from);
    loop {
        if hi >= cap {
            if !meets(cap)? {
                return Ok(None);
            }
            hi = cap;
            break;
        }
        hi = hi.saturating_mul(2).min(cap);
        if meets(hi)? {
            break;
        }
        lo = hi;
    }
    // meets(lo) is false, meets(hi) is true.
    while hi - lo > 1 {
        let mid = lo + (hi - lo) / 2;
        if meets(mid)? {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let mut best = hi;
    let mut n = hi;
    let mut misses = 0;
    while n > from && misses < 16 {
        n -= 1;
        if meets(n)? {
            best = n;
            misses = 0;
        } else {
            misses += 1;
        }
    }
    Ok(Some(best))
}

const NOTE_ANYTIME_SELF: &str = "anytime sequence tuned for the size itself";
const NOTE_BINOMIAL_EXPECT: &str = "depends on n only: the expected proportion does not enter";

/// The size one method needs for the planning question.
pub fn required_size(method: Method, sq: &SizeQuery) -> Result<RequiredSize, Unavailable> {
    let unreachable = Unavailable {
        method,
        reason: "not reached within the search limit",
    };
    let guarantee = method.guarantee();
    if method == Method::Binomial {
        if sq.population.is_some() {
            return Err(Unavailable {
                method,
                reason: "no finite-population form",
            });
        }
        let Some((n, all)) = worst_case::sizes(sq.margin, sq.level.delta()) else {
            return Err(Unavailable {
                method,
                reason: "needs more responses than the exact computation covers; see hoeffding",
            });
        };
        let note = sq.expect.map(|_| NOTE_BINOMIAL_EXPECT);
        return Ok(RequiredSize {
            method,
            n,
            n_all_larger: Some(all),
            guarantee,
            note,
        });
    }
    let cap = sq.population.unwrap_or(SEARCH_LIMIT);
    let n = smallest_meeting(first_n(method), cap, |n| {
        Ok(within(planned_margin(method, n, sq)?, sq.margin))
    })?
    .ok_or(unreachable)?;
    let note = match (method, sq.population) {
        (Method::Anytime, _) => Some(NOTE_ANYTIME_SELF),
        (Method::ClopperPearson, Some(_)) => {
            Some("exact hypergeometric interval (finite population)")
        }
        (Method::Hoeffding, Some(_)) => Some("Hoeffding–Serfling form (finite population)"),
        (Method::Chernoff, Some(_)) => Some(super::NOTE_CHERNOFF_WOR),
        (_, Some(_)) => Some(super::NOTE_FPC),
        _ => None,
    };
    Ok(RequiredSize {
        method,
        n,
        n_all_larger: None,
        guarantee,
        note,
    })
}

/// The sizes every method needs, in the order of [`Method::ALL`].
pub fn required_sizes(sq: &SizeQuery) -> Vec<Result<RequiredSize, Unavailable>> {
    Method::ALL.iter().map(|&m| required_size(m, sq)).collect()
}

/// How many more responses bring the margin to at most `target` if the current
/// proportion holds: `Some(0)` when it is met already, `None` when no number within
/// the search limit (or the population) does. Without responses yet, plans for the
/// worst case.
///
/// The answer is the one a walk from the responses in hand gives (doubling, then
/// halving, then a look below for a step back: [`smallest_meeting`]); it is reached
/// from a guess instead ([`smallest_within`]), which for margins that shrink steadily
/// as n grows is the same number after a handful of margins instead of thirty.
pub fn more_needed(method: Method, q: &Query, target: f64) -> Result<Option<u64>, Unavailable> {
    let cap = q.population().unwrap_or(SEARCH_LIMIT);
    let Some(estimate) = q.estimate() else {
        let needed = worst_case_total(method, q.level(), q.population(), q.tune_for(), target)?;
        return Ok(needed.map(|n| n.saturating_sub(q.n())));
    };
    let needed = smallest_within(
        q.n().max(first_n(method)),
        cap,
        target,
        steps_back(method, q.population(), q.weights().is_none()),
        |n| projected(method, q, estimate, n),
    )?;
    Ok(needed.map(|n| n - q.n()))
}

/// The worst case's size for [`more_needed`] without an estimate yet. It depends only
/// on the method, δ, the population, the tuning size and the target, so every
/// measure of a cell without answers, every such cell with the same quota settings,
/// and every look until answers arrive ask the same question: the answers are kept,
/// at most [`PLAN_MEMO`] of them (all dropped when full; any is found again the same
/// way). On the demo study with an empty file this was about 80 % of a `status`.
fn worst_case_total(
    method: Method,
    level: Level,
    population: Option<u64>,
    tune_for: u64,
    target: f64,
) -> Result<Option<u64>, Unavailable> {
    let key = (
        method,
        level.delta().to_bits(),
        population,
        tune_for,
        target.to_bits(),
    );
    if let Some(&kept) = plan_memo().get(&key) {
        return kept;
    }
    let found = smallest_within(
        first_n(method),
        population.unwrap_or(SEARCH_LIMIT),
        target,
        steps_back(method, population, true),
        |n| worst_margin(method, n, level, population, tune_for as f64),
    );
    let mut memo = plan_memo();
    if memo.len() >= PLAN_MEMO {
        memo.clear();
    }
    memo.insert(key, found);
    found
}

/// How many worst-case sizes [`worst_case_total`] keeps.
const PLAN_MEMO: usize = 1024;

/// (method, bits of δ, population, tuning size, bits of the target) → the answer.
type PlanMemo = HashMap<(Method, u64, Option<u64>, u64, u64), Result<Option<u64>, Unavailable>>;

fn plan_memo() -> MutexGuard<'static, PlanMemo> {
    static MEMO: OnceLock<Mutex<PlanMemo>> = OnceLock::new();
    // A thread that panicked while holding it left it whole (every change is one call).
    MEMO.get_or_init(Mutex::default)
        .lock()
        .unwrap_or_else(|e| e.into_inner())
}

/// Whether a method's margin at a held proportion can widen again as n grows, so
/// that the search must look below the first n it finds: when it works from whole
/// counts (the exact interval, the exact worst-case margin, anything clipped to the
/// always-true bounds of a population), the rounding of the count to the nearest
/// whole number makes small steps back. The others are smooth functions of n that
/// only shrink (closed forms in n, Chernoff's divergence ball, the anytime mixture
/// with its tuning fixed).
fn steps_back(method: Method, population: Option<u64>, whole_counts: bool) -> bool {
    (population.is_some() && whole_counts)
        || matches!(method, Method::ClopperPearson | Method::Binomial)
}

/// [`smallest_meeting`] for `meets(n) = within(margin(n), target)`, started from a
/// guess: the margin's local scaling with n (first `n^-½`, then the slope in log-log
/// between the last two margins) says where it reaches the target; each guess lands
/// inside the bracket of a failing and a meeting n, a bracket still wide after a few
/// guesses is closed by steps doubling from the nearer end and halving, and with
/// `look_below` the same look below the answer for a step back follows. For a test
/// that is false then true this is exactly the n the walk finds.
fn smallest_within(
    from: u64,
    cap: u64,
    target: f64,
    look_below: bool,
    mut margin: impl FnMut(u64) -> Result<f64, Unavailable>,
) -> Result<Option<u64>, Unavailable> {
    const GUESSES: usize = 6;
    let from = from.max(1);
    if from > cap {
        return Ok(None);
    }
    let first = margin(from)?;
    if within(first, target) {
        return Ok(Some(from));
    }
    let mut meets = |n: u64| margin(n).map(|m| (within(m, target), m));
    // lo fails; hi, once known, meets.
    let mut lo = from;
    let mut hi: Option<u64> = None;
    let mut last = (from as f64, first);
    let mut slope = -0.5;
    for _ in 0..GUESSES {
        let top = hi.map_or(cap, |h| h - 1);
        if top <= lo {
            break;
        }
        let aim = last.0 * ((target / last.1).ln() / slope).exp();
        let guess = if aim.is_finite() {
            (aim.ceil() as u64).clamp(lo + 1, top)
        } else {
            top
        };
        let (ok, m) = meets(guess)?;
        if ok {
            hi = Some(guess);
        } else {
            lo = guess;
        }
        let x = guess as f64;
        if m > 0.0 && last.1 > 0.0 && m.is_finite() && x != last.0 {
            let s = (m / last.1).ln() / (x / last.0).ln();
            if s.is_finite() && s < -1e-3 {
                slope = s;
            }
        }
        last = (x, m);
    }
    let mut hi = match hi {
        Some(h) => h,
        None => {
            // Every guess fell short: steps doubling from the last failing n.
            let mut step = (lo / 1024).max(1);
            loop {
                if lo >= cap {
                    return Ok(None);
                }
                let probe = lo.saturating_add(step).min(cap);
                if meets(probe)?.0 {
                    break probe;
                }
                lo = probe;
                step = step.saturating_mul(2);
            }
        }
    };
    // A wide bracket (guesses that all met): steps doubling down from the meeting end.
    let mut step = (hi / 1024).max(1);
    while hi - lo > 2 * step {
        let probe = hi - step;
        if meets(probe)?.0 {
            hi = probe;
            step = step.saturating_mul(2);
        } else {
            lo = probe;
        }
    }
    while hi - lo > 1 {
        let mid = lo + (hi - lo) / 2;
        if meets(mid)?.0 {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let mut best = hi;
    if look_below {
        let mut n = hi;
        let mut misses = 0;
        while n > from && misses < 16 {
            n -= 1;
            if meets(n)?.0 {
                best = n;
                misses = 0;
            } else {
                misses += 1;
            }
        }
    }
    Ok(Some(best))
}

/// The margin `method` would give at `n` responses if the current proportion held,
/// as [`more_needed`] assumes: with weights, the design effect n / n_eff is taken to
/// stay as it is. `None` before any response (no proportion to hold yet).
pub fn projected_margin(method: Method, q: &Query, n: u64) -> Option<Result<f64, Unavailable>> {
    let estimate = q.estimate()?;
    if n < first_n(method) {
        return Some(Err(Unavailable {
            method,
            reason: "too few responses for this method",
        }));
    }
    Some(projected(method, q, estimate, n))
}

fn projected(method: Method, q: &Query, estimate: f64, n: u64) -> Result<f64, Unavailable> {
    let level = q.level();
    let tune_for = q.tune_for() as f64;
    let b = match q.weights() {
        Some(w) => {
            let design_effect = q.n() as f64 / w.effective_n();
            let n_eff = n as f64 / design_effect;
            Basis {
                s: estimate * n_eff,
                n: n_eff,
                whole: None,
                delta: level.delta(),
                population: None,
                tune_for,
            }
        }
        None => basis_at(n, estimate * n as f64, level, q.population(), tune_for),
    };
    margin_at(method, &b, q.weights().is_some())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bounds::WeightSums;
    use proptest::prelude::*;

    /// `more_needed` as it was before the guess: the walk from the responses in hand
    /// for every method. The search from a guess must give the same answer.
    fn walked(method: Method, q: &Query, target: f64) -> Result<Option<u64>, Unavailable> {
        let level = q.level();
        let tune_for = q.tune_for() as f64;
        let cap = q.population().unwrap_or(SEARCH_LIMIT);
        let Some(estimate) = q.estimate() else {
            let needed = smallest_meeting(first_n(method), cap, |n| {
                Ok(within(
                    worst_margin(method, n, level, q.population(), tune_for)?,
                    target,
                ))
            })?;
            return Ok(needed.map(|n| n.saturating_sub(q.n())));
        };
        let needed = smallest_meeting(q.n().max(first_n(method)), cap, |n| {
            Ok(within(projected(method, q, estimate, n)?, target))
        })?;
        Ok(needed.map(|n| n - q.n()))
    }

    fn query(
        successes: u64,
        n: u64,
        confidence: f64,
        tune_for: u64,
        population: Option<u64>,
        design_effect: Option<f64>,
    ) -> Query {
        let mut q = Query::new(successes, n, Level::from_confidence(confidence).unwrap())
            .unwrap()
            .with_tune_for(tune_for)
            .unwrap();
        if let Some(total) = population {
            q = q.with_population(total.max(n)).unwrap();
        }
        if let Some(deff) = design_effect
            && n > 0
        {
            // Two weights, 1 and w, on halves of the responses, so that the design
            // effect is about `deff`; the weighted proportion about S/n.
            let w = 2.0 * deff - 1.0 + (4.0 * deff * (deff - 1.0)).sqrt();
            let half = n as f64 / 2.0;
            let p = successes as f64 / n as f64;
            q = q
                .with_weights(WeightSums {
                    sum_w: half * (1.0 + w),
                    sum_w2: half * (1.0 + w * w),
                    sum_wy: p * half * (1.0 + w),
                })
                .unwrap();
        }
        q
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 400, rng_seed: proptest::test_runner::RngSeed::Fixed(29), ..ProptestConfig::default() })]

        /// Every method, at random counts, targets and levels, with and without a
        /// population and weights: the same answer as the walk.
        #[test]
        fn the_search_from_a_guess_finds_what_the_walk_finds(
            method in 0..Method::ALL.len(),
            n in prop_oneof![0u64..50, 50u64..3_000, 3_000u64..40_000],
            share in 0.0f64..=1.0,
            target in prop_oneof![0.005f64..0.05, 0.05f64..0.3],
            confidence in prop_oneof![Just(0.95), Just(0.9), Just(0.99), 0.5f64..0.999],
            tune in 10u64..50_000,
            population in prop::option::of(1u64..200_000),
            design_effect in prop::option::weighted(0.2, 1.0f64..4.0),
        ) {
            let method = Method::ALL[method];
            // The exact worst-case margin is linear in n: keep its searches short.
            let target = if method == Method::Binomial { target.max(0.02) } else { target };
            let successes = ((n as f64) * share).round() as u64;
            let q = query(successes, n, confidence, tune, population, design_effect);
            prop_assert_eq!(more_needed(method, &q, target), walked(method, &q, target));
        }
    }

    /// The worst case (no answers yet) is kept between calls: asked twice, the second
    /// time in the other order, beside questions that differ from it in one setting
    /// only, every answer is the walk's.
    #[test]
    fn the_kept_worst_case_answers_are_the_walks() {
        let mut asked = Vec::new();
        for method in [Method::Anytime, Method::Wilson, Method::Hoeffding] {
            for population in [None, Some(5_000)] {
                for tune in [100, 2_000] {
                    for target in [0.05, 0.1] {
                        for confidence in [0.9, 0.95] {
                            asked.push((method, population, tune, target, confidence));
                        }
                    }
                }
            }
        }
        for round in 0..2 {
            if round == 1 {
                asked.reverse();
            }
            for &(method, population, tune, target, confidence) in &asked {
                let q = query(0, 0, confidence, tune, population, None);
                assert_eq!(
                    more_needed(method, &q, target),
                    walked(method, &q, target),
                    "{method} {population:?} tuned for {tune} ±{target} at {confidence}"
                );
            }
        }
    }

    /// A few of the cases the dashboard meets most: the anytime method and Wilson at
    /// the common levels, with the cells of a large study, one by one.
    #[test]
    fn the_common_cases_agree_with_the_walk() {
        for method in [Method::Anytime, Method::Wilson, Method::ClopperPearson] {
            for n in [1, 7, 100, 999, 5_000, 40_000, 250_000] {
                for share in [0.0, 0.03, 0.3, 0.5, 0.81, 1.0] {
                    for population in [None, Some(60_000), Some(300_000)] {
                        let successes = (n as f64 * share).round() as u64;
                        let q = query(successes, n, 0.95, 10_000, population, None);
                        for target in [0.01, 0.03, 0.1] {
                            assert_eq!(
                                more_needed(method, &q, target),
                                walked(method, &q, target),
                                "{method} {successes}/{n} {population:?} ±{target}"
                            );
                        }
                    }
                }
            }
        }
    }
}
