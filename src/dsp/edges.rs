//! Rise and fall of one element, IEEE 181 style: reference levels at 10, 50
//! and 90 % between the state levels, crossing instants by linear
//! interpolation between samples.
//!
//! Slow edges are measured on an envelope smoothed by a Gaussian whose own
//! 10-90 % time (2.563 sigma) is a fifth of the coarse edge time, which cuts
//! the noise bandwidth without shaping the edge much; the smoothing's share is
//! then removed in quadrature (exact for Gaussian cascades). Noise power is
//! subtracted from the envelope's power so that noise does not lift the 10 %
//! point.

use rustfft::num_complex::{Complex32, Complex64};

use super::levels::StateLevels;

/// 10-90 % time of a Gaussian impulse response, in units of its sigma.
pub const GAUSS_10_90_PER_SIGMA: f64 = 2.563;

/// Normalised Gaussian kernel (sum 1), truncated at +-4 sigma.
pub fn gaussian_kernel(sigma: f64) -> Vec<f64> {
    if sigma < 0.3 {
        return vec![1.0];
    }
    let h = (4.0 * sigma).ceil() as i64;
    let mut k: Vec<f64> = (-h..=h)
        .map(|i| (-0.5 * (i as f64 / sigma).powi(2)).exp())
        .collect();
    let s: f64 = k.iter().sum();
    k.iter_mut().for_each(|v| *v /= s);
    k
}

/// Envelope of `z` smoothed by `kernel` (coherently, before the magnitude),
/// with `noise_power` (per sample, unsmoothed) removed in the power domain.
pub fn envelope(z: &[Complex32], kernel: &[f64], noise_power: f64) -> Vec<f64> {
    let h = kernel.len() / 2;
    let g: f64 = kernel.iter().map(|w| w * w).sum();
    let pn = noise_power * g;
    let n = z.len();
    (0..n)
        .map(|i| {
            let mut acc = Complex64::new(0.0, 0.0);
            let mut ws = 0.0;
            let a = i.saturating_sub(h);
            let b = (i + h + 1).min(n);
            for (j, zj) in z.iter().enumerate().take(b).skip(a) {
                let w = kernel[j + h - i];
                acc += Complex64::new(zj.re as f64, zj.im as f64) * w;
                ws += w;
            }
            let p = (acc / ws).norm_sqr() - pn;
            p.max(0.0).sqrt()
        })
        .collect()
}

/// Fractional index where `env` crosses `level` going up, searching
/// backwards from `from` (the latest such crossing at or before it).
pub fn rising_before(env: &[f64], from: usize, level: f64, stop: usize) -> Option<f64> {
    let mut i = from.min(env.len().saturating_sub(2));
    while i >= stop {
        if env[i] < level && env[i + 1] >= level {
            return Some(i as f64 + (level - env[i]) / (env[i + 1] - env[i]));
        }
        if i == 0 {
            break;
        }
        i -= 1;
    }
    None
}

/// First upward crossing of `level` at or after `from`, before `stop`.
pub fn rising_after(env: &[f64], from: usize, level: f64, stop: usize) -> Option<f64> {
    let end = stop.min(env.len().saturating_sub(1));
    (from..end)
        .find(|&i| env[i] < level && env[i + 1] >= level)
        .map(|i| i as f64 + (level - env[i]) / (env[i + 1] - env[i]))
}

/// First downward crossing of `level` at or after `from`, before `stop`.
pub fn falling_after(env: &[f64], from: usize, level: f64, stop: usize) -> Option<f64> {
    let end = stop.min(env.len().saturating_sub(1));
    (from..end)
        .find(|&i| env[i] >= level && env[i + 1] < level)
        .map(|i| i as f64 + (env[i] - level) / (env[i] - env[i + 1]))
}

/// Latest downward crossing of `level` at or before `from`, not before `stop`.
pub fn falling_before(env: &[f64], from: usize, level: f64, stop: usize) -> Option<f64> {
    let mut i = from.min(env.len().saturating_sub(2));
    while i >= stop {
        if env[i] >= level && env[i + 1] < level {
            return Some(i as f64 + (env[i] - level) / (env[i] - env[i + 1]));
        }
        if i == 0 {
            break;
        }
        i -= 1;
    }
    None
}

/// Crossing instants of one edge, fractional sample indices.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Edge {
    pub t10: f64,
    pub t50: f64,
    pub t90: f64,
}

impl Edge {
    /// |t90 - t10| in samples.
    pub fn width(&self) -> f64 {
        (self.t90 - self.t10).abs()
    }
}

/// Finds a rising edge around comparator index `near` within `lo..hi`.
pub fn rise_edge(env: &[f64], lv: &StateLevels, near: usize, lo: usize, hi: usize) -> Option<Edge> {
    let t50 = rising_before(env, near, lv.at(0.5), lo)
        .or_else(|| rising_after(env, near, lv.at(0.5), hi))?;
    let i50 = t50.floor() as usize;
    let t10 = rising_before(env, i50, lv.at(0.1), lo)?;
    let t90 = rising_after(env, i50, lv.at(0.9), hi)?;
    Some(Edge { t10, t50, t90 })
}

