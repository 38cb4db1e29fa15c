"""Deployment files: Kubernetes schemas, cross-references between manifests, the image definition.

Outside checks:
- every manifest validates against the Kubernetes 1.37 OpenAPI schemas with unknown fields
  rejected (PyPI `kubernetes-validate --strict`), both as built by kustomize (`kubectl kustomize`,
  when kubectl is installed) and file by file;
- the service's own settings parser accepts the ConfigMap's config file (`serve --check-config`).

Our own consistency checks (what a schema cannot see): selectors match pod labels, probe and
annotation ports are container ports, the grace period covers preStop + drain, the Job's
`completions` equals the COUNT of its `--shard`, every referenced ConfigMap/Secret key exists, and
the Dockerfile is multi-stage, non-root, health-checked, and copies only paths that exist.

usage: check_deploy.py BINARY
"""

import os
import re
import shutil
import subprocess
import sys
import tempfile
import tomllib

import yaml

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
K8S = os.path.join(ROOT, "deploy", "kubernetes")
failures = []


def check(condition, message):
    print(("ok   " if condition else "FAIL ") + message)
    if not condition:
        failures.append(message)


def validate(path):
    result = subprocess.run(
        ["kubernetes-validate", "--strict", "--kubernetes-version", "1.37.0", path],
        capture_output=True,
        text=True,
    )
    return result.returncode == 0, (result.stdout + result.stderr).strip()


