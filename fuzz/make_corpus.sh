#!/usr/bin/env bash
# Writes the seed inputs of fuzz/corpus/wav_analyze (run from the crate root
# after `cargo build --release`). Findings of scripts/fuzz.sh are added to the
# same folder by hand, named after what they found; keep the folder < 200 kB.
set -euo pipefail
bin=target/release/cwaudit
out=fuzz/corpus/wav_analyze
mkdir -p "$out"
# Short keyed tones (40 WPM "E E", 8 kHz, 30 dB SNR) in every format cwaudit reads.
for f in u8 s16 s24 s32 f32 f64; do
    "$bin" synth "$out/seed_$f.wav" --text "E E" --rate 8000 --wpm 40 \
        --lead-in 0.05 --tail 0.05 --format "$f" --snr 30 --force >/dev/null
done
"$bin" synth "$out/seed_stereo.wav" --text "E" --rate 8000 --wpm 40 --lead-in 0.05 \
    --tail 0.05 --channels 2 --signal-channel 2 --snr 30 --force >/dev/null
"$bin" synth "$out/seed_repeat.wav" --text "EE" --rate 8000 --wpm 40 --lead-in 0.05 \
    --tail 0.05 --repeat 4 --force >/dev/null
rm -f "$out"/*.json
chmod 644 "$out"/*.wav
# Hand-made headers: odd but meaningful shapes of a WAV file.
python3 - "$out" <<'PY'
import math, struct, sys
out = sys.argv[1]
def fmt(tag, ch, rate, bits, extra=b""):
    align = ch * bits // 8
    return struct.pack("<HHIIHH", tag, ch, rate, rate * align, align, bits) + extra
def wav(fmtbody, data, riff=None, dsize=None, chunks=b""):
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmtbody)) + fmtbody + chunks
    body += b"data" + struct.pack("<I", len(data) if dsize is None else dsize) + data
    return b"RIFF" + struct.pack("<I", len(body) if riff is None else riff) + body
tone = b"".join(struct.pack("<h", int(8000 * math.sin(2 * math.pi * 700 * n / 8000)))
                for n in range(800))
files = {
    "header_only.wav": wav(fmt(1, 1, 8000, 16), b""),
    "one_sample.wav": wav(fmt(1, 1, 8000, 16), b"\x00\x40"),
    "short_fmt.wav": wav(fmt(1, 1, 8000, 16)[:14], tone[:64]),
    "data_size_huge.wav": wav(fmt(1, 1, 8000, 16), tone[:400], dsize=0xFFFFFFFF),
    "riff_size_zero.wav": wav(fmt(1, 1, 8000, 16), tone, riff=0),
    "extensible.wav": wav(fmt(0xFFFE, 1, 8000, 16, struct.pack("<HHI", 22, 16, 4)
                              + struct.pack("<IHH", 1, 0, 0x10) + bytes.fromhex("800000aa00389b71")), tone),
    "list_chunk_first.wav": wav(fmt(1, 1, 8000, 16), tone, chunks=b"LIST" + struct.pack("<I", 5) + b"INFOx\x00"),
    "float_nan.wav": wav(fmt(3, 1, 8000, 32), struct.pack("<4f", 0.1, float("nan"), 0.2, 0.3)),
    "float64_inf.wav": wav(fmt(3, 1, 8000, 64, b"\x00\x00"), struct.pack("<3d", 0.1, float("inf"), 0.2)),
    "six_channels.wav": wav(fmt(1, 6, 8000, 16), tone[:6 * 2 * 40]),
    "rate_zero.wav": wav(fmt(1, 1, 0, 16), tone[:64]),
    "not_riff.wav": b"RIFX" + b"\x00" * 40,
}
for name, b in files.items():
    open(f"{out}/{name}", "wb").write(b)
PY
du -sb "$out"
