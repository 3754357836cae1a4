//! First look at a recording: a Welch-averaged power spectrum per channel
//! (Welch 1967, Hann window, 50 % overlap) plus, per bin, the spread of the
//! short-frame power over time. Peaks that stand clear of the noise are tone
//! candidates; a keyed tone's frame power swings between on and off, a steady
//! tone's does not, which tells them apart without segmenting anything yet.

use rustfft::num_complex::Complex32;

use super::decimate::{Decimator, PASS_FRACTION};
use super::downconvert::plan_sizes;
use super::real_fft::RealFft;
use super::window::hann;

/// A tone found in the survey.
#[derive(Clone, Debug, PartialEq)]
pub struct Candidate {
    /// 0-based channel index.
    pub channel: usize,
    /// Pitch from the interpolated spectrum peak (Gaussian interpolation of
    /// the Hann-windowed power spectrum), Hz.
    pub frequency_hz: f64,
    /// Mean power over the whole recording (linear, per full-scale sine = 1).
    pub mean_power: f64,
    /// Power while the tone is on, estimated as E[p^2]/E[p] over frames.
    pub on_power: f64,
    /// Fraction of the time the tone is on, E[p]^2/E[p^2].
    pub duty: f64,
    /// Whether the frame power swings like keying (coefficient of variation).
    pub keyed: bool,
    /// Peak height above the channel's median spectral floor, dB.
    pub prominence_db: f64,
}

/// Per-channel sample statistics gathered during the survey.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ChannelStats {
    pub peak_abs: f64,
    pub clipped_samples: u64,
    pub samples: u64,
    pub sum_sq: f64,
}

impl ChannelStats {
    pub fn rms_dbfs(&self) -> f64 {
        // 0 dBFS = full-scale sine, whose RMS is 1/sqrt(2) (AES17).
        let rms = (self.sum_sq / self.samples.max(1) as f64).sqrt();
        20.0 * (rms * 2f64.sqrt()).max(1e-12).log10()
    }
}

/// What the survey found.
#[derive(Clone, Debug)]
pub struct SurveyResult {
    /// Rate of the spectra and spectrograms (after front-end decimation), Hz.
    pub sample_rate_hz: u32,
    pub nfft: usize,
    pub candidates: Vec<Candidate>,
    pub channels: Vec<ChannelStats>,
    /// Mean power spectrum of each channel (Hann, one-sided, per bin).
    pub spectra: Vec<Vec<f64>>,
    /// Spectrogram of each channel from the survey's own frames, when asked
    /// for with [`Survey::keep_spectrogram`] (else empty).
    pub spectrograms: Vec<SurveyGram>,
}

/// Most columns a spectrogram keeps, however long the recording.
pub const SPECTROGRAM_COLUMNS_MAX: usize = 1000;

/// Frames averaged into one spectrogram column for a recording of
/// `total_frames` samples and frames of `nfft` with 50 % overlap, so that
/// there are at most [`SPECTROGRAM_COLUMNS_MAX`] columns.
pub fn frames_per_column(total_frames: u64, nfft: usize) -> usize {
    let frames = (total_frames as usize / (nfft / 2)).max(1);
    frames.div_ceil(SPECTROGRAM_COLUMNS_MAX).max(1)
}

/// Spectrogram columns: the mean of `frames_per_column` successive frame
/// power spectra |X[k]|^2 (Hann, 50 % overlap, frames from sample 0), all
/// `nfft / 2 + 1` bins, column after column. A trailing part-column is left
/// out. Kept by the survey so that the spectral pass need not transform the
/// same frames again.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SurveyGram {
    pub nfft: usize,
    pub frames_per_column: usize,
    pub columns: Vec<f32>,
}

/// A tone candidate's on-power stands this far above the median bin, dB.
/// Averaging hundreds of frames makes a noise bin's mean steady to a
/// fraction of a dB, so 8 dB is far outside what noise reaches.
const PEAK_MARGIN_DB: f64 = 8.0;

