//! Hum and ripple on the key-down carrier: amplitude (AM) and frequency (FM)
//! modulation at mains-related frequencies, by least squares over every
//! element's settled part.
//!
//! Each element's plateau is averaged in blocks of about 0.67 ms (a
//! 1.5 kHz rate, ample for hum up to 360 Hz). For the AM the block
//! magnitudes relative to the element's mean magnitude, and for the FM the
//! frequency from the phase difference of successive blocks, are regressed
//! on cos and sin of 2πf·t in the recording's absolute time, so elements
//! add coherently (mains hum keeps its phase from one element to the next).
//! Each element gets its own intercept (eliminated by centring the data and
//! the regressors within the element: the Frisch–Waugh–Lovell theorem), so
//! element-to-element level and frequency changes do not leak into the fit.
//! The known responses of the block average and of the phase difference are
//! divided out.

use std::f64::consts::PI;

use rustfft::num_complex::{Complex32, Complex64};

/// Frequencies tried: the 50 Hz and 60 Hz families up to the sixth
/// harmonic of 50 Hz (100/120 Hz being full-wave rectifier ripple).
pub const HUM_FREQUENCIES_HZ: [f64; 11] = [
    50.0, 60.0, 100.0, 120.0, 150.0, 180.0, 200.0, 240.0, 250.0, 300.0, 360.0,
];
/// Lanes of `HumAcc::fit`: the frequencies, padded to whole vectors (of
/// two or four).
const LANES: usize = HUM_FREQUENCIES_HZ.len().next_multiple_of(4);
/// Rate of the block averages the fit runs on, Hz (about).
const BLOCK_RATE_HZ: f64 = 1500.0;
/// A component counts as found when it stands this many standard errors
/// above zero; below, the recording cannot resolve it.
pub const DETECT_SIGMAS: f64 = 4.0;

/// Normal equations of y = a·cos + b·sin (centred per element).
#[derive(Clone, Copy, Debug, Default)]
struct Normal {
    cc: f64,
    cs: f64,
    ss: f64,
    yc: f64,
    ys: f64,
}

impl Normal {
    /// (amplitude, its standard error) given the residual variance.
    fn solve(&self, var: f64) -> Option<(f64, f64)> {
        let det = self.cc * self.ss - self.cs * self.cs;
        if det <= 1e-12 * (self.cc * self.ss).max(1e-300) {
            return None;
        }
        let a = (self.ss * self.yc - self.cs * self.ys) / det;
        let b = (self.cc * self.ys - self.cs * self.yc) / det;
        // Var(a) = var·ss/det, Var(b) = var·cc/det; the amplitude's standard
        // error is taken as the mean of the two.
        let se = (var * 0.5 * (self.ss + self.cc) / det).sqrt();
        Some(((a * a + b * b).sqrt(), se))
    }
}

/// One hum component as measured.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HumComponent {
    pub frequency_hz: f64,
    /// AM depth, percent, and its standard error.
    pub am_percent: f64,
    pub am_se_percent: f64,
    /// Peak FM deviation, Hz, and its standard error.
    pub fm_hz: f64,
    pub fm_se_hz: f64,
}

/// Streaming accumulator over elements.
#[derive(Clone, Debug)]
pub struct HumAcc {
    am: Vec<Normal>,
    fm: Vec<Normal>,
    am_yy: f64,
    fm_yy: f64,
    am_n: f64,
    fm_n: f64,
    elements: usize,
    block: usize,
    fs: f64,
    /// Scratch of `add`, kept between elements.
    blocks: Vec<Complex64>,
    rot: Vec<Complex64>,
    mags: Vec<f64>,
    am_y: Vec<f64>,
    fm_y: Vec<f64>,
}

/// Amplitude response of a K-sample moving average at `f`, sample rate `fs`
/// (the Dirichlet kernel).
fn boxcar_gain(f: f64, k: usize, fs: f64) -> f64 {
    let x = PI * f / fs;
    if x.abs() < 1e-12 {
        return 1.0;
    }
    (k as f64 * x).sin() / (k as f64 * x.sin())
}

fn sinc(x: f64) -> f64 {
    if x.abs() < 1e-12 {
        1.0
    } else {
        (PI * x).sin() / (PI * x)
    }
}

