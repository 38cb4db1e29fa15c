"""Outside check: our CoNLL-U reader and writer against the PyPI `conllu` package, on the Turkish
treebank files (PyPI `turkish-treebanks`, Apache-2.0).

For every sentence, `arcwright conllu fields` must give the same words and fields as
`conllu.parse_incr`, and `arcwright conllu rewrite` must reproduce the file byte for byte.
"""

import json
import subprocess
import sys

import conllu


def blank(value):
    return None if value in (None, "_") else value


def as_dict(pairs_or_text):
    if pairs_or_text in (None, "_", [], {}):
        return None
    if isinstance(pairs_or_text, dict):
        return dict(pairs_or_text)
    if isinstance(pairs_or_text, str):
        out = {}
        for pair in pairs_or_text.split("|"):
            key, _, value = pair.partition("=")
            out[key] = value if value else None
        return out
    return {key: value for key, value in pairs_or_text}  # later duplicates win, as in conllu


def compare_file(binary, path):
    ours = subprocess.run([binary, "conllu", "fields", path], capture_output=True, text=True, check=True)
    our_sentences = [json.loads(line) for line in ours.stdout.splitlines()]
    with open(path, encoding="utf-8") as handle:
        their_sentences = list(conllu.parse_incr(handle))
    problems = []
    if len(our_sentences) != len(their_sentences):
        problems.append(f"{path}: {len(our_sentences)} sentences vs conllu's {len(their_sentences)}")
    words = 0
    for index, (mine, theirs) in enumerate(zip(our_sentences, their_sentences)):
        basic = [t for t in theirs if isinstance(t["id"], int)]
        if len(mine["words"]) != len(basic):
            problems.append(f"{path}: sentence {index + 1}: {len(mine['words'])} words vs {len(basic)}")
            continue
        for comment in mine["comments"]:
            key, _, value = comment.lstrip("# ").partition(" = ")
            if key in theirs.metadata and theirs.metadata[key] != value:
                problems.append(f"{path}: sentence {index + 1}: comment {key!r} differs")
        for w, t in zip(mine["words"], basic):
            words += 1
            pairs = [
                ("id", w["id"], t["id"]),
                ("form", w["form"], t["form"]),
                ("lemma", blank(w["lemma"]), blank(t["lemma"])),
                ("upos", blank(w["upos"]), blank(t["upos"])),
                ("xpos", blank(w["xpos"]), blank(t["xpos"])),
                ("feats", as_dict(w["feats"]), as_dict(t["feats"])),
                ("head", w["head"], t["head"]),
                ("deprel", blank(w["deprel"]), blank(t["deprel"])),
                ("misc", as_dict(w["misc"]), as_dict(t["misc"])),
            ]
            for name, a, b in pairs:
                if a != b:
                    problems.append(f"{path}: sentence {index + 1} word {w['id']}: {name} {a!r} vs conllu {b!r}")
    rewritten = subprocess.run([binary, "conllu", "rewrite", path], capture_output=True, check=True).stdout
    with open(path, "rb") as handle:
        original = handle.read()
    if rewritten != original:
        problems.append(f"{path}: rewrite differs from the original bytes")
    return len(our_sentences), words, problems


def main():
    binary, paths = sys.argv[1], sys.argv[2:]
    failures = 0
    for path in paths:
        sentences, words, problems = compare_file(binary, path)
        for problem in problems[:20]:
            print("FAIL", problem, file=sys.stderr)
        failures += len(problems)
        print(f"conllu package vs ours on {path}: {sentences} sentences, {words} words, "
              f"{len(problems)} differences; byte-identical rewrite: {'yes' if not any('rewrite' in p for p in problems) else 'no'}")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
