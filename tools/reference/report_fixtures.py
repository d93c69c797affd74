#!/usr/bin/env python3
"""Reference values for the period-report system tests (tests/tests/system/reports.rs).

Writes tests/fixtures/reports.json: the sites, lines and daily count records the test
posts to a real server, the corrections it posts later, and for each report (period,
level, filters) the values every statistic must have, computed here independently of
dispar with scipy and statsmodels (versions recorded in the file; pinned in
tools/reference/requirements.txt):

- the five-lot example of the NIST/SEMATECH e-Handbook of Statistical Methods,
  section 7.4.6 (36, 46, 42, 63, 38 nonconforming of 300 per lot; X^2 about 12.13 on
  4 df, so equal proportions are rejected at alpha = 0.05) as five sites in ISO week
  2026-W11, spread over three days, with records just outside the week;
- invented data for the other period kinds (day, range, month, quarter, year) and
  levels (site, line, all-lines), with defect categories, a product filter, a small
  2 x 2 comparison (Fisher's exact test), and periods with a single site (not
  testable).

Sources, named again in each case's "sources":
- aggregation: pandas groupby sums (pandas version in "versions");
- omnibus test: scipy.stats.chi2_contingency(correction=False) (X^2, df, p, expected),
  critical value scipy.stats.chi2.isf(alpha, df); Fisher's exact test for 2 x 2 tables
  that fail Cochran's rule: scipy.stats.fisher_exact (two-sided);
- Cramer's V: scipy.stats.contingency.association(method="cramer"); bias-corrected V:
  Bergsma (2013), J. Korean Stat. Soc. 42, 323-328, formula implemented below;
- adjusted residuals: statsmodels Table(...).standardized_resids (Haberman);
- Wilson intervals: statsmodels proportion_confint(method="wilson");
- Newcombe intervals of differences: statsmodels confint_proportions_2indep(
  method="newcomb", compare="diff");
- Holm (and other) adjustment: statsmodels multipletests, over the testable pairs
  only: a pair in which neither group has a defective unit (or neither a conforming
  one) has no p and stays out of the family, as R's p.adjust treats missing p;
- ANOM critical values h(alpha; n_1 .. n_k) for the tested groups' sizes: `h_formula`
  of tools/reference/anom_sizes.py (the factorised integral solved with scipy's
  Faddeeva function and QUADPACK; see tools/reference/README.md). The flag rule's
  critical value and the flags both use it;
- overdispersion phi: mean of squared funnel z-scores winsorised with
  scipy.stats.mstats.winsorize(limits=(0.1, 0.1)) (Spiegelhalter 2005, Stat. Med. 24,
  1185-1202).

Member names follow the report contract (the glossary in DEVELOPERS.md): a group's
`code` and `name`, `significant`, `pairs`, `flag_rule` {`critical_value`, `limit`},
`totals.group_count`, so the system test compares them one to one.

Deterministic: the data are written out below; rerunning with the pinned versions
gives a byte-identical file.

    /tmp/venv-ref/bin/python tools/reference/report_fixtures.py

(the virtual environment of tools/reference/README.md, with requirements.txt installed).
"""

from __future__ import annotations

import datetime as dt
import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import statsmodels
from scipy import stats
from scipy.stats import contingency as sp_contingency
from scipy.stats import mstats
from statsmodels.stats.contingency_tables import Table as SmTable
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

# The script's own folder is on sys.path when it is run as a script.
from anom_sizes import h_formula

ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "tests" / "fixtures" / "reports.json"

VERSIONS = {
    "python": sys.version.split()[0],
    "numpy": np.__version__,
    "pandas": pd.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
}
V_SCIPY = f"scipy {scipy.__version__}"
V_SM = f"statsmodels {statsmodels.__version__}"
V_PD = f"pandas {pd.__version__}"

ALPHA = 0.05
NIST = "NIST/SEMATECH e-Handbook of Statistical Methods, 7.4.6 (five lots of 300: 36, 46, 42, 63, 38 nonconforming; X^2 about 12.13 on 4 df)"

