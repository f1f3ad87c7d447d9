//! Exact intervals from the sampling distribution itself: Clopper & Pearson (1934) for
//! sampling with replacement, and its hypergeometric counterpart for a finite
//! population sampled without replacement.

use super::roots::{Start, brent_pair};
use super::special::{
    TailRatios, ln_binom_pmf, ln_binom_upper_pair, ln_hyper_lower, ln_hyper_upper, normal_two_sided,
};

/// Clopper–Pearson: `lower` solves `P(X ≥ S; n, p) = δ/2`, `upper` solves
/// `P(X ≤ S; n, p) = δ/2`, with the closed forms `(δ/2)^(1/n)` at the ends.
///
/// Both ends are roots of `ln P − ln(δ/2)`, found side by side so that their tails
/// are summed together ([`Tails`]). Newton's method from approximate ends
/// ([`beta_quantile_guess`]) finds them in 2 pairs of tails at B3's counts, where
/// Brent's method over `[0, p̂]` and `[p̂, 1]` took 13 ([`newton_ends`]);
/// where it does not apply (the guess breaks down at extreme levels, or a step
/// leaves its side of p̂), Brent's method does, from a bracket around the guesses or
/// from the whole of `[0, p̂]` and `[p̂, 1]` ([`bracketed_ends`]).
pub fn clopper_pearson(s: u64, n: u64, delta: f64) -> (f64, f64) {
    let cut = (0.5 * delta).ln();
    let nf = n as f64;
    if s == 0 {
        return (0.0, -(cut / nf).exp_m1());
    }
    if s == n {
        return ((cut / nf).exp(), 1.0);
    }
    let guesses = guesses(s, n, delta);
    let mut tails = Tails::new(s, n, cut);
    match guesses {
        (Some(lower), Some(upper)) => newton_ends(&mut tails, (lower, upper)),
        _ => None,
    }
    .unwrap_or_else(|| bracketed_ends(tails, guesses))
}

/// The approximate ends: the lower is the δ/2 quantile of Beta(S, n − S + 1), the
/// upper the 1 − δ/2 quantile of Beta(S + 1, n − S).
fn guesses(s: u64, n: u64, delta: f64) -> (Option<f64>, Option<f64>) {
    let z = normal_two_sided(delta);
    let (sf, rest) = (s as f64, (n - s) as f64);
    (
        beta_quantile_guess(sf, rest + 1.0, -z),
        beta_quantile_guess(sf + 1.0, rest, z),
    )
}

/// `ln P(X ≥ S) − ln(δ/2)` at p for the lower end and `ln P(X ≤ S) − ln(δ/2)` for the
/// upper, `P(X ≤ S)` being `P(Y ≥ n − S)` at `1 − p` for `Y = n − X` as
/// [`super::special::ln_binom_lower`] computes it: two tails summed in one loop
/// ([`ln_binom_upper_pair`]), each from the same count at every p, so that its
/// quotients `(n − j)/(j + 1)` are divided once ([`TailRatios`]).
struct Tails {
    s: u64,
    n: u64,
    cut: f64,
    from_s: TailRatios,
    from_rest: TailRatios,
}

impl Tails {
    fn new(s: u64, n: u64, cut: f64) -> Tails {
        Tails {
            s,
            n,
            cut,
            from_s: TailRatios::new(s, n),
            from_rest: TailRatios::new(n - s, n),
        }
    }

    /// The two values, each only where asked for (NaN otherwise).
    fn at(&mut self, lower: Option<f64>, upper: Option<f64>) -> (f64, f64) {
        let (s, n) = (self.s, self.n);
        let (a, b) = ln_binom_upper_pair(
            lower.map(|p| (s, n, p, 1.0 - p)),
            upper.map(|p| (n - s, n, 1.0 - p, p)),
            (&mut self.from_s, &mut self.from_rest),
        );
        (a - self.cut, b - self.cut)
    }
}

