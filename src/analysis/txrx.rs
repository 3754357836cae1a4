//! Transmit/receive timing from a two-channel recording: the key channel
//! (the rig's own audio with its sidetone, or a keyed tone on the keyer
//! line) against the RF channel (the monitor receiver).
//!
//! Three passes over the file, each streaming:
//! 1. Survey of every channel; the keyed tone of each of the two channels
//!    is chosen as `analyze` chooses one (`super::choose`).
//! 2. One [`ToneTracker`] per channel gives every element's 50 % rise and
//!    fall instants. Key elements are grouped into transmissions (gaps of at
//!    least max(1 s, 12 dit units) separate them) and paired with RF
//!    elements by overlap after a coarse lag (the median nearest-rise
//!    difference within ±200 ms).
//!    A key channel without a keyed tone is taken for a keyer line: its
//!    steps ([`StepDetector`]) give the key elements.
//! 3. [`BackgroundMeter`] on the key channel (sidetone pitch notched out,
//!    10 ms mean square every 1 ms) feeds [`RecoveryScan`], which finds
//!    when the background is back within 3 dB of its level before each
//!    transmission.
//!
//! Memory: the trackers' few seconds of baseband and per-element results,
//! about 1 s of background values, and per-transmission results.

use std::collections::VecDeque;
use std::ops::Range;
use std::path::Path;

use serde::{Deserialize, Serialize};

use super::tracker::{ToneTracker, MIN_GAP_S, MIN_MARK_S};
use super::{choose, timing, Options, BLOCK_FRAMES};
use crate::dsp::background::BackgroundMeter;
use crate::dsp::key_steps::{marks_from_steps, StepDetector};
use crate::dsp::stats::{median, spread, Spread};
use crate::dsp::survey::Survey;
use crate::error::{CwError, Result};
use crate::input::wav::WavSource;
use crate::input::FrameSource;

/// Transmissions are separated by key-up gaps of at least this, s ...
pub const MIN_SEPARATION_S: f64 = 1.0;
/// ... or of this many dit units, whichever is longer.
pub const SEPARATION_UNITS: f64 = 12.0;
/// Window of the nearest-rise search that sets the coarse lag, s.
pub const COARSE_WINDOW_S: f64 = 0.2;
/// Half-width of the sidetone notch (−3 dB of each of its two stages), Hz.
pub const NOTCH_HALF_WIDTH_HZ: f64 = 100.0;
/// Background mean-square window and hop, s.
pub const BACKGROUND_WINDOW_S: f64 = 0.010;
pub const BACKGROUND_HOP_S: f64 = 0.001;
/// The level before a transmission: median over at most this much key-up, s ...
pub const BEFORE_SPAN_S: f64 = 1.0;
/// ... ending this long before the first 50 % rise, s ...
pub const BEFORE_GUARD_S: f64 = 0.05;
/// ... and at least this long, s.
pub const MIN_BEFORE_S: f64 = 0.05;
/// Recovered: within this many dB of the level before ...
pub const RECOVERED_DB: f64 = 3.0;
/// ... and staying there this long, s.
pub const HOLD_S: f64 = 0.02;
/// Background values before this time are filter start-up, s.
pub const START_GUARD_S: f64 = 0.1;
/// Mean square below which the key channel counts as silent (−147 dBFS).
pub const SILENT_POWER: f64 = 1e-15;
/// A keyer line's steps count from this fraction of its tallest step.
pub const LINE_STEP_FRACTION: f64 = 0.4;
/// A key channel whose peak stays below this (−60 dBFS) holds no keyer line.
pub const MIN_LINE_PEAK: f64 = 1e-3;
/// A keyer line's tallest step stands at least this many times above the
/// median step-detector output (white noise alone reaches about 7).
pub const LINE_STEP_OVER_MEDIAN: f64 = 30.0;

/// Which channels and tones to use.
#[derive(Clone, Debug)]
pub struct TimingOptions {
    /// 1-based key channel (the rig's own audio or keyer line).
    pub key_channel: u16,
    /// 1-based RF channel (the monitor receiver).
    pub rf_channel: u16,
    /// Pitch of the key channel's tone, Hz; default: its strongest keyed tone.
    pub key_tone_hz: Option<f64>,
    /// Pitch of the RF channel's tone, Hz.
    pub rf_tone_hz: Option<f64>,
}

impl Default for TimingOptions {
    fn default() -> Self {
        TimingOptions {
            key_channel: 1,
            rf_channel: 2,
            key_tone_hz: None,
            rf_tone_hz: None,
        }
    }
}

/// One element by its 50 % instants, s.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Mark {
    pub rise_s: f64,
    pub fall_s: f64,
}

impl Mark {
    fn duration(&self) -> f64 {
        self.fall_s - self.rise_s
    }
}

