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
//!
//! The search ([`search`]) raises ε from 0: it finds a pivot whose candidate exceeds δ
//! ([`violator`]), moves ε to where that pivot's candidate falls to δ
//! ([`pivot_margin`]), and stops when no pivot exceeds δ. Its answer is the number
//! this module gives, to the last bit; everything below only gets there faster.
//!
//! Faster, with the same answer:
//! - The supremum `F(ε)` can only fall as ε grows (the event shrinks), and in practice
//!   it falls through δ where the upper cut of every pivot moves out by one count: at
//!   `ε = m/(2n)` for some whole m, each pivot's value drops by a point probability.
//!   [`certify`] checks one such jump directly: one sweep over the pivots gives every
//!   value just before the jump (cut `k + m`) and just after it (`k + m + 1`); if some
//!   are clearly above δ before it, and every value after it and every other value
//!   before it is clearly below δ, then the search stops exactly at the float where
//!   the last of those pivots' cut moves (the proof is in [`certify`]'s note), and that
//!   float is computed directly. Answers that fall inside a piece instead (about one n
//!   in 80) go through the search itself.
//! - [`violator`] gives the same pivot as the search over every pivot
//!   ([`violator_by_pivots`]) from one sweep ([`sweep`]): the pivots that can matter,
//!   with their values stepped from one pivot to the next, and a proof that every other
//!   pivot is below δ. A value within its error of δ is decided the slow way, so every
//!   decision is the search's own.
//! - The memo keeps, with each margin, the jump it was found at, so the next n tries
//!   that jump first (a cell's n grows one at a time; the jump moves every hundred or
//!   so). It holds at most [`MEMO_CAPACITY`] margins and drops the least recently used
//!   half when full.

mod sweep;

use std::collections::HashMap;
use std::sync::{Mutex, OnceLock};

use super::concentration::{hoeffding, kl};
use super::special::{ln_binom_lower, ln_binom_pmf, ln_binom_upper, normal_two_sided};

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
/// is at most δ, that is if the margin `eps` holds for every p. Looks at every pivot
/// in turn; [`violator`] gives the same answer faster.
fn violator_by_pivots(n: u64, eps: f64, delta: f64) -> Option<u64> {
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

/// The search: from ε = 0, move ε to where a violating pivot's candidate falls to δ
/// until no pivot exceeds δ. `find` is [`violator`] or [`violator_by_pivots`] (the same
/// answers).
fn search(n: u64, delta: f64, find: impl Fn(u64, f64, f64) -> Option<u64>) -> f64 {
    // Hoeffding's margin always holds, so the answer lies at or below it.
    let hi = hoeffding(n as f64, delta, 1.0).min(1.0);
    let mut eps = 0.0;
    while let Some(k) = find(n, eps, delta) {
        if eps >= hi {
            break;
        }
        eps = pivot_margin(n, k, eps, hi, delta);
    }
    eps
}

/// Below this n the search looks at every pivot (a tenth of a millisecond or less);
/// the sweep's series needs p and q of at least 150/n near the centre.
const SWEEP_FROM: u64 = 500;

/// How far from δ, relative to δ, a value from a sweep must be (beyond its own error)
/// to be decided from the sweep; closer values are decided by [`Pivot::exceeds`]. The
/// sweep's values are within about 1e-12 of the exact tails, and the slow way's own
/// rounding is smaller still.
const TOLERANCE: f64 = 1e-9;

/// Where a value lies against δ, given its error.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Side {
    Above,
    Below,
    Close,
}

fn side_of(value: f64, error: f64, delta: f64) -> Side {
    let margin = error + TOLERANCE * delta;
    if value > delta + margin {
        Side::Above
    } else if value < delta - margin {
        Side::Below
    } else {
        Side::Close
    }
}

/// The numeric cut of pivot `k` at `eps`, as [`Pivot::new`] computes it.
fn cut_at(n: u64, k: u64, eps: f64) -> u64 {
    (k as f64 + 2.0 * n as f64 * eps).floor() as u64 + 1
}

