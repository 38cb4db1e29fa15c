"""Safe rollout end to end: candidates judged on shadow traffic under load, refused or promoted
by the gates, and one decision taken by three replicas sharing an S3-compatible store.

Live is the Turkish model the run trained. Three candidates, trained here on the Turkish train
split:
- worse: one epoch over 300 sentences (linear): agreement with live far below the gate;
- good: the linear kind again with another seed and 5 epochs: agrees with live on most heads
  at about the same CPU time;
- slower: the neural kind, 2 layers of 64, one epoch: several times live's CPU time.

1. One replica, `--rollout automatic`, gates 200 sentences, head agreement 0.85, latency ratio
   1.5, half the requests shadowed. Steady HTTP traffic of the test split's sentences from four
   client threads throughout. `worse` as candidate must be refused for agreement (live stays);
   then `good` must be promoted (live moves, the replica serves it; the report is the same over
   gRPC). Then the model's rollout policy in the store turns the agreement gate off
   (`store policy --min-agreement 0`) and `slower` as candidate against the new live is refused
   for latency. No client request may fail.
   Then a version promoted by hand whose requests fail (test switch, 30%) is rolled back
   automatically after 3 s outside its band, the reason in the audit log, no other failure.
2. Three replicas on one store on moto's S3 server, all `--rollout automatic`, traffic spread
   over them; `good` as candidate of the original live: exactly one promote entry in the audit
   log, and every replica ends on the same live version.

Bounded: each wait at most 120 s, the client threads stop with the step. Everything listens on
127.0.0.1.

Usage: check_rollout.py BINARY MODEL_DIR SPLIT_DIR WORK_DIR
"""
import json
import os
import shutil
import subprocess
import sys
import threading
import time

import conllu

import check_service as cs
from check_store_s3 import start_moto


def gates(min_agreement="0.85"):
    return ("--rollout", "automatic", "--rollout-min-sentences", "200", "--rollout-min-agreement", min_agreement,
            "--rollout-max-latency-ratio", "1.5", "--shadow-sample", "0.5", "--probe-seconds", "0")


class Traffic:
    """Client threads parsing test sentences round-robin over the replicas until stopped;
    counts replies and failures."""

    def __init__(self, bases, sentences, threads=4):
        self.bases, self.sentences = bases, sentences
        self.ok = self.failed = self.injected = 0
        self.errors = []
        self.lock = threading.Lock()
        self.stop = threading.Event()
        self.threads = [threading.Thread(target=self.run, args=(i,)) for i in range(threads)]
        for t in self.threads:
            t.start()

    def run(self, offset):
        i = offset
        deadline = time.time() + 600
        while not self.stop.is_set() and time.time() < deadline:
            base = self.bases[i % len(self.bases)]
            tokens = self.sentences[i % len(self.sentences)]
            i += len(self.threads)
            try:
                status, reply = cs.http(base, "/v1/parse", {"tokens": tokens}, timeout=30)
            except Exception as e:  # a refused connection is a failure too
                status, reply = 0, str(e)
            with self.lock:
                if status == 200:
                    self.ok += 1
                elif "injected failure" in str(reply):
                    self.injected += 1
                else:
                    self.failed += 1
                    self.errors.append((status, str(reply)[:200]))

    def finish(self):
        self.stop.set()
        for t in self.threads:
            t.join()
        return self.ok, self.failed, self.errors[:3]


def store_cli(binary, *args, env=None):
    out = subprocess.run([binary, "store", *args], capture_output=True, text=True, env=env, timeout=300)
    if out.returncode != 0:
        raise SystemExit(f"arcwright store {' '.join(args[:1])} failed: {out.stderr}")
    return out.stdout


def wait_decision(base, candidate, seconds=120):
    """The rollout report once the comparison with `candidate` has a decision (or the last one)."""
    deadline = time.time() + seconds
    report = None
    while time.time() < deadline:
        status, report = cs.http(base, "/v1/models/tr/rollout")
        shadow = (report or {}).get("shadow") or {}
        if shadow.get("candidate_version") == candidate and shadow.get("decision") not in (None, "deciding"):
            return report
        time.sleep(0.5)
    return report


def train(binary, work, split):
    blocks = [b for b in open(os.path.join(split, "train.conllu"), encoding="utf-8").read().split("\n\n") if b.strip()]
    few = os.path.join(work, "few.conllu")
    with open(few, "w", encoding="utf-8") as f:
        f.write("\n\n".join(blocks[:300]) + "\n\n")
    train_file = os.path.join(split, "train.conllu")
    runs = {
        "worse": ["--train", few, "--epochs", "1"],
        "good": ["--train", train_file, "--epochs", "5", "--seed", "2"],
        "slower": ["--train", train_file, "--kind", "neural", "--hidden", "64", "--layers", "2", "--epochs", "1"],
    }
    models = {}
    for name, args in runs.items():
        out = os.path.join(work, name)
        started = time.time()
        result = subprocess.run([binary, "train", *args, "--out", out], capture_output=True, text=True, timeout=600)
        if result.returncode != 0:
            raise SystemExit(f"training {name} failed: {result.stderr[-500:]}")
        print(f"candidate {name} trained in {time.time() - started:.0f} s")
        models[name] = out
    return models


