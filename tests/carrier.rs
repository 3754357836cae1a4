//! Several tones, sidetone ratio, receive muting, backwave, hum and drift
//! (issue 4), against the synthesizer's stated truth over ranges of each
//! quantity, and against recordings made with sox (an independent
//! generator): hum AM by sox's `tremolo`, whose depth is read back from
//! `sox stat` on a constant; a constant carrier mixed under the keying by
//! sox for backwave; two sox tone-burst trains mixed at a known level
//! difference for the sidetone ratio.

use std::path::Path;
use std::process::Command;

use cwaudit::analysis::report::Report;
use cwaudit::analysis::{analyze_file, Options};
use cwaudit::synth::{write_files, Hum, Mute, SampleFormat, SecondTone, SynthSpec, Warmup};

fn base() -> SynthSpec {
    SynthSpec {
        text: "PARIS PARIS".into(),
        format: SampleFormat::F32,
        snr_db: Some(40.0),
        seed: 11,
        ..Default::default()
    }
}

fn run(s: &SynthSpec, opt: &Options) -> Report {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("x.wav");
    write_files(s, &p, true).unwrap();
    analyze_file(&p, opt).unwrap()
}

fn other(pitch: f64, level_db: f64) -> SecondTone {
    SecondTone {
        pitch_hz: pitch,
        level_db,
        text: Some("TEST DE NOBODY".into()),
        wpm: Some(18.0),
        keyed: true,
    }
}

#[test]
fn a_weaker_tone_350_hz_away_does_not_move_the_main_figures() {
    // Truth: 5 ms raised-cosine edges, -12 dBFS, 700 Hz; the second tone is
    // 30 dB weaker at 1050 Hz. Tolerance: the engine's own targets (3 %
    // for edges, 0.1 dB for the level), the same as with no second tone.
    let mut s = base();
    s.snr_db = Some(60.0);
    s.second = Some(other(1050.0, -30.0));
    let r = run(&s, &Options::default());
    let sm = &r.summary;
    assert!(
        (sm.rise_ms.unwrap().median - 5.0).abs() < 0.15,
        "{:?}",
        sm.rise_ms
    );
    assert!(
        (sm.fall_ms.unwrap().median - 5.0).abs() < 0.15,
        "{:?}",
        sm.fall_ms
    );
    assert!((sm.level_dbfs.unwrap() + 12.0).abs() < 0.1);
    assert_eq!(sm.element_count, 28);
    // Both tones listed, the weaker one measured on its own.
    assert_eq!(r.tones.len(), 2, "{:?}", r.tones);
    let t2 = r.tones.iter().find(|t| !t.main).unwrap();
    assert!((t2.frequency_hz - 1050.0).abs() < 2.0);
    assert!((t2.level_dbfs.unwrap() + 42.0).abs() < 0.5, "{t2:?}");
    assert!(r.warnings.iter().any(|w| w.contains("notched out")));
}

#[test]
fn tones_too_close_get_a_warning_not_a_number() {
    // 130 Hz apart: the survey tells the tones apart (3 of its 47 Hz bins)
    // but the notch cannot separate them: edge figures are withheld and a
    // warning says why.
    let mut s = base();
    s.second = Some(other(830.0, -10.0));
    let r = run(&s, &Options::default());
    assert!(r.summary.rise_ms.is_none() && r.summary.fall_ms.is_none());
    assert!(
        r.warnings.iter().any(|w| w.contains("closer than")),
        "{:?}",
        r.warnings
    );
}

#[test]
fn four_tones_keyed_and_steady_are_all_found() {
    // Truth: the main tone and three others (keyed -6 dB, steady -20 dB,
    // keyed -35 dB); levels within 0.5 dB (issue 4's level target).
    let mut s = base();
    s.snr_db = Some(60.0);
    s.second = Some(other(1300.0, -6.0));
    s.extra_tones = vec![
        SecondTone {
            pitch_hz: 1900.0,
            level_db: -20.0,
            keyed: false,
            ..SecondTone::default()
        },
        SecondTone {
            wpm: Some(25.0),
            ..other(2500.0, -35.0)
        },
    ];
    let r = run(&s, &Options::default());
    assert_eq!(r.tones.len(), 4, "{:?}", r.tones);
    for (f, l, keyed) in [
        (700.0, -12.0, true),
        (1300.0, -18.0, true),
        (1900.0, -32.0, false),
        (2500.0, -47.0, true),
    ] {
        let t = r
            .tones
            .iter()
            .find(|t| (t.frequency_hz - f).abs() < 3.0)
            .unwrap_or_else(|| panic!("no tone at {f}: {:?}", r.tones));
        assert_eq!(t.keyed, keyed, "{t:?}");
        assert!((t.level_dbfs.unwrap() - l).abs() < 0.5, "{t:?}");
    }
    assert!((r.summary.rise_ms.unwrap().median - 5.0).abs() < 0.15);
}

