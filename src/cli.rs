//! Command line: parses arguments, runs a command, maps errors to exit codes.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use crate::analysis::{analyze_file, Options};
use crate::error::{CwError, Result};
use crate::fsutil::write_atomic;
use crate::judge::{self, Profile};
use crate::present;

const AFTER_HELP: &str = "\
Exit codes: 0 = measured and no limit failed (warnings allowed), 1 = a figure
failed its limit (for many files: any file; for compare: the after recording),
2 = the input, the profile or the command line could not be used (one sentence
on stderr says why; for many files: none could be measured).

Safety: transmit only where your licence allows, and into a dummy load when
testing. Keep RF out of the receiver and the sound card: couple loosely or
attenuate. Mind RF exposure and the high voltages in valve finals and mains
supplies. Local regulations and licensed practice come first; cwaudit measures,
it does not certify.";

/// Measures a CW transmitter's keying from a receiver's audio.
#[derive(Parser, Debug)]
#[command(name = "cwaudit", version, about, after_help = AFTER_HELP)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Measure the keying in a WAV recording of a receiver's audio.
    #[command(after_help = AFTER_HELP)]
    Analyze(AnalyzeArgs),
    /// Write a synthetic recording with known keying (and its truth as JSON).
    Synth(Box<crate::synth::cli::SynthArgs>),
    /// Make a small before/after scenario, analyse it and show the reports.
    Demo(DemoArgs),
    /// Compare a recording before and after a change: what got better, what got worse.
    #[command(after_help = AFTER_HELP)]
    Compare(CompareArgs),
    /// Print the limits in force (the built-in ones, or a profile's) as a TOML profile.
    Limits(LimitsArgs),
    /// Measure transmit/receive timing in a two-channel recording (key channel and monitor receiver).
    #[command(after_help = TIMING_HELP)]
    Timing(TimingArgs),
    /// List the sound card's input devices and what each can record.
    #[cfg(feature = "capture")]
    Devices,
    /// Record the receiver's audio from the sound card to a WAV file.
    #[cfg(feature = "capture")]
    #[command(after_help = CAPTURE_HELP)]
    Record(crate::capture::record::RecordArgs),
    /// Measure live from the sound card while you adjust: figures after every element.
    #[cfg(feature = "capture")]
    #[command(after_help = CAPTURE_HELP)]
    Watch(crate::capture::watch::WatchArgs),
}

const TIMING_HELP: &str = "\
Channels: the key channel is the rig's own audio (its sidetone, with the
receiver's background muted during transmit), or the keyer line (its keying
level, or a keyed audio tone on it); the RF channel is the monitor receiver
hearing the transmitter. Only the rig's own audio gives the receive recovery.

Exit codes: 0 = measured, 2 = the input or the command line could not be used
(one sentence on stderr says why).

Safety: transmit only where your licence allows, and into a dummy load when
testing. Keep RF out of the receiver and the sound card: couple loosely or
attenuate. Mind RF exposure and the high voltages in valve finals and mains
supplies. Local regulations and licensed practice come first; cwaudit measures,
it does not certify.";

#[derive(Args, Debug)]
pub struct TimingArgs {
    /// Two-channel WAV file.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,
    /// Channel of the rig's own audio or keyer line, from 1.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub key_channel: u16,
    /// Channel of the monitor receiver, from 1.
    #[arg(long, value_name = "N", default_value_t = 2)]
    pub rf_channel: u16,
    /// Pitch of the key channel's tone (sidetone), Hz; default: its strongest keyed tone.
    #[arg(long, value_name = "HZ")]
    pub key_tone: Option<f64>,
    /// Pitch of the RF channel's tone, Hz; default: its strongest keyed tone.
    #[arg(long, value_name = "HZ")]
    pub rf_tone: Option<f64>,
    /// Print one JSON document instead of the text report.
    #[arg(long)]
    pub json: bool,
}

