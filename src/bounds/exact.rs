//! Exact intervals from the sampling distribution itself: Clopper & Pearson (1934) for
//! sampling with replacement, and its hypergeometric counterpart for a finite
//! population sampled without replacement.

use super::roots::brent;
use super::special::{ln_binom_lower, ln_binom_upper, ln_hyper_lower, ln_hyper_upper};

/// Clopper–Pearson: `lower` solves `P(X ≥ S; n, p) = δ/2`, `upper` solves
/// `P(X ≤ S; n, p) = δ/2`, with the closed forms `(δ/2)^(1/n)` at the ends.
pub fn clopper_pearson(s: u64, n: u64, delta: f64) -> (f64, f64) {
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
    let m_lower = if s == 0 {
        0
    } else {
        // P(X ≥ s | M) rises with M and is 1 at M = hi.
        first_true(lo, hi, |m| ln_hyper_upper(s, n, m, total) > cut)
    };
    let m_upper = if s == n {
        total
    } else {
        // P(X ≤ s | M) falls with M and is 1 at M = lo; the largest M where it exceeds δ/2.
        first_true(lo, hi, |m| ln_hyper_lower(s, n, m, total) <= cut).saturating_sub(1)
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