def main():
    binary, model, split, work = sys.argv[1:5]
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    checks = cs.Checks(report_passes=True)
    test = [[t["form"] for t in s if isinstance(t["id"], int)]
            for s in conllu.parse(open(os.path.join(split, "test.conllu"), encoding="utf-8").read())]
    models = train(binary, work, split)

    # 1. One replica, the three candidates in turn, under load.
    store = os.path.join(work, "store")
    live = cs.publish(binary, store, "tr", model)
    cs.promote(binary, store, "tr", live)
    versions = {name: cs.publish(binary, store, "tr", path) for name, path in models.items()}
    grpc_port = cs.free_port()
    replica, base = cs.start(binary, store, work, cs.free_port(), grpc_port, extra=gates())
    traffic = Traffic([base], test)
    try:
        store_cli(binary, "promote", "--store", store, "--name", "tr", "--version", versions["worse"],
                  "--alias", "candidate")
        report = wait_decision(base, versions["worse"])
        shadow = report["shadow"] or {}
        total = shadow.get("total") or {}
        print(f"worse: {total.get('sentences')} sentences shadowed, head agreement {total.get('head_agreement')}, "
              f"latency ratio {total.get('latency_ratio')}, shed {shadow.get('shed')}")
        checks.expect(shadow.get("decision") == "refused" and "head agreement" in (shadow.get("reason") or "")
                      and "latency ratio" not in (shadow.get("reason") or "").split("(")[0],
                      f"the worse candidate is refused by the agreement gate: {shadow.get('reason')}")
        checks.expect(report["live_version"] == live, "live stays where it was")

        store_cli(binary, "promote", "--store", store, "--name", "tr", "--version", versions["good"],
                  "--alias", "candidate")
        report = wait_decision(base, versions["good"])
        shadow = report["shadow"] or {}
        total = shadow.get("total") or {}
        print(f"good: {total.get('sentences')} sentences shadowed, head agreement {total.get('head_agreement')}, "
              f"latency ratio {total.get('latency_ratio')}, shed {shadow.get('shed')}")
        checks.expect(shadow.get("decision") == "promoted", f"the good candidate is promoted: {shadow.get('reason')}")
        time.sleep(1)
        # The same report over gRPC (ModelAdmin.GetRollout, Python stubs generated from proto/).
        cs.generate_stubs(os.path.join(work, "stubs"))
        import grpc
        from arcwright.v1 import parser_pb2 as pb, parser_pb2_grpc as rpc
        with grpc.insecure_channel(f"127.0.0.1:{grpc_port}") as channel:
            over_grpc = rpc.ModelAdminStub(channel).GetRollout(pb.GetRolloutRequest(name="tr"), timeout=10)
        checks.expect(over_grpc.candidate_version == versions["good"] and over_grpc.decision == "promoted"
                      and over_grpc.total.sentences >= 200 and over_grpc.total.head_agreement >= 0.85
                      and over_grpc.mode == "automatic",
                      f"gRPC GetRollout gives the same report ({over_grpc.total.sentences} sentences, "
                      f"decision {over_grpc.decision!r})")
        status, models_reply = cs.http(base, "/v1/models")
        serving = next(m for m in models_reply["models"] if m["name"] == "tr")["serving"]["version"]
        checks.expect(serving == versions["good"], f"the replica serves the promoted version ({serving})")

        # The model's policy in the store turns the agreement gate off for every replica.
        policy = json.loads(store_cli(binary, "policy", "--store", store, "--name", "tr", "--min-agreement", "0"))
        checks.expect(policy == {"min_agreement": 0.0}, f"the store keeps the model's rollout policy: {policy}")
        time.sleep(2)  # read by the replica at its next poll
        store_cli(binary, "promote", "--store", store, "--name", "tr", "--version", versions["slower"],
                  "--alias", "candidate")
        report = wait_decision(base, versions["slower"])
        shadow = report["shadow"] or {}
        total = shadow.get("total") or {}
        print(f"slower: {total.get('sentences')} sentences shadowed, head agreement {total.get('head_agreement')}, "
              f"latency ratio {total.get('latency_ratio')}, shed {shadow.get('shed')}")
        checks.expect(report["policy"]["min_agreement"] == 0 and report["policy"]["from_store"] == {"min_agreement": 0.0},
                      "the replica applies the store's policy over its own settings")
        checks.expect(shadow.get("decision") == "refused" and "latency ratio" in (shadow.get("reason") or "").split("(")[0],
                      f"the slower candidate is refused by the latency gate: {shadow.get('reason')}")
    finally:
        ok, failed, errors = traffic.finish()
        replica.terminate()
        replica.wait(timeout=30)
    checks.expect(ok > 0 and failed == 0, f"{ok} client requests during the rollouts, {failed} failed {errors}")
    log = json.loads(store_cli(binary, "history", "--store", store, "--name", "tr", "--json"))
    summary = [(e["action"], e["to"], e["actor"].split(":")[0]) for e in log]
    print("audit log:", [(a, {v: k for k, v in versions.items()}.get(t, t), who) for a, t, who in summary])
    checks.expect([a for a, _, who in summary if who == "replica"] == ["refused", "promote", "refused"]
                  and [t for _, t, who in summary if who == "replica"]
                  == [versions["worse"], versions["good"], versions["slower"]],
                  "the audit log holds the refusal, the promote and the refusal, in order, by the replicas")

    # 1b. Automatic rollback: a version promoted by hand whose requests fail (the test switch
    # --inject-failures fails 30% of them) is moved back to the version it replaced.
    bad = cs.publish(binary, store, "tr", models["worse"])
    watcher, watcher_base = cs.start(binary, store, work, cs.free_port(), cs.free_port(),
                                     extra=("--probe-seconds", "0", "--rollback-seconds", "3",
                                            "--inject-failures", f"{bad}=0.3", "--replica-id", "watcher"))
    traffic = Traffic([watcher_base], test, threads=2)
    served = None
    try:
        time.sleep(3)  # the serving version's own record, to compare the new one with
        store_cli(binary, "promote", "--store", store, "--name", "tr", "--version", bad, "--reason", "fault drill")
        deadline = time.time() + 60
        while time.time() < deadline:
            status, reply = cs.http(watcher_base, "/v1/models")
            served = next(m for m in reply["models"] if m["name"] == "tr")["serving"]["version"]
            log = json.loads(store_cli(binary, "history", "--store", store, "--name", "tr", "--json"))
            if served == versions["good"] and any(e["action"] == "rollback" for e in log):
                break
            time.sleep(0.5)
    finally:
        ok, failed, errors = traffic.finish()
        injected = traffic.injected
        watcher.terminate()
        watcher.wait(timeout=30)
    rollbacks = [e for e in log if e["action"] == "rollback"]
    print("rollback:", [(e["actor"], e["reason"]) for e in rollbacks])
    checks.expect(served == versions["good"] and len(rollbacks) == 1 and rollbacks[0]["from"] == bad
                  and rollbacks[0]["to"] == versions["good"] and "failure rate" in rollbacks[0]["reason"],
                  "the failing version was rolled back automatically, with the reason in the audit log")
    checks.expect(injected > 0 and failed == 0,
                  f"{ok} requests answered, {injected} failed by the test switch, {failed} other failures {errors}")

    # 2. Three replicas on one S3 store: one decision.
    moto, env, _ = start_moto(["models"])
    saved = dict(os.environ)
    replicas = []
    try:
        url = "s3://models/rollout"
        live = store_cli(binary, "publish", "--store", url, "--name", "tr", model, env=env).strip()
        store_cli(binary, "promote", "--store", url, "--name", "tr", "--version", live, env=env)
        good = store_cli(binary, "publish", "--store", url, "--name", "tr", models["good"], env=env).strip()
        os.environ.update(env)
        bases = []
        for k in range(3):
            replica_work = os.path.join(work, f"replica-{k}")
            os.makedirs(replica_work, exist_ok=True)
            proc, b = cs.start(binary, url, replica_work, cs.free_port(), cs.free_port(),
                               extra=(*gates(), "--replica-id", f"r{k}"))
            replicas.append(proc)
            bases.append(b)
        traffic = Traffic(bases, test)
        store_cli(binary, "promote", "--store", url, "--name", "tr", "--version", good, "--alias", "candidate", env=env)
        reports = [wait_decision(b, good) for b in bases]
        deadline = time.time() + 30
        while time.time() < deadline:
            served = [next(m for m in cs.http(b, "/v1/models")[1]["models"] if m["name"] == "tr")["serving"]["version"]
                      for b in bases]
            if served == [good] * 3:
                break
            time.sleep(0.5)
        ok, failed, errors = traffic.finish()
        decisions = [(r.get("shadow") or {}).get("decision") for r in reports]
        print("replica decisions:", decisions)
        checks.expect(served == [good] * 3, f"all three replicas serve the promoted version ({served})")
        log = json.loads(store_cli(binary, "history", "--store", url, "--name", "tr", "--json", env=env))
        promotes = [e for e in log if e["action"] == "promote" and e["alias"] == "live" and e["to"] == good]
        checks.expect(len(promotes) == 1 and promotes[0]["actor"].startswith("replica:"),
                      f"one promote entry in the audit log, by {[e['actor'] for e in promotes]}")
        checks.expect(ok > 0 and failed == 0, f"{ok} client requests across the three replicas, {failed} failed {errors}")
    finally:
        for proc in replicas:
            proc.terminate()
        for proc in replicas:
            proc.wait(timeout=30)
        os.environ.clear()
        os.environ.update(saved)
        moto.terminate()
    print(f"{checks.passed} checks passed, {len(checks.failures)} failed")
    sys.exit(1 if checks.failures else 0)


if __name__ == "__main__":
    main()
