#!/usr/bin/env bash
# The project's whole test run: installs what the tests need (idempotently), builds, runs the
# Rust tests, the outside reference checks (tests/oracles/) and the end-to-end checks
# (tests/e2e/). Exit code 0 only if every step passes.
#
# Usage: tests/run.sh [--no-install] [--full] [--list] [STEP ...]
#   STEP ...      run only these steps (names from --list), plus what they need (the build, and
#                 the trained Turkish models when a step uses them and they are not cached yet)
#   --full        also run the long steps (marked "full run" in --list): the neural model on the
#                 Turkish treebank, about 15 minutes on 2 cores
#   --no-install  install nothing: check that every package is present and say what is missing
#   --list        print the step names and exit
#
# Environment: ARCWRIGHT_CACHE (default ./.cache) holds downloaded data, trained models and work
# folders; never in git.
set -uo pipefail
cd "$(dirname "$0")/.."
ROOT=$PWD
CACHE=${ARCWRIGHT_CACHE:-$ROOT/.cache}
BIN=$ROOT/target/release/arcwright
LOAD_BIN=$ROOT/target/release/arcwright-load
TREEBANK=$CACHE/turkish-treebanks/data
TURKISH=$CACHE/work/turkish
MODEL=$TURKISH/model-non-projective
TEST_SPLIT=$TURKISH/split/test.conllu
mkdir -p "$CACHE"

# Pinned versions of the outside references and test tools.
PYTHON_PACKAGES=("networkx==3.6.1" "conllu==6.0.0" "moto[server]==5.2.1"
    "grpcio-tools==1.76.0" "grpcio-reflection==1.76.0" "grpcio-health-checking==1.76.0"
    "schemathesis==4.32.5" "kubernetes-validate==1.37.0" "PyYAML==6.0.3")
MACHETE_VERSION=0.9.2

install=1
full=0
selected=()
for argument in "$@"; do
    case $argument in
        --no-install) install=0 ;;
        --list) list=1 ;;
        --full) full=1 ;;
        -*) echo "unknown option $argument (see the head of tests/run.sh)" >&2; exit 2 ;;
        *) selected+=("$argument") ;;
    esac
done

passed=0
failed=0
failed_steps=()
run_step() {
    local description=$1
    shift
    echo "=== $description"
    local started=$SECONDS
    if "$@"; then
        passed=$((passed + 1))
        echo "--- ok: $description ($((SECONDS - started)) s)"
    else
        failed=$((failed + 1))
        failed_steps+=("$description")
        echo "--- FAILED: $description ($((SECONDS - started)) s)"
    fi
}

# --- Installing (or, with --no-install, checking) what the tests need -------------------------

python_packages() {
    if ((install)); then
        python3 -m pip install --quiet --disable-pip-version-check --root-user-action=ignore \
            "${PYTHON_PACKAGES[@]}"
        return
    fi
    python3 - "${PYTHON_PACKAGES[@]}" <<'PY'
import importlib.metadata, re, sys
missing = []
for pin in sys.argv[1:]:
    name, version = re.sub(r"\[.*\]", "", pin).split("==")
    try:
        found = importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        found = None
    if found != version:
        missing.append(f"{pin} (found {found or 'none'})")
if missing:
    print("missing PyPI packages:", ", ".join(missing))
    sys.exit(1)
PY
}

