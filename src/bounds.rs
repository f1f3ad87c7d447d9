//! Margins of error for a proportion: for S successes in n responses at confidence
//! 1 − δ, the interval, margin and guarantee under each method, and the sample size
//! each method needs for a target margin.
//!
//! This module knows nothing of files, cells or terminals: it takes counts and returns
//! numbers. Every interval is clipped to [0, 1]; with a finite population it also lies
//! within the always-true bounds `[S/N, 1 − (n − S)/N]`.

mod anytime;
mod concentration;
mod exact;
mod normal;
mod roots;
mod size;
pub mod special;
mod worst_case;

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

pub use size::{
    RequiredSize, SizeQuery, more_needed, projected_margin, required_size, required_sizes,
    widest_margin,
};
pub use worst_case::EXACT_LIMIT as BINOMIAL_EXACT_LIMIT;

/// How a margin is computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    Wald,
    Wilson,
    ClopperPearson,
    Chebyshev,
    Hoeffding,
    Chernoff,
    Bernstein,
    Binomial,
    Anytime,
}

/// What a method promises.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Guarantee {
    /// Coverage close to 1 − δ for large n, with no promise.
    Approximate,
    /// Coverage at least 1 − δ if n was fixed in advance.
    FixedN,
    /// Coverage at least 1 − δ for any p and any stopping rule that depends on n only.
    WorstCase,
    /// Coverage at least 1 − δ simultaneously at every n: valid under continuous
    /// monitoring and any stopping rule.
    Anytime,
}

impl Guarantee {
    pub fn name(self) -> &'static str {
        match self {
            Guarantee::Approximate => "approximate",
            Guarantee::FixedN => "fixed-n",
            Guarantee::WorstCase => "worst-case",
            Guarantee::Anytime => "anytime",
        }
    }

    /// One line a supervisor can read.
    pub fn meaning(self) -> &'static str {
        match self {
            Guarantee::Approximate => "close to the stated confidence for large n; no promise",
            Guarantee::FixedN => "at least the stated confidence if n was fixed in advance",
            Guarantee::WorstCase => {
                "at least the stated confidence for any p, if n was fixed in advance"
            }
            Guarantee::Anytime => {
                "at least the stated confidence at every n at once, however often you look"
            }
        }
    }
}

impl fmt::Display for Guarantee {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl Method {
    pub const ALL: [Method; 9] = [
        Method::Wald,
        Method::Wilson,
        Method::ClopperPearson,
        Method::Chebyshev,
        Method::Hoeffding,
        Method::Chernoff,
        Method::Bernstein,
        Method::Binomial,
        Method::Anytime,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Method::Wald => "wald",
            Method::Wilson => "wilson",
            Method::ClopperPearson => "clopper-pearson",
            Method::Chebyshev => "chebyshev",
            Method::Hoeffding => "hoeffding",
            Method::Chernoff => "chernoff",
            Method::Bernstein => "bernstein",
            Method::Binomial => "binomial",
            Method::Anytime => "anytime",
        }
    }

    /// The guarantee for whole counts without weights.
    pub fn guarantee(self) -> Guarantee {
        match self {
            Method::Wald | Method::Wilson => Guarantee::Approximate,
            Method::ClopperPearson | Method::Chernoff | Method::Bernstein => Guarantee::FixedN,
            Method::Chebyshev | Method::Hoeffding | Method::Binomial => Guarantee::WorstCase,
            Method::Anytime => Guarantee::Anytime,
        }
    }

    /// Whether the guarantee survives fixed design weights (with Kish's effective n).
    pub fn rigorous_with_weights(self) -> bool {
        matches!(self, Method::Chebyshev | Method::Hoeffding)
    }

