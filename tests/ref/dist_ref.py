#!/usr/bin/python3
# SPDX-License-Identifier: ISC
# Prints the reference tables embedded in tests/check_dist.c. Needs Debian's
# python3-scipy (1.10) and python3-mpmath (1.2); run with /usr/bin/python3.
# Each row carries two independent references: mpmath at 50 significant
# digits (arbitrary precision) and scipy.stats (double precision), with the
# exact scipy call as the row comment. The CUSUM rows use an independent
# discretisation (Brook & Evans 1972 Markov chain, numpy/scipy) with
# Richardson extrapolation.
import mpmath as mp
import numpy as np
from scipy import stats

mp.mp.dps = 50


def g(v):
    return "%.17g" % float(v)


def a(v):
    return repr(float(v)) if v != int(v) or abs(v) >= 1e6 else repr(int(v))


def t_cdf(t, nu):
    t = mp.mpf(t)
    nu = mp.mpf(nu)
    x = nu / (nu + t * t)
    q = mp.betainc(nu / 2, mp.mpf(1) / 2, 0, x, regularized=True) / 2
    return q if t < 0 else 1 - q


def t_ppf(p, nu):
    p = mp.mpf(p)
    start = mp.mpf(float(stats.t.ppf(float(p), nu)))
    if p < 0.5:
        return mp.findroot(lambda t: mp.log(t_cdf(t, nu)) - mp.log(p), start)
    return mp.findroot(lambda t: mp.log(1 - t_cdf(t, nu)) - mp.log(1 - p),
                       start)


def chi2_cdf(x, k):
    return mp.gammainc(mp.mpf(k) / 2, 0, mp.mpf(x) / 2, regularized=True)


def chi2_ppf(p, k):
    start = mp.mpf(float(stats.chi2.ppf(p, k)))
    sf = 1 - mp.mpf(p)
    return mp.findroot(lambda x: mp.gammainc(mp.mpf(k) / 2, mp.mpf(x) / 2,
                       mp.inf, regularized=True) - sf, start)


def norm_ppf(p):
    if p == 0.5:
        return mp.mpf(0)
    start = mp.mpf(float(stats.norm.ppf(p)))
    if p < 0.5:
        return mp.findroot(lambda x: mp.log(mp.ncdf(x)) - mp.log(p), start)
    return mp.findroot(lambda x: mp.log(mp.ncdf(-x)) - mp.log(1 - mp.mpf(p)),
                       start)


print("/* norm cdf: {x, mpmath, scipy} */")
for x in [-37.5, -30, -20, -10, -5, -1, 0.3, 2, 8]:
    print("\t{ %s, %s, %s },\t/* norm.cdf(%r) */" %
          (a(x), g(mp.ncdf(x)), g(stats.norm.cdf(x)), x))
print("/* norm ppf: {p, mpmath, scipy} */")
for p in [1e-300, 1e-100, 1e-20, 1e-10, 0.001, 0.025, 0.3, 0.5000001,
          0.975, 0.999999]:
    print("\t{ %s, %s, %s },\t/* norm.ppf(%r) */" %
          (a(p), g(norm_ppf(p)), g(stats.norm.ppf(p)), p))
print("/* t cdf: {t, nu, mpmath, scipy} */")
for nu in [1, 2, 3.5, 10, 30, 1000, 1e7]:
    for t in [-25, -3, -0.5, 1e-6, 2, 10]:
        print("\t{ %s, %s, %s, %s },\t/* t.cdf(%r, %r) */" %
              (a(t), a(nu), g(t_cdf(t, nu)), g(stats.t.cdf(t, nu)), t, nu))
print("/* t ppf: {p, nu, mpmath, scipy} */")
for nu in [1, 2, 3.5, 10, 30, 1000, 1e7]:
    for p in [0.5000001, 0.51, 0.975, 0.995, 1e-10]:
        print("\t{ %s, %s, %s, %s },\t/* t.ppf(%r, %r) */" %
              (a(p), a(nu), g(t_ppf(p, nu)), g(stats.t.ppf(p, nu)), p, nu))
print("/* chi2 cdf: {x, k, mpmath, scipy} */")
for (x, k) in [(1e-3, 1), (0.5, 1), (3.84, 1), (1.0, 2), (10, 4), (5, 8),
               (50, 32), (40, 64), (120, 100.5)]:
    print("\t{ %s, %s, %s, %s },\t/* chi2.cdf(%r, %r) */" %
          (a(x), a(k), g(chi2_cdf(x, k)), g(stats.chi2.cdf(x, k)), x, k))
