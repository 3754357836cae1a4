//! Forward real FFT, bit for bit the same as `realfft` 3.5's
//! `RealToComplexEven::process_with_scratch`, with its post-processing
//! vectorized.
//!
//! Why it exists: `realfft` packs N real samples into N/2 complex ones, runs
//! a complex FFT of length N/2 (rustfft, already vectorized), then un-packs
//! the half-length spectrum into bins 0..=N/2 with one twiddle per bin pair,
//! k and N/2 − k. That un-packing is scalar and cost about twice the inner
//! FFT over a whole-file analysis. Here the same inner FFT (same planner,
//! same length) is followed by the same float operations in the same order
//! per bin pair, eight pairs at a time with AVX when the CPU has it (plain
//! multiplies and adds, no fused multiply-add, as `realfft`'s compiled code
//! has none), so every output bin is the identical `f32`. Without AVX the
//! un-packing is `realfft`'s loop as written.
//!
//! The input is taken as a slice (not destroyed), optionally times a window,
//! and packed straight into the inner FFT's complex buffer, which also saves
//! the callers' copy into a scratch input. Odd lengths (not used in the hot
//! path) go to `realfft` itself.

use std::sync::Arc;

use realfft::{RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};

/// Bin pairs per AVX block.
const BLOCK: usize = 8;

/// A planned forward real FFT of one length, with its own buffers.
pub struct RealFft {
    n: usize,
    kind: Kind,
}

enum Kind {
    /// Even length: packed complex FFT of length n/2 and the un-packing.
    Even {
        fft: Arc<dyn Fft<f32>>,
        /// `realfft`'s twiddles: e^(-2πi k/n) / 2 for k = 1..=pairs.
        twiddles: Vec<Complex32>,
        /// The twiddles of whole AVX blocks, real and imaginary parts apart,
        /// in the lane order of `unpack_avx`'s de-interleaved registers.
        tw_re: Vec<f32>,
        tw_im: Vec<f32>,
        packed: Vec<Complex32>,
        scratch: Vec<Complex32>,
        avx: bool,
    },
    /// Odd (or zero) length: `realfft` as it is.
    Other {
        fft: Arc<dyn RealToComplex<f32>>,
        input: Vec<f32>,
        scratch: Vec<Complex32>,
    },
}

/// `realfft`'s `compute_twiddle(index, fft_len)`, times one half.
fn twiddle(index: usize, fft_len: usize) -> Complex32 {
    let constant = -2f64 * std::f64::consts::PI / fft_len as f64;
    let angle = constant * index as f64;
    Complex32::new(angle.cos() as f32, angle.sin() as f32) * 0.5f32
}

/// Lane order of one de-interleaved AVX block: `_mm256_shuffle_ps` of two
/// registers of four complex values works per 128-bit half, so the pairs of
/// a block sit in the lanes in this order.
const LANE_PAIR: [usize; BLOCK] = [0, 1, 4, 5, 2, 3, 6, 7];

impl RealFft {
    /// A forward real FFT of length `n`.
    pub fn new(n: usize) -> RealFft {
        if n == 0 || n % 2 == 1 {
            let fft = RealFftPlanner::<f32>::new().plan_fft_forward(n);
            return RealFft {
                n,
                kind: Kind::Other {
                    input: fft.make_input_vec(),
                    scratch: fft.make_scratch_vec(),
                    fft,
                },
            };
        }
        let h = n / 2;
        let pairs = (h - 1) / 2;
        let twiddles: Vec<Complex32> = (1..=pairs).map(|k| twiddle(k, n)).collect();
        let whole = pairs - pairs % BLOCK;
        let lanes = |f: fn(&Complex32) -> f32| -> Vec<f32> {
            twiddles[..whole]
                .chunks_exact(BLOCK)
                .flat_map(|b| LANE_PAIR.iter().map(move |&p| f(&b[p])))
                .collect()
        };
        let (tw_re, tw_im) = (lanes(|t| t.re), lanes(|t| t.im));
        // The same planner type `realfft` builds its inner FFT with.
        let fft = FftPlanner::<f32>::new().plan_fft_forward(h);
        let scratch = vec![Complex32::new(0.0, 0.0); fft.get_outofplace_scratch_len()];
        RealFft {
            n,
            kind: Kind::Even {
                fft,
                twiddles,
                tw_re,
                tw_im,
                packed: vec![Complex32::new(0.0, 0.0); h],
                scratch,
                avx: has_avx(),
            },
        }
    }

