//! Two-channel transmit/receive timing recordings with stated truth.
//!
//! Channel `key_channel` is the rig's own audio: a sidetone keyed exactly by
//! the key timing, plus the receiver's background (white noise and an
//! optional steady received tone) that is muted during each transmission.
//! The other channel is the monitor receiver: the transmitter's tone (the
//! main tone of [`super::SynthSpec`], with all its edge, chirp and noise
//! settings) keyed by the same timing, delayed.
//!
//! Model, for each transmission (a run of the text, `repeat` times):
//! - RF 50 % rise = key 50 % rise + `delay_ms`, plus `first_shortening_ms`
//!   for the transmission's first element; RF 50 % fall = key 50 % fall +
//!   `fall_delay_ms` (default: `delay_ms`).
//! - Background gain: 1 until `mute_lead_ms` before the first key 50 % rise,
//!   then −`mute_depth_db` until `hang_ms` after the last key 50 % fall, then
//!   back to 0 dB along a ramp linear in dB over `release_ms`.
//! - So the background power is within 3 dB of its level before the
//!   transmission again at `hang_ms + release_ms·(depth − 3)/depth` after the
//!   last key 50 % fall: that is the truth of `rx_recovery_ms`.

use anyhow::Result;
use serde::{Deserialize, Serialize};

use super::shapes::{self, EdgeShape};
use super::{check, finite_in, Elem};

/// Settings of a transmit/receive timing recording.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TxRxSpec {
    /// 1-based channel of the rig's own audio; the other channel is the
    /// monitor receiver.
    pub key_channel: u16,
    /// Sidetone pitch, Hz.
    pub sidetone_hz: f64,
    /// Sidetone key-down level, dBFS.
    pub sidetone_dbfs: f64,
    /// 10-90 % rise and fall of the sidetone (raised cosine), ms.
    pub sidetone_edge_ms: f64,
    /// RF 50 % rise minus key 50 % rise, ms.
    pub delay_ms: f64,
    /// RF 50 % fall minus key 50 % fall, ms; None = `delay_ms`.
    pub fall_delay_ms: Option<f64>,
    /// Extra delay of the RF rise of each transmission's first element, ms.
    pub first_shortening_ms: f64,
    /// Number of transmissions.
    pub transmissions: u32,
    /// Key-up from the last key 50 % fall of one transmission to the first
    /// key 50 % rise of the next, s.
    pub pause_s: f64,
    /// Receiver background on the key channel: white noise whose power over
    /// the whole band is this many dB below a full-scale sine.
    pub background_dbfs: f64,
    /// A steady received tone in the key channel's background, Hz (none).
    pub rx_tone_hz: Option<f64>,
    /// Its level, dBFS.
    pub rx_tone_dbfs: f64,
    /// Attenuation of the background while muted, dB.
    pub mute_depth_db: f64,
    /// Muting starts this long before the first key 50 % rise, ms.
    pub mute_lead_ms: f64,
    /// Muting holds this long after the last key 50 % fall, ms.
    pub hang_ms: f64,
    /// Then the gain returns to 0 dB along a ramp linear in dB this long, ms.
    pub release_ms: f64,
    /// Make the key channel a keyer line instead of the rig's audio (no
    /// sidetone, no receiver background to mute; the white noise stays).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub keyer_line: Option<KeyerLine>,
}

/// A keyer line: a level that steps between `up_fs` (key up) and `down_fs`
/// (key down) with the sidetone's edges, optionally through an AC-coupled
/// input (a one-pole high-pass with time constant `ac_coupling_ms`).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct KeyerLine {
    /// Level at key up, full scale = 1.
    pub up_fs: f64,
    /// Level at key down, full scale = 1.
    pub down_fs: f64,
    /// Time constant of an AC-coupled input, ms (None: DC-coupled).
    pub ac_coupling_ms: Option<f64>,
}

impl Default for KeyerLine {
    fn default() -> Self {
        KeyerLine {
            up_fs: 0.5,
            down_fs: 0.0,
            ac_coupling_ms: None,
        }
    }
}