/// The recording and the tones followed.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct TimingInput {
    pub path: String,
    pub sample_rate_hz: u32,
    pub channels: u16,
    pub key_channel: u16,
    pub rf_channel: u16,
    pub duration_s: f64,
    /// What the key channel carries: "tone" (a sidetone or keyed audio
    /// tone) or "keyer line" (a keying level, followed by its steps).
    pub key_signal: String,
    /// Pitch of the key channel's tone (median of its elements), Hz; null
    /// for a keyer line.
    pub key_tone_hz: Option<f64>,
    /// Pitch of the RF channel's tone, Hz.
    pub rf_tone_hz: f64,
    pub key_clipped_samples: u64,
    pub rf_clipped_samples: u64,
}

/// The timing figures.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct TimingFigures {
    /// Median over all paired elements except each transmission's first of
    /// (RF 50 % rise − key 50 % rise), ms.
    pub delay_ms: Option<f64>,
    /// Median over the same elements of (RF 50 % fall − key 50 % fall), ms.
    pub fall_delay_ms: Option<f64>,
    /// Median over transmissions of (key − RF duration) of the first
    /// element, minus the median of (key − RF duration) over the other
    /// elements, ms.
    pub first_element_shortening_ms: Option<f64>,
    /// Median over transmissions of the time from the last key 50 % fall
    /// until the key channel's background is back within 3 dB of its level
    /// before the transmission, ms.
    pub rx_recovery_ms: Option<f64>,
    /// Number of transmissions.
    pub transmissions: usize,
    /// Spread of the rise delays behind `delay_ms`, ms.
    pub delay_spread_ms: Option<Spread>,
    /// Spread of the fall delays behind `fall_delay_ms`, ms.
    pub fall_delay_spread_ms: Option<Spread>,
}

/// How the elements of the two channels were matched.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct Pairing {
    pub key_elements: usize,
    pub rf_elements: usize,
    pub paired: usize,
    /// Key elements with no RF element overlapping them.
    pub unpaired_key: usize,
    /// RF elements with no key element.
    pub unpaired_rf: usize,
    /// Key-up gap that separates transmissions: max(1 s, 12 dit units), s.
    pub separation_s: f64,
    /// Coarse lag used for pairing (median nearest-rise difference), ms.
    pub coarse_lag_ms: f64,
}

/// One transmission.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct TransmissionRow {
    /// From 1.
    pub index: usize,
    /// First key 50 % rise, s from the start of the recording.
    pub start_s: f64,
    /// Last key 50 % fall, s.
    pub end_s: f64,
    /// Key elements in it.
    pub elements: usize,
    /// 50 %-to-50 % duration of the first element on the key channel, ms.
    pub first_key_ms: f64,
    /// ... and on the RF channel (null when it has no RF element).
    pub first_rf_ms: Option<f64>,
    /// (first_key_ms − first_rf_ms) minus the median (key − RF duration)
    /// of the other elements, ms.
    pub shortening_ms: Option<f64>,
    /// Last key 50 % fall to background back within 3 dB, ms.
    pub recovery_ms: Option<f64>,
    /// The key channel's background before the transmission (sidetone
    /// notched out), dBFS.
    pub background_dbfs: Option<f64>,
}

/// The whole result of `cwaudit timing`.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct TimingReport {
    pub tool: String,
    pub version: String,
    pub input: TimingInput,
    pub timing: TimingFigures,
    pub per_transmission: Vec<TransmissionRow>,
    pub pairing: Pairing,
    pub warnings: Vec<String>,
}

/// Splits key elements into transmissions: runs separated by key-up gaps of
/// at least `separation_s`.
pub fn group(key: &[Mark], separation_s: f64) -> Vec<Range<usize>> {
    let mut out = Vec::new();
    let mut start = 0;
    for i in 1..=key.len() {
        if i == key.len() || key[i].rise_s - key[i - 1].fall_s >= separation_s {
            if i > start {
                out.push(start..i);
            }
            start = i;
        }
    }
    out
}

/// Coarse lag: median over key elements of the nearest RF rise within
/// ±`COARSE_WINDOW_S`, s (0 when none).
pub fn coarse_lag(key: &[Mark], rf: &[Mark]) -> f64 {
    let mut diffs = Vec::new();
    let mut j = 0;
    for k in key {
        while j < rf.len() && rf[j].rise_s < k.rise_s - COARSE_WINDOW_S {
            j += 1;
        }
        let mut best: Option<f64> = None;
        let mut m = j;
        while m < rf.len() && rf[m].rise_s <= k.rise_s + COARSE_WINDOW_S {
            let d = rf[m].rise_s - k.rise_s;
            if best.is_none_or(|b| d.abs() < b.abs()) {
                best = Some(d);
            }
            m += 1;
        }
        diffs.extend(best);
    }
    if diffs.is_empty() {
        0.0
    } else {
        median(&diffs)
    }
}

