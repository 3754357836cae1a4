// The body of the `wav_analyze` fuzz target, shared with tests/hostile.rs
// (which runs it in a bounded random-input loop through `include!`).
//
// The bytes become a file named .wav in a fresh temporary folder, and the
// whole analysis runs on it, as `cwaudit analyze` would: WAV parsing (hound
// and the crate's own RIFF walker), the survey, tone choice, the tracker and
// the report. Any outcome but a panic (or a hang, which libFuzzer's
// -timeout catches) is acceptable here; what the binary prints for each kind
// of input is checked in tests/hostile.rs.

/// Runs the analysis on `data` as a WAV file; returns whether it produced a report.
pub fn run(data: &[u8]) -> bool {
    let dir = tempfile::tempdir().expect("a temporary folder can be made");
    let path = dir.path().join("input.wav");
    std::fs::write(&path, data).expect("the temporary folder is writable");
    cwaudit::analysis::analyze_file(&path, &cwaudit::analysis::Options::default()).is_ok()
}
