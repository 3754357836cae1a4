//! Streaming test-signal generator with stated truth.
//!
//! Produces the receiver audio of a keyed CW transmitter with known rise and
//! fall times, chirp, backwave, hum, drift, weighting and noise, together
//! with a truth record (every element's timing) so measurements can be
//! checked against what was put in.
//!
//! Signal model (main tone):
//! - Keying: element k has nominal 50 % instants `t_s`, `t_e`; its envelope is
//!   a(t) = R(t − t_s)·F(t − t_e) with the edges of [`shapes`], so the
//!   50 %-to-50 % duration is the nominal mark. Elements are summed (they
//!   never overlap: [`Synth::new`] refuses edges that do not fit).
//! - Carrier: s(t) = A·env(t)·(1 + m cos 2πf_hum t)·cos φ(t), A = 10^(dBFS/20)
//!   (a full-scale sine is 0 dBFS, AES17), env = b + (1 − b)·a(t) with
//!   b = 10^(backwave/20). φ integrates f(t) = pitch + drift + chirp +
//!   fm·cos 2πf_hum t exactly sample to sample in f64 (wrapped to one
//!   cycle), so the phase stays continuous and exact over an hour.
//! - Chirp, from t_on (the instant the element's envelope leaves zero):
//!   exponential depth·exp(−(t − t_on)/τ) until the next element's t_on;
//!   linear depth·(1 − (t − t_on)/(t_e − t_on)) on [t_on, t_e], 0 after.
//! - Noise: white Gaussian of per-sample variance
//!   σ² = (A²/2)/10^(SNR/10)·(fs/2)/B, so the noise power inside B equals the
//!   key-down carrier power minus SNR dB.
//! - Receiver band-pass: Butterworth on signal + noise of the signal channel.
//! - Warm-up drift: f += hz·(1 − exp(−t/τ)), integrated exactly.
//! - Receive muting (the rig's own audio): noise and every tone but the main
//!   one are scaled by 10^(−depth/20) from an element's key-down until the
//!   hang time after its 50 % fall.
//! - Other tones (`second`, `extra_tones`): raised-cosine 5 ms keying or steady.

pub mod cli;
pub mod filter;
pub mod morse;
pub mod shapes;
pub mod txrx;

pub use shapes::{edge_fall, edge_rise, EdgeShape};

use anyhow::{bail, Context, Result};
use filter::BandpassFilter;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256PlusPlus;
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::{Path, PathBuf};

/// Sample format of the written WAV file.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum SampleFormat {
    /// 8-bit unsigned PCM.
    U8,
    /// 16-bit PCM.
    #[default]
    S16,
    /// 24-bit PCM.
    S24,
    /// 32-bit PCM.
    S32,
    /// 32-bit float.
    F32,
    /// 64-bit float.
    F64,
}

/// Transmitter frequency deviation at key-down.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "lowercase")]
pub enum Chirp {
    /// No chirp.
    #[default]
    None,
    /// depth·exp(−(t − t_on)/τ): an oscillator pulled at key-down that recovers.
    Exponential { depth_hz: f64, tau_ms: f64 },
    /// depth falling linearly to 0 at the element's 50 % fall instant.
    Linear { depth_hz: f64 },
}

/// Mains hum on the key-down carrier: AM depth and FM deviation.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Hum {
    pub frequency_hz: f64,
    pub am_percent: f64,
    pub fm_hz: f64,
}

impl Default for Hum {
    fn default() -> Self {
        Hum {
            frequency_hz: 100.0,
            am_percent: 0.0,
            fm_hz: 0.0,
        }
    }
}

/// Receiver filter: Butterworth band-pass between −3 dB edges, total order.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Bandpass {
    pub low_hz: f64,
    pub high_hz: f64,
    pub order: u32,
}

impl Default for Bandpass {
    fn default() -> Self {
        Bandpass {
            low_hz: 300.0,
            high_hz: 2700.0,
            order: 4,
        }
    }
}

/// A second signal in the same receiver audio (e.g. another station or the
/// sidetone), raised-cosine 5 ms keying, standard weighting, no chirp.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct SecondTone {
    pub pitch_hz: f64,
    /// Key-down level relative to the main tone's key-down level, dB.
    pub level_db: f64,
    /// Text to send; `None` = the main text.
    pub text: Option<String>,
    /// Speed; `None` = the main speed.
    pub wpm: Option<f64>,
    /// false = a steady tone for the whole file.
    pub keyed: bool,
}

impl Default for SecondTone {
    fn default() -> Self {
        SecondTone {
            pitch_hz: 1000.0,
            level_db: -6.0,
            text: None,
            wpm: None,
            keyed: true,
        }
    }
}

/// Warm-up drift: offset(t) = hz·(1 − exp(−t/τ)) from the start of the file,
/// as a transmitter's oscillator settles after switch-on.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Warmup {
    pub hz: f64,
    pub tau_s: f64,
}

/// Receive muting as heard in the rig's own audio: everything but the main
/// tone is multiplied by 10^(−depth/20) from each element's key-down until
/// `hang_ms` after its 50 % fall (a hang longer than the element spaces keeps
/// the receiver muted through a whole transmission).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Mute {
    pub depth_db: f64,
    pub hang_ms: f64,
}

