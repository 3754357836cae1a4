//! Transmit/receive timing measured against the synthesizer's truth, shared
//! by the accuracy benchmark (`cargo bench --bench accuracy -- txrx`) and
//! the tests in `tests/txrx.rs`.

use std::path::Path;

use crate::analysis::txrx::{analyze_timing, TimingOptions, TimingReport};
use crate::error::Result;
use crate::synth::txrx::{TxRxSpec, TxRxTruth};
use crate::synth::{write_files, SynthSpec};

/// Tolerance on delay, fall delay and first-element shortening, ms (issue 4).
pub const TIMING_TOL_MS: f64 = 1.0;
/// Tolerance on the receive recovery, ms (issue 4).
pub const RECOVERY_TOL_MS: f64 = 10.0;

/// One timing case: what went in and what came out.
#[derive(Clone, Debug)]
pub struct TimingCase {
    pub truth: TxRxTruth,
    pub report: TimingReport,
}

impl TimingCase {
    /// Measured minus true: delay, fall delay, shortening, recovery (ms);
    /// NaN where not measured.
    pub fn errors_ms(&self) -> [f64; 4] {
        let t = &self.report.timing;
        let e = |m: Option<f64>, truth: f64| m.map_or(f64::NAN, |m| m - truth);
        [
            e(t.delay_ms, self.truth.delay_ms),
            e(t.fall_delay_ms, self.truth.fall_delay_ms),
            e(
                t.first_element_shortening_ms,
                self.truth.first_element_shortening_ms,
            ),
            match self.truth.rx_recovery_ms {
                Some(r) => e(t.rx_recovery_ms, r),
                None => f64::NAN,
            },
        ]
    }

    /// Whether every figure is within its tolerance, every transmission was
    /// found and every element paired.
    pub fn within(&self) -> bool {
        let e = self.errors_ms();
        e[..3].iter().all(|x| x.abs() <= TIMING_TOL_MS)
            && (self.truth.rx_recovery_ms.is_none() || e[3].abs() <= RECOVERY_TOL_MS)
            && self.report.timing.transmissions == self.truth.transmissions.len()
            && self.report.pairing.unpaired_key == 0
            && self.report.pairing.unpaired_rf == 0
    }
}

/// The base of the timing grid: "TEST DE" three times (three transmissions
/// of 10 elements) at 20 WPM, RF at 700 Hz with 5 ms raised-cosine edges
/// and SNR `snr_db` in 2.5 kHz, sidetone 600 Hz at -12 dBFS, receiver
/// background -40 dBFS muted by 40 dB with a 5 ms release.
pub fn timing_base(delay_ms: f64, shortening_ms: f64, hang_ms: f64, snr_db: f64) -> SynthSpec {
    SynthSpec {
        text: "TEST DE".into(),
        wpm: 20.0,
        pitch_hz: 700.0,
        snr_db: Some(snr_db),
        channels: 2,
        lead_in_s: 0.6,
        tail_s: 1.0,
        seed: 11,
        txrx: Some(TxRxSpec {
            delay_ms,
            first_shortening_ms: shortening_ms,
            hang_ms,
            ..Default::default()
        }),
        ..Default::default()
    }
}

/// Synthesizes `spec` into `dir`, runs the timing analysis on it and
/// returns both (the files are removed).
pub fn run_timing_case(
    spec: &SynthSpec,
    dir: &Path,
    name: &str,
    opt: &TimingOptions,
) -> Result<TimingCase> {
    let path = dir.join(format!("{name}.wav"));
    let truth = write_files(spec, &path, true)?;
    let report = analyze_timing(&path, opt);
    let _ = std::fs::remove_file(&path);
    let _ = std::fs::remove_file(path.with_extension("json"));
    Ok(TimingCase {
        truth: truth.txrx.expect("a timing spec has timing truth"),
        report: report?,
    })
}