/// Both ends by Newton's method from `guesses`, side by side, or `None` when a step
/// leaves its end's side of p̂ or [`NEWTON_STEPS`] steps do not settle.
///
/// The slopes come with the tails: `d/dp ln P(X ≥ S) = (S/p) b(S; n, p)/P(X ≥ S)` and
/// `d/dp ln P(X ≤ S) = −((n − S)/(1 − p)) b(S; n, p)/P(X ≤ S)`, b the point
/// probability. Both logarithms are concave in p (the distribution functions of beta
/// distributions with log-concave densities), so after the first step each end is
/// approached from one side. A search stops once its step is below 10⁻¹⁰ of the end,
/// after taking it: the next would be about a hundred times its square, far below an
/// ulp.
fn newton_ends(tails: &mut Tails, guesses: (f64, f64)) -> Option<(f64, f64)> {
    let (s, n, cut) = (tails.s, tails.n, tails.cut);
    let (sf, rest) = (s as f64, (n - s) as f64);
    let p_hat = sf / n as f64;
    let [mut lower, mut upper] = [Newton::new(guesses.0), Newton::new(guesses.1)];
    for _ in 0..NEWTON_STEPS {
        let (at_lower, at_upper) = (lower.wants(), upper.wants());
        let (f_lower, f_upper) = tails.at(at_lower, at_upper);
        // b(S; n, p) over the tail, from the logarithms.
        let share = |p: f64, f: f64| (ln_binom_pmf(s, n, p, 1.0 - p) - (f + cut)).exp();
        if let Some(p) = at_lower {
            lower.step(f_lower, sf / p * share(p, f_lower));
            if !(lower.at > 0.0 && lower.at < p_hat) {
                return None;
            }
        }
        if let Some(p) = at_upper {
            upper.step(f_upper, -rest / (1.0 - p) * share(p, f_upper));
            if !(upper.at > p_hat && upper.at < 1.0) {
                return None;
            }
        }
        if lower.done && upper.done {
            return Some((lower.at, upper.at));
        }
    }
    None
}

/// One end's Newton search: where it stands, and whether it has settled.
struct Newton {
    at: f64,
    done: bool,
}

impl Newton {
    fn new(at: f64) -> Newton {
        Newton { at, done: false }
    }

    fn wants(&self) -> Option<f64> {
        (!self.done).then_some(self.at)
    }

    fn step(&mut self, value: f64, slope: f64) {
        let step = value / slope;
        let next = self.at - step;
        self.done = step.abs() <= NEWTON_SETTLED * next;
        self.at = next;
    }
}

/// At most this many Newton steps an end; from the guesses, 2 at B3's counts.
const NEWTON_STEPS: usize = 8;

/// A Newton search stops once its step is below this share of the end.
const NEWTON_SETTLED: f64 = 1e-10;

/// Both ends by Brent's method, each from a narrow bracket around its guess when
/// there is one and it holds the end, else from the whole of `[0, p̂]` or `[p̂, 1]`.
fn bracketed_ends(mut tails: Tails, guesses: (Option<f64>, Option<f64>)) -> (f64, f64) {
    let p_hat = tails.s as f64 / tails.n as f64;
    let around = |start: Start, guess: Option<f64>| match guess {
        Some(g) => {
            let half = EXPECTED_WITHIN * (p_hat - g).abs();
            start.expecting(g - half, g + half)
        }
        None => start,
    };
    brent_pair(
        |lower, upper| tails.at(lower, upper),
        around(Start::within(0.0, p_hat), guesses.0),
        around(Start::within(p_hat, 1.0), guesses.1),
    )
}

/// Half the width of the bracket a Clopper–Pearson search tries first, as a share of
/// the guessed end's distance from p̂. On a seeded sample of 20,000 intervals (n up to
/// 10⁶) [`beta_quantile_guess`] was within 1.5 % of that distance at levels from 50 %
/// to 99 %, and within 8 % at 1 − 1.7·10⁻⁴ and 1 − 10⁻⁹, where a miss costs two pairs
/// of tails more than the whole bracket would.
const EXPECTED_WITHIN: f64 = 0.03;

/// An approximate quantile of the Beta(a, b) distribution at the standard normal
/// deviate `z` (negative for the lower tail), from the F distribution
/// (`X = aF/(b + aF)`, `F ~ F(2a, 2b)`) and Paulson's (1942) normal approximation to
/// it, which rests on Wilson and Hilferty's (1931) cube roots: with `A = 1/(9a)`,
/// `B = 1/(9b)`, `F^(1/3) = ((1−A)(1−B) + z√((1−A)²B + (1−B)²A − z²AB)) / ((1−B)² − z²B)`.
/// `None` where that breaks down (a small b at an extreme level). Only where a search
/// starts.
fn beta_quantile_guess(a: f64, b: f64, z: f64) -> Option<f64> {
    let (ca, cb) = (1.0 / (9.0 * a), 1.0 / (9.0 * b));
    let z2 = z * z;
    let denominator = (1.0 - cb) * (1.0 - cb) - z2 * cb;
    let spread = (1.0 - ca) * (1.0 - ca) * cb + (1.0 - cb) * (1.0 - cb) * ca - z2 * ca * cb;
    if denominator <= 0.0 || spread < 0.0 {
        return None;
    }
    let root = ((1.0 - ca) * (1.0 - cb) + z * spread.sqrt()) / denominator;
    if root <= 0.0 {
        return None;
    }
    let f = root * root * root;
    let x = a * f / (b + a * f);
    x.is_finite().then_some(x)
}

