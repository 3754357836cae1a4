//! The terminal report: the overall result first, then the figures with
//! their verdicts, then what limits them. Verdicts are computed by
//! [`crate::judge`]; this module only words and lays them out.

use std::fmt::Write;

use crate::analysis::report::Report;
use crate::batch::Batch;
use crate::compare::{Change, Comparison};
use crate::dsp::stats::Spread;
use crate::judge::metrics::{Shape, METRICS};
use crate::judge::{overall, Crossed, Status, Verdict};

fn num(v: Option<f64>, prec: usize, unit: &str) -> String {
    match v {
        Some(x) => format!("{x:.prec$}{unit}"),
        None => "n/a".into(),
    }
}

fn spread_row(out: &mut String, name: &str, s: Option<Spread>, prec: usize, verdict: &str) {
    let line = match s {
        Some(s) => format!(
            "  {name:<14} {:>8.prec$} {:>8.prec$} {:>8.prec$} {:>8.prec$} {:>8.prec$}  {verdict}",
            s.median, s.p10, s.p90, s.min, s.max
        ),
        None => format!("  {name:<14} {:>8}", "n/a"),
    };
    let _ = writeln!(out, "{}", line.trim_end());
}

fn decimals_of(metric: &str) -> usize {
    METRICS
        .iter()
        .find(|m| m.name == metric)
        .map_or(2, |m| m.decimals)
}

fn with_unit(x: f64, unit: &str, prec: usize) -> String {
    if unit.is_empty() {
        format!("{x:.prec$}")
    } else {
        format!("{x:.prec$} {unit}")
    }
}

/// "rise_ms median" or "wpm": the figure as named in profiles.
fn label(v: &Verdict) -> String {
    match &v.stat {
        Some(s) => format!("{} {s}", v.metric),
        None => v.metric.clone(),
    }
}

/// One verdict beyond a limit, as a phrase: "rise_ms median 0.57 ms is below 2 ms".
pub fn describe(v: &Verdict) -> Option<String> {
    let (c, lim) = v.crossed()?;
    let value = v.value?;
    let p = decimals_of(&v.metric).max(1);
    let what = match c {
        Crossed::BelowMin => "is below the limit",
        Crossed::AboveMax => "is above the limit",
        Crossed::BelowWarnMin => "is below the warning level",
        Crossed::AboveWarnMax => "is above the warning level",
    };
    // Enough decimals that the value and the limit it crossed read differently.
    let mut p = p;
    while p < 6 && format!("{value:.p$}") == format!("{lim:.p$}") {
        p += 1;
    }
    Some(format!(
        "{} {} {what} {}",
        label(v),
        with_unit(value, &v.unit, p),
        with_unit(lim, &v.unit, p)
    ))
}

/// The one-line result of a judged recording; None when nothing was judged.
pub fn result_line(verdicts: &[Verdict]) -> Option<String> {
    if verdicts.is_empty() {
        return None;
    }
    let judged = verdicts
        .iter()
        .filter(|v| v.status != Status::NotMeasured)
        .count();
    let unmeasured = verdicts.len() - judged;
    let of = |s: Status| -> Vec<String> {
        verdicts
            .iter()
            .filter(|v| v.status == s)
            .filter_map(describe)
            .collect()
    };
    Some(match overall(verdicts) {
        Status::Fail => format!("FAIL: {}", of(Status::Fail).join("; ")),
        Status::Warn => format!("PASS with warnings: {}", of(Status::Warn).join("; ")),
        _ if judged == 0 => "NOT JUDGED: none of the limited figures was measured".to_string(),
        _ if unmeasured > 0 => format!(
            "PASS: {judged} limited figure(s) inside their limits ({unmeasured} not measured)"
        ),
        _ => format!("PASS: {judged} limited figure(s) inside their limits"),
    })
}

/// The allowed range of a verdict, compactly: "2..12 (warn <3)".
fn limits_text(v: &Verdict) -> String {
    let range = match (v.min, v.max) {
        (Some(a), Some(b)) => format!("{a}..{b}"),
        (Some(a), None) => format!(">={a}"),
        (None, Some(b)) => format!("<={b}"),
        (None, None) => String::new(),
    };
    let warn: Vec<String> = [
        v.warn_min.map(|w| format!("<{w}")),
        v.warn_max.map(|w| format!(">{w}")),
    ]
    .into_iter()
    .flatten()
    .collect();
    match (range.is_empty(), warn.is_empty()) {
        (_, true) => range,
        (true, false) => format!("(warn {})", warn.join(" ")),
        (false, false) => format!("{range} (warn {})", warn.join(" ")),
    }
}

