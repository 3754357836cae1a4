//! The pictures: files are written atomically and never over a user's
//! file, PNGs decode at the stated size, SVGs are well-formed and carry
//! their axis labels, empty views and missing fonts do not fail, and a bad
//! mask file is refused with its line named.
//!
//! The views are filled with `plots::example_views` (synthetic, shaped like
//! real ones) on top of a report analysed from a synthesized recording, so
//! these tests exercise the drawing, not the measurement.

use std::path::Path;

use cwaudit::analysis::report::Report;
use cwaudit::analysis::{analyze_file, Options};
use cwaudit::present::plots::{
    example_views, render_png, render_svg, svg_strings, write_plots, Mask, Picture, HEIGHT_PX,
    WIDTH_PX,
};
use cwaudit::present::view_args::{run, ViewArgs};
use cwaudit::synth::{Chirp, SynthSpec};

fn analysed(dir: &Path) -> Report {
    let wav = dir.join("tx.wav");
    let spec = SynthSpec {
        text: "PARIS PARIS".into(),
        wpm: 22.0,
        chirp: Chirp::Exponential {
            depth_hz: 25.0,
            tau_ms: 15.0,
        },
        snr_db: Some(35.0),
        ..Default::default()
    };
    cwaudit::synth::write_files(&spec, &wav, false).expect("synthesize");
    analyze_file(&wav, &Options::default()).expect("analyse")
}

/// With CWAUDIT_KEEP_PLOTS=DIR, the pictures are also copied there to be
/// looked at.
fn keep(files: &[std::path::PathBuf]) {
    if let Some(dir) = std::env::var_os("CWAUDIT_KEEP_PLOTS") {
        std::fs::create_dir_all(&dir).unwrap();
        for f in files {
            std::fs::copy(f, Path::new(&dir).join(f.file_name().unwrap())).unwrap();
        }
    }
}

fn with_views(dir: &Path) -> Report {
    // Each part the analysis has not filled is drawn from synthetic views.
    let mut r = analysed(dir);
    let ex = example_views(&r);
    let v = &mut r.views;
    if v.spectrum.dbc.is_empty() {
        v.spectrum = ex.spectrum;
        v.noise = ex.noise;
    }
    if v.spectrogram.dbc.is_empty() {
        v.spectrogram = ex.spectrogram;
    }
    if v.envelope.is_empty() {
        v.envelope = ex.envelope;
    }
    if v.edges.rises.is_empty() && v.edges.falls.is_empty() {
        v.edges = ex.edges;
    }
    r
}

/// A small XML well-formedness check: every tag closes in order, attributes
/// are quoted, nothing is left open.
fn assert_well_formed(svg: &str) {
    let mut stack: Vec<String> = Vec::new();
    let mut rest = svg;
    while let Some(i) = rest.find('<') {
        let tail = &rest[i..];
        let end = tail.find('>').expect("unterminated tag");
        let tag = &tail[1..end];
        rest = &tail[end + 1..];
        if tag.starts_with('?') || tag.starts_with('!') {
            continue;
        }
        let quotes = tag.matches('"').count();
        assert_eq!(quotes % 2, 0, "unbalanced quotes in <{tag}>");
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack.pop().expect("closing tag without opening");
            assert_eq!(open, name.trim(), "tags close out of order");
        } else if !tag.ends_with('/') {
            let name = tag.split_whitespace().next().unwrap_or("").to_string();
            stack.push(name);
        }
    }
    assert!(stack.is_empty(), "tags left open: {stack:?}");
}

#[test]
fn png_files_are_written_at_the_stated_size_and_never_replaced_without_force() {
    let d = tempfile::tempdir().unwrap();
    let r = with_views(d.path());
    let out = d.path().join("pics");
    let paths = write_plots(&r, &out, false, None, false).unwrap();
    keep(&paths);
    assert_eq!(paths.len(), Picture::ALL.len());
    for p in &paths {
        assert_eq!(p.extension().unwrap(), "png");
        let img = image::load_from_memory(&std::fs::read(p).unwrap()).expect("PNG decodes");
        assert_eq!(
            (img.width(), img.height()),
            (WIDTH_PX, HEIGHT_PX),
            "{}",
            p.display()
        );
    }
    // Only the pictures: no temporary files left behind.
    assert_eq!(std::fs::read_dir(&out).unwrap().count(), paths.len());

    let before = std::fs::read(&paths[0]).unwrap();
    let err = write_plots(&r, &out, false, None, false)
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("--force") && err.contains("spectrogram.png"),
        "{err}"
    );
    assert_eq!(std::fs::read(&paths[0]).unwrap(), before);
    // The options say the same, through `run`.
    let args = ViewArgs {
        plots: Some(out.clone()),
        ..Default::default()
    };
    assert!(run(&args, &r, false).is_err());
    run(&args, &r, true).unwrap();
    assert_eq!(std::fs::read_dir(&out).unwrap().count(), paths.len());
}

