//! Spectral figures against outside references: scipy.signal.welch golden
//! values, a direct DFT computed here, the receiver filter's own response,
//! and the soft/hard keying contrasts of issue #3.

use std::f64::consts::PI;

use cwaudit::accuracy::direct_obw_hz;
use cwaudit::analysis::spectral::welch_power;
use cwaudit::analysis::{analyze_file, Options};
use cwaudit::synth::{render, write_files, Bandpass, EdgeShape, SynthSpec};

fn spec(rise: f64, fall: f64, snr: Option<f64>, rate: u32) -> SynthSpec {
    SynthSpec {
        text: "PARIS PARIS PARIS".into(),
        wpm: 20.0,
        pitch_hz: 1000.0,
        sample_rate_hz: rate,
        rise_ms: rise,
        fall_ms: fall,
        rise_shape: EdgeShape::RaisedCosine,
        fall_shape: EdgeShape::RaisedCosine,
        snr_db: snr,
        seed: 3,
        ..Default::default()
    }
}

fn analyse(s: &SynthSpec) -> cwaudit::analysis::report::Report {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("x.wav");
    write_files(s, &p, true).unwrap();
    analyze_file(&p, &Options::default()).unwrap()
}

#[test]
fn welch_matches_scipy() {
    // Source: scipy.signal.welch (scaling="spectrum", periodic Hann, 50 %
    // overlap, no detrend), scipy 1.17.1, via scripts/golden_welch.py. scipy's
    // one-sided spectrum is 2 |X|^2 / sum(w)^2 away from DC and Nyquist.
    let g: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string("fixtures/welch_golden.json").unwrap())
            .unwrap();
    assert!(g["source"].as_str().unwrap().contains("scipy 1.17.1"));
    let mut r = hound::WavReader::open("fixtures/hilbert_input.wav").unwrap();
    let x: Vec<f32> = r.samples::<f32>().map(|v| v.unwrap()).collect();
    for case in g["cases"].as_array().unwrap() {
        let n = case["nperseg"].as_u64().unwrap() as usize;
        let ours = welch_power(&x, n);
        let wsum: f64 = (0..n)
            .map(|i| (PI * i as f64 / n as f64).sin().powi(2))
            .sum();
        let peak = case["power"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .fold(0.0, f64::max);
        for (b, p) in case["bins"]
            .as_array()
            .unwrap()
            .iter()
            .zip(case["power"].as_array().unwrap())
        {
            let k = b.as_u64().unwrap() as usize;
            let want = p.as_f64().unwrap();
            let got = 2.0 * ours[k] / (wsum * wsum);
            // Within 1e-4 of the value or 1e-7 of the peak (f32 input, f32 FFT).
            assert!(
                (got - want).abs() <= 1e-4 * want + 1e-7 * peak,
                "n {n} bin {k}: {got} vs {want}"
            );
        }
    }
}

#[test]
fn occupied_bandwidth_matches_a_direct_dft() {
    for (rise, snr) in [(5.0, 30.0), (1.0, 30.0), (5.0, 15.0)] {
        // Truth: a direct DFT of one clean "PARIS" (the keying pattern the
        // recording repeats); measured: the noisy recording of it three times
        // (a 15 dB noise floor needs the key-up time of a longer recording).
        let one = SynthSpec {
            text: "PARIS".into(),
            snr_db: None,
            ..spec(rise, rise, None, 8_000)
        };
        let (x, _) = render(&one).unwrap();
        let truth = direct_obw_hz(&x, 8_000.0, 1000.0);
        let rep = analyse(&spec(rise, rise, Some(snr), 8_000));
        let got = rep.summary.spectral.occupied_bandwidth_hz.unwrap();
        // Issue #3 targets: within 10 % at SNR >= 25 dB, 20 % at 15 dB.
        let tol = if snr >= 25.0 { 0.10 } else { 0.20 };
        assert!(
            (got - truth).abs() <= tol * truth,
            "rise {rise} snr {snr}: {got} vs {truth}"
        );
    }
}

#[test]
fn hard_keying_is_at_least_twice_as_wide_and_well_shaped_keying_is_near_bk() {
    let soft = analyse(&spec(5.0, 5.0, Some(35.0), 48_000));
    let hard = analyse(&spec(0.5, 0.5, Some(35.0), 48_000));
    let (s, h) = (
        soft.summary.spectral.occupied_bandwidth_hz.unwrap(),
        hard.summary.spectral.occupied_bandwidth_hz.unwrap(),
    );
    assert!(h >= 2.0 * s, "hard {h} soft {s}");
    // Necessary bandwidth B K with B = 1/unit = 20/1.2 baud, K = 5 (RR App. 1).
    let bn = soft.summary.spectral.necessary_bandwidth_hz.unwrap();
    assert!((bn - 5.0 * 20.0 / 1.2).abs() < 0.5, "{bn}");
    // Well-shaped keying lands near B K: ratio within 0.7..1.3 (issue #3).
    let r = soft.summary.spectral.occupied_to_necessary_ratio.unwrap();
    assert!((0.7..1.3).contains(&r), "{r}");
    // x-dB widths grow with the level below the carrier; -20 dB is present.
    let bw = &soft.summary.spectral.bandwidth_hz;
    assert!(bw["20"].unwrap() < bw["30"].unwrap());
}

#[test]
fn the_report_names_the_clicking_edge() {
    let soft_rise_hard_fall = analyse(&spec(5.0, 0.3, Some(30.0), 48_000));
    assert_eq!(
        soft_rise_hard_fall.summary.spectral.clicks.clicking_edge,
        "fall"
    );
    let hard_rise_soft_fall = analyse(&spec(0.3, 5.0, Some(30.0), 48_000));
    assert_eq!(
        hard_rise_soft_fall.summary.spectral.clicks.clicking_edge,
        "rise"
    );
    let soft = analyse(&spec(5.0, 5.0, Some(30.0), 48_000));
    assert_eq!(soft.summary.spectral.clicks.clicking_edge, "neither");
}

#[test]
fn passband_follows_the_receiver_filter() {
    let s = SynthSpec {
        pitch_hz: 700.0,
        rx_bandpass: Some(Bandpass {
            low_hz: 300.0,
            high_hz: 2700.0,
            order: 4,
        }),
        ..spec(5.0, 5.0, Some(30.0), 48_000)
    };
    let rep = analyse(&s);
    let [lo, hi] = rep.summary.spectral.passband_hz.unwrap();
    // Truth: the -6 dB points of that Butterworth band-pass (order 4, via the
    // bilinear transform), computed with scipy.signal.freqz: -7.0 dB at
    // 223 Hz, -6.4 dB at 3457 Hz, so the -6 dB points are near 235 and 3380 Hz.
    assert!((lo - 235.0).abs() < 40.0, "{lo}");
    assert!((hi - 3380.0).abs() < 150.0, "{hi}");
}
