//! Live measurement speed: a synthetic source delivers 10 ms buffers at
//! real-time pace into the same ring the sound-card callback fills; the
//! same analysis thread as `cwaudit watch` measures, and every snapshot
//! with a new element is drawn with the same screen code through a real
//! terminal backend (writing to a sink). Prints a table of the delay from
//! each element's key-up (its 50 % fall instant in stream time, mapped to
//! the wall clock) to the end of its draw, and the process CPU time
//! (getrusage) over the run.
//!
//! `cargo bench --features capture --bench live` (CWAUDIT_LIVE_SECONDS sets
//! the length, default 60).

use std::time::{Duration, Instant};

use cwaudit::analysis::live::{LiveAnalyzer, LiveConfig};
use cwaudit::capture::bridge::ring;
use cwaudit::capture::engine::spawn;
use cwaudit::capture::screen::{draw, UiState};
use cwaudit::judge::Profile;
use cwaudit::synth::{self, SynthSpec};
use ratatui::backend::CrosstermBackend;
use ratatui::layout::Rect;
use ratatui::{Terminal, TerminalOptions, Viewport};

fn cpu_s() -> f64 {
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut u) };
    let tv = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    tv(u.ru_utime) + tv(u.ru_stime)
}

fn quantile(v: &mut [f64], q: f64) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    let h = (v.len() - 1) as f64 * q;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    v[lo] + (h - lo as f64) * (v[hi] - v[lo])
}

fn main() {
    if std::env::args().any(|a| a == "--list") {
        println!("live: bench");
        return;
    }
    let seconds: f64 = std::env::var("CWAUDIT_LIVE_SECONDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(60.0);
    let fs = 48_000u32;
    let spec = SynthSpec {
        text: "PARIS ".repeat((seconds / 3.0).ceil() as usize),
        wpm: 20.0,
        pitch_hz: 700.0,
        snr_db: Some(30.0),
        ..Default::default()
    };
    let (x, truth) = synth::render(&spec).expect("valid spec");
    let x = &x[..((seconds * fs as f64) as usize).min(x.len())];
    let block = 480; // 10 ms buffers, as a sound card commonly delivers
    let (mut feeder, cons, shared) = ring(30 * fs as usize, 1, None);
    let an = LiveAnalyzer::new(fs, 1, LiveConfig::default()).expect("mono");
    let (h, rx, ctl) = spawn(cons, shared.clone(), 1, an, Profile::defaults(), None);
    let mut term = Terminal::with_options(
        CrosstermBackend::new(std::io::sink()),
        TerminalOptions {
            viewport: Viewport::Fixed(Rect::new(0, 0, 120, 42)),
        },
    )
    .expect("a sink terminal");
    let mut ui = UiState {
        source: "synthetic source (48000 Hz, 1 ch, f32)".into(),
        ..Default::default()
    };

    let cpu0 = cpu_s();
    let t0 = Instant::now();
    let samples: Vec<f32> = x.to_vec();
    let feed = std::thread::spawn(move || {
        for (k, b) in samples.chunks(block).enumerate() {
            let due = t0 + Duration::from_secs_f64((k + 1) as f64 * block as f64 / fs as f64);
            if let Some(d) = due.checked_duration_since(Instant::now()) {
                std::thread::sleep(d);
            }
            feeder.push(b);
        }
    });
    let mut latency_ms = Vec::new();
    let mut analysis_ms = Vec::new();
    let mut last_seen = 0;
    let mut last_row = Instant::now();
    let end = t0 + Duration::from_secs_f64(x.len() as f64 / fs as f64 + 0.5);
    while Instant::now() < end {
        let Ok(mut s) = rx.recv_timeout(Duration::from_millis(50)) else {
            continue;
        };
        while let Ok(n) = rx.try_recv() {
            s = n;
        }
        if last_row.elapsed() >= Duration::from_millis(100) {
            last_row = Instant::now();
            ui.add_row(&s.view.spectrum.db);
        }
        term.draw(|f| draw(f, &s, &ui)).expect("sink");
        let done = Instant::now();
        if let Some(e) = &s.view.last {
            if e.number != last_seen {
                last_seen = e.number;
                // Elements of the initial stretch wait for it by design.
                if e.end_s > LiveConfig::default().initial_s + 0.5 {
                    let key_up = t0 + Duration::from_secs_f64(e.end_s);
                    latency_ms.push(done.duration_since(key_up).as_secs_f64() * 1e3);
                    analysis_ms.push(e.found_after_s * 1e3);
                }
            }
        }
    }
    feed.join().expect("feeder");
    let wall = t0.elapsed().as_secs_f64();
    let cpu = cpu_s() - cpu0;
    ctl.quit.store(true, std::sync::atomic::Ordering::Release);
    let ended = h.join().expect("analysis thread").expect("no save");
    let counted = ended.last.map_or(0, |s| s.view.count);

    let n = latency_ms.len();
    let row = |name: &str, v: &mut Vec<f64>| {
        println!(
            "| {name} | {:.0} | {:.0} | {:.0} | {:.0} |",
            quantile(v, 0.0),
            quantile(v, 0.5),
            quantile(v, 0.95),
            quantile(v, 1.0)
        );
    };
    println!(
        "live pipeline: {:.0} s of 48 kHz mono at real-time pace, 10 ms buffers, {} elements ({} in the signal), {} timed after the initial stretch, {} dropped buffers",
        x.len() as f64 / fs as f64,
        counted,
        truth.elements.iter().filter(|e| e.start_s + e.duration_s < seconds).count(),
        n,
        shared.dropped_buffers()
    );
    println!();
    println!("| delay, ms | min | median | p95 | max |");
    println!("|---|---|---|---|---|");
    row("key-up to figures drawn (target 150)", &mut latency_ms);
    row(
        "of which stream time read past the key-up",
        &mut analysis_ms,
    );
    println!();
    println!("| CPU | value |");
    println!("|---|---|");
    println!("| process CPU time, s | {cpu:.2} |");
    println!("| wall time, s | {wall:.2} |");
    println!(
        "| share of one core, % (target under 5) | {:.2} |",
        100.0 * cpu / wall
    );
}
