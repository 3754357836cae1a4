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
/// Bins per block of the coarse counts that let the mode search skip
/// stretches that cannot hold the mode.
const BLOCK: usize = 32;

/// Number of bins.
fn bin_count() -> usize {
    ((MAX_DB - MIN_DB) / BIN_DB) as usize
}

/// Bins a mode's peak search reads: the +-0.5 dB window and +-0.1 dB
/// either side.
const PEAK_SPAN: usize = 2 * 10 + 1 + 2 * 2;

/// At least the number of blocks (checked in `LevelHistogram::new`).
const MAX_BLOCKS: usize = 160;

/// The defining bin of an amplitude: 0.05 dB steps of 20 log10(a) from
/// `MIN_DB`, clamped to the histogram. 20 log10 goes through the natural
/// logarithm, which libm computes several times faster than log10 (equal to
/// within an ulp). `BinTable` reproduces it without a logarithm per sample.
fn bin_by_log(amplitude: f64, n: usize) -> usize {
    let db = if amplitude > 0.0 {
        amplitude.ln() * (20.0 / std::f64::consts::LN_10)
    } else {
        MIN_DB
    };
    (((db - MIN_DB) / BIN_DB) as usize).min(n - 1)
}

/// Bits of an f64's pattern below the cell key: 8 mantissa bits stay, so a
/// cell spans at most 2^(1/256), 0.034 dB, less than a bin, and holds at
/// most one bin edge.
const CELL_SHIFT: u32 = 52 - 8;

/// `bin_by_log` without the logarithm: the top bits of the amplitude's bit
/// pattern (monotone in a positive f64) pick a cell, the cell gives the bin
/// of its smallest value, and one comparison with the next bin's first
/// amplitude settles which side of that edge the amplitude lies. The edges
/// are found from `bin_by_log` itself, so the bins are identical wherever
/// `bin_by_log` is monotone (tested across every edge).
#[derive(Debug)]
struct BinTable {
    /// edges[i]: smallest amplitude with `bin_by_log` >= i (edges[0] = 0,
    /// edges[n] = infinity).
    edges: Vec<f64>,
    /// Bin of each cell's smallest value, for keys `key_lo..key_hi`.
    cells: Vec<u16>,
    key_lo: u64,
    key_hi: u64,
    n: usize,
}

impl BinTable {
    fn new() -> BinTable {
        let n = bin_count();
        let f = |a: f64| bin_by_log(a, n);
        // 2^-40 is -241 dB, below MIN_DB; 2^4 is +24 dB, above MAX_DB.
        let key_lo = 2f64.powi(-40).to_bits() >> CELL_SHIFT;
        let key_hi = 16f64.to_bits() >> CELL_SHIFT;
        assert!(f(2f64.powi(-40)) == 0 && f(16.0) == n - 1);
        let mut edges = vec![0.0; n + 1];
        edges[n] = f64::INFINITY;
        for (i, e) in edges.iter_mut().enumerate().take(n).skip(1) {
            // The nominal edge, then a bisection on the bit pattern between
            // values either side of it (widened until they are).
            let guess = 10f64.powf((MIN_DB + i as f64 * BIN_DB) / 20.0).to_bits();
            let mut span = 64u64;
            let (mut lo, mut hi) = loop {
                let (lo, hi) = (guess - span, guess + span);
                if f(f64::from_bits(lo)) < i && f(f64::from_bits(hi)) >= i {
                    break (lo, hi);
                }
                span *= 4;
            };
            // Invariant: f(lo) < i <= f(hi).
            while hi - lo > 1 {
                let mid = lo + (hi - lo) / 2;
                if f(f64::from_bits(mid)) >= i {
                    hi = mid;
                } else {
                    lo = mid;
                }
            }
            *e = f64::from_bits(hi);
        }
        // A cell's bin: the number of edges at or below its smallest value.
        let mut cells = Vec::with_capacity((key_hi - key_lo) as usize);
        let mut b = 0usize;
        for key in key_lo..key_hi {
            let a = f64::from_bits(key << CELL_SHIFT);
            while b + 1 < n && edges[b + 1] <= a {
                b += 1;
            }
            cells.push(b as u16);
        }
        BinTable {
            edges,
            cells,
            key_lo,
            key_hi,
            n,
        }
    }

