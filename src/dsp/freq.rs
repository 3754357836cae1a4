//! Frequency of one element: Kay's weighted phase-difference estimator
//! (Kay 1989) on the complex baseband. The sum of lag-one products
//! z[n] z*[n-1], weighted by Kay's parabolic window over at most 2 ms, has the
//! mean frequency as its angle; the products carry |z|^2, so the estimate is
//! amplitude-weighted by construction.
//!
//! Chirp is the largest deviation of that trace from the element's settled
//! frequency (median of its last half) between the 50 % instants. Noise makes
//! the raw maximum of a 2 ms trace grow with the number of points, so the
//! reported chirp is read from a least-squares model of the trace (constant,
//! linear, or exponential decay, chosen by the Bayesian information
//! criterion); the raw maximum is kept beside it.

use std::f64::consts::PI;

use rustfft::num_complex::{Complex32, Complex64};

use super::stats::weighted_median;

/// Kay window of the frequency trace, s. With the pre-filter below, the
/// trace is smoothed over 2 ms in all (BRIEF.md's limit): the parabolic
/// window's RMS width is T/sqrt(20), and the two RMS widths add in quadrature
/// to that of a 2 ms Kay window alone.
pub const TRACE_WINDOW_S: f64 = 0.0015;
/// Gaussian pre-filter of the baseband before the phase differences, s. A
/// filter symmetric about the pitch keeps the noise's lag-one correlation
/// real, so noise cannot pull the estimate towards the wider side of an
/// asymmetric analysis band (which the plain wideband estimate suffers).
pub const PREFILTER_SIGMA_S: f64 = 0.000_3;
/// Spacing of trace points, seconds.
pub const TRACE_STEP_S: f64 = 0.000_25;

/// Kay's weights for N-1 phase differences of an N-sample window.
pub fn kay_weights(n: usize) -> Vec<f64> {
    let nf = n as f64;
    (0..n - 1)
        .map(|t| {
            let x = (t as f64 - (nf / 2.0 - 1.0)) / (nf / 2.0);
            1.5 * nf / (nf * nf - 1.0) * (1.0 - x * x)
        })
        .collect()
}

/// Kay's estimate of the mean frequency (Hz) over `z[start..start+n]`, and
/// the summed weight (amplitude squared) behind it.
pub fn kay_frequency(z: &[Complex32], start: usize, w: &[f64], fs: f64) -> (f64, f64) {
    let zs = &z[start..start + w.len() + 1];
    let p: Vec<Complex64> = zs
        .windows(2)
        .map(|pair| lag_product(pair[0], pair[1]))
        .collect();
    kay_from_products(&p, w, fs)
}

/// z[n] z*[n-1] in double precision, for `b` = z[n-1] and `a` = z[n].
fn lag_product(b: Complex32, a: Complex32) -> Complex64 {
    Complex64::new(a.re as f64, a.im as f64) * Complex64::new(b.re as f64, -b.im as f64)
}

/// Kay's estimate from lag-one products already formed (`p.len() == w.len()`).
fn kay_from_products(p: &[Complex64], w: &[f64], fs: f64) -> (f64, f64) {
    let mut acc = Complex64::new(0.0, 0.0);
    for (pk, wk) in p.iter().zip(w) {
        acc += pk * *wk;
    }
    kay_finish(acc, fs)
}

/// Windows of `kay_sums` per pass.
const KAY_LANES: usize = 4;

/// The weighted sums of `kay_from_products` for `L` windows of `p` at once
/// (starting at `offs`): one window's sum is a serial chain of additions,
/// `L` of them interleave. Each sum adds the same terms in the same order.
fn kay_sums<const L: usize>(p: &[Complex64], offs: [usize; L], w: &[f64]) -> [Complex64; L] {
    let win = offs.map(|o| &p[o..o + w.len()]);
    let mut acc = [Complex64::new(0.0, 0.0); L];
    for (j, &wk) in w.iter().enumerate() {
        for (a, pw) in acc.iter_mut().zip(&win) {
            *a += pw[j] * wk;
        }
    }
    acc
}

/// Frequency (Hz) and weight of a Kay sum. The weight |acc| is the square
/// root of |acc|²: the sums are far from overflow, and `hypot` is slow.
fn kay_finish(acc: Complex64, fs: f64) -> (f64, f64) {
    (acc.arg() * fs / (2.0 * PI), acc.norm_sqr().sqrt())
}

/// Frequency trace of one element.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Trace {
    /// Time of each point since the element's 50 % rise, s.
    pub t: Vec<f64>,
    /// Frequency offset from the downconversion centre, Hz.
    pub f: Vec<f64>,
    /// Weight of each point (amplitude squared, relative).
    pub w: Vec<f64>,
}

/// Trace from fractional index `t50r` to `t50f` (50 % instants) on `z`.
pub fn trace(z: &[Complex32], fs: f64, t50r: f64, t50f: f64) -> Trace {
    SCRATCH.with(|s| trace_with(&mut s.borrow_mut(), z, fs, t50r, t50f))
}

/// Buffers `trace` reuses from one element to the next (one set per thread).
#[derive(Default)]
struct Scratch {
    src_re: Vec<f64>,
    src_im: Vec<f64>,
    out_re: Vec<f64>,
    out_im: Vec<f64>,
    /// The pre-filtered baseband over the stretch the windows read.
    zf: Vec<Complex32>,
    prod: Vec<Complex64>,
    /// First sample of each trace point's window.
    starts: Vec<usize>,
    /// The pre-filter's kernel with its sigma's bits, and Kay's weights with
    /// their window length, as last built (the same for every element).
    kernel: (u64, Vec<f64>),
    kay: (usize, Vec<f64>),
}

thread_local! {
    static SCRATCH: std::cell::RefCell<Scratch> = std::cell::RefCell::new(Scratch::default());
}

/// Outputs per block of the pre-filter: the accumulators stay in registers
/// and the compiler vectorizes across the block (twice as many with AVX's
/// wider registers).
const CONV_BLOCK: usize = 16;
#[cfg(target_arch = "x86_64")]
const CONV_BLOCK_AVX: usize = 32;

/// `out[i] = sum_j k[j] src[i + j]`, taps added in kernel order from 0.0 (so
/// each output is the same sum as one computed alone); `src.len()` must be
/// `out.len() + k.len() - 1`.
fn convolve_valid(src: &[f64], k: &[f64], out: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU reported AVX.
            return unsafe { convolve_valid_avx(src, k, out) };
        }
    }
    convolve_valid_body::<CONV_BLOCK>(src, k, out)
}

/// `convolve_valid` compiled for AVX: four outputs per instruction instead
/// of two, the same operations (no fused multiply-adds), so the same sums.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn convolve_valid_avx(src: &[f64], k: &[f64], out: &mut [f64]) {
    convolve_valid_body::<CONV_BLOCK_AVX>(src, k, out)
}

#[inline(always)]
fn convolve_valid_body<const B: usize>(src: &[f64], k: &[f64], out: &mut [f64]) {
    let m = out.len();
    let full = m - m % B;
    for (b0, ob) in (0..full).step_by(B).zip(out.chunks_exact_mut(B)) {
        let seg = &src[b0..b0 + B + k.len() - 1];
        let mut acc = [0.0f64; B];
        for (win, &w) in seg.windows(B).zip(k) {
            for (a, v) in acc.iter_mut().zip(win) {
                *a += v * w;
            }
        }
        ob.copy_from_slice(&acc);
    }
    for (o, i) in out[full..].iter_mut().zip(full..) {
        let mut a = 0.0;
        for (v, &w) in src[i..i + k.len()].iter().zip(k) {
            a += v * w;
        }
        *o = a;
    }
}

/// Makes `v` at least `n` long, filling only what it had never held: the
/// caller overwrites `v[..n]` before reading it.
fn grow<T: Copy>(v: &mut Vec<T>, n: usize, fill: T) {
    if v.len() < n {
        v.resize(n, fill);
    }
}

/// `x.round()` (halves away from zero), inline: without SSE4.1 `round` is
/// a library call, once per trace point. Exact below 2^52 in magnitude,
/// where trunc(x) and x - trunc(x) are exact; a zero may lose its sign.
#[inline]
fn round_index(x: f64) -> f64 {
    if x.abs() < 4_503_599_627_370_496.0 {
        let t = x as i64 as f64;
        let d = x - t;
        if d >= 0.5 {
            t + 1.0
        } else if d <= -0.5 {
            t - 1.0
        } else {
            t
        }
    } else {
        x.round()
    }
}

