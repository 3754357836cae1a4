//! The HTML report: one self-contained file with the summary, the warnings,
//! the verdicts, every picture (inline SVG) and the per-element table. No
//! scripts, no external fonts, styles or images, so it opens offline and
//! prints cleanly.

use std::fmt::Write as _;
use std::path::Path;

use serde_json::Value;

use crate::analysis::report::Report;

use super::plots::{fonts_available, render_svg, Mask, Picture};

/// At most this many rows in the element table; the JSON and CSV outputs
/// carry every element.
pub const MAX_TABLE_ROWS: usize = 1000;

/// Escapes text for HTML content and attribute values.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

/// A figure as the report prints it: fewer decimals for larger numbers.
pub fn fmt_num(x: f64) -> String {
    if !x.is_finite() {
        return "–".into();
    }
    let a = x.abs();
    if a >= 100.0 {
        format!("{x:.0}")
    } else if a >= 10.0 {
        format!("{x:.1}")
    } else if a >= 1.0 || a == 0.0 {
        format!("{x:.2}")
    } else {
        format!("{x:.3}")
    }
}

fn opt(x: Option<f64>) -> String {
    x.map(fmt_num).unwrap_or_else(|| "–".into())
}

/// Our labels for the summary fields (label, unit); fields not listed are
/// shown by name with the unit read from the name's ending.
const LABELS: &[(&str, &str, &str)] = &[
    ("keyed_signal_found", "Keyed signal found", ""),
    ("tone_hz", "Pitch", "Hz"),
    ("level_dbfs", "Key-down level", "dBFS"),
    ("snr_db", "Signal-to-noise ratio", "dB"),
    ("snr_bandwidth_hz", "  in a bandwidth of", "Hz"),
    ("wpm", "Speed (PARIS)", "WPM"),
    ("unit_ms", "PARIS unit", "ms"),
    ("dah_dit_ratio", "Dah / dit length", ""),
    ("mark_space_ratio", "Dit mark / following space", ""),
    ("rise_ms", "Rise time, 10 to 90 %", "ms"),
    ("fall_ms", "Fall time, 90 to 10 %", "ms"),
    ("rise_mean_edge_ms", "Rise time of the mean edge", "ms"),
    ("fall_mean_edge_ms", "Fall time of the mean edge", "ms"),
    ("chirp_hz", "Chirp (fitted trace)", "Hz"),
    ("chirp_raw_hz", "Chirp (raw trace, with noise)", "Hz"),
    ("chirp_mean_element_hz", "Chirp of the mean element", "Hz"),
    ("element_count", "Elements", ""),
    ("dit_count", "  dits", ""),
    ("dah_count", "  dahs", ""),
    ("rbw_hz", "Resolution bandwidth of the spectrum", "Hz"),
    (
        "occupied_bandwidth_hz",
        "Occupied bandwidth (99 % of the power)",
        "Hz",
    ),
    ("occupied_edges_hz", "  its edges, from the pitch", "Hz"),
    ("bandwidth_hz", "Bandwidth x dB below the carrier", "Hz"),
    ("bandwidth_edges_hz", "  its edges, from the pitch", "Hz"),
    ("noise_floor_dbc", "Noise floor of the spectrum", "dBc"),
    ("necessary_bandwidth_hz", "Necessary bandwidth (B·K)", "Hz"),
    (
        "occupied_to_necessary_ratio",
        "Occupied / necessary bandwidth",
        "",
    ),
    ("necessary_k", "  K (5 fading, 3 non-fading)", ""),
    ("passband_hz", "Receiver passband (estimated)", "Hz"),
    ("clicks", "Key clicks, by edge", ""),
    ("clicking_edge", "Edge that clicks", ""),
    (
        "rise_sideband_db",
        "Sideband power around rising edges",
        "dB",
    ),
    (
        "fall_sideband_db",
        "Sideband power around falling edges",
        "dB",
    ),
    ("noise_sideband_db", "Noise in the same band", "dB"),
    ("band_hz", "Sideband band, from the pitch", "Hz"),
    (
        "envelope_bandwidth_hz",
        "Width of the analysis band (-6 dB)",
        "Hz",
    ),
    ("rise_floor_ms", "Fastest edge the analysis can show", "ms"),
    ("baseband_rate_hz", "Rate of the measured baseband", "Hz"),
];