/// Finds a falling edge around comparator index `near` within `lo..hi`.
pub fn fall_edge(env: &[f64], lv: &StateLevels, near: usize, lo: usize, hi: usize) -> Option<Edge> {
    let back = near.saturating_sub(1).max(lo);
    let t50 = falling_before(env, near, lv.at(0.5), back.saturating_sub(0).min(near))
        .filter(|t| *t >= lo as f64)
        .or_else(|| falling_after(env, lo, lv.at(0.5), hi))?;
    let i50 = t50.floor() as usize;
    let t90 = falling_before(env, i50, lv.at(0.9), lo)?;
    let t10 = falling_after(env, i50, lv.at(0.1), hi)?;
    Some(Edge { t10, t50, t90 })
}

/// Coarse-then-fine measurement of one edge: returns the edge on the final
/// envelope and the 10-90 % time in samples with the smoothing removed.
#[allow(clippy::too_many_arguments)]
pub fn measure_edge(
    z: &[Complex32],
    lv: &StateLevels,
    noise_power: f64,
    near: usize,
    lo: usize,
    hi: usize,
    rising: bool,
    coarse_sigma: f64,
) -> Option<(Edge, f64)> {
    let find = |env: &[f64]| {
        if rising {
            rise_edge(env, lv, near, lo, hi)
        } else {
            fall_edge(env, lv, near, lo, hi)
        }
    };
    // Work on a window around the edge only.
    let k0 = gaussian_kernel(coarse_sigma);
    let env0 = envelope(z, &k0, noise_power);
    let coarse = find(&env0)?;
    let w0 = coarse.width();
    let s0 = if k0.len() > 1 { coarse_sigma } else { 0.0 };
    let w_est = (w0 * w0 - (GAUSS_10_90_PER_SIGMA * s0).powi(2))
        .max(0.0)
        .sqrt();
    let sigma = w_est / (5.0 * GAUSS_10_90_PER_SIGMA);
    let k1 = gaussian_kernel(sigma);
    let s1 = if k1.len() > 1 { sigma } else { 0.0 };
    let edge = if k1.len() == k0.len() {
        coarse
    } else {
        let env1 = envelope(z, &k1, noise_power);
        find(&env1).unwrap_or(coarse)
    };
    let s_used = if k1.len() == k0.len() { s0 } else { s1 };
    let w = edge.width();
    let corr = (w * w - (GAUSS_10_90_PER_SIGMA * s_used).powi(2))
        .max(0.0)
        .sqrt();
    Some((edge, corr))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ramp_env(n: usize, a: usize, b: usize) -> Vec<f64> {
        (0..n)
            .map(|i| {
                if i <= a {
                    0.0
                } else if i >= b {
                    1.0
                } else {
                    (i - a) as f64 / (b - a) as f64
                }
            })
            .collect()
    }

    #[test]
    fn linear_ramp_crossings_are_exact() {
        // Analytic: a linear ramp over T has 10-90 % = 0.8 T (BRIEF.md).
        let env = ramp_env(400, 100, 200);
        let lv = StateLevels {
            low: 0.0,
            high: 1.0,
        };
        let e = rise_edge(&env, &lv, 180, 0, 399).unwrap();
        assert!((e.t50 - 150.0).abs() < 1e-9);
        assert!((e.width() - 80.0).abs() < 1e-9);
        let fall: Vec<f64> = env.iter().rev().copied().collect();
        let f = fall_edge(&fall, &lv, 220, 0, 399).unwrap();
        assert!((f.t50 - 249.0).abs() < 1e-9, "{f:?}");
        assert!((f.width() - 80.0).abs() < 1e-9);
    }

    #[test]
    fn gaussian_smoothing_is_removed_in_quadrature() {
        // A Gaussian-filtered step has 10-90 % = 2.563 sigma (BRIEF.md); a
        // second Gaussian adds in quadrature, which the measurement removes.
        let sigma = 20.0;
        let n = 2000;
        let z: Vec<Complex32> = (0..n)
            .map(|i| {
                let x = (i as f64 - 1000.0) / (sigma * 2f64.sqrt());
                Complex32::new((0.5 * (1.0 + erf(x))) as f32, 0.0)
            })
            .collect();
        let lv = StateLevels {
            low: 0.0,
            high: 1.0,
        };
        let (e, w) = measure_edge(&z, &lv, 0.0, 1000, 0, n - 1, true, 2.0).unwrap();
        assert!((e.t50 - 1000.0).abs() < 0.6, "{e:?}");
        assert!((w - 2.563 * sigma).abs() < 0.01 * 2.563 * sigma, "{w}");
    }

    /// Abramowitz & Stegun 7.1.26 (|error| < 1.5e-7), enough for a test signal.
    fn erf(x: f64) -> f64 {
        let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
        let y = 1.0
            - (((((1.061_405_429 * t - 1.453_152_027) * t) + 1.421_413_741) * t - 0.284_496_736)
                * t
                + 0.254_829_592)
                * t
                * (-x * x).exp();
        if x >= 0.0 {
            y
        } else {
            -y
        }
    }
}
