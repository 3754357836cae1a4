#!/usr/bin/env python3
"""Golden values of scipy.signal.welch for tests/spectral.rs.

Reads fixtures/hilbert_input.wav (written by scripts/golden_hilbert.py) and
writes fixtures/welch_golden.json: the one-sided power spectrum ("spectrum"
scaling, periodic Hann window, 50 % overlap, no detrending) for two segment
lengths, at every 4th bin. Run from the repository root with numpy and scipy
installed:  python3 scripts/golden_welch.py
"""
import json

import numpy as np
import scipy
from scipy.io import wavfile
from scipy.signal import welch

fs, x = wavfile.read("fixtures/hilbert_input.wav")
x = x.astype(np.float64)
out = {"source": f"scipy.signal.welch, scipy {scipy.__version__}", "fs": int(fs), "cases": []}
for n in (1024, 4096):
    f, p = welch(x, fs=fs, window="hann", nperseg=n, noverlap=n // 2,
                 detrend=False, scaling="spectrum", return_onesided=True)
    bins = list(range(1, n // 2, 4))
    out["cases"].append({"nperseg": n, "bins": bins, "power": [float(p[k]) for k in bins]})
with open("fixtures/welch_golden.json", "w") as fh:
    json.dump(out, fh, indent=0)
print("wrote fixtures/welch_golden.json")
