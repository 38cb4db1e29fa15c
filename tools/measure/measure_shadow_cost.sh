#!/bin/bash
# What shadow parses cost the live path: alternating runs of `serve` with the demo model and a
# candidate (the same files published again), shadow sample 0 and SAMPLE (default 0.1), open-loop
# gRPC Parse of 25-word demo sentences at RATE (default 1200 requests/s: half the knee in
# docs/performance.md) for 10 s, three rounds. Prints the client's p50/p99, and the server's own
# request-duration and queue-wait p50/p99 (histograms differenced around the run) with the
# shadow sentences compared and shed. Run from the repository root after
# `cargo build --release --workspace`. Uses ports 18282 and 15252 on 127.0.0.1.
set -u
BIN=${BIN_DIR:-target/release}
WORK=${WORK:-/tmp/shadow-cost}
RATE=${RATE:-1200}
SAMPLE=${SAMPLE:-0.1}
export WORK
quantiles() {
python3 - "$1" <<'PY'
import os, re, sys
metric = sys.argv[1]
def load(path):
    counts = {}
    for line in open(path):
        m = re.match(metric + r"_bucket\{(.*)le=\"([^\"]+)\".*\} (\S+)", line)
        if m and ('method="parse"' in m.group(1) or "queue" in metric):
            counts[m.group(2)] = counts.get(m.group(2), 0) + float(m.group(3))
    return counts
a, b = load(os.environ["WORK"] + "/before"), load(os.environ["WORK"] + "/after")
edges = sorted((float(k), k) for k in b)
total = b.get("+Inf", 0) - a.get("+Inf", 0)
def quantile(q):
    low, below = 0.0, 0.0
    for edge, key in edges:
        count = b[key] - a.get(key, 0)
        if count >= q * total:
            return low if edge == float("inf") else low + (edge - low) * (q * total - below) / max(count - below, 1e-9)
        low, below = edge, count
    return float("nan")
name = metric.replace("arcwright_", "").replace("_seconds", "").replace("_", " ")
print(f"server {name} p50 {quantile(0.5) * 1e3:.3f} ms, p99 {quantile(0.99) * 1e3:.3f} ms")
PY
}
for round in 1 2 3; do
  for sample in 0 "$SAMPLE"; do
    rm -rf "$WORK" && mkdir -p "$WORK"
    # The demo model, then the same files published again as its candidate.
    timeout 60 "$BIN/arcwright" serve --demo --store "$WORK/store" --cache-dir "$WORK/cache" \
      --http 127.0.0.1:18282 --grpc 127.0.0.1:15252 --probe-seconds 0 > "$WORK/bootstrap" 2>&1 &
    boot=$!
    for _ in $(seq 100); do curl -sf 127.0.0.1:18282/readyz >/dev/null && break; sleep 0.2; done
    kill $boot; wait $boot 2>/dev/null
    live=$("$BIN/arcwright" store list --store "$WORK/store" --name demo --json | python3 -c '
import json, sys
d = json.load(sys.stdin)
print(next(v["manifest"]["version"] for v in d["versions"] if "live" in v["aliases"]))')
    "$BIN/arcwright" store fetch --store "$WORK/store" --name demo --version "$live" --cache "$WORK/fetched" > /dev/null
    candidate=$("$BIN/arcwright" store publish --store "$WORK/store" --name demo "$WORK/fetched/demo/$live")
    "$BIN/arcwright" store promote --store "$WORK/store" --name demo --version "$candidate" --alias candidate > /dev/null
    "$BIN/arcwright" serve --store "$WORK/store" --cache-dir "$WORK/cache" --http 127.0.0.1:18282 \
      --grpc 127.0.0.1:15252 --threads 2 --probe-seconds 0 --shadow-sample "$sample" > "$WORK/log" 2>&1 &
    pid=$!
    for _ in $(seq 50); do curl -sf 127.0.0.1:18282/readyz >/dev/null && break; sleep 0.2; done
    sleep 2
    curl -s 127.0.0.1:18282/metrics > "$WORK/before"
    client=$("$BIN/arcwright-load" run --http http://127.0.0.1:18282 --grpc 127.0.0.1:15252 \
      --api grpc-parse --words 25 --rate "$RATE" --seconds 10 2>/dev/null | python3 -c '
import json, sys
d = json.load(sys.stdin)
l = d["latency"]
print("client p50 %s ms, p99 %s ms, %d/%d ok" % (l["p50_ms"], l["p99_ms"], d["ok"], d["sent"]))')
    curl -s 127.0.0.1:18282/metrics > "$WORK/after"
    shadow=$(grep -E '^arcwright_shadow_sentences_total' "$WORK/after" | sed -E 's/.*outcome="([a-z]+)"\} (.*)/\1 \2/' | tr '\n' ' ')
    echo "round $round, shadow sample $sample: $client; $(quantiles arcwright_request_duration_seconds); $(quantiles arcwright_queue_wait_seconds); shadow: ${shadow:-none}"
    kill $pid
    wait $pid 2>/dev/null
  done
done
