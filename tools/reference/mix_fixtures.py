#!/usr/bin/env python3
"""Reference values for dispar-stats' product-mix statistics (dispar_stats::standardise,
dispar_stats::stratified).

Writes crates/dispar-stats/tests/fixtures/standardise.json and stratified.json. Every
reference is computed here from the published formulas in exact rationals and mpmath
(50 digits), independently of the Rust code, with library implementations alongside:

standardise.json, indirect standardisation (Breslow & Day 1987, IARC Sci. Publ. 82, ch. 2):
- expected counts E_g = sum_s n_gs x_s / n_s in exact rationals;
- Garwood's (1936) exact Poisson interval as mpmath roots of P(O, L) = a/2 and
  Q(O + 1, U) = a/2 (regularized incomplete gamma), divided by E; scipy `chi2.ppf`
  and R's `poisson.test(O, T = E)$conf.int` alongside;
- the two-sided central Poisson p, min(1, 2 min(P(X <= O), P(X >= O))), in mpmath;
  R's `ppois` (asserted here to agree to 1e-10), scipy `poisson.cdf`/`poisson.sf` and
  statsmodels `test_poisson(O, 1, E, method="exact-c")` alongside (scipy's Poisson tails
  are off by ~5e-6 relative at means near 1e6, where mpmath and R agree to 1e-15);
- funnel limits: Spiegelhalter's (2005) interpolated Poisson quantiles, (r_p - a) / E with
  a = (P(X <= r_p) - p) / P(X = r_p), r_p from scipy `poisson.ppf` checked in mpmath.

stratified.json:
- 2 x 2 x K: the CMH statistic (no continuity correction) and the Mantel-Haenszel odds
  ratio with the Robins-Breslow-Greenland (1986) variance in exact rationals, p in mpmath;
  Breslow-Day (no Tarone adjustment) with the fitted counts as mpmath roots at 50 digits;
  statsmodels `StratifiedTable` (`oddsratio_pooled`, `logodds_pooled_se`,
  `oddsratio_pooled_confint`, `test_null_odds(correction=False)`,
  `test_equal_odds(adjust=False)`) and R's `mantelhaen.test(x, correct = FALSE)`
  alongside;
- k x 2 x S: the generalised CMH statistic (Landis, Heyman & Koch 1978) solved in mpmath
  (the deviations and covariance exact, then 50-digit LU), p in mpmath; R's
  `mantelhaen.test(x, correct = FALSE)` alongside (given only the contributing groups and
  strata, as R requires every stratum to hold 2 units and needs a non-singular V); at
  k = 2 statsmodels' `test_null_odds(correction=False)` alongside.

Library inputs are trimmed to what each library accepts (strata with n >= 2 for the
CMH and the odds ratio; strata with four positive margins for statsmodels' Breslow-Day);
the Rust functions get the untrimmed input.

Deterministic (one numpy Generator per file from SEED). Run from the repository root:

    /tmp/venv-ref/bin/python tools/reference/mix_fixtures.py
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import mpmath
import numpy as np
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable
from statsmodels.stats.rates import test_poisson

mp = mpmath.mp
mp.dps = 50

SEED = 20261203
ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "crates" / "dispar-stats" / "tests" / "fixtures"

V_MP = f"mpmath {mpmath.__version__}, mp.dps=50"
V_SCIPY = f"scipy {scipy.__version__}"
V_SM = f"statsmodels {statsmodels.__version__}"


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


def write(name: str, seed: int, cases: list) -> None:
    head = {"generator": "tools/reference/mix_fixtures.py", "seed": seed, "versions": VERSIONS}
    lines = [json.dumps(c, separators=(",", ":"), allow_nan=False) for c in cases]
    text = json.dumps(head, separators=(",", ":"))[:-1] + ',"cases":[\n' + ",\n".join(lines) + "\n]}\n"
    json.loads(text)
    (OUT / name).write_text(text)
    print(f"  {name}: {len(cases)} cases, {len(text) / 1024:.0f} KiB")


def run_r(lines: list[str]) -> list[list[float]]:
    """Runs R code that prints one line of numbers per case; returns them."""
    # A script on stdin: long `-e` arguments are cut by R's command-line length limit.
    out = subprocess.run(
        ["Rscript", "--vanilla", "-"],
        input="\n".join(lines) + "\n",
        capture_output=True,
        text=True,
    )
    if out.returncode != 0:
        raise RuntimeError(f"R failed: {out.stderr[-2000:]}")
    rows = [[float(v) for v in line.split()] for line in out.stdout.strip().splitlines()]
    assert len(rows) == len(lines), out.stderr
    return rows


def mpf(q: Fraction):
    return mp.mpf(q.numerator) / q.denominator


def chi2_upper(x, df):
    """(p, log10 p, d ln p / dx) of the chi-square upper tail, mpmath."""
    x = mp.mpf(x)
    if x <= 0:
        return mp.mpf(1), mp.mpf(0), mp.mpf(0)
    p = mp.gammainc(mp.mpf(df) / 2, x / 2, mp.inf, regularized=True)
    dens = mp.exp((mp.mpf(df) / 2 - 1) * mp.log(x) - x / 2 - (mp.mpf(df) / 2) * mp.log(2) - mp.loggamma(mp.mpf(df) / 2))
    return p, mp.log10(p), -dens / p


# ---------------------------------------------------------------------------
# standardise


def lower_reg(a, x):
    """P(a, x) = x^a e^-x / Gamma(a + 1) 1F1(1; a + 1; x) below x = a + 1 (mpmath's own
    gammainc gives up on its series at a ~ 1e4), 1 - Q above."""
    a, x = mp.mpf(a), mp.mpf(x)
    if x > a + 1:
        return 1 - mp.gammainc(a, x, mp.inf, regularized=True)
    return mp.exp(a * mp.log(x) - x - mp.loggamma(a + 1)) * mp.hyp1f1(1, a + 1, x, maxterms=10**7)


def upper_reg(a, x):
    """Q(a, x), directly above x = a + 1, 1 - P below."""
    a, x = mp.mpf(a), mp.mpf(x)
    if x > a + 1:
        return mp.gammainc(a, x, mp.inf, regularized=True)
    return 1 - lower_reg(a, x)


def poisson_cdf(r, mu):
    return upper_reg(r + 1, mu)


def poisson_at_least(r, mu):
    return mp.mpf(1) if r == 0 else lower_reg(r, mu)


def garwood(o, e, conf):
    a = (1 - mp.mpf(conf)) / 2
    if o == 0:
        lower = mp.mpf(0)
    else:
        x0 = stats.chi2.ppf(float(a), 2 * o) / 2
        lower = mp.findroot(lambda L: lower_reg(o, L) - a, mp.mpf(x0))
    x0 = stats.chi2.ppf(1 - float(a), 2 * o + 2) / 2
    upper = mp.findroot(lambda U: upper_reg(o + 1, U) - a, mp.mpf(x0))
    return lower / e, upper / e


def standardise_case(name, groups, conf, note=None):
    strata = len(groups[0])
    ns = [sum(g[s][0] for g in groups) for s in range(strata)]
    xs = [sum(g[s][1] for g in groups) for s in range(strata)]
    out = []
    for g in groups:
        o = sum(x for _, x in g)
        e = sum((Fraction(n * xs[s], ns[s]) for s, (n, _) in enumerate(g) if ns[s] > 0), Fraction(0))
        row = {"observed": o, "expected": float(e)}
        if e == 0:
            row.update(ratio=None, ci=None, p=None, log10_p=None)
            out.append(row)
            continue
        em = mpf(e)
        lo, hi = garwood(o, em, conf)
        tail = min(poisson_cdf(o, em), poisson_at_least(o, em))
        p = min(mp.mpf(1), 2 * tail)
        ef = float(e)
        a = (1 - conf) / 2
        sc_lo = 0.0 if o == 0 else stats.chi2.ppf(a, 2 * o) / 2 / ef
        sc_hi = stats.chi2.ppf(1 - a, 2 * o + 2) / 2 / ef
        sc_p = min(1.0, 2 * min(stats.poisson.cdf(o, ef), stats.poisson.sf(o - 1, ef)))
        sm_p = float(test_poisson(o, 1, ef, method="exact-c").pvalue)
        row.update(
            ratio=float(mpf(Fraction(o) / e)),
            ci=[float(lo), float(hi)],
            p=float(p),
            log10_p=float(mp.log10(p)),
            scipy_ci=[float(sc_lo), float(sc_hi)],
            scipy_p=float(sc_p),
            statsmodels_p=sm_p,
        )
        out.append(row)
    case = {
        "name": name,
        "kind": "indirect",
        "groups": groups,
        "confidence": conf,
        "results": out,
        "source": f"exact rationals for E; Garwood ends and central Poisson p in {V_MP}",
        "cross_source": f"{V_SCIPY} chi2.ppf, poisson.cdf/sf; {V_SM} test_poisson(method='exact-c'); "
        f"{V_R} poisson.test(O, T=E)$conf.int and ppois",
    }
    if note:
        case["note"] = note
    return case


def attach_r_poisson(cases):
    """Adds R's poisson.test(O, T = E)$conf.int to every result with E > 0."""
    lines, where = [], []
    for ci, case in enumerate(cases):
        for gi, row in enumerate(case["results"]):
            if row["ratio"] is None:
                continue
            o, e = row["observed"], row["expected"]
            lines.append(
                f'r <- poisson.test({o}, T = {e!r}, conf.level = {case["confidence"]!r})$conf.int; '
                f'p <- min(1, 2 * min(ppois({o}, {e!r}), ppois({o} - 1, {e!r}, lower.tail = FALSE))); '
                'cat(sprintf("%.17g %.17g %.17g\\n", r[1], r[2], p))'
            )
            where.append((ci, gi))
    for (ci, gi), (lo, hi, p) in zip(where, run_r(lines)):
        row = cases[ci]["results"][gi]
        row["r_ci"] = [lo, hi]
        row["r_p"] = p
        # Two independent routes to the same p: mpmath here, R's ppois (Loader's
        # saddle point) there.
        if p > 1e-290:
            assert abs(p - row["p"]) <= 1e-10 * row["p"], (cases[ci]["name"], gi, p, row["p"])


