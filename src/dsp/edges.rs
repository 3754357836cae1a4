//! Rise and fall of one element, IEEE 181 style: reference levels at 10, 50
//! and 90 % between the state levels, crossing instants by linear
//! interpolation between samples.
//!
//! Slow edges are measured on an envelope smoothed by a Gaussian whose own
//! 10-90 % time (2.563 sigma) is a fifth of the coarse edge time, which cuts
//! the noise bandwidth without shaping the edge much; the smoothing's share is
//! then removed in quadrature (exact for Gaussian cascades). Noise power is
//! subtracted from the envelope's power so that noise does not lift the 10 %
//! point.

use std::borrow::Cow;
use std::cell::{Cell, RefCell};

use rustfft::num_complex::Complex32;

use super::levels::StateLevels;

/// 10-90 % time of a Gaussian impulse response, in units of its sigma.
pub const GAUSS_10_90_PER_SIGMA: f64 = 2.563;

/// Normalised Gaussian kernel (sum 1), truncated at +-4 sigma.
pub fn gaussian_kernel(sigma: f64) -> Vec<f64> {
    if sigma < 0.3 {
        return vec![1.0];
    }
    let h = (4.0 * sigma).ceil() as i64;
    let mut k: Vec<f64> = (-h..=h)
        .map(|i| (-0.5 * (i as f64 / sigma).powi(2)).exp())
        .collect();
    let s: f64 = k.iter().sum();
    k.iter_mut().for_each(|v| *v /= s);
    k
}

/// Envelope of `z` smoothed by `kernel` (coherently, before the magnitude),
/// with `noise_power` (per sample, unsmoothed) removed in the power domain.
pub fn envelope(z: &[Complex32], kernel: &[f64], noise_power: f64) -> Vec<f64> {
    let e = LazyEnvelope::new(z, kernel, noise_power);
    (0..z.len()).map(|i| e.at(i)).collect()
}

/// Read access to an envelope: a plain slice, or one computed on demand.
pub trait Env {
    fn len(&self) -> usize;
    fn at(&self, i: usize) -> f64;
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

impl Env for [f64] {
    fn len(&self) -> usize {
        <[f64]>::len(self)
    }
    fn at(&self, i: usize) -> f64 {
        self[i]
    }
}

impl Env for Vec<f64> {
    fn len(&self) -> usize {
        Vec::len(self)
    }
    fn at(&self, i: usize) -> f64 {
        self[i]
    }
}

/// The envelope of `envelope`, computed only over the stretch an edge search
/// reads and remembered; each value is the same as `envelope` gives. The
/// searches walk outwards from the comparator's switching, so the computed
/// samples are kept as one stretch `lo..hi`: a read inside it costs one range
/// check, and a read outside grows it to the read's block of `ENV_BLOCK`
/// samples, so that the kernel sums vectorize.
pub struct LazyEnvelope<'a> {
    z: &'a [Complex32],
    planes: Cow<'a, RefCell<Planes>>,
    kernel: &'a [f64],
    /// Weight sum of the whole kernel, added in the same order as `compute`.
    ws_full: f64,
    /// Noise power after smoothing.
    pn: f64,
    /// Envelope values; those of `lo..hi` are computed, the rest unset.
    cache: Cow<'a, [Cell<f64>]>,
    lo: Cell<usize>,
    hi: Cell<usize>,
}

/// Samples per block of a `LazyEnvelope` (the computed stretch's ends are
/// multiples of it, or the samples' end).
const ENV_BLOCK: usize = 8;

/// The real and imaginary parts of samples in double precision, the form
/// the envelope's sums read, converted only where an envelope reaches (one
/// stretch `lo..hi`, grown `PLANE_CHUNK` samples at a time), and shared by
/// the envelopes of the same samples.
#[derive(Clone, Debug, Default)]
pub struct Planes {
    re: Vec<f64>,
    im: Vec<f64>,
    lo: usize,
    hi: usize,
}

const PLANE_CHUNK: usize = 32;

impl Planes {
    /// Forgets the converted samples (new samples, `n` of them).
    pub fn reset(&mut self, n: usize) {
        if self.re.len() < n {
            self.re.resize(n, 0.0);
            self.im.resize(n, 0.0);
        }
        (self.lo, self.hi) = (0, 0);
    }

    /// Converts `z[a..b]` (a < b <= z.len()), growing the converted stretch.
    fn ensure(&mut self, z: &[Complex32], a: usize, b: usize) {
        if self.lo < self.hi && a >= self.lo && b <= self.hi {
            return;
        }
        let a = a / PLANE_CHUNK * PLANE_CHUNK;
        let b = b
            .div_ceil(PLANE_CHUNK)
            .saturating_mul(PLANE_CHUNK)
            .min(z.len());
        let mut convert = |from: usize, to: usize| {
            for ((r, i), v) in self.re[from..to]
                .iter_mut()
                .zip(&mut self.im[from..to])
                .zip(&z[from..to])
            {
                (*r, *i) = (v.re as f64, v.im as f64);
            }
        };
        if self.lo == self.hi {
            convert(a, b);
            (self.lo, self.hi) = (a, b);
        } else {
            if a < self.lo {
                convert(a, self.lo);
                self.lo = a;
            }
            if b > self.hi {
                convert(self.hi, b);
                self.hi = b;
            }
        }
    }
}