print("/* chi2 ppf: {p, k, mpmath, scipy} */")
for k in [1, 2, 4, 8, 16, 32, 64, 100.5]:
    for p in [0.5, 0.95, 0.999]:
        print("\t{ %s, %s, %s, %s },\t/* chi2.ppf(%r, %r) */" %
              (a(p), a(k), g(chi2_ppf(p, k)), g(stats.chi2.ppf(p, k)), p, k))


def be1(k, h, mu, m):
    # Brook & Evans (1972): m-state Markov chain on [0, h], width w
    w = 2 * h / (2 * m - 1)
    i = np.arange(m)
    D = (i[None, :] - i[:, None]) * w
    P = stats.norm.cdf(D + w / 2 + k - mu) - stats.norm.cdf(D - w / 2 + k - mu)
    P[:, 0] = stats.norm.cdf(-i * w + w / 2 + k - mu)
    return np.linalg.solve(np.eye(m) - P, np.ones(m))[0]


def be2(k, h, d, m):
    a = be1(k, h, d, m)
    b = be1(k, h, -d, m) if d else a
    return 1 / (1 / a + 1 / b)


print("/* CUSUM ARL, Brook-Evans m = 400/800/1600, two Richardson steps:"
      " {k, h, delta, arl} */")
for (h, d) in [(4, 0), (5, 1.0), (12.657, 0)]:
    v = [be2(0.5, h, d, m) for m in (400, 800, 1600)]
    r1 = [(4 * v[i + 1] - v[i]) / 3 for i in range(2)]
    r2 = (16 * r1[1] - r1[0]) / 15
    print("\t{ 0.5, %r, %r, %.10g }," % (h, d, r2))


def gl_mp(n):
    # Gauss-Legendre nodes and weights in mpmath arithmetic (Newton on P_n)
    xs, ws = [], []
    for i in range(n):
        x = mp.cos(mp.pi * (i + mp.mpf(0.75)) / (n + mp.mpf(0.5)))
        for _ in range(100):
            p0, p1 = mp.mpf(1), x
            for j in range(2, n + 1):
                p0, p1 = p1, ((2 * j - 1) * x * p1 - (j - 1) * p0) / j
            dp = n * (x * p1 - p0) / (x * x - 1)
            dx = p1 / dp
            x -= dx
            if abs(dx) < mp.mpf(10) ** -28:
                break
        p0, p1 = mp.mpf(1), x
        for j in range(2, n + 1):
            p0, p1 = p1, ((2 * j - 1) * x * p1 - (j - 1) * p0) / j
        dp = n * (x * p1 - p0) / (x * x - 1)
        xs.append(x)
        ws.append(2 / ((1 - x * x) * dp * dp))
    return xs, ws


def nystrom_mp(k, h, mu, n):
    # the ARL integral equation, Nystrom with n nodes, in 30-digit arithmetic
    k, h, mu = mp.mpf(k), mp.mpf(h), mp.mpf(mu)
    xs, ws = gl_mp(n)
    s = [mp.mpf(0)] + [h / 2 * (1 + x) for x in xs]
    w = [h / 2 * v for v in ws]
    m = n + 1
    A = mp.matrix(m, m)
    for i in range(m):
        A[i, 0] = (1 if i == 0 else 0) - mp.ncdf(k - s[i] - mu)
        for j in range(1, m):
            A[i, j] = ((1 if i == j else 0) -
                       w[j - 1] * mp.npdf(s[j] + k - s[i] - mu))
    return mp.lu_solve(A, mp.matrix([1] * m))[0]


mp.mp.dps = 30
print("/* CUSUM ARL, Nystrom in mpmath 30-digit arithmetic: {k, h, delta, arl}"
      " */")
for (k, h, d, n) in [(0.5, 4, 0, 40), (0.5, 8, 0.5, 50),
                     (0.5, 12.657, 0, 60), (0.5, 19.565, 0, 80)]:
    up = nystrom_mp(k, h, d, n)
    dn = nystrom_mp(k, h, -d, n) if d else up
    print("\t{ %r, %r, %r, %s }," % (k, h, d, mp.nstr(1 / (1 / up + 1 / dn),
                                                       17)))