def funnel_case(coverage, e):
    q = (1 - mp.mpf(coverage)) / 2
    em = mp.mpf(e)

    def pmf(r):
        return mp.exp(-em + r * mp.log(em) - mp.loggamma(r + 1))

    # Lower: smallest r with P(X <= r) >= q.
    r = int(stats.poisson.ppf(float(q), e))
    while poisson_cdf(r, em) < q:
        r += 1
    while r > 0 and poisson_cdf(r - 1, em) >= q:
        r -= 1
    a = (poisson_cdf(r, em) - q) / pmf(r)
    lower = max(mp.mpf(0), (r - a) / em)
    r_lo = r
    # Upper: smallest r with P(X > r) <= q.
    r = int(stats.poisson.ppf(1 - float(q), e))
    while poisson_at_least(r + 1, em) > q:
        r += 1
    while r > 0 and poisson_at_least(r, em) <= q:
        r -= 1
    a = (q - poisson_at_least(r + 1, em)) / pmf(r)
    upper = (r - a) / em
    return {
        "name": f"funnel coverage {coverage} E {e}",
        "kind": "funnel",
        "coverage": coverage,
        "expected": e,
        "lower": float(lower),
        "upper": float(upper),
        "r_lower": r_lo,
        "r_upper": r,
        "source": f"Spiegelhalter (2005) interpolation of Poisson quantiles in {V_MP} "
        f"(r_p from {V_SCIPY} poisson.ppf, checked in mpmath)",
    }