# ------------------------------------------------------------------------ data

# A site's name is the one the system tests' server helper gives it ("Plant <code>");
# lines have no name. A group's name is its site's at the site and all-lines levels and
# its line's (here null) at the line level.
SITES = [{"code": f"S{i}", "name": f"Plant S{i}", "lines": ["L1"]} for i in range(1, 7)] + [
    {"code": "P1", "name": "Plant P1", "lines": ["L1", "L2", "L3", "L4"]},
    {"code": "P2", "name": "Plant P2", "lines": ["L1", "L2"]},
]
SITE_NAMES = {s["code"]: s["name"] for s in SITES}


def rec(site, line, date, inspected, defective, defects=None, product=None):
    r = {"site": site, "line": line, "date": date, "inspected": inspected, "defective": defective}
    if product is not None:
        r["product"] = product
    if defects:
        r["defects"] = defects
    return r


def records() -> list[dict]:
    out = []
    # NIST 7.4.6 lots as sites S1..S5, 100 units a day on Mon 9, Tue 10, Wed 11 March
    # 2026 (ISO week 2026-W11); the lot totals are 300 inspected and these defective.
    split = {"S1": (12, 12, 12), "S2": (15, 15, 16), "S3": (14, 14, 14), "S4": (21, 21, 21), "S5": (12, 13, 13)}
    for site, xs in split.items():
        for day, x in zip(("2026-03-09", "2026-03-10", "2026-03-11"), xs):
            out.append(rec(site, "L1", day, 100, x))
    # Just outside the week: Sunday 8 March is 2026-W10, Monday 16 March is 2026-W12.
    out.append(rec("S1", "L1", "2026-03-08", 500, 100))
    out.append(rec("S2", "L1", "2026-03-16", 500, 5))
    out.append(rec("S6", "L1", "2026-03-16", 400, 30))
    # April: presses, Monday 6 to Friday 10 (2026-W15), with defect categories.
    rates = {("P1", "L1"): 0.020, ("P1", "L2"): 0.045, ("P1", "L3"): 0.022, ("P2", "L1"): 0.030, ("P2", "L2"): 0.031}
    mixes = {
        ("P1", "L1"): (0.6, 0.3, 0.1),
        ("P1", "L2"): (0.3, 0.3, 0.4),
        ("P1", "L3"): (0.55, 0.35, 0.1),
        ("P2", "L1"): (0.5, 0.4, 0.1),
        ("P2", "L2"): (0.5, 0.35, 0.15),
    }
    for d in range(5):
        date = f"2026-04-{6 + d:02d}"
        for li, ((site, line), rate) in enumerate(rates.items()):
            n = 1000 + 37 * d + 11 * li
            x = int(math.floor(n * rate + 0.5)) + (d % 3) - 1
            m = mixes[(site, line)]
            scratch = int(math.floor(x * m[0] + 0.5))
            dent = int(math.floor(x * m[1] + 0.5))
            short = max(x - scratch - dent, 0) + (1 if d == 2 else 0)
            out.append(rec(site, line, date, n, x, {"scratch": scratch, "dent": dent, "short-shot": short}))
    # One product's records on Wednesday 8 April (separate natural keys).
    out.append(rec("P1", "L1", "2026-04-08", 300, 4, product="CAP-28"))
    out.append(rec("P1", "L2", "2026-04-08", 300, 19, product="CAP-28"))
    out.append(rec("P2", "L1", "2026-04-08", 300, 7, product="CAP-28"))
    # Monday 20 April: a small comparison of P2's two lines (Fisher's exact test).
    out.append(rec("P2", "L1", "2026-04-20", 40, 1))
    out.append(rec("P2", "L2", "2026-04-20", 40, 7))
    # Monday 4 May: only one site has data.
    out.append(rec("P1", "L1", "2026-05-04", 500, 10))
    return out


