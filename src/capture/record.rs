//! `cwaudit record`: sound card → ring → WAV file, with a level meter.
//! The callback only copies into the ring; this thread drains it to disk
//! every few tens of milliseconds. On Ctrl-C or at the end of `--seconds`
//! the stream is stopped first and the ring drained after, so everything
//! the callback delivered reaches the file.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc};
use std::time::{Duration, Instant};

use cpal::traits::StreamTrait;

use super::bridge::{drain, ring};
use super::devices::{choose, find, open_stream};
use super::health::{self, Health};
use super::wavout::{check_free, Format, WavSink};
use crate::error::{CwError, Result};

/// Full scale at which a sample counts as clipped (as in the survey).
pub const CLIP_LEVEL: f32 = 0.9999;
/// Ring capacity, s of audio: the disk may stall this long without loss.
pub const RING_S: f64 = 10.0;

/// Peak and clipping of the samples seen, per channel over all.
#[derive(Clone, Debug, Default)]
pub struct Meter {
    /// Peak since the last `take_recent`.
    pub recent: f32,
    /// Peak of the whole recording.
    pub peak: f32,
    pub clipped: u64,
}

impl Meter {
    pub fn add(&mut self, x: &[f32]) {
        for &v in x {
            let a = v.abs();
            self.recent = self.recent.max(a);
            if a >= CLIP_LEVEL {
                self.clipped += 1;
            }
        }
        self.peak = self.peak.max(self.recent);
    }
    pub fn take_recent(&mut self) -> f32 {
        std::mem::take(&mut self.recent)
    }
}

/// dBFS of a peak sample (full-scale sine = 0 dBFS).
pub fn dbfs(peak: f32) -> f64 {
    20.0 * (peak.max(1e-9) as f64).log10()
}

/// One meter line: peak dBFS, a bar from -60 to 0 dBFS, time, warnings.
pub fn meter_line(peak: f32, elapsed_s: f64, clipped: u64, dropped: u64) -> String {
    let db = dbfs(peak);
    let width = 30usize;
    let fill = (((db + 60.0) / 60.0).clamp(0.0, 1.0) * width as f64).round() as usize;
    // The last sixth (above -10 dBFS) marked differently: keep peaks below.
    let bar: String = (0..width)
        .map(|i| {
            if i >= fill {
                '.'
            } else if i >= width * 5 / 6 {
                '!'
            } else {
                '|'
            }
        })
        .collect();
    let mut s = format!(
        "{:>6.1} dBFS [{bar}] {:>3}:{:04.1}",
        db.max(-99.9),
        (elapsed_s / 60.0) as u64,
        elapsed_s % 60.0
    );
    if clipped > 0 {
        s.push_str(&format!("  CLIPPING ({clipped} samples)"));
    }
    if dropped > 0 {
        s.push_str(&format!("  {dropped} buffers dropped"));
    }
    s
}

/// Options of `cwaudit record` (and of the stream part of `watch`).
#[derive(clap::Args, Debug, Clone)]
pub struct StreamArgs {
    /// Input device: part of its name or description (case-insensitive);
    /// default: the system's default input. See `cwaudit devices`.
    #[arg(long, value_name = "NAME")]
    pub device: Option<String>,
    /// Sample rate, Hz (default 48000 if the device offers it).
    #[arg(long, value_name = "HZ")]
    pub rate: Option<u32>,
    /// Channels to record (default 1 if the device offers it).
    #[arg(long, value_name = "N")]
    pub channels: Option<u16>,
    /// Sample format of the stream and the file (default s16).
    #[arg(long, value_enum, value_name = "FORMAT")]
    pub format: Option<Format>,
}

