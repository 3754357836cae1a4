//! Property tests (proptest) of the segmenter and the streaming tracker.
//!
//! - The streaming `Segmenter` gives exactly the marks of a slow offline
//!   reference written here from its documented rules (hysteresis on/off
//!   thresholds, marks shorter than `min_mark` dropped, gaps shorter than
//!   `min_gap` bridged, an unfinished mark at the end dropped), and those
//!   marks never overlap, are in time order, and their durations plus gaps
//!   add up to the span from the first rise to the last fall.
//! - `ToneTracker` on a synthesized recording finds every element of the
//!   synthesizer's truth, in order, without overlap, with durations plus
//!   gaps adding up to the span; and its result does not depend on the block
//!   sizes the samples are pushed in (1 to 20000 samples, random).
//!
//! Case counts are modest so the file runs in seconds.

use cwaudit::analysis::tracker::{ToneTracker, TrackedElement};
use cwaudit::dsp::segment::{Mark, Segmenter};
use cwaudit::synth::{render, SynthSpec};
use proptest::prelude::*;

// ------------------------------------------------------------- segmenter

const ON: f64 = 0.65;
const OFF: f64 = 0.35;

fn stream(x: &[f64], min_mark: u64, min_gap: u64) -> Vec<Mark> {
    let mut s = Segmenter::new(min_mark, min_gap);
    let mut v: Vec<Mark> = x
        .iter()
        .enumerate()
        .filter_map(|(q, &v)| s.step(q as u64, v, ON, OFF))
        .collect();
    v.extend(s.finish(x.len() as u64).0);
    v
}

/// Offline reference: hysteresis runs first, then bridging and dropping.
fn reference(x: &[f64], min_mark: u64, min_gap: u64) -> Vec<Mark> {
    // Raw comparator runs (up, Some(down)) or (up, None) if still on at the end.
    let mut runs: Vec<(u64, Option<u64>)> = Vec::new();
    let mut on = false;
    for (q, &v) in x.iter().enumerate() {
        let q = q as u64;
        if !on && v >= ON {
            on = true;
            runs.push((q, None));
        } else if on && v < OFF {
            on = false;
            runs.last_mut().expect("a run is open").1 = Some(q);
        }
    }
    let mut out = Vec::new();
    let mut cur: Option<Mark> = None;
    for (up, down) in runs {
        let bridged = cur.is_some_and(|c| up < c.down + min_gap);
        match (bridged, down) {
            (true, Some(d)) => cur.as_mut().expect("bridged to a mark").down = d,
            // An open run bridged to the mark before it: both unfinished.
            (true, None) => cur = None,
            (false, d) => {
                out.extend(cur.take());
                if let Some(d) = d {
                    if d - up >= min_mark {
                        cur = Some(Mark { up, down: d });
                    }
                }
            }
        }
    }
    out.extend(cur);
    out
}

/// Envelopes made of runs of levels (low, middle, high), so that marks,
/// glitches, short gaps and chatter inside the hysteresis band all occur.
fn envelope() -> impl Strategy<Value = Vec<f64>> {
    prop::collection::vec(
        (
            prop_oneof![Just(0.0), Just(0.5), Just(1.0), 0.0f64..1.0],
            1usize..40,
        ),
        0..60,
    )
    .prop_map(|runs| {
        runs.into_iter()
            .flat_map(|(v, n)| std::iter::repeat_n(v, n))
            .collect()
    })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(400))]

    #[test]
    fn segmenter_matches_reference_and_marks_do_not_overlap(
        x in envelope(),
        min_mark in 1u64..12,
        min_gap in 1u64..12,
    ) {
        let got = stream(&x, min_mark, min_gap);
        prop_assert_eq!(&got, &reference(&x, min_mark, min_gap));
        for m in &got {
            prop_assert!(m.down >= m.up + min_mark, "{:?} shorter than {}", m, min_mark);
            prop_assert!(m.down as usize <= x.len());
        }
        for w in got.windows(2) {
            prop_assert!(w[1].up >= w[0].down + min_gap, "{:?} then {:?}", w[0], w[1]);
        }
        if let (Some(a), Some(b)) = (got.first(), got.last()) {
            let marks: u64 = got.iter().map(|m| m.down - m.up).sum();
            let gaps: u64 = got.windows(2).map(|w| w[1].up - w[0].down).sum();
            prop_assert_eq!(marks + gaps, b.down - a.up);
        }
    }
}

