"""The model store against a real S3-compatible server: PyPI `moto[server]` started here on
127.0.0.1 (it accepts any credentials), driven through `arcwright store`, with faults injected
through boto3. Also times publish and fetch on both backends and the change feed's delay.

Usage: check_store_s3.py BINARY MODEL_DIR EVAL_GOLD WORK_DIR
"""

import json
import os
import shutil
import subprocess
import sys
import time

import boto3


sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from check_service import Checks, free_port  # noqa: E402


def start_moto(buckets, base_env=None):
    """moto's S3 server on a free loopback port, with `buckets` created once it answers.
    Returns the process, an environment with the AWS_* variables pointing at it, and a boto3
    client."""
    port = free_port()
    proc = subprocess.Popen(["moto_server", "-H", "127.0.0.1", "-p", str(port)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    env = dict(os.environ if base_env is None else base_env, AWS_ENDPOINT_URL=f"http://127.0.0.1:{port}",
               AWS_ACCESS_KEY_ID="test", AWS_SECRET_ACCESS_KEY="test", AWS_DEFAULT_REGION="us-east-1")
    s3 = boto3.client("s3", endpoint_url=env["AWS_ENDPOINT_URL"], aws_access_key_id="test",
                      aws_secret_access_key="test", region_name="us-east-1")
    missing = list(buckets)
    for _ in range(100):
        try:
            while missing:
                s3.create_bucket(Bucket=missing[0])
                missing.pop(0)
            break
        except Exception:
            time.sleep(0.2)
    return proc, env, s3


def main():
    binary, model_dir, gold, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    server, env, s3 = start_moto(["models"])
    checks = Checks()
    try:
        url = "s3://models/fleet"

        def store(*args, environment=env, timeout=120):
            return subprocess.run([binary, "store", *args], capture_output=True, text=True, env=environment,
                                  timeout=timeout)

        def publish(name="tr", directory=model_dir, store_url=url):
            out = store("publish", "--store", store_url, "--name", name, directory)
            checks.expect(out.returncode == 0, f"publish to {store_url}: {out.stderr}")
            return out.stdout.strip()

        # Round trip and timings on both backends.
        timings = {}
        for label, store_url in [("local", os.path.join(work, "local-store")), ("s3", url)]:
            started = time.time()
            version = publish(store_url=store_url)
            timings[f"publish {label}"] = time.time() - started
            checks.expect(store("promote", "--store", store_url, "--name", "tr", "--version", version).returncode == 0,
                          f"promote on {label}")
            listed = json.loads(store("list", "--store", store_url, "--name", "tr", "--json").stdout)
            checks.expect([v["manifest"]["version"] for v in listed["versions"]] == [version], f"list on {label}")
            checks.expect(listed["versions"][0]["aliases"] == ["live"], f"live alias listed on {label}")
            cache = os.path.join(work, f"cache-{label}")
            started = time.time()
            fetched = store("fetch", "--store", store_url, "--name", "tr", "--cache", cache).stdout.strip()
            timings[f"fetch+verify {label}"] = time.time() - started
            for name in sorted(os.listdir(model_dir)):
                with open(os.path.join(model_dir, name), "rb") as a, open(os.path.join(fetched, name), "rb") as b:
                    checks.expect(a.read() == b.read(), f"{label}: fetched {name} differs")
            started = time.time()
            ours = subprocess.run([binary, "eval", "--model", fetched, "--gold", gold], capture_output=True, text=True)
            timings[f"eval incl. model load {label}"] = time.time() - started
            original = subprocess.run([binary, "eval", "--model", model_dir, "--gold", gold], capture_output=True, text=True)
            a, b = json.loads(ours.stdout), json.loads(original.stdout)
            checks.expect((a["uas"], a["las"]) == (b["uas"], b["las"]), f"{label}: fetched model parses differently")
            timings[f"model load {label}"] = a["model_load_seconds"]

        # Faults, injected with boto3 on the S3 backend.
        live = store("list", "--store", url, "--name", "tr", "--json").stdout
        live_version = json.loads(live)["versions"][0]["manifest"]["version"]
        def key(version, file):
            return f"fleet/models/tr/versions/{version}/{file}"
        flipped = publish()
        body = bytearray(s3.get_object(Bucket="models", Key=key(flipped, "arcs.f32"))["Body"].read())
        body[1234] ^= 0xFF
        s3.put_object(Bucket="models", Key=key(flipped, "arcs.f32"), Body=bytes(body))
        out = store("verify", "--store", url, "--name", "tr", "--version", flipped)
        checks.expect(out.returncode == 2 and "file arcs.f32 has SHA-256" in out.stderr, f"flipped byte: {out.stderr}")
        out = store("promote", "--store", url, "--name", "tr", "--version", flipped)
        checks.expect(out.returncode == 2 and "SHA-256" in out.stderr, f"promote damaged: {out.stderr}")
        out = store("fetch", "--store", url, "--name", "tr", "--version", flipped, "--cache", os.path.join(work, "c2"))
        checks.expect(out.returncode != 0 and not os.path.exists(os.path.join(work, "c2", "tr", flipped)),
                      "damaged version must not be loaded")
        truncated = publish()
        s3.put_object(Bucket="models", Key=key(truncated, "labels.f32"), Body=b"short")
        out = store("verify", "--store", url, "--name", "tr", "--version", truncated)
        checks.expect(out.returncode == 2 and "has 5 bytes; the manifest says" in out.stderr, f"truncated: {out.stderr}")
        headless = publish()
        s3.delete_object(Bucket="models", Key=key(headless, "manifest.json"))
        listed = json.loads(store("list", "--store", url, "--name", "tr", "--json").stdout)
        checks.expect(headless not in [v["manifest"]["version"] for v in listed["versions"]], "headless version listed")
        future = publish()
        manifest = json.loads(s3.get_object(Bucket="models", Key=key(future, "manifest.json"))["Body"].read())
        manifest["schema"] = "2.0"
        s3.put_object(Bucket="models", Key=key(future, "manifest.json"), Body=json.dumps(manifest).encode())
        out = store("fetch", "--store", url, "--name", "tr", "--version", future, "--cache", os.path.join(work, "c3"))
        checks.expect(out.returncode == 2 and "manifest schema 2.0; this build reads schema 1.x" in out.stderr,
                      f"unknown schema: {out.stderr}")
        now_live = json.loads(store("list", "--store", url, "--json").stdout)["models"][0]["aliases"]["live"]
        checks.expect(now_live == live_version, "live moved although every promote target was damaged")

        # Two concurrent publishes of the same name.
        procs = [subprocess.Popen([binary, "store", "publish", "--store", url, "--name", "tr", model_dir],
                                  stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env) for _ in range(2)]
        versions = [p.communicate(timeout=120)[0].strip() for p in procs]
        checks.expect(len(set(versions)) == 2 and all(versions), f"concurrent publishes: {versions}")
        for v in versions:
            checks.expect(store("verify", "--store", url, "--name", "tr", "--version", v).returncode == 0,
                          f"concurrent version {v} incomplete")

        # Bad names.
        for bad in ["../x", "", "a" * 300, "ctl\x07name"]:
            out = store("publish", "--store", url, "--name", bad, model_dir)
            checks.expect(out.returncode == 2 and "invalid model name" in out.stderr, f"bad name {bad[:20]!r}: {out.stderr}")

        # Unreachable store: a closed port.
        dead = dict(env, AWS_ENDPOINT_URL=f"http://127.0.0.1:{free_port()}")
        started = time.time()
        out = store("list", "--store", "s3://models/x", "--name", "tr", environment=dead)
        elapsed = time.time() - started
        checks.expect(out.returncode == 1 and "store list failed" in out.stderr, f"unreachable: {out.stderr}")
        print(f"unreachable store: clear error after {elapsed:.1f} s of retries: {out.stderr.strip()[:160]}")

        # Change feed delay at the default interval (5 s).
        watcher = subprocess.Popen([binary, "store", "watch", "--store", url, "--name", "tr", "--count", "1"],
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        first_line = watcher.stdout.readline()
        time.sleep(1.3)
        target = versions[0]
        promoted_at = time.time()
        checks.expect(store("promote", "--store", url, "--name", "tr", "--version", target).returncode == 0, "promote")
        line = watcher.stdout.readline().split()
        watcher.wait(timeout=30)
        delay = int(line[0]) / 1000 - promoted_at if line else float("nan")
        checks.expect(bool(line) and line[-1] == target and delay <= 5.5, f"watch saw {line} after {delay:.2f} s")
        print(f"change feed: promote → notification {delay:.2f} s at the default 5 s interval (first line {first_line.split()[-1]})")
        for k, v in timings.items():
            print(f"{k}: {v:.2f} s")
    finally:
        server.terminate()
        server.wait(timeout=10)
    print(f"{checks.passed} passed, {len(checks.failures)} failed")
    return 1 if checks.failures else 0


if __name__ == "__main__":
    sys.exit(main())
