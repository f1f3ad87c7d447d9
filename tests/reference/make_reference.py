#!/usr/bin/env python3
"""Generate JSON reference fixtures for closeout's Rust tests.

Run from the repository root:

    python3 tests/reference/make_reference.py

Every fixture is written next to this script.  The values come from
general-purpose numerical libraries only (scipy, statsmodels, mpmath, numpy,
and optionally confseq for one cross-check file).  Nothing is random.

Conventions shared by every file:
  * delta = 1 - confidence, computed in IEEE double precision, so for
    confidence 0.95 delta is 0.050000000000000044.  Each case also carries
    the "delta" it used.
  * Floats are written with Python's repr (shortest round-trip form).
  * Infinite logarithms (log 0) are written as null.
"""

import importlib.metadata
import json
import math
import os
import platform
import sys
import time
from fractions import Fraction

import mpmath
import numpy as np
import scipy
import scipy.special as sp
import scipy.stats as st
import statsmodels
from statsmodels.stats.proportion import proportion_confint

HERE = os.path.dirname(os.path.abspath(__file__))

VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "mpmath": mpmath.__version__,
}


def delta_of(conf):
    return 1.0 - conf


def write(name, source, cases, extra=None, versions=None):
    doc = {"source": source, "versions": dict(versions or VERSIONS), "cases": cases}
    if extra:
        doc.update(extra)
    path = os.path.join(HERE, name)
    text = json.dumps(doc, indent=1, allow_nan=False)
    with open(path, "w") as f:
        f.write(text + "\n")
    print(f"  wrote {name}: {len(cases)} cases, {len(text) / 1e6:.3f} MB")


def dedupe_sorted(values):
    return sorted(set(values))


# ---------------------------------------------------------------------------
# Shared (S, n) grid for the fixed-sample interval files.
# ---------------------------------------------------------------------------

INTERVAL_NS = [1, 2, 3, 10, 20, 29, 100, 148, 263, 1000, 10000]
# Newcombe (1998) worked examples: 81/263, 15/148, 0/20, 1/29.
NEWCOMBE = [(81, 263), (15, 148), (0, 20), (1, 29)]


