//! Analysis: runs the streaming pipeline over a source and turns what the
//! DSP measured into a [`Report`].

pub mod carrier;
pub mod element;
pub mod live;
pub mod muting;
pub mod report;
pub mod spectral;
pub mod timing;
pub mod tones;
pub mod tracker;
pub mod txrx;
pub mod views;
pub mod warnings;

use std::path::Path;

use crate::dsp::downconvert::{Band, Downconverter};
use crate::dsp::stats::{median, spread};
use crate::dsp::survey::{Candidate, Survey, SurveyResult};
use crate::error::{CwError, Result};
use crate::input::wav::WavSource;
use crate::input::FrameSource;
use report::{Element, InputInfo, Report, Summary};
use tracker::ToneTracker;

/// Noise bandwidth the SNR refers to, Hz (a wide SSB filter).
pub const SNR_BANDWIDTH_HZ: f64 = 2500.0;
/// Frames read per block.
pub const BLOCK_FRAMES: usize = 8192;

/// Choices the user can make about an analysis.
#[derive(Clone, Debug, Default)]
pub struct Options {
    /// 1-based channel to analyse; None picks the strongest keyed tone.
    pub channel: Option<u16>,
    /// Pitch to analyse, Hz; None picks the strongest keyed tone.
    pub tone_hz: Option<f64>,
    /// K of the necessary bandwidth B K (default 5, fading circuits).
    pub necessary_k: Option<f64>,
    /// Pitch of the sidetone, Hz: asks for the sidetone-to-signal ratio and
    /// the receive muting depth (the recording is the rig's own audio).
    pub sidetone_hz: Option<f64>,
    /// The received signal's level for the ratio: a recording of it...
    pub reference: Option<std::path::PathBuf>,
    /// ...or a level in dBFS.
    pub reference_dbfs: Option<f64>,
}

/// Which tone to follow, from the survey and the options.
pub(crate) fn choose(s: &SurveyResult, opt: &Options, path: &Path) -> Result<Option<Candidate>> {
    if let Some(c) = opt.channel {
        if c == 0 || c as usize > s.channels.len() {
            return Err(CwError::Usage(format!(
                "{}: has {} channel(s); --channel {} does not exist",
                path.display(),
                s.channels.len(),
                c
            )));
        }
    }
    let in_channel = |k: &&Candidate| opt.channel.is_none_or(|c| k.channel + 1 == c as usize);
    if let Some(f) = opt.tone_hz {
        let near = s
            .candidates
            .iter()
            .filter(in_channel)
            .filter(|k| (k.frequency_hz - f).abs() < 50.0)
            .max_by(|a, b| a.on_power.total_cmp(&b.on_power));
        return Ok(Some(near.cloned().unwrap_or(Candidate {
            channel: opt.channel.map_or(0, |c| c as usize - 1),
            frequency_hz: f,
            mean_power: 0.0,
            on_power: 0.0,
            duty: 0.0,
            keyed: true,
            prominence_db: 0.0,
        })));
    }
    Ok(s.candidates
        .iter()
        .filter(in_channel)
        .filter(|k| k.keyed)
        .max_by(|a, b| a.on_power.total_cmp(&b.on_power))
        .cloned())
}

/// 10-90 % time of an ideal step through the envelope filter, s.
pub fn rise_floor_s(fs: u32, center_hz: f64) -> f64 {
    Downconverter::new(fs, Band::envelope(fs as f64, center_hz)).rise_floor_s()
}

/// Seconds of recording the survey has seen when the tone is first chosen
/// early, and between later tries while no keyed tone has shown.
const EARLY_FIRST_S: f64 = 10.0;
const EARLY_EVERY_S: f64 = 5.0;
/// Most bytes of input held while the tone is not yet chosen. Past it
/// nothing more is held and the measurement reads the recording again.
const EARLY_MAX_BYTES: usize = 16 << 20;

/// Analyses one WAV file.
///
/// Usually in one read: the survey looks at the first seconds, the tone is
/// chosen from what it found, and the measurement starts on the input held
/// so far and rides along with the survey to the end. The final survey
/// then checks the early choice (`ToneSet::fits`); should it differ (a tone
/// that starts late, a weak one that only the whole recording shows), the
/// recording is measured again in a second read with the final choice, so
/// the result is always that of the whole recording's survey. A recording
/// that ends before the choice is measured from the input held.
pub fn analyze_file(path: &Path, opt: &Options) -> Result<Report> {
    analyze_reading(path, opt, true).map(|(r, _)| r)
}

