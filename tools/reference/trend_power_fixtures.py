#!/usr/bin/env python3
"""Reference values for dispar-stats' trend test and power rule (dispar_stats::trend,
dispar_stats::power).

Writes crates/dispar-stats/tests/fixtures/trend.json and power.json. Every value is
computed here from the published formulas, independently of the Rust code, and
cross-checked against library implementations recorded beside it:

trend.json, the Cochran-Armitage test for trend in proportions (Cochran 1954, Biometrics
10; Armitage 1955, Biometrics 11), points (n_i, d_i) with scores t_i, points with n_i = 0
left out:
- the formulas in mpmath at 50 digits (inputs converted exactly): pbar = D / N,
  tbar = sum n t / N, Sxx = sum n (t - tbar)^2, T = sum (d - n pbar)(t - tbar),
  z = T / sqrt(pbar (1 - pbar) Sxx) (binomial convention), slope = T / Sxx, two-sided
  normal p, X^2 of homogeneity, departure = X^2 - z^2 (residual sum of squares of the
  weighted fit) on k - 2 df, dispersion = departure / (k - 2),
  z_widened = z / sqrt(max(1, dispersion)), p_widened from Student's t on k - 2 df
  (the regularized incomplete beta) when dispersion > 1, else the normal p;
- R 4.2.2 `prop.trend.test(x, n, score)` through Rscript: X-squared (= z^2) and p;
- statsmodels `Table(..., shift_zeros=False).test_ordinal_association(row_scores,
  col_scores=[0, 1])`:
  z in the hypergeometric convention, z sqrt((N - 1) / N);
- numpy `polyfit(t, d / n, 1, w=sqrt(n))`: the slope; scipy `chi2.sf`: the departure's p;
  scipy `t.sf`: the widened p.

power.json, the normal-approximation power of the two-group comparison of rates on
Cohen's (1988) arcsine effect h = 2 asin sqrt(p1) - 2 asin sqrt(p0) (Statistical Power
Analysis for the Behavioral Sciences, 2nd ed., chapter 6, recalled from memory):
- mpmath at 50 digits: the root c of Phi(c - z) + Phi(-c - z) = power, z = z_{1-alpha/2};
  h = c sqrt(1/n1 + 1/n2); the detectable rise p1 - p0 with p1 = sin^2(asin sqrt(p0) +
  h / 2) (none when that passes pi / 2); the units per group for a rise, 2 (c / h)^2;
- statsmodels `NormalIndPower().solve_power(effect_size=None, nobs1, alpha, power, ratio)`
  and `.solve_power(effect_size=h, nobs1=None, alpha, power, ratio=1)` with h from
  `proportion_effectsize`; their achieved accuracy (brentq) is recorded by comparison.

Deterministic (one numpy Generator, SEED). Run from the repository root with the pinned
requirements (tools/reference/requirements.txt):

    /tmp/venv-ref/bin/python tools/reference/trend_power_fixtures.py
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.contingency_tables import Table as SmTable
from statsmodels.stats.power import NormalIndPower
from statsmodels.stats.proportion import proportion_effectsize

mp = mpmath.mp
mp.dps = 50

SEED = 20260701
ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "crates" / "dispar-stats" / "tests" / "fixtures"

V_MP = f"mpmath {mpmath.__version__}, mp.dps=50"
V_SCIPY = f"scipy {scipy.__version__}"
V_SM = f"statsmodels {statsmodels.__version__}"
V_NUMPY = f"numpy {np.__version__}"


def r_version() -> str:
    out = subprocess.run(
        ["Rscript", "-e", "cat(R.version.string)"], check=True, capture_output=True, text=True
    )
    return out.stdout.strip()


V_R = r_version()
VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "mpmath": mpmath.__version__,
    "R": V_R,
}


def write(name: str, generator_seed: int, cases: list) -> None:
    head = {
        "generator": "tools/reference/trend_power_fixtures.py",
        "seed": generator_seed,
        "versions": VERSIONS,
    }
    lines = [json.dumps(c, separators=(",", ":"), allow_nan=False) for c in cases]
    text = json.dumps(head, separators=(",", ":"))[:-1] + ',"cases":[\n' + ",\n".join(lines) + "\n]}\n"
    json.loads(text)
    (OUT / name).write_text(text)
    print(f"  {name}: {len(cases)} cases, {len(text) / 1024:.0f} KiB")


# ---------------------------------------------------------------------------
# trend


def norm_two_sided(z):
    """P(|Z| >= |z|) and its log10, mpmath."""
    p = mpmath.erfc(abs(z) / mpmath.sqrt(2))
    return p, mpmath.log10(p)


def dlnp_dz_normal(z):
    """d ln P(|Z| >= z) / dz = -2 phi(z) / p, to carry an error in z into p."""
    z = abs(z)
    p = mpmath.erfc(z / mpmath.sqrt(2))
    return -2 * mpmath.npdf(z) / p


def t_two_sided(t, df):
    """P(|T_df| >= |t|) = I_{df / (df + t^2)}(df/2, 1/2), mpmath."""
    x = df / (df + t * t)
    return mpmath.betainc(mpmath.mpf(df) / 2, mpmath.mpf(1) / 2, 0, x, regularized=True)


def dlnp_dt_student(t, df):
    t = abs(t)
    df = mpmath.mpf(df)
    dens = mpmath.exp(
        mpmath.loggamma((df + 1) / 2)
        - mpmath.loggamma(df / 2)
        - mpmath.log(mpmath.sqrt(df * mpmath.pi))
        - (df + 1) / 2 * mpmath.log1p(t * t / df)
    )
    return -2 * dens / t_two_sided(t, df)


def chi2_upper(x, df):
    if x <= 0:
        return mpmath.mpf(1)
    return mpmath.gammainc(mpmath.mpf(df) / 2, x / 2, mpmath.inf, regularized=True)


def dlnp_dx_chi2(x, df):
    """d ln Q / dx of the chi-square upper tail Q(x; df) = -pdf / sf."""
    if x <= 0:
        return mpmath.mpf(0)
    k = mpmath.mpf(df) / 2
    log_pdf = (k - 1) * mpmath.log(x) - x / 2 - k * mpmath.log(2) - mpmath.loggamma(k)
    return -mpmath.exp(log_pdf - mpmath.log(chi2_upper(x, df)))


def trend_mp(points, scores):
    """The Cochran-Armitage quantities from the formulas, mpmath."""
    kept = [(mpmath.mpf(n), mpmath.mpf(d), mpmath.mpf(t)) for (n, d), t in zip(points, scores) if n > 0]
    k = len(kept)
    big_n = sum(n for n, _, _ in kept)
    big_d = sum(d for _, d, _ in kept)
    pbar = big_d / big_n
    qbar = 1 - pbar
    tbar = sum(n * t for n, _, t in kept) / big_n
    sxx = sum(n * (t - tbar) ** 2 for n, _, t in kept)
    big_t = sum((d - n * pbar) * (t - tbar) for n, d, t in kept)
    z = big_t / mpmath.sqrt(pbar * qbar * sxx)
    slope = big_t / sxx
    x2 = sum((d - n * pbar) ** 2 / (n * pbar * qbar) for n, d, _ in kept)
    departure = x2 - z * z
    df = k - 2
    dispersion = departure / df
    p, l10 = norm_two_sided(z)
    zw = z / mpmath.sqrt(max(mpmath.mpf(1), dispersion))
    if dispersion > 1:
        pw = t_two_sided(zw, df)
        dpw = dlnp_dt_student(zw, df)
    else:
        pw = p
        dpw = dlnp_dz_normal(z)
    return {
        "periods": k,
        "n_total": int(big_n),
        "slope": slope,
        "z": z,
        "z_hypergeometric": z * mpmath.sqrt((big_n - 1) / big_n),
        "p": p,
        "log10_p": l10,
        "dlnp_dz": dlnp_dz_normal(z),
        "departure": departure,
        "departure_p": chi2_upper(departure, df),
        "departure_dlnp_dx": dlnp_dx_chi2(departure, df),
        "dispersion": dispersion,
        "z_widened": zw,
        "p_widened": pw,
        "dlnp_widened_dz": dpw,
    }


def r_prop_trend(points, scores):
    """R's prop.trend.test on the points with units: (X-squared, p)."""
    kept = [((n, d), t) for (n, d), t in zip(points, scores) if n > 0]
    x = ",".join(str(d) for (_, d), _ in kept)
    n = ",".join(str(n) for (n, _), _ in kept)
    s = ",".join(repr(float(t)) for _, t in kept)
    expr = f'r <- prop.trend.test(c({x}), c({n}), c({s})); cat(sprintf("%.17g %.17g", r$statistic, r$p.value))'
    out = subprocess.run(["Rscript", "-e", expr], check=True, capture_output=True, text=True)
    x2, p = out.stdout.split()
    return float(x2), float(p)


