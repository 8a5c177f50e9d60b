"""409 Conflict on the HPA patch: re-read, re-decide, never overwrite the other writer.

A fake API server on 127.0.0.1 speaks just enough of the Kubernetes REST API (HPA
get/patch, policy status patch, Event create) for one reconcile through the real
``kubernetes`` client and the real adapters. Its PATCH honours
``metadata.resourceVersion`` as a precondition the way the API server does (Kubernetes
API conventions, "Concurrency Control and Consistency": an update whose resourceVersion
does not match the stored one is rejected with 409 Conflict).
"""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import pandas as pd
import pytest
from kubernetes import client as k8s

from floorcast.controller import metrics
from floorcast.controller.reconcile import CONFLICT_RETRIES, Runtime, reconcile
from floorcast.controller.settings import Settings
from floorcast.kube.hpa import Conflict

NS, HPA_PATH = "ns", "/apis/autoscaling/v2/namespaces/ns/horizontalpodautoscalers/web"


class FakeApi:
    """One HPA; the first ``conflicts`` PATCHes find it edited by someone else."""

    def __init__(self, conflicts: int) -> None:
        self.conflicts = conflicts
        self.rv = 41
        self.min_replicas = 2
        self.annotations: dict[str, str] = {}
        self.patches: list[dict[str, Any]] = []
        self.status_patches: list[dict[str, Any]] = []
        self.events = 0

    def hpa(self) -> dict[str, Any]:
        return {
            "apiVersion": "autoscaling/v2", "kind": "HorizontalPodAutoscaler",
            "metadata": {"name": "web", "namespace": NS, "resourceVersion": str(self.rv),
                         "annotations": dict(self.annotations)},
            "spec": {"minReplicas": self.min_replicas, "maxReplicas": 10,
                     "scaleTargetRef": {"apiVersion": "apps/v1", "kind": "Deployment",
                                        "name": "web"}},
        }  # fmt: skip

    def patch(self, body: dict[str, Any]) -> tuple[int, dict[str, Any]]:
        self.patches.append(body)
        if self.conflicts > 0:  # someone set minReplicas 3 by hand just before us
            self.conflicts -= 1
            self.rv += 1
            self.min_replicas = 3
        if body["metadata"].get("resourceVersion") != str(self.rv):
            return 409, {"kind": "Status", "apiVersion": "v1", "status": "Failure",
                         "reason": "Conflict", "code": 409,
                         "message": "the object has been modified"}  # fmt: skip
        for k, v in body["metadata"].get("annotations", {}).items():
            if v is None:
                self.annotations.pop(k, None)
            else:
                self.annotations[k] = v
        self.min_replicas = body["spec"]["minReplicas"]
        self.rv += 1
        return 200, self.hpa()


@pytest.fixture
def fake() -> Iterator[tuple[FakeApi, str]]:
    state = FakeApi(conflicts=1)

    class Handler(BaseHTTPRequestHandler):
        def log_message(self, *args: Any) -> None:
            pass

        def reply(self, code: int, doc: dict[str, Any]) -> None:
            data = json.dumps(doc).encode()
            self.send_response(code)
            self.send_header("Content-Type", "application/json")
            self.send_header("Content-Length", str(len(data)))
            self.end_headers()
            self.wfile.write(data)

        def body(self) -> dict[str, Any]:
            return json.loads(self.rfile.read(int(self.headers["Content-Length"])))

        def do_GET(self) -> None:
            self.reply(*((200, state.hpa()) if self.path.startswith(HPA_PATH) else (404, {})))

        def do_PATCH(self) -> None:
            body = self.body()
            if self.path.startswith(HPA_PATH):
                self.reply(*state.patch(body))
            else:  # the policy's status subresource
                state.status_patches.append(body)
                self.reply(200, {"apiVersion": "floorcast.dev/v1alpha1",
                                 "kind": "ForecastScalingPolicy"})  # fmt: skip

        def do_POST(self) -> None:
            state.events += 1
            self.reply(201, {**self.body(), "apiVersion": "v1", "kind": "Event"})

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    try:
        yield state, f"http://127.0.0.1:{server.server_address[1]}"
    finally:
        server.shutdown()
        server.server_close()


