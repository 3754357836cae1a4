//! Several tones in one recording: the transmitter under test, a sidetone,
//! other stations, a steady carrier. Each keyed tone is tracked on its own,
//! with every other tone notched out of its analysis band, in one pass over
//! the recording; steady tones are taken from the survey. The main tone
//! (the strongest keyed one, or `--tone`) drives the summary.

use rayon::prelude::*;

use super::report::{InputInfo, Report, SidetoneFigures, ToneInfo};
use super::tracker::{ToneTracker, TrackerConfig};
use super::{build_report, muting, Options};
use crate::dsp::downconvert::{Band, NOTCH_RAMP_HZ, NOTCH_ZERO_HZ};
use crate::dsp::survey::{Candidate, SurveyResult};
use crate::error::{CwError, Result};

/// Most tones besides the main one that are followed.
pub const MAX_OTHER_TONES: usize = 6;
/// Tones closer than this cannot be notched apart without cutting into
/// each other's own spectrum (the notch reaches ±80 Hz), Hz.
pub const MIN_SEPARATION_HZ: f64 = 2.0 * (NOTCH_ZERO_HZ + NOTCH_RAMP_HZ) - 10.0;
/// Two survey peaks closer than this are one tone, Hz.
const SAME_TONE_HZ: f64 = 40.0;
/// Peaks further below the main tone than this are not followed, dB.
const WEAKEST_DB: f64 = 75.0;
/// A tone this much weaker than the one being measured barely moves its
/// envelope (0.6 % in amplitude) and is not notched out of its band, dB.
const NOTCH_BELOW_DB: f64 = 45.0;

/// Is `f` a mains-related sideband (50 or 60 Hz times 1..6, ±3 Hz) of `of`?
fn mains_sideband(f: f64, of: f64) -> bool {
    let d = (f - of).abs();
    [50.0, 60.0]
        .iter()
        .any(|m| (1..=6).any(|k| (d - m * k as f64).abs() < 3.0))
}

/// The other tones in the main tone's channel worth following: clear of the
/// noise (the survey's test), not the main tone itself, and not a weak
/// peak at a mains-related distance from a stronger tone (that is the
/// stronger tone's hum sideband, not a station).
pub fn others(s: &SurveyResult, main: &Candidate) -> Vec<Candidate> {
    let same_channel: Vec<&Candidate> = s
        .candidates
        .iter()
        .filter(|c| c.channel == main.channel)
        .collect();
    let mut out: Vec<Candidate> = Vec::new();
    for c in &same_channel {
        if (c.frequency_hz - main.frequency_hz).abs() < SAME_TONE_HZ
            || c.on_power < main.on_power * 10f64.powf(-WEAKEST_DB / 10.0)
        {
            continue;
        }
        let sideband = same_channel.iter().any(|o| {
            o.on_power > 100.0 * c.on_power && mains_sideband(c.frequency_hz, o.frequency_hz)
        });
        if sideband || out.len() >= MAX_OTHER_TONES {
            continue;
        }
        out.push((*c).clone());
    }
    out
}

/// Half-width and roll-off of the band the other tones are measured in, Hz:
/// their levels and timing matter, not their fastest edges, and a narrow
/// band keeps a weak tone's envelope clear of the noise. Towards a stronger
/// tone the band ends well short of it, so that tone's keying sidebands stay
/// out.
const OTHER_HALF_HZ: f64 = 300.0;
const OTHER_MIN_HALF_HZ: f64 = 50.0;
const OTHER_ROLLOFF_HZ: f64 = 100.0;

/// Analysis band of the tone `c` (the main tone's wide band, or a narrow one
/// for the others) with the other tones (not too close, not too weak to
/// matter) notched out.
fn band_for(fs: u32, c: &Candidate, all: &[&Candidate], main: bool) -> Band {
    let far: Vec<f64> = all
        .iter()
        .filter(|o| (o.frequency_hz - c.frequency_hz).abs() >= MIN_SEPARATION_HZ)
        .filter(|o| o.on_power > c.on_power * 10f64.powf(-NOTCH_BELOW_DB / 10.0))
        .map(|o| on_grid(o.frequency_hz))
        .collect();
    let band = if main {
        Band::envelope(fs as f64, on_grid(c.frequency_hz))
    } else {
        let nearest_stronger = all
            .iter()
            .filter(|o| o.on_power > c.on_power)
            .map(|o| (on_grid(o.frequency_hz) - on_grid(c.frequency_hz)).abs())
            .fold(f64::INFINITY, f64::min);
        let half =
            (0.5 * nearest_stronger - OTHER_ROLLOFF_HZ).clamp(OTHER_MIN_HALF_HZ, OTHER_HALF_HZ);
        Band::narrow(on_grid(c.frequency_hz), half, OTHER_ROLLOFF_HZ)
    };
    band.with_notches(&far)
}

