//! Live analysis: the file pipeline run on an endless stream. The tone is
//! chosen by the same survey over an initial stretch, then the same
//! [`ToneTracker`] measures every element, first with the file lookahead
//! (so the state levels are established from the whole stretch) and then
//! with the short live lookahead. What is kept is bounded: the initial
//! stretch once, the last `window` elements (with their frequency traces,
//! for the mean-element chirp), and one spectrum frame.

use std::collections::VecDeque;
use std::path::Path;
use std::sync::Arc;

use realfft::{RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex32;

use super::report::Summary;
use super::tracker::{ToneTracker, TrackedElement, TrackerConfig, LIVE_LOOKAHEAD_S, LOOKAHEAD_S};
use super::{choose, rise_floor_s, timing, Options, SNR_BANDWIDTH_HZ};
use crate::dsp::stats::{median, spread, Spread};
use crate::dsp::survey::Survey;
use crate::dsp::window::hann;
use crate::error::{CwError, Result};

/// Choices for a live analysis.
#[derive(Clone, Debug)]
pub struct LiveConfig {
    /// Length of the stretch the tone is chosen from, s.
    pub initial_s: f64,
    /// Elements the running statistics cover.
    pub window: usize,
    /// Channel and pitch, as for files.
    pub options: Options,
    /// Columns of the spectrum line.
    pub spectrum_columns: usize,
    /// Half-width of the spectrum line around the pitch, Hz.
    pub spectrum_half_span_hz: f64,
}

impl Default for LiveConfig {
    fn default() -> Self {
        LiveConfig {
            initial_s: LOOKAHEAD_S,
            window: 20,
            options: Options::default(),
            spectrum_columns: 60,
            spectrum_half_span_hz: 1500.0,
        }
    }
}

/// One element's figures as shown live.
#[derive(Clone, Debug, PartialEq)]
pub struct LiveElement {
    /// 1-based count since the last reset.
    pub number: u64,
    /// 50 % rise and fall instants, s from the start of the stream.
    pub start_s: f64,
    pub end_s: f64,
    pub rise_ms: Option<f64>,
    pub fall_ms: Option<f64>,
    pub chirp_hz: f64,
    pub level_dbfs: f64,
    pub frequency_hz: f64,
    /// How far the analysis had read past the key-up when the element was
    /// measured, s (stream time: the analysis delay without audio buffering).
    pub found_after_s: f64,
}

/// Where the live analysis stands.
#[derive(Clone, Debug, PartialEq)]
pub enum Phase {
    /// Gathering the initial stretch (s heard so far of `initial_s`).
    Listening { heard_s: f64, initial_s: f64 },
    /// The stretch had no keyed tone; listening again.
    NoTone { heard_s: f64, initial_s: f64 },
    /// Measuring the tone chosen.
    Tracking { tone_hz: f64, channel: u16 },
}

/// A spectrum around the pitch for the display: `db[i]` is the strongest
/// Hann-windowed bin in column i, dB relative to a full-scale sine.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SpectrumLine {
    pub lo_hz: f64,
    pub hi_hz: f64,
    pub db: Vec<f32>,
}

/// Everything the live display shows; plain data, computed here.
#[derive(Clone, Debug, PartialEq)]
pub struct LiveView {
    pub phase: Phase,
    /// Stream time read so far, s.
    pub stream_s: f64,
    pub last: Option<LiveElement>,
    /// Elements since the last reset.
    pub count: u64,
    /// The running figures over the last `window` elements, shaped like a
    /// file's summary so the same limits judge them.
    pub summary: Summary,
    /// Level of the window's elements, dBFS.
    pub level_dbfs: Option<Spread>,
    /// Elements the summary covers.
    pub window_len: usize,
    /// Peak sample of the analysed channel since the last reset, dBFS.
    pub peak_dbfs: f64,
    pub clipped_samples: u64,
    pub spectrum: SpectrumLine,
}

/// Stream analysis state.
enum State {
    Listening {
        survey: Box<Survey>,
        held: Vec<f32>,
    },
    Tracking {
        tracker: Box<ToneTracker>,
        channel: usize,
        /// Stream time of the tracker's first sample, s.
        t0_s: f64,
    },
}

