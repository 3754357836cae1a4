//! Plain-sentence warnings about what limits a report's numbers.

use super::report::Report;
use super::tracker::ToneTracker;
use crate::dsp::stats::median;

/// Fewer elements than this make the statistics rough.
pub const FEW_ELEMENTS: usize = 20;

/// Looks over a finished report and says what the user should know.
pub fn collect(r: &Report, tr: &ToneTracker) -> Vec<String> {
    let mut w = Vec::new();
    let s = &r.summary;
    if r.input.clipped_samples > 0 {
        w.push(format!(
            "{} samples reach full scale (clipping): lower the recording level so peaks stay below about -6 dBFS; edges and levels of clipped elements are wrong.",
            r.input.clipped_samples
        ));
    }
    if !s.keyed_signal_found {
        w.push(format!(
            "A tone at {:.1} Hz was found but no keying could be measured on it.",
            tr.center_hz()
        ));
        return w;
    }
    if s.element_count < FEW_ELEMENTS {
        w.push(format!(
            "Only {} elements were found: the spreads are rough; record at least {} (send the text a few times).",
            s.element_count, FEW_ELEMENTS
        ));
    }
    if let Some(snr) = s.snr_db {
        if snr < 15.0 {
            w.push(format!(
                "The SNR is {snr:.1} dB in {:.0} Hz, too low for trustworthy rise and fall times: raise the signal at the receiver (less attenuation, more RF gain) without overloading it.",
                s.snr_bandwidth_hz
            ));
        } else if snr < 25.0 {
            w.push(format!(
                "The SNR is {snr:.1} dB in {:.0} Hz: rise and fall times are good to about 10 %, chirp below a few hertz is lost in noise.",
                s.snr_bandwidth_hz
            ));
        }
    }
    let noise: Vec<f64> = r.elements.iter().map(|e| e.chirp_noise_hz).collect();
    let chirp_noise = median(&noise);
    if chirp_noise > 1.0 {
        w.push(format!(
            "The frequency trace scatters by {chirp_noise:.1} Hz RMS within elements: chirp smaller than about {:.0} Hz cannot be told from noise.",
            2.0 * chirp_noise
        ));
    }
    let droop: Vec<f64> = r
        .elements
        .iter()
        .filter_map(|e| {
            // Only elements long enough for AGC recovery to show.
            (e.duration_s > 0.05)
                .then_some(())
                .and(None::<f64>)
                .or(Some(0.0))
                .filter(|_| false)
        })
        .collect();
    let _ = droop;
    let cut_by_file = tr.elements().iter().filter(|e| e.truncated).count();
    if cut_by_file > 0 {
        w.push(format!(
            "The recording starts or ends during a key-down ({cut_by_file} element(s)): those elements' durations and cut edges are left out of the speed, weighting and edge figures. Start and stop recording with the key up."
        ));
    }
    let el: Vec<f64> = tr
        .elements()
        .iter()
        .filter(|e| e.end_s - e.start_s > 0.05)
        .filter_map(|e| e.early_late_db)
        .collect();
    if el.len() >= 3 {
        let m = median(&el);
        if m.abs() > 1.0 {
            w.push(format!(
                "The key-down level {} by {:.1} dB from start to end of each element, which suggests receiver AGC: switch AGC off.",
                if m > 0.0 { "droops" } else { "climbs" },
                m.abs()
            ));
        }
    }
    for (name, sp) in [("rise", s.rise_ms), ("fall", s.fall_ms)] {
        if let Some(sp) = sp {
            if sp.median < 2.0 * s.rise_floor_ms {
                w.push(format!(
                    "The median {name} time ({:.2} ms) is near the {:.2} ms that the analysis band of {:.0} Hz allows: the true edge may be faster.",
                    sp.median, s.rise_floor_ms, s.envelope_bandwidth_hz
                ));
            }
        }
    }
    let nyq_floor_ms = 1000.0 * 0.35 / (r.input.sample_rate_hz as f64 / 2.0);
    if let Some(sp) = s.rise_ms {
        if sp.median < 3.0 * nyq_floor_ms {
            w.push(format!(
                "The recording's sample rate ({} Hz) limits edges to about {:.2} ms.",
                r.input.sample_rate_hz, nyq_floor_ms
            ));
        }
    }
    let unmeasured = tr.unmeasured();
    if unmeasured > 0 {
        w.push(format!(
            "{unmeasured} key-down(s) were seen but their edges could not be measured."
        ));
    }
    if r.elements
        .iter()
        .any(|e| e.rise_ms.is_none() || e.fall_ms.is_none())
    {
        let n = r
            .elements
            .iter()
            .filter(|e| e.rise_ms.is_none() || e.fall_ms.is_none())
            .count();
        w.push(format!("{n} element(s) lack a rise or fall time (edge not found above the noise, a key-down longer than 20 s, or cut by the start or end of the recording)."));
    }
    w
}

/// Warnings about what the recording's passband and the spectrum allow.
pub fn spectral(r: &Report) -> Vec<String> {
    let mut w = Vec::new();
    let s = &r.summary;
    let sp = &s.spectral;
    let Some(tone) = s.tone_hz else { return w };
    let edges = sp
        .occupied_edges_hz
        .or(sp.bandwidth_edges_hz.get("20").copied().flatten());
    if let (Some([lo, hi]), Some([pa, pb])) = (edges, sp.passband_hz) {
        let margin = 2.0 * sp.rbw_hz.max(10.0);
        if tone + lo <= pa + margin || tone + hi >= pb - margin {
            w.push(format!(
                "The sidebands reach the edge of the receiver's passband ({pa:.0}-{pb:.0} Hz): the real signal may be wider than measured. Use the widest receiver filter and put the pitch near its middle."
            ));
        }
    }
    if let Some([lo, _]) = edges {
        if tone + lo < 2.0 * sp.rbw_hz.max(10.0) {
            w.push(format!(
                "The lower sideband reaches 0 Hz (pitch {tone:.0} Hz) and folds back over itself: raise the pitch so the whole signal fits above 0 Hz."
            ));
        }
    }
    if let (Some([pa, pb]), Some(rise)) = (sp.passband_hz, s.rise_ms) {
        // A band-pass of width BW has a 10-90 % time of about 0.8/BW to 1.1/BW
        // (BRIEF.md, Butterworth orders 2-6 computed with scipy.signal).
        let bw = (pb - pa).max(1.0);
        let floor_ms = 1.1 / bw * 1e3;
        if rise.median < 1.5 * floor_ms {
            w.push(format!(
                "Rise times (median {:.2} ms) approach the {floor_ms:.2} ms that the receiver's {bw:.0} Hz passband allows: use a wider filter.",
                rise.median
            ));
        }
    }
    if let Some(k) = sp.occupied_to_necessary_ratio {
        if k > 2.0 {
            w.push(format!(
                "The occupied bandwidth is {k:.1} times the necessary bandwidth B*K: the keying throws clicks."
            ));
        }
    }
    w
}