/// Everything that defines a synthetic recording.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
#[serde(default)]
pub struct SynthSpec {
    pub text: String,
    pub wpm: f64,
    /// Dah mark = ratio × dit mark.
    pub dah_dit_ratio: f64,
    /// Dit mark / following element space; dit + space = 2 units always.
    pub mark_space_ratio: f64,
    pub pitch_hz: f64,
    pub sample_rate_hz: u32,
    pub format: SampleFormat,
    /// Key-down level, full-scale sine = 0 dBFS (AES17).
    pub level_dbfs: f64,
    /// 10-90 % rise time, ms (0 = hard keying).
    pub rise_ms: f64,
    /// 90-10 % fall time, ms (0 = hard keying).
    pub fall_ms: f64,
    pub rise_shape: EdgeShape,
    pub fall_shape: EdgeShape,
    pub chirp: Chirp,
    /// Key-up carrier relative to key-down, dB (negative).
    pub backwave_db: Option<f64>,
    pub hum: Option<Hum>,
    /// Linear pitch drift over the recording.
    pub drift_hz_per_min: f64,
    /// Warm-up drift: the pitch moves by `hz` in all, settling exponentially.
    pub warmup: Option<Warmup>,
    /// Key-down carrier power over noise power in `noise_bandwidth_hz`.
    pub snr_db: Option<f64>,
    pub noise_bandwidth_hz: f64,
    pub rx_bandpass: Option<Bandpass>,
    pub second: Option<SecondTone>,
    /// More tones beside `second` (other stations, steady carriers).
    pub extra_tones: Vec<SecondTone>,
    /// Receive muting of the rig's own audio: noise and the other tones are
    /// attenuated while the main tone (the sidetone) is keyed.
    pub mute: Option<Mute>,
    pub channels: u16,
    /// 1-based channel carrying the tones; others get only noise (or silence).
    pub signal_channel: u16,
    /// Key-up time before the first element's envelope leaves zero.
    pub lead_in_s: f64,
    /// Key-up time after the last element's envelope has settled.
    pub tail_s: f64,
    pub repeat: u32,
    pub seed: u64,
    /// Two-channel transmit/receive timing recording (see [`txrx`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub txrx: Option<txrx::TxRxSpec>,
}

impl Default for SynthSpec {
    fn default() -> Self {
        SynthSpec {
            text: "PARIS PARIS PARIS".into(),
            wpm: 20.0,
            dah_dit_ratio: 3.0,
            mark_space_ratio: 1.0,
            pitch_hz: 700.0,
            sample_rate_hz: 48_000,
            format: SampleFormat::S16,
            level_dbfs: -12.0,
            rise_ms: 5.0,
            fall_ms: 5.0,
            rise_shape: EdgeShape::RaisedCosine,
            fall_shape: EdgeShape::RaisedCosine,
            chirp: Chirp::None,
            backwave_db: None,
            hum: None,
            drift_hz_per_min: 0.0,
            warmup: None,
            snr_db: None,
            noise_bandwidth_hz: 2500.0,
            rx_bandpass: None,
            second: None,
            extra_tones: Vec::new(),
            mute: None,
            channels: 1,
            signal_channel: 1,
            lead_in_s: 0.3,
            tail_s: 0.3,
            repeat: 1,
            seed: 1,
            txrx: None,
        }
    }
}

/// Dit or dah.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ElementKind {
    Dit,
    Dah,
}

/// The stated truth of one element.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TruthElement {
    /// 50 % rise instant from the start of the file, s.
    pub start_s: f64,
    /// 50 %-to-50 % duration, s.
    pub duration_s: f64,
    pub kind: ElementKind,
    /// Transmitter 10-90 % rise time, ms.
    pub rise_ms: f64,
    /// Transmitter 90-10 % fall time, ms.
    pub fall_ms: f64,
    /// Largest |deviation| from the settled frequency between the 50 %
    /// instants (settled = median over the last half), Hz.
    pub chirp_hz: f64,
    pub level_dbfs: f64,
}

/// What was put into a synthetic recording.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Truth {
    pub spec: SynthSpec,
    /// Main tone pitch at the start of the file, Hz.
    pub tone_hz: f64,
    pub wpm: f64,
    /// One ITU-R M.1677-1 unit, 1.2 / WPM, s.
    pub dit_s: f64,
    /// Actual dit and dah marks after weighting, s.
    pub dit_mark_s: f64,
    pub dah_mark_s: f64,
    pub dah_dit_ratio: f64,
    pub mark_space_ratio: f64,
    pub level_dbfs: f64,
    pub snr_db: Option<f64>,
    pub duration_s: f64,
    pub total_frames: u64,
    pub elements: Vec<TruthElement>,
    pub second_elements: Vec<TruthElement>,
    /// Elements of each keyed extra tone (empty for a steady one).
    #[serde(default)]
    pub extra_elements: Vec<Vec<TruthElement>>,
    /// Samples clamped to full scale when written (0 until written).
    #[serde(default)]
    pub clipped_samples: u64,
    /// Caveats about the truth (e.g. receiver filter).
    #[serde(default)]
    pub notes: Vec<String>,
    /// Truth of a transmit/receive timing recording.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub txrx: Option<txrx::TxRxTruth>,
}

/// Chirp law in seconds.
#[derive(Clone, Copy, Debug)]
enum ChirpLaw {
    None,
    Exp { depth: f64, tau: f64 },
    Lin { depth: f64 },
}

impl ChirpLaw {
    /// Deviation at `t` caused by the element keyed down at `t_on`, ending `t_e`.
    fn dev(self, t_on: f64, t_e: f64, t: f64) -> f64 {
        if t < t_on {
            return 0.0;
        }
        match self {
            ChirpLaw::None => 0.0,
            ChirpLaw::Exp { depth, tau } => depth * (-(t - t_on) / tau).exp(),
            ChirpLaw::Lin { depth } => {
                if t <= t_e {
                    depth * (1.0 - (t - t_on) / (t_e - t_on))
                } else {
                    0.0
                }
            }
        }
    }

    /// ∫ dev dt over [a, b] for the element keyed down at `t_on` (b ≤ a gives 0).
    fn integral(self, t_on: f64, t_e: f64, a: f64, b: f64) -> f64 {
        match self {
            ChirpLaw::None => 0.0,
            ChirpLaw::Exp { depth, tau } => {
                if b <= a {
                    return 0.0;
                }
                depth * tau * ((-(a - t_on) / tau).exp() - (-(b - t_on) / tau).exp())
            }
            ChirpLaw::Lin { depth } => {
                let b = b.min(t_e);
                if b <= a {
                    return 0.0;
                }
                let l = t_e - t_on;
                let g = |t: f64| (t - t_on) - (t - t_on).powi(2) / (2.0 * l);
                depth * (g(b) - g(a))
            }
        }
    }

    fn depth(self) -> f64 {
        match self {
            ChirpLaw::None => 0.0,
            ChirpLaw::Exp { depth, .. } | ChirpLaw::Lin { depth } => depth,
        }
    }
}

