//! Required sample sizes: the smallest n whose margin is at most ε under each method,
//! for the worst case over the outcome or for an expected proportion, and how many
//! more responses a cell needs if its current proportion holds.

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
pub fn more_needed(method: Method, q: &Query, target: f64) -> Result<Option<u64>, Unavailable> {
    let level = q.level();
    let tune_for = q.tune_for() as f64;
    let cap = q.population().unwrap_or(SEARCH_LIMIT);
    let Some(estimate) = q.estimate() else {
        let sq = SizeQuery {
            margin: target,
            level,
            population: q.population(),
            expect: None,
        };
        let needed = smallest_meeting(first_n(method), cap, |n| {
            Ok(within(
                worst_margin(method, n, level, q.population(), tune_for)?,
                sq.margin,
            ))
        })?;
        return Ok(needed.map(|n| n.saturating_sub(q.n())));
    };
    let needed = smallest_meeting(q.n().max(first_n(method)), cap, |n| {
        Ok(within(projected(method, q, estimate, n)?, target))
    })?;
    Ok(needed.map(|n| n - q.n()))
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