    /// Input length.
    pub fn len(&self) -> usize {
        self.n
    }

    /// Whether the input length is zero.
    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    /// Output length, n/2 + 1.
    pub fn complex_len(&self) -> usize {
        self.n / 2 + 1
    }

    /// A zeroed output buffer.
    pub fn make_output_vec(&self) -> Vec<Complex32> {
        vec![Complex32::new(0.0, 0.0); self.complex_len()]
    }

    /// Spectrum of `x` (length n) into `out` (length n/2 + 1).
    pub fn process(&mut self, x: &[f32], out: &mut [Complex32]) {
        self.run(x, None, out);
    }

    /// Spectrum of `x` times the window `w` (both length n) into `out`
    /// (length n/2 + 1): the input of the transform is `x[i] * w[i]`.
    pub fn process_windowed(&mut self, x: &[f32], w: &[f32], out: &mut [Complex32]) {
        assert_eq!(w.len(), self.n, "window length");
        self.run(x, Some(w), out);
    }

    /// Packs `x` (times `w`, if given) in pairs of real samples into
    /// complex ones, transforms and un-packs.
    fn run(&mut self, x: &[f32], w: Option<&[f32]>, out: &mut [Complex32]) {
        assert_eq!(x.len(), self.n, "input length");
        assert_eq!(out.len(), self.complex_len(), "output length");
        match &mut self.kind {
            Kind::Other {
                fft,
                input,
                scratch,
            } => {
                match w {
                    Some(w) => {
                        for ((i, v), g) in input.iter_mut().zip(x).zip(w) {
                            *i = v * g;
                        }
                    }
                    None => input.copy_from_slice(x),
                }
                fft.process_with_scratch(input, out, scratch)
                    .expect("buffer sizes come from the plan");
            }
            Kind::Even {
                fft,
                twiddles,
                tw_re,
                tw_im,
                packed,
                scratch,
                avx,
            } => {
                match w {
                    Some(w) => {
                        for ((c, v), g) in packed
                            .iter_mut()
                            .zip(x.chunks_exact(2))
                            .zip(w.chunks_exact(2))
                        {
                            *c = Complex32::new(v[0] * g[0], v[1] * g[1]);
                        }
                    }
                    None => {
                        for (c, v) in packed.iter_mut().zip(x.chunks_exact(2)) {
                            *c = Complex32::new(v[0], v[1]);
                        }
                    }
                }
                let h = self.n / 2;
                fft.process_outofplace_with_scratch(packed, &mut out[..h], scratch);
                if *avx {
                    unpack_avx_dispatch(out, twiddles, tw_re, tw_im);
                } else {
                    unpack_scalar(out, twiddles);
                }
            }
        }
    }
}

fn has_avx() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// One bin pair of `realfft`'s un-packing, its operations in its order:
/// `out` is bin k, `out_rev` bin n/2 − k, `tw` the halved twiddle of k.
#[inline(always)]
fn unpack_pair(tw: Complex32, out: &mut Complex32, out_rev: &mut Complex32) {
    let sum = *out + *out_rev;
    let diff = *out - *out_rev;
    let half = 0.5f32;
    let twiddled_re_sum = sum * tw.re;
    let twiddled_im_sum = sum * tw.im;
    let twiddled_re_diff = diff * tw.re;
    let twiddled_im_diff = diff * tw.im;
    let half_sum_re = half * sum.re;
    let half_diff_im = half * diff.im;

    let output_twiddled_real = twiddled_re_sum.im + twiddled_im_diff.re;
    let output_twiddled_im = twiddled_im_sum.im - twiddled_re_diff.re;

    *out = Complex32::new(
        half_sum_re + output_twiddled_real,
        half_diff_im + output_twiddled_im,
    );
    *out_rev = Complex32::new(
        half_sum_re - output_twiddled_real,
        output_twiddled_im - half_diff_im,
    );
}