/// How the measurement got its input.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Route {
    /// From an early choice, in the survey's read.
    Early,
    /// From the whole recording, held while no choice was made.
    Held,
    /// In a second read.
    Reread,
    /// Nothing to measure.
    NoSignal,
}

/// [`analyze_file`], and how the input reached the measurement. With
/// `early_choice` false the tone is never chosen early and the recording is
/// always read twice (survey, then measurement): the plain way the single
/// read is checked against.
fn analyze_reading(path: &Path, opt: &Options, early_choice: bool) -> Result<(Report, Route)> {
    let mut src = WavSource::open(path)?;
    let info = src.info().clone();
    let nch = info.channels as usize;
    let fs = info.sample_rate_hz;
    let mut survey = Survey::new(fs, nch);
    if let Some(n) = info.frames {
        // The spectral pass's spectrogram uses the survey's frames.
        survey.keep_spectrogram(n);
    }
    let first = (EARLY_FIRST_S * fs as f64) as u64;
    let every = (EARLY_EVERY_S * fs as f64) as u64;
    let mut next_try = first;
    // The input while no tone is chosen (None once over the cap), and what
    // the survey's front end made of each channel of it.
    let mut held: Option<(Vec<f32>, Vec<Vec<f32>>)> =
        early_choice.then(|| (Vec::new(), vec![Vec::new(); nch]));
    let mut early: Option<Measure> = None;
    let mut buf = Vec::new();
    loop {
        // Tries at fixed sample counts, so the choice does not depend on
        // how the input is cut into blocks.
        if early_choice && early.is_none() && survey.frames_seen() >= next_try {
            next_try += every;
            if let Some((raw, dec)) = held.as_ref() {
                let snap = survey.snapshot();
                if let Some(c) = choose(&snap, opt, path)? {
                    let others = tones::others(&snap, &c);
                    let gram = survey.gram_shape();
                    let mut m =
                        Measure::new(&info, &c, &others, gram.as_ref(), Some(survey.factor()));
                    m.push(raw, nch, Some(&dec[c.channel]));
                    held = None;
                    early = Some(m);
                }
            }
        }
        let want = if early.is_none() && held.is_some() {
            (next_try - survey.frames_seen()).min(BLOCK_FRAMES as u64) as usize
        } else {
            BLOCK_FRAMES
        };
        if src.read_frames(&mut buf, want)? == 0 {
            break;
        }
        survey.push(&buf);
        if let Some(m) = early.as_mut() {
            let c = m.channel;
            m.push(&buf, nch, Some(survey.fresh(c)));
        } else if let Some((raw, dec)) = held.as_mut() {
            let dec_len: usize = dec.iter().map(Vec::len).sum();
            let more = buf.len() + (0..nch).map(|c| survey.fresh(c).len()).sum::<usize>();
            if (raw.len() + dec_len + more) * std::mem::size_of::<f32>() > EARLY_MAX_BYTES {
                held = None;
            } else {
                raw.extend_from_slice(&buf);
                for (c, d) in dec.iter_mut().enumerate() {
                    d.extend_from_slice(survey.fresh(c));
                }
            }
        }
    }
    let tails = survey.flush_fronts();
    let factor = survey.factor();
    let s = survey.finish();
    let cand = choose(&s, opt, path)?;
    let channel = cand
        .as_ref()
        .map(|c| c.channel)
        .or(opt.channel.map(|c| c as usize - 1))
        .unwrap_or_else(|| {
            // No keyed tone: report the loudest channel.
            (0..nch)
                .max_by(|&a, &b| s.channels[a].sum_sq.total_cmp(&s.channels[b].sum_sq))
                .unwrap_or(0)
        });
    let cs = &s.channels[channel];
    let frames = info.frames.unwrap_or(cs.samples);
    let input = InputInfo {
        path: path.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        channels: info.channels,
        channel_used: channel as u16 + 1,
        bits: info.bits,
        sample_format: info.sample_format.clone(),
        duration_s: frames as f64 / info.sample_rate_hz as f64,
        peak_dbfs: 20.0 * cs.peak_abs.max(1e-12).log10(),
        clipped_samples: cs.clipped_samples,
    };
    let Some(cand) = cand else {
        return Ok((no_signal(input, &s), Route::NoSignal));
    };

    let others = tones::others(&s, &cand);
    let gram = s.spectrograms.get(channel);
    let (mut m, route) = match (early, held) {
        (Some(m), _) if m.set.fits(fs, &cand, &others) => (m, Route::Early),
        (_, Some((raw, dec))) => {
            let mut m = Measure::new(&info, &cand, &others, gram, Some(factor));
            m.push(&raw, nch, Some(&dec[channel]));
            (m, Route::Held)
        }
        _ => {
            let mut m = Measure::new(&info, &cand, &others, gram, None);
            let mut src = WavSource::open(path)?;
            while src.read_frames(&mut buf, BLOCK_FRAMES)? > 0 {
                m.push(&buf, nch, None);
            }
            (m, Route::Reread)
        }
    };
    m.set.adopt(&cand, &others);
    let (set, rider) = m.finish(&tails[channel]);
    let (mut rep, side) = set.reports(input, info.sample_rate_hz);
    if rep.summary.keyed_signal_found {
        add_spectral(&mut rep, path, channel, opt, gram, rider.stream)?;
    }
    if let Some(st) = opt.sidetone_hz {
        tones::sidetone(&mut rep, &side, st, opt, path, channel)?;
    }
    Ok((rep, route))
}