/// The same pivot as [`violator_by_pivots`], from a sweep: the first pivot in the same
/// order whose candidate exceeds δ, each decided from its swept value unless that is
/// within its error of δ, then by [`Pivot::exceeds`] itself.
fn violator(n: u64, eps: f64, delta: f64) -> Option<u64> {
    let nf = n as f64;
    if n < SWEEP_FROM || eps.is_nan() || eps <= 0.0 {
        return violator_by_pivots(n, eps, delta);
    }
    let centre = (nf * (0.5 - eps)).round().clamp(0.0, nf) as u64;
    let exact = |k: u64| Pivot::new(n, k, eps).is_some_and(|pivot| pivot.exceeds(delta));
    // The search's order: centre, centre + 1, centre − 1, centre + 2, …
    let at_step = |step: u64| {
        let right = centre.checked_add(step).filter(|&k| k <= n);
        let left = if step > 0 {
            centre.checked_sub(step)
        } else {
            None
        };
        [right, left]
    };
    // Early on the first pivots exceed δ by far: look at them directly.
    for step in 0..4 {
        if let Some(k) = at_step(step).into_iter().flatten().find(|&k| exact(k)) {
            return Some(k);
        }
    }
    let base = (2.0 * nf * eps).floor() + 1.0;
    if !(base >= 1.0 && base < nf) {
        return violator_by_pivots(n, eps, delta);
    }
    let base = base as u64;
    let Some(swept) = sweep::sweep(n, eps, base + 1, delta * (1.0 - TOLERANCE)) else {
        return violator_by_pivots(n, eps, delta);
    };
    let (first, last) = swept.range();
    let exceeds = |k: u64| {
        let Some((post, pre, error)) = swept.get(k) else {
            // Proved below δ (1 − TOLERANCE).
            return false;
        };
        let cut = cut_at(n, k, eps);
        let value = if cut == k + base {
            pre
        } else if cut == k + base + 1 {
            post
        } else {
            return exact(k);
        };
        match side_of(value, error, delta) {
            Side::Above => true,
            Side::Below => false,
            Side::Close => exact(k),
        }
    };
    let reach = (centre.saturating_sub(first)).max(last.saturating_sub(centre));
    (0..=reach).find_map(|step| at_step(step).into_iter().flatten().find(|&k| exceeds(k)))
}

/// Why a jump could not be shown to be the answer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Miss {
    /// A value after the jump is not clearly below δ: the answer lies further out.
    StillAbove,
    /// No value before the jump is clearly above δ: the answer lies further in.
    AlreadyBelow,
    /// Some value is within its error of δ, or the fast way does not apply.
    Unclear,
}

/// The smallest float x with `2.0 * n * x ≥ m` as the pivots compute it: from there on
/// every pivot's cut is at least `k + m + 1`.
fn first_after(n: u64, m: u64) -> f64 {
    let (nf, mf) = (n as f64, m as f64);
    let mut x = mf / (2.0 * nf);
    while 2.0 * nf * x < mf {
        x = x.next_up();
    }
    while 2.0 * nf * x.next_down() >= mf {
        x = x.next_down();
    }
    x
}

/// Whether the search's answer is the jump of the cuts from `k + m` to `k + m + 1`,
/// and if so that answer.
///
/// One sweep at `x₊` (the first float where every cut is past `k + m`) gives each
/// pivot's value after the jump and, with one more point probability, before it. Let S
/// be the pivots whose value before is clearly above δ. If every value after the jump,
/// and every value before it outside S, is clearly below δ, the answer is e, the float
/// where the last pivot of S has its cut moved (cuts move at slightly different floats
/// because `k + 2nε` is rounded, larger k first):
/// - below e the margin fails: up to a float 1e-12 below x₊ the last pivot of S is
///   still before its jump, with a value clearly above δ; further down, `F`, the
///   supremum over p, is at least that value (it cannot rise with ε), and some pivot's
///   candidate shows it (a cut moved early by rounding only lowers a value to its value
///   just after that jump, which is again at least `F` there);
/// - from e on every candidate is at most δ: between e and x₊ each pivot is either
///   after its jump or outside S, and beyond x₊ `F` is at most its value at the jump.
///
/// So the search, which only ever stops at a float where the margin holds with the
/// margin failing one float below, and never passes such a float (every step it takes
/// lands where one pivot's candidate has just fallen to δ), stops at e.
fn certify(n: u64, m: u64, delta: f64) -> Result<f64, Miss> {
    let after = first_after(n, m);
    let swept = sweep::sweep(n, after, m + 1, delta * (1.0 - TOLERANCE)).ok_or(Miss::Unclear)?;
    let mut last_to_jump = StandIns::new(m);
    for (k, (post, pre, error)) in swept.pivots() {
        match side_of(post, error, delta) {
            Side::Below => {}
            Side::Above => return Err(Miss::StillAbove),
            Side::Close => return Err(Miss::Unclear),
        }
        match side_of(pre, error, delta) {
            Side::Above => last_to_jump.add(k),
            Side::Below => {}
            Side::Close => return Err(Miss::Unclear),
        }
    }
    if last_to_jump.is_empty() {
        return Err(Miss::AlreadyBelow);
    }
    let before = after * (1.0 - 1e-12);
    let e = last_to_jump.jump(n, before, after).ok_or(Miss::Unclear)?;
    if e > hoeffding(n as f64, delta, 1.0).min(1.0) {
        return Err(Miss::Unclear);
    }
    Ok(e)
}

