"""The operator console in a real browser: sets up a service, then runs tests/ui/check_console.mjs.

The service gets a local store holding the Turkish-treebank model published twice (v1 live, v2
to promote from the page), an admin token, a 40-token limit and a 1 s poll. The browser check
(playwright-core driving Debian's /usr/bin/chromium) compares what the page draws with what the
JSON API returns for the same request, on a real test-set sentence.

usage: check_console.py BINARY MODEL_DIR TEST_CONLLU WORK SCREENSHOTS
"""

import json
import os
import shutil
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_service as cs  # noqa: E402  (free_port, start, publish, promote, TOKEN)

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
MAX_TOKENS = 80


def test_sentence(path, low=9, high=16):
    """The first test-set sentence of low..high words without multiword ranges or empty nodes."""
    words, clean = [], True
    with open(path) as f:
        for line in f:
            line = line.rstrip("\n")
            if not line:
                if clean and low <= len(words) <= high:
                    return words
                words, clean = [], True
            elif not line.startswith("#"):
                cols = line.split("\t")
                if not cols[0].isdigit():
                    clean = False
                elif " " not in cols[1]:
                    words.append(cols[1])
                else:
                    clean = False
    raise SystemExit(f"no sentence of {low}-{high} words in {path}")


def longest_sentences(path, count=10):
    """The `count` longest test sentences (word forms), shortest first."""
    import conllu
    with open(path, encoding="utf-8") as f:
        sentences = [[t["form"] for t in s if isinstance(t["id"], int)] for s in conllu.parse(f.read())]
    return sorted(sentences, key=len)[-count:]


def main():
    binary, model_dir, test_conllu, work, screenshots = sys.argv[1:6]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    ui = os.path.join(ROOT, "tests", "ui")
    if not os.path.isdir(os.path.join(ui, "node_modules", "playwright-core")):
        raise SystemExit("tests/ui/node_modules is missing: tests/run.sh installs it (npm ci in tests/ui)")
    store = os.path.join(work, "store")
    v1 = cs.publish(binary, store, "tr", model_dir)
    cs.promote(binary, store, "tr", v1)
    v2 = cs.publish(binary, store, "tr", model_dir)
    http_port, grpc_port = cs.free_port(), cs.free_port()
    proc, base = cs.start(binary, store, work, http_port, grpc_port, poll="1",
                          extra=["--max-tokens", str(MAX_TOKENS)])
    # A second replica on the same store without an admin token.
    bare_port = cs.free_port()
    bare_log = open(os.path.join(work, "serve-no-admin.log"), "w")
    bare = subprocess.Popen([binary, "serve", "--store", store, "--http", f"127.0.0.1:{bare_port}",
                             "--grpc", f"127.0.0.1:{cs.free_port()}", "--cache-dir", os.path.join(work, "bare-cache")],
                            stdout=bare_log, stderr=bare_log)
    try:
        env = dict(os.environ, BASE=base, TOKEN=cs.TOKEN, MODEL="tr", V1=v1, V2=v2,
                   BASE_NO_ADMIN=f"http://127.0.0.1:{bare_port}",
                   TOKENS=" ".join(test_sentence(test_conllu)), MAX_TOKENS=str(MAX_TOKENS), OUT=screenshots,
                   LONGEST=json.dumps(longest_sentences(test_conllu)))
        result = subprocess.run(["node", os.path.join(ui, "check_console.mjs")], env=env, timeout=300)
        code = result.returncode
    finally:
        proc.terminate()
        bare.terminate()
        proc.wait(timeout=30)
        bare.wait(timeout=30)
    sys.exit(code)


if __name__ == "__main__":
    main()
