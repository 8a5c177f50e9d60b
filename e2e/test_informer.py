"""controller/informer.py against the real API server: paginated listing, the watch's
events, and a re-list that reports what was deleted while nobody watched. The 410
path (a compacted-away version) is a unit test (tests/test_informer.py): a fresh
control plane has compacted nothing, so a real 410 would take etcd's 5-minute
compaction interval to provoke.
"""

from __future__ import annotations

import threading
from typing import Any

import pytest
from kubernetes import client as k8s

from e2e.helpers import eventually
from floorcast.controller import informer as informer_mod
from floorcast.controller.informer import Informer, scope_path

pytestmark = pytest.mark.e2e
LABEL = "floorcast.dev/forecast"


class Seen:
    """What the callbacks saw: the latest listing and every event, in order."""

    def __init__(self) -> None:
        self.lock = threading.Lock()
        self.listings: list[set[str]] = []
        self.events: list[tuple[str, str]] = []

    def replace(self, items: list[dict[str, Any]]) -> None:
        with self.lock:
            self.listings.append({o["metadata"]["name"] for o in items})

    def event(self, kind: str, obj: dict[str, Any]) -> None:
        with self.lock:
            self.events.append((kind, obj["metadata"]["name"]))


def cm(name: str, labelled: bool = True) -> dict[str, Any]:
    labels = {LABEL: "true"} if labelled else {}
    return {"metadata": {"name": name, "labels": labels}, "data": {"k": name}}


def make(api: k8s.ApiClient, namespace: str, seen: Seen) -> Informer:
    return Informer(api=api, path=scope_path("", "v1", "configmaps", namespace),
                    label_selector=f"{LABEL}=true", on_replace=seen.replace,
                    on_event=seen.event)  # fmt: skip


def test_lists_in_pages_then_watches_and_a_relist_reports_deletions(
    api_client: k8s.ApiClient, namespace: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    core = k8s.CoreV1Api(api_client)
    for i in range(7):
        core.create_namespaced_config_map(namespace, cm(f"f{i}"))
    core.create_namespaced_config_map(namespace, cm("unlabelled", labelled=False))
    monkeypatch.setattr(informer_mod, "PAGE", 3)  # 7 objects: three pages, two tokens
    seen = Seen()
    inf = make(api_client, namespace, seen)
    inf.start()
    try:
        assert inf.synced.wait(30)
        assert seen.listings == [{f"f{i}" for i in range(7)}]  # the label selector held
        core.create_namespaced_config_map(namespace, cm("late"))
        core.patch_namespaced_config_map("f1", namespace, {"data": {"k": "changed"}})
        core.delete_namespaced_config_map("f2", namespace)
        eventually(lambda: len(seen.events) >= 3, timeout=20, what="three watch events")
        assert seen.events[:3] == [("ADDED", "late"), ("MODIFIED", "f1"), ("DELETED", "f2")]
    finally:
        inf.stop()
    # Nobody watches now; a deletion meanwhile shows up as a gap in the next listing.
    core.delete_namespaced_config_map("f3", namespace)
    inf.list_all()
    assert seen.listings[-1] == {f"f{i}" for i in range(7) if i not in (2, 3)} | {"late"}
    assert inf.lists == 2