impl Default for TxRxSpec {
    fn default() -> Self {
        TxRxSpec {
            key_channel: 1,
            sidetone_hz: 600.0,
            sidetone_dbfs: -12.0,
            sidetone_edge_ms: 3.0,
            delay_ms: 10.0,
            fall_delay_ms: None,
            first_shortening_ms: 5.0,
            transmissions: 3,
            pause_s: 3.0,
            background_dbfs: -40.0,
            rx_tone_hz: None,
            rx_tone_dbfs: -30.0,
            mute_depth_db: 40.0,
            mute_lead_ms: 5.0,
            hang_ms: 150.0,
            release_ms: 5.0,
            keyer_line: None,
        }
    }
}

/// The truth of one key element (the sidetone's).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct KeyElementTruth {
    /// Key 50 % rise instant, s from the start of the file.
    pub start_s: f64,
    /// Key 50 %-to-50 % duration, s.
    pub duration_s: f64,
}

/// The truth of one transmission.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TransmissionTruth {
    /// First key 50 % rise, s.
    pub start_s: f64,
    /// Last key 50 % fall, s.
    pub end_s: f64,
    pub elements: usize,
    /// Key and RF 50 %-to-50 % durations of the first element, ms.
    pub first_key_ms: f64,
    pub first_rf_ms: f64,
    /// (key − RF duration) of the first element minus that of the others, ms.
    pub shortening_ms: f64,
    /// Last key 50 % fall to background back within 3 dB, ms (null for a
    /// keyer line, which has no receiver background).
    pub recovery_ms: Option<f64>,
}

/// What was put into a timing recording (`txrx` of the truth file).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TxRxTruth {
    pub key_channel: u16,
    pub rf_channel: u16,
    pub delay_ms: f64,
    pub fall_delay_ms: f64,
    pub first_element_shortening_ms: f64,
    /// `hang_ms + release_ms·(depth − 3)/depth` (null for a keyer line).
    pub rx_recovery_ms: Option<f64>,
    /// Background level before each transmission: noise plus the received
    /// tone, dBFS (full-scale sine = 0 dBFS), over the whole band.
    pub background_dbfs: f64,
    pub transmissions: Vec<TransmissionTruth>,
    pub key_elements: Vec<KeyElementTruth>,
}

/// Background gain over time: one window per transmission.
#[derive(Clone, Debug)]
pub(super) struct Muting {
    /// (mute start, release start, release end), s.
    windows: Vec<(f64, f64, f64)>,
    depth_db: f64,
    next: usize,
}

impl Muting {
    /// Amplitude gain of the background at `t` (t must not decrease).
    pub(super) fn gain(&mut self, t: f64) -> f64 {
        while self.next < self.windows.len() && self.windows[self.next].2 <= t {
            self.next += 1;
        }
        let Some(&(a, b, c)) = self.windows.get(self.next) else {
            return 1.0;
        };
        let db = if t < a {
            0.0
        } else if t < b {
            -self.depth_db
        } else {
            -self.depth_db * (1.0 - (t - b) / (c - b))
        };
        10f64.powf(db / 20.0)
    }
}

/// The timing plan: the key (sidetone) and RF elements, the muting, the truth.
pub(super) struct Plan {
    pub key: Vec<Elem>,
    pub rf: Vec<Elem>,
    pub muting: Muting,
    pub truth: TxRxTruth,
    pub sidetone_edge_s: f64,
}

