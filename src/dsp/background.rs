//! Short-time level of a channel with one pitch notched out: the receiver
//! background of a rig's own audio with its sidetone removed.
//!
//! Chain: a first-order DC blocker (high-pass at `DC_CUTOFF_HZ`), two
//! cascaded second-order notch filters at the sidetone pitch (the notch of
//! the Audio EQ Cookbook, bilinear transform, Q = f0/BW, so each is about
//! 3 dB down at f0 ± BW/2), then the mean square over a sliding rectangular
//! window, reported every hop and stamped at the window's centre. Streaming:
//! memory is one window of squared samples.

/// DC blocker corner, Hz: a sound card's offset is not receiver background.
pub const DC_CUTOFF_HZ: f64 = 20.0;

/// One second-order section, direct form I.
#[derive(Clone, Debug)]
struct Biquad {
    b: [f64; 3],
    a: [f64; 2],
    x: [f64; 2],
    y: [f64; 2],
}

impl Biquad {
    /// Notch at `f0` with −3 dB bandwidth `bw` (Audio EQ Cookbook).
    fn notch(fs: f64, f0: f64, bw: f64) -> Biquad {
        let w0 = 2.0 * std::f64::consts::PI * f0 / fs;
        let q = f0 / bw;
        let alpha = w0.sin() / (2.0 * q);
        let a0 = 1.0 + alpha;
        let c = -2.0 * w0.cos();
        Biquad {
            b: [1.0 / a0, c / a0, 1.0 / a0],
            a: [c / a0, (1.0 - alpha) / a0],
            x: [0.0; 2],
            y: [0.0; 2],
        }
    }
    fn process(&mut self, v: f64) -> f64 {
        let y = self.b[0] * v + self.b[1] * self.x[0] + self.b[2] * self.x[1]
            - self.a[0] * self.y[0]
            - self.a[1] * self.y[1];
        self.x = [v, self.x[0]];
        self.y = [y, self.y[0]];
        y
    }
    /// |H(e^{jw})|^2 at frequency `f`, from the coefficients.
    fn power_gain(&self, fs: f64, f: f64) -> f64 {
        use rustfft::num_complex::Complex64;
        let z1 = Complex64::from_polar(1.0, -2.0 * std::f64::consts::PI * f / fs);
        let z2 = z1 * z1;
        let num = self.b[0] + self.b[1] * z1 + self.b[2] * z2;
        let den = 1.0 + self.a[0] * z1 + self.a[1] * z2;
        (num / den).norm_sqr()
    }
}

/// Streaming short-time power of one channel with a pitch notched out.
#[derive(Clone, Debug)]
pub struct BackgroundMeter {
    fs: f64,
    dc_x: f64,
    dc_y: f64,
    dc_r: f64,
    notches: [Biquad; 2],
    ring: Vec<f64>,
    pos: usize,
    sum: f64,
    hop: usize,
    since: usize,
    n: u64,
}

impl BackgroundMeter {
    /// `notch_hz` ± `half_width_hz` (−3 dB of each stage) is removed; the
    /// mean square is taken over `window_s`, every `hop_s`.
    pub fn new(
        fs: u32,
        notch_hz: f64,
        half_width_hz: f64,
        window_s: f64,
        hop_s: f64,
    ) -> BackgroundMeter {
        let fs = fs as f64;
        let w = ((window_s * fs).round() as usize).max(1);
        let n = Biquad::notch(fs, notch_hz, 2.0 * half_width_hz);
        BackgroundMeter {
            fs,
            dc_x: 0.0,
            dc_y: 0.0,
            dc_r: (-2.0 * std::f64::consts::PI * DC_CUTOFF_HZ / fs).exp(),
            notches: [n.clone(), n],
            ring: vec![0.0; w],
            pos: 0,
            sum: 0.0,
            hop: ((hop_s * fs).round() as usize).max(1),
            since: 0,
            n: 0,
        }
    }

    /// Power gain of the notch chain at `f` (DC blocker excluded).
    pub fn notch_power_gain(&self, f: f64) -> f64 {
        self.notches
            .iter()
            .map(|b| b.power_gain(self.fs, f))
            .product()
    }

