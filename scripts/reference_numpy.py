#!/usr/bin/env python3
"""A straightforward numpy/scipy implementation of cwaudit's main
measurements, used by scripts/perf.sh as a speed reference (and as a rough
cross-check of the numbers). It is not part of the build or the tests.

Setup (once, from the crate root):

    python3 -m venv .venv && .venv/bin/pip install numpy scipy

Run:

    .venv/bin/python scripts/reference_numpy.py FILE.wav     # prints JSON

What it does, in the plain way (no attempt at cwaudit's refinements):

1. Reads the WAV with scipy.io.wavfile (memory-mapped), first channel.
2. Spectrum: scipy.signal.welch (Hann, 1024 points, 50 % overlap) per chunk,
   averaged; pitch = peak bin between 100 Hz and 0.45 fs, refined by a
   parabola through the log power of the peak and its neighbours.
3. Analytic signal: scipy.signal.hilbert on chunks of 2^21 samples that
   overlap by 2^14 on each side (the overlaps are discarded), mixed down by
   the pitch, low-pass filtered (scipy.signal.firwin, 255 taps, 2250 Hz
   cut-off, applied with scipy.signal.oaconvolve) and decimated to about
   12 kHz.
4. Detection envelope: magnitude of the 2 ms moving average of the
   baseband. State levels: histogram of 0.05 dB bins, split at the middle
   of the 0.2-99.8 % range, the mode of each half (IEEE 181 histogram
   method).
5. Elements: 50 % threshold crossings of the detection envelope; marks and
   gaps under 4 ms are removed.
6. Rise/fall: on |baseband|, interpolated 10 % and 90 % crossings searched
   outwards from each element's 50 % crossing.
7. Chirp: instantaneous frequency = derivative of the unwrapped phase,
   smoothed by a 2 ms moving average; per element between the 50 %
   instants, deviation from the median of its last half; chirp = largest
   |deviation|.
8. Level: mean |z|^2 between the 90 % points (dBFS, full-scale sine =
   0 dBFS); noise: variance of key-up baseband more than 25 ms from edges;
   SNR in 2.5 kHz; speed: dit = median of the durations below the midpoint
   of the shortest and longest, WPM = 1.2 / dit.
"""

import json
import sys

import numpy as np
import scipy.io.wavfile
import scipy.signal

CHUNK = 1 << 21
PAD = 1 << 14
TARGET_RATE_HZ = 12_000
LOWPASS_HZ = 2250.0
TAPS = 255
DETECT_S = 0.002
SMOOTH_S = 0.002
MIN_S = 0.004
GUARD_S = 0.025


def to_float(x):
    if x.dtype == np.uint8:
        return (x.astype(np.float64) - 128.0) / 128.0
    if np.issubdtype(x.dtype, np.integer):
        return x.astype(np.float64) / float(-np.iinfo(x.dtype).min)
    return x.astype(np.float64)


def moving_average(x, n):
    k = np.ones(n) / n
    return scipy.signal.oaconvolve(x, k, mode="same")


def welch_pitch(x, fs):
    acc = None
    count = 0
    for a in range(0, len(x), CHUNK):
        seg = to_float(x[a : a + CHUNK])
        if len(seg) < 1024:
            continue
        f, p = scipy.signal.welch(seg, fs, window="hann", nperseg=1024)
        w = len(seg) // 512
        acc = p * w if acc is None else acc + p * w
        count += w
    p = acc / count
    band = (f >= 100.0) & (f <= 0.45 * fs)
    k = np.flatnonzero(band)[np.argmax(p[band])]
    a, b, c = np.log(p[k - 1 : k + 2] + 1e-30)
    delta = 0.5 * (a - c) / (a - 2 * b + c) if (a - 2 * b + c) != 0 else 0.0
    return (k + delta) * (f[1] - f[0])