fn trace_with(sc: &mut Scratch, z: &[Complex32], fs: f64, t50r: f64, t50f: f64) -> Trace {
    let sigma = PREFILTER_SIGMA_S * fs;
    if sc.kernel.1.is_empty() || sc.kernel.0 != sigma.to_bits() {
        sc.kernel = (sigma.to_bits(), super::edges::gaussian_kernel(sigma));
    }
    let n = ((TRACE_WINDOW_S * fs).round() as usize).max(3);
    if sc.kay.1.is_empty() || sc.kay.0 != n {
        sc.kay = (n, kay_weights(n));
    }
    let (kernel, kay) = (std::mem::take(&mut sc.kernel), std::mem::take(&mut sc.kay));
    let out = trace_kernels(sc, &kernel.1, &kay.1, n, z, fs, t50r, t50f);
    (sc.kernel, sc.kay) = (kernel, kay);
    out
}

/// `trace_with` given the pre-filter's kernel `k` and Kay's weights `w` of
/// an `n`-sample window.
#[allow(clippy::too_many_arguments)]
fn trace_kernels(
    sc: &mut Scratch,
    k: &[f64],
    w: &[f64],
    n: usize,
    z: &[Complex32],
    fs: f64,
    t50r: f64,
    t50f: f64,
) -> Trace {
    let h = k.len() / 2;
    // Only the stretch the Kay windows will read needs filtering; the
    // filtered baseband is taken as zero outside it.
    let lo = ((t50r - n as f64).max(0.0) as usize).min(z.len());
    let hi = ((t50f + n as f64 + 2.0) as usize).min(z.len()).max(lo);
    // Every sample of `zf` below is written before it is read, so the
    // buffers only grow (no zero fill per element); one more (zero) sample
    // past `hi`, which the last product reads.
    let zf = &mut sc.zf;
    grow(zf, hi - lo + 1, Complex32::new(0.0, 0.0));
    let zf = &mut zf[..hi - lo + 1];
    zf[hi - lo] = Complex32::new(0.0, 0.0);
    // Where the whole kernel fits: blocks of outputs at once, a loop the
    // compiler vectorizes; each output still adds its taps in kernel order.
    let (a, b) = (lo.max(h), hi.min(z.len().saturating_sub(h)));
    if a < b {
        let m = b - a;
        sc.src_re.clear();
        sc.src_re
            .extend(z[a - h..b + h].iter().map(|v| v.re as f64));
        sc.src_im.clear();
        sc.src_im
            .extend(z[a - h..b + h].iter().map(|v| v.im as f64));
        grow(&mut sc.out_re, m, 0.0);
        grow(&mut sc.out_im, m, 0.0);
        let (out_re, out_im) = (&mut sc.out_re[..m], &mut sc.out_im[..m]);
        convolve_valid(&sc.src_re, k, out_re);
        convolve_valid(&sc.src_im, k, out_im);
        for ((o, r), i) in zf[a - lo..b - lo].iter_mut().zip(&*out_re).zip(&*out_im) {
            *o = Complex32::new(*r as f32, *i as f32);
        }
    }
    // The few outputs near the ends of `z`, with a partial kernel.
    let ends = if a < b {
        [lo..a, b..hi]
    } else {
        [lo..hi, hi..hi]
    };
    for i in ends.into_iter().flatten() {
        let o = &mut zf[i - lo];
        let mut acc = Complex64::new(0.0, 0.0);
        for (j, w) in k.iter().enumerate() {
            if let Some(v) = (i + j).checked_sub(h).and_then(|q| z.get(q)) {
                acc += Complex64::new(v.re as f64, v.im as f64) * *w;
            }
        }
        *o = Complex32::new(acc.re as f32, acc.im as f32);
    }
    let zf = &sc.zf[..hi - lo + 1];
    // Lag-one products over the filtered stretch, formed once: trace points
    // are closer than a window, so each product serves several windows.
    let p_hi = hi.min(z.len().saturating_sub(1)).max(lo);
    let prod = &mut sc.prod;
    prod.clear();
    prod.extend((0..p_hi - lo).map(|i| lag_product(zf[i], zf[i + 1])));
    let step = TRACE_STEP_S * fs;
    let mut out = Trace::default();
    let cap = ((t50f - t50r).max(0.0) / step) as usize + 2;
    out.t.reserve(cap);
    out.f.reserve(cap);
    out.w.reserve(cap);
    // The windows' starts first, then their sums several at a time.
    let starts = &mut sc.starts;
    starts.clear();
    let mut c = t50r;
    while c <= t50f {
        let start = round_index(c - (n as f64 - 1.0) / 2.0);
        if start >= 0.0 && (start as usize) + n <= z.len() {
            starts.push(start as usize);
            out.t.push((c - t50r) / fs);
        }
        c += step;
    }
    // Windows that read the shared products.
    let shared = |s0: usize| s0 >= lo && s0 + w.len() <= p_hi;
    let mut i = 0;
    while i < starts.len() {
        if let Some(g) = starts.get(i..i + KAY_LANES) {
            if g.iter().all(|&s0| shared(s0)) {
                let offs: [usize; KAY_LANES] = std::array::from_fn(|l| g[l] - lo);
                for acc in kay_sums(prod, offs, w) {
                    let (f, wt) = kay_finish(acc, fs);
                    out.f.push(f);
                    out.w.push(wt);
                }
                i += KAY_LANES;
                continue;
            }
        }
        let s0 = starts[i];
        let (f, wt) = if shared(s0) {
            kay_from_products(&prod[s0 - lo..s0 - lo + w.len()], w, fs)
        } else {
            // Not reached for 50 % instants inside `z`; kept for safety.
            let zp: Vec<Complex32> = (s0..s0 + n)
                .map(|i| {
                    i.checked_sub(lo)
                        .filter(|&q| q < hi - lo)
                        .and_then(|q| zf.get(q))
                        .copied()
                        .unwrap_or_default()
                })
                .collect();
            kay_frequency(&zp, 0, w, fs)
        };
        out.f.push(f);
        out.w.push(wt);
        i += 1;
    }
    out
}

/// Chirp figures of one element.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ChirpFit {
    /// Settled frequency offset (Hz from the downconversion centre).
    pub settled_hz: f64,
    /// Largest |deviation| of the fitted trace from its settled value, Hz.
    pub chirp_hz: f64,
    /// Largest |deviation| of the raw 2 ms trace from the settled value, Hz.
    pub raw_hz: f64,
    /// Weighted RMS residual of the trace about the model, Hz.
    pub noise_hz: f64,
    /// Which model won: 0 constant, 1 linear, 2 exponential, 3 both.
    pub model: u8,
    /// Time constant of the exponential term, s (0 when none).
    pub tau_s: f64,
}

/// Solves the k x k normal equations (k <= 3) by Gaussian elimination with
/// partial pivoting; None when singular. Each size is compiled on its own
/// (`solve_k`), so the loops unroll; the operations are those of the
/// runtime-sized elimination (`solve_reference`, checked in a test).
fn solve(a: [[f64; 3]; 3], b: [f64; 3], k: usize) -> Option<[f64; 3]> {
    debug_assert!(k <= 3);
    match k {
        0 => solve_k::<0>(a, b),
        1 => solve_k::<1>(a, b),
        2 => solve_k::<2>(a, b),
        _ => solve_k::<3>(a, b),
    }
}

#[inline(always)]
fn solve_k<const K: usize>(a: [[f64; 3]; 3], b: [f64; 3]) -> Option<[f64; 3]> {
    let mut m = a;
    let mut v = b;
    for p in 0..K {
        let piv = (p..K).max_by(|&i, &j| m[i][p].abs().total_cmp(&m[j][p].abs()))?;
        if m[piv][p].abs() < 1e-12 * (1.0 + m[p][p].abs()) {
            return None;
        }
        m.swap(p, piv);
        v.swap(p, piv);
        for r in p + 1..K {
            let f = m[r][p] / m[p][p];
            let pivot_row = m[p];
            for (c, x) in m[r].iter_mut().enumerate().take(K).skip(p) {
                *x -= f * pivot_row[c];
            }
            v[r] -= f * v[p];
        }
    }
    let mut beta = [0.0; 3];
    for p in (0..K).rev() {
        let mut s = v[p];
        for c in p + 1..K {
            s -= m[p][c] * beta[c];
        }
        beta[p] = s / m[p][p];
    }
    Some(beta)
}

/// Chirp models: 0 constant, 1 linear, 2 exponential decay, 3 both.
fn basis(model: u8, tau: f64, t: f64, mid: f64) -> [f64; 3] {
    let e = if model >= 2 { (-t / tau).exp() } else { 0.0 };
    match model {
        0 => [1.0, 0.0, 0.0],
        1 => [1.0, t - mid, 0.0],
        2 => [1.0, e, 0.0],
        _ => [1.0, t - mid, e],
    }
}