#[test]
fn svg_pictures_are_well_formed_and_labelled() {
    let d = tempfile::tempdir().unwrap();
    let r = with_views(d.path());
    let out = d.path().join("svg");
    let paths = write_plots(&r, &out, true, None, false).unwrap();
    keep(&paths);
    let labels: [(&str, &[&str]); 5] = [
        (
            "spectrogram.svg",
            &["Time (s)", "Audio frequency (Hz)", "dBc"],
        ),
        (
            "spectrum.svg",
            &["Offset from the pitch (Hz)", "Level (dBc in"],
        ),
        (
            "edges.svg",
            &["Time from the 50 % instant (ms)", "Normalised level"],
        ),
        (
            "chirp.svg",
            &["Time since the 50 % rise (ms)", "Frequency deviation (Hz)"],
        ),
        ("envelope.svg", &["Time (s)", "Envelope level (dBFS)"]),
    ];
    for (name, want) in labels {
        let p = paths.iter().find(|p| p.ends_with(name)).expect(name);
        let s = std::fs::read_to_string(p).unwrap();
        assert!(
            s.contains("<svg") && s.trim_end().ends_with("</svg>"),
            "{name}"
        );
        assert_well_formed(&s);
        for w in want {
            assert!(s.contains(w), "{name} lacks the label {w:?}");
        }
    }
    let spectrogram = std::fs::read_to_string(out.join("spectrogram.svg")).unwrap();
    assert!(
        spectrogram.contains("data:image/png;base64,"),
        "the spectrogram cells are one embedded image, not thousands of rectangles"
    );
    assert!(spectrogram.len() < 1_500_000);
    let titles: Vec<String> = svg_strings(&r, None).into_iter().map(|t| t.0).collect();
    assert_eq!(titles.len(), 5);
}

#[test]
fn mask_is_drawn_and_bad_mask_files_name_their_line() {
    let d = tempfile::tempdir().unwrap();
    let r = with_views(d.path());
    let good = d.path().join("mask.txt");
    std::fs::write(
        &good,
        "# limit line\n-600 -60\n-150 -30\n-50 0\n50 0\n150 -30\n600 -60\n",
    )
    .unwrap();
    let mask = Mask::load(&good).unwrap();
    assert_eq!(mask.points.len(), 6);
    let svg = render_svg(Picture::Spectrum, &r, Some(&mask), true).unwrap();
    assert!(svg.contains("\nmask\n"), "the mask is in the legend");

    let bad = d.path().join("bad-mask.txt");
    std::fs::write(&bad, "-600 -60\n# fine\n-150 minus-thirty\n").unwrap();
    let err = Mask::load(&bad).unwrap_err().to_string();
    assert!(
        err.contains("bad-mask.txt") && err.contains("line 3"),
        "{err}"
    );
    assert_eq!(err.lines().count(), 1, "one sentence");

    let three = d.path().join("three.txt");
    std::fs::write(&three, "-600 -60 7\n").unwrap();
    assert!(Mask::load(&three)
        .unwrap_err()
        .to_string()
        .contains("line 1"));
    let order = d.path().join("order.txt");
    std::fs::write(&order, "100 -30\n-100 -30\n").unwrap();
    assert!(Mask::load(&order)
        .unwrap_err()
        .to_string()
        .contains("line 2"));
    let missing = d.path().join("nope.txt");
    assert!(Mask::load(&missing)
        .unwrap_err()
        .to_string()
        .contains("nope.txt"));

    // Through the options: the mask is read first, nothing is written.
    let out = d.path().join("pics");
    let args = ViewArgs {
        plots: Some(out.clone()),
        report: Some(d.path().join("r.html")),
        mask: Some(bad.clone()),
        ..Default::default()
    };
    let err = run(&args, &r, false).unwrap_err();
    assert!(matches!(err, cwaudit::error::CwError::Input { .. }));
    assert!(!out.exists() && !d.path().join("r.html").exists());
}