/// Full-scale limit at which a sample counts as clipped.
const CLIP_LEVEL: f32 = 0.9999;

struct Chan {
    /// This channel's samples of the latest block, at the input rate.
    raw: Vec<f32>,
    front: Decimator,
    pending: Vec<f32>,
    /// What `front` made of the latest block (see [`Survey::fresh`]).
    fresh: Vec<f32>,
    sum_p: Vec<f64>,
    sum_p2: Vec<f64>,
    frames: u64,
    stats: ChannelStats,
    gram: SurveyGram,
    gram_acc: Vec<f64>,
    gram_n: usize,
}

/// Adds peak, clipped count and sum of squares of `x` to `st`. Eight
/// running partial sums and plain compare-and-select keep the loop free of
/// serial dependencies, so the compiler vectorizes it.
fn sample_stats(x: &[f32], st: &mut ChannelStats) {
    let mut peak = [0f32; 8];
    let mut clipped = [0u32; 8];
    let mut sq = [0f64; 8];
    let mut chunks = x.chunks_exact(8);
    for ch in &mut chunks {
        for k in 0..8 {
            let a = ch[k].abs();
            peak[k] = if a > peak[k] { a } else { peak[k] };
            clipped[k] += (a >= CLIP_LEVEL) as u32;
            sq[k] += (ch[k] as f64) * (ch[k] as f64);
        }
    }
    for &v in chunks.remainder() {
        let a = v.abs();
        peak[0] = if a > peak[0] { a } else { peak[0] };
        clipped[0] += (a >= CLIP_LEVEL) as u32;
        sq[0] += (v as f64) * (v as f64);
    }
    for k in 0..8 {
        st.peak_abs = st.peak_abs.max(peak[k] as f64);
        st.clipped_samples += clipped[k] as u64;
        st.sum_sq += sq[k];
    }
}

/// Streaming survey; push interleaved blocks, then `finish`.
///
/// Peak, clipping and RMS come from the samples as they are; the spectra
/// from the input decimated (`dsp::decimate`) to the downconverter's
/// baseband rate, 10-20 kHz, so tones are looked for from 100 Hz up to
/// `PASS_FRACTION` of that rate (4.8 kHz for 48 kHz input).
pub struct Survey {
    /// Rate of the spectra (the input rate over `factor`), Hz.
    fs: u32,
    factor: usize,
    nfft: usize,
    hop: usize,
    win: Vec<f32>,
    /// Windowed on the fly from the frame (no copy), bit for bit `realfft`.
    fft: RealFft,
    spec: Vec<Complex32>,
    chans: Vec<Chan>,
    /// Frames per spectrogram column, when the spectrogram is kept.
    gram_per_col: Option<usize>,
}

/// Survey frame length: about 21 ms at 48 kHz, short enough to see keying.
pub fn survey_nfft(fs: u32) -> usize {
    ((fs as f64 * 0.021).round() as usize)
        .next_power_of_two()
        .max(128)
}

impl Survey {
    pub fn new(fs_in: u32, channels: usize) -> Survey {
        let factor = plan_sizes(fs_in).1;
        let fs = fs_in / factor as u32;
        let nfft = survey_nfft(fs);
        let fft = RealFft::new(nfft);
        let nb = nfft / 2 + 1;
        Survey {
            fs,
            factor,
            nfft,
            hop: nfft / 2,
            win: hann(nfft),
            spec: fft.make_output_vec(),
            fft,
            chans: (0..channels)
                .map(|_| Chan {
                    raw: Vec::new(),
                    front: Decimator::new(factor),
                    pending: Vec::with_capacity(2 * nfft),
                    fresh: Vec::new(),
                    sum_p: vec![0.0; nb],
                    sum_p2: vec![0.0; nb],
                    frames: 0,
                    stats: ChannelStats::default(),
                    gram: SurveyGram::default(),
                    gram_acc: Vec::new(),
                    gram_n: 0,
                })
                .collect(),
            gram_per_col: None,
        }
    }

