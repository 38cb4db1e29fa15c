#!/usr/bin/env bash
# The project's whole test run: installs what the tests need (idempotently), builds, runs the
# Rust tests and the outside reference checks. Exit code 0 only if every step passes.
#
# Environment: ARCWRIGHT_CACHE (default ./.cache) holds downloaded data and wheels; never in git.
set -uo pipefail
cd "$(dirname "$0")/.."
ROOT=$PWD
CACHE=${ARCWRIGHT_CACHE:-$ROOT/.cache}
BIN=$ROOT/target/release/arcwright
mkdir -p "$CACHE"

passed=0
failed=0
failed_steps=()
step() {
    local name=$1
    shift
    echo "=== $name"
    local started=$SECONDS
    if "$@"; then
        passed=$((passed + 1))
        echo "--- ok: $name ($((SECONDS - started)) s)"
    else
        failed=$((failed + 1))
        failed_steps+=("$name")
        echo "--- FAILED: $name ($((SECONDS - started)) s)"
    fi
}

install_python_packages() {
    # Pinned versions of the outside references.
    python3 -m pip install --quiet --disable-pip-version-check --root-user-action=ignore \
        "networkx==3.6.1" "conllu==6.0.0" "moto[server]==5.2.1" \
        "grpcio-tools==1.76.0" "grpcio-reflection==1.76.0" "grpcio-health-checking==1.76.0" \
        "schemathesis==4.32.5" "kubernetes-validate==1.37.0" "PyYAML==6.0.3"
}

install_node_packages() {
    # playwright-core (pinned in tests/ui/package-lock.json) drives Debian's Chromium.
    if [[ -d tests/ui/node_modules/playwright-core ]]; then
        return 0
    fi
    (cd tests/ui && npm ci --no-audit --no-fund --loglevel=error)
}

install_debian_packages() {
    # Prometheus and promtool (telemetry checks), nginx (load balancer in the scale-out check),
    # Chromium (the console's browser test).
    local missing=()
    command -v prometheus >/dev/null && command -v promtool >/dev/null || missing+=(prometheus)
    [[ -x /usr/sbin/nginx ]] || command -v nginx >/dev/null || missing+=(nginx-light)
    [[ -x /usr/bin/chromium ]] || missing+=(chromium)
    if ((${#missing[@]} == 0)); then
        return 0
    fi
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq && apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null || return 1
    # Package scripts may start the system-wide nginx where services are allowed to start; the
    # tests run their own, on loopback ports, so stop that one.
    if pgrep -x nginx >/dev/null && [[ -e /run/nginx.pid ]]; then
        /usr/sbin/nginx -s quit 2>/dev/null || true
    fi
}

fetch_turkish_treebank() {
    # PyPI `turkish-treebanks` (Apache-2.0): two CoNLL-U files. Kept in the cache, never in git.
    local dir=$CACHE/turkish-treebanks
    if [[ -s $dir/data/web.conllu && -s $dir/data/wiki.conllu ]]; then
        return 0
    fi
    mkdir -p "$CACHE/wheels" "$dir"
    python3 -m pip download --quiet --disable-pip-version-check --no-deps \
        -d "$CACHE/wheels" "turkish-treebanks==1.0.0" || return 1
    python3 - "$CACHE/wheels" "$dir" <<'PY'
import glob, sys, zipfile
wheel = sorted(glob.glob(sys.argv[1] + "/turkish_treebanks-1.0.0-*.whl"))[0]
with zipfile.ZipFile(wheel) as archive:
    for name in archive.namelist():
        if name.startswith("data/") and name.endswith(".conllu"):
            archive.extract(name, sys.argv[2])
PY
}

TREEBANK=$CACHE/turkish-treebanks/data

step "install python reference packages" install_python_packages
step "install Debian packages (prometheus, nginx-light, chromium)" install_debian_packages
step "install node packages (playwright-core)" install_node_packages
step "fetch the Turkish treebank" fetch_turkish_treebank
step "cargo fmt --check" cargo fmt --all -- --check
step "cargo clippy -D warnings" cargo clippy --workspace --all-targets --release --quiet -- -D warnings
step "cargo build --release" cargo build --workspace --release --quiet
step "cargo test (workspace)" cargo test --workspace --release --quiet
step "benchmarks compile" cargo bench --workspace --no-run --quiet
step "networkx maximum_spanning_arborescence vs decode" \
    python3 tests/reference/check_networkx.py "$BIN"
step "conllu package vs our reader, byte-identical rewrite (Turkish treebank)" \
    python3 tests/reference/check_conllu.py "$BIN" "$TREEBANK/web.conllu" "$TREEBANK/wiki.conllu"
step "arcwright conllu check on the Turkish treebank" \
    "$BIN" conllu check "$TREEBANK/web.conllu" "$TREEBANK/wiki.conllu"

step "train and evaluate on the Turkish treebank (floors, crossing arcs, reproducibility)" \
    python3 tests/reference/check_turkish_training.py "$BIN" "$TREEBANK" "$CACHE/work/turkish" 8

step "model store on local disk and on an S3-compatible server (moto on 127.0.0.1)" \
    python3 tests/reference/check_store_s3.py "$BIN" "$CACHE/work/turkish/model-non-projective" \
        "$CACHE/work/turkish/split/test.conllu" "$CACHE/work/store"

step "service end to end: Python gRPC stubs from proto/, HTTP, hot swap under load, SIGTERM" \
    python3 tests/reference/check_service.py "$BIN" "$CACHE/work/turkish/model-non-projective" "$CACHE/work/service"
step "schemathesis against /v1/openapi.json (no 5xx, replies match the schema)" \
    python3 tests/reference/check_openapi.py "$BIN" "$CACHE/work/openapi"

step "promtool check rules (deploy/prometheus)" promtool check rules deploy/prometheus/rules/recording.yml deploy/prometheus/rules/alerts.yml
step "promtool test rules (deploy/prometheus/tests)" bash -c "cd deploy/prometheus/tests && promtool test rules rules_test.yml"
step "Prometheus scrapes arcwright serve: promtool check metrics, scaling exponents, per-bucket p99" \
    python3 tests/reference/check_prometheus.py "$BIN" "$CACHE/work/prometheus"

step "load tests: smoke run of every scenario, report, accounting against server counters" \
    python3 tests/reference/check_load.py "$BIN" "$ROOT/target/release/arcwright-load" "$CACHE/work/load"

step "deployment files: Kubernetes schemas (kubernetes-validate --strict), cross-references, image" \
    python3 tests/reference/check_deploy.py "$BIN"
step "scale-out: 3 replicas behind nginx on one S3 store, promote, SIGTERM; sharded corpus parse" \
    python3 tests/reference/check_scaleout.py "$BIN" "$ROOT/target/release/arcwright-load" \
        "$CACHE/work/turkish/model-non-projective" "$CACHE/work/turkish/split/test.conllu" "$CACHE/work/scaleout"

step "operator console in headless Chromium (playwright-core): served model, arcs = API, decoders, promote, bad input" \
    python3 tests/reference/check_console.py "$BIN" "$CACHE/work/turkish/model-non-projective" \
        "$CACHE/work/turkish/split/test.conllu" "$CACHE/work/console" "$ROOT/test-output/ui"

echo
if ((failed > 0)); then
    printf 'failed step: %s\n' "${failed_steps[@]}"
fi
echo "$passed passed, $failed failed"
((failed == 0))
