#!/usr/bin/env python3
"""Generate the reference fixtures for dispar-stats.

Writes JSON files to crates/dispar-stats/tests/fixtures/. Every case names the
library (and version) or the method that produced its reference values. The
output is deterministic: one fixed numpy seed, fixed seeds for scipy's
quasi-Monte Carlo integration, and mpmath at 50 significant digits.

Run from the repository root (see tools/reference/README.md):

    python tools/reference/generate.py
"""

from __future__ import annotations

import json
import math
import sys
import time
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np
import scipy
import statsmodels
from numpy.polynomial import chebyshev as cheb
from numpy.polynomial.legendre import leggauss
from scipy import stats
from scipy.stats import contingency as sp_contingency
from scipy.stats import mstats
from statsmodels.stats.contingency_tables import Table as SmTable
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

mp = mpmath.mp
mp.dps = 50

SEED = 20260314
ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "crates" / "dispar-stats" / "tests" / "fixtures"

V_MPMATH = f"mpmath {mpmath.__version__}"
V_SCIPY = f"scipy {scipy.__version__}"
V_SM = f"statsmodels {statsmodels.__version__}"
V_NUMPY = f"numpy {np.__version__}"
VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "mpmath": mpmath.__version__,
}

SRC_EXACT = "exact rational arithmetic (Python fractions)"
SRC_MP_TAIL = f"{V_MPMATH} gammainc(df/2, x/2, inf, regularized=True), mp.dps=50"
SRC_MP = f"{V_MPMATH}, mp.dps=50"


# ---------------------------------------------------------------------------
# helpers


def f(x) -> float:
    """mpf / Fraction / numpy scalar -> Python float (round to nearest)."""
    return float(x)  # Fraction.__float__ is correctly rounded


def mpq(q: Fraction):
    return mpmath.mpf(q.numerator) / q.denominator


def upper_tail(x, df: int):
    """Chi-square upper tail p and log10 p, mpmath (exact to ~50 digits)."""
    x = mpmath.mpf(x)
    if x <= 0:
        return mpmath.mpf(1), mpmath.mpf(0)
    p = mpmath.gammainc(mpmath.mpf(df) / 2, x / 2, mpmath.inf, regularized=True)
    return p, mpmath.log10(p)


def dlnp_dx(x, df: int):
    """d ln(upper tail)/dx = -pdf/sf, for propagating a statistic's rounding into p."""
    x = mpmath.mpf(x)
    if x <= 0:
        return mpmath.mpf(0)
    k = mpmath.mpf(df) / 2
    log_pdf = (k - 1) * mpmath.log(x) - x / 2 - k * mpmath.log(2) - mpmath.loggamma(k)
    p = mpmath.gammainc(k, x / 2, mpmath.inf, regularized=True)
    return -mpmath.exp(log_pdf - mpmath.log(p))


def p_fields(x, df: int) -> dict:
    p, l10 = upper_tail(x, df)
    return {
        "p": f(p),
        "p_str": mpmath.nstr(p, 20),
        "log10_p": f(l10),
        "dlnp_dx": f(dlnp_dx(x, df)),
    }


def write(name: str, payload: dict) -> int:
    OUT.mkdir(parents=True, exist_ok=True)
    payload = {
        "generator": "tools/reference/generate.py",
        "seed": SEED,
        "versions": VERSIONS,
        **payload,
    }
    # One case per line: compact, yet diffs stay readable.
    head = {k: v for k, v in payload.items() if k != "cases"}
    lines = [json.dumps(c, separators=(",", ":"), allow_nan=False) for c in payload.get("cases", [])]
    text = json.dumps(head, separators=(",", ":"), allow_nan=False)[:-1] + ',"cases":[\n' + ",\n".join(lines) + "\n]}\n"
    json.loads(text)
    (OUT / name).write_text(text)
    n = len(payload.get("cases", []))
    print(f"  {name}: {n} cases, {len(text) / 1024:.0f} KiB")
    return n


# ---------------------------------------------------------------------------
# chi-square upper tail and critical values


def chisq_tail_cases() -> list[dict]:
    cases = []
    grid = {
        1: [0.0, 1e-10, 1e-4, 0.0158, 0.5, 1, 2.706, 3.841458820694124, 6.635, 10, 30, 100, 700, 1500, 3000],
        2: [0.0, 1e-8, 0.1, 1, 5.991, 13.8155, 50, 1000, 1500],
        3: [0.1, 2.5, 7.815, 20, 100, 1e5, 1e6],
        4: [0.7107, 3.3567, 9.4877, 13.2767, 18.4668, 1400.5],
        5: [1.1455, 11.0705, 20.5150, 200],
        7: [2.1673, 14.0671, 80],
        10: [0.5, 3.9403, 9.3418, 18.307, 23.2093, 29.5883, 100, 1000, 20000],
        11: [4.57, 19.675, 31.264],
        20: [10.851, 31.410, 37.566, 45.315, 500],
        30: [18.493, 29.336, 43.773, 50.892, 59.703],
        55: [30, 55, 73.311, 90, 1000],
        100: [77.929, 99.334, 124.342, 135.807, 149.449, 400, 5000],
        200: [150, 199.334, 233.994, 300],
        999: [900, 998.33, 1073.6, 1200, 5000, 20000],
        5000: [4800, 5000, 5165, 5500],
    }
    for df, xs in grid.items():
        for x in xs:
            cases.append(
                {"name": f"chisq df={df} x={x!r}", "x": float(x), "df": df, **p_fields(x, df), "source": SRC_MP_TAIL}
            )
    # Far-tail cases the issue names explicitly.
    for x, df in [(1500.0, 1), (20000.0, 10)]:
        cases.append({"name": f"far tail df={df} x={x!r}", "x": x, "df": df, **p_fields(x, df), "source": SRC_MP_TAIL})
    return cases


