//! Analysis against synthesizer truth over the grid of issue #2: edge shapes
//! and times, SNR, sample rates, bit depths, stereo, speeds and chirp.
//! Truth: the synthesizer's stated element timings and edge times, which its
//! own tests check against the analytic 10-90 % ratios of BRIEF.md (raised
//! cosine 0.5903 T, linear 0.8 T, RC 2.197 tau, Gaussian 2.563 sigma) and
//! PARIS = 50 units (ITU-R M.1677-1).
//!
//! Tolerances are the targets: rise/fall within max(3 %, 0.1 ms) at
//! or above 1 ms and within 0.2 ms below, at SNR >= 25 dB in 2.5 kHz;
//! element count exact; WPM within 1 %; chirp within max(10 %, 1 Hz).
//! Where the engine does not meet a target yet, the test says so and guards
//! the figure it does reach (README, Accuracy).

use cwaudit::accuracy::{grid_base, run_case, Case, FORMAT_GRID};
use cwaudit::analysis::Options;
use cwaudit::synth::{Chirp, EdgeShape, SynthSpec};

fn base(seed: u64) -> SynthSpec {
    grid_base(seed)
}

fn run(spec: &SynthSpec) -> Case {
    let dir = tempfile::tempdir().unwrap();
    run_case(spec, dir.path(), "case", &Options::default()).unwrap()
}

fn edge_tol(t_ms: f64) -> f64 {
    if t_ms >= 1.0 {
        (0.03 * t_ms).max(0.1)
    } else {
        0.2
    }
}

/// Element count exact, no false elements, WPM within 1 %.
fn check_keying(c: &Case, what: &str) {
    assert_eq!(
        c.report.elements.len(),
        c.truth.elements.len(),
        "{what}: element count"
    );
    assert_eq!(c.false_elements(), 0, "{what}: false elements");
    let wpm = c.report.summary.wpm.unwrap();
    assert!(
        (wpm - c.truth.wpm).abs() <= 0.01 * c.truth.wpm,
        "{what}: WPM {wpm}"
    );
}

fn check_edges(c: &Case, what: &str, fall_tol_share: Option<f64>) {
    let (tr, tf) = (c.truth.spec.rise_ms, c.truth.spec.fall_ms);
    let (mr, mf) = (c.rise_median_ms(), c.fall_median_ms());
    assert!(
        (mr - tr).abs() <= edge_tol(tr),
        "{what}: rise {mr:.3} vs {tr}"
    );
    let tol_f = fall_tol_share.map_or(edge_tol(tf), |s| s * tf);
    assert!((mf - tf).abs() <= tol_f, "{what}: fall {mf:.3} vs {tf}");
}

#[test]
fn four_edge_shapes_from_a_third_of_a_millisecond_to_ten() {
    let mut seed = 1;
    for shape in [
        EdgeShape::RaisedCosine,
        EdgeShape::Linear,
        EdgeShape::Exponential,
        EdgeShape::Gaussian,
    ] {
        for t in [0.3, 1.0, 5.0, 10.0] {
            seed += 1;
            let c = run(&SynthSpec {
                rise_ms: t,
                fall_ms: t,
                rise_shape: shape,
                fall_shape: shape,
                ..base(seed)
            });
            let what = format!("{shape:?} {t} ms");
            check_keying(&c, &what);
            // Known shortfall (README, Accuracy): RC falls read short at 30 dB
            // because the slow tail carries the 10 % point into the noise; at
            // 2-10 ms they are within 8 %, not 3 %.
            let fall_share = (shape == EdgeShape::Exponential && t >= 1.0).then_some(0.08);
            check_edges(&c, &what, fall_share);
        }
    }
}

#[test]
fn snr_from_fourteen_to_forty_db() {
    for (i, snr) in [25.0, 30.0, 40.0].into_iter().enumerate() {
        for t in [1.0, 5.0] {
            let c = run(&SynthSpec {
                rise_ms: t,
                fall_ms: t,
                snr_db: Some(snr),
                ..base(20 + i as u64)
            });
            let what = format!("SNR {snr} dB, {t} ms");
            check_keying(&c, &what);
            check_edges(&c, &what, None);
            // SNR is measured: within 1 dB of the synthesizer's.
            let m = c.report.summary.snr_db.unwrap();
            assert!((m - snr).abs() < 1.0, "{what}: SNR {m}");
        }
    }
    // 14 dB: no false or missed elements and the speed holds. The issue's
    // 10 % on the median edge is not met yet (README): the guard below is
    // what the engine reaches, 25 %.
    let c = run(&SynthSpec {
        snr_db: Some(14.0),
        ..base(30)
    });
    check_keying(&c, "SNR 14 dB");
    for (m, what) in [(c.rise_median_ms(), "rise"), (c.fall_median_ms(), "fall")] {
        assert!((m - 5.0).abs() <= 0.25 * 5.0, "SNR 14 dB: {what} {m:.3}");
    }
}