def make_standardise(rng):
    cases = []
    # Hand-made cases first.
    cases.append(standardise_case(
        "mix explains the raw difference",
        [[[100, 1], [900, 90]], [[900, 9], [100, 10]]], 0.95))
    cases.append(standardise_case(
        "a group that makes only a product that never fails",
        [[[100, 5], [100, 0]], [[0, 0], [400, 0]], [[50, 4], [10, 0]]], 0.95))
    cases.append(standardise_case(
        "observed zero against a large expectation",
        [[[1000, 0], [1000, 0]], [[1000, 80], [1000, 120]]], 0.99))
    cases.append(standardise_case(
        "far tail: p underflows",
        [[[10**6, 9000], [10**6, 25000]], [[10**6, 3000], [10**6, 1000]]], 0.95))
    cases.append(standardise_case(
        "huge counts near the pooled rates",
        [[[10**6, 10012], [2 * 10**6, 1999]], [[3 * 10**6, 29950], [10**6, 1003]],
         [[500000, 5100], [0, 0]]], 0.95))
    cases.append(standardise_case(
        "a million defectives a group",
        [[[10**8, 10**6], [10**7, 5000]], [[10**8, 1010000], [10**6, 450]]], 0.95))
    for i in range(30):
        k = int(rng.integers(2, 9))
        s = int(rng.integers(1, 7))
        scale = [20, 200, 5000, 10**6][i % 4]
        rates = rng.uniform(0.0005, 0.3, size=s)
        groups = []
        for _ in range(k):
            effect = rng.uniform(0.5, 2.0)
            row = []
            for j in range(s):
                n = int(rng.integers(0, scale + 1)) if rng.random() > 0.15 else 0
                p = min(0.999, rates[j] * effect)
                x = int(rng.binomial(n, p)) if n > 0 else 0
                row.append([n, x])
            groups.append(row)
        conf = [0.95, 0.99, 0.9, 0.998][i % 4]
        cases.append(standardise_case(f"random {i}: {k} groups x {s} strata, up to {scale} units", groups, conf))
    attach_r_poisson(cases)
    for coverage in [0.95, 0.998]:
        for e in [0.05, 0.5, 1.0, 2.7, 5.0, 12.3, 40.0, 100.0, 1234.5, 1e5]:
            cases.append(funnel_case(coverage, e))
    return cases


