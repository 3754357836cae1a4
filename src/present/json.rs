//! JSON output: the report struct as one document (with its `verdicts`),
//! and the documents of many-file analysis and of a comparison.

use crate::analysis::report::Report;
use crate::batch::Batch;
use crate::compare::Comparison;

/// The report as pretty-printed JSON.
pub fn to_json(r: &Report) -> String {
    serde_json::to_string_pretty(r).expect("the report holds only plain data")
}

/// Many files: `{tool, version, files: [{path, result, error, report}]}`.
pub fn batch_json(b: &Batch) -> String {
    serde_json::to_string_pretty(b).expect("the batch holds only plain data")
}

/// A comparison: `{tool, version, alpha, before, after, deltas: {METRIC: {...}}}`.
pub fn compare_json(c: &Comparison) -> String {
    serde_json::to_string_pretty(c).expect("the comparison holds only plain data")
}
