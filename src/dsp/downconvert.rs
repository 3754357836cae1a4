//! Complex downconversion by fast convolution: overlap-save FFT filtering
//! with decimation in the frequency domain. One real FFT per block gives the
//! analytic (positive-frequency) band around the pitch; a short inverse FFT of
//! just those bins gives the complex baseband already decimated. Mixing,
//! image rejection, low-pass filtering and decimation happen in one step, and
//! the negative-frequency image of the real tone never enters the baseband, so
//! the envelope band can be wide (fast edges) even at low pitches.
//!
//! The filter is designed by frequency sampling with a Blackman-windowed
//! impulse response (window method), linear phase, so its delay is exactly
//! (M-1)/2 input samples and is removed from the output time stamps.

use std::f64::consts::PI;
use std::sync::Arc;

use rustfft::num_complex::{Complex, Complex32, Complex64};
use rustfft::{Fft, FftPlanner};

use super::decimate::{factor_for, Decimator};
use super::real_fft::RealFft;
use super::window::blackman;

/// Flat half-width of the envelope band on each side of the pitch, Hz.
pub const HALF_BAND_HZ: f64 = 2000.0;
/// Raised-cosine roll-off beyond the flat band, Hz (-6 dB at 2250 Hz).
pub const ROLLOFF_HZ: f64 = 500.0;

/// Most other tones one band can notch out.
pub const MAX_NOTCHES: usize = 7;
/// A notch is zero within this distance of the other tone, Hz...
pub const NOTCH_ZERO_HZ: f64 = 30.0;
/// ...and rises to full gain over this raised-cosine ramp beyond it, Hz.
pub const NOTCH_RAMP_HZ: f64 = 50.0;
/// Block length when the band has notches, s: long enough that the
/// filter (a quarter of the block) resolves a notch of +-80 Hz.
const NOTCHED_BLOCK_S: f64 = 0.6;

/// Shape of the analytic band, in absolute audio frequency.
#[derive(Clone, Copy, Debug)]
pub struct Band {
    pub center_hz: f64,
    /// Flat from `lo_hz` to `hi_hz`.
    pub lo_hz: f64,
    pub hi_hz: f64,
    /// Roll-off widths below `lo_hz` and above `hi_hz`.
    pub lo_rolloff_hz: f64,
    pub hi_rolloff_hz: f64,
    /// Other tones notched out of the band (absolute Hz), `notch_count` used.
    pub notches: [f64; MAX_NOTCHES],
    pub notch_count: usize,
}

impl Band {
    /// The default envelope band for a pitch: +-2 kHz flat, clipped so it
    /// stays above 0 Hz and below the Nyquist frequency.
    pub fn envelope(fs: f64, center_hz: f64) -> Band {
        let dc_roll = 100.0;
        let lo = (center_hz - HALF_BAND_HZ).max(20.0 + dc_roll);
        let hi = (center_hz + HALF_BAND_HZ).min(0.5 * fs - ROLLOFF_HZ - 0.02 * fs);
        Band {
            center_hz,
            lo_hz: lo.min(center_hz),
            hi_hz: hi.max(center_hz),
            lo_rolloff_hz: if center_hz - HALF_BAND_HZ > lo {
                ROLLOFF_HZ
            } else {
                dc_roll
            },
            hi_rolloff_hz: ROLLOFF_HZ,
            notches: [0.0; MAX_NOTCHES],
            notch_count: 0,
        }
    }

    /// This band with notches at the other tones that fall inside it (at
    /// most `MAX_NOTCHES`, nearest first), so a second signal in the
    /// passband does not add to this tone's envelope.
    pub fn with_notches(mut self, others_hz: &[f64]) -> Band {
        let reach = NOTCH_ZERO_HZ + NOTCH_RAMP_HZ;
        let mut near: Vec<f64> = others_hz
            .iter()
            .copied()
            .filter(|&f| f > self.lo_hz - self.lo_rolloff_hz - reach)
            .filter(|&f| f < self.hi_hz + self.hi_rolloff_hz + reach)
            .collect();
        near.sort_by(|a, b| {
            (a - self.center_hz)
                .abs()
                .total_cmp(&(b - self.center_hz).abs())
        });
        near.truncate(MAX_NOTCHES);
        self.notch_count = near.len();
        self.notches[..near.len()].copy_from_slice(&near);
        self
    }