# ---------------------------------------------------------------------------
# stratified: 2 x 2 x K


def mh_exact(strata):
    """CMH statistic, MH odds ratio and RBG se from exact rationals (strata with n >= 2)."""
    dev = Fraction(0)
    var = Fraction(0)
    sum_abs = Fraction(0)
    R = S = PR = PSQR = QS = Fraction(0)
    for a, b, c, d in strata:
        n = a + b + c + d
        if n < 2:
            continue
        n1, n2, m1, m2 = a + b, c + d, a + c, b + d
        dv = Fraction(a) - Fraction(n1 * m1, n)
        dev += dv
        sum_abs += abs(dv)
        var += Fraction(n1 * n2 * m1 * m2, n * n * (n - 1))
        r, s = Fraction(a * d, n), Fraction(b * c, n)
        p, q = Fraction(a + d, n), Fraction(b + c, n)
        R += r
        S += s
        PR += p * r
        PSQR += p * s + q * r
        QS += q * s
    out = {"var": var, "dev": dev, "sum_abs_dev": sum_abs}
    out["statistic"] = dev * dev / var
    if R > 0 and S > 0:
        out["or"] = R / S
        out["var_ln_or"] = PR / (2 * R * R) + PSQR / (2 * R * S) + QS / (2 * S * S)
    return out


