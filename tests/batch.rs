//! Many files at once: a folder or a list, one summary table, one bad file
//! reported while the rest are analysed, and the exit codes. Signals from
//! the synthesizer (truth: 42 elements of "PARIS PARIS PARIS").

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use cwaudit::synth::{self, SynthSpec};
use serde_json::Value;

fn make(dir: &Path, name: &str, rise_ms: f64, seed: u64) -> PathBuf {
    let p = dir.join(name);
    let s = SynthSpec {
        rise_ms,
        fall_ms: rise_ms,
        snr_db: Some(30.0),
        seed,
        ..Default::default()
    };
    let truth = synth::write_files(&s, &p, false).expect("synthesize");
    assert_eq!(truth.elements.len(), 42);
    p
}

fn run(args: &[&str]) -> (Option<i32>, String, String) {
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn a_folder_with_one_corrupt_file() {
    let d = tempfile::tempdir().unwrap();
    let dir = d.path().join("bench");
    std::fs::create_dir(&dir).unwrap();
    make(&dir, "a_clean.wav", 5.0, 1);
    make(&dir, "c_hard.wav", 0.5, 2);
    // Truncated header: not a WAV file.
    std::fs::write(dir.join("b_corrupt.wav"), b"RIFF\x24\x00\x00\x00WAVEfmt ").unwrap();
    std::fs::write(dir.join("notes.txt"), b"not a recording").unwrap();
    // The synthesizer's truth files (.json) are not WAV files either.

    let (code, out, err) = run(&["analyze", s(&dir), "--json"]);
    // One file fails its limits (0.5 ms edges): exit 1.
    assert_eq!(code, Some(1), "{err}");
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(lines.len(), 1, "one line for the bad file: {err:?}");
    assert!(lines[0].contains("b_corrupt.wav"), "{}", lines[0]);
    let j: Value = serde_json::from_str(&out).unwrap();
    let files = j["files"].as_array().unwrap();
    let names: Vec<&str> = files
        .iter()
        .map(|f| f["path"].as_str().unwrap().rsplit('/').next().unwrap())
        .collect();
    // Sorted, only the .wav files.
    assert_eq!(names, ["a_clean.wav", "b_corrupt.wav", "c_hard.wav"]);
    // 5 ms edges: rise passes; the file as a whole does not fail (it may warn
    // on other figures, such as an occupied bandwidth near B*K).
    assert_ne!(files[0]["result"], "fail");
    let v0 = files[0]["report"]["verdicts"].as_array().unwrap();
    let rise0 = v0.iter().find(|v| v["metric"] == "rise_ms").unwrap();
    assert_eq!(rise0["status"], "pass");
    assert_eq!(files[0]["report"]["summary"]["element_count"], 42);
    assert!(files[1]["report"].is_null() && files[1]["result"].is_null());
    assert!(files[1]["error"]
        .as_str()
        .unwrap()
        .contains("b_corrupt.wav"));
    assert_eq!(files[2]["result"], "fail");
    assert_eq!(files[2]["report"]["summary"]["element_count"], 42);

    // The text table: one row per file, in the same order.
    let (code, out, _) = run(&["analyze", s(&dir)]);
    assert_eq!(code, Some(1));
    let (pass, warn) = if files[0]["result"] == "pass" {
        (1, 0)
    } else {
        (0, 1)
    };
    let head = format!("3 file(s): {pass} pass, {warn} pass with warnings, 1 fail, 1 not measured");
    assert!(out.starts_with(&head), "{out}");
    let rows: Vec<&str> = out.lines().filter(|l| l.contains(".wav")).collect();
    assert_eq!(rows.len(), 3, "{out}");
    assert!(
        !rows[0].contains("FAIL") && !rows[0].contains("ERROR"),
        "{}",
        rows[0]
    );
    assert!(
        rows[1].contains("ERROR") && rows[2].contains("FAIL"),
        "{out}"
    );

    // --csv FILE: the summary table, one row per file.
    let csv = d.path().join("summary.csv");
    let (code, _, _) = run(&["analyze", s(&dir), "--csv", s(&csv)]);
    assert_eq!(code, Some(1));
    let text = std::fs::read_to_string(&csv).unwrap();
    let mut r = csv_rows(&text);
    let head = r.remove(0);
    assert_eq!(r.len(), 3);
    let col = |n: &str| head.iter().position(|h| h == n).unwrap();
    assert_eq!(r[1][col("result")], "error");
    assert_eq!(r[2][col("rise_ms_verdict")], "fail");
    // Synth truth 5 ms; README accuracy target within 0.15 ms.
    let rise: f64 = r[0][col("rise_ms")].parse().unwrap();
    assert!((rise - 5.0).abs() < 0.15, "{rise}");
    // Without --force an existing CSV is left alone: exit 2.
    let (code, _, err) = run(&["analyze", s(&dir), "--csv", s(&csv)]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("summary.csv"));
    assert_eq!(std::fs::read_to_string(&csv).unwrap(), text);
}

fn csv_rows(text: &str) -> Vec<Vec<String>> {
    let mut rd = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(text.as_bytes());
    rd.records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect()
}

#[test]
fn a_list_of_files_exits_0_when_none_fails_and_2_when_none_can_be_read() {
    let d = tempfile::tempdir().unwrap();
    let a = make(d.path(), "a.wav", 5.0, 1);
    let b = make(d.path(), "b.wav", 6.0, 2);
    let missing = d.path().join("missing.wav");
    let (code, out, err) = run(&["analyze", s(&a), s(&missing), s(&b)]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert_eq!(err.lines().count(), 1);
    assert!(err.contains("missing.wav"));
    let junk = d.path().join("junk.wav");
    std::fs::write(&junk, [0u8; 100]).unwrap();
    let (code, _, err) = run(&["analyze", s(&missing), s(&junk)]);
    assert_eq!(code, Some(2));
    assert_eq!(err.lines().count(), 2, "{err}");
}

#[test]
fn one_file_keeps_the_per_element_csv() {
    let d = tempfile::tempdir().unwrap();
    let a = make(d.path(), "a.wav", 5.0, 1);
    let csv = d.path().join("el.csv");
    let (code, _, err) = run(&["analyze", s(&a), "--csv", s(&csv)]);
    assert_eq!(code, Some(0), "{err}");
    let rows = csv_rows(&std::fs::read_to_string(&csv).unwrap());
    assert_eq!(rows[0][0], "index");
    assert_eq!(rows.len(), 43, "header + 42 elements (synth truth)");
}