#[test]
fn sidetone_ratio_from_0_to_60_db() {
    // Truth: the signal tone's stated level relative to the sidetone (the
    // main tone); ratio within 0.5 dB (issue 4). 800 Hz apart so that even
    // at 60 dB the weak tone is clear of the sidetone's keying sidebands.
    for ratio in [0.0, 10.0, 20.0, 40.0, 60.0] {
        let mut s = base();
        s.snr_db = Some(95.0);
        s.level_dbfs = -10.0;
        s.second = Some(other(1500.0, -ratio - 0.5));
        let opt = Options {
            sidetone_hz: Some(700.0),
            tone_hz: Some(700.0),
            ..Default::default()
        };
        let r = run(&s, &opt);
        let st = r
            .summary
            .sidetone
            .as_ref()
            .unwrap_or_else(|| panic!("{:?}", r.warnings));
        assert!((st.ratio_db - (ratio + 0.5)).abs() < 0.5, "{ratio}: {st:?}");
        assert!((st.sidetone_dbfs + 10.0).abs() < 0.1);
        assert_eq!(st.signal_source, "tone");
        // A signal level given as a number.
        let opt = Options {
            reference_dbfs: Some(-40.0),
            ..opt
        };
        if ratio == 0.0 {
            let r = run(&s, &opt);
            let st = r.summary.sidetone.unwrap();
            assert!((st.ratio_db - 30.0).abs() < 0.1, "{st:?}");
        }
    }
}

#[test]
fn muting_depth_within_one_recording() {
    // Truth: the synthesizer mutes the receiver noise by DEPTH dB from each
    // key-down until the hang time after its fall; 2 s of lead-in give the
    // quiet-time reference. Within 1 dB (issue 4).
    for (depth, hang) in [(10.0, 0.0), (30.0, 300.0), (50.0, 800.0)] {
        let mut s = base();
        s.snr_db = Some(30.0);
        s.lead_in_s = 2.0;
        s.mute = Some(Mute {
            depth_db: depth,
            hang_ms: hang,
        });
        let opt = Options {
            sidetone_hz: Some(700.0),
            ..Default::default()
        };
        let r = run(&s, &opt);
        let m = r.summary.rx_muting_db.unwrap();
        assert!(
            (m - depth).abs() < 1.0,
            "{depth}: {m} {:?}",
            r.summary.rx_muting
        );
        assert_eq!(
            r.summary.rx_muting.as_ref().unwrap().key_up_from,
            "quiet time"
        );
    }
}

#[test]
fn backwave_from_30_to_50_db() {
    // Truth: the synthesizer's key-up carrier; within 1 dB down to -50 dB
    // (issue 4) at 40 dB SNR, and null with a floor when there is none.
    for bw in [-30.0, -40.0, -50.0] {
        let mut s = base();
        s.repeat = 3;
        s.backwave_db = Some(bw);
        let r = run(&s, &Options::default());
        let b = r.summary.carrier.backwave_db.unwrap();
        assert!((b - bw).abs() < 1.0, "{bw}: {b}");
    }
    let r = run(&base(), &Options::default());
    assert!(r.summary.carrier.backwave_db.is_none());
    assert!(r.summary.carrier.backwave_floor_db.unwrap() < -50.0);
}