def trend_case(name, points, scores=None, note=None):
    given = scores
    if scores is None:
        scores = list(range(len(points)))
    m = trend_mp(points, scores)
    kept = [((n, d), t) for (n, d), t in zip(points, scores) if n > 0]
    nn = np.array([n for (n, _), _ in kept], dtype=float)
    dd = np.array([d for (_, d), _ in kept], dtype=float)
    tt = np.array([t for _, t in kept], dtype=float)
    np_slope = float(np.polyfit(tt, dd / nn, 1, w=np.sqrt(nn))[0])
    # shift_zeros=False: statsmodels would otherwise add 0.5 to every cell of a table with a 0.
    table = SmTable(np.column_stack([nn - dd, dd]), shift_zeros=False)
    sm = table.test_ordinal_association(row_scores=tt, col_scores=np.array([0.0, 1.0]))
    r_x2, r_p = r_prop_trend(points, scores)
    df = m["periods"] - 2
    sp_dep_p = float(stats.chi2.sf(float(m["departure"]), df))
    zw = float(m["z_widened"])
    sp_pw = float(2 * stats.t.sf(abs(zw), df)) if m["dispersion"] > 1 else None
    # The references must agree with the formulas before they are written.
    z = float(m["z"])
    assert math.isclose(r_x2, z * z, rel_tol=1e-7, abs_tol=1e-9 * (1 + float(m["departure"]))), (name, r_x2, z * z)
    assert math.isclose(float(sm.zscore), float(m["z_hypergeometric"]), rel_tol=1e-7, abs_tol=1e-9), name
    assert math.isclose(np_slope, float(m["slope"]), rel_tol=1e-7, abs_tol=1e-12), name
    case = {
        "name": name,
        "points": [list(p) for p in points],
        "scores": None if given is None else [float(t) for t in given],
        "periods": m["periods"],
        "slope": float(m["slope"]),
        "z": z,
        "p": float(m["p"]),
        "log10_p": float(m["log10_p"]),
        "dlnp_dz": float(m["dlnp_dz"]),
        "departure": float(m["departure"]),
        "departure_p": float(m["departure_p"]),
        "departure_dlnp_dx": float(m["departure_dlnp_dx"]),
        "dispersion": float(m["dispersion"]),
        "z_widened": zw,
        "p_widened": float(m["p_widened"]),
        "dlnp_widened_dz": float(m["dlnp_widened_dz"]),
        "source": f"Cochran-Armitage formulas (binomial variance) in {V_MP}",
        "r_x_squared": r_x2,
        "r_p": r_p,
        "r_source": f"{V_R} prop.trend.test(x, n, score)",
        "sm_z_hypergeometric": float(sm.zscore),
        "sm_source": f"{V_SM} Table(shift_zeros=False).test_ordinal_association(row_scores, col_scores=[0, 1])",
        "np_slope": np_slope,
        "np_source": f"{V_NUMPY} polyfit(t, d / n, 1, w=sqrt(n))",
        "scipy_departure_p": sp_dep_p,
        "scipy_p_widened": sp_pw,
        "scipy_source": f"{V_SCIPY} chi2.sf(departure, k - 2), 2 t.sf(|z_widened|, k - 2)",
    }
    if note:
        case["note"] = note
    return case