def interval_grid():
    pairs = set()
    for n in INTERVAL_NS:
        for s in (0, 1, 2, n // 3, n // 2, n - 1, n):
            if 0 <= s <= n:
                pairs.add((s, n))
    pairs.update(NEWCOMBE)
    return sorted(pairs, key=lambda sn: (sn[1], sn[0]))


# ---------------------------------------------------------------------------
# 1. Wald / Wilson / Clopper-Pearson intervals (statsmodels).
# ---------------------------------------------------------------------------

# Newcombe (1998), Table II, rounded to 4 decimals (Wald lower ends clipped).
NEWCOMBE_TABLE = {
    ("wald", 81, 263): (0.2522, 0.3638),
    ("wald", 15, 148): (0.0527, 0.1500),
    ("wald", 0, 20): (0.0, 0.0),
    ("wilson", 81, 263): (0.2553, 0.3662),
    ("wilson", 15, 148): (0.0624, 0.1605),
    ("wilson", 0, 20): (0.0, 0.1611),
    ("wilson", 1, 29): (0.0061, 0.1718),
    ("clopper-pearson", 81, 263): (0.2527, 0.3676),
    ("clopper-pearson", 15, 148): (0.0578, 0.1617),
    ("clopper-pearson", 0, 20): (0.0, 0.1684),
    ("clopper-pearson", 1, 29): (0.0009, 0.1776),
}


def make_intervals():
    methods = [("wald", "normal"), ("wilson", "wilson"), ("clopper-pearson", "beta")]
    cases = []
    for name, sm_method in methods:
        confs = [0.90, 0.95, 0.99]
        if name == "clopper-pearson":
            confs += [1 - 1e-6, 1 - 1e-12]
        for conf in confs:
            d = delta_of(conf)
            for s, n in interval_grid():
                lo, hi = proportion_confint(s, n, alpha=d, method=sm_method)
                lo = min(max(float(lo), 0.0), 1.0)
                hi = min(max(float(hi), 0.0), 1.0)
                assert math.isfinite(lo) and math.isfinite(hi), (name, s, n, conf)
                cases.append({"method": name, "successes": s, "n": n,
                              "confidence": conf, "delta": d,
                              "lower": lo, "upper": hi})
    # Check the Newcombe examples are present at 0.95 and match his table.
    for (name, s, n), (elo, ehi) in NEWCOMBE_TABLE.items():
        hit = [c for c in cases if c["method"] == name and c["successes"] == s
               and c["n"] == n and c["confidence"] == 0.95]
        assert len(hit) == 1, (name, s, n)
        assert abs(hit[0]["lower"] - elo) < 6e-5 and abs(hit[0]["upper"] - ehi) < 6e-5, \
            (name, s, n, hit[0], elo, ehi)
    for name in ("wald", "wilson", "clopper-pearson"):
        for s, n in NEWCOMBE:
            assert any(c["method"] == name and c["successes"] == s and c["n"] == n
                       and c["confidence"] == 0.95 for c in cases)
    source = (
        "statsmodels.stats.proportion.proportion_confint(successes, n, alpha=delta, "
        "method=M) with M='normal' (wald), 'wilson' (wilson), 'beta' (clopper-pearson); "
        "delta = 1 - confidence in double precision; each end then clipped explicitly "
        "to [0, 1] with min(max(x, 0), 1). Grid: n in "
        f"{INTERVAL_NS}, successes in {{0, 1, 2, n//3, n//2, n-1, n}} (within 0..n, "
        "deduplicated) plus the Newcombe (1998) examples 81/263, 15/148, 0/20, 1/29; "
        "confidence 0.90/0.95/0.99, and for clopper-pearson also 1-1e-6 and 1-1e-12. "
        "At 0.95 the Newcombe examples were checked against his Table II to 4 decimals "
        "(Wald 1/29 excluded from that check: its lower end is negative before clipping)."
    )
    write("intervals.json", source, cases)


# ---------------------------------------------------------------------------
# 2. Two-sided normal quantiles.
# ---------------------------------------------------------------------------

def make_normal_quantiles():
    deltas = [0.5, 0.2, 0.1, 0.05, 0.01, 1e-3, 1e-4, 1e-6, 1e-9, 1e-12]
    cases = [{"delta": d, "z": float(st.norm.isf(d / 2))} for d in deltas]
    source = "z = scipy.stats.norm.isf(delta / 2), i.e. the upper delta/2 quantile of N(0, 1)."
    write("normal_quantiles.json", source, cases)


# ---------------------------------------------------------------------------
# 3. Binomial tails (scipy), with 50-digit mpmath logs alongside.
# ---------------------------------------------------------------------------

def mp_log_binom_tails(n, k, p):
    """(log P(X <= k), log P(X > k)) for X ~ Bin(n, p) as mpf; None for log 0.

    The tail on the far side of the mode is summed term by term, starting at the
    boundary and moving away from the mode (terms decrease geometrically), until
    the remainder bound term/(1-ratio) is below 1e-55 of the sum; the other tail
    is log1p(-exp(.)) of it.  mp.dps = 50.
    """
    with mpmath.workdps(50):
        P = mpmath.mpf(p)
        Q = 1 - P
        lnp, lnq = mpmath.log(P), mpmath.log(Q)

        def log_pmf(j):
            return (mpmath.loggamma(n + 1) - mpmath.loggamma(j + 1)
                    - mpmath.loggamma(n - j + 1) + j * lnp + (n - j) * lnq)

        def tail(start, step):
            total = mpmath.mpf(1)
            term = mpmath.mpf(1)
            j = start
            eps = mpmath.mpf(10) ** -55
            while True:
                nj = j + step
                if nj < 0 or nj > n:
                    break
                if step < 0:
                    r = (j * Q) / ((n - j + 1) * P)
                else:
                    r = ((n - j) * P) / ((j + 1) * Q)
                term *= r
                total += term
                j = nj
                if r < 1 and term / (1 - r) < eps * total:
                    break
            return log_pmf(start) + mpmath.log(total)

        mode = math.floor((n + 1) * p)
        if k < mode:
            lc = tail(k, -1)
            ls = mpmath.log1p(-mpmath.exp(lc))
        else:
            if k >= n:
                return mpmath.mpf(0), None
            ls = tail(k + 1, +1)
            lc = mpmath.log1p(-mpmath.exp(ls))
        return lc, ls


def mpf_to_float(x):
    return None if x is None else float(x)


def make_binomial_tails():
    ns = [1, 10, 1000, 100000, 10000000]
    ps = [1e-6, 0.01, 0.3, 0.5, 0.9]
    cases = []
    dropped = 0
    worst_rel = 0.0
    replaced = 0
    for n in ns:
        for p in ps:
            mean = n * p
            sd = math.sqrt(n * p * (1 - p))
            ks = [0, n - 1]
            for c in (0, -2, 2, -5, 5, -10, 10):
                ks.append(min(max(math.floor(mean + c * sd + 0.5), 0), n))
            for k in dedupe_sorted(ks):
                cdf = float(st.binom.cdf(k, n, p))
                sf = float(st.binom.sf(k, n, p))
                lcdf = float(st.binom.logcdf(k, n, p))
                lsf = float(st.binom.logsf(k, n, p))
                if any(math.isnan(v) for v in (cdf, sf, lcdf, lsf)):
                    dropped += 1
                    continue
                mlc, mls = mp_log_binom_tails(n, k, p)
                mlc_f, mls_f = mpf_to_float(mlc), mpf_to_float(mls)
                case = {"n": n, "k": k, "p": p, "cdf": cdf, "sf": sf}
                for key, sv, mv in (("logcdf", lcdf, mlc_f), ("logsf", lsf, mls_f)):
                    if math.isfinite(sv):
                        case[key] = sv
                        case[key + "_source"] = "scipy"
                    else:
                        # scipy underflowed to log(0); use the mpmath value.
                        case[key] = mv
                        case[key + "_source"] = "mpmath"
                        if mv is not None:
                            replaced += 1
                case["logcdf_mp"] = mlc_f
                case["logsf_mp"] = mls_f
                case["cdf_mp"] = 0.0 if mlc is None else float(mpmath.exp(mlc))
                case["sf_mp"] = 0.0 if mls is None else float(mpmath.exp(mls))
                # Track how far scipy's probabilities are from the 50-digit values.
                for sv, mv in ((cdf, mlc), (sf, mls)):
                    ref = 0.0 if mv is None else float(mpmath.exp(mv))
                    if ref > 1e-290:
                        worst_rel = max(worst_rel, abs(sv - ref) / ref)
                cases.append(case)
    print(f"  binomial tails: dropped {dropped} nan cases, {replaced} logs from mpmath, "
          f"max rel |scipy - mpmath| of cdf/sf = {worst_rel:.3g}")
    source = (
        "scipy.stats.binom(n, p): cdf = binom.cdf(k) = P(X <= k), sf = binom.sf(k) = P(X > k), "
        "logcdf = binom.logcdf(k), logsf = binom.logsf(k). Where scipy's log is -inf "
        "(underflow) it is replaced by the mpmath value and <key>_source says 'mpmath' "
        "(otherwise 'scipy'); null means the exact value is log 0 (k = n, P(X > n) = 0). "
        "logcdf_mp / logsf_mp: independent 50-digit mpmath values for every case (tail on "
        "the far side of the mode summed term by term from log-gamma pmf; the other tail by "
        "log1p(-exp(.))); cdf_mp / sf_mp = exp of those, rounded to double. Grid: n in {1, 10, 1000, 1e5, 1e7}, p in {1e-6, 0.01, 0.3, 0.5, "
        "0.9}, k = floor(n p + c sd + 0.5) for c in {0, +-2, +-5, +-10} (sd = sqrt(n p (1-p))), "
        "clipped to 0..n, plus k = 0 and k = n-1, deduplicated; cases where scipy returned "
        f"nan dropped ({dropped} dropped). Max relative difference between scipy cdf/sf and "
        f"exp(mpmath log) over values > 1e-290: {worst_rel:.3g}."
    )
    write("binomial_tails.json", source, cases)


# ---------------------------------------------------------------------------
# 4. Exact hypergeometric interval for a finite population.
# ---------------------------------------------------------------------------

def wor_grid(populations, with_n=None):
    out = []
    for N in populations:
        for n in dedupe_sorted([1, 5, N // 10, N // 2, N - 1, N]):
            if not 1 <= n <= N:
                continue
            for s in dedupe_sorted([0, 1, n // 2, n - 1, n]):
                if 0 <= s <= n:
                    out.append((N, n, s))
    return out


def make_hypergeometric():
    cases = []
    for N, n, s in wor_grid([20, 50, 100, 500, 2000]):
        Ms = np.arange(N + 1)
        # scipy's hypergeom(M=total, n=successes in population, N=draws).
        upper_tail = st.hypergeom.sf(s - 1, N, Ms, n)   # P(X >= s | M)
        lower_tail = st.hypergeom.cdf(s, N, Ms, n)      # P(X <= s | M)
        assert np.all(np.diff(upper_tail) >= -1e-12), (N, n, s)
        assert np.all(np.diff(lower_tail) <= 1e-12), (N, n, s)
        for conf in (0.90, 0.95, 0.99):
            d = delta_of(conf)
            ok_lo = np.nonzero(upper_tail > d / 2)[0]
            ok_hi = np.nonzero(lower_tail > d / 2)[0]
            m_lo, m_hi = int(ok_lo[0]), int(ok_hi[-1])
            cases.append({"successes": s, "n": n, "population": N, "confidence": conf,
                          "delta": d, "lower": m_lo / N, "upper": m_hi / N,
                          "m_lower": m_lo, "m_upper": m_hi})
    source = (
        "Exact interval for a population count M (0..N) from a without-replacement sample "
        "of n with S successes: m_lower = smallest M with P(X >= S | N, M, n) > delta/2, "
        "m_upper = largest M with P(X <= S | N, M, n) > delta/2, found by evaluating "
        "scipy.stats.hypergeom.sf(S-1, N, M, n) and .cdf(S, N, M, n) at every M = 0..N "
        "(monotonicity in M asserted); lower = m_lower/N, upper = m_upper/N. "
        "Grid: N in {20, 50, 100, 500, 2000}, n in {1, 5, N//10, N//2, N-1, N}, "
        "S in {0, 1, n//2, n-1, n} (valid, deduplicated), confidence 0.90/0.95/0.99."
    )
    write("hypergeometric_intervals.json", source, cases)


# ---------------------------------------------------------------------------
# 5. Chernoff (relative-entropy) interval, mpmath bisection.
# ---------------------------------------------------------------------------

def mp_bisect(f, lo, hi, rel=mpmath.mpf("1e-35"), max_iter=2000):
    """Bisection for a sign change: f(lo) and f(hi) have opposite signs.

    lo and hi are the two bracket ends in either order; stops when their
    distance is below rel times the larger magnitude.
    """
    flo = f(lo)
    fhi = f(hi)
    assert (flo < 0) != (fhi < 0), (lo, hi, flo, fhi)
    for _ in range(max_iter):
        mid = (lo + hi) / 2
        fm = f(mid)
        if (fm < 0) == (flo < 0):
            lo, flo = mid, fm
        else:
            hi, fhi = mid, fm
        if abs(hi - lo) <= rel * max(abs(lo), abs(hi)):
            break
    return (lo + hi) / 2


def make_chernoff():
    cases = []
    with mpmath.workdps(50):
        for conf in (0.90, 0.95, 0.99, 1 - 1e-12):
            d = delta_of(conf)
            thr = mpmath.log(2 / mpmath.mpf(d))
            for s, n in interval_grid():
                S, nn = mpmath.mpf(s), mpmath.mpf(n)

                def f(p, S=S, nn=nn):
                    v = mpmath.mpf(0)
                    if S > 0:
                        v += S * mpmath.log(S / (nn * p))
                    if nn - S > 0:
                        v += (nn - S) * mpmath.log((nn - S) / (nn * (1 - p)))
                    return v - thr

                phat = S / nn
                lo = mpmath.mpf(0) if s == 0 else mp_bisect(f, mpmath.mpf(0) + mpmath.mpf(10) ** -400, phat)
                hi = mpmath.mpf(1) if s == n else mp_bisect(f, phat, 1 - mpmath.mpf(10) ** -45)
                cases.append({"successes": s, "n": n, "confidence": conf, "delta": d,
                              "lower": float(lo), "upper": float(hi)})
    source = (
        "Chernoff interval {p : n KL(S/n || p) <= ln(2/delta)}, KL(a||p) = a ln(a/p) + "
        "(1-a) ln((1-a)/(1-p)) with 0 ln 0 = 0. Each end found by plain bisection in mpmath "
        "(mp.dps = 50) on the bracket (1e-400, S/n) resp. (S/n, 1 - 1e-45), iterated until the "
        "bracket width is below 1e-35 relative, then rounded to double; lower = 0 when S = 0, "
        "upper = 1 when S = n. (S, n) grid as intervals.json; confidence 0.90/0.95/0.99/1-1e-12."
    )
    write("chernoff_intervals.json", source, cases)


# ---------------------------------------------------------------------------
# 6. Beta-binomial mixture confidence sequence (with replacement).
# ---------------------------------------------------------------------------

def tuning_k(t, d):
    """k = max(t / (2L + ln(1 + 2L)) - 1, 1e-3), L = ln(1/delta), as mpf."""
    L = mpmath.log(1 / mpmath.mpf(d))
    return max(mpmath.mpf(t) / (2 * L + mpmath.log(1 + 2 * L)) - 1, mpmath.mpf("1e-3"))


def mp_log_mixture(p, s, n, k):
    """ln M(p) = lnB(S + kp, n - S + k(1-p)) - lnB(kp, k(1-p)) - S ln p - (n-S) ln(1-p)."""
    a, b = k * p, k * (1 - p)
    lg = mpmath.loggamma
    v = (lg(s + a) + lg(n - s + b) - lg(n + k)) - (lg(a) + lg(b) - lg(k))
    if s:
        v -= s * mpmath.log(p)
    if n - s:
        v -= (n - s) * mpmath.log(1 - p)
    return v


def float_log_mixture(p, s, n, k):
    a, b = k * p, k * (1 - p)
    v = sp.betaln(s + a, n - s + b) - sp.betaln(a, b)
    if s:
        v = v - s * np.log(p)
    if n - s:
        v = v - (n - s) * np.log1p(-p)
    return v


_P_GRID = None


def p_grid():
    global _P_GRID
    if _P_GRID is None:
        lin = np.linspace(0.0, 1.0, 200001)[1:-1]
        lo = np.geomspace(1e-300, 1e-5, 3000)
        hi = 1.0 - np.geomspace(1e-15, 1e-5, 1000)
        g = np.unique(np.concatenate([lo, lin, hi]))
        _P_GRID = g[(g > 0) & (g < 1)]
    return _P_GRID


def runs_of(mask):
    """List of (start, end) index runs where mask is True (end inclusive)."""
    idx = np.nonzero(mask)[0]
    if idx.size == 0:
        return []
    breaks = np.nonzero(np.diff(idx) > 1)[0]
    starts = np.concatenate([[idx[0]], idx[breaks + 1]])
    ends = np.concatenate([idx[breaks], [idx[-1]]])
    return list(zip(starts.tolist(), ends.tolist()))


def mixture_interval(s, n, d, t):
    """Return (lower, upper, contiguous, runs) of {p in (0,1): M(p) < 1/delta}."""
    with mpmath.workdps(50):
        k = tuning_k(t, d)
        thr = mpmath.log(1 / mpmath.mpf(d))
        kf, thrf = float(k), float(thr)
        grid = p_grid()
        with np.errstate(all="ignore"):
            vals = float_log_mixture(grid, s, n, kf)
        inside = vals < thrf
        # Limits at the ends: M(0+) = 1 (S=0), k/(n-1+k) (S=1), +inf (S>=2);
        # symmetrically at 1.  Both finite limits are < 1 < 1/delta.
        in0, in1 = s <= 1, s >= n - 1
        mask = np.concatenate([[in0], inside, [in1]])
        pts = np.concatenate([[0.0], grid, [1.0]])
        runs = runs_of(mask)
        assert runs, (s, n, d, t)

        def f(p):
            if p <= 0:
                return mpmath.mpf(-1) if in0 else mpmath.mpf(1)
            if p >= 1:
                return mpmath.mpf(-1) if in1 else mpmath.mpf(1)
            return mp_log_mixture(p, s, n, k) - thr

        def refine(i_out, i_in):
            # Move outwards until the mp signs confirm the float scan.
            step = 1 if i_out > i_in else -1
            while not (f(mpmath.mpf(pts[i_out])) >= 0):
                i_out += step
            while not (f(mpmath.mpf(pts[i_in])) < 0):
                i_in -= step
            return mp_bisect(f, mpmath.mpf(pts[i_out]), mpmath.mpf(pts[i_in]),
                             rel=mpmath.mpf("1e-25"))

        first, last = runs[0][0], runs[-1][1]
        lower = mpmath.mpf(0) if first == 0 else refine(first - 1, first)
        upper = mpmath.mpf(1) if last == len(pts) - 1 else refine(last + 1, last)
        return float(lower), float(upper), len(runs) == 1, len(runs), k


def anytime_grid():
    out = []
    for n in [1, 2, 10, 29, 100, 263, 1000, 10000]:
        for s in dedupe_sorted([0, 1, n // 3, n // 2, n - 1, n]):
            if 0 <= s <= n:
                out.append((s, n))
    return out


def make_anytime():
    cases = []
    noncontig = []
    for s, n in anytime_grid():
        for conf in (0.90, 0.95, 0.99):
            d = delta_of(conf)
            for t in dedupe_sorted([n, 500, 2000]):
                lo, hi, contig, nruns, k = mixture_interval(s, n, d, t)
                if not contig:
                    noncontig.append((s, n, conf, t, nruns))
                cases.append({"successes": s, "n": n, "confidence": conf, "delta": d,
                              "tune_for": t, "k": float(k), "lower": lo, "upper": hi,
                              "contiguous": contig})
    print(f"  anytime: {len(noncontig)} non-contiguous sets: {noncontig[:10]}")
    source = (
        "Beta-binomial mixture confidence set {p in (0,1) : M(p) < 1/delta}, "
        "M(p) = B(S + kp, n - S + k(1-p)) / (B(kp, k(1-p)) p^S (1-p)^(n-S)), "
        "k = max(t/(2L + ln(1+2L)) - 1, 1e-3), L = ln(1/delta), t = tune_for (k is also "
        "reported). lower = inf and upper = sup of the set: the end limits are taken "
        "analytically (M(0+) = 1 for S = 0, k/(n-1+k) for S = 1, +inf for S >= 2, both finite "
        "values < 1/delta, so lower = 0 iff S <= 1 and upper = 1 iff S >= n-1). Otherwise the "
        "end is bracketed by a float64 scan (scipy.special.betaln) of ~204000 points in (0,1) "
        "(uniform step 5e-6 plus geometric points down to 1e-300 and up to 1-1e-15), then "
        "bisected in mpmath (mp.dps = 50, log-beta from mpmath.loggamma) to 1e-25 relative. "
        "contiguous = the scanned in-set points form a single run. Grid: n in {1, 2, 10, 29, "
        "100, 263, 1000, 10000}, S in {0, 1, n//3, n//2, n-1, n}, confidence 0.90/0.95/0.99, "
        "tune_for in {n, 500, 2000} (deduplicated)."
    )
    write("anytime_intervals.json", source, cases)
    return cases


def make_anytime_confseq(cases):
    try:
        from confseq import boundaries
        cs_version = importlib.metadata.version("confseq")
    except Exception as exc:  # pragma: no cover - depends on the machine
        print(f"  confseq unavailable ({exc!r}); anytime_confseq.json left as it is")
        return
    out = []
    failures = []
    worst_abs = 0.0
    worst_case = None
    for c in cases:
        s, n, d, t = c["successes"], c["n"], c["delta"], c["tune_for"]
        try:
            lo, hi = boundaries.bernoulli_confidence_interval(float(s), n, d, float(t), d)
        except Exception as exc:
            failures.append({"successes": s, "n": n, "confidence": c["confidence"],
                             "tune_for": t, "k": c["k"], "error": str(exc)})
            continue
        lo, hi = float(lo), float(hi)
        if not (math.isfinite(lo) and math.isfinite(hi)):
            continue
        diff = max(abs(lo - c["lower"]), abs(hi - c["upper"]))
        if diff > worst_abs:
            worst_abs, worst_case = diff, (s, n, c["confidence"], t, lo, hi, c["lower"], c["upper"])
        out.append({"successes": s, "n": n, "confidence": c["confidence"], "delta": d,
                    "tune_for": t, "lower": lo, "upper": hi,
                    "contiguous": c["contiguous"],
                    "mpmath_lower": c["lower"], "mpmath_upper": c["upper"]})
    print(f"  confseq: {len(failures)} cases raised errors")
    print(f"  confseq: {len(out)} cases, max |confseq - mpmath| = {worst_abs:.3g} at {worst_case}")
    versions = dict(VERSIONS)
    versions["confseq_version"] = cs_version
    source = (
        f"confseq {cs_version}: confseq.boundaries.bernoulli_confidence_interval(num_successes=S, "
        "num_trials=n, alpha=delta, t_opt=tune_for, alpha_opt=delta) (two-sided beta-binomial "
        "mixture, Howard et al. 2021). Mapping: for each p it builds "
        "BetaBinomialMixture(v_opt = p(1-p) t_opt, alpha_opt, g = p, h = 1-p, two-sided) with "
        "r = max(rho - g h, 1e-3 g h), rho = v_opt/(2 ln(1/alpha_opt) + ln(1 + 2 ln(1/alpha_opt))), "
        "i.e. r = p(1-p) k with k = max(t_opt/(2L + ln(1+2L)) - 1, 1e-3), L = ln(1/alpha_opt), "
        "and mixing Beta(r/g, r/h) = Beta(k(1-p), kp) on the failure/success axis; its "
        "log_superMG(s = S - np, v = p(1-p) n) reduces algebraically to ln M(p) of "
        "anytime_intervals.json, so with alpha_opt = delta the two definitions coincide. "
        "confseq bisects in double precision (boost eps_tolerance(40)) on (0, S/n) and (S/n, 1), "
        "treating p = 0 and p = 1 as outside, and returns 0 / 1 only when S = 0 / S = n. "
        f"Max |confseq - mpmath| over all {len(out)} cases: {worst_abs:.3g}. "
        "mpmath_lower/upper repeat the anytime_intervals.json values. "
        f"{len(failures)} grid cases are missing because confseq raised an error on them "
        "(listed in confseq_failures: with S = 1 its lower-end bisection runs towards p = 0 "
        "until k p underflows and boost's lgamma(0) throws)."
    )
    write("anytime_confseq.json", source, out, versions=versions,
          extra={"confseq_failures": failures})


# ---------------------------------------------------------------------------
# 7. Without-replacement confidence sequence (prior-posterior ratio).
# ---------------------------------------------------------------------------

_LGI = {}


def lg_int(x):
    v = _LGI.get(x)
    if v is None:
        v = _LGI[x] = mpmath.loggamma(x)
    return v


def make_anytime_wor():
    cases = []
    noncontig = []
    with mpmath.workdps(50):
        _LGI.clear()
        for N, n, s in wor_grid([20, 100, 500, 2000]):
            # ln (N)_n, the falling factorial, independent of M.
            ln_Nn = lg_int(N + 1) - lg_int(N - n + 1)
            for conf in (0.90, 0.95):
                d = delta_of(conf)
                thr = mpmath.log(1 / mpmath.mpf(d))
                for t in dedupe_sorted([n, 500]):
                    k = tuning_k(t, d)
                    lgk_const = mpmath.loggamma(k) - mpmath.loggamma(k + n)
                    members = []
                    for M in range(N + 1):
                        if M == 0:
                            ok = s == 0
                        elif M == N:
                            ok = s == n
                        elif M < s or N - M < n - s:
                            ok = False
                        else:
                            a = k * M / N
                            b = k - a
                            lg = mpmath.loggamma
                            ln_beta_ratio = lgk_const + (lg(a + s) - lg(a) if s else 0) \
                                + (lg(b + n - s) - lg(b) if n - s else 0)
                            ln_ff = (lg_int(M + 1) - lg_int(M - s + 1)
                                     + lg_int(N - M + 1) - lg_int(N - M - (n - s) + 1) - ln_Nn)
                            ok = (ln_beta_ratio - ln_ff) < thr
                        if ok:
                            members.append(M)
                    assert members, (N, n, s, conf, t)
                    contig = members[-1] - members[0] + 1 == len(members)
                    if not contig:
                        noncontig.append((N, n, s, conf, t))
                    cases.append({"successes": s, "n": n, "population": N,
                                  "confidence": conf, "delta": d, "tune_for": t,
                                  "k": float(k),
                                  "lower": members[0] / N, "upper": members[-1] / N,
                                  "m_lower": members[0], "m_upper": members[-1],
                                  "contiguous": contig})
    print(f"  anytime WoR: {len(noncontig)} non-contiguous sets: {noncontig[:10]}")
    source = (
        "Without-replacement prior-posterior-ratio set (Waudby-Smith & Ramdas 2020) with a "
        "beta-binomial prior: for M = 0..N, theta = M/N, a = k theta, b = k (1-theta), "
        "R(M) = [B(a+S, b+n-S)/B(a, b)] / [(M)_S (N-M)_(n-S) / (N)_n] ((x)_j falling factorial); "
        "M is in the set iff R(M) < 1/delta, evaluated as ln R < ln(1/delta) in mpmath "
        "(mp.dps = 50, all logs of gamma functions via mpmath.loggamma) at every M. "
        "M = 0 is in iff S = 0, M = N iff S = n (limits); M < S or N-M < n-S excluded (R = inf). "
        "k = max(t/(2L + ln(1+2L)) - 1, 1e-3), L = ln(1/delta), t = tune_for (k reported). "
        "m_lower/m_upper = min/max member, lower/upper = those over N; contiguous = the members "
        "are consecutive integers. Grid: N in {20, 100, 500, 2000}, n in {1, 5, N//10, N//2, "
        "N-1, N}, S in {0, 1, n//2, n-1, n} (valid, deduplicated), confidence 0.90/0.95, "
        "tune_for in {n, 500} (deduplicated)."
    )
    write("anytime_wor_intervals.json", source, cases)


# ---------------------------------------------------------------------------
# 8. Exact worst-case binomial margin.
# ---------------------------------------------------------------------------
#
# For fixed n and eps > 0, f(p) = P_p(|X/n - p| > eps) = P(X < n(p-eps)) + P(X > n(p+eps)).
# The set of counted k only changes at the breakpoints p = j/n + eps (k = j enters the
# lower tail just to the right) and p = j/n - eps (k = j enters the upper tail just to
# the left).  Between consecutive breakpoints f = P(X <= a) + P(X >= b) with fixed a < b,
# whose derivative n[C(n-1,b-1) p^(b-1) q^(n-b) - C(n-1,a) p^a q^(n-1-a)] changes sign at
# most once, from - to + (the ratio of the two terms is monotone in p/(1-p)); so f has no
# interior maximum on a piece and its supremum over [0,1] is the largest one-sided limit
# at a breakpoint (f(0) = f(1) = 0).  Those one-sided limits are evaluated exactly with the
# counted sets determined in rational arithmetic (eps as a Fraction, q = 2 n eps):
#   at p0 = j/n + eps:  right limit P(X <= j) + P(X > j + floor(q)),
#                       left  limit P(X <= j-1) + P(X >= j + ceil(q)),
#   at p0 = j/n - eps:  right limit P(X <= j - ceil(q)) + P(X > j),
#                       left  limit P(X <= j - floor(q) - 1) + P(X >= j),
# with scipy.stats.binom.cdf/sf at p0 = j/n +- eps evaluated in double precision.  For the non-strict event
# |X/n - p| >= eps the function is upper semicontinuous and the supremum is the value at a
# breakpoint with both closed sets: P(X <= j) + P(X >= j + ceil(q)) at j/n + eps, and
# P(X <= j - ceil(q)) + P(X >= j) at j/n - eps.  sup_p f is nonincreasing in eps, and the
# margin m(n) = min{eps : sup_p f <= delta} is found by bisection on eps over doubles.

def sup_tail(n, eps, strict=True):
    E = Fraction(eps)
    if E >= 1:
        return 0.0
    e = float(eps)
    q = 2 * n * E
    fq, cq = math.floor(q), math.ceil(q)
    nE = n * E
    # Lower-type breakpoints j/n + eps: in (0, 1] iff j <= n - nE; < 1 iff j < n - nE.
    j1_max = math.floor(n - nE)
    j1_open_max = math.ceil(n - nE) - 1
    # Upper-type breakpoints j/n - eps: in [0, 1) iff j >= nE; > 0 iff j > nE.
    j2_min = math.ceil(nE)
    j2_open_min = math.floor(nE) + 1
    cdf, sf = st.binom.cdf, st.binom.sf
    best = 0.0
    j1 = np.arange(0, j1_max + 1)
    if j1.size:
        p1 = j1 / n + e
        if strict:
            jr = j1[j1 <= j1_open_max]
            if jr.size:
                pr = jr / n + e
                best = max(best, np.max(cdf(jr, n, pr) + sf(jr + fq, n, pr)))
            best = max(best, np.max(cdf(j1 - 1, n, p1) + sf(j1 + cq - 1, n, p1)))
        else:
            best = max(best, np.max(cdf(j1, n, p1) + sf(j1 + cq - 1, n, p1)))
    j2 = np.arange(j2_min, n + 1)
    if j2.size:
        p2 = j2 / n - e
        if strict:
            best = max(best, np.max(cdf(j2 - cq, n, p2) + sf(j2, n, p2)))
            jl = j2[j2 >= j2_open_min]
            if jl.size:
                pl = jl / n - e
                best = max(best, np.max(cdf(jl - fq - 1, n, pl) + sf(jl - 1, n, pl)))
        else:
            best = max(best, np.max(cdf(j2 - cq, n, p2) + sf(j2 - 1, n, p2)))
    return float(best)


def worst_case_margin(n, d):
    """(margin, exact) where margin is the smallest passing double, or the double
    nearest an exact rational j/(2n) margin, and exact is "j/(2n)" reduced, or None."""
    lo, hi = 0.0, 1.0
    assert sup_tail(n, lo) > d and sup_tail(n, hi) <= d
    while True:
        mid = (lo + hi) / 2
        if mid <= lo or mid >= hi:
            break
        if sup_tail(n, mid) <= d:
            hi = mid
        else:
            lo = mid
    # When two breakpoints coincide the margin is exactly j/(2n); confirm it in
    # rational arithmetic (passes at j/(2n), fails just below it).
    c = Fraction(round(hi * 2 * n), 2 * n)
    if abs(float(c) - hi) <= 1e-12 and sup_tail(n, c) <= d \
            and sup_tail(n, c - Fraction(1, 10 ** 30)) > d:
        return float(c), f"{c.numerator}/{c.denominator}"
    return hi, None


def grid_margin(n, d, num=200001):
    """Brute force: max over a dense p grid of the per-p smallest eps (exact per p)."""
    p = np.linspace(0.0, 1.0, num)
    ks = np.arange(n + 1)
    pmf = st.binom.pmf(ks[None, :], n, p[:, None])
    dist = np.abs(ks[None, :] / n - p[:, None])
    order = np.argsort(-dist, axis=1, kind="stable")
    dsorted = np.take_along_axis(dist, order, axis=1)
    csum = np.cumsum(np.take_along_axis(pmf, order, axis=1), axis=1)
    first = np.argmax(csum > d, axis=1)
    eps_p = dsorted[np.arange(p.size), first]
    return float(eps_p.max())


def grid_sup(n, eps, num=2000001):
    """Brute force: max over a dense p grid of P_p(|X/n - p| > eps)."""
    p = np.linspace(0.0, 1.0, num)
    lo = np.ceil(n * (p - eps)) - 1
    hi = np.floor(n * (p + eps))
    return float(np.max(st.binom.cdf(lo, n, p) + st.binom.sf(hi, n, p)))


def sizes_for(eps, conf, strict):
    """eps is an exact Fraction (1/20, 3/100), so ties j/n + eps = k/n - eps are exact."""
    d = delta_of(conf)
    e = float(eps)
    nH = math.ceil(math.log(2 / d) / (2 * e * e))
    passing = [sup_tail(n, eps, strict) <= d for n in range(1, nH + 1)]
    assert passing[-1]
    n1 = passing.index(True) + 1
    fails = [i + 1 for i, ok in enumerate(passing) if not ok]
    n2 = (fails[-1] + 1) if fails else 1
    return {"margin": e, "confidence": conf, "smallest_passing": n1,
            "all_larger_pass_from": n2, "checked_up_to": nH,
            "failing_after_smallest_passing": [n for n in fails if n > n1]}


def make_worst_case():
    cases = []
    grid_checks = []
    specs = [(n, 0.95) for n in [1, 2, 3, 4, 5, 10, 20, 50, 100, 200, 500, 1000]]
    specs += [(n, c) for c in (0.90, 0.99) for n in (1, 10, 100, 1000)]
    for n, conf in specs:
        d = delta_of(conf)
        m, exact = worst_case_margin(n, d)
        if n <= 4:
            # Small n: the worst case is p just above eps with X = 0, (1-eps)^n = delta.
            assert abs(m - (1 - d ** (1 / n))) < 1e-12, (n, conf, m)
        if n <= 20:
            g = grid_margin(n, d)
            assert g <= m + 1e-12 and m - g < 2e-5, (n, conf, m, g)
            grid_checks.append(m - g)
        cases.append({"n": n, "confidence": conf, "delta": delta_of(conf), "margin": m,
                      "margin_exact": exact})
    eps_list = (Fraction(1, 20), Fraction(3, 100))
    sizes = [sizes_for(e, 0.95, True) for e in eps_list]
    sizes_ns = [sizes_for(e, 0.95, False) for e in eps_list]
    # Cross-check the exact supremum against a dense p grid around the found sizes.
    d95 = delta_of(0.95)
    sup_gaps = []
    for row in sizes:
        eps = Fraction(row["margin"]).limit_denominator(1000)
        for n in sorted({row["smallest_passing"] - 1, row["smallest_passing"],
                         row["all_larger_pass_from"] - 1, row["all_larger_pass_from"]}):
            if n < 1:
                continue
            exact, brute = sup_tail(n, eps), grid_sup(n, float(eps))
            assert brute <= exact + 1e-12, (n, eps, exact, brute)
            sup_gaps.append(exact - brute)
            ok_exact, ok_brute = exact <= d95, brute <= d95
            if ok_exact != ok_brute:
                print(f"  note: n={n} eps={eps}: exact sup {exact!r} vs grid sup {brute!r}")
    print(f"  worst case: sizes strict {sizes}, non-strict {sizes_ns}; "
          f"grid margin gaps max {max(grid_checks):.3g}; sup gaps max {max(sup_gaps):.3g}")
    source = (
        "Exact worst-case binomial margin m(n) = min{eps >= 0 : sup_{p in [0,1]} "
        "P_p(|X/n - p| > eps) <= delta}, X ~ Bin(n, p), delta = 1 - confidence. "
        "The supremum over p is computed exactly: the counted set of k changes only at the "
        "breakpoints p = j/n +- eps, between them the probability is P(X <= a) + P(X >= b) "
        "which is decreasing-then-increasing in p, so the supremum is the largest one-sided "
        "limit at a breakpoint (sets fixed in rational arithmetic, probabilities from "
        "scipy.stats.binom.cdf/sf); m(n) by bisection on eps over doubles to adjacent doubles "
        "(the reported margin is the smallest passing double). When the margin is exactly "
        "j/(2n) (two breakpoints coincide) this is confirmed in rational arithmetic (passes "
        "at j/(2n), fails at j/(2n) - 1e-30), margin is then the double nearest j/(2n) and "
        "margin_exact gives the fraction; otherwise margin_exact is null (e.g. n = 2 at 0.95, "
        "where m = 1 - sqrt(delta); for n <= 4 m = 1 - delta^(1/n), asserted). Verified for n <= 20 against a brute-force "
        "maximum over 200001 grid values of p of the per-p smallest eps (max gap "
        f"{max(grid_checks):.3g}), and the sizes against a 2000001-point p grid "
        f"(max sup gap {max(sup_gaps):.3g}). 'sizes': for eps in {{0.05, 0.03}} at 0.95, "
        "eps taken as the exact rationals 1/20 and 3/100; smallest_passing = smallest n with sup_p P_p(|X/n - p| > eps) <= delta, "
        "all_larger_pass_from = smallest n2 such that every n in [n2, checked_up_to] passes, "
        "checked_up_to = ceil(ln(2/delta)/(2 eps^2)) (Hoeffding's n; every n from there on "
        "passes by Hoeffding's inequality), failing_after_smallest_passing lists the n in "
        "(smallest_passing, checked_up_to] that fail. 'sizes_nonstrict': the same with the event "
        "|X/n - p| >= eps."
    )
    write("binomial_worst_case.json", source, cases,
          extra={"sizes": sizes, "sizes_nonstrict": sizes_ns})


def main():
    t0 = time.time()
    steps = [
        ("intervals", make_intervals),
        ("normal quantiles", make_normal_quantiles),
        ("binomial tails", make_binomial_tails),
        ("hypergeometric", make_hypergeometric),
        ("chernoff", make_chernoff),
        ("anytime", None),
        ("anytime without replacement", make_anytime_wor),
        ("binomial worst case", make_worst_case),
    ]
    for name, fn in steps:
        t1 = time.time()
        print(f"{name} ...", flush=True)
        if fn is None:
            make_anytime_confseq(make_anytime())
        else:
            fn()
        print(f"  ({time.time() - t1:.1f} s)", flush=True)
    print(f"total {time.time() - t0:.1f} s")


if __name__ == "__main__":
    sys.exit(main())
