#!/usr/bin/env python3
"""Golden values for the analytic-signal (envelope, phase, frequency) test.

Builds a short, fully deterministic keyed tone (no random numbers), writes it
to fixtures/hilbert_input.wav (32-bit float) and writes scipy.signal.hilbert's
envelope, phase and instantaneous frequency at a few hundred instants to
fixtures/hilbert_golden.json. tests/scipy_golden.rs compares
cwaudit::dsp::downconvert::Downconverter against these numbers.

Run by hand (CI has no scipy) from the crate root, then commit the fixtures:

    /tmp/venv/bin/python scripts/golden_hilbert.py

Signal (all times in seconds, fs = 48 kHz, 0.5 s):
  - amplitude A = 0.5, start phase 0.3 rad;
  - key-down raised-cosine rise starting at 0.12 s and raised-cosine fall
    ending at 0.38 s, each over T = 2 ms / 0.590334 (so the 10-90 % time is
    2 ms: for 0.5 - 0.5 cos(pi x), x(0.9) - x(0.1) = (acos(-0.8) - acos(0.8))/pi
    = 0.590334);
  - frequency 1000 Hz, a linear ramp to 1020 Hz from 0.18 s to 0.23 s, held,
    and a linear ramp back to 1000 Hz from 0.28 s to 0.33 s (the edges see a
    steady 1000 Hz).
"""

import json
import os
import sys

import numpy as np
import scipy
import scipy.io.wavfile
import scipy.signal

FS = 48_000
DURATION_S = 0.5
AMP = 0.5
PHASE0_RAD = 0.3
F0_HZ = 1000.0
RAMP_HZ = 20.0
RISE_START_S = 0.12
FALL_END_S = 0.38
EDGE_10_90_S = 2e-3
RC_10_90_PER_T = (np.arccos(-0.8) - np.arccos(0.8)) / np.pi  # 0.590334
EDGE_T_S = EDGE_10_90_S / RC_10_90_PER_T
RAMP_UP = (0.18, 0.23)
RAMP_DOWN = (0.28, 0.33)
END_MARGIN_S = 0.06  # scipy's hilbert is FFT-based (circular): stay > 50 ms from the ends
SMOOTH_S = 1e-3  # centred moving average of the instantaneous frequency


def envelope_true(t):
    """Key-down envelope, 0..1."""
    e = np.zeros_like(t)
    up = (t - RISE_START_S) / EDGE_T_S
    dn = (FALL_END_S - t) / EDGE_T_S
    x = np.clip(np.minimum(up, dn), 0.0, 1.0)
    e = 0.5 - 0.5 * np.cos(np.pi * x)
    return e


def freq_true(t):
    f = np.full_like(t, F0_HZ)
    a, b = RAMP_UP
    f += RAMP_HZ * np.clip((t - a) / (b - a), 0.0, 1.0)
    a, b = RAMP_DOWN
    f -= RAMP_HZ * np.clip((t - a) / (b - a), 0.0, 1.0)
    return f


def phase_true(t):
    """Closed-form integral of 2 pi f(t) (piecewise quadratic), plus PHASE0."""

    def ramp_integral(t, a, b):
        # integral over [0, t] of clip((s - a)/(b - a), 0, 1) ds
        s = np.clip(t, a, b)
        part = (s - a) ** 2 / (2.0 * (b - a))
        return part + np.maximum(t - b, 0.0)

    g = F0_HZ * t + RAMP_HZ * (ramp_integral(t, *RAMP_UP) - ramp_integral(t, *RAMP_DOWN))
    return 2.0 * np.pi * g + PHASE0_RAD


def main():
    root = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
    fix = os.path.join(root, "fixtures")
    os.makedirs(fix, exist_ok=True)

    n = int(round(FS * DURATION_S))
    t = np.arange(n) / FS
    x32 = (AMP * envelope_true(t) * np.cos(phase_true(t))).astype(np.float32)
    scipy.io.wavfile.write(os.path.join(fix, "hilbert_input.wav"), FS, x32)

    # Reference: exactly the samples the WAV holds.
    x = x32.astype(np.float64)
    z = scipy.signal.hilbert(x)
    env = np.abs(z)
    phase = np.unwrap(np.angle(z)) - 2.0 * np.pi * F0_HZ * t
    inst_f = np.gradient(np.unwrap(np.angle(z))) * FS / (2.0 * np.pi)
    k = int(round(SMOOTH_S * FS)) | 1  # odd length, centred: 49 samples
    inst_f_s = np.convolve(inst_f, np.ones(k) / k, mode="same")

    # Instants: every 2 ms over the whole usable span, and every 0.1 ms
    # through each edge (1 ms either side of it), all on the sample grid.
    grid = set(range(int(END_MARGIN_S * FS), int((DURATION_S - END_MARGIN_S) * FS) + 1, int(2e-3 * FS)))
    for a in (RISE_START_S, FALL_END_S - EDGE_T_S):
        lo = int((a - 1e-3) * FS)
        hi = int((a + EDGE_T_S + 1e-3) * FS)
        grid.update(range(lo, hi + 1, int(1e-4 * FS) + 0))
    idx = np.array(sorted(grid))
    assert idx.min() / FS > 0.05 and (n - idx.max()) / FS > 0.05

    et = envelope_true(t[idx])
    region = np.where(et >= 1.0, "plateau", np.where(et <= 0.0, "keyup", "edge"))
    out = {
        "source": "scipy.signal.hilbert, scipy %s, numpy %s, via scripts/golden_hilbert.py"
        % (scipy.__version__, np.__version__),
        "scipy_version": scipy.__version__,
        "numpy_version": np.__version__,
        "python_version": sys.version.split()[0],
        "params": {
            "sample_rate_hz": FS,
            "duration_s": DURATION_S,
            "amplitude": AMP,
            "phase0_rad": PHASE0_RAD,
            "center_hz": F0_HZ,
            "ramp_hz": RAMP_HZ,
            "ramp_up_s": list(RAMP_UP),
            "ramp_down_s": list(RAMP_DOWN),
            "rise_start_s": RISE_START_S,
            "fall_end_s": FALL_END_S,
            "edge_raised_cosine_t_s": EDGE_T_S,
            "edge_10_90_s": EDGE_10_90_S,
            "freq_smoothing_samples": k,
            "freq_smoothing_s": k / FS,
        },
        "definitions": {
            "envelope": "abs(scipy.signal.hilbert(x))",
            "phase_rad": "np.unwrap(np.angle(z)) - 2*pi*center_hz*t",
            "inst_freq_hz": "np.gradient(unwrapped phase)*fs/(2*pi), then a centred "
            "moving average over freq_smoothing_samples samples",
        },
        "t_s": [float(v) for v in t[idx]],
        "region": [str(r) for r in region],
        "envelope": [float("%.9g" % v) for v in env[idx]],
        "phase_rad": [float("%.10g" % v) for v in phase[idx]],
        "inst_freq_hz": [float("%.9g" % v) for v in inst_f_s[idx]],
        "true_inst_freq_hz": [float("%.9g" % v) for v in freq_true(t[idx])],
    }
    with open(os.path.join(fix, "hilbert_golden.json"), "w") as f:
        json.dump(out, f, indent=0)
        f.write("\n")
    print("wrote %d instants; fixtures/hilbert_input.wav (%d samples)" % (len(idx), n))


if __name__ == "__main__":
    main()
