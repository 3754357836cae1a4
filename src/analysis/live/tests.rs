use super::*;
use crate::analysis::analyze_file;
use crate::synth::{self, Chirp, SynthSpec};

fn spec() -> SynthSpec {
    SynthSpec {
        text: "PARIS PARIS PARIS PARIS".into(),
        wpm: 22.0,
        pitch_hz: 650.0,
        rise_ms: 4.0,
        fall_ms: 6.0,
        chirp: Chirp::Exponential {
            depth_hz: 25.0,
            tau_ms: 8.0,
        },
        snr_db: Some(35.0),
        lead_in_s: 0.5,
        ..Default::default()
    }
}

/// Feeds the samples in callback-sized blocks; returns every element.
fn run_live(x: &[f32], ch: u16, cfg: LiveConfig, block: usize) -> (LiveAnalyzer, Vec<LiveElement>) {
    let mut a = LiveAnalyzer::new(48_000, ch, cfg).unwrap();
    let mut seen = Vec::new();
    for b in x.chunks(block * ch as usize) {
        a.push(b);
        seen.extend(a.take_new());
    }
    (a, seen)
}

#[test]
fn live_figures_match_the_file_analysis_and_the_truth() {
    // Truth: the synthesizer's stated edges and chirp. Reference: the file
    // pipeline on the same samples (written as a 32-bit float WAV so nothing
    // is quantised differently).
    let s = spec();
    let (x, truth) = synth::render(&s).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("a.wav");
    synth::write_files(
        &SynthSpec {
            format: synth::SampleFormat::F32,
            ..s.clone()
        },
        &p,
        false,
    )
    .unwrap();
    let file = analyze_file(&p, &Options::default()).unwrap();
    let cfg = LiveConfig {
        window: 10_000,
        ..Default::default()
    };
    // 480 frames: a 10 ms sound-card buffer.
    let (mut live, seen) = run_live(&x, 1, cfg, 480);
    let v = live.view();
    assert_eq!(
        (v.count as usize, file.elements.len()),
        (truth.elements.len(), truth.elements.len())
    );
    assert_eq!(seen.len(), truth.elements.len());
    let (lf, ff) = (&v.summary, &file.summary);
    let (lr, fr) = (lf.rise_ms.unwrap(), ff.rise_ms.unwrap());
    let (lfa, ffa) = (lf.fall_ms.unwrap(), ff.fall_ms.unwrap());
    // Same measurement on the same samples: medians agree to 0.05 ms (the
    // live state levels differ slightly for the first elements, and the short
    // hop changes the baseband by the filter's stopband leakage only).
    assert!((lr.median - fr.median).abs() < 0.05, "{lr:?} {fr:?}");
    assert!((lfa.median - ffa.median).abs() < 0.05, "{lfa:?} {ffa:?}");
    let (lc, fc) = (lf.chirp_hz.unwrap(), ff.chirp_hz.unwrap());
    assert!((lc.median - fc.median).abs() < 1.0, "{lc:?} {fc:?}");
    assert!((lf.wpm.unwrap() - ff.wpm.unwrap()).abs() < 0.1);
    assert!((lf.level_dbfs.unwrap() - ff.level_dbfs.unwrap()).abs() < 0.05);
    // Against the truth, with the accuracy targets of README (rise/fall
    // within 10 %, chirp within 20 % at this SNR).
    assert!((lr.median - 4.0).abs() < 0.4, "{lr:?}");
    assert!((lfa.median - 6.0).abs() < 0.6, "{lfa:?}");
    assert!((lc.median - truth.elements[0].chirp_hz).abs() < 0.2 * truth.elements[0].chirp_hz);
    // The mean-element chirp (judged by the default limits) is computed
    // over the window as over the file: same elements here.
    let (lm, fm) = (
        lf.chirp_mean_element_hz.unwrap(),
        ff.chirp_mean_element_hz.unwrap(),
    );
    assert!((lm - fm).abs() < 1.0, "{lm} {fm}");
    assert!((lf.wpm.unwrap() - 22.0).abs() < 0.3);
    // Element times are stream times: each 50 % fall within 1 ms of the truth.
    for (e, t) in seen.iter().zip(&truth.elements) {
        assert!(
            (e.end_s - (t.start_s + t.duration_s)).abs() < 1e-3,
            "{e:?} {t:?}"
        );
    }
}

