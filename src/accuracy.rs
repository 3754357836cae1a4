//! Measured-against-truth comparison for synthetic recordings, shared by the
//! accuracy benchmark (`cargo bench --bench accuracy`) and the grid tests.

use std::path::Path;

use crate::analysis::report::Report;
use crate::analysis::{analyze_file, Options};
use crate::dsp::stats::median;
use crate::error::Result;
use crate::synth::{write_files, SampleFormat, SynthSpec, Truth};

/// One synthesized case, analysed, with its elements paired to the truth.
#[derive(Clone, Debug)]
pub struct Case {
    pub truth: Truth,
    pub report: Report,
    /// (truth index, report index) of elements whose 50 % starts are within 20 ms.
    pub pairs: Vec<(usize, usize)>,
}

impl Case {
    /// Elements the analysis found that match no truth element.
    pub fn false_elements(&self) -> usize {
        self.report.elements.len() - self.pairs.len()
    }
    /// Truth elements the analysis missed.
    pub fn missed_elements(&self) -> usize {
        self.truth.elements.len() - self.pairs.len()
    }
    fn paired(&self, f: impl Fn(usize, usize) -> Option<f64>) -> Vec<f64> {
        self.pairs.iter().filter_map(|&(t, r)| f(t, r)).collect()
    }
    /// Median of measured rise times, ms.
    pub fn rise_median_ms(&self) -> f64 {
        median(&self.paired(|_, r| self.report.elements[r].rise_ms))
    }
    pub fn fall_median_ms(&self) -> f64 {
        median(&self.paired(|_, r| self.report.elements[r].fall_ms))
    }
    /// Median over elements of the true chirp, Hz.
    pub fn chirp_truth_hz(&self) -> f64 {
        median(&self.paired(|t, _| Some(self.truth.elements[t].chirp_hz)))
    }
    pub fn chirp_median_hz(&self) -> f64 {
        median(&self.paired(|_, r| Some(self.report.elements[r].chirp_hz)))
    }
    /// Per-element chirp errors, Hz.
    pub fn chirp_errors_hz(&self) -> Vec<f64> {
        self.paired(|t, r| Some(self.report.elements[r].chirp_hz - self.truth.elements[t].chirp_hz))
    }
    /// Per-element duration errors, ms.
    pub fn duration_errors_ms(&self) -> Vec<f64> {
        self.paired(|t, r| {
            Some(1e3 * (self.report.elements[r].duration_s - self.truth.elements[t].duration_s))
        })
    }
    /// Settled frequencies of the elements, Hz.
    pub fn settled_hz(&self) -> Vec<f64> {
        self.paired(|_, r| Some(self.report.elements[r].frequency_hz))
    }
}

/// Pairs elements by nearest 50 % start within 20 ms.
fn pair(truth: &Truth, rep: &Report) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut j = 0;
    for (i, t) in truth.elements.iter().enumerate() {
        while j < rep.elements.len() && rep.elements[j].start_s < t.start_s - 0.02 {
            j += 1;
        }
        if j < rep.elements.len() && (rep.elements[j].start_s - t.start_s).abs() <= 0.02 {
            out.push((i, j));
            j += 1;
        }
    }
    out
}

/// Synthesizes `spec` into `dir`, analyses it and pairs the elements.
pub fn run_case(spec: &SynthSpec, dir: &Path, name: &str, opt: &Options) -> Result<Case> {
    let path = dir.join(format!("{name}.wav"));
    let truth = write_files(spec, &path, true)?;
    let report = analyze_file(&path, opt)?;
    let _ = std::fs::remove_file(&path);
    let _ = std::fs::remove_file(path.with_extension("json"));
    let pairs = pair(&truth, &report);
    Ok(Case {
        truth,
        report,
        pairs,
    })
}

/// Cramér–Rao bound on the standard deviation of a frequency estimate from
/// N samples of a real tone (Rife & Boorstyn 1974):
/// var >= 12 fs^2 / ((2 pi)^2 SNR N (N^2 - 1)), SNR = A^2 / (2 sigma^2).
pub fn crb_freq_std_hz(fs: f64, snr_per_sample: f64, n: f64) -> f64 {
    (12.0 * fs * fs / ((2.0 * std::f64::consts::PI).powi(2) * snr_per_sample * n * (n * n - 1.0)))
        .sqrt()
}

