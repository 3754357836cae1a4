//! Key clicks and the spectral figures, from the decimated recording and
//! its elements (fed along with the measurement pass, `SpectralStream`, or
//! in a pass of its own, `spectral_pass`). Welch-averaged power spectra (Welch 1967,
//! Hann window per Harris 1978) of the keyed passage and of the key-up gaps
//! (the noise floor), short-time spectra around rising and falling edges,
//! and a bounded spectrogram and envelope for the pictures. Everything is
//! accumulated in fixed-size arrays: memory does not grow with length.
//!
//! Levels are in dBc: relative to the key-down carrier as it shows in one
//! bin (a sine of the key-down amplitude on a bin centre is 0 dBc), so a
//! spectrum in dBc reads directly against the carrier line. A band's power
//! relative to the carrier is the sum of its bins divided by the window's
//! noise-equivalent bandwidth in bins.

use std::collections::BTreeMap;
use std::path::Path;

use rustfft::num_complex::Complex32;
use serde::{Deserialize, Serialize};

use super::views::{SpectrogramView, SpectrumView};
use crate::dsp::decimate::{factor_for, Decimator, PASS_FRACTION};
use crate::dsp::downconvert::plan_sizes;
use crate::dsp::real_fft::RealFft;
use crate::dsp::survey::{frames_per_column, SurveyGram};
use crate::dsp::window::{enbw_bins, hann};
use crate::error::Result;
use crate::input::wav::WavSource;
use crate::input::FrameSource;

/// Levels below the carrier at which x-dB bandwidths are read.
pub const X_DB: [u32; 5] = [20, 30, 40, 50, 60];
/// Half-width of the region around the pitch that the figures consider, Hz.
pub const REGION_HALF_HZ: f64 = 2500.0;
/// Default K of the necessary bandwidth Bn = B K (Radio Regulations Appendix 1,
/// ITU-R SM.1138: 5 for fading circuits, 3 for non-fading).
pub const DEFAULT_K: f64 = 5.0;
/// Key-up frames for the noise floor keep this far from any element, s.
const NOISE_GUARD_S: f64 = 0.025;
/// Inner edge of the sideband band used to compare rising and falling edges, Hz.
const CLICK_BAND_MIN_HZ: f64 = 150.0;

/// Which edges throw the clicks.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Clicks {
    /// Power beyond the inner sideband limit in the short-time spectra
    /// around rising edges, relative to the key-down carrier, dB (noise removed).
    pub rise_sideband_db: Option<f64>,
    pub fall_sideband_db: Option<f64>,
    /// The same band's noise power in one edge window, dB re carrier.
    pub noise_sideband_db: Option<f64>,
    /// Sideband band used, Hz offset from the pitch (both sides).
    pub band_hz: [f64; 2],
    /// "rise", "fall", "both" or "neither".
    pub clicking_edge: String,
}

/// Spectral figures of a recording.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct SpectralFigures {
    pub rbw_hz: f64,
    pub occupied_bandwidth_hz: Option<f64>,
    /// Offsets of the 0.5 % and 99.5 % points from the pitch, Hz.
    pub occupied_edges_hz: Option<[f64; 2]>,
    pub bandwidth_hz: BTreeMap<String, Option<f64>>,
    /// Offsets of the outermost x-dB points from the pitch, Hz (lower, upper).
    pub bandwidth_edges_hz: BTreeMap<String, Option<[f64; 2]>>,
    pub noise_floor_dbc: Option<f64>,
    pub necessary_bandwidth_hz: Option<f64>,
    pub necessary_k: f64,
    pub occupied_to_necessary_ratio: Option<f64>,
    /// Receiver passband from the noise floor's shape (-6 dB points), Hz.
    pub passband_hz: Option<[f64; 2]>,
    pub clicks: Clicks,
}

/// What the pass needs to know about the recording and its elements.
pub struct SpectralInput<'a> {
    pub path: &'a Path,
    pub channel: usize,
    pub tone_hz: f64,
    /// Key-down carrier amplitude squared (full-scale sine = 1).
    pub carrier_power: f64,
    /// (50 % rise, 50 % fall) instants of the elements, s, in time order.
    pub elements: &'a [(f64, f64)],
    /// PARIS unit, s (for the necessary bandwidth).
    pub unit_s: Option<f64>,
    pub k: f64,
    /// Other tones in the recording, Hz: their bins are left out of the
    /// figures (taken as noise), so they do not widen this tone's bandwidths.
    pub others_hz: &'a [f64],
    /// The survey's spectrogram of this channel, when it kept one: used
    /// instead of transforming the same frames again if its frames match.
    pub gram: Option<&'a SurveyGram>,
}

/// Welch accumulator for one frame length.
struct Welch {
    win: Vec<f32>,
    fft: RealFft,
    spec: Vec<Complex32>,
    sum: Vec<f64>,
    frames: u64,
}

impl Welch {
    fn new(n: usize) -> Welch {
        let fft = RealFft::new(n);
        Welch {
            win: hann(n),
            spec: fft.make_output_vec(),
            fft,
            sum: vec![0.0; n / 2 + 1],
            frames: 0,
        }
    }
    /// Power spectrum of `x` (length n) into `out`.
    fn power(&mut self, x: &[f32], out: &mut [f64]) {
        self.fft.process_windowed(x, &self.win, &mut self.spec);
        for (o, s) in out.iter_mut().zip(&self.spec) {
            *o = s.norm_sqr() as f64;
        }
    }
    fn add(&mut self, x: &[f32]) {
        self.fft.process_windowed(x, &self.win, &mut self.spec);
        for (s, v) in self.sum.iter_mut().zip(&self.spec) {
            *s += v.norm_sqr() as f64;
        }
        self.frames += 1;
    }
    /// Mean spectrum relative to a sine of power `carrier` on a bin centre.
    fn mean_rel(&self, carrier: f64) -> Vec<f64> {
        let wsum: f64 = self.win.iter().map(|&w| w as f64).sum();
        let r = (wsum / 2.0).powi(2) * carrier * self.frames.max(1) as f64;
        self.sum.iter().map(|s| s / r).collect()
    }
    fn enbw(&self) -> f64 {
        enbw_bins(&self.win)
    }
}

