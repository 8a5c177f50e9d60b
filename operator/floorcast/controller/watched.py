"""What the watches have shown (controller/informer.py), shared by the informer threads
(which write) and the worker threads (which read).

One watch per resource kind and scope feeds everything: a reconcile reads its policy,
its HPA and its labelled forecast ConfigMap from here, never with a GET (a GET remains
the fallback for a 409 retry and for an unlabelled ConfigMap). The indexes from an HPA
or a ConfigMap to the policies that use them are kept here too, updated with each
policy event, so a forecast change wakes exactly the policies reading it.

Per policy this holds its body (a few KiB) and two index entries; per HPA a parsed
``HpaState`` and a fingerprint; per labelled ConfigMap its data and resourceVersion
(docs/operations.md, "Sizing"). Every method takes the one lock: reads come from four
workers, writes from three informer threads, and each critical section is a few dict
operations.
"""

from __future__ import annotations

import threading
from collections.abc import Hashable, Iterable, Mapping
from typing import Any

from floorcast.controller.state import HpaState

Key = tuple[str, str]


def plain(obj: Any) -> Any:
    """Plain dicts and lists (a body from any source; the parser wants these)."""
    if isinstance(obj, Mapping):
        return {k: plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [plain(v) for v in obj]
    return obj


def key_of(obj: Mapping[str, Any]) -> Key:
    meta = obj.get("metadata") or {}
    return str(meta.get("namespace") or ""), str(meta.get("name") or "")


def _refs(body: Mapping[str, Any]) -> tuple[Key | None, Key | None, str]:
    """(target HPA, forecast ConfigMap, creationTimestamp) a policy body points at."""
    ns, _ = key_of(body)
    spec = body.get("spec") if isinstance(body.get("spec"), Mapping) else {}
    target = (spec.get("targetRef") or {}).get("name") if isinstance(spec, Mapping) else None
    fc = spec.get("forecast") if isinstance(spec, Mapping) else None
    cm = ((fc or {}).get("configMapRef") or {}).get("name") if isinstance(fc, Mapping) else None
    created = str((body.get("metadata") or {}).get("creationTimestamp", ""))
    return ((ns, target) if isinstance(target, str) and target else None,
            (ns, cm) if isinstance(cm, str) and cm else None, created)  # fmt: skip


class Caches:
    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._bodies: dict[Key, dict[str, Any]] = {}
        self._inputs: dict[Key, Hashable] = {}
        self._deleted: dict[Key, dict[str, Any]] = {}
        self._refs: dict[Key, tuple[Key | None, Key | None, str]] = {}
        self._by_target: dict[Key, dict[str, str]] = {}  # HPA -> {policy: created}
        self._by_configmap: dict[Key, set[str]] = {}
        self._hpas: dict[Key, HpaState] = {}
        self._hpa_prints: dict[Key, Hashable] = {}
        self._configmaps: dict[Key, tuple[dict[str, str], str]] = {}
        self.bound = False  # True once every watch has listed (app.py)

    # Policies ----------------------------------------------------------------------
    def remember(self, key: Key, body: dict[str, Any], inputs: Hashable) -> bool:
        """Store the latest body; True if an input (not only the status) changed."""
        refs = _refs(body)
        with self._lock:
            self._bodies[key] = body
            self._deleted.pop(key, None)
            old = self._inputs.get(key)
            self._inputs[key] = inputs
            self._index(key, refs)
        return old != inputs

    def gone(self, key: Key, body: dict[str, Any]) -> None:
        """The policy left the API; its last body drives one deleting reconcile."""
        with self._lock:
            self._bodies.pop(key, None)
            self._inputs.pop(key, None)
            self._deleted[key] = body
            self._index(key, None)

    def _index(self, key: Key, refs: tuple[Key | None, Key | None, str] | None) -> None:
        old = self._refs.pop(key, None)
        if old == refs:
            if refs is not None:
                self._refs[key] = refs
            return
        name = key[1]
        if old is not None:
            if old[0] is not None and (m := self._by_target.get(old[0])) is not None:
                m.pop(name, None)
                if not m:
                    del self._by_target[old[0]]
            if old[1] is not None and (s := self._by_configmap.get(old[1])) is not None:
                s.discard(name)
                if not s:
                    del self._by_configmap[old[1]]
        if refs is not None:
            self._refs[key] = refs
            if refs[0] is not None:
                self._by_target.setdefault(refs[0], {})[name] = refs[2]
            if refs[1] is not None:
                self._by_configmap.setdefault(refs[1], set()).add(name)

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

    def targets(self, namespace: str, name: str) -> Iterable[tuple[str, str]]:
        """(creationTimestamp, policy name) of every policy on HPA namespace/name."""
        with self._lock:
            return [(c, p) for p, c in self._by_target.get((namespace, name), {}).items()]

    def users_of_hpa(self, key: Key) -> list[Key]:
        with self._lock:
            return [(key[0], p) for p in self._by_target.get(key, {})]

    def users_of_configmap(self, key: Key) -> list[Key]:
        with self._lock:
            return [(key[0], p) for p in self._by_configmap.get(key, ())]

    # HPAs --------------------------------------------------------------------------
    def put_hpa(self, key: Key, state: HpaState | None, fingerprint: Hashable) -> bool:
        """Store (None: deleted); True if the fingerprint (an input) changed."""
        with self._lock:
            old = self._hpa_prints.get(key)
            if state is None:
                self._hpas.pop(key, None)
                self._hpa_prints.pop(key, None)
                return old is not None
            self._hpas[key] = state
            self._hpa_prints[key] = fingerprint
        return old != fingerprint

    def hpa_keys(self) -> list[Key]:
        with self._lock:
            return list(self._hpas)

    def hpa(self, namespace: str, name: str) -> HpaState | None:
        """The HPA as last watched; not there: HpaState(exists=False); the watches have
        not listed yet: None (the caller reads it)."""
        if not self.bound:
            return None
        with self._lock:
            got = self._hpas.get((namespace, name))
        return got if got is not None else HpaState(exists=False)

    # Forecast ConfigMaps -----------------------------------------------------------
    def put_configmap(self, key: Key, data: dict[str, str] | None, version: str) -> bool:
        """Store (None: deleted); True if it is new, changed or gone."""
        with self._lock:
            old = self._configmaps.get(key)
            if data is None:
                self._configmaps.pop(key, None)
                return old is not None
            self._configmaps[key] = (data, version)
        return old is None or old[1] != version

    def configmap_keys(self) -> list[Key]:
        with self._lock:
            return list(self._configmaps)

    def configmap(self, namespace: str, name: str) -> tuple[dict[str, str], str] | None:
        if not self.bound:
            return None
        with self._lock:
            return self._configmaps.get((namespace, name))