    /// Also keeps each channel's spectrogram (see [`SurveyGram`]), for a
    /// recording of `total_frames` input samples: at most
    /// [`SPECTROGRAM_COLUMNS_MAX`] columns, so memory does not grow with
    /// length.
    pub fn keep_spectrogram(&mut self, total_frames: u64) {
        let per_col = frames_per_column(total_frames / self.factor as u64, self.nfft);
        self.gram_per_col = Some(per_col);
        for ch in &mut self.chans {
            ch.gram = SurveyGram {
                nfft: self.nfft,
                frames_per_column: per_col,
                columns: Vec::new(),
            };
            ch.gram_acc = vec![0.0; self.nfft / 2 + 1];
            ch.gram_n = 0;
        }
    }

    /// Adds interleaved frames.
    pub fn push(&mut self, interleaved: &[f32]) {
        let nc = self.chans.len();
        for (c, ch) in self.chans.iter_mut().enumerate() {
            let own: &[f32] = if nc == 1 {
                interleaved
            } else {
                ch.raw.clear();
                ch.raw
                    .extend(interleaved.iter().skip(c).step_by(nc).copied());
                &ch.raw
            };
            sample_stats(own, &mut ch.stats);
            let old = ch.pending.len();
            ch.front.push(own, &mut ch.pending);
            ch.fresh.clear();
            ch.fresh.extend_from_slice(&ch.pending[old..]);
            ch.stats.samples += (interleaved.len() / nc) as u64;
            let mut start = 0;
            while ch.pending.len() - start >= self.nfft {
                let frame = &ch.pending[start..start + self.nfft];
                self.fft.process_windowed(frame, &self.win, &mut self.spec);
                if let Some(per_col) = self.gram_per_col {
                    for (((s, sp), sp2), a) in self
                        .spec
                        .iter()
                        .zip(&mut ch.sum_p)
                        .zip(&mut ch.sum_p2)
                        .zip(&mut ch.gram_acc)
                    {
                        let p = s.norm_sqr() as f64;
                        *sp += p;
                        *sp2 += p * p;
                        *a += p;
                    }
                    ch.gram_n += 1;
                    if ch.gram_n == per_col {
                        let n = ch.gram_n as f64;
                        ch.gram
                            .columns
                            .extend(ch.gram_acc.iter().map(|v| (*v / n) as f32));
                        ch.gram_acc.iter_mut().for_each(|v| *v = 0.0);
                        ch.gram_n = 0;
                    }
                } else {
                    for ((s, sp), sp2) in self.spec.iter().zip(&mut ch.sum_p).zip(&mut ch.sum_p2) {
                        let p = s.norm_sqr() as f64;
                        *sp += p;
                        *sp2 += p * p;
                    }
                }
                ch.frames += 1;
                start += self.hop;
            }
            ch.pending.drain(..start);
        }
    }

    /// Decimation factor of the survey's front end.
    pub fn factor(&self) -> usize {
        self.factor
    }

    /// Channel `c` of the latest pushed block through the survey's front
    /// end (a `Decimator` of [`factor`](Self::factor) fed the channel from
    /// its first sample): what a downconverter with the same front end can
    /// take instead of decimating the channel again.
    pub fn fresh(&self, c: usize) -> &[f32] {
        &self.chans[c].fresh
    }

    /// Ends every channel's front end (`Decimator::flush`) and returns what
    /// each gave; the survey's own figures do not change.
    pub fn flush_fronts(&mut self) -> Vec<Vec<f32>> {
        self.chans
            .iter_mut()
            .map(|ch| {
                let mut tail = Vec::new();
                ch.front.flush(&mut tail);
                tail
            })
            .collect()
    }

    /// Input frames pushed so far (per channel).
    pub fn frames_seen(&self) -> u64 {
        self.chans.first().map_or(0, |c| c.stats.samples)
    }

    /// The spectrogram's layout (no columns yet, the same for every channel), when the
    /// spectrogram is kept: what a consumer checks before the columns exist.
    pub fn gram_shape(&self) -> Option<SurveyGram> {
        self.gram_per_col.map(|per_col| SurveyGram {
            nfft: self.nfft,
            frames_per_column: per_col,
            columns: Vec::new(),
        })
    }