impl<'a> LazyEnvelope<'a> {
    pub fn new(z: &'a [Complex32], kernel: &'a [f64], noise_power: f64) -> LazyEnvelope<'a> {
        let mut planes = Planes::default();
        planes.reset(z.len());
        let cache = vec![Cell::new(0.0); z.len()];
        Self::build(
            z,
            Cow::Owned(RefCell::new(planes)),
            kernel,
            noise_power,
            Cow::Owned(cache),
        )
    }

    /// The envelope of `z` whose parts `planes` holds (reset for `z`, and
    /// shared between envelopes of the same samples), its values kept in
    /// `cache` (at least as long; what it holds is overwritten).
    pub fn from_planes(
        z: &'a [Complex32],
        planes: &'a RefCell<Planes>,
        kernel: &'a [f64],
        noise_power: f64,
        cache: &'a mut [f64],
    ) -> LazyEnvelope<'a> {
        let cache = Cell::from_mut(&mut cache[..z.len()]).as_slice_of_cells();
        Self::build(
            z,
            Cow::Borrowed(planes),
            kernel,
            noise_power,
            Cow::Borrowed(cache),
        )
    }

    fn build(
        z: &'a [Complex32],
        planes: Cow<'a, RefCell<Planes>>,
        kernel: &'a [f64],
        noise_power: f64,
        cache: Cow<'a, [Cell<f64>]>,
    ) -> LazyEnvelope<'a> {
        assert_eq!(z.len(), cache.len());
        assert!(planes.borrow().re.len() >= z.len());
        let g: f64 = kernel.iter().map(|w| w * w).sum();
        LazyEnvelope {
            z,
            planes,
            kernel,
            ws_full: kernel.iter().fold(0.0, |s, w| s + w),
            pn: noise_power * g,
            cache,
            lo: Cell::new(0),
            hi: Cell::new(0),
        }
    }

    /// The envelope from a smoothed sample `(re, im)` and its weight sum.
    #[inline(always)]
    fn finish(pn: f64, re: f64, im: f64, ws: f64) -> f64 {
        let (r, i) = (re / ws, im / ws);
        let p = (r * r + i * i) - pn;
        p.max(0.0).sqrt()
    }

    /// One sample on its own; near the ends of the samples the kernel is cut
    /// and renormalised.
    fn compute(&self, re: &[f64], im: &[f64], i: usize) -> f64 {
        let kernel = self.kernel;
        let h = kernel.len() / 2;
        let n = self.z.len();
        let (mut ar, mut ai) = (0.0f64, 0.0f64);
        if i >= h && i + h < n {
            // Whole kernel inside: no index checks in the loop.
            for ((w, r), m) in kernel
                .iter()
                .zip(&re[i - h..=i + h])
                .zip(&im[i - h..=i + h])
            {
                ar += r * w;
                ai += m * w;
            }
            Self::finish(self.pn, ar, ai, self.ws_full)
        } else {
            let mut ws = 0.0;
            let a = i.saturating_sub(h);
            let b = (i + h + 1).min(n);
            for j in a..b {
                let w = kernel[j + h - i];
                ar += re[j] * w;
                ai += im[j] * w;
                ws += w;
            }
            Self::finish(self.pn, ar, ai, ws)
        }
    }

    /// Computes samples `a..b` into the cache: four lanes wide where the CPU
    /// has AVX (the same additions in the same order, so the same values).
    fn fill(&self, a: usize, b: usize) {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU has AVX.
            unsafe { self.fill_avx(a, b) };
            return;
        }
        self.fill_any(a, b);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx")]
    fn fill_avx(&self, a: usize, b: usize) {
        self.fill_any(a, b);
    }

    #[inline(always)]
    fn fill_any(&self, a: usize, b: usize) {
        let kernel = self.kernel;
        let h = kernel.len() / 2;
        let n = self.z.len();
        self.planes
            .borrow_mut()
            .ensure(self.z, a.saturating_sub(h), (b + h).min(n));
        let planes = self.planes.borrow();
        let (re, im) = (&planes.re[..n], &planes.im[..n]);
        let (pn, ws) = (self.pn, self.ws_full);
        let mut i0 = a;
        while i0 < b {
            if i0 >= h && i0 + ENV_BLOCK <= b && i0 + ENV_BLOCK + h <= n {
                // A whole block with the whole kernel inside: taps in kernel
                // order for every sample, as `compute` adds them, both parts
                // in one pass.
                let sr = &re[i0 - h..i0 + ENV_BLOCK + h];
                let si = &im[i0 - h..i0 + ENV_BLOCK + h];
                let mut ar = [0.0f64; ENV_BLOCK];
                let mut ai = [0.0f64; ENV_BLOCK];
                for (j, &w) in kernel.iter().enumerate() {
                    let (xr, xi) = (&sr[j..j + ENV_BLOCK], &si[j..j + ENV_BLOCK]);
                    for k in 0..ENV_BLOCK {
                        ar[k] += xr[k] * w;
                        ai[k] += xi[k] * w;
                    }
                }
                let out = &self.cache[i0..i0 + ENV_BLOCK];
                for k in 0..ENV_BLOCK {
                    out[k].set(Self::finish(pn, ar[k], ai[k], ws));
                }
                i0 += ENV_BLOCK;
            } else {
                self.cache[i0].set(self.compute(re, im, i0));
                i0 += 1;
            }
        }
    }

    /// Grows the computed stretch to hold sample `i`.
    #[cold]
    #[inline(never)]
    fn extend(&self, i: usize) {
        let n = self.cache.len();
        assert!(i < n, "envelope index {i} of {n}");
        let (blk_lo, blk_hi) = (
            i / ENV_BLOCK * ENV_BLOCK,
            ((i / ENV_BLOCK + 1) * ENV_BLOCK).min(n),
        );
        let (lo, hi) = (self.lo.get(), self.hi.get());
        if lo == hi {
            self.fill(blk_lo, blk_hi);
            self.lo.set(blk_lo);
            self.hi.set(blk_hi);
        } else if i >= hi {
            self.fill(hi, blk_hi);
            self.hi.set(blk_hi);
        } else {
            self.fill(blk_lo, lo);
            self.lo.set(blk_lo);
        }
    }
}

