#!/usr/bin/env python3
"""Simulated ANOM critical values for unequal group sizes.

Writes crates/dispar-stats/tests/fixtures/anom_sizes.json. For each size profile
(n_1 .. n_k) with shares w_i = n_i / N it draws the adjusted residuals of a k x 2 rate
table under the null as their joint normal limit, directly from the definition and not
from the factorisation the Rust code integrates:

    e_i ~ N(0, 1 / w_i) independent,  m = sum_j w_j e_j,
    Z_i = (e_i - m) sqrt(w_i / (1 - w_i)),

which has unit variances and the correlations -sqrt(w_i w_j / ((1 - w_i)(1 - w_j)))
of the adjusted residuals. The script checks the sample correlations against that
formula. h(alpha) is the empirical (1 - alpha) quantile of max_i |Z_i| over `draws`
draws; its standard error is sqrt(alpha (1 - alpha) / draws) / f(h), with f the density
of max |Z_i| at h estimated from the same sample (counts in h +- 0.02). The exceedance
fraction at the issue's quoted values, and at `h_formula` below, is recorded too.

Beside the simulation, `h_formula` solves the integral the Rust code evaluates, by an
independent route: scipy's Faddeeva function (`special.wofz`) and adaptive QUADPACK
quadrature for k >= 4, the hexagon integral for k = 3, and brentq for the root. Other
reference scripts may import it (`from anom_sizes import h_formula`).

Deterministic: one numpy Generator seeded with SEED, draws in fixed chunks. About a
minute. Run from the repository root with the pinned requirements:

    /tmp/venv-ref/bin/python tools/reference/anom_sizes.py
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import scipy
from scipy import integrate, optimize, special

SEED = 20260609
CHUNK = 1_000_000
ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "crates" / "dispar-stats" / "tests" / "fixtures" / "anom_sizes.json"

# (name, sizes, alphas, draws, quoted): `quoted` maps alpha to a value stated in issue 9
# (a 16-million-draw simulation there).
PROFILES = [
    ("issue 9, first table", [8_976, 1_518, 22_595], [0.01, 0.05], 16_000_000, {0.01: 2.879}),
    ("issue 9, second table", [3_726, 4_270, 16_602], [0.10, 0.05], 16_000_000, {0.10: 2.041}),
    ("equal sizes, k = 4", [1_000, 1_000, 1_000, 1_000], [0.05], 8_000_000, {}),
    ("one large of five", [100, 200, 300, 400, 5_000], [0.05, 0.01], 8_000_000, {}),
    ("one dominant of six", [50, 60, 70, 80, 90, 20_000], [0.05], 8_000_000, {}),
    ("two small, one huge", [10, 10, 10_000], [0.05], 8_000_000, {}),
    ("geometric, k = 10", [round(100 * 1.6**i) for i in range(10)], [0.05, 0.01], 8_000_000, {}),
]


def _g(y, c):
    """G(y; c) = int_{-c}^{c} phi(u) cos(u y) du, vectorised over y and c."""
    z = (y + 1j * c) / np.sqrt(2.0)
    return np.exp(-y * y / 2) - np.real(np.exp(-c * c / 2 + 1j * c * y) * special.wofz(z))


def _q_fourier(h: float, w: np.ndarray) -> float:
    s = np.sqrt(w)
    c = h * np.sqrt(1 - w)
    f = lambda t: float(np.prod(_g(t * s, c)))  # noqa: E731
    total = integrate.quad(f, 0, 60, limit=500, epsabs=1e-14, epsrel=1e-13)[0]
    # The tail decays like t^-k with oscillation: integrate it piecewise until a piece
    # is negligible.
    lo = 60.0
    while lo < 1e5:
        piece = integrate.quad(f, lo, 2 * lo, limit=2000, epsabs=1e-15)[0]
        total += piece
        if abs(piece) < 1e-14:
            break
        lo *= 2
    return 1 - 2 * total / np.sqrt(2 * np.pi)


def _q_hexagon(h: float, w: np.ndarray) -> float:
    total = 0.0
    for i, j in [(0, 1), (0, 2), (1, 2)]:
        gap = np.arccos(np.sqrt(w[i] * w[j] / ((1 - w[i]) * (1 - w[j]))))
        total += integrate.quad(
            lambda t: np.exp(-h * h / (2 * np.cos(t) ** 2)), 0, gap / 2, epsabs=1e-15, epsrel=1e-13
        )[0]
    return 2 / np.pi * total


def h_formula(alpha: float, sizes: list[int]) -> float:
    """ANOM h for these group sizes from the factorised integral (see the module docs)."""
    w = np.asarray(sizes, dtype=float)
    w /= w.sum()
    if len(w) == 2:
        return float(-special.ndtri(alpha / 2))
    q = _q_hexagon if len(w) == 3 else _q_fourier
    return float(optimize.brentq(lambda h: q(h, w) - alpha, 1.0, 8.0, xtol=1e-13))


def random_profile(rng: np.random.Generator, k: int) -> list[int]:
    return [int(x) for x in rng.integers(200, 40_000, size=k)]


def simulate(rng: np.random.Generator, sizes: list[int], draws: int):
    w = np.asarray(sizes, dtype=float)
    w /= w.sum()
    k = len(w)
    scale = np.sqrt(w / (1.0 - w))
    maxima = np.empty(draws)
    # Sample covariance of Z from the first chunk, to check the construction.
    first = None
    done = 0
    while done < draws:
        m = min(CHUNK, draws - done)
        e = rng.standard_normal((m, k)) / np.sqrt(w)
        z = (e - (e @ w)[:, None]) * scale
        if first is None:
            first = np.corrcoef(z, rowvar=False)
        maxima[done : done + m] = np.max(np.abs(z), axis=1)
        done += m
    want = -np.sqrt(np.outer(w, w) / np.outer(1 - w, 1 - w))
    np.fill_diagonal(want, 1.0)
    worst = float(np.max(np.abs(first - want)))
    assert worst < 5e-3, f"{sizes}: sample correlation off by {worst}"
    return maxima


def main() -> None:
    rng = np.random.default_rng(SEED)
    profiles = list(PROFILES)
    profiles.append(("random, k = 8", random_profile(rng, 8), [0.05], 8_000_000, {}))
    profiles.append(("random, k = 20", random_profile(rng, 20), [0.05], 4_000_000, {}))
    cases = []
    for name, sizes, alphas, draws, quoted in profiles:
        maxima = simulate(rng, sizes, draws)
        for alpha in alphas:
            h = float(np.quantile(maxima, 1.0 - alpha))
            delta = 0.02
            density = float(np.mean(np.abs(maxima - h) <= delta) / (2 * delta))
            se_h = float(np.sqrt(alpha * (1 - alpha) / draws) / density)
            case = {
                "name": f"{name}, alpha {alpha}",
                "sizes": sizes,
                "alpha": alpha,
                "draws": draws,
                "h": h,
                "se_h": se_h,
                "source": f"numpy {np.__version__} simulation of the adjusted residuals' "
                f"joint normal, seed {SEED}",
            }
            case["h_formula"] = h_formula(alpha, sizes)
            # The simulation's verdict on the formula: the fraction of draws beyond it,
            # a binomial proportion with a known standard error.
            exceed = float(np.mean(maxima > case["h_formula"]))
            case["exceedance_at_formula"] = exceed
            case["se_exceedance"] = float(np.sqrt(alpha * (1 - alpha) / draws))
            case["h_formula_source"] = (
                f"scipy {scipy.__version__} wofz + quad of the factorised integral"
                if len(sizes) > 3
                else f"scipy {scipy.__version__} quad of the k = 3 hexagon integral"
            )
            if alpha in quoted:
                q = quoted[alpha]
                case["quoted_h"] = q
                case["exceedance_at_quoted"] = float(np.mean(maxima > q))
            cases.append(case)
            print(
                f"{case['name']}: simulated {h:.5f} +- {se_h:.5f}, formula {case['h_formula']:.10f}",
                file=sys.stderr,
            )
    out = {
        "versions": {
            "python": sys.version.split()[0],
            "numpy": np.__version__,
            "scipy": scipy.__version__,
        },
        "cases": cases,
    }
    OUT.write_text(json.dumps(out, indent=1) + "\n")


if __name__ == "__main__":
    main()
