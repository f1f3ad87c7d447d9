//! Bracketed root finding (Brent 1973, "Algorithms for Minimization without
//! Derivatives", ch. 4), tolerant of infinite function values at the bracket ends.

/// A root of `f` in `[a, b]`, given `f(a)` and `f(b)` of opposite signs (either may be
/// infinite). Converges to within a few ulps of the root, in at most 400 steps: a
/// root that only halving reaches, many orders of magnitude below the bracket's
/// width, can take more, and the search then stops short (search over ln x there, as
/// `anytime::mixture_lower` does below 10⁻⁹ p̂).
pub fn brent(mut f: impl FnMut(f64) -> f64, a: f64, b: f64) -> f64 {
    let mut search = Brent::new(a, b);
    while let Some(x) = search.wants() {
        search.give(f(x));
    }
    search.root()
}

/// Where a search for a root starts: the bracket `[a, b]` it is known to be in (f of
/// opposite signs at the ends, either end's value perhaps infinite), and perhaps a
/// narrower bracket inside it where the root is expected.
#[derive(Clone, Copy, Debug)]
pub struct Start {
    bracket: (f64, f64),
    expected: Option<(f64, f64)>,
}

impl Start {
    /// The root is somewhere in `[a, b]`.
    pub fn within(a: f64, b: f64) -> Start {
        Start {
            bracket: (a, b),
            expected: None,
        }
    }

    /// The root is in `[a, b]` and expected in `[lo, hi]`, which is cut to `[a, b]`
    /// (and ignored if nothing, or only a point, is left).
    pub fn expecting(self, lo: f64, hi: f64) -> Start {
        let (a, b) = self.bracket;
        let (lo, hi) = (lo.max(a), hi.min(b));
        Start {
            expected: (lo < hi).then_some((lo, hi)),
            ..self
        }
    }

    /// The search to run, given f at the expected bracket's ends (ignored without one):
    /// on that bracket when f's signs there differ or one is 0, else on the whole.
    fn search(self, f_lo: f64, f_hi: f64) -> Brent {
        let straddles = (f_lo <= 0.0 && f_hi >= 0.0) || (f_lo >= 0.0 && f_hi <= 0.0);
        match self.expected {
            Some((lo, hi)) if straddles => {
                let mut search = Brent::new(lo, hi);
                search.give(f_lo);
                search.give(f_hi);
                search
            }
            _ => Brent::new(self.bracket.0, self.bracket.1),
        }
    }
}

/// A root of `f` from a [`Start`]: where it has an expected bracket, f is asked for
/// at its two ends first; if their signs differ (or one is a root), Brent's method runs
/// on that bracket from those two values, and otherwise on the whole bracket, as
/// [`brent`] does. Either way the answer is a root to within a few ulps; which of the
/// nearly equal floats there it is depends on the bracket the search started from.
pub fn brent_from(mut f: impl FnMut(f64) -> f64, start: Start) -> f64 {
    let (f_lo, f_hi) = match start.expected {
        Some((lo, hi)) => (f(lo), f(hi)),
        None => (f64::NAN, f64::NAN),
    };
    let mut search = start.search(f_lo, f_hi);
    while let Some(x) = search.wants() {
        search.give(f(x));
    }
    search.root()
}

/// Two roots at once, each searched as [`brent_from`] searches, but with their
/// function values asked for together, `both(Some(x1), Some(x2))` (or with `None` once
/// a search has finished, whose value is then ignored), so an evaluator that computes
/// two values at once can overlap them.
pub fn brent_pair(
    mut both: impl FnMut(Option<f64>, Option<f64>) -> (f64, f64),
    first: Start,
    second: Start,
) -> (f64, f64) {
    let (e1, e2) = (first.expected, second.expected);
    let ((lo1, lo2), (hi1, hi2)) = if e1.is_some() || e2.is_some() {
        (
            both(e1.map(|e| e.0), e2.map(|e| e.0)),
            both(e1.map(|e| e.1), e2.map(|e| e.1)),
        )
    } else {
        ((f64::NAN, f64::NAN), (f64::NAN, f64::NAN))
    };
    let (mut first, mut second) = (first.search(lo1, hi1), second.search(lo2, hi2));
    loop {
        let (x1, x2) = (first.wants(), second.wants());
        if x1.is_none() && x2.is_none() {
            return (first.root(), second.root());
        }
        let (y1, y2) = both(x1, x2);
        if x1.is_some() {
            first.give(y1);
        }
        if x2.is_some() {
            second.give(y2);
        }
    }
}

