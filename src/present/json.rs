//! JSON output: the report struct as one document (with its `verdicts`),
//! and the documents of many-file analysis and of a comparison.

use crate::analysis::report::Report;
use crate::batch::Batch;
use crate::compare::Comparison;

/// The report as pretty-printed JSON.
pub fn to_json(r: &Report) -> String {
    serde_json::to_string_pretty(r).expect("the report holds only plain data")
}

/// Writes the report as pretty-printed JSON and a newline to standard
/// output, streamed rather than built as one string first: an hour's report
/// runs to megabytes. A closed pipe ends the output quietly.
pub fn print_json(r: &Report) {
    use std::io::Write;
    let mut out = std::io::BufWriter::new(std::io::stdout().lock());
    let _ = serde_json::to_writer_pretty(&mut out, r)
        .map_err(std::io::Error::from)
        .and_then(|_| out.write_all(b"\n"))
        .and_then(|_| out.flush());
}

/// Many files: `{tool, version, files: [{path, result, error, report}]}`.
pub fn batch_json(b: &Batch) -> String {
    serde_json::to_string_pretty(b).expect("the batch holds only plain data")
}

/// A comparison: `{tool, version, alpha, before, after, deltas: {METRIC: {...}}}`.
pub fn compare_json(c: &Comparison) -> String {
    serde_json::to_string_pretty(c).expect("the comparison holds only plain data")
}
