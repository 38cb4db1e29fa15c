"""CPU cost of one sentence by length, on one core, for the capacity page (deploy/CAPACITY.md).

Builds pre-tokenized sentences of fixed lengths from the words of a CoNLL-U file (real word
forms, random order: the parser's cost depends on length, not on meaning), parses them with
`arcwright parse --input tokens --threads 1` for each decoder, and reads the time from the shard
report. Prints a Markdown table and writes JSON next to the inputs.

usage: measure_cost_by_length.py BINARY MODEL_DIR CONLLU WORK
"""

import json
import os
import random
import shutil
import subprocess
import sys

LENGTHS = (10, 25, 50, 100, 200, 400)


def main():
    binary, model, conllu, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    words = []
    with open(conllu) as f:
        for line in f:
            cols = line.rstrip("\n").split("\t")
            if len(cols) == 10 and cols[0].isdigit():
                words.append(cols[1])
    rng = random.Random(7)
    results = {}
    for decoder in ("projective", "non-projective"):
        for length in LENGTHS:
            # Two to four seconds of work per point on this machine, at least 30 sentences.
            count = max(30, int(400000 / length ** 1.6))
            path = os.path.join(work, f"len-{length}.txt")
            with open(path, "w") as f:
                for _ in range(count):
                    f.write(" ".join(rng.choice(words) for _ in range(length)) + "\n")
            listing = os.path.join(work, f"list-{length}.txt")
            with open(listing, "w") as f:
                f.write(path + "\n")
            out = os.path.join(work, f"out-{decoder}-{length}")
            subprocess.run([binary, "parse", "--model", model, "--input", "tokens", "--threads", "1",
                            "--decoder", decoder, "--files", listing, "--out", out],
                           check=True, capture_output=True)
            with open(os.path.join(out, "_shards", "0-of-1.json")) as f:
                report = json.load(f)
            results[(decoder, length)] = report["seconds"] / report["sentences"]
    print("| words | projective ms/sentence | sentences/s/core | non-projective ms/sentence | sentences/s/core |")
    print("| --- | --- | --- | --- | --- |")
    for length in LENGTHS:
        p, n = results[("projective", length)], results[("non-projective", length)]
        print(f"| {length} | {p * 1e3:.3f} | {1 / p:,.0f} | {n * 1e3:.3f} | {1 / n:,.0f} |")
    with open(os.path.join(work, "cost-by-length.json"), "w") as f:
        json.dump({f"{d}/{l}": s for (d, l), s in results.items()}, f, indent=2)


if __name__ == "__main__":
    main()
