"""One shard of the forecast CronJob: forecast this pod's workloads into ConfigMaps.

Runs in the floorcast image as a pod of an Indexed Job. Workload i of
workloads.json belongs to the pod whose JOB_COMPLETION_INDEX is i % FLOORCAST_SHARDS,
so the shards split the fleet without talking to each other. Every workload is
attempted even if one fails (one bad query must not starve the rest); the pod
exits non-zero if any failed, so the Job's failure shows up in kubectl and alerts.
The forecast lands in key forecast.json of a ConfigMap labelled
floorcast.dev/forecast=true, which the operator watches.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from kubernetes import client, config
from kubernetes.client.rest import ApiException

LABEL = "floorcast.dev/forecast"
KEY = "forecast.json"


def mine(workloads: list[dict[str, str]], index: int, shards: int) -> list[dict[str, str]]:
    return [w for i, w in enumerate(workloads) if i % shards == index]


def forecast(w: dict[str, str], flags: list[str], out: Path) -> str:
    cmd = ["floorcast", "forecast", *flags, f"--query={w['query']}", f"--output={out}"]
    subprocess.run(cmd, check=True)
    return out.read_text()


def store(core: client.CoreV1Api, w: dict[str, str], text: str) -> None:
    body = {
        "metadata": {"name": w["configMap"], "labels": {LABEL: "true"}},
        "data": {KEY: text},
    }
    try:
        core.patch_namespaced_config_map(w["configMap"], w["namespace"], body)
    except ApiException as e:
        if e.status != 404:
            raise
        core.create_namespaced_config_map(w["namespace"], body)


def main(argv: list[str]) -> int:
    index = int(os.environ.get("JOB_COMPLETION_INDEX", "0"))
    shards = int(os.environ.get("FLOORCAST_SHARDS", "1"))
    workloads = json.loads(Path(os.environ["FLOORCAST_WORKLOADS"]).read_text())
    if os.environ.get("KUBERNETES_SERVICE_HOST"):
        config.load_incluster_config()
    else:  # outside a pod (a manual run, the e2e test): $KUBECONFIG or ~/.kube/config
        config.load_kube_config()
    core = client.CoreV1Api()
    work = Path(os.environ.get("TMPDIR", "/tmp")) / "forecasts"
    work.mkdir(parents=True, exist_ok=True)
    failed = []
    for w in mine(workloads, index, shards):
        where = f"{w['namespace']}/{w['configMap']}"
        try:
            store(core, w, forecast(w, argv, work / f"{w['namespace']}-{w['name']}.json"))
            print(f"forecast {w['name']} -> {where}", flush=True)
        except (subprocess.CalledProcessError, ApiException, OSError) as e:
            print(f"forecast {w['name']} -> {where} failed: {e}", file=sys.stderr, flush=True)
            failed.append(w["name"])
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
