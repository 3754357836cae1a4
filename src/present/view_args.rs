//! Command-line options for the pictures and the HTML report, to be
//! flattened into `analyze`, and what they do.

use std::path::PathBuf;

use crate::analysis::report::Report;
use crate::error::{CwError, Result};
use crate::fsutil::write_atomic;

use super::html::render_html;
use super::plots::{write_plots, Mask};

#[derive(clap::Args, Debug, Default, Clone)]
pub struct ViewArgs {
    /// Draw the pictures (spectrogram, spectrum, edges, chirp, envelope)
    /// into this folder as PNG files; created if missing.
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,
    /// With --plots: write SVG instead of PNG.
    #[arg(long, requires = "plots")]
    pub svg: bool,
    /// Write one self-contained HTML report (summary, warnings, elements,
    /// pictures) to this file.
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Draw this spectrum mask on the spectrum picture: a text file with one
    /// "offset_hz dbc" pair per line, `#` starts a comment.
    #[arg(long, value_name = "FILE")]
    pub mask: Option<PathBuf>,
}

impl ViewArgs {
    /// True when any picture or report is asked for.
    pub fn wanted(&self) -> bool {
        self.plots.is_some() || self.report.is_some()
    }
}

/// Writes the pictures and the HTML report the options ask for.
/// The mask is read first, so a bad mask file stops before anything is written.
pub fn run(args: &ViewArgs, report: &Report, force: bool) -> Result<()> {
    if args.mask.is_some() && !args.wanted() {
        return Err(CwError::Usage(
            "--mask draws on the spectrum picture; give --plots DIR or --report FILE.html with it."
                .into(),
        ));
    }
    if args.svg && args.plots.is_none() {
        return Err(CwError::Usage("--svg needs --plots DIR.".into()));
    }
    let mask = args.mask.as_deref().map(Mask::load).transpose()?;
    if let Some(path) = &args.report {
        if path.is_dir() {
            return Err(CwError::output(
                path,
                "is a folder; --report needs a file name such as report.html",
            ));
        }
        if path.exists() && !force {
            return Err(CwError::output(
                path,
                "already exists; pass --force to replace it",
            ));
        }
    }
    if let Some(dir) = &args.plots {
        write_plots(report, dir, args.svg, mask.as_ref(), force)?;
    }
    if let Some(path) = &args.report {
        let html = render_html(report, mask.as_ref());
        write_atomic(path, html.as_bytes(), force)?;
    }
    Ok(())
}