/// Bins 0 and n/2 from the packed DC value, and the centre bin's sign: the
/// parts of the un-packing outside the pair loop.
#[inline(always)]
fn unpack_ends(out: &mut [Complex32]) {
    let h = out.len() - 1;
    let first = out[0];
    out[0] = Complex32::new(first.re + first.im, 0.0);
    out[h] = Complex32::new(first.re - first.im, 0.0);
    if out.len() % 2 == 1 {
        let c = &mut out[h / 2];
        c.im = -c.im;
    }
}

/// Bin pairs `from..` of the un-packing, one pair at a time. `left[i]` is
/// bin 1 + i and `right[pairs - 1 - i]` bin n/2 − 1 − i.
#[inline(always)]
fn unpack_pairs(
    left: &mut [Complex32],
    right: &mut [Complex32],
    twiddles: &[Complex32],
    from: usize,
) {
    let pairs = twiddles.len();
    for i in from..pairs {
        unpack_pair(twiddles[i], &mut left[i], &mut right[pairs - 1 - i]);
    }
}

/// Splits the output (n/2 + 1 bins) into the pairs' left and right bins.
fn split_pairs(out: &mut [Complex32], pairs: usize) -> (&mut [Complex32], &mut [Complex32]) {
    let h = out.len() - 1;
    let (lo, hi) = out.split_at_mut(h - pairs);
    (&mut lo[1..1 + pairs], &mut hi[..pairs])
}

/// `realfft`'s un-packing as written, for CPUs without AVX (and the tests).
fn unpack_scalar(out: &mut [Complex32], twiddles: &[Complex32]) {
    unpack_ends(out);
    let (left, right) = split_pairs(out, twiddles.len());
    unpack_pairs(left, right, twiddles, 0);
}

fn unpack_avx_dispatch(
    out: &mut [Complex32],
    twiddles: &[Complex32],
    tw_re: &[f32],
    tw_im: &[f32],
) {
    #[cfg(target_arch = "x86_64")]
    {
        // SAFETY: `avx` was set from `is_x86_feature_detected!("avx")`.
        unsafe { unpack_avx(out, twiddles, tw_re, tw_im) }
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        let _ = (tw_re, tw_im);
        unpack_scalar(out, twiddles)
    }
}