    /// What the survey finds in the frames pushed so far, without the
    /// spectrograms; the survey goes on. Lets a caller choose a tone early
    /// and check the choice against [`finish`](Self::finish).
    pub fn snapshot(&self) -> SurveyResult {
        self.found()
    }

    /// Finds tone candidates in every channel, strongest first.
    pub fn finish(mut self) -> SurveyResult {
        let mut r = self.found();
        if self.gram_per_col.is_some() {
            r.spectrograms = self
                .chans
                .iter_mut()
                .map(|ch| std::mem::take(&mut ch.gram))
                .collect();
        }
        r
    }

    /// Candidates, spectra and channel statistics (spectrograms left empty).
    fn found(&self) -> SurveyResult {
        let fs = self.fs as f64;
        let nfft = self.nfft;
        let bin_hz = fs / nfft as f64;
        // Power of a full-scale sine in one Hann-windowed bin: (A * sum(w) / 2)^2.
        let wsum: f64 = self.win.iter().map(|&w| w as f64).sum();
        let sine_ref = (wsum / 2.0).powi(2);
        let mut candidates = Vec::new();
        let mut spectra = Vec::new();
        let mut channels = Vec::new();
        for (c, ch) in self.chans.iter().enumerate() {
            channels.push(ch.stats.clone());
            if ch.frames == 0 {
                spectra.push(vec![0.0; nfft / 2 + 1]);
                continue;
            }
            let nf = ch.frames as f64;
            let mean: Vec<f64> = ch.sum_p.iter().map(|p| p / nf).collect();
            let lo = ((100.0 / bin_hz).ceil() as usize).max(2);
            let top = if self.factor > 1 {
                PASS_FRACTION * fs
            } else {
                0.45 * fs
            };
            let hi = ((top / bin_hz).floor() as usize).min(mean.len() - 3);
            if hi <= lo + 4 {
                spectra.push(mean);
                continue;
            }
            // Peaks are looked for in the on-power spectrum E[p^2]/E[p] per
            // bin: a keyed tone stands out of it by its key-down power, not
            // by its power averaged with the key-up time. Noise bins read
            // twice their mean there (exponential frame power).
            let on: Vec<f64> = ch
                .sum_p
                .iter()
                .zip(&ch.sum_p2)
                .map(|(p, p2)| if *p > 0.0 { p2 / p } else { 0.0 })
                .collect();
            let mut band: Vec<f64> = on[lo..hi].to_vec();
            band.sort_by(|a, b| a.total_cmp(b));
            let floor = band[band.len() / 2].max(1e-30);
            let mut peaks: Vec<usize> = (lo..hi)
                .filter(|&k| {
                    on[k] > floor * 10f64.powf(PEAK_MARGIN_DB / 10.0)
                        && on[k] >= on[k - 1]
                        && on[k] > on[k + 1]
                })
                .collect();
            peaks.sort_by(|&a, &b| on[b].total_cmp(&on[a]));
            let mut kept: Vec<usize> = Vec::new();
            for k in peaks {
                // A Hann main lobe spans +-2 bins (two peaks that close are one
                // tone); beyond it the sidelobes of a
                // stronger peak fall as 1/(pi d (d^2 - 1)) in amplitude at d
                // bins (Harris 1978). A weaker peak within 10 dB of that
                // envelope is taken as part of the stronger one.
                if kept
                    .iter()
                    .any(|&q| q.abs_diff(k) <= 2 || on[k] < on[q] * sidelobe(q.abs_diff(k)))
                {
                    continue;
                }
                kept.push(k);
                if kept.len() >= 8 {
                    break;
                }
            }
            for k in kept {
                let (a, b, g) = (mean[k - 1].max(1e-300), mean[k], mean[k + 1].max(1e-300));
                let (la, lb, lg) = (a.ln(), b.ln(), g.ln());
                let den = la - 2.0 * lb + lg;
                let delta = if den.abs() > 1e-12 {
                    (0.5 * (la - lg) / den).clamp(-0.5, 0.5)
                } else {
                    0.0
                };
                // Frame power statistics of the peak bin; its level is corrected
                // for the Hann scalloping at the interpolated offset.
                let e_p = ch.sum_p[k] / nf;
                let e_p2 = ch.sum_p2[k] / nf;
                let on_k = if e_p > 0.0 { e_p2 / e_p } else { 0.0 };
                let duty = if e_p2 > 0.0 { e_p * e_p / e_p2 } else { 0.0 };
                let cv = if e_p > 0.0 {
                    ((e_p2 - e_p * e_p).max(0.0)).sqrt() / e_p
                } else {
                    0.0
                };
                let norm = sine_ref * hann_gain(delta).powi(2);
                candidates.push(Candidate {
                    channel: c,
                    frequency_hz: (k as f64 + delta) * bin_hz,
                    mean_power: e_p / norm,
                    on_power: on_k / norm,
                    duty,
                    keyed: cv > 0.3 && duty < 0.9,
                    prominence_db: 10.0 * (on[k] / floor).log10(),
                });
            }
            spectra.push(mean);
        }
        candidates.sort_by(|a, b| b.on_power.total_cmp(&a.on_power));
        SurveyResult {
            sample_rate_hz: self.fs,
            nfft,
            candidates,
            channels,
            spectra,
            spectrograms: Vec::new(),
        }
    }
}