impl HumAcc {
    /// For a baseband at `fs` Hz.
    pub fn new(fs: f64) -> HumAcc {
        let n = HUM_FREQUENCIES_HZ.len();
        HumAcc {
            am: vec![Normal::default(); n],
            fm: vec![Normal::default(); n],
            am_yy: 0.0,
            fm_yy: 0.0,
            am_n: 0.0,
            fm_n: 0.0,
            elements: 0,
            block: ((fs / BLOCK_RATE_HZ).round() as usize).max(1),
            fs,
            blocks: Vec::new(),
            rot: Vec::new(),
            mags: Vec::new(),
            am_y: Vec::new(),
            fm_y: Vec::new(),
        }
    }

    /// Elements that contributed.
    pub fn elements(&self) -> usize {
        self.elements
    }

    /// Adds one element's settled key-down: baseband samples `z`, the first
    /// of which is at absolute time `t0` s.
    pub fn add(&mut self, z: &[Complex32], t0: f64) {
        let k = self.block;
        let nb = z.len() / k;
        if nb < 8 {
            return;
        }
        // Take out the element's mean frequency offset first: a carrier
        // rotating within a block, weighted by its AM, would turn AM into a
        // spurious FM of about offset·m·(2πf)²·(K²−1)/(12 fs²).
        let step = Complex64::from_polar(1.0, -lag_sum(z).arg());
        // The derotating phasor as one per-block table and one phasor per
        // block (factored out of the block's sum), not a chain through every
        // sample: the blocks' sums are then independent of each other.
        self.rot.clear();
        let mut r = Complex64::new(1.0, 0.0);
        for _ in 0..k {
            self.rot.push(r);
            r *= step;
        }
        let step_k = r;
        let mut rb = Complex64::new(1.0, 0.0);
        self.blocks.clear();
        for zb in z.chunks_exact(k).take(nb) {
            let (mut sr, mut si) = (0.0, 0.0);
            for (v, r) in zb.iter().zip(&self.rot) {
                let (vr, vi) = (v.re as f64, v.im as f64);
                sr += vr * r.re - vi * r.im;
                si += vr * r.im + vi * r.re;
            }
            self.blocks.push(Complex64::new(sr, si) * rb / k as f64);
            rb *= step_k;
        }
        // |b| as the square root of |b|²: the block means are far from
        // overflow, and `hypot` is slow.
        self.mags.clear();
        self.mags
            .extend(self.blocks.iter().map(|b| b.norm_sqr().sqrt()));
        let mean_mag = self.mags.iter().sum::<f64>() / nb as f64;
        if mean_mag <= 0.0 {
            return;
        }
        let dt = k as f64 / self.fs;
        let mut am = std::mem::take(&mut self.am_y);
        am.clear();
        am.extend(self.mags.iter().map(|m| m / mean_mag - 1.0));
        let mut fm = std::mem::take(&mut self.fm_y);
        fm.clear();
        fm.extend(
            self.blocks
                .windows(2)
                .map(|b| (b[1] * b[0].conj()).arg() / (2.0 * PI * dt)),
        );
        // Centre of the first block.
        let t_first = t0 + 0.5 * (k as f64 - 1.0) / self.fs;
        Self::fit(
            &mut self.am,
            &mut self.am_yy,
            &mut self.am_n,
            t_first,
            dt,
            &am,
        );
        // Each frequency sample sits between two block centres.
        Self::fit(
            &mut self.fm,
            &mut self.fm_yy,
            &mut self.fm_n,
            t_first + 0.5 * dt,
            dt,
            &fm,
        );
        (self.am_y, self.fm_y) = (am, fm);
        self.elements += 1;
    }