debian_packages() {
    # Prometheus and promtool (telemetry checks), nginx (load balancer in the scale-out check),
    # Chromium (the console's browser test).
    local missing=()
    command -v prometheus >/dev/null && command -v promtool >/dev/null || missing+=(prometheus)
    [[ -x /usr/sbin/nginx ]] || command -v nginx >/dev/null || missing+=(nginx-light)
    [[ -x /usr/bin/chromium ]] || missing+=(chromium)
    ((${#missing[@]} == 0)) && return 0
    if ((!install)); then
        echo "missing Debian packages: ${missing[*]}"
        return 1
    fi
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq && apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null || return 1
    # Package scripts may start the system-wide nginx where services are allowed to start; the
    # tests run their own, on loopback ports, so stop that one.
    if pgrep -x nginx >/dev/null && [[ -e /run/nginx.pid ]]; then
        /usr/sbin/nginx -s quit 2>/dev/null || true
    fi
}

node_packages() {
    # playwright-core (pinned in tests/ui/package-lock.json) drives Debian's Chromium.
    [[ -d tests/ui/node_modules/playwright-core ]] && return 0
    if ((!install)); then
        echo "missing npm packages: tests/ui/node_modules (npm ci in tests/ui)"
        return 1
    fi
    (cd tests/ui && npm ci --no-audit --no-fund --loglevel=error)
}

cargo_machete() {
    command -v cargo-machete >/dev/null && return 0
    if ((!install)); then
        echo "missing: cargo-machete (cargo install cargo-machete --locked)"
        return 1
    fi
    cargo install --quiet --locked "cargo-machete@$MACHETE_VERSION"
}

turkish_treebank() {
    # PyPI `turkish-treebanks` (Apache-2.0): two CoNLL-U files. Kept in the cache, never in git.
    [[ -s $TREEBANK/web.conllu && -s $TREEBANK/wiki.conllu ]] && return 0
    if ((!install)); then
        echo "missing: the Turkish treebank in $TREEBANK"
        return 1
    fi
    mkdir -p "$CACHE/wheels" "$TREEBANK"
    python3 -m pip download --quiet --disable-pip-version-check --no-deps \
        -d "$CACHE/wheels" "turkish-treebanks==1.0.0" || return 1
    python3 - "$CACHE/wheels" "$CACHE/turkish-treebanks" <<'PY'
import glob, sys, zipfile
wheel = sorted(glob.glob(sys.argv[1] + "/turkish_treebanks-1.0.0-*.whl"))[0]
with zipfile.ZipFile(wheel) as archive:
    for name in archive.namelist():
        if name.startswith("data/") and name.endswith(".conllu"):
            archive.extract(name, sys.argv[2])
PY
}

# --- The steps: name, what it needs, description, command ------------------------------------
# Needs: "install" (packages), "build" (release binaries), "model" (trained Turkish models).

STEPS=()
declare -A NEEDS DESCRIPTION COMMAND
define() {
    local name=$1 needs=$2 description=$3
    shift 3
    STEPS+=("$name")
    NEEDS[$name]=$needs
    DESCRIPTION[$name]=$description
    COMMAND[$name]=$(printf '%q ' "$@")
}

define python-packages "" "PyPI packages (outside references, gRPC tools, moto, schemathesis)" python_packages
define debian-packages "" "Debian packages (prometheus, nginx-light, chromium)" debian_packages
define node-packages "" "npm packages (playwright-core)" node_packages
define cargo-machete "" "cargo-machete $MACHETE_VERSION" cargo_machete
define treebank "" "the Turkish treebank (PyPI turkish-treebanks)" turkish_treebank
define fmt "" "cargo fmt --check" cargo fmt --all -- --check
define clippy "" "cargo clippy -D warnings" cargo clippy --workspace --all-targets --release --quiet -- -D warnings
define unused-dependencies "install" "no unused dependencies (cargo-machete)" cargo machete
define build "" "cargo build --release" cargo build --workspace --release --quiet
define unit "" "cargo test (workspace)" cargo test --workspace --release --quiet
define benches "" "benchmarks compile" cargo bench --workspace --no-run --quiet
define networkx "install build" "networkx maximum_spanning_arborescence vs decode" \
    python3 tests/oracles/check_networkx.py "$BIN"
define conllu "install build" "conllu package vs our reader, byte-identical rewrite (Turkish treebank)" \
    python3 tests/oracles/check_conllu.py "$BIN" "$TREEBANK/web.conllu" "$TREEBANK/wiki.conllu"
define conllu-check "install build" "arcwright conllu check on the Turkish treebank" \
    "$BIN" conllu check "$TREEBANK/web.conllu" "$TREEBANK/wiki.conllu"
define turkish "install build" "train and evaluate on the Turkish treebank (floors, crossing arcs, reproducibility)" \
    python3 tests/oracles/check_turkish_training.py "$BIN" "$TREEBANK" "$TURKISH" 8
define calibration "install build model" "calibrated confidences: ECE recomputed by Guo et al.'s formula, bound 0.03, every word in [0, 1], the logistic map optimal on dev; UAS/LAS recomputed (conllu package)" \
    python3 tests/oracles/check_calibration.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/calibration" "$TURKISH/split/dev.conllu"
define sentence-split "install build model" "sentence boundaries of raw text against the Turkish test split (conllu package), with and without learned abbreviations" \
    python3 tests/oracles/check_sentence_split.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/sentence-split"
define pipeline-identity "install build model" "service replies equal the library's, bit for bit (Turkish test split, HTTP and gRPC)" \
    python3 tests/e2e/check_pipeline_identity.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/identity"
define clients "install build model" "the Python and Rust clients against a real server: batches, retries on UNAVAILABLE and RESOURCE_EXHAUSTED, equal to arcwright parse" \
    python3 tests/e2e/check_clients.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/clients"
define store "install build model" "model store on local disk and on an S3-compatible server (moto on 127.0.0.1)" \
    python3 tests/e2e/check_store_s3.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/store"
define rollout "install build model" "safe rollout under load: a worse candidate refused by the agreement gate, a slower one by the latency gate (store policy), a good one promoted; automatic rollback of a failing version; three replicas on one S3 store take one decision; zero failed requests" \
    python3 tests/e2e/check_rollout.py "$BIN" "$MODEL" "$TURKISH/split" "$CACHE/work/rollout"
define neural "install build" "the neural kind on demo data: trained in a bounded time, eval and parse, served beside a linear version and swapped both ways under load with zero failed requests" \
    python3 tests/e2e/check_neural.py "$BIN" "$CACHE/work/neural"
define neural-turkish "full install build model" "full run: the neural kind on the Turkish treebank: floors UAS/LAS with predicted tags, calibration bound, training time and memory, parse speed" \
    python3 tests/oracles/check_neural_turkish.py "$BIN" "$TURKISH/split" "$CACHE/work/neural-turkish"
define service "install build model" "service end to end: Python gRPC stubs from proto/, HTTP, hot swap under load, SIGTERM" \
    python3 tests/e2e/check_service.py "$BIN" "$MODEL" "$CACHE/work/service"
define openapi "install build" "schemathesis against /v1/openapi.json (no 5xx, replies match the schema)" \
    python3 tests/oracles/check_openapi.py "$BIN" "$CACHE/work/openapi"
define promtool-rules "install" "promtool check rules (deploy/prometheus)" \
    promtool check rules deploy/prometheus/rules/recording.yml deploy/prometheus/rules/alerts.yml
define promtool-tests "install" "promtool test rules (deploy/prometheus/tests)" \
    bash -c "cd deploy/prometheus/tests && promtool test rules rules_test.yml"
define prometheus "install build" "Prometheus scrapes arcwright serve: promtool check metrics, the decoder probe under short traffic, its verdict flipped and alert fired by a slowed decoder, scaling exponents, cost models, per-bucket p99" \
    python3 tests/e2e/check_prometheus.py "$BIN" "$CACHE/work/prometheus"
define capacity "install build model" "capacity planning: sentences/s per core predicted from the cost models of other traffic, against a measured run (Turkish test split, within 20%)" \
    python3 tests/e2e/check_capacity.py "$BIN" "$LOAD_BIN" "$MODEL" "$TURKISH/split" "$CACHE/work/capacity"
define load "install build" "load tests: smoke run of every scenario, report, accounting against server counters" \
    python3 tests/e2e/check_load.py "$BIN" "$LOAD_BIN" "$CACHE/work/load"
define deploy "install build" "deployment files: Kubernetes schemas (kubernetes-validate --strict), cross-references, image" \
    python3 tests/e2e/check_deploy.py "$BIN"
define scaleout "install build model" "scale-out: 3 replicas behind nginx on one S3 store, promote, SIGTERM; sharded corpus parse" \
    python3 tests/e2e/check_scaleout.py "$BIN" "$LOAD_BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/scaleout"
define console "install build model" "operator console in headless Chromium (playwright-core): served model, arcs = API, decoders, promote, bad input" \
    python3 tests/e2e/check_console.py "$BIN" "$MODEL" "$TEST_SPLIT" "$CACHE/work/console" "$ROOT/test-output/ui"

if [[ -n ${list:-} ]]; then
    for name in "${STEPS[@]}"; do
        printf '%-22s %s\n' "$name" "${DESCRIPTION[$name]}"
    done
    exit 0
fi

# --- Choosing the steps -----------------------------------------------------------------------

declare -A chosen
if ((${#selected[@]} == 0)); then
    for name in "${STEPS[@]}"; do
        [[ " ${NEEDS[$name]} " == *" full "* ]] && ((!full)) && continue
        chosen[$name]=1
    done
else
    for name in "${selected[@]}"; do
        [[ -n ${DESCRIPTION[$name]:-} ]] || { echo "unknown step $name; see tests/run.sh --list" >&2; exit 2; }
        chosen[$name]=1
        for need in ${NEEDS[$name]}; do
            case $need in
                install) for s in python-packages debian-packages node-packages cargo-machete treebank; do chosen[$s]=1; done ;;
                build) chosen[build]=1 ;;
                model) chosen[build]=1
                    [[ -s $MODEL/model.json && -s $TEST_SPLIT ]] || { chosen[treebank]=1; chosen[turkish]=1; } ;;
            esac
        done
    done
fi

for name in "${STEPS[@]}"; do
    [[ -n ${chosen[$name]:-} ]] || continue
    eval "run_step \"\${DESCRIPTION[$name]}\" ${COMMAND[$name]}"
done

echo
if ((failed > 0)); then
    printf 'failed step: %s\n' "${failed_steps[@]}"
fi
echo "$passed passed, $failed failed"
((failed == 0))