def breslow_day_mp(strata, psi):
    psi = mpf(psi)
    stat = mp.mpf(0)
    used = 0
    for a, b, c, d in strata:
        n1, n2, m1, m2 = a + b, c + d, a + c, b + d
        if min(n1, n2, m1, m2) == 0:
            continue
        used += 1
        lo, hi = max(0, m1 - n2), min(n1, m1)
        qa, qb, qc = 1 - psi, n2 - m1 + psi * (n1 + m1), -psi * n1 * m1
        if qa == 0:
            roots = [-qc / qb]
        else:
            disc = mp.sqrt(qb * qb - 4 * qa * qc)
            roots = [(-qb + disc) / (2 * qa), (-qb - disc) / (2 * qa)]
        A = min(roots, key=lambda x: (0 if lo <= x <= hi else min(abs(x - lo), abs(x - hi))))
        B, C, D = n1 - A, m1 - A, n2 - m1 + A
        v = 1 / (1 / A + 1 / B + 1 / C + 1 / D)
        stat += (a - A) ** 2 / v
    if used < 2:
        return None
    return stat, used - 1


def r_mh_lines(strata, conf):
    """R code for mantelhaen.test on the strata with n >= 2 (R refuses smaller ones)."""
    kept = [t for t in strata if sum(t) >= 2]
    # R's array is column-major: x[1,1,k] = a, x[2,1,k] = c, x[1,2,k] = b, x[2,2,k] = d.
    vals = ",".join(f"{a},{c},{b},{d}" for a, b, c, d in kept)
    return (
        f"x <- array(c({vals}), dim = c(2, 2, {len(kept)})); r <- mantelhaen.test(x, correct = FALSE, conf.level = {conf!r}); "
        'cat(sprintf("%.17g %.17g %.17g %.17g %.17g\\n", r$statistic, r$p.value, r$estimate, r$conf.int[1], r$conf.int[2]))'
    )


def mh_case(name, strata, conf, note=None):
    ex = mh_exact(strata)
    case = {"name": name, "kind": "mh", "strata": strata, "confidence": conf}
    stat = ex["statistic"]
    p, lp, dl = chi2_upper(mpf(stat), 1)
    case.update(
        statistic=float(stat),
        deviation=float(ex["dev"]),
        sum_abs_dev=float(ex["sum_abs_dev"]),
        variance=float(ex["var"]),
        p=float(p),
        log10_p=float(lp),
        dlnp_dx=float(dl),
        strata_used=sum(1 for t in strata if sum(t) >= 2),
        source=f"exact rationals for the CMH statistic, the MH odds ratio and the RBG variance; p in {V_MP}",
    )
    if "or" in ex:
        z = mp.sqrt(2) * mp.erfinv(mp.mpf(conf))
        se = mp.sqrt(mpf(ex["var_ln_or"]))
        lnor = mp.log(mpf(ex["or"]))
        case.update(
            odds_ratio=float(mpf(ex["or"])),
            log_odds_ratio_se=float(se),
            ci=[float(mp.exp(lnor - z * se)), float(mp.exp(lnor + z * se))],
        )
        bd = breslow_day_mp(strata, ex["or"])
        if bd is not None:
            bp, blp, bdl = chi2_upper(bd[0], bd[1])
            case["breslow_day"] = {
                "statistic": float(bd[0]),
                "df": bd[1],
                "p": float(bp),
                "log10_p": float(blp),
                "dlnp_dx": float(bdl),
            }
        else:
            case["breslow_day"] = None
        # statsmodels on what it accepts.
        kept = [t for t in strata if sum(t) >= 2]
        arr = np.array([[[t[0], t[1]], [t[2], t[3]]] for t in kept], dtype=float).transpose(1, 2, 0)
        st = StratifiedTable(arr)
        null = st.test_null_odds(correction=False)
        ci = st.oddsratio_pooled_confint(alpha=1 - conf)
        sm = {
            "odds_ratio": float(st.oddsratio_pooled),
            "log_odds_ratio_se": float(st.logodds_pooled_se),
            "ci": [float(ci[0]), float(ci[1])],
            "statistic": float(null.statistic),
            "p": float(null.pvalue),
        }
        informative = [t for t in strata if min(t[0] + t[1], t[2] + t[3], t[0] + t[2], t[1] + t[3]) > 0]
        if len(informative) >= 2:
            # statsmodels' Breslow-Day at the pooled OR of the strata it is given; with
            # uninformative strata dropped the pooled OR is unchanged (they add 0 to R, S).
            arr_i = np.array([[[t[0], t[1]], [t[2], t[3]]] for t in informative], dtype=float).transpose(1, 2, 0)
            eq = StratifiedTable(arr_i).test_equal_odds(adjust=False)
            # statsmodels solves its quadratic dividing by 1 - OR: nan at OR = 1 exactly.
            if math.isfinite(eq.statistic):
                sm["breslow_day"] = float(eq.statistic)
                sm["breslow_day_p"] = float(eq.pvalue)
        case["statsmodels"] = sm
        case["statsmodels_source"] = f"{V_SM} StratifiedTable"
    else:
        case.update(odds_ratio=None, log_odds_ratio_se=None, ci=None, breslow_day=None)
    case["r_source"] = f"{V_R} mantelhaen.test(x, correct = FALSE, conf.level)"
    if note:
        case["note"] = note
    return case