def binomial_series(rng, sizes, rates):
    return [(int(n), int(rng.binomial(n, p))) for n, p in zip(sizes, rates)]


def trend_cases(rng):
    cases = [
        trend_case("three points, rising", [(100, 5), (100, 9), (100, 14)]),
        trend_case("three points, falling, uneven sizes", [(250, 30), (90, 8), (400, 20)]),
        trend_case("three points, uneven scores", [(500, 12), (480, 15), (510, 31)], [0.0, 1.0, 5.0]),
        trend_case("four points, R's documentation example data", [(86, 83), (93, 90), (136, 129), (82, 70)]),
        trend_case(
            "five points, dose-like scores",
            [(17114, 48), (14502, 38), (793, 5), (127, 1), (38, 1)],
            [0.0, 0.5, 1.5, 4.0, 7.0],
        ),
        trend_case("five points, scores 1..5", [(17114, 48), (14502, 38), (793, 5), (127, 1), (38, 1)], [1, 2, 3, 4, 5]),
        trend_case("flat: z exactly 0 by symmetry", [(100, 10), (100, 20), (100, 10)]),
        trend_case("linear rates, no departure", [(1000, 10), (1000, 20), (1000, 30), (1000, 40)]),
        trend_case("zero-unit points keep their scores", [(200, 4), (0, 0), (210, 9), (0, 0), (190, 15), (205, 16)]),
        trend_case("leading zero-unit point", [(0, 0), (300, 3), (300, 6), (300, 12)]),
        trend_case("negative and fractional scores", [(400, 40), (380, 31), (420, 30), (410, 22)], [-1.5, -0.5, 0.25, 2.0]),
        trend_case("large score offset", [(1000, 20), (1000, 25), (1000, 27), (1000, 35)], [2024.0, 2025.0, 2026.0, 2027.0]),
        trend_case("rates near 1", [(500, 490), (500, 485), (500, 470), (500, 460)]),
        trend_case("one defective in all", [(1000, 0), (1000, 0), (1000, 1)]),
        trend_case("every point defective but one unit", [(10, 10), (10, 10), (10, 9)]),
        trend_case("strong trend, p underflows", [(100000, 100), (100000, 1000), (100000, 3000), (100000, 6000)]),
        trend_case("huge volumes, far tail", [(10**9, 10**6), (10**9, 1_010_000), (10**9, 1_030_000), (10**9, 1_020_000), (10**9, 1_050_000)]),
        trend_case("huge volumes, tiny rates", [(10**8, 120), (10**8, 95), (10**8, 130), (10**8, 141), (10**8, 160), (10**8, 150)]),
        trend_case("tiny rate, small counts", [(5000, 0), (5000, 1), (5000, 0), (5000, 2), (5000, 3)]),
    ]
    # Plant volumes with period-to-period variation beyond binomial: overdispersed,
    # trendless series (lognormal rate multiplier), random walks, and real trends.
    for i in range(6):
        k = int(rng.integers(6, 16))
        sizes = rng.integers(80_000, 120_000, size=k)
        rates = 0.01 * np.exp(0.1 * rng.standard_normal(k) - 0.005)
        cases.append(trend_case(f"overdispersed trendless, k={k} ({i})", binomial_series(rng, sizes, rates)))
    for i in range(4):
        k = int(rng.integers(8, 20))
        sizes = np.full(k, 100_000)
        rates = 0.02 * np.exp(np.cumsum(0.08 * rng.standard_normal(k)))
        cases.append(trend_case(f"random walk in log rate, k={k} ({i})", binomial_series(rng, sizes, rates)))
    for i in range(4):
        k = int(rng.integers(3, 12))
        sizes = rng.integers(200, 5000, size=k)
        rates = 0.05 + 0.004 * np.arange(k) * (1 if i % 2 == 0 else -1)
        cases.append(trend_case(f"binomial with a linear trend, k={k} ({i})", binomial_series(rng, sizes, rates)))
    for i in range(4):
        k = int(rng.integers(4, 30))
        sizes = rng.integers(20, 2000, size=k)
        cases.append(trend_case(f"binomial trendless, k={k} ({i})", binomial_series(rng, sizes, np.full(k, 0.03))))
    for i in range(3):
        k = int(rng.integers(4, 9))
        sizes = rng.integers(1000, 100_000, size=k)
        scores = np.sort(rng.uniform(0, 20, size=k)).round(3)
        rates = 0.004 * (1 + 0.02 * scores)
        cases.append(
            trend_case(f"uneven scores (dates), k={k} ({i})", binomial_series(rng, sizes, rates), [float(s) for s in scores])
        )
    k = 60
    cases.append(
        trend_case("sixty periods, slow drift", binomial_series(rng, np.full(k, 20_000), 0.01 + 0.00005 * np.arange(k)))
    )
    return cases


