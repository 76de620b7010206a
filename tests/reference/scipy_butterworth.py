#!/usr/bin/python3
"""SciPy reference values for fluxtrim's Butterworth band-pass.

Source: scipy.signal (Debian 12 python3-scipy 1.10.1, numpy 1.24.2). The
test tests/core/butterworth_test.cc runs this script live with
/usr/bin/python3 and parses its output; no output is checked in.

Usage: scipy_butterworth.py SPEC [SPEC ...], each SPEC one of
  design:ORDER:LOW_HZ:HIGH_HZ:RATE_HZ
      b, a  = scipy.signal.butter(ORDER, [LOW, HIGH], 'bandpass', fs=RATE)
      sos   = the same with output='sos' (scipy's zpk2sos, pairing 'nearest')
  filter:ORDER:LOW_HZ:HIGH_HZ:RATE_HZ:N:SEED
      x         test signal (below), N samples
      y_sos     scipy.signal.sosfiltfilt(sos, x - x[0])
      y_sos_raw scipy.signal.sosfiltfilt(sos, x)
      y_ba      scipy.signal.filtfilt(b, a, x - x[0])
      padlen    sosfiltfilt's default pad length

y_sos and y_sos_raw are the same filter output in exact arithmetic (the
band-pass rejects a constant exactly and filtering is linear); in doubles
y_sos_raw carries ~1e-8 nT of rounding at 100 Hz from the 52000 nT level,
y_sos ~1e-11 nT (both measured against a long-double sosfiltfilt).

Output: one line per array, "SPEC NAME v0 v1 ...", values as repr() (the
shortest text that round-trips a double exactly).
"""
import sys

import numpy as np
from scipy import signal


def emit(spec, name, values):
    print(spec, name, " ".join(repr(float(v)) for v in np.ravel(values)))


def test_signal(n, rate, seed):
    """Magnetometer-like total field (nT): survey-level offset, a slow trend,
    sinusoids below, in and above the band, white noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    return (52000.0 + 0.8 * t / 60.0                     # level + trend, nT
            + 25.0 * np.sin(2 * np.pi * 0.02 * t)        # below the band
            + 4.0 * np.sin(2 * np.pi * 0.25 * t + 0.3)   # in band
            + 1.5 * np.sin(2 * np.pi * 0.6 * t + 1.1)    # in band
            + 0.7 * np.sin(2 * np.pi * 0.3 * rate * t)   # above the band
            + 0.5 * rng.standard_normal(n))


def run(spec):
    fields = spec.split(':')
    mode = fields[0]
    order, low, high, rate = (int(fields[1]), float(fields[2]),
                              float(fields[3]), float(fields[4]))
    b, a = signal.butter(order, [low, high], btype='bandpass', fs=rate,
                         output='ba')
    sos = signal.butter(order, [low, high], btype='bandpass', fs=rate,
                        output='sos')
    if mode == 'design':
        emit(spec, 'b', b)
        emit(spec, 'a', a)
        emit(spec, 'sos', sos)
    elif mode == 'filter':
        n, seed = int(fields[5]), int(fields[6])
        x = test_signal(n, rate, seed)
        emit(spec, 'x', x)
        emit(spec, 'y_sos', signal.sosfiltfilt(sos, x - x[0]))
        emit(spec, 'y_sos_raw', signal.sosfiltfilt(sos, x))
        emit(spec, 'y_ba', signal.filtfilt(b, a, x - x[0]))
        ntaps = 2 * sos.shape[0] + 1 - min(int((sos[:, 2] == 0).sum()),
                                           int((sos[:, 5] == 0).sum()))
        emit(spec, 'padlen', [3 * ntaps])
    else:
        raise SystemExit('unknown mode in ' + spec)


if __name__ == '__main__':
    for arg in sys.argv[1:]:
        run(arg)
