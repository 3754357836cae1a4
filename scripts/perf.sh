#!/usr/bin/env bash
# Whole-program speed and memory of `cwaudit analyze`, against two general
# references, on synthesized 48 kHz mono recordings (16-bit, 30 dB SNR,
# 20 WPM "PARIS" text):
#   (a) cwaudit analyze FILE --json
#   (b) scripts/reference_numpy.py FILE   (numpy/scipy, the same
#       measurements as the report: timing, edges, chirp, level, SNR,
#       spreads, drift, backwave, hum, spectra, key clicks)
#   (b') scripts/reference_numpy.py --core FILE   (its steps 1-8 only:
#       timing, edges, chirp, level, SNR; shown as a second, harder ratio)
#   (c) sox FILE -n stat                  (one plain pass over the samples)
# Timings are wall-clock, pinned to one core (taskset -c 0), alternating
# a, b, b', c in each round, REPS rounds, median reported. Peak resident memory
# of cwaudit comes from /usr/bin/time -v ("Maximum resident set size").
# If `cwaudit analyze` accepts several files, multi-file scaling is timed
# too (four files, all cores, against one file).
#
# Needs: a Rust toolchain, sox, taskset, GNU time (/usr/bin/time), and a
# Python with numpy and scipy. Set one up once, from the crate root:
#
#     python3 -m venv .venv && .venv/bin/pip install numpy scipy
#
# Run from anywhere:
#
#     bash scripts/perf.sh
#
# Environment:
#   PYTHON      python with numpy/scipy (default: .venv/bin/python, else
#               /tmp/venv/bin/python, else python3)
#   REPS        rounds per length (default 5)
#   REPS_LONG   rounds for lengths over 10 minutes (default: REPS)
#   MINUTES     lengths to measure, minutes (default "10 60")
#   CWAUDIT_DIR crate to build and measure (default: this script's crate)
#   CWAUDIT_BIN measure this binary instead of building one
#   KEEP_DIR    folder for the recordings (default: a new temporary folder,
#               removed at the end); recordings already there are reused
# The Markdown table goes to stdout; progress goes to stderr.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
crate="${CWAUDIT_DIR:-$(cd "$here/.." && pwd)}"
reps="${REPS:-5}"
minutes="${MINUTES:-10 60}"
if [[ -n "${PYTHON:-}" ]]; then
    py="$PYTHON"
elif [[ -x "$crate/.venv/bin/python" ]]; then
    py="$crate/.venv/bin/python"
elif [[ -x /tmp/venv/bin/python ]]; then
    py=/tmp/venv/bin/python
else
    py=python3
fi
ref="$here/reference_numpy.py"

for tool in sox taskset /usr/bin/time cargo; do
    command -v "$tool" >/dev/null || { echo "perf.sh: needs $tool" >&2; exit 2; }
done
"$py" -c 'import numpy, scipy' 2>/dev/null || {
    echo "perf.sh: $py has no numpy/scipy; see the header for setup" >&2
    exit 2
}

if [[ -n "${KEEP_DIR:-}" ]]; then
    work="$KEEP_DIR"
    mkdir -p "$work"
else
    work="$(mktemp -d "${TMPDIR:-/tmp}/cwaudit-perf.XXXXXX")"
    trap 'rm -rf "$work"' EXIT
fi

if [[ -n "${CWAUDIT_BIN:-}" ]]; then
    bin="$CWAUDIT_BIN"
else
    echo "building the release binary in $crate" >&2
    (cd "$crate" && cargo build --release --quiet)
    bin="$crate/target/release/cwaudit"
fi

# One repeat of ten "PARIS " words at 20 WPM is exactly 30 s.
text="PARIS PARIS PARIS PARIS PARIS PARIS PARIS PARIS PARIS PARIS"
file_for() { echo "$work/keyed_${1}min.wav"; }
for m in $minutes; do
    f="$(file_for "$m")"
    if [[ ! -s "$f" ]]; then
        echo "synthesizing $m minutes into $f" >&2
        "$bin" synth "$f" --text "$text" --repeat $((m * 2)) --snr 30 --force >&2
    fi