fn timing_cmd(a: &TimingArgs) -> Result<i32> {
    for (name, v) in [("--key-tone", a.key_tone), ("--rf-tone", a.rf_tone)] {
        if let Some(f) = v {
            if !(f.is_finite() && f > 0.0) {
                return Err(CwError::Usage(format!(
                    "{name} must be a positive frequency in Hz, not {f}"
                )));
            }
        }
    }
    let opt = crate::analysis::txrx::TimingOptions {
        key_channel: a.key_channel,
        rf_channel: a.rf_channel,
        key_tone_hz: a.key_tone,
        rf_tone_hz: a.rf_tone,
    };
    let rep = crate::analysis::txrx::analyze_timing(&a.file, &opt)?;
    if a.json {
        emit(&format!("{}\n", present::txrx_text::timing_json(&rep)));
    } else {
        emit(&present::txrx_text::render_timing(&rep));
    }
    Ok(0)
}

#[cfg(feature = "capture")]
const CAPTURE_HELP: &str = "\
Safety: transmit only where your licence allows, and into a dummy load. Keep
RF out of the receiver and the sound card: couple the monitor receiver loosely
or through an attenuator, and feed the sound card from the receiver's audio
output only. Mind RF exposure and the high voltages in valve finals and mains
supplies. Local regulations and licensed practice come first; cwaudit
measures, it does not certify.

Exit codes: 0 = done, 1 = (record --analyze) a figure failed its limit,
2 = the device, the file or the command line could not be used, or the
device stopped (gone, or no samples for 5 s; what it sent is kept).";

#[derive(Args, Debug)]
pub struct AnalyzeArgs {
    /// WAV files (PCM 8/16/24/32-bit or 32/64-bit float, 8 to 384 kHz), or
    /// folders of them. More than one, or a folder: one summary table.
    #[arg(required = true, value_name = "FILE")]
    pub files: Vec<PathBuf>,
    #[command(flatten)]
    pub pick: ToneArgs,
    /// Print one JSON document instead of the text report.
    #[arg(long)]
    pub json: bool,
    /// Also write a CSV file: one row per element for one file, one row per
    /// file (the summary table) for many.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Limits to judge by (TOML, see `cwaudit limits`); default: the built-in limits.
    #[arg(long, value_name = "FILE")]
    pub profile: Option<PathBuf>,
    /// List every element in the text report.
    #[arg(long)]
    pub elements: bool,
    /// K of the necessary bandwidth B*K (Radio Regulations Appendix 1):
    /// 5 for fading circuits (default), 3 for non-fading.
    #[arg(long, value_name = "K", default_value_t = crate::analysis::spectral::DEFAULT_K)]
    pub k: f64,
    /// The recording is the rig's own audio and its sidetone is at HZ:
    /// report the sidetone-to-signal ratio and the receive muting depth.
    #[arg(long, value_name = "HZ")]
    pub sidetone: Option<f64>,
    /// With --sidetone: take the received signal's level from this recording
    /// (its strongest tone) instead of another tone in FILE.
    #[arg(
        long,
        value_name = "FILE",
        requires = "sidetone",
        conflicts_with = "reference_dbfs"
    )]
    pub reference: Option<PathBuf>,
    /// With --sidetone: the received signal's level, dBFS.
    #[arg(
        long,
        value_name = "DBFS",
        requires = "sidetone",
        allow_negative_numbers = true
    )]
    pub reference_dbfs: Option<f64>,
    /// Pictures and the HTML report.
    #[command(flatten)]
    pub view: crate::present::view_args::ViewArgs,
    /// Replace output files that already exist.
    #[arg(long)]
    pub force: bool,
}

/// Which channel and tone to measure (shared by `analyze` and `compare`).
#[derive(Args, Debug)]
pub struct ToneArgs {
    /// Channel to measure, from 1; default: the one with the strongest keyed tone.
    #[arg(long, value_name = "N")]
    pub channel: Option<u16>,
    /// Pitch of the tone to measure, Hz; default: the strongest keyed tone.
    #[arg(long, value_name = "HZ")]
    pub tone: Option<f64>,
}

