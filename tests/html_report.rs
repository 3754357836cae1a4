//! The HTML report: self-contained (no URL, no script), carrying the
//! summary figures, the warnings, the element table and every picture; and,
//! when Debian's chromium is installed, loaded in a real headless browser
//! by scripts/check_html.sh, which fails on console errors or an
//! incomplete document and leaves a screenshot.

use std::path::Path;
use std::process::Command;

use cwaudit::analysis::{analyze_file, Options};
use cwaudit::present::html::{fmt_num, render_html};
use cwaudit::present::plots::{example_views, Mask};
use cwaudit::present::view_args::{run, ViewArgs};
use cwaudit::synth::SynthSpec;

fn on_path(cmd: &str) -> bool {
    std::env::var_os("PATH")
        .map(|p| std::env::split_paths(&p).any(|d| d.join(cmd).is_file()))
        .unwrap_or(false)
}

#[test]
fn html_report_is_self_contained_and_loads_in_chromium() {
    let d = tempfile::tempdir().unwrap();
    let wav = d.path().join("before-fix.wav");
    let spec = SynthSpec {
        text: "PARIS PARIS".into(),
        wpm: 18.0,
        rise_ms: 1.0,
        fall_ms: 4.0,
        snr_db: Some(30.0),
        ..Default::default()
    };
    cwaudit::synth::write_files(&spec, &wav, false).unwrap();
    let mut report = analyze_file(&wav, &Options::default()).unwrap();
    // Parts of the views the analysis does not fill yet are drawn from
    // synthetic ones.
    let ex = example_views(&report);
    if report.views.spectrum.dbc.is_empty() {
        report.views.spectrum = ex.spectrum;
        report.views.noise = ex.noise;
    }
    if report.views.spectrogram.dbc.is_empty() {
        report.views.spectrogram = ex.spectrogram;
    }
    if report.views.envelope.is_empty() {
        report.views.envelope = ex.envelope;
    }
    if report.views.edges.rises.is_empty() {
        report.views.edges = ex.edges;
    }
    report
        .warnings
        .push("A test warning with <markup> & \"quotes\".".into());
    let mask = Mask::parse("-400 -50\n-100 -20\n100 -20\n400 -50\n", Path::new("m.txt")).unwrap();
    let html = render_html(&report, Some(&mask));

    assert!(html.starts_with("<!DOCTYPE html>") && html.trim_end().ends_with("</html>"));
    for bad in ["http://", "https://", "<script", "<link", "@import", "url("] {
        assert!(!html.contains(bad), "the report must not contain {bad:?}");
    }
    // The summary figures, formatted as the report prints them.
    let s = &report.summary;
    let wpm = s.wpm.expect("speed measured");
    assert!((wpm - 18.0).abs() < 0.5, "speed {wpm}");
    assert!(html.contains(&fmt_num(wpm)), "speed {}", fmt_num(wpm));
    let rise = s.rise_ms.as_ref().expect("rise measured").median;
    assert!(html.contains(&fmt_num(rise)));
    assert!(html.contains(&fmt_num(s.fall_ms.as_ref().unwrap().median)));
    assert!(html.contains(&fmt_num(s.tone_hz.unwrap())));
    assert!(html.contains(&format!("Elements ({})", report.elements.len())));
    assert!(html.contains("A test warning with &lt;markup&gt; &amp; &quot;quotes&quot;."));
    // One table row per element, and all five pictures inline.
    assert!(html.matches("<tr><td>").count() >= report.elements.len());
    assert_eq!(html.matches("<svg").count(), 5);
    assert!(html.contains("@media print"));

    // Through the options: written atomically, not replaced without force.
    let out = d.path().join("report.html");
    let args = ViewArgs {
        report: Some(out.clone()),
        ..Default::default()
    };
    run(&args, &report, false).unwrap();
    assert!(run(&args, &report, false).is_err());
    run(&args, &report, true).unwrap();

    if !on_path("chromium") {
        eprintln!("chromium is not installed: skipping the browser check");
        return;
    }
    let shot = d.path().join("shot.png");
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/check_html.sh");
    let o = Command::new("bash")
        .arg(&script)
        .arg(&out)
        .arg(&shot)
        .output()
        .expect("run check_html.sh");
    assert!(
        o.status.success(),
        "check_html.sh failed:\n{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
    let size = std::fs::metadata(&shot).expect("screenshot written").len();
    assert!(
        size > 20_000,
        "screenshot of {size} bytes is too small to show the report"
    );
    let img = image::load_from_memory(&std::fs::read(&shot).unwrap()).unwrap();
    assert_eq!((img.width(), img.height()), (1200, 3000));
    if let Some(keep) = std::env::var_os("CWAUDIT_KEEP_SCREENSHOT") {
        std::fs::copy(&shot, keep).unwrap();
    }
}