/// The main tone's tracker, one tracker per other keyed tone, and the
/// steady tones.
pub struct ToneSet {
    main: Candidate,
    others: Vec<Candidate>,
    /// trackers[0] is the main tone's; then one per keyed other tone, in
    /// the order of `others` filtered to keyed.
    trackers: Vec<ToneTracker>,
}

/// One tone's results beside the main report: what `tones[]` shows, plus
/// the element instants and PARIS unit (for muting).
#[derive(Clone, Debug)]
pub struct ToneResult {
    pub info: ToneInfo,
    pub spans: Vec<(f64, f64)>,
    pub unit_s: Option<f64>,
}

/// The bands of the trackers a [`ToneSet`] holds for this choice: the main
/// tone's, then each keyed other tone's, in the order of `others`.
fn bands(fs: u32, main: &Candidate, others: &[Candidate]) -> Vec<Band> {
    let all: Vec<&Candidate> = std::iter::once(main).chain(others).collect();
    std::iter::once(band_for(fs, main, &all, true))
        .chain(
            others
                .iter()
                .filter(|c| c.keyed)
                .map(|c| band_for(fs, c, &all, false)),
        )
        .collect()
}

/// Spacing of the grid the bands' centres and notches are put on, Hz. The
/// survey's pitch moves by thousandths of a hertz between its first seconds
/// and the whole recording; on this grid both give the same bands (but
/// where they straddle a grid line), so a choice made early sets up exactly
/// the trackers the final one would. The main tone's band is flat for
/// ±2 kHz and a notch reaches ±80 Hz: a quarter hertz off either changes
/// nothing a figure shows.
pub const BAND_GRID_HZ: f64 = 0.5;

/// `f` on the grid of [`BAND_GRID_HZ`].
pub fn on_grid(f: f64) -> f64 {
    (f / BAND_GRID_HZ).round() * BAND_GRID_HZ
}

/// Whether two bands are the same: edges, roll-offs, centre, notches.
fn same_band(a: &Band, b: &Band) -> bool {
    a.center_hz == b.center_hz
        && a.lo_hz == b.lo_hz
        && a.hi_hz == b.hi_hz
        && a.lo_rolloff_hz == b.lo_rolloff_hz
        && a.hi_rolloff_hz == b.hi_rolloff_hz
        && a.notch_count == b.notch_count
        && a.notches[..a.notch_count] == b.notches[..b.notch_count]
}

impl ToneSet {
    pub fn new(fs: u32, main: &Candidate, others: &[Candidate]) -> ToneSet {
        let mut bands = bands(fs, main, others).into_iter();
        let mut trackers = vec![ToneTracker::with_band(
            fs,
            bands.next().expect("the main tone's band"),
        )];
        for band in bands {
            trackers.push(ToneTracker::with_band_config(
                fs,
                band,
                TrackerConfig {
                    keep_traces: false,
                    ..TrackerConfig::default()
                },
            ));
        }
        ToneSet {
            main: main.clone(),
            others: others.to_vec(),
            trackers,
        }
    }

    /// Whether this set, made from an early look at the recording, holds
    /// the trackers a set made from the final choice (`main`, `others`)
    /// would hold: the same channel, the same tones keyed alike, and the
    /// same band for every tracker. Then what it measured is what that set
    /// would have measured.
    pub fn fits(&self, fs: u32, main: &Candidate, others: &[Candidate]) -> bool {
        if self.main.channel != main.channel
            || self.others.len() != others.len()
            || !self
                .others
                .iter()
                .zip(others)
                .all(|(a, b)| a.keyed == b.keyed)
        {
            return false;
        }
        let want = bands(fs, main, others);
        want.len() == self.trackers.len()
            && want
                .iter()
                .zip(&self.trackers)
                .all(|(b, t)| same_band(&t.downconverter().band(), b))
    }

    /// Takes the final survey's records of the tones (the main candidate,
    /// the steady tones' pitches and levels) in place of the early ones
    /// the set was made from; the trackers stay. Call only when
    /// [`fits`](Self::fits) said so.
    pub fn adopt(&mut self, main: &Candidate, others: &[Candidate]) {
        self.main = main.clone();
        self.others = others.to_vec();
    }

    /// The main tone's tracker.
    pub fn main_tracker(&self) -> &ToneTracker {
        &self.trackers[0]
    }

