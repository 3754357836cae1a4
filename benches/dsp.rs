//! Speed of each DSP stage on one fixed synthetic input: 10 s of a 48 kHz
//! mono keyed tone (700 Hz, 20 WPM, 5 ms raised-cosine edges, 30 dB SNR in
//! 2.5 kHz) from `cwaudit::synth::render`.
//!
//! Every stage reports throughput in *input* samples per second (48 kHz
//! samples of the recording it covers), so a figure of 4.8e6 elem/s means
//! the stage runs at 100x real time, and the stages can be compared
//! directly. Stages that work on the 12 kHz baseband (levels, segmenter,
//! frequency trace) get their baseband precomputed outside the timed loop.
//!
//! Run: cargo bench --bench dsp

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, BenchmarkGroup, Criterion, Throughput};
use cwaudit::analysis::tracker::{ToneTracker, DETECT_WINDOW_S, MIN_GAP_S, MIN_MARK_S};
use cwaudit::dsp::downconvert::{Band, Downconverter};
use cwaudit::dsp::freq::{chirp, trace};
use cwaudit::dsp::levels::LevelHistogram;
use cwaudit::dsp::segment::{Segmenter, OFF_FRACTION, ON_FRACTION};
use cwaudit::dsp::survey::Survey;
use cwaudit::synth::{render, SynthSpec, Truth};
use rustfft::num_complex::{Complex32, Complex64};

const FS: u32 = 48_000;
const PITCH_HZ: f64 = 700.0;
/// Input block size, as `analysis::BLOCK_FRAMES`.
const BLOCK: usize = 8192;

struct Input {
    x: Vec<f32>,
    truth: Truth,
}

fn input() -> Input {
    // "PARIS " is 50 units = 3 s at 20 WPM: three words (the last without
    // its word space) plus 0.5 s lead-in and tail make about 9.6 s.
    let spec = SynthSpec {
        text: "PARIS PARIS PARIS".into(),
        repeat: 1,
        snr_db: Some(30.0),
        lead_in_s: 0.5,
        tail_s: 0.5,
        ..SynthSpec::default()
    };
    let (x, truth) = render(&spec).expect("the spec is valid");
    Input { x, truth }
}

fn baseband(x: &[f32]) -> (Downconverter, Vec<Complex32>) {
    let mut dc = Downconverter::new(FS, Band::envelope(FS as f64, PITCH_HZ));
    let mut z = Vec::new();
    for b in x.chunks(BLOCK) {
        dc.push(b, &mut z);
    }
    dc.flush(&mut z);
    (dc, z)
}

/// Magnitude of the centred 2 ms coherent moving average (the tracker's
/// detection envelope), computed the straightforward way.
fn detection(z: &[Complex32], fs_d: f64) -> Vec<f64> {
    let w = ((DETECT_WINDOW_S * fs_d).round() as usize) | 1;
    let mut run = Complex64::new(0.0, 0.0);
    let mut out = Vec::with_capacity(z.len());
    for (i, v) in z.iter().enumerate() {
        run += Complex64::new(v.re as f64, v.im as f64);
        if i >= w {
            let o = z[i - w];
            run -= Complex64::new(o.re as f64, o.im as f64);
        }
        if i + 1 >= w {
            out.push((run / w as f64).norm());
        }
    }
    out
}

fn configure(g: &mut BenchmarkGroup<'_, criterion::measurement::WallTime>, samples: usize) {
    g.sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3))
        .throughput(Throughput::Elements(samples as u64));
}

fn stages(c: &mut Criterion) {
    let inp = input();
    let n = inp.x.len();
    let mut g = c.benchmark_group("dsp");
    configure(&mut g, n);

    g.bench_function("downconvert", |b| {
        b.iter(|| {
            let (_, z) = baseband(black_box(&inp.x));
            black_box(z.len())
        })
    });

    let (dc, z) = baseband(&inp.x);
    let fs_d = dc.out_rate_hz();
    let det = detection(&z, fs_d);

    g.bench_function("detection_envelope", |b| {
        b.iter(|| black_box(detection(black_box(&z), fs_d)).len())
    });

    // Levels as the tracker uses them: every sample into the histogram, the
    // IEEE 181 levels recomputed every 600 samples.
    g.bench_function("levels_histogram", |b| {
        b.iter(|| {
            let mut h = LevelHistogram::new();
            let mut last = None;
            for (i, &d) in det.iter().enumerate() {
                h.add(d);
                if i % 600 == 0 {
                    last = h.levels();
                }
            }
            black_box(last)
        })
    });

    let mut h = LevelHistogram::new();
    det.iter().for_each(|&d| h.add(d));
    let lv = h.levels().expect("a keyed signal has two levels");
    let (on, off) = (lv.at(ON_FRACTION), lv.at(OFF_FRACTION));
    let s = |x: f64| (x * fs_d).round() as u64;
    g.bench_function("segmenter", |b| {
        b.iter(|| {
            let mut seg = Segmenter::new(s(MIN_MARK_S), s(MIN_GAP_S));
            let mut count = 0usize;
            for (q, &v) in det.iter().enumerate() {
                count += seg.step(q as u64, v, on, off).is_some() as usize;
            }
            count += seg.finish(det.len() as u64).0.is_some() as usize;
            black_box(count)
        })
    });

    // Frequency trace and chirp fit of every element, between its true 50 %
    // instants mapped to baseband indices.
    let t0 = dc.time_of(0);
    let idx = |t: f64| (t - t0) * fs_d;
    let spans: Vec<(f64, f64)> = inp
        .truth
        .elements
        .iter()
        .map(|e| (idx(e.start_s), idx(e.start_s + e.duration_s)))
        .collect();
    g.bench_function("freq_trace_chirp", |b| {
        b.iter(|| {
            let mut acc = 0.0;
            for &(a, e) in &spans {
                let lo = (a as usize).saturating_sub(600);
                let hi = ((e as usize) + 600).min(z.len());
                let tr = trace(&z[lo..hi], fs_d, a - lo as f64, e - lo as f64);
                acc += chirp(&tr).chirp_hz;
            }
            black_box(acc)
        })
    });

    g.bench_function("survey_spectra", |b| {
        b.iter(|| {
            let mut sv = Survey::new(FS, 1);
            for blk in inp.x.chunks(BLOCK) {
                sv.push(blk);
            }
            black_box(sv.finish().candidates.len())
        })
    });

    g.bench_function("tone_tracker", |b| {
        b.iter(|| {
            let mut tr = ToneTracker::new(FS, PITCH_HZ);
            for blk in inp.x.chunks(BLOCK) {
                tr.push(blk);
            }
            tr.finish();
            black_box(tr.elements().len())
        })
    });
    g.finish();
}

criterion_group!(benches, stages);
criterion_main!(benches);