fn status_text(s: Status) -> &'static str {
    match s {
        Status::Pass => "pass",
        Status::Warn => "WARN",
        Status::Fail => "FAIL",
        Status::NotMeasured => "not measured",
    }
}

/// The summary figures with a verdict column: every figure the report has,
/// and every limited figure (measured or not).
fn figure_table(o: &mut String, r: &Report) {
    let json = serde_json::to_value(&r.summary).expect("the summary holds only plain data");
    let _ = writeln!(
        o,
        "  {:<30} {:>10}  {:<6} {:<12} {:<20} {:>8}",
        "figure", "value", "unit", "verdict", "limits", "margin"
    );
    for m in METRICS {
        let verdict = r.verdicts.iter().find(|v| v.metric == m.name);
        let stat = verdict
            .and_then(|v| v.stat.clone())
            .or(m.default_member().map(str::to_string));
        let value = m.read(&json, stat.as_deref());
        if value.is_none() && verdict.is_none() {
            continue;
        }
        let name = match (&m.shape, &stat) {
            (Shape::Object(_), Some(s)) => format!("{} {s}", m.name),
            _ => m.name.to_string(),
        };
        let p = m.decimals;
        let (vtext, ltext, mtext) = match verdict {
            Some(v) => (
                status_text(v.status),
                limits_text(v),
                v.margin.map_or(String::new(), |x| format!("{x:+.p$}")),
            ),
            None => ("", String::new(), String::new()),
        };
        let row = format!(
            "  {name:<30} {:>10}  {:<6} {vtext:<12} {ltext:<20} {mtext:>8}",
            match (value, verdict.and_then(|v| v.below)) {
                (Some(x), _) => format!("{x:.p$}"),
                (None, Some(f)) => format!("<{f:.p$}"),
                (None, None) => "n/a".to_string(),
            },
            m.unit_of(stat.as_deref()),
        );
        let _ = writeln!(o, "{}", row.trim_end());
    }
}

/// Tones, backwave, hum, drift, sidetone and muting, one line each.
fn carrier_lines(o: &mut String, r: &Report) {
    let s = &r.summary;
    let c = &s.carrier;
    let _ = writeln!(o);
    if r.tones.len() > 1 {
        let _ = writeln!(o, "   tones in this channel (strongest first):");
        for t in &r.tones {
            let what = if t.keyed {
                format!("keyed, {} elements", t.elements)
            } else {
                "steady".to_string()
            };
            let _ = writeln!(
                o,
                "     {:>9.1} Hz  {:>8}  {what}{}",
                t.frequency_hz,
                num(t.level_dbfs, 1, " dBFS"),
                if t.main { "  <- measured above" } else { "" }
            );
        }
    }
    match (c.backwave_db, c.backwave_floor_db) {
        (Some(b), _) => {
            let _ = writeln!(o, "   backwave: {b:.1} dB below key-down carrier");
        }
        (None, Some(f)) => {
            let _ = writeln!(
                o,
                "   backwave: none found; it is below {f:.1} dB, the floor this recording resolves"
            );
        }
        _ => {}
    }
    if let Some(h) = &c.hum {
        let am = h
            .am_percent
            .map_or(format!("AM below {:.2} %", h.am_floor_percent), |a| {
                format!("AM {a:.2} %")
            });
        let fm = h
            .fm_hz
            .map_or(format!("FM below {:.2} Hz", h.fm_floor_hz), |f| {
                format!("FM {f:.2} Hz peak")
            });
        if h.am_percent.is_none() && h.fm_hz.is_none() {
            let _ = writeln!(
                o,
                "   hum: none found ({am}, {fm} at every mains frequency tried)"
            );
        } else {
            let _ = writeln!(
                o,
                "   hum at {:.0} Hz ({:.0} Hz mains family): {am}, {fm}",
                h.frequency_hz, h.mains_hz
            );
        }
    }
    if let Some(d) = c.drift_hz_per_min {
        let _ = writeln!(
            o,
            "   drift: {d:+.2} Hz/min (straight-line fit); last tenth against first: {}; element pitch p10-p90 spread {}",
            num(c.drift_total_hz, 1, " Hz"),
            num(c.pitch_spread_hz.map(|p| p.p90 - p.p10), 1, " Hz")
        );
    }
    if let Some(st) = &s.sidetone {
        let from = match st.signal_source.as_str() {
            "tone" => "another tone in this recording",
            "reference file" => "the reference recording",
            other => other,
        };
        let sig = match st.signal_hz {
            Some(f) => format!(
                "the signal at {f:.1} Hz ({:.1} dBFS, {from})",
                st.signal_dbfs
            ),
            None => format!("the given signal level of {:.1} dBFS", st.signal_dbfs),
        };
        let _ = writeln!(
            o,
            "   sidetone at {:.1} Hz, {:.1} dBFS, is {:+.1} dB against {sig}",
            st.sidetone_hz, st.sidetone_dbfs, st.ratio_db
        );
    }
    if let (Some(d), Some(m)) = (s.rx_muting_db, &s.rx_muting) {
        let _ = writeln!(
            o,
            "   receive muting: {d:.1} dB (receiver audio without the sidetone: {:.1} dBFS key-up, from the {}; {:.1} dBFS key-down)",
            m.key_up_dbfs, m.key_up_from, m.key_down_dbfs
        );
        let _ = writeln!(o, "     {MUTING_TARGET}");
    }
}

