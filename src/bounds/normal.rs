//! The usual approximate intervals: Wald (normal approximation) and Wilson (1927).

use super::special::normal_two_sided;

/// Wald: `p̂ ± z √(p̂q̂/n) · f`, `f` the finite population factor (1 without one).
pub fn wald(p: f64, n: f64, delta: f64, fpc: f64) -> (f64, f64) {
    let half = normal_two_sided(delta) * (p * (1.0 - p) / n).sqrt() * fpc;
    (p - half, p + half)
}

/// Wilson's score interval: the `x` with `(p̂ − x)² ≤ z² f² x(1 − x)/n`.
///
/// Each end is computed where it has no cancellation: the upper root directly, the
/// lower root from the product of the roots, `p̂² / ((1 + z²f²/n) · upper)`, and by the
/// mirror image for the other side, so that an end near 0 keeps its relative precision.
pub fn wilson(p: f64, q: f64, n: f64, delta: f64, fpc: f64) -> (f64, f64) {
    let z = normal_two_sided(delta) * fpc;
    (wilson_lower(p, q, n, z), 1.0 - wilson_lower(q, p, n, z))
}

/// The lower root of `(p − x)² = (z²/n) x(1 − x)` (Wilson's lower end), as the
/// product of the roots over the upper one, which does not cancel at small p.
pub(super) fn wilson_lower(p: f64, q: f64, n: f64, z: f64) -> f64 {
    if p <= 0.0 {
        return 0.0;
    }
    let z2n = z * z / n;
    let denom = 1.0 + z2n;
    let upper = (p + 0.5 * z2n + z * (p * q / n + 0.25 * z2n / n).sqrt()) / denom;
    p * p / (denom * upper)
}
