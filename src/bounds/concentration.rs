//! Concentration inequalities: Chebyshev, Hoeffding (1963) with the Serfling (1974) /
//! Bardenet & Maillard (2015) form for sampling without replacement, the Chernoff
//! relative-entropy bound, and the empirical Bernstein bound of Maurer & Pontil (2009).

use super::roots::brent;

/// Chebyshev with the worst-case variance ¼: `P(|p̂ − p| ≥ ε) ≤ 1/(4nε²)`, so
/// `ε = f / (2√(nδ))`, `f` the finite population factor.
pub fn chebyshev(n: f64, delta: f64, fpc: f64) -> f64 {
    fpc / (2.0 * (n * delta).sqrt())
}

/// Hoeffding: `√(ρ ln(2/δ) / (2n))`. `ρ = 1` with replacement; without replacement
/// from `N` units `ρ = 1 − (n−1)/N` for `n ≤ N/2` (Serfling 1974) and
/// `ρ = (1 − n/N)(1 + 1/n)` above (Bardenet & Maillard 2015, Theorem 2.4).
pub fn hoeffding(n: f64, delta: f64, rho: f64) -> f64 {
    (rho * (2.0 / delta).ln() / (2.0 * n)).sqrt()
}

/// The Serfling / Bardenet–Maillard factor `ρ` for `n` of `total` drawn without replacement.
pub fn serfling_factor(n: u64, total: u64) -> f64 {
    let (nf, tf) = (n as f64, total as f64);
    if 2 * n <= total {
        1.0 - (nf - 1.0) / tf
    } else {
        (1.0 - nf / tf) * (1.0 + 1.0 / nf)
    }
}

/// Relative entropy `KL(a ‖ p)` between Bernoulli(a) and Bernoulli(p).
pub fn kl(a: f64, p: f64) -> f64 {
    let mut v = 0.0;
    if a > 0.0 {
        v += a * (a / p).ln();
    }
    if a < 1.0 {
        v += (1.0 - a) * ((1.0 - a).ln() - (-p).ln_1p());
    }
    v
}

/// The Chernoff set `{p : n·KL(p̂ ‖ p) ≤ ln(2/δ)}`, both ends by bracketed root finding
/// (closed forms at p̂ = 0 and p̂ = 1).
pub fn chernoff(p_hat: f64, n: f64, delta: f64) -> (f64, f64) {
    let level = (2.0 / delta).ln();
    let gap = |p: f64| n * kl(p_hat, p) - level;
    let lower = if p_hat <= 0.0 {
        0.0
    } else if p_hat >= 1.0 {
        (-level / n).exp()
    } else {
        brent(gap, 0.0, p_hat)
    };
    let upper = if p_hat >= 1.0 {
        1.0
    } else if p_hat <= 0.0 {
        -(-level / n).exp_m1()
    } else {
        brent(gap, p_hat, 1.0)
    };
    (lower, upper)
}

/// Empirical Bernstein (Maurer & Pontil 2009, Theorem 4), two-sided by a union bound:
/// `√(2 V ln(4/δ) / n) + 7 ln(4/δ) / (3(n − 1))`, `V` the unbiased sample variance
/// `n p̂ q̂ / (n − 1)`. Needs `n ≥ 2`.
pub fn bernstein(p_hat: f64, n: f64, delta: f64) -> f64 {
    let level = (4.0 / delta).ln();
    let variance = n * p_hat * (1.0 - p_hat) / (n - 1.0);
    (2.0 * variance * level / n).sqrt() + 7.0 * level / (3.0 * (n - 1.0))
}
