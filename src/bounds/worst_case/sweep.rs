//! Every pivot's candidate value at one margin, fast, for the pivots that can matter.
//!
//! Pivot k at margin ε has `p = k/n + ε` and the value `P_p(X ≤ k) + P_p(X ≥ cut)`
//! (see the module above). For a cut offset `s` (cut = k + s) the values of
//! neighbouring pivots are related: moving from pivot i to i − 1 lowers p by `h = 1/n`
//! and every threshold by one, and
//!
//! - `P_{p−h}(X ≤ i − 1) = P_p(X ≤ i) − b(i) + n∫_{p−h}^{p} b_{n−1}(i − 1; u) du`,
//! - `P_{p−h}(X ≥ i + s − 1) = P_p(X ≥ i + s) + b(i + s − 1) − n∫_{p−h}^{p} b_{n−1}(i + s − 2; u) du`,
//!
//! (`d/dp P_p(X ≤ t) = −n b_{n−1}(t; p)`), with `b` the binomial point probability at
//! p. Each integral is the point probability at p times `∫₀¹ exp ψ(w) dw`, where
//! `ψ(w) = t ln(1 − wh/p) + (n − 1 − t) ln(1 + wh/q)` is a power series in w whose
//! coefficients shrink like `(1/np)^i` ([`series`]), and `exp ψ(1)` steps the point
//! probability to the next pivot. These factors change slowly from pivot to pivot, so
//! over a block of pivots they come from a Chebyshev fit through a dozen exact ones
//! ([`Fit`]): each pivot then costs about a hundred flops instead of two tail sums.
//! Point probabilities are recomputed exactly after each block; the tails carry an
//! error that is tracked and handed to the caller, who decides any value that close
//! to δ the slow, exact way.
//!
//! Which pivots: the sweep starts at the pivot nearest p = ½ and walks outward on each
//! side until a bound proves that every pivot further out is below the limit. The
//! bound (see [`Side::beyond`]) is the point-probability bound
//! `b(j) ≤ exp(−n KL(j/n ‖ p)) √(n / (2π j (n − j)))` (Stirling's error is positive and
//! falls, so Loader's form bounds it), times each tail's first terms summed exactly and
//! the rest bounded geometrically; every factor can only fall as the pivot moves away
//! from ½ (checked at the pivot where it is used), so one evaluation covers a block of
//! pivots, and blocks further out can be wider. Far enough out, Chernoff's bound alone
//! (the slow search's `outward_bound`) covers the rest.
//!
//! Pivots right of the centre are handled in the mirror image (`X → n − X`,
//! `p → 1 − p`), so both sides walk the same way: pivot i, `p = (i + a)/n ≤ ½`, tails
//! `P(X ≤ i)` and `P(X ≥ i + s)`.

use super::super::concentration::kl;
use super::super::special::{ln_binom_lower, ln_binom_pmf, ln_binom_upper};

/// Pivots stepped with their own factors at a time, where no fit is used.
const BATCH: usize = 8;

/// The most and the fewest pivots a Chebyshev fit of the factors covers; the point
/// probabilities are computed exactly again after each block.
const BLOCK_MAX: usize = 256;
const BLOCK_MIN: usize = 24;

/// Points a fit goes through.
const NODES: usize = 12;

/// The stepping factors at one pivot (see [`Side::factors`]).
type Factors = [f64; 4];

/// A polynomial fit of the factors over pivot positions `[lo, hi]`: the Chebyshev
/// interpolant through [`NODES`] points, held as a polynomial in
/// `x = (2f − lo − hi)/(hi − lo) ∈ [−1, 1]` (its coefficients fall about as fast as
/// the Chebyshev ones here, so Horner's rule loses nothing).
struct Fit {
    centre: f64,
    inv_half: f64,
    /// `powers[k][f]`: the coefficient of `x^k` for factor f.
    powers: [[f64; 4]; NODES],
}

