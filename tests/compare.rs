//! `cwaudit compare` and its Mann–Whitney U test.
//!
//! Outside reference: scipy.stats.mannwhitneyu (scipy 1.17.1, numpy 2.4.6;
//! method="asymptotic", use_continuity=True, two-sided), golden values
//! written by scripts/golden_mannwhitney.py into
//! fixtures/mannwhitney_golden.json. Slow, obvious reference: U counted
//! pair by pair. End to end: synthetic recordings (truth from the
//! synthesizer) that differ by a known amount, and two noise realizations
//! of one signal.

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use cwaudit::compare::{erfc, mann_whitney, normal_sf};
use cwaudit::synth::{self, SynthSpec};
use serde_json::Value;

fn fixture() -> Value {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/mannwhitney_golden.json");
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect()
}

#[test]
fn golden_names_its_scipy_version() {
    // If the fixture is regenerated with another scipy, update the version in
    // this file's header comment too.
    assert_eq!(fixture()["scipy_version"], "1.17.1");
}

#[test]
fn u_and_p_match_scipy() {
    let f = fixture();
    let cases = f["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 8);
    for c in cases {
        let (x, y) = (floats(&c["x"]), floats(&c["y"]));
        let r = mann_whitney(&x, &y).unwrap();
        let (u, p) = (c["u"].as_f64().unwrap(), c["p"].as_f64().unwrap());
        // U is a sum of half-integers: exact.
        assert_eq!(r.u, u, "{}", c["name"]);
        // p: relative 1e-9 (both are double-precision evaluations of the same
        // formula; the normal tail here is good to about 1e-13).
        assert!(
            (r.p_value - p).abs() <= 1e-9 * p,
            "{}: p {} vs scipy {}",
            c["name"],
            r.p_value,
            p
        );
    }
}

#[test]
fn normal_tail_matches_scipy() {
    for c in fixture()["norm_sf"].as_array().unwrap() {
        let (z, sf) = (c["z"].as_f64().unwrap(), c["sf"].as_f64().unwrap());
        let got = normal_sf(z);
        assert!(
            (got - sf).abs() <= 1e-12 * sf,
            "sf({z}) = {got}, scipy {sf}"
        );
    }
    // erfc(0) = 1 and erfc(-x) = 2 - erfc(x) (definitions).
    assert_eq!(erfc(0.0), 1.0);
    assert!((erfc(-1.3) - (2.0 - erfc(1.3))).abs() < 1e-15);
}

#[test]
fn u_by_ranks_equals_u_by_counting_pairs() {
    // U1 = #{(i, j): x_i > y_j} + #{x_i = y_j}/2 (Mann & Whitney's definition).
    let mut state = 12345u64;
    let mut next = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 33) % 7) as f64 * 0.5 // few distinct values: many ties
    };
    for (n1, n2) in [(1, 1), (3, 9), (12, 12), (40, 17)] {
        let x: Vec<f64> = (0..n1).map(|_| next()).collect();
        let y: Vec<f64> = (0..n2).map(|_| next()).collect();
        let mut slow = 0.0;
        for a in &x {
            for b in &y {
                slow += if a > b {
                    1.0
                } else if a == b {
                    0.5
                } else {
                    0.0
                };
            }
        }
        assert_eq!(mann_whitney(&x, &y).unwrap().u, slow, "{n1} vs {n2}");
    }
    assert!(mann_whitney(&[], &[1.0]).is_none());
}

fn make(dir: &Path, name: &str, s: &SynthSpec) -> PathBuf {
    let p = dir.join(name);
    synth::write_files(s, &p, false).expect("synthesize");
    p
}

fn compare(a: &Path, b: &Path) -> (Option<i32>, Value, String) {
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .args([
            "compare",
            a.to_str().unwrap(),
            b.to_str().unwrap(),
            "--json",
        ])
        .output()
        .unwrap();
    let text = Command::cargo_bin("cwaudit")
        .unwrap()
        .args(["compare", a.to_str().unwrap(), b.to_str().unwrap()])
        .output()
        .unwrap();
    (
        out.status.code(),
        serde_json::from_slice(&out.stdout).unwrap(),
        String::from_utf8_lossy(&text.stdout).into_owned(),
    )
}

