//! The exact worst-case binomial margin: the smallest ε with
//! `sup_p P_p(|X/n − p| > ε) ≤ δ`, `X ~ Binomial(n, p)`. It depends on n and δ only,
//! holds for every p, and is the tightest margin any rule of the form `p̂ ± ε(n)` has.
//!
//! How the supremum over a continuum of p is found exactly: for fixed ε the event
//! `{|X − np| > nε}` is a union of two tails whose cut points move with p, so the
//! probability is piecewise in p; on each piece it is quasi-convex (its derivative
//! changes sign once), so its supremum is approached at the ends of the pieces. By the
//! symmetry p ↔ 1 − p it suffices to take the pieces' left ends `p₀ = k/n + ε`, where the
//! value approached is `P_{p₀}(X ≤ k) + P_{p₀}(X > k + 2nε)` (k = 0, 1, …). The
//! supremum is the largest of these "candidate" values.

use std::collections::HashMap;
use std::sync::{Mutex, OnceLock};

use super::concentration::{hoeffding, kl};
use super::special::{ln_binom_lower, ln_binom_pmf, ln_binom_upper};

/// Above this n the exact computation (linear in n) gives way to Hoeffding's margin,
/// which is never smaller and so keeps the worst-case guarantee.
pub const EXACT_LIMIT: u64 = 200_000;

/// Pivot `k` at margin `eps` (see the module note): the piece's left end
/// `p = k/n + ε`, and the two tails `X ≤ k` and `X ≥ cut`, `cut` the first count past
/// `k + 2nε` (`None` when no count is).
struct Pivot {
    n: u64,
    k: u64,
    p: f64,
    q: f64,
    cut: Option<u64>,
}

impl Pivot {
    /// `None` when the piece starts past p = 1 (its value is then 0).
    fn new(n: u64, k: u64, eps: f64) -> Option<Pivot> {
        let nf = n as f64;
        let p = k as f64 / nf + eps;
        if p > 1.0 {
            return None;
        }
        let q = (n - k) as f64 / nf - eps;
        let cut = (k as f64 + 2.0 * nf * eps).floor() as u64 + 1;
        Some(Pivot {
            n,
            k,
            p,
            q,
            cut: (cut <= n).then_some(cut),
        })
    }

    /// The candidate value `P_p(X ≤ k) + P_p(X ≥ cut)`.
    fn value(&self) -> f64 {
        let (n, p, q) = (self.n, self.p, self.q);
        let below = ln_binom_lower(self.k, n, p, q).exp();
        below + self.cut.map_or(0.0, |c| ln_binom_upper(c, n, p, q).exp())
    }

    /// Whether the value exceeds δ: each tail summed outward term by term with the
    /// rest bounded geometrically,
    /// until the sum is clearly above or clearly below δ (by a relative 10⁻¹²); only
    /// a value that close to δ is computed in full.
    fn exceeds(&self, delta: f64) -> bool {
        match self.bracket(delta) {
            Some(decided) => decided,
            None => self.value() > delta,
        }
    }

    /// Sum both tails outward until the value is known to be above δ (`Some(true)`)
    /// or at most δ (`Some(false)`), or `None` when that takes too long or a tail's
    /// terms do not shrink from its first.
    fn bracket(&self, delta: f64) -> Option<bool> {
        let (n, p, q) = (self.n, self.p, self.q);
        let nf = n as f64;
        // Each tail: its next term, the ratio to the term after, and how it steps.
        let kf = self.k as f64;
        let mut below = Tail {
            term: ln_binom_pmf(self.k, n, p, q).exp(),
            // P(X ≤ k) outward: t(j+1)/t(j) = (k − j) q / ((n − k + j + 1) p).
            ratio: move |j: f64| (kf - j) * q / ((nf - kf + j + 1.0) * p),
            steps: self.k,
            sum: 0.0,
            j: 0.0,
        };
        let cut = self.cut.map(|c| c as f64);
        let mut above = self.cut.map(|c| Tail {
            term: ln_binom_pmf(c, n, p, q).exp(),
            // P(X ≥ c) outward: t(j+1)/t(j) = (n − c − j) p / ((c + j + 1) q).
            ratio: move |j: f64| {
                let cf = cut.unwrap_or(0.0);
                (nf - cf - j) * p / ((cf + j + 1.0) * q)
            },
            steps: n - c,
            sum: 0.0,
            j: 0.0,
        });
        let (high, low) = (delta * (1.0 + 1e-12), delta * (1.0 - 1e-12));
        for _ in 0..4096 {
            let (b_sum, b_rest) = below.step()?;
            let (a_sum, a_rest) = match above.as_mut() {
                Some(a) => a.step()?,
                None => (0.0, 0.0),
            };
            let sum = b_sum + a_sum;
            if sum > high {
                return Some(true);
            }
            if sum + b_rest + a_rest < low {
                return Some(false);
            }
            if b_rest == 0.0 && a_rest == 0.0 {
                return None;
            }
        }
        None
    }
}

