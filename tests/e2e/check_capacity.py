"""Capacity planning: the service's cost models predict what one core parses, checked against a
measured run on the same machine.

A replica with one parsing thread serves the Turkish model. It first sees calibration traffic
with a length mix unlike the corpus to plan for: sentences of the Turkish train split chosen so
that their lengths are spread evenly over 6 to 90 tokens (a length drawn uniformly, then a train
sentence of the nearest length that has one), each decoder its own sentences. `arcwright-load plan` then predicts, from the replica's
`/v1/scaling` cost models of the `total` stage, the sentences per second per core for the
lengths of the Turkish test split. The measured figure is the replica's own: the test split's
sentences are sent one at a time with each decoder, and its `arcwright_stage_duration_seconds`
histogram (stage `total`, differenced before and after) gives the parsing thread's seconds per
sentence. Prediction and measurement must agree within 20% for each decoder.

The calibration traffic leaves out 33-64 tokens, so the length bucket 64 is held out of the
fit: afterwards 150 train sentences of 33-64 tokens per decoder are parsed, and the bucket's
observed median must be within the model's stated error for unseen lengths
(`held_out_relative_error` of `/v1/scaling?tokens=N`: each fitted bucket left out in turn and
predicted from the others), or within the 20% tolerance of the capacity check if that is larger,
of what the model predicted for their median length before they were sent. The stated error
sees only the fit, not the machine's speed drifting between the two phases (about 10% here): it
once read 13.8% against an observed 14.5%.

Bounded: at most 1,600 calibration sentences per decoder or 90 s, 150 held-out sentences and
the 486 test sentences per decoder. Everything listens on 127.0.0.1.

Usage: check_capacity.py BINARY LOAD_BINARY MODEL_DIR SPLIT_DIR WORK_DIR
"""
import json
import os
import random
import re
import shutil
import subprocess
import sys
import time
import urllib.request

import conllu

import check_service as cs

TOLERANCE = 0.20


def total_stage(base, decoder):
    """(count, sum of seconds) of the total stage for one decoder, over all length buckets."""
    with urllib.request.urlopen(base + "/metrics", timeout=10) as r:
        text = r.read().decode()
    count = seconds = 0.0
    for line in text.splitlines():
        if not line.startswith("arcwright_stage_duration_seconds_"):
            continue
        match = re.match(r'arcwright_stage_duration_seconds_(count|sum)\{([^}]*)\} (\S+)', line)
        if not match or f'decoder="{decoder}"' not in match.group(2) or 'stage="total"' not in match.group(2):
            continue
        if match.group(1) == "count":
            count += float(match.group(3))
        else:
            seconds += float(match.group(3))
    return count, seconds


def parse(base, tokens, decoder):
    status, reply = cs.http(base, "/v1/parse", {"tokens": tokens, "decoder": decoder}, timeout=60)
    if status != 200:
        raise SystemExit(f"parse failed: {status} {reply}")