/// Mean power spectrum |X[k]|^2 of `x` by Welch's method (Hann window,
/// 50 % overlap, no detrending), bins 0..=n/2: the same estimator the pass
/// uses, exposed for checks against scipy.signal.welch.
pub fn welch_power(x: &[f32], n: usize) -> Vec<f64> {
    let mut w = Welch::new(n);
    let mut i = 0;
    while i + n <= x.len() {
        w.add(&x[i..i + n]);
        i += n / 2;
    }
    w.sum.iter().map(|v| v / w.frames.max(1) as f64).collect()
}

/// Necessary bandwidth of Morse telegraphy, Bn = B K (Radio Regulations
/// Appendix 1, ITU-R SM.1138), B the modulation rate in baud.
pub fn necessary_bandwidth_hz(baud: f64, k: f64) -> f64 {
    baud * k
}

/// Frame length for the main spectrum: about 0.17 s (RBW ~ 9 Hz at any
/// rate), shorter (down to `shortest`) when the keyed passage would give
/// fewer than 8 frames.
fn main_len(fs: u32, passage_s: f64, shortest: usize) -> usize {
    let mut n = ((fs as f64 * 0.17) as usize).next_power_of_two();
    while n > shortest && (passage_s * fs as f64) / (n as f64 / 2.0) < 8.0 {
        n /= 2;
    }
    n
}

/// What the spectral pass yields: the figures and the picture data.
#[derive(Clone, Debug, Default)]
pub struct SpectralOutput {
    pub figures: SpectralFigures,
    pub spectrum: SpectrumView,
    pub noise: SpectrumView,
    pub spectrogram: SpectrogramView,
    pub envelope: Vec<(f32, f32)>,
}

/// Front-end decimation for the pass: as far as the downconverter goes,
/// provided the region around the pitch stays in the flat band.
pub fn spectral_factor(fs: u32, tone_hz: f64) -> usize {
    factor_for(fs as f64, tone_hz + REGION_HALF_HZ, plan_sizes(fs).1)
}

/// Largest |x| (0 when empty; the samples are finite). Eight running
/// maxima, so the loop is not one serial chain of comparisons; the maximum
/// of a set does not depend on the order it is taken in.
fn peak_abs(x: &[f32]) -> f32 {
    let mut m = [0f32; 8];
    let mut chunks = x.chunks_exact(8);
    for c in &mut chunks {
        for k in 0..8 {
            let a = c[k].abs();
            m[k] = if a > m[k] { a } else { m[k] };
        }
    }
    for &v in chunks.remainder() {
        m[0] = m[0].max(v.abs());
    }
    m.iter().fold(0.0, |a, &b| a.max(b))
}

/// Runs the spectral pass on its own: reads the recording again, all
/// elements known. The spectra are taken from the input decimated by
/// [`spectral_factor`] (frames of the same durations, so the same
/// resolution); the envelope picture from the samples as they are.
pub fn spectral_pass(inp: &SpectralInput) -> Result<SpectralOutput> {
    let mut src = WavSource::open(inp.path)?;
    let info = src.info().clone();
    let nch = info.channels as usize;
    let mut st = SpectralStream::new(
        info.sample_rate_hz,
        info.frames.unwrap_or(0),
        inp.tone_hz,
        inp.gram,
        Some(inp.elements),
    );
    let mut front = Decimator::new(st.factor);
    let mut buf = Vec::new();
    let mut own = Vec::new();
    let mut dec = Vec::new();
    while src.read_frames(&mut buf, 8192)? > 0 {
        let raw: &[f32] = if nch == 1 {
            &buf
        } else {
            own.clear();
            own.extend(buf.iter().skip(inp.channel).step_by(nch).copied());
            &own
        };
        st.push_raw(raw);
        dec.clear();
        front.push(raw, &mut dec);
        st.push_decimated(&dec);
    }
    dec.clear();
    front.flush(&mut dec);
    st.push_decimated(&dec);
    Ok(st.finish(inp))
}

/// How far behind the input a tracker can still report an element that
/// starts, s: its look-ahead, the longest element, the capture around it,
/// the gap that confirms it, and a second of margin.
pub const ELEMENT_LAG_S: f64 = crate::analysis::tracker::LOOKAHEAD_S
    + crate::analysis::tracker::MAX_ELEMENT_S
    + crate::analysis::tracker::PRE_S
    + crate::analysis::tracker::POST_S
    + crate::analysis::tracker::MIN_GAP_S
    + 1.0;

/// The spectral pass as a stream: decimated samples, raw samples (for the
/// envelope picture) and elements go in as they become known, so the pass
/// can ride along with the measurement pass instead of reading the
/// recording a third time. Frames whose inclusion depends on elements not
/// yet known wait (the history they need is kept, bounded by
/// [`ELEMENT_LAG_S`]); key-up noise frames are decided once no element can
/// still appear near them; main-spectrum frames past the last known
/// element are summed aside and join the spectrum if another element comes.
/// Fed everything in order, it accumulates the same frames in the same
/// order as a pass that knew every element from the start.
pub struct SpectralStream {
    fs_in: u32,
    factor: usize,
    fsf: f64,
    n_main: usize,
    n_noise: usize,
    n_edge: usize,
    n_gram: usize,
    w_main: Welch,
    w_noise: Welch,
    w_rise: Welch,
    w_fall: Welch,
    w_gram: Welch,
    /// Main-spectrum frames past the last known element, summed.
    pending: Vec<f64>,
    pending_frames: u64,
    scratch: Vec<f64>,
    g_lo: usize,
    g_hi: usize,
    g_rows: usize,
    per_col: usize,
    /// The survey's spectrogram columns are used (same frames).
    use_pre: bool,
    gram: Vec<f32>,
    col_acc: Vec<f64>,
    col_n: usize,
    gram_cols: usize,
    gp: Vec<f64>,
    bucket: usize,
    env_at: u64,
    envelope: Vec<(f32, f32)>,
    env_max: f32,
    env_count: usize,
    keep: usize,
    /// Decimated history from absolute index `hist_start` on.
    hist: Vec<f32>,
    hist_start: u64,
    elements: Vec<(f64, f64)>,
    el_idx: usize,
    edge_events: Vec<(u64, bool)>,
    next_edge: usize,
    /// Main frames start here (0.1 s before the first element).
    t_first_i: Option<u64>,
    /// Main frames start before this (0.1 s after the last element).
    t_last_i: u64,
    next_main: u64,
    next_noise: u64,
    next_gram: u64,
    guard: u64,
    /// No element still to come starts before this decimated index.
    horizon: u64,
    /// Something came in out of the promised order: the results may differ
    /// from a pass that knew every element, and must not be used.
    broken: bool,
}