    /// The notched-out tones.
    pub fn notched(&self) -> &[f64] {
        &self.notches[..self.notch_count]
    }

    /// A narrow band around a tone (for separating tones), +-`half` Hz.
    pub fn narrow(center_hz: f64, half: f64, rolloff: f64) -> Band {
        Band {
            center_hz,
            lo_hz: center_hz - half,
            hi_hz: center_hz + half,
            lo_rolloff_hz: rolloff,
            hi_rolloff_hz: rolloff,
            notches: [0.0; MAX_NOTCHES],
            notch_count: 0,
        }
    }

    fn desired(&self, f: f64) -> f64 {
        let rc = |x: f64| 0.5 + 0.5 * (PI * x.clamp(0.0, 1.0)).cos();
        let edge = if f < self.lo_hz {
            rc((self.lo_hz - f) / self.lo_rolloff_hz)
        } else if f > self.hi_hz {
            rc((f - self.hi_hz) / self.hi_rolloff_hz)
        } else {
            1.0
        };
        self.notched().iter().fold(edge, |g, &n| {
            let d = (f - n).abs() - NOTCH_ZERO_HZ;
            if d <= 0.0 {
                0.0
            } else {
                g * (1.0 - rc(d / NOTCH_RAMP_HZ))
            }
        })
    }
}

/// Index `i` of an `len`-point DFT as a signed offset (-len/2 .. len/2).
fn signed_offset(i: usize, len: usize) -> i64 {
    if i < len / 2 {
        i as i64
    } else {
        i as i64 - len as i64
    }
}

/// Block sizes for a sample rate: FFT length about 85 ms, decimation to about
/// 10-16 kHz (a power of two), filter length a quarter of the FFT.
pub fn plan_sizes(fs: u32) -> (usize, usize, usize) {
    plan_sizes_for(fs, 0.085)
}

/// Block sizes for a block of about `block_s` seconds.
fn plan_sizes_for(fs: u32, block_s: f64) -> (usize, usize, usize) {
    let n = ((fs as f64 * block_s) as usize)
        .next_power_of_two()
        .max(256);
    let mut d = 1;
    while fs as usize / (2 * d) >= 10_000 && d * 2 * 16 <= n {
        d *= 2;
    }
    let m = n / 4 + 1;
    (n, d, m)
}

/// Output samples per exactly computed mixing phase (the rotation between
/// is tabulated).
const ROT_CHUNK: usize = 64;

/// Room left above the band for the design window's smearing of its
/// roll-off, Hz, when choosing the front-end decimation.
const FRONT_MARGIN_HZ: f64 = 400.0;

/// Streaming analytic downconverter for one tone.
///
/// The real input is first decimated (`dsp::decimate`) as far as the band
/// allows without changing the output rate; the block transforms then run at
/// that lower rate, with the same block and filter durations, so the band
/// and the baseband are those of a transform at the input rate.
pub struct Downconverter {
    /// Rate of the transforms (input rate over the front-end factor), Hz.
    fs: f64,
    in_fs: f64,
    front: Decimator,
    front_out: Vec<f32>,
    n: usize,
    d: usize,
    nd: usize,
    m: usize,
    hop: usize,
    k0: usize,
    residual_hz: f64,
    /// exp(-j 2 pi residual_hz d m / fs) for m = 0..ROT_CHUNK: the residual
    /// offset's rotation within one chunk of output samples.
    turns: Vec<Complex64>,
    h: Vec<Complex32>,
    /// Forward real FFT that reads the input block without destroying it
    /// (no copy per block) and un-packs with AVX, bit for bit `realfft`.
    fwd: RealFft,
    inv: Arc<dyn Fft<f32>>,
    buf: Vec<f32>,
    spec: Vec<Complex32>,
    narrow: Vec<Complex32>,
    /// (narrow index, spectrum bin) of every bin the band passes (|H| above
    /// -140 dB of its peak); the rest of `narrow` stays zero: the inverse
    /// transform reads `narrow` and writes `baseband`, so it is never
    /// cleared per block.
    live: Vec<(u32, u32)>,
    baseband: Vec<Complex32>,
    iscratch: Vec<Complex32>,
    /// Test builds only: run the block as first written (oracle).
    #[cfg(test)]
    reference: bool,
    fill: usize,
    block: u64,
    emitted: u64,
    noise_bandwidth_hz: f64,
    band: Band,
}

