"""List-then-watch of one resource kind in one scope (the client-go reflector habit).

Why not kopf's watches and indexes: kopf holds every object's handling until *all*
indexes are filled, and each object that finishes its indexing wakes every other
object still waiting (kopf 1.45, ``processing.py``: ``operator_indexed.wait_for``
on one shared condition). The start-up cost grows with the square of the objects
watched. Measured with tests/perf/bench_operator.py, with policies, ConfigMaps and
HPAs indexed: 2,000 policies (6,000 objects) took 122 s until all were Ready; at
10,000 none was Ready after 10 minutes. A reflector costs one paginated LIST and one
watch stream per kind. Its "synced" flag is the readiness kopf's indexes gave: no
policy is judged against a half-listed cache.

Protocol (Kubernetes API concepts, "Efficient detection of changes"):

* LIST in pages (``limit``/``continue``); the list's ``resourceVersion`` is where the
  watch starts. ``replace`` gets the whole listing, so a re-list also reports what was
  deleted while nobody watched;
* WATCH from that version with bookmarks (``allowWatchBookmarks``), so a quiet kind
  still advances its version, and a server-side ``timeoutSeconds``. When the stream
  ends, the next watch starts from the last version seen;
* ``410 Gone`` (the version has been compacted away), in the stream or as the
  response, means re-list. Any other failure: wait (1 s doubling, at most 30 s) and
  watch again from the last version; a LIST that fails is retried the same way.

Objects are plain JSON dicts (``json.loads``): the typed models of the Python client
cost several times the CPU and memory at 10,000 objects, and the handlers want dicts.
"""

from __future__ import annotations

import contextlib
import json
import logging
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

log = logging.getLogger("floorcast.operator")
PAGE = 500
WATCH_SECONDS = 300
MAX_BACKOFF = 30.0

#: (event type "ADDED" / "MODIFIED" / "DELETED", object)
OnEvent = Callable[[str, dict[str, Any]], None]
#: The complete listing (at start, or after a re-list).
OnReplace = Callable[[list[dict[str, Any]]], None]


class Gone(Exception):
    """The watched resourceVersion is too old: re-list."""


def scope_path(group: str, version: str, plural: str, namespace: str | None) -> str:
    """The collection's URL path; ``namespace`` None is every namespace."""
    base = f"/api/{version}" if not group else f"/apis/{group}/{version}"
    return f"{base}/namespaces/{namespace}/{plural}" if namespace else f"{base}/{plural}"


def lines(chunks: Iterator[bytes]) -> Iterator[bytes]:
    """Newline-delimited JSON frames from a byte stream cut anywhere."""
    rest = b""
    for chunk in chunks:
        rest += chunk
        *done, rest = rest.split(b"\n")
        yield from (d for d in done if d.strip())
    if rest.strip():
        yield rest


@dataclass
class Informer:
    api: k8s.ApiClient
    path: str
    on_replace: OnReplace
    on_event: OnEvent
    label_selector: str | None = None
    request_timeout: float = 30.0
    synced: threading.Event = field(default_factory=threading.Event)
    stopping: threading.Event = field(default_factory=threading.Event)
    version: str = ""
    lists: int = 0  # LISTs done (start-up and re-lists), for tests and logs
    _thread: threading.Thread | None = None
    _response: Any = None

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, daemon=True,
                                        name=f"informer {self.path}")  # fmt: skip
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self.stopping.set()
        resp = self._response
        if resp is not None:
            # The reading thread may be closing it too.
            with contextlib.suppress(Exception):
                resp.shutdown() if hasattr(resp, "shutdown") else resp.close()
        if self._thread is not None:
            self._thread.join(timeout)

    # ------------------------------------------------------------------------------
    def _get(self, query: list[tuple[str, Any]], *, timeout: Any) -> Any:
        """The raw urllib3 response (not read yet); an HTTP error as ApiException."""
        if self.label_selector:
            query = [*query, ("labelSelector", self.label_selector)]
        method, url, headers, _, _ = self.api.param_serialize(
            "GET", self.path, query_params=query, header_params={"Accept": "application/json"},
            auth_settings=["BearerToken"])  # fmt: skip
        raw = self.api.call_api(method, url, header_params=headers,
                                _request_timeout=timeout).response  # fmt: skip
        if raw.status >= 400:
            try:
                body = raw.data
            finally:
                raw.release_conn()
            err = ApiException(status=raw.status, reason=raw.reason)
            err.body = body
            raise err
        return raw

    def list_all(self) -> None:
        """One consistent listing, page by page; an expired continue token starts over."""
        while True:
            items: list[dict[str, Any]] = []
            token = ""
            try:
                while True:
                    query: list[tuple[str, Any]] = [("limit", PAGE)]
                    if token:
                        query.append(("continue", token))
                    resp = self._get(query, timeout=self.request_timeout)
                    try:
                        page = json.loads(resp.data)
                    finally:
                        resp.release_conn()
                    items.extend(page.get("items") or [])
                    meta = page.get("metadata") or {}
                    token = meta.get("continue") or ""
                    if not token:
                        break
            except ApiException as e:
                if e.status == 410 and token:
                    continue  # the listing's snapshot was compacted: list again
                raise
            self.version = str(meta.get("resourceVersion") or "")
            self.lists += 1
            self.on_replace(items)
            self.synced.set()
            return

    def watch_once(self) -> None:
        """One watch stream from ``version`` until the server ends it."""
        query = [("watch", "true"), ("allowWatchBookmarks", "true"),
                 ("timeoutSeconds", WATCH_SECONDS), ("resourceVersion", self.version)]  # fmt: skip
        try:
            resp = self._get(query, timeout=(self.request_timeout, WATCH_SECONDS + 30))
        except ApiException as e:
            if e.status == 410:
                raise Gone from e
            raise
        self._response = resp
        try:
            for frame in lines(resp.stream(65536, decode_content=True)):
                if self.stopping.is_set():
                    return
                self._frame(json.loads(frame))
        finally:
            self._response = None
            resp.release_conn()

    def _frame(self, event: dict[str, Any]) -> None:
        kind, obj = event.get("type"), event.get("object") or {}
        if kind == "ERROR":
            if obj.get("code") == 410:
                raise Gone(obj.get("message"))
            raise RuntimeError(f"watch error {obj.get('code')}: {obj.get('message')}")
        rv = (obj.get("metadata") or {}).get("resourceVersion")
        if kind in ("ADDED", "MODIFIED", "DELETED"):
            self.on_event(kind, obj)
        if rv:
            self.version = str(rv)  # BOOKMARK carries only this

    def _run(self) -> None:
        delay, listed = 1.0, self.synced.is_set()
        while not self.stopping.is_set():
            try:
                if not listed:
                    self.list_all()
                    listed = True
                self.watch_once()
                delay = 1.0
            except Gone:
                log.info("watch %s: resourceVersion %s expired; re-listing", self.path,
                         self.version)  # fmt: skip
                listed = False
            except Exception as e:
                if self.stopping.is_set():
                    return
                log.warning("watch %s: %s; retrying in %gs", self.path, _brief(e), delay)
                self.stopping.wait(delay)
                delay = min(MAX_BACKOFF, delay * 2)


def _brief(e: Exception) -> str:
    """An API error's status and reason, not its body."""
    if isinstance(e, ApiException):
        return f"HTTP {e.status} {e.reason}"
    return type(e).__name__ + (f": {e}" if str(e) and len(str(e)) < 200 else "")