def critical_value(alpha: float, df: int):
    target = mpmath.mpf(alpha)
    k = mpmath.mpf(df) / 2
    x0 = mpmath.mpf(float(stats.chi2.isf(alpha, df)))

    def g(x):
        return mpmath.log(mpmath.gammainc(k, x / 2, mpmath.inf, regularized=True)) - mpmath.log(target)

    root = mpmath.findroot(g, x0, tol=mpmath.mpf(10) ** -40)
    check = mpmath.gammainc(k, root / 2, mpmath.inf, regularized=True)
    assert abs(check / target - 1) < mpmath.mpf(10) ** -30, (alpha, df)
    return root


def chisq_critical_cases() -> list[dict]:
    cases = []
    for df in [1, 2, 3, 4, 5, 6, 8, 10, 15, 20, 30, 50, 100, 999]:
        for alpha in [0.1, 0.05, 0.025, 0.01, 0.001, 1e-6]:
            x = critical_value(alpha, df)
            cases.append(
                {
                    "name": f"critical alpha={alpha} df={df}",
                    "alpha": alpha,
                    "df": df,
                    "critical": f(x),
                    "critical_str": mpmath.nstr(x, 25),
                    "scipy_isf": float(stats.chi2.isf(alpha, df)),
                    "source": f"{V_MPMATH} findroot on gammainc(df/2, x/2, inf, regularized=True) = alpha, mp.dps=50",
                }
            )
    return cases


# ---------------------------------------------------------------------------
# contingency tables


def reduce_table(t: list[list[int]]):
    rows = [i for i, r in enumerate(t) if sum(r) > 0]
    ncol = len(t[0]) if t else 0
    cols = [j for j in range(ncol) if sum(r[j] for r in t) > 0]
    red = [[t[i][j] for j in cols] for i in rows]
    return rows, cols, red


def bergsma_v(x2: Fraction, n: int, r: int, c: int):
    """Bias-corrected Cramer's V, Bergsma (2013), J. Korean Stat. Soc. 42:323-328, eq. for V-tilde.

    phi2+ = max(0, X2/n - (c-1)(r-1)/(n-1)); r~ = r - (r-1)^2/(n-1); c~ = c - (c-1)^2/(n-1);
    V~ = sqrt(phi2+ / min(r~ - 1, c~ - 1)). Implemented here in Python (exact rationals).
    """
    if n < 2:
        return None
    phi2 = x2 / n - Fraction((c - 1) * (r - 1), n - 1)
    phi2 = max(Fraction(0), phi2)
    rt = r - Fraction((r - 1) ** 2, n - 1)
    ct = c - Fraction((c - 1) ** 2, n - 1)
    den = min(rt - 1, ct - 1)
    if den <= 0:
        return None
    return mpmath.sqrt(mpq(phi2 / den))


def fisher_exact_mp(a: int, b: int, c: int, d: int) -> dict:
    """Fisher's exact test on [[a,b],[c,d]] by exact integer enumeration of the hypergeometric support.

    Two-sided: sum of P(x) over tables with P(x) <= P(observed) * (1 + 1e-7) (the convention of
    R's fisher.test and of dispar-stats; scipy uses 1 + 1e-14). Exact integers, then mpmath.
    """
    r1, r2, c1 = a + b, c + d, a + c
    n = r1 + r2
    if r1 == 0 or r2 == 0 or c1 == 0 or c1 == n:
        return {"p_two_sided": 1.0, "log10_p": 0.0, "p_less": 1.0, "p_greater": 1.0}
    lo, hi = max(0, c1 - r2), min(r1, c1)
    # weights w(x) = C(r1, x) * C(r2, c1 - x), by exact recurrence from x = lo
    w = math.comb(r1, lo) * math.comb(r2, c1 - lo)
    weights = []
    for x in range(lo, hi + 1):
        weights.append(w)
        if x < hi:
            # C(r1,x+1) = C(r1,x)(r1-x)/(x+1); C(r2,c1-x-1) = C(r2,c1-x)(c1-x)/(r2-c1+x+1)
            w = w * (r1 - x) * (c1 - x) // ((x + 1) * (r2 - c1 + x + 1))
    total = math.comb(n, c1)
    assert sum(weights) == total
    obs = weights[a - lo]
    two = sum(wx for wx in weights if wx * 10_000_000 <= obs * 10_000_001)
    less = sum(weights[: a - lo + 1])
    greater = sum(weights[a - lo :])
    p2 = mpq(Fraction(two, total))
    return {
        "p_two_sided": f(min(p2, mpmath.mpf(1))),
        "log10_p": f(mpmath.log10(min(p2, mpmath.mpf(1)))),
        "p_less": f(mpq(Fraction(less, total))),
        "p_greater": f(mpq(Fraction(greater, total))),
    }