// ------------------------------------------------------------- tracker

const FS: u32 = 48_000;

fn spec(text: String, wpm: f64, pitch_hz: f64, seed: u64) -> SynthSpec {
    SynthSpec {
        text,
        wpm,
        pitch_hz,
        snr_db: Some(30.0),
        seed,
        lead_in_s: 0.2,
        tail_s: 0.2,
        ..SynthSpec::default()
    }
}

fn track(x: &[f32], pitch_hz: f64, blocks: &[usize]) -> Vec<TrackedElement> {
    let mut tr = ToneTracker::new(FS, pitch_hz);
    let mut i = 0;
    let mut k = 0;
    while i < x.len() {
        let n = if blocks.is_empty() {
            x.len()
        } else {
            blocks[k % blocks.len()]
        };
        let j = (i + n).min(x.len());
        tr.push(&x[i..j]);
        i = j;
        k += 1;
    }
    tr.finish();
    tr.elements().to_vec()
}

fn text() -> impl Strategy<Value = String> {
    prop::collection::vec(prop_oneof![Just(' '), prop::char::range('A', 'Z')], 1..6)
        .prop_map(|v| v.into_iter().collect::<String>())
        .prop_filter("some letter", |s| !s.trim().is_empty())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(12))]

    /// Elements in order, without overlap, adding up, and as the truth says:
    /// every element found, 50 % instants within 1 ms of the truth (30 dB
    /// SNR; the accuracy targets in README "Accuracy" are far tighter).
    #[test]
    fn tracker_elements_are_ordered_and_add_up(
        t in text(),
        wpm in 15.0f64..35.0,
        pitch in 500.0f64..1200.0,
        seed in 0u64..1000,
    ) {
        let (x, truth) = render(&spec(t, wpm, pitch, seed)).unwrap();
        let els = track(&x, pitch, &[8192]);
        prop_assert_eq!(els.len(), truth.elements.len());
        for (e, te) in els.iter().zip(&truth.elements) {
            prop_assert!((e.start_s - te.start_s).abs() < 1e-3, "{} vs {}", e.start_s, te.start_s);
            let end = te.start_s + te.duration_s;
            prop_assert!((e.end_s - end).abs() < 1e-3, "{} vs {}", e.end_s, end);
            prop_assert!(e.end_s > e.start_s);
        }
        for w in els.windows(2) {
            prop_assert!(w[1].start_s > w[0].end_s, "overlap: {} then {}", w[0].end_s, w[1].start_s);
        }
        if let (Some(a), Some(b)) = (els.first(), els.last()) {
            let marks: f64 = els.iter().map(|e| e.end_s - e.start_s).sum();
            let gaps: f64 = els.windows(2).map(|w| w[1].start_s - w[0].end_s).sum();
            prop_assert!((marks + gaps - (b.end_s - a.start_s)).abs() < 1e-9);
        }
    }

    /// The same recording pushed whole and in random block sizes 1..20000
    /// gives the same elements: counts exactly, times within 1e-9 s.
    #[test]
    fn tracker_is_invariant_to_block_sizes(
        t in text(),
        seed in 0u64..1000,
        blocks in prop::collection::vec(1usize..20_000, 1..12),
    ) {
        let pitch = 700.0;
        let (x, _) = render(&spec(t, 25.0, pitch, seed)).unwrap();
        let whole = track(&x, pitch, &[]);
        let split = track(&x, pitch, &blocks);
        prop_assert!(!whole.is_empty());
        prop_assert_eq!(whole.len(), split.len());
        for (a, b) in whole.iter().zip(&split) {
            prop_assert!((a.start_s - b.start_s).abs() < 1e-9, "{} vs {}", a.start_s, b.start_s);
            prop_assert!((a.end_s - b.end_s).abs() < 1e-9, "{} vs {}", a.end_s, b.end_s);
            prop_assert_eq!(a.rise_s.is_some(), b.rise_s.is_some());
            prop_assert_eq!(a.fall_s.is_some(), b.fall_s.is_some());
            if let (Some(p), Some(q)) = (a.rise_s, b.rise_s) {
                prop_assert!((p - q).abs() < 1e-9);
            }
            if let (Some(p), Some(q)) = (a.fall_s, b.fall_s) {
                prop_assert!((p - q).abs() < 1e-9);
            }
        }
    }

    /// Single-sample pushes are the extreme case of the above.
    #[test]
    fn tracker_fed_one_sample_at_a_time_matches(seed in 0u64..1000) {
        let pitch = 700.0;
        let (x, _) = render(&spec("TEST".into(), 30.0, pitch, seed)).unwrap();
        let whole = track(&x, pitch, &[]);
        let ones = track(&x, pitch, &[1]);
        prop_assert_eq!(whole.len(), 6); // T E S T = 1 + 1 + 3 + 1 elements
        prop_assert_eq!(whole.len(), ones.len());
        for (a, b) in whole.iter().zip(&ones) {
            prop_assert!((a.start_s - b.start_s).abs() < 1e-9);
            prop_assert!((a.end_s - b.end_s).abs() < 1e-9);
        }
    }
}

