"""Capacity planning: the service's cost models predict what one core parses, checked against a
measured run on the same machine.

A replica with one parsing thread serves the Turkish model. It first sees calibration traffic
with a length mix unlike the corpus to plan for: train sentences of 6-32 and 65-90 tokens (a
length drawn uniformly from one of the two ranges, then a train sentence of the nearest length
that has one), each decoder its own sentences, the decoders taking turns. `arcwright-load plan`
then predicts, from the replica's `/v1/scaling` cost models of the `cpu` stage (the parsing
thread's CPU seconds per sentence), the sentences per second per core for the lengths of the
Turkish test split. The measured figure is the replica's own: the test split's sentences are
sent one at a time with each decoder (taking turns, on different sentences), and its
`arcwright_parse_cpu_seconds_total` and `arcwright_sentences_total` counters (differenced
before and after) give the CPU seconds per sentence. Prediction and measurement must agree
within 20% for each decoder. CPU time rather than wall-clock time: this machine's host takes up
to a fifth of its cores at times (steal, measured from /proc/stat during a run), which moves
wall-clock figures between the phases by as much (ratios 0.75-1.34 measured that way); a core's
capacity is what a sentence costs it while it runs.

The calibration traffic leaves out 33-64 tokens, so the length bucket 64 is held out of the
fit: 150 train sentences of 33-64 tokens go, in the same rotation, to a third replica (so the
machine's speed cannot differ between fit and measurement), and that bucket's observed median
must be within the calibrated replica's stated error for unseen lengths
(`held_out_relative_error` of `/v1/scaling?tokens=N`) of what its model predicts for their
median length, for the `cpu` and the wall-clock `total` models alike. That stated error
compounds the model's interpolation error (each inner fitted bucket left out in turn and
predicted from the others) with the replica's measured speed drift over its window. Measured
on one replica, phase after phase, the bucket once came out 20-23% off against a stated 18-20%:
the machine had sped up between the phases.

Bounded: at most 2,400 calibration sentences per decoder or 90 s, 150 held-out sentences and
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
CALIBRATION = 2400
STAGES = ("cpu", "total")


def cpu_counters(base, decoder):
    """(sentences, CPU seconds) the replica has counted for one decoder."""
    with urllib.request.urlopen(base + "/metrics", timeout=10) as r:
        text = r.read().decode()
    values = {}
    for line in text.splitlines():
        match = re.match(r'(arcwright_sentences_total|arcwright_parse_cpu_seconds_total)\{decoder="([^"]*)"\} (\S+)', line)
        if match and match.group(2) == decoder:
            values[match.group(1)] = float(match.group(3))
    return values.get("arcwright_sentences_total", 0.0), values.get("arcwright_parse_cpu_seconds_total", 0.0)


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
    servers = []
    try:
        for _ in range(3):
            servers.append(cs.start(binary, store, work, cs.free_port(), cs.free_port(),
                                    extra=("--threads", "1", "--probe-seconds", "0")))
        calibrated, measured, held_out_replica = (base for _, base in servers)
        by_length = {}
        with open(os.path.join(split, "train.conllu"), encoding="utf-8") as f:
            for s in conllu.parse(f.read()):
                forms = [t["form"] for t in s if isinstance(t["id"], int)]
                by_length.setdefault(len(forms), []).append(forms)
        available = sorted(by_length)
        with open(os.path.join(split, "test.conllu"), encoding="utf-8") as f:
            test = [[t["form"] for t in s if isinstance(t["id"], int)] for s in conllu.parse(f.read())]
        rng = random.Random(20)

        def calibration_sentence():
            wanted = rng.choice([rng.randint(6, 32), rng.randint(65, 90)])
            n = min((a for a in available if not 33 <= a <= 64), key=lambda length: (abs(length - wanted), length))
            return rng.choice(by_length[n])

        # Requests alternate between the two replicas, so that both see the same machine at the
        # same moments; on the measured replica each decoder goes through the test split in
        # turn, the decoders on different sentences (the same sentence parsed twice in a row
        # finds its weights in cache the second time: measured, half the time).
        half = len(test) // 2
        # The held-out sentences (33-64 tokens, never sent to the calibrated replica) go to a
        # third replica in the same rotation, so that all three see the same machine.
        held_out = [forms for n in available if 33 <= n <= 64 for forms in by_length[n]]
        rng.shuffle(held_out)
        held_out = held_out[:150]
        sent = {"projective": [], "non-projective": []}
        started = time.time()
        calibration = 0
        while calibration < CALIBRATION and time.time() - started < 90:
            for decoder, offset in (("projective", 0), ("non-projective", half)):
                parse(calibrated, calibration_sentence(), decoder)
                tokens = test[(calibration + offset) % len(test)]
                parse(measured, tokens, decoder)
                sent[decoder].append(len(tokens))
                parse(held_out_replica, held_out[(calibration + offset // 3) % len(held_out)], decoder)
            calibration += 1
        print(f"calibration traffic: {calibration} train sentences of 6-32 and 65-90 tokens per decoder "
              f"in {time.time() - started:.0f} s, each followed by a test sentence on the measured replica")
        for decoder in ("projective", "non-projective"):
            lengths = os.path.join(work, f"{decoder}-lengths.txt")
            with open(lengths, "w") as f:
                f.write(" ".join(map(str, sent[decoder])) + "\n")
            planned = subprocess.run([load_binary, "plan", "--http", calibrated, "--lengths", lengths],
                                     capture_output=True, text=True)
            checks.expect(planned.returncode == 0, f"arcwright-load plan runs ({planned.stderr.strip()[:300]})")
            if planned.returncode != 0:
                sys.exit(1)
            prediction = next(p for p in json.loads(planned.stdout) if p["decoder"] == decoder)
            sentences, seconds = cpu_counters(measured, decoder)
            rate = sentences / seconds
            predicted = prediction["sentences_per_second_per_core"]
            ratio = predicted / rate
            checks.expect(prediction["stage"] == "cpu" and sentences == len(sent[decoder]),
                          f"{decoder}: planned from the CPU-time cost model; {sentences:.0f} test sentences counted "
                          f"by the measured replica")
            checks.expect(abs(ratio - 1) <= TOLERANCE,
                          f"{decoder}: predicted {predicted:,.0f} sentences/s per core for the Turkish test "
                          f"split ({len(sent[decoder])} sentences, mean {prediction['mean_tokens']:.1f} tokens), "
                          f"measured {rate:,.0f}: ratio {ratio:.3f}, within {TOLERANCE:.0%}")
        median_length = sorted(len(s) for s in held_out)[len(held_out) // 2]
        status, predicted_reply = cs.http(calibrated, f"/v1/scaling?tokens={median_length}")
        for entry in predicted_reply["cost_models"]:
            if entry["stage"] in STAGES:
                m = entry["model"]
                print(f"{entry['decoder']} cost model ({entry['stage']}): a {m['a'] * 1e3:.4f} ms, l {m['l'] * 1e6:.3f} µs, "
                      f"b {m['b'] * 1e9:.3f} ns, c {m['c'] * 1e12:.4f} ps; per bucket (median tokens, observed "
                      f"ms, model ms): " + ", ".join(f"({b[0]:.0f}, {b[1] * 1e3:.3f}, {b[2] * 1e3:.3f})" for b in m["buckets"]))
        checks.expect(all(b["length_bucket"] != "64" for b in predicted_reply["buckets"]),
                      "no sentence of the held-out bucket before the prediction")
        expected = {(p["stage"], p["decoder"]): p for p in predicted_reply["prediction"]["predictions"]}
        status, after_reply = cs.http(held_out_replica, "/v1/scaling")
        for stage in STAGES:
            for decoder in ("projective", "non-projective"):
                observed = next(b for b in after_reply["buckets"]
                                if b["stage"] == stage and b["decoder"] == decoder and b["length_bucket"] == "64")
                prediction = expected[(stage, decoder)]
                stated = prediction["held_out_relative_error"]
                error = abs(prediction["seconds"] - observed["p50_seconds"]) / observed["p50_seconds"]
                checks.expect(observed["count"] > 0 and error <= stated,
                              f"{decoder}, {stage}: held-out bucket 64 ({observed['count']} sentences, median "
                              f"{median_length} tokens): predicted {prediction['seconds'] * 1e3:.3f} ms, observed "
                              f"median {observed['p50_seconds'] * 1e3:.3f} ms, error {error:.1%} within the stated "
                              f"{stated:.1%} (interpolation {prediction['interpolation_relative_error']:.1%}, "
                              f"speed drift {prediction['speed_drift']:.1%})")
    finally:
        for server, _ in servers:
            server.terminate()
        for server, _ in servers:
            server.wait(timeout=30)
    print(f"{checks.passed} checks passed, {len(checks.failures)} failed")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
