#!/usr/bin/python3
"""Independent scalar fluxgate calibration with SciPy, for
tests/core/calibrate_test.cc.

Fits the magnitude-only model of Merayo et al. 2000 (form recalled from
memory; the same convention as models/fluxgate_sensor.h):

    E = S P B + o,   |B| = |P^-1 S^-1 (E - o)| = F,

with S = diag(s), P lower triangular with rows [1, 0, 0],
[sin u1, cos u1, 0], [sin u2, sin u3 cos u2, cos u2 cos u3], by
scipy.optimize.least_squares (Levenberg-Marquardt, MINPACK) from unit gains,
zero offsets and angles, written without any fluxtrim code. Standard errors:
sqrt(diag((J^T J)^-1) * RSS / (n - 9)).

Usage: scipy_calibration.py RECORDING.csv   (columns bx, by, bz, f)
Prints one line per parameter: name value std_error (angles in degrees).
"""
import sys

import numpy as np
from scipy.optimize import least_squares


def residuals(p, e, f):
    s, o, u = p[0:3], p[3:6], p[6:9]
    P = np.array([[1.0, 0.0, 0.0],
                  [np.sin(u[0]), np.cos(u[0]), 0.0],
                  [np.sin(u[1]), np.sin(u[2]) * np.cos(u[1]),
                   np.cos(u[1]) * np.cos(u[2])]])
    q = (e - o) / s                       # S^-1 (E - o), one row per sample
    b = np.linalg.solve(P, q.T).T         # P^-1 q
    return np.linalg.norm(b, axis=1) - f


def main():
    data = np.genfromtxt(sys.argv[1], delimiter=",", names=True)
    e = np.column_stack([data["bx"], data["by"], data["bz"]])
    f = data["f"]
    p0 = np.array([1, 1, 1, 0, 0, 0, 0, 0, 0], dtype=float)
    fit = least_squares(residuals, p0, args=(e, f), method="lm",
                        xtol=1e-15, ftol=1e-15, gtol=1e-15)
    j = fit.jac
    dof = len(f) - 9
    cov = np.linalg.inv(j.T @ j) * (fit.fun @ fit.fun) / dof
    se = np.sqrt(np.diag(cov))
    names = ["gain_x", "gain_y", "gain_z", "offset_x", "offset_y",
             "offset_z", "u1", "u2", "u3"]
    for i, name in enumerate(names):
        scale = 180.0 / np.pi if i >= 6 else 1.0
        print(f"{name} {fit.x[i] * scale:.17g} {se[i] * scale:.17g}")
    print(f"rms {np.sqrt(np.mean(fit.fun ** 2)):.17g} 0")


if __name__ == "__main__":
    main()