/// The base case of the accuracy grid: "PARIS PARIS PARIS" (42 elements) at
/// 20 WPM, 1000 Hz, 48 kHz 16-bit, -12 dBFS, 5 ms raised-cosine edges, SNR
/// 30 dB in 2.5 kHz.
pub fn grid_base(seed: u64) -> SynthSpec {
    SynthSpec {
        text: "PARIS PARIS PARIS".into(),
        wpm: 20.0,
        pitch_hz: 1000.0,
        sample_rate_hz: 48_000,
        rise_ms: 5.0,
        fall_ms: 5.0,
        snr_db: Some(30.0),
        level_dbfs: -12.0,
        seed,
        ..Default::default()
    }
}

/// Rates, sample formats and channel layouts of the grid: (rate, format,
/// channels, 1-based channel carrying the signal).
pub const FORMAT_GRID: [(u32, SampleFormat, u16, u16); 10] = [
    (8_000, SampleFormat::S16, 1, 1),
    (44_100, SampleFormat::S16, 1, 1),
    (48_000, SampleFormat::S24, 1, 1),
    (48_000, SampleFormat::F32, 1, 1),
    (48_000, SampleFormat::F64, 1, 1),
    (48_000, SampleFormat::S32, 1, 1),
    (48_000, SampleFormat::U8, 1, 1),
    (96_000, SampleFormat::S16, 1, 1),
    (48_000, SampleFormat::S16, 2, 1),
    (48_000, SampleFormat::S16, 2, 2),
];

/// 99 % occupied bandwidth (ITU-R SM.328) of a signal by a direct DFT of the
/// whole recording over +-1 kHz of the pitch, at half the DFT's natural
/// spacing (so no spectral line falls between samples): the slow obvious
/// computation.
pub fn direct_obw_hz(x: &[f32], fs: f64, f0: f64) -> f64 {
    let step = fs / (2.0 * x.len() as f64);
    let m = (1000.0 / step) as i64;
    let freqs: Vec<f64> = (-m..=m).map(|d| f0 + d as f64 * step).collect();
    let p: Vec<f64> = freqs
        .iter()
        .map(|&f| {
            let w = 2.0 * std::f64::consts::PI * f / fs;
            let (mut re, mut im) = (0.0f64, 0.0f64);
            // Phasor recurrence with periodic renormalisation.
            let (c, s) = (w.cos(), -w.sin());
            let (mut pr, mut pi) = (1.0f64, 0.0f64);
            for (i, &v) in x.iter().enumerate() {
                re += v as f64 * pr;
                im += v as f64 * pi;
                let nr = pr * c - pi * s;
                pi = pr * s + pi * c;
                pr = nr;
                if i % 4096 == 0 {
                    let m = (pr * pr + pi * pi).sqrt();
                    pr /= m;
                    pi /= m;
                }
            }
            re * re + im * im
        })
        .collect();
    let total: f64 = p.iter().sum();
    let mut acc = 0.0;
    let (mut lo, mut hi) = (None, None);
    for (f, v) in freqs.iter().zip(&p) {
        acc += v;
        if lo.is_none() && acc >= 0.005 * total {
            lo = Some(*f);
        }
        if hi.is_none() && acc >= 0.995 * total {
            hi = Some(*f);
        }
    }
    match (hi, lo) {
        (Some(h), Some(l)) => h - l,
        _ => f64::NAN,
    }
}

/// Truth of `drift_total_hz` for a warm-up drift of `hz` with time constant
/// `tau_s`: the offset hz·(1 − e^(−t/τ)) at the middle of each element, the
/// median over the last tenth of the elements less that over the first.
pub fn warmup_change_truth_hz(truth: &crate::synth::Truth, hz: f64, tau_s: f64) -> f64 {
    let e = &truth.elements;
    let n = e.len();
    let k = (n / 10).max(3).min(n);
    let offset = |part: &[crate::synth::TruthElement]| {
        let v: Vec<f64> = part
            .iter()
            .map(|x| hz * (1.0 - (-(x.start_s + 0.5 * x.duration_s) / tau_s).exp()))
            .collect();
        crate::dsp::stats::median(&v)
    };
    offset(&e[n - k..]) - offset(&e[..k])
}