impl Fit {
    /// The fit through the factors at the Chebyshev points of `[lo, hi]`, if its last
    /// two Chebyshev coefficients show it good to 1e-15 (relative to 1 or to the
    /// factor; the factors themselves carry rounding of a few 1e-16).
    fn through(lo: f64, hi: f64, at: impl Fn(f64) -> Option<Factors>) -> Option<Fit> {
        let cosines = chebyshev_cosines();
        let (centre, half) = (0.5 * (lo + hi), 0.5 * (hi - lo));
        let mut chebyshev = [[0.0; 4]; NODES];
        for row in cosines {
            // row[m] = cos(m θⱼ); the node sits at cos θⱼ.
            let value = at(centre + half * row[1])?;
            for (c, t) in chebyshev.iter_mut().zip(row) {
                for (c, v) in c.iter_mut().zip(value) {
                    *c += v * t;
                }
            }
        }
        let scale = 2.0 / NODES as f64;
        for (m, c) in chebyshev.iter_mut().enumerate() {
            let factor = if m == 0 { 0.5 * scale } else { scale };
            c.iter_mut().for_each(|c| *c *= factor);
        }
        let good = (0..4).all(|f| {
            let tail = chebyshev[NODES - 1][f].abs() + chebyshev[NODES - 2][f].abs();
            tail <= 1e-15 * chebyshev[0][f].abs().max(1.0)
        });
        if !good {
            return None;
        }
        // Σ cₘ Tₘ(x) as a polynomial: T₀ = 1, T₁ = x, T_{m+1} = 2x Tₘ − T_{m−1}.
        let mut powers = [[0.0; 4]; NODES];
        let (mut older, mut old) = ([0.0; NODES], [0.0; NODES]);
        older[0] = 1.0;
        old[1] = 1.0;
        for (m, c) in chebyshev.iter().enumerate() {
            let t = match m {
                0 => older,
                1 => old,
                _ => {
                    let mut t = [0.0; NODES];
                    for k in 0..NODES {
                        t[k] = if k > 0 { 2.0 * old[k - 1] } else { 0.0 } - older[k];
                    }
                    older = old;
                    old = t;
                    t
                }
            };
            for (p, &tk) in powers.iter_mut().zip(&t) {
                for (p, &cf) in p.iter_mut().zip(c) {
                    *p += cf * tk;
                }
            }
        }
        Some(Fit {
            centre,
            inv_half: half.recip(),
            powers,
        })
    }

    /// The factors at pivot position f.
    fn at(&self, f: f64) -> Factors {
        let x = (f - self.centre) * self.inv_half;
        let mut sum = [0.0; 4];
        for p in self.powers.iter().rev() {
            for (s, &c) in sum.iter_mut().zip(p) {
                *s = *s * x + c;
            }
        }
        sum
    }
}

/// `cos(m θⱼ)` for the Chebyshev points `θⱼ = π (j + ½) / NODES`.
fn chebyshev_cosines() -> &'static [[f64; NODES]; NODES] {
    static TABLE: std::sync::OnceLock<[[f64; NODES]; NODES]> = std::sync::OnceLock::new();
    TABLE.get_or_init(|| {
        let mut table = [[0.0; NODES]; NODES];
        for (j, row) in table.iter_mut().enumerate() {
            let theta = std::f64::consts::PI * (j as f64 + 0.5) / NODES as f64;
            for (m, c) in row.iter_mut().enumerate() {
                *c = (m as f64 * theta).cos();
            }
        }
        table
    })
}

/// One side of the pivots in the common form: pivot i has `p = (i + a)/n`, lower tail
/// `P(X ≤ i)` and upper tail `P(X ≥ i + s)`; outward is decreasing i.
#[derive(Clone, Copy, Debug)]
pub(super) struct Side {
    pub n: u64,
    pub a: f64,
    pub s: u64,
}

/// The tails and point probabilities at one pivot of a [`Side`].
#[derive(Clone, Copy, Debug)]
pub(super) struct Values {
    /// `P(X ≤ i)`.
    pub lower: f64,
    /// `P(X ≥ i + s)`.
    pub upper: f64,
    /// `b(i + s − 1)`: with it the upper tail from one count lower.
    pub below_cut: f64,
    /// `b(i + 1)`: with it the lower tail to one count higher.
    pub above_pivot: f64,
    /// A bound on the absolute error of `lower + upper` (and of either with the extra
    /// point probability added).
    pub error: f64,
}

/// `1/k` for the series below.
const INV: [f64; 20] = [
    0.0,
    1.0,
    1.0 / 2.0,
    1.0 / 3.0,
    1.0 / 4.0,
    1.0 / 5.0,
    1.0 / 6.0,
    1.0 / 7.0,
    1.0 / 8.0,
    1.0 / 9.0,
    1.0 / 10.0,
    1.0 / 11.0,
    1.0 / 12.0,
    1.0 / 13.0,
    1.0 / 14.0,
    1.0 / 15.0,
    1.0 / 16.0,
    1.0 / 17.0,
    1.0 / 18.0,
    1.0 / 19.0,
];

