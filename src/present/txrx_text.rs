//! The terminal report of `cwaudit timing`: each figure with one sentence
//! saying what it is, the per-transmission table, then the warnings. It
//! reads a [`TimingReport`] and computes nothing.

use std::fmt::Write;

use crate::analysis::txrx::TimingReport;

fn ms(v: Option<f64>, prec: usize) -> String {
    match v {
        Some(x) => format!("{x:.prec$} ms"),
        None => "not measured".into(),
    }
}

fn cell(v: Option<f64>, prec: usize) -> String {
    match v {
        Some(x) => format!("{x:.prec$}"),
        None => "-".into(),
    }
}

/// The text report.
pub fn render_timing(r: &TimingReport) -> String {
    let mut o = String::new();
    let i = &r.input;
    let t = &r.timing;
    let p = &r.pairing;
    let _ = writeln!(o, "Transmit/receive timing: {}", i.path);
    let key = match i.key_tone_hz {
        Some(f) => format!("tone {f:.1} Hz"),
        None => i.key_signal.clone(),
    };
    let _ = writeln!(
        o,
        "  key channel {} ({key}), RF channel {} (tone {:.1} Hz), {:.2} s at {} Hz",
        i.key_channel, i.rf_channel, i.rf_tone_hz, i.duration_s, i.sample_rate_hz
    );
    let _ = writeln!(
        o,
        "  {} transmission(s); {} key and {} RF elements, {} paired",
        t.transmissions, p.key_elements, p.rf_elements, p.paired
    );
    let _ = writeln!(o);
    let spread = |s: &Option<crate::dsp::stats::Spread>| match s {
        Some(s) => format!(" (p10 {:.2}, p90 {:.2} ms)", s.p10, s.p90),
        None => String::new(),
    };
    let _ = writeln!(o, "delay_ms                     {}", ms(t.delay_ms, 2));
    let _ = writeln!(
        o,
        "  The RF rises through half its level this long after the key does: median over every element except each transmission's first{}.",
        spread(&t.delay_spread_ms)
    );
    let _ = writeln!(o, "fall_delay_ms                {}", ms(t.fall_delay_ms, 2));
    let _ = writeln!(
        o,
        "  The RF falls through half its level this long after the key does, over the same elements{}.",
        spread(&t.fall_delay_spread_ms)
    );
    let _ = writeln!(
        o,
        "first_element_shortening_ms  {}",
        ms(t.first_element_shortening_ms, 2)
    );
    let _ = writeln!(
        o,
        "  The first element of a transmission comes out this much shorter on RF than the others do (key minus RF duration, first element minus the rest; median over transmissions)."
    );
    let _ = writeln!(
        o,
        "rx_recovery_ms               {}",
        ms(t.rx_recovery_ms, 1)
    );
    let _ = writeln!(
        o,
        "  After the last key-up of a transmission, the key channel's background (sidetone notched out) takes this long to come back within 3 dB of its level before the transmission (median over transmissions)."
    );
    if !r.per_transmission.is_empty() {
        let _ = writeln!(o);
        let _ = writeln!(o, "Per transmission:");
        let _ = writeln!(
            o,
            "  {:>3} {:>9} {:>9} {:>8} {:>12} {:>11} {:>13} {:>11} {:>15}",
            "#",
            "start s",
            "end s",
            "elements",
            "first key ms",
            "first RF ms",
            "shortening ms",
            "recovery ms",
            "background dBFS"
        );
        for x in &r.per_transmission {
            let _ = writeln!(
                o,
                "  {:>3} {:>9.3} {:>9.3} {:>8} {:>12.2} {:>11} {:>13} {:>11} {:>15}",
                x.index,
                x.start_s,
                x.end_s,
                x.elements,
                x.first_key_ms,
                cell(x.first_rf_ms, 2),
                cell(x.shortening_ms, 2),
                cell(x.recovery_ms, 1),
                cell(x.background_dbfs, 1)
            );
        }
    }
    if !r.warnings.is_empty() {
        let _ = writeln!(o);
        let _ = writeln!(o, "Worth knowing:");
        for w in &r.warnings {
            let _ = writeln!(o, "  - {w}");
        }
    }
    o
}

/// The report as pretty-printed JSON.
pub fn timing_json(r: &TimingReport) -> String {
    serde_json::to_string_pretty(r).expect("the timing report holds only plain data")
}