#[derive(Clone, Copy, Debug)]
struct Elem {
    t_on: f64,
    t_s: f64,
    t_e: f64,
    t_end: f64,
}

/// One keyed (or steady) tone with its running state.
#[derive(Clone, Debug)]
struct Tone {
    amp: f64,
    pitch: f64,
    drift_hz_per_s: f64,
    /// Warm-up drift (total Hz, time constant s).
    warmup: Option<(f64, f64)>,
    rise_shape: EdgeShape,
    rise_s: f64,
    fall_shape: EdgeShape,
    fall_s: f64,
    chirp: ChirpLaw,
    keyed: bool,
    backwave: f64,
    hum: Option<Hum>,
    elems: Vec<Elem>,
    first: usize,
    last_on: Option<usize>,
    phase: f64,
}

impl Tone {
    /// A tone with raised-cosine edges of `edge_s` and nothing else: no
    /// drift, chirp, backwave or hum (other stations, sidetones).
    fn plain(amp: f64, pitch: f64, edge_s: f64, elems: Vec<Elem>, keyed: bool) -> Tone {
        Tone {
            amp,
            pitch,
            drift_hz_per_s: 0.0,
            warmup: None,
            rise_shape: EdgeShape::RaisedCosine,
            rise_s: edge_s,
            fall_shape: EdgeShape::RaisedCosine,
            fall_s: edge_s,
            chirp: ChirpLaw::None,
            keyed,
            backwave: 0.0,
            hum: None,
            elems,
            first: 0,
            last_on: None,
            phase: 0.0,
        }
    }

    fn envelope(&mut self, t: f64) -> f64 {
        if !self.keyed {
            return 1.0;
        }
        while self.first < self.elems.len() && self.elems[self.first].t_end < t {
            self.first += 1;
        }
        let mut a = 0.0;
        for e in &self.elems[self.first..] {
            if e.t_on > t {
                break;
            }
            a += edge_rise(self.rise_shape, self.rise_s, t - e.t_s)
                * edge_fall(self.fall_shape, self.fall_s, t - e.t_e);
        }
        let a = a.min(1.0);
        self.backwave + (1.0 - self.backwave) * a
    }

    /// Cycles of pitch + drift + chirp accumulated over [t0, t1], integrated
    /// exactly (the chirp's jump at key-down must not be smeared).
    fn phase_step(&mut self, t0: f64, t1: f64) -> f64 {
        let h = t1 - t0;
        let mut cycles = self.pitch * h + self.drift_hz_per_s * h * 0.5 * (t0 + t1);
        if let Some((hz, tau)) = self.warmup {
            // ∫ hz·(1 − e^(−t/τ)) dt over [t0, t1].
            cycles += hz * (h - tau * ((-t0 / tau).exp() - (-t1 / tau).exp()));
        }
        if self.keyed && !matches!(self.chirp, ChirpLaw::None) {
            loop {
                let next = self.last_on.map_or(0, |i| i + 1);
                if next < self.elems.len() && self.elems[next].t_on <= t1 {
                    self.last_on = Some(next);
                } else {
                    break;
                }
            }
            if let Some(k) = self.last_on {
                // The element active at t0 may be the previous one.
                for j in k.saturating_sub(1)..=k {
                    let e = self.elems[j];
                    let until = self.elems.get(j + 1).map_or(f64::INFINITY, |n| n.t_on);
                    cycles += self
                        .chirp
                        .integral(e.t_on, e.t_e, t0.max(e.t_on), t1.min(until));
                }
            }
        }
        cycles
    }

    /// Sample at frame `n` (t = n/fs); must be called for n = 0, 1, 2, ...
    fn sample(&mut self, n: u64, fs: f64) -> f64 {
        let t = n as f64 / fs;
        if n > 0 {
            let t0 = (n - 1) as f64 / fs;
            self.phase += self.phase_step(t0, t);
            self.phase -= self.phase.floor();
        }
        let env = self.envelope(t);
        let (am, fm_cycles) = match self.hum {
            Some(h) => {
                let w = 2.0 * std::f64::consts::PI * h.frequency_hz;
                (
                    1.0 + h.am_percent / 100.0 * (w * t).cos(),
                    // ∫ fm·cos(w t) dt in cycles.
                    h.fm_hz * (w * t).sin() / w,
                )
            }
            None => (1.0, 0.0),
        };
        self.amp * env * am * (2.0 * std::f64::consts::PI * (self.phase + fm_cycles)).cos()
    }
}

/// Streaming generator: validated spec, precomputed truth, running state.
#[derive(Clone, Debug)]
pub struct Synth {
    spec: SynthSpec,
    truth: Truth,
    fs: f64,
    total_frames: u64,
    frame: u64,
    main: Tone,
    second: Option<Tone>,
    extras: Vec<Tone>,
    /// Receive muting: gain while muted, hang after each fall (s).
    mute: Option<(f64, f64)>,
    /// First main element whose muting window may still be ahead.
    mute_first: usize,
    noise_sigma: f64,
    rng: Xoshiro256PlusPlus,
    filter: Option<BandpassFilter>,
    buf: Vec<f64>,
    txrx: Option<TxRxState>,
}

/// The key channel of a timing recording: sidetone, and a muted background.
#[derive(Clone, Debug)]
struct TxRxState {
    key_channel: usize,
    sidetone: Tone,
    rx_tone: Option<Tone>,
    background_sigma: f64,
    muting: txrx::Muting,
    /// Keyer line instead of the rig's audio: levels, the AC coupling's
    /// pole (None: DC) and its state (previous input, output).
    line: Option<(txrx::KeyerLine, Option<f64>, f64, f64)>,
}

fn check(ok: bool, msg: &str) -> Result<()> {
    if ok {
        Ok(())
    } else {
        bail!("{msg}")
    }
}

fn finite_in(x: f64, lo: f64, hi: f64) -> bool {
    x.is_finite() && x >= lo && x <= hi
}