#[test]
fn empty_views_and_missing_fonts_draw_frames_without_failing() {
    let d = tempfile::tempdir().unwrap();
    let mut r = analysed(d.path());
    r.views = Default::default();
    for e in &mut r.elements {
        e.trace.clear();
    }
    let paths = write_plots(&r, &d.path().join("empty"), false, None, false).unwrap();
    assert_eq!(paths.len(), 5);
    for p in Picture::ALL {
        let svg = render_svg(p, &r, None, true).unwrap();
        assert!(
            svg.contains("No ") && svg.contains("in this report"),
            "{p:?} notes the gap"
        );
    }
    // Without a font nothing may try to draw text (the family used then is
    // never registered, so any text would fail here).
    let sub = d.path().join("x");
    std::fs::create_dir_all(&sub).unwrap();
    let full = with_views(&sub);
    for rep in [&r, &full] {
        for p in Picture::ALL {
            let png = render_png(p, rep, None, false, (640, 320)).expect("draws without text");
            let img = image::load_from_memory(&png).unwrap();
            assert_eq!((img.width(), img.height()), (640, 320));
            render_svg(p, rep, None, false).expect("SVG without text");
        }
    }
    // Views whose shapes disagree with their stated sizes are skipped.
    let mut odd = full.clone();
    odd.views.spectrogram.rows += 1;
    odd.views.spectrum.step_hz = f64::NAN;
    odd.views.edges.step_ms = 0.0;
    for p in Picture::ALL {
        render_svg(p, &odd, None, true).unwrap();
    }
}

#[test]
fn plots_folder_that_is_a_file_is_refused() {
    let d = tempfile::tempdir().unwrap();
    let r = with_views(d.path());
    let f = d.path().join("afile");
    std::fs::write(&f, "x").unwrap();
    let err = write_plots(&r, &f, false, None, false)
        .unwrap_err()
        .to_string();
    assert!(err.contains("afile"), "{err}");
}

/// Not a test but a measurement: how long all the pictures and the HTML
/// report take for a 10-minute recording (run with `--ignored --nocapture`).
/// Times live here and in the benchmarks, never in assertions.
#[test]
#[ignore]
fn render_time_for_ten_minutes() {
    let d = tempfile::tempdir().unwrap();
    let wav = d.path().join("ten.wav");
    let spec = SynthSpec {
        text: "PARIS ".repeat(250).trim_end().to_string(),
        wpm: 25.0,
        snr_db: Some(30.0),
        chirp: Chirp::Exponential {
            depth_hz: 25.0,
            tau_ms: 15.0,
        },
        ..Default::default()
    };
    cwaudit::synth::write_files(&spec, &wav, false).unwrap();
    let t = std::time::Instant::now();
    let mut r = analyze_file(&wav, &Options::default()).unwrap();
    let analysis_s = t.elapsed().as_secs_f64();
    let ex = example_views(&r);
    if r.views.edges.rises.is_empty() {
        r.views.edges = ex.edges;
    }
    if r.views.spectrum.dbc.is_empty() {
        r.views = example_views(&r);
    }
    let t = std::time::Instant::now();
    write_plots(&r, &d.path().join("png"), false, None, false).unwrap();
    let png_s = t.elapsed().as_secs_f64();
    let t = std::time::Instant::now();
    write_plots(&r, &d.path().join("svg"), true, None, false).unwrap();
    let svg_s = t.elapsed().as_secs_f64();
    let t = std::time::Instant::now();
    let html = cwaudit::present::html::render_html(&r, None);
    let html_s = t.elapsed().as_secs_f64();
    eprintln!(
        "{:.0} s recording, {} elements: analysis {analysis_s:.2} s; PNG pictures {png_s:.2} s; \
         SVG pictures {svg_s:.2} s; HTML report {html_s:.2} s ({} kB)",
        r.input.duration_s,
        r.elements.len(),
        html.len() / 1024
    );
}
