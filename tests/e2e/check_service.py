"""End-to-end checks of `arcwright serve` with independent clients.

- gRPC through Python stubs generated from proto/ with PyPI grpcio-tools: Parse, ParseBatch,
  ParseStream, the standard grpc.health.v1 service and server reflection;
- HTTP through Python's own urllib;
- both give the same trees as `arcwright parse` for the same model;
- hot swap under load: continuous requests for 20 s while 5 new versions are promoted and one
  corrupt version is forced onto `live`: zero failed requests, every reply names a version that
  was live, the corrupt one never serves, each new version serves within poll interval + load;
- SIGTERM during load: no accepted request fails and the process exits 0.

Usage: check_service.py BINARY MODEL_DIR WORK_DIR
"""

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request

import grpc
from grpc_tools import protoc

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
TOKEN = "service-check-admin-token-42"


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Checks:
    """Collects failures; with report_passes, also prints each passed check (for checks whose
    messages carry the figures measured)."""

    def __init__(self, report_passes=False):
        self.failures, self.passed, self.report_passes = [], 0, report_passes

    def expect(self, ok, message):
        if ok:
            self.passed += 1
            if self.report_passes:
                print("ok  ", message)
        else:
            self.failures.append(message)
            print("FAIL", message, file=sys.stderr)


def generate_stubs(out):
    os.makedirs(out, exist_ok=True)
    code = protoc.main(["grpc_tools.protoc", f"-I{ROOT}/proto", f"--python_out={out}", f"--grpc_python_out={out}",
                        f"{ROOT}/proto/arcwright/v1/parser.proto"])
    if code != 0:
        raise SystemExit("protoc failed")
    for d in ("arcwright", "arcwright/v1"):
        open(os.path.join(out, d, "__init__.py"), "a").close()
    sys.path.insert(0, out)


def http(base, path, body=None, token=None, timeout=30):
    data = None if body is None else json.dumps(body).encode()
    request = urllib.request.Request(base + path, data=data, method="POST" if body is not None else "GET")
    request.add_header("content-type", "application/json")
    if token:
        request.add_header("authorization", f"Bearer {token}")
    try:
        with urllib.request.urlopen(request, timeout=timeout) as response:
            return response.status, json.loads(response.read() or b"null")
    except urllib.error.HTTPError as e:
        return e.code, json.loads(e.read() or b"null")


def start(binary, store, work, http_port, grpc_port, poll="1", extra=()):
    token_file = os.path.join(work, "admin-token")
    with open(token_file, "w") as f:
        f.write(TOKEN)
    log = open(os.path.join(work, f"serve-{http_port}.log"), "w")
    proc = subprocess.Popen([binary, "serve", "--store", store, "--http", f"127.0.0.1:{http_port}",
                             "--grpc", f"127.0.0.1:{grpc_port}", "--poll-seconds", poll, "--admin-token-file", token_file,
                             "--cache-dir", os.path.join(work, "serving-cache"), "--grace-seconds", "10", *extra],
                            stdout=log, stderr=log)
    base = f"http://127.0.0.1:{http_port}"
    for _ in range(300):
        try:
            with urllib.request.urlopen(base + "/readyz", timeout=1) as response:
                if response.status == 200:
                    return proc, base
        except Exception:
            pass
        time.sleep(0.1)
    proc.kill()
    raise SystemExit("server did not become ready; see " + log.name)


def publish(binary, store, name, directory):
    out = subprocess.run([binary, "store", "publish", "--store", store, "--name", name, directory],
                         capture_output=True, text=True, check=True)
    return out.stdout.strip()


def promote(binary, store, name, version):
    subprocess.run([binary, "store", "promote", "--store", store, "--name", name, "--version", version],
                   capture_output=True, text=True, check=True)