    /// What the method is, in a few words.
    pub fn summary(self) -> &'static str {
        match self {
            Method::Wald => "normal approximation p̂ ± z√(p̂q̂/n)",
            Method::Wilson => "score interval",
            Method::ClopperPearson => {
                "exact interval from the binomial (hypergeometric with a population)"
            }
            Method::Chebyshev => "Chebyshev's inequality with the worst-case variance ¼",
            Method::Hoeffding => "Hoeffding's inequality √(ln(2/δ)/(2n))",
            Method::Chernoff => "relative-entropy (Chernoff) bound",
            Method::Bernstein => "empirical Bernstein bound",
            Method::Binomial => "exact worst-case binomial margin; depends on n only",
            Method::Anytime => "beta-binomial mixture confidence sequence",
        }
    }

    /// The published source.
    pub fn source(self) -> &'static str {
        match self {
            Method::Wald => "Laplace (1812); e.g. Cochran, Sampling Techniques (1977)",
            Method::Wilson => "Wilson (1927), JASA 22:209–212",
            Method::ClopperPearson => "Clopper & Pearson (1934), Biometrika 26:404–413",
            Method::Chebyshev => "Chebyshev's inequality (Bienaymé 1853; Chebyshev 1867)",
            Method::Hoeffding => {
                "Hoeffding (1963), JASA 58:13–30; Serfling (1974); Bardenet & Maillard (2015)"
            }
            Method::Chernoff => "Chernoff (1952); Hoeffding (1963), Theorem 1",
            Method::Bernstein => "Maurer & Pontil (2009), COLT, Theorem 4",
            Method::Binomial => "exact computation from the binomial distribution",
            Method::Anytime => {
                "Robbins (1970); Howard, Ramdas, McAuliffe & Sekhon (2021), Ann. Statist. 49:1055–1080; \
                 Waudby-Smith & Ramdas (2020) without replacement"
            }
        }
    }
}

impl fmt::Display for Method {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Method {
    type Err = BoundsError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let wanted = s.trim().to_ascii_lowercase();
        Method::ALL
            .into_iter()
            .find(|m| m.name() == wanted)
            .ok_or_else(|| BoundsError::UnknownMethod(s.to_string()))
    }
}

/// The names of every method, comma-separated (for messages).
pub fn method_names() -> String {
    Method::ALL.map(Method::name).join(", ")
}

/// A bad input to the margin engine.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BoundsError {
    #[error(
        "successes '{successes}' exceed responses '{n}': successes must be at most the number of responses"
    )]
    SuccessesExceedResponses { successes: u64, n: u64 },
    #[error("confidence '{0}' is not between 0 and 1: give a level such as 0.95")]
    Confidence(f64),
    #[error("margin '{0}' is not between 0 and 1: give a proportion such as 0.05 for ±5 points")]
    Margin(f64),
    #[error("expected proportion '{0}' is not between 0 and 1")]
    Expected(f64),
    #[error(
        "population '{population}' is smaller than the responses '{n}': a sample without replacement cannot exceed its population"
    )]
    PopulationTooSmall { population: u64, n: u64 },
    #[error("population must be at least 1")]
    EmptyPopulation,
    #[error("planned size '{0}' must be at least 1")]
    TuneFor(u64),
    #[error("weights are not usable: {0}")]
    Weights(&'static str),
    #[error("unknown method '{0}': expected one of {names}", names = method_names())]
    UnknownMethod(String),
}

/// A confidence level, held as δ = 1 − confidence so that levels such as
/// 1 − 10⁻¹² keep their precision.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Level {
    delta: f64,
}

impl Level {
    /// From a confidence such as 0.95. δ is computed from the shortest decimal form of
    /// the confidence, so 0.95 gives δ = 0.05 exactly as written.
    pub fn from_confidence(confidence: f64) -> Result<Level, BoundsError> {
        if !(confidence > 0.0 && confidence < 1.0) {
            return Err(BoundsError::Confidence(confidence));
        }
        Ok(Level {
            delta: decimal_complement(confidence),
        })
    }

    /// From δ directly (for per-cell corrections).
    pub fn from_delta(delta: f64) -> Result<Level, BoundsError> {
        if !(delta > 0.0 && delta < 1.0) {
            return Err(BoundsError::Confidence(1.0 - delta));
        }
        Ok(Level { delta })
    }

    pub fn delta(self) -> f64 {
        self.delta
    }

    pub fn confidence(self) -> f64 {
        1.0 - self.delta
    }

    /// The per-cell level that keeps every one of `k` statements true at once with
    /// probability at least 1 − δ.
    pub fn split(self, k: u64, how: Split) -> Level {
        let k = k.max(1) as f64;
        let delta = match how {
            Split::Bonferroni => self.delta / k,
            // 1 − (1 − δ)^(1/k), exact for independent statements.
            Split::Sidak => -((-self.delta).ln_1p() / k).exp_m1(),
        };
        Level { delta }
    }
}

/// `1 − c` computed from the shortest decimal representation of `c`, so that
/// `1 − 0.95` is 0.05 rather than 0.050000000000000044.
fn decimal_complement(c: f64) -> f64 {
    let text = format!("{c}");
    if let Some(digits) = text.strip_prefix("0.")
        && digits.len() <= 17
        && digits.bytes().all(|b| b.is_ascii_digit())
        && let Ok(value) = digits.parse::<u64>()
    {
        let scale = 10u64.pow(digits.len() as u32);
        return (scale - value) as f64 / scale as f64;
    }
    1.0 - c
}

