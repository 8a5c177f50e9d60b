"""controller/informer.py's pure parts: frame splitting, the watch frames' meaning, and
the run loop's answer to 410 Gone (re-list, then watch from the new version). The
list and watch requests themselves run against the real API server in
e2e/test_informer.py; here the two requests are replaced by a script, which is all
this logic sees of them.

The 410 rule is from the Kubernetes API concepts page ("Efficient detection of
changes": a watch whose resourceVersion is too old gets "410 Gone", and the client
must list again), as client-go's reflector does it.
"""

from __future__ import annotations

from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from floorcast.controller.informer import Gone, Informer, lines, scope_path


def make(**kw: Any) -> Informer:
    seen: list[Any] = []
    inf = Informer(api=None, path="/api/v1/configmaps",  # type: ignore[arg-type]
                   on_replace=lambda items: seen.append(("LIST", len(items))),
                   on_event=lambda k, o: seen.append((k, o["metadata"]["name"])), **kw)  # fmt: skip
    inf.seen = seen  # type: ignore[attr-defined]
    return inf


@given(st.lists(st.binary(max_size=40), max_size=8), st.lists(st.integers(0, 60), max_size=6))
def test_frames_survive_any_cut_of_the_stream(frames: list[bytes], cuts: list[int]) -> None:
    frames = [f.replace(b"\n", b"") for f in frames if f.replace(b"\n", b"").strip()]
    blob = b"".join(f + b"\n" for f in frames)
    points = sorted({min(c, len(blob)) for c in cuts})
    chunks = [blob[a:b] for a, b in zip([0, *points], [*points, len(blob)], strict=True)]
    assert list(lines(iter(chunks))) == frames


def test_paths_for_core_and_grouped_kinds_in_one_namespace_or_all() -> None:
    assert scope_path("", "v1", "configmaps", "shop") == "/api/v1/namespaces/shop/configmaps"
    assert scope_path("autoscaling", "v2", "horizontalpodautoscalers", None) == (
        "/apis/autoscaling/v2/horizontalpodautoscalers")


def test_frames_events_bookmarks_and_errors() -> None:
    inf = make()
    inf._frame({"type": "ADDED", "object": {"metadata": {"name": "a", "resourceVersion": "5"}}})
    inf._frame({"type": "BOOKMARK", "object": {"metadata": {"resourceVersion": "9"}}})
    assert inf.seen == [("ADDED", "a")] and inf.version == "9"  # type: ignore[attr-defined]
    with pytest.raises(Gone):
        inf._frame({"type": "ERROR", "object": {"code": 410, "message": "too old"}})
    with pytest.raises(RuntimeError, match="500"):
        inf._frame({"type": "ERROR", "object": {"code": 500, "message": "boom"}})
    assert inf.version == "9"  # an error moves nothing


def test_gone_relists_and_other_errors_rewatch_from_the_last_version() -> None:
    inf = make()
    script: list[Any] = [Gone("compacted"), ConnectionError("reset"), "stop"]
    calls: list[tuple[str, str]] = []

    def list_all() -> None:
        inf.lists += 1
        inf.version = f"L{inf.lists}"
        calls.append(("list", inf.version))
        inf.synced.set()

    def watch_once() -> None:
        calls.append(("watch", inf.version))
        step = script.pop(0)
        if step == "stop":
            inf.stopping.set()
            return
        raise step

    inf.list_all, inf.watch_once = list_all, watch_once  # type: ignore[method-assign]
    inf.stopping.wait = lambda _t: False  # type: ignore[method-assign]  # no real back-off
    inf._run()
    # List, watch (410) -> list again, watch (reset) -> watch again from the same version.
    assert calls == [("list", "L1"), ("watch", "L1"), ("list", "L2"), ("watch", "L2"),
                     ("watch", "L2")]  # fmt: skip
