//! The analysis thread of `watch`: drains the ring, writes `--save`, feeds
//! the live analysis (the same survey and tracker as files) and sends a
//! snapshot to the display after every element and a few times a second.
//! The display thread only draws; it never measures.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

use rtrb::Consumer;

use super::bridge::{drain, Shared};
use super::wavout::WavSink;
use crate::analysis::live::{LiveAnalyzer, LiveView};
use crate::error::Result;
use crate::judge::{self, Profile, Verdict};

/// What the display gets: the view, its verdicts, and the input's health.
#[derive(Clone, Debug)]
pub struct Snapshot {
    pub view: LiveView,
    pub verdicts: Vec<Verdict>,
    pub dropped_buffers: u64,
    /// When the analysis thread made it.
    pub made: Instant,
}

/// Requests from the display to the analysis thread.
#[derive(Clone, Debug, Default)]
pub struct Control {
    pub quit: Arc<AtomicBool>,
    pub reset: Arc<AtomicBool>,
}

/// How the thread ends.
#[derive(Debug)]
pub struct Ended {
    pub last: Option<Snapshot>,
    pub saved_frames: u64,
}

/// Snapshots without a new element, at least this often.
pub const TICK: Duration = Duration::from_millis(200);
/// Largest block fed to the analysis at once, frames (10 ms at 48 kHz), so
/// an element found is reported without waiting for a large backlog.
pub const BLOCK_FRAMES: usize = 480;

/// Starts the analysis thread.
pub fn spawn(
    mut cons: Consumer<f32>,
    shared: Arc<Shared>,
    channels: u16,
    mut an: LiveAnalyzer,
    profile: Profile,
    mut save: Option<WavSink>,
) -> (JoinHandle<Result<Ended>>, mpsc::Receiver<Snapshot>, Control) {
    let (tx, rx) = mpsc::channel();
    let ctl = Control::default();
    let c2 = ctl.clone();
    let h = std::thread::Builder::new()
        .name("cwaudit-analysis".into())
        .spawn(move || {
            let mut buf = Vec::with_capacity(BLOCK_FRAMES * channels as usize);
            let mut last_sent = Instant::now() - TICK;
            let mut last = None;
            let send = |an: &mut LiveAnalyzer, last: &mut Option<Snapshot>| {
                let view = an.view();
                let verdicts = judge::judge(&view.summary, &profile);
                let s = Snapshot {
                    view,
                    verdicts,
                    dropped_buffers: shared.dropped_buffers(),
                    made: Instant::now(),
                };
                *last = Some(s.clone());
                let _ = tx.send(s);
            };
            loop {
                let quitting = c2.quit.load(Ordering::Acquire);
                if c2.reset.swap(false, Ordering::AcqRel) {
                    an.reset();
                    send(&mut an, &mut last);
                    last_sent = Instant::now();
                }
                buf.clear();
                let n = drain(
                    &mut cons,
                    channels,
                    &mut buf,
                    BLOCK_FRAMES * channels as usize,
                );
                if n == 0 {
                    if quitting {
                        break;
                    }
                    if last_sent.elapsed() >= TICK {
                        send(&mut an, &mut last);
                        last_sent = Instant::now();
                    }
                    std::thread::sleep(Duration::from_millis(2));
                    continue;
                }
                if let Some(s) = save.as_mut() {
                    s.write(&buf)?;
                }
                an.push(&buf);
                let fresh = !an.take_new().is_empty();
                if fresh || last_sent.elapsed() >= TICK {
                    send(&mut an, &mut last);
                    last_sent = Instant::now();
                }
            }
            let saved_frames = save.as_ref().map_or(0, |s| s.frames());
            if let Some(s) = save {
                s.finish()?;
            }
            Ok(Ended { last, saved_frames })
        })
        .expect("the system can start a thread");
    (h, rx, ctl)
}