#[test]
fn live_elements_are_measured_within_the_lookahead_of_their_key_up() {
    // After the initial stretch, an element is measured once the stream has
    // passed its key-up by: the live lookahead, the downconverter's filter
    // delay ((M-1)/2 = 512 samples at 48 kHz), at most one hop (10 ms) plus
    // the 480-frame block, and the front-end decimator's look-ahead (48 to
    // 12 kHz), which can also leave a hop to be completed by the next block.
    // Elements of the stretch itself wait for it.
    let (x, _) = synth::render(&spec()).unwrap();
    let (_, seen) = run_live(&x, 1, LiveConfig::default(), 480);
    let front = crate::dsp::decimate::Decimator::new(4).lookahead() as f64 / 48e3 + 0.01;
    let bound = LIVE_LOOKAHEAD_S + 512.0 / 48e3 + 0.01 + 0.01 + 0.002 + front;
    let late: Vec<f64> = seen
        .iter()
        .filter(|e| e.end_s > LOOKAHEAD_S + 0.1)
        .map(|e| e.found_after_s)
        .collect();
    assert!(late.len() > 35, "{}", late.len());
    let worst = late.iter().copied().fold(0.0, f64::max);
    let best = late.iter().copied().fold(1.0, f64::min);
    assert!(worst <= bound, "worst {worst} bound {bound}");
    // And not earlier than the capture's tail allows.
    assert!(best >= crate::analysis::tracker::POST_S, "{best}");
}

#[test]
fn a_stretch_without_a_tone_is_skipped_and_times_stay_stream_times() {
    // 4 s of silence, then the keyed signal: the first stretch finds no tone
    // and the second one picks it up, with times counted from the start.
    let s = spec();
    let (x, truth) = synth::render(&s).unwrap();
    let pad = 4 * 48_000;
    let mut y = vec![0.0f32; pad];
    y.extend_from_slice(&x);
    let mut a = LiveAnalyzer::new(48_000, 1, LiveConfig::default()).unwrap();
    a.push(&y[..pad]);
    assert!(
        matches!(a.view().phase, Phase::NoTone { .. }),
        "{:?}",
        a.view().phase
    );
    let mut first = None;
    for b in y[pad..].chunks(480) {
        a.push(b);
        if first.is_none() {
            first = a.take_new().first().cloned();
        }
    }
    let v = a.view();
    let Phase::Tracking { tone_hz, channel } = v.phase else {
        panic!("{:?}", v.phase)
    };
    assert!((tone_hz - 650.0).abs() < 2.0 && channel == 1);
    // The tracker started 1 s into the padding (the second stretch began at
    // 3 s), so the signal's first elements are all there.
    let f = first.unwrap();
    let t = &truth.elements[0];
    assert!((f.start_s - (4.0 + t.start_s)).abs() < 1e-3, "{f:?}");
    assert_eq!(v.count as usize, truth.elements.len());
}

#[test]
fn reset_clears_the_statistics_but_keeps_the_tone() {
    let (x, _) = synth::render(&spec()).unwrap();
    let mut a = LiveAnalyzer::new(48_000, 1, LiveConfig::default()).unwrap();
    let half = x.len() / 2;
    a.push(&x[..half]);
    assert!(a.view().count > 10);
    a.reset();
    let v = a.view();
    assert_eq!((v.count, v.window_len, v.last.clone()), (0, 0, None));
    assert!(matches!(v.phase, Phase::Tracking { .. }));
    a.push(&x[half..]);
    let v = a.view();
    assert!(v.count > 10 && v.summary.rise_ms.is_some());
    assert!(v.window_len <= 20);
}

#[test]
fn the_chosen_channel_is_measured_and_a_missing_one_refused() {
    // Two channels, the signal on channel 2 (channel 1 only noise).
    let s = SynthSpec {
        channels: 2,
        signal_channel: 2,
        ..spec()
    };
    let (x, truth) = synth::render(&s).unwrap();
    let (mut a, _) = run_live(&x, 2, LiveConfig::default(), 256);
    let v = a.view();
    assert!(
        matches!(v.phase, Phase::Tracking { channel: 2, .. }),
        "{:?}",
        v.phase
    );
    assert_eq!(v.count as usize, truth.elements.len());
    let bad = LiveConfig {
        options: Options {
            channel: Some(3),
            ..Default::default()
        },
        ..Default::default()
    };
    let e = LiveAnalyzer::new(48_000, 2, bad).err().unwrap().to_string();
    assert!(e.contains("--channel 3"), "{e}");
}

#[test]
fn spectrum_line_peaks_at_the_pitch_with_the_tone_level() {
    // A steady sine of amplitude 0.5 (-6.02 dBFS, AES17) at 1000 Hz: the
    // column holding 1000 Hz must read -6.0 dB within the Hann scalloping
    // loss (at most 1.42 dB, Harris 1978), and be the highest.
    let x: Vec<f32> = (0..48_000)
        .map(|i| (0.5 * (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / 48e3).sin()) as f32)
        .collect();
    let mut a = LiveAnalyzer::new(48_000, 1, LiveConfig::default()).unwrap();
    a.push(&x);
    let s = a.spectrum();
    let col = ((1000.0 - s.lo_hz) / (s.hi_hz - s.lo_hz) * s.db.len() as f64) as usize;
    let top = s.db.iter().copied().fold(f32::MIN, f32::max);
    assert_eq!(s.db[col], top);
    assert!(
        s.db[col] <= -6.02 + 0.01 && s.db[col] >= -6.02 - 1.43,
        "{}",
        s.db[col]
    );
}
