"""Scale-out on one machine: replicas behind nginx, one S3-compatible store, sharded corpus parsing.

Outside pieces: moto[server] (PyPI) as the S3-compatible store on 127.0.0.1, boto3 to put and
get objects behind our back, nginx (Debian) as the load balancer for HTTP and gRPC, configured
from the committed template deploy/nginx/arcwright.conf.in. Traffic comes from our load
generator (`arcwright-load`, tonic client generated from proto/), open loop, bounded in time
and count.

1. Sharded corpus parsing through the store: a file list on S3, the model from the store's
   `live` alias, three `arcwright parse --shard k/3` processes at once; the union of their
   outputs must equal a single-process parse byte for byte, and match `arcwright parse` on stdin.
2. Three `arcwright serve` replicas following one store, behind nginx; steady HTTP and gRPC
   traffic through nginx; a new version is promoted: every replica serves it within the poll
   interval + load time; then one replica gets SIGTERM mid-run. No request may fail.
3. With --measure: aggregate throughput through nginx with 1, 2 and 3 replicas.

usage: check_scaleout.py BINARY LOAD_BINARY MODEL_DIR TEST_CONLLU WORK [--measure]
"""

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
import urllib.request


sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_service import free_port  # noqa: E402
from check_store_s3 import start_moto  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
POLL_SECONDS = 1.0
# Debian puts nginx in /usr/sbin, which is not on every user's PATH.
NGINX = shutil.which("nginx") or next(
    (p for p in ("/usr/sbin/nginx", "/usr/local/sbin/nginx") if os.access(p, os.X_OK)), None)
failures = []


def check(condition, message):
    print(("ok   " if condition else "FAIL ") + message, flush=True)
    if not condition:
        failures.append(message)


def get_json(url, timeout=5):
    with urllib.request.urlopen(url, timeout=timeout) as response:
        return json.loads(response.read())


def wait_ready(base, proc, log, seconds=60):
    deadline = time.time() + seconds
    while time.time() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"replica exited early; see {log}")
        try:
            with urllib.request.urlopen(base + "/readyz", timeout=1) as response:
                if response.status == 200:
                    return
        except Exception:
            pass
        time.sleep(0.1)
    raise SystemExit(f"replica not ready after {seconds} s; see {log}")


