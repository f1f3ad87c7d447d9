"""Chernoff lower ends far below p̂, for `concentration::tests::far_lower_ends_match_mpmath`.

Each is the root in u of n·KL(p̂ ‖ e^u) = ln(2/δ), found by mpmath's findroot at 60
digits from the doubles the test uses, and printed rounded to a double.
Run: python3 tests/reference/chernoff_far_ends.py  (mpmath 1.3.0 gave the test's values)
"""
import mpmath
from mpmath import mp, mpf, log, exp, findroot

mp.dps = 60
CASES = [
    # p̂, n, δ, a starting u near the root
    (6.551721273973269e-9, 15081485.0, 2.899130945787342e-12, -295),
    (3.040911958650272e-8, 23877336.16423369, 1.881501027684639e-8, -44),
    (1.7904941415827086e-6, 4396.0, 0.18045181841335398, -319),
]

print("mpmath", mpmath.__version__)
for p_hat, n, delta, start in CASES:
    a, nn, level = mpf(p_hat), mpf(n), log(2 / mpf(delta))
    gap = lambda u: nn * (a * log(a / exp(u)) + (1 - a) * log((1 - a) / (1 - exp(u)))) - level
    root = exp(findroot(gap, mpf(start)))
    print(repr(p_hat), repr(n), repr(delta), repr(float(root)))
