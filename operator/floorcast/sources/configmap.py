"""Forecasts stored in a ConfigMap key in the policy's own namespace.

The ConfigMap's text is given by the caller (from the operator's watch cache or a
read), so this module stays free of Kubernetes I/O and is easy to test. Parsed
forecasts are cached by ConfigMap resourceVersion: with hundreds of policies and a
30 s timer, re-parsing an unchanged 1 MiB body each time would dominate CPU.
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Mapping

from floorcast.controller.state import FORECAST_INVALID, FORECAST_MISSING, ForecastState
from floorcast.core.series_text import parse_forecast
from floorcast.errors import InputError


class ParsedCache:
    """A small LRU of parse results keyed by (namespace, name, key, resourceVersion)."""

    def __init__(self, size: int = 2048) -> None:
        self._size = size
        self._items: OrderedDict[tuple[str, ...], ForecastState] = OrderedDict()

    def get(self, key: tuple[str, ...]) -> ForecastState | None:
        hit = self._items.get(key)
        if hit is not None:
            self._items.move_to_end(key)
        return hit

    def put(self, key: tuple[str, ...], value: ForecastState) -> None:
        self._items[key] = value
        self._items.move_to_end(key)
        while len(self._items) > self._size:
            self._items.popitem(last=False)


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
        try:
            state = ForecastState(series=parse_forecast(text, source=source, max_bytes=max_bytes))
        except InputError as e:
            state = ForecastState(reason=FORECAST_INVALID, message=str(e))
    if cache is not None and resource_version:
        cache.put(ck, state)
    return state