def make_mh(rng):
    cases = []
    # Mantel (1963), JASA 58:690-700, as the "Rabbits" array of R's ?mantelhaen.test
    # (penicillin level strata; immediate vs 1.5 h delayed injection; cured vs died). The
    # data and the help page's "p = 0.047" (with continuity correction) are recalled from
    # memory; the reference values here are computed, not copied.
    rabbits = [[0, 6, 0, 5], [3, 3, 0, 6], [6, 0, 2, 4], [5, 1, 6, 0], [2, 0, 5, 0]]
    cases.append(mh_case("Mantel (1963) penicillin and rabbits (data recalled from memory)", rabbits, 0.95))
    hand = [
        ("same odds ratio in both strata", [[20, 80, 10, 80], [2, 98, 1, 98]]),
        ("one stratum", [[12, 88, 5, 95]]),
        ("zero cells", [[0, 10, 3, 7], [4, 0, 2, 8], [1, 9, 0, 10]]),
        ("strata with a single group or a single unit", [[5, 20, 0, 0], [0, 0, 3, 30], [1, 0, 0, 0], [6, 44, 2, 48], [3, 27, 4, 66]]),
        ("a stratum with no defective", [[0, 50, 0, 60], [8, 42, 3, 57], [5, 45, 1, 59]]),
        ("huge counts, 1e6 units a cell", [[10000, 990000, 9000, 991000], [20500, 979500, 20000, 980000], [300, 999700, 310, 999690]]),
        ("huge counts, no difference", [[10000, 990000, 10000, 990000], [500, 499500, 1000, 999000]]),
        ("far tail", [[3000, 7000, 1000, 9000], [2500, 7500, 900, 9100]]),
        ("odds ratios that differ between strata", [[40, 60, 10, 90], [10, 90, 40, 60], [25, 75, 25, 75]]),
    ]
    for name, strata in hand:
        cases.append(mh_case(name, strata, 0.95))
    for i in range(32):
        k = int(rng.integers(1, 9))
        scale = [15, 100, 2000, 10**6][i % 4]
        strata = []
        base_or = rng.uniform(0.4, 2.5)
        for _ in range(k):
            n1 = int(rng.integers(0, scale + 1)) if rng.random() > 0.1 else 0
            n2 = int(rng.integers(0, scale + 1)) if rng.random() > 0.1 else 0
            p2 = rng.uniform(0.002, 0.4)
            odds = p2 / (1 - p2) * base_or * rng.uniform(0.7, 1.4)
            p1 = odds / (1 + odds)
            a = int(rng.binomial(n1, p1)) if n1 else 0
            c = int(rng.binomial(n2, p2)) if n2 else 0
            strata.append([a, n1 - a, c, n2 - c])
        ex_v = sum(
            Fraction((t[0] + t[1]) * (t[2] + t[3]) * (t[0] + t[2]) * (t[1] + t[3]), max(1, sum(t)) ** 2 * max(1, sum(t) - 1))
            for t in strata if sum(t) >= 2
        )
        if ex_v == 0:
            continue
        conf = [0.95, 0.99, 0.9][i % 3]
        cases.append(mh_case(f"random {i}: {k} strata, up to {scale} units a group", strata, conf))
    # R wants at least two strata.
    with_r = [c for c in cases if sum(1 for t in c["strata"] if sum(t) >= 2) >= 2]
    results = run_r([r_mh_lines(c["strata"], c["confidence"]) for c in with_r])
    for c in cases:
        if c not in with_r:
            c.pop("r_source")
    for c, (stat, p, est, lo, hi) in zip(with_r, results):
        c["r"] = {"statistic": stat, "p": p, "odds_ratio": est, "ci": [lo, hi]}
    return cases


