#!/usr/bin/env python3
"""Reference values written inline in the unit tests of crates/dispar-stats/src.

The JSON fixtures of tests/fixtures/ come from generate.py; a few unit tests instead keep
a short table beside the code they check. This script computes those tables with mpmath
alone and prints them as Rust literals:

- faddeeva.rs `MPMATH_W`: w(z) = exp(-z^2) erfc(-iz), mp.dps = 30.
- anom.rs `MPMATH_H`: the ANOM critical value h(alpha, k), the root of
  P(max |Z_i| <= h) = 1 - alpha (Z equicorrelated normal, rho = -1/(k-1)), mp.dps = 30,
  findroot to 1e-24. k = 3 by the hexagon integral; k = 5 by the Fourier identity of
  anom.rs's module docs with g from mpmath's complex erf, so independent of the
  Weideman w under test.
- exact.rs `MPMATH_FISHER`: Fisher's exact test on 2 x 2 tables, two-sided with the
  1 + 1e-7 tie rule, as an exact sum of hypergeometric terms from mp.loggamma at
  mp.dps = 60; p and log10 p.

Usage: python3 tools/reference/unit_values.py  (needs only mpmath; the tests quote 1.3.0).
A few minutes, nearly all in the k = 5 root. The printed values are the nearest doubles;
the tables in the tests agree with them to within one unit in the last place (they were
printed to 16-17 digits).
"""

import mpmath as mp

FADDEEVA_POINTS = [
    (0.0, 0.9), (0.3, 1.2), (1.0, 1.0), (2.5, 1.5), (5.0, 2.0), (12.0, 1.1),
    (40.0, 3.0), (150.0, 0.95), (0.0, 3.5), (7.0, 0.5),
]
ANOM_CASES = [(0.05, 3), (0.01, 3), (0.05, 5)]
FISHER_TABLES = [
    (3, 1, 1, 3), (100, 900, 200, 800), (0, 500, 500, 0), (1000, 99000, 1050, 98950),
    (1000, 99000, 1300, 98700), (10, 20000, 60, 19950), (0, 3000, 400, 2600),
]


def faddeeva(re, im):
    z = mp.mpc(re, im)
    return mp.exp(-z * z) * mp.erfc(-1j * z)


def anom_p_hexagon(h):
    # k = 3: the deviations live in a plane, where the event is a regular hexagon of
    # inradius h for a standard bivariate normal.
    return 1 - (6 / mp.pi) * mp.quad(lambda t: mp.exp(-h * h / (2 * mp.cos(t) ** 2)), [0, mp.pi / 6])


def anom_p_fourier(h, k):
    # sqrt(k / (2 pi)) * int g(y)^k dy over the real line, with
    # g(y) = int_{-c}^{c} phi(u) cos(u y) du = exp(-y^2/2) Re erf((c + i y)/sqrt 2).
    # mpmath's complex erf keeps its relative accuracy where Re erf grows like
    # exp(y^2/2); g^k oscillates with period 2 pi / c and decays like y^-k, so quadosc.
    c = h * mp.sqrt(mp.mpf(k - 1) / k)

    def g(y):
        return mp.exp(-y * y / 2) * mp.re(mp.erf((c + 1j * y) / mp.sqrt(2)))

    integral = 2 * mp.quadosc(lambda y: g(y) ** k, [0, mp.inf], omega=c)
    return mp.sqrt(k / (2 * mp.pi)) * integral


def anom_h(alpha, k):
    p = anom_p_hexagon if k == 3 else (lambda h: anom_p_fourier(h, k))
    target = 1 - mp.mpf(alpha)
    return mp.findroot(lambda h: p(h) - target, mp.mpf(2.5), tol=1e-24)


def fisher(a, b, c, d):
    r1, r2, c1 = a + b, c + d, a + c
    n = r1 + r2

    def ln_choose(m, j):
        return mp.loggamma(m + 1) - mp.loggamma(j + 1) - mp.loggamma(m - j + 1)

    ln_denominator = ln_choose(n, c1)

    def prob(x):
        return mp.exp(ln_choose(r1, x) + ln_choose(r2, c1 - x) - ln_denominator)

    lo, hi = max(0, c1 - r2), min(r1, c1)
    observed = prob(a)
    limit = observed * (1 + mp.mpf("1e-7"))
    p = mp.fsum(px for px in (prob(x) for x in range(lo, hi + 1)) if px <= limit)
    return p, mp.log10(p)


def main():
    mp.mp.dps = 30
    print("// faddeeva.rs MPMATH_W: (re, im, Re w, Im w)")
    for re, im in FADDEEVA_POINTS:
        w = faddeeva(re, im)
        print(f"({re!r}, {im!r}, {float(w.real)!r}, {float(w.imag)!r}),")

    print("// anom.rs MPMATH_H: (alpha, k, h)")
    for alpha, k in ANOM_CASES:
        print(f"({alpha!r}, {k}, {float(anom_h(alpha, k))!r}),")

    mp.mp.dps = 60
    print("// exact.rs MPMATH_FISHER: ([a, b, c, d], p two-sided, log10 p)")
    for t in FISHER_TABLES:
        p, log10_p = fisher(*t)
        print(f"({list(t)}, {float(p)!r}, {float(log10_p)!r}),")


if __name__ == "__main__":
    main()
