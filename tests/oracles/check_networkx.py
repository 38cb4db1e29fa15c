"""Outside checks: our non-projective decoder and Matrix-Tree marginals against networkx.

networkx (PyPI) `maximum_spanning_arborescence` on random dense graphs rooted at 0 (node 0 has
no incoming edges, so every spanning arborescence is rooted there): the total score of our
`arcwright decode --decoder non-projective --multi-root` must equal networkx's optimum, and
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
        ours = decode(binary, scores, "--decoder", "non-projective", "--multi-root")
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
    return (1 if failures else 0) | check_marginals(binary, rng)


def check_marginals(binary, rng):
    """Tree marginals and log-partition of `decode --decoder non-projective --marginals`
    against an independent enumeration: networkx `ArborescenceIterator` lists every spanning
    arborescence rooted at 0; probabilities are summed here with log-sum-exp. Peaked scores
    (magnitude up to 1e3) included: the cancellation-prone regime of the Matrix-Tree Theorem."""
    import math

    failures = cases = 0
    # Enumeration is slow at 5 words (1,296 arborescences, tens of seconds for all settings):
    # two cases there, two per setting below.
    settings = [(n, magnitude, 2) for n in (2, 3, 4) for magnitude in (1.0, 50.0, 300.0, 1000.0)]
    settings += [(5, 50.0, 1), (5, 1000.0, 1)]
    for n, magnitude, repeats in settings:
        for _ in range(repeats):
            cases += 1
            scores = [[0.0] * (n + 1) for _ in range(n + 1)]
            graph = nx.DiGraph()
            for h in range(n + 1):
                for m in range(1, n + 1):
                    if h != m:
                        scores[h][m] = rng.uniform(-magnitude, magnitude)
                        graph.add_edge(h, m, weight=scores[h][m])
            trees = []
            for tree in nx.algorithms.tree.branchings.ArborescenceIterator(graph, weight="weight"):
                heads = [0] * (n + 1)
                for h, m in tree.edges():
                    heads[m] = h
                trees.append(heads)
            for flags, keep in (
                (["--multi-root"], lambda t: True),
                ([], lambda t: sum(1 for h in t[1:] if h == 0) == 1),
            ):
                family = [t for t in trees if keep(t)]
                totals = [sum(scores[t[m]][m] for m in range(1, n + 1)) for t in family]
                top = max(totals)
                log_z = top + math.log(sum(math.exp(x - top) for x in totals))
                expected = [[0.0] * (n + 1) for _ in range(n + 1)]
                for t, x in zip(family, totals):
                    p = math.exp(x - log_z)
                    for m in range(1, n + 1):
                        expected[t[m]][m] += p
                ours = decode(binary, scores, "--decoder", "non-projective", "--marginals", *flags)
                error = max(abs(ours["marginals"][h][m] - expected[h][m])
                            for h in range(n + 1) for m in range(1, n + 1))
                if abs(ours["log_partition"] - log_z) > 1e-9 * max(1.0, abs(log_z)) or error > 1e-9:
                    failures += 1
                    print(f"FAIL marginals n={n} magnitude={magnitude} {flags}: log Z {ours['log_partition']} "
                          f"vs {log_z}, largest marginal error {error:.3g}", file=sys.stderr)
    print(f"Matrix-Tree marginals vs networkx ArborescenceIterator enumeration: "
          f"{2 * cases - failures}/{2 * cases} agree (to 1e-9)")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