#[derive(clap::Args, Debug)]
pub struct RecordArgs {
    /// The WAV file to write.
    #[arg(value_name = "OUT.wav")]
    pub out: PathBuf,
    #[command(flatten)]
    pub stream: StreamArgs,
    /// Stop after this many seconds (default: record until Ctrl-C).
    #[arg(long, value_name = "N")]
    pub seconds: Option<f64>,
    /// Replace OUT.wav if it exists.
    #[arg(long)]
    pub force: bool,
    /// Analyse the recording when it is finished (as `cwaudit analyze`).
    #[arg(long)]
    pub analyze: bool,
}

/// What a finished recording holds.
#[derive(Clone, Debug)]
pub struct Recorded {
    pub frames: u64,
    pub rate: u32,
    pub channels: u16,
    pub format: Format,
    pub peak: f32,
    pub clipped: u64,
    pub dropped_buffers: u64,
    pub dropped_frames: u64,
}

/// A flag set on Ctrl-C (SIGINT), SIGTERM or SIGHUP. Only the first call
/// per process installs the handler; later ones share its flag.
pub fn stop_flag() -> Arc<AtomicBool> {
    static FLAG: std::sync::OnceLock<Arc<AtomicBool>> = std::sync::OnceLock::new();
    FLAG.get_or_init(|| {
        let f = Arc::new(AtomicBool::new(false));
        let g = f.clone();
        let _ = ctrlc::set_handler(move || g.store(true, Ordering::SeqCst));
        f
    })
    .clone()
}

