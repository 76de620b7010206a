#!/usr/bin/env python3
"""Reference least squares for tests/core/least_squares_test.cc (NumPy).

Usage: numpy_lstsq.py INPUT

INPUT (text): a first line "n p lambda", then n lines of p + 1 numbers: the
row of A followed by y. Solves

    minimise ||A x - y||^2 + n lambda ||x||^2

with numpy.linalg.lstsq on the stacked system [A; sqrt(n lambda) I],
[y; 0] (lambda = 0: plain lstsq), and prints with 17 significant digits:
  line 1:       x (p values)
  lines 2..p+1: (A^T A + n lambda I)^{-1}, row by row
  last line:    the generalised cross-validation score (Golub, Heath &
                Wahba 1979, eq. 1.4) (1/n) ||(I - H) y||^2 / (1 - tr H / n)^2
                with the explicit hat matrix H = A (A^T A + n lambda I)^{-1} A^T.
Run by the test with /usr/bin/python3 (Debian's python3-numpy).
"""
import sys

import numpy as np


def main():
    with open(sys.argv[1]) as f:
        n, p, lam = f.readline().split()
        n, p, lam = int(n), int(p), float(lam)
        data = np.loadtxt(f, ndmin=2)
    a = data[:, :p]
    y = data[:, p]
    if lam > 0:
        a_s = np.vstack([a, np.sqrt(n * lam) * np.eye(p)])
        y_s = np.concatenate([y, np.zeros(p)])
    else:
        a_s, y_s = a, y
    x, *_ = np.linalg.lstsq(a_s, y_s, rcond=None)
    inv = np.linalg.inv(a.T @ a + n * lam * np.eye(p))
    h = a @ inv @ a.T
    r = y - h @ y
    gcv = (r @ r / n) / (1.0 - np.trace(h) / n) ** 2
    fmt = lambda v: " ".join("%.17g" % t for t in v)
    print(fmt(x))
    for row in inv:
        print(fmt(row))
    print("%.17g" % gcv)


if __name__ == "__main__":
    main()