/// Largest |deviation| from the settled frequency over [t_s, t_e] on a
/// 0.05 ms grid; settled = median over the last half.
fn chirp_truth(law: ChirpLaw, e: &Elem) -> f64 {
    if matches!(law, ChirpLaw::None) {
        return 0.0;
    }
    let step = 50e-6;
    let n = ((e.t_e - e.t_s) / step).ceil().max(1.0) as usize;
    let mid = 0.5 * (e.t_s + e.t_e);
    let vals: Vec<f64> = (0..=n)
        .map(|i| {
            let t = (e.t_s + i as f64 * step).min(e.t_e);
            law.dev(e.t_on, e.t_e, t)
        })
        .collect();
    let mut last: Vec<f64> = (0..=n)
        .filter(|&i| e.t_s + i as f64 * step >= mid)
        .map(|i| vals[i])
        .collect();
    last.sort_by(f64::total_cmp);
    let m = last.len();
    let settled = if m == 0 {
        vals[n]
    } else if m % 2 == 1 {
        last[m / 2]
    } else {
        0.5 * (last[m / 2 - 1] + last[m / 2])
    };
    vals.iter().map(|v| (v - settled).abs()).fold(0.0, f64::max)
}

struct Keying<'a> {
    what: &'a str,
    text: &'a str,
    wpm: f64,
    dah_dit_ratio: f64,
    mark_space_ratio: f64,
    rise: (EdgeShape, f64),
    fall: (EdgeShape, f64),
    lead_in_s: f64,
    repeat: u32,
}

/// Lays out elements and checks that each edge pair fits in its mark and space.
fn build_elements(k: &Keying) -> Result<(Vec<Elem>, morse::Timing)> {
    let timing = morse::Timing::new(1.2 / k.wpm, k.dah_dit_ratio, k.mark_space_ratio);
    let marks =
        morse::layout(k.text, k.repeat, &timing).with_context(|| format!("{} text", k.what))?;
    let (rs, rt) = k.rise;
    let (fsh, ft) = k.fall;
    let in_mark = shapes::settle_s(rs, rt) + shapes::lead_s(fsh, ft);
    let in_space = shapes::settle_s(fsh, ft) + shapes::lead_s(rs, rt);
    if in_mark > timing.dit_s.min(timing.dah_s) + 1e-12 {
        bail!(
            "the {} rise and fall edges need {:.2} ms but a mark lasts only {:.2} ms at {} WPM; shorten the edges or lower the speed.",
            k.what,
            in_mark * 1e3,
            timing.dit_s.min(timing.dah_s) * 1e3,
            k.wpm
        );
    }
    if in_space > timing.element_space_s + 1e-12 {
        bail!(
            "the {} fall and rise edges need {:.2} ms but an element space lasts only {:.2} ms at {} WPM; shorten the edges or lower the speed.",
            k.what,
            in_space * 1e3,
            timing.element_space_s * 1e3,
            k.wpm
        );
    }
    let offset = k.lead_in_s + shapes::lead_s(rs, rt);
    let elems = marks
        .iter()
        .map(|m| {
            let t_s = offset + m.start_s;
            let t_e = t_s + m.duration_s;
            Elem {
                t_on: t_s - shapes::lead_s(rs, rt),
                t_s,
                t_e,
                t_end: t_e + shapes::fall_end_s(fsh, ft),
            }
        })
        .collect();
    Ok((elems, timing))
}