# A correction of S4's Monday (21 -> 45 defective): the week's verdict and ETag change.
CORRECTIONS = [rec("S4", "L1", "2026-03-09", 100, 45)]

# ------------------------------------------------------------------------ periods


def parse_period(p: str) -> tuple[dt.date, dt.date]:
    if ".." in p:
        a, b = p.split("..")
        return dt.date.fromisoformat(a), dt.date.fromisoformat(b)
    if "-W" in p:
        y, w = p.split("-W")
        first = dt.date.fromisocalendar(int(y), int(w), 1)
        return first, first + dt.timedelta(days=6)
    if "-Q" in p:
        y, q = int(p[:4]), int(p[-1])
        first = dt.date(y, 3 * q - 2, 1)
        last = (dt.date(y + 1, 1, 1) if q == 4 else dt.date(y, 3 * q + 1, 1)) - dt.timedelta(days=1)
        return first, last
    if len(p) == 4:
        return dt.date(int(p), 1, 1), dt.date(int(p), 12, 31)
    if len(p) == 7:
        y, m = int(p[:4]), int(p[5:])
        nxt = dt.date(y + 1, 1, 1) if m == 12 else dt.date(y, m + 1, 1)
        return dt.date(y, m, 1), nxt - dt.timedelta(days=1)
    d = dt.date.fromisoformat(p)
    return d, d


# ------------------------------------------------------------------------ statistics


def cochran(expected: np.ndarray) -> bool:
    e = expected.ravel()
    return bool((e >= 1).all() and (e < 5).sum() <= 0.2 * e.size)


def bergsma_v(x2: float, n: int, r: int, c: int) -> float:
    """Bias-corrected Cramer's V, Bergsma (2013)."""
    if x2 <= 0 or n <= 1:
        return 0.0
    phi2 = max(0.0, x2 / n - (r - 1) * (c - 1) / (n - 1))
    rt = r - (r - 1) ** 2 / (n - 1)
    ct = c - (c - 1) ** 2 / (n - 1)
    d = min(rt - 1, ct - 1)
    return math.sqrt(phi2 / d) if d > 0 else 0.0


def wilson(x: int, n: int) -> dict:
    lo, hi = proportion_confint(x, n, alpha=ALPHA, method="wilson")
    return {"lower": float(lo), "upper": float(hi)}


def omnibus(table: np.ndarray) -> dict:
    """The omnibus test of an r x c table without empty rows or columns."""
    x2, p, df, expected = stats.chi2_contingency(table, correction=False)
    holds = cochran(expected)
    out = {
        "pearson": float(x2),
        "df": int(df),
        "min_expected": float(expected.min()),
        "cochran_holds": holds,
        "critical_value": float(stats.chi2.isf(ALPHA, df)),
        "cramers_v": float(sp_contingency.association(table, method="cramer", correction=False)),
        "cramers_v_corrected": bergsma_v(float(x2), int(table.sum()), *table.shape),
    }
    if holds:
        out.update(method="pearson", statistic=float(x2), p_value=float(p), significant=bool(p < ALPHA))
    elif table.shape == (2, 2):
        _, pf = stats.fisher_exact(table, alternative="two-sided")
        out.update(method="fisher", statistic=None, p_value=float(pf), significant=bool(pf < ALPHA))
    else:
        # A Monte Carlo estimate: only the method is checked.
        out.update(method="monte-carlo", statistic=None, p_value=None, significant=None)
    return out


def untestable_pair(xi: int, ni: int, xj: int, nj: int) -> str | None:
    """Why a pair has no test, as dispar-stats words it (None when it has one)."""
    if xi + xj == 0:
        return "neither group has a defective unit"
    if xi == ni and xj == nj:
        return "every unit of both groups is defective"
    return None


