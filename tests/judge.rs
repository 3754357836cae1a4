//! Limits and verdicts through the binary: the three sanity cases of the
//! built-in limits with their exit codes, `cwaudit limits` printed and read
//! back, and profile errors.
//!
//! Signals come from the synthesizer (`cwaudit::synth::write_files`), whose
//! truth file states the edges and chirp that went in. The built-in limits
//! are common practice (see src/judge/profile.rs): rise/fall median
//! 2..12 ms (warn below 3 ms), mean-element chirp at most 20 Hz (warn above
//! 10 Hz).

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use cwaudit::synth::{self, Chirp, EdgeShape, SynthSpec};
use serde_json::Value;

fn spec(rise_ms: f64, chirp: Chirp) -> SynthSpec {
    SynthSpec {
        rise_ms,
        fall_ms: rise_ms,
        rise_shape: EdgeShape::RaisedCosine,
        fall_shape: EdgeShape::RaisedCosine,
        chirp,
        snr_db: Some(35.0),
        ..Default::default()
    }
}

fn make(dir: &Path, name: &str, s: &SynthSpec) -> (PathBuf, Value) {
    let p = dir.join(name);
    let truth = synth::write_files(s, &p, false).expect("synthesize");
    (p, serde_json::to_value(truth).unwrap())
}

