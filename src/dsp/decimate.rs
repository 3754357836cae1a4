//! Front-end decimation of the real input by a power of two: a cascade of
//! half-band FIR stages (each halves the rate; Kaiser-windowed sinc, Kaiser
//! 1974), in polyphase form so every stage computes only the outputs it
//! keeps and only its non-zero taps. The survey, the downconverter and the
//! spectral pass look at a few kHz around the pitch; taking 48 or 96 kHz
//! down to 10-20 kHz before their transforms divides their work by D.
//!
//! The cascade is flat to `PASS_FRACTION` of the final output rate, and
//! whatever would fold into that band is at least `STOP_DB` down. Every
//! stage is centred on its even input samples, so there is no delay: output
//! sample j is input sample j*D, filtered.

use std::f64::consts::PI;

/// The flat band ends at this fraction of the output rate.
pub const PASS_FRACTION: f64 = 0.4;
/// Attenuation of whatever would fold into the flat band, dB.
pub const STOP_DB: f64 = 100.0;
/// Outputs are computed eight at a time (one vector of partial sums).
const LANES: usize = 8;

/// Zeroth-order modified Bessel function of the first kind (power series),
/// for the Kaiser window.
fn bessel_i0(x: f64) -> f64 {
    let mut sum = 1.0;
    let mut term = 1.0;
    let q = 0.25 * x * x;
    for k in 1..200 {
        term *= q / (k as f64 * k as f64);
        sum += term;
        if term < 1e-17 * sum {
            break;
        }
    }
    sum
}

/// Taps of a half-band low-pass (cutoff a quarter of its input rate) whose
/// flat band reaches `pass` (a fraction of its input rate, below 0.25):
/// Kaiser's length and beta for `STOP_DB` over the transition from `pass`
/// to 0.5 - `pass`. Returns g_1..g_K, the taps at odd offsets +-1, +-3, ...,
/// +-(2K-1) from the centre tap 1/2 (the even offsets are zero). Unity gain
/// at DC.
pub fn halfband(pass: f64) -> Vec<f64> {
    let dw = 2.0 * PI * (0.5 - 2.0 * pass);
    let n = (STOP_DB - 7.95) / (2.285 * dw);
    // Window length 4K + 1 (its ends fall on zero taps); Kaiser's length
    // formula is a few dB short for such short filters, so K grows until a
    // direct DTFT of the stopband confirms STOP_DB.
    let mut k = ((n / 4.0).ceil() as usize).max(1);
    loop {
        let g = halfband_taps(k);
        if k >= 64 || halfband_stop_db(&g, pass) <= -STOP_DB {
            return g;
        }
        k += 1;
    }
}

/// g_1..g_K of a Kaiser-windowed half-band sinc, window length 4K + 1.
fn halfband_taps(k: usize) -> Vec<f64> {
    let c = (2 * k) as f64;
    let beta = 0.1102 * (STOP_DB - 8.7);
    let i0b = bessel_i0(beta);
    let mut g: Vec<f64> = (1..=k)
        .map(|i| {
            let t = (2 * i - 1) as f64;
            let sinc = (0.5 * PI * t).sin() / (PI * t);
            let r = t / c;
            sinc * bessel_i0(beta * (1.0 - r * r).max(0.0).sqrt()) / i0b
        })
        .collect();
    // DC gain 1/2 + 2 sum(g) = 1.
    let s: f64 = g.iter().sum();
    g.iter_mut().for_each(|v| *v *= 0.25 / s);
    g
}

/// Highest gain over the stopband (0.5 - `pass` to 0.5 of the input
/// rate), dB, by a direct DTFT on a fine grid.
fn halfband_stop_db(g: &[f64], pass: f64) -> f64 {
    let worst = (0..=256)
        .map(|i| {
            let f = 0.5 - pass + pass * i as f64 / 256.0;
            // Zero-phase response: 1/2 + 2 sum g_i cos(2 pi f (2i - 1)).
            let v: f64 = g
                .iter()
                .enumerate()
                .map(|(i, gi)| 2.0 * gi * (2.0 * PI * f * (2 * i + 1) as f64).cos())
                .sum::<f64>()
                + 0.5;
            v.abs()
        })
        .fold(0.0, f64::max);
    20.0 * worst.max(1e-300).log10()
}