/// Live analysis of interleaved frames, pushed in blocks of any size.
pub struct LiveAnalyzer {
    fs: u32,
    channels: usize,
    cfg: LiveConfig,
    state: State,
    frames: u64,
    no_tone: bool,
    window: VecDeque<TrackedElement>,
    last: Option<LiveElement>,
    count: u64,
    new_elements: Vec<LiveElement>,
    peak: f32,
    clipped: u64,
    mono: Vec<f32>,
    spec_ring: Vec<f32>,
    spec_pos: usize,
    fft: Arc<dyn RealToComplex<f32>>,
    fft_in: Vec<f32>,
    fft_out: Vec<Complex32>,
    hann: Vec<f32>,
}

/// Spectrum frame length (about 85 ms at 48 kHz: 12 Hz bins).
fn spectrum_len(fs: u32) -> usize {
    ((fs as f64 * 0.085) as usize).next_power_of_two().max(256)
}

impl LiveAnalyzer {
    /// A live analysis of `channels`-channel input at `fs`.
    pub fn new(fs: u32, channels: u16, cfg: LiveConfig) -> Result<LiveAnalyzer> {
        if let Some(c) = cfg.options.channel {
            if c == 0 || c > channels {
                return Err(CwError::Usage(format!(
                    "the input has {channels} channel(s); --channel {c} does not exist"
                )));
            }
        }
        let n = spectrum_len(fs);
        let fft = RealFftPlanner::<f32>::new().plan_fft_forward(n);
        Ok(LiveAnalyzer {
            fs,
            channels: channels as usize,
            state: State::Listening {
                survey: Box::new(Survey::new(fs, channels as usize)),
                held: Vec::new(),
            },
            frames: 0,
            no_tone: false,
            window: VecDeque::new(),
            last: None,
            count: 0,
            new_elements: Vec::new(),
            peak: 0.0,
            clipped: 0,
            mono: Vec::new(),
            spec_ring: vec![0.0; n],
            spec_pos: 0,
            fft_in: fft.make_input_vec(),
            fft_out: fft.make_output_vec(),
            hann: hann(n),
            fft,
            cfg,
        })
    }

    /// Elements measured since the last call, oldest first.
    pub fn take_new(&mut self) -> Vec<LiveElement> {
        std::mem::take(&mut self.new_elements)
    }

    /// Clears the running statistics, the element count and the peak; the
    /// tone and the state levels stay.
    pub fn reset(&mut self) {
        self.window.clear();
        self.last = None;
        self.count = 0;
        self.peak = 0.0;
        self.clipped = 0;
    }

    fn display_channel(&self) -> usize {
        match &self.state {
            State::Tracking { channel, .. } => *channel,
            State::Listening { .. } => self.cfg.options.channel.map_or(0, |c| c as usize - 1),
        }
    }

    /// Feeds interleaved frames.
    pub fn push(&mut self, interleaved: &[f32]) {
        let nch = self.channels;
        let frames = (interleaved.len() / nch) as u64;
        let ch = self.display_channel();
        self.mono.clear();
        self.mono
            .extend(interleaved.iter().skip(ch).step_by(nch).copied());
        for &x in &self.mono {
            let a = x.abs();
            self.peak = self.peak.max(a);
            if a >= 0.9999 {
                self.clipped += 1;
            }
            self.spec_ring[self.spec_pos] = x;
            self.spec_pos = (self.spec_pos + 1) % self.spec_ring.len();
        }
        self.frames += frames;
        match &mut self.state {
            State::Tracking { tracker, .. } => tracker.push(&self.mono),
            State::Listening { survey, held } => {
                survey.push(interleaved);
                held.extend_from_slice(interleaved);
                if (held.len() / nch) as f64 >= self.cfg.initial_s * self.fs as f64 {
                    self.start_tracking();
                }
            }
        }
        self.collect();
    }

    /// Survey done: choose the tone, feed the stretch with the file
    /// lookahead, then switch to the live lookahead.
    fn start_tracking(&mut self) {
        let State::Listening { survey, held } = std::mem::replace(
            &mut self.state,
            State::Listening {
                survey: Box::new(Survey::new(self.fs, self.channels)),
                held: Vec::new(),
            },
        ) else {
            return;
        };
        let s = survey.finish();
        let cand = choose(&s, &self.cfg.options, Path::new("the input"))
            .ok()
            .flatten();
        let Some(cand) = cand else {
            self.no_tone = true;
            return;
        };
        let cfg = TrackerConfig {
            lookahead_s: LOOKAHEAD_S,
            ..TrackerConfig::live(self.fs)
        };
        let mut tr = ToneTracker::with_config(self.fs, cand.frequency_hz, cfg);
        // Earlier stretches without a tone were dropped: element times are
        // shifted by where this one began.
        let first = self.frames - (held.len() / self.channels) as u64;
        self.mono.clear();
        self.mono.extend(
            held.iter()
                .skip(cand.channel)
                .step_by(self.channels)
                .copied(),
        );
        tr.push(&self.mono);
        // The backlog is segmented, with these levels, from the next push on.
        tr.set_lookahead_s(LIVE_LOOKAHEAD_S);
        self.state = State::Tracking {
            tracker: Box::new(tr),
            channel: cand.channel,
            t0_s: first as f64 / self.fs as f64,
        };
    }