/// `∫₀¹ exp ψ(w) dw` and `exp ψ(1)` for `ψ(w) = t ln(1 + wα) + r ln(1 − wβ)`, with
/// `|α|, |β| ≤ 1/150` and `t|α|, r|β|` about 1 (a pivot's thresholds at `p, q ≥ 150/n`).
///
/// `ψ(w) = Σ cᵢ wⁱ` with `cᵢ = ((−1)^(i+1) t αⁱ − r βⁱ)/i`, which shrink like
/// `150^(1−i)`; `exp ψ = e^(c₁w) (1 + g₂w² + … + g₁₀w¹⁰)`, the g's from c₂ … c₆ (what
/// is left out, c₇ and g₁₁ on, is below 3e-14), so the integral is `Σ gⱼ Mⱼ` with the moments
/// `Mⱼ = ∫₀¹ wʲ e^(c₁w) dw`, taken downward from a rough M₁₀ by
/// `M_{j−1} = (e^(c₁) − c₁ Mⱼ)/j`, which shrinks M₁₀'s error by `c₁¹⁰/10!`. `TERMS`
/// terms of `e^(c₁)` are summed: 12 for `|c₁| ≤ 0.14`, 15 to 0.3, 18 to 0.55 (each
/// leaves less than 1e-20).
#[inline(always)]
fn series<const TERMS: usize>(t: f64, r: f64, alpha: f64, beta: f64) -> (f64, f64) {
    let (a2, b2) = (alpha * alpha, beta * beta);
    let (a3, b3) = (a2 * alpha, b2 * beta);
    let (a4, b4) = (a2 * a2, b2 * b2);
    let (a5, b5) = (a4 * alpha, b4 * beta);
    let (a6, b6) = (a3 * a3, b3 * b3);
    let c1 = t * alpha - r * beta;
    let c2 = -(t * a2 + r * b2) * 0.5;
    let c3 = (t * a3 - r * b3) * INV[3];
    let c4 = -(t * a4 + r * b4) * 0.25;
    let c5 = (t * a5 - r * b5) * 0.2;
    let c6 = -(t * a6 + r * b6) * INV[6];
    let (c2c2, c3c3) = (c2 * c2, c3 * c3);
    let c2c2c2 = c2c2 * c2;
    let g = [
        1.0,
        0.0,
        c2,
        c3,
        c4 + 0.5 * c2c2,
        c5 + c2 * c3,
        c6 + c2 * c4 + 0.5 * c3c3 + c2c2c2 * INV[6],
        c2 * c5 + c3 * c4 + 0.5 * c2c2 * c3,
        c2 * c6
            + c3 * c5
            + 0.5 * c4 * c4
            + 0.5 * c2c2 * c4
            + 0.5 * c2 * c3c3
            + c2c2 * c2c2 * INV[4] * INV[6],
        c3 * c6
            + c4 * c5
            + c2 * c3 * c4
            + 0.5 * c2c2 * c5
            + c3c3 * c3 * INV[6]
            + c2c2c2 * c3 * INV[6],
        0.5 * c5 * c5
            + c4 * c6
            + c2 * c3 * c5
            + 0.5 * c2 * c4 * c4
            + 0.5 * c3c3 * c4
            + 0.5 * c2c2 * c6
            + 0.25 * c2c2 * c3c3
            + c2c2c2 * c4 * INV[6]
            + c2c2 * c2c2c2 * INV[5] * INV[4] * INV[6],
    ];
    let mut e1 = 1.0;
    for k in (1..=TERMS).rev() {
        e1 = 1.0 + c1 * INV[k] * e1;
    }
    // A rough M₁₀ = Σ c₁ᵏ / (k! (k + 11)).
    let (mut moment, mut power) = (0.0, 1.0);
    for k in 0..6 {
        moment += power * INV[k + 11];
        power *= c1 * INV[k + 1];
    }
    let (mut integral, mut sum_g) = (0.0, 0.0);
    for j in (1..=10).rev() {
        integral += g[j] * moment;
        sum_g += g[j];
        moment = (e1 - c1 * moment) * INV[j];
    }
    (integral + moment, e1 * (1.0 + sum_g))
}

/// The series for one pivot's two thresholds, or `None` when ψ's coefficients are too
/// large for it (p or q below 150/n, or `|c₁|` above 0.55).
fn series_pair(
    np: f64,
    c1: f64,
    lower: (f64, f64),
    upper: (f64, f64),
    alpha: f64,
    beta: f64,
) -> Option<[(f64, f64); 2]> {
    macro_rules! both {
        ($terms:literal) => {
            Some([
                series::<$terms>(lower.0, lower.1, alpha, beta),
                series::<$terms>(upper.0, upper.1, alpha, beta),
            ])
        };
    }
    match c1.abs() {
        _ if np < 150.0 => None,
        c if c <= 0.14 => both!(12),
        c if c <= 0.3 => both!(15),
        c if c <= 0.55 => both!(18),
        _ => None,
    }
}

