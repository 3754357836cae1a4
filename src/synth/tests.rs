//! Tests of the generator against its stated truth.

use super::*;
use rustfft::{num_complex::Complex32, FftPlanner};

fn short(text: &str, wpm: f64) -> SynthSpec {
    SynthSpec {
        text: text.into(),
        wpm,
        lead_in_s: 0.1,
        tail_s: 0.1,
        ..SynthSpec::default()
    }
}

fn dbfs_of(x: &[f32]) -> f64 {
    let ms = x.iter().map(|&v| (v as f64).powi(2)).sum::<f64>() / x.len() as f64;
    // AES17: a full-scale sine (RMS 1/√2) is 0 dBFS.
    10.0 * (2.0 * ms).log10()
}

#[test]
fn element_count_and_timing() {
    // ITU-R M.1677-1: PARIS = 14 elements, dit = 1.2/WPM s, dah = 3 dits.
    let truth = Synth::new(&short("PARIS", 20.0)).unwrap().truth().clone();
    assert_eq!(truth.elements.len(), 14);
    let dit = 1.2 / 20.0;
    assert!((truth.dit_s - dit).abs() < 1e-15);
    let p = &truth.elements[..4];
    assert_eq!(
        p.iter().map(|e| e.kind).collect::<Vec<_>>(),
        [
            ElementKind::Dit,
            ElementKind::Dah,
            ElementKind::Dah,
            ElementKind::Dit
        ]
    );
    assert!((p[0].duration_s - dit).abs() < 1e-12);
    assert!((p[1].duration_s - 3.0 * dit).abs() < 1e-12);
    // Element space 1 unit: P's second element starts 2 units after the first.
    assert!((p[1].start_s - p[0].start_s - 2.0 * dit).abs() < 1e-12);
    // Letter space 3 units: A starts 3 units after P's last element ends.
    let a0 = &truth.elements[4];
    assert!((a0.start_s - (p[3].start_s + p[3].duration_s) - 3.0 * dit).abs() < 1e-12);
    // First 50 % instant = lead-in + raised-cosine half width (5 ms / 0.5903 / 2).
    let lead = 5e-3 / (2.0 * 0.8f64.asin() / std::f64::consts::PI) / 2.0;
    assert!((p[0].start_s - (0.1 + lead)).abs() < 1e-12);
    let last = truth.elements.last().unwrap();
    let want = last.start_s + last.duration_s + lead + 0.1;
    assert!((truth.duration_s - want).abs() <= 0.5 / 48_000.0 + 1e-12);
    assert_eq!(
        truth.total_frames,
        Synth::new(&short("PARIS", 20.0)).unwrap().total_frames()
    );
}

#[test]
fn weighting_changes_marks() {
    // Definition in morse.rs: dit = 2u·r/(1+r), dah = ratio·dit.
    let spec = SynthSpec {
        dah_dit_ratio: 3.5,
        mark_space_ratio: 1.4,
        ..short("AN", 20.0)
    };
    let t = Synth::new(&spec).unwrap().truth().clone();
    let dit = 2.0 * 0.06 * 1.4 / 2.4;
    assert!((t.elements[0].duration_s - dit).abs() < 1e-12);
    assert!((t.elements[1].duration_s - 3.5 * dit).abs() < 1e-12);
    assert!((t.elements[1].start_s - t.elements[0].start_s - 0.12).abs() < 1e-12);
}

#[test]
fn key_down_level() {
    // AES17 dBFS of a long dah ("T" at 5 WPM = 0.72 s): -12 dBFS within 0.05 dB.
    let (x, truth) = render(&short("T", 5.0)).unwrap();
    let e = &truth.elements[0];
    let fs = 48_000.0;
    let from = ((e.start_s + 0.1) * fs) as usize;
    let to = from + 24_000; // 0.5 s = 350 whole cycles of 700 Hz
    assert!((dbfs_of(&x[from..to]) - (-12.0)).abs() < 0.05);
    // Key-up before the first element is silent.
    assert!(x[..4000].iter().all(|&v| v == 0.0));
}

#[test]
fn backwave_level() {
    // Key-up level = key-down + backwave_db (definition), within 0.05 dB.
    let spec = SynthSpec {
        backwave_db: Some(-40.0),
        ..short("T", 5.0)
    };
    let (x, _) = render(&spec).unwrap();
    let up = dbfs_of(&x[0..4800]); // first 0.1 s, 70 cycles
    assert!((up - (-52.0)).abs() < 0.05, "{up}");
}