fn model_cols(model: u8) -> usize {
    match model {
        0 => 1,
        1 | 2 => 2,
        _ => 3,
    }
}

/// Weighted least squares of one model on (t, f, w); returns (RSS, beta).
/// The plain one-model-at-a-time fit; `FitData` is the fast path and is
/// checked against this.
/// Normal equations are accumulated in one pass without allocation, and the
/// residual comes from RSS = sum(w y^2) - beta . X'Wy.
#[cfg(test)]
fn fit_model(
    model: u8,
    tau: f64,
    t: &[f64],
    f: &[f64],
    w: &[f64],
    mid: f64,
) -> Option<(f64, [f64; 3])> {
    let k = model_cols(model);
    let mut a = [[0.0f64; 3]; 3];
    let mut v = [0.0f64; 3];
    let mut yy = 0.0;
    // exp(-t/tau) by recurrence on the uniform grid, refreshed every 64 points.
    let uniform = t.len() > 2 && ((t[2] - t[1]) - (t[1] - t[0])).abs() < 1e-12;
    let step = if t.len() > 1 {
        (-(t[1] - t[0]) / tau).exp()
    } else {
        0.0
    };
    let mut e = 0.0;
    for i in 0..t.len() {
        let x = t[i];
        if model >= 2 {
            e = if !uniform || i % 64 == 0 {
                (-x / tau).exp()
            } else {
                e * step
            };
        }
        let r = match model {
            0 => [1.0, 0.0, 0.0],
            1 => [1.0, x - mid, 0.0],
            2 => [1.0, e, 0.0],
            _ => [1.0, x - mid, e],
        };
        let wi = w[i];
        let yi = f[i];
        yy += wi * yi * yi;
        for p in 0..k {
            v[p] += wi * r[p] * yi;
            for q in 0..k {
                a[p][q] += wi * r[p] * r[q];
            }
        }
    }
    let beta = solve(a, v, k)?;
    let rss = yy - (0..k).map(|p| beta[p] * v[p]).sum::<f64>();
    Some((rss.max(0.0), beta))
}

/// The fit of `fit_model` with the sums that do not depend on the time
/// constant taken once per trace: each further time constant then costs one
/// pass of four products per point instead of a full normal-equation build.
/// The sums are the same products in the same order as `fit_model`'s, so
/// the results agree to rounding.
struct FitData<'a> {
    t: &'a [f64],
    f: &'a [f64],
    w: &'a [f64],
    mid: f64,
    uniform: bool,
    /// sum w, sum w x, sum w x x, sum w y, sum w x y, sum w y y (x = t - mid).
    sw: f64,
    swx: f64,
    swxx: f64,
    swy: f64,
    swxy: f64,
    swyy: f64,
    /// Per point, last first: w, w x, w y, w (the coefficients of the
    /// exponential sums as polynomials in exp(-dt / tau)); uniform grids only.
    coef: Vec<[f64; 4]>,
}

/// Sums with the exponential term e = exp(-t / tau).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
struct ExpSums {
    swe: f64,
    swee: f64,
    swxe: f64,
    swex: f64,
    swey: f64,
}

impl<'a> FitData<'a> {
    fn new(t: &'a [f64], f: &'a [f64], w: &'a [f64], mid: f64) -> FitData<'a> {
        let uniform = t.len() > 2 && ((t[2] - t[1]) - (t[1] - t[0])).abs() < 1e-12;
        let mut d = FitData {
            t,
            f,
            w,
            mid,
            uniform,
            sw: 0.0,
            swx: 0.0,
            swxx: 0.0,
            swy: 0.0,
            swxy: 0.0,
            swyy: 0.0,
            coef: Vec::new(),
        };
        for ((&x, &yi), &wi) in t.iter().zip(f).zip(w) {
            let x = x - mid;
            d.sw += wi;
            d.swx += wi * x;
            d.swxx += wi * x * x;
            d.swy += wi * yi;
            d.swxy += wi * x * yi;
            d.swyy += wi * yi * yi;
        }
        if uniform {
            d.coef = t
                .iter()
                .zip(f)
                .zip(w)
                .rev()
                .map(|((&x, &yi), &wi)| [wi, wi * (x - mid), wi * yi, wi])
                .collect();
        }
        d
    }

    /// The sums with e = exp(-t / tau) for `L` time constants at once. On a
    /// uniform grid e_i = e_0 r^i with r = exp(-dt / tau), so each sum is e_0
    /// (or e_0^2) times a polynomial in r (in r^2 for sum w e e), evaluated
    /// by Horner's rule: no `exp` per point. One Horner chain is
    /// latency-bound; the `4 L` chains of one pass interleave (and
    /// vectorize), each with the same operations in the same order as a
    /// single time constant alone (`exp_sums_one`, checked in a test).
    fn exp_sums<const L: usize>(&self, taus: [f64; L]) -> [ExpSums; L] {
        if !self.uniform {
            return taus.map(|tau| self.exp_sums_direct(tau));
        }
        let t = self.t;
        let r = taus.map(|tau| (-(t[1] - t[0]) / tau).exp());
        let acc = horner(&self.coef, r);
        std::array::from_fn(|l| {
            let e0 = (-t[0] / taus[l]).exp();
            let swxe = e0 * acc[1][l];
            ExpSums {
                swe: e0 * acc[0][l],
                swee: e0 * e0 * acc[3][l],
                swxe,
                swex: swxe,
                swey: e0 * acc[2][l],
            }
        })
    }

    /// One time constant at a time by Horner's rule: the code `exp_sums`
    /// was derived from, kept as its oracle.
    #[cfg(test)]
    fn exp_sums_one(&self, tau: f64) -> ExpSums {
        if !self.uniform {
            return self.exp_sums_direct(tau);
        }
        let t = self.t;
        let r = (-(t[1] - t[0]) / tau).exp();
        let e0 = (-t[0] / tau).exp();
        let mul = [r, r, r, r * r];
        let mut acc = [0.0f64; 4];
        for c in &self.coef {
            for q in 0..4 {
                acc[q] = acc[q] * mul[q] + c[q];
            }
        }
        let swxe = e0 * acc[1];
        ExpSums {
            swe: e0 * acc[0],
            swee: e0 * e0 * acc[3],
            swxe,
            swex: swxe,
            swey: e0 * acc[2],
        }
    }

    /// The sums point by point, one `exp` each: grids that are not uniform
    /// (and the oracle of the polynomial form).
    fn exp_sums_direct(&self, tau: f64) -> ExpSums {
        let mut s = ExpSums {
            swe: 0.0,
            swee: 0.0,
            swxe: 0.0,
            swex: 0.0,
            swey: 0.0,
        };
        for ((&x, &yi), &wi) in self.t.iter().zip(self.f).zip(self.w) {
            let e = (-x / tau).exp();
            let xm = x - self.mid;
            let we = wi * e;
            s.swe += we;
            s.swee += we * e;
            s.swxe += wi * xm * e;
            s.swex += we * xm;
            s.swey += we * yi;
        }
        s
    }

    /// (RSS, beta) of `model`; `e` must hold the sums for the model's tau
    /// when the model has an exponential term.
    fn fit(&self, model: u8, e: Option<&ExpSums>) -> Option<(f64, [f64; 3])> {
        let k = model_cols(model);
        let mut a = [[0.0f64; 3]; 3];
        let mut v = [0.0f64; 3];
        a[0][0] = self.sw;
        v[0] = self.swy;
        match (model, e) {
            (0, _) => {}
            (1, _) => {
                a[0][1] = self.swx;
                a[1][0] = self.swx;
                a[1][1] = self.swxx;
                v[1] = self.swxy;
            }
            (2, Some(e)) => {
                a[0][1] = e.swe;
                a[1][0] = e.swe;
                a[1][1] = e.swee;
                v[1] = e.swey;
            }
            (_, Some(e)) => {
                a[0][1] = self.swx;
                a[1][0] = self.swx;
                a[1][1] = self.swxx;
                a[0][2] = e.swe;
                a[2][0] = e.swe;
                a[1][2] = e.swxe;
                a[2][1] = e.swex;
                a[2][2] = e.swee;
                v[1] = self.swxy;
                v[2] = e.swey;
            }
            _ => return None,
        }
        let beta = solve(a, v, k)?;
        let rss = self.swyy - (0..k).map(|p| beta[p] * v[p]).sum::<f64>();
        Some((rss.max(0.0), beta))
    }
}

/// Horner's rule for `L` time constants: per lane l, the four polynomials
/// with coefficients `coef[..][q]` (highest power first) at r[l] (at r[l]²
/// for q = 3), in the operations of one polynomial alone.
fn horner<const L: usize>(coef: &[[f64; 4]], r: [f64; L]) -> [[f64; L]; 4] {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU reported AVX.
            return unsafe { horner_avx(coef, r) };
        }
    }
    horner_body(coef, r)
}