impl SpectralStream {
    /// For a recording of `total_in` frames at `fs_in`, analysed at
    /// `tone_hz`; `gram` is the survey's spectrogram of the channel.
    /// `elements`: every element up front (a pass of its own), or None when
    /// they will come with [`add_element`](Self::add_element).
    pub fn new(
        fs_in: u32,
        total_in: u64,
        tone_hz: f64,
        gram: Option<&SurveyGram>,
        elements: Option<&[(f64, f64)]>,
    ) -> SpectralStream {
        let factor = spectral_factor(fs_in, tone_hz);
        let fs = fs_in / factor as u32;
        let fsf = fs as f64;
        let total_frames = total_in / factor as u64;
        let duration = total_in as f64 / fs_in as f64;
        // The keyed passage sets the main frame length; while elements are
        // still to come it is taken as long (checked in `matches`).
        let passage = match elements {
            Some(els) => match (els.first(), els.last()) {
                (Some(a), Some(b)) => b.1 + 0.1 - (a.0 - 0.1).max(0.0),
                _ => duration,
            },
            None => f64::INFINITY,
        };
        let n_main = main_len(fs, passage, 1024 / factor);
        let n_noise = (n_main / 4).max(256 / factor);
        let n_edge = ((fsf * 0.04) as usize).next_power_of_two();
        let n_gram = crate::dsp::survey::survey_nfft(fs);
        let bin_gram = fsf / n_gram as f64;
        let g_lo = (((tone_hz - REGION_HALF_HZ).max(0.0)) / bin_gram) as usize;
        let g_hi = (((tone_hz + REGION_HALF_HZ).min(fsf / 2.0)) / bin_gram) as usize;
        let g_rows = g_hi.saturating_sub(g_lo) + 1;
        let per_col = frames_per_column(total_frames, n_gram);
        // The survey's columns are the same frames, window and transform:
        // take them (this channel's region) when they match.
        let use_pre = gram.is_some_and(|g| g.nfft == n_gram && g.frames_per_column == per_col);
        let mut st = SpectralStream {
            fs_in,
            factor,
            fsf,
            n_main,
            n_noise,
            n_edge,
            n_gram,
            w_main: Welch::new(n_main),
            w_noise: Welch::new(n_noise),
            w_rise: Welch::new(n_edge),
            w_fall: Welch::new(n_edge),
            w_gram: Welch::new(n_gram),
            pending: vec![0.0; n_main / 2 + 1],
            pending_frames: 0,
            scratch: vec![0.0; n_main / 2 + 1],
            g_lo,
            g_hi,
            g_rows,
            per_col,
            use_pre,
            gram: Vec::new(),
            col_acc: vec![0.0; g_rows],
            col_n: 0,
            gram_cols: 0,
            gp: vec![0.0; n_gram / 2 + 1],
            bucket: (total_in as usize / 4000).max(1),
            env_at: 0,
            envelope: Vec::new(),
            env_max: 0.0,
            env_count: 0,
            // Mono history, long enough for the longest frame.
            keep: n_main.max(n_edge).max(n_noise) * 2,
            hist: Vec::new(),
            hist_start: 0,
            elements: Vec::new(),
            el_idx: 0,
            edge_events: Vec::new(),
            next_edge: 0,
            t_first_i: None,
            t_last_i: 0,
            next_main: 0,
            next_noise: 0,
            next_gram: 0,
            guard: (NOISE_GUARD_S * fsf) as u64,
            horizon: 0,
            broken: false,
        };
        if let Some(els) = elements {
            let mut ev: Vec<(u64, bool)> = els
                .iter()
                .flat_map(|&(a, b)| [((a * fsf) as u64, true), ((b * fsf) as u64, false)])
                .collect();
            ev.sort();
            st.edge_events = ev;
            st.elements = els.to_vec();
            let (t_first, t_last) = match (els.first(), els.last()) {
                (Some(a), Some(b)) => ((a.0 - 0.1).max(0.0), b.1 + 0.1),
                _ => (0.0, duration),
            };
            st.t_first_i = Some((t_first * fsf) as u64);
            st.next_main = (t_first * fsf) as u64;
            st.t_last_i = (t_last * fsf) as u64;
            st.horizon = u64::MAX;
        }
        st
    }

    /// Decimation factor of the stream `push_decimated` expects.
    pub fn factor(&self) -> usize {
        self.factor
    }

    /// Raw (undecimated) samples of the channel, for the envelope picture.
    pub fn push_raw(&mut self, raw: &[f32]) {
        // Envelope buckets: the peak of every `bucket` input samples.
        let mut i = 0;
        while i < raw.len() {
            let take = (self.bucket - self.env_count).min(raw.len() - i);
            self.env_max = self.env_max.max(peak_abs(&raw[i..i + take]));
            self.env_count += take;
            i += take;
            self.env_at += take as u64;
            if self.env_count == self.bucket {
                let t = self.env_at as f64 / self.fs_in as f64;
                self.envelope
                    .push((t as f32, 20.0 * self.env_max.max(1e-7).log10()));
                self.env_max = 0.0;
                self.env_count = 0;
            }
        }
    }

