//! The streaming measurement of one tone: downconversion, a detection
//! envelope, cumulative IEEE 181 state levels, the hysteresis segmenter, and
//! per-element measurement. Samples arrive in blocks of any size; memory is a
//! few seconds of baseband plus the per-element results. The segmenter runs
//! `LOOKAHEAD_S` behind the newest sample so that state levels already include
//! the signal that follows, which lets the first elements of a file be
//! measured with levels from more than themselves.

use rustfft::num_complex::{Complex32, Complex64};

use super::element::{measure, Context, Measured};
use crate::dsp::downconvert::{Band, Downconverter};
use crate::dsp::hum::HumAcc;
use crate::dsp::levels::{LevelHistogram, StateLevels};
use crate::dsp::segment::{Mark, Segmenter, OFF_FRACTION, ON_FRACTION};

/// Delay of the segmenter behind the newest sample, s.
pub const LOOKAHEAD_S: f64 = 3.0;
/// Baseband kept before a rise and after a fall for edge searches, s.
pub const PRE_S: f64 = 0.06;
pub const POST_S: f64 = 0.06;
/// Width of the detection envelope's coherent moving average, s.
pub const DETECT_WINDOW_S: f64 = 0.002;
/// Key-downs longer than this are closed and measured in pieces, s.
pub const MAX_ELEMENT_S: f64 = 20.0;
/// Marks and gaps shorter than this are glitches (150 WPM would be 8 ms), s.
pub const MIN_MARK_S: f64 = 0.004;
pub const MIN_GAP_S: f64 = 0.004;
/// A 50 % instant this close to the start or end of the recording marks an
/// element the recording cut, s.
pub const TRUNCATED_S: f64 = 0.005;
/// Gap samples this close to an edge do not count towards the noise, s.
pub const NOISE_GUARD_S: f64 = 0.025;

/// How a tracker runs. The default is what file analysis uses; live input
/// uses `TrackerConfig::live` once the state levels are established, and
/// then measures each element about 0.1 s after its key-up instead of 3 s.
/// The measurement itself is the same either way.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TrackerConfig {
    /// Delay of the segmenter behind the newest sample, s. At least
    /// `POST_S + MIN_GAP_S`, so each capture still gets its `POST_S` tail.
    pub lookahead_s: f64,
    /// Downconverter hop in input samples (None: the full block, fastest).
    pub hop: Option<usize>,
    /// Keep each element's frequency trace and edge views (for the
    /// mean-element chirp and the pictures). Off for tones other than the
    /// main one, whose summaries need neither.
    pub keep_traces: bool,
}

impl Default for TrackerConfig {
    fn default() -> Self {
        TrackerConfig {
            lookahead_s: LOOKAHEAD_S,
            hop: None,
            keep_traces: true,
        }
    }
}

/// Shortest lookahead that still leaves the capture its full tail, s.
pub const LIVE_LOOKAHEAD_S: f64 = POST_S + MIN_GAP_S + 0.004;
/// Downconverter hop for live input, s (a block every ~10 ms of input).
pub const LIVE_HOP_S: f64 = 0.01;

impl TrackerConfig {
    /// Low-latency setting for live input at sample rate `fs`.
    pub fn live(fs: u32) -> TrackerConfig {
        TrackerConfig {
            lookahead_s: LIVE_LOOKAHEAD_S,
            hop: Some(((fs as f64 * LIVE_HOP_S) as usize).max(16)),
            keep_traces: true,
        }
    }
}

/// One element as the tracker reports it (times in the input's time base).
#[derive(Clone, Debug)]
pub struct TrackedElement {
    pub start_s: f64,
    pub end_s: f64,
    pub rise_s: Option<f64>,
    pub fall_s: Option<f64>,
    pub level_power: f64,
    pub early_late_db: Option<f64>,
    /// Settled frequency, Hz (absolute).
    pub frequency_hz: f64,
    pub chirp_hz: f64,
    pub chirp_raw_hz: f64,
    pub chirp_noise_hz: f64,
    /// True when the key-down was longer than `MAX_ELEMENT_S` and was cut.
    pub cut: bool,
    /// True when the recording starts or ends during this key-down: its
    /// duration is not the keying's, and the cut edge is not measured.
    pub truncated: bool,
    /// Frequency trace: (s since 50 % rise, Hz deviation from settled).
    pub trace: Vec<(f32, f32)>,
    /// Rising and falling edge envelopes on the `EDGE_VIEW_*` grid,
    /// normalised to the high level (empty beyond `EDGE_VIEW_MAX` elements).
    pub rise_view: Vec<f32>,
    pub fall_view: Vec<f32>,
}

/// One element's trace and edge envelopes, taken out for the report.
pub type ElementViews = (Vec<(f32, f32)>, Vec<f32>, Vec<f32>);

/// Every how many trace points one is kept for the pictures and the
/// mean-element chirp. 1 for now: coarser spacing changes the mean-element
/// fit's model choice, which the accuracy grid has not been re-run for.
pub const TRACE_KEEP_STRIDE: usize = 1;

/// Most trace points kept over the whole recording (8 bytes each, so 16 MiB).
/// Past it, the elements keeping their traces are halved (see `trace_kept`):
/// a long recording keeps full traces for an evenly spread sample of its
/// elements, so memory stays bounded and each kept trace is still whole.
/// At 20 WPM this holds every trace of about 11 minutes.
pub const TRACE_POINTS_MAX: usize = 2 << 20;