/// One half-band stage: its input split into even and odd samples; output
/// j = e[j]/2 + sum_i g_i (o[j-i] + o[j+i-1]), a dot product over 2K
/// consecutive odd samples.
struct Stage {
    /// g_K .. g_1, g_1 .. g_K.
    c: Vec<f32>,
    k: usize,
    even: Vec<f32>,
    /// Odd samples, starting K before the next output's.
    odd: Vec<f32>,
    /// The next input sample is odd.
    odd_next: bool,
    /// The history before the first sample has been set.
    primed: bool,
}

impl Stage {
    fn new(pass: f64) -> Stage {
        let g = halfband(pass);
        let k = g.len();
        let mut c: Vec<f32> = g.iter().rev().map(|&v| v as f32).collect();
        c.extend(g.iter().map(|&v| v as f32));
        Stage {
            c,
            k,
            even: Vec::new(),
            odd: vec![0.0; k],
            odd_next: false,
            primed: false,
        }
    }

    fn push(&mut self, x: &[f32], kernel: Kernel, out: &mut Vec<f32>) {
        if !self.primed && !x.is_empty() {
            // Before the start the signal is taken to hold its first value,
            // so a DC offset does not become a step that rings.
            self.odd.iter_mut().for_each(|v| *v = x[0]);
            self.primed = true;
        }
        let mut xs = x;
        if self.odd_next && !xs.is_empty() {
            self.odd.push(xs[0]);
            xs = &xs[1..];
        }
        let pairs = xs.chunks_exact(2);
        let rest = pairs.remainder();
        self.even.extend(pairs.clone().map(|p| p[0]));
        self.odd.extend(pairs.map(|p| p[1]));
        self.odd_next = match rest {
            [v] => {
                self.even.push(*v);
                true
            }
            _ => self.odd_next && x.is_empty(),
        };
        // Output j needs odd[j .. j + 2K]; whole vectors of outputs only.
        let ready = self
            .even
            .len()
            .min((self.odd.len() + 1).saturating_sub(2 * self.k));
        let count = ready / LANES * LANES;
        if count == 0 {
            return;
        }
        kernel(&self.c, &self.even[..count], &self.odd, out);
        self.even.drain(..count);
        self.odd.drain(..count);
    }
}

/// Computes `even.len()` (a multiple of `LANES`) outputs:
/// out[j] = even[j]/2 + sum_t c[t] odd[j + t].
type Kernel = fn(&[f32], &[f32], &[f32], &mut Vec<f32>);

fn halfband_plain(c: &[f32], even: &[f32], odd: &[f32], out: &mut Vec<f32>) {
    assert!(even.len().is_multiple_of(LANES) && odd.len() + 1 >= even.len() + c.len());
    for (b, e) in even.chunks_exact(LANES).enumerate() {
        let j = b * LANES;
        let mut acc = [0f32; LANES];
        for l in 0..LANES {
            acc[l] = 0.5 * e[l];
        }
        for (t, &ct) in c.iter().enumerate() {
            let o = &odd[j + t..j + t + LANES];
            for l in 0..LANES {
                acc[l] += ct * o[l];
            }
        }
        out.extend_from_slice(&acc);
    }
}