# ---------------------------------------------------------------------------
# stratified: generalised CMH, k x 2 x S


def gcmh_exact(groups):
    """Q, df, used groups and strata of the generalised CMH, exact deviations and V, then
    a 50-digit solve per linked set of groups."""
    k, strata = len(groups), len(groups[0])
    N = [sum(g[s][0] for g in groups) for s in range(strata)]
    X = [sum(g[s][1] for g in groups) for s in range(strata)]
    informative = [
        sum(1 for g in groups if g[s][0] > 0) >= 2 and 0 < X[s] < N[s] for s in range(strata)
    ]
    used = sorted({g for s in range(strata) if informative[s] for g in range(k) if groups[g][s][0] > 0})
    # Linked sets by union-find.
    parent = list(range(k))

    def root(g):
        while parent[g] != g:
            g = parent[g]
        return g

    for s in range(strata):
        if informative[s]:
            present = [g for g in range(k) if groups[g][s][0] > 0]
            for g in present[1:]:
                ra, rb = root(present[0]), root(g)
                if ra != rb:
                    parent[rb] = ra
    sets = {}
    for g in used:
        sets.setdefault(root(g), []).append(g)
    q_total = mp.mpf(0)
    df = 0
    for members in sets.values():
        idx = members[:-1]
        m = len(idx)
        d = [Fraction(0)] * m
        V = [[Fraction(0)] * m for _ in range(m)]
        for s in range(strata):
            if not informative[s]:
                continue
            n, x = N[s], X[s]
            coef = Fraction(x * (n - x), n * n * (n - 1))
            for i, g in enumerate(idx):
                ng, xg = groups[g][s]
                d[i] += Fraction(xg) - Fraction(ng * x, n)
                for j, h in enumerate(idx):
                    nh = groups[h][s][0]
                    V[i][j] += coef * (n * ng * (1 if i == j else 0) - ng * nh)
        Vm = mp.matrix([[mpf(v) for v in row] for row in V])
        dm = mp.matrix([mpf(v) for v in d])
        sol = mp.lu_solve(Vm, dm)
        q_total += sum(dm[i] * sol[i] for i in range(m))
        df += m
    return q_total, df, used, [s for s in range(strata) if informative[s]], len(sets)


