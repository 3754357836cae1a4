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
    let mut acc = Complex64::new(0.0, 0.0);
    for (k, wk) in w.iter().enumerate() {
        let a = z[start + k + 1];
        let b = z[start + k];
        let p =
            Complex64::new(a.re as f64, a.im as f64) * Complex64::new(b.re as f64, -b.im as f64);
        acc += p * *wk;
    }
    (acc.arg() * fs / (2.0 * PI), acc.norm())
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
    let k = super::edges::gaussian_kernel(PREFILTER_SIGMA_S * fs);
    let h = k.len() / 2;
    let zf: Vec<Complex32> = (0..z.len())
        .map(|i| {
            let mut acc = Complex64::new(0.0, 0.0);
            for (j, w) in k.iter().enumerate() {
                if let Some(v) = (i + j).checked_sub(h).and_then(|q| z.get(q)) {
                    acc += Complex64::new(v.re as f64, v.im as f64) * *w;
                }
            }
            Complex32::new(acc.re as f32, acc.im as f32)
        })
        .collect();
    let z = &zf[..];
    let n = ((TRACE_WINDOW_S * fs).round() as usize).max(3);
    let w = kay_weights(n);
    let step = TRACE_STEP_S * fs;
    let mut out = Trace::default();
    let mut c = t50r;
    while c <= t50f {
        let start = (c - (n as f64 - 1.0) / 2.0).round();
        if start >= 0.0 && (start as usize) + n <= z.len() {
            let (f, wt) = kay_frequency(z, start as usize, &w, fs);
            out.t.push((c - t50r) / fs);
            out.f.push(f);
            out.w.push(wt);
        }
        c += step;
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

/// Weighted least squares for y ~ X beta with up to 3 columns (normal equations).
fn wls(cols: &[&[f64]], y: &[f64], w: &[f64]) -> Option<(Vec<f64>, f64)> {
    let k = cols.len();
    let mut a = [[0.0f64; 3]; 3];
    let mut b = [0.0f64; 3];
    for i in 0..y.len() {
        for r in 0..k {
            b[r] += w[i] * cols[r][i] * y[i];
            for c in 0..k {
                a[r][c] += w[i] * cols[r][i] * cols[c][i];
            }
        }
    }
    // Gaussian elimination with partial pivoting.
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
            for (c, v) in m[r].iter_mut().enumerate().take(k).skip(p) {
                *v -= f * pivot_row[c];
            }
            v[r] -= f * v[p];
        }
    }
    let mut beta = vec![0.0; k];
    for p in (0..k).rev() {
        let mut s = v[p];
        for c in p + 1..k {
            s -= m[p][c] * beta[c];
        }
        beta[p] = s / m[p][p];
    }
    let mut rss = 0.0;
    for i in 0..y.len() {
        let fit: f64 = (0..k).map(|r| beta[r] * cols[r][i]).sum();
        rss += w[i] * (y[i] - fit).powi(2);
    }
    Some((beta, rss))
}

/// Fits the trace and reads the chirp off the chosen model.
pub fn chirp(tr: &Trace) -> ChirpFit {
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
    let w: Vec<f64> = tr.w.iter().map(|v| v / wsum * n as f64).collect();
    let ones = vec![1.0; n];
    let tc: Vec<f64> = tr.t.iter().map(|t| t - dur / 2.0).collect();
    // Trace points overlap: about one independent point per window.
    let n_eff = (dur / TRACE_WINDOW_S).max(2.0);
    let bic = |rss: f64, k: f64| n_eff * (rss.max(1e-18) / n as f64).ln() + k * 2.0;

    let mut best: (f64, u8, f64, Vec<f64>) = (f64::INFINITY, 0, 0.0, vec![]);
    if let Some((beta, rss)) = wls(&[&ones], &tr.f, &w) {
        best = (
            bic(rss, 1.0),
            0,
            0.0,
            ones.iter().map(|_| beta[0]).collect(),
        );
    }
    if let Some((beta, rss)) = wls(&[&ones, &tc], &tr.f, &w) {
        let s = bic(rss, 2.0);
        if s < best.0 {
            best = (
                s,
                1,
                0.0,
                tc.iter().map(|t| beta[0] + beta[1] * t).collect(),
            );
        }
    }
    let fit_exp = |tau: f64, lin: bool| -> Option<(f64, Vec<f64>)> {
        let e: Vec<f64> = tr.t.iter().map(|t| (-t / tau).exp()).collect();
        if lin {
            let (beta, rss) = wls(&[&ones, &tc, &e], &tr.f, &w)?;
            Some((
                bic(rss, 4.0),
                (0..n)
                    .map(|i| beta[0] + beta[1] * tc[i] + beta[2] * e[i])
                    .collect(),
            ))
        } else {
            let (beta, rss) = wls(&[&ones, &e], &tr.f, &w)?;
            Some((
                bic(rss, 3.0),
                e.iter().map(|x| beta[0] + beta[1] * x).collect(),
            ))
        }
    };
    for lin in [false, true] {
        // Coarse grid of time constants, then golden-section refinement.
        let mut grid_best: Option<(f64, f64)> = None;
        let mut tau = 0.000_5;
        while tau <= 0.3 && tau <= 3.0 * dur {
            if let Some((s, _)) = fit_exp(tau, lin) {
                if grid_best.is_none_or(|g| s < g.0) {
                    grid_best = Some((s, tau));
                }
            }
            tau *= 1.25;
        }
        let Some((_, t0)) = grid_best else { continue };
        let (mut a, mut b) = ((t0 / 1.25).ln(), (t0 * 1.25).ln());
        let g = 0.618_033_988_75;
        let score = |lt: f64| fit_exp(lt.exp(), lin).map_or(f64::INFINITY, |v| v.0);
        for _ in 0..24 {
            let c = b - g * (b - a);
            let d = a + g * (b - a);
            if score(c) < score(d) {
                b = d;
            } else {
                a = c;
            }
        }
        let tau = (0.5 * (a + b)).exp();
        if let Some((s, m)) = fit_exp(tau, lin) {
            if s < best.0 {
                best = (s, if lin { 3 } else { 2 }, tau, m);
            }
        }
    }
    let model = best.3;
    if model.is_empty() {
        return ChirpFit {
            settled_hz: settled_raw,
            raw_hz: raw,
            ..Default::default()
        };
    }
    let mv: Vec<f64> = half.iter().map(|&i| model[i]).collect();
    let settled = weighted_median(&mv, &hw);
    let chirp = model
        .iter()
        .map(|m| (m - settled).abs())
        .fold(0.0, f64::max);
    let res: f64 = (0..n)
        .map(|i| w[i] * (tr.f[i] - model[i]).powi(2))
        .sum::<f64>()
        / n as f64;
    ChirpFit {
        settled_hz: settled,
        // The model smooths the trace; it can never deviate more than the trace did.
        chirp_hz: if best.1 == 0 { 0.0 } else { chirp.min(raw) },
        raw_hz: raw,
        noise_hz: res.sqrt(),
        model: best.1,
        tau_s: best.2,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