/// How δ is shared among many statements.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Split {
    /// δ/k: valid whatever the dependence between statements.
    Bonferroni,
    /// 1 − (1 − δ)^(1/k): exact for independent statements (Šidák 1967).
    Sidak,
}

/// Weighted sums for one measure: Σw, Σw², Σw·y over the responses that count.
#[derive(Clone, Copy, Debug, PartialEq, Default, Serialize, Deserialize)]
pub struct WeightSums {
    pub sum_w: f64,
    pub sum_w2: f64,
    pub sum_wy: f64,
}

impl WeightSums {
    /// Kish's effective sample size `(Σw)² / Σw²`.
    pub fn effective_n(&self) -> f64 {
        self.sum_w * self.sum_w / self.sum_w2
    }

    /// The weighted proportion `Σwy / Σw`.
    pub fn estimate(&self) -> f64 {
        (self.sum_wy / self.sum_w).clamp(0.0, 1.0)
    }
}

/// Everything the engine needs to compute margins for one proportion.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Query {
    successes: u64,
    n: u64,
    level: Level,
    population: Option<u64>,
    tune_for: Option<u64>,
    weights: Option<WeightSums>,
}

impl Query {
    pub fn new(successes: u64, n: u64, level: Level) -> Result<Query, BoundsError> {
        if successes > n {
            return Err(BoundsError::SuccessesExceedResponses { successes, n });
        }
        Ok(Query {
            successes,
            n,
            level,
            population: None,
            tune_for: None,
            weights: None,
        })
    }

    /// Sampling without replacement from a population of `population` units.
    pub fn with_population(mut self, population: u64) -> Result<Query, BoundsError> {
        if population == 0 {
            return Err(BoundsError::EmptyPopulation);
        }
        if population < self.n {
            return Err(BoundsError::PopulationTooSmall {
                population,
                n: self.n,
            });
        }
        self.population = Some(population);
        Ok(self)
    }

    /// The planned size the anytime sequence is tuned for, fixed before the data.
    pub fn with_tune_for(mut self, tune_for: u64) -> Result<Query, BoundsError> {
        if tune_for == 0 {
            return Err(BoundsError::TuneFor(tune_for));
        }
        self.tune_for = Some(tune_for);
        Ok(self)
    }

    /// Design weights: the estimate becomes Σwy/Σw and n becomes Kish's effective n.
    pub fn with_weights(mut self, weights: WeightSums) -> Result<Query, BoundsError> {
        let ok = |x: f64| x.is_finite() && x >= 0.0;
        if !(ok(weights.sum_w) && ok(weights.sum_w2) && ok(weights.sum_wy)) {
            return Err(BoundsError::Weights("sums must be finite and not negative"));
        }
        if weights.sum_wy > weights.sum_w * (1.0 + 1e-12) {
            return Err(BoundsError::Weights(
                "the weighted successes exceed the total weight",
            ));
        }
        self.weights = Some(weights);
        Ok(self)
    }

    pub fn successes(&self) -> u64 {
        self.successes
    }
    pub fn n(&self) -> u64 {
        self.n
    }
    pub fn level(&self) -> Level {
        self.level
    }
    pub fn population(&self) -> Option<u64> {
        self.population
    }
    pub fn weights(&self) -> Option<WeightSums> {
        self.weights
    }
    /// The planned size the anytime sequence uses (the given one, else n itself).
    pub fn tune_for(&self) -> u64 {
        self.tune_for.unwrap_or(self.n).max(1)
    }
    /// Whether the planned size was given rather than defaulted to n.
    pub fn tune_for_given(&self) -> bool {
        self.tune_for.is_some()
    }
    /// The estimate: S/n, or the weighted proportion.
    pub fn estimate(&self) -> Option<f64> {
        match self.weights {
            Some(w) if w.sum_w > 0.0 => Some(w.estimate()),
            Some(_) => None,
            None if self.n == 0 => None,
            None => Some(self.successes as f64 / self.n as f64),
        }
    }
}

/// An interval under one method.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Interval {
    pub method: Method,
    pub lower: f64,
    pub upper: f64,
    /// The largest distance from the estimate to either end.
    pub margin: f64,
    pub guarantee: Guarantee,
    /// What changed from the method's plain form, when something did.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<&'static str>,
}

/// Why a method gives no interval for a query.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Unavailable {
    pub method: Method,
    pub reason: &'static str,
}

impl fmt::Display for Unavailable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.method, self.reason)
    }
}