#[test]
fn noise_power_in_band_matches_snr() {
    // Definition: noise power inside noise_bandwidth_hz = carrier power − SNR.
    let spec = SynthSpec {
        snr_db: Some(10.0),
        lead_in_s: 0.6,
        ..short("T", 5.0)
    };
    let (noisy, truth) = render(&spec).unwrap();
    let (clean, _) = render(&SynthSpec {
        snr_db: None,
        ..spec.clone()
    })
    .unwrap();
    let noise: Vec<f32> = noisy.iter().zip(&clean).map(|(a, b)| a - b).collect();
    let fs = 48_000.0;
    let carrier = 10f64.powf(-12.0 / 10.0) / 2.0; // A²/2
    let want = carrier / 10.0;
    // Via the white-noise variance scaled to the band.
    let var = noise.iter().map(|&v| (v as f64).powi(2)).sum::<f64>() / noise.len() as f64;
    let band = var * 2500.0 / (fs / 2.0);
    assert!((10.0 * (band / want).log10()).abs() < 0.3);
    // Via a direct DFT of 1 s: Parseval, one-sided power in 2500 bins of 1 Hz.
    let n = 48_000;
    let mut buf: Vec<Complex32> = noise[..n].iter().map(|&v| Complex32::new(v, 0.0)).collect();
    FftPlanner::new().plan_fft_forward(n).process(&mut buf);
    let p: f64 = buf[1000..3500]
        .iter()
        .map(|c| 2.0 * c.norm_sqr() as f64 / (n as f64 * n as f64))
        .sum();
    assert!(
        (10.0 * (p / want).log10()).abs() < 0.3,
        "{}",
        10.0 * (p / want).log10()
    );
    assert_eq!(truth.snr_db, Some(10.0));
}

fn busy_spec() -> SynthSpec {
    SynthSpec {
        text: "TEST DE CWAUDIT".into(),
        wpm: 30.0,
        chirp: Chirp::Exponential {
            depth_hz: 40.0,
            tau_ms: 3.0,
        },
        fall_shape: EdgeShape::Exponential,
        rise_shape: EdgeShape::Gaussian,
        rise_ms: 3.0,
        fall_ms: 4.0,
        backwave_db: Some(-35.0),
        hum: Some(Hum {
            frequency_hz: 100.0,
            am_percent: 5.0,
            fm_hz: 2.0,
        }),
        drift_hz_per_min: 3.0,
        snr_db: Some(25.0),
        rx_bandpass: Some(Bandpass {
            low_hz: 300.0,
            high_hz: 2700.0,
            order: 6,
        }),
        second: Some(SecondTone {
            pitch_hz: 1100.0,
            level_db: -10.0,
            text: Some("VVV".into()),
            wpm: Some(18.0),
            keyed: true,
        }),
        channels: 2,
        signal_channel: 2,
        lead_in_s: 0.05,
        tail_s: 0.05,
        ..SynthSpec::default()
    }
}

#[test]
fn streaming_is_block_size_invariant() {
    // Same samples whatever the block size (1, 7, 1000 frames, whole).
    let spec = busy_spec();
    let (whole, _) = render(&spec).unwrap();
    for block in [1usize, 7, 1000] {
        let mut s = Synth::new(&spec).unwrap();
        let mut got = Vec::with_capacity(whole.len());
        let mut buf = vec![0.0f32; block * 2 + 1]; // odd length: partial frame ignored
        loop {
            let n = s.fill(&mut buf);
            if n == 0 {
                break;
            }
            got.extend_from_slice(&buf[..n * 2]);
        }
        assert_eq!(got.len(), whole.len());
        assert!(got == whole, "block {block}");
    }
    // Channel 1 is noise only, with the stated σ.
    let noise: Vec<f32> = whole.iter().step_by(2).copied().collect();
    let var = noise.iter().map(|&v| (v as f64).powi(2)).sum::<f64>() / noise.len() as f64;
    let want = 10f64.powf(-12.0 / 10.0) / 2.0 / 10f64.powf(2.5) * 24_000.0 / 2500.0;
    assert!((10.0 * (var / want).log10()).abs() < 0.3);
}

#[test]
fn silent_other_channel_without_noise() {
    let spec = SynthSpec {
        channels: 2,
        ..short("E", 20.0)
    };
    let (x, _) = render(&spec).unwrap();
    assert!(x.iter().skip(1).step_by(2).all(|&v| v == 0.0));
    assert!(x.iter().step_by(2).any(|&v| v != 0.0));
}

