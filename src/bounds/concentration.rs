//! Concentration inequalities: Chebyshev, Hoeffding (1963) with the Serfling (1974) /
//! Bardenet & Maillard (2015) form for sampling without replacement, the Chernoff
//! relative-entropy bound, and the empirical Bernstein bound of Maurer & Pontil (2009).

use super::normal::wilson_lower;
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

/// Relative entropy `KL(a ‖ p)` between Bernoulli(a) and Bernoulli(p). `ln(1 − a)`
/// is taken as `ln_1p(−a)`: as `(1 − a).ln()` it rounded `1 − a` first, which for a
/// near 0 put an error of ε (not ε a) into the divergence; at n = 2.4·10⁷ and
/// p̂ = 3·10⁻⁸ that moved a Chernoff end by a relative 10⁻⁹ (against mpmath at 60
/// digits).
pub fn kl(a: f64, p: f64) -> f64 {
    kl_with_size(a, p).0
}

/// [`kl`] and the size of the terms it is summed from,
/// `a(1 + |ln(a/p)|) + (1 − a)(|ln(1 − a)| + |ln(1 − p)|)`, from the same logarithms:
/// the divergence's rounding is about ε times that (the terms cancel to KL, and the
/// quotient a/p adds ε a).
#[inline]
fn kl_with_size(a: f64, p: f64) -> (f64, f64) {
    let (mut v, mut size) = (0.0, 0.0);
    if a > 0.0 {
        let ratio = (a / p).ln();
        v += a * ratio;
        size += a * (1.0 + ratio.abs());
    }
    if a < 1.0 {
        let (rest_a, rest_p) = ((-a).ln_1p(), (-p).ln_1p());
        v += (1.0 - a) * (rest_a - rest_p);
        size += (1.0 - a) * (rest_a.abs() + rest_p.abs());
    }
    (v, size)
}

/// The Chernoff set `{p : n·KL(p̂ ‖ p) ≤ ln(2/δ)}` (closed forms at p̂ = 0 and
/// p̂ = 1). Each end by Newton's method from the end of the normal approximation
/// ([`chernoff_end`]), or by Brent's method where that gives none (an end within a
/// few ulps of 1); a lower end below the normal numbers is 0.
pub fn chernoff(p_hat: f64, n: f64, delta: f64) -> (f64, f64) {
    let level = (2.0 / delta).ln();
    let gap = |p: f64| n * kl(p_hat, p) - level;
    let lower = if p_hat <= 0.0 {
        0.0
    } else if p_hat >= 1.0 {
        (-level / n).exp()
    } else {
        chernoff_end(p_hat, n, level, false).unwrap_or_else(|| {
            // A set reaching below the normal numbers: Brent's method would stop off
            // its end (its 400 steps of halving run out), at 10⁻¹²⁸ say.
            if gap(f64::MIN_POSITIVE) <= 0.0 {
                0.0
            } else {
                brent(gap, 0.0, p_hat)
            }
        })
    };
    let upper = if p_hat >= 1.0 {
        1.0
    } else if p_hat <= 0.0 {
        -(-level / n).exp_m1()
    } else {
        chernoff_end(p_hat, n, level, true).unwrap_or_else(|| brent(gap, p_hat, 1.0))
    };
    (lower, upper)
}

