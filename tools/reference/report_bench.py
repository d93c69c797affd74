#!/usr/bin/env python3
"""The month-by-site report of tests/examples/report_bench.rs, done with pandas, scipy
and statsmodels, timed; prints JSON (timings and the main results) on stdout.

    python tools/reference/report_bench.py DIR/counts.csv [--month 2025-06] [--newcombe]

Steps, each timed with time.perf_counter:
- read: pandas.read_csv of the whole file (219,000 rows in the benchmark);
- aggregate: the month's rows summed by site (groupby);
- omnibus: scipy.stats.chi2_contingency on the sites x (defective, conforming) table,
  statsmodels Table.standardized_resids (adjusted residuals), statsmodels
  proportion_confint(method="wilson") for every site (vectorised);
- categories: chi2_contingency on sites x defect categories;
- pairwise: every pair of sites as a 2 x 2 table, chi2_contingency(correction=False)
  when Cochran's rule holds for the pair, else fisher_exact, then statsmodels
  multipletests(method="holm"); with --newcombe also confint_proportions_2indep(
  method="newcomb") per pair (dispar reports that interval for every pair; it is left
  out by default, so by default the script does less work than dispar).

"compute" is aggregate + omnibus + categories + pairwise (the data already in memory);
"total" adds reading the CSV. Versions are pinned in tools/reference/requirements.txt.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np
import pandas as pd
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.contingency_tables import Table as SmTable
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint


def cochran(expected: np.ndarray) -> bool:
    e = expected.ravel()
    return bool((e >= 1).all() and (e < 5).sum() <= 0.2 * e.size)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("csv")
    ap.add_argument("--month", default="2025-06")
    ap.add_argument("--alpha", type=float, default=0.05)
    ap.add_argument("--newcombe", action="store_true")
    a = ap.parse_args()
    seconds = {}

    t0 = time.perf_counter()
    df = pd.read_csv(a.csv, dtype={"site": str, "line": str, "date": str})
    t1 = time.perf_counter()
    seconds["read"] = t1 - t0

    month = df[df["date"].str.startswith(a.month)]
    cats = [c for c in df.columns if c.startswith("defect:")]
    by_site = month.groupby("site")[["inspected", "defective", *cats]].sum().sort_index()
    t2 = time.perf_counter()
    seconds["aggregate"] = t2 - t1

    n = by_site["inspected"].to_numpy()
    x = by_site["defective"].to_numpy()
    table = np.column_stack([x, n - x])
    x2, p, dof, expected = stats.chi2_contingency(table, correction=False)
    adj = SmTable(table, shift_zeros=False).standardized_resids[:, 0]
    lo, hi = proportion_confint(x, n, alpha=a.alpha, method="wilson")
    t3 = time.perf_counter()
    seconds["omnibus"] = t3 - t2

    ctab = by_site[cats].to_numpy()
    cx2, cp, cdof, _ = stats.chi2_contingency(ctab, correction=False)
    t4 = time.perf_counter()
    seconds["categories"] = t4 - t3

    ps = []
    k = len(n)
    for i in range(k):
        for j in range(i + 1, k):
            t = np.array([[x[i], n[i] - x[i]], [x[j], n[j] - x[j]]])
            s, pv, _, e = stats.chi2_contingency(t, correction=False)
            if not cochran(e):
                _, pv = stats.fisher_exact(t)
            if a.newcombe:
                confint_proportions_2indep(x[i], n[i], x[j], n[j], method="newcomb", compare="diff", alpha=a.alpha)
            ps.append(pv)
    reject, adjusted, _, _ = multipletests(ps, alpha=a.alpha, method="holm")
    t5 = time.perf_counter()
    seconds["pairwise"] = t5 - t4
    seconds["compute"] = t5 - t1
    seconds["total"] = t5 - t0

    json.dump(
        {
            "versions": {
                "python": sys.version.split()[0],
                "numpy": np.__version__,
                "pandas": pd.__version__,
                "scipy": scipy.__version__,
                "statsmodels": statsmodels.__version__,
            },
            "month": a.month,
            "sites": int(k),
            "seconds": seconds,
            "chi2": {"statistic": float(x2), "df": int(dof), "p_value": float(p)},
            "max_abs_adjusted_residual": float(np.abs(adj).max()),
            "wilson_first": [float(lo[0]), float(hi[0])],
            "categories": {"statistic": float(cx2), "df": int(cdof), "p_value": float(cp)},
            "pairwise": {"pairs": len(ps), "rejected": int(reject.sum()), "newcombe": a.newcombe},
        },
        sys.stdout,
        indent=1,
    )
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
