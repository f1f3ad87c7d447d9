//! Bracketed root finding (Brent 1973, "Algorithms for Minimization without
//! Derivatives", ch. 4), tolerant of infinite function values at the bracket ends.

/// A root of `f` in `[a, b]`, given `f(a)` and `f(b)` of opposite signs (either may be
/// infinite). Converges to within a few ulps of the root.
pub fn brent(mut f: impl FnMut(f64) -> f64, a: f64, b: f64) -> f64 {
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

#[cfg(test)]
mod tests {
    use super::*;

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