/// One end of the Chernoff set for `0 < p̂ < 1` by Newton's method on
/// `g(p) = n·KL(p̂ ‖ p) − L` (`g'(p) = n (p − p̂)/(p(1 − p))`), taken over `u = ln p`
/// for the lower end and `u = ln(1 − p)` for the upper, where g is still convex (the
/// divergence is `−p̂ ln p − (1 − p̂) ln(1 − p)` and constants, and `−ln(1 − eᵘ)` is
/// convex), so after the first step every step lands on the side where g ≥ 0 and the
/// end is approached from there, however far out it lies (a step over p could leave
/// [0, 1]). It starts from the root of `(p̂ − p)² = (2L/n) p(1 − p)` on the end's side
/// (where the second-order expansion of the divergence puts it: Wilson's end with
/// z² = 2L), or where that is not inside (0 or 1 as rounded), from
/// `p̂ e^(−L/(np̂) − 1)`, where the divergence's first-order form puts a lower end far
/// below p̂ (and its mirror for the upper end). A search stops once its step in p
/// is below 10⁻¹¹ of the end's distance from p̂ or from its edge of [0, 1], whichever
/// is less, after taking it (the next would be about that squared, over the distance:
/// far below an ulp), or below two ulps of the end, or where g is within its own
/// rounding of 0 (at large n the divergence's rounding decides the last steps).
/// `None` when a step leaves the end's side of p̂, [`CHERNOFF_STEPS`] do not settle,
/// or the end is subnormal.
fn chernoff_end(p_hat: f64, n: f64, level: f64, upper: bool) -> Option<f64> {
    // Wilson's end with z² = 2L.
    let z = (2.0 * level).sqrt();
    let guess = if upper {
        1.0 - wilson_lower(1.0 - p_hat, p_hat, n, z)
    } else {
        wilson_lower(p_hat, 1.0 - p_hat, n, z)
    };
    // u, the end's distance from its own edge of [0, 1] on a log scale, and back.
    let (to_u, from_u): (Map, Map) = if upper {
        (|p| (-p).ln_1p(), |u| -u.exp_m1())
    } else {
        (f64::ln, f64::exp)
    };
    let far = |x: f64| x * (-level / (n * x) - 1.0).exp();
    let far = if upper {
        1.0 - far(1.0 - p_hat)
    } else {
        far(p_hat)
    };
    let inside = |p: f64| {
        if upper {
            p > p_hat && p < 1.0
        } else {
            p > 0.0 && p < p_hat
        }
    };
    let mut u = to_u(if inside(guess) { guess } else { far });
    for _ in 0..CHERNOFF_STEPS {
        let p = from_u(u);
        if !inside(p) {
            return None;
        }
        let (divergence, size) = kl_with_size(p_hat, p);
        let value = n * divergence - level;
        // Where g is within its own rounding of 0, p is as good an end as any.
        if value.abs() <= 4.0 * f64::EPSILON * (n * size + level) {
            return (p >= f64::MIN_POSITIVE).then_some(p);
        }
        // dg/du: g'(p) times dp/du, p for the lower end and −(1 − p) for the upper.
        let slope = if upper {
            -n * (p - p_hat) / p
        } else {
            n * (p - p_hat) / (1.0 - p)
        };
        // A step that leaves [0, 1] as p rounds (u is still finite: an end within
        // 10⁻¹¹ of 1, or below the normal numbers) is halved until it does not.
        let mut next_u = u - value / slope;
        for _ in 0..64 {
            if inside(from_u(next_u)) {
                break;
            }
            next_u = 0.5 * (u + next_u);
        }
        u = next_u;
        let next = from_u(u);
        let step = (next - p).abs();
        let edge = if upper { 1.0 - next } else { next };
        let scale = (next - p_hat).abs().min(edge);
        if step <= 1e-11 * scale || step <= 2.0 * f64::EPSILON * next {
            return (inside(next) && next >= f64::MIN_POSITIVE).then_some(next);
        }
    }
    None
}

/// A change of variable and its inverse, for [`chernoff_end`].
type Map = fn(f64) -> f64;

/// At most this many Newton steps an end of the Chernoff set.
const CHERNOFF_STEPS: usize = 16;