/// The un-packing eight bin pairs at a time: the left bins k..k+8 and the
/// right bins n/2−k−7..=n/2−k are loaded, split into real and imaginary
/// registers (the right ones reversed so lane j of both holds one pair),
/// put through `unpack_pair`'s operations lane-wise, and stored back. The
/// pairs left over go through `unpack_pair`.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn unpack_avx(out: &mut [Complex32], twiddles: &[Complex32], tw_re: &[f32], tw_im: &[f32]) {
    use std::arch::x86_64::*;

    /// Eight complex values (two slices of four) as real and imaginary
    /// registers, lanes in `LANE_PAIR` order.
    #[inline]
    #[target_feature(enable = "avx")]
    fn load(a: &[Complex32], b: &[Complex32]) -> (__m256, __m256) {
        assert!(a.len() == 4 && b.len() == 4);
        // SAFETY: `Complex32` is `repr(C)` {re, im} of `f32`, so each slice
        // of four is eight contiguous `f32`; the loads are unaligned. AVX is
        // enabled in the caller, which this is inlined into.
        let (va, vb) = unsafe {
            (
                _mm256_loadu_ps(a.as_ptr().cast::<f32>()),
                _mm256_loadu_ps(b.as_ptr().cast::<f32>()),
            )
        };
        (
            _mm256_shuffle_ps::<0x88>(va, vb),
            _mm256_shuffle_ps::<0xDD>(va, vb),
        )
    }
    /// `load`'s inverse: interleaves and stores into the two slices.
    #[inline]
    #[target_feature(enable = "avx")]
    fn store(re: __m256, im: __m256, a: &mut [Complex32], b: &mut [Complex32]) {
        assert!(a.len() == 4 && b.len() == 4);
        let va = _mm256_unpacklo_ps(re, im);
        let vb = _mm256_unpackhi_ps(re, im);
        // SAFETY: as in `load`, each slice is eight contiguous `f32`, here
        // borrowed mutably.
        unsafe {
            _mm256_storeu_ps(a.as_mut_ptr().cast::<f32>(), va);
            _mm256_storeu_ps(b.as_mut_ptr().cast::<f32>(), vb);
        }
    }
    /// Reverses the eight lanes. Under `LANE_PAIR` order, lane j of the
    /// loaded right bins n/2−k−7..=n/2−k holds bin n/2−k−(7−p(j))... so a
    /// full reversal lines each right bin up with its left partner.
    #[inline]
    #[target_feature(enable = "avx")]
    fn reverse(x: __m256) -> __m256 {
        let swapped = _mm256_permute2f128_ps::<0x01>(x, x);
        _mm256_permute_ps::<0x1B>(swapped)
    }

    unpack_ends(out);
    let pairs = twiddles.len();
    let (left, right) = split_pairs(out, pairs);
    let whole = pairs - pairs % BLOCK;
    let half = _mm256_set1_ps(0.5);
    for (b, (twr, twi)) in tw_re
        .chunks_exact(BLOCK)
        .zip(tw_im.chunks_exact(BLOCK))
        .enumerate()
    {
        let i0 = b * BLOCK;
        let l = &mut left[i0..i0 + BLOCK];
        let r = &mut right[pairs - i0 - BLOCK..pairs - i0];
        let (l0, l1) = l.split_at_mut(4);
        let (r0, r1) = r.split_at_mut(4);
        let (a_re, a_im) = load(l0, l1);
        let (b_re, b_im) = load(r0, r1);
        let (b_re, b_im) = (reverse(b_re), reverse(b_im));
        let (t_re, t_im) = {
            assert!(twr.len() == BLOCK && twi.len() == BLOCK);
            // SAFETY: each chunk is eight contiguous `f32`.
            unsafe { (_mm256_loadu_ps(twr.as_ptr()), _mm256_loadu_ps(twi.as_ptr())) }
        };
        let sum_re = _mm256_add_ps(a_re, b_re);
        let sum_im = _mm256_add_ps(a_im, b_im);
        let diff_re = _mm256_sub_ps(a_re, b_re);
        let diff_im = _mm256_sub_ps(a_im, b_im);
        let half_sum_re = _mm256_mul_ps(half, sum_re);
        let half_diff_im = _mm256_mul_ps(half, diff_im);
        let otr = _mm256_add_ps(_mm256_mul_ps(sum_im, t_re), _mm256_mul_ps(diff_re, t_im));
        let oti = _mm256_sub_ps(_mm256_mul_ps(sum_im, t_im), _mm256_mul_ps(diff_re, t_re));
        let out_re = _mm256_add_ps(half_sum_re, otr);
        let out_im = _mm256_add_ps(half_diff_im, oti);
        let rev_re = reverse(_mm256_sub_ps(half_sum_re, otr));
        let rev_im = reverse(_mm256_sub_ps(oti, half_diff_im));
        store(out_re, out_im, l0, l1);
        store(rev_re, rev_im, r0, r1);
    }
    unpack_pairs(left, right, twiddles, whole);
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_xoshiro::Xoshiro256PlusPlus;

    fn noise(n: usize, seed: u64) -> Vec<f32> {
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
        (0..n).map(|_| rng.random_range(-1.0f32..1.0)).collect()
    }

    fn realfft_of(x: &[f32]) -> Vec<Complex32> {
        let fft = RealFftPlanner::<f32>::new().plan_fft_forward(x.len());
        let mut input = x.to_vec();
        let mut out = fft.make_output_vec();
        let mut scratch = fft.make_scratch_vec();
        fft.process_with_scratch(&mut input, &mut out, &mut scratch)
            .unwrap();
        out
    }

    fn assert_bits(ours: &[Complex32], theirs: &[Complex32], what: &str) {
        assert_eq!(ours.len(), theirs.len(), "{what}: length");
        for (k, (a, b)) in ours.iter().zip(theirs).enumerate() {
            assert!(
                a.re.to_bits() == b.re.to_bits() && a.im.to_bits() == b.im.to_bits(),
                "{what}: bin {k}: {a} vs realfft {b}"
            );
        }
    }

    /// Sizes: every power of two the call sites can plan (64 to 65536 at
    /// 8-192 kHz, and the small ones down to 2), even non-powers of two
    /// (n/2 odd and even, pair counts around the AVX block), odd lengths.
    fn sizes() -> Vec<usize> {
        let mut s: Vec<usize> = (1..=17).map(|p| 1usize << p).collect();
        s.extend([
            6, 10, 12, 14, 18, 30, 34, 36, 38, 40, 66, 68, 70, 100, 1000, 1030, 4098, 6000,
        ]);
        s.extend([1, 3, 5, 17, 99, 1001]);
        s
    }

    /// Bit-for-bit against realfft 3.5's `process_with_scratch` (the
    /// reference this module must equal), plain and windowed, on random
    /// input, through whichever un-packing this CPU selects.
    #[test]
    fn equals_realfft_bit_for_bit() {
        for n in sizes() {
            let mut ours = RealFft::new(n);
            let mut out = ours.make_output_vec();
            for seed in 0..3 {
                let x = noise(n, 1000 * n as u64 + seed);
                ours.process(&x, &mut out);
                assert_bits(&out, &realfft_of(&x), &format!("n={n} seed={seed}"));
                let w = noise(n, 7 + seed);
                let xw: Vec<f32> = x.iter().zip(&w).map(|(a, b)| a * b).collect();
                ours.process_windowed(&x, &w, &mut out);
                assert_bits(
                    &out,
                    &realfft_of(&xw),
                    &format!("n={n} seed={seed} windowed"),
                );
            }
        }
    }

    /// Both un-packings (AVX and scalar) on the same inner spectrum give
    /// the same bits, whichever `process` uses on this CPU.
    #[test]
    fn avx_and_scalar_unpacking_agree() {
        for n in sizes().into_iter().filter(|&n| n >= 2 && n % 2 == 0) {
            let fft = RealFft::new(n);
            let Kind::Even {
                twiddles,
                tw_re,
                tw_im,
                ..
            } = &fft.kind
            else {
                unreachable!()
            };
            let v = noise(n + 2, n as u64);
            let packed: Vec<Complex32> = v
                .chunks_exact(2)
                .map(|c| Complex32::new(c[0], c[1]))
                .collect();
            let mut a = packed.clone();
            unpack_scalar(&mut a, twiddles);
            if has_avx() {
                let mut b = packed.clone();
                unpack_avx_dispatch(&mut b, twiddles, tw_re, tw_im);
                assert_bits(&b, &a, &format!("n={n} avx vs scalar"));
            }
        }
    }

    /// Against the direct DFT definition X[k] = Σ x[j] e^(-2πi jk/n),
    /// summed in f64: within 1e-5 of the spectrum's largest magnitude
    /// (f32 rounding over log2(n) stages of inputs in [-1, 1]).
    #[test]
    fn matches_direct_dft() {
        for n in [2usize, 4, 8, 18, 64, 100, 256, 1030, 2048, 5, 99] {
            let x = noise(n, 42 + n as u64);
            let mut ours = RealFft::new(n);
            let mut out = ours.make_output_vec();
            ours.process(&x, &mut out);
            let direct: Vec<(f64, f64)> = (0..=n / 2)
                .map(|k| {
                    x.iter().enumerate().fold((0.0, 0.0), |(re, im), (j, &v)| {
                        let a = -2.0 * std::f64::consts::PI * ((j * k) % n) as f64 / n as f64;
                        (re + v as f64 * a.cos(), im + v as f64 * a.sin())
                    })
                })
                .collect();
            let peak = direct
                .iter()
                .map(|(re, im)| re.hypot(*im))
                .fold(0.0, f64::max);
            for (k, (o, d)) in out.iter().zip(&direct).enumerate() {
                let err = (o.re as f64 - d.0).hypot(o.im as f64 - d.1);
                assert!(
                    err <= 1e-5 * peak,
                    "n={n} bin {k}: {o} vs direct DFT {d:?}, error {err:e}, peak {peak}"
                );
            }
        }
    }

    /// The input is read, not destroyed: the same input twice gives the
    /// same spectrum.
    #[test]
    fn input_is_left_alone_and_repeats() {
        let x = noise(1024, 5);
        let keep = x.clone();
        let mut f = RealFft::new(1024);
        let (mut a, mut b) = (f.make_output_vec(), f.make_output_vec());
        f.process(&x, &mut a);
        f.process(&x, &mut b);
        assert_eq!(x, keep);
        assert_bits(&a, &b, "repeat");
    }
}
