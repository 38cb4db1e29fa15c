#!/usr/bin/env bash
# Instructions per decode (valgrind/callgrind: deterministic, unlike time on a shared machine)
# at 16, 32, 64, 128 and 256 words, and the least-squares slope of ln(instructions) on ln(words)
# over those sizes — the exponent a log-uniform 16–256 mix would show with no cache effects.
# Usage: tools/measure/measure_decode_instructions.sh [eisner reference-eisner chu-liu-edmonds]
set -euo pipefail
cd "$(dirname "$0")/../.."
command -v valgrind >/dev/null || { echo "needs valgrind (Debian package valgrind)" >&2; exit 2; }
decoders=("$@")
((${#decoders[@]})) || decoders=(eisner reference-eisner chu-liu-edmonds)
cargo build --profile profiling --quiet -p arcwright-parser --example decode_instructions
binary=target/profiling/examples/decode_instructions
count() {
    valgrind --tool=callgrind --callgrind-out-file=/dev/null "$binary" "$@" 2>&1 |
        sed -n 's/.*Collected : *\([0-9]*\).*/\1/p'
}
for decoder in "${decoders[@]}"; do
    line="$decoder"
    for words in 16 32 64 128 256; do
        low=$(count "$decoder" "$words" 2)
        high=$(count "$decoder" "$words" 6)
        line="$line $words:$(((high - low) / 4))"
    done
    python3 - "$line" <<'PY'
import math, sys
name, *pairs = sys.argv[1].split()
points = [(math.log(int(w)), math.log(int(c))) for w, c in (p.split(":") for p in pairs)]
mx = sum(x for x, _ in points) / len(points)
my = sum(y for _, y in points) / len(points)
slope = sum((x - mx) * (y - my) for x, y in points) / sum((x - mx) ** 2 for x, _ in points)
print(f"{name:>17}: " + ", ".join(f"n={p.split(':')[0]} {int(p.split(':')[1]):,}" for p in pairs)
      + f"; slope 16-256 {slope:.2f}")
PY
done