/// Where a search stands.
#[derive(Clone, Copy, Debug)]
enum Stage {
    /// Wants f(a).
    EndA,
    /// Wants f(b).
    EndB,
    /// Wants f at the last point it stepped to.
    Stepped,
    Done(f64),
}

/// Brent's method as a search that says where it wants f next ([`Brent::wants`]) and
/// is given the value ([`Brent::give`]).
#[derive(Clone, Copy, Debug)]
struct Brent {
    a: f64,
    b: f64,
    c: f64,
    fa: f64,
    fb: f64,
    fc: f64,
    d: f64,
    e: f64,
    /// Steps left of the 400 allowed.
    left: u32,
    stage: Stage,
}

impl Brent {
    fn new(a: f64, b: f64) -> Brent {
        Brent {
            a,
            b,
            c: a,
            fa: f64::NAN,
            fb: f64::NAN,
            fc: f64::NAN,
            d: b - a,
            e: b - a,
            left: 400,
            stage: Stage::EndA,
        }
    }

    fn root(&self) -> f64 {
        match self.stage {
            Stage::Done(x) => x,
            _ => self.b,
        }
    }

    /// The point at which f is wanted next, or `None` when the root is found.
    fn wants(&mut self) -> Option<f64> {
        match self.stage {
            Stage::EndA => Some(self.a),
            Stage::EndB => Some(self.b),
            Stage::Done(_) => None,
            Stage::Stepped => {
                if self.left == 0 {
                    self.stage = Stage::Done(self.b);
                    return None;
                }
                match self.step() {
                    Some(x) => {
                        self.left -= 1;
                        Some(x)
                    }
                    None => {
                        self.stage = Stage::Done(self.b);
                        None
                    }
                }
            }
        }
    }

    /// The value of f at the point [`Brent::wants`] gave.
    fn give(&mut self, fx: f64) {
        match self.stage {
            Stage::EndA => {
                self.fa = fx;
                self.stage = Stage::EndB;
            }
            Stage::EndB => {
                self.fb = fx;
                if self.fa == 0.0 {
                    self.stage = Stage::Done(self.a);
                } else if self.fb == 0.0 {
                    self.stage = Stage::Done(self.b);
                } else {
                    self.c = self.a;
                    self.fc = self.fa;
                    self.d = self.b - self.a;
                    self.e = self.d;
                    self.stage = Stage::Stepped;
                }
            }
            Stage::Stepped => self.fb = fx,
            Stage::Done(_) => {}
        }
    }

