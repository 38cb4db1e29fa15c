"""schemathesis (PyPI) against the live `/v1/openapi.json` of `arcwright serve`: generated
requests (valid and invalid) must never get a 5xx, and every reply must match the schema.

Usage: check_openapi.py BINARY WORK_DIR
"""

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def main():
    binary, work = sys.argv[1:3]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    http_port, grpc_port = free_port(), free_port()
    log = open(os.path.join(work, "serve.log"), "w")
    proc = subprocess.Popen([binary, "serve", "--demo", "--store", os.path.join(work, "store"), "--http", f"127.0.0.1:{http_port}",
                             "--grpc", f"127.0.0.1:{grpc_port}", "--cache-dir", os.path.join(work, "cache")],
                            stdout=log, stderr=log)
    base = f"http://127.0.0.1:{http_port}"
    try:
        for _ in range(300):
            try:
                if urllib.request.urlopen(base + "/readyz", timeout=1).status == 200:
                    break
            except Exception:
                time.sleep(0.1)
        result = subprocess.run(
            ["schemathesis", "run", f"{base}/v1/openapi.json", "--checks", "not_a_server_error,response_schema_conformance",
             "--max-examples", "40", "--request-timeout", "20", "--no-color"],
            capture_output=True, text=True, timeout=600)
        print(result.stdout[-3000:])
        if result.returncode != 0:
            print(result.stderr[-2000:], file=sys.stderr)
        return result.returncode
    finally:
        proc.terminate()
        proc.wait(timeout=30)


if __name__ == "__main__":
    sys.exit(main())