impl Downconverter {
    pub fn new(fs: u32, band: Band) -> Downconverter {
        Downconverter::with_hop(fs, band, None)
    }

    /// Like `new`, but processes a block every `hop` input samples (at most
    /// the default N - M + 1, rounded down to a multiple of the decimation).
    /// The output is the same filter's, sample for sample; a shorter hop only
    /// costs more FFTs and gives each output sooner (live input).
    pub fn with_hop(fs_in: u32, band: Band, hop: Option<usize>) -> Downconverter {
        let (_, d_total, _) = plan_sizes(fs_in);
        let top = band.hi_hz + band.hi_rolloff_hz + FRONT_MARGIN_HZ;
        let front_factor = factor_for(fs_in as f64, top, d_total);
        let fs = fs_in / front_factor as u32;
        let (n, d, m) = if band.notch_count > 0 {
            plan_sizes_for(fs, NOTCHED_BLOCK_S)
        } else {
            plan_sizes(fs)
        };
        let fsf = fs as f64;
        let nd = n / d;
        let full = n - (m - 1);
        let hop = hop.map_or(full, |h| ((h / front_factor).min(full) / d).max(1) * d);
        let bin = fsf / n as f64;
        let k0 = (band.center_hz / bin)
            .round()
            .clamp(1.0, (n / 2 - 1) as f64) as usize;
        let residual_hz = band.center_hz - k0 as f64 * bin;

        // Frequency-sampling design on the N-point grid, offsets b from k0.
        let mut planner = FftPlanner::<f64>::new();
        let ifft = planner.plan_fft_inverse(n);
        let ffft = planner.plan_fft_forward(n);
        let mut des: Vec<Complex64> = (0..n)
            .map(|i| {
                let b = signed_offset(i, n);
                let k = k0 as i64 + b;
                if k <= 0 || k >= (n / 2) as i64 {
                    Complex::new(0.0, 0.0)
                } else {
                    Complex::new(band.desired(k as f64 * bin), 0.0)
                }
            })
            .collect();
        ifft.process(&mut des);
        let win = blackman(m);
        let half = (m - 1) / 2;
        let mut hw = vec![Complex64::new(0.0, 0.0); n];
        for (i, w) in win.iter().enumerate() {
            let src = (i as i64 - half as i64).rem_euclid(n as i64) as usize;
            hw[i] = des[src] / n as f64 * *w;
        }
        ffft.process(&mut hw);
        let mut h = vec![Complex32::new(0.0, 0.0); nd];
        let mut nb = 0.0;
        for (j, hj) in h.iter_mut().enumerate() {
            let b = signed_offset(j, nd);
            let k = k0 as i64 + b;
            if k <= 0 || k >= (n / 2) as i64 {
                continue;
            }
            let v = hw[b.rem_euclid(n as i64) as usize];
            nb += v.norm_sqr();
            *hj = Complex32::new(v.re as f32, v.im as f32);
        }
        let peak = h.iter().map(|v| v.norm()).fold(0.0f32, f32::max);
        let live: Vec<(u32, u32)> = (0..nd)
            .filter_map(|j| {
                let b = signed_offset(j, nd);
                let k = k0 as i64 + b;
                (k > 0 && k < (n / 2) as i64 && h[j].norm() > 1e-7 * peak)
                    .then_some((j as u32, k as u32))
            })
            .collect();
        let fwd = RealFft::new(n);
        let inv = FftPlanner::<f32>::new().plan_fft_inverse(nd);
        Downconverter {
            fs: fsf,
            in_fs: fs_in as f64,
            front: Decimator::new(front_factor),
            front_out: Vec::new(),
            n,
            d,
            nd,
            m,
            hop,
            k0,
            residual_hz,
            turns: (0..ROT_CHUNK)
                .map(|m| Complex64::from_polar(1.0, -2.0 * PI * residual_hz * (m * d) as f64 / fsf))
                .collect(),
            h,
            buf: vec![0.0; n],
            spec: fwd.make_output_vec(),
            narrow: vec![Complex32::new(0.0, 0.0); nd],
            live,
            baseband: vec![Complex32::new(0.0, 0.0); nd],
            iscratch: vec![
                Complex32::new(0.0, 0.0);
                inv.get_inplace_scratch_len()
                    .max(inv.get_immutable_scratch_len())
            ],
            #[cfg(test)]
            reference: false,
            fwd,
            inv,
            fill: 0,
            block: 0,
            emitted: 0,
            noise_bandwidth_hz: nb * bin,
            band,
        }
    }

