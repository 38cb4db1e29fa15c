"""Sentence splitting of raw text against the Turkish treebank's own sentence boundaries.

The test split's sentences (their `# text` lines, read with the `conllu` package from PyPI) are
re-joined with single spaces into one raw text, as a user would hand a document to
`arcwright parse --input text`. A gold boundary is the character offset where a treebank
sentence ends; a boundary is found exactly when a sentence the parser wrote ends at the same
offset. Reported: recall (share of gold boundaries found) and precision, for the model as
trained (UAX #29 corrected by the abbreviations it learned from the training split) and for the
same model with its abbreviation list emptied (UAX #29 alone), so the figure shows what the
learned abbreviations add. Also checks that every sentence carries `# sent_id` and `# text`, and
that the words written are the text's words.

Usage: check_sentence_split.py BINARY MODEL_DIR TEST_CONLLU WORK_DIR
"""
import json
import shutil
import subprocess
import sys
from pathlib import Path

import conllu

binary, model_dir, test_path, work = sys.argv[1:5]
work = Path(work)
shutil.rmtree(work, ignore_errors=True)
work.mkdir(parents=True)

with open(test_path, encoding="utf-8") as f:
    gold = conllu.parse(f.read())
texts = [" ".join(s.metadata["text"].split()) for s in gold]
raw = " ".join(texts)
gold_ends, offset = set(), 0
for text in texts:
    offset += len(text)
    gold_ends.add(offset)
    offset += 1


def split_with(model):
    out = subprocess.run([binary, "parse", "--model", str(model), "--input", "text"],
                         input=raw.encode(), capture_output=True, check=True).stdout.decode()
    sentences = conllu.parse(out)
    ends, position, problems = set(), 0, []
    for number, s in enumerate(sentences, 1):
        if s.metadata.get("sent_id") != str(number) or "text" not in s.metadata:
            problems.append(f"sentence {number}: comments {dict(s.metadata)}")
            continue
        text = s.metadata["text"]
        at = raw.find(text, position)
        if at < 0:
            problems.append(f"sentence {number}: text not found in order: {text[:60]!r}")
            continue
        position = at + len(text)
        ends.add(position)
        words = "".join(t["form"] for t in s if isinstance(t["id"], int))
        if words != "".join(text.split()):
            problems.append(f"sentence {number}: words {words[:60]!r} are not the text's")
    found = len(ends & gold_ends)
    return found / len(gold_ends), found / max(len(ends), 1), len(ends), problems, ends


plain = work / "model-without-abbreviations"
shutil.copytree(model_dir, plain)
description = json.loads((plain / "model.json").read_text())
learned = description.get("abbreviations", [])
description["abbreviations"] = []
(plain / "model.json").write_text(json.dumps(description))

with_recall, with_precision, with_count, problems, with_ends = split_with(model_dir)
plain_recall, plain_precision, plain_count, _, plain_ends = split_with(plain)

# Boundaries a splitter can see: the sentence ends in a sentence-final mark. The treebank's web
# sentences often end without one, and no rule on the text can find those.
marked = {end for end, text in zip(sorted(gold_ends), texts) if text[-1:] in ".!?…"}
# Sentences holding a learned abbreviation before their last word: where the list matters.
with_abbreviation, position = [], 0
for text in texts:
    start, position = position, position + len(text) + 1
    words = text.split()
    if any(w in learned for w in words[:-1]):
        with_abbreviation.append((start, start + len(text)))
print(f"{len(gold)} treebank sentences re-joined into {len(raw)} characters of raw text; "
      f"{len(learned)} abbreviations learned from the training split")
print(f"UAX #29 + learned abbreviations: {with_count} sentences, boundaries found exactly "
      f"{with_recall:.1%} (precision {with_precision:.1%})")
print(f"UAX #29 alone:                   {plain_count} sentences, boundaries found exactly "
      f"{plain_recall:.1%} (precision {plain_precision:.1%})")
def whole(ends):
    # A sentence found whole: its end is a boundary and nothing inside it is one.
    return sum(1 for start, end in with_abbreviation
               if end in ends and not any(start < e < end for e in ends))


print(f"of the {len(marked)} boundaries after a sentence-final mark (. ! ? …): found "
      f"{len(with_ends & marked) / len(marked):.1%} with abbreviations, "
      f"{len(plain_ends & marked) / len(marked):.1%} without")
print(f"{len(with_abbreviation)} test sentences hold a learned abbreviation before their last word; "
      f"found whole: {whole(with_ends)} with abbreviations, {whole(plain_ends)} without")
failures = problems[:10]
if not learned:
    failures.append("the model learned no abbreviations from the training split")
if with_recall < plain_recall or with_precision < plain_precision or whole(with_ends) < whole(plain_ends):
    failures.append("the learned abbreviations made splitting worse")
# Floor: a little under the figure measured when this check was written (see the step output
# in docs/performance.md); a drop below it means the splitter regressed.
if with_recall < 0.90:
    failures.append(f"boundary recall {with_recall:.1%} below the 90% floor")
for failure in failures:
    print("FAIL", failure, file=sys.stderr)
sys.exit(1 if failures else 0)
