//! State levels by the histogram method of IEEE Std 181-2011: the amplitude
//! histogram is split at the middle of its range, and the mode of each half
//! is a state level. Bins are logarithmic (0.05 dB) so one histogram spans
//! noise at -150 dBFS and carriers near full scale; each bin also keeps the
//! sum of its amplitudes so a level is the mean of the samples near the mode,
//! not a bin edge.

/// Low and high state levels (linear amplitude).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StateLevels {
    pub low: f64,
    pub high: f64,
}

impl StateLevels {
    /// Reference level at fraction `p` between the states (0.5 = mid reference).
    pub fn at(&self, p: f64) -> f64 {
        self.low + p * (self.high - self.low)
    }
}

const MIN_DB: f64 = -200.0;
const MAX_DB: f64 = 20.0;
const BIN_DB: f64 = 0.05;

/// Cumulative amplitude histogram.
#[derive(Clone, Debug)]
pub struct LevelHistogram {
    counts: Vec<u64>,
    sums: Vec<f64>,
    total: u64,
    /// Lowest bin holding a count (quantile scans start there).
    first: usize,
    /// Highest bin that holds a sample (0 when empty).
    last: usize,
}

impl Default for LevelHistogram {
    fn default() -> Self {
        Self::new()
    }
}

impl LevelHistogram {
    pub fn new() -> LevelHistogram {
        let n = ((MAX_DB - MIN_DB) / BIN_DB) as usize;
        LevelHistogram {
            counts: vec![0; n],
            sums: vec![0.0; n],
            total: 0,
            first: n,
            last: 0,
        }
    }

    pub fn total(&self) -> u64 {
        self.total
    }

    pub fn clear(&mut self) {
        self.counts.iter_mut().for_each(|c| *c = 0);
        self.sums.iter_mut().for_each(|c| *c = 0.0);
        self.total = 0;
        self.first = self.counts.len();
        self.last = 0;
    }

    #[inline]
    pub fn add(&mut self, amplitude: f64) {
        let db = if amplitude > 0.0 {
            // 20 log10(a) through the natural logarithm, which libm computes
            // several times faster than log10 (equal to within an ulp).
            amplitude.ln() * (20.0 / std::f64::consts::LN_10)
        } else {
            MIN_DB
        };
        let i = (((db - MIN_DB) / BIN_DB) as usize).min(self.counts.len() - 1);
        self.counts[i] += 1;
        self.sums[i] += amplitude.max(0.0);
        self.total += 1;
        self.first = self.first.min(i);
        self.last = self.last.max(i);
    }

    fn bin_amp(i: usize) -> f64 {
        10f64.powf((MIN_DB + (i as f64 + 0.5) * BIN_DB) / 20.0)
    }

    /// Lowest bin whose cumulative count reaches `q` of the total. Upper
    /// quantiles are found from the top down, past the few bins above them
    /// instead of the many below.
    fn quantile_bin(&self, q: f64) -> usize {
        let target = (q * self.total as f64).ceil().max(1.0) as u64;
        if target > self.total / 2 && self.total > 0 && self.last >= self.first {
            // cum(i - 1) = total - tail(i); step down while that still
            // reaches the target.
            let mut i = self.last;
            let mut tail = 0;
            while i > self.first {
                let t = tail + self.counts[i];
                if self.total - t >= target {
                    tail = t;
                    i -= 1;
                } else {
                    break;
                }
            }
            return i;
        }
        self.quantile_bin_upward(target)
    }

    fn quantile_bin_upward(&self, target: u64) -> usize {
        let mut acc = 0;
        // Bins below `first` are empty and cannot reach the target.
        for (i, &c) in self.counts.iter().enumerate().skip(self.first) {
            acc += c;
            if acc >= target {
                return i;
            }
        }
        self.counts.len() - 1
    }