/// The exact interval for the share of successes in a population of `total` units,
/// from `s` successes in `n` drawn without replacement: the population counts `M`
/// that neither one-sided hypergeometric test rejects at `δ/2`. Returns `(M_L, M_U)`.
///
/// A count whose tail probability equals δ/2 to within rounding (relative 10⁻¹²) is
/// kept, so the interval is closed as Clopper–Pearson's is: ties are common here
/// because small populations give rational tail probabilities such as 1/20.
pub fn hypergeometric(s: u64, n: u64, total: u64, delta: f64) -> (u64, u64) {
    let cut = (0.5 * delta).ln() - 1e-12;
    // Feasible counts: at least the successes seen, at most all but the failures seen.
    let (lo, hi) = (s, total - (n - s));
    // Where the normal approximation with the finite population correction puts the
    // two ends: only where the searches start.
    let (nf, tf) = (n as f64, total as f64);
    let p_hat = s as f64 / nf;
    let spread = normal_two_sided(delta)
        * (p_hat * (1.0 - p_hat) / nf * (tf - nf) / (tf - 1.0).max(1.0)).sqrt();
    let guess = |p: f64| (p * tf).round().clamp(0.0, tf) as u64;
    let m_lower = if s == 0 {
        0
    } else {
        // P(X ≥ s | M) rises with M and is 1 at M = hi.
        first_true_from(
            lo,
            hi,
            guess(p_hat - spread),
            |m| ln_hyper_upper(s, n, m, total),
            |v| v > cut,
            cut,
        )
    };
    let m_upper = if s == n {
        total
    } else {
        // P(X ≤ s | M) falls with M and is 1 at M = lo; the largest M where it exceeds δ/2.
        first_true_from(
            lo,
            hi,
            guess(p_hat + spread).saturating_add(1),
            |m| ln_hyper_lower(s, n, m, total),
            |v| v <= cut,
            cut,
        )
        .saturating_sub(1)
    };
    (m_lower, m_upper.max(m_lower))
}

/// The smallest `m` in `[lo, hi]` with `pred(m)`, for a predicate that is false then
/// true; `hi + 1` when it is never true.
pub fn first_true(lo: u64, hi: u64, mut pred: impl FnMut(u64) -> bool) -> u64 {
    let (mut a, mut b) = (lo, hi + 1);
    while a < b {
        let mid = a + (b - a) / 2;
        if pred(mid) {
            b = mid;
        } else {
            a = mid + 1;
        }
    }
    a
}

/// [`first_true`]'s answer for `pred(m) = test(value(m))`, where `value` is smooth in m
/// and `test` says on which side of `level` a value lies, reached from a guess: each
/// look lands inside the bracket of a failing and a passing m where a secant through
/// the last two values meets `level` (next to the guess for the second look), and
/// after [`SECANT_LOOKS`] looks halving finishes. For a predicate that is false then
/// true (the hypergeometric tails it is used for rise or fall steadily with the
/// population count, by far more than their rounding from one count to the next) the
/// answer is the one m where it turns true, whichever way it is found: about four
/// values instead of the dozen or so of halving, the first of which, far from the
/// answer, were the cheap ones. Not for a predicate that may turn back (the
/// without-replacement anytime ratio near M = N). `exact::tests` compares both ways
/// on seeded samples.
pub fn first_true_from(
    lo: u64,
    hi: u64,
    guess: u64,
    mut value: impl FnMut(u64) -> f64,
    test: impl Fn(f64) -> bool,
    level: f64,
) -> u64 {
    // Every m below a fails; b passes (or is hi + 1).
    let (mut a, mut b) = (lo, hi + 1);
    let mut probe = guess;
    let mut last: Option<(u64, f64)> = None;
    let mut looks = 0;
    while a < b {
        let m = if looks < SECANT_LOOKS {
            probe.clamp(a, b - 1)
        } else {
            a + (b - a) / 2
        };
        let v = value(m);
        let passes = test(v);
        if passes {
            b = m;
        } else {
            a = m + 1;
        }
        looks += 1;
        // The next look: where the secant through the last two values meets `level`
        // (the first answer above a crossing at x is ⌈x⌉), else the neighbour on the
        // side the answer lies.
        let secant = last.and_then(|(m0, v0)| {
            let x = m as f64 + (level - v) * (m as f64 - m0 as f64) / (v - v0);
            (x.is_finite() && v.is_finite() && v0.is_finite())
                .then(|| x.ceil().clamp(0.0, u64::MAX as f64) as u64)
        });
        probe = secant.unwrap_or(if passes { m.saturating_sub(1) } else { m + 1 });
        last = Some((m, v));
    }
    a
}

