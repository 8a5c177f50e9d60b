"""Forecasts stored in a ConfigMap key in the policy's own namespace.

The ConfigMap's text is given by the caller (from the operator's watch cache or a
read), so this module stays free of Kubernetes I/O and is easy to test. Parsed
forecasts are cached by ConfigMap resourceVersion: with hundreds of policies and a
30 s timer, re-parsing an unchanged 1 MiB body each time would dominate CPU.

A policy's author may be allowed to create policies but not to read ConfigMaps, and
the status is theirs to read. So a parse error reaches the status as *where* and
*what kind* (``public_message``: source, row or point, column), never the text that
failed; the operator's log keeps the full message.
"""

from __future__ import annotations

import logging
import re
import threading
from collections import OrderedDict
from collections.abc import Mapping

from floorcast.controller.state import FORECAST_INVALID, FORECAST_MISSING, ForecastState
from floorcast.core.series_text import parse_forecast
from floorcast.errors import InputError

log = logging.getLogger("floorcast.operator")

#: Problem kinds, first match wins; each a fixed phrase, so nothing from the input
#: can reach a status message.
_KINDS = (
    # Our own limits: these messages hold only counts, never input.
    (r"^(input is \d+ bytes, over|\d+ points, over|JSON nested|the series would hold \d+ )",
     None),
    (r"invalid JSON", "invalid JSON"),
    (r"header|column", "bad CSV header or column count"),
    (r"unknown (field|key)", "unknown field"),
    (r"^gap of ", "gap between points (forecasts must be gap-free)"),
    (r"duplicate|earlier|sorted|same .* slot|irregular", "timestamps duplicated, unsorted "
                                                         "or off the grid"),
    (r"'step'|step", "bad or inconsistent step"),
    (r"lower|upper", "bad lower/upper band"),
    (r"timestamp|'generated'|date|offset|'t'", "bad timestamp"),
    (r"value|number|NaN|infinite|negative", "bad value"),
)  # fmt: skip


def public_message(e: InputError, source: str) -> str:
    """``source, row N: kind of problem`` with no byte of the input in it."""
    where = source
    if e.row is not None:
        where += f", {getattr(e, 'kind', 'row')} {e.row}"
    col = re.search(r"\(column (\d+)\)", e.problem)
    if col:
        where += f", column {col.group(1)}"
    for pattern, kind in _KINDS:
        if re.search(pattern, e.problem):
            return f"{where}: {e.problem if kind is None else kind}"
    return f"{where}: not a valid forecast"


#: Parsed points all caches together may hold: 4 million points are about 100 MiB
#: (values, bands, the parse's own arrays), an eighth of the chart's 768Mi limit. Without
#: it, one tenant rewriting a 1 MiB forecast could fill 2048 cache entries with
#: superseded versions (about 2 GiB).
MAX_CACHED_POINTS = 4_000_000


def points_of(state: ForecastState) -> int:
    s = state.series
    if s is None:
        return 0
    return len(s) * (1 + (s.lower is not None) + (s.upper is not None))


class BoundedLru:
    """An LRU bounded by entry count and by total parsed points, shared by kopf's worker
    threads, hence the lock (an OrderedDict reordered from two threads at once can lose
    entries or raise)."""

    def __init__(self, size: int = 2048, max_points: int = MAX_CACHED_POINTS) -> None:
        self._size, self._max_points, self._points = size, max_points, 0
        self._items: OrderedDict[object, tuple[object, int]] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: object) -> object | None:
        with self._lock:
            hit = self._items.get(key)
            if hit is None:
                return None
            self._items.move_to_end(key)
            return hit[0]

    def put(self, key: object, value: object, points: int) -> None:
        with self._lock:
            old = self._items.pop(key, None)
            self._points -= old[1] if old else 0
            if points > self._max_points:
                return  # larger than the whole budget: never cached
            self._items[key] = (value, points)
            self._points += points
            while len(self._items) > self._size or self._points > self._max_points:
                _, (_, p) = self._items.popitem(last=False)
                self._points -= p

    @property
    def points(self) -> int:
        return self._points

    def __len__(self) -> int:
        return len(self._items)


class ParsedCache:
    """Parse results per ConfigMap key, valid for one resourceVersion: a new version
    replaces the old entry instead of adding one, so superseded forecasts never pile up."""

    def __init__(self, size: int = 2048, max_points: int = MAX_CACHED_POINTS) -> None:
        self._lru = BoundedLru(size, max_points)

    def get(self, key: tuple[str, ...]) -> ForecastState | None:
        hit = self._lru.get(key[:-1])
        if isinstance(hit, tuple) and hit[0] == key[-1]:
            return hit[1]
        return None

    def put(self, key: tuple[str, ...], value: ForecastState) -> None:
        self._lru.put(key[:-1], (key[-1], value), points_of(value))

    def __len__(self) -> int:
        return len(self._lru)

    @property
    def points(self) -> int:
        return self._lru.points


def parse_state(text: str, source: str, max_bytes: int) -> ForecastState:
    """Parse for the operator: every failure, even an unexpected one, is a
    ForecastInvalid state (the policy falls back to its baseline), never an exception."""
    try:
        return ForecastState(series=parse_forecast(text, source=source, max_bytes=max_bytes))
    except InputError as e:
        log.info("%s", e)  # the full message, for whoever can read the operator's log
        return ForecastState(reason=FORECAST_INVALID, message=public_message(e, source))
    except Exception as e:
        log.warning("%s: parsing failed unexpectedly: %r", source, e)
        return ForecastState(reason=FORECAST_INVALID,
                             message=f"{source}: not a valid forecast ({type(e).__name__})")


def forecast_from_configmap(
    data: Mapping[str, str] | None,
    *,
    namespace: str,
    name: str,
    key: str,
    max_bytes: int,
    resource_version: str | None = None,
    cache: ParsedCache | None = None,
) -> ForecastState:
    """A ForecastState for ``data`` (None: the ConfigMap does not exist)."""
    source = f"ConfigMap {namespace}/{name} key {key}"
    if data is None:
        return ForecastState(reason=FORECAST_MISSING, message=f"{source}: ConfigMap not found")
    if key not in data:
        return ForecastState(reason=FORECAST_MISSING, message=f"{source}: key not found")
    ck = (namespace, name, key, resource_version or "")
    if cache is not None and resource_version and (hit := cache.get(ck)) is not None:
        return hit
    text = data[key]
    size = len(text.encode("utf-8"))
    if size > max_bytes:
        msg = f"{source}: {size} bytes, over the limit of {max_bytes}"
        state = ForecastState(reason=FORECAST_INVALID, message=msg)
    else:
        state = parse_state(text, source, max_bytes)
    if cache is not None and resource_version:
        cache.put(ck, state)
    return state