/// Pairs each key element with the RF element that overlaps it most once
/// shifted by `lag` s; an RF element goes to the key element it overlaps
/// most. Returns the RF index per key element.
pub fn pair(key: &[Mark], rf: &[Mark], lag: f64) -> Vec<Option<usize>> {
    let mut best: Vec<Option<(usize, f64)>> = vec![None; key.len()];
    let mut j0 = 0;
    for (i, k) in key.iter().enumerate() {
        let (a, b) = (k.rise_s + lag, k.fall_s + lag);
        while j0 < rf.len() && rf[j0].fall_s <= a {
            j0 += 1;
        }
        let mut m = j0;
        while m < rf.len() && rf[m].rise_s < b {
            let ov = b.min(rf[m].fall_s) - a.max(rf[m].rise_s);
            if ov > 0.0 && best[i].is_none_or(|(_, o)| ov > o) {
                best[i] = Some((m, ov));
            }
            m += 1;
        }
    }
    let mut owner: Vec<Option<(usize, f64)>> = vec![None; rf.len()];
    for (i, b) in best.iter().enumerate() {
        if let Some((j, ov)) = *b {
            if owner[j].is_none_or(|(_, o)| ov > o) {
                owner[j] = Some((i, ov));
            }
        }
    }
    let mut out = vec![None; key.len()];
    for (j, o) in owner.iter().enumerate() {
        if let Some((i, _)) = *o {
            out[i] = Some(j);
        }
    }
    out
}

/// The delay and shortening figures, and per-transmission rows without the
/// recovery.
pub fn delays(
    key: &[Mark],
    rf: &[Mark],
    groups: &[Range<usize>],
    pairs: &[Option<usize>],
) -> (TimingFigures, Vec<TransmissionRow>) {
    let mut first = vec![false; key.len()];
    for g in groups {
        first[g.start] = true;
    }
    let (mut rise, mut fall, mut diff) = (Vec::new(), Vec::new(), Vec::new());
    for (i, p) in pairs.iter().enumerate() {
        if let (Some(j), false) = (*p, first[i]) {
            rise.push((rf[j].rise_s - key[i].rise_s) * 1e3);
            fall.push((rf[j].fall_s - key[i].fall_s) * 1e3);
            diff.push((key[i].duration() - rf[j].duration()) * 1e3);
        }
    }
    let med = |v: &[f64]| (!v.is_empty()).then(|| median(v));
    let others = med(&diff);
    let rows: Vec<TransmissionRow> = groups
        .iter()
        .enumerate()
        .map(|(n, g)| {
            let k = key[g.start];
            let first_rf_ms = pairs[g.start].map(|j| rf[j].duration() * 1e3);
            let first_key_ms = k.duration() * 1e3;
            TransmissionRow {
                index: n + 1,
                start_s: k.rise_s,
                end_s: key[g.end - 1].fall_s,
                elements: g.len(),
                first_key_ms,
                first_rf_ms,
                shortening_ms: first_rf_ms.zip(others).map(|(r, o)| first_key_ms - r - o),
                recovery_ms: None,
                background_dbfs: None,
            }
        })
        .collect();
    let sh: Vec<f64> = rows.iter().filter_map(|r| r.shortening_ms).collect();
    let figs = TimingFigures {
        delay_ms: med(&rise),
        fall_delay_ms: med(&fall),
        first_element_shortening_ms: med(&sh),
        rx_recovery_ms: None,
        transmissions: groups.len(),
        delay_spread_ms: spread(&rise),
        fall_delay_spread_ms: spread(&fall),
    };
    (figs, rows)
}

/// How the recovery search of one transmission ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Outcome {
    Recovered,
    /// Too little key-up before the transmission to set the level.
    NoLevelBefore,
    /// The key channel is silent before the transmission.
    Silent,
    /// Not back within 3 dB before the next transmission began.
    NotBeforeNext,
    /// Not back within 3 dB before the recording ended.
    NotBeforeEnd,
    /// The key channel is a keyer line: no receiver audio.
    KeyerLine,
}

/// Recovery of one transmission.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Recovery {
    /// Background mean square before the transmission.
    pub level_before: Option<f64>,
    /// Last key 50 % fall to recovery, s.
    pub recovery_s: Option<f64>,
    pub outcome: Outcome,
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Phase {
    Before,
    AwaitFall,
    Scan,
}