/// How many looks [`first_true_from`] takes by secant before it halves.
const SECANT_LOOKS: u32 = 8;

#[cfg(test)]
mod tests {
    use super::super::roots::brent;
    use super::super::special::{ln_binom_lower, ln_binom_upper};
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Clopper–Pearson as it was computed before its two searches ran side by side
    /// (`0dcfe67`): the reference, bit for bit.
    fn clopper_pearson_as_before(s: u64, n: u64, delta: f64) -> (f64, f64) {
        let cut = (0.5 * delta).ln();
        let nf = n as f64;
        let lower = if s == 0 {
            0.0
        } else if s == n {
            (cut / nf).exp()
        } else {
            let p_hat = s as f64 / nf;
            brent(|p| ln_binom_upper(s, n, p, 1.0 - p) - cut, 0.0, p_hat)
        };
        let upper = if s == n {
            1.0
        } else if s == 0 {
            -(cut / nf).exp_m1()
        } else {
            let p_hat = s as f64 / nf;
            brent(|p| ln_binom_lower(s, n, p, 1.0 - p) - cut, p_hat, 1.0)
        };
        (lower, upper)
    }

    /// The exact hypergeometric interval as it was found before its searches started
    /// from a guess (halving over every feasible count): the reference.
    fn hypergeometric_by_halving(s: u64, n: u64, total: u64, delta: f64) -> (u64, u64) {
        let cut = (0.5 * delta).ln() - 1e-12;
        let (lo, hi) = (s, total - (n - s));
        let m_lower = if s == 0 {
            0
        } else {
            first_true(lo, hi, |m| ln_hyper_upper(s, n, m, total) > cut)
        };
        let m_upper = if s == n {
            total
        } else {
            first_true(lo, hi, |m| ln_hyper_lower(s, n, m, total) <= cut).saturating_sub(1)
        };
        (m_lower, m_upper.max(m_lower))
    }

    /// Seeded populations from 1 to 10⁹ (the study file's cap), samples up to all of
    /// them (small populations give the ties the interval keeps), every share of
    /// successes, usual and extreme levels: the same counts as by halving (also checked
    /// once on 60,000 draws of two other seeds).
    #[test]
    fn hypergeometric_from_a_guess_is_as_by_halving() {
        let mut rng = ChaCha8Rng::seed_from_u64(1978);
        for _ in 0..3000 {
            let total = (rng.random::<f64>() * 1e9f64.ln()).exp() as u64 + 1;
            let n = match rng.random_range(0..6) {
                0 => total,
                1 => 1,
                _ => rng.random_range(1..=total),
            };
            let s = match rng.random_range(0..8) {
                0 => 0,
                1 => n,
                _ => rng.random_range(0..=n),
            };
            let delta = [0.05, 0.01, 0.1, 0.05 / 300.0, 1e-9, 0.5][rng.random_range(0..6)];
            assert_eq!(
                hypergeometric(s, n, total, delta),
                hypergeometric_by_halving(s, n, total, delta),
                "S = {s}, n = {n}, N = {total}, δ = {delta}"
            );
        }
    }

