//! Many recordings at once: folders expanded to their WAV files, every file
//! analysed in parallel (rayon) and judged, one bad file reported without
//! stopping the others.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use serde::Serialize;

use crate::analysis::report::Report;
use crate::analysis::{analyze_file, Options};
use crate::judge::{self, Profile, Status};

/// One file's outcome.
#[derive(Clone, Debug, Serialize)]
pub struct Entry {
    pub path: String,
    /// "pass", "warn", "fail", or null when the file could not be measured.
    pub result: Option<Status>,
    /// One sentence naming the file and the problem, when it could not be measured.
    pub error: Option<String>,
    pub report: Option<Report>,
}

/// All files, in the order given (folders sorted by name).
#[derive(Clone, Debug, Serialize)]
pub struct Batch {
    pub tool: String,
    pub version: String,
    pub files: Vec<Entry>,
}

impl Batch {
    /// 2 when no file could be measured, else 1 when any failed its limits, else 0.
    pub fn exit_code(&self) -> i32 {
        if self.files.iter().all(|e| e.report.is_none()) {
            2
        } else if self.files.iter().any(|e| e.result == Some(Status::Fail)) {
            1
        } else {
            0
        }
    }
}

/// What to analyse: a file as given, or a folder's `*.wav` files (any case
/// of the extension), sorted by name. A folder that cannot be read or holds
/// no WAV file becomes an error.
pub fn expand(paths: &[PathBuf]) -> Vec<std::result::Result<PathBuf, (PathBuf, String)>> {
    let mut out = Vec::new();
    for p in paths {
        if !p.is_dir() {
            out.push(Ok(p.clone()));
            continue;
        }
        let rd = match std::fs::read_dir(p) {
            Ok(rd) => rd,
            Err(e) => {
                out.push(Err((
                    p.clone(),
                    format!("{}: the folder cannot be read ({e})", p.display()),
                )));
                continue;
            }
        };
        let mut wavs: Vec<PathBuf> = rd
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|f| f.is_file() && f.extension().is_some_and(|x| x.eq_ignore_ascii_case("wav")))
            .collect();
        wavs.sort();
        if wavs.is_empty() {
            out.push(Err((
                p.clone(),
                format!("{}: the folder holds no .wav file", p.display()),
            )));
        }
        out.extend(wavs.into_iter().map(Ok));
    }
    out
}

/// Analyses and judges one file.
pub fn one(path: &Path, opt: &Options, profile: &Profile) -> Entry {
    let name = path.display().to_string();
    match analyze_file(path, opt) {
        Ok(mut rep) if rep.summary.keyed_signal_found => {
            rep.verdicts = judge::judge(&rep.summary, profile);
            Entry {
                path: name,
                result: Some(judge::overall(&rep.verdicts)),
                error: None,
                report: Some(rep),
            }
        }
        Ok(_) => Entry {
            error: Some(format!("{name}: no keyed tone was found")),
            path: name,
            result: None,
            report: None,
        },
        Err(e) => Entry {
            path: name,
            result: None,
            error: Some(e.to_string()),
            report: None,
        },
    }
}

/// Analyses every path (folders expanded) in parallel. A progress bar goes
/// to stderr when `progress` is set, stderr is a terminal and there are
/// more than two files.
pub fn run(paths: &[PathBuf], opt: &Options, profile: &Profile, progress: bool) -> Batch {
    let items = expand(paths);
    let bar = (progress && items.len() > 2 && std::io::stderr().is_terminal()).then(|| {
        let b = indicatif::ProgressBar::new(items.len() as u64);
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "analysing {pos}/{len} files {wide_bar} {elapsed}",
        ) {
            b.set_style(style);
        }
        b
    });
    let files: Vec<Entry> = items
        .par_iter()
        .map(|it| {
            let e = match it {
                Ok(p) => one(p, opt, profile),
                Err((p, msg)) => Entry {
                    path: p.display().to_string(),
                    result: None,
                    error: Some(msg.clone()),
                    report: None,
                },
            };
            if let Some(b) = &bar {
                b.inc(1);
            }
            e
        })
        .collect();
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    Batch {
        tool: "cwaudit".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        files,
    }
}