    /// The fields a bin lookup reads, as values: a loop that copies them out
    /// keeps them at hand instead of reloading them after every store.
    #[inline]
    fn view(&self) -> BinView<'_> {
        debug_assert_eq!(self.cells.len() as u64, self.key_hi - self.key_lo);
        BinView {
            cells: &self.cells,
            edges: &self.edges,
            key_lo: self.key_lo,
            // key_hi - key_lo by construction; as the slice's length, the
            // range test also proves the cell index in bounds.
            span: self.cells.len() as u64,
            top: self.n - 1,
        }
    }
}

#[derive(Clone, Copy)]
struct BinView<'a> {
    cells: &'a [u16],
    edges: &'a [f64],
    key_lo: u64,
    span: u64,
    top: usize,
}

impl BinView<'_> {
    /// An amplitude whose key is one of the cells' is positive and finite
    /// (a negative amplitude's or a NaN's key lies above them, zero's below),
    /// so that case takes one range test; the rest go to `outside`. (The
    /// histogram takes `bin_weight`; tests check both.)
    #[cfg(test)]
    fn bin(&self, amplitude: f64) -> usize {
        let d = (amplitude.to_bits() >> CELL_SHIFT).wrapping_sub(self.key_lo);
        if d < self.span {
            let i = self.cells[d as usize] as usize;
            i + (amplitude >= self.edges[i + 1]) as usize
        } else {
            self.outside(amplitude)
        }
    }

    /// `bin`, and the amplitude the bin's sum takes, `amplitude.max(0.0)`:
    /// an amplitude found in the cells is positive and finite, so there it
    /// is the amplitude itself.
    #[inline]
    fn bin_weight(&self, amplitude: f64) -> (usize, f64) {
        let d = (amplitude.to_bits() >> CELL_SHIFT).wrapping_sub(self.key_lo);
        if d < self.span {
            let i = self.cells[d as usize] as usize;
            (i + (amplitude >= self.edges[i + 1]) as usize, amplitude)
        } else {
            (self.outside(amplitude), amplitude.max(0.0))
        }
    }

    #[inline(never)]
    fn outside(&self, amplitude: f64) -> usize {
        // Zero, negative and NaN amplitudes go to bin 0, as in `bin_by_log`.
        if amplitude.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
            return 0;
        }
        let key = amplitude.to_bits() >> CELL_SHIFT;
        if key < self.key_lo {
            0
        } else {
            self.top
        }
    }
}

fn bin_table() -> &'static BinTable {
    static TABLE: std::sync::OnceLock<BinTable> = std::sync::OnceLock::new();
    TABLE.get_or_init(BinTable::new)
}

/// Cumulative amplitude histogram.
#[derive(Clone, Debug)]
pub struct LevelHistogram {
    counts: Vec<u64>,
    sums: Vec<f64>,
    /// Counts summed over `BLOCK` bins.
    blocks: Vec<u64>,
    table: &'static BinTable,
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
        let n = bin_count();
        assert!(n.div_ceil(BLOCK) <= MAX_BLOCKS);
        assert_eq!(
            PEAK_SPAN,
            2 * (0.5 / BIN_DB) as usize + 1 + 2 * (0.1 / BIN_DB) as usize
        );
        LevelHistogram {
            counts: vec![0; n],
            sums: vec![0.0; n],
            blocks: vec![0; n.div_ceil(BLOCK)],
            table: bin_table(),
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
        self.blocks.iter_mut().for_each(|c| *c = 0);
        self.total = 0;
        self.first = self.counts.len();
        self.last = 0;
    }