/// Streaming search for the receiver's recovery after each transmission.
/// Fed (time, background mean square) in time order. The level before a
/// transmission is the median over key-up from `BEFORE_SPAN_S` before its
/// first rise (but not before the previous transmission's recovery, or its
/// last fall) to `BEFORE_GUARD_S` before it; when the previous transmission
/// never recovered, its level carries over instead. Recovery
/// is the first instant after the last fall from which the background stays
/// within `RECOVERED_DB` of that level for `HOLD_S`.
pub struct RecoveryScan {
    tx: Vec<(f64, f64)>,
    k: usize,
    ring: VecDeque<(f64, f64)>,
    boundary: f64,
    phase: Phase,
    level: Option<f64>,
    run_start: Option<f64>,
    carry: Option<f64>,
    results: Vec<Recovery>,
}

impl RecoveryScan {
    /// `tx`: (first 50 % rise, last 50 % fall) of each transmission, in order.
    pub fn new(tx: Vec<(f64, f64)>) -> RecoveryScan {
        RecoveryScan {
            tx,
            k: 0,
            ring: VecDeque::new(),
            boundary: f64::NEG_INFINITY,
            phase: Phase::Before,
            level: None,
            run_start: None,
            carry: None,
            results: Vec::new(),
        }
    }

    fn close(&mut self, outcome: Outcome, recovery_s: Option<f64>, boundary: f64) {
        self.results.push(Recovery {
            level_before: self.level,
            recovery_s,
            outcome,
        });
        // The receiver never came back: the key-up before the next
        // transmission is still muted, so the last real level carries over.
        self.carry = (outcome == Outcome::NotBeforeNext)
            .then_some(self.level)
            .flatten();
        self.k += 1;
        self.phase = Phase::Before;
        self.level = None;
        self.run_start = None;
        self.boundary = boundary;
    }

    pub fn push(&mut self, t: f64, p: f64) {
        self.ring.push_back((t, p));
        while self
            .ring
            .front()
            .is_some_and(|f| f.0 < t - BEFORE_SPAN_S - 0.1)
        {
            self.ring.pop_front();
        }
        while let Some(&(rise, fall)) = self.tx.get(self.k) {
            match self.phase {
                Phase::Before => {
                    let to = rise - BEFORE_GUARD_S;
                    if t < to {
                        return;
                    }
                    let from = (rise - BEFORE_SPAN_S).max(self.boundary);
                    let v: Vec<f64> = self
                        .ring
                        .iter()
                        .filter(|(u, _)| *u >= from && *u <= to)
                        .map(|x| x.1)
                        .collect();
                    let span = v.len() as f64 * BACKGROUND_HOP_S;
                    self.level = match self.carry.take() {
                        Some(l) => Some(l),
                        None => (span >= MIN_BEFORE_S - 1e-9).then(|| median(&v)),
                    };
                    self.phase = Phase::AwaitFall;
                }
                Phase::AwaitFall => {
                    if t < fall {
                        return;
                    }
                    self.phase = Phase::Scan;
                }
                Phase::Scan => {
                    let level = match self.level {
                        None => {
                            self.close(Outcome::NoLevelBefore, None, fall);
                            continue;
                        }
                        Some(l) if l <= SILENT_POWER => {
                            self.close(Outcome::Silent, None, fall);
                            continue;
                        }
                        Some(l) => l,
                    };
                    if let Some(&(next, _)) = self.tx.get(self.k + 1) {
                        if t >= next - BEFORE_GUARD_S {
                            self.close(Outcome::NotBeforeNext, None, fall);
                            continue;
                        }
                    }
                    let within = p > 0.0 && (10.0 * (p / level).log10()).abs() <= RECOVERED_DB;
                    if within {
                        let s = *self.run_start.get_or_insert(t);
                        if t - s >= HOLD_S - 1e-9 {
                            self.close(Outcome::Recovered, Some(s - fall), s);
                        }
                    } else {
                        self.run_start = None;
                    }
                    return;
                }
            }
        }
    }

    /// Ends the stream; transmissions still open did not recover.
    pub fn finish(mut self) -> Vec<Recovery> {
        while let Some(&(_, fall)) = self.tx.get(self.k) {
            let o = match self.level {
                None => Outcome::NoLevelBefore,
                Some(l) if l <= SILENT_POWER => Outcome::Silent,
                Some(_) => Outcome::NotBeforeEnd,
            };
            self.close(o, None, fall);
        }
        self.results
    }
}

fn dbfs(power: f64) -> f64 {
    // A full-scale sine has mean square 1/2 (AES17).
    10.0 * (2.0 * power).max(1e-30).log10()
}

