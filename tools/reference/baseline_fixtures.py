#!/usr/bin/env python3
"""Reference values for dispar-stats' baseline comparison (dispar_stats::baseline).

Writes crates/dispar-stats/tests/fixtures/baseline.json: a few hundred generated series
(a group's baseline periods, oldest first, and its current period) with the baseline
rate, dispersion phi, z, limit, left-out periods and verdict computed here from the
published formulas, independently of the Rust code:

- baseline rate: pooled sum d / sum n; Wilson interval from statsmodels
  proportion_confint(method="wilson");
- quasi-binomial dispersion, the Pearson moment estimator (McCullagh & Nelder 1989,
  Generalized Linear Models, 2nd ed., section 4.5, from memory): X2_b = sum_j (d_j -
  n_j pbar)^2 / (n_j pbar (1 - pbar)) over the m retained periods, phi = max(1, X2_b /
  (m - 1)); sigma_z = sqrt(phi);
- z in the prediction form: (p - pbar) / sqrt(phi pbar (1 - pbar) (1/n + 1/N));
- small counts (n pbar < 5, n (1 - pbar) < 5, or fewer than 10 defective or 10 conforming
  units in the baseline): scipy.stats.fisher_exact two-sided p of [[d, n - d], [D, N - D]],
  z = sign(p - pbar) norm.isf(p_exact / 2) / sqrt(phi);
- limit: Sidak per call a = 1 - (1 - alpha_f)^(1/k), two-sided Student's t with m - 1 df,
  scipy.stats.t.isf(a / 2, m - 1), for a baseline of m periods; or 3;
- robust exclusion, a forward search from a clean subset (Hadi & Simonoff 1993; Atkinson
  & Riani 2000): sort the periods by rate (ties by index); start from the run of
  min_periods consecutive ones with the smallest Pearson X2 around its own pooled rate
  (the first run on a tie); repeatedly add the remaining period with
  the smallest |z| against the subset (same rule, t limit on |subset| - 1 df) while it is
  within the limit; at the first beyond it, it and all not yet added are left out;
- ratio: Katz et al. (1978) log interval widened by sqrt(phi) (0.5 added to every cell
  when d or D is 0); difference: statsmodels confint_proportions_2indep(method="newcomb").

Deterministic (one numpy Generator, SEED). Run from the repository root with the pinned
requirements (tools/reference/requirements.txt):

    /tmp/venv-ref/bin/python tools/reference/baseline_fixtures.py
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

SEED = 20260610
ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "crates" / "dispar-stats" / "tests" / "fixtures" / "baseline.json"


def limit_for(limit_opt, periods: int) -> float:
    """The limit for a baseline of `periods` periods (t on periods - 1 df, at least 1)."""
    if limit_opt["kind"] == "three_sigma":
        return 3.0
    a = -math.expm1(math.log1p(-limit_opt["family_alpha"]) / limit_opt["calls"])
    return float(stats.t.isf(a / 2, max(1, periods - 1)))


def x2_around(base, pbar):
    var = pbar * (1 - pbar)
    if var <= 0:
        return 0.0
    return sum((d - n * pbar) ** 2 / (n * var) for n, d in base)


def pearson_x2(base):
    return x2_around(base, sum(b[1] for b in base) / sum(b[0] for b in base))


def dispersion(base, pbar):
    if len(base) < 2:
        return 1.0
    return max(1.0, x2_around(base, pbar) / (len(base) - 1))


def score(n, d, base):
    big_n = sum(b[0] for b in base)
    big_d = sum(b[1] for b in base)
    pbar = big_d / big_n
    phi = dispersion(base, pbar)
    s = math.sqrt(phi)
    p = d / n
    exact = n * pbar < 5 or n * (1 - pbar) < 5 or big_d < 10 or big_n - big_d < 10
    if exact:
        pf = float(stats.fisher_exact([[d, n - d], [big_d, big_n - big_d]]).pvalue)
        sign = 1.0 if p > pbar else (-1.0 if p < pbar else 0.0)
        z = 0.0 if pf >= 1 else sign * float(stats.norm.isf(pf / 2)) / s
        return dict(pbar=pbar, phi=phi, sigma_z=s, z=z, method="exact", p_exact=pf, N=big_n,
                    D=big_d)
    z = (p - pbar) / math.sqrt(phi * pbar * (1 - pbar) * (1 / n + 1 / big_n))
    return dict(pbar=pbar, phi=phi, sigma_z=s, z=z, method="normal", N=big_n, D=big_d)


def compare(period, baseline, limit_opt, min_periods, confidence):
    n, d = period
    used = [j for j, b in enumerate(baseline) if b[0] > 0]
    with_units = len(used)
    out = dict(limit=limit_for(limit_opt, max(2, len(used))), with_units=with_units)

    def base_rate(idx):
        big_n = sum(baseline[j][0] for j in idx)
        big_d = sum(baseline[j][1] for j in idx)
        if big_n == 0:
            return None, None
        lo, hi = proportion_confint(big_d, big_n, alpha=1 - confidence, method="wilson")
        return big_d / big_n, [float(lo), float(hi)]

    if with_units < min_periods or n == 0:
        rate, ci = base_rate(used)
        reason = (
            {"too_few_baseline_periods": {"with_units": with_units, "minimum": min_periods}}
            if with_units < min_periods
            else "no_units_in_period"
        )
        out.update(verdict="unknown", reason=reason, rate=rate, rate_ci=ci, used=used, left_out=[])
        return out
    left_out = []
    if len(used) > min_periods:
        by_rate = sorted(used, key=lambda j: (baseline[j][1] / baseline[j][0], j))
        best = None
        for start in range(len(by_rate) - min_periods + 1):
            run = [baseline[j] for j in by_rate[start:start + min_periods]]
            x2 = pearson_x2(run)
            if best is None or x2 < best[1]:
                best = (start, x2)
        start = best[0]
        subset = by_rate[start:start + min_periods]
        rest = sorted(by_rate[:start] + by_rate[start + min_periods:])
        while rest:
            base = [baseline[j] for j in subset]
            zs = [(abs(score(baseline[j][0], baseline[j][1], base)["z"]), pos)
                  for pos, j in enumerate(rest)]
            z, pos = min(zs)
            if z <= limit_for(limit_opt, len(subset)):
                subset.append(rest.pop(pos))
            else:
                break
        used, left_out = sorted(subset), rest
    limit = limit_for(limit_opt, len(used))
    s = score(n, d, [baseline[j] for j in used])
    z = s["z"]
    if z > limit:
        verdict, reason = "worse", "above_limit"
    elif z < -limit:
        verdict, reason = "better", "below_limit"
    else:
        verdict, reason = "usual", "within_limit"
    rate, ci = base_rate(used)
    big_n, big_d = s["N"], s["D"]
    zc = float(stats.norm.isf((1 - confidence) / 2))
    corrected = d == 0 or big_d == 0
    if corrected:
        a, an, c, cn = d + 0.5, n + 1.0, big_d + 0.5, big_n + 1.0
    else:
        a, an, c, cn = float(d), float(n), float(big_d), float(big_n)
    ln_rr = math.log(a / an) - math.log(c / cn)
    se = math.sqrt(max(0.0, 1 / a - 1 / an + 1 / c - 1 / cn)) * s["sigma_z"]
    lo, hi = confint_proportions_2indep(
        d, n, big_d, big_n, method="newcomb", compare="diff", alpha=1 - confidence
    )
    out.update(
        limit=limit,
        verdict=verdict,
        reason=reason,
        method=s["method"],
        rate=rate,
        rate_ci=ci,
        period_rate=d / n,
        ratio=(d / n) / rate if rate > 0 else None,
        ratio_ci=[math.exp(ln_rr - zc * se), math.exp(ln_rr + zc * se)],
        ratio_corrected=corrected,
        difference=d / n - rate,
        difference_ci=[float(lo), float(hi)],
        z=z,
        sigma_z=s["sigma_z"],
        dispersion=s["phi"],
        used=used,
        left_out=left_out,
        baseline_inspected=big_n,
        baseline_defective=big_d,
    )
    if "p_exact" in s:
        out["p_exact"] = s["p_exact"]
    return out


def draw(rng, n, rate, noise):
    if noise > 0:
        rate = rate * math.exp(rng.normal(0, noise) - noise * noise / 2)
    return int(rng.binomial(n, min(max(rate, 0.0), 1.0)))


def series(rng, kind):
    """(baseline, period, description) for one generated series."""
    b = int(rng.choice([8, 8, 8, 12, 6]))
    n0 = int(rng.choice([500, 2_000, 20_000, 100_000]))
    p0 = float(rng.uniform(0.002, 0.05))
    noise = float(rng.choice([0.0, 0.0, 0.1, 0.3]))
    sizes = [max(1, int(n0 * rng.uniform(0.6, 1.4))) for _ in range(b + 1)]
    rates = [p0] * (b + 1)
    if kind == "step_up":
        rates[b] = p0 * float(rng.uniform(1.2, 4.0))
    elif kind == "step_down":
        rates[b] = p0 / float(rng.uniform(1.2, 4.0))
    elif kind == "drift":
        slope = float(rng.uniform(-0.06, 0.12))
        rates = [p0 * max(0.05, 1 + slope * j) for j in range(b + 1)]
    elif kind == "spike":
        rates[int(rng.integers(0, b))] = p0 * float(rng.uniform(3, 10))
    elif kind == "excursions":
        for j in rng.choice(b, size=2, replace=False):
            rates[int(j)] = p0 * float(rng.uniform(2.5, 6))
        if rng.uniform() < 0.5:
            rates[b] = p0 * float(rng.uniform(2.5, 6))
    elif kind == "small":
        sizes = [int(rng.integers(20, 400)) for _ in range(b + 1)]
        rates = [float(rng.uniform(0.002, 0.03))] * (b + 1)
        if rng.uniform() < 0.5:
            rates[b] *= float(rng.uniform(2, 8))
    elif kind == "zero_baseline":
        sizes = [int(rng.integers(100, 2_000)) for _ in range(b + 1)]
        rates = [0.0] * b + [float(rng.choice([0.0, 0.002, 0.01]))]
    elif kind == "gaps":
        for j in rng.choice(b, size=int(rng.integers(1, b - 1)), replace=False):
            sizes[int(j)] = 0
    elif kind == "no_units":
        sizes[b] = 0
    elif kind == "excursion_run":
        # Several consecutive excursions at the end of the baseline (a drift still under
        # way), which mask each other when each is judged against all the others.
        run = int(rng.integers(2, b - 3))
        for j in range(b - run, b):
            rates[j] = p0 * float(rng.uniform(2, 4))
        rates[b] = p0 * float(rng.choice([1.0, 3.0]))
    baseline = [(n, draw(rng, n, r, noise) if n > 0 else 0) for n, r in zip(sizes[:b], rates[:b])]
    n = sizes[b]
    period = (n, draw(rng, n, rates[b], noise) if n > 0 else 0)
    return baseline, period, f"{kind}, B = {b}, n ~ {n0}, p0 = {p0:.4f}, noise {noise}"


KINDS = ["stable", "step_up", "step_down", "drift", "spike", "excursions", "small",
         "zero_baseline", "gaps", "no_units", "excursion_run"]
COUNTS = {"stable": 50, "step_up": 40, "step_down": 40, "drift": 30, "spike": 40,
          "excursions": 40, "small": 50, "zero_baseline": 15, "gaps": 25, "no_units": 5,
          "excursion_run": 25}


def main() -> None:
    rng = np.random.default_rng(SEED)
    cases = []
    for kind in KINDS:
        for i in range(COUNTS[kind]):
            baseline, period, what = series(rng, kind)
            r = float(rng.uniform())
            if r < 0.15:
                limit_opt = {"kind": "three_sigma"}
            else:
                calls = int(rng.choice([1, 6, 20, 600]))
                limit_opt = {"kind": "sidak", "family_alpha": 0.01, "calls": calls}
            min_periods = int(rng.choice([4, 4, 4, 3, 6]))
            confidence = float(rng.choice([0.95, 0.95, 0.9]))
            expected = compare(period, baseline, limit_opt, min_periods, confidence)
            cases.append(
                {
                    "name": f"{kind} #{i}: {what}",
                    "baseline": baseline,
                    "period": list(period),
                    "limit": limit_opt,
                    "min_periods": min_periods,
                    "confidence": confidence,
                    "expected": expected,
                    "source": f"published formulas in numpy {np.__version__}, scipy "
                    f"{scipy.__version__} fisher_exact/norm.isf/t.isf, statsmodels "
                    f"{statsmodels.__version__} wilson/newcomb",
                }
            )
    out = {
        "versions": {
            "python": sys.version.split()[0],
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "statsmodels": statsmodels.__version__,
        },
        "cases": cases,
    }
    OUT.write_text(json.dumps(out, indent=1) + "\n")
    tally: dict[str, int] = {}
    for c in cases:
        key = f"{c['expected']['verdict']}/{c['expected'].get('method')}"
        tally[key] = tally.get(key, 0) + 1
    left = sum(1 for c in cases if c["expected"].get("left_out"))
    print(f"{len(cases)} cases; {tally}; {left} with periods left out", file=sys.stderr)


if __name__ == "__main__":
    main()