/// The same sums with AVX2 fused multiply-adds, four vectors of outputs
/// at a time so each broadcast tap serves 32 outputs.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn halfband_avx2(c: &[f32], even: &[f32], odd: &[f32], out: &mut Vec<f32>) {
    use std::arch::x86_64::*;
    let n = even.len();
    assert!(n.is_multiple_of(LANES) && odd.len() + 1 >= n + c.len());
    out.reserve(n);
    let len0 = out.len();
    // SAFETY: `reserve(n)` leaves room for n values from len0 on; the loop
    // stores every one of them (j runs to n by whole vectors) before the
    // length is set, so no uninitialised value becomes part of `out`.
    // Writing there directly saves a copy through a local array per group.
    let dp = out.as_mut_ptr().add(len0);
    let half = _mm256_set1_ps(0.5);
    let (ep, op) = (even.as_ptr(), odd.as_ptr());
    let mut j = 0;
    while j < n {
        if n - j >= 4 * LANES {
            let mut a0 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j)));
            let mut a1 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 8)));
            let mut a2 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 16)));
            let mut a3 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 24)));
            for (t, &ct) in c.iter().enumerate() {
                let cv = _mm256_set1_ps(ct);
                let p = op.add(j + t);
                a0 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p), a0);
                a1 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(8)), a1);
                a2 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(16)), a2);
                a3 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(24)), a3);
            }
            _mm256_storeu_ps(dp.add(j), a0);
            _mm256_storeu_ps(dp.add(j + 8), a1);
            _mm256_storeu_ps(dp.add(j + 16), a2);
            _mm256_storeu_ps(dp.add(j + 24), a3);
            j += 4 * LANES;
        } else {
            let mut a0 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j)));
            for (t, &ct) in c.iter().enumerate() {
                a0 = _mm256_fmadd_ps(_mm256_set1_ps(ct), _mm256_loadu_ps(op.add(j + t)), a0);
            }
            _mm256_storeu_ps(dp.add(j), a0);
            j += LANES;
        }
    }
    // j == n (a multiple of LANES): outputs len0 .. len0 + n are written.
    out.set_len(len0 + n);
}

/// `halfband_avx2` as first written, each group of outputs stored to a
/// local array and appended from there (test oracle).
#[cfg(all(test, target_arch = "x86_64"))]
#[target_feature(enable = "avx2,fma")]
unsafe fn halfband_avx2_reference(c: &[f32], even: &[f32], odd: &[f32], out: &mut Vec<f32>) {
    use std::arch::x86_64::*;
    let n = even.len();
    assert!(n.is_multiple_of(LANES) && odd.len() + 1 >= n + c.len());
    out.reserve(n);
    let half = _mm256_set1_ps(0.5);
    let (ep, op) = (even.as_ptr(), odd.as_ptr());
    let mut lanes = [0f32; 4 * LANES];
    let mut j = 0;
    while j < n {
        if n - j >= 4 * LANES {
            let mut a0 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j)));
            let mut a1 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 8)));
            let mut a2 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 16)));
            let mut a3 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j + 24)));
            for (t, &ct) in c.iter().enumerate() {
                let cv = _mm256_set1_ps(ct);
                let p = op.add(j + t);
                a0 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p), a0);
                a1 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(8)), a1);
                a2 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(16)), a2);
                a3 = _mm256_fmadd_ps(cv, _mm256_loadu_ps(p.add(24)), a3);
            }
            let lp = lanes.as_mut_ptr();
            _mm256_storeu_ps(lp, a0);
            _mm256_storeu_ps(lp.add(8), a1);
            _mm256_storeu_ps(lp.add(16), a2);
            _mm256_storeu_ps(lp.add(24), a3);
            out.extend_from_slice(&lanes);
            j += 4 * LANES;
        } else {
            let mut a0 = _mm256_mul_ps(half, _mm256_loadu_ps(ep.add(j)));
            for (t, &ct) in c.iter().enumerate() {
                a0 = _mm256_fmadd_ps(_mm256_set1_ps(ct), _mm256_loadu_ps(op.add(j + t)), a0);
            }
            _mm256_storeu_ps(lanes.as_mut_ptr(), a0);
            out.extend_from_slice(&lanes[..LANES]);
            j += LANES;
        }
    }
}

#[cfg(target_arch = "x86_64")]
fn halfband_avx2_checked(c: &[f32], even: &[f32], odd: &[f32], out: &mut Vec<f32>) {
    // SAFETY: only chosen by `pick_kernel` after the CPU reported AVX2 and
    // FMA; `halfband_avx2` checks the lengths its reads need.
    unsafe { halfband_avx2(c, even, odd, out) }
}