    /// The next decimated samples (the channel through a `Decimator` of
    /// [`factor`](Self::factor)); its flush output counts too.
    pub fn push_decimated(&mut self, x: &[f32]) {
        self.hist.extend_from_slice(x);
        self.run();
    }

    /// The next element (50 % rise and fall, s), in time order.
    pub fn add_element(&mut self, a: f64, b: f64) {
        let fsf = self.fsf;
        let (ia, ib) = ((a * fsf) as u64, (b * fsf) as u64);
        if ia < self.horizon || self.edge_events.last().is_some_and(|e| e.0 > ia) || ib < ia {
            self.broken = true;
        }
        if self.t_first_i.is_none() {
            let t = ((a - 0.1).max(0.0) * fsf) as u64;
            if t < self.hist_start {
                self.broken = true;
            }
            self.t_first_i = Some(t);
            self.next_main = t;
        }
        self.elements.push((a, b));
        self.edge_events.push((ia, true));
        self.edge_events.push((ib, false));
        self.t_last_i = ((b + 0.1) * fsf) as u64;
        // Frames summed aside started before the horizon, so before this
        // element: they belong to the passage.
        if self.pending_frames > 0 {
            for (s, p) in self.w_main.sum.iter_mut().zip(self.pending.iter_mut()) {
                *s += *p;
                *p = 0.0;
            }
            self.w_main.frames += self.pending_frames;
            self.pending_frames = 0;
        }
        self.run();
    }

    /// No element still to come starts before `t_s` seconds.
    pub fn set_horizon_s(&mut self, t_s: f64) {
        let h = (t_s.max(0.0) * self.fsf) as u64;
        if h > self.horizon {
            self.horizon = h;
            self.run();
        }
    }

    /// Whether this stream's results are those of a pass run at `tone_hz`
    /// with every element known (`elements` the final list), so they can
    /// stand for it.
    pub fn matches(&self, tone_hz: f64, elements: &[(f64, f64)]) -> bool {
        let passage = match (elements.first(), elements.last()) {
            (Some(a), Some(b)) => b.1 + 0.1 - (a.0 - 0.1).max(0.0),
            _ => return false,
        };
        let bin_gram = self.fsf / self.n_gram as f64;
        let g_lo = (((tone_hz - REGION_HALF_HZ).max(0.0)) / bin_gram) as usize;
        let g_hi = (((tone_hz + REGION_HALF_HZ).min(self.fsf / 2.0)) / bin_gram) as usize;
        !self.broken
            && spectral_factor(self.fs_in, tone_hz) == self.factor
            && main_len(self.fsf as u32, passage, 1024 / self.factor) == self.n_main
            && (self.use_pre || (g_lo == self.g_lo && g_hi == self.g_hi))
            && elements == &self.elements[..]
    }

    /// Takes every frame the history and the known elements allow.
    fn run(&mut self) {
        let end = self.hist_start + self.hist.len() as u64;
        let hs = self.hist_start;
        let at = |a: u64, n: usize| -> Option<std::ops::Range<usize>> {
            let i = a.checked_sub(hs)? as usize;
            (i + n <= (end - hs) as usize).then_some(i..i + n)
        };
        if self.t_first_i.is_some() {
            let n = self.n_main;
            while self.next_main + n as u64 <= end {
                let included = self.next_main < self.t_last_i;
                if !included && self.next_main >= self.horizon {
                    break;
                }
                let Some(r) = at(self.next_main, n) else {
                    self.broken = true;
                    self.next_main += n as u64 / 2;
                    continue;
                };
                if included {
                    self.w_main.add(&self.hist[r]);
                } else if self.horizon != u64::MAX {
                    // Past the last element so far: belongs to the passage
                    // only if another element comes.
                    self.w_main.power(&self.hist[r], &mut self.scratch);
                    for (p, v) in self.pending.iter_mut().zip(&self.scratch) {
                        *p += v;
                    }
                    self.pending_frames += 1;
                } else {
                    // Every element known: the passage ended.
                    break;
                }
                self.next_main += n as u64 / 2;
            }
        }
        let n = self.n_noise as u64;
        while self.next_noise + n <= end
            && (self.next_noise + n).saturating_add(self.guard) <= self.horizon
        {
            let (a, b) = (self.next_noise, self.next_noise + n);
            if !self.busy(a, b) {
                match at(a, n as usize) {
                    Some(r) => self.w_noise.add(&self.hist[r]),
                    None => self.broken = true,
                }
            }
            self.next_noise += n / 2;
        }
        let n = self.n_gram;
        while !self.use_pre && self.next_gram + n as u64 <= end {
            let Some(r) = at(self.next_gram, n) else {
                self.broken = true;
                self.next_gram += n as u64 / 2;
                continue;
            };
            self.w_gram.power(&self.hist[r], &mut self.gp);
            let hi = self.g_hi.min(self.gp.len() - 1);
            for (c, p) in self.col_acc.iter_mut().zip(&self.gp[self.g_lo..=hi]) {
                *c += p;
            }
            self.col_n += 1;
            if self.col_n == self.per_col {
                let k = self.col_n as f64;
                self.gram
                    .extend(self.col_acc.iter().map(|v| (*v / k) as f32));
                self.col_acc.iter_mut().for_each(|v| *v = 0.0);
                self.col_n = 0;
                self.gram_cols += 1;
            }
            self.next_gram += n as u64 / 2;
        }
        let n = self.n_edge;
        while self.next_edge < self.edge_events.len() {
            let (c, rising) = self.edge_events[self.next_edge];
            let a = c.saturating_sub(n as u64 / 2);
            if a + n as u64 > end {
                break;
            }
            if a >= hs {
                let r = at(a, n).expect("inside the history");
                if rising {
                    self.w_rise.add(&self.hist[r]);
                } else {
                    self.w_fall.add(&self.hist[r]);
                }
            }
            self.next_edge += 1;
        }
        // Drop history no consumer needs any more, nor any element still
        // to come (its edge frames and, for the first, the passage start).
        let future = if self.horizon == u64::MAX {
            u64::MAX
        } else {
            self.horizon
                .saturating_sub((0.1 * self.fsf) as u64 + self.n_edge as u64 + 2)
        };
        let need = [
            // The main spectrum needs nothing more once its passage ended
            // with every element known (else a silent tail would be kept).
            match self.t_first_i {
                Some(_) if !(self.horizon == u64::MAX && self.next_main >= self.t_last_i) => {
                    self.next_main
                }
                _ => u64::MAX,
            },
            self.next_noise,
            if self.use_pre {
                u64::MAX
            } else {
                self.next_gram
            },
            self.edge_events
                .get(self.next_edge)
                .map_or(u64::MAX, |e| e.0.saturating_sub(self.n_edge as u64)),
            future,
        ]
        .into_iter()
        .min()
        .unwrap_or(end)
        .min(end);
        // Only once the dead stretch is half the buffer, so each sample is
        // moved a bounded number of times however long the kept stretch.
        let drop = need.saturating_sub(self.hist_start) as usize;
        if drop > self.keep && 2 * drop >= self.hist.len() {
            self.hist.drain(..drop.min(self.hist.len()));
            self.hist_start += drop as u64;
        }
    }