/// The pivots that decide when a set of pivots has its cuts moved from `k + m` to
/// `k + m + 1`. `k + 2nε` is rounded to the floats near `k + m`, so a pivot's cut moves
/// once `m − 2nε` is below half the spacing of the floats just under `k + m` (at exactly
/// half, when `k + m` is the even neighbour): the pivots with the finest spacing move
/// last and those with the coarsest first, and one even and one odd of each stand for
/// all the others.
struct StandIns {
    m: u64,
    finest: [Option<(f64, u64)>; 2],
    coarsest: [Option<(f64, u64)>; 2],
}

impl StandIns {
    fn new(m: u64) -> StandIns {
        StandIns {
            m,
            finest: [None; 2],
            coarsest: [None; 2],
        }
    }

    fn is_empty(&self) -> bool {
        self.finest.iter().all(Option::is_none)
    }

    fn add(&mut self, k: u64) {
        let v = (k + self.m) as f64;
        let spacing = v - v.next_down();
        // Whether v is an odd multiple of the spacing: the last bit of its significand
        // (what `(v / spacing) as u64 % 2` gives, without the division that held up
        // `certify`'s loop over the pivots).
        let parity = (v.to_bits() & 1) as usize;
        if self.finest[parity].is_none_or(|(g, _)| spacing < g) {
            self.finest[parity] = Some((spacing, k));
        }
        if self.coarsest[parity].is_none_or(|(g, _)| spacing > g) {
            self.coarsest[parity] = Some((spacing, k));
        }
    }

    /// The smallest float in `(before, after]` at which every pivot added has its cut
    /// moved; `None` when one has moved already at `before`.
    fn jump(&self, n: u64, before: f64, after: f64) -> Option<f64> {
        let m = self.m;
        let stand_ins = |set: &[Option<(f64, u64)>; 2]| -> Vec<u64> {
            set.iter().flatten().map(|&(_, k)| k).collect()
        };
        let (finest, coarsest) = (stand_ins(&self.finest), stand_ins(&self.coarsest));
        if coarsest.iter().any(|&k| cut_at(n, k, before) != k + m) {
            return None;
        }
        let moved = |x: f64| finest.iter().all(|&k| cut_at(n, k, x) == k + m + 1);
        let (mut lo, mut hi) = (before.to_bits(), after.to_bits());
        while lo + 1 < hi {
            let mid = lo + (hi - lo) / 2;
            if moved(f64::from_bits(mid)) {
                hi = mid;
            } else {
                lo = mid;
            }
        }
        Some(f64::from_bits(hi))
    }
}

/// The jump to try first without a neighbour's: where the normal approximation puts
/// the margin, `2nε ≈ z√n`.
fn first_guess(n: u64, delta: f64) -> u64 {
    ((normal_two_sided(delta) * (n as f64).sqrt()).floor() as u64 + 1).max(2)
}