fn pick_kernel() -> Kernel {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
        {
            return halfband_avx2_checked;
        }
    }
    halfband_plain
}

/// Streaming decimator of one real channel by a power of two (1: pass-through).
pub struct Decimator {
    factor: usize,
    stages: Vec<Stage>,
    /// Between stages.
    tmp: [Vec<f32>; 2],
    kernel: Kernel,
    /// The latest input sample (flushing repeats it).
    last: f32,
}

impl Decimator {
    /// `factor` is rounded down to a power of two.
    pub fn new(factor: usize) -> Decimator {
        let mut factor = factor.max(1);
        factor = 1 << factor.ilog2();
        let n = factor.trailing_zeros() as usize;
        // Stage s (1-based) halves the rate to fs / 2^s; its flat band must
        // reach PASS_FRACTION of the final rate fs / 2^n.
        let stages = (1..=n)
            .map(|s| {
                let pass = PASS_FRACTION / (1usize << (n - s + 1)) as f64;
                Stage::new(pass)
            })
            .collect();
        Decimator {
            factor,
            stages,
            tmp: [Vec::new(), Vec::new()],
            kernel: pick_kernel(),
            last: 0.0,
        }
    }

    pub fn factor(&self) -> usize {
        self.factor
    }

    /// Most input samples an output can wait for beyond its own centre:
    /// each stage's look-ahead (2K - 1 samples) and its batching of outputs
    /// by `LANES`, at the input rate.
    pub fn lookahead(&self) -> usize {
        let mut len = 0;
        let mut scale = 1;
        for st in &self.stages {
            len += scale * (2 * st.k - 1 + 2 * LANES);
            scale *= 2;
        }
        len
    }

    /// Input samples to push after the end so that every input sample has
    /// reached an output.
    pub fn flush_len(&self) -> usize {
        let mut len = 0;
        let mut scale = 1;
        for st in &self.stages {
            len += scale * (2 * st.k + 2 * LANES + 2);
            scale *= 2;
        }
        len
    }

    /// Filters and decimates `x`, appending to `out`.
    pub fn push(&mut self, x: &[f32], out: &mut Vec<f32>) {
        let n = self.stages.len();
        if n == 0 {
            out.extend_from_slice(x);
            return;
        }
        if let Some(v) = x.last() {
            self.last = *v;
        }
        if n == 1 {
            self.stages[0].push(x, self.kernel, out);
            return;
        }
        let [a, b] = &mut self.tmp;
        let mut src: &mut Vec<f32> = a;
        let mut dst: &mut Vec<f32> = b;
        src.clear();
        self.stages[0].push(x, self.kernel, src);
        for (i, st) in self.stages.iter_mut().enumerate().skip(1) {
            if i + 1 == n {
                st.push(src, self.kernel, out);
            } else {
                dst.clear();
                st.push(src, self.kernel, dst);
                std::mem::swap(&mut src, &mut dst);
            }
        }
    }

    /// Pushes `flush_len` copies of the last sample (the signal is taken
    /// to hold its last value, as it held its first before the start).
    pub fn flush(&mut self, out: &mut Vec<f32>) {
        let z = vec![self.last; self.flush_len()];
        self.push(&z, out);
    }
}

