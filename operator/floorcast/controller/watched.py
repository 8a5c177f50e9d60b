"""What the watches have shown: the latest policy bodies and kopf's indexes, shared by
the event handlers (which write) and the worker threads (which read).

One watch per resource kind feeds everything: a reconcile reads its policy, its HPA and
its labelled forecast ConfigMap from here, never with a GET (a GET remains the
fallback before the indexes are bound, for a 409 retry, and for an unlabelled
ConfigMap). Per policy this holds its body (a few KiB) and an input fingerprint; per
HPA a parsed ``HpaState`` and a fingerprint (docs/operations.md, "Sizing").
"""

from __future__ import annotations

import threading
from collections.abc import Hashable, Iterable, Mapping
from typing import Any

from floorcast.controller.state import HpaState

Key = tuple[str, str]


def plain(obj: Any) -> Any:
    """kopf bodies are read-only views; the policy parser and the workers want plain
    dicts and lists."""
    if isinstance(obj, Mapping):
        return {k: plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [plain(v) for v in obj]
    return obj


def _first(store: Any) -> Any:
    """One value of a kopf index entry (a small collection), tolerating a concurrent
    update by the event loop (a read from a worker thread)."""
    for _ in range(3):
        try:
            for value in list(store or ()):
                return value
            return None
        except RuntimeError:  # changed size during iteration: read again
            continue
    return None


class Caches:
    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._bodies: dict[Key, dict[str, Any]] = {}
        self._inputs: dict[Key, Hashable] = {}
        self._deleted: dict[Key, dict[str, Any]] = {}
        self._hpa_prints: dict[Key, Hashable] = {}
        self._targets: Any = None
        self._configmaps: Any = None
        self._hpas: Any = None

    @property
    def bound(self) -> bool:
        return self._hpas is not None

    def bind(self, targets: Any, configmaps: Any, hpas: Any) -> None:
        """kopf's index objects are live views; keep a reference for the workers."""
        self._targets, self._configmaps, self._hpas = targets, configmaps, hpas

    # Policies ----------------------------------------------------------------------
    def remember(self, key: Key, body: Mapping[str, Any], inputs: Hashable) -> bool:
        """Store the latest body; True if an input (not only the status) changed."""
        copy = plain(body)
        with self._lock:
            self._bodies[key] = copy
            self._deleted.pop(key, None)
            old = self._inputs.get(key)
            self._inputs[key] = inputs
        return old != inputs

    def gone(self, key: Key, body: Mapping[str, Any]) -> None:
        """The policy left the API; its last body drives one deleting reconcile."""
        with self._lock:
            self._bodies.pop(key, None)
            self._inputs.pop(key, None)
            self._deleted[key] = plain(body)

    def body(self, key: Key) -> tuple[dict[str, Any] | None, bool]:
        """(body, deleted): the live body, else the last one of a deleted policy."""
        with self._lock:
            if key in self._bodies:
                return self._bodies[key], False
            return self._deleted.get(key), key in self._deleted

    def settle_deleted(self, key: Key) -> None:
        with self._lock:
            self._deleted.pop(key, None)

    def __len__(self) -> int:
        with self._lock:
            return len(self._bodies)

    def keys(self) -> list[Key]:
        with self._lock:
            return list(self._bodies)

    # HPAs and forecasts ------------------------------------------------------------
    def hpa_changed(self, key: Key, fingerprint: Hashable) -> bool:
        with self._lock:
            old = self._hpa_prints.get(key)
            if fingerprint == ("deleted",):
                self._hpa_prints.pop(key, None)
            else:
                self._hpa_prints[key] = fingerprint
        return old != fingerprint

    def hpa(self, namespace: str, name: str) -> HpaState | None:
        """The HPA as last watched; not watched at all: HpaState(exists=False); indexes
        not bound yet: None (the caller reads it)."""
        if self._hpas is None:
            return None
        got = _first(self._hpas.get((namespace, name)))
        return got if isinstance(got, HpaState) else HpaState(exists=False)

    def targets(self, namespace: str, name: str) -> Iterable[tuple[str, str]]:
        return list(self._targets.get((namespace, name), [])) if self._targets is not None else []

    def configmap(self, namespace: str, name: str) -> tuple[dict[str, str], str] | None:
        return _first(self._configmaps.get((namespace, name))) if self._configmaps else None