impl Side {
    fn nf(&self) -> f64 {
        self.n as f64
    }

    fn p(&self, i: f64) -> f64 {
        (i + self.a) / self.nf()
    }

    fn q(&self, i: f64) -> f64 {
        (self.nf() - i - self.a) / self.nf()
    }

    /// The stepping factors at pivot position f (a real number, for the fits):
    /// the tails grow by `point probability × grow` and the point probabilities are
    /// multiplied by `next`, from pivot f to f − 1. `None` where the series does not
    /// apply.
    fn factors(&self, f: f64) -> Option<Factors> {
        let (nf, a, sf) = (self.nf(), self.a, self.s as f64);
        let (pa, qa) = (f + a, nf - f - a); // np, nq
        if !(pa > 1.0 && qa > 1.0) {
            return None;
        }
        let (inv_p, inv_q) = (1.0 / pa, 1.0 / qa);
        let (alpha, beta) = (-inv_p, -inv_q); // −h/p, −h/q
        let t_low = f - 1.0;
        let t_up = f + sf - 2.0;
        let c1 = (t_low * alpha - (nf - 1.0 - t_low) * beta)
            .abs()
            .max((t_up * alpha - (nf - 1.0 - t_up) * beta).abs());
        let [(j_low, e_low), (j_up, e_up)] = series_pair(
            pa,
            c1,
            (t_low, nf - 1.0 - t_low),
            (t_up, nf - 1.0 - t_up),
            alpha,
            beta,
        )?;
        let odds = qa * inv_p; // q/p
        let step = odds * (1.0 + inv_q);
        let t = f + sf - 1.0;
        Some([
            f * inv_p * j_low - 1.0,
            f / (nf - f + 1.0) * step * e_low,
            1.0 - t * inv_p * j_up,
            t / (nf - t + 1.0) * step * e_up,
        ])
    }

    /// Walk from pivot `start` outward (decreasing i), handing each pivot's values to
    /// `visit` until it returns false or pivot 0 is done. Returns false when the
    /// stepping cannot keep its accuracy (the caller then uses the slow way).
    ///
    /// The factors of a block of pivots come from a Chebyshev fit through their exact
    /// values at [`NODES`] points (they vary on the scale of np pivots, and a block is
    /// at most np/16 wide); a block whose fit does not check out, or that is short, is
    /// stepped with each pivot's own factors.
    pub fn walk(&self, start: u64, mut visit: impl FnMut(u64, &Values) -> bool) -> bool {
        let n = self.n;
        let nf = n as f64;
        let (a, s) = (self.a, self.s);
        if start + s > n || a.is_nan() || a <= 0.0 {
            return false;
        }
        let pmf = |t: u64, i: u64| {
            let (p, q) = (self.p(i as f64), self.q(i as f64));
            if t <= n {
                ln_binom_pmf(t, n, p, q).exp()
            } else {
                0.0
            }
        };
        let (p0, q0) = (self.p(start as f64), self.q(start as f64));
        let mut lower = ln_binom_lower(start, n, p0, q0).exp();
        let mut upper = ln_binom_upper(start + s, n, p0, q0).exp();
        let mut at_pivot = pmf(start, start);
        let mut below_cut = pmf(start + s - 1, start);
        // Each step adds to a tail an error below `drift` × (the largest tail seen):
        // rounding in the step and in the fit's evaluation, and the point
        // probabilities' drift since they were last computed exactly (at most
        // BLOCK_MAX steps; together below 5e-15 a step), and the series' truncation
        // (below 2 (1/np)⁶); the starting tails are good to a relative 1e-12.
        let mut scale = lower + upper + at_pivot + below_cut;
        let mut drift = 0.0;
        let mut i = start;
        loop {
            let np = i as f64 + a;
            let width = ((np / 16.0) as usize)
                .clamp(1, BLOCK_MAX)
                .min(i as usize + 1);
            let fit = if width >= BLOCK_MIN {
                let (hi, lo) = (i as f64, (i + 1 - width as u64) as f64);
                Fit::through(lo, hi, |f| self.factors(f))
            } else {
                None
            };
            // Without a fit, each pivot's own factors, a batch at a time.
            let count = if fit.is_some() {
                width
            } else {
                width.min(BATCH)
            };
            let outer = (i + 1 - count as u64) as f64 + a;
            let step_error = 5e-15 + 2.0 * (outer.recip().powi(3)).powi(2);
            for j in 0..count {
                let here = i - j as u64;
                let position = here as f64;
                let factors = match &fit {
                    Some(fit) => fit.at(position),
                    None => match self.factors(position) {
                        Some(f) => f,
                        None => return false,
                    },
                };
                let [grow_lower, next_lower, grow_upper, next_upper] = factors;
                // b(i + 1)/b(i) = ((n − i)/(i + 1)) (p/q), exactly (not fitted: only the
                // right side uses it).
                let up_ratio =
                    (nf - position) * (position + a) / ((position + 1.0) * (nf - position - a));
                let values = Values {
                    lower,
                    upper,
                    below_cut,
                    above_pivot: at_pivot * up_ratio,
                    error: (drift + 1e-12) * scale,
                };
                if !visit(here, &values) || here == 0 {
                    return true;
                }
                lower += at_pivot * grow_lower;
                at_pivot *= next_lower;
                upper += below_cut * grow_upper;
                below_cut *= next_upper;
                drift += step_error;
                scale = scale.max(lower + upper + at_pivot + below_cut);
            }
            i -= count as u64;
            at_pivot = pmf(i, i);
            below_cut = pmf(i + s - 1, i);
        }
    }