# ---------------------------------------------------------------------------
# power


def z_two_sided(alpha):
    return mpmath.sqrt(2) * mpmath.erfinv(1 - mpmath.mpf(alpha))


def multiple(alpha, power):
    """The root c of Phi(c - z) + Phi(-c - z) = power (both rejection tails)."""
    z = z_two_sided(alpha)
    power = mpmath.mpf(power)
    f = lambda c: mpmath.ncdf(c - z) + mpmath.ncdf(-c - z) - power
    lo, hi = mpmath.mpf(0), z + 20
    for _ in range(400):
        mid = (lo + hi) / 2
        if f(mid) < 0:
            lo = mid
        else:
            hi = mid
    return mpmath.findroot(f, (lo + hi) / 2)


def detectable_rise(c, p0, n1, n2):
    h = c * mpmath.sqrt(1 / mpmath.mpf(n1) + 1 / mpmath.mpf(n2))
    target = mpmath.asin(mpmath.sqrt(mpmath.mpf(p0))) + h / 2
    if target > mpmath.pi / 2:
        return h, None
    return h, mpmath.sin(target) ** 2 - mpmath.mpf(p0)


def units_for(c, p0, diff):
    p0 = mpmath.mpf(p0)
    h = 2 * mpmath.asin(mpmath.sqrt(p0 + mpmath.mpf(diff))) - 2 * mpmath.asin(mpmath.sqrt(p0))
    return 2 * (c / h) ** 2