/// Lays out `transmissions` copies of one transmission's elements (`one`,
/// placed by the main layout) and derives the RF timing and the muting.
pub(super) fn plan(
    t: &TxRxSpec,
    one: &[Elem],
    rf_rise: (EdgeShape, f64),
    rf_fall: (EdgeShape, f64),
    unit_s: f64,
    channels: u16,
) -> Result<Plan> {
    check(
        channels == 2,
        "a transmit/receive timing recording needs two channels.",
    )?;
    check(
        t.key_channel == 1 || t.key_channel == 2,
        "the key channel must be 1 or 2.",
    )?;
    let fall_delay = t.fall_delay_ms.unwrap_or(t.delay_ms);
    check(
        finite_in(t.delay_ms, -100.0, 1000.0) && finite_in(fall_delay, -100.0, 1000.0),
        "the key-to-RF delays must be between -100 and 1000 ms.",
    )?;
    check(
        finite_in(t.first_shortening_ms, 0.0, 1000.0),
        "the first-element shortening must be between 0 and 1000 ms.",
    )?;
    check(
        (1..=10_000).contains(&t.transmissions),
        "the number of transmissions must be between 1 and 10000.",
    )?;
    check(
        finite_in(t.sidetone_dbfs, -150.0, 0.0)
            && finite_in(t.background_dbfs, -200.0, 0.0)
            && finite_in(t.rx_tone_dbfs, -200.0, 0.0),
        "the sidetone, background and received-tone levels must be between -150 (-200) and 0 dBFS.",
    )?;
    check(
        finite_in(t.mute_depth_db, 6.0, 150.0),
        "the muting depth must be between 6 and 150 dB.",
    )?;
    check(
        finite_in(t.mute_lead_ms, 0.0, 40.0),
        "the muting lead must be between 0 and 40 ms.",
    )?;
    check(
        finite_in(t.hang_ms, 0.0, 60_000.0) && finite_in(t.release_ms, 0.1, 60_000.0),
        "the hang time must be between 0 and 60000 ms and the release between 0.1 and 60000 ms.",
    )?;
    check(
        finite_in(t.sidetone_edge_ms, 0.0, 50.0),
        "the sidetone edge must be between 0 and 50 ms.",
    )?;
    let separate = (12.0 * unit_s).max(1.0);
    check(
        finite_in(t.pause_s, 0.0, 3600.0)
            && t.pause_s > separate
            && t.pause_s * 1e3 >= t.hang_ms + t.release_ms + t.mute_lead_ms + 300.0,
        &format!(
            "the pause between transmissions must exceed {separate:.2} s (max of 1 s and 12 dit units) and leave 300 ms after the hang and release."
        ),
    )?;
    check(!one.is_empty(), "the text has no elements.")?;
    let side = t.sidetone_edge_ms * 1e-3;
    let rc = EdgeShape::RaisedCosine;
    let span = one.last().expect("non-empty").t_e - one[0].t_s;
    let mut key = Vec::new();
    let mut rf = Vec::new();
    let mut windows = Vec::new();
    let mut rows = Vec::new();
    let d = t.delay_ms * 1e-3;
    let fd = fall_delay * 1e-3;
    let sh = t.first_shortening_ms * 1e-3;
    let depth = t.mute_depth_db;
    let recovery_ms = t
        .keyer_line
        .is_none()
        .then(|| t.hang_ms + t.release_ms * (depth - 3.0) / depth);
    if let Some(k) = t.keyer_line {
        check(
            finite_in(k.up_fs, -1.0, 1.0)
                && finite_in(k.down_fs, -1.0, 1.0)
                && (k.up_fs - k.down_fs).abs() >= 0.01,
            "the keyer line's levels must be between -1 and 1 and at least 0.01 apart.",
        )?;
        if let Some(a) = k.ac_coupling_ms {
            check(
                finite_in(a, 1.0, 10_000.0),
                "the keyer line's AC-coupling time constant must be between 1 and 10000 ms.",
            )?;
        }
    }
    for k in 0..t.transmissions {
        let off = k as f64 * (span + t.pause_s);
        let first_key = key.len();
        for (i, e) in one.iter().enumerate() {
            let (ts, te) = (e.t_s + off, e.t_e + off);
            key.push(Elem {
                t_on: ts - shapes::lead_s(rc, side),
                t_s: ts,
                t_e: te,
                t_end: te + shapes::fall_end_s(rc, side),
            });
            let rs = ts + d + if i == 0 { sh } else { 0.0 };
            let re = te + fd;
            rf.push(Elem {
                t_on: rs - shapes::lead_s(rf_rise.0, rf_rise.1),
                t_s: rs,
                t_e: re,
                t_end: re + shapes::fall_end_s(rf_fall.0, rf_fall.1),
            });
        }
        let (s0, e0) = (key[first_key].t_s, key.last().expect("pushed").t_e);
        let rel = e0 + t.hang_ms * 1e-3;
        windows.push((s0 - t.mute_lead_ms * 1e-3, rel, rel + t.release_ms * 1e-3));
        let f = &rf[first_key];
        let first_key_ms = (key[first_key].t_e - s0) * 1e3;
        let first_rf_ms = (f.t_e - f.t_s) * 1e3;
        rows.push(TransmissionTruth {
            start_s: s0,
            end_s: e0,
            elements: one.len(),
            first_key_ms,
            first_rf_ms,
            shortening_ms: t.first_shortening_ms,
            recovery_ms,
        });
    }
    // Every RF element and gap must still hold its edges.
    let in_mark = shapes::settle_s(rf_rise.0, rf_rise.1) + shapes::lead_s(rf_fall.0, rf_fall.1);
    let in_space = shapes::settle_s(rf_fall.0, rf_fall.1) + shapes::lead_s(rf_rise.0, rf_rise.1);
    for (i, e) in rf.iter().enumerate() {
        check(
            e.t_e - e.t_s >= in_mark - 1e-12,
            "the delays and the shortening leave an RF element too short for its edges; lower them or the speed.",
        )?;
        if let Some(n) = rf.get(i + 1) {
            check(
                n.t_s - e.t_e >= in_space - 1e-12,
                "the fall delay leaves an RF element space too short for its edges; lower it or the speed.",
            )?;
        }
        check(
            e.t_on >= 0.0,
            "the first RF element would start before the file; lengthen the lead-in.",
        )?;
    }
    let key_in_mark = shapes::settle_s(rc, side) + shapes::lead_s(rc, side);
    check(
        one.iter().all(|e| e.t_e - e.t_s >= key_in_mark - 1e-12),
        "the sidetone edges do not fit in a mark; shorten them or lower the speed.",
    )?;
    let bg_power = 0.5 * 10f64.powf(t.background_dbfs / 10.0)
        + t.rx_tone_hz
            .map_or(0.0, |_| 0.5 * 10f64.powf(t.rx_tone_dbfs / 10.0));
    let truth = TxRxTruth {
        key_channel: t.key_channel,
        rf_channel: 3 - t.key_channel,
        delay_ms: t.delay_ms,
        fall_delay_ms: fall_delay,
        first_element_shortening_ms: t.first_shortening_ms,
        rx_recovery_ms: recovery_ms,
        background_dbfs: 10.0 * (2.0 * bg_power).log10(),
        transmissions: rows,
        key_elements: key
            .iter()
            .map(|e| KeyElementTruth {
                start_s: e.t_s,
                duration_s: e.t_e - e.t_s,
            })
            .collect(),
    };
    Ok(Plan {
        key,
        rf,
        muting: Muting {
            windows,
            depth_db: depth,
            next: 0,
        },
        truth,
        sidetone_edge_s: side,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn one() -> Vec<Elem> {
        // Two dits at 20 WPM (60 ms marks, 60 ms space), starting at 0.3 s.
        [0.3, 0.42]
            .iter()
            .map(|&s| Elem {
                t_on: s - 0.002,
                t_s: s,
                t_e: s + 0.06,
                t_end: s + 0.062,
            })
            .collect()
    }

    #[test]
    fn rf_timing_and_recovery_truth() {
        let t = TxRxSpec {
            delay_ms: 12.0,
            fall_delay_ms: Some(8.0),
            first_shortening_ms: 7.0,
            transmissions: 2,
            hang_ms: 200.0,
            release_ms: 10.0,
            mute_depth_db: 40.0,
            ..Default::default()
        };
        let e = (EdgeShape::RaisedCosine, 0.004);
        let p = plan(&t, &one(), e, e, 0.06, 2).unwrap();
        assert_eq!(p.key.len(), 4);
        // First element: rise later by delay + shortening; others by delay.
        assert!((p.rf[0].t_s - p.key[0].t_s - 0.019).abs() < 1e-12);
        assert!((p.rf[1].t_s - p.key[1].t_s - 0.012).abs() < 1e-12);
        assert!((p.rf[2].t_s - p.key[2].t_s - 0.019).abs() < 1e-12);
        assert!((p.rf[3].t_e - p.key[3].t_e - 0.008).abs() < 1e-12);
        // Second transmission starts a pause after the first one's last fall.
        assert!((p.key[2].t_s - p.key[1].t_e - 3.0).abs() < 1e-12);
        // Recovery: hang + release (depth − 3)/depth = 200 + 10·37/40.
        assert!((p.truth.rx_recovery_ms.unwrap() - 209.25).abs() < 1e-9);
        let r = &p.truth.transmissions[0];
        // Shortening as defined: (key − RF) of the first minus of the others.
        let others = 60.0 - (60.0 - 12.0 + 8.0);
        assert!((r.first_key_ms - r.first_rf_ms - others - 7.0).abs() < 1e-9);
    }

    #[test]
    fn muting_gain_is_minus_3_db_at_the_stated_recovery() {
        let t = TxRxSpec {
            hang_ms: 100.0,
            release_ms: 20.0,
            mute_depth_db: 30.0,
            ..Default::default()
        };
        let e = (EdgeShape::RaisedCosine, 0.004);
        let mut p = plan(&t, &one(), e, e, 0.06, 2).unwrap();
        let last_fall = p.key[1].t_e;
        assert!((p.muting.gain(0.1) - 1.0).abs() < 1e-12);
        // Muted from mute_lead before the first rise.
        assert!((p.muting.gain(0.3 - 0.004) - 10f64.powf(-1.5)).abs() < 1e-12);
        let tr = last_fall + p.truth.rx_recovery_ms.unwrap() * 1e-3;
        let db = 20.0 * p.muting.gain(tr).log10();
        assert!((db + 3.0).abs() < 1e-9, "{db}");
        assert!((p.muting.gain(last_fall + 0.121) - 1.0).abs() < 1e-12);
    }

    /// The rendered file against the plan: the first non-zero sample of
    /// each channel where the plan says the envelope leaves zero, and the
    /// background's mean square before, during and after the muting.
    #[test]
    fn rendered_channels_follow_the_plan() {
        let spec = crate::synth::SynthSpec {
            text: "EE".into(),
            channels: 2,
            lead_in_s: 0.5,
            tail_s: 0.6,
            txrx: Some(TxRxSpec {
                delay_ms: 20.0,
                first_shortening_ms: 10.0,
                transmissions: 1,
                background_dbfs: -40.0,
                hang_ms: 100.0,
                ..Default::default()
            }),
            ..Default::default()
        };
        let (x, truth) = crate::synth::render(&spec).unwrap();
        let t = truth.txrx.unwrap();
        let fs = 48_000.0;
        let rf: Vec<f32> = x.iter().skip(1).step_by(2).copied().collect();
        let key: Vec<f32> = x.iter().step_by(2).copied().collect();
        // RF: silent (no noise) until its first element leaves zero: key
        // 50 % rise + delay + shortening - half the 5 ms raised cosine's
        // span (5 ms / 0.5903 / 2).
        let first_rf = rf.iter().position(|v| *v != 0.0).unwrap() as f64 / fs;
        let lead = 0.005 / 0.590_334_470_601_733_2 / 2.0;
        let want = t.key_elements[0].start_s + 0.030 - lead;
        assert!((first_rf - want).abs() < 2.0 / fs, "{first_rf} {want}");
        // Key channel background: mean square over 50 ms stretches.
        let ms = |a: f64| {
            let i = (a * fs) as usize;
            key[i..i + 2400]
                .iter()
                .map(|v| (*v as f64).powi(2))
                .sum::<f64>()
                / 2400.0
        };
        let full = 0.5 * 1e-4; // -40 dBFS: half of 10^(-40/10)
        let first = t.transmissions[0].start_s;
        let end = t.transmissions[0].end_s;
        assert!((10.0 * (ms(0.1) / full).log10()).abs() < 0.3);
        // Muted by 40 dB in a key-up gap of the transmission (the sidetone
        // is off between the two dits: 60 ms gap, 3 ms edges).
        let gap = t.key_elements[0].start_s + t.key_elements[0].duration_s + 0.01;
        let i = (gap * fs) as usize;
        let muted = key[i..i + 1920]
            .iter()
            .map(|v| (*v as f64).powi(2))
            .sum::<f64>()
            / 1920.0;
        assert!(
            (10.0 * (muted / full).log10() + 40.0).abs() < 0.5,
            "{muted}"
        );
        assert!(first < gap && gap < end);
        // Back after hang + release.
        assert!((10.0 * (ms(end + 0.2) / full).log10()).abs() < 0.3);
    }

    #[test]
    fn refuses_what_cannot_be_made() {
        let e = (EdgeShape::RaisedCosine, 0.004);
        let bad = |t: TxRxSpec, ch: u16| plan(&t, &one(), e, e, 0.06, ch).is_err();
        assert!(bad(TxRxSpec::default(), 1));
        assert!(bad(
            TxRxSpec {
                pause_s: 0.5,
                ..Default::default()
            },
            2
        ));
        assert!(bad(
            TxRxSpec {
                first_shortening_ms: 58.0,
                ..Default::default()
            },
            2
        ));
        assert!(bad(
            TxRxSpec {
                mute_depth_db: 2.0,
                ..Default::default()
            },
            2
        ));
    }
}
