"""The service parses exactly as the library does: for every sentence of a CoNLL-U file, the
reply of `arcwright serve` (tags, heads, labels, confidences) equals, bit for bit, what
`arcwright parse --confidence` writes for the same model, with each decoder, over HTTP/JSON and
over gRPC (Python stubs generated from proto/).

Both sides get the word forms only (the service as `tokens`), so both tag, score, decode, label
and compute confidences themselves. Over gRPC, confidences are compared as IEEE doubles: the CLI
prints the shortest decimal that reads back as the same f64, so equal strings are not needed,
equal floats are. The JSON reply rounds confidences to 6 decimals, so over HTTP the CLI's value
is rounded the same way (correctly rounded decimal, as Python's format does) before comparing. A word left without a confidence (its Matrix-Tree column could
not be computed within the effort bound) must be left out on both sides.

Usage: check_pipeline_identity.py BINARY MODEL_DIR GOLD_CONLLU WORK_DIR
"""

import json
import os
import shutil
import subprocess
import sys
import urllib.request

import conllu  # PyPI `conllu`: an outside reader for the CLI's output
import grpc

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_service as cs  # noqa: E402  (free_port, generate_stubs, start, publish, promote)

BATCH = 32


def library_parses(binary, model, gold_text, decoder):
    """Sentences as lists of (tag, head, label, confidence or None) from `arcwright parse`."""
    out = subprocess.run([binary, "parse", "--model", model, "--decoder", decoder, "--confidence"],
                         input=gold_text.encode(), capture_output=True, check=True).stdout.decode()
    sentences = []
    for sentence in conllu.parse(out):
        words = [t for t in sentence if isinstance(t["id"], int)]
        sentences.append([(t["upos"], t["head"], t["deprel"],
                           float(t["misc"]["ArcConfidence"]) if t["misc"] and "ArcConfidence" in t["misc"] else None)
                          for t in words])
    return sentences


def main():
    binary, model, gold, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    with open(gold, encoding="utf-8") as f:
        gold_text = f.read()
    forms = [[t["form"] for t in s if isinstance(t["id"], int)] for s in conllu.parse(gold_text)]
    forms = [f for f in forms if f]
    store = os.path.join(work, "store")
    cs.promote(binary, store, "m", cs.publish(binary, store, "m", model))
    cs.generate_stubs(os.path.join(work, "stubs"))
    from arcwright.v1 import parser_pb2, parser_pb2_grpc

    http_port, grpc_port = cs.free_port(), cs.free_port()
    server, base = cs.start(binary, store, work, http_port, grpc_port,
                            extra=["--max-tokens", "4096", "--max-sentences", str(BATCH),
                                   "--max-body-bytes", str(8 << 20), "--deadline-seconds", "120"])
    failures = []
    try:
        channel = grpc.insecure_channel(f"127.0.0.1:{grpc_port}",
                                        options=[("grpc.max_receive_message_length", 64 << 20)])
        stub = parser_pb2_grpc.ParserStub(channel)
        grpc_decoders = {"projective": parser_pb2.DECODER_PROJECTIVE,
                         "non-projective": parser_pb2.DECODER_NON_PROJECTIVE}
        for decoder in ("projective", "non-projective"):
            expected = library_parses(binary, model, gold_text, decoder)
            if len(expected) != len(forms):
                failures.append(f"{decoder}: the CLI wrote {len(expected)} sentences for {len(forms)}")
                continue
            http_got, grpc_got = [], []
            for start in range(0, len(forms), BATCH):
                chunk = forms[start:start + BATCH]
                body = {"model": "m", "decoder": decoder, "confidence": True,
                        "sentences": [{"tokens": f} for f in chunk]}
                request = urllib.request.Request(base + "/v1/parse/batch", data=json.dumps(body).encode(),
                                                 headers={"content-type": "application/json"})
                with urllib.request.urlopen(request, timeout=120) as r:
                    reply = json.loads(r.read())
                for result in reply["results"]:
                    (sentence,) = result["sentences"]
                    http_got.append([(t["tag"], t["head"], t["label"], t.get("confidence"))
                                     for t in sentence["tokens"]])
                reply = stub.ParseBatch(parser_pb2.ParseBatchRequest(
                    model="m", decoder=grpc_decoders[decoder], confidence=True,
                    sentences=[parser_pb2.SentenceInput(tokens=parser_pb2.TokenList(tokens=f)) for f in chunk]),
                    timeout=120)
                for result in reply.results:
                    (sentence,) = result.sentences
                    grpc_got.append([(t.tag, t.head, t.label, t.confidence if t.HasField("confidence") else None)
                                     for t in sentence.tokens])
            rounded = [[(tag, head, label, None if p is None else float(f"{p:.6f}"))
                        for tag, head, label, p in sentence] for sentence in expected]
            for api, got, want in (("HTTP", http_got, rounded), ("gRPC", grpc_got, expected)):
                differing = [i for i, (a, b) in enumerate(zip(want, got)) if a != b]
                if len(got) != len(want) or differing:
                    first = differing[0] if differing else None
                    detail = "" if first is None else f"; first at sentence {first}: library {want[first]} service {got[first]}"
                    failures.append(f"{decoder} over {api}: {len(differing)} of {len(expected)} sentences differ{detail}")
            tokens = sum(len(s) for s in expected)
            missing = sum(1 for s in expected for t in s if t[3] is None)
            print(f"{decoder}: {len(expected)} sentences, {tokens} tokens identical over HTTP and gRPC "
                  f"unless listed below ({missing} words without a confidence on both sides)")
    finally:
        server.terminate()
        server.wait(timeout=30)
    for failure in failures:
        print("FAIL", failure, file=sys.stderr)
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
