//! Data behind the pictures: bounded arrays the plots and the HTML report
//! draw from. Filled by the analysis, never written to JSON (they are large
//! and derived); presentation only draws them.

use serde::{Deserialize, Serialize};

/// A spectrum on a uniform frequency grid around the pitch.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct SpectrumView {
    /// Frequency of the first point, Hz offset from the pitch.
    pub first_offset_hz: f64,
    /// Spacing of the points, Hz.
    pub step_hz: f64,
    /// Level of each point, dB relative to the key-down carrier (dBc) in
    /// `rbw_hz`.
    pub dbc: Vec<f32>,
    pub rbw_hz: f64,
}

/// A spectrogram: `rows` frequencies by `cols` times, row-major from the
/// lowest frequency, dB relative to the key-down carrier.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct SpectrogramView {
    pub t0_s: f64,
    pub dt_s: f64,
    /// Absolute audio frequency of row 0, Hz.
    pub f0_hz: f64,
    pub df_hz: f64,
    pub rows: usize,
    pub cols: usize,
    pub dbc: Vec<f32>,
}

/// Every element's edges resampled on a common grid, normalised 0..1
/// between the state levels, time from the edge's 50 % instant.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct EdgesView {
    /// Time of point 0, ms from the 50 % instant (negative), and spacing, ms.
    pub first_ms: f64,
    pub step_ms: f64,
    /// One row per element (same order as the report's elements); empty
    /// rows where that edge was not measured.
    pub rises: Vec<Vec<f32>>,
    pub falls: Vec<Vec<f32>>,
}

/// Everything the pictures need.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Views {
    /// Averaged spectrum of the keyed passage.
    pub spectrum: SpectrumView,
    /// Noise spectrum from the key-up gaps, same grid.
    pub noise: SpectrumView,
    pub spectrogram: SpectrogramView,
    /// Envelope over time: (s, dBFS) pairs, at most a few thousand, each the
    /// maximum of its stretch so short elements stay visible.
    pub envelope: Vec<(f32, f32)>,
    pub edges: EdgesView,
}