impl Synth {
    /// Validates the spec and precomputes the truth.
    pub fn new(spec: &SynthSpec) -> Result<Synth> {
        let s = spec;
        check(
            (8000..=384_000).contains(&s.sample_rate_hz),
            "the sample rate must be between 8000 and 384000 Hz.",
        )?;
        let fs = s.sample_rate_hz as f64;
        check(
            s.pitch_hz.is_finite() && s.pitch_hz > 0.0 && s.pitch_hz < 0.45 * fs,
            "the pitch must be above 0 Hz and below 0.45 times the sample rate.",
        )?;
        check(
            finite_in(s.wpm, 1.0, 100.0),
            "the speed must be between 1 and 100 WPM.",
        )?;
        check(
            s.dah_dit_ratio.is_finite() && s.dah_dit_ratio > 1.0 && s.dah_dit_ratio <= 10.0,
            "the dah/dit ratio must be above 1 and at most 10.",
        )?;
        check(
            finite_in(s.mark_space_ratio, 0.1, 10.0),
            "the dit mark/space ratio must be between 0.1 and 10.",
        )?;
        check(
            finite_in(s.level_dbfs, -150.0, 0.0),
            "the level must be between -150 and 0 dBFS.",
        )?;
        check(
            finite_in(s.rise_ms, 0.0, 1000.0) && finite_in(s.fall_ms, 0.0, 1000.0),
            "the rise and fall times must be between 0 and 1000 ms.",
        )?;
        let chirp = match s.chirp {
            Chirp::None => ChirpLaw::None,
            Chirp::Exponential { depth_hz, tau_ms } => {
                check(
                    tau_ms.is_finite() && tau_ms > 0.0,
                    "the chirp time constant must be above 0 ms.",
                )?;
                ChirpLaw::Exp {
                    depth: depth_hz,
                    tau: tau_ms * 1e-3,
                }
            }
            Chirp::Linear { depth_hz } => ChirpLaw::Lin { depth: depth_hz },
        };
        check(
            chirp.depth().is_finite()
                && s.pitch_hz + chirp.depth() > 0.0
                && s.pitch_hz + chirp.depth() < 0.45 * fs,
            "the pitch plus the chirp depth must stay above 0 Hz and below 0.45 times the sample rate.",
        )?;
        let backwave = match s.backwave_db {
            Some(db) => {
                check(
                    (-200.0..0.0).contains(&db),
                    "the backwave must be below 0 dB and at least -200 dB.",
                )?;
                10f64.powf(db / 20.0)
            }
            None => 0.0,
        };
        if let Some(h) = s.hum {
            check(
                h.frequency_hz.is_finite() && h.frequency_hz > 0.0 && h.frequency_hz < 0.5 * fs,
                "the hum frequency must be above 0 Hz and below half the sample rate.",
            )?;
            check(
                finite_in(h.am_percent, 0.0, 100.0),
                "the hum AM depth must be between 0 and 100 %.",
            )?;
            check(
                h.fm_hz.is_finite() && h.fm_hz >= 0.0 && h.fm_hz < s.pitch_hz,
                "the hum FM deviation must be at least 0 Hz and below the pitch.",
            )?;
        }
        check(
            s.drift_hz_per_min.is_finite(),
            "the drift must be a finite number.",
        )?;
        if let Some(snr) = s.snr_db {
            check(
                finite_in(snr, -40.0, 200.0),
                "the SNR must be between -40 and 200 dB.",
            )?;
        }
        check(
            s.noise_bandwidth_hz.is_finite()
                && s.noise_bandwidth_hz > 0.0
                && s.noise_bandwidth_hz <= 0.5 * fs,
            "the noise bandwidth must be above 0 Hz and at most half the sample rate.",
        )?;
        check(
            s.channels == 1 || s.channels == 2,
            "the number of channels must be 1 or 2.",
        )?;
        check(
            s.signal_channel >= 1 && s.signal_channel <= s.channels,
            "the signal channel must be between 1 and the number of channels.",
        )?;
        check(
            finite_in(s.lead_in_s, 0.0, 3600.0) && finite_in(s.tail_s, 0.0, 3600.0),
            "the lead-in and tail must be between 0 and 3600 s.",
        )?;
        check(
            (1..=100_000).contains(&s.repeat),
            "the repeat count must be between 1 and 100000.",
        )?;

        let rise = (s.rise_shape, s.rise_ms * 1e-3);
        let fall = (s.fall_shape, s.fall_ms * 1e-3);
        let (elems, timing) = build_elements(&Keying {
            what: "main",
            text: &s.text,
            wpm: s.wpm,
            dah_dit_ratio: s.dah_dit_ratio,
            mark_space_ratio: s.mark_space_ratio,
            rise,
            fall,
            lead_in_s: s.lead_in_s,
            repeat: s.repeat,
        })?;
        // A timing recording: the main tone is the RF, keyed from the key
        // timing with delays; the element kinds follow the key durations.
        let mut key_durations: Vec<f64> = elems.iter().map(|e| e.t_e - e.t_s).collect();
        let (elems, txrx_plan) = match &s.txrx {
            Some(t) => {
                let p = txrx::plan(t, &elems, rise, fall, 1.2 / s.wpm, s.channels)?;
                key_durations = p.key.iter().map(|e| e.t_e - e.t_s).collect();
                (p.rf.clone(), Some(p))
            }
            None => (elems, None),
        };
        let amp = 10f64.powf(s.level_dbfs / 20.0);
        let end_of = |e: &[Elem], f: (EdgeShape, f64)| {
            e.last().map_or(0.0, |l| l.t_e + shapes::settle_s(f.0, f.1))
        };
        let mut end = end_of(&elems, fall);
        let mut txrx_state = None;
        if let (Some(t), Some(p)) = (&s.txrx, &txrx_plan) {
            for (f, what) in [
                (Some(t.sidetone_hz), "sidetone"),
                (t.rx_tone_hz, "received tone"),
            ] {
                if let Some(f) = f {
                    check(
                        f.is_finite() && f > 0.0 && f < 0.45 * fs,
                        &format!(
                            "the {what}'s pitch must be above 0 Hz and below 0.45 times the sample rate."
                        ),
                    )?;
                }
            }
            let side_amp = 10f64.powf(t.sidetone_dbfs / 20.0);
            let rx_amp = 10f64.powf(t.rx_tone_dbfs / 20.0);
            check(
                t.keyer_line.is_some()
                    || side_amp + t.rx_tone_hz.map_or(0.0, |_| rx_amp) <= 1.0 + 1e-9,
                "the sidetone and the received tone together would exceed full scale; lower them.",
            )?;
            end = end.max(end_of(&p.key, (EdgeShape::RaisedCosine, p.sidetone_edge_s)));
            let keyed = |amp: f64, pitch: f64, elems: Vec<Elem>, keyed: bool| {
                Tone::plain(amp, pitch, p.sidetone_edge_s, elems, keyed)
            };
            txrx_state = Some(TxRxState {
                key_channel: t.key_channel as usize - 1,
                sidetone: keyed(side_amp, t.sidetone_hz, p.key.clone(), true),
                rx_tone: t.rx_tone_hz.map(|f| keyed(rx_amp, f, Vec::new(), false)),
                background_sigma: (0.5 * 10f64.powf(t.background_dbfs / 10.0)).sqrt(),
                muting: p.muting.clone(),
                // The AC coupling starts settled at the key-up level.
                line: t.keyer_line.map(|k| {
                    (
                        k,
                        k.ac_coupling_ms.map(|ms| (-1.0 / (ms * 1e-3 * fs)).exp()),
                        k.up_fs,
                        0.0,
                    )
                }),
            });
        }

        let mut peak = amp * (1.0 + s.hum.map_or(0.0, |h| h.am_percent / 100.0));
        let mut second = None;
        let mut second_truth = Vec::new();
        if let Some(st) = &s.second {
            let (t, tr, e) = other_tone(st, s, amp, "second tone")?;
            peak += t.amp;
            end = end.max(e);
            second = Some(t);
            second_truth = tr;
        }
        check(
            s.extra_tones.len() <= 6,
            "at most 6 extra tones can be added.",
        )?;
        let mut extras = Vec::new();
        let mut extra_truth = Vec::new();
        for st in &s.extra_tones {
            let (t, tr, e) = other_tone(st, s, amp, "extra tone")?;
            peak += t.amp;
            end = end.max(e);
            extras.push(t);
            extra_truth.push(tr);
        }
        let mute = match s.mute {
            Some(m) => {
                check(
                    finite_in(m.depth_db, 0.0, 200.0),
                    "the muting depth must be between 0 and 200 dB.",
                )?;
                check(
                    finite_in(m.hang_ms, 0.0, 60_000.0),
                    "the muting hang time must be between 0 and 60000 ms.",
                )?;
                Some((10f64.powf(-m.depth_db / 20.0), m.hang_ms * 1e-3))
            }
            None => None,
        };
        let warmup = match s.warmup {
            Some(w) => {
                check(
                    w.hz.is_finite() && w.hz.abs() < 0.2 * fs,
                    "the warm-up drift must be a finite number of Hz, well below the sample rate.",
                )?;
                check(
                    finite_in(w.tau_s, 0.001, 86_400.0),
                    "the warm-up time constant must be between 0.001 and 86400 s.",
                )?;
                Some((w.hz, w.tau_s))
            }
            None => None,
        };
        check(
            peak <= 1.0 + 1e-9,
            "the noise-free peak would exceed full scale; lower the level, the hum AM depth or the second tone.",
        )?;
        let duration = end + s.tail_s;
        check(
            duration <= 86_400.0,
            "the recording would be longer than 24 hours.",
        )?;
        let drift = s.drift_hz_per_min / 60.0;
        let f_end = s.pitch_hz + drift * duration;
        check(
            f_end > 0.0
                && f_end < 0.45 * fs
                && f_end + chirp.depth() > 0.0
                && f_end + chirp.depth() < 0.45 * fs,
            "the drift would take the pitch below 0 Hz or above 0.45 times the sample rate.",
        )?;
        let total_frames = (duration * fs).round() as u64;

        let filter = match s.rx_bandpass {
            Some(b) => Some(
                BandpassFilter::butterworth(b.low_hz, b.high_hz, b.order, fs)
                    .context("receiver band-pass")?,
            ),
            None => None,
        };
        let noise_sigma = match s.snr_db {
            Some(snr) => ((amp * amp / 2.0) / 10f64.powf(snr / 10.0) * (fs / 2.0)
                / s.noise_bandwidth_hz)
                .sqrt(),
            None => 0.0,
        };

        let unit = 1.2 / s.wpm;
        let elements = elems
            .iter()
            .enumerate()
            .map(|(i, e)| TruthElement {
                start_s: e.t_s,
                duration_s: e.t_e - e.t_s,
                kind: kind_of(key_durations[i], timing.dit_s),
                rise_ms: s.rise_ms,
                fall_ms: s.fall_ms,
                chirp_hz: chirp_truth(chirp, e),
                level_dbfs: s.level_dbfs,
            })
            .collect();
        let mut notes = Vec::new();
        if let Some(b) = s.rx_bandpass {
            notes.push(format!(
                "A receiver band-pass ({}-{} Hz, order {}) was applied; rise and fall times here are the transmitter's, not the filtered ones.",
                b.low_hz, b.high_hz, b.order
            ));
        }
        if s.hum.is_some_and(|h| h.fm_hz > 0.0) || s.drift_hz_per_min != 0.0 {
            notes.push("chirp_hz excludes hum FM and drift.".into());
        }
        let truth = Truth {
            spec: s.clone(),
            tone_hz: s.pitch_hz,
            wpm: s.wpm,
            dit_s: unit,
            dit_mark_s: timing.dit_s,
            dah_mark_s: timing.dah_s,
            dah_dit_ratio: s.dah_dit_ratio,
            mark_space_ratio: s.mark_space_ratio,
            level_dbfs: s.level_dbfs,
            snr_db: s.snr_db,
            duration_s: total_frames as f64 / fs,
            total_frames,
            elements,
            second_elements: second_truth,
            extra_elements: extra_truth,
            clipped_samples: 0,
            notes,
            txrx: txrx_plan.map(|p| p.truth),
        };
        let main = Tone {
            amp,
            pitch: s.pitch_hz,
            drift_hz_per_s: drift,
            warmup,
            rise_shape: rise.0,
            rise_s: rise.1,
            fall_shape: fall.0,
            fall_s: fall.1,
            chirp,
            keyed: true,
            backwave,
            hum: s.hum,
            elems,
            first: 0,
            last_on: None,
            phase: 0.0,
        };
        Ok(Synth {
            spec: s.clone(),
            truth,
            fs,
            total_frames,
            frame: 0,
            main,
            second,
            extras,
            mute,
            mute_first: 0,
            noise_sigma,
            rng: Xoshiro256PlusPlus::seed_from_u64(s.seed),
            filter,
            buf: Vec::new(),
            txrx: txrx_state,
        })
    }