/// One method's result as data: the interval, or why there is none. The shape of each
/// entry of `bounds` in the JSON outputs.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct BoundRow {
    pub method: Method,
    pub lower: Option<f64>,
    pub upper: Option<f64>,
    pub margin: Option<f64>,
    pub guarantee: Guarantee,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unavailable: Option<&'static str>,
}

impl From<&Result<Interval, Unavailable>> for BoundRow {
    fn from(row: &Result<Interval, Unavailable>) -> BoundRow {
        match row {
            Ok(i) => BoundRow {
                method: i.method,
                lower: Some(i.lower),
                upper: Some(i.upper),
                margin: Some(i.margin),
                guarantee: i.guarantee,
                note: i.note,
                unavailable: None,
            },
            Err(u) => BoundRow {
                method: u.method,
                lower: None,
                upper: None,
                margin: None,
                guarantee: u.method.guarantee(),
                note: None,
                unavailable: Some(u.reason),
            },
        }
    }
}

/// The numbers one method works from, after weights and defaults are resolved.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Basis {
    /// Successes (fractional with weights: p̂ · n_eff).
    pub s: f64,
    /// Responses (Kish's effective n with weights).
    pub n: f64,
    /// Whole counts, when there are no weights.
    pub whole: Option<(u64, u64)>,
    pub delta: f64,
    /// Population, when the finite population correction applies.
    pub population: Option<u64>,
    pub tune_for: f64,
}

impl Basis {
    fn p_hat(&self) -> f64 {
        (self.s / self.n).clamp(0.0, 1.0)
    }
    fn q_hat(&self) -> f64 {
        ((self.n - self.s) / self.n).clamp(0.0, 1.0)
    }
    /// `√((N − n)/(N − 1))`, or 1 without a population.
    fn fpc(&self) -> f64 {
        match (self.population, self.whole) {
            (Some(total), Some((_, n))) if total > 1 => {
                ((total - n) as f64 / (total - 1) as f64).sqrt()
            }
            (Some(_), Some(_)) => 0.0,
            _ => 1.0,
        }
    }
}

const NOTE_WEIGHTED_APPROX: &str =
    "weighted: Kish effective n and the weighted estimate; approximate";
const NOTE_WEIGHTED_RIGOROUS: &str =
    "weighted: Kish effective n; rigorous for fixed design weights";
const NOTE_WEIGHTED_POPULATION: &str =
    "weighted: Kish effective n; the population is not used with weights (conservative)";
const NOTE_FPC: &str = "finite population correction applied";
const NOTE_CHERNOFF_WOR: &str =
    "with-replacement form, valid without replacement (Hoeffding 1963, Theorem 4)";
const NOTE_BINOMIAL_ABOVE: &str =
    "above the exact limit: Hoeffding's margin, never smaller, stands in";

/// Raw ends and the guarantee, before clipping.
fn raw(
    method: Method,
    b: &Basis,
    weighted: bool,
) -> Result<(f64, f64, Guarantee, Option<&'static str>), Unavailable> {
    let unavailable = |reason| Err(Unavailable { method, reason });
    let (p, q, n, delta) = (b.p_hat(), b.q_hat(), b.n, b.delta);
    let finite = b.population.is_some();
    let mut guarantee = method.guarantee();
    let mut note = None;
    if finite {
        note = Some(NOTE_FPC);
    }
    let symmetric = |m: f64| (p - m, p + m);
    let (lower, upper) = match method {
        Method::Wald => normal::wald(p, n, delta, b.fpc()),
        Method::Wilson => normal::wilson(p, q, n, delta, b.fpc()),
        Method::ClopperPearson => {
            let Some((s, n)) = b.whole else {
                return unavailable("needs whole counts; with weights use wilson or hoeffding");
            };
            match b.population {
                Some(total) => {
                    let (ml, mu) = exact::hypergeometric(s, n, total, delta);
                    note = Some("exact hypergeometric interval (finite population)");
                    (ml as f64 / total as f64, mu as f64 / total as f64)
                }
                None => exact::clopper_pearson(s, n, delta),
            }
        }
        Method::Chebyshev => symmetric(concentration::chebyshev(n, delta, b.fpc())),
        Method::Hoeffding => {
            let rho = match (b.population, b.whole) {
                (Some(total), Some((_, n))) => {
                    note = Some("Hoeffding–Serfling form (finite population)");
                    concentration::serfling_factor(n, total)
                }
                _ => 1.0,
            };
            symmetric(concentration::hoeffding(n, delta, rho))
        }
        Method::Chernoff => {
            if finite {
                note = Some(NOTE_CHERNOFF_WOR);
            }
            concentration::chernoff(p, n, delta)
        }
        Method::Bernstein => {
            if finite {
                return unavailable(
                    "no finite-population form; the with-replacement bound is not proven without replacement",
                );
            }
            if n < 2.0 {
                return unavailable("needs at least 2 responses");
            }
            symmetric(concentration::bernstein(p, n, delta))
        }
        Method::Binomial => {
            if finite {
                return unavailable(
                    "no finite-population form; the with-replacement margin is not proven without replacement",
                );
            }
            let whole = n.floor().max(1.0) as u64;
            if whole > worst_case::EXACT_LIMIT {
                note = Some(NOTE_BINOMIAL_ABOVE);
                symmetric(concentration::hoeffding(n, delta, 1.0))
            } else {
                symmetric(worst_case::margin(whole, delta))
            }
        }
        Method::Anytime => {
            let k = anytime::prior_strength(b.tune_for, delta);
            match (b.population, b.whole) {
                (Some(total), Some((s, n))) => {
                    note = Some("without-replacement confidence sequence (finite population)");
                    let (ml, mu) = anytime::without_replacement(s, n, total, k, delta);
                    (ml as f64 / total as f64, mu as f64 / total as f64)
                }
                _ => anytime::mixture(b.s, n, k, delta),
            }
        }
    };
    if weighted {
        if method.rigorous_with_weights() {
            note = Some(NOTE_WEIGHTED_RIGOROUS);
        } else {
            guarantee = Guarantee::Approximate;
            note = Some(NOTE_WEIGHTED_APPROX);
        }
    }
    Ok((lower, upper, guarantee, note))
}

