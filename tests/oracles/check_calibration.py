"""Calibrated confidences and the evaluation figures, recomputed outside the project.

For the Turkish model (trained with a dev file, so its confidence temperatures are fitted) on
the test split, with predicted tags, for each decoder:

* `arcwright eval --arc-confidences FILE` writes every scored arc's confidence and whether its
  head is right; this script recomputes the expected calibration error from that file with the
  formula of Guo, Pleiss, Sun & Weinberger (2017), "On Calibration of Modern Neural Networks",
  eq. 3 — ECE = Σ_m |B_m|/n · |acc(B_m) − conf(B_m)| over M = 10 equal-width bins
  ((m−1)/M, m/M] — and requires eval's own figure to agree to 1e-9;
* every word gets a confidence, and every confidence lies in [0, 1];
* the calibration bound: ECE ≤ 0.03 (the target the confidences were fitted for);
* the reliability diagram (`--reliability FILE.svg`) is well-formed XML with one bar per
  non-empty bin;
* UAS and LAS recomputed from `arcwright parse` output and the gold file, both read with the PyPI
  `conllu` package, equal eval's (all tokens, predicted tags).

With DEV_CONLLU (the held-out file the calibration was fitted on): the logistic map after the
temperature is the maximum-likelihood one. Fitting q = σ(a·logit p + b) by log-loss is a
one-feature logistic regression (Platt 1999), convex in (a, b); at its optimum the gradient
vanishes, and written in the calibrated confidences q alone (logit p = (logit q − b)/a) that is
Σ (q − y) = 0 and Σ (q − y)·logit q = 0, with y = 1 for a right head. Both means are recomputed
here from eval's per-arc output on dev and must be below 1e-4.

Usage: check_calibration.py BINARY MODEL_DIR TEST_CONLLU WORK_DIR [DEV_CONLLU]
"""
import json
import math
import os
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET

import conllu

sys.path.insert(0, os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "e2e"))
import check_service as cs  # noqa: E402  (Checks)

BOUND = 0.03


def guo_ece(pairs, bins=10):
    total = len(pairs)
    ece = 0.0
    for m in range(1, bins + 1):
        lower, upper = (m - 1) / bins, m / bins
        members = [(p, ok) for p, ok in pairs if (lower < p <= upper) or (m == 1 and p == 0.0)]
        if members:
            accuracy = sum(ok for _, ok in members) / len(members)
            confidence = sum(p for p, _ in members) / len(members)
            ece += len(members) / total * abs(accuracy - confidence)
    return ece


def main():
    binary, model, gold_path, work = sys.argv[1:5]
    dev_path = sys.argv[5] if len(sys.argv) > 5 else None
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = cs.Checks(report_passes=True)
    expect = checks.expect

    with open(gold_path, encoding="utf-8") as f:
        gold_text = f.read()
    gold = [[t for t in s if isinstance(t["id"], int)] for s in conllu.parse(gold_text)]
    for decoder in ("non-projective", "projective"):
        arcs_file, svg_file = f"{work}/arcs-{decoder}.tsv", f"{work}/reliability-{decoder}.svg"
        out = subprocess.run([binary, "eval", "--model", model, "--gold", gold_path, "--decoder", decoder,
                              "--arc-confidences", arcs_file, "--reliability", svg_file],
                             capture_output=True, text=True, check=True)
        report = json.loads(out.stdout)
        calibration = report["calibration"]
        with open(arcs_file) as f:
            rows = [line.split("\t") for line in f.read().splitlines()[1:]]
        pairs = [(float(p), right.strip() == "1") for p, right in rows]
        ece = guo_ece(pairs)
        expect(abs(ece - calibration["expected_calibration_error"]) <= 1e-9,
               f"{decoder}: ECE {ece:.4f} recomputed (Guo et al. 2017, eq. 3) = eval's "
               f"{calibration['expected_calibration_error']:.4f}")
        words = sum(len(s) for s in gold)
        expect(len(pairs) == words and calibration["arcs_without_confidence"] == 0,
               f"{decoder}: every one of {words} words has a confidence ({len(pairs)} arcs)")
        expect(all(0.0 <= p <= 1.0 and math.isfinite(p) for p, _ in pairs),
               f"{decoder}: every confidence in [0, 1]")
        expect(ece <= BOUND, f"{decoder}: ECE {ece:.4f} ≤ {BOUND} (temperature {calibration['temperature']:.3f}; "
                             f"mean confidence {calibration['mean_confidence']:.4f}, accuracy {calibration['accuracy']:.4f})")
        tree = ET.parse(svg_file)
        bars = [e for e in tree.iter("{http://www.w3.org/2000/svg}rect") if e.find("{http://www.w3.org/2000/svg}title") is not None]
        filled = sum(1 for b in calibration["bins"] if b["count"] > 0)
        expect(len(bars) == filled, f"{decoder}: reliability diagram, {len(bars)} bars for {filled} non-empty bins")

        parsed = subprocess.run([binary, "parse", "--model", model, "--decoder", decoder], input=gold_text,
                                capture_output=True, text=True, check=True).stdout
        predicted = [[t for t in s if isinstance(t["id"], int)] for s in conllu.parse(parsed)]
        attached = labeled = total = 0
        for g, p in zip(gold, predicted):
            for gt, pt in zip(g, p):
                total += 1
                if gt["head"] == pt["head"]:
                    attached += 1
                    labeled += gt["deprel"] == pt["deprel"]
        uas, las = 100 * attached / total, 100 * labeled / total
        expect(abs(uas - report["uas"]) < 1e-9 and abs(las - report["las"]) < 1e-9,
               f"{decoder}: UAS {uas:.2f} / LAS {las:.2f} recomputed from parse output = eval's "
               f"{report['uas']:.2f} / {report['las']:.2f}")
    if dev_path:
        for decoder in ("non-projective", "projective"):
            arcs_file = f"{work}/dev-arcs-{decoder}.tsv"
            subprocess.run([binary, "eval", "--model", model, "--gold", dev_path, "--decoder", decoder,
                            "--arc-confidences", arcs_file], capture_output=True, text=True, check=True)
            with open(arcs_file) as f:
                rows = [line.split("\t") for line in f.read().splitlines()[1:]]
            pairs = [(float(p), right.strip() == "1") for p, right in rows]
            edge = 1e-12
            logit = [math.log(min(max(q, edge), 1 - edge) / (1 - min(max(q, edge), 1 - edge))) for q, _ in pairs]
            bias = sum(q - y for q, y in pairs) / len(pairs)
            slope = sum((q - y) * x for (q, y), x in zip(pairs, logit)) / len(pairs)
            expect(abs(bias) < 1e-4 and abs(slope) < 1e-4,
                   f"{decoder}: the logistic map is the log-loss optimum on dev (Platt 1999; mean of (q − y) "
                   f"{bias:.1e}, of (q − y)·logit q {slope:.1e}, both below 1e-4)")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
