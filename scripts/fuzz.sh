#!/usr/bin/env bash
# Runs the cargo-fuzz target `wav_analyze` (fuzz/fuzz_targets/wav_analyze.rs:
# arbitrary bytes as a WAV file through parsing and the whole analysis) for a
# bounded time, starting from the committed corpus.
#
# Needs the nightly toolchain and cargo-fuzz:
#     rustup toolchain install nightly && cargo install cargo-fuzz
# Without them, the same target body runs in a bounded random-input loop in
# `cargo test --test hostile random_inputs_never_panic`.
#
# Usage (from anywhere):  bash scripts/fuzz.sh [SECONDS]     (default 60)
#
# New inputs go to a scratch corpus (not the repository). A crash, timeout
# or memory blow-up is written by libFuzzer to fuzz/artifacts/wav_analyze/;
# the script then copies every such finding into fuzz/corpus/wav_analyze/
# as found-<kind>-<hash>.wav and exits non-zero. tests/hostile.rs replays
# that folder through the binary (`fuzz_corpus_replays_cleanly`), so a
# finding is a failing regression test until it is fixed: commit it with
# the fix (rename it to say what it found if you like).
set -euo pipefail
secs="${1:-60}"
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$root/fuzz"
command -v cargo-fuzz >/dev/null || { echo "fuzz.sh: needs cargo-fuzz (cargo install cargo-fuzz)" >&2; exit 2; }
rustup run nightly true 2>/dev/null || { echo "fuzz.sh: needs the nightly toolchain" >&2; exit 2; }
scratch="$(mktemp -d "${TMPDIR:-/tmp}/cwaudit-fuzz.XXXXXX")"
trap 'rm -rf "$scratch"' EXIT
cp corpus/wav_analyze/* "$scratch/"
# -timeout: one input may take at most 20 s (a hang is a finding);
# -rss_limit_mb: memory that grows with a header's claims is a finding;
# -max_len: 64 kB keeps inputs small enough to analyse quickly.
artifacts="$root/fuzz/artifacts/wav_analyze"
mkdir -p "$artifacts"
status=0
cargo +nightly fuzz run wav_analyze "$scratch" -- \
    -max_total_time="$secs" -timeout=20 -rss_limit_mb=1024 -max_len=65536 \
    -print_final_stats=1 || status=$?
kept=0
for f in "$artifacts"/*; do
    [[ -f "$f" ]] || continue
    base="$(basename "$f")"            # e.g. crash-<sha1>, timeout-<sha1>, oom-<sha1>
    dest="$root/fuzz/corpus/wav_analyze/found-${base}.wav"
    if [[ ! -e "$dest" ]]; then
        cp "$f" "$dest"
        kept=$((kept + 1))
        echo "fuzz.sh: kept finding $base as ${dest#"$root"/}" >&2
    fi
done
if ((status != 0 || kept > 0)); then
    echo "fuzz.sh: findings kept in fuzz/corpus/wav_analyze/ (run: cargo test --test hostile fuzz_corpus)" >&2
    exit 1
fi
echo "fuzz.sh: $secs s without a finding; scratch corpus had $(ls "$scratch" | wc -l) inputs" >&2