/// Clip to [0, 1] and to the always-true bounds, and measure the margin.
fn finish(
    method: Method,
    b: &Basis,
    estimate: f64,
    (lower, upper, guarantee, note): (f64, f64, Guarantee, Option<&'static str>),
) -> Interval {
    let (mut lo, mut hi) = (lower.clamp(0.0, 1.0), upper.clamp(0.0, 1.0));
    if let (Some(total), Some((s, n))) = (b.population, b.whole) {
        let t = total as f64;
        lo = lo.max(s as f64 / t);
        hi = hi.min(1.0 - (n - s) as f64 / t);
    }
    if lo > hi || lo.is_nan() || hi.is_nan() {
        // Only reachable through rounding at n = N; the estimate is then exact.
        lo = estimate;
        hi = estimate;
    }
    let margin = (estimate - lo).max(hi - estimate).max(0.0);
    Interval {
        method,
        lower: lo,
        upper: hi,
        margin,
        guarantee,
        note,
    }
}

pub(crate) fn basis(q: &Query) -> Option<(Basis, f64, bool)> {
    let estimate = q.estimate()?;
    let tune_for = q.tune_for() as f64;
    let delta = q.level.delta;
    Some(match q.weights {
        Some(w) => {
            let n = w.effective_n();
            (
                Basis {
                    s: estimate * n,
                    n,
                    whole: None,
                    delta,
                    population: None,
                    tune_for,
                },
                estimate,
                true,
            )
        }
        None => (
            Basis {
                s: q.successes as f64,
                n: q.n as f64,
                whole: Some((q.successes, q.n)),
                delta,
                population: q.population,
                tune_for,
            },
            estimate,
            false,
        ),
    })
}

/// The interval under one method.
pub fn interval(method: Method, q: &Query) -> Result<Interval, Unavailable> {
    let Some((b, estimate, weighted)) = basis(q) else {
        return Err(Unavailable {
            method,
            reason: "no responses yet",
        });
    };
    let mut out = finish(method, &b, estimate, raw(method, &b, weighted)?);
    if weighted && q.population.is_some() {
        out.note = Some(NOTE_WEIGHTED_POPULATION);
    }
    Ok(out)
}

/// The margin under one method at a basis (for the size search).
pub(crate) fn margin_at(method: Method, b: &Basis, weighted: bool) -> Result<f64, Unavailable> {
    // Methods that work from whole counts measure the margin from the whole-count
    // estimate, as an interval computed from observed counts would.
    let whole_only =
        method == Method::ClopperPearson || (method == Method::Anytime && b.population.is_some());
    let estimate = match b.whole {
        Some((s, n)) if whole_only => s as f64 / n as f64,
        _ => b.p_hat(),
    };
    Ok(finish(method, b, estimate, raw(method, b, weighted)?).margin)
}

/// The intervals under every method, in the order of [`Method::ALL`].
pub fn intervals(q: &Query) -> Vec<Result<Interval, Unavailable>> {
    Method::ALL.iter().map(|&m| interval(m, q)).collect()
}