def pairwise(names: list[str], n: list[int], x: list[int]) -> list[dict]:
    pairs = []
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            lo, hi = confint_proportions_2indep(x[i], n[i], x[j], n[j], method="newcomb", compare="diff", alpha=ALPHA)
            pair = {
                "a": names[i],
                "b": names[j],
                "difference": x[i] / n[i] - x[j] / n[j],
                "difference_ci": {"lower": float(lo), "upper": float(hi)},
            }
            reason = untestable_pair(x[i], n[i], x[j], n[j])
            if reason is not None:
                # An empty column fails Cochran's rule, so the method that would have
                # been used is Fisher's; there is no p and no adjusted p.
                pair.update(method="fisher", statistic=None, p_value=None, p_adjusted=None, significant=False, untestable=reason)
                pairs.append(pair)
                continue
            t = np.array([[x[i], n[i] - x[i]], [x[j], n[j] - x[j]]])
            x2, p, _, e = stats.chi2_contingency(t, correction=False)
            if cochran(e):
                method, stat = "pearson", float(x2)
            else:
                method, stat = "fisher", None
                _, p = stats.fisher_exact(t, alternative="two-sided")
            pair.update(method=method, statistic=stat, p_value=float(p))
            pairs.append(pair)
    # Holm over the testable pairs only: an untestable pair is no hypothesis tested.
    tested = [q for q in pairs if q["p_value"] is not None]
    if tested:
        adj = multipletests([q["p_value"] for q in tested], alpha=ALPHA, method="holm")[1]
        for q, a in zip(tested, adj):
            q["p_adjusted"] = float(a)
            q["significant"] = bool(a < ALPHA)
    # Fixed member order, whichever branch filled a pair.
    keys = ("a", "b", "method", "statistic", "p_value", "p_adjusted", "significant", "difference", "difference_ci")
    return [{k: q[k] for k in keys} | ({"untestable": q["untestable"]} if "untestable" in q else {}) for q in pairs]


def categories(frame: pd.DataFrame, used: list[str]) -> dict | None:
    cats = sorted(c for c in frame.columns if c.startswith("defect:"))
    if not cats:
        return None
    sub = frame.loc[used, cats].fillna(0).astype(np.int64)
    totals = sub.sum(axis=0)
    if totals.sum() == 0:
        return None
    all_defects = int(totals.sum())
    out = {
        "totals": sorted(
            (
                {"category": c[len("defect:"):], "defects": int(totals[c]), "share": int(totals[c]) / all_defects}
                for c in cats
                if int(totals[c]) > 0
            ),
            key=lambda t: (-t["defects"], t["category"]),
        )
    }
    keep_rows = [g for g in used if int(sub.loc[g].sum()) > 0]
    keep_cols = [c for c in cats if int(totals[c]) > 0]
    if len(keep_rows) < 2 or len(keep_cols) < 2:
        out["association"] = None
        return out
    table = sub.loc[keep_rows, keep_cols].to_numpy()
    out["association"] = omnibus(table)
    return out


def group_name(code: str, level: str) -> str | None:
    """The name a report shows for a group (lines here have no name of their own)."""
    return None if level == "line" else SITE_NAMES[code.split("/")[0]]