    /// For any predicate that is false then true, from any guess, and for values that
    /// meet the level anywhere (before, inside or past the range), rising or falling,
    /// steeply or gently, the answer is first_true's.
    #[test]
    fn the_search_from_a_guess_gives_first_trues_answer() {
        let mut rng = ChaCha8Rng::seed_from_u64(68);
        for _ in 0..20_000 {
            let lo = rng.random_range(0..1000u64);
            let hi = lo + rng.random_range(0..5000u64);
            let crossing = rng.random_range(lo as f64 - 10.0..hi as f64 + 10.0);
            let scale = (rng.random::<f64>() * 20.0 - 10.0).exp();
            let bend = rng.random::<f64>();
            let rising = rng.random::<bool>();
            let value = |m: u64| {
                let x = (m as f64 - crossing) * scale;
                let v = x + bend * x * x.abs() / (1.0 + x.abs());
                if rising { v } else { -v }
            };
            let level = rng.random_range(-3.0..3.0);
            let value = |m: u64| value(m) + level;
            let test = |v: f64| if rising { v > level } else { v <= level };
            let guess = rng.random_range(0..hi + 20);
            assert_eq!(
                first_true_from(lo, hi, guess, value, test, level),
                first_true(lo, hi, |m| test(value(m))),
                "[{lo}, {hi}] from {guess}, crossing {crossing}, scale {scale}"
            );
        }
    }

    /// Seeded counts from 1 to 10⁶ responses, every share of successes from none to
    /// all, at usual and extreme levels: the ends found by Newton's method (where it
    /// applies) and by Brent's from the guesses' brackets are the ends found from the
    /// whole of `[0, p̂]` and `[p̂, 1]` (as before the searches started from a guess) to
    /// within a relative 4e-15. Each stops within a few ulps of where the same computed
    /// tail crosses δ/2, which is as well as any knows the end; on 20,000 such draws
    /// the largest difference was 1.5e-15 (11 ulps).
    #[test]
    fn both_ends_from_a_guess_are_as_before() {
        let mut rng = ChaCha8Rng::seed_from_u64(1934);
        for _ in 0..3000 {
            let n = (rng.random::<f64>() * 1e6f64.ln()).exp() as u64 + 1;
            let s = match rng.random_range(0..8) {
                0 => 0,
                1 => n,
                2 => 1.min(n),
                _ => rng.random_range(0..=n),
            };
            let delta = [0.05, 0.01, 0.1, 0.05 / 300.0, 1e-9, 0.5][rng.random_range(0..6)];
            let (want_lo, want_hi) = clopper_pearson_as_before(s, n, delta);
            let mut found = vec![clopper_pearson(s, n, delta)];
            if 0 < s && s < n {
                let tails = Tails::new(s, n, (0.5 * delta).ln());
                found.push(bracketed_ends(tails, guesses(s, n, delta)));
            }
            for (lo, hi) in found {
                for (got, want) in [(lo, want_lo), (hi, want_hi)] {
                    assert!(
                        (got - want).abs() <= 4e-15 * want,
                        "S = {s}, n = {n}, δ = {delta}: {lo:e}, {hi:e} against {want_lo:e}, {want_hi:e}"
                    );
                }
            }
        }
    }

    /// At the usual levels (50 % to 99 %) the approximate ends are inside the bracket
    /// Brent's method would try first, and from S = 2 on Newton's method settles from
    /// them, so the short way is the one taken: seeded counts from 2 to 10⁶ responses,
    /// every share but none and all.
    #[test]
    fn the_guess_is_inside_the_first_bracket_at_usual_levels() {
        let mut rng = ChaCha8Rng::seed_from_u64(1942);
        for _ in 0..5000 {
            let n = (rng.random::<f64>() * 1e6f64.ln()).exp() as u64 + 2;
            let s = rng.random_range(1..n);
            let delta = [0.5, 0.1, 0.05, 0.01][rng.random_range(0..4)];
            let (lo, hi) = clopper_pearson(s, n, delta);
            let z = normal_two_sided(delta);
            let (sf, rest, p_hat) = (s as f64, (n - s) as f64, s as f64 / n as f64);
            for (guess, end) in [
                (beta_quantile_guess(sf, rest + 1.0, -z), lo),
                (beta_quantile_guess(sf + 1.0, rest, z), hi),
            ] {
                let guess = guess.unwrap_or(f64::NAN);
                assert!(
                    (guess - end).abs() < EXPECTED_WITHIN * (p_hat - guess).abs(),
                    "S = {s}, n = {n}, δ = {delta}: guess {guess:e}, end {end:e}"
                );
            }
            let (Some(lower), Some(upper)) = guesses(s, n, delta) else {
                unreachable!("checked above");
            };
            let mut tails = Tails::new(s, n, (0.5 * delta).ln());
            // From S = 1 the first step can overshoot 0 (the lower end is then near 0 and
            // the guess above it); Brent's method takes that end.
            assert!(
                s == 1 || newton_ends(&mut tails, (lower, upper)).is_some(),
                "S = {s}, n = {n}, δ = {delta}: Newton's method did not settle"
            );
        }
    }
}
