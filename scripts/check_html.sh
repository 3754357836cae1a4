#!/usr/bin/env bash
# Loads an HTML report in headless Chromium (Debian's chromium package),
# takes a screenshot and fails when the page logs a console error, when the
# document did not parse to its end, or when the screenshot is missing.
#
#   scripts/check_html.sh REPORT.html [SCREENSHOT.png]
#
# The screenshot goes to SCREENSHOT.png (default: REPORT.png beside the
# report). Exit 0: clean; 1: the page has a problem; 2: usage or no chromium.
set -euo pipefail

if [ $# -lt 1 ] || [ $# -gt 2 ]; then
    echo "usage: scripts/check_html.sh REPORT.html [SCREENSHOT.png]" >&2
    exit 2
fi
report=$(readlink -f "$1")
if [ ! -f "$report" ]; then
    echo "check_html: $1 does not exist." >&2
    exit 2
fi
shot=${2:-"${report%.*}.png"}
shot=$(readlink -f "$(dirname "$shot")")/$(basename "$shot")
browser=$(command -v chromium || command -v chromium-browser || true)
if [ -z "$browser" ]; then
    echo "check_html: chromium is not installed (apt-get install chromium)." >&2
    exit 2
fi

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# Everything that could reach the network is off; the report needs none.
flags=(--headless --no-sandbox --disable-gpu --disable-quic --no-first-run
       --disable-background-networking --disable-component-update --disable-sync
       --disable-default-apps --disable-extensions --mute-audio
       --hide-scrollbars --window-size=1200,3000)

rm -f "$shot"
timeout 120 "$browser" "${flags[@]}" --user-data-dir="$work/profile1" \
    --enable-logging=stderr --v=0 --screenshot="$shot" "file://$report" \
    >"$work/shot.out" 2>"$work/shot.err" || {
    echo "check_html: chromium failed while taking the screenshot:" >&2
    tail -n 20 "$work/shot.err" >&2
    exit 1
}
timeout 120 "$browser" "${flags[@]}" --user-data-dir="$work/profile2" \
    --enable-logging=stderr --v=0 --dump-dom "file://$report" \
    >"$work/dom.html" 2>"$work/dom.err" || {
    echo "check_html: chromium failed while loading the page:" >&2
    tail -n 20 "$work/dom.err" >&2
    exit 1
}

status=0
# No script runs in the report, so any console line at all is a problem.
grep -h -E 'CONSOLE|Uncaught|Failed to load resource' "$work/shot.err" "$work/dom.err" \
    >"$work/console.txt" || true
if [ -s "$work/console.txt" ]; then
    echo "check_html: the page logged console messages:" >&2
    cat "$work/console.txt" >&2
    status=1
fi
if ! grep -q 'id="elements"' "$work/dom.html" || ! grep -q '</footer>' "$work/dom.html"; then
    echo "check_html: the document did not load to its end (no elements section or footer in the DOM)." >&2
    status=1
fi
svgs=$(grep -o '<svg' "$work/dom.html" | wc -l)
if [ "$svgs" -lt 1 ]; then
    echo "check_html: the page has no pictures." >&2
    status=1
fi
if [ ! -s "$shot" ]; then
    echo "check_html: no screenshot was written to $shot." >&2
    status=1
fi
if [ "$status" -eq 0 ]; then
    echo "check_html: $report loads cleanly ($svgs pictures); screenshot $shot ($(stat -c %s "$shot") bytes)."
fi
exit "$status"