    /// Adds one element's points to the normal equations, centred within the
    /// element. The points are evenly spaced (`dt` from `t0`), so cos and sin
    /// come from a rotating phasor, and the centred sums from raw sums
    /// (Σ(x−x̄)(y−ȳ) = Σxy − n·x̄·ȳ). Each phasor's recurrence is a serial
    /// chain, so all frequencies advance together, one point at a time (the
    /// chains interleave and vectorize); each frequency's own operations are
    /// those of a loop over its points alone (`fit_one`, checked in a test).
    fn fit(nq: &mut [Normal], yy: &mut f64, count: &mut f64, t0: f64, dt: f64, y: &[f64]) {
        let n = y.len() as f64;
        let ym = y.iter().sum::<f64>() / n;
        *yy += y.iter().map(|v| (v - ym).powi(2)).sum::<f64>();
        *count += n - 1.0;
        // Phasors and steps, real and imaginary parts apart; lanes past the
        // last frequency are padding.
        let (mut re, mut im) = ([0.0f64; LANES], [0.0f64; LANES]);
        let (mut sre, mut sim) = ([0.0f64; LANES], [0.0f64; LANES]);
        for (q, &f) in HUM_FREQUENCIES_HZ.iter().enumerate() {
            let w = 2.0 * PI * f;
            let step = Complex64::from_polar(1.0, w * dt);
            let rot = Complex64::from_polar(1.0, w * t0);
            (re[q], im[q], sre[q], sim[q]) = (rot.re, rot.im, step.re, step.im);
        }
        let [sc, ss, scc, scs, sss, syc, sys] = phasor_sums([re, im], [sre, sim], y);
        for (q, nq) in nq.iter_mut().enumerate() {
            let (mc, ms) = (sc[q] / n, ss[q] / n);
            nq.cc += scc[q] - n * mc * mc;
            nq.cs += scs[q] - n * mc * ms;
            nq.ss += sss[q] - n * ms * ms;
            nq.yc += syc[q] - n * ym * mc;
            nq.ys += sys[q] - n * ym * ms;
        }
    }

    /// Every tried frequency's AM and FM with standard errors; empty when
    /// too little key-down was seen.
    pub fn components(&self) -> Vec<HumComponent> {
        if self.am_n < 50.0 || self.fm_n < 50.0 {
            return Vec::new();
        }
        let k = self.block;
        let dt = k as f64 / self.fs;
        // Residual variance, taken as the total (hum is a small part).
        let am_var = self.am_yy / self.am_n;
        let fm_var = self.fm_yy / self.fm_n;
        HUM_FREQUENCIES_HZ
            .iter()
            .enumerate()
            .filter_map(|(i, &f)| {
                let g = boxcar_gain(f, k, self.fs);
                let (a, ase) = self.am[i].solve(am_var)?;
                let (m, mse) = self.fm[i].solve(fm_var)?;
                let gf = g * sinc(f * dt);
                Some(HumComponent {
                    frequency_hz: f,
                    am_percent: 100.0 * a / g,
                    am_se_percent: 100.0 * ase / g,
                    fm_hz: m / gf,
                    fm_se_hz: mse / gf,
                })
            })
            .collect()
    }
}

/// Σ z[n]·z*[n−1] in double precision, in four interleaved partial sums
/// (one running sum is a serial chain of additions).
fn lag_sum(z: &[Complex32]) -> Complex64 {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU reported AVX.
            return unsafe { lag_sum_avx(z) };
        }
    }
    lag_sum_body(z)
}

/// `lag_sum` compiled for AVX: the four partial sums in one register, the
/// same operations (no fused multiply-adds), so the same sum.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn lag_sum_avx(z: &[Complex32]) -> Complex64 {
    lag_sum_body(z)
}

#[inline(always)]
fn lag_sum_body(z: &[Complex32]) -> Complex64 {
    let (a, b) = (&z[1.min(z.len())..], z);
    let (mut re, mut im) = ([0.0f64; 4], [0.0f64; 4]);
    let mut add = |l: usize, a: &Complex32, b: &Complex32| {
        let (ar, ai, br, bi) = (a.re as f64, a.im as f64, b.re as f64, b.im as f64);
        re[l] += ar * br + ai * bi;
        im[l] += ai * br - ar * bi;
    };
    let full = a.len() - a.len() % 4;
    for (ca, cb) in a[..full].chunks_exact(4).zip(b.chunks_exact(4)) {
        for l in 0..4 {
            add(l, &ca[l], &cb[l]);
        }
    }
    for (x, y) in a[full..].iter().zip(&b[full..]) {
        add(0, x, y);
    }
    Complex64::new(
        (re[0] + re[1]) + (re[2] + re[3]),
        (im[0] + im[1]) + (im[2] + im[3]),
    )
}

/// Per lane, the sums Σc, Σs, Σc², Σcs, Σs², Σyc, Σys over the points `y`,
/// with (c, s) a phasor starting at `rot` and turned by `step` per point
/// (real and imaginary parts apart).
fn phasor_sums(rot: [[f64; LANES]; 2], step: [[f64; LANES]; 2], y: &[f64]) -> [[f64; LANES]; 7] {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU reported AVX.
            return unsafe { phasor_sums_avx(rot, step, y) };
        }
    }
    phasor_sums_body(rot, step, y)
}

