//! Measures one captured element: edges, duration, level, frequency trace
//! and chirp. Pure function of the element's baseband samples.

use rustfft::num_complex::Complex32;

use crate::dsp::edges::{measure_edge, EdgeSearch};
use crate::dsp::freq::{chirp, trace, ChirpFit, Trace};
use crate::dsp::levels::StateLevels;

/// Coarse smoothing for the first edge estimate, s (a ~0.6 kHz noise band).
const COARSE_SIGMA_S: f64 = 0.000_25;
/// Stretch either side of the comparator's switching searched for an edge, s
/// (edges up to about 15 ms with room for the occupancy windows).
const EDGE_SPAN_S: f64 = 0.05;

/// What one element measures, in the capture's own sample indices.
#[derive(Clone, Debug)]
pub struct Measured {
    pub t50_rise: f64,
    pub t50_fall: f64,
    pub rise_samples: Option<f64>,
    pub fall_samples: Option<f64>,
    pub t90_rise: Option<f64>,
    pub t90_fall: Option<f64>,
    pub level_power: f64,
    pub early_late_db: Option<f64>,
    pub chirp: ChirpFit,
    pub trace: Trace,
}

/// Everything the measurement needs besides the samples.
pub struct Context {
    pub fs: f64,
    pub levels: StateLevels,
    pub noise_power: f64,
}

/// Measures an element whose comparator switched on at `up` and off at `down`
/// (indices into `z`); `lo` bounds the backward search (previous element).
pub fn measure(
    z: &[Complex32],
    up: usize,
    down: usize,
    lo: usize,
    ctx: &Context,
) -> Option<Measured> {
    let n = z.len();
    if n < 8 || up >= down || down >= n {
        return None;
    }
    let coarse = COARSE_SIGMA_S * ctx.fs;
    let span = (EDGE_SPAN_S * ctx.fs) as usize;
    let rise = measure_edge(
        z,
        &ctx.levels,
        ctx.noise_power,
        EdgeSearch {
            near: up,
            lo,
            hi: down,
            rising: true,
            span,
        },
        coarse,
    );
    let fall = measure_edge(
        z,
        &ctx.levels,
        ctx.noise_power,
        EdgeSearch {
            near: down,
            lo: up,
            hi: n - 1,
            rising: false,
            span,
        },
        coarse,
    );
    let t50r = rise.map(|r| r.0.t50).unwrap_or(up as f64);
    let t50f = fall.map(|f| f.0.t50).unwrap_or(down as f64);
    if t50f <= t50r {
        return None;
    }
    // Key-down level: mean power between the 90 % points, noise removed.
    let (pa, pb) = match (rise, fall) {
        (Some(r), Some(f)) if f.0.t90 > r.0.t90 + 1.0 => {
            (r.0.t90.ceil() as usize, f.0.t90.floor() as usize)
        }
        _ => {
            let c = 0.5 * (t50r + t50f);
            let h = (0.25 * (t50f - t50r)).max(1.0);
            ((c - h).max(0.0) as usize, ((c + h) as usize).min(n - 1))
        }
    };
    let (pa, pb) = (pa.min(n - 1), pb.min(n - 1).max(pa.min(n - 1)));
    let seg = &z[pa..=pb];
    let mean_p = seg.iter().map(|v| v.norm_sqr() as f64).sum::<f64>() / seg.len() as f64;
    let level_power = (mean_p - ctx.noise_power).max(mean_p * 1e-6);
    // Early against late quarter of the plateau: AGC recovery shows as a droop.
    let early_late_db = if seg.len() >= 16 {
        let q = seg.len() / 4;
        let p =
            |s: &[Complex32]| s.iter().map(|v| v.norm_sqr() as f64).sum::<f64>() / s.len() as f64;
        let (e, l) = (
            p(&seg[..q]) - ctx.noise_power,
            p(&seg[seg.len() - q..]) - ctx.noise_power,
        );
        if e > 0.0 && l > 0.0 {
            Some(10.0 * (e / l).log10())
        } else {
            None
        }
    } else {
        None
    };
    let tr = trace(z, ctx.fs, t50r, t50f);
    let ch = chirp(&tr);
    Some(Measured {
        t50_rise: t50r,
        t50_fall: t50f,
        rise_samples: rise.map(|r| r.1),
        fall_samples: fall.map(|f| f.1),
        t90_rise: rise.map(|r| r.0.t90),
        t90_fall: fall.map(|f| f.0.t90),
        level_power,
        early_late_db,
        chirp: ch,
        trace: tr,
    })
}