    /// The truth, known before any sample is generated.
    pub fn truth(&self) -> &Truth {
        &self.truth
    }

    /// Frames in the whole recording.
    pub fn total_frames(&self) -> u64 {
        self.total_frames
    }

    pub fn spec(&self) -> &SynthSpec {
        &self.spec
    }

    /// Fills `out` with interleaved f64 frames; returns frames written, 0 at
    /// the end. Samples are not clamped.
    pub fn fill_f64(&mut self, out: &mut [f64]) -> usize {
        let ch = self.spec.channels as usize;
        let sig = self.spec.signal_channel as usize - 1;
        let frames = ((out.len() / ch) as u64).min(self.total_frames - self.frame) as usize;
        for frame in out.chunks_exact_mut(ch).take(frames) {
            let n = self.frame;
            let gain = self.mute_gain(n as f64 / self.fs);
            let mut others = 0.0;
            if let Some(t2) = self.second.as_mut() {
                others += t2.sample(n, self.fs);
            }
            for t in &mut self.extras {
                others += t.sample(n, self.fs);
            }
            let x = self.main.sample(n, self.fs) + gain * others;
            if self.txrx.is_some() {
                self.txrx_frame(x, frame);
                self.frame += 1;
                continue;
            }
            for (c, v) in frame.iter_mut().enumerate() {
                let noise = if self.noise_sigma > 0.0 {
                    let g: f64 = StandardNormal.sample(&mut self.rng);
                    g * self.noise_sigma * gain
                } else {
                    0.0
                };
                *v = if c == sig {
                    let y = x + noise;
                    match self.filter.as_mut() {
                        Some(f) => f.process(y),
                        None => y,
                    }
                } else {
                    noise
                };
            }
            self.frame += 1;
        }
        frames
    }