const UNIT_ENDINGS: &[(&str, &str)] = &[
    ("_dbfs", "dBFS"),
    ("_dbc", "dBc"),
    ("_db", "dB"),
    ("_hz", "Hz"),
    ("_ms", "ms"),
    ("_s", "s"),
    ("_percent", "%"),
    ("_ppm", "ppm"),
];

fn label_for(key: &str) -> (String, String) {
    if let Some((_, l, u)) = LABELS.iter().find(|(k, _, _)| *k == key) {
        return (l.to_string(), u.to_string());
    }
    let (stem, unit) = UNIT_ENDINGS
        .iter()
        .find(|(e, _)| key.ends_with(e))
        .map(|(e, u)| (&key[..key.len() - e.len()], u.to_string()))
        .unwrap_or((key, String::new()));
    let mut l = stem.replace('_', " ");
    if let Some(c) = l.get(..1) {
        l = c.to_uppercase() + &l[1..];
    }
    (l, unit)
}

/// A JSON value as plain text: spreads as median with their range, pairs
/// as "a to b", objects as "key: value" lists.
fn value_text(v: &Value, unit: &str) -> String {
    let u = if unit.is_empty() {
        String::new()
    } else {
        format!(" {unit}")
    };
    match v {
        Value::Null => "not measured".into(),
        Value::Bool(b) => if *b { "yes" } else { "no" }.into(),
        Value::Number(n) => match (n.as_u64(), n.as_i64(), n.as_f64()) {
            (Some(i), _, _) => format!("{i}{u}"),
            (_, Some(i), _) => format!("{i}{u}"),
            (_, _, Some(x)) => format!("{}{u}", fmt_num(x)),
            _ => n.to_string(),
        },
        Value::String(s) => s.clone(),
        Value::Array(a) => {
            if a.len() == 2 && a.iter().all(Value::is_number) {
                format!("{} to {}{u}", opt(a[0].as_f64()), opt(a[1].as_f64()))
            } else {
                a.iter()
                    .map(|x| value_text(x, ""))
                    .collect::<Vec<_>>()
                    .join(", ")
                    + &u
            }
        }
        Value::Object(m) => {
            let g = |k: &str| m.get(k).and_then(Value::as_f64);
            if let (Some(med), Some(p10), Some(p90)) = (g("median"), g("p10"), g("p90")) {
                let mut s = format!(
                    "{}{u} (10 % of elements below {}, 10 % above {}",
                    fmt_num(med),
                    fmt_num(p10),
                    fmt_num(p90)
                );
                if let (Some(lo), Some(hi)) = (g("min"), g("max")) {
                    let _ = write!(s, "; range {} to {}", fmt_num(lo), fmt_num(hi));
                }
                s.push(')');
                s
            } else {
                m.iter()
                    .map(|(k, x)| {
                        let (kl, ku) = label_for(k);
                        let un = if ku.is_empty() { unit } else { ku.as_str() };
                        let name = if k.chars().all(|c| c.is_ascii_digit()) {
                            format!("{k} dB")
                        } else {
                            kl
                        };
                        format!("{name}: {}", value_text(x, un))
                    })
                    .collect::<Vec<_>>()
                    .join("; ")
            }
        }
    }
}