def table_case(name: str, kind: str, t: list[list[int]]) -> dict:
    rows, cols, red = reduce_table(t)
    case: dict = {
        "name": name,
        "kind": kind,
        "counts": t,
        "kept_rows": rows,
        "kept_cols": cols,
        "dropped_rows": [i for i in range(len(t)) if i not in rows],
        "dropped_cols": [j for j in range(len(t[0])) if j not in cols],
    }
    if len(rows) < 2 or len(cols) < 2:
        case["testable"] = False
        case["source"] = "margins computed in Python (integers)"
        return case
    case["testable"] = True
    r, c = len(rows), len(cols)
    R = [sum(row) for row in red]
    C = [sum(red[i][j] for i in range(r)) for j in range(c)]
    N = sum(R)
    df = (r - 1) * (c - 1)

    # Exact Pearson X^2 and Yates, exact expected counts and contributions.
    expected = [[Fraction(R[i] * C[j], N) for j in range(c)] for i in range(r)]
    contrib = [[(red[i][j] - expected[i][j]) ** 2 / expected[i][j] for j in range(c)] for i in range(r)]
    x2 = sum(sum(row) for row in contrib)
    sum_abs_dev = sum(abs(red[i][j] - expected[i][j]) for i in range(r) for j in range(c))

    # G^2 with mpmath.
    g2 = mpmath.mpf(0)
    for i in range(r):
        for j in range(c):
            o = red[i][j]
            if o > 0:
                g2 += o * mpmath.log(mpmath.mpf(o * N) / (R[i] * C[j]))
    g2 *= 2

    pear_res, adj_res = [], []
    for i in range(r):
        for j in range(c):
            e = mpq(expected[i][j])
            d = red[i][j] - e
            pear_res.append(f(d / mpmath.sqrt(e)))
            v = e * (1 - mpmath.mpf(R[i]) / N) * (1 - mpmath.mpf(C[j]) / N)
            adj_res.append(f(d / mpmath.sqrt(v)))

    arr = np.array(red, dtype=np.float64)
    sp = stats.chi2_contingency(arr, correction=False)
    sp_g = stats.chi2_contingency(arr, correction=False, lambda_="log-likelihood")
    # numpy formula for adjusted residuals (cross-check of the mpmath values)
    e_np = np.outer(arr.sum(1), arr.sum(0)) / arr.sum()
    adj_np = (arr - e_np) / np.sqrt(
        e_np * np.outer(1 - arr.sum(1) / arr.sum(), 1 - arr.sum(0) / arr.sum())
    )
    sm_adj = SmTable(arr, shift_zeros=False).standardized_resids
    sm_adj = np.asarray(sm_adj, dtype=np.float64)
    assert np.allclose(adj_np.ravel(), adj_res, rtol=1e-9, atol=1e-9), name
    assert np.allclose(sm_adj.ravel(), adj_res, rtol=1e-9, atol=1e-9), name
    assert math.isclose(sp.statistic, f(x2), rel_tol=1e-7, abs_tol=1e-7), (name, sp.statistic, f(x2))

    exp_f = [f(expected[i][j]) for i in range(r) for j in range(c)]
    below1 = sum(1 for e in exp_f if e < 1)
    below5 = sum(1 for e in exp_f if e < 5)
    case.update(
        {
            "n": N,
            "rows": r,
            "cols": c,
            "df": df,
            "expected": exp_f,
            "contribution": [f(contrib[i][j]) for i in range(r) for j in range(c)],
            "pearson_residual": pear_res,
            "adjusted_residual": adj_res,
            "adjusted_residual_statsmodels_max_abs_diff": float(np.max(np.abs(sm_adj.ravel() - np.array(adj_res)))),
            "pearson": {
                "statistic": f(x2),
                "sum_abs_dev": f(sum_abs_dev),
                **p_fields(mpq(x2), df),
                "source": f"{SRC_EXACT} for X^2; {SRC_MP_TAIL} for p",
            },
            "likelihood_ratio": {
                "statistic": f(g2),
                **p_fields(g2, df),
                "source": f"{SRC_MP} for G^2 = 2 sum O ln(O/E); {SRC_MP_TAIL} for p",
            },
            "scipy": {
                "pearson": float(sp.statistic),
                "pearson_p": float(sp.pvalue),
                "likelihood_ratio": float(sp_g.statistic),
                "likelihood_ratio_p": float(sp_g.pvalue),
                "expected_max_rel_diff": float(np.max(np.abs(np.asarray(sp.expected_freq).ravel() / np.array(exp_f) - 1))),
                "source": f"{V_SCIPY} stats.chi2_contingency(correction=False[, lambda_='log-likelihood'])",
            },
            "validity": {
                "min_expected": min(exp_f),
                "cells_below_1": below1,
                "cells_below_5": below5,
                "share_below_5": below5 / (r * c),
                "holds": below1 == 0 and below5 / (r * c) <= 0.2,
                "source": "Cochran's rule (no E < 1, at most 20% of E < 5), exact expected counts (Python fractions)",
            },
            "cramers_v": {
                "v": float(sp_contingency.association(np.array(red, dtype=np.int64), method="cramer", correction=False)),
                "source": f"{V_SCIPY} stats.contingency.association(method='cramer', correction=False)",
            },
            "adjusted_residual_source": f"{SRC_MP}: (O-E)/sqrt(E (1-R/N)(1-C/N)); numpy {np.__version__} formula"
            f" and {V_SM} Table(shift_zeros=False).standardized_resids agree to 1e-9",
        }
    )
    vc = bergsma_v(x2, N, r, c)
    if vc is not None:
        case["cramers_v"]["v_corrected"] = f(vc)
        case["cramers_v"]["v_corrected_source"] = (
            "Bergsma (2013) bias-corrected Cramer's V, implemented in tools/reference/generate.py (exact rationals + mpmath)"
        )
    if r == 2 and c == 2:
        yates = Fraction(0)
        for i in range(2):
            for j in range(2):
                dev = abs(red[i][j] - expected[i][j])
                dev = max(Fraction(0), dev - Fraction(1, 2))
                yates += dev * dev / expected[i][j]
        sp_y = stats.chi2_contingency(arr, correction=True)
        assert math.isclose(sp_y.statistic, f(yates), rel_tol=1e-7, abs_tol=1e-9), name
        case["yates"] = {
            "statistic": f(yates),
            **p_fields(mpq(yates), 1),
            "scipy": float(sp_y.statistic),
            "source": f"{SRC_EXACT}: sum max(0, |O-E| - 1/2)^2 / E; {V_SCIPY} chi2_contingency(correction=True) agrees",
        }
    return case