#[test]
fn exponential_chirp_truth() {
    // Definition: f_dev = depth·exp(−(t − t_on)/τ), monotone, so the largest
    // deviation is at t_s and the settled value (median of the last half) is
    // the value at the 3/4 point; within 0.1 Hz.
    let (depth, tau) = (50.0, 4e-3);
    let spec = SynthSpec {
        chirp: Chirp::Exponential {
            depth_hz: depth,
            tau_ms: tau * 1e3,
        },
        ..short("EM", 20.0)
    };
    let synth = Synth::new(&spec).unwrap();
    let half_t = 5e-3 / (2.0 * 0.8f64.asin() / std::f64::consts::PI) / 2.0; // t_s − t_on
    for e in &synth.truth().elements {
        let d = e.duration_s;
        let want = depth * (-half_t / tau).exp() - depth * (-(half_t + 0.75 * d) / tau).exp();
        assert!((e.chirp_hz - want).abs() < 0.1, "{} vs {want}", e.chirp_hz);
    }
    assert!(synth.truth().elements[0].chirp_hz > 15.0);
}

#[test]
fn linear_chirp_truth() {
    // Definition: depth·(1 − (t − t_on)/(t_e − t_on)) reaches 0 at t_e, so the
    // settled value is its value at the 3/4 point and the largest deviation
    // is at t_s; a hard-keyed element has t_on = t_s. Within 0.1 Hz.
    let spec = SynthSpec {
        chirp: Chirp::Linear { depth_hz: 40.0 },
        rise_ms: 0.0,
        fall_ms: 0.0,
        ..short("T", 20.0)
    };
    let e = Synth::new(&spec).unwrap().truth().elements[0].clone();
    assert!((e.chirp_hz - 40.0 * 0.75).abs() < 0.1);
}

#[test]
fn envelope_crossings_match_truth() {
    // The composed envelope a(t) = R·F crosses 50 % at t_s and t_e and has the
    // stated 10-90 % times (shapes.rs definitions), within 0.1 %.
    for shape in [
        EdgeShape::RaisedCosine,
        EdgeShape::Linear,
        EdgeShape::Exponential,
        EdgeShape::Gaussian,
    ] {
        let spec = SynthSpec {
            rise_shape: shape,
            fall_shape: shape,
            rise_ms: 4.0,
            fall_ms: 6.0,
            ..short("E", 10.0)
        };
        let mut s = Synth::new(&spec).unwrap();
        let e = s.truth().elements[0].clone();
        let tone = &mut s.main;
        let step = 1e-6;
        let n = ((e.start_s + e.duration_s + 0.05) / step) as usize;
        let env: Vec<f64> = (0..n).map(|i| tone.envelope(i as f64 * step)).collect();
        let cross = |lvl: f64, rising: bool| -> f64 {
            for i in 1..n {
                let (a, b) = (env[i - 1], env[i]);
                if (rising && a < lvl && b >= lvl) || (!rising && a > lvl && b <= lvl) {
                    return (i as f64 - 1.0 + (lvl - a) / (b - a)) * step;
                }
            }
            f64::NAN
        };
        assert!((cross(0.5, true) - e.start_s).abs() < 2e-6, "{shape:?}");
        assert!((cross(0.5, false) - (e.start_s + e.duration_s)).abs() < 2e-6);
        let rise = cross(0.9, true) - cross(0.1, true);
        let fall = cross(0.1, false) - cross(0.9, false);
        assert!((rise / 4e-3 - 1.0).abs() < 1e-3, "{shape:?} rise {rise}");
        assert!((fall / 6e-3 - 1.0).abs() < 1e-3, "{shape:?} fall {fall}");
    }
}

#[test]
fn steady_second_tone_and_level() {
    // A steady second tone 6 dB below the main one: RMS in the lead-in gives
    // -18 dBFS within 0.05 dB (0.1 s = 100 whole cycles of 1000 Hz).
    let spec = SynthSpec {
        second: Some(SecondTone {
            pitch_hz: 1000.0,
            level_db: -6.0,
            keyed: false,
            ..SecondTone::default()
        }),
        ..short("E", 20.0)
    };
    let (x, truth) = render(&spec).unwrap();
    assert!(truth.second_elements.is_empty());
    assert!((dbfs_of(&x[..4800]) + 18.0).abs() < 0.05);
}

