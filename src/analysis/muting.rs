//! Receive muting within one recording of the rig's own audio: how much the
//! receiver's audio (noise, other signals: everything but the sidetone's
//! pitch) drops while the key is down.
//!
//! The recording is cut into 21 ms frames (1024 samples at 48 kHz) with a
//! 4-term Blackman-Harris window, whose -92 dB sidelobes keep even a loud
//! sidetone out of bins more than four bins away; each frame's power over
//! 100 Hz to min(5 kHz, 0.45 fs) with ±250 Hz around the sidetone pitch left
//! out is its background. Frames wholly inside an
//! element (25 ms clear of its edges) are key-down; frames wholly inside a
//! gap (25 ms clear of both edges) are key-up. Receivers that mute for a
//! whole transmission (semi break-in, with a hang time) stay muted in the
//! gaps between elements. So the key-up reference is the quiet time: the
//! lead-in before the first element, the second half of each pause between
//! transmissions (gaps of at least max(1 s, 12 units)) and the tail from 1 s
//! after the last element, when there is at least 0.2 s of it; otherwise
//! (full break-in, QSK, or no quiet time recorded) every key-up frame.

use std::path::Path;

use realfft::RealFftPlanner;
use serde::{Deserialize, Serialize};

use crate::dsp::window::blackman_harris;
use crate::error::Result;
use crate::input::wav::WavSource;
use crate::input::FrameSource;

/// Frames this close to an edge are neither key-down nor key-up, s.
const GUARD_S: f64 = 0.025;
/// Half-width of the band left out around the sidetone, Hz.
pub const SIDETONE_NOTCH_HZ: f64 = 250.0;
/// Quiet time needed for the quiet-time reference, s.
const MIN_QUIET_S: f64 = 0.2;
/// The tail counts as quiet from this long after the last element, s.
const TAIL_QUIET_S: f64 = 1.0;
/// Background band, Hz.
const BAND_LO_HZ: f64 = 100.0;
const BAND_HI_HZ: f64 = 5000.0;
/// Largest depth reported; deeper muting (digital silence) reads this.
pub const MAX_DEPTH_DB: f64 = 120.0;

/// What the muting figure was computed from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MutingFigures {
    /// Background level while the key is down and while it is up, dBFS
    /// (power over the background band, full-scale sine = 0 dBFS).
    pub key_down_dbfs: f64,
    pub key_up_dbfs: f64,
    /// "quiet time" (lead-in, second halves of pauses, tail from 1 s after
    /// the last element) or "all gaps" (too little quiet time recorded).
    pub key_up_from: String,
    pub key_down_frames: u64,
    pub key_up_frames: u64,
}

impl MutingFigures {
    /// Key-up less key-down, dB, at most `MAX_DEPTH_DB`.
    pub fn depth_db(&self) -> f64 {
        (self.key_up_dbfs - self.key_down_dbfs).min(MAX_DEPTH_DB)
    }
}

/// Where a frame lies.
#[derive(Clone, Copy, PartialEq, Debug)]
enum Where {
    Down,
    /// Key-up; true when in a pause's second half, the lead-in or the tail.
    Up(bool),
    Neither,
}

/// Classifies [a, b) (seconds) against the elements.
fn classify(a: f64, b: f64, els: &[(f64, f64)], pause_s: f64, idx: &mut usize) -> Where {
    while *idx < els.len() && els[*idx].1 + GUARD_S < a {
        *idx += 1;
    }
    // Element idx is the first that ends after a - guard.
    if let Some(&(s, e)) = els.get(*idx) {
        if a >= s + GUARD_S && b <= e - GUARD_S {
            return Where::Down;
        }
        if b + GUARD_S > s {
            return Where::Neither;
        }
    }
    // In the gap before element idx.
    let prev_end = if *idx > 0 {
        Some(els[*idx - 1].1)
    } else {
        None
    };
    let next_start = els.get(*idx).map(|e| e.0);
    if prev_end.is_some_and(|p| a < p + GUARD_S) {
        return Where::Neither;
    }
    let quiet = match (prev_end, next_start) {
        (None, _) => true,
        (Some(p), None) => a >= p + TAIL_QUIET_S,
        (Some(p), Some(n)) => n - p >= pause_s && a >= 0.5 * (p + n),
    };
    Where::Up(quiet)
}