def power_case(name, alpha, power, n1, n2, p0, diff):
    c = multiple(alpha, power)
    h, rise = detectable_rise(c, p0, n1, n2)
    units = units_for(c, p0, diff)
    engine = NormalIndPower()
    sm_h = float(engine.solve_power(effect_size=None, nobs1=n1, alpha=alpha, power=power, ratio=n2 / n1))
    sm_eff = float(proportion_effectsize(p0 + diff, p0))
    sm_units = float(engine.solve_power(effect_size=sm_eff, nobs1=None, alpha=alpha, power=power, ratio=1.0))
    # statsmodels' root finders stop at their own tolerance (measured over these cases:
    # up to 2.4e-6 absolute in h, 1.3e-7 relative in the units); hold them to a little more.
    assert abs(sm_h - float(h)) <= 5e-6, (name, sm_h, float(h))
    assert math.isclose(sm_units, float(units), rel_tol=1e-6), (name, sm_units, float(units))
    return {
        "name": name,
        "alpha": alpha,
        "power": power,
        "c": float(c),
        "n1": n1,
        "n2": n2,
        "h": float(h),
        "p0": p0,
        "rise": None if rise is None else float(rise),
        "difference": diff,
        "units": float(units),
        "source": f"root of Phi(c - z) + Phi(-c - z) = power, Cohen's h, in {V_MP}",
        "sm_h": sm_h,
        "sm_units": sm_units,
        "sm_source": f"{V_SM} NormalIndPower().solve_power(...), proportion_effectsize",
    }