/// `phasor_sums` compiled for AVX: twice the lanes per instruction, the
/// same operations (no fused multiply-adds), so the same sums.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn phasor_sums_avx(
    rot: [[f64; LANES]; 2],
    step: [[f64; LANES]; 2],
    y: &[f64],
) -> [[f64; LANES]; 7] {
    phasor_sums_body(rot, step, y)
}

#[inline(always)]
fn phasor_sums_body(
    rot: [[f64; LANES]; 2],
    step: [[f64; LANES]; 2],
    y: &[f64],
) -> [[f64; LANES]; 7] {
    let [mut re, mut im] = rot;
    let [sre, sim] = step;
    let mut sc = [0.0f64; LANES];
    let mut ss = [0.0f64; LANES];
    let mut scc = [0.0f64; LANES];
    let mut scs = [0.0f64; LANES];
    let mut sss = [0.0f64; LANES];
    let mut syc = [0.0f64; LANES];
    let mut sys = [0.0f64; LANES];
    for &v in y {
        for q in 0..LANES {
            let (c, s) = (re[q], im[q]);
            sc[q] += c;
            ss[q] += s;
            scc[q] += c * c;
            scs[q] += c * s;
            sss[q] += s * s;
            syc[q] += v * c;
            sys[q] += v * s;
            // `rot *= step` as `Complex64`'s `MulAssign` does it.
            re[q] = c * sre[q] - s * sim[q];
            im[q] = s * sre[q] + c * sim[q];
        }
    }
    [sc, ss, scc, scs, sss, syc, sys]
}

/// The reported hum: the mains family (50 or 60 Hz) with more significant
/// power, and in it the most significant component. AM or FM below
/// `DETECT_SIGMAS` standard errors is `None` (with its floor).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HumResult {
    pub mains_hz: f64,
    pub frequency_hz: f64,
    pub am_percent: Option<f64>,
    pub fm_hz: Option<f64>,
    /// Smallest AM depth / FM deviation this recording resolves there.
    pub am_floor_percent: f64,
    pub fm_floor_hz: f64,
}