/// The measurement of one choice of tones: the trackers and the spectral
/// pass riding along, fed the chosen channel of interleaved input.
struct Measure {
    set: tones::ToneSet,
    rider: SpectralRider,
    channel: usize,
    mono: Vec<f32>,
    /// The survey's front-end factor when the survey's decimation of the
    /// channel comes with the input (trackers decimating alike take it);
    /// None when each tracker decimates for itself.
    shared: Option<usize>,
}

impl Measure {
    /// `gram`: the survey's spectrogram of the channel, or only its layout
    /// while the survey is still running (the columns are read at the end).
    fn new(
        info: &crate::input::StreamInfo,
        main: &Candidate,
        others: &[Candidate],
        gram: Option<&crate::dsp::survey::SurveyGram>,
        shared: Option<usize>,
    ) -> Measure {
        let set = tones::ToneSet::new(info.sample_rate_hz, main, others);
        let rider = SpectralRider::new(info, tones::on_grid(main.frequency_hz), gram, &set);
        Measure {
            set,
            rider,
            channel: main.channel,
            mono: Vec::with_capacity(BLOCK_FRAMES),
            shared,
        }
    }

    /// Interleaved frames of `nch` channels; the chosen one is measured.
    /// `front`: the survey's decimation of that channel over the same
    /// stretch, given exactly when the measurement was made `shared`.
    fn push(&mut self, interleaved: &[f32], nch: usize, front: Option<&[f32]>) {
        // Held input comes as one long stretch: fed in reading-sized
        // pieces all the same, so the spectral pass's horizon advances as
        // usual (the decimated samples split in proportion; every stage
        // takes blocks of any size).
        let frames = interleaved.len() / nch;
        let pieces = frames.div_ceil(BLOCK_FRAMES).max(1);
        for k in 0..pieces {
            let block =
                &interleaved[k * BLOCK_FRAMES * nch..((k + 1) * BLOCK_FRAMES).min(frames) * nch];
            let x: &[f32] = if nch == 1 {
                block
            } else {
                self.mono.clear();
                self.mono
                    .extend(block.iter().skip(self.channel).step_by(nch));
                &self.mono
            };
            let piece = front.map(|d| &d[d.len() * k / pieces..d.len() * (k + 1) / pieces]);
            self.set.push(x, self.shared.zip(piece));
            self.rider.push(x, &self.set, false);
        }
    }

    /// Ends the input; `tail` is the survey's front-end flush of the
    /// channel (used when the measurement is `shared`).
    fn finish(mut self, tail: &[f32]) -> (tones::ToneSet, SpectralRider) {
        self.set.finish(self.shared.map(|f| (f, tail)));
        self.rider.push(&[], &self.set, true);
        (self.set, self.rider)
    }
}

