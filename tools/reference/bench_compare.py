#!/usr/bin/env python3
"""Time the work of the dispar-stats criterion benches with scipy / statsmodels.

Same data as crates/dispar-stats/benches/stats.rs (the splitmix64 generator is
reproduced here), same work as far as the libraries allow; each timing is the best of
a few runs (time.perf_counter). Prints a table for BENCHMARKS.md.

    python tools/reference/bench_compare.py [--full-pairs]

The 499,500-pair case done the library way (one scipy call per pair) takes minutes:
by default a subset of pairs is timed and the total extrapolated (the table says so);
--full-pairs runs all of them.
"""

from __future__ import annotations

import argparse
import platform
import time
import warnings

import numpy as np
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

MASK = (1 << 64) - 1


class Gen:
    """splitmix64, as in benches/stats.rs."""

    def __init__(self, seed: int) -> None:
        self.state = seed

    def next(self) -> int:
        self.state = (self.state + 0x9E3779B97F4A7C15) & MASK
        z = self.state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
        return z ^ (z >> 31)


def groups(k: int, inspected: int, rate: float, seed: int) -> list[tuple[int, int]]:
    """k groups of `inspected` units (+/- 20%) with rates around `rate` (+/- 50%)."""
    g = Gen(seed)
    out = []
    for _ in range(k):
        n = inspected * 8 // 10 + g.next() % (inspected * 4 // 10 + 1)
        r = rate * (0.5 + (g.next() % 1000) / 1000.0)
        x = int(round_half_away(n * r))
        out.append((n, x))
    return out


def round_half_away(v: float) -> float:
    """Rust's f64::round (half away from zero), not Python's banker's rounding."""
    return float(np.floor(v + 0.5)) if v >= 0 else -float(np.floor(-v + 0.5))


def best_of(fn, runs: int) -> tuple[float, object]:
    best, result = float("inf"), None
    for _ in range(runs):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return best, result


# ---------------------------------------------------------------------------


def omnibus(data, h: float):
    """Omnibus X^2 + p, adjusted residuals, Wilson intervals, flags (|z| > h)."""
    n = np.array([d[0] for d in data], dtype=np.int64)
    x = np.array([d[1] for d in data], dtype=np.int64)
    table = np.column_stack([x, n - x])
    res = stats.chi2_contingency(table, correction=False)
    e = res.expected_freq
    rows = table.sum(1, keepdims=True) / table.sum()
    cols = table.sum(0, keepdims=True) / table.sum()
    adj = (table - e) / np.sqrt(e * (1 - rows) * (1 - cols))
    lo, hi = proportion_confint(x, n, alpha=0.05, method="wilson")
    flags = np.where(adj[:, 0] > h, 1, np.where(adj[:, 0] < -h, -1, 0))
    return res.pvalue, adj, lo, hi, flags


def pairs_library(data, limit: int | None):
    """One scipy call per pair (chi-square when Cochran's rule holds, else Fisher), then Holm."""
    k = len(data)
    p = []
    done = 0
    for i in range(k):
        ni, xi = data[i]
        for j in range(i + 1, k):
            if limit is not None and done >= limit:
                return p, done  # subset: the caller times Holm separately
            nj, xj = data[j]
            t = np.array([[xi, ni - xi], [xj, nj - xj]])
            if t.sum(0).min() == 0:
                p.append(1.0)
            else:
                e = np.outer(t.sum(1), t.sum(0)) / t.sum()
                if e.min() >= 5:
                    p.append(stats.chi2_contingency(t, correction=False).pvalue)
                else:
                    p.append(stats.fisher_exact(t).pvalue)
            done += 1
    holm = multipletests(np.array(p), method="holm")[1]
    return holm, done


def pairs_vectorised(data):
    """All pairs at once with numpy (X^2 for every pair; chi2.sf; Holm; Newcombe CIs)."""
    n = np.array([d[0] for d in data], dtype=np.float64)
    x = np.array([d[1] for d in data], dtype=np.float64)
    i, j = np.triu_indices(len(data), 1)
    a, b = x[i], n[i] - x[i]
    c, d = x[j], n[j] - x[j]
    big_n = a + b + c + d
    margins = (a + b) * (c + d) * (a + c) * (b + d)
    with np.errstate(divide="ignore", invalid="ignore"):
        x2 = np.where(margins > 0, big_n * (a * d - b * c) ** 2 / margins, 0.0)
    p = stats.chi2.sf(x2, 1)
    holm = multipletests(p, method="holm")[1]
    lo, hi = confint_proportions_2indep(x[i], n[i], x[j], n[j], method="newcomb", compare="diff")
    return holm, lo, hi


