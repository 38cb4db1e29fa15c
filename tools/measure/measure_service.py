"""Measurements for docs/performance.md (not a test): latency of Parse for 25-token sentences at low
load, ParseBatch throughput (32 sentences) against in-process parsing of the same sentences,
and the swap (load) time. Client and server share this 2-core machine.

Usage: measure_service.py BINARY MODEL_DIR CONLLU WORK_DIR
"""

import json
import os
import shutil
import subprocess
import sys
import threading
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "tests", "e2e"))
import check_service as cs  # noqa: E402


def main():
    binary, model_dir, conllu, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    cs.generate_stubs(os.path.join(work, "stubs"))
    import grpc
    from arcwright.v1 import parser_pb2 as pb, parser_pb2_grpc as rpc
    sentences, current = [], []
    for line in open(conllu, encoding="utf-8"):
        if not line.strip():
            if 23 <= len(current) <= 27:
                sentences.append(current)
            current = []
        elif not line.startswith("#") and line.split("\t")[0].isdigit():
            current.append(line.split("\t")[1])
    store = os.path.join(work, "store")
    version = cs.publish(binary, store, "turkish", model_dir)
    cs.promote(binary, store, "turkish", version)
    http_port, grpc_port = cs.free_port(), cs.free_port()
    proc, base = cs.start(binary, store, work, http_port, grpc_port)
    try:
        stub = rpc.ParserStub(grpc.insecure_channel(f"127.0.0.1:{grpc_port}"))
        request = lambda toks: pb.ParseRequest(model="turkish", input=pb.SentenceInput(tokens=pb.TokenList(tokens=toks)))
        for s in sentences[:50]:
            stub.Parse(request(s))
        latencies = []
        for i in range(600):
            t = time.perf_counter()
            stub.Parse(request(sentences[i % len(sentences)]))
            latencies.append(time.perf_counter() - t)
        latencies.sort()
        p50, p99 = latencies[len(latencies) // 2], latencies[int(len(latencies) * 0.99)]
        batch = pb.ParseBatchRequest(model="turkish", sentences=[pb.SentenceInput(tokens=pb.TokenList(tokens=s)) for s in (sentences * 2)[:32]])
        done, stop = [0], threading.Event()

        def worker():
            while not stop.is_set():
                stub.ParseBatch(batch, timeout=30)
                done[0] += 32

        threads = [threading.Thread(target=worker) for _ in range(3)]
        start = time.perf_counter()
        for t in threads:
            t.start()
        time.sleep(10)
        stop.set()
        for t in threads:
            t.join()
        grpc_rate = done[0] / (time.perf_counter() - start)
        text = "\n".join(" ".join(s) for s in (sentences * 20)[:2000]) + "\n"
        t = time.perf_counter()
        subprocess.run([binary, "parse", "--model", model_dir, "--input", "tokens"], input=text, capture_output=True, text=True, check=True)
        one_core = 2000 / (time.perf_counter() - t)
        models = json.load(__import__("urllib.request").request.urlopen(base + "/v1/models"))
        load_seconds = models["models"][0]["serving"]["load_seconds"]
        print(json.dumps({
            "sentences_of_23_27_tokens": len(sentences),
            "parse_p50_ms": round(p50 * 1e3, 3), "parse_p99_ms": round(p99 * 1e3, 3),
            "parse_batch32_sentences_per_s": round(grpc_rate), "in_process_one_core_sentences_per_s": round(one_core),
            "ratio_vs_two_cores_in_process": round(grpc_rate / (2 * one_core), 3),
            "swap_load_seconds": round(load_seconds, 3),
        }, indent=1))
    finally:
        proc.terminate()
        proc.wait(timeout=30)


if __name__ == "__main__":
    sys.exit(main())