// ------------------------------------------------------------- trace sample

/// Long recordings keep frequency traces for a sample of their elements
/// (`tracker::trace_kept`): each level keeps half of the previous level's
/// elements, as a subset of them, spread by a hash.
#[test]
fn trace_sample_levels_are_nested_halves() {
    use cwaudit::analysis::tracker::trace_kept;
    let n = 200_000usize;
    for level in 1..=6u32 {
        let kept = (0..n).filter(|&i| trace_kept(i, level)).count();
        let expect = n as f64 / f64::from(1u32 << level);
        // Binomial scatter: 5 standard deviations.
        assert!(
            (kept as f64 - expect).abs() < 5.0 * expect.sqrt(),
            "level {level}: {kept} kept of {n}, expected about {expect}"
        );
        assert!((0..n).all(|i| !trace_kept(i, level) || trace_kept(i, level - 1)));
        // No period-2 or period-14 aliasing (the 14 elements of "PARIS"):
        // every position within the repeat keeps about its share.
        for p in 0..14 {
            let m = (p..n).step_by(14).filter(|&i| trace_kept(i, level)).count();
            let e = (n / 14) as f64 / f64::from(1u32 << level);
            assert!(
                (m as f64 - e).abs() < 5.0 * e.sqrt(),
                "level {level} pos {p}: {m}"
            );
        }
    }
    assert!((0..1000).all(|i| trace_kept(i, 0)));
}

/// The mean-element chirp from a sample of the traces: with every other
/// element's trace dropped, as a long recording drops them, it reads the
/// same chirp as from all of them. Truth: the synthesizer's 20 Hz
/// exponential chirp (tau 10 ms), read at the 50 % rise as the grid tests
/// read it (tests/accuracy_grid.rs, 10 % or 1 Hz).
#[test]
fn mean_element_chirp_from_a_trace_sample() {
    use cwaudit::accuracy::run_case;
    use cwaudit::analysis::tracker::trace_kept;
    use cwaudit::analysis::{ensemble_chirp, Options};
    use cwaudit::synth::Chirp;
    let spec = SynthSpec {
        text: "PARIS PARIS PARIS".into(),
        chirp: Chirp::Exponential {
            depth_hz: 20.0,
            tau_ms: 10.0,
        },
        snr_db: Some(30.0),
        seed: 3,
        ..SynthSpec::default()
    };
    let dir = tempfile::tempdir().unwrap();
    let c = run_case(&spec, dir.path(), "chirp", &Options::default()).unwrap();
    let full = c.report.summary.chirp_mean_element_hz.unwrap();
    assert_eq!(ensemble_chirp(&c.report.elements), Some(full));
    let truth = c.chirp_truth_hz();
    let tol = (0.1 * truth).max(1.0);
    assert!((full - truth).abs() <= tol, "all traces: {full} vs {truth}");
    let mut thinned = c.report.elements.clone();
    for (i, e) in thinned.iter_mut().enumerate() {
        if !trace_kept(i, 1) {
            e.trace.clear();
        }
    }
    let kept: Vec<_> = thinned
        .iter()
        .filter(|e| !e.trace.is_empty())
        .cloned()
        .collect();
    assert!(kept.len() < thinned.len() && kept.len() >= 10);
    // Elements without a trace are left out, not counted as empty.
    let half = ensemble_chirp(&thinned).unwrap();
    assert_eq!(ensemble_chirp(&kept), Some(half));
    assert!(
        (half - truth).abs() <= tol,
        "half the traces: {half} vs {truth}"
    );
}
