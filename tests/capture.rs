//! Sound-card input end to end, through a real ALSA device made from a file:
//! a temporary `$HOME/.asoundrc` (HOME set only for the child process)
//! defines a `type file` PCM whose capture side reads `infile`, a raw file
//! the synthesizer made. The device hands the raw bytes over in whatever
//! format the stream opens, so every run opens it in the file's format; it
//! runs faster than real time, so recordings end early in wall time. After
//! the end of `infile` it repeats stale buffers, so runs that read past the
//! end pad the file with silence. Needs the ALSA library (libasound2) and
//! tmux; `.ci/run` installs both. Nothing here is skipped when they are
//! missing: the tests fail.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use cwaudit::synth::{self, Chirp, SynthSpec, Truth};

const BIN: &str = env!("CARGO_BIN_EXE_cwaudit");
const DESCRIPTION: &str = "cwaudit bench source";

/// Raw sample formats the device is opened with.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Raw {
    S16,
    S24,
    F32,
}

impl Raw {
    fn flag(self) -> &'static str {
        match self {
            Raw::S16 => "s16",
            Raw::S24 => "s24",
            Raw::F32 => "f32",
        }
    }
    /// Bytes of one sample as ALSA's S16_LE, S24_LE (in 4 bytes) or FLOAT_LE.
    fn encode(self, x: &[f32]) -> Vec<u8> {
        let mut v = Vec::new();
        for &s in x {
            match self {
                Raw::S16 => v.extend(
                    ((s as f64 * 32768.0).round().clamp(-32768.0, 32767.0) as i16).to_le_bytes(),
                ),
                Raw::S24 => v.extend(
                    ((s as f64 * 8_388_608.0)
                        .round()
                        .clamp(-8_388_608.0, 8_388_607.0) as i32)
                        .to_le_bytes(),
                ),
                Raw::F32 => v.extend(s.to_le_bytes()),
            }
        }
        v
    }
    /// The samples the WAV file must hold, as written to the raw file.
    fn quantise(self, x: &[f32]) -> Vec<f64> {
        match self {
            Raw::S16 => x
                .iter()
                .map(|&s| (s as f64 * 32768.0).round().clamp(-32768.0, 32767.0))
                .collect(),
            Raw::S24 => x
                .iter()
                .map(|&s| {
                    (s as f64 * 8_388_608.0)
                        .round()
                        .clamp(-8_388_608.0, 8_388_607.0)
                })
                .collect(),
            Raw::F32 => x.iter().map(|&s| s as f64).collect(),
        }
    }
}

/// A home folder with an .asoundrc whose PCM `cwaudit_bench` reads `raw`.
struct Bench {
    dir: tempfile::TempDir,
}

impl Bench {
    fn new(raw: &[u8]) -> Bench {
        let dir = tempfile::tempdir().unwrap();
        let infile = dir.path().join("in.raw");
        std::fs::write(&infile, raw).unwrap();
        let rc = format!(
            "pcm.cwaudit_bench {{\n    type file\n    slave.pcm \"null\"\n    file \"/dev/null\"\n    infile \"{}\"\n    format \"raw\"\n    hint {{\n        show on\n        description \"{DESCRIPTION}\"\n    }}\n}}\n",
            infile.display()
        );
        std::fs::write(dir.path().join(".asoundrc"), rc).unwrap();
        Bench { dir }
    }
    fn home(&self) -> &Path {
        self.dir.path()
    }
    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }
    fn cmd(&self) -> Command {
        let mut c = Command::new(BIN);
        c.env("HOME", self.home());
        c
    }
    /// `cwaudit record OUT ARGS...` started, its standard error piped.
    fn spawn_record(&self, out: &Path, args: &[&str]) -> std::process::Child {
        self.cmd()
            .arg("record")
            .arg(out)
            .args(args)
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap()
    }
}

fn spec(channels: u16) -> SynthSpec {
    SynthSpec {
        text: "PARIS PARIS".into(),
        wpm: 20.0,
        pitch_hz: 760.0,
        rise_ms: 4.0,
        fall_ms: 6.0,
        chirp: Chirp::Exponential {
            depth_hz: 30.0,
            tau_ms: 10.0,
        },
        snr_db: Some(32.0),
        channels,
        signal_channel: channels,
        ..Default::default()
    }
}

