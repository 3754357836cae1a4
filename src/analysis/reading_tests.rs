//! The single read (tone chosen early, measurement riding along with the
//! survey) against the plain two reads (survey, then measurement): the same
//! report, bit for bit, whichever way the input reached the measurement.

use super::{analyze_reading, Options, Route};
use crate::synth::{write_files, SecondTone, SynthSpec, Warmup};

/// Writes `spec` into a new folder and analyses it both ways; returns the
/// route the single read took. The reports are compared as their JSON.
fn both_ways(spec: &SynthSpec, opt: &Options) -> Route {
    let dir = tempfile::tempdir().expect("temporary folder");
    let wav = dir.path().join("rec.wav");
    write_files(spec, &wav, false).expect("synthesized recording");
    let (one, route) = analyze_reading(&wav, opt, true).expect("single read");
    let (two, plain) = analyze_reading(&wav, opt, false).expect("two reads");
    let expect_plain = if route == Route::NoSignal {
        Route::NoSignal
    } else {
        Route::Reread
    };
    assert_eq!(plain, expect_plain);
    let (a, b) = (
        serde_json::to_string(&one).expect("json"),
        serde_json::to_string(&two).expect("json"),
    );
    assert!(a == b, "single read and two reads differ ({route:?})");
    route
}

fn keyed(text: &str, repeat: u32) -> SynthSpec {
    SynthSpec {
        text: text.into(),
        wpm: 22.0,
        pitch_hz: 655.0,
        snr_db: Some(28.0),
        repeat,
        seed: 7,
        ..SynthSpec::default()
    }
}

#[test]
fn early_choice_gives_the_two_read_report() {
    // About 28 s: the tone is chosen after 10 s and the survey agrees.
    let spec = keyed("PARIS PARIS PARIS", 4);
    assert_eq!(both_ways(&spec, &Options::default()), Route::Early);
}

#[test]
fn early_choice_with_other_tones_and_a_second_channel() {
    // A keyed station and a steady carrier beside the main tone, on the
    // second of two channels: every tracker set up early, steady tones'
    // figures from the whole survey.
    let spec = SynthSpec {
        channels: 2,
        signal_channel: 2,
        second: Some(SecondTone {
            pitch_hz: 1150.0,
            level_db: -10.0,
            text: Some("TEST TEST".into()),
            ..SecondTone::default()
        }),
        extra_tones: vec![SecondTone {
            pitch_hz: 1600.0,
            level_db: -20.0,
            keyed: false,
            ..SecondTone::default()
        }],
        ..keyed("PARIS PARIS PARIS", 4)
    };
    assert_eq!(both_ways(&spec, &Options::default()), Route::Early);
}

#[test]
fn short_recording_is_measured_from_the_input_held() {
    // Under 10 s: the recording ends before any early choice.
    let spec = keyed("PARIS", 1);
    assert_eq!(both_ways(&spec, &Options::default()), Route::Held);
}

#[test]
fn keying_that_starts_late_is_chosen_at_a_later_try() {
    // 16 s of noise before the first element.
    let spec = SynthSpec {
        lead_in_s: 16.0,
        ..keyed("PARIS PARIS PARIS", 2)
    };
    // Tries at 10 and 15 s find nothing keyed; the one at 20 s chooses.
    assert_eq!(both_ways(&spec, &Options::default()), Route::Early);
}

#[test]
fn a_pitch_that_moves_after_the_choice_is_measured_again() {
    // Warm-up drift of 30 Hz: the first seconds' pitch is not the whole
    // recording's, the early trackers do not fit, the recording is read again.
    let spec = SynthSpec {
        warmup: Some(Warmup {
            hz: 30.0,
            tau_s: 8.0,
        }),
        ..keyed("PARIS PARIS PARIS", 4)
    };
    assert_eq!(both_ways(&spec, &Options::default()), Route::Reread);
}

#[test]
fn a_given_tone_is_chosen_early() {
    let spec = keyed("PARIS PARIS PARIS", 4);
    let opt = Options {
        tone_hz: Some(655.0),
        ..Options::default()
    };
    assert_eq!(both_ways(&spec, &opt), Route::Early);
}

#[test]
fn a_steady_carrier_only_is_no_signal_either_way() {
    // 15 s of an unkeyed 800 Hz tone: no keyed tone at any try; the whole
    // recording is held and the survey's finding reported.
    let dir = tempfile::tempdir().expect("temporary folder");
    let wav = dir.path().join("steady.wav");
    let spec = hound::WavSpec {
        channels: 1,
        sample_rate: 48_000,
        bits_per_sample: 16,
        sample_format: hound::SampleFormat::Int,
    };
    let mut w = hound::WavWriter::create(&wav, spec).expect("wav");
    for i in 0..15 * 48_000 {
        let t = i as f64 / 48_000.0;
        let v = 0.25 * (2.0 * std::f64::consts::PI * 800.0 * t).sin();
        w.write_sample((v * 32_767.0) as i16).expect("sample");
    }
    w.finalize().expect("wav");
    let opt = Options::default();
    let (one, route) = analyze_reading(&wav, &opt, true).expect("single read");
    let (two, plain) = analyze_reading(&wav, &opt, false).expect("two reads");
    assert_eq!((route, plain), (Route::NoSignal, Route::NoSignal));
    assert!(!one.summary.keyed_signal_found);
    assert_eq!(
        serde_json::to_string(&one).expect("json"),
        serde_json::to_string(&two).expect("json")
    );
}