#[test]
fn write_and_read_back() {
    let dir = tempfile::tempdir().unwrap();
    let spec = SynthSpec {
        snr_db: Some(30.0),
        ..short("VVV", 25.0)
    };
    let (mem, _) = render(&spec).unwrap();
    let wav = dir.path().join("t.wav");
    let truth = write_files(&spec, &wav, false).unwrap();
    let back: Truth =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("t.json")).unwrap()).unwrap();
    assert_eq!(back.elements.len(), truth.elements.len());
    for (b, t) in back.elements.iter().zip(&truth.elements) {
        assert!((b.start_s - t.start_s).abs() < 1e-12 && b.kind == t.kind);
    }
    assert_eq!(back.spec, truth.spec);
    let mut r = hound::WavReader::open(&wav).unwrap();
    assert_eq!(r.spec().bits_per_sample, 16);
    let got: Vec<i16> = r.samples::<i16>().map(|s| s.unwrap()).collect();
    assert_eq!(got.len(), mem.len());
    for (g, m) in got.iter().zip(&mem) {
        assert!((*g as f64 / 32767.0 - *m as f64).abs() <= 0.5 / 32767.0 + 1e-6);
    }
    // No overwrite without permission; nothing else left in the folder.
    assert!(write_files(&spec, &wav, false).is_err());
    assert!(write_files(&spec, &wav, true).is_ok());
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 2);
}

#[test]
fn every_format_writes() {
    let dir = tempfile::tempdir().unwrap();
    for (format, bits) in [
        (SampleFormat::U8, 8),
        (SampleFormat::S24, 24),
        (SampleFormat::S32, 32),
        (SampleFormat::F32, 32),
    ] {
        let spec = SynthSpec {
            format,
            ..short("E", 20.0)
        };
        let wav = dir.path().join(format!("{format:?}.wav"));
        let t = write_files(&spec, &wav, false).unwrap();
        let r = hound::WavReader::open(&wav).unwrap();
        assert_eq!(r.spec().bits_per_sample, bits);
        assert_eq!(r.duration() as u64, t.total_frames);
    }
    // F64: our own WAVE_FORMAT_IEEE_FLOAT writer; parse the header by hand.
    let spec = SynthSpec {
        format: SampleFormat::F64,
        channels: 2,
        ..short("E", 20.0)
    };
    let (mem, t) = render(&spec).unwrap();
    let wav = dir.path().join("f64.wav");
    write_files(&spec, &wav, false).unwrap();
    let b = std::fs::read(&wav).unwrap();
    assert_eq!(&b[0..4], b"RIFF");
    assert_eq!(
        u32::from_le_bytes(b[4..8].try_into().unwrap()) as usize,
        b.len() - 8
    );
    assert_eq!(u16::from_le_bytes([b[20], b[21]]), 3);
    assert_eq!(u16::from_le_bytes([b[34], b[35]]), 64);
    assert_eq!(&b[50..54], b"data");
    let data = &b[58..];
    assert_eq!(data.len() as u64, t.total_frames * 2 * 8);
    for (i, m) in mem.iter().enumerate().step_by(97) {
        let v = f64::from_le_bytes(data[i * 8..i * 8 + 8].try_into().unwrap());
        assert!((v - *m as f64).abs() < 1e-6);
    }
}

#[test]
fn bad_parameters_are_errors() {
    let base = short("E", 20.0);
    let bad = [
        SynthSpec {
            sample_rate_hz: 4000,
            ..base.clone()
        },
        SynthSpec {
            wpm: 0.0,
            ..base.clone()
        },
        SynthSpec {
            text: " ".into(),
            ..base.clone()
        },
        SynthSpec {
            text: "A#".into(),
            ..base.clone()
        },
        SynthSpec {
            pitch_hz: 30_000.0,
            ..base.clone()
        },
        SynthSpec {
            rise_ms: -1.0,
            ..base.clone()
        },
        SynthSpec {
            chirp: Chirp::Exponential {
                depth_hz: 10.0,
                tau_ms: 0.0,
            },
            ..base.clone()
        },
        SynthSpec {
            rise_ms: 40.0,
            wpm: 40.0,
            ..base.clone()
        },
        SynthSpec {
            level_dbfs: 0.0,
            hum: Some(Hum {
                frequency_hz: 100.0,
                am_percent: 10.0,
                fm_hz: 0.0,
            }),
            ..base.clone()
        },
        SynthSpec {
            signal_channel: 2,
            ..base.clone()
        },
        SynthSpec {
            rx_bandpass: Some(Bandpass {
                low_hz: 300.0,
                high_hz: 2700.0,
                order: 5,
            }),
            ..base.clone()
        },
        SynthSpec {
            wpm: f64::NAN,
            ..base.clone()
        },
    ];
    for s in &bad {
        let e = Synth::new(s)
            .err()
            .unwrap_or_else(|| panic!("accepted {s:?}"));
        assert!(!e.to_string().is_empty());
    }
}