/// Runs the three passes over one two-channel WAV file.
pub fn analyze_timing(path: &Path, opt: &TimingOptions) -> Result<TimingReport> {
    let mut src = WavSource::open(path)?;
    let info = src.info().clone();
    let nch = info.channels as usize;
    if nch < 2 {
        return Err(CwError::input(
            path,
            "has one channel; timing needs a two-channel recording (the rig's own audio or keyer line, and the monitor receiver)",
        ));
    }
    for (name, c) in [
        ("--key-channel", opt.key_channel),
        ("--rf-channel", opt.rf_channel),
    ] {
        if c == 0 || c as usize > nch {
            return Err(CwError::Usage(format!(
                "{}: has {nch} channels; {name} {c} does not exist",
                path.display()
            )));
        }
    }
    if opt.key_channel == opt.rf_channel {
        return Err(CwError::Usage(format!(
            "--key-channel and --rf-channel are both {}; they must be different channels",
            opt.key_channel
        )));
    }
    let (kc, rc) = (opt.key_channel as usize - 1, opt.rf_channel as usize - 1);
    let fs = info.sample_rate_hz;
    for (name, v) in [
        ("--key-tone", opt.key_tone_hz),
        ("--rf-tone", opt.rf_tone_hz),
    ] {
        if let Some(f) = v {
            if !(f > 0.0 && f < 0.5 * fs as f64) {
                return Err(CwError::Usage(format!(
                    "{}: {name} {f} Hz is not between 0 Hz and half the sample rate ({} Hz)",
                    path.display(),
                    fs / 2
                )));
            }
        }
    }

    // Pass 1: survey.
    let mut survey = Survey::new(fs, nch);
    let mut buf = Vec::new();
    while src.read_frames(&mut buf, BLOCK_FRAMES)? > 0 {
        survey.push(&buf);
    }
    let s = survey.finish();
    let pick = |ch: u16, tone: Option<f64>| {
        choose(
            &s,
            &Options {
                channel: Some(ch),
                tone_hz: tone,
                ..Options::default()
            },
            path,
        )
    };
    // No keyed tone on the key channel (and none asked for): a keyer line,
    // followed by its steps.
    let key_cand = pick(opt.key_channel, opt.key_tone_hz)?;
    let no_key = || {
        CwError::input(
            path,
            format!(
                "no keyed tone and no keying steps on the key channel (channel {}); it must carry the sidetone, a keyed audio tone or a keyer line's level",
                opt.key_channel
            ),
        )
    };
    let key_peak = s.channels[kc].peak_abs;
    if key_cand.is_none() {
        if let Some(c) = s.candidates.iter().find(|c| c.channel == kc) {
            return Err(CwError::input(
                path,
                format!(
                    "the key channel (channel {}) has a steady tone at {:.1} Hz that is never keyed; it must carry the sidetone, a keyed audio tone or a keyer line's level",
                    opt.key_channel, c.frequency_hz
                ),
            ));
        }
        if key_peak < MIN_LINE_PEAK {
            return Err(no_key());
        }
    }
    let rf_cand = pick(opt.rf_channel, opt.rf_tone_hz)?.ok_or_else(|| {
        CwError::input(
            path,
            format!(
                "no keyed tone on the RF channel (channel {}); the monitor receiver must hear the transmitter",
                opt.rf_channel
            ),
        )
    })?;

    // A keyer line: its tallest step sets the threshold of the others.
    let mut tallest = f64::INFINITY;
    if key_cand.is_none() {
        let mut d = StepDetector::new(fs, f64::INFINITY);
        let mut src = WavSource::open(path)?;
        let mut mono = Vec::with_capacity(BLOCK_FRAMES);
        while src.read_frames(&mut buf, BLOCK_FRAMES)? > 0 {
            mono.clear();
            mono.extend(buf.iter().skip(kc).step_by(nch));
            d.push(&mono);
        }
        tallest = d.max_abs();
        if tallest < LINE_STEP_OVER_MEDIAN * d.median_abs() {
            return Err(no_key());
        }
    }

    // Pass 2: elements of both channels.
    let mut kt = key_cand
        .as_ref()
        .map(|c| ToneTracker::new(fs, c.frequency_hz));
    let mut steps = StepDetector::new(fs, LINE_STEP_FRACTION * tallest);
    let mut rt = ToneTracker::new(fs, rf_cand.frequency_hz);
    let mut src = WavSource::open(path)?;
    let mut mono = Vec::with_capacity(BLOCK_FRAMES);
    while src.read_frames(&mut buf, BLOCK_FRAMES)? > 0 {
        mono.clear();
        mono.extend(buf.iter().skip(kc).step_by(nch));
        match kt.as_mut() {
            Some(t) => t.push(&mono),
            None => steps.push(&mono),
        }
        mono.clear();
        mono.extend(buf.iter().skip(rc).step_by(nch));
        rt.push(&mono);
    }
    if let Some(t) = kt.as_mut() {
        t.finish();
    }
    rt.finish();
    let marks = |t: &ToneTracker| -> Vec<Mark> {
        t.elements()
            .iter()
            .map(|e| Mark {
                rise_s: e.start_s,
                fall_s: e.end_s,
            })
            .collect()
    };
    let key: Vec<Mark> = match &kt {
        Some(t) => marks(t),
        None => marks_from_steps(&steps.finish(), MIN_MARK_S, MIN_GAP_S)
            .into_iter()
            .map(|(a, b)| Mark {
                rise_s: a,
                fall_s: b,
            })
            .collect(),
    };
    let rf = marks(&rt);
    if key.is_empty() {
        return Err(match kt {
            Some(_) => CwError::input(
                path,
                format!(
                    "no key-down could be measured on the key channel (channel {})",
                    opt.key_channel
                ),
            ),
            None => no_key(),
        });
    }
    if rf.is_empty() {
        return Err(CwError::input(
            path,
            format!(
                "no key-down could be measured on the RF channel (channel {})",
                opt.rf_channel
            ),
        ));
    }
    let pitch = |t: &ToneTracker, c: f64| {
        let f: Vec<f64> = t.elements().iter().map(|e| e.frequency_hz).collect();
        if f.is_empty() {
            c
        } else {
            median(&f)
        }
    };
    let key_tone = kt
        .as_ref()
        .zip(key_cand.as_ref())
        .map(|(t, c)| pitch(t, c.frequency_hz));
    let rf_tone = pitch(&rt, rf_cand.frequency_hz);
    let durations: Vec<f64> = key.iter().map(|m| m.duration()).collect();
    let gaps: Vec<Option<f64>> = (0..key.len())
        .map(|i| key.get(i + 1).map(|n| n.rise_s - key[i].fall_s))
        .collect();
    let unit = timing::analyse(&durations, &gaps).unit_s;
    let separation = unit.map_or(MIN_SEPARATION_S, |u| {
        (SEPARATION_UNITS * u).max(MIN_SEPARATION_S)
    });
    let groups = group(&key, separation);
    let lag = coarse_lag(&key, &rf);
    let pairs = pair(&key, &rf, lag);
    let (mut figs, mut rows) = delays(&key, &rf, &groups, &pairs);

    // Pass 3: the key channel's background and the recovery (a keyer line
    // carries no receiver audio).
    let rec = match key_tone {
        Some(tone) => {
            let mut meter = BackgroundMeter::new(
                fs,
                tone,
                NOTCH_HALF_WIDTH_HZ,
                BACKGROUND_WINDOW_S,
                BACKGROUND_HOP_S,
            );
            let mut scan = RecoveryScan::new(rows.iter().map(|r| (r.start_s, r.end_s)).collect());
            let mut src = WavSource::open(path)?;
            let mut vals = Vec::new();
            while src.read_frames(&mut buf, BLOCK_FRAMES)? > 0 {
                mono.clear();
                mono.extend(buf.iter().skip(kc).step_by(nch));
                vals.clear();
                meter.push(&mono, &mut vals);
                for &(t, p) in &vals {
                    if t >= START_GUARD_S {
                        scan.push(t, p);
                    }
                }
            }
            scan.finish()
        }
        None => vec![
            Recovery {
                level_before: None,
                recovery_s: None,
                outcome: Outcome::KeyerLine,
            };
            rows.len()
        ],
    };
    for (r, v) in rows.iter_mut().zip(&rec) {
        r.recovery_ms = v.recovery_s.map(|s| s * 1e3);
        r.background_dbfs = v.level_before.map(dbfs);
    }
    let rs: Vec<f64> = rows.iter().filter_map(|r| r.recovery_ms).collect();
    figs.rx_recovery_ms = (!rs.is_empty()).then(|| median(&rs));

    let paired = pairs.iter().flatten().count();
    let pairing = Pairing {
        key_elements: key.len(),
        rf_elements: rf.len(),
        paired,
        unpaired_key: key.len() - paired,
        unpaired_rf: rf.len() - paired,
        separation_s: separation,
        coarse_lag_ms: lag * 1e3,
    };
    let frames = info.frames.unwrap_or(s.channels[kc].samples);
    let input = TimingInput {
        path: path.display().to_string(),
        sample_rate_hz: fs,
        channels: info.channels,
        key_channel: opt.key_channel,
        rf_channel: opt.rf_channel,
        duration_s: frames as f64 / fs as f64,
        key_signal: if key_tone.is_some() {
            "tone".into()
        } else {
            "keyer line".into()
        },
        key_tone_hz: key_tone,
        rf_tone_hz: rf_tone,
        key_clipped_samples: s.channels[kc].clipped_samples,
        rf_clipped_samples: s.channels[rc].clipped_samples,
    };
    let warnings = warnings(&input, &figs, &rows, &pairing, &rec);
    Ok(TimingReport {
        tool: "cwaudit".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        input,
        timing: figs,
        per_transmission: rows,
        pairing,
        warnings,
    })
}