/// The margin, and the jump it lies at when [`certify`] showed it (`None` when the
/// search found it).
fn compute(n: u64, delta: f64, hint: Option<u64>) -> (f64, Option<u64>) {
    if n < SWEEP_FROM {
        return (search(n, delta, violator_by_pivots), None);
    }
    let mut m = hint.unwrap_or_else(|| first_guess(n, delta));
    let (mut above_at, mut below_at) = (None, None);
    for _ in 0..4 {
        match certify(n, m, delta) {
            Ok(e) => return (e, Some(m)),
            Err(Miss::StillAbove) => {
                // Above at m but below at m + 1: the answer is inside a piece.
                if below_at == Some(m + 1) {
                    break;
                }
                above_at = Some(m);
                m += 1;
            }
            Err(Miss::AlreadyBelow) => {
                if above_at == Some(m - 1) || m <= 2 {
                    break;
                }
                below_at = Some(m);
                m -= 1;
            }
            Err(Miss::Unclear) => break,
        }
    }
    (search(n, delta, violator), None)
}

/// At most this many margins are kept; when full, the least recently used half goes.
pub const MEMO_CAPACITY: usize = 4096;

/// A margin kept for `(n, δ)`, the jump it lies at, and when it was last used.
#[derive(Clone, Copy, Debug)]
struct Kept {
    margin: f64,
    jump: Option<u64>,
    used: u64,
}

/// Margins by `(n, bits of δ)`, bounded by [`MEMO_CAPACITY`].
#[derive(Debug, Default)]
struct Memo {
    kept: HashMap<(u64, u64), Kept>,
    clock: u64,
}

impl Memo {
    fn get(&mut self, n: u64, delta: f64) -> Option<f64> {
        self.clock += 1;
        let clock = self.clock;
        self.kept.get_mut(&(n, delta.to_bits())).map(|k| {
            k.used = clock;
            k.margin
        })
    }

    /// The jump of the nearest n (within 4) whose margin lay at one.
    fn hint(&self, n: u64, delta: f64) -> Option<u64> {
        (1..=4u64).find_map(|d| {
            [n.checked_sub(d), n.checked_add(d)]
                .into_iter()
                .flatten()
                .find_map(|near| self.kept.get(&(near, delta.to_bits()))?.jump)
        })
    }

    fn insert(&mut self, n: u64, delta: f64, margin: f64, jump: Option<u64>) {
        if self.kept.len() >= MEMO_CAPACITY {
            let mut ages: Vec<u64> = self.kept.values().map(|k| k.used).collect();
            let middle = ages.len() / 2;
            let (_, &mut median, _) = ages.select_nth_unstable(middle);
            self.kept.retain(|_, k| k.used > median);
        }
        self.clock += 1;
        let used = self.clock;
        self.kept
            .insert((n, delta.to_bits()), Kept { margin, jump, used });
    }
}

fn memo() -> std::sync::MutexGuard<'static, Memo> {
    static MEMO: OnceLock<Mutex<Memo>> = OnceLock::new();
    MEMO.get_or_init(Default::default)
        .lock()
        .unwrap_or_else(|e| e.into_inner())
}

