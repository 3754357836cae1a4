//! Keying of a DC keyer line, recorded directly or through an AC-coupled
//! sound-card input: a step detector (the mean of the next `STEP_WINDOW_S`
//! minus the mean of the previous one, a matched filter for a step) whose
//! peaks above a threshold mark the instants of steepest change. For an edge
//! symmetric about its middle that instant is the 50 % point; an AC coupling
//! much slower than the window barely moves it. Streaming: memory is two
//! windows of samples plus one entry per step.

use std::collections::VecDeque;

/// Width of each half of the step detector, s.
pub const STEP_WINDOW_S: f64 = 0.001;

/// One step of the line.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Step {
    /// Instant of steepest change, s.
    pub t_s: f64,
    /// Whether the line goes up.
    pub rising: bool,
    /// Detector peak (the step's height), full scale = 1.
    pub size: f64,
}

#[derive(Clone, Copy, Debug)]
struct Peak {
    c: u64,
    d: f64,
    before: f64,
    after: Option<f64>,
}

/// Streaming step detector.
#[derive(Clone, Debug)]
pub struct StepDetector {
    fs: f64,
    l: usize,
    buf: VecDeque<f64>,
    sum_old: f64,
    sum_new: f64,
    threshold: f64,
    n: u64,
    prev: f64,
    peak: Option<Peak>,
    steps: Vec<Step>,
    max_abs: f64,
    /// Counts of |d| in 1 dB bins from `HIST_MIN_DB`, for its median.
    hist: Vec<u64>,
}

const HIST_MIN_DB: f64 = -200.0;
const HIST_BINS: usize = 221;

impl StepDetector {
    /// Steps whose detector peak exceeds `threshold` (full scale = 1).
    pub fn new(fs: u32, threshold: f64) -> StepDetector {
        let l = ((STEP_WINDOW_S * fs as f64).round() as usize).max(1);
        StepDetector {
            fs: fs as f64,
            l,
            buf: VecDeque::with_capacity(2 * l + 1),
            sum_old: 0.0,
            sum_new: 0.0,
            threshold,
            n: 0,
            prev: 0.0,
            peak: None,
            steps: Vec::new(),
            max_abs: 0.0,
            hist: vec![0; HIST_BINS],
        }
    }

    fn emit(&mut self) {
        if let Some(p) = self.peak.take() {
            let (a, m) = (p.before.abs(), p.d.abs());
            let b = p.after.map_or(a, f64::abs);
            let den = a - 2.0 * m + b;
            let delta = if den < 0.0 {
                (0.5 * (a - b) / den).clamp(-0.5, 0.5)
            } else {
                0.0
            };
            // d at boundary index c lies between samples c-1 and c.
            let t = (p.c as f64 - 0.5 + delta) / self.fs;
            self.steps.push(Step {
                t_s: t,
                rising: p.d > 0.0,
                size: m,
            });
        }
    }

    pub fn push(&mut self, samples: &[f32]) {
        let l = self.l;
        for &v in samples {
            let v = v as f64;
            self.buf.push_back(v);
            self.sum_new += v;
            if self.buf.len() > l {
                // The sample leaving the newer half joins the older one.
                let mid = self.buf[self.buf.len() - 1 - l];
                self.sum_new -= mid;
                self.sum_old += mid;
            }
            if self.buf.len() > 2 * l {
                let old = self.buf.pop_front().expect("non-empty");
                self.sum_old -= old;
            }
            self.n += 1;
            if self.buf.len() < 2 * l {
                continue;
            }
            if self.n.is_multiple_of(65_536) {
                // Re-sum now and then so rounding cannot accumulate.
                self.sum_old = self.buf.iter().take(l).sum();
                self.sum_new = self.buf.iter().skip(l).sum();
            }
            let d = (self.sum_new - self.sum_old) / l as f64;
            self.max_abs = self.max_abs.max(d.abs());
            let db = 20.0 * d.abs().max(1e-300).log10();
            let bin = (db - HIST_MIN_DB)
                .floor()
                .clamp(0.0, (HIST_BINS - 1) as f64) as usize;
            self.hist[bin] += 1;
            let c = self.n - l as u64;
            if let Some(p) = self.peak.as_mut() {
                if p.after.is_none() && p.c + 1 == c {
                    p.after = Some(d);
                }
            }
            let above = d.abs() >= self.threshold;
            if self
                .peak
                .is_some_and(|p| !above || (p.d > 0.0) != (d > 0.0))
            {
                // The run above the threshold ended (or turned round).
                self.emit();
            }
            if above && self.peak.is_none_or(|p| d.abs() > p.d.abs()) {
                self.peak = Some(Peak {
                    c,
                    d,
                    before: self.prev,
                    after: None,
                });
            }
            self.prev = d;
        }
    }

    /// Largest |detector output| so far: the tallest step, which sets the
    /// threshold of a second run (`f64::INFINITY` finds no steps).
    pub fn max_abs(&self) -> f64 {
        self.max_abs
    }

