#!/usr/bin/env python3
"""Reference ends of the without-replacement anytime sequence at large populations.

Run from the repository root (needs only mpmath):

    python3 tests/reference/make_wor_large.py

make_reference.py checks the sequence at populations up to 2,000 by scanning every
count.  Here populations run up to 10^9 (the study file's cap), where scanning is out
of reach, so each end is found by the same halving closeout uses (over
[S, min(floor((N+1)S/n), N-(n-S))], the smallest count whose ratio is below 1/delta),
with every ratio evaluated by mpmath at 60 digits.  The cases are drawn from Python's
`random` with a fixed seed: nothing is random between runs.

Writes anytime_wor_large.json in the layout of anytime_wor_intervals.json, and
wor_ratios.json: ln R(M) itself at seeded (S, n, M, N, k), populations from 2 to 10^9,
with the edges drawn often (no successes or no failures, M at its smallest or largest
feasible count, a census n = N, tiny and huge prior strengths).
"""

import json
import os
import platform
import random

import mpmath

HERE = os.path.dirname(os.path.abspath(__file__))
mpmath.mp.dps = 60
lg = mpmath.loggamma


def tuning_k(t, d):
    """k = max(t / (2L + ln(1 + 2L)) - 1, 1e-3), L = ln(1/delta), as mpf."""
    L = mpmath.log(1 / mpmath.mpf(d))
    return max(mpmath.mpf(t) / (2 * L + mpmath.log(1 + 2 * L)) - 1, mpmath.mpf("1e-3"))


def ln_ratio(s, n, M, N, k):
    """ln R(M) = ln[B(a+S, b+n-S)/B(a, b)] - ln[(M)_S (N-M)_(n-S) / (N)_n]."""
    if M < s or N - M < n - s:
        return mpmath.inf
    if M == 0 or M == N:
        return mpmath.mpf(0)
    f = n - s
    theta = mpmath.mpf(M) / N
    a, b = k * theta, k * (1 - theta)
    mix = (lg(a + s) - lg(a)) + (lg(b + f) - lg(b)) + lg(k) - lg(k + n)
    draws = (lg(M + 1) - lg(M - s + 1) + lg(N - M + 1) - lg(N - M - f + 1)
             - (lg(N + 1) - lg(N - n + 1)))
    return mix - draws


def write(name, source, cases):
    doc = {
        "source": source,
        "versions": {"python": platform.python_version(), "mpmath": mpmath.__version__},
        "cases": cases,
    }
    path = os.path.join(HERE, name)
    with open(path, "w") as out:
        out.write(json.dumps(doc, indent=1, allow_nan=False) + "\n")
    print(f"wrote {path}: {len(cases)} cases")


def lower_count(s, n, N, k, level):
    if s == 0:
        return 0
    hi = N - (n - s)
    peak = min(max(((N + 1) * s) // n, s), hi)
    a, b = s, peak + 1
    while a < b:
        mid = a + (b - a) // 2
        if ln_ratio(s, n, mid, N, k) < level:
            b = mid
        else:
            a = mid + 1
    return min(a, peak)


def main():
    rng = random.Random(20261202)
    cases = []
    for _ in range(48):
        N = int(10 ** rng.uniform(3, 9))
        n = rng.randint(1, min(N, 10**7))
        s = rng.choice([0, n, rng.randint(0, n), rng.randint(0, n), rng.randint(0, n)])
        conf = rng.choice([0.90, 0.95, 0.99])
        d = 1.0 - conf
        t = rng.choice([n, 500, 20000])
        k = tuning_k(t, d)
        level = mpmath.log(1 / mpmath.mpf(d))
        m_lower = lower_count(s, n, N, k, level)
        m_upper = N - lower_count(n - s, n, N, k, level)
        m_upper = max(m_upper, m_lower)
        cases.append({"successes": s, "n": n, "population": N, "confidence": conf,
                      "delta": d, "tune_for": t, "k": float(k),
                      "lower": m_lower / N, "upper": m_upper / N,
                      "m_lower": m_lower, "m_upper": m_upper})
    write("anytime_wor_large.json", (
        "Without-replacement prior-posterior-ratio sequence (Waudby-Smith & Ramdas 2020) "
        "with a beta-binomial prior, as in anytime_wor_intervals.json, at populations "
        "from 10^3 to 10^9: each end by halving over [S, min(floor((N+1)S/n), N-(n-S))] "
        "for the smallest M with ln R(M) < ln(1/delta) (the upper end the same on the "
        "failures), every ln R by mpmath.loggamma at 60 digits. Seeded draws "
        "(random.Random(20261202)): N log-uniform, n up to min(N, 10^7), S none, all or "
        "uniform, confidence 0.90/0.95/0.99, tune_for n, 500 or 20,000."
    ), cases)


def ratios():
    rng = random.Random(1973)
    cases = []
    for _ in range(600):
        N = int(10 ** rng.uniform(0.4, 9))
        n = N if rng.random() < 0.25 else rng.randint(1, min(N, 10**7))
        s = rng.choice([0, n, rng.randint(0, n), rng.randint(0, n)])
        lo, hi = s, N - (n - s)
        M = rng.choice([lo, hi, rng.randint(lo, hi), rng.randint(lo, hi)])
        if M == 0 or M == N:
            continue
        k = rng.choice([1e-3, 0.5, 14.0, 15.0, 300.0, 16596.460925203002, 1e6])
        v = ln_ratio(s, n, M, N, mpmath.mpf(k))
        cases.append({"successes": s, "n": n, "m": M, "population": N, "k": k,
                      "ln_ratio": float(v)})
    write("wor_ratios.json", (
        "ln R(M) of the without-replacement sequence, R as in anytime_wor_large.json, "
        "by mpmath.loggamma at 60 digits, k taken exactly from the double given. Seeded "
        "draws (random.Random(1973)); M = 0 and M = N (where R is 1 by definition) left out."
    ), cases)


if __name__ == "__main__":
    main()
    ratios()