    /// A bound on `P(X ≤ i) + P(X ≥ i + s)` for every pivot `i ≤ top` (down to the
    /// pivots where only the upper tail is left, `p > 0`), if one at most `limit` can be
    /// shown; `None` otherwise.
    pub fn beyond(&self, top: u64, limit: f64) -> Option<f64> {
        let mut top = top;
        let mut width = (top / 256).max(4);
        let mut worst: f64 = 0.0;
        let mut first = true;
        loop {
            // Chernoff's bound at `top` holds for every pivot beyond it.
            let chernoff = self.chernoff(top)?;
            if chernoff <= limit {
                return Some(worst.max(chernoff));
            }
            if top == 0 {
                return None;
            }
            let bottom = top.saturating_sub(width).max(1);
            // Far blocks first try the plain geometric rest; near ones need more terms.
            let cheap = if first {
                None
            } else {
                self.block(bottom, top, 0, limit).filter(|&b| b <= limit)
            };
            let bound = match cheap {
                Some(b) => b,
                None => self.block(bottom, top, usize::MAX, limit)?,
            };
            if bound > limit {
                if width > 4 {
                    width /= 2;
                    continue;
                }
                return None;
            }
            worst = worst.max(bound);
            if bottom == 1 {
                // Pivot 0: its lower tail is qⁿ = exp(−n KL(0 ‖ p)), covered by Chernoff.
                return Some(worst.max(self.chernoff(0)?));
            }
            top = bottom - 1;
            width *= 2;
            first = false;
        }
    }

    /// Chernoff's bound with the thresholds `i/n` and `(i + s)/n`:
    /// `exp(−n KL(i/n ‖ p)) + exp(−n KL((i + s)/n ‖ p))`. Both divergences grow as the
    /// pivot moves away from ½ while it lies wholly below ½ (the slow search's
    /// `outward_bound`), so it holds for every pivot beyond `i` too.
    fn chernoff(&self, i: u64) -> Option<f64> {
        let nf = self.nf();
        let p = self.p(i as f64);
        let (low, high) = (i as f64 / nf, (i + self.s) as f64 / nf);
        if !(high <= 0.5 && p > 0.0) {
            return None;
        }
        let bound = (-nf * kl(low, p)).exp() + (-nf * kl(high, p)).exp();
        Some(bound * (1.0 + 1e-12))
    }

