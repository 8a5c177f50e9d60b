"""Regular time series of load: the one validated shape every later stage can trust.

Planning, back-testing and the operator all assume a fixed step, finite non-negative
values and UTC times, so those guarantees are established once, here, and every
violation becomes a ``SeriesError`` naming the source, the row and the problem. This
module parses *text* only; reading files, ConfigMaps or HTTP bodies is the job of
``floorcast.sources``. Times are held at microsecond resolution, pandas' own default.
"""

from __future__ import annotations

import csv
import json
import math
import re
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from floorcast.durations import format_duration, parse_duration
from floorcast.errors import InputError

#: Longest hole in history that is filled (and flagged in ``filled``). Half an hour
#: covers a scraper restart or a short outage; across a longer hole we would be
#: inventing a peak or a trough, so that is an error the user must resolve.
DEFAULT_MAX_GAP = pd.Timedelta(minutes=30)
#: How far a timestamp may sit from the regular grid, as a fraction of the step.
DEFAULT_STEP_TOLERANCE = 0.1
#: Stops a tiny step across a long hole from turning a small file into gigabytes.
MAX_POINTS = 10_000_000
UNIT = "us"
_SEC, _MS = 1_000_000, 1_000
_TS = r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}:\d{2}(?:\.\d+)?(?:Z|[+-]\d{2}:\d{2})"
_TS_ONE, _TS_RUN = re.compile(_TS), re.compile(rf"(?:{_TS}\n)*{_TS}")  # run: one C-level pass
_NAIVE = re.compile(r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?")
_POINT_KEYS = frozenset({"t", "value", "lower", "upper"})
_TOP_KEYS = frozenset({"unit", "step", "generated", "points", "meta"})
_CORE, _BANDS = ["timestamp", "value"], ["lower", "upper"]
Problem = tuple[int, str] | None  # (index of the first bad sample, what is wrong)


class SeriesError(InputError):
    """Bad series input. ``kind`` says what ``row`` counts: a CSV ``row`` (file line,
    header = 1), a JSON ``point`` (0-based index into ``points``) or a JSON ``line``."""

    def __init__(self, message: str, *, source: str | None = None, row: int | None = None,
                 kind: str = "row"):
        super().__init__(message, source=source, row=row)
        self.kind = kind
        if kind != "row" and source and row is not None:
            self.args = (f"{source}, {kind} {row}: {message}",)


def _us(x: pd.Timestamp | pd.Timedelta) -> int:
    # ``.value`` is nanoseconds whatever the unit, so read the raw microsecond count.
    return int(x.as_unit(UNIT).asm8.view("int64"))


def _utc(ts: Any, what: str) -> pd.Timestamp:
    t = pd.Timestamp(ts)
    if t.tzinfo is None:
        raise ValueError(f"{what} {t} has no UTC offset; naive times are ambiguous")
    return t.tz_convert("UTC").as_unit(UNIT)


def _frozen(a: Any, dtype: Any = np.float64) -> np.ndarray | None:
    if a is None:
        return None
    out = np.array(a, dtype=dtype)  # a copy: the caller's array stays writeable
    out.flags.writeable = False
    return out


@dataclass(frozen=True, eq=False)
class Series:
    """A gap-free series on a regular UTC grid; arrays are read-only so slices can share them."""

    start: pd.Timestamp
    step: pd.Timedelta
    values: np.ndarray
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None
    unit: str | None = None
    generated: pd.Timestamp | None = None
    source: str = "<series>"
    filled: np.ndarray | None = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        # Code that builds a Series directly gets the parser's invariants too; a breach
        # here is a caller bug rather than a user's file, hence plain ValueErrors.
        put = object.__setattr__
        put(self, "start", _utc(self.start, "start"))
        put(self, "step", pd.Timedelta(self.step).as_unit(UNIT))
        if self.step <= pd.Timedelta(0):
            raise ValueError(f"step must be positive, got {self.step}")
        if self.generated is not None:
            put(self, "generated", _utc(self.generated, "generated"))
        for name in ("values", "lower", "upper", "filled"):
            put(self, name, _frozen(getattr(self, name), bool if name == "filled" else None))
            arr = getattr(self, name)
            if arr is not None and arr.shape != (len(self.values),):
                raise ValueError(f"{name} must be 1-D and as long as values")
        if (self.lower is None) != (self.upper is None):
            raise ValueError("lower and upper must be given together")
        for name in ("values", "lower", "upper"):
            arr = getattr(self, name)
            problem = None if arr is None else _load_problem(arr, arr, name, False)
            if problem:
                raise ValueError(f"{self.source}, sample {problem[0]}: {problem[1]}")
        problem = self.lower is not None and _bands(self.values, self.lower, self.upper)
        if problem:
            raise ValueError(f"{self.source}, sample {problem[0]}: {problem[1]}")
        put(self, "meta", dict(self.meta))

    def __len__(self) -> int:
        return len(self.values)

    def __eq__(self, other: object) -> bool:
        # Arrays make dataclass equality ambiguous; "no mask" counts as "nothing filled".
        if not isinstance(other, Series):
            return NotImplemented
        pairs = [(self.lower, other.lower), (self.upper, other.upper)]
        return (
            (self.start, self.step, self.unit, self.generated, self.meta)
            == (other.start, other.step, other.unit, other.generated, other.meta)
            and np.array_equal(self.values, other.values)
            and np.array_equal(self.filled_mask(), other.filled_mask())
            and all((a is None) == (b is None) and (a is None or np.array_equal(a, b))
                    for a, b in pairs)
        )

    __hash__ = None  # type: ignore[assignment]

    @property
    def times(self) -> pd.DatetimeIndex:
        us = _us(self.start) + np.arange(len(self), dtype=np.int64) * _us(self.step)
        return pd.DatetimeIndex(us.astype(f"datetime64[{UNIT}]")).tz_localize("UTC")

    @property
    def end(self) -> pd.Timestamp:
        if not len(self):
            raise ValueError(f"{self.source}: an empty series has no end")
        return self.start + self.step * (len(self) - 1)

    def filled_mask(self) -> np.ndarray:
        """Always an array, so callers need not special-case "nothing was filled"."""
        return self.filled if self.filled is not None else np.zeros(len(self), dtype=bool)

    def upper_or_value(self) -> np.ndarray:
        """Planning sizes for the pessimistic band whenever the forecaster gave one."""
        return self.upper if self.upper is not None else self.values

    def slice(self, start: Any = None, end: Any = None) -> Series:
        """Half-open ``[start, end)`` so consecutive windows never share a sample."""
        n = len(self)

        def index(t: Any, default: int) -> int:
            if t is None:
                return default
            return min(max(math.ceil((_utc(t, "slice bound") - self.start) / self.step), 0), n)

        i0 = index(start, 0)
        i1 = max(index(end, n), i0)
        cut = {k: None if (a := getattr(self, k)) is None else a[i0:i1]
               for k in ("values", "lower", "upper", "filled")}
        return replace(self, start=self.start + self.step * i0, **cut)


# ------------------------------------------------------------------------ grid and gaps


def fill_gaps(slots: np.ndarray, values: np.ndarray, how: str = "linear") -> np.ndarray:
    """Values for every slot ``0..slots[-1]`` from samples at sorted integer grid ``slots``;
    separate from validation so other adapters (e.g. a metrics API) can reuse it."""
    full = np.arange(int(slots[-1]) + 1)
    if how == "linear":
        return np.interp(full, slots, values)
    if how == "ffill":
        return np.asarray(values)[np.searchsorted(slots, full, side="right") - 1]
    raise InputError(f"gap fill must be 'linear' or 'ffill', got {how!r}")


def _iso(us: Any, step_us: int = 0) -> np.ndarray:
    """RFC 3339 with ``Z`` at the coarsest precision that loses nothing."""
    arr = np.atleast_1d(np.asarray(us, dtype=np.int64))
    unit = next((u for u, size in (("s", _SEC), ("ms", _MS))
                 if not (arr % size).any() and step_us % size == 0), "us")
    return np.datetime_as_string(arr.astype("datetime64[us]"), unit=unit, timezone="UTC")


def _dur(us: int) -> str:
    if us % _SEC == 0:
        return format_duration(pd.Timedelta(us, UNIT).to_pytimedelta())
    return f"{us // _MS}ms" if us % _MS == 0 else f"{us}us"


def _infer_step(t: np.ndarray, d: np.ndarray) -> int:
    # Spacings near the smallest one are the step (gaps are multiples of it), unless
    # they are too few to be the norm: one stray sample must not turn a 5-minute series
    # into a 10-second one, so then the median spacing is used. The slope over long
    # baselines (median, so a stray sample cannot tilt it) then averages jitter out.
    near = d[d < 1.5 * d.min()]
    k = np.round((t - t[0]) / float(np.median(near if 3 * len(near) >= len(d) else d)))
    h = max(len(t) // 2, 1)
    dk = k[h:] - k[:-h]
    slope = float(np.median((t[h:] - t[:-h])[dk > 0] / dk[dk > 0]))
    res = _SEC if slope >= _SEC else _MS if slope >= _MS else 1
    return max(round(slope / res) * res, 1)


def from_samples(times_us: np.ndarray, values: np.ndarray, *, source: str,
                 rows: np.ndarray | None = None, kind: str = "row",
                 lower: np.ndarray | None = None, upper: np.ndarray | None = None,
                 step: pd.Timedelta | None = None, max_gap: pd.Timedelta | None = DEFAULT_MAX_GAP,
                 gap_fill: str = "linear", step_tolerance: float = DEFAULT_STEP_TOLERANCE,
                 **fields: Any) -> Series:
    """Check order, grid and gaps of already-typed samples, fill short gaps and snap to
    the grid. ``rows`` label the samples in errors; ``max_gap=None`` fills any gap and
    ``pd.Timedelta(0)`` allows none. ``fields`` pass through to ``Series``."""
    if not 0 <= step_tolerance < 0.5:  # at 0.5 a sample could belong to two grid slots
        raise InputError(f"step tolerance must be in [0, 0.5), got {step_tolerance}")
    if gap_fill not in ("linear", "ffill"):
        raise InputError(f"gap fill must be 'linear' or 'ffill', got {gap_fill!r}")
    t = np.asarray(times_us, dtype=np.int64)
    n = len(t)
    labels = np.arange(n) if rows is None else np.asarray(rows)

    def iso(i: int) -> str:  # messages only, so formatted lazily
        return str(_iso(t[i])[0])

    def fail(i: int, msg: str) -> SeriesError:
        return SeriesError(msg, source=source, row=int(labels[i]), kind=kind)

    def other(i: int) -> str:
        return f"{kind} {int(labels[i])} ({iso(i)})"

    d = np.diff(t)
    if (d <= 0).any():
        i = int(np.argmax(d <= 0))
        if d[i] == 0:
            raise fail(i + 1, f"duplicate timestamp {iso(i + 1)} (same as {kind} {labels[i]})")
        raise fail(i + 1, f"timestamp {iso(i + 1)} is earlier than {other(i)}; "
                          "samples must be sorted by time")
    if step is None and n < 2:
        raise fail(0, "need at least two samples to infer the step")
    inferred = _infer_step(t, d) if n >= 2 else None
    step_us = inferred if step is None else _us(pd.Timedelta(step))
    tol = step_tolerance * step_us
    if step is not None and inferred is not None and abs(inferred - step_us) > tol:
        i = int(np.argmax(np.abs(d - step_us) > tol))
        raise fail(i + 1, f"declared step {_dur(step_us)!r} disagrees with the timestamps "
                          f"(typical spacing {_dur(inferred)}; {iso(i + 1)} is "
                          f"{_dur(int(d[i]))} after {other(i)})")
    # Fit the grid origin to all samples (median residual), not only the first one. Exact
    # data keeps it; jittered data snaps to an epoch-aligned grid (00:00, 00:05, ...), or
    # else to whole seconds, whichever fits first.
    fit = int(t[0])
    for _ in range(2):
        fit += int(np.median(t - fit - (t - fit + step_us // 2) // step_us * step_us))
    for origin, limit in ((fit, 0), (round(fit / step_us) * step_us, tol),
                          (round(fit / _SEC) * _SEC, tol), (fit, tol)):
        k = (t - origin + step_us // 2) // step_us
        resid = np.abs(t - origin - k * step_us)
        if not (resid > limit).any():
            break
    else:
        i = int(np.argmax(resid > tol))
        raise fail(i, f"irregular step: {iso(i)} is {resid[i] / _SEC:g}s off the regular "
                      f"{_dur(step_us)} grid (nearest slot {_iso(origin + k[i] * step_us)[0]}, "
                      f"tolerance {tol / _SEC:g}s)")
    dk = np.diff(k)
    if (dk == 0).any():
        i = int(np.argmax(dk == 0))
        raise fail(i + 1, f"timestamp {iso(i + 1)} falls in the same {_dur(step_us)} slot "
                          f"as {other(i)}")
    missing = dk - 1
    limit = None if max_gap is None else _us(pd.Timedelta(max_gap))
    if limit is not None and (missing * step_us > limit).any():
        i = int(np.argmax(missing * step_us > limit))
        why = "forecasts must be gap-free" if limit == 0 else f"over the max gap of {_dur(limit)}"
        raise fail(i + 1, f"gap of {_dur(int(missing[i]) * step_us)} ({missing[i]} missing "
                          f"samples at step {_dur(step_us)}) between {other(i)} and "
                          f"{other(i + 1)}; {why}")
    slots = k - k[0]
    if int(slots[-1]) + 1 > MAX_POINTS:
        raise fail(n - 1, f"the series would hold {int(slots[-1]) + 1} samples, over the "
                          f"limit of {MAX_POINTS}")
    filled = None
    if missing.any():
        values, lower, upper = (None if a is None else fill_gaps(slots, a, gap_fill)
                                for a in (values, lower, upper))
        filled = np.ones(len(values), dtype=bool)
        filled[slots] = False
    start = pd.Timestamp(origin + int(k[0]) * step_us, unit=UNIT, tz="UTC")
    return Series(start=start, step=pd.Timedelta(step_us, UNIT), values=values, lower=lower,
                  upper=upper, filled=filled, source=source, **fields)


# ------------------------------------------------------------------------ typed columns


def _first(mask: np.ndarray) -> int:
    return int(np.argmax(mask)) if mask.any() else -1


def _times(raw: list[Any], name: str = "timestamp") -> tuple[np.ndarray, Problem]:
    """Vectorized RFC 3339 parse to UTC microseconds. The offset is mandatory: a bare
    local time cannot be placed on the timeline without guessing a zone."""
    empty = np.empty(0, dtype=np.int64)
    if not set(map(type, raw)) <= {str}:
        i = next(i for i, v in enumerate(raw) if type(v) is not str)
        return empty, (i, f"missing {name} (key 't')" if raw[i] is None else
                       f"{name} {raw[i]!r} is not a string")
    text = raw
    if not _TS_RUN.fullmatch("\n".join(text)):  # slow path only for unusual spellings
        text = [s.strip().upper() for s in raw]
        if not _TS_RUN.fullmatch("\n".join(text)):
            i = next(i for i, s in enumerate(text) if not _TS_ONE.fullmatch(s))
            if _NAIVE.fullmatch(text[i]):
                return empty, (i, f"{name} {raw[i]!r} has no UTC offset (ambiguous); "
                                  "add 'Z' or an offset such as +02:00")
            return empty, (i, f"{name} {raw[i]!r} is not an RFC 3339 timestamp")
    parsed = pd.to_datetime(text, format="ISO8601", utc=True, errors="coerce")
    i = _first(parsed.isna())
    if i >= 0:
        return empty, (i, f"{name} {raw[i]!r} is not a valid date and time")
    return parsed.as_unit(UNIT).asi8, None


def _load_problem(arr: np.ndarray, raw: Any, name: str, from_text: bool) -> Problem:
    """The first sample that is not a finite, non-negative number, and why."""
    i = _first(~np.isfinite(arr) | (arr < 0))
    if i < 0:
        return None
    cell = raw[i].strip() if from_text else raw[i]
    if from_text and np.isnan(arr[i]) and cell.lstrip("+-").lower() != "nan":
        return i, f"{name} {cell!r} is not a number" if cell else f"missing {name}"
    if np.isnan(arr[i]):
        return i, f"{name} is NaN"
    if np.isinf(arr[i]):
        return i, f"{name} is infinite ({cell})"
    return i, f"{name} {cell} is negative (load cannot be below zero)"


def _numbers(raw: list[Any], name: str, from_text: bool) -> tuple[np.ndarray, Problem]:
    if from_text:
        arr = np.asarray(pd.to_numeric(raw, errors="coerce"), dtype=np.float64)
    else:  # JSON: real numbers only, not "1.5" or true, which numpy would coerce
        if not set(map(type, raw)) <= {int, float}:
            i = next(i for i, v in enumerate(raw) if type(v) not in (int, float))
            return np.empty(0), (i, f"missing {name}" if raw[i] is None else
                                 f"{name} {raw[i]!r} is not a number")
        try:
            arr = np.array(raw, dtype=np.float64)
        except OverflowError:  # an integer beyond float range
            arr = np.array([v if abs(v) < 1e308 else math.inf for v in raw], dtype=np.float64)
    return arr, _load_problem(arr, raw, name, from_text)


def _bands(values: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> Problem:
    lo, hi = _first(lower > values), _first(values > upper)
    if lo >= 0 and (hi < 0 or lo <= hi):
        return lo, f"lower bound {lower[lo]:g} is above the value {values[lo]:g}"
    return None if hi < 0 else (hi, f"value {values[hi]:g} is above the upper bound {upper[hi]:g}")


# ------------------------------------------------------------------------ text formats


def detect_format(text: str, source: str) -> str:
    """The extension wins (it is what the user chose); otherwise a document that starts
    with ``{`` or ``[`` is JSON and anything else is CSV."""
    ext = source.lower().rsplit(".", 1)[-1]
    if ext in ("csv", "json"):
        return ext
    return "json" if text.lstrip("\ufeff \t\r\n")[:1] in ("{", "[") else "csv"


def _header_problem(header: list[str], forecast: bool) -> str | None:
    if header == _CORE or (forecast and header == _CORE + _BANDS):
        return None
    names = _CORE + _BANDS if forecast else _CORE
    extra = [c for c in header if c not in names]
    missing = [c for c in _CORE if c not in header]
    why = ("missing header line" if re.match(r"\d{4}-", header[0])
           else f"unexpected column {extra[0]!r}" if extra
           else f"missing column {missing[0]!r}" if missing
           else "duplicate column" if len(set(header)) < len(header)
           else "'lower' and 'upper' must be given together" if len(header) == 3
           else "columns out of order")
    want = "timestamp,value[,lower,upper]" if forecast else "timestamp,value"
    return f"{why}; expected header {want!r}, found {','.join(header)!r}"


def _read_csv(text: str, source: str, forecast: bool) -> dict[str, Any]:
    text = text.replace("\r\n", "\n").rstrip()
    lines = text.split("\n")
    keep = [i for i, line in enumerate(lines) if line and not line.isspace()]  # skip blanks
    if not keep:
        raise SeriesError("empty input; expected the header 'timestamp,value'",
                          source=source, row=1)
    if '"' in text:  # quoted cells are rare: take the exact but slower csv module path
        try:
            table = list(csv.reader([lines[i] for i in keep]))
        except csv.Error as e:
            raise SeriesError(f"malformed CSV: {e}", source=source) from None
        header, body = table[0], table[1:]
        widths = np.array([len(r) for r in body])
    else:  # a plain split is much faster on 100k-row files
        header, body = lines[keep[0]].split(","), [lines[i] for i in keep[1:]]
        widths = np.array([r.count(",") for r in body]) + 1
    header = [c.strip() for c in header]
    problem = _header_problem(header, forecast)
    if problem:
        raise SeriesError(problem, source=source, row=keep[0] + 1)
    if not body:
        raise SeriesError("no data rows after the header", source=source, row=keep[0] + 2)
    width = len(header)
    i = _first(widths != width)
    if i >= 0:
        raise SeriesError(f"expected {width} columns ({','.join(header)}), found {widths[i]}",
                          source=source, row=keep[i + 1] + 1)
    flat = (",".join(body).split(",") if isinstance(body[0], str)
            else [cell for r in body for cell in r])
    cols = {name: flat[j::width] for j, name in enumerate(header)}
    return {"t": cols["timestamp"], "value": cols["value"], "lower": cols.get("lower"),
            "upper": cols.get("upper"), "rows": np.asarray(keep[1:]) + 1, "kind": "row",
            "text": True, "fields": {}, "step": None}


def _read_json(text: str, source: str) -> dict[str, Any]:
    def top(msg: str) -> SeriesError:
        return SeriesError(msg, source=source)

    def at(i: int, msg: str) -> SeriesError:
        return SeriesError(msg, source=source, row=i, kind="point")

    try:
        doc = json.loads(text)
    except json.JSONDecodeError as e:
        raise SeriesError(f"invalid JSON: {e.msg} (column {e.colno})", source=source,
                          row=e.lineno, kind="line") from None
    if not isinstance(doc, dict):
        raise top("expected a JSON object with a 'points' list")
    unknown = sorted(set(doc) - _TOP_KEYS)  # a typo such as "genrated" must not vanish
    if unknown:
        raise top(f"unknown field {unknown[0]!r}; allowed: {', '.join(sorted(_TOP_KEYS))}")
    points = doc.get("points")
    if not isinstance(points, list) or not points:
        raise top("'points' must be a non-empty list of {\"t\": ..., \"value\": ...} objects")
    meta = doc.get("meta")
    fields: dict[str, Any] = {"meta": {} if meta is None else meta, "unit": doc.get("unit")}
    if not isinstance(fields["meta"], dict):
        raise top("'meta' must be an object")
    if not isinstance(fields["unit"], str | None):
        raise top(f"'unit' must be a string, got {fields['unit']!r}")
    step = None
    if doc.get("step") is not None:
        try:
            step = pd.Timedelta(parse_duration(doc["step"], field="'step'"))
        except InputError as e:
            raise top(e.problem) from None
    if doc.get("generated") is not None:
        gen, problem = _times([doc["generated"]], "'generated'")
        if problem:
            raise top(problem[1])
        fields["generated"] = pd.Timestamp(int(gen[0]), unit=UNIT, tz="UTC")
    for i, p in enumerate(points):
        if type(p) is not dict:
            raise at(i, "point must be an object")
        if not p.keys() <= _POINT_KEYS:
            raise at(i, f"unknown key {sorted(p.keys() - _POINT_KEYS)[0]!r}; allowed: "
                        "t, value, lower, upper")
    lower, upper = [p.get("lower") for p in points], [p.get("upper") for p in points]
    has = np.array([(lo is not None) + (up is not None) for lo, up in zip(lower, upper,
                                                                           strict=True)])
    if has.any():
        i = _first(has < 2)
        if i >= 0:
            raise at(i, "'lower' and 'upper' must be given together, on every point or none")
    else:
        lower = upper = None
    return {"t": [p.get("t") for p in points], "value": [p.get("value") for p in points],
            "lower": lower, "upper": upper, "rows": np.arange(len(points)), "kind": "point",
            "text": False, "fields": fields, "step": step}


def _parse(text: str, source: str, fmt: str | None, max_bytes: int | None, *,
           forecast: bool, **grid: Any) -> Series:
    # Four bytes per character at most, so small texts skip the encode entirely.
    if max_bytes is not None and len(text) * 4 > max_bytes:
        size = len(text.encode("utf-8"))
        if size > max_bytes:
            raise SeriesError(f"input is {size} bytes, over the limit of {max_bytes} bytes "
                              f"({max_bytes / 2**20:g} MiB)", source=source)
    text = text.removeprefix("\ufeff")
    fmt = fmt or detect_format(text, source)
    if fmt not in ("csv", "json"):
        raise InputError(f"format must be 'csv' or 'json', got {fmt!r}", source=source)
    if fmt == "json" and not text.strip():
        raise SeriesError("empty input; expected a JSON object", source=source, row=1,
                          kind="line")
    raw = _read_csv(text, source, forecast) if fmt == "csv" else _read_json(text, source)
    times, problem = _times(raw["t"])
    found, cols = [problem], {}
    for name in ("value", "lower", "upper") if raw["lower"] is not None else ("value",):
        cols[name], problem = _numbers(raw[name], name, raw["text"])
        found.append(problem)
    if len(cols) == 3 and not any(found[1:]):  # band order only among valid numbers
        found.append(_bands(cols["value"], cols["lower"], cols["upper"]))
    found = [p for p in found if p is not None]
    if found:
        i, message = min(found, key=lambda p: p[0])  # report the earliest bad sample
        raise SeriesError(message, source=source, row=int(raw["rows"][i]), kind=raw["kind"])
    return from_samples(times, cols["value"], source=source, rows=raw["rows"],
                        kind=raw["kind"], lower=cols.get("lower"), upper=cols.get("upper"),
                        step=raw["step"], **grid, **raw["fields"])


def parse_history(text: str, *, source: str, fmt: str | None = None,
                  max_gap: pd.Timedelta | None = DEFAULT_MAX_GAP, gap_fill: str = "linear",
                  step_tolerance: float = DEFAULT_STEP_TOLERANCE,
                  max_bytes: int | None = None) -> Series:
    """Recorded load: CSV ``timestamp,value`` or the forecast JSON shape. Short gaps are
    filled (and flagged) because scrapes drop samples; long ones are the user's call."""
    return _parse(text, source, fmt, max_bytes, forecast=False, max_gap=max_gap,
                  gap_fill=gap_fill, step_tolerance=step_tolerance)


def parse_forecast(text: str, *, source: str, fmt: str | None = None,
                   max_bytes: int | None = None,
                   step_tolerance: float = DEFAULT_STEP_TOLERANCE) -> Series:
    """A stored forecast, which must be gap-free: a hole means a bug upstream, and
    filling it would have the operator act on numbers nobody predicted."""
    return _parse(text, source, fmt, max_bytes, forecast=True, max_gap=pd.Timedelta(0),
                  step_tolerance=step_tolerance)


def _columns(series: Series) -> list[list[str]]:
    cols = [_iso(series.times.asi8, _us(series.step)).tolist()]
    for a in (series.values, series.lower, series.upper):
        if a is not None:
            cols.append(list(map(repr, a.tolist())))  # shortest text that round-trips
    return cols


def to_csv_text(series: Series) -> str:
    """CSV drops unit, generated and meta by design; JSON keeps them."""
    cols = _columns(series)
    header = ",".join((_CORE + _BANDS)[: len(cols)])
    return "\n".join([header, *map(",".join, zip(*cols, strict=True))]) + "\n"


def to_json_text(series: Series) -> str:
    """One point per line, so stored forecasts diff and page readably."""
    head: dict[str, Any] = {"unit": series.unit, "step": _dur(_us(series.step))}
    if series.generated is not None:
        head["generated"] = str(_iso(_us(series.generated))[0])
    if series.meta:
        head["meta"] = series.meta
    cols = _columns(series)
    keys = ["value", "lower", "upper"][: len(cols) - 1]
    row = '    {"t": "%s", ' + ", ".join(f'"{k}": %s' for k in keys) + "}"
    points = ",\n".join(row % r for r in zip(*cols, strict=True))

    def plain(v: Any) -> Any:  # numpy scalars and arrays often end up in meta
        return v.tolist() if isinstance(v, np.ndarray | np.generic) else str(v)

    lines = [f'  "{k}": {json.dumps(v, default=plain)},' for k, v in head.items()]
    return "{\n" + "\n".join(lines) + '\n  "points": [\n' + points + "\n  ]\n}\n"


# ------------------------------------------------------------------------ resampling


def resample(series: Series, step: pd.Timedelta, how: str = "mean") -> Series:
    """Change the step on an epoch-aligned grid (as pandas' ``origin="epoch"``).
    Downsampling aggregates each bin (``mean`` or ``max``) and labels it by its left
    edge; upsampling, or ``how="interpolate"``, reads the straight line between
    neighbours. A new sample is flagged filled if any sample it came from was."""
    if how not in ("mean", "max", "interpolate"):
        raise InputError(f"resample method must be mean, max or interpolate, got {how!r}")
    new, old = _us(pd.Timedelta(step)), _us(series.step)
    if new <= 0:
        raise InputError(f"resample step must be positive, got {step}")
    if new == old or not len(series):
        return series
    t, filled = series.times.asi8, series.filled_mask()
    arrays = (series.values, series.lower, series.upper)
    if new > old and how != "interpolate":
        bins = t // new
        starts = np.flatnonzero(np.r_[True, bins[1:] != bins[:-1]])
        if how == "mean":
            counts = np.diff(np.r_[starts, len(t)])
            out = [None if a is None else np.add.reduceat(a, starts) / counts for a in arrays]
        else:
            out = [None if a is None else np.maximum.reduceat(a, starts) for a in arrays]
        first, mask = int(bins[0]) * new, np.logical_or.reduceat(filled, starts)
    else:
        first = -(-int(t[0]) // new) * new
        grid = first + np.arange(max((int(t[-1]) - first) // new + 1, 0)) * new
        out = [None if a is None else np.interp(grid, t, a) for a in arrays]
        left = np.clip(np.searchsorted(t, grid, side="right") - 1, 0, len(t) - 1)
        mask = filled[left] | ((grid != t[left]) & filled[np.minimum(left + 1, len(t) - 1)])
    return replace(series, start=pd.Timestamp(first, unit=UNIT, tz="UTC"),
                   step=pd.Timedelta(new, UNIT), values=out[0], lower=out[1], upper=out[2],
                   filled=mask if mask.any() else None)
