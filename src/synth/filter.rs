//! Butterworth band-pass filter (the simulated receiver filter), designed
//! from the analog prototype by the low-pass-to-band-pass transform and the
//! bilinear transform with pre-warped edges, run as a cascade of biquads.
//!
//! The band-pass order is the total order (twice the prototype order), so it
//! must be even, 2..=8; the response is −3.01 dB exactly at both edges.

use anyhow::{bail, Result};
use rustfft::num_complex::Complex64;

/// One second-order section, transposed direct form II.
#[derive(Clone, Debug)]
struct Biquad {
    b0: f64,
    b1: f64,
    b2: f64,
    a1: f64,
    a2: f64,
    z1: f64,
    z2: f64,
}

impl Biquad {
    fn process(&mut self, x: f64) -> f64 {
        let y = self.b0 * x + self.z1;
        self.z1 = self.b1 * x - self.a1 * y + self.z2;
        self.z2 = self.b2 * x - self.a2 * y;
        y
    }

    fn response(&self, z: Complex64) -> Complex64 {
        let zi = z.inv();
        (self.b0 + zi * (self.b1 + zi * self.b2)) / (1.0 + zi * (self.a1 + zi * self.a2))
    }
}

/// Butterworth band-pass as a biquad cascade with its running state.
#[derive(Clone, Debug)]
pub struct BandpassFilter {
    sections: Vec<Biquad>,
}

impl BandpassFilter {
    /// Designs the filter for edges `low_hz`..`high_hz` (−3 dB) at rate `fs`.
    pub fn butterworth(low_hz: f64, high_hz: f64, order: u32, fs: f64) -> Result<BandpassFilter> {
        if !(2..=8).contains(&order) || !order.is_multiple_of(2) {
            bail!("the band-pass order must be 2, 4, 6 or 8 (the total order of the band-pass filter).");
        }
        if !(low_hz.is_finite() && high_hz.is_finite() && low_hz > 0.0 && high_hz > low_hz) {
            bail!("the band-pass edges must satisfy 0 < low < high.");
        }
        if high_hz >= 0.49 * fs {
            bail!("the band-pass upper edge must be below 0.49 times the sample rate.");
        }
        let n = (order / 2) as usize;
        // Pre-warp so the digital edges land exactly where asked.
        let w1 = 2.0 * fs * (std::f64::consts::PI * low_hz / fs).tan();
        let w2 = 2.0 * fs * (std::f64::consts::PI * high_hz / fs).tan();
        let w0sq = w1 * w2;
        let bw = w2 - w1;
        let mut zpoles = Vec::with_capacity(2 * n);
        for k in 0..n {
            let theta = std::f64::consts::PI * (2 * k + n + 1) as f64 / (2 * n) as f64;
            let p = Complex64::from_polar(1.0, theta);
            let half = p * (bw / 2.0);
            let d = (half * half - w0sq).sqrt();
            for s in [half + d, half - d] {
                zpoles.push((2.0 * fs + s) / (2.0 * fs - s));
            }
        }
        // Pair conjugates: keep upper-half poles; real poles pair among themselves.
        let scale = 1e-9;
        let mut reals: Vec<f64> = zpoles
            .iter()
            .filter(|z| z.im.abs() <= scale)
            .map(|z| z.re)
            .collect();
        reals.sort_by(f64::total_cmp);
        let mut denoms: Vec<(f64, f64)> = zpoles
            .iter()
            .filter(|z| z.im > scale)
            .map(|z| (-2.0 * z.re, z.norm_sqr()))
            .collect();
        for pair in reals.chunks(2) {
            if pair.len() == 2 {
                denoms.push((-(pair[0] + pair[1]), pair[0] * pair[1]));
            }
        }
        if denoms.len() != n {
            bail!("the band-pass design failed for these edges; widen the band or move it away from the band edges.");
        }
        let w_centre = 2.0 * (w0sq.sqrt() / (2.0 * fs)).atan();
        let zc = Complex64::from_polar(1.0, w_centre);
        let mut sections = Vec::with_capacity(n);
        for (a1, a2) in denoms {
            // Zeros at z = 1 and z = −1 (the s = 0 and s = ∞ zeros).
            let mut bq = Biquad {
                b0: 1.0,
                b1: 0.0,
                b2: -1.0,
                a1,
                a2,
                z1: 0.0,
                z2: 0.0,
            };
            let g = 1.0 / bq.response(zc).norm();
            bq.b0 *= g;
            bq.b2 *= g;
            sections.push(bq);
        }
        Ok(BandpassFilter { sections })
    }

    /// Filters one sample.
    pub fn process(&mut self, x: f64) -> f64 {
        self.sections.iter_mut().fold(x, |v, s| s.process(v))
    }

    /// Magnitude response at `f_hz` for rate `fs` (from the coefficients).
    pub fn gain(&self, f_hz: f64, fs: f64) -> f64 {
        let z = Complex64::from_polar(1.0, 2.0 * std::f64::consts::PI * f_hz / fs);
        self.sections
            .iter()
            .fold(Complex64::new(1.0, 0.0), |h, s| h * s.response(z))
            .norm()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Steady-state gain for a tone, measured by running the filter and
    /// correlating the output with sine and cosine (lock-in).
    fn tone_gain(filter: &BandpassFilter, f: f64, fs: f64) -> f64 {
        let mut flt = filter.clone();
        let settle = (1.5 * fs) as usize;
        let n = (0.5 * fs) as usize;
        let w = 2.0 * std::f64::consts::PI * f / fs;
        let (mut i, mut q) = (0.0, 0.0);
        for k in 0..settle + n {
            let y = flt.process((w * k as f64).sin());
            if k >= settle {
                i += y * (w * k as f64).sin();
                q += y * (w * k as f64).cos();
            }
        }
        2.0 * (i * i + q * q).sqrt() / n as f64
    }

    #[test]
    fn minus_three_db_at_edges() {
        // Butterworth definition: |H| = 1/√2 at both edges, 1 at the
        // geometric centre; tolerance 2 % on the measured gain.
        let fs = 48_000.0;
        for (lo, hi) in [(300.0, 2700.0), (450.0, 950.0)] {
            for order in [2, 4, 6, 8] {
                let f = BandpassFilter::butterworth(lo, hi, order, fs).unwrap();
                for edge in [lo, hi] {
                    let g = tone_gain(&f, edge, fs);
                    assert!(
                        (g / std::f64::consts::FRAC_1_SQRT_2 - 1.0).abs() < 0.02,
                        "order {order} edge {edge}: {g}"
                    );
                    assert!((f.gain(edge, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
                }
                // Centre gain 1 at the pre-warped geometric centre, within 2 %.
                let centre = (lo * hi).sqrt();
                assert!((tone_gain(&f, centre, fs) - 1.0).abs() < 0.02);
            }
        }
    }

    #[test]
    fn stopband_slope() {
        // An order-8 band-pass (prototype order 4) falls 24 dB per octave far
        // from the band: at 1/4 of the lower edge, below -40 dB.
        let f = BandpassFilter::butterworth(400.0, 1000.0, 8, 48_000.0).unwrap();
        assert!(f.gain(100.0, 48_000.0) < 0.01);
    }

    #[test]
    fn rejects_bad_orders() {
        assert!(BandpassFilter::butterworth(300.0, 2700.0, 3, 48_000.0).is_err());
        assert!(BandpassFilter::butterworth(300.0, 2700.0, 10, 48_000.0).is_err());
        assert!(BandpassFilter::butterworth(2700.0, 300.0, 4, 48_000.0).is_err());
    }
}