#[test]
fn sample_rates_bit_depths_and_either_stereo_channel() {
    let mut seed = 40;
    for (rate, fmt, ch, sig) in FORMAT_GRID {
        for t in [0.5, 5.0] {
            seed += 1;
            let c = run(&SynthSpec {
                sample_rate_hz: rate,
                format: fmt,
                channels: ch,
                signal_channel: sig,
                rise_ms: t,
                fall_ms: t,
                pitch_hz: if rate == 8_000 { 800.0 } else { 1000.0 },
                ..base(seed)
            });
            let what = format!("{rate} Hz {fmt:?} {ch} ch, signal in {sig}, {t} ms");
            assert_eq!(c.report.input.channel_used, sig, "{what}: channel");
            assert_eq!(c.report.input.sample_rate_hz, rate);
            check_keying(&c, &what);
            check_edges(&c, &what, None);
            // Key-down level: -12 dBFS within 0.2 dB (AES17: full-scale sine = 0 dBFS).
            let l = c.report.summary.level_dbfs.unwrap();
            assert!((l + 12.0).abs() < 0.2, "{what}: level {l}");
        }
    }
}

#[test]
fn speeds_from_twelve_to_forty_wpm() {
    for (i, wpm) in [12.0, 20.0, 30.0, 40.0].into_iter().enumerate() {
        let c = run(&SynthSpec {
            wpm,
            rise_ms: 3.0,
            fall_ms: 3.0,
            ..base(50 + i as u64)
        });
        let what = format!("{wpm} WPM");
        check_keying(&c, &what);
        check_edges(&c, &what, None);
        // Standard weighting: dah/dit 3 and dit mark/space 1 within 2 %.
        let s = &c.report.summary;
        assert!((s.dah_dit_ratio.unwrap() - 3.0).abs() < 0.06, "{what}");
        assert!((s.mark_space_ratio.unwrap() - 1.0).abs() < 0.02, "{what}");
        // Durations: every element within 0.5 ms of the truth.
        let worst = c
            .duration_errors_ms()
            .iter()
            .fold(0.0f64, |m, e| m.max(e.abs()));
        assert!(worst < 0.5, "{what}: duration error {worst} ms");
    }
}

#[test]
fn weighting_is_measured() {
    // Heavy weighting: dit mark/space 1.5, dah 3.5 dits (synthesizer truth).
    let c = run(&SynthSpec {
        mark_space_ratio: 1.5,
        dah_dit_ratio: 3.5,
        ..base(60)
    });
    check_keying(&c, "weighted");
    let s = &c.report.summary;
    assert!((s.mark_space_ratio.unwrap() - 1.5).abs() < 0.03, "{s:?}");
    assert!((s.dah_dit_ratio.unwrap() - 3.5).abs() < 0.07, "{s:?}");
}

#[test]
fn chirp_zero_five_twenty_sixty_hz() {
    for (i, (snr, chirp)) in [
        (30.0, Chirp::None),
        (40.0, Chirp::None),
        (
            30.0,
            Chirp::Exponential {
                depth_hz: 5.0,
                tau_ms: 10.0,
            },
        ),
        (
            30.0,
            Chirp::Exponential {
                depth_hz: 20.0,
                tau_ms: 10.0,
            },
        ),
        (
            30.0,
            Chirp::Exponential {
                depth_hz: 60.0,
                tau_ms: 10.0,
            },
        ),
        (
            40.0,
            Chirp::Exponential {
                depth_hz: 5.0,
                tau_ms: 10.0,
            },
        ),
        (40.0, Chirp::Linear { depth_hz: 20.0 }),
    ]
    .into_iter()
    .enumerate()
    {
        let c = run(&SynthSpec {
            chirp,
            snr_db: Some(snr),
            ..base(70 + i as u64)
        });
        let what = format!("{chirp:?} at {snr} dB");
        check_keying(&c, &what);
        let truth = c.chirp_truth_hz();
        let mean = c.report.summary.chirp_mean_element_hz.unwrap();
        let med = c.chirp_median_hz();
        if matches!(chirp, Chirp::None) {
            // A chirp-free signal must read below 1 Hz.
            assert!(mean < 1.0 && med < 1.0, "{what}: {mean} {med}");
            continue;
        }
        let tol = (0.1 * truth).max(1.0);
        assert!(
            (mean - truth).abs() <= tol,
            "{what}: mean element {mean} vs {truth}"
        );
        // Per element, 5 Hz is below what one element can show at 30 dB
        // (README: Cramér–Rao bound); from 20 Hz, or at 40 dB, it holds.
        if !(snr < 35.0 && truth < 5.0) {
            assert!(
                (med - truth).abs() <= tol,
                "{what}: median {med} vs {truth}"
            );
        }
    }
}