    /// Does [a, b) come within the guard of any element?
    fn busy(&mut self, a: u64, b: u64) -> bool {
        let (fsf, guard) = (self.fsf, self.guard);
        while self.el_idx < self.elements.len()
            && ((self.elements[self.el_idx].1 * fsf) as u64 + guard) < a
        {
            self.el_idx += 1;
        }
        self.elements[self.el_idx..]
            .iter()
            .take_while(|e| ((e.0 * fsf) as u64).saturating_sub(guard) < b)
            .any(|e| ((e.1 * fsf) as u64 + guard) > a)
    }

    /// The figures and pictures, once every sample has been pushed (the
    /// decimator's flush included) and every element added. `inp` gives the
    /// final tone, carrier level, unit and other tones.
    pub fn finish(mut self, inp: &SpectralInput) -> SpectralOutput {
        // Nothing past the recording's last sample.
        let last = self.env_at.div_ceil(self.factor as u64);
        self.hist
            .truncate(last.saturating_sub(self.hist_start) as usize);
        self.horizon = u64::MAX;
        self.run();
        let SpectralStream {
            factor,
            fsf,
            n_main,
            n_noise,
            n_edge,
            n_gram,
            w_main,
            w_noise,
            w_rise,
            w_fall,
            w_gram,
            g_lo,
            g_hi,
            g_rows,
            per_col,
            use_pre,
            mut gram,
            mut gram_cols,
            envelope,
            ..
        } = self;
        let pre = inp.gram.filter(|_| use_pre);
        let bin_gram = fsf / n_gram as f64;
        // Spectra relative to the carrier, main grid.
        let cp = inp.carrier_power.max(1e-30);
        let s_main = w_main.mean_rel(cp);
        let bin = fsf / n_main as f64;
        let rbw = w_main.enbw() * bin;
        let noise_rel = w_noise.mean_rel(cp);
        let bin_n = fsf / n_noise as f64;
        // Noise onto the main grid, as power in the main RBW.
        let scale_n = rbw / (w_noise.enbw() * bin_n);
        let noise_on_main: Vec<f64> = (0..s_main.len())
            .map(|k| {
                let x = k as f64 * bin / bin_n;
                let i = (x.floor() as usize).min(noise_rel.len() - 2);
                let f = (x - i as f64).clamp(0.0, 1.0);
                (noise_rel[i] * (1.0 - f) + noise_rel[i + 1] * f) * scale_n
            })
            .collect();
        let have_noise = w_noise.frames > 0;
        let s_shown = s_main.clone();
        let mut s_main = s_main;
        let reach = crate::dsp::downconvert::NOTCH_ZERO_HZ + crate::dsp::downconvert::NOTCH_RAMP_HZ;
        for (k, v) in s_main.iter_mut().enumerate() {
            if inp
                .others_hz
                .iter()
                .any(|&f| (k as f64 * bin - f).abs() < reach)
            {
                *v = if have_noise { noise_on_main[k] } else { 0.0 };
            }
        }
        let k_lo = (((inp.tone_hz - REGION_HALF_HZ).max(bin)) / bin).ceil() as usize;
        let k_hi = ((((inp.tone_hz + REGION_HALF_HZ).min(fsf / 2.0 - bin)) / bin).floor() as usize)
            .min(s_main.len() - 1);
        let corr: Vec<f64> = (0..s_main.len())
            .map(|k| {
                if have_noise {
                    (s_main[k] - noise_on_main[k]).max(0.0)
                } else {
                    s_main[k]
                }
            })
            .collect();
        let mut fig = SpectralFigures {
            rbw_hz: rbw,
            necessary_k: inp.k,
            ..Default::default()
        };
        let db = |v: f64| 10.0 * v.max(1e-30).log10();
        let noise_floor = if have_noise {
            let mut v: Vec<f64> = noise_on_main[k_lo..=k_hi].to_vec();
            v.sort_by(|a, b| a.total_cmp(b));
            Some(db(v[v.len() / 2]))
        } else {
            None
        };
        fig.noise_floor_dbc = noise_floor;
        let off = |k: f64| k * bin - inp.tone_hz;
        if w_main.frames > 0 && k_hi > k_lo + 2 {
            // 99 % occupied bandwidth (ITU-R SM.328, beta/2 = 0.5 % each side),
            // over the stretch where the signal stands above the noise (3 dB):
            // beyond it the noise-corrected bins are noise residue, which would
            // otherwise pile up in the 0.5 % tails and widen the figure.
            let (k_lo, k_hi) = if have_noise {
                let above = |k: usize| s_main[k] > 2.0 * noise_on_main[k];
                match (
                    (k_lo..=k_hi).find(|&k| above(k)),
                    (k_lo..=k_hi).rev().find(|&k| above(k)),
                ) {
                    (Some(a), Some(b)) => (a.saturating_sub(2).max(k_lo), (b + 2).min(k_hi)),
                    _ => (k_lo, k_hi),
                }
            } else {
                (k_lo, k_hi)
            };
            let total: f64 = corr[k_lo..=k_hi].iter().sum();
            if total > 0.0 {
                let mut acc = 0.0;
                let mut lo = None;
                let mut hi = None;
                for (k, &ck) in corr.iter().enumerate().take(k_hi + 1).skip(k_lo) {
                    let prev = acc;
                    acc += ck;
                    let frac = |target: f64| k as f64 - 0.5 + (target - prev) / ck.max(1e-300);
                    if lo.is_none() && acc >= 0.005 * total {
                        lo = Some(frac(0.005 * total));
                    }
                    if hi.is_none() && acc >= 0.995 * total {
                        hi = Some(frac(0.995 * total));
                    }
                }
                if let (Some(a), Some(b)) = (lo, hi) {
                    fig.occupied_bandwidth_hz = Some((b - a) * bin);
                    fig.occupied_edges_hz = Some([off(a), off(b)]);
                }
            }
            // x-dB bandwidths: outermost points at -x dBc, where above the floor.
            for x in X_DB {
                let level = 10f64.powf(-(x as f64) / 10.0);
                let key = x.to_string();
                // Reported only 10 dB clear of the floor, where noise moves it by under 0.5 dB.
                let floor_ok = noise_floor.is_none_or(|f| -(x as f64) > f + 10.0);
                let cross = |k: usize, inward_from_low: bool| -> f64 {
                    // Interpolate in dB between bin k and its inner neighbour.
                    let (a, b) = if inward_from_low {
                        (k - 1, k)
                    } else {
                        (k + 1, k)
                    };
                    let (da, dbv) = (db(corr[a]), db(corr[b]));
                    let t = if (dbv - da).abs() > 1e-9 {
                        ((-(x as f64)) - da) / (dbv - da)
                    } else {
                        1.0
                    };
                    a as f64 + (b as f64 - a as f64) * t.clamp(0.0, 1.0)
                };
                let lo = (k_lo + 1..=k_hi).find(|&k| corr[k] >= level);
                let hi = (k_lo..k_hi).rev().find(|&k| corr[k] >= level);
                match (floor_ok, lo, hi) {
                    (true, Some(a), Some(b)) if b >= a => {
                        let (fa, fb) = (cross(a, true), cross(b, false));
                        fig.bandwidth_hz.insert(key.clone(), Some((fb - fa) * bin));
                        fig.bandwidth_edges_hz.insert(key, Some([off(fa), off(fb)]));
                    }
                    _ => {
                        fig.bandwidth_hz.insert(key.clone(), None);
                        fig.bandwidth_edges_hz.insert(key, None);
                    }
                }
            }
        }
        // Necessary bandwidth Bn = B K, B = 1 / unit (Radio Regulations App. 1).
        if let Some(u) = inp.unit_s {
            let bn = necessary_bandwidth_hz(1.0 / u, inp.k);
            fig.necessary_bandwidth_hz = Some(bn);
            fig.occupied_to_necessary_ratio = fig.occupied_bandwidth_hz.map(|o| o / bn);
        }
        // Receiver passband from the noise floor's shape.
        if have_noise {
            // Only where the front end is flat: beyond it, its own roll-off
            // would pass for the receiver's.
            let flat = if factor > 1 {
                ((PASS_FRACTION * fsf / bin_n) as usize + 1).min(noise_rel.len())
            } else {
                noise_rel.len()
            };
            fig.passband_hz = passband(&noise_rel[..flat], bin_n, inp.tone_hz);
        }
        // Which edge clicks.
        let band = [
            CLICK_BAND_MIN_HZ.max(fig.necessary_bandwidth_hz.unwrap_or(0.0)),
            REGION_HALF_HZ,
        ];
        let bin_e = fsf / n_edge as f64;
        let band_power = |w: &Welch, rel: &[f64], binw: f64| -> f64 {
            rel.iter()
                .enumerate()
                .filter(|(k, _)| {
                    let d = (*k as f64 * binw - inp.tone_hz).abs();
                    d >= band[0] && d <= band[1]
                })
                .map(|(_, v)| *v)
                .sum::<f64>()
                / w.enbw()
        };
        let noise_band = if have_noise {
            Some(band_power(&w_noise, &noise_rel, bin_n))
        } else {
            None
        };
        // Sideband power with the noise removed; None when not above the noise's
        // own uncertainty (3 standard errors of the mean over the edges).
        let sig = |w: &Welch| -> f64 {
            3.0 * noise_band.unwrap_or(0.0) / (w.frames.max(1) as f64).sqrt()
        };
        let side = |w: &Welch| -> Option<f64> {
            (w.frames > 0)
                .then(|| band_power(w, &w.mean_rel(cp), bin_e) - noise_band.unwrap_or(0.0))
                .filter(|p| *p > sig(w) && *p > 0.0)
        };
        let (r, f) = (side(&w_rise), side(&w_fall));
        fig.clicks = Clicks {
            rise_sideband_db: r.map(db),
            fall_sideband_db: f.map(db),
            noise_sideband_db: noise_band.map(db),
            band_hz: band,
            // One edge clicks when its sideband power is 6 dB above the other's.
            clicking_edge: match (r, f) {
                (None, None) => "neither",
                (Some(_), None) => "rise",
                (None, Some(_)) => "fall",
                (Some(r), Some(f)) if r > 4.0 * f => "rise",
                (Some(r), Some(f)) if f > 4.0 * r => "fall",
                _ => "both",
            }
            .into(),
        };
        let to_view = |s: &[f64], rbw: f64| SpectrumView {
            first_offset_hz: off(k_lo as f64),
            step_hz: bin,
            dbc: s[k_lo..=k_hi.max(k_lo)]
                .iter()
                .map(|v| db(*v) as f32)
                .collect(),
            rbw_hz: rbw,
        };
        let spec_view = to_view(&s_shown, rbw);
        let noise_view = if have_noise {
            to_view(&noise_on_main, rbw)
        } else {
            SpectrumView::default()
        };
        if let Some(g) = pre {
            let nb = n_gram / 2 + 1;
            for col in g.columns.chunks_exact(nb) {
                gram.extend_from_slice(&col[g_lo..=g_hi.min(nb - 1)]);
                gram.extend(std::iter::repeat_n(
                    0.0,
                    g_rows - (g_hi.min(nb - 1) + 1 - g_lo),
                ));
            }
            gram_cols = g.columns.len() / nb;
        }
        let wsum_g: f64 = w_gram.win.iter().map(|&w| w as f64).sum();
        let gref = (wsum_g / 2.0).powi(2) * cp;
        let gram_view = SpectrogramView {
            t0_s: n_gram as f64 / 2.0 / fsf,
            dt_s: per_col as f64 * n_gram as f64 / 2.0 / fsf,
            f0_hz: g_lo as f64 * bin_gram,
            df_hz: bin_gram,
            rows: g_rows,
            cols: gram_cols,
            dbc: {
                // Stored column-major while streaming; transpose to row-major.
                let mut out = vec![0f32; g_rows * gram_cols];
                for c in 0..gram_cols {
                    for r in 0..g_rows {
                        out[r * gram_cols + c] = db(gram[c * g_rows + r] as f64 / gref) as f32;
                    }
                }
                out
            },
        };
        SpectralOutput {
            figures: fig,
            spectrum: spec_view,
            noise: noise_view,
            spectrogram: gram_view,
            envelope,
        }
    }
}