const CSS: &str = r#"
:root { --ink:#282c36; --muted:#6b6e76; --paper:#fcfbf7; --rule:#dedcd4; --accent:#0072b2; --warn:#d55e00; --ok:#009e73; --tile:#f3f1ea; }
* { box-sizing: border-box; }
html { background: var(--paper); color: var(--ink); }
body { margin: 0 auto; max-width: 1060px; padding: 0 22px 40px; font: 15px/1.45 system-ui, -apple-system, "Segoe UI", "DejaVu Sans", sans-serif; }
header.mast { border-top: 6px solid var(--accent); padding: 18px 0 10px; margin-bottom: 8px; }
header.mast .tool { font-size: 12px; letter-spacing: .08em; text-transform: uppercase; color: var(--muted); }
header.mast h1 { margin: 2px 0 4px; font-size: 26px; font-weight: 650; }
header.mast .file { margin: 0; color: var(--muted); font-size: 14px; word-break: break-all; }
h2 { font-size: 18px; margin: 28px 0 10px; padding-bottom: 4px; border-bottom: 1px solid var(--rule); }
.tiles { display: grid; grid-template-columns: repeat(auto-fill, minmax(150px, 1fr)); gap: 10px; margin: 16px 0 4px; }
.tile { background: var(--tile); border-left: 4px solid var(--accent); padding: 8px 12px; }
.tile .k { font-size: 12px; color: var(--muted); }
.tile .v { font-size: 22px; font-weight: 600; font-variant-numeric: tabular-nums; }
.tile .v small { font-size: 13px; font-weight: 400; color: var(--muted); margin-left: 3px; }
ul.warnings { margin: 0; padding: 0; list-style: none; }
ul.warnings li { border-left: 4px solid var(--warn); background: #fbf1ea; padding: 6px 10px; margin: 0 0 6px; }
p.none { color: var(--muted); margin: 0; }
table { border-collapse: collapse; width: 100%; font-variant-numeric: tabular-nums; }
th, td { text-align: left; padding: 4px 8px; border-bottom: 1px solid var(--rule); vertical-align: top; }
th { font-weight: 600; font-size: 13px; color: var(--muted); }
table.figures td.k { width: 42%; }
table.figures td.sub { padding-left: 24px; color: var(--muted); }
table.elements td, table.elements th { text-align: right; font-size: 13px; padding: 2px 8px; }
table.elements td:nth-child(2), table.elements th:nth-child(2) { text-align: left; }
.scroll { max-height: 560px; overflow: auto; border: 1px solid var(--rule); }
.scroll thead th { position: sticky; top: 0; background: var(--paper); }
.status-pass { color: var(--ok); font-weight: 600; }
.status-warn { color: #a66f00; font-weight: 600; }
.status-fail { color: var(--warn); font-weight: 700; }
figure { margin: 0 0 26px; }
figure svg { display: block; width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: 13px; color: var(--muted); margin-top: 6px; }
footer { margin-top: 34px; padding-top: 10px; border-top: 1px solid var(--rule); font-size: 12px; color: var(--muted); }
@media print {
  html { background: #fff; }
  body { max-width: none; padding: 0; font-size: 10pt; }
  header.mast { border-top-width: 3px; }
  .scroll { max-height: none; overflow: visible; border: 0; }
  .scroll thead th { position: static; }
  figure, .tile, table.figures tr, ul.warnings li { break-inside: avoid; page-break-inside: avoid; }
  h2 { break-after: avoid; page-break-after: avoid; }
  .tile, ul.warnings li { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  a { color: inherit; text-decoration: none; }
}
"#;

fn caption(p: Picture) -> &'static str {
    match p {
        Picture::Spectrogram => {
            "Level against time and audio frequency, in dB relative to the key-down carrier. \
             The strip above marks every element from its 50 % rise to its 50 % fall; \
             key clicks show as vertical streaks at the element boundaries."
        }
        Picture::Spectrum => {
            "Power spectrum averaged over the keyed passage, in dB relative to the key-down \
             carrier, against the offset from the pitch. Where the report has them: the noise \
             of the key-up gaps, the points x dB down, the edges holding 99 % of the power, \
             the necessary bandwidth (shaded), and the mask given with --mask."
        }
        Picture::Edges => {
            "Every rising and every falling edge, scaled from 0 (key up) to 1 (key down) and \
             aligned at its 50 % instant; the bold line is the median of all of them. The dashed \
             lines at 10 % and 90 % bound the rise and fall times."
        }
        Picture::Chirp => {
            "Frequency of each element against the time since its 50 % rise, as the deviation \
             from that element's settled frequency; dits and dahs in two colours, median of \
             all elements bold. A clean transmitter stays on the zero line."
        }
        Picture::Envelope => {
            "Level of the tone over the whole recording, each point the peak of its stretch so \
             that short elements stay visible, with the median key-down level dashed."
        }
    }
}

/// Inline SVG: drop any XML prolog and the namespace declarations, which
/// HTML does not need (an inline `<svg>` is in the SVG namespace anyway), so
/// the page holds no URL at all.
fn inline_svg(svg: &str) -> String {
    let body = match svg.find("<svg") {
        Some(i) => &svg[i..],
        None => svg,
    };
    body.replace(" xmlns=\"http://www.w3.org/2000/svg\"", "")
        .replace(" xmlns:xlink=\"http://www.w3.org/1999/xlink\"", "")
        .replace("xlink:href=", "href=")
}

fn summary_row(h: &mut String, label: &str, value: &str, sub: bool) {
    let _ = writeln!(
        h,
        "<tr><td class=\"k{}\">{}</td><td>{}</td></tr>",
        if sub { " sub" } else { "" },
        esc(label.trim()),
        esc(value)
    );
}

/// The whole report as one self-contained HTML document.
pub fn render_html(report: &Report, mask: Option<&Mask>) -> String {
    let mut h = String::with_capacity(256 * 1024);
    let s = &report.summary;
    let inp = &report.input;
    let name = Path::new(&inp.path)
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| inp.path.clone());
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>Keying report: {}</title>\n<style>{CSS}</style>\n</head>\n<body>\n",
        esc(&name)
    );
    let _ = writeln!(
        h,
        "<header class=\"mast\"><div class=\"tool\">{} {} · keying report</div>\
         <h1>{}</h1><p class=\"file\">{} · {} Hz · {}-bit {} · {} s · channel {} of {} · peak {} dBFS</p></header>",
        esc(&report.tool),
        esc(&report.version),
        esc(&name),
        esc(&inp.path),
        inp.sample_rate_hz,
        inp.bits,
        esc(&inp.sample_format),
        fmt_num(inp.duration_s),
        inp.channel_used,
        inp.channels,
        fmt_num(inp.peak_dbfs),
    );

    // The figures most people look for first.
    let summary_json = serde_json::to_value(s).unwrap_or(Value::Null);
    let num = |k: &str| summary_json.get(k).and_then(Value::as_f64);
    let med = |k: &str| {
        summary_json
            .get(k)
            .and_then(|v| v.get("median"))
            .and_then(Value::as_f64)
    };
    let tiles: [(&str, Option<f64>, &str); 7] = [
        ("Speed", s.wpm, "WPM"),
        (
            "Rise time (median)",
            s.rise_ms.as_ref().map(|x| x.median),
            "ms",
        ),
        (
            "Fall time (median)",
            s.fall_ms.as_ref().map(|x| x.median),
            "ms",
        ),
        ("Chirp (median)", med("chirp_hz"), "Hz"),
        ("Occupied bandwidth", num("occupied_bandwidth_hz"), "Hz"),
        ("Signal-to-noise", s.snr_db, "dB"),
        ("Pitch", s.tone_hz, "Hz"),
    ];
    h.push_str("<section class=\"tiles\" aria-label=\"Main figures\">\n");
    for (k, v, u) in tiles {
        let _ = writeln!(
            h,
            "<div class=\"tile\"><div class=\"k\">{}</div><div class=\"v\">{}<small>{}</small></div></div>",
            esc(k),
            opt(v),
            if v.is_some() { u } else { "" }
        );
    }
    h.push_str("</section>\n");

    h.push_str("<section id=\"warnings\"><h2>Warnings</h2>\n");
    if report.warnings.is_empty() {
        h.push_str("<p class=\"none\">None: nothing limits the figures below.</p>\n");
    } else {
        h.push_str("<ul class=\"warnings\">\n");
        for w in &report.warnings {
            let _ = writeln!(h, "<li>{}</li>", esc(w));
        }
        h.push_str("</ul>\n");
    }
    h.push_str("</section>\n");

    if !report.verdicts.is_empty() {
        h.push_str(
            "<section id=\"verdicts\"><h2>Limits</h2>\n<table><thead><tr><th>Figure</th>\
             <th>Value</th><th>Limits</th><th>Verdict</th><th>From</th></tr></thead><tbody>\n",
        );
        for v in &report.verdicts {
            let status = serde_json::to_value(v.status)
                .ok()
                .and_then(|x| x.as_str().map(str::to_string))
                .unwrap_or_else(|| format!("{:?}", v.status).to_lowercase());
            let (label, _) = label_for(&v.metric);
            let fig = match &v.stat {
                Some(st) => format!("{label} ({st})"),
                None => label,
            };
            let lim = match (v.min, v.max) {
                (Some(a), Some(b)) => format!("{} to {}", fmt_num(a), fmt_num(b)),
                (Some(a), None) => format!("at least {}", fmt_num(a)),
                (None, Some(b)) => format!("at most {}", fmt_num(b)),
                (None, None) => "–".into(),
            };
            let class: String = status
                .chars()
                .filter(|c| c.is_ascii_alphanumeric())
                .collect();
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td>{} {}</td><td>{}</td><td class=\"status-{}\">{}</td><td>{}</td></tr>",
                esc(&fig),
                opt(v.value),
                esc(&v.unit),
                esc(&lim),
                esc(&class),
                esc(&status),
                esc(&v.source)
            );
        }
        h.push_str("</tbody></table></section>\n");
    }

    h.push_str("<section id=\"summary\"><h2>All figures</h2>\n<table class=\"figures\"><tbody>\n");
    if let Value::Object(m) = &summary_json {
        // Our order first, then any field we have no label for, by name.
        let mut keys: Vec<&str> = LABELS
            .iter()
            .map(|(k, _, _)| *k)
            .filter(|k| m.contains_key(*k))
            .collect();
        keys.extend(
            m.keys()
                .map(String::as_str)
                .filter(|k| !LABELS.iter().any(|(l, _, _)| l == k)),
        );
        for k in keys {
            let v = &m[k];
            let (label, unit) = label_for(k);
            // Groups of figures (not spreads, not x-dB maps): one row each.
            let group = v.as_object().filter(|g| {
                !g.contains_key("median")
                    && !g.keys().all(|x| x.chars().all(|c| c.is_ascii_digit()))
            });
            match group {
                Some(g) => {
                    summary_row(&mut h, &label, "", false);
                    for (sk, sv) in g {
                        let (sl, su) = label_for(sk);
                        summary_row(&mut h, &sl, &value_text(sv, &su), true);
                    }
                }
                None => summary_row(
                    &mut h,
                    &label,
                    &value_text(v, &unit),
                    label.starts_with("  "),
                ),
            }
        }
    }
    h.push_str("</tbody></table></section>\n");

    h.push_str("<section id=\"pictures\"><h2>Pictures</h2>\n");
    let text = fonts_available();
    for p in Picture::ALL {
        let _ = write!(h, "<figure id=\"{}\">", p.stem());
        match render_svg(p, report, mask, text) {
            Ok(svg) => {
                let svg = inline_svg(&svg);
                let _ = write!(
                    h,
                    "{}",
                    svg.replacen(
                        "<svg",
                        &format!("<svg role=\"img\" aria-label=\"{}\"", esc(p.title())),
                        1
                    )
                );
            }
            Err(e) => {
                let _ = write!(
                    h,
                    "<p class=\"none\">This picture could not be drawn ({}).</p>",
                    esc(&e)
                );
            }
        }
        let _ = writeln!(
            h,
            "<figcaption><strong>{}.</strong> {}</figcaption></figure>",
            esc(p.title()),
            esc(caption(p))
        );
    }
    if !text {
        h.push_str("<p class=\"none\">No font was found on this computer, so the pictures carry no text; the captions say what they show.</p>\n");
    }
    h.push_str("</section>\n");

    let n = report.elements.len();
    let _ = writeln!(h, "<section id=\"elements\"><h2>Elements ({n})</h2>");
    if n == 0 {
        h.push_str("<p class=\"none\">No elements were measured.</p>\n");
    } else {
        h.push_str(
            "<div class=\"scroll\"><table class=\"elements\"><thead><tr><th>#</th><th>Kind</th>\
             <th>Start (s)</th><th>Length (ms)</th><th>Rise (ms)</th><th>Fall (ms)</th>\
             <th>Chirp (Hz)</th><th>Level (dBFS)</th><th>Frequency (Hz)</th><th>Gap before (ms)</th>\
             </tr></thead><tbody>\n",
        );
        for e in report.elements.iter().take(MAX_TABLE_ROWS) {
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td>{}</td><td>{:.3}</td><td>{:.1}</td><td>{}</td><td>{}</td>\
                 <td>{}</td><td>{:.1}</td><td>{:.1}</td><td>{}</td></tr>",
                e.index,
                e.kind.as_str(),
                e.start_s,
                e.duration_s * 1000.0,
                opt(e.rise_ms),
                opt(e.fall_ms),
                fmt_num(e.chirp_hz),
                e.level_dbfs,
                e.frequency_hz,
                e.gap_before_s
                    .map(|g| format!("{:.1}", g * 1000.0))
                    .unwrap_or_else(|| "–".into()),
            );
        }
        h.push_str("</tbody></table></div>\n");
        if n > MAX_TABLE_ROWS {
            let _ = writeln!(
                h,
                "<p class=\"none\">The first {MAX_TABLE_ROWS} of {n} elements are listed; the JSON and CSV outputs hold them all.</p>"
            );
        }
    }
    h.push_str("</section>\n");

    h.push_str(
        "<footer>Measured from receiver audio. The figures include what the receiver and the \
         sound card do to the signal; the warnings above say where that matters. cwaudit \
         measures; it does not certify a transmitter. Transmit only where your licence \
         allows, into a dummy load when testing.</footer>\n</body>\n</html>\n",
    );
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup() {
        assert_eq!(
            esc("<a href=\"x\">&'"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }

    #[test]
    fn numbers_keep_sensible_decimals() {
        assert_eq!(fmt_num(700.04), "700");
        assert_eq!(fmt_num(20.04), "20.0");
        assert_eq!(fmt_num(5.034), "5.03");
        assert_eq!(fmt_num(0.4567), "0.457");
        assert_eq!(fmt_num(f64::NAN), "–");
    }

    #[test]
    fn unknown_fields_are_labelled_from_their_names() {
        assert_eq!(label_for("hum_am_percent"), ("Hum am".into(), "%".into()));
        assert_eq!(label_for("tone_hz"), ("Pitch".into(), "Hz".into()));
        let v: Value = serde_json::json!({"20": 180.0, "30": null});
        assert_eq!(value_text(&v, "Hz"), "20 dB: 180 Hz; 30 dB: not measured");
        let p: Value = serde_json::json!([-120.4, 131.0]);
        assert_eq!(value_text(&p, "Hz"), "-120 to 131 Hz");
    }
}