fn render(s: &SynthSpec) -> (Vec<f32>, Truth) {
    synth::render(s).unwrap()
}

/// Reads a WAV file's samples as integer codes (or floats).
fn wav_samples(p: &Path) -> (hound::WavSpec, Vec<f64>) {
    let mut r = hound::WavReader::open(p).unwrap();
    let spec = r.spec();
    let v = if spec.sample_format == hound::SampleFormat::Float {
        r.samples::<f32>().map(|s| s.unwrap() as f64).collect()
    } else {
        r.samples::<i32>().map(|s| s.unwrap() as f64).collect()
    };
    (spec, v)
}

/// `cwaudit analyze --json` of a file.
fn analyze(p: &Path) -> serde_json::Value {
    let out = Command::new(BIN)
        .arg("analyze")
        .arg(p)
        .arg("--json")
        .output()
        .unwrap();
    assert!(
        out.status.code().unwrap() <= 1,
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// The analysis must give the synthesizer's truth (tolerances: the
/// README's accuracy targets at this SNR: edges within 10 %, speed 1 %,
/// pitch 1 Hz, mean-element chirp within 20 %).
fn assert_truth(j: &serde_json::Value, t: &Truth, channel: u16) {
    let s = &j["summary"];
    let f = |k: &str| s[k].as_f64().unwrap_or(f64::NAN);
    assert_eq!(j["input"]["channel_used"].as_u64(), Some(channel as u64));
    assert_eq!(
        s["element_count"].as_u64(),
        Some(t.elements.len() as u64),
        "{s}"
    );
    let rise = s["rise_ms"]["median"].as_f64().unwrap();
    let fall = s["fall_ms"]["median"].as_f64().unwrap();
    assert!((rise - 4.0).abs() < 0.4, "rise {rise}");
    assert!((fall - 6.0).abs() < 0.6, "fall {fall}");
    assert!((f("wpm") - 20.0).abs() < 0.2, "wpm {}", f("wpm"));
    assert!((f("tone_hz") - 760.0).abs() < 1.0, "tone {}", f("tone_hz"));
    let chirp = f("chirp_mean_element_hz");
    let want = t.elements[0].chirp_hz;
    assert!(
        (chirp - want).abs() < 0.2 * want,
        "chirp {chirp} truth {want}"
    );
    assert!((f("level_dbfs") - t.level_dbfs).abs() < 0.2);
}

#[test]
fn devices_lists_the_file_device_by_name_and_description() {
    let b = Bench::new(&Raw::S16.encode(&[0.0; 480]));
    let out = b.cmd().arg("devices").output().unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    let block: String = text
        .lines()
        .skip_while(|l| !l.starts_with("cwaudit_bench"))
        .enumerate()
        .take_while(|(i, l)| *i == 0 || l.starts_with(' '))
        .map(|(_, l)| format!("{l}\n"))
        .collect();
    assert!(!block.is_empty(), "the device is listed:\n{text}");
    assert!(block.contains(DESCRIPTION), "{block}");
    assert!(
        block.contains("sample rates:") && block.contains("48000"),
        "{block}"
    );
    assert!(
        block.contains("sample formats:") && block.contains("s16") && block.contains("f32"),
        "{block}"
    );
    assert!(block.contains("channels: 1"), "{block}");
}

#[test]
fn record_from_the_device_is_sample_exact_and_gives_the_synthesizer_truth() {
    for (raw, channels) in [(Raw::S16, 1u16), (Raw::S24, 2), (Raw::F32, 1)] {
        let s = spec(channels);
        let (x, truth) = render(&s);
        let b = Bench::new(&raw.encode(&x));
        let out_path = b.path("rec.wav");
        // The whole signal; the device runs faster than real time, so this
        // ends long before the stated seconds have passed.
        let seconds = truth.total_frames as f64 / 48_000.0;
        let out = b
            .cmd()
            .args([
                "record",
                out_path.to_str().unwrap(),
                "--device",
                "BENCH SOURCE",
            ])
            .args([
                "--rate",
                "48000",
                "--channels",
                &channels.to_string(),
                "--format",
                raw.flag(),
            ])
            .args(["--seconds", &format!("{seconds}")])
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(0), "{raw:?}: {err}");
        assert!(err.contains("0 dropped buffers"), "{err}");
        let (ws, got) = wav_samples(&out_path);
        assert_eq!(ws.channels, channels);
        assert_eq!(ws.sample_rate, 48_000);
        assert_eq!(
            ws.bits_per_sample,
            match raw {
                Raw::S16 => 16,
                Raw::S24 => 24,
                Raw::F32 => 32,
            }
        );
        // Every frame asked for, bit for bit as the device delivered it.
        assert_eq!(
            got.len() as u64,
            truth.total_frames * channels as u64,
            "{raw:?}"
        );
        assert!(
            got == raw.quantise(&x),
            "{raw:?}: samples differ from the raw file"
        );
        assert_truth(&analyze(&out_path), &truth, channels);
        // No temporary files are left beside it.
        let left: Vec<_> = std::fs::read_dir(b.home())
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().starts_with(".cwaudit"))
            .collect();
        assert!(left.is_empty(), "{left:?}");
    }
}

