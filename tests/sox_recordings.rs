//! End-to-end checks of `cwaudit analyze --json` on recordings made by sox
//! (SoX v14.4.2, the Debian package), an independent generator, against
//! analytic truth.
//!
//! Every test needs `sox` on PATH; CI installs it with apt. Without it a
//! test says so on stderr and returns early.
//!
//! What the sox man page (sox(1), SoX v14.4.2) says, and what these tests rely on:
//! - `synth LEN sine F` makes a sine of frequency F at full scale; `vol V`
//!   scales it to amplitude V (confirmed here with `sox FILE -n stat`).
//! - `synth LEN sine F1:F2` sweeps *linearly* ("the tone will change by a
//!   fixed number of hertz per second") from F1 at the start to F2 at the end.
//!   (`F1-F2` is *not* linear: the man page says exponential, stepped.)
//! - `fade TYPE FIN STOP FOUT`: ramps from 0 to full over FIN from the first
//!   sample and from full to 0 over FOUT ending at STOP. Types: `t` linear
//!   ("triangular") slope, `h` half a sine wave, `q` quarter of a sine wave.
//!   The man page names the shapes but gives no formula; with x = time into
//!   the fade / fade length (0..1) the gains are taken as
//!   t: g(x) = x, h: g(x) = (1 - cos(pi x)) / 2, q: g(x) = sin(pi x / 2),
//!   and the fade-out is the time mirror g((STOP - t) / FOUT).
//!   `sox_fade_curves_are_the_assumed_ones` checks this reading on a constant
//!   signal before the other tests depend on it.

use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::process::Command as Proc;

use assert_cmd::Command;
use serde_json::Value;

const FS: u32 = 48_000;

fn have_sox() -> bool {
    match Proc::new("sox").arg("--version").output() {
        Ok(o) if o.status.success() => true,
        _ => {
            eprintln!("SKIPPED: `sox` is not on PATH (CI installs it: apt-get install sox)");
            false
        }
    }
}

fn sox(args: &[String]) {
    let out = Proc::new("sox").args(args).output().expect("run sox");
    assert!(
        out.status.success(),
        "sox {:?} failed: {}",
        args,
        String::from_utf8_lossy(&out.stderr)
    );
}

fn s<T: ToString>(v: T) -> String {
    v.to_string()
}

fn p(path: &Path) -> String {
    path.display().to_string()
}

/// One key-down element: `sox -n -r 48000 -b 16 el.wav synth DUR sine FREQ vol V fade TYPE F DUR F`.
fn element(path: &Path, dur_s: f64, freq: &str, vol: f64, fade_type: &str, fade_s: f64) {
    sox(&[
        s("-n"),
        s("-r"),
        s(FS),
        s("-b"),
        s(16),
        p(path),
        s("synth"),
        s(dur_s),
        s("sine"),
        s(freq),
        s("vol"),
        s(vol),
        s("fade"),
        s(fade_type),
        s(fade_s),
        s(dur_s),
        s(fade_s),
    ]);
}

/// Silence: `sox -n -r 48000 -b 16 gap.wav trim 0 DUR`.
fn silence(path: &Path, dur_s: f64) {
    sox(&[
        s("-n"),
        s("-r"),
        s(FS),
        s("-b"),
        s(16),
        p(path),
        s("trim"),
        s(0),
        s(dur_s),
    ]);
}

/// Concatenates WAV files with sox (`sox a.wav b.wav ... out.wav`).
fn concat(parts: &[PathBuf], out: &Path) {
    let mut a: Vec<String> = parts.iter().map(|x| p(x)).collect();
    a.push(p(out));
    sox(&a);
}

/// Runs `cwaudit analyze FILE --json`; asserts it measured (exit 0, or 1 when
/// a figure fails the built-in limits, as the chirp signal is meant to) and
/// returns the report.
fn analyze(path: &Path) -> Value {
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .arg("analyze")
        .arg(path)
        .arg("--json")
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        matches!(out.status.code(), Some(0) | Some(1)),
        "exit {:?}, stderr: {stderr}",
        out.status.code()
    );
    serde_json::from_slice(&out.stdout).expect("JSON report")
}

