//! `cwaudit watch`: live measurement from the sound card. The callback
//! fills the ring; the analysis thread (`engine`) measures and sends
//! snapshots; this thread draws them (`screen`) and reads the keys.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

use cpal::traits::StreamTrait;
use ratatui::crossterm::event::{self, Event, KeyCode, KeyEventKind, KeyModifiers};
use ratatui::crossterm::execute;
use ratatui::crossterm::terminal::{
    disable_raw_mode, enable_raw_mode, EnterAlternateScreen, LeaveAlternateScreen,
};

use super::bridge::ring;
use super::devices::{choose, find, open_stream};
use super::engine::{spawn, Snapshot};
use super::health::{self, Checkup, Health};
use super::record::{stop_flag, StreamArgs};
use super::screen::{draw, UiState};
use super::wavout::{check_free, WavSink};
use crate::analysis::live::{LiveAnalyzer, LiveConfig};
use crate::cli::ToneArgs;
use crate::error::{CwError, Result};
use crate::judge::Profile;

/// Ring capacity for watch, s of audio: the analysis may fall this far
/// behind (a slow terminal, a busy machine) without losing input.
pub const RING_S: f64 = 30.0;

#[derive(clap::Args, Debug)]
pub struct WatchArgs {
    #[command(flatten)]
    pub stream: StreamArgs,
    #[command(flatten)]
    pub pick: ToneArgs,
    /// Elements the running figures cover.
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub window: usize,
    /// Limits to judge by (TOML, see `cwaudit limits`); default: the built-in limits.
    #[arg(long, value_name = "FILE")]
    pub profile: Option<PathBuf>,
    /// Also record what is measured to this WAV file.
    #[arg(long, value_name = "FILE")]
    pub save: Option<PathBuf>,
    /// Replace the --save file if it exists.
    #[arg(long)]
    pub force: bool,
}

/// Puts the terminal back however the display ends.
struct TermGuard;
impl Drop for TermGuard {
    fn drop(&mut self) {
        let _ = disable_raw_mode();
        let _ = execute!(
            std::io::stdout(),
            LeaveAlternateScreen,
            ratatui::crossterm::cursor::Show
        );
    }
}

pub fn run(a: &WatchArgs) -> Result<i32> {
    if a.window == 0 {
        return Err(CwError::Usage("--window must be at least 1".into()));
    }
    if !std::io::stdout().is_terminal() {
        return Err(CwError::Usage(
            "watch draws on a terminal; run it in one (to record without the display use `cwaudit record`)".into(),
        ));
    }
    let profile = match &a.profile {
        Some(p) => Profile::load(p)?,
        None => Profile::defaults(),
    };
    if let Some(p) = &a.save {
        check_free(p, a.force)?;
    }
    let dev = find(a.stream.device.as_deref())?;
    let c = choose(&dev, a.stream.rate, a.stream.channels, a.stream.format)?;
    let cfg = LiveConfig {
        window: a.window,
        options: crate::analysis::Options {
            channel: a.pick.channel,
            tone_hz: a.pick.tone,
            ..Default::default()
        },
        ..Default::default()
    };
    let an = LiveAnalyzer::new(c.rate, c.channels, cfg)?;
    let save = match &a.save {
        Some(p) => Some(WavSink::create(p, c.rate, c.channels, c.format, a.force)?),
        None => None,
    };
    let (feeder, cons, shared) = ring((RING_S * c.rate as f64) as usize, c.channels, None);
    let (etx, erx) = std::sync::mpsc::channel();
    let stream = open_stream(&dev, &c, feeder, health::reporter(etx))?;
    let (h, rx, ctl) = spawn(cons, shared.clone(), c.channels, an, profile, save);
    let stop = stop_flag();
    let mut ui = UiState {
        source: format!(
            "{} ({} Hz, {} ch, {})",
            c.name,
            c.rate,
            c.channels,
            c.format.name()
        ),
        save: a.save.as_ref().map(|p| p.display().to_string()),
        ..Default::default()
    };
    let shown = stream
        .play()
        .map_err(|e| CwError::Usage(format!("device {} could not start ({e})", c.name)))
        .and_then(|_| {
            let _guard = TermGuard;
            let term_err =
                |e: std::io::Error| CwError::Usage(format!("the terminal cannot be used ({e})"));
            enable_raw_mode().map_err(term_err)?;
            execute!(std::io::stdout(), EnterAlternateScreen).map_err(term_err)?;
            let mut term =
                ratatui::Terminal::new(ratatui::backend::CrosstermBackend::new(std::io::stdout()))
                    .map_err(term_err)?;
            let mut health = Health::new(erx, Instant::now());
            let mut stream_health = || health.check(shared.frames(), Instant::now());
            ui_loop(
                &mut term,
                &rx,
                &mut ui,
                &ctl.reset,
                &stop,
                &mut stream_health,
            )
        });
    // However the display ended: stop the input first, so the analysis
    // thread can empty the ring, then let it finish the --save file. A
    // stream that stopped may hold its thread in a read that never returns,
    // and dropping it would wait for that thread: leave it to the exit.
    if matches!(&shown, Ok((_, Some(_)))) {
        std::mem::forget(stream);
    } else {
        drop(stream);
    }
    ctl.quit.store(true, Ordering::Release);
    let ended = h
        .join()
        .map_err(|_| CwError::Usage("the analysis thread failed".into()))?;
    let (shown, stopped) = shown?;
    let ended = ended?;
    let last = ended.last.or(shown);
    if let Some(s) = &last {
        crate::cli::emit(&closing_text(s));
    }
    if let Some(p) = &a.save {
        eprintln!(
            "cwaudit: saved {} ({:.2} s)",
            p.display(),
            ended.saved_frames as f64 / c.rate as f64
        );
    }
    if shared.dropped_buffers() > 0 {
        eprintln!(
            "cwaudit: {} buffers ({} frames) were dropped because the analysis could not keep up.",
            shared.dropped_buffers(),
            shared.dropped_frames()
        );
    }
    match stopped {
        Some(why) => Err(CwError::Usage(format!(
            "the sound card stopped during the measurement ({why})"
        ))),
        None => Ok(0),
    }
}

