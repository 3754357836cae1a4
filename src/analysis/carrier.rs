//! Figures of the carrier itself rather than of its keying: backwave (the
//! carrier left during key-up), hum and ripple (AM and FM at mains-related
//! frequencies) and drift (the pitch walking over the recording).

use serde::{Deserialize, Serialize};

use super::report::Element;
use super::tracker::ToneTracker;
use crate::dsp::hum::pick;
use crate::dsp::stats::{median, spread, Spread};

/// Hum and ripple on the key-down carrier.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct HumFigures {
    /// AM depth at `frequency_hz`, percent (null when below `am_floor_percent`).
    pub am_percent: Option<f64>,
    /// Peak FM deviation at `frequency_hz`, Hz (null when below `fm_floor_hz`).
    pub fm_hz: Option<f64>,
    /// The strongest mains-related component, Hz.
    pub frequency_hz: f64,
    /// 50 or 60: the mains family with more hum.
    pub mains_hz: f64,
    /// Smallest AM depth and FM deviation this recording resolves there
    /// (four standard errors).
    pub am_floor_percent: f64,
    pub fm_floor_hz: f64,
}

/// Backwave, hum and drift of one tone.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct CarrierFigures {
    pub backwave_db: Option<f64>,
    pub backwave_floor_db: Option<f64>,
    pub hum: Option<HumFigures>,
    pub drift_hz_per_min: Option<f64>,
    pub drift_total_hz: Option<f64>,
    /// Spread of the elements' settled frequencies, Hz.
    pub pitch_spread_hz: Option<Spread>,
}

/// Fewest elements and shortest span for a drift figure.
const DRIFT_MIN_ELEMENTS: usize = 10;
const DRIFT_MIN_SPAN_S: f64 = 5.0;

/// Least-squares slope of y on x.
pub fn ols_slope(x: &[f64], y: &[f64]) -> Option<f64> {
    let n = x.len() as f64;
    if x.len() < 2 {
        return None;
    }
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - mx).powi(2)).sum();
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    (sxx > 0.0).then(|| sxy / sxx)
}

/// Drift: the least-squares slope of the elements' settled frequencies
/// against their start times, Hz per minute; and the total change, the
/// median frequency of the last tenth of the elements (by time) less that of
/// the first tenth, which shows a warm-up that has settled.
fn drift(elements: &[Element]) -> (Option<f64>, Option<f64>) {
    let n = elements.len();
    let span = match (elements.first(), elements.last()) {
        (Some(a), Some(b)) => b.start_s - a.start_s,
        _ => 0.0,
    };
    if n < DRIFT_MIN_ELEMENTS || span < DRIFT_MIN_SPAN_S {
        return (None, None);
    }
    let t: Vec<f64> = elements.iter().map(|e| e.start_s).collect();
    let f: Vec<f64> = elements.iter().map(|e| e.frequency_hz).collect();
    let slope = ols_slope(&t, &f).map(|s| s * 60.0);
    let k = (n / 10).max(3);
    let total = median(&f[n - k..]) - median(&f[..k]);
    (slope, Some(total))
}

/// Fills the carrier figures from a finished tracker and its elements;
/// `level_power` is the key-down carrier power (amplitude squared).
pub fn measure(tr: &ToneTracker, elements: &[Element], level_power: Option<f64>) -> CarrierFigures {
    let mut out = CarrierFigures::default();
    if let (Some(lp), Some((p, floor))) = (level_power, tr.key_up_carrier()) {
        if lp > 0.0 {
            let db = |x: f64| 10.0 * (x / lp).max(1e-30).log10();
            out.backwave_floor_db = Some(db(floor));
            out.backwave_db = (p > floor).then(|| db(p));
        }
    }
    out.hum = pick(&tr.hum().components()).map(|h| HumFigures {
        am_percent: h.am_percent,
        fm_hz: h.fm_hz,
        frequency_hz: h.frequency_hz,
        mains_hz: h.mains_hz,
        am_floor_percent: h.am_floor_percent,
        fm_floor_hz: h.fm_floor_hz,
    });
    (out.drift_hz_per_min, out.drift_total_hz) = drift(elements);
    let f: Vec<f64> = elements.iter().map(|e| e.frequency_hz).collect();
    out.pitch_spread_hz = spread(&f);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slope_of_a_line() {
        // Truth: y = 3x + 1 exactly.
        let x = [0.0, 1.0, 2.0, 5.0];
        let y: Vec<f64> = x.iter().map(|v| 3.0 * v + 1.0).collect();
        assert!((ols_slope(&x, &y).unwrap() - 3.0).abs() < 1e-12);
        assert!(ols_slope(&[1.0, 1.0], &[2.0, 3.0]).is_none());
    }
}