    /// Input sample rate, Hz.
    pub fn in_rate_hz(&self) -> f64 {
        self.in_fs
    }
    /// Output (decimated) sample rate, Hz.
    pub fn out_rate_hz(&self) -> f64 {
        self.fs / self.d as f64
    }
    /// Decimation factor of the front end alone.
    pub fn decimation_front(&self) -> usize {
        self.front.factor()
    }
    /// Decimation factor.
    pub fn decimation(&self) -> usize {
        self.front.factor() * self.d
    }
    /// Noise-equivalent bandwidth of the band (sum of |H|^2 times bin width), Hz.
    pub fn noise_bandwidth_hz(&self) -> f64 {
        self.noise_bandwidth_hz
    }
    pub fn band(&self) -> Band {
        self.band
    }
    /// Time of output sample `q` in the input's time base, s (filter delay removed).
    pub fn time_of(&self, q: u64) -> f64 {
        (q as f64 * self.d as f64 - (self.m - 1) as f64 / 2.0) / self.fs
    }
    /// Number of outputs emitted so far.
    pub fn emitted(&self) -> u64 {
        self.emitted
    }
    /// Input samples to push after the end so that every input sample has
    /// reached the output.
    pub fn flush_len(&self) -> usize {
        self.front.factor() * (self.hop + self.m) + self.front.flush_len()
    }

    /// 10-90 % time of the band's step response for keying, s. An on-off
    /// keyed carrier has a real envelope whose spectrum is symmetric about
    /// the pitch, so what shapes it is the band averaged with its mirror image,
    /// (H(f) + H*(-f)) / 2: the fastest edge this band can show.
    pub fn rise_floor_s(&self) -> f64 {
        let nd = self.nd;
        let mut g: Vec<Complex32> = (0..nd)
            .map(|j| (self.h[j] + self.h[(nd - j) % nd].conj()) * 0.5)
            .collect();
        FftPlanner::<f32>::new()
            .plan_fft_inverse(nd)
            .process(&mut g);
        // Circular impulse response; rotate so its centre (the delay) is mid-buffer.
        let delay = ((self.m - 1) / 2 / self.d) as i64;
        let half = (nd / 2) as i64;
        let h: Vec<Complex64> = (0..nd as i64)
            .map(|i| {
                let v = g[(i + delay - half).rem_euclid(nd as i64) as usize];
                Complex64::new(v.re as f64, v.im as f64)
            })
            .collect();
        let mut acc = Complex64::new(0.0, 0.0);
        let step: Vec<f64> = h
            .iter()
            .map(|v| {
                acc += v;
                acc.norm()
            })
            .collect();
        let top = acc.norm();
        let cross = |p: f64| {
            (1..step.len())
                .find(|&i| step[i] >= p * top)
                .map(|i| i as f64 - 1.0 + (p * top - step[i - 1]) / (step[i] - step[i - 1]))
        };
        match (cross(0.1), cross(0.9)) {
            (Some(a), Some(b)) => (b - a) / self.out_rate_hz(),
            _ => 0.0,
        }
    }

    /// Filters one channel's samples; appends decimated baseband to `out`.
    /// The baseband is scaled so a sine of amplitude A gives |z| = A.
    pub fn push(&mut self, input: &[f32], out: &mut Vec<Complex32>) {
        let mut front_out = std::mem::take(&mut self.front_out);
        front_out.clear();
        self.front.push(input, &mut front_out);
        self.push_front(&front_out, out);
        self.front_out = front_out;
    }

