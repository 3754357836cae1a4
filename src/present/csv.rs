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

/// The summary table of many files as CSV, one row per file: `file`,
/// `result` (pass, warn, fail or error), `error`, then every summary figure
/// of the metric table (statistics by their median, other objects by their
/// first member), then a `METRIC_verdict` column for each judged figure.
pub fn batch_csv(b: &crate::batch::Batch) -> String {
    use crate::judge::metrics::METRICS;
    use crate::judge::Status;
    let mut judged: Vec<String> = Vec::new();
    for r in b.files.iter().filter_map(|e| e.report.as_ref()) {
        for v in &r.verdicts {
            if !judged.contains(&v.metric) {
                judged.push(v.metric.clone());
            }
        }
    }
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut head: Vec<String> = vec!["file".into(), "result".into(), "error".into()];
    head.extend(METRICS.iter().map(|m| m.name.to_string()));
    head.extend(judged.iter().map(|m| format!("{m}_verdict")));
    w.write_record(&head).expect("in-memory write");
    for e in &b.files {
        let result = match e.result {
            Some(Status::Fail) => "fail",
            Some(Status::Warn) => "warn",
            Some(_) => "pass",
            None => "error",
        };
        let mut row: Vec<String> = vec![
            e.path.clone(),
            result.into(),
            e.error.clone().unwrap_or_default(),
        ];
        let json = e
            .report
            .as_ref()
            .map(|r| serde_json::to_value(&r.summary).expect("plain data"));
        for m in METRICS {
            let v = json.as_ref().and_then(|j| m.read(j, None));
            row.push(v.map_or(String::new(), |x| format!("{x:.6}")));
        }
        for name in &judged {
            let s = e
                .report
                .as_ref()
                .and_then(|r| r.verdicts.iter().find(|v| v.metric == *name))
                .map_or("", |v| v.status.as_str());
            row.push(s.to_string());
        }
        w.write_record(&row).expect("in-memory write");
    }
    String::from_utf8(w.into_inner().expect("in-memory write")).expect("CSV is UTF-8")
}
