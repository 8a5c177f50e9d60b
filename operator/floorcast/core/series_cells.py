"""Typed columns of the text formats: RFC 3339 times and load numbers, parsed
vectorized, each with the first bad cell and why.

Split from ``series_text`` (which uses them for values, bands and quantiles alike).
"""

from __future__ import annotations

import math
import re
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core.series import UNIT, Problem, _first, _load_problem

_TS = r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}:\d{2}(?:\.\d+)?(?:Z|[+-]\d{2}:\d{2})"
_TS_ONE, _TS_RUN = re.compile(_TS), re.compile(rf"(?:{_TS}\n)*{_TS}")  # run: one C-level pass
_NAIVE = re.compile(r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?")


def _times(raw: list[Any], name: str = "timestamp") -> tuple[np.ndarray, Problem]:
    """Vectorized RFC 3339 parse to UTC microseconds. The offset is mandatory: a bare
    local time cannot be placed on the timeline without guessing a zone."""
    empty = np.empty(0, dtype=np.int64)
    if not set(map(type, raw)) <= {str}:
        i = next(i for i, v in enumerate(raw) if type(v) is not str)
        return empty, (
            i,
            f"missing {name} (key 't')" if raw[i] is None else f"{name} {raw[i]!r} is not a string",
        )
    text = raw
    if not _TS_RUN.fullmatch("\n".join(text)):  # slow path only for unusual spellings
        text = [s.strip().upper() for s in raw]
        if not _TS_RUN.fullmatch("\n".join(text)):
            i = next(i for i, s in enumerate(text) if not _TS_ONE.fullmatch(s))
            if _NAIVE.fullmatch(text[i]):
                return empty, (
                    i,
                    f"{name} {raw[i]!r} has no UTC offset (ambiguous); "
                    "add 'Z' or an offset such as +02:00",
                )
            return empty, (i, f"{name} {raw[i]!r} is not an RFC 3339 timestamp")
    parsed = pd.to_datetime(text, format="ISO8601", utc=True, errors="coerce")
    i = _first(parsed.isna())
    if i >= 0:
        return empty, (i, f"{name} {raw[i]!r} is not a valid date and time")
    return parsed.as_unit(UNIT).asi8, None


def _numbers(raw: list[Any], name: str, from_text: bool) -> tuple[np.ndarray, Problem]:
    if from_text:
        arr = np.asarray(pd.to_numeric(raw, errors="coerce"), dtype=np.float64)
    else:  # JSON: real numbers only, not "1.5" or true, which numpy would coerce
        if not set(map(type, raw)) <= {int, float}:
            i = next(i for i, v in enumerate(raw) if type(v) not in (int, float))
            return np.empty(0), (
                i,
                f"missing {name}" if raw[i] is None else f"{name} {raw[i]!r} is not a number",
            )
        try:
            arr = np.array(raw, dtype=np.float64)
        except OverflowError:  # an integer beyond float range
            arr = np.array([v if abs(v) < 1e308 else math.inf for v in raw], dtype=np.float64)
    return arr, _load_problem(arr, raw, name, from_text)


