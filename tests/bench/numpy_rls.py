# SPDX-License-Identifier: ISC
"""Reference for `make bench`: a per-record recursive least squares loop in
numpy (Debian's python3-numpy), covariance form with forgetting factor
lambda = 0.99, the textbook update (Ljung & Soderstrom 1983; Haykin,
"Adaptive Filter Theory", RLS algorithm):

    k = P phi / (lambda + phi' P phi)
    theta += k (y - phi' theta)
    P = (P - k (P phi)') / lambda

It is the "numpy per-record loop" the targets are stated against. Prints
one "numpy p=P ns=NS n=N" line per timed run.

usage: numpy_rls.py RUNS P...
"""
import sys
import time

import numpy as np

NDATA = 4096
RUN_SEC = 0.1


def make_data(p, seed):
    rng = np.random.default_rng(seed)
    phi = rng.uniform(-10, 10, size=(NDATA, p))
    phi[:, 0] = 1.0
    theta = 0.1 * np.arange(1, p + 1)
    y = phi @ theta + 0.01 * (rng.uniform(size=NDATA) - 0.5)
    return phi, y


def run(phi, y, n, state):
    """n updates cycling through the data; state = [theta, P, index]."""
    theta, P, i = state
    lam = 0.99
    for _ in range(n):
        f = phi[i]
        Pf = P @ f
        k = Pf / (lam + f @ Pf)
        theta += k * (y[i] - f @ theta)
        P -= np.outer(k, Pf)
        P /= lam
        i = (i + 1) % NDATA
    state[2] = i


def main():
    runs = int(sys.argv[1])
    for p in (int(a) for a in sys.argv[2:]):
        phi, y = make_data(p, 42 + p)
        state = [np.zeros(p), 1e6 * np.eye(p), 0]
        n = 200
        while True:
            t0 = time.perf_counter()
            run(phi, y, n, state)
            dt = time.perf_counter() - t0
            if dt > RUN_SEC / 4:
                break
            n *= 4
        n = int(n * RUN_SEC / dt) + 1
        run(phi, y, n, state)       # warm-up at full length
        for _ in range(runs):
            t0 = time.perf_counter()
            run(phi, y, n, state)
            dt = time.perf_counter() - t0
            print("numpy p=%d ns=%.4f n=%d" % (p, dt * 1e9 / n, n),
                  flush=True)


if __name__ == "__main__":
    main()