/// `horner` compiled for AVX: four lanes per instruction, the same
/// operations (no fused multiply-adds), so the same sums.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn horner_avx<const L: usize>(coef: &[[f64; 4]], r: [f64; L]) -> [[f64; L]; 4] {
    horner_body(coef, r)
}

#[inline(always)]
fn horner_body<const L: usize>(coef: &[[f64; 4]], r: [f64; L]) -> [[f64; L]; 4] {
    // Sum-major (acc[q][l]): each coefficient is broadcast over the lanes,
    // which the compiler keeps in vector registers.
    let mul = [r, r, r, r.map(|r| r * r)];
    let mut acc = [[0.0f64; L]; 4];
    for c in coef {
        for q in 0..4 {
            for l in 0..L {
                acc[q][l] = acc[q][l] * mul[q][l] + c[q];
            }
        }
    }
    acc
}

/// Points of the trace used for fitting: every other one (the trace is
/// sampled several times per window, so this loses nothing but time).
const FIT_STRIDE: usize = 2;

/// Time constants of the coarse grid summed per pass over the trace.
const GRID_LANES: usize = 8;

/// The exponential models 2 and 3: a coarse grid of time constants, then
/// golden-section refinement of each model's best; per model, (score, tau,
/// beta) at the refined time constant, None when no grid point fitted.
fn exp_search(
    data: &FitData,
    dur: f64,
    score: impl Fn(f64, f64) -> f64,
) -> [Option<(f64, f64, [f64; 3])>; 2] {
    // Coarse grid of time constants (shared by both exponential models),
    // then golden-section refinement for each. The exponential sums are
    // taken for several time constants per pass (see `FitData::exp_sums`):
    // the grid `GRID_LANES` at a time, and the two models' searches in
    // lockstep.
    let models = [2u8, 3];
    // The time constant is a parameter too.
    let ks = models.map(|m| model_cols(m) as f64 + 1.0);
    let sc = |i: usize, es: &ExpSums| {
        data.fit(models[i], Some(es))
            .map_or(f64::INFINITY, |(rss, _)| score(rss, ks[i]))
    };
    let mut taus: Vec<f64> = Vec::with_capacity(24);
    let mut tau = 0.000_5;
    while tau <= 0.3 && tau <= 3.0 * dur {
        taus.push(tau);
        tau *= 1.35;
    }
    let mut grid_best: [Option<(f64, f64)>; 2] = [None; 2];
    for group in taus.chunks(GRID_LANES) {
        // The last group is padded with its last time constant.
        let mut lanes = [group[group.len() - 1]; GRID_LANES];
        lanes[..group.len()].copy_from_slice(group);
        let sums = data.exp_sums(lanes);
        for (tau, es) in group.iter().zip(&sums) {
            for (i, gb) in grid_best.iter_mut().enumerate() {
                if let Some((rss, _)) = data.fit(models[i], Some(es)) {
                    let s = score(rss, ks[i]);
                    if gb.is_none_or(|g| s < g.0) {
                        *gb = Some((s, *tau));
                    }
                }
            }
        }
    }
    let mut out = [None; 2];
    let Some(pad) = grid_best[0].or(grid_best[1]).map(|g| g.1) else {
        return out;
    };
    // A model without a grid fit searches alongside the other (its results
    // unused), so every pass has both models' lanes.
    let mut st = grid_best.map(|g| Golden::new(g.map_or(pad, |g| g.1)));
    // Each step's comparison needs the previous step's value, so each pass
    // also takes both points the step after could try: two steps per pass.
    // First pass: the two interior points, and both first steps.
    let lanes = |s: &Golden| {
        let (l, r) = (s.narrowed(true), s.narrowed(false));
        [s.c, s.d, l.newest(), r.newest()]
    };
    let l = st.each_ref().map(lanes);
    let s = data.exp_sums::<8>(std::array::from_fn(|j| l[j / 4][j % 4].exp()));
    for (i, g) in st.iter_mut().enumerate() {
        (g.fc, g.fd) = (sc(i, &s[4 * i]), sc(i, &s[4 * i + 1]));
        let left = g.fc < g.fd;
        *g = g.narrowed(left);
        g.set(sc(i, &s[4 * i + if left { 2 } else { 3 }]));
    }
    // Steps 2 to 13 in pairs: each pass takes the next step's point (its
    // comparison is known) and both points of the step after it.
    for _ in 0..(GOLDEN_STEPS - 2) / 2 {
        let nx = st.map(|g| g.narrowed(g.fc < g.fd));
        let lanes = |g: &Golden| {
            let (l, r) = (g.narrowed(true), g.narrowed(false));
            [g.newest(), l.newest(), r.newest()]
        };
        let l = nx.each_ref().map(lanes);
        let s = data.exp_sums::<6>(std::array::from_fn(|j| l[j / 3][j % 3].exp()));
        for (i, (g, n)) in st.iter_mut().zip(nx).enumerate() {
            *g = n;
            g.set(sc(i, &s[3 * i]));
            let left = g.fc < g.fd;
            *g = g.narrowed(left);
            g.set(sc(i, &s[3 * i + if left { 1 } else { 2 }]));
        }
    }
    // The last step narrows the bracket; the value at its new point is
    // never compared, so it is not taken.
    let tau = st.map(|g| {
        let g = g.narrowed(g.fc < g.fd);
        (0.5 * (g.a + g.b)).exp()
    });
    let s = data.exp_sums(tau);
    for i in 0..2 {
        if grid_best[i].is_none() {
            continue;
        }
        out[i] = data
            .fit(models[i], Some(&s[i]))
            .map(|(rss, beta)| (score(rss, ks[i]), tau[i], beta));
    }
    out
}

/// Golden-section steps of the time-constant refinement (even: `exp_search`
/// takes them one, then two per pass, then one).
const GOLDEN_STEPS: usize = 14;
const _: () = assert!(GOLDEN_STEPS >= 2 && GOLDEN_STEPS.is_multiple_of(2));

/// One model's golden-section search on ln(tau): bracket [a, b], interior
/// points c < d with their scores.
#[derive(Clone, Copy)]
struct Golden {
    a: f64,
    b: f64,
    c: f64,
    d: f64,
    fc: f64,
    fd: f64,
    /// Whether the newest point is c (else d).
    left: bool,
}

impl Golden {
    const G: f64 = 0.618_033_988_75;

    /// The bracket one grid step either side of the grid's best `t0`.
    fn new(t0: f64) -> Golden {
        let (a, b) = ((t0 / 1.35).ln(), (t0 * 1.35).ln());
        Golden {
            a,
            b,
            c: b - Self::G * (b - a),
            d: a + Self::G * (b - a),
            fc: f64::NAN,
            fd: f64::NAN,
            left: false,
        }
    }

    /// One step: drops [d, b] when `left` (fc < fd), else [a, c], and
    /// places a new interior point, whose score `set` fills in.
    fn narrowed(&self, left: bool) -> Golden {
        let mut g = *self;
        g.left = left;
        if left {
            g.b = g.d;
            g.d = g.c;
            g.fd = g.fc;
            g.c = g.b - Self::G * (g.b - g.a);
        } else {
            g.a = g.c;
            g.c = g.d;
            g.fc = g.fd;
            g.d = g.a + Self::G * (g.b - g.a);
        }
        g
    }

    fn newest(&self) -> f64 {
        if self.left {
            self.c
        } else {
            self.d
        }
    }

    fn set(&mut self, v: f64) {
        if self.left {
            self.fc = v;
        } else {
            self.fd = v;
        }
    }
}

