"""Smoke run of every load-test scenario (seconds each) against a real `arcwright serve` on
127.0.0.1: zero errors where required (steady, swap, soak), three promotes applied under load,
the report produced (JSON, Markdown, two SVG plots), and the generator's request count equal to
the server's `arcwright_requests_total`. Checks correctness, not speed.

Usage: check_load.py ARCWRIGHT_BINARY LOAD_BINARY WORK_DIR [--full OUT_DIR [TURKISH_MODEL TEST_CONLLU]]

--full runs the full-length suite (minutes) and writes the report to OUT_DIR (the committed one
is load-tests/); the server then accepts sentences of up to 512 tokens (the by-length scenario
goes to 400 words), and with a Turkish model and test file the steady scenario also parses the
real test sentences with that model.
"""

import json
import os
import shutil
import subprocess
import sys
import time
import urllib.request

sys.path.insert(0, os.path.dirname(__file__))
import check_service as cs  # noqa: E402


def main():
    binary, load, work = sys.argv[1:4]
    full = sys.argv[5] if len(sys.argv) > 5 and sys.argv[4] == "--full" else None
    turkish = sys.argv[6:8] if full and len(sys.argv) > 7 else None
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    store = os.path.join(work, "store")
    http_port, grpc_port = cs.free_port(), cs.free_port()
    extra = ["--demo"] + (["--max-tokens", "512", "--default-model", "demo"] if full else [])
    proc, base = cs.start(binary, store, work, http_port, grpc_port, poll="5", extra=extra)
    if turkish:
        # A second model, served next to the bootstrapped demo model once the follower sees it.
        cs.promote(binary, store, "turkish", cs.publish(binary, store, "turkish", turkish[0]))
        deadline = time.time() + 30
        while time.time() < deadline:
            models = cs.http(base, "/v1/models")[1]["models"]
            if any(m["name"] == "turkish" and m.get("serving") for m in models):
                break
            time.sleep(0.5)
    failures = []
    try:
        listed = json.loads(subprocess.run([binary, "store", "list", "--store", store, "--name", "demo", "--json"],
                                           capture_output=True, text=True, check=True).stdout)
        v0 = listed["versions"][0]["manifest"]["version"]
        fetched = subprocess.run([binary, "store", "fetch", "--store", store, "--name", "demo", "--version", v0,
                                  "--cache", os.path.join(work, "fetched")], capture_output=True, text=True, check=True).stdout.strip()
        v1 = cs.publish(binary, store, "demo", fetched)
        v2 = cs.publish(binary, store, "demo", fetched)
        out = full or os.path.join(work, "report")
        args = [load, "suite", "--http", base, "--grpc", f"127.0.0.1:{grpc_port}", "--out", out,
                "--admin-token", cs.TOKEN, "--model", "demo", "--swap-versions", f"{v1},{v2},{v0}",
                "--server-pid", str(proc.pid), "--model-dir", fetched]
        if not full:
            args.append("--quick")
        if turkish:
            args += ["--conllu", turkish[1], "--conllu-model", "turkish"]
        started = time.time()
        run = subprocess.run(args, capture_output=True, text=True, timeout=1800)
        print(f"suite finished in {time.time() - started:.0f} s: {run.stdout.strip()}")
        if run.returncode != 0:
            failures.append(f"suite failed: {run.stderr[-1000:]}")
        else:
            results = json.load(open(os.path.join(out, "results.json")))
            for name, r in results["steady"].items():
                if r["errors"] or r["ok"] == 0:
                    failures.append(f"steady {name}: {r['errors']} errors, {r['ok']} ok: {r['first_errors']}")
            if results["swaps_done"] != 3 or results["swap"]["errors"] != 0:
                failures.append(f"swap: {results['swaps_done']} promotes, {results['swap']['errors']} errors")
            if len(results["swap"]["versions"]) < 2:
                failures.append(f"swap: replies came from {list(results['swap']['versions'])}")
            if results["soak"]["errors"] or results["shed"]["errors"]:
                failures.append("errors during soak or shedding")
            if not results["accounting"]["match"]:
                failures.append(f"accounting: {results['accounting']}")
            if results.get("in_process_sentences_per_second") is None:
                failures.append("in-process throughput not measured")
            for f in ("REPORT.md", "latency-by-length.svg", "step-up.svg"):
                if not os.path.getsize(os.path.join(out, f)):
                    failures.append(f"{f} is empty")
            print(f"knee {results['knee_rate']} req/s; shed {results['shed']['shed']} of {results['shed']['sent']} at 2x; "
                  f"accounting {results['accounting']}")
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    for f in failures:
        print("FAIL", f, file=sys.stderr)
    print(f"{6 - min(len(failures), 6)} passed, {len(failures)} failed")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
