//! Keying edge shapes, each parameterised by its 10-90 % time and placed so
//! that it crosses 50 % exactly at x = 0 (so 50 %-to-50 % equals the mark).
//!
//! Analytic 10-90 % times: raised cosine over T → 0.5903·T, linear ramp over
//! T → 0.8·T, RC exponential with τ → ln 9·τ = 2.197·τ, Gaussian-filtered
//! step with σ → 2·Φ⁻¹(0.9)·σ = 2.563·σ. A 10-90 % time of 0 is an ideal step.

use serde::{Deserialize, Serialize};

/// Edge shape of a keying transition.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum EdgeShape {
    /// Half a cosine period (the common "shaped keying" edge).
    #[default]
    RaisedCosine,
    /// Straight ramp.
    Linear,
    /// RC charge/discharge: starts abruptly, settles exponentially.
    Exponential,
    /// Step through a Gaussian filter (erf).
    Gaussian,
}

/// 10-90 % time of a raised cosine over T, divided by T: 2·asin(0.8)/π.
const RC_FACTOR: f64 = 0.590_334_470_601_733_2;
/// 10-90 % time of a linear ramp over T, divided by T.
const LIN_FACTOR: f64 = 0.8;
/// 10-90 % time of an RC exponential, divided by τ: ln 9.
const EXP_FACTOR: f64 = 2.197_224_577_336_219_6;
/// 10-90 % time of a Gaussian-filtered step, divided by σ: 2·Φ⁻¹(0.9).
const GAUSS_FACTOR: f64 = 2.563_103_131_089_200_8;
/// The Gaussian edge is truncated at ±5 σ (Φ(−5) ≈ 2.9e-7, below −130 dB).
const GAUSS_SPAN: f64 = 5.0;
/// Time after the exponential's 50 % point where its residue is 0.1 %: τ·ln 500.
const EXP_SETTLE: f64 = 6.214_608_098_422_191;
/// Beyond 25 τ the exponential residue (< 1e-11) is dropped.
const EXP_DROP: f64 = 25.0;

/// The shape's own parameter (T, τ or σ) for a 10-90 % time.
fn parameter(shape: EdgeShape, t10_90_s: f64) -> f64 {
    t10_90_s
        / match shape {
            EdgeShape::RaisedCosine => RC_FACTOR,
            EdgeShape::Linear => LIN_FACTOR,
            EdgeShape::Exponential => EXP_FACTOR,
            EdgeShape::Gaussian => GAUSS_FACTOR,
        }
}

/// Rising edge R(x): 0 → 1, R(0) = 0.5, for a 10-90 % time `t10_90_s`.
pub fn edge_rise(shape: EdgeShape, t10_90_s: f64, x_s: f64) -> f64 {
    if t10_90_s <= 0.0 {
        return step(x_s);
    }
    let p = parameter(shape, t10_90_s);
    match shape {
        EdgeShape::RaisedCosine => {
            if x_s <= -p / 2.0 {
                0.0
            } else if x_s >= p / 2.0 {
                1.0
            } else {
                0.5 * (1.0 + (std::f64::consts::PI * x_s / p).sin())
            }
        }
        EdgeShape::Linear => (0.5 + x_s / p).clamp(0.0, 1.0),
        EdgeShape::Exponential => {
            let u = x_s + p * std::f64::consts::LN_2;
            if u <= 0.0 {
                0.0
            } else {
                1.0 - (-u / p).exp()
            }
        }
        EdgeShape::Gaussian => {
            if x_s <= -GAUSS_SPAN * p {
                0.0
            } else if x_s >= GAUSS_SPAN * p {
                1.0
            } else {
                0.5 * (1.0 + erf(x_s / (p * std::f64::consts::SQRT_2)))
            }
        }
    }
}

/// Falling edge F(x): 1 → 0, F(0) = 0.5. Mirror of the rise, except the RC
/// exponential, which discharges: F(x) = min(1, exp(−(x + τ ln 2)/τ)).
pub fn edge_fall(shape: EdgeShape, t10_90_s: f64, x_s: f64) -> f64 {
    if t10_90_s <= 0.0 {
        return step(-x_s);
    }
    match shape {
        EdgeShape::Exponential => {
            let p = parameter(shape, t10_90_s);
            let u = x_s + p * std::f64::consts::LN_2;
            if u <= 0.0 {
                1.0
            } else if u > EXP_DROP * p {
                0.0
            } else {
                (-u / p).exp()
            }
        }
        _ => edge_rise(shape, t10_90_s, -x_s),
    }
}

/// Time from the instant an edge leaves its starting value to its 50 % point
/// (the key-down instant t_on is the rise's 50 % instant minus this).
pub fn lead_s(shape: EdgeShape, t10_90_s: f64) -> f64 {
    if t10_90_s <= 0.0 {
        return 0.0;
    }
    let p = parameter(shape, t10_90_s);
    match shape {
        EdgeShape::RaisedCosine | EdgeShape::Linear => p / 2.0,
        EdgeShape::Exponential => p * std::f64::consts::LN_2,
        EdgeShape::Gaussian => GAUSS_SPAN * p,
    }
}

