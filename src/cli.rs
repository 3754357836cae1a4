//! Command line: parses arguments, runs a command, maps errors to exit codes.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use crate::analysis::{analyze_file, Options};
use crate::error::{CwError, Result};
use crate::fsutil::write_atomic;
use crate::present;

const AFTER_HELP: &str = "\
Exit codes: 0 = measured, 2 = the input or the command line could not be used
(one sentence on stderr says why).

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
}

#[derive(Args, Debug)]
pub struct AnalyzeArgs {
    /// The WAV file (PCM 8/16/24/32-bit or 32/64-bit float, 8 to 384 kHz).
    pub file: PathBuf,
    /// Channel to measure, from 1; default: the one with the strongest keyed tone.
    #[arg(long, value_name = "N")]
    pub channel: Option<u16>,
    /// Pitch of the tone to measure, Hz; default: the strongest keyed tone.
    #[arg(long, value_name = "HZ")]
    pub tone: Option<f64>,
    /// Print one JSON document instead of the text report.
    #[arg(long)]
    pub json: bool,
    /// Also write one row per element to this CSV file.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// List every element in the text report.
    #[arg(long)]
    pub elements: bool,
    /// Replace output files that already exist.
    #[arg(long)]
    pub force: bool,
}

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Folder for the demo's recordings (default: a new temporary folder that is kept).
    #[arg(long, value_name = "DIR")]
    pub dir: Option<PathBuf>,
}

fn analyze(a: &AnalyzeArgs) -> Result<i32> {
    let opt = Options {
        necessary_k: None,
        channel: a.channel,
        tone_hz: a.tone,
    };
    let rep = analyze_file(&a.file, &opt)?;
    if let Some(p) = &a.csv {
        write_atomic(p, present::csv::elements_csv(&rep).as_bytes(), a.force)?;
    }
    if a.json {
        emit(&format!("{}\n", present::json::to_json(&rep)));
    } else {
        emit(&present::text::render(&rep, a.elements));
    }
    if !rep.summary.keyed_signal_found {
        eprintln!("cwaudit: {}: no keyed tone was found", a.file.display());
        return Ok(2);
    }
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