type Term = ratatui::Terminal<ratatui::backend::CrosstermBackend<std::io::Stdout>>;

/// Draws snapshots as they come and handles the keys; returns the last
/// snapshot drawn when the user quits or the sound card stops, and in the
/// second case why (`stream_health` looks at the stream).
fn ui_loop(
    term: &mut Term,
    rx: &std::sync::mpsc::Receiver<Snapshot>,
    ui: &mut UiState,
    reset: &std::sync::atomic::AtomicBool,
    stop: &std::sync::atomic::AtomicBool,
    stream_health: &mut dyn FnMut() -> Checkup,
) -> Result<(Option<Snapshot>, Option<String>)> {
    let io = |e: std::io::Error| CwError::Usage(format!("the terminal cannot be used ({e})"));
    let mut shown: Option<Snapshot> = None;
    let mut newest: Option<Snapshot> = None;
    let mut last_row = Instant::now();
    loop {
        let mut dirty = false;
        match rx.recv_timeout(Duration::from_millis(25)) {
            Ok(s) => {
                newest = Some(s);
                while let Ok(s) = rx.try_recv() {
                    newest = Some(s);
                }
                dirty = true;
            }
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => {}
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => return Ok((shown, None)),
        }
        while event::poll(Duration::ZERO).map_err(io)? {
            if let Event::Key(k) = event::read().map_err(io)? {
                if k.kind != KeyEventKind::Press {
                    continue;
                }
                match k.code {
                    KeyCode::Char('q') | KeyCode::Esc => return Ok((shown, None)),
                    KeyCode::Char('c') if k.modifiers.contains(KeyModifiers::CONTROL) => {
                        return Ok((shown, None))
                    }
                    KeyCode::Char('r') => {
                        reset.store(true, Ordering::Release);
                        ui.waterfall.clear();
                    }
                    KeyCode::Char('f') | KeyCode::Char(' ') => ui.frozen = !ui.frozen,
                    _ => {}
                }
                dirty = true;
            } else {
                dirty = true;
            }
        }
        if stop.load(Ordering::SeqCst) {
            return Ok((shown, None));
        }
        let checkup = stream_health();
        if checkup.ended.is_some() {
            return Ok((shown, checkup.ended));
        }
        if let Some(e) = checkup.notices.last() {
            ui.notice = Some(e.clone());
            dirty = true;
        }
        if !ui.frozen {
            if let Some(n) = newest.take() {
                if last_row.elapsed() >= Duration::from_millis(100) {
                    last_row = Instant::now();
                    ui.add_row(&n.view.spectrum.db);
                }
                shown = Some(n);
            }
        }
        if dirty {
            if let Some(s) = &shown {
                term.draw(|f| draw(f, s, ui)).map_err(io)?;
            }
        }
    }
}

/// What stays on the terminal after quitting: the last running figures.
pub fn closing_text(s: &Snapshot) -> String {
    use std::fmt::Write;
    let v = &s.view;
    let mut t = String::new();
    let _ = writeln!(t, "cwaudit watch: {} elements measured", v.count);
    let sp = |n: &str, x: Option<crate::dsp::stats::Spread>, u: &str| match x {
        Some(x) => format!(
            "  {n}: median {:.2} {u} (p10 {:.2}, p90 {:.2})\n",
            x.median, x.p10, x.p90
        ),
        None => format!("  {n}: not measured\n"),
    };
    t.push_str(&sp("rise", v.summary.rise_ms, "ms"));
    t.push_str(&sp("fall", v.summary.fall_ms, "ms"));
    t.push_str(&sp("chirp", v.summary.chirp_hz, "Hz"));
    t.push_str(&sp("level", v.level_dbfs, "dBFS"));
    if let Some(p) = v.summary.tone_hz {
        let _ = writeln!(t, "  pitch: {p:.1} Hz");
    }
    if let Some(w) = v.summary.wpm {
        let _ = writeln!(t, "  speed: {w:.1} WPM");
    }
    for x in s
        .verdicts
        .iter()
        .filter(|x| x.status != crate::judge::Status::NotMeasured)
    {
        let _ = writeln!(
            t,
            "  {} {}: {}",
            x.metric,
            x.stat.as_deref().unwrap_or(""),
            x.status.as_str()
        );
    }
    t
}