/// Power of a Hann window's sidelobe envelope `d` bins from the peak,
/// relative to the peak, with a 10 dB margin.
fn sidelobe(d: usize) -> f64 {
    let d = d.max(2) as f64;
    10.0 / (std::f64::consts::PI * d * (d * d - 1.0)).powi(2)
}

/// Amplitude response of a Hann window's DFT at `d` bins from the tone,
/// relative to on-bin: sinc(d) / (1 - d^2) (Harris 1978).
fn hann_gain(d: f64) -> f64 {
    if d.abs() < 1e-9 {
        return 1.0;
    }
    let x = std::f64::consts::PI * d;
    (x.sin() / x) / (1.0 - d * d)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tone(fs: f64, f: f64, amp: f64, n: usize, keyed: bool) -> Vec<f32> {
        (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                let on = !keyed || ((t * 5.0).fract() < 0.5);
                if on {
                    (amp * (2.0 * std::f64::consts::PI * f * t).sin()) as f32
                } else {
                    0.0
                }
            })
            .collect()
    }

    #[test]
    fn finds_keyed_and_steady_tones_with_pitch_and_level() {
        let fs = 48_000.0;
        let a = tone(fs, 712.3, 0.5, 96_000, true);
        let b = tone(fs, 1_234.0, 0.05, 96_000, false);
        let x: Vec<f32> = a.iter().zip(&b).map(|(p, q)| p + q).collect();
        let mut s = Survey::new(48_000, 1);
        for chunk in x.chunks(777) {
            s.push(chunk);
        }
        let r = s.finish();
        assert!(r.candidates.len() >= 2, "{:?}", r.candidates);
        let k = &r.candidates[0];
        // Truth: the synthesized pitch; interpolation within 0.1 bin (47 Hz bins).
        assert!((k.frequency_hz - 712.3).abs() < 3.0, "{}", k.frequency_hz);
        assert!(k.keyed, "{k:?}");
        // Truth: 50 % duty square keying.
        assert!((k.duty - 0.5).abs() < 0.1, "{}", k.duty);
        // On-power of amplitude 0.5 is -6.02 dB re full-scale sine; within 1 dB.
        assert!((10.0 * k.on_power.log10() + 6.02).abs() < 1.0);
        let st = r
            .candidates
            .iter()
            .find(|c| (c.frequency_hz - 1234.0).abs() < 5.0)
            .unwrap();
        assert!(!st.keyed);
        assert!((10.0 * st.on_power.log10() + 26.02).abs() < 1.0);
    }
}