    /// Blocks of the front end's output through the transforms.
    fn push_front(&mut self, samples: &[f32], out: &mut Vec<Complex32>) {
        let hist = self.n - self.hop;
        let mut i = 0;
        while i < samples.len() {
            let take = (self.hop - self.fill).min(samples.len() - i);
            self.buf[hist + self.fill..hist + self.fill + take]
                .copy_from_slice(&samples[i..i + take]);
            self.fill += take;
            i += take;
            if self.fill == self.hop {
                self.process_block(out);
                self.buf.copy_within(self.hop.., 0);
                self.fill = 0;
            }
        }
    }

    /// Ends the input so all of it has passed the filter: the front end
    /// holds the last sample (as `Decimator::flush`, so the front end's
    /// output is the same as any other decimator's of the same input), then
    /// silence follows through the transforms.
    pub fn flush(&mut self, out: &mut Vec<Complex32>) {
        let mut tail = Vec::new();
        self.front.flush(&mut tail);
        self.flush_decimated(&tail, out);
    }

    /// `push` for a caller that decimates the input itself: `front` is the
    /// output of a `Decimator` of [`decimation_front`](Self::decimation_front)
    /// fed the same channel from its first sample, which is what this
    /// downconverter's own front end would make of it. Its own front end is
    /// then left unused: feed one downconverter either way, not both.
    pub fn push_decimated(&mut self, front: &[f32], out: &mut Vec<Complex32>) {
        self.front_out.clear();
        self.front_out.extend_from_slice(front);
        self.push_front(front, out);
    }

    /// `flush` for a downconverter fed by [`push_decimated`](Self::push_decimated):
    /// `tail` is what the caller's decimator gave at its `flush`.
    pub fn flush_decimated(&mut self, tail: &[f32], out: &mut Vec<Complex32>) {
        self.push_decimated(tail, out);
        let z = vec![0.0f32; self.hop + self.m];
        self.push_front(&z, out);
    }

    /// The front end's output (the input decimated by its factor) for the
    /// last `push` or `flush`: what another consumer of the same decimated
    /// stream can take instead of decimating again.
    pub fn last_front(&self) -> &[f32] {
        &self.front_out
    }

    fn process_block(&mut self, out: &mut Vec<Complex32>) {
        #[cfg(test)]
        if self.reference {
            return self.process_block_reference(out);
        }
        self.fwd.process(&self.buf, &mut self.spec);
        for &(j, k) in &self.live {
            self.narrow[j as usize] = self.spec[k as usize] * self.h[j as usize];
        }
        self.inv.process_immutable_with_scratch(
            &self.narrow,
            &mut self.baseband,
            &mut self.iscratch,
        );
        let first = (self.n - self.hop) / self.d;
        let count = self.hop / self.d;
        // The start factor of every chunk, then the chunks' rotation.
        let mut heads = [Complex64::new(0.0, 0.0); MAX_CHUNKS];
        let chunks = count.div_ceil(ROT_CHUNK);
        let heads = if chunks <= MAX_CHUNKS {
            &mut heads[..chunks]
        } else {
            return self.process_block_rotation_long(out);
        };
        let phases = self.phases();
        for (ci, c) in heads.iter_mut().enumerate() {
            *c = Complex64::from_polar(phases.scale, phases.at(first + ROT_CHUNK * ci));
        }
        out.reserve(count);
        rotate(
            &self.baseband[first..first + count],
            heads,
            &self.turns,
            out,
        );
        self.emitted += count as u64;
        self.block += 1;
    }

    /// `process_block`'s rotation for a block of more than `MAX_CHUNKS`
    /// chunks (a long hop at a high baseband rate): the heads one at a time.
    fn process_block_rotation_long(&mut self, out: &mut Vec<Complex32>) {
        let first = (self.n - self.hop) / self.d;
        let count = self.hop / self.d;
        let phases = self.phases();
        out.reserve(count);
        for (ci, chunk) in self.baseband[first..first + count]
            .chunks(ROT_CHUNK)
            .enumerate()
        {
            let c = Complex64::from_polar(phases.scale, phases.at(first + ROT_CHUNK * ci));
            rotate(chunk, &[c], &self.turns, out);
        }
        self.emitted += count as u64;
        self.block += 1;
    }