fn no_signal(input: InputInfo, s: &SurveyResult) -> Report {
    let mut warnings = vec![format!(
        "No keyed tone was found in {}: nothing to measure.",
        input.path
    )];
    if let Some(c) = s
        .candidates
        .iter()
        .find(|c| c.channel + 1 == input.channel_used as usize)
    {
        warnings.push(format!(
            "There is a steady tone at {:.1} Hz ({:.1} dBFS) that is never keyed.",
            c.frequency_hz,
            10.0 * c.on_power.max(1e-30).log10()
        ));
    }
    Report {
        tool: "cwaudit".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        input,
        summary: Summary {
            snr_bandwidth_hz: SNR_BANDWIDTH_HZ,
            ..Default::default()
        },
        tones: vec![],
        elements: vec![],
        warnings,
        views: Default::default(),
        verdicts: vec![],
    }
}

/// Chirp of the typical key-down: the elements' deviation traces (each from
/// its own settled frequency) combined point by point from the 50 % rise (the
/// median across elements), then fitted like one element's. Combining N
/// elements cuts the trace noise by about sqrt(N), so a chirp too small to
/// see in one element shows here. Dits are
/// used when there are enough of them (they share one length), else all
/// elements up to the shortest. Only elements that kept their trace take
/// part: a long recording keeps traces for an evenly spread sample of its
/// elements (`tracker::TRACE_POINTS_MAX`).
pub fn ensemble_chirp(elements: &[Element]) -> Option<f64> {
    use crate::dsp::freq::{chirp, Trace};
    let traced = || elements.iter().filter(|e| !e.trace.is_empty());
    let dits: Vec<&Element> = traced().filter(|e| e.kind == report::Kind::Dit).collect();
    let set: Vec<&Element> = if dits.len() >= 5 {
        dits
    } else {
        traced().collect()
    };
    let len = set.iter().map(|e| e.trace.len()).min()?;
    if len < 8 || set.len() < 2 {
        return None;
    }
    let mut tr = Trace::default();
    // Median across elements at each instant: one element's noise spike
    // (the trace is weakest at the 50 % point) cannot move it.
    let mut col = Vec::with_capacity(set.len());
    for i in 0..len {
        col.clear();
        col.extend(set.iter().map(|e| e.trace[i].1 as f64));
        tr.t.push(set[0].trace[i].0 as f64);
        tr.f.push(median(&col));
        tr.w.push(1.0);
    }
    Some(chirp(&tr).chirp_hz)
}

/// 10-90 % times of the averaged rising and falling edges, ms.
pub fn mean_edges_ms(tr: &ToneTracker) -> (Option<f64>, Option<f64>) {
    use crate::dsp::edges::{fall_edge, rise_edge};
    use crate::dsp::levels::StateLevels;
    let (Some(lv), pn) = (tr.levels(), tr.noise_power().unwrap_or(0.0)) else {
        return (None, None);
    };
    let w = (crate::analysis::tracker::DETECT_WINDOW_S * tr.baseband_rate_hz())
        .round()
        .max(1.0);
    let high = (lv.high * lv.high - pn / w).max(0.0).sqrt();
    let levels = StateLevels { low: 0.0, high };
    let (r, f) = tr.mean_edges();
    let ms = |v: f64| v / tr.baseband_rate_hz() * 1e3;
    let one = |a: &tracker::EdgeAverage, rising: bool| -> Option<f64> {
        if a.count[a.half] < 2 {
            return None;
        }
        let env = a.envelope(pn);
        let n = env.len() - 1;
        let e = if rising {
            rise_edge(&env, &levels, a.half, 0, n)
        } else {
            fall_edge(&env, &levels, a.half, 0, n)
        };
        e.map(|e| ms(e.width()))
    };
    (one(r, true), one(f, false))
}

/// The spectral pass riding along with the measurement pass: the main
/// tracker's decimated input (or its own decimation of the channel when the
/// factors differ), its elements as they are measured, and the horizon
/// before which no further element can start.
struct SpectralRider {
    stream: spectral::SpectralStream,
    /// Own decimator when the tracker's front end decimates differently.
    own: Option<crate::dsp::decimate::Decimator>,
    dec: Vec<f32>,
    seen: usize,
    pushed: u64,
    fs_in: f64,
}

impl SpectralRider {
    fn new(
        info: &crate::input::StreamInfo,
        tone_hz: f64,
        gram: Option<&crate::dsp::survey::SurveyGram>,
        set: &tones::ToneSet,
    ) -> SpectralRider {
        let stream = spectral::SpectralStream::new(
            info.sample_rate_hz,
            info.frames.unwrap_or(0),
            tone_hz,
            gram,
            None,
        );
        let shared = set.main_tracker().downconverter().decimation_front() == stream.factor();
        SpectralRider {
            own: (!shared).then(|| crate::dsp::decimate::Decimator::new(stream.factor())),
            stream,
            dec: Vec::new(),
            seen: 0,
            pushed: 0,
            fs_in: info.sample_rate_hz as f64,
        }
    }

