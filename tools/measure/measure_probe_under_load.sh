#!/bin/bash
# The decoder probe under load: alternating runs of `serve` with the probe off and running every
# second, open-loop gRPC Parse of 25-word demo sentences at RATE (default 1000) requests/s for
# 10 s, three rounds; prints the client's p50/p99 and the server's queue-wait p50/p99 (its
# histogram differenced around the run). Run from the repository root after
# `cargo build --release --workspace`. Uses ports 18181 and 15151 on 127.0.0.1.
set -u
BIN=${BIN_DIR:-target/release}
WORK=${WORK:-/tmp/probe-under-load}
RATE=${RATE:-1000}
export WORK
for round in 1 2 3; do
  for probe in 0 1; do
    rm -rf "$WORK" && mkdir -p "$WORK"
    "$BIN/arcwright" serve --demo --store "$WORK/store" --cache-dir "$WORK/cache" \
      --http 127.0.0.1:18181 --grpc 127.0.0.1:15151 --threads 2 --probe-seconds $probe \
      > "$WORK/log" 2>&1 &
    pid=$!
    for _ in $(seq 50); do curl -sf 127.0.0.1:18181/readyz >/dev/null && break; sleep 0.2; done
    sleep 2
    curl -s 127.0.0.1:18181/metrics | grep -E '^arcwright_queue_wait_seconds_bucket' > "$WORK/before"
    client=$("$BIN/arcwright-load" run --http http://127.0.0.1:18181 --grpc 127.0.0.1:15151 \
      --api grpc-parse --words 25 --rate "$RATE" --seconds 10 2>/dev/null | python3 -c '
import json, sys
d = json.load(sys.stdin)
l = d["latency"]
print("client p50 %s ms, p99 %s ms, %d/%d ok" % (l["p50_ms"], l["p99_ms"], d["ok"], d["sent"]))')
    curl -s 127.0.0.1:18181/metrics | grep -E '^arcwright_queue_wait_seconds_bucket' > "$WORK/after"
    runs=$(curl -s 127.0.0.1:18181/metrics | grep -E '^arcwright_probe_runs_total\{decoder="projective",verdict="consistent"\}' | awk '{print $2}')
    server=$(python3 -c '
import os, re
def load(path):
    counts = {}
    for line in open(path):
        m = re.match(r"arcwright_queue_wait_seconds_bucket\{.*le=\"([^\"]+)\".*\} (\S+)", line)
        if m:
            counts[m.group(1)] = counts.get(m.group(1), 0) + float(m.group(2))
    return counts
a, b = load(os.environ["WORK"] + "/before"), load(os.environ["WORK"] + "/after")
edges = sorted((float(k), k) for k in b)
total = b["+Inf"] - a.get("+Inf", 0)
def quantile(q):
    low, below = 0.0, 0.0
    for edge, key in edges:
        count = b[key] - a.get(key, 0)
        if count >= q * total:
            return low if edge == float("inf") else low + (edge - low) * (q * total - below) / max(count - below, 1e-9)
        low, below = edge, count
print(f"server queue wait p50 {quantile(0.5) * 1e3:.3f} ms, p99 {quantile(0.99) * 1e3:.3f} ms over {total:.0f}")')
    echo "round $round, probe every ${probe}s (0 = off; ${runs:-0} runs): $client; $server"
    kill $pid
    wait $pid 2>/dev/null
  done
done