def gcmh_case(name, groups, note=None):
    q, df, used, strata_used, sets = gcmh_exact(groups)
    p, lp, dl = chi2_upper(q, df)
    case = {
        "name": name,
        "kind": "gcmh",
        "groups": groups,
        "statistic": float(q),
        "df": df,
        "p": float(p),
        "log10_p": float(lp),
        "dlnp_dx": float(dl),
        "groups_used": len(used),
        "strata_used": len(strata_used),
        "source": f"exact deviations and covariance, solved in {V_MP}; p in {V_MP}",
    }
    # R needs a non-singular V (one linked set) and strata of at least 2 units.
    if sets == 1 and len(strata_used) >= 2:
        kept_s = [s for s in strata_used]
        vals = []
        for s in kept_s:
            col_def = [groups[g][s][1] for g in used]
            col_conf = [groups[g][s][0] - groups[g][s][1] for g in used]
            vals.extend(col_def + col_conf)
        case["_r"] = (
            f"x <- array(c({','.join(map(str, vals))}), dim = c({len(used)}, 2, {len(kept_s)})); "
            "r <- mantelhaen.test(x, correct = FALSE); "
            'cat(sprintf("%.17g %.17g %.17g\\n", r$statistic, r$parameter, r$p.value))'
        )
    if len(groups) == 2:
        strata = [
            [groups[0][s][1], groups[0][s][0] - groups[0][s][1], groups[1][s][1], groups[1][s][0] - groups[1][s][1]]
            for s in range(len(groups[0]))
        ]
        kept = [t for t in strata if sum(t) >= 2]
        arr = np.array([[[t[0], t[1]], [t[2], t[3]]] for t in kept], dtype=float).transpose(1, 2, 0)
        null = StratifiedTable(arr).test_null_odds(correction=False)
        case["statsmodels_statistic"] = float(null.statistic)
        case["statsmodels_source"] = f"{V_SM} StratifiedTable.test_null_odds(correction=False), the 2 x 2 x K CMH"
    if note:
        case["note"] = note
    return case


def make_gcmh(rng):
    cases = []
    cases.append(gcmh_case(
        "three sites, two products, one site worse",
        [[[200, 4], [100, 10]], [[100, 2], [200, 20]], [[150, 12], [150, 30]]]))
    cases.append(gcmh_case(
        "a group with no units and a stratum with one group",
        [[[100, 5], [50, 5], [0, 0]], [[0, 0], [0, 0], [0, 0]], [[80, 9], [40, 2], [30, 3]], [[60, 2], [0, 0], [0, 0]]]))
    cases.append(gcmh_case(
        "two sets of groups sharing no product",
        [[[100, 10], [0, 0]], [[100, 20], [0, 0]], [[0, 0], [50, 5]], [[0, 0], [50, 1]], [[0, 0], [70, 9]]]))
    cases.append(gcmh_case(
        "huge counts",
        [[[10**6, 10000], [10**6, 2000]], [[10**6, 10150], [10**6, 1900]], [[2 * 10**6, 19800], [500000, 1010]]]))
    for i in range(40):
        k = 2 + i % 7
        s = int(rng.integers(1, 6))
        scale = [20, 300, 5000, 10**6][i % 4]
        rates = rng.uniform(0.001, 0.3, size=s)
        groups = []
        for _ in range(k):
            effect = rng.uniform(0.6, 1.6)
            row = []
            for j in range(s):
                n = int(rng.integers(0, scale + 1)) if rng.random() > 0.15 else 0
                x = int(rng.binomial(n, min(0.99, rates[j] * effect))) if n else 0
                row.append([n, x])
            groups.append(row)
        try:
            cases.append(gcmh_case(f"random {i}: {k} groups x {s} strata, up to {scale} units", groups))
        except ZeroDivisionError:
            pass
    # The generator drops cases with nothing to test (all-uninformative) through the
    # ZeroDivisionError above only if V is empty; an empty V gives df 0 here instead.
    cases = [c for c in cases if c["df"] > 0]
    with_r = [c for c in cases if "_r" in c]
    for c, (stat, df, p) in zip(with_r, run_r([c["_r"] for c in with_r])):
        c["r"] = {"statistic": stat, "df": int(df), "p": p}
        c["r_source"] = f"{V_R} mantelhaen.test(x, correct = FALSE)"
    for c in cases:
        c.pop("_r", None)
    return cases


def main():
    rng = np.random.default_rng([SEED, 1])
    write("standardise.json", SEED, make_standardise(rng))
    rng = np.random.default_rng([SEED, 2])
    cases = make_mh(rng)
    rng = np.random.default_rng([SEED, 3])
    cases += make_gcmh(rng)
    write("stratified.json", SEED, cases)


if __name__ == "__main__":
    main()