    /// A bound for every pivot in `[bottom, top]` (`bottom ≥ 1`), all of it below ½:
    /// each tail is its point probability (bounded as in the module note, the divergence
    /// at `top` and the square root at the block's worst end) times the tail's ratio sum,
    /// whose first `terms` terms are summed at `top` and the rest bounded geometrically
    /// (stopping early once the bound is at most `limit`, or cannot fall further).
    ///
    /// Why the sums at `top` hold for the whole block: the lower tail's ratios
    /// `ρ_m = (i − m) q / ((n − i + m + 1) p)` and the upper tail's
    /// `ρ'_m = (n − i − s − m) p / ((i + s + m + 1) q)` fall as i falls (p = (i + a)/n)
    /// when `d ln ρ/di ≥ 0`, which for the lower tail is
    /// `(a + m)(n − i − a)(n − i + m + 1) ≥ (a + m + 1)(i − m)(i + a)` and for the
    /// upper one `(s + m + 1 − a)(n − i − a)(n − i − s − m) ≥ (s + m − a)(i + a)(i + s + m + 1)`;
    /// both only get easier as i falls, the first also as m grows and the second as m
    /// shrinks, so checking the first at m = 0 and the second at the last m used, at
    /// `top`, covers the block. Each tail's sum is increasing in every ratio.
    fn block(&self, bottom: u64, top: u64, terms: usize, limit: f64) -> Option<f64> {
        let (n, nf, a) = (self.n, self.nf(), self.a);
        let s = self.s;
        if 2 * (top + s) > n {
            return None;
        }
        let (p, q) = (self.p(top as f64), self.q(top as f64));
        let (tf, sf, bf) = (top as f64, s as f64, bottom as f64);
        let cut = tf + sf;
        let lowest = |x: f64, y: f64| (x * (nf - x)).min(y * (nf - y));
        let two_pi = 2.0 * std::f64::consts::PI;
        let scale_lower = (-nf * kl(tf / nf, p)).exp() * (nf / (two_pi * lowest(bf, tf))).sqrt();
        let scale_upper =
            (-nf * kl(cut / nf, p)).exp() * (nf / (two_pi * lowest(bf + sf, cut))).sqrt();
        let lower_falls = a * (nf - tf - a) * (nf - tf + 1.0) >= (a + 1.0) * tf * (tf + a);
        if !lower_falls {
            return None;
        }
        let upper_falls = |m: f64| {
            (sf + m + 1.0 - a) * (nf - tf - a) * (nf - cut - m)
                >= (sf + m - a) * (tf + a) * (cut + m + 1.0)
        };
        let rho_lower = |m: f64| (tf - m) * q / ((nf - tf + m + 1.0) * p);
        let rho_upper = |m: f64| (nf - cut - m) * p / ((cut + m + 1.0) * q);
        let (mut sum_lower, mut sum_upper) = (0.0, 0.0);
        let (mut term_lower, mut term_upper) = (1.0, 1.0);
        let mut m = 0usize;
        loop {
            let mf = m as f64;
            let (rl, ru) = (rho_lower(mf), rho_upper(mf));
            // The bound is looked at every 8 terms (and at the last one): between looks
            // only the sums move.
            if m >= terms || m.is_multiple_of(8) {
                // What is left of each tail from term m on (nothing once the tail ends).
                let rest_lower = if mf > tf {
                    0.0
                } else if rl < 1.0 {
                    term_lower / (1.0 - rl)
                } else {
                    f64::INFINITY
                };
                let rest_upper = if cut + mf > nf {
                    0.0
                } else if ru < 1.0 {
                    term_upper / (1.0 - ru)
                } else {
                    f64::INFINITY
                };
                let bound = (scale_lower * (sum_lower + rest_lower)
                    + scale_upper * (sum_upper + rest_upper))
                    * (1.0 + 1e-10);
                let settled = rest_lower <= 1e-5 * sum_lower && rest_upper <= 1e-5 * sum_upper;
                if m >= terms || bound <= limit || settled {
                    return (upper_falls(mf) && bound.is_finite()).then_some(bound);
                }
            }
            if mf <= tf {
                sum_lower += term_lower;
                term_lower *= rl.max(0.0);
            }
            if cut + mf <= nf {
                sum_upper += term_upper;
                term_upper *= ru.max(0.0);
            }
            m += 1;
        }
    }
}

/// The values at one margin of every pivot that can come within reach of the limit,
/// each as `(value at cut k + s, value at cut k + s − 1, error)`: pivots `centre`,
/// `centre − 1`, … in `left` and `centre + 1`, `centre + 2`, … in `right`. Every pivot
/// outside has both values at most the limit (proved, see [`Side::beyond`]).
#[derive(Debug)]
pub(super) struct Sweep {
    centre: u64,
    left: Vec<(f64, f64, f64)>,
    right: Vec<(f64, f64, f64)>,
}

impl Sweep {
    /// The first and last pivot swept.
    pub fn range(&self) -> (u64, u64) {
        (
            self.centre + 1 - self.left.len() as u64,
            self.centre + self.right.len() as u64,
        )
    }

    /// The values of pivot k, if it was swept.
    pub fn get(&self, k: u64) -> Option<(f64, f64, f64)> {
        if k <= self.centre {
            self.left.get((self.centre - k) as usize).copied()
        } else {
            self.right.get((k - self.centre - 1) as usize).copied()
        }
    }

