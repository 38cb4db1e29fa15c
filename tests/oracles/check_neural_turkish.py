"""The neural kind on the real treebank (PyPI `turkish-treebanks`, Apache-2.0), on the split of
`arcwright conllu split` that the `turkish` step writes.

Trains `arcwright train --kind neural` with its defaults on 2 threads, then checks:
- UAS/LAS on the test split with predicted tags (all tokens) against the floors below;
- calibration: `tests/oracles/check_calibration.py` on this model (ECE recomputed by Guo et al.'s
  formula, bound 0.03, every word a confidence in [0, 1], UAS/LAS recomputed with the `conllu`
  package);
- training wall time and peak memory against the targets, model size and load time.
Parse speed is measured and printed (a measurement, not a pass/fail check).

Usage: check_neural_turkish.py BINARY SPLIT_DIR WORK_DIR
"""

import json
import os
import re
import shutil
import subprocess
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "e2e"))
import check_service as cs  # noqa: E402  (Checks)

FLOOR_UAS = 87.0
FLOOR_LAS = 80.0
TRAIN_SECONDS = 600
PEAK_MIB = 4096
SIZE_BYTES = 50 * 1024 * 1024
LOAD_SECONDS = 1.0


def main():
    binary, split, work = sys.argv[1:4]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = cs.Checks(report_passes=True)
    model = f"{work}/model"
    started = time.monotonic()
    trained = subprocess.run([binary, "train", "--kind", "neural", "--train", f"{split}/train.conllu",
                              "--dev", f"{split}/dev.conllu", "--out", model, "--threads", "2"],
                             capture_output=True, text=True)
    seconds = time.monotonic() - started
    if trained.returncode != 0:
        raise SystemExit(f"training failed: {trained.stderr[-2000:]}")
    print("\n".join(l for l in trained.stderr.splitlines() if l.startswith("epoch")))
    peak = re.search(r"peak memory (\d+) MiB", trained.stderr)
    peak_mib = int(peak.group(1)) if peak else None
    checks.expect(seconds <= TRAIN_SECONDS, f"training took {seconds:.0f} s (target ≤ {TRAIN_SECONDS} s)")
    checks.expect(peak_mib is not None and peak_mib <= PEAK_MIB,
                  f"training peak memory {peak_mib} MiB (target ≤ {PEAK_MIB} MiB)")
    size = sum(os.path.getsize(os.path.join(model, f)) for f in os.listdir(model))
    checks.expect(size <= SIZE_BYTES, f"model size {size / 1e6:.1f} MB (target ≤ 50 MB)")

    report = json.loads(subprocess.run([binary, "eval", "--model", model, "--gold", f"{split}/test.conllu"],
                                       capture_output=True, text=True, check=True).stdout)
    checks.expect(report["uas"] >= FLOOR_UAS and report["las"] >= FLOOR_LAS,
                  f"test UAS {report['uas']:.2f} LAS {report['las']:.2f} with predicted tags "
                  f"(floors {FLOOR_UAS} / {FLOOR_LAS}; tagger {report['tag_accuracy']:.2f}%)")
    checks.expect(report["model_load_seconds"] <= LOAD_SECONDS,
                  f"model load {report['model_load_seconds']:.3f} s (target ≤ {LOAD_SECONDS} s)")
    print(f"calibration (eval): ECE {report['calibration']['expected_calibration_error']:.4f}, "
          f"temperature {report['calibration']['temperature']:.3f}")

    # Parse speed: the test split's sentences through `arcwright parse`, one thread (printed only).
    with open(f"{split}/test.conllu", encoding="utf-8") as f:
        text = f.read()
    words = sum(1 for line in text.splitlines() if re.match(r"^\d+\t", line))
    sentences = text.count("\n\n")
    started = time.monotonic()
    subprocess.run([binary, "parse", "--model", model, "--input", "conllu", "--threads", "1"],
                   input=text, capture_output=True, text=True, check=True)
    elapsed = time.monotonic() - started
    print(f"parse speed, one thread, model load included: {sentences / elapsed:.0f} sentences/s "
          f"({words / elapsed:.0f} words/s, {sentences} sentences)")

    calibration = subprocess.run([sys.executable, os.path.join(os.path.dirname(os.path.abspath(__file__)),
                                                               "check_calibration.py"),
                                  binary, model, f"{split}/test.conllu", f"{work}/calibration",
                                  f"{split}/dev.conllu"])
    checks.expect(calibration.returncode == 0, "calibration checks on the neural model (check_calibration.py)")
    print(f"{checks.passed} checks passed, {len(checks.failures)} failed")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