/// One binomial tail summed outward from its first term, for [`Pivot::bracket`].
struct Tail<R: Fn(f64) -> f64> {
    term: f64,
    ratio: R,
    /// Terms after the first one.
    steps: u64,
    sum: f64,
    j: f64,
}

impl<R: Fn(f64) -> f64> Tail<R> {
    /// Add the next term: the sum so far and a bound on the rest (`None` when the
    /// terms do not shrink, so the rest cannot be bounded this way).
    fn step(&mut self) -> Option<(f64, f64)> {
        if self.j as u64 > self.steps {
            return Some((self.sum, 0.0));
        }
        self.sum += self.term;
        if self.j as u64 == self.steps {
            self.j += 1.0;
            return Some((self.sum, 0.0));
        }
        let r = (self.ratio)(self.j);
        if r.is_nan() || r >= 1.0 {
            return None;
        }
        self.term *= r;
        self.j += 1.0;
        // Later ratios are smaller: the rest is at most term / (1 − r).
        Some((self.sum, self.term / (1.0 - r)))
    }
}

/// The candidate value for pivot `k` at margin `eps`.
fn candidate(n: u64, k: u64, eps: f64) -> f64 {
    Pivot::new(n, k, eps).map_or(0.0, |pivot| pivot.value())
}

/// The first pivot whose candidate value exceeds δ at `eps`, searching outward from
/// the pivot nearest p = ½ (where the worst cases lie), or `None` if every candidate
/// is at most δ, that is if the margin `eps` holds for every p.
fn violator(n: u64, eps: f64, delta: f64) -> Option<u64> {
    let nf = n as f64;
    let centre = (nf * (0.5 - eps)).round().clamp(0.0, nf) as u64;
    let check = |k: u64| Pivot::new(n, k, eps).is_some_and(|pivot| pivot.exceeds(delta));
    // Whether every pivot from `k` outward (away from p = ½) is at most δ: see
    // `outward_bound`. Looked at every 16 pivots.
    let beyond = |k: u64, step: u64| {
        step.is_multiple_of(16)
            && outward_bound(n, k, eps).is_some_and(|b| b <= delta * (1.0 - 1e-9))
    };
    let (mut left_done, mut right_done) = (false, false);
    for step in 0..=n {
        let right = centre + step;
        if right > n {
            right_done = true;
        }
        if !right_done {
            if check(right) {
                return Some(right);
            }
            right_done = beyond(right, step);
        }
        if step > centre {
            left_done = true;
        }
        if step > 0 && !left_done {
            let left = centre - step;
            if check(left) {
                return Some(left);
            }
            left_done = beyond(left, step);
        }
        if left_done && right_done {
            break;
        }
    }
    None
}