impl Env for LazyEnvelope<'_> {
    fn len(&self) -> usize {
        self.cache.len()
    }
    #[inline]
    fn at(&self, i: usize) -> f64 {
        if i < self.lo.get() || i >= self.hi.get() {
            self.extend(i);
        }
        self.cache[i].get()
    }
}

/// Fractional index where `env` crosses `level` going up, searching
/// backwards from `from` (the latest such crossing at or before it).
pub fn rising_before<E: Env + ?Sized>(
    env: &E,
    from: usize,
    level: f64,
    stop: usize,
) -> Option<f64> {
    let mut i = from.min(env.len().saturating_sub(2));
    while i >= stop {
        if env.at(i) < level && env.at(i + 1) >= level {
            return Some(i as f64 + (level - env.at(i)) / (env.at(i + 1) - env.at(i)));
        }
        if i == 0 {
            break;
        }
        i -= 1;
    }
    None
}

/// First upward crossing of `level` at or after `from`, before `stop`.
pub fn rising_after<E: Env + ?Sized>(env: &E, from: usize, level: f64, stop: usize) -> Option<f64> {
    let end = stop.min(env.len().saturating_sub(1));
    (from..end)
        .find(|&i| env.at(i) < level && env.at(i + 1) >= level)
        .map(|i| i as f64 + (level - env.at(i)) / (env.at(i + 1) - env.at(i)))
}

/// First downward crossing of `level` at or after `from`, before `stop`.
pub fn falling_after<E: Env + ?Sized>(
    env: &E,
    from: usize,
    level: f64,
    stop: usize,
) -> Option<f64> {
    let end = stop.min(env.len().saturating_sub(1));
    (from..end)
        .find(|&i| env.at(i) >= level && env.at(i + 1) < level)
        .map(|i| i as f64 + (env.at(i) - level) / (env.at(i) - env.at(i + 1)))
}

/// Latest downward crossing of `level` at or before `from`, not before `stop`.
pub fn falling_before<E: Env + ?Sized>(
    env: &E,
    from: usize,
    level: f64,
    stop: usize,
) -> Option<f64> {
    let mut i = from.min(env.len().saturating_sub(2));
    while i >= stop {
        if env.at(i) >= level && env.at(i + 1) < level {
            return Some(i as f64 + (env.at(i) - level) / (env.at(i) - env.at(i + 1)));
        }
        if i == 0 {
            break;
        }
        i -= 1;
    }
    None
}

/// Crossing instant of `level` by occupancy: within `a..b`, the time the
/// (piecewise-linear) envelope spends on the "before" side of the level
/// (below it for a rising edge), added to `a`. For a clean monotone edge this
/// is exactly the interpolated crossing; with noise, repeated crossings
/// average out instead of the nearest one being picked, which would bias the
/// edge short.
///
/// Where noise also flips samples far from the crossing (key-up noise above
/// a 10 % level at low SNR), `p_before` and `p_after` are the measured rates of
/// wrong-side samples before and after the crossing; with T the occupancy,
/// T = (t - a)(1 - p_b) + p_a (b - t) is solved for t.
pub fn occupancy_crossing<E: Env + ?Sized>(
    env: &E,
    level: f64,
    w: (f64, f64),
    rising: bool,
    p: (f64, f64),
) -> f64 {
    // One build per direction: the side test in the loops is then a single
    // comparison (the same one).
    if rising {
        occupancy_dir::<true, E>(env, level, w, p)
    } else {
        occupancy_dir::<false, E>(env, level, w, p)
    }
}