#[test]
fn hum_am_and_fm_over_a_range() {
    // Truth: the synthesizer's hum; AM within 0.5 percentage points at 2 % and
    // above, FM within max(10 %, 0.3 Hz) (issue 4).
    for (f, am, fm) in [
        (100.0, 2.0, 0.0),
        (50.0, 5.0, 3.0),
        (120.0, 10.0, 1.0),
        (300.0, 3.0, 5.0),
    ] {
        let mut s = base();
        s.repeat = 3;
        s.hum = Some(Hum {
            frequency_hz: f,
            am_percent: am,
            fm_hz: fm,
        });
        let r = run(&s, &Options::default());
        let h = r.summary.carrier.hum.unwrap();
        assert_eq!(h.frequency_hz, f, "{h:?}");
        assert!((h.am_percent.unwrap() - am).abs() < 0.5, "{f}: {h:?}");
        if fm > 0.0 {
            assert!(
                (h.fm_hz.unwrap() - fm).abs() < (0.1 * fm).max(0.3),
                "{f}: {h:?}"
            );
        }
    }
    // No hum: AM and FM read null (below the floor), and the floor is small.
    let h = run(&base(), &Options::default())
        .summary
        .carrier
        .hum
        .unwrap();
    assert!(h.am_percent.is_none() && h.fm_hz.is_none(), "{h:?}");
    assert!(h.am_floor_percent < 0.5);
}

#[test]
fn drift_linear_and_warm_up() {
    // Truth: a steady 4 Hz/min drift over 60 s; the fit within 0.2 Hz/min.
    let mut s = base();
    s.repeat = 12;
    s.drift_hz_per_min = 4.0;
    let r = run(&s, &Options::default());
    let d = r.summary.carrier.drift_hz_per_min.unwrap();
    assert!((d - 4.0).abs() < 0.2, "{d}");
    // Warm-up: +30 Hz settling with a 20 s time constant over ~65 s. The
    // total change from the first to the last tenth of the elements is the
    // model's offset difference between their median times (about 27 Hz
    // here, computed from the truth below), within 1.5 Hz; the slope shows.
    let mut s = base();
    s.repeat = 13;
    s.warmup = Some(Warmup {
        hz: 30.0,
        tau_s: 20.0,
    });
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("w.wav");
    let truth = write_files(&s, &p, true).unwrap();
    let r = analyze_file(&p, &Options::default()).unwrap();
    let want = cwaudit::accuracy::warmup_change_truth_hz(&truth, 30.0, 20.0);
    let got = r.summary.carrier.drift_total_hz.unwrap();
    assert!((got - want).abs() < 1.5, "{got} vs {want}");
    assert!(r.summary.carrier.drift_hz_per_min.unwrap() > 10.0);
}

// ---- outside checks made with sox ----