    /// Adds many amplitudes (as `add` one by one). The block counts are
    /// summed afresh over the blocks the slice touched, after it: counted per
    /// sample they were a chain of increments of one memory cell (successive
    /// amplitudes nearly always share a block). A run of amplitudes in one
    /// bin is counted and summed in registers and stored when the bin
    /// changes: per sample, the bin's count and sum were chains through
    /// memory. The sum still takes the run's amplitudes one by one, in
    /// order, so it is the same number to the last bit.
    pub fn add_slice(&mut self, amplitudes: &[f64]) {
        let Some((&first, rest)) = amplitudes.split_first() else {
            return;
        };
        let table = self.table.view();
        // One length for both, so one bounds test covers both.
        let n = self.counts.len().min(self.sums.len());
        let (counts, sums) = (&mut self.counts[..n], &mut self.sums[..n]);
        let (mut cur, w) = table.bin_weight(first);
        let (mut lo, mut hi) = (cur, cur);
        let (mut count, mut sum) = (counts[cur] + 1, sums[cur] + w);
        for &a in rest {
            let (i, w) = table.bin_weight(a);
            if i != cur {
                (counts[cur], sums[cur]) = (count, sum);
                (count, sum) = (counts[i], sums[i]);
                cur = i;
                lo = lo.min(i);
                hi = hi.max(i);
            }
            count += 1;
            sum += w;
        }
        (counts[cur], sums[cur]) = (count, sum);
        for (b, block) in self.blocks[lo / BLOCK..=hi / BLOCK].iter_mut().enumerate() {
            let start = (lo / BLOCK + b) * BLOCK;
            let end = (start + BLOCK).min(counts.len());
            *block = counts[start..end].iter().sum();
        }
        self.total += amplitudes.len() as u64;
        (self.first, self.last) = (self.first.min(lo), self.last.max(hi));
    }