fn num(v: &Value, path: &[&str]) -> f64 {
    let mut x = v;
    for k in path {
        x = &x[*k];
    }
    x.as_f64()
        .unwrap_or_else(|| panic!("{path:?} is not a number: {x}"))
}

/// Units of PARIS: (is_dah, gap_after_in_units) per element; the last gap is None.
/// ITU-R M.1677-1 timing: element space 1, letter space 3, word space 7.
fn paris_words(words: usize) -> Vec<(bool, Option<u32>)> {
    let letters = [".--.", ".-", ".-.", "..", "..."];
    let mut v = Vec::new();
    for _ in 0..words {
        for (li, l) in letters.iter().enumerate() {
            for (ei, c) in l.chars().enumerate() {
                let gap = if ei + 1 < l.len() {
                    1
                } else if li + 1 < letters.len() {
                    3
                } else {
                    7
                };
                v.push((c == '-', Some(gap)));
            }
        }
    }
    v.last_mut().unwrap().1 = None;
    v
}

/// Builds a keyed PARIS recording from sox elements; returns (path, element count).
/// Unit `u` s: dit element file = u, dah = 3u, gaps 1/3/7 u; 0.3 s of silence
/// at both ends.
fn paris_recording(
    dir: &Path,
    name: &str,
    words: usize,
    u: f64,
    (freq, vol): (&str, f64),
    (fade_type, fade_s): (&str, f64),
) -> (PathBuf, usize) {
    let dit = dir.join(format!("{name}_dit.wav"));
    let dah = dir.join(format!("{name}_dah.wav"));
    element(&dit, u, freq, vol, fade_type, fade_s);
    element(&dah, 3.0 * u, freq, vol, fade_type, fade_s);
    let gap = |k: u32| -> PathBuf {
        let g = dir.join(format!("{name}_gap{k}.wav"));
        if !g.exists() {
            silence(&g, k as f64 * u);
        }
        g
    };
    let edge = dir.join(format!("{name}_edge.wav"));
    silence(&edge, 0.3);
    let plan = paris_words(words);
    let mut parts = vec![edge.clone()];
    for (is_dah, g) in &plan {
        parts.push(if *is_dah { dah.clone() } else { dit.clone() });
        if let Some(k) = g {
            parts.push(gap(*k));
        }
    }
    parts.push(edge);
    let out = dir.join(format!("{name}.wav"));
    concat(&parts, &out);
    (out, plan.len())
}

/// The sox fade gain g(x), x in 0..1 (reading of the man page; see the top).
fn fade_gain(kind: &str, x: f64) -> f64 {
    match kind {
        "t" => x,
        "h" => 0.5 * (1.0 - (PI * x).cos()),
        "q" => (0.5 * PI * x).sin(),
        _ => unreachable!(),
    }
}

/// Analytic 10-90 % time of a sox fade of length F, as a multiple of F.
///
/// Derivation: the 10 % and 90 % instants are x10 = g^-1(0.1), x90 = g^-1(0.9);
/// the fade-out is the time mirror, so its 90-10 % time is the same.
/// - t (linear, g = x): x90 - x10 = 0.9 - 0.1 = 0.8 (BRIEF: linear ramp over T -> 0.8 T).
/// - h (g = (1 - cos(pi x))/2, so x = acos(1 - 2g)/pi):
///   (acos(-0.8) - acos(0.8)) / pi = (2.498092 - 0.643501) / pi = 0.590334
///   (BRIEF: raised cosine over T -> 0.5903 T).
/// - q (g = sin(pi x / 2), so x = 2 asin(g)/pi):
///   2 (asin(0.9) - asin(0.1)) / pi = 2 (1.119770 - 0.100167) / pi = 0.649065.
fn fade_10_90_per_f(kind: &str) -> f64 {
    match kind {
        "t" => 0.8,
        "h" => ((-0.8f64).acos() - 0.8f64.acos()) / PI,
        "q" => 2.0 * (0.9f64.asin() - 0.1f64.asin()) / PI,
        _ => unreachable!(),
    }
}