def main():
    binary, model_dir, work = sys.argv[1:4]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    generate_stubs(os.path.join(work, "stubs"))
    from arcwright.v1 import parser_pb2 as pb, parser_pb2_grpc as rpc
    from grpc_health.v1 import health_pb2, health_pb2_grpc
    from grpc_reflection.v1alpha import reflection_pb2, reflection_pb2_grpc
    checks = Checks()
    store = os.path.join(work, "store")
    first = publish(binary, store, "turkish", model_dir)
    promote(binary, store, "turkish", first)
    http_port, grpc_port = free_port(), free_port()
    proc, base = start(binary, store, work, http_port, grpc_port)
    channel = grpc.insecure_channel(f"127.0.0.1:{grpc_port}")
    stub = rpc.ParserStub(channel)
    try:
        # --- Same trees through gRPC, HTTP and the CLI.
        tokens = ["Kemerlerini", "Aralık", "ayında", "kaybettiler", "."]
        reply = stub.Parse(pb.ParseRequest(model="turkish", input=pb.SentenceInput(tokens=pb.TokenList(tokens=tokens))))
        grpc_tree = [(t.head, t.label) for t in reply.sentences[0].tokens]
        status, body = http(base, "/v1/parse", {"model": "turkish", "tokens": tokens})
        http_tree = [(t["head"], t["label"]) for t in body["sentences"][0]["tokens"]]
        cli = subprocess.run([binary, "parse", "--model", model_dir, "--input", "tokens"], input=" ".join(tokens) + "\n",
                             capture_output=True, text=True, check=True).stdout
        cli_tree = [(int(l.split("\t")[6]), l.split("\t")[7]) for l in cli.splitlines() if l and not l.startswith("#")]
        checks.expect(grpc_tree == http_tree == cli_tree, f"trees differ: grpc {grpc_tree} http {http_tree} cli {cli_tree}")
        checks.expect(reply.model.name == "turkish" and reply.model.version == first, f"reply names {reply.model}")
        batch = stub.ParseBatch(pb.ParseBatchRequest(model="turkish", sentences=[
            pb.SentenceInput(text="Yarın gelecek."), pb.SentenceInput(tokens=pb.TokenList(tokens=tokens))]))
        checks.expect(len(batch.results) == 2 and [(t.head, t.label) for t in batch.results[1].sentences[0].tokens] == grpc_tree,
                      "ParseBatch order or trees")
        requests = [pb.ParseRequest(model="turkish", id=str(i), confidence=True,
                                    input=pb.SentenceInput(tokens=pb.TokenList(tokens=tokens[: i + 2]))) for i in range(3)]
        replies = list(stub.ParseStream(iter(requests)))
        checks.expect(sorted(r.id for r in replies) == ["0", "1", "2"], f"ParseStream ids {[r.id for r in replies]}")
        checks.expect(all(len(r.sentences[0].tokens) == int(r.id) + 2 for r in replies), "ParseStream sizes")
        # A bad message in the middle of a stream is answered in the stream with its status
        # (INVALID_ARGUMENT, as a unary Parse would end), and the messages after it are parsed.
        mixed = [requests[0], pb.ParseRequest(model="turkish", id="bad", input=pb.SentenceInput(
            tokens=pb.TokenList(tokens=["a", ""]))), pb.ParseRequest(model="nosuchmodel", id="unknown", input=requests[1].input),
            requests[2]]
        replies = {r.id: r for r in stub.ParseStream(iter(mixed))}
        checks.expect(sorted(replies) == ["0", "2", "bad", "unknown"], f"ParseStream with bad messages: ids {sorted(replies)}")
        bad = replies.get("bad")
        checks.expect(bad is not None and bad.HasField("error") and bad.error.code == grpc.StatusCode.INVALID_ARGUMENT.value[0]
                      and "token 1 is empty" in bad.error.message and not bad.sentences, f"in-stream error: {bad}")
        unknown = replies.get("unknown")
        checks.expect(unknown is not None and unknown.error.code == grpc.StatusCode.NOT_FOUND.value[0],
                      f"in-stream unknown model: {unknown}")
        checks.expect(all(not replies[i].HasField("error") and len(replies[i].sentences[0].tokens) == int(i) + 2
                          for i in ("0", "2") if i in replies), "messages around the bad ones parsed")
        try:
            stub.Parse(pb.ParseRequest(model="turkish", input=pb.SentenceInput(tokens=pb.TokenList(tokens=["a", ""]))))
            checks.expect(False, "empty token accepted over gRPC")
        except grpc.RpcError as e:
            checks.expect(e.code() == grpc.StatusCode.INVALID_ARGUMENT and "token 1 is empty" in e.details(), f"gRPC bad input: {e}")
        admin = rpc.ModelAdminStub(channel)
        try:
            admin.ActivateModel(pb.ActivateModelRequest(name="turkish", version=first), metadata=[("authorization", "Bearer nope")])
            checks.expect(False, "wrong admin token accepted")
        except grpc.RpcError as e:
            checks.expect(e.code() == grpc.StatusCode.UNAUTHENTICATED, f"admin: {e.code()}")
        try:
            admin.ActivateModel(pb.ActivateModelRequest(name="turkish", version=first))
            checks.expect(False, "ActivateModel without a token accepted")
        except grpc.RpcError as e:
            checks.expect(e.code() == grpc.StatusCode.UNAUTHENTICATED, f"admin without token: {e.code()}")
        # The contract in proto/: reading the model list is open, like GET /v1/models.
        listed = admin.ListModels(pb.ListModelsRequest())
        checks.expect({m.name for m in listed.models} == {"turkish"}, f"ListModels {listed}")
        health = health_pb2_grpc.HealthStub(channel).Check(health_pb2.HealthCheckRequest(service=""))
        checks.expect(health.status == health_pb2.HealthCheckResponse.SERVING, f"health {health}")
        reflection = reflection_pb2_grpc.ServerReflectionStub(channel)
        answers = list(reflection.ServerReflectionInfo(iter([reflection_pb2.ServerReflectionRequest(list_services="")])))
        services = {s.name for s in answers[0].list_services_response.service}
        checks.expect({"arcwright.v1.Parser", "arcwright.v1.ModelAdmin", "grpc.health.v1.Health"} <= services,
                      f"reflection lists {services}")

        # --- Hot swap under load.
        live_versions = {first}
        seen, errors, lock = {}, [], threading.Lock()
        stop = threading.Event()

        def load_http():
            n = 0
            while not stop.is_set() and n < 100000:
                n += 1
                try:
                    status, body = http(base, "/v1/parse", {"model": "turkish", "text": "Kitabı okudu ve uyudu."})
                    if status != 200:
                        raise RuntimeError(f"HTTP {status} {body}")
                    with lock:
                        seen.setdefault(body["model"]["version"], time.time())
                except Exception as e:
                    with lock:
                        errors.append(repr(e))

        def load_grpc():
            n = 0
            while not stop.is_set() and n < 100000:
                n += 1
                try:
                    r = stub.Parse(pb.ParseRequest(model="turkish", input=pb.SentenceInput(text="Eve döndü.")), timeout=30)
                    with lock:
                        seen.setdefault(r.model.version, time.time())
                except Exception as e:
                    with lock:
                        errors.append(repr(e))

        threads = [threading.Thread(target=f) for f in (load_http, load_http, load_grpc)]
        for t in threads:
            t.start()
        started = time.time()
        delays = []
        for i in range(5):
            time.sleep(2.0)
            version = publish(binary, store, "turkish", model_dir)
            promote(binary, store, "turkish", version)
            promoted_at = time.time()
            live_versions.add(version)
            while version not in seen and time.time() - promoted_at < 15:
                time.sleep(0.05)
            delays.append(seen.get(version, float("inf")) - promoted_at)
            if i == 2:
                # A corrupt version forced onto `live` behind the store's back (as a broken tool
                # might): the service must refuse it and keep serving.
                corrupt = publish(binary, store, "turkish", model_dir)
                path = os.path.join(store, "models", "turkish", "versions", corrupt, "arcs.f32")
                with open(path, "r+b") as f:
                    f.seek(999)
                    byte = f.read(1)
                    f.seek(999)
                    f.write(bytes([byte[0] ^ 0xFF]))
                alias = os.path.join(store, "models", "turkish", "aliases", "live.json")
                record = json.load(open(alias))
                record["history"].insert(0, record["version"])
                record["version"] = corrupt
                json.dump(record, open(alias, "w"))
                time.sleep(3.0)
        while time.time() - started < 20:
            time.sleep(0.2)
        stop.set()
        for t in threads:
            t.join(timeout=60)
        checks.expect(not errors, f"{len(errors)} failed requests during swaps, e.g. {errors[:3]}")
        checks.expect(set(seen) <= live_versions, f"served versions never live: {set(seen) - live_versions}")
        checks.expect(corrupt not in seen, "the corrupt version served")
        checks.expect(max(delays) <= 1.0 + 5.0, f"swap delays {delays}")
        metrics = urllib.request.urlopen(base + "/metrics").read().decode()
        failed_swaps = [l for l in metrics.splitlines() if l.startswith('arcwright_model_swaps_total{name="turkish",result="failed"}')]
        checks.expect(failed_swaps and float(failed_swaps[0].split()[-1]) >= 1, f"failed swap not counted: {failed_swaps}")
        print(f"hot swap: {sum(1 for _ in seen)} versions served, 0 expected errors, got {len(errors)}; "
              f"promote → first reply on new version: {', '.join(f'{d:.2f}' for d in delays)} s (poll 1 s)")

        # --- SIGTERM during load: no accepted request fails.
        accepted_failures, completed, refused, reset = [], [0], [0], [0]
        stop.clear()

        def load_until_refused():
            while not stop.is_set():
                try:
                    status, body = http(base, "/v1/parse", {"model": "turkish", "text": "Kitabı okudu."}, timeout=30)
                    if status == 200:
                        with lock:
                            completed[0] += 1
                    elif status == 503:
                        with lock:
                            refused[0] += 1  # draining: refused politely, not failed mid-way
                    else:
                        accepted_failures.append(status)
                except urllib.error.URLError as e:
                    if isinstance(e.reason, ConnectionRefusedError):
                        with lock:
                            refused[0] += 1
                        time.sleep(0.05)
                    elif isinstance(e.reason, (ConnectionResetError, BrokenPipeError)):
                        # Reset while connecting or sending: never read by the server (see below).
                        with lock:
                            reset[0] += 1
                    else:
                        accepted_failures.append(repr(e))
                except ConnectionRefusedError:
                    refused[0] += 1
                    time.sleep(0.05)
                except Exception as e:
                    # A reset or broken pipe while connecting or sending: the connection sat in
                    # the kernel's accept queue when the listener closed, so the server never
                    # read the request (not accepted). Whether any request the server did read
                    # was cut off is decided below from the server's own drain report.
                    text = repr(e)
                    if "ConnectionResetError" in text or "BrokenPipeError" in text:
                        with lock:
                            reset[0] += 1
                    else:
                        accepted_failures.append(text)

        threads = [threading.Thread(target=load_until_refused) for _ in range(3)]
        for t in threads:
            t.start()
        time.sleep(2.0)
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=30)
        time.sleep(0.5)
        stop.set()
        for t in threads:
            t.join(timeout=30)
        checks.expect(code == 0, f"exit code after SIGTERM: {code}")
        log_text = open(os.path.join(work, f"serve-{http_port}.log")).read()
        checks.expect("drained; bye" in log_text and "grace period over" not in log_text,
                      "the server did not drain its in-flight requests within the grace period")
        checks.expect(not accepted_failures, f"accepted requests failed during shutdown: {accepted_failures[:3]}")
        print(f"SIGTERM under load: {completed[0]} requests completed, {refused[0]} refused and {reset[0]} reset "
              f"before being read after shutdown began, {len(accepted_failures)} accepted requests failed; exit code {code}")
    finally:
        if proc.poll() is None:
            proc.kill()
    print(f"{checks.passed} passed, {len(checks.failures)} failed")
    return 1 if checks.failures else 0


if __name__ == "__main__":
    sys.exit(main())