#[test]
fn spec_json_names() {
    // The serde names promised in the API.
    let s = SynthSpec {
        chirp: Chirp::Exponential {
            depth_hz: 5.0,
            tau_ms: 2.0,
        },
        rise_shape: EdgeShape::RaisedCosine,
        format: SampleFormat::S24,
        ..SynthSpec::default()
    };
    let j = serde_json::to_value(&s).unwrap();
    assert_eq!(j["chirp"]["kind"], "exponential");
    assert_eq!(j["rise_shape"], "raised-cosine");
    assert_eq!(j["format"], "s24");
    let none = serde_json::to_value(SynthSpec::default()).unwrap();
    assert_eq!(none["chirp"]["kind"], "none");
    let back: SynthSpec = serde_json::from_value(j).unwrap();
    assert_eq!(back, s);
    let partial: SynthSpec = serde_json::from_str(r#"{"wpm": 12}"#).unwrap();
    assert_eq!(partial.text, "PARIS PARIS PARIS");
    let k = serde_json::to_value(ElementKind::Dah).unwrap();
    assert_eq!(k, "dah");
}

#[test]
fn samples_follow_the_closed_form() {
    // The module-level signal definition, integrated by hand for one element:
    // φ = pitch·t + drift·t²/2 + chirp integral + fm·sin(wt)/w (cycles),
    // x = A·R·F·(1 + m cos wt)·cos 2πφ. Every sample within 2e-6 (f32).
    let rc = 2.0 * 0.8f64.asin() / std::f64::consts::PI;
    let lead = 5e-3 / rc / 2.0;
    for chirp in [
        Chirp::Exponential {
            depth_hz: 60.0,
            tau_ms: 3.0,
        },
        Chirp::Linear { depth_hz: -30.0 },
    ] {
        let spec = SynthSpec {
            chirp,
            drift_hz_per_min: 120.0,
            hum: Some(Hum {
                frequency_hz: 120.0,
                am_percent: 10.0,
                fm_hz: 3.0,
            }),
            ..short("T", 15.0)
        };
        let (x, truth) = render(&spec).unwrap();
        let e = &truth.elements[0];
        let (ts, te) = (e.start_s, e.start_s + e.duration_s);
        let t_on = ts - lead;
        let a = 10f64.powf(-12.0 / 20.0);
        let w = 2.0 * std::f64::consts::PI * 120.0;
        for (n, &v) in x.iter().enumerate() {
            let t = n as f64 / 48_000.0;
            let u = (t - t_on).max(0.0);
            let chirp_cycles = match chirp {
                Chirp::Exponential { depth_hz, tau_ms } => {
                    depth_hz * tau_ms * 1e-3 * (1.0 - (-u / (tau_ms * 1e-3)).exp())
                }
                Chirp::Linear { depth_hz } => {
                    let l = te - t_on;
                    let u = u.min(l);
                    depth_hz * (u - u * u / (2.0 * l))
                }
                Chirp::None => 0.0,
            };
            let phi = 700.0 * t + 2.0 * t * t / 2.0 + chirp_cycles + 3.0 * (w * t).sin() / w;
            let env = edge_rise(EdgeShape::RaisedCosine, 5e-3, t - ts)
                * edge_fall(EdgeShape::RaisedCosine, 5e-3, t - te);
            let want =
                a * env * (1.0 + 0.1 * (w * t).cos()) * (2.0 * std::f64::consts::PI * phi).cos();
            assert!(
                (v as f64 - want).abs() < 2e-6,
                "{chirp:?} sample {n}: {v} vs {want}"
            );
        }
    }
}

#[test]
#[ignore = "long: streams a full hour (run with --ignored)"]
fn one_hour_streams() {
    // About an hour at 20 WPM: "PARIS " 50 units × 1.2/20 s = 3 s per word.
    let spec = SynthSpec {
        text: "PARIS".into(),
        repeat: 1200,
        snr_db: Some(20.0),
        chirp: Chirp::Exponential {
            depth_hz: 20.0,
            tau_ms: 3.0,
        },
        rx_bandpass: Some(Bandpass::default()),
        ..SynthSpec::default()
    };
    let mut s = Synth::new(&spec).unwrap();
    assert!((s.truth().duration_s - 3600.0).abs() < 1.0);
    let mut buf = vec![0.0f32; 48_000];
    let mut frames = 0u64;
    let mut peak = 0.0f32;
    loop {
        let n = s.fill(&mut buf);
        if n == 0 {
            break;
        }
        frames += n as u64;
        peak = buf[..n].iter().fold(peak, |p, v| p.max(v.abs()));
    }
    assert_eq!(frames, s.total_frames());
    assert!(peak < 1.0);
}
