#!/usr/bin/env python3
"""A straightforward numpy/scipy implementation of cwaudit's main
measurements, used by scripts/perf.sh as a speed reference (and as a rough
cross-check of the numbers). It is not part of the build or the tests.

Setup (once, from the crate root):

    python3 -m venv .venv && .venv/bin/pip install numpy scipy

Run:

    .venv/bin/python scripts/reference_numpy.py FILE.wav         # prints JSON
    .venv/bin/python scripts/reference_numpy.py --core FILE.wav  # steps 1-8 only

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

The rest of what cwaudit's report gives (left out with --core, which
times steps 1-8 alone):

9. Spreads (p10, p90, min, max) of rise, fall and chirp; dah/dit ratio
   (median dah over median dit) and mark/space ratio (median dit over the
   median element space after a dit).
10. Pitch per element: mean instantaneous frequency between the 90 %
    points; drift = slope of a straight line through them (numpy.polyfit).
11. Backwave: key-up baseband more than 25 ms from any element, in 10 ms
    blocks; per block the real part of (mean of its first half) times the
    conjugate of (mean of its second half), which keeps a steady carrier
    and averages the noise away; backwave = mean over blocks, relative to
    the key-down level; found when above 3 standard errors.
12. Hum: each element's plateau (between the 90 % points) in blocks of 8
    samples; AM = block magnitude over the element's mean magnitude, FM =
    frequency from the phase step between blocks; per mains frequency
    (50, 60 Hz families up to 360 Hz) least squares on cos and sin of the
    absolute time, centred per element (numpy.linalg.lstsq); the block
    average's and phase step's responses divided out; found above 4
    standard errors; the most significant frequency is reported.
13. Spectrum of the keyed passage: scipy.signal.welch (Hann, frames of the
    next power of two above 0.17 s, 50 % overlap), key-up noise floor from
    welch over the key-up stretches (quarter-length frames, 25 ms from any
    element) subtracted; occupied bandwidth = 0.5 % of the power in
    pitch +- 2.5 kHz on each side (ITU-R SM.328); x-dB bandwidths (20 to
    60 dB below the key-down carrier line, where 10 dB clear of the floor);
    necessary bandwidth 5 / dit (Radio Regulations Appendix 1).
14. Key clicks: 40 ms Hann frames centred on each 50 % rise and fall
    instant and on key-up stretches; power more than 150 Hz from the pitch
    (to 2.5 kHz), relative to the key-down carrier, noise frames'
    power subtracted.
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
BACKWAVE_BLOCK_S = 0.010
HUM_BLOCK = 8
HUM_HZ = (50.0, 60.0, 100.0, 120.0, 150.0, 180.0, 200.0, 240.0, 250.0, 300.0, 360.0)
SPECTRUM_FRAME_S = 0.17
REGION_HZ = 2500.0
X_DB = (20, 30, 40, 50, 60)
CLICK_FRAME_S = 0.040
CLICK_MIN_HZ = 150.0


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


def spread(v):
    if not len(v):
        return None
    v = np.asarray(v, dtype=float)
    p10, p50, p90 = np.percentile(v, [10, 50, 90])
    return {"median": float(p50), "p10": float(p10), "p90": float(p90),
            "min": float(v.min()), "max": float(v.max())}


def backwave(z, keyup, fs_d, level):
    """Step 11: coherent key-up carrier relative to the key-down level, dB."""
    b = int(round(BACKWAVE_BLOCK_S * fs_d)) // 2 * 2
    dif = np.diff(np.concatenate(([0], keyup.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(dif == 1), np.flatnonzero(dif == -1)
    prods = []
    for a, e in zip(starts, ends):
        n = (e - a) // b
        if n == 0:
            continue
        blocks = z[a : a + n * b].reshape(n, b)
        h1 = blocks[:, : b // 2].mean(axis=1)
        h2 = blocks[:, b // 2 :].mean(axis=1)
        prods.append(np.real(h1 * np.conj(h2)))
    if not prods or not level:
        return None, None
    prods = np.concatenate(prods)
    if len(prods) < 4:
        return None, None
    p = prods.mean()
    floor = 3 * prods.std(ddof=1) / np.sqrt(len(prods))
    db = lambda v: float(10 * np.log10(v / level))
    return (db(p) if p > floor else None), db(floor)


def hum(z, plateaus, fs_d):
    """Step 12: AM (%) and FM (Hz) hum by least squares over the plateaus."""
    n = HUM_BLOCK
    ts_am, ys_am, ts_fm, ys_fm, groups_am, groups_fm = [], [], [], [], [], []
    for g, (a, e) in enumerate(plateaus):
        k = (e - a) // n
        if k < 4:
            continue
        blocks = z[a : a + k * n].reshape(k, n).mean(axis=1)
        t = (a + n * np.arange(k) + (n - 1) / 2) / fs_d
        mag = np.abs(blocks)
        ys_am.append(mag / mag.mean() - 1.0)
        ts_am.append(t)
        groups_am.append(np.full(k, g))
        step = np.angle(blocks[1:] * np.conj(blocks[:-1])) * fs_d / (2 * np.pi * n)
        ys_fm.append(step)
        ts_fm.append(0.5 * (t[1:] + t[:-1]))
        groups_fm.append(np.full(k - 1, g))
    if not ys_am:
        return None

    def centre(v, groups):
        sums = np.bincount(groups, weights=v)
        counts = np.bincount(groups)
        return v - (sums / np.maximum(counts, 1))[groups]

    def fit(ts, ys, groups, f):
        t, y, gr = np.concatenate(ts), np.concatenate(ys), np.concatenate(groups)
        y = centre(y, gr)
        c = centre(np.cos(2 * np.pi * f * t), gr)
        s = centre(np.sin(2 * np.pi * f * t), gr)
        a = np.column_stack([c, s])
        coef, res, rank, _ = np.linalg.lstsq(a, y, rcond=None)
        if rank < 2:
            return 0.0, np.inf
        dof = len(y) - 2 - len(np.unique(gr))
        var = float(res[0]) / max(dof, 1) if len(res) else 0.0
        cov = var * np.linalg.inv(a.T @ a)
        return float(np.hypot(*coef)), float(np.sqrt(0.5 * (cov[0, 0] + cov[1, 1])))

    best = None
    for f in HUM_HZ:
        x = f * n / fs_d
        block_resp = abs(np.sin(np.pi * x) / (n * np.sin(np.pi * f / fs_d)))
        step_resp = abs(np.sinc(x))
        am, am_se = fit(ts_am, ys_am, groups_am, f)
        fm, fm_se = fit(ts_fm, ys_fm, groups_fm, f)
        am, am_se = 100 * am / block_resp, 100 * am_se / block_resp
        fm, fm_se = fm / (block_resp * step_resp), fm_se / (block_resp * step_resp)
        score = max(am / am_se, fm / fm_se)
        if best is None or score > best[0]:
            best = (score, f, am, am_se, fm, fm_se)
    score, f, am, am_se, fm, fm_se = best
    return {
        "frequency_hz": f if score > 4 else None,
        "am_percent": am if am > 4 * am_se else None,
        "fm_hz": fm if fm > 4 * fm_se else None,
        "am_floor_percent": 4 * am_se,
        "fm_floor_hz": 4 * fm_se,
    }


def welch_mean(x, fs, nperseg, a, b):
    """Welch PSD of samples a..b of x (chunked), frame-weighted mean."""
    acc, count, freqs = None, 0, None
    step = max(CHUNK // nperseg, 1) * nperseg
    for lo in range(a, b, step):
        hi = min(b, lo + step + nperseg // 2)
        if hi - lo < nperseg:
            continue
        freqs, p = scipy.signal.welch(to_float(x[lo:hi]), fs, window="hann", nperseg=nperseg)
        w = (hi - lo - nperseg) // (nperseg // 2) + 1
        acc = p * w if acc is None else acc + p * w
        count += w
    return freqs, (acc / count if count else None)


def spectral(x, fs, f0, edges, keyup_runs, level, dit):
    """Step 13: occupied and x-dB bandwidths of the keyed passage."""
    out = {}
    nper = 1 << int(np.ceil(np.log2(SPECTRUM_FRAME_S * fs)))
    a, b = int(edges[0][0] * fs), int(edges[-1][1] * fs) + 1
    f, p = welch_mean(x, fs, nper, a, b)
    if p is None:
        return out
    enbw = 1.5 * fs / nper
    out["rbw_hz"] = enbw
    carrier = 0.5 * level / enbw  # density of a key-down sine
    rel = p / carrier
    q = nper // 4
    nacc, ncount = None, 0
    for lo, hi in keyup_runs:
        if hi - lo < q:
            continue
        fq, pq = scipy.signal.welch(to_float(x[lo:hi]), fs, window="hann", nperseg=q)
        w = (hi - lo - q) // (q // 2) + 1
        nacc = pq * w if nacc is None else nacc + pq * w
        ncount += w
    region = (f >= f0 - REGION_HZ) & (f <= f0 + REGION_HZ)
    db = lambda v: float(10 * np.log10(max(v, 1e-30)))
    floor = None
    if ncount:
        noise = np.interp(f, fq, nacc / ncount) / carrier
        rel = np.maximum(rel - noise, 0.0)
        floor = db(np.median(noise[region]))
    out["noise_floor_dbc"] = floor
    k = np.flatnonzero(region)
    r = rel[k]
    cum = np.cumsum(r)
    if cum[-1] > 0:
        lo = np.interp(0.005 * cum[-1], cum, f[k])
        hi = np.interp(0.995 * cum[-1], cum, f[k])
        out["occupied_bandwidth_hz"] = float(hi - lo)
        out["occupied_edges_hz"] = [float(lo - f0), float(hi - f0)]
    out["bandwidth_hz"] = {}
    for xdb in X_DB:
        t = 10 ** (-xdb / 10)
        above = np.flatnonzero(r >= t)
        if floor is not None and -xdb <= floor + 10 or len(above) == 0:
            out["bandwidth_hz"][str(xdb)] = None
            continue
        out["bandwidth_hz"][str(xdb)] = float(f[k[above[-1]]] - f[k[above[0]]])
    out["necessary_bandwidth_hz"] = 5.0 / dit if dit else None
    return out


def clicks(x, fs, f0, edges, keyup_runs, level):
    """Step 14: sideband power of the edge windows, dB re key-down carrier."""
    n = int(round(CLICK_FRAME_S * fs))
    w = np.hanning(n)
    f = np.fft.rfftfreq(n, 1 / fs)
    band = (np.abs(f - f0) > CLICK_MIN_HZ) & (np.abs(f - f0) <= REGION_HZ)
    carrier = level * w.sum() ** 2 / 4  # |X|^2 of a key-down sine on a bin
    enbw_bins = n * np.sum(w**2) / w.sum() ** 2

    def power(centres):
        frames = [to_float(x[c - n // 2 : c - n // 2 + n]) for c in centres
                  if c - n // 2 >= 0 and c - n // 2 + n <= len(x)]
        if not frames:
            return None
        spec = np.abs(np.fft.rfft(np.array(frames) * w, axis=1)) ** 2
        return float(spec[:, band].sum(axis=1).mean() / (enbw_bins * carrier))

    rise = power([int(round(r * fs)) for r, _ in edges])
    fall = power([int(round(e * fs)) for _, e in edges])
    noise = power([(lo + hi) // 2 for lo, hi in keyup_runs if hi - lo >= n]) or 0.0
    db = lambda v: float(10 * np.log10(v)) if v is not None and v > 0 else None
    return {
        "rise_sideband_db": db(rise - noise) if rise is not None else None,
        "fall_sideband_db": db(fall - noise) if fall is not None else None,
        "noise_sideband_db": db(noise),
    }


def rest(x, fs, z, fs_d, f0, inst, keyup, items, level, durs, dit):
    """Steps 9-14."""
    out = {}
    r50s = np.array([it[0] for it in items])
    f50s = np.array([it[1] for it in items])
    if dit:
        cut = 2.0 * dit
        d = durs[durs <= 0.5 * (durs.min() + durs.max())]
        h = durs[durs > 0.5 * (durs.min() + durs.max())]
        out["dah_dit_ratio"] = float(np.median(h) / np.median(d)) if len(h) and len(d) else None
        spaces = r50s[1:] - f50s[:-1]
        after_dit = spaces[(durs[:-1] <= 0.5 * (durs.min() + durs.max())) & (spaces < cut)]
        out["mark_space_ratio"] = float(np.median(d) / np.median(after_dit)) if len(after_dit) else None
    plateaus = [(int(np.ceil(it[2])), int(it[3])) for it in items
                if it[2] is not None and it[3] is not None and it[3] > it[2] + 2]
    pitches = np.array([f0 + inst[a:e].mean() for a, e in plateaus])
    times = np.array([0.5 * (a + e) / fs_d for a, e in plateaus])
    out["pitch_spread_hz"] = spread(pitches)
    if len(pitches) >= 3:
        slope = np.polyfit(times, pitches, 1)[0]
        out["drift_hz_per_min"] = float(slope * 60)
        out["drift_total_hz"] = float(slope * (times[-1] - times[0]))
    out["backwave_db"], out["backwave_floor_db"] = backwave(z, keyup, fs_d, level)
    out["hum"] = hum(z, plateaus, fs_d)
    # Key-up stretches at the input rate, for the spectra.
    g = GUARD_S
    runs, prev = [], 0.0
    for r, e in zip(r50s, f50s):
        if r - g > prev:
            runs.append((int(prev * fs), int((r - g) * fs)))
        prev = e + g
    if len(x) / fs > prev:
        runs.append((int(prev * fs), len(x)))
    edges = list(zip(r50s, f50s))
    out.update(spectral(x, fs, f0, edges, runs, level, dit))
    out["clicks"] = clicks(x, fs, f0, edges, runs, level)
    return out


def analyse(path, core=False):
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

    starts, durs, rises, falls, chirps, levels, items = [], [], [], [], [], [], []
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
        items.append((r50 / fs_d, f50 / fs_d, r90, f90))
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
    wpm, dit = None, None
    if len(durs) >= 2:
        cut = 0.5 * (durs.min() + durs.max())
        dits = durs[durs <= cut]
        dit = float(np.median(dits)) if len(dits) else None
        wpm = 1.2 / dit if dit else None
    level = float(np.median(levels)) if levels else None
    nbw = 2 * LOWPASS_HZ
    snr = (
        10 * np.log10(level * nbw / (noise * 2500.0))
        if level is not None and noise
        else None
    )
    med = lambda v: float(np.median(v)) if len(v) else None
    result = {
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
    if not core and len(items) >= 2 and level:
        result["rise_ms"] = spread(rises)
        result["fall_ms"] = spread(falls)
        result["chirp_hz"] = spread(chirps)
        result.update(rest(x, fs, z, fs_d, f0, inst, keyup, items, level, durs, dit))
    return result


def main():
    args = sys.argv[1:]
    core = "--core" in args
    args = [a for a in args if a != "--core"]
    if len(args) != 1:
        sys.exit("usage: reference_numpy.py [--core] FILE.wav")
    print(json.dumps(analyse(args[0], core=core), indent=1))


if __name__ == "__main__":
    main()