    /// Gain of the receiver audio at `t` (1 when not muted). Called with
    /// rising `t`.
    fn mute_gain(&mut self, t: f64) -> f64 {
        let Some((g, hang)) = self.mute else {
            return 1.0;
        };
        let els = &self.main.elems;
        while self.mute_first < els.len() && els[self.mute_first].t_e + hang < t {
            self.mute_first += 1;
        }
        match els.get(self.mute_first) {
            Some(e) if e.t_on <= t => g,
            _ => 1.0,
        }
    }

    /// One frame of a timing recording: the RF tone `x` with its noise (and
    /// filter) on the RF channel; sidetone plus muted background on the key
    /// channel.
    fn txrx_frame(&mut self, x: f64, frame: &mut [f64]) {
        let n = self.frame;
        let t = n as f64 / self.fs;
        let gauss = |sigma: f64, rng: &mut Xoshiro256PlusPlus| -> f64 {
            if sigma > 0.0 {
                let g: f64 = StandardNormal.sample(rng);
                g * sigma
            } else {
                0.0
            }
        };
        let rf_noise = gauss(self.noise_sigma, &mut self.rng);
        let y = x + rf_noise;
        let rf = match self.filter.as_mut() {
            Some(f) => f.process(y),
            None => y,
        };
        let st = self.txrx.as_mut().expect("called for timing recordings");
        let bg_noise = gauss(st.background_sigma, &mut self.rng);
        let key = if let Some((k, pole, px, py)) = st.line.as_mut() {
            let v = k.up_fs + (k.down_fs - k.up_fs) * st.sidetone.envelope(t);
            let out = match pole {
                Some(a) => {
                    *py = *a * (*py + v - *px);
                    *px = v;
                    *py
                }
                None => v,
            };
            out + bg_noise
        } else {
            let mut bg = bg_noise;
            if let Some(rx) = st.rx_tone.as_mut() {
                bg += rx.sample(n, self.fs);
            }
            st.sidetone.sample(n, self.fs) + st.muting.gain(t) * bg
        };
        let kc = st.key_channel;
        for (c, v) in frame.iter_mut().enumerate() {
            *v = if c == kc { key } else { rf };
        }
    }

    /// Fills `out` with interleaved frames (channels per frame); returns
    /// frames written, 0 at the end. Memory use does not grow with length.
    pub fn fill(&mut self, out: &mut [f32]) -> usize {
        let mut buf = std::mem::take(&mut self.buf);
        buf.resize(out.len(), 0.0);
        let frames = self.fill_f64(&mut buf);
        let n = frames * self.spec.channels as usize;
        for (o, v) in out[..n].iter_mut().zip(&buf[..n]) {
            *o = *v as f32;
        }
        self.buf = buf;
        frames
    }
}

/// Builds a second or extra tone: raised-cosine 5 ms keying, standard
/// weighting, no chirp. Returns the tone, its truth elements and the end of
/// its last fall.
fn other_tone(
    st: &SecondTone,
    s: &SynthSpec,
    amp: f64,
    what: &str,
) -> Result<(Tone, Vec<TruthElement>, f64)> {
    let fs = s.sample_rate_hz as f64;
    check(
        st.pitch_hz.is_finite() && st.pitch_hz > 0.0 && st.pitch_hz < 0.45 * fs,
        &format!("the {what}'s pitch must be above 0 Hz and below 0.45 times the sample rate."),
    )?;
    check(
        finite_in(st.level_db, -150.0, 40.0),
        &format!("the {what}'s level must be between -150 and +40 dB relative to the main tone."),
    )?;
    let wpm2 = st.wpm.unwrap_or(s.wpm);
    check(
        finite_in(wpm2, 1.0, 100.0),
        &format!("the {what}'s speed must be between 1 and 100 WPM."),
    )?;
    let amp2 = amp * 10f64.powf(st.level_db / 20.0);
    let edge = (EdgeShape::RaisedCosine, 5e-3);
    let mut end = 0.0;
    let mut truth = Vec::new();
    let elems = if st.keyed {
        let (e2, _) = build_elements(&Keying {
            what,
            text: st.text.as_deref().unwrap_or(&s.text),
            wpm: wpm2,
            dah_dit_ratio: 3.0,
            mark_space_ratio: 1.0,
            rise: edge,
            fall: edge,
            lead_in_s: s.lead_in_s,
            repeat: s.repeat,
        })?;
        end = e2
            .last()
            .map_or(0.0, |l| l.t_e + shapes::settle_s(edge.0, edge.1));
        let level2 = s.level_dbfs + st.level_db;
        truth = e2
            .iter()
            .map(|e| TruthElement {
                start_s: e.t_s,
                duration_s: e.t_e - e.t_s,
                kind: kind_of(e.t_e - e.t_s, 1.2 / wpm2),
                rise_ms: 5.0,
                fall_ms: 5.0,
                chirp_hz: 0.0,
                level_dbfs: level2,
            })
            .collect();
        e2
    } else {
        Vec::new()
    };
    let tone = Tone::plain(amp2, st.pitch_hz, edge.1, elems, st.keyed);
    Ok((tone, truth, end))
}

/// Dit if the mark is nearer the dit mark than twice it (any dah ratio > 1 works).
fn kind_of(duration: f64, dit_mark: f64) -> ElementKind {
    if duration <= dit_mark * (1.0 + 1e-9) {
        ElementKind::Dit
    } else {
        ElementKind::Dah
    }
}

/// Renders the whole signal into memory (interleaved, not clamped).
pub fn render(spec: &SynthSpec) -> Result<(Vec<f32>, Truth)> {
    let mut synth = Synth::new(spec)?;
    let n = synth.total_frames() as usize * spec.channels as usize;
    check(
        n <= 1 << 30,
        "the recording is too long to render in memory; write it to a file instead.",
    )?;
    let mut out = vec![0.0f32; n];
    let mut done = 0;
    while done < n {
        let frames = synth.fill(&mut out[done..]);
        if frames == 0 {
            break;
        }
        done += frames * spec.channels as usize;
    }
    Ok((out, synth.truth().clone()))
}