def baseband(x, fs, f0):
    d = max(1, int(fs // TARGET_RATE_HZ))
    h = scipy.signal.firwin(TAPS, LOWPASS_HZ, fs=fs)
    out = []
    n = len(x)
    for a in range(0, n, CHUNK):
        lo = max(0, a - PAD)
        hi = min(n, a + CHUNK + PAD)
        seg = to_float(x[lo:hi])
        z = scipy.signal.hilbert(seg)
        t = np.arange(lo, hi) / fs
        z = z * np.exp(-2j * np.pi * f0 * t)
        z = scipy.signal.oaconvolve(z, h, mode="same")
        keep = z[a - lo : a - lo + min(CHUNK, n - a)]
        # Decimate on the global sample grid.
        first = (-a) % d
        out.append(keep[first::d].astype(np.complex64))
    return np.concatenate(out), fs / d


def state_levels(env):
    db = 20 * np.log10(np.maximum(env, 1e-10))
    edges = np.arange(-200.0, 20.0 + 0.05, 0.05)
    counts, _ = np.histogram(db, bins=edges)
    cum = np.cumsum(counts)
    qlo = np.searchsorted(cum, 0.002 * cum[-1])
    qhi = np.searchsorted(cum, 0.998 * cum[-1])
    amp = 10 ** ((edges[:-1] + 0.025) / 20)
    mid = 0.5 * (amp[qlo] + amp[qhi])
    split = int(np.searchsorted(amp, mid))
    lo_mode = qlo + int(np.argmax(counts[qlo:split])) if split > qlo else qlo
    hi_mode = split + int(np.argmax(counts[split : qhi + 1])) if qhi >= split else split
    return amp[lo_mode], amp[hi_mode]


def crossing(y, i, level, step):
    """Fractional index where y crosses `level`, searching from i by `step`."""
    n = len(y)
    j = i
    while 0 <= j + step < n:
        a, b = y[j], y[j + step]
        if (a - level) * (b - level) <= 0 and a != b:
            return j + step * (level - a) / (b - a)
        j += step
    return None


def analyse(path):
    fs, data = scipy.io.wavfile.read(path, mmap=True)
    x = data if data.ndim == 1 else data[:, 0]
    f0 = welch_pitch(x, fs)
    z, fs_d = baseband(x, fs, f0)
    w = int(round(DETECT_S * fs_d)) | 1
    det = np.abs(moving_average(z, w))
    low, high = state_levels(det)
    mid = 0.5 * (low + high)
    on = det >= mid
    dif = np.diff(on.astype(np.int8))
    ups = np.flatnonzero(dif == 1) + 1
    downs = np.flatnonzero(dif == -1) + 1
    if on[0]:
        downs = downs[1:] if len(downs) and (len(ups) == 0 or downs[0] < ups[0]) else downs
    ups = ups[: len(downs)] if len(ups) > len(downs) else ups
    downs = downs[: len(ups)]
    # Bridge short gaps, drop short marks.
    m = int(MIN_S * fs_d)
    marks = []
    for u, dn in zip(ups, downs):
        if marks and u - marks[-1][1] < m:
            marks[-1][1] = dn
        else:
            marks.append([u, dn])
    marks = [(u, dn) for u, dn in marks if dn - u >= m]

    env = np.abs(z)
    inst = np.diff(np.unwrap(np.angle(z))) * fs_d / (2 * np.pi)
    inst = moving_average(inst, int(round(SMOOTH_S * fs_d)))
    l10, l50, l90 = (low + p * (high - low) for p in (0.1, 0.5, 0.9))

    starts, durs, rises, falls, chirps, levels = [], [], [], [], [], []
    for u, dn in marks:
        r50 = crossing(env, u, l50, -1) if env[u] >= l50 else crossing(env, u, l50, 1)
        f50 = crossing(env, dn - 1, l50, 1) if env[dn - 1] >= l50 else crossing(env, dn, l50, -1)
        if r50 is None or f50 is None or f50 <= r50:
            continue
        r10 = crossing(env, int(r50), l10, -1)
        r90 = crossing(env, int(r50) + 1, l90, 1)
        f90 = crossing(env, int(f50), l90, -1)
        f10 = crossing(env, int(f50) + 1, l10, 1)
        starts.append(r50 / fs_d)
        durs.append((f50 - r50) / fs_d)
        if r10 is not None and r90 is not None:
            rises.append((r90 - r10) / fs_d * 1e3)
        if f10 is not None and f90 is not None:
            falls.append((f10 - f90) / fs_d * 1e3)
        a, b = int(np.ceil(r50)), int(f50)
        tr = inst[a:b]
        if len(tr) >= 4:
            settled = np.median(tr[len(tr) // 2 :])
            chirps.append(float(np.max(np.abs(tr - settled))))
        if r90 is not None and f90 is not None and f90 > r90 + 1:
            levels.append(float(np.mean(np.abs(z[int(np.ceil(r90)) : int(f90)]) ** 2)))

    # Noise: key-up samples away from the edges.
    g = int(GUARD_S * fs_d)
    keyup = np.ones(len(z), dtype=bool)
    for u, dn in marks:
        keyup[max(0, u - g) : dn + g] = False
    noise = float(np.var(z[keyup])) if keyup.sum() > 200 else None

    durs = np.array(durs)
    wpm = None
    if len(durs) >= 2:
        cut = 0.5 * (durs.min() + durs.max())
        dits = durs[durs <= cut]
        wpm = 1.2 / float(np.median(dits)) if len(dits) else None
    level = float(np.median(levels)) if levels else None
    nbw = 2 * LOWPASS_HZ
    snr = (
        10 * np.log10(level * nbw / (noise * 2500.0))
        if level is not None and noise
        else None
    )
    med = lambda v: float(np.median(v)) if len(v) else None
    return {
        "tool": "reference_numpy.py",
        "path": path,
        "sample_rate_hz": int(fs),
        "duration_s": len(x) / fs,
        "tone_hz": float(f0),
        "baseband_rate_hz": fs_d,
        "element_count": len(durs),
        "wpm": wpm,
        "rise_ms_median": med(rises),
        "fall_ms_median": med(falls),
        "chirp_hz_median": med(chirps),
        "level_dbfs": 10 * np.log10(level) if level else None,
        "snr_db": float(snr) if snr is not None else None,
    }


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: reference_numpy.py FILE.wav")
    print(json.dumps(analyse(sys.argv[1]), indent=1))


if __name__ == "__main__":
    main()