    /// Moves newly measured elements into the window.
    fn collect(&mut self) {
        let stream_s = self.stream_s();
        let State::Tracking { tracker, t0_s, .. } = &mut self.state else {
            return;
        };
        for mut e in tracker.take_elements() {
            e.start_s += *t0_s;
            e.end_s += *t0_s;
            e.rise_view = Vec::new();
            e.fall_view = Vec::new();
            self.count += 1;
            let le = LiveElement {
                number: self.count,
                start_s: e.start_s,
                end_s: e.end_s,
                rise_ms: e.rise_s.map(|v| v * 1e3),
                fall_ms: e.fall_s.map(|v| v * 1e3),
                chirp_hz: e.chirp_hz,
                level_dbfs: 10.0 * e.level_power.max(1e-30).log10(),
                frequency_hz: e.frequency_hz,
                found_after_s: stream_s - e.end_s,
            };
            if self.new_elements.len() < 10_000 {
                self.new_elements.push(le.clone());
            }
            self.last = Some(le);
            self.window.push_back(e);
            while self.window.len() > self.cfg.window.max(1) {
                self.window.pop_front();
            }
        }
    }

    /// Stream time read so far, s.
    pub fn stream_s(&self) -> f64 {
        self.frames as f64 / self.fs as f64
    }

    /// The figures over the window, shaped as a summary (the same fields
    /// `build_report` fills for a file, from the last `window` elements).
    pub fn summary(&self) -> Summary {
        let State::Tracking { tracker, .. } = &self.state else {
            return Summary {
                snr_bandwidth_hz: SNR_BANDWIDTH_HZ,
                ..Default::default()
            };
        };
        let els: Vec<&TrackedElement> = self.window.iter().collect();
        let durations: Vec<f64> = els.iter().map(|e| e.end_s - e.start_s).collect();
        let gaps: Vec<Option<f64>> = (0..els.len())
            .map(|i| {
                els.get(i + 1)
                    .filter(|_| !els[i].cut)
                    .map(|n| n.start_s - els[i].end_s)
            })
            .collect();
        let t = timing::analyse(&durations, &gaps);
        let col = |f: &dyn Fn(&TrackedElement) -> Option<f64>| -> Vec<f64> {
            els.iter().filter_map(|e| f(e)).collect()
        };
        let levels = col(&|e| Some(10.0 * e.level_power.max(1e-30).log10()));
        let level_dbfs = (!levels.is_empty()).then(|| median(&levels));
        let dc = tracker.downconverter();
        let snr_db = match (level_dbfs, tracker.noise_power()) {
            (Some(l), Some(pn)) if pn > 0.0 => {
                let a2 = 10f64.powf(l / 10.0);
                Some(10.0 * (a2 * dc.noise_bandwidth_hz() / (pn * SNR_BANDWIDTH_HZ)).log10())
            }
            _ => None,
        };
        let freqs = col(&|e| Some(e.frequency_hz));
        let band = dc.band();
        // The mean-element chirp over the window, as `build_report` does.
        let as_report: Vec<super::report::Element> = els
            .iter()
            .zip(&t.kinds)
            .enumerate()
            .map(|(i, (e, k))| super::report::Element {
                index: i + 1,
                start_s: e.start_s,
                duration_s: e.end_s - e.start_s,
                kind: *k,
                rise_ms: None,
                fall_ms: None,
                chirp_hz: e.chirp_hz,
                chirp_raw_hz: e.chirp_raw_hz,
                chirp_noise_hz: e.chirp_noise_hz,
                level_dbfs: 0.0,
                frequency_hz: e.frequency_hz,
                gap_before_s: None,
                trace: e.trace.clone(),
            })
            .collect();
        Summary {
            keyed_signal_found: !els.is_empty(),
            tone_hz: (!freqs.is_empty()).then(|| median(&freqs)),
            level_dbfs,
            snr_db,
            snr_bandwidth_hz: SNR_BANDWIDTH_HZ,
            wpm: t.wpm,
            unit_ms: t.unit_s.map(|u| u * 1e3),
            dah_dit_ratio: t.dah_dit_ratio,
            mark_space_ratio: t.mark_space_ratio,
            rise_ms: spread(&col(&|e| e.rise_s.map(|v| v * 1e3))),
            fall_ms: spread(&col(&|e| e.fall_s.map(|v| v * 1e3))),
            chirp_hz: spread(&col(&|e| Some(e.chirp_hz))),
            chirp_raw_hz: spread(&col(&|e| Some(e.chirp_raw_hz))),
            chirp_mean_element_hz: super::ensemble_chirp(&as_report),
            element_count: els.len(),
            dit_count: t
                .kinds
                .iter()
                .filter(|k| **k == super::report::Kind::Dit)
                .count(),
            dah_count: t
                .kinds
                .iter()
                .filter(|k| **k == super::report::Kind::Dah)
                .count(),
            envelope_bandwidth_hz: (band.hi_hz + band.hi_rolloff_hz / 2.0)
                - (band.lo_hz - band.lo_rolloff_hz / 2.0),
            rise_floor_ms: rise_floor_s(self.fs, tracker.center_hz()) * 1e3,
            baseband_rate_hz: dc.out_rate_hz(),
            ..Default::default()
        }
    }