/// The exact worst-case binomial margin for `n ≤ EXACT_LIMIT` responses (memoised).
pub fn margin(n: u64, delta: f64) -> f64 {
    let hint = {
        let mut memo = memo();
        if let Some(m) = memo.get(n, delta) {
            return m;
        }
        memo.hint(n, delta)
    };
    let (m, jump) = compute(n, delta, hint);
    memo().insert(n, delta, m, jump);
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

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// The stand-ins' parity from the last bit of the significand is the quotient's
    /// parity it replaced, for every whole number up to 2²⁰, seeded ones up to 2⁵³ and
    /// the powers of two and their neighbours (odd ones appear from 2⁵²).
    #[test]
    fn the_parity_is_the_quotients() {
        let quotient = |v: f64| ((v / (v - v.next_down())) as u64 % 2) as usize;
        let mut rng = ChaCha8Rng::seed_from_u64(52);
        let seeded = (0..100_000).map(|_| rng.random_range(1..1u64 << 53));
        let powers = (0..=53).flat_map(|e: u32| {
            let p = 1u64 << e;
            [p - 1, p, p + 1]
        });
        let mut odd = 0;
        for x in (1..1u64 << 20)
            .chain(seeded)
            .chain(powers)
            .filter(|&x| x > 0)
        {
            let mut stand_ins = StandIns::new(0);
            stand_ins.add(x);
            let v = x as f64;
            let parity = quotient(v);
            odd += parity;
            assert!(stand_ins.finest[parity].is_some(), "{x}: parity {parity}");
            assert!(
                stand_ins.finest[1 - parity].is_none(),
                "{x}: parity {parity}"
            );
        }
        assert!(odd > 0, "the sample holds odd multiples");
    }

    /// The margin as this module computed every one of them before the sweep: the
    /// search looking at every pivot. The reference the fast way must equal bit for bit.
    fn reference(n: u64, delta: f64) -> f64 {
        search(n, delta, violator_by_pivots)
    }

    /// Levels a study meets: the usual ones, Bonferroni shares of them over 24 and 300
    /// statements, and a very high confidence.
    const LEVELS: [f64; 7] = [0.05, 0.01, 0.1, 0.2, 0.05 / 24.0, 0.05 / 300.0, 1e-6];

    fn assert_same(n: u64, delta: f64, got: f64, want: f64, how: &str) {
        assert!(
            got.to_bits() == want.to_bits(),
            "n = {n}, δ = {delta:e} ({how}): {got:e} against the search's {want:e}"
        );
    }

    /// Sizes drawn at random (seeded) over the whole exact range, each at a level drawn
    /// from LEVELS or at random, without a neighbour's jump to start from.
    #[test]
    fn margins_equal_the_search_over_every_pivot() {
        let mut rng = ChaCha8Rng::seed_from_u64(7_003);
        let mut by_sweep = 0;
        for _ in 0..160 {
            // Log-uniform n from 100, mostly below 30,000 to keep the reference quick.
            let top = if rng.random_bool(0.15) {
                EXACT_LIMIT
            } else {
                30_000
            } as f64;
            let n = (100f64.ln() + rng.random::<f64>() * (top / 100.0).ln())
                .exp()
                .round() as u64;
            let delta = if rng.random_bool(0.7) {
                LEVELS[rng.random_range(0..LEVELS.len())]
            } else {
                (rng.random::<f64>() * (0.5f64.ln() - 1e-6f64.ln()) + 1e-6f64.ln()).exp()
            };
            let (got, jump) = compute(n, delta, None);
            by_sweep += usize::from(jump.is_some());
            assert_same(n, delta, got, reference(n, delta), "no hint");
        }
        // The fast way must have been the one taken for most of them.
        assert!(by_sweep >= 100, "only {by_sweep} of 160 certified");
    }

    /// Runs of consecutive n, as a growing cell meets them, each starting from the
    /// previous jump, across the places where the jump moves on (where the answer
    /// falls inside a piece and the search is used).
    #[test]
    fn consecutive_margins_equal_the_search() {
        for (start, count, delta) in [
            (1_640, 60, 0.05),
            (2_950, 40, 0.01),
            (9_990, 30, 0.05),
            (600, 30, 0.05 / 24.0),
        ] {
            let mut hint = None;
            let (mut certified, mut searched) = (0, 0);
            for n in start..start + count {
                let (got, jump) = compute(n, delta, hint);
                if jump.is_some() {
                    hint = jump;
                    certified += 1;
                } else {
                    searched += 1;
                }
                assert_same(n, delta, got, reference(n, delta), "with the previous jump");
            }
            assert!(
                certified > searched,
                "{start}..: {certified} certified, {searched} searched"
            );
        }
    }

    /// Every n of a range at one level, against the search; slow (about 3 ms an n near
    /// 10,000), so run on request:
    /// `CLOSEOUT_EXHAUSTIVE="1000 20000 0.05" cargo test --release --lib exhaustive -- --ignored`
    /// (first n, last n, δ).
    #[test]
    #[ignore = "minutes; run on request"]
    fn exhaustive_range_equals_the_search() {
        let spec = std::env::var("CLOSEOUT_EXHAUSTIVE").unwrap_or_else(|_| "500 3000 0.05".into());
        let parts: Vec<&str> = spec.split_whitespace().collect();
        let (first, last): (u64, u64) = (parts[0].parse().unwrap(), parts[1].parse().unwrap());
        let delta: f64 = parts[2].parse().unwrap();
        let mut hint = None;
        let mut searched = 0;
        for n in first..=last {
            let (got, jump) = compute(n, delta, hint);
            if jump.is_some() {
                hint = jump;
            } else {
                searched += 1;
            }
            assert_same(n, delta, got, reference(n, delta), "exhaustive");
        }
        eprintln!("{first}..={last} at δ = {delta}: all equal; {searched} found by the search");
    }

    /// A jump that is not the answer is refused, either way.
    #[test]
    fn a_wrong_jump_is_refused() {
        let (n, delta) = (10_001, 0.05);
        let (answer, jump) = compute(n, delta, None);
        let m = jump.expect("10,001 at 5 % lies at a jump");
        assert_eq!(certify(n, m, delta), Ok(answer));
        assert_eq!(certify(n, m - 1, delta), Err(Miss::StillAbove));
        assert_eq!(certify(n, m + 1, delta), Err(Miss::AlreadyBelow));
    }

    /// The sweep's violator is the search's, at margins around the answer (where the
    /// decisions are close), at the floats where the cuts move, and below the answer
    /// where the search passes on its way up.
    #[test]
    fn the_violator_is_the_same_pivot() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for &(n, delta) in &[
            (1_000, 0.05),
            (4_321, 0.01),
            (10_001, 0.05),
            (25_000, 0.001),
        ] {
            let answer = reference(n, delta);
            let m = (2.0 * n as f64 * answer).round() as u64;
            let mut margins = vec![
                answer,
                answer.next_down(),
                answer.next_up(),
                answer * (1.0 - 1e-9),
                answer * (1.0 + 1e-9),
                answer * 0.999,
                answer * 0.99,
                answer * 1.001,
                first_after(n, m),
                first_after(n, m).next_down(),
                first_after(n, m - 1),
                first_after(n, m + 1).next_down(),
            ];
            margins.extend((0..8).map(|_| answer * rng.random_range(0.95..1.05)));
            for eps in margins {
                assert_eq!(
                    violator(n, eps, delta),
                    violator_by_pivots(n, eps, delta),
                    "n = {n}, δ = {delta}, ε = {eps:e}"
                );
            }
        }
    }

    /// `holds` (which the size search asks at every n) answers as the search over every
    /// pivot does, on both sides of the smallest passing n.
    #[test]
    fn holds_agrees_with_the_search_over_every_pivot() {
        let (eps, delta) = (0.03, 0.05);
        for n in (1_000..1_200)
            .step_by(7)
            .chain([1_083, 1_084, 1_085, 5_000])
        {
            assert_eq!(
                holds(n, eps, delta),
                violator_by_pivots(n, eps, delta).is_none(),
                "n = {n}"
            );
        }
    }

    /// The memo never holds more than its capacity, keeps what was used lately, and
    /// gives the same margin for an n it dropped.
    #[test]
    fn the_memo_stays_bounded_and_keeps_recent_margins() {
        let mut local = Memo::default();
        let delta = 0.05;
        local.insert(1, delta, 0.5, None);
        for n in 2..(3 * MEMO_CAPACITY as u64) {
            local.insert(n, delta, 1.0 / n as f64, Some(n));
            // Keep n = 1 in use.
            assert_eq!(local.get(1, delta), Some(0.5), "n = {n}");
            assert!(local.kept.len() <= MEMO_CAPACITY);
        }
        let last = 3 * MEMO_CAPACITY as u64 - 1;
        assert_eq!(local.get(last, delta), Some(1.0 / last as f64));
        // The oldest entries went, and a neighbour's jump is found within 4.
        assert_eq!(local.get(2, delta), None);
        assert_eq!(local.hint(last + 3, delta), Some(last));
        assert_eq!(local.hint(last + 5, delta), None);
        // Through `margin`: the same answer before and after the memo dropped it.
        let first = margin(12_345, 0.05);
        for n in 0..(MEMO_CAPACITY as u64 + 10) {
            memo().insert(1_000_000 + n, 0.05, 0.0, None);
        }
        assert!(memo().kept.len() <= MEMO_CAPACITY);
        assert_eq!(margin(12_345, 0.05).to_bits(), first.to_bits());
    }
}
