#!/usr/bin/env python3
"""Peer for the fit benchmark: the core of `fluxtrim fit` as a plain
NumPy/SciPy script, for a side-by-side timing (run_fit_comparison.sh).

Usage: fit_peer.py RECORDING.csv [--order 4] [--band 0.1,0.9]

Reads the CSV (time, bx, by, bz, f), builds the 16 Tolles-Lawson columns
the way models/tolles_lawson.h does (c = B/|B|, centred least-squares
derivative of half-width round(0.2 s * rate), induced and eddy columns
times Bt = f), band-passes the field and every column with a zero-phase
Butterworth band-pass (scipy.signal.butter + sosfiltfilt), drops the first
and last k samples, and solves the least squares with numpy.linalg.lstsq.
No gaps, lag, ridge, robust loss, maneuvers or cross-validation: the peer
does less than fluxtrim. Prints the timing of each stage and the band RMS
before and after. Needs Debian's python3-numpy and python3-scipy.
"""
import argparse
import time

import numpy as np
from scipy import signal


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("recording")
    ap.add_argument("--order", type=int, default=4)
    ap.add_argument("--band", default="0.1,0.9")
    args = ap.parse_args()
    low, high = (float(v) for v in args.band.split(","))
    t0 = time.perf_counter()

    with open(args.recording) as f:
        header = None
        skip = 0
        for line in f:
            skip += 1
            if not line.startswith("#"):
                header = [h.strip().lower() for h in line.split(",")]
                break
    data = np.loadtxt(args.recording, delimiter=",", skiprows=skip,
                      comments="#", ndmin=2)
    col = {name: data[:, i] for i, name in enumerate(header)}
    t_read = time.perf_counter()

    t = col["time"]
    b = np.stack([col["bx"], col["by"], col["bz"]], axis=1)
    f = col["f"]
    rate = 1.0 / np.median(np.diff(t))
    k = max(1, int(round(0.2 * rate)))
    c = b / np.linalg.norm(b, axis=1)[:, None]
    j = np.arange(-k, k + 1)
    w = j / (np.sum(j * j) / rate)           # Savitzky-Golay slope weights
    dc = np.stack([np.convolve(c[:, i], w[::-1], mode="same") for i in range(3)],
                  axis=1)
    cols = [c[:, 0], c[:, 1], c[:, 2]]
    for a in range(3):
        for bb in range(a, 3):
            if a == 2 and bb == 2:
                continue
            cols.append(f * c[:, a] * c[:, bb])
    for a in range(3):
        for bb in range(3):
            if a == 2 and bb == 2:
                continue
            cols.append(f * c[:, a] * dc[:, bb])
    A = np.stack(cols, axis=1)[k:-k]
    y = f[k:-k]
    t_terms = time.perf_counter()

    sos = signal.butter(args.order, [low, high], btype="bandpass", fs=rate,
                        output="sos")
    Ab = signal.sosfiltfilt(sos, A, axis=0)
    yb = signal.sosfiltfilt(sos, y)
    t_filter = time.perf_counter()

    x, *_ = np.linalg.lstsq(Ab, yb, rcond=None)
    t_solve = time.perf_counter()

    after = yb - Ab @ x
    print("peer samples %d rate_hz %.3f k %d" % (len(t), rate, k))
    print("peer band_rms_before_nT %.6f band_rms_after_nT %.6f"
          % (np.sqrt(np.mean(yb ** 2)), np.sqrt(np.mean(after ** 2))))
    print("peer time_s read %.3f terms %.3f filter %.3f solve %.3f total %.3f"
          % (t_read - t0, t_terms - t_read, t_filter - t_terms,
             t_solve - t_filter, t_solve - t0))


if __name__ == "__main__":
    main()