fn occupancy_dir<const RISING: bool, E: Env + ?Sized>(
    env: &E,
    level: f64,
    w: (f64, f64),
    p: (f64, f64),
) -> f64 {
    let (a, b) = w;
    let n = env.len();
    if n < 2 || b <= a {
        return a;
    }
    let a = a.max(0.0);
    let b = b.min((n - 1) as f64);
    let before = |v: f64| if RISING { v < level } else { v >= level };
    // Share of segment [s0, s1] within sample interval i on the "before"
    // side, the envelope linear between samples i and i + 1.
    let part = |i: usize, s0: f64, s1: f64, e0: f64, e1: f64| {
        let v = |x: f64| e0 + (e1 - e0) * (x - i as f64);
        let (v0, v1) = (v(s0), v(s1));
        match (before(v0), before(v1)) {
            (true, true) => s1 - s0,
            (false, false) => 0.0,
            (b0, _) => {
                let x = s0 + (level - v0) / (v1 - v0) * (s1 - s0);
                if b0 {
                    x - s0
                } else {
                    s1 - x
                }
            }
        }
    };
    let mut occ = 0.0;
    let mut i = a.floor() as usize;
    // Whole intervals [i, i + 1] inside the window, where `part` reduces to
    // this (the same operations on the same values: s0 = i, s1 - s0 = 1).
    let (first, end) = (a.ceil() as usize, (b.floor() as usize).min(n - 1));
    if i < first && (i as f64) < b && i + 1 < n {
        let s1 = ((i + 1) as f64).min(b);
        occ += part(i, a, s1, env.at(i), env.at(i + 1));
        i += 1;
    }
    if i < end {
        let mut e0 = env.at(i);
        while i < end {
            let e1 = env.at(i + 1);
            let v1 = e0 + (e1 - e0);
            occ += match (before(e0), before(v1)) {
                (true, true) => 1.0,
                (false, false) => 0.0,
                (b0, _) => {
                    let s0 = i as f64;
                    let x = s0 + (level - e0) / (v1 - e0);
                    if b0 {
                        x - s0
                    } else {
                        (s0 + 1.0) - x
                    }
                }
            };
            e0 = e1;
            i += 1;
        }
    }
    while (i as f64) < b && i + 1 < n {
        let s0 = (i as f64).max(a);
        let s1 = ((i + 1) as f64).min(b);
        if s1 > s0 {
            occ += part(i, s0, s1, env.at(i), env.at(i + 1));
        }
        i += 1;
    }
    let (pb, pa) = (p.0.clamp(0.0, 0.4), p.1.clamp(0.0, 0.4));
    ((occ + a * (1.0 - pb) - pa * b) / (1.0 - pa - pb)).clamp(a, b)
}

/// Share of samples in `lo..hi` on the wrong side of `level`: below it when
/// `want_above`, else at or above it. 0 when the region is too short to say.
fn wrong_side_rate<E: Env + ?Sized>(
    env: &E,
    level: f64,
    lo: f64,
    hi: f64,
    want_above: bool,
) -> f64 {
    let a = lo.max(0.0).ceil() as usize;
    let b = (hi.floor() as usize).min(env.len());
    if b < a + 10 {
        return 0.0;
    }
    let wrong = (a..b)
        .map(|i| env.at(i))
        .filter(|&v| if want_above { v < level } else { v >= level })
        .count();
    wrong as f64 / (b - a) as f64
}

/// Length of the reference stretch for wrong-side rates, in edge widths.
const REFERENCE_WIDTHS: f64 = 1.0;

/// How far past the nearest crossing the occupancy window reaches, as a
/// multiple of that crossing's distance from the 50 % point. The nearest
/// crossing is itself pulled towards the 50 % point by noise, so the window
/// must reach well beyond it to contain the true crossing.
pub const OCCUPANCY_REACH: f64 = 2.0;

/// Crossing instants of one edge, fractional sample indices.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Edge {
    pub t10: f64,
    pub t50: f64,
    pub t90: f64,
}

impl Edge {
    /// |t90 - t10| in samples.
    pub fn width(&self) -> f64 {
        (self.t90 - self.t10).abs()
    }
}

/// Finds a rising edge around comparator index `near` within `lo..hi`.
pub fn rise_edge<E: Env + ?Sized>(
    env: &E,
    lv: &StateLevels,
    near: usize,
    lo: usize,
    hi: usize,
) -> Option<Edge> {
    let t50 = rising_before(env, near, lv.at(0.5), lo)
        .or_else(|| rising_after(env, near, lv.at(0.5), hi))?;
    let i50 = t50.floor() as usize;
    let t10 = rising_before(env, i50, lv.at(0.1), lo)?;
    let t90 = rising_after(env, i50, lv.at(0.9), hi)?;
    let (l10, l90) = (lv.at(0.1), lv.at(0.9));
    let w10 = ((t10 - OCCUPANCY_REACH * (t50 - t10)).max(lo as f64), t50);
    let w90 = (t50, (t90 + OCCUPANCY_REACH * (t90 - t50)).min(hi as f64));
    let r = REFERENCE_WIDTHS * (t90 - t10).max(4.0);
    let p10 = wrong_side_rate(env, l10, (w10.0 - r).max(lo as f64), w10.0, false);
    let p90 = wrong_side_rate(env, l90, w90.1, (w90.1 + r).min(hi as f64), true);
    let t10 = occupancy_crossing(env, l10, w10, true, (p10, 0.0));
    let t90 = occupancy_crossing(env, l90, w90, true, (0.0, p90));
    // The 50 % instant by occupancy between the 10 % and 90 % instants.
    let t50 = occupancy_crossing(env, lv.at(0.5), (t10, t90), true, (0.0, 0.0));
    Some(Edge { t10, t50, t90 })
}