    /// Feeds samples; appends (window centre s, mean square) every hop once
    /// a whole window has been seen.
    pub fn push(&mut self, samples: &[f32], out: &mut Vec<(f64, f64)>) {
        let w = self.ring.len();
        for &v in samples {
            let v = v as f64;
            // y[n] = r (y[n-1] + x[n] - x[n-1]): one-pole DC blocker.
            let y = self.dc_r * (self.dc_y + v - self.dc_x);
            self.dc_x = v;
            self.dc_y = y;
            let z0 = self.notches[0].process(y);
            let z = self.notches[1].process(z0);
            let p = z * z;
            self.sum += p - self.ring[self.pos];
            self.ring[self.pos] = p;
            self.pos = (self.pos + 1) % w;
            if self.pos == 0 {
                // Re-sum once per window so rounding cannot accumulate.
                self.sum = self.ring.iter().sum();
            }
            self.n += 1;
            self.since += 1;
            if self.since >= self.hop && self.n >= w as u64 {
                self.since = 0;
                let centre = (self.n as f64 - 1.0 - (w as f64 - 1.0) / 2.0) / self.fs;
                out.push((centre, (self.sum / w as f64).max(0.0)));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tone(fs: f64, f: f64, a: f64, n: usize) -> Vec<f32> {
        (0..n)
            .map(|i| (a * (2.0 * std::f64::consts::PI * f * i as f64 / fs).sin()) as f32)
            .collect()
    }

    fn run(m: &mut BackgroundMeter, x: &[f32]) -> Vec<(f64, f64)> {
        let mut out = Vec::new();
        m.push(x, &mut out);
        out
    }

    #[test]
    fn the_pitch_is_removed_and_other_tones_pass() {
        let fs = 48_000.0;
        let mut m = BackgroundMeter::new(48_000, 700.0, 100.0, 0.01, 0.001);
        // Audio EQ Cookbook notch: zero gain at f0, and -3 dB per stage at the
        // edges of a band BW wide centred geometrically on f0 (f_lo·f_hi =
        // f0^2) (memory; the bilinear warping moves them slightly), so
        // -6 dB for two stages.
        assert!(m.notch_power_gain(700.0) < 1e-20);
        let f_hi = 100.0 + (100.0f64.powi(2) + 700.0f64.powi(2)).sqrt();
        for f in [f_hi, f_hi - 200.0] {
            let edge_db = 10.0 * m.notch_power_gain(f).log10();
            assert!((edge_db + 6.0).abs() < 0.3, "{f} Hz: {edge_db}");
        }
        // Settled output of a 0.5-amplitude tone at the pitch.
        let out = run(&mut m, &tone(fs, 700.0, 0.5, 48_000));
        let last = out.last().unwrap().1;
        assert!(10.0 * (last / 0.125).log10() < -60.0, "{last}");
        // A tone 1 kHz away: mean square = a^2/2 times the chain's gain there,
        // within 0.1 dB (the slow check: the transfer function itself).
        let mut m = BackgroundMeter::new(48_000, 700.0, 100.0, 0.01, 0.001);
        let out = run(&mut m, &tone(fs, 1700.0, 0.5, 48_000));
        let want = 0.125 * m.notch_power_gain(1700.0);
        let got = out.last().unwrap().1;
        assert!((10.0 * (got / want).log10()).abs() < 0.1, "{got} {want}");
    }

    #[test]
    fn blocks_of_any_size_give_the_same_result_and_a_plain_mean() {
        // Deterministic pseudo-noise.
        let mut s = 12345u64;
        let x: Vec<f32> = (0..20_000)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((s >> 33) as f64 / (1u64 << 31) as f64 - 0.5) as f32
            })
            .collect();
        let mut a = BackgroundMeter::new(48_000, 600.0, 100.0, 0.01, 0.001);
        let whole = run(&mut a, &x);
        let mut b = BackgroundMeter::new(48_000, 600.0, 100.0, 0.01, 0.001);
        let mut parts = Vec::new();
        for c in x.chunks(777) {
            b.push(c, &mut parts);
        }
        assert_eq!(whole.len(), parts.len());
        for (p, q) in whole.iter().zip(&parts) {
            assert_eq!(p.0, q.0);
            assert!((p.1 - q.1).abs() <= 1e-12 * p.1.max(1e-30));
        }
        // Slow obvious: filter the whole signal, then a plain mean over each
        // window ending at the stamped sample.
        let mut c = BackgroundMeter::new(48_000, 600.0, 100.0, 0.01, 0.001);
        let mut y = Vec::new();
        for &v in &x {
            let d = c.dc_r * (c.dc_y + v as f64 - c.dc_x);
            c.dc_x = v as f64;
            c.dc_y = d;
            let z0 = c.notches[0].process(d);
            y.push(c.notches[1].process(z0));
        }
        let w = 480;
        for &(t, p) in whole.iter().step_by(97) {
            let end = (t * 48_000.0 + (w as f64 - 1.0) / 2.0).round() as usize;
            let mean: f64 = y[end + 1 - w..=end].iter().map(|v| v * v).sum::<f64>() / w as f64;
            assert!((mean - p).abs() <= 1e-9 * mean, "{mean} {p}");
        }
        // One value per hop (48 samples) once the first window is full.
        assert_eq!(whole.len(), (20_000 - 480) / 48 + 1);
    }
}