    /// Mode of bins `lo..hi` (smoothed over +-0.5 dB), and the mean amplitude
    /// of the samples within +-0.1 dB of it (narrow, so a slow approach to
    /// the plateau, as of an RC edge, does not pull the level down).
    fn mode_level(&self, lo: usize, hi: usize) -> Option<f64> {
        if hi <= lo {
            return None;
        }
        let half = (0.5 / BIN_DB) as usize;
        let mut best = (0u64, lo);
        let mut run: u64 = 0;
        // Sliding window sum over [i-half, i+half] restricted to lo..hi.
        let w_lo = |i: usize| i.saturating_sub(half).max(lo);
        let w_hi = |i: usize| (i + half + 1).min(hi);
        for c in &self.counts[w_lo(lo)..w_hi(lo)] {
            run += c;
        }
        for i in lo..hi {
            if i > lo {
                if i + half < hi {
                    run += self.counts[i + half];
                }
                if i > half && i - half > lo {
                    run -= self.counts[i - half - 1];
                }
            }
            if run > best.0 {
                best = (run, i);
            }
        }
        if best.0 == 0 {
            return None;
        }
        // The wide window finds the region; within it, the peak of a +-0.1 dB
        // window is the mode (a pile-up beside a flat plateau, as an RC edge
        // makes, would otherwise drag the wide window off the plateau).
        let near = (0.1 / BIN_DB) as usize;
        let win = |c: usize| (c.saturating_sub(near).max(lo), (c + near + 1).min(hi));
        let win_sum = |c: usize| -> u64 {
            let (a, b) = win(c);
            self.counts[a..b].iter().sum()
        };
        let mut peak = best.1;
        for c in w_lo(best.1)..w_hi(best.1) {
            if win_sum(c) > win_sum(peak) {
                peak = c;
            }
        }
        let (a, b) = win(peak);
        let n: u64 = self.counts[a..b].iter().sum();
        let s: f64 = self.sums[a..b].iter().sum();
        Some(if n > 0 {
            s / n as f64
        } else {
            Self::bin_amp(best.1)
        })
    }

    /// IEEE 181 state levels; the range's ends are the 0.2 % and 99.8 %
    /// quantiles so single noise spikes do not move the split.
    pub fn levels(&self) -> Option<StateLevels> {
        if self.total < 16 {
            return None;
        }
        let qlo = self.quantile_bin(0.002);
        let qhi = self.quantile_bin(0.998);
        let mid = 0.5 * (Self::bin_amp(qlo) + Self::bin_amp(qhi));
        let mid_db = 20.0 * mid.max(1e-10).log10();
        let split = (((mid_db - MIN_DB) / BIN_DB).max(0.0) as usize).min(self.counts.len());
        let low = self.mode_level(qlo.min(split), split)?;
        let high = self.mode_level(split, (qhi + 1).max(split))?;
        Some(StateLevels { low, high })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn downward_quantile_equals_the_upward_scan() {
        // Slow obvious reference: the cumulative scan from the lowest bin,
        // on histograms of varied shape (pseudo-random amplitudes over
        // 120 dB, some in one bin), at the quantiles the levels use and more.
        let mut seed = 7u64;
        for trial in 0..40 {
            let mut h = LevelHistogram::new();
            let n = 16 + trial * 37;
            for _ in 0..n {
                seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
                let u = (seed >> 11) as f64 / (1u64 << 53) as f64;
                let a = if trial % 5 == 0 {
                    0.25
                } else {
                    10f64.powf(-6.0 * u)
                };
                h.add(a);
            }
            for q in [0.002, 0.1, 0.5, 0.51, 0.9, 0.998, 1.0] {
                let t = (q * h.total as f64).ceil().max(1.0) as u64;
                assert_eq!(
                    h.quantile_bin(q),
                    h.quantile_bin_upward(t),
                    "trial {trial} q {q}"
                );
            }
        }
    }

    #[test]
    fn two_state_waveform_gives_its_levels() {
        // A two-level waveform with transitions: IEEE 181 levels are the plateaus.
        let mut h = LevelHistogram::new();
        for i in 0..10_000 {
            let v = match i % 100 {
                0..=39 => 0.8,
                40..=44 => 0.8 - 0.15 * (i % 100 - 39) as f64,
                45..=94 => 0.02,
                _ => 0.02 + 0.15 * (i % 100 - 94) as f64,
            };
            h.add(v);
        }
        let l = h.levels().unwrap();
        assert!((l.high - 0.8).abs() < 0.8 * 0.003, "{l:?}");
        assert!((l.low - 0.02).abs() < 0.02 * 0.003, "{l:?}");
        assert!((l.at(0.5) - 0.41).abs() < 0.01);
    }
}