def report(frame: pd.DataFrame, registered: list[str], level: str) -> dict:
    """Every checked value of one report; `frame` holds the groups' sums by code."""
    frame = frame.reindex(registered).fillna(0)
    excluded = [g for g in registered if int(frame.loc[g, "inspected"]) == 0]
    used = [g for g in registered if g not in excluded]
    n = [int(frame.loc[g, "inspected"]) for g in used]
    x = [int(frame.loc[g, "defective"]) for g in used]
    total_n, total_x = sum(n), sum(x)
    out = {
        "totals": {"group_count": len(used), "inspected": total_n, "defective": total_x, "rate": total_x / total_n if total_n else 0.0},
        "excluded": [{"code": g, "name": group_name(g, level), "reason": "no units inspected"} for g in excluded],
    }
    groups = [{"code": g, "name": group_name(g, level), "inspected": n[i], "defective": x[i], "rate": x[i] / n[i], "rate_ci": wilson(x[i], n[i])} for i, g in enumerate(used)]
    testable = len(used) >= 2 and 0 < total_x < total_n
    out["testable"] = testable
    out["groups"] = groups
    if not testable:
        out["test"] = None
        out["flag_rule"] = None
        out["pairs"] = []
        out["flagged"] = []
        out["categories"] = categories(frame, used) if used else None
        return out
    table = np.array([[x[i], n[i] - x[i]] for i in range(len(used))])
    test = omnibus(table)
    out["test"] = test
    _, _, _, expected = stats.chi2_contingency(table, correction=False)
    contrib = ((table - expected) ** 2 / expected).sum(axis=1)
    adj = SmTable(table, shift_zeros=False).standardized_resids[:, 0]
    k = len(used)
    # h for these groups' sizes: the residuals' correlations depend on their shares.
    h = h_formula(ALPHA, n)
    pooled = total_x / total_n
    for i, g in enumerate(groups):
        g["expected"] = float(expected[i, 0])
        g["contribution"] = float(contrib[i])
        g["adjusted_residual"] = float(adj[i])
        g["share_of_statistic"] = float(contrib[i] / test["pearson"])
        g["flag"] = ("above" if adj[i] > 0 else "below") if abs(adj[i]) > h else None
    z = [(x[i] / n[i] - pooled) / math.sqrt(pooled * (1 - pooled) / n[i]) for i in range(k)]
    w = np.asarray(mstats.winsorize(np.array(z), limits=(0.1, 0.1)))
    out["overdispersion"] = {"phi": float(np.mean(w**2))}
    # The default (overdispersion=estimate) leaves the limit at h.
    out["flag_rule"] = {"critical_value": h, "limit": h}
    flagged = [g for g in groups if g["flag"]]
    flagged.sort(key=lambda g: (-g["share_of_statistic"], g["code"]))
    out["flagged"] = [{"code": g["code"], "name": g["name"], "flag": g["flag"]} for g in flagged]
    out["pairs"] = pairwise(used, n, x)
    out["categories"] = categories(frame, used)
    return out


# ------------------------------------------------------------------------ cases


def frame_of(recs: list[dict]) -> pd.DataFrame:
    rows = []
    for r in recs:
        row = {k: r.get(k) for k in ("site", "line", "date", "inspected", "defective")}
        row["product"] = r.get("product", "")
        for c, v in r.get("defects", {}).items():
            row[f"defect:{c}"] = v
        rows.append(row)
    f = pd.DataFrame(rows)
    f["date"] = pd.to_datetime(f["date"]).dt.date
    return f


def apply(recs: list[dict], corrections: list[dict]) -> list[dict]:
    key = lambda r: (r["site"], r["line"], r["date"], r.get("product", ""))
    current = {key(r): r for r in recs}
    for c in corrections:
        current[key(c)] = c
    return list(current.values())


def registered(level: str, site: str | None) -> list[str]:
    if level == "site":
        return [s["code"] for s in sorted(SITES, key=lambda s: s["code"]) if site in (None, s["code"])]
    return [
        f"{s['code']}/{l}"
        for s in sorted(SITES, key=lambda s: s["code"])
        for l in sorted(s["lines"])
        if site in (None, s["code"])
    ]


def case_values(recs: list[dict], period: str, level: str, site=None, product=None) -> dict:
    f = frame_of(recs)
    first, last = parse_period(period)
    f = f[(f["date"] >= first) & (f["date"] <= last)]
    if site:
        f = f[f["site"] == site]
    if product:
        f = f[f["product"] == product]
    f = f.copy()
    f["code"] = f["site"] if level == "site" else f["site"] + "/" + f["line"]
    num = [c for c in f.columns if c in ("inspected", "defective") or c.startswith("defect:")]
    sums = f.groupby("code")[num].sum()
    return {"period": period, "dates": {"first": first.isoformat(), "last": last.isoformat()}, **report(sums, registered(level, site), level)}