    /// Every swept pivot with its values, in no particular order.
    pub fn pivots(&self) -> impl Iterator<Item = (u64, (f64, f64, f64))> + '_ {
        let left = (0..=self.centre).rev().zip(self.left.iter().copied());
        let right = (self.centre + 1..).zip(self.right.iter().copied());
        left.chain(right)
    }
}

/// When to try proving the rest below the limit: once a value times the bound's usual
/// slack is below it, and after a failed try 32 pivots later with a little more slack.
struct Stop {
    slack: f64,
    next_try: u64,
}

impl Stop {
    fn new() -> Stop {
        Stop {
            slack: 1.001,
            next_try: u64::MAX,
        }
    }

    fn worth_trying(&self, i: u64, value: f64, limit: f64) -> bool {
        i <= self.next_try && value * self.slack < limit
    }

    fn failed(&mut self, i: u64) {
        self.slack *= 1.003;
        self.next_try = i.saturating_sub(32);
    }
}

/// The values along one side from `start` outward (each with the cut offset `s`, the
/// one below it, which adds `extra`, and the error), until `rest_below(i)` shows that
/// every pivot past i is below the limit (tried at pivot 0 in any case, and before it
/// when the values suggest it may succeed). `None` if that never happens.
fn walk_out(
    side: Side,
    start: u64,
    limit: f64,
    extra: impl Fn(&Values) -> f64,
    rest_below: impl Fn(u64) -> bool,
) -> Option<Vec<(f64, f64, f64)>> {
    // About 400 pivots a side at B3's counts: room for them without growing.
    let mut values = Vec::with_capacity(1024);
    let mut stop = Stop::new();
    let mut covered = false;
    let walked = side.walk(start, |i, v| {
        let post = v.lower + v.upper;
        let pre = post + extra(v);
        values.push((post, pre, v.error));
        if i == 0 || stop.worth_trying(i, pre, limit) {
            if rest_below(i) {
                covered = true;
                return false;
            }
            stop.failed(i);
        }
        i > 0
    });
    (walked && covered).then_some(values)
}