/// A bound on the value of pivot `k` and of every pivot further from p = ½, when
/// the pivot lies wholly on one side of ½ (`p + ε ≤ ½` or `p − ε ≥ ½`, with
/// `p = k/n + ε`): Chernoff's bound on each tail with the continuous thresholds,
/// `exp(−n KL(p − ε ‖ p)) + exp(−n KL(p + ε ‖ p))`. Writing
/// `KL(a ‖ b) = ∫ₐᵇ (t − a)/(t(1 − t)) dt` shows both divergences grow as p moves
/// away from ½ while `t(1 − t)` falls over the whole range of t, so the bound at `k`
/// holds for every pivot beyond it. `None` when the pivot straddles ½.
fn outward_bound(n: u64, k: u64, eps: f64) -> Option<f64> {
    let nf = n as f64;
    let p = k as f64 / nf + eps;
    if !(p + eps <= 0.5 || p - eps >= 0.5) || p >= 1.0 {
        return None;
    }
    // p − ε = k/n ≥ 0.
    let below = (-nf * kl((p - eps).max(0.0), p)).exp();
    let above = if p + eps < 1.0 {
        (-nf * kl(p + eps, p)).exp()
    } else {
        0.0
    };
    Some(below + above)
}

/// Whether the margin `eps` holds at `n` for every p: `sup_p P_p(|X/n − p| > eps) ≤ δ`.
pub fn holds(n: u64, eps: f64, delta: f64) -> bool {
    violator(n, eps, delta).is_none()
}

/// The smallest margin at which pivot `k` alone stays at most δ, between `lo` (where
/// it exceeds δ) and `hi` (where it does not), to the last bit.
///
/// The bracket is first narrowed by regula falsi on `ln value − ln δ` (the Illinois
/// variant, Dowell & Jarratt 1971), which is smooth in the margin, so a dozen values
/// do what bisection needs sixty for; then bisection finishes the last few bits. Every
/// step keeps `value(lo) > δ ≥ value(hi)`, so the answer is the one plain bisection
/// gives wherever the value falls through δ once.
fn pivot_margin(n: u64, k: u64, mut lo: f64, mut hi: f64, delta: f64) -> f64 {
    let target = delta.ln();
    let gap = |eps: f64| candidate(n, k, eps).ln() - target;
    let (mut g_lo, mut g_hi) = (gap(lo), gap(hi));
    let mut side = 0i8;
    for _ in 0..40 {
        if !(g_lo.is_finite() && g_hi.is_finite()) || hi - lo <= 4.0 * f64::EPSILON * hi {
            break;
        }
        let mid = hi - g_hi * (hi - lo) / (g_hi - g_lo);
        if !(mid > lo && mid < hi) {
            break;
        }
        let value = candidate(n, k, mid);
        let g = value.ln() - target;
        if value > delta {
            lo = mid;
            g_lo = g;
            if side == -1 {
                g_hi *= 0.5;
            }
            side = -1;
        } else {
            hi = mid;
            g_hi = g;
            if side == 1 {
                g_lo *= 0.5;
            }
            side = 1;
        }
    }
    loop {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            return hi;
        }
        if candidate(n, k, mid) > delta {
            lo = mid;
        } else {
            hi = mid;
        }
    }
}

fn compute(n: u64, delta: f64) -> f64 {
    // Hoeffding's margin always holds, so the answer lies at or below it.
    let hi = hoeffding(n as f64, delta, 1.0).min(1.0);
    let mut eps = 0.0;
    while let Some(k) = violator(n, eps, delta) {
        if eps >= hi {
            break;
        }
        eps = pivot_margin(n, k, eps, hi, delta);
    }
    eps
}

/// The exact worst-case binomial margin for `n ≤ EXACT_LIMIT` responses (memoised).
pub fn margin(n: u64, delta: f64) -> f64 {
    static MEMO: OnceLock<Mutex<HashMap<(u64, u64), f64>>> = OnceLock::new();
    let memo = MEMO.get_or_init(Default::default);
    let key = (n, delta.to_bits());
    if let Some(&m) = memo.lock().unwrap_or_else(|e| e.into_inner()).get(&key) {
        return m;
    }
    let m = compute(n, delta);
    memo.lock()
        .unwrap_or_else(|e| e.into_inner())
        .insert(key, m);
    m
}