fn sox(args: &[&str]) -> String {
    let out = Command::new("sox")
        .args(args)
        .output()
        .expect("sox runs (Debian package sox)");
    assert!(
        out.status.success(),
        "sox {args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// `sox -m` of two files at unit gain each (sox's plain -m halves them).
fn mix(a: &Path, b: &Path, out: &Path) {
    sox(&[
        "-m",
        "-v",
        "1",
        a.to_str().unwrap(),
        "-v",
        "1",
        b.to_str().unwrap(),
        out.to_str().unwrap(),
    ]);
}

/// A value from `sox FILE -n stat` ("Maximum amplitude" and so on).
fn stat(path: &Path, key: &str) -> f64 {
    let text = sox(&[path.to_str().unwrap(), "-n", "stat"]);
    text.lines()
        .find(|l| l.starts_with(key))
        .and_then(|l| l.split(':').nth(1))
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or_else(|| panic!("no {key} in {text}"))
}

#[test]
fn sox_tremolo_hum_depth() {
    // The depth sox's tremolo gives is read back from sox itself: a constant
    // 0.5 through `tremolo 100 D` swings between min and max, so the AM
    // depth is (max - min) / (max + min). Our keyed signal through the same
    // tremolo must read that depth within 0.5 percentage points.
    let d = tempfile::tempdir().unwrap();
    let dc = d.path().join("dc.wav");
    let spec = hound::WavSpec {
        channels: 1,
        sample_rate: 48_000,
        bits_per_sample: 32,
        sample_format: hound::SampleFormat::Float,
    };
    let mut w = hound::WavWriter::create(&dc, spec).unwrap();
    for _ in 0..48_000 {
        w.write_sample(0.5f32).unwrap();
    }
    w.finalize().unwrap();
    let keyed = d.path().join("keyed.wav");
    let mut s = base();
    s.repeat = 3;
    write_files(&s, &keyed, true).unwrap();
    for depth in ["4", "10"] {
        let t = d.path().join("t.wav");
        sox(&[
            dc.to_str().unwrap(),
            t.to_str().unwrap(),
            "tremolo",
            "100",
            depth,
        ]);
        let (hi, lo) = (stat(&t, "Maximum amplitude"), stat(&t, "Minimum amplitude"));
        let truth = 100.0 * (hi - lo) / (hi + lo);
        let h = d.path().join("hum.wav");
        sox(&[
            keyed.to_str().unwrap(),
            h.to_str().unwrap(),
            "tremolo",
            "100",
            depth,
        ]);
        let r = analyze_file(&h, &Options::default()).unwrap();
        let hum = r.summary.carrier.hum.unwrap();
        assert_eq!(hum.frequency_hz, 100.0);
        let am = hum.am_percent.unwrap();
        assert!(
            (am - truth).abs() < 0.5,
            "tremolo {depth}: {am} vs sox {truth}"
        );
    }
}

#[test]
fn sox_constant_tone_under_the_keying_is_backwave() {
    // sox makes a steady 700 Hz tone at -57 dBFS (-45 dB against the -12 dBFS
    // key-down; its level read back by `sox stat` RMS) and mixes it with the
    // keyed signal: backwave within 1 dB of the sox tone's level.
    let d = tempfile::tempdir().unwrap();
    let keyed = d.path().join("keyed.wav");
    let mut s = base();
    s.repeat = 3;
    let truth = write_files(&s, &keyed, true).unwrap();
    let tone = d.path().join("tone.wav");
    sox(&[
        "-n",
        "-r",
        "48000",
        "-b",
        "32",
        "-e",
        "float",
        tone.to_str().unwrap(),
        "synth",
        &format!("{}", truth.duration_s),
        "sine",
        "700",
        "vol",
        "0.0014125",
    ]);
    let rms = stat(&tone, "RMS     amplitude");
    let tone_dbfs = 20.0 * (rms * 2f64.sqrt()).log10();
    let mixed = d.path().join("mixed.wav");
    mix(&keyed, &tone, &mixed);
    let r = analyze_file(&mixed, &Options::default()).unwrap();
    let want = tone_dbfs - (-12.0);
    let got = r.summary.carrier.backwave_db.unwrap();
    assert!((got - want).abs() < 1.0, "{got} vs sox {want}");
}

#[test]
fn sox_two_tone_bursts_at_a_known_level_difference() {
    // Two sox tone-burst trains (0.2 s bursts with 5 ms half-sine fades, 0.2 s
    // apart), 700 Hz at amplitude 0.3 and 1500 Hz at 0.03 (the second offset
    // by 0.1 s so they alternate): a 20.0 dB difference set by sox's `vol`.
    let d = tempfile::tempdir().unwrap();
    let mk = |name: &str, f: &str, vol: &str, delay: &str| {
        let p = d.path().join(name);
        sox(&[
            "-n",
            "-r",
            "48000",
            "-b",
            "32",
            "-e",
            "float",
            p.to_str().unwrap(),
            "synth",
            "0.2",
            "sine",
            f,
            "fade",
            "h",
            "0.005",
            "0.2",
            "0.005",
            "vol",
            vol,
            "pad",
            delay,
            "0.2",
            "repeat",
            "24",
        ]);
        p
    };
    let a = mk("a.wav", "700", "0.3", "0.1");
    let b = mk("b.wav", "1500", "0.03", "0.2");
    let m = d.path().join("m.wav");
    mix(&a, &b, &m);
    let opt = Options {
        sidetone_hz: Some(700.0),
        ..Default::default()
    };
    let r = analyze_file(&m, &opt).unwrap();
    let st = r.summary.sidetone.unwrap();
    assert!((st.ratio_db - 20.0).abs() < 0.5, "{st:?}");
    assert!(
        (st.sidetone_dbfs - 20.0 * 0.3f64.log10()).abs() < 0.2,
        "{st:?}"
    );
}