    /// One step: the next point, or `None` when b is the root.
    fn step(&mut self) -> Option<f64> {
        let Brent {
            mut a,
            mut b,
            mut c,
            mut fa,
            mut fb,
            mut fc,
            mut d,
            mut e,
            ..
        } = *self;
        if (fb > 0.0) == (fc > 0.0) {
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol = 2.0 * f64::EPSILON * b.abs() + f64::MIN_POSITIVE;
        let m = 0.5 * (c - b);
        let found = m.abs() <= tol || fb == 0.0;
        if !found {
            let finite = fa.is_finite() && fb.is_finite() && fc.is_finite();
            if finite && e.abs() >= tol && fa.abs() > fb.abs() {
                let s = fb / fa;
                let (mut p, mut q);
                if a == c {
                    p = 2.0 * m * s;
                    q = 1.0 - s;
                } else {
                    let qq = fa / fc;
                    let r = fb / fc;
                    p = s * (2.0 * m * qq * (qq - r) - (b - a) * (r - 1.0));
                    q = (qq - 1.0) * (r - 1.0) * (s - 1.0);
                }
                if p > 0.0 {
                    q = -q;
                } else {
                    p = -p;
                }
                if 2.0 * p < (3.0 * m * q - (tol * q).abs()).min((e * q).abs()) {
                    e = d;
                    d = p / q;
                } else {
                    d = m;
                    e = m;
                }
            } else {
                d = m;
                e = m;
            }
            a = b;
            fa = fb;
            b += if d.abs() > tol { d } else { tol.copysign(m) };
        }
        *self = Brent {
            a,
            b,
            c,
            fa,
            fb,
            fc,
            d,
            e,
            ..*self
        };
        (!found).then_some(b)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Brent's method as this module had it before it became a resumable search
    /// (`0dcfe67`), the reference the search must follow step for step.
    fn brent_as_before(mut f: impl FnMut(f64) -> f64, a: f64, b: f64) -> f64 {
        let (mut a, mut b) = (a, b);
        let (mut fa, mut fb) = (f(a), f(b));
        if fa == 0.0 {
            return a;
        }
        if fb == 0.0 {
            return b;
        }
        let (mut c, mut fc) = (a, fa);
        let mut d = b - a;
        let mut e = d;
        for _ in 0..400 {
            if (fb > 0.0) == (fc > 0.0) {
                c = a;
                fc = fa;
                d = b - a;
                e = d;
            }
            if fc.abs() < fb.abs() {
                a = b;
                b = c;
                c = a;
                fa = fb;
                fb = fc;
                fc = fa;
            }
            let tol = 2.0 * f64::EPSILON * b.abs() + f64::MIN_POSITIVE;
            let m = 0.5 * (c - b);
            if m.abs() <= tol || fb == 0.0 {
                return b;
            }
            let finite = fa.is_finite() && fb.is_finite() && fc.is_finite();
            if finite && e.abs() >= tol && fa.abs() > fb.abs() {
                let s = fb / fa;
                let (mut p, mut q);
                if a == c {
                    p = 2.0 * m * s;
                    q = 1.0 - s;
                } else {
                    let qq = fa / fc;
                    let r = fb / fc;
                    p = s * (2.0 * m * qq * (qq - r) - (b - a) * (r - 1.0));
                    q = (qq - 1.0) * (r - 1.0) * (s - 1.0);
                }
                if p > 0.0 {
                    q = -q;
                } else {
                    p = -p;
                }
                if 2.0 * p < (3.0 * m * q - (tol * q).abs()).min((e * q).abs()) {
                    e = d;
                    d = p / q;
                } else {
                    d = m;
                    e = m;
                }
            } else {
                d = m;
                e = m;
            }
            a = b;
            fa = fb;
            b += if d.abs() > tol { d } else { tol.copysign(m) };
            fb = f(b);
        }
        b
    }

    /// A function to solve and its bracket.
    type Case = (Box<dyn Fn(f64) -> f64>, f64, f64);

    /// Functions of the shapes the bounds solve: a log-tail-like curve with an
    /// infinite end, a smooth one, a steep one; with random parameters (seeded).
    fn cases() -> Vec<Case> {
        let mut rng = ChaCha8Rng::seed_from_u64(41);
        let mut out: Vec<Case> = Vec::new();
        for _ in 0..200 {
            let root: f64 = rng.random_range(1e-6..0.999);
            let k: f64 = rng.random_range(0.5..400.0);
            let shape = rng.random_range(0..3);
            let f: Box<dyn Fn(f64) -> f64> = match shape {
                0 => Box::new(move |x: f64| k * (x.ln() - root.ln())),
                1 => Box::new(move |x: f64| (x - root) * (1.0 + k * x * x)),
                _ => Box::new(move |x: f64| {
                    if x >= 1.0 {
                        f64::NEG_INFINITY
                    } else {
                        k * ((1.0 - x).ln() - (1.0 - root).ln())
                    }
                }),
            };
            out.push((f, 0.0, 1.0));
        }
        out
    }

    #[test]
    fn the_search_steps_as_before() {
        for (f, a, b) in cases() {
            let (mut seen_now, mut seen_before) = (Vec::new(), Vec::new());
            let now = brent(
                |x| {
                    seen_now.push(x);
                    f(x)
                },
                a,
                b,
            );
            let before = brent_as_before(
                |x| {
                    seen_before.push(x);
                    f(x)
                },
                a,
                b,
            );
            assert_eq!(now.to_bits(), before.to_bits());
            assert_eq!(seen_now.len(), seen_before.len());
            assert!(
                seen_now
                    .iter()
                    .zip(&seen_before)
                    .all(|(x, y)| x.to_bits() == y.to_bits())
            );
        }
    }

    #[test]
    fn two_searches_side_by_side_are_each_as_alone() {
        let cases = cases();
        for pair in cases.chunks(2) {
            let [(f1, a1, b1), (f2, a2, b2)] = pair else {
                continue;
            };
            let (r1, r2) = brent_pair(
                |x, y| (x.map_or(f64::NAN, f1), y.map_or(f64::NAN, f2)),
                Start::within(*a1, *b1),
                Start::within(*a2, *b2),
            );
            assert_eq!(r1.to_bits(), brent_as_before(f1, *a1, *b1).to_bits());
            assert_eq!(r2.to_bits(), brent_as_before(f2, *a2, *b2).to_bits());
        }
    }

    /// From an expected bracket around the root, or one that misses it on either side
    /// (then the whole bracket is searched), each of a pair of searches ends where f, as
    /// computed, changes sign within 4 ε|x| either way, as a search over the whole
    /// bracket does. (Not always at the same float: where f's own rounding is coarser
    /// than an ulp, as in `ln(1 − x)` near a small root, the sign changes more than once
    /// there.)
    #[test]
    fn an_expected_bracket_hit_or_missed_gives_the_root() {
        let cases = cases();
        let whole: Vec<f64> = cases.iter().map(|(f, a, b)| brent(f, *a, *b)).collect();
        let is_root = |f: &dyn Fn(f64) -> f64, x: f64| {
            let t = 4.0 * f64::EPSILON * x.abs() + 2.0 * f64::MIN_POSITIVE;
            let (below, at, above) = (f(x - t), f(x), f(x + t));
            at == 0.0 || (below < 0.0) != (above < 0.0)
        };
        for (i, pair) in cases.chunks(2).enumerate() {
            let [(f1, a1, b1), (f2, a2, b2)] = pair else {
                continue;
            };
            let (w1, w2) = (whole[2 * i], whole[2 * i + 1]);
            assert!(is_root(f1, w1) && is_root(f2, w2));
            // Around the root, left of it, right of it (each inside the bracket).
            let expected = |w: f64, a: f64, b: f64| {
                [
                    (w * 0.99, (w * 1.01).min(b)),
                    (a + (w - a) * 0.2, a + (w - a) * 0.6),
                    (w + (b - w) * 0.3, w + (b - w) * 0.7),
                ]
            };
            for (e1, e2) in expected(w1, *a1, *b1)
                .into_iter()
                .zip(expected(w2, *a2, *b2))
            {
                let (r1, r2) = brent_pair(
                    |x, y| (x.map_or(f64::NAN, f1), y.map_or(f64::NAN, f2)),
                    Start::within(*a1, *b1).expecting(e1.0, e1.1),
                    Start::within(*a2, *b2).expecting(e2.0, e2.1),
                );
                assert!(
                    is_root(f1, r1),
                    "{r1:e} (whole bracket: {w1:e}) from {e1:?}"
                );
                assert!(
                    is_root(f2, r2),
                    "{r2:e} (whole bracket: {w2:e}) from {e2:?}"
                );
                assert!((r1 - w1).abs() <= 1e-9 * w1 && (r2 - w2).abs() <= 1e-9 * w2);
            }
        }
    }

    #[test]
    fn finds_known_roots() {
        let r = brent(|x| x * x - 2.0, 0.0, 2.0);
        assert!((r - std::f64::consts::SQRT_2).abs() < 4.0 * f64::EPSILON);
        let r = brent(|x| x.ln() + 20.0, 0.0, 1.0);
        assert!(((r - (-20.0f64).exp()) / r).abs() < 1e-14);
        let r = brent(
            |x| {
                if x >= 1.0 {
                    f64::NEG_INFINITY
                } else {
                    (1.0 - x).ln() + 5.0
                }
            },
            0.0,
            1.0,
        );
        assert!((r - (1.0 - (-5.0f64).exp())).abs() < 1e-15);
    }
}