#[test]
fn sox_fade_curves_are_the_assumed_ones() {
    // Checks the reading of the sox man page used below, on a constant signal:
    // a 32-bit float WAV of 0.5 (written with hound) through `fade TYPE F STOP F`.
    if !have_sox() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let dc = dir.path().join("dc.wav");
    let spec = hound::WavSpec {
        channels: 1,
        sample_rate: FS,
        bits_per_sample: 32,
        sample_format: hound::SampleFormat::Float,
    };
    let mut w = hound::WavWriter::create(&dc, spec).unwrap();
    let len = 4800usize;
    for _ in 0..len {
        w.write_sample(0.5f32).unwrap();
    }
    w.finalize().unwrap();
    let f = 0.005;
    let nf = (f * FS as f64) as usize;
    for kind in ["t", "h", "q"] {
        let out = dir.path().join(format!("fade_{kind}.wav"));
        sox(&[
            p(&dc),
            s("-e"),
            s("floating-point"),
            s("-b"),
            s(32),
            p(&out),
            s("fade"),
            s(kind),
            s(f),
            s(len as f64 / FS as f64),
            s(f),
        ]);
        let x: Vec<f64> = hound::WavReader::open(&out)
            .unwrap()
            .samples::<f32>()
            .map(|v| v.unwrap() as f64 / 0.5)
            .collect();
        assert_eq!(x.len(), len);
        let mut worst: f64 = 0.0;
        for (i, xi) in x.iter().enumerate() {
            // Time in samples t = i: fade-in g(t/N), fade-out g((len - t)/N), N = F*fs
            // (the fade-out reaches 0 one sample after the last one).
            let t = i as f64;
            let g = fade_gain(kind, (t / nf as f64).min(1.0))
                .min(fade_gain(kind, ((len as f64 - t) / nf as f64).min(1.0)));
            worst = worst.max((xi - g).abs());
        }
        eprintln!("sox fade {kind}: max |gain - assumed curve| = {worst:.2e}");
        assert!(
            worst < 1e-4,
            "sox fade {kind} is not the assumed curve ({worst})"
        );
    }
}

fn check_fade(kind: &str) {
    if !have_sox() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let f = 0.005; // fade length F, s
    let u = 0.060; // PARIS unit: dit element 60 ms, gaps 60/180/420 ms
    let (wav, count) = paris_recording(dir.path(), kind, 3, u, ("1000", 0.25), (kind, f));
    let rep = analyze(&wav);
    let sm = &rep["summary"];

    // Truth, analytic (see fade_10_90_per_f): rise = fall = k * F.
    let truth_ms = fade_10_90_per_f(kind) * f * 1e3;
    let tol_ms = (0.03 * truth_ms).max(0.1);
    let rise = num(sm, &["rise_ms", "median"]);
    let fall = num(sm, &["fall_ms", "median"]);
    // Truth, by construction: 3 x "PARIS" = 3 x 14 elements.
    let n = sm["element_count"].as_u64().unwrap() as usize;
    // Truth, by construction + PARIS timing (ITU-R M.1677-1): dit + element
    // space = 60 ms + 60 ms = 2 units (the 50 % instants move by the same
    // amount for the mark and the space), unit 60 ms, WPM = 1.2 / 0.060 = 20.
    let wpm_truth = 1.2 / u;
    let wpm = num(sm, &["wpm"]);
    eprintln!(
        "fade {kind}, F = {:.1} ms: rise median {rise:.4} ms, fall median {fall:.4} ms, truth {truth_ms:.4} ms (tol {tol_ms:.4}); \
         elements {n} (truth {count}); wpm {wpm:.4} (truth {wpm_truth:.4}); rise_floor_ms {:.4}",
        f * 1e3,
        num(sm, &["rise_floor_ms"])
    );
    let mut errs = Vec::new();
    if (rise - truth_ms).abs() > tol_ms {
        errs.push(format!("rise {rise:.4} ms vs analytic {truth_ms:.4} ms"));
    }
    if (fall - truth_ms).abs() > tol_ms {
        errs.push(format!("fall {fall:.4} ms vs analytic {truth_ms:.4} ms"));
    }
    if n != count {
        errs.push(format!("element count {n} vs {count}"));
    }
    if (wpm - wpm_truth).abs() > 0.01 * wpm_truth {
        errs.push(format!("wpm {wpm:.4} vs {wpm_truth:.4}"));
    }
    assert!(errs.is_empty(), "fade {kind}: {}", errs.join("; "));
}

