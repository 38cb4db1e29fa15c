"""The clients that ship (clients/python, clients/rust) against a real `arcwright serve`.

1. Retries on UNAVAILABLE: the Python client starts before the service is listening and gets
   its parses once the service is up (it reports how many attempts it retried).
2. Both clients' example programs parse the Turkish test split (CoNLL-U, forms sent as tokens,
   in batches) and write CoNLL-U equal — forms, tags, heads, labels — to `arcwright parse` with
   the same model. Outputs are read with the PyPI `conllu` package.
3. Text input: paragraphs of raw text give the same sentences and trees through both clients as
   through `arcwright parse --input text`.
4. Retries on RESOURCE_EXHAUSTED: three Python clients at once against a service that admits one
   request at a time all finish with the full, correct output.

Usage: check_clients.py BINARY MODEL_DIR TEST_CONLLU WORK_DIR
"""
import os
import re
import shutil
import subprocess
import sys
import time

import conllu

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_service as cs  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
PY_EXAMPLE = os.path.join(ROOT, "clients", "python", "examples", "parse_file.py")
RUST_EXAMPLE = os.path.join(ROOT, "target", "release", "examples", "parse_file")
SERVE_LIMITS = ["--max-tokens", "4096", "--max-sentences", "64", "--max-body-bytes", str(8 << 20),
                "--deadline-seconds", "120"]


def trees(text):
    return [[(t["form"], t["upos"], t["head"], t["deprel"]) for t in s if isinstance(t["id"], int)]
            for s in conllu.parse(text)]


def run(command, **kw):
    return subprocess.run(command, capture_output=True, text=True, **kw)


def main():
    binary, model, test_split, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = cs.Checks(report_passes=True)
    expect = checks.expect

    built = run(["cargo", "build", "--release", "--quiet", "-p", "arcwright-client", "--example", "parse_file"],
                cwd=ROOT)
    if built.returncode != 0:
        sys.exit("building the Rust client example failed:\n" + built.stderr)

    store = os.path.join(work, "store")
    cs.promote(binary, store, "m", cs.publish(binary, store, "m", model))
    expected = trees(run([binary, "parse", "--model", model], input=open(test_split, encoding="utf-8").read(),
                         check=True).stdout)

    # 1. The client is started first; the service comes up 1.5 s later.
    http_port, grpc_port = cs.free_port(), cs.free_port()
    address = f"127.0.0.1:{grpc_port}"
    early = subprocess.Popen([sys.executable, PY_EXAMPLE, "--grpc", address, "--input", "conllu", test_split,
                              "--attempts", "30", "--batch", "32"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                             text=True)
    time.sleep(1.5)
    server, _ = cs.start(binary, store, work, http_port, grpc_port, extra=SERVE_LIMITS)
    try:
        out, err = early.communicate(timeout=300)
        retried = re.search(r"\((\d+) retried attempts\)", err)
        expect(early.returncode == 0 and retried and int(retried.group(1)) > 0,
               f"Python client started before the service: retried until it answered ({err.strip()})")
        expect(trees(out) == expected, f"Python client, CoNLL-U in batches of 32: {len(expected)} sentences "
                                       "equal to arcwright parse")

        # 2. The Rust client's example on the same file.
        rust = run([RUST_EXAMPLE, "--grpc", f"http://{address}", "--input", "conllu", test_split, "--batch", "20"],
                   timeout=300)
        expect(rust.returncode == 0 and trees(rust.stdout) == expected,
               f"Rust client, CoNLL-U in batches of 20: equal to arcwright parse ({rust.stderr.strip()})")

        # 3. Text: paragraphs of five treebank sentences each.
        texts = [" ".join(s.metadata["text"].split()) for s in conllu.parse(open(test_split, encoding="utf-8").read())]
        paragraphs = [" ".join(texts[i:i + 5]) for i in range(0, 100, 5)]
        text_file = os.path.join(work, "paragraphs.txt")
        with open(text_file, "w", encoding="utf-8") as f:
            f.write("\n\n".join(paragraphs) + "\n")
        cli = trees(run([binary, "parse", "--model", model, "--input", "text"],
                        input=open(text_file, encoding="utf-8").read(), check=True).stdout)
        py_text = run([sys.executable, PY_EXAMPLE, "--grpc", address, "--input", "text", text_file], timeout=300)
        rust_text = run([RUST_EXAMPLE, "--grpc", f"http://{address}", "--input", "text", text_file], timeout=300)
        expect(py_text.returncode == 0 and trees(py_text.stdout) == cli,
               f"Python client, {len(paragraphs)} paragraphs of text: {len(cli)} sentences as arcwright parse --input text")
        expect(rust_text.returncode == 0 and trees(rust_text.stdout) == cli,
               "Rust client, the same paragraphs: the same sentences and trees")
    finally:
        server.terminate()
        server.wait(timeout=30)

    # 4. One request admitted at a time; three clients at once retry RESOURCE_EXHAUSTED.
    http_port, grpc_port = cs.free_port(), cs.free_port()
    server, _ = cs.start(binary, store, work, http_port, grpc_port, extra=[*SERVE_LIMITS, "--max-in-flight", "1"])
    try:
        clients = [subprocess.Popen([sys.executable, PY_EXAMPLE, "--grpc", f"127.0.0.1:{grpc_port}", "--input",
                                     "conllu", test_split, "--batch", "16", "--attempts", "40"],
                                    stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for _ in range(3)]
        results = [c.communicate(timeout=600) for c in clients]
        retries = sum(int(m.group(1)) for _, err in results for m in [re.search(r"\((\d+) retried", err)] if m)
        expect(all(c.returncode == 0 for c in clients) and all(trees(out) == expected for out, _ in results),
               f"three clients against --max-in-flight 1: all complete and correct ({retries} attempts retried "
               "after RESOURCE_EXHAUSTED)")
    finally:
        server.terminate()
        server.wait(timeout=30)
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
