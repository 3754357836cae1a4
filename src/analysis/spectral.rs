//! Key clicks and the spectral figures: a third pass over the recording,
//! once the elements are known. Welch-averaged power spectra (Welch 1967,
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
use std::sync::Arc;

use realfft::{RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex32;
use serde::{Deserialize, Serialize};

use super::views::{SpectrogramView, SpectrumView};
use crate::dsp::decimate::{factor_for, Decimator, PASS_FRACTION};
use crate::dsp::downconvert::plan_sizes;
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
    fft: Arc<dyn RealToComplex<f32>>,
    buf: Vec<f32>,
    spec: Vec<Complex32>,
    scratch: Vec<Complex32>,
    sum: Vec<f64>,
    frames: u64,
}

impl Welch {
    fn new(n: usize) -> Welch {
        let fft = RealFftPlanner::<f32>::new().plan_fft_forward(n);
        Welch {
            win: hann(n),
            buf: fft.make_input_vec(),
            spec: fft.make_output_vec(),
            scratch: fft.make_scratch_vec(),
            fft,
            sum: vec![0.0; n / 2 + 1],
            frames: 0,
        }
    }
    /// Power spectrum of `x` (length n) into `out`.
    fn power(&mut self, x: &[f32], out: &mut [f64]) {
        for ((b, v), w) in self.buf.iter_mut().zip(x).zip(&self.win) {
            *b = v * w;
        }
        self.fft
            .process_with_scratch(&mut self.buf, &mut self.spec, &mut self.scratch)
            .expect("sizes from the plan");
        for (o, s) in out.iter_mut().zip(&self.spec) {
            *o = s.norm_sqr() as f64;
        }
    }
    fn add(&mut self, x: &[f32]) {
        for ((b, v), w) in self.buf.iter_mut().zip(x).zip(&self.win) {
            *b = v * w;
        }
        self.fft
            .process_with_scratch(&mut self.buf, &mut self.spec, &mut self.scratch)
            .expect("sizes from the plan");
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

/// Runs the spectral pass. The spectra are taken from the input decimated
/// by [`spectral_factor`] (frames of the same durations, so the same
/// resolution); the envelope picture from the samples as they are.
pub fn spectral_pass(inp: &SpectralInput) -> Result<SpectralOutput> {
    let mut src = WavSource::open(inp.path)?;
    let info = src.info().clone();
    let fs_in = info.sample_rate_hz;
    let factor = spectral_factor(fs_in, inp.tone_hz);
    let mut front = Decimator::new(factor);
    let fs = fs_in / factor as u32;
    let fsf = fs as f64;
    let nch = info.channels as usize;
    let total_in = info.frames.unwrap_or(0);
    let total_frames = total_in / factor as u64;
    let duration = total_in as f64 / fs_in as f64;
    let (t_first, t_last) = match (inp.elements.first(), inp.elements.last()) {
        (Some(a), Some(b)) => ((a.0 - 0.1).max(0.0), b.1 + 0.1),
        _ => (0.0, duration),
    };
    let n_main = main_len(fs, t_last - t_first, 1024 / factor);
    let n_noise = (n_main / 4).max(256 / factor);
    let n_edge = ((fsf * 0.04) as usize).next_power_of_two();
    let n_gram = crate::dsp::survey::survey_nfft(fs);
    let mut w_main = Welch::new(n_main);
    let mut w_noise = Welch::new(n_noise);
    let mut w_rise = Welch::new(n_edge);
    let mut w_fall = Welch::new(n_edge);
    let mut w_gram = Welch::new(n_gram);
    let bin_gram = fsf / n_gram as f64;
    let g_lo = (((inp.tone_hz - REGION_HALF_HZ).max(0.0)) / bin_gram) as usize;
    let g_hi = (((inp.tone_hz + REGION_HALF_HZ).min(fsf / 2.0)) / bin_gram) as usize;
    let g_rows = g_hi.saturating_sub(g_lo) + 1;
    let per_col = frames_per_column(total_frames, n_gram);
    // The survey's columns are the same frames, window and transform: take
    // them (this channel's region) when they match.
    let pre = inp
        .gram
        .filter(|g| g.nfft == n_gram && g.frames_per_column == per_col);
    let mut gram: Vec<f32> = Vec::new();
    let mut col_acc = vec![0.0f64; g_rows];
    let mut col_n = 0usize;
    let mut gram_cols = 0usize;
    let env_buckets = 4000usize;
    let bucket = (total_in as usize / env_buckets).max(1);
    let mut env_at: u64 = 0; // input samples seen
    let mut envelope: Vec<(f32, f32)> = Vec::new();
    let mut env_max = 0f32;
    let mut env_count = 0usize;

    // Mono history, long enough for the longest frame, plus a time index.
    let keep = n_main.max(n_edge).max(n_noise) * 2;
    let mut hist: Vec<f32> = Vec::with_capacity(keep * 2);
    let mut hist_start: u64 = 0; // absolute index of hist[0]
    let mut next_main: u64 = (t_first * fsf) as u64;
    let mut next_noise: u64 = 0;
    let mut next_gram: u64 = 0;
    let mut edge_events: Vec<(u64, bool)> = inp
        .elements
        .iter()
        .flat_map(|&(a, b)| [((a * fsf) as u64, true), ((b * fsf) as u64, false)])
        .collect();
    edge_events.sort();
    let mut next_edge = 0usize;
    let mut el_idx = 0usize;
    let guard = (NOISE_GUARD_S * fsf) as u64;
    let busy = |a: u64, b: u64, el_idx: &mut usize| -> bool {
        // Does [a, b) come within the guard of any element?
        while *el_idx < inp.elements.len() && ((inp.elements[*el_idx].1 * fsf) as u64 + guard) < a {
            *el_idx += 1;
        }
        inp.elements[*el_idx..]
            .iter()
            .take_while(|e| ((e.0 * fsf) as u64).saturating_sub(guard) < b)
            .any(|e| ((e.1 * fsf) as u64 + guard) > a)
    };
    let mut buf = Vec::new();
    let mut own = Vec::new();
    let mut gp = vec![0.0; n_gram / 2 + 1];
    let mut ended = false;
    while !ended {
        let got = src.read_frames(&mut buf, 8192)?;
        let raw: &[f32] = if got == 0 {
            ended = true;
            &[]
        } else if nch == 1 {
            &buf
        } else {
            own.clear();
            own.extend(buf.iter().skip(inp.channel).step_by(nch).copied());
            &own
        };
        // Envelope buckets: the peak of every `bucket` input samples.
        let mut i = 0;
        while !ended && i < raw.len() {
            let take = (bucket - env_count).min(raw.len() - i);
            env_max = raw[i..i + take]
                .iter()
                .fold(env_max, |m, v| if v.abs() > m { v.abs() } else { m });
            env_count += take;
            i += take;
            env_at += take as u64;
            if env_count == bucket {
                let t = env_at as f64 / fs_in as f64;
                envelope.push((t as f32, 20.0 * env_max.max(1e-7).log10()));
                env_max = 0.0;
                env_count = 0;
            }
        }
        front.push(raw, &mut hist);
        if ended {
            // The last samples through the filter, the signal held after
            // the end as before the start.
            front.flush(&mut hist);
            // Nothing past the recording's last sample.
            let last = env_at.div_ceil(factor as u64);
            hist.truncate(last.saturating_sub(hist_start) as usize);
        }
        let end = hist_start + hist.len() as u64;
        let at = |hist: &[f32], a: u64, n: usize| -> std::ops::Range<usize> {
            let i = (a - hist_start) as usize;
            let _ = &hist[i..i + n];
            i..i + n
        };
        let t_last_i = (t_last * fsf) as u64;
        while next_main + n_main as u64 <= end.min(t_last_i.max(next_main + n_main as u64))
            && next_main < t_last_i
        {
            w_main.add(&hist[at(&hist, next_main, n_main)]);
            next_main += n_main as u64 / 2;
        }
        while next_noise + n_noise as u64 <= end {
            if !busy(next_noise, next_noise + n_noise as u64, &mut el_idx) {
                w_noise.add(&hist[at(&hist, next_noise, n_noise)]);
            }
            next_noise += n_noise as u64 / 2;
        }
        while pre.is_none() && next_gram + n_gram as u64 <= end {
            w_gram.power(&hist[at(&hist, next_gram, n_gram)], &mut gp);
            for (c, p) in col_acc.iter_mut().zip(&gp[g_lo..=g_hi.min(gp.len() - 1)]) {
                *c += p;
            }
            col_n += 1;
            if col_n == per_col {
                gram.extend(col_acc.iter().map(|v| (*v / col_n as f64) as f32));
                col_acc.iter_mut().for_each(|v| *v = 0.0);
                col_n = 0;
                gram_cols += 1;
            }
            next_gram += n_gram as u64 / 2;
        }
        while next_edge < edge_events.len() {
            let (c, rising) = edge_events[next_edge];
            let a = c.saturating_sub(n_edge as u64 / 2);
            if a + n_edge as u64 > end {
                break;
            }
            if a >= hist_start {
                let x = &hist[at(&hist, a, n_edge)];
                if rising {
                    w_rise.add(x);
                } else {
                    w_fall.add(x);
                }
            }
            next_edge += 1;
        }
        // Drop history no consumer needs any more.
        let need = [
            next_main.min(t_last_i),
            next_noise,
            if pre.is_none() { next_gram } else { u64::MAX },
            edge_events
                .get(next_edge)
                .map_or(u64::MAX, |e| e.0.saturating_sub(n_edge as u64)),
        ]
        .into_iter()
        .min()
        .unwrap_or(end)
        .min(end);
        if need > hist_start + keep as u64 {
            let drop = (need - hist_start) as usize;
            hist.drain(..drop.min(hist.len()));
            hist_start += drop as u64;
        }
    }

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
    let sig =
        |w: &Welch| -> f64 { 3.0 * noise_band.unwrap_or(0.0) / (w.frames.max(1) as f64).sqrt() };
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
    Ok(SpectralOutput {
        figures: fig,
        spectrum: spec_view,
        noise: noise_view,
        spectrogram: gram_view,
        envelope,
    })
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
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: fs,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let mut w = hound::WavWriter::create(&path, spec).unwrap();
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
        let mut inp = SpectralInput {
            path: &path,
            channel: 0,
            tone_hz: 700.0,
            carrier_power: 0.0625,
            elements: &els,
            unit_s: Some(0.1),
            k: DEFAULT_K,
            others_hz: &[],
            gram: None,
        };
        let own = spectral_pass(&inp).unwrap();
        inp.gram = Some(g);
        let shared = spectral_pass(&inp).unwrap();
        assert_eq!(own.spectrogram.cols, 687);
        assert_eq!(own.spectrogram, shared.spectrogram);
        assert_eq!(own.figures, shared.figures);
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