    /// Feeds one block of the analysed channel to every tracker.
    ///
    /// `front`: the block also through a front end decimating by `front.0`
    /// (its output `front.1`, see `ToneTracker::push_decimated`); the
    /// trackers whose downconverter decimates by that factor take it instead
    /// of decimating the block again.
    pub fn push(&mut self, mono: &[f32], front: Option<(usize, &[f32])>) {
        let one = |t: &mut ToneTracker| match front {
            Some((f, d)) if t.downconverter().decimation_front() == f => {
                t.push_decimated(mono.len(), d)
            }
            _ => t.push(mono),
        };
        if self.trackers.len() == 1 {
            one(&mut self.trackers[0]);
        } else {
            self.trackers.par_iter_mut().for_each(one);
        }
    }

    /// Ends the input; `front`: the shared front end's factor and flush
    /// output when [`push`](Self::push) had one.
    pub fn finish(&mut self, front: Option<(usize, &[f32])>) {
        self.trackers.par_iter_mut().for_each(|t| match front {
            Some((f, d)) if t.downconverter().decimation_front() == f => t.finish_decimated(d),
            _ => t.finish(),
        });
    }

    /// The main tone's report (with `tones[]` and the warnings about the
    /// others) and every tone's results.
    pub fn reports(mut self, input: InputInfo, fs: u32) -> (Report, Vec<ToneResult>) {
        let mut trackers = std::mem::take(&mut self.trackers).into_iter();
        let mut main_tr = trackers.next().expect("the main tracker is always made");
        let band = main_tr.downconverter().band();
        let (band_lo, band_hi) = (
            band.lo_hz - 0.5 * band.lo_rolloff_hz,
            band.hi_hz + 0.5 * band.hi_rolloff_hz,
        );
        let mut rep = build_report(input.clone(), &mut main_tr, fs);
        let mut results = vec![result_of(&rep, true)];
        for c in &self.others {
            if c.keyed {
                let mut tr = trackers.next().expect("one tracker per keyed other tone");
                let r = build_report(input.clone(), &mut tr, fs);
                // Keyed by the survey's test but no element held up, or the
                // elements sit at another frequency: a feature of another
                // tone's spectrum, not a signal.
                let near = r
                    .summary
                    .tone_hz
                    .is_some_and(|f| (f - c.frequency_hz).abs() < SAME_TONE_HZ);
                if r.summary.keyed_signal_found && near {
                    results.push(result_of(&r, false));
                }
            } else {
                results.push(ToneResult {
                    info: ToneInfo {
                        frequency_hz: c.frequency_hz,
                        level_dbfs: Some(dbfs(c.on_power)),
                        keyed: false,
                        elements: 0,
                        main: false,
                        wpm: None,
                        rise_ms: None,
                        fall_ms: None,
                    },
                    spans: vec![],
                    unit_s: None,
                });
            }
        }
        results.sort_by(|a, b| {
            b.info
                .level_dbfs
                .unwrap_or(-400.0)
                .total_cmp(&a.info.level_dbfs.unwrap_or(-400.0))
        });
        rep.tones = results.iter().map(|r| r.info.clone()).collect();
        let main_hz = rep.summary.tone_hz.unwrap_or(self.main.frequency_hz);
        let main_level = rep.summary.level_dbfs;
        let mut withheld = false;
        // Tones too close to separate, from the survey (such a tone may not
        // track on its own, its band holding the main tone too).
        for c in &self.others {
            let d = (c.frequency_hz - main_hz).abs();
            if d >= MIN_SEPARATION_HZ {
                continue;
            }
            withheld = rep.summary.keyed_signal_found;
            let rel = main_level.map_or(String::new(), |b| {
                format!(" ({:+.1} dB against the main tone)", dbfs(c.on_power) - b)
            });
            rep.warnings.push(format!(
                "Another tone at {:.1} Hz{rel} is only {d:.0} Hz from the main tone at {main_hz:.1} Hz, closer than the {MIN_SEPARATION_HZ:.0} Hz cwaudit can separate: the main tone's rise, fall and chirp figures are withheld because that tone adds to its envelope and frequency. Record with only the transmitter under test in the passband, or tune so the tones are further apart.",
                c.frequency_hz
            ));
        }
        for t in rep.tones.iter().filter(|t| !t.main) {
            let d = (t.frequency_hz - main_hz).abs();
            if t.frequency_hz < band_lo || t.frequency_hz > band_hi || d < MIN_SEPARATION_HZ {
                continue;
            }
            let rel = match (t.level_dbfs, main_level) {
                (Some(a), Some(b)) => format!(" ({:+.1} dB against the main tone)", a - b),
                _ => String::new(),
            };
            rep.warnings.push(format!(
                "Another tone at {:.1} Hz{rel} is inside the main tone's analysis band ({band_lo:.0} to {band_hi:.0} Hz); it was notched out (±{:.0} Hz around it) so it does not add to the main tone's figures. Its own key clicks, if it has any, still do.",
                t.frequency_hz,
                NOTCH_ZERO_HZ + NOTCH_RAMP_HZ
            ));
        }
        if withheld {
            withhold(&mut rep);
        }
        (rep, results)
    }
}