def gen_tables(rng: np.random.Generator) -> list[dict]:
    cases = []

    def add(name, kind, t):
        t = [[int(v) for v in row] for row in t]
        cases.append(table_case(name, kind, t))

    def draw(r, c, n, assoc):
        pr = rng.dirichlet(np.full(r, 2.0))
        pc = rng.dirichlet(np.full(c, 2.0))
        p = np.outer(pr, pc)
        if assoc > 0:
            p = p * np.exp(assoc * rng.standard_normal((r, c)))
            p /= p.sum()
        return rng.multinomial(n, p.ravel()).reshape(r, c)

    shapes = [
        (2, 2), (2, 3), (3, 2), (3, 3), (2, 5), (4, 2), (5, 2), (4, 3), (3, 4), (4, 4), (6, 2), (8, 2),
        (10, 2), (12, 2), (5, 5), (6, 3), (6, 4), (8, 4), (8, 5), (10, 3), (12, 4), (12, 6), (10, 6), (7, 6),
    ]
    # A. random tables, independent and associated, varied totals
    for (r, c) in shapes:
        for n in [40, 300, 5000, 200_000]:
            for assoc in [0.0, 0.4]:
                add(f"random {r}x{c} n={n} assoc={assoc}", "random", draw(r, c, n, assoc))
    # B. sparse tables (many small expected counts, zero cells)
    for i, (r, c) in enumerate([(2, 2), (3, 3), (4, 4), (5, 3), (6, 4), (8, 5), (12, 6), (10, 2), (4, 6), (3, 5)] * 3):
        n = int(rng.integers(6, 4 * r * c))
        t = draw(r, c, n, 0.8)
        add(f"sparse {r}x{c} n={n} #{i}", "sparse", t)
    # C. huge counts (cells 1e6..1e8): near independence (cancellation) and associated (far tail)
    for (r, c) in [(2, 2), (3, 2), (5, 2), (4, 4), (12, 6), (10, 2), (3, 3), (6, 5)]:
        pr = rng.dirichlet(np.full(r, 5.0))
        pc = rng.dirichlet(np.full(c, 5.0))
        n = float(rng.uniform(1e8, 4e9))
        base = np.outer(pr, pc) * n
        base = np.clip(base, 1e6, 1e8 * 0.99)
        for rel in [0.0, 1e-6, 1e-4, 1e-2]:
            t = np.rint(base * (1 + rel * rng.standard_normal((r, c))))
            add(f"huge {r}x{c} rel={rel}", "huge", t)
    # D. defect-rate tables (k x 2: defective, conforming)
    for k in [2, 3, 4, 5, 8, 10, 12, 20, 50, 100]:
        for scale, base_rate, shift in [(200, 0.05, 0.0), (5000, 0.01, 0.3), (100_000, 0.012, 0.1), (800, 0.02, 1.0)]:
            n_i = rng.integers(scale // 2, scale * 2, size=k)
            rates = base_rate * np.exp(shift * rng.standard_normal(k))
            rates = np.clip(rates, 0, 0.9)
            dfc = rng.binomial(n_i, rates)
            add(f"rates k={k} n~{scale} p~{base_rate} spread={shift}", "rates", np.column_stack([dfc, n_i - dfc]))
    # E. zero rows / columns (dropped and reported) and not-testable tables
    for i, (r, c) in enumerate([(3, 3), (4, 2), (5, 4), (3, 5), (6, 3), (2, 4), (12, 6), (4, 4)]):
        t = draw(r, c, int(rng.integers(50, 3000)), 0.3)
        zr = int(rng.integers(0, r))
        t[zr, :] = 0
        if i % 2 == 0:
            zc = int(rng.integers(0, c))
            t[:, zc] = 0
        add(f"zero row/col {r}x{c} #{i}", "zeros", t)
    add("zero middle row 3x2", "zeros", [[10, 90], [0, 0], [25, 75]])
    add("zero defective column (all conforming) 3x2", "zeros", [[0, 100], [0, 200], [0, 150]])
    add("two zero rows 5x2", "zeros", [[0, 0], [12, 388], [0, 0], [30, 370], [7, 193]])
    add("not testable: all zero 2x2", "not_testable", [[0, 0], [0, 0]])
    add("not testable: one nonzero row", "not_testable", [[5, 7, 9], [0, 0, 0]])
    add("not testable: one nonzero column", "not_testable", [[0, 4], [0, 9], [0, 1]])
    add("not testable: 1x3", "not_testable", [[3, 4, 5]])
    add("not testable: 3x1", "not_testable", [[3], [4], [5]])
    add("not testable: single cell", "not_testable", [[0, 0], [0, 17]])
    # F. far tail
    add("far tail diagonal 2x2 1000", "far_tail", [[1000, 0], [0, 1000]])
    add("far tail 2x2 5000/10", "far_tail", [[5000, 10], [10, 5000]])
    add("far tail 2x2 huge", "far_tail", [[50_000_000, 1_000_000], [1_000_000, 50_000_000]])
    add("far tail 10x2 rates", "far_tail", [[10 * (i + 1) ** 2, 10_000 - 10 * (i + 1) ** 2] for i in range(10)])
    add("far tail 4x4 diagonal", "far_tail", [[900 if i == j else 5 for j in range(4)] for i in range(4)])
    add("far tail 12x6 banded", "far_tail", [[400 if abs(i // 2 - j) == 0 else 3 for j in range(6)] for i in range(12)])
    # G. 2x2 tables for Fisher/Yates coverage
    for n in [8, 12, 20, 30, 50, 80, 150, 400, 1000, 3000]:
        for _ in range(4):
            add(f"2x2 n={n} #{_}", "2x2", draw(2, 2, n, 0.6))
    add("tea tasting", "2x2", [[3, 1], [1, 3]])
    add("2x2 one zero cell", "2x2", [[0, 10], [6, 4]])
    add("2x2 two zero cells", "2x2", [[0, 7], [9, 0]])
    add("2x2 minimal", "2x2", [[1, 0], [0, 1]])
    return cases


# ---------------------------------------------------------------------------
# Fisher exact


def gen_fisher(tables: list[dict]) -> list[dict]:
    cases = []
    seen = set()

    def add(name, a, b, c, d):
        key = (a, b, c, d)
        if key in seen:
            return
        seen.add(key)
        ref = fisher_exact_mp(a, b, c, d)
        t = [[a, b], [c, d]]
        sp2 = stats.fisher_exact(t, alternative="two-sided")
        spl = stats.fisher_exact(t, alternative="less")
        spg = stats.fisher_exact(t, alternative="greater")
        sc = {
            "p_two_sided": float(sp2.pvalue),
            "p_less": float(spl.pvalue),
            "p_greater": float(spg.pvalue),
            "source": f"{V_SCIPY} stats.fisher_exact (two-sided uses 1 + 1e-14 for ties)",
        }
        agree = all(
            math.isclose(sc[k], ref[k], rel_tol=1e-9, abs_tol=1e-300) for k in ["p_two_sided", "p_less", "p_greater"]
        )
        cases.append(
            {
                "name": name,
                "table": [a, b, c, d],
                **ref,
                "source": f"exact integer enumeration of the hypergeometric support (Python), {V_MPMATH};"
                " two-sided = sum of P <= P(obs)(1 + 1e-7)",
                "scipy": sc,
                "scipy_agrees_1e-9": agree,
            }
        )

    for t in tables:
        if len(t["counts"]) == 2 and len(t["counts"][0]) == 2:
            (a, b), (c, d) = t["counts"]
            # exact enumeration needs the support (and the integers) to stay small
            if min(a + b, c + d, a + c, b + d) <= 20_000:
                add(t["name"], a, b, c, d)
    add("tea tasting (Fisher 1935)", 3, 1, 1, 3)
    add("[[100,900],[200,800]] (statrs gives half)", 100, 900, 200, 800)
    add("[[0,500],[500,0]] (statrs gives negative)", 0, 500, 500, 0)
    add("1% defective 100k each, equal", 1000, 99_000, 1000, 99_000)
    add("1% defective 100k each, 1000 vs 1100", 1000, 99_000, 1100, 98_900)
    add("1% defective 100k each, 980 vs 1050", 980, 99_020, 1050, 98_950)
    add("1% defective 100k each, 1000 vs 1300", 1000, 99_000, 1300, 98_700)
    add("1% defective 100k vs 80k, 1000 vs 760", 1000, 99_000, 760, 79_240)
    add("rare defects 100k each, 3 vs 15", 3, 99_997, 15, 99_985)
    add("zero row", 0, 0, 5, 7)
    add("zero column", 0, 4, 0, 9)
    add("large balanced 2000", 1000, 1000, 1000, 1000)
    add("skewed 5/1000 vs 0/20", 5, 995, 0, 20)
    return cases


# ---------------------------------------------------------------------------
# Wilson and Newcombe intervals


def z_of(conf):
    return mpmath.sqrt(2) * mpmath.erfinv(mpmath.mpf(conf))


def wilson_mp(x, n, conf):
    z = z_of(conf)
    p = mpmath.mpf(x) / n
    z2 = z * z
    centre = (p + z2 / (2 * n)) / (1 + z2 / n)
    half = z / (1 + z2 / n) * mpmath.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    lo, hi = centre - half, centre + half
    if x == 0:
        lo = mpmath.mpf(0)
    if x == n:
        hi = mpmath.mpf(1)
    return lo, hi


def gen_wilson() -> list[dict]:
    cases = []
    combos = []
    for n in [1, 2, 5, 10, 29, 100, 263, 1000, 100_000, 10_000_000, 100_000_000]:
        for x in sorted({0, 1, n // 100, n // 10, n // 3, n // 2, n - 1, n}):
            if 0 <= x <= n:
                combos.append((x, n))
    combos += [(81, 263), (15, 148), (0, 20), (1, 29)]
    for x, n in combos:
        for conf in [0.9, 0.95, 0.99]:
            lo, hi = wilson_mp(x, n, conf)
            sl, sh = proportion_confint(x, n, alpha=1 - conf, method="wilson")
            assert abs(float(sl) - f(lo)) < 1e-10 and abs(float(sh) - f(hi)) < 1e-10, (x, n, conf, sl, sh, lo, hi)
            cases.append(
                {
                    "name": f"wilson {x}/{n} conf={conf}",
                    "x": x,
                    "n": n,
                    "confidence": conf,
                    "lower": f(lo),
                    "upper": f(hi),
                    "source": f"Wilson (1927) score interval, closed form in {SRC_MP}",
                    "statsmodels": {
                        "lower": float(sl),
                        "upper": float(sh),
                        "source": f"{V_SM} proportion_confint(method='wilson')",
                    },
                }
            )
    return cases


def gen_newcombe(rng) -> list[dict]:
    cases = []
    combos = [
        (56, 70, 48, 80), (9, 10, 3, 10), (6, 7, 2, 7), (5, 56, 0, 29),
        (0, 10, 0, 20), (0, 10, 0, 10), (10, 10, 0, 20), (10, 10, 0, 10),
        (48, 80, 56, 70), (1000, 100_000, 1100, 100_000), (12, 5000, 30, 4000), (0, 300, 4, 300),
        (300, 300, 299, 300), (36, 300, 63, 300),
    ]
    for _ in range(30):
        n1 = int(rng.integers(1, 3000))
        n2 = int(rng.integers(1, 3000))
        combos.append((int(rng.integers(0, n1 + 1)), n1, int(rng.integers(0, n2 + 1)), n2))
    for x1, n1, x2, n2 in combos:
        for conf in [0.9, 0.95, 0.99]:
            l1, u1 = wilson_mp(x1, n1, conf)
            l2, u2 = wilson_mp(x2, n2, conf)
            p1, p2 = mpmath.mpf(x1) / n1, mpmath.mpf(x2) / n2
            d = p1 - p2
            lo = d - mpmath.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
            hi = d + mpmath.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
            sl, sh = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb", compare="diff", alpha=1 - conf)
            assert abs(float(sl) - f(lo)) < 1e-10 and abs(float(sh) - f(hi)) < 1e-10, (x1, n1, x2, n2, conf)
            cases.append(
                {
                    "name": f"newcombe {x1}/{n1} - {x2}/{n2} conf={conf}",
                    "x1": x1,
                    "n1": n1,
                    "x2": x2,
                    "n2": n2,
                    "confidence": conf,
                    "difference": f(d),
                    "lower": f(lo),
                    "upper": f(hi),
                    "source": f"Newcombe (1998) method 10 (hybrid score) for p1 - p2 from Wilson limits, {SRC_MP}",
                    "statsmodels": {
                        "lower": float(sl),
                        "upper": float(sh),
                        "source": f"{V_SM} confint_proportions_2indep(method='newcomb', compare='diff'), p1 - p2",
                    },
                }
            )
    return cases


# ---------------------------------------------------------------------------
# multiple-testing adjustment

ADJ = {"holm": "holm", "bonferroni": "bonferroni", "hochberg": "simes-hochberg", "benjamini_hochberg": "fdr_bh"}


def gen_adjust(rng) -> list[dict]:
    vectors = []
    for m in [1, 2, 3, 5, 10, 20, 50, 200]:
        vectors.append((f"uniform m={m}", rng.uniform(0, 1, m)))
        vectors.append((f"small m={m}", 10 ** rng.uniform(-8, -1, m)))
    for m in [4, 10, 30]:
        v = np.round(rng.uniform(0, 0.2, m), 2)  # many ties
        vectors.append((f"ties m={m}", v))
    vectors.append(("all equal", np.full(6, 0.01)))
    vectors.append(("zeros and ones", np.array([0.0, 1.0, 0.0, 0.5, 1.0])))
    vectors.append(("clip at one", np.array([0.3, 0.4, 0.5, 0.9])))
    vectors.append(("tiny", np.array([1e-300, 1e-200, 1e-10, 0.04])))
    vectors.append(("textbook holm", np.array([0.01, 0.04, 0.03, 0.005])))
    cases = []
    for name, v in vectors:
        v = [float(x) for x in v]
        out = {}
        for key, method in ADJ.items():
            rej, adj, _, _ = multipletests(np.array(v), alpha=0.05, method=method)
            out[key] = [float(x) for x in adj]
        cases.append(
            {
                "name": name,
                "p": v,
                **out,
                "source": f"{V_SM} stats.multitest.multipletests(method=holm|bonferroni|simes-hochberg|fdr_bh)",
            }
        )
    return cases


# ---------------------------------------------------------------------------
# ANOM critical values

_GX, _GW = leggauss(40)


def box_prob(h: float, k: int, deg: int = 48) -> float:
    """P(|Z_i| <= h for all i) for Z ~ N(0, R), R equicorrelated with rho = -1/(k-1).

    Z_i = (X_i - mean(X)) / sqrt((k-1)/k) with X iid N(0,1). By shift invariance,
    P = sqrt(k) (2 pi)^(-(k-1)/2) * U_k(0), where U_k is the k-fold convolution of
    u(y) = exp(-y^2/2) on [-c, c], c = h sqrt((k-1)/k). U_j is analytic between the
    points (j - 2m) c; each piece is interpolated by a Chebyshev series (degree 48) and
    the convolution integrals use 40-point Gauss-Legendre on each smooth sub-interval.
    Accuracy about 1e-14 (k = 2 reproduces 2 Phi(h) - 1; checked against an mpmath
    Fourier-integral form for k = 3, 6, 10).
    """
    c = h * math.sqrt((k - 1) / k)

    def u(y):
        return np.exp(-y * y / 2)

    pieces = [(-c, c, u)]

    def evaluate(pcs, s):
        s = np.asarray(s, dtype=float)
        out = np.zeros_like(s)
        for a, b, fn in pcs:
            m = (s >= a) & (s <= b)
            out[m] = fn(s[m])
        return out

    def conv_at(prev, s):
        brk = {-c, c} | {s - a for a, _, _ in prev} | {s - b for _, b, _ in prev}
        brk = sorted(x for x in brk if -c <= x <= c)
        tot = 0.0
        for lo, hi in zip(brk[:-1], brk[1:]):
            if hi <= lo:
                continue
            y = (hi - lo) / 2 * _GX + (hi + lo) / 2
            tot += (hi - lo) / 2 * float(np.sum(_GW * u(y) * evaluate(prev, s - y)))
        return tot

    for j in range(2, k):
        bps = [(j - 2 * m) * c for m in range(j, -1, -1)]
        new = []
        for a, b in zip(bps[:-1], bps[1:]):
            prev = pieces
            fn = cheb.Chebyshev.interpolate(
                lambda ss, prev=prev: np.array([conv_at(prev, x) for x in np.atleast_1d(ss)]), deg, domain=[a, b]
            )
            new.append((a, b, fn))
        pieces = new
    return math.sqrt(k) * (2 * math.pi) ** (-(k - 1) / 2) * conv_at(pieces, 0.0)


def box_prob_fourier(h, k):
    """Independent check: P = sqrt(k) (2 pi)^(-(k+1)/2) int g(t)^k dt, g(t) = int_{-c}^{c} e^{-y^2/2} cos(ty) dy."""
    mp_ = mpmath.mp
    old = mp_.dps
    mp_.dps = 30
    try:
        c = mpmath.mpf(h) * mpmath.sqrt(mpmath.mpf(k - 1) / k)
        s2 = mpmath.sqrt(2)

        def g(t):
            return mpmath.sqrt(2 * mpmath.pi) * mpmath.exp(-t * t / 2) * mpmath.re(mpmath.erf((c + 1j * t) / s2))

        integral = 2 * mpmath.quadosc(lambda t: g(t) ** k, [0, mpmath.inf], omega=c)
        return float(mpmath.sqrt(k) * (2 * mpmath.pi) ** (-mpmath.mpf(k + 1) / 2) * integral)
    finally:
        mp_.dps = old


def gen_anom() -> list[dict]:
    from scipy.optimize import brentq

    cases = []
    for alpha in [0.05, 0.01]:
        for k in range(2, 11):
            t0 = time.perf_counter()
            sidak = float(stats.norm.isf((1 - (1 - alpha) ** (1 / k)) / 2))
            # h lies between z(alpha/2) (k = 2) and the conservative Sidak bound.
            z = float(stats.norm.isf(alpha / 2))
            h = brentq(
                lambda x: box_prob(x, k) - (1 - alpha), z - 1e-6, sidak + 1e-6, xtol=1e-14, rtol=4 * np.finfo(float).eps
            )
            case = {
                "name": f"anom h alpha={alpha} k={k}",
                "alpha": alpha,
                "k": k,
                "h": h,
                "box_prob_at_h": box_prob(h, k),
                "sidak_bound": sidak,
                "source": "root (scipy.optimize.brentq, xtol 1e-14) of the box probability of an equicorrelated"
                " normal, rho = -1/(k-1), computed by piecewise-Chebyshev convolution in"
                f" tools/reference/generate.py ({V_NUMPY}); accuracy about 1e-12 in h",
            }
            if k == 2:
                case["norm_ppf"] = float(stats.norm.ppf(1 - alpha / 2))
                assert abs(case["norm_ppf"] - h) < 1e-12
            if k <= 10:
                cov = np.full((k, k), -1.0 / (k - 1))
                np.fill_diagonal(cov, 1.0)

                def mvn(x, seed=7):
                    return float(
                        stats.multivariate_normal.cdf(
                            np.full(k, x),
                            mean=np.zeros(k),
                            cov=cov,
                            allow_singular=True,
                            lower_limit=np.full(k, -x),
                            maxpts=20_000 * k,
                            abseps=1e-9,
                            releps=1e-9,
                            rng=np.random.default_rng(seed),
                        )
                    )

                # Root-find on scipy's cdf (fixed QMC seed so it is a deterministic function of h).
                h_sp = brentq(lambda x: mvn(x) - (1 - alpha), h - 0.02, h + 0.02, xtol=1e-7)
                # scipy's error at the precise root: the root-finding seed (7) and three others.
                spread = [mvn(h, seed=s) - (1 - alpha) for s in (7, 0, 1, 2)]
                # dP/dh at the root (central difference of the convolution), to turn scipy's
                # probability error into an error in h.
                dens = (box_prob(h + 1e-5, k) - box_prob(h - 1e-5, k)) / 2e-5
                accuracy = max(abs(v) for v in spread) / dens
                # The cross-check: scipy's root lies within its own error of the precise one.
                assert abs(h_sp - h) <= 4 * accuracy + 1e-6, (k, alpha, h_sp, h, accuracy)
                case["scipy"] = {
                    "h": h_sp,
                    "cdf_error_at_h": [float(v) for v in spread],
                    "h_accuracy": accuracy,
                    "h_difference": h_sp - h,
                    "source": f"{V_SCIPY} stats.multivariate_normal.cdf(cov equicorrelated rho=-1/(k-1),"
                    " allow_singular=True, lower_limit=-h, maxpts=20000k, abseps=releps=1e-9), brentq xtol 1e-7;"
                    " the covariance is singular, so its quasi-Monte Carlo error is ~1e-4 in probability"
                    " (cdf_error_at_h, seeds 7 (the root-finding one), 0, 1, 2) and h_accuracy = max |cdf error| / (dP/dh) in h",
                }
            if k in (3, 6, 10) and alpha == 0.05:
                case["fourier_check_box_prob"] = box_prob_fourier(h, k)
            cases.append(case)
            print(f"    anom alpha={alpha} k={k} h={h:.12f} ({time.perf_counter() - t0:.1f}s)", flush=True)
    return cases


# ---------------------------------------------------------------------------
# exact conditional p (for the Monte Carlo check)


def enumerate_tables(rows, cols):
    """All tables with the given margins (recursive over cells, row-major)."""
    r, c = len(rows), len(cols)
    cells = [0] * (r * c)

    def rec(i, j, row_left, col_left):
        if i == r:
            yield list(cells)
            return
        if j == c - 1:
            v = row_left
            if v > col_left[j]:
                return
            cells[i * c + j] = v
            col_left[j] -= v
            yield from rec(i + 1, 0, rows[i + 1] if i + 1 < r else 0, col_left)
            col_left[j] += v
            return
        # remaining capacity in later columns of this row
        cap = sum(col_left[j + 1 :])
        lo = max(0, row_left - cap)
        for v in range(lo, min(row_left, col_left[j]) + 1):
            cells[i * c + j] = v
            col_left[j] -= v
            yield from rec(i, j + 1, row_left - v, col_left)
            col_left[j] += v

    yield from rec(0, 0, rows[0], list(cols))


def gen_montecarlo() -> list[dict]:
    tables = [
        ("sparse 3x3", [[3, 0, 1], [0, 2, 1], [1, 1, 4]]),
        ("sparse 3x2", [[4, 0], [1, 3], [0, 5]]),
        ("sparse 4x2 rates", [[0, 12], [2, 10], [3, 9], [6, 7]]),
        ("sparse 5x2", [[0, 3], [1, 2], [2, 1], [0, 4], [3, 0]]),
        ("sparse 3x4", [[2, 0, 0, 1], [0, 3, 1, 0], [1, 1, 0, 4]]),
        ("sparse 4x3", [[1, 0, 2], [2, 1, 0], [0, 3, 1], [1, 1, 1]]),
        ("null-ish 3x3", [[2, 2, 2], [2, 3, 1], [1, 2, 3]]),
        ("sparse 6x2", [[1, 9], [0, 10], [2, 8], [0, 10], [4, 6], [1, 9]]),
        ("10x2 rare defects", [[0, 20], [1, 19], [0, 20], [0, 20], [3, 17], [0, 20], [1, 19], [0, 20], [2, 18], [0, 20]]),
    ]
    cases = []
    for name, t in tables:
        r, c = len(t), len(t[0])
        R = [sum(row) for row in t]
        C = [sum(t[i][j] for i in range(r)) for j in range(c)]
        N = sum(R)

        def x2_of(cells):
            return sum(
                Fraction((cells[i * c + j] * N - R[i] * C[j]) ** 2, R[i] * C[j] * N) for i in range(r) for j in range(c)
            )

        def g2_of(cells):
            s = mpmath.mpf(0)
            for i in range(r):
                for j in range(c):
                    o = cells[i * c + j]
                    if o:
                        s += o * mpmath.log(mpmath.mpf(o * N) / (R[i] * C[j]))
            return 2 * s

        obs = [v for row in t for v in row]
        x2_obs = x2_of(obs)
        g2_obs = g2_of(obs)
        const = math.prod(math.factorial(v) for v in R) * math.prod(math.factorial(v) for v in C)
        nf = math.factorial(N)
        total = Fraction(0)
        p_x2 = Fraction(0)
        p_g2 = Fraction(0)
        count = 0
        for cells in enumerate_tables(R, C):
            prob = Fraction(const, nf * math.prod(math.factorial(v) for v in cells))
            total += prob
            count += 1
            if x2_of(cells) >= x2_obs:
                p_x2 += prob
            if g2_of(cells) >= g2_obs * (1 - mpmath.mpf(10) ** -12):
                p_g2 += prob
        assert total == 1, name
        cases.append(
            {
                "name": name,
                "counts": t,
                "tables_enumerated": count,
                "pearson": f(x2_obs),
                "p_exact_pearson": f(mpq(p_x2)),
                "p_exact_likelihood_ratio": f(mpq(p_g2)),
                "source": "exact conditional p: full enumeration in Python of all tables with the observed margins,"
                " multivariate hypergeometric probabilities in exact rationals; at-least-as-extreme means"
                " X^2 >= X^2_obs exactly (G^2 >= G^2_obs (1 - 1e-12))",
            }
        )
        print(f"    mc {name}: {count} tables, p={f(mpq(p_x2)):.6g}", flush=True)
    return cases


# ---------------------------------------------------------------------------
# Spiegelhalter overdispersion


def gen_overdispersion(rng) -> list[dict]:
    vectors = [
        ("textbook 10", [-2.1, -1.3, -0.4, 0.0, 0.2, 0.5, 0.9, 1.6, 2.4, 3.8]),
        ("no overdispersion 20", list(rng.standard_normal(20))),
        ("overdispersed 20", list(1.8 * rng.standard_normal(20))),
        ("overdispersed 50 with outliers", list(np.concatenate([1.5 * rng.standard_normal(46), [8.0, -7.5, 12.0, 9.1]]))),
        ("100 groups", list(1.2 * rng.standard_normal(100))),
        ("13 groups (fraction not integral)", list(2.0 * rng.standard_normal(13))),
        ("5 groups", [0.3, -1.2, 2.8, -0.7, 1.1]),
        ("ties", [1.0, 1.0, 1.0, -1.0, -1.0, 2.0, 2.0, 0.0, 0.0, 3.0]),
    ]
    cases = []
    for name, z in vectors:
        z = [float(v) for v in z]
        n = len(z)
        za = np.array(z)
        # (a) count-based: the int(0.1 n) smallest/largest set to the next value inwards (scipy winsorize)
        zw = np.asarray(mstats.winsorize(za, limits=(0.1, 0.1), inclusive=(True, True)), dtype=float)
        phi_count = float(np.mean(zw**2))
        # (b) percentile-based: clip at numpy's default (linear) 10th and 90th percentiles
        lo, hi = np.percentile(za, [10, 90])
        zp = np.clip(za, lo, hi)
        phi_pct = float(np.mean(zp**2))
        cases.append(
            {
                "name": name,
                "z": z,
                "winsor_fraction": 0.1,
                "phi_count": phi_count,
                "phi_count_source": f"Spiegelhalter (2005) phi = mean of squared winsorised z; the floor(0.1 n) lowest and"
                f" highest z replaced by the next value inwards ({V_SCIPY} stats.mstats.winsorize(limits=(0.1, 0.1)))",
                "phi_percentile": phi_pct,
                "percentiles": [float(lo), float(hi)],
                "phi_percentile_source": f"Spiegelhalter (2005) phi = mean of squared winsorised z; z clipped to the 10th"
                f" and 90th percentiles ({V_NUMPY} percentile, linear interpolation)",
                "phi_raw": float(np.mean(za**2)),
                "n": n,
            }
        )
    return cases


# ---------------------------------------------------------------------------


def main() -> None:
    """Regenerate every fixture, or only the ones named on the command line (e.g. `anom`)."""
    only = set(sys.argv[1:])

    def rng(offset: int) -> np.random.Generator:
        # One stream per fixture file, so regenerating one file leaves the others unchanged.
        return np.random.default_rng(SEED + offset)

    t0 = time.perf_counter()
    print(f"versions: {VERSIONS}")
    tables: list[dict] = []

    def get_tables() -> list[dict]:
        if not tables:
            tables.extend(gen_tables(rng(1)))
        return tables

    jobs = [
        ("chisq_tail", lambda: chisq_tail_cases()),
        ("chisq_critical", lambda: chisq_critical_cases()),
        ("tables", get_tables),
        ("fisher", lambda: gen_fisher(get_tables())),
        ("wilson", lambda: gen_wilson()),
        ("newcombe", lambda: gen_newcombe(rng(2))),
        ("adjust", lambda: gen_adjust(rng(3))),
        ("montecarlo", lambda: gen_montecarlo()),
        ("overdispersion", lambda: gen_overdispersion(rng(4))),
        ("anom", lambda: gen_anom()),
    ]
    unknown = only - {name for name, _ in jobs}
    if unknown:
        sys.exit(f"unknown fixture(s): {sorted(unknown)}")
    total = 0
    for name, job in jobs:
        if only and name not in only:
            continue
        t1 = time.perf_counter()
        total += write(f"{name}.json", {"cases": job()})
        print(f"    ({time.perf_counter() - t1:.0f}s)", flush=True)
    print(f"{total} cases in {time.perf_counter() - t0:.0f}s")


if __name__ == "__main__":
    main()