/// Finds a falling edge around comparator index `near` within `lo..hi`.
pub fn fall_edge<E: Env + ?Sized>(
    env: &E,
    lv: &StateLevels,
    near: usize,
    lo: usize,
    hi: usize,
) -> Option<Edge> {
    // The last time the envelope went below 50 % before the comparator
    // switched off; failing that, the first time after.
    let t50 = falling_before(env, near, lv.at(0.5), lo)
        .or_else(|| falling_after(env, near, lv.at(0.5), hi))?;
    let i50 = t50.floor() as usize;
    let t90 = falling_before(env, i50, lv.at(0.9), lo)?;
    let t10 = falling_after(env, i50, lv.at(0.1), hi)?;
    let (l10, l90) = (lv.at(0.1), lv.at(0.9));
    let w90 = ((t90 - OCCUPANCY_REACH * (t50 - t90)).max(lo as f64), t50);
    let w10 = (t50, (t10 + OCCUPANCY_REACH * (t10 - t50)).min(hi as f64));
    let r = REFERENCE_WIDTHS * (t10 - t90).max(4.0);
    let p90 = wrong_side_rate(env, l90, (w90.0 - r).max(lo as f64), w90.0, true);
    let p10 = wrong_side_rate(env, l10, w10.1, (w10.1 + r).min(hi as f64), false);
    let t90 = occupancy_crossing(env, l90, w90, false, (p90, 0.0));
    let t10 = occupancy_crossing(env, l10, w10, false, (0.0, p10));
    let t50 = occupancy_crossing(env, lv.at(0.5), (t90, t10), false, (0.0, 0.0));
    Some(Edge { t10, t50, t90 })
}

/// Where to look for one edge (indices into the element's samples).
#[derive(Clone, Copy, Debug)]
pub struct EdgeSearch {
    /// Comparator switching index near the edge.
    pub near: usize,
    pub lo: usize,
    pub hi: usize,
    pub rising: bool,
    /// Samples either side of `near` worth looking at (bounds the work).
    pub span: usize,
}

/// Crossing-time jitter allowed from noise, as a share of the edge time.
pub const JITTER_SHARE: f64 = 0.01;
/// The smoothing's own 10-90 % time never exceeds this share of the edge's.
pub const MAX_SMOOTH_SHARE: f64 = 0.2;

/// Coarse-then-fine measurement of one edge. The fine envelope is smoothed
/// only as much as the noise requires: enough that noise moves a crossing by
/// at most `JITTER_SHARE` of the edge time (slope taken as 80 % per edge
/// time), and never more than `MAX_SMOOTH_SHARE` of it. A Gaussian that
/// narrow shifts crossings by about half its share squared (under 2 %), so no
/// correction is applied: any correction would be exact for one edge shape
/// only. Returns the edge and its 10-90 % width in samples.
pub fn measure_edge(
    z: &[Complex32],
    lv: &StateLevels,
    noise_power: f64,
    at: EdgeSearch,
    coarse_sigma: f64,
) -> Option<(Edge, f64)> {
    // Work on the stretch around the edge only.
    let a = at.lo.max(at.near.saturating_sub(at.span));
    let b = (at.hi.min(at.near + at.span) + 1).min(z.len());
    if b <= a + 4 || at.near < a || at.near >= b {
        return None;
    }
    let local = EdgeSearch {
        near: at.near - a,
        lo: 0,
        hi: b - a - 1,
        ..at
    };
    let (e, w) = measure_edge_local(&z[a..b], lv, noise_power, local, coarse_sigma)?;
    let off = a as f64;
    Some((
        Edge {
            t10: e.t10 + off,
            t50: e.t50 + off,
            t90: e.t90 + off,
        },
        w,
    ))
}

/// Buffers one thread's edge measurements reuse: the samples' parts, the
/// two envelopes' values, and the last kernels with their sigmas (the coarse
/// one is the same for every edge of a recording).
#[derive(Default)]
struct EdgeScratch {
    planes: RefCell<Planes>,
    coarse: Vec<f64>,
    fine: Vec<f64>,
    k0: (u64, Vec<f64>),
    k1: (u64, Vec<f64>),
}

thread_local! {
    static EDGE_SCRATCH: RefCell<EdgeScratch> = RefCell::new(EdgeScratch::default());
}

/// `gaussian_kernel(sigma)`, remembered with its sigma.
fn kernel_for(slot: &mut (u64, Vec<f64>), sigma: f64) -> &[f64] {
    if slot.1.is_empty() || slot.0 != sigma.to_bits() {
        *slot = (sigma.to_bits(), gaussian_kernel(sigma));
    }
    &slot.1
}

/// A buffer of at least `n` values (contents unspecified).
fn at_least(v: &mut Vec<f64>, n: usize) -> &mut [f64] {
    if v.len() < n {
        v.resize(n, 0.0);
    }
    &mut v[..n]
}

fn measure_edge_local(
    z: &[Complex32],
    lv: &StateLevels,
    noise_power: f64,
    at: EdgeSearch,
    coarse_sigma: f64,
) -> Option<(Edge, f64)> {
    EDGE_SCRATCH.with_borrow_mut(|s| {
        let EdgeScratch {
            planes,
            coarse,
            fine,
            k0,
            k1,
        } = s;
        // Both envelopes read the same samples in double precision.
        let n = z.len();
        planes.get_mut().reset(n);
        let planes = &*planes;
        let k0 = kernel_for(k0, coarse_sigma);
        let env0 = LazyEnvelope::from_planes(z, planes, k0, noise_power, at_least(coarse, n));
        let coarse = find_edge(&env0, lv, at)?;
        let s0 = if k0.len() > 1 { coarse_sigma } else { 0.0 };
        let sigma = fine_sigma(&env0, lv, noise_power, &coarse, s0);
        let k1 = kernel_for(k1, sigma);
        let edge = if k1.len() == k0.len() {
            coarse
        } else {
            let env1 = LazyEnvelope::from_planes(z, planes, k1, noise_power, at_least(fine, n));
            find_edge(&env1, lv, at).unwrap_or(coarse)
        };
        Some((edge, edge.width()))
    })
}

