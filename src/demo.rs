//! The demo: an invented bench scenario. A builder's low-power transmitter
//! keys hard, chirps, carries ripple from an unregulated supply and leaks a
//! little carrier when the key is up; they add a shaping network to the
//! keying stage, regulate the supply and mend the driver's bias, then record
//! again. Both recordings are
//! synthesized with known truth, analysed, and the reports printed.

use std::path::{Path, PathBuf};

use crate::analysis::{analyze_file, Options};
use crate::error::{CwError, Result};
use crate::present;
use crate::synth::{self, Chirp, EdgeShape, Hum, SynthSpec};

fn scenario() -> [(&'static str, &'static str, SynthSpec); 2] {
    let base = SynthSpec {
        text: "CQ TEST DE CWAUDIT CWAUDIT K".into(),
        wpm: 22.0,
        pitch_hz: 650.0,
        level_dbfs: -14.0,
        snr_db: Some(35.0),
        seed: 11,
        ..Default::default()
    };
    let before = SynthSpec {
        rise_ms: 0.5,
        fall_ms: 0.3,
        rise_shape: EdgeShape::Linear,
        fall_shape: EdgeShape::Exponential,
        chirp: Chirp::Exponential {
            depth_hz: 40.0,
            tau_ms: 12.0,
        },
        hum: Some(Hum {
            frequency_hz: 100.0,
            am_percent: 4.0,
            fm_hz: 3.0,
        }),
        backwave_db: Some(-38.0),
        ..base.clone()
    };
    let after = SynthSpec {
        rise_ms: 4.5,
        fall_ms: 4.5,
        rise_shape: EdgeShape::RaisedCosine,
        fall_shape: EdgeShape::RaisedCosine,
        chirp: Chirp::Exponential {
            depth_hz: 4.0,
            tau_ms: 12.0,
        },
        seed: 12,
        ..base
    };
    [
        (
            "before.wav",
            "Before: keyed straight, unregulated supply, driver leaking when key-up",
            before,
        ),
        (
            "after.wav",
            "After: shaping network in the keying stage, regulated supply, driver bias mended",
            after,
        ),
    ]
}

/// Writes the scenario into `dir` (or a new kept temporary folder) and prints the reports.
pub fn run(dir: Option<&Path>) -> Result<()> {
    let dir: PathBuf = match dir {
        Some(d) => {
            std::fs::create_dir_all(d)
                .map_err(|e| CwError::output(d, format!("cannot be created ({e})")))?;
            d.to_path_buf()
        }
        None => tempfile::Builder::new()
            .prefix("cwaudit-demo-")
            .tempdir()
            .map_err(|e| CwError::Usage(format!("cannot make a temporary folder ({e})")))?
            .keep(),
    };
    println!("cwaudit demo: a home-built transmitter before and after a keying fix.");
    println!("Both recordings are synthesized with known truth (JSON beside each WAV).\n");
    for (name, title, spec) in scenario() {
        let path = dir.join(name);
        let truth = synth::write_files(&spec, &path, true)?;
        println!("--- {title} ---");
        println!(
            "    truth: rise {:.1} ms, fall {:.1} ms, chirp {:.1} Hz at key-down, {:.0} WPM, {}, {}",
            spec.rise_ms,
            spec.fall_ms,
            truth.elements.first().map_or(0.0, |e| e.chirp_hz),
            spec.wpm,
            spec.hum.map_or("no hum".to_string(), |h| format!(
                "hum at {:.0} Hz with {:.1} % AM and {:.1} Hz FM",
                h.frequency_hz, h.am_percent, h.fm_hz
            )),
            spec.backwave_db
                .map_or("no backwave".to_string(), |b| format!("backwave {b:.0} dB"))
        );
        let mut rep = analyze_file(&path, &Options::default())?;
        rep.verdicts = crate::judge::judge(&rep.summary, &crate::judge::Profile::defaults());
        print!("{}", present::text::render(&rep, false));
        println!();
    }
    println!("Recordings and truth files are in {}", dir.display());
    println!(
        "Try: cwaudit analyze {} --elements",
        dir.join("before.wav").display()
    );
    Ok(())
}