SOURCES = [
    f"aggregation: {V_PD} groupby sums",
    f"omnibus test: {V_SCIPY} stats.chi2_contingency(correction=False), chi2.isf(alpha, df); fisher_exact for 2 x 2 failing Cochran's rule",
    f"Cramer's V: {V_SCIPY} contingency.association(method='cramer'); corrected V: Bergsma (2013) formula",
    f"adjusted residuals: {V_SM} Table.standardized_resids",
    f"Wilson intervals: {V_SM} proportion_confint(method='wilson')",
    f"pairs: {V_SCIPY} chi2_contingency / fisher_exact per pair; Newcombe: {V_SM} confint_proportions_2indep(method='newcomb', compare='diff'); Holm: {V_SM} multipletests(method='holm') over the testable pairs",
    f"ANOM h(alpha; sizes) for the tested groups' sizes: tools/reference/anom_sizes.py h_formula ({V_SCIPY} wofz + quad, hexagon integral for k = 3, normal quantile for k = 2)",
    f"overdispersion phi: mean squared funnel z-score, {V_SCIPY} mstats.winsorize(limits=(0.1, 0.1)) (Spiegelhalter 2005)",
]


def main() -> None:
    recs = records()
    corrected = apply(recs, CORRECTIONS)
    cases = []

    def add(name, data, period, level="site", site=None, product=None, note=None):
        query = f"period={period}&level={level}"
        if site:
            query += f"&site={site}"
        if product:
            query += f"&product={product}"
        c = {"name": name, "data": data, "query": query, "level": level}
        if note:
            c["note"] = note
        c["expected"] = case_values(recs if data == "initial" else corrected, period, level, site, product)
        cases.append(c)

    add("NIST 7.4.6 five lots as five sites, ISO week", "initial", "2026-W11", note=NIST)
    add("one day of the five lots", "initial", "2026-03-11")
    add("two days of the five lots as a date range", "initial", "2026-03-10..2026-03-11")
    add("March by site, with records outside the week", "initial", "2026-03")
    add("April: the lines of P1, with categories", "initial", "2026-04", "line", "P1")
    add("April: every line of every site", "initial", "2026-04", "all-lines")
    add("April by site", "initial", "2026-04")
    add("April by site, one product", "initial", "2026-04", product="CAP-28")
    add("second quarter, every line", "initial", "2026-Q2", "all-lines")
    add("the year by site", "initial", "2026")
    add("a small 2 x 2 of P2's lines (Fisher)", "initial", "2026-04-20", "line", "P2")
    add("a day with one site only: not testable", "initial", "2026-05-04")
    add("ISO week 2026-W11 after the correction of S4", "corrected", "2026-W11", note=NIST + "; S4 corrected from 63 to 87")

    series = []
    for w in range(10, 17):
        p = f"2026-W{w:02d}"
        v = case_values(recs, p, "site")
        series.append(
            {
                "period": p,
                "dates": v["dates"],
                "inspected": v["totals"]["inspected"],
                "defective": v["totals"]["defective"],
                "group_count": v["totals"]["group_count"],
                "testable": v["testable"],
                "method": v["test"]["method"] if v["test"] else None,
                "p_value": v["test"]["p_value"] if v["test"] else None,
                "significant": v["test"]["significant"] if v["test"] else None,
                "flagged": [f["code"] for f in v["flagged"]],
            }
        )

    doc = {
        "generator": "tools/reference/report_fixtures.py",
        "versions": VERSIONS,
        "alpha": ALPHA,
        "sources": SOURCES,
        "sites": SITES,
        "records": recs,
        "corrections": CORRECTIONS,
        "cases": cases,
        "series": {"query": "from=2026-W10&to=2026-W16&level=site", "periods": series},
    }
    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps(doc, indent=1, sort_keys=False) + "\n")
    print(f"wrote {OUT.relative_to(ROOT)}: {len(cases)} cases, {len(series)} series periods")


if __name__ == "__main__":
    main()