/// Does element `index` keep its trace at thinning level `level` (level 0:
/// all of them; each level keeps half of the previous level's)? A hash of
/// the index, not a stride, so the kept set cannot fall in step with a
/// repeated text (every second element of "PARIS " would be the same ones).
/// Elements kept at a level are also kept at every lower level.
pub fn trace_kept(index: usize, level: u32) -> bool {
    // SplitMix64 finaliser (Steele, Lea and Flood 2014).
    let mut x = (index as u64).wrapping_add(0x9e37_79b9_7f4a_7c15);
    x = (x ^ (x >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    x = (x ^ (x >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    x ^= x >> 31;
    level == 0 || x.trailing_zeros() >= level
}

/// Grid of the edge pictures: from -15 ms to +15 ms of the 50 % instant.
pub const EDGE_VIEW_FIRST_MS: f64 = -15.0;
pub const EDGE_VIEW_STEP_MS: f64 = 0.25;
pub const EDGE_VIEW_POINTS: usize = 121;
/// Elements whose edges are kept for pictures (memory stays bounded).
pub const EDGE_VIEW_MAX: usize = 400;

/// Noise power from key-up gaps: variance about the mean of 10 ms blocks,
/// which leaves a steady carrier (backwave) out of the noise. The blocks'
/// means are the backwave: a carrier coherent over 10 ms, whose power is
/// |mean|^2 less the noise's share, var(mean) = noise·fs/(Bn·n) for noise of
/// noise-equivalent bandwidth Bn sampled at fs.
#[derive(Clone, Debug, Default)]
struct NoiseAcc {
    block: Vec<Complex32>,
    block_len: usize,
    sum_dev: f64,
    dof: f64,
    up_power: f64,
    up_count: f64,
    /// fs / Bn of the baseband.
    mean_var_factor: f64,
    coherent: f64,
    coherent_bias: f64,
    coherent_blocks: f64,
}

impl NoiseAcc {
    /// Adds many samples (as `push` one by one).
    fn push_slice(&mut self, mut zs: &[Complex32]) {
        while !zs.is_empty() {
            let room = self.block_len.saturating_sub(self.block.len()).max(1);
            let take = room.min(zs.len());
            let (head, rest) = zs.split_at(take);
            self.block.extend_from_slice(head);
            for z in head {
                self.up_power += z.norm_sqr() as f64;
            }
            self.up_count += take as f64;
            if self.block.len() >= self.block_len {
                self.close();
            }
            zs = rest;
        }
    }

    #[inline]
    fn push(&mut self, z: Complex32) {
        self.block.push(z);
        self.up_power += z.norm_sqr() as f64;
        self.up_count += 1.0;
        if self.block.len() >= self.block_len {
            self.close();
        }
    }
    fn close(&mut self) {
        let n = self.block.len();
        if n >= 4 {
            let m: Complex64 = self
                .block
                .iter()
                .map(|v| Complex64::new(v.re as f64, v.im as f64))
                .sum::<Complex64>()
                / n as f64;
            let dev = self
                .block
                .iter()
                .map(|v| (Complex64::new(v.re as f64, v.im as f64) - m).norm_sqr())
                .sum::<f64>();
            self.sum_dev += dev;
            self.dof += (n - 1) as f64;
            self.coherent += m.norm_sqr();
            self.coherent_bias += dev / (n - 1) as f64 * self.mean_var_factor / n as f64;
            self.coherent_blocks += 1.0;
        }
        self.block.clear();
    }
    fn power(&self) -> Option<f64> {
        (self.dof >= 200.0).then(|| self.sum_dev / self.dof)
    }
    /// Key-up carrier power with the noise's share removed, and the smallest
    /// power that stands out of the noise (three standard errors).
    fn carrier(&self) -> Option<(f64, f64)> {
        if self.coherent_blocks < 10.0 {
            return None;
        }
        let b = self.coherent_blocks;
        let bias = self.coherent_bias / b;
        // With noise only, |mean|^2 is exponential: its standard deviation is
        // its mean, so the average of B blocks has standard error bias/sqrt(B).
        Some((self.coherent / b - bias, 3.0 * bias / b.sqrt()))
    }
}

/// Key-up samples held back `guard` samples before they reach the noise,
/// so a gap's last `guard` samples (the approach to the next rise) are never
/// used: a ring of `guard` slots, the oldest at `pos` once `len` == `guard`.
#[derive(Clone, Debug)]
struct GapDelay {
    ring: Vec<Complex32>,
    pos: usize,
    len: usize,
}

impl GapDelay {
    fn new(guard: usize) -> GapDelay {
        GapDelay {
            ring: vec![Complex32::new(0.0, 0.0); guard],
            pos: 0,
            len: 0,
        }
    }
    /// Forgets the held samples (a rise: they were too close to it).
    fn clear(&mut self) {
        self.pos = 0;
        self.len = 0;
    }
    /// Samples in; those leaving the delay go to `noise`, oldest first.
    fn push_run(&mut self, mut zs: &[Complex32], noise: &mut NoiseAcc) {
        let guard = self.ring.len();
        if guard == 0 {
            noise.push_slice(zs);
            return;
        }
        // Filling: nothing leaves yet, and `pos` runs with `len` (both
        // reset by `clear`).
        if self.len < guard {
            let fill = (guard - self.len).min(zs.len());
            self.ring[self.len..self.len + fill].copy_from_slice(&zs[..fill]);
            self.len += fill;
            self.pos = self.len % guard;
            zs = &zs[fill..];
        }
        if zs.is_empty() {
            return;
        }
        // Full (the oldest at `pos`): each sample in pushes the oldest out.
        if zs.len() >= guard {
            noise.push_slice(&self.ring[self.pos..]);
            noise.push_slice(&self.ring[..self.pos]);
            let (out, keep) = zs.split_at(zs.len() - guard);
            noise.push_slice(out);
            self.ring.copy_from_slice(keep);
            self.pos = 0;
        } else {
            for &z in zs {
                noise.push(self.ring[self.pos]);
                self.ring[self.pos] = z;
                self.pos += 1;
                if self.pos == guard {
                    self.pos = 0;
                }
            }
        }
    }
}

/// Half-width of the averaged edge window, s (holds edges up to ~15 ms).
pub const MEAN_EDGE_HALF_S: f64 = 0.025;

/// Running sum of edge power envelopes aligned at their 50 % instants, for
/// the mean edge: N edges averaged cut the noise power by N, so the mean
/// edge's 10-90 % time holds at SNRs where single edges scatter widely.
/// Fixed size: memory does not grow with the recording.
#[derive(Clone, Debug)]
pub struct EdgeAverage {
    pub half: usize,
    pub sum: Vec<f64>,
    pub count: Vec<u32>,
    /// |z|^2 of the samples one `add` reads, and the grid points'
    /// fractions (scratch).
    power: Vec<f64>,
    frac: Vec<f64>,
}

impl EdgeAverage {
    fn new(half: usize) -> EdgeAverage {
        EdgeAverage {
            half,
            sum: vec![0.0; 2 * half + 1],
            count: vec![0; 2 * half + 1],
            power: Vec::new(),
            frac: Vec::new(),
        }
    }
    /// Adds |z|^2 around fractional index `t50` (linear interpolation).
    /// The same values and operations as `add_reference`, in two
    /// vectorizable passes where the grid points fall on successive samples
    /// (always, but for rounding at a power of two).
    fn add(&mut self, z: &[Complex32], t50: f64) {
        if !self.add_successive(z, t50) {
            self.add_each(z, t50);
        }
    }

    /// `add` one grid point at a time.
    fn add_each(&mut self, z: &[Complex32], t50: f64) {
        for (k, (s, c)) in self.sum.iter_mut().zip(self.count.iter_mut()).enumerate() {
            let x = t50 + k as f64 - self.half as f64;
            if x < 0.0 || x + 1.0 >= z.len() as f64 {
                continue;
            }
            // x >= 0: truncation is the floor (without a libm call).
            let i = x as i64 as usize;
            let f = x - i as f64;
            *s += (1.0 - f) * z[i].norm_sqr() as f64 + f * z[i + 1].norm_sqr() as f64;
            *c += 1;
        }
    }

    /// `add` when the grid points inside the samples, x_k = t50 + k - half,
    /// have floors i0, i0 + 1, ... (then the fraction x_k - floor(x_k) is
    /// worked out as `add_each` does); false, with nothing added, otherwise.
    fn add_successive(&mut self, z: &[Complex32], t50: f64) -> bool {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU has AVX.
            return unsafe { self.add_successive_avx(z, t50) };
        }
        self.add_successive_any(z, t50)
    }

    /// Four lanes wide (the same operations, so the same values).
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx")]
    fn add_successive_avx(&mut self, z: &[Complex32], t50: f64) -> bool {
        self.add_successive_any(z, t50)
    }

    #[inline(always)]
    fn add_successive_any(&mut self, z: &[Complex32], t50: f64) -> bool {
        let nk = self.sum.len();
        let (half, len) = (self.half as f64, z.len() as f64);
        if !t50.is_finite() || nk >= i32::MAX as usize || z.len() >= i32::MAX as usize {
            return false;
        }
        // k as i32 as f64 is k as f64 (k < 2^31), and converts lane-wise.
        let x_at = |k: usize| t50 + k as i32 as f64 - half;
        // x_k is monotone in k (each rounding is), so the points inside the
        // samples, 0 <= x_k and x_k + 1 < len, are one run k_lo..k_hi.
        let first = |inside: &dyn Fn(usize) -> bool| {
            let (mut a, mut b) = (0, nk);
            while a < b {
                let m = (a + b) / 2;
                if inside(m) {
                    b = m;
                } else {
                    a = m + 1;
                }
            }
            a
        };
        let k_lo = first(&|k| x_at(k) >= 0.0);
        let k_hi = first(&|k| x_at(k) + 1.0 >= len);
        if k_lo >= k_hi {
            return true;
        }
        let m = k_hi - k_lo;
        let i_lo = x_at(k_lo) as i64 as usize;
        // The fractions, if every floor is the expected one: x_k - i is
        // exact for 0 <= x_k - i < 1 (Sterbenz), so that test is the floor's.
        self.frac.clear();
        self.frac.extend((k_lo..k_hi).map(|k| {
            let i = (i_lo + (k - k_lo)) as i32 as f64;
            x_at(k) - i
        }));
        if !self.frac.iter().all(|&f| (0.0..1.0).contains(&f)) {
            return false;
        }
        self.power.clear();
        self.power
            .extend(z[i_lo..i_lo + m + 1].iter().map(|v| v.norm_sqr() as f64));
        let p = &self.power[..];
        for (((s, c), &f), (&a, &b)) in self.sum[k_lo..k_hi]
            .iter_mut()
            .zip(&mut self.count[k_lo..k_hi])
            .zip(&self.frac)
            .zip(p.iter().zip(&p[1..]))
        {
            *s += (1.0 - f) * a + f * b;
            *c += 1;
        }
        true
    }

    /// Mean envelope with the noise power removed.
    pub fn envelope(&self, noise_power: f64) -> Vec<f64> {
        self.sum
            .iter()
            .zip(&self.count)
            .map(|(s, &c)| {
                if c == 0 {
                    0.0
                } else {
                    (s / c as f64 - noise_power).max(0.0).sqrt()
                }
            })
            .collect()
    }
}

/// Moving sums of the detection envelope, real and imaginary parts apart so
/// that their magnitudes vectorize (scratch). The first `len` values are
/// the block's; the buffers only grow, so they are not cleared per block.
#[derive(Debug, Default)]
struct Sums {
    re: Vec<f64>,
    im: Vec<f64>,
    len: usize,
}

impl Sums {
    fn clear(&mut self) {
        self.len = 0;
    }
    /// Room for `m` more values: the slices to write them to.
    fn grow(&mut self, m: usize) -> (&mut [f64], &mut [f64]) {
        let (from, to) = (self.len, self.len + m);
        if self.re.len() < to {
            self.re.resize(to, 0.0);
            self.im.resize(to, 0.0);
        }
        self.len = to;
        (&mut self.re[from..to], &mut self.im[from..to])
    }
    fn push(&mut self, s: Complex64) {
        let (re, im) = self.grow(1);
        (re[0], im[0]) = (s.re, s.im);
    }
    fn parts(&self) -> (&[f64], &[f64]) {
        (&self.re[..self.len], &self.im[..self.len])
    }
}

/// The moving sum `run` carried through `new` (each sample in, the one of
/// `old` beside it out), each value appended to `sums`.
fn moving_sums(run: &mut Complex64, new: &[Complex32], old: &[Complex32], sums: &mut Sums) {
    let c64 = |z: &Complex32| Complex64::new(z.re as f64, z.im as f64);
    let (re, im) = sums.grow(new.len().min(old.len()));
    let mut r = *run;
    for (((z, o), sr), si) in new.iter().zip(old).zip(re).zip(im) {
        r += c64(z);
        r -= c64(o);
        (*sr, *si) = (r.re, r.im);
    }
    *run = r;
}

/// |s / w| of each moving sum, appended to `out`: (s / w).norm_sqr().sqrt()
/// spelt out on the two parts. The sqrt of the squared magnitude: hypot
/// guards against overflow that baseband samples of at most full scale
/// cannot reach. The loop is bound by the divider, so it runs four lanes
/// wide where the CPU has AVX (the same correctly rounded operations, so the
/// same values).
fn magnitudes(sums: &Sums, w: f64, out: &mut Vec<f64>) {
    let (re, im) = sums.parts();
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU has AVX.
        unsafe { magnitudes_avx(re, im, w, out) };
        return;
    }
    magnitudes_into(re, im, w, out);
}

#[inline(always)]
fn magnitudes_into(re: &[f64], im: &[f64], w: f64, out: &mut Vec<f64>) {
    out.extend(re.iter().zip(im).map(|(&sr, &si)| {
        let (r, i) = (sr / w, si / w);
        (r * r + i * i).sqrt()
    }));
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn magnitudes_avx(re: &[f64], im: &[f64], w: f64, out: &mut Vec<f64>) {
    magnitudes_into(re, im, w, out);
}

/// Number of leading values of `xs` that `keep` holds for. The segmenter's
/// runs are long (a key-down or a gap is hundreds of envelope samples), so
/// whole blocks are tested first with a predicate that does not branch per
/// value (it vectorizes), and only the block holding the end one by one.
/// `keep` is a comparison written so NaN keeps the run going, as the
/// `partial_cmp` tests it replaces did (`leading_reference`).
#[inline(always)]
fn leading(xs: &[f32], keep: impl Fn(f32) -> bool) -> usize {
    const W: usize = 16;
    let mut n = 0;
    for block in xs.chunks_exact(W) {
        if !block.iter().fold(true, |all, &v| all & keep(v)) {
            break;
        }
        n += W;
    }
    n + xs[n..].iter().take_while(|&&v| keep(v)).count()
}

/// `v` is not below `t`: at or above it, or NaN (a NaN continues an on run).
/// One negated comparison says that, and vectorizes as one compare.
#[allow(clippy::neg_cmp_op_on_partial_ord)]
#[inline(always)]
fn not_below(v: f32, t: f64) -> bool {
    !((v as f64) < t)
}

/// `v` is not at or above `t`: below it, or NaN (a NaN continues a gap).
#[allow(clippy::neg_cmp_op_on_partial_ord)]
#[inline(always)]
fn not_at_or_above(v: f32, t: f64) -> bool {
    !((v as f64) >= t)
}

/// Streaming tracker of one tone in one channel.
pub struct ToneTracker {
    dc: Downconverter,
    fs_d: f64,
    center_hz: f64,
    /// Baseband from absolute index `zphys` on; indices below `zbase` are
    /// trimmed (no longer used) and dropped in bulk when the buffer is full.
    zbuf: Vec<Complex32>,
    zphys: u64,
    zbase: u64,
    win: usize,
    run: Complex64,
    /// The block's detection envelope and its moving sums (scratch).
    dnew: Vec<f64>,
    sums: Sums,
    /// Detection envelope from absolute index `detphys` on; `det0` is the
    /// first index it has (u64::MAX until the first value).
    det: Vec<f32>,
    detphys: u64,
    det0: u64,
    hist: LevelHistogram,
    levels: Option<StateLevels>,
    /// Comparator thresholds from `levels` (on, off).
    thr: (f64, f64),
    since_levels: usize,
    seg: Segmenter,
    seg_q: u64,
    lookahead: u64,
    pre: u64,
    post: u64,
    max_el: u64,
    guard: usize,
    gap: GapDelay,
    last_down: Option<u64>,
    noise: NoiseAcc,
    elements: Vec<TrackedElement>,
    unmeasured: usize,
    cut_open: bool,
    mean_rise: EdgeAverage,
    mean_fall: EdgeAverage,
    hum: HumAcc,
    /// Input samples pushed so far.
    input_samples: u64,
    keep_traces: bool,
    /// Thinning level of the kept traces (`trace_kept`) and their points.
    trace_level: u32,
    trace_points: usize,
}

/// Dead samples, as a multiple of the live ones, that make `compact` move
/// the buffers (the live part is about `LOOKAHEAD_S` of baseband, so the
/// buffers hold about 4 times that).
const COMPACT_AT: usize = 3;

/// Settled key-down used for hum: this far inside the 90 % points, s.
const HUM_GUARD_S: f64 = 0.002;

impl ToneTracker {
    pub fn new(fs: u32, center_hz: f64) -> ToneTracker {
        ToneTracker::with_config(fs, center_hz, TrackerConfig::default())
    }

    pub fn with_config(fs: u32, center_hz: f64, cfg: TrackerConfig) -> ToneTracker {
        Self::with_band_config(fs, Band::envelope(fs as f64, center_hz), cfg)
    }

    /// A tracker whose analysis band is `band` (e.g. with other tones notched out).
    pub fn with_band(fs: u32, band: Band) -> ToneTracker {
        Self::with_band_config(fs, band, TrackerConfig::default())
    }

    /// A tracker with its own band and configuration.
    pub fn with_band_config(fs: u32, band: Band, cfg: TrackerConfig) -> ToneTracker {
        let center_hz = band.center_hz;
        let dc = Downconverter::with_hop(fs, band, cfg.hop);
        let fs_d = dc.out_rate_hz();
        let win = ((DETECT_WINDOW_S * fs_d).round() as usize) | 1;
        let s = |x: f64| (x * fs_d).round() as u64;
        ToneTracker {
            center_hz,
            zbuf: Vec::new(),
            zphys: 0,
            zbase: 0,
            win,
            run: Complex64::new(0.0, 0.0),
            dnew: Vec::new(),
            sums: Sums::default(),
            det: Vec::new(),
            detphys: 0,
            det0: u64::MAX,
            hist: LevelHistogram::new(),
            levels: None,
            thr: (f64::INFINITY, f64::INFINITY),
            since_levels: 0,
            seg: Segmenter::new(s(MIN_MARK_S), s(MIN_GAP_S)),
            seg_q: 0,
            lookahead: s(cfg.lookahead_s.max(POST_S + MIN_GAP_S)),
            pre: s(PRE_S),
            post: s(POST_S),
            max_el: s(MAX_ELEMENT_S),
            guard: s(NOISE_GUARD_S) as usize,
            gap: GapDelay::new(s(NOISE_GUARD_S) as usize),
            last_down: None,
            noise: NoiseAcc {
                block_len: s(0.01) as usize,
                mean_var_factor: fs_d / dc.noise_bandwidth_hz(),
                ..Default::default()
            },
            hum: HumAcc::new(fs_d),
            input_samples: 0,
            keep_traces: cfg.keep_traces,
            elements: Vec::new(),
            unmeasured: 0,
            cut_open: false,
            mean_rise: EdgeAverage::new(s(MEAN_EDGE_HALF_S) as usize),
            mean_fall: EdgeAverage::new(s(MEAN_EDGE_HALF_S) as usize),
            trace_level: 0,
            trace_points: 0,
            fs_d,
            dc,
        }
    }

    /// Changes the segmenter's delay (live input: long while the state
    /// levels build up, then short). Shortening it segments the backlog at
    /// the next push.
    pub fn set_lookahead_s(&mut self, lookahead_s: f64) {
        self.lookahead = (lookahead_s.max(POST_S + MIN_GAP_S) * self.fs_d).round() as u64;
    }
    /// Takes the elements measured so far out of the tracker (live input
    /// keeps only the recent ones, so memory stays bounded).
    pub fn take_elements(&mut self) -> Vec<TrackedElement> {
        std::mem::take(&mut self.elements)
    }

    pub fn downconverter(&self) -> &Downconverter {
        &self.dc
    }
    pub fn center_hz(&self) -> f64 {
        self.center_hz
    }
    pub fn levels(&self) -> Option<StateLevels> {
        self.levels
    }
    /// Noise power per baseband sample (full envelope band), if measured.
    pub fn noise_power(&self) -> Option<f64> {
        self.noise.power()
    }
    /// Key-up carrier (backwave) power per baseband sample with the noise
    /// removed, and the smallest such power the recording resolves.
    pub fn key_up_carrier(&self) -> Option<(f64, f64)> {
        self.noise.carrier()
    }
    /// Hum and ripple accumulated over the elements' settled key-down.
    pub fn hum(&self) -> &HumAcc {
        &self.hum
    }
    /// Mean baseband power during key-up (noise plus any backwave).
    pub fn key_up_power(&self) -> Option<f64> {
        (self.noise.up_count > 0.0).then(|| self.noise.up_power / self.noise.up_count)
    }
    pub fn elements(&self) -> &[TrackedElement] {
        &self.elements
    }
    /// Takes the elements' traces and edge views out (for the report), so
    /// they are not held twice.
    pub fn take_views(&mut self) -> Vec<ElementViews> {
        self.elements
            .iter_mut()
            .map(|e| {
                (
                    std::mem::take(&mut e.trace),
                    std::mem::take(&mut e.rise_view),
                    std::mem::take(&mut e.fall_view),
                )
            })
            .collect()
    }
    /// Averaged rising and falling edges.
    pub fn mean_edges(&self) -> (&EdgeAverage, &EdgeAverage) {
        (&self.mean_rise, &self.mean_fall)
    }
    /// Sample rate of the baseband, Hz.
    pub fn baseband_rate_hz(&self) -> f64 {
        self.fs_d
    }
    /// Elements found by the comparator whose edges could not be measured.
    pub fn unmeasured(&self) -> usize {
        self.unmeasured
    }

    /// Feeds one channel's samples. The baseband goes straight onto the
    /// end of the buffer.
    pub fn push(&mut self, samples: &[f32]) {
        self.take(samples.len(), false, |dc, z| dc.push(samples, z));
    }

    /// `push` for input already through a front end like the
    /// downconverter's (see `Downconverter::push_decimated`): `input_len`
    /// samples of the channel, `front` their decimation.
    pub fn push_decimated(&mut self, input_len: usize, front: &[f32]) {
        self.take(input_len, false, |dc, z| dc.push_decimated(front, z));
    }

    /// Ends the stream: flushes the filter and measures what is left.
    pub fn finish(&mut self) {
        self.take(0, true, |dc, z| dc.flush(z));
        self.mark_cut();
    }

    /// `finish` for a tracker fed by [`push_decimated`](Self::push_decimated):
    /// `tail` is what the caller's decimator gave at its flush.
    pub fn finish_decimated(&mut self, tail: &[f32]) {
        self.take(0, true, |dc, z| dc.flush_decimated(tail, z));
        self.mark_cut();
    }

    /// `input_len` more input samples, whose baseband `fill` puts onto the
    /// end of the buffer; `last` when it flushed the filter.
    fn take(
        &mut self,
        input_len: usize,
        last: bool,
        fill: impl FnOnce(&mut Downconverter, &mut Vec<Complex32>),
    ) {
        self.input_samples += input_len as u64;
        self.compact();
        let from = self.zbuf.len();
        fill(&mut self.dc, &mut self.zbuf);
        self.ingest(from, last);
    }

    /// Marks the elements the recording's start or end cut.
    fn mark_cut(&mut self) {
        // An element whose 50 % instant falls at the very start or end of
        // the recording was cut by it (an abrupt start or end reads as an
        // edge right there).
        let end_s = self.input_samples as f64 / self.dc.in_rate_hz();
        if let Some(e) = self.elements.first_mut() {
            if e.start_s < TRUNCATED_S {
                e.truncated = true;
                e.rise_s = None;
            }
        }
        if let Some(e) = self.elements.last_mut() {
            if e.end_s > end_s - TRUNCATED_S {
                e.truncated = true;
                e.fall_s = None;
            }
        }
    }

    /// Takes in the new baseband, `zbuf[from..]`.
    fn ingest(&mut self, from: usize, last: bool) {
        let w = self.win as u64;
        let zs = &self.zbuf[from..];
        let new = zs.len();
        // Absolute index of zs[0].
        let start = self.zphys + from as u64;
        // The detection envelope of the block: a coherent moving average of
        // `w` samples (the sum runs on, in f64), one value per sample from
        // the w-th on. First the samples whose window is not yet full...
        // The sums are one serial chain and are stored as they are; their
        // magnitudes follow in a separate loop, which vectorizes.
        let mut sums = std::mem::take(&mut self.sums);
        sums.clear();
        let mut run = self.run;
        let c64 = |z: &Complex32| Complex64::new(z.re as f64, z.im as f64);
        let lead = (w.saturating_sub(start) as usize).min(zs.len());
        for (k, z) in zs[..lead].iter().enumerate() {
            run += c64(z);
            if start + k as u64 + 1 >= w {
                sums.push(run);
            }
        }
        // ...then the steady state, where the sample `w` back leaves the sum.
        if lead < zs.len() {
            let old_from = (start + lead as u64 - w - self.zphys) as usize;
            let old = &self.zbuf[old_from..old_from + zs.len() - lead];
            moving_sums(&mut run, &zs[lead..], old, &mut sums);
        }
        self.run = run;
        let mut dnew = std::mem::take(&mut self.dnew);
        dnew.clear();
        magnitudes(&sums, w as f64, &mut dnew);
        self.sums = sums;
        // Absolute baseband index of the sample that completed dnew[0].
        let first_head = start + new as u64 - dnew.len() as u64;
        if self.det0 == u64::MAX && !dnew.is_empty() {
            // det index = head - (w-1)/2
            self.det0 = first_head - (w - 1) / 2;
            self.detphys = self.det0;
        }
        self.det.extend(dnew.iter().map(|&d| d as f32));
        // Envelope index after dnew[k] is dnew[k]'s plus one (exact
        // whenever there is a dnew[0]).
        let det_end = (first_head + 1).saturating_sub((w - 1) / 2);
        // Chunks from one state-level update to the next: the sample that
        // updates the levels goes into the histogram before the update, the
        // rest of the chunk after it, and the chunk's segmentation uses the
        // updated levels, as when everything runs sample by sample (the
        // segmenter reads neither the histogram nor anything the chunk's
        // later samples change).
        let mut k = 0;
        while k < dnew.len() {
            self.hist.add(dnew[k]);
            self.since_levels += 1;
            if self.since_levels >= 600 || self.levels.is_none() {
                self.since_levels = 0;
                self.set_levels(self.hist.levels());
            }
            let end = if self.levels.is_none() {
                k + 1
            } else {
                (k + 600 - self.since_levels).min(dnew.len())
            };
            self.hist.add_slice(&dnew[k + 1..end]);
            self.since_levels += end - k - 1;
            let det_head = det_end + end as u64 - 1;
            self.segment_to(det_head.saturating_sub(self.lookahead));
            k = end;
        }
        if !last {
            self.trim(start + new as u64);
        }
        self.dnew = dnew;
        if last {
            self.segment_to(self.detphys + self.det.len() as u64);
            let (held, _open) = self.seg.finish(self.seg_q);
            if let Some(m) = held {
                self.measure_mark(m, false);
            }
            self.noise.close();
        }
    }

    /// New state levels and the comparator thresholds they give.
    fn set_levels(&mut self, levels: Option<StateLevels>) {
        self.levels = levels;
        self.thr = match levels {
            // Keying needs the states at least 6 dB apart.
            Some(l) if l.high > 2.0 * l.low && l.high > 0.0 => {
                (l.at(ON_FRACTION), l.at(OFF_FRACTION))
            }
            _ => (f64::INFINITY, f64::INFINITY),
        };
    }

    /// Drops the trimmed baseband and the segmented envelope from the
    /// buffers' fronts once they are `COMPACT_AT` times what is kept (so
    /// each sample is moved 1 / `COMPACT_AT` times on average).
    fn compact(&mut self) {
        let dead = (self.zbase - self.zphys) as usize;
        if dead > 0 && dead >= COMPACT_AT * (self.zbuf.len() - dead) {
            self.zbuf.drain(..dead);
            self.zphys = self.zbase;
        }
        let dead = self.seg_q.saturating_sub(self.detphys) as usize;
        if dead > 0
            && dead >= COMPACT_AT * self.det.len().saturating_sub(dead)
            && self.det0 != u64::MAX
        {
            let dead = dead.min(self.det.len());
            self.det.drain(..dead);
            self.detphys += dead as u64;
        }
    }

    /// Segments every envelope sample before `end`. Runs of steps that
    /// change nothing (the comparator stays off with nothing held, or stays
    /// on) are taken here in one go; the rest one by one in `segment_one`.
    fn segment_to(&mut self, end: u64) {
        while self.seg_q < end {
            let q = self.seg_q;
            if q >= self.det0 {
                let (on, off) = self.thr;
                let (from, to) = ((q - self.detphys) as usize, (end - self.detphys) as usize);
                if self.seg.is_on() {
                    // On, so no mark is held and the open mark starts at `up`;
                    // the run ends at a fall or where the mark grows too long.
                    let start = self.seg.open_start().unwrap_or(q);
                    let lim = ((start + self.max_el + 1).saturating_sub(self.detphys) as usize)
                        .clamp(from, to);
                    let n = leading(&self.det[from..lim], |v| not_below(v, off));
                    if n > 0 {
                        self.gap.clear();
                        self.seg_q += n as u64;
                        continue;
                    }
                } else if self.seg.is_idle() {
                    let n = leading(&self.det[from..to], |v| not_at_or_above(v, on));
                    if n > 0 {
                        self.cut_open = false;
                        // Key-up samples past the last fall's guard go to the noise.
                        let past_edge = self.last_down.map_or(q, |d| d + self.guard as u64);
                        let (g0, g1) = (past_edge.max(q).max(self.zbase), q + n as u64);
                        if g0 < g1 {
                            let zs =
                                &self.zbuf[(g0 - self.zphys) as usize..(g1 - self.zphys) as usize];
                            self.gap.push_run(zs, &mut self.noise);
                        }
                        self.seg_q = g1;
                        continue;
                    }
                }
            }
            self.segment_one();
        }
    }

    /// One comparator step in full.
    #[inline(never)]
    fn segment_one(&mut self) {
        let q = self.seg_q;
        if q < self.det0 {
            self.seg_q += 1;
            return;
        }
        let v = self.det[(q - self.detphys) as usize] as f64;
        let (on, off) = self.thr;
        let was_on = self.seg.is_on();
        let mark = self.seg.step(q, v, on, off);
        if self.cut_open && !self.seg.is_on() {
            self.cut_open = false;
        }
        if let Some(m) = mark {
            self.measure_mark(m, false);
        }
        if self.seg.is_on() {
            self.gap.clear();
            if let Some(start) = self.seg.open_start() {
                if q - start > self.max_el {
                    if let Some(m) = self.seg.force_close(q) {
                        self.measure_mark(m, true);
                        self.cut_open = true;
                    }
                }
            }
        } else if self.seg.open_start().is_none() && !was_on {
            let past_edge = self.last_down.is_none_or(|d| q >= d + self.guard as u64);
            if past_edge && q >= self.zbase {
                let z = self.zbuf[(q - self.zphys) as usize];
                self.gap.push_run(&[z], &mut self.noise);
            }
        }
        self.seg_q += 1;
    }

    /// Measures one mark on the baseband it spans (the buffer is lent out
    /// for the measurement, not copied).
    #[inline(never)]
    fn measure_mark(&mut self, m: Mark, cut: bool) {
        let zbuf = std::mem::take(&mut self.zbuf);
        self.measure_on(&zbuf, m, cut);
        self.zbuf = zbuf;
    }

    fn measure_on(&mut self, zbuf: &[Complex32], m: Mark, cut: bool) {
        let Some(levels) = self.levels else { return };
        let a = m.up.saturating_sub(self.pre).max(self.zbase);
        let head = self.zphys + zbuf.len() as u64;
        let b = (m.down + self.post).min(head);
        if b <= a + 8 || m.up < a || m.down >= b {
            self.unmeasured += 1;
            return;
        }
        let lo = self
            .last_down
            .map(|d| d.saturating_sub(a) as usize)
            .filter(|&d| d < (m.up - a) as usize)
            .unwrap_or(0);
        self.last_down = Some(m.down);
        let z = &zbuf[(a - self.zphys) as usize..(b - self.zphys) as usize];
        let w = self.win as f64;
        let pn = self.noise.power().unwrap_or(levels.low * levels.low * w);
        let corr = |x: f64| (x * x - pn / w).max(0.0).sqrt();
        let ctx = Context {
            fs: self.fs_d,
            levels: StateLevels {
                low: corr(levels.low),
                high: corr(levels.high),
            },
            noise_power: pn,
        };
        let Some(r): Option<Measured> =
            measure(z, (m.up - a) as usize, (m.down - a) as usize, lo, &ctx)
        else {
            self.unmeasured += 1;
            return;
        };
        if r.rise_samples.is_some() && !self.cut_open {
            self.mean_rise.add(z, r.t50_rise);
        }
        if r.fall_samples.is_some() && !cut {
            self.mean_fall.add(z, r.t50_fall);
        }
        let t0 = self.dc.time_of(a);
        if let (Some(r9), Some(f9), false, false) = (r.t90_rise, r.t90_fall, cut, self.cut_open) {
            let g = HUM_GUARD_S * self.fs_d;
            let (i, j) = ((r9 + g).ceil().max(0.0) as usize, (f9 - g).floor() as usize);
            if j > i && j < z.len() {
                self.hum.add(&z[i..j], t0 + i as f64 / self.fs_d);
            }
        }
        let ts = |i: f64| t0 + i / self.fs_d;
        let keep_view = self.keep_traces && self.elements.len() < EDGE_VIEW_MAX;
        let high = ctx.levels.high.max(1e-12);
        let view = |t50: f64, ok: bool| -> Vec<f32> {
            if !keep_view || !ok {
                return Vec::new();
            }
            (0..EDGE_VIEW_POINTS)
                .map(|k| {
                    let x = t50
                        + (EDGE_VIEW_FIRST_MS + k as f64 * EDGE_VIEW_STEP_MS) * 1e-3 * self.fs_d;
                    if x < 0.0 || x + 1.0 >= z.len() as f64 {
                        return f32::NAN;
                    }
                    let i = x as usize;
                    let f = x - i as f64;
                    let p = (1.0 - f) * z[i].norm_sqr() as f64 + f * z[i + 1].norm_sqr() as f64;
                    ((p - pn).max(0.0).sqrt() / high) as f32
                })
                .collect()
        };
        let rise_view = view(r.t50_rise, r.rise_samples.is_some());
        let fall_view = view(r.t50_fall, r.fall_samples.is_some());
        let settled = r.chirp.settled_hz;
        let keep_trace = self.keep_traces && trace_kept(self.elements.len(), self.trace_level);
        self.elements.push(TrackedElement {
            start_s: ts(r.t50_rise),
            end_s: ts(r.t50_fall),
            rise_s: if self.cut_open {
                None
            } else {
                r.rise_samples.map(|v| v / self.fs_d)
            },
            fall_s: if cut {
                None
            } else {
                r.fall_samples.map(|v| v / self.fs_d)
            },
            level_power: r.level_power,
            early_late_db: r.early_late_db,
            frequency_hz: self.center_hz + settled,
            chirp_hz: r.chirp.chirp_hz,
            chirp_raw_hz: r.chirp.raw_hz,
            chirp_noise_hz: r.chirp.noise_hz,
            cut,
            truncated: false,
            trace: if keep_trace {
                r.trace
                    .t
                    .iter()
                    .zip(&r.trace.f)
                    .map(|(t, f)| (*t as f32, (f - settled) as f32))
                    .step_by(TRACE_KEEP_STRIDE)
                    .collect()
            } else {
                Vec::new()
            },
            rise_view,
            fall_view,
        });
        let added = self.elements.last().map_or(0, |e| e.trace.len());
        self.trace_points += added;
        while self.trace_points > TRACE_POINTS_MAX {
            self.thin_traces();
        }
    }

    /// Halves the set of elements that keep their traces.
    fn thin_traces(&mut self) {
        self.trace_level += 1;
        let mut points = 0;
        for (i, e) in self.elements.iter_mut().enumerate() {
            if trace_kept(i, self.trace_level) {
                points += e.trace.len();
            } else {
                e.trace = Vec::new();
            }
        }
        self.trace_points = points;
    }

    /// Moves the trimmed mark: the baseband before the open (or held)
    /// mark's capture is no longer needed, beyond the moving average's
    /// window (`head`: baseband samples seen).
    #[inline]
    fn trim(&mut self, head: u64) {
        let keep_from = self
            .seg
            .open_start()
            .unwrap_or(self.seg_q)
            .min(self.seg_q)
            .saturating_sub(self.pre);
        let floor = head.saturating_sub(self.win as u64 + 1);
        if self.zbase < keep_from && self.zbase < floor {
            self.zbase = keep_from.min(floor);
        }
    }
}

#[cfg(test)]
mod gap_tests {
    use super::*;
    use std::collections::VecDeque;

    /// `EdgeAverage::add` as first written; test oracle.
    fn add_reference(a: &mut EdgeAverage, z: &[Complex32], t50: f64) {
        for (k, (s, c)) in a.sum.iter_mut().zip(a.count.iter_mut()).enumerate() {
            let x = t50 + k as f64 - a.half as f64;
            if x < 0.0 || x + 1.0 >= z.len() as f64 {
                continue;
            }
            let i = x as i64 as usize;
            let f = x - i as f64;
            *s += (1.0 - f) * z[i].norm_sqr() as f64 + f * z[i + 1].norm_sqr() as f64;
            *c += 1;
        }
    }

    #[test]
    fn edge_average_equals_the_plain_sum() {
        // Instants inside, near and past both ends of the samples, with
        // fractions that round when the grid offset is added (large t50).
        let z: Vec<Complex32> = (0..3000)
            .map(|i| Complex32::new((i as f32 * 0.37).sin(), (i as f32 * 0.05).cos()))
            .collect();
        let (mut fast, mut slow) = (EdgeAverage::new(300), EdgeAverage::new(300));
        let mut t = -400.3;
        while t < 3500.0 {
            for t50 in [
                t,
                t + 1e-9,
                t + 0.5,
                2_047.999_999_999,
                1023.7 + 1e-12,
                2_047.999_999_999_999_8,
                1_023.999_999_999_999_9,
            ] {
                fast.add(&z, t50);
                add_reference(&mut slow, &z, t50);
            }
            t += 97.123_456_789;
        }
        for zs in [&z[..1], &z[..2], &z[..40]] {
            fast.add(zs, 0.5);
            add_reference(&mut slow, zs, 0.5);
        }
        assert_eq!(fast.count, slow.count);
        assert_eq!(fast.sum, slow.sum);
        // Where t50 + k rounds up to the next integer, the two-pass path
        // declines and the one-point-at-a-time loop runs.
        assert!(!EdgeAverage::new(300).add_successive(&z, 2_047.999_999_999_999_8));
        assert!(EdgeAverage::new(300).add_successive(&z, 1500.25));
        // A t50 that is not a number reads as the old loop did.
        fast.add(&z, f64::NAN);
        add_reference(&mut slow, &z, f64::NAN);
        let bits = |a: &EdgeAverage| a.sum.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(fast.count, slow.count);
        assert_eq!(bits(&fast), bits(&slow));
    }

    #[test]
    fn split_detection_loops_equal_the_one_loop() {
        // Oracle: the detection envelope's steady-state loop as first
        // written, sum and magnitude of each sample in one pass.
        let mut seed = 5u64;
        let mut z = || {
            seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
            let u = (seed >> 40) as f32 / (1u32 << 24) as f32 - 0.5;
            Complex32::new(u, 0.3 * u - 0.1)
        };
        let w = 25usize;
        let zs: Vec<Complex32> = (0..5000).map(|_| z()).collect();
        let mut run = zs[..w].iter().fold(Complex64::new(0.0, 0.0), |s, v| {
            s + Complex64::new(v.re as f64, v.im as f64)
        });
        let (mut want, mut run0) = (Vec::new(), run);
        for (zn, o) in zs[w..].iter().zip(&zs) {
            run0 += Complex64::new(zn.re as f64, zn.im as f64);
            run0 -= Complex64::new(o.re as f64, o.im as f64);
            want.push((run0 / w as f64).norm_sqr().sqrt());
        }
        let (mut sums, mut got) = (Sums::default(), Vec::new());
        // In uneven blocks, as the downconverter delivers them.
        let mut k = w;
        for step in [1, 7, 300, 1000, 5000].iter().cycle() {
            if k >= zs.len() {
                break;
            }
            let e = (k + step).min(zs.len());
            sums.clear();
            moving_sums(&mut run, &zs[k..e], &zs[k - w..e - w], &mut sums);
            magnitudes(&sums, w as f64, &mut got);
            k = e;
        }
        assert_eq!(run, run0);
        assert_eq!(got, want);
    }

    #[test]
    fn gap_delay_and_noise_runs_equal_sample_by_sample() {
        // Oracle: the FIFO of `guard` samples as a VecDeque, and NoiseAcc fed
        // one sample at a time. Runs of varied length, with clears.
        let guard = 7;
        let mk = || NoiseAcc {
            block_len: 5,
            mean_var_factor: 2.0,
            ..Default::default()
        };
        let (mut fast, mut slow) = (mk(), mk());
        let mut gap = GapDelay::new(guard);
        let mut fifo: VecDeque<Complex32> = VecDeque::new();
        let mut seed = 3u64;
        let mut t = 0.0f32;
        for round in 0..400 {
            seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
            let n = (seed >> 33) as usize % 20;
            let zs: Vec<Complex32> = (0..n)
                .map(|_| {
                    t += 1.0;
                    Complex32::new((t * 0.37).sin(), (t * 0.11).cos())
                })
                .collect();
            if round % 9 == 0 {
                gap.clear();
                fifo.clear();
            }
            gap.push_run(&zs, &mut fast);
            for &z in &zs {
                fifo.push_back(z);
                if fifo.len() > guard {
                    slow.push(fifo.pop_front().unwrap());
                }
            }
        }
        assert_eq!(fast.up_count, slow.up_count);
        assert_eq!(fast.up_power, slow.up_power);
        assert_eq!(fast.sum_dev, slow.sum_dev);
        assert_eq!(fast.coherent, slow.coherent);
        assert_eq!(fast.block, slow.block);
    }

    /// The segmenter's run scans as first written (test oracle).
    fn leading_reference(xs: &[f32], on: f64, off: f64) -> (usize, usize) {
        use std::cmp::Ordering;
        let high = xs
            .iter()
            .take_while(|&&v| (v as f64).partial_cmp(&off) != Some(Ordering::Less))
            .count();
        let low = xs
            .iter()
            .take_while(|&&v| (v as f64).partial_cmp(&on).is_none_or(Ordering::is_lt))
            .count();
        (high, low)
    }

    #[test]
    fn run_scans_equal_the_take_while_scans() {
        // Runs of every length from 0 to 70 (across the 16-value blocks)
        // ended by a value below `off` or at or above `on`, runs that fill
        // the slice, NaN inside a run (it continues a run, as before), and
        // values on the thresholds and one f32 ulp either side of them.
        let (on, off) = (0.65f64, 0.35f64);
        let near = |t: f64, k: i32| {
            let b = (t as f32).to_bits() as i64 + k as i64;
            f32::from_bits(b as u32)
        };
        let specials = [
            f32::NAN,
            near(on, -1),
            near(on, 0),
            near(on, 1),
            near(off, -1),
            near(off, 0),
            near(off, 1),
            0.0,
            1.0,
            f32::INFINITY,
            f32::NEG_INFINITY,
        ];
        let mut checked = 0;
        for len in 0..70usize {
            for &fill in &[0.5f32, 0.9, 0.1, f32::NAN] {
                for &end in &specials {
                    let mut xs = vec![fill; len];
                    if len > 3 {
                        xs[len / 3] = f32::NAN;
                    }
                    xs.push(end);
                    xs.extend([0.5, 0.9, 0.1]);
                    for cut in [len, len + 1, xs.len()] {
                        let x = &xs[..cut];
                        let (high, low) = leading_reference(x, on, off);
                        assert_eq!(
                            leading(x, |v| not_below(v, off)),
                            high,
                            "{len} {fill} {end}"
                        );
                        assert_eq!(
                            leading(x, |v| not_at_or_above(v, on)),
                            low,
                            "{len} {fill} {end}"
                        );
                        checked += (high > 16) as usize + (low > 16) as usize;
                    }
                }
            }
        }
        assert!(checked > 1000, "{checked}");
    }
}