impl ToneArgs {
    fn options(&self, necessary_k: Option<f64>) -> Options {
        Options {
            necessary_k,
            channel: self.channel,
            tone_hz: self.tone,
            ..Options::default()
        }
    }
}

#[derive(Args, Debug)]
pub struct CompareArgs {
    /// The recording before the change.
    pub before: PathBuf,
    /// The recording after the change.
    pub after: PathBuf,
    #[command(flatten)]
    pub pick: ToneArgs,
    /// Print one JSON document instead of the text.
    #[arg(long)]
    pub json: bool,
    /// Limits to judge by (TOML); default: the built-in limits.
    #[arg(long, value_name = "FILE")]
    pub profile: Option<PathBuf>,
    /// BEFORE was recorded with receive muting off and AFTER with it on (the
    /// rig's own audio, same tone): also report the muting depth.
    #[arg(long)]
    pub muting: bool,
}

#[derive(Args, Debug)]
pub struct LimitsArgs {
    /// Print this profile's limits (merged with the built-in ones unless it
    /// says `use_defaults = false`) instead of the built-in ones.
    #[arg(long, value_name = "FILE")]
    pub profile: Option<PathBuf>,
}

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Folder for the demo's recordings (default: a new temporary folder that is kept).
    #[arg(long, value_name = "DIR")]
    pub dir: Option<PathBuf>,
}

fn profile(p: Option<&std::path::Path>) -> Result<Profile> {
    match p {
        Some(p) => Profile::load(p),
        None => Ok(Profile::defaults()),
    }
}

/// Analyses one recording with the built-in limits and prints the text
/// report (`record --analyze`); returns the exit code.
pub fn analyze_one(path: &std::path::Path) -> Result<i32> {
    let mut rep = analyze_file(path, &Options::default())?;
    rep.verdicts = judge::judge(&rep.summary, &Profile::defaults());
    emit(&present::text::render(&rep, false));
    if !rep.summary.keyed_signal_found {
        eprintln!("cwaudit: {}: no keyed tone was found", path.display());
        return Ok(2);
    }
    Ok(judge::exit_code(&rep.verdicts))
}

fn analyze(a: &AnalyzeArgs) -> Result<i32> {
    if !(a.k > 0.0 && a.k.is_finite()) {
        return Err(CwError::Usage(format!(
            "--k must be a positive number, not {}",
            a.k
        )));
    }
    let mut opt = a.pick.options(Some(a.k));
    if let Some(st) = a.sidetone {
        if !(st > 0.0 && st.is_finite()) {
            return Err(CwError::Usage(format!(
                "--sidetone must be a pitch in Hz above 0, not {st}"
            )));
        }
    }
    opt.sidetone_hz = a.sidetone;
    opt.reference = a.reference.clone();
    opt.reference_dbfs = a.reference_dbfs;
    let prof = profile(a.profile.as_deref())?;
    if a.files.len() > 1 || a.files[0].is_dir() {
        if a.view.wanted() {
            return Err(CwError::Usage(
                "--plots and --report draw one recording; give a single file".into(),
            ));
        }
        return analyze_many(a, &opt, &prof);
    }
    let file = &a.files[0];
    let mut rep = analyze_file(file, &opt)?;
    rep.verdicts = judge::judge(&rep.summary, &prof);
    // Output files only when there was something to measure.
    if rep.summary.keyed_signal_found {
        if let Some(p) = &a.csv {
            write_atomic(p, present::csv::elements_csv(&rep).as_bytes(), a.force)?;
        }
        crate::present::view_args::run(&a.view, &rep, a.force)?;
    }
    if a.json {
        present::json::print_json(&rep);
    } else {
        emit(&present::text::render(&rep, a.elements));
    }
    if !rep.summary.keyed_signal_found {
        eprintln!("cwaudit: {}: no keyed tone was found", file.display());
        return Ok(2);
    }
    Ok(judge::exit_code(&rep.verdicts))
}