/// The trade's rule of thumb shown beside any muting figure.
pub const MUTING_TARGET: &str = "for reference, a common-practice target (not a standard): muting 30-40 dB deep, the receiver still just audible";

/// The readable report for one recording.
pub fn render(r: &Report, with_elements: bool) -> String {
    let mut o = String::new();
    let i = &r.input;
    let s = &r.summary;
    if let Some(line) = result_line(&r.verdicts) {
        let _ = writeln!(o, "{line}");
        let _ = writeln!(o);
    }
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
        figure_table(&mut o, r);
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "  {:<14} {:>8} {:>8} {:>8} {:>8} {:>8}  verdict",
            "per element", "median", "p10", "p90", "min", "max"
        );
        let vcol = |name: &str| {
            r.verdicts
                .iter()
                .find(|v| v.metric == name)
                .map_or(String::new(), |v| {
                    format!(
                        "{} ({})",
                        status_text(v.status),
                        v.stat.as_deref().unwrap_or("median")
                    )
                })
        };
        spread_row(&mut o, "rise ms", s.rise_ms, 2, &vcol("rise_ms"));
        spread_row(&mut o, "fall ms", s.fall_ms, 2, &vcol("fall_ms"));
        spread_row(&mut o, "chirp Hz", s.chirp_hz, 1, &vcol("chirp_hz"));
        spread_row(
            &mut o,
            "raw chirp Hz",
            s.chirp_raw_hz,
            1,
            &vcol("chirp_raw_hz"),
        );
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "   measured in a {:.0} Hz band around the pitch; fastest edge it can show: {:.2} ms",
            s.envelope_bandwidth_hz, s.rise_floor_ms
        );
        carrier_lines(&mut o, r);
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

/// The summary table of many recordings: one row per file, with the judged
/// figures (those measured in at least one file) and the result.
pub fn render_batch(b: &Batch) -> String {
    let mut o = String::new();
    let measured: Vec<&Report> = b.files.iter().filter_map(|e| e.report.as_ref()).collect();
    let count = |s: Status| b.files.iter().filter(|e| e.result == Some(s)).count();
    let errors = b.files.iter().filter(|e| e.report.is_none()).count();
    let _ = writeln!(
        o,
        "{} file(s): {} pass, {} pass with warnings, {} fail, {} not measured",
        b.files.len(),
        count(Status::Pass),
        count(Status::Warn),
        count(Status::Fail),
        errors
    );
    let _ = writeln!(o);
    // Columns: the judged figures that at least one file measured.
    let mut cols: Vec<(String, String)> = Vec::new();
    for r in &measured {
        for v in &r.verdicts {
            if v.value.is_some() && !cols.iter().any(|(m, _)| *m == v.metric) {
                cols.push((v.metric.clone(), label(v)));
            }
        }
    }
    let width = b
        .files
        .iter()
        .map(|e| e.path.chars().count())
        .max()
        .unwrap_or(4)
        .clamp(4, 48);
    let mut head = format!("  {:<width$}  {:<8} {:>6}", "file", "result", "WPM");
    for (_, l) in &cols {
        let _ = write!(head, "  {l:>22}");
    }
    let _ = writeln!(o, "{head}");
    for e in &b.files {
        let mut line = format!("  {:<width$}", e.path);
        match &e.report {
            None => {
                let _ = write!(
                    line,
                    "  {:<8} {}",
                    "ERROR",
                    e.error.as_deref().unwrap_or("")
                );
            }
            Some(r) => {
                let res = match e.result {
                    Some(Status::Fail) => "FAIL",
                    Some(Status::Warn) => "WARN",
                    _ => "pass",
                };
                let _ = write!(line, "  {res:<8} {:>6}", num(r.summary.wpm, 1, ""));
                for (m, _) in &cols {
                    let cell = match r.verdicts.iter().find(|v| v.metric == *m) {
                        Some(v) => match v.value {
                            Some(x) => {
                                let p = decimals_of(m);
                                let tag = match v.status {
                                    Status::Fail => " FAIL",
                                    Status::Warn => " WARN",
                                    _ => "",
                                };
                                format!("{x:.p$}{tag}")
                            }
                            None => "n/a".into(),
                        },
                        None => String::new(),
                    };
                    let _ = write!(line, "  {cell:>22}");
                }
            }
        }
        let _ = writeln!(o, "{}", line.trim_end());
    }
    o
}