/// The edge `at` asks for on `env`.
fn find_edge<E: Env + ?Sized>(env: &E, lv: &StateLevels, at: EdgeSearch) -> Option<Edge> {
    if at.rising {
        rise_edge(env, lv, at.near, at.lo, at.hi)
    } else {
        fall_edge(env, lv, at.near, at.lo, at.hi)
    }
}

/// Smoothing sigma of the fine envelope, from the coarse edge `coarse` on
/// `env0` (smoothed by a Gaussian of sigma `s0`, 0 for none).
fn fine_sigma<E: Env + ?Sized>(
    env0: &E,
    lv: &StateLevels,
    noise_power: f64,
    coarse: &Edge,
    s0: f64,
) -> f64 {
    let w_est = (coarse.width().powi(2) - (GAUSS_10_90_PER_SIGMA * s0).powi(2))
        .max(0.0)
        .sqrt();
    // Noise per quadrature component relative to the high level.
    let rel = if lv.high > 0.0 {
        (noise_power / 2.0).sqrt() / lv.high
    } else {
        0.0
    };
    // Slope at the flatter of the 10 % and 90 % crossings, in high-levels
    // per edge time (0.8 for a straight ramp; an RC tail is far flatter).
    let d = (0.25 * w_est).max(1.0);
    let slope_at = |t: f64| {
        let i0 = (t - d).max(0.0) as usize;
        let i1 = ((t + d) as usize).min(env0.len() - 1);
        (env0.at(i1) - env0.at(i0)).abs() / ((i1 - i0).max(1) as f64) * w_est.max(1.0)
            / lv.high.max(1e-12)
    };
    let slope = slope_at(coarse.t10)
        .min(slope_at(coarse.t90))
        .clamp(0.05, 0.8);
    // Gaussian noise gain sum(w^2) = 1 / (2 sqrt(pi) sigma); jitter = rel * sqrt(g) * W / slope.
    let g_needed = (slope * JITTER_SHARE / rel.max(1e-12)).powi(2);
    let sigma_noise = 1.0 / (2.0 * std::f64::consts::PI.sqrt() * g_needed.min(1.0));
    let sigma_cap = MAX_SMOOTH_SHARE * w_est / GAUSS_10_90_PER_SIGMA;
    if g_needed >= 1.0 {
        0.0
    } else {
        sigma_noise.min(sigma_cap)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rustfft::num_complex::Complex64;

    fn ramp_env(n: usize, a: usize, b: usize) -> Vec<f64> {
        (0..n)
            .map(|i| {
                if i <= a {
                    0.0
                } else if i >= b {
                    1.0
                } else {
                    (i - a) as f64 / (b - a) as f64
                }
            })
            .collect()
    }

    /// The plain one-sample-at-a-time envelope `LazyEnvelope` was derived
    /// from; test oracle.
    fn envelope_reference(z: &[Complex32], kernel: &[f64], noise_power: f64) -> Vec<f64> {
        let g: f64 = kernel.iter().map(|w| w * w).sum();
        let ws_full = kernel.iter().fold(0.0, |s, w| s + w);
        let pn = noise_power * g;
        let h = kernel.len() / 2;
        let n = z.len();
        (0..n)
            .map(|i| {
                let (acc, ws) = if i >= h && i + h < n {
                    let (mut re, mut im) = (0.0f64, 0.0f64);
                    for (w, zj) in kernel.iter().zip(&z[i - h..=i + h]) {
                        re += zj.re as f64 * w;
                        im += zj.im as f64 * w;
                    }
                    (Complex64::new(re, im), ws_full)
                } else {
                    let mut acc = Complex64::new(0.0, 0.0);
                    let mut ws = 0.0;
                    let a = i.saturating_sub(h);
                    let b = (i + h + 1).min(n);
                    for (j, zj) in z.iter().enumerate().take(b).skip(a) {
                        let w = kernel[j + h - i];
                        acc += Complex64::new(zj.re as f64, zj.im as f64) * w;
                        ws += w;
                    }
                    (acc, ws)
                };
                let p = (acc / ws).norm_sqr() - pn;
                p.max(0.0).sqrt()
            })
            .collect()
    }

    #[test]
    fn blocked_envelope_equals_the_plain_envelope() {
        // Fast path against the slow obvious one: the same sums in the same
        // order, so every value is identical, in any order of access.
        let mut st = 7u64;
        let z: Vec<Complex32> = (0..203)
            .map(|i| {
                st = st.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
                let r = (st >> 40) as f32 / (1u32 << 24) as f32 - 0.5;
                Complex32::new((i as f32 * 0.1).sin() + 0.1 * r, 0.3 - 0.2 * r)
            })
            .collect();
        for sigma in [0.0, 1.0, 3.0, 7.5, 40.0] {
            let k = gaussian_kernel(sigma);
            let want = envelope_reference(&z, &k, 0.01);
            assert_eq!(envelope(&z, &k, 0.01), want, "{sigma}");
            let lazy = LazyEnvelope::new(&z, &k, 0.01);
            for i in (0..z.len()).rev().step_by(3).chain(0..z.len()) {
                assert_eq!(lazy.at(i), want[i], "{sigma} {i}");
            }
        }
    }

    /// `measure_edge` as first written (planes and per-edge envelopes
    /// allocated for each edge, the fine sigma computed inline), here on
    /// whole envelopes from `envelope_reference`; test oracle.
    fn measure_edge_reference(
        z: &[Complex32],
        lv: &StateLevels,
        noise_power: f64,
        at: EdgeSearch,
        coarse_sigma: f64,
    ) -> Option<(Edge, f64)> {
        let a = at.lo.max(at.near.saturating_sub(at.span));
        let b = (at.hi.min(at.near + at.span) + 1).min(z.len());
        if b <= a + 4 || at.near < a || at.near >= b {
            return None;
        }
        let z = &z[a..b];
        let (near, lo, hi) = (at.near - a, 0, b - a - 1);
        let find = |env: &Vec<f64>| {
            if at.rising {
                rise_edge(env, lv, near, lo, hi)
            } else {
                fall_edge(env, lv, near, lo, hi)
            }
        };
        let k0 = gaussian_kernel(coarse_sigma);
        let env0 = envelope_reference(z, &k0, noise_power);
        let coarse = find(&env0)?;
        let s0 = if k0.len() > 1 { coarse_sigma } else { 0.0 };
        let w_est = (coarse.width().powi(2) - (GAUSS_10_90_PER_SIGMA * s0).powi(2))
            .max(0.0)
            .sqrt();
        let rel = if lv.high > 0.0 {
            (noise_power / 2.0).sqrt() / lv.high
        } else {
            0.0
        };
        let d = (0.25 * w_est).max(1.0);
        let slope_at = |t: f64| {
            let i0 = (t - d).max(0.0) as usize;
            let i1 = ((t + d) as usize).min(env0.len() - 1);
            (env0[i1] - env0[i0]).abs() / ((i1 - i0).max(1) as f64) * w_est.max(1.0)
                / lv.high.max(1e-12)
        };
        let slope = slope_at(coarse.t10)
            .min(slope_at(coarse.t90))
            .clamp(0.05, 0.8);
        let g_needed = (slope * JITTER_SHARE / rel.max(1e-12)).powi(2);
        let sigma_noise = 1.0 / (2.0 * std::f64::consts::PI.sqrt() * g_needed.min(1.0));
        let sigma_cap = MAX_SMOOTH_SHARE * w_est / GAUSS_10_90_PER_SIGMA;
        let sigma = if g_needed >= 1.0 {
            0.0
        } else {
            sigma_noise.min(sigma_cap)
        };
        let k1 = gaussian_kernel(sigma);
        let edge = if k1.len() == k0.len() {
            coarse
        } else {
            find(&envelope_reference(z, &k1, noise_power)).unwrap_or(coarse)
        };
        let off = a as f64;
        Some((
            Edge {
                t10: edge.t10 + off,
                t50: edge.t50 + off,
                t90: edge.t90 + off,
            },
            edge.width(),
        ))
    }

    #[test]
    fn measured_edges_equal_the_plain_measurement() {
        // Scratch buffers and the stretch-wise lazy envelope against whole
        // envelopes summed sample by sample: identical edges, for noisy
        // rising and falling edges of varied width and SNR, stretches of
        // varied length (buffers growing and shrinking between edges), and
        // searches cut short by `lo`/`hi` and by the samples' ends.
        let mut st = 19u64;
        let mut uni = move || {
            st = st.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let mut checked = 0;
        for trial in 0..60 {
            let n = 300 + 97 * (trial % 13);
            let width = 2.0 + (trial * 7 % 41) as f64 * 1.5;
            let centre = n as f64 * (0.3 + 0.02 * (trial % 11) as f64);
            let sd = [0.0, 0.002, 0.02, 0.08, 0.2][trial % 5];
            let rising = trial % 2 == 0;
            let z: Vec<Complex32> = (0..n)
                .map(|i| {
                    let x = ((i as f64 - centre) / width + 0.5).clamp(0.0, 1.0);
                    let a = if rising { x } else { 1.0 - x };
                    let (nr, ni) = (sd * 3.4 * uni(), sd * 3.4 * uni());
                    Complex32::new((0.7 * a + nr) as f32, (0.7 * a * 0.3 + ni) as f32)
                })
                .collect();
            let high = 0.7 * (1.0f64 + 0.09).sqrt();
            let lv = StateLevels { low: 0.0, high };
            let pn = 2.0 * (sd * 3.4).powi(2) / 12.0;
            let near = centre as usize + trial % 5;
            for (lo, hi, span) in [
                (0, n - 1, 600),
                (near / 2, n - 1, 150),
                (0, (near + n) / 2, 40),
                (0, n - 1, 6),
            ] {
                let at = EdgeSearch {
                    near,
                    lo,
                    hi,
                    rising,
                    span,
                };
                for sigma in [3.0, 0.2, 1.3] {
                    let want = measure_edge_reference(&z, &lv, pn, at, sigma);
                    let got = measure_edge(&z, &lv, pn, at, sigma);
                    assert_eq!(got, want, "trial {trial} {lo}..{hi} {span} {sigma}");
                    checked += want.is_some() as usize;
                }
            }
        }
        assert!(checked > 300, "{checked}");
    }

    /// The plain sample-by-sample occupancy `occupancy_crossing` was derived
    /// from; test oracle.
    fn occupancy_reference(
        env: &[f64],
        level: f64,
        w: (f64, f64),
        rising: bool,
        p: (f64, f64),
    ) -> f64 {
        let (a, b) = w;
        let n = env.len();
        if n < 2 || b <= a {
            return a;
        }
        let a = a.max(0.0);
        let b = b.min((n - 1) as f64);
        let before = |v: f64| if rising { v < level } else { v >= level };
        let mut occ = 0.0;
        let mut i = a.floor() as usize;
        while (i as f64) < b && i + 1 < n {
            let s0 = (i as f64).max(a);
            let s1 = ((i + 1) as f64).min(b);
            if s1 > s0 {
                let (e0, e1) = (env[i], env[i + 1]);
                let v = |x: f64| e0 + (e1 - e0) * (x - i as f64);
                let (v0, v1) = (v(s0), v(s1));
                occ += match (before(v0), before(v1)) {
                    (true, true) => s1 - s0,
                    (false, false) => 0.0,
                    (b0, _) => {
                        let x = s0 + (level - v0) / (v1 - v0) * (s1 - s0);
                        if b0 {
                            x - s0
                        } else {
                            s1 - x
                        }
                    }
                };
            }
            i += 1;
        }
        let (pb, pa) = (p.0.clamp(0.0, 0.4), p.1.clamp(0.0, 0.4));
        ((occ + a * (1.0 - pb) - pa * b) / (1.0 - pa - pb)).clamp(a, b)
    }

    #[test]
    fn occupancy_equals_the_plain_occupancy() {
        // Fast interior loop against the slow obvious one: identical values
        // for windows with whole and fractional ends, inside and at the ends
        // of the envelope, on a noisy edge that crosses the level many times.
        let mut st = 11u64;
        let env: Vec<f64> = (0..300)
            .map(|i| {
                st = st.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
                let r = (st >> 40) as f64 / (1u64 << 24) as f64 - 0.5;
                (i as f64 / 200.0).min(1.0) + 0.3 * r
            })
            .collect();
        let windows = [
            (10.0, 250.0),
            (10.25, 249.75),
            (0.0, 299.0),
            (-3.0, 400.0),
            (17.5, 18.0),
            (17.2, 17.7),
            (40.0, 41.0),
            (298.5, 299.0),
            (5.0, 5.0),
        ];
        for w in windows {
            for rising in [true, false] {
                for level in [0.1, 0.5, 0.9] {
                    let p = (0.05, 0.1);
                    assert_eq!(
                        occupancy_crossing(&env, level, w, rising, p),
                        occupancy_reference(&env, level, w, rising, p),
                        "{w:?} {rising} {level}"
                    );
                }
            }
        }
    }

    #[test]
    fn linear_ramp_crossings_are_exact() {
        // Analytic: a linear ramp over T has 10-90 % = 0.8 T (BRIEF.md).
        let env = ramp_env(400, 100, 200);
        let lv = StateLevels {
            low: 0.0,
            high: 1.0,
        };
        let e = rise_edge(&env, &lv, 180, 0, 399).unwrap();
        assert!((e.t50 - 150.0).abs() < 1e-9);
        assert!((e.width() - 80.0).abs() < 1e-9);
        let fall: Vec<f64> = env.iter().rev().copied().collect();
        let f = fall_edge(&fall, &lv, 220, 0, 399).unwrap();
        assert!((f.t50 - 249.0).abs() < 1e-9, "{f:?}");
        assert!((f.width() - 80.0).abs() < 1e-9);
    }

    #[test]
    fn clean_gaussian_edge_is_measured_unsmoothed() {
        // A Gaussian-filtered step has 10-90 % = 2.563 sigma (BRIEF.md). With
        // no noise the fine envelope is not smoothed, so the coarse
        // smoothing must leave no trace.
        let sigma = 20.0;
        let n = 2000;
        let z: Vec<Complex32> = (0..n)
            .map(|i| {
                let x = (i as f64 - 1000.0) / (sigma * 2f64.sqrt());
                Complex32::new((0.5 * (1.0 + erf(x))) as f32, 0.0)
            })
            .collect();
        let lv = StateLevels {
            low: 0.0,
            high: 1.0,
        };
        let at = EdgeSearch {
            near: 1000,
            lo: 0,
            hi: n - 1,
            rising: true,
            span: 600,
        };
        let (e, w) = measure_edge(&z, &lv, 0.0, at, 2.0).unwrap();
        assert!((e.t50 - 1000.0).abs() < 0.6, "{e:?}");
        assert!((w - 2.563 * sigma).abs() < 0.01 * 2.563 * sigma, "{w}");
    }

    /// Abramowitz & Stegun 7.1.26 (|error| < 1.5e-7), enough for a test signal.
    fn erf(x: f64) -> f64 {
        let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
        let y = 1.0
            - (((((1.061_405_429 * t - 1.453_152_027) * t) + 1.421_413_741) * t - 0.284_496_736)
                * t
                + 0.254_829_592)
                * t
                * (-x * x).exp();
        if x >= 0.0 {
            y
        } else {
            -y
        }
    }
}