/// Plain sentences about what limits the figures.
fn warnings(
    input: &TimingInput,
    figs: &TimingFigures,
    rows: &[TransmissionRow],
    p: &Pairing,
    rec: &[Recovery],
) -> Vec<String> {
    let mut w = Vec::new();
    for (name, n) in [
        ("key", input.key_clipped_samples),
        ("RF", input.rf_clipped_samples),
    ] {
        if n > 0 {
            w.push(format!(
                "The {name} channel clips ({n} samples at full scale): lower its recording level; its edges and instants are wrong where it clips."
            ));
        }
    }
    if 2 * p.paired < p.key_elements.min(p.rf_elements) {
        w.push(format!(
            "Only {} of {} key elements found an RF partner: check the channels (--key-channel, --rf-channel) and the tones (--key-tone, --rf-tone); the figures below are not trustworthy.",
            p.paired, p.key_elements
        ));
    }
    if p.unpaired_key > 0 {
        w.push(format!(
            "{} key element(s) have no RF element overlapping them: the transmitter did not send them (a first element lost in the T/R switch?) or the RF channel missed them.",
            p.unpaired_key
        ));
    }
    if p.unpaired_rf > 0 {
        w.push(format!(
            "{} RF element(s) match no key element: another signal on the RF channel, or keying the key channel does not show.",
            p.unpaired_rf
        ));
    }
    let lost: Vec<String> = rows
        .iter()
        .filter(|r| r.first_rf_ms.is_none())
        .map(|r| r.index.to_string())
        .collect();
    if !lost.is_empty() {
        w.push(format!(
            "The first element of transmission(s) {} has no RF element, so it counts in no shortening.",
            lost.join(", ")
        ));
    }
    if figs.delay_ms.is_none() {
        w.push("No transmission has a paired element after its first, so the delays cannot be measured: send more than one element per transmission.".into());
    }
    if figs.transmissions < 3 {
        w.push(format!(
            "Only {} transmission(s): the first-element shortening and the receive recovery rest on that few; make several transmissions.",
            figs.transmissions
        ));
    }
    let which = |o: Outcome| -> Vec<String> {
        rows.iter()
            .zip(rec)
            .filter(|(_, r)| r.outcome == o)
            .map(|(row, _)| row.index.to_string())
            .collect()
    };
    for (o, text) in [
        (Outcome::NoLevelBefore, "there is less than 50 ms of key-up before it (from 1 s before to 50 ms before its first element) to set the background level; start the recording earlier"),
        (Outcome::Silent, "the key channel is silent before it, so there is no receiver background to recover; record the rig's own audio with its receiver on"),
        (Outcome::NotBeforeNext, "the background did not come back within 3 dB of its level before the transmission until the next one began"),
        (Outcome::KeyerLine, "the key channel is a keyer line, which carries no receiver audio; record the rig's own audio to measure it"),
        (Outcome::NotBeforeEnd, "the background did not come back within 3 dB of its level before the transmission by the end of the recording; record longer after the last transmission"),
    ] {
        let v = which(o);
        if !v.is_empty() {
            w.push(format!(
                "No receive recovery for transmission(s) {}: {text}.",
                v.join(", ")
            ));
        }
    }
    if let Some(s) = &figs.delay_spread_ms {
        if s.p90 - s.p10 > 2.0 {
            w.push(format!(
                "The key-to-RF delay varies from element to element ({:.1} to {:.1} ms, p10 to p90): a keyer or T/R sequencer with its own clock, or a noisy channel.",
                s.p10, s.p90
            ));
        }
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;

    fn m(r: f64, f: f64) -> Mark {
        Mark {
            rise_s: r,
            fall_s: f,
        }
    }

    /// Two transmissions of three dits (60 ms, 60 ms apart), 3 s apart.
    fn key() -> Vec<Mark> {
        let mut v = Vec::new();
        for t0 in [0.5, 3.8] {
            for i in 0..3 {
                let r = t0 + 0.12 * i as f64;
                v.push(m(r, r + 0.06));
            }
        }
        v
    }

    /// RF: rises `d` later (first of each transmission `d + sh`), falls `fd` later.
    fn rf(k: &[Mark], d: f64, fd: f64, sh: f64) -> Vec<Mark> {
        k.iter()
            .enumerate()
            .map(|(i, x)| {
                m(
                    x.rise_s + d + if i % 3 == 0 { sh } else { 0.0 },
                    x.fall_s + fd,
                )
            })
            .collect()
    }

    #[test]
    fn groups_split_at_the_separation() {
        let g = group(&key(), 1.0);
        assert_eq!(g, vec![0..3, 3..6]);
        assert_eq!(group(&key(), 5.0), vec![0..6]);
        assert!(group(&[], 1.0).is_empty());
    }

    #[test]
    fn delays_and_shortening_from_known_instants() {
        let k = key();
        let r = rf(&k, 0.012, 0.009, 0.007);
        let g = group(&k, 1.0);
        let lag = coarse_lag(&k, &r);
        assert!((lag - 0.012).abs() < 1e-9);
        let p = pair(&k, &r, lag);
        assert_eq!(p, (0..6).map(Some).collect::<Vec<_>>());
        let (f, rows) = delays(&k, &r, &g, &p);
        assert!((f.delay_ms.unwrap() - 12.0).abs() < 1e-9);
        assert!((f.fall_delay_ms.unwrap() - 9.0).abs() < 1e-9);
        assert!((f.first_element_shortening_ms.unwrap() - 7.0).abs() < 1e-9);
        assert_eq!(f.transmissions, 2);
        assert_eq!(rows[1].elements, 3);
        assert!((rows[0].first_key_ms - 60.0).abs() < 1e-9);
        // RF first element: 60 − 12 − 7 + 9 = 50 ms.
        assert!((rows[0].first_rf_ms.unwrap() - 50.0).abs() < 1e-9);
    }

    #[test]
    fn a_lost_first_element_is_unpaired() {
        let k = key();
        let mut r = rf(&k, 0.01, 0.01, 0.0);
        r.remove(3);
        let p = pair(&k, &r, coarse_lag(&k, &r));
        assert_eq!(p[3], None);
        assert_eq!(p.iter().flatten().count(), 5);
        let (f, rows) = delays(&k, &r, &group(&k, 1.0), &p);
        assert_eq!(rows[1].first_rf_ms, None);
        assert!((f.delay_ms.unwrap() - 10.0).abs() < 1e-9);
        // A stray RF element far from any key element stays unpaired.
        let mut r2 = rf(&k, 0.01, 0.01, 0.0);
        r2.insert(3, m(2.0, 2.06));
        let p2 = pair(&k, &r2, coarse_lag(&k, &r2));
        assert!(!p2.contains(&Some(3)));
        assert_eq!(p2.iter().flatten().count(), 6);
    }

    /// Background: level 1 before, 1e-4 while muted from `mute` to `back`,
    /// 1 afterwards; sampled every hop.
    fn feed(scan: &mut RecoveryScan, end: f64, muted: &[(f64, f64)]) {
        let mut t = START_GUARD_S;
        while t < end {
            let p = if muted.iter().any(|&(a, b)| t >= a && t < b) {
                1e-4
            } else {
                1.0
            };
            scan.push(t, p);
            t += BACKGROUND_HOP_S;
        }
    }

    #[test]
    fn recovery_is_the_return_to_within_3_db() {
        let tx = vec![(1.0, 2.0), (4.0, 5.0)];
        let mut s = RecoveryScan::new(tx);
        feed(&mut s, 7.0, &[(0.99, 2.15), (3.99, 5.3)]);
        let r = s.finish();
        assert_eq!(r[0].outcome, Outcome::Recovered);
        // Step back at 2.15 s: first sample at or after it, within one hop.
        assert!((r[0].recovery_s.unwrap() - 0.15).abs() <= BACKGROUND_HOP_S + 1e-9);
        assert!((r[1].recovery_s.unwrap() - 0.3).abs() <= BACKGROUND_HOP_S + 1e-9);
        assert!((r[0].level_before.unwrap() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn short_returns_and_missing_recoveries() {
        // A 10 ms return (shorter than the 20 ms hold) does not count.
        let mut s = RecoveryScan::new(vec![(1.0, 2.0)]);
        feed(&mut s, 4.0, &[(0.99, 2.1), (2.11, 2.5)]);
        let r = s.finish();
        assert!((r[0].recovery_s.unwrap() - 0.5).abs() <= BACKGROUND_HOP_S + 1e-9);
        // Never back before the next transmission, nor before the end.
        let mut s = RecoveryScan::new(vec![(1.0, 2.0), (4.0, 5.0)]);
        feed(&mut s, 6.0, &[(0.99, 10.0)]);
        let r = s.finish();
        assert_eq!(r[0].outcome, Outcome::NotBeforeNext);
        assert_eq!(r[0].recovery_s, None);
        assert_eq!(r[1].outcome, Outcome::NotBeforeEnd);
        // No key-up before the first transmission.
        let mut s = RecoveryScan::new(vec![(0.12, 1.0)]);
        feed(&mut s, 3.0, &[(0.11, 1.2)]);
        assert_eq!(s.finish()[0].outcome, Outcome::NoLevelBefore);
    }
}