/// Measures the muting over the recording, given the sidetone's pitch and
/// its elements' (50 % rise, 50 % fall) instants; `unit_s` is the PARIS unit.
pub fn measure(
    path: &Path,
    channel: usize,
    sidetone_hz: f64,
    elements: &[(f64, f64)],
    unit_s: Option<f64>,
) -> Result<Option<MutingFigures>> {
    if elements.is_empty() {
        return Ok(None);
    }
    let mut src = WavSource::open(path)?;
    let info = src.info().clone();
    let fs = info.sample_rate_hz as f64;
    let nch = info.channels as usize;
    let n = ((fs * 0.02) as usize).next_power_of_two().max(64);
    let fft = RealFftPlanner::<f32>::new().plan_fft_forward(n);
    let win = blackman_harris(n);
    let mut buf = fft.make_input_vec();
    let mut spec = fft.make_output_vec();
    let mut scratch = fft.make_scratch_vec();
    let bin = fs / n as f64;
    let hi = BAND_HI_HZ.min(0.45 * fs);
    let bins: Vec<usize> = (0..=n / 2)
        .filter(|&k| {
            let f = k as f64 * bin;
            f >= BAND_LO_HZ && f <= hi && (f - sidetone_hz).abs() > SIDETONE_NOTCH_HZ
        })
        .collect();
    // Power of a full-scale sine in one Hann bin, for dBFS; a band's power
    // is the sum of its bins over the window's noise-equivalent bandwidth.
    let wsum: f64 = win.iter().map(|&w| w as f64).sum();
    let sine_ref = (wsum / 2.0).powi(2) * crate::dsp::window::enbw_bins(&win);
    let pause_s = unit_s.map_or(1.0, |u| (12.0 * u).max(1.0));

    let (mut down, mut up_all, mut up_quiet) = ((0.0, 0u64), (0.0, 0u64), (0.0, 0u64));
    let mut pending: Vec<f32> = Vec::with_capacity(4 * n);
    let mut start: u64 = 0; // absolute index of pending[0]
    let mut idx = 0usize;
    let mut block = Vec::new();
    loop {
        let got = src.read_frames(&mut block, 8192)?;
        if got == 0 {
            break;
        }
        pending.extend(block.iter().skip(channel).step_by(nch));
        let mut off = 0;
        while pending.len() - off >= n {
            let a = (start + off as u64) as f64 / fs;
            let w = classify(a, a + n as f64 / fs, elements, pause_s, &mut idx);
            if w != Where::Neither {
                for (i, b) in buf.iter_mut().enumerate() {
                    *b = pending[off + i] * win[i];
                }
                fft.process_with_scratch(&mut buf, &mut spec, &mut scratch)
                    .expect("sizes from the plan");
                let p: f64 = bins.iter().map(|&k| spec[k].norm_sqr() as f64).sum();
                let acc = match w {
                    Where::Down => &mut down,
                    Where::Up(true) => {
                        up_quiet.0 += p;
                        up_quiet.1 += 1;
                        &mut up_all
                    }
                    _ => &mut up_all,
                };
                acc.0 += p;
                acc.1 += 1;
            }
            off += n / 2;
        }
        pending.drain(..off);
        start += off as u64;
    }
    let quiet_frames = (MIN_QUIET_S * fs / (n / 2) as f64).ceil() as u64;
    let (up, from) = if up_quiet.1 >= quiet_frames.max(4) {
        (up_quiet, "quiet time")
    } else {
        (up_all, "all gaps")
    };
    if down.1 < 4 || up.1 < 4 {
        return Ok(None);
    }
    let dbfs = |acc: (f64, u64)| 10.0 * (acc.0 / acc.1 as f64 / sine_ref).max(1e-30).log10();
    Ok(Some(MutingFigures {
        key_down_dbfs: dbfs(down),
        key_up_dbfs: dbfs(up),
        key_up_from: from.into(),
        key_down_frames: down.1,
        key_up_frames: up.1,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frames_are_classified_by_edges_and_pauses() {
        // Two elements 0.1 s long with a short gap, then a 3 s pause.
        let els = [(1.0, 1.1), (1.2, 1.3), (4.3, 4.4)];
        let mut i = 0;
        assert_eq!(classify(0.1, 0.11, &els, 1.0, &mut i), Where::Up(true));
        assert_eq!(classify(1.03, 1.04, &els, 1.0, &mut i), Where::Down);
        assert_eq!(classify(1.09, 1.10, &els, 1.0, &mut i), Where::Neither);
        assert_eq!(classify(1.13, 1.14, &els, 1.0, &mut i), Where::Up(false));
        // First half of the pause: still hang time, not quiet.
        assert_eq!(classify(2.0, 2.01, &els, 1.0, &mut i), Where::Up(false));
        assert_eq!(classify(3.5, 3.51, &els, 1.0, &mut i), Where::Up(true));
        // The tail: quiet from 1 s after the last element.
        assert_eq!(classify(5.0, 5.01, &els, 1.0, &mut i), Where::Up(false));
        assert_eq!(classify(5.5, 5.51, &els, 1.0, &mut i), Where::Up(true));
    }
}