def power_cases():
    cases = [
        power_case("the usual: 5%, 80%, 1,000 each, 2%", 0.05, 0.8, 1000.0, 1000.0, 0.02, 0.01),
        power_case("5%, 90%", 0.05, 0.9, 500.0, 500.0, 0.1, 0.05),
        power_case("1%, 80%", 0.01, 0.8, 2000.0, 3000.0, 0.05, 0.01),
        power_case("10%, 80%", 0.1, 0.8, 300.0, 300.0, 0.3, 0.1),
        power_case("0.1%, 95%", 0.001, 0.95, 10_000.0, 10_000.0, 0.01, 0.002),
        power_case("Bonferroni over 19,900 pairs", 0.05 / 19_900, 0.8, 50_000.0, 80_000.0, 0.01, 0.001),
        power_case("alpha 1e-9", 1e-9, 0.8, 1e6, 1e6, 0.001, 1e-4),
        power_case("power 50%", 0.05, 0.5, 1000.0, 1000.0, 0.2, 0.05),
        power_case("power 99%", 0.05, 0.99, 1000.0, 1000.0, 0.2, 0.05),
        power_case("power barely above alpha: the far tail counts", 0.05, 0.06, 100.0, 100.0, 0.5, 0.05),
        power_case("power 20%, alpha 20%+", 0.2, 0.25, 100.0, 100.0, 0.5, 0.1),
        power_case("alpha 0.5", 0.5, 0.8, 400.0, 400.0, 0.4, 0.05),
        power_case("very unequal groups", 0.05, 0.8, 100.0, 1e6, 0.01, 0.02),
        power_case("a group against the rest", 0.05, 0.8, 20_000.0, 3_980_000.0, 0.01, 0.001),
        power_case("plant volumes", 0.05, 0.8, 1e5, 1e5, 0.01, 0.0005),
        power_case("huge volumes", 0.05, 0.8, 1e9, 1e9, 0.01, 1e-5),
        power_case("huge volumes, tiny rate", 0.05, 0.8, 1e9, 2e9, 1e-6, 1e-7),
        power_case("rate 0", 0.05, 0.8, 1000.0, 1000.0, 0.0, 0.001),
        power_case("rate 1e-6", 0.05, 0.8, 1e5, 1e5, 1e-6, 1e-5),
        power_case("rate 0.5", 0.05, 0.8, 1000.0, 1000.0, 0.5, 0.05),
        power_case("rate 0.9", 0.05, 0.8, 1000.0, 1000.0, 0.9, 0.05),
        power_case("rate 0.999: rise reachable", 0.05, 0.8, 1e6, 1e6, 0.999, 0.0005),
        power_case("rate 0.999: no rise reachable", 0.05, 0.8, 50.0, 50.0, 0.999, 0.0005),
        power_case("rate 1: nothing above", 0.05, 0.8, 1e6, 1e6, 1.0, -0.01),
        power_case("tiny groups: no rise reachable", 0.05, 0.8, 3.0, 4.0, 0.3, 0.2),
        power_case("tiny groups, low rate", 0.05, 0.8, 5.0, 5.0, 0.01, 0.5),
        power_case("fractional units", 0.05, 0.8, 12.5, 37.25, 0.2, 0.3),
        power_case("a fall from the rate", 0.05, 0.8, 1000.0, 1000.0, 0.1, -0.04),
        power_case("tiny difference", 0.05, 0.8, 1e7, 1e7, 0.05, 1e-6),
    ]
    for alpha in (0.05, 0.01, 0.001):
        for power in (0.5, 0.8, 0.9, 0.95):
            cases.append(power_case(f"grid alpha {alpha}, power {power}", alpha, power, 2500.0, 4000.0, 0.03, 0.01))
    return cases


def main() -> None:
    OUT.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    write("trend.json", SEED, trend_cases(rng))
    write("power.json", SEED, power_cases())


if __name__ == "__main__":
    main()
