//! CSV output: one row per element.

use crate::analysis::report::Report;

/// Column names of the per-element CSV, units in the names.
pub const COLUMNS: [&str; 11] = [
    "index",
    "start_s",
    "duration_s",
    "kind",
    "rise_ms",
    "fall_ms",
    "chirp_hz",
    "chirp_raw_hz",
    "level_dbfs",
    "frequency_hz",
    "gap_before_s",
];

/// The element table as CSV text.
pub fn elements_csv(r: &Report) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(COLUMNS).expect("in-memory write");
    let opt = |v: Option<f64>, p: usize| v.map_or(String::new(), |x| format!("{x:.p$}"));
    for e in &r.elements {
        w.write_record([
            e.index.to_string(),
            format!("{:.6}", e.start_s),
            format!("{:.6}", e.duration_s),
            e.kind.as_str().to_string(),
            opt(e.rise_ms, 4),
            opt(e.fall_ms, 4),
            format!("{:.3}", e.chirp_hz),
            format!("{:.3}", e.chirp_raw_hz),
            format!("{:.3}", e.level_dbfs),
            format!("{:.3}", e.frequency_hz),
            opt(e.gap_before_s, 6),
        ])
        .expect("in-memory write");
    }
    String::from_utf8(w.into_inner().expect("in-memory write")).expect("CSV is UTF-8")
}