/// Fits the trace and reads the chirp off the chosen model.
pub fn chirp(tr: &Trace) -> ChirpFit {
    let n = tr.t.len();
    if n < 4 {
        return ChirpFit::default();
    }
    let dur = tr.t[n - 1];
    // The settled half: the points at or after dur/2. A trace's times rise,
    // so those are the run from the first of them to the end, read in place;
    // times in another order gather the points one by one.
    let in_half = |x: f64| x >= dur / 2.0;
    let h0 = tr.t.iter().position(|&x| in_half(x)).unwrap_or(n);
    let half: Option<Vec<usize>> = if tr.t[h0..].iter().all(|&x| in_half(x)) {
        None
    } else {
        Some((0..n).filter(|&i| in_half(tr.t[i])).collect())
    };
    let pick = |v: &'_ [f64]| -> Vec<f64> {
        half.as_ref()
            .map_or_else(Vec::new, |ix| ix.iter().map(|&i| v[i]).collect())
    };
    let (hv_g, hw_g) = (pick(&tr.f), pick(&tr.w));
    let (hv, hw) = if half.is_some() {
        (&hv_g[..], &hw_g[..])
    } else {
        (&tr.f[h0..], &tr.w[h0..])
    };
    let settled_raw = weighted_median(hv, hw);
    let raw =
        tr.f.iter()
            .map(|f| (f - settled_raw).abs())
            .fold(0.0, f64::max);

    let wsum: f64 = tr.w.iter().sum();
    if wsum <= 0.0 {
        return ChirpFit::default();
    }
    // Every `FIT_STRIDE`th point: the weights' sum first, then the three
    // vectors in one pass.
    let m = n.div_ceil(FIT_STRIDE);
    let ws: f64 = tr.w.iter().step_by(FIT_STRIDE).sum();
    let (mut t, mut f, mut w) = (
        Vec::with_capacity(m),
        Vec::with_capacity(m),
        Vec::with_capacity(m),
    );
    for i in (0..n).step_by(FIT_STRIDE) {
        t.push(tr.t[i]);
        f.push(tr.f[i]);
        w.push(tr.w[i] / ws.max(1e-300) * m as f64);
    }
    let mid = dur / 2.0;
    // Trace points overlap: about one independent point per window. The
    // criterion is Akaike's (2 per parameter) on that effective count.
    let n_eff = (dur / TRACE_WINDOW_S).max(2.0);
    let score = |rss: f64, k: f64| n_eff * (rss.max(1e-18) / m as f64).ln() + k * 2.0;

    // (score, model, tau, beta); model u8::MAX: no fit yet.
    let data = FitData::new(&t, &f, &w, mid);
    let mut best: (f64, u8, f64, [f64; 3]) = (f64::INFINITY, u8::MAX, 0.0, [0.0; 3]);
    for model in [0u8, 1] {
        if let Some((rss, beta)) = data.fit(model, None) {
            let sc = score(rss, model_cols(model) as f64);
            if sc < best.0 {
                best = (sc, model, 0.0, beta);
            }
        }
    }
    for (model, r) in [2u8, 3].into_iter().zip(exp_search(&data, dur, score)) {
        if let Some((s2, tau, beta)) = r {
            if s2 < best.0 {
                best = (s2, model, tau, beta);
            }
        }
    }
    if best.1 == u8::MAX {
        return ChirpFit {
            settled_hz: settled_raw,
            raw_hz: raw,
            ..Default::default()
        };
    }
    let (model_id, tau, beta) = (best.1, best.2, best.3);
    let model: Vec<f64> =
        tr.t.iter()
            .map(|&x| {
                let r = basis(model_id, tau, x, mid);
                (0..model_cols(model_id)).map(|c| beta[c] * r[c]).sum()
            })
            .collect();
    let mv_g = pick(&model);
    let mv = if half.is_some() {
        &mv_g[..]
    } else {
        &model[h0..]
    };
    // The constant model is one value at every point: its weighted median
    // is that value (no sort needed).
    let settled = if model_id == 0
        && mv.first().is_some_and(|v| v.is_finite())
        && hw.iter().any(|&w| w > 0.0)
    {
        mv[0]
    } else {
        weighted_median(mv, hw)
    };
    let chirp = model
        .iter()
        .map(|v| (v - settled).abs())
        .fold(0.0, f64::max);
    let res: f64 = (0..n)
        .map(|i| tr.w[i] / wsum * (tr.f[i] - model[i]).powi(2))
        .sum::<f64>();
    ChirpFit {
        settled_hz: settled,
        // The model smooths the trace; it can never deviate more than the trace did.
        chirp_hz: if model_id == 0 { 0.0 } else { chirp.min(raw) },
        raw_hz: raw,
        noise_hz: res.sqrt(),
        model: model_id,
        tau_s: tau,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The chirp fit with its working vectors gathered one by one: the
    /// code `chirp` was derived from; test oracle.
    fn chirp_reference(tr: &Trace) -> ChirpFit {
        let n = tr.t.len();
        if n < 4 {
            return ChirpFit::default();
        }
        let dur = tr.t[n - 1];
        let half: Vec<usize> = (0..n).filter(|&i| tr.t[i] >= dur / 2.0).collect();
        let hv: Vec<f64> = half.iter().map(|&i| tr.f[i]).collect();
        let hw: Vec<f64> = half.iter().map(|&i| tr.w[i]).collect();
        let settled_raw = weighted_median(&hv, &hw);
        let raw =
            tr.f.iter()
                .map(|f| (f - settled_raw).abs())
                .fold(0.0, f64::max);

        let wsum: f64 = tr.w.iter().sum();
        if wsum <= 0.0 {
            return ChirpFit::default();
        }
        let idx: Vec<usize> = (0..n).step_by(FIT_STRIDE).collect();
        let m = idx.len();
        let t: Vec<f64> = idx.iter().map(|&i| tr.t[i]).collect();
        let f: Vec<f64> = idx.iter().map(|&i| tr.f[i]).collect();
        let ws: f64 = idx.iter().map(|&i| tr.w[i]).sum();
        let w: Vec<f64> = idx
            .iter()
            .map(|&i| tr.w[i] / ws.max(1e-300) * m as f64)
            .collect();
        let mid = dur / 2.0;
        // Trace points overlap: about one independent point per window. The
        // criterion is Akaike's (2 per parameter) on that effective count.
        let n_eff = (dur / TRACE_WINDOW_S).max(2.0);
        let score = |rss: f64, k: f64| n_eff * (rss.max(1e-18) / m as f64).ln() + k * 2.0;

        // (score, model, tau, beta); model u8::MAX: no fit yet.
        let data = FitData::new(&t, &f, &w, mid);
        let mut best: (f64, u8, f64, [f64; 3]) = (f64::INFINITY, u8::MAX, 0.0, [0.0; 3]);
        for model in [0u8, 1] {
            if let Some((rss, beta)) = data.fit(model, None) {
                let sc = score(rss, model_cols(model) as f64);
                if sc < best.0 {
                    best = (sc, model, 0.0, beta);
                }
            }
        }
        for (model, r) in [2u8, 3].into_iter().zip(exp_search(&data, dur, score)) {
            if let Some((s2, tau, beta)) = r {
                if s2 < best.0 {
                    best = (s2, model, tau, beta);
                }
            }
        }
        if best.1 == u8::MAX {
            return ChirpFit {
                settled_hz: settled_raw,
                raw_hz: raw,
                ..Default::default()
            };
        }
        let (model_id, tau, beta) = (best.1, best.2, best.3);
        let model: Vec<f64> =
            tr.t.iter()
                .map(|&x| {
                    let r = basis(model_id, tau, x, mid);
                    (0..model_cols(model_id)).map(|c| beta[c] * r[c]).sum()
                })
                .collect();
        let mv: Vec<f64> = half.iter().map(|&i| model[i]).collect();
        // The constant model is one value at every point: its weighted median
        // is that value (no sort needed).
        let settled = if model_id == 0
            && mv.first().is_some_and(|v| v.is_finite())
            && hw.iter().any(|&w| w > 0.0)
        {
            mv[0]
        } else {
            weighted_median(&mv, &hw)
        };
        let chirp = model
            .iter()
            .map(|v| (v - settled).abs())
            .fold(0.0, f64::max);
        let wn: Vec<f64> = tr.w.iter().map(|v| v / wsum).collect();
        let res: f64 = (0..n)
            .map(|i| wn[i] * (tr.f[i] - model[i]).powi(2))
            .sum::<f64>();
        ChirpFit {
            settled_hz: settled,
            // The model smooths the trace; it can never deviate more than the trace did.
            chirp_hz: if model_id == 0 { 0.0 } else { chirp.min(raw) },
            raw_hz: raw,
            noise_hz: res.sqrt(),
            model: model_id,
            tau_s: tau,
        }
    }

    /// Kay's estimate one window at a time, the weight by `hypot`: the
    /// `kay_from_products` `trace` was derived from; test oracle.
    fn kay_reference(p: &[Complex64], w: &[f64], fs: f64) -> (f64, f64) {
        let mut acc = Complex64::new(0.0, 0.0);
        for (pk, wk) in p.iter().zip(w) {
            acc += pk * *wk;
        }
        (acc.arg() * fs / (2.0 * PI), acc.norm())
    }

    /// The plain pre-filter and trace `trace` was derived from; test oracle.
    fn trace_reference(z: &[Complex32], fs: f64, t50r: f64, t50f: f64) -> Trace {
        let k = crate::dsp::edges::gaussian_kernel(PREFILTER_SIGMA_S * fs);
        let h = k.len() / 2;
        let n = ((TRACE_WINDOW_S * fs).round() as usize).max(3);
        // Only the stretch the Kay windows will read needs filtering.
        let lo = (t50r - n as f64).max(0.0) as usize;
        let hi = ((t50f + n as f64 + 2.0) as usize).min(z.len());
        let mut zf = vec![Complex32::new(0.0, 0.0); z.len()];
        // Where the whole kernel fits: tap by tap over all outputs at once, a
        // loop the compiler vectorizes; each output still adds its taps in
        // kernel order, so the sums are the same as one output at a time.
        let (a, b) = (lo.max(h), hi.min(z.len().saturating_sub(h)));
        if a < b {
            let m = b - a;
            let src_re: Vec<f64> = z[a - h..b + h].iter().map(|v| v.re as f64).collect();
            let src_im: Vec<f64> = z[a - h..b + h].iter().map(|v| v.im as f64).collect();
            let mut re = vec![0.0f64; m];
            let mut im = vec![0.0f64; m];
            for (j, &w) in k.iter().enumerate() {
                for (o, v) in re.iter_mut().zip(&src_re[j..j + m]) {
                    *o += v * w;
                }
                for (o, v) in im.iter_mut().zip(&src_im[j..j + m]) {
                    *o += v * w;
                }
            }
            for ((o, r), i) in zf[a..b].iter_mut().zip(&re).zip(&im) {
                *o = Complex32::new(*r as f32, *i as f32);
            }
        }
        // The few outputs near the ends of `z`, with a partial kernel.
        for (i, o) in zf.iter_mut().enumerate().take(hi).skip(lo) {
            if i >= a && i < b {
                continue;
            }
            let mut acc = Complex64::new(0.0, 0.0);
            for (j, w) in k.iter().enumerate() {
                if let Some(v) = (i + j).checked_sub(h).and_then(|q| z.get(q)) {
                    acc += Complex64::new(v.re as f64, v.im as f64) * *w;
                }
            }
            *o = Complex32::new(acc.re as f32, acc.im as f32);
        }
        let z = &zf[..];
        let w = kay_weights(n);
        // Lag-one products over the filtered stretch, formed once: trace points
        // are closer than a window, so each product serves several windows.
        let p_lo = lo.min(z.len());
        let p_hi = hi.min(z.len().saturating_sub(1)).max(p_lo);
        let prod: Vec<Complex64> = (p_lo..p_hi).map(|i| lag_product(z[i], z[i + 1])).collect();
        let step = TRACE_STEP_S * fs;
        let mut out = Trace::default();
        let mut c = t50r;
        while c <= t50f {
            let start = (c - (n as f64 - 1.0) / 2.0).round();
            if start >= 0.0 && (start as usize) + n <= z.len() {
                let s0 = start as usize;
                // Windows inside the filtered stretch read the shared products.
                let (f, wt) = if s0 >= p_lo && s0 + w.len() <= p_hi {
                    kay_reference(&prod[s0 - p_lo..s0 - p_lo + w.len()], &w, fs)
                } else {
                    let p: Vec<Complex64> = z[s0..s0 + n]
                        .windows(2)
                        .map(|pair| lag_product(pair[0], pair[1]))
                        .collect();
                    kay_reference(&p, &w, fs)
                };
                out.t.push((c - t50r) / fs);
                out.f.push(f);
                out.w.push(wt);
            }
            c += step;
        }
        out
    }

    fn tone(fs: f64, n: usize, f: impl Fn(f64) -> f64) -> Vec<Complex32> {
        let mut ph = 0.0;
        (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                ph += 2.0 * PI * f(t) / fs;
                Complex32::new(ph.cos() as f32, ph.sin() as f32)
            })
            .collect()
    }

    /// A keyed tone with a chirp and deterministic noise (a plain LCG).
    fn noisy_tone(fs: f64, n: usize, seed: u64) -> Vec<Complex32> {
        let mut st = seed;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        tone(fs, n, |t| 7.0 + 20.0 * (-t / 0.005).exp())
            .into_iter()
            .enumerate()
            .map(|(i, v)| {
                let g = (i as f32 / 40.0).min(1.0) * ((n - i) as f32 / 40.0).min(1.0);
                Complex32::new(
                    v.re * g + 0.05 * rnd() as f32,
                    v.im * g + 0.05 * rnd() as f32,
                )
            })
            .collect()
    }

    #[test]
    fn dispatched_kernels_equal_their_plain_builds() {
        // The AVX builds (taken on this CPU when it has AVX) against the
        // plain ones: the same operations, so bit-identical.
        let k = crate::dsp::edges::gaussian_kernel(PREFILTER_SIGMA_S * 12_000.0);
        for m in [0, 1, 15, 16, 33, 70, 901] {
            let src: Vec<f64> = (0..m + k.len() - 1)
                .map(|i| ((i * 7919) % 101) as f64 - 50.3)
                .collect();
            let (mut a, mut b) = (vec![0.0; m], vec![0.0; m]);
            convolve_valid(&src, &k, &mut a);
            convolve_valid_body::<CONV_BLOCK>(&src, &k, &mut b);
            assert_eq!(a, b, "{m}");
        }
        let coef: Vec<[f64; 4]> = (0..157)
            .map(|i| [1.0, i as f64 * 0.3 - 20.0, ((i * 31) % 7) as f64, 0.5])
            .collect();
        let r = [0.99, 0.9, 0.5, 0.999, 0.7, 0.1, 0.95, 0.8];
        assert_eq!(horner(&coef, r), horner_body(&coef, r));
        assert_eq!(horner(&coef, [0.97, 0.6]), horner_body(&coef, [0.97, 0.6]));
    }

    /// Gaussian elimination with the size known at run time: the `solve`
    /// the per-size builds were derived from; test oracle.
    fn solve_reference(a: [[f64; 3]; 3], b: [f64; 3], k: usize) -> Option<[f64; 3]> {
        let mut m = a;
        let mut v = b;
        for p in 0..k {
            let piv = (p..k).max_by(|&i, &j| m[i][p].abs().total_cmp(&m[j][p].abs()))?;
            if m[piv][p].abs() < 1e-12 * (1.0 + m[p][p].abs()) {
                return None;
            }
            m.swap(p, piv);
            v.swap(p, piv);
            for r in p + 1..k {
                let f = m[r][p] / m[p][p];
                let pivot_row = m[p];
                for (c, x) in m[r].iter_mut().enumerate().take(k).skip(p) {
                    *x -= f * pivot_row[c];
                }
                v[r] -= f * v[p];
            }
        }
        let mut beta = [0.0; 3];
        for p in (0..k).rev() {
            let mut s = v[p];
            for c in p + 1..k {
                s -= m[p][c] * beta[c];
            }
            beta[p] = s / m[p][p];
        }
        Some(beta)
    }

    #[test]
    fn sized_solve_equals_the_runtime_sized_solve() {
        // The same operations in the same order: equal bit for bit, None
        // alike, over random systems of each size with ties between pivot
        // candidates and singular ones mixed in.
        let mut st = 7u64;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let mut solved = 0;
        for round in 0..3000 {
            let mut a = [[0.0f64; 3]; 3];
            for row in a.iter_mut() {
                for x in row.iter_mut() {
                    *x = match round % 5 {
                        0 => (4.0 * rnd()).round(),
                        _ => rnd() * 10f64.powi(round % 7 - 3),
                    };
                }
            }
            if round % 11 == 0 {
                a[1] = a[0];
            }
            let b = [rnd(), rnd(), rnd()];
            for k in 0..=3 {
                let (x, y) = (solve(a, b, k), solve_reference(a, b, k));
                assert_eq!(
                    x.map(|v| v.map(f64::to_bits)),
                    y.map(|v| v.map(f64::to_bits))
                );
                solved += x.is_some() as usize;
            }
        }
        assert!(solved > 6000, "{solved}");
    }

    #[test]
    fn inline_round_equals_round() {
        // Equal as numbers (a zero may differ in sign, which `start as
        // usize` ignores): halves, their neighbours, negatives, values
        // where the fraction runs out, and non-finite ones.
        let mut st = 3u64;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let mut xs = vec![0.0, -0.0, 0.5, -0.5, 1.5, -1.5, 2.5, 0.49999999999999994];
        xs.extend([f64::INFINITY, f64::NEG_INFINITY, 1e300, -1e300]);
        for e in [0.0f64, 1.0, 52.0, 53.0] {
            let p = 2f64.powf(e);
            for d in [-1.0, -0.5, 0.0, 0.5, 1.0] {
                xs.extend([p + d, -(p + d)]);
            }
        }
        for i in 0..20_000 {
            let x = rnd() * 10f64.powi(i % 9);
            let h = (x.trunc() + 0.5).copysign(x);
            xs.extend([x, h, h.next_up(), h.next_down()]);
        }
        for x in xs {
            let (a, b) = (round_index(x), x.round());
            assert!(a == b, "{x:e}: {a} {b}");
        }
        assert!(round_index(f64::NAN).is_nan());
    }

    #[test]
    fn chirp_equals_the_gathering_chirp() {
        // Same operations on the same values in the same order, so every
        // figure is identical (compared bit for bit). Traces: noisy elements
        // of several lengths (every model wins somewhere), constant weights
        // as the mean-element trace has, some zero weights, and times out of
        // order, where the settled half is not one run at the end.
        let same = |a: ChirpFit, b: ChirpFit, what: &str| {
            let bits = |c: ChirpFit| {
                [c.settled_hz, c.chirp_hz, c.raw_hz, c.noise_hz, c.tau_s].map(f64::to_bits)
            };
            assert_eq!((bits(a), a.model), (bits(b), b.model), "{what}");
        };
        let mut models = [0usize; 4];
        for seed in 1..=24u64 {
            let fs = 12_000.0;
            let n = 300 + 97 * seed as usize;
            let z = noisy_tone(fs, n, seed);
            let tr = trace(&z, fs, 40.0, n as f64 - 41.0);
            let c = chirp(&tr);
            models[c.model as usize] += 1;
            same(c, chirp_reference(&tr), &format!("seed {seed}"));
            let mut flat = tr.clone();
            flat.w.iter_mut().for_each(|w| *w = 1.0);
            same(chirp(&flat), chirp_reference(&flat), "flat");
            let mut holes = tr.clone();
            for w in holes.w.iter_mut().step_by(3) {
                *w = 0.0;
            }
            same(chirp(&holes), chirp_reference(&holes), "holes");
            let mut mixed = tr.clone();
            let k = mixed.t.len();
            mixed.t.swap(k / 3, k - 5);
            mixed.t.swap(1, k - 2);
            same(chirp(&mixed), chirp_reference(&mixed), "mixed");
        }
        // Synthetic traces of each model's shape, with a little noise.
        for (shape, seed) in (0..4).flat_map(|s| (0..6u64).map(move |k| (s, k))) {
            let mut st = seed + 99;
            let mut rnd = move || {
                st = st
                    .wrapping_mul(6_364_136_223_846_793_005)
                    .wrapping_add(1_442_695_040_888_963_407);
                (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
            };
            let k = 200 + 50 * seed as usize;
            let t: Vec<f64> = (0..k).map(|i| i as f64 * TRACE_STEP_S).collect();
            let f = t
                .iter()
                .map(|&x| {
                    let lin = if shape % 2 == 1 { 300.0 * x } else { 0.0 };
                    let ex = if shape >= 2 {
                        15.0 * (-x / 0.004).exp()
                    } else {
                        0.0
                    };
                    3.0 + lin + ex + 0.5 * rnd()
                })
                .collect();
            let w = (0..k).map(|i| 1.0 + (i as f64 / 7.0).sin().abs()).collect();
            let tr = Trace { t, f, w };
            let c = chirp(&tr);
            models[c.model as usize] += 1;
            same(
                c,
                chirp_reference(&tr),
                &format!("shape {shape} seed {seed}"),
            );
        }
        let clean = trace(&tone(12_000.0, 2400, |_| 5.0), 12_000.0, 40.0, 2300.0);
        same(chirp(&clean), chirp_reference(&clean), "clean");
        for short in 0..6 {
            let tr = Trace {
                t: (0..short).map(|i| i as f64 * 0.001).collect(),
                f: (0..short).map(|i| (i * i) as f64).collect(),
                w: vec![1.0; short],
            };
            same(chirp(&tr), chirp_reference(&tr), "short");
        }
        assert!(models.iter().all(|&c| c > 0), "{models:?}");
    }

    #[test]
    fn blocked_trace_equals_the_plain_trace() {
        // Fast path against the slow obvious one: the same sums in the same
        // order, so the times and frequencies are identical, including
        // windows near the ends of `z` where the pre-filter's kernel is cut.
        // The weights differ by `hypot` against sqrt(re² + im²): within a
        // few units in the last place (each correctly rounded or nearly).
        for (fs, n) in [(12_000.0, 2000), (12_000.0, 150), (8_000.0, 997)] {
            let z = noisy_tone(fs, n, n as u64);
            for (r, f) in [
                (40.0, n as f64 - 41.0),
                (0.0, n as f64 - 1.0),
                (3.3, 17.9),
                (n as f64 / 3.0, n as f64 / 2.0),
                (5.0, n as f64 + 3.0),
            ] {
                let (a, b) = (trace(&z, fs, r, f), trace_reference(&z, fs, r, f));
                assert_eq!((&a.t, &a.f), (&b.t, &b.f), "{fs} {n} {r} {f}");
                assert_eq!(a.w.len(), b.w.len());
                for (x, y) in a.w.iter().zip(&b.w) {
                    assert!((x - y).abs() <= 4.0 * f64::EPSILON * y, "{x} {y}");
                }
            }
        }
    }

    /// A trace-like grid of `n` points (steps of 6 samples at 12 kHz
    /// accumulated from `c0`, so not exactly uniform) with made-up values
    /// and weights.
    fn fit_grid(n: usize, c0: f64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let (fs, mut c) = (12_000.0, c0);
        let mut t = Vec::new();
        for _ in 0..n {
            t.push((c - c0) / fs + 0.000_25);
            c += 6.0;
        }
        let f: Vec<f64> = (0..n).map(|i| ((i * 7919) % 13) as f64 - 6.0).collect();
        let w: Vec<f64> = (0..n).map(|i| 0.5 + ((i * 31) % 7) as f64 * 0.1).collect();
        (t, f, w)
    }

    #[test]
    fn polynomial_exp_sums_equal_the_direct_sums() {
        // Horner's rule in r = exp(-dt / tau) against one exp per point, on
        // a grid built like the trace's (accumulated steps, not exactly
        // uniform) and starting off zero.
        let (t, f, w) = fit_grid(417, 1234.567);
        let d = FitData::new(&t, &f, &w, t[t.len() - 1] / 2.0);
        assert!(d.uniform);
        let close = |a: f64, b: f64, scale: f64| (a - b).abs() <= 1e-12 * scale;
        for tau in [0.000_5, 0.0011, 0.004, 0.02, 0.1, 0.3] {
            let (p, q) = (d.exp_sums_one(tau), d.exp_sums_direct(tau));
            // Scales: the sums of absolute terms.
            let sa = q.swe;
            let sx: f64 = t
                .iter()
                .zip(&w)
                .map(|(x, wi)| wi * (x - d.mid).abs() * (-x / tau).exp())
                .sum();
            let sy: f64 = t
                .iter()
                .zip(&w)
                .zip(&f)
                .map(|((x, wi), y)| wi * y.abs() * (-x / tau).exp())
                .sum();
            assert!(close(p.swe, q.swe, sa), "{tau}");
            assert!(close(p.swee, q.swee, q.swee), "{tau}");
            assert!(
                close(p.swxe, q.swxe, sx) && close(p.swex, q.swex, sx),
                "{tau}"
            );
            assert!(close(p.swey, q.swey, sy), "{tau}");
        }
    }

    /// The search `exp_search` was derived from: the grid one time constant
    /// per pass, then each model's golden section alone; test oracle.
    fn exp_search_reference(
        data: &FitData,
        dur: f64,
        score: impl Fn(f64, f64) -> f64,
    ) -> [Option<(f64, f64, [f64; 3])>; 2] {
        let mut out = [None; 2];
        let mut grid: Vec<(f64, ExpSums)> = Vec::with_capacity(24);
        let mut tau = 0.000_5;
        while tau <= 0.3 && tau <= 3.0 * dur {
            grid.push((tau, data.exp_sums_one(tau)));
            tau *= 1.35;
        }
        for (o, model) in out.iter_mut().zip([2u8, 3]) {
            let k = model_cols(model) as f64 + 1.0;
            let eval = |tau: f64| {
                data.fit(model, Some(&data.exp_sums_one(tau)))
                    .map(|(rss, b)| (score(rss, k), b))
            };
            let mut grid_best: Option<(f64, f64)> = None;
            for (tau, es) in &grid {
                if let Some((rss, _)) = data.fit(model, Some(es)) {
                    let sc = score(rss, k);
                    if grid_best.is_none_or(|g| sc < g.0) {
                        grid_best = Some((sc, *tau));
                    }
                }
            }
            let Some((_, t0)) = grid_best else { continue };
            let (mut a, mut b) = ((t0 / 1.35).ln(), (t0 * 1.35).ln());
            let g = 0.618_033_988_75;
            let sc = |lt: f64| eval(lt.exp()).map_or(f64::INFINITY, |v| v.0);
            let (mut c, mut d) = (b - g * (b - a), a + g * (b - a));
            let (mut fc, mut fd) = (sc(c), sc(d));
            for _ in 0..14 {
                if fc < fd {
                    b = d;
                    d = c;
                    fd = fc;
                    c = b - g * (b - a);
                    fc = sc(c);
                } else {
                    a = c;
                    c = d;
                    fc = fd;
                    d = a + g * (b - a);
                    fd = sc(d);
                }
            }
            let tau = (0.5 * (a + b)).exp();
            *o = eval(tau).map(|(s2, beta)| (s2, tau, beta));
        }
        out
    }

    #[test]
    fn batched_exp_sums_equal_one_at_a_time() {
        // Several time constants per pass against one per pass: the same
        // operations per time constant, so bit-identical.
        let (t, f, w) = fit_grid(233, 77.7);
        let d = FitData::new(&t, &f, &w, t[t.len() - 1] / 2.0);
        assert!(d.uniform);
        let taus = [0.000_5, 0.0011, 0.004, 0.02, 0.1, 0.3, 0.0007, 1e-5];
        let one = taus.map(|tau| d.exp_sums_one(tau));
        assert_eq!(d.exp_sums(taus), one);
        assert_eq!(d.exp_sums([taus[2], taus[5]]), [one[2], one[5]]);
        assert_eq!(d.exp_sums([taus[1]]), [one[1]]);
    }

    #[test]
    fn lockstep_search_equals_the_plain_search() {
        // Grid in groups and the two golden sections in lockstep against the
        // plain search: the same sums and comparisons, so identical results,
        // on chirped, flat, drifting and short traces, uniform or not.
        let mut cases: Vec<Trace> = Vec::new();
        for (n, seed) in [(2400, 1u64), (900, 2), (5000, 3), (260, 4), (130, 5)] {
            let z = noisy_tone(12_000.0, n, seed);
            cases.push(trace(&z, 12_000.0, 40.0, n as f64 - 41.0));
        }
        let z = tone(12_000.0, 3000, |t| -3.0 + 40.0 * t);
        cases.push(trace(&z, 12_000.0, 40.0, 2950.0));
        let z = tone(12_000.0, 3000, |_| 2.0);
        cases.push(trace(&z, 12_000.0, 40.0, 2950.0));
        // Chirps of several sizes and time constants, in noise of several
        // levels: the searches turn both ways at every step somewhere.
        let mut st = 5u64;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        for j in 0..40 {
            let m = 8 + (j * 37) % 400;
            let (amp, tau, noise) = (30.0 * rnd(), 0.002 + 0.02 * (rnd() + 0.5), j as f64 * 0.05);
            let t: Vec<f64> = (0..m).map(|i| i as f64 * TRACE_STEP_S).collect();
            let f = t
                .iter()
                .map(|x| amp * (-x / tau).exp() + 0.5 * x + noise * rnd())
                .collect();
            let w = (0..m).map(|_| 1.0 + 0.5 * rnd()).collect();
            cases.push(Trace { t, f, w });
        }
        // Four points: two to fit, too few for model 3 (its fits fail, and
        // it searches alongside model 2 unused).
        cases.push(Trace {
            t: vec![0.0, 0.001, 0.002, 0.003],
            f: vec![5.0, 3.0, 2.0, 1.5],
            w: vec![1.0; 4],
        });
        // Not uniform: the direct sums.
        let mut nu = cases[0].clone();
        for (i, x) in nu.t.iter_mut().enumerate() {
            *x += 1e-6 * (i % 3) as f64;
        }
        cases.push(nu);
        let (mut searched, mut one_model) = (0, 0);
        for tr in &cases {
            let n = tr.t.len();
            let dur = tr.t[n - 1];
            let m = n.div_ceil(FIT_STRIDE);
            let pick = |v: &[f64]| v.iter().step_by(FIT_STRIDE).copied().collect::<Vec<_>>();
            let (t, f, w) = (pick(&tr.t), pick(&tr.f), pick(&tr.w));
            let data = FitData::new(&t, &f, &w, dur / 2.0);
            let n_eff = (dur / TRACE_WINDOW_S).max(2.0);
            let score = |rss: f64, k: f64| n_eff * (rss.max(1e-18) / m as f64).ln() + k * 2.0;
            let fast = exp_search(&data, dur, score);
            let slow = exp_search_reference(&data, dur, score);
            assert_eq!(fast, slow, "{n}");
            searched += fast.iter().flatten().count();
            one_model += (fast[0].is_some() != fast[1].is_some()) as usize;
        }
        assert!(searched >= 90 && one_model >= 1, "{searched} {one_model}");
    }

    #[test]
    fn shared_sums_fit_equals_the_plain_fit() {
        // Fast path against the slow obvious one: the exponential sums come
        // from Horner's rule instead of point by point, so RSS and the fitted
        // curve agree to rounding (1e-12 relative). The coefficients alone
        // need not: with tau long against the span, exp(-t / tau) and t are
        // nearly collinear and rounding moves the split between them.
        let n = 301;
        let t: Vec<f64> = (0..n).map(|i| i as f64 * 0.000_5).collect();
        let f: Vec<f64> = t
            .iter()
            .enumerate()
            .map(|(i, &x)| {
                4.0 + 25.0 * (-x / 0.01).exp() + 3.0 * x + ((i * 7919) % 13) as f64 * 0.1
            })
            .collect();
        let w: Vec<f64> = (0..n).map(|i| 0.5 + ((i * 31) % 7) as f64 * 0.1).collect();
        let mid = t[n - 1] / 2.0;
        let d = FitData::new(&t, &f, &w, mid);
        for model in 0..4u8 {
            for tau in [0.0007, 0.004, 0.02, 0.1] {
                let slow = fit_model(model, tau, &t, &f, &w, mid).unwrap();
                let [es] = d.exp_sums([tau]);
                let fast = d.fit(model, Some(&es)).unwrap();
                // RSS = sum(w y^2) - beta . X'Wy cancels: rounding is
                // relative to sum(w y^2).
                assert!(
                    (slow.0 - fast.0).abs() <= 1e-12 * d.swyy,
                    "{model} {tau} {} {}",
                    slow.0,
                    fast.0
                );
                for &x in &t {
                    let r = basis(model, tau, x, mid);
                    let y = |b: [f64; 3]| (0..model_cols(model)).map(|c| b[c] * r[c]).sum::<f64>();
                    assert!(
                        (y(slow.1) - y(fast.1)).abs() <= 1e-12 * 30.0,
                        "{model} {tau} {x}"
                    );
                }
            }
        }
    }

    #[test]
    fn kay_estimator_is_exact_for_a_clean_tone() {
        // Analytic: the phase difference of exp(j 2 pi f n / fs) is 2 pi f / fs.
        let z = tone(12_000.0, 200, |_| 37.5);
        let w = kay_weights(24);
        assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12); // Kay's weights sum to one.
        let (f, _) = kay_frequency(&z, 10, &w, 12_000.0);
        assert!((f - 37.5).abs() < 1e-4, "{f}");
    }

    #[test]
    fn exponential_chirp_is_recovered_and_clean_tone_reads_zero() {
        let fs = 12_000.0;
        // f(t) = 30 exp(-t / 8 ms) Hz + 5 Hz offset; truth at t = 0 is 30 Hz.
        let z = tone(fs, 2400, |t| 5.0 + 30.0 * (-t / 0.008).exp());
        let tr = trace(&z, fs, 40.0, 2300.0);
        let c = chirp(&tr);
        assert!((c.settled_hz - 5.0).abs() < 0.05, "{c:?}");
        // The trace starts 40 samples in: 30 exp(-40/12000/0.008) = 19.77 Hz
        // (analytic); the 2 ms smoothing of a convex curve reads slightly high.
        assert!((c.chirp_hz - 19.77).abs() < 0.4, "{c:?}");
        let z = tone(fs, 2400, |_| -3.0);
        let c = chirp(&trace(&z, fs, 40.0, 2300.0));
        assert!(c.chirp_hz < 0.01 && c.raw_hz < 0.01, "{c:?}");
    }
}