    /// The mixing phase of this block's outputs.
    fn phases(&self) -> Phases {
        // Local index i maps to absolute n_abs = block*hop + i - (N - hop);
        // with the full hop, N - hop = M - 1.
        let base = self.block as i128 * self.hop as i128 - (self.n - self.hop) as i128;
        // The complex band-pass passes the bin-k0 carrier with zero phase but
        // delays the envelope (and the residual offset) by (M-1)/2 samples.
        let hd = ((self.m - 1) / 2) as i128;
        Phases {
            start: base - hd,
            rot: (self.k0 as i128 * base).rem_euclid(self.n as i128) as f64 / self.n as f64,
            d: self.d,
            residual_hz: self.residual_hz,
            fs: self.fs,
            scale: 2.0 / self.n as f64,
        }
    }

    /// `process_block` as first written: the narrow spectrum cleared and
    /// transformed in place, the rotation chunk by chunk (test oracle).
    #[cfg(test)]
    fn process_block_reference(&mut self, out: &mut Vec<Complex32>) {
        self.fwd.process(&self.buf, &mut self.spec);
        self.narrow.fill(Complex32::new(0.0, 0.0));
        for &(j, k) in &self.live {
            self.narrow[j as usize] = self.spec[k as usize] * self.h[j as usize];
        }
        self.inv
            .process_with_scratch(&mut self.narrow, &mut self.iscratch);
        let base = self.block as i128 * self.hop as i128 - (self.n - self.hop) as i128;
        let hd = ((self.m - 1) / 2) as i128;
        let rot = (self.k0 as i128 * base).rem_euclid(self.n as i128) as f64 / self.n as f64;
        let scale = 2.0 / self.n as f64;
        let first = (self.n - self.hop) / self.d;
        let count = self.hop / self.d;
        out.reserve(count);
        let phase = |mi: usize| {
            let n_abs = (base - hd + (mi * self.d) as i128) as f64;
            -2.0 * PI * (rot + self.residual_hz * n_abs / self.fs)
        };
        for (ci, chunk) in self.narrow[first..first + count]
            .chunks(ROT_CHUNK)
            .enumerate()
        {
            let c = Complex64::from_polar(scale, phase(first + ROT_CHUNK * ci));
            out.extend(chunk.iter().zip(&self.turns).map(|(v, t)| {
                let z = Complex64::new(v.re as f64, v.im as f64) * (c * t);
                Complex32::new(z.re as f32, z.im as f32)
            }));
        }
        self.emitted += count as u64;
        self.block += 1;
    }
}

/// Most chunks of one block whose start factors `process_block` keeps on
/// the stack (the default plans have 12 to 16).
const MAX_CHUNKS: usize = 64;

/// The mixing phase of one block: output `mi` of the block is input sample
/// `start + mi d` at the transform rate.
struct Phases {
    start: i128,
    rot: f64,
    d: usize,
    residual_hz: f64,
    fs: f64,
    scale: f64,
}

impl Phases {
    /// Phase to remove at block output `mi`, rad. The index is converted
    /// from i64 where it fits (the same correctly rounded value as from
    /// i128, without the 128-bit conversion routine).
    #[inline]
    fn at(&self, mi: usize) -> f64 {
        let x = self.start + (mi * self.d) as i128;
        let n_abs = match i64::try_from(x) {
            Ok(v) => v as f64,
            Err(_) => x as f64,
        };
        -2.0 * PI * (self.rot + self.residual_hz * n_abs / self.fs)
    }
}