#[test]
fn fade_linear_rise_and_fall() {
    // sox fade type t: 10-90 % = 0.8 F = 4.000 ms (analytic).
    check_fade("t");
}

#[test]
fn fade_half_sine_rise_and_fall() {
    // sox fade type h: 10-90 % = 0.590334 F = 2.9517 ms (analytic).
    check_fade("h");
}

#[test]
fn fade_quarter_sine_rise_and_fall() {
    // sox fade type q: 10-90 % = 0.649065 F = 3.2453 ms (analytic).
    check_fade("q");
}

#[test]
fn linear_sweep_chirp() {
    if !have_sox() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (f1, f2) = (1030.0, 1000.0);
    let d = 0.150; // element file length D, s
    let f = 0.003; // half-sine fade length F, s
    let el = dir.path().join("chirp_el.wav");
    // sox man page: `F1:F2` is the linear sweep, F1 at the start, F2 at the end.
    element(&el, d, &format!("{f1}:{f2}"), 0.25, "h", f);
    let gap = dir.path().join("gap.wav");
    silence(&gap, 0.150);
    let edge = dir.path().join("edge.wav");
    silence(&edge, 0.3);
    let count = 16;
    let mut parts = vec![edge.clone()];
    for i in 0..count {
        parts.push(el.clone());
        if i + 1 < count {
            parts.push(gap.clone());
        }
    }
    parts.push(edge);
    let wav = dir.path().join("chirp.wav");
    concat(&parts, &wav);
    let rep = analyze(&wav);
    let sm = &rep["summary"];

    // Truth, analytic. Instantaneous frequency f(t) = f1 + (f2 - f1) t / D
    // (linear sweep, sox man page). The half-sine fade reaches 50 % at F/2
    // from each end, so the element (50 % to 50 %) spans t1 = F/2 = 1.5 ms to
    // t2 = D - F/2 = 148.5 ms. Settled frequency = median over the last half,
    // [(t1 + t2)/2, t2]; f is monotone, so the median is f at the middle of
    // that interval, t = (t1 + 3 t2)/4 = 111.75 ms -> 1007.65 Hz. The largest
    // |f - settled| on [t1, t2] is at t1: f(t1) = 1029.70 Hz -> 22.05 Hz
    // (at t2 it is only 7.35 Hz).
    let fr = |t: f64| f1 + (f2 - f1) * t / d;
    let (t1, t2) = (f / 2.0, d - f / 2.0);
    let settled = fr((t1 + 3.0 * t2) / 4.0);
    let truth = (fr(t1) - settled).abs().max((fr(t2) - settled).abs());
    let tol = (0.10 * truth).max(1.0);
    let chirp = num(sm, &["chirp_hz", "median"]);
    let n = sm["element_count"].as_u64().unwrap() as usize;
    let els = rep["elements"].as_array().unwrap();
    let mut fset: Vec<f64> = els.iter().map(|e| num(e, &["frequency_hz"])).collect();
    fset.sort_by(f64::total_cmp);
    let fset_med = fset[fset.len() / 2];
    eprintln!(
        "sweep {f1}:{f2} Hz over {} ms: chirp median {chirp:.3} Hz (truth {truth:.3}, tol {tol:.3}); \
         settled frequency median {fset_med:.3} Hz (truth {settled:.3}); elements {n} (truth {count})",
        d * 1e3
    );
    assert_eq!(n, count, "element count");
    assert!(
        (chirp - truth).abs() <= tol,
        "chirp {chirp:.3} Hz vs analytic {truth:.3} Hz"
    );
}