/// Picks the hum to report from the components.
pub fn pick(comps: &[HumComponent]) -> Option<HumResult> {
    let z = |c: &HumComponent| {
        let za = c.am_percent / c.am_se_percent.max(1e-12);
        let zf = c.fm_hz / c.fm_se_hz.max(1e-12);
        za.max(zf)
    };
    let family = |m: f64| -> f64 {
        comps
            .iter()
            .filter(|c| (c.frequency_hz / m).fract().abs() < 1e-9)
            .map(|c| z(c).powi(2))
            .sum()
    };
    let mains = if family(60.0) > family(50.0) {
        60.0
    } else {
        50.0
    };
    let best = comps
        .iter()
        .filter(|c| (c.frequency_hz / mains).fract().abs() < 1e-9)
        .max_by(|a, b| z(a).total_cmp(&z(b)))?;
    let am_floor = DETECT_SIGMAS * best.am_se_percent;
    let fm_floor = DETECT_SIGMAS * best.fm_se_hz;
    Some(HumResult {
        mains_hz: mains,
        frequency_hz: best.frequency_hz,
        am_percent: (best.am_percent >= am_floor).then_some(best.am_percent),
        fm_hz: (best.fm_hz >= fm_floor).then_some(best.fm_hz),
        am_floor_percent: am_floor,
        fm_floor_hz: fm_floor,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Baseband of a carrier with AM depth m and FM deviation d at fh,
    /// keyed in elements of `len` s every `period` s (plateaus only).
    pub fn elements(
        fs: f64,
        fh: f64,
        m: f64,
        d: f64,
        len: f64,
        period: f64,
        count: usize,
    ) -> HumAcc {
        let mut acc = HumAcc::new(fs);
        let w = 2.0 * PI * fh;
        for e in 0..count {
            let t0 = 0.137 + e as f64 * period;
            let n = (len * fs) as usize;
            let z: Vec<Complex32> = (0..n)
                .map(|i| {
                    let t = t0 + i as f64 / fs;
                    let a = 0.3 * (1.0 + m * (w * t).cos());
                    // Phase = integral of d cos(w t) = d sin(w t) / w cycles, plus a
                    // 12 Hz offset that each element's intercept absorbs.
                    let ph = 2.0 * PI * (d * (w * t).sin() / w + 12.0 * t);
                    Complex32::new((a * ph.cos()) as f32, (a * ph.sin()) as f32)
                })
                .collect();
            acc.add(&z, t0);
        }
        acc
    }

    #[test]
    fn am_and_fm_of_an_analytic_carrier() {
        // Truth: the analytic modulation put in (3 % AM, 4 Hz FM at 100 Hz),
        // 50 ms plateaus every 0.12 s; tolerance 2 % of the value.
        let acc = elements(12_000.0, 100.0, 0.03, 4.0, 0.05, 0.12, 80);
        let c = acc.components();
        let h = c.iter().find(|c| c.frequency_hz == 100.0).unwrap();
        assert!((h.am_percent - 3.0).abs() < 0.06, "{h:?}");
        assert!((h.fm_hz - 4.0).abs() < 0.08, "{h:?}");
        // Other frequencies read (near) zero: the fit separates them.
        let o = c.iter().find(|c| c.frequency_hz == 60.0).unwrap();
        assert!(o.am_percent < 0.2 && o.fm_hz < 0.3, "{o:?}");
        let r = pick(&c).unwrap();
        assert_eq!((r.mains_hz, r.frequency_hz), (50.0, 100.0));
        assert!(r.am_percent.is_some() && r.fm_hz.is_some());
    }

    #[test]
    fn sixty_hz_family_and_high_harmonic() {
        // 360 Hz is where the block-average and phase-difference responses
        // matter most (0.9 and 0.82): corrected to within 3 %.
        let acc = elements(12_000.0, 360.0, 0.05, 2.0, 0.1, 0.2, 60);
        let r = pick(&acc.components()).unwrap();
        assert_eq!((r.mains_hz, r.frequency_hz), (60.0, 360.0));
        assert!((r.am_percent.unwrap() - 5.0).abs() < 0.15, "{r:?}");
        assert!((r.fm_hz.unwrap() - 2.0).abs() < 0.06, "{r:?}");
    }

    #[test]
    fn phasor_sums_match_a_direct_centred_fit() {
        // The fast fit (rotating phasor, centred sums from raw sums) against
        // the obvious one: cos and sin evaluated at every point and centred
        // explicitly. Pseudo-random data; agreement to 1e-9 relative.
        let (t0, dt) = (12.345, 1.0 / 1500.0);
        let y: Vec<f64> = (0..300)
            .map(|i| ((i * 7919 % 1013) as f64 / 1013.0 - 0.5) + (0.01 * i as f64).sin())
            .collect();
        let mut fast = vec![Normal::default(); HUM_FREQUENCIES_HZ.len()];
        let (mut yy, mut cnt) = (0.0, 0.0);
        HumAcc::fit(&mut fast, &mut yy, &mut cnt, t0, dt, &y);
        let n = y.len() as f64;
        let ym = y.iter().sum::<f64>() / n;
        for (q, &f) in fast.iter().zip(HUM_FREQUENCIES_HZ.iter()) {
            let w = 2.0 * PI * f;
            let t = |i: usize| t0 + i as f64 * dt;
            let mc = (0..y.len()).map(|i| (w * t(i)).cos()).sum::<f64>() / n;
            let ms = (0..y.len()).map(|i| (w * t(i)).sin()).sum::<f64>() / n;
            let (mut cc, mut cs, mut ss, mut yc, mut ys) = (0.0, 0.0, 0.0, 0.0, 0.0);
            for (i, v) in y.iter().enumerate() {
                let c = (w * t(i)).cos() - mc;
                let s = (w * t(i)).sin() - ms;
                cc += c * c;
                cs += c * s;
                ss += s * s;
                yc += (v - ym) * c;
                ys += (v - ym) * s;
            }
            let close = |a: f64, b: f64| (a - b).abs() <= 1e-9 * (1.0 + b.abs());
            assert!(close(q.cc, cc) && close(q.cs, cs) && close(q.ss, ss), "{f}");
            assert!(close(q.yc, yc) && close(q.ys, ys), "{f}");
        }
    }

    /// The one-frequency-at-a-time fit `HumAcc::fit` was derived from; test
    /// oracle.
    fn fit_one(nq: &mut [Normal], yy: &mut f64, count: &mut f64, t0: f64, dt: f64, y: &[f64]) {
        let n = y.len() as f64;
        let ym = y.iter().sum::<f64>() / n;
        *yy += y.iter().map(|v| (v - ym).powi(2)).sum::<f64>();
        *count += n - 1.0;
        for (q, &f) in nq.iter_mut().zip(HUM_FREQUENCIES_HZ.iter()) {
            let w = 2.0 * PI * f;
            let step = Complex64::from_polar(1.0, w * dt);
            let mut rot = Complex64::from_polar(1.0, w * t0);
            let (mut sc, mut ss, mut scc, mut scs, mut sss, mut syc, mut sys) =
                (0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
            for &v in y {
                let (c, s) = (rot.re, rot.im);
                sc += c;
                ss += s;
                scc += c * c;
                scs += c * s;
                sss += s * s;
                syc += v * c;
                sys += v * s;
                rot *= step;
            }
            let (mc, ms) = (sc / n, ss / n);
            q.cc += scc - n * mc * mc;
            q.cs += scs - n * mc * ms;
            q.ss += sss - n * ms * ms;
            q.yc += syc - n * ym * mc;
            q.ys += sys - n * ym * ms;
        }
    }

    #[test]
    fn interleaved_fit_equals_one_frequency_at_a_time() {
        // All frequencies per point against one frequency per loop: the same
        // operations per frequency, so bit-identical.
        for (len, t0) in [(300, 12.345), (9, 0.0), (1201, 3456.789)] {
            let y: Vec<f64> = (0..len)
                .map(|i| ((i * 7919 % 1013) as f64 / 1013.0 - 0.5) + (0.01 * i as f64).sin())
                .collect();
            let nf = HUM_FREQUENCIES_HZ.len();
            let (mut a, mut b) = (vec![Normal::default(); nf], vec![Normal::default(); nf]);
            let (mut ya, mut yb, mut ca, mut cb) = (0.5, 0.5, 2.0, 2.0);
            HumAcc::fit(&mut a, &mut ya, &mut ca, t0, 1.0 / 1500.0, &y);
            fit_one(&mut b, &mut yb, &mut cb, t0, 1.0 / 1500.0, &y);
            assert_eq!((ya, ca), (yb, cb));
            // The plain build of the sums equals the one dispatched to.
            let rot = [[0.6, -0.8, 1.0, 0.0], [0.8, 0.6, 0.0, 1.0]].map(|v| {
                let mut l = [0.0; LANES];
                l[..4].copy_from_slice(&v);
                l
            });
            let step = [rot[1], rot[0]];
            let key = |v: [[f64; LANES]; 7]| v.map(|l| l.map(f64::to_bits));
            assert_eq!(
                key(phasor_sums(rot, step, &y)),
                key(phasor_sums_body(rot, step, &y))
            );
            for (p, q) in a.iter().zip(&b) {
                let key = |n: &Normal| [n.cc, n.cs, n.ss, n.yc, n.ys].map(f64::to_bits);
                assert_eq!(key(p), key(q), "{len}");
            }
        }
    }

    /// The `add` this module had before the derotation was split into
    /// per-block phasors (one chain through every sample, a single running
    /// lag sum, `hypot`); test oracle.
    fn add_reference(acc: &mut HumAcc, z: &[Complex32], t0: f64) {
        let k = acc.block;
        let nb = z.len() / k;
        if nb < 8 {
            return;
        }
        // Take out the element's mean frequency offset first: a carrier
        // rotating within a block, weighted by its AM, would turn AM into a
        // spurious FM of about offset·m·(2πf)²·(K²−1)/(12 fs²).
        let lag: Complex64 = z
            .windows(2)
            .map(|w| {
                Complex64::new(w[1].re as f64, w[1].im as f64)
                    * Complex64::new(w[0].re as f64, -w[0].im as f64)
            })
            .sum();
        let step = Complex64::from_polar(1.0, -lag.arg());
        let mut rot = Complex64::new(1.0, 0.0);
        let mut blocks = Vec::new();
        for j in 0..nb {
            let mut s = Complex64::new(0.0, 0.0);
            for v in &z[j * k..(j + 1) * k] {
                s += Complex64::new(v.re as f64, v.im as f64) * rot;
                rot *= step;
            }
            blocks.push(s / k as f64);
        }
        let mean_mag = blocks.iter().map(|b| b.norm()).sum::<f64>() / nb as f64;
        if mean_mag <= 0.0 {
            return;
        }
        let dt = k as f64 / acc.fs;
        let am: Vec<f64> = blocks.iter().map(|b| b.norm() / mean_mag - 1.0).collect();
        let fm: Vec<f64> = blocks
            .windows(2)
            .map(|b| (b[1] * b[0].conj()).arg() / (2.0 * PI * dt))
            .collect();
        // Centre of the first block.
        let t_first = t0 + 0.5 * (k as f64 - 1.0) / acc.fs;
        fit_one(&mut acc.am, &mut acc.am_yy, &mut acc.am_n, t_first, dt, &am);
        // Each frequency sample sits between two block centres.
        fit_one(
            &mut acc.fm,
            &mut acc.fm_yy,
            &mut acc.fm_n,
            t_first + 0.5 * dt,
            dt,
            &fm,
        );
        acc.elements += 1;
    }

    #[test]
    fn blockwise_derotation_matches_the_per_sample_chain() {
        // Fast `add` against the plain one: per-block phasors instead of one
        // chain through every sample, four partial lag sums, and sqrt(|b|²)
        // instead of `hypot` change only rounding, so every component agrees
        // to 1e-9 relative (of its value plus its standard error). Elements
        // up to 0.5 s (6000 samples, the longest chains), with noise, a
        // 12 Hz offset, AM and FM.
        let mut st = 99u64;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (st >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let fs = 12_000.0;
        let (mut fast, mut slow) = (HumAcc::new(fs), HumAcc::new(fs));
        for e in 0..60 {
            let t0 = 0.137 + e as f64 * 0.7;
            let n = 100 + (e * 997) % 6000;
            let z: Vec<Complex32> = (0..n)
                .map(|i| {
                    let t = t0 + i as f64 / fs;
                    let a = 0.3 * (1.0 + 0.02 * (2.0 * PI * 100.0 * t).cos());
                    let ph = 2.0 * PI * (3.0 * (2.0 * PI * 50.0 * t).sin() / 314.0 + 12.0 * t);
                    Complex32::new(
                        (a * ph.cos() + 0.01 * rnd()) as f32,
                        (a * ph.sin() + 0.01 * rnd()) as f32,
                    )
                })
                .collect();
            fast.add(&z, t0);
            add_reference(&mut slow, &z, t0);
        }
        assert_eq!(fast.elements(), slow.elements());
        let (a, b) = (fast.components(), slow.components());
        assert_eq!(a.len(), HUM_FREQUENCIES_HZ.len());
        let mut worst: f64 = 0.0;
        for (p, q) in a.iter().zip(&b) {
            for (x, y, se) in [
                (p.am_percent, q.am_percent, q.am_se_percent),
                (p.am_se_percent, q.am_se_percent, q.am_se_percent),
                (p.fm_hz, q.fm_hz, q.fm_se_hz),
                (p.fm_se_hz, q.fm_se_hz, q.fm_se_hz),
            ] {
                worst = worst.max((x - y).abs() / (y.abs() + se));
            }
        }
        assert!(worst < 1e-9, "{worst:e}");
        // Not bit-identical, but it moved: the check is of real differences.
        assert!(worst > 0.0);
    }

    #[test]
    fn dispatched_lag_sum_equals_its_plain_build() {
        // Same operations in the same order: equal bit for bit, for lengths
        // around the four-lane blocks.
        let mut st = 5u64;
        let mut rnd = move || {
            st = st
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            ((st >> 11) as f64 / (1u64 << 53) as f64 - 0.5) as f32
        };
        for n in (0..40).chain([997, 4096]) {
            let z: Vec<Complex32> = (0..n).map(|_| Complex32::new(rnd(), rnd())).collect();
            let (a, b) = (lag_sum(&z), lag_sum_body(&z));
            assert_eq!(
                (a.re.to_bits(), a.im.to_bits()),
                (b.re.to_bits(), b.im.to_bits())
            );
            if n > 1 {
                assert!(a.norm() > 0.0);
            }
        }
    }

    #[test]
    fn clean_carrier_has_no_hum() {
        let acc = elements(12_000.0, 100.0, 0.0, 0.0, 0.05, 0.12, 40);
        let r = pick(&acc.components()).unwrap();
        assert!(r.am_percent.is_none_or(|a| a < 1e-3), "{r:?}");
    }
}