done

# Runs one command (output discarded); appends its wall time in seconds to
# file $1 and its peak resident memory in MiB to file $2.
measure() {
    local tfile="$1" rfile="$2" t0 t1
    shift 2
    t0=$EPOCHREALTIME
    local rc=0
    /usr/bin/time -f "%M" -o "$work/rss.tmp" "$@" >/dev/null 2>&1 || rc=$?
    # cwaudit exits 1 when a figure fails a limit: still a full analysis.
    if ((rc > 1)); then echo "perf.sh: failed ($rc): $*" >&2; exit 1; fi
    t1=$EPOCHREALTIME
    echo "$t0 $t1" | awk '{printf "%.3f\n", $2 - $1}' >>"$tfile"
    awk '{printf "%.1f\n", $1 / 1024}' "$work/rss.tmp" >>"$rfile"
}
median() { sort -g | awk '{a[NR]=$1} END {print (NR%2 ? a[(NR+1)/2] : (a[NR/2]+a[NR/2+1])/2)}'; }
maxof() { sort -g | tail -1; }

declare -A med_cw med_np med_nc med_sx rss_cw rss_np nrep
for m in $minutes; do
    f="$(file_for "$m")"
    n="$reps"
    if ((m > 10)); then n="${REPS_LONG:-$reps}"; fi
    nrep[$m]=$n
    for k in cw np nc sx; do : >"$work/$k.$m"; : >"$work/$k.rss.$m"; done
    for r in $(seq 1 "$n"); do
        echo "$m min, round $r of $n" >&2
        measure "$work/cw.$m" "$work/cw.rss.$m" taskset -c 0 "$bin" analyze "$f" --json
        measure "$work/np.$m" "$work/np.rss.$m" taskset -c 0 "$py" "$ref" "$f"
        measure "$work/nc.$m" "$work/nc.rss.$m" taskset -c 0 "$py" "$ref" --core "$f"
        measure "$work/sx.$m" "$work/sx.rss.$m" taskset -c 0 sox "$f" -n stat
    done
    med_cw[$m]=$(median <"$work/cw.$m")
    med_np[$m]=$(median <"$work/np.$m")
    med_nc[$m]=$(median <"$work/nc.$m")
    med_sx[$m]=$(median <"$work/sx.$m")
    rss_cw[$m]=$(maxof <"$work/cw.rss.$m")
    rss_np[$m]=$(maxof <"$work/np.rss.$m")
done

# What both programs measured on the first length, side by side.
m1="${minutes%% *}"
f1="$(file_for "$m1")"
"$bin" analyze "$f1" --json >"$work/cw.json" || true
"$py" "$ref" "$f1" >"$work/np.json"

echo
echo "Recordings: 48 kHz mono 16-bit, 20 WPM, 30 dB SNR; one core (taskset -c 0); median of alternating rounds ($(for m in $minutes; do printf '%s min: %s; ' "$m" "${nrep[$m]}"; done)rounds); peak RSS: largest over the rounds (GNU time); $(nproc) cores, $(uname -m)."
echo
echo "| length | cwaudit s | numpy s | numpy --core s | sox s | numpy/cwaudit | numpy --core/cwaudit | cwaudit/sox | cwaudit peak RSS MiB | numpy peak RSS MiB |"
echo "|---|---|---|---|---|---|---|---|---|---|"
for m in $minutes; do
    awk -v m="$m" -v c="${med_cw[$m]}" -v n="${med_np[$m]}" -v nc="${med_nc[$m]}" -v s="${med_sx[$m]}" \
        -v r="${rss_cw[$m]}" -v rn="${rss_np[$m]}" \
        'BEGIN {printf "| %d min | %.2f | %.2f | %.2f | %.2f | %.1f | %.1f | %.2f | %.1f | %.0f |\n", m, c, n, nc, s, n / c, nc / c, c / s, r, rn}'