fn analyze_many(a: &AnalyzeArgs, opt: &Options, prof: &Profile) -> Result<i32> {
    if a.elements {
        return Err(CwError::Usage(
            "--elements lists the elements of one recording; give a single file".into(),
        ));
    }
    if let Some(p) = &a.csv {
        if p.exists() && !a.force {
            return Err(CwError::output(
                p,
                "already exists; pass --force to replace it",
            ));
        }
    }
    let b = crate::batch::run(&a.files, opt, prof, true);
    for e in &b.files {
        if let Some(msg) = &e.error {
            eprintln!("cwaudit: {msg}");
        }
    }
    if let Some(p) = &a.csv {
        // No table file when no recording could be measured (exit 2).
        if b.exit_code() != 2 {
            write_atomic(p, present::csv::batch_csv(&b).as_bytes(), a.force)?;
        }
    }
    if a.json {
        emit(&format!("{}\n", present::json::batch_json(&b)));
    } else {
        emit(&present::text::render_batch(&b));
    }
    Ok(b.exit_code())
}

fn compare(a: &CompareArgs) -> Result<i32> {
    let opt = a.pick.options(None);
    let prof = profile(a.profile.as_deref())?;
    let (before, after) = rayon::join(
        || analyze_file(&a.before, &opt),
        || analyze_file(&a.after, &opt),
    );
    let (before, after) = (before?, after?);
    for (r, p) in [(&before, &a.before), (&after, &a.after)] {
        if !r.summary.keyed_signal_found {
            return Err(CwError::input(
                p,
                "no keyed tone was found, so there is nothing to compare",
            ));
        }
    }
    let mut c = crate::compare::compare(before, after, &prof);
    if a.muting {
        c.muting = crate::compare::muting_across(&c.before, &c.after);
    }
    if a.json {
        emit(&format!("{}\n", present::json::compare_json(&c)));
    } else {
        emit(&present::text::render_compare(&c));
    }
    Ok(c.exit_code())
}

fn limits(a: &LimitsArgs) -> Result<i32> {
    emit(&profile(a.profile.as_deref())?.to_toml());
    Ok(0)
}

/// Writes to stdout; a closed pipe (`cwaudit ... | head`) is not an error.
pub fn emit(text: &str) {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes()).and_then(|_| out.flush());
}

/// Runs the command line; returns the process exit code.
pub fn main() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return code;
        }
    };
    let res: std::result::Result<i32, String> = match &cli.command {
        Command::Analyze(a) => analyze(a).map_err(|e| e.to_string()),
        Command::Synth(a) => crate::synth::cli::run(a)
            .map(|_| 0)
            .map_err(|e| format!("{e:#}")),
        Command::Demo(a) => crate::demo::run(a.dir.as_deref())
            .map(|_| 0)
            .map_err(|e| e.to_string()),
        Command::Compare(a) => compare(a).map_err(|e| e.to_string()),
        Command::Limits(a) => limits(a).map_err(|e| e.to_string()),
        Command::Timing(a) => timing_cmd(a).map_err(|e| e.to_string()),
        #[cfg(feature = "capture")]
        Command::Devices => crate::capture::devices::list()
            .map(|l| {
                emit(&crate::capture::devices::render(&l));
                0
            })
            .map_err(|e| e.to_string()),
        #[cfg(feature = "capture")]
        Command::Record(a) => crate::capture::record::run(a).map_err(|e| e.to_string()),
        #[cfg(feature = "capture")]
        Command::Watch(a) => crate::capture::watch::run(a).map_err(|e| e.to_string()),
    };
    match res {
        Ok(c) => c,
        Err(msg) => {
            eprintln!("cwaudit: {msg}");
            2
        }
    }
}

impl From<anyhow::Error> for CwError {
    fn from(e: anyhow::Error) -> Self {
        CwError::Usage(format!("{e:#}"))
    }
}