    /// Median |detector output| (to 1 dB): the line's noise, since steps
    /// take up a small part of the time. 0 before any output.
    pub fn median_abs(&self) -> f64 {
        let total: u64 = self.hist.iter().sum();
        let mut acc = 0;
        for (i, &c) in self.hist.iter().enumerate() {
            acc += c;
            if c > 0 && 2 * acc >= total {
                return 10f64.powf((HIST_MIN_DB + i as f64 + 0.5) / 20.0);
            }
        }
        0.0
    }

    /// Ends the stream and returns the steps in time order.
    pub fn finish(mut self) -> Vec<Step> {
        self.emit();
        self.steps
    }
}

/// Key-down intervals (start, end) from the steps: key-down is the
/// direction of the first step (recordings start at key-up); a repeated
/// step in the same direction is ignored; then gaps shorter than `min_gap_s`
/// are bridged (contact bounce) and marks shorter than `min_mark_s` dropped.
pub fn marks_from_steps(steps: &[Step], min_mark_s: f64, min_gap_s: f64) -> Vec<(f64, f64)> {
    let Some(first) = steps.first() else {
        return Vec::new();
    };
    let down = first.rising;
    let mut raw: Vec<(f64, f64)> = Vec::new();
    let mut start: Option<f64> = None;
    for s in steps {
        match (s.rising == down, start) {
            (true, None) => start = Some(s.t_s),
            (false, Some(a)) => {
                raw.push((a, s.t_s));
                start = None;
            }
            _ => {}
        }
    }
    let mut out: Vec<(f64, f64)> = Vec::new();
    for m in raw {
        match out.last_mut() {
            Some(last) if m.0 - last.1 < min_gap_s => last.1 = m.1,
            _ => out.push(m),
        }
    }
    out.retain(|m| m.1 - m.0 >= min_mark_s);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A line at `lo`, stepping to `hi` over a linear ramp `ramp` samples
    /// long centred on each instant of `edges` (alternately up and down).
    fn line(n: usize, edges: &[f64], lo: f64, hi: f64, ramp: f64, fs: f64) -> Vec<f32> {
        (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                let mut v = lo;
                for (k, &e) in edges.iter().enumerate() {
                    let x = ((t - e) * fs / ramp + 0.5).clamp(0.0, 1.0);
                    let s = if k % 2 == 0 { x } else { -x };
                    v += (hi - lo) * s;
                }
                v as f32
            })
            .collect()
    }

    #[test]
    fn steps_of_a_dc_line_at_their_midpoints() {
        let fs = 48_000.0;
        let edges = [0.1003, 0.16011, 0.22, 0.4007];
        // Key-down pulls the line from 0.5 to 0.1: the first step falls.
        let x = line(30_000, &edges, 0.5, 0.1, 20.0, fs);
        let mut d = StepDetector::new(48_000, 0.1);
        for c in x.chunks(1000) {
            d.push(c);
        }
        let d_median = d.median_abs();
        let s = d.finish();
        assert_eq!(s.len(), 4, "{s:?}");
        for (st, e) in s.iter().zip(edges) {
            // Linear ramps are symmetric: the midpoint, within 0.02 ms.
            assert!((st.t_s - e).abs() < 2e-5, "{} {e}", st.t_s);
            // Peak of the box difference over a linear ramp R samples long
            // (R <= 2L): step x (1 - R/(4L)), analytic.
            assert!(
                (st.size - 0.4 * (1.0 - 20.0 / 192.0)).abs() < 2e-3,
                "{}",
                st.size
            );
        }
        assert!(!s[0].rising && s[1].rising);
        // A flat line between the steps: the median |d| is tiny.
        assert!(d_median < 1e-6, "{d_median}");
        let m = marks_from_steps(&s, 0.004, 0.004);
        assert_eq!(m.len(), 2);
        assert!((m[0].1 - m[0].0 - 0.05981).abs() < 4e-5);
    }

    #[test]
    fn bounce_is_bridged_and_ac_coupling_barely_moves_the_steps() {
        let fs = 48_000.0;
        // Key-down at 0.1 s bouncing once (open 2.2 to 4.6 ms after it),
        // key-up at 0.2 s.
        let edges = [0.1, 0.1022, 0.1046, 0.2];
        let x = line(15_000, &edges, 0.0, 0.6, 4.0, fs);
        // AC coupling: one-pole high-pass, time constant 20 ms.
        let a = (-1.0 / (0.02 * fs)).exp();
        let (mut px, mut py) = (0.0f64, 0.0f64);
        let y: Vec<f32> = x
            .iter()
            .map(|&v| {
                py = a * (py + v as f64 - px);
                px = v as f64;
                py as f32
            })
            .collect();
        let mut d = StepDetector::new(48_000, 0.2);
        d.push(&y);
        let s = d.finish();
        let m = marks_from_steps(&s, 0.004, 0.004);
        assert_eq!(m.len(), 1, "{s:?}");
        assert!((m[0].0 - 0.1).abs() < 5e-5, "{m:?}");
        assert!((m[0].1 - 0.2).abs() < 5e-5, "{m:?}");
    }
}