#[test]
fn record_refuses_to_overwrite_and_analyze_reports_on_the_result() {
    let s = spec(1);
    let (x, truth) = render(&s);
    let b = Bench::new(&Raw::S16.encode(&x));
    let p = b.path("mine.wav");
    std::fs::write(&p, b"not a recording").unwrap();
    let seconds = format!("{}", truth.total_frames as f64 / 48_000.0);
    let args = [
        "record",
        p.to_str().unwrap(),
        "--device",
        "cwaudit_bench",
        "--seconds",
        &seconds,
        "--analyze",
    ];
    let out = b.cmd().args(args).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("mine.wav") && err.contains("--force"), "{err}");
    assert_eq!(std::fs::read(&p).unwrap(), b"not a recording");
    // With --force it is replaced, and --analyze prints the text report.
    let out = b.cmd().args(args).arg("--force").output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(text.contains("speed 20.0 WPM"), "{text}");
    assert!(
        text.contains(&format!("{} elements", truth.elements.len())),
        "{text}"
    );
    assert_truth(&analyze(&p), &truth, 1);
}

/// Waits for `child` to exit, at most `limit` after `t0`; a child still
/// running then is killed and the test fails (rather than hangs). Returns
/// the exit status and standard error.
fn ended_within(
    child: &mut std::process::Child,
    t0: Instant,
    limit: Duration,
) -> (std::process::ExitStatus, String) {
    let status = loop {
        if let Some(st) = child.try_wait().unwrap() {
            break st;
        }
        if t0.elapsed() > limit {
            let _ = child.kill();
            panic!("the command did not end within {limit:?} of a stalled device");
        }
        std::thread::sleep(Duration::from_millis(50));
    };
    let mut err = String::new();
    std::io::Read::read_to_string(&mut child.stderr.take().unwrap(), &mut err).unwrap();
    (status, err)
}

#[test]
fn a_device_that_stops_delivering_ends_the_recording_and_keeps_what_came() {
    // The device's input is a named pipe holding 0.5 s of audio, kept open
    // here so the device's read waits for more that never comes (a device
    // that hangs without reporting an error). The recording must end on
    // its own once nothing has arrived for health::STALL_S (5 s), keep the
    // 0.5 s in a valid WAV, exit 2 with one sentence, and not wait for the
    // stuck read (the pipe stays open until this test ends). Then the same
    // with the pipe empty from the start.
    let s = spec(1);
    let (x, _) = render(&s);
    let b = Bench::new(&[]);
    let fifo = b.path("in.raw");
    std::fs::remove_file(&fifo).unwrap();
    let made = Command::new("mkfifo").arg(&fifo).status().unwrap();
    assert!(made.success());
    let head = Raw::S16.encode(&x[..24_000]);
    assert!(head.len() < 65_536, "must fit the pipe's buffer");
    // Read-write: never blocks on open, and the pipe never sees its end.
    let mut pipe = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .open(&fifo)
        .unwrap();
    std::io::Write::write_all(&mut pipe, &head).unwrap();
    let p = b.path("stall.wav");
    let t0 = Instant::now();
    let mut child = b.spawn_record(&p, &["--device", "cwaudit_bench", "--seconds", "30"]);
    let (status, err) = ended_within(&mut child, t0, Duration::from_secs(20));
    assert_eq!(status.code(), Some(2), "{err}");
    assert!(err.contains("no samples arrived for 5 s"), "{err}");
    assert!(err.contains("stall.wav"), "{err}");
    let (spec, got) = wav_samples(&p);
    assert_eq!(spec.sample_rate, 48_000);
    assert!((24_000..=25_000).contains(&got.len()), "{}", got.len());
    let want = Raw::S16.quantise(&x[..24_000]);
    assert_eq!(&got[..24_000], &want[..]);

    // Nothing at all from the device: no file is made, and a file of the
    // user's given with --force is left as it was, not replaced by nothing.
    let mine = b.path("mine.wav");
    std::fs::write(&mine, b"an earlier take").unwrap();
    let mut child = b.spawn_record(&mine, &["--device", "cwaudit_bench", "--force"]);
    let (status, err) = ended_within(&mut child, Instant::now(), Duration::from_secs(20));
    assert_eq!(status.code(), Some(2), "{err}");
    assert!(err.contains("before it delivered any audio"), "{err}");
    assert_eq!(std::fs::read(&mine).unwrap(), b"an earlier take");
    drop(pipe);
}