    /// After the trackers took `x` (or finished, `last`).
    fn push(&mut self, x: &[f32], set: &tones::ToneSet, last: bool) {
        let tr = set.main_tracker();
        self.stream.push_raw(x);
        self.pushed += x.len() as u64;
        match self.own.as_mut() {
            Some(d) => {
                self.dec.clear();
                if last {
                    d.flush(&mut self.dec);
                } else {
                    d.push(x, &mut self.dec);
                }
                self.stream.push_decimated(&self.dec);
            }
            None => self.stream.push_decimated(tr.downconverter().last_front()),
        }
        for e in &tr.elements()[self.seen..] {
            self.stream
                .add_element(e.start_s, e.start_s + (e.end_s - e.start_s));
        }
        self.seen = tr.elements().len();
        if !last {
            self.stream
                .set_horizon_s(self.pushed as f64 / self.fs_in - spectral::ELEMENT_LAG_S);
        }
    }
}

/// Spectra, bandwidths, clicks and the picture data. `ridden`: the pass as
/// it rode along with the measurement, used when it matches what a pass of
/// its own would do (else the recording is read a third time).
fn add_spectral(
    rep: &mut Report,
    path: &Path,
    channel: usize,
    opt: &Options,
    gram: Option<&crate::dsp::survey::SurveyGram>,
    ridden: spectral::SpectralStream,
) -> Result<()> {
    let s = &rep.summary;
    let (Some(tone), Some(level)) = (s.tone_hz, s.level_dbfs) else {
        return Ok(());
    };
    let els: Vec<(f64, f64)> = rep
        .elements
        .iter()
        .map(|e| (e.start_s, e.start_s + e.duration_s))
        .collect();
    let inp = spectral::SpectralInput {
        path,
        channel,
        tone_hz: tone,
        carrier_power: 10f64.powf(level / 10.0),
        elements: &els,
        unit_s: s.unit_ms.map(|u| u / 1e3),
        k: opt.necessary_k.unwrap_or(spectral::DEFAULT_K),
        others_hz: &rep
            .tones
            .iter()
            .filter(|t| !t.main)
            .map(|t| t.frequency_hz)
            .collect::<Vec<f64>>(),
        gram,
    };
    let out = if ridden.matches(tone, &els) {
        ridden.finish(&inp)
    } else {
        spectral::spectral_pass(&inp)?
    };
    rep.views.spectrum = out.spectrum;
    rep.views.noise = out.noise;
    rep.views.spectrogram = out.spectrogram;
    rep.views.envelope = out.envelope;
    rep.summary.spectral = out.figures;
    rep.warnings.extend(warnings::spectral(rep));
    Ok(())
}