    #[inline]
    pub fn add(&mut self, amplitude: f64) {
        self.add_slice(std::slice::from_ref(&amplitude));
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
        // Whole blocks that leave the cumulative count short of the target
        // cannot hold the quantile; bins below `first` are empty.
        let mut acc = 0;
        let mut b = self.first / BLOCK;
        while b < self.blocks.len() && acc + self.blocks[b] < target {
            acc += self.blocks[b];
            b += 1;
        }
        for (i, &c) in self.counts.iter().enumerate().skip(b * BLOCK) {
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
        let best = self.mode_best(lo, hi);
        if best.0 == 0 {
            return None;
        }
        let half = (0.5 / BIN_DB) as usize;
        let w_lo = |i: usize| i.saturating_sub(half).max(lo);
        let w_hi = |i: usize| (i + half + 1).min(hi);
        // The wide window finds the region; within it, the peak of a +-0.1 dB
        // window is the mode (a pile-up beside a flat plateau, as an RC edge
        // makes, would otherwise drag the wide window off the plateau).
        let near = (0.1 / BIN_DB) as usize;
        let win = |c: usize| (c.saturating_sub(near).max(lo), (c + near + 1).min(hi));
        // Every narrow window of the wide one's bins lies in base..top:
        // their sums as differences of cumulative counts (exact integers).
        let (c0, c1) = (w_lo(best.1), w_hi(best.1));
        let (base, top) = (win(c0).0, win(c1 - 1).1);
        let mut cum = [0u64; PEAK_SPAN + 1];
        for (k, &c) in self.counts[base..top].iter().enumerate() {
            cum[k + 1] = cum[k] + c;
        }
        let win_sum = |c: usize| -> u64 {
            let (a, b) = win(c);
            cum[b - base] - cum[a - base]
        };
        let (mut peak, mut peak_sum) = (best.1, win_sum(best.1));
        for c in c0..c1 {
            let s = win_sum(c);
            if s > peak_sum {
                (peak, peak_sum) = (c, s);
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

    /// Largest +-0.5 dB window sum in lo..hi (restricted to lo..hi) and its
    /// first bin; (0, lo) when lo..hi is empty of counts.
    fn mode_best(&self, lo: usize, hi: usize) -> (u64, usize) {
        let half = (0.5 / BIN_DB) as usize;
        // Sliding window sum over [i-half, i+half] restricted to lo..hi; the
        // first bin with the largest sum wins. Bins go a block at a time. A
        // block's windows lie within it and its neighbours, whose coarse
        // counts bound their sums: the block with the largest bound is
        // searched first, and then only blocks whose bound could beat (or,
        // before the best bin, tie) the best sum so far.
        let w_lo = |i: usize| i.saturating_sub(half).max(lo);
        let w_hi = |i: usize| (i + half + 1).min(hi);
        let last_block = self.blocks.len() - 1;
        let bound = |b: usize| -> u64 {
            let (i, end) = ((b * BLOCK).max(lo), ((b + 1) * BLOCK).min(hi));
            let (b0, b1) = (
                i.saturating_sub(half) / BLOCK,
                ((end - 1 + half) / BLOCK).min(last_block),
            );
            self.blocks[b0..=b1].iter().sum()
        };
        let counts = &self.counts[..hi];
        let search = |b: usize, best: &mut (u64, usize)| {
            let (i, end) = ((b * BLOCK).max(lo), ((b + 1) * BLOCK).min(hi));
            let mut run: u64 = counts[w_lo(i)..w_hi(i)].iter().sum();
            if run > best.0 || (run == best.0 && i < best.1) {
                *best = (run, i);
            }
            // Where the window lies wholly inside lo..hi, it gains a bin and
            // loses one at every step, without the range checks.
            let (m0, m1) = (
                (lo + half + 1).clamp(i + 1, end),
                hi.saturating_sub(half).clamp(i + 1, end),
            );
            let step = |j: usize, run: &mut u64, best: &mut (u64, usize)| {
                if j + half < hi {
                    *run += counts[j + half];
                }
                if j > lo + half {
                    *run -= counts[j - half - 1];
                }
                if *run > best.0 || (*run == best.0 && j < best.1) {
                    *best = (*run, j);
                }
            };
            if m0 < m1 {
                for j in i + 1..m0 {
                    step(j, &mut run, best);
                }
                let (gain, loss) = (
                    &counts[m0 + half..m1 + half],
                    &counts[m0 - half - 1..m1 - half - 1],
                );
                for (j, (g, l)) in (m0..m1).zip(gain.iter().zip(loss)) {
                    run = run + g - l;
                    if run > best.0 || (run == best.0 && j < best.1) {
                        *best = (run, j);
                    }
                }
                for j in m1..end {
                    step(j, &mut run, best);
                }
            } else {
                for j in i + 1..end {
                    step(j, &mut run, best);
                }
            }
        };
        let (first, last) = (lo / BLOCK, (hi - 1) / BLOCK);
        // The bounds, each worked out once (both passes read them).
        let mut bounds = [0u64; MAX_BLOCKS];
        let bounds = &mut bounds[..=last - first];
        for (u, b) in bounds.iter_mut().zip(first..=last) {
            *u = bound(b);
        }
        let top = (first..=last)
            .rev()
            .max_by_key(|&b| bounds[b - first])
            .unwrap_or(first);
        // A zero sum at lo, which later bins tie but do not beat.
        let mut best = (0u64, lo);
        search(top, &mut best);
        for b in first..=last {
            if b == top {
                continue;
            }
            let u = bounds[b - first];
            if u > best.0 || (u == best.0 && (b * BLOCK).max(lo) < best.1) {
                search(b, &mut best);
            }
        }
        best
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

    /// Pseudo-random amplitudes spread over `decades` decades below `top`.
    fn amplitudes(seed: &mut u64, count: usize, top: f64, decades: f64) -> Vec<f64> {
        (0..count)
            .map(|_| {
                *seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
                let u = (*seed >> 11) as f64 / (1u64 << 53) as f64;
                top * 10f64.powf(-decades * u)
            })
            .collect()
    }

    /// `add_slice` as first written, one amplitude at a time; test oracle.
    fn add_slice_reference(h: &mut LevelHistogram, amplitudes: &[f64]) {
        for &a in amplitudes {
            let i = h.table.view().bin(a);
            h.counts[i] += 1;
            h.blocks[i / BLOCK] += 1;
            h.sums[i] += a.max(0.0);
            h.first = h.first.min(i);
            h.last = h.last.max(i);
        }
        h.total += amplitudes.len() as u64;
    }

    #[test]
    fn block_counts_after_the_slice_equal_one_at_a_time() {
        // Plateaus, noise spread over many blocks, the histogram's first and
        // last bins, zeros, negatives and NaN, in slices of varied length.
        let mut seed = 3u64;
        let mut u = || {
            seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut amps = Vec::new();
        for k in 0..4000 {
            let a = match (k / 500) % 4 {
                0 => 0.3 * (1.0 + 0.001 * u()),
                1 => 1e-3 * u(),
                2 => [0.0, -1.0, f64::NAN, 0.5, 1e-30, 1e30][k % 6],
                _ => 0.3 * (1.0 + 0.05 * u()),
            };
            amps.push(a);
        }
        let (mut fast, mut slow) = (LevelHistogram::new(), LevelHistogram::new());
        let mut k = 0;
        for len in [0, 1, 2, 7, 600, 1].iter().cycle() {
            if k >= amps.len() {
                break;
            }
            let e = (k + len).min(amps.len());
            fast.add_slice(&amps[k..e]);
            add_slice_reference(&mut slow, &amps[k..e]);
            assert_eq!(fast.blocks, slow.blocks);
            k = e;
        }
        assert_eq!(fast.counts, slow.counts);
        assert_eq!(
            fast.sums.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            slow.sums.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
        assert_eq!(
            (fast.total, fast.first, fast.last),
            (slow.total, slow.first, slow.last)
        );
        assert_eq!(fast.levels(), slow.levels());
    }

    #[test]
    fn table_bins_equal_the_logarithm_bins() {
        // Reference: `bin_by_log`, the formula the histogram has always used.
        // Every bin edge is checked from 40 ulps below to 40 above, every
        // cell's first and last value, and random amplitudes over 300 dB.
        let t = bin_table();
        let n = t.n;
        let check = |a: f64| {
            assert_eq!(t.view().bin(a), bin_by_log(a, n), "amplitude {a:e}");
            let (i, w) = t.view().bin_weight(a);
            assert_eq!(
                (i, w.to_bits()),
                (bin_by_log(a, n), a.max(0.0).to_bits()),
                "amplitude {a:e}"
            );
        };
        for &e in &t.edges[1..n] {
            let b = e.to_bits();
            for k in b - 40..=b + 40 {
                check(f64::from_bits(k));
            }
        }
        for key in t.key_lo..t.key_hi {
            check(f64::from_bits(key << CELL_SHIFT));
            check(f64::from_bits(((key + 1) << CELL_SHIFT) - 1));
        }
        let mut seed = 11u64;
        for a in amplitudes(&mut seed, 200_000, 1e5, 30.0) {
            check(a);
        }
        for a in [
            0.0,
            -0.0,
            -1.0,
            f64::NAN,
            f64::INFINITY,
            f64::MIN_POSITIVE,
            1e-310,
            f64::MAX,
            1e-10,
            1.0,
            10.0,
        ] {
            check(a);
        }
    }

    /// The mode search as first written: one sliding window over every bin
    /// of lo..hi (oracle for the block-skipping search).
    fn mode_bin_scan(h: &LevelHistogram, lo: usize, hi: usize) -> (u64, usize) {
        let half = (0.5 / BIN_DB) as usize;
        let mut best = (0u64, lo);
        let mut run: u64 = 0;
        let w_lo = |i: usize| i.saturating_sub(half).max(lo);
        let w_hi = |i: usize| (i + half + 1).min(hi);
        for c in &h.counts[w_lo(lo)..w_hi(lo)] {
            run += c;
        }
        for i in lo..hi {
            if i > lo {
                if i + half < hi {
                    run += h.counts[i + half];
                }
                if i > half && i - half > lo {
                    run -= h.counts[i - half - 1];
                }
            }
            if run > best.0 {
                best = (run, i);
            }
        }
        best
    }

    #[test]
    fn block_skipping_mode_equals_the_full_scan() {
        // Two-state mixtures (noise around a low level, a plateau, sparse
        // transitions), plus flat and single-bin histograms; every range
        // end near and away from block boundaries.
        let mut seed = 5u64;
        for trial in 0..30 {
            let mut h = LevelHistogram::new();
            let low = 1e-4 * (1.0 + trial as f64);
            for a in amplitudes(&mut seed, 3000 + 500 * trial, low, 0.5) {
                h.add(a);
            }
            for a in amplitudes(&mut seed, 2000, 0.3, 0.02 * (1 + trial % 3) as f64) {
                h.add(a);
            }
            for a in amplitudes(&mut seed, 100 * (trial % 4), 0.3, 4.0) {
                h.add(a);
            }
            if trial % 7 == 0 {
                h.clear();
                for _ in 0..50 {
                    h.add(0.01);
                }
            }
            let n = h.counts.len();
            let (f, l) = (h.first.min(n - 1), h.last);
            let ends = [
                0,
                f.saturating_sub(3),
                f,
                f + 31,
                f + 64,
                l / 2,
                l,
                l + 1,
                l + 40,
                n,
            ];
            for &lo in &ends {
                for &hi in &ends {
                    if lo < hi && hi <= n {
                        // The level follows from this bin alone.
                        assert_eq!(
                            h.mode_best(lo, hi),
                            mode_bin_scan(&h, lo, hi),
                            "trial {trial} {lo}..{hi}"
                        );
                    }
                }
            }
        }
    }

    /// `mode_level` as first written: each narrow window summed afresh,
    /// the peak's again at every comparison (test oracle).
    fn mode_level_reference(h: &LevelHistogram, lo: usize, hi: usize) -> Option<f64> {
        if hi <= lo {
            return None;
        }
        let best = h.mode_best(lo, hi);
        if best.0 == 0 {
            return None;
        }
        let half = (0.5 / BIN_DB) as usize;
        let w_lo = |i: usize| i.saturating_sub(half).max(lo);
        let w_hi = |i: usize| (i + half + 1).min(hi);
        let near = (0.1 / BIN_DB) as usize;
        let win = |c: usize| (c.saturating_sub(near).max(lo), (c + near + 1).min(hi));
        let win_sum = |c: usize| -> u64 {
            let (a, b) = win(c);
            h.counts[a..b].iter().sum()
        };
        let mut peak = best.1;
        for c in w_lo(best.1)..w_hi(best.1) {
            if win_sum(c) > win_sum(peak) {
                peak = c;
            }
        }
        let (a, b) = win(peak);
        let n: u64 = h.counts[a..b].iter().sum();
        let s: f64 = h.sums[a..b].iter().sum();
        Some(if n > 0 {
            s / n as f64
        } else {
            LevelHistogram::bin_amp(best.1)
        })
    }

    #[test]
    fn mode_level_equals_the_reference() {
        // Same integer window sums and the same final sums, so the same
        // level to the bit: two-state mixtures, plateaus one bin wide, and
        // ranges whose ends cut the +-0.5 dB window (lo and hi near the mode).
        let mut seed = 13u64;
        let mut checked = 0;
        for trial in 0..25 {
            let mut h = LevelHistogram::new();
            let low = 2e-4 * (1.0 + trial as f64);
            h.add_slice(&amplitudes(&mut seed, 2000 + 300 * trial, low, 0.6));
            let width = [0.0, 0.001, 0.02, 0.1][trial % 4];
            h.add_slice(&amplitudes(&mut seed, 1500, 0.25, width));
            h.add_slice(&amplitudes(&mut seed, 50 * (trial % 5), 0.25, 3.0));
            let n = h.counts.len();
            let (f, l) = (h.first.min(n - 1), h.last);
            let mut ends = vec![0, f, f + 5, (f + l) / 2, l, l + 1, n];
            let hb = h.mode_best(0, n).1;
            ends.extend([
                hb.saturating_sub(11),
                hb.saturating_sub(3),
                hb,
                hb + 1,
                hb + 4,
                hb + 12,
            ]);
            for &lo in &ends {
                for &hi in &ends {
                    if hi > n {
                        continue;
                    }
                    let (fast, slow) = (h.mode_level(lo, hi), mode_level_reference(&h, lo, hi));
                    assert_eq!(
                        fast.map(f64::to_bits),
                        slow.map(f64::to_bits),
                        "trial {trial} {lo}..{hi}"
                    );
                    checked += fast.is_some() as usize;
                }
            }
            // The high level is the mean of the samples within +-0.1 dB of
            // the mode's bin (0.05 dB wide) on the plateau, which spans
            // 0.25 * 10^-width ..= 0.25; none lie above 0.25.
            let l = h.levels().unwrap();
            let floor = 0.25 * 10f64.powf(-width - 0.15 / 20.0);
            assert!(
                l.high <= 0.25 * (1.0 + 1e-12) && l.high >= floor * (1.0 - 1e-12),
                "{trial}: {l:?}"
            );
        }
        assert!(checked > 500, "{checked}");
    }

    #[test]
    fn quantiles_equal_the_cumulative_scan() {
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
            // The plain cumulative scan from bin 0.
            let scan = |t: u64| {
                let mut acc = 0;
                for (i, &c) in h.counts.iter().enumerate() {
                    acc += c;
                    if acc >= t {
                        return i;
                    }
                }
                h.counts.len() - 1
            };
            for q in [0.002, 0.1, 0.5, 0.51, 0.9, 0.998, 1.0] {
                let t = (q * h.total as f64).ceil().max(1.0) as u64;
                assert_eq!(h.quantile_bin(q), scan(t), "trial {trial} q {q}");
                assert_eq!(h.quantile_bin_upward(t), scan(t), "trial {trial} q {q}");
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