class Fleet:
    """Replicas of `arcwright serve` on loopback ports, and nginx in front of them."""

    def __init__(self, binary, store_url, env, work):
        self.binary, self.store_url, self.env, self.work = binary, store_url, env, work
        self.replicas = []  # (proc, http_port, grpc_port, log)
        self.nginx = None

    def start_replicas(self, count):
        for k in range(count):
            http_port, grpc_port = free_port(), free_port()
            log = os.path.join(self.work, f"replica-{len(self.replicas)}.log")
            proc = subprocess.Popen(
                [self.binary, "serve", "--store", self.store_url,
                 "--http", f"127.0.0.1:{http_port}", "--grpc", f"127.0.0.1:{grpc_port}",
                 "--poll-seconds", str(POLL_SECONDS), "--grace-seconds", "10",
                 "--cache-dir", os.path.join(self.work, f"cache-{len(self.replicas)}")],
                stdout=open(log, "w"), stderr=subprocess.STDOUT, env=self.env)
            self.replicas.append((proc, http_port, grpc_port, log))
        for proc, http_port, _, log in self.replicas:
            wait_ready(f"http://127.0.0.1:{http_port}", proc, log)

    def start_nginx(self):
        prefix = os.path.join(self.work, "nginx")
        shutil.rmtree(prefix, ignore_errors=True)
        for sub in ("body", "proxy", "fastcgi", "uwsgi", "scgi"):
            os.makedirs(os.path.join(prefix, "tmp", sub))
            os.chmod(os.path.join(prefix, "tmp", sub), 0o777)  # workers may run as nobody
        with open(os.path.join(ROOT, "deploy", "nginx", "arcwright.conf.in")) as f:
            template = f.read()
        self.http_port, self.grpc_port = free_port(), free_port()
        servers = lambda index: "\n".join(
            f"        server 127.0.0.1:{r[index]} max_fails=1 fail_timeout=2s;" for r in self.replicas)
        config = (template.replace("@PREFIX@", prefix).replace("@FAIL_TIMEOUT@", "2s")
                  .replace("@HTTP_SERVERS@", servers(1)).replace("@GRPC_SERVERS@", servers(2))
                  .replace("@HTTP_LISTEN@", f"127.0.0.1:{self.http_port}")
                  .replace("@GRPC_LISTEN@", f"127.0.0.1:{self.grpc_port}"))
        settings = "\n".join(line for line in config.splitlines() if not line.lstrip().startswith("#"))
        check(re.search(r"@[A-Z_]+@", settings) is None, "nginx template: every placeholder filled")
        path = os.path.join(prefix, "nginx.conf")
        with open(path, "w") as f:
            f.write(config)
        test = subprocess.run([NGINX, "-t", "-p", prefix, "-c", path, "-e", os.path.join(prefix, "err.log")],
                              capture_output=True, text=True)
        check(test.returncode == 0, f"nginx -t accepts the configuration: {test.stderr.strip()}")
        self.nginx = subprocess.Popen([NGINX, "-p", prefix, "-c", path, "-e", os.path.join(prefix, "err.log"),
                                       "-g", "daemon off;"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        wait_ready(f"http://127.0.0.1:{self.http_port}", self.nginx, os.path.join(prefix, "nginx-error.log"))

    def stop(self):
        for proc, *_ in self.replicas:
            if proc.poll() is None:
                proc.send_signal(signal.SIGTERM)
        if self.nginx and self.nginx.poll() is None:
            self.nginx.send_signal(signal.SIGQUIT)
        for proc in [r[0] for r in self.replicas] + ([self.nginx] if self.nginx else []):
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                proc.kill()
        self.replicas, self.nginx = [], None


def load(load_binary, fleet, api, rate, seconds, out, words=25, max_requests=None):
    args = [load_binary, "run", "--http", f"http://127.0.0.1:{fleet.http_port}",
            "--grpc", f"127.0.0.1:{fleet.grpc_port}", "--api", api, "--rate", str(rate),
            "--seconds", str(seconds), "--words", str(words),
            "--max-requests", str(max_requests or int(rate * seconds) + 10)]
    return subprocess.Popen(args, stdout=open(out, "w"), stderr=subprocess.DEVNULL)


def requests_served(http_port):
    """Parse requests this replica answered (from its own arcwright_requests_total)."""
    with urllib.request.urlopen(f"http://127.0.0.1:{http_port}/metrics", timeout=5) as response:
        text = response.read().decode()
    total = 0.0
    for line in text.splitlines():
        if line.startswith("arcwright_requests_total{") and 'method="parse"' in line.lower():
            total += float(line.rsplit(" ", 1)[1])
    return total


def sharded_parse(binary, env, s3, model_dir, test_conllu, work):
    """Part 1: shards through the store equal a single-process parse."""
    with open(test_conllu) as f:
        blocks = f.read().strip("\n").split("\n\n")
    parts = 7
    names = []
    for k in range(parts):
        name = f"in/news-{k:02d}.conllu"
        s3.put_object(Bucket="corpus", Key=name, Body=("\n\n".join(blocks[k::parts]) + "\n\n").encode())
        names.append(name)
    listing = "# harbour corpus, December\n" + "".join(f"s3://corpus/{n}\n" for n in names)
    s3.put_object(Bucket="corpus", Key="lists/december.txt", Body=listing.encode())

    def parse(*extra):
        return subprocess.Popen(
            [binary, "parse", "--store", "s3://models/fleet", "--name", "tr",
             "--cache", os.path.join(work, "parse-cache"), "--files", "s3://corpus/lists/december.txt",
             *extra], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)

    started = time.time()
    single = parse("--out", "s3://corpus/single")
    out, err = single.communicate(timeout=300)
    check(single.returncode == 0, f"single-process parse from the store: {err.strip()}")
    shards = [parse("--out", "s3://corpus/sharded", "--shard", f"{k}/3", "--threads", "1") for k in range(3)]
    for k, proc in enumerate(shards):
        out, err = proc.communicate(timeout=300)
        check(proc.returncode == 0, f"shard {k}/3: {err.strip()}")
    print(f"     sharded parsing took {time.time() - started:.1f} s in all")

    def objects(prefix):
        listed = s3.list_objects_v2(Bucket="corpus", Prefix=prefix).get("Contents", [])
        return {o["Key"][len(prefix):]: s3.get_object(Bucket="corpus", Key=o["Key"])["Body"].read()
                for o in listed}

    one, three = objects("single/"), objects("sharded/")
    outputs = lambda d: {k: v for k, v in d.items() if not k.startswith("_shards/")}
    check(sorted(outputs(three)) == sorted(f"news-{k:02d}.conllu" for k in range(parts)),
          f"the three shards wrote one output per listed file: {sorted(outputs(three))}")
    check(outputs(one) == outputs(three), "union of the shards = the single-process parse, byte for byte")
    reports = [json.loads(three[f"_shards/{k}-of-3.json"]) for k in range(3)]
    check(sorted(sum((r["outputs"] for r in reports), [])) ==
          sorted(f"s3://corpus/sharded/news-{k:02d}.conllu" for k in range(parts)),
          "shard reports: every file in exactly one shard")
    check(sum(r["sentences"] for r in reports) == len(blocks),
          f"shard reports: {sum(r['sentences'] for r in reports)} sentences = {len(blocks)} in the corpus")
    check(all(r["model"].startswith("tr@") for r in reports), "shards name the model version they used")
    # The same file through stdin, with the model directory: same bytes.
    with open(os.path.join(work, "part3.conllu"), "wb") as f:
        f.write(s3.get_object(Bucket="corpus", Key="in/news-03.conllu")["Body"].read())
    with open(os.path.join(work, "part3.conllu"), "rb") as f:
        stdin_parse = subprocess.run([binary, "parse", "--model", model_dir], stdin=f, capture_output=True)
    check(stdin_parse.stdout == one["news-03.conllu"], "a shard's output = `arcwright parse` on stdin")
    # A missing input is a clear error naming the list line.
    s3.put_object(Bucket="corpus", Key="lists/broken.txt", Body=b"s3://corpus/in/news-00.conllu\ns3://corpus/in/nope.txt\n")
    broken = subprocess.run(
        [binary, "parse", "--store", "s3://models/fleet", "--name", "tr", "--cache", os.path.join(work, "parse-cache"),
         "--files", "s3://corpus/lists/broken.txt", "--out", "s3://corpus/broken"],
        capture_output=True, text=True, env=env)
    check(broken.returncode == 2 and "broken.txt:2" in broken.stderr,
          f"a missing input names the list and line: {broken.stderr.strip()}")


def main():
    binary, load_binary, model_dir, test_conllu, work = sys.argv[1:6]
    measure = "--measure" in sys.argv[6:]
    if NGINX is None:
        raise SystemExit("nginx is not installed (tests/run.sh installs Debian's nginx-light)")
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    moto, env, s3 = start_moto(["models", "corpus"],
                               {k: v for k, v in os.environ.items() if not k.startswith("ARCWRIGHT_")})
    fleet = Fleet(binary, "s3://models/fleet", env, work)
    try:

        def store(*args):
            result = subprocess.run([binary, "store", *args, "--store", "s3://models/fleet"],
                                    capture_output=True, text=True, env=env, timeout=120)
            check(result.returncode == 0, f"store {args[0]}: {result.stderr.strip()}")
            return result.stdout.strip()

        v1 = store("publish", "--name", "tr", model_dir)
        store("promote", "--name", "tr", "--version", v1)

        sharded_parse(binary, env, s3, model_dir, test_conllu, work)

        # Part 2: three replicas behind nginx.
        fleet.start_replicas(3)
        fleet.start_nginx()
        for _, http_port, _, _ in fleet.replicas:
            served = get_json(f"http://127.0.0.1:{http_port}/v1/models")
            check(json.dumps(served).count(v1) >= 1, f"replica :{http_port} serves {v1}")
        run_seconds = 16
        outputs = {api: os.path.join(work, f"load-{api}.json") for api in ("http-parse", "grpc-parse")}
        loads = {api: load(load_binary, fleet, api, 60, run_seconds, out) for api, out in outputs.items()}
        started = time.time()
        time.sleep(3)
        v2 = store("publish", "--name", "tr", model_dir)
        promoted = time.time()
        store("promote", "--name", "tr", "--version", v2)
        converged = {}
        while len(converged) < 3 and time.time() - promoted < 30:
            for _, http_port, _, _ in fleet.replicas:
                if http_port not in converged:
                    models = get_json(f"http://127.0.0.1:{http_port}/v1/models")
                    serving = [(m.get("serving") or {}).get("version") for m in models["models"]]
                    if v2 in serving:
                        converged[http_port] = time.time() - promoted
            time.sleep(0.05)
        slowest = max(converged.values()) if len(converged) == 3 else float("inf")
        load_seconds = 1.0
        check(len(converged) == 3 and slowest <= POLL_SECONDS + load_seconds + 3.0,
              f"every replica serves the new version within poll {POLL_SECONDS} s + load + 3 s: "
              f"{sorted(round(t, 2) for t in converged.values())} s after the promote")
        # Requests reached every replica through nginx (before one is stopped).
        served_before = {p: requests_served(p) for _, p, _, _ in fleet.replicas}
        check(all(v > 0 for v in served_before.values()),
              f"nginx spread requests over all replicas: {served_before}")
        time.sleep(max(0.0, 9 - (time.time() - started)))
        victim, victim_http, _, victim_log = fleet.replicas[2]
        victim.send_signal(signal.SIGTERM)
        stopped_at = time.time() - started
        for api, proc in loads.items():
            proc.wait(timeout=run_seconds + 60)
        try:
            victim_code = victim.wait(timeout=20)
        except subprocess.TimeoutExpired:
            victim_code = None
        check(victim_code == 0, f"the stopped replica drained and exited 0 (exit {victim_code})")
        for api, out in outputs.items():
            with open(out) as f:
                result = json.load(f)
            versions = result.get("versions", {})
            check(result["sent"] > 0 and result["errors"] == 0 and result["shed"] == 0
                  and result["ok"] == result["sent"],
                  f"{api} through nginx: {result['ok']}/{result['sent']} ok, {result['errors']} errors, "
                  f"{result['shed']} shed across the promote and a SIGTERM at {stopped_at:.1f} s "
                  f"(first errors: {result.get('first_errors', [])[:2]})")
            check(any(v1 in v for v in versions) and any(v2 in v for v in versions),
                  f"{api}: answers came from both versions during the run: {versions}")
        fleet.stop()

        if measure:
            # Step-up per replica count: the knee is the highest offered rate answered in full
            # (nothing shed, no errors) with p99 <= 50 ms, as in the load report.
            rates = (300, 600, 1000, 1400, 1800, 2400, 3000)
            measured = {}
            for count in (1, 2, 3):
                fleet.start_replicas(count)
                fleet.start_nginx()
                row = {}
                for api in ("http-parse", "grpc-parse"):
                    steps = []
                    for rate in rates:
                        out = os.path.join(work, f"measure-{count}-{api}-{rate}.json")
                        load(load_binary, fleet, api, rate, 5, out).wait(timeout=120)
                        with open(out) as f:
                            result = json.load(f)
                        steps.append({"rate": rate, "ok": result["ok"], "sent": result["sent"],
                                      "shed": result["shed"], "errors": result["errors"],
                                      "p50_ms": result["latency"]["p50_ms"],
                                      "p99_ms": result["latency"]["p99_ms"]})
                        good = result["errors"] == 0 and result["shed"] == 0 and result["latency"]["p99_ms"] <= 50
                        if not good:
                            break
                        time.sleep(1)
                    knee = max([s["rate"] for s in steps if s["errors"] == 0 and s["shed"] == 0
                                and s["p99_ms"] <= 50] or [0])
                    row[api] = {"knee": knee, "steps": steps}
                    print(f"     {count} replica(s), {api}: knee {knee} req/s; " +
                          ", ".join(f"{s['rate']}: p99 {s['p99_ms']:.1f} ms shed {s['shed']} err {s['errors']}"
                                    for s in steps), flush=True)
                measured[count] = row
                fleet.stop()
            with open(os.path.join(work, "scaleout-measure.json"), "w") as f:
                json.dump({"convergence_seconds": sorted(converged.values()), "throughput": measured}, f, indent=2)
    finally:
        fleet.stop()
        moto.terminate()
        moto.wait(timeout=10)
    print(f"\n{len(failures)} failure(s)")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