    /// The spectrum of the newest `spectrum_len` samples around the pitch
    /// (or 200-3000 Hz before a tone is chosen).
    pub fn spectrum(&mut self) -> SpectrumLine {
        let n = self.spec_ring.len();
        for i in 0..n {
            self.fft_in[i] = self.spec_ring[(self.spec_pos + i) % n] * self.hann[i];
        }
        self.fft
            .process(&mut self.fft_in, &mut self.fft_out)
            .expect("buffer sizes come from the plan");
        let (lo, hi) = match &self.state {
            State::Tracking { tracker, .. } => {
                let c = tracker.center_hz();
                let h = self.cfg.spectrum_half_span_hz;
                ((c - h).max(0.0), c + h)
            }
            State::Listening { .. } => (200.0, 3000.0),
        };
        let hi = hi.min(self.fs as f64 / 2.0);
        let bin = self.fs as f64 / n as f64;
        // A full-scale sine gives |X| = sum(w) / 2 = n / 4 in its bin.
        let full = n as f32 / 4.0;
        let cols = self.cfg.spectrum_columns.max(1);
        let db = (0..cols)
            .map(|c| {
                let f0 = lo + (hi - lo) * c as f64 / cols as f64;
                let f1 = lo + (hi - lo) * (c + 1) as f64 / cols as f64;
                let k0 = (f0 / bin).round() as usize;
                let k1 = ((f1 / bin).round() as usize).max(k0 + 1);
                let m = self.fft_out[k0.min(n / 2)..k1.min(n / 2 + 1)]
                    .iter()
                    .map(|z| z.norm())
                    .fold(0.0f32, f32::max);
                20.0 * (m / full).max(1e-9).log10()
            })
            .collect();
        SpectrumLine {
            lo_hz: lo,
            hi_hz: hi,
            db,
        }
    }

    /// The whole display state.
    pub fn view(&mut self) -> LiveView {
        let phase = match &self.state {
            State::Tracking {
                tracker, channel, ..
            } => Phase::Tracking {
                tone_hz: tracker.center_hz(),
                channel: *channel as u16 + 1,
            },
            State::Listening { held, .. } => {
                let heard_s = (held.len() / self.channels) as f64 / self.fs as f64;
                let initial_s = self.cfg.initial_s;
                if self.no_tone {
                    Phase::NoTone { heard_s, initial_s }
                } else {
                    Phase::Listening { heard_s, initial_s }
                }
            }
        };
        let levels: Vec<f64> = self
            .window
            .iter()
            .map(|e| 10.0 * e.level_power.max(1e-30).log10())
            .collect();
        LiveView {
            phase,
            stream_s: self.stream_s(),
            last: self.last.clone(),
            count: self.count,
            summary: self.summary(),
            level_dbfs: spread(&levels),
            window_len: self.window.len(),
            peak_dbfs: 20.0 * (self.peak.max(1e-9) as f64).log10(),
            clipped_samples: self.clipped,
            spectrum: self.spectrum(),
        }
    }
}

#[cfg(test)]
mod tests;