/// Largest power-of-two factor, at most `max_factor`, that keeps a band
/// reaching up to `top_hz` inside the flat band of the output.
pub fn factor_for(fs: f64, top_hz: f64, max_factor: usize) -> usize {
    let mut d = 1 << max_factor.max(1).ilog2();
    while d > 1 && top_hz > PASS_FRACTION * fs / d as f64 {
        d /= 2;
    }
    d
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(d: usize, x: &[f32], block: usize) -> Vec<f32> {
        let mut dec = Decimator::new(d);
        let mut out = Vec::new();
        for c in x.chunks(block) {
            dec.push(c, &mut out);
        }
        dec.flush(&mut out);
        out
    }

    /// Full symmetric taps of a half-band stage.
    fn taps(g: &[f64]) -> Vec<f64> {
        let k = g.len();
        let mut h = vec![0.0; 4 * k - 1];
        let c = 2 * k - 1;
        h[c] = 0.5;
        for (i, v) in g.iter().enumerate() {
            h[c - (2 * i + 1)] = *v;
            h[c + 2 * i + 1] = *v;
        }
        h
    }

    /// |H(f)| by a direct DTFT (f in cycles per sample).
    fn gain(h: &[f64], f: f64) -> f64 {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, v) in h.iter().enumerate() {
            let a = 2.0 * PI * f * i as f64;
            re += v * a.cos();
            im -= v * a.sin();
        }
        (re * re + im * im).sqrt()
    }

    #[test]
    fn halfband_meets_its_band_edges() {
        // Kaiser (1974): the formulas give the stated attenuation over the
        // stated transition; checked by a direct DTFT of the taps.
        for pass in [0.1, 0.2] {
            let h = taps(&halfband(pass));
            let ripple = (0..=200)
                .map(|i| gain(&h, pass * i as f64 / 200.0))
                .map(|g| (20.0 * g.log10()).abs())
                .fold(0.0, f64::max);
            assert!(ripple < 1e-3, "pass {pass}: ripple {ripple} dB");
            let stop = (0..=400)
                .map(|i| (0.5 - pass) + pass * i as f64 / 400.0)
                .map(|f| gain(&h, f))
                .fold(0.0, f64::max);
            assert!(
                20.0 * stop.log10() < -STOP_DB + 1.0,
                "pass {pass}: stopband {} dB",
                20.0 * stop.log10()
            );
        }
    }

    #[test]
    fn output_j_is_input_j_times_d_filtered() {
        // Slow obvious check: direct convolution of the input with each
        // stage's full symmetric taps, centred, then keeping every 2nd.
        let d = 4;
        let x: Vec<f32> = (0..5000)
            .map(|i| ((i as f64 * 0.37).sin() + 0.3 * (i as f64 * 0.011).cos()) as f32)
            .collect();
        let mut want: Vec<f64> = x.iter().map(|&v| v as f64).collect();
        for s in 1..=2 {
            let pass = PASS_FRACTION / (1usize << (2 - s + 1)) as f64;
            let h = taps(&halfband(pass));
            let c = (h.len() - 1) / 2;
            want = (0..want.len() / 2)
                .map(|j| {
                    let mut acc = 0.0;
                    for (t, ht) in h.iter().enumerate() {
                        // The signal holds its first value before the start.
                        let i = ((2 * j + t) as i64 - c as i64).max(0);
                        if (i as usize) < want.len() {
                            acc += ht * want[i as usize];
                        }
                    }
                    acc
                })
                .collect();
        }
        let y = run(d, &x, 777);
        assert!(y.len() >= want.len());
        // The last outputs of the direct version lack the zeros after the end.
        for (j, w) in want.iter().enumerate().take(want.len() - 40) {
            assert!((y[j] as f64 - w).abs() < 2e-6, "j={j}: {} vs {w}", y[j]);
        }
    }

    #[test]
    fn vector_kernel_matches_the_plain_one() {
        let st = Stage::new(0.1);
        let odd: Vec<f32> = (0..3000).map(|i| ((i as f32) * 0.913).sin()).collect();
        let even: Vec<f32> = (0..2000).map(|i| ((i as f32) * 0.37).cos()).collect();
        let (mut a, mut b) = (Vec::new(), Vec::new());
        halfband_plain(&st.c, &even, &odd, &mut a);
        (pick_kernel())(&st.c, &even, &odd, &mut b);
        assert_eq!(a.len(), 2000);
        assert_eq!(b.len(), 2000);
        for (u, v) in a.iter().zip(&b) {
            assert!((u - v).abs() < 1e-6, "{u} {v}");
        }
    }

    #[test]
    #[cfg(target_arch = "x86_64")]
    fn vector_kernel_equals_its_first_form_bit_for_bit() {
        // Oracle: `halfband_avx2_reference`, which stored each group to a
        // local array and appended it; the same sums, so the same bits.
        // Lengths with and without a tail of single vectors, appended to a
        // non-empty `out` (the kernel writes after what is there).
        if !(std::arch::is_x86_feature_detected!("avx2")
            && std::arch::is_x86_feature_detected!("fma"))
        {
            return;
        }
        let st = Stage::new(0.1);
        let odd: Vec<f32> = (0..3000).map(|i| ((i as f32) * 0.913).sin()).collect();
        let even: Vec<f32> = (0..2000).map(|i| ((i as f32) * 0.37).cos()).collect();
        for n in [0, 8, 16, 24, 32, 40, 64, 72, 1000, 2000] {
            let (mut a, mut b) = (vec![7.0f32; 3], vec![7.0f32; 3]);
            // SAFETY: the CPU has AVX2 and FMA (checked above).
            unsafe {
                halfband_avx2(&st.c, &even[..n], &odd, &mut a);
                halfband_avx2_reference(&st.c, &even[..n], &odd, &mut b);
            }
            assert_eq!(a.len(), n + 3);
            let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&a), bits(&b), "n {n}");
        }
    }

    #[test]
    fn block_size_does_not_matter() {
        let x: Vec<f32> = (0..20_000)
            .map(|i| ((i * 7919) % 1000) as f32 / 1000.0 - 0.5)
            .collect();
        let a = run(8, &x, 1);
        let b = run(8, &x, 4095);
        let c = run(8, &x, 20_000);
        assert_eq!(a, b);
        assert_eq!(a, c);
    }

    #[test]
    fn sine_keeps_amplitude_and_phase_and_aliases_vanish() {
        // Analytic: a sine in the flat band comes out unchanged at the
        // decimated instants; ones that would fold into the band are gone.
        let fs = 48_000.0;
        let d = 4;
        let n = 48_000;
        let f_in = 1234.5;
        // Fold onto 700 Hz at 12 kHz (the last stage) and at 24 kHz (the first).
        let aliases = [12_000.0 - 700.0, 24_000.0 - 700.0 - 0.5];
        let x: Vec<f32> = (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                let a: f64 = aliases.iter().map(|f| (2.0 * PI * f * t).sin()).sum();
                (0.5 * (2.0 * PI * f_in * t + 0.3).sin() + 0.5 * a) as f32
            })
            .collect();
        let y = run(d, &x, 1000);
        let mut worst = 0.0f64;
        for (j, &v) in y.iter().enumerate().skip(100).take(n / d - 200) {
            let t = (j * d) as f64 / fs;
            let want = 0.5 * (2.0 * PI * f_in * t + 0.3).sin();
            worst = worst.max((v as f64 - want).abs());
        }
        // 1e-5 of 0.5 is -94 dB: the aliases' residue plus ripple.
        assert!(worst < 1e-5, "{worst}");
    }

    #[test]
    fn dc_comes_through_without_a_step_at_either_end() {
        // Analytic: a constant is its own low-pass output; nothing rings at
        // the start or the end.
        let x = vec![0.25f32; 10_001];
        let y = run(8, &x, 333);
        assert!(y.len() * 8 >= x.len());
        let worst = y.iter().map(|v| (v - 0.25).abs()).fold(0.0f32, f32::max);
        assert!(worst < 1e-6, "{worst}");
    }

    #[test]
    fn factor_keeps_the_band_inside_the_flat_part() {
        assert_eq!(factor_for(48_000.0, 3200.0, 4), 4);
        assert_eq!(factor_for(48_000.0, 5000.0, 4), 2);
        assert_eq!(factor_for(48_000.0, 12_000.0, 4), 1);
        assert_eq!(factor_for(8_000.0, 3000.0, 1), 1);
        assert_eq!(Decimator::new(6).factor(), 4);
    }
}