/// The before/after comparison: what got better and worse first, then the
/// verdicts of both recordings, then every figure side by side.
pub fn render_compare(c: &Comparison) -> String {
    let mut o = String::new();
    let line = |d: &crate::compare::Delta| {
        let p = d.decimals;
        let (b, a, dl) = (
            d.before.unwrap_or(f64::NAN),
            d.after.unwrap_or(f64::NAN),
            d.delta.unwrap_or(f64::NAN),
        );
        let name = match &d.stat {
            Some(s) => format!("{} {s}", d.metric),
            None => d.metric.clone(),
        };
        let why = match d.p_value {
            Some(pv) => format!("p = {pv:.2e}"),
            None => "verdict changed".to_string(),
        };
        let unit = if d.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", d.unit)
        };
        format!("  {name} {b:.p$} -> {a:.p$}{unit} ({dl:+.p$}, {why})")
    };
    for (title, ch) in [("Better", Change::Better), ("Worse", Change::Worse)] {
        let rows: Vec<String> = c
            .deltas
            .iter()
            .filter(|d| d.change == ch)
            .map(line)
            .collect();
        if rows.is_empty() {
            let _ = writeln!(o, "{title}: nothing");
        } else {
            let _ = writeln!(o, "{title}:");
            for r in rows {
                let _ = writeln!(o, "{r}");
            }
        }
    }
    if let Some(m) = &c.muting {
        let _ = writeln!(
            o,
            "Receive muting: {:.1} dB (the {:.1} Hz tone at {:.1} dBFS with muting off, {:.1} dBFS with it on); {MUTING_TARGET}.",
            m.depth_db, m.tone_hz, m.muting_off_dbfs, m.muting_on_dbfs
        );
    }
    let _ = writeln!(o);
    for (name, r) in [("Before", &c.before), ("After", &c.after)] {
        let res = result_line(&r.verdicts).unwrap_or_else(|| "not judged".into());
        let _ = writeln!(o, "{name} ({}): {res}", r.input.path);
    }
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "  {:<30} {:>10} {:>10} {:>10}  {:<6} {:>9}  {:<12} verdicts",
        "figure", "before", "after", "delta", "unit", "p", "change"
    );
    let verdicts = |m: &str| {
        let st = |r: &Report| {
            r.verdicts
                .iter()
                .find(|v| v.metric == m)
                .map(|v| status_text(v.status))
        };
        match (st(&c.before), st(&c.after)) {
            (Some(b), Some(a)) => format!("{b} -> {a}"),
            _ => String::new(),
        }
    };
    for d in &c.deltas {
        if d.before.is_none() && d.after.is_none() {
            continue;
        }
        let p = d.decimals;
        let f = |v: Option<f64>| v.map_or("n/a".to_string(), |x| format!("{x:.p$}"));
        let name = match &d.stat {
            Some(s) => format!("{} {s}", d.metric),
            None => d.metric.clone(),
        };
        let row = format!(
            "  {name:<30} {:>10} {:>10} {:>10}  {:<6} {:>9}  {:<12} {}",
            f(d.before),
            f(d.after),
            d.delta.map_or("n/a".to_string(), |x| format!("{x:+.p$}")),
            d.unit,
            d.p_value.map_or(String::new(), |x| format!("{x:.1e}")),
            d.change.as_str(),
            verdicts(&d.metric),
        );
        let _ = writeln!(o, "{}", row.trim_end());
    }
    let _ = writeln!(
        o,
        "\n   p: two-sided Mann-Whitney U test of the per-element values; a change is real when p < {}.",
        c.alpha
    );
    o
}