/// Passband edges where the (smoothed) noise floor falls 6 dB below its
/// plateau, searched outwards from the pitch; None when the floor is flat to
/// both ends (no receiver filter visible).
fn passband(noise: &[f64], bin: f64, tone_hz: f64) -> Option<[f64; 2]> {
    let n = noise.len();
    if n < 8 {
        return None;
    }
    let half = ((50.0 / bin).ceil() as usize).max(1);
    let sm: Vec<f64> = (0..n)
        .map(|k| {
            let a = k.saturating_sub(half);
            let b = (k + half + 1).min(n);
            let mut v: Vec<f64> = noise[a..b].to_vec();
            v.sort_by(|x, y| x.total_cmp(y));
            v[v.len() / 2]
        })
        .collect();
    let kc = ((tone_hz / bin).round() as usize).min(n - 1);
    // The plateau is the floor near the pitch (the receiver's passband).
    let w = ((300.0 / bin).ceil() as usize).max(2);
    let mut inner: Vec<f64> = sm[kc.saturating_sub(w)..(kc + w + 1).min(n)].to_vec();
    inner.sort_by(|a, b| a.total_cmp(b));
    let plateau = inner[inner.len() / 2];
    let thr = plateau / 4.0;
    if plateau <= 0.0 {
        return None;
    }
    let lo = (1..kc)
        .rev()
        .find(|&k| sm[k] < thr)
        .map(|k| (k as f64 + 0.5) * bin);
    let hi = (kc..n - 1)
        .find(|&k| sm[k] < thr)
        .map(|k| (k as f64 - 0.5) * bin);
    if lo.is_none() && hi.is_none() {
        return None;
    }
    Some([lo.unwrap_or(0.0), hi.unwrap_or((n - 1) as f64 * bin)])
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tests' pass input: a 700 Hz tone at -12 dBFS, 0.1 s units.
    fn input_700<'a>(path: &'a Path, els: &'a [(f64, f64)]) -> SpectralInput<'a> {
        SpectralInput {
            path,
            channel: 0,
            tone_hz: 700.0,
            carrier_power: 0.0625,
            elements: els,
            unit_s: Some(0.1),
            k: DEFAULT_K,
            others_hz: &[],
            gram: None,
        }
    }

    /// A 16-bit mono WAV writer for the test recordings.
    fn mono16(path: &Path, fs: u32) -> hound::WavWriter<std::io::BufWriter<std::fs::File>> {
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: fs,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        hound::WavWriter::create(path, spec).unwrap()
    }

    #[test]
    fn necessary_bandwidth_worked_example() {
        // Radio Regulations Appendix 1 example (from memory, BRIEF.md):
        // 25 WPM, B = 20 baud, K = 5 -> 100 Hz (designation 100HA1AAN).
        assert!((necessary_bandwidth_hz(20.0, 5.0) - 100.0).abs() < 1e-12);
        // PARIS timing gives B = 1/unit = 25/1.2 = 20.83 baud at 25 WPM;
        // the example rounds B to 20.
        assert!((necessary_bandwidth_hz(25.0 / 1.2, 3.0) - 62.5).abs() < 1e-9);
    }

    #[test]
    fn survey_spectrogram_equals_the_pass_own() {
        // Slow obvious reference: the pass transforming its own spectrogram
        // frames. The survey's columns (same frames, window and transform)
        // must give the identical view, here with 3 frames per column and a
        // part-column left over (22 s at 48 kHz, 12 kHz after the front
        // end: 2062 frames).
        use crate::dsp::survey::Survey;
        let fs = 48_000u32;
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("keyed.wav");
        let mut w = mono16(&path, fs);
        let n = 22 * fs as usize;
        let mut seed = 12345u32;
        for i in 0..n {
            let t = i as f64 / fs as f64;
            let on = if (t * 5.0).fract() < 0.5 { 0.25 } else { 0.0 };
            seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
            let noise = (seed >> 8) as f64 / (1u32 << 24) as f64 - 0.5;
            let x = on * (2.0 * std::f64::consts::PI * 700.0 * t).sin() + 0.01 * noise;
            w.write_sample((x * 32767.0) as i16).unwrap();
        }
        w.finalize().unwrap();
        let mut sv = Survey::new(fs, 1);
        sv.keep_spectrogram(n as u64);
        let mut src = WavSource::open(&path).unwrap();
        let mut buf = Vec::new();
        while src.read_frames(&mut buf, 8192).unwrap() > 0 {
            sv.push(&buf);
        }
        let s = sv.finish();
        let g = &s.spectrograms[0];
        // 48 kHz decimated by 4: 21 ms frames are 256 samples at 12 kHz.
        assert_eq!((g.nfft, g.frames_per_column), (256, 3));
        let els: Vec<(f64, f64)> = (0..110)
            .map(|k| (k as f64 * 0.2, k as f64 * 0.2 + 0.1))
            .collect();
        let mut inp = input_700(&path, &els);
        let own = spectral_pass(&inp).unwrap();
        inp.gram = Some(g);
        let shared = spectral_pass(&inp).unwrap();
        assert_eq!(own.spectrogram.cols, 687);
        assert_eq!(own.spectrogram, shared.spectrogram);
        assert_eq!(own.figures, shared.figures);
    }

    #[test]
    fn stream_fed_as_elements_come_equals_the_pass_that_knew_them() {
        // Reference: the pass of its own, every element known from the
        // start. The stream gets the same samples block by block and each
        // element 3.5 s after its end (as a tracker reports it), with the
        // horizon ELEMENT_LAG_S behind the input. A gap longer than the lag
        // (3-30 s) makes main-spectrum frames wait in the pending sum and
        // join when the second burst comes; noise frames wait for the
        // horizon. Same frames, same order (the pending sum only regroups
        // additions): figures equal to rounding.
        let fs = 48_000u32;
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("bursts.wav");
        let burst =
            |t0: f64| (0..10).map(move |k| (t0 + k as f64 * 0.2, t0 + k as f64 * 0.2 + 0.1));
        let els: Vec<(f64, f64)> = burst(1.0).chain(burst(30.0)).collect();
        let n = 38 * fs as usize;
        let mut seed = 777u32;
        let x: Vec<f32> = (0..n)
            .map(|i| {
                let t = i as f64 / fs as f64;
                let on = els.iter().any(|&(a, b)| t >= a && t < b);
                seed = seed.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
                let noise = (seed >> 8) as f64 / (1u32 << 24) as f64 - 0.5;
                let v = if on { 0.25 } else { 0.0 }
                    * (2.0 * std::f64::consts::PI * 700.0 * t).sin()
                    + 0.01 * noise;
                (v * 32767.0) as i16 as f32 / 32_768.0
            })
            .collect();
        let mut w = mono16(&path, fs);
        for v in &x {
            w.write_sample((v * 32_768.0) as i16).unwrap();
        }
        w.finalize().unwrap();
        let inp = input_700(&path, &els);
        let whole = spectral_pass(&inp).unwrap();

        let mut st = SpectralStream::new(fs, n as u64, 700.0, None, None);
        let mut front = Decimator::new(st.factor());
        let mut dec = Vec::new();
        let (mut pushed, mut told, mut most_pending) = (0usize, 0usize, 0u64);
        for blk in x.chunks(8192) {
            st.push_raw(blk);
            dec.clear();
            front.push(blk, &mut dec);
            st.push_decimated(&dec);
            pushed += blk.len();
            let now = pushed as f64 / fs as f64;
            while told < els.len() && els[told].1 + 3.5 <= now {
                st.add_element(els[told].0, els[told].1);
                told += 1;
            }
            st.set_horizon_s(now - ELEMENT_LAG_S);
            most_pending = most_pending.max(st.pending_frames);
        }
        dec.clear();
        front.flush(&mut dec);
        st.push_decimated(&dec);
        for &(a, b) in &els[told..] {
            st.add_element(a, b);
        }
        assert!(most_pending > 10, "pending frames: {most_pending}");
        assert!(st.matches(700.0, &els));
        let live = st.finish(&inp);
        let (a, b) = (&whole.figures, &live.figures);
        let close = |p: Option<f64>, q: Option<f64>| match (p, q) {
            (Some(p), Some(q)) => (p - q).abs() <= 1e-9 * p.abs().max(1.0),
            (p, q) => p == q,
        };
        assert!(close(a.occupied_bandwidth_hz, b.occupied_bandwidth_hz));
        assert!(a.occupied_bandwidth_hz.is_some());
        assert!(close(a.noise_floor_dbc, b.noise_floor_dbc));
        for (k, v) in &a.bandwidth_hz {
            assert!(
                close(*v, b.bandwidth_hz[k]),
                "{k} dB: {v:?} {:?}",
                b.bandwidth_hz[k]
            );
        }
        assert_eq!(a.clicks.clicking_edge, b.clicks.clicking_edge);
        assert!(close(a.clicks.rise_sideband_db, b.clicks.rise_sideband_db));
        assert!(close(a.clicks.fall_sideband_db, b.clicks.fall_sideband_db));
        assert_eq!(whole.noise, live.noise);
        assert_eq!(whole.spectrogram, live.spectrogram);
        assert_eq!(whole.envelope, live.envelope);
        for (p, q) in whole.spectrum.dbc.iter().zip(&live.spectrum.dbc) {
            assert!((p - q).abs() < 1e-4, "{p} {q}");
        }

        // An element that starts before the promised horizon spoils the
        // stream: it must not stand for the pass.
        let mut st = SpectralStream::new(fs, n as u64, 700.0, None, None);
        st.set_horizon_s(5.0);
        st.add_element(1.0, 1.1);
        assert!(!st.matches(700.0, &[(1.0, 1.1)]));
    }

    #[test]
    fn welch_of_a_bin_centred_sine_is_the_reference() {
        // Analytic: a sine of amplitude A on bin k has |X[k]|^2 = (A sum(w) / 2)^2.
        let n = 1024;
        let x: Vec<f32> = (0..8192)
            .map(|i| (0.5 * (2.0 * std::f64::consts::PI * 64.0 * i as f64 / n as f64).sin()) as f32)
            .collect();
        let p = welch_power(&x, n);
        let wsum: f64 = hann(n).iter().map(|&w| w as f64).sum();
        let r = (0.5 * wsum / 2.0).powi(2);
        assert!((p[64] / r - 1.0).abs() < 1e-4, "{}", p[64] / r);
    }
}
