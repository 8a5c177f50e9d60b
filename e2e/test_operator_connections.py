"""The operator's connections to the API server stay bounded during its start-up flood.

Unbounded, a client opens one TLS connection per request in flight, and resuming N
policies puts about N requests in flight at once (controller/connections.py: 513-608 sockets,
~0.35 MiB each, at 500 policies). Here 80 policies exist before the operator starts;
the operator's established TCP connections to the API server are sampled from /proc
(proc(5): /proc/PID/fd links "socket:[INODE]", /proc/PID/net/tcp rows carry the remote
address, state 01 = ESTABLISHED, and the inode) for the whole flood.

The bound: the sync client's pool (three watch streams + ``--max-api-connections``,
app.py) and a little slack (kopf's own session, which watches nothing); every policy
must still become Ready, so the cap cannot starve the workers behind the watches.
"""

from __future__ import annotations

import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from urllib.parse import urlsplit

import pytest
from kubernetes import client as k8s

from e2e.operator_env import (
    BASELINE,
    GROUP,
    HPA_MAX,
    PLURAL,
    VERSION,
    Env,
    forecast_json,
    policy_body,
)
from floorcast.controller.connections import connection_limit
from floorcast.controller.settings import Settings

pytestmark = pytest.mark.e2e
POLICIES = 80


def api_connections(pid: int, port: int) -> int:
    """Established TCP connections of ``pid`` whose remote port is ``port``."""
    inodes = set()
    for fd in os.listdir(f"/proc/{pid}/fd"):
        try:
            link = os.readlink(f"/proc/{pid}/fd/{fd}")
        except OSError:
            continue
        if link.startswith("socket:["):
            inodes.add(link[8:-1])
    n = 0
    for table in ("tcp", "tcp6"):
        path = Path(f"/proc/{pid}/net/{table}")
        if not path.exists():
            continue
        for row in path.read_text().splitlines()[1:]:
            f = row.split()
            remote_port = int(f[2].rsplit(":", 1)[1], 16)
            n += f[3] == "01" and remote_port == port and f[9] in inodes
    return n


def create(env: Env, i: int, text: str) -> None:
    name = f"w{i:03d}"
    env.hpas.create_namespaced_horizontal_pod_autoscaler(env.namespace, {
        "metadata": {"name": name},
        "spec": {"scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment", "name": name},
                 "minReplicas": BASELINE, "maxReplicas": HPA_MAX,
                 "metrics": [{"type": "Resource", "resource": {"name": "cpu", "target": {
                     "type": "Utilization", "averageUtilization": 50}}}]},
    })  # fmt: skip
    k8s.CoreV1Api(env.api).create_namespaced_config_map(env.namespace, {
        "metadata": {"name": f"{name}-fc", "labels": {"floorcast.dev/forecast": "true"}},
        "data": {"f.json": text},
    })  # fmt: skip
    env.create_policy(policy_body(name, target=name, forecast={
        "configMapRef": {"name": f"{name}-fc", "key": "f.json"}}))  # fmt: skip


def ready(env: Env) -> int:
    items = env.custom.list_namespaced_custom_object(GROUP, VERSION, env.namespace,
                                                     PLURAL)["items"]  # fmt: skip
    return sum(any(c["type"] == "Ready" and c["status"] == "True"
                   for c in (p.get("status") or {}).get("conditions") or [])
               for p in items)  # fmt: skip


def test_start_up_flood_stays_within_the_connection_limit(env: Env, control_plane) -> None:
    text = forecast_json(peak=1.5)  # flat: every floor is the baseline, no HPA patch
    with ThreadPoolExecutor(8) as pool:
        list(pool.map(lambda i: create(env, i, text), range(POLICIES)))
    port = urlsplit(control_plane.server).port or 443
    proc = env.start_operator()
    peak, stop = [0], threading.Event()

    def sample() -> None:
        while not stop.is_set() and proc.poll() is None:
            try:
                peak[0] = max(peak[0], api_connections(proc.pid, port))
            except OSError:  # the process is going away
                return
            time.sleep(0.05)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    try:
        env.wait(lambda: ready(env) == POLICIES, f"all {POLICIES} policies Ready", timeout=120)
        time.sleep(3)  # the status writes of the last few
    finally:
        stop.set()
        sampler.join(5)
    pool = connection_limit(Settings(namespaces=(env.namespace,)))  # 3 watches + 16
    bound = pool + 2
    assert bound < POLICIES  # or this test could not tell bounded from unbounded
    assert 0 < peak[0] <= bound, f"{peak[0]} connections to the API server, bound {bound}"