#[test]
fn level_of_a_keyed_sine_at_vol_0_1() {
    if !have_sox() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (wav, _) = paris_recording(dir.path(), "lvl", 1, 0.06, ("1000", 0.1), ("h", 0.005));
    // Generator check: sox's own `stat` must see amplitude 0.1 (+- 16-bit dither).
    let st = Proc::new("sox")
        .arg(&wav)
        .args(["-n", "stat"])
        .output()
        .unwrap();
    let st = String::from_utf8_lossy(&st.stderr);
    let maxamp: f64 = st
        .lines()
        .find(|l| l.starts_with("Maximum amplitude"))
        .and_then(|l| l.split(':').nth(1))
        .map(|v| v.trim().parse().unwrap())
        .expect("sox stat output");
    assert!(
        (maxamp - 0.1).abs() < 2e-4,
        "sox stat max amplitude {maxamp}"
    );
    let rep = analyze(&wav);
    let level = num(&rep["summary"], &["level_dbfs"]);
    // Truth, analytic: amplitude 0.1 of a full-scale sine, AES17 dBFS: 20 log10(0.1) = -20 dBFS.
    let truth = 20.0 * 0.1f64.log10();
    eprintln!("level: {level:.4} dBFS (truth {truth:.4}); sox stat max amplitude {maxamp}");
    assert!(
        (level - truth).abs() <= 0.1,
        "level {level} dBFS vs {truth}"
    );
}

/// Runs `cwaudit analyze FILE --json` on a bad file: exit 2, one stderr line
/// naming the file, no panic.
fn check_bad(path: &Path, what: &str) {
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .arg("analyze")
        .arg(path)
        .arg("--json")
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    let name = path.file_name().unwrap().to_string_lossy().to_string();
    eprintln!(
        "{what}: exit {:?}, stderr {:?}",
        out.status.code(),
        stderr.trim_end()
    );
    assert!(!stderr.contains("panicked"), "{what}: panicked: {stderr}");
    assert_eq!(out.status.code(), Some(2), "{what}: stderr {stderr}");
    assert_eq!(
        stderr.lines().count(),
        1,
        "{what}: want one stderr line: {stderr}"
    );
    assert!(
        stderr.contains(&name),
        "{what}: stderr does not name {name}: {stderr}"
    );
}

#[test]
fn bad_inputs_exit_2_with_one_line() {
    let dir = tempfile::tempdir().unwrap();
    let text = dir.path().join("x.wav");
    std::fs::write(&text, "this is a text file, not a recording\n").unwrap();
    check_bad(&text, "text file named x.wav");
    let empty = dir.path().join("empty.wav");
    std::fs::write(&empty, b"").unwrap();
    check_bad(&empty, "empty file");

    if !have_sox() {
        return;
    }
    let (good, _) = paris_recording(dir.path(), "good", 1, 0.06, ("1000", 0.25), ("h", 0.005));
    for (bytes, label) in [(30usize, "header"), (40_000, "data")] {
        let cut = dir.path().join(format!("truncated_{label}.wav"));
        let out = Proc::new("head")
            .arg("-c")
            .arg(bytes.to_string())
            .arg(&good)
            .output()
            .unwrap();
        assert!(out.status.success());
        std::fs::write(&cut, &out.stdout).unwrap();
        check_bad(
            &cut,
            &format!("WAV truncated in its {label} (head -c {bytes})"),
        );
    }
}