done

echo
echo "Measured values on the $m1-minute file (truth: 20 WPM, 5 ms raised-cosine edges, no chirp, -12 dBFS, 30 dB SNR):"
echo
"$py" - "$work/cw.json" "$work/np.json" <<'EOF'
import json, sys
c = json.load(open(sys.argv[1]))["summary"]
n = json.load(open(sys.argv[2]))
med = lambda s: s["median"] if s else None
rows = [
    ("elements", c["element_count"], n["element_count"]),
    ("tone Hz", c["tone_hz"], n["tone_hz"]),
    ("WPM", c["wpm"], n["wpm"]),
    ("rise ms (median)", med(c["rise_ms"]), n["rise_ms_median"]),
    ("fall ms (median)", med(c["fall_ms"]), n["fall_ms_median"]),
    ("chirp Hz (median; numpy: raw max of the 2 ms trace)", med(c["chirp_hz"]), n["chirp_hz_median"]),
    ("level dBFS", c["level_dbfs"], n["level_dbfs"]),
    ("SNR dB in 2.5 kHz", c["snr_db"], n["snr_db"]),
    ("dah/dit ratio", c["dah_dit_ratio"], n.get("dah_dit_ratio")),
    ("mark/space ratio", c["mark_space_ratio"], n.get("mark_space_ratio")),
    ("drift Hz/min", c["drift_hz_per_min"], n.get("drift_hz_per_min")),
    ("backwave floor dB", c["backwave_floor_db"], n.get("backwave_floor_db")),
    ("hum AM floor %", (c["hum"] or {}).get("am_floor_percent"), (n.get("hum") or {}).get("am_floor_percent")),
    ("hum FM floor Hz", (c["hum"] or {}).get("fm_floor_hz"), (n.get("hum") or {}).get("fm_floor_hz")),
    ("occupied bandwidth Hz", c["occupied_bandwidth_hz"], n.get("occupied_bandwidth_hz")),
    ("20 dB bandwidth Hz", (c["bandwidth_hz"] or {}).get("20"), (n.get("bandwidth_hz") or {}).get("20")),
    ("30 dB bandwidth Hz", (c["bandwidth_hz"] or {}).get("30"), (n.get("bandwidth_hz") or {}).get("30")),
    ("spectrum noise floor dBc", c["noise_floor_dbc"], n.get("noise_floor_dbc")),
    ("key-up sideband power dB", (c["clicks"] or {}).get("noise_sideband_db"), (n.get("clicks") or {}).get("noise_sideband_db")),
]
f = lambda v: "-" if v is None else (str(v) if isinstance(v, int) else f"{v:.3f}")
print("| quantity | cwaudit | numpy |")
print("|---|---|---|")
for name, a, b in rows:
    print(f"| {name} | {f(a)} | {f(b)} |")
EOF

echo
if "$bin" analyze --help | grep -Eq '<FILE(S)?>\.\.\.|\[FILE'; then
    f="$(file_for "$m1")"
    for k in 1 2 3 4; do ln -sf "$f" "$work/copy$k.wav"; done
    : >"$work/one" ; : >"$work/four"
    for r in $(seq 1 "$reps"); do
        measure "$work/one" "$work/one.rss" "$bin" analyze "$work/copy1.wav" --json
        measure "$work/four" "$work/four.rss" "$bin" analyze "$work/copy1.wav" "$work/copy2.wav" "$work/copy3.wav" "$work/copy4.wav" --json
    done
    one=$(median <"$work/one")
    four=$(median <"$work/four")
    echo "Multi-file scaling ($(nproc) cores, not pinned): one $m1-minute file $one s; four such files in one call $four s; speed-up over four single runs $(awk -v a="$one" -v b="$four" 'BEGIN {printf "%.2f", 4 * a / b}')x (ideal: $(nproc))."
else
    echo "Multi-file scaling: skipped; \`cwaudit analyze\` takes one file in this build."
fi