struct Run {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

fn run(args: &[&str]) -> Run {
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .args(args)
        .output()
        .unwrap();
    Run {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn verdict<'a>(rep: &'a Value, metric: &str) -> &'a Value {
    rep["verdicts"]
        .as_array()
        .unwrap()
        .iter()
        .find(|v| v["metric"] == metric)
        .unwrap_or_else(|| panic!("no verdict for {metric}"))
}

fn truth_median(truth: &Value, field: &str) -> f64 {
    let mut v: Vec<f64> = truth["elements"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e[field].as_f64().unwrap())
        .collect();
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

#[test]
fn clean_keying_passes_hard_keying_and_chirp_fail() {
    let d = tempfile::tempdir().unwrap();
    let (clean, _) = make(d.path(), "clean.wav", &spec(5.0, Chirp::None));
    let (hard, _) = make(d.path(), "hard.wav", &spec(0.5, Chirp::None));
    let chirp = Chirp::Exponential {
        depth_hz: 40.0,
        tau_ms: 12.0,
    };
    let (chirpy, ctruth) = make(d.path(), "chirp.wav", &spec(5.0, chirp));

    // 5 ms raised-cosine edges, no chirp: pass, exit 0.
    let r = run(&["analyze", s(&clean), "--json"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let rep: Value = serde_json::from_str(&r.stdout).unwrap();
    let rise = verdict(&rep, "rise_ms");
    assert_eq!(rise["status"], "pass");
    assert_eq!(rise["stat"], "median");
    // README accuracy target for 5 ms edges at 30 dB and up: within 0.15 ms.
    let v = rise["value"].as_f64().unwrap();
    assert!((v - 5.0).abs() < 0.15, "rise {v}");
    // Margin = distance to the nearer failing limit, 2 ms (synth truth 5 ms).
    let m = rise["margin"].as_f64().unwrap();
    assert!((m - (v - 2.0)).abs() < 1e-9, "margin {m}");
    assert_eq!(verdict(&rep, "fall_ms")["status"], "pass");
    let c = verdict(&rep, "chirp_mean_element_hz");
    assert_eq!(c["status"], "pass");
    assert!(
        c["value"].as_f64().unwrap() < 1.0,
        "chirp-free reads below 1 Hz (README target)"
    );
    // No backwave was put in: the figure is null, below the floor the
    // recording resolves, and that floor passes the limits (-40/-50 dB).
    let bw = verdict(&rep, "backwave_db");
    assert!(bw["value"].is_null());
    assert!(bw["below"].as_f64().unwrap() < -50.0, "{bw}");
    assert_eq!(bw["status"], "pass");
    let text = run(&["analyze", s(&clean)]);
    assert_eq!(text.code, Some(0));
    assert!(text.stdout.starts_with("PASS"), "{}", text.stdout);

    // 0.5 ms edges: fail, exit 1, and the result line says which figure.
    let r = run(&["analyze", s(&hard), "--json"]);
    assert_eq!(r.code, Some(1), "{}", r.stderr);
    let rep: Value = serde_json::from_str(&r.stdout).unwrap();
    let rise = verdict(&rep, "rise_ms");
    assert_eq!(rise["status"], "fail");
    // README target below 1 ms: within 0.2 ms of the 0.5 ms truth.
    let v = rise["value"].as_f64().unwrap();
    assert!((v - 0.5).abs() < 0.2, "rise {v}");
    assert!((rise["margin"].as_f64().unwrap() - (v - 2.0)).abs() < 1e-9);
    assert_eq!(verdict(&rep, "fall_ms")["status"], "fail");
    let text = run(&["analyze", s(&hard)]);
    assert_eq!(text.code, Some(1));
    let first = text.stdout.lines().next().unwrap();
    assert!(
        first.starts_with("FAIL: rise_ms median 0.") && first.contains("below the limit 2.00 ms"),
        "{first}"
    );

    // 40 Hz decaying with 12 ms: the truth says about 27 Hz at the 50 % point; fails.
    let truth_hz = truth_median(&ctruth, "chirp_hz");
    assert!((truth_hz - 27.4).abs() < 1.0, "truth chirp {truth_hz}");
    let r = run(&["analyze", s(&chirpy), "--json"]);
    assert_eq!(r.code, Some(1), "{}", r.stderr);
    let rep: Value = serde_json::from_str(&r.stdout).unwrap();
    let c = verdict(&rep, "chirp_mean_element_hz");
    assert_eq!(c["status"], "fail");
    // README chirp target: within max(10 %, 1 Hz) of the truth.
    let v = c["value"].as_f64().unwrap();
    assert!(
        (v - truth_hz).abs() <= 0.1 * truth_hz,
        "chirp {v} vs truth {truth_hz}"
    );
    assert!((c["margin"].as_f64().unwrap() - (20.0 - v)).abs() < 1e-9);
    assert_eq!(verdict(&rep, "rise_ms")["status"], "pass");

    // The printed defaults, saved and passed back, give the same verdicts.
    let lim = run(&["limits"]);
    assert_eq!(lim.code, Some(0));
    let prof = d.path().join("limits.toml");
    std::fs::write(&prof, &lim.stdout).unwrap();
    for f in [&clean, &hard, &chirpy] {
        let a = run(&["analyze", s(f), "--json"]);
        let b = run(&["analyze", s(f), "--json", "--profile", s(&prof)]);
        assert_eq!(a.code, b.code);
        let va: Value = serde_json::from_str(&a.stdout).unwrap();
        let vb: Value = serde_json::from_str(&b.stdout).unwrap();
        assert_eq!(va["verdicts"], vb["verdicts"], "{}", f.display());
    }

    // A profile that relaxes the rise limit turns the hard file's rise into a pass.
    let relaxed = d.path().join("relaxed.toml");
    std::fs::write(
        &relaxed,
        "[limits.rise_ms]\nmin = 0.3\n[limits.fall_ms]\nmin = 0.3\nsource = \"bench test\"\n\
         [limits.occupied_to_necessary_ratio]\n",
    )
    .unwrap();
    let r = run(&["analyze", s(&hard), "--json", "--profile", s(&relaxed)]);
    let rep: Value = serde_json::from_str(&r.stdout).unwrap();
    assert_eq!(verdict(&rep, "rise_ms")["status"], "pass");
    assert_eq!(verdict(&rep, "fall_ms")["source"], "bench test");
    // The empty table turned the bandwidth limit off: no verdict for it.
    let judged: Vec<&str> = rep["verdicts"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v["metric"].as_str().unwrap())
        .collect();
    assert!(
        !judged.contains(&"occupied_to_necessary_ratio"),
        "{judged:?}"
    );
    // Nothing else fails on this chirp-free signal, so the exit code is 0.
    assert_ne!(verdict(&rep, "chirp_mean_element_hz")["status"], "fail");
    assert_eq!(r.code, Some(0), "{}", r.stderr);
}

#[test]
fn bad_profiles_exit_2_with_the_line_and_the_valid_names() {
    let d = tempfile::tempdir().unwrap();
    let (wav, _) = make(d.path(), "x.wav", &spec(5.0, Chirp::None));
    let cases = [
        (
            "unknown.toml",
            "# mine\n[limits.rise_time]\nmax = 3.0\n",
            "line 2",
        ),
        (
            "broken.toml",
            "[limits.rise_ms]\nmin = 2.0\nmax = = 3\n",
            "line 3",
        ),
        (
            "key.toml",
            "[limits.fall_ms]\nmin = 2.0\nmaxx = 9.0\n",
            "line 3",
        ),
    ];
    for (name, text, line) in cases {
        let p = d.path().join(name);
        std::fs::write(&p, text).unwrap();
        for cmd in [
            vec!["analyze", s(&wav), "--profile", s(&p)],
            vec!["limits", "--profile", s(&p)],
        ] {
            let r = run(&cmd);
            assert_eq!(r.code, Some(2), "{name}: {}", r.stderr);
            assert!(r.stdout.is_empty(), "{name}: nothing on stdout");
            let lines: Vec<&str> = r.stderr.lines().collect();
            assert_eq!(lines.len(), 1, "{name}: one line: {:?}", r.stderr);
            assert!(
                lines[0].contains(name) && lines[0].contains(line),
                "{}",
                lines[0]
            );
            assert!(
                lines[0].contains("rise_ms, fall_ms, chirp_hz"),
                "{}",
                lines[0]
            );
        }
    }
}

#[test]
fn help_documents_the_exit_codes() {
    let r = run(&["analyze", "--help"]);
    assert_eq!(r.code, Some(0));
    assert!(
        r.stdout.contains("1 = a figure\nfailed its limit"),
        "{}",
        r.stdout
    );
    assert!(r.stdout.contains("0 = measured and no limit failed"));
}
