//! The terminal report: the figures first, what limits them after.

use std::fmt::Write;

use crate::analysis::report::Report;
use crate::dsp::stats::Spread;

fn num(v: Option<f64>, prec: usize, unit: &str) -> String {
    match v {
        Some(x) => format!("{x:.prec$}{unit}"),
        None => "n/a".into(),
    }
}

fn spread_row(out: &mut String, name: &str, s: Option<Spread>, prec: usize) {
    match s {
        Some(s) => {
            let _ = writeln!(
                out,
                "  {name:<14} {:>8.prec$} {:>8.prec$} {:>8.prec$} {:>8.prec$} {:>8.prec$}",
                s.median, s.p10, s.p90, s.min, s.max
            );
        }
        None => {
            let _ = writeln!(out, "  {name:<14} {:>8}", "n/a");
        }
    }
}

/// The readable report for one recording.
pub fn render(r: &Report, with_elements: bool) -> String {
    let mut o = String::new();
    let i = &r.input;
    let s = &r.summary;
    let _ = writeln!(o, "== {} ==", i.path);
    let _ = writeln!(
        o,
        "   {} Hz, {} ch, {}-bit {}, {:.2} s; measured on channel {} (peak {:.1} dBFS)",
        i.sample_rate_hz,
        i.channels,
        i.bits,
        i.sample_format,
        i.duration_s,
        i.channel_used,
        i.peak_dbfs
    );
    let _ = writeln!(o);
    if !s.keyed_signal_found {
        let _ = writeln!(o, "   No keyed signal to measure.");
    } else {
        let _ = writeln!(
            o,
            "   pitch {}   key-down {}   SNR {} in {:.0} Hz",
            num(s.tone_hz, 2, " Hz"),
            num(s.level_dbfs, 1, " dBFS"),
            num(s.snr_db, 1, " dB"),
            s.snr_bandwidth_hz
        );
        let _ = writeln!(
            o,
            "   speed {}   unit {}   dah/dit {}   dit mark/space {}",
            num(s.wpm, 1, " WPM"),
            num(s.unit_ms, 1, " ms"),
            num(s.dah_dit_ratio, 2, ""),
            num(s.mark_space_ratio, 2, "")
        );
        let _ = writeln!(
            o,
            "   {} elements: {} dits, {} dahs",
            s.element_count, s.dit_count, s.dah_count
        );
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "  {:<14} {:>8} {:>8} {:>8} {:>8} {:>8}",
            "per element", "median", "p10", "p90", "min", "max"
        );
        spread_row(&mut o, "rise ms", s.rise_ms, 2);
        spread_row(&mut o, "fall ms", s.fall_ms, 2);
        spread_row(&mut o, "chirp Hz", s.chirp_hz, 1);
        spread_row(&mut o, "raw chirp Hz", s.chirp_raw_hz, 1);
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "   measured in a {:.0} Hz band around the pitch; fastest edge it can show: {:.2} ms",
            s.envelope_bandwidth_hz, s.rise_floor_ms
        );
    }
    if with_elements && !r.elements.is_empty() {
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "  {:>4} {:>9} {:>8} {:>4} {:>7} {:>7} {:>7} {:>8} {:>10}",
            "#", "start s", "len ms", "kind", "rise", "fall", "chirp", "dBFS", "Hz"
        );
        for e in &r.elements {
            let _ = writeln!(
                o,
                "  {:>4} {:>9.4} {:>8.2} {:>4} {:>7} {:>7} {:>7.1} {:>8.2} {:>10.2}",
                e.index,
                e.start_s,
                e.duration_s * 1e3,
                e.kind.as_str(),
                num(e.rise_ms, 2, ""),
                num(e.fall_ms, 2, ""),
                e.chirp_hz,
                e.level_dbfs,
                e.frequency_hz
            );
        }
    }
    if !r.warnings.is_empty() {
        let _ = writeln!(o);
        let _ = writeln!(o, "  Worth knowing:");
        for w in &r.warnings {
            let _ = writeln!(o, "   * {w}");
        }
    }
    o
}