/// Streams the samples into `w` as a WAV file; returns the clipped count.
fn write_wav<W: Write + std::io::Seek>(synth: &mut Synth, w: W) -> Result<u64> {
    let ch = synth.spec.channels as usize;
    let mut buf = vec![0.0f64; 4096 * ch];
    let mut clipped = 0u64;
    let mut clamp = |x: f64| {
        if !(-1.0..=1.0).contains(&x) {
            clipped += 1;
        }
        x.clamp(-1.0, 1.0)
    };
    let format = synth.spec.format;
    if format == SampleFormat::F64 {
        // hound cannot write 64-bit float: WAVE_FORMAT_IEEE_FLOAT by hand.
        let mut w = std::io::BufWriter::new(w);
        let frames = synth.total_frames();
        let data = frames * ch as u64 * 8;
        check(
            data + 50 <= u32::MAX as u64,
            "the recording is too long for a WAV file (over 4 GiB of data).",
        )?;
        let rate = synth.spec.sample_rate_hz;
        let mut h = Vec::with_capacity(58);
        h.extend_from_slice(b"RIFF");
        h.extend_from_slice(&((4 + 26 + 12 + 8 + data) as u32).to_le_bytes());
        h.extend_from_slice(b"WAVEfmt ");
        h.extend_from_slice(&18u32.to_le_bytes());
        h.extend_from_slice(&3u16.to_le_bytes());
        h.extend_from_slice(&(ch as u16).to_le_bytes());
        h.extend_from_slice(&rate.to_le_bytes());
        h.extend_from_slice(&(rate * ch as u32 * 8).to_le_bytes());
        h.extend_from_slice(&(ch as u16 * 8).to_le_bytes());
        h.extend_from_slice(&64u16.to_le_bytes());
        h.extend_from_slice(&0u16.to_le_bytes());
        h.extend_from_slice(b"fact");
        h.extend_from_slice(&4u32.to_le_bytes());
        h.extend_from_slice(&(frames as u32).to_le_bytes());
        h.extend_from_slice(b"data");
        h.extend_from_slice(&(data as u32).to_le_bytes());
        w.write_all(&h)?;
        loop {
            let n = synth.fill_f64(&mut buf);
            if n == 0 {
                break;
            }
            for &x in &buf[..n * ch] {
                w.write_all(&clamp(x).to_le_bytes())?;
            }
        }
        w.flush()?;
        return Ok(clipped);
    }
    let (bits, sample_format) = match format {
        SampleFormat::U8 => (8, hound::SampleFormat::Int),
        SampleFormat::S16 => (16, hound::SampleFormat::Int),
        SampleFormat::S24 => (24, hound::SampleFormat::Int),
        SampleFormat::S32 => (32, hound::SampleFormat::Int),
        SampleFormat::F32 | SampleFormat::F64 => (32, hound::SampleFormat::Float),
    };
    let bytes = bits as u64 / 8;
    check(
        synth.total_frames() * ch as u64 * bytes + 100 <= u32::MAX as u64,
        "the recording is too long for a WAV file (over 4 GiB of data).",
    )?;
    let wav_spec = hound::WavSpec {
        channels: ch as u16,
        sample_rate: synth.spec.sample_rate_hz,
        bits_per_sample: bits,
        sample_format,
    };
    let mut wr = hound::WavWriter::new(std::io::BufWriter::new(w), wav_spec)?;
    loop {
        let n = synth.fill_f64(&mut buf);
        if n == 0 {
            break;
        }
        for &x in &buf[..n * ch] {
            let x = clamp(x);
            match format {
                SampleFormat::U8 => wr.write_sample((x * 127.0).round() as i8)?,
                SampleFormat::S16 => wr.write_sample((x * 32767.0).round() as i16)?,
                SampleFormat::S24 => wr.write_sample((x * 8_388_607.0).round() as i32)?,
                SampleFormat::S32 => wr.write_sample((x * 2_147_483_647.0).round() as i32)?,
                SampleFormat::F32 | SampleFormat::F64 => wr.write_sample(x as f32)?,
            }
        }
    }
    wr.finalize()?;
    Ok(clipped)
}

/// The truth file beside a WAV path: OUT.wav → OUT.json.
pub fn truth_path(wav_path: &Path) -> PathBuf {
    wav_path.with_extension("json")
}

/// Writes OUT.wav and OUT.json (the truth, pretty JSON) through temporary
/// files in the same folder and a rename, so no half-written file is left;
/// refuses to overwrite an existing file unless `overwrite`.
pub fn write_files(spec: &SynthSpec, wav_path: &Path, overwrite: bool) -> Result<Truth> {
    let mut synth = Synth::new(spec)?;
    let json_path = truth_path(wav_path);
    check(
        json_path != wav_path,
        "the output file must not end in .json, which is kept for the truth file.",
    )?;
    if !overwrite {
        for p in [wav_path, json_path.as_path()] {
            if p.exists() {
                bail!(
                    "{} already exists; allow overwriting to replace it.",
                    p.display()
                );
            }
        }
    }
    let dir = match wav_path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut wav_tmp = tempfile::NamedTempFile::new_in(&dir)
        .with_context(|| format!("cannot create a temporary file in {}", dir.display()))?;
    let clipped = write_wav(&mut synth, wav_tmp.as_file_mut())
        .with_context(|| format!("writing {}", wav_path.display()))?;
    wav_tmp.as_file().sync_all()?;
    let mut truth = synth.truth().clone();
    truth.clipped_samples = clipped;
    let mut json_tmp = tempfile::NamedTempFile::new_in(&dir)?;
    serde_json::to_writer_pretty(&mut json_tmp, &truth)?;
    json_tmp.write_all(b"\n")?;
    json_tmp.as_file().sync_all()?;
    let persist = |tmp: tempfile::NamedTempFile, p: &Path| -> Result<()> {
        let r = if overwrite {
            tmp.persist(p).map(|_| ())
        } else {
            tmp.persist_noclobber(p).map(|_| ())
        };
        r.map_err(|e| e.error)
            .with_context(|| format!("cannot write {}", p.display()))
    };
    persist(wav_tmp, wav_path)?;
    if let Err(e) = persist(json_tmp, &json_path) {
        let _ = std::fs::remove_file(wav_path);
        return Err(e);
    }
    Ok(truth)
}

#[cfg(test)]
mod tests;