/// Empirical Bernstein (Maurer & Pontil 2009, Theorem 4), two-sided by a union bound:
/// `√(2 V ln(4/δ) / n) + 7 ln(4/δ) / (3(n − 1))`, `V` the unbiased sample variance
/// `n p̂ q̂ / (n − 1)`. Needs `n ≥ 2`.
pub fn bernstein(p_hat: f64, n: f64, delta: f64) -> f64 {
    let level = (4.0 / delta).ln();
    let variance = n * p_hat * (1.0 - p_hat) / (n - 1.0);
    (2.0 * variance * level / n).sqrt() + 7.0 * level / (3.0 * (n - 1.0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Both ends as Brent's method over the whole side gives them (the way before
    /// Newton's method).
    fn chernoff_by_brent(p_hat: f64, n: f64, delta: f64) -> (f64, f64) {
        let level = (2.0 / delta).ln();
        let gap = |p: f64| n * kl(p_hat, p) - level;
        (brent(gap, 0.0, p_hat), brent(gap, p_hat, 1.0))
    }

    /// The band around an end where the computed `g = n·KL(p̂ ‖ p) − L` crosses 0:
    /// it carries rounding of about ε times the size of the divergence's terms
    /// ([`kl_with_size`]), so it may cross anywhere within n times that over g'; and
    /// some ulps.
    fn band(p_hat: f64, n: f64, end: f64) -> f64 {
        let terms = kl_with_size(p_hat, end).1;
        let slope = n * (end - p_hat).abs() / (end * (1.0 - end));
        8.0 * f64::EPSILON * n * terms / slope + 64.0 * f64::EPSILON * end
    }

    /// Whether `end` is where g changes sign: at or below 0 a relative 10⁻¹² (or
    /// twice its band) inside the set, at or above it as far outside (or past 0 or 1).
    fn is_crossing(p_hat: f64, n: f64, level: f64, end: f64, upper: bool) -> bool {
        let gap = |p: f64| n * kl(p_hat, p) - level;
        let radius = (1e-12 * end).max(2.0 * band(p_hat, n, end));
        let (below, above) = (end - radius, end + radius);
        if upper {
            (below <= p_hat || gap(below) <= 0.0) && (above >= 1.0 || gap(above) >= 0.0)
        } else {
            (below <= 0.0 || gap(below) >= 0.0) && (above >= p_hat || gap(above) <= 0.0)
        }
    }

    /// On a seeded sample (n from 1 to 10⁹, whole and fractional as from weights, p̂
    /// anywhere in (0, 1) and near its ends, levels from 50 % to 1 − 10⁻¹²), every end
    /// Newton's method gives is a crossing of the computed divergence, and wherever
    /// Brent's method over the whole side also gives one, the two agree to within
    /// the band where the computed divergence, with its rounding, crosses the level
    /// (both stop inside it). Brent's end is not always a crossing where the end lies
    /// orders of magnitude below p̂ (its 400 steps run out, and it stops off the end,
    /// either side: a wrong end before Newton's method); Newton's over ln p gets there.
    /// Newton's method gives way to Brent's only where the end is subnormal, 0, or
    /// within a few ulps of 1.
    #[test]
    fn newtons_ends_are_crossings_and_brents() {
        let mut rng = ChaCha8Rng::seed_from_u64(44);
        let (mut worst, mut fell_back, mut brent_short) = (0.0f64, 0, 0);
        let draws = 20_000;
        for _ in 0..draws {
            let n: f64 = if rng.random_bool(0.5) {
                10f64.powf(rng.random_range(0.0..9.0)).round().max(1.0)
            } else {
                10f64.powf(rng.random_range(0.0..9.0))
            };
            let p_hat: f64 = match rng.random_range(0..3) {
                0 => rng.random_range(0.0..1.0),
                1 => 10f64.powf(rng.random_range(-9.0..0.0)),
                _ => 1.0 - 10f64.powf(rng.random_range(-9.0..0.0)),
            };
            if !(p_hat > 0.0 && p_hat < 1.0) {
                continue;
            }
            let delta = 10f64.powf(rng.random_range(-12.0..0.5f64.log10()));
            let level = (2.0 / delta).ln();
            let (lower, upper) = chernoff(p_hat, n, delta);
            let (brent_lower, brent_upper) = chernoff_by_brent(p_hat, n, delta);
            for (got, want, upper_end) in [(lower, brent_lower, false), (upper, brent_upper, true)]
            {
                if chernoff_end(p_hat, n, level, upper_end).is_none() {
                    // Only where the set reaches below the normal numbers or to
                    // within a few ulps of 1.
                    let gap = |p: f64| n * kl(p_hat, p) - level;
                    let edge = if upper_end {
                        1.0 - 4.0 * f64::EPSILON
                    } else {
                        f64::MIN_POSITIVE
                    };
                    assert!(
                        gap(edge) <= 0.0,
                        "p̂ = {p_hat}, n = {n}, δ = {delta}: no Newton end at {got:e}"
                    );
                    if !upper_end {
                        assert_eq!(got, 0.0);
                    }
                    fell_back += 1;
                    continue;
                }
                assert!(
                    is_crossing(p_hat, n, level, got, upper_end),
                    "p̂ = {p_hat}, n = {n}, δ = {delta}: {got:e} is not a crossing"
                );
                if !is_crossing(p_hat, n, level, want, upper_end) {
                    brent_short += 1;
                    // Only far out, where halving runs out of steps.
                    let far = if upper_end {
                        (1.0 - want).max(1.0 - got) < 1e-6 * (1.0 - p_hat)
                    } else {
                        want.max(got) < 1e-6 * p_hat
                    };
                    assert!(far, "p̂ = {p_hat}, n = {n}, δ = {delta}: {want:e}");
                    continue;
                }
                let band = band(p_hat, n, want);
                let off = (got - want).abs();
                worst = worst.max(off / band);
                assert!(
                    off <= band,
                    "p̂ = {p_hat}, n = {n}, δ = {delta}: {got:e} against {want:e} (band {band:e})"
                );
            }
        }
        eprintln!(
            "largest difference {worst:.3} of the band; fell back {fell_back}, Brent short {brent_short}, of {}",
            2 * draws
        );
    }

    /// Lower ends far below p̂ (weighted counts with n·p̂ well below ln(2/δ)), against
    /// mpmath 1.3.0: the root of `n·KL(p̂ ‖ e^u) = ln(2/δ)` in u by `findroot` at 60
    /// digits from the same doubles, rounded to doubles
    /// (`tests/reference/chernoff_far_ends.py` prints them). Brent's method over
    /// `[0, p̂]` gave 2.5e-129 for the first and 6.9e-127 for the last; the middle
    /// one was a relative 10⁻⁹ off while KL rounded `1 − p̂`. Main before Newton's
    /// method failed all three.
    #[test]
    fn far_lower_ends_match_mpmath() {
        let cases = [
            (
                6.551721273973269e-9,
                15_081_485.0,
                2.899130945787342e-12,
                3.700660257961618e-129,
            ),
            (
                3.040911958650272e-8,
                23_877_336.16423369,
                1.881501027684639e-8,
                9.868263708297706e-20,
            ),
            (
                1.7904941415827086e-6,
                4_396.0,
                0.18045181841335398,
                1.2448672456039702e-139,
            ),
        ];
        for (p_hat, n, delta, want) in cases {
            let (lower, _) = chernoff(p_hat, n, delta);
            assert!(
                ((lower - want) / want).abs() <= 1e-12,
                "p̂ = {p_hat}, n = {n}, δ = {delta}: {lower:e} against {want:e}"
            );
        }
    }

    /// With n from 1,000 to 20,000, p̂ from 0.2 to 0.8 and usual levels (B3's kind of
    /// counts), Newton's method settles every time.
    #[test]
    fn newton_settles_at_usual_counts() {
        let mut rng = ChaCha8Rng::seed_from_u64(45);
        for _ in 0..5_000 {
            let n = rng.random_range(1_000u64..20_000) as f64;
            let p_hat = (rng.random_range(0.2..0.8) * n).round() / n;
            let delta: f64 = [0.2, 0.1, 0.05, 0.01, 0.001][rng.random_range(0..5)];
            let level = (2.0 / delta).ln();
            for upper in [false, true] {
                assert!(
                    chernoff_end(p_hat, n, level, upper).is_some(),
                    "p̂ = {p_hat}, n = {n}, δ = {delta}"
                );
            }
        }
    }
}