/// The Berry–Esseen constant for sums of independent identically distributed terms,
/// `sup |F_n − Φ| ≤ C ρ / (σ³ √n)`: C = 0.4748 (Shevtsova 2011; value from memory).
const BERRY_ESSEEN: f64 = 0.4748;

/// An upper bound on `sup_p P_p(|X/n − p| > eps)` that cannot increase with n: over a
/// grid of intervals of p in (0, ½], the smaller of the Berry–Esseen bound
/// `2Φ(−ε√(n/pq)) + 2C(p² + q²)/√(npq)` and Bernstein's `2 exp(−nε²/(2pq + 2ε/3))`, each
/// taken at the interval's worst end (the normal term and Bernstein's grow with pq, the
/// Berry–Esseen remainder shrinks with it). Every term falls as n grows, so once it is
/// at most δ it stays so.
fn monotone_bound(n: u64, eps: f64) -> f64 {
    const STEPS: u32 = 2000;
    let nf = n as f64;
    let mut worst: f64 = 0.0;
    for i in 0..STEPS {
        let (a, b) = (
            0.5 * f64::from(i) / f64::from(STEPS),
            0.5 * f64::from(i + 1) / f64::from(STEPS),
        );
        let (va, vb) = (a * (1.0 - a), b * (1.0 - b));
        let bernstein = 2.0 * (-nf * eps * eps / (2.0 * vb + 2.0 * eps / 3.0)).exp();
        let berry_esseen = if va > 0.0 {
            let z = eps * (nf / vb).sqrt();
            statrs::function::erf::erfc(z / std::f64::consts::SQRT_2)
                + 2.0 * BERRY_ESSEEN * (1.0 - 2.0 * va) / (nf * va).sqrt()
        } else {
            f64::INFINITY
        };
        worst = worst.max(bernstein.min(berry_esseen));
    }
    // A little room for rounding in the terms above.
    worst * (1.0 + 1e-9)
}

/// The smallest n from which the margin `eps` is guaranteed at every larger n without
/// checking: where [`monotone_bound`] reaches δ, and never past Hoeffding's size.
fn guaranteed_from(eps: f64, delta: f64) -> u64 {
    let hoeffding_n = ((2.0 / delta).ln() / (2.0 * eps * eps)).ceil().max(1.0) as u64;
    super::exact::first_true(1, hoeffding_n, |n| monotone_bound(n, eps) <= delta).min(hoeffding_n)
}

/// For a target margin `eps`: the smallest n at which it holds, and the smallest n from
/// which it holds at every larger n. Every n is checked exactly up to the point from
/// which a bound that cannot increase with n guarantees it. `None` when that point lies
/// past [`EXACT_LIMIT`].
pub fn sizes(eps: f64, delta: f64) -> Option<(u64, u64)> {
    let beyond = guaranteed_from(eps, delta);
    if beyond > EXACT_LIMIT {
        return None;
    }
    // Each n is independent: share them out, interleaved, over the available cores.
    let workers = std::thread::available_parallelism()
        .map_or(1, |c| c.get())
        .min(8) as u64;
    let scan = |offset: u64| {
        let (mut first, mut last_failure) = (None, 0);
        let mut n = 1 + offset;
        while n <= beyond {
            if holds(n, eps, delta) {
                first.get_or_insert(n);
            } else {
                last_failure = n;
            }
            n += workers;
        }
        (first, last_failure)
    };
    let results: Vec<(Option<u64>, u64)> = std::thread::scope(|scope| {
        let handles: Vec<_> = (1..workers).map(|w| scope.spawn(move || scan(w))).collect();
        let mut out = vec![scan(0)];
        // A worker can only fail by panicking, which the lints rule out; fall back to
        // scanning its share here if it ever does.
        for (w, h) in (1..workers).zip(handles) {
            out.push(h.join().unwrap_or_else(|_| scan(w)));
        }
        out
    });
    let first = results.iter().filter_map(|r| r.0).min();
    let last_failure = results.iter().map(|r| r.1).max().unwrap_or(0);
    Some((first.unwrap_or(beyond), last_failure + 1))
}