/// dBFS of a survey power (full-scale sine = 1).
fn dbfs(p: f64) -> f64 {
    10.0 * p.max(1e-30).log10()
}

fn result_of(r: &Report, main: bool) -> ToneResult {
    let s = &r.summary;
    ToneResult {
        info: ToneInfo {
            frequency_hz: s.tone_hz.unwrap_or(0.0),
            level_dbfs: s.level_dbfs,
            keyed: true,
            elements: s.element_count,
            main,
            wpm: s.wpm,
            rise_ms: s.rise_ms.map(|x| x.median),
            fall_ms: s.fall_ms.map(|x| x.median),
        },
        spans: r
            .elements
            .iter()
            .map(|e| (e.start_s, e.start_s + e.duration_s))
            .collect(),
        unit_s: s.unit_ms.map(|u| u / 1e3),
    }
}

/// Clears the figures another tone too close to the main one would spoil.
fn withhold(rep: &mut Report) {
    let s = &mut rep.summary;
    s.rise_ms = None;
    s.fall_ms = None;
    s.chirp_hz = None;
    s.chirp_raw_hz = None;
    s.chirp_mean_element_hz = None;
    s.rise_mean_edge_ms = None;
    s.fall_mean_edge_ms = None;
    for e in &mut rep.elements {
        e.rise_ms = None;
        e.fall_ms = None;
    }
}

/// Fills `summary.sidetone` and the receive muting for `--sidetone HZ`.
pub fn sidetone(
    rep: &mut Report,
    tones: &[ToneResult],
    pitch_hz: f64,
    opt: &Options,
    path: &std::path::Path,
    channel: usize,
) -> Result<()> {
    let Some(st) = tones
        .iter()
        .filter(|t| (t.info.frequency_hz - pitch_hz).abs() < 50.0)
        .min_by(|a, b| {
            (a.info.frequency_hz - pitch_hz)
                .abs()
                .total_cmp(&(b.info.frequency_hz - pitch_hz).abs())
        })
    else {
        rep.warnings.push(format!(
            "No tone was found within 50 Hz of the sidetone pitch {pitch_hz:.1} Hz: no sidetone ratio or muting depth. Check the pitch (the tones found are listed under tones)."
        ));
        return Ok(());
    };
    let Some(st_dbfs) = st.info.level_dbfs else {
        return Ok(());
    };
    let signal: Option<(Option<f64>, f64, &str)> = if let Some(x) = opt.reference_dbfs {
        Some((None, x, "given level"))
    } else if let Some(p) = &opt.reference {
        let r = super::analyze_file(p, &Options::default())?;
        let t = r.tones.first().ok_or_else(|| {
            CwError::input(p, "has no tone to take as the received signal's level")
        })?;
        let l = t.level_dbfs.ok_or_else(|| {
            CwError::input(
                p,
                "has no measurable tone level to take as the received signal's",
            )
        })?;
        Some((Some(t.frequency_hz), l, "reference file"))
    } else {
        tones
            .iter()
            .filter(|t| t.info.keyed && t.info.frequency_hz != st.info.frequency_hz)
            .filter_map(|t| t.info.level_dbfs.map(|l| (t.info.frequency_hz, l)))
            .max_by(|a, b| a.1.total_cmp(&b.1))
            .map(|(f, l)| (Some(f), l, "tone"))
    };
    match signal {
        Some((f, l, from)) => {
            rep.summary.sidetone = Some(SidetoneFigures {
                ratio_db: st_dbfs - l,
                sidetone_dbfs: st_dbfs,
                signal_dbfs: l,
                sidetone_hz: st.info.frequency_hz,
                signal_hz: f,
                signal_source: from.into(),
            });
        }
        None => rep.warnings.push(
            "No other keyed tone was found to compare the sidetone with: give --reference FILE (a recording of a received signal) or --reference-dbfs LEVEL.".into(),
        ),
    }
    if st.info.keyed && !st.spans.is_empty() {
        if let Some(m) = muting::measure(path, channel, st.info.frequency_hz, &st.spans, st.unit_s)?
        {
            rep.summary.rx_muting_db = Some(m.depth_db());
            rep.summary.rx_muting = Some(m);
        }
    }
    Ok(())
}