def main():
    binary = sys.argv[1]
    with open(os.path.join(K8S, "kustomization.yaml")) as f:
        kustomization = yaml.safe_load(f)
    listed = kustomization["resources"]
    on_disk = sorted(
        n for n in os.listdir(K8S) if n.endswith(".yaml") and n != "kustomization.yaml"
    )
    check(
        sorted(listed + ["secret.example.yaml"]) == on_disk,
        f"kustomization lists every manifest but the example Secret: {listed}",
    )

    # 1. Schemas, file by file (the example Secret too: it must be applyable).
    for name in on_disk:
        ok, output = validate(os.path.join(K8S, name))
        check(ok, f"kubernetes-validate --strict {name}" + ("" if ok else f": {output}"))
    # A manifest with an unknown field must fail: the validator is really strict.
    with tempfile.TemporaryDirectory() as tmp:
        bad = os.path.join(tmp, "bad.yaml")
        with open(os.path.join(K8S, "deployment.yaml")) as f:
            doc = yaml.safe_load(f)
        doc["spec"]["template"]["spec"]["containers"][0]["readinessProbe"]["httpGett"] = {}
        with open(bad, "w") as f:
            yaml.safe_dump(doc, f)
        ok, _ = validate(bad)
        check(not ok, "a misspelt probe field is rejected by the strict validation")

        # 2. The kustomize build, when kubectl (with its built-in kustomize) is here.
        if shutil.which("kubectl"):
            built = os.path.join(tmp, "built.yaml")
            result = subprocess.run(
                ["kubectl", "kustomize", K8S], capture_output=True, text=True
            )
            check(result.returncode == 0, "kubectl kustomize deploy/kubernetes builds")
            with open(built, "w") as f:
                f.write(result.stdout)
            ok, output = validate(built)
            check(ok, "the kustomize build validates" + ("" if ok else f": {output}"))
            docs = [d for d in yaml.safe_load_all(result.stdout) if d]
            check(
                all(
                    d["metadata"].get("namespace") == "arcwright"
                    for d in docs
                    if d["kind"] != "Namespace"
                ),
                "every built resource lands in namespace arcwright",
            )
        else:
            print("skip kubectl kustomize (kubectl not installed; files validated one by one)")

    docs = {}
    for name in listed:
        with open(os.path.join(K8S, name)) as f:
            for doc in yaml.safe_load_all(f):
                if doc:
                    docs[(doc["kind"], doc["metadata"]["name"])] = doc
    with open(os.path.join(K8S, "secret.example.yaml")) as f:
        secret = yaml.safe_load(f)
    config_map = docs[("ConfigMap", "arcwright-config")]
    deployment = docs[("Deployment", "arcwright")]
    pod = deployment["spec"]["template"]
    container = pod["spec"]["containers"][0]
    labels = pod["metadata"]["labels"]
    ports = {p["name"]: p["containerPort"] for p in container["ports"]}

    # 3. Cross-references.
    def selects(selector):
        return all(labels.get(k) == v for k, v in selector.items())

    check(
        selects(deployment["spec"]["selector"]["matchLabels"]),
        "Deployment selector matches its pod labels",
    )
    for (kind, name), doc in docs.items():
        if kind == "Service":
            check(selects(doc["spec"]["selector"]), f"Service {name} selects the service pods")
            for port in doc["spec"]["ports"]:
                check(
                    port["targetPort"] in ports,
                    f"Service {name} targets container port {port['targetPort']}",
                )
        if kind == "PodDisruptionBudget":
            check(selects(doc["spec"]["selector"]["matchLabels"]), f"PDB {name} selects the pods")
        if kind == "HorizontalPodAutoscaler":
            target = doc["spec"]["scaleTargetRef"]
            check(
                (target["kind"], target["name"]) in docs,
                f"HPA {name} scales an existing {target['kind']} {target['name']}",
            )
            check(
                doc["spec"]["minReplicas"] >= 2,
                "HPA keeps at least 2 replicas (the PDB can then always allow one disruption)",
            )
    annotations = pod["metadata"]["annotations"]
    check(
        annotations.get("prometheus.io/scrape") == "true"
        and int(annotations["prometheus.io/port"]) == ports["http"]
        and annotations["prometheus.io/path"] == "/metrics",
        "Prometheus scrape annotations point at the HTTP port's /metrics",
    )
    check(
        container["readinessProbe"]["httpGet"]["path"] == "/readyz"
        and container["readinessProbe"]["httpGet"]["port"] in ("http", ports["http"]),
        "readiness probe: GET /readyz on the HTTP port",
    )
    check(
        container["livenessProbe"]["grpc"]["port"] == ports["grpc"],
        "liveness probe: gRPC health on the gRPC port",
    )
    check(
        "cpu" in container["resources"]["requests"]
        and "memory" in container["resources"]["requests"],
        "CPU and memory requests are set",
    )

    settings = tomllib.loads(config_map["data"]["arcwright.conf"])  # Python's standard TOML reader
    pre_stop = container["lifecycle"]["preStop"]["exec"]["command"]
    pause = float(pre_stop[1]) if pre_stop[0] == "sleep" else 0.0
    grace = float(settings["grace-seconds"])
    period = pod["spec"]["terminationGracePeriodSeconds"]
    check(
        period >= pause + grace + 5,
        f"terminationGracePeriodSeconds {period} covers preStop {pause} s + drain {grace} s + 5 s",
    )
    check(
        settings["http"].endswith(f":{ports['http']}")
        and settings["grpc"].endswith(f":{ports['grpc']}"),
        "config file listens on the container ports",
    )
    mounts = {m["name"]: m["mountPath"] for m in container["volumeMounts"]}
    check(
        settings["admin-token-file"].startswith(mounts["secrets"] + "/"),
        "admin token file lies in the mounted Secret",
    )
    check(
        settings["cache-dir"] == mounts["model-cache"],
        "model cache is the writable emptyDir (the root filesystem is read-only)",
    )

    def env_refs(spec):
        for c in spec["containers"]:
            for env in c.get("env", []):
                source = env.get("valueFrom", {})
                if "configMapKeyRef" in source:
                    yield "configmap", source["configMapKeyRef"]
                if "secretKeyRef" in source:
                    yield "secret", source["secretKeyRef"]

    job = docs[("Job", "arcwright-parse-corpus")]
    for spec_owner, spec in (("Deployment", pod["spec"]), ("Job", job["spec"]["template"]["spec"])):
        for kind, ref in env_refs(spec):
            if kind == "configmap":
                ok = ref["name"] == "arcwright-config" and ref["key"] in config_map["data"]
            else:
                ok = ref["name"] == "arcwright-secrets" and ref["key"] in secret["stringData"]
            check(ok, f"{spec_owner} env reference {kind} {ref['name']}/{ref['key']} exists")
    for volume in pod["spec"]["volumes"]:
        if "secret" in volume:
            for item in volume["secret"]["items"]:
                check(item["key"] in secret["stringData"], f"Secret key {item['key']} exists")

    args = job["spec"]["template"]["spec"]["containers"][0]["args"]
    shard = args[args.index("--shard") + 1]
    match = re.fullmatch(r"\$\(JOB_COMPLETION_INDEX\)/(\d+)", shard)
    check(
        job["spec"]["completionMode"] == "Indexed"
        and match is not None
        and int(match.group(1)) == job["spec"]["completions"],
        f"Indexed Job: --shard {shard} matches completions {job['spec']['completions']}",
    )

    # 4. The service accepts the ConfigMap's settings (the token file is swapped for a local one).
    with tempfile.TemporaryDirectory() as tmp:
        conf = os.path.join(tmp, "arcwright.conf")
        with open(conf, "w") as f:
            f.write(config_map["data"]["arcwright.conf"])
        token = os.path.join(tmp, "admin-token")
        with open(token, "w") as f:
            f.write("t" * 32)
        env = {k: v for k, v in os.environ.items() if not k.startswith("ARCWRIGHT_")}
        env["ARCWRIGHT_THREADS"] = "2"  # what resourceFieldRef requests.cpu yields for "2"

        def check_config():
            return subprocess.run(
                [binary, "serve", "--config", conf, "--admin-token-file", token, "--check-config"],
                capture_output=True, text=True, env=env,
            )

        result = check_config()
        check(
            result.returncode == 0 and "s3://arcwright-models/production" in result.stdout,
            "arcwright serve --check-config accepts the ConfigMap's settings"
            + ("" if result.returncode == 0 else f": {result.stderr.strip()}"),
        )
        check("t" * 32 not in result.stdout, "--check-config does not print the admin token")
        with open(conf, "a") as f:
            f.write("max-tokns = 10\n")
        result = check_config()
        check(
            result.returncode == 2 and "unknown setting" in result.stderr,
            f"a misspelt setting is refused with its line: {result.stderr.strip()}",
        )

    # 5. The image definition.
    with open(os.path.join(ROOT, "deploy", "Dockerfile")) as f:
        dockerfile = f.read()
    instructions = [
        line.strip() for line in dockerfile.replace("\\\n", " ").splitlines()
        if line.strip() and not line.strip().startswith("#")
    ]
    stages = [i for i in instructions if i.upper().startswith("FROM ")]
    check(len(stages) >= 2, f"multi-stage build ({len(stages)} stages)")
    final = instructions[instructions.index(stages[-1]):]
    users = [i.split()[1] for i in final if i.upper().startswith("USER ")]
    check(bool(users) and users[-1].split(":")[0] not in ("0", "root"), f"runs as {users}")
    check(any(i.upper().startswith("HEALTHCHECK ") for i in final), "has a HEALTHCHECK")
    health = next(i for i in final if i.upper().startswith("HEALTHCHECK "))
    check('"arcwright", "health"' in health, "the health check uses `arcwright health`")
    for instruction in instructions:
        if instruction.upper().startswith("COPY ") and "--from=" not in instruction:
            sources = instruction.split()[1:-1]
            for source in sources:
                check(os.path.exists(os.path.join(ROOT, source)), f"COPY source {source} exists")
    with open(os.path.join(ROOT, ".dockerignore")) as f:
        ignored = {line.strip() for line in f if line.strip() and not line.startswith("#")}
    check({"target/", ".git/", ".cache/"} <= ignored, ".dockerignore keeps target/, .git/, .cache/ out")

    # `arcwright health` itself: a refused connection is exit 1 with the address named.
    result = subprocess.run(
        [binary, "health", "--grpc", "127.0.0.1:9", "--timeout", "1"],
        capture_output=True,
        text=True,
    )
    check(
        result.returncode == 1 and "127.0.0.1:9" in result.stderr,
        "arcwright health on a closed port fails with exit 1",
    )

    print(f"\n{len(failures)} failure(s)")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