/// Removes the block-start mixing phase and the residual offset from the
/// bin grid: chunk `ci` of `src` times `heads[ci]` times the tabulated
/// rotation `turns`. The phase is linear in the output index: exact at the
/// start of every chunk, then the chunk's start factor times a tabulated
/// rotation (no serial chain of products). Four lanes wide where the CPU
/// has AVX (the same operations, so the same values).
fn rotate(src: &[Complex32], heads: &[Complex64], turns: &[Complex64], out: &mut Vec<Complex32>) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU has AVX.
        unsafe { rotate_avx(src, heads, turns, out) };
        return;
    }
    rotate_any(src, heads, turns, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn rotate_avx(
    src: &[Complex32],
    heads: &[Complex64],
    turns: &[Complex64],
    out: &mut Vec<Complex32>,
) {
    rotate_any(src, heads, turns, out);
}

#[inline(always)]
fn rotate_any(
    src: &[Complex32],
    heads: &[Complex64],
    turns: &[Complex64],
    out: &mut Vec<Complex32>,
) {
    let turns: &[Complex64; ROT_CHUNK] = turns.try_into().expect("ROT_CHUNK turns");
    for (chunk, &c) in src.chunks(ROT_CHUNK).zip(heads) {
        // The chunk's factors c * t first, then one product per sample:
        // num_complex's products spelt out on the parts, (a + ib)(c + id) =
        // (ac - bd) + i(ad + bc), the same operations in the same order.
        let fr: [f64; ROT_CHUNK] = std::array::from_fn(|m| c.re * turns[m].re - c.im * turns[m].im);
        let fi: [f64; ROT_CHUNK] = std::array::from_fn(|m| c.re * turns[m].im + c.im * turns[m].re);
        out.extend(chunk.iter().zip(fr.iter().zip(&fi)).map(|(v, (&r, &i))| {
            let (a, b) = (v.re as f64, v.im as f64);
            Complex32::new((a * r - b * i) as f32, (a * i + b * r) as f32)
        }));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(fs: u32, x: &[f32], f0: f64) -> (Downconverter, Vec<Complex32>) {
        let mut dc = Downconverter::new(fs, Band::envelope(fs as f64, f0));
        let mut out = Vec::new();
        for c in x.chunks(1000) {
            dc.push(c, &mut out);
        }
        dc.flush(&mut out);
        (dc, out)
    }

    #[test]
    fn block_equals_the_reference_block_bit_for_bit() {
        // Oracle: `process_block_reference`, the block as first written
        // (narrow spectrum cleared, in-place inverse transform, rotation
        // beside each sample). The same operations in the same order, so
        // every output must be the same to the bit: keyed tones with noise
        // at several rates, a notched band (longer blocks), short hops.
        let cases: [(u32, f64, Option<usize>, &[f64]); 6] = [
            (48_000, 700.0, None, &[]),
            (48_000, 712.5, Some(480), &[]),
            (44_100, 650.0, None, &[]),
            (8_000, 400.0, None, &[]),
            (96_000, 1500.0, None, &[]),
            (48_000, 700.0, None, &[820.0, 1400.0]),
        ];
        for (fs, f0, hop, others) in cases {
            let x: Vec<f32> = (0..3 * fs as usize)
                .map(|i| {
                    let t = i as f64 / fs as f64;
                    let keyed = if (t * 7.0).fract() < 0.4 { 1.0 } else { 0.0 };
                    (keyed * 0.4 * (2.0 * PI * f0 * t).sin()
                        + 0.02 * ((i as f64 * 0.37).sin() + (i as f64 * 1.91).cos()))
                        as f32
                })
                .collect();
            let band = Band::envelope(fs as f64, f0).with_notches(others);
            let mut fast = Downconverter::with_hop(fs, band, hop);
            let mut slow = Downconverter::with_hop(fs, band, hop);
            slow.reference = true;
            let (mut a, mut b) = (Vec::new(), Vec::new());
            for c in x.chunks(1234) {
                fast.push(c, &mut a);
                slow.push(c, &mut b);
            }
            fast.flush(&mut a);
            slow.flush(&mut b);
            assert!(
                a.len() > fs as usize / fast.decimation(),
                "{fs}: {}",
                a.len()
            );
            assert_eq!(a.len(), b.len(), "{fs} {f0}");
            for (q, (u, v)) in a.iter().zip(&b).enumerate() {
                assert_eq!(
                    (u.re.to_bits(), u.im.to_bits()),
                    (v.re.to_bits(), v.im.to_bits()),
                    "{fs} {f0} {hop:?} output {q}: {u} vs {v}"
                );
            }
        }
    }

    #[test]
    fn tone_at_center_gives_its_amplitude_and_no_rotation() {
        // Analytic: a*cos(2 pi f t + p) has analytic signal a*exp(j(2 pi f t + p)).
        let fs = 48_000;
        let f0 = 703.37;
        let x: Vec<f32> = (0..48_000)
            .map(|i| (0.3 * (2.0 * PI * f0 * i as f64 / fs as f64 + 0.4).cos()) as f32)
            .collect();
        let (dc, z) = run(fs, &x, f0);
        assert!(dc.time_of(2000) > 0.05);
        for v in &z[2000..8000] {
            assert!((v.norm() - 0.3).abs() < 3e-4, "{}", v.norm());
            assert!((v.arg() as f64 - 0.4).abs() < 2e-3, "{}", v.arg());
        }
    }

    #[test]
    fn offset_tone_rotates_at_its_offset_and_image_is_rejected() {
        // A tone 37 Hz above the centre must rotate at +37 Hz; the real signal's
        // negative-frequency image (at -2f0 in baseband) must not ripple |z|.
        let fs = 8_000;
        let f0 = 400.0;
        let x: Vec<f32> = (0..16_000)
            .map(|i| (0.5 * (2.0 * PI * (f0 + 37.0) * i as f64 / fs as f64).sin()) as f32)
            .collect();
        let (dc, z) = run(fs, &x, f0);
        let r = dc.out_rate_hz();
        let mut maxdev: f32 = 0.0;
        for q in 1000..10_000 {
            maxdev = maxdev.max((z[q].norm() - 0.5).abs());
            // Mean frequency over 2 ms (16 samples at 8 kHz).
            let dphi = (z[q] * z[q - 16].conj()).arg() as f64 * r / (2.0 * PI * 16.0);
            assert!((dphi - 37.0).abs() < 0.05, "{dphi}");
        }
        assert!(maxdev < 2e-3, "{maxdev}");
    }

    #[test]
    fn filter_delay_is_removed_from_time_stamps() {
        // A step-keyed tone: the 50 % point of |z| must sit at the step.
        let fs = 44_100;
        let f0 = 650.0;
        let step = 22_050usize;
        let x: Vec<f32> = (0..44_100)
            .map(|i| {
                if i >= step {
                    (2.0 * PI * f0 * i as f64 / fs as f64).sin() as f32
                } else {
                    0.0
                }
            })
            .collect();
        let (dc, z) = run(fs, &x, f0);
        let q = (1..z.len()).find(|&q| z[q].norm() >= 0.5).unwrap();
        let (a, b) = (z[q - 1].norm() as f64, z[q].norm() as f64);
        let t = dc.time_of(q as u64 - 1) + (0.5 - a) / (b - a) / dc.out_rate_hz();
        assert!((t - 0.5).abs() < 2e-5, "{t}");
    }

    #[test]
    fn short_hop_gives_the_same_baseband_as_the_full_hop() {
        // Reference: the full-hop overlap-save (itself checked against
        // analytic tones above). A shorter hop must reproduce it sample for
        // sample, within the filter's stopband leakage, for every hop tried.
        let fs = 48_000;
        let f0 = 712.5;
        let x: Vec<f32> = (0..60_000)
            .map(|i| {
                let t = i as f64 / fs as f64;
                let keyed = if (t * 9.0).fract() < 0.5 { 1.0 } else { 0.0 };
                (keyed * 0.4 * (2.0 * PI * f0 * t).sin() + 0.01 * (i as f64 * 0.37).sin()) as f32
            })
            .collect();
        let (full, z) = run(fs, &x, f0);
        for hop in [512, 1000, 1024, 2048] {
            let mut dc = Downconverter::with_hop(fs, Band::envelope(fs as f64, f0), Some(hop));
            assert_eq!(dc.time_of(10), full.time_of(10));
            let mut out = Vec::new();
            for c in x.chunks(333) {
                dc.push(c, &mut out);
            }
            dc.flush(&mut out);
            let n = z.len().min(out.len());
            assert!(n > 55_000 / dc.decimation(), "{n}");
            let worst = (0..n)
                .map(|q| (z[q] - out[q]).norm())
                .fold(0.0f32, f32::max);
            // 0.2 % of the 0.4 amplitude: the nd kept bins truncate the
            // filter's response, so what its stopband leaks (Blackman, about
            // -58 dB (memory)) wraps around each block and depends slightly
            // on where blocks fall; measured worst here about 4e-4.
            assert!(worst < 8e-4, "hop {hop}: largest difference {worst}");
        }
    }
}