/// Turns a finished tracker into a report.
pub fn build_report(input: InputInfo, tr: &mut ToneTracker, fs: u32) -> Report {
    let mut traces = Vec::new();
    let mut rises = Vec::new();
    let mut falls = Vec::new();
    for (t, r, f) in tr.take_views() {
        traces.push(t);
        rises.push(r);
        falls.push(f);
    }
    let els = tr.elements();
    let durations: Vec<f64> = els.iter().map(|e| e.end_s - e.start_s).collect();
    let gaps: Vec<Option<f64>> = (0..els.len())
        .map(|i| {
            els.get(i + 1)
                .filter(|_| !els[i].cut)
                .map(|n| n.start_s - els[i].end_s)
        })
        .collect();
    // Elements the recording cut at its start or end keep their place in
    // the list but stay out of the speed and the dit/dah clustering.
    let whole: Vec<usize> = (0..els.len()).filter(|&i| !els[i].truncated).collect();
    let mut t = timing::analyse(
        &whole.iter().map(|&i| durations[i]).collect::<Vec<f64>>(),
        &whole.iter().map(|&i| gaps[i]).collect::<Vec<Option<f64>>>(),
    );
    let unit = t.unit_s;
    let mut kinds = t.kinds.iter();
    t.kinds = (0..els.len())
        .map(|i| {
            if els[i].truncated {
                // What it can be: a dah only if it lasted longer than 2 units.
                if unit.is_some_and(|u| durations[i] > 2.0 * u) {
                    report::Kind::Dah
                } else {
                    report::Kind::Dit
                }
            } else {
                *kinds.next().expect("one kind per whole element")
            }
        })
        .collect();
    let dc = tr.downconverter();
    let band = dc.band();
    let noise = tr.noise_power();
    let elements: Vec<Element> = els
        .iter()
        .enumerate()
        .map(|(i, e)| Element {
            index: i + 1,
            start_s: e.start_s,
            duration_s: e.end_s - e.start_s,
            kind: t.kinds[i],
            rise_ms: e.rise_s.map(|v| v * 1e3),
            fall_ms: e.fall_s.map(|v| v * 1e3),
            chirp_hz: e.chirp_hz,
            chirp_raw_hz: e.chirp_raw_hz,
            chirp_noise_hz: e.chirp_noise_hz,
            level_dbfs: 10.0 * e.level_power.max(1e-30).log10(),
            frequency_hz: e.frequency_hz,
            gap_before_s: if i > 0 { gaps[i - 1] } else { None },
            trace: std::mem::take(&mut traces[i]),
        })
        .collect();
    let col = |f: &dyn Fn(&Element) -> Option<f64>| -> Vec<f64> {
        elements.iter().filter_map(f).collect()
    };
    let levels = col(&|e| Some(e.level_dbfs));
    let level_dbfs = (!levels.is_empty()).then(|| median(&levels));
    let snr_db = match (level_dbfs, noise) {
        (Some(l), Some(pn)) if pn > 0.0 => {
            // SNR = A^2 * Bn / (Pn * 2500): carrier power over the noise in 2.5 kHz.
            let a2 = 10f64.powf(l / 10.0);
            Some(10.0 * (a2 * dc.noise_bandwidth_hz() / (pn * SNR_BANDWIDTH_HZ)).log10())
        }
        _ => None,
    };
    let freqs = col(&|e| Some(e.frequency_hz));
    let ensemble = ensemble_chirp(&elements);
    let (mean_rise_ms, mean_fall_ms) = mean_edges_ms(tr);
    let summary = Summary {
        keyed_signal_found: !elements.is_empty(),
        tone_hz: (!freqs.is_empty()).then(|| median(&freqs)),
        level_dbfs,
        snr_db,
        snr_bandwidth_hz: SNR_BANDWIDTH_HZ,
        wpm: t.wpm,
        unit_ms: t.unit_s.map(|u| u * 1e3),
        dah_dit_ratio: t.dah_dit_ratio,
        mark_space_ratio: t.mark_space_ratio,
        rise_ms: spread(&col(&|e| e.rise_ms)),
        fall_ms: spread(&col(&|e| e.fall_ms)),
        chirp_hz: spread(&col(&|e| Some(e.chirp_hz))),
        chirp_raw_hz: spread(&col(&|e| Some(e.chirp_raw_hz))),
        chirp_mean_element_hz: ensemble,
        rise_mean_edge_ms: mean_rise_ms,
        fall_mean_edge_ms: mean_fall_ms,
        element_count: elements.len(),
        dit_count: elements
            .iter()
            .filter(|e| e.kind == report::Kind::Dit)
            .count(),
        dah_count: elements
            .iter()
            .filter(|e| e.kind == report::Kind::Dah)
            .count(),
        envelope_bandwidth_hz: (band.hi_hz + band.hi_rolloff_hz / 2.0)
            - (band.lo_hz - band.lo_rolloff_hz / 2.0),
        rise_floor_ms: rise_floor_s(fs, tr.center_hz()) * 1e3,
        baseband_rate_hz: dc.out_rate_hz(),
        sidetone: None,
        rx_muting_db: None,
        rx_muting: None,
        carrier: carrier::measure(tr, &elements, level_dbfs.map(|l| 10f64.powf(l / 10.0))),
        spectral: Default::default(),
    };
    let mut rep = Report {
        tool: "cwaudit".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        input,
        summary,
        tones: vec![],
        elements,
        warnings: vec![],
        views: Default::default(),
        verdicts: vec![],
    };
    rep.warnings = warnings::collect(&rep, tr);
    rep.views.edges = views::EdgesView {
        first_ms: tracker::EDGE_VIEW_FIRST_MS,
        step_ms: tracker::EDGE_VIEW_STEP_MS,
        rises,
        falls,
    };
    rep
}

#[cfg(test)]
mod reading_tests;
