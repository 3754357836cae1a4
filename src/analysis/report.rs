//! The report: a plain serializable record of what was measured. Every
//! presentation (terminal, JSON, CSV) reads this and computes nothing.

use serde::{Deserialize, Serialize};

use crate::dsp::stats::Spread;

/// Dit or dah, by clustering of the element durations.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Kind {
    Dit,
    Dah,
}

impl Kind {
    pub fn as_str(&self) -> &'static str {
        match self {
            Kind::Dit => "dit",
            Kind::Dah => "dah",
        }
    }
}

/// The recording and which part of it was analysed.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct InputInfo {
    pub path: String,
    pub sample_rate_hz: u32,
    pub channels: u16,
    /// 1-based channel that was analysed.
    pub channel_used: u16,
    pub bits: u16,
    pub sample_format: String,
    pub duration_s: f64,
    /// Peak sample of the analysed channel, dBFS (full-scale sine = 0 dBFS).
    pub peak_dbfs: f64,
    /// Samples at or within 0.01 % of full scale in the analysed channel.
    pub clipped_samples: u64,
}

/// One keying element.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Element {
    pub index: usize,
    /// 50 % rise instant, s from the start of the recording.
    pub start_s: f64,
    /// 50 %-to-50 % duration, s.
    pub duration_s: f64,
    pub kind: Kind,
    /// 10 %-to-90 % rise time, ms (null when the edge could not be measured).
    pub rise_ms: Option<f64>,
    /// 90 %-to-10 % fall time, ms.
    pub fall_ms: Option<f64>,
    /// Largest deviation of the fitted frequency trace from the settled frequency, Hz.
    pub chirp_hz: f64,
    /// Largest deviation of the raw 2 ms frequency trace (includes noise), Hz.
    pub chirp_raw_hz: f64,
    /// RMS scatter of the frequency trace about its model, Hz.
    pub chirp_noise_hz: f64,
    /// Key-down level, dBFS.
    pub level_dbfs: f64,
    /// Settled frequency of the element, Hz.
    pub frequency_hz: f64,
    /// Key-up time before this element (from the previous 50 % fall), s.
    pub gap_before_s: Option<f64>,
    /// The frequency trace: seconds since the 50 % rise and Hz from the
    /// settled frequency (kept for plots; not written to JSON).
    #[serde(skip)]
    pub trace: Vec<(f32, f32)>,
}

/// Recording-wide figures.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct Summary {
    pub keyed_signal_found: bool,
    /// Pitch of the keyed carrier, Hz (median of the elements' settled frequencies).
    pub tone_hz: Option<f64>,
    /// Median key-down level, dBFS.
    pub level_dbfs: Option<f64>,
    /// Key-down carrier power over the noise power in `snr_bandwidth_hz`, dB.
    pub snr_db: Option<f64>,
    pub snr_bandwidth_hz: f64,
    /// Keying speed by PARIS timing (ITU-R M.1677-1): dit + element space = 2 units, 1 unit = 1.2/WPM s.
    pub wpm: Option<f64>,
    /// Length of one PARIS unit, ms.
    pub unit_ms: Option<f64>,
    pub dah_dit_ratio: Option<f64>,
    /// Dit mark over the following element space (1.0 = standard weighting).
    pub mark_space_ratio: Option<f64>,
    pub rise_ms: Option<Spread>,
    pub fall_ms: Option<Spread>,
    pub chirp_hz: Option<Spread>,
    pub chirp_raw_hz: Option<Spread>,
    /// Chirp of the average key-down (traces of all dits averaged, then
    /// fitted): far less noisy than any one element's figure, Hz.
    pub chirp_mean_element_hz: Option<f64>,
    /// 10-90 % time of the mean rising edge (all rises aligned at 50 % and
    /// their power averaged): steadier than the median at low SNR, ms.
    pub rise_mean_edge_ms: Option<f64>,
    /// 90-10 % time of the mean falling edge, ms.
    pub fall_mean_edge_ms: Option<f64>,
    pub element_count: usize,
    pub dit_count: usize,
    pub dah_count: usize,
    /// Width of the envelope band around the pitch (-6 dB points), Hz.
    pub envelope_bandwidth_hz: f64,
    /// 10-90 % time of an ideal step through the envelope filter, ms: the
    /// fastest edge the measurement can see.
    pub rise_floor_ms: f64,
    /// Sample rate of the complex baseband the elements are measured on, Hz.
    pub baseband_rate_hz: f64,
    /// Sidetone against a received signal (with `--sidetone`).
    pub sidetone: Option<SidetoneFigures>,
    /// Receiver muting: background level (all but the sidetone's pitch) in
    /// key-up less that in key-down, dB (with `--sidetone`).
    pub rx_muting_db: Option<f64>,
    /// What `rx_muting_db` was computed from.
    pub rx_muting: Option<super::muting::MutingFigures>,
    /// Backwave, hum and drift.
    #[serde(flatten)]
    pub carrier: super::carrier::CarrierFigures,
    /// Key clicks and bandwidths from the spectral pass.
    #[serde(flatten)]
    pub spectral: super::spectral::SpectralFigures,
}

/// One tone found in the recording.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ToneInfo {
    pub frequency_hz: f64,
    /// Key-down level for a keyed tone (median over its elements, noise
    /// removed), the steady level for a steady one, dBFS.
    pub level_dbfs: Option<f64>,
    pub keyed: bool,
    /// Elements measured on this tone (0 for a steady tone).
    pub elements: usize,
    /// True for the tone that `summary` and `elements` describe.
    pub main: bool,
    /// Keying speed of this tone, WPM.
    pub wpm: Option<f64>,
    /// Median rise and fall times of this tone, ms.
    pub rise_ms: Option<f64>,
    pub fall_ms: Option<f64>,
}

/// Sidetone level against a received signal's.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SidetoneFigures {
    /// Sidetone minus signal, dB.
    pub ratio_db: f64,
    pub sidetone_dbfs: f64,
    pub signal_dbfs: f64,
    pub sidetone_hz: f64,
    /// Pitch of the signal (null when its level was given as a number).
    pub signal_hz: Option<f64>,
    /// Where the signal's level came from: "tone" (another tone in this
    /// recording), "reference file" or "given level".
    pub signal_source: String,
}

/// The whole report for one recording.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Report {
    pub tool: String,
    pub version: String,
    pub input: InputInfo,
    pub summary: Summary,
    /// Every tone found in the analysed channel, strongest first.
    #[serde(default)]
    pub tones: Vec<ToneInfo>,
    pub elements: Vec<Element>,
    pub warnings: Vec<String>,
    /// Arrays behind the pictures (not written to JSON).
    #[serde(skip)]
    pub views: super::views::Views,
    /// Verdicts of the limits on the summary figures (empty until judged).
    #[serde(default)]
    pub verdicts: Vec<crate::judge::Verdict>,
}