fn edges(ms: f64, seed: u64) -> SynthSpec {
    SynthSpec {
        rise_ms: ms,
        fall_ms: ms,
        snr_db: Some(30.0),
        seed,
        ..Default::default()
    }
}

#[test]
fn a_known_change_of_edges_is_significant_and_better() {
    let d = tempfile::tempdir().unwrap();
    let slow3 = make(d.path(), "r3.wav", &edges(3.0, 5));
    let slow6 = make(d.path(), "r6.wav", &edges(6.0, 6));
    let (code, j, text) = compare(&slow3, &slow6);
    assert_eq!(code, Some(0), "after passes its limits");
    for m in ["rise_ms", "fall_ms"] {
        let x = &j["deltas"][m];
        // Synth truth: +3 ms; README accuracy: each median within 0.15 ms.
        let delta = x["delta"].as_f64().unwrap();
        assert!((delta - 3.0).abs() < 0.3, "{m} delta {delta}");
        assert_eq!(x["significant"], true, "{m}");
        // 42 vs 42 elements that do not overlap at all: p from the normal
        // approximation is about 3e-15 (scipy gives 6.8e-15 for 40 vs 42).
        assert!(x["p_value"].as_f64().unwrap() < 1e-10, "{m}");
        // 3 ms is 1 ms inside the 2 ms limit, 6 ms is 4 ms inside: better.
        assert_eq!(x["change"], "better", "{m}");
    }
    // Same speed in both: not significant.
    assert_eq!(j["deltas"]["dit_duration_ms"]["significant"], false);
    assert!(j["before"]["verdicts"].as_array().unwrap().len() >= 3);
    // The text leads with the better rise time, before -> after in ms.
    let before: f64 = text
        .strip_prefix("Better:\n  rise_ms median ")
        .and_then(|t| t.split_whitespace().next())
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("{text}"));
    assert!((before - 3.0).abs() < 0.15, "{text}");
    assert!(text.contains("Worse: nothing"), "{text}");

    // The other way round: worse, and exit 1 once the after file fails.
    let hard = make(d.path(), "hard.wav", &edges(0.5, 7));
    let (code, j, text) = compare(&slow6, &hard);
    assert_eq!(code, Some(1), "after fails its rise limit");
    assert_eq!(j["deltas"]["rise_ms"]["change"], "worse");
    assert!(
        text.starts_with("Better: nothing\nWorse:\n  rise_ms median"),
        "{text}"
    );
}

#[test]
fn two_noise_realizations_are_not_significant() {
    let d = tempfile::tempdir().unwrap();
    let a = make(d.path(), "a.wav", &edges(5.0, 1));
    let b = make(d.path(), "b.wav", &edges(5.0, 2));
    let (code, j, text) = compare(&a, &b);
    assert_eq!(code, Some(0));
    let mut tested = 0;
    for (m, x) in j["deltas"].as_object().unwrap() {
        if let Some(p) = x["p_value"].as_f64() {
            tested += 1;
            // Same signal, other noise: at alpha = 0.01 nothing is real.
            assert_eq!(x["significant"], false, "{m}: p = {p}");
            assert!(x["change"] != "better" && x["change"] != "worse", "{m}");
        }
    }
    // rise, fall, chirp, raw chirp, level, mean-edge rise/fall, mean-element
    // chirp, dit and dah durations.
    assert_eq!(tested, 10);
    assert!(
        text.starts_with("Better: nothing\nWorse: nothing\n"),
        "{text}"
    );
}

#[test]
fn compare_refuses_a_file_it_cannot_read() {
    let d = tempfile::tempdir().unwrap();
    let a = make(d.path(), "a.wav", &edges(5.0, 1));
    let bad = d.path().join("bad.wav");
    std::fs::write(&bad, b"RIFF\x10\x00\x00\x00WAVEjunk").unwrap();
    let out = Command::cargo_bin("cwaudit")
        .unwrap()
        .args(["compare", a.to_str().unwrap(), bad.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("bad.wav"), "{err}");
}