def main():
    binary, load_binary, model, split, work = sys.argv[1:6]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = cs.Checks(report_passes=True)
    store = os.path.join(work, "store")
    cs.promote(binary, store, "tr", cs.publish(binary, store, "tr", model))
    http_port, grpc_port = cs.free_port(), cs.free_port()
    server, base = cs.start(binary, store, work, http_port, grpc_port,
                            extra=("--threads", "1", "--probe-seconds", "0"))
    try:
        by_length = {}
        with open(os.path.join(split, "train.conllu"), encoding="utf-8") as f:
            for s in conllu.parse(f.read()):
                forms = [t["form"] for t in s if isinstance(t["id"], int)]
                by_length.setdefault(len(forms), []).append(forms)
        available = sorted(by_length)
        with open(os.path.join(split, "test.conllu"), encoding="utf-8") as f:
            test = [[t["form"] for t in s if isinstance(t["id"], int)] for s in conllu.parse(f.read())]
        rng = random.Random(20)
        started = time.time()
        calibration = 0
        while calibration < 1600 and time.time() - started < 90:
            # A sentence of its own for each decoder: the same sentence parsed twice in a row
            # finds its weights in cache the second time (measured: half the time).
            for decoder in ("projective", "non-projective"):
                wanted = rng.choice([rng.randint(6, 32), rng.randint(65, 90)])
                n = min((a for a in available if not 33 <= a <= 64), key=lambda length: (abs(length - wanted), length))
                parse(base, rng.choice(by_length[n]), decoder)
            calibration += 1
        print(f"calibration traffic: {calibration} train sentences of 6-32 and 65-90 tokens per decoder "
              f"in {time.time() - started:.0f} s")
        planned = subprocess.run([load_binary, "plan", "--http", base, "--conllu", os.path.join(split, "test.conllu")],
                                 capture_output=True, text=True)
        checks.expect(planned.returncode == 0, f"arcwright-load plan runs ({planned.stderr.strip()[:300]})")
        if planned.returncode != 0:
            sys.exit(1)
        predictions = {p["decoder"]: p for p in json.loads(planned.stdout)}
        with urllib.request.urlopen(base + "/v1/scaling", timeout=10) as r:
            for entry in json.loads(r.read())["cost_models"]:
                if entry["stage"] == "total":
                    m = entry["model"]
                    print(f"{entry['decoder']} cost model (total): a {m['a'] * 1e3:.4f} ms, l {m['l'] * 1e6:.3f} µs, "
                          f"b {m['b'] * 1e9:.3f} ns, c {m['c'] * 1e12:.4f} ps; per bucket (median tokens, observed "
                          f"ms, model ms): " + ", ".join(f"({b[0]:.0f}, {b[1] * 1e3:.3f}, {b[2] * 1e3:.3f})" for b in m["buckets"]))
        # The held-out bucket: predicted before any sentence of 33-64 tokens was parsed.
        held_out = [forms for n in available if 33 <= n <= 64 for forms in by_length[n]]
        rng.shuffle(held_out)
        held_out = held_out[:150]
        median_length = sorted(len(s) for s in held_out)[len(held_out) // 2]
        status, predicted_reply = cs.http(base, f"/v1/scaling?tokens={median_length}")
        expected = {p["decoder"]: p for p in predicted_reply["prediction"]["predictions"] if p["stage"] == "total"}
        for decoder in ("projective", "non-projective"):
            for tokens in held_out:
                parse(base, tokens, decoder)
        status, after_reply = cs.http(base, "/v1/scaling")
        for decoder in ("projective", "non-projective"):
            observed = next(b for b in after_reply["buckets"]
                            if b["stage"] == "total" and b["decoder"] == decoder and b["length_bucket"] == "64")
            stated = expected[decoder]["held_out_relative_error"]
            error = abs(expected[decoder]["seconds"] - observed["p50_seconds"]) / observed["p50_seconds"]
            checks.expect(observed["count"] == len(held_out) and error <= max(stated, TOLERANCE),
                          f"{decoder}: held-out bucket 64 ({observed['count']} sentences, median {median_length} "
                          f"tokens): predicted {expected[decoder]['seconds'] * 1e3:.3f} ms, observed median "
                          f"{observed['p50_seconds'] * 1e3:.3f} ms, error {error:.1%} within the stated "
                          f"{stated:.1%} or {TOLERANCE:.0%}")
        for decoder in ("projective", "non-projective"):
            before = total_stage(base, decoder)
            for tokens in test:
                parse(base, tokens, decoder)
            after = total_stage(base, decoder)
            sentences, seconds = after[0] - before[0], after[1] - before[1]
            measured = sentences / seconds
            predicted = predictions[decoder]["sentences_per_second_per_core"]
            ratio = predicted / measured
            checks.expect(sentences == len(test), f"{decoder}: {sentences:.0f} test sentences counted by the replica")
            checks.expect(abs(ratio - 1) <= TOLERANCE,
                          f"{decoder}: predicted {predicted:,.0f} sentences/s per core for the Turkish test "
                          f"split (mean {predictions[decoder]['mean_tokens']:.1f} tokens), measured "
                          f"{measured:,.0f}: ratio {ratio:.3f}, within {TOLERANCE:.0%}")
    finally:
        server.terminate()
        server.wait(timeout=30)
    print(f"{checks.passed} checks passed, {len(checks.failures)} failed")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
