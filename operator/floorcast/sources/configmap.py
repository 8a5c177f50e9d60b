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
    (r"'step'|step", "bad or inconsistent step"),
    (r"gap", "gap between points (forecasts must be gap-free)"),
    (r"lower|upper", "bad lower/upper band"),
    (r"duplicate|earlier|sorted|same .* slot|irregular", "timestamps duplicated, unsorted "
                                                         "or off the grid"),
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


class ParsedCache:
    """A small LRU of parse results keyed by (namespace, name, key, resourceVersion),
    shared by kopf's worker threads, hence the lock (an OrderedDict reordered from two
    threads at once can lose entries or raise)."""

    def __init__(self, size: int = 2048) -> None:
        self._size = size
        self._items: OrderedDict[tuple[str, ...], ForecastState] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: tuple[str, ...]) -> ForecastState | None:
        with self._lock:
            hit = self._items.get(key)
            if hit is not None:
                self._items.move_to_end(key)
            return hit

    def put(self, key: tuple[str, ...], value: ForecastState) -> None:
        with self._lock:
            self._items[key] = value
            self._items.move_to_end(key)
            while len(self._items) > self._size:
                self._items.popitem(last=False)


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