#[test]
fn ctrl_c_during_a_recording_leaves_a_valid_wav_with_every_frame_captured() {
    let s = spec(1);
    let (x, _) = render(&s);
    let b = Bench::new(&Raw::S16.encode(&x));
    let p = b.path("stopped.wav");
    let mut child = b.spawn_record(&p, &["--device", "bench source", "--format", "s16"]);
    let mut err = BufReader::new(child.stderr.take().unwrap());
    // The sound library may warn about the machine's own cards first.
    let mut head = String::new();
    while !head.contains("recording from cwaudit_bench") {
        let n = err.read_line(&mut head).unwrap();
        assert!(n > 0, "the recording did not start: {head}");
    }
    std::thread::sleep(Duration::from_millis(300));
    assert!(!p.exists(), "the file appears only when finished");
    // SIGINT, as Ctrl-C in a terminal sends.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGINT);
    }
    let status = child.wait().unwrap();
    let mut rest = String::new();
    std::io::Read::read_to_string(&mut err, &mut rest).unwrap();
    assert_eq!(status.code(), Some(0), "{rest}");
    // "wrote PATH (S s, N frames, ...": N is what the callback delivered
    // and the file must hold all of it.
    let n: u64 = rest
        .split(" frames, 48000 Hz")
        .next()
        .and_then(|s| s.rsplit(", ").next())
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| panic!("{rest}"));
    let (ws, got) = wav_samples(&p);
    assert_eq!((ws.channels, ws.bits_per_sample), (1, 16));
    assert_eq!(got.len() as u64, n, "{rest}");
    // The ring holds 10 s, so nothing can be dropped before that much has
    // arrived: the whole signal (under 10 s) must be there bit for bit.
    assert!(x.len() < 480_000);
    assert!(got.len() > x.len(), "{rest}");
    assert!(
        got[..x.len()] == Raw::S16.quantise(&x)[..],
        "the start differs from the raw file"
    );
}

/// A private tmux server for one test, killed when dropped.
struct Tmux {
    socket: String,
}

