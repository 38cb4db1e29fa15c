"""The neural kind end to end, on demo data (invented scenario; this checks plumbing, not accuracy):

- `arcwright train --kind neural` on a small demo corpus finishes within a time bound and writes
  a model that `eval` and `parse` read, with every confidence in [0, 1] and present;
- the service serves it and the linear kind side by side under one name: versions of both kinds
  are published, `live` moves linear → neural → linear while clients send requests the whole
  time (HTTP and gRPC), with zero failed requests; every reply names a version that was live, and
  the model listing (HTTP and gRPC ListModels) shows each version's kind and the kind served;
- the trees the service returns for the neural version equal `arcwright parse` with that model.

Usage: check_neural.py BINARY WORK_DIR
"""

import json
import os
import shutil
import subprocess
import sys
import threading
import time

import grpc

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_service import Checks, free_port, generate_stubs, http, promote, publish, start  # noqa: E402

TRAIN_SECONDS_BOUND = 120


def run(binary, *args, stdin=None):
    out = subprocess.run([binary, *args], capture_output=True, text=True, input=stdin)
    if out.returncode != 0:
        raise SystemExit(f"arcwright {' '.join(args)} failed: {out.stderr[-2000:]}")
    return out


def main():
    binary, work = sys.argv[1:3]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = Checks(report_passes=True)
    corpus = {}
    for part, seed, count in (("train", 11, 400), ("dev", 12, 60), ("test", 13, 60)):
        path = os.path.join(work, f"{part}.conllu")
        with open(path, "w") as f:
            f.write(run(binary, "demo-data", "--sentences", str(count), "--seed", str(seed)).stdout)
        corpus[part] = path

    # --- Training both kinds.
    started = time.monotonic()
    trained = run(binary, "train", "--kind", "neural", "--train", corpus["train"], "--dev", corpus["dev"],
                  "--out", f"{work}/neural", "--epochs", "6", "--hidden", "48", "--layers", "1", "--threads", "2")
    seconds = time.monotonic() - started
    epoch_lines = [l for l in trained.stderr.splitlines() if l.startswith("epoch")]
    checks.expect(seconds <= TRAIN_SECONDS_BOUND,
                  f"neural demo training took {seconds:.1f} s (bound {TRAIN_SECONDS_BOUND} s), {len(epoch_lines)} epoch lines")
    checks.expect(all("train loss" in l and "dev UAS" in l for l in epoch_lines) and epoch_lines,
                  "one progress line per epoch with the training loss and dev scores")
    run(binary, "train", "--train", corpus["train"], "--dev", corpus["dev"], "--out", f"{work}/linear",
        "--epochs", "4", "--threads", "2")
    description = json.load(open(f"{work}/neural/model.json"))
    checks.expect(description.get("kind") == "neural" and "config" in description.get("neural", {}),
                  "model.json records the kind and the network's configuration")

    # --- eval and parse read the neural model; confidences are probabilities, every word has one.
    report = json.loads(run(binary, "eval", "--model", f"{work}/neural", "--gold", corpus["test"],
                            "--arc-confidences", f"{work}/arcs.tsv").stdout)
    checks.expect(report["tokens"] > 0 and 0 <= report["uas"] <= 100,
                  f"eval of the neural demo model: UAS {report['uas']:.2f} LAS {report['las']:.2f}")
    rows = [l.split("\t") for l in open(f"{work}/arcs.tsv").read().splitlines()[1:] if l]
    confidences = [float(r[0]) for r in rows]
    checks.expect(rows and all(0.0 <= c <= 1.0 for c in confidences),
                  f"{len(rows)} per-arc confidences, all in [0, 1]")
    checks.expect(report["calibration"]["arcs_without_confidence"] == 0,
                  "every word got a confidence")
    sentences = [["The", "pilot", "boat", "left", "the", "harbour", "."],
                 ["Crews", "unload", "cargo", "at", "dawn", "."]]
    cli = run(binary, "parse", "--model", f"{work}/neural", "--input", "tokens",
              stdin="".join(" ".join(s) + "\n" for s in sentences)).stdout
    cli_trees, current = [], []
    for line in cli.splitlines():
        if not line:
            if current:
                cli_trees.append(current)
            current = []
        elif not line.startswith("#"):
            fields = line.split("\t")
            current.append((int(fields[6]), fields[7]))
    if current:
        cli_trees.append(current)

    # --- Both kinds under one name, swapped under traffic.
    generate_stubs(os.path.join(work, "stubs"))
    from arcwright.v1 import parser_pb2 as pb, parser_pb2_grpc as rpc
    store = os.path.join(work, "store")
    linear_version = publish(binary, store, "harbour", f"{work}/linear")
    neural_version = publish(binary, store, "harbour", f"{work}/neural")
    promote(binary, store, "harbour", linear_version)
    http_port, grpc_port = free_port(), free_port()
    proc, base = start(binary, store, work, http_port, grpc_port)
    channel = grpc.insecure_channel(f"127.0.0.1:{grpc_port}")
    stub = rpc.ParserStub(channel)
    admin = rpc.ModelAdminStub(channel)
    try:
        def kinds():
            status, body = http(base, "/v1/models")
            model = next(m for m in body["models"] if m["name"] == "harbour")
            return ({v["version"]: v["kind"] for v in model["versions"]},
                    (model.get("serving") or {}).get("kind"))

        listed, serving_kind = kinds()
        checks.expect(listed == {linear_version: "linear", neural_version: "neural"} and serving_kind == "linear",
                      f"GET /v1/models lists each version's kind: {listed}, serving {serving_kind}")
        reply = admin.ListModels(pb.ListModelsRequest())
        grpc_kinds = {v.version: v.kind for m in reply.models if m.name == "harbour" for v in m.versions}
        checks.expect(grpc_kinds == listed, f"gRPC ListModels lists the same kinds: {grpc_kinds}")

        stop = threading.Event()
        outcomes = {"ok": 0, "failed": [], "versions": set()}
        lock = threading.Lock()

        def load_http():
            while not stop.is_set():
                status, body = http(base, "/v1/parse", {"model": "harbour", "tokens": sentences[0], "confidence": True})
                with lock:
                    if status == 200:
                        outcomes["ok"] += 1
                        outcomes["versions"].add(body["model"]["version"])
                    else:
                        outcomes["failed"].append(f"http {status}: {body}")

        def load_grpc():
            while not stop.is_set():
                try:
                    r = stub.Parse(pb.ParseRequest(model="harbour", input=pb.SentenceInput(
                        tokens=pb.TokenList(tokens=sentences[1]))), timeout=10)
                    with lock:
                        outcomes["ok"] += 1
                        outcomes["versions"].add(r.model.version)
                except grpc.RpcError as e:
                    with lock:
                        outcomes["failed"].append(f"grpc {e.code()}: {e.details()}")

        threads = [threading.Thread(target=f) for f in (load_http, load_http, load_grpc)]
        for t in threads:
            t.start()

        def wait_serving(kind, bound=30):
            deadline = time.monotonic() + bound
            while time.monotonic() < deadline:
                if kinds()[1] == kind:
                    return True
                time.sleep(0.2)
            return False

        time.sleep(2)
        promote(binary, store, "harbour", neural_version)
        checks.expect(wait_serving("neural"), "the replica swapped to the neural version under load")
        time.sleep(3)
        status, body = http(base, "/v1/parse/batch", {"model": "harbour",
                                                      "sentences": [{"tokens": s} for s in sentences]})
        served_trees = [[(t["head"], t["label"]) for t in r["sentences"][0]["tokens"]] for r in body["results"]]
        checks.expect(status == 200 and served_trees == cli_trees,
                      "the served neural version's trees equal arcwright parse with that model")
        promote(binary, store, "harbour", linear_version)
        checks.expect(wait_serving("linear"), "the replica swapped back to the linear version under load")
        time.sleep(2)
        stop.set()
        for t in threads:
            t.join(timeout=30)
        checks.expect(not outcomes["failed"],
                      f"{outcomes['ok']} requests across two swaps, {len(outcomes['failed'])} failed "
                      f"{outcomes['failed'][:3]}")
        checks.expect(outcomes["versions"] <= {linear_version, neural_version}
                      and len(outcomes["versions"]) == 2,
                      f"replies named the versions that were live: {sorted(outcomes['versions'])}")
    finally:
        proc.send_signal(2)
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
    print(f"{checks.passed} checks passed, {len(checks.failures)} failed")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