pub fn run(a: &RecordArgs) -> Result<i32> {
    if let Some(s) = a.seconds {
        if !(s > 0.0 && s.is_finite()) {
            return Err(CwError::Usage(format!(
                "--seconds must be a positive number, not {s}"
            )));
        }
    }
    check_free(&a.out, a.force)?;
    let dev = find(a.stream.device.as_deref())?;
    let c = choose(&dev, a.stream.rate, a.stream.channels, a.stream.format)?;
    let limit = a
        .seconds
        .map(|s| (s * c.rate as f64).round().max(1.0) as u64);
    let mut sink = WavSink::create(&a.out, c.rate, c.channels, c.format, a.force)?;
    let (feeder, mut cons, shared) = ring((RING_S * c.rate as f64) as usize, c.channels, limit);
    let (etx, erx) = mpsc::channel();
    let stop = stop_flag();
    let stream = open_stream(&dev, &c, feeder, health::reporter(etx))?;
    stream
        .play()
        .map_err(|e| CwError::Usage(format!("device {} could not start ({e})", c.name)))?;
    let tty = std::io::stderr().is_terminal();
    eprintln!(
        "cwaudit: recording from {} ({} Hz, {} channel(s), {}) to {}{}",
        c.name,
        c.rate,
        c.channels,
        c.format.name(),
        a.out.display(),
        match a.seconds {
            Some(s) => format!(" for {s} s"),
            None => "; Ctrl-C stops".into(),
        }
    );
    let mut meter = Meter::default();
    let mut buf = Vec::with_capacity(1 << 16);
    let mut last_draw = Instant::now();
    let per_s = c.rate as f64;
    let mut health = Health::new(erx, Instant::now());
    let mut ended = None;
    loop {
        let finished = shared.done() || stop.load(Ordering::SeqCst);
        buf.clear();
        while drain(&mut cons, c.channels, &mut buf, 1 << 16) > 0 {
            meter.add(&buf);
            sink.write(&buf)?;
            buf.clear();
        }
        let checkup = health.check(shared.frames(), Instant::now());
        for e in &checkup.notices {
            eprintln!("\ncwaudit: sound card: {e}");
        }
        if checkup.ended.is_some() {
            ended = checkup.ended;
            break;
        }
        if finished {
            break;
        }
        if tty && last_draw.elapsed() >= Duration::from_millis(100) {
            last_draw = Instant::now();
            let line = meter_line(
                meter.take_recent(),
                sink.frames() as f64 / per_s,
                meter.clipped,
                shared.dropped_buffers(),
            );
            let mut e = std::io::stderr().lock();
            let _ = write!(e, "\r{line}\x1b[K");
            let _ = e.flush();
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    // Stop the callbacks, then take what they left in the ring. A device
    // that stalled may hold its thread in a read that never returns, and
    // dropping the stream would wait for that thread: leave it to the exit.
    if ended.is_some() {
        std::mem::forget(stream);
    } else {
        drop(stream);
    }
    buf.clear();
    while drain(&mut cons, c.channels, &mut buf, 1 << 16) > 0 {
        meter.add(&buf);
        sink.write(&buf)?;
        buf.clear();
    }
    if let (Some(why), 0) = (&ended, sink.frames()) {
        // Nothing came: leave no empty file (and no file replaced by one).
        drop(sink);
        return Err(CwError::Usage(format!(
            "the sound card stopped before it delivered any audio ({why}); {} was not written",
            a.out.display()
        )));
    }
    let rec = Recorded {
        frames: sink.frames(),
        rate: c.rate,
        channels: c.channels,
        format: c.format,
        peak: meter.peak,
        clipped: meter.clipped,
        dropped_buffers: shared.dropped_buffers(),
        dropped_frames: shared.dropped_frames(),
    };
    sink.finish()?;
    if tty {
        eprintln!();
    }
    eprintln!("cwaudit: {}", summary_line(&a.out, &rec));
    for w in warnings(&rec) {
        eprintln!("cwaudit: {w}");
    }
    if let Some(why) = ended {
        return Err(CwError::Usage(format!(
            "the sound card stopped during the recording ({why}); the {:.2} s before that are kept in {}",
            rec.frames as f64 / rec.rate as f64,
            a.out.display()
        )));
    }
    if a.analyze {
        return crate::cli::analyze_one(&a.out);
    }
    Ok(0)
}

/// The closing line of a recording.
pub fn summary_line(out: &std::path::Path, r: &Recorded) -> String {
    format!(
        "wrote {} ({:.2} s, {} frames, {} Hz, {} channel(s), {}); peak {:.1} dBFS; {} clipped samples; {} dropped buffers ({} frames)",
        out.display(),
        r.frames as f64 / r.rate as f64,
        r.frames,
        r.rate,
        r.channels,
        r.format.name(),
        dbfs(r.peak),
        r.clipped,
        r.dropped_buffers,
        r.dropped_frames
    )
}

/// Plain warnings about a recording's level and gaps.
pub fn warnings(r: &Recorded) -> Vec<String> {
    let mut w = Vec::new();
    if r.clipped > 0 {
        w.push(format!(
            "{} samples reached full scale: the recording clipped. Lower the receiver's audio or the input gain so peaks stay below about -6 dBFS.",
            r.clipped
        ));
    }
    if r.dropped_buffers > 0 {
        w.push(format!(
            "{} buffers ({} frames, {:.3} s) were dropped because the program could not keep up: the file has gaps there.",
            r.dropped_buffers,
            r.dropped_frames,
            r.dropped_frames as f64 / r.rate as f64
        ));
    }
    if r.frames == 0 {
        w.push("no audio arrived from the device.".into());
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn meter_reads_peak_dbfs_and_counts_clipping() {
        // AES17: a sine peaking at 0.5 is -6.02 dBFS.
        let mut m = Meter::default();
        m.add(&[0.1, -0.5, 0.2]);
        assert!((dbfs(m.take_recent()) + 6.0206).abs() < 1e-3);
        m.add(&[1.0, -0.25]);
        assert_eq!(m.clipped, 1);
        assert_eq!(m.peak, 1.0);
        let line = meter_line(0.5, 65.25, 1, 2);
        assert!(line.starts_with("  -6.0 dBFS ["), "{line}");
        assert!(
            line.contains("1:05.2")
                && line.contains("CLIPPING (1 samples)")
                && line.contains("2 buffers dropped"),
            "{line}"
        );
        // -30 dBFS fills half of the 30-character bar.
        let half = meter_line(10f32.powf(-1.5), 0.0, 0, 0);
        assert_eq!(half.matches('|').count(), 15, "{half}");
    }
}