def _forecast() -> str:
    """Flat load 1.5 with a 6.5 peak ten minutes ahead: floor ceil(6.5) = 7 (docs/policy.md)."""
    now = pd.Timestamp.now(tz="UTC").floor("min")
    pts = [{"t": (now + pd.Timedelta(minutes=i)).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "value": 6.5 if i == 10 else 1.5} for i in range(-10, 110)]  # fmt: skip
    return json.dumps({"unit": "cores", "step": "1m",
                       "generated": now.strftime("%Y-%m-%dT%H:%M:%SZ"), "points": pts})  # fmt: skip


def _run(url: str) -> Any:
    cfg = k8s.Configuration(host=url)
    body = {
        "apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
        "metadata": {"name": "p", "namespace": NS, "uid": "u1", "generation": 1},
        "spec": {"targetRef": {"name": "web"},
                 "forecast": {"configMapRef": {"name": "fc", "key": "f.json"}},
                 "capacity": {"perReplica": 1}, "leadTime": "15m", "holdTime": "1m",
                 "headroom": 0, "mode": "Enforce"},
    }  # fmt: skip
    text = _forecast()
    with k8s.ApiClient(cfg) as api:
        rt = Runtime(settings=Settings(metrics_port=None, liveness_port=None), api=api)
        return reconcile(rt, body, configmaps=lambda ns, name: ({"f.json": text}, "7"))


def _conflicts() -> float:
    return metrics.ERRORS.labels("Conflict")._value.get()


def test_409_is_retried_on_a_fresh_read_and_the_other_edit_is_kept(fake) -> None:
    state, url = fake
    before = _conflicts()
    d = _run(url)
    assert [p["metadata"]["resourceVersion"] for p in state.patches] == ["41", "42"]
    assert state.min_replicas == 7
    # The concurrent hand edit (3) was seen on the re-read and became the baseline.
    assert state.annotations["floorcast.dev/baseline"] == "3"
    assert d.status["baseline"] == 3 and d.status["floor"] == 7
    assert len(state.status_patches) == 1 and state.events >= 1
    assert _conflicts() == before + 1


def test_persistent_409_gives_up_and_says_so(fake) -> None:
    """Issue #14 item 1: the failure is recorded (ReconcileFailed), and the fail-safe
    leaves an HPA without our annotations exactly as its other writer set it."""
    state, url = fake
    state.conflicts = 100
    d = _run(url)
    assert len(state.patches) == CONFLICT_RETRIES + 1  # no fail-safe write: not ours
    assert state.min_replicas == 3 and state.annotations == {}  # the other writer's value
    ready = next(c for c in d.status["conditions"] if c["type"] == "Ready")
    assert (ready["status"], ready["reason"]) == ("False", "ReconcileFailed")
    assert len(state.status_patches) == 1 and state.events == 1


def test_persistent_409_on_our_own_floor_raises(fake) -> None:
    """When the HPA carries our floor and even the fail-safe restore is refused, the
    reconcile raises so the caller retries (a delete keeps its finalizer)."""
    state, url = fake
    state.conflicts = 100
    state.min_replicas = 5  # our floor from an earlier run; this one wants 7
    state.annotations = {"floorcast.dev/baseline": "2", "floorcast.dev/applied-floor": "5",
                         "floorcast.dev/policy": "p"}  # fmt: skip
    with pytest.raises(Conflict):
        _run(url)
    assert len(state.patches) == CONFLICT_RETRIES + 2  # the fail-safe restore was tried
    assert state.patches[-1]["spec"]["minReplicas"] == 3  # the re-read hand edit