/// Time from an edge's 50 % point until it has settled (exactly, or to
/// 0.1 % for the exponential).
pub fn settle_s(shape: EdgeShape, t10_90_s: f64) -> f64 {
    if t10_90_s <= 0.0 {
        return 0.0;
    }
    let p = parameter(shape, t10_90_s);
    match shape {
        EdgeShape::Exponential => EXP_SETTLE * p,
        _ => lead_s(shape, t10_90_s),
    }
}

/// Time after a fall's 50 % point beyond which F is exactly 0 in this model.
pub fn fall_end_s(shape: EdgeShape, t10_90_s: f64) -> f64 {
    match shape {
        EdgeShape::Exponential if t10_90_s > 0.0 => {
            (EXP_DROP - std::f64::consts::LN_2) * parameter(shape, t10_90_s)
        }
        _ => settle_s(shape, t10_90_s),
    }
}

fn step(x: f64) -> f64 {
    if x > 0.0 {
        1.0
    } else if x < 0.0 {
        0.0
    } else {
        0.5
    }
}

/// Error function by its Maclaurin series; used only for |x| ≤ 5/√2, where
/// cancellation costs under 1e-11 absolute.
fn erf(x: f64) -> f64 {
    let x2 = x * x;
    let mut term = x; // x^(2n+1) (-1)^n / n!
    let mut sum = x;
    let mut n = 0.0f64;
    loop {
        n += 1.0;
        term *= -x2 / n;
        let add = term / (2.0 * n + 1.0);
        sum += add;
        if add.abs() < 1e-17 * sum.abs().max(1e-300) || n > 200.0 {
            break;
        }
    }
    (sum * std::f64::consts::FRAC_2_SQRT_PI).clamp(-1.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    const SHAPES: [EdgeShape; 4] = [
        EdgeShape::RaisedCosine,
        EdgeShape::Linear,
        EdgeShape::Exponential,
        EdgeShape::Gaussian,
    ];

    /// Crossing of level `y` by a monotone function on [lo, hi], by bisection.
    fn crossing(f: impl Fn(f64) -> f64, y: f64, mut lo: f64, mut hi: f64) -> f64 {
        let rising = f(hi) > f(lo);
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if (f(mid) < y) == rising {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }

    #[test]
    fn factors_match_published_values() {
        // Analytic 10-90 % times from BRIEF.md: 0.5903 T, 2.197 τ, 2.563 σ.
        assert!((RC_FACTOR - 0.5903).abs() < 1e-4);
        assert!((EXP_FACTOR - 2.197).abs() < 1e-3);
        assert!((GAUSS_FACTOR - 2.563).abs() < 1e-3);
        assert!((EXP_FACTOR - 9f64.ln()).abs() < 1e-15);
        assert!((RC_FACTOR - 2.0 * 0.8f64.asin() / std::f64::consts::PI).abs() < 1e-15);
        assert!((EXP_SETTLE - 500f64.ln()).abs() < 1e-14);
    }

    #[test]
    fn ten_ninety_times_and_fifty_percent() {
        // Each shape's 10-90 % time must equal the stated time within 0.1 %
        // (the definition of the parameterisation), and 50 % must sit at 0.
        for shape in SHAPES {
            for t in [0.5e-3, 5e-3, 12e-3] {
                let span = 20.0 * t;
                let r = |x| edge_rise(shape, t, x);
                let f = |x| edge_fall(shape, t, x);
                let rise = crossing(r, 0.9, -span, span) - crossing(r, 0.1, -span, span);
                let fall = crossing(f, 0.1, -span, span) - crossing(f, 0.9, -span, span);
                assert!((rise / t - 1.0).abs() < 1e-3, "{shape:?} rise {rise}");
                assert!((fall / t - 1.0).abs() < 1e-3, "{shape:?} fall {fall}");
                assert!((edge_rise(shape, t, 0.0) - 0.5).abs() < 1e-12);
                assert!((edge_fall(shape, t, 0.0) - 0.5).abs() < 1e-12);
                // Edges start at -lead and are settled after +settle.
                let lead = lead_s(shape, t);
                let settle = settle_s(shape, t);
                assert!(edge_rise(shape, t, -lead - 1e-9) < 1e-6);
                assert!(edge_rise(shape, t, settle) > 0.999 - 1e-9);
                assert!(edge_fall(shape, t, settle) < 0.001 + 1e-9);
            }
        }
    }

    #[test]
    fn step_edges() {
        // t = 0: ideal step, 0.5 at the instant itself.
        assert_eq!(edge_rise(EdgeShape::Gaussian, 0.0, -1e-9), 0.0);
        assert_eq!(edge_rise(EdgeShape::Gaussian, 0.0, 0.0), 0.5);
        assert_eq!(edge_fall(EdgeShape::Linear, 0.0, 1e-9), 0.0);
        assert_eq!(lead_s(EdgeShape::Exponential, 0.0), 0.0);
    }

    #[test]
    fn erf_values() {
        // Abramowitz & Stegun table 7.1: erf(0.5) = 0.5204998778, erf(2) = 0.9953222650.
        assert!((erf(0.5) - 0.520_499_877_8).abs() < 1e-9);
        assert!((erf(2.0) - 0.995_322_265_0).abs() < 1e-9);
        assert!((erf(-3.5) + 0.999_999_256_9).abs() < 1e-9);
    }
}