/// Every pivot that matters at margin `eps` with cut offsets `s` and `s − 1`, or `None`
/// when the fast way does not apply here (tiny n, p far from ½, a cut offset below 2).
pub(super) fn sweep(n: u64, eps: f64, s: u64, limit: f64) -> Option<Sweep> {
    let nf = n as f64;
    let a = nf * eps;
    let sf = s as f64;
    if s < 2 || !(a > 1.0 && sf - a > 1.0) || 2 * s + 2 > n {
        return None;
    }
    // Left of the centre: pivot k is i = k itself, from the pivot nearest p = ½ down.
    let centre = (nf * 0.5 - a).floor();
    if centre < 1.0 {
        return None;
    }
    let centre = centre as u64;
    let left_pre = Side { n, a, s: s - 1 };
    let left_values = walk_out(
        Side { n, a, s },
        centre,
        limit,
        |v| v.below_cut,
        // Pivots below 0 do not exist on this side.
        |i| i == 0 || left_pre.beyond(i - 1, limit).is_some(),
    )?;
    // Right of it: pivot k as i = n − k − s with p = 1 − p_k = (i + s − a)/n; its value
    // at cut k + s − 1 is the mirror's lower tail to i + 1, so the rest beyond i are
    // the pre-cut form's pivots up to i (below 0 only their upper tail is left).
    let right_pre = Side {
        n,
        a: sf - a - 1.0,
        s: s - 1,
    };
    let right_values = walk_out(
        Side { n, a: sf - a, s },
        n.checked_sub(centre + 1 + s)?,
        limit,
        |v| v.above_pivot,
        |i| right_pre.beyond(i, limit).is_some(),
    )?;
    Some(Sweep {
        centre,
        left: left_values,
        right: right_values,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The exact tails at a pivot of the plain form (pivot k, `p = k/n + eps`).
    fn exact(n: u64, k: u64, eps: f64, cut: u64) -> f64 {
        let nf = n as f64;
        let (p, q) = ((k as f64 + nf * eps) / nf, (nf - k as f64 - nf * eps) / nf);
        let lower = ln_binom_lower(k, n, p, q).exp();
        let upper = if cut <= n {
            ln_binom_upper(cut, n, p, q).exp()
        } else {
            0.0
        };
        lower + upper
    }

    /// Sizes and levels over the range the sweep is used for.
    const CASES: [(u64, f64); 8] = [
        (500, 0.05),
        (1_000, 0.05),
        (2_000, 1e-6),
        (3_000, 0.05 / 24.0),
        (10_001, 0.05),
        (25_000, 0.001),
        (100_000, 0.05),
        (200_000, 0.2),
    ];

    /// The margin and cut offset of a case's answer, as the search over every pivot
    /// finds it: just after the jump nearest to it (where the sweep is used).
    fn near_answer(n: u64, delta: f64) -> (f64, u64) {
        let answer = super::super::search(n, delta, super::super::violator_by_pivots);
        let m = (2.0 * n as f64 * answer).round() as u64;
        (super::super::first_after(n, m), m + 1)
    }

    /// Every swept value is within its stated error of the tails computed directly,
    /// and that error is a tenth of the tolerance the decisions leave (1e-9 δ) or less.
    #[test]
    fn swept_values_match_the_tails() {
        for (n, delta) in CASES {
            let (eps, s) = near_answer(n, delta);
            let swept = sweep(n, eps, s, delta * (1.0 - 1e-9))
                .unwrap_or_else(|| panic!("n = {n}: the sweep applies here"));
            let (first, last) = swept.range();
            let step = ((last - first) / 400).max(1);
            for k in (first..=last).step_by(step as usize) {
                let (post, pre, error) = swept.get(k).expect("swept");
                let (want_post, want_pre) = (exact(n, k, eps, k + s), exact(n, k, eps, k + s - 1));
                for (got, want) in [(post, want_post), (pre, want_pre)] {
                    let off = (got - want).abs();
                    assert!(
                        off <= error + 1e-13 * want,
                        "n = {n}, k = {k}: {got:e} against {want:e} (error stated {error:e})"
                    );
                    assert!(off <= 1e-11 * delta, "n = {n}, k = {k}: off by {off:e}");
                }
                assert!(error <= 1e-10 * delta, "n = {n}: stated error {error:e}");
            }
        }
    }

    /// Every pivot the sweep leaves out is below the limit, both cuts: checked
    /// directly for each pivot of the smaller cases.
    #[test]
    fn pivots_left_out_are_below_the_limit() {
        for (n, delta) in CASES.into_iter().filter(|c| c.0 <= 25_000) {
            let (eps, s) = near_answer(n, delta);
            let limit = delta * (1.0 - 1e-9);
            let swept = sweep(n, eps, s, limit).expect("the sweep applies here");
            let (first, last) = swept.range();
            let nf = n as f64;
            let mut outside = 0;
            for k in (0..=n).filter(|&k| k < first || k > last) {
                if k as f64 / nf + eps > 1.0 {
                    break;
                }
                for cut in [k + s, k + s - 1] {
                    let value = exact(n, k, eps, cut);
                    assert!(
                        value <= limit,
                        "n = {n}, k = {k}, cut {cut}: {value:e} > {limit:e}"
                    );
                }
                outside += 1;
            }
            // The sweep kept a small share of the pivots.
            assert!(
                outside > 3 * (last - first + 1),
                "n = {n}: {outside} left out"
            );
        }
    }

    /// The bound for the pivots beyond a point is at least every value it covers,
    /// whether it needed tight blocks (a limit just above the value there) or not.
    #[test]
    fn the_bound_beyond_covers_each_pivot() {
        let (n, s, a) = (4_000u64, 125u64, 61.8);
        let nf = n as f64;
        let side = Side { n, a, s };
        let value = |i: u64| {
            let (p, q) = ((i as f64 + a) / nf, (nf - i as f64 - a) / nf);
            ln_binom_lower(i, n, p, q).exp() + ln_binom_upper(i + s, n, p, q).exp()
        };
        let mut shown = 0;
        for top in [1_800u64, 1_700, 1_600, 1_200, 600] {
            for slack in [1.003, 1.01, 1.05, 1.5] {
                let Some(bound) = side.beyond(top, value(top) * slack) else {
                    continue;
                };
                shown += 1;
                for i in 0..=top {
                    assert!(
                        value(i) <= bound,
                        "top {top}, i = {i}: {:e} > {bound:e}",
                        value(i)
                    );
                }
            }
        }
        assert!(shown >= 12, "only {shown} bounds shown");
        // The first block alone is tight: within half a percent of the value at its top.
        let top = 1_700;
        let nf = n as f64;
        let (p, q) = ((top as f64 + a) / nf, (nf - top as f64 - a) / nf);
        let value = ln_binom_lower(top, n, p, q).exp() + ln_binom_upper(top + s, n, p, q).exp();
        let block = side
            .block(top - 20, top, usize::MAX, 0.0)
            .expect("valid below ½");
        assert!(
            block >= value && block <= 1.005 * value,
            "{block:e} against {value:e}"
        );
    }
}
