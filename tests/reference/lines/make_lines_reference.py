#!/usr/bin/env python3
"""Reference values for gravgrad-lines from scipy.signal, read by crates/gravgrad-lines/tests/lines.rs.

- gain: the amplitude response of forward-backward Butterworth filtering, |H(f)|² from
  scipy.signal.butter(N, Wn, output="sos") and sosfreqz, at frequencies given as fractions of Nyquist;
- filtfilt: scipy.signal.sosfiltfilt(sos, x, padtype="odd", padlen=...) of a fixed series
  (a random walk plus sinusoids from numpy's seeded generator), with two pad lengths;
- welch: scipy.signal.welch(x, fs, window="hann", nperseg, detrend="linear") of white noise plus a
  sinusoid.

Run: python3 tests/reference/lines/make_lines_reference.py   (needs numpy, scipy)
"""
import json
import os

import sys

import numpy as np
import scipy
import scipy.signal as sg

HERE = os.path.dirname(os.path.abspath(__file__))


def main():
    rng = np.random.default_rng(20240607)
    out = {"libraries": f"scipy {scipy.__version__}, numpy {np.__version__}"}

    gain = []
    for order, wn in [(4, 0.012), (4, 0.2), (3, 0.05), (2, 0.5), (6, 0.1)]:
        sos = sg.butter(order, wn, output="sos")
        f = np.array([0.0, 0.25 * wn, 0.5 * wn, 0.9 * wn, wn, 1.1 * wn, 1.5 * wn, 2.0 * wn, 0.9])
        f = f[f < 1.0]
        _, h = sg.sosfreqz(sos, worN=np.pi * f)
        gain.append({"order": order, "wn": wn, "f_nyquist": f.tolist(), "gain": (np.abs(h) ** 2).tolist()})
    out["gain"] = gain

    n = 800
    i = np.arange(n)
    x = np.cumsum(rng.normal(0.0, 1.0, n)) + 5.0 * np.sin(2 * np.pi * i / 170.0) + 2.0 * np.cos(2 * np.pi * i / 9.0)
    filtfilt = []
    for order, wn, padlen in [(4, 0.03, 300), (4, 0.03, n - 1), (5, 0.08, 60)]:
        sos = sg.butter(order, wn, output="sos")
        y = sg.sosfiltfilt(sos, x, padtype="odd", padlen=padlen)
        filtfilt.append({"order": order, "wn": wn, "padlen": padlen, "y": y.tolist()})
    out["filtfilt_input"] = x.tolist()
    out["filtfilt"] = filtfilt

    fs, nperseg, m = 20.0, 200, 1200
    t = np.arange(m) / fs
    w = rng.normal(0.0, 2.0, m) + 3.0 * np.sin(2 * np.pi * 1.37 * t) + 0.5 * t
    f, p = sg.welch(w, fs=fs, window="hann", nperseg=nperseg, detrend="linear")
    out["welch"] = {"fs": fs, "nperseg": nperseg, "x": w.tolist(), "f": f.tolist(), "psd": p.tolist()}

    target = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else os.path.join(HERE, "lines_reference.json")
    with open(target, "w") as fh:
        json.dump(out, fh)
        fh.write("\n")


if __name__ == "__main__":
    main()
