"""Outside check: our multi-root non-projective decoder against networkx.

networkx (PyPI) `maximum_spanning_arborescence` on random dense graphs rooted at 0 (node 0 has
no incoming edges, so every spanning arborescence is rooted there): the total score of our
`arcwright decode --algorithm non-projective --multi-root` must equal networkx's optimum, and
our heads must form a tree whose arcs add up to the reported score.
"""

import json
import random
import subprocess
import sys

import networkx as nx


def decode(binary, scores, *flags):
    out = subprocess.run(
        [binary, "decode", *flags], input=json.dumps({"scores": scores}),
        capture_output=True, text=True, check=True,
    )
    return json.loads(out.stdout)


def is_tree(heads):
    n = len(heads)
    for start in range(1, n + 1):
        seen, node = set(), start
        while node != 0:
            if node in seen:
                return False
            seen.add(node)
            node = heads[node - 1]
    return True


def main():
    binary = sys.argv[1]
    rng = random.Random(20261201)
    sizes = [1, 2, 3, 5, 8, 13, 21, 34, 55, 89, 100] + [rng.randint(2, 100) for _ in range(30)]
    failures = 0
    for case, n in enumerate(sizes):
        scale = rng.choice([1.0, 10.0, 1000.0])
        integer = case % 4 == 3  # ties
        scores = [[0.0] * (n + 1) for _ in range(n + 1)]
        graph = nx.DiGraph()
        for h in range(n + 1):
            for m in range(1, n + 1):
                if h != m:
                    s = float(rng.randint(-3, 3)) if integer else rng.uniform(-scale, scale)
                    scores[h][m] = s
                    graph.add_edge(h, m, weight=s)
        ours = decode(binary, scores, "--algorithm", "non-projective", "--multi-root")
        reference = nx.maximum_spanning_arborescence(graph, attr="weight", preserve_attrs=True)
        best = sum(d["weight"] for _, _, d in reference.edges(data=True))
        heads = ours["heads"]
        recomputed = sum(scores[h][m + 1] for m, h in enumerate(heads))
        ok = (
            len(heads) == n
            and is_tree(heads)
            and abs(ours["score"] - best) <= 1e-9 * max(1.0, abs(best))
            and abs(recomputed - ours["score"]) <= 1e-9 * max(1.0, abs(best))
        )
        if not ok:
            failures += 1
            print(f"FAIL n={n} ours={ours['score']} networkx={best}", file=sys.stderr)
    print(f"networkx maximum_spanning_arborescence: {len(sizes) - failures}/{len(sizes)} graphs agree")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