impl Tmux {
    fn new() -> Tmux {
        Tmux {
            socket: format!("cwaudit-test-{}", std::process::id()),
        }
    }
    fn run(&self, args: &[&str]) -> String {
        let out = Command::new("tmux")
            .arg("-L")
            .arg(&self.socket)
            .args(args)
            .output()
            .expect("tmux is installed (.ci/run installs it)");
        assert!(
            out.status.success(),
            "tmux {args:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8_lossy(&out.stdout).into_owned()
    }
    fn screen(&self) -> String {
        self.run(&["capture-pane", "-p", "-t", "w"])
    }
    /// Waits until the screen satisfies `ok`; returns it.
    fn wait(&self, what: &str, ok: impl Fn(&str) -> bool) -> String {
        let t0 = Instant::now();
        loop {
            let s = self.screen();
            if ok(&s) {
                return s;
            }
            assert!(
                t0.elapsed() < Duration::from_secs(60),
                "waited for {what}; screen:\n{s}"
            );
            std::thread::sleep(Duration::from_millis(100));
        }
    }
}

impl Drop for Tmux {
    fn drop(&mut self) {
        let _ = Command::new("tmux")
            .args(["-L", &self.socket, "kill-server"])
            .output();
    }
}

/// The median the running-figures panel shows for `row`.
fn panel_median(screen: &str, row: &str) -> Option<(f64, String)> {
    screen.lines().find_map(|l| {
        let right = l.split("││").nth(1)?;
        let rest = right.strip_prefix(row)?;
        let v: f64 = rest.split_whitespace().next()?.parse().ok()?;
        Some((v, right.to_string()))
    })
}

#[test]
fn watch_shows_the_truth_live_and_obeys_its_keys() {
    // The signal, then 60 s of silence, so that what the device repeats
    // after the end of the file is silence too.
    let s = spec(1);
    let (mut x, truth) = render(&s);
    let signal = x.len();
    x.extend(std::iter::repeat_n(0.0, 48_000 * 60));
    let b = Bench::new(&Raw::S16.encode(&x));
    let save = b.path("live.wav");
    let status = b.path("status");
    let cmd = format!(
        "env HOME='{}' '{BIN}' watch --device 'bench source' --rate 48000 --channels 1 --format s16 --save '{}' 2> '{}'; echo EXIT=$? >> '{}'; sleep 60",
        b.home().display(),
        save.display(),
        b.path("out").display(),
        status.display()
    );
    let t = Tmux::new();
    t.run(&[
        "new-session",
        "-d",
        "-s",
        "w",
        "-x",
        "120",
        "-y",
        "42",
        &cmd,
    ]);
    let n = truth.elements.len();
    let screen = t.wait("every element", |s| s.contains(&format!("elements {n} ")));
    // The running figures over the last 20 elements against the truth
    // (tolerances as in assert_truth), each with its verdict.
    let (rise, row) = panel_median(&screen, "rise").expect("a rise row");
    assert!((rise - 4.0).abs() < 0.4 && row.contains("PASS"), "{row}");
    let (fall, _) = panel_median(&screen, "fall").unwrap();
    assert!((fall - 6.0).abs() < 0.6, "{fall}");
    let (wpm, _) = panel_median(&screen, "speed").unwrap();
    assert!((wpm - 20.0).abs() < 0.3, "{wpm}");
    let (pitch, _) = panel_median(&screen, "pitch").unwrap();
    assert!((pitch - 760.0).abs() < 1.0, "{pitch}");
    let (level, _) = panel_median(&screen, "level").unwrap();
    assert!((level - truth.level_dbfs).abs() < 0.2, "{level}");
    assert!(screen.contains(&format!("element {n} ")), "{screen}");
    assert!(
        screen.contains(" LIVE ") && screen.contains("tone 7"),
        "{screen}"
    );
    // Hold, release, reset, quit.
    t.run(&["send-keys", "-t", "w", "f"]);
    t.wait("HELD", |s| s.contains(" HELD "));
    t.run(&["send-keys", "-t", "w", "f"]);
    t.wait("LIVE again", |s| s.contains(" LIVE "));
    t.run(&["send-keys", "-t", "w", "r"]);
    t.wait("the reset", |s| {
        s.contains("elements 0 ") && s.contains("waiting for an element")
    });
    t.run(&["send-keys", "-t", "w", "q"]);
    let t0 = Instant::now();
    while !std::fs::read_to_string(&status)
        .unwrap_or_default()
        .contains("EXIT=")
    {
        assert!(t0.elapsed() < Duration::from_secs(60), "watch did not quit");
        std::thread::sleep(Duration::from_millis(100));
    }
    let st = std::fs::read_to_string(&status).unwrap();
    let out = std::fs::read_to_string(b.path("out")).unwrap_or_default();
    assert!(st.contains("EXIT=0"), "{st} {out}");
    assert!(out.contains("saved"), "{out}");
    // --save: the signal arrived before the 30 s ring could fill, so the
    // saved file starts with it bit for bit.
    let (ws, got) = wav_samples(&save);
    assert_eq!(
        (ws.channels, ws.sample_rate, ws.bits_per_sample),
        (1, 48_000, 16)
    );
    assert!(got.len() >= signal);
    assert!(got[..signal] == Raw::S16.quantise(&x[..signal])[..]);
}
