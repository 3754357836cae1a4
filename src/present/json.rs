//! JSON output: the report struct as one document.

use crate::analysis::report::Report;

/// The report as pretty-printed JSON.
pub fn to_json(r: &Report) -> String {
    serde_json::to_string_pretty(r).expect("the report holds only plain data")
}