def fisher_big():
    return stats.fisher_exact([[1000, 99_000], [1050, 98_950]]).pvalue


def monte_carlo(rows, resamples: int, seed: int):
    t = np.array(rows, dtype=np.int64)
    r, c = t.sum(1), t.sum(0)
    e = np.outer(r, c) / t.sum()
    x2_obs = ((t - e) ** 2 / e).sum()
    rng = np.random.default_rng(seed)
    sims = stats.random_table(r, c).rvs(resamples, random_state=rng)
    x2 = ((sims - e) ** 2 / e).sum(axis=(1, 2))
    b = int((x2 >= x2_obs * (1 - 1e-7)).sum())
    return (1 + b) / (1 + resamples)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--full-pairs", action="store_true", help="run all 499,500 pairs the library way")
    ap.add_argument("--pair-subset", type=int, default=20_000)
    args = ap.parse_args()
    warnings.simplefilter("ignore")

    print(f"Python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__},"
          f" statsmodels {statsmodels.__version__}; {platform.machine()}")
    rows = []

    # ANOM h for k = 1000 is not in scipy; the Sidak bound stands in (the flag test itself is
    # one comparison per group either way).
    data = groups(1000, 10_000, 0.02, 1)
    h = float(stats.norm.isf((1 - 0.95 ** (1 / 1000)) / 2))
    t, _ = best_of(lambda: omnibus(data, h), 7)
    rows.append(("omnibus + adjusted residuals + Wilson + flags, 1,000 groups",
                 "scipy chi2_contingency + numpy + statsmodels proportion_confint (vectorised)", t, ""))

    dense = groups(1000, 10_000, 0.02, 2)
    sparse = groups(1000, 300, 0.01, 3)
    total_pairs = 1000 * 999 // 2
    for label, d in [("chi-square pairs", dense), ("sparse: mostly Fisher pairs", sparse)]:
        limit = None if args.full_pairs else args.pair_subset
        t, (_, done) = best_of(lambda d=d, limit=limit: pairs_library(d, limit), 1)
        note = ""
        if done < total_pairs:
            # Extrapolate the per-pair calls; time Holm on a full-length vector and add it.
            p_all = np.random.default_rng(5).uniform(size=total_pairs)
            t_holm, _ = best_of(lambda: multipletests(p_all, method="holm"), 3)
            note = (f"measured {done:,} pairs in {t:.1f} s, extrapolated x{total_pairs / done:.1f},"
                    f" plus Holm on 499,500 p ({t_holm * 1e3:.0f} ms)")
            t = t * total_pairs / done + t_holm
        rows.append((f"all 499,500 pairs, Holm ({label})",
                     "one scipy chi2_contingency / fisher_exact call per pair + statsmodels multipletests", t, note))
        t2, _ = best_of(lambda d=d: pairs_vectorised(d), 3)
        rows.append((f"all 499,500 pairs, Holm ({label})",
                     "numpy-vectorised X^2 + chi2.sf + multipletests + confint_proportions_2indep (no Fisher)", t2, ""))

    # Fisher: many calls per run, per-call time.
    def many_fisher(m=200):
        for _ in range(m):
            fisher_big()
    t, _ = best_of(many_fisher, 5)
    rows.append(("Fisher 2x2, 100,000 per group, ~1% defective", "scipy fisher_exact", t / 200, "per call, best of 5 x 200"))

    mc_rows = [[x, n - x] for n, x in groups(10, 60, 0.05, 4)]
    t, p = best_of(lambda: monte_carlo(mc_rows, 100_000, 4), 3)
    rows.append(("Monte Carlo, 100,000 resamples of a 10x2 table",
                 "scipy random_table(row, col).rvs(100000) + numpy X^2", t, f"p = {p:.4f}"))

    w = max(len(r[0]) for r in rows)
    print()
    print(f"| {'benchmark':<{w}} | {'time':>10} | how | note |")
    print(f"|{'-' * (w + 2)}|{'-' * 12}|-----|------|")
    for name, how, t, note in rows:
        ts = f"{t * 1e3:.3f} ms" if t < 1 else f"{t:.2f} s"
        print(f"| {name:<{w}} | {ts:>10} | {how} | {note} |")


if __name__ == "__main__":
    main()
