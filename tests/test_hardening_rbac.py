"""Issue #14, item 6: the operator's RBAC is exactly the verbs its code calls.

The calls are read from the source (every ``*_namespaced_*`` client method in the
operator's adapters) plus list + watch for each kind the operator's informers watch
(controller/watches.py; kopf itself watches nothing, so it needs nothing).
e2e/test_operator*.py then run the real operator with exactly these rules, so a rule
too few fails there and a rule too many fails here.
"""

from __future__ import annotations

import re
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
RBAC = ROOT / "charts" / "floorcast" / "files" / "operator-rbac.yaml"
SRC = ROOT / "operator" / "floorcast"

#: kubernetes-client method (verb prefix, kind suffix) → (API group, resource).
KINDS = {
    "horizontal_pod_autoscaler": ("autoscaling", "horizontalpodautoscalers"),
    "custom_object_status": ("floorcast.dev", "forecastscalingpolicies/status"),
    "custom_object": ("floorcast.dev", "forecastscalingpolicies"),
    "event": ("", "events"),
    "config_map": ("", "configmaps"),
    "deployment": ("apps", "deployments"),
    "stateful_set": ("apps", "statefulsets"),
    "replica_set": ("apps", "replicasets"),
    "pod": ("", "pods"),
}
VERBS = {"read": "get", "get": "get", "patch": "patch", "create": "create",
         "list": "list", "replace": "update", "delete": "delete"}  # fmt: skip


def watched() -> set[tuple[str, str, str]]:
    """list + watch on each kind the informers watch (controller/watches.py)."""
    from floorcast.controller.watches import KINDS as WATCHED

    return {(g, plural, v) for g, _, plural, _, _ in WATCHED for v in ("list", "watch")}


def called() -> set[tuple[str, str, str]]:
    out = set()
    files = [*(SRC / "kube").glob("*.py"), SRC / "controller" / "handlers.py"]
    for f in files:
        # A call, or a method passed to a helper (kube/pods.py's ``_raw(core.list_…, …)``).
        for verb, kind in re.findall(r"\.(\w+?)_namespaced_(\w+)[(,]", f.read_text()):
            out.add((*KINDS[kind], VERBS[verb]))
        for verb, kind in re.findall(r"\b(read|patch)_namespaced_(\w+)\s+if", f.read_text()):
            out.add((*KINDS[kind], VERBS[verb]))
    text = (SRC / "kube" / "workload.py").read_text()  # the two reads picked by kind
    for kind in re.findall(r"apps\.read_namespaced_(\w+)", text):
        out.add((*KINDS[kind], "get"))
    return out


def granted() -> set[tuple[str, str, str]]:
    rules = yaml.safe_load(RBAC.read_text())["rules"]
    return {(g, r, v) for rule in rules for g in rule["apiGroups"]
            for r in rule["resources"] for v in rule["verbs"]}  # fmt: skip


def test_the_scan_finds_the_known_calls():
    got = called()
    assert ("autoscaling", "horizontalpodautoscalers", "patch") in got
    assert ("apps", "statefulsets", "get") in got and ("", "events", "create") in got
    assert ("", "pods", "list") in got and ("apps", "replicasets", "list") in got


def test_rbac_is_exactly_what_the_code_and_the_watches_use():
    assert granted() == called() | watched()


def test_no_update_or_delete_anywhere_and_hpa_list_watch_only_for_the_watch():
    # Issue #14 cut verbs granted but never used; list/watch on HPAs came back with the
    # HPA watch (controller/watches.py), and only because of it.
    g = granted()
    assert ("autoscaling", "horizontalpodautoscalers", "watch") in watched()
    assert {v for (_, r, v) in g if r == "horizontalpodautoscalers"} == {
        "get", "list", "watch", "patch"}
    assert not any(v in ("update", "delete") for (_, _, v) in g)
    assert not any(r == "secrets" for (_, r, _) in g)
